"""The processing pipeline: settings validated once from the ``[processing]`` table, run per record."""

from __future__ import annotations

import dataclasses
import logging
import math
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np

from kinetics.errors import ConfigError
from kinetics.linalg import small_linear_algebra
from kinetics.nuclei import SCALE_REFERENCES, known_nucleus
from kinetics.processing.phasing import PHASE_METHODS, PhaseHint, auto_phase
from kinetics.processing.steps import (align_series, apodize_exponential, apodize_gaussian, correct_baseline,
                                       detect_group_delay, fft, noise_sigma, phase, reference,
                                       remove_dc_offset, remove_group_delay, zero_fill)
from kinetics.spectra.spectrum import Fid, Spectrum

log = logging.getLogger(__name__)


# ------------------------------------------------------------------ pipeline
@dataclass(frozen=True)
class ProcessedSpectrum:
    """A spectrum after the pipeline, with what was done to it.

    Attributes
    ----------
    spectrum : Spectrum
        Phased, baseline-corrected, referenced spectrum.
    p0_deg, p1_deg : float
        Phase applied (degrees); 0 when not phased.
    pivot_ppm : float or None
        Pivot of ``p1_deg`` (after referencing the same point has moved by
        ``reference_shift_ppm``).
    group_delay_points : float
        Filter delay removed (points).
    reference_shift_ppm : float
        Shift added to the axis by referencing (0 when not referenced).
    noise_sigma : float or None
        Noise from ``noise_region_ppm`` when configured.
    succeeded : bool
        False when a step fell back or did not converge; ``notes`` say why.
    notes : tuple of str
        What each step did, in order.
    """

    spectrum: Spectrum
    p0_deg: float = 0.0
    p1_deg: float = 0.0
    pivot_ppm: float | None = None
    group_delay_points: float = 0.0
    reference_shift_ppm: float = 0.0
    noise_sigma: float | None = None
    succeeded: bool = True
    notes: tuple[str, ...] = ()

    @property
    def phase_used(self) -> PhaseHint | None:
        """The phase applied, as a start for the next spectrum of a series (None if not phased)."""
        if self.pivot_ppm is None:
            return None
        return PhaseHint(self.p0_deg, self.p1_deg, self.pivot_ppm)


_DEFAULTS: dict[str, Any] = {
    "dc_offset": True,           # bool: subtract the mean of the FID's tail
    "dc_tail_fraction": 0.2,     # fraction of points (from the end) for the DC offset
    "group_delay": "auto",       # "auto" | "header" | "detect" | "none" | points (float)
    "line_broadening_hz": 0.3,   # Hz, exponential (common practice for 1H)
    "gaussian_hz": 0.0,          # Hz, FWHM of the Gaussian convolution
    "zero_fill": "auto",         # "auto" (power of two >= 2 n) | int points | 0/"none"
    "first_point_scale": "auto", # factor on the first FID point: "auto" = 0.5, or 1.0 after a filter delay
    "phase": "auto",             # "auto" | "none" | {p0_deg, p1_deg, pivot_ppm}
    "phase_method": "peaks",     # "peaks" (peak-phase regression) | "acme" (Chen et al. 2002)
    "phase_region_ppm": None,    # [high, low] region scored by auto-phasing, or None
    "phase_exclude_ppm": [],     # [[high, low], ...] left out of the auto-phase score (solvent)
    "phase_p1_range_deg": 360.0, # degrees, half-width of the auto-phase p1 search
    "baseline": "none",          # "none" | "asls" | "arpls" | "polynomial" | {method, ...}
    "reference": None,           # None | "tms" | "ccl3f" | "h3po4" | {ppm, window_ppm, target_ppm}
    "noise_region_ppm": None,    # [high, low] signal-free region for the noise sigma
}

_BASELINE_KEYS = {"method", "lam", "p", "order", "regions_ppm"}
_REFERENCE_KEYS = {"ppm", "window_ppm", "target_ppm"}
_PHASE_KEYS = {"p0_deg", "p1_deg", "pivot_ppm"}


