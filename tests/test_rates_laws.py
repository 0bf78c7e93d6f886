"""Integrated rate laws and mechanisms against textbook identities and each other."""

import math

import numpy as np
import pytest
from scipy.optimize import minimize_scalar

from kinetics.errors import ConfigError
from kinetics.rates import laws
from kinetics.rates.mechanism import mechanism_model, parse_mechanism

T = np.linspace(0.0, 400.0, 81)
TIGHT = dict(method="Radau", rtol=1e-12)


def test_half_lives_textbook():
    # Textbook identities: t1/2 = ln2/k (first order), 1/(k[A]0) (second order), [A]0/(2k) (zero).
    k, c0 = 0.0123, 0.4
    assert laws.first_order(math.log(2) / k, c0, k) == pytest.approx(c0 / 2, rel=1e-12)
    assert laws.second_order(1.0 / (k * c0), c0, k) == pytest.approx(c0 / 2, rel=1e-12)
    assert laws.zero_order(c0 / (2 * k), c0, k) == pytest.approx(c0 / 2, rel=1e-12)
    first = laws.get_model("first")
    second = laws.get_model("second")
    assert first.half_life({"c0": c0, "k": k}) == pytest.approx(math.log(2) / k)
    assert second.half_life({"c0": c0, "k": k}) == pytest.approx(1 / (k * c0))


def test_product_formation_is_complement_of_decay():
    k, c_final = 0.02, 0.7
    assert np.allclose(laws.first_order_formation(T, c_final, k), c_final - laws.first_order(T, c_final, k),
                       rtol=0, atol=1e-15)


def test_consecutive_maximum_of_intermediate():
    # Textbook: for A -> B -> C the intermediate peaks at t = ln(k1/k2)/(k1 - k2).
    a0, k1, k2 = 1.0, 0.03, 0.011
    best = minimize_scalar(lambda t: -laws.consecutive_first_order(np.array([t]), a0, k1, k2)[1][0],
                           bounds=(0, 500), method="bounded", options={"xatol": 1e-9})
    assert best.x == pytest.approx(math.log(k1 / k2) / (k1 - k2), rel=1e-6)
    # and the equal-constant limit: [B] = [A]0 k t exp(-k t), peaking at 1/k
    _, b_equal, _ = laws.consecutive_first_order(T, a0, k1, k1)
    assert np.allclose(b_equal, a0 * k1 * T * np.exp(-k1 * T), rtol=1e-12, atol=0)
    _, b_near, _ = laws.consecutive_first_order(T, a0, k1, k1 * (1 + 1e-10))
    assert np.allclose(b_near, b_equal, rtol=1e-8)


def test_second_mixed_matches_textbook_and_equal_limit():
    a0, b0, k = 0.1, 0.25, 0.3
    delta = b0 - a0
    textbook = a0 * delta / (b0 * np.exp(delta * k * T) - a0)  # the usual closed form
    assert np.allclose(laws.second_order_mixed(T, a0, b0, k), textbook, rtol=1e-12)
    equal = laws.second_order_mixed(T, a0, a0, k)
    assert np.all(np.isfinite(equal))
    assert np.allclose(equal, laws.second_order(T, a0, k), rtol=1e-13)
    assert np.allclose(laws.second_order_mixed(T, a0, a0 * (1 + 1e-11), k), equal, rtol=1e-9)


def test_nth_order_limits():
    c0, k = 0.5, 0.01
    assert np.allclose(laws.nth_order(T, c0, k, 1.0), laws.first_order(T, c0, k), rtol=1e-14)
    assert np.allclose(laws.nth_order(T, c0, k, 1.0 + 1e-9), laws.first_order(T, c0, k), rtol=1e-6)
    assert np.allclose(laws.nth_order(T, c0, k, 2.0), laws.second_order(T, c0, k), rtol=1e-12)
    assert np.allclose(laws.nth_order(T, c0, 1e-3, 0.0), laws.zero_order(T, c0, 1e-3), rtol=1e-12, atol=1e-15)


