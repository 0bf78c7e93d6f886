"""Tracked signals: region integrals with a local baseline, drift tracking, deconvolution.

Units
-----
An *integral* is the sum of intensities times the point spacing in ppm, i.e. it is in
**ppm x intensity** (rectangle rule on the true ppm spacing; for a band-limited spectrum
this equals the trapezoid rule up to the end points).  Fitted areas use the same unit, so
``integral`` and ``fit`` signals are interchangeable downstream.

Integral uncertainty
--------------------
An integral is a linear combination ``I = dx * sum_i w_i y_i`` of the spectrum points
(``w_i = 1`` inside the window, minus the weights of the straight baseline fitted through
the two edge windows).  With noise of standard deviation ``sigma`` and autocorrelation
``rho(k)`` (estimated from a signal-free region, as zero-filling and apodisation make
neighbouring points correlated)

    sigma_I = sigma * dx * sqrt( sum_k rho(k) * a_w(k) ),   a_w(k) = sum_i w_i w_(i+k),

summed over lags -L..L where ``rho`` is still significant.  For plain weights (no baseline)
``a_w(k) = n - |k|``, so ``sigma_I = sigma * dx * sqrt(n * sum_k (1 - |k|/n) rho(k))``,
which is ``sigma * dx * sqrt(n)`` for white noise.

Truncation
----------
A window of +/- m half-widths centred on a Lorentzian holds (2/pi) arctan(m) of its area;
a line of HWHM g at x0 has (1/pi)(atan((b - x0)/g) - atan((a - x0)/g)) of its area in
[a, b].  :func:`truncation_loss` models the window content as lines (the signal's
``LineShape`` when given, else Lorentzians at the maxima found, with the width measured on
the tallest line) and integrates the model the way the data are integrated, edge baseline
included (:func:`window_captured_fraction`), so the reported loss is the share of the
signal's true area missed by the user's window and baseline choice.  It is NaN, with a
note saying why, when the data do not support an estimate.  ``correct_truncation``
divides an integral by (1 - loss): model-dependent, it assumes Lorentzian lines.

Layout
------
:mod:`~kinetics.signals.definitions` (what is tracked), :mod:`~kinetics.signals.noise`,
:mod:`~kinetics.signals.integrals`, :mod:`~kinetics.signals.truncation`,
:mod:`~kinetics.signals.tracking` and :mod:`~kinetics.signals.deconvolution`.
"""

from kinetics.signals.deconvolution import (Component, DeconvolutionResult, components_for, deconvolve,
                                            fit_window, window_data)
from kinetics.signals.definitions import BASELINES, METHODS, LineShape, SignalDefinition, validate_signals
from kinetics.signals.integrals import RegionIntegral, integrate_region, integration_weights, window_indices
from kinetics.signals.noise import NoiseEstimate, auto_noise_ranges, estimate_noise, sum_sigma
from kinetics.signals.tracking import TrackResult, centroid_ppm, max_on_edge, track
from kinetics.signals.truncation import (TRUNCATION_MAX_MISFIT, TRUNCATION_MIN_POINTS_PER_FWHM, TRUNCATION_MIN_SNR,
                                         TruncationEstimate, truncation_loss, window_captured_fraction)

# the series module calls this one by its old private name
_max_on_edge = max_on_edge

__all__ = [
    "METHODS", "BASELINES", "LineShape", "SignalDefinition", "validate_signals",
    "NoiseEstimate", "auto_noise_ranges", "estimate_noise", "sum_sigma",
    "RegionIntegral", "integration_weights", "integrate_region", "window_indices",
    "TRUNCATION_MIN_SNR", "TRUNCATION_MIN_POINTS_PER_FWHM", "TRUNCATION_MAX_MISFIT", "TruncationEstimate",
    "truncation_loss", "window_captured_fraction",
    "TrackResult", "centroid_ppm", "track", "max_on_edge",
    "Component", "DeconvolutionResult", "deconvolve", "window_data", "fit_window", "components_for",
]
