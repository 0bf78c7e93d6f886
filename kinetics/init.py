"""Draft a starter run config from a folder of spectra (``kinetics init``): the config text.

What is read and proposed comes from :mod:`kinetics.proposals`: the first spectrum of the
folder in acquisition order and, when the folder holds more than one, the last (lines that
appear during the reaction belong to products; lines whose height does not change are a
standard or a reference); lines (:mod:`kinetics.signals.lines`) cut into named first-order
multiplets with J in Hz (:mod:`kinetics.signals.multiplets`); roles by nucleus
(:mod:`kinetics.proposals.roles`): for 1H the TMS reference and solvent lines
(:mod:`kinetics.solvents`, common practice, values from memory), written as phase and
noise-region exclusions, never as signals; for 19F and 31P no solvent logic, and a
compound commonly used as their reference (CCl3F, H3PO4, PhCF3, ...;
:mod:`kinetics.nuclei`, from memory) proposed in force and marked PROPOSAL, the draft
then written on its scale.  Otherwise the sharpest isolated unchanging singlet is
proposed in a comment (it aligns the series either way).

Left to the chemist: species names, the standard's concentration, reactant and product.
The draft names the keys to set; until they are set, ``kinetics run`` refuses.
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from kinetics.errors import InputFileError
from kinetics.nuclei import has_solvent_background, scale_reference
from kinetics.proposals.folder import SPECTRUM_SUFFIXES, first_spectrum, rephase_if_needed, series_ends, spectrum_files
from kinetics.proposals.records import ProposedWindow
from kinetics.proposals.roles import named_reference_offset
from kinetics.proposals.windows import noise_region, propose_windows, solvent_exclusions
from kinetics.signals.lines import Peak
from kinetics.signals.multiplets import SIMPLE_PATTERNS
from kinetics.spectra.spectrum import Spectrum


@dataclass(frozen=True)
class Draft:
    """What ``kinetics init`` found and the config text it proposes.

    ``spectrum``, ``peaks`` and ``windows`` are on the scale the config is drafted on: the
    file's axis, or, when a named 19F/31P reference is proposed in force, its scale (the
    file's axis moved so the reference line sits at its tabulated shift).
    """

    source: Path
    config_path: Path
    spectrum: Spectrum
    noise_sigma: float
    threshold: float
    peaks: tuple[Peak, ...]
    windows: tuple[ProposedWindow, ...]
    noise_region_ppm: tuple[float, float] | None
    files: tuple[Path, ...]
    skipped: tuple[str, ...]
    text: str
    last_source: Path | None = None

    @property
    def reference(self) -> ProposedWindow | None:
        exact = next((w for w in self.windows if w.role == "reference"), None)
        return exact or next((w for w in self.windows if w.reference_candidate), None)

    @property
    def solvent(self) -> ProposedWindow | None:
        return next((w for w in self.windows if w.role == "solvent"), None)

    @property
    def solvents(self) -> tuple[ProposedWindow, ...]:
        return tuple(w for w in self.windows if w.role == "solvent")

    @property
    def signals(self) -> tuple[ProposedWindow, ...]:
        return tuple(w for w in self.windows if w.role == "signal" and not w.mixed)


# ---------------------------------------------------------------- the config text
def _escape(text: str) -> str:
    """TOML basic-string escapes for backslash, quote and every control character."""
    out = []
    for char in str(text):
        if char == "\\":
            out.append("\\\\")
        elif char == '"':
            out.append('\\"')
        elif char in "\b\t\n\f\r":
            out.append({"\b": "\\b", "\t": "\\t", "\n": "\\n", "\f": "\\f", "\r": "\\r"}[char])
        elif ord(char) < 0x20 or ord(char) == 0x7F or 0x80 <= ord(char) < 0xA0 or char in "\u2028\u2029\ufeff":
            out.append(f"\\u{ord(char):04X}")
        else:
            out.append(char)
    return "".join(out)


def _q(text: str) -> str:
    """A TOML basic string: nothing in ``text`` can end the string or the line."""
    return '"' + _escape(text) + '"'


def _comment(text: str) -> str:
    """Text safe inside a TOML comment: control characters (a newline in a file name would
    start a new key) are written as escapes."""
    return "".join(_escape(c) if (ord(c) < 0x20 and c != "\t") or ord(c) == 0x7F
                   or 0x80 <= ord(c) < 0xA0 or c in "\u2028\u2029\ufeff" else c for c in str(text))


def _describe(window: ProposedWindow) -> str:
    lines = ", ".join(f"{p.shift_ppm:.3f}" for p in window.peaks)
    text = f"{window.pattern.describe()} ({window.multiplicity}), lines at {lines} ppm"
    return text + f", SNR {max(p.snr for p in window.peaks):.0f}"


def _behaviour(window: ProposedWindow) -> str:
    if window.change is None:
        return ""
    if window.change == math.inf:
        return "appears during the series (a product?)"
    percent = 100.0 * window.change
    if window.change < 0.8:
        return f"falls to {percent:.0f} % of its first height by the last spectrum (a reactant?)"
    if window.change > 1.25:
        return f"grows to {percent:.0f} % of its first height (a product?)"
    return f"steady ({percent:.0f} % of its first height at the end)"


def _pattern(files: list[Path], skipped: list[str]) -> str:
    """Glob for the spectra: ``*<suffix>`` (spectrum_files keeps one suffix), narrowed to
    the readable files' common name prefix when that leaves out every unreadable file (a
    simulator's ``truth.csv`` beside ``spectrum_0001.csv`` ...)."""
    suffix = files[0].suffix
    unreadable = [f for f in files if any(message.startswith(f"{f}") for message in skipped)]
    readable = [f.name for f in files if f not in unreadable]
    prefix = os.path.commonprefix(readable).rstrip("0123456789") if len(readable) > 1 else ""
    if unreadable and prefix and not re.search(r"[][*?{}\\]", prefix) \
            and not any(f.name.startswith(prefix) for f in unreadable):
        return f"{prefix}*{suffix}"
    return f"*{suffix}"


