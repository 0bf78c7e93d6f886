"""Mechanisms written as reaction text -> mass-action ODEs, solved with solve_ivp.

Text grammar (one step per line or separated by ``;``; ``#`` starts a comment)::

    step      := side arrow side [":" names]
    side      := term ("+" term)*          term := [integer] species
    arrow     := "->" (irreversible) | "<=>" (reversible)
    names     := name | name "," name       (forward, reverse for "<=>")

Species are identifiers (``A``, ``ester``, ``H2O``).  Unnamed steps get ``k1, k2, ...``
by position; an unnamed reversible step ``i`` gets ``k{i}f`` and ``k{i}r``.  The parser is a
tokenizer plus a few checks; nothing is ever evaluated.

Kinetics: step ``j`` has the mass-action rate ``r_j = k_j prod_i c_i^{nu_ij}`` (IUPAC rate of
reaction, reactant stoichiometric coefficients ``nu``), and ``dc/dt = N r`` with ``N`` the
stoichiometry matrix (products minus reactants).  The Jacobian is analytic.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from fractions import Fraction
from math import lcm

import numpy as np
from scipy.integrate import solve_ivp

from kinetics.errors import ConfigError, FitError

_NAME = r"[A-Za-z][A-Za-z0-9_]*"
_TERM = re.compile(rf"^\s*(?:(\d+)\s*\*?\s*)?({_NAME})\s*$")
_RATE_NAME = re.compile(rf"^{_NAME}$")


@dataclass(frozen=True)
class Step:
    """One written step.  ``reactants``/``products`` are ``((species, coefficient), ...)``."""

    reactants: tuple
    products: tuple
    reversible: bool
    k_names: tuple  # (forward,) or (forward, reverse)
    text: str
    line: int


@dataclass(frozen=True)
class Mechanism:
    """A parsed mechanism.

    Attributes
    ----------
    species : tuple of str
        In order of first appearance; rows of the stoichiometry matrix.
    steps : tuple of Step
    rate_names : tuple of str
        One per elementary (one-directional) reaction, columns of ``stoichiometry``.
    stoichiometry : ndarray, shape (n_species, n_reactions)
        Products minus reactants.
    reactant_orders : ndarray, shape (n_species, n_reactions)
        Reactant coefficients (mass-action orders).
    text : str
    """

    species: tuple
    steps: tuple
    rate_names: tuple
    stoichiometry: np.ndarray
    reactant_orders: np.ndarray
    text: str

    def rate_unit(self, name: str) -> str:
        """Unit of rate constant ``name`` (from its reaction's molecularity)."""
        from kinetics.rates.laws import k_unit

        j = self.rate_names.index(name)
        return k_unit(int(self.reactant_orders[:, j].sum()))

    # ------------------------------------------------------------ kinetics
    def rates(self, c, k):
        """Reaction rates ``r``, shape (n_reactions,), for concentrations ``c`` (n_species,)."""
        c = np.maximum(np.asarray(c, dtype=float), 0.0)  # mass action has no meaning below 0
        return k * np.prod(c[:, None] ** self.reactant_orders, axis=0)

    def derivatives(self, c, k):
        """``dc/dt = N r``, shape (n_species,)."""
        return self.stoichiometry @ self.rates(c, k)

    def jacobian(self, c, k):
        """Analytic ``d(dc/dt)/dc``, shape (n_species, n_species)."""
        c = np.maximum(np.asarray(c, dtype=float), 0.0)
        orders = self.reactant_orders
        n_s, n_r = orders.shape
        drdc = np.zeros((n_r, n_s))
        powers = c[:, None] ** orders
        for l in range(n_s):
            ol = orders[l]
            active = ol > 0
            if not active.any():
                continue
            others = np.prod(np.delete(powers, l, axis=0), axis=0) if n_s > 1 else np.ones(n_r)
            drdc[active, l] = k[active] * ol[active] * c[l] ** (ol[active] - 1) * others[active]
        return self.stoichiometry @ drdc

    def simulate(self, time_s, initial, k, method="LSODA", rtol=1e-8, atol=None):
        """Integrate from ``time_s[0]``; returns concentrations, shape (n_species, n_t).

        Parameters
        ----------
        time_s : array, shape (n_t,)
            Strictly increasing output times, s.  The integration starts at ``time_s[0]``
            where ``initial`` holds.
        initial : mapping species -> mol L^-1 or array (n_species,)
        k : mapping rate name -> value or array (n_reactions,)
        method : str
            A stiff-capable solve_ivp method: "LSODA" (default), "BDF" or "Radau".
        """
        t = np.asarray(time_s, dtype=float)
        c0 = self._vector(initial, self.species, "initial")
        kv = self._vector(k, self.rate_names, "rate constant")
        if atol is None:
            atol = 1e-12 * max(float(np.max(np.abs(c0))), 1e-300)
        if t.size == 1:
            return c0[:, None].copy()
        if not (np.all(np.isfinite(c0)) and np.all(np.isfinite(kv))):
            raise FitError("ODE integration needs finite initial concentrations and rate constants")
        solution = solve_ivp(
            lambda _t, c: self.derivatives(c, kv), (t[0], t[-1]), c0, method=method,
            t_eval=t, jac=lambda _t, c: self.jacobian(c, kv), rtol=rtol, atol=atol)
        if not solution.success:
            raise FitError(f"ODE integration failed: {solution.message}")
        return solution.y

    def _vector(self, values, names, what):
        if isinstance(values, dict):
            unknown = [key for key in values if key not in names]
            if unknown:
                raise ConfigError(what, f"{unknown[0]!r} is not in the mechanism",
                                  hint="known: " + ", ".join(names))
            return np.array([float(values.get(name, 0.0)) for name in names])
        array = np.asarray(values, dtype=float)
        if array.shape != (len(names),):
            raise ConfigError(what, f"expected {len(names)} values, got shape {array.shape}")
        return array

    # ------------------------------------------------------------ structure
    def conservation_relations(self) -> list[str]:
        """Conserved linear combinations (left null space of ``N``) as readable text.

        Example: ``A + B -> C`` gives ``["A + C = const", "B + C = const"]``.
        """
        vectors = _left_null_space_integer(self.stoichiometry)
        texts = []
        for vector in vectors:
            terms = []
            for coefficient, name in zip(vector, self.species):
                if coefficient == 0:
                    continue
                magnitude = abs(coefficient)
                term = name if magnitude == 1 else f"{magnitude} {name}"
                sign = "-" if coefficient < 0 else "+"
                terms.append((sign, term))
            text = ("-" if terms[0][0] == "-" else "") + terms[0][1]
            for sign, term in terms[1:]:
                text += f" {sign} {term}"
            texts.append(f"{text} = const")
        return texts

    def check_species(self, names, what="observed") -> None:
        """ConfigError naming the first of ``names`` that is not a species here."""
        for name in names:
            if name not in self.species:
                raise ConfigError(what, f"species {name!r} does not appear in the mechanism "
                                  f"{self.text!r}", hint="species: " + ", ".join(self.species))


def _left_null_space_integer(matrix) -> list[list[int]]:
    """Integer basis of ``{w : w^T N = 0}`` by exact Gaussian elimination (fractions)."""
    a = [[Fraction(int(round(v))) for v in row] for row in np.asarray(matrix).T]  # N^T
    n_rows = len(a)
    n_cols = len(a[0]) if a else np.asarray(matrix).shape[0]
    pivots = []
    row = 0
    for col in range(n_cols):
        pivot = next((r for r in range(row, n_rows) if a[r][col] != 0), None)
        if pivot is None:
            continue
        a[row], a[pivot] = a[pivot], a[row]
        lead = a[row][col]
        a[row] = [v / lead for v in a[row]]
        for r in range(n_rows):
            if r != row and a[r][col] != 0:
                factor = a[r][col]
                a[r] = [v - factor * p for v, p in zip(a[r], a[row])]
        pivots.append(col)
        row += 1
        if row == n_rows:
            break
    free = [c for c in range(n_cols) if c not in pivots]
    basis = []
    for f in free:
        vector = [Fraction(0)] * n_cols
        vector[f] = Fraction(1)
        for r, p in enumerate(pivots):
            vector[p] = -a[r][f]
        scale = lcm(*[v.denominator for v in vector])
        basis.append([int(v * scale) for v in vector])
    return _prefer_nonnegative(basis)


def _prefer_nonnegative(basis):
    """Same span, but each vector made all-non-negative where a small combination allows.

    Adding multiples of the *other* basis vectors keeps the set a basis; chemists read
    ``A + C = const`` more easily than ``-A + B = const``.
    """
    basis = [np.array(v) for v in basis]
    if len(basis) > 4:
        return [list(map(int, v)) for v in basis]
    from itertools import product

    for i in range(len(basis)):
        others = [basis[j] for j in range(len(basis)) if j != i]
        best = None
        for coefficients in product(range(-2, 3), repeat=len(others)):
            candidate = basis[i] + sum((c * o for c, o in zip(coefficients, others)), np.zeros_like(basis[i]))
            if candidate.min() < 0 and candidate.max() > 0 or not candidate.any():
                continue
            candidate = np.abs(candidate)
            key = (np.count_nonzero(candidate), candidate.sum())
            if best is None or key < best[0]:
                best = (key, candidate)
        if best is not None:
            basis[i] = best[1]
    return [list(map(int, v)) for v in basis]


def _parse_side(text, step_text, line):
    terms = []
    for part in text.split("+"):
        match = _TERM.match(part)
        if not match:
            raise ConfigError("mechanism", f"line {line}: cannot read {part.strip()!r} in step "
                              f"{step_text!r}", hint="write terms like 'A', '2 A' or '2A', joined by '+'")
        coefficient = int(match.group(1) or 1)
        if coefficient < 1:
            raise ConfigError("mechanism", f"line {line}: coefficient 0 in {step_text!r}")
        terms.append((match.group(2), coefficient))
    merged = {}
    for name, coefficient in terms:
        merged[name] = merged.get(name, 0) + coefficient
    return tuple(sorted(merged.items()))


def parse_mechanism(text: str) -> Mechanism:
    """Parse reaction text (see the module docstring) into a :class:`Mechanism`.

    Raises
    ------
    ConfigError
        Bad syntax, a missing arrow, an empty side, duplicate steps or duplicate rate names;
        the message quotes the offending step and its line.
    """
    if not isinstance(text, str) or not text.strip():
        raise ConfigError("mechanism", "empty mechanism text", hint="e.g. 'A -> B; B -> C'")
    steps = []
    for line_number, raw_line in enumerate(text.splitlines() or [text], start=1):
        line_text = raw_line.split("#", 1)[0]
        for piece in line_text.split(";"):
            step_text = piece.strip()
            if step_text:
                steps.append(_parse_step(step_text, line_number, len(steps) + 1))
    if not steps:
        raise ConfigError("mechanism", "no reaction steps found", hint="e.g. 'A -> B; B -> C'")
    _check_duplicates(steps)
    return _assemble(steps, text)


def _parse_step(step_text, line, index):
    names_text = None
    body = step_text
    if ":" in step_text:
        body, names_text = step_text.split(":", 1)
    if body.count("<=>") == 1:
        reversible, (left, right) = True, body.split("<=>")
    elif body.count("->") == 1 and "<" not in body:
        reversible, (left, right) = False, body.split("->")
    else:
        raise ConfigError("mechanism", f"line {line}: step {step_text!r} needs exactly one arrow",
                          hint="use '->' (irreversible) or '<=>' (reversible)")
    if not left.strip() or not right.strip():
        raise ConfigError("mechanism", f"line {line}: step {step_text!r} has an empty side")
    reactants = _parse_side(left, step_text, line)
    products = _parse_side(right, step_text, line)
    if reactants == products:
        raise ConfigError("mechanism", f"line {line}: step {step_text!r} changes nothing")
    if names_text is None:
        k_names = (f"k{index}f", f"k{index}r") if reversible else (f"k{index}",)
    else:
        k_names = tuple(name.strip() for name in names_text.split(","))
        expected = 2 if reversible else 1
        if len(k_names) != expected or not all(_RATE_NAME.match(n) for n in k_names):
            raise ConfigError("mechanism", f"line {line}: rate names {names_text.strip()!r} in "
                              f"{step_text!r}", hint=f"give {expected} identifier(s)"
                              + (" 'kf, kr' for a reversible step" if reversible else ""))
    return Step(reactants, products, reversible, k_names, step_text, line)


def _check_duplicates(steps):
    seen = {}
    names = {}
    for step in steps:
        directions = [(step.reactants, step.products)]
        if step.reversible:
            directions.append((step.products, step.reactants))
        for direction in directions:
            if direction in seen:
                raise ConfigError("mechanism", f"line {step.line}: step {step.text!r} duplicates "
                                  f"{seen[direction].text!r}", hint="write each step once")
            seen[direction] = step
        for name in step.k_names:
            if name in names:
                raise ConfigError("mechanism", f"line {step.line}: rate name {name!r} in "
                                  f"{step.text!r} is already used by {names[name].text!r}")
            names[name] = step


def _assemble(steps, text):
    species = []
    for step in steps:
        for name, _ in step.reactants + step.products:
            if name not in species:
                species.append(name)
    reactions = []
    for step in steps:
        reactions.append((step.reactants, step.products, step.k_names[0]))
        if step.reversible:
            reactions.append((step.products, step.reactants, step.k_names[1]))
    n_s, n_r = len(species), len(reactions)
    stoichiometry = np.zeros((n_s, n_r))
    orders = np.zeros((n_s, n_r))
    for j, (left, right, _) in enumerate(reactions):
        for name, coefficient in left:
            stoichiometry[species.index(name), j] -= coefficient
            orders[species.index(name), j] += coefficient
        for name, coefficient in right:
            stoichiometry[species.index(name), j] += coefficient
    stoichiometry.setflags(write=False)
    orders.setflags(write=False)
    return Mechanism(tuple(species), tuple(steps), tuple(r[2] for r in reactions),
                     stoichiometry, orders, text)


def mechanism_model(mechanism, observed, initial=None, fit_initial=(), method="LSODA",
                    rtol=1e-8, atol=None):
    """A :class:`~kinetics.rates.laws.RateModel` for fitting a mechanism.

    Parameters
    ----------
    mechanism : Mechanism or str
        Parsed mechanism or its text.
    observed : sequence of str
        Species measured, one per data row (others are hidden).
    initial : mapping species -> mol L^-1, optional
        Known (fixed) initial concentrations.  Species not listed start at 0 (fixed) when
        hidden, or are fitted (started from the first data value) when observed.
    fit_initial : sequence of str
        Species whose initial concentration is fitted even though listed in ``initial``
        (the listed value is then only the starting value).
    method, rtol, atol
        Passed to :meth:`Mechanism.simulate`.

    Parameters of the model: every rate name, then ``c0_<species>`` for every species: the
    concentrations at ``t = 0`` (the reaction start; at the first time when times are
    negative).
    """
    from kinetics.rates.laws import CONC_UNIT, ParamSpec, RateModel, _k_from_decay

    if isinstance(mechanism, str):
        mechanism = parse_mechanism(mechanism)
    observed = tuple(observed)
    initial = dict(initial or {})
    mechanism.check_species(observed, "observed")
    mechanism.check_species(initial, "initial")
    mechanism.check_species(fit_initial, "fit_initial")
    for name, value in initial.items():
        if not (np.isfinite(float(value)) and float(value) >= 0):
            raise ConfigError("initial", f"initial concentration of {name!r} is {value}",
                              hint="give a finite concentration of 0 mol/L or more")
    specs = [ParamSpec(name, mechanism.rate_unit(name), 0.0) for name in mechanism.rate_names]
    for name in mechanism.species:
        vary = (name in fit_initial) or (name in observed and name not in initial)
        specs.append(ParamSpec(f"c0_{name}", CONC_UNIT, 0.0, vary=vary))
    rows = [mechanism.species.index(name) for name in observed]

    def predict(t, v):
        k = np.array([v[name] for name in mechanism.rate_names])
        c0 = np.array([v[f"c0_{name}"] for name in mechanism.species])
        t = np.asarray(t, dtype=float)
        if t.size and t[0] > 0:
            # c0_* are concentrations at the reaction start (t = 0), as in the integrated
            # laws, also when the first spectrum was taken later.
            return mechanism.simulate(np.concatenate([[0.0], t]), c0, k, method=method,
                                      rtol=rtol, atol=atol)[rows, 1:]
        return mechanism.simulate(t, c0, k, method=method, rtol=rtol, atol=atol)[rows]

    def guess(t, y):
        y = np.asarray(y, dtype=float)
        scale = float(np.max(np.abs(y))) or 1.0
        k_first = _k_from_decay(t, y[0])
        values = {}
        for j, name in enumerate(mechanism.rate_names):
            order = int(mechanism.reactant_orders[:, j].sum())
            values[name] = k_first / scale ** max(order - 1, 0)
        for name in mechanism.species:
            if name in initial:
                values[f"c0_{name}"] = float(initial[name])
            elif name in observed:
                values[f"c0_{name}"] = max(float(y[observed.index(name)][0]), 0.0)
            else:
                values[f"c0_{name}"] = 0.0
        return values

    def conversion(t, v):
        # Conversion of the first species written (the reactant of the first step).
        k = np.array([v[name] for name in mechanism.rate_names])
        c0 = np.array([v[f"c0_{name}"] for name in mechanism.species])
        t = np.asarray(t, dtype=float)
        grid = np.unique(np.concatenate([[0.0], t]))
        first = mechanism.simulate(grid, c0, k, method=method, rtol=rtol, atol=atol)[0]
        return np.interp(t, grid, 1.0 - first / c0[0]) if c0[0] > 0 else np.full(t.shape, np.nan)

    return RateModel("mechanism", tuple(specs), observed, predict, guess, reactant=mechanism.species[0],
                     description=' ; '.join(s.text for s in mechanism.steps),
                     extra={"mechanism": mechanism, "conversion": conversion})
