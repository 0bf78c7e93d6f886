"""Two-step Arrhenius / Eyring analysis: checks against published data, constants, identities."""

import math

import numpy as np
import pytest
from scipy import constants

from kinetics import temperature as temp
from kinetics.errors import ConfigError

R = constants.R

# N2O5 -> 2 NO2 + 1/2 O2 in the gas phase, first order.  Daniels & Johnston,
# J. Am. Chem. Soc. 43, 53 (1921), the data set reproduced in many physical-chemistry
# textbooks (e.g. Laidler, "Chemical Kinetics"); values from memory.  Published
# activation energy 24.7 kcal/mol = 103.3 kJ/mol (from memory).
N2O5_TEMPERATURE_KELVIN = np.array([273.0, 298.0, 308.0, 318.0, 328.0, 338.0])
N2O5_K_PER_S = np.array([7.87e-7, 3.46e-5, 1.35e-4, 4.98e-4, 1.50e-3, 4.87e-3])
N2O5_EA_KJ_PER_MOL = 24.7 * constants.calorie


def test_n2o5_textbook_activation_energy():
    # Textbook practice: an unweighted line of ln k on 1/T, i.e. equal relative errors.
    result = temp.analyse_temperatures(N2O5_TEMPERATURE_KELVIN, N2O5_K_PER_S, 0.03 * N2O5_K_PER_S)
    assert result.ea().value == pytest.approx(N2O5_EA_KJ_PER_MOL, abs=1.0)
    lo, hi = result.ea().ci95
    assert lo < result.ea().value < hi
    # The same without stated stderrs: identical estimate, scatter-only intervals.
    no_se = temp.analyse_temperatures(N2O5_TEMPERATURE_KELVIN, N2O5_K_PER_S)
    assert no_se.ea().value == pytest.approx(result.ea().value, rel=1e-12)
    assert no_se.ea().stderr == pytest.approx(result.ea().stderr, rel=1e-9)
    with pytest.raises(ConfigError, match="stated"):
        no_se.ea("stated")


def test_eyring_frequency_at_298_kelvin():
    # k_B T / h at 298.15 K = 6.212e12 s^-1 (CODATA via scipy.constants).
    assert temp.eyring_prefactor_per_s(298.15) == pytest.approx(6.212e12, rel=2e-4)
    assert temp.BOLTZMANN_J_PER_K == constants.k and temp.PLANCK_J_S == constants.h


def test_ea_equals_dh_plus_rt_at_mean_temperature():
    # Textbook relation for reactions in solution (transition-state theory): Ea = dH‡ + R T.
    # On the same data the two lines' slopes differ by exactly R times the regression slope
    # of ln T on 1/T, which equals the (weighted harmonic) mean temperature T_h only to
    # first order in u = (1/T - 1/T_h) * T_h; the neglected skew/curvature terms are bounded
    # by max|u|, so the tolerance is R * T_h * max|u| (0.34 kJ/mol for this set).
    result = temp.analyse_temperatures(N2O5_TEMPERATURE_KELVIN, N2O5_K_PER_S, 0.03 * N2O5_K_PER_S)
    t_mean = result.mean_temperature_kelvin
    u = t_mean / N2O5_TEMPERATURE_KELVIN - 1.0
    tolerance_kj = R * t_mean * np.abs(u).max() / 1e3
    difference = result.ea().value - (result.dh().value + R * t_mean / 1e3)
    assert abs(difference) < tolerance_kj
    # With temperatures close together the relation gets tight (u -> 0).
    close = np.array([295.0, 297.0, 299.0, 301.0, 303.0])
    k = 1e13 * np.exp(-80e3 / (R * close))
    tight = temp.analyse_temperatures(close, k, 0.02 * k)
    assert tight.ea().value - tight.dh().value == pytest.approx(R * tight.mean_temperature_kelvin / 1e3, rel=1e-3)


def test_noiseless_eyring_data_give_back_dh_and_ds():
    # Analytic: k = (k_B T / h) exp(dS/R) exp(-dH/(R T)) exactly.
    t = np.array([280.0, 295.0, 310.0, 325.0])
    dh_j, ds_j = 85e3, -25.0
    k = constants.k * t / constants.h * np.exp(ds_j / R - dh_j / (R * t))
    result = temp.analyse_temperatures(t, k, 0.01 * k, reference_temperature_kelvin=300.0)
    assert result.dh().value == pytest.approx(dh_j / 1e3, rel=1e-9)
    assert result.ds().value == pytest.approx(ds_j, abs=1e-6)
    assert result.dg().value == pytest.approx((dh_j - 300.0 * ds_j) / 1e3, rel=1e-9)
    # The Eyring equation at 300 K gives back the rate constant from dG‡.
    k300 = constants.k * 300 / constants.h * math.exp(-result.dg().value * 1e3 / (R * 300.0))
    assert k300 == pytest.approx(constants.k * 300 / constants.h * math.exp(ds_j / R - dh_j / (R * 300)), rel=1e-9)


def test_dg_stderr_uses_the_covariance():
    rng = np.random.default_rng(7)
    t = np.array([283.15, 293.15, 303.15, 313.15, 323.15])
    k = 1e10 * np.exp(-70e3 / (R * t)) * np.exp(rng.normal(0, 0.03, t.size))
    result = temp.analyse_temperatures(t, k, 0.03 * k)
    quadrature = math.hypot(result.dh().stderr, 298.15 * result.ds().stderr / 1e3)
    # dH‡ and dS‡ are strongly correlated: the true stderr is far below the naive sum.
    assert result.dg().stderr < 0.3 * quadrature
    # Monte Carlo through the full covariance agrees with the analytic delta-method value.
    cov = result.eyring.covariance("scatter")
    draws = rng.multivariate_normal([result.eyring.intercept, result.eyring.slope], cov, size=20000)
    offset = math.log(constants.k / constants.h)
    dg = (-R * draws[:, 1] - 298.15 * R * (draws[:, 0] - offset)) / 1e3
    assert np.std(dg) == pytest.approx(result.dg().stderr, rel=0.03)


