"""Activation parameters from runs at several temperatures: Arrhenius, Eyring, global fits.

Two routes to the same numbers:

* **Two-step** (:func:`analyse_temperatures`): each run gives a rate constant ``k`` with a
  standard error; a weighted straight line of ``ln k`` on ``1/T`` gives the activation
  energy ``Ea`` and the pre-exponential factor ``A`` (Arrhenius 1889), and a line of
  ``ln(k/T)`` on ``1/T`` gives the enthalpy and entropy of activation (Eyring 1935;
  Evans & Polanyi 1935) and the free energy of activation at a chosen temperature.
* **Global** (:func:`global_fit`): the rate law is fitted to every concentration point
  of every run at once, with ``k(T) = k_ref * exp(-(Ea/R) * (1/T - 1/T_ref))``, the
  reference-temperature form that nearly decorrelates ``Ea`` and ``k_ref``
  (Schwaab & Pinto 2007), with per-run nuisance parameters (initial or final
  concentration).

Interval policy (stated in every result)
-----------------------------------------
The weights of the two-step lines are ``1/sigma_lnk**2`` with ``sigma_lnk = k_stderr/k``
(first-order propagation of the relative error of ``k``).  Two sets of intervals exist:

``"scatter"`` (the default and the headline numbers)
    covariance scaled by the reduced chi-square of the line, Student t quantile with
    ``n - 2`` degrees of freedom.  Exact when the stated stderrs are right *up to a common
    factor*; per-run stderrs are themselves estimates, so this is the safer choice.
``"stated"``
    covariance from the stated stderrs alone, normal quantile (1.96).  Exact when the
    stated stderrs are right.  Always reported beside the headline numbers, with the
    chi-square p-value that says whether the scatter agrees with the stated errors.

With only two runs there is no scatter to scale by: the stated basis is used and a
warning says so.  The global fit always scales by its reduced chi-square (hundreds of
points, so the estimate of the noise is good) and uses t with ``N - p`` degrees of freedom.

Constants ``R``, ``k_B`` and ``h`` come from ``scipy.constants`` (CODATA); the
transmission coefficient of transition-state theory is taken as 1.  For rate constants
not in s^-1 (second order, L mol^-1 s^-1), dS‡ and dG‡ refer to a 1 mol/L standard state.

Which k: the per-run constants are those of :mod:`kinetics.rates.laws`.  For ``2 A -> P``
(model ``second``) that is the rate-of-loss constant, ``-d[A]/dt = k [A]^2``, twice the
IUPAC constant of the rate of reaction (``r = k_IUPAC [A]^2``, ``d[A]/dt = -2 r``).  Ea and
dH‡ do not depend on the choice; ln A and dS‡ do: from the loss-of-A constant they are
larger by ln 2 and by R ln 2 = 5.76 J/(mol K) (dG‡ smaller by R T ln 2).  Every other
law's k is the same in both conventions.
"""

from __future__ import annotations

import inspect
import logging
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Mapping, Sequence

import numpy as np
from scipy import constants, optimize, stats

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
# Finite-difference steps relative to each parameter (scipy's default step is absolute
# below |x| = 1, too coarse for concentrations of 1e-4 mol/L).
_RELATIVE_STEP = float(np.sqrt(np.finfo(float).eps))


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


# ---------------------------------------------------------------- global fit
@dataclass(frozen=True, eq=False)
class KineticRun:
    """One run's concentration data and its temperature.

    Attributes
    ----------
    label : str
    temperature_kelvin : float
    time_s : ndarray, shape (m,)
    concentration_mol_per_l : ndarray, shape (m,)
    sigma_mol_per_l : ndarray, shape (m,), or None
        Per-point standard deviations; None for equal weights.
    """

    label: str
    temperature_kelvin: float
    time_s: np.ndarray
    concentration_mol_per_l: np.ndarray
    sigma_mol_per_l: np.ndarray | None = None

    def __post_init__(self):
        t = np.asarray(self.time_s, float)
        c = np.asarray(self.concentration_mol_per_l, float)
        if t.shape != c.shape or t.ndim != 1:
            raise ConfigError(f"{self.label}.time_s", f"time ({t.shape}) and concentration ({c.shape}) shapes differ")
        finite = np.isfinite(t) & np.isfinite(c)
        if finite.sum() < 3:
            raise ConfigError(f"{self.label}", "fewer than 3 finite (time, concentration) points")
        if not self.temperature_kelvin > 0:
            raise ConfigError(f"{self.label}.temperature_kelvin", f"{self.temperature_kelvin} K is not above absolute zero")
        s = None
        if self.sigma_mol_per_l is not None:
            s = np.asarray(self.sigma_mol_per_l, float)
            if s.shape != c.shape:
                raise ConfigError(f"{self.label}.sigma", "sigma and concentration shapes differ")
            finite &= np.isfinite(s)
            if np.any(s[finite] <= 0):
                raise ConfigError(f"{self.label}.sigma", "a sigma is not positive")
            s = s[finite]
        object.__setattr__(self, "time_s", t[finite])
        object.__setattr__(self, "concentration_mol_per_l", c[finite])
        object.__setattr__(self, "sigma_mol_per_l", s)
        for name in ("time_s", "concentration_mol_per_l", "sigma_mol_per_l"):
            value = getattr(self, name)
            if value is not None:
                value.setflags(write=False)


