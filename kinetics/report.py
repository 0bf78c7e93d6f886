"""A report folder: one self-contained HTML page, a PDF, every table as CSV (and Parquet).

The caller hands over :class:`Section` objects built from plain blocks (a figure, a
table, some paragraphs); :func:`write_report` writes

``report.html``
    opens offline: CSS inline, figures inline as base64 PNG, no scripts and no external
    links; every piece of user text is HTML-escaped.
``report.pdf``
    typeset A4 (reportlab, pure Python from the package index): a summary page (key
    results, warnings, the safety caution), then figures with numbered captions (vector,
    placed with pypdf) and real tables; fonts are embedded TrueType subsets (no Type 3).
``tables/<name>.csv`` (and ``.parquet`` when pyarrow is importable)
    each table exactly as handed in (machine column names that carry units, full
    precision), plus the provenance tables.  People read the tables with "quantity /
    unit" headings and rounded numbers (:mod:`kinetics.numbers`).
``figures/<name>.svg`` and ``figures/<name>.png`` (300 dpi), ``config.toml``, ``provenance.json``

Every file is written to a temporary name in the same folder and renamed into place, so a
reader never sees half a report.  Provenance (config text, package versions, input-file
hashes, run time in ISO 8601 UTC) and the safety cautions are always included.

Helpers :func:`parameters_frame` and :func:`comparison_frame` turn the ``to_dict()``
shapes of fits (``{"value", "stderr", "ci95", "unit"}`` per parameter) into tables.
"""

from __future__ import annotations

import base64
import html
import importlib.metadata
import io
import logging
import platform
import re
from dataclasses import dataclass, field, replace
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from kinetics import numbers, plots
from kinetics.atomic import moved_path, staged_folder, write_atomic
from kinetics.jsonio import dumps
from kinetics.plots import png_bytes

__all__ = [
    "FigureBlock",
    "TableBlock",
    "TextBlock",
    "Section",
    "Provenance",
    "ReportFiles",
    "SAFETY_CAUTIONS",
    "write_report",
    "write_atomic",
    "package_versions",
    "parameters_frame",
    "comparison_frame",
    "spectra_section",
    "fit_section",
    "temperature_section",
    "global_section",
]

logger = logging.getLogger(__name__)

SAFETY_HEADING = "Safety first"
PROVENANCE_HEADING = "Where these results come from"

# Our own wording; shown in every report, HTML and PDF alike.
SAFETY_CAUTIONS: tuple[str, ...] = (
    "Reactions can run away. A rate constant measured in an NMR tube says little about how "
    "fast heat builds up in a larger vessel, and a runaway can develop faster than any "
    "spectrum can record it.",
    "Heated or pressurised NMR tubes can crack or burst. Use tubes and caps rated for the "
    "temperature and pressure, stay within their limits and shield yourself.",
    "The magnet is always on. Its field pulls steel tools and other magnetic objects, and it "
    "can disturb pacemakers and other implanted devices: keep such objects and people with "
    "implants outside the marked zone.",
    "Follow your local safety rules, and work under qualified supervision.",
    "Kinetic parameters from this report are not a substitute for a calorimetric hazard "
    "assessment (for example reaction calorimetry or DSC) before a reaction is scaled up.",
)

# Distributions whose versions are recorded in every report.
_PACKAGES = ("kinetics", "numpy", "scipy", "pandas", "lmfit", "matplotlib", "nmrglue",
             "pybaselines", "watchdog", "uncertainties", "pyarrow")


# ---------------------------------------------------------------- blocks
@dataclass(frozen=True)
class FigureBlock:
    """A figure with a heading and a caption; ``name`` is the PNG file stem."""

    heading: str
    figure: Figure
    caption: str = ""
    name: str = ""


@dataclass(frozen=True)
class TableBlock:
    """A table (written as CSV under ``name``) with a heading and a caption.

    ``frame`` keeps machine column names and full precision (it is what the CSV holds).
    People see ``display`` when given, else :func:`kinetics.numbers.human_frame` of
    ``frame``: "quantity / unit" headings, value and uncertainty rounded together.
    """

    heading: str
    frame: pd.DataFrame
    name: str = ""
    caption: str = ""
    digits: int = 5
    display: pd.DataFrame | None = None


@dataclass(frozen=True)
class TextBlock:
    """Plain paragraphs (escaped), or one preformatted text (``preformatted=True``)."""

    heading: str
    paragraphs: tuple[str, ...] = ()
    preformatted: bool = False


@dataclass(frozen=True)
class Section:
    """One part of the report: a heading, an optional introduction and its blocks."""

    heading: str
    blocks: tuple = ()
    intro: str = ""


@dataclass(frozen=True)
class Provenance:
    """What the results were made from.

    Attributes
    ----------
    config_text : str or None
        The configuration as the user wrote it.
    input_files : DataFrame or sequence of (file, sha256), optional
        The files read, with their SHA-256.
    run_utc : datetime or None
        When the run was made (default: now).  Written as ISO 8601 UTC.
    packages : mapping name -> version, optional
        Default: :func:`package_versions`.
    extra : mapping str -> str
        Anything else worth recording (command line, seed, ...).
    """

    config_text: str | None = None
    input_files: Any = None
    run_utc: datetime | None = None
    packages: Mapping[str, str] | None = None
    extra: Mapping[str, str] = field(default_factory=dict)


@dataclass(frozen=True)
class ReportFiles:
    """Paths of what :func:`write_report` wrote."""

    folder: Path
    html: Path
    pdf: Path
    figures: Mapping[str, Path]
    csv: Mapping[str, Path]
    parquet: Mapping[str, Path]
    run_utc: str


# ---------------------------------------------------------------- small helpers
def package_versions(names: Sequence[str] = _PACKAGES) -> dict[str, str]:
    """Installed versions (``importlib.metadata``) of the packages results depend on."""
    versions = {"python": platform.python_version()}
    for name in names:
        try:
            versions[name] = importlib.metadata.version(name)
        except importlib.metadata.PackageNotFoundError:
            versions[name] = "not installed"
    return versions


def _iso_utc(moment: datetime | None) -> str:
    moment = moment or datetime.now(timezone.utc)
    if moment.tzinfo is None:
        raise ValueError("run_utc must be timezone-aware")
    return moment.astimezone(timezone.utc).isoformat(timespec="seconds").replace("+00:00", "Z")


def _slug(text: str, taken: set[str]) -> str:
    stem = re.sub(r"[^A-Za-z0-9_.-]+", "_", text.strip()).strip("._").lower() or "item"
    candidate, number = stem, 2
    while candidate in taken:
        candidate, number = f"{stem}_{number}", number + 1
    taken.add(candidate)
    return candidate


