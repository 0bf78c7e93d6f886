"""Draft a starter run config from a folder of spectra (``kinetics init``).

What is read: the first spectrum of the folder in acquisition order and, when the folder
holds more than one, the last (lines that appear during the reaction belong to products;
lines whose height does not change are a standard or a reference).  FIDs are transformed
with :func:`kinetics.processing.fid_to_spectrum`; stored spectra that are visibly
mis-phased are re-phased first.  Lines are picked with :mod:`kinetics.spectra.peaks`.

The rules behind each proposal:

* **Multiplets.**  Lines closer than the largest H-H coupling (``j_max_hz``, 20 Hz:
  geminal and trans-alkene couplings reach 12-18 Hz, common practice) form a run; each run
  is cut into the fewest first-order multiplets that explain it (:func:`match_pattern`).
  The J values come in Hz from the line positions, so the field is respected (at 60 MHz a
  7 Hz coupling spans 0.12 ppm, at 500 MHz 0.014 ppm); the relative heights must follow
  the first-order pattern (1:1, 1:2:1, 1:3:3:1, 1:1:1:1 for a dd, ...) within a factor
  ``HEIGHT_FACTOR`` once the overlap of Lorentzian lines of the observed width is allowed
  for; the two lines of a doublet must have similar widths.  Unequal lines (a 45:1 pair)
  are never a doublet; a cluster no pattern explains is a multiplet ``m``.  Names: s, d,
  t, q, quint, sext, sept, dd, dt, td, dq, qd, tt, ddd, m; J largest first.
* **Solvent.**  A line more than ``_SOLVENT_FACTOR`` times taller than every other
  multiplet, and small unchanging lines at the shift of a common residual solvent signal
  (:data:`SOLVENT_LINES`, common practice, values from memory).  They are written as phase
  and noise-region exclusions, never as signals.
* **Reference.**  A TMS-like line near 0 ppm; else the sharpest isolated singlet that does
  not change through the series, proposed in a comment for the chemist to confirm (it
  aligns the series either way).
* **Windows.**  Several line widths beyond the outer lines (a Lorentzian window of +/- m
  half-widths holds (2/pi) arctan(m) of the area), never past the midpoint to the next
  multiplet; simple multiplets too close for that are proposed as one deconvolution group.
* **Left to the chemist**: species names, the standard's concentration, reactant and
  product.  The draft names the keys to set; until they are set, ``kinetics run`` refuses.
"""

from __future__ import annotations

import logging
import math
import os
import re
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from kinetics.errors import FitError, InputFileError
from kinetics.spectra import peaks as peak_tools
from kinetics.spectra.spectrum import Fid, Spectrum

log = logging.getLogger(__name__)

#: Suffixes of files considered spectra (content decides the format; this only skips
#: notes, images and configs lying in the same folder).
SPECTRUM_SUFFIXES = (".dx", ".jdx", ".jcamp", ".jcm", ".csv", ".tsv", ".txt", ".dat")

_TMS_WINDOW_PPM = 0.15       # a reference line must lie within this of 0 ppm
_SOLVENT_FACTOR = 5.0        # a dominant (solvent) line is this many times the next-tallest multiplet
_MINOR_FRACTION = 0.3        # signals below this share of the median integral are "minor"
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


def _solvent_key(text: str) -> str:
    return re.sub(r"[^a-z0-9]", "", str(text).lower())


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
_SIMPLE = {"s": 1, "d": 2, "t": 3, "q": 4, "quint": 5, "sext": 6, "sept": 7}


@dataclass(frozen=True)
class Peak:
    """One picked line: position, height, FWHM and signal-to-noise ratio."""

    shift_ppm: float
    height: float
    width_hz: float
    snr: float


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


@dataclass(frozen=True)
class ProposedWindow:
    """A group of lines proposed as one signal window.

    Attributes
    ----------
    name : str
    window_ppm : (low, high)
    peaks : tuple of Peak
        The lines inside, high shift first.
    role : str
        ``"signal"``, ``"reference"`` (TMS-like line near 0 ppm) or ``"solvent"``.
    integral : float
        Sum of intensities times the point spacing in ppm (for the nuclei guess).
    nuclei_guess : int
        Nuclei from the integral ratios (the smallest signal taken as 1); check it.
    coupling_hz : float or None
        Largest coupling of the multiplet, Hz (None for singlets and "m").
    minor : bool
        Integral below 30 % of the median signal: perhaps a solvent residue or impurity.
    pattern : Pattern
        Multiplet name and couplings.
    label : str
        What a solvent or reference line probably is.
    change : float or None
        Height in the last spectrum over height in the first (``inf``: appears during the
        series; None: only one spectrum).
    mixed : bool
        The lines of the first and the last spectrum differ here: two species overlap.
    species : str
        Placeholder species (``falls_1``, ``rises_1``, ``steady_1``, ``species_1``).
    fit_group : str
        Deconvolution group shared with a too-close neighbour ("" for a region integral).
    reference_candidate : bool
        The sharpest isolated unchanging singlet: proposed as reference and standard.
    expected_ppm : float or None
        Tabulated shift of a residual solvent singlet (a reference proposal when no TMS).
    crowded : bool
        The window stops short of its full margin at a neighbour.
    neighbour_ppm : float
        Distance from its lines to the nearest line of another multiplet (ppm).
    """

    name: str
    window_ppm: tuple[float, float]
    peaks: tuple[Peak, ...]
    role: str
    integral: float
    nuclei_guess: int
    coupling_hz: float | None
    minor: bool = False
    pattern: Pattern = field(default_factory=lambda: Pattern("s"))
    label: str = ""
    change: float | None = None
    mixed: bool = False
    species: str = ""
    fit_group: str = ""
    reference_candidate: bool = False
    expected_ppm: float | None = None
    crowded: bool = False
    neighbour_ppm: float = math.inf

    @property
    def centre_ppm(self) -> float:
        return 0.5 * (self.window_ppm[0] + self.window_ppm[1])

    @property
    def line_centre_ppm(self) -> float:
        return 0.5 * (self.peaks[0].shift_ppm + self.peaks[-1].shift_ppm)

    @property
    def multiplicity(self) -> str:
        return self.pattern.name


