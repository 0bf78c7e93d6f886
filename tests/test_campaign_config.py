"""The campaign config (kinetics.campaign.config) and the demo campaign end to end.

The demo campaign's truth is set by its generator (kinetics.campaign.demo: k = 0.06, orders
1, 0.5 and 1; run R7's catalyst has a half-life of half the run) -- simulated data where
the test sets the truth.
"""

from __future__ import annotations

import copy
import dataclasses
import json
import math
import tomllib
from pathlib import Path

import pytest

from kinetics.campaign import demo
from kinetics.campaign.config import (campaign_config_from_dict, is_campaign_file, load_campaign_config)
from kinetics.campaign.runner import run_campaign
from kinetics.errors import ConfigError

ROOT = Path(__file__).resolve().parents[1]
DEMO_CONFIG = ROOT / "configs" / "demo_campaign.toml"
DEMO_SERIES = ROOT / "demo_series" / "campaign"


def _raw():
    with open(DEMO_CONFIG, "rb") as handle:
        return tomllib.load(handle)


def _set(raw, path, value):
    node = raw
    for part in path[:-1]:
        node = node[part]
    if value is _DELETE:
        del node[path[-1]]
    else:
        node[path[-1]] = value
    return raw


_DELETE = object()

# (where to change, new value, key the error must name)
BAD = [
    (("campaign", "reactant"), _DELETE, "campaign.reactant"),
    (("campaign", "orders", "velamine"), "fast", "campaign.orders.velamine"),
    (("campaign", "orders", "velamine"), math.nan, "campaign.orders.velamine"),
    (("campaign", "orders", "stirrer"), 1.0, "campaign.stoichiometry.stirrer"),
    (("campaign", "stoichiometry", "velamine"), math.inf, "campaign.stoichiometry.velamine"),
    (("campaign", "scheduler"), "smoke", "campaign.scheduler"),
    (("campaign", "workers"), 0, "campaign.workers"),
    (("campaign", "temperature_law"), "linear", "campaign.temperature_law"),
    (("campaign", "colour"), "blue", "campaign.colour"),
    (("runs", 1, "initial", "quorbane"), math.nan, "runs[1].initial.quorbane"),
    (("runs", 1, "initial", "quorbane"), -0.1, "runs[1].initial.quorbane"),
    (("runs", 0, "catalyst_mol_per_l"), math.inf, "runs[0].catalyst_mol_per_l"),
    (("runs", 0, "catalyst_mol_per_l"), _DELETE, "runs[0].catalyst_mol_per_l"),
    (("runs", 2, "temperature_c"), "hot", "runs[2].temperature_c"),
    (("runs", 2, "temperature_c"), -300.0, "runs[2].temperature_c"),
    (("runs", 3, "factors"), {"stirring_rpm": math.nan}, "runs[3].factors.stirring_rpm"),
    (("runs", 0, "table"), _DELETE, "runs[0]"),
    (("runs", 0, "folder"), "somewhere", "runs[0].folder"),
    (("runs", 0, "time_unit"), "fortnight", "runs[0].time_unit"),
    (("runs", 4, "label"), "R1 standard", "runs[4].label"),
    (("runs", 5, "shade"), "green", "runs[5].shade"),
    (("fit",), {"bootstrap": -1}, "fit.bootstrap"),
    (("fit",), {"bootstrap": 2.5}, "fit.bootstrap"),
    (("fit",), {"bootstrap": 100, "seed": -2}, "fit.seed"),
    (("fit",), {"bootstrap": 100, "resamples": 3}, "fit.resamples"),
]


@pytest.mark.parametrize("where, value, key", BAD, ids=[b[2] + ":" + repr(b[1])[:12] for b in BAD])
def test_config_errors_name_the_key(where, value, key):
    raw = _set(copy.deepcopy(_raw()), where, value)
    with pytest.raises(ConfigError) as caught:
        campaign_config_from_dict(raw, DEMO_CONFIG)
    assert caught.value.key == key, str(caught.value)


def test_toml_nan_and_a_single_run_are_refused(tmp_path):
    text = DEMO_CONFIG.read_text(encoding="utf-8").replace("catalyst_mol_per_l = 0.02", "catalyst_mol_per_l = nan")
    path = tmp_path / "bad.toml"
    path.write_text(text.replace('table = "../', f'table = "{ROOT}/'), encoding="utf-8")
    with pytest.raises(ConfigError) as caught:
        load_campaign_config(path)
    assert caught.value.key == "runs[3].catalyst_mol_per_l" and str(path) in str(caught.value)
    raw = _raw()
    raw["runs"] = raw["runs"][:1]
    with pytest.raises(ConfigError, match="at least 2") as caught:
        campaign_config_from_dict(raw, DEMO_CONFIG)
    assert caught.value.key == "runs"


def test_demo_config_is_read_into_frozen_records():
    config = load_campaign_config(DEMO_CONFIG)
    assert is_campaign_file(DEMO_CONFIG) and not is_campaign_file(ROOT / "configs" / "demo_study.toml")
    assert config.partner == "velamine" and config.catalyst == "zorphos" and len(config.runs) == 7
    assert dict(config.orders) == {"quorbane": None, "velamine": None, "zorphos": None}
    assert config.runs[3].catalyst_mol_per_l == 0.02 and config.runs[0].temperature_kelvin == pytest.approx(298.15)
    assert config.runs[1].initial_dict() == {"quorbane": 0.05, "velamine": 0.10, "quorvelide": 0.0}
    with pytest.raises(dataclasses.FrozenInstanceError):
        config.runs[0].label = "other"  # type: ignore[misc]


