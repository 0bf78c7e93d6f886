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


# ---------------------------------------------------------------- processing (issue 2, FID -> spectrum)
def _bench_processing(quick: bool) -> list[BenchRow]:
    """Read + process JCAMP-DX FIDs with the default pipeline (DC offset, filter delay,
    0.3 Hz broadening, zero-fill x2, FFT, ACME auto-phase): one 32k-point FID, and a
    64-spectrum series of 16k-point FIDs (aligned on a window).  Also the simulator.

    Floor: reading the files' bytes plus one numpy FFT of each FID's size.
    """
    import tempfile
    from pathlib import Path

    from kinetics import processing, simulate
    from kinetics.spectra.jcampdx import write_fid
    from kinetics.spectra.reader import read

    rng = np.random.default_rng(20261202)
    ester = simulate.SpeciesSignals("ester", (
        simulate.Multiplet(4.10, 2, j_hz=7.1, multiplicity=4), simulate.Multiplet(2.05, 3),
        simulate.Multiplet(1.25, 3, j_hz=7.1, multiplicity=3)))
    alcohol = simulate.SpeciesSignals("alcohol", (simulate.Multiplet(3.65, 2, j_hz=7.0, multiplicity=4),
                                                  simulate.Multiplet(1.18, 3, j_hz=7.0, multiplicity=3)))
    tms = simulate.SpeciesSignals("TMS", (simulate.Multiplet(0.0, 12),))
    pipeline = processing.Pipeline.from_config({})
    rows = []
    with tempfile.TemporaryDirectory() as folder:
        big = simulate.Acquisition(observe_mhz=60.0, n_points=32768)
        path = Path(folder) / "fid32k.jdx"
        write_fid(path, simulate.simulate_fid([ester, alcohol, tms], {"ester": 0.5, "alcohol": 0.5, "TMS": 0.02},
                                              rng, big, snr=500, phase0_deg=35.0), compression="dif")
        runs = 3 if quick else 15
        median, p95 = time_runs(lambda: pipeline(read(path)), runs)
        data = rng.normal(size=big.n_points) + 1j * rng.normal(size=big.n_points)
        floor, _ = time_runs(lambda: (path.read_bytes(), np.fft.fft(data)), runs)
        rows.append(BenchRow("processing", "read + process one 32k-point JCAMP-DX FID", median, p95, runs,
                             floor, "default pipeline; floor = read bytes + one 32k FFT"))

        series = simulate.Acquisition(observe_mhz=60.0, n_points=16384)
        times_s = np.arange(64) * 60.0 + 30.0
        ester_c = 0.5 * np.exp(-2e-4 * times_s)
        curves = {"ester": ester_c, "alcohol": 0.5 - ester_c, "TMS": np.full(64, 0.02)}
        sim_runs = 1 if quick else 3
        sim_median, sim_p95 = time_runs(
            lambda: [simulate.simulate_fid([ester, alcohol, tms], {k: v[i] for k, v in curves.items()}, rng,
                                           series, noise_sigma=1.0) for i in range(64)], sim_runs, warmup=0)
        rows.append(BenchRow("processing", "simulate 64 x 16k-point FIDs (in memory)", sim_median, sim_p95,
                             sim_runs, None, "exact sums of damped exponentials, 16 lines each"))
        run_folder = Path(folder) / "series"
        simulate.write_series(run_folder, times_s, curves, [ester, alcohol, tms], rng, acquisition=series,
                              kind="fid", snr=300, drift_ppm=np.linspace(0, 0.01, 64))
        paths = sorted(run_folder.glob("fid_*.jdx"))
        series_runs = 1 if quick else 3
        median, p95 = time_runs(
            lambda: processing.process_series([read(p) for p in paths], pipeline, align_window_ppm=(0.1, -0.1)),
            series_runs, warmup=0)
        block = rng.normal(size=series.n_points) + 1j * rng.normal(size=series.n_points)
        floor, _ = time_runs(lambda: [(p.read_bytes(), np.fft.fft(block)) for p in paths], series_runs)
        rows.append(BenchRow("processing", "read + process + align a 64-FID series (16k each)", median, p95,
                             series_runs, floor, f"{median / 64 * 1e3:.0f} ms per FID; floor = bytes + 64 FFTs"))
    return rows


SECTIONS.append(("processing", _bench_processing))


# ---------------------------------------------------------------- rates (issue 4)
def _bench_rates(quick: bool) -> list[BenchRow]:
    from kinetics.rates.benchmarks import bench_rates

    return bench_rates(quick)


SECTIONS.append(("rates", _bench_rates))


# ---------------------------------------------------------------- live (issue 6)
_LIVE_CONFIG = """
[run]
folder = "in"
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
"""


