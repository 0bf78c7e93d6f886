"""The demo campaign: invented data for ``configs/demo_campaign.toml``.

An invented coupling, quorbane (Q) + velamine (V) -> quorvelide (P), catalysed by the
invented complex zorphos (Z), all at 25 °C.  The generator integrates

    r = k [Q]^a [V]^b [Z]^c,   d[Q]/dt = d[V]/dt = -r,  d[P]/dt = +r,  d[Z]/dt = -k_d [Z]

with ``scipy.integrate.solve_ivp`` (LSODA, rtol 1e-10) and adds Gaussian noise of
``NOISE_MOL_PER_L`` from a seeded generator (:data:`SEED`), so the files are the same on
every machine.  Six runs vary the excess of V and the catalyst loading (``k_d = 0``); the
seventh (``R7 deactivating``) uses a catalyst batch that loses activity with a half-life
of :data:`DEACTIVATION_HALF_LIFE_S`.  It shares its excess and loading with ``R3``, so the
same-excess analysis can compare the two.

Every compound here is invented; the numbers were chosen, not measured.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

SEED = 20260313
NOISE_MOL_PER_L = 0.0008
TRUTH = {"k": 0.06, "order_quorbane": 1.0, "order_velamine": 0.5, "order_zorphos": 1.0}
TEMPERATURE_C = 25.0
DEACTIVATION_HALF_LIFE_S = 3600.0
DURATION_S = 7200.0
N_POINTS = 144

#: label -> ([Q]0, [V]0, [Z] loading) in mol/L, and whether the catalyst deactivates
DESIGN = {
    "R1 standard": (0.10, 0.15, 0.010, False),
    "R2 same excess": (0.05, 0.10, 0.010, False),
    "R3 more velamine": (0.10, 0.30, 0.010, False),
    "R4 more catalyst": (0.10, 0.15, 0.020, False),
    "R5 large excess": (0.10, 0.50, 0.005, False),
    "R6 more quorbane": (0.15, 0.20, 0.015, False),
    "R7 deactivating": (0.15, 0.35, 0.010, True),
}


def file_name(label: str) -> str:
    return label.split()[0].lower() + ".csv"


def simulate(label: str, rng: np.random.Generator) -> dict:
    """One run's times and noisy [Q], [P] (mol/L), as the columns of its series table."""
    from scipy.integrate import solve_ivp

    q0, v0, z0, deactivates = DESIGN[label]
    kd = math.log(2.0) / DEACTIVATION_HALF_LIFE_S if deactivates else 0.0
    k, a, b, c = (TRUTH[name] for name in ("k", "order_quorbane", "order_velamine", "order_zorphos"))

    def rhs(_t, y):
        q, v, _p, z = np.maximum(y, 0.0)
        rate = k * q**a * v**b * z**c
        return [-rate, -rate, rate, -kd * z]

    t = np.linspace(DURATION_S / N_POINTS, DURATION_S, N_POINTS)
    solution = solve_ivp(rhs, (0.0, DURATION_S), [q0, v0, 0.0, z0], t_eval=t, method="LSODA",
                         rtol=1e-10, atol=1e-14)
    if not solution.success:  # pragma: no cover - the law above is smooth
        raise RuntimeError(solution.message)
    q = solution.y[0] + rng.normal(0.0, NOISE_MOL_PER_L, t.size)
    p = solution.y[2] + rng.normal(0.0, NOISE_MOL_PER_L, t.size)
    return {"time_s": t, "quorbane_concentration": q, "quorbane_concentration_sigma": np.full(t.size, NOISE_MOL_PER_L),
            "quorvelide_concentration": p, "quorvelide_concentration_sigma": np.full(t.size, NOISE_MOL_PER_L)}


def write_series(folder: str | Path) -> list[Path]:
    """Write the seven series tables into ``folder`` (created); returns their paths."""
    from kinetics.atomic import guard_output, write_atomic

    folder = Path(folder)
    with guard_output(folder):
        folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(SEED)
    written = []
    for label in DESIGN:
        columns = simulate(label, rng)
        names = list(columns)
        lines = [f"# demo campaign run {label!r} (invented data, kinetics.campaign.demo, seed {SEED})",
                 ",".join(names)]
        for i in range(columns["time_s"].size):
            lines.append(",".join(f"{columns[name][i]:.6g}" for name in names))
        path = folder / file_name(label)
        write_atomic(path, "\n".join(lines) + "\n")
        written.append(path)
    return written


def config_text(series_folder: str = "../demo_series/campaign") -> str:
    """The demo campaign config (``configs/demo_campaign.toml``), series paths relative to it."""
    lines = [
        "# Demo campaign: the invented coupling quorbane + velamine -> quorvelide, catalysed by the",
        "# invented complex zorphos, seven runs at 25 °C (kinetics.campaign.demo wrote the tables).",
        "# Run it with:  kinetics run configs/demo_campaign.toml --out out/campaign",
        "",
        "[campaign]",
        'name = "demo campaign: quorbane + velamine"',
        'reactant = "quorbane"             # rate = -d[quorbane]/dt',
        'catalyst = "zorphos"              # its concentration is each run\'s catalyst_mol_per_l',
        'orders = { quorbane = "free", velamine = "free", zorphos = "free" }',
        "stoichiometry = { quorbane = -1, velamine = -1, quorvelide = 1 }",
        'scheduler = "local"               # local Dask cluster; "none" in this process; or "tcp://host:8786"',
        "",
    ]
    for label, (q0, v0, z0, _) in DESIGN.items():
        lines += ["[[runs]]", f'label = "{label}"', f'table = "{series_folder}/{file_name(label)}"',
                  f"temperature_c = {TEMPERATURE_C:g}", f"catalyst_mol_per_l = {z0:g}",
                  f"initial = {{ quorbane = {q0:g}, velamine = {v0:g}, quorvelide = 0 }}", ""]
    return "\n".join(lines)
