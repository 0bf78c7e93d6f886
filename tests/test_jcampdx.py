"""JCAMP-DX reading and writing, checked against the real open spectra in tests/data and
against nmrglue's independent JCAMP-DX reader (nmrglue.fileio.jcampdx)."""

from __future__ import annotations

import os
from datetime import datetime, timezone
from pathlib import Path

import nmrglue as ng
import numpy as np
import pytest

from kinetics.errors import InputFileError
from kinetics.spectra import Fid, Spectrum, sha256_of_file
from kinetics.spectra.jcampdx import fid_text, spectrum_text, write_fid, write_spectrum
from kinetics.spectra.reader import read, read_fid, read_spectrum

DATA = Path(__file__).parent / "data"
CROTONATE = DATA / "ethyl-crotonate.1h.dx"
ACRYLATE = DATA / "butyl-acrylate.1h.dx"
CROTONATE_FID = DATA / "ethyl-crotonate.1h.fid.dx"

# Group windows (ppm) and proton counts: tests/data/README.md (counts from the structures).
GROUPS = {
    CROTONATE: [(6.80, 7.02, 1), (5.66, 5.86, 1), (4.00, 4.20, 2), (1.74, 1.86, 3), (1.13, 1.27, 3)],
    ACRYLATE: [(6.25, 6.40, 1), (5.95, 6.12, 1), (5.68, 5.80, 1), (4.02, 4.16, 2), (1.52, 1.66, 2),
               (1.26, 1.42, 2), (0.82, 0.94, 3)],
}


@pytest.fixture(scope="module")
def crotonate() -> Spectrum:
    return read(CROTONATE)


@pytest.fixture(scope="module")
def acrylate() -> Spectrum:
    return read(ACRYLATE)


@pytest.fixture(scope="module")
def crotonate_fid() -> Fid:
    return read(CROTONATE_FID)


def _nmrglue(path):
    """nmrglue's reading of the same file: (dict, real, imag-or-None)."""
    dic, data = ng.jcampdx.read(str(path))
    if isinstance(data, list):
        return dic, np.asarray(data[0]), np.asarray(data[1])
    return dic, np.asarray(data), None


# ------------------------------------------------------------------ real files
def test_crotonate_points_axis_and_header(crotonate):
    # Source: the file's own header (tests/data/README.md: 16384 points, 500.13 MHz, CDCl3):
    # ##VAR_DIM= 16384; ##.SHIFT REFERENCE= INTERNAL, CDCl3, 1, 8.914285; ##FIRST= 4698.96130095747
    # (Hz) and ##LAST= 0 for X; ##.OBSERVE FREQUENCY= 500.1321393174.
    assert crotonate.n_points == 16384
    assert crotonate.ppm[0] == pytest.approx(8.914285, abs=1e-9)
    assert crotonate.ppm[-1] == pytest.approx(8.914285 - 4698.96130095747 / 500.1321393174, abs=1e-9)
    assert crotonate.observe_mhz == pytest.approx(500.1321393174)
    assert crotonate.nucleus == "1H"
    assert crotonate.n_scans == 32  # ##.AVERAGES= 32
    assert crotonate.acquired_utc == datetime(2005, 1, 25, 17, 46, 30, tzinfo=timezone.utc)
    assert crotonate.imag is not None
    assert crotonate.header["TITLE"] == "ethyl-crotonate 1H, CDCl3"
    assert crotonate.header[".SOLVENT NAME"] == "CDCl3"


def test_acrylate_points_axis_and_provenance(acrylate):
    # Source: file header: ##VAR_DIM= 32768; ##.SHIFT REFERENCE= INTERNAL, CDCl3, 1, 16.39691;
    # X from 12375.8599309638 Hz to 0 Hz at 600.133706048414 MHz.
    assert acrylate.n_points == 32768
    assert acrylate.ppm_range[0] == pytest.approx(16.39691, abs=1e-9)
    assert acrylate.ppm_range[1] == pytest.approx(16.39691 - 12375.8599309638 / 600.133706048414, abs=1e-9)
    assert acrylate.spacing_hz == pytest.approx(0.377692798576733, rel=1e-9)  # ##FACTOR= of X
    assert acrylate.source_path == str(ACRYLATE)
    assert acrylate.sha256 == sha256_of_file(ACRYLATE)


