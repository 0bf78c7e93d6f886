"""Variable Time Normalization Analysis (kinetics.campaign.vtna) on simulated campaigns whose
orders the test sets (generator: tests/test_campaign_support.py, solve_ivp + seeded noise)."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))
from test_campaign_support import TRUTH, simulate_campaign, simulate_run  # noqa: E402

from kinetics.campaign import bootstrap_orders, fit_power_law, normalised_time, vtna  # noqa: E402
from kinetics.errors import ConfigError  # noqa: E402

#: Different-excess and different-loading runs sharing [A]0 = 0.1 mol/L (the published setting).
VTNA_DESIGN = ((0.1, 0.15, 0.010), (0.1, 0.30, 0.010), (0.1, 0.15, 0.020), (0.1, 0.50, 0.005),
               (0.1, 0.25, 0.015))


def test_normalised_time_of_a_constant_catalyst_is_its_power_times_t():
    # tau = int [cat]^c dt = [cat]^c t exactly for a constant loading (trapezoid is exact).
    run = simulate_run(np.random.default_rng(1), "r", 0.1, 0.15, 0.02)
    assert np.allclose(normalised_time(run, {"cat": 1.0}), 0.02 * run.time_s, rtol=1e-12)
    assert np.allclose(normalised_time(run, {"cat": 0.0}), run.time_s, rtol=1e-12)


def test_normalised_time_integrates_the_measured_course():
    # [B] = B0 exp(-t/T) measured without noise: int_0^t [B] dt = B0 T (1 - exp(-t/T));
    # the trapezoid rule on 400 points is within 1e-5 of it.
    from kinetics.campaign import CampaignRun

    t = np.linspace(1.0, 400.0, 400)
    b = 0.2 * np.exp(-t / 100.0)
    run = CampaignRun("x", t, {"A": b, "B": b}, {}, {"A": 0.2, "B": 0.2}, 0.01)
    exact = 0.2 * 100.0 * (1.0 - np.exp(-t / 100.0))
    assert np.allclose(normalised_time(run, {"B": 1.0}), exact, rtol=1e-4)


def test_automatic_search_finds_the_generator_orders_with_intervals():
    runs = simulate_campaign(np.random.default_rng(101), design=VTNA_DESIGN)
    result = vtna(runs, ["B", "cat"])
    for name, truth in (("B", TRUTH["b"]), ("cat", TRUTH["c"])):
        lo, hi = result.intervals[name]
        assert lo <= truth <= hi, (name, result.orders, result.intervals)
        assert hi - lo < 0.3
    assert not result.notes
    # VTNA and the global fit agree (the "VTNA's automatic search finds the same orders")
    fit = fit_power_law(runs)
    for name in ("B", "cat"):
        assert abs(result.orders[name] - fit.param(f"order_{name}").value) < 0.1


@pytest.mark.slow
def test_vtna_intervals_cover_the_truth_in_most_campaigns():
    # 15 campaigns: the profile-of-the-score interval should hold the truth in >= 12
    # (a 95 % interval; the band allows the noise of [B] inside tau that it neglects).
    rng = np.random.default_rng(202)
    hits = {"B": 0, "cat": 0}
    found = {"B": [], "cat": []}
    for _ in range(15):
        result = vtna(simulate_campaign(rng, design=VTNA_DESIGN), ["B", "cat"])
        for name, truth in (("B", TRUTH["b"]), ("cat", TRUTH["c"])):
            lo, hi = result.intervals[name]
            hits[name] += lo <= truth <= hi
            found[name].append(result.orders[name])
    assert hits["B"] >= 12 and hits["cat"] >= 12, hits
    assert abs(np.mean(found["B"]) - TRUTH["b"]) < 0.03
    assert abs(np.mean(found["cat"]) - TRUTH["c"]) < 0.03


def test_wrong_orders_score_worse_than_right_ones():
    runs = simulate_campaign(np.random.default_rng(7), design=VTNA_DESIGN)
    result = vtna(runs, ["B", "cat"])
    orders, scores = result.grid["B"]  # profiled over the order in the catalyst
    best = scores[np.argmin(np.abs(orders - TRUTH["b"]))]
    assert scores[np.argmin(np.abs(orders - 0.0))] > 3 * best
    assert scores[np.argmin(np.abs(orders - 1.0))] > 3 * best


def test_bootstrap_spread_is_comparable_to_the_profile_interval():
    runs = simulate_campaign(np.random.default_rng(9), design=VTNA_DESIGN[:4])
    result = vtna(runs, ["cat"], order_range=(0.0, 2.0))
    samples = bootstrap_orders(runs, ["cat"], rng=np.random.default_rng(10), n_samples=12, order_range=(0.0, 2.0))
    assert samples.shape[0] >= 10
    half_width = 0.5 * (result.intervals["cat"][1] - result.intervals["cat"][0])
    spread = 1.96 * samples[:, 0].std(ddof=1)
    assert 0.3 * half_width < spread < 3.0 * half_width, (half_width, spread)


def test_runs_that_do_not_share_a0_get_a_note_and_missing_species_an_error():
    runs = simulate_campaign(np.random.default_rng(3), design=((0.1, 0.15, 0.01), (0.05, 0.3, 0.02)))
    assert vtna(runs, ["cat"], intervals=False).notes
    with pytest.raises(ConfigError, match="does not measure it"):
        vtna(runs, ["cat"], observed="P")
