"""Processing uncertainty: how far the rate constant moves under neighbouring reasonable choices.

A rate constant's statistical interval says how far noise could move it *for the
processing choices made*.  Equally reasonable choices -- a fit baseline one order
higher or lower, windows 30 % wider or narrower, two neighbouring multiplets fitted
together or apart -- move it too, and on crowded low-field spectra often by more.
This module re-quantifies a run under those neighbouring choices, fits each variant's
k, and reports the spread as a systematic term beside the statistical one.

Variants (:func:`neighbour_variants`), one choice changed at a time:

* ``baseline_order``: ``[integration] fit_baseline_order`` +-1, kept in 1..3 (only when
  the run has ``fit`` signals);
* ``window``: each integral signal's window, and each fit group's windows together,
  scaled by 0.7 and 1.3 about their centres (a widened edge stops at a neighbouring
  window it would otherwise overlap; the fit starts stay at the window centres);
* ``grouping``: two neighbouring fit groups (gap smaller than half the narrower of the
  two windows, no integral window between them) fitted as one group; a group whose
  members' windows do not overlap fitted as separate groups.

Combination rule (what the summary quotes)
------------------------------------------
Let ``k0`` be the run's own estimate with its statistical 95 % interval
``[k0 - h_lo, k0 + h_hi]`` (as the fit quotes it: profile or covariance) and quantile
``q`` (Student t with the fit's dof, or the normal 1.96), so the statistical standard
error is ``u_stat = (h_lo + h_hi) / (2 q)``.  Each *choice family* f (one choice on one
signal or group: e.g. "window of ester_OCH2", "fit baseline order") gives the
deviations ``d_v = k_v - k0`` of its variants.  Its systematic standard uncertainty is
the root-mean-square deviation

    u_f = sqrt(mean_v d_v^2)

(a choice moved by one "reasonable step" either way is treated as a +-1 sigma
excursion of that choice, the usual one-at-a-time treatment of systematic effects),
and the families, being different choices, add in quadrature:

    u_sys = sqrt(sum_f u_f^2).

Some of each d_v is the noise that the changed window or baseline lets in or out, which
the statistical term already counts; to avoid counting it twice the systematic term is
reduced by the part the statistical uncertainty explains,
``u_sys_eff^2 = max(0, u_sys^2 - c * u_stat^2)`` with ``c = NOISE_SHARE`` = 0.46 (the
mean of u_sys^2 / u_stat^2 that pure noise produces when no choice is biased, measured
on 40 simulated runs of the same sample without its water line; a calibration, not a
fit to the coverage runs below).  The quoted interval is

    [k0 - sqrt(h_lo^2 + (q u_sys_eff)^2),  k0 + sqrt(h_hi^2 + (q u_sys_eff)^2)]

i.e. root-sum-square of the statistical half-width and the systematic term scaled by
the same quantile.  Assumptions: the variants' effects are independent and roughly
symmetric about the truth; the neighbouring choices span the realistic range of what a
careful user would pick.

Evidence: over 200 simulated runs of the independent stress sample (a water line 45x
a quartet 0.7 ppm away, acetyl singlets 0.12 ppm apart at 45:1, drift, phase errors;
40 or 60 MHz) each with a reasonable config drawn at random, this interval held the
true k in 95.0 % (statistical interval alone: 93.5 %; before solvent tails were modelled
in the fit windows: 97.5 % against 81 %).  ``tests/test_independent_sensitivity.py``
repeats a 30-run sample in CI; ``tools/independent_coverage.py`` measures the 200.

Warnings: when ``q u_sys_eff`` exceeds the statistical half-width, a warning names the
signal (or group) and the choice that moves k most, and by how much.

Decoupling: :func:`assess` takes the validated :class:`~kinetics.config.RunConfig`,
a ``quantify(config) -> table`` callable and a ``fit(table) -> KEstimate`` callable.
:class:`SpectraQuantifier` is the adapter over processed, aligned spectra: each spectrum
is measured under the variant config (:func:`kinetics.series.measure_spectrum`, against
:func:`kinetics.series.reference_from_spectrum` of the variant) and the series table
formed (:func:`kinetics.series.series_table`); a fit group whose definitions a variant
leaves alone keeps the fit already made on the same spectra (``fits``), so a window
variant refits one group, not all.  :func:`fitter_for` fits the run config's ``[fit]``
rate law.  :func:`assess_files` does all of it from the config's folder (reading and
processing every file once, :func:`processed_run`).  ``assess(..., workers=n)``
measures the variants in n forked processes (same results).

The run engine does this after the final fit of every run (batch, a study's runs, a live
run's final pass) over the spectra it processed and kept in memory
(:mod:`kinetics.run.uncertainty`; no file is read twice)::

    quantify = sensitivity.SpectraQuantifier(spectra, measurements, reference_spectrum, fits=run_fits)
    result = sensitivity.assess(config, quantify,
                                fit=lambda t: sensitivity.estimate_from_fit(refitter.fit_table(t)),
                                base_table=table, base_estimate=sensitivity.estimate_from_fit(fit_result))
    result.combined_ci95, result.to_dict(), result.report(), result.warnings
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field, replace
from types import MappingProxyType
from typing import Callable, Mapping, Sequence

import numpy as np

from kinetics.errors import KineticsError

log = logging.getLogger(__name__)

#: window scale factors tried for every signal / fit group (+-30 %)
WINDOW_SCALES = (0.7, 1.3)
#: allowed fit baseline orders for the +-1 variants
BASELINE_ORDERS = (1, 2, 3)
#: share of u_sys^2 that statistical noise alone produces, in units of u_stat^2 (see the
#: module docstring): the mean of (u_sys/u_stat)^2 over 40 simulated runs of the stress
#: sample *without* its water line (so no choice is biased), 40 and 60 MHz, random
#: reasonable configs: 0.46 (0.38 at 40 MHz, 0.54 at 60 MHz)
NOISE_SHARE = 0.46


# ---------------------------------------------------------------- records
@dataclass(frozen=True)
class Variant:
    """One neighbouring choice: which choice, on which signal(s), and the config it gives.

    Attributes
    ----------
    choice : {'baseline_order', 'window', 'grouping'}
    target : str
        The signal or fit group the choice concerns ('all fit windows' for the baseline).
    setting : str
        What was changed, in words (``"fit_baseline_order 2 -> 3"``, ``"window x1.3"``).
    config : RunConfig
    """

    choice: str
    target: str
    setting: str
    config: object = field(repr=False)

    @property
    def family(self) -> tuple[str, str]:
        return (self.choice, self.target)


@dataclass(frozen=True)
class KEstimate:
    """A fitted rate constant: value, standard error, quoted 95 % interval, quantile, unit."""

    value: float
    stderr: float
    ci95: tuple[float, float]
    quantile: float
    unit: str = ""
    name: str = "k"


@dataclass(frozen=True)
class VariantOutcome:
    """k under one variant (NaN with ``error`` when it could not be quantified or fitted)."""

    choice: str
    target: str
    setting: str
    k: float
    delta: float
    error: str | None = None

    def to_dict(self) -> dict:
        return {"choice": self.choice, "target": self.target, "setting": self.setting,
                "k": None if not math.isfinite(self.k) else self.k,
                "delta": None if not math.isfinite(self.delta) else self.delta, "error": self.error}


@dataclass(frozen=True)
class SensitivityResult:
    """The statistical and systematic parts of k's uncertainty, and their combination.

    Attributes
    ----------
    base : KEstimate
        The run's own fit.
    variants : tuple of VariantOutcome
    family_sd : mapping (choice, target) -> u_f
    systematic_sd : float
        ``u_sys_eff`` (after removing the noise share), same unit as k.
    systematic_raw_sd : float
        ``u_sys`` before that.
    combined_ci95 : (lo, hi)
        The interval to quote (see the module docstring for the rule).
    warnings : tuple of str
    """

    base: KEstimate
    variants: tuple[VariantOutcome, ...]
    family_sd: Mapping[tuple[str, str], float]
    systematic_sd: float
    systematic_raw_sd: float
    combined_ci95: tuple[float, float]
    warnings: tuple[str, ...] = ()

    @property
    def statistical_ci95(self) -> tuple[float, float]:
        return self.base.ci95

    def largest(self) -> tuple[str, str, float] | None:
        """(choice, target, u_f) of the family that moves k most, or None."""
        if not self.family_sd:
            return None
        (choice, target), value = max(self.family_sd.items(), key=lambda item: item[1])
        return choice, target, value

    def to_dict(self) -> dict:
        """JSON-ready: statistical, systematic and combined parts plus the per-choice breakdown."""
        b = self.base
        return {
            "parameter": b.name, "unit": b.unit, "value": b.value,
            "statistical": {"stderr": b.stderr, "ci95": list(b.ci95)},
            "systematic": {"stderr": self.systematic_sd, "stderr_before_noise_share": self.systematic_raw_sd,
                           "rule": "u_f = rms(k_v - k0) per choice; u_sys = rss over choices; "
                                   "half-width = rss(statistical half-width, quantile * u_sys)"},
            "ci95": list(self.combined_ci95),
            "breakdown": [{"choice": c, "target": t, "stderr": v, "relative": v / abs(b.value) if b.value else None}
                          for (c, t), v in sorted(self.family_sd.items(), key=lambda item: -item[1])],
            "variants": [v.to_dict() for v in self.variants],
            "warnings": list(self.warnings),
        }

    def report(self) -> str:
        """A short text table for the terminal and the report."""
        b = self.base
        rel = (lambda x: 100.0 * x / abs(b.value)) if b.value else (lambda x: float("nan"))
        lines = [f"{b.name} = {b.value:.5g} {b.unit}",
                 f"  statistical 95 %: {b.ci95[0]:.5g} .. {b.ci95[1]:.5g}",
                 f"  systematic (processing choices) sd: {self.systematic_sd:.3g} ({rel(self.systematic_sd):.2f} %)",
                 f"  combined 95 %: {self.combined_ci95[0]:.5g} .. {self.combined_ci95[1]:.5g}",
                 "  choice            target                 moves k by (rms)"]
        for (choice, target), value in sorted(self.family_sd.items(), key=lambda item: -item[1]):
            lines.append(f"  {choice:<17} {target:<22} {rel(value):.2f} %")
        failed = [v for v in self.variants if v.error]
        for v in failed:
            lines.append(f"  ({v.choice} {v.target} {v.setting}: not measured: {v.error})")
        lines += [f"  warning: {w}" for w in self.warnings]
        return "\n".join(lines)


# ---------------------------------------------------------------- variants
def _groups(signals) -> dict[str, list[int]]:
    groups: dict[str, list[int]] = {}
    for i, sig in enumerate(signals):
        if sig.method == "fit":
            groups.setdefault(sig.fit_group, []).append(i)
    return groups


def _span(signals, indices) -> tuple[float, float]:
    return min(signals[i].window_ppm[0] for i in indices), max(signals[i].window_ppm[1] for i in indices)


def _overlap(a, b) -> bool:
    return a[0] < b[1] and b[0] < a[1]


def _scaled_windows(signals, indices, scale: float):
    """Windows of ``indices`` scaled about their centres; widened edges stop at other windows."""
    members = set(indices)
    group = {signals[i].fit_group for i in indices if signals[i].method == "fit"}
    others = [s.window_ppm for j, s in enumerate(signals)
              if j not in members and not (s.method == "fit" and s.fit_group in group)]
    out = list(signals)
    for i in indices:
        sig = signals[i]
        lo, hi = sig.window_ppm
        centre, half = 0.5 * (lo + hi), 0.5 * (hi - lo) * scale
        new_lo, new_hi = centre - half, centre + half
        for olo, ohi in others:
            if ohi <= lo and new_lo < ohi:
                new_lo = ohi
            if olo >= hi and new_hi > olo:
                new_hi = olo
        # keep the centre (a fit component starts there): shrink the other side to match
        half = min(centre - new_lo, new_hi - centre)
        out[i] = replace(sig, window_ppm=(centre - half, centre + half))
    return tuple(out)


def neighbour_variants(config) -> list[Variant]:
    """The neighbouring reasonable configs of ``config`` (see the module docstring)."""
    from kinetics.signals import validate_signals

    signals = tuple(config.signals)
    variants: list[Variant] = []

    def add(choice, target, setting, new_signals=None, integration=None):
        cfg = config
        if new_signals is not None:
            try:
                validate_signals(new_signals)
            except KineticsError as error:
                log.info("variant %s %s %s skipped: %s", choice, target, setting, error)
                return
            cfg = replace(cfg, signals=tuple(new_signals))
        if integration is not None:
            cfg = replace(cfg, integration=integration)
        variants.append(Variant(choice, target, setting, cfg))

    groups = _groups(signals)
    order = config.integration.fit_baseline_order
    if groups:
        for other in (order - 1, order + 1):
            if other in BASELINE_ORDERS:
                add("baseline_order", "all fit windows", f"fit_baseline_order {order} -> {other}",
                    integration=replace(config.integration, fit_baseline_order=other))
    units: list[tuple[str, list[int]]] = [(s.name, [i]) for i, s in enumerate(signals) if s.method != "fit"]
    units += [("+".join(signals[i].name for i in idx), idx) for idx in groups.values()]  # signals, not groups
    for target, indices in units:
        for scale in WINDOW_SCALES:
            add("window", target, f"window x{scale:g}", _scaled_windows(signals, indices, scale))
    names = list(groups)
    for a in range(len(names)):
        for b in range(a + 1, len(names)):
            sa, sb = _span(signals, groups[names[a]]), _span(signals, groups[names[b]])
            gap = max(sb[0] - sa[1], sa[0] - sb[1])
            narrower = min(sa[1] - sa[0], sb[1] - sb[0])
            gap_ppm = (min(sa[1], sb[1]), max(sa[0], sb[0]))
            between = [s for s in signals if s.method != "fit" and _overlap(s.window_ppm, gap_ppm)]
            if gap < 0.5 * narrower and not between:
                merged = f"{names[a]}+{names[b]}"
                new = tuple(replace(s, group=merged) if s.method == "fit" and s.fit_group in (names[a], names[b]) else s
                            for s in signals)
                target = "+".join(signals[i].name for i in groups[names[a]] + groups[names[b]])
                add("grouping", target, "fitted together", new)
    for name, idx in groups.items():
        if len(idx) < 2:
            continue
        windows = [signals[i].window_ppm for i in idx]
        if any(_overlap(windows[x], windows[y]) for x in range(len(idx)) for y in range(x + 1, len(idx))):
            continue
        new = tuple(replace(s, group=s.name) if i in idx else s for i, s in enumerate(signals))
        add("grouping", "+".join(signals[i].name for i in idx), "fitted apart", new)
    return variants


# ---------------------------------------------------------------- combination
def combine(base: KEstimate, outcomes: Sequence[VariantOutcome], noise_share: float = NOISE_SHARE):
    """(family_sd, u_sys_eff, u_sys, combined (lo, hi)) by the module docstring's rule."""
    families: dict[tuple[str, str], list[float]] = {}
    for item in outcomes:
        if item.error is None and math.isfinite(item.delta):
            families.setdefault((item.choice, item.target), []).append(item.delta)
    family_sd = {key: math.sqrt(float(np.mean(np.square(deltas)))) for key, deltas in families.items()}
    u_sys = math.sqrt(sum(v * v for v in family_sd.values()))
    q = base.quantile
    h_lo, h_hi = base.value - base.ci95[0], base.ci95[1] - base.value
    u_stat = (h_lo + h_hi) / (2.0 * q) if q > 0 else base.stderr
    u_eff = math.sqrt(max(0.0, u_sys ** 2 - noise_share * u_stat ** 2))
    lo = base.value - math.hypot(h_lo, q * u_eff)
    hi = base.value + math.hypot(h_hi, q * u_eff)
    return family_sd, u_eff, u_sys, (lo, hi)