def _plain_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """The table with a meaningful index turned into columns (CSV and HTML show the same)."""
    if isinstance(frame.index, pd.RangeIndex) and frame.index.name is None:
        return frame
    return frame.reset_index()


def _format_cell(value, digits: int) -> str:
    if value is None:
        return "–"
    if isinstance(value, (float, np.floating)):
        return "–" if not np.isfinite(value) else f"{value:.{digits}g}"
    if isinstance(value, (list, tuple, np.ndarray)):
        return "[" + ", ".join(_format_cell(v, digits) for v in value) + "]"
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if value is pd.NA or value is pd.NaT:
        return "–"
    return str(value)


def _display_frame(block: "TableBlock") -> pd.DataFrame:
    """The table as people read it (headings with units, numbers rounded), all text."""
    if block.display is not None:
        return _plain_frame(block.display).astype(str)
    return numbers.human_frame(_plain_frame(block.frame))


def _input_frame(inputs) -> pd.DataFrame:
    if inputs is None:
        return pd.DataFrame({"file": pd.Series(dtype=str), "sha256": pd.Series(dtype=str)})
    if isinstance(inputs, pd.DataFrame):
        return _plain_frame(inputs)
    rows = [tuple(row) for row in inputs]
    return pd.DataFrame(rows, columns=["file", "sha256"])


# ---------------------------------------------------------------- frames from to_dict()
def parameters_frame(params: Mapping[str, Mapping[str, Any]], run: str | None = None) -> pd.DataFrame:
    """A table of fitted parameters from ``{name: {"value","stderr","ci95","unit"}}``.

    Returns
    -------
    DataFrame
        Columns ``parameter, value, stderr, ci95_low, ci95_high, unit`` (and ``run`` first
        when given), one row per parameter.
    """
    rows = []
    for name, entry in params.items():
        interval = entry.get("ci95") or [None, None]
        row = {"parameter": str(name), "value": entry.get("value"), "stderr": entry.get("stderr"),
               "ci95_low": interval[0], "ci95_high": interval[1], "unit": entry.get("unit", "")}
        rows.append(({"run": run} if run is not None else {}) | row)
    frame = pd.DataFrame(rows)
    for column in ("value", "stderr", "ci95_low", "ci95_high"):
        if column in frame:
            frame[column] = pd.to_numeric(frame[column], errors="coerce").astype(float)
    return frame


def comparison_frame(table) -> pd.DataFrame:
    """The model-comparison table as a DataFrame (accepts a DataFrame or a list of dicts)."""
    if isinstance(table, pd.DataFrame):
        return _plain_frame(table)
    return pd.DataFrame(list(table))


# ---------------------------------------------------------------- ready-made sections
def spectra_section(spectra, *, windows=None, time_s=None, heading: str = "Spectra through time",
                    title: str | None = None, max_traces: int = 12, total: int | None = None,
                    height_in: float | None = None) -> Section:
    """Stacked spectra with the tracked windows (see :func:`kinetics.plots.stacked_spectra_figure`).

    ``total`` is the number of spectra in the run when ``spectra`` is already a selection
    (the caption then says "12 of 36 spectra").
    """
    figure = plots.stacked_spectra_figure(spectra, time_s=time_s, windows=windows, title=title,
                                          max_traces=max_traces, height_in=height_in)
    shown = min(len(spectra), max(2, max_traces))
    total = len(spectra) if total is None else max(int(total), shown)
    count = (f"{shown} of {total} spectra shown, evenly spaced through the run" if total != shown
             else f"{shown} spectra")
    caption = (f"{count}, first at the bottom, each labelled with its time from the start; shaded bands are the "
               "tracked signal windows" + ("; traces are scaled to the tracked signals and taller lines "
                                           "(a solvent) are clipped." if windows else "."))
    return Section(heading, (FigureBlock("Stacked spectra", figure, caption, name=f"{heading}_spectra"),))


def _sentence(text) -> str:
    """A message as a sentence of a caption: capital first letter, full stop."""
    text = str(text).strip()
    text = text[:1].upper() + text[1:]
    return text if text.endswith((".", "!", "?")) else text + "."


def fit_section(fit, *, heading: str = "Concentrations and fitted rate law", comparison=None,
                concentration_unit: str = "mol L⁻¹", n_curve: int = 300, name: str = "fit",
                species: Mapping[str, Any] | None = None, fit_report: bool = True,
                compact: bool = False) -> Section:
    """Courses with fit, 95 % band and residuals, parameter and statistics tables.

    Parameters
    ----------
    fit : kinetics.rates.fit.FitResult
        Read through ``time_s``, ``observed``/``fitted`` (m, n), ``columns``, ``band(t)``,
        ``data.sigma`` and ``to_dict()``.
    comparison : ModelComparison or DataFrame, optional
        Candidate rate laws ranked by AICc (its ``verdict`` is shown when present).
    name : str
        Stem of the table and figure files.
    species : mapping name -> values or (values, sigma), optional
        Further measured series on the fit's time points (products, the standard, a mass
        balance), each array shape (n,), drawn as points with their own marker and error bars
        (no curve: the rate law did not fit them).  E.g. from the series table:
        ``{"alcohol": (table["alcohol_concentration"], table["alcohol_concentration_sigma"]),
        "mass balance": ester + alcohol}``.
    fit_report : bool
        Add the fit's plain-text report (studies leave it out: the tables hold the same).
    compact : bool
        Give the fit statistics in the parameters' caption instead of a table of their own.
    """
    columns = [plots.species_label(str(c)) for c in fit.columns]
    figure = plots.fit_figure(fit, species=species, concentration_unit=concentration_unit, n_curve=n_curve)
    summary = fit.to_dict()
    status = "converged" if summary.get("converged") else "did NOT converge"
    others = [label for label in dict.fromkeys(plots.species_label(str(name)) for name in (species or {}))
              if label not in columns]
    shown = (f"Points: measured {', '.join(columns + others)} (error bars: standard uncertainty); "
             f"lines: the fitted rate law for {', '.join(columns)}"
             + (" (the other courses are measured only, not fitted)" if others else ""))
    blocks = [FigureBlock("Measured and fitted concentrations", figure,
                          f"Model {summary.get('model')}: {summary.get('description', '')}. {shown}. Shaded: 95 % "
                          "band of the fitted curve; lower panel: measured minus fitted.", name=f"{name}_courses"),
              TableBlock("Fitted parameters", parameters_frame(summary["params"]), name=f"{name}_parameters",
                         caption=f"Fit {status}: {summary.get('message', '')}. Value ± standard uncertainty; "
                                 "95 % interval."),
              TableBlock("Fit statistics", pd.DataFrame([{key: summary.get(key) for key in (
                  "model", "n_points", "dof", "chi_square", "reduced_chi_square", "aicc", "bic", "converged")}]),
                  name=f"{name}_statistics")]
    if compact:
        # the statistics as one sentence of the parameters' caption (the CSV keeps the table)
        blocks.pop()  # the statistics table (its CSV is not needed: fit.json holds them)
        facts = "; ".join(
            f"{label} {numbers.format_value(summary.get(key), 4) if isinstance(summary.get(key), float) else summary.get(key)}"
            for key, label in (("n_points", "points"), ("dof", "degrees of freedom"), ("chi_square", "χ²"),
                               ("reduced_chi_square", "reduced χ²"), ("aicc", "AICc")) if summary.get(key) is not None)
        blocks[1] = TableBlock(blocks[1].heading, blocks[1].frame, name=blocks[1].name,
                               caption=f"{blocks[1].caption} {facts}.")
    half = fit.half_life() if hasattr(fit, "half_life") and summary.get("converged") else None
    if half is not None and np.isfinite(half.value):
        u = getattr(half, "stderr", None)
        text = numbers.format_duration(half.value, u if u is not None and np.isfinite(u) else None)
        if half.ci95 is not None and all(np.isfinite(half.ci95)):
            unit, scale = numbers.duration_unit(half.value)
            text += f" (95 %: {numbers.format_interval(half.ci95[0] / scale, half.ci95[1] / scale, unit)})"
        blocks[0] = FigureBlock(blocks[0].heading, blocks[0].figure, blocks[0].caption + f" Half-life {text}.",
                                name=blocks[0].name)
    if comparison is not None:
        table = comparison.table if hasattr(comparison, "table") else comparison
        verdict = getattr(comparison, "verdict", "")
        blocks.append(TableBlock("Rate laws compared", comparison_frame(table), name=f"{name}_model_comparison",
                                 caption=verdict))
    if fit_report and hasattr(fit, "report"):
        blocks.append(TextBlock("Fit report", (fit.report(),), preformatted=True))
    return Section(heading, tuple(blocks))