@dataclass(frozen=True)
class GlobalModel:
    """A rate law ``function(t, k, **nuisance)`` usable in the global fit.

    Attributes
    ----------
    name : str
    function : callable
        ``function(time_s, k, **params) -> concentration``, shapes (m,) -> (m,).
    nuisance : tuple of str
        Per-run parameters (``c0``, ``c_final``, ...), fitted separately for every run.
    guess : callable
        ``guess(time_s, concentration) -> dict`` of starting nuisance values (and,
        optionally, ``"k"``, a start for the rate constant).
    jacobian : callable or None
        ``jacobian(time_s, k, **params) -> dict`` of partial derivatives with keys
        ``"k"`` and every nuisance name; None for finite differences.
    k_unit : str
    """

    name: str
    function: Callable[..., np.ndarray]
    nuisance: tuple[str, ...]
    guess: Callable[[np.ndarray, np.ndarray], dict]
    jacobian: Callable[..., dict] | None = None
    k_unit: str = "s^-1"
    rate_constant: str = "k"
    observed: str = "reactant"
    law: str | None = None  # the kinetics.rates registry name, when there is one


def _first(t, k, c0):
    """First order, reactant observed: ``c = c0 * exp(-k t)``."""
    return c0 * np.exp(-k * t)


def _first_jac(t, k, c0):
    e = np.exp(-k * t)
    return {"k": -t * c0 * e, "c0": e}


def _first_product(t, k, c_final):
    """First order, product observed (none at t=0): ``c = c_final * (1 - exp(-k t))``."""
    return c_final * -np.expm1(-k * t)


def _first_product_jac(t, k, c_final):
    e = np.exp(-k * t)
    return {"k": c_final * t * e, "c_final": -np.expm1(-k * t)}


def _second(t, k, c0):
    """Second order in one reactant (2A -> P, rate k c^2): ``c = c0 / (1 + k c0 t)``."""
    return c0 / (1.0 + k * c0 * t)


def _second_jac(t, k, c0):
    d = 1.0 + k * c0 * t
    return {"k": -(c0**2) * t / d**2, "c0": 1.0 / d**2}


# The three commonest laws carry analytic Jacobians (fast enough for calibration loops);
# they are the same formulas as kinetics.rates.laws first_order, first_order_formation and
# second_order, with the same parameter names.  Every other registry law goes through
# :func:`rates_model` with finite differences.
BUILTIN_MODELS: dict[str, GlobalModel] = {
    "first": GlobalModel("first", _first, ("c0",), lambda t, c: {"c0": float(c[np.argmin(t)])}, _first_jac,
                          law="first"),
    "first-product": GlobalModel(
        "first-product", _first_product, ("c_final",), lambda t, c: {"c_final": float(c[np.argmax(t)])},
        _first_product_jac, observed="product", law="first",
    ),
    "second": GlobalModel(
        "second", _second, ("c0",), lambda t, c: {"c0": float(c[np.argmin(t)])}, _second_jac, k_unit="L mol^-1 s^-1",
        law="second"
    ),
}


def model_from_function(function: Callable, name: str | None = None, guess=None, k_unit: str = "s^-1") -> GlobalModel:
    """Wrap any ``f(t, k, **params)`` (e.g. a rate law from ``kinetics.rates``) as a GlobalModel.

    The nuisance names are ``f``'s parameters after ``t`` and ``k``.  Without ``guess``,
    names starting ``c0``/``a0`` start at the first concentration and all others at the last.
    """
    params = list(inspect.signature(function).parameters)
    if len(params) < 2:
        raise ConfigError("model", f"{function!r} must take (t, k, ...)")
    nuisance = tuple(params[2:])

    def default_guess(t, c):
        first, last = float(c[np.argmin(t)]), float(c[np.argmax(t)])
        return {p: (first if p.lower().startswith(("c0", "a0")) else last) for p in nuisance}

    return GlobalModel(name or getattr(function, "__name__", "model"), function, nuisance, guess or default_guess, None, k_unit)


