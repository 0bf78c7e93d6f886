"""Pure line-shape functions of the chemical-shift axis, built on ``lmfit.lineshapes``.

Every function here is unit-area (integral over the axis = ``area``) and takes its width as
a full width at half maximum (FWHM) in the same unit as ``x``; the conversion to the
parameters lmfit uses is stated in each docstring.  A multiplet template is a sum of
``n + 1`` such lines with binomial (Pascal-triangle) intensities spaced by J, i.e. a
first-order n+1 multiplet (a signal coupled to n equivalent spin-1/2 nuclei).

The same functions serve the deconvolution in :mod:`kinetics.signals` and the NIST StRD
check (:func:`nist_gauss_model`), so the certified-value test exercises the code that
fits spectra.
"""

from __future__ import annotations

import math

import lmfit
import numpy as np
from lmfit import lineshapes as _ls
from scipy.special import comb

#: FWHM = 2 sqrt(2 ln 2) sigma for a Gaussian.
_GAUSS_FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))

PROFILES = ("lorentzian", "gaussian", "voigt")

#: Multiplet names and their number of lines (first order, n+1 rule).
MULTIPLICITY_LINES = {"singlet": 1, "doublet": 2, "triplet": 3, "quartet": 4, "quintet": 5,
                      "sextet": 6, "septet": 7}


def lorentzian(x, area: float, center: float, fwhm: float):
    """Unit-area Lorentzian times ``area``.

    L(x) = area / pi * g / ((x - center)^2 + g^2) with g = fwhm / 2 (lmfit ``sigma``).
    """
    return _ls.lorentzian(x, area, center, 0.5 * fwhm)


def gaussian(x, area: float, center: float, fwhm: float):
    """Unit-area Gaussian times ``area``.

    G(x) = area / (s sqrt(2 pi)) exp(-(x - center)^2 / (2 s^2)), s = fwhm / (2 sqrt(2 ln 2)).
    """
    return _ls.gaussian(x, area, center, fwhm / _GAUSS_FWHM_PER_SIGMA)


def voigt(x, area: float, center: float, fwhm_lorentz: float, fwhm_gauss: float):
    """Unit-area Voigt profile (Lorentzian convolved with a Gaussian) times ``area``.

    V(x) = area * Re[w(z)] / (s sqrt(2 pi)), z = (x - center + i g) / (s sqrt 2), with the
    Faddeeva function w, g = fwhm_lorentz / 2 and s = fwhm_gauss / (2 sqrt(2 ln 2))
    (lmfit ``voigt`` with ``gamma = g``, ``sigma = s``).
    """
    sigma = max(fwhm_gauss / _GAUSS_FWHM_PER_SIGMA, 1e-300)
    return _ls.voigt(x, area, center, sigma, 0.5 * fwhm_lorentz)


def line(x, area: float, center: float, profile: str, fwhm: float, fwhm_gauss: float = 0.0):
    """One line of the named ``profile`` ('lorentzian', 'gaussian' or 'voigt')."""
    if profile == "lorentzian":
        return lorentzian(x, area, center, fwhm)
    if profile == "gaussian":
        return gaussian(x, area, center, fwhm)
    if profile == "voigt":
        return voigt(x, area, center, fwhm, fwhm_gauss)
    raise ValueError(f"unknown profile {profile!r}; use one of {PROFILES}")


def binomial_weights(n_lines: int) -> np.ndarray:
    """Relative intensities of a first-order n+1 multiplet, summing to 1.

    Returns
    -------
    ndarray, shape (n_lines,)
        C(n_lines - 1, k) / 2^(n_lines - 1), k = 0 .. n_lines - 1 (1:2:1, 1:3:3:1, ...).
    """
    n = int(n_lines) - 1
    weights = comb(n, np.arange(n + 1))
    return weights / weights.sum()


