"""The "rates" section of ``kinetics bench`` (registered in :mod:`kinetics.bench`; rows and timer from :mod:`kinetics.benchkit`).

Every task has a floor beside it: a plain scipy script (``curve_fit`` / ``solve_ivp`` +
``least_squares``) doing the same job on the same invented data, so the ratio shows what the
FitResult machinery (validation, polish, intervals, diagnostics) costs on top.
"""

from __future__ import annotations

import numpy as np
from scipy import optimize
from scipy.integrate import solve_ivp

from kinetics.benchkit import BenchRow, time_runs

MECHANISM = "A -> B : k1; B -> C : k2; 2 C -> D : k3"
TRUTH = {"k1": 0.02, "k2": 0.01, "k3": 0.05}


def _first_order_data(rng, n=200):
    t = np.linspace(0.0, 500.0, n)
    return t, 0.8 * np.exp(-0.008 * t) + rng.normal(0.0, 0.01, n)


def _mechanism_data(rng, n=200):
    from kinetics.rates.mechanism import parse_mechanism

    mech = parse_mechanism(MECHANISM)
    t = np.linspace(0.0, 400.0, n)
    c = mech.simulate(t, {"A": 1.0}, TRUTH, rtol=1e-10)
    rows = [mech.species.index("A"), mech.species.index("C")]
    return t, c[rows] + rng.normal(0.0, 0.01, (2, n))


def _floor_first(t, y, bootstrap=0, rng=None):
    f = lambda t, c0, k: c0 * np.exp(-k * t)  # noqa: E731
    p, cov = optimize.curve_fit(f, t, y, p0=(y[0], 1.0 / (t[-1] - t[0])))
    fitted = f(t, *p)
    residual = y - fitted
    samples = []
    for _ in range(bootstrap):
        y_star = fitted + rng.choice(residual, size=residual.size)
        samples.append(optimize.curve_fit(f, t, y_star, p0=p)[0])
    if samples:
        np.percentile(samples, [2.5, 97.5], axis=0)
    return p, cov


def _floor_mechanism(t, y):
    """solve_ivp + least_squares + a profile of every parameter by brentq, plain scipy."""

    def rhs(_t, c, k1, k2, k3):
        a, b, cc, _d = c
        r1, r2, r3 = k1 * a, k2 * b, k3 * cc * cc
        return [-r1, r1 - r2, r2 - 2 * r3, r3]

    def model(theta):
        k1, k2, k3, a0 = theta
        s = solve_ivp(rhs, (t[0], t[-1]), [a0, 0, 0, 0], t_eval=t, args=(k1, k2, k3), method="LSODA",
                      rtol=1e-8, atol=1e-12)
        return s.y[[0, 2]]

    def residual(theta):
        return (model(theta) - y).ravel()

    fit = optimize.least_squares(residual, [0.015, 0.015, 0.03, y[0, 0]], bounds=(0, np.inf), x_scale="jac")
    s_min = 2 * fit.cost
    dof = y.size - 4
    from scipy import stats

    threshold = s_min * (1 + stats.t.ppf(0.975, dof) ** 2 / dof)
    jac = fit.jac
    se = np.sqrt(np.diag(np.linalg.inv(jac.T @ jac)) * s_min / dof)
    for i in range(4):
        others = [j for j in range(4) if j != i]

        def profile(b):
            def sub(x):
                theta = fit.x.copy()
                theta[i] = b
                theta[others] = x
                return residual(theta)
            return 2 * optimize.least_squares(sub, fit.x[others], bounds=(0, np.inf), x_scale="jac").cost - threshold

        for direction in (-1, 1):
            step = 2 * se[i]
            while profile(fit.x[i] + direction * step) < 0:
                step *= 2
            optimize.brentq(profile, fit.x[i], fit.x[i] + direction * step, xtol=1e-6 * se[i])
    return fit.x


def bench_rates(quick: bool):
    from kinetics.rates.fit import fit_law, fit_mechanism, refit
    from kinetics.rates.table import from_arrays

    rng = np.random.default_rng(20261201)
    runs = 3 if quick else 20
    rows = []
    t, y = _first_order_data(rng)
    data = from_arrays(t, y)
    floor, _ = time_runs(lambda: _floor_first(t, y), runs)
    median, p95 = time_runs(lambda: fit_law(data, "first", profile=False), runs)
    rows.append(BenchRow("rates", "first-order fit, 200 points (covariance CI)", median, p95, runs, floor,
                         "floor: scipy curve_fit"))
    median, p95 = time_runs(lambda: fit_law(data, "first"), runs)
    rows.append(BenchRow("rates", "  same + profile intervals of c0 and k", median, p95, runs, floor))

    n_boot = 100 if quick else 500
    boot_runs = 1 if quick else 3
    floor, _ = time_runs(lambda: _floor_first(t, y, n_boot, np.random.default_rng(1)), boot_runs, warmup=0)
    median, p95 = time_runs(lambda: fit_law(data, "first", profile=False, bootstrap=n_boot,
                                            rng=np.random.default_rng(1)), boot_runs, warmup=0)
    rows.append(BenchRow("rates", f"first order + {n_boot}-sample residual bootstrap", median, p95, boot_runs,
                         floor, "floor: curve_fit in a resampling loop"))

    early = fit_law(from_arrays(t[:190], y[:190]), "first", profile=False)
    floor, _ = time_runs(lambda: optimize.curve_fit(lambda t, c0, k: c0 * np.exp(-k * t), t, y,
                                                    p0=(early.values["c0"], early.values["k"])), runs)
    median, p95 = time_runs(lambda: refit(early, data, profile=False), runs)
    rows.append(BenchRow("rates", "warm refit, 190 -> 200 points (live use)", median, p95, runs, floor,
                         "floor: curve_fit from the previous optimum"))

    t_m, y_m = _mechanism_data(rng)
    mech_data = from_arrays(t_m, y_m, columns=("A", "C"))
    mech_runs = 1 if quick else 3
    floor, _ = time_runs(lambda: _floor_mechanism(t_m, y_m), mech_runs, warmup=0)
    options = dict(fixed={"c0_C": 0.0}, start={"k1": 0.015, "k2": 0.015, "k3": 0.03})
    median, p95 = time_runs(lambda: fit_mechanism(mech_data, MECHANISM, **options), mech_runs, warmup=0)
    rows.append(BenchRow("rates", "3-step mechanism, 2 observed x 200 t, + profiles", median, p95, mech_runs,
                         floor, "floor: solve_ivp + least_squares + brentq profiles (no Jacobian)"))
    return rows