_FAST_PATH = {("first", "reactant"): "first", ("first", "product"): "first-product", ("second", "reactant"): "second"}
_RATE_CONSTANT_NAMES = ("k", "k_obs")


def rates_model(name: str, observed: str = "reactant") -> GlobalModel:
    """A law from the ``kinetics.rates`` registry as a GlobalModel.

    Usable when the law has one rate constant (``k`` or ``k_obs``) and its other free
    parameters are concentrations (per-run nuisance): zero, first, second, second-mixed,
    pseudo-first (``k_obs`` then follows Arrhenius only if the excess reagent's
    concentration is the same in every run).  ``nth`` (a shared order), ``reversible-first``
    and ``consecutive`` (two rate constants, each with its own Ea) are refused.
    """
    if (name, observed) in _FAST_PATH:
        return BUILTIN_MODELS[_FAST_PATH[(name, observed)]]
    try:
        from kinetics.rates.laws import CONC_UNIT, get_model
    except ImportError:  # pragma: no cover - the rates package ships with kinetics
        raise ConfigError("model", f"rate law {name!r} needs kinetics.rates, which is not installed") from None
    law = get_model(name, observed)
    if len(law.species) != 1:
        raise ConfigError("observed", f"the global temperature fit takes one observed series, not {law.species}")
    rate = [p for p in law.params if p.vary and p.name in _RATE_CONSTANT_NAMES]
    others = [p for p in law.params if p.vary and p.name not in _RATE_CONSTANT_NAMES]
    if len(rate) != 1 or any(p.unit != CONC_UNIT for p in others):
        shared = ", ".join(p.name for p in law.params if p.vary)
        raise ConfigError("model", f"{name!r} ({shared}) does not have a single rate constant with per-run "
                          "concentrations, which the global Arrhenius fit needs",
                          "fit the runs one by one and use the two-step analysis")
    rate_name = rate[0].name
    nuisance = tuple(p.name for p in others)
    fixed = tuple(p.name for p in law.params if not p.vary)

    def function(t, k, **params):
        values = {p: float("nan") for p in fixed}
        values.update(params)
        values[rate_name] = k
        return law.predict(np.asarray(t, float), values)[0]

    def guess(t, c):
        start = law.guess(np.asarray(t, float), np.asarray(c, float)[None, :])
        out = {p: float(start[p]) for p in nuisance}
        out["k"] = float(start[rate_name])  # the registry's own start for the rate constant
        return out

    return GlobalModel(f"{name} ({observed})", function, nuisance, guess, None, rate[0].unit, rate_name, observed,
                       name)


def resolve_model(model: str | GlobalModel | Callable, observed: str = "reactant") -> GlobalModel:
    """A GlobalModel from a name, a GlobalModel, or a plain ``f(t, k, **params)``.

    Names: the built-ins (``first``, ``first-product``, ``second``) and every
    ``kinetics.rates`` registry law that :func:`rates_model` accepts, with ``observed``.
    """
    if isinstance(model, GlobalModel):
        return model
    if isinstance(model, str):
        if model in BUILTIN_MODELS and observed == "reactant":
            return BUILTIN_MODELS[model]
        try:
            return rates_model(model, observed)
        except ConfigError as error:
            if error.key == "model" and "unknown model" in error.problem:
                raise ConfigError("model", f"unknown rate law {model!r} for the temperature fits",
                                  error.hint) from None
            raise
    if callable(model):
        return model_from_function(model)
    raise ConfigError("model", f"cannot use {model!r} as a rate law")


@dataclass(frozen=True)
class RunFit:
    """A single run's rate constant from fitting the model to its data alone."""

    label: str
    temperature_kelvin: float
    k: float
    k_stderr: float
    params: Mapping[str, float]
    n_points: int
    success: bool
    message: str
    fit: Any = field(default=None, repr=False, compare=False)
    data_warnings: tuple[str, ...] = ()  # from reading the run's data (e.g. negative values)