def _scale_reference_names() -> dict[str, tuple[str, ...]]:
    """Lower-case compound name -> the nuclei whose scale it is the zero of
    (:data:`kinetics.nuclei.SCALE_REFERENCES`): ``{"tms": ("1H", "13C"), "ccl3f": ("19F",), ...}``."""
    names: dict[str, tuple[str, ...]] = {}
    for nucleus, compound in SCALE_REFERENCES.items():
        key = compound.name.lower()
        names[key] = names.get(key, ()) + (nucleus,)
    return names


def _key(name: str) -> str:
    return f"processing.{name}"


def _number(value, name: str, minimum: float | None = None) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ConfigError(_key(name), f"expected a number, got {value!r}")
    if minimum is not None and value < minimum:
        raise ConfigError(_key(name), f"must be >= {minimum}, got {value!r}")
    return float(value)


def _ppm_pair(value, name: str) -> tuple[float, float]:
    if not isinstance(value, (list, tuple)) or len(value) != 2:
        raise ConfigError(_key(name), f"expected [high_ppm, low_ppm], got {value!r}")
    high, low = (_number(v, name) for v in value)
    if high == low:
        raise ConfigError(_key(name), "the two ends of the region must differ")
    return (max(high, low), min(high, low))


def _check_subkeys(value: Mapping, allowed: set[str], name: str) -> None:
    for sub in value:
        if sub not in allowed:
            raise ConfigError(_key(f"{name}.{sub}"), "unknown key",
                              hint=f"allowed: {', '.join(sorted(allowed))}")


