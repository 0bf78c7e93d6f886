"""A report folder: one self-contained HTML page, a PDF, every table as CSV (and Parquet).

The caller hands over :class:`Section` objects built from plain blocks (a figure, a
table, some paragraphs); :func:`write_report` writes

``report.html``
    opens offline: CSS inline, figures inline as base64 PNG, no scripts and no external
    links; every piece of user text is HTML-escaped.
``report.pdf``
    the same figures (vector) and the tables, provenance and cautions as text pages
    (matplotlib ``PdfPages``, so no browser or external tool is needed).
``tables/<name>.csv`` (and ``.parquet`` when pyarrow is importable)
    each table exactly as handed in, plus the provenance tables.
``figures/<name>.png``, ``config.toml``, ``provenance.json``

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
import textwrap
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd
from matplotlib.backends.backend_pdf import PdfPages
from matplotlib.figure import Figure

from kinetics import plots
from kinetics.atomic import write_atomic
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
    """A table (written as CSV under ``name``) with a heading and a caption."""

    heading: str
    frame: pd.DataFrame
    name: str = ""
    caption: str = ""
    digits: int = 5


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
                    title: str | None = None, max_traces: int = 12) -> Section:
    """Stacked spectra with the tracked windows (see :func:`kinetics.plots.stacked_spectra_figure`)."""
    figure = plots.stacked_spectra_figure(spectra, time_s=time_s, windows=windows, title=title,
                                          max_traces=max_traces)
    shown = min(len(spectra), max(2, max_traces))
    caption = (f"{shown} of {len(spectra)} spectra, first at the bottom; shaded bands are the "
               "tracked signal windows" + ("; traces are scaled to the tracked signals and taller lines "
                                           "(a solvent) are clipped." if windows else "."))
    return Section(heading, (FigureBlock("Stacked spectra", figure, caption, name=f"{heading}_spectra"),))


def fit_section(fit, *, heading: str = "Concentrations and fitted rate law", comparison=None,
                concentration_unit: str = "mol L⁻¹", n_curve: int = 300, name: str = "fit") -> Section:
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
    """
    time_s = np.asarray(fit.time_s, float)
    observed = np.atleast_2d(np.asarray(fit.observed, float))
    fitted = np.atleast_2d(np.asarray(fit.fitted, float))
    columns = [str(c) for c in fit.columns]
    sigma_array = getattr(getattr(fit, "data", None), "sigma", None)
    curve_t = np.linspace(float(time_s.min()), float(time_s.max()), n_curve)
    curve, low, high = (np.atleast_2d(np.asarray(a, float)) for a in fit.band(curve_t))
    figure = plots.concentration_figure(
        time_s, dict(zip(columns, observed)),
        sigma=None if sigma_array is None else dict(zip(columns, np.atleast_2d(sigma_array))),
        curve_time_s=curve_t, curve=dict(zip(columns, curve)),
        band={c: (lo, hi) for c, lo, hi in zip(columns, low, high) if np.all(np.isfinite(lo))},
        fitted=dict(zip(columns, fitted)), concentration_unit=concentration_unit)
    summary = fit.to_dict()
    status = "converged" if summary.get("converged") else "did NOT converge"
    blocks = [FigureBlock("Measured and fitted concentrations", figure,
                          f"Model {summary.get('model')}: {summary.get('description', '')}. Shaded: 95 % "
                          "band of the fitted curve; lower panel: measured minus fitted.", name=f"{name}_courses"),
              TableBlock("Fitted parameters", parameters_frame(summary["params"]), name=f"{name}_parameters",
                         caption=f"Fit {status}: {summary.get('message', '')}"),
              TableBlock("Fit statistics", pd.DataFrame([{key: summary.get(key) for key in (
                  "model", "n_points", "dof", "chi_square", "reduced_chi_square", "aicc", "bic", "converged")}]),
                  name=f"{name}_statistics")]
    if comparison is not None:
        table = comparison.table if hasattr(comparison, "table") else comparison
        verdict = getattr(comparison, "verdict", "")
        blocks.append(TableBlock("Rate laws compared", comparison_frame(table), name=f"{name}_model_comparison",
                                 caption=verdict))
    if hasattr(fit, "report"):
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
                        name: str = "temperature") -> Section:
    """Arrhenius and Eyring plots with their 95 % bands, per-run and parameter tables.

    ``result`` is a :class:`kinetics.temperature.TemperatureResult` (read through
    ``temperature_kelvin``, ``k``, ``k_stderr``, ``labels``, the two line fits, ``basis``,
    ``table()`` and ``to_dict()``).
    """
    summary = result.to_dict()
    arrhenius_line, eyring_line = _temperature_lines(result, n_line)
    ea, dh, ds = (summary[k] for k in ("ea_kj_per_mol", "dh_kj_per_mol", "ds_j_per_mol_k"))

    def _pm(entry, unit):
        return f"{entry['value']:.4g} ± {(entry['stderr'] or float('nan')):.2g} {unit}"

    arrhenius = plots.arrhenius_figure(result.temperature_kelvin, result.k, result.k_stderr,
                                       line=arrhenius_line, labels=result.labels,
                                       annotation=f"Ea = {_pm(ea, 'kJ/mol')}")
    eyring = plots.eyring_figure(result.temperature_kelvin, result.k, result.k_stderr, line=eyring_line,
                                 labels=result.labels,
                                 annotation=f"ΔH‡ = {_pm(dh, 'kJ/mol')}\nΔS‡ = {_pm(ds, 'J/(mol K)')}")
    keys = [k for k in ("ea_kj_per_mol", "ln_a", "a_per_s", "a", "dh_kj_per_mol", "ds_j_per_mol_k",
                        "dg_kj_per_mol") if isinstance(summary.get(k), Mapping)]
    parameters = parameters_frame({k: summary[k] for k in keys})
    band_note = f"Band: 95 % interval of the line ({summary.get('interval_method', '')})."
    blocks = (
        FigureBlock("Arrhenius plot", arrhenius, band_note, name=f"{name}_arrhenius"),
        FigureBlock("Eyring plot", eyring, band_note + " Transmission coefficient taken as 1.",
                    name=f"{name}_eyring"),
        TableBlock("Activation parameters", parameters, name=f"{name}_parameters",
                   caption=f"dG‡ at {summary.get('t_ref_kelvin')} K; " + "; ".join(summary.get("warnings", []))),
        TableBlock("Rate constant of each run", result.table(), name=f"{name}_runs"),
    )
    return Section(heading, blocks)


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
    text_columns = {c for c in frame.columns if not pd.api.types.is_numeric_dtype(frame[c])}
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
        return (f"<h3>{_e(block.heading)}</h3><figure><img src=\"data:image/png;base64,{data}\" "
                f"alt=\"{_e(alt)}\">{caption}</figure>")
    if isinstance(block, TableBlock):
        caption = f'<p class="caption">{_e(block.caption)}</p>' if block.caption else ""
        return (f"<h3>{_e(block.heading)}</h3>{caption}{_html_table(block.frame, block.digits)}"
                f'<p class="csv">tables/{_e(table_names[id(block)])}.csv</p>')
    if isinstance(block, TextBlock):
        if block.preformatted:
            return f"<h3>{_e(block.heading)}</h3><pre>{_e(chr(10).join(block.paragraphs))}</pre>"
        return f"<h3>{_e(block.heading)}</h3>{_paragraphs_html(block.paragraphs)}"
    raise TypeError(f"unknown report block {type(block).__name__}")


