"""Spectrum records and the readers/writers of open formats (JCAMP-DX, delimited text)."""

from kinetics.spectra.spectrum import Fid, Spectrum, sha256_of_file

__all__ = ["Fid", "Spectrum", "sha256_of_file"]
