"""Measure k error and 95 % coverage on the independent stress series (issue 11, checks).

Writes series with tests/independent_series.py (not the project's simulator), runs each
through the project as a user would (a TOML run config -> ``run_single``, the library
function behind ``kinetics run CONFIG --out DIR --json --no-report``) under several
reasonable configs, and prints one row per (field, config): k, error vs truth, the
quoted 95 % interval and whether it holds the truth.  With ``--sensitivity`` the
combined interval of ``kinetics.sensitivity`` is also computed and checked.

    python tools/independent_harness.py OUT_DIR [--fields 60 40] [--seeds 1] [--sensitivity]
        [--kind fid|spectrum] [--order 1]

Run it with PYTHONPATH pointing at another tree (e.g. a HEAD snapshot) for "before".
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent / "tests"))

import independent_series as gen  # noqa: E402

CONFIGS = {
    "fit b1": dict(baseline_order=1),
    "fit b2": dict(baseline_order=2),
    "fit b3": dict(baseline_order=3),
    "fit b2 win x0.7": dict(baseline_order=2, window_scale=0.7),
    "fit b2 win x1.3": dict(baseline_order=2, window_scale=1.3),
    "fit b2 CH2 grouped": dict(baseline_order=2, group_quartets=True),
    "integrals (acetyl fit)": dict(baseline_order=2, method="integral"),
    "integrals (all)": dict(baseline_order=2, method="integral", acetyl_fit=False),
}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser()
    parser.add_argument("out", type=Path)
    parser.add_argument("--fields", type=float, nargs="+", default=[60.0, 40.0])
    parser.add_argument("--seeds", type=int, nargs="+", default=[1])
    parser.add_argument("--kind", default="fid")
    parser.add_argument("--order", type=int, default=1)
    parser.add_argument("--configs", nargs="+", default=list(CONFIGS))
    parser.add_argument("--sensitivity", action="store_true")
    args = parser.parse_args(argv)
    from kinetics.run.job import run_single

    rows = []
    for mhz in args.fields:
        for seed in args.seeds:
            k_true = 4.0e-4 if args.order == 1 else 2.0e-3
            sc = gen.Scenario(nominal_mhz=mhz, kind=args.kind, order=args.order, k=k_true)
            folder = args.out / f"series_{mhz:g}MHz_seed{seed}_{args.kind}_o{args.order}"
            if not (folder / "truth.json").exists():
                gen.write_series(folder, sc, seed=1000 * seed + int(mhz))
            for name in args.configs:
                slug = name.replace(" ", "_").replace("(", "").replace(")", "").replace(".", "")
                cfg = folder.parent / f"{folder.name}_{slug}.toml"
                cfg.write_text(gen.config_text(folder.resolve(), sc, **CONFIGS[name]), encoding="utf-8")
                started = time.perf_counter()
                row = {"mhz": mhz, "seed": seed, "config": name, "k_true": k_true}
                try:
                    job = run_single(cfg, args.out / f"out_{folder.name}_{slug}", report=False)
                    k = job.runs[0].k()
                    row.update(k=k["value"], lo=k["ci95"][0], hi=k["ci95"][1])
                except Exception as error:  # a config that fails is a finding, not a crash
                    row.update(error=f"{type(error).__name__}: {error}")
                if args.sensitivity and "k" in row:
                    try:
                        from kinetics.config import load_run_config
                        from kinetics.sensitivity import assess_files

                        res = assess_files(load_run_config(cfg))
                        row.update(comb_lo=res.combined_ci95[0], comb_hi=res.combined_ci95[1],
                                   sys_sd=res.systematic_sd, sens_warnings=list(res.warnings))
                    except Exception as error:
                        row.update(sens_error=f"{type(error).__name__}: {error}")
                row["seconds"] = round(time.perf_counter() - started, 1)
                rows.append(row)
                print(_line(row), flush=True)
    (args.out / "results.json").write_text(json.dumps(rows, indent=1), encoding="utf-8")
    return 0


def _line(row: dict) -> str:
    head = f"{row['mhz']:>4g} MHz  seed {row['seed']}  {row['config']:<24}"
    if "k" not in row:
        return head + "  " + row.get("error", "?")
    t = row["k_true"]
    err = 100 * (row["k"] / t - 1)
    half = 100 * (row["hi"] - row["lo"]) / 2 / row["k"]
    inside = row["lo"] <= t <= row["hi"]
    text = f"{head}  k {row['k']:.5g}  err {err:+6.2f} %  95 %: +-{half:.2f} %  truth {'in ' if inside else 'OUT'}"
    if "comb_lo" in row:
        half_c = 100 * (row["comb_hi"] - row["comb_lo"]) / 2 / row["k"]
        ok = row["comb_lo"] <= t <= row["comb_hi"]
        text += f"  | combined +-{half_c:.2f} % truth {'in ' if ok else 'OUT'}"
    elif "sens_error" in row:
        text += "  | " + row["sens_error"][:80]
    return text + f"  ({row['seconds']} s)"


if __name__ == "__main__":
    sys.exit(main())
