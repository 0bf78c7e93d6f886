"""Generated, mutated and hostile JCAMP-DX and CSV input: every failure is an InputFileError.

Valid files come from this package's writers on small invented spectra/FIDs; Hypothesis
then truncates them, flips bytes, deletes or repeats lines, changes declared counts,
inserts NaN/inf and garbage.  Reading must either succeed (a valid record) or raise
InputFileError with a deliberate message — never another exception, never a hang (each
example has a deadline far above the few milliseconds a small file takes).

A hostile corpus built here (many blocks, tiny files that declare millions of points,
damaged SQZ/DIF/DUP tokens, lost pages, impossible dates, huge delimited headers) checks
the bounds the readers promise: memory (tracemalloc peak) within a small multiple of the
file size plus a constant, and work linear in the file size — counted as Python function
calls (deterministic, unlike wall time on a shared machine) for files of N and 4N blocks.
"""

from __future__ import annotations

import os
import re
import sys
import tempfile
import tracemalloc
from datetime import timedelta

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from kinetics.errors import InputFileError
from kinetics.spectra import Fid, Spectrum
from kinetics.spectra.arrayed import Trace, parse_traces, read_traces
from kinetics.spectra.arrayed_writers import arrayed_text, matrix_text
from kinetics.spectra.delimited import csv_text
from kinetics.spectra.jcampdx import fid_text, spectrum_text
from kinetics.spectra.reader import parse_loaded, read
from kinetics.spectra.text import LoadedText

FUZZ = settings(max_examples=300, deadline=timedelta(seconds=5), derandomize=True,
                suppress_health_check=[HealthCheck.too_slow])


def _record(seed: int, n: int, kind: str):
    rng = np.random.default_rng(seed)
    if kind == "fid":
        t = np.arange(n) * 1e-3
        return Fid(data=1e4 * np.exp((2j * np.pi * 40 - 8) * t) + rng.normal(0, 5, n), dwell_s=1e-3,
                   observe_mhz=60.0, carrier_ppm=4.0, n_scans=4)
    ppm = np.linspace(9.0, 0.0, n)
    real = 1e3 / (1 + ((ppm - 4.5) / 0.05) ** 2) + rng.normal(0, 3, n)
    return Spectrum(ppm=ppm, real=real, imag=rng.normal(0, 3, n) if kind == "ntuples" else None,
                    observe_mhz=60.0, n_scans=4, header={"TITLE": "fuzz"})


@st.composite
def documents(draw):
    kind = draw(st.sampled_from(["xydata", "ntuples", "fid", "csv"]))
    record = _record(draw(st.integers(0, 2**16)), draw(st.integers(4, 120)), kind)
    if kind == "csv":
        # As written, tab-separated, or semicolon-separated with decimal commas (the
        # spreadsheet export of comma-decimal locales).
        variant = draw(st.sampled_from([",", "\t", ";"]))
        lines = csv_text(record).splitlines()
        if variant == "\t":
            lines = [line if line.startswith("#") else line.replace(",", "\t") for line in lines]
        elif variant == ";":
            lines = [line if line.startswith("#") else line.replace(",", ";").replace(".", ",") for line in lines]
        return ("\n".join(lines) + "\n").encode()
    compression = draw(st.sampled_from(["affn", "dif"]))
    text = fid_text(record, compression) if kind == "fid" else spectrum_text(record, compression)
    return text.encode()


def _mutate(draw, raw: bytes) -> bytes:
    lines = raw.split(b"\n")
    choice = draw(st.sampled_from(["truncate", "flip", "delete", "repeat", "count", "nan", "garbage", "line"]))
    if choice == "truncate":
        return raw[: draw(st.integers(0, len(raw) - 1))]
    if choice == "flip":
        data = bytearray(raw)
        for _ in range(draw(st.integers(1, 4))):
            position = draw(st.integers(0, len(data) - 1))
            data[position] ^= draw(st.integers(1, 255))
        return bytes(data)
    if choice in ("delete", "repeat"):
        index = draw(st.integers(0, len(lines) - 1))
        extra = [] if choice == "delete" else [lines[index]]
        return b"\n".join(lines[:index] + extra + lines[index + 1:])
    if choice == "count":
        value = draw(st.sampled_from([b"0", b"1", b"3", b"-5", b"1e30", b"99999999999", b"2.5", b"x"]))
        return re.sub(rb"(##(?:NPOINTS|VAR_DIM)=\s*)\d+", lambda m: m.group(1) + value, raw, count=1)
    if choice == "nan":
        token = draw(st.sampled_from([b"nan", b"NaN", b"inf", b"-inf", b"1e999"]))
        index = draw(st.integers(0, len(lines) - 1))
        position = draw(st.integers(0, len(lines[index])))
        lines[index] = lines[index][:position] + token + lines[index][position:]
        return b"\n".join(lines)
    if choice == "garbage":
        junk = draw(st.binary(min_size=1, max_size=40))
        position = draw(st.integers(0, len(raw)))
        return raw[:position] + junk + raw[position:]
    index = draw(st.integers(0, len(lines) - 1))
    lines[index] = draw(st.text(max_size=60)).encode("utf-8", "replace")
    return b"\n".join(lines)