def test_tms_at_zero_in_butyl_acrylate(acrylate):
    # Source: tests/data/README.md — TMS at 0 ppm in this file; the tallest line within
    # +/-0.3 ppm of zero must sit at 0.00 +/- 0.01 ppm.
    window = (acrylate.ppm > -0.3) & (acrylate.ppm < 0.3)
    tallest = acrylate.ppm[window][np.argmax(acrylate.real[window])]
    assert abs(tallest) <= 0.01


@pytest.mark.parametrize("path", [CROTONATE, ACRYLATE], ids=lambda p: p.name)
def test_integral_per_proton_agrees_across_groups(path):
    # Source: proton counts from the structures, windows from tests/data/README.md.  Integral
    # with a straight baseline between the window end points, trapezoid on the true spacing.
    spectrum = read(path)
    per_proton = []
    for low, high, protons in GROUPS[path]:
        inside = (spectrum.ppm >= low) & (spectrum.ppm <= high)
        shift, value = spectrum.ppm[inside][::-1], spectrum.real[inside][::-1]
        area = np.trapezoid(value, shift) - 0.5 * (value[0] + value[-1]) * (shift[-1] - shift[0])
        per_proton.append(area / protons)
    per_proton = np.asarray(per_proton)
    assert np.all(np.abs(per_proton / per_proton.mean() - 1.0) < 0.05), per_proton / per_proton.mean()


@pytest.mark.parametrize("path", [CROTONATE, ACRYLATE, CROTONATE_FID], ids=lambda p: p.name)
def test_reader_agrees_with_nmrglue_point_for_point(path):
    # Reference library: nmrglue.fileio.jcampdx (independent ASDF decoder).
    record = read(path)
    dic, real, imag = _nmrglue(path)
    if isinstance(record, Fid):
        np.testing.assert_array_equal(record.data.real, real)
        np.testing.assert_array_equal(record.data.imag, imag)
    else:
        np.testing.assert_array_equal(record.real, real)  # both in file order (high ppm first)
        np.testing.assert_array_equal(record.imag, imag)
        udic = ng.jcampdx.guess_udic(dic, [real, imag])
        assert record.observe_mhz == pytest.approx(udic[0]["obs"])
        assert (record.ppm[0] - record.ppm[-1]) * record.observe_mhz == pytest.approx(udic[0]["sw"], rel=1e-12)


def test_real_fid_record(crotonate_fid):
    # Source: file header: ##VAR_DIM= 8192; time axis 0 .. 1.7430448 s; ##.SHIFT REFERENCE=
    # INTERNAL, CDCl3, 1, 8.914285 names the shift of spectrum point 1, so the centre is
    # 8.914285 - SW/2/observe with SW = 1/dwell.
    dwell = 1.7430448 / 8191
    assert crotonate_fid.n_points == 8192
    assert crotonate_fid.dwell_s == pytest.approx(dwell, rel=1e-12)
    assert crotonate_fid.carrier_ppm == pytest.approx(8.914285 - 0.5 / dwell / 500.1321393174, abs=1e-9)
    assert crotonate_fid.group_delay_points == 0.0  # no standard label states it (README)
    assert crotonate_fid.acquired_utc == datetime(2005, 1, 25, 17, 46, 30, tzinfo=timezone.utc)
    # The FID's spectral width equals the width covered by the processed spectrum's 16384
    # points (same experiment, README): 16384 * 0.286819343280075 Hz.
    assert crotonate_fid.spectral_width_hz == pytest.approx(16384 * 0.286819343280075, rel=1e-6)


def test_read_spectrum_refuses_fid_and_read_fid_refuses_spectrum():
    with pytest.raises(InputFileError, match="FID"):
        read_spectrum(CROTONATE_FID)
    with pytest.raises(InputFileError, match="spectrum, not an FID"):
        read_fid(CROTONATE)
    assert isinstance(read_fid(CROTONATE_FID), Fid)