def test_reversible_equilibrium_constant():
    a0, kf, kr = 1.0, 0.02, 0.005
    a_late = laws.reversible_first_order(np.array([1e5]), a0, kf, kr)[0]
    assert (a0 - a_late) / a_late == pytest.approx(kf / kr, rel=1e-9)  # K = [B]eq/[A]eq = kf/kr


@pytest.mark.parametrize("text, law", [
    ("A -> B : k", lambda t: laws.first_order(t, 1.0, 0.01)),
    # mechanism rate r = k[A]^2 with d[A]/dt = -2r, so the law's k is twice the step's
    ("2 A -> P : k", lambda t: laws.second_order(t, 1.0, 2 * 0.01)),
    ("A + B -> C : k", lambda t: laws.second_order_mixed(t, 1.0, 1.6, 0.01)),
    ("A <=> B : k, kr", lambda t: laws.reversible_first_order(t, 1.0, 0.01, 0.004)),
    ("A -> B : k; B -> C : k2", lambda t: laws.consecutive_first_order(t, 1.0, 0.01, 0.023)[0]),
])
def test_mechanism_agrees_with_integrated_law(text, law):
    mech = parse_mechanism(text)
    k = {"k": 0.01, "kr": 0.004, "k2": 0.023}
    initial = {"A": 1.0, "B": 1.6} if "A + B" in text else {"A": 1.0}
    c = mech.simulate(T, initial, {n: k[n] for n in mech.rate_names}, atol=1e-16, **TIGHT)
    assert np.allclose(c[0], law(T), rtol=1e-6, atol=0)


def test_consecutive_all_species_agree_with_mechanism():
    mech = parse_mechanism("A -> B\nB -> C")
    c = mech.simulate(T, {"A": 1.0}, {"k1": 0.01, "k2": 0.023}, atol=1e-16, **TIGHT)
    for row, expected in zip(c, laws.consecutive_first_order(T, 1.0, 0.01, 0.023)):
        assert np.allclose(row[1:], expected[1:], rtol=1e-6, atol=0)


def test_jacobian_is_the_derivative_of_the_rates():
    mech = parse_mechanism("A + B -> C; 2 C <=> D; D -> A")
    k = np.array([0.3, 0.2, 0.05, 0.1])
    c = np.array([0.4, 0.7, 0.2, 0.1])
    numeric = np.empty((4, 4))
    for j in range(4):
        h = 1e-7
        up, down = c.copy(), c.copy()
        up[j] += h
        down[j] -= h
        numeric[:, j] = (mech.derivatives(up, k) - mech.derivatives(down, k)) / (2 * h)
    assert np.allclose(mech.jacobian(c, k), numeric, rtol=1e-6, atol=1e-10)


def test_parser_names_and_conservation():
    mech = parse_mechanism("A + B -> C ; 2 C <=> D : kd, kdr  # dimer\nD -> E")
    assert mech.species == ("A", "B", "C", "D", "E")
    assert mech.rate_names == ("k1", "kd", "kdr", "k3")
    assert mech.rate_unit("k1") == "L mol^-1 s^-1" and mech.rate_unit("k3") == "s^-1"
    relations = parse_mechanism("A + B -> C").conservation_relations()
    assert sorted(relations) == ["A + C = const", "B + C = const"]
    assert parse_mechanism("2 A -> B").conservation_relations() == ["A + 2 B = const"]
    assert parse_mechanism("A <=> B; B -> C").conservation_relations() == ["A + B + C = const"]
    # every relation really is conserved along a trajectory
    c = mech.simulate(T, {"A": 1.0, "B": 0.5}, dict(zip(mech.rate_names, [0.01, 0.02, 0.003, 0.004])))
    for text in mech.conservation_relations():
        weights = {}
        for term in text.replace(" = const", "").split(" + "):
            parts = term.split()
            weights[parts[-1]] = int(parts[0]) if len(parts) == 2 else 1
        total = sum(w * c[mech.species.index(s)] for s, w in weights.items())
        assert np.ptp(total) < 1e-6