def assess(config, quantify: Callable, fit: Callable, variants: Sequence[Variant] | None = None,
           base_table=None, base_estimate: KEstimate | None = None,
           noise_share: float = NOISE_SHARE, workers: int = 1) -> SensitivityResult:
    """Re-quantify and refit under each neighbouring choice; combine into one interval.

    Parameters
    ----------
    config : RunConfig
        The validated run config (the run's own choices).
    quantify : callable, ``quantify(config) -> pandas.DataFrame``
        The series table of the run's spectra measured with ``config``.
    fit : callable, ``fit(table) -> KEstimate``
        The rate-law fit of the run (e.g. :func:`fitter_for`).
    variants : list of Variant, optional
        Default :func:`neighbour_variants` of ``config``.
    base_table, base_estimate : optional
        The run's own table / fit when already computed (saves one quantify / fit).
    workers : int
        Variants measured in this many forked worker processes (1: here, in order);
        the results are the same either way.
    """
    if base_estimate is None:
        base_estimate = fit(quantify(config) if base_table is None else base_table)
    if variants is None:
        variants = neighbour_variants(config)
    outcomes = []
    for v, (k, error) in zip(variants, _variant_ks(variants, quantify, fit, workers)):
        if error is None:
            outcomes.append(VariantOutcome(v.choice, v.target, v.setting, k, k - base_estimate.value))
        else:
            log.info("processing variant %s of %s (%s) failed: %s", v.choice, v.target, v.setting, error)
            outcomes.append(VariantOutcome(v.choice, v.target, v.setting, math.nan, math.nan, error))
    family_sd, u_eff, u_sys, combined = combine(base_estimate, outcomes, noise_share)
    warnings = _warnings(base_estimate, family_sd, u_eff, outcomes)
    for text in warnings:  # the caller shows them (a run's warnings); logged for the record
        log.info(text)
    return SensitivityResult(base_estimate, tuple(outcomes), MappingProxyType(family_sd), u_eff, u_sys,
                             combined, tuple(warnings))