def _temperature_lines(result, n_line: int) -> tuple[dict, dict]:
    from kinetics.temperature import quantile95

    t = np.asarray(result.temperature_kelvin, float)
    line_t = np.linspace(t.min() - 2.0, t.max() + 2.0, n_line)
    lines = []
    for line_fit in (result.arrhenius, result.eyring):
        value, stderr = line_fit.predict(1.0 / line_t, result.basis)
        q = quantile95(result.basis, line_fit.dof)
        lines.append({"temperature_kelvin": line_t, "value": value, "low": value - q * stderr,
                      "high": value + q * stderr})
    return lines[0], lines[1]


def temperature_section(result, *, heading: str = "Temperature dependence", n_line: int = 100,
                        name: str = "temperature", global_result=None) -> Section:
    """Arrhenius and Eyring plots with their 95 % bands, per-run and parameter tables.

    ``result`` is a :class:`kinetics.temperature.TemperatureResult` (read through
    ``temperature_kelvin``, ``k``, ``k_stderr``, ``labels``, the two line fits, ``basis``,
    ``table()`` and ``to_dict()``).
    """
    summary = result.to_dict()
    arrhenius_line, eyring_line = _temperature_lines(result, n_line)
    arrhenius = plots.arrhenius_figure(result, global_result=global_result, line=arrhenius_line)
    eyring = plots.eyring_figure(result, global_result=global_result, line=eyring_line)
    keys = [k for k in ("ea_kj_per_mol", "ln_a", "a_per_s", "a", "dh_kj_per_mol", "ds_j_per_mol_k",
                        "dg_kj_per_mol") if isinstance(summary.get(k), Mapping)]
    parameters = parameters_frame({k: summary[k] for k in keys})
    band_note = (f"Points: ln k of each run ± standard uncertainty; shaded: 95 % band of the weighted line "
                 f"({summary.get('interval_method', '')})" + ("; dashed: the global fit" if global_result is not None
                                                             else "") + ".")
    display = parameters.copy()
    display["parameter"] = [numbers.column_heading(p).split(" / ")[0] for p in display["parameter"]]
    t_ref = summary.get("t_ref_kelvin")
    notes = [f"ΔG‡ at {t_ref:.2f} K." if isinstance(t_ref, (int, float)) else ""]
    notes += [_sentence(w) for w in summary.get("warnings", []) if str(w).strip()]
    blocks = (
        FigureBlock("Arrhenius plot", arrhenius, band_note, name=f"{name}_arrhenius"),
        FigureBlock("Eyring plot", eyring, band_note.replace("ln k of each run", "ln(k/T) of each run")
                    + " Transmission coefficient taken as 1.",
                    name=f"{name}_eyring"),
        TableBlock("Activation parameters", parameters, name=f"{name}_parameters",
                   caption=" ".join(n for n in notes if n) + " Value ± standard uncertainty; 95 % interval.",
                   display=numbers.human_frame(display)),
        TableBlock("Rate constant of each run", result.table(), name=f"{name}_runs",
                   display=numbers.human_frame(result.table()[["label", "temperature_kelvin", "temperature_c", "k",
                                                                "k_stderr", "ln_k", "ln_k_residual"]],
                                               units={"k": result.k_unit})),
    )
    return Section(heading, blocks)


