"""Fits against certified data (NIST StRD) and simulations whose truth the test sets."""

import json
import math
from pathlib import Path

import numpy as np
import pytest

from kinetics import cli
from kinetics.errors import FitError
from kinetics.rates import laws
from kinetics.rates.fit import fit_function, fit_law, fit_mechanism, fit_model, refit
from kinetics.rates.table import from_arrays

NIST = Path(__file__).parent / "data" / "nist"


def read_nist(name):
    """(x, y) of a NIST StRD nonlinear-regression file (data follow the second 'Data:' line)."""
    lines = (NIST / name).read_text().splitlines()
    start = [i for i, line in enumerate(lines) if line.strip().startswith("Data:")][-1] + 1
    rows = [line.split() for line in lines[start:] if line.strip()]
    data = np.array(rows, dtype=float)
    return data[:, 1], data[:, 0]


def run_cli(capsys, *argv):
    code = cli.main([str(a) for a in argv])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


@pytest.fixture
def boxbod_csv(tmp_path):
    x, y = read_nist("BoxBOD.dat")
    path = tmp_path / "boxbod.csv"
    path.write_text("time_s,bod\n" + "".join(f"{a:g},{b:g}\n" for a, b in zip(x, y)))
    return path


@pytest.mark.parametrize("start", ["k=1,c_final=1", "k=0.75,c_final=100"])  # NIST start 1, start 2
def test_boxbod_certified_through_the_cli(capsys, boxbod_csv, start):
    # NIST StRD BoxBOD certified values: b1 = 213.80940889 (12.354515176), b2 = 0.54723748542
    # (0.10455993237); model y = b1 (1 - exp(-b2 x)) is first-order formation.
    code, out, _ = run_cli(capsys, "fit", boxbod_csv, "--time-column", "time_s", "--column", "bod",
                           "--model", "first", "--observed", "product", "--start", start, "--json")
    assert code == 0
    payload = json.loads(out)
    assert payload["converged"] is True and payload["n_points"] == 6
    k, c_final = payload["params"]["k"], payload["params"]["c_final"]
    assert k["value"] == pytest.approx(0.54723748542, rel=5e-7)
    assert c_final["value"] == pytest.approx(213.80940889, rel=5e-7)
    assert k["stderr"] == pytest.approx(0.10455993237, rel=5e-4)
    assert c_final["stderr"] == pytest.approx(12.354515176, rel=5e-4)
    assert k["unit"] == "s^-1" and c_final["unit"] == "mol L^-1"
    assert k["ci95"][0] < k["value"] < k["ci95"][1]
    assert math.isfinite(payload["aicc"]) and math.isfinite(payload["bic"])
    assert payload["half_life_s"]["value"] == pytest.approx(math.log(2) / 0.54723748542, rel=1e-6)


def test_boxbod_residual_sum_of_squares():
    # NIST StRD BoxBOD certified residual sum of squares 1.1680088766E+03, 4 degrees of freedom.
    x, y = read_nist("BoxBOD.dat")
    result = fit_law(from_arrays(x, y), "first", observed="product", start={"k": 1, "c_final": 1})
    assert result.chi_square == pytest.approx(1.1680088766e03, rel=1e-8)
    assert result.dof == 4


@pytest.mark.parametrize("start", [(1.2, 0.3, 5.6, 5.5, 6.5, 7.6), (0.5, 0.7, 3.6, 4.2, 4.0, 6.3)])
def test_lanczos1_certified_through_the_generic_fitter(start):
    # NIST StRD Lanczos1 certified values and standard deviations (ill-conditioned: 24 points
    # generated to 14 digits, residual SD 8.9e-14).
    certified = [9.5100000027e-02, 1.0000000001e00, 8.6070000013e-01, 3.0000000002e00,
                 1.5575999998e00, 5.0000000001e00]
    certified_sd = [5.3347304234e-11, 2.7473038179e-10, 1.3576062225e-10, 3.3308253069e-10,
                    1.8815731448e-10, 1.1057500538e-10]
    x, y = read_nist("Lanczos1.dat")

    def three_exponentials(x, b1, b2, b3, b4, b5, b6):
        return b1 * np.exp(-b2 * x) + b3 * np.exp(-b4 * x) + b5 * np.exp(-b6 * x)

    names = ["b1", "b2", "b3", "b4", "b5", "b6"]
    result = fit_function(x, y, three_exponentials, dict(zip(names, start)), profile=False, tol=1e-15)
    assert result.converged, result.message
    for name, value, sd in zip(names, certified, certified_sd):
        assert result.param(name).value == pytest.approx(value, rel=1e-6)
        assert result.param(name).stderr == pytest.approx(sd, rel=2e-2)


