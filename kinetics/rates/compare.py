"""Which rate law?  Candidate laws fitted to the same data and ranked by AICc.

Akaike weights ``w_i = exp(-d_i/2) / sum_j exp(-d_j/2)`` with ``d_i`` the AICc difference to
the best model (Burnham & Anderson 2002, ch. 2).  The verdict follows their rules of thumb:
``d < 2`` substantial support, ``4-7`` considerably less, ``> 10`` essentially none.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from kinetics.errors import FitError, KineticsError
from kinetics.rates.fit import FitResult, fit_model
from kinetics.rates.laws import get_model

#: Laws tried by default for one observed reactant or product.
DEFAULT_CANDIDATES = ("zero", "first", "second", "nth")


@dataclass(frozen=True)
class ModelComparison:
    """``table`` (pandas, one row per candidate, best first), ``verdict`` and the fits."""

    table: pd.DataFrame
    verdict: str
    results: dict

    @property
    def best(self) -> str:
        return str(self.table.iloc[0]["model"])

    @property
    def consistent_orders(self) -> list:
        """Integer laws inside the free-order interval of ``n`` (see :func:`nested_orders`)."""
        return nested_orders(self.results)[0]

    def to_dict(self) -> dict:
        consistent, interval = nested_orders(self.results)
        return {"table": self.table.to_dict(orient="records"), "verdict": self.verdict, "best": self.best,
                "consistent_with": consistent, "order_ci95": None if interval is None else list(interval)}


def compare_models(data, candidates=DEFAULT_CANDIDATES, observed="reactant", **options) -> ModelComparison:
    """Fit every candidate law to ``data`` and rank them.

    Parameters
    ----------
    data : ConcentrationData
    candidates : sequence of str or RateModel
        Law names (see :data:`kinetics.rates.laws.MODELS`) or ready models.
    observed : str or tuple
        Passed to :func:`~kinetics.rates.laws.get_model` for names.
    options
        Passed to :func:`~kinetics.rates.fit.fit_model` (profiles off by default here).
    """
    options.setdefault("profile", False)
    results: dict[str, FitResult | None] = {}
    errors: dict[str, str] = {}
    for candidate in candidates:
        label = candidate if isinstance(candidate, str) else candidate.name
        try:
            model = get_model(candidate, observed) if isinstance(candidate, str) else candidate
            results[label] = fit_model(data, model, **options)
        except KineticsError as error:
            results[label] = None
            errors[label] = str(error)
    rows = []
    for label, result in results.items():
        if result is None:
            rows.append({"model": label, "n_params": np.nan, "chi_square": np.nan, "aicc": np.nan,
                         "converged": False, "note": errors[label]})
            continue
        usable = result.converged and np.isfinite(result.aicc)
        rows.append({"model": label, "n_params": len(result.varying), "chi_square": result.chi_square,
                     "aicc": result.aicc if usable else np.nan, "converged": result.converged,
                     "note": "" if result.converged else result.message})
    table = pd.DataFrame(rows)
    if table["aicc"].notna().sum() == 0:
        raise FitError("no candidate law could be fitted: " + "; ".join(f"{k}: {v}" for k, v in errors.items())
                       if errors else "no candidate law converged")
    best_aicc = table["aicc"].min()
    table["delta_aicc"] = table["aicc"] - best_aicc
    weights = np.exp(-0.5 * table["delta_aicc"].to_numpy(dtype=float))
    weights = np.where(np.isfinite(weights), weights, 0.0)
    table["akaike_weight"] = weights / weights.sum()
    table = table.sort_values("delta_aicc", na_position="last").reset_index(drop=True)
    table = table[["model", "n_params", "chi_square", "aicc", "delta_aicc", "akaike_weight", "converged", "note"]]
    return ModelComparison(table, _verdict(table, results), results)


_INTEGER_ORDER = {"zero": 0, "first": 1, "second": 2}


def nested_orders(results: dict) -> tuple[list, tuple | None]:
    """Integer laws whose order lies inside the free-order fit's 95 % interval of ``n``.

    ``nth`` contains zero, first and second order as special cases (``n = 0, 1, 2``), so
    it is always within about delta AICc 2 of the integer law that generated the data; its
    interval of ``n`` says which integer laws the data are consistent with.
    """
    nth = results.get("nth")
    if nth is None or not nth.converged:
        return [], None
    n = nth.param("n")
    interval = n.ci95
    if interval is None or not all(np.isfinite(interval)):
        return [], None
    consistent = [name for name, order in _INTEGER_ORDER.items()
                  if name in results and results[name] is not None and interval[0] <= order <= interval[1]]
    return consistent, (float(interval[0]), float(interval[1]))


def _verdict(table: pd.DataFrame, results: dict) -> str:
    ranked = table[table["aicc"].notna()]
    best = ranked.iloc[0]
    text = f"best: {best['model']} (Akaike weight {best['akaike_weight']:.2f})"
    if len(ranked) == 1:
        return text + "; no other candidate could be fitted"
    consistent, interval = nested_orders(results)
    # The free order nests the integer laws: being as good as one of them is no evidence
    # against it.  Judge the separable (non-nested) laws among themselves.
    separable = ranked
    if consistent:
        separable = ranked[ranked["model"] != "nth"]
    if len(separable) >= 2:
        lead, runner = separable.iloc[0], separable.iloc[1]
        d = float(runner["delta_aicc"] - lead["delta_aicc"])
        if d < 2:
            judgement = (f"{lead['model']} and {runner['model']} are practically as good (delta AICc {d:.1f} < 2): "
                         "the data cannot tell these laws apart; collect more of the curve")
        elif d < 4:
            judgement = f"{runner['model']} has some support left (delta AICc {d:.1f} behind {lead['model']})"
        elif d <= 10:
            judgement = f"{runner['model']} has considerably less support (delta AICc {d:.1f} behind {lead['model']})"
        else:
            judgement = (f"the others have essentially no support (next: {runner['model']}, delta AICc {d:.1f} "
                         f"behind {lead['model']})")
        text = f"{text}; {judgement}"
    nth = results.get("nth")
    if nth is not None and nth.converged:
        n = nth.param("n")
        spread = f" +- {n.stderr:.2f}" if n.stderr is not None else ""
        text += f"; the free-order fit gives n = {n.value:.2f}{spread}"
        if interval is not None:
            text += f" (95 % interval {interval[0]:.2f} to {interval[1]:.2f})"
            if len(consistent) == 1:
                text += f": the data are consistent with {consistent[0]} order"
            elif consistent:
                text += f": consistent with {' and '.join(consistent)} order, the data do not decide the order"
            else:
                text += ": no integer order fits; the order is fractional or the mechanism is more complex"
    return text
