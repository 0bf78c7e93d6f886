"""Writers of arrayed series: one file holding a whole reaction series.

The forms :mod:`kinetics.spectra.arrayed` reads, written so that they read back
identically: a JCAMP-DX compound (LINK) file with one block per trace
(:func:`write_arrayed_jcampdx` ``form="link"``, each block bit for bit what the
single-file writer gives), one NTUPLES file with a page per time point (``form="ntuples"``,
one FACTOR for the series) and a matrix table (:func:`write_matrix_table`, exact).
:func:`link_parts` gives a link file in parts, for a writer that appends block by block as
an instrument does.  Every file is written atomically (:mod:`kinetics.atomic`).
"""

from __future__ import annotations

import math
from datetime import timezone
from pathlib import Path

import numpy as np

from kinetics.atomic import write_atomic
from kinetics.spectra import jcampdx
from kinetics.spectra.arrayed import TIME_LABEL
from kinetics.spectra.asdf import encode_table
from kinetics.spectra.spectrum import Fid, Spectrum


def _times(times_s, n: int) -> list[float] | None:
    if times_s is None:
        return None
    times = [float(value) for value in times_s]
    if len(times) != n:
        raise ValueError(f"times_s has {len(times)} values for {n} records")
    if not all(math.isfinite(value) for value in times):
        raise ValueError("times_s must be finite")
    return times


def _check_records(records) -> list:
    records = list(records)
    if not records:
        raise ValueError("an arrayed file needs at least one record")
    kinds = {isinstance(record, Fid) for record in records}
    if len(kinds) > 1 or not all(isinstance(record, (Spectrum, Fid)) for record in records):
        raise ValueError("records must be all Spectrum or all Fid")
    return records


def link_parts(records, times_s=None, compression: str = "dif", title: str | None = None
               ) -> tuple[str, list[str], str]:
    """The text of a JCAMP-DX link file in parts: ``(head, blocks, tail)``.

    ``head + "".join(blocks) + tail`` is what :func:`write_arrayed_jcampdx` writes with
    ``form="link"``; an instrument-like writer appends ``head``, then the blocks one by
    one, then ``tail`` (the link block's ``##END=``).
    """
    records = _check_records(records)
    times = _times(times_s, len(records))
    if title is None:
        title = str(records[0].header.get("TITLE") or "").strip() or "kinetics arrayed series"
    head = "\n".join([f"##TITLE= {title}", "##JCAMP-DX= 5.01", "##DATA TYPE= LINK",
                      f"##BLOCKS= {len(records)}"]) + "\n"
    blocks = []
    for index, record in enumerate(records):
        text = jcampdx.fid_text(record, compression) if isinstance(record, Fid) else \
            jcampdx.spectrum_text(record, compression)
        lines = text.split("\n")
        extra = [f"##BLOCK_ID= {index + 1}"]
        if times is not None:
            extra.append(f"##{TIME_LABEL}= {times[index]!r}")
        lines[4:4] = extra  # after ##TITLE, ##JCAMP-DX, ##DATA TYPE, ##DATA CLASS
        blocks.append("\n".join(lines))
    return head, blocks, "##END=\n"


def _same(records, name: str, values) -> None:
    first = values[0]
    for index, value in enumerate(values[1:], start=1):
        if value != first:
            raise ValueError(f"record {index} has another {name} ({value!r}) than record 0 ({first!r}); "
                             "one NTUPLES file holds one acquisition setup (use form='link')")


