"""Draft a starter run config from the first spectrum of a folder (``kinetics init``).

Steps: list the spectrum files of the folder, read them (FIDs transformed with
:func:`kinetics.processing.fid_to_spectrum`), take the first in acquisition order, pick
its peaks above a noise-based threshold, group lines closer than a coupling-sized gap
into multiplet windows, recognise a reference line near 0 ppm (TMS) and a dominant
solvent line, and write a commented TOML config that the user edits (species names,
nuclei, the internal standard) before ``kinetics run``.

The grouping rule: first-order multiplets at 40-100 MHz have adjacent lines one J apart
(H-H couplings through three bonds are 6-8 Hz, common practice), so lines closer than
``max_gap_hz`` (default 1.6 x 8 Hz) belong to one window.  At 60 MHz a 7 Hz coupling is
0.12 ppm, so a quartet spans 0.35 ppm.  Larger couplings (trans alkenes, 12-18 Hz) split
a multiplet into two halves further apart than that; two adjacent runs of lines that
repeat one pattern (same line count >= 2, spacings and relative heights) within
``LARGE_COUPLING_HZ`` are joined, so no flag is needed for them.  Windows get a margin of several line widths on
each side (a Lorentzian window of +/- m half-widths holds (2/pi) arctan(m) of the area)
but never reach past the midpoint to the next group, so windows never overlap.
"""

from __future__ import annotations

import logging
import math
import os
import re
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
from scipy import signal as scipy_signal

from kinetics.errors import FitError, InputFileError
from kinetics.spectra.spectrum import Fid, Spectrum

log = logging.getLogger(__name__)

#: Suffixes of files considered spectra (content decides the format; this only skips
#: notes, images and configs lying in the same folder).
SPECTRUM_SUFFIXES = (".dx", ".jdx", ".jcamp", ".jcm", ".csv", ".tsv", ".txt", ".dat")

_TMS_WINDOW_PPM = 0.15       # a reference line must lie within this of 0 ppm
_SOLVENT_FACTOR = 5.0        # a solvent line is this many times the next-largest group
_MINOR_FRACTION = 0.3        # signals below this share of the median integral are "minor"
#: Largest H-H coupling expected between the halves of one multiplet: trans-alkene 3J is
#: 12-18 Hz (common practice), so the halves of a trans dd lie up to ~18 Hz apart.
LARGE_COUPLING_HZ = 18.0