def line_offsets(n_lines: int, coupling: float) -> np.ndarray:
    """Positions of the lines of an n+1 multiplet relative to its centre, J apart.

    Returns
    -------
    ndarray, shape (n_lines,)
        (k - (n_lines - 1) / 2) * coupling, k = 0 .. n_lines - 1.
    """
    return (np.arange(n_lines) - 0.5 * (n_lines - 1)) * coupling


def multiplet(x, area: float, center: float, n_lines: int, coupling: float, profile: str,
              fwhm: float, fwhm_gauss: float = 0.0):
    """A first-order multiplet of total ``area``: binomial lines ``coupling`` apart.

    All quantities in the unit of ``x`` (convert J from Hz to ppm by dividing by the
    observe frequency in MHz before calling).  ``x`` of any shape; the lines are
    evaluated together by broadcasting over a trailing axis.
    """
    x = np.asarray(x, dtype=float)
    weights = _binomial_cached(int(n_lines))
    # centre of shape (...) -> line centres (..., 1, n_lines), broadcast against (..., n, 1)
    centres = np.asarray(center, float)[..., None] + (np.arange(n_lines) - 0.5 * (n_lines - 1)) * coupling
    centres = np.expand_dims(centres, -2)
    return line(x[..., None], area * weights, centres, profile, fwhm, fwhm_gauss).sum(axis=-1)


_BINOMIAL: dict[int, np.ndarray] = {}


def _binomial_cached(n_lines: int) -> np.ndarray:
    if n_lines not in _BINOMIAL:
        _BINOMIAL[n_lines] = binomial_weights(n_lines)
    return _BINOMIAL[n_lines]


def lorentzian_window_fraction(lo: float, hi: float, center: float, fwhm: float) -> float:
    """Fraction of a Lorentzian's area inside [lo, hi].

    F = (arctan((hi - c) / g) - arctan((lo - c) / g)) / pi with g = fwhm / 2; for a window of
    +/- m half-widths centred on the line this is (2 / pi) arctan(m).
    """
    half = 0.5 * fwhm
    low, high = min(lo, hi), max(lo, hi)
    return float((math.atan((high - center) / half) - math.atan((low - center) / half)) / math.pi)


# ---------------------------------------------------------------- NIST StRD Gauss class
def exponential_baseline(x, b1: float, b2: float):
    """b1 * exp(-b2 * x): the decaying baseline of the NIST Gauss1-3 problems."""
    return b1 * np.exp(-b2 * x)


def nist_gauss_model() -> tuple[lmfit.Model, lmfit.Parameters]:
    """lmfit model of NIST StRD Gauss1-3 built from :func:`gaussian` and an exponential baseline.

    y = b1 exp(-b2 x) + b3 exp(-(x - b4)^2 / b5^2) + b6 exp(-(x - b7)^2 / b8^2).

    A NIST peak b3 exp(-(x - b4)^2 / b5^2) is our unit-area Gaussian with
    fwhm = 2 sqrt(ln 2) b5 and area = b3 sqrt(pi) b5; those are lmfit expressions, so the
    free parameters (and their standard errors) are b1..b8 exactly as certified.

    Returns
    -------
    model : lmfit.Model
    params : lmfit.Parameters
        b1..b8 free (values to be set from a starting point), the line-shape parameters tied.
    """
    model = (lmfit.Model(exponential_baseline)
             + lmfit.Model(gaussian, prefix="p1_")
             + lmfit.Model(gaussian, prefix="p2_"))
    params = lmfit.Parameters()
    for name in ("b1", "b2", "b3", "b4", "b5", "b6", "b7", "b8"):
        params.add(name, value=1.0)
    fwhm_per_b = 2.0 * math.sqrt(math.log(2.0))
    for prefix, (height, centre, width) in (("p1_", ("b3", "b4", "b5")), ("p2_", ("b6", "b7", "b8"))):
        params.add(f"{prefix}center", expr=centre)
        params.add(f"{prefix}fwhm", expr=f"{fwhm_per_b!r} * {width}")
        params.add(f"{prefix}area", expr=f"{height} * sqrt(pi) * {width}")
    return model, params
