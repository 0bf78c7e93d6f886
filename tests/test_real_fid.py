"""The real FID tests/data/ethyl-crotonate.1h.fid.dx through the whole processing chain.

Source: cheminfo nmr-dataset1 (MIT licence; tests/data/README.md): ethyl (E)-but-2-enoate
in CDCl3, 500.13 MHz, 8192 complex points, digital-filter delay not stated in the file
(so a large first-order phase unless it is found from the FID's rising edge).  Beside it,
the instrument's own processed spectrum ethyl-crotonate.1h.dx.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from kinetics import processing as P
from kinetics.spectra.reader import read

DATA = Path(__file__).parent / "data"
# (high ppm, low ppm, protons) from tests/data/README.md; proton counts from the structure
GROUPS = [(7.02, 6.80, 1), (5.86, 5.66, 1), (4.20, 4.00, 2), (1.86, 1.74, 3), (1.27, 1.13, 3)]
# residual CHCl3 in CDCl3 at 7.26 ppm (from memory; common practice for referencing)
CHCL3 = {"ppm": 7.26, "window_ppm": 0.1}


@pytest.fixture(scope="module")
def fid():
    return read(DATA / "ethyl-crotonate.1h.fid.dx")


@pytest.fixture(scope="module")
def processed(fid):
    return P.Pipeline.from_config({"reference": CHCL3})(fid)


def per_proton(spectrum):
    values = np.array([spectrum.real[(spectrum.ppm <= hi) & (spectrum.ppm >= lo)].sum() / n
                       for hi, lo, n in GROUPS])
    return values / values.mean()


def test_fid_imports_with_its_rising_edge(fid):
    assert type(fid).__name__ == "Fid"
    assert fid.n_points == 8192
    assert fid.observe_mhz == pytest.approx(500.13, abs=0.01)
    assert fid.group_delay_points == 0  # not declared in the file
    delay = P.detect_group_delay(fid)
    # the rising edge of this file sits between points 71 and 72 (inspected by eye)
    assert 70.5 < delay < 73.0


def test_transforms_phases_and_references(processed):
    assert processed.succeeded, processed.notes
    spectrum = processed.spectrum
    assert spectrum.n_points == 16384
    assert any("digital-filter delay" in note for note in processed.notes)
    # after removing ~72 points of delay the remaining first-order phase is under a point
    assert abs(processed.p1_deg) < 360
    # CHCl3 was found near 7.225 (the file's own axis) and moved to 7.26
    assert processed.reference_shift_ppm == pytest.approx(0.035, abs=0.01)
    # upright: the tallest excursion is positive and the baseline far from lines is flat
    assert spectrum.real.max() > 50 * abs(np.median(spectrum.real[(spectrum.ppm < 9) & (spectrum.ppm > 7.5)]))
    assert spectrum.real.max() > 10 * -spectrum.real.min()


def test_five_groups_appear_in_their_windows(processed):
    # Issue check: after auto-phasing and referencing, the groups appear in the listed
    # windows: the tallest point of each window is a real line (well above the noise and
    # not at the window's edge).
    spectrum = processed.spectrum
    sigma = P.noise_sigma(spectrum, (8.8, 7.6))
    for hi, lo, _ in GROUPS:
        inside = (spectrum.ppm <= hi) & (spectrum.ppm >= lo)
        peak_ppm = spectrum.ppm[inside][np.argmax(spectrum.real[inside])]
        assert lo + 0.01 < peak_ppm < hi - 0.01
        assert spectrum.real[inside].max() > 200 * sigma


def test_peak_positions_match_the_instruments_processed_spectrum(processed):
    # Reference: the instrument's processed spectrum of the same FID (ethyl-crotonate.1h.dx),
    # referenced the same way; the tallest line of each group agrees within 0.5 Hz.
    reference = P.reference(read(DATA / "ethyl-crotonate.1h.dx"), **{
        "peak_ppm": CHCL3["ppm"], "window_ppm": CHCL3["window_ppm"]}).spectrum
    for hi, lo, _ in GROUPS:
        centre, half = (hi + lo) / 2, (hi - lo) / 2
        ours = P.peak_position(processed.spectrum, centre, half)
        theirs = P.peak_position(reference, centre, half)
        assert abs(ours - theirs) * 500.13 < 0.5


def test_integral_ratios_come_close_to_the_proton_counts(fid, processed):
    # Issue aim: per-proton integrals within 10 % of 1:1:2:3:3.  Achieved (measured when
    # written): default pipeline within 4 % (0.96, 0.96, 1.02, 1.02, 1.04), with an arpls
    # baseline within 2.5 %.  The instrument's own spectrum gives 0.95-1.04 with the same
    # windows.  The remaining spread (olefinic low, methyls high) looks like partial
    # saturation of the slower-relaxing olefinic protons, not processing.
    assert np.all(np.abs(per_proton(processed.spectrum) - 1) < 0.05)
    with_baseline = P.Pipeline.from_config({"reference": CHCL3, "baseline": {"method": "arpls", "lam": 1e9}})(fid)
    assert np.all(np.abs(per_proton(with_baseline.spectrum) - 1) < 0.03)
