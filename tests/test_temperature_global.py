"""Global fit across temperature: calibration on simulated studies with known Ea and A."""

import math

import numpy as np
import pytest
from scipy import constants

from kinetics import temperature as temp
from kinetics.errors import ConfigError

R = constants.R
TRUE_EA_J_PER_MOL = 75e3
TRUE_K_298_PER_S = 1e-3
TEMPERATURES_KELVIN = np.array([288.15, 298.15, 308.15, 318.15])


def _true_k(t_kelvin):
    return TRUE_K_298_PER_S * np.exp(-(TRUE_EA_J_PER_MOL / R) * (1 / t_kelvin - 1 / 298.15))


def _simulated_study(rng, n_points=25, c0=0.1, noise=0.002, model="first"):
    # Invented data whose truth the test sets: 25 points per run over ~3.5 lifetimes,
    # noise 2 % of c0 (a typical NMR integral precision, common practice).
    runs = []
    for t_kelvin in TEMPERATURES_KELVIN:
        k = _true_k(t_kelvin)
        scale = 3.5 / k if model != "second" else 3.5 / (k * c0)
        time_s = np.sort(rng.uniform(0.0, scale, n_points))
        time_s[0] = 0.0
        if model == "first":
            conc = c0 * np.exp(-k * time_s)
        elif model == "first-product":
            conc = c0 * -np.expm1(-k * time_s)
        else:
            conc = c0 / (1 + k * c0 * time_s)
        runs.append(temp.KineticRun(f"{t_kelvin:.2f} K", float(t_kelvin), time_s, conc + rng.normal(0, noise, n_points)))
    return runs


@pytest.mark.slow
def test_global_fit_interval_calibration_200_studies():
    # 200 seeded studies: the global fit's 95 % interval must cover the true Ea in 92-98 %
    # of them, the profile interval likewise, and two-step and global estimates must agree
    # within their intervals.
    rng = np.random.default_rng(20261201)
    truth = TRUE_EA_J_PER_MOL / 1e3
    covered = profile_covered = global_in_two_step = two_step_in_global = two_step_covered = 0
    n = 200
    for _ in range(n):
        result = temp.global_fit(_simulated_study(rng), "first", profile=True)
        assert result.success, result.message
        covered += result.ea.ci95[0] <= truth <= result.ea.ci95[1]
        profile_covered += result.ea_profile_ci95[0] <= truth <= result.ea_profile_ci95[1]
        two = result.two_step.ea()
        two_step_covered += two.ci95[0] <= truth <= two.ci95[1]
        global_in_two_step += two.ci95[0] <= result.ea.value <= two.ci95[1]
        two_step_in_global += result.ea.ci95[0] <= two.value <= result.ea.ci95[1]
    assert 0.92 <= covered / n <= 0.98
    assert 0.92 <= profile_covered / n <= 0.98
    assert 0.90 <= two_step_covered / n <= 0.99
    assert global_in_two_step / n >= 0.98
    assert two_step_in_global / n >= 0.95


def test_profile_and_covariance_intervals_agree_for_a_well_determined_fit():
    result = temp.global_fit(_simulated_study(np.random.default_rng(1)), "first")
    lo, hi = result.ea_profile_ci95
    assert lo == pytest.approx(result.ea.ci95[0], abs=0.05 * result.ea.stderr * 4)
    assert hi == pytest.approx(result.ea.ci95[1], abs=0.05 * result.ea.stderr * 4)
    # The reference-temperature form decorrelates ln k_ref and Ea (Schwaab & Pinto 2007).
    assert abs(result.correlation_ea_ln_k_ref) < 0.3
    assert result.t_ref_kelvin == pytest.approx(1 / np.mean(1 / TEMPERATURES_KELVIN))


@pytest.mark.parametrize("model", ["first-product", "second"])
def test_other_rate_laws_recover_truth(model):
    result = temp.global_fit(_simulated_study(np.random.default_rng(5), model=model), model, profile=False)
    assert result.success
    assert abs(result.ea.value - TRUE_EA_J_PER_MOL / 1e3) < 4 * result.ea.stderr
    k_true = _true_k(result.t_ref_kelvin)
    assert abs(math.log(result.k_ref.value / k_true)) < 4 * result.k_ref.stderr / result.k_ref.value


def test_plain_function_model_matches_builtin():
    # A rate law given as f(t, k, **params), as kinetics.rates provides them: finite
    # differences instead of the analytic Jacobian must reach the same optimum.
    def first_order(t, k, c0):
        return c0 * np.exp(-k * t)

    runs = _simulated_study(np.random.default_rng(2))
    builtin = temp.global_fit(runs, "first", profile=False)
    plain = temp.global_fit(runs, first_order, profile=False)
    assert plain.ea.value == pytest.approx(builtin.ea.value, rel=1e-5)
    assert plain.ea.stderr == pytest.approx(builtin.ea.stderr, rel=1e-3)
    assert plain.nuisance[0]["c0"] == pytest.approx(builtin.nuisance[0]["c0"], rel=1e-6)


