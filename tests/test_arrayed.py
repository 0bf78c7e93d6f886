"""Arrayed series in one file (kinetics.spectra.arrayed): reading, writing, growing files.

Checks against the world: hand-written files that follow the JCAMP-DX 5.01/6.0 rules
(compound files, NTUPLES pages) with values worked out by hand; nmrglue's independent
JCAMP-DX reader (nmrglue.fileio.jcampdx) on the same files; and round trips of simulated
spectra and FIDs (kinetics.simulate), where the test sets the truth.
"""

from __future__ import annotations

import hashlib
import tracemalloc
import warnings
from datetime import datetime, timedelta, timezone
from pathlib import Path

import nmrglue as ng
import numpy as np
import pytest

from kinetics import simulate
from kinetics.errors import InputFileError
from kinetics.spectra import read
from kinetics.spectra.arrayed import Trace, is_arrayed, parse_time_cell, parse_traces, read_traces
from kinetics.spectra.arrayed_writers import arrayed_text, link_parts, write_arrayed_jcampdx, write_matrix_table
from kinetics.spectra.jcampdx import fid_text, spectrum_text
from kinetics.spectra.reader import parse_loaded
from kinetics.spectra.text import LoadedText

DATA = Path(__file__).parent / "data" / "arrayed"
LINK = DATA / "link-three-spectra.dx"
NTUPLES = DATA / "ntuples-two-times.dx"
MATRIX = DATA / "matrix-minutes.csv"
START = datetime(2026, 3, 1, 10, 0, tzinfo=timezone.utc)


def _nmrglue(path):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # nmrglue warns that it returns the first page only
        return ng.jcampdx.read(str(path))


def _series(n_traces: int, n_points: int, kind: str = "spectrum", imag: bool = True, seed: int = 7):
    """Simulated first-order decay A -> B (k = 1/600 s), one record per time point."""
    rng = np.random.default_rng(seed)
    species = [simulate.SpeciesSignals("a", (simulate.Multiplet(4.1, 2, 7.0, 4, width_hz=1.5),)),
               simulate.SpeciesSignals("b", (simulate.Multiplet(3.6, 3, width_hz=1.5),))]
    acquisition = simulate.Acquisition(observe_mhz=60.0, n_points=n_points, spectral_width_ppm=12.0, carrier_ppm=5.0)
    records, times = [], []
    for index in range(n_traces):
        time_s = 30.0 + 120.0 * index
        a = float(np.exp(-time_s / 600.0))
        kwargs = dict(amplitude_per_nucleus=1e4, snr=200.0, acquired_utc=START + timedelta(seconds=time_s - 30.0),
                      duration_s=60.0, n_scans=4, header={"TITLE": "decay series", ".SOLVENT NAME": "CDCl3"})
        if kind == "fid":
            record = simulate.simulate_fid(species, {"a": a, "b": 1 - a}, rng, acquisition, **kwargs)
        else:
            record = simulate.simulate_spectrum(species, {"a": a, "b": 1 - a}, rng, acquisition, **kwargs)
            if not imag:
                record = record.replace(imag=None)
        records.append(record)
        times.append(time_s)
    return records, times


def _single_round_trip(record, compression):
    """What the single-spectrum writer and reader give for the same record."""
    text = fid_text(record, compression) if kind_of(record) == "fid" else spectrum_text(record, compression)
    return parse_loaded(LoadedText("single", "", text))


def kind_of(record) -> str:
    return "fid" if hasattr(record, "dwell_s") else "spectrum"


def _values(record):
    return (record.data.real, record.data.imag) if kind_of(record) == "fid" else (record.real, record.imag)


