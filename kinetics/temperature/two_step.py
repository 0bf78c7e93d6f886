"""Two-step activation parameters: a rate constant per run, then straight lines in 1/T.

``ln k`` on ``1/T`` (Arrhenius) gives ``Ea`` and ``A``; ``ln(k/T)`` on ``1/T`` (Eyring) gives
the enthalpy and entropy of activation and the free energy of activation at a chosen
temperature.  Weighted by ``1/sigma_lnk**2`` with ``sigma_lnk = k_stderr/k``; the interval
policy ("scatter" headline, "stated" beside it) is described in :mod:`kinetics.temperature`.
Also here: the physical constants (``scipy.constants``, CODATA), temperature units and the
input checks shared with the global fit (:mod:`kinetics.temperature.globalfit`).
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Sequence

import numpy as np
from scipy import constants, stats

from kinetics.errors import ConfigError, InputFileError
from kinetics.jsonio import parameter_dict

log = logging.getLogger(__name__)

GAS_CONSTANT_J_PER_MOL_K = constants.R
BOLTZMANN_J_PER_K = constants.k
PLANCK_J_S = constants.h
ZERO_CELSIUS_KELVIN = constants.zero_Celsius
TRANSMISSION_COEFFICIENT = 1.0
DEFAULT_REFERENCE_TEMPERATURE_KELVIN = 298.15

# A Celsius value this high is more likely a Kelvin value typed in the wrong column:
# solution NMR kinetics rarely goes above the boiling point of common solvents
# (common practice).  A Kelvin value this low is likely a Celsius value.
_SUSPICIOUS_CELSIUS = 200.0
_SUSPICIOUS_KELVIN = 150.0
_DUPLICATE_TOLERANCE_KELVIN = 0.005


def eyring_prefactor_per_s(temperature_kelvin):
    """``kappa * k_B * T / h`` in s^-1 (the universal frequency of transition-state theory)."""
    return TRANSMISSION_COEFFICIENT * BOLTZMANN_J_PER_K * np.asarray(temperature_kelvin, float) / PLANCK_J_S


# ---------------------------------------------------------------- records
@dataclass(frozen=True)
class Estimate:
    """One derived quantity with its standard error and 95 % interval.

    ``ci95`` may be asymmetric (``A`` and ``k`` are exponentials of a symmetric interval).
    """

    value: float
    stderr: float
    ci95: tuple[float, float]
    unit: str

    def to_dict(self) -> dict[str, Any]:
        return parameter_dict(self.value, self.stderr, self.ci95, self.unit)

    def __str__(self) -> str:
        return f"{self.value:.6g} ± {self.stderr:.2g} [{self.ci95[0]:.6g}, {self.ci95[1]:.6g}] {self.unit}"


@dataclass(frozen=True)
class LineFit:
    """A weighted straight line ``y = intercept + slope * x``.

    ``covariance_stated`` is ``(X^T W X)^-1`` with ``W = 1/sigma**2``; multiply by
    ``reduced_chi2`` for the scatter-based covariance.  Parameter order: intercept, slope.
    """

    intercept: float
    slope: float
    covariance_stated: np.ndarray  # (2, 2)
    chi2: float
    n_points: int

    @property
    def dof(self) -> int:
        return self.n_points - 2

    @property
    def reduced_chi2(self) -> float:
        return self.chi2 / self.dof if self.dof > 0 else float("nan")

    @property
    def chi2_p_value(self) -> float:
        """Probability of a chi-square this large if the stated errors were right."""
        return float(stats.chi2.sf(self.chi2, self.dof)) if self.dof > 0 else float("nan")

    def covariance(self, basis: str) -> np.ndarray:
        if basis == "scatter":
            return self.covariance_stated * self.reduced_chi2
        return self.covariance_stated

    def predict(self, x, basis: str) -> tuple[np.ndarray, np.ndarray]:
        """Line value and its standard error at ``x`` (shape (m,) or scalar)."""
        x = np.asarray(x, float)
        cov = self.covariance(basis)
        y = self.intercept + self.slope * x
        var = cov[0, 0] + 2 * x * cov[0, 1] + x**2 * cov[1, 1]
        return y, np.sqrt(var)

    def band95(self, x, basis: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Line value at ``x`` and its two-sided 95 % band ``(value, low, high)``: value ±
        q * standard error, q from :func:`quantile95` (Student t with ``dof`` degrees of
        freedom on the scatter basis, normal on stated errors)."""
        value, stderr = self.predict(x, basis)
        q = quantile95(basis, self.dof)
        return value, value - q * stderr, value + q * stderr