# ------------------------------------------------------------------ writer round trips
def _synthetic_spectrum(rng: np.random.Generator, n: int = 2048, imag: bool = True) -> Spectrum:
    ppm = np.linspace(12.0, -1.0, n)
    real = sum(height / (1 + ((ppm - centre) / 0.004) ** 2)
               for centre, height in [(7.26, 3e5), (3.5, 1e6), (1.2, 4e5)])
    real = real + rng.normal(0, 30.0, n)
    return Spectrum(
        ppm=ppm, real=real, imag=rng.normal(0, 30.0, n) if imag else None, nucleus="1H",
        observe_mhz=60.017, acquired_utc=datetime(2026, 3, 1, 10, 15, 0, 250000, tzinfo=timezone.utc),
        duration_s=48.0, n_scans=16, header={"TITLE": "invented test spectrum", ".SOLVENT NAME": "CDCl3"},
    )


def _factor(path) -> float:
    for line in Path(path).read_text().splitlines():
        if line.startswith("##YFACTOR="):
            return float(line.split("=", 1)[1])
        if line.startswith("##FACTOR="):
            return float(line.split("=", 1)[1].split(",")[1])
    raise AssertionError("no factor written")


@pytest.mark.parametrize("compression", ["affn", "dif"])
@pytest.mark.parametrize("with_imag", [False, True], ids=["xydata", "ntuples"])
def test_spectrum_round_trip_and_nmrglue_reads_it_identically(tmp_path, compression, with_imag):
    original = _synthetic_spectrum(np.random.default_rng(7), imag=with_imag)
    path = write_spectrum(tmp_path / f"s_{compression}.dx", original, compression=compression)
    back = read(path)
    factor = _factor(path)
    assert factor <= np.max(np.abs(original.real)) * 2e-7  # ~7-8 significant digits kept
    np.testing.assert_allclose(back.real, original.real, rtol=0, atol=factor * 0.5 * (1 + 1e-9))
    np.testing.assert_allclose(back.ppm, original.ppm, rtol=0, atol=1e-9)
    assert back.observe_mhz == original.observe_mhz
    assert back.acquired_utc == original.acquired_utc
    assert (back.n_scans, back.duration_s, back.nucleus) == (16, 48.0, "1H")
    dic, real, imag = _nmrglue(path)
    np.testing.assert_array_equal(real, back.real)
    if with_imag:
        np.testing.assert_allclose(back.imag, original.imag, rtol=0, atol=factor * 0.5 * (1 + 1e-9))
        np.testing.assert_array_equal(imag, back.imag)
    else:
        assert back.imag is None and imag is None
    assert float(dic[".OBSERVEFREQUENCY"][0]) == original.observe_mhz


def test_dif_output_is_compressed_and_has_y_checks(tmp_path):
    original = _synthetic_spectrum(np.random.default_rng(3), imag=False)
    ramp = np.where(np.arange(original.n_points) < 300, 5.0 * np.arange(original.n_points), original.real)
    original = original.replace(real=ramp)  # an evenly rising stretch: repeated differences -> DUP
    affn = write_spectrum(tmp_path / "a.dx", original, compression="affn")
    dif = write_spectrum(tmp_path / "d.dx", original, compression="dif")
    assert os.path.getsize(dif) < 0.8 * os.path.getsize(affn)
    lines = Path(dif).read_text().splitlines()
    assert max(len(line) for line in lines) <= 80  # JCAMP-DX line limit
    # Y-checks: decoded on its own, every data line starts with the value (and abscissa)
    # the previous line ended with.
    from kinetics.spectra.asdf import decode_asdf as _decode_asdf

    data = lines[lines.index("##XYDATA= (X++(Y..Y))") + 1: -1]
    assert len(data) > 10 and any(char in "STUVWXYZs" for char in "".join(data))  # DUP used
    alone = [_decode_asdf("x", [(1, line)]) for line in data]
    for previous, current in zip(alone, alone[1:]):
        assert current.values[0] == previous.values[-1]
    assert sum(table.values.size for table in alone) - (len(alone) - 1) == original.n_points
    assert not [name for name in os.listdir(tmp_path) if name.endswith(".tmp")]  # atomic writes


