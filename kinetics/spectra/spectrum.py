"""The two records every other module trades in: ``Spectrum`` and ``Fid``.

Both are frozen dataclasses validated once on creation; their arrays are read-only
copies, so a record handed down the pipeline can be trusted and shared.  Processing
steps return new records (``dataclasses.replace``) instead of editing old ones.

Conventions
-----------
* ``Spectrum.ppm`` is strictly decreasing (high shift on the left, as drawn); readers
  flip data that arrive the other way round.
* ``Fid.carrier_ppm`` is the chemical shift at zero offset frequency (the centre of the
  transformed spectrum); the transformed axis runs from ``carrier + SW/2`` to
  ``carrier - SW/2`` in ppm.
* Times are UTC, timezone-aware ``datetime`` objects.
"""

from __future__ import annotations

import dataclasses
import hashlib
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from types import MappingProxyType
from typing import Mapping

import numpy as np


def sha256_of_file(path: str | Path) -> str:
    """Hex SHA-256 of a file's bytes (streamed, so large files do not fill memory)."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _frozen_array(values, dtype, name: str) -> np.ndarray:
    array = np.array(values, dtype=dtype, copy=True)
    if array.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {array.shape}")
    if array.size < 2:
        raise ValueError(f"{name} needs at least 2 points, got {array.size}")
    if not np.all(np.isfinite(array)):
        raise ValueError(f"{name} contains NaN or infinite values")
    array.setflags(write=False)
    return array


def _frozen_mapping(mapping: Mapping[str, str] | None) -> Mapping[str, str]:
    return MappingProxyType(dict(mapping or {}))


def _check_common(observe_mhz: float, nucleus: str, acquired_utc, n_scans) -> None:
    if not (np.isfinite(observe_mhz) and observe_mhz > 0):
        raise ValueError(f"observe_mhz must be a positive frequency in MHz, got {observe_mhz!r}")
    if not nucleus:
        raise ValueError("nucleus must be named, e.g. '1H'")
    if acquired_utc is not None and acquired_utc.tzinfo is None:
        raise ValueError("acquired_utc must be timezone-aware (UTC)")
    if n_scans is not None and n_scans < 1:
        raise ValueError(f"n_scans must be at least 1, got {n_scans}")


@dataclass(frozen=True, eq=False)
class Spectrum:
    """A frequency-domain spectrum on a chemical-shift axis.

    Attributes
    ----------
    ppm : ndarray, shape (n,)
        Chemical shift of each point, strictly decreasing.
    real : ndarray, shape (n,)
        Real (absorption) intensities.
    imag : ndarray, shape (n,) or None
        Imaginary (dispersion) intensities when the file carries them.
    nucleus : str
        Observed nucleus, e.g. ``"1H"``.
    observe_mhz : float
        Spectrometer observe frequency in MHz (1 ppm = observe_mhz Hz).
    acquired_utc : datetime or None
        Start of acquisition (UTC).
    duration_s : float or None
        Acquisition duration (all scans) in seconds, when known.
    n_scans : int or None
        Number of co-added scans.
    source_path : str or None
        File the spectrum came from.
    sha256 : str or None
        SHA-256 of that file's bytes.
    header : Mapping[str, str]
        Standard header labels as read (e.g. JCAMP-DX ``TITLE``, ``.SOLVENT NAME``).
    decoupler : str or None
        Heteronuclear decoupling as the file states it (JCAMP-DX ``##.DECOUPLER=``, e.g.
        ``"1H"``); None when the file does not say (not "no decoupling").
    """

    ppm: np.ndarray
    real: np.ndarray
    imag: np.ndarray | None = None
    nucleus: str = "1H"
    observe_mhz: float = 60.0
    acquired_utc: datetime | None = None
    duration_s: float | None = None
    n_scans: int | None = None
    source_path: str | None = None
    sha256: str | None = None
    header: Mapping[str, str] = field(default_factory=dict)
    decoupler: str | None = None

    def __post_init__(self) -> None:
        ppm = _frozen_array(self.ppm, float, "ppm")
        real = _frozen_array(self.real, float, "real")
        if real.shape != ppm.shape:
            raise ValueError(f"real has {real.size} points but ppm has {ppm.size}")
        imag = None
        if self.imag is not None:
            imag = _frozen_array(self.imag, float, "imag")
            if imag.shape != ppm.shape:
                raise ValueError(f"imag has {imag.size} points but ppm has {ppm.size}")
        steps = np.diff(ppm)
        if not (np.all(steps < 0) or np.all(steps > 0)):
            raise ValueError("ppm axis is not strictly monotonic")
        if steps[0] > 0:  # store high-to-low, as spectra are drawn
            ppm, real = ppm[::-1].copy(), real[::-1].copy()
            imag = None if imag is None else imag[::-1].copy()
            for array in (ppm, real, imag):
                if array is not None:
                    array.setflags(write=False)
        _check_common(self.observe_mhz, self.nucleus, self.acquired_utc, self.n_scans)
        if self.duration_s is not None and not (self.duration_s >= 0):
            raise ValueError(f"duration_s must be >= 0, got {self.duration_s!r}")
        object.__setattr__(self, "ppm", ppm)
        object.__setattr__(self, "real", real)
        object.__setattr__(self, "imag", imag)
        object.__setattr__(self, "observe_mhz", float(self.observe_mhz))
        object.__setattr__(self, "header", _frozen_mapping(self.header))

    @property
    def n_points(self) -> int:
        return int(self.ppm.size)

    @property
    def ppm_range(self) -> tuple[float, float]:
        """(high, low) chemical shift of the first and last point."""
        return float(self.ppm[0]), float(self.ppm[-1])

    @property
    def spacing_ppm(self) -> float:
        """Point spacing in ppm (positive)."""
        return float(abs(self.ppm[0] - self.ppm[-1]) / (self.n_points - 1))

    @property
    def spacing_hz(self) -> float:
        return self.spacing_ppm * self.observe_mhz

    @property
    def hz(self) -> np.ndarray:
        """The axis in Hz relative to 0 ppm."""
        return self.ppm * self.observe_mhz

    @property
    def complex(self) -> np.ndarray:
        """real + 1j*imag (imag taken as zero when absent)."""
        imag = self.imag if self.imag is not None else np.zeros_like(self.real)
        return self.real + 1j * imag

    def replace(self, **changes) -> "Spectrum":
        """A copy with some fields changed (validated again)."""
        return dataclasses.replace(self, **changes)

    def index_of(self, shift_ppm: float) -> int:
        """Index of the point nearest to ``shift_ppm``."""
        return int(np.argmin(np.abs(self.ppm - shift_ppm)))


@dataclass(frozen=True, eq=False)
class Fid:
    """A free-induction decay (complex time-domain points).

    Attributes
    ----------
    data : ndarray of complex, shape (n,)
        Quadrature-detected points, first point at t = 0 (or at the filter delay).
    dwell_s : float
        Time between points in seconds; the spectral width is ``1 / dwell_s`` Hz.
    observe_mhz : float
        Observe (carrier) frequency in MHz.
    carrier_ppm : float
        Chemical shift at zero offset frequency, i.e. the centre of the spectrum.
    nucleus : str
        Observed nucleus, e.g. ``"1H"``.
    group_delay_points : float
        Digital-filter delay in points (0 when the FID starts at its maximum); used by
        processing to remove the rising edge and the first-order phase it causes.
    acquired_utc, duration_s, n_scans, source_path, sha256, header, decoupler
        As for :class:`Spectrum`.
    """

    data: np.ndarray
    dwell_s: float
    observe_mhz: float
    carrier_ppm: float = 0.0
    nucleus: str = "1H"
    group_delay_points: float = 0.0
    acquired_utc: datetime | None = None
    duration_s: float | None = None
    n_scans: int | None = None
    source_path: str | None = None
    sha256: str | None = None
    header: Mapping[str, str] = field(default_factory=dict)
    decoupler: str | None = None

    def __post_init__(self) -> None:
        data = _frozen_array(self.data, complex, "data")
        if not (np.isfinite(self.dwell_s) and self.dwell_s > 0):
            raise ValueError(f"dwell_s must be a positive time in seconds, got {self.dwell_s!r}")
        if not np.isfinite(self.carrier_ppm):
            raise ValueError("carrier_ppm must be finite")
        if not (np.isfinite(self.group_delay_points) and self.group_delay_points >= 0):
            raise ValueError("group_delay_points must be >= 0")
        _check_common(self.observe_mhz, self.nucleus, self.acquired_utc, self.n_scans)
        object.__setattr__(self, "data", data)
        object.__setattr__(self, "dwell_s", float(self.dwell_s))
        object.__setattr__(self, "observe_mhz", float(self.observe_mhz))
        object.__setattr__(self, "header", _frozen_mapping(self.header))

    @property
    def n_points(self) -> int:
        return int(self.data.size)

    @property
    def spectral_width_hz(self) -> float:
        return 1.0 / self.dwell_s

    @property
    def time_s(self) -> np.ndarray:
        """Time of each point from the start of acquisition."""
        return np.arange(self.n_points) * self.dwell_s

    def replace(self, **changes) -> "Fid":
        return dataclasses.replace(self, **changes)
