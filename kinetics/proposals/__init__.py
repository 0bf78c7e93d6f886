"""What ``kinetics init`` proposes from a folder of spectra: which spectra it reads
(:mod:`~kinetics.proposals.folder`), the signal windows (:mod:`~kinetics.proposals.windows`),
their roles by nucleus (:mod:`~kinetics.proposals.roles`), their change through the series
(:mod:`~kinetics.proposals.change`) and their nuclei (:mod:`~kinetics.proposals.nuclei_count`).
The config text is drafted by :mod:`kinetics.init`.
"""

from kinetics.proposals.folder import SPECTRUM_SUFFIXES, first_spectrum, series_ends, spectrum_files
from kinetics.proposals.records import ProposedWindow
from kinetics.proposals.windows import propose_windows

__all__ = ["ProposedWindow", "SPECTRUM_SUFFIXES", "first_spectrum", "propose_windows", "series_ends",
           "spectrum_files"]