def test_real_spectrum_rewritten_reads_back_within_factor(tmp_path, acrylate):
    path = write_spectrum(tmp_path / "again.dx", acrylate, compression="dif")
    back = read(path)
    factor = _factor(path)
    np.testing.assert_allclose(back.real, acrylate.real, rtol=0, atol=factor * 0.5 * (1 + 1e-9))
    np.testing.assert_allclose(back.ppm, acrylate.ppm, rtol=0, atol=1e-9)
    _, real, _ = _nmrglue(path)
    np.testing.assert_array_equal(real, back.real)


@pytest.mark.parametrize("compression", ["affn", "dif"])
def test_fid_round_trip(tmp_path, compression, crotonate_fid):
    path = write_fid(tmp_path / "fid.dx", crotonate_fid.replace(group_delay_points=67.98), compression=compression)
    back = read(path)
    assert isinstance(back, Fid)
    factor = _factor(path)
    np.testing.assert_allclose(back.data.real, crotonate_fid.data.real, rtol=0, atol=factor * 0.5 + 1e-9)
    np.testing.assert_allclose(back.data.imag, crotonate_fid.data.imag, rtol=0, atol=factor * 0.5 + 1e-9)
    assert back.dwell_s == pytest.approx(crotonate_fid.dwell_s, rel=1e-12)
    assert back.carrier_ppm == pytest.approx(crotonate_fid.carrier_ppm, abs=1e-9)
    assert back.group_delay_points == 67.98
    _, real, imag = _nmrglue(path)
    np.testing.assert_array_equal(real + 1j * imag, back.data)


def test_writer_rejects_unknown_compression_and_uneven_axis(tmp_path):
    spectrum = _synthetic_spectrum(np.random.default_rng(1), n=64, imag=False)
    with pytest.raises(ValueError, match="compression"):
        spectrum_text(spectrum, compression="zip")
    uneven = spectrum.replace(ppm=np.sort(np.random.default_rng(2).uniform(0, 10, 64))[::-1])
    with pytest.raises(ValueError, match="evenly spaced"):
        spectrum_text(uneven)
    fid = Fid(data=np.ones(8) + 0j, dwell_s=1e-3, observe_mhz=60.0)
    with pytest.raises(ValueError, match="compression"):
        fid_text(fid, compression="sqz")


# ------------------------------------------------------------------ clear errors
SMALL = """##TITLE= small
##JCAMP-DX= 5.01
##DATA TYPE= NMR SPECTRUM
##.OBSERVE FREQUENCY= 60.0
##XUNITS= PPM
##YUNITS= ARBITRARY UNITS
##FIRSTX= 10.0
##LASTX= 0.0
##XFACTOR= 1.0
##YFACTOR= 1.0
##NPOINTS= 11
##XYDATA= (X++(Y..Y))
10 1 2 3 4 5
5 6 7 8 9 10 11
##END=
"""


def _write(tmp_path, text, name="f.dx") -> Path:
    path = tmp_path / name
    path.write_text(text)
    return path


def _error(tmp_path, text) -> InputFileError:
    with pytest.raises(InputFileError) as info:
        read(_write(tmp_path, text))
    assert not info.value.problem.startswith("unexpected"), info.value
    assert str(tmp_path) in str(info.value)
    return info.value


def test_small_affn_file_reads(tmp_path):
    spectrum = read(_write(tmp_path, SMALL))
    np.testing.assert_array_equal(spectrum.real, np.arange(1, 12))
    np.testing.assert_allclose(spectrum.ppm, np.linspace(10, 0, 11))


def test_truncated_file_names_the_problem(tmp_path):
    error = _error(tmp_path, SMALL.replace("##END=\n", ""))
    assert "truncated" in error.problem and error.hint