def test_predicted_k_interval_covers_truth():
    # Simulation with known truth: 300 seeded data sets, 5 temperatures, 4 % noise in k.
    rng = np.random.default_rng(11)
    t = np.array([290.0, 300.0, 310.0, 320.0, 330.0])
    ea_j, ln_a = 60e3, 18.0
    true_k_340 = math.exp(ln_a - ea_j / (R * 340.0))
    hits = 0
    for _ in range(300):
        k = np.exp(ln_a - ea_j / (R * t) + rng.normal(0, 0.04, t.size))
        pred = temp.analyse_temperatures(t, k, 0.04 * k).predict_k(340.0)
        hits += pred.ci95[0] <= true_k_340 <= pred.ci95[1]
    assert 0.91 <= hits / 300 <= 0.99


def test_two_stated_and_scatter_bases_are_both_reported():
    rng = np.random.default_rng(3)
    t = np.array([288.15, 298.15, 308.15, 318.15])
    k = 1e9 * np.exp(-65e3 / (R * t)) * np.exp(rng.normal(0, 0.05, t.size))
    result = temp.analyse_temperatures(t, k, 0.05 * k)
    out = result.to_dict()
    assert out["interval_basis"] == "scatter"
    assert out["stated_basis"]["ea_kj_per_mol"]["value"] == out["ea_kj_per_mol"]["value"]
    ratio = out["ea_kj_per_mol"]["stderr"] / out["stated_basis"]["ea_kj_per_mol"]["stderr"]
    assert ratio == pytest.approx(math.sqrt(result.arrhenius.reduced_chi2), rel=1e-9)
    for key in ("ea_kj_per_mol", "ln_a", "a_per_s", "dh_kj_per_mol", "ds_j_per_mol_k", "dg_kj_per_mol"):
        assert set(out[key]) == {"value", "stderr", "ci95", "unit"}
    assert "transmission coefficient 1" in result.report()


# ---------------------------------------------------------------- bad input
def _k(t):
    return 1e12 * np.exp(-80e3 / (R * np.asarray(t, float)))


def test_fewer_than_two_runs_is_an_error():
    with pytest.raises(ConfigError, match="at least 2"):
        temp.analyse_temperatures([300.0], [1e-3], [1e-5])


def test_two_runs_warn_and_use_stated_errors():
    t = [300.0, 320.0]
    result = temp.analyse_temperatures(t, _k(t), 0.02 * _k(t))
    assert result.basis == "stated"
    assert any("only 2 runs" in w for w in result.warnings)
    with pytest.raises(ConfigError, match="two runs"):
        temp.analyse_temperatures(t, _k(t))


def test_below_absolute_zero_is_an_error():
    with pytest.raises(ConfigError, match="absolute zero"):
        temp.to_kelvin([25.0, -300.0], "c")
    with pytest.raises(ConfigError, match="absolute zero"):
        temp.analyse_temperatures([300.0, -5.0, 320.0], [1.0, 2.0, 3.0], [0.1, 0.1, 0.1])


def test_kelvin_given_as_celsius_warns_with_reason():
    kelvin, warnings = temp.to_kelvin([298.0, 308.0, 318.0], "c", ["a", "b", "c"])
    assert kelvin[0] == pytest.approx(571.15)
    assert len(warnings) == 3 and "looks like a kelvin value" in warnings[0]
    _, warnings = temp.to_kelvin([25.0, 35.0], "k")
    assert "looks like a Celsius value" in warnings[0]
    _, warnings = temp.to_kelvin([25.0, 35.0], "c")
    assert warnings == []


def test_duplicate_runs():
    t = [300.0, 310.0, 310.0, 320.0]
    k = _k(t)
    with pytest.raises(ConfigError, match="listed twice"):
        temp.analyse_temperatures(t, k, 0.02 * k)
    k[2] *= 1.05  # a true replicate at the same temperature is kept, with a warning
    result = temp.analyse_temperatures(t, k, 0.02 * k)
    assert any("replicate" in w for w in result.warnings)
    with pytest.raises(ConfigError, match="same temperature"):
        temp.analyse_temperatures([300.0, 300.0, 300.0], [1.0, 1.1, 1.2], [0.1, 0.1, 0.1])


@pytest.mark.parametrize("k, se, match", [
    ([1e-3, 0.0, 3e-3], [1e-5, 1e-5, 1e-5], "not positive"),
    ([1e-3, -2e-3, 3e-3], [1e-5, 1e-5, 1e-5], "not positive"),
    ([1e-3, 2e-3, 3e-3], [1e-5, 0.0, 1e-5], "stderr"),
    ([1e-3, 2e-3, np.nan], [1e-5, 1e-5, 1e-5], "not positive"),
])
def test_non_positive_k_or_stderr_is_an_error(k, se, match):
    with pytest.raises(ConfigError, match=match):
        temp.analyse_temperatures([300.0, 310.0, 320.0], k, se)


def test_large_relative_stderr_warns():
    t = [300.0, 310.0, 320.0]
    k = _k(t)
    result = temp.analyse_temperatures(t, k, [0.02 * k[0], 0.8 * k[1], 0.02 * k[2]])
    assert any("crude" in w for w in result.warnings)
