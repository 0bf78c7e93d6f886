"""Roles of the multiplets of a proposal: the reference, solvent lines and the reference
candidate, by nucleus.

* 1H (and 13C): a TMS-like line at 0 ppm is the reference; a line ``DOMINANT_FACTOR``
  times taller than the rest is a solvent (water, an undeuterated solvent), and small
  unchanging lines at a residual-solvent shift are solvent lines (:mod:`kinetics.solvents`).
* 19F and 31P have no solvent background: no solvent roles.  A compound commonly used as
  their reference (CCl3F, H3PO4 or a tabulated internal reference such as PhCF3,
  :mod:`kinetics.nuclei`, values from memory) is named when an isolated unchanging singlet
  sits at its shift.
* Otherwise the sharpest isolated unchanging singlet is the reference candidate.
"""

from __future__ import annotations

import math

import numpy as np

from kinetics.nuclei import ReferenceCompound, has_solvent_background, internal_reference_near, scale_reference
from kinetics.proposals.records import Group, ProposedWindow
from kinetics.signals.lines import DOMINANT_FACTOR, Peak
from kinetics.solvents import SOLVENT_LINES, solvent_label, solvent_match


def _is_scale_reference(group: list[Peak], compound: ReferenceCompound | None) -> bool:
    """A group at the zero of the nucleus's scale (TMS-like for 1H): its tallest line within
    the compound's tolerance (0.15 ppm for TMS) and carrying most of the group's height
    (at high field the 29Si satellites of TMS join the group)."""
    if compound is None:
        return False
    tallest = max(group, key=lambda p: p.height)
    return (abs(tallest.shift_ppm - compound.shift_ppm) <= compound.tolerance_ppm and len(group) <= 3
            and tallest.height >= 0.7 * sum(p.height for p in group))


def assign_roles(groups: list[Group], solvent: str | None, nucleus: str) -> None:
    """Reference (TMS for 1H and 13C), dominant and residual solvent lines (see the module
    docstring); a nucleus without solvent background (19F, 31P) gets no solvent lines."""
    compound = scale_reference(nucleus)
    found = [g for g in groups if compound is not None and compound.added and _is_scale_reference(g.lines, compound)]
    if found:
        reference = max(found, key=lambda g: g.top)
        reference.role = "reference"
        reference.label = f"{compound.name}-like line near {compound.shift_ppm:g} ppm"
    if not has_solvent_background(nucleus):
        return
    ranked = sorted((g for g in groups if g.role == "signal"), key=lambda g: g.top, reverse=True)
    if len(ranked) >= 2 and ranked[0].top > DOMINANT_FACTOR * ranked[1].top:
        dominant = ranked[0]
        dominant.role = "solvent"
        name = solvent_label(dominant.centre_ppm, dominant=True, solvent=solvent)
        dominant.label = name or "a dominant line, far taller than the rest: an undeuterated solvent?"


def residual_solvents(groups: list[Group], integrals: list[float], cutoff: float, observe_mhz: float,
                       solvent: str | None) -> None:
    """Small, unchanging singlet-like lines at a residual solvent shift, all of one solvent
    (the file's, else the one whose line matches best)."""
    candidates = []
    for group, integral in zip(groups, integrals):
        if group.role != "signal" or integral >= cutoff:
            continue
        span_hz = (group.lines[0].shift_ppm - group.lines[-1].shift_ppm) * observe_mhz
        steady = group.change is None or 0.7 <= group.change <= 1.4
        if span_hz <= 12.0 and steady and group.pattern.code in ("s", "quint", "m"):
            candidates.append(group)
    if solvent is None:
        scored = []
        for group in candidates:
            for label, where, tolerance, system in SOLVENT_LINES:
                if abs(group.centre_ppm - where) <= tolerance and system != "H2O":
                    scored.append((abs(group.centre_ppm - where) / tolerance, system))
        if not scored:
            return
        solvent = min(scored)[1]
    for group in candidates:
        match = solvent_match(group.centre_ppm, dominant=False, solvent=solvent)
        if match:
            group.role = "solvent"
            group.label = f"residual solvent: {match[0]} ({match[1]:.2f} ppm, from memory)"
            if group.pattern.code == "s" and "water" not in match[0] and "HDO" not in match[0]:
                group.expected_ppm = match[1]  # a residual CHCl3-type singlet can set the scale


def pick_reference_candidate(groups: list[Group], observe_mhz: float, nucleus: str) -> None:
    """The sharpest isolated singlet that does not change (a standard or reference?).

    For 19F and 31P a singlet at the shift of a compound commonly used as a reference
    (:data:`kinetics.nuclei.INTERNAL_REFERENCES`, or the scale's own zero, CCl3F or
    H3PO4; from memory) is preferred, and its tabulated shift proposed as the target."""
    if any(g.role == "reference" for g in groups):
        return
    positions = [(p.shift_ppm, g) for g in groups for p in g.lines]
    widths = [p.width_hz for g in groups for p in g.lines]
    typical = float(np.median(widths)) if widths else 0.0
    candidates = []
    for group in groups:
        if group.role != "signal" or group.pattern.code != "s" or group.mixed:
            continue
        line = group.lines[0]
        nearest = min((abs(x - line.shift_ppm) for x, g in positions if g is not group), default=math.inf)
        if nearest < max(0.2, 15.0 / observe_mhz) or line.width_hz > 1.5 * typical:
            continue
        if group.change is not None and not 0.8 <= group.change <= 1.25:
            continue
        candidates.append((line.snr / max(line.width_hz, 1e-9), group, _named_reference(line.shift_ppm, nucleus)))
    named = [c for c in candidates if c[2] is not None]
    if named or candidates:
        _, chosen, compound = max(named or candidates, key=lambda c: c[0])
        chosen.reference_candidate = True
        steady = " that does not change" if chosen.change is not None else ""
        if compound is None:
            chosen.label = f"sharp isolated singlet{steady}: a reference or internal standard?"
        else:
            chosen.expected_ppm = compound.shift_ppm
            chosen.label = (f"sharp isolated singlet{steady} at the shift of {compound.description} "
                            f"({compound.name}, {compound.shift_ppm:g} ppm, from memory): a reference "
                            "or internal standard?")


def _named_reference(shift_ppm: float, nucleus: str) -> ReferenceCompound | None:
    """A compound commonly used as a reference of ``nucleus`` at ``shift_ppm`` (within its
    tolerance): a tabulated internal reference, or the scale's zero when it is not usually
    added to the sample (CCl3F, H3PO4); None for 1H, whose TMS is taken as it."""
    compound = scale_reference(nucleus)
    if compound is not None and not compound.added and abs(shift_ppm - compound.shift_ppm) <= compound.tolerance_ppm:
        return compound
    return internal_reference_near(nucleus, shift_ppm)


def named_reference_offset(windows: list[ProposedWindow]) -> float | None:
    """Tabulated minus found shift of a reference candidate named from the nucleus's table
    of references (19F, 31P; :func:`pick_reference_candidate`), or None without one."""
    if any(w.role == "reference" for w in windows):
        return None
    candidate = next((w for w in windows if w.reference_candidate and w.expected_ppm is not None), None)
    if candidate is None:
        return None
    return float(candidate.expected_ppm - candidate.peaks[0].shift_ppm)

__all__ = ["assign_roles", "named_reference_offset", "pick_reference_candidate", "residual_solvents"]
