"""`kinetics watch` with the project's real science: JCAMP-DX files, series, rates.

An invented first-order reaction A -> B (k = 1.5e-3 1/s, truth set here) is simulated as
a folder of JCAMP-DX spectra (kinetics.simulate), replayed into the watched folder by the
real command (``kinetics watch CONFIG --replay SRC``, a separate process), and compared
with :func:`kinetics.run.batch_run` over the finished folder: same ledger rows, same fit.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np

from kinetics import simulate
from kinetics.store import Ledger
from kinetics.run import batch_run

TRUE_K_PER_S = 1.5e-3

CONFIG = """
[run]
folder = "{folder}"
pattern = "*.jdx"

[quantify]
mode = "standard"
standard = "S"
reactant = "A"
product = "B"

[[signals]]
name = "A"
species = "A"
window_ppm = [1.8, 2.2]
nuclei = 3

[[signals]]
name = "B"
species = "B"
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
quiet_period_s = 0.2
poll = true
poll_interval_s = 0.05
"""


def simulate_run(folder: Path, n: int = 10) -> None:
    a = simulate.SpeciesSignals("A", (simulate.Multiplet(2.0, 3.0, width_hz=1.5),))
    b = simulate.SpeciesSignals("B", (simulate.Multiplet(3.5, 3.0, width_hz=1.5),))
    s = simulate.SpeciesSignals("S", (simulate.Multiplet(0.0, 12.0, width_hz=1.5),))
    times = np.arange(n) * 150.0
    truth = {"A": 0.4 * np.exp(-TRUE_K_PER_S * times), "B": 0.4 * (1 - np.exp(-TRUE_K_PER_S * times)),
             "S": np.full(n, 0.05)}
    simulate.write_series(folder, times, truth, [a, b, s], np.random.default_rng(3), snr=300.0,
                          acquisition=simulate.Acquisition(observe_mhz=60.0, n_points=2048))


def test_watch_command_replay_equals_batch_run(tmp_path):
    source = tmp_path / "finished"
    simulate_run(source)
    (tmp_path / "live.toml").write_text(CONFIG.format(folder="incoming"))
    (tmp_path / "batch.toml").write_text(CONFIG.format(folder="finished"))
    command = [sys.executable, "-m", "kinetics.cli", "watch", str(tmp_path / "live.toml"),
               "--replay", str(source), "--interval", "0.05", "--out", str(tmp_path / "live"),
               "--json"]
    result = subprocess.run(command, capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stderr
    summary = json.loads(result.stdout)
    assert summary["stop_reason"] == "replay finished"
    assert summary["counts"]["processed"] == 10
    batch = batch_run(tmp_path / "batch.toml", tmp_path / "batch")
    with Ledger(tmp_path / "live" / "ledger.sqlite") as live, \
            Ledger(tmp_path / "batch" / "ledger.sqlite") as done:
        assert live.comparable_rows() == done.comparable_rows()
    live_fit = json.loads((tmp_path / "live" / "fit.json").read_text())["fit"]
    batch_fit = json.loads((tmp_path / "batch" / "fit.json").read_text())["fit"]
    assert live_fit == batch_fit
    k = batch.outcome.k
    assert k["ci95"][0] <= TRUE_K_PER_S <= k["ci95"][1]
    page = (tmp_path / "live" / "index.html").read_text()
    assert "replay finished" in page and "data:image/png;base64," in page


def test_unknown_or_bad_live_keys_name_the_key(tmp_path):
    import pytest

    from kinetics.errors import ConfigError
    from kinetics.run import plan_from_config

    (tmp_path / "in").mkdir()
    for extra, key in (("quiet_period = 2", "live.quiet_period"),
                       ("target_conversion = 1.5", "live.target_conversion"),
                       ("refresh_s = 'fast'", "live.refresh_s")):
        (tmp_path / "run.toml").write_text(CONFIG.format(folder="in") + extra + "\n")
        with pytest.raises(ConfigError, match=key.replace(".", r"\.")):
            plan_from_config(tmp_path / "run.toml")