def simulate(law, t, truth, sigma, rng):
    return law(t, **truth) + rng.normal(0.0, sigma, t.size)


def test_fit_recovers_first_order_and_reports():
    rng = np.random.default_rng(11)
    t = np.linspace(0, 600, 40)
    y = simulate(laws.first_order, t, {"c0": 0.8, "k": 0.004}, 0.01, rng)
    result = fit_law(from_arrays(t, y), "first")
    assert result.converged
    k = result.param("k")
    assert k.ci_profile[0] < 0.004 < k.ci_profile[1]
    assert k.ci_covariance[0] < k.value < k.ci_covariance[1]
    assert result.correlation.shape == (2, 2) and result.correlation[0, 1] != 0
    text = result.report()
    assert "converged" in text and "k" in text and "AICc" in text and "runs" in text
    d = result.to_dict()
    assert set(d["params"]["k"]) == {"value", "stderr", "ci95", "unit"}  # the project shape, nothing else
    from kinetics.jsonio import dumps

    assert json.loads(dumps(d))["params"]["k"]["ci95"] == list(k.ci_profile)
    # band: the fitted curve sits inside; its width at t=0 is the c0 interval
    curve, lo, hi = result.band(np.array([0.0, 300.0]))
    assert np.all(lo < curve) and np.all(curve < hi)
    q = (result.param("c0").ci_covariance[1] - result.param("c0").ci_covariance[0]) / 2
    assert (hi[0, 0] - lo[0, 0]) / 2 == pytest.approx(q, rel=1e-3)


def test_global_fit_of_two_observed_species_with_sigmas():
    rng = np.random.default_rng(5)
    t = np.linspace(0, 500, 60)
    a, b, _ = laws.consecutive_first_order(t, 1.0, 0.012, 0.005)
    sigma = np.full((2, t.size), 0.01)
    y = np.vstack([a, b]) + rng.normal(0, 0.01, (2, t.size))
    data = from_arrays(t, y, sigma, columns=("A", "B"))
    result = fit_law(data, "consecutive", observed=("A", "B"))
    assert result.converged
    for name, truth in (("k1", 0.012), ("k2", 0.005)):
        lo, hi = result.param(name).ci95
        assert lo < truth < hi
    # the same job through a written mechanism (hidden C, A0 fitted) gives the same optimum
    mech = fit_mechanism(data, "A -> B : k1; B -> C : k2", fixed={"c0_B": 0.0}, profile=False)
    assert mech.converged
    assert mech.param("k1").value == pytest.approx(result.param("k1").value, rel=1e-4)
    assert mech.param("k2").value == pytest.approx(result.param("k2").value, rel=1e-4)
    # absolute sigmas: the stderr no longer rescales with the scatter
    absolute = fit_law(data, "consecutive", observed=("A", "B"), absolute_sigma=True, profile=False)
    ratio = absolute.param("k1").stderr / result.param("k1").stderr
    assert ratio == pytest.approx(1 / math.sqrt(result.reduced_chi_square), rel=1e-3)


