"""A folder of spectra + a run config -> a tidy time-series table (one row per spectrum).

The measuring and tabulating functions of the run engine (:mod:`kinetics.run`, which
takes folders, keeps the ledger and the in-memory state):

* per file: ``reference, m = measure_first(path, config)`` for the run's first file (read
  once), then ``measure_file(path, config, reference)`` for each later one (a frozen
  :class:`FileMeasurement`, safe to store; its ``spectrum``, the processed aligned
  spectrum, is kept in memory only); the steps are public for records already read:
  :func:`process_record`, :func:`align`, :func:`measure_record`,
  :func:`reference_from_spectrum`, :func:`measure_spectrum`;
* per table: :func:`series_table` (``table_from_measurements``) whenever a table is
  wanted, warm-started from the previous table's global fits during a live run;
* :func:`run_series` is a whole batch run through the engine, kept in memory.

Per-spectrum findings (a signal at the edge of its window, a fit that failed or ended
at a limit) are flags on each :class:`SignalResult`, summarised once per run in the
table's warnings (:func:`spectrum_messages`: "signal X ... in 12 of 36 spectra (files):
what to do"), which the run's fit carries into its warnings.

Per file: read -> process (``[processing]``, the pipeline built once at config load) ->
align to the reference spectrum (``[alignment]``) -> noise estimate -> region integrals
with drift tracking; ``fit`` groups keep their window data (and are deconvolved per
spectrum only when ``integration.global_fit`` is off).  Across the series (in
:func:`table_from_measurements`): global deconvolution of the ``fit`` groups (shared
positions, widths and J, areas per spectrum), saturation correction, concentrations,
conversion, yield and the mass balance.

Table columns: ``index, file, sha256, time_s, time_source, acquired_mid_utc, duration_s,
alignment_shift_ppm, noise_sigma`` and per signal ``<name>_integral, <name>_sigma,
<name>_shift_ppm, <name>_concentration, <name>_concentration_sigma,
<name>_truncation_loss`` (NaN for fits) ``, <name>_flags``, per
species ``<species>_concentration, <species>_concentration_sigma``, then
``conversion(_sigma)``, ``yield(_sigma)``, ``mass_balance_deviation(_sigma)``,
``mass_balance_flag``.  Concentrations are mol/L (``df.attrs['concentration_unit']``;
fractions in mode 'relative').  Integrals are ppm x intensity.
"""

from __future__ import annotations

import logging
import os
import re
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from types import MappingProxyType
from typing import Mapping, Sequence

import numpy as np
import pandas as pd

from kinetics import lineshapes, quantify, signals as sg
from kinetics.config import IntegrationConfig, RunConfig
from kinetics.errors import ConfigError, FitError, InputFileError
from kinetics.spectra.spectrum import Spectrum, sha256_of_file

log = logging.getLogger(__name__)

WEAK_SNR = 5.0  # below this integral/sigma a window is not re-centred (nothing to follow)
REFERENCE_SNR = 20.0  # a reference centroid needs this integral/sigma, else the window centre is used
CENTROID_SIGMAS = 3.0  # only intensity above this many noise sigmas counts in a centroid


# ---------------------------------------------------------------- records
@dataclass(frozen=True)
class SignalResult:
    """One signal measured in one spectrum.

    Attributes
    ----------
    name, species, method : str
    integral, sigma : float
        ppm x intensity (area of the multiplet for 'fit').
    shift_ppm : float
        Window displacement (tracking) or fitted centre minus window centre (fit).
    window_ppm : (low, high) used
    truncation_loss : float
        Share of the area outside the window ('integral' only; NaN for fits).
    flags : tuple of str
        'left_window', 'weak', 'fit_failed', 'global_fit', ...
    """

    name: str
    species: str
    method: str
    integral: float
    sigma: float
    shift_ppm: float
    window_ppm: tuple[float, float]
    truncation_loss: float = float("nan")
    flags: tuple[str, ...] = ()


@dataclass(frozen=True)
class FitWindow:
    """The data of one fit group in one spectrum, kept for the series-wide fit.

    Attributes
    ----------
    group : str
    ppm, values : ndarray, shape (n,)
    """

    group: str
    ppm: np.ndarray
    values: np.ndarray


@dataclass(frozen=True)
class FileMeasurement:
    """Everything measured in one file (what a ledger row stores).

    Attributes
    ----------
    path, file, sha256 : str
    start_utc, mid_utc : datetime or None
        Acquisition start and midpoint (absolute time sources).
    elapsed_mid_s : float or None
        Midpoint relative to the reaction start (``elapsed_*`` file-name groups).
    duration_s : float or None
    time_source : str
    alignment_shift_ppm : float
    noise_sigma : float
    observe_mhz : float
    signals : tuple of SignalResult
    fit_windows : tuple of FitWindow
    notes : tuple of str
    spectrum : Spectrum or None
        The processed, aligned spectrum the signals were measured in, while the run
        keeps it in memory (re-measuring under other processing choices,
        :mod:`kinetics.sensitivity`); never stored in the ledger.
    """

    path: str
    file: str
    sha256: str
    start_utc: datetime | None
    mid_utc: datetime | None
    elapsed_mid_s: float | None
    duration_s: float | None
    time_source: str
    alignment_shift_ppm: float
    noise_sigma: float
    observe_mhz: float
    signals: tuple[SignalResult, ...]
    fit_windows: tuple[FitWindow, ...] = ()
    notes: tuple[str, ...] = ()
    spectrum: Spectrum | None = field(default=None, repr=False, compare=False)

    def signal(self, name: str) -> SignalResult:
        for item in self.signals:
            if item.name == name:
                return item
        raise KeyError(name)


