import math

import pytest
from scipy import constants

from kinetics import nuclei
from kinetics.errors import ConfigError


def test_proton_larmor_at_1p4_tesla():
    # CODATA gamma/2pi (scipy.constants): 42.577 MHz/T * 1.4 T = 59.61 MHz.
    assert nuclei.larmor_mhz(1.4) == pytest.approx(59.61, abs=0.01)
    # A 1.4 T magnet is sold as a "60 MHz" instrument (common practice).
    assert round(nuclei.larmor_mhz(1.4) / 10) * 10 == 60


def test_gyromagnetic_ratio_matches_scipy_constants():
    gamma = constants.physical_constants["proton gyromag. ratio"][0]  # rad s^-1 T^-1
    assert nuclei.gyromagnetic_rad_per_s_per_tesla("1H") == pytest.approx(gamma, rel=1e-9)


def test_field_for_frequency_round_trip():
    assert nuclei.field_tesla(nuclei.larmor_mhz(2.35)) == pytest.approx(2.35)


def test_carbon13_at_proton_400_mhz():
    # IUPAC 2001 Xi(13C) = 25.145020 % (from memory): 13C at a "400 MHz" magnet is ~100.6 MHz.
    b0 = nuclei.field_tesla(400.0)
    assert nuclei.larmor_mhz(b0, "13C") == pytest.approx(100.58, abs=0.01)
    assert nuclei.larmor_mhz(b0, "^19F") == pytest.approx(376.38, abs=0.01)


def test_ppm_hz_at_60_mhz():
    # At 60 MHz one ppm is 60 Hz, so a 7 Hz coupling spans 0.1167 ppm.
    assert nuclei.ppm_to_hz(1.0, 60.0) == pytest.approx(60.0)
    assert nuclei.hz_to_ppm(7.0, 60.0) == pytest.approx(0.11667, abs=1e-4)
    assert nuclei.shift_ppm(60.0e6 + 120.0, 60.0e6, 60.0) == pytest.approx(2.0)


def test_tau_scale():
    # tau = 10 - delta (common practice); TMS is delta 0 = tau 10.
    assert nuclei.delta_to_tau(0.0) == 10.0
    assert nuclei.delta_to_tau(7.27) == pytest.approx(2.73)
    assert nuclei.tau_to_delta(nuclei.delta_to_tau(3.3)) == pytest.approx(3.3)


def test_unknown_nucleus_is_config_error():
    with pytest.raises(ConfigError, match="nucleus"):
        nuclei.larmor_mhz(1.0, "7Q")
    assert math.isfinite(nuclei.larmor_mhz(1.0, "31p"))
