"""Signal definitions (what is tracked, where, how) and their validation.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from kinetics import lineshapes
from kinetics.errors import ConfigError


METHODS = ("integral", "fit")
BASELINES = ("edges", "processed")

# ---------------------------------------------------------------- definitions
@dataclass(frozen=True)
class LineShape:
    """Line-shape model of a ``fit`` signal: a first-order n+1 multiplet.

    Attributes
    ----------
    n_lines : int
        Number of lines (1 singlet, 2 doublet, 3 triplet, 4 quartet, ...).
    coupling_hz : float
        J between adjacent lines in Hz (starting value; fitted).
    profile : str
        'lorentzian', 'gaussian' or 'voigt'.
    width_hz : float
        FWHM in Hz of each line (Lorentzian part for a Voigt); starting value, fitted.
    gauss_width_hz : float
        Gaussian FWHM in Hz of a Voigt line (starting value, fitted); ignored otherwise.
    """

    n_lines: int = 1
    coupling_hz: float = 0.0
    profile: str = "lorentzian"
    width_hz: float = 1.0
    gauss_width_hz: float = 0.0


@dataclass(frozen=True)
class SignalDefinition:
    """One tracked signal.

    Attributes
    ----------
    name : str
        Unique name (a table column prefix).
    species : str
        Chemical species it belongs to (several signals may share one).
    window_ppm : tuple of float
        (low, high) integration / fit window in ppm, low < high.
    nuclei : int
        Number of nuclei under the signal (per molecule).
    method : str
        'integral' (region integral with local baseline) or 'fit' (deconvolution).
    lineshape : LineShape or None
        Required for method 'fit'.
    concentration_mol_per_l : float or None
        Known concentration: makes this signal an internal standard.
    concentration_sigma_mol_per_l : float
        Uncertainty of that concentration (0 when exact).
    tolerance_ppm : float
        How far the window may follow a drifting signal (0 switches tracking off).
    group : str
        Fit signals of one group are deconvolved together over the union of their windows.
    correct_truncation : bool
        'integral' only: divide the integral and its sigma by (1 - predicted truncation
        loss); model-dependent (assumes Lorentzian lines), see :func:`integrate_region`.
    """

    name: str
    species: str
    window_ppm: tuple[float, float]
    nuclei: int = 1
    method: str = "integral"
    lineshape: LineShape | None = None
    concentration_mol_per_l: float | None = None
    concentration_sigma_mol_per_l: float = 0.0
    tolerance_ppm: float = 0.0
    group: str = ""
    correct_truncation: bool = False

    @property
    def is_standard(self) -> bool:
        return self.concentration_mol_per_l is not None

    @property
    def fit_group(self) -> str:
        return self.group or self.name

    @property
    def center_ppm(self) -> float:
        return 0.5 * (self.window_ppm[0] + self.window_ppm[1])


def validate_signals(signals, ppm_range: tuple[float, float] | None = None,
                     key: str = "signals") -> None:
    """Check a list of definitions; raise ConfigError naming ``signals[i].field``.

    Rules: unique names, low < high, nuclei >= 1, a known method, a line shape for
    'fit', ``correct_truncation`` only for 'integral', a positive standard concentration, windows inside ``ppm_range`` when given, and
    no two windows overlapping unless both signals are 'fit' signals of one group (and
    then not with the same centre and line shape, which would make the two alike).
    """
    names = set()
    for i, sig in enumerate(signals):
        where = f"{key}[{i}]"
        if sig.name in names:
            raise ConfigError(f"{where}.name", f"duplicate signal name {sig.name!r}")
        names.add(sig.name)
        lo, hi = sig.window_ppm
        if not (math.isfinite(lo) and math.isfinite(hi) and lo < hi):
            raise ConfigError(f"{where}.window_ppm", f"need [low, high] with low < high, got {list(sig.window_ppm)}")
        if not (isinstance(sig.nuclei, int) and sig.nuclei >= 1):
            raise ConfigError(f"{where}.nuclei", f"number of nuclei must be a whole number >= 1, got {sig.nuclei!r}")
        if sig.method not in METHODS:
            raise ConfigError(f"{where}.method", f"unknown method {sig.method!r}", hint="use 'integral' or 'fit'")
        if sig.method == "fit" and sig.lineshape is None:
            raise ConfigError(f"{where}.lineshape", "method 'fit' needs a line-shape model")
        if sig.lineshape is not None:
            _validate_lineshape(sig.lineshape, f"{where}")
        if sig.is_standard and not (sig.concentration_mol_per_l > 0):
            raise ConfigError(f"{where}.concentration_mol_per_l", "a standard's concentration must be > 0")
        if sig.tolerance_ppm < 0:
            raise ConfigError(f"{where}.tolerance_ppm", "must be >= 0")
        if sig.correct_truncation and sig.method != "integral":
            raise ConfigError(f"{where}.correct_truncation", "only region integrals are corrected for truncation",
                              hint="a fitted area already includes the line tails; remove the key")
        if ppm_range is not None:
            low_axis, high_axis = min(ppm_range), max(ppm_range)
            if lo < low_axis or hi > high_axis:
                raise ConfigError(f"{where}.window_ppm",
                                  f"window {list(sig.window_ppm)} lies outside the axis "
                                  f"{low_axis:.3f}..{high_axis:.3f} ppm")
    for i, a in enumerate(signals):
        for j in range(i + 1, len(signals)):
            b = signals[j]
            if a.window_ppm[0] < b.window_ppm[1] and b.window_ppm[0] < a.window_ppm[1]:
                if a.method == b.method == "fit" and a.fit_group == b.fit_group:
                    # a component starts at its window's centre: two alike starts cannot tell
                    # which line is which, and the fit may swap them between spectra
                    if abs(a.center_ppm - b.center_ppm) < 1e-6 and a.lineshape == b.lineshape:
                        raise ConfigError(f"{key}[{j}].window_ppm",
                                          f"{b.name!r} and {a.name!r} ({key}[{i}]) have the same window "
                                          "centre and line shape, so the fit cannot tell them apart",
                                          hint="centre each signal's window on its own line")
                    continue
                raise ConfigError(f"{key}[{j}].window_ppm",
                                  f"window of {b.name!r} overlaps that of {a.name!r} ({key}[{i}])",
                                  hint="separate the windows, or make both method 'fit' in one group")


def _validate_lineshape(shape: LineShape, where: str) -> None:
    if not (isinstance(shape.n_lines, int) and shape.n_lines >= 1):
        raise ConfigError(f"{where}.lineshape.lines", "number of lines must be >= 1")
    if shape.profile not in lineshapes.PROFILES:
        raise ConfigError(f"{where}.lineshape.profile", f"unknown profile {shape.profile!r}",
                          hint=f"use one of {', '.join(lineshapes.PROFILES)}")
    if not shape.width_hz > 0:
        raise ConfigError(f"{where}.lineshape.width_hz", "line width must be > 0 Hz")
    if shape.n_lines > 1 and not shape.coupling_hz > 0:
        raise ConfigError(f"{where}.lineshape.j_hz", "a multiplet needs J > 0 Hz")
    if shape.profile == "voigt" and not shape.gauss_width_hz > 0:
        raise ConfigError(f"{where}.lineshape.gauss_width_hz", "a Voigt line needs a Gaussian width > 0 Hz")