def _html_page(title, run_utc, summary, sections, figure_png, table_names, provenance_html) -> str:
    toc = "".join(f'<li><a href="#part-{n}">{_e(s.heading)}</a></li>'
                  for n, s in enumerate(sections, start=1))
    toc += f'<li><a href="#safety">{_e(SAFETY_HEADING)}</a></li>'
    toc += f'<li><a href="#provenance">{_e(PROVENANCE_HEADING)}</a></li>'
    summary_html = ""
    if summary:
        items = "".join(f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in summary.items())
        summary_html = f'<section id="summary"><h2>Summary</h2><dl class="summary">{items}</dl></section>'
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
_PAGE_IN = (8.27, 11.69)  # A4 portrait


def _text_pages(pdf: PdfPages, heading: str, lines: Sequence[str]) -> None:
    """Monospaced text pages; the font shrinks so the widest line fits the page width."""
    lines = list(lines) or [""]
    widest = max(len(line) for line in lines)
    size = float(np.clip(530.0 / (0.68 * max(widest, 1)), 4.5, 9.0))  # pt; mono glyphs ~0.6 em plus spacing
    per_page = int(760.0 / (size * 1.25 * 1.17))  # usable height / line pitch, both in pt
    for start in range(0, len(lines), per_page):
        page = Figure(figsize=_PAGE_IN)
        # parse_math=False: user text with "$...$" is printed as written, not as mathtext.
        page.text(0.06, 0.965, heading + ("" if start == 0 else " (continued)"), fontsize=13,
                  weight="bold", va="top", color="#1f2f56", parse_math=False)
        page.text(0.06, 0.935, "\n".join(lines[start:start + per_page]), family="DejaVu Sans Mono",
                  fontsize=size, va="top", linespacing=1.25, parse_math=False)
        pdf.savefig(page)


_PDF_TABLE_CHARS = 120  # widest table line on an A4 page at a readable size


