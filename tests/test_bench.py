"""`kinetics bench` runs and reports (a smoke test of the command; speed itself is never
asserted here, it is measured by the benchmarks)."""

from __future__ import annotations

import json

import pytest

from kinetics import bench
from kinetics.cli import main


def test_every_issue_area_has_a_bench_section():
    names = {name for name, _ in bench.SECTIONS}
    assert {"spectra", "processing", "signals", "rates", "temperature", "live"} <= names


def test_bench_json_rows_carry_medians_and_floors(capsys):
    assert main(["bench", "--quick", "--section", "temperature", "--json"]) == 0
    payload = json.loads(capsys.readouterr().out)
    rows = payload["rows"]
    assert rows and all(r["section"] == "temperature" and r["median_s"] > 0 and r["p95_s"] >= r["median_s"]
                        for r in rows)
    with_floor = [r for r in rows if r["floor_s"] is not None]
    assert with_floor and all(r["ratio"] == pytest.approx(r["median_s"] / r["floor_s"]) for r in with_floor)


def test_table_shows_ratio_to_the_floor():
    rows = [bench.BenchRow("x", "task a", 0.004, 0.005, 10, floor_s=0.001), bench.BenchRow("x", "task b", 0.2, 0.3, 3)]
    text = bench.format_table(rows)
    assert "4.0" in text.splitlines()[2] and "task b" in text


def test_unknown_section_is_a_clear_error(capsys):
    assert main(["bench", "--section", "nope"]) == 2
    assert "nope" in capsys.readouterr().err
