"""Global fits across the runs of a campaign (kinetics.campaign.globalfit, .powerlaw).

Truth is set by the generator in tests/test_campaign_support.py (solve_ivp of the rate law,
seeded noise); analytic checks use the integrated laws of kinetics.rates.laws.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import constants
from scipy.integrate import solve_ivp

sys.path.insert(0, str(Path(__file__).resolve().parent))
from test_campaign_support import TRUTH, exact_course, simulate_campaign, simulate_run  # noqa: E402

from kinetics.campaign import (CampaignRun, PowerLaw, compare_power_laws,  # noqa: E402
                               fit_mechanism_campaign, fit_power_law)
from kinetics.campaign.powerlaw import course  # noqa: E402
from kinetics.errors import FitError  # noqa: E402
from kinetics.rates import laws  # noqa: E402

ORDERS = {"order_A": TRUTH["a"], "order_B": TRUTH["b"], "order_cat": TRUTH["c"]}


# ---------------------------------------------------------------- the integrator
@pytest.mark.parametrize("a0,b0,a,b", [(0.1, 0.15, 1.0, 0.5), (0.1, 0.1, 1.0, 1.0), (0.1, 0.08, 2.0, 0.5),
                                       (0.1, 0.3, 0.5, 1.5), (0.05, 0.5, 1.3, 0.0)])
def test_integrator_matches_solve_ivp(a0, b0, a, b):
    # Independent reference: solve_ivp (LSODA, rtol 1e-10) of the same law.
    t = np.linspace(0.0, 4000.0, 40)
    got = course(PowerLaw(), t, 0.3, {"A": a, "B": b, "cat": 1.0}, {"A": a0, "B": b0}, 0.01)
    ref = exact_course(t[1:], a0, b0, 0.01, k=0.3, a=a, b=b, c=1.0)
    # 1e-5 of [A]0: a thousand times below the noise of any measured course
    assert np.max(np.abs(got["A"][1:] - ref[0])) < 1e-5 * a0
    assert np.max(np.abs(got["P"][1:] - ref[2])) < 1e-5 * a0
    assert got["A"][0] == a0


def test_integrator_matches_the_analytic_second_order_mixed_law():
    # kinetics.rates.laws.second_order_mixed: A + B -> P, -d[A]/dt = k[A][B] (analytic).
    t = np.linspace(0.0, 2000.0, 30)
    got = course(PowerLaw({"A": 1.0, "B": 1.0}, {"B": -1.0, "P": 1.0}), t, 0.11, {}, {"A": 0.02, "B": 0.05}, None)
    assert np.allclose(got["A"], laws.second_order_mixed(t, 0.02, 0.05, 0.11), rtol=1e-6, atol=1e-9 * 0.02)


def test_zero_order_limiting_reactant_runs_out_in_finite_time():
    # Analytic: -d[A]/dt = k (order 0): [A] = max(A0 - k t, 0) (kinetics.rates.laws.zero_order).
    t = np.linspace(0.0, 300.0, 31)
    got = course(PowerLaw({"A": 0.0}, {"P": 1.0}), t, 5e-4, {}, {"A": 0.1}, None)
    assert np.allclose(got["A"], laws.zero_order(t, 0.1, 5e-4), atol=1e-9)


# ---------------------------------------------------------------- recovery and coverage
def test_orders_a1_b_half_c1_recovered_inside_their_intervals():
    runs = simulate_campaign(np.random.default_rng(20261202))
    result = fit_power_law(runs)
    assert result.converged
    for name, truth in ORDERS.items():
        p = result.param(name)
        lo, hi = p.ci_profile
        assert lo <= truth <= hi, (name, p.value, p.ci_profile)
        assert hi - lo < 0.2, "the design pins every order to +-0.1"
    k = result.param("k")
    assert k.ci_profile[0] <= TRUTH["k"] <= k.ci_profile[1]
    assert result.param("order_A").ci95_method == "profile"
    assert result.description.startswith("rate = k [A]^1 [B]^0.")
    assert not [g for g in result.guardrails if g.severity != "note"], result.warnings


@pytest.mark.slow
def test_interval_coverage_over_simulated_campaigns():
    # 95 % profile intervals should contain the generator's values in ~95 % of campaigns.
    # 60 campaigns here (binomial sd 2.8 % per parameter), 200 measured once for the report.
    rng = np.random.default_rng(7)
    truth = {"k": TRUTH["k"], **ORDERS}
    hits = {name: 0 for name in truth}
    n = 60
    for _ in range(n):
        result = fit_power_law(simulate_campaign(rng))
        assert result.converged
        for name, value in truth.items():
            lo, hi = result.param(name).ci_profile
            hits[name] += lo <= value <= hi
    rates = {name: h / n for name, h in hits.items()}
    for name, rate in rates.items():
        assert 0.85 <= rate <= 1.0, rates
    pooled = sum(hits.values()) / (n * len(hits))
    assert 0.90 <= pooled <= 0.99, rates


def test_fitted_initial_concentrations_and_a_fixed_order():
    rng = np.random.default_rng(11)
    runs = simulate_campaign(rng)
    law = PowerLaw({"A": None, "B": 0.5, "cat": 1.0})
    result = fit_power_law(runs, law, fit_initial=("A",))
    names = [p.name for p in result.parameters]
    assert "order_B" not in names and "c0_A@run1" in names
    c0 = result.param("c0_A@run4")
    assert c0.value == pytest.approx(0.05, abs=3 * c0.stderr)
    order_a = result.param("order_A")
    assert abs(order_a.value - 1.0) < 3 * order_a.stderr  # one seed: a 3-sigma band, not the 95 % interval


# ---------------------------------------------------------------- textbook case (from memory)
def test_alkaline_ester_hydrolysis_recovered():
    # From memory: the alkaline hydrolysis of ethyl acetate is first order in ester and in
    # hydroxide, k about 0.11 L mol^-1 s^-1 at 25 degC.  A simulated campaign at those values
    # (ester followed, 1 % noise) is recovered: orders 1 and 1 and k inside the intervals.
    k = 0.11
    rng = np.random.default_rng(25)
    design = ((0.02, 0.02), (0.02, 0.04), (0.04, 0.02), (0.01, 0.05))
    runs = []
    for i, (ester0, oh0) in enumerate(design):
        t = np.linspace(60.0, 2400.0, 25)
        exact = laws.second_order_mixed(t, ester0, oh0, k)  # analytic A + B -> P
        noisy = exact + rng.normal(0.0, 2e-4, t.size)
        runs.append(CampaignRun(f"hydrolysis{i + 1}", t, {"ester": noisy}, {"ester": np.full(t.size, 2e-4)},
                                {"ester": ester0, "OH": oh0}, None, 298.15))
    law = PowerLaw({"ester": None, "OH": None}, {"ester": -1.0, "OH": -1.0, "acetate": 1.0}, reactant="ester")
    result = fit_power_law(runs, law)
    for name in ("order_ester", "order_OH"):
        lo, hi = result.param(name).ci_profile
        assert lo <= 1.0 <= hi, (name, result.param(name))
    lo, hi = result.param("k").ci_profile
    assert lo <= k <= hi
    assert result.param("k").unit.startswith("(mol L^-1)^(1-n) s^-1, n = 2.0")  # fitted overall order
    assert table_unit(runs, law) == "L mol^-1 s^-1"
    # model choice: the fixed first/first law wins over alternatives a chemist might try
    table, verdict, _ = compare_power_laws(runs, {
        "first in ester and in OH": law.with_orders(ester=1.0, OH=1.0),
        "second in ester only": law.with_orders(ester=2.0, OH=0.0),
        "first in ester only": law.with_orders(ester=1.0, OH=0.0)})
    assert table.iloc[0]["model"] == "first in ester and in OH"
    assert table.iloc[1]["delta_aicc"] > 10
    assert verdict.startswith("best: first in ester and in OH")


def table_unit(runs, law):
    return fit_power_law(runs, law.with_orders(ester=1.0, OH=1.0), profile=False).param("k").unit


# ---------------------------------------------------------------- temperatures
def test_arrhenius_across_temperatures():
    # k(T) = k_ref exp(-(Ea/R)(1/T - 1/T_ref)), R from scipy.constants; truth set here.
    rng = np.random.default_rng(31)
    ea, k_ref, t_ref = 55e3, 0.2, 298.15
    runs = []
    for i, (temperature, (a0, b0, cat)) in enumerate(zip((288.15, 298.15, 308.15, 298.15, 288.15, 308.15),
                                                         ((0.1, 0.15, 0.01), (0.1, 0.3, 0.01), (0.1, 0.15, 0.02),
                                                          (0.05, 0.2, 0.01), (0.1, 0.5, 0.005),
                                                          (0.15, 0.2, 0.015)))):
        k = k_ref * np.exp(-(ea / constants.R) * (1 / temperature - 1 / t_ref))
        runs.append(simulate_run(rng, f"T{i}", a0, b0, cat, k=k, temperature_kelvin=temperature))
    result = fit_power_law(runs, temperature_reference_kelvin=t_ref)
    assert result.temperature_reference_kelvin == t_ref
    for name, truth in (("k_ref", k_ref), ("ea_j_per_mol", ea), *ORDERS.items()):
        lo, hi = result.param(name).ci_profile
        assert lo <= truth <= hi, (name, result.param(name))


# ---------------------------------------------------------------- mechanism
def test_written_mechanism_with_shared_constants():
    # A + cat -> P + cat (k1), mass action; truth from solve_ivp of dA/dt = -k1 [A][cat].
    rng = np.random.default_rng(41)
    k1 = 0.08
    runs = []
    for i, (a0, cat) in enumerate(((0.1, 0.01), (0.05, 0.02), (0.2, 0.005))):
        t = np.linspace(200.0, 5000.0, 15)
        sol = solve_ivp(lambda _t, y: [-k1 * y[0] * cat], (0, t[-1]), [a0], t_eval=t, rtol=1e-10, atol=1e-14)
        a = sol.y[0] + rng.normal(0.0, 0.001, t.size)
        runs.append(CampaignRun(f"m{i}", t, {"A": a}, {"A": np.full(t.size, 0.001)}, {"A": a0}, cat))
    result = fit_mechanism_campaign(runs, "A + cat -> P + cat : k1", catalyst_species="cat")
    assert result.converged
    lo, hi = result.param("k1").ci_profile
    assert lo <= k1 <= hi and hi / lo < 1.3


# ---------------------------------------------------------------- guardrails
def test_a_deactivating_run_is_named_by_the_pooled_guardrails():
    rng = np.random.default_rng(5)
    runs = simulate_campaign(rng)
    bad = simulate_run(rng, "aged catalyst", 0.1, 0.3, 0.01, kd=np.log(2) / 900.0)
    result = fit_power_law(runs + [bad])
    named = [g for g in result.guardrails if g.code == "run_not_described"]
    assert [g.details["run"] for g in named] == ["aged catalyst"], result.warnings


def test_catalyst_order_without_a_varied_loading_is_refused():
    rng = np.random.default_rng(6)
    runs = simulate_campaign(rng, design=((0.1, 0.15, 0.01), (0.1, 0.3, 0.01), (0.05, 0.2, 0.01)))
    with pytest.raises(FitError, match="catalyst loading is the same in every run"):
        fit_power_law(runs)
    # fixing the catalyst order is the way out the message names
    result = fit_power_law(runs, PowerLaw({"A": None, "B": None, "cat": 1.0}))
    assert result.converged


# ---------------------------------------------------------------- product inhibition
def _inhibited_campaign(rng):
    # r = k [A][B]^0.5[cat] / (1 + 20 [P]) with K_P = 20 L/mol; one run spiked with product.
    return simulate_campaign(rng, ki=20.0) + [simulate_run(rng, "spiked", 0.1, 0.15, 0.01, ki=20.0, p0=0.05)]


def test_product_inhibition_is_fitted_and_preferred_by_aicc():
    runs = _inhibited_campaign(np.random.default_rng(8))
    law = PowerLaw()
    result = fit_power_law(runs, law.with_inhibitors(P=None))
    assert "/ (1 + 20" in result.description
    for name, truth in (("K_P", 20.0), *ORDERS.items()):
        lo, hi = result.param(name).ci_profile
        assert lo <= truth <= hi, (name, result.param(name))
    table, verdict, results = compare_power_laws(runs, {"inhibited": law.with_inhibitors(P=None), "plain": law})
    assert table.iloc[0]["model"] == "inhibited" and table.iloc[1]["delta_aicc"] > 10
    # the law without the denominator misses the curve shape, and says so
    assert "residuals_structured" in {g.code for g in results["plain"].guardrails}


@pytest.mark.slow
def test_interval_coverage_with_product_inhibition():
    # 20 inhibited campaigns (K_P fitted with the orders): each parameter's 95 % interval
    # holds the truth in >= 16 (P(X <= 15 | p = 0.95) ~ 0.3 %); 200 measured once for the report.
    rng = np.random.default_rng(77)
    law = PowerLaw().with_inhibitors(P=None)
    truth = {"k": TRUTH["k"], "K_P": 20.0, **ORDERS}
    hits = {name: 0 for name in truth}
    for _ in range(20):
        result = fit_power_law(_inhibited_campaign(rng), law)
        for name, value in truth.items():
            lo, hi = result.param(name).ci_profile
            hits[name] += lo <= value <= hi
    assert all(h >= 16 for h in hits.values()), hits


def test_eyring_across_temperatures():
    # k(T) = (k_B T/h) exp(dS/R) exp(-dH/(R T)) with k_B, h, R from scipy.constants; truth set here.
    from kinetics.campaign.globalfit import eyring_k

    rng = np.random.default_rng(32)
    dh, ds = 60e3, -60.0
    runs = []
    for i, (temperature, (a0, b0, cat)) in enumerate(zip((288.15, 298.15, 308.15, 298.15, 288.15, 308.15),
                                                         ((0.1, 0.15, 0.01), (0.1, 0.3, 0.01), (0.1, 0.15, 0.02),
                                                          (0.05, 0.2, 0.01), (0.1, 0.5, 0.005),
                                                          (0.15, 0.2, 0.015)))):
        k = eyring_k(dh, ds, temperature)
        runs.append(simulate_run(rng, f"T{i}", a0, b0, cat, k=k, temperature_kelvin=temperature,
                                 t_end_s=3600.0 * 0.2 / eyring_k(dh, ds, 298.15)))
    assert eyring_k(dh, ds, 298.15) == pytest.approx(
        constants.k * 298.15 / constants.h * np.exp(ds / constants.R - dh / (constants.R * 298.15)))
    result = fit_power_law(runs, temperature_law="eyring")
    for name, truth in (("dh_j_per_mol", dh), ("ds_j_per_mol_k", ds)):
        lo, hi = result.param(name).ci_profile
        assert lo <= truth <= hi, (name, result.param(name))
    for name, truth in ORDERS.items():  # their coverage is measured above; one seed: 3 sigma
        assert abs(result.param(name).value - truth) < 3 * result.param(name).stderr


# ---------------------------------------------------------------- residual bootstrap (cross-check)
def test_residual_bootstrap_agrees_with_the_profile_intervals():
    # Residual bootstrap (Efron & Tibshirani 1993, ch. 9) of a campaign whose law is right and
    # whose noise is independent (the generator's): each resampled residual is one of its
    # course's centred residuals times sqrt(N/dof); the percentile intervals hold the
    # generator's orders and are as wide as the profile intervals within the factor the
    # runner's note uses.  60 refits, seeded per resample.
    from kinetics.campaign.globalfit import (BOOTSTRAP_WIDTH_RATIO, BootstrapIntervals, bootstrap_notes,
                                             percentile_intervals, resample_runs)

    runs = simulate_campaign(np.random.default_rng(20261202))
    fit = fit_power_law(runs)
    scale = np.sqrt(fit.n_points / fit.dof)
    star = resample_runs(runs, fit.blocks, fit.fitted, fit.residual, fit.dof, fit.weighted, np.random.default_rng(1))
    for run, copy in zip(runs, star):
        for name in ("A", "B"):
            r = fit.residual[(run.label, name)]
            drawn = (copy.observed_mol_per_l[name] - fit.fitted[(run.label, name)]) / run.sigma(name)
            allowed = (r - r.mean()) * scale
            assert np.all(np.min(np.abs(drawn[:, None] - allowed[None, :]), axis=1) < 1e-9)
        assert dict(copy.initial_mol_per_l) == dict(run.initial_mol_per_l)
    names = [p.name for p in fit.parameters]
    samples = []
    for seed in np.random.SeedSequence(4).spawn(60):
        resampled = resample_runs(runs, fit.blocks, fit.fitted, fit.residual, fit.dof, fit.weighted,
                                  np.random.default_rng(seed))
        refit = fit_power_law(resampled, warm_start=fit.values, profile=False)
        assert refit.converged
        samples.append([refit.values[name] for name in names])
    found = percentile_intervals(names, samples)
    for name, truth in ORDERS.items():
        lo, hi = found[name]
        assert lo <= truth <= hi, (name, found[name])
        p_lo, p_hi = fit.param(name).ci_profile
        assert 1 / BOOTSTRAP_WIDTH_RATIO < (hi - lo) / (p_hi - p_lo) < BOOTSTRAP_WIDTH_RATIO, (name, found[name])
    assert bootstrap_notes(fit, BootstrapIntervals(60, 0, 4, found)) == []
    # a bootstrap interval twice the profile's width is noted
    lo, hi = fit.param("order_B").ci_profile
    wide = dict(found, order_B=(lo - (hi - lo) / 2, hi + (hi - lo) / 2))
    assert [n for n in bootstrap_notes(fit, BootstrapIntervals(60, 0, 4, wide)) if n.startswith("order_B")]
