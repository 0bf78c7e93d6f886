"""Spectrum records and the readers/writers of open formats (JCAMP-DX, delimited text)."""

from kinetics.spectra.spectrum import Fid, Spectrum, sha256_of_file
from kinetics.spectra.reader import read, read_fid, read_spectrum
from kinetics.spectra.jcampdx import write_fid, write_spectrum
from kinetics.spectra.delimited import write_csv
from kinetics.spectra.arrayed import Trace, is_arrayed, read_traces
from kinetics.spectra.arrayed_writers import write_arrayed_jcampdx, write_matrix_table

__all__ = [
    "Fid", "Spectrum", "sha256_of_file",
    "read", "read_spectrum", "read_fid",
    "write_spectrum", "write_fid", "write_csv",
    "Trace", "is_arrayed", "read_traces", "write_arrayed_jcampdx", "write_matrix_table",
]
