"""FID -> spectrum processing: one pure function per step, and a pipeline built from config.

Every step takes a record (:class:`~kinetics.spectra.spectrum.Fid` or
:class:`~kinetics.spectra.spectrum.Spectrum`) and returns a new one; nothing is edited in
place and nothing is remembered between calls.  The usual order, which
:class:`Pipeline` follows, is::

    remove_dc_offset -> apodize_exponential / apodize_gaussian -> zero_fill
    -> remove_group_delay -> fft -> phase (manual or auto_phase) -> correct_baseline
    -> reference

and afterwards, over a whole series, :func:`align_series`.

Conventions
-----------
* Frequency axis.  The FID's complex points are ``x[n] = sum_j a_j exp(2 pi i f_j n dwell)``
  with ``f_j`` the offset in Hz from the carrier.  :func:`fft` uses numpy's forward DFT
  (kernel ``exp(-2 pi i k n / N)``), so a line at offset ``+f`` Hz appears at
  ``carrier_ppm + f / observe_mhz`` ppm, on the high-ppm (left) side.  The returned
  spectrum runs from ``carrier + SW/2`` down to ``carrier - SW/2`` (strictly decreasing
  ppm, as drawn).
* Phase.  A phase correction multiplies the complex spectrum by ``exp(i phi(ppm))`` with
  ``phi = p0 + p1 * (pivot_ppm - ppm) / width_ppm`` (degrees), ``width_ppm`` the full
  width of the spectrum.  ``p1`` is thus the phase change across the whole spectrum,
  growing from left (high ppm) to right; with ``pivot_ppm`` at the left edge this is the
  convention of ``nmrglue.process.proc_base.ps``.
* SNR.  :func:`snr` is peak height divided by *one* noise standard deviation (the "1 sigma"
  convention, not the "2 sigma" one some instruments quote; divide by 2 to compare).

Layout
------
:mod:`~kinetics.processing.steps` (one pure function per step),
:mod:`~kinetics.processing.phasing` (automatic phasing) and
:mod:`~kinetics.processing.pipeline` (:class:`Pipeline`, validated once from config).
"""

from kinetics.processing.phasing import PHASE_METHODS, PhaseHint, PhaseResult, acme_score, auto_phase
from kinetics.processing.pipeline import (Pipeline, ProcessedSpectrum, SeriesResult, fid_to_spectrum,
                                          process, process_series)
from kinetics.processing.steps import (AlignmentResult, ReferenceResult, align_series, apodize_exponential,
                                       apodize_gaussian, correct_baseline, detect_group_delay, fft, noise_sigma,
                                       peak_position, phase, reference, remove_dc_offset, remove_group_delay,
                                       shift_axis, snr, zero_fill)

__all__ = [
    "remove_dc_offset",
    "detect_group_delay",
    "remove_group_delay",
    "apodize_exponential",
    "apodize_gaussian",
    "zero_fill",
    "fft",
    "phase",
    "PhaseResult",
    "PhaseHint",
    "PHASE_METHODS",
    "auto_phase",
    "acme_score",
    "correct_baseline",
    "reference",
    "ReferenceResult",
    "peak_position",
    "shift_axis",
    "align_series",
    "AlignmentResult",
    "noise_sigma",
    "snr",
    "Pipeline",
    "ProcessedSpectrum",
    "SeriesResult",
    "process",
    "process_series",
    "fid_to_spectrum",
]
