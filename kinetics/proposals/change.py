"""The first and the last spectrum of a series compared: drift, lines that appear, change
of height, and placeholder species by behaviour (falls, rises, steady)."""

from __future__ import annotations

import math

import numpy as np

from kinetics.proposals.records import Group
from kinetics.signals.lines import Peak
from kinetics.signals.multiplets import SIMPLE_PATTERNS, tolerance_hz
from kinetics.spectra.spectrum import Spectrum


def _series_offset_ppm(first: list[Group], later: list[Group], observe_mhz: float) -> float:
    """Shift of the later spectrum against the first (field drift): the offset, within
    0.03 ppm, that lines up the most line height of the two spectra (their 40 tallest lines)."""
    def tallest(groups):
        lines = sorted((p for g in groups for p in g.lines), key=lambda p: -p.height)[:40]
        return np.array([p.shift_ppm for p in lines]), np.array([p.height for p in lines])

    (xa, ha), (xb, hb) = tallest(first), tallest(later)
    if xa.size == 0 or xb.size == 0:
        return 0.0
    differences = xb[None, :] - xa[:, None]
    pair_height = np.minimum(ha[:, None], hb[None, :])
    tolerance = 0.5 / observe_mhz
    best, best_score = 0.0, 0.0
    for offset in differences[np.abs(differences) <= 0.03]:
        score = float(pair_height[np.abs(differences - offset) <= tolerance].sum())
        if score > best_score * 1.000001:
            best, best_score = float(offset), score
    return best


def local_heights(spectrum: Spectrum, lines: list[Peak], offset_ppm: float, margin_ppm: float) -> float:
    """Summed height of ``lines`` above a straight line through the lowest point on each
    side (between two line widths and ``margin_ppm`` beyond the outer lines), so a solvent
    tail or a neighbour's flank is not counted as change."""
    width_ppm = max(p.width_hz for p in lines) / spectrum.observe_mhz
    ends = []
    for start, stop in ((lines[0].shift_ppm + 2 * width_ppm, lines[0].shift_ppm + margin_ppm),
                        (lines[-1].shift_ppm - margin_ppm, lines[-1].shift_ppm - 2 * width_ppm)):
        lo, hi = min(start, stop) + offset_ppm, max(start, stop) + offset_ppm
        inside = np.flatnonzero((spectrum.ppm >= lo) & (spectrum.ppm <= hi))
        if inside.size == 0:
            inside = np.array([spectrum.index_of(0.5 * (lo + hi))])
        k = inside[np.argmin(spectrum.real[inside])]
        ends.append((float(spectrum.ppm[k]), float(spectrum.real[k])))
    (x_high, v_high), (x_low, v_low) = ends
    total = 0.0
    for line in lines:
        x = line.shift_ppm + offset_ppm
        value = float(np.interp(-x, -spectrum.ppm, spectrum.real))
        total += value - (v_low + (v_high - v_low) * (x - x_low) / (x_high - x_low))
    return total


def near_any(peak: Peak, lines: list[Peak], observe_mhz: float) -> bool:
    return any(abs(peak.shift_ppm - p.shift_ppm) * observe_mhz <= 1.5 for p in lines)


def merge_series(first: list[Group], later: list[Group], observe_mhz: float,
                  resolution_hz: float) -> tuple[list[Group], float]:
    """Multiplets of the first and the last spectrum as one list.

    A multiplet of the last spectrum that overlaps none of the first appeared during the
    series (``change`` = inf); one whose lines all match lines of the one multiplet it
    overlaps (or the other way round) is the same signal; anything else means the lines of
    two species overlap there (``mixed``: left out of the draft).  Also returns the drift
    offset of the last spectrum (ppm).
    """
    offset = _series_offset_ppm(first, later, observe_mhz)
    merged = [Group(list(g.lines), g.pattern, g.role, g.label, change=1.0) for g in first]
    appeared = []
    for group in later:
        lines = [Peak(p.shift_ppm - offset, p.height, p.width_hz, p.snr) for p in group.lines]
        reach = max(float(np.median([p.width_hz for p in lines])), 1.0) / observe_mhz
        overlapping = [g for g in merged
                       if lines[-1].shift_ppm - reach <= g.lines[0].shift_ppm
                       and g.lines[-1].shift_ppm <= lines[0].shift_ppm + reach]
        if not overlapping:
            appeared.append(Group(lines, group.pattern, change=math.inf))
            continue
        tol_ppm = 2.0 * tolerance_hz(lines, resolution_hz) / observe_mhz
        if len(overlapping) == 1:
            # the same signal when one line list holds the other (a shrinking multiplet
            # loses its outer lines below the threshold; a growing one gains them)
            old = overlapping[0]
            small, large = sorted((lines, old.lines), key=len)
            if all(any(abs(a.shift_ppm - b.shift_ppm) <= tol_ppm for b in large) for a in small):
                if len(lines) > len(old.lines):
                    old.lines, old.pattern = lines, group.pattern
                continue
        for g in overlapping:
            if g.role == "signal":
                g.mixed = True
    everything = sorted(merged + appeared, key=lambda g: -g.lines[0].shift_ppm)
    return everything, offset


def _fall_alike(a: float, b: float) -> bool:
    return abs(a - b) <= 0.05 + 0.15 * max(a, b)


def placeholder_species(windows: list[dict]) -> None:
    """Placeholder species by behaviour: falling signals whose heights fall alike share one
    (not a crowded multiplet the line shapes cannot model: it keeps its own, so it cannot
    bias the other signals, but its ``cluster`` still names the partners that share its
    concentration, for the nuclei guess)."""
    counters = {"falls": 0, "rises": 0, "steady": 0, "species": 0}
    falling: list[tuple[float, str]] = []
    deferred = []
    for window in windows:
        change = window["change"]
        if change is None:
            kind = "species"
        elif change < 0.8:
            kind = "falls"
            if window["crowded"] and window["group"].pattern.code not in SIMPLE_PATTERNS:
                deferred.append(window)
                continue
            match = next((name for ratio, name in falling if _fall_alike(ratio, change)), None)
            if match:
                window["species"] = match
                continue
        elif change > 1.25:
            kind = "rises"
        else:
            kind = "steady"
        counters[kind] += 1
        window["species"] = f"{kind}_{counters[kind]}"
        if kind == "falls":
            falling.append((change, window["species"]))
    for window in deferred:
        counters["falls"] += 1
        window["species"] = f"falls_{counters['falls']}"
        window["cluster"] = next((name for ratio, name in falling if _fall_alike(ratio, window["change"])),
                                 window["species"])


__all__ = ["local_heights", "merge_series", "near_any", "placeholder_species"]