_WORKER_JOB: tuple | None = None  # (quantify, fit, configs), set just before the worker processes fork


def _variant_k(index: int):
    quantify, fit, configs = _WORKER_JOB
    try:
        return float(fit(quantify(configs[index])).value), None
    except (KineticsError, ValueError, ArithmeticError, np.linalg.LinAlgError) as error:
        return math.nan, str(error)


def _variant_ks(variants, quantify, fit, workers: int) -> list[tuple[float, str | None]]:
    """(k, None) or (NaN, why) per variant; in forked workers when ``workers`` > 1 (they
    inherit the spectra and configs: only indices go out, numbers come back)."""
    global _WORKER_JOB
    import multiprocessing

    configs = [v.config for v in variants]
    _WORKER_JOB = (quantify, fit, configs)
    try:
        if workers <= 1 or len(configs) < 2 or "fork" not in multiprocessing.get_all_start_methods():
            return [_variant_k(i) for i in range(len(configs))]
        from concurrent.futures import ProcessPoolExecutor

        with ProcessPoolExecutor(min(workers, len(configs)), mp_context=multiprocessing.get_context("fork")) as pool:
            return list(pool.map(_variant_k, range(len(configs))))
    finally:
        _WORKER_JOB = None


def _warnings(base: KEstimate, family_sd, u_eff: float, outcomes) -> list[str]:
    out = []
    half = 0.5 * (base.ci95[1] - base.ci95[0])
    if family_sd and base.quantile * u_eff > half:
        (choice, target), value = max(family_sd.items(), key=lambda item: item[1])
        moved = max((o for o in outcomes if (o.choice, o.target) == (choice, target) and o.error is None),
                    key=lambda o: abs(o.delta))
        words = {"baseline_order": "the fit baseline order", "window": "the window of",
                 "grouping": "fitting together or apart"}[choice]
        subject = f"{words} {target}" if choice != "baseline_order" else words
        pct = 100.0 * moved.delta / base.value if base.value else float("nan")
        scale = 100.0 / abs(base.value) if base.value else float("nan")
        out.append(f"{base.name} depends on processing choices more than on noise: they add +-"
                   f"{scale * base.quantile * u_eff:.2f} % (95 %) beside the statistical +-{scale * half:.2f} %; "
                   f"most of it from {subject} ({moved.setting}: {pct:+.2f} %). The quoted interval includes "
                   f"this spread; check that signal's window, baseline and neighbours against the spectrum.")
    failed = [o for o in outcomes if o.error]
    if failed:
        out.append(f"{len(failed)} of {len(outcomes)} processing variants could not be measured "
                   f"(first: {failed[0].choice} {failed[0].target} {failed[0].setting}: {failed[0].error})")
    return out


