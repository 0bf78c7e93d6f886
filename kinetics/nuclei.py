"""Nuclear constants and the unit conversions of the chemical-shift scale.

* Larmor frequency: nu = (gamma / 2 pi) * B0.
* Chemical shift: delta (ppm) = (nu - nu_ref) / nu_0 * 1e6, so 1 ppm is ``observe_mhz`` Hz.
* The old tau scale: tau = 10 - delta (common practice).

The 1H gyromagnetic ratio comes from CODATA through ``scipy.constants``.  Other nuclei
are scaled from it with the frequency ratios Xi of the IUPAC 2001 NMR nomenclature
recommendations (values from memory, marked so below): Xi is the resonance frequency of
the nucleus's reference compound as a percentage of the 1H frequency of TMS in the same
field.
"""

from __future__ import annotations

import math

from scipy import constants

from kinetics.errors import ConfigError

#: gamma / 2 pi of the proton in MHz/T (CODATA, via scipy.constants).
PROTON_MHZ_PER_TESLA: float = constants.physical_constants["proton gyromag. ratio in MHz/T"][0]

#: IUPAC 2001 frequency ratios Xi in percent (from memory).
FREQUENCY_RATIO_PERCENT: dict[str, float] = {
    "1H": 100.0,
    "2H": 15.350609,  # from memory
    "13C": 25.145020,  # from memory, TMS reference
    "19F": 94.094011,  # from memory, CCl3F reference
    "31P": 40.480742,  # from memory, 85 % H3PO4 reference
}


def _normalise(nucleus: str) -> str:
    name = nucleus.strip().lstrip("^").upper()
    for known in FREQUENCY_RATIO_PERCENT:
        if known.upper() == name:
            return known
    raise ConfigError(
        "nucleus",
        f"unknown nucleus {nucleus!r}",
        hint=f"use one of {', '.join(FREQUENCY_RATIO_PERCENT)}",
    )


def gyromagnetic_mhz_per_tesla(nucleus: str = "1H") -> float:
    """gamma / 2 pi in MHz/T for ``nucleus`` (1H from CODATA, others scaled by Xi)."""
    return PROTON_MHZ_PER_TESLA * FREQUENCY_RATIO_PERCENT[_normalise(nucleus)] / 100.0


def gyromagnetic_rad_per_s_per_tesla(nucleus: str = "1H") -> float:
    """gamma in rad s^-1 T^-1."""
    return 2.0 * math.pi * gyromagnetic_mhz_per_tesla(nucleus) * 1e6


def larmor_mhz(field_tesla: float, nucleus: str = "1H") -> float:
    """Larmor frequency nu = gamma B0 / 2 pi in MHz for a field in tesla."""
    return gyromagnetic_mhz_per_tesla(nucleus) * field_tesla


def field_tesla(frequency_mhz: float, nucleus: str = "1H") -> float:
    """Field B0 in tesla at which ``nucleus`` resonates at ``frequency_mhz``."""
    return frequency_mhz / gyromagnetic_mhz_per_tesla(nucleus)


def ppm_to_hz(shift_ppm, observe_mhz: float):
    """Offset in Hz from the reference for a shift in ppm (1 ppm = observe_mhz Hz)."""
    return shift_ppm * observe_mhz


def hz_to_ppm(offset_hz, observe_mhz: float):
    """Shift in ppm for an offset in Hz from the reference."""
    return offset_hz / observe_mhz


def shift_ppm(frequency_hz, reference_hz, observe_mhz: float):
    """delta = (nu - nu_ref) / nu_0 * 1e6 with nu_0 = observe_mhz * 1e6 Hz."""
    return (frequency_hz - reference_hz) / (observe_mhz * 1e6) * 1e6


def delta_to_tau(delta_ppm):
    """tau = 10 - delta (common practice)."""
    return 10.0 - delta_ppm


def tau_to_delta(tau_ppm):
    """delta = 10 - tau (common practice)."""
    return 10.0 - tau_ppm
