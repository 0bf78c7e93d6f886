"""Coverage of kinetics.sensitivity's combined interval over simulated runs (issue 11, D).

    python tools/independent_coverage.py OUT.json [--trials 200] [--first 0] [--spectra 16]

Each trial: an independent stress series (tests/independent_series.py, 40 or 60 MHz at
random), a reasonable config drawn at random (baseline order 1-3, windows x0.7-1.3,
CH2 quartets grouped or not), the run's statistical interval and the combined one.
"""
import argparse
import json
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
import logging  # noqa: E402

import independent_series as gen  # noqa: E402

logging.disable(logging.WARNING)


def summarise(rows):
    n = len(rows)
    stat = sum(r["stat_ci95"][0] <= r["k_true"] <= r["stat_ci95"][1] for r in rows)
    comb = sum(r["combined_ci95"][0] <= r["k_true"] <= r["combined_ci95"][1] for r in rows)
    return f"{n} trials: statistical interval covers {100 * stat / n:.1f} %, combined {100 * comb / n:.1f} %"


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("out", type=Path)
    ap.add_argument("--trials", type=int, default=200)
    ap.add_argument("--first", type=int, default=0)
    ap.add_argument("--spectra", type=int, default=16)
    args = ap.parse_args()
    rows = []
    for seed in range(args.first, args.first + args.trials):
        try:
            rows.append(gen.coverage_trial(seed, n_spectra=args.spectra))
        except Exception as error:  # recorded, not hidden
            rows.append({"seed": seed, "error": f"{type(error).__name__}: {error}"})
            print("trial", seed, "failed:", error, flush=True)
        if len(rows) % 20 == 0:
            ok = [r for r in rows if "error" not in r]
            print(summarise(ok), flush=True)
            args.out.write_text(json.dumps(rows), encoding="utf-8")
    args.out.write_text(json.dumps(rows), encoding="utf-8")
    print(summarise([r for r in rows if "error" not in r]))


if __name__ == "__main__":
    main()