@dataclass(frozen=True)
class Pipeline:
    """The processing steps and their settings, validated once.

    Build it with :meth:`from_config` from the ``[processing]`` section of a TOML config
    (a plain dict); every key is optional.  Keys, defaults and units:

    ==================== =========== ==========================================================
    key                  default     meaning
    ==================== =========== ==========================================================
    dc_offset            true        subtract the mean of the FID's last ``dc_tail_fraction``
    dc_tail_fraction     0.2         fraction of points used for the DC offset
    group_delay          "auto"      digital-filter delay: "header" (declared points),
                                     "detect" (from the rising edge), "auto" (declared if
                                     > 0, else detected), "none", or a number of points
    line_broadening_hz   0.3         exponential line broadening, Hz
    gaussian_hz          0.0         Gaussian line broadening (FWHM), Hz
    zero_fill            "auto"      final points: "auto" = power of two >= 2 n; an int;
                                     0 or "none" for no zero-filling
    first_point_scale    "auto"      factor on the first FID point before the FFT: "auto" is
                                     0.5, or 1.0 when a filter delay was removed (the
                                     filtered step is already band-limited); or a number
    phase                "auto"      "auto", "none", or {p0_deg, p1_deg, pivot_ppm}
                                     (degrees, degrees, ppm; pivot defaults to the left edge)
    phase_method         "peaks"     auto-phasing method: "peaks" (peak-phase regression,
                                     see :func:`auto_phase`) or "acme" (Chen et al. 2002)
    phase_region_ppm     none        [high, low] ppm scored by auto-phasing
    phase_exclude_ppm    []          [[high, low], ...] ppm left out of the auto-phase score
                                     (a large solvent line; see :func:`auto_phase`)
    phase_p1_range_deg   360         half-width of the auto-phase p1 search, degrees
    baseline             "none"      "none", "asls", "arpls", "polynomial", or a table
                                     {method, lam (1e7), p (0.01), order (3),
                                     regions_ppm [[high, low], ...] (polynomial only)}
    reference            none        the zero of the nucleus's scale by name: "tms" (1H,
                                     13C), "ccl3f" (19F), "h3po4" (31P), each = {ppm = 0}
                                     and refused on another nucleus; or {ppm, window_ppm
                                     (0.3), target_ppm (= ppm)}: the tallest point in ppm
                                     +/- window_ppm is moved to target_ppm
    noise_region_ppm     none        [high, low] signal-free region; noise sigma is reported
    ==================== =========== ==========================================================

    Calling the pipeline on a :class:`Fid` runs every step; on a :class:`Spectrum`
    (already transformed) only the spectrum-domain steps (phase, baseline, reference,
    noise) run.
    """

    dc_offset: bool = True
    dc_tail_fraction: float = 0.2
    group_delay: str | float = "auto"
    line_broadening_hz: float = 0.3
    gaussian_hz: float = 0.0
    zero_fill: int | str = "auto"
    first_point_scale: float | str = "auto"
    phase: str | Mapping[str, float] = "auto"
    phase_method: str = "peaks"
    phase_region_ppm: tuple[float, float] | None = None
    phase_exclude_ppm: tuple[tuple[float, float], ...] = ()
    phase_p1_range_deg: float = 360.0
    baseline: Mapping[str, Any] | None = None
    reference: Mapping[str, float] | None = None
    noise_region_ppm: tuple[float, float] | None = None

    @classmethod
    def from_config(cls, section: Mapping[str, Any] | None = None) -> "Pipeline":
        """Validate a ``[processing]`` table; a bad key or value raises ConfigError naming it."""
        section = dict(section or {})
        for name in section:
            if name not in _DEFAULTS:
                raise ConfigError(_key(name), "unknown key", hint=f"allowed: {', '.join(_DEFAULTS)}")
        merged = {**_DEFAULTS, **section}
        values: dict[str, Any] = {}

        if not isinstance(merged["dc_offset"], bool):
            raise ConfigError(_key("dc_offset"), f"expected true or false, got {merged['dc_offset']!r}")
        values["dc_offset"] = merged["dc_offset"]
        tail = _number(merged["dc_tail_fraction"], "dc_tail_fraction")
        if not 0 < tail <= 0.5:
            raise ConfigError(_key("dc_tail_fraction"), f"must be in (0, 0.5], got {tail}")
        values["dc_tail_fraction"] = tail

        delay = merged["group_delay"]
        if isinstance(delay, str):
            if delay not in ("auto", "header", "detect", "none"):
                raise ConfigError(_key("group_delay"), f"unknown choice {delay!r}",
                                  hint="use auto, header, detect, none or a number of points")
            values["group_delay"] = delay
        else:
            values["group_delay"] = _number(delay, "group_delay", minimum=0)

        values["line_broadening_hz"] = _number(merged["line_broadening_hz"], "line_broadening_hz", 0)
        values["gaussian_hz"] = _number(merged["gaussian_hz"], "gaussian_hz", 0)

        zf = merged["zero_fill"]
        if zf in ("auto", "none"):
            values["zero_fill"] = zf
        elif isinstance(zf, int) and not isinstance(zf, bool) and 0 <= zf <= 1 << 24:
            values["zero_fill"] = "none" if zf == 0 else zf
        else:
            raise ConfigError(_key("zero_fill"), f"expected \"auto\", \"none\" or a point count, got {zf!r}")

        if merged["first_point_scale"] == "auto":
            values["first_point_scale"] = "auto"
        else:
            scale = _number(merged["first_point_scale"], "first_point_scale", 0)
            if scale > 1:
                raise ConfigError(_key("first_point_scale"), f"must be \"auto\" or in [0, 1], got {scale}")
            values["first_point_scale"] = scale

        values["phase"] = cls._check_phase(merged["phase"])
        if merged["phase_method"] not in PHASE_METHODS:
            raise ConfigError(_key("phase_method"), f"unknown method {merged['phase_method']!r}",
                              hint=f"use {' or '.join(PHASE_METHODS)}")
        values["phase_method"] = merged["phase_method"]
        region = merged["phase_region_ppm"]
        values["phase_region_ppm"] = None if region is None else _ppm_pair(region, "phase_region_ppm")
        excluded = merged["phase_exclude_ppm"]
        if not isinstance(excluded, (list, tuple)):
            raise ConfigError(_key("phase_exclude_ppm"), f"expected a list of [high, low] pairs, got {excluded!r}",
                              hint="e.g. phase_exclude_ppm = [[4.9, 4.6]] for a water line")
        values["phase_exclude_ppm"] = tuple(_ppm_pair(r, "phase_exclude_ppm") for r in excluded)
        p1_range = _number(merged["phase_p1_range_deg"], "phase_p1_range_deg", 0)
        if not 0 < p1_range <= 3600:
            raise ConfigError(_key("phase_p1_range_deg"), f"must be in (0, 3600] degrees, got {p1_range}")
        values["phase_p1_range_deg"] = p1_range
        values["baseline"] = cls._check_baseline(merged["baseline"])
        values["reference"] = cls._check_reference(merged["reference"])
        noise = merged["noise_region_ppm"]
        values["noise_region_ppm"] = None if noise is None else _ppm_pair(noise, "noise_region_ppm")
        return cls(**values)

    @staticmethod
    def _check_phase(value):
        if value in ("auto", "none"):
            return value
        if isinstance(value, Mapping):
            _check_subkeys(value, _PHASE_KEYS, "phase")
            checked = {"p0_deg": _number(value.get("p0_deg", 0.0), "phase.p0_deg"),
                       "p1_deg": _number(value.get("p1_deg", 0.0), "phase.p1_deg")}
            if value.get("pivot_ppm") is not None:
                checked["pivot_ppm"] = _number(value["pivot_ppm"], "phase.pivot_ppm")
            return checked
        raise ConfigError(_key("phase"), f"expected \"auto\", \"none\" or {{p0_deg, p1_deg, pivot_ppm}}, got {value!r}")

    @staticmethod
    def _check_baseline(value):
        if value is None or value == "none":
            return None
        if isinstance(value, str):
            value = {"method": value}
        if not isinstance(value, Mapping):
            raise ConfigError(_key("baseline"), f"expected a method name or a table, got {value!r}")
        _check_subkeys(value, _BASELINE_KEYS, "baseline")
        method = value.get("method", "arpls")
        if method not in ("asls", "arpls", "polynomial"):
            raise ConfigError(_key("baseline.method"), f"unknown method {method!r}",
                              hint="use asls, arpls, polynomial or none")
        checked: dict[str, Any] = {"method": method}
        if "lam" in value:
            checked["lam"] = _number(value["lam"], "baseline.lam", 0)
        if "p" in value:
            p = _number(value["p"], "baseline.p", 0)
            if not 0 < p < 1:
                raise ConfigError(_key("baseline.p"), f"must be in (0, 1), got {p}")
            checked["p"] = p
        if "order" in value:
            order = value["order"]
            if isinstance(order, bool) or not isinstance(order, int) or not 0 <= order <= 10:
                raise ConfigError(_key("baseline.order"), f"expected an integer 0-10, got {order!r}")
            checked["order"] = order
        if method == "polynomial":
            regions = value.get("regions_ppm")
            if not isinstance(regions, (list, tuple)) or not regions:
                raise ConfigError(_key("baseline.regions_ppm"),
                                  "the polynomial baseline needs signal-free regions",
                                  hint="e.g. regions_ppm = [[11, 9.5], [-0.5, -1]]")
            checked["regions_ppm"] = tuple(_ppm_pair(r, "baseline.regions_ppm") for r in regions)
        elif "regions_ppm" in value:
            raise ConfigError(_key("baseline.regions_ppm"), f"only used by the polynomial method, not {method}")
        return checked

    @staticmethod
    def _check_reference(value):
        if value is None or value == "none":
            return None
        nuclei = None
        if isinstance(value, str):
            # the zero of a nucleus's scale by its compound's name ("tms", "ccl3f", "h3po4"):
            # checked against the spectrum's nucleus when it runs
            names = _scale_reference_names()
            if value.lower() not in names:
                raise ConfigError(_key("reference"), f"unknown reference {value!r}",
                                  hint=f"use {', '.join(repr(n) for n in names)} or a table "
                                       "{ppm, window_ppm, target_ppm}")
            nuclei = names[value.lower()]
            value = {"ppm": 0.0}
        if not isinstance(value, Mapping):
            raise ConfigError(_key("reference"), f"expected \"tms\" or a table, got {value!r}")
        _check_subkeys(value, _REFERENCE_KEYS, "reference")
        if "ppm" not in value:
            raise ConfigError(_key("reference.ppm"), "missing: where the reference peak is expected")
        checked = {"ppm": _number(value["ppm"], "reference.ppm"),
                   "window_ppm": _number(value.get("window_ppm", 0.3), "reference.window_ppm", 0)}
        if checked["window_ppm"] == 0:
            raise ConfigError(_key("reference.window_ppm"), "must be > 0")
        checked["target_ppm"] = _number(value.get("target_ppm", checked["ppm"]), "reference.target_ppm")
        if nuclei is not None:
            checked["nuclei"] = nuclei
        return checked

    # -------------------------------------------------------------- running
    def transform(self, fid: Fid) -> tuple[Spectrum, float, list[str]]:
        """Time-domain steps and the FFT: (spectrum, group delay removed in points, notes)."""
        notes: list[str] = []
        if self.dc_offset:
            fid = remove_dc_offset(fid, self.dc_tail_fraction)
        delay = self._group_delay(fid)
        fid = fid.replace(group_delay_points=delay)
        fid = apodize_exponential(fid, self.line_broadening_hz)
        fid = apodize_gaussian(fid, self.gaussian_hz)
        if self.zero_fill != "none":
            fid = zero_fill(fid, self.zero_fill)
        if delay:
            notes.append(f"removed a digital-filter delay of {delay:.3f} points")
            fid = remove_group_delay(fid, delay)
        scale = self.first_point_scale
        if scale == "auto":
            # filtered data already hold the band-limited step (its first sample is the
            # midpoint); halving it again would add a rolling baseline
            scale = 1.0 if delay else 0.5
        return fft(fid, scale), delay, notes

    def _group_delay(self, fid: Fid) -> float:
        if isinstance(self.group_delay, float):
            return self.group_delay
        if self.group_delay == "none":
            return 0.0
        if self.group_delay == "header":
            return fid.group_delay_points
        if self.group_delay == "detect" or fid.group_delay_points == 0:
            return detect_group_delay(fid)
        return fid.group_delay_points

    def __call__(self, record: Fid | Spectrum, phase_hint: PhaseHint | None = None) -> ProcessedSpectrum:
        """Process one FID (all steps) or transformed spectrum (spectrum-domain steps).

        ``phase_hint``: see :func:`process`.
        """
        with small_linear_algebra():
            return self._run(record, phase_hint)

    def _run(self, record: Fid | Spectrum, phase_hint: PhaseHint | None) -> ProcessedSpectrum:
        delay = 0.0
        notes: list[str] = []
        if isinstance(record, Fid):
            spectrum, delay, notes = self.transform(record)
        elif isinstance(record, Spectrum):
            spectrum = record
        else:
            raise TypeError(f"expected a Fid or a Spectrum, got {type(record).__name__}")
        succeeded = True
        p0 = p1 = 0.0
        pivot = None
        if self.phase == "auto" and spectrum.imag is None:
            notes.append("not phased: the spectrum has no imaginary part")
        elif self.phase == "auto":
            result = auto_phase(spectrum, self.phase_method, region_ppm=self.phase_region_ppm,
                                p1_range_deg=self.phase_p1_range_deg, exclude_ppm=self.phase_exclude_ppm,
                                start=phase_hint)
            spectrum, p0, p1, pivot = result.spectrum, result.p0_deg, result.p1_deg, result.pivot_ppm
            started = " from the previous spectrum's phase" if phase_hint is not None else ""
            notes.append(f"auto-phased ({self.phase_method}{started}): p0 {p0:.2f} deg, p1 {p1:.2f} deg "
                         f"about {pivot:.4f} ppm")
            if not result.succeeded:
                succeeded = False
                notes.append(result.message)
        elif isinstance(self.phase, Mapping):
            p0, p1 = self.phase["p0_deg"], self.phase["p1_deg"]
            pivot = self.phase.get("pivot_ppm", float(spectrum.ppm[0]))
            spectrum = phase(spectrum, p0, p1, pivot)
            notes.append(f"phased: p0 {p0:.2f} deg, p1 {p1:.2f} deg about {pivot:.4f} ppm")
        if self.baseline is not None:
            spectrum, _ = correct_baseline(spectrum, **self.baseline)
            notes.append(f"baseline: {self.baseline['method']}")
        shift = 0.0
        wrong_nucleus = self.reference is not None and "nuclei" in self.reference \
            and known_nucleus(spectrum.nucleus) not in self.reference["nuclei"]
        if wrong_nucleus:
            succeeded = False
            notes.append(f"not referenced: the reference named in the config is the zero of the "
                         f"{'/'.join(self.reference['nuclei'])} scale, and this spectrum is {spectrum.nucleus}")
        elif self.reference is not None:
            try:
                ref = reference(spectrum, self.reference["ppm"], self.reference["window_ppm"],
                                self.reference["target_ppm"])
                spectrum, shift = ref.spectrum, ref.shift_ppm
                notes.append(f"referenced: peak at {ref.found_ppm:.4f} ppm moved to "
                             f"{self.reference['target_ppm']:.4f} ppm (shift {shift:+.4f} ppm)")
            except ValueError as error:
                succeeded = False
                notes.append(f"not referenced: {error}")
        sigma = None
        if self.noise_region_ppm is not None:
            try:
                sigma = noise_sigma(spectrum, self.noise_region_ppm)
            except ValueError as error:
                notes.append(f"no noise estimate: {error}")
        log.debug("processed %s: %s", record.source_path or "<memory>", "; ".join(notes))
        return ProcessedSpectrum(spectrum, p0, p1, pivot, delay, shift, sigma, succeeded, tuple(notes))