@dataclass(frozen=True)
class Reference:
    """What every later file is compared with: the first spectrum of the run.

    Attributes
    ----------
    spectrum : Spectrum
        The processed first spectrum (alignment target).
    centroids_ppm : mapping signal name -> float
        Where each tracked signal sits in it (window centre when too weak to tell).
    fit_points : mapping group -> int
        Points of each fit window (the same count is cut from every spectrum).
    path : str
    """

    spectrum: Spectrum
    centroids_ppm: Mapping[str, float]
    fit_points: Mapping[str, int]
    path: str


# ---------------------------------------------------------------- files and time
def list_files(config: RunConfig) -> list[Path]:
    """Spectrum files of the run folder matching ``run.pattern``, sorted by name."""
    if not config.folder.is_dir():
        raise ConfigError("run.folder", f"folder {config.folder} does not exist")
    files = sorted(p for p in config.folder.glob(config.pattern) if p.is_file())
    if not files:
        raise ConfigError("run.pattern", f"no file in {config.folder} matches {config.pattern!r}")
    return files


def _filename_time(name: str, pattern: str, path: str):
    match = re.search(pattern, name)
    if match is None:
        raise InputFileError(path, f"file name does not match time.filename_pattern {pattern!r}",
                             hint="fix the pattern or rename the file")
    groups = {k: v for k, v in match.groupdict().items() if v is not None}
    try:
        for unit, factor in (("elapsed_s", 1.0), ("elapsed_min", 60.0), ("elapsed_h", 3600.0)):
            if unit in groups:
                return None, float(groups[unit]) * factor
        if "timestamp" in groups:
            stamp = datetime.fromisoformat(groups["timestamp"].replace("Z", "+00:00"))
        else:
            stamp = datetime(int(groups["year"]), int(groups["month"]), int(groups["day"]),
                             int(groups["hour"]), int(groups["minute"]), int(float(groups.get("second", 0))))
    except (ValueError, KeyError) as error:
        raise InputFileError(path, f"time in the file name cannot be read: {error}") from error
    if stamp.tzinfo is None:
        stamp = stamp.replace(tzinfo=timezone.utc)
    return stamp.astimezone(timezone.utc), None


def acquisition_time(path: str | Path, record, config: RunConfig):
    """(start_utc, mid_utc, elapsed_mid_s, duration_s) of one file per ``[time]``.

    'header' and 'filename' give the acquisition start; 'mtime' is the moment the file
    was last written, taken as the end of acquisition.  The midpoint adds half the
    duration (header ``duration_s``, else ``time.duration_s``, else 0).
    """
    tc = config.time
    duration = record.duration_s if record.duration_s is not None else tc.duration_s
    half = 0.5 * (duration or 0.0)
    path = str(path)
    if tc.source == "header":
        if record.acquired_utc is None:
            raise InputFileError(path, "the header gives no acquisition time",
                                 hint="set time.source = 'filename' or 'mtime' in the config")
        start = record.acquired_utc
    elif tc.source == "filename":
        start, elapsed = _filename_time(Path(path).name, tc.filename_pattern, path)
        if elapsed is not None:
            return None, None, elapsed + half, duration
    else:
        end = datetime.fromtimestamp(os.stat(path).st_mtime, tz=timezone.utc)
        start = end - _seconds(duration or 0.0)
    return start, start + _seconds(half), None, duration


def _seconds(value: float):
    from datetime import timedelta

    return timedelta(seconds=float(value))


# ---------------------------------------------------------------- one file
def _pipeline(config: RunConfig):
    """The run's processing pipeline, built once when the config was loaded."""
    if config.pipeline is not None:
        return config.pipeline
    from kinetics.processing import Pipeline

    return Pipeline.from_config(dict(config.processing))


def process_record(record, config: RunConfig, phase_hint=None):
    """One read record (Fid or Spectrum) through the run's ``[processing]`` pipeline.

    ``phase_hint`` (a :class:`kinetics.processing.PhaseHint`) starts the automatic phase
    search there (:func:`kinetics.processing.process`).
    """
    return _pipeline(config)(record, phase_hint)


def _read_processed(path, config: RunConfig, phase_hint=None):
    from kinetics.spectra.reader import read

    record = read(path)
    processed = process_record(record, config, phase_hint)
    return record, processed


def _noise(spectrum: Spectrum, config: RunConfig) -> sg.NoiseEstimate:
    integ, signals = config.integration, config.signals
    order = 1 if integ.baseline == "edges" else 0
    region = None if integ.noise_region_ppm is None else list(integ.noise_region_ppm)
    return sg.estimate_noise(spectrum, region, exclude_ppm=[s.window_ppm for s in signals],
                             detrend_order=order)


def _fit_groups(config: RunConfig) -> dict[str, tuple[sg.SignalDefinition, ...]]:
    return config.fit_groups


def make_reference(path: str | Path, config: RunConfig) -> Reference:
    """Process the first file of a run and record what later files are compared with."""
    _, processed = _read_processed(path, config)
    return reference_from_spectrum(processed.spectrum, path, config)


def reference_from_spectrum(spectrum: Spectrum, path: str | Path, config: RunConfig) -> Reference:
    """The :class:`Reference` of a run from its first processed spectrum.

    The signal windows are checked against the spectrum's range here, once per run (every
    later spectrum of the run covers the same range after alignment).
    """
    sg.validate_signals(config.signals, spectrum.ppm_range)
    noise = _noise(spectrum, config)
    centroids = {}
    for sig in config.signals:
        if sig.method != "integral":
            continue
        region = sg.integrate_region(spectrum, sig.window_ppm, noise, baseline=config.integration.baseline,
                                     edge_fraction=config.integration.edge_fraction)
        strong = region.sigma > 0 and region.integral / region.sigma >= REFERENCE_SNR
        centroids[sig.name] = (sg.centroid_ppm(spectrum, sig.window_ppm, CENTROID_SIGMAS * noise.sigma)
                               if strong else sig.center_ppm)
    points = {group: int(sg.window_data(spectrum, sg.fit_window(members))[0].size)
              for group, members in _fit_groups(config).items()}
    return Reference(spectrum=spectrum, centroids_ppm=MappingProxyType(centroids),
                     fit_points=MappingProxyType(points), path=str(path))


