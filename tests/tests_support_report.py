"""Checks shared by the study and campaign report tests: fonts, page fill, table headings.

Page fill: the share of the page body's height (between the top and bottom margins) that
carries ink.  The page is rendered with poppler's ``pdftoppm`` (grey, 36 dpi) and a pixel
row counts as inked when any pixel in it is darker than light grey; a text line, a table
row and the whole height of a figure (axis spines, curves) count, blank space does not.
This is what a reader sees as "how full is this page".  Without ``pdftoppm`` the vertical
extent of the page's text (pypdf) stands in: figures merged into the page carry text (tick
and axis labels) at their top and bottom, so the extent covers them.
"""

from __future__ import annotations

import html
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
from pypdf import PdfReader

A4_HEIGHT_PT = 841.89
TOP_MARGIN_PT = 1.5 * 72 / 2.54      # kinetics.report's page template
BOTTOM_MARGIN_PT = 1.6 * 72 / 2.54
_DPI = 36


def fonts(resources, seen) -> list:
    """Every font dictionary reachable from a resource dictionary (form XObjects included)."""
    found = []
    if resources is None:
        return found
    resources = resources.get_object()
    for font in (resources.get("/Font") or {}).values():
        font = font.get_object()
        if id(font) not in seen:
            seen.add(id(font))
            found.append(font)
    for xobject in (resources.get("/XObject") or {}).values():
        xobject = xobject.get_object()
        if xobject.get("/Subtype") == "/Form" and id(xobject) not in seen:
            seen.add(id(xobject))
            found += fonts(xobject.get("/Resources"), seen)
    return found


def check_fonts(pdf: Path) -> list[str]:
    """Problems with the PDF's fonts: any Type 3 font, any font not embedded as TrueType."""
    reader = PdfReader(pdf)
    seen: set = set()
    found = [f for page in reader.pages for f in fonts(page.get("/Resources"), seen)]
    problems = [] if found else ["no fonts at all"]
    for font in found:
        if font.get("/Subtype") == "/Type3":
            problems.append(f"Type 3 font {font.get('/BaseFont')}")
            continue
        leaf = font["/DescendantFonts"][0].get_object() if font.get("/Subtype") == "/Type0" else font
        descriptor = leaf["/FontDescriptor"].get_object()
        if "/FontFile2" not in descriptor:
            problems.append(f"{font.get('/BaseFont')} is not embedded TrueType")
    if shutil.which("pdffonts"):  # poppler's own reading, as a second opinion
        listing = subprocess.run(["pdffonts", str(pdf)], capture_output=True, text=True, check=True).stdout
        problems += [f"pdffonts: {line}" for line in listing.splitlines()[2:] if "Type 3" in line]
    return problems


def _pgm(data: bytes) -> np.ndarray:
    """A binary PGM (P5, 8 bit) as a 2-D array."""
    fields, position = [], 0
    while len(fields) < 4:
        match = re.compile(rb"\s*(#[^\n]*\n\s*)*(\S+)").match(data, position)
        fields.append(match.group(2))
        position = match.end()
    assert fields[0] == b"P5" and int(fields[3]) == 255, fields
    width, height = int(fields[1]), int(fields[2])
    return np.frombuffer(data[position + 1: position + 1 + width * height], np.uint8).reshape(height, width)


def page_fill(pdf: Path, tmp_path: Path) -> list[float]:
    """Share of each page's body height that carries ink (module docstring)."""
    reader = PdfReader(pdf)
    fills = []
    if shutil.which("pdftoppm"):
        for number in range(1, len(reader.pages) + 1):
            stem = tmp_path / f"fill-{number}"
            subprocess.run(["pdftoppm", "-gray", "-r", str(_DPI), "-f", str(number), "-l", str(number),
                            "-singlefile", str(pdf), str(stem)], check=True, capture_output=True)
            image = _pgm(stem.with_suffix(".pgm").read_bytes())
            scale = image.shape[0] / A4_HEIGHT_PT
            top, bottom = int(TOP_MARGIN_PT * scale), image.shape[0] - int(BOTTOM_MARGIN_PT * scale)
            body = image[top:bottom]
            fills.append(float(np.mean(body.min(axis=1) < 200)))
        return fills
    usable = A4_HEIGHT_PT - TOP_MARGIN_PT - BOTTOM_MARGIN_PT
    for page in reader.pages:
        ys = []

        def visit(text, cm, tm, font, size):
            if text.strip():
                y = tm[4] * cm[1] + tm[5] * cm[3] + cm[5]
                if y > BOTTOM_MARGIN_PT - 4:
                    ys.append(y)

        page.extract_text(visitor_text=visit)
        fills.append((max(ys) - min(ys)) / usable if ys else 0.0)
    return fills


def raster_images(pdf: Path) -> int:
    """Raster images placed on the PDF's pages (a figure must be vector: none expected)."""
    count = 0
    for page in PdfReader(pdf).pages:
        xobjects = page["/Resources"].get_object().get("/XObject") or {}
        count += sum(1 for x in xobjects.values() if x.get_object().get("/Subtype") == "/Image")
    return count


def table_headings(page: str) -> list[list[str]]:
    """The column headings of every table of a report page, as shown."""
    tables = re.findall(r"<table>(.*?)</table>", page, flags=re.S)
    return [[html.unescape(h) for h in re.findall(r'<th scope="col">(.*?)</th>', table)] for table in tables]


def headings_without_unit(headings: list[str], dimensionless: set[str]) -> list[str]:
    """Headings naming a quantity with a unit but not giving it ("quantity / unit" expected).

    A heading passes when it has " / unit", names a quantity of dimension one (``dimensionless``)
    or, in a table with a ``unit`` column, is a value or interval column (the unit is in the row).
    """
    has_unit_column = "unit" in headings
    missing = []
    for heading in headings:
        quantity = heading.split(" / ")[0].replace(" ± u", "")
        if " / " in heading or quantity in dimensionless or heading in dimensionless:
            continue
        if has_unit_column and (quantity in ("value", "two-step", "global") or heading.endswith("95 % interval")):
            continue
        missing.append(heading)
    return missing


def code_names(headings: list[str]) -> list[str]:
    """Headings that are machine names (``ci95_low``) rather than words."""
    return [h for h in headings if re.search(r"[a-z]_[a-z]", h)]