def test_point_count_mismatch(tmp_path):
    assert "NPOINTS" in _error(tmp_path, SMALL.replace("##NPOINTS= 11", "##NPOINTS= 12")).problem


def test_non_numeric_data_names_the_line(tmp_path):
    error = _error(tmp_path, SMALL.replace("5 6 7 8", "5 6 x7 8"))
    assert error.line == 14 and "non-numeric" in error.problem


def test_nan_in_data(tmp_path):
    error = _error(tmp_path, SMALL.replace("5 6 7 8", "5 6 nan 8"))
    assert error.line is not None and "NaN" in error.problem


def test_missing_observe_frequency(tmp_path):
    error = _error(tmp_path, SMALL.replace("##.OBSERVE FREQUENCY= 60.0\n", ""))
    assert "OBSERVE FREQUENCY" in error.problem


def test_unsupported_data_type(tmp_path):
    error = _error(tmp_path, SMALL.replace("NMR SPECTRUM", "INFRARED SPECTRUM"))
    assert "DATA TYPE" in error.problem


def test_zero_width_axis_is_not_monotonic(tmp_path):
    error = _error(tmp_path, SMALL.replace("##LASTX= 0.0", "##LASTX= 10.0"))
    assert "monotonic" in error.problem


def test_deleted_line_in_affn_is_caught_by_abscissa_check(tmp_path):
    text = SMALL.replace("##NPOINTS= 11", "##NPOINTS= 6").replace("10 1 2 3 4 5\n", "")
    error = _error(tmp_path, text.replace("##LASTX= 0.0", "##LASTX= 5.0"))
    assert "abscissa" in error.problem and error.line == 13


def test_failed_dif_y_check_names_the_line(tmp_path):
    original = _synthetic_spectrum(np.random.default_rng(5), n=200, imag=False)
    lines = spectrum_text(original, "dif").splitlines()
    start = lines.index("##XYDATA= (X++(Y..Y))") + 2  # the second data line starts with a y-check
    body = lines[start]
    # change the y-check value: its leading SQZ pseudo-digit becomes another one
    position = next(i for i, char in enumerate(body) if char in "@ABCDEFGHIabcdefghi")
    lines[start] = body[:position] + ("B" if body[position] != "B" else "C") + body[position + 1:]
    error = _error(tmp_path, "\n".join(lines) + "\n")
    assert "y-check" in error.problem and error.line == start + 1, error


def test_hostile_declared_size_is_refused(tmp_path):
    error = _error(tmp_path, SMALL.replace("##NPOINTS= 11", "##NPOINTS= 1000000000000"))
    assert "more than" in error.problem


def test_hostile_repeat_count_is_refused(tmp_path):
    text = SMALL.replace("5 6 7 8 9 10 11", "5F6JS99999999999")
    error = _error(tmp_path, text)
    assert "repeat" in error.problem or "more points than" in error.problem


def test_repeat_beyond_the_declared_count_is_refused_before_expanding(tmp_path):
    # A 20-byte DUP run (S5000000 = 15 million repeats, within the global cap) in a file that
    # declares 11 points: refused against ##NPOINTS before anything is expanded, so a small
    # hostile file cannot claim hundreds of MB (numpy reports its buffers to tracemalloc).
    import tracemalloc

    path = _write(tmp_path, SMALL.replace("5 6 7 8 9 10 11", "5AJS5000000"))
    tracemalloc.start()
    try:
        with pytest.raises(InputFileError, match="more points than the 11 its header declares"):
            read(path)
        _, peak_bytes = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak_bytes < 20e6, peak_bytes


def test_empty_and_binary_files(tmp_path):
    assert "empty" in _error(tmp_path, "  \n\n").problem
    path = tmp_path / "b.dx"
    path.write_bytes(b"##TITLE= x\n\x00\x01\x02\xff" * 10)
    with pytest.raises(InputFileError, match="binary"):
        read(path)
    with pytest.raises(InputFileError, match="cannot be opened"):
        read(tmp_path / "missing.dx")