@st.composite
def mutated_documents(draw):
    raw = draw(documents())
    for _ in range(draw(st.integers(1, 3))):
        if raw:
            raw = _mutate(draw, raw)
    return raw


def _read_bytes(raw: bytes, suffix: str = ".dx"):
    handle, name = tempfile.mkstemp(suffix=suffix)
    try:
        with os.fdopen(handle, "wb") as stream:
            stream.write(raw)
        return read(name)
    finally:
        os.unlink(name)


def _check(raw: bytes) -> None:
    try:
        record = _read_bytes(raw)
    except InputFileError as error:
        # A deliberate check, not the safety net, must have caught it.
        assert not error.problem.startswith("unexpected"), error
        assert error.path and error.problem
        return
    assert isinstance(record, (Spectrum, Fid))
    assert record.n_points >= 2


@FUZZ
@given(documents())
def test_generated_documents_read(raw):
    record = _read_bytes(raw)
    assert isinstance(record, (Spectrum, Fid))


@FUZZ
@given(mutated_documents())
def test_mutated_documents_fail_only_with_input_file_error(raw):
    _check(raw)


@settings(max_examples=60, deadline=timedelta(seconds=5), derandomize=True)
@given(st.one_of(st.binary(max_size=300), st.text(max_size=300).map(lambda t: t.encode("utf-8")),
                 st.text(alphabet="#=0123456789.,-+ \n@ABJKjkSTXYZ%abcdeNPOINTS", max_size=300)
                 .map(lambda t: ("##TITLE= x\n" + t).encode())))
def test_arbitrary_bytes_fail_only_with_input_file_error(raw):
    _check(raw)


def _data_tables(raw: bytes):
    """(line number, text) lists of every data table in a JCAMP-DX text, or []."""
    from kinetics.spectra import jcampdx
    from kinetics.spectra.text import LoadedText

    try:
        blocks = jcampdx._split_blocks(LoadedText("fuzz", "", raw.decode("latin-1")))
    except InputFileError:
        return []
    return [record.data for block in blocks for record in block.records
            if record.key in ("XYDATA", "DATATABLE") and record.data]


@FUZZ
@given(st.one_of(documents(), mutated_documents()))
def test_vectorised_asdf_decoder_matches_the_line_by_line_one(raw):
    # The numpy fast path must give exactly what the line-by-line decoder gives, or decline.
    from kinetics.spectra import asdf

    # Also in chunks of a few lines: a chunk may start with the y-check of the previous one.
    chunk_chars = asdf._CHUNK_CHARS
    try:
        for lines in _data_tables(raw):
            for asdf._CHUNK_CHARS in (chunk_chars, 160, 1):
                fast = asdf.decode_asdf_fast(lines)
                if fast is None:
                    continue
                slow = asdf.decode_asdf("fuzz", lines)
                np.testing.assert_array_equal(fast.values, slow.values)
                assert fast.line_x == slow.line_x
    finally:
        asdf._CHUNK_CHARS = chunk_chars



# ============================================================ hostile corpus
def _spectrum_doc(seed: int, n: int, imag: bool, compression: str) -> str:
    return spectrum_text(_record(seed, n, "ntuples" if imag else "xydata"), compression)


