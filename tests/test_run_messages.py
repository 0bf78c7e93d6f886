"""Per-spectrum findings are summarised once per run, naming the signal, the files and what to do."""

from __future__ import annotations

from pathlib import Path

import pytest

from kinetics import series
from kinetics.config import load_run_config

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="module")
def config():
    return load_run_config(ROOT / "configs" / "demo_run.toml")


def test_repeated_flags_are_summarised_as_n_of_m(config):
    names = [s.name for s in config.signals]
    files = [f"spectrum_{i:04d}.jdx" for i in range(1, 37)]
    flags = [[[] for _ in files] for _ in names]
    left = names.index("ester_OCH2")
    for row in range(0, 36, 3):  # 12 of 36
        flags[left][row].append("left_window")
    flags[names.index("standard")][5].append("fit_at_limit")
    flags[names.index("alcohol_CH2OH")][0].append("weak")  # a product weak at the start: not reported
    messages = series.spectrum_messages(config, flags, files)
    assert len(messages) == 2
    edge = next(m for m in messages if "ester_OCH2" in m)
    assert "in 12 of 36 spectra" in edge and "spectrum_0001.jdx" in edge and "and 9 more" in edge
    assert "window_ppm" in edge and "tolerance_ppm" in edge  # what to do
    limit = next(m for m in messages if "standard" in m)
    assert "in 1 of 36 spectra (spectrum_0006.jdx)" in limit and "width_hz" in limit


def test_fit_messages_name_the_signal_not_the_parameter(config):
    members = config.fit_groups["acetyl"]
    text = series.fit_message_in_words("parameters at their limits: c0_width_hz, c1_offset_hz", members)
    assert "c0_width_hz" not in text and "c1_offset_hz" not in text
    assert "the line width of ester_acetyl" in text and "the position of acid_acetyl" in text


def test_demo_run_has_no_processing_warning_and_summarises_in_json(tmp_path):
    # the demo's processing choices move k by less than its statistical interval: no
    # warning naming a choice; k's quoted interval holds the generator's k (demo truth)
    from kinetics import demo
    from kinetics.run.engine import batch_run

    config_path = ROOT / "configs" / "demo_run.toml"
    summary = batch_run(config_path, tmp_path / "out", figures=False)
    warnings = summary.outcome.warnings
    assert not any("depends on processing choices" in w for w in warnings)
    doc = summary.outcome.processing
    assert doc["assessed"] and doc["systematic"]["stderr"] >= 0
    truth = next(r.k_per_s for r in demo.demo_runs() if r.temperature_c == 25)
    lo, hi = summary.outcome.k["ci95"]
    assert lo <= truth <= hi
    assert summary.outcome.k["ci95_statistical"] == doc["statistical"]["ci95"]


def test_kinetics_run_json_and_summary_carry_the_breakdown(tmp_path):
    from kinetics.cli import _job_text
    from kinetics.run.job import run_single

    job = run_single(ROOT / "configs" / "demo_run.toml", tmp_path / "out", report=False)
    run = job.to_dict()["runs"][0]
    pu = run["processing_uncertainty"]
    assert {"statistical", "systematic", "ci95", "breakdown"} <= set(pu)
    assert run["k_per_s"]["ci95"] == pu["ci95"] and run["k_per_s"]["ci95_statistical"] == pu["statistical"]["ci95"]
    assert isinstance(run["warnings"], list)
    text = _job_text(job)
    assert "statistical 95 %" in text and "systematic (processing choices)" in text