def test_comparison_table_and_report():
    result = temp.global_fit(_simulated_study(np.random.default_rng(4)), "first")
    rows = result.comparison()
    assert [r["quantity"].split("(")[0] for r in rows] == ["Ea", "k", "ln A"]
    # Two-step with 4 runs has t(2 dof) intervals: wider than the global fit's.
    assert rows[0]["width_ratio_two_step_over_global"] > 1.0
    text = result.report()
    assert "two-step vs global" in text and "T_ref" in text
    assert set(result.to_dict()["ea_kj_per_mol"]) == {"value", "stderr", "ci95", "unit"}


def test_global_fit_bad_input():
    rng = np.random.default_rng(0)
    runs = _simulated_study(rng)
    with pytest.raises(ConfigError, match="at least 2"):
        temp.global_fit(runs[:1])
    same = [temp.KineticRun(f"r{i}", 300.0, r.time_s, r.concentration_mol_per_l) for i, r in enumerate(runs)]
    with pytest.raises(ConfigError, match="one temperature"):
        temp.global_fit(same)
    with pytest.raises(ConfigError, match="unknown rate law"):
        temp.global_fit(runs, "zeroth-and-a-half")
    with pytest.raises(ConfigError, match="shapes differ"):
        temp.KineticRun("bad", 300.0, np.arange(5.0), np.arange(4.0))
    with pytest.raises(ConfigError, match="absolute zero"):
        temp.KineticRun("bad", -1.0, np.arange(5.0), np.arange(5.0))


def test_per_run_fits_match_scipy_curve_fit():
    # Reference library: scipy.optimize.curve_fit on the same first-order runs (covariance
    # scaled by the residual variance, as fit_run's).  Both the registry path (fit_law) and
    # the plain-function path (fit_function with ln k free) must give its k and stderr.
    from scipy.optimize import curve_fit

    runs = _simulated_study(np.random.default_rng(8))

    def plain_first(t, k, c0):
        return c0 * np.exp(-k * t)

    plain = temp.model_from_function(plain_first)
    for run in runs:
        p, cov = curve_fit(lambda t, k, c0: c0 * np.exp(-k * t), run.time_s, run.concentration_mol_per_l,
                           p0=(1.0 / run.time_s[-1], run.concentration_mol_per_l[0]))
        for fit in (temp.fit_run(run, "first"), temp.fit_run(run, plain)):
            assert fit.fit is not None and fit.success
            assert fit.k == pytest.approx(p[0], rel=1e-6)
            assert fit.k_stderr == pytest.approx(math.sqrt(cov[0, 0]), rel=1e-3)
    rates_fits = [temp.fit_run(run, "first") for run in runs]
    from_rates = temp.global_fit(runs, "first", run_fits=rates_fits, profile=False)
    assert from_rates.ea.value == pytest.approx(temp.global_fit(runs, "first", profile=False).ea.value, rel=1e-7)


def test_registry_law_without_analytic_jacobian():
    # Zero order from the kinetics.rates registry, c = max(c0 - k t, 0), through the
    # finite-difference path; runs stop at 80 % conversion so the kink is never reached.
    rng = np.random.default_rng(9)
    runs = []
    for t_kelvin in TEMPERATURES_KELVIN:
        k = 1e-5 * _true_k(t_kelvin) / TRUE_K_298_PER_S
        time_s = np.linspace(0.0, 0.08 / k, 30)
        conc = np.maximum(0.1 - k * time_s, 0.0) + rng.normal(0, 0.001, time_s.size)
        runs.append(temp.KineticRun(f"{t_kelvin}", float(t_kelvin), time_s, conc))
    result = temp.global_fit(runs, "zero", profile=False)
    assert result.success and result.k_unit == "mol L^-1 s^-1"
    assert abs(result.ea.value - TRUE_EA_J_PER_MOL / 1e3) < 4 * result.ea.stderr
    with pytest.raises(ConfigError, match="single rate constant"):
        temp.global_fit(runs, "consecutive")
    with pytest.raises(ConfigError, match="single rate constant"):
        temp.resolve_model("nth")


def test_global_fit_does_not_depend_on_the_concentration_unit():
    # Analytic: the same second-order study in micromol/L instead of mol/L (c x 1e-6,
    # k x 1e6) must give the same Ea and stderr, also through the finite-difference path of a
    # plain f(t, k, c0), where c0 enters non-linearly.
    def second_order(t, k, c0):
        return c0 / (1.0 + k * c0 * t)

    runs = _simulated_study(np.random.default_rng(12), model="second")
    micro = [temp.KineticRun(r.label, r.temperature_kelvin, r.time_s, r.concentration_mol_per_l * 1e-6)
             for r in runs]
    base = temp.global_fit(runs, temp.model_from_function(second_order, k_unit="L mol^-1 s^-1"), profile=False)
    small = temp.global_fit(micro, temp.model_from_function(second_order, k_unit="L mol^-1 s^-1"), profile=False)
    assert base.success and small.success
    assert small.ea.value == pytest.approx(base.ea.value, rel=1e-6)
    assert small.ea.stderr == pytest.approx(base.ea.stderr, rel=1e-3)
    assert small.k_ref.value == pytest.approx(base.k_ref.value * 1e6, rel=1e-6)
