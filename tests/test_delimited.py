"""Delimited-text spectra: exact round trip, separators, header rows and clear errors."""

from __future__ import annotations

from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pytest

from kinetics.errors import InputFileError
from kinetics.spectra import Spectrum
from kinetics.spectra.delimited import csv_text, write_csv
from kinetics.spectra.reader import read

DATA = Path(__file__).parent / "data"


def _spectrum(rng: np.random.Generator, imag: bool = True) -> Spectrum:
    # Invented data: the test sets the truth.
    ppm = np.linspace(10.0, -0.5, 500)
    return Spectrum(
        ppm=ppm, real=rng.normal(0, 1, 500) + 50 / (1 + ((ppm - 3.0) / 0.02) ** 2),
        imag=rng.normal(0, 1, 500) if imag else None, nucleus="19F", observe_mhz=56.45,
        acquired_utc=datetime(2026, 2, 3, 4, 5, 6, 789000, tzinfo=timezone.utc),
        duration_s=30.5, n_scans=8, header={"title": "invented"},
    )


@pytest.mark.parametrize("imag", [True, False])
def test_csv_round_trip_is_exact(tmp_path, imag):
    original = _spectrum(np.random.default_rng(11), imag=imag)
    back = read(write_csv(tmp_path / "s.csv", original))
    np.testing.assert_array_equal(back.ppm, original.ppm)
    np.testing.assert_array_equal(back.real, original.real)
    if imag:
        np.testing.assert_array_equal(back.imag, original.imag)
    else:
        assert back.imag is None
    assert (back.nucleus, back.observe_mhz, back.n_scans, back.duration_s) == ("19F", 56.45, 8, 30.5)
    assert back.acquired_utc == original.acquired_utc
    assert back.header["title"] == "invented"
    assert not list(tmp_path.glob("*.tmp"))


def test_real_spectrum_through_csv(tmp_path):
    # Real data (tests/data/README.md) exported to CSV and read back unchanged.
    original = read(DATA / "ethyl-crotonate.1h.dx")
    back = read(write_csv(tmp_path / "crotonate.csv", original))
    np.testing.assert_array_equal(back.real, original.real)
    np.testing.assert_array_equal(back.ppm, original.ppm)
    assert back.acquired_utc == original.acquired_utc


@pytest.mark.parametrize("separator", ["\t", " ", ";", ", "])
def test_separators_and_ascending_axis(tmp_path, separator):
    rows = "\n".join(separator.join(f"{v:g}" for v in (p, 2 * p + 1)) for p in np.linspace(0, 5, 11))
    path = tmp_path / "t.txt"
    path.write_text(f"# observe_mhz = 80.0\n# nucleus: 1H\n{rows}\n")
    spectrum = read(path)
    assert spectrum.ppm[0] == 5.0  # stored high-to-low
    np.testing.assert_allclose(spectrum.real, 2 * spectrum.ppm + 1)


def test_named_columns_in_any_order(tmp_path):
    path = tmp_path / "n.csv"
    path.write_text("# observe_mhz: 60\nintensity,shift_ppm,imaginary\n5,3.0,1\n6,2.0,2\n7,1.0,3\n")
    spectrum = read(path)
    np.testing.assert_array_equal(spectrum.ppm, [3.0, 2.0, 1.0])
    np.testing.assert_array_equal(spectrum.real, [5, 6, 7])
    np.testing.assert_array_equal(spectrum.imag, [1, 2, 3])


def _error(tmp_path, text: str) -> InputFileError:
    path = tmp_path / "bad.csv"
    path.write_text(text)
    with pytest.raises(InputFileError) as info:
        read(path)
    assert str(path) in str(info.value) and not info.value.problem.startswith("unexpected")
    return info.value


GOOD = "# observe_mhz: 60\nppm,real\n3.0,1\n2.0,2\n1.0,3\n"


def test_errors_name_line_and_remedy(tmp_path):
    error = _error(tmp_path, GOOD.replace("2.0,2", "2.0,abc"))
    assert error.line == 4 and "non-numeric" in error.problem
    error = _error(tmp_path, GOOD.replace("2.0,2", "2.0,nan"))
    assert error.line == 4 and "NaN" in error.problem
    error = _error(tmp_path, GOOD.replace("2.0,2", "3.5,2"))
    assert error.line == 4 and "monotonic" in error.problem
    error = _error(tmp_path, GOOD.replace("# observe_mhz: 60\n", ""))
    assert "observe" in error.problem and "observe_mhz" in error.hint
    error = _error(tmp_path, GOOD.replace("2.0,2", "2.0,2,3"))
    assert error.line == 4 and "columns" in error.problem
    error = _error(tmp_path, "# observe_mhz: 60\n# acquired: yesterday\n1,2\n0,3\n")
    assert error.line == 2 and "ISO 8601" in error.problem
    assert "fewer than 2" in _error(tmp_path, "# observe_mhz: 60\n1,2\n").problem


