"""Proposed signal windows of one spectrum or of a series' first and last (no files touched).

* **Windows.**  Several line widths beyond the outer lines (a Lorentzian window of +/- m
  half-widths holds (2/pi) arctan(m) of the area), never past the midpoint to the next
  multiplet; simple multiplets too close for that are proposed as one deconvolution group.
* Roles (:mod:`kinetics.proposals.roles`), change through the series
  (:mod:`kinetics.proposals.change`) and nuclei (:mod:`kinetics.proposals.nuclei_count`)
  are assembled here into :class:`~kinetics.proposals.records.ProposedWindow` records.
"""

from __future__ import annotations

import math

import numpy as np

from kinetics.nuclei import bare_doublets_span_couplings, has_solvent_background, largest_coupling_hz
from kinetics.proposals.change import local_heights, merge_series, near_any, placeholder_species
from kinetics.proposals.nuclei_count import nuclei_unit, whole_number_misfit
from kinetics.proposals.records import Group, ProposedWindow
from kinetics.proposals.roles import assign_roles, pick_reference_candidate, residual_solvents
from kinetics.signals.lines import Peak, pick_peaks
from kinetics.signals.multiplets import SIMPLE_PATTERNS, group_peaks
from kinetics.solvents import solvent_named
from kinetics.spectra.spectrum import Spectrum

_MINOR_FRACTION = 0.3        # signals below this share of the median integral are "minor"


def _window_bounds(groups: list[list[Peak]], observe_mhz: float, margin_hz: float,
                   ppm_range: tuple[float, float]) -> tuple[list[tuple[float, float]], list[bool]]:
    """Windows [low, high] with the full margin unless a neighbour is nearer; the second
    list says whether a window was cut short by a neighbour (crowded)."""
    high_edge, low_edge = ppm_range
    bounds, crowded = [], []
    for number, group in enumerate(groups):
        margin_ppm = _margin_ppm(group, observe_mhz, margin_hz)
        high = group[0].shift_ppm + margin_ppm
        low = group[-1].shift_ppm - margin_ppm
        cut = False
        if number > 0:  # stop short of the midpoint to the previous (higher) group
            limit = 0.5 * (groups[number - 1][-1].shift_ppm + group[0].shift_ppm) - 0.5 / observe_mhz
            cut |= limit < high
            high = min(high, limit)
        if number + 1 < len(groups):
            limit = 0.5 * (group[-1].shift_ppm + groups[number + 1][0].shift_ppm) + 0.5 / observe_mhz
            cut |= limit > low
            low = max(low, limit)
        bounds.append((max(low, low_edge), min(high, high_edge)))
        crowded.append(cut)
    return bounds, crowded


def _margin_ppm(group: list[Peak], observe_mhz: float, margin_hz: float) -> float:
    width_hz = float(np.median([p.width_hz for p in group]))
    return max(margin_hz, 6.0 * width_hz) / observe_mhz