def fit_run_rates(run: KineticRun, model: str | GlobalModel = "first", observed: str = "reactant",
                  profile: bool = False) -> RunFit:
    """Fit one run with ``kinetics.rates.fit.fit_law`` (the project's per-run fit).

    ``model`` is a registry name (or a GlobalModel made by :func:`rates_model`, whose name
    and observation are reused).  The RunFit keeps the rates ``FitResult`` in ``fit``.
    """
    from kinetics.rates.fit import fit_law
    from kinetics.rates.table import from_arrays

    global_model = resolve_model(model, observed)
    if global_model.law is None:
        raise ConfigError("model", f"{global_model.name!r} is not a kinetics.rates law", "use fit_run instead")
    name, observed = global_model.law, global_model.observed
    data = from_arrays(run.time_s, run.concentration_mol_per_l, run.sigma_mol_per_l, columns=[run.label],
                       source=run.label)
    result = fit_law(data, name, observed=observed, profile=profile)
    rate = result.param(global_model.rate_constant)
    params = {p: float(result.values[p]) for p in global_model.nuisance}
    stderr = float("nan") if rate.stderr is None else float(rate.stderr)
    ok = bool(result.converged) and np.isfinite(stderr) and stderr > 0
    message = result.message if ok else f"fit failed: {result.message}"
    return RunFit(run.label, run.temperature_kelvin, float(rate.value), stderr, params, int(result.n_points), ok,
                  message, result, tuple(data.warnings))


def fit_run(run: KineticRun, model: str | GlobalModel | Callable = "first", k_guess: float | None = None) -> RunFit:
    """Fit the model to one run (``ln k`` and nuisance parameters free, scipy least squares).

    The k stderr is the delta-method one from the covariance scaled by the reduced
    chi-square (``k * se(ln k)``).  Used when no ``kinetics.rates`` fit is supplied.
    """
    model = resolve_model(model)
    t, c = run.time_s, run.concentration_mol_per_l
    sigma = run.sigma_mol_per_l if run.sigma_mol_per_l is not None else np.ones_like(c)
    start = dict(model.guess(t, c))
    law_k = start.pop("k", None)
    if k_guess is None:
        k_guess = law_k if law_k is not None and law_k > 0 else _rough_k(t, c, model)
    x0 = np.array([math.log(k_guess)] + [start[p] for p in model.nuisance])

    def residual(x):
        return (model.function(t, math.exp(x[0]), **dict(zip(model.nuisance, x[1:]))) - c) / sigma

    jac = "2-point"
    if model.jacobian is not None:
        def jac(x):
            k = math.exp(x[0])
            d = model.jacobian(t, k, **dict(zip(model.nuisance, x[1:])))
            return np.column_stack([d["k"] * k] + [d[p] for p in model.nuisance]) / sigma[:, None]

    sol = optimize.least_squares(residual, x0, jac=jac, method="lm", diff_step=_RELATIVE_STEP)
    dof = len(c) - len(x0)
    ok = bool(sol.success) and dof > 0
    try:
        cov = np.linalg.inv(sol.jac.T @ sol.jac) * (2 * sol.cost / dof)
        se_ln_k = math.sqrt(cov[0, 0])
    except (np.linalg.LinAlgError, ValueError, ZeroDivisionError):
        se_ln_k, ok = float("nan"), False
    k = math.exp(sol.x[0])
    if not np.isfinite(se_ln_k):
        ok = False
    return RunFit(run.label, run.temperature_kelvin, k, k * se_ln_k, dict(zip(model.nuisance, map(float, sol.x[1:]))),
                  len(c), ok, sol.message if ok else f"fit failed: {sol.message}")


def _rough_k(t, c, model: GlobalModel) -> float:
    # A start for k from the time the signal takes to cover ~63 % of its change; the
    # fit only needs the right order of magnitude.
    order = np.argsort(t)
    t, c = t[order], c[order]
    change = np.abs(c - c[0])
    total = np.max(change)
    if total <= 0 or t[-1] <= t[0]:
        return 1.0 / max(t[-1] - t[0], 1.0)
    i = int(np.argmax(change >= 0.63 * total))
    tau = max(t[i] - t[0], (t[-1] - t[0]) / len(t))
    k = 1.0 / tau
    if model.k_unit != "s^-1":
        scale = max(abs(c[0]), abs(c[-1]), 1e-12)
        k /= scale
    return k