@dataclass(frozen=True)
class Peak:
    """One picked line: position, height, FWHM and signal-to-noise ratio."""

    shift_ppm: float
    height: float
    width_hz: float
    snr: float


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
        Mean spacing of adjacent lines for multiplets, in Hz.
    minor : bool
        Integral below 30 % of the median signal: perhaps a solvent residue or impurity.
    """

    name: str
    window_ppm: tuple[float, float]
    peaks: tuple[Peak, ...]
    role: str
    integral: float
    nuclei_guess: int
    coupling_hz: float | None
    minor: bool = False

    @property
    def centre_ppm(self) -> float:
        return 0.5 * (self.window_ppm[0] + self.window_ppm[1])

    @property
    def multiplicity(self) -> str:
        names = {1: "singlet", 2: "doublet", 3: "triplet", 4: "quartet", 5: "quintet",
                 6: "sextet", 7: "septet"}
        return names.get(len(self.peaks), f"{len(self.peaks)} lines")


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

    @property
    def reference(self) -> ProposedWindow | None:
        return next((w for w in self.windows if w.role == "reference"), None)

    @property
    def solvent(self) -> ProposedWindow | None:
        return next((w for w in self.windows if w.role == "solvent"), None)

    @property
    def signals(self) -> tuple[ProposedWindow, ...]:
        return tuple(w for w in self.windows if w.role == "signal")


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
    chosen = min(timed)[1] if len(timed) == len(records) else 0
    path, record = records[chosen]
    try:
        return _as_spectrum(record), files, skipped, isinstance(record, Fid)
    except (ValueError, FitError) as error:
        raise InputFileError(path, f"FID could not be transformed: {error}",
                             hint="check that the file is a complete FID") from error


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


# ---------------------------------------------------------------- peaks
def _robust_noise(spectrum: Spectrum) -> float:
    from kinetics.signals import estimate_noise

    try:
        return float(estimate_noise(spectrum).sigma)
    except FitError:
        differences = np.diff(spectrum.real)
        return float(1.4826 * np.median(np.abs(differences - np.median(differences))) / math.sqrt(2.0))


def pick_peaks(spectrum: Spectrum, snr_threshold: float = 8.0,
               min_relative_height: float = 0.02) -> tuple[list[Peak], float, float]:
    """Lines that rise above the noise and are not negligible next to the main signals.

    The height threshold is the larger of ``snr_threshold`` noise sigmas and
    ``min_relative_height`` times the tallest line (the tallest but one when the tallest
    is a dominant solvent line, more than 5 times the next).  On a low-field benchtop
    spectrum the noise term decides; on a high-field spectrum with SNR in the thousands
    the relative term keeps 13C satellites, spinning sidebands and traces out of the
    proposal.

    Returns
    -------
    peaks : list of Peak, high shift first
    noise_sigma : float
    threshold : float
        The height threshold used (intensity units).
    """
    intensity = spectrum.real - np.median(spectrum.real)
    noise = _robust_noise(spectrum)
    if not noise > 0:
        noise = float(np.std(intensity)) or 1.0
    threshold = snr_threshold * noise
    index, _ = scipy_signal.find_peaks(intensity, height=threshold, prominence=threshold)
    if index.size == 0:
        return [], noise, threshold
    heights = np.sort(intensity[index])[::-1]
    main = heights[1] if heights.size > 1 and heights[0] > _SOLVENT_FACTOR * heights[1] else heights[0]
    if min_relative_height * main > threshold:
        threshold = float(min_relative_height * main)
        index = index[intensity[index] >= threshold]
    widths, *_ = scipy_signal.peak_widths(intensity, index, rel_height=0.5)
    spacing_hz = spectrum.spacing_hz
    peaks = [Peak(float(spectrum.ppm[i]), float(intensity[i]), float(w * spacing_hz), float(intensity[i] / noise))
             for i, w in zip(index, widths)]
    return peaks, noise, threshold


def group_peaks(peaks: list[Peak], observe_mhz: float, max_gap_hz: float,
                large_coupling_hz: float | None = LARGE_COUPLING_HZ,
                resolution_hz: float = 0.0) -> list[list[Peak]]:
    """Lines grouped into multiplets, high shift first.

    First, runs of lines whose neighbours are within ``max_gap_hz``.  Then two adjacent
    runs are joined when they look like the two halves of one line split by a large
    coupling (a trans-alkene doublet of doublets or doublet of quartets): centres at most
    1.1 x ``large_coupling_hz`` apart, the same number (>= 2) of lines with the same
    spacings and the same relative heights, and similar total heights.  Single lines are
    never joined this way: two nearby singlets are far more often two species than one
    large doublet.  ``large_coupling_hz=None`` turns the second step off.
    """
    runs: list[list[Peak]] = []
    for peak in sorted(peaks, key=lambda p: -p.shift_ppm):
        if runs and (runs[-1][-1].shift_ppm - peak.shift_ppm) * observe_mhz <= max_gap_hz:
            runs[-1].append(peak)
        else:
            runs.append([peak])
    if not large_coupling_hz:
        return runs
    groups: list[list[Peak]] = []
    index = 0
    while index < len(runs):
        if index + 1 < len(runs) and _mirror_halves(runs[index], runs[index + 1], observe_mhz,
                                                    large_coupling_hz, resolution_hz):
            groups.append(runs[index] + runs[index + 1])
            index += 2  # a joined pair is not joined again (no chains of halves)
        else:
            groups.append(runs[index])
            index += 1
    return groups


def _mirror_halves(upper: list[Peak], lower: list[Peak], observe_mhz: float, large_coupling_hz: float,
                   resolution_hz: float) -> bool:
    """True when two runs of lines repeat one pattern a large coupling apart (see group_peaks)."""
    if len(upper) != len(lower) or len(upper) < 2:
        return False
    centre_hz = [0.5 * (run[0].shift_ppm + run[-1].shift_ppm) * observe_mhz for run in (upper, lower)]
    if centre_hz[0] - centre_hz[1] > 1.1 * large_coupling_hz:
        return False
    spacing_upper = -np.diff([p.shift_ppm for p in upper]) * observe_mhz
    spacing_lower = -np.diff([p.shift_ppm for p in lower]) * observe_mhz
    # Peak tops sit on the digital grid, so spacings agree only to about two points.
    tolerance_hz = max(0.6, 2.0 * resolution_hz, 0.15 * float(max(spacing_upper.max(), spacing_lower.max())))
    if np.any(np.abs(spacing_upper - spacing_lower) > tolerance_hz):
        return False
    height_upper = np.array([p.height for p in upper])
    height_lower = np.array([p.height for p in lower])
    ratio = height_upper.sum() / height_lower.sum()
    # Second-order "roofing" tilts the halves towards the coupling partner (common practice):
    # a factor of 2 still passes, a reactant and a product doublet at t = 0 rarely do.
    if not 0.5 <= ratio <= 2.0:
        return False
    pattern_gap = np.abs(height_upper / height_upper.sum() - height_lower / height_lower.sum())
    return bool(np.all(pattern_gap <= 0.15))


def _window_bounds(groups: list[list[Peak]], observe_mhz: float, margin_hz: float,
                   ppm_range: tuple[float, float]) -> list[tuple[float, float]]:
    high_edge, low_edge = ppm_range
    bounds = []
    for number, group in enumerate(groups):
        width_hz = max(p.width_hz for p in group)
        margin_ppm = max(margin_hz, 6.0 * width_hz) / observe_mhz
        high = group[0].shift_ppm + margin_ppm
        low = group[-1].shift_ppm - margin_ppm
        if number > 0:  # stop short of the midpoint to the previous (higher) group
            high = min(high, 0.5 * (groups[number - 1][-1].shift_ppm + group[0].shift_ppm) - 0.5 / observe_mhz)
        if number + 1 < len(groups):
            low = max(low, 0.5 * (group[-1].shift_ppm + groups[number + 1][0].shift_ppm) + 0.5 / observe_mhz)
        bounds.append((max(low, low_edge), min(high, high_edge)))
    return bounds


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
    half_width_ppm = 0.5 * peak.width_hz / observe_mhz
    return peak.height / (1.0 + ((ppm - peak.shift_ppm) / half_width_ppm) ** 2)


def _is_reference(group: list[Peak]) -> bool:
    """A TMS-like group: its tallest line within 0.15 ppm of 0 and carrying most of the
    group's height (at high field the 29Si satellites, 6.6 Hz apart, join the group)."""
    tallest = max(group, key=lambda p: p.height)
    return (abs(tallest.shift_ppm) <= _TMS_WINDOW_PPM and len(group) <= 3
            and tallest.height >= 0.7 * sum(p.height for p in group))