def _integral(spectrum: Spectrum, low: float, high: float) -> float:
    """Window sum above a straight line through its outer 10 % on each side (as the
    region integrals do), so a solvent tail does not inflate the nuclei guess."""
    inside = np.flatnonzero((spectrum.ppm >= low) & (spectrum.ppm <= high))
    if inside.size < 5:
        return 0.0
    values = spectrum.real[inside]
    edge = max(1, inside.size // 10)
    left, right = values[:edge].mean(), values[-edge:].mean()
    line = np.linspace(left, right, values.size)
    return float(np.sum(values - line) * spectrum.spacing_ppm)


def _lorentzian(ppm: np.ndarray, peak: Peak, observe_mhz: float) -> np.ndarray:
    half_width_ppm = 0.5 * max(peak.width_hz, 1e-6) / observe_mhz
    return peak.height / (1.0 + ((ppm - peak.shift_ppm) / half_width_ppm) ** 2)


def _tail_reach_ppm(peak: Peak, noise: float, observe_mhz: float, cap_ppm: float) -> float:
    """Distance at which a Lorentzian line's tail falls to 3 noise sigmas (at most cap)."""
    ratio = peak.height / max(3.0 * noise, 1e-300)
    reach_hz = 0.5 * peak.width_hz * math.sqrt(max(ratio - 1.0, 0.0))
    return min(cap_ppm, max(reach_hz / observe_mhz, 0.1))


def propose_windows(spectrum: Spectrum, *, later: Spectrum | None = None, snr_threshold: float = 8.0,
                    coupling_hz: float = 8.0, gap_factor: float = 1.6, margin_hz: float = 10.0,
                    min_relative_height: float = 0.02, large_coupling_hz: float | None | str = "nucleus"):
    """Peaks, noise and proposed windows of one spectrum, or of a series' first and last
    (no files touched).

    Parameters
    ----------
    spectrum : Spectrum
        The first spectrum of the series.
    later : Spectrum, optional
        The last spectrum: lines that appear are added, changes recorded.
    snr_threshold : float
        Lines below this many noise sigmas are ignored.
    min_relative_height : float
        Lines below this fraction of the tallest (non-solvent) line are ignored.
    coupling_hz : float
        Largest spacing between adjacent lines of an unexplained cluster "m", Hz.
    gap_factor : float
        Adjacent lines of an "m" lie within ``gap_factor * coupling_hz``.
    large_coupling_hz : float, None or "nucleus"
        Largest coupling of a recognised pattern (x 1.1); None: ``gap_factor * coupling_hz``;
        "nucleus" (default): :func:`kinetics.nuclei.largest_coupling_hz` of the spectrum's
        nucleus (18 Hz for 1H, 60 Hz for 19F, whose CHF2 doublets span about 56 Hz).
    margin_hz : float
        Least margin beyond the outer lines of a window (6 line widths when wider), Hz.

    Returns
    -------
    peaks : list of Peak
    noise_sigma, threshold : float
    windows : list of ProposedWindow, high shift first
    """
    mhz = spectrum.observe_mhz
    if isinstance(large_coupling_hz, str):
        large_coupling_hz = largest_coupling_hz(spectrum.nucleus)
    doublet_max = large_coupling_hz if large_coupling_hz and bare_doublets_span_couplings(spectrum.nucleus) else None
    peaks, noise, threshold = pick_peaks(spectrum, snr_threshold, min_relative_height)
    later_peaks, offset = [], 0.0
    max_gap = gap_factor * coupling_hz
    groups = [Group(lines, pattern) for lines, pattern in
              group_peaks(peaks, mhz, max_gap, large_coupling_hz, resolution_hz=spectrum.spacing_hz,
                          doublet_max_hz=doublet_max)]
    if later is not None and len(groups):
        later_peaks, _, _ = pick_peaks(later, snr_threshold, min_relative_height)
        later_groups = [Group(lines, pattern) for lines, pattern in
                        group_peaks(later_peaks, later.observe_mhz, max_gap, large_coupling_hz,
                                    resolution_hz=later.spacing_hz, doublet_max_hz=doublet_max)]
        groups, offset = merge_series(groups, later_groups, mhz, spectrum.spacing_hz)
    solvent = solvent_named(spectrum.header) if has_solvent_background(spectrum.nucleus) else None
    assign_roles(groups, solvent, spectrum.nucleus)
    bounds, crowded = _window_bounds([g.lines for g in groups], mhz, margin_hz,
                                     (spectrum.ppm_range[0], spectrum.ppm_range[1]))
    cleaned = spectrum
    for group in groups:
        if group.role == "solvent":
            # A dominant line's Lorentzian tail reaches into its neighbours' windows and is
            # curved, so the straight edge baseline misses it; take the tail out first.
            tallest = max(group.lines, key=lambda p: p.height)
            cleaned = cleaned.replace(real=cleaned.real - _lorentzian(cleaned.ppm, tallest, mhz))
    integrals = []
    for group, (lo, hi), cut in zip(groups, bounds, crowded):
        margin = _margin_ppm(group.lines, mhz, margin_hz)
        if later is not None and group.change != math.inf:
            # height ratio last / first above a local straight baseline
            now = local_heights(later, group.lines, offset, margin)
            before = local_heights(spectrum, group.lines, 0.0, margin)
            group.change = max(now, 0.0) / before if before > 0 else None
        # signals that appear (or mostly form) during the series are measured in the last spectrum
        if group.change is not None and group.change > 4.0:
            source, others = later, [p for p in later_peaks if not near_any(p, group.lines, mhz)]
        else:
            source, others = cleaned, [p for g in groups if g is not group and g.change != math.inf
                                       and g.role != "solvent" for p in g.lines]
        if cut:
            # a window cut short by a neighbour: integrate the full margin with the
            # neighbours' lines (Lorentzians of their picked height and width) taken out
            low, high = group.lines[-1].shift_ppm - margin, group.lines[0].shift_ppm + margin
            near = [p for p in others if low - margin <= p.shift_ppm <= high + margin]
            if near:
                source = source.replace(real=source.real - sum(_lorentzian(source.ppm, p, mhz) for p in near))
            integrals.append(_integral(source, low, high))
        else:
            integrals.append(_integral(source, lo, hi))
    positive = [i for i, g in zip(integrals, groups) if g.role == "signal" and not g.mixed and i > 0]
    cutoff = _MINOR_FRACTION * float(np.median(positive)) if positive else 0.0
    if has_solvent_background(spectrum.nucleus):
        residual_solvents(groups, integrals, cutoff, mhz, solvent)
    pick_reference_candidate(groups, mhz, spectrum.nucleus)
    records = []
    for group, (lo, hi), integral, cut in zip(groups, bounds, integrals, crowded):
        records.append({"group": group, "bounds": (lo, hi), "integral": integral, "crowded": cut,
                        "change": group.change, "species": ""})
    signal_records = [r for r in records if r["group"].role == "signal" and not r["group"].mixed]
    placeholder_species(signal_records)
    # Integral ratios are nuclei ratios only within one species (one concentration): the
    # unit comes from the placeholder species with the most signals when it has two or
    # more; else from all signals.  Small lines (a residue, an impurity) are left out.
    by_species: dict[str, list[float]] = {}
    for record in signal_records:
        if record["integral"] >= cutoff and not (record["group"].change or 0.0) > 4.0:
            by_species.setdefault(record.get("cluster") or record["species"], []).append(record["integral"])
    largest = max(by_species.values(), key=len, default=[])
    unit = nuclei_unit([i for i, g in zip(integrals, groups)
                         if g.role == "signal" and not g.mixed and i >= cutoff and not (g.change or 0.0) > 4.0])
    if len(largest) >= 2:
        own = nuclei_unit(largest)
        if whole_number_misfit(np.asarray(largest) / own) <= 0.15:
            unit = own
    _fit_groups(records, mhz, margin_hz, spectrum.ppm_range)
    windows = []
    counter = 0
    for record in records:
        group = record["group"]
        if group.role == "signal":
            counter += 1
            name = f"signal_{counter}"
        else:
            name = group.role
        integral = record["integral"]
        nuclei = int(min(9, max(1, round(integral / unit)))) if group.role == "signal" and integral > 0 else 1
        minor = group.role == "signal" and integral < cutoff
        j = group.pattern.j_hz
        windows.append(ProposedWindow(
            name, tuple(float(v) for v in record["bounds"]), tuple(group.lines), group.role, integral, nuclei,
            float(j[0]) if j else None, minor, group.pattern, group.label, group.change, group.mixed,
            record["species"], record.get("fit_group", ""), group.reference_candidate, group.expected_ppm,
            record["crowded"], _neighbour_ppm(group, groups)))
    return peaks, noise, threshold, windows


def _neighbour_ppm(group: Group, groups: list[Group]) -> float:
    return min((abs(p.shift_ppm - q.shift_ppm) for g in groups if g is not group for p in g.lines
                for q in group.lines), default=math.inf)


def _fit_groups(records: list[dict], observe_mhz: float, margin_hz: float, ppm_range) -> None:
    """Neighbouring simple multiplets cut short by each other become one deconvolution
    group: each window gets its full margin (they may overlap inside the group) but stops
    at the midpoint to any signal outside the group."""
    usable = [r for r in records if r["group"].role == "signal" and not r["group"].mixed]
    clusters: list[list[dict]] = []
    for a, b in zip(usable, usable[1:]):
        if not (a["crowded"] and b["crowded"]):
            continue
        if a["group"].pattern.code not in SIMPLE_PATTERNS or b["group"].pattern.code not in SIMPLE_PATTERNS:
            continue
        gap = a["group"].lines[-1].shift_ppm - b["group"].lines[0].shift_ppm
        if gap > max(_margin_ppm(a["group"].lines, observe_mhz, margin_hz),
                     _margin_ppm(b["group"].lines, observe_mhz, margin_hz)) * 2:
            continue
        if clusters and clusters[-1][-1] is a:
            clusters[-1].append(b)
        else:
            clusters.append([a, b])
    high_edge, low_edge = ppm_range
    for number, cluster in enumerate(clusters, start=1):
        members = {id(r) for r in cluster}
        for record in cluster:
            lines = record["group"].lines
            margin = _margin_ppm(lines, observe_mhz, margin_hz)
            high, low = lines[0].shift_ppm + margin, lines[-1].shift_ppm - margin
            for other in records:
                if id(other) in members or other is record:
                    continue
                o = other["group"].lines
                if o[-1].shift_ppm > lines[0].shift_ppm:
                    high = min(high, 0.5 * (o[-1].shift_ppm + lines[0].shift_ppm) - 0.5 / observe_mhz)
                elif o[0].shift_ppm < lines[-1].shift_ppm:
                    low = max(low, 0.5 * (o[0].shift_ppm + lines[-1].shift_ppm) + 0.5 / observe_mhz)
            record["bounds"] = (max(low, low_edge), min(high, high_edge))
            record["fit_group"] = f"group_{number}"


def solvent_exclusions(windows: list[ProposedWindow], noise: float, observe_mhz: float, cap_ppm: float):
    """(high, low) ranges around each solvent line out to where its tail meets the noise."""
    ranges = []
    for window in windows:
        if window.role != "solvent":
            continue
        tallest = max(window.peaks, key=lambda p: p.height)
        reach = _tail_reach_ppm(tallest, noise, observe_mhz, cap_ppm)
        high = max(window.peaks[0].shift_ppm + reach, window.window_ppm[1])
        low = min(window.peaks[-1].shift_ppm - reach, window.window_ppm[0])
        ranges.append((high, low))
    return ranges


def noise_region(spectrum: Spectrum, windows: list[ProposedWindow],
                  exclusions: list[tuple[float, float]] = ()) -> tuple[float, float] | None:
    """The widest stretch of the axis clear of every window and solvent tail (0.1 ppm guard),
    within the inner 90 % of the spectral width: a digital filter's gain falls off in the
    outer 5 % on each side (the rule auto-phasing follows), where the noise is lower."""
    high_edge, low_edge = spectrum.ppm_range
    edge = 0.05 * (high_edge - low_edge)
    high_edge, low_edge = high_edge - edge, low_edge + edge
    occupied = [(w.window_ppm[0] - 0.1, w.window_ppm[1] + 0.1) for w in windows]
    occupied += [(low - 0.1, high + 0.1) for high, low in exclusions]
    occupied.sort(key=lambda b: -b[1])
    best, cursor = None, high_edge
    for low, high in occupied + [(low_edge, low_edge)]:
        gap = (min(cursor, high_edge), max(high, low_edge))
        if gap[0] - gap[1] > (best[0] - best[1] if best else 0.0):
            best = gap
        cursor = min(cursor, low)
    if best is None or best[0] - best[1] < 0.2:
        return None
    return (round(best[0], 3), round(best[1], 3))


__all__ = ["noise_region", "propose_windows", "solvent_exclusions"]
