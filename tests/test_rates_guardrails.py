"""Fit guardrails: each one's hit rate on data that should trigger it and its false-alarm rate
on correct data.

Data come from generators written here, independent of kinetics.simulate and of the
project's rate laws: closed forms typed out in this file, or the rate equations integrated
with scipy.integrate.solve_ivp; noise from numpy Generators with fixed seeds.  The rates
are statistical properties: they are checked against bands, never fixed answers.
"""

import json

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from kinetics import cli
from kinetics.rates import diagnostics as dg
from kinetics.rates.compare import compare_models
from kinetics.rates.fit import fit_law
from kinetics.rates.table import from_arrays


# ---------------------------------------------------------------- independent generators
def decay_ode(t, c0, k, order):
    """[A](t) from -d[A]/dt = k [A]^order, integrated numerically (tight tolerances)."""
    solution = solve_ivp(lambda _, c: [-k * max(c[0], 0.0) ** order], (0.0, float(t[-1])), [c0],
                         t_eval=t, rtol=1e-10, atol=1e-13, method="LSODA")
    return solution.y[0]


def chain_ode(t, a0, k1, k2):
    """A -> B -> C, first-order steps, integrated numerically; rows A, B, C."""
    def rhs(_, c):
        return [-k1 * c[0], k1 * c[0] - k2 * c[1], k2 * c[1]]
    return solve_ivp(rhs, (0.0, float(t[-1])), [a0, 0.0, 0.0], t_eval=t, rtol=1e-10, atol=1e-13,
                     method="LSODA").y


def exponential(t, c0, k):
    """Closed form of first order: c0 e^{-k t}."""
    return c0 * np.exp(-k * t)


def codes(result):
    return set(result.warning_codes)


def run_cli(capsys, *argv):
    code = cli.main([str(a) for a in argv])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


# ---------------------------------------------------------------- rate measurements
# Each function returns the fraction of cases in which the guardrail fired; the tests
# below hold them to bands, and the same functions give the figures of the closing note.

def direction_rate(rising: bool, cases: int, seed: int) -> float:
    """Curves fitted as a reactant: rising ones (products) should be refused, falling never."""
    rng = np.random.default_rng(seed)
    fired = 0
    for _ in range(cases):
        n = int(rng.integers(6, 41))
        k = 10 ** rng.uniform(-3, -1.5)
        t = np.linspace(0.0, rng.uniform(0.1, 3.0) / k, n)  # 10 % to 95 % conversion
        c = exponential(t, 1.0, k)
        y = (1.0 - c if rising else c) + rng.normal(0.0, 0.01, n)
        if rising and np.ptp(1.0 - c) < 0.05:
            y = 1.0 - c + rng.normal(0.0, 0.002, n)
        result = fit_law(from_arrays(t, y), "first", profile=False)
        fired += "direction_contradicts_observed" in codes(result)
    return fired / cases


def multistart_rate(observed, cases: int, seed: int) -> float:
    """A -> B -> C: seen through B only the two rate constants swap; with A as well they do not."""
    rng = np.random.default_rng(seed)
    fired = 0
    for _ in range(cases):
        k1 = 10 ** rng.uniform(-2.3, -1.7)
        k2 = k1 / rng.uniform(2.0, 6.0) if rng.random() < 0.5 else k1 * rng.uniform(2.0, 6.0)
        t = np.linspace(0.0, 6.0 / min(k1, k2), 30)
        a, b, _ = chain_ode(t, 1.0, k1, k2)
        rows = {"A": a, "B": b}
        y = np.vstack([rows[s] for s in observed]) + rng.normal(0.0, 0.005, (len(observed), t.size))
        data = from_arrays(t, y, columns=observed)
        result = fit_law(data, "consecutive", observed=tuple(observed), profile=False)
        fired += "multiple_solutions" in codes(result)
    return fired / cases


def noise_rate(relative: bool, cases: int, seed: int, weighting="none"):
    """First order, 25 points to ~5 % left; noise 3 % of the value or a constant 1 % of c0.

    Returns ``(fraction warned, fraction of c0 intervals covering the truth)``.
    """
    rng = np.random.default_rng(seed)
    t = np.linspace(0.0, 300.0, 25)
    c = exponential(t, 1.0, 0.01)
    fired = covered = 0
    for _ in range(cases):
        noise = rng.normal(0.0, 0.03, t.size) * c if relative else rng.normal(0.0, 0.01, t.size)
        result = fit_law(from_arrays(t, c + noise), "first", profile=False, weighting=weighting)
        fired += "noise_not_constant" in codes(result)
        lo, hi = result.param("c0").ci95
        covered += lo <= 1.0 <= hi
    return fired / cases, covered / cases


