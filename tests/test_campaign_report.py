"""The report of `kinetics run configs/demo_campaign.toml`: the campaign methods' figures and
tables in the HTML page and the PDF (issues 12 and 13).

Checks: the global fit (courses and residuals), VTNA, RPKA same excess and different excess
and initial rates each appear as a figure with a caption that says what to look for, with
their tables (orders with 95 % intervals, k); table headings carry units; at most 12 pages,
none under a quarter full; no Type 3 font; vector figures; the safety caution; every image
decodes in headless Chromium.  The campaign runs once for the module, in this process.
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

# Quantities of dimension one (orders, ratios, p-values, counts, names) need no unit
# (SI Brochure, 9th ed., 5.4.7).
DIMENSIONLESS = {"run", "parameter", "unit", "points", "in the fit", "order in", "order", "order ± u",
                 "95 % interval", "earlier run", "later run", "rate ratio (later ÷ earlier)",
                 "rate ratio 95 % interval", "p", "overlay", "slower run", "runs", "file", "sha256", "package",
                 "version"}


@pytest.fixture(scope="module")
def campaign(tmp_path_factory):
    from kinetics.run.job import run_campaign_config

    out = tmp_path_factory.mktemp("campaign")
    outcome = run_campaign_config(REPO / "configs" / "demo_campaign.toml", out, scheduler="none")
    report = out / "report"
    assert (report / "report.html") in outcome.files and (report / "report.pdf") in outcome.files
    return outcome, report


def test_every_method_has_its_figure_and_caption(campaign):
    _, report = campaign
    page = html.unescape((report / "report.html").read_text(encoding="utf-8"))
    for heading in ("Global fit", "Global fit of every run, for comparison", "Variable Time Normalization Analysis",
                    "Reaction Progress Kinetic Analysis", "Initial rates"):
        assert f"<h2>{heading}" in page, heading
    figures = {p.stem for p in (report / "figures").glob("*.svg")}
    assert {"global_fit_courses", "global_fit_all_runs_courses", "vtna", "same_excess_1", "same_excess_2",
            "different_excess_rates", "different_excess_normalised", "initial_rates"} <= figures, figures
    assert {p.stem for p in (report / "figures").glob("*.png")} == figures
    # captions say what to look for
    assert "fall on one curve" in page                              # VTNA: overlay = orders right
    assert "catalyst loses activity during the run or the product it has formed inhibits" in page
    assert "They overlay: no sign of catalyst deactivation or product inhibition" in page
    assert "measured minus fitted" in page                          # residuals of the global fit
    pdf_text = "\n".join(p.extract_text() for p in PdfReader(report / "report.pdf").pages)
    for needle in ("Variable time normalisation", "Same excess: R7 deactivating and R3 more velamine",
                   "Different excess", "Initial rates", "Courses and the global fit", "Orders from VTNA"):
        assert needle in pdf_text, needle


def test_tables_give_orders_with_intervals_and_k(campaign):
    outcome, report = campaign
    page = html.unescape((report / "report.html").read_text(encoding="utf-8"))
    for name in ("quorbane", "velamine", "zorphos (catalyst)"):
        assert f"<td class=\"text\">order in {name}</td>" in page, name
    # the demo generator's orders (1, 0.5, 1; kinetics.campaign.demo) inside the intervals shown
    order = outcome.fit.param("order_velamine")
    low, high = order.to_dict()["ci95"]
    assert low <= 0.5 <= high
    assert re.search(r"0\.4\d+ to 0\.5\d+", page)
    tables = {name: path for name, path in ((p.stem, p) for p in (report / "tables").glob("*.csv"))}
    assert {"global_fit", "vtna_orders", "same_excess", "initial_rates_per_run", "initial_rate_orders",
            "different_excess_order", "campaign_runs"} <= set(tables)
    # the CSV keeps machine names and full precision
    assert tables["global_fit"].read_text(encoding="utf-8").splitlines()[0].startswith("parameter,value,stderr")


def test_every_table_heading_has_a_unit_where_the_quantity_has_one(campaign):
    _, report = campaign
    tables = support.table_headings((report / "report.html").read_text(encoding="utf-8"))
    assert len(tables) >= 8
    for headings in tables:
        assert support.code_names(headings) == [], headings
        assert support.headings_without_unit(headings, DIMENSIONLESS) == [], headings


def test_pdf_pages_fonts_and_vector_figures(campaign, tmp_path):
    _, report = campaign
    pdf = report / "report.pdf"
    assert 2 <= len(PdfReader(pdf).pages) <= 12
    fills = support.page_fill(pdf, tmp_path)
    assert min(fills) >= 0.25, [f"page {n}: {f:.0%}" for n, f in enumerate(fills, start=1)]
    assert support.check_fonts(pdf) == []
    assert support.raster_images(pdf) == 0


def test_key_results_and_safety_caution(campaign):
    from kinetics.report import SAFETY_CAUTIONS, SAFETY_HEADING

    _, report = campaign
    page = html.unescape((report / "report.html").read_text(encoding="utf-8"))
    summary = re.search(r'<section id="summary">(.*?)</section>', page, re.S).group(1)
    assert "order in velamine" in summary and "do NOT overlay" in summary
    assert SAFETY_HEADING in page and all(text in page for text in SAFETY_CAUTIONS)
    assert "calorimetric hazard" in PdfReader(report / "report.pdf").pages[0].extract_text()


def test_every_image_decodes_in_headless_chromium(campaign, tmp_path):
    from tests_support_browser import chromium, dump_dom_with_image_sizes

    _, report = campaign
    binary = chromium()
    if binary is None:
        pytest.skip("chromium is not installed")
    dom, sizes = dump_dom_with_image_sizes(binary, report / "report.html", tmp_path)
    assert len(sizes) == dom.count("<img ") >= 8
    assert all(w > 100 and h > 100 for w, h in sizes), sizes