def _signal_lines(window: ProposedWindow, observe_mhz: float, fit_standard: bool = False) -> list[str]:
    """One [[signals]] table with its comments.  ``fit_standard``: the standard candidate
    is fitted too (a singlet line shape), so it is measured like the fitted analytes
    (a region integral misses part of a Lorentzian's tails that a fit keeps)."""
    lo, hi = window.window_ppm
    notes = [_describe(window)]
    if window.mixed:
        notes.append("the first and the last spectrum show different lines here: two species overlap; "
                     "left out (uncomment and give a fit group with two components to use it)")
    elif window.minor:
        notes.append("small signal: a solvent residue or an impurity? delete it if so")
    elif window.crowded and window.pattern.code not in SIMPLE_PATTERNS:
        notes.append("its window is cut short by a neighbour and a fit cannot model this pattern: "
                     "the region integral carries the neighbour's tail; a species of its own")
    else:
        notes.append("nuclei guessed from the integral ratios: check it")
    behaviour = _behaviour(window)
    if behaviour:
        notes.append(behaviour)
    if window.reference_candidate:
        steady = "unchanging" if window.change is not None else "(one spectrum: change unknown)"
        notes.append(f"sharp, isolated, {steady}: the internal standard? then set its "
                     "concentration_mol_per_l below and check its nuclei")
    simple = window.pattern.code in SIMPLE_PATTERNS
    body = [
        "[[signals]]",
        f"name = {_q(window.name)}",
        f"species = {_q(window.species or window.name)}   # EDIT: the compound, e.g. \"ester\" "
        "(signals of one species share it)",
        f"window_ppm = [{lo:.3f}, {hi:.3f}]   # [low, high] ppm",
        f"nuclei = {window.nuclei_guess}                      # nuclei under the signal, per molecule",
    ]
    width = float(np.median([p.width_hz for p in window.peaks]))
    as_standard = fit_standard and window.reference_candidate and window.pattern.code == "s"
    if (window.fit_group or as_standard) and simple:
        shape = f"multiplicity = {_q(window.multiplicity)}"
        if window.pattern.j_hz:
            shape += f", j_hz = {window.pattern.j_hz[0]:.2f}"
        shape += f", width_hz = {max(width, 0.1):.2f}"
        # drift left after alignment is a fraction of a hertz; a centre may move 1.5 Hz, but
        # never 30 % of the way to another multiplet's line (components must not swap)
        tolerance = min(0.03, max(0.005, 1.5 / observe_mhz), 0.3 * window.neighbour_ppm)
        if window.fit_group:
            body += ['method = "fit"                   # too close to its neighbour for a region integral',
                     f"group = {_q(window.fit_group)}            # deconvolved together with its neighbour"]
        else:
            body += ['method = "fit"                   # fitted like the analytes it is compared with']
        body += [f"lineshape = {{ {shape} }}",
                 f"tolerance_ppm = {tolerance:.3f}   # how far the fitted centre may move (ppm)"]
    else:
        body += ['method = "integral"             # or "fit": deconvolution, needs lineshape = '
                 '{multiplicity, j_hz, width_hz}',
                 "# tolerance_ppm = 0.02           # let the window follow a drifting signal (ppm)"]
    if window.reference_candidate:
        body += ["# concentration_mol_per_l = 0.05   # EDIT: the standard's concentration (mol/L); "
                 "setting it makes this the internal standard"]
    else:
        body += ["# concentration_mol_per_l = 0.05   # only for the internal standard (mol/L)"]
    out = ["", *(f"# {_comment(n)}" for n in notes)]
    if window.mixed:
        out += [f"# {line}" for line in body]
    else:
        out += body
    return out


