"""``kinetics inspect``: what one file holds — header, axis and its strongest peaks.

Peaks are picked on the real part with :func:`scipy.signal.find_peaks`, keeping those
whose prominence exceeds :data:`PROMINENCE_SNR` times a robust noise estimate: the
median absolute deviation of the first difference of the spectrum (scaled by 1.4826 to a
Gaussian standard deviation and by 1/sqrt(2) because differencing doubles the noise
variance; Rousseeuw & Croux 1993 for the MAD).  The first difference removes a slowly
varying baseline and the median ignores the few points on peaks, so no signal-free
region has to be named.

``height`` is the intensity at the peak top minus the median of the spectrum (a robust
baseline level); ``snr`` is that height over the noise estimate.  The peak position is
refined by a parabola through the top three points.

An FID is transformed first with ``kinetics.processing.fid_to_spectrum`` (apodisation,
zero-filling, FFT, automatic phase).  Should that module be unavailable, a plain FFT in
magnitude mode is used (``np.fft.fftshift(np.fft.fft(data))``, absolute value, axis from
``carrier_ppm`` +/- SW/2) and ``"transform"`` says so.
"""

from __future__ import annotations

import logging
from pathlib import Path
from typing import Any

import numpy as np

from kinetics.spectra.peaks import difference_sigma, pick_peaks as find_lines
from kinetics.spectra.reader import detect_format, load_text, parse_loaded
from kinetics.spectra.spectrum import Fid, Spectrum

log = logging.getLogger(__name__)

#: Peaks must stand out of the noise by this many standard deviations (common practice
#: for "clearly a peak"; a limit of detection is usually taken at SNR 3).
PROMINENCE_SNR = 5.0
#: Number of strongest peaks reported.
MAX_PEAKS = 10


def noise_sigma(values: np.ndarray) -> float:
    """Robust noise standard deviation of a spectrum, from the MAD of its first difference
    (:func:`kinetics.spectra.peaks.difference_sigma`).

    Parameters
    ----------
    values : ndarray, shape (n,)

    Returns
    -------
    float
        Estimated standard deviation of the point-to-point noise (> 0 unless the data
        are constant).
    """
    return difference_sigma(np.asarray(values, dtype=float))


def pick_peaks(spectrum: Spectrum, max_peaks: int = MAX_PEAKS,
               prominence_snr: float = PROMINENCE_SNR) -> list[dict[str, float]]:
    """The strongest peaks of a spectrum's real part.

    Returns
    -------
    list of dict
        ``{"ppm", "height", "snr"}``, tallest first, at most ``max_peaks``.
    """
    real = spectrum.real
    sigma = noise_sigma(real)
    if sigma <= 0:
        return []
    level = float(np.median(real))
    found = find_lines(real, prominence=prominence_snr * sigma)
    if len(found) == 0:
        return []
    ppm = spectrum.ppm
    peaks = []
    for j in found.tallest(max_peaks):
        index = int(found.index[j])  # a maximum is never an end point: both neighbours exist
        peaks.append({
            "ppm": float(ppm[index] + found.offset_points[j] * (ppm[index + 1] - ppm[index - 1]) / 2.0),
            "height": float(real[index] - level),
            "snr": float((real[index] - level) / sigma),
        })
    return peaks


def _magnitude_spectrum(fid: Fid) -> Spectrum:
    """Plain FFT in magnitude mode (fallback when kinetics.processing is unavailable)."""
    n = fid.n_points
    values = np.abs(np.fft.fftshift(np.fft.fft(fid.data)))
    offset_hz = np.fft.fftshift(np.fft.fftfreq(n, d=fid.dwell_s))
    ppm = fid.carrier_ppm + offset_hz / fid.observe_mhz
    return Spectrum(ppm=ppm, real=values, nucleus=fid.nucleus, observe_mhz=fid.observe_mhz,
                    acquired_utc=fid.acquired_utc)


def _to_spectrum(fid: Fid) -> tuple[Spectrum, str]:
    try:
        from kinetics.processing import fid_to_spectrum
    except ImportError:
        log.warning("kinetics.processing unavailable; FID shown as a magnitude FFT")
        return _magnitude_spectrum(fid), "magnitude FFT (fallback)"
    return fid_to_spectrum(fid), "kinetics.processing.fid_to_spectrum"


def inspect_file(path: str | Path) -> dict[str, Any]:
    """Header, axis and strongest peaks of one spectrum or FID file.

    Returns
    -------
    dict
        ``format`` ("jcamp-dx" | "delimited"), ``kind`` ("spectrum" | "fid"), ``title``,
        ``nucleus``, ``observe_mhz``, ``decoupler`` (as the file states it, or None),
        ``points`` (points in the file), ``ppm_range``
        [high, low] of the spectrum (the transformed one for an FID), ``acquired`` (ISO
        8601 UTC or None), ``n_scans``, ``sha256``, ``peaks`` (see :func:`pick_peaks`),
        and for an FID also ``dwell_s``, ``spectrum_points`` and ``transform``.

    Raises
    ------
    InputFileError
        When the file cannot be read.
    """
    loaded = load_text(path)
    record = parse_loaded(loaded)
    info: dict[str, Any] = {
        "file": str(path),
        "format": detect_format(loaded.text),
        "kind": "fid" if isinstance(record, Fid) else "spectrum",
        "title": record.header.get("TITLE") or record.header.get("title"),
        "nucleus": record.nucleus,
        "observe_mhz": record.observe_mhz,
        "decoupler": record.decoupler,
        "points": record.n_points,
        "acquired": record.acquired_utc.isoformat() if record.acquired_utc else None,
        "n_scans": record.n_scans,
        "sha256": record.sha256,
    }
    if isinstance(record, Fid):
        spectrum, transform = _to_spectrum(record)
        info.update(dwell_s=record.dwell_s, spectrum_points=spectrum.n_points, transform=transform)
    else:
        spectrum = record
    info["ppm_range"] = list(spectrum.ppm_range)
    info["peaks"] = pick_peaks(spectrum)
    return info