def _roles(groups: list[list[Peak]], integrals: list[float]) -> list[str]:
    roles = ["signal"] * len(groups)
    references = [n for n, group in enumerate(groups) if _is_reference(group)]
    if references:
        roles[max(references, key=lambda n: max(p.height for p in groups[n]))] = "reference"
    candidates = [n for n, role in enumerate(roles) if role == "signal"]
    if len(candidates) >= 2:
        order = sorted(candidates, key=lambda n: integrals[n], reverse=True)
        if integrals[order[0]] > _SOLVENT_FACTOR * max(integrals[order[1]], 0.0):
            roles[order[0]] = "solvent"
    return roles


def _nuclei_unit(integrals: list[float]) -> float:
    """Integral per nucleus that makes the signals' ratios closest to whole numbers.

    Candidates are each integral divided by 1, 2 or 3 (a CH, CH2 or CH3 group); a
    candidate is allowed only when every signal gets 1 to 9 nuclei; the one with the
    smallest worst deviation from whole numbers wins, the larger unit on near-ties.  The
    ratios of different species also carry their concentrations, so this is a guess the
    user must check.
    """
    if not integrals:
        return 1.0
    values = np.asarray(integrals, float)
    best_unit, best_score = float(values.min()), np.inf
    for unit in sorted({v / n for v in values for n in (1, 2, 3)}, reverse=True):
        counts = values / unit
        if np.round(counts).min() < 1 or np.round(counts).max() > 9:
            continue
        score = float(np.max(np.abs(counts - np.round(counts))))
        if score < best_score - 0.05:
            best_unit, best_score = unit, score
    return best_unit


