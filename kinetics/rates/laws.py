"""Integrated rate laws and the registry of fit models built on them.

Every law is a small pure function of ``time_s`` (shape ``(n,)``, seconds from the start
of the reaction) and its parameters; it returns concentrations in mol L^-1 with the shape
of ``time_s``.  Each docstring gives the integrated form and the assumptions.

Rate convention: for a step ``2 A -> P`` the laws here use the *rate of loss of A*,
``-d[A]/dt = k [A]^2`` (the usual textbook form, half-life ``1/(k [A]0)``).  The mass-action
mechanisms in :mod:`kinetics.rates.mechanism` use the IUPAC rate of reaction
``r = k [A]^2`` with ``d[A]/dt = -2 r``; so ``k_law = 2 k_mechanism`` for that one case.

The registry (:data:`MODELS`, :func:`get_model`) turns a law into a :class:`RateModel`:
parameter names, units, bounds, which species it predicts and data-driven starting values.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Callable, Mapping

import numpy as np

from kinetics.errors import ConfigError

CONC_UNIT = "mol L^-1"


def _phi(x):
    """``expm1(x)/x`` with the removable singularity at 0 filled (value 1)."""
    x = np.asarray(x, dtype=float)
    small = np.abs(x) < 1e-8
    safe = np.where(small, 1.0, x)
    return np.where(small, 1.0 + 0.5 * x + x * x / 6.0, np.expm1(safe) / safe)


# ---------------------------------------------------------------- the laws
def zero_order(time_s, c0, k):
    """Zero order: ``[A](t) = max([A]0 - k t, 0)``.

    Assumes ``-d[A]/dt = k`` while A lasts (a saturated catalyst or surface); the reactant
    is used up at ``t = [A]0/k`` and stays at zero.  ``k`` in mol L^-1 s^-1.
    """
    t = np.asarray(time_s, dtype=float)
    return np.maximum(c0 - k * t, 0.0)


def first_order(time_s, c0, k):
    """First-order decay of a reactant: ``[A](t) = [A]0 exp(-k t)``.

    Assumes ``-d[A]/dt = k [A]``, irreversible, constant temperature.  ``k`` in s^-1.
    """
    return c0 * np.exp(-k * np.asarray(time_s, dtype=float))


def first_order_formation(time_s, c_final, k):
    """First-order formation of a product: ``[P](t) = c_final (1 - exp(-k t))``.

    Assumes ``A -> P`` first order and irreversible, no P at t = 0, so the plateau
    ``c_final`` equals ``[A]0``.  Computed with ``expm1`` to keep early points exact.
    """
    return -c_final * np.expm1(-k * np.asarray(time_s, dtype=float))


def second_order(time_s, c0, k):
    """Second order in one reactant, ``2 A -> P``: ``[A](t) = [A]0 / (1 + k [A]0 t)``.

    Assumes ``-d[A]/dt = k [A]^2`` (rate of loss of A; see the module note on the factor 2),
    irreversible.  ``k`` in L mol^-1 s^-1; half-life ``1/(k [A]0)``.
    """
    return c0 / (1.0 + k * c0 * np.asarray(time_s, dtype=float))


def second_order_mixed(time_s, a0, b0, k):
    """Second order ``A + B -> P`` with unequal initial concentrations; returns ``[A](t)``.

    Assumes ``-d[A]/dt = -d[B]/dt = k [A][B]``.  With ``D = [B]0 - [A]0`` the integrated form
    ``[A] = [A]0 D / ([B]0 exp(D k t) - [A]0)`` is rewritten as
    ``[A] = [A]0 / (1 + [B]0 k t phi(D k t))`` with ``phi(x) = expm1(x)/x``, which is exact
    and finite as ``D -> 0`` (the equal limit ``[A]0/(1 + k [A]0 t)``).  ``[B] = [A] + D``.
    ``k`` in L mol^-1 s^-1.  When B is in excess (``x = D k t > 0``) the same form is divided
    through by ``exp(x)``, ``[A] = [A]0 e^{-x} / (1 + [A]0 k t phi(-x))``, so that late times
    do not overflow; ``phi`` is only ever evaluated at ``-|x|``.
    """
    t = np.asarray(time_s, dtype=float)
    x = (b0 - a0) * k * t
    x_neg = -np.abs(x)
    phi = _phi(x_neg)
    with np.errstate(over="ignore", invalid="ignore"):
        b_excess = a0 * np.exp(x_neg) / (1.0 + a0 * k * t * phi)
        a_excess = a0 / (1.0 + b0 * k * t * phi)
    return np.where(x > 0, b_excess, a_excess)


def pseudo_first_order(time_s, c0, k_obs):
    """Pseudo-first order: ``[A](t) = [A]0 exp(-k_obs t)`` with B in large excess.

    Assumes ``-d[A]/dt = k2 [A][B]`` with ``[B] ~ [B]0`` constant, so ``k_obs = k2 [B]0``;
    the second-order constant is recovered as ``k2 = k_obs / [B]0``.
    """
    return first_order(time_s, c0, k_obs)


def nth_order(time_s, c0, k, n):
    """Order ``n`` in one reactant: ``[A] = [A]0 (1 + (n-1) k [A]0^(n-1) t)^(1/(1-n))``.

    Assumes ``-d[A]/dt = k [A]^n``.  Evaluated as ``[A]0 exp(-u log1p(e u)/(e u))`` with
    ``e = n - 1`` and ``u = k [A]0^(n-1) t``, whose limit at ``n = 1`` is ``exp(-k t)``
    (a series is used for tiny ``e u``).  For ``n < 1`` the reactant runs out in finite time
    and stays at zero.  ``k`` in (mol L^-1)^(1-n) s^-1.
    """
    t = np.asarray(time_s, dtype=float)
    eps = n - 1.0
    u = k * np.power(c0, eps) * t
    z = eps * u
    exhausted = z <= -1.0
    z_safe = np.where(exhausted, 0.0, z)
    small = np.abs(z_safe) < 1e-6
    ratio = np.where(small, 1.0 - z_safe / 2.0 + z_safe**2 / 3.0,
                     np.log1p(z_safe) / np.where(small, 1.0, z_safe))
    return np.where(exhausted, 0.0, c0 * np.exp(-u * ratio))


def reversible_first_order(time_s, a0, k_f, k_r, b0=0.0):
    """Reversible first order ``A <=> B``; returns ``[A](t)``.

    ``[A] = [A]eq + ([A]0 - [A]eq) exp(-(k_f + k_r) t)`` with
    ``[A]eq = k_r ([A]0 + [B]0) / (k_f + k_r)``; ``[B] = [A]0 + [B]0 - [A]``.  Assumes both
    directions first order; the equilibrium constant is ``K = k_f / k_r = [B]eq/[A]eq``.
    """
    t = np.asarray(time_s, dtype=float)
    total = a0 + b0
    k_sum = k_f + k_r
    a_eq = k_r * total / k_sum
    return a_eq + (a0 - a_eq) * np.exp(-k_sum * t)


def consecutive_first_order(time_s, a0, k1, k2):
    """Consecutive first-order steps ``A -> B -> C``; returns ``([A], [B], [C])``.

    ``[A] = [A]0 e^{-k1 t}``; ``[B] = [A]0 k1/(k2 - k1) (e^{-k1 t} - e^{-k2 t})``, written as
    ``[A]0 k1 t e^{-k_min t} phi(-|k2 - k1| t)`` with ``phi(x) = expm1(x)/x`` and
    ``k_min = min(k1, k2)``: exact, finite at late times whichever step is faster, and the
    limit ``k1 = k2`` (``[A]0 k t e^{-k t}``) needs no special case; ``[C] = [A]0 - [A] - [B]``.
    Assumes first-order irreversible steps and no B or C at t = 0.  B peaks at
    ``t = ln(k1/k2)/(k1 - k2)``.  ``k1``, ``k2`` in s^-1.
    """
    t = np.asarray(time_s, dtype=float)
    a = a0 * np.exp(-k1 * t)
    b = a0 * k1 * t * np.exp(-min(k1, k2) * t) * _phi(-abs(k2 - k1) * t)
    c = a0 - a - b
    return a, b, c


def k_unit(order: float) -> str:
    """Unit of a rate constant of overall ``order`` with concentrations in mol L^-1."""
    if order == 1:
        return "s^-1"
    if order == 0:
        return "mol L^-1 s^-1"
    if float(order).is_integer() and order > 1:
        power = int(order) - 1
        return "L mol^-1 s^-1" if power == 1 else f"L^{power} mol^-{power} s^-1"
    return "(mol L^-1)^(1-n) s^-1"


# ---------------------------------------------------------------- the registry
@dataclass(frozen=True)
class ParamSpec:
    """One model parameter: name, unit, bounds, and whether it enters the model linearly."""

    name: str
    unit: str
    lower: float = -np.inf
    upper: float = np.inf
    linear: bool = False
    vary: bool = True


@dataclass(frozen=True)
class RateModel:
    """A law ready to fit: ``predict(time_s, values) -> (n_species, n_t)`` array.

    Attributes
    ----------
    name : str
        Registry name (``"first"``, ...).
    params : tuple of ParamSpec
        Parameters in order.
    species : tuple of str
        Names of the predicted rows, e.g. ``("A",)`` or ``("A", "B", "C")``.
    predict : callable
        ``predict(time_s (n,), values: Mapping[str, float]) -> ndarray (len(species), n)``.
    guess : callable
        ``guess(time_s (n,), y (len(species), n)) -> dict`` of starting values.
    half_life : callable or None
        ``half_life(values) -> seconds`` where a closed form exists.
    reactant : str or None
        The species whose conversion a forecast refers to (None: use the product row).
    description : str
        One line for reports.
    """

    name: str
    params: tuple
    species: tuple
    predict: Callable
    guess: Callable
    half_life: Callable | None = None
    reactant: str | None = None
    description: str = ""
    order: float | None = None
    extra: Mapping = field(default_factory=dict)

    @property
    def param_names(self) -> tuple:
        return tuple(p.name for p in self.params)


def _span(time_s):
    t = np.asarray(time_s, dtype=float)
    return max(float(t.max() - t.min()), 1e-12)


def _k_from_decay(time_s, y_row, order=1, c_scale=1.0):
    """Rough k from the time by which a curve has moved half way (common practice)."""
    t = np.asarray(time_s, dtype=float)
    y = np.asarray(y_row, dtype=float)
    start, end = y[0], y[-1]
    if not np.isfinite(start - end) or start == end:
        return 1.0 / _span(t)
    half = 0.5 * (start + end)
    crossed = np.nonzero((y - half) * np.sign(start - end) <= 0)[0]
    t_half = t[crossed[0]] - t[0] if crossed.size else _span(t)
    t_half = max(t_half, _span(t) / (10 * len(t)))
    # The curve may still be far from its end: treat the observed halfway time as ~1 half-life.
    k = math.log(2.0) / t_half
    if order == 2:
        k /= max(abs(c_scale), 1e-300)
    elif order == 0:
        k = abs(start - end) / _span(t)
    return k


def _row(y, index=0):
    return np.asarray(y, dtype=float)[index]


def _first_reactant():
    def predict(t, v):
        return first_order(t, v["c0"], v["k"])[None, :]

    def guess(t, y):
        r = _row(y)
        return {"c0": float(r[0]) or float(np.max(np.abs(r))), "k": _k_from_decay(t, r)}

    return RateModel(
        "first", (ParamSpec("c0", CONC_UNIT, 0.0, np.inf, linear=True), ParamSpec("k", "s^-1", 0.0)),
        ("A",), predict, guess, half_life=lambda v: math.log(2.0) / v["k"], reactant="A",
        description="first order, A -> P, reactant observed: c0 exp(-k t)", order=1)


def _first_product():
    def predict(t, v):
        return first_order_formation(t, v["c_final"], v["k"])[None, :]

    def guess(t, y):
        r = _row(y)
        c_final = float(np.max(r)) if np.max(r) > 0 else 1.0
        return {"c_final": c_final, "k": _k_from_decay(t, r)}

    return RateModel(
        "first", (ParamSpec("k", "s^-1", 0.0), ParamSpec("c_final", CONC_UNIT, 0.0, np.inf, linear=True)),
        ("P",), predict, guess, half_life=lambda v: math.log(2.0) / v["k"], reactant=None,
        description="first order, A -> P, product observed: c_final (1 - exp(-k t))", order=1)


def _single_reactant(name, law, order, k_name="k", extra_params=(), description=""):
    """A one-reactant law seen through the reactant (``A``) or the product (``P = c0 - A``)."""

    def build(observed):
        amplitude = "c0" if observed == "reactant" else "c_final"
        specs = [ParamSpec(amplitude, CONC_UNIT, 0.0, np.inf, linear=(order == 1)),
                 ParamSpec(k_name, k_unit(order) if order is not None else k_unit(0.5), 0.0)]
        specs.extend(extra_params)

        def predict(t, v):
            a = law(t, v[amplitude], v[k_name], *[v[p.name] for p in extra_params])
            return (a if observed == "reactant" else v[amplitude] - a)[None, :]

        def guess(t, y):
            r = _row(y)
            c_start = float(r[0]) if observed == "reactant" else float(np.max(r))
            c_start = c_start if c_start > 0 else float(np.max(np.abs(r))) or 1.0
            values = {amplitude: c_start,
                      k_name: _k_from_decay(t, r, 1 if order is None else order, c_start)}
            values.update({p.name: 1.0 for p in extra_params})
            return values

        def half_life(v):
            c0 = v[amplitude]
            k = v[k_name]
            if name == "zero":
                return c0 / (2.0 * k)
            if name == "second":
                return 1.0 / (k * c0)
            if name == "nth":
                e = v["n"] - 1.0
                if abs(e) < 1e-9:
                    return math.log(2.0) / k
                return (2.0**e - 1.0) / (e * k * c0**e)
            return math.log(2.0) / k

        species = ("A",) if observed == "reactant" else ("P",)
        model = RateModel(name, tuple(specs), species, predict, guess, half_life=half_life,
                          reactant="A" if observed == "reactant" else None,
                          description=f"{description}, {observed} observed", order=order)
        return model

    return build


def _pseudo_first(observed):
    base = _single_reactant("pseudo-first", pseudo_first_order, 1, k_name="k_obs",
                            description="pseudo-first order, B in excess, k2 = k_obs/[B]0")(observed)
    # b0 is the excess reagent's concentration: known, fixed, used only for k2.
    params = base.params + (ParamSpec("b0", CONC_UNIT, 0.0, np.inf, vary=False),)

    def guess(t, y):
        g = base.guess(t, y)
        g["b0"] = float("nan")
        return g

    return RateModel(base.name, params, base.species, base.predict, guess, base.half_life,
                     base.reactant, base.description, 1,
                     extra={"derived_k2": lambda v: v["k_obs"] / v["b0"]})


def _second_mixed(observed):
    """A + B -> P seen through A (reactant), P (product) or both A and B (two columns)."""
    specs = (ParamSpec("a0", CONC_UNIT, 0.0), ParamSpec("b0", CONC_UNIT, 0.0),
             ParamSpec("k", "L mol^-1 s^-1", 0.0))
    if observed in ("reactant", "product"):
        species = ("A",) if observed == "reactant" else ("P",)
    else:
        species = ("A", "B")

    def predict(t, v):
        a = second_order_mixed(t, v["a0"], v["b0"], v["k"])
        rows = {"A": a, "B": a + (v["b0"] - v["a0"]), "P": v["a0"] - a}
        return np.vstack([rows[s] for s in species])

    def guess(t, y):
        r = _row(y)
        a0 = float(r[0]) if observed != "product" else float(np.max(r))
        a0 = a0 if a0 > 0 else 1.0
        b0 = float(_row(y, 1)[0]) if len(species) > 1 else 2.0 * a0
        return {"a0": a0, "b0": b0, "k": _k_from_decay(t, r, 2, max(a0, b0))}

    def half_life(v):
        a0, b0, k = v["a0"], v["b0"], v["k"]
        if b0 < a0 / 2:
            return float("nan")  # A never reaches half: B runs out first
        delta = b0 - a0
        if abs(delta) < 1e-12 * max(a0, b0):
            return 1.0 / (k * a0)
        return math.log((2.0 * b0 - a0) / b0) / (k * delta)

    return RateModel("second-mixed", specs, species, predict, guess, half_life,
                     reactant="A" if "A" in species else None,
                     description="second order A + B -> P, unequal initial concentrations", order=2)


def _nth(observed):
    base = _single_reactant("nth", nth_order, None, extra_params=(ParamSpec("n", "", -1.0, 5.0),),
                            description="order n in one reactant, n fitted")(observed)

    def guess(t, y):
        g = base.guess(t, y)
        g["n"] = 1.0
        g[base.params[1].name] = _k_from_decay(t, _row(y))
        return g

    return RateModel(base.name, base.params, base.species, base.predict, guess, base.half_life,
                     base.reactant, base.description, None)


def _reversible(observed):
    specs = (ParamSpec("a0", CONC_UNIT, 0.0), ParamSpec("k_f", "s^-1", 0.0),
             ParamSpec("k_r", "s^-1", 0.0), ParamSpec("b0", CONC_UNIT, 0.0, vary=False))
    species = {"reactant": ("A",), "product": ("B",)}.get(observed, ("A", "B"))

    def predict(t, v):
        a = reversible_first_order(t, v["a0"], v["k_f"], v["k_r"], v["b0"])
        rows = {"A": a, "B": v["a0"] + v["b0"] - a}
        return np.vstack([rows[s] for s in species])

    def guess(t, y):
        r = _row(y)
        if species[0] == "A":
            a0, a_end = float(r[0]), float(r[-1])
        else:
            a0 = float(np.max(r)) * 1.5
            a_end = a0 - float(r[-1])
        a0 = a0 if a0 > 0 else 1.0
        k_sum = _k_from_decay(t, r)
        fraction_left = min(max(a_end / a0, 0.05), 0.95)
        return {"a0": a0, "k_f": k_sum * (1 - fraction_left), "k_r": k_sum * fraction_left, "b0": 0.0}

    return RateModel("reversible-first", specs, species, predict, guess,
                     half_life=lambda v: math.log(2.0) / (v["k_f"] + v["k_r"]),
                     reactant="A", description="reversible first order A <=> B (half-life of the "
                     "approach to equilibrium); K = k_f/k_r", order=1,
                     extra={"derived_K": lambda v: v["k_f"] / v["k_r"]})


def _consecutive(observed):
    specs = (ParamSpec("a0", CONC_UNIT, 0.0, linear=True), ParamSpec("k1", "s^-1", 0.0),
             ParamSpec("k2", "s^-1", 0.0))
    species = {"reactant": ("A",), "product": ("C",), "intermediate": ("B",)}.get(observed, ("A", "B", "C"))
    if isinstance(observed, tuple):
        species = observed

    def predict(t, v):
        a, b, c = consecutive_first_order(t, v["a0"], v["k1"], v["k2"])
        rows = {"A": a, "B": b, "C": c}
        return np.vstack([rows[s] for s in species])

    def guess(t, y):
        y = np.asarray(y, dtype=float)
        a0 = float(np.max(y)) if y.size else 1.0
        k = _k_from_decay(t, y[0]) if species[0] == "A" else 3.0 / _span(t)
        return {"a0": a0 if a0 > 0 else 1.0, "k1": k, "k2": 0.5 * k}

    return RateModel("consecutive", specs, species, predict, guess,
                     half_life=lambda v: math.log(2.0) / v["k1"], reactant="A",
                     description="consecutive first order A -> B -> C", order=1)


def _first(observed):
    return _first_reactant() if observed == "reactant" else _first_product()


_BUILDERS = {
    "zero": _single_reactant("zero", zero_order, 0, description="zero order"),
    "first": _first,
    "second": _single_reactant("second", second_order, 2,
                               description="second order, 2 A -> P, -d[A]/dt = k[A]^2 (k = 2 k_IUPAC)"),
    "second-mixed": _second_mixed,
    "pseudo-first": _pseudo_first,
    "nth": _nth,
    "reversible-first": _reversible,
    "consecutive": _consecutive,
}

#: Plain model names accepted by :func:`get_model` and ``kinetics fit --model``.
MODELS: tuple = tuple(_BUILDERS)

#: Species names each model can be asked for (``observed`` may also be a tuple of these).
SPECIES: dict = {
    "zero": ("A", "P"), "first": ("A", "P"), "second": ("A", "P"), "pseudo-first": ("A", "P"),
    "nth": ("A", "P"), "second-mixed": ("A", "B", "P"), "reversible-first": ("A", "B"),
    "consecutive": ("A", "B", "C"),
}


def get_model(name: str, observed="reactant") -> RateModel:
    """The registered law ``name`` as a :class:`RateModel`.

    Parameters
    ----------
    name : str
        One of :data:`MODELS`.
    observed : str or tuple of str
        ``"reactant"`` (default) or ``"product"`` for one observed column; for the
        multi-species laws also a tuple of species names, e.g. ``("A", "B")`` for
        ``second-mixed`` / ``reversible-first`` or ``("A", "B", "C")`` for ``consecutive``.
    """
    if name not in _BUILDERS:
        raise ConfigError("model", f"unknown model {name!r}", hint="choose one of " + ", ".join(MODELS))
    if isinstance(observed, (list, tuple)):
        observed = tuple(observed)
        unknown = [s for s in observed if s not in SPECIES[name]]
        if unknown:
            raise ConfigError("observed", f"model {name!r} has no species {unknown[0]!r}",
                              hint="species: " + ", ".join(SPECIES[name]))
        if len(observed) == 1:
            single = observed[0]
            if name == "consecutive":
                observed = {"A": "reactant", "B": "intermediate", "C": "product"}[single]
            elif single == "B" and name == "second-mixed":
                raise ConfigError("observed", "second-mixed needs A (or P) observed, or A and B together")
            else:
                observed = "reactant" if single == "A" else "product"
        elif name in ("second-mixed", "reversible-first") and observed == ("A", "B"):
            observed = "both"
        elif name != "consecutive":
            raise ConfigError("observed", f"model {name!r} cannot fit species {observed}",
                              hint="species: " + ", ".join(SPECIES[name]))
    elif observed not in ("reactant", "product", "intermediate", "both"):
        raise ConfigError("observed", f"unknown observation {observed!r}", hint="use reactant or product")
    model = _BUILDERS[name](observed)
    return replace(model, extra={**model.extra, "conversion": _conversion(name)})


def _amplitude(v):
    return v["c0"] if "c0" in v else v["c_final"]


def _conversion(name):
    """``f(time_s, values) -> fraction of the reactant A consumed`` for law ``name``."""
    single = {"zero": lambda t, v: zero_order(t, _amplitude(v), v["k"]),
              "second": lambda t, v: second_order(t, _amplitude(v), v["k"]),
              "nth": lambda t, v: nth_order(t, _amplitude(v), v["k"], v["n"])}
    if name in single:
        return lambda t, v: 1.0 - single[name](t, v) / _amplitude(v)
    if name == "first":
        return lambda t, v: -np.expm1(-v["k"] * np.asarray(t, dtype=float))
    if name == "pseudo-first":
        return lambda t, v: -np.expm1(-v["k_obs"] * np.asarray(t, dtype=float))
    if name == "second-mixed":
        return lambda t, v: 1.0 - second_order_mixed(t, v["a0"], v["b0"], v["k"]) / v["a0"]
    if name == "reversible-first":
        return lambda t, v: 1.0 - reversible_first_order(t, v["a0"], v["k_f"], v["k_r"], v["b0"]) / v["a0"]
    return lambda t, v: -np.expm1(-v["k1"] * np.asarray(t, dtype=float))