def _live_spectra(folder, n: int, rng: np.random.Generator):
    """``n`` invented JCAMP-DX spectra of A -> B (first order, k = 1e-4 1/s), 2k points."""
    from kinetics import simulate

    a = simulate.SpeciesSignals("A", (simulate.Multiplet(2.0, 3.0, width_hz=1.5),))
    b = simulate.SpeciesSignals("B", (simulate.Multiplet(3.5, 3.0, width_hz=1.5),))
    s = simulate.SpeciesSignals("S", (simulate.Multiplet(0.0, 12.0, width_hz=1.5),))
    times = np.arange(n) * 30.0
    a_mol_per_l = 0.4 * np.exp(-1e-4 * times)
    simulate.write_series(folder, times, {"A": a_mol_per_l, "B": 0.4 - a_mol_per_l,
                                          "S": np.full(n, 0.05)},
                          [a, b, s], rng, snr=300.0,
                          acquisition=simulate.Acquisition(observe_mhz=60.0, n_points=2048))
    return sorted(folder.glob("*.jdx"))


def _rss_mb() -> float:
    """Resident set size now (Linux /proc), in MB."""
    import os

    with open("/proc/self/statm") as handle:
        pages = int(handle.read().split()[1])
    return pages * os.sysconf("SC_PAGE_SIZE") / 1e6