def test_fixed_values_bounds_and_pseudo_first_k2():
    rng = np.random.default_rng(2)
    t = np.linspace(0, 300, 30)
    y = simulate(laws.first_order, t, {"c0": 0.05, "k": 0.02}, 5e-4, rng)
    result = fit_law(from_arrays(t, y), "pseudo-first", fixed={"b0": 0.5, "c0": 0.05})
    assert result.varying == ("k_obs",)
    assert not result.param("c0").vary and result.param("c0").value == 0.05
    k2 = {q.name: q for q in result.extra_quantities()}["k2"]
    assert k2.value == pytest.approx(result.param("k_obs").value / 0.5)
    assert k2.ci95[0] < 0.04 < k2.ci95[1]
    bounded = fit_law(from_arrays(t, y), "first", bounds={"k": (0.0, 0.01)}, profile=False)
    assert bounded.param("k").value == pytest.approx(0.01) and bounded.param("k").at_bound
    with pytest.raises(FitError, match="no parameter"):
        fit_law(from_arrays(t, y), "first", fixed={"kk": 1.0})


def test_bootstrap_is_seeded_and_sensible():
    rng = np.random.default_rng(3)
    t = np.linspace(0, 300, 25)
    data = from_arrays(t, simulate(laws.first_order, t, {"c0": 1.0, "k": 0.01}, 0.02, rng))
    one = fit_law(data, "first", bootstrap=200, rng=np.random.default_rng(42), profile=False)
    two = fit_law(data, "first", bootstrap=200, rng=np.random.default_rng(42), profile=False)
    assert one.param("k").ci_bootstrap == two.param("k").ci_bootstrap
    lo, hi = one.param("k").ci_bootstrap
    c_lo, c_hi = one.param("k").ci_covariance
    assert lo < one.param("k").value < hi
    assert (hi - lo) == pytest.approx(c_hi - c_lo, rel=0.3)  # same information, different method
    with pytest.raises(FitError, match="rng"):
        fit_law(data, "first", bootstrap=10)


def test_warm_refit_matches_cold_fit_with_fewer_evaluations():
    rng = np.random.default_rng(9)
    t = np.linspace(0, 400, 60)
    y = simulate(laws.second_order, t, {"c0": 0.5, "k": 0.02}, 0.005, rng)
    early_data = from_arrays(t[:40], y[:40])
    early = fit_law(early_data, "second", profile=False)
    full = early_data.appended(t[40:], y[40:])  # points arriving during a live run
    assert np.array_equal(full.time_s, t)
    warm = refit(early, full)
    cold = fit_law(full, "second", profile=False)
    assert warm.converged and warm.n_points == 60
    assert warm.param("k").value == pytest.approx(cold.param("k").value, rel=1e-7)
    assert warm.n_evaluations <= cold.n_evaluations


def test_forecast_and_half_life_second_order():
    rng = np.random.default_rng(4)
    t = np.linspace(0, 200, 40)
    truth = {"c0": 0.4, "k": 0.05}
    result = fit_law(from_arrays(t, simulate(laws.second_order, t, truth, 0.003, rng)), "second")
    half = result.half_life()
    assert half.value == pytest.approx(1 / (result.param("k").value * result.param("c0").value))
    assert half.ci95[0] < 1 / (0.05 * 0.4) < half.ci95[1]
    forecast = result.time_to_conversion(0.9)
    # second order: t_X = X / (k c0 (1 - X))
    v = result.values
    assert forecast.value == pytest.approx(0.9 / (v["k"] * v["c0"] * 0.1), rel=1e-8)
    assert forecast.ci95[0] < forecast.value < forecast.ci95[1]
    with pytest.raises(FitError):
        result.time_to_conversion(1.5)


def test_unidentifiable_fit_is_flagged_not_silent():
    # product-only reversible A <=> B: only the plateau and k_f + k_r are identifiable
    t = np.linspace(0, 300, 30)
    rng = np.random.default_rng(8)
    b = 1.0 - laws.reversible_first_order(t, 1.0, 0.02, 0.01) + rng.normal(0, 0.005, t.size)
    result = fit_law(from_arrays(t, b), "reversible-first", observed="product")
    assert not result.converged
    assert "not separately identifiable" in result.message and "NOT CONVERGED" in result.report()
    assert result.time_to_conversion(0.5).ci95 is None  # no interval from a fit that failed
    # fixing the initial concentration makes the same data sufficient
    fixed = fit_law(from_arrays(t, b), "reversible-first", observed="product", fixed={"a0": 1.0})
    assert fixed.converged
    assert fixed.param("k_f").ci95[0] < 0.02 < fixed.param("k_f").ci95[1]
    K = {q.name: q for q in fixed.extra_quantities()}["K"]
    assert K.ci95[0] < 2.0 < K.ci95[1]