def _many_blocks(n: int, kind: str) -> str:
    if kind == "empty":  # ##TITLE=...##END= blocks without data
        return "".join(f"##TITLE= block {i}\n##END=\n" for i in range(n))
    if kind == "spectra":  # n complete spectra: which one to read is unclear
        return _spectrum_doc(1, 8, False, "affn") * n
    if kind == "types":  # n data blocks of n different unsupported types
        one = _spectrum_doc(1, 8, False, "affn")
        return "".join(one.replace("NMR SPECTRUM", f"UV SPECTRUM {i}") for i in range(n))
    if kind == "labels":  # one block with n user labels
        body = "".join(f"##$LABEL {i}= {i}\n" for i in range(n))
        return _spectrum_doc(1, 8, False, "affn").replace("##END=", body + "##END=")
    if kind == "lines":  # one table of n AFFN lines (n points declared)
        lines = "".join(f"{n - i} {i % 97}\n" for i in range(n))
        return ("##TITLE= t\n##DATA TYPE= NMR SPECTRUM\n##.OBSERVE FREQUENCY= 60\n##XUNITS= HZ\n"
                f"##FIRSTX= {n}\n##LASTX= 1\n##NPOINTS= {n}\n##XYDATA= (X++(Y..Y))\n{lines}##END=\n")
    if kind == "csv":  # n delimited rows
        return "# observe_mhz: 60\nppm,real\n" + "".join(f"{n - i},{i % 7}\n" for i in range(n))
    if kind == "csv-meta":  # n metadata lines, then a short table
        return "".join(f"# key{i}: {i}\n" for i in range(n)) + "# observe_mhz: 60\n1,2\n0,3\n"
    raise ValueError(kind)


_BLOCK_KINDS = ["empty", "spectra", "types", "labels", "lines", "csv", "csv-meta"]


def _claims(draw) -> str:
    """A tiny file whose header declares far more points than its bytes can hold."""
    n = draw(st.sampled_from([70_000, 2**20, 2**24, 2**24 + 1, 10**12]))
    dup = draw(st.sampled_from(["S6777215", "s6777215", "Z", "s" + "9" * 11, "S" * 50]))
    if draw(st.booleans()):
        return ("##TITLE= t\n##DATA TYPE= NMR SPECTRUM\n##.OBSERVE FREQUENCY= 60\n##XUNITS= HZ\n"
                f"##FIRSTX= 600\n##LASTX= 0\n##NPOINTS= {n}\n##XYDATA= (X++(Y..Y))\n600@%{dup}\n##END=\n")
    return ("##TITLE= t\n##DATA TYPE= NMR FID\n##.OBSERVE FREQUENCY= 60\n##NTUPLES= NMR FID\n##SYMBOL= X, R, I\n"
            f"##VAR_DIM= {n}, {n}, {n}\n##UNITS= SECONDS, A, A\n##FIRST= 0, 0, 0\n##LAST= 1, 0, 0\n"
            f"##PAGE= N=1\n##DATA TABLE= (X++(R..R)), XYDATA\n0@%{dup}\n"
            f"##PAGE= N=2\n##DATA TABLE= (X++(I..I)), XYDATA\n0@%{dup}\n##END NTUPLES= x\n##END=\n")


_PSEUDO = re.compile(r"[@A-Ia-i%J-Rj-rS-Zs][0-9]+")


def _damaged_asdf(draw) -> str:
    """A DIF spectrum with one compressed token damaged: a decimal point, a lost digit, a
    changed pseudo-digit, a DUP where none may stand."""
    text = _spectrum_doc(draw(st.integers(0, 999)), draw(st.integers(16, 200)), draw(st.booleans()), "dif")
    head, _, table = text.partition("(X++(")
    tokens = list(_PSEUDO.finditer(table))
    match = tokens[draw(st.integers(0, len(tokens) - 1))]
    token = match.group(0)
    how = draw(st.sampled_from(["dot", "drop", "pseudo", "dup", "exponent"]))
    if how == "dot":
        cut = draw(st.integers(1, len(token)))
        token = token[:cut] + "." + token[cut:]
    elif how == "drop":
        token = token[:-1] if len(token) > 1 else "%"
    elif how == "pseudo":
        token = draw(st.sampled_from("@ABIabi%JKRjkrSTs")) + token[1:]
    elif how == "dup":
        token = "S2" + token
    else:
        token = token + "E5"
    return head + "(X++(" + table[:match.start()] + token + table[match.end():]