def _bench_live(quick: bool) -> list[BenchRow]:
    """Latency of the live step and memory over a soak, on the real series + rates path.

    Latency: from the moment a file is complete (handed over by the watcher; the quiet
    period, a setting, comes on top) to the ledger row, the warm-start refit and the
    rewritten page (series.csv, fit.json, series.png, index.html).  Floor: measuring the
    same file alone (read, process, integrate) — what any pipeline must do per spectrum.
    """
    import os
    import shutil
    import tempfile
    from pathlib import Path

    from kinetics import series
    from kinetics.config import load_run_config
    from watchers.folder import ReadyFile
    from watchers.live import RunState, build_from_config, process_ready

    sizes = (50,) if quick else (50, 500)
    new_files = 6 if quick else 20
    soak_n, turn = (150, 50) if quick else (5000, 100)
    rows = []
    base = Path(tempfile.mkdtemp(prefix="kinetics-bench-live-"))
    try:
        staging = base / "staging"
        files = _live_spectra(staging, max(max(sizes) + new_files, soak_n), np.random.default_rng(6))
        for in_run in sizes:
            run = base / f"run{in_run}"
            (run / "in").mkdir(parents=True)
            (run / "run.toml").write_text(_LIVE_CONFIG)
            for path in files[:in_run]:
                shutil.copy(path, run / "in" / path.name)
            pipeline = build_from_config(run / "run.toml")
            state = RunState(pipeline, run / "out")
            folder = Path(pipeline.spec.folder)
            now = "bench"
            ready = [ReadyFile(p, p.name, p.stat().st_size, p.stat().st_mtime_ns, now)
                     for p in sorted(folder.iterdir())]
            process_ready(ready, state.ledger, pipeline.measure)
            state.refit(from_scratch=True)
            samples, parts = [], []
            for path in files[in_run:in_run + new_files]:
                target = folder / path.name
                shutil.copy(path, target)
                stat = target.stat()
                start = time.perf_counter()
                process_ready([ReadyFile(target, target.name, stat.st_size, stat.st_mtime_ns, now)],
                              state.ledger, pipeline.measure)
                ledger_s = time.perf_counter() - start
                state.refit()
                refit_s = time.perf_counter() - start - ledger_s
                state.write_outputs()
                samples.append(time.perf_counter() - start)
                parts.append((ledger_s, refit_s))
            config = load_run_config(run / "run.toml")
            reference = series.make_reference(folder / files[0].name, config)
            floor, _ = time_runs(lambda: series.measure_file(folder / files[1].name, config, reference), 5)
            state.close()
            ledger_s, refit_s = np.median(np.asarray(parts), axis=0)
            rows.append(BenchRow(
                "live", f"new file -> ledger, refit, page ({in_run} in run)",
                float(np.median(samples)), float(np.percentile(samples, 95)), len(samples), floor,
                f"median split: ledger (incl. measuring) {ledger_s * 1e3:.0f} ms, refit "
                f"{refit_s * 1e3:.0f} ms, outputs the rest; quiet period not included"))
        # soak: files in turns, refit and page after each turn; RSS must stay flat
        run = base / "soak"
        (run / "in").mkdir(parents=True)
        (run / "run.toml").write_text(_LIVE_CONFIG)
        pipeline = build_from_config(run / "run.toml")
        state = RunState(pipeline, run / "out")
        folder = Path(pipeline.spec.folder)
        rss = []
        start = time.perf_counter()
        for offset in range(0, soak_n, turn):
            batch = []
            for path in files[offset:offset + turn]:
                target = folder / path.name
                os.link(path, target)
                stat = target.stat()
                batch.append(ReadyFile(target, target.name, stat.st_size, stat.st_mtime_ns, "bench"))
            process_ready(batch, state.ledger, pipeline.measure)
            state.refit()
            state.write_outputs()
            rss.append(_rss_mb())
        elapsed = time.perf_counter() - start
        # then turns with no new spectrum: what the loop itself keeps (a leak) shows here,
        # apart from the growth of the run's own data above
        steady = []
        for _ in range(10 if quick else 20):
            state.refit()
            state.write_outputs()
            steady.append(_rss_mb())
        state.close()
        marker = max(1, len(rss) // 5)
        early = rss[marker - 1]
        per_turn = elapsed / len(rss)
        per_spectrum_kb = (rss[-1] - early) * 1e3 / max(1, (len(rss) - marker) * turn)
        rows.append(BenchRow(
            "live", f"soak: {soak_n} spectra in turns of {turn} (per turn)", per_turn, per_turn,
            len(rss), note=f"RSS {early:.0f} MB after {marker * turn} spectra -> {rss[-1]:.0f} MB "
                           f"after {soak_n} ({per_spectrum_kb:.1f} kB per spectrum of run data); "
                           f"then turns without new files: {steady[len(steady) // 2 - 1]:.0f} MB "
                           f"-> {steady[-1]:.0f} MB over the last {len(steady) - len(steady) // 2} "
                           f"(caches warm)"))
    finally:
        shutil.rmtree(base, ignore_errors=True)
    return rows


SECTIONS.append(("live", _bench_live))


# ---------------------------------------------------------------- signals (issue 3)
def _bench_signals(quick: bool) -> list[BenchRow]:
    """Region integrals (6 windows x 500 spectra) and a global deconvolution (100 spectra).

    Floors: plain numpy window sums of the same points; one linear least-squares solve of
    the deconvolution's amplitudes at the true line shapes (what variable projection
    repeats for every trial of the shared parameters).
    """
    from kinetics import lineshapes
    from kinetics.signals import Component, LineShape, deconvolve, estimate_noise, integrate_region
    from kinetics.spectra import Spectrum

    rng = np.random.default_rng(20261203)
    mhz, n_points = 60.0, 16384
    ppm = np.linspace(11.0, -1.0, n_points)
    centres = [7.26, 5.1, 3.6, 2.1, 1.2, 0.0]
    windows = [(c - 0.15, c + 0.15) for c in centres]
    clean = sum(lineshapes.multiplet(ppm, 1.0, c, 1 + i % 3, 7.0 / mhz, "lorentzian", 1.0 / mhz)
                for i, c in enumerate(centres))
    spectra = [Spectrum(ppm=ppm, real=clean + rng.normal(0, 0.5, n_points), observe_mhz=mhz) for _ in range(500)]

    def integrate_all():
        for spectrum in spectra:
            noise = estimate_noise(spectrum, (9.0, 10.5))
            for window in windows:
                integrate_region(spectrum, window, noise)

    masks = [(ppm >= lo) & (ppm <= hi) for lo, hi in windows]
    stack = np.array([s.real for s in spectra])

    def floor_integrals():
        return [stack[:, m].sum(axis=1) for m in masks]

    runs = 1 if quick else 5
    median, p95 = time_runs(integrate_all, runs, warmup=0 if quick else 1)
    floor, _ = time_runs(floor_integrals, runs)
    rows = [BenchRow("signals", "6 region integrals + noise, 500 spectra", median, p95, runs, floor,
                     f"{median / 500 * 1e3:.2f} ms per spectrum; floor = numpy window sums")]

    axis = np.linspace(1.5, 0.95, 800)
    t = np.linspace(0.0, 1.0, 100)
    amp_a, amp_b = 3.0 * np.exp(-1.5 * t), 2.0 * (1.0 - np.exp(-1.5 * t)) + 0.1
    trip = lineshapes.multiplet(axis, 1.0, 1.20, 3, 7.0 / mhz, "lorentzian", 1.0 / mhz)
    quart = lineshapes.multiplet(axis, 1.0, 1.25, 4, 7.0 / mhz, "lorentzian", 1.0 / mhz)
    data = amp_a[:, None] * trip + amp_b[:, None] * quart
    data = data + rng.normal(0, data[0].max() / 100, data.shape)
    comps = [Component("triplet", 1.195, LineShape(3, 7.1, "lorentzian", 1.2), 0.05),
             Component("quartet", 1.255, LineShape(4, 6.9, "lorentzian", 1.2), 0.05)]
    design = np.column_stack([trip, quart, np.ones_like(axis), axis - axis.mean()])
    runs = 2 if quick else 7
    median, p95 = time_runs(lambda: deconvolve(axis, data, comps, mhz), runs)
    floor, _ = time_runs(lambda: np.linalg.lstsq(design, data.T, rcond=None), runs)
    rows.append(BenchRow("signals", "global deconvolution, triplet+quartet, 100 spectra", median, p95, runs,
                         floor, "variable projection; floor = one linear solve at the true shapes"))
    return rows


SECTIONS.append(("signals", _bench_signals))