def propose_windows(spectrum: Spectrum, *, snr_threshold: float = 8.0, coupling_hz: float = 8.0,
                    gap_factor: float = 1.6, margin_hz: float = 10.0, min_relative_height: float = 0.02,
                    large_coupling_hz: float | None = LARGE_COUPLING_HZ):
    """Peaks, noise and proposed windows of one spectrum (no files touched).

    Parameters
    ----------
    spectrum : Spectrum
    snr_threshold : float
        Lines below this many noise sigmas are ignored.
    min_relative_height : float
        Lines below this fraction of the tallest (non-solvent) line are ignored.
    coupling_hz : float
        Largest coupling expected between lines of one multiplet, Hz.
    gap_factor : float
        Adjacent lines closer than ``gap_factor * coupling_hz`` share a window.
    large_coupling_hz : float or None
        Two runs of lines that mirror each other within this coupling are joined into one
        multiplet (the halves of a trans-alkene dd); see :func:`group_peaks`.
    margin_hz : float
        Least margin beyond the outer lines of a window (6 line widths when wider), Hz.

    Returns
    -------
    peaks : list of Peak
    noise_sigma, threshold : float
    windows : list of ProposedWindow, high shift first
    """
    peaks, noise, threshold = pick_peaks(spectrum, snr_threshold, min_relative_height)
    groups = group_peaks(peaks, spectrum.observe_mhz, gap_factor * coupling_hz, large_coupling_hz,
                         resolution_hz=spectrum.spacing_hz)
    bounds = _window_bounds(groups, spectrum.observe_mhz, margin_hz,
                            (spectrum.ppm_range[0], spectrum.ppm_range[1]))
    integrals = [_integral(spectrum, lo, hi) for lo, hi in bounds]
    roles = _roles(groups, integrals)
    if "solvent" in roles:
        # A dominant line's Lorentzian tail reaches into its neighbours' windows and is
        # curved, so the straight edge baseline misses it; take the tail out first.
        solvent = groups[roles.index("solvent")][0]
        cleaned = spectrum.replace(real=spectrum.real - _lorentzian(spectrum.ppm, solvent, spectrum.observe_mhz))
        integrals = [_integral(cleaned, lo, hi) if role == "signal" else integral
                     for (lo, hi), integral, role in zip(bounds, integrals, roles)]
    # Small lines (a solvent residue, an impurity) would set the unit; leave them out.
    positive = [i for i, r in zip(integrals, roles) if r == "signal" and i > 0]
    cutoff = _MINOR_FRACTION * float(np.median(positive)) if positive else 0.0
    unit = _nuclei_unit([i for i in positive if i >= cutoff])
    windows = []
    counter = 0
    for group, (lo, hi), integral, role in zip(groups, bounds, integrals, roles):
        if role == "signal":
            counter += 1
            name = f"signal_{counter}"
        else:
            name = role
        spacing = (np.diff([p.shift_ppm for p in group]) * -spectrum.observe_mhz).mean() if len(group) > 1 else None
        nuclei = int(min(9, max(1, round(integral / unit)))) if role == "signal" and integral > 0 else 1
        minor = role == "signal" and integral < cutoff
        windows.append(ProposedWindow(name, (float(lo), float(hi)), tuple(group), role, integral, nuclei,
                                      None if spacing is None else float(spacing), minor))
    return peaks, noise, threshold, windows