def render_config(spectrum: Spectrum, windows: list[ProposedWindow], folder: Path,
                  noise_region_ppm, config_dir: Path, files: list[Path], skipped: list[str],
                  from_fid: bool = False, phase_note: str | None = None,
                  exclusions: list[tuple[float, float]] = (), last_name: str | None = None,
                  reference_offset_ppm: float = 0.0) -> str:
    """The commented TOML text of a starter run config (loads with
    :func:`kinetics.config.load_run_config`; the species, standard, reactant and product
    are left for the chemist).  ``reference_offset_ppm``: ``spectrum`` and ``windows`` are
    on the scale of a named reference candidate, moved by this much from the file's axis
    (the reference line is then written in force, at its position in the file)."""
    try:
        folder_text = os.path.relpath(folder.resolve(), config_dir.resolve())
    except ValueError:  # different drives (Windows)
        folder_text = str(folder.resolve())
    made = datetime.now(timezone.utc).isoformat(timespec="seconds").replace("+00:00", "Z")
    tms = next((w for w in windows if w.role == "reference"), None)
    zero = scale_reference(spectrum.nucleus)
    zero_name = zero.name if zero is not None else "reference"
    candidate = next((w for w in windows if w.reference_candidate), None)
    solvents = [w for w in windows if w.role == "solvent"]
    residual = next((w for w in solvents if w.expected_ppm is not None), None)
    signals = [w for w in windows if w.role == "signal"]
    usable = [w for w in signals if not w.mixed]
    timed = spectrum.acquired_utc is not None
    source_name = Path(spectrum.source_path or "?").name
    read_from = f"{source_name}, the first of {len(files)} file(s) in acquisition order"
    if last_name:
        read_from += f", and {last_name}, the last"
    out = [
        "# Starter run config drafted by `kinetics init`: edit it, then `kinetics run` it.",
        f"# Drafted {made} from {_comment(read_from)}",
        f"# ({_comment(spectrum.nucleus)}, {spectrum.observe_mhz:.3f} MHz).  Every proposal is a guess: "
        "check it against the spectrum.",
        "#",
        "# TO DO (lines marked EDIT), about 5 edits; `kinetics run` refuses until 2 and 3 are set:",
        "#  1. species: give each signal its compound (`species = ...`; a species placeholder",
        "#     such as falls_1 may be kept, but a name reads better in the report);",
        "#  2. the internal standard: set concentration_mol_per_l in its [[signals]] table, or",
        "#     set [quantify] mode = \"relative\" when there is no standard;",
        "#  3. [quantify] reactant = the species whose decay is fitted;",
        "#  4. [quantify] product = the species formed (for the yield and the mass balance);",
        "#  5. nuclei: guessed from integral ratios, which hold only within one species; the",
        "#     standard's (and any lone signal's) nuclei cannot be read from the spectrum.",
    ]
    out += _nucleus_notes(spectrum)
    out += [f"# skipped unreadable file: {_comment(message)}" for message in skipped]
    out += [
        "",
        "[run]",
        f"folder = {_q(folder_text)}       # spectra folder, relative to this file",
        f"pattern = {_q(_pattern(files, skipped))}              # which files of the folder are spectra (glob)",
        f"order = {_q('time' if timed else 'name')}               # series order: \"time\" or file \"name\"",
        "",
        "[time]",
        f"source = {_q('header' if timed else 'mtime')}            # \"header\" (file's acquisition date), "
        "\"filename\" or \"mtime\"",
        '# reaction_start = "2026-01-01T09:00:00Z"   # t = 0 (ISO 8601 UTC); default: the first spectrum',
        "# first_spectrum_offset_s = 0.0  # time of the first spectrum when no reaction_start is given (s)",
        "",
        "[processing]",
    ]
    if from_fid:
        out.append('phase = "auto"                  # FIDs: DC offset, filter delay, 0.3 Hz broadening, '
                   "zero-fill, phase")
    elif phase_note is not None:
        out.append(f'phase = "auto"                  # {_comment(phase_note)}')
    else:
        out.append('phase = "none"                  # files are spectra already; "auto" re-phases '
                   "when they carry imaginary data")
    if exclusions:
        pairs = ", ".join(f"[{high:.2f}, {low:.2f}]" for high, low in exclusions)
        out.append(f"phase_exclude_ppm = [{pairs}]   # solvent line(s) kept out of the phase score")
    out.append('baseline = "none"               # or "asls", "arpls", "polynomial" for a rolling baseline')
    if tms is not None:
        line = max(tms.peaks, key=lambda p: p.height).shift_ppm
        out.append(f"reference = {{ ppm = 0.0, window_ppm = {_reference_window(tms, windows):.2f} }}"
                   f"   # {_comment(zero_name)}-like line found at {line:.3f} ppm")
    elif residual is not None:
        line = residual.peaks[0].shift_ppm
        out.append(f"# reference = {{ ppm = {line:.3f}, window_ppm = {_reference_window(residual, windows):.2f}, "
                   f"target_ppm = {residual.expected_ppm:.2f} }}   # PROPOSAL: {_comment(residual.label)}; "
                   "confirm it")
    elif candidate is not None and candidate.expected_ppm is not None:
        line = candidate.peaks[0].shift_ppm - reference_offset_ppm  # where it is in the files
        out.append(f"# PROPOSAL: {_comment(candidate.label)}  Confirm the compound and its shift in your "
                   "solvent;")
        out.append("# the windows below are on this reference's scale (the files' axis moved by "
                   f"{reference_offset_ppm:+.3f} ppm).")
        out.append(f"reference = {{ ppm = {line:.3f}, window_ppm = {_reference_window(candidate, windows):.2f}, "
                   f"target_ppm = {candidate.expected_ppm:.2f} }}")
    elif candidate is not None:
        line = candidate.peaks[0].shift_ppm
        out.append(f"# reference = {{ ppm = {line:.2f}, window_ppm = {_reference_window(candidate, windows):.2f} }}"
                   f"   # PROPOSAL: the singlet at {line:.3f} ppm; confirm the compound and its shift")
    else:
        out.append(f"# reference = {{ ppm = 0.0, window_ppm = 0.3 }}   # no {_comment(zero_name)} and no isolated "
                   "singlet found: name a peak")
    anchor = tms or candidate
    if anchor is not None and (tms is not None or candidate.change is not None):
        line = max(anchor.peaks, key=lambda p: p.height).shift_ppm
        half = _reference_window(anchor, windows)
        # a proposed reference moves the line to its tabulated shift: the window holds both
        target = line if tms is not None or anchor.expected_ppm is None else anchor.expected_ppm
        out += ["", "[alignment]",
                f"window_ppm = [{min(line, target) - half:.3f}, {max(line, target) + half:.3f}]   # align every "
                "spectrum on the "
                f"{_comment(zero_name) if tms is not None else 'unchanging singlet'} (the field drifts)",
                "max_shift_ppm = 0.05"]
    out += ["", "[integration]", 'baseline = "edges"              # straight line through the window edges']
    if noise_region_ppm is not None:
        out.append(f"noise_region_ppm = [[{noise_region_ppm[1]:.3f}, {noise_region_ppm[0]:.3f}]]   "
                   "# signal-free stretch for the noise, clear of every window and solvent tail (ppm)")
    if any(w.fit_group for w in usable) and solvents:
        out.append("fit_baseline_order = 3          # a solvent line's Lorentzian tail is curved and "
                   "lopsided across a window")
    out += [
        "",
        "[quantify]",
        "# mode: \"standard\" once a signal has concentration_mol_per_l (the default then);",
        "# mode = \"relative\"             # EDIT instead, when there is no internal standard",
    ]
    falling = sorted({w.species for w in usable if w.change is not None and w.change < 0.8})
    rising = sorted({w.species for w in usable if w.change is not None and w.change > 1.25})
    out.append("# reactant = " + _q(falling[0] if falling else "SPECIES")
               + "          # EDIT: the species fitted" + (f" (falling: {', '.join(falling)})" if falling else ""))
    out.append("# product = " + _q(rising[0] if rising else "SPECIES")
               + "           # EDIT: the species formed" + (f" (rising: {', '.join(rising)})" if rising else ""))
    if len(rising) >= 2:
        weights = ", ".join(f"{name} = {1 if n == 0 else 0}" for n, name in enumerate(rising))
        out.append(f"# stoichiometry = {{ {weights} }}   # EDIT when products form together from one "
                   "reactant: count them once in the mass balance")
    out += ["", "[fit]", '# model = "first"               # rate law (default first order); it fits [quantify] reactant']
    for window in solvents:
        lo, hi = window.window_ppm
        out += ["", f"# Solvent line, left out of the signals (phase and noise exclusion): {_comment(window.label)};",
                f"# {_describe(window)}, window {lo:.3f} .. {hi:.3f} ppm."]
    if tms is not None:
        out += ["", f"# Reference line, left out of the signals: {_describe(tms)}."]
    if not usable:
        out += ["", "# No line rose above the noise threshold: write [[signals]] tables by hand, e.g.",
                "# [[signals]]", '# name = "ester"', "# window_ppm = [4.0, 4.3]", "# nuclei = 2"]
    for window in signals:
        out += _signal_lines(window, spectrum.observe_mhz, fit_standard=any(w.fit_group for w in usable))
    return "\n".join(out) + "\n"