def align(spectrum: Spectrum, reference: Reference, config: RunConfig) -> tuple[Spectrum, float]:
    """A processed spectrum aligned on the reference per ``[alignment]``: (spectrum, shift in ppm)."""
    alignment = config.alignment
    window = alignment.window_ppm
    if window is None:
        return spectrum, 0.0
    from kinetics.processing import align_series

    try:
        result = align_series([reference.spectrum, spectrum], window, 0, alignment.max_shift_ppm)
    except ValueError as error:
        raise ConfigError("alignment.window_ppm", str(error)) from error
    return result.spectra[1], float(result.shifts_ppm[1])


_align = align  # the former private name


def _measure_integral(spectrum, sig, noise, reference: Reference, integ: IntegrationConfig) -> SignalResult:
    kwargs = dict(name=sig.name, nuclei=sig.nuclei, baseline=integ.baseline, edge_fraction=integ.edge_fraction,
                  lineshape=sig.lineshape, correct_truncation=sig.correct_truncation)
    flags = []
    window, shift = sig.window_ppm, 0.0
    first = sg.integrate_region(spectrum, window, noise, **kwargs)
    weak = not (first.sigma > 0 and abs(first.integral) / first.sigma >= WEAK_SNR)
    if weak:
        flags.append("weak")
    if sig.tolerance_ppm > 0 and not weak:
        tracked = sg.track(spectrum, window, reference.centroids_ppm.get(sig.name, sig.center_ppm),
                           sig.tolerance_ppm, threshold=CENTROID_SIGMAS * noise.sigma)
        window, shift = tracked.window_ppm, tracked.shift_ppm
        if tracked.left_window:
            flags.append("left_window")
        region = sg.integrate_region(spectrum, window, noise, **kwargs) if shift else first
    else:
        region = first
        if not weak and sg._max_on_edge(spectrum, window):
            flags.append("left_window")
    if "left_window" in flags:  # summarised once per run (spectrum_messages)
        log.debug("%s: signal %s is leaving its window (shift %.4f ppm)", spectrum.source_path, sig.name, shift)
    return SignalResult(sig.name, sig.species, "integral", region.integral, region.sigma, shift,
                        tuple(window), region.truncation_loss, tuple(flags))


def solvent_lines_ppm(config: RunConfig) -> tuple[float, ...]:
    """Centres of the declared solvent lines (``[processing] phase_exclude_ppm`` ranges).

    Their far tails are modelled in every fit window they reach
    (:func:`kinetics.signals.deconvolution.solvent_tails`), not left to the local baseline.
    """
    ranges = config.processing.get("phase_exclude_ppm") or ()
    return tuple(0.5 * (float(a) + float(b)) for a, b in ranges)


def _measure_group(spectrum, members, reference: Reference, integ: IntegrationConfig, solvent_ppm=()):
    window = sg.fit_window(members)
    ppm, values = sg.window_data(spectrum, window, reference.fit_points.get(members[0].fit_group))
    comps = sg.components_for(members)
    results = []
    try:
        fit = sg.deconvolve(ppm, values, comps, spectrum.observe_mhz, integ.fit_baseline_order,
                            solvent_ppm=solvent_ppm)
        for k, sig in enumerate(members):
            flags = () if fit.success else (
                ("fit_at_limit",) if "limits" in str(fit.message) else ("fit_failed",))
            results.append(SignalResult(sig.name, sig.species, "fit", float(fit.areas[0, k]),
                                        float(fit.area_stderr[0, k]), fit.center_ppm[sig.name][0] - sig.center_ppm,
                                        sig.window_ppm, float("nan"), flags))
    except FitError as error:
        log.debug("%s: deconvolution of %s failed: %s", spectrum.source_path, members[0].fit_group, error)
        results = [SignalResult(s.name, s.species, "fit", float("nan"), float("nan"), 0.0, s.window_ppm,
                                float("nan"), ("fit_failed",)) for s in members]
    return results, FitWindow(members[0].fit_group, ppm.copy(), values.copy())


def _pending_group(spectrum, members, reference: Reference):
    """A fit group's window data only: the series-wide fit gives the areas (NaN until then)."""
    window = sg.fit_window(members)
    ppm, values = sg.window_data(spectrum, window, reference.fit_points.get(members[0].fit_group))
    results = [SignalResult(s.name, s.species, "fit", float("nan"), float("nan"), 0.0, s.window_ppm,
                            float("nan"), ("global_fit_pending",)) for s in members]
    return results, FitWindow(members[0].fit_group, ppm.copy(), values.copy())


def measure_spectrum(spectrum: Spectrum, config: RunConfig, reference: Reference) -> tuple:
    """Signals of one processed, aligned spectrum: (noise, signal results, fit windows).

    With ``integration.global_fit`` the fit groups are not deconvolved here: the
    series-wide fit (:func:`table_from_measurements`) gives every spectrum's areas, so a
    per-spectrum fit would be overwritten; only the window data are kept.
    """
    noise = _noise(spectrum, config)
    results = {}
    for sig in config.signals:
        if sig.method == "integral":
            results[sig.name] = _measure_integral(spectrum, sig, noise, reference, config.integration)
    windows = []
    measure_group = _pending_group if config.integration.global_fit else (
        lambda spectrum, members, reference: _measure_group(spectrum, members, reference, config.integration,
                                                            solvent_lines_ppm(config)))
    for members in _fit_groups(config).values():
        group_results, data = measure_group(spectrum, members, reference)
        windows.append(data)
        results.update({r.name: r for r in group_results})
    ordered = tuple(results[s.name] for s in config.signals)
    return noise, ordered, tuple(windows)


