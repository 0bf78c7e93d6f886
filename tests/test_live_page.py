"""The live page (``index.html`` + ``live.json`` / ``live-data.js``) in headless Chromium.

The data come from the real engine: an invented first-order reaction A -> B (truth set
here, k = 1.5e-3 1/s) simulated as JCAMP-DX spectra (:mod:`kinetics.simulate`), taken by
:class:`kinetics.run.engine.RunState` in two turns, so the page sees a live run and then
its end.  The config's file name, a species name and a broken file's name carry markup,
which must show as text.

Browser checks use Debian's Chromium (``/usr/bin/chromium``): the DOM dump through
``tests_support_browser`` and, for hover, zoom and updates between two screenshots,
Playwright driving that same binary (no browser download).  Without Chromium the browser
tests skip with the reason (CI installs it when CI=true).  Screenshots are kept in the
test's tmp dir and their paths printed.
"""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import numpy as np
import pytest

import tests_support_browser as browser
from kinetics import plots, simulate
from kinetics.livepage import DATA_GLOBAL
from kinetics.run.engine import RunState, plan_from_config, ready_files
from kinetics.run.outputs import OUTPUT_NAMES
from watchers.views import PageServer

TRUE_K_PER_S = 1.5e-3
N_SPECTRA = 14
FIRST_TURN = 8
HOSTILE = '<img src=x onerror="window.__injected=1">'
RUN_NAME = f"run {HOSTILE}"   # the config file's stem: the page's run name
SPECIES_B = "B<b>bold</b>"

CONFIG = """
[run]
folder = "spectra"
pattern = "*.jdx"

[quantify]
mode = "standard"
standard = "S"
reactant = "A"
product = "{product}"

[[signals]]
name = "A"
species = "A"
window_ppm = [1.8, 2.2]
nuclei = 3

[[signals]]
name = "B"
species = "{product}"
window_ppm = [3.3, 3.7]
nuclei = 3

[[signals]]
name = "S"
species = "S"
window_ppm = [-0.2, 0.2]
nuclei = 12
standard = true
concentration_mol_per_l = 0.05

[live]
target_conversion = 0.95
"""


def _simulate(folder: Path) -> None:
    a = simulate.SpeciesSignals("A", (simulate.Multiplet(2.0, 3.0, width_hz=1.5),))
    b = simulate.SpeciesSignals("B", (simulate.Multiplet(3.5, 3.0, width_hz=1.5),))
    s = simulate.SpeciesSignals("S", (simulate.Multiplet(0.0, 12.0, width_hz=1.5),))
    times = np.arange(N_SPECTRA) * 150.0
    truth = {"A": 0.4 * np.exp(-TRUE_K_PER_S * times), "B": 0.4 * (1 - np.exp(-TRUE_K_PER_S * times)),
             "S": np.full(N_SPECTRA, 0.05)}
    simulate.write_series(folder, times, truth, [a, b, s], np.random.default_rng(3), snr=300.0,
                          acquisition=simulate.Acquisition(observe_mhz=60.0, n_points=2048))


class Run:
    """A run driven turn by turn: ``first()`` writes the live page, ``finish()`` the final one."""

    def __init__(self, root: Path):
        self.root = root
        _simulate(root / "spectra")
        (root / f"broken {HOSTILE}.jdx").write_text("not a spectrum")  # not in the folder yet
        self.config = root / f"{RUN_NAME}.toml"
        self.config.write_text(CONFIG.format(product=SPECIES_B))
        self.out = root / "out"
        self.plan = plan_from_config(self.config)
        # the page polls every refresh interval (at least 1 s); the turns below are
        # further apart than this, so each one redraws
        self.state = RunState(self.plan, self.out, refresh_s=0.5)
        self.ready = ready_files(self.plan.spec)

    def first(self):
        self.state.take(self.ready[:FIRST_TURN])
        self.state.refit()
        return self.state.write_outputs(pending=len(self.ready) - FIRST_TURN)

    def finish(self):
        shutil.move(str(self.root / f"broken {HOSTILE}.jdx"), self.root / "spectra")
        rest = [r for r in ready_files(self.plan.spec) if r.relpath not in
                {x.relpath for x in self.ready[:FIRST_TURN]}]
        self.state.take(rest)
        self.state.final_fit(processing_uncertainty=False)
        return self.state.write_outputs(stop_reason="replay finished", final=True)

    def close(self):
        self.state.close()