@dataclass(frozen=True)
class Draft:
    """What ``kinetics init`` found and the config text it proposes."""

    source: Path
    config_path: Path
    spectrum: Spectrum
    noise_sigma: float
    threshold: float
    peaks: tuple[Peak, ...]
    windows: tuple[ProposedWindow, ...]
    noise_region_ppm: tuple[float, float] | None
    files: tuple[Path, ...]
    skipped: tuple[str, ...]
    text: str
    last_source: Path | None = None

    @property
    def reference(self) -> ProposedWindow | None:
        exact = next((w for w in self.windows if w.role == "reference"), None)
        return exact or next((w for w in self.windows if w.reference_candidate), None)

    @property
    def solvent(self) -> ProposedWindow | None:
        return next((w for w in self.windows if w.role == "solvent"), None)

    @property
    def solvents(self) -> tuple[ProposedWindow, ...]:
        return tuple(w for w in self.windows if w.role == "solvent")

    @property
    def signals(self) -> tuple[ProposedWindow, ...]:
        return tuple(w for w in self.windows if w.role == "signal" and not w.mixed)


# ---------------------------------------------------------------- the folder
def _natural_key(path: Path):
    return [int(part) if part.isdigit() else part.lower() for part in re.split(r"(\d+)", path.name)]


def spectrum_files(folder: str | Path) -> list[Path]:
    """Spectrum files of a folder, in natural name order.

    Hidden and temporary files are ignored.  When suffixes are mixed, the most common one
    wins (a simulator's ``truth.csv`` or an exported table beside 100 ``.jdx`` files is
    not a spectrum).
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise InputFileError(folder, "is not a folder", hint="give the folder the spectrometer writes to")
    files = [p for p in folder.iterdir()
             if p.is_file() and not p.name.startswith(".") and p.suffix.lower() in SPECTRUM_SUFFIXES]
    if not files:
        raise InputFileError(folder, "holds no spectrum files",
                             hint=f"expected files ending in {', '.join(SPECTRUM_SUFFIXES)}")
    suffixes = [p.suffix for p in files]
    common = max(sorted(set(suffixes)), key=suffixes.count)
    return sorted((p for p in files if p.suffix == common), key=_natural_key)


def _as_spectrum(record: Spectrum | Fid) -> Spectrum:
    from kinetics.processing import fid_to_spectrum

    return fid_to_spectrum(record) if isinstance(record, Fid) else record


def _read_all(folder: str | Path):
    from kinetics.spectra.reader import read

    files = spectrum_files(folder)
    records: list[tuple[Path, Spectrum | Fid]] = []
    skipped: list[str] = []
    for number, path in enumerate(files):
        try:
            records.append((path, read(path)))
        except InputFileError as error:
            if number == 0:
                raise InputFileError(path, f"first spectrum of the folder cannot be read: {error.problem}",
                                     line=error.line, hint=error.hint or "fix or remove the file") from error
            skipped.append(str(error))
            log.warning("skipping unreadable file: %s", error)
    timed = [(rec.acquired_utc, n) for n, (_, rec) in enumerate(records) if rec.acquired_utc is not None]
    order = [n for _, n in sorted(timed)] if len(timed) == len(records) else list(range(len(records)))
    return [records[n] for n in order], files, skipped


def _transformed(path: Path, record: Spectrum | Fid) -> Spectrum:
    try:
        return _as_spectrum(record)
    except (ValueError, FitError) as error:
        raise InputFileError(path, f"FID could not be transformed: {error}",
                             hint="check that the file is a complete FID") from error


def first_spectrum(folder: str | Path) -> tuple[Spectrum, list[Path], list[str], bool]:
    """The first spectrum of a folder in acquisition order.

    Files are read in name order; the first must be readable (else its InputFileError is
    raised, naming it).  Later unreadable files are skipped with a note.  Among the
    readable files the earliest acquisition time wins; without times, name order.

    Returns
    -------
    spectrum : Spectrum
    files : list of Path
        Every spectrum file found.
    skipped : list of str
        One message per unreadable file.
    from_fid : bool
        True when the file held an FID (transformed with default processing).
    """
    records, files, skipped = _read_all(folder)
    path, record = records[0]
    return _transformed(path, record), files, skipped, isinstance(record, Fid)


def series_ends(folder: str | Path) -> tuple[Spectrum, Spectrum | None, list[Path], list[str], bool]:
    """First and last spectrum of a folder in acquisition order (last None for one file).

    Returns (first, last, files, skipped, from_fid); see :func:`first_spectrum`.
    """
    records, files, skipped = _read_all(folder)
    path, record = records[0]
    last = None
    if len(records) > 1:
        last_path, last_record = records[-1]
        last = _transformed(last_path, last_record)
    return _transformed(path, record), last, files, skipped, isinstance(record, Fid)


# ---------------------------------------------------------------- phase
#: a stored spectrum counts as mis-phased beyond these corrections (degrees)
_PHASE_TOLERANCE_P0_DEG = 5.0
_PHASE_TOLERANCE_P1_DEG = 10.0


def _rephase_if_needed(spectrum: Spectrum) -> tuple[Spectrum, str | None]:
    """Auto-phase a stored spectrum that carries imaginary data and is visibly mis-phased.

    Benchtop instruments often write spectra with a residual phase error; peak picking on
    them misses multiplets sitting on a solvent line's dispersive tail.  A spectrum whose
    automatic correction is small is kept as stored (None is returned for the note).
    """
    if spectrum.imag is None:
        return spectrum, None
    from kinetics.processing import auto_phase

    try:
        result = auto_phase(spectrum)
    except (ValueError, FitError) as error:
        log.info("init: automatic phasing of %s failed (%s); using it as stored", spectrum.source_path, error)
        return spectrum, None
    p0 = abs((result.p0_deg + 180.0) % 360.0 - 180.0)
    if p0 <= _PHASE_TOLERANCE_P0_DEG and abs(result.p1_deg) <= _PHASE_TOLERANCE_P1_DEG:
        return spectrum, None
    note = (f"the first spectrum needed p0 {result.p0_deg:.0f} deg, p1 {result.p1_deg:.0f} deg: "
            "every spectrum is re-phased")
    return result.spectrum, note



# ---------------------------------------------------------------- lines
def _noise_sigma(spectrum: Spectrum) -> float:
    """Noise of the real part: the signals' estimate from signal-free stretches (it allows
    for the correlation zero-filling and apodisation put between neighbouring points);
    the shared difference estimate when no stretch is found."""
    from kinetics.signals import estimate_noise

    try:
        sigma = float(estimate_noise(spectrum).sigma)
    except (FitError, ValueError):
        sigma = peak_tools.difference_sigma(spectrum.real)
    return sigma if sigma > 0 else float(np.std(spectrum.real)) or 1.0


def pick_peaks(spectrum: Spectrum, snr_threshold: float = 8.0,
               min_relative_height: float = 0.02) -> tuple[list[Peak], float, float]:
    """Lines that rise above the noise and are not negligible next to the main signals.

    The height threshold is the larger of ``snr_threshold`` noise sigmas and
    ``min_relative_height`` times the tallest line (the tallest but one when the tallest
    is a dominant solvent line, more than 5 times the next).  On a low-field benchtop
    spectrum the noise term decides; on a high-field spectrum with SNR in the thousands
    the relative term keeps 13C satellites, spinning sidebands and traces out.

    Returns
    -------
    peaks : list of Peak, high shift first (positions refined between points)
    noise_sigma : float
    threshold : float
        The height threshold used (intensity units).
    """
    level = float(np.median(spectrum.real))
    noise = _noise_sigma(spectrum)
    threshold = snr_threshold * noise
    found = peak_tools.pick_peaks(spectrum.real, height=threshold, prominence=threshold, level=level, widths=True)
    if len(found) == 0:
        return [], noise, threshold
    heights = np.sort(found.height)[::-1]
    main = heights[1] if heights.size > 1 and heights[0] > _SOLVENT_FACTOR * heights[1] else heights[0]
    threshold = max(threshold, float(min_relative_height * main))
    keep = found.height >= threshold
    position = np.interp(found.position[keep], np.arange(spectrum.n_points), spectrum.ppm)
    spacing_hz = spectrum.spacing_hz
    peaks = [Peak(float(ppm), float(h), float(w * spacing_hz), float(h / noise))
             for ppm, h, w in zip(position, found.height[keep], found.width_points[keep])]
    return sorted(peaks, key=lambda p: -p.shift_ppm), noise, threshold


# ---------------------------------------------------------------- multiplets
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


def _tolerance_hz(lines: list[Peak], resolution_hz: float) -> float:
    width = float(np.median([p.width_hz for p in lines]))
    return max(0.3 * width, 1.5 * resolution_hz, 0.3)


def group_peaks(peaks: list[Peak], observe_mhz: float, max_gap_hz: float,
                large_coupling_hz: float | None = LARGE_COUPLING_HZ,
                resolution_hz: float = 0.0) -> list[tuple[list[Peak], Pattern]]:
    """Lines cut into named multiplets, high shift first.

    Lines within the largest coupling (1.1 x ``large_coupling_hz``; ``max_gap_hz`` when
    None) form a run; a run is cut into contiguous multiplets at the least cost (1 per
    recognised first-order pattern, ``_M_COST`` per unexplained cluster "m", whose
    adjacent lines must lie within ``max_gap_hz``), so a pattern is preferred to loose
    lines and two unequal lines stay two singlets.
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
        groups += _partition(run, observe_mhz, resolution_hz, j_max, max_gap_hz)
    return groups