def quantile95(basis: str, dof: int) -> float:
    """Two-sided 95 % multiplier: Student t for the scatter basis, normal for stated errors."""
    if basis == "scatter":
        return float(stats.t.ppf(0.975, dof))
    return float(stats.norm.ppf(0.975))


def _fit_line(x: np.ndarray, y: np.ndarray, sigma: np.ndarray) -> LineFit:
    # Centre x before solving: 1/T values sit near 3e-3 with a spread of ~3e-4, and the
    # uncentred normal equations lose digits; the transform back is exact.
    w = 1.0 / sigma**2
    x_centre = float(np.sum(w * x) / np.sum(w))
    design = np.column_stack([np.ones_like(x), x - x_centre]) / sigma[:, None]
    coef, *_ = np.linalg.lstsq(design, y / sigma, rcond=None)
    cov_centred = np.linalg.inv(design.T @ design)
    transform = np.array([[1.0, -x_centre], [0.0, 1.0]])
    cov = transform @ cov_centred @ transform.T
    intercept = coef[0] - coef[1] * x_centre
    chi2 = float(np.sum(((y - intercept - coef[1] * x) / sigma) ** 2))
    return LineFit(float(intercept), float(coef[1]), cov, chi2, len(x))


@dataclass(frozen=True)
class TemperatureResult:
    """Arrhenius and Eyring parameters from (temperature, k, k stderr) runs.

    Attributes
    ----------
    temperature_kelvin, k, k_stderr : tuple of float, length n_runs
        The runs as used.  ``k_stderr`` is None when none were given (equal relative
        weights; only the scatter basis exists then).
    labels : tuple of str
    arrhenius, eyring : LineFit
        ``ln k`` on ``1/T`` and ``ln(k/T)`` on ``1/T``.
    basis : str
        ``"scatter"`` or ``"stated"``: what the headline intervals use (module docstring).
    reference_temperature_kelvin : float
        Where dG‡ is evaluated.
    k_unit : str
    warnings : tuple of str
        Every doubt about the input, with its reason (also logged).
    """

    temperature_kelvin: tuple[float, ...]
    k: tuple[float, ...]
    k_stderr: tuple[float, ...] | None
    labels: tuple[str, ...]
    arrhenius: LineFit
    eyring: LineFit
    basis: str
    reference_temperature_kelvin: float = DEFAULT_REFERENCE_TEMPERATURE_KELVIN
    k_unit: str = "s^-1"
    warnings: tuple[str, ...] = ()
    transmission_coefficient: float = TRANSMISSION_COEFFICIENT

    @property
    def n_runs(self) -> int:
        return len(self.temperature_kelvin)

    @property
    def succeeded(self) -> bool:
        return bool(np.all(np.isfinite(self.arrhenius.covariance(self.basis))))

    @property
    def mean_temperature_kelvin(self) -> float:
        """Weighted harmonic mean temperature: the centre of the Arrhenius line in 1/T."""
        w = 1.0 / np.asarray(self._sigma_lnk()) ** 2
        return float(np.sum(w) / np.sum(w / np.asarray(self.temperature_kelvin)))

    def _sigma_lnk(self) -> np.ndarray:
        if self.k_stderr is None:
            return np.ones(self.n_runs)
        return np.asarray(self.k_stderr) / np.asarray(self.k)

    def _q(self, basis: str) -> float:
        return quantile95(basis, self.arrhenius.dof)

    def _check_basis(self, basis: str | None) -> str:
        basis = basis or self.basis
        if basis not in ("scatter", "stated"):
            raise ConfigError("basis", f"unknown interval basis {basis!r}", "use 'scatter' or 'stated'")
        if basis == "stated" and self.k_stderr is None:
            raise ConfigError("k_stderr", "no stated stderrs were given", "use basis='scatter'")
        if basis == "scatter" and self.arrhenius.dof < 1:
            raise ConfigError("basis", "two runs leave no scatter to scale by", "use basis='stated'")
        return basis

    # -- Arrhenius
    def ea(self, basis: str | None = None) -> Estimate:
        """Activation energy in kJ/mol: ``Ea = -R * slope``."""
        basis = self._check_basis(basis)
        scale = -GAS_CONSTANT_J_PER_MOL_K / 1e3
        value = scale * self.arrhenius.slope
        se = abs(scale) * math.sqrt(self.arrhenius.covariance(basis)[1, 1])
        q = self._q(basis)
        return Estimate(value, se, (value - q * se, value + q * se), "kJ/mol")

    def ln_a(self, basis: str | None = None) -> Estimate:
        """Natural log of the pre-exponential factor (A in ``k_unit``)."""
        basis = self._check_basis(basis)
        value = self.arrhenius.intercept
        se = math.sqrt(self.arrhenius.covariance(basis)[0, 0])
        q = self._q(basis)
        return Estimate(value, se, (value - q * se, value + q * se), f"ln({self.k_unit})")

    def a(self, basis: str | None = None) -> Estimate:
        """Pre-exponential factor; stderr by the delta method, interval = exp(ln A interval)."""
        ln_a = self.ln_a(basis)
        value = math.exp(ln_a.value)
        return Estimate(value, value * ln_a.stderr, (math.exp(ln_a.ci95[0]), math.exp(ln_a.ci95[1])), self.k_unit)

    def predict_k(self, temperature_kelvin: float, basis: str | None = None) -> Estimate:
        """Rate constant at a new temperature from the Arrhenius line, with a 95 % interval.

        The interval is exp(ln k ± q * se(ln k)); the stderr is the delta-method one.
        Extrapolating far outside the measured range makes the interval honest but wide.
        """
        basis = self._check_basis(basis)
        if not temperature_kelvin > 0:
            raise ConfigError("temperature_kelvin", f"{temperature_kelvin} K is not above absolute zero")
        ln_k, se = self.arrhenius.predict(1.0 / temperature_kelvin, basis)
        q = self._q(basis)
        value = float(np.exp(ln_k))
        return Estimate(value, value * float(se), (float(np.exp(ln_k - q * se)), float(np.exp(ln_k + q * se))), self.k_unit)

    # -- Eyring
    def dh(self, basis: str | None = None) -> Estimate:
        """Enthalpy of activation in kJ/mol: ``dH‡ = -R * slope`` of ln(k/T) on 1/T."""
        basis = self._check_basis(basis)
        scale = -GAS_CONSTANT_J_PER_MOL_K / 1e3
        value = scale * self.eyring.slope
        se = abs(scale) * math.sqrt(self.eyring.covariance(basis)[1, 1])
        q = self._q(basis)
        return Estimate(value, se, (value - q * se, value + q * se), "kJ/mol")

    def ds(self, basis: str | None = None) -> Estimate:
        """Entropy of activation in J/(mol K): ``dS‡ = R * (intercept - ln(kappa k_B / h))``."""
        basis = self._check_basis(basis)
        offset = math.log(self.transmission_coefficient * BOLTZMANN_J_PER_K / PLANCK_J_S)
        value = GAS_CONSTANT_J_PER_MOL_K * (self.eyring.intercept - offset)
        se = GAS_CONSTANT_J_PER_MOL_K * math.sqrt(self.eyring.covariance(basis)[0, 0])
        q = self._q(basis)
        return Estimate(value, se, (value - q * se, value + q * se), "J/(mol K)")

    def dg(self, temperature_kelvin: float | None = None, basis: str | None = None) -> Estimate:
        """Free energy of activation ``dG‡ = dH‡ - T dS‡`` in kJ/mol at ``temperature_kelvin``.

        The stderr uses the full covariance of dH‡ and dS‡ (they are strongly correlated,
        so adding their errors in quadrature would overstate it badly).
        """
        basis = self._check_basis(basis)
        t = self.reference_temperature_kelvin if temperature_kelvin is None else float(temperature_kelvin)
        r = GAS_CONSTANT_J_PER_MOL_K
        # dG = -R*slope - T*R*(intercept - offset) = c - R*T*intercept - R*slope, in J/mol.
        gradient = np.array([-r * t, -r]) / 1e3  # d(dG)/d(intercept, slope) in kJ/mol
        value = self.dh(basis).value - t * self.ds(basis).value / 1e3
        se = math.sqrt(float(gradient @ self.eyring.covariance(basis) @ gradient))
        q = self._q(basis)
        return Estimate(value, se, (value - q * se, value + q * se), "kJ/mol")

    # -- output
    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary (the keys of ``kinetics arrhenius --json``)."""
        out: dict[str, Any] = {
            "ea_kj_per_mol": self.ea().to_dict(),
            "ln_a": self.ln_a().to_dict(),
            "a_per_s" if self.k_unit == "s^-1" else "a": self.a().to_dict(),
            "dh_kj_per_mol": self.dh().to_dict(),
            "ds_j_per_mol_k": self.ds().to_dict(),
            "dg_kj_per_mol": self.dg().to_dict(),
            "n_runs": self.n_runs,
            "t_ref_kelvin": self.reference_temperature_kelvin,
            "mean_temperature_kelvin": self.mean_temperature_kelvin,
            "k_unit": self.k_unit,
            "interval_basis": self.basis,
            "interval_method": self.interval_method(),
            "transmission_coefficient": self.transmission_coefficient,
            "arrhenius_reduced_chi2": self.arrhenius.reduced_chi2,
            "arrhenius_chi2_p_value": self.arrhenius.chi2_p_value,
            "dof": self.arrhenius.dof,
            "runs": [
                {
                    "label": label,
                    "temperature_kelvin": t,
                    "k": k,
                    "k_stderr": None if self.k_stderr is None else self.k_stderr[i],
                }
                for i, (label, t, k) in enumerate(zip(self.labels, self.temperature_kelvin, self.k))
            ],
            "warnings": list(self.warnings),
        }
        other = "stated" if self.basis == "scatter" else "scatter"
        try:
            out[f"{other}_basis"] = {
                "ea_kj_per_mol": self.ea(other).to_dict(),
                "ln_a": self.ln_a(other).to_dict(),
                "dh_kj_per_mol": self.dh(other).to_dict(),
                "ds_j_per_mol_k": self.ds(other).to_dict(),
                "dg_kj_per_mol": self.dg(basis=other).to_dict(),
            }
        except ConfigError:
            out[f"{other}_basis"] = None
        return out

    def interval_method(self, basis: str | None = None) -> str:
        basis = basis or self.basis
        if basis == "scatter":
            return (
                "weighted least squares (sigma_lnk = k_stderr/k), covariance scaled by the "
                f"reduced chi-square, Student t with {self.arrhenius.dof} dof"
            )
        return "weighted least squares, covariance from the stated k stderrs, normal quantile 1.96"

    def table(self):
        """Per-run Arrhenius/Eyring table (pandas DataFrame) for CSV output and plots."""
        import pandas as pd

        t = np.asarray(self.temperature_kelvin)
        k = np.asarray(self.k)
        fitted_ln_k, _ = self.arrhenius.predict(1.0 / t, self.basis)
        return pd.DataFrame(
            {
                "label": list(self.labels),
                "temperature_kelvin": t,
                "temperature_c": t - ZERO_CELSIUS_KELVIN,
                "inverse_temperature_per_k": 1.0 / t,
                "k": k,
                "k_stderr": np.full(len(t), np.nan) if self.k_stderr is None else np.asarray(self.k_stderr),
                "ln_k": np.log(k),
                "sigma_ln_k": self._sigma_lnk() if self.k_stderr is not None else np.nan,
                "ln_k_over_t": np.log(k / t),
                "ln_k_fitted": fitted_ln_k,
                "ln_k_residual": np.log(k) - fitted_ln_k,
            }
        )

    def report(self) -> str:
        """Readable multi-line summary with every assumption stated."""
        lines = [
            f"Arrhenius / Eyring analysis of {self.n_runs} runs "
            f"({min(self.temperature_kelvin):.2f}-{max(self.temperature_kelvin):.2f} K), k in {self.k_unit}",
            f"  intervals: {self.interval_method()}",
            f"  Ea          {self.ea()}",
            f"  ln A        {self.ln_a()}",
            f"  A           {self.a()}",
            f"  dH‡         {self.dh()}",
            f"  dS‡         {self.ds()}",
            f"  dG‡({self.reference_temperature_kelvin:.2f} K) {self.dg()}",
            f"  transmission coefficient {self.transmission_coefficient:g} (assumed); "
            "R, k_B, h from scipy.constants (CODATA)",
        ]
        if self.k_unit != "s^-1":
            lines.append("  dS‡ and dG‡ refer to a 1 mol/L standard state")
        if self.arrhenius.dof > 0:
            lines.append(
                f"  Arrhenius reduced chi-square {self.arrhenius.reduced_chi2:.3g} "
                f"(p = {self.arrhenius.chi2_p_value:.3g} that scatter this large comes from the stated errors)"
            )
        if self.k_stderr is not None and self.arrhenius.dof > 0:
            other = "stated" if self.basis == "scatter" else "scatter"
            lines.append(f"  with {other}-basis intervals: Ea {self.ea(other)}; dG‡ {self.dg(basis=other)}")
        for warning in self.warnings:
            lines.append(f"  warning: {warning}")
        return "\n".join(lines)


# ---------------------------------------------------------------- input checks
def to_kelvin(values, unit: str, labels: Sequence[str] | None = None) -> tuple[np.ndarray, list[str]]:
    """Temperatures in kelvin from Celsius (``unit="c"``) or kelvin (``"k"``) values.

    Returns
    -------
    temperature_kelvin : ndarray, shape (n,)
    warnings : list of str
        Values that look like the wrong unit (a Celsius value >= 200, a kelvin value < 150).

    Raises
    ------
    ConfigError
        A value that is not finite or is at or below absolute zero.
    """
    unit = unit.lower()
    if unit not in ("c", "k"):
        raise ConfigError("temperature unit", f"unknown unit {unit!r}", "use 'c' (degrees Celsius) or 'k' (kelvin)")
    values = np.asarray(values, dtype=float).reshape(-1)
    labels = list(labels) if labels is not None else [f"run {i + 1}" for i in range(len(values))]
    key = "temperature_c" if unit == "c" else "temperature_kelvin"
    kelvin = values + ZERO_CELSIUS_KELVIN if unit == "c" else values.copy()
    warnings = []
    for label, value, t in zip(labels, values, kelvin):
        if not np.isfinite(value):
            raise ConfigError(f"{label}.{key}", f"temperature {value} is not a number")
        if t <= 0:
            raise ConfigError(
                f"{label}.{key}",
                f"{value:g} {'°C' if unit == 'c' else 'K'} is at or below absolute zero",
                "check the unit: temperature_c is degrees Celsius, temperature_kelvin is kelvin",
            )
        if unit == "c" and value >= _SUSPICIOUS_CELSIUS:
            warnings.append(
                f"{label}: {value:g} °C looks like a kelvin value given as Celsius "
                f"(it would be {t:.2f} K); if so, give it as temperature_kelvin"
            )
        if unit == "k" and t < _SUSPICIOUS_KELVIN:
            warnings.append(
                f"{label}: {value:g} K looks like a Celsius value given as kelvin; "
                "if so, give it as temperature_c"
            )
    return kelvin, warnings


def _check_runs(temperature_kelvin, k, k_stderr, labels) -> tuple[np.ndarray, np.ndarray, np.ndarray | None, list[str]]:
    t = np.asarray(temperature_kelvin, dtype=float).reshape(-1)
    k = np.asarray(k, dtype=float).reshape(-1)
    warnings: list[str] = []
    if len(t) != len(k):
        raise ConfigError("k", f"{len(k)} rate constants for {len(t)} temperatures")
    if len(t) < 2:
        raise ConfigError("runs", f"{len(t)} run(s) given; an Arrhenius line needs at least 2 (3 or more to get intervals from the scatter)")
    for label, value, kv in zip(labels, t, k):
        if not (np.isfinite(value) and value > 0):
            raise ConfigError(f"{label}.temperature_kelvin", f"{value} K is not a temperature above absolute zero")
        if not (np.isfinite(kv) and kv > 0):
            raise ConfigError(f"{label}.k", f"rate constant {kv} is not positive; ln k is undefined",
                              "drop the run or fix its fit")
    se = None
    if k_stderr is not None:
        se = np.asarray(k_stderr, dtype=float).reshape(-1)
        if len(se) != len(k):
            raise ConfigError("k_stderr", f"{len(se)} stderrs for {len(k)} rate constants")
        for label, sv, kv in zip(labels, se, k):
            if not (np.isfinite(sv) and sv > 0):
                raise ConfigError(f"{label}.k_stderr", f"stderr {sv} is not positive",
                                  "a run without a usable stderr cannot be weighted; refit it or leave out every stderr")
            if sv / kv > 0.5:
                warnings.append(f"{label}: k stderr is {100 * sv / kv:.0f} % of k; "
                                "the log-linear weights (sigma_lnk = stderr/k) are crude at that size")
    order = np.argsort(t)
    for i, j in zip(order[:-1], order[1:]):
        if abs(t[i] - t[j]) < _DUPLICATE_TOLERANCE_KELVIN:
            same_k = k[i] == k[j] and (se is None or se[i] == se[j])
            if same_k:
                raise ConfigError("runs", f"{labels[i]} and {labels[j]} are the same run listed twice "
                                  f"({t[i]:.2f} K, k = {k[i]:g})", "remove one of them")
            warnings.append(f"{labels[i]} and {labels[j]} share the temperature {t[i]:.2f} K; "
                            "they are kept as replicate points")
    if np.ptp(t) < _DUPLICATE_TOLERANCE_KELVIN:
        raise ConfigError("runs", "all runs are at the same temperature; there is no slope to fit",
                          "measure at two or more temperatures")
    if len(t) == 2:
        warnings.append("only 2 runs: the line passes through both points, so the intervals rest "
                        "entirely on the stated k stderrs (3 or more runs are recommended)")
    return t, k, se, warnings


def analyse_temperatures(
    temperature_kelvin,
    k,
    k_stderr=None,
    *,
    labels: Sequence[str] | None = None,
    reference_temperature_kelvin: float = DEFAULT_REFERENCE_TEMPERATURE_KELVIN,
    basis: str = "scatter",
    k_unit: str = "s^-1",
    extra_warnings: Sequence[str] = (),
) -> TemperatureResult:
    """Two-step Arrhenius and Eyring analysis.

    Parameters
    ----------
    temperature_kelvin : array_like, shape (n,)
        Run temperatures in K (use :func:`to_kelvin` for Celsius input).
    k : array_like, shape (n,)
        Rate constants, positive, in ``k_unit``.
    k_stderr : array_like, shape (n,), optional
        Standard errors of ``k``.  Without them every run gets the same weight in ln k and
        only the scatter basis is available.
    labels : sequence of str, optional
        Run names for messages.
    reference_temperature_kelvin : float
        Where dG‡ is evaluated (default 298.15 K).
    basis : {"scatter", "stated"}
        Headline intervals (module docstring); with two runs "stated" is forced.

    Returns
    -------
    TemperatureResult

    Raises
    ------
    ConfigError
        Fewer than two runs, a non-positive k or stderr, a temperature at or below 0 K,
        the same run listed twice, or all runs at one temperature.
    """
    labels = list(labels) if labels is not None else [f"run {i + 1}" for i in range(len(np.atleast_1d(k)))]
    t, k, se, warnings = _check_runs(temperature_kelvin, k, k_stderr, labels)
    warnings = list(extra_warnings) + warnings
    if not reference_temperature_kelvin > 0:
        raise ConfigError("reference_temperature_kelvin", f"{reference_temperature_kelvin} K is not above absolute zero")
    if basis not in ("scatter", "stated"):
        raise ConfigError("basis", f"unknown interval basis {basis!r}", "use 'scatter' or 'stated'")
    if len(t) == 2:
        if se is None:
            raise ConfigError("k_stderr", "two runs without stderrs give no interval at all",
                              "give k_stderr for each run or measure a third temperature")
        basis = "stated"
    if basis == "stated" and se is None:
        raise ConfigError("basis", "'stated' intervals need k stderrs", "give k_stderr or use basis='scatter'")
    sigma_lnk = se / k if se is not None else np.ones_like(k)
    x = 1.0 / t
    arrhenius = _fit_line(x, np.log(k), sigma_lnk)
    eyring = _fit_line(x, np.log(k / t), sigma_lnk)
    if basis == "scatter" and arrhenius.dof > 0 and not arrhenius.reduced_chi2 > 1e-12:
        warnings.append("the runs lie on the Arrhenius line to rounding error: the scatter-based intervals "
                        "are (near) zero width and mean nothing; use the stated basis")
    lo, hi = t.min(), t.max()
    if not lo <= reference_temperature_kelvin <= hi:
        warnings.append(f"dG‡ is evaluated at {reference_temperature_kelvin:.2f} K, outside the measured "
                        f"{lo:.2f}-{hi:.2f} K: an extrapolation")
    for warning in warnings:
        log.warning(warning)
    return TemperatureResult(
        temperature_kelvin=tuple(float(v) for v in t),
        k=tuple(float(v) for v in k),
        k_stderr=None if se is None else tuple(float(v) for v in se),
        labels=tuple(labels),
        arrhenius=arrhenius,
        eyring=eyring,
        basis=basis,
        reference_temperature_kelvin=float(reference_temperature_kelvin),
        k_unit=k_unit,
        warnings=tuple(warnings),
    )


def read_arrhenius_table(path: str | Path):
    """Read a delimited table of runs: ``temperature_c`` or ``temperature_kelvin``, ``k``, ``k_stderr``.

    An optional ``label`` column names the runs; ``#`` lines are comments; the delimiter
    (comma, tab, semicolon) is detected from the header.  Returns
    ``(temperature_kelvin, k, k_stderr, labels, warnings)``.

    Raises
    ------
    InputFileError
        A missing/unreadable file, missing columns, both temperature columns, a row with
        the wrong number of cells or a cell that is not a usable number (naming the line).
    """
    from kinetics.rates.table import read_rows

    path = Path(path)
    header, rows, lines, header_line = read_rows(path)
    has_c, has_k = "temperature_c" in header, "temperature_kelvin" in header
    if has_c == has_k:
        raise InputFileError(path, "needs exactly one of the columns temperature_c, temperature_kelvin",
                             line=header_line, hint=f"found columns: {', '.join(header)}")
    for column in ("k", "k_stderr"):
        if column not in header:
            raise InputFileError(path, f"missing column '{column}'", line=header_line,
                                 hint=f"found columns: {', '.join(header)}")
    if not rows:
        raise InputFileError(path, "no data rows", hint="one row per run: temperature, k, k_stderr")
    for row, line in zip(rows, lines):
        if len(row) != len(header):
            raise InputFileError(path, f"{len(row)} cells but the header has {len(header)}", line=line)
    t_column = "temperature_c" if has_c else "temperature_kelvin"
    index = {name: header.index(name) for name in header}
    labels = ([row[index["label"]].strip() or f"line {line}" for row, line in zip(rows, lines)]
              if "label" in index else [f"line {line}" for line in lines])
    numbers = {}
    for column in (t_column, "k", "k_stderr"):
        values = []
        for row, line in zip(rows, lines):
            text = row[index[column]].strip()
            try:
                value = float(text)
            except ValueError:
                value = math.nan
            if not math.isfinite(value):
                raise InputFileError(path, f"column '{column}' holds {text!r}, not a finite number", line=line,
                                     hint="every run needs a numeric temperature, k and k_stderr")
            if column != t_column and value <= 0:
                raise InputFileError(path, f"column '{column}' value {value:g} is not positive", line=line,
                                     hint="ln k needs k > 0 and weights need k_stderr > 0")
            kelvin = value + ZERO_CELSIUS_KELVIN if column == "temperature_c" else value
            if column == t_column and kelvin <= 0:
                raise InputFileError(path, f"{t_column} {value:g} is at or below absolute zero", line=line,
                                     hint="check the unit of the column")
            values.append(value)
        numbers[column] = np.array(values)
    kelvin, warnings = to_kelvin(numbers[t_column], "c" if has_c else "k", labels)
    return kelvin, numbers["k"], numbers["k_stderr"], labels, warnings