def measure_file(path: str | Path, config: RunConfig, reference: Reference | None = None,
                 phase_hint=None) -> FileMeasurement:
    """Read, process, align and measure one file (the live watcher's unit of work).

    Parameters
    ----------
    path : path of the spectrum/FID file
    config : RunConfig
    reference : Reference, optional
        From :func:`make_reference` on the run's first file; when None this file is
        its own reference (it is the first file).
    phase_hint : PhaseHint, optional
        Where the automatic phase search starts (:func:`process_record`).
    """
    if reference is None:
        return measure_first(path, config, phase_hint)[1]
    return _measure(path, config, reference, phase_hint=phase_hint)


def measure_first(path: str | Path, config: RunConfig, phase_hint=None) -> tuple[Reference, FileMeasurement]:
    """The run's first file: its :class:`Reference` and its measurement, reading it once."""
    record, processed = _read_processed(path, config, phase_hint)
    reference = reference_from_spectrum(processed.spectrum, path, config)
    return reference, measure_record(path, record, processed, config, reference)


def _measure(path, config: RunConfig, reference: Reference, read=None, phase_hint=None) -> FileMeasurement:
    record, processed = read if read is not None else _read_processed(path, config, phase_hint)
    return measure_record(path, record, processed, config, reference)


def measure_record(path: str | Path | None, record, processed, config: RunConfig,
                   reference: Reference) -> FileMeasurement:
    """A read record and its processed spectrum -> the file's measurement.

    Aligns on the reference (:func:`align`) and measures the signals
    (:func:`measure_spectrum`); the aligned spectrum rides along in
    ``FileMeasurement.spectrum`` (kept in memory only).  ``path`` None names the file by
    the record's ``source_path`` (in-memory records).
    """
    spectrum, shift = align(processed.spectrum, reference, config)
    noise, results, windows = measure_spectrum(spectrum, config, reference)
    path = path if path is not None else (record.source_path or "spectrum")
    start, mid, elapsed, duration = acquisition_time(path, record, config)
    sha = record.sha256 or (sha256_of_file(path) if Path(path).is_file() else "")
    return FileMeasurement(
        path=str(path), file=Path(path).name, sha256=sha, start_utc=start, mid_utc=mid,
        elapsed_mid_s=elapsed, duration_s=duration, time_source=config.time.source,
        alignment_shift_ppm=shift, noise_sigma=noise.sigma, observe_mhz=spectrum.observe_mhz,
        signals=results, fit_windows=windows, notes=tuple(processed.notes), spectrum=spectrum)


# ---------------------------------------------------------------- the series
def time_axis(measurements: Sequence[FileMeasurement], config: RunConfig) -> np.ndarray:
    """Mid-acquisition times in s from the reaction start, shape (m,), in the given order.

    With ``time.reaction_start`` t = mid - start; otherwise the earliest midpoint is
    ``time.first_spectrum_offset_s``.  ``elapsed_*`` file-name times are already relative.
    """
    tc = config.time
    if all(m.elapsed_mid_s is not None for m in measurements):
        return np.array([m.elapsed_mid_s for m in measurements], float)
    if any(m.mid_utc is None for m in measurements):
        raise ConfigError("time.source", "some files give relative and others absolute times")
    if tc.reaction_start_utc is not None:
        origin, offset = tc.reaction_start_utc, 0.0
    else:
        origin, offset = min(m.mid_utc for m in measurements), tc.first_spectrum_offset_s
    return np.array([(m.mid_utc - origin).total_seconds() + offset for m in measurements])


def _warm_components(members, previous) -> list:
    """Components started at a previous global fit's centres, widths and J (live turns).

    Each centre keeps inside the limits of a fit from scratch (its window centre plus or
    minus the tolerance), so a warm start only moves the start, never widens the search.
    """
    components = []
    for comp in sg.components_for(members):
        if previous is None or comp.name not in previous.center_ppm:
            components.append(comp)
            continue
        centre = float(previous.center_ppm[comp.name][0])
        room = comp.tolerance_ppm - abs(centre - comp.center_ppm)
        if not (np.isfinite(centre) and room > 0):
            components.append(comp)
            continue
        shape = comp.lineshape
        width = float(previous.width_hz.get(comp.name, (shape.width_hz,))[0])
        coupling = float(previous.coupling_hz.get(comp.name, (shape.coupling_hz,))[0])
        gauss = float(previous.gauss_width_hz.get(comp.name, (shape.gauss_width_hz,))[0])
        shape = sg.LineShape(shape.n_lines, coupling if shape.n_lines > 1 else shape.coupling_hz,
                             shape.profile, width, gauss if shape.profile == "voigt" else shape.gauss_width_hz)
        components.append(sg.Component(comp.name, centre, shape, room))
    return components


