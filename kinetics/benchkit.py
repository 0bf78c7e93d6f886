"""The primitives of ``kinetics bench``: one timed row and the timer.

A leaf module so that :mod:`kinetics.bench` (the table) and the section modules that
fill it (e.g. :mod:`kinetics.rates.benchmarks`) both import it without importing each
other.  Speed is measured in the benchmarks, never in timed tests.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import Callable

import numpy as np

__all__ = ["BenchRow", "time_runs"]


@dataclass(frozen=True)
class BenchRow:
    """One benchmark row: median and 95th percentile wall time of a task, and its floor.

    ``floor_s`` is the cheapest plain numpy/scipy way of doing the same job, when one
    exists; :attr:`ratio` is ``median_s / floor_s``.
    """

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