def test_minimiser_that_runs_out_of_evaluations_says_so():
    t = np.linspace(0, 300, 30)
    y = laws.second_order(t, 1.0, 0.01) + np.random.default_rng(1).normal(0, 0.01, t.size)
    result = fit_model(from_arrays(t, y), laws.get_model("nth"), max_nfev=3)
    assert not result.converged
    assert result.message and "NOT CONVERGED" in result.report()
    assert all(p.ci_profile is None for p in result.params)


@pytest.mark.parametrize("name, law, truth, checked", [
    ("zero", laws.zero_order, {"c0": 1.0, "k": 0.002}, "k"),
    ("nth", laws.nth_order, {"c0": 1.0, "k": 0.01, "n": 2.0}, "n"),
    ("second-mixed", lambda t, a0, b0, k: laws.second_order_mixed(t, a0, b0, k),
     {"a0": 0.5, "b0": 0.8, "k": 0.03}, "k"),
])
def test_other_laws_recover_their_truth(name, law, truth, checked):
    rng = np.random.default_rng(17)
    t = np.linspace(0, 300, 40)
    y = law(t, **truth) + rng.normal(0, 0.004, t.size)
    fixed = {"b0": 0.8} if name == "second-mixed" else None
    result = fit_law(from_arrays(t, y), name, fixed=fixed)
    assert result.converged, result.message
    lo, hi = result.param(checked).ci95
    assert lo < truth[checked] < hi


@pytest.mark.slow
def test_profile_interval_and_forecast_calibration():
    # Statistical property, fixed seed: 300 simulated first-order runs, Gaussian noise; the
    # nominal 95 % intervals should cover the truth in 92-98 % of runs (binomial sd 1.3 %).
    rng = np.random.default_rng(20261201)
    t = np.linspace(0, 300, 25)
    k_true, c0_true, sigma = 0.01, 1.0, 0.02
    t90_true = math.log(10) / k_true
    hits = {"k": 0, "t90_profile": 0, "t90_delta": 0}
    runs = 300
    for _ in range(runs):
        y = laws.first_order(t, c0_true, k_true) + rng.normal(0, sigma, t.size)
        result = fit_law(from_arrays(t, y), "first", profile=("k",))
        assert result.converged
        lo, hi = result.param("k").ci_profile
        hits["k"] += lo <= k_true <= hi
        forecast = result.time_to_conversion(0.9)
        assert forecast.method == "profile"
        hits["t90_profile"] += forecast.ci95[0] <= t90_true <= forecast.ci95[1]
        delta = result.time_to_conversion(0.9, method="delta")
        hits["t90_delta"] += delta.ci95[0] <= t90_true <= delta.ci95[1]
    for name, count in hits.items():
        assert 0.92 <= count / runs <= 0.98, (name, count / runs)


@pytest.mark.slow
def test_model_choice_first_versus_second_order():
    # Simulated data with realistic noise (1.5 % of c0, 30 points over ~3 half-lives):
    # the true law should win by delta AICc > 4 in at least 90 % of runs.
    from kinetics.rates.compare import compare_models

    rng = np.random.default_rng(7)
    t = np.linspace(0, 300, 30)
    truths = {"first": lambda: laws.first_order(t, 1.0, 0.01),
              "second": lambda: laws.second_order(t, 1.0, 0.01)}
    for true_law, curve in truths.items():
        wins = 0
        for _ in range(100):
            data = from_arrays(t, curve() + rng.normal(0, 0.015, t.size))
            comparison = compare_models(data, ("first", "second"))
            table = comparison.table.set_index("model")
            other = "second" if true_law == "first" else "first"
            wins += comparison.best == true_law and table.loc[other, "delta_aicc"] > 4
        assert wins >= 90, (true_law, wins)
    assert "best: " in comparison.verdict