@pytest.mark.parametrize("text, fragment", [
    ("A -> B; A -> B", "duplicates"),
    ("A -> B; B <=> A", "duplicates"),
    ("A -> B : k; B -> C : k", "already used"),
    ("A + -> B", "'A + -> B'"),
    ("A => B", "exactly one arrow"),
    ("A -> B -> C", "exactly one arrow"),
    ("A <=> B : kf", "reversible"),
    ("2.5 A -> B", "2.5 A"),
    ("__import__('os') -> B", "cannot read"),
    ("", "empty"),
])
def test_parser_errors_point_at_the_text(text, fragment):
    with pytest.raises(ConfigError) as error:
        parse_mechanism(text)
    assert fragment in str(error.value)


def test_unknown_species_is_a_config_error():
    with pytest.raises(ConfigError, match="'X' does not appear"):
        mechanism_model("A -> B", observed=("A", "X"))
    with pytest.raises(ConfigError, match="'Q'"):
        mechanism_model("A -> B", observed=("A",), initial={"Q": 1.0})


def test_registry_knows_every_model():
    assert set(laws.MODELS) == {"zero", "first", "second", "second-mixed", "pseudo-first", "nth",
                                "reversible-first", "consecutive"}
    for name in laws.MODELS:
        for observed in ("reactant", "product"):
            model = laws.get_model(name, observed)
            assert all(p.unit is not None for p in model.params)
            y = np.vstack([np.linspace(1.0, 0.2, 11)] * len(model.species))
            guess = model.guess(T[:11], y)
            assert set(model.param_names) <= set(guess)
    assert laws.get_model("first", "product").param_names == ("k", "c_final")
    assert {p.name: p.unit for p in laws.get_model("second").params}["k"] == "L mol^-1 s^-1"
    with pytest.raises(ConfigError, match="unknown model"):
        laws.get_model("third")


def test_late_times_stay_finite_whichever_step_is_faster():
    # Analytic: [B] = [A]0 k1/(k2 - k1) (e^{-k1 t} - e^{-k2 t}) (textbook consecutive form);
    # with k1 >> k2 and t long, exp((k1 - k2) t) would overflow in the naive rewrite.
    t = np.array([0.0, 1.0, 10.0, 100.0, 800.0, 2000.0])
    a0, k1, k2 = 1.0, 1.0, 0.01
    with np.errstate(over="raise", invalid="raise", divide="raise"):
        a, b, c = laws.consecutive_first_order(t, a0, k1, k2)
    textbook = a0 * k1 / (k2 - k1) * (np.exp(-k1 * t) - np.exp(-k2 * t))
    assert np.allclose(b, textbook, rtol=1e-12, atol=0)
    assert np.allclose(a + b + c, a0, rtol=1e-14)
    # the same through the mechanism path (solve_ivp), long after A is gone
    mech = parse_mechanism("A -> B : k1; B -> C : k2")
    sim = mech.simulate(t, {"A": a0}, {"k1": k1, "k2": k2}, atol=1e-16, **TIGHT)
    assert np.allclose(sim[1][1:], b[1:], rtol=1e-6, atol=0)
    # A + B -> P with B in excess: the textbook form a0 D/(b0 e^{D k t} - a0) tends to 0
    with np.errstate(over="ignore"):
        textbook_a = 1.0 * 1.0 / (2.0 * np.exp(1.0 * t) - 1.0)
    with np.errstate(over="raise", invalid="raise", divide="raise"):
        mixed = laws.second_order_mixed(t, 1.0, 2.0, 1.0)
    assert np.allclose(mixed, textbook_a, rtol=1e-12, atol=1e-300)


def test_mechanism_initial_concentrations_refer_to_time_zero():
    # Times are seconds from the reaction start: c0_A is [A] at t = 0 even when the first
    # observation is later, as for the integrated laws (analytic first order).
    model = mechanism_model("A -> B : k", observed=("A",))
    t = np.array([50.0, 100.0, 200.0])
    curve = model.predict(t, {"k": 0.01, "c0_A": 1.0, "c0_B": 0.0})[0]
    assert np.allclose(curve, laws.first_order(t, 1.0, 0.01), rtol=1e-6)
