"""The report of `kinetics run configs/demo_study.toml` as a chemist and a journal read it.

Checks (issue 12): at most 12 pages and none under a quarter full; no Type 3 font (every
font embedded TrueType; ``pdffonts`` as a second opinion when installed); figures placed as
vectors; every run's stacked spectra (with the right counts), courses of every species with
fit, band and residuals, and rate-law comparison; the global-fit figure and Arrhenius and
Eyring with both lines; table headings with units; key results rounded (GUM, JCGM
100:2008, 7.2.6); the safety caution; every image decodes in headless Chromium.
The demo study is built once for the module (about half a minute).
"""

from __future__ import annotations

import html
import re
import sys
from pathlib import Path

import pytest
from pypdf import PdfReader

sys.path.insert(0, str(Path(__file__).resolve().parent))
import tests_support_report as support  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
RUNS = ("25 °C", "35 °C", "45 °C", "55 °C")

# Quantities of dimension one (counts, logarithms of quotients, statistics, names), which
# need no unit (SI Brochure, 9th ed., 5.4.7: quantities of dimension one).
DIMENSIONLESS = {"run", "parameter", "quantity", "rate law", "unit", "file", "note", "converged", "ln k",
                 "ln k − line", "ln A", "χ²", "reduced χ²", "AICc", "ΔAICc", "BIC", "Akaike weight", "points",
                 "degrees of freedom", "parameters", "interval width, two-step / global", "package", "version",
                 "sha256", "processing choice varied", "applied to"}


@pytest.fixture(scope="module")
def study_report(tmp_path_factory):
    from kinetics.run.job import run_study_config

    out = tmp_path_factory.mktemp("study")
    job = run_study_config(REPO / "configs" / "demo_study.toml", out)
    assert job.report_pdf is not None and job.report_html is not None
    return job


def test_page_count_and_no_near_empty_page(study_report, tmp_path):
    pdf = study_report.report_pdf
    pages = len(PdfReader(pdf).pages)
    assert 2 <= pages <= 12, pages
    fills = support.page_fill(pdf, tmp_path)
    assert min(fills) >= 0.25, [f"page {n}: {f:.0%}" for n, f in enumerate(fills, start=1)]


def test_no_type3_fonts_and_vector_figures(study_report):
    assert support.check_fonts(study_report.report_pdf) == []
    assert support.raster_images(study_report.report_pdf) == 0  # figures are vector drawings


def test_every_run_has_its_figures_and_comparison(study_report):
    page = study_report.report_html.read_text(encoding="utf-8")
    parts = re.split(r'<section id="part-\d+">', page)
    for label in RUNS:
        (spectra,) = [p for p in parts if p.startswith(f"<h2>Spectra through time: {html.escape(label)}</h2>")]
        assert "Stacked spectra" in spectra and "12 of 36 spectra shown" in spectra, label
        assert spectra.count("<img ") == 1
        (part,) = [p for p in parts if p.startswith(f"<h2>Rate law: {html.escape(label)}</h2>")]
        assert "Measured and fitted concentrations" in part and "95 % band" in part
        assert "measured minus fitted" in part  # the residual panel
        # every species: the reactant fitted, the products and the mass balance measured
        assert "measured ester, alcohol, acid, mass balance" in part, label
        assert "Rate laws compared" in part and "k under neighbouring processing choices" in part
        assert part.count("<img ") == 1
    pdf_text = "\n".join(p.extract_text() for p in PdfReader(study_report.report_pdf).pages)
    for label in RUNS:
        assert f"Rate law: {label}" in pdf_text and f"Spectra through time: {label}" in pdf_text
    assert pdf_text.count("Rate laws compared") == len(RUNS)
    assert pdf_text.count("12 of 36 spectra shown") == len(RUNS)
    # the study parts: Arrhenius and Eyring with the two-step line and the global fit's line
    for needle in ("Arrhenius plot", "Eyring plot", "dashed: the global fit", "Global fit across temperature"):
        assert needle in page, needle
    figures = {p.stem for p in (study_report.report_html.parent / "figures").glob("*.svg")}
    assert {"temperature_arrhenius", "temperature_eyring", "global_fit"} <= figures
    assert len([f for f in figures if f.endswith("_spectra")]) == len(RUNS)
    assert len([f for f in figures if f.endswith("_courses")]) == len(RUNS)


def test_every_table_heading_has_a_unit_where_the_quantity_has_one(study_report):
    page = study_report.report_html.read_text(encoding="utf-8")
    tables = support.table_headings(page)
    assert len(tables) >= 3 + 3 * len(RUNS)
    for headings in tables:
        assert support.code_names(headings) == [], headings
        assert support.headings_without_unit(headings, DIMENSIONLESS) == [], headings


def test_key_results_are_rounded_as_a_chemist_writes_them(study_report):
    page = study_report.report_html.read_text(encoding="utf-8")
    summary = html.unescape(re.search(r'<section id="summary">(.*?)</section>', page, re.S).group(1))
    lines = re.findall(r"<dd>(.*?)</dd>", summary)
    assert len(lines) == len(RUNS) + 3  # k of each run, Ea, ΔH‡, ΔS‡
    for line in lines:
        # no raw floating-point output (0.00014934289, 4.69e-07) and no ".." ranges
        assert not re.search(r"\de-\d|\.\.", line), line
        raw = [n for n in re.findall(r"\d+\.\d+", line) if len(n.replace(".", "").lstrip("0")) > 5]
        assert not raw, line
    k_lines = [line for line in lines if "statistical 95 % interval" in line]
    assert len(k_lines) == len(RUNS)
    # JCGM 100:2008, 7.2.6: value and uncertainty to the same decimal place, e.g. (1.493 ± 0.008) × 10⁻⁴ s⁻¹
    assert re.search(r"\(\d\.\d+ ± 0\.\d+\) × 10⁻⁴ s⁻¹", k_lines[0]), k_lines[0]
    assert "systematic (processing choices)" in k_lines[0]


def test_safety_caution_in_html_and_pdf(study_report):
    from kinetics.report import SAFETY_CAUTIONS, SAFETY_HEADING

    page = html.unescape(study_report.report_html.read_text(encoding="utf-8"))
    assert SAFETY_HEADING in page and all(text in page for text in SAFETY_CAUTIONS)
    first = PdfReader(study_report.report_pdf).pages[0].extract_text()
    assert SAFETY_HEADING in first and "calorimetric hazard" in first


def test_every_image_decodes_in_headless_chromium(study_report, tmp_path):
    from tests_support_browser import chromium, dump_dom_with_image_sizes

    binary = chromium()
    if binary is None:
        pytest.skip("chromium is not installed")
    dom, sizes = dump_dom_with_image_sizes(binary, study_report.report_html, tmp_path)
    assert len(sizes) == dom.count("<img ") >= 3 + 2 * len(RUNS)
    assert all(w > 100 and h > 100 for w, h in sizes), sizes
