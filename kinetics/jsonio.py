"""JSON at the user-facing edge: one shape for a fitted parameter, numpy-safe dumping.

A fitted parameter is always ``{"value": v, "stderr": s, "ci95": [lo, hi], "unit": "..."}``;
values that are not known (a stderr that could not be estimated) are ``null``, never NaN.
"""

from __future__ import annotations

import json
import math
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np


def _finite_or_none(value) -> float | None:
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def parameter_dict(value, stderr=None, ci95=None, unit: str = "") -> dict[str, Any]:
    """The standard JSON shape of one fitted parameter."""
    interval = None
    if ci95 is not None:
        interval = [_finite_or_none(ci95[0]), _finite_or_none(ci95[1])]
    return {
        "value": _finite_or_none(value),
        "stderr": _finite_or_none(stderr),
        "ci95": interval,
        "unit": unit,
    }


def to_jsonable(obj: Any) -> Any:
    """Recursively turn numpy scalars/arrays, paths, datetimes and NaN into JSON values."""
    if isinstance(obj, dict):
        return {str(key): to_jsonable(value) for key, value in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [to_jsonable(value) for value in obj]
    if isinstance(obj, np.ndarray):
        return [to_jsonable(value) for value in obj.tolist()]
    if isinstance(obj, (np.bool_, bool)):
        return bool(obj)
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return _finite_or_none(obj)
    if isinstance(obj, Path):
        return str(obj)
    if isinstance(obj, datetime):
        return obj.isoformat()
    return obj


def dumps(obj: Any, indent: int | None = 2) -> str:
    """JSON text of ``obj`` with NaN/inf as null (strict JSON)."""
    return json.dumps(to_jsonable(obj), indent=indent, allow_nan=False)
