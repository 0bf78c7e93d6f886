"""Noise level and peak picking on a spectrum's points: the one set of primitives.

Pure numpy (plus ``scipy.signal.find_peaks``) on plain arrays; no records, no config.
Readers, ``kinetics inspect``, the config drafter, processing (auto-phasing, referencing)
and signals (truncation, noise) all build on these, so there is one robust noise
estimate and one peak picker in the code base.

Noise
-----
:func:`difference_sigma`: the median absolute deviation (MAD) of the differences of
points ``lag`` apart, scaled by 1.4826 to a Gaussian standard deviation and by
1/sqrt(2) because differencing doubles the noise variance (Rousseeuw & Croux 1993 for
the MAD; from memory).  Differencing removes a slowly varying baseline and the median
ignores the few points on lines, so no signal-free region has to be named.

:func:`detrended_sigma`: the standard deviation about a fitted polynomial, for a region
the caller knows to be signal-free (``ddof`` = the polynomial's parameters).

Peaks
-----
:func:`pick_peaks`: local maxima above a height and a prominence (``find_peaks``),
refined to a fraction of a point by the vertex of the parabola through each maximum and
its two neighbours (:func:`parabolic_offsets`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.signal import find_peaks, peak_widths

__all__ = ["robust_sigma", "difference_sigma", "detrend", "detrended_sigma", "parabolic_offset",
           "parabolic_offsets", "Peaks", "pick_peaks"]

#: MAD -> standard deviation of a Gaussian (1 / Phi^-1(3/4)).
MAD_TO_SIGMA = 1.4826


def _vector(values, name: str = "values") -> np.ndarray:
    array = np.asarray(values)
    if array.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {array.shape}")
    return array


def robust_sigma(values) -> float:
    """1.4826 times the median absolute deviation of ``values`` (shape (n,), real)."""
    values = _vector(values)
    if values.size == 0:
        raise ValueError("no values for a noise estimate")
    return float(MAD_TO_SIGMA * np.median(np.abs(values - np.median(values))))


def difference_sigma(values, lag: int = 1, where=None, quantised_fallback: bool = True) -> float:
    """Robust noise standard deviation from the differences of points ``lag`` apart.

    Parameters
    ----------
    values : ndarray, shape (n,)
        Real, or complex (then the real and imaginary parts' differences are pooled and
        the result is the noise of one component).
    lag : int, default 1
        Distance of the differenced points.
    where : ndarray of bool, shape (n,), optional
        Only differences between two points that are both ``True`` count.
    quantised_fallback : bool, default True
        When the MAD is 0 (quantised or noise-free data), fall back on the mean absolute
        deviation of the differences; otherwise return 0.

    Returns
    -------
    float
        ``1.4826 * MAD(diff) / sqrt(2)`` (>= 0).
    """
    values = _vector(values)
    if not isinstance(lag, (int, np.integer)) or lag < 1:
        raise ValueError(f"lag must be a positive integer, got {lag!r}")
    if values.size <= lag:
        raise ValueError(f"need more than {lag} points for differences {lag} apart, got {values.size}")
    steps = values[lag:] - values[:-lag]
    if where is not None:
        where = _vector(where, "where").astype(bool)
        if where.size != values.size:
            raise ValueError("where must have the shape of values")
        steps = steps[where[lag:] & where[:-lag]]
        if steps.size == 0:
            raise ValueError("no pair of selected points to difference")
    if np.iscomplexobj(steps):
        steps = np.concatenate([steps.real, steps.imag])
    steps = steps.astype(float, copy=False)
    sigma = robust_sigma(steps) / math.sqrt(2.0)
    if sigma == 0.0 and quantised_fallback:
        sigma = float(np.mean(np.abs(steps - np.mean(steps)))) / math.sqrt(2.0)
    return float(sigma)


def detrend(values, order: int = 1) -> np.ndarray:
    """``values`` (shape (n,)) minus their least-squares polynomial of ``order`` in the index."""
    values = _vector(values)
    x = np.linspace(-1.0, 1.0, values.size)
    coef = np.polynomial.polynomial.polyfit(x, values, order)
    return values - np.polynomial.polynomial.polyval(x, coef)


def detrended_sigma(values, order: int = 1) -> float:
    """Standard deviation of signal-free ``values`` (shape (n,)) about a polynomial of ``order``.

    ``ddof`` is ``order + 1`` (the polynomial's parameters); needs more than ``order + 1`` points.
    """
    values = _vector(values)
    if values.size <= order + 1:
        raise ValueError(f"need more than {order + 1} points, got {values.size}")
    residual = detrend(values, order)
    return float(math.sqrt(float(residual @ residual) / (values.size - order - 1)))


def parabolic_offset(y0: float, y1: float, y2: float) -> float:
    """Vertex offset (points, within [-0.5, 0.5]) of the parabola through three samples; 0 if no maximum."""
    denominator = y0 - 2.0 * y1 + y2
    if denominator >= 0:
        return 0.0
    return float(np.clip(0.5 * (y0 - y2) / denominator, -0.5, 0.5))


def parabolic_offsets(values, indices) -> np.ndarray:
    """:func:`parabolic_offset` at each of ``indices`` (shape (k,)); 0 at the ends of ``values``."""
    values = _vector(values)
    indices = np.asarray(indices, int)
    offsets = np.zeros(indices.size)
    inner = (indices > 0) & (indices < values.size - 1)
    k = indices[inner]
    y0, y1, y2 = values[k - 1], values[k], values[k + 1]
    curvature = y0 - 2.0 * y1 + y2
    maximum = curvature < 0
    shift = np.zeros(k.size)
    shift[maximum] = 0.5 * (y0 - y2)[maximum] / curvature[maximum]
    offsets[inner] = np.clip(shift, -0.5, 0.5)
    return offsets


@dataclass(frozen=True)
class Peaks:
    """Peaks found by :func:`pick_peaks`, in index order.

    Attributes
    ----------
    index : ndarray of int, shape (k,)
        Point of each maximum.
    offset_points : ndarray, shape (k,)
        Parabolic sub-point refinement (position = index + offset).
    height : ndarray, shape (k,)
        Value at the maximum minus the ``level`` given.
    prominence : ndarray, shape (k,)
        NaN unless a least prominence was asked for.
    width_points : ndarray, shape (k,)
        Full width at half prominence (points); NaN unless asked for.
    """

    index: np.ndarray
    offset_points: np.ndarray
    height: np.ndarray
    prominence: np.ndarray
    width_points: np.ndarray

    @property
    def position(self) -> np.ndarray:
        return self.index + self.offset_points

    def __len__(self) -> int:
        return int(self.index.size)

    def tallest(self, count: int | None = None) -> np.ndarray:
        """Positions in this record (not point indices) of the ``count`` tallest, tallest first."""
        return np.argsort(self.height, kind="stable")[::-1][:count]


def pick_peaks(values, *, height: float | None = None, prominence: float | None = None,
               level: float = 0.0, distance_points: int | None = None, widths: bool = False) -> Peaks:
    """Local maxima of ``values`` (shape (n,), real) that stand out.

    Parameters
    ----------
    values : ndarray, shape (n,)
    height : float, optional
        Least ``values - level`` at a maximum.
    prominence : float, optional
        Least prominence (``find_peaks``'s: height over the higher of the two surrounding
        minima).
    level : float, default 0
        Baseline level subtracted before the height test and in ``Peaks.height``.
    distance_points : int, optional
        Least distance between two maxima (the taller wins).
    widths : bool, default False
        Also measure each peak's full width at half prominence.
    """
    values = _vector(values).astype(float, copy=False)
    if not np.all(np.isfinite(values)):
        raise ValueError("peak picking needs finite values")
    shifted = values - level if level else values
    kwargs = {}
    if height is not None:
        kwargs["height"] = height
    if distance_points is not None:
        kwargs["distance"] = max(1, int(distance_points))
    if prominence is not None:
        kwargs["prominence"] = prominence
    index, props = find_peaks(shifted, **kwargs)
    width = (peak_widths(shifted, index, rel_height=0.5)[0] if widths and index.size
             else np.full(index.size, np.nan))
    # prominences cost a walk to the nearest higher point per maximum: only when asked for
    return Peaks(index=index, offset_points=parabolic_offsets(shifted, index), height=shifted[index],
                 prominence=props.get("prominences", np.full(index.size, np.nan)),
                 width_points=np.asarray(width, float))