def global_section(global_result, runs=None, model=None, *, heading: str = "Global fit across temperature",
                   name: str = "global") -> Section:
    """The global fit: every run's data with the globally fitted curves and residuals, and the
    two-step versus global comparison table (see :func:`kinetics.plots.global_fit_figure`).

    ``runs`` (the :class:`~kinetics.temperature.KineticRun` list) and ``model`` (the
    :class:`~kinetics.temperature.GlobalModel`) are needed for the figure; without them
    only the table and the text report are given.
    """
    blocks = []
    if runs:
        figure = plots.global_fit_figure(runs, global_result, model)
        ea = global_result.ea
        blocks.append(FigureBlock("Global fit", figure,
                                  f"Every run fitted at once with k(T) = k_ref exp(−(Ea/R)(1/T − 1/T_ref)), "
                                  f"Ea = {numbers.format_uncertain(ea.value, ea.stderr, 'kJ/mol')}; lower panels: "
                                  "measured minus fitted.", name=f"{name}_fit"))
    rows = global_result.comparison()
    facts = global_result.to_dict()
    notes = []
    if facts.get("n_points") is not None:
        notes.append(f"{facts['n_points']} points of {len(facts.get('runs') or runs or [])} runs, "
                     f"{facts.get('dof')} degrees of freedom")
    if isinstance(facts.get("reduced_chi2"), (int, float)):
        notes.append(f"reduced χ² {facts['reduced_chi2']:.2f}")
    if isinstance(facts.get("t_ref_kelvin"), (int, float)):
        notes.append(f"T_ref = {facts['t_ref_kelvin']:.2f} K")
    profile = facts.get("ea_profile_ci95_kj_per_mol")
    if profile and all(isinstance(x, (int, float)) and np.isfinite(x) for x in profile):
        notes.append(f"profile-likelihood 95 % interval of Ea {numbers.format_interval(*profile, 'kJ/mol')}")
    if isinstance(facts.get("correlation_ea_ln_k_ref"), (int, float)):
        notes.append(f"correlation of Ea and ln k_ref {facts['correlation_ea_ln_k_ref']:.2f}")
    method = facts.get("interval_method")
    caption = ("Value ± standard uncertainty; 95 % interval. Global fit: " + "; ".join(notes) + "."
               + (f" Intervals: {method}." if method else ""))
    if rows:
        blocks.append(TableBlock("Two-step and global estimates compared", pd.DataFrame(rows),
                                 name="two_step_vs_global", caption=caption))
    else:
        blocks.append(TextBlock("Global fit report", (global_result.report(),), preformatted=True))
    return Section(heading, tuple(blocks))


# ---------------------------------------------------------------- HTML
_CSS = """
:root { --ink: #1f2f56; --muted: #5b6070; --line: #c9ccd4; --paper: #fbfaf6; --band: #efe9d8; }
* { box-sizing: border-box; }
body { margin: 0; background: var(--paper); color: #1d1d1f;
       font: 15px/1.5 "DejaVu Sans", "Liberation Sans", Arial, sans-serif; }
header { background: var(--ink); color: #fff; padding: 1.4rem 2rem 1rem; }
header h1 { margin: 0 0 .3rem; font-size: 1.6rem; font-weight: 600; }
header p { margin: 0; color: #d5dbea; font-size: .9rem; }
main { max-width: 1100px; margin: 0 auto; padding: 1rem 2rem 3rem; }
nav ol { columns: 2; padding-left: 1.2rem; margin: .4rem 0 1rem; }
nav a { color: var(--ink); }
section { border-top: 3px solid var(--ink); margin-top: 2rem; padding-top: .4rem; }
h2 { color: var(--ink); font-size: 1.3rem; margin: .3rem 0 .6rem; }
h3 { font-size: 1.05rem; margin: 1.2rem 0 .4rem; }
figure { margin: .6rem 0 1.2rem; background: #fff; border: 1px solid var(--line); padding: .6rem; }
figure img { display: block; max-width: 100%; height: auto; margin: 0 auto; }
div.narrow { display: inline-block; vertical-align: top; width: calc(50% - .6rem); margin-right: .5rem; }
figcaption { color: var(--muted); font-size: .85rem; margin-top: .4rem; }
.table-wrap { overflow-x: auto; margin: .4rem 0 1rem; }
table { border-collapse: collapse; font-size: .85rem; background: #fff; }
th, td { border: 1px solid var(--line); padding: .25rem .55rem; text-align: right; }
th { background: var(--band); text-align: center; }
td.text { text-align: left; }
tbody tr:nth-child(even) { background: #f4f5f8; }
.caption { color: var(--muted); font-size: .85rem; margin: .2rem 0 .6rem; }
.csv { font-family: "DejaVu Sans Mono", monospace; font-size: .8rem; color: var(--muted); }
dl.summary { display: grid; grid-template-columns: max-content 1fr; gap: .2rem 1rem; }
dl.summary dt { font-weight: 600; }
dl.summary dd { margin: 0; }
.caution { background: #fff4e0; border: 2px solid #8a5a12; padding: .6rem 1.2rem; }
.caution li { margin: .25rem 0; }
pre { background: #fff; border: 1px solid var(--line); padding: .6rem; overflow-x: auto;
      font-size: .8rem; }
"""


def _e(text) -> str:
    return html.escape(str(text), quote=True)


def _html_table(frame: pd.DataFrame, digits: int) -> str:
    frame = _plain_frame(frame)
    head = "".join(f'<th scope="col">{_e(column)}</th>' for column in frame.columns)
    text_columns = {c for c in frame.columns
                    if not pd.api.types.is_numeric_dtype(frame[c])
                    and not frame[c].astype(str).str.match(r"^[\s\d.,±×⁰¹²³⁴⁵⁶⁷⁸⁹⁻()−–-]*(to)?[\s\d.,±×⁰¹²³⁴⁵⁶⁷⁸⁹⁻()−–-]*$").all()}
    body = []
    for row in frame.itertuples(index=False, name=None):
        cells = []
        for column, value in zip(frame.columns, row):
            css = ' class="text"' if column in text_columns else ""
            cells.append(f"<td{css}>{_e(_format_cell(value, digits))}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return (f'<div class="table-wrap"><table><thead><tr>{head}</tr></thead>'
            f"<tbody>{''.join(body)}</tbody></table></div>")


def _paragraphs_html(paragraphs: Sequence[str]) -> str:
    return "".join(f"<p>{_e(p)}</p>" for p in paragraphs if str(p).strip())


def _block_html(block, figure_png: Mapping[int, bytes], table_names: Mapping[int, str]) -> str:
    if isinstance(block, FigureBlock):
        data = base64.b64encode(figure_png[id(block)]).decode("ascii")
        caption = f"<figcaption>{_e(block.caption)}</figcaption>" if block.caption else ""
        # The alt text says what the figure shows for screen readers and when images are off.
        alt = f"{block.heading}. {block.caption}" if block.caption else block.heading
        # shown at 1.6 times its print size (a single-column figure ~510 px, double ~1060 px),
        # never wider than the page; single-column figures sit side by side
        width_px = int(round(block.figure.get_size_inches()[0] * 96 * 1.6))
        narrow = block.figure.get_size_inches()[0] * 2.54 < 12.0
        inner = (f"<h3>{_e(block.heading)}</h3><figure><img src=\"data:image/png;base64,{data}\" "
                 f"style=\"width:{width_px}px\" alt=\"{_e(alt)}\">{caption}</figure>")
        return f'<div class="narrow">{inner}</div>' if narrow else inner
    if isinstance(block, TableBlock):
        caption = f'<p class="caption">{_e(block.caption)}</p>' if block.caption else ""
        return (f"<h3>{_e(block.heading)}</h3>{caption}{_html_table(_display_frame(block), block.digits)}"
                f'<p class="csv">tables/{_e(table_names[id(block)])}.csv</p>')
    if isinstance(block, TextBlock):
        if block.preformatted:
            return f"<h3>{_e(block.heading)}</h3><pre>{_e(chr(10).join(block.paragraphs))}</pre>"
        return f"<h3>{_e(block.heading)}</h3>{_paragraphs_html(block.paragraphs)}"
    raise TypeError(f"unknown report block {type(block).__name__}")


