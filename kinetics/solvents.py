"""Residual and water lines of common NMR solvents (1H), and matching a line to them.

The table holds 1H shifts only: 19F and 31P spectra have no solvent background (the
common deuterated solvents hold neither nucleus), so nothing here applies to them
(:func:`kinetics.nuclei.has_solvent_background`).
"""

from __future__ import annotations

import re
from typing import Mapping

#: Residual and water lines of common NMR solvents, 1H, ppm from TMS, about 25 C.
#: Common practice, values from memory: they move by a few hundredths with temperature,
#: concentration and referencing (water lines by more), hence the tolerances.
SOLVENT_LINES = (
    ("CHCl3 in CDCl3", 7.26, 0.08, "CDCl3"),
    ("water in CDCl3", 1.56, 0.10, "CDCl3"),
    ("DMSO-d5 in DMSO-d6", 2.50, 0.05, "DMSO-d6"),
    ("water in DMSO-d6", 3.33, 0.10, "DMSO-d6"),
    ("HDO in D2O", 4.79, 0.10, "D2O"),
    ("water (H2O in an undeuterated aqueous solvent)", 4.75, 0.15, "H2O"),
    ("acetone-d5 in acetone-d6", 2.05, 0.05, "acetone-d6"),
    ("water in acetone-d6", 2.84, 0.10, "acetone-d6"),
    ("CHD2OD in CD3OD", 3.31, 0.05, "CD3OD"),
    ("HDO/OH in CD3OD", 4.87, 0.10, "CD3OD"),
    ("C6D5H in C6D6", 7.16, 0.05, "C6D6"),
    ("water in C6D6", 0.40, 0.10, "C6D6"),
    ("CHD2CN in CD3CN", 1.94, 0.05, "CD3CN"),
    ("water in CD3CN", 2.13, 0.10, "CD3CN"),
    ("CHDCl2 in CD2Cl2", 5.32, 0.05, "CD2Cl2"),
)


def solvent_key(text: str) -> str:
    return re.sub(r"[^a-z0-9]", "", str(text).lower())


def solvent_match(shift_ppm: float, dominant: bool, solvent: str | None = None) -> tuple[str, float] | None:
    """The common solvent line nearest ``shift_ppm`` within its tolerance
    (:data:`SOLVENT_LINES`, from memory): (label, tabulated ppm), or None.  Only the lines
    of ``solvent`` count when it is known (e.g. the JCAMP-DX ``.SOLVENT NAME``); water
    lines also match a dominant line with twice their tolerance."""
    best = None
    for label, where, tolerance, system in SOLVENT_LINES:
        if solvent and solvent_key(system) != solvent_key(solvent) and not (dominant and system == "H2O"):
            continue
        reach = tolerance * (2.0 if dominant and ("water" in label or "HDO" in label) else 1.0)
        distance = abs(shift_ppm - where)
        if distance <= reach and (best is None or distance / reach < best[0]):
            best = (distance / reach, label, where)
    return None if best is None else (best[1], best[2])


def solvent_label(shift_ppm: float, dominant: bool, solvent: str | None = None) -> str | None:
    """:func:`solvent_match` as text: ``"CHCl3 in CDCl3 (7.26 ppm, from memory)"``."""
    match = solvent_match(shift_ppm, dominant, solvent)
    return None if match is None else f"{match[0]} ({match[1]:.2f} ppm, from memory)"


def solvent_named(header: Mapping[str, str]) -> str | None:
    """The solvent a file names (JCAMP-DX ``.SOLVENT NAME``), when it is in the table."""
    for key, value in header.items():
        if solvent_key(key) == "solventname":
            wanted = solvent_key(value)
            for *_, system in SOLVENT_LINES:
                if solvent_key(system) == wanted:
                    return system
    return None


__all__ = ["SOLVENT_LINES", "solvent_key", "solvent_label", "solvent_match", "solvent_named"]