@pytest.mark.parametrize("name", ["zero", "first", "second"])
def test_results_do_not_depend_on_the_units(name):
    # Analytic: a change of units rescales k (and its stderr) by a known factor and must
    # change nothing else; scipy.optimize.curve_fit (relative finite-difference steps) is the
    # reference for the stderr.
    from scipy.optimize import curve_fit

    rng = np.random.default_rng(21)
    t = np.linspace(0, 600, 30)
    law = {"zero": laws.zero_order, "first": laws.first_order, "second": laws.second_order}[name]
    y = law(t, 0.8, {"zero": 8e-4, "first": 3e-3, "second": 5e-3}[name]) + rng.normal(0, 0.005, t.size)
    base = fit_law(from_arrays(t, y), name, profile=("k",))
    # a slow run: time x 1e3 (ks -> s); concentrations x 1e-3 (mmol/L values read as mol/L)
    # or, for second order, x 1e3 (mol/L -> mmol/L), so that k gets small in every case:
    # k of order n scales by c^(1-n) / t, here 1e-6, 1e-3 and 1e-6
    order = {"zero": 0, "first": 1, "second": 2}[name]
    c_factor = 1e3 if name == "second" else 1e-3
    factor = c_factor ** (1 - order) / 1e3
    scaled = fit_law(from_arrays(t * 1e3, y * c_factor), name, profile=("k",))
    assert base.converged and scaled.converged
    assert scaled.param("k").value == pytest.approx(base.param("k").value * factor, rel=1e-6)
    assert scaled.param("k").stderr == pytest.approx(base.param("k").stderr * factor, rel=1e-4)
    for a, b in zip(scaled.param("k").ci95, base.param("k").ci95):
        assert a == pytest.approx(b * factor, rel=1e-4)
    c_name = scaled.params[0].name
    assert scaled.param(c_name).stderr == pytest.approx(base.param(c_name).stderr * c_factor, rel=1e-4)
    if name == "first":  # k ~ 3e-6 s^-1: a reaction followed over about a week
        p, cov = curve_fit(lambda x, c0, k: c0 * np.exp(-k * x), t * 1e3, y, p0=[0.8, 3e-6])
        slow = fit_law(from_arrays(t * 1e3, y), "first", profile=False)
        assert slow.param("k").stderr == pytest.approx(math.sqrt(cov[1, 1]), rel=1e-4)


def test_absolute_sigma_intervals_use_the_normal_quantile():
    # With sigmas taken as known the covariance is not estimated: z = 1.959964 (scipy.stats.norm),
    # not Student t.
    from scipy import stats

    rng = np.random.default_rng(13)
    t = np.linspace(0, 300, 12)
    y = laws.first_order(t, 1.0, 0.01) + rng.normal(0, 0.01, t.size)
    data = from_arrays(t, y, np.full(t.size, 0.01))
    fixed = fit_law(data, "first", absolute_sigma=True, profile=False).param("k")
    scaled = fit_law(data, "first", profile=False).param("k")
    assert (fixed.ci_covariance[1] - fixed.value) / fixed.stderr == pytest.approx(stats.norm.ppf(0.975), rel=1e-9)
    assert (scaled.ci_covariance[1] - scaled.value) / scaled.stderr == pytest.approx(stats.t.ppf(0.975, 10), rel=1e-9)


def test_unbounded_profile_is_quoted_open_not_replaced_by_covariance():
    # A -> B -> C with B unobserved and C observed only early: k2 has no upper bound from
    # the data.  The quoted interval stays open there and never leaves the allowed k >= 0.
    rng = np.random.default_rng(3)
    t = np.linspace(0, 150, 30)
    a, _, c = laws.consecutive_first_order(t, 1.0, 0.03, 20.0)
    data = from_arrays(t, np.vstack([a, c]) + rng.normal(0, 0.01, (2, t.size)), columns=("A", "C"))
    result = fit_law(data, "consecutive", observed=("A", "C"))
    lo, hi = result.param("k2").ci95
    assert lo >= 0 and not np.isfinite(hi)
    assert result.to_dict()["params"]["k2"]["ci95"][1] is None
    assert "unbounded" in result.report()
    for p in result.params:
        if p.ci_covariance is not None:
            assert p.ci_covariance[0] >= 0  # all parameters of this law are >= 0