def _html_page(title, run_utc, summary, sections, figure_png, table_names, provenance_html, warnings=()) -> str:
    toc = "".join(f'<li><a href="#part-{n}">{_e(s.heading)}</a></li>'
                  for n, s in enumerate(sections, start=1))
    toc += f'<li><a href="#safety">{_e(SAFETY_HEADING)}</a></li>'
    toc += f'<li><a href="#provenance">{_e(PROVENANCE_HEADING)}</a></li>'
    summary_html = ""
    if summary:
        items = "".join(f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in summary.items())
        summary_html = f'<section id="summary"><h2>Summary</h2><dl class="summary">{items}</dl></section>'
    if warnings:
        summary_html += ('<section id="warnings"><h2>Warnings</h2><ul>'
                         + "".join(f"<li>{_e(w)}</li>" for w in warnings) + "</ul></section>")
    parts = []
    for number, section in enumerate(sections, start=1):
        intro = f"<p>{_e(section.intro)}</p>" if section.intro else ""
        blocks = "".join(_block_html(b, figure_png, table_names) for b in section.blocks)
        parts.append(f'<section id="part-{number}"><h2>{_e(section.heading)}</h2>{intro}{blocks}</section>')
    cautions = "".join(f"<li>{_e(text)}</li>" for text in SAFETY_CAUTIONS)
    safety = (f'<section id="safety"><h2>{_e(SAFETY_HEADING)}</h2>'
              f'<div class="caution"><ul>{cautions}</ul></div></section>')
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
        f"<title>{_e(title)}</title><style>{_CSS}</style></head><body>"
        f"<header><h1>{_e(title)}</h1><p>Run of {_e(run_utc)} (UTC)</p></header><main>"
        f"<nav><h2>Contents</h2><ol>{toc}</ol></nav>{summary_html}{safety}{''.join(parts)}"
        f'<section id="provenance"><h2>{_e(PROVENANCE_HEADING)}</h2>{provenance_html}</section>'
        "</main></body></html>\n"
    )


def _provenance_html(config_text, packages: Mapping[str, str], inputs: pd.DataFrame,
                     extra: Mapping[str, str], run_utc: str) -> str:
    rows = {"run time (UTC)": run_utc} | {str(k): str(v) for k, v in extra.items()}
    items = "".join(f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in rows.items())
    package_frame = pd.DataFrame({"package": list(packages), "version": list(packages.values())})
    config = (f"<pre>{_e(config_text)}</pre>" if config_text
              else "<p>No configuration text was recorded.</p>")
    return (f'<dl class="summary">{items}</dl><h3>Configuration</h3>{config}'
            f"<h3>Input files and their SHA-256</h3>{_html_table(inputs, 6)}"
            f'<p class="csv">tables/provenance_inputs.csv</p>'
            f"<h3>Software versions</h3>{_html_table(package_frame, 6)}"
            f'<p class="csv">tables/provenance_packages.csv</p>')


# ---------------------------------------------------------------- PDF
# Typeset with reportlab (pure Python from the package index, no system library): the
# text, tables and captions flow over A4 pages in DejaVu Sans (TrueType, embedded and
# subset; the font matplotlib ships, so figures and text match).  Each figure is saved by
# matplotlib as a one-page vector PDF (Type 42 fonts) and placed on its page with pypdf,
# so figures stay vector and no Type 3 font enters the file.
_PAGE_MARGIN_CM = 1.75       # A4 width 21 cm - 2 x 1.75 cm = 17.5 cm, the double-column width
_FONT = "KineticsSans"
_FONT_BOLD = "KineticsSans-Bold"
_FONT_MONO = "KineticsMono"
_END = "end of text"     # key of the marker that records where the last page's text ends
_LAST_PAGE_FILL = 0.5    # a last page filled less than this is laid out again (see _pdf_bytes)


def _register_fonts() -> None:
    import matplotlib
    from reportlab.pdfbase import pdfmetrics
    from reportlab.pdfbase.ttfonts import TTFont

    if _FONT in pdfmetrics.getRegisteredFontNames():
        return
    folder = Path(matplotlib.get_data_path()) / "fonts" / "ttf"
    pdfmetrics.registerFont(TTFont(_FONT, str(folder / "DejaVuSans.ttf")))
    pdfmetrics.registerFont(TTFont(_FONT_BOLD, str(folder / "DejaVuSans-Bold.ttf")))
    pdfmetrics.registerFont(TTFont(_FONT_MONO, str(folder / "DejaVuSansMono.ttf")))
    pdfmetrics.registerFontFamily(_FONT, normal=_FONT, bold=_FONT_BOLD, italic=_FONT, boldItalic=_FONT_BOLD)


def _styles() -> dict:
    from reportlab.lib import colors
    from reportlab.lib.styles import ParagraphStyle

    ink = colors.HexColor("#1f2f56")
    base = ParagraphStyle("body", fontName=_FONT, fontSize=8.5, leading=11.0, spaceAfter=3, bulletFontName=_FONT)
    return {
        "title": ParagraphStyle("title", parent=base, fontName=_FONT_BOLD, fontSize=16, leading=20, textColor=ink,
                                spaceAfter=4),
        "h1": ParagraphStyle("h1", parent=base, fontName=_FONT_BOLD, fontSize=12, leading=15, textColor=ink,
                             spaceBefore=10, spaceAfter=4),
        "h2": ParagraphStyle("h2", parent=base, fontName=_FONT_BOLD, fontSize=9.5, leading=12, spaceBefore=6,
                             spaceAfter=2),
        "body": base,
        "small": ParagraphStyle("small", parent=base, fontSize=7.5, leading=9.5, textColor=colors.HexColor("#333333")),
        "caption": ParagraphStyle("caption", parent=base, fontSize=7.5, leading=9.5,
                                  textColor=colors.HexColor("#333333"), spaceBefore=2, spaceAfter=6),
        "cell": ParagraphStyle("cell", parent=base, fontSize=7.2, leading=8.8, spaceAfter=0),
        "head": ParagraphStyle("head", parent=base, fontName=_FONT_BOLD, fontSize=7.2, leading=8.8, spaceAfter=0),
        "mono": ParagraphStyle("mono", parent=base, fontName=_FONT_MONO, fontSize=6.3, leading=7.6, spaceAfter=4),
        "config": ParagraphStyle("config", parent=base, fontName=_FONT_MONO, fontSize=5.8, leading=6.9, spaceAfter=0),
        "caution": ParagraphStyle("caution", parent=base, fontSize=8, leading=10.2, leftIndent=8, bulletIndent=0),
    }