def test_demo_series_are_the_generators(tmp_path):
    # the committed tables are exactly what the seeded generator writes
    for path in demo.write_series(tmp_path):
        assert path.read_bytes() == (DEMO_SERIES / path.name).read_bytes(), path.name
    assert demo.config_text() == DEMO_CONFIG.read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def demo_outcome(tmp_path_factory):
    return run_campaign(DEMO_CONFIG, tmp_path_factory.mktemp("campaign"), scheduler="none")


def test_demo_campaign_recovers_the_generator(demo_outcome):
    outcome = demo_outcome
    assert outcome.success and not outcome.failures and len(outcome.runs) == 7
    truth = {"k": demo.TRUTH["k"], **{f"order_{s}": demo.TRUTH[f"order_{s}"]
                                       for s in ("quorbane", "velamine", "zorphos")}}
    for name, value in truth.items():
        lo, hi = outcome.fit.param(name).ci95
        assert lo <= value <= hi, (name, value, lo, hi)
    # the deactivating run is named by the same-excess check, the clean pair is not
    flagged = {(r.early, r.late): r.flagged for r in outcome.same_excess}
    assert flagged == {("R7 deactivating", "R3 more velamine"): True, ("R1 standard", "R2 same excess"): False}
    assert [r.slower for r in outcome.same_excess if r.flagged] == ["R7 deactivating"]
    assert outcome.excluded == ("R7 deactivating",)
    # ... and the fit of every run, kept for comparison, is pulled off by it (truth b = 0.5 outside)
    lo, hi = outcome.fit_all.param("order_velamine").ci95
    assert not lo <= 0.5 <= hi
    assert any("R7 deactivating" in w and "do not overlay" in w for w in outcome.warnings)
    # the log-log initial rates agree with the generator within their (wide) intervals
    for estimate in outcome.initial_rates.orders:
        name = estimate.name.replace("catalyst", "zorphos")
        assert estimate.ci95[0] <= truth[name] <= estimate.ci95[1], estimate


def test_demo_campaign_outputs(demo_outcome):
    out = demo_outcome.out_dir
    for name in ("runs.csv", "global_fit.csv", "global_fit.png", "global_fit.svg", "same_excess.csv",
                 "same_excess_1.png", "vtna.csv", "vtna.svg", "initial_rates.csv", "initial_rates.png"):
        assert (out / name).is_file() and (out / name).stat().st_size > 0, name
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    assert summary["kind"] == "campaign" and summary["excluded_runs"] == ["R7 deactivating"]
    assert summary["global_fit"]["parameters"]["order_zorphos"]["ci95"][0] < 1.0
    text = demo_outcome.text()
    assert "order_velamine" in text and "95 %" in text and "warning: runs R7 deactivating" in text


def test_cli_json_prints_one_object(tmp_path, capsys):
    from kinetics.cli import main

    config = tmp_path / "two.toml"
    raw = DEMO_CONFIG.read_text(encoding="utf-8").replace('table = "../', f'table = "{ROOT}/')
    head, *runs = raw.split("[[runs]]")
    config.write_text(head.replace('orders = { quorbane = "free", velamine = "free", zorphos = "free" }',
                                   'orders = { quorbane = 1, velamine = 0.5, zorphos = 1 }')
                      + "[[runs]]" + "[[runs]]".join(runs[:3]), encoding="utf-8")
    code = main(["run", str(config), "--out", str(tmp_path / "out"), "--json", "--scheduler", "none"])
    document = json.loads(capsys.readouterr().out)
    assert code == 0 and document["kind"] == "campaign" and len(document["runs"]) == 3
    k = document["global_fit"]["parameters"]["k"]
    assert k["ci95"][0] <= demo.TRUTH["k"] <= k["ci95"][1]


def test_a_failed_run_is_named_and_the_others_go_on(tmp_path):
    raw = _raw()
    raw["runs"][1]["table"] = "../demo_series/campaign/missing.csv"
    outcome = run_campaign(campaign_config_from_dict(raw, DEMO_CONFIG), tmp_path, scheduler="none", outputs=False)
    assert [f.label for f in outcome.failures] == ["R2 same excess"] and "missing.csv" in outcome.failures[0].reason
    assert len(outcome.runs) == 6 and outcome.fit is not None and outcome.fit.converged
    assert not outcome.success
    assert outcome.warnings[0].startswith("run R2 same excess could not be used")


def test_run_configs_need_their_own_ledger_folders():
    raw = _raw()
    for i, label in ((0, "25 C"), (1, "25-C")):
        raw["runs"][i] = {"label": label, "config": "demo_run.toml", "initial": {"quorbane": 0.1},
                          "catalyst_mol_per_l": 0.01}
    with pytest.raises(ConfigError, match="ledger folder runs/25_c") as caught:
        campaign_config_from_dict(raw, DEMO_CONFIG)
    assert caught.value.key == "runs[1].label"
    raw["runs"][0]["config"] = "no_such_run.toml"
    with pytest.raises(ConfigError) as caught:
        campaign_config_from_dict(raw, DEMO_CONFIG)
    assert caught.value.key == "runs[0].config"
