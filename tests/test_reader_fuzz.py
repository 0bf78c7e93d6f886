"""Generated and mutated JCAMP-DX and CSV input: every failure is an InputFileError.

Valid files come from this package's writers on small invented spectra/FIDs; Hypothesis
then truncates them, flips bytes, deletes or repeats lines, changes declared counts,
inserts NaN/inf and garbage.  Reading must either succeed (a valid record) or raise
InputFileError with a deliberate message — never another exception, never a hang (each
example has a deadline far above the few milliseconds a small file takes).
"""

from __future__ import annotations

import os
import re
import tempfile
from datetime import timedelta

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from kinetics.errors import InputFileError
from kinetics.spectra import Fid, Spectrum
from kinetics.spectra.delimited import csv_text
from kinetics.spectra.jcampdx import fid_text, spectrum_text
from kinetics.spectra.reader import read

FUZZ = settings(max_examples=150, deadline=timedelta(seconds=5), derandomize=True,
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
    from kinetics.spectra.reader import LoadedText

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
    from kinetics.spectra import jcampdx

    for lines in _data_tables(raw):
        fast = jcampdx._decode_asdf_fast(lines)
        if fast is None:
            continue
        slow = jcampdx._decode_asdf("fuzz", lines)
        np.testing.assert_array_equal(fast.values, slow.values)
        assert fast.line_x == slow.line_x