def _assert_same_record(got, expected):
    """Bit-for-bit equal data and equal metadata (the record as the reader gives it)."""
    for a, b in zip(_values(got), _values(expected)):
        if b is None:
            assert a is None
        else:
            np.testing.assert_array_equal(a, b)
    if kind_of(expected) == "fid":
        assert (got.dwell_s, got.carrier_ppm, got.group_delay_points) == (
            expected.dwell_s, expected.carrier_ppm, expected.group_delay_points)
    else:
        np.testing.assert_array_equal(got.ppm, expected.ppm)
    for name in ("nucleus", "observe_mhz", "acquired_utc", "duration_s", "n_scans", "decoupler"):
        assert getattr(got, name) == getattr(expected, name), name
    for label in ("TITLE", ".SOLVENT NAME"):
        assert got.header.get(label) == expected.header.get(label)


# ============================================================ hand-written files
def test_hand_written_link_file_per_the_block_rules():
    # JCAMP-DX 5.01 compound files: LINK block, ##BLOCKS=, ##BLOCK_ID=, ##END= per block and
    # the link block's ##END= last.  Values worked out by hand from the file: Y = raw * YFACTOR
    # (0.5); X in Hz / 60 MHz, point 8 at 0 ppm; the peak-table block is not a trace.
    traces = read_traces(LINK)
    assert is_arrayed(LINK)
    assert [trace.block for trace in traces] == [0, 1, 2]
    expected = [[5, 6, 10, 100, 15, 7, 5, 4], [5, 6, 10, 75, 10, 7, 5, 4], [5, 6, 10, 50, 20, 7, 5, 4]]
    for trace, real in zip(traces, expected):
        np.testing.assert_array_equal(trace.record.real, real)
        np.testing.assert_array_equal(trace.record.ppm, [7, 6, 5, 4, 3, 2, 1, 0])
        assert trace.time_s is None  # the file states dates, not elapsed times
        assert trace.record.n_scans == 4 and trace.record.nucleus == "1H"
    assert [trace.acquired_utc for trace in traces] == [START + timedelta(minutes=m) for m in (0, 5, 10)]
    assert all(trace.record.acquired_utc == trace.acquired_utc for trace in traces)


def test_hand_written_link_file_digest_is_the_block_bytes():
    raw = LINK.read_bytes()
    traces = read_traces(LINK)
    starts = [raw.index(b"##TITLE= reaction at 10:%s" % minute) for minute in (b"00", b"05", b"10")]
    for trace, start in zip(traces, starts):
        end = raw.index(b"##END=\n", start) + len(b"##END=\n")
        assert trace.digest == hashlib.sha256(raw[start:end]).hexdigest()
        assert trace.record.sha256 == trace.digest and trace.record.source_path == str(LINK)
    assert len({trace.digest for trace in traces}) == 3


def test_nmrglue_reads_every_block_of_the_hand_written_link_file():
    # nmrglue returns the first block's data and keeps the other spectrum blocks in
    # dic["_datatype_NMRSPECTRUM"]; each must equal our trace point for point.
    dic, data = _nmrglue(LINK)
    traces = read_traces(LINK)
    np.testing.assert_allclose(data, traces[0].record.real, rtol=1e-12)
    others = dic["_datatype_NMRSPECTRUM"]
    assert len(others) == 2
    for block, trace in zip(others, traces[1:]):
        np.testing.assert_allclose(ng.jcampdx.getdataarray(block), trace.record.real, rtol=1e-12)
        assert block["LONGDATE"][0].startswith(trace.acquired_utc.strftime("%Y/%m/%d %H:%M"))