@pytest.fixture()
def run(tmp_path):
    running = Run(tmp_path)
    running.first()
    yield running
    running.close()


def _document(out: Path) -> dict:
    return json.loads((out / "live.json").read_text(encoding="utf-8"))


def _points(document: dict) -> int:
    return sum(int(np.sum(np.isfinite(np.array(s["values"], dtype=float))))
               for s in document["series"] if s["values"])


# ---------------------------------------------------------------- the files (no browser)
def test_the_engine_writes_the_page_data_and_both_carry_the_same_document(run):
    out = run.out
    for name in OUTPUT_NAMES:
        assert (out / name).is_file(), name
    document = _document(out)
    script = (out / "live-data.js").read_text(encoding="ascii")  # ASCII only: safe as a script
    prefix = f"window.{DATA_GLOBAL} = "
    assert script.startswith(prefix) and script.rstrip().endswith(";")
    assert json.loads(script[len(prefix):].rstrip().rstrip(";")) == document
    assert document["run"] == RUN_NAME and document["state"] == "running"
    assert document["counts"]["taken"] == FIRST_TURN
    assert document["counts"]["pending"] == N_SPECTRA - FIRST_TURN
    names = [s["name"] for s in document["series"]]
    assert names[:3] == ["A", SPECIES_B, "S"]
    # the page's palette is the figures' palette (kinetics.plots.SERIES_STYLES)
    assert [s["colour"] for s in document["styles"]] == [s.colour for s in plots.SERIES_STYLES]
    assert [s["marker"] for s in document["styles"]] == [s.marker for s in plots.SERIES_STYLES]
    # the reactant's fit carries a 95 % band that holds the curve
    fit = document["series"][0]["fit"]
    value, low, high = (np.array(fit[k], dtype=float) for k in ("value", "low", "high"))
    assert np.all(low <= value) and np.all(value <= high) and np.all(high - low > 0)
    # the latest few spectra, oldest first, scaled to the tallest signal in the windows
    spectra = document["spectra"]
    assert 1 <= len(spectra) <= 4
    assert spectra[-1]["file"] == run.state.table["file"].iloc[-1]
    assert [w["name"] for w in document["windows"]] == ["A", "B", "S"]


def test_the_forecast_is_a_clock_time_consistent_with_the_fit(run):
    document = _document(run.out)
    forecast = document["forecast"]
    assert forecast is not None and forecast["target_conversion"] == 0.95
    # first order: t(95 %) = ln(20) / k (analytic), from the run's own fitted k
    k = run.state.outcome.k["value"]
    assert forecast["time_s"] == pytest.approx(np.log(20.0) / k, rel=0.02)
    from datetime import datetime, timedelta

    origin = datetime.fromisoformat(document["time_origin_utc"].replace("Z", "+00:00"))
    clock = datetime.fromisoformat(forecast["clock_utc"].replace("Z", "+00:00"))
    assert abs((clock - origin) - timedelta(seconds=forecast["time_s"])) < timedelta(seconds=1)


def test_the_page_names_no_other_server_and_escapes_user_text(run):
    page = (run.out / "index.html").read_text(encoding="utf-8")
    assert re.findall(r"(?i)\b(?:https?|ftp|wss?)://", page) == []
    assert re.findall(r"(?i)<(?:iframe|object|embed)\b", page) == []
    assert re.findall(r"(?i)<link\b[^>]*>", page) == ['<link rel="icon" href="data:,">']  # no favicon request
    assert re.findall(r"(?i)<script\b[^>]*\bsrc=", page) == []   # the script is inlined
    assert "<img src=x" not in page and "<b>bold" not in page    # only escaped forms
    assert "&lt;img src=x onerror=" in page


# ---------------------------------------------------------------- browser helpers
def _chromium() -> str:
    binary = browser.chromium()
    if binary is None:
        pytest.skip("chromium is not installed (CI installs Debian's chromium when CI=true)")
    return binary


@pytest.fixture()
def chrome():
    binary = _chromium()
    sync_api = pytest.importorskip("playwright.sync_api",
                                   reason="playwright is not installed (pip install -e '.[test]')")
    with sync_api.sync_playwright() as driver:
        instance = driver.chromium.launch(executable_path=binary, args=["--no-sandbox", "--disable-gpu"])
        try:
            yield instance
        finally:
            instance.close()


