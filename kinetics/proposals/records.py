"""The records of a proposal: a proposed signal window, and the working record of one
multiplet while the proposal is assembled."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from kinetics.signals.lines import Peak
from kinetics.signals.multiplets import Pattern


@dataclass(frozen=True)
class ProposedWindow:
    """A group of lines proposed as one signal window.

    Attributes
    ----------
    name : str
    window_ppm : (low, high)
    peaks : tuple of Peak
        The lines inside, high shift first.
    role : str
        ``"signal"``, ``"reference"`` (TMS-like line near 0 ppm) or ``"solvent"``.
    integral : float
        Sum of intensities times the point spacing in ppm (for the nuclei guess).
    nuclei_guess : int
        Nuclei from the integral ratios (the smallest signal taken as 1); check it.
    coupling_hz : float or None
        Largest coupling of the multiplet, Hz (None for singlets and "m").
    minor : bool
        Integral below 30 % of the median signal: perhaps a solvent residue or impurity.
    pattern : Pattern
        Multiplet name and couplings.
    label : str
        What a solvent or reference line probably is.
    change : float or None
        Height in the last spectrum over height in the first (``inf``: appears during the
        series; None: only one spectrum).
    mixed : bool
        The lines of the first and the last spectrum differ here: two species overlap.
    species : str
        Placeholder species (``falls_1``, ``rises_1``, ``steady_1``, ``species_1``).
    fit_group : str
        Deconvolution group shared with a too-close neighbour ("" for a region integral).
    reference_candidate : bool
        The sharpest isolated unchanging singlet: proposed as reference and standard.
    expected_ppm : float or None
        Tabulated shift of a residual solvent singlet (a reference proposal when no TMS).
    crowded : bool
        The window stops short of its full margin at a neighbour.
    neighbour_ppm : float
        Distance from its lines to the nearest line of another multiplet (ppm).
    """

    name: str
    window_ppm: tuple[float, float]
    peaks: tuple[Peak, ...]
    role: str
    integral: float
    nuclei_guess: int
    coupling_hz: float | None
    minor: bool = False
    pattern: Pattern = field(default_factory=lambda: Pattern("s"))
    label: str = ""
    change: float | None = None
    mixed: bool = False
    species: str = ""
    fit_group: str = ""
    reference_candidate: bool = False
    expected_ppm: float | None = None
    crowded: bool = False
    neighbour_ppm: float = math.inf

    @property
    def centre_ppm(self) -> float:
        return 0.5 * (self.window_ppm[0] + self.window_ppm[1])

    @property
    def line_centre_ppm(self) -> float:
        return 0.5 * (self.peaks[0].shift_ppm + self.peaks[-1].shift_ppm)

    @property
    def multiplicity(self) -> str:
        return self.pattern.name


@dataclass
class Group:
    """Working record of one multiplet while the proposal is assembled."""

    lines: list[Peak]
    pattern: Pattern
    role: str = "signal"
    label: str = ""
    change: float | None = None
    mixed: bool = False
    reference_candidate: bool = False
    expected_ppm: float | None = None

    @property
    def top(self) -> float:
        return max(p.height for p in self.lines)

    @property
    def centre_ppm(self) -> float:
        return 0.5 * (self.lines[0].shift_ppm + self.lines[-1].shift_ppm)


__all__ = ["Group", "ProposedWindow"]