def test_long_date_zone_converted_to_utc(tmp_path):
    text = SMALL.replace("##XUNITS", "##LONG DATE= 2026/03/01 12:15:00.5+0200\n##XUNITS")
    spectrum = read(_write(tmp_path, text))
    assert spectrum.acquired_utc == datetime(2026, 3, 1, 10, 15, 0, 500000, tzinfo=timezone.utc)
    bad = _error(tmp_path, text.replace("2026/03/01", "2026/13/01"))
    assert "LONG DATE" in bad.problem and bad.line is not None


def test_hz_axis_without_shift_reference_uses_observe_frequency(tmp_path):
    text = SMALL.replace("##XUNITS= PPM", "##XUNITS= HZ").replace("##FIRSTX= 10.0", "##FIRSTX= 600.0")
    text = text.replace("##XFACTOR= 1.0", "##XFACTOR= 60.0")
    spectrum = read(_write(tmp_path, text))
    assert spectrum.ppm[0] == pytest.approx(10.0) and spectrum.ppm[-1] == pytest.approx(0.0)


def test_format_detected_by_content_not_extension(tmp_path):
    spectrum = read(_write(tmp_path, SMALL, name="looks_like.csv"))
    assert spectrum.n_points == 11


def test_hostile_long_lines_do_not_hang(tmp_path):
    # Long digit runs and padding must be refused (or read) in linear time, never hang.
    assert "NaN" in _error(tmp_path, SMALL.replace("5 6 7 8", "5 " + "7" * 300_000 + " 7 8")).problem
    text = SMALL.replace("5 6 7 8 9 10 11", "5F" + "J" * 100_000)
    assert "NPOINTS" in _error(tmp_path, text).problem
    text = SMALL.replace("##TITLE= small", "##TITLE= " + " " * 300_000 + "small")
    assert read(_write(tmp_path, text)).n_points == 11


def test_hand_made_asdf_sqz_dup_dif_agrees_with_nmrglue(tmp_path):
    # Worked by hand from the ASDF rules (McDonald & Wilks 1988): SQZ A=1 B=2 E=5 g=-7 a=-1,
    # DIF j=-1, DUP T=2 and U=3 occurrences; line 3 opens with the y-check of line 2's end.
    text = SMALL.replace("##NPOINTS= 11", "##NPOINTS= 10").replace("##LASTX= 0.0", "##LASTX= 1.0")
    text = text.replace("10 1 2 3 4 5\n5 6 7 8 9 10 11\n", "10ABT\n7EjU\n4BgTa\n")
    path = _write(tmp_path, text)
    expected = [1, 2, 2, 5, 4, 3, 2, -7, -7, -1]
    np.testing.assert_array_equal(read(path).real, expected)
    _, real, _ = _nmrglue(path)
    np.testing.assert_array_equal(real, expected)


@pytest.mark.parametrize("written, expected_utc", [
    # JCAMP-DX 5.01 form YYYY/MM/DD HH:MM:SS.SSSS +UUUU (Davies & Lampen 1993, ##LONG DATE),
    # and forms exporters write (from memory): ISO 8601 with T and Z, two-digit zones, a
    # named zone, a comma before the time, no seconds.
    ("2005/01/25 17:46:30.1234 +0100", datetime(2005, 1, 25, 16, 46, 30, 123400, tzinfo=timezone.utc)),
    ("2005-01-25T17:46:30Z", datetime(2005, 1, 25, 17, 46, 30, tzinfo=timezone.utc)),
    ("2005/01/25 17:46:30+01", datetime(2005, 1, 25, 16, 46, 30, tzinfo=timezone.utc)),
    ("2005/1/5 7:46:30 -05:00", datetime(2005, 1, 5, 12, 46, 30, tzinfo=timezone.utc)),
    ("2005/01/25 17:46:30 GMT+01:00", datetime(2005, 1, 25, 16, 46, 30, tzinfo=timezone.utc)),
    ("2005/01/25, 17:46", datetime(2005, 1, 25, 17, 46, tzinfo=timezone.utc)),
    ("2005/01/25", datetime(2005, 1, 25, tzinfo=timezone.utc)),
])
def test_long_date_variants(tmp_path, written, expected_utc):
    text = SMALL.replace("##XUNITS", f"##LONG DATE= {written}\n##XUNITS")
    assert read(_write(tmp_path, text)).acquired_utc == expected_utc