def _lost_page(draw) -> str:
    text = _spectrum_doc(draw(st.integers(0, 999)), draw(st.integers(8, 64)), True,
                         draw(st.sampled_from(["dif", "affn"])))
    how = draw(st.sampled_from(["table I", "table R", "page", "both I", "symbol"]))
    if how == "table I":
        return text.replace("##DATA TABLE= (X++(I..I)), XYDATA\n", "")
    if how == "table R":
        return text.replace("##DATA TABLE= (X++(R..R)), XYDATA\n", "")
    if how == "page":
        return text.replace("##PAGE= N=2\n", "")
    if how == "both I":
        return text.replace("##PAGE= N=2\n##DATA TABLE= (X++(I..I)), XYDATA\n", "")
    return text.replace("##SYMBOL= X, R, I", "##SYMBOL= X, R")


_DATES = ["0001/01/01 00:00:00+0100", "9999/12/31 23:59:59-0100", "0001/01/01", "9999/12/31",
          "0000/01/01", "2026/02/30 10:00:00", "2026/13/01", "2026/01/01 25:00:00", "2026/01/01 10:61",
          "2026/01/01 10:00:00+9900", "2026/01/01 10:00:00+1500", "99999999999999999999/01/01",
          "1900/01/01", "2201/01/01", "٢٠٢٦/01/01", "2026/01/01 10:00:00." + "9" * 100, "2026-01-01T10:00:00Z",
          "25/01/2026", "", "2026/01/01 " + " " * 500 + "x"]


def _odd_date(draw) -> str:
    text = _spectrum_doc(draw(st.integers(0, 999)), 16, False, "affn")
    value = draw(st.sampled_from(_DATES))
    label = draw(st.sampled_from(["LONG DATE", "LONGDATE", "DATE"]))
    extra = "##TIME= 99:99:99\n" if label == "DATE" and draw(st.booleans()) else ""
    return text.replace("##JCAMP-DX= 5.01\n", f"##JCAMP-DX= 5.01\n##{label}= {value}\n{extra}")


@st.composite
def hostile_documents(draw) -> bytes:
    family = draw(st.sampled_from(["blocks", "claims", "asdf", "pages", "dates"]))
    if family == "blocks":
        text = _many_blocks(draw(st.integers(2, 400)), draw(st.sampled_from(_BLOCK_KINDS)))
    elif family == "claims":
        text = _claims(draw)
    elif family == "asdf":
        text = _damaged_asdf(draw)
    elif family == "pages":
        text = _lost_page(draw)
    else:
        text = _odd_date(draw)
    return text.encode("utf-8")


#: Memory a read may take: this multiple of the file size plus a constant (the point
#: budget lets any file hold 65536 points, a few MB of arrays; measured peaks are ~9x the
#: size for large files, ~45x for 300 kB ones, where the constant dominates).
MEMORY_PER_BYTE = 64
MEMORY_CONSTANT_BYTES = 16 * 1024 * 1024


def _peak_bytes(raw: bytes) -> tuple[int, BaseException | None]:
    loaded = LoadedText("hostile", "", raw.decode("utf-8"))
    tracemalloc.start()
    try:
        parse_loaded(loaded)
        error = None
    except Exception as caught:  # judged by the caller
        error = caught
    finally:
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
    return peak, error