def _x(text) -> str:
    """User text for a reportlab Paragraph (its mini-markup escaped, so it prints as written)."""
    return html.escape(str(text), quote=False)


class _FigureSlot:
    """Where a figure goes: a reportlab flowable that reserves the space and records its place."""

    def __new__(cls, *args, **kwargs):  # built lazily so reportlab is imported only for the PDF
        from reportlab.platypus import Flowable

        class Slot(Flowable):
            def __init__(self, key, width_pt, height_pt, places):
                super().__init__()
                self.key, self.width, self.height, self.places = key, width_pt, height_pt, places

            def wrap(self, available_width, available_height):
                return self.width, self.height

            def draw(self):
                x, y = self.canv.absolutePosition(0, 0)
                self.places.append((self.key, self.canv.getPageNumber(), x, y, self.width, self.height))

        return Slot(*args, **kwargs)


def _figure_size_pt(figure: Figure, max_width_pt: float) -> tuple[float, float]:
    width_in, height_in = figure.get_size_inches()
    width, height = width_in * 72.0, height_in * 72.0
    if width > max_width_pt:
        height, width = height * max_width_pt / width, max_width_pt
    return width, height


def _pdf_table(frame: pd.DataFrame, styles: dict, width_pt: float):
    from reportlab.lib import colors
    from reportlab.platypus import Paragraph, Table, TableStyle

    if not len(frame.columns):
        return Paragraph("(empty table)", styles["small"])
    header = [Paragraph(_x(c), styles["head"]) for c in frame.columns]
    rows = [[Paragraph(_x(v), styles["cell"]) for v in row] for row in frame.astype(str).itertuples(index=False)]
    if not rows:
        rows = [[Paragraph("(no rows)", styles["cell"])] + [""] * (len(header) - 1)]
    # column widths from the longest cell (about 0.55 em per character), scaled to fit the page
    lengths = [max([max(len(word) for word in str(c).split() or [""]) * 1.1, len(str(c)) * 0.55]
                   + [len(str(v)) for v in frame[c].astype(str)]) for c in frame.columns]
    natural = [min(max(4.0, n) * 4.6 + 10, 220) for n in lengths]
    scale = min(1.0, width_pt / sum(natural))
    table = Table([header] + rows, colWidths=[w * scale for w in natural], repeatRows=1, hAlign="LEFT")
    table.setStyle(TableStyle([("FONT", (0, 0), (-1, -1), _FONT, 7.2),
                       
        ("LINEABOVE", (0, 0), (-1, 0), 0.8, colors.HexColor("#1f2f56")),
        ("LINEBELOW", (0, 0), (-1, 0), 0.5, colors.HexColor("#1f2f56")),
        ("LINEBELOW", (0, -1), (-1, -1), 0.8, colors.HexColor("#1f2f56")),
        ("ROWBACKGROUNDS", (0, 1), (-1, -1), [colors.white, colors.HexColor("#f2f3f6")]),
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("TOPPADDING", (0, 0), (-1, -1), 1.2), ("BOTTOMPADDING", (0, 0), (-1, -1), 1.6),
        ("LEFTPADDING", (0, 0), (-1, -1), 3), ("RIGHTPADDING", (0, 0), (-1, -1), 3),
    ]))
    return table


