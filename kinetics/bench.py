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


# ---------------------------------------------------------------- temperature (issue 5)
def _temperature_study_runs(rng: np.random.Generator, n_temperatures: int = 5, n_points: int = 100):
    """Invented first-order runs: Ea 80 kJ/mol, k(298.15 K) 1e-3 s^-1, 1 % noise of c0."""
    from kinetics.temperature import GAS_CONSTANT_J_PER_MOL_K, KineticRun

    runs = []
    for t_kelvin in np.linspace(288.15, 328.15, n_temperatures):
        k = 1e-3 * np.exp(-(80e3 / GAS_CONSTANT_J_PER_MOL_K) * (1 / t_kelvin - 1 / 298.15))
        time_s = np.linspace(0.0, 4.0 / k, n_points)
        conc = 0.05 * np.exp(-k * time_s) + rng.normal(0.0, 5e-4, n_points)
        runs.append(KineticRun(f"{t_kelvin:.2f} K", float(t_kelvin), time_s, conc))
    return runs


def _bench_temperature(quick: bool) -> list[BenchRow]:
    from scipy import optimize

    from kinetics.temperature import GAS_CONSTANT_J_PER_MOL_K, global_fit, harmonic_mean_temperature

    runs = _temperature_study_runs(np.random.default_rng(20261201))
    repeats = 3 if quick else 15
    median, p95 = time_runs(lambda: global_fit(runs, "first", profile=False), repeats)
    # Floor: one stacked scipy least-squares on the same model with an analytic Jacobian,
    # started from the truth (no per-run fits, no result record).
    t_ref = harmonic_mean_temperature([r.temperature_kelvin for r in runs])
    theta = np.concatenate([np.full(len(r.time_s), -(1e3 / GAS_CONSTANT_J_PER_MOL_K)
                                    * (1 / r.temperature_kelvin - 1 / t_ref)) for r in runs])
    time_s = np.concatenate([r.time_s for r in runs])
    conc = np.concatenate([r.concentration_mol_per_l for r in runs])
    index = np.concatenate([np.full(len(r.time_s), i) for i, r in enumerate(runs)])
    x0 = np.r_[np.log(1e-3 * np.exp(-(80e3 / GAS_CONSTANT_J_PER_MOL_K) * (1 / t_ref - 1 / 298.15))), 80.0,
               np.full(len(runs), 0.05)]

    def residual(x):
        return x[2:][index] * np.exp(-np.exp(x[0] + x[1] * theta) * time_s) - conc

    def jacobian(x):
        k = np.exp(x[0] + x[1] * theta)
        e = np.exp(-k * time_s)
        jac = np.zeros((len(conc), len(x)))
        jac[:, 0] = -x[2:][index] * e * time_s * k
        jac[:, 1] = jac[:, 0] * theta
        jac[np.arange(len(conc)), 2 + index] = e
        return jac

    floor, _ = time_runs(lambda: optimize.least_squares(residual, x0, jac=jacobian, method="lm"), repeats)
    rows = [BenchRow("temperature", "global fit, 5 temperatures x 100 points (first order)", median, p95, repeats,
                     floor, "includes the 5 per-run fits and the two-step line used as the start")]
    if not quick:
        median, p95 = time_runs(lambda: global_fit(runs, "first", profile=True), 5)
        rows.append(BenchRow("temperature", "  same, with the profile interval of Ea", median, p95, 5))
    return rows


SECTIONS.append(("temperature", _bench_temperature))


# ---------------------------------------------------------------- spectra (issue 2, reading)
def _bench_spectra(quick: bool) -> list[BenchRow]:
    """Read one 32k-point DIF-compressed JCAMP-DX spectrum (real + imaginary), nothing else.

    Floor: reading the same file's bytes plus one numpy FFT of the same size.
    """
    import tempfile
    from pathlib import Path

    from kinetics.spectra import Spectrum
    from kinetics.spectra.jcampdx import write_spectrum
    from kinetics.spectra.reader import read

    rng = np.random.default_rng(20261201)
    n = 32768
    ppm = np.linspace(12.0, -1.0, n)
    real = sum(h / (1 + ((ppm - c) / 0.002) ** 2) for c, h in [(7.26, 2e5), (3.6, 1e6), (1.2, 6e5)])
    spectrum = Spectrum(ppm=ppm, real=real + rng.normal(0, 20.0, n), imag=rng.normal(0, 20.0, n),
                        observe_mhz=60.0)
    runs = 8 if quick else 40
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "bench32k.dx"
        write_spectrum(path, spectrum, compression="dif")
        size_kib = path.stat().st_size / 1024
        median, p95 = time_runs(lambda: read(path), runs)
        data = rng.normal(size=n) + 1j * rng.normal(size=n)
        floor, _ = time_runs(lambda: (path.read_bytes(), np.fft.fft(data)), runs)
    return [BenchRow("spectra", "read 32k-point JCAMP-DX (DIF, real+imag)", median, p95, runs, floor,
                     f"file {size_kib:.0f} KiB; floor = read bytes + one 32k FFT")]


SECTIONS.append(("spectra", _bench_spectra))


# ---------------------------------------------------------------- rates (issue 4)
def _bench_rates(quick: bool) -> list[BenchRow]:
    from kinetics.rates.benchmarks import bench_rates

    return bench_rates(quick)


SECTIONS.append(("rates", _bench_rates))