@settings(max_examples=600, deadline=timedelta(seconds=20), derandomize=True,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(hostile_documents())
def test_hostile_documents_fail_cleanly_within_bounded_memory(raw):
    # Every read ends in a record or a deliberate InputFileError whose message stays one
    # short line (a few places named, never every block), within bounded memory.
    peak, error = _peak_bytes(raw)
    if error is not None:
        assert isinstance(error, InputFileError), repr(error)
        assert not error.problem.startswith("unexpected"), error
        assert len(str(error)) < 400, str(error)[:400]
    assert peak <= MEMORY_PER_BYTE * len(raw) + MEMORY_CONSTANT_BYTES, (peak, len(raw))


@pytest.mark.parametrize("text, problem", [
    (_many_blocks(4000, "spectra"), "data blocks of one kind"),
    (_many_blocks(4000, "empty"), "no ##XYDATA="),
    (_many_blocks(300, "types"), "unsupported ##DATA TYPE="),
])
def test_many_blocks_give_one_short_error(text, problem):
    with pytest.raises(InputFileError, match=re.escape(problem)) as caught:
        parse_loaded(LoadedText("hostile", "", text))
    assert len(str(caught.value)) < 400


def test_tiny_file_claiming_gigabytes_is_refused_before_allocation():
    # 2**24 points declared and one DUP count that would expand to all of them.
    text = ("##TITLE= t\n##DATA TYPE= NMR SPECTRUM\n##.OBSERVE FREQUENCY= 60\n##XUNITS= HZ\n"
            "##FIRSTX= 600\n##LASTX= 0\n##NPOINTS= 16777216\n##XYDATA= (X++(Y..Y))\n600@%S6777215\n##END=\n")
    peak, error = _peak_bytes(text.encode())
    assert isinstance(error, InputFileError) and error.line == 7 and "declares" in error.problem
    assert peak < 1024 * 1024


def test_sqz_token_with_a_decimal_point_is_an_error_naming_its_line():
    text = _spectrum_doc(3, 64, False, "dif")
    lines = text.split("\n")
    index = next(i for i, line in enumerate(lines) if not line.startswith("##") and _PSEUDO.search(line[6:]))
    token = _PSEUDO.search(lines[index], 6)
    assert len(token.group(0)) >= 3
    lines[index] = lines[index][:token.start() + 2] + "." + lines[index][token.start() + 2:]
    with pytest.raises(InputFileError, match="decimal point") as caught:
        parse_loaded(LoadedText("hostile", "", "\n".join(lines)))
    assert caught.value.line == index + 1


def test_missing_data_table_line_is_an_error_not_a_dropped_imaginary_part():
    text = _spectrum_doc(4, 64, True, "dif")
    line = text.split("\n").index("##PAGE= N=2") + 1
    with pytest.raises(InputFileError, match="no ##DATA TABLE=") as caught:
        parse_loaded(LoadedText("hostile", "", text.replace("##DATA TABLE= (X++(I..I)), XYDATA\n", "")))
    assert caught.value.line == line
    # The whole I page gone while ##SYMBOL= still declares I: refused, not read as real only.
    without_page = text[:text.index("##PAGE= N=2")] + text[text.index("##END NTUPLES"):]
    with pytest.raises(InputFileError, match="no I page"):
        parse_loaded(LoadedText("hostile", "", without_page))


@pytest.mark.parametrize("value", ["0001/01/01 00:00:00+0100", "9999/12/31 23:59:59-0100", "0001/01/01",
                                   "9999/12/31 10:00:00+0000", "99999999999999999999/01/01", "2026/02/30"])
def test_every_long_date_failure_names_its_line(value):
    text = _spectrum_doc(5, 16, False, "affn").replace("##JCAMP-DX= 5.01\n",
                                                        f"##JCAMP-DX= 5.01\n##LONG DATE= {value}\n")
    with pytest.raises(InputFileError) as caught:
        parse_loaded(LoadedText("hostile", "", text))
    assert caught.value.line == 3 and not caught.value.problem.startswith("unexpected")


def _python_calls(text: str) -> int:
    """Python and C function calls made while parsing ``text`` (deterministic work count)."""
    loaded = LoadedText("hostile", "", text)
    calls = 0

    def count(frame, event, arg):
        nonlocal calls
        if event in ("call", "c_call"):
            calls += 1

    sys.setprofile(count)
    try:
        parse_loaded(loaded)
    except InputFileError:
        pass
    finally:
        sys.setprofile(None)
    return calls


@pytest.mark.parametrize("kind", _BLOCK_KINDS)
def test_reading_work_is_linear_in_the_number_of_blocks(kind):
    # Work for 4N blocks (or labels, lines, rows) must be about 4x the work for N: a search
    # of a list by equality (the old block selection) made it grow as N**2 (16x here).
    n = 500
    small, large = _python_calls(_many_blocks(n, kind)), _python_calls(_many_blocks(4 * n, kind))
    assert large <= 4.4 * small, (kind, small, large)


# ============================================================ arrayed files (a whole series in one file)
ARRAYED_FUZZ = settings(max_examples=60, deadline=timedelta(seconds=5), derandomize=True,
                        suppress_health_check=[HealthCheck.too_slow])


@st.composite
def arrayed_documents(draw) -> tuple[bytes, int]:
    """(file bytes, number of traces): link files, NTUPLES page series, matrix tables."""
    form = draw(st.sampled_from(["link", "ntuples", "matrix"]))
    kind = "xydata" if form == "matrix" else draw(st.sampled_from(["xydata", "ntuples", "fid"]))
    n_traces, n = draw(st.integers(1, 4)), draw(st.integers(4, 60))
    seed = draw(st.integers(0, 2**16))
    records = [_record(seed + index, n, kind) for index in range(n_traces)]
    times = [60.0 * index + draw(st.floats(0, 30, allow_nan=False)) for index in range(n_traces)]
    if form == "matrix":
        text = matrix_text(records, times, delimiter=draw(st.sampled_from([",", "\t", ";"])))
    else:
        text = arrayed_text(records, draw(st.sampled_from([times, None])), form=form,
                            compression=draw(st.sampled_from(["affn", "dif"])))
    return text.encode(), n_traces


def _read_traces_bytes(raw: bytes):
    handle, name = tempfile.mkstemp(suffix=".dx")
    try:
        with os.fdopen(handle, "wb") as stream:
            stream.write(raw)
        return read_traces(name)
    finally:
        os.unlink(name)


def _check_traces(traces) -> None:
    assert [trace.block for trace in traces] == sorted({trace.block for trace in traces})
    for trace in traces:
        assert isinstance(trace, Trace) and isinstance(trace.record, (Spectrum, Fid))
        assert trace.record.n_points >= 2 and trace.record.sha256 == trace.digest and len(trace.digest) == 64


@ARRAYED_FUZZ
@given(arrayed_documents())
def test_generated_arrayed_documents_read(document):
    raw, n_traces = document
    traces = _read_traces_bytes(raw)
    _check_traces(traces)
    assert len(traces) == n_traces


@ARRAYED_FUZZ
@given(arrayed_documents().flatmap(lambda document: st.tuples(st.just(document[0]),
                                                               st.integers(1, 3))), st.data())
def test_mutated_arrayed_documents_fail_only_with_input_file_error(document, data):
    raw, rounds = document
    for _ in range(rounds):
        if raw:
            raw = _mutate(data.draw, raw)
    try:
        traces = _read_traces_bytes(raw)
    except InputFileError as error:
        assert not error.problem.startswith("unexpected"), error
        assert error.path and error.problem and len(str(error)) < 400
        return
    _check_traces(traces)


@ARRAYED_FUZZ
@given(arrayed_documents(), st.data())
def test_growing_arrayed_file_gives_a_prefix_of_the_complete_traces(document, data):
    # A JCAMP-DX series cut anywhere (as a spectrometer still writing it leaves it): never an
    # error, and the traces read are the first ones of the complete file, byte for byte.
    raw, _ = document
    if not raw.startswith(b"##"):
        return  # matrix tables are written whole, not appended
    complete = parse_traces(LoadedText("fuzz", "", raw.decode()))
    position = data.draw(st.integers(2, len(raw)))
    prefix = parse_traces(LoadedText("fuzz", "", raw[:position].decode()))
    assert [trace.digest for trace in prefix] == [trace.digest for trace in complete[:len(prefix)]]


def _calls(parser, text: str) -> int:
    """Function calls made while ``parser`` reads ``text`` (deterministic work count)."""
    loaded = LoadedText("hostile", "", text)
    calls = 0

    def count(frame, event, arg):
        nonlocal calls
        if event in ("call", "c_call"):
            calls += 1

    sys.setprofile(count)
    try:
        parser(loaded)
    except InputFileError:
        pass
    finally:
        sys.setprofile(None)
    return calls


@pytest.mark.parametrize("form", ["link", "ntuples", "matrix"])
def test_arrayed_reading_work_is_linear_in_the_number_of_traces(form):
    # A growing file is read again and again: reading N and 4N traces must cost ~1:4.
    def text(n_traces: int) -> str:
        records = [_record(index, 16, "xydata") for index in range(n_traces)]
        times = [60.0 * index for index in range(n_traces)]
        if form == "matrix":
            return matrix_text(records, times)
        return arrayed_text(records, times, form=form, compression="affn")

    n = 60
    small, large = _calls(parse_traces, text(n)), _calls(parse_traces, text(4 * n))
    assert large <= 4.4 * small, (form, small, large)


ARRAYED_MEMORY_PER_BYTE = 128


def _hostile_arrayed(kind: str) -> str:
    link = "##TITLE= s\n##JCAMP-DX= 5.01\n##DATA TYPE= LINK\n##BLOCKS= {n}\n{blocks}##END=\n"
    block = ("##TITLE= b\n##JCAMP-DX= 5.01\n##DATA TYPE= NMR SPECTRUM\n##BLOCK_ID= {i}\n##.OBSERVE FREQUENCY= 60\n"
             "##XUNITS= HZ\n##FIRSTX= 600\n##LASTX= 0\n##NPOINTS= {n}\n##XYDATA= (X++(Y..Y))\n600@%{dup}\n##END=\n")
    if kind == "claims":  # one block declares 2**24 points in one DUP run
        return link.format(n=2, blocks=block.format(i=1, n=8, dup="Y") + block.format(i=2, n=2**24, dup="S6777215"))
    if kind == "budget":  # 4000 blocks, each under the free points, together far over the budget
        return link.format(n=4000, blocks="".join(block.format(i=i, n=60000, dup="W9999") for i in range(4000)))
    if kind == "same-id":  # 4000 blocks with one BLOCK_ID
        return link.format(n=4000, blocks=block.format(i=1, n=8, dup="Y") * 4000)
    if kind == "count":  # ##BLOCKS= far from the blocks present, file complete
        return link.format(n=10**12, blocks="".join(block.format(i=i, n=8, dup="Y") for i in range(3)))
    if kind == "pages":  # 4000 R pages of an NTUPLES with a time variable, each claiming 2**20 points
        pages = "".join(f"##PAGE= T={i}\n##DATA TABLE= (X++(R..R)), XYDATA\n0@%S6777\n" for i in range(4000))
        return ("##TITLE= t\n##DATA TYPE= NMR SPECTRUM\n##.OBSERVE FREQUENCY= 60\n##NTUPLES= NMR SPECTRUM\n"
                "##SYMBOL= T, X, R\n##VAR_DIM= 4000, 1048576, 1048576\n##UNITS= SECONDS, HZ, A\n"
                f"##FIRST= 0, 600, 0\n##LAST= 3999, 0, 0\n{pages}##END NTUPLES= x\n##END=\n")
    if kind == "lost-i":  # 4000 traces whose I pages are all missing
        pages = "".join(f"##PAGE= T={i}\n##DATA TABLE= (X++(R..R)), XYDATA\n0 1 2\n" for i in range(4000))
        return ("##TITLE= t\n##DATA TYPE= NMR SPECTRUM\n##.OBSERVE FREQUENCY= 60\n##NTUPLES= NMR SPECTRUM\n"
                "##SYMBOL= T, X, R, I\n##VAR_DIM= 4000, 2, 2, 2\n##UNITS= SECONDS, HZ, A, A\n"
                f"##FIRST= 0, 1, 0, 0\n##LAST= 3999, 0, 0, 0\n{pages}##END NTUPLES= x\n##END=\n")
    if kind == "matrix-wide":  # a header row of 200000 times over two short rows
        return ("# observe_mhz: 60\nppm," + ",".join(str(i) for i in range(200000)) + "\n"
                + "1," + ",".join("0" for _ in range(200000)) + "\n0,1\n")
    raise ValueError(kind)


@pytest.mark.parametrize("kind, problem", [
    ("claims", "declares 16777216 points in all, more than a file of this size"),
    ("budget", "more than a file of this size can hold"), ("same-id", "repeats the block"),
    ("count", "declares 1000000000000 blocks"), ("pages", "more than a file of this size can hold"),
    ("lost-i", "this trace has no I page"), ("matrix-wide", "the header row 200001"),
])
def test_hostile_arrayed_files_fail_cleanly_within_bounded_memory(kind, problem):
    # Bound: the point budget (4 points a byte) over all traces together, and every trace
    # keeps its own record (axis and ordinates, 16-24 bytes a point): ARRAYED_MEMORY_PER_BYTE
    # per byte of file plus the same constant (measured for "budget", the worst: 87).
    text = _hostile_arrayed(kind)
    tracemalloc.start()
    try:
        with pytest.raises(InputFileError, match=problem) as caught:
            parse_traces(LoadedText("hostile", "", text))
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert not caught.value.problem.startswith("unexpected"), caught.value
    assert len(str(caught.value)) < 400, str(caught.value)[:400]
    assert peak <= ARRAYED_MEMORY_PER_BYTE * len(text) + MEMORY_CONSTANT_BYTES, (peak, len(text))
