"""Nuclear constants and the unit conversions of the chemical-shift scale.

* Larmor frequency: nu = (gamma / 2 pi) * B0.
* Chemical shift: delta (ppm) = (nu - nu_ref) / nu_0 * 1e6, so 1 ppm is ``observe_mhz`` Hz.
* The old tau scale: tau = 10 - delta (common practice).
* The zero of each nucleus's shift scale (:data:`SCALE_REFERENCES`) and compounds commonly
  added as internal references (:data:`INTERNAL_REFERENCES`); :func:`known_nucleus`
  names a nucleus without raising, for data read from files.

The 1H gyromagnetic ratio comes from CODATA through ``scipy.constants``.  Other nuclei
are scaled from it with the frequency ratios Xi of the IUPAC 2001 NMR nomenclature
recommendations (values from memory, marked so below): Xi is the resonance frequency of
the nucleus's reference compound as a percentage of the 1H frequency of TMS in the same
field.
"""

from __future__ import annotations

import math

from dataclasses import dataclass

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


def known_nucleus(nucleus: str | None) -> str | None:
    """The table's spelling of ``nucleus`` ("^19F", "19f", " 31P" -> "19F", "31P"), or None
    when the nucleus is not in :data:`FREQUENCY_RATIO_PERCENT`."""
    name = str(nucleus or "").replace(" ", "").lstrip("^").upper()
    return next((known for known in FREQUENCY_RATIO_PERCENT if known.upper() == name), None)


def _normalise(nucleus: str) -> str:
    known = known_nucleus(nucleus)
    if known is not None:
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


# ---------------------------------------------------------------- references of the shift scale
@dataclass(frozen=True)
class ReferenceCompound:
    """A compound whose line marks a known shift of one nucleus's scale.

    Attributes
    ----------
    nucleus : str
    name : str
        Short name as written in configs and messages (``"TMS"``, ``"CCl3F"``).
    description : str
    shift_ppm : float
        Its shift on the nucleus's scale (0 for the scale's own reference).
    tolerance_ppm : float
        How far a line may lie from ``shift_ppm`` and still be proposed as this compound
        (solvent, concentration and temperature move internal references).
    added : bool
        Commonly added to the sample itself (TMS), so a line at its shift is taken as it;
        False for a compound usually kept out of the sample (85 % H3PO4 in a capillary, the
        volatile CCl3F replaced by a secondary reference; common practice), whose line
        is only proposed.
    """

    nucleus: str
    name: str
    description: str
    shift_ppm: float
    tolerance_ppm: float
    added: bool = False


#: The zero of each shift scale.  Conventions of the IUPAC 2001 and 2008 NMR nomenclature
#: recommendations, from memory: 1H, 13C and 29Si TMS (2H its deuterated form); 19F
#: CCl3F; 31P 85 % H3PO4 (used as an external reference: it is not added to a reaction).
SCALE_REFERENCES: dict[str, ReferenceCompound] = {
    "1H": ReferenceCompound("1H", "TMS", "tetramethylsilane", 0.0, 0.15, added=True),
    "2H": ReferenceCompound("2H", "TMS-d12", "tetramethylsilane-d12", 0.0, 0.15, added=True),
    "13C": ReferenceCompound("13C", "TMS", "tetramethylsilane", 0.0, 0.5, added=True),
    "19F": ReferenceCompound("19F", "CCl3F", "trichlorofluoromethane", 0.0, 0.5),
    "31P": ReferenceCompound("31P", "H3PO4", "85 % phosphoric acid (external)", 0.0, 0.5),
}