@dataclass(frozen=True)
class GlobalFitResult:
    """Ea and k_ref fitted to every run's raw data at once.

    Attributes
    ----------
    model_name : str
    t_ref_kelvin : float
        Reference temperature (default harmonic mean of the run temperatures).
    ea : Estimate
        kJ/mol, covariance interval (t with ``dof`` degrees of freedom).
    ea_profile_ci95 : tuple of float or None
        Profile-likelihood 95 % interval of Ea (None if not computed or not found).
    k_ref, ln_a : Estimate
    correlation_ea_ln_k_ref : float
    nuisance : tuple of dict
        Per-run fitted nuisance values (same order as the runs).
    chi2, dof, reduced_chi2 : float, int, float
    success : bool
    message : str
    two_step : TemperatureResult or None
        The per-run route on the same data, for the comparison.
    """

    model_name: str
    k_unit: str
    t_ref_kelvin: float
    ea: Estimate
    ea_profile_ci95: tuple[float, float] | None
    k_ref: Estimate
    ln_a: Estimate
    correlation_ea_ln_k_ref: float
    run_labels: tuple[str, ...]
    run_temperatures_kelvin: tuple[float, ...]
    nuisance: tuple[Mapping[str, float], ...]
    n_points: int
    chi2: float
    dof: int
    success: bool
    message: str
    run_fits: tuple[RunFit, ...] = ()
    two_step: TemperatureResult | None = None
    warnings: tuple[str, ...] = ()
    weighted: bool = False
    interval_method: str = ("covariance from the Jacobian, scaled by the reduced chi-square, "
                            "Student t; profile interval by refitting with Ea fixed (F-test threshold)")

    @property
    def reduced_chi2(self) -> float:
        return self.chi2 / self.dof if self.dof > 0 else float("nan")

    def k_at(self, temperature_kelvin) -> np.ndarray:
        """k(T) from the fitted Ea and k_ref, shape like ``temperature_kelvin``."""
        t = np.asarray(temperature_kelvin, float)
        return self.k_ref.value * np.exp(-(self.ea.value * 1e3 / GAS_CONSTANT_J_PER_MOL_K) * (1 / t - 1 / self.t_ref_kelvin))

    def comparison(self) -> list[dict[str, Any]]:
        """Two-step versus global: value, stderr, 95 % interval and interval width per quantity."""
        if self.two_step is None:
            return []
        two = self.two_step
        pairs = [
            ("Ea", two.ea(), self.ea, "kJ/mol"),
            (f"k({self.t_ref_kelvin:.2f} K)", two.predict_k(self.t_ref_kelvin), self.k_ref, self.k_unit),
            ("ln A", two.ln_a(), self.ln_a, f"ln({self.k_unit})"),
        ]
        rows = []
        for name, a, b, unit in pairs:
            rows.append({
                "quantity": name, "unit": unit,
                "two_step_value": a.value, "two_step_stderr": a.stderr,
                "two_step_ci95_low": a.ci95[0], "two_step_ci95_high": a.ci95[1],
                "global_value": b.value, "global_stderr": b.stderr,
                "global_ci95_low": b.ci95[0], "global_ci95_high": b.ci95[1],
                "width_ratio_two_step_over_global": (a.ci95[1] - a.ci95[0]) / (b.ci95[1] - b.ci95[0]),
            })
        return rows

    def report(self) -> str:
        status = "converged" if self.success else f"FAILED: {self.message}"
        lines = [
            f"Global fit ({self.model_name}) over {len(self.run_labels)} runs, {self.n_points} points: {status}",
            f"  k(T) = k_ref exp(-(Ea/R)(1/T - 1/T_ref)), T_ref = {self.t_ref_kelvin:.2f} K",
            f"  intervals: {self.interval_method}, {self.dof} dof",
            f"  Ea        {self.ea}",
        ]
        if self.ea_profile_ci95 is not None:
            lines.append(f"  Ea profile 95 % interval [{self.ea_profile_ci95[0]:.6g}, {self.ea_profile_ci95[1]:.6g}] kJ/mol")
        lines += [
            f"  k_ref     {self.k_ref}",
            f"  ln A      {self.ln_a}",
            f"  corr(Ea, ln k_ref) = {self.correlation_ea_ln_k_ref:.3f}; "
            + (f"reduced chi-square {self.reduced_chi2:.3g}" if self.weighted
               else f"residual standard deviation {math.sqrt(self.reduced_chi2):.3g} mol/L (no sigma given)"),
        ]
        rows = self.comparison()
        if rows:
            lines.append("  two-step vs global:")
            lines.append(f"    {'quantity':<18} {'two-step':>12} {'95 % interval':>27} {'global':>12} {'95 % interval':>27} {'width ratio':>11}")
            for r in rows:
                lines.append(
                    f"    {r['quantity']:<18} {r['two_step_value']:12.5g} [{r['two_step_ci95_low']:11.5g}, {r['two_step_ci95_high']:11.5g}]"
                    f" {r['global_value']:12.5g} [{r['global_ci95_low']:11.5g}, {r['global_ci95_high']:11.5g}]"
                    f" {r['width_ratio_two_step_over_global']:11.2f}"
                )
        for warning in self.warnings:
            lines.append(f"  warning: {warning}")
        return "\n".join(lines)

    def to_dict(self) -> dict[str, Any]:
        return {
            "model": self.model_name,
            "success": self.success,
            "message": self.message,
            "t_ref_kelvin": self.t_ref_kelvin,
            "ea_kj_per_mol": self.ea.to_dict(),
            "ea_profile_ci95_kj_per_mol": None if self.ea_profile_ci95 is None else list(self.ea_profile_ci95),
            "k_ref": self.k_ref.to_dict(),
            "ln_a": self.ln_a.to_dict(),
            "correlation_ea_ln_k_ref": self.correlation_ea_ln_k_ref,
            "n_points": self.n_points,
            "dof": self.dof,
            "reduced_chi2": self.reduced_chi2,
            "weighted": self.weighted,
            "interval_method": self.interval_method,
            "runs": [
                {"label": label, "temperature_kelvin": t, "k_global": float(self.k_at(t)), **dict(p)}
                for label, t, p in zip(self.run_labels, self.run_temperatures_kelvin, self.nuisance)
            ],
            "comparison": self.comparison(),
            "warnings": list(self.warnings),
        }


