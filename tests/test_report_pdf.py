"""The demo report as a reader and a journal see it: fonts, pages, fill, table headings.

Checks (issue 12): no Type 3 font anywhere in the PDF (every font embedded TrueType); at
most 12 pages; no page under a quarter full; figures placed as vectors; every figure also
as SVG and 300-dpi PNG; every table heading carries a unit where the quantity has one.
The PDF is read with pypdf (a runtime dependency); ``pdffonts`` (poppler-utils) is used as
a second opinion when it is installed.
"""

from __future__ import annotations

import html
import re
import shutil
import struct
import subprocess
from pathlib import Path

import pytest
from pypdf import PdfReader

import tests_support_report as support

REPO = Path(__file__).resolve().parents[1]
A4_HEIGHT_PT = 841.89
TOP_MARGIN_PT = 1.5 * 72 / 2.54
BOTTOM_MARGIN_PT = 1.6 * 72 / 2.54


@pytest.fixture(scope="module")
def demo_report(tmp_path_factory):
    from watchers.workflow import run_demo

    out = tmp_path_factory.mktemp("demo")
    data = REPO / "demo_series"
    outcome = run_demo(out, data_dir=data if data.is_dir() else None)
    return outcome.report_html.parent


def test_no_type3_fonts_every_font_embedded_truetype(demo_report):
    reader = PdfReader(demo_report / "report.pdf")
    seen: set = set()
    fonts = [f for page in reader.pages for f in support.fonts(page.get("/Resources"), seen)]
    assert fonts
    for font in fonts:
        assert font.get("/Subtype") != "/Type3", font.get("/BaseFont")
        leaf = font["/DescendantFonts"][0].get_object() if font.get("/Subtype") == "/Type0" else font
        descriptor = leaf["/FontDescriptor"].get_object()
        assert "/FontFile2" in descriptor, f"{font.get('/BaseFont')} is not embedded TrueType"
    if shutil.which("pdffonts"):  # poppler's own reading, when installed
        listing = subprocess.run(["pdffonts", str(demo_report / "report.pdf")], capture_output=True,
                                 text=True, check=True).stdout
        assert "Type 3" not in listing
        for line in listing.splitlines()[2:]:
            assert re.search(r"\byes\s+yes\b", line), line  # embedded, subset


def _text_extent(page) -> tuple[float, float]:
    """Highest and lowest baseline of any text on the page body (footer excluded), in pt."""
    ys = []

    def visit(text, cm, tm, font, size):
        if text.strip():
            # position = text matrix applied in the current transformation matrix
            y = tm[4] * cm[1] + tm[5] * cm[3] + cm[5]
            if y > BOTTOM_MARGIN_PT - 4:
                ys.append(y)

    page.extract_text(visitor_text=visit)
    return (max(ys), min(ys)) if ys else (0.0, 0.0)


def test_page_count_and_no_near_empty_page(demo_report):
    reader = PdfReader(demo_report / "report.pdf")
    assert 2 <= len(reader.pages) <= 12
    usable = A4_HEIGHT_PT - TOP_MARGIN_PT - BOTTOM_MARGIN_PT
    for number, page in enumerate(reader.pages, start=1):
        top, bottom = _text_extent(page)
        fill = (top - bottom) / usable
        assert fill >= 0.25, f"page {number} is only {fill:.0%} full"


def test_figures_are_vector_and_also_svg_and_300_dpi_png(demo_report):
    reader = PdfReader(demo_report / "report.pdf")
    for page in reader.pages:  # no raster image stands in for a figure
        xobjects = (page["/Resources"].get_object().get("/XObject") or {})
        assert not [x for x in xobjects.values() if x.get_object().get("/Subtype") == "/Image"]
    pngs = sorted((demo_report / "figures").glob("*.png"))
    assert pngs
    for png in pngs:
        assert png.with_suffix(".svg").read_bytes().lstrip().startswith((b"<?xml", b"<svg"))
        data = png.read_bytes()
        width_px = struct.unpack(">I", data[16:20])[0]
        # pHYs chunk: pixels per metre; 300 dpi = 11811 px/m
        phys = data.index(b"pHYs")
        per_metre = struct.unpack(">I", data[phys + 4:phys + 8])[0]
        assert per_metre == pytest.approx(300 / 0.0254, abs=2)
        assert width_px >= 0.95 * 8.5 / 2.54 * 300  # at least a single column at 300 dpi


# Quantities of dimension one (numbers, logarithms of quotients, statistics) need no unit.
_DIMENSIONLESS = ("run", "parameter", "quantity", "rate law", "unit", "file", "note", "converged", "ln k",
                  "u(ln k)", "ln(k/T)", "ln k − line", "ln k, line", "ln A", "χ²", "reduced χ²", "AICc",
                  "ΔAICc", "BIC", "Akaike weight", "points", "degrees of freedom", "parameters",
                  "interval width, two-step / global", "package", "version", "sha256", "weight",
                  "processing choice varied", "applied to")


def test_every_table_heading_has_a_unit_where_the_quantity_has_one(demo_report):
    page = (demo_report / "report.html").read_text(encoding="utf-8")
    tables = re.findall(r"<table>(.*?)</table>", page, flags=re.S)
    assert len(tables) >= 6
    for table in tables:
        headings = [html.unescape(h) for h in re.findall(r'<th scope="col">(.*?)</th>', table)]
        assert not [h for h in headings if re.search(r"[a-z]_[a-z]", h)], headings  # no code names
        has_unit_column = "unit" in headings
        for heading in headings:
            quantity = heading.split(" / ")[0].replace(" ± u", "")
            if " / " in heading or quantity in _DIMENSIONLESS or heading.endswith("95 % interval") \
                    and has_unit_column:
                continue
            if has_unit_column and quantity in ("value", "two-step", "global", "value ± u"):
                continue
            pytest.fail(f"table heading {heading!r} names a quantity without its unit")