#: Compounds commonly added to 19F and 31P samples as internal references or standards:
#: shifts on the scale of :data:`SCALE_REFERENCES`, values from memory (common practice;
#: they move by tenths of a ppm, trifluoroacetic acid by more, with solvent and
#: concentration, hence the tolerances).  ``kinetics init`` only proposes them.
INTERNAL_REFERENCES: tuple[ReferenceCompound, ...] = (
    ReferenceCompound("19F", "PhCF3", "alpha,alpha,alpha-trifluorotoluene", -63.72, 0.5),
    ReferenceCompound("19F", "C6F6", "hexafluorobenzene", -164.9, 0.6),
    ReferenceCompound("19F", "TFA", "trifluoroacetic acid", -76.55, 1.5),
    ReferenceCompound("19F", "PhF", "fluorobenzene", -113.15, 0.6),
    ReferenceCompound("31P", "PPh3O", "triphenylphosphine oxide", 29.1, 1.0),
    ReferenceCompound("31P", "(MeO)3PO", "trimethyl phosphate", 2.1, 1.0),
    ReferenceCompound("31P", "(PhO)3PO", "triphenyl phosphate", -17.7, 1.0),
    ReferenceCompound("31P", "PPh3", "triphenylphosphine", -5.4, 1.0),
)

#: Nuclei whose spectra show the solvent (residual protons, water, solvent carbons); 19F
#: and 31P spectra have no solvent background in the common deuterated solvents.
_SOLVENT_BACKGROUND = ("1H", "2H", "13C")


#: Largest coupling expected inside one multiplet of each nucleus's spectrum, Hz (values
#: from memory, common practice): 1H, H-H couplings up to 12-18 Hz (trans-alkene, geminal)
#: plus 10 % for digitisation; 19F, geminal 2J(H,F) of a CHF2 or CH2F group is about
#: 45-57 Hz and 19F-19F couplings of aromatic and CF3/CF2 groups stay below that; 31P,
#: 2J(P,P), 2J/3J(P,H) and 3J(P,F) below about 30 Hz (the one-bond P-H coupling of several
#: hundred Hz is left to the user: such a doublet is drafted as two lines).
_LARGEST_COUPLING_HZ = {"1H": 18.0, "2H": 18.0, "19F": 60.0, "31P": 30.0}


def largest_coupling_hz(nucleus: str) -> float:
    """Largest coupling one multiplet of ``nucleus`` may hold (Hz; 18 Hz for a nucleus not
    in the table, the 1H value)."""
    return _LARGEST_COUPLING_HZ.get(known_nucleus(nucleus) or "", 18.0)


def bare_doublets_span_couplings(nucleus: str) -> bool:
    """True when two lone lines of equal height within the largest coupling are more likely
    one doublet than two species: 19F and 31P, whose shifts spread over hundreds of ppm, so
    that unrelated lines seldom fall within 60 Hz of each other (common practice).  In
    crowded 1H spectra two such lines stay two singlets."""
    return known_nucleus(nucleus) in ("19F", "31P")


def scale_reference(nucleus: str) -> ReferenceCompound | None:
    """The compound at 0 ppm of ``nucleus``'s scale (None for a nucleus not in the table)."""
    return SCALE_REFERENCES.get(known_nucleus(nucleus) or "")


def internal_references(nucleus: str) -> tuple[ReferenceCompound, ...]:
    """Compounds proposed as internal references for ``nucleus`` (from memory)."""
    known = known_nucleus(nucleus)
    return tuple(r for r in INTERNAL_REFERENCES if r.nucleus == known)


def internal_reference_near(nucleus: str, shift_ppm: float) -> ReferenceCompound | None:
    """The tabulated internal reference of ``nucleus`` nearest ``shift_ppm`` within its
    tolerance, or None."""
    near = [r for r in internal_references(nucleus) if abs(r.shift_ppm - shift_ppm) <= r.tolerance_ppm]
    return min(near, key=lambda r: abs(r.shift_ppm - shift_ppm) / r.tolerance_ppm, default=None)


def has_solvent_background(nucleus: str) -> bool:
    """True for nuclei whose spectra show solvent lines (1H, 2H, 13C, and any nucleus not in
    the table, to stay on the safe side); False for 19F and 31P."""
    known = known_nucleus(nucleus)
    return known is None or known in _SOLVENT_BACKGROUND