def _held_design(ppm: np.ndarray, fit, members, observe_mhz: float, baseline_order: int) -> np.ndarray:
    """Design matrix (..., n, k + order + 1) of a fit group at a global fit's line shapes:
    unit-area multiplets at the fitted centres, widths and J, then the polynomial baseline
    (the same columns as the series-wide fit's linear step)."""
    columns = []
    for sig in members:
        shape = sig.lineshape
        coupling = fit.coupling_hz.get(sig.name, (0.0,))[0] if shape.n_lines > 1 else 0.0
        gauss = fit.gauss_width_hz.get(sig.name, (0.0,))[0] if shape.profile == "voigt" else 0.0
        columns.append(lineshapes.multiplet(
            ppm, 1.0, fit.center_ppm[sig.name][0], shape.n_lines, coupling / observe_mhz, shape.profile,
            fit.width_hz[sig.name][0] / observe_mhz, gauss / observe_mhz))
    x = (ppm - ppm.mean(axis=-1, keepdims=True)) / max(np.ptp(ppm) / 2.0, 1e-12)
    columns += [x ** order for order in range(baseline_order + 1)]
    return np.stack(columns, axis=-1)


def _apply_held_shapes(measurements, config: RunConfig, integral, sigma, shift, flags, notes, fits) -> None:
    """Areas of every fit group at the line shapes of a previous global fit (in place).

    A live turn between two refreshes: the shared centres, widths and J stay where the
    last series-wide fit put them and only the linear part (areas and baselines) is
    solved, for all spectra at once, so a turn costs about the same however long the run.
    The area uncertainty is sigma^2 (A^T A)^-1 with the pooled residual variance; it leaves
    out the line-shape uncertainty, which the next full fit (and the final one) includes.
    Flag ``shapes_held``.
    """
    names = [s.name for s in config.signals]
    order = config.integration.fit_baseline_order
    for group, members in _fit_groups(config).items():
        fit = fits[group]
        data = [next(w for w in m.fit_windows if w.group == group) for m in measurements]
        n = min(w.values.size for w in data)
        ppm = np.array([w.ppm[:n] for w in data])
        values = np.array([w.values[:n] for w in data])
        mhz = measurements[0].observe_mhz
        if np.allclose(ppm, ppm[0], rtol=0, atol=1e-12):
            design = _held_design(ppm[0], fit, members, mhz, order)
            normal = design.T @ design
            coef = np.linalg.solve(normal, design.T @ values.T).T
            residual = values - coef @ design.T
            inverse = np.broadcast_to(np.linalg.inv(normal), (len(values),) + normal.shape)
        else:
            design = _held_design(ppm, fit, members, mhz, order)
            normal = np.einsum("sni,snj->sij", design, design)
            coef = np.linalg.solve(normal, np.einsum("sni,sn->si", design, values)[..., None])[..., 0]
            residual = values - np.einsum("snm,sm->sn", design, coef)
            inverse = np.linalg.inv(normal)
        dof = max(values.size - coef.size, 1)
        variance = float(np.sum(residual ** 2) / dof)
        stderr = np.sqrt(np.clip(variance * np.diagonal(inverse, axis1=1, axis2=2), 0, None))
        for k, sig in enumerate(members):
            col = names.index(sig.name)
            integral[col] = coef[:, k]
            sigma[col] = stderr[:, k]
            shift[col] = fit.center_ppm[sig.name][0] - sig.center_ppm
            for row in range(len(measurements)):
                flags[col][row] = [f for f in flags[col][row] if f not in ("fit_failed", "global_fit_pending")]
                flags[col][row].append("shapes_held")
        notes.append(f"{group}: areas at the line shapes of the last series-wide fit (live turn)")


def global_fit_key(members, config: RunConfig) -> tuple:
    """What a fit group's series-wide fit from scratch depends on besides the spectra: its
    members' definitions (windows, line shapes), the fit baseline order, the solvent lines."""
    return (tuple(members), config.integration.fit_baseline_order, solvent_lines_ppm(config))


def _apply_global_fits(measurements, config: RunConfig, integral, sigma, shift, flags, notes,
                       start: Mapping | None = None, warnings: list | None = None,
                       cache: dict | None = None) -> dict:
    """Series-wide deconvolution of every fit group (in place); returns group -> result.

    ``start`` (group -> a previous turn's DeconvolutionResult) warm-starts a live turn;
    without it every group is fitted from scratch, as a batch run and a live run's final
    pass do.
    """
    names = [s.name for s in config.signals]
    fits = {}
    for group, members in _fit_groups(config).items():
        data = [next(w for w in m.fit_windows if w.group == group) for m in measurements]
        n = min(w.values.size for w in data)
        ppm = np.array([w.ppm[:n] for w in data])
        values = np.array([w.values[:n] for w in data])
        shared_axis = np.allclose(ppm, ppm[0], rtol=0, atol=1e-12)
        previous = None if start is None else start.get(group)
        components = _warm_components(members, previous) if previous is not None else sg.components_for(members)
        key = global_fit_key(members, config) if cache is not None and previous is None else None
        try:
            fit = cache.get(key) if key is not None else None
            if fit is None:
                fit = sg.deconvolve(ppm[0] if shared_axis else ppm, values, components,
                                    measurements[0].observe_mhz, config.integration.fit_baseline_order,
                                    solvent_ppm=solvent_lines_ppm(config))
                if key is not None:
                    cache[key] = fit
        except FitError as error:
            notes.append(f"global fit of {group} failed: {error}")
            (notes if warnings is None else warnings).append(
                f"the series-wide fit of {', '.join(sig.name for sig in members)} failed "
                f"({fit_message_in_words(str(error), members)}): those signals have no values in this run; "
                "check their window_ppm and lineshape against a spectrum")
            for sig in members:
                for row in range(len(measurements)):
                    flags[names.index(sig.name)][row] = [
                        f for f in flags[names.index(sig.name)][row] if f != "global_fit_pending"]
                    flags[names.index(sig.name)][row].append("global_fit_failed")
            continue
        fits[group] = fit
        notes.append(fit.report())
        if not fit.success:
            names_ = ", ".join(sig.name for sig in members)
            warnings_out = notes if warnings is None else warnings
            warnings_out.append(
                f"the series-wide fit of {names_} did not end cleanly: {fit_message_in_words(fit.message, members)}. "
                "Check those signals' window_ppm, lineshape (width_hz, j_hz) and tolerance_ppm against a spectrum; "
                "their areas may be biased")
        for k, sig in enumerate(members):
            col = names.index(sig.name)
            integral[col] = fit.areas[:, k]
            sigma[col] = fit.area_stderr[:, k]
            shift[col] = fit.center_ppm[sig.name][0] - sig.center_ppm
            for row in range(len(measurements)):
                flags[col][row] = [f for f in flags[col][row] if f not in ("fit_failed", "global_fit_pending")]
                flags[col][row].append("global_fit" if fit.success else "global_fit_failed")
    return fits