def _noise_region(spectrum: Spectrum, windows: list[ProposedWindow]) -> tuple[float, float] | None:
    """The widest stretch of the axis clear of every window (with a 0.1 ppm guard)."""
    high_edge, low_edge = spectrum.ppm_range
    occupied = sorted(((w.window_ppm[0] - 0.1, w.window_ppm[1] + 0.1) for w in windows), key=lambda b: -b[1])
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
def _q(text: str) -> str:
    """A TOML basic string."""
    return '"' + str(text).replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n") + '"'


def _describe(window: ProposedWindow) -> str:
    lines = ", ".join(f"{p.shift_ppm:.3f}" for p in window.peaks)
    text = f"{window.multiplicity} at {lines} ppm"
    if window.coupling_hz is not None:
        text += f", spacing {window.coupling_hz:.1f} Hz"
    return text + f", SNR {max(p.snr for p in window.peaks):.0f}"


def _pattern(files: list[Path], skipped: list[str]) -> str:
    """Glob for the spectra: ``*<suffix>`` (spectrum_files keeps one suffix), narrowed to
    the readable files' common name prefix when that leaves out every unreadable file (a
    simulator's ``truth.csv`` beside ``spectrum_0001.csv`` ...)."""
    suffix = files[0].suffix
    unreadable = [f for f in files if any(message.startswith(f"{f}") for message in skipped)]
    readable = [f.name for f in files if f not in unreadable]
    prefix = os.path.commonprefix(readable).rstrip("0123456789") if len(readable) > 1 else ""
    if unreadable and prefix and not re.search(r"[][*?]", prefix) \
            and not any(f.name.startswith(prefix) for f in unreadable):
        return f"{prefix}*{suffix}"
    return f"*{suffix}"


def _signal_lines(window: ProposedWindow) -> list[str]:
    lo, hi = window.window_ppm
    remark = ("small signal: a solvent residue or an impurity? delete it if so" if window.minor
              else "nuclei guessed from the integral ratios: check it")
    return [
        "",
        f"# {_describe(window)}; {remark}",
        "[[signals]]",
        f"name = {_q(window.name)}",
        f"species = {_q(window.name)}        # the compound, e.g. \"ester\"; signals of one species share it",
        f"window_ppm = [{lo:.3f}, {hi:.3f}]   # [low, high] ppm",
        f"nuclei = {window.nuclei_guess}                      # nuclei under the signal, per molecule",
        'method = "integral"             # or "fit": deconvolution, needs lineshape = {multiplicity, j_hz, width_hz}',
        "# tolerance_ppm = 0.02           # let the window follow a drifting signal (ppm)",
        "# standard = true                # internal standard: also give concentration_mol_per_l",
        "# concentration_mol_per_l = 0.05",
    ]