# ---------------------------------------------------------------- adapters
def fitter_for(config) -> Callable:
    """``fit(table) -> KEstimate`` for the run config's ``[fit]`` rate law.

    Fits ``<species>_concentration`` weighted by ``<species>_concentration_sigma`` (as the
    run does) with :func:`kinetics.rates.fit.fit_law`; the rate constant is the first
    varying parameter whose name starts with 'k'.  Mechanisms are not handled here
    (pass the engine's own fitter).
    """
    from kinetics.rates.fit import fit_law
    from kinetics.rates.table import from_arrays

    resolved = getattr(config, "fit", None)
    if resolved is not None and hasattr(resolved, "model"):  # the validated [fit] record
        mechanism, model, observed, species = resolved.mechanism, resolved.model, resolved.observed, resolved.species
    else:
        section = dict(config.sections.get("fit", {}) or {})
        mechanism, model = section.get("mechanism"), str(section.get("model", "first"))
        observed, species = str(section.get("observed", "reactant")), section.get("species")
    if mechanism:
        raise KineticsError("sensitivity.fitter_for: pass a fitter for mechanism fits")
    species = species or config.quantify.reactant or config.species[0]
    column = f"{species}_concentration"

    def fit(table) -> KEstimate:
        rows = table[["time_s", column]].dropna()
        sigma = None
        if f"{column}_sigma" in table:
            s = table.loc[rows.index, f"{column}_sigma"].to_numpy(float)
            sigma = s if np.all(np.isfinite(s) & (s > 0)) else None
        data = from_arrays(rows["time_s"].to_numpy(float), rows[column].to_numpy(float), sigma=sigma,
                           columns=[column])
        result = fit_law(data, model, observed=observed)
        return estimate_from_fit(result)

    return fit


