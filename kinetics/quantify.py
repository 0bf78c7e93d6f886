"""Concentrations from integrals, with propagated uncertainties (explicit formulas).

All functions are vectorised over the spectra of a series (arrays of shape (m,)).
Uncertainties are first-order (delta method) with independent inputs unless stated.

* Internal standard:  c_x = (I_x / N_x) / (I_s / N_s) * c_s,
  sigma_c^2 = (c_s N_s / (N_x I_s))^2 sigma_Ix^2 + c_x^2 [(sigma_Is / I_s)^2 + (sigma_cs / c_s)^2].
* Known initial concentration c0 of one species A (calibrated on the first spectrum):
  f = c0 / (I_A(0) / N_A),  c_x = f I_x / N_x,
  sigma_c^2 = (f / N_x)^2 sigma_Ix^2 + c_x^2 [(sigma_IA0 / I_A0)^2 + (sigma_c0 / c0)^2]
  (the calibration term is common to all spectra: a systematic scale uncertainty).
* Relative: x_i = a_i / sum_j a_j with a_i = I_i / N_i,
  sigma_xi^2 = sum_j ((delta_ij S - a_i) / S^2)^2 sigma_aj^2, S = sum_j a_j.
* Saturation (Ernst and Anderson 1966, steady state of repeated pulses): the signal of a
  nucleus with longitudinal relaxation time T1, flip angle alpha and repetition time TR
  is M0 sin(alpha) (1 - E1) / (1 - cos(alpha) E1), E1 = exp(-TR / T1), relative to a fully
  relaxed spectrum; integrals are divided by that factor.  At 90 degrees and TR = 5 T1 the
  factor is 1 - e^-5 = 0.99326 (TR >= 5 T1 is the common-practice rule; below it a
  warning is issued).
* Conversion X = 1 - c_A / c_A(0); yield Y = (nu_A / nu_P) c_P / c_A(0).
* Mass balance: total(t) = sum_i nu_i c_i(t); flagged where |total - total(0)| exceeds
  ``k`` times its standard deviation sqrt(sigma_total(t)^2 + sigma_total(0)^2).
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass

import numpy as np

log = logging.getLogger(__name__)


def saturation_factor(t1_s: float, repetition_time_s: float, flip_angle_deg: float = 90.0) -> float:
    """Steady-state signal relative to full relaxation: (1 - E1) / (1 - cos(alpha) E1), E1 = exp(-TR/T1)."""
    if not (t1_s > 0 and repetition_time_s > 0):
        raise ValueError("T1 and the repetition time must be > 0 s")
    e1 = math.exp(-repetition_time_s / t1_s)
    return (1.0 - e1) / (1.0 - math.cos(math.radians(flip_angle_deg)) * e1)


def saturation_warning(name: str, t1_s: float, repetition_time_s: float) -> str | None:
    """A warning text when TR < 5 T1 (common practice for quantitative spectra), else None."""
    if repetition_time_s < 5.0 * t1_s:
        return (f"signal {name}: repetition time {repetition_time_s:g} s is below 5 T1 "
                f"({5 * t1_s:g} s); integrals were corrected for saturation")
    return None


def correct_saturation(integral, sigma, factor: float):
    """Integral and sigma divided by the saturation factor."""
    return np.asarray(integral, float) / factor, np.asarray(sigma, float) / factor


def from_standard(integral, sigma, nuclei: int, std_integral, std_sigma, std_nuclei: int,
                  std_concentration: float, std_concentration_sigma: float = 0.0):
    """Concentration against an internal standard (formula in the module docstring).

    Returns
    -------
    concentration, sigma : ndarray, shape (m,)
    """
    integral, sigma = np.asarray(integral, float), np.asarray(sigma, float)
    std_integral, std_sigma = np.asarray(std_integral, float), np.asarray(std_sigma, float)
    scale = std_concentration * std_nuclei / (nuclei * std_integral)
    conc = scale * integral
    var = (scale * sigma) ** 2 + conc ** 2 * ((std_sigma / std_integral) ** 2
                                              + (std_concentration_sigma / std_concentration) ** 2)
    return conc, np.sqrt(var)


def from_initial(integral, sigma, nuclei: int, ref_integral0: float, ref_sigma0: float, ref_nuclei: int,
                 c0: float, c0_sigma: float = 0.0):
    """Concentration scaled by a known initial concentration of one species (module docstring)."""
    integral, sigma = np.asarray(integral, float), np.asarray(sigma, float)
    factor = c0 * ref_nuclei / ref_integral0
    conc = factor * integral / nuclei
    var = (factor * sigma / nuclei) ** 2 + conc ** 2 * ((ref_sigma0 / ref_integral0) ** 2 + (c0_sigma / c0) ** 2)
    return conc, np.sqrt(var)


def relative(per_nucleus, per_nucleus_sigma):
    """Fractions of the tracked total, shape (k, m), with sigma (module docstring)."""
    a = np.asarray(per_nucleus, float)
    s = np.asarray(per_nucleus_sigma, float)
    total = a.sum(axis=0)
    frac = a / total
    # d x_i / d a_j = (delta_ij - x_i) / S
    var = np.empty_like(a)
    for i in range(a.shape[0]):
        deriv = (np.where(np.arange(a.shape[0])[:, None] == i, 1.0, 0.0) - frac[i]) / total
        var[i] = np.sum((deriv * s) ** 2, axis=0)
    return frac, np.sqrt(var)


def combine(values, sigmas):
    """Inverse-variance mean of several estimates of one quantity, shape (k, m) -> (m,).

    Falls back to the plain mean when a sigma is zero or missing.
    """
    values, sigmas = np.atleast_2d(values), np.atleast_2d(sigmas)
    if values.shape[0] == 1:
        return values[0].copy(), sigmas[0].copy()
    good = np.all(np.isfinite(sigmas) & (sigmas > 0), axis=0)
    weights = np.where(good, 1.0 / np.where(good, sigmas, 1.0) ** 2, 1.0)
    mean = np.sum(weights * values, axis=0) / np.sum(weights, axis=0)
    sigma = np.where(good, 1.0 / np.sqrt(np.sum(weights, axis=0)),
                     np.sqrt(np.sum(sigmas ** 2, axis=0)) / values.shape[0])
    return mean, sigma


def conversion(c, c_sigma, c0: float, c0_sigma: float):
    """X = 1 - c / c0 with sigma^2 = (sigma_c / c0)^2 + (c sigma_c0 / c0^2)^2."""
    c, c_sigma = np.asarray(c, float), np.asarray(c_sigma, float)
    return 1.0 - c / c0, np.sqrt((c_sigma / c0) ** 2 + (c * c0_sigma / c0 ** 2) ** 2)


def product_yield(c_product, c_product_sigma, c0_reactant: float, c0_sigma: float, ratio: float = 1.0):
    """Y = ratio * c_P / c_A(0), ratio = nu_A / nu_P; sigma by the same rule as conversion."""
    c, s = np.asarray(c_product, float), np.asarray(c_product_sigma, float)
    y = ratio * c / c0_reactant
    return y, np.sqrt((ratio * s / c0_reactant) ** 2 + (y * c0_sigma / c0_reactant) ** 2)


@dataclass(frozen=True)
class MassBalance:
    """Sum of the tracked species through the series against its initial value.

    Attributes
    ----------
    total, total_sigma : ndarray, shape (m,)
    deviation, deviation_sigma : ndarray, shape (m,)
        total - total[0] and sqrt(sigma_total^2 + sigma_total[0]^2) (0 for the first row).
    flagged : ndarray of bool, shape (m,)
        |deviation| > k * deviation_sigma.
    k : float
    """

    total: np.ndarray
    total_sigma: np.ndarray
    deviation: np.ndarray
    deviation_sigma: np.ndarray
    flagged: np.ndarray
    k: float

    @property
    def holds(self) -> bool:
        return not bool(self.flagged.any())


def mass_balance(concentrations, sigmas, weights=None, k: float = 3.0) -> MassBalance:
    """Mass-balance check of species concentrations, shape (n_species, m)."""
    c = np.atleast_2d(np.asarray(concentrations, float))
    s = np.atleast_2d(np.asarray(sigmas, float))
    w = np.ones(c.shape[0]) if weights is None else np.asarray(weights, float)
    total = np.sum(w[:, None] * c, axis=0)
    total_sigma = np.sqrt(np.sum((w[:, None] * s) ** 2, axis=0))
    deviation = total - total[0]
    dev_sigma = np.sqrt(total_sigma ** 2 + total_sigma[0] ** 2)
    dev_sigma[0] = total_sigma[0]
    flagged = np.abs(deviation) > k * dev_sigma
    flagged[0] = False
    if flagged.any():
        # reported once per run by the caller (the fit's mass-balance note), not per table
        log.debug("mass balance drifts beyond %g sigma in %d of %d spectra", k, int(flagged.sum()), flagged.size)
    return MassBalance(total, total_sigma, deviation, dev_sigma, flagged, float(k))