def render_config(spectrum: Spectrum, windows: list[ProposedWindow], folder: Path,
                  noise_region_ppm, config_dir: Path, files: list[Path], skipped: list[str],
                  from_fid: bool = False, phase_note: str | None = None) -> str:
    """The commented TOML text of a starter run config (loads with
    :func:`kinetics.config.load_run_config`)."""
    try:
        folder_text = os.path.relpath(folder.resolve(), config_dir.resolve())
    except ValueError:  # different drives (Windows)
        folder_text = str(folder.resolve())
    made = datetime.now(timezone.utc).isoformat(timespec="seconds").replace("+00:00", "Z")
    reference = next((w for w in windows if w.role == "reference"), None)
    solvent = next((w for w in windows if w.role == "solvent"), None)
    signals = [w for w in windows if w.role == "signal"]
    timed = spectrum.acquired_utc is not None
    out = [
        "# Starter run config drafted by `kinetics init`: edit it, then `kinetics run` it.",
        f"# Drafted {made} from {Path(spectrum.source_path or '?').name}, the first of "
        f"{len(files)} file(s) in acquisition order",
        f"# ({spectrum.nucleus}, {spectrum.observe_mhz:.3f} MHz).  Every proposal is a guess from that one "
        "spectrum: give each",
        "# signal its species and number of nuclei, and mark the internal standard if there is one.",
    ]
    out += [f"# skipped unreadable file: {message}" for message in skipped]
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
                   "zero-fill, ACME phase")
    elif phase_note is not None:
        out.append(f'phase = "auto"                  # {phase_note}')
        solvent_window = next((w for w in windows if w.role == "solvent"), None)
        if solvent_window is not None:
            lo, hi = solvent_window.window_ppm
            out.append(f"phase_exclude_ppm = [[{hi:.2f}, {lo:.2f}]]   # keep the solvent line out of the phase score")
    else:
        out.append('phase = "none"                  # files are spectra already; "auto" re-phases '
                   "when they carry imaginary data")
    out.append('baseline = "none"               # or "asls", "arpls", "polynomial" for a rolling baseline')
    if reference is not None:
        out.append(f"reference = {{ ppm = 0.0, window_ppm = 0.3 }}   # TMS-like line found at "
                   f"{reference.peaks[0].shift_ppm:.3f} ppm")
    else:
        out.append("# reference = { ppm = 0.0, window_ppm = 0.3 }   # no line near 0 ppm was found: "
                   "name a peak")
    out += ["", "[integration]", 'baseline = "edges"              # straight line through the window edges']
    if noise_region_ppm is not None:
        out.append(f"noise_region_ppm = [{noise_region_ppm[1]:.3f}, {noise_region_ppm[0]:.3f}]   "
                   "# signal-free stretch for the noise (ppm)")
    out += [
        "",
        "[quantify]",
        'mode = "relative"               # "standard" (internal standard), "initial" (known c0), '
        '"relative", "none"',
        "# standard = \"signal_1\"         # mode \"standard\": the signal with concentration_mol_per_l",
        "# reactant = \"signal_1\"         # species for conversion and yield",
        "# product = \"signal_2\"",
    ]
    if solvent is not None:
        out += ["", f"# Probable solvent line, left out of the signals: {_describe(solvent)},",
                f"# window {solvent.window_ppm[0]:.3f} .. {solvent.window_ppm[1]:.3f} ppm."]
    if reference is not None:
        out += [f"# Reference line left out of the signals: {_describe(reference)}."]
    if not signals:
        out += ["", "# No line rose above the noise threshold: write [[signals]] tables by hand, e.g.",
                "# [[signals]]", '# name = "ester"', "# window_ppm = [4.0, 4.3]", "# nuclei = 2"]
    for window in signals:
        out += _signal_lines(window)
    return "\n".join(out) + "\n"


# ---------------------------------------------------------------- entry point
def draft_config(folder: str | Path, out: str | Path | None = None, *, force: bool = False,
                 snr_threshold: float = 8.0, coupling_hz: float = 8.0) -> Draft:
    """Read the first spectrum of ``folder`` and write a commented starter config.

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
    spectrum, files, skipped, from_fid = first_spectrum(folder)
    phase_note = None
    if not from_fid:
        spectrum, phase_note = _rephase_if_needed(spectrum)
    peaks, noise, threshold, windows = propose_windows(spectrum, snr_threshold=snr_threshold,
                                                       coupling_hz=coupling_hz)
    region = _noise_region(spectrum, windows)
    text = render_config(spectrum, windows, folder, region, out.parent, files, skipped, from_fid,
                         phase_note=phase_note)
    from kinetics.spectra.reader import atomic_write_text

    out.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_text(out, text, encoding="utf-8")
    return Draft(source=Path(spectrum.source_path or files[0]), config_path=out, spectrum=spectrum, noise_sigma=noise,
                 threshold=threshold, peaks=tuple(peaks), windows=tuple(windows), noise_region_ppm=region,
                 files=tuple(files), skipped=tuple(skipped), text=text)


__all__ = ["Peak", "ProposedWindow", "Draft", "SPECTRUM_SUFFIXES", "spectrum_files", "first_spectrum",
           "pick_peaks", "group_peaks", "propose_windows", "render_config", "draft_config"]
