"""The campaign generator the campaign tests share (importable; its own check below).

Written for these tests from the rate law itself: ``scipy.integrate.solve_ivp`` (LSODA,
rtol 1e-10) of

    r = k [A]^a [B]^b [cat]^c / (1 + K_I [P]),   d[A]/dt = d[B]/dt = -r,  d[P]/dt = +r,
    d[cat]/dt = -k_d [cat]   (first-order catalyst deactivation),

with Gaussian noise from a seeded ``numpy.random.Generator``.  It shares no code with
``kinetics.simulate`` nor with the integrator under test (``kinetics.campaign.powerlaw``).
"""

from __future__ import annotations

import numpy as np
from scipy.integrate import solve_ivp

from kinetics.campaign import CampaignRun

#: The campaign the coverage and recovery tests use: (A0, B0, cat) in mol/L.  It varies
#: A, B (the excess) and the loading, so every order is pinned by the design.
DESIGN = ((0.10, 0.15, 0.010), (0.10, 0.30, 0.010), (0.10, 0.15, 0.020),
          (0.05, 0.20, 0.010), (0.10, 0.50, 0.005), (0.15, 0.20, 0.015))
TRUTH = {"k": 0.2, "a": 1.0, "b": 0.5, "c": 1.0}


def exact_course(time_s, a0, b0, cat, *, k, a, b, c, kd=0.0, ki=0.0, p0=0.0):
    """[A], [B], [P], [cat] at ``time_s`` (rows), integrated from t = 0."""
    def rhs(_t, y):
        conc_a, conc_b, conc_p, conc_cat = np.maximum(y, 0.0)
        rate = k * conc_a**a * conc_b**b * conc_cat**c / (1.0 + ki * conc_p)
        return [-rate, -rate, rate, -kd * conc_cat]

    t = np.asarray(time_s, dtype=float)
    solution = solve_ivp(rhs, (0.0, float(t[-1])), [a0, b0, p0, cat], t_eval=t, method="LSODA",
                         rtol=1e-10, atol=1e-14)
    assert solution.success, solution.message
    return solution.y


def simulate_run(rng, label, a0, b0, cat, *, k=TRUTH["k"], a=TRUTH["a"], b=TRUTH["b"], c=TRUTH["c"],
                 kd=0.0, ki=0.0, p0=0.0, t_end_s=3600.0, n=20, noise=0.001, observe=("A", "B"),
                 temperature_kelvin=298.15):
    """One noisy run; ``observe`` picks the measured species (sigma given for each)."""
    t = np.linspace(t_end_s / n, t_end_s, n)
    exact = exact_course(t, a0, b0, cat, k=k, a=a, b=b, c=c, kd=kd, ki=ki, p0=p0)
    rows = {"A": 0, "B": 1, "P": 2}
    observed = {s: exact[rows[s]] + rng.normal(0.0, noise, n) for s in observe}
    initial = {"A": a0, "B": b0}
    if p0:
        initial["P"] = p0
    return CampaignRun(label, t, observed, {s: np.full(n, noise) for s in observe}, initial, cat,
                       temperature_kelvin)


def simulate_campaign(rng, design=DESIGN, **options):
    return [simulate_run(rng, f"run{i + 1}", *d, **options) for i, d in enumerate(design)]


def test_generator_conserves_mass_and_follows_the_law():
    # [A] - [B] is conserved (1:1 consumption) and the initial slope is the rate law's.
    t = np.linspace(1e-3, 100.0, 50)
    conc_a, conc_b, conc_p, _ = exact_course(t, 0.1, 0.15, 0.01, k=0.2, a=1, b=0.5, c=1)
    assert np.allclose(conc_b - conc_a, 0.05, atol=1e-12)
    assert np.allclose(conc_a + conc_p, 0.1, atol=1e-12)
    slope = (conc_p[1] - conc_p[0]) / (t[1] - t[0])
    assert slope == __import__("pytest").approx(0.2 * 0.1 * 0.15**0.5 * 0.01, rel=0.02)