_PARAMETER_WORDS = {"offset_hz": "position", "width_hz": "line width", "j_hz": "coupling J",
                    "gauss_hz": "Gaussian width"}


def fit_message_in_words(message: str, members) -> str:
    """A deconvolution message with its internal parameter names (``c0_width_hz``) as words
    naming the signal ("the line width of ester_OCH2")."""

    def word(match):
        index, kind = int(match.group(1)), match.group(2)
        name = members[index].name if index < len(members) else f"component {index + 1}"
        return f"the {_PARAMETER_WORDS.get(kind, kind)} of {name}"

    text = re.sub(r"\bc(\d+)_(offset_hz|width_hz|j_hz|gauss_hz)\b", word, str(message))
    return text.replace("parameters at their limits", "at the limit of its allowed range")


def _files_named(files: Sequence[str], rows: Sequence[int], shown: int = 3) -> str:
    named = [files[i] for i in rows[:shown]]
    more = f" and {len(rows) - shown} more" if len(rows) > shown else ""
    return ", ".join(named) + more


#: per-spectrum flags summarised once per run: flag -> (what happened, what to do)
SPECTRUM_FLAG_MESSAGES = {
    "left_window": ("reaches the edge of its window",
                    "it drifts or is wider than the window: widen its window_ppm or raise its tolerance_ppm"),
    "fit_failed": ("could not be fitted",
                   "those spectra are left out of its series; check its window_ppm and lineshape against one of them"),
    "fit_at_limit": ("was fitted with a line shape at the limit of its allowed range",
                     "check its lineshape width_hz / j_hz and window_ppm against one of those spectra"),
    "weak": ("is weaker than 5 times its uncertainty",
             "its points carry large uncertainties; check that the window holds the signal"),
}


def spectrum_messages(config: RunConfig, flags, files: Sequence[str]) -> list[str]:
    """Per-spectrum findings summarised once per run, naming the signal, the files and what to do.

    ``flags[signal index][row]`` are the signals' flags (``SignalResult.flags``);
    ``files`` the rows' file names.  One message per signal and finding, e.g. "signal
    ester_OCH2 reaches the edge of its window in 12 of 36 spectra (a.jdx, b.jdx, c.jdx and
    9 more): ...".  A signal weak in fewer than half the spectra (a product at the
    start) is not reported.
    """
    out = []
    m = len(files)
    for col, sig in enumerate(config.signals):
        for flag, (what, todo) in SPECTRUM_FLAG_MESSAGES.items():
            rows = [row for row in range(m) if flag in flags[col][row]]
            if not rows or (flag == "weak" and 2 * len(rows) < m):
                continue
            out.append(f"signal {sig.name} {what} in {len(rows)} of {m} spectra ({_files_named(files, rows)}): "
                       f"{todo}")
    return out


def _saturation(config: RunConfig, integral, sigma, warnings: list[str]) -> None:
    q = config.quantify
    if q.repetition_time_s is None:
        return
    for col, sig in enumerate(config.signals):
        t1 = q.t1_s.get(sig.name)
        if t1 is None:
            continue
        factor = quantify.saturation_factor(t1, q.repetition_time_s, q.flip_angle_deg)
        integral[col], sigma[col] = quantify.correct_saturation(integral[col], sigma[col], factor)
        text = quantify.saturation_warning(sig.name, t1, q.repetition_time_s)
        if text:
            log.warning(text)
            warnings.append(text)


def _concentrations(config: RunConfig, integral, sigma):
    """Per-signal concentrations (k, m) and unit, by ``quantify.mode``."""
    q = config.quantify
    nuclei = np.array([s.nuclei for s in config.signals], float)
    names = [s.name for s in config.signals]
    if q.mode == "standard":
        i = names.index(q.standard)
        std = config.signals[i]
        conc, csig = quantify.from_standard(integral, sigma, nuclei[:, None], integral[i], sigma[i], std.nuclei,
                                            std.concentration_mol_per_l, std.concentration_sigma_mol_per_l)
        return conc, csig, "mol/L"
    if q.mode == "initial":
        i = next(k for k, s in enumerate(config.signals) if s.species == q.initial_species)
        conc, csig = quantify.from_initial(integral, sigma, nuclei[:, None], integral[i, 0], sigma[i, 0],
                                           config.signals[i].nuclei, q.initial_concentration_mol_per_l,
                                           q.initial_sigma_mol_per_l)
        return conc, csig, "mol/L"
    if q.mode == "relative":
        tracked = [k for k, s in enumerate(config.signals) if not s.is_standard]
        per, per_sigma = integral / nuclei[:, None], sigma / nuclei[:, None]
        species = config_species(config, tracked)
        # one estimate per species (mean of its signals), then fractions of the total
        rows, sigs = [], []
        for sp, cols in species.items():
            mean, s = quantify.combine(per[cols], per_sigma[cols])
            rows.append(mean)
            sigs.append(s)
        frac, fsig = quantify.relative(np.array(rows), np.array(sigs))
        conc = np.full_like(integral, np.nan)
        csig = np.full_like(integral, np.nan)
        for (sp, cols), f, fs in zip(species.items(), frac, fsig):
            for c in cols:
                conc[c], csig[c] = f, fs
        return conc, csig, "fraction"
    nan = np.full_like(integral, np.nan)
    return nan, nan.copy(), ""