@pytest.mark.parametrize("written", ["25/01/2005 17:46:30", "2005/01/25 17:46:30 +1500", "yesterday",
                                     "2005/01/25" + " " * 100_000 + "x"])
def test_ambiguous_or_bad_long_date_is_refused(tmp_path, written):
    # Day-first dates cannot be told from month-first ones; zones beyond +14:00 do not exist.
    error = _error(tmp_path, SMALL.replace("##XUNITS", f"##LONG DATE= {written}\n##XUNITS"))
    assert "LONG DATE" in error.problem and error.line == 5


_PEAKS = ("##TITLE= peaks\n##JCAMP-DX= 5.01\n##DATA TYPE= NMR PEAK TABLE\n##.OBSERVE FREQUENCY= 60.0\n"
          "##XUNITS= PPM\n##NPOINTS= 2\n##PEAK TABLE= (XY..XY)\n1.0, 5.0\n2.0, 6.0\n##END=\n")


def _link(*blocks: str) -> str:
    # JCAMP-DX 5 compound file: a LINK block enclosing the data blocks (McDonald & Wilks
    # 1988 and its 5.0 update, ##BLOCKS=).
    return f"##TITLE= link\n##JCAMP-DX= 5.01\n##DATA TYPE= LINK\n##BLOCKS= {len(blocks)}\n" + "".join(blocks) + "##END=\n"


def test_peak_table_only_is_a_clear_error(tmp_path):
    error = _error(tmp_path, _PEAKS)
    assert "peak list" in error.problem and "PEAK TABLE" in error.problem and error.line == 7


def test_link_file_with_spectrum_and_peak_table_reads_the_spectrum(tmp_path):
    spectrum = read(_write(tmp_path, _link(SMALL.replace("##TITLE= small", "##TITLE= the spectrum"), _PEAKS)))
    assert spectrum.header["TITLE"] == "the spectrum"
    np.testing.assert_array_equal(spectrum.real, np.arange(1, 12))


def test_two_spectra_in_one_file_are_refused(tmp_path):
    for text in (_link(SMALL, SMALL), SMALL + SMALL):
        error = _error(tmp_path, text)
        assert "2 data blocks" in error.problem and "one spectrum" in error.hint
    assert "truncated" in _error(tmp_path, _link(SMALL, SMALL)[: -len("##END=\n")]).problem


def test_var_dim_mismatch_in_ntuples(tmp_path):
    # ##VAR_DIM= states the points of every NTUPLES page (JCAMP-DX 5.01, Davies & Lampen
    # 1993); a page holding another number is damaged.
    text = spectrum_text(_synthetic_spectrum(np.random.default_rng(4), n=64), "affn")
    assert "##VAR_DIM= 64, 64, 64" in text
    error = _error(tmp_path, text.replace("##VAR_DIM= 64, 64, 64", "##VAR_DIM= 64, 65, 65"))
    assert "VAR_DIM" in error.problem and error.line is not None


def test_xypoints_axis_must_be_monotonic(tmp_path):
    # (XY..XY) tables carry every abscissa; a reversal is a damaged axis, not a spectrum.
    text = SMALL.replace("##XYDATA= (X++(Y..Y))\n10 1 2 3 4 5\n5 6 7 8 9 10 11\n",
                         "##XYPOINTS= (XY..XY)\n3.0, 1; 2.0, 2\n2.5, 3; 1.0, 4\n")
    text = text.replace("##NPOINTS= 11", "##NPOINTS= 4")
    assert "monotonic" in _error(tmp_path, text).problem
    spectrum = read(_write(tmp_path, text.replace("2.5, 3", "1.5, 3").replace("1.0, 4", "0.5, 4")))
    np.testing.assert_array_equal(spectrum.ppm, [3.0, 2.0, 1.5, 0.5])