def test_hand_written_ntuples_pages_with_a_time_variable():
    # JCAMP-DX 6.0 NTUPLES: a second independent variable T (##UNITS= MINUTES) and pages
    # ##PAGE= T=...; each trace is an R page and its I page.  Values: raw * FACTOR (2);
    # ppm = Hz / 376.5 MHz (no shift reference), times 0 and 2.5 min = 150 s.
    traces = read_traces(NTUPLES)
    assert is_arrayed(NTUPLES)
    assert [trace.time_s for trace in traces] == [0.0, 150.0]
    np.testing.assert_array_equal(traces[0].record.real, [2, 4, 100, 4, 2, 0])
    np.testing.assert_array_equal(traces[1].record.real, [2, 4, 60, 4, 2, 0])
    np.testing.assert_array_equal(traces[1].record.imag, [0, 2, 0, -2, 0, 0])
    np.testing.assert_allclose(traces[0].record.ppm, np.arange(-22590.0, -22641.0, -10.0) / 376.5, rtol=1e-15)
    assert [trace.acquired_utc for trace in traces] == [START, START + timedelta(minutes=2.5)]
    assert traces[0].record.nucleus == "19F" and traces[0].record.decoupler == "^1H"
    dic, data = _nmrglue(NTUPLES)  # nmrglue: the first R and I pages, FACTOR applied
    np.testing.assert_allclose(data[0], traces[0].record.real, rtol=1e-12)
    np.testing.assert_allclose(data[1], traces[0].record.imag, rtol=1e-12)


def test_hand_written_matrix_with_the_time_unit_in_the_first_header_cell():
    traces = read_traces(MATRIX)
    assert is_arrayed(MATRIX)
    assert [trace.time_s for trace in traces] == [0.0, 90.0, 180.0]  # t/min: 0, 1.5, 3
    np.testing.assert_array_equal(traces[2].record.real, [3, 6, 2])
    np.testing.assert_array_equal(traces[0].record.ppm, [3, 2, 1])


@pytest.mark.parametrize("cell, seconds", [
    ("60", 60.0), ("60 s", 60.0), ("60s", 60.0), ("1.5 min", 90.0), ("2 h", 7200.0), ("60 [s]", 60.0),
    ("500 (ms)", 0.5), ("t=60", 60.0), ("t/s=60", 60.0), ("time_min=1.5", 90.0), ("t [h] 2", 7200.0),
    ("T = 1e2", 100.0), ("real", None), ("60 furlongs", None), ("t/min=2 s", None), ("nan", None), ("", None),
])
def test_time_cells(cell, seconds):
    assert parse_time_cell(cell) == seconds


def test_bare_numbers_take_the_row_unit():
    assert parse_time_cell("2", default_scale=60.0) == 120.0
    assert parse_time_cell("2 s", default_scale=60.0) == 2.0


# ============================================================ round trips
@pytest.mark.parametrize("n_points", [64, 1000, 4096])
@pytest.mark.parametrize("compression", ["dif", "affn"])
@pytest.mark.parametrize("kind", ["real", "complex", "fid"])
def test_link_round_trip_equals_the_single_file_round_trip(tmp_path, n_points, compression, kind):
    records, times = _series(4, n_points, "fid" if kind == "fid" else "spectrum", imag=kind == "complex")
    path = write_arrayed_jcampdx(tmp_path / "series.dx", records, times, form="link", compression=compression)
    traces = read_traces(path)
    assert is_arrayed(path) and len(traces) == 4
    assert [trace.time_s for trace in traces] == times
    for trace, record in zip(traces, records):
        _assert_same_record(trace.record, _single_round_trip(record, compression))
        assert trace.acquired_utc == record.acquired_utc
        assert isinstance(trace, Trace)