def _pdf_story(title, run_utc, summary, sections, config_text, packages, inputs, extra, figure_pdf,
               warnings, places, width_pt, config_columns: int | None = None):
    from reportlab.lib import colors
    from reportlab.platypus import (CondPageBreak, KeepTogether, Paragraph, Preformatted, Spacer, Table,
                                    TableStyle)

    styles = _styles()
    story = [Paragraph(_x(title), styles["title"]),
             Paragraph(f"Report of {_x(run_utc)} (UTC)", styles["small"]), Spacer(1, 6)]
    if summary:
        story.append(Paragraph("Key results", styles["h1"]))
        rows = [[Paragraph(_x(k), styles["head"]), Paragraph(_x(v), styles["cell"])] for k, v in summary.items()]
        key_table = Table(rows, colWidths=[0.28 * width_pt, 0.72 * width_pt], hAlign="LEFT")
        key_table.setStyle(TableStyle([("FONT", (0, 0), (-1, -1), _FONT, 7.2),
                       ("LINEBELOW", (0, 0), (-1, -1), 0.3, colors.HexColor("#c9ccd4")),
                                       ("VALIGN", (0, 0), (-1, -1), "TOP")]))
        story.append(key_table)
        story.append(Paragraph("Values are given as estimate ± standard uncertainty, rounded together "
                               "(uncertainty to one or two significant digits); intervals are 95 %.",
                               styles["caption"]))
    if warnings:
        story.append(Paragraph("Warnings", styles["h1"]))
        story += [Paragraph("• " + _x(w), styles["body"]) for w in warnings]
    cautions = [Paragraph(_x(text), styles["caution"], bulletText="•") for text in SAFETY_CAUTIONS]
    box = Table([[Paragraph(_x(SAFETY_HEADING), styles["h2"])]] + [[c] for c in cautions],
                colWidths=[width_pt], hAlign="LEFT")
    box.setStyle(TableStyle([("FONT", (0, 0), (-1, -1), _FONT, 7.2),
                       ("BOX", (0, 0), (-1, -1), 1.2, colors.HexColor("#8a5a12")),
                             ("BACKGROUND", (0, 0), (-1, -1), colors.HexColor("#fff4e0")),
                             ("TOPPADDING", (0, 0), (-1, -1), 1.5), ("BOTTOMPADDING", (0, 0), (-1, -1), 1.5)]))
    story += [Spacer(1, 8), KeepTogether([box]), Spacer(1, 4)]

    figure_number = table_number = 0
    for section in sections:
        # a section heading never ends a page: it needs room for a figure or table below it
        story.append(CondPageBreak(300 if any(isinstance(b, FigureBlock) for b in section.blocks[:2]) else 150))
        story.append(Paragraph(_x(section.heading), styles["h1"]))
        if section.intro:
            story.append(Paragraph(_x(section.intro), styles["body"]))
        blocks = list(section.blocks)
        index = 0
        while index < len(blocks):
            block = blocks[index]
            if isinstance(block, FigureBlock):
                # two narrow figures in a row share the line
                group = [block]
                if (index + 1 < len(blocks) and isinstance(blocks[index + 1], FigureBlock)
                        and max(_figure_size_pt(b.figure, width_pt)[0] for b in (block, blocks[index + 1]))
                        <= 0.5 * width_pt):
                    group.append(blocks[index + 1])
                cells = []
                for item in group:
                    figure_number += 1
                    w, h = _figure_size_pt(item.figure, width_pt / len(group) - 4)
                    caption = f"<b>Figure {figure_number}.</b> {_x(item.heading)}." + (
                        f" {_x(item.caption)}" if item.caption else "")
                    cells.append([_FigureSlot(id(item), w, h, places), Paragraph(caption, styles["caption"])])
                if len(cells) == 1:
                    story.append(KeepTogether(cells[0]))
                else:
                    row = Table([[c for c in cells]], colWidths=[width_pt / 2] * 2, hAlign="LEFT")
                    row.setStyle(TableStyle([("FONT", (0, 0), (-1, -1), _FONT, 7.2),
                       ("VALIGN", (0, 0), (-1, -1), "TOP"),
                                             ("LEFTPADDING", (0, 0), (-1, -1), 0),
                                             ("RIGHTPADDING", (0, 0), (-1, -1), 4)]))
                    story.append(row)
                index += len(group)
                continue
            if isinstance(block, TableBlock):
                table_number += 1
                caption = f"<b>Table {table_number}.</b> {_x(block.heading)}." + (
                    f" {_x(block.caption)}" if block.caption else "")
                shown = _display_frame(block)
                parts = [Paragraph(caption, styles["caption"]), _pdf_table(shown, styles, width_pt)]
                story.append(KeepTogether(parts) if len(shown) <= 25 else parts[0])
                if len(shown) > 25:
                    story.append(parts[1])
                story.append(Spacer(1, 6))
            elif isinstance(block, TextBlock):
                story.append(Paragraph(_x(block.heading), styles["h2"]))
                if block.preformatted:
                    story.append(Preformatted("\n".join(block.paragraphs), styles["mono"], maxLineLength=150))
                else:
                    story += [Paragraph(_x(p), styles["body"]) for p in block.paragraphs if str(p).strip()]
            index += 1

    story.append(CondPageBreak(150))
    story.append(Paragraph(_x(PROVENANCE_HEADING), styles["h1"]))
    facts = {"report time (UTC)": run_utc} | dict(extra)
    story += [Paragraph(f"<b>{_x(k)}:</b> {_x(v)}", styles["small"]) for k, v in facts.items()]
    versions = ", ".join(f"{k} {v}" for k, v in packages.items())
    story.append(Paragraph(f"<b>Software:</b> {_x(versions)}", styles["small"]))
    n_files = len(inputs)
    if n_files:
        if "run" in inputs.columns:
            per_run = "; ".join(f"{_x(run)}: {count}" for run, count in inputs.groupby("run", sort=False).size().items())
            detail = f" ({per_run})"
        else:
            detail = ""
        story.append(Paragraph(f"<b>Input files:</b> {n_files}{detail}. The SHA-256 of each file is listed in "
                               "tables/provenance_inputs.csv and in report.html.", styles["small"]))
    story.append(Paragraph("Configuration", styles["h2"]))
    config_lines = (config_text or "(none recorded)").splitlines()
    if config_columns is None:
        config_columns = 2 if len(config_lines) > 40 else 1
    if config_columns == 2:
        # two balanced columns (split across pages as needed), so a long config takes half the pages
        from reportlab.platypus.flowables import BalancedColumns

        story.append(BalancedColumns([Preformatted("\n".join(config_lines), styles["config"], maxLineLength=68)],
                                     nCols=2, spaceBefore=0, spaceAfter=0, innerPadding=8))
    else:
        story.append(Preformatted("\n".join(config_lines), styles["mono"], maxLineLength=150))
    story.append(_FigureSlot(_END, 0.0, 0.0, places))  # records where the text ends
    return story


def _drop_unused_fonts(page) -> None:
    """Remove font resources this page's content does not use (reportlab lists Helvetica on
    every page).  The resource dictionaries may be shared between pages, so the page gets
    its own copies."""
    from pypdf.generic import DictionaryObject, NameObject

    resources = page.get("/Resources")
    fonts = None if resources is None else resources.get_object().get("/Font")
    if fonts is None:
        return
    contents = page.get_contents()
    data = b"" if contents is None else contents.get_data()
    used = DictionaryObject({name: value for name, value in fonts.get_object().items()
                             if re.search(re.escape(name.encode()) + rb"[\s/\[<(]", data)})
    own = DictionaryObject(resources.get_object())
    own[NameObject("/Font")] = used
    page[NameObject("/Resources")] = own


def _pdf_bytes(title, run_utc, summary, sections, config_text, packages, inputs, extra,
               figure_pdf: Mapping[int, bytes] | None = None, warnings: Sequence[str] = ()) -> bytes:
    from pypdf import PdfReader, PdfWriter, Transformation
    from reportlab.lib.pagesizes import A4
    from reportlab.lib.units import cm
    from reportlab.platypus import SimpleDocTemplate

    _register_fonts()
    if figure_pdf is None:
        figure_pdf = {id(b): plots.pdf_bytes(b.figure) for s in sections for b in s.blocks
                      if isinstance(b, FigureBlock)}
    margin = _PAGE_MARGIN_CM * cm
    width_pt = A4[0] - 2 * margin
    places: list = []

    def footer(canvas, doc):
        canvas.saveState()
        canvas.setFont(_FONT, 7)
        canvas.setFillGray(0.35)
        canvas.drawString(margin, 0.9 * cm, title[:110])
        canvas.drawRightString(A4[0] - margin, 0.9 * cm, f"page {doc.page}")
        canvas.restoreState()

    top_pt, usable_pt = A4[1] - 1.5 * cm, A4[1] - 1.5 * cm - 1.6 * cm

    def build(columns):
        places.clear()
        buffer = io.BytesIO()
        doc = SimpleDocTemplate(buffer, pagesize=A4, leftMargin=margin, rightMargin=margin, topMargin=1.5 * cm,
                                bottomMargin=1.6 * cm, title=title, author="", creator="kinetics",
                                producer="kinetics", subject="Reaction kinetics report", invariant=True,
                                initialFontName=_FONT, initialFontSize=8.5, initialLeading=11.0)
        story = _pdf_story(title, run_utc, summary, sections, config_text, packages, inputs, extra, figure_pdf,
                           warnings, places, width_pt, config_columns=columns)
        doc.build(story, onFirstPage=footer, onLaterPages=footer)
        end = [p for p in places if p[0] == _END][-1]
        return buffer, list(places), end[1], (top_pt - end[3]) / usable_pt

    # The configuration closes the report, in two columns when long.  When that leaves the
    # last page nearly empty, the other layout is tried and the fuller last page kept.
    n_config = len((config_text or "").splitlines())
    buffer, kept, pages, last_fill = build(2 if n_config > 40 else 1)
    if last_fill < _LAST_PAGE_FILL and pages > 1 and n_config > 10:
        other = build(1 if n_config > 40 else 2)
        if (other[2], -other[3]) < (pages, -last_fill) or other[3] > last_fill and other[2] == pages:
            buffer, kept, pages, last_fill = other
    places[:] = [p for p in kept if p[0] != _END]

    reader = PdfReader(io.BytesIO(buffer.getvalue()))
    writer = PdfWriter()
    writer.append(reader)
    for key, page_number, x, y, w, h in places:
        figure_page = PdfReader(io.BytesIO(figure_pdf[key])).pages[0]
        box = figure_page.mediabox
        scale = min(w / float(box.width), h / float(box.height))
        writer.pages[page_number - 1].merge_transformed_page(
            figure_page, Transformation().scale(scale, scale).translate(x, y))
    writer.add_metadata({"/Title": title, "/Creator": "kinetics", "/Producer": "kinetics"})
    for page in writer.pages:
        _drop_unused_fonts(page)
        page.compress_content_streams()
    out = io.BytesIO()
    writer.write(out)
    return out.getvalue()


