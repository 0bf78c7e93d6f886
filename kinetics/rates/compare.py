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

    def to_dict(self) -> dict:
        return {"table": self.table.to_dict(orient="records"), "verdict": self.verdict, "best": self.best}


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


def _verdict(table: pd.DataFrame, results: dict) -> str:
    ranked = table[table["aicc"].notna()]
    best = ranked.iloc[0]
    text = f"best: {best['model']} (Akaike weight {best['akaike_weight']:.2f})"
    if len(ranked) == 1:
        return text + "; no other candidate could be fitted"
    runner = ranked.iloc[1]
    d = float(runner["delta_aicc"])
    if d < 2:
        judgement = (f"but {runner['model']} is practically as good (delta AICc {d:.1f} < 2): "
                     "the data cannot tell these laws apart; collect more of the curve")
    elif d < 4:
        judgement = f"{runner['model']} has some support left (delta AICc {d:.1f})"
    elif d <= 10:
        judgement = f"{runner['model']} has considerably less support (delta AICc {d:.1f})"
    else:
        judgement = f"the others have essentially no support (next: {runner['model']}, delta AICc {d:.1f})"
    text = f"{text}; {judgement}"
    nth = results.get("nth")
    if nth is not None and nth.converged:
        # nth contains zero, first and second order as special cases: its n says which is near.
        n = nth.param("n")
        spread = f" +- {n.stderr:.2f}" if n.stderr is not None else ""
        text += f"; the free-order fit gives n = {n.value:.2f}{spread}"
    return text