@pytest.mark.parametrize("n_points", [64, 1000, 4096])
@pytest.mark.parametrize("compression", ["dif", "affn"])
@pytest.mark.parametrize("kind", ["real", "complex", "fid"])
@pytest.mark.parametrize("with_times", [True, False])
def test_ntuples_round_trip(tmp_path, n_points, compression, kind, with_times):
    records, times = _series(4, n_points, "fid" if kind == "fid" else "spectrum", imag=kind == "complex")
    path = write_arrayed_jcampdx(tmp_path / "series.dx", records, times if with_times else None, form="ntuples",
                                 compression=compression)
    traces = read_traces(path)
    assert is_arrayed(path) and len(traces) == 4
    assert [trace.time_s for trace in traces] == (times if with_times else [None] * 4)
    # One FACTOR for the series: 8 significant digits of the largest value of all pages.
    peak = max(np.max(np.abs(values)) for record in records for values in _values(record) if values is not None)
    half_step = 0.5 * 10.0 ** (np.floor(np.log10(peak)) - 7)
    for trace, record in zip(traces, records):
        for got, sent in zip(_values(trace.record), _values(record)):
            if sent is None:
                assert got is None
            else:
                assert np.max(np.abs(got - sent)) <= half_step * (1 + 1e-9)
        if kind == "fid":
            assert trace.record.dwell_s == pytest.approx(record.dwell_s, rel=1e-15)
            assert trace.record.carrier_ppm == pytest.approx(record.carrier_ppm, abs=1e-12)
        else:
            np.testing.assert_allclose(trace.record.ppm, record.ppm, rtol=0, atol=1e-12)
        for name in ("acquired_utc", "duration_s", "n_scans", "nucleus", "observe_mhz"):
            assert getattr(trace.record, name) == getattr(record, name), name
    # Written again from what was read, the file reads back bit for bit (a fixed point).
    again = write_arrayed_jcampdx(tmp_path / "again.dx", [trace.record for trace in traces],
                                  times if with_times else None, form="ntuples", compression=compression)
    for first, second in zip(traces, read_traces(again)):
        _assert_same_record(second.record, first.record)


@pytest.mark.parametrize("delimiter", [",", "\t", ";"])
@pytest.mark.parametrize("n_points", [64, 4096])
def test_matrix_round_trip_is_exact(tmp_path, delimiter, n_points):
    records, times = _series(5, n_points, imag=False)
    path = write_matrix_table(tmp_path / "series.csv", records, times, delimiter=delimiter)
    traces = read_traces(path)
    assert is_arrayed(path) and [trace.time_s for trace in traces] == times
    for trace, record in zip(traces, records):
        np.testing.assert_array_equal(trace.record.real, record.real)
        np.testing.assert_array_equal(trace.record.ppm, record.ppm)
        for name in ("acquired_utc", "duration_s", "n_scans", "nucleus", "observe_mhz"):
            assert getattr(trace.record, name) == getattr(record, name), name


def test_matrix_dates_are_one_per_column(tmp_path):
    base = "# observe_mhz: 60\n# acquired: {}\nppm,0,60\n1,2,3\n0,1,2\n"
    (tmp_path / "one.csv").write_text(base.format("2026-03-01T10:00:00+00:00"))
    with pytest.raises(InputFileError, match="gives 1 values for 2 time points") as caught:
        read_traces(tmp_path / "one.csv")
    assert caught.value.line == 2
    (tmp_path / "two.csv").write_text(base.format("2026-03-01T10:00:00+00:00 2026-03-01T11:00:00+01:00"))
    assert [trace.acquired_utc for trace in read_traces(tmp_path / "two.csv")] == [START, START]


def test_matrix_refuses_imaginary_parts_and_uneven_inputs(tmp_path):
    records, times = _series(2, 64, imag=True)
    with pytest.raises(ValueError, match="imaginary"):
        write_matrix_table(tmp_path / "x.csv", records, times)
    plain = [record.replace(imag=None) for record in records]
    with pytest.raises(ValueError, match="times_s"):
        write_matrix_table(tmp_path / "x.csv", plain, times[:1])
    with pytest.raises(ValueError, match="ppm axis"):
        write_matrix_table(tmp_path / "x.csv", [plain[0], plain[1].replace(ppm=plain[1].ppm + 0.1)], times)