class _GlobalProblem:
    """Residuals and Jacobian of the global fit; parameters [ln k_ref, Ea (kJ/mol), nuisance...]."""

    def __init__(self, runs: Sequence[KineticRun], model: GlobalModel, t_ref_kelvin: float):
        self.runs = runs
        self.model = model
        self.n_nuisance = len(model.nuisance)
        self.theta = [(-1e3 / GAS_CONSTANT_J_PER_MOL_K) * (1 / r.temperature_kelvin - 1 / t_ref_kelvin) for r in runs]
        self.sigma = [r.sigma_mol_per_l if r.sigma_mol_per_l is not None else np.ones_like(r.time_s) for r in runs]
        self.sizes = [len(r.time_s) for r in runs]
        self.n_params = 2 + self.n_nuisance * len(runs)

    def _run_params(self, x, i):
        start = 2 + i * self.n_nuisance
        return dict(zip(self.model.nuisance, x[start:start + self.n_nuisance]))

    def residual(self, x):
        out = []
        for i, run in enumerate(self.runs):
            k = math.exp(x[0] + x[1] * self.theta[i])
            model = self.model.function(run.time_s, k, **self._run_params(x, i))
            out.append((model - run.concentration_mol_per_l) / self.sigma[i])
        return np.concatenate(out)

    def jacobian(self, x):
        jac = np.zeros((sum(self.sizes), self.n_params))
        row = 0
        for i, run in enumerate(self.runs):
            k = math.exp(x[0] + x[1] * self.theta[i])
            d = self.model.jacobian(run.time_s, k, **self._run_params(x, i))
            rows = slice(row, row + self.sizes[i])
            dk = d["k"] * k / self.sigma[i]
            jac[rows, 0] = dk
            jac[rows, 1] = dk * self.theta[i]
            for j, p in enumerate(self.model.nuisance):
                jac[rows, 2 + i * self.n_nuisance + j] = d[p] / self.sigma[i]
            row += self.sizes[i]
        return jac

    def solve(self, x0, fixed_ea: float | None = None):
        jac = self.jacobian if self.model.jacobian is not None else "2-point"
        if fixed_ea is None:
            return optimize.least_squares(self.residual, x0, jac=jac, method="lm", x_scale="jac",
                                          diff_step=_RELATIVE_STEP)
        free = np.r_[0, np.arange(2, self.n_params)]

        def full(z):
            x = np.empty(self.n_params)
            x[free] = z
            x[1] = fixed_ea
            return x

        res = (lambda z: self.residual(full(z)))
        sub_jac = (lambda z: self.jacobian(full(z))[:, free]) if callable(jac) else "2-point"
        return optimize.least_squares(res, np.asarray(x0)[free], jac=sub_jac, method="lm", x_scale="jac",
                                      diff_step=_RELATIVE_STEP)


