"""A small, real pipeline for the live tests, runnable as a separate process.

The live shell is tested apart from the science modules: here a tiny text format of
invented spectra (two Gaussian lines whose areas follow a first-order reaction A -> B,
truth set by the test) and a measurer that integrates two fixed windows; the refit is the
project's own :class:`kinetics.run.RatesRefitter` (first-order law of kinetics.rates).  Real files and real processes throughout: the watcher runs as
``python tests/test_live_support.py watch ...`` so it can be killed with SIGKILL.

File format (invented for these tests)::

    # kinetics-test-spectrum
    # acquired_utc: 2026-01-01T00:00:00+00:00
    # points: 120
    ppm,intensity
    6.0,0.001
    ...
    # end

A file without its ``# end`` line, with fewer points than announced or with a bad
number is refused with an InputFileError naming the line.
"""

from __future__ import annotations

import argparse
import math
import sys
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from kinetics.errors import InputFileError
from kinetics.store import FileMeasurement, SignalRow

WINDOWS_PPM = {"A": (4.6, 3.4), "B": (2.6, 1.4)}
START_UTC = datetime(2026, 1, 1, tzinfo=timezone.utc)
TRUE_K_PER_S = 2.0e-3
C0_MOL_PER_L = 0.5
N_POINTS = 120


# ---------------------------------------------------------------- writing files
def spectrum_text(time_s: float, rng: np.random.Generator, k_per_s: float = TRUE_K_PER_S) -> str:
    """One invented spectrum at ``time_s`` after the start, as the test format."""
    ppm = np.linspace(6.0, 0.0, N_POINTS)
    area_a = C0_MOL_PER_L * math.exp(-k_per_s * time_s)
    area_b = C0_MOL_PER_L - area_a
    width = 0.15
    line = lambda centre: np.exp(-0.5 * ((ppm - centre) / width) ** 2) / (width * math.sqrt(2 * math.pi))
    intensity = area_a * line(4.0) + area_b * line(2.0) + rng.normal(0.0, 0.004, ppm.size)
    acquired = START_UTC + timedelta(seconds=time_s)
    lines = ["# kinetics-test-spectrum", f"# acquired_utc: {acquired.isoformat()}",
             f"# points: {ppm.size}", "ppm,intensity"]
    lines += [f"{p:.5f},{v:.6f}" for p, v in zip(ppm, intensity)]
    lines.append("# end")
    return "\n".join(lines) + "\n"


def write_series(folder: Path, n_files: int, seed: int = 1, interval_s: float = 60.0,
                 prefix: str = "spec") -> list[Path]:
    """``n_files`` spectra named ``<prefix>_0001.csv`` ... one ``interval_s`` apart."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    paths = []
    for index in range(n_files):
        path = folder / f"{prefix}_{index + 1:04d}.csv"
        path.write_text(spectrum_text(index * interval_s, rng))
        paths.append(path)
    return paths


# ---------------------------------------------------------------- the science
def measure(path: Path) -> FileMeasurement:
    """Integrate the two windows of one test-format file (trapezoid rule)."""
    try:
        text = Path(path).read_text()
    except (OSError, UnicodeDecodeError) as error:
        raise InputFileError(path, f"cannot be read: {error}") from error
    lines = text.splitlines()
    if not lines or lines[0] != "# kinetics-test-spectrum":
        raise InputFileError(path, "not a test spectrum (first line)", line=1)
    try:
        acquired = datetime.fromisoformat(lines[1].split(": ", 1)[1])
        announced = int(lines[2].split(": ", 1)[1])
    except (IndexError, ValueError) as error:
        raise InputFileError(path, "header incomplete", line=2) from error
    if lines[-1] != "# end":
        raise InputFileError(path, "no '# end' line: the file is truncated", line=len(lines))
    values = []
    for number, line in enumerate(lines[4:-1], start=5):
        try:
            values.append([float(part) for part in line.split(",")])
        except ValueError as error:
            raise InputFileError(path, f"not a number: {line[:30]!r}", line=number) from error
    data = np.asarray(values)
    if data.shape != (announced, 2):
        raise InputFileError(path, f"{len(values)} points, the header announces {announced}")
    ppm, intensity = data[:, 0], data[:, 1]
    rows = []
    for name, (high, low) in WINDOWS_PPM.items():
        inside = (ppm <= high) & (ppm >= low)
        area = float(np.trapezoid(intensity[inside][::-1], ppm[inside][::-1]))
        rows.append(SignalRow(name, area, 0.004, area, 0.004))
    return FileMeasurement(acquired, tuple(rows))


def build_table(ledger) -> pd.DataFrame:
    """Ledger measurements -> one row per spectrum: path, time_s, A, B (+ stderr)."""
    long = ledger.measurements()
    if long.empty:
        return pd.DataFrame(columns=["path", "acquired_utc", "time_s"])
    wide = long.pivot(index=["path", "acquired_utc"], columns="signal",
                      values="concentration_mol_per_l")
    errors = long.pivot(index=["path", "acquired_utc"], columns="signal",
                        values="concentration_stderr_mol_per_l").add_suffix("_stderr")
    table = wide.join(errors).reset_index()
    acquired = pd.to_datetime(table["acquired_utc"], utc=True)
    table.insert(2, "time_s", (acquired - START_UTC).dt.total_seconds())
    return table.sort_values(["time_s", "path"], kind="stable").reset_index(drop=True)


def pipeline(folder: Path, target_conversion: float | None = None, quiet_period_s: float = 0.3,
             poll: bool = True):
    from kinetics.run import RatesRefitter, RunPlan, WatchSpec

    spec = WatchSpec(Path(folder), include=("*.csv",), quiet_period_s=quiet_period_s, poll=poll,
                     poll_interval_s=0.05)
    refit = RatesRefitter("A", "first", "reactant", target_conversion)
    return RunPlan(spec, measure, build_table, refit, ("A", "B"),
                    config_text=f"test pipeline, windows {WINDOWS_PPM}",
                    target_conversion=target_conversion)


# ---------------------------------------------------------------- as a process
def main(argv=None) -> int:
    from kinetics.errors import KineticsError
    from kinetics.run import batch_run
    from watchers.live import LiveOptions, run_live

    parser = argparse.ArgumentParser()
    parser.add_argument("mode", choices=["watch", "batch"])
    parser.add_argument("--folder", type=Path, required=True)
    parser.add_argument("--out", type=Path, required=True)
    parser.add_argument("--quiet-period", type=float, default=0.3)
    parser.add_argument("--events", action="store_true", help="watchdog events, not polling")
    parser.add_argument("--idle", type=float, default=None)
    parser.add_argument("--max-duration", type=float, default=None)
    parser.add_argument("--target", type=float, default=None)
    args = parser.parse_args(argv)
    run = pipeline(args.folder, args.target, args.quiet_period, poll=not args.events)
    try:
        if args.mode == "batch":
            summary = batch_run(run, args.out)
        else:
            summary = run_live(run, LiveOptions(args.out, idle_s=args.idle, view=False,
                                                max_duration_s=args.max_duration, tick_s=0.05))
    except KineticsError as error:
        print(f"error: {error}", file=sys.stderr)
        return 2
    print(f"stopped: {summary.stop_reason}; {summary.counts}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