def _nucleus_notes(spectrum: Spectrum) -> list[str]:
    """Comment lines on the nucleus: its scale's zero, the solvent background, the decoupling."""
    zero = scale_reference(spectrum.nucleus)
    notes = []
    if zero is not None and not zero.added:  # (TMS at 0 ppm for 1H and 13C goes without saying)
        notes.append(f"# {zero.nucleus} scale: 0 ppm = {zero.description} ({zero.name}); IUPAC convention, "
                     "from memory.")
    if not has_solvent_background(spectrum.nucleus):
        notes.append(f"# No solvent or water lines looked for: {_comment(spectrum.nucleus)} spectra have no "
                     "solvent background.")
    if spectrum.decoupler:
        notes.append(f"# Decoupling: {_comment(spectrum.decoupler)} (the file's ##.DECOUPLER=).")
    elif zero is None or zero.nucleus != "1H":
        notes.append("# Decoupling: not stated in the file.")
    return notes


def _reference_window(window: ProposedWindow, windows: list[ProposedWindow]) -> float:
    """Half-width searched for the reference line: 0.3 ppm, less when another line is nearer."""
    line = max(window.peaks, key=lambda p: p.height).shift_ppm
    others = [abs(p.shift_ppm - line) for w in windows if w is not window for p in w.peaks]
    return round(max(0.02, min(0.3, 0.8 * min(others, default=1.0))), 2)