def outlier_rate(with_outlier: bool, cases: int, seed: int):
    """First order, 8-40 points, Gaussian noise; one point moved by 10 sigma or none.

    Returns ``(fraction flagged, fraction where the flagged point is the moved one)``.
    """
    rng = np.random.default_rng(seed)
    fired = named = 0
    for _ in range(cases):
        n = int(rng.integers(8, 41))
        t = np.linspace(0.0, 400.0, n)
        y = exponential(t, 1.0, 0.008) + rng.normal(0.0, 0.01, n)
        where = int(rng.integers(0, n))
        if with_outlier:
            y[where] += 0.1 * rng.choice([-1.0, 1.0])
        result = fit_law(from_arrays(t, y), "first", profile=False)
        flags = [g for g in result.guardrails if g.code == "outlier"]
        fired += bool(flags)
        named += bool(flags) and flags[0].details["points"][0]["index"] == where
    return fired / cases, named / cases


def runs_rate(kind: str, cases: int, seed: int, n: int = 25) -> float:
    """Structured-residual warning: correct first-order fits with white or negatively
    autocorrelated noise (should stay silent) and first order fitted to second-order data
    followed to 80 % conversion (should fire)."""
    rng = np.random.default_rng(seed)
    t = np.linspace(0.0, 400.0, n)
    fired = 0
    for _ in range(cases):
        if kind == "misfit":
            y = decay_ode(t, 1.0, 0.01, 2) + rng.normal(0.0, 0.005, n)  # 80 % conversion at 400 s
        else:
            e = rng.normal(0.0, 0.01, n + 1)
            noise = e[1:] - 0.8 * e[:-1] if kind == "negative" else e[1:]
            y = exponential(t, 1.0, 0.006) + noise
        result = fit_law(from_arrays(t, y), "first", profile=False)
        fired += "residuals_structured" in codes(result)
    return fired / cases


def nested_rate(order: int, cases: int, seed: int):
    """--compare on first- or second-order data followed to 80 %: how often the verdict says
    the data are consistent with the true order, and how often it claims it cannot tell."""
    rng = np.random.default_rng(seed)
    t = np.linspace(0.0, 400.0, 30)
    k = 0.004 if order == 1 else 0.01  # both reach ~80 % at 400 s
    truth = {1: "first", 2: "second"}[order]
    consistent = cannot = 0
    for _ in range(cases):
        y = decay_ode(t, 1.0, k, order) + rng.normal(0.0, 0.01, t.size)
        comparison = compare_models(from_arrays(t, y))
        consistent += comparison.consistent_orders == [truth]
        cannot += "cannot tell" in comparison.verdict
    return consistent / cases, cannot / cases


def time_origin_rate(shifted: bool, cases: int, seed: int) -> float:
    rng = np.random.default_rng(seed)
    fired = 0
    for _ in range(cases):
        span = rng.uniform(600.0, 36000.0)
        start = (rng.choice([1.7e9 + rng.uniform(0, 1e8), rng.uniform(1.0, 20.0) * span]) if shifted
                 else rng.uniform(0.0, 0.3) * span)
        fired += bool(dg.check_time_origin(start + np.linspace(0.0, span, 20)))
    return fired / cases


# ---------------------------------------------------------------- the tests
def test_direction_contradicting_observed_is_refused():
    # A rising curve fitted as a reactant used to "converge" at k ~ 1e-26.
    assert direction_rate(True, 200, 1) >= 0.99
    assert direction_rate(False, 200, 2) == 0.0