# ---------------------------------------------------------------- tables on disk
def _parquet_available() -> bool:
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        return False
    return True


def _write_table(folder: Path, name: str, frame: pd.DataFrame, csv: dict, parquet: dict) -> None:
    frame = _plain_frame(frame)
    csv[name] = write_atomic(folder / f"{name}.csv", frame.to_csv(index=False))
    if _parquet_available():
        buffer = io.BytesIO()
        frame.to_parquet(buffer, index=False)
        parquet[name] = write_atomic(folder / f"{name}.parquet", buffer.getvalue())


# ---------------------------------------------------------------- entry point
def write_report(
    out_dir: str | Path,
    *sections: Section,
    title: str = "Reaction kinetics report",
    provenance: Provenance | None = None,
    summary: Mapping[str, str] | None = None,
    dpi: int = 300,
    warnings: Sequence[str] = (),
) -> ReportFiles:
    """Write the report folder (HTML, PDF, CSV/Parquet tables, PNG figures, provenance).

    Parameters
    ----------
    out_dir : path
        Folder to write (created when missing; files of the same names are replaced).
    *sections : Section
        The body of the report, in order.
    title : str
        Report title.
    provenance : Provenance, optional
        Config text, input files and run time; package versions are filled in when absent.
    summary : mapping str -> str, optional
        Key figures shown at the top (e.g. ``{"Ea": "75.1 ± 1.2 kJ/mol"}``).
    dpi : int
        Resolution of the PNG figures (each figure is also written as SVG; the PDF holds
        vector figures).
    warnings : sequence of str
        Shown once, on the summary page and at the top of the HTML page.

    Returns
    -------
    ReportFiles
    """
    # all or nothing: the files are written into a staging folder beside out_dir and moved
    # in once every one of them is whole (a full disk leaves the previous report as it was)
    final = Path(out_dir)
    with staged_folder(final) as staging:
        files = _write_report_files(staging, sections, title, provenance, summary, dpi, warnings)
    moved = lambda path: moved_path(path, staging, final)  # noqa: E731
    return replace(files, folder=final, html=moved(files.html), pdf=moved(files.pdf),
                   figures={k: moved(v) for k, v in files.figures.items()},
                   csv={k: moved(v) for k, v in files.csv.items()},
                   parquet={k: moved(v) for k, v in files.parquet.items()})


def _write_report_files(folder: Path, sections, title, provenance, summary, dpi, warnings) -> ReportFiles:
    """The body of :func:`write_report`, writing into ``folder`` (its staging folder)."""
    provenance = provenance or Provenance()
    run_utc = _iso_utc(provenance.run_utc)
    packages = dict(provenance.packages) if provenance.packages else package_versions()
    inputs = _input_frame(provenance.input_files)
    extra = {str(k): str(v) for k, v in provenance.extra.items()}

    names: set[str] = {"provenance_inputs", "provenance_packages"}
    figure_png: dict[int, bytes] = {}
    figure_pdf: dict[int, bytes] = {}
    figure_paths: dict[str, Path] = {}
    table_names: dict[int, str] = {}
    csv: dict[str, Path] = {}
    parquet: dict[str, Path] = {}
    for section in sections:
        for block in section.blocks:
            if isinstance(block, FigureBlock):
                name = _slug(block.name or f"{section.heading}_{block.heading}", names)
                figure_png[id(block)] = png_bytes(block.figure, dpi=dpi)
                figure_pdf[id(block)] = plots.pdf_bytes(block.figure)
                figure_paths[name] = write_atomic(folder / "figures" / f"{name}.png", figure_png[id(block)])
                write_atomic(folder / "figures" / f"{name}.svg", plots.svg_bytes(block.figure))
            elif isinstance(block, TableBlock):
                name = _slug(block.name or f"{section.heading}_{block.heading}", names)
                table_names[id(block)] = name
                _write_table(folder / "tables", name, block.frame, csv, parquet)
    package_frame = pd.DataFrame({"package": list(packages), "version": list(packages.values())})
    _write_table(folder / "tables", "provenance_inputs", inputs, csv, parquet)
    _write_table(folder / "tables", "provenance_packages", package_frame, csv, parquet)
    if provenance.config_text:
        write_atomic(folder / "config.toml", provenance.config_text)
    record = {"run_utc": run_utc, "packages": packages, "extra": extra,
              "input_files": inputs.to_dict(orient="records"), "config_text": provenance.config_text}
    write_atomic(folder / "provenance.json", dumps(record))

    warnings = tuple(dict.fromkeys(str(w) for w in warnings))  # each once, in order
    page = _html_page(title, run_utc, summary, sections, figure_png, table_names,
                      _provenance_html(provenance.config_text, packages, inputs, extra, run_utc), warnings)
    html_path = write_atomic(folder / "report.html", page)
    pdf_path = write_atomic(folder / "report.pdf", _pdf_bytes(
        title, run_utc, summary, sections, provenance.config_text, packages, inputs, extra,
        figure_pdf=figure_pdf, warnings=warnings))
    logger.info("report written to %s", folder)
    return ReportFiles(folder=folder, html=html_path, pdf=pdf_path, figures=figure_paths,
                       csv=csv, parquet=parquet, run_utc=run_utc)