def draft_config(folder: str | Path, out: str | Path | None = None, *, force: bool = False,
                 snr_threshold: float = 8.0, coupling_hz: float = 8.0) -> Draft:
    """Read the first (and last) spectrum of ``folder`` and write a commented starter config.

    Parameters
    ----------
    folder : path
        The spectra folder.
    out : path, optional
        Config to write; default ``<folder name>.toml`` beside the folder (not inside it,
        where a watcher would see it among the spectra).
    force : bool
        Replace an existing config (never done otherwise).
    snr_threshold, coupling_hz : float
        See :func:`propose_windows`.

    Raises
    ------
    InputFileError
        Empty folder, unreadable first file, or an existing config without ``force``.
    """
    folder = Path(folder)
    if out is None:
        resolved = folder.resolve()
        out = resolved.parent / f"{resolved.name}.toml"
    out = Path(out)
    if out.exists() and not force:
        raise InputFileError(out, "already exists and was left unchanged",
                             hint="choose another --out or pass --force to replace it")
    spectrum, last, files, skipped, from_fid = series_ends(folder)
    phase_note = None
    if not from_fid:
        spectrum, phase_note = rephase_if_needed(spectrum)
        if last is not None:
            last, _ = rephase_if_needed(last)
    peaks, noise, threshold, windows = propose_windows(spectrum, later=last, snr_threshold=snr_threshold,
                                                       coupling_hz=coupling_hz)
    offset = named_reference_offset(windows)
    if offset:
        # a named reference (19F, 31P) is proposed in force: everything is drafted on its scale
        moved = spectrum.replace(ppm=spectrum.ppm + offset)
        moved_last = None if last is None else last.replace(ppm=last.ppm + offset)
        proposal = propose_windows(moved, later=moved_last, snr_threshold=snr_threshold, coupling_hz=coupling_hz)
        if named_reference_offset(proposal[3]) is not None:  # the same line, now at its tabulated shift
            spectrum, last = moved, moved_last
            peaks, noise, threshold, windows = proposal
        else:
            offset = 0.0
    exclusions = solvent_exclusions(windows, noise, spectrum.observe_mhz, cap_ppm=0.5)
    tails = solvent_exclusions(windows, noise, spectrum.observe_mhz, cap_ppm=1.5)
    region = noise_region(spectrum, windows, tails)
    last_name = None if last is None else Path(last.source_path or "?").name
    text = render_config(spectrum, windows, folder, region, out.parent, files, skipped, from_fid,
                         phase_note=phase_note, exclusions=exclusions, last_name=last_name,
                         reference_offset_ppm=offset or 0.0)
    from kinetics.atomic import write_atomic

    write_atomic(out, text, encoding="utf-8")  # creates the folder; failures are OutputError
    return Draft(source=Path(spectrum.source_path or files[0]), config_path=out, spectrum=spectrum, noise_sigma=noise,
                 threshold=threshold, peaks=tuple(peaks), windows=tuple(windows), noise_region_ppm=region,
                 files=tuple(files), skipped=tuple(skipped), text=text,
                 last_source=None if last is None else Path(last.source_path or files[-1]))


__all__ = ["ProposedWindow", "Draft", "SPECTRUM_SUFFIXES", "spectrum_files", "first_spectrum", "series_ends",
           "propose_windows", "render_config", "draft_config"]
