"""notebooks/demo.ipynb runs from top to bottom (nbclient) and recovers the demo's generator.

The notebook is executed in a temporary copy of the layout it expects (``notebooks/``
beside ``configs/`` and ``demo_series/``), so it writes nothing into the repository.  The
check is the demo's own: the 95 % intervals the notebook obtains for k at 25 °C and for Ea
hold the values the demo's generator used, read here from the demo's truth file
(``demo_series/run_25C/truth.json``, written by the simulator that made the spectra).
"""

import json
import shutil
from pathlib import Path

import pytest

nbformat = pytest.importorskip("nbformat")
nbclient = pytest.importorskip("nbclient")

ROOT = Path(__file__).resolve().parents[1]
NOTEBOOK = ROOT / "notebooks" / "demo.ipynb"


@pytest.fixture(scope="module")
def executed(tmp_path_factory):
    work = tmp_path_factory.mktemp("nb")
    (work / "notebooks").mkdir()
    shutil.copy(NOTEBOOK, work / "notebooks" / NOTEBOOK.name)
    for name in ("configs", "demo_series"):
        (work / name).symlink_to(ROOT / name, target_is_directory=True)
    notebook = nbformat.read(work / "notebooks" / NOTEBOOK.name, as_version=4)
    # one cell more, read by this test only: the results the notebook's cells left behind
    notebook.cells.append(nbformat.v4.new_code_cell(
        'import json as _json\n'
        'print("RESULTS " + _json.dumps({"k": run.k(), "ea": study.arrhenius().to_dict()["ea_kj_per_mol"],\n'
        '                                "html": str(Path(files.html).resolve())}))'))
    client = nbclient.NotebookClient(notebook, timeout=600, kernel_name="python3",
                                     resources={"metadata": {"path": str(work / "notebooks")}})
    client.execute()
    return notebook, work


def _outputs(notebook, kind):
    return [out for cell in notebook.cells if cell.cell_type == "code" for out in cell.get("outputs", [])
            if out.get("output_type") == kind]


def test_notebook_runs_without_errors_and_shows_figures(executed):
    notebook, work = executed
    assert _outputs(notebook, "error") == []
    images = [out for out in _outputs(notebook, "execute_result") + _outputs(notebook, "display_data")
              if "image/png" in out.get("data", {})]
    assert len(images) >= 3  # the run's courses, Arrhenius, Eyring
    tables = [out for out in _outputs(notebook, "execute_result") if "text/html" in out.get("data", {})]
    assert len(tables) >= 3  # the series table, the parameters, the ranking (pandas HTML)


def test_notebook_recovers_the_demo_generator(executed):
    notebook, work = executed
    printed = "".join(out.get("text", "") for out in _outputs(notebook, "stream"))
    results = json.loads(printed.split("RESULTS ", 1)[1].splitlines()[0])
    truth = json.loads((ROOT / "demo_series" / "run_25C" / "truth.json").read_text())["scenario"]
    low, high = results["k"]["ci95"]
    assert low <= truth["k_per_s"] <= high
    low, high = results["ea"]["ci95"]
    assert low <= truth["ea_kj_per_mol"] <= high
    html = Path(results["html"])
    assert html.is_relative_to(work.resolve()) and html.stat().st_size > 10_000  # the report, in the copy
    assert "Safety first" in html.read_text(encoding="utf-8")  # every report carries the cautions