@dataclass(frozen=True)
class SeriesResult:
    """Outcome of :func:`process_series`.

    Attributes
    ----------
    spectra : tuple of ProcessedSpectrum
        Each record processed and (when a window was given) aligned.
    shifts_ppm : ndarray, shape (m,)
        Alignment shift added to each spectrum's axis (zeros when not aligned).
    reference_index : int
        Spectrum the series was aligned to.
    """

    spectra: tuple[ProcessedSpectrum, ...]
    shifts_ppm: np.ndarray
    reference_index: int

    @property
    def succeeded(self) -> bool:
        return all(item.succeeded for item in self.spectra)


def process_series(
    records: Sequence[Fid | Spectrum],
    pipeline: Pipeline,
    align_window_ppm: tuple[float, float] | None = None,
    reference_index: int = 0,
    max_shift_ppm: float = 0.1,
) -> SeriesResult:
    """Process every record the same way, then align the series on ``align_window_ppm``.

    Parameters
    ----------
    records : sequence of Fid or Spectrum
        The series in acquisition order (m records).
    pipeline : Pipeline
        Steps applied to each record.
    align_window_ppm : (high, low), optional
        Window for :func:`align_series`; no alignment when None.
    reference_index : int, default 0
        Spectrum the others are aligned to.
    max_shift_ppm : float, default 0.1
        Largest alignment shift searched, ppm.
    """
    processed = [pipeline(record) for record in records]
    shifts = np.zeros(len(processed))
    if align_window_ppm is not None and processed:
        alignment = align_series([p.spectrum for p in processed], align_window_ppm,
                                 reference_index, max_shift_ppm)
        shifts = alignment.shifts_ppm
        processed = [
            _with_alignment(item, spectrum, shift)
            for item, spectrum, shift in zip(processed, alignment.spectra, shifts)
        ]
    return SeriesResult(tuple(processed), shifts, reference_index)