def config_species(config: RunConfig, columns=None) -> dict[str, list[int]]:
    """Species -> signal indices (standards excluded unless listed in ``columns``)."""
    out: dict[str, list[int]] = {}
    for k, sig in enumerate(config.signals):
        if columns is None and sig.is_standard:
            continue
        if columns is not None and k not in columns:
            continue
        out.setdefault(sig.species, []).append(k)
    return out


def table_from_measurements(measurements: Sequence[FileMeasurement], config: RunConfig) -> pd.DataFrame:
    """The tidy table of a run from per-file measurements (batch and live alike).

    Rows are ordered by ``run.order`` (file name or time) and indexed 0..m-1.
    ``df.attrs`` holds 'warnings', 'notes' (global-fit reports) and 'concentration_unit'.
    Fit groups are deconvolved across the series from scratch (see :func:`series_table`).
    """
    return series_table(measurements, config)[0]


def series_table(measurements: Sequence[FileMeasurement], config: RunConfig,
                 start: Mapping | None = None, hold: bool = False,
                 cache: dict | None = None) -> tuple[pd.DataFrame, dict]:
    """:func:`table_from_measurements` plus the global fits (group -> DeconvolutionResult).

    ``start`` warm-starts the global deconvolution from a previous table's fits (a live
    turn); None fits from scratch (a batch run, a live run's final pass).  ``hold`` (with
    a ``start`` covering every group) keeps the line shapes of ``start`` and solves only
    the areas (:func:`_apply_held_shapes`; a live turn between two refreshes).  With
    ``integration.global_fit`` off, the per-spectrum deconvolutions stand.
    ``cache`` (:func:`global_fit_key` -> fit; for tables of the *same* spectra measured
    under different signal definitions, :mod:`kinetics.sensitivity`) reuses a group's fit
    from scratch whose definitions did not change, and keeps the new ones.
    """
    if not measurements:
        raise FitError("no measurements to tabulate")
    times = time_axis(measurements, config)
    order = np.argsort(times, kind="stable") if config.order == "time" else np.argsort(
        [m.file for m in measurements], kind="stable")
    ms = [measurements[i] for i in order]
    times = times[order]
    k, m = len(config.signals), len(ms)
    names = tuple(s.name for s in config.signals)
    # measure_spectrum keeps the config's signal order: look a signal up only when not
    rows = [x.signals if tuple(r.name for r in x.signals) == names else tuple(x.signal(n) for n in names)
            for x in ms]
    integral = np.array([[r.integral for r in row] for row in rows], float).reshape(m, k).T.copy()
    sigma = np.array([[r.sigma for r in row] for row in rows], float).reshape(m, k).T.copy()
    shift = np.array([[r.shift_ppm for r in row] for row in rows], float).reshape(m, k).T.copy()
    flags = [[list(row[col].flags) for row in rows] for col in range(k)]
    loss = np.array([[r.truncation_loss for r in row] for row in rows], float).reshape(m, k).T.copy()
    notes: list[str] = []
    warnings: list[str] = []
    fits: dict = {}
    groups = _fit_groups(config)
    if config.integration.global_fit and groups:
        if hold and start is not None and all(group in start for group in groups):
            fits = dict(start)
            _apply_held_shapes(ms, config, integral, sigma, shift, flags, notes, fits)
        else:
            fits = _apply_global_fits(ms, config, integral, sigma, shift, flags, notes, start, warnings, cache)
    _saturation(config, integral, sigma, warnings)
    messages = spectrum_messages(config, flags, [x.file for x in ms])
    warnings.extend(messages)
    conc, csig, unit = _concentrations(config, integral, sigma)

    table = {
        "index": np.arange(m), "file": [x.file for x in ms], "sha256": [x.sha256 for x in ms],
        "time_s": times, "time_source": [x.time_source for x in ms],
        "acquired_mid_utc": [x.mid_utc.isoformat().replace("+00:00", "Z") if x.mid_utc else "" for x in ms],
        "duration_s": [np.nan if x.duration_s is None else x.duration_s for x in ms],
        "alignment_shift_ppm": [x.alignment_shift_ppm for x in ms],
        "noise_sigma": [x.noise_sigma for x in ms],
    }
    for col, sig in enumerate(config.signals):
        table[f"{sig.name}_integral"] = integral[col]
        table[f"{sig.name}_sigma"] = sigma[col]
        table[f"{sig.name}_shift_ppm"] = shift[col]
        table[f"{sig.name}_concentration"] = conc[col]
        table[f"{sig.name}_concentration_sigma"] = csig[col]
        table[f"{sig.name}_truncation_loss"] = loss[col]
        table[f"{sig.name}_flags"] = [";".join(f) for f in flags[col]]
    species_c, species_s, species_names = _species_table(config, conc, csig, unit, table)
    _derived(config, species_c, species_s, species_names, table, warnings)
    df = pd.DataFrame(table)
    df.attrs["warnings"] = warnings
    df.attrs["notes"] = notes
    df.attrs["concentration_unit"] = unit
    df.attrs["mass_balance_sigmas"] = float(config.quantify.mass_balance_sigmas)
    return df, fits


