"""First-order multiplets: lines cut into named patterns (s, d, t, q, dd, dt, td, ...) with J in Hz.

* A first-order multiplet of a nucleus coupled to n equivalent partners of spin 1/2 with
  coupling J shows n + 1 lines J apart with binomial intensities; several couplings
  multiply the patterns (a dd: four lines 1:1:1:1).  Assumes weak coupling
  (delta nu >> J); roofing of second-order spectra is allowed for by ``HEIGHT_FACTOR``.
* Couplings come in Hz from the line positions, so the field is respected (at 60 MHz a
  7 Hz coupling spans 0.12 ppm, at 500 MHz 0.014 ppm).
* :func:`match_pattern` names one cluster of lines; :func:`group_peaks` cuts a list of
  lines into the fewest multiplets that explain it (unequal lines, such as a 45:1 pair,
  are never a doublet; a cluster no pattern explains is a multiplet ``m``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from kinetics.signals.lines import Peak

#: Largest H-H coupling expected inside one multiplet: trans-alkene and geminal 2J/3J reach
#: 12-18 Hz (common practice); 10 % more for digitisation and strong coupling.
LARGE_COUPLING_HZ = 18.0
#: Relative line heights may differ from the first-order pattern by this factor (roofing of
#: second-order spectra, digitisation of narrow lines); 1:1 passes as 1.6:1, 45:1 never.
HEIGHT_FACTOR = 1.6
#: Widths of the two lines of one doublet agree within this factor.
_DOUBLET_WIDTH_FACTOR = 2.0
#: Cost of an unexplained cluster "m" against 1 for a recognised multiplet: two lines no
#: pattern explains are two singlets; three or more are one "m".
_M_COST = 2.5

#: First-order patterns, simplest first: (code, lines per coupling, largest J first).
_PATTERNS = (("d", (2,)), ("t", (3,)), ("q", (4,)), ("quint", (5,)), ("sext", (6,)), ("sept", (7,)),
             ("dd", (2, 2)), ("dt", (2, 3)), ("td", (3, 2)), ("dq", (2, 4)), ("qd", (4, 2)),
             ("tt", (3, 3)), ("ddd", (2, 2, 2)))
PATTERN_NAMES = {"s": "singlet", "d": "doublet", "t": "triplet", "q": "quartet", "quint": "quintet",
                 "sext": "sextet", "sept": "septet", "dd": "doublet of doublets",
                 "dt": "doublet of triplets", "td": "triplet of doublets", "dq": "doublet of quartets",
                 "qd": "quartet of doublets", "tt": "triplet of triplets",
                 "ddd": "doublet of doublets of doublets", "m": "multiplet"}
#: Most lines a named pattern can show (a tt has 9).
_MAX_PATTERN_LINES = 9
#: Patterns the deconvolution line shape can model (n lines, one J).
SIMPLE_PATTERNS = {"s": 1, "d": 2, "t": 3, "q": 4, "quint": 5, "sext": 6, "sept": 7}


@dataclass(frozen=True)
class Pattern:
    """A named multiplet pattern: code (s, d, t, ..., m) and couplings in Hz, largest first."""

    code: str
    j_hz: tuple[float, ...] = ()

    @property
    def name(self) -> str:
        return PATTERN_NAMES[self.code]

    def describe(self) -> str:
        if not self.j_hz:
            return self.code
        return f"{self.code}, J = {', '.join(f'{j:.1f}' for j in self.j_hz)} Hz"


def _sticks(mults: tuple[int, ...], j_hz) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """First-order stick pattern about 0 Hz: positions, binomial intensities and the
    coefficient of each J in each position (position = coef @ J)."""
    pos, inten, coef = np.zeros(1), np.ones(1), np.zeros((1, len(mults)))
    for k, (n, j) in enumerate(zip(mults, j_hz)):
        offsets = np.arange(n) - 0.5 * (n - 1)
        weights = np.array([math.comb(n - 1, m) for m in range(n)], float)
        pos = (pos[:, None] + offsets[None, :] * j).ravel()
        inten = (inten[:, None] * weights[None, :]).ravel()
        coef = np.repeat(coef, n, axis=0)
        coef[:, k] = np.tile(offsets, coef.shape[0] // n)
    order = np.argsort(-pos, kind="stable")
    return pos[order], inten[order], coef[order]


def _merged(pos, inten, coef, tol_hz):
    """Sticks closer than ``tol_hz`` seen as one line (intensity-weighted)."""
    groups, current = [], [0]
    for i in range(1, pos.size):
        if pos[current[-1]] - pos[i] <= tol_hz:
            current.append(i)
        else:
            groups.append(current)
            current = [i]
    groups.append(current)
    w = [inten[g] for g in groups]
    return (np.array([np.average(pos[g], weights=wi) for g, wi in zip(groups, w)]),
            np.array([wi.sum() for wi in w]),
            np.array([np.average(coef[g], axis=0, weights=wi) for g, wi in zip(groups, w)]))


def _j_candidates(mults: tuple[int, ...], x_hz: np.ndarray):
    span = x_hz[0] - x_hz[-1]
    first = x_hz[0] - x_hz[1:]
    if len(mults) == 1:
        yield (span / (mults[0] - 1),)
    elif len(mults) == 2:
        large, small = mults
        for j_small in first[:3]:
            yield ((span - (small - 1) * j_small) / (large - 1), j_small)
    else:
        for j2 in first:
            yield (span - j2 - first[0], j2, first[0])


def match_pattern(shift_hz, heights, widths_hz, tol_hz: float, j_max_hz: float = 1.1 * LARGE_COUPLING_HZ,
                  height_factor: float = HEIGHT_FACTOR, d_max_hz: float = 12.8) -> Pattern | None:
    """The simplest first-order pattern that explains a cluster of lines, or None.

    Parameters
    ----------
    shift_hz, heights, widths_hz : array, shape (n,)
        Line positions (Hz, high first), heights and full widths (Hz).
    tol_hz : float
        Largest misfit of a line position, Hz.
    j_max_hz : float
        Largest coupling allowed.
    height_factor : float
        Largest ratio between a line's relative height and the pattern's.
    d_max_hz : float
        Largest J of a bare doublet: two lone lines further apart are two singlets (two
        species are far more common than one large doublet with no further splitting).

    For each pattern (simplest first) the couplings are guessed from the line positions,
    refined by linear least squares (each line is c + sum_k a_k J_k) and accepted when the
    pattern, with sticks closer than ``tol_hz`` merged, has as many lines as observed,
    every position within ``tol_hz`` and every relative height within ``height_factor``
    of the heights of Lorentzian lines of the median observed width at those sticks.
    """
    x = np.asarray(shift_hz, float)
    h = np.asarray(heights, float)
    widths = np.asarray(widths_hz, float)
    if x.size == 1:
        return Pattern("s")
    if np.any(h <= 0):
        return None
    width = float(np.median(widths))
    observed = h / h.sum()
    for code, mults in _PATTERNS:
        if math.prod(mults) < x.size:
            continue  # fewer sticks than lines
        for guess in _j_candidates(mults, x):
            j = np.array(guess, float)
            for _ in range(2):
                if np.any(j <= tol_hz) or np.any(np.diff(j) > tol_hz) or j.max() > j_max_hz:
                    j = None
                    break
                pos, inten, coef = _merged(*_sticks(mults, j), tol_hz)
                if pos.size != x.size:
                    j = None
                    break
                design = np.column_stack([np.ones(x.size), coef])
                solution, *_ = np.linalg.lstsq(design, x, rcond=None)
                j = solution[1:]
            if j is None or np.any(j <= tol_hz) or np.any(np.diff(j) > tol_hz) or j.max() > j_max_hz:
                continue
            sticks, stick_inten, _ = _sticks(mults, j)
            pos, inten, coef = _merged(sticks, stick_inten, np.zeros((sticks.size, len(mults))), tol_hz)
            if pos.size != x.size:
                continue
            centre = float(np.mean(x - pos))
            if np.max(np.abs(x - pos - centre)) > tol_hz:
                continue
            half = 0.5 * max(width, 1e-6)
            predicted = (stick_inten[None, :] / (1.0 + ((x[:, None] - centre - sticks[None, :]) / half) ** 2)).sum(1)
            predicted /= predicted.sum()
            if np.max(np.abs(np.log(observed / predicted))) > math.log(height_factor):
                continue
            if code == "d" and (max(widths) > _DOUBLET_WIDTH_FACTOR * max(min(widths), 1e-9)
                                or j[0] > d_max_hz):
                continue  # a bare doublet: similar widths, J within the usual vicinal range
            return Pattern(code, tuple(round(float(v), 2) for v in j))
    return None


def tolerance_hz(lines: list[Peak], resolution_hz: float) -> float:
    width = float(np.median([p.width_hz for p in lines]))
    return max(0.3 * width, 1.5 * resolution_hz, 0.3)


def group_peaks(peaks: list[Peak], observe_mhz: float, max_gap_hz: float,
                large_coupling_hz: float | None = LARGE_COUPLING_HZ,
                resolution_hz: float = 0.0, doublet_max_hz: float | None = None) -> list[tuple[list[Peak], Pattern]]:
    """Lines cut into named multiplets, high shift first.

    Lines within the largest coupling (1.1 x ``large_coupling_hz``; ``max_gap_hz`` when
    None) form a run; a run is cut into contiguous multiplets at the least cost (1 per
    recognised first-order pattern, ``_M_COST`` per unexplained cluster "m", whose
    adjacent lines must lie within ``max_gap_hz``), so a pattern is preferred to loose
    lines and two unequal lines stay two singlets.  Two lone lines further apart than
    ``doublet_max_hz`` (default ``max_gap_hz``) are two singlets, never a bare doublet.
    """
    j_max = max_gap_hz if not large_coupling_hz else max(1.1 * large_coupling_hz, max_gap_hz)
    lines = sorted(peaks, key=lambda p: -p.shift_ppm)
    runs: list[list[Peak]] = []
    for peak in lines:
        if runs and (runs[-1][-1].shift_ppm - peak.shift_ppm) * observe_mhz <= j_max:
            runs[-1].append(peak)
        else:
            runs.append([peak])
    groups: list[tuple[list[Peak], Pattern]] = []
    for run in runs:
        groups += _partition(run, observe_mhz, resolution_hz, j_max, max_gap_hz,
                             max_gap_hz if doublet_max_hz is None else doublet_max_hz)
    return groups


def _partition(run: list[Peak], observe_mhz: float, resolution_hz: float, j_max_hz: float,
               max_gap_hz: float, doublet_max_hz: float) -> list[tuple[list[Peak], Pattern]]:
    n = len(run)
    x = np.array([p.shift_ppm * observe_mhz for p in run])
    gaps = -np.diff(x)
    best: list[tuple[float, list] | None] = [(0.0, [])] + [None] * n
    for end in range(1, n + 1):
        for start in range(end - 1, -1, -1):
            if start < end - 1 and gaps[start] > max_gap_hz and end - start > _MAX_PATTERN_LINES:
                break  # neither a pattern nor an "m" can reach further back
            if best[start] is None:
                continue
            segment = run[start:end]
            pattern = None
            if end - start <= _MAX_PATTERN_LINES:
                pattern = match_pattern(x[start:end], [p.height for p in segment], [p.width_hz for p in segment],
                                        tolerance_hz(segment, resolution_hz), j_max_hz, d_max_hz=doublet_max_hz)
            cost = 1.0
            if pattern is None:
                if np.all(gaps[start:end - 1] <= max_gap_hz):
                    pattern, cost = Pattern("m"), _M_COST
                else:
                    continue
            total = best[start][0] + cost
            if best[end] is None or total < best[end][0] - 1e-9:
                best[end] = (total, best[start][1] + [(segment, pattern)])
    return best[n][1]


__all__ = ["HEIGHT_FACTOR", "LARGE_COUPLING_HZ", "PATTERN_NAMES", "SIMPLE_PATTERNS", "Pattern", "group_peaks",
           "match_pattern", "tolerance_hz"]