def _with_alignment(item: ProcessedSpectrum, spectrum: Spectrum, shift: float) -> ProcessedSpectrum:
    notes = item.notes + ((f"aligned: shift {shift:+.5f} ppm",) if shift else ())
    return dataclasses.replace(item, spectrum=spectrum, notes=notes)


def process(record: Fid | Spectrum, pipeline: Pipeline, phase_hint: PhaseHint | None = None) -> ProcessedSpectrum:
    """Process one record; the engine's per-spectrum entry point.

    Parameters
    ----------
    record : Fid or Spectrum
        A raw FID (every step) or a transformed spectrum (spectrum-domain steps only).
    pipeline : Pipeline
        Settings, validated once with :meth:`Pipeline.from_config`.
    phase_hint : PhaseHint, optional
        The previous spectrum's phase (``ProcessedSpectrum.phase_used``), for a series
        whose phase is stable: automatic phasing starts there instead of from its own
        first estimate (see :func:`~kinetics.processing.phasing.auto_phase`, ``start``).
        Ignored unless ``phase`` is ``"auto"``.

    Returns
    -------
    ProcessedSpectrum
        ``phase_used`` is the phase applied, to pass as the next spectrum's hint.
    """
    return pipeline(record, phase_hint)


def fid_to_spectrum(fid: Fid) -> Spectrum:
    """Transform a FID with the defaults of :class:`Pipeline` (DC offset, filter delay
    auto, 0.3 Hz exponential broadening, zero-fill to a power of two >= 2 n, peak-regression
    auto-phase, no baseline, no referencing).  Used by ``kinetics inspect``."""
    return Pipeline.from_config({})(fid).spectrum