@pytest.mark.parametrize("form", ["link", "ntuples"])
def test_nmrglue_reads_the_written_files(tmp_path, form):
    # Reference library: nmrglue.fileio.jcampdx.  Link files: every block; NTUPLES: nmrglue
    # returns the first R and I pages only (it warns about the others).
    records, times = _series(3, 1000, imag=True)
    path = write_arrayed_jcampdx(tmp_path / "series.dx", records, times, form=form)
    traces = read_traces(path)
    dic, data = _nmrglue(path)
    np.testing.assert_allclose(data[0], traces[0].record.real, rtol=1e-12, atol=0)
    np.testing.assert_allclose(data[1], traces[0].record.imag, rtol=1e-12, atol=0)
    if form == "link":
        others = dic["_datatype_NMRSPECTRUM"]
        assert len(others) == len(traces) - 1
        for block, trace in zip(others, traces[1:]):
            real, imag = ng.jcampdx.getdataarray(block)
            np.testing.assert_allclose(real, trace.record.real, rtol=1e-12, atol=0)
            np.testing.assert_allclose(imag, trace.record.imag, rtol=1e-12, atol=0)
            assert float(block["$KINETICSTIMES"][0]) == trace.time_s


def test_single_spectrum_files_are_not_arrayed_but_read_as_one_trace(tmp_path):
    records, _ = _series(1, 64)
    path = tmp_path / "one.dx"
    path.write_text(spectrum_text(records[0]))
    assert not is_arrayed(path)
    (trace,) = read_traces(path)
    _assert_same_record(trace.record, read(path))
    assert trace.time_s is None and trace.block == 0


def test_plain_spectrum_table_is_one_trace_and_a_bad_time_cell_is_named(tmp_path):
    records, _ = _series(1, 32, imag=False)
    from kinetics.spectra.delimited import write_csv
    write_csv(tmp_path / "one.csv", records[0])
    (trace,) = read_traces(tmp_path / "one.csv")
    assert not is_arrayed(tmp_path / "one.csv")
    np.testing.assert_array_equal(trace.record.real, records[0].real)
    (tmp_path / "typo.csv").write_text("# observe_mhz: 60\nppm,0,6O\n1,2,3\n0,1,2\n")
    with pytest.raises(InputFileError, match="header cell '6O' is not a time") as caught:
        read_traces(tmp_path / "typo.csv")
    assert caught.value.line == 2


def test_read_refuses_an_arrayed_file_and_names_the_config_key(tmp_path):
    records, times = _series(3, 64)
    for name, write in (("link.dx", lambda p: write_arrayed_jcampdx(p, records, times)),
                        ("pages.dx", lambda p: write_arrayed_jcampdx(p, records, times, form="ntuples")),
                        ("matrix.csv", lambda p: write_matrix_table(p, [r.replace(imag=None) for r in records],
                                                                    times))):
        write(tmp_path / name)
        with pytest.raises(InputFileError) as caught:
            read(tmp_path / name)
        assert "[run] file" in caught.value.hint, name


# ============================================================ growing files
def _growing(tmp_path, records, times, form="link"):
    text = arrayed_text(records, times, form=form, compression="dif")
    full = tmp_path / "full.dx"
    full.write_text(text)
    return text, read_traces(full)


