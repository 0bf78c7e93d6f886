"""Activation parameters from runs at several temperatures: Arrhenius, Eyring, global fits.

Two routes to the same numbers:

* **Two-step** (:func:`analyse_temperatures`, module ``two_step``): each run gives a
  rate constant ``k`` with a standard error; a weighted straight line of ``ln k`` on
  ``1/T`` gives the activation energy ``Ea`` and the pre-exponential factor ``A``
  (Arrhenius 1889), and a line of
  ``ln(k/T)`` on ``1/T`` gives the enthalpy and entropy of activation (Eyring 1935;
  Evans & Polanyi 1935) and the free energy of activation at a chosen temperature.
* **Global** (:func:`global_fit`, module ``globalfit``): the rate law is fitted to every
  concentration point of every run at once, with
  ``k(T) = k_ref * exp(-(Ea/R) * (1/T - 1/T_ref))``, the reference-temperature form that
  nearly decorrelates ``Ea`` and ``k_ref`` (Schwaab & Pinto 2007), with per-run nuisance
  parameters (initial or final concentration).

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

from kinetics.temperature.two_step import (
    analyse_temperatures,
    BOLTZMANN_J_PER_K,
    DEFAULT_REFERENCE_TEMPERATURE_KELVIN,
    Estimate,
    eyring_prefactor_per_s,
    GAS_CONSTANT_J_PER_MOL_K,
    LineFit,
    PLANCK_J_S,
    quantile95,
    read_arrhenius_table,
    TemperatureResult,
    to_kelvin,
    TRANSMISSION_COEFFICIENT,
    ZERO_CELSIUS_KELVIN,
)
from kinetics.temperature.globalfit import (
    BUILTIN_MODELS,
    fit_run,
    fit_run_rates,
    global_fit,
    GlobalFitResult,
    GlobalModel,
    harmonic_mean_temperature,
    KineticRun,
    model_from_function,
    rates_model,
    resolve_model,
    RunFit,
)

__all__ = [
    "BUILTIN_MODELS",
    "GAS_CONSTANT_J_PER_MOL_K",
    "BOLTZMANN_J_PER_K",
    "PLANCK_J_S",
    "ZERO_CELSIUS_KELVIN",
    "TRANSMISSION_COEFFICIENT",
    "DEFAULT_REFERENCE_TEMPERATURE_KELVIN",
    "eyring_prefactor_per_s",
    "Estimate",
    "LineFit",
    "quantile95",
    "TemperatureResult",
    "to_kelvin",
    "analyse_temperatures",
    "read_arrhenius_table",
    "KineticRun",
    "GlobalModel",
    "model_from_function",
    "rates_model",
    "resolve_model",
    "RunFit",
    "fit_run_rates",
    "fit_run",
    "GlobalFitResult",
    "harmonic_mean_temperature",
    "global_fit",
]
