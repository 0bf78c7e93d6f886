"""The HTML report in a real browser: headless Chromium (Debian's ``chromium`` package).

Chromium loads the report from disk with networking disabled, saves a full-page screenshot
(kept in the test's temp dir) and dumps the DOM after a small probe — added to a *copy* of
the page, the report itself carries no script — has written each image's decoded size into
the document.  The test checks that every figure decoded to the size its PNG header states,
that the expected headings and tables are in the rendered DOM, and that the screenshot is
not blank.  Skipped, with the reason printed, when chromium is not installed.
"""

from __future__ import annotations

import base64
import re
import struct
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from kinetics import plots, report

from tests_support_browser import PROBE as _PROBE
from tests_support_browser import chromium as _chromium
from tests_support_browser import run as _run


def _png_size(data: bytes) -> tuple[int, int]:
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    return struct.unpack(">II", data[16:24])  # IHDR width, height


def _build_report(folder: Path) -> report.ReportFiles:
    ppm = np.linspace(9.0, -0.5, 2000)
    spectra = [(ppm, f / (1 + ((ppm - 4.1) / 0.02) ** 2) + (1 - f) / (1 + ((ppm - 1.2) / 0.02) ** 2))
               for f in np.linspace(0, 1, 6)]
    time_s = np.linspace(0, 3600, 20)
    conc = 0.4 * np.exp(-8e-4 * time_s)
    t_k = np.array([298.15, 308.15, 318.15])
    k = 1e10 * np.exp(-75_000 / (8.314462618 * t_k))
    table = pd.DataFrame({"temperature_kelvin": t_k, "k_per_s": k})
    sections = (
        report.Section("Spectra through time", (report.FigureBlock(
            "Stacked spectra", plots.stacked_spectra_figure(spectra, time_s=time_s[:6], windows={"A": (1.1, 1.3)})),)),
        report.Section("Concentrations", (report.FigureBlock(
            "Course", plots.concentration_figure(time_s, {"A": conc}, curve_time_s=time_s, curve={"A": conc})),)),
        report.Section("Temperature dependence", (
            report.FigureBlock("Arrhenius plot", plots.arrhenius_figure(t_k, k, 0.05 * k)),
            report.TableBlock("Rate constants per run", table, name="runs"),
        )),
    )
    return report.write_report(folder, *sections, title="Browser check",
                               provenance=report.Provenance(config_text="[run]\n"))


def test_report_renders_in_chromium(tmp_path):
    binary = _chromium()
    if binary is None:
        reason = "chromium is not installed (apt-get install chromium); browser check skipped"
        print(reason)
        pytest.skip(reason)
    files = _build_report(tmp_path / "report")
    page = files.html.read_text(encoding="utf-8")
    expected_sizes = [_png_size(base64.b64decode(src)) for src in
                      re.findall(r'src="data:image/png;base64,([^"]+)"', page)]
    assert len(expected_sizes) == 3

    probe = tmp_path / "probe.html"
    probe.write_text(page.replace("</body>", _PROBE + "</body>"), encoding="utf-8")
    dom_run = _run(binary, tmp_path, "profile-dom", "--virtual-time-budget=5000", "--dump-dom",
                   probe.as_uri())
    assert dom_run.returncode == 0, dom_run.stderr.decode(errors="replace")[-2000:]
    dom = dom_run.stdout.decode("utf-8")
    sizes = re.search(r'data-image-sizes="([^"]*)"', dom)
    assert sizes, "the load event never fired in the browser"
    decoded = [tuple(int(v) for v in item.split("x")) for item in sizes.group(1).split()]
    assert decoded == expected_sizes  # every figure decoded by the browser at full size
    for heading in ("Browser check", "Contents", "Spectra through time", "Concentrations",
                    "Temperature dependence", "Rate constants per run", report.SAFETY_HEADING,
                    report.PROVENANCE_HEADING, "Software versions"):
        assert re.search(rf"<h[123][^>]*>{re.escape(heading)}</h[123]>", dom), heading
    assert dom.count("<table>") == 3  # runs, input files, software versions
    assert "298.15" in dom

    screenshot = tmp_path / "report.png"
    shot_run = _run(binary, tmp_path, "profile-shot", f"--screenshot={screenshot}",
                    "--window-size=1280,4000", files.html.as_uri())
    assert shot_run.returncode == 0 and screenshot.is_file(), shot_run.stderr.decode(errors="replace")[-2000:]
    print(f"screenshot: {screenshot}")
    from matplotlib.image import imread

    pixels = imread(screenshot)[..., :3]
    assert pixels.shape[:2] == (4000, 1280)
    background = np.median(pixels.reshape(-1, 3), axis=0)
    differs = np.abs(pixels - background).sum(axis=2) > 0.1
    assert differs.mean() > 0.05  # a blank or failed page would be one flat colour
    header_band = pixels[:60].mean(axis=(0, 1))
    assert header_band.max() < 0.4  # the dark title band rendered at the top
