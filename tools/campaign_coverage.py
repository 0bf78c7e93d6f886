"""Coverage of the campaign global fit's 95 % intervals over simulated campaigns (issue 13).

    python tools/campaign_coverage.py OUT.json [--case inhibited|plain] [--campaigns 200] [--seed 2026]
    python tools/campaign_coverage.py OUT.json --check-misses     (after a measurement)

Each campaign: the six-run design of tests/test_campaign_support.py (k = 0.2, orders
a = 1, b = 0.5, c = 1, 0.001 mol/L noise on [A] and [B], solve_ivp truth, seeded); the
``inhibited`` case divides the rate by 1 + K_P [P] (K_P = 20 L/mol) and adds a seventh run
spiked with product (as tests/test_campaign_globalfit.py); ``inhibited-unspiked`` leaves that
run out (K_P then rests on the curvature of the courses alone).  The global power law (orders
free, and K_P free in the inhibited case) is fitted; every parameter's profile and
covariance intervals are checked against the generator's value.  OUT.json keeps every
campaign's estimates; the summary gives coverage, the side of each miss and the mean
standardised error ``(value - truth) / stderr`` (a bias shows there first).

``--check-misses`` regenerates the same campaigns and, for each profile interval of an
order or of K_P that missed, refits with that parameter fixed at the truth: a genuine miss
has ``S(truth) > S_min (1 + t^2/dof)`` (the profile threshold), a numerical one (a profile
edge found in the wrong place) does not.
"""
import argparse
import json
import logging
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
from test_campaign_support import TRUTH, simulate_campaign, simulate_run  # noqa: E402

from kinetics.campaign import PowerLaw, fit_power_law  # noqa: E402

logging.disable(logging.WARNING)
K_P = 20.0


def campaign(rng, case):
    if case == "plain":
        return simulate_campaign(rng)
    if case == "inhibited-unspiked":
        return simulate_campaign(rng, ki=K_P)
    return simulate_campaign(rng, ki=K_P) + [simulate_run(rng, "spiked", 0.1, 0.15, 0.01, ki=K_P, p0=0.05)]


def truth_of(case):
    truth = {"k": TRUTH["k"], "order_A": TRUTH["a"], "order_B": TRUTH["b"], "order_cat": TRUTH["c"]}
    if case.startswith("inhibited"):
        truth["K_P"] = K_P
    return truth


def summarise(rows, case):
    truth = truth_of(case)
    lines = [f"{len(rows)} {case} campaigns ({sum(not r['converged'] for r in rows)} not converged)"]
    for name, value in truth.items():
        out = {"profile": [0, 0, 0], "covariance": [0, 0, 0]}
        z = []
        for row in rows:
            p = row["parameters"][name]
            for kind in out:
                lo, hi = p[kind] if p[kind] is not None else (np.nan, np.nan)
                out[kind][0 if lo <= value <= hi else (1 if value < lo else 2)] += 1
            if p["stderr"]:
                z.append((p["value"] - value) / p["stderr"])
        n = len(rows)
        lines.append(f"  {name:<10} profile {100 * out['profile'][0] / n:5.1f} % (truth below {out['profile'][1]}, "
                     f"above {out['profile'][2]}); covariance {100 * out['covariance'][0] / n:5.1f} %; "
                     f"mean z {np.mean(z):+.2f}, sd z {np.std(z):.2f}")
    return "\n".join(lines)


def check_misses(path):
    from kinetics.rates import intervals as iv

    saved = json.loads(path.read_text())
    case, rows = saved["case"], saved["rows"]
    truth = truth_of(case)
    rng = np.random.default_rng(saved["seed"])
    law = PowerLaw().with_inhibitors(P=None) if case.startswith("inhibited") else PowerLaw()
    species = {"order_A": "A", "order_B": "B", "order_cat": "cat"}
    genuine, numerical = 0, []
    for i, row in enumerate(rows):
        runs = campaign(rng, case)
        edges = {name: row["parameters"][name]["profile"] or (np.nan, np.nan) for name in truth}
        missed = [name for name in truth if name != "k" and not edges[name][0] <= truth[name] <= edges[name][1]]
        if not missed:
            continue
        free = fit_power_law(runs, law, profile=False)
        threshold = iv.profile_threshold(free.chi_square, free.dof, False)
        for name in missed:
            fixed = (law.with_inhibitors(P=truth[name]) if name == "K_P"
                     else law.with_orders(**{species[name]: truth[name]}))
            s_truth = fit_power_law(runs, fixed, profile=False, warm_start=free.values).chi_square
            if s_truth > threshold * (1 - 1e-6):
                genuine += 1
            else:
                numerical.append((i, name, s_truth, threshold))
    print(f"misses of orders and K_P: {genuine} genuine (S at the truth above the threshold), "
          f"{len(numerical)} numerical: {numerical}")


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("out", type=Path)
    ap.add_argument("--case", choices=("inhibited", "inhibited-unspiked", "plain"), default="inhibited")
    ap.add_argument("--campaigns", type=int, default=200)
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument("--check-misses", action="store_true", help="check the misses of a measurement saved in OUT")
    args = ap.parse_args()
    if args.check_misses:
        return check_misses(args.out)
    rng = np.random.default_rng(args.seed)
    law = PowerLaw().with_inhibitors(P=None) if args.case.startswith("inhibited") else PowerLaw()
    rows = []
    for i in range(args.campaigns):
        result = fit_power_law(campaign(rng, args.case), law)
        rows.append({"converged": result.converged, "parameters": {
            p.name: {"value": p.value, "stderr": p.stderr, "profile": p.ci_profile, "covariance": p.ci_covariance}
            for p in result.parameters}})
        if (i + 1) % 50 == 0:
            print(summarise(rows, args.case), flush=True)
    args.out.write_text(json.dumps({"case": args.case, "seed": args.seed, "rows": rows}, indent=1))
    print(summarise(rows, args.case))


if __name__ == "__main__":
    main()