def harmonic_mean_temperature(temperature_kelvin) -> float:
    """``1 / mean(1/T)``: the default reference temperature (centre of the runs in 1/T)."""
    return float(1.0 / np.mean(1.0 / np.asarray(temperature_kelvin, float)))


def _exp_or_inf(x: float) -> float:
    """exp(x), but +inf instead of an OverflowError (a hopeless interval stays reportable)."""
    return math.exp(x) if x < 700.0 else float("inf")


def global_fit(
    runs: Sequence[KineticRun],
    model: str | GlobalModel | Callable = "first",
    *,
    t_ref_kelvin: float | None = None,
    run_fits: Sequence[RunFit] | None = None,
    profile: bool = True,
    reference_temperature_kelvin: float = DEFAULT_REFERENCE_TEMPERATURE_KELVIN,
) -> GlobalFitResult:
    """Fit the rate law to all runs at once with Arrhenius temperature dependence.

    ``k(T) = k_ref * exp(-(Ea/R) * (1/T - 1/T_ref))``; free parameters are ln k_ref, Ea and
    the model's nuisance parameters for every run.  Starting values come from per-run fits
    (``run_fits`` if given, e.g. from ``kinetics.rates``, else :func:`fit_run`) through the
    two-step line, which is also kept in the result for the comparison.

    Parameters
    ----------
    runs : sequence of KineticRun, length >= 2
    model : str, GlobalModel or callable
        A name in ``BUILTIN_MODELS``, a GlobalModel, or ``f(t, k, **params)``.
    t_ref_kelvin : float, optional
        Reference temperature; default the harmonic mean of the run temperatures.
    run_fits : sequence of RunFit, optional
        Per-run results to start from (and to compare with).
    profile : bool
        Also compute the profile-likelihood interval of Ea (a few dozen refits).

    Returns
    -------
    GlobalFitResult
        ``success`` False with the reason when the optimiser did not converge or the
        covariance is singular; the numbers are then not to be trusted.
    """
    model = resolve_model(model)
    runs = list(runs)
    if len(runs) < 2:
        raise ConfigError("runs", f"{len(runs)} run(s); a global temperature fit needs at least 2")
    temps = np.array([r.temperature_kelvin for r in runs])
    if np.ptp(temps) < _DUPLICATE_TOLERANCE_KELVIN:
        raise ConfigError("runs", "all runs are at one temperature; Ea cannot be fitted")
    t_ref = harmonic_mean_temperature(temps) if t_ref_kelvin is None else float(t_ref_kelvin)
    if run_fits is None:
        run_fits = [fit_run(r, model) for r in runs]
    run_fits = list(run_fits)
    warnings = [f"{f.label}: per-run fit {f.message}" for f in run_fits if not f.success]
    good = [f for f in run_fits if f.success and f.k > 0 and f.k_stderr > 0]
    two_step = None
    if len({round(f.temperature_kelvin, 2) for f in good}) >= 2:
        try:
            two_step = analyse_temperatures([f.temperature_kelvin for f in good], [f.k for f in good],
                                            [f.k_stderr for f in good], labels=[f.label for f in good],
                                            reference_temperature_kelvin=reference_temperature_kelvin,
                                            k_unit=model.k_unit)
        except ConfigError as error:
            warnings.append(f"two-step analysis not possible: {error}")
    if two_step is not None:
        ea0 = two_step.ea().value
        ln_k0 = float(two_step.arrhenius.predict(1 / t_ref, "scatter")[0])
    else:
        ea0 = 50.0
        ln_k0 = float(np.log(np.median([f.k for f in run_fits if f.k > 0] or [1e-3])))
    x0 = [ln_k0, ea0]
    by_label = {f.label: f for f in run_fits}
    for run in runs:
        fit = by_label.get(run.label)
        start = dict(fit.params) if fit is not None and fit.success else model.guess(run.time_s, run.concentration_mol_per_l)
        x0 += [start[p] for p in model.nuisance]
    problem = _GlobalProblem(runs, model, t_ref)
    sol = problem.solve(np.asarray(x0, float))
    n_points = sum(problem.sizes)
    dof = n_points - problem.n_params
    chi2 = float(2 * sol.cost)
    success, message = bool(sol.success), str(sol.message)
    q = float(stats.t.ppf(0.975, dof)) if dof > 0 else float("nan")
    try:
        from kinetics.rates.intervals import covariance_from_jacobian

        # Column-normalised SVD: the rank test must not depend on the units of the nuisance
        # concentrations (mol/L or micromol/L) next to ln k and Ea in kJ/mol.
        cov = covariance_from_jacobian(sol.jac, chi2 / dof) if dof > 0 else None
        if cov is None:
            raise np.linalg.LinAlgError("Jacobian rank deficient" if dof > 0 else "no degrees of freedom")
        if not np.all(np.isfinite(np.diag(cov))) or np.any(np.diag(cov) < 0):
            raise np.linalg.LinAlgError("non-finite covariance")
    except (np.linalg.LinAlgError, ZeroDivisionError) as error:
        cov = np.full((problem.n_params,) * 2, np.nan)
        success, message = False, f"singular covariance ({error}); parameters are not identifiable from these data"
    ln_k_ref, ea_value = float(sol.x[0]), float(sol.x[1])
    se_ln_k, se_ea = math.sqrt(cov[0, 0]) if success else float("nan"), math.sqrt(cov[1, 1]) if success else float("nan")
    ea = Estimate(ea_value, se_ea, (ea_value - q * se_ea, ea_value + q * se_ea), "kJ/mol")
    k_ref_value = math.exp(ln_k_ref)
    k_ref = Estimate(k_ref_value, k_ref_value * se_ln_k,
                     (_exp_or_inf(ln_k_ref - q * se_ln_k), _exp_or_inf(ln_k_ref + q * se_ln_k)) if success
                     else (float("nan"),) * 2,
                     model.k_unit)
    # ln A = ln k_ref + Ea/(R T_ref): linear in the fitted pair, so its variance is exact.
    g = np.array([1.0, 1e3 / (GAS_CONSTANT_J_PER_MOL_K * t_ref)])
    ln_a_value = float(g @ sol.x[:2])
    se_ln_a = math.sqrt(float(g @ cov[:2, :2] @ g)) if success else float("nan")
    ln_a = Estimate(ln_a_value, se_ln_a, (ln_a_value - q * se_ln_a, ln_a_value + q * se_ln_a), f"ln({model.k_unit})")
    corr = float(cov[0, 1] / math.sqrt(cov[0, 0] * cov[1, 1])) if success else float("nan")
    profile_ci = None
    if profile and success:
        profile_ci = _profile_ea(problem, sol.x, chi2, dof, se_ea, q)
        if profile_ci is None:
            warnings.append("profile interval of Ea not found within 10 stderrs of the estimate")
    nuisance = tuple(problem._run_params(sol.x, i) for i in range(len(runs)))
    nuisance = tuple({p: float(v) for p, v in d.items()} for d in nuisance)
    for warning in warnings:
        log.warning(warning)
    return GlobalFitResult(
        model_name=model.name, k_unit=model.k_unit, t_ref_kelvin=t_ref, ea=ea, ea_profile_ci95=profile_ci,
        k_ref=k_ref, ln_a=ln_a, correlation_ea_ln_k_ref=corr, run_labels=tuple(r.label for r in runs),
        run_temperatures_kelvin=tuple(float(t) for t in temps), nuisance=nuisance, n_points=n_points,
        chi2=chi2, dof=dof, success=success, message=message, run_fits=tuple(run_fits), two_step=two_step,
        warnings=tuple(warnings), weighted=all(r.sigma_mol_per_l is not None for r in runs),
    )


def _profile_ea(problem: _GlobalProblem, x_best, chi2_min, dof, se_ea, q) -> tuple[float, float] | None:
    # Profile (likelihood-ratio) interval with the noise estimated from the fit: the set of
    # Ea whose best chi-square is below chi2_min * (1 + t^2/dof), the F(1, dof) threshold
    # that reduces to the covariance interval for a linear model (Bates & Watts 1988).
    threshold = chi2_min * (1.0 + q**2 / dof)
    start = np.array(x_best, float)

    def excess(ea):
        sol = problem.solve(start, fixed_ea=ea)
        return 2 * sol.cost - threshold

    bounds = []
    for direction in (-1.0, 1.0):
        inner = x_best[1]
        found = None
        for factor in (1.5, 3.0, 6.0, 10.0):
            outer = x_best[1] + direction * factor * q * se_ea
            if excess(outer) > 0:
                found = optimize.brentq(excess, inner, outer, xtol=1e-4 * se_ea) if direction > 0 else \
                    optimize.brentq(excess, outer, inner, xtol=1e-4 * se_ea)
                break
            inner = outer
        if found is None:
            return None
        bounds.append(float(found))
    return bounds[0], bounds[1]