def ntuples_text(records, times_s=None, compression: str = "dif", title: str | None = None) -> str:
    """The JCAMP-DX text :func:`write_arrayed_jcampdx` writes with ``form="ntuples"``."""
    records = _check_records(records)
    times = _times(times_s, len(records))
    compression = jcampdx._check_compression(compression)
    first = records[0]
    is_fid = isinstance(first, Fid)
    _same(records, "nucleus", [record.nucleus for record in records])
    _same(records, "observe frequency", [record.observe_mhz for record in records])
    _same(records, "decoupler", [record.decoupler for record in records])
    _same(records, "solvent", [record.header.get(".SOLVENT NAME") for record in records])
    neutral = first.replace(acquired_utc=None, n_scans=None, duration_s=None)
    if title is not None:
        neutral = neutral.replace(header={**first.header, "TITLE": title})
    if is_fid:
        for name in ("n_points", "dwell_s", "carrier_ppm", "group_delay_points"):
            _same(records, name, [getattr(record, name) for record in records])
        width_hz = 1.0 / first.dwell_s
        reference = f"INTERNAL, UNKNOWN, 1, {jcampdx._f(first.carrier_ppm + width_hz / 2.0 / first.observe_mhz)}"
        lines = jcampdx._common_header(neutral, "NMR FID", "NTUPLES", reference)
        if first.group_delay_points:
            lines.append(f"##{jcampdx.GROUP_DELAY_LABEL}= {jcampdx._f(first.group_delay_points)}")
        x_values = np.arange(first.n_points) * first.dwell_s
        x_factor, x_units, name = first.dwell_s, "SECONDS", "NMR FID"
        var_names = ["FID/REAL", "FID/IMAG"]
        reals = [record.data.real for record in records]
        imags = [record.data.imag for record in records]
    else:
        for index, record in enumerate(records[1:], start=1):
            if not np.array_equal(record.ppm, first.ppm):
                raise ValueError(f"record {index} has another ppm axis than record 0; one NTUPLES file holds "
                                 "one axis (use form='link')")
        if len({record.imag is None for record in records}) > 1:
            raise ValueError("some records have an imaginary part and others not")
        x_values = jcampdx._even_axis_hz(first)
        x_factor, x_units, name = abs(x_values[1] - x_values[0]), "HZ", "NMR SPECTRUM"
        reference = (f"INTERNAL, {first.header.get('.SOLVENT NAME') or 'UNKNOWN'}, 1, "
                     f"{jcampdx._f(first.ppm[0])}")
        lines = jcampdx._common_header(neutral, "NMR SPECTRUM", "NTUPLES", reference)
        var_names = ["SPECTRUM/REAL", "SPECTRUM/IMAG"]
        reals = [record.real for record in records]
        imags = [record.imag for record in records] if first.imag is not None else None
    everything = np.concatenate(reals + (imags or []))
    factor = jcampdx._scale_factor(everything)
    columns = [("X", "FREQUENCY" if not is_fid else "TIME", "INDEPENDENT", "AFFN", x_units, x_factor,
                x_values[0], x_values[-1], x_values.min(), x_values.max())]
    form = "ASDF" if compression == "dif" else "AFFN"
    pages = [("R", var_names[0], reals)] + ([("I", var_names[1], imags)] if imags is not None else [])
    integer_pages = {}
    for symbol, var_name, arrays in pages:
        integers = [np.rint(values / factor).astype(np.int64) for values in arrays]
        integer_pages[symbol] = integers
        low = min(int(values.min()) for values in integers) * factor
        high = max(int(values.max()) for values in integers) * factor
        columns.append((symbol, var_name, "DEPENDENT", form, "ARBITRARY UNITS", factor,
                        integers[0][0] * factor, integers[-1][-1] * factor, low, high))
    if times is not None:
        columns.insert(0, ("T", "TIME", "INDEPENDENT", "AFFN", "SECONDS", 1.0, times[0], times[-1],
                           min(times), max(times)))
    n = x_values.size
    dims = [len(records) if symbol == "T" else n for symbol, *_ in columns]
    lines += [
        f"##NTUPLES= {name}",
        f"##VAR_NAME= {', '.join(column[1] for column in columns)}",
        f"##SYMBOL= {', '.join(column[0] for column in columns)}",
        f"##VAR_TYPE= {', '.join(column[2] for column in columns)}",
        f"##VAR_FORM= {', '.join(column[3] for column in columns)}",
        f"##VAR_DIM= {', '.join(str(dim) for dim in dims)}",
        f"##UNITS= {', '.join(column[4] for column in columns)}",
        f"##FACTOR= {', '.join(jcampdx._f(column[5]) for column in columns)}",
        f"##FIRST= {', '.join(jcampdx._f(column[6]) for column in columns)}",
        f"##LAST= {', '.join(jcampdx._f(column[7]) for column in columns)}",
        f"##MIN= {', '.join(jcampdx._f(column[8]) for column in columns)}",
        f"##MAX= {', '.join(jcampdx._f(column[9]) for column in columns)}",
    ]
    for index, record in enumerate(records):
        page = f"T={times[index]!r}" if times is not None else f"N={index + 1}"
        for symbol, _, _ in pages:
            lines.append(f"##PAGE= {page}")
            if symbol == "R":
                if record.acquired_utc is not None:
                    lines.append(f"##LONG DATE= {jcampdx._long_date(record.acquired_utc)}")
                if record.n_scans is not None:
                    lines.append(f"##.AVERAGES= {record.n_scans}")
                if record.duration_s is not None:
                    lines.append(f"##{jcampdx.DURATION_LABEL}= {jcampdx._f(record.duration_s)}")
            lines.append(f"##DATA TABLE= (X++({symbol}..{symbol})), XYDATA")
            lines += encode_table(x_values / x_factor, integer_pages[symbol][index], compression)
    lines += [f"##END NTUPLES= {name}", "##END="]
    return "\n".join(lines) + "\n"


def arrayed_text(records, times_s=None, form: str = "link", compression: str = "dif",
                 title: str | None = None) -> str:
    """The text :func:`write_arrayed_jcampdx` writes (see there)."""
    if form == "link":
        head, blocks, tail = link_parts(records, times_s, compression, title)
        return head + "".join(blocks) + tail
    if form == "ntuples":
        return ntuples_text(records, times_s, compression, title)
    raise ValueError(f"form must be 'link' or 'ntuples', got {form!r}")