def estimate_from_fit(result) -> KEstimate:
    """A :class:`kinetics.rates.fit.FitResult` -> KEstimate of its rate constant."""
    if not result.converged:
        raise KineticsError(f"the fit did not converge: {result.message}")
    name = next((n for n in result.varying if n.startswith("k")), None)
    if name is None:
        raise KineticsError("the fit has no rate constant to assess")
    p = result.param(name)
    if p.ci95 is None or p.stderr is None:
        raise KineticsError(f"the fit gives no interval for {name}")
    from kinetics.rates.intervals import interval_quantile

    lo, hi = p.ci95
    if not (math.isfinite(lo) and math.isfinite(hi)):  # an open profile: no finite half-width to combine
        raise KineticsError(f"the 95 % interval of {name} is open on one side; no combined interval")
    quantile = interval_quantile(result.dof, result.options.absolute_sigma, 0.95)
    return KEstimate(float(p.value), float(p.stderr), (float(lo), float(hi)), float(quantile), p.unit, name)


def worker_count() -> int:
    """Cores this process may use (for ``assess(..., workers=)``)."""
    import os

    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not Linux
        return os.cpu_count() or 1


class SpectraQuantifier:
    """``quantify(config) -> table`` over already processed and aligned spectra.

    Each spectrum is measured under the given config (the per-file step of the series:
    noise, region integrals with tracking, per-spectrum fits) and the series table is
    formed (global fits, concentrations) exactly as for the run itself; only the
    signals' windows, grouping and baseline order differ between calls, never the
    processing, so the spectra are processed once.

    Parameters
    ----------
    spectra : sequence of Spectrum
        Processed and aligned, in the order of ``measurements``.
    measurements : sequence of FileMeasurement
        The run's per-file records (times, hashes); their signals are replaced.
    reference_spectrum : Spectrum, optional
        The alignment reference (the run's first processed spectrum); default
        ``spectra[0]``.
    fits : mapping, optional
        The run's own series-wide fits from scratch on these spectra, keyed by
        :func:`kinetics.series.global_fit_key` (reused by variants that keep a group).
    """

    def __init__(self, spectra, measurements, reference_spectrum=None, fits=None):
        if len(spectra) != len(measurements):
            raise ValueError("one spectrum per measurement is needed")
        self.spectra = tuple(spectra)
        self.measurements = tuple(measurements)
        self.reference_spectrum = reference_spectrum if reference_spectrum is not None else self.spectra[0]
        #: series-wide fits from scratch already made on these spectra
        #: (:func:`kinetics.series.global_fit_key` -> fit): a variant that leaves a fit
        #: group's definitions alone reuses its fit (the same data give the same fit)
        self.fits = dict(fits or {})

    def __call__(self, config):
        from kinetics import series as se

        reference = se.reference_from_spectrum(self.reference_spectrum, self.reference_spectrum.source_path or "",
                                               config)
        measured = []
        for spectrum, base in zip(self.spectra, self.measurements):
            noise, results, windows = se.measure_spectrum(spectrum, config, reference)
            measured.append(replace(base, signals=results, fit_windows=windows, noise_sigma=noise.sigma))
        return se.series_table(measured, config, cache=self.fits)[0]


