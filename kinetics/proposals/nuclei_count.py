"""Nuclei under each signal guessed from integral ratios (a guess the chemist checks)."""

from __future__ import annotations

import numpy as np


def nuclei_unit(integrals: list[float]) -> float:
    """Integral per nucleus that makes the signals' ratios closest to whole numbers.

    Candidates are each integral divided by 1, 2 or 3 (a CH, CH2 or CH3 group); a
    candidate is allowed only when every signal gets 1 to 9 nuclei; the one with the
    smallest deviation from whole numbers wins (the worst deviation, or with three or more
    signals the second worst, so one integral spoilt by a solvent tail does not decide),
    the larger unit on near-ties.  The ratios of different species also carry their
    concentrations, so this is a guess the user must check.
    """
    if not integrals:
        return 1.0
    values = np.asarray(integrals, float)
    best_unit, best_score = float(values.min()), np.inf
    for unit in sorted({v / n for v in values for n in (1, 2, 3)}, reverse=True):
        counts = values / unit
        if np.round(counts).min() < 1 or np.round(counts).max() > 9:
            continue
        score = whole_number_misfit(counts)
        if score < best_score - 0.05:
            best_unit, best_score = unit, score
    return best_unit


def whole_number_misfit(counts: np.ndarray) -> float:
    deviations = np.sort(np.abs(counts - np.round(counts)))
    return float(deviations[-2] if deviations.size >= 3 else deviations[-1])


__all__ = ["nuclei_unit", "whole_number_misfit"]