def test_direction_refusal_reaches_the_cli(capsys, tmp_path):
    t = np.linspace(0.0, 300.0, 20)
    y = 1.0 - exponential(t, 1.0, 0.01) + np.random.default_rng(3).normal(0.0, 0.01, t.size)
    path = tmp_path / "rising.csv"
    path.write_text("t,P\n" + "".join(f"{a:g},{b:.6g}\n" for a, b in zip(t, y)))
    code, out, _ = run_cli(capsys, "fit", path, "--time-column", "t", "--column", "P", "--model", "first", "--json")
    payload = json.loads(out)
    assert code == 1 and payload["converged"] is False
    assert payload["params"]["k"]["ci95"] is None  # no number quoted as if it were known
    assert "direction_contradicts_observed" in payload["warning_codes"]
    assert any("--observed product" in w for w in payload["warnings"])
    code, out, _ = run_cli(capsys, "fit", path, "--time-column", "t", "--column", "P", "--model", "first",
                           "--observed", "product", "--json")
    assert code == 0 and "direction_contradicts_observed" not in json.loads(out)["warning_codes"]


def test_flat_column_is_refused_not_fitted_to_k_zero():
    # The internal standard: constant within noise; a fit would end at k -> 0.
    rng = np.random.default_rng(4)
    t = np.linspace(0.0, 3600.0, 30)
    result = fit_law(from_arrays(t, 0.5 + rng.normal(0.0, 0.002, t.size)), "first", profile=False)
    if "no_change" in codes(result):  # k reached exactly zero
        assert not result.converged
    else:  # otherwise its interval must reach down to zero: the data do not show a reaction
        assert result.param("k").ci95 is None or result.param("k").ci95[0] <= 1e-6


def test_swapped_rate_constants_are_reported_with_the_observation_that_resolves_them():
    assert multistart_rate(("B",), 40, 5) >= 0.95
    assert multistart_rate(("A", "B"), 40, 6) == 0.0
    rng = np.random.default_rng(7)
    t = np.linspace(0.0, 600.0, 30)
    b = chain_ode(t, 1.0, 0.02, 0.006)[1] + rng.normal(0.0, 0.004, t.size)
    result = fit_law(from_arrays(t, b), "consecutive", observed="intermediate", profile=False)
    (found,) = [g for g in result.guardrails if g.code == "multiple_solutions"]
    ks = sorted((s["k1"], s["k2"]) for s in found.details["solutions"])
    assert ks[0][0] == pytest.approx(ks[1][1], rel=1e-3) and ks[0][1] == pytest.approx(ks[1][0], rel=1e-3)
    assert sorted(ks[0]) == pytest.approx([0.006, 0.02], rel=0.1)  # the truth is among the solutions
    assert "observe A or C" in found.message and "--fix a0" in found.message
    # a known initial concentration removes the ambiguity
    fixed = fit_law(from_arrays(t, b), "consecutive", observed="intermediate", fixed={"a0": 1.0}, profile=False)
    assert "multiple_solutions" not in codes(fixed)
    assert fixed.param("k1").value == pytest.approx(0.02, rel=0.1)


def test_forecast_beyond_the_data_gets_a_caveat_and_a_model_averaged_interval(capsys, tmp_path):
    # Second-order data stopped at ~20 % conversion, fitted first order, time to 90 % asked.
    # Truth (second order, -dA/dt = k A^2): t_X = X / (k c0 (1 - X)).
    k, c0 = 0.0025, 1.0
    t90 = 0.9 / (k * c0 * 0.1)
    rng = np.random.default_rng(8)
    t = np.linspace(0.0, 100.0, 25)
    covered_plain = covered_averaged = 0
    cases = 30
    for _ in range(cases):
        y = decay_ode(t, c0, k, 2) + rng.normal(0.0, 0.01, t.size)
        data = from_arrays(t, y)
        first = fit_law(data, "first", profile=("k",))
        plain = first.time_to_conversion(0.9)
        assert "past the last observation" in plain.note
        assert [g.code for g in first.forecast_guardrails(0.9)] == ["forecast_extrapolated"]
        covered_plain += plain.ci95[0] <= t90 <= plain.ci95[1]
        averaged = dg.model_averaged_forecast(compare_models(data), 0.9, "first")
        covered_averaged += averaged.ci95[0] <= t90 <= averaged.ci95[1]
    assert covered_plain / cases <= 0.2  # the single-law interval is confidently wrong
    assert covered_averaged / cases >= 0.8
    # through the command: caveat and averaged interval in --json
    path = tmp_path / "early.csv"
    path.write_text("t,A\n" + "".join(f"{a:g},{b:.6g}\n" for a, b in zip(t, y)))
    code, out, _ = run_cli(capsys, "fit", path, "--time-column", "t", "--column", "A", "--model", "first",
                           "--target-conversion", "0.9", "--json")
    payload = json.loads(out)
    assert "forecast_extrapolated" in payload["warning_codes"]
    assert payload["forecast"]["model_averaged_time_s"]["ci95"][1] > payload["forecast"]["time_s"]["ci95"][1]


