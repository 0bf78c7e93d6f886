"""``kinetics bench``: the benchmarks, as a table.

Speed is measured here, never in timed tests.  Every section returns ``BenchRow``s; a row
gives the median (and 95th percentile) wall time of a task over repeated runs and, where
one exists, the *floor* beside it: the cheapest plain-numpy/scipy way of doing the same
job, so the ratio says what the pipeline costs on top of the unavoidable work.
"""

from __future__ import annotations

import time
from typing import Callable

import numpy as np

from kinetics.benchkit import BenchRow, time_runs  # re-exported: sections import them from here too


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
    0.3 Hz broadening, zero-fill x2, FFT, peak-regression auto-phase): one 32k-point FID, and a
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


SECTIONS.append(("processing", lambda quick: _bench_processing(quick) + _bench_demo_spectrum(quick)))


# ---------------------------------------------------------------- per spectrum (issue 10), beside a plain script
def plain_nmrglue_script(paths, windows_ppm) -> np.ndarray:
    """The per-spectrum job done the plain way, as a reference for the pipeline's cost.

    For each JCAMP-DX file: read with ``nmrglue.jcampdx.read``; a FID (``DATA TYPE``
    holding "FID") is zero-filled to twice its points and Fourier-transformed with numpy
    (first point halved), a spectrum is used as stored; zero- and first-order phase by
    Nelder-Mead (``scipy.optimize.minimize``) on an ACME-like score (entropy of the
    derivative plus a negativity penalty) from (0, 0); then one numpy window sum per
    ``(low_ppm, high_ppm)`` window.  No filter delay, baseline, referencing, alignment,
    noise or uncertainty: only what any script must do.

    Returns
    -------
    ndarray, shape (len(paths), len(windows_ppm))
        Window sums (ppm x intensity).
    """
    import nmrglue
    from scipy import optimize

    def acme_like(params, z, ramp):
        real = (z * np.exp(1j * (params[0] + params[1] * ramp))).real
        d = np.abs(np.diff(real))
        h = d[d > 0] / d.sum()
        negative = np.minimum(real, 0.0) / np.abs(real).max()
        return -np.sum(h * np.log(h)) + 1000.0 * np.sum(negative * negative)

    out = np.zeros((len(paths), len(windows_ppm)))
    for row, path in enumerate(paths):
        header, data = nmrglue.jcampdx.read(str(path))
        mhz = float(header[".OBSERVEFREQUENCY"][0])
        first_x, last_x = (float(v) for v in (header["FIRST"][0].split(",")[0], header["LAST"][0].split(",")[0]))
        z = np.asarray(data[0]) + 1j * np.asarray(data[1])
        if "FID" in header["DATATYPE"][0].upper():
            n = z.size
            z[0] *= 0.5
            z = np.fft.fftshift(np.fft.fft(z, 2 * n))[::-1]
            spectral_width_hz = (n - 1) / (last_x - first_x)
            left_ppm = float(header[".SHIFTREFERENCE"][0].split(",")[-1])
            ppm = left_ppm - np.arange(2 * n) * spectral_width_hz / (2 * n) / mhz
        else:
            ppm = np.linspace(first_x, last_x, z.size) / mhz
        ramp = np.linspace(0.0, 1.0, z.size)
        best = optimize.minimize(acme_like, np.zeros(2), args=(z, ramp), method="Nelder-Mead")
        real = (z * np.exp(1j * (best.x[0] + best.x[1] * ramp))).real
        step = abs(ppm[1] - ppm[0])
        for col, (low, high) in enumerate(windows_ppm):
            out[row, col] = real[(ppm >= low) & (ppm <= high)].sum() * step
    return out


def _demo_files(run: str = "run_25C") -> list:
    from pathlib import Path

    root = Path(__file__).resolve().parent.parent
    return sorted((root / "demo_series" / run).glob("spectrum_*.jdx"))


