"""Checks of a run config against the run's first (reference) spectrum, once per run.

Some config values only make sense against a spectrum: a window must lie on the axis, a
noise region must hold noise.  They are checked here, once, on the first spectrum after
processing (:class:`kinetics.run.state.SeriesMeasurer` calls :func:`check_first_spectrum`
before it measures that spectrum), so a config that does not fit the run's spectra ends
the run with one :class:`~kinetics.errors.ConfigError` naming the key, instead of
quarantining every file.  Batch and live runs share the measurer, so both get the checks.

Rules (each a :class:`Problem` naming the config key):

* every ``signals[i].window_ppm``, ``alignment.window_ppm`` and each
  ``integration.noise_region_ppm`` range lies inside the spectrum's ppm range;
* ``processing.reference``: the searched range ``ppm +- window_ppm`` lies inside the axis
  as it was before referencing, ``target_ppm`` inside the referenced axis (skipped when
  the reference belongs to another nucleus's scale: the pipeline does not reference then);
* a noise region holds at least :data:`MIN_NOISE_POINTS` points, overlaps no signal
  window, and shows no line: no point stands more than :data:`LINE_SIGMAS` noise standard
  deviations above the region's median, with the noise estimated on the rest of the
  spectrum by :func:`kinetics.spectra.peaks.difference_sigma` and the line found by
  :func:`kinetics.spectra.peaks.pick_peaks` (10 sigma: common practice for a line that
  can be quantified, well clear of the about 4.5 sigma a noise maximum reaches over
  10^4 points).

Pure functions: config record + processed spectrum -> problems.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kinetics.errors import ConfigError
from kinetics.spectra.peaks import detrend, difference_sigma, pick_peaks

__all__ = ["LINE_SIGMAS", "MIN_NOISE_POINTS", "Problem", "check_first_spectrum", "first_spectrum_problems"]

#: a line in a noise region stands this many noise standard deviations above its median
LINE_SIGMAS = 10.0
#: fewest points a noise region must hold (kinetics.signals.noise needs 16 per range)
MIN_NOISE_POINTS = 16


@dataclass(frozen=True)
class Problem:
    """One config value that does not fit the first spectrum: the key, what, what to do."""

    key: str
    problem: str
    hint: str

    def error(self, source=None) -> ConfigError:
        return ConfigError(self.key, self.problem, self.hint, source=source)


def _span(pair) -> tuple[float, float]:
    a, b = float(pair[0]), float(pair[1])
    return min(a, b), max(a, b)


def _fmt(pair) -> str:
    lo, hi = _span(pair)
    return f"{lo:g}..{hi:g} ppm"


def _outside(pair, axis: tuple[float, float]) -> bool:
    lo, hi = _span(pair)
    return lo < axis[0] or hi > axis[1]


def _axis_text(axis) -> str:
    return f"the first spectrum's axis {axis[0]:.3f}..{axis[1]:.3f} ppm"


def _noise_ranges(config) -> list[tuple[str, tuple[float, float]]]:
    """(key, range) of every configured noise region: ``[integration]``'s, then ``[processing]``'s."""
    out = []
    ranges = config.integration.noise_region_ppm
    if ranges:
        if np.ndim(ranges) == 1:
            out.append(("integration.noise_region_ppm", _span(ranges)))
        elif len(ranges) == 1:
            out.append(("integration.noise_region_ppm", _span(ranges[0])))
        else:
            out += [(f"integration.noise_region_ppm[{i}]", _span(r)) for i, r in enumerate(ranges)]
    processing = getattr(config.pipeline, "noise_region_ppm", None)
    if processing is not None:
        out.append(("processing.noise_region_ppm", _span(processing)))
    return out


def _reference_problems(config, spectrum, axis, reference_shift_ppm: float) -> list[Problem]:
    reference = getattr(config.pipeline, "reference", None)
    if not reference or reference.get("ppm") is None:
        return []
    nuclei = reference.get("nuclei")
    if nuclei:
        from kinetics.nuclei import known_nucleus

        try:
            nucleus = known_nucleus(spectrum.nucleus)
        except Exception:  # noqa: BLE001 - an unknown nucleus: the pipeline decides, not us
            nucleus = None
        if nucleus not in nuclei:
            return []  # not referenced on this spectrum (the pipeline notes it)
    out = []
    raw_axis = (axis[0] - reference_shift_ppm, axis[1] - reference_shift_ppm)
    ppm, window = float(reference["ppm"]), float(reference.get("window_ppm") or 0.0)
    searched = (ppm - window, ppm + window)
    if _outside(searched, raw_axis):
        out.append(Problem("processing.reference.ppm",
                           f"the reference peak is searched at {ppm:g} +- {window:g} ppm, outside "
                           f"{_axis_text(raw_axis)} (before referencing)",
                           "give the reference peak's shift on the spectrum's scale (TMS: 0 ppm), "
                           "or a smaller processing.reference.window_ppm"))
    target = reference.get("target_ppm")
    if target is not None and not raw_axis[0] <= float(target) <= raw_axis[1]:
        out.append(Problem("processing.reference.target_ppm",
                           f"{float(target):g} ppm lies outside {_axis_text(raw_axis)} (before referencing)",
                           "give the shift the reference peak should have on the spectrum's scale "
                           "(TMS: 0 ppm)"))
    return out


def _line_in(values: np.ndarray, inside: np.ndarray) -> tuple[float, int] | None:
    """(height in noise sigmas, index) of the tallest line inside the mask, or None."""
    rest = ~inside
    if rest.sum() < MIN_NOISE_POINTS or inside.sum() < 3 or not np.isfinite(values).all():
        return None
    try:
        sigma = difference_sigma(values, where=rest)
    except ValueError:
        return None
    if not sigma > 0:
        return None
    # a straight line removed first, as the noise estimate does (kinetics.signals.noise): a
    # baseline slope across the region is not a line
    region = detrend(values[inside], 1)
    level = float(np.median(region))
    peaks = pick_peaks(region, height=LINE_SIGMAS * sigma, prominence=LINE_SIGMAS * sigma / 2, level=level)
    if not len(peaks):
        return None
    tallest = int(peaks.tallest(1)[0])
    return float(peaks.height[tallest] / sigma), int(np.flatnonzero(inside)[peaks.index[tallest]])


def first_spectrum_problems(config, spectrum, reference_shift_ppm: float = 0.0) -> list[Problem]:
    """Every config value that does not fit the run's first processed spectrum.

    Parameters
    ----------
    config : RunConfig
    spectrum : Spectrum
        The first spectrum after processing (phased, baseline-corrected, referenced).
    reference_shift_ppm : float
        The shift referencing added to the axis (``Processed.reference_shift_ppm``).

    Returns
    -------
    list of Problem
        In config order; empty when everything fits.
    """
    ppm = np.asarray(spectrum.ppm, float)
    axis = (float(np.min(ppm)), float(np.max(ppm)))
    # a wrong reference moves the whole axis: named first, before the windows it pushes off
    out: list[Problem] = _reference_problems(config, spectrum, axis, reference_shift_ppm)
    for i, sig in enumerate(config.signals):
        if _outside(sig.window_ppm, axis):
            out.append(Problem(f"signals[{i}].window_ppm",
                               f"window {_fmt(sig.window_ppm)} of {sig.name!r} lies outside {_axis_text(axis)}",
                               "put the window on the spectrum's axis; 'kinetics inspect FILE' shows the "
                               "axis and its lines"))
    window = config.alignment.window_ppm
    if window is not None and _outside(window, axis):
        out.append(Problem("alignment.window_ppm", f"window {_fmt(window)} lies outside {_axis_text(axis)}",
                           "put the alignment window on a line of the spectrum's axis"))
    values = np.asarray(spectrum.real, float)
    for key, (lo, hi) in _noise_ranges(config):
        if _outside((lo, hi), axis):
            out.append(Problem(key, f"noise region {lo:g}..{hi:g} ppm lies outside {_axis_text(axis)}",
                               "choose a signal-free range on the spectrum's axis, or remove the key "
                               "to find the noise automatically"))
            continue
        inside = (ppm >= lo) & (ppm <= hi)
        if inside.sum() < MIN_NOISE_POINTS:
            out.append(Problem(key, f"noise region {lo:g}..{hi:g} ppm holds {int(inside.sum())} points of the "
                               f"first spectrum, fewer than {MIN_NOISE_POINTS}",
                               "widen the noise region, or remove the key to find the noise automatically"))
            continue
        over = [(j, sig) for j, sig in enumerate(config.signals)
                if _span(sig.window_ppm)[0] < hi and lo < _span(sig.window_ppm)[1]]
        if over:
            j, sig = over[0]
            out.append(Problem(key, f"noise region {lo:g}..{hi:g} ppm overlaps the window "
                               f"{_fmt(sig.window_ppm)} of signal {sig.name!r} (signals[{j}])",
                               "move the noise region to a signal-free part of the spectrum, or remove "
                               "the key to find the noise automatically"))
            continue
        line = _line_in(values, inside)
        if line is not None:
            sigmas, index = line
            out.append(Problem(key, f"noise region {lo:g}..{hi:g} ppm holds a line at {ppm[index]:.3f} ppm, "
                               f"{sigmas:.0f} times the noise of the rest of the first spectrum",
                               "move the noise region to a signal-free part of the spectrum or declare "
                               "that line as a signal; or remove the key to find the noise automatically"))
    return out


def check_first_spectrum(config, spectrum, reference_shift_ppm: float = 0.0, source=None) -> None:
    """Raise one :class:`ConfigError` for the first problem of :func:`first_spectrum_problems`.

    The message names the key and what to change; when there are more problems it says
    how many, so the user fixes them in one go after a second look.
    """
    problems = first_spectrum_problems(config, spectrum, reference_shift_ppm)
    if not problems:
        return
    first = problems[0]
    hint = first.hint
    if len(problems) > 1:
        others = ", ".join(dict.fromkeys(p.key for p in problems[1:]))
        hint = f"{hint}; also check {others}"
    source = source if source is not None else getattr(config, "path", None)
    raise ConfigError(first.key, first.problem, hint, source=source)