def test_forecast_inside_the_data_has_no_caveat():
    rng = np.random.default_rng(9)
    t = np.linspace(0.0, 600.0, 25)
    result = fit_law(from_arrays(t, exponential(t, 1.0, 0.01) + rng.normal(0.0, 0.01, t.size)), "first")
    assert result.forecast_guardrails(0.5) == [] and result.time_to_conversion(0.5).note == ""


def test_non_constant_noise_is_caught_and_relative_weighting_fixes_the_intervals():
    hit, coverage_unweighted = noise_rate(True, 200, 10)
    false_alarm, coverage_constant = noise_rate(False, 200, 11)
    assert hit >= 0.7, hit  # was 5 of 200 (2.5 %)
    assert false_alarm <= 0.03, false_alarm
    assert 0.92 <= coverage_constant <= 0.98
    warned_weighted, coverage_weighted = noise_rate(True, 200, 12, weighting="relative")
    assert coverage_unweighted < 0.9  # the problem the warning is about
    assert 0.92 <= coverage_weighted <= 0.98, coverage_weighted
    assert warned_weighted <= 0.03


def test_outliers_are_flagged_by_row_and_clean_data_stay_silent():
    hit, named = outlier_rate(True, 200, 13)
    false_alarm, _ = outlier_rate(False, 200, 14)
    assert hit >= 0.97 and named >= 0.97
    assert false_alarm <= 0.03  # 0.6 % over 1000 cases; band ~4 binomial sd at 200


def test_outlier_message_names_the_spectrum_file(capsys, tmp_path):
    rng = np.random.default_rng(15)
    t = np.linspace(0.0, 400.0, 20)
    y = exponential(t, 1.0, 0.008) + rng.normal(0.0, 0.01, t.size)
    y[11] -= 0.12
    path = tmp_path / "series.csv"
    path.write_text("index,file,time_s,A_concentration\n" + "".join(
        f"{i},fid_{i:03d}.jdx,{a:g},{b:.6g}\n" for i, (a, b) in enumerate(zip(t, y))))
    code, out, _ = run_cli(capsys, "fit", path, "--time-column", "time_s", "--column", "A_concentration",
                           "--model", "first", "--json")
    payload = json.loads(out)
    (outlier,) = [g for g in payload["guardrails"] if g["code"] == "outlier"]
    assert "fid_011.jdx" in outlier["message"] and "line 13" in outlier["message"]


def test_runs_test_is_exact_for_small_n():
    # Analytic: enumerate every arrangement of n1 plus and n2 minus signs.
    from itertools import combinations

    for n1, n2 in [(2, 3), (3, 3), (4, 6), (5, 2)]:
        n = n1 + n2
        counts = np.zeros(n + 2)
        for plus in combinations(range(n), n1):
            signs = np.full(n, -1)
            signs[list(plus)] = 1
            counts[1 + np.sum(signs[1:] != signs[:-1])] += 1
        assert np.allclose(dg.runs_pmf(n1, n2), counts / counts.sum(), atol=1e-12)


def test_runs_warning_calibrated_for_small_n_and_positive_autocorrelation_only():
    assert runs_rate("white", 200, 16, n=5) == 0.0  # was 40 % of correct 5-point fits
    assert runs_rate("white", 200, 17) <= 0.02
    assert runs_rate("negative", 200, 18) <= 0.02  # negative autocorrelation: not a misfit
    assert runs_rate("misfit", 100, 19, n=30) >= 0.9


def test_free_order_interval_says_which_integer_law_the_data_follow():
    consistent, cannot = nested_rate(1, 40, 20)
    assert consistent >= 0.85 and cannot <= 0.05  # was "cannot tell these laws apart"
    consistent, _ = nested_rate(2, 40, 21)
    assert consistent >= 0.85