def _bench_demo_spectrum(quick: bool) -> list[BenchRow]:
    """Read + process + measure one demo spectrum through the library's per-file path,
    beside the floor (the file's bytes plus one FFT of its size) and beside
    :func:`plain_nmrglue_script` on the same file, timed in the same run.  Also the plain
    script over the 144 demo spectra (the engine's row compares with it)."""
    import dataclasses

    from kinetics import series
    from kinetics.config import load_run_config

    rows = []
    files = _demo_files()
    root = files[0].parent.parent.parent
    config = load_run_config(root / "configs" / "demo_run.toml")
    windows = [sig.window_ppm for sig in config.signals]
    reference = series.make_reference(files[0], config)
    runs = 10 if quick else 40
    picks = [files[1 + i % (len(files) - 1)] for i in range(runs + 1)]
    order = iter(picks * 3)
    median, p95 = time_runs(lambda: series.measure_file(next(order), config, reference), runs)
    floor, _ = time_runs(lambda: (files[1].read_bytes(), np.fft.fft(np.ones(4096, complex))), runs)
    plain, _ = time_runs(lambda: plain_nmrglue_script([files[1]], windows), max(3, runs // 4))
    rows.append(BenchRow("processing", "demo spectrum read+process+measure", median, p95, runs, floor,
                         f"4k points, configs/demo_run.toml (global fit: per-spectrum areas come from the "
                         f"series fit); plain nmrglue+numpy script {plain * 1e3:.1f} ms "
                         f"({median / plain:.2f}x); floor = bytes + one 4k FFT"))
    per_spectrum = dataclasses.replace(config, integration=dataclasses.replace(config.integration,
                                                                                global_fit=False))
    median, p95 = time_runs(lambda: series.measure_file(next(order), per_spectrum, reference), runs)
    rows.append(BenchRow("processing", "  same, 4 fit groups deconvolved per spectrum", median, p95, runs, floor,
                         f"integration.global_fit = false; plain script {plain * 1e3:.1f} ms "
                         f"({median / plain:.2f}x)"))

    all_files = sorted(f for run in ("run_25C", "run_35C", "run_45C", "run_55C") for f in _demo_files(run))
    plain_runs = 1 if quick else 3
    median, p95 = time_runs(lambda: plain_nmrglue_script(all_files, windows), plain_runs, warmup=0)
    floor, _ = time_runs(lambda: [(f.read_bytes(), np.fft.fft(np.ones(4096, complex))) for f in all_files],
                         plain_runs)
    rows.append(BenchRow("processing", f"{len(all_files)} demo spectra, plain nmrglue+numpy script", median, p95,
                         plain_runs, floor, "read, ACME-like phase, five window sums; the engine's row compares "
                                            "with this one; floor = bytes + one FFT per file"))
    plain = median
    engine_median, engine_p95 = time_runs(time_demo_run, plain_runs, warmup=0)
    rows.append(BenchRow("processing", f"  same {len(all_files)} spectra through kinetics run (demo study)",
                         engine_median, engine_p95, plain_runs, floor,
                         f"configs/demo_study.toml --no-report: four ledgers, tables, fits with processing "
                         f"uncertainty, the temperature study and its figures; {engine_median / plain:.2f}x the "
                         f"plain script"))
    return rows


def _bench_32k_integrals(quick: bool) -> list[BenchRow]:
    """A 16k-point FID read, processed to a 32k-point spectrum and measured in 7 regions
    (noise, integrals with sigma and truncation loss), beside the floor (bytes + one 32k
    FFT) and :func:`plain_nmrglue_script` on the same file, timed in the same run."""
    import tempfile
    from pathlib import Path

    from kinetics import simulate
    from kinetics.processing import Pipeline
    from kinetics.signals import estimate_noise, integrate_region
    from kinetics.spectra.jcampdx import write_fid
    from kinetics.spectra.reader import read

    rows = []
    rng = np.random.default_rng(20261210)
    centres = [7.26, 6.05, 5.1, 4.10, 3.65, 2.05, 1.25]
    species = [simulate.SpeciesSignals(f"s{i}", (simulate.Multiplet(c, 2 + i % 3, j_hz=7.0,
                                                                    multiplicity=1 + i % 3),))
               for i, c in enumerate(centres)]
    acquisition = simulate.Acquisition(observe_mhz=60.0, n_points=16384)
    fid = simulate.simulate_fid(species, {s.species: 0.1 + 0.05 * i for i, s in enumerate(species)}, rng,
                                acquisition, snr=300, phase0_deg=35.0)
    # each window holds its multiplet (lines 7 Hz = 0.117 ppm apart) and 0.08 ppm on either side
    windows_32k = [(c - 0.08 - (i % 3) * 0.0583, c + 0.08 + (i % 3) * 0.0583) for i, c in enumerate(centres)]
    pipeline = Pipeline.from_config({})
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "fid16k.jdx"
        write_fid(path, fid, compression="dif")

        def kinetics_job():
            spectrum = pipeline(read(path)).spectrum
            noise = estimate_noise(spectrum, (10.0, 8.5))
            return [integrate_region(spectrum, window, noise) for window in windows_32k]

        runs = 5 if quick else 20
        median, p95 = time_runs(kinetics_job, runs)
        floor, _ = time_runs(lambda: (path.read_bytes(), np.fft.fft(np.ones(32768, complex))), runs)
        plain, _ = time_runs(lambda: plain_nmrglue_script([path], windows_32k), max(2, runs // 4))
    rows.append(BenchRow("signals", "32k spectrum, 7 region integrals", median, p95, runs, floor,
                         f"read 16k-point FID + default pipeline (zero-fill to 32k, auto-phase) + noise + "
                         f"7 integrals with sigma and truncation; plain nmrglue+numpy script "
                         f"{plain * 1e3:.1f} ms ({median / plain:.2f}x); floor = bytes + one 32k FFT"))
    return rows


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


def _engine_run(folder_files, run_dir, n: int, refresh_s: float = 5.0):
    """A run of ``_LIVE_CONFIG`` whose first ``n`` files are taken in one batch turn."""
    import os

    from kinetics.run.engine import RunState, plan_from_config, ready_files

    (run_dir / "in").mkdir(parents=True)
    (run_dir / "run.toml").write_text(_LIVE_CONFIG)
    for path in folder_files[:n]:
        os.link(path, run_dir / "in" / path.name)
    plan = plan_from_config(run_dir / "run.toml")
    state = RunState(plan, run_dir / "out", refresh_s=refresh_s)
    state.take(ready_files(plan.spec), parallel=True)
    state.refit(from_scratch=True)
    state.write_outputs()
    return state


def _live_turn(state, source, name: str | None = None):
    """One live turn through the engine: a complete file -> ledger, refit, outputs."""
    import shutil

    from kinetics.run.files import ReadyFile

    target = state.plan.spec.folder / (name or source.name)
    shutil.copy(source, target)
    stat = target.stat()
    start = time.perf_counter()
    state.take([ReadyFile(target, target.name, stat.st_size, stat.st_mtime_ns, "bench")])
    taken = time.perf_counter()
    state.refit()
    refitted = time.perf_counter()
    state.write_outputs()
    done = time.perf_counter()
    return done - start, taken - start, refitted - taken


def _bench_live(quick: bool) -> list[BenchRow]:
    """Latency of a live turn and memory over a soak, through the run engine.

    Latency: from the moment a file is complete (handed over by the watcher; the quiet
    period, a setting, comes on top) to the ledger row, the warm-start refit and the
    outputs (series.csv and fit.json every turn; series.png and index.html at most once
    per refresh interval, 5 s).  Floor: measuring the same file alone (read, process,
    integrate) — what any pipeline must do per spectrum.
    """
    import shutil
    import tempfile
    from pathlib import Path

    from kinetics import series

    sizes = (50,) if quick else (50, 800)
    new_files = 6 if quick else 20
    soak_n, turn = (150, 50) if quick else (5000, 100)
    rows = []
    base = Path(tempfile.mkdtemp(prefix="kinetics-bench-live-"))
    try:
        staging = base / "staging"
        files = _live_spectra(staging, max(max(sizes) + new_files, soak_n), np.random.default_rng(6))
        for in_run in sizes:
            state = _engine_run(files, base / f"run{in_run}", in_run)
            try:
                parts = np.array([_live_turn(state, path) for path in files[in_run:in_run + new_files]])
                config = state.plan.config
                reference = series.make_reference(files[0], config)
                floor, _ = time_runs(lambda: series.measure_file(files[1], config, reference), 5)
                page_s, _ = time_runs(lambda: state.write_outputs(final=True), 3)
            finally:
                state.close()
            total, taken, refit = parts[:, 0], parts[:, 1], parts[:, 2]
            rows.append(BenchRow(
                "live", f"live turn: new file -> ledger, refit, outputs ({in_run} in run)",
                float(np.median(total)), float(np.percentile(total, 95)), len(total), floor,
                f"median split: measure + ledger {np.median(taken) * 1e3:.0f} ms, table + refit "
                f"{np.median(refit) * 1e3:.0f} ms, outputs the rest; figure and page (drawn at "
                f"most every 5 s) {page_s * 1e3:.0f} ms; quiet period not included"))
        rows.append(_bench_live_fit_groups(quick, base))
        # soak: files in turns, refit and outputs after each turn; RSS must stay flat
        run = base / "soak"
        state = _engine_run(files, run, 0)
        from kinetics.run.files import ReadyFile

        folder = Path(state.plan.spec.folder)
        rss = []
        start = time.perf_counter()
        for offset in range(0, soak_n, turn):
            batch = []
            for path in files[offset:offset + turn]:
                target = folder / path.name
                shutil.copy(path, target)
                stat = target.stat()
                batch.append(ReadyFile(target, target.name, stat.st_size, stat.st_mtime_ns, "bench"))
            state.take(batch)
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
                           f"-> {steady[-1]:.0f} MB over the last {len(steady) - len(steady) // 2}"))
    finally:
        shutil.rmtree(base, ignore_errors=True)
    return rows


def _bench_live_fit_groups(quick: bool, base) -> BenchRow:
    """A live turn with the demo config (four fit groups deconvolved across the series):
    the demo's 144 spectra (four runs) as one long run, all but the last few taken first."""
    import os

    from kinetics.run.engine import RunState, plan_from_config, ready_files

    root = base / "fit_groups"
    (root / "in").mkdir(parents=True)
    text = (_demo_files()[0].parent.parent.parent / "configs" / "demo_run.toml").read_text()
    text = text.replace('folder = "../demo_series/run_25C"', 'folder = "in"').replace("target_conversion = 0.95", "")
    (root / "run.toml").write_text(text)
    files = [(path, f"spectrum_{k}{path.name[len('spectrum_'):]}")
             for k, run in enumerate(("run_25C", "run_35C", "run_45C", "run_55C")) for path in _demo_files(run)]
    new_files = 4 if quick else 10
    in_run = (36 if quick else len(files)) - new_files
    for path, name in files[:in_run]:
        os.link(path, root / "in" / name)
    plan = plan_from_config(root / "run.toml")
    state = RunState(plan, root / "out", refresh_s=5.0)
    try:
        state.take(ready_files(plan.spec), parallel=True)
        state.refit(from_scratch=True)
        state.write_outputs()
        samples = []
        for path, name in files[in_run:in_run + new_files]:
            samples.append(_live_turn(state, path, name)[0])
    finally:
        state.close()
    return BenchRow("live", f"live turn, demo config, 4 fit groups ({in_run} in run)", float(np.median(samples)),
                    float(np.percentile(samples, 95)), len(samples),
                    note="line shapes held between refreshes (5 s), the series-wide fit redone from its "
                         "last optimum at each refresh; p95 includes those")


def time_demo_run(out_dir=None, parallel: bool = True) -> float:
    """Seconds for the 144 demo spectra through the engine, as ``kinetics run
    configs/demo_study.toml --no-report`` takes them (four runs, ledgers, tables, fits,
    the temperature study).  For the row beside the plain nmrglue + numpy script."""
    import shutil
    import tempfile
    from pathlib import Path

    from kinetics.run import engine
    from kinetics.run.job import run_study_config

    root = Path(__file__).resolve().parent.parent
    out = Path(out_dir) if out_dir is not None else Path(tempfile.mkdtemp(prefix="kinetics-bench-demo-"))
    minimum = engine.PARALLEL_MIN_FILES
    try:
        if not parallel:
            engine.PARALLEL_MIN_FILES = 10 ** 9
        start = time.perf_counter()
        run_study_config(root / "configs" / "demo_study.toml", out, report=False)
        return time.perf_counter() - start
    finally:
        engine.PARALLEL_MIN_FILES = minimum
        if out_dir is None:
            shutil.rmtree(out, ignore_errors=True)


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


SECTIONS.append(("signals", lambda quick: _bench_signals(quick) + _bench_32k_integrals(quick)))


# ---------------------------------------------------------------- campaign (issue 13)
def _campaign_config(n_runs: int, folder):
    """A campaign of ``n_runs`` run configs over the demo spectra (the four demo folders in
    turn), first order in the ester, each run with its own ledger."""
    from pathlib import Path

    from kinetics.campaign.config import campaign_config_from_dict

    root = Path(__file__).resolve().parents[1]
    temperatures = {"run_25C": 25, "run_35C": 35, "run_45C": 45, "run_55C": 55}
    runs = []
    for i in range(n_runs):
        name = list(temperatures)[i % 4]
        runs.append({"label": f"run {i + 1:02d} {name}", "config": str(root / "configs" / "demo_run.toml"),
                     "folder": str(root / "demo_series" / name), "temperature_c": temperatures[name],
                     "initial": {"ester": 0.40}})
    raw = {"campaign": {"name": "bench", "reactant": "ester", "orders": {"ester": 1},
                        "stoichiometry": {"ester": -1, "alcohol": 1}, "scheduler": "none"}, "runs": runs}
    return campaign_config_from_dict(raw, Path(folder) / "bench_campaign.toml")


def campaign_noop_task(run, runs_dir, species):
    """A task that does no work (the bench's measure of scheduling overhead)."""
    from kinetics.campaign.runner import LoadedRun

    t = np.arange(3.0)
    return LoadedRun(run.label, t, {"ester": t}, {}, "none")


def _bench_campaign(quick: bool) -> list[BenchRow]:
    """The runs of a campaign as tasks: in this process (1 worker) and on a local Dask cluster
    of 2 worker processes (cluster start-up excluded: it is paid once per campaign, a few
    seconds, and is timed in its own row); the scheduling overhead per run from tasks that
    do no work.  Each run is a run config through the run engine (36 demo spectra) with a
    fresh ledger.  Floor of the cluster rows: the in-process time divided by the 2 workers.
    Then the residual bootstrap of the demo campaign's global fit (``[fit] bootstrap``), its
    resamples as tasks of 8, in this process and on the same 2 workers."""
    import dataclasses
    import os
    import tempfile

    from kinetics.campaign.runner import bootstrap_global_fit, execute, run_campaign

    try:
        from distributed import Client, LocalCluster
    except ImportError:  # pragma: no cover - a declared dependency
        return [BenchRow("campaign", "dask.distributed not installed: skipped", 0.0, 0.0, 0)]
    n_runs = 4 if quick else 16
    repeats = 1 if quick else 3
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        config = _campaign_config(n_runs, tmp)
        counter = iter(range(10**6))

        def campaign(scheduler, workers=None):
            loaded, failures, _ = execute(config, f"{tmp}/runs-{next(counter)}", scheduler=scheduler, workers=workers)
            assert not failures, failures
            return loaded

        one, one_p95 = time_runs(lambda: campaign("none"), repeats, warmup=0 if quick else 1)
        rows.append(BenchRow("campaign", f"{n_runs}-run campaign (engine), 1 worker, in process", one, one_p95,
                             repeats, note=f"{one / n_runs * 1e3:.0f} ms per run"))
        n_boot = 16 if quick else 64
        from pathlib import Path

        demo_config = Path(__file__).resolve().parents[1] / "configs" / "demo_campaign.toml"
        demo = run_campaign(demo_config, f"{tmp}/demo", scheduler="none", outputs=False)
        boot_config = dataclasses.replace(demo.config, bootstrap=n_boot)
        fit_runs = [run for run in demo.runs if run.label not in demo.excluded]

        def bootstrap(client=None):
            found = bootstrap_global_fit(boot_config, demo.fit, fit_runs, demo.loaded, client)
            assert found.n_failed == 0, found

        boot_one, boot_one_p95 = time_runs(bootstrap, repeats, warmup=0)
        rows.append(BenchRow("campaign", f"bootstrap of the demo global fit, {n_boot} resamples, 1 worker",
                             boot_one, boot_one_p95, repeats, note=f"{boot_one / n_boot * 1e3:.0f} ms per refit"))
        started = time.perf_counter()
        with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                          dashboard_address=None) as cluster, Client(cluster) as client:
            startup = time.perf_counter() - started
            address = cluster.scheduler_address
            campaign(address)  # warm the workers (imports)
            two, two_p95 = time_runs(lambda: campaign(address), repeats, warmup=0)
            rows.append(BenchRow("campaign", "  same, local Dask cluster of 2 workers", two, two_p95, repeats,
                                 one / 2, f"speed-up {one / two:.2f}x on 2 workers; floor = 1-worker time / 2; "
                                 f"machine: {os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f} "
                                 "(other work on the cores lowers the speed-up)"))
            n_noop = 64
            noop_config = _campaign_config(n_noop, tmp)

            def noops(scheduler):
                execute(noop_config, f"{tmp}/noop", scheduler=scheduler, loader=campaign_noop_task)

            noop, noop_p95 = time_runs(lambda: noops(address), repeats, warmup=1)
            here, _ = time_runs(lambda: noops("none"), repeats, warmup=1)
            rows.append(BenchRow("campaign", f"scheduling overhead per run ({n_noop} no-op tasks, 2 workers)",
                                 noop / n_noop, noop_p95 / n_noop, repeats, here / n_noop,
                                 "floor = the same no-op task called in process"))
            bootstrap(client)  # warm the workers (imports)
            boot_two, boot_two_p95 = time_runs(lambda: bootstrap(client), repeats, warmup=0)
            rows.append(BenchRow("campaign", "  same bootstrap, local Dask cluster of 2 workers", boot_two,
                                 boot_two_p95, repeats, boot_one / 2,
                                 f"speed-up {boot_one / boot_two:.2f}x on 2 workers; floor = 1-worker time / 2; "
                                 f"load average {os.getloadavg()[0]:.1f}"))
        rows.append(BenchRow("campaign", "local cluster start-up (2 worker processes)",
                             startup, startup, 1,
                             note="paid once per campaign on the default scheduler"))
    return rows


SECTIONS.append(("campaign", _bench_campaign))