def _partition(run: list[Peak], observe_mhz: float, resolution_hz: float, j_max_hz: float,
               max_gap_hz: float) -> list[tuple[list[Peak], Pattern]]:
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
                                        _tolerance_hz(segment, resolution_hz), j_max_hz, d_max_hz=max_gap_hz)
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


# ---------------------------------------------------------------- windows and roles
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


def solvent_match(shift_ppm: float, dominant: bool, solvent: str | None = None) -> tuple[str, float] | None:
    """The common solvent line nearest ``shift_ppm`` within its tolerance
    (:data:`SOLVENT_LINES`, from memory): (label, tabulated ppm), or None.  Only the lines
    of ``solvent`` count when it is known (e.g. the JCAMP-DX ``.SOLVENT NAME``); water
    lines also match a dominant line with twice their tolerance."""
    best = None
    for label, where, tolerance, system in SOLVENT_LINES:
        if solvent and _solvent_key(system) != _solvent_key(solvent) and not (dominant and system == "H2O"):
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


def _solvent_system(spectrum: Spectrum) -> str | None:
    """The solvent the file names (JCAMP-DX ``.SOLVENT NAME``), when it is in the table."""
    for key, value in spectrum.header.items():
        if _solvent_key(key) == "solventname":
            wanted = _solvent_key(value)
            for *_, system in SOLVENT_LINES:
                if _solvent_key(system) == wanted:
                    return system
    return None