def test_units_convert_so_k_carries_the_right_unit(capsys, tmp_path):
    # Analytic: the same reaction in s and mol/L, and in min and mmol/L; k of second order
    # (L mol^-1 s^-1) must come out the same.
    rng = np.random.default_rng(22)
    t = np.linspace(0.0, 1200.0, 25)
    y = decay_ode(t, 0.8, 0.004, 2) + rng.normal(0.0, 0.004, t.size)
    si = tmp_path / "si.csv"
    si.write_text("t,A\n" + "".join(f"{a:.17g},{b:.17g}\n" for a, b in zip(t, y)))
    other = tmp_path / "other.csv"
    other.write_text("t_min,A_mM\n" + "".join(f"{a / 60.0:.17g},{b * 1e3:.17g}\n" for a, b in zip(t, y)))
    _, out, _ = run_cli(capsys, "fit", si, "--time-column", "t", "--column", "A", "--model", "second", "--json")
    reference = json.loads(out)
    _, out, _ = run_cli(capsys, "fit", other, "--time-column", "t_min", "--column", "A_mM", "--model", "second",
                        "--time-unit", "min", "--concentration-unit", "mmol/L", "--json")
    converted = json.loads(out)
    assert converted["params"]["k"]["unit"] == "L mol^-1 s^-1"
    assert converted["params"]["k"]["value"] == pytest.approx(reference["params"]["k"]["value"], rel=1e-6)
    assert converted["half_life_s"]["value"] == pytest.approx(reference["half_life_s"]["value"], rel=1e-6)
    assert converted["input_units"]["time"] == "min"
    assert "unit_hint" not in converted["warning_codes"]
    # without the options, the column names prompt the hint
    _, out, _ = run_cli(capsys, "fit", other, "--time-column", "t_min", "--column", "A_mM", "--model", "second",
                        "--json")
    hinted = json.loads(out)
    assert hinted["warning_codes"].count("unit_hint") == 2


def test_time_origin_mistakes_are_detected():
    assert time_origin_rate(True, 200, 23) == 1.0
    assert time_origin_rate(False, 200, 24) == 0.0
    (epoch,) = dg.check_time_origin(1.7e9 + np.linspace(0.0, 3600.0, 10))
    assert epoch.code == "time_epoch_seconds" and "clock" in epoch.message


def test_mass_balance_notes_reach_the_json(capsys, tmp_path):
    rng = np.random.default_rng(25)
    t = np.linspace(0.0, 400.0, 12)
    y = exponential(t, 1.0, 0.006) + rng.normal(0.0, 0.005, t.size)
    flags = [i in (4, 9) for i in range(t.size)]
    path = tmp_path / "series.csv"
    path.write_text("file,time_s,A_concentration,mass_balance_deviation_sigma,mass_balance_flag\n" + "".join(
        f"s{i:02d}.jdx,{a:g},{b:.6g},{(4.2 if f else 0.5):g},{f}\n" for i, (a, b, f) in enumerate(zip(t, y, flags))))
    code, out, _ = run_cli(capsys, "fit", path, "--time-column", "time_s", "--column", "A_concentration",
                           "--model", "first", "--json")
    payload = json.loads(out)
    (note,) = [g for g in payload["guardrails"] if g["code"] == "mass_balance"]
    assert "2 of 12" in note["message"] and "s04.jdx" in note["message"] and "4.2 sigma" in note["message"]
    assert note["message"] in payload["warnings"]


def test_relative_weighting_refits_live_and_does_not_mix_with_sigmas():
    from kinetics.errors import FitError
    from kinetics.rates.fit import refit

    rng = np.random.default_rng(26)
    t = np.linspace(0.0, 300.0, 30)
    y = exponential(t, 1.0, 0.01) * (1.0 + rng.normal(0.0, 0.03, t.size))
    early = fit_law(from_arrays(t[:20], y[:20]), "first", weighting="relative")
    assert early.data.sigma is None and "weighting_relative" in early.warning_codes
    later = refit(early, early.data.appended(t[20:], y[20:]))
    assert later.converged and later.options.weighting == "relative" and later.n_points == 30
    lo, hi = later.param("k").ci95
    assert lo < 0.01 < hi
    with pytest.raises(FitError, match="not both"):
        fit_law(from_arrays(t, y, np.full(t.size, 0.01)), "first", weighting="relative")
    assert "[weighting_relative]" in early.report()
