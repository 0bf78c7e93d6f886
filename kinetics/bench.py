"""``kinetics bench``: the benchmarks, as a table.

Speed is measured here, never in timed tests.  Every section returns ``BenchRow``s; a row
gives the median (and 95th percentile) wall time of a task over repeated runs and, where
one exists, the *floor* beside it: the cheapest plain-numpy/scipy way of doing the same
job, so the ratio says what the pipeline costs on top of the unavoidable work.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import Callable

import numpy as np


@dataclass(frozen=True)
class BenchRow:
    section: str
    task: str
    median_s: float
    p95_s: float
    runs: int
    floor_s: float | None = None
    note: str = ""

    @property
    def ratio(self) -> float | None:
        if self.floor_s is None or self.floor_s <= 0:
            return None
        return self.median_s / self.floor_s


def time_runs(task: Callable[[], object], runs: int, warmup: int = 1) -> tuple[float, float]:
    """Median and 95th-percentile wall time of ``task`` over ``runs`` calls (after warm-up)."""
    for _ in range(warmup):
        task()
    samples = []
    for _ in range(max(1, runs)):
        start = time.perf_counter()
        task()
        samples.append(time.perf_counter() - start)
    samples = np.asarray(samples)
    return float(np.median(samples)), float(np.percentile(samples, 95))


# Sections are added below, one function per issue area; each takes ``quick`` (fewer
# repetitions, smaller sizes, for CI smoke runs) and returns a list of BenchRow.

SECTIONS: list[tuple[str, Callable[[bool], list[BenchRow]]]] = []


def run_all(quick: bool = False, only: str | None = None) -> list[BenchRow]:
    rows: list[BenchRow] = []
    for name, section in SECTIONS:
        if only and only != name:
            continue
        rows.extend(section(quick))
    return rows


def format_table(rows: list[BenchRow]) -> str:
    header = f"{'section':<12} {'task':<52} {'median':>10} {'p95':>10} {'floor':>10} {'ratio':>7}"
    lines = [header, "-" * len(header)]
    for row in rows:
        floor = f"{row.floor_s * 1e3:8.2f}ms" if row.floor_s is not None else f"{'-':>10}"
        ratio = f"{row.ratio:7.1f}" if row.ratio is not None else f"{'-':>7}"
        lines.append(
            f"{row.section:<12} {row.task:<52} {row.median_s * 1e3:8.2f}ms "
            f"{row.p95_s * 1e3:8.2f}ms {floor} {ratio}"
        )
        if row.note:
            lines.append(f"{'':<12}   {row.note}")
    return "\n".join(lines)