def _is_tms(group: list[Peak]) -> bool:
    """A TMS-like group: its tallest line within 0.15 ppm of 0 and carrying most of the
    group's height (at high field the 29Si satellites join the group)."""
    tallest = max(group, key=lambda p: p.height)
    return (abs(tallest.shift_ppm) <= _TMS_WINDOW_PPM and len(group) <= 3
            and tallest.height >= 0.7 * sum(p.height for p in group))


def _nuclei_unit(integrals: list[float]) -> float:
    """Integral per nucleus that makes the signals' ratios closest to whole numbers.

    Candidates are each integral divided by 1, 2 or 3 (a CH, CH2 or CH3 group); a
    candidate is allowed only when every signal gets 1 to 9 nuclei; the one with the
    smallest deviation from whole numbers wins (the worst deviation, or with three or more
    signals the second worst, so one integral spoilt by a solvent tail does not decide),
    the larger unit on near-ties.  The ratios of different species also carry their
    concentrations, so this is a guess the user must check.
    """
    if not integrals:
        return 1.0
    values = np.asarray(integrals, float)
    best_unit, best_score = float(values.min()), np.inf
    for unit in sorted({v / n for v in values for n in (1, 2, 3)}, reverse=True):
        counts = values / unit
        if np.round(counts).min() < 1 or np.round(counts).max() > 9:
            continue
        score = _whole_number_misfit(counts)
        if score < best_score - 0.05:
            best_unit, best_score = unit, score
    return best_unit


def _whole_number_misfit(counts: np.ndarray) -> float:
    deviations = np.sort(np.abs(counts - np.round(counts)))
    return float(deviations[-2] if deviations.size >= 3 else deviations[-1])


@dataclass
class _Group:
    """Working record of one multiplet while the proposal is assembled."""

    lines: list[Peak]
    pattern: Pattern
    role: str = "signal"
    label: str = ""
    change: float | None = None
    mixed: bool = False
    reference_candidate: bool = False
    expected_ppm: float | None = None

    @property
    def top(self) -> float:
        return max(p.height for p in self.lines)

    @property
    def centre_ppm(self) -> float:
        return 0.5 * (self.lines[0].shift_ppm + self.lines[-1].shift_ppm)


def _series_offset_ppm(first: list[_Group], later: list[_Group], observe_mhz: float) -> float:
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


def _local_heights(spectrum: Spectrum, lines: list[Peak], offset_ppm: float, margin_ppm: float) -> float:
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


def _near(peak: Peak, lines: list[Peak], observe_mhz: float) -> bool:
    return any(abs(peak.shift_ppm - p.shift_ppm) * observe_mhz <= 1.5 for p in lines)


def _merge_series(first: list[_Group], later: list[_Group], observe_mhz: float,
                  resolution_hz: float) -> tuple[list[_Group], float]:
    """Multiplets of the first and the last spectrum as one list.

    A multiplet of the last spectrum that overlaps none of the first appeared during the
    series (``change`` = inf); one whose lines all match lines of the one multiplet it
    overlaps (or the other way round) is the same signal; anything else means the lines of
    two species overlap there (``mixed``: left out of the draft).  Also returns the drift
    offset of the last spectrum (ppm).
    """
    offset = _series_offset_ppm(first, later, observe_mhz)
    merged = [_Group(list(g.lines), g.pattern, g.role, g.label, change=1.0) for g in first]
    appeared = []
    for group in later:
        lines = [Peak(p.shift_ppm - offset, p.height, p.width_hz, p.snr) for p in group.lines]
        reach = max(float(np.median([p.width_hz for p in lines])), 1.0) / observe_mhz
        overlapping = [g for g in merged
                       if lines[-1].shift_ppm - reach <= g.lines[0].shift_ppm
                       and g.lines[-1].shift_ppm <= lines[0].shift_ppm + reach]
        if not overlapping:
            appeared.append(_Group(lines, group.pattern, change=math.inf))
            continue
        tol_ppm = 2.0 * _tolerance_hz(lines, resolution_hz) / observe_mhz
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


def _assign_roles(groups: list[_Group], solvent: str | None) -> None:
    """Reference (TMS), dominant and residual solvent lines (see the module docstring)."""
    tms = [g for g in groups if _is_tms(g.lines)]
    if tms:
        reference = max(tms, key=lambda g: g.top)
        reference.role = "reference"
        reference.label = "TMS-like line near 0 ppm"
    ranked = sorted((g for g in groups if g.role == "signal"), key=lambda g: g.top, reverse=True)
    if len(ranked) >= 2 and ranked[0].top > _SOLVENT_FACTOR * ranked[1].top:
        dominant = ranked[0]
        dominant.role = "solvent"
        name = solvent_label(dominant.centre_ppm, dominant=True, solvent=solvent)
        dominant.label = name or "a dominant line, far taller than the rest: an undeuterated solvent?"