class Watched:
    """A page in the browser with a log of its requests, navigations and script errors."""

    def __init__(self, chrome, url: str, tmp_path: Path):
        self.tmp_path = tmp_path
        self.page = chrome.new_page(viewport={"width": 1400, "height": 1000}, timezone_id="UTC", locale="en-GB")
        self.requests: list[str] = []
        self.navigations: list[str] = []
        self.errors: list[str] = []
        self.page.on("request", lambda request: self.requests.append(request.url))
        self.page.on("framenavigated", lambda frame: self.navigations.append(frame.url))
        self.page.on("pageerror", lambda error: self.errors.append(str(error)))
        self.page.goto(url)
        self.page.wait_for_function("window.kineticsLivePage && window.kineticsLivePage.updates >= 1")

    def value(self, script: str):
        return self.page.evaluate(script)

    def shot(self, name: str) -> Path:
        path = self.tmp_path / name
        self.page.screenshot(path=str(path), full_page=True)
        print(f"screenshot: {path}")
        return path


def _check_rendered(watched: Watched, document: dict) -> None:
    page = watched.page
    assert page.text_content("#run-name") == RUN_NAME   # markup shown as text
    assert page.text_content("#run-state") == document["state"]
    for key in ("taken", "quarantined", "pending"):
        assert page.text_content(f"#count-{key}") == str(document["counts"][key])
    n = _points(document)
    assert int(page.get_attribute("#courses", "data-points")) == n
    assert page.locator("#courses .points path").count() == n
    assert page.locator("#spectra path.trace").count() == len(document["spectra"])
    assert page.locator("#spectra rect.window").count() == len(document["windows"])
    labels = page.locator("svg text.label").all_text_contents()
    assert any(label.startswith("time t / ") for label in labels)
    assert "concentration c / mol L⁻¹" in labels and "chemical shift δ / ppm" in labels
    # the forecast as a clock time (the browser's zone, UTC here), to the minute
    forecast = document["forecast"]
    assert f"{int(round(forecast['target_conversion'] * 100))} % conversion expected at " in page.text_content("#forecast")
    assert forecast["clock_utc"][11:16] in page.text_content("#forecast")
    # the shift axis runs from high to low ppm
    ticks = page.evaluate("""Array.prototype.map.call(
        document.querySelectorAll('#spectra g.axes text[text-anchor=middle]:not(.label)'),
        function (t) { return [parseFloat(t.textContent.replace('\u2212', '-')), parseFloat(t.getAttribute('x'))]; })""")
    assert len(ticks) >= 3 and all(a[1] > b[1] for a, b in zip(ticks, ticks[1:]) if a[0] < b[0])
    legend = page.text_content("#courses-legend")
    assert SPECIES_B in legend and "95 % band" in legend
    assert watched.value("window.__injected") is None and page.locator("img[src=x]").count() == 0
    assert page.locator("b").count() == 0
    assert watched.errors == []


# ---------------------------------------------------------------- the page as a file
def test_a_page_before_the_first_spectrum_says_so(tmp_path):
    from kinetics.run.outputs import LiveStatus, render_html

    binary = _chromium()
    status = LiveStatus(folder="/data/run 7", started_utc="t0", updated_utc="t1",
                        counts={"processed": 0, "quarantined": 0}, pending=2)
    (tmp_path / "index.html").write_text(render_html(status, None, refresh_s=5), encoding="utf-8")
    done = browser.run(binary, tmp_path, "profile-empty", "--virtual-time-budget=2000", "--dump-dom",
                       (tmp_path / "index.html").as_uri())
    assert done.returncode == 0, done.stderr.decode(errors="replace")[-2000:]
    dom = done.stdout.decode("utf-8")
    assert 'id="run-name">run 7<' in dom and 'id="count-pending">2<' in dom
    assert "waiting for the first spectrum" in dom and 'data-points="0"' in dom
    assert 'data-state="running"' in dom   # the script ran on the inlined data


def test_the_file_page_renders_in_a_dom_dump(run, tmp_path):
    binary = _chromium()
    done = browser.run(binary, tmp_path, "profile-dump", "--virtual-time-budget=3000", "--dump-dom",
                       (run.out / "index.html").as_uri())
    assert done.returncode == 0, done.stderr.decode(errors="replace")[-2000:]
    dom = done.stdout.decode("utf-8")
    document = _document(run.out)
    assert f'data-points="{_points(document)}"' in dom
    assert "run &lt;img src=x" in dom and "<img src=\"x\"" not in dom
    assert re.search(r'id="count-taken">\s*%d<' % FIRST_TURN, dom)


