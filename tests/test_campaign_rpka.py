"""Reaction Progress Kinetic Analysis (kinetics.campaign.rpka) on simulated campaigns.

Generator: tests/test_campaign_support.py (solve_ivp of the rate law with first-order
catalyst deactivation k_d and product inhibition 1/(1 + K_I [P]); seeded noise).  The
same-excess pair: [A]0 = 0.10, [B]0 = 0.15 and, started "later on the course",
[A]0 = 0.07, [B]0 = 0.12 (excess 0.05 mol/L in both).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))
from test_campaign_support import TRUTH, simulate_run  # noqa: E402

from kinetics.campaign import (diagnose, different_excess_order, rate_course,  # noqa: E402
                               same_excess, same_excess_pairs)
from kinetics.errors import ConfigError  # noqa: E402

EARLY = (0.10, 0.15, 0.010)
LATE = (0.07, 0.12, 0.010)
OPTIONS = {"n": 30, "noise": 0.001, "observe": ("A",)}
HALF_LIFE_S = 1800.0  # catalyst half-life of the deactivating runs: half the 3600 s run


def _pair(rng, kd=0.0, ki=0.0):
    return (simulate_run(rng, "standard", *EARLY, kd=kd, ki=ki, **OPTIONS),
            simulate_run(rng, "same excess", *LATE, kd=kd, ki=ki, **OPTIONS))


def test_rate_course_matches_the_rate_law():
    # -d[A]/dt from the smoothed course against k [A][B]^0.5[cat] at the smoothed [A]
    # (noise 0.1 % of [A]0): RMS relative error below 10 % up to ~75 % conversion, no
    # systematic bias (mean within 3 %).  Rates from derivatives are noisy late in a run.
    run = simulate_run(np.random.default_rng(1), "r", *EARLY, n=40, noise=1e-4, observe=("A",))
    course = rate_course(run)
    a, b = course.concentration_mol_per_l, course.partner_mol_per_l
    law = TRUTH["k"] * a * np.sqrt(b) * 0.01
    relative = (course.rate_mol_per_l_s / law - 1.0)[2:25]
    assert np.sqrt(np.mean(relative**2)) < 0.10
    assert abs(np.mean(relative)) < 0.03


@pytest.mark.slow
def test_same_excess_hit_and_false_alarm_rates():
    # 40 clean pairs: flagged at most twice (the test's level is 1 %, 0.4 expected);
    # 40 pairs with a catalyst half-life of half the run: flagged in >= 90 %.
    rng = np.random.default_rng(2026)
    false_alarms = sum(same_excess(*_pair(rng)).flagged for _ in range(40))
    hits = sum(same_excess(*_pair(rng, kd=np.log(2) / HALF_LIFE_S)).flagged for _ in range(40))
    assert false_alarms <= 2, false_alarms
    assert hits >= 36, hits


def test_deactivating_run_is_flagged_and_the_others_are_not():
    # A campaign of two same-excess groups; only the standard run of group 1 has an ageing catalyst.
    rng = np.random.default_rng(17)
    kd = np.log(2) / HALF_LIFE_S
    runs = [simulate_run(rng, "g1 standard", *EARLY, kd=kd, **OPTIONS),
            simulate_run(rng, "g1 same excess", *LATE, **OPTIONS),
            simulate_run(rng, "g2 standard", 0.10, 0.30, 0.010, **OPTIONS),
            simulate_run(rng, "g2 same excess", 0.06, 0.26, 0.010, **OPTIONS),
            simulate_run(rng, "g3 standard", 0.10, 0.15, 0.020, **OPTIONS),
            simulate_run(rng, "g3 same excess", 0.07, 0.12, 0.020, **OPTIONS)]
    results = same_excess_pairs(runs)
    assert {(r.early, r.late) for r in results} == {("g1 standard", "g1 same excess"),
                                                      ("g2 standard", "g2 same excess"),
                                                      ("g3 standard", "g3 same excess")}
    flagged = [r for r in results if r.flagged]
    assert [r.slower for r in flagged] == ["g1 standard"]
    message = flagged[0].message
    assert "loses activity" in message and "product added" in message
    assert flagged[0].rate_ratio > 1.1 and flagged[0].rate_ratio_ci95[0] > 1.0


def test_product_inhibition_is_told_from_deactivation_by_a_spiked_run():
    # Product inhibition 1/(1 + 20 [P]) (L/mol) in every run; the spiked run starts with the
    # product the standard run has made when it reaches [A] = 0.07 (0.03 mol/L).
    rng = np.random.default_rng(23)
    early = simulate_run(rng, "standard", *EARLY, ki=20.0, **OPTIONS)
    late = simulate_run(rng, "same excess", *LATE, ki=20.0, **OPTIONS)
    spiked = simulate_run(rng, "same excess + P", *LATE, ki=20.0, p0=0.03, **OPTIONS)
    verdict = diagnose(early, late, spiked)
    assert verdict.plain.flagged and not verdict.spiked.flagged
    assert verdict.cause == "product inhibition"
    # the same trio with an ageing catalyst instead: the spiked run does not rescue the overlay
    kd = np.log(2) / HALF_LIFE_S
    early = simulate_run(rng, "standard", *EARLY, kd=kd, **OPTIONS)
    late = simulate_run(rng, "same excess", *LATE, kd=kd, **OPTIONS)
    spiked = simulate_run(rng, "same excess + P", *LATE, kd=kd, p0=0.03, **OPTIONS)
    assert diagnose(early, late, spiked).cause == "catalyst deactivation"


def test_different_excess_gives_the_order_in_b():
    rng = np.random.default_rng(31)
    runs = [simulate_run(rng, f"excess {b0}", 0.1, b0, 0.01, n=40, noise=3e-4, observe=("A",))
            for b0 in (0.12, 0.2, 0.35, 0.6)]
    result = different_excess_order(runs)
    lo, hi = result.ci95
    assert lo <= TRUTH["b"] <= hi and hi - lo < 0.5, result


def test_pairs_with_different_excess_are_refused():
    rng = np.random.default_rng(4)
    a = simulate_run(rng, "a", 0.1, 0.15, 0.01, **OPTIONS)
    b = simulate_run(rng, "b", 0.07, 0.2, 0.01, **OPTIONS)
    with pytest.raises(ConfigError, match="not a same-excess pair"):
        same_excess(a, b)
    with pytest.raises(ConfigError, match="lower"):
        same_excess(simulate_run(rng, "c", 0.07, 0.12, 0.01, **OPTIONS),
                    simulate_run(rng, "d", 0.1, 0.15, 0.01, **OPTIONS))