def write_arrayed_jcampdx(path: str | Path, records, times_s=None, form: str = "link",
                          compression: str = "dif", title: str | None = None) -> Path:
    """Write a series as one JCAMP-DX 5.01 file, atomically.

    Parameters
    ----------
    path : str or Path
        Destination.
    records : sequence of Spectrum, or of Fid
        One per time point, in order.
    times_s : sequence of float, optional
        Elapsed time of each record.
    form : {"link", "ntuples"}
        ``"link"``: a compound file -- a link block (``##DATA TYPE= LINK``,
        ``##BLOCKS=``) around one block per record exactly as
        :func:`kinetics.spectra.jcampdx.write_spectrum` / ``write_fid`` write it, plus
        ``##BLOCK_ID=`` (1-based) and the time as ``##$KINETICS TIME S=``; each block's
        ``##LONG DATE`` is its record's ``acquired_utc``.  ``"ntuples"``: one NTUPLES
        table with a time column ``T`` (SECONDS; pages ``##PAGE= T=<s>``), or, without
        times, pages ``##PAGE= N=<trace number>``; an R page per record and an I page when
        the records have imaginary parts (FIDs always); per-page ``##LONG DATE``,
        ``##.AVERAGES`` and duration.  All records share one axis and one FACTOR.
    compression : {"dif", "affn"}
        As for the single-spectrum writer.
    title : str, optional
        The file's (link block's) ``##TITLE=``; default the first record's title.

    Notes
    -----
    Link blocks read back exactly as the single-spectrum writer's files do (ordinates
    within FACTOR/2, 8 significant digits of each block's largest value); NTUPLES pages
    share one FACTOR (8 digits of the largest value of the whole series).
    """
    write_atomic(path, arrayed_text(records, times_s, form, compression, title), encoding="ascii")
    return Path(path)


def matrix_text(spectra, times_s, delimiter: str = ",") -> str:
    """The text :func:`write_matrix_table` writes (see there)."""
    spectra = _check_records(spectra)
    if any(isinstance(spectrum, Fid) for spectrum in spectra):
        raise ValueError("a matrix table holds spectra, not FIDs (use write_arrayed_jcampdx)")
    times = _times(times_s, len(spectra))
    if times is None:
        raise ValueError("a matrix table needs times_s (its header row)")
    if delimiter not in (",", "\t", ";"):
        raise ValueError(f"delimiter must be ',', '\\t' or ';', got {delimiter!r}")
    first = spectra[0]
    for index, spectrum in enumerate(spectra):
        if spectrum.imag is not None:
            raise ValueError(f"spectrum {index} has an imaginary part, which a matrix table cannot hold "
                             "(drop it with .replace(imag=None), or use write_arrayed_jcampdx)")
        if not np.array_equal(spectrum.ppm, first.ppm):
            raise ValueError(f"spectrum {index} has another ppm axis than spectrum 0")
    _same(spectra, "nucleus", [spectrum.nucleus for spectrum in spectra])
    _same(spectra, "observe frequency", [spectrum.observe_mhz for spectrum in spectra])
    _same(spectra, "decoupler", [spectrum.decoupler for spectrum in spectra])
    lines = ["# kinetics arrayed series, matrix table (ppm, then one intensity column per time point)"]
    title = first.header.get("TITLE") or first.header.get("title")
    if title:
        lines.append(f"# title: {title}")
    lines += [f"# nucleus: {first.nucleus}", f"# observe_mhz: {first.observe_mhz!r}", "# time_unit: s"]
    if first.decoupler:
        lines.append(f"# decoupler: {first.decoupler}")
    columns = {
        "acquired": [None if s.acquired_utc is None else s.acquired_utc.astimezone(timezone.utc).isoformat()
                     for s in spectra],
        "duration_s": [None if s.duration_s is None else repr(s.duration_s) for s in spectra],
        "n_scans": [None if s.n_scans is None else str(s.n_scans) for s in spectra],
    }
    for key, items in columns.items():
        present = [item is not None for item in items]
        if any(present) and not all(present):
            raise ValueError(f"{key} is given for some spectra and not others")
        if all(present):
            same = len(set(items)) == 1 and key != "acquired"  # dates: always one per column
            lines.append(f"# {key}: {items[0] if same else ' '.join(items)}")
    lines.append(delimiter.join(["ppm"] + [repr(value) for value in times]))
    data = np.column_stack([first.ppm] + [spectrum.real for spectrum in spectra])
    lines += [delimiter.join(map(repr, row)) for row in data.tolist()]
    return "\n".join(lines) + "\n"


def write_matrix_table(path: str | Path, spectra, times_s, delimiter: str = ",") -> Path:
    """Write spectra on one ppm axis as a matrix table, atomically (exact round trip).

    A ``ppm`` column and one intensity column per time point; the header row holds
    ``ppm`` and the times in seconds (``# time_unit: s``); metadata as ``# key: value``
    lines (nucleus, observe_mhz, decoupler, title; acquired, duration_s, n_scans with one
    value or one per column).  Real intensities only: spectra with an imaginary part are
    refused rather than silently cut.
    """
    write_atomic(path, matrix_text(spectra, times_s, delimiter))
    return Path(path)


__all__ = ["write_arrayed_jcampdx", "write_matrix_table", "arrayed_text", "link_parts", "ntuples_text",
           "matrix_text"]