def _residual_solvents(groups: list[_Group], integrals: list[float], cutoff: float, observe_mhz: float,
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


def _pick_reference_candidate(groups: list[_Group], observe_mhz: float) -> None:
    """The sharpest isolated singlet that does not change (a standard or reference?)."""
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
        candidates.append((line.snr / max(line.width_hz, 1e-9), group))
    if candidates:
        chosen = max(candidates, key=lambda c: c[0])[1]
        chosen.reference_candidate = True
        chosen.label = ("sharp isolated singlet" + (" that does not change" if chosen.change is not None else "")
                        + ": a reference or internal standard?")


def _fall_alike(a: float, b: float) -> bool:
    return abs(a - b) <= 0.05 + 0.15 * max(a, b)


def _placeholder_species(windows: list[dict]) -> None:
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
            if window["crowded"] and window["group"].pattern.code not in _SIMPLE:
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


def propose_windows(spectrum: Spectrum, *, later: Spectrum | None = None, snr_threshold: float = 8.0,
                    coupling_hz: float = 8.0, gap_factor: float = 1.6, margin_hz: float = 10.0,
                    min_relative_height: float = 0.02, large_coupling_hz: float | None = LARGE_COUPLING_HZ):
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
    large_coupling_hz : float or None
        Largest coupling of a recognised pattern (x 1.1); None: ``gap_factor * coupling_hz``.
    margin_hz : float
        Least margin beyond the outer lines of a window (6 line widths when wider), Hz.

    Returns
    -------
    peaks : list of Peak
    noise_sigma, threshold : float
    windows : list of ProposedWindow, high shift first
    """
    mhz = spectrum.observe_mhz
    peaks, noise, threshold = pick_peaks(spectrum, snr_threshold, min_relative_height)
    later_peaks, offset = [], 0.0
    max_gap = gap_factor * coupling_hz
    groups = [_Group(lines, pattern) for lines, pattern in
              group_peaks(peaks, mhz, max_gap, large_coupling_hz, resolution_hz=spectrum.spacing_hz)]
    if later is not None and len(groups):
        later_peaks, _, _ = pick_peaks(later, snr_threshold, min_relative_height)
        later_groups = [_Group(lines, pattern) for lines, pattern in
                        group_peaks(later_peaks, later.observe_mhz, max_gap, large_coupling_hz,
                                    resolution_hz=later.spacing_hz)]
        groups, offset = _merge_series(groups, later_groups, mhz, spectrum.spacing_hz)
    solvent = _solvent_system(spectrum)
    _assign_roles(groups, solvent)
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
            now = _local_heights(later, group.lines, offset, margin)
            before = _local_heights(spectrum, group.lines, 0.0, margin)
            group.change = max(now, 0.0) / before if before > 0 else None
        # signals that appear (or mostly form) during the series are measured in the last spectrum
        if group.change is not None and group.change > 4.0:
            source, others = later, [p for p in later_peaks if not _near(p, group.lines, mhz)]
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
    _residual_solvents(groups, integrals, cutoff, mhz, solvent)
    _pick_reference_candidate(groups, mhz)
    records = []
    for group, (lo, hi), integral, cut in zip(groups, bounds, integrals, crowded):
        records.append({"group": group, "bounds": (lo, hi), "integral": integral, "crowded": cut,
                        "change": group.change, "species": ""})
    signal_records = [r for r in records if r["group"].role == "signal" and not r["group"].mixed]
    _placeholder_species(signal_records)
    # Integral ratios are nuclei ratios only within one species (one concentration): the
    # unit comes from the placeholder species with the most signals when it has two or
    # more; else from all signals.  Small lines (a residue, an impurity) are left out.
    by_species: dict[str, list[float]] = {}
    for record in signal_records:
        if record["integral"] >= cutoff and not (record["group"].change or 0.0) > 4.0:
            by_species.setdefault(record.get("cluster") or record["species"], []).append(record["integral"])
    largest = max(by_species.values(), key=len, default=[])
    unit = _nuclei_unit([i for i, g in zip(integrals, groups)
                         if g.role == "signal" and not g.mixed and i >= cutoff and not (g.change or 0.0) > 4.0])
    if len(largest) >= 2:
        own = _nuclei_unit(largest)
        if _whole_number_misfit(np.asarray(largest) / own) <= 0.15:
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


def _neighbour_ppm(group: _Group, groups: list[_Group]) -> float:
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
        if a["group"].pattern.code not in _SIMPLE or b["group"].pattern.code not in _SIMPLE:
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


def _exclusions(windows: list[ProposedWindow], noise: float, observe_mhz: float, cap_ppm: float):
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


def _noise_region(spectrum: Spectrum, windows: list[ProposedWindow],
                  exclusions: list[tuple[float, float]] = ()) -> tuple[float, float] | None:
    """The widest stretch of the axis clear of every window and solvent tail (0.1 ppm guard)."""
    high_edge, low_edge = spectrum.ppm_range
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


# ---------------------------------------------------------------- the config text
def _escape(text: str) -> str:
    """TOML basic-string escapes for backslash, quote and every control character."""
    out = []
    for char in str(text):
        if char == "\\":
            out.append("\\\\")
        elif char == '"':
            out.append('\\"')
        elif char in "\b\t\n\f\r":
            out.append({"\b": "\\b", "\t": "\\t", "\n": "\\n", "\f": "\\f", "\r": "\\r"}[char])
        elif ord(char) < 0x20 or ord(char) == 0x7F or 0x80 <= ord(char) < 0xA0 or char in "\u2028\u2029\ufeff":
            out.append(f"\\u{ord(char):04X}")
        else:
            out.append(char)
    return "".join(out)


def _q(text: str) -> str:
    """A TOML basic string: nothing in ``text`` can end the string or the line."""
    return '"' + _escape(text) + '"'


def _comment(text: str) -> str:
    """Text safe inside a TOML comment: control characters (a newline in a file name would
    start a new key) are written as escapes."""
    return "".join(_escape(c) if (ord(c) < 0x20 and c != "\t") or ord(c) == 0x7F
                   or 0x80 <= ord(c) < 0xA0 or c in "\u2028\u2029\ufeff" else c for c in str(text))


def _describe(window: ProposedWindow) -> str:
    lines = ", ".join(f"{p.shift_ppm:.3f}" for p in window.peaks)
    text = f"{window.pattern.describe()} ({window.multiplicity}), lines at {lines} ppm"
    return text + f", SNR {max(p.snr for p in window.peaks):.0f}"


def _behaviour(window: ProposedWindow) -> str:
    if window.change is None:
        return ""
    if window.change == math.inf:
        return "appears during the series (a product?)"
    percent = 100.0 * window.change
    if window.change < 0.8:
        return f"falls to {percent:.0f} % of its first height by the last spectrum (a reactant?)"
    if window.change > 1.25:
        return f"grows to {percent:.0f} % of its first height (a product?)"
    return f"steady ({percent:.0f} % of its first height at the end)"


def _pattern(files: list[Path], skipped: list[str]) -> str:
    """Glob for the spectra: ``*<suffix>`` (spectrum_files keeps one suffix), narrowed to
    the readable files' common name prefix when that leaves out every unreadable file (a
    simulator's ``truth.csv`` beside ``spectrum_0001.csv`` ...)."""
    suffix = files[0].suffix
    unreadable = [f for f in files if any(message.startswith(f"{f}") for message in skipped)]
    readable = [f.name for f in files if f not in unreadable]
    prefix = os.path.commonprefix(readable).rstrip("0123456789") if len(readable) > 1 else ""
    if unreadable and prefix and not re.search(r"[][*?{}\\]", prefix) \
            and not any(f.name.startswith(prefix) for f in unreadable):
        return f"{prefix}*{suffix}"
    return f"*{suffix}"


def _signal_lines(window: ProposedWindow, observe_mhz: float, fit_standard: bool = False) -> list[str]:
    """One [[signals]] table with its comments.  ``fit_standard``: the standard candidate
    is fitted too (a singlet line shape), so it is measured like the fitted analytes
    (a region integral misses part of a Lorentzian's tails that a fit keeps)."""
    lo, hi = window.window_ppm
    notes = [_describe(window)]
    if window.mixed:
        notes.append("the first and the last spectrum show different lines here: two species overlap; "
                     "left out (uncomment and give a fit group with two components to use it)")
    elif window.minor:
        notes.append("small signal: a solvent residue or an impurity? delete it if so")
    elif window.crowded and window.pattern.code not in _SIMPLE:
        notes.append("its window is cut short by a neighbour and a fit cannot model this pattern: "
                     "the region integral carries the neighbour's tail; a species of its own")
    else:
        notes.append("nuclei guessed from the integral ratios: check it")
    behaviour = _behaviour(window)
    if behaviour:
        notes.append(behaviour)
    if window.reference_candidate:
        steady = "unchanging" if window.change is not None else "(one spectrum: change unknown)"
        notes.append(f"sharp, isolated, {steady}: the internal standard? then set its "
                     "concentration_mol_per_l below and check its nuclei")
    simple = window.pattern.code in _SIMPLE
    body = [
        "[[signals]]",
        f"name = {_q(window.name)}",
        f"species = {_q(window.species or window.name)}   # EDIT: the compound, e.g. \"ester\" "
        "(signals of one species share it)",
        f"window_ppm = [{lo:.3f}, {hi:.3f}]   # [low, high] ppm",
        f"nuclei = {window.nuclei_guess}                      # nuclei under the signal, per molecule",
    ]
    width = float(np.median([p.width_hz for p in window.peaks]))
    as_standard = fit_standard and window.reference_candidate and window.pattern.code == "s"
    if (window.fit_group or as_standard) and simple:
        shape = f"multiplicity = {_q(window.multiplicity)}"
        if window.pattern.j_hz:
            shape += f", j_hz = {window.pattern.j_hz[0]:.2f}"
        shape += f", width_hz = {max(width, 0.1):.2f}"
        # drift left after alignment is a fraction of a hertz; a centre may move 1.5 Hz, but
        # never 30 % of the way to another multiplet's line (components must not swap)
        tolerance = min(0.03, max(0.005, 1.5 / observe_mhz), 0.3 * window.neighbour_ppm)
        if window.fit_group:
            body += ['method = "fit"                   # too close to its neighbour for a region integral',
                     f"group = {_q(window.fit_group)}            # deconvolved together with its neighbour"]
        else:
            body += ['method = "fit"                   # fitted like the analytes it is compared with']
        body += [f"lineshape = {{ {shape} }}",
                 f"tolerance_ppm = {tolerance:.3f}   # how far the fitted centre may move (ppm)"]
    else:
        body += ['method = "integral"             # or "fit": deconvolution, needs lineshape = '
                 '{multiplicity, j_hz, width_hz}',
                 "# tolerance_ppm = 0.02           # let the window follow a drifting signal (ppm)"]
    if window.reference_candidate:
        body += ["# concentration_mol_per_l = 0.05   # EDIT: the standard's concentration (mol/L); "
                 "setting it makes this the internal standard"]
    else:
        body += ["# concentration_mol_per_l = 0.05   # only for the internal standard (mol/L)"]
    out = ["", *(f"# {_comment(n)}" for n in notes)]
    if window.mixed:
        out += [f"# {line}" for line in body]
    else:
        out += body
    return out


def render_config(spectrum: Spectrum, windows: list[ProposedWindow], folder: Path,
                  noise_region_ppm, config_dir: Path, files: list[Path], skipped: list[str],
                  from_fid: bool = False, phase_note: str | None = None,
                  exclusions: list[tuple[float, float]] = (), last_name: str | None = None) -> str:
    """The commented TOML text of a starter run config (loads with
    :func:`kinetics.config.load_run_config`; the species, standard, reactant and product
    are left for the chemist)."""
    try:
        folder_text = os.path.relpath(folder.resolve(), config_dir.resolve())
    except ValueError:  # different drives (Windows)
        folder_text = str(folder.resolve())
    made = datetime.now(timezone.utc).isoformat(timespec="seconds").replace("+00:00", "Z")
    tms = next((w for w in windows if w.role == "reference"), None)
    candidate = next((w for w in windows if w.reference_candidate), None)
    solvents = [w for w in windows if w.role == "solvent"]
    residual = next((w for w in solvents if w.expected_ppm is not None), None)
    signals = [w for w in windows if w.role == "signal"]
    usable = [w for w in signals if not w.mixed]
    timed = spectrum.acquired_utc is not None
    source_name = Path(spectrum.source_path or "?").name
    read_from = f"{source_name}, the first of {len(files)} file(s) in acquisition order"
    if last_name:
        read_from += f", and {last_name}, the last"
    out = [
        "# Starter run config drafted by `kinetics init`: edit it, then `kinetics run` it.",
        f"# Drafted {made} from {_comment(read_from)}",
        f"# ({_comment(spectrum.nucleus)}, {spectrum.observe_mhz:.3f} MHz).  Every proposal is a guess: "
        "check it against the spectrum.",
        "#",
        "# TO DO (lines marked EDIT), about 5 edits; `kinetics run` refuses until 2 and 3 are set:",
        "#  1. species: give each signal its compound (`species = ...`; a species placeholder",
        "#     such as falls_1 may be kept, but a name reads better in the report);",
        "#  2. the internal standard: set concentration_mol_per_l in its [[signals]] table, or",
        "#     set [quantify] mode = \"relative\" when there is no standard;",
        "#  3. [quantify] reactant = the species whose decay is fitted;",
        "#  4. [quantify] product = the species formed (for the yield and the mass balance);",
        "#  5. nuclei: guessed from integral ratios, which hold only within one species; the",
        "#     standard's (and any lone signal's) nuclei cannot be read from the spectrum.",
    ]
    out += [f"# skipped unreadable file: {_comment(message)}" for message in skipped]
    out += [
        "",
        "[run]",
        f"folder = {_q(folder_text)}       # spectra folder, relative to this file",
        f"pattern = {_q(_pattern(files, skipped))}              # which files of the folder are spectra (glob)",
        f"order = {_q('time' if timed else 'name')}               # series order: \"time\" or file \"name\"",
        "",
        "[time]",
        f"source = {_q('header' if timed else 'mtime')}            # \"header\" (file's acquisition date), "
        "\"filename\" or \"mtime\"",
        '# reaction_start = "2026-01-01T09:00:00Z"   # t = 0 (ISO 8601 UTC); default: the first spectrum',
        "# first_spectrum_offset_s = 0.0  # time of the first spectrum when no reaction_start is given (s)",
        "",
        "[processing]",
    ]
    if from_fid:
        out.append('phase = "auto"                  # FIDs: DC offset, filter delay, 0.3 Hz broadening, '
                   "zero-fill, phase")
    elif phase_note is not None:
        out.append(f'phase = "auto"                  # {_comment(phase_note)}')
    else:
        out.append('phase = "none"                  # files are spectra already; "auto" re-phases '
                   "when they carry imaginary data")
    if exclusions:
        pairs = ", ".join(f"[{high:.2f}, {low:.2f}]" for high, low in exclusions)
        out.append(f"phase_exclude_ppm = [{pairs}]   # solvent line(s) kept out of the phase score")
    out.append('baseline = "none"               # or "asls", "arpls", "polynomial" for a rolling baseline')
    if tms is not None:
        line = max(tms.peaks, key=lambda p: p.height).shift_ppm
        out.append(f"reference = {{ ppm = 0.0, window_ppm = {_reference_window(tms, windows):.2f} }}"
                   f"   # TMS-like line found at {line:.3f} ppm")
    elif residual is not None:
        line = residual.peaks[0].shift_ppm
        out.append(f"# reference = {{ ppm = {line:.3f}, window_ppm = {_reference_window(residual, windows):.2f}, "
                   f"target_ppm = {residual.expected_ppm:.2f} }}   # PROPOSAL: {_comment(residual.label)}; "
                   "confirm it")
    elif candidate is not None:
        line = candidate.peaks[0].shift_ppm
        out.append(f"# reference = {{ ppm = {line:.2f}, window_ppm = {_reference_window(candidate, windows):.2f} }}"
                   f"   # PROPOSAL: the singlet at {line:.3f} ppm; confirm the compound and its shift")
    else:
        out.append("# reference = { ppm = 0.0, window_ppm = 0.3 }   # no TMS and no isolated singlet found: "
                   "name a peak")
    anchor = tms or candidate
    if anchor is not None and (tms is not None or candidate.change is not None):
        line = max(anchor.peaks, key=lambda p: p.height).shift_ppm
        half = _reference_window(anchor, windows)
        out += ["", "[alignment]",
                f"window_ppm = [{line - half:.3f}, {line + half:.3f}]   # align every spectrum on the "
                f"{'TMS' if tms is not None else 'unchanging singlet'} (the field drifts)",
                "max_shift_ppm = 0.05"]
    out += ["", "[integration]", 'baseline = "edges"              # straight line through the window edges']
    if noise_region_ppm is not None:
        out.append(f"noise_region_ppm = [[{noise_region_ppm[1]:.3f}, {noise_region_ppm[0]:.3f}]]   "
                   "# signal-free stretch for the noise, clear of solvent tails (ppm)")
    if any(w.fit_group for w in usable) and solvents:
        out.append("fit_baseline_order = 3          # a solvent line's Lorentzian tail is curved and "
                   "lopsided across a window")
    out += [
        "",
        "[quantify]",
        "# mode: \"standard\" once a signal has concentration_mol_per_l (the default then);",
        "# mode = \"relative\"             # EDIT instead, when there is no internal standard",
    ]
    falling = sorted({w.species for w in usable if w.change is not None and w.change < 0.8})
    rising = sorted({w.species for w in usable if w.change is not None and w.change > 1.25})
    out.append("# reactant = " + _q(falling[0] if falling else "SPECIES")
               + "          # EDIT: the species fitted" + (f" (falling: {', '.join(falling)})" if falling else ""))
    out.append("# product = " + _q(rising[0] if rising else "SPECIES")
               + "           # EDIT: the species formed" + (f" (rising: {', '.join(rising)})" if rising else ""))
    if len(rising) >= 2:
        weights = ", ".join(f"{name} = {1 if n == 0 else 0}" for n, name in enumerate(rising))
        out.append(f"# stoichiometry = {{ {weights} }}   # EDIT when products form together from one "
                   "reactant: count them once in the mass balance")
    out += ["", "[fit]", '# model = "first"               # rate law (default first order); it fits [quantify] reactant']
    for window in solvents:
        lo, hi = window.window_ppm
        out += ["", f"# Solvent line, left out of the signals (phase and noise exclusion): {_comment(window.label)};",
                f"# {_describe(window)}, window {lo:.3f} .. {hi:.3f} ppm."]
    if tms is not None:
        out += ["", f"# Reference line, left out of the signals: {_describe(tms)}."]
    if not usable:
        out += ["", "# No line rose above the noise threshold: write [[signals]] tables by hand, e.g.",
                "# [[signals]]", '# name = "ester"', "# window_ppm = [4.0, 4.3]", "# nuclei = 2"]
    for window in signals:
        out += _signal_lines(window, spectrum.observe_mhz, fit_standard=any(w.fit_group for w in usable))
    return "\n".join(out) + "\n"


def _reference_window(window: ProposedWindow, windows: list[ProposedWindow]) -> float:
    """Half-width searched for the reference line: 0.3 ppm, less when another line is nearer."""
    line = max(window.peaks, key=lambda p: p.height).shift_ppm
    others = [abs(p.shift_ppm - line) for w in windows if w is not window for p in w.peaks]
    return round(max(0.02, min(0.3, 0.8 * min(others, default=1.0))), 2)


# ---------------------------------------------------------------- entry point
def draft_config(folder: str | Path, out: str | Path | None = None, *, force: bool = False,
                 snr_threshold: float = 8.0, coupling_hz: float = 8.0) -> Draft:
    """Read the first (and last) spectrum of ``folder`` and write a commented starter config.

    Parameters
    ----------
    folder : path
        The spectra folder.
    out : path, optional
        Config to write; default ``<folder name>.toml`` beside the folder (not inside it,
        where a watcher would see it among the spectra).
    force : bool
        Replace an existing config (never done otherwise).
    snr_threshold, coupling_hz : float
        See :func:`propose_windows`.

    Raises
    ------
    InputFileError
        Empty folder, unreadable first file, or an existing config without ``force``.
    """
    folder = Path(folder)
    if out is None:
        resolved = folder.resolve()
        out = resolved.parent / f"{resolved.name}.toml"
    out = Path(out)
    if out.exists() and not force:
        raise InputFileError(out, "already exists and was left unchanged",
                             hint="choose another --out or pass --force to replace it")
    spectrum, last, files, skipped, from_fid = series_ends(folder)
    phase_note = None
    if not from_fid:
        spectrum, phase_note = _rephase_if_needed(spectrum)
        if last is not None:
            last, _ = _rephase_if_needed(last)
    peaks, noise, threshold, windows = propose_windows(spectrum, later=last, snr_threshold=snr_threshold,
                                                       coupling_hz=coupling_hz)
    exclusions = _exclusions(windows, noise, spectrum.observe_mhz, cap_ppm=0.5)
    tails = _exclusions(windows, noise, spectrum.observe_mhz, cap_ppm=1.5)
    region = _noise_region(spectrum, windows, tails)
    last_name = None if last is None else Path(last.source_path or "?").name
    text = render_config(spectrum, windows, folder, region, out.parent, files, skipped, from_fid,
                         phase_note=phase_note, exclusions=exclusions, last_name=last_name)
    from kinetics.atomic import write_atomic

    out.parent.mkdir(parents=True, exist_ok=True)
    write_atomic(out, text, encoding="utf-8")
    return Draft(source=Path(spectrum.source_path or files[0]), config_path=out, spectrum=spectrum, noise_sigma=noise,
                 threshold=threshold, peaks=tuple(peaks), windows=tuple(windows), noise_region_ppm=region,
                 files=tuple(files), skipped=tuple(skipped), text=text,
                 last_source=None if last is None else Path(last.source_path or files[-1]))


__all__ = ["Peak", "Pattern", "ProposedWindow", "Draft", "SPECTRUM_SUFFIXES", "SOLVENT_LINES", "spectrum_files",
           "first_spectrum", "series_ends", "pick_peaks", "match_pattern", "group_peaks", "propose_windows",
           "solvent_match", "solvent_label", "render_config", "draft_config"]
