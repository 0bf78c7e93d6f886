"""User text is never read as markup: species, signal, run and file names print as written.

Three species named like markup — ``$\\frac{a}{b}$`` (matplotlib mathtext: valid, so it would
silently be drawn as a fraction), ``[bold]x[/]`` (rich console markup: ``[/]`` closes a
style, and an unmatched one raises) and ``a_{1}`` (TeX subscript) — go through `kinetics run`
on a small simulated folder (kinetics.simulate; truth set here, spin system as in
test_preflight.py) with a quarantined file whose name is markup too.  Every figure drawn
(report figures and the live page's PNG), the report's HTML and PDF, the live page and the
terminal output must show the names literally.
"""

from __future__ import annotations

import html
import io
import json

import numpy as np
import pytest
from matplotlib.text import Text

from kinetics import plots, simulate
from kinetics.cli import main
from kinetics.store import Ledger

from test_preflight import ACID, ESTER, SOLVENT, TMS

FRACTION, BOLD, SUBSCRIPT = r"$\frac{a}{b}$", "[bold]x[/]", "a_{1}"
RUN = r"$x^2$ [b]run[\\b]"  # no "/" in a file name
BAD_FILE = "[bold]odd[red].jdx"  # a file name cannot hold "/": the reason below holds [/]

CONFIG = f"""\
[run]
folder = "spectra"
[time]
source = "header"
[processing]
phase = "none"
[[signals]]
name = '{FRACTION}'
species = '{FRACTION}'
window_ppm = [1.05, 1.45]
nuclei = 3
[[signals]]
name = '{BOLD}'
species = '{BOLD}'
window_ppm = [1.95, 2.15]
nuclei = 3
[[signals]]
name = '{SUBSCRIPT}'
species = '{SUBSCRIPT}'
window_ppm = [-0.1, 0.1]
nuclei = 12
standard = true
concentration_mol_per_l = 0.01
[quantify]
mode = "standard"
reactant = '{FRACTION}'
product = '{BOLD}'
[integration]
noise_region_ppm = [9.0, 10.5]
"""


def _displayed(text: Text) -> tuple[str, bool]:
    # what matplotlib draws for this Text: (string, whether it is parsed as mathtext)
    return text._preprocess_math(text.get_text())


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    root = tmp_path_factory.mktemp("markup")
    folder = root / "spectra"
    times = np.arange(5) * 300.0
    simulate.write_series(folder, times, {"ester": 0.5 * np.exp(-1e-3 * times),
                                          "acid": 0.5 * (1 - np.exp(-1e-3 * times)),
                                          "tms": np.full(times.size, 0.01)},
                          [ESTER, ACID, TMS], np.random.default_rng(7), snr=150.0, solvent=SOLVENT,
                          acquisition=simulate.Acquisition(observe_mhz=60.0, n_points=4096))
    (folder / BAD_FILE).write_text("##TITLE= [bold]not[/] a spectrum\n")
    config = root / f"{RUN}.toml"  # the run's label is the config file's name
    config.write_text(CONFIG)
    drawn: list[tuple[str, bool]] = []
    real_save = plots._save

    def recording_save(figure, *args, **kwargs):
        drawn.extend(_displayed(t) for t in figure.findobj(Text) if t.get_text())
        return real_save(figure, *args, **kwargs)

    patch = pytest.MonkeyPatch()
    patch.setattr(plots, "_save", recording_save)
    stdout, stderr = io.StringIO(), io.StringIO()
    try:
        import contextlib

        with contextlib.redirect_stdout(stdout), contextlib.redirect_stderr(stderr):
            code = main(["run", str(config), "--out", str(root / "out")])
    finally:
        patch.undo()
    return {"code": code, "out": root / "out", "drawn": drawn, "stdout": stdout.getvalue(),
            "stderr": stderr.getvalue()}


def test_the_run_succeeds_and_quarantines_the_odd_file(run):
    assert run["code"] == 0, run["stderr"]
    with Ledger(run["out"] / "ledger.sqlite") as ledger:
        assert [path for path, _ in ledger.quarantined()] == [BAD_FILE]


@pytest.mark.parametrize("name", [FRACTION, BOLD, SUBSCRIPT])
def test_every_figure_draws_the_names_as_written(run, name):
    assert run["drawn"], "no figure was drawn"
    # matplotlib's own tick labels are mathtext ($\\mathdefault{2}$); no user text may be
    assert not [s for s, math in run["drawn"] if math and "mathdefault" not in s]
    assert any(name in s for s, math in run["drawn"] if not math), f"{name} is in no figure"


def test_the_live_png_is_among_the_figures(run):
    # the live page's figure (series.png) carries the species as legend entries
    assert (run["out"] / "series.png").read_bytes().startswith(b"\x89PNG")
    assert any(FRACTION in s and "_concentration" in s for s, _ in run["drawn"])


@pytest.mark.parametrize("name", [FRACTION, BOLD, SUBSCRIPT, RUN])
def test_report_html_and_pdf_show_the_names(run, name):
    from pypdf import PdfReader

    page = (run["out"] / "report" / "report.html").read_text(encoding="utf-8")
    assert html.escape(name, quote=True) in page
    pdf = "".join(p.extract_text() for p in PdfReader(run["out"] / "report" / "report.pdf").pages)
    assert name in pdf


def test_the_live_page_data_holds_the_names(run):
    document = json.loads((run["out"] / "live.json").read_text(encoding="utf-8"))
    text = json.dumps(document, ensure_ascii=False)
    for name in (FRACTION, BOLD, SUBSCRIPT):
        assert json.dumps(name, ensure_ascii=False)[1:-1] in text


def test_terminal_output_shows_names_and_no_markup_error(run):
    assert "MarkupError" not in run["stderr"] and "Traceback" not in run["stderr"]
    printed = run["stdout"] + run["stderr"]
    assert BAD_FILE in printed or SUBSCRIPT in printed or FRACTION in printed


def test_the_terminal_panel_prints_markup_as_written(run):
    from rich.console import Console

    from kinetics.run.outputs import LiveStatus
    from watchers.views import TerminalView

    with Ledger(run["out"] / "ledger.sqlite") as ledger:
        quarantined = tuple(ledger.quarantined())
        counts = ledger.counts()
    status = LiveStatus(folder="spectra", started_utc="t0", updated_utc="t1", counts=counts,
                        latest_path=BAD_FILE, concentrations={FRACTION: (0.1, 0.01), BOLD: (0.2, None),
                                                              SUBSCRIPT: (0.01, None)},
                        quarantined=quarantined, stop_reason="[/] stopped [red]")
    view = TerminalView(enabled=True)
    buffer = io.StringIO()
    view.console = Console(file=buffer, width=400, force_terminal=False, color_system=None)
    view.close(status)  # not a terminal: prints the final panel once
    shown = buffer.getvalue()
    for text in (FRACTION, BOLD, SUBSCRIPT, BAD_FILE, "[/] stopped [red]"):
        assert text in shown, text
