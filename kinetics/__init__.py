"""kinetics: NMR spectra recorded during a reaction -> rate constants with honest intervals."""

__version__ = "0.1.0"