def reference_from_spectrum(spectrum, config):
    """The series' ``Reference`` (alignment target, centroids, fit-window sizes) of a processed spectrum."""
    from kinetics import series as se

    return se.reference_from_spectrum(spectrum, spectrum.source_path or "", config)


def processed_run(config, records=None, paths=None, reference=None):
    """Process and align every spectrum of the run once: (spectra, measurements, reference spectrum).

    ``paths`` (the files the run counted, in run order, the first being the reference
    unless ``reference`` is given) replaces listing the config's folder; ``records``
    (already read Spectrum/Fid records, each with its ``source_path``) replaces reading
    files.  ``reference`` (the run's :class:`kinetics.series.Reference`) aligns on a
    reference already made.  The measurements are the run's own
    (:func:`kinetics.series.measure_record`, the engine's per-file step).
    """
    from kinetics import series as se
    from kinetics.spectra.reader import read

    if records is not None:
        paths = [None] * len(records)
    elif paths is None:
        paths = se.list_files(config)
    records = list(records) if records is not None else None
    spectra, measurements = [], []
    for i, path in enumerate(paths):
        record = records[i] if records is not None else read(path)
        processed = se.process_record(record, config)
        if reference is None:
            reference = se.reference_from_spectrum(processed.spectrum, path or record.source_path or "", config)
        measurement = se.measure_record(path, record, processed, config, reference)
        spectra.append(measurement.spectrum)
        measurements.append(replace(measurement, spectrum=None))
    return spectra, measurements, reference.spectrum


def assess_files(config, fit: Callable | None = None, noise_share: float = NOISE_SHARE) -> SensitivityResult:
    """:func:`assess` from the config's folder (every file read and processed once)."""
    spectra, measurements, reference = processed_run(config)
    return assess(config, SpectraQuantifier(spectra, measurements, reference), fit or fitter_for(config),
                  noise_share=noise_share)