def _species_table(config, conc, csig, unit, table):
    names, cs, ss = [], [], []
    for sp, cols in config_species(config).items():
        if unit == "fraction":
            c, s = conc[cols[0]], csig[cols[0]]
        else:
            c, s = quantify.combine(conc[cols], csig[cols])
        table[f"{sp}_concentration"] = c
        table[f"{sp}_concentration_sigma"] = s
        names.append(sp)
        cs.append(c)
        ss.append(s)
    return np.array(cs), np.array(ss), names


def _derived(config, species_c, species_s, names, table, warnings) -> None:
    q = config.quantify
    if q.mode == "none" or not names:
        return
    if q.reactant is not None:
        i = names.index(q.reactant)
        x, xs = quantify.conversion(species_c[i], species_s[i], species_c[i][0], species_s[i][0])
        table["conversion"], table["conversion_sigma"] = x, xs
        if q.product is not None:
            j = names.index(q.product)
            ratio = q.stoichiometry.get(q.reactant, 1.0) / q.stoichiometry.get(q.product, 1.0) \
                if q.stoichiometry.get(q.product, 1.0) else 1.0
            y, ys = quantify.product_yield(species_c[j], species_s[j], species_c[i][0], species_s[i][0], ratio)
            table["yield"], table["yield_sigma"] = y, ys
    if q.mode != "relative" and len(names) >= 1:
        weights = [q.stoichiometry.get(sp, 1.0) for sp in names]
        balance = quantify.mass_balance(species_c, species_s, weights, q.mass_balance_sigmas)
        table["mass_balance_total"] = balance.total
        table["mass_balance_deviation"] = balance.deviation
        table["mass_balance_deviation_sigma"] = balance.deviation_sigma
        table["mass_balance_flag"] = balance.flagged
        # a flagged balance reaches the fit's warnings through the engine's refit
        # (kinetics.rates.diagnostics.mass_balance_note over this column and the file names)


def write_table(df: pd.DataFrame, path: str | Path) -> list[Path]:
    """Write ``df`` as CSV at ``path`` (and as Parquet beside it when pyarrow is installed)."""
    from kinetics.atomic import write_atomic

    path = Path(path)
    written = [write_atomic(path, df.to_csv(index=False))]
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        return written
    import io

    buffer = io.BytesIO()
    df.to_parquet(buffer, index=False)
    written.append(write_atomic(path.with_suffix(".parquet"), buffer.getvalue()))
    return written


# ---------------------------------------------------------------- one file, ad hoc regions
def parse_region(text: str) -> tuple[str, tuple[float, float], int]:
    """'NAME=LO:HI[:NUCLEI]' -> (name, (low, high), nuclei); ConfigError('--region') otherwise."""
    name, sep, rest = text.partition("=")
    parts = rest.split(":")
    if not sep or not name or len(parts) not in (2, 3):
        raise ConfigError("--region", f"expected NAME=LO:HI[:NUCLEI], got {text!r}")
    try:
        lo, hi = float(parts[0]), float(parts[1])
        nuclei = int(parts[2]) if len(parts) == 3 else 1
    except ValueError as error:
        raise ConfigError("--region", f"{text!r}: {error}") from error
    if lo == hi or nuclei < 1:
        raise ConfigError("--region", f"{text!r}: need LO != HI and NUCLEI >= 1")
    return name, (min(lo, hi), max(lo, hi)), nuclei


def integrate_file(path: str | Path, regions, *, reference_ppm: float | None = None, baseline: str = "edges",
                   local_phase: bool = False, noise_region_ppm=None, edge_fraction: float = 0.1) -> dict:
    """Region integrals of one file (``kinetics integrate``), as a JSON-ready dict.

    A FID is processed with the default :class:`~kinetics.processing.Pipeline`; a
    spectrum is used as stored.  ``reference_ppm`` moves the tallest point within 0.3 ppm
    of it to it first.  Returns ``{"file", "sha256", "unit", "noise_sigma",
    "noise_region_ppm", "regions": [{"name", "ppm", "nuclei", "integral", "per_nucleus",
    "sigma", "truncation_loss", "phase_deg"}]}``.
    """
    from kinetics.processing import Pipeline, reference
    from kinetics.spectra.reader import read
    from kinetics.spectra.spectrum import Fid

    record = read(path)
    spectrum = Pipeline.from_config({})(record).spectrum if isinstance(record, Fid) else record
    if reference_ppm is not None:
        try:
            spectrum = reference(spectrum, reference_ppm, 0.3).spectrum
        except ValueError as error:
            raise ConfigError("--reference", str(error)) from error
    defs = [sg.SignalDefinition(name=name, species=name, window_ppm=window, nuclei=nuclei)
            for name, window, nuclei in regions]
    sg.validate_signals(defs, spectrum.ppm_range, key="--region")
    noise = sg.estimate_noise(spectrum, noise_region_ppm, exclude_ppm=[d.window_ppm for d in defs],
                              detrend_order=1 if baseline == "edges" else 0)
    out = []
    for d in defs:
        r = sg.integrate_region(spectrum, d.window_ppm, noise, name=d.name, nuclei=d.nuclei, baseline=baseline,
                                edge_fraction=edge_fraction, local_phase=local_phase)
        out.append({"name": d.name, "ppm": list(d.window_ppm), "nuclei": d.nuclei, "integral": r.integral,
                    "per_nucleus": r.per_nucleus, "sigma": r.sigma, "per_nucleus_sigma": r.per_nucleus_sigma,
                    "truncation_loss": r.truncation_loss, "phase_deg": r.phase_deg})
    return {"file": str(path), "sha256": record.sha256 or sha256_of_file(path),
            "kind": "fid" if isinstance(record, Fid) else "spectrum", "unit": "ppm x intensity",
            "baseline": baseline, "local_phase": local_phase, "noise_sigma": noise.sigma,
            "noise_region_ppm": [list(r) for r in noise.region_ppm], "regions": out}
