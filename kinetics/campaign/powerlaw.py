"""The power rate law of a campaign and its integration: ``rate = k prod_i [i]^{n_i}``.

Formula and assumptions
-----------------------
``r = k [A]^a [B]^b [cat]^c ...`` (the rate of reaction, mol L^-1 s^-1) with
``d[i]/dt = nu_i r``: the reference reactant A has ``nu_A = -1`` (so ``r = -d[A]/dt``),
a co-reactant consumed with A has ``nu_B < 0`` (``-1`` for 1:1), a product ``nu_P > 0``,
a catalyst ``nu = 0`` (its concentration, the loading, stays constant).  Optionally an
inhibition denominator ``r = k prod [i]^{n_i} / (1 + sum_j K_j [j])`` for species ``j`` that
bind the catalyst (product inhibition: ``j = P``, ``K_P`` in L mol^-1).  The orders are
empirical (any real number); the law assumes one rate-determining process with no
change of mechanism over the run, an isothermal run, and no reverse reaction.

Integration
-----------
All concentrations follow from one extent ``x`` (mol L^-1): ``[i] = [i]0 + nu_i x``, and
``dx/dt = k_eff f(x)`` with ``k_eff = k prod_{nu=0} [i]^{n_i}`` (the constant factors) and
``f(x) = prod_{nu!=0} ([i]0 + nu_i x)^{n_i}``.  Separating variables,
``k_eff t = G(x) = int_0^x dx'/f(x')``.  With ``w = x_max - x`` (what is left before the
limiting reactant runs out) and ``s = ln w``, ``G = int_{ln w}^{ln x_max} w'/f(x_max - w') ds``
is a smooth integral; it is computed with 4-point Gauss-Legendre on a fixed grid of
:data:`N_INTERVALS` steps in ``s`` (fine over the first 99.97 % of the extent) reaching down
to ``w = 1e-12 x_max``, and ``x(t)`` is
read off by cubic Hermite interpolation of ``s`` against ``G`` (the derivative
``ds/dG = -f/w`` is known exactly).  Relative error ~1e-7 against ``solve_ivp`` at
rtol 1e-10 (tested), and smooth in every parameter, which the fitter's finite-difference
Jacobians need.  A law whose limiting-reactant order is below 1 reaches completion in a
finite time; after it ``x = x_max``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Mapping

import numpy as np

from kinetics.errors import ConfigError, FitError

_DEPTH = math.log(1e12)
# Steps in s = ln w: fine over the first 99.97 % of the extent (where the data are), coarse
# in the far tail.
_OFFSETS = np.concatenate([np.linspace(0.0, 3.0, 121), np.linspace(3.0, 8.0, 61)[1:],
                           np.linspace(8.0, _DEPTH, 41)[1:]])
N_INTERVALS = _OFFSETS.size - 1
_GL_X, _GL_W = np.polynomial.legendre.leggauss(4)


@dataclass(frozen=True)
class PowerLaw:
    """A power rate law ``r = k prod [i]^{n_i}`` with the stoichiometry of the reaction.

    Attributes
    ----------
    orders : Mapping species -> float or None
        The species in the rate law and their orders; None is an order to be fitted.
        The catalyst is the species named :attr:`catalyst`.
    coefficients : Mapping species -> float
        ``nu_i`` per unit of reaction (change of ``[i]`` per mol L^-1 of A consumed).  The
        reference reactant gets ``-1`` whatever is written; species not listed have
        ``nu = 0`` (constant) unless listed in ``orders`` as a co-reactant: give them here.
    reactant : str
        The reference reactant ``A`` (``r = -d[A]/dt``).
    catalyst : str
        Name of the catalyst species (its concentration is the run's catalyst loading).
    inhibitors : Mapping species -> float or None
        Binding constants ``K_j`` (L mol^-1) of the denominator ``1 + sum K_j [j]``; None is
        a constant to be fitted (parameter ``K_<species>``).  Empty: no denominator.
    """

    orders: Mapping = field(default_factory=lambda: {"A": None, "B": None, "cat": None})
    coefficients: Mapping = field(default_factory=lambda: {"A": -1.0, "B": -1.0, "P": 1.0})
    reactant: str = "A"
    catalyst: str = "cat"
    inhibitors: Mapping = field(default_factory=dict)

    def __post_init__(self):
        orders = {}
        for name, order in dict(self.orders).items():
            if order is not None:
                try:
                    order = float(order)
                except (TypeError, ValueError):
                    raise ConfigError(f"orders.{name}", f"{order!r} is not a number",
                                      hint="give a number, or leave the order out to fit it") from None
                if not math.isfinite(order):
                    raise ConfigError(f"orders.{name}", f"order {order!r} is not finite")
            orders[str(name)] = order
        coefficients = {str(k): float(v) for k, v in dict(self.coefficients).items()}
        coefficients[self.reactant] = -1.0
        if self.catalyst in coefficients and coefficients[self.catalyst] != 0:
            raise ConfigError(f"coefficients.{self.catalyst}",
                              "the catalyst is not consumed: its coefficient must be 0")
        coefficients.pop(self.catalyst, None)
        for name in orders:
            if name != self.catalyst and name not in coefficients:
                raise ConfigError(f"coefficients.{name}", f"species {name!r} has an order but no stoichiometric "
                                  "coefficient", hint="give its coefficient (-1 for a reactant consumed 1:1 "
                                  "with A, 0 for an additive that stays constant)")
        inhibitors = {}
        for name, constant in dict(self.inhibitors).items():
            if constant is not None:
                try:
                    constant = float(constant)
                except (TypeError, ValueError):
                    raise ConfigError(f"inhibitors.{name}", f"{constant!r} is not a number") from None
                if not (math.isfinite(constant) and constant >= 0):
                    raise ConfigError(f"inhibitors.{name}", f"binding constant {constant!r} must be finite and >= 0")
            if name == self.catalyst:
                raise ConfigError(f"inhibitors.{name}", "the catalyst cannot inhibit itself in this law")
            inhibitors[str(name)] = constant
        object.__setattr__(self, "orders", MappingProxyType(orders))
        object.__setattr__(self, "coefficients", MappingProxyType(coefficients))
        object.__setattr__(self, "inhibitors", MappingProxyType(inhibitors))

    @property
    def free(self) -> tuple:
        """Species whose order is fitted."""
        return tuple(name for name, order in self.orders.items() if order is None)

    @property
    def free_binding(self) -> tuple:
        """Species whose binding constant is fitted."""
        return tuple(name for name, constant in self.inhibitors.items() if constant is None)

    def with_orders(self, **fixed) -> "PowerLaw":
        """A copy with some orders fixed (``with_orders(A=1, B=0.5)``)."""
        orders = dict(self.orders)
        orders.update(fixed)
        return PowerLaw(orders, dict(self.coefficients), self.reactant, self.catalyst, dict(self.inhibitors))

    def with_inhibitors(self, **constants) -> "PowerLaw":
        """A copy with an inhibition denominator (``with_inhibitors(P=None)`` fits ``K_P``)."""
        return PowerLaw(dict(self.orders), dict(self.coefficients), self.reactant, self.catalyst, constants)

    def describe(self, values: Mapping | None = None) -> str:
        """``rate = k [A]^a [B]^b ...`` with the orders (fitted ones from ``values``)."""
        terms = []
        for name, order in self.orders.items():
            if order is None and values is not None:
                order = values.get(f"order_{name}")
            shown = f"n_{name}" if order is None else f"{order:.3g}"
            terms.append(f"[{name}]^{shown}")
        text = "rate = k " + " ".join(terms)
        if self.inhibitors:
            binding = []
            for name, constant in self.inhibitors.items():
                if constant is None and values is not None:
                    constant = values.get(f"K_{name}")
                binding.append(f"{'K_' + name if constant is None else format(constant, '.3g')} [{name}]")
            text += " / (1 + " + " + ".join(binding) + ")"
        return text

    def k_unit(self, values: Mapping | None = None) -> str:
        """Unit of k for the overall order (fitted orders from ``values``)."""
        from kinetics.rates.laws import k_unit

        total = 0.0
        for name, order in self.orders.items():
            if order is None:
                order = float((values or {}).get(f"order_{name}", float("nan")))
            total += order
        if self.free:
            # fitted orders: the unit follows the fitted overall order n
            shown = f"{total:.3g}" if math.isfinite(total) else "n"
            return f"(mol L^-1)^(1-n) s^-1, n = {shown}"
        return k_unit(total)


def extent(time_s, k_eff: float, initial: np.ndarray, orders: np.ndarray, nu: np.ndarray,
           binding: np.ndarray | None = None, binding_offset: float = 0.0) -> np.ndarray:
    """Extent ``x(t)`` of ``dx/dt = k_eff prod_i c_i^{n_i} / (1 + offset + sum_i K_i c_i)``,
    ``c_i = c0_i + nu_i x``, ``x(0) = 0``.

    ``initial``, ``orders``, ``nu`` and ``binding`` (``K_i``, zeros for none) are arrays over
    the species that change (``nu != 0``); constant factors belong in ``k_eff`` and, for the
    denominator, in ``binding_offset``.  See the module docstring for the method.
    """
    t = np.asarray(time_s, dtype=float)
    consumed = nu < 0
    if not consumed.any():
        raise FitError("the rate law consumes no species: give the reactant a negative coefficient")
    x_max = float(np.min(initial[consumed] / -nu[consumed]))
    if not (x_max > 0 and k_eff > 0 and np.isfinite(k_eff)):
        return np.zeros_like(t)

    def integrand(s):
        w = np.exp(s)
        c = np.maximum(initial[:, None] + nu[:, None] * (x_max - w[None, :]), 0.0)
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            f = np.prod(c ** orders[:, None], axis=0)
            if binding is not None:
                f = f / (1.0 + binding_offset + binding @ c)
            return w / f

    h = np.diff(_OFFSETS)
    s_nodes = math.log(x_max) - _OFFSETS
    mid = s_nodes[:-1] - 0.5 * h
    quad = integrand((mid[:, None] + 0.5 * h[:, None] * _GL_X[None, :]).ravel()).reshape(N_INTERVALS, -1)
    pieces = 0.5 * h * (quad @ _GL_W)
    g_nodes = np.concatenate([[0.0], np.cumsum(pieces)])
    slope = integrand(s_nodes)  # dG/ds = -slope
    if not (np.all(np.isfinite(g_nodes)) and np.all(np.isfinite(slope))):
        raise FitError("the rate law cannot be integrated with these orders and concentrations "
                       "(a species with a positive order starts at zero, or a negative order meets a "
                       "species that runs out)")
    tau = k_eff * t
    j = np.clip(np.searchsorted(g_nodes, tau, side="right") - 1, 0, N_INTERVALS - 1)
    g0, g1 = g_nodes[j], g_nodes[j + 1]
    dg = g1 - g0
    u = np.clip((tau - g0) / np.where(dg > 0, dg, 1.0), 0.0, 1.0)
    # s as a cubic Hermite function of G on [g0, g1]; ds/dG = -1/slope.
    m0, m1 = -dg / slope[j], -dg / slope[j + 1]
    h00, h10 = (1 + 2 * u) * (1 - u) ** 2, u * (1 - u) ** 2
    h01, h11 = u * u * (3 - 2 * u), u * u * (u - 1)
    s = h00 * s_nodes[j] + h10 * m0 + h01 * s_nodes[j + 1] + h11 * m1
    x = x_max - np.exp(s)
    x = np.where(tau <= 0.0, 0.0, np.clip(x, 0.0, x_max))
    return np.where(tau >= g_nodes[-1], x_max, x)


def course(law: PowerLaw, time_s, k: float, order_values: Mapping, initial: Mapping,
           catalyst_mol_per_l: float | None, binding_values: Mapping | None = None) -> dict:
    """Concentrations of every species with a coefficient, ``{species: array}``, mol L^-1.

    ``order_values`` gives the orders (fixed ones are taken from the law when missing);
    ``initial`` the concentrations at ``t = 0`` of the species with a coefficient (missing
    ones start at 0); ``binding_values`` the fitted binding constants of the inhibitors.
    """
    orders = {name: (order if order is not None else float(order_values[name]))
              for name, order in law.orders.items()}
    for name in law.orders:
        if name in order_values:
            orders[name] = float(order_values[name])
    k_eff = float(k)
    changing = []
    for name, order in orders.items():
        if name == law.catalyst:
            if catalyst_mol_per_l is None:
                if order != 0:
                    raise ConfigError("catalyst_mol_per_l", "the rate law has an order in the catalyst but "
                                      "the run gives no catalyst loading", hint="give catalyst_mol_per_l")
                continue
            k_eff *= float(catalyst_mol_per_l) ** order if catalyst_mol_per_l > 0 else (0.0 if order > 0 else 1.0)
        elif law.coefficients.get(name, 0.0) == 0.0:
            k_eff *= float(initial.get(name, 0.0)) ** order
        else:
            changing.append(name)
    species = [name for name, nu in law.coefficients.items() if nu != 0]
    for name in law.orders:
        if name != law.catalyst and name not in species and law.coefficients.get(name, 0.0) != 0:
            species.append(name)
    c0 = np.array([float(initial.get(name, 0.0)) for name in species])
    nu = np.array([law.coefficients[name] for name in species])
    n = np.array([orders.get(name, 0.0) for name in species])
    binding, offset = None, 0.0
    if law.inhibitors:
        constants = {name: (value if value is not None else float((binding_values or {})[name]))
                     for name, value in law.inhibitors.items()}
        binding = np.array([constants.get(name, 0.0) for name in species])
        offset = sum(value * float(initial.get(name, 0.0)) for name, value in constants.items()
                     if name not in species)
    x = extent(time_s, k_eff, c0, n, nu, binding, offset)
    result = {name: c0[i] + nu[i] * x for i, name in enumerate(species)}
    if law.catalyst in law.orders and catalyst_mol_per_l is not None:
        result[law.catalyst] = np.full(np.shape(x), float(catalyst_mol_per_l))
    return result