def _table_lines(frame: pd.DataFrame, digits: int) -> list[str]:
    """The table as text; wide tables are cut into column blocks (first column repeated)."""
    frame = _plain_frame(frame)
    if not len(frame):
        return ["(empty table)"]
    shown = frame.apply(lambda column: column.map(lambda v: _format_cell(v, digits))).astype(str)
    widths = [max(len(str(c)), int(shown[c].str.len().max())) + 2 for c in shown.columns]
    blocks, current, used = [], [], widths[0]
    for index in range(1, len(widths)):
        if current and used + widths[index] > _PDF_TABLE_CHARS:
            blocks.append(current)
            current, used = [], widths[0]
        current.append(index)
        used += widths[index]
    blocks.append(current)
    lines: list[str] = []
    for block in blocks:
        columns = [shown.columns[0]] + [shown.columns[i] for i in block]
        lines += shown[columns].to_string(index=False).splitlines() + [""]
    return lines[:-1]


def _wrap(paragraphs: Sequence[str], width: int = 95) -> list[str]:
    lines: list[str] = []
    for paragraph in paragraphs:
        lines.extend(textwrap.wrap(str(paragraph), width) or [""])
        lines.append("")
    return lines


def _pdf_bytes(title, run_utc, summary, sections, config_text, packages, inputs, extra) -> bytes:
    buffer = io.BytesIO()
    metadata = {"Title": title, "Creator": "kinetics", "Producer": "kinetics"}
    with PdfPages(buffer, metadata=metadata) as pdf:
        front = [f"Run of {run_utc} (UTC)", ""]
        front += [f"{k}: {v}" for k, v in (summary or {}).items()]
        front += ["", SAFETY_HEADING, ""] + _wrap([f"* {text}" for text in SAFETY_CAUTIONS])
        _text_pages(pdf, title, front)
        for section in sections:
            for block in section.blocks:
                heading = f"{section.heading}: {block.heading}"
                if isinstance(block, FigureBlock):
                    # A page label for the PDF only; removed again so the caller's figure
                    # is left as it was handed in.
                    label = block.figure.text(0.005, 0.998, heading, fontsize=7, color="#5b6070",
                                              ha="left", va="top", parse_math=False)
                    try:
                        pdf.savefig(block.figure)
                    finally:
                        label.remove()
                elif isinstance(block, TableBlock):
                    caption = _wrap([block.caption]) if block.caption else []
                    _text_pages(pdf, heading, caption + _table_lines(block.frame, block.digits))
                elif isinstance(block, TextBlock):
                    lines = ("\n".join(block.paragraphs).splitlines() if block.preformatted
                             else _wrap(block.paragraphs))
                    _text_pages(pdf, heading, lines)
        lines = [f"run time (UTC): {run_utc}"] + [f"{k}: {v}" for k, v in extra.items()]
        lines += ["", "Software versions"] + [f"  {k} {v}" for k, v in packages.items()]
        lines += ["", "Input files (SHA-256)"] + _table_lines(inputs, 6)
        lines += ["", "Configuration", ""] + (config_text or "(none recorded)").splitlines()
        _text_pages(pdf, PROVENANCE_HEADING, lines)
    return buffer.getvalue()


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
    dpi: int = 120,
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
        Resolution of the PNG figures.

    Returns
    -------
    ReportFiles
    """
    folder = Path(out_dir)
    folder.mkdir(parents=True, exist_ok=True)
    provenance = provenance or Provenance()
    run_utc = _iso_utc(provenance.run_utc)
    packages = dict(provenance.packages) if provenance.packages else package_versions()
    inputs = _input_frame(provenance.input_files)
    extra = {str(k): str(v) for k, v in provenance.extra.items()}

    names: set[str] = {"provenance_inputs", "provenance_packages"}
    figure_png: dict[int, bytes] = {}
    figure_paths: dict[str, Path] = {}
    table_names: dict[int, str] = {}
    csv: dict[str, Path] = {}
    parquet: dict[str, Path] = {}
    for section in sections:
        for block in section.blocks:
            if isinstance(block, FigureBlock):
                name = _slug(block.name or f"{section.heading}_{block.heading}", names)
                figure_png[id(block)] = png_bytes(block.figure, dpi=dpi)
                figure_paths[name] = write_atomic(folder / "figures" / f"{name}.png", figure_png[id(block)])
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

    page = _html_page(title, run_utc, summary, sections, figure_png, table_names,
                      _provenance_html(provenance.config_text, packages, inputs, extra, run_utc))
    html_path = write_atomic(folder / "report.html", page)
    pdf_path = write_atomic(folder / "report.pdf", _pdf_bytes(
        title, run_utc, summary, sections, provenance.config_text, packages, inputs, extra))
    logger.info("report written to %s", folder)
    return ReportFiles(folder=folder, html=html_path, pdf=pdf_path, figures=figure_paths,
                       csv=csv, parquet=parquet, run_utc=run_utc)