def test_growing_link_file_gives_complete_blocks_then_the_rest(tmp_path):
    records, times = _series(4, 256)
    head, blocks, tail = link_parts(records, times)
    _, complete = _growing(tmp_path, records, times)
    path = tmp_path / "growing.dx"
    # Two blocks and half of the third: the third is left for later, not an error.
    path.write_text(head + blocks[0] + blocks[1] + blocks[2][: len(blocks[2]) // 2])
    assert is_arrayed(path)  # ##BLOCKS= 4 not reached, link block still open
    first = read_traces(path)
    assert [trace.block for trace in first] == [0, 1]
    # The instrument finishes the file; reading from the first trace not yet taken.
    path.write_text(head + "".join(blocks) + tail)
    later = read_traces(path, first_block=2)
    assert [trace.block for trace in later] == [2, 3]
    for trace in first + later:
        assert trace.digest == complete[trace.block].digest
        _assert_same_record(trace.record, complete[trace.block].record)


@pytest.mark.parametrize("form", ["link", "ntuples"])
def test_every_truncation_of_a_growing_file_gives_the_complete_traces_only(tmp_path, form):
    records, times = _series(3, 48, imag=True, seed=3)
    text, complete = _growing(tmp_path, records, times, form)
    path = tmp_path / "cut.dx"
    positions = sorted(set(range(2, len(text), max(1, len(text) // 150))) | {
        index + 1 for index, char in enumerate(text) if char == "\n"})
    counts = []
    for position in positions:
        path.write_text(text[:position])
        traces = read_traces(path)  # never an error: what is incomplete is left for later
        for trace in traces:
            assert trace.digest == complete[trace.block].digest, position
            _assert_same_record(trace.record, complete[trace.block].record)
        counts.append(len(traces))
    assert counts == sorted(counts) and counts[-1] == 3 and 0 in counts and 1 in counts and 2 in counts


def test_rewritten_file_changes_the_digest_of_the_changed_block_only(tmp_path):
    records, times = _series(3, 128)
    path = write_arrayed_jcampdx(tmp_path / "s.dx", records, times)
    before = read_traces(path)
    changed = list(records)
    changed[1] = records[1].replace(real=records[1].real * 1.5)
    write_arrayed_jcampdx(path, changed, times)
    after = read_traces(path)
    assert [a.digest == b.digest for a, b in zip(before, after)] == [True, False, True]


# ============================================================ damaged and hostile files
def _link_text(n_traces=3, n_points=64, compression="affn"):
    records, times = _series(n_traces, n_points, seed=11)
    return arrayed_text(records, times, compression=compression)


def _parse(text):
    return parse_traces(LoadedText("hostile.dx", "", text))


def test_damaged_complete_block_names_block_and_line():
    lines = _link_text().split("\n")
    starts = [number for number, line in enumerate(lines) if line.startswith("##DATA TABLE= (X++(R..R))")]
    damaged = starts[1] + 3  # a data line of the second block's real page
    lines[damaged] = lines[damaged][:8] + " x1 " + lines[damaged][8:]
    with pytest.raises(InputFileError) as caught:
        _parse("\n".join(lines))
    assert caught.value.line == damaged + 1 and caught.value.problem.startswith("block 1 ")


def test_deleted_data_line_in_a_complete_block_is_an_error():
    lines = _link_text().split("\n")
    start = [number for number, line in enumerate(lines) if line.startswith("##DATA TABLE= (X++(I..I))")][2]
    del lines[start + 2]
    with pytest.raises(InputFileError, match="block 2 "):
        _parse("\n".join(lines))


@pytest.mark.parametrize("edit, problem", [
    (lambda t: t.replace("##BLOCKS= 3", "##BLOCKS= 4"), "declares 4 blocks but the file holds 3"),
    (lambda t: t.replace("##BLOCKS= 3", "##BLOCKS= 2"), "declares 2 blocks"),
    (lambda t: t.replace("##BLOCK_ID= 3", "##BLOCK_ID= 2"), "repeats the block"),
    (lambda t: t.replace("##$KINETICS TIME S= 270.0\n", ""), "has no time while others have one"),
    (lambda t: t.replace("##$KINETICS TIME S= 270.0", "##$KINETICS TIME S= soon"), "is not a number"),
])
def test_inconsistent_link_files_are_refused(edit, problem):
    with pytest.raises(InputFileError, match=problem.replace("$", r"\$")):
        _parse(edit(_link_text()))


def test_spectra_and_fids_mixed_are_refused():
    spectra, times = _series(2, 64)
    fids, _ = _series(1, 64, kind="fid")
    head, blocks, tail = link_parts(spectra, times)
    assert len(_parse(head + "".join(blocks) + tail)) == 2  # the spectra alone read
    fid_block = link_parts(fids, [300.0])[1][0]
    with pytest.raises(InputFileError, match="mixes spectra and FIDs"):
        _parse(head.replace("##BLOCKS= 2", "##BLOCKS= 3") + "".join(blocks) + fid_block + tail)


def test_ntuples_inconsistencies_are_refused():
    records, times = _series(3, 32)
    text = arrayed_text(records, times, form="ntuples", compression="affn")
    with pytest.raises(InputFileError, match="I page's T= differs"):
        _parse(text.replace(f"##PAGE= T={times[1]!r}\n##DATA TABLE= (X++(I", "##PAGE= T=9.0\n##DATA TABLE= (X++(I"))
    with pytest.raises(InputFileError, match="VAR_DIM= declares 4 values"):
        _parse(text.replace("##VAR_DIM= 3,", "##VAR_DIM= 4,"))
    with pytest.raises(InputFileError, match="last trace has no I page"):
        last = text.rindex("##PAGE=")
        _parse(text[:last] + text[text.index("##END NTUPLES"):])


def test_block_claiming_2_24_points_is_refused_before_allocation():
    text = _link_text(2, 32)
    hostile = text.replace("##VAR_DIM= 32, 32, 32", "##VAR_DIM= 16777216, 16777216, 16777216", 1)
    assert hostile != text
    tracemalloc.start()
    try:
        with pytest.raises(InputFileError, match="declares") as caught:
            _parse(hostile)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert caught.value.problem.startswith("block 0 ")
    assert peak < 2 * 1024 * 1024


def test_points_of_all_blocks_together_fit_the_file_size():
    # Each block claims 60000 points (under the 65536 any file may hold) in a DUP run:
    # together they exceed what a file of this size can hold.
    block = ("##TITLE= b\n##JCAMP-DX= 5.01\n##DATA TYPE= NMR SPECTRUM\n##.OBSERVE FREQUENCY= 60\n##XUNITS= HZ\n"
             "##FIRSTX= 600\n##LASTX= 0\n##NPOINTS= 60000\n##XYDATA= (X++(Y..Y))\n600@%W9999\n##END=\n")
    text = "##TITLE= s\n##JCAMP-DX= 5.01\n##DATA TYPE= LINK\n##BLOCKS= 4\n" + block * 4 + "##END=\n"
    with pytest.raises(InputFileError, match="more than a file of this size can hold"):
        _parse(text)


def test_nothing_complete_yet_is_an_empty_list(tmp_path):
    head, blocks, _ = link_parts(*_series(2, 32))
    assert _parse(head) == []
    assert _parse(head + blocks[0][:40]) == []


def test_is_arrayed_by_content(tmp_path):
    # A compound file holding one spectrum and its peak table is not a series.
    text = LINK.read_text()
    start, end = text.index("##TITLE= reaction at 10:05"), text.index("##TITLE= peaks")
    single = text[:start] + text[end:text.index("##TITLE= reaction at 10:10")] + "##END=\n"
    (tmp_path / "single.txt").write_text(single.replace("##BLOCKS= 4", "##BLOCKS= 2"))
    assert not is_arrayed(tmp_path / "single.txt")
    assert len(read_traces(tmp_path / "single.txt")) == 1
    (tmp_path / "series.txt").write_text(text)  # any extension: decided by content
    assert is_arrayed(tmp_path / "series.txt")
    (tmp_path / "empty.dx").write_text("")
    assert not is_arrayed(tmp_path / "empty.dx") and not is_arrayed(tmp_path / "missing.dx")


@pytest.mark.parametrize("form", ["link", "ntuples"])
def test_memory_of_a_read_is_bounded_by_the_file_size(form):
    # The bound the single-file reader promises (tests/test_reader_fuzz.py): 64 bytes of
    # memory per byte of file plus 16 MB.
    records, _ = _series(8, 256, imag=True)
    text = arrayed_text(records * 5, [60.0 * index for index in range(40)], form=form)
    tracemalloc.start()
    try:
        traces = _parse(text)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert len(traces) == 40
    assert peak <= 64 * len(text) + 16 * 1024 * 1024, (peak, len(text))