def test_the_file_page_hovers_zooms_and_updates_in_place(run, chrome, tmp_path):
    watched = Watched(chrome, (run.out / "index.html").as_uri(), tmp_path)
    page = watched.page
    _check_rendered(watched, _document(run.out))
    before = watched.shot("live-page-file-running.png")

    # hover: the tooltip shows the value of the point under the pointer
    series = _document(run.out)["series"][0]
    marker = page.locator('#courses .points[data-series="A"] path').nth(1)
    box = marker.bounding_box()
    page.mouse.move(box["x"] + box["width"] / 2, box["y"] + box["height"] / 2)
    page.wait_for_selector("#tooltip:not([hidden])")
    tip = page.text_content("#tooltip")
    expected = float(f"{series['values'][1]:.4g}")
    assert tip.startswith("A") and f"c = {expected:g}" in tip and "mol L⁻¹" in tip
    assert series["files"][1] in tip
    watched.shot("live-page-file-hover.png")

    # hover on the spectrum: δ and intensity of the latest trace
    plot = page.locator("#spectra").bounding_box()
    page.mouse.move(plot["x"] + plot["width"] * 0.5, plot["y"] + plot["height"] * 0.5)
    page.wait_for_function("document.getElementById('tooltip').textContent.indexOf('δ = ') >= 0")
    assert "ppm" in page.text_content("#tooltip") and "latest" in page.text_content("#tooltip")

    # zoom: a drag across part of the time axis narrows it; double-click resets
    ticks_before = page.locator("#courses g.axes text").all_text_contents()
    area = page.locator("#courses").bounding_box()
    y = area["y"] + area["height"] * 0.4
    page.mouse.move(area["x"] + 90, y)
    page.mouse.down()
    page.mouse.move(area["x"] + 170, y + 40, steps=4)
    page.mouse.up()
    assert page.is_visible("#courses-reset")
    watched.shot("live-page-file-zoomed.png")
    assert page.locator("#courses g.axes text").all_text_contents() != ticks_before
    page.dblclick("#courses", position={"x": 200, "y": 150})
    assert page.is_hidden("#courses-reset")
    assert page.locator("#courses g.axes text").all_text_contents() == ticks_before

    # update in place: the run goes on and ends; the page follows without reloading
    points_running = _points(_document(run.out))
    page.evaluate("window.__kept = 'set before the update'")
    navigations = len(watched.navigations)
    run.finish()
    final = _document(run.out)
    page.wait_for_function("document.body.getAttribute('data-state') === 'finished'", timeout=20000)
    _check_rendered(watched, final)
    assert _points(final) > points_running and final["counts"]["quarantined"] == 1
    assert page.text_content("#run-reason") == "replay finished"
    assert f"broken {HOSTILE}.jdx" in page.text_content("#status-table")  # a file name, as text
    assert watched.value("window.__kept") == "set before the update"
    assert len(watched.navigations) == navigations   # no reload, no navigation
    assert watched.value("window.kineticsLivePage.updates") >= 2
    after = watched.shot("live-page-file-finished.png")
    assert before.read_bytes() != after.read_bytes()
    # offline: a file page asks for nothing but its own data script
    schemes = {url.split(":", 1)[0] for url in watched.requests}
    assert schemes <= {"file", "data"}, watched.requests
    assert any("live-data.js?v=" in url for url in watched.requests)


# ---------------------------------------------------------------- the page served on 127.0.0.1
def test_the_served_page_renders_and_updates_from_live_json(run, chrome, tmp_path):
    server = PageServer(run.out).start()
    try:
        watched = Watched(chrome, server.url, tmp_path)
        page = watched.page
        _check_rendered(watched, _document(run.out))
        watched.shot("live-page-served-running.png")
        page.evaluate("window.__kept = 42")
        run.finish()
        page.wait_for_function("document.body.getAttribute('data-state') === 'finished'", timeout=20000)
        _check_rendered(watched, _document(run.out))
        assert watched.value("window.__kept") == 42 and len(watched.navigations) == 1
        watched.shot("live-page-served-finished.png")
    finally:
        server.stop()
    host = server.url.split("/")[2]
    assert all(url.startswith(f"http://{host}/") or url.startswith("data:") for url in watched.requests), \
        watched.requests
    paths = {url.split("/", 3)[3].split("?")[0] for url in watched.requests if url.startswith("http")}
    assert paths <= {"index.html", "live.json"} and "live.json" in paths