def test_naive_time_taken_as_utc(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text(GOOD.replace("ppm,real", "# acquired: 2026-01-01T12:00:00\nppm,real"))
    assert read(path).acquired_utc == datetime(2026, 1, 1, 12, tzinfo=timezone.utc)


def test_csv_text_has_metadata_lines():
    text = csv_text(_spectrum(np.random.default_rng(2)))
    assert "# observe_mhz: 56.45" in text and "# acquired: 2026-02-03T04:05:06.789000+00:00" in text


def test_hostile_long_lines_do_not_hang(tmp_path):
    # A regular expression that backtracks quadratically would take hours on these lines.
    path = tmp_path / "long.csv"
    path.write_text("#" + " " * 200_000 + "x\n# observe_mhz:" + " " * 200_000 + "60\n1,2\n0,3\n")
    assert read(path).observe_mhz == 60.0
    path.write_text("# observe_mhz: 60\n" + "1" * 300_000 + ",2\n0,3\n")
    with pytest.raises(InputFileError):
        read(path)  # 1e300000 is infinite -> NaN/inf error, quickly


def test_format_specific_readers_refuse_the_other_format(tmp_path):
    from kinetics.spectra.delimited import read_delimited
    from kinetics.spectra.jcampdx import read_jcampdx

    csv_path = tmp_path / "s.csv"
    csv_path.write_text(GOOD)
    assert read_delimited(csv_path).n_points == 3
    with pytest.raises(InputFileError, match="not jcamp-dx"):
        read_jcampdx(csv_path)
    with pytest.raises(InputFileError, match="not delimited"):
        read_delimited(DATA / "ethyl-crotonate.1h.dx")
    assert read_jcampdx(DATA / "ethyl-crotonate.1h.dx").n_points == 16384


@pytest.mark.parametrize("text", [
    # Decimal commas as spreadsheets in comma-decimal locales export them (common practice):
    # with semicolons, with tabs, and whitespace-separated when every number has one.
    "# observe_mhz: 60\nppm;intensity\n3,5;1,25\n2,5;2\n1,5;-3e-1\n",
    "# observe_mhz: 60\n3,5\t1,25\n2,5\t2\n1,5\t-0,3\n",
    "# observe_mhz: 60\n3,5 1,25\n2,5 2\n1,5 -0,3\n",
])
def test_decimal_comma(tmp_path, text):
    path = tmp_path / "eu.csv"
    path.write_text(text)
    spectrum = read(path)
    np.testing.assert_array_equal(spectrum.ppm, [3.5, 2.5, 1.5])
    np.testing.assert_array_equal(spectrum.real, [1.25, 2.0, -0.3])


def test_column_names_with_units_and_words(tmp_path):
    # Names as instrument exports and spreadsheets write them; the order is taken from them.
    path = tmp_path / "named.tsv"
    path.write_text("# observe_mhz: 60\nIntensity (a.u.)\tImaginary part\tChemical shift [ppm]\n"
                    "5\t1\t3.0\n6\t2\t2.0\n7\t3\t1.0\n")
    spectrum = read(path)
    np.testing.assert_array_equal(spectrum.ppm, [3.0, 2.0, 1.0])
    np.testing.assert_array_equal(spectrum.real, [5, 6, 7])
    np.testing.assert_array_equal(spectrum.imag, [1, 2, 3])


def test_large_table_is_held_compactly(tmp_path):
    # 50 000 rows: parsing must not keep a Python string per line or a list per row
    # (~100-200 bytes a row, 10-30 times the file); the record's own arrays, the text and
    # the parse buffers stay below 10 times the file size.  numpy's and array's buffers
    # are reported to tracemalloc, so the measure covers them.
    import tracemalloc

    n = 50_000
    path = tmp_path / "big.csv"
    path.write_text("# observe_mhz: 60\n" + "".join(f"{10 - i * 1e-4:.4f},{i % 7}\n" for i in range(n)))
    tracemalloc.start()
    try:
        spectrum = read(path)
        _, peak_bytes = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert spectrum.n_points == n
    size = path.stat().st_size
    assert peak_bytes < 10 * size, (peak_bytes, size)
