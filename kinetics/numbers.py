"""Numbers as a chemist writes them: value and uncertainty rounded together, units typeset.

Rules (GUM, JCGM 100:2008, 7.2.6): an uncertainty is given to at most two significant
digits, and the value is rounded to the same decimal place as its uncertainty.  Which of one
or two digits is this project's choice (a common practice): two digits when the first three
significant digits of the uncertainty are 100-354, one digit from 355 to 949, and 950-999 are
rounded up to 1000 and shown with two digits.  So 0.0035 stays 0.0035 (a single digit, 0.004,
would change it by 14 %), 0.008 stays 0.008, and 0.0097 becomes 0.010.

Everything here returns plain text (Unicode: "×", "±", "⁻¹", "°C"), never markup, so the
same strings go to the terminal, HTML (escaped by the caller), PDF and figure labels.

Main entry points

* :func:`round_pair` -> :class:`Rounded` (the digits, before any typesetting);
* :func:`format_uncertain` -- ``"(1.493 ± 0.008) × 10⁻⁴ s⁻¹"``;
* :func:`format_interval` -- ``"(1.477 to 1.510) × 10⁻⁴ s⁻¹"``, both ends at one decimal place;
* :func:`format_duration` / :func:`format_clock` -- "42 min", "3.2 h", "14:05 (day 2)";
* :func:`unit_text` -- ``"s^-1"`` -> ``"s⁻¹"``, ``"kJ/mol"`` -> ``"kJ mol⁻¹"``;
* :func:`column_heading` / :func:`human_frame` -- machine column names to "quantity / unit"
  headings (tables shown to people; CSV files keep the machine names).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from decimal import ROUND_HALF_UP, Decimal
from datetime import datetime, timedelta
from typing import Mapping

__all__ = [
    "Rounded",
    "uncertainty_digits",
    "round_pair",
    "format_uncertain",
    "format_interval",
    "format_value",
    "format_estimate",
    "format_duration",
    "format_clock",
    "superscript",
    "unit_text",
    "column_heading",
    "human_frame",
    "COLUMN_HEADINGS",
]

_SUPERSCRIPT = str.maketrans("0123456789-+", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻⁺")
MINUS = "−"  # U+2212, the typographic minus


def superscript(text: str | int) -> str:
    """Digits and signs as Unicode superscripts: ``-4`` -> ``⁻⁴``."""
    return str(text).translate(_SUPERSCRIPT)


def _signed(text: str) -> str:
    return text.replace("-", MINUS) if text.startswith("-") else text


@dataclass(frozen=True)
class Rounded:
    """A value and its uncertainty rounded together.

    Attributes
    ----------
    value, uncertainty : str
        Digits of the mantissas (after dividing by ``10**exponent``), e.g. ``"1.493"``,
        ``"0.008"``; the value is given to the uncertainty's last decimal place.
    exponent : int
        Common power of ten (0 when the numbers read well without one).
    decimals : int
        Decimal places of both mantissas.
    """

    value: str
    uncertainty: str
    exponent: int
    decimals: int


def uncertainty_digits(uncertainty: float) -> int:
    """Significant digits (1 or 2) to keep for an uncertainty (rule in the module doc)."""
    u = abs(float(uncertainty))
    if not math.isfinite(u) or u == 0.0:
        return 2
    leading = u / 10 ** math.floor(math.log10(u)) * 100  # first three digits, 100 <= leading < 1000
    leading = round(leading, 6)
    if leading < 355:
        return 2
    if leading < 950:
        return 1
    return 1  # 950-999: one digit carries into the next decade, shown as two (0.0097 -> 0.010)


def _choose_exponent(value: float, uncertainty: float) -> int:
    """Engineering-free power of ten: none for 0.001 <= |x| < 10000, else the value's own."""
    size = max(abs(value), abs(uncertainty))
    if size == 0.0 or 1e-3 <= size < 1e4:
        return 0
    return int(math.floor(math.log10(size)))


def round_pair(value: float, uncertainty: float, digits: int | None = None,
               exponent: int | None = None) -> Rounded:
    """Round ``value`` and ``uncertainty`` together (GUM 7.2.6).

    Parameters
    ----------
    value, uncertainty : float
        The estimate and its (standard or expanded) uncertainty, same unit.
    digits : int, optional
        Significant digits of the uncertainty (default :func:`uncertainty_digits`).
    exponent : int, optional
        Power of ten to factor out (default: none for numbers between 0.001 and 10000).

    Returns
    -------
    Rounded
    """
    value, uncertainty = float(value), abs(float(uncertainty))
    if not math.isfinite(value):
        raise ValueError("round_pair needs a finite value")
    if not math.isfinite(uncertainty) or uncertainty == 0.0:
        exp = _choose_exponent(value, 0.0) if exponent is None else exponent
        mantissa = value / 10 ** exp
        return Rounded(f"{mantissa:.4g}", "", exp, 0)
    digits = uncertainty_digits(uncertainty) if digits is None else int(digits)
    place = math.floor(math.log10(uncertainty)) - digits + 1  # power of ten of the last kept digit
    rounded_u = _round_to(uncertainty, place)
    if math.floor(math.log10(rounded_u)) > math.floor(math.log10(uncertainty)):
        # rounding carried into a new decade (0.0097 -> 0.0100): two digits of the new
        # decade are shown, "0.010"
        place = math.floor(math.log10(rounded_u)) - 1
    exp = _choose_exponent(value, rounded_u) if exponent is None else exponent
    if exponent is None and place > exp:
        # the last kept digit sits left of the units: "280" would show a zero that means
        # nothing, so a power of ten takes it, "(1.235 ± 0.028) × 10⁴"
        exp = int(math.floor(math.log10(max(abs(value), rounded_u))))
    decimals = max(0, exp - place)
    scale = 10.0 ** exp
    value_text = f"{_round_to(value, place) / scale:.{decimals}f}"
    u_text = f"{rounded_u / scale:.{decimals}f}"
    if value_text.startswith("-") and float(value_text) == 0.0:
        value_text = value_text[1:]
    return Rounded(value_text, u_text, exp, decimals)


def _round_to(x: float, place: int) -> float:
    """``x`` rounded to a multiple of ``10**place``, halves away from zero, on the decimal
    digits as written (77.35 -> 77.4, which binary floating point would give as 77.3)."""
    step = Decimal(1).scaleb(place)
    return float(Decimal(repr(float(x))).quantize(step, rounding=ROUND_HALF_UP))


def _times_ten(exponent: int) -> str:
    return "" if exponent == 0 else f" × 10{superscript(exponent)}"


def format_uncertain(value: float, uncertainty: float | None, unit: str = "", digits: int | None = None) -> str:
    """``"(1.493 ± 0.008) × 10⁻⁴ s⁻¹"``, ``"61.9 ± 0.4 kJ mol⁻¹"``; unit passes through :func:`unit_text`.

    Without a usable uncertainty (None, NaN, 0) the value is shown to 4 significant digits
    and marked "(uncertainty unknown)", so a missing uncertainty is never read as a
    precise number.
    """
    unit = unit_text(unit)
    tail = f" {unit}" if unit else ""
    if value is None or not math.isfinite(float(value)):
        return "–"
    if uncertainty is None or not math.isfinite(float(uncertainty)) or float(uncertainty) == 0.0:
        return f"{format_value(value)}{tail} (uncertainty unknown)"
    r = round_pair(value, uncertainty, digits)
    core = f"{_signed(r.value)} ± {r.uncertainty}"
    if r.exponent:
        return f"({core}){_times_ten(r.exponent)}{tail}"
    return f"{core}{tail}"


def format_interval(low: float, high: float, unit: str = "", digits: int | None = None) -> str:
    """A 95 % interval with both ends to the decimal place of its half-width.

    ``format_interval(1.4772e-4, 1.5098e-4, "s^-1")`` -> ``"(1.477 to 1.510) × 10⁻⁴ s⁻¹"``.
    The half-width plays the uncertainty's part in :func:`round_pair`.
    """
    low, high = float(low), float(high)
    unit = unit_text(unit)
    tail = f" {unit}" if unit else ""
    if not (math.isfinite(low) and math.isfinite(high)):
        ends = [format_value(x) if math.isfinite(x) else ("−∞" if x < 0 else "∞") for x in (low, high)]
        return f"{ends[0]} to {ends[1]}{tail}"
    half = abs(high - low) / 2
    centre = (low + high) / 2
    if half == 0.0:
        return f"{format_value(low)}{tail}"
    r = round_pair(centre, half, digits)
    scale = 10.0 ** r.exponent
    lo = _signed(f"{low / scale:.{r.decimals}f}")
    hi = _signed(f"{high / scale:.{r.decimals}f}")
    if r.exponent:
        return f"({lo} to {hi}){_times_ten(r.exponent)}{tail}"
    return f"{lo} to {hi}{tail}"


def format_estimate(entry: Mapping, unit: str | None = None) -> str:
    """One result in the project's ``{"value", "stderr", "ci95", "unit"}`` shape, for a summary line.

    ``{"value": 1.4934e-4, "stderr": 8.0e-7, "ci95": [1.4772e-4, 1.5098e-4], "unit": "s^-1"}``
    -> ``"(1.493 ± 0.008) × 10⁻⁴ s⁻¹ (95 %: (1.477 to 1.510) × 10⁻⁴ s⁻¹)"``; the interval
    is given in the value's power of ten and unit.
    """
    value, stderr = entry.get("value"), entry.get("stderr")
    unit = entry.get("unit", "") if unit is None else unit
    text = format_uncertain(value, stderr, unit)
    interval = entry.get("ci95")
    if interval is None or value is None or not all(_finite(x) for x in interval):
        return text
    if _finite(stderr) and float(stderr) > 0:
        exponent = round_pair(value, stderr).exponent
        half = abs(float(interval[1]) - float(interval[0])) / 2
        r = round_pair((float(interval[0]) + float(interval[1])) / 2, half, exponent=exponent)
        scale = 10.0 ** exponent
        ends = [_signed(f"{float(x) / scale:.{r.decimals}f}") for x in interval]
        shown_unit = unit_text(unit)
        span = f"({ends[0]} to {ends[1]}){_times_ten(exponent)}" if exponent else f"{ends[0]} to {ends[1]}"
        return f"{text} (95 %: {span}{' ' + shown_unit if shown_unit else ''})"
    return f"{text} (95 %: {format_interval(interval[0], interval[1], unit)})"


def format_value(value, significant: int = 4) -> str:
    """A lone number (no uncertainty) to ``significant`` digits, × 10ⁿ outside 0.001-10000."""
    if value is None:
        return "–"
    value = float(value)
    if not math.isfinite(value):
        return "–" if math.isnan(value) else ("∞" if value > 0 else "−∞")
    if value == 0.0:
        return "0"
    exp = _choose_exponent(value, 0.0)
    mantissa = value / 10 ** exp
    text = f"{mantissa:#.{significant}g}".rstrip(".")
    if "e" in text:  # very large mantissa after rounding
        text = f"{mantissa:.{significant}g}"
    return _signed(text) + _times_ten(exp)


# ---------------------------------------------------------------- times
_UNITS = (("s", 1.0), ("min", 60.0), ("h", 3600.0), ("d", 86400.0))


def duration_unit(seconds: float) -> tuple[str, float]:
    """The unit a person would use for a duration: s below 2 min, min below 2 h, h below 2 d, else d."""
    s = abs(float(seconds))
    if s < 120:
        return "s", 1.0
    if s < 7200:
        return "min", 60.0
    if s < 172800:
        return "h", 3600.0
    return "d", 86400.0


def format_duration(seconds: float, uncertainty_s: float | None = None, significant: int = 2) -> str:
    """A duration in s, min, h or d: ``4641`` -> ``"77 min"``; with an uncertainty rounded as above.

    ``format_duration(4641, 25)`` -> ``"77.4 ± 0.4 min"``.
    """
    if seconds is None or not math.isfinite(float(seconds)):
        return "–"
    unit, scale = duration_unit(seconds)
    if uncertainty_s is not None and math.isfinite(float(uncertainty_s)) and uncertainty_s > 0:
        return format_uncertain(seconds / scale, uncertainty_s / scale, unit)
    value = seconds / scale
    digits = max(significant, len(str(int(abs(value)))))  # never round 124 min to 120 min
    return f"{float(f'{value:.{digits}g}'):g} {unit}"


def format_clock(start: datetime, seconds: float, reference: datetime | None = None) -> str:
    """Clock time ``seconds`` after ``start``: ``"14:05"``, or ``"14:05 (+1 d)"`` on a later day.

    ``reference`` (default ``start``) is the day the count of days is taken from.  The time
    zone is ``start``'s own (naive stays naive), rounded to the minute.
    """
    moment = start + timedelta(seconds=float(seconds))
    moment = (moment + timedelta(seconds=30)).replace(second=0, microsecond=0)
    days = (moment.date() - (reference or start).date()).days
    text = moment.strftime("%H:%M")
    if moment.tzinfo is not None:
        name = moment.tzname()
        text += f" {name}" if name else ""
    return text + (f" (+{days} d)" if days > 0 else "")


# ---------------------------------------------------------------- units and headings
_UNIT_WORDS = {
    "kJ/mol": "kJ mol⁻¹", "J/mol": "J mol⁻¹", "J/(mol K)": "J mol⁻¹ K⁻¹", "J/mol/K": "J mol⁻¹ K⁻¹",
    "mol/L": "mol L⁻¹", "mol/l": "mol L⁻¹", "1/s": "s⁻¹", "1/K": "K⁻¹", "L/(mol s)": "L mol⁻¹ s⁻¹",
    "degC": "°C", "C": "°C",
}


def unit_text(unit: str | None) -> str:
    """A unit typeset for people: ``"s^-1"`` -> ``"s⁻¹"``, ``"kJ/mol"`` -> ``"kJ mol⁻¹"``."""
    if not unit:
        return ""
    text = str(unit).strip()
    if text in _UNIT_WORDS:
        return _UNIT_WORDS[text]
    text = re.sub(r"(?:\^|\*\*)(?:\(([-+]?\d+)\)|([-+]?\d+))",
                  lambda m: superscript(m.group(1) or m.group(2)), text)
    return text


# machine column -> (human quantity, unit or None); units of columns named here are fixed
COLUMN_HEADINGS: dict[str, tuple[str, str | None]] = {
    "label": ("run", None), "run": ("run", None), "parameter": ("parameter", None),
    "quantity": ("quantity", None), "model": ("rate law", None), "file": ("file", None),
    "temperature_kelvin": ("T", "K"), "temperature_c": ("θ", "°C"),
    "inverse_temperature_per_k": ("1/T", "K⁻¹"),
    "k": ("k", None), "k_stderr": ("u(k)", None), "k_per_s": ("k", "s⁻¹"),
    "ln_k": ("ln k", None), "sigma_ln_k": ("u(ln k)", None), "ln_k_over_t": ("ln(k/T)", None),
    "ln_k_fitted": ("ln k, line", None), "ln_k_residual": ("ln k − line", None),
    "ea_kj_per_mol": ("Ea", "kJ mol⁻¹"), "dh_kj_per_mol": ("ΔH‡", "kJ mol⁻¹"),
    "ds_j_per_mol_k": ("ΔS‡", "J mol⁻¹ K⁻¹"), "dg_kj_per_mol": ("ΔG‡", "kJ mol⁻¹"),
    "ln_a": ("ln A", None), "a_per_s": ("A", "s⁻¹"), "a": ("A", None),
    "n_params": ("parameters", None), "n_points": ("points", None), "dof": ("degrees of freedom", None),
    "chi_square": ("χ²", None), "reduced_chi_square": ("reduced χ²", None), "aicc": ("AICc", None),
    "delta_aicc": ("ΔAICc", None), "akaike_weight": ("Akaike weight", None), "bic": ("BIC", None),
    "converged": ("converged", None), "note": ("note", None), "unit": ("unit", None),
    "value": ("value", None), "stderr": ("standard uncertainty", None),
    "ci95_low": ("95 % interval, low", None), "ci95_high": ("95 % interval, high", None),
    "time_s": ("t", "s"), "half_life_s": ("t½", "s"),
    "two_step_value": ("two-step", None), "global_value": ("global", None),
    "k_global": ("k, global fit", None), "weight": ("weight", None),
    "width_ratio_two_step_over_global": ("interval width, two-step / global", None),
}

_DIMENSIONLESS = {"ln_k", "ln_k_fitted", "ln_k_residual", "sigma_ln_k", "ln_k_over_t", "ln_a", "chi_square",
                  "reduced_chi_square", "aicc", "delta_aicc", "akaike_weight", "bic", "n_params", "n_points",
                  "dof", "width_ratio_two_step_over_global"}


def column_heading(name: str, unit: str | None = None) -> str:
    """The heading a person reads for a machine column name, "quantity / unit" where it has one.

    ``unit`` overrides the unit (a column whose unit depends on the data, such as ``k``).
    Unknown names are shown with underscores as spaces and a unit guessed from their suffix
    (``_s``, ``_kelvin``, ``_ppm``, ``_mol_per_l``, ``_hz``, ``_c``).
    """
    quantity, fixed = COLUMN_HEADINGS.get(name, (None, None))
    if quantity is None:
        quantity, fixed = name.replace("_", " "), None
        for suffix, suffix_unit in (("_mol_per_l", "mol L⁻¹"), ("_per_s", "s⁻¹"), ("_kelvin", "K"),
                                    ("_ppm", "ppm"), ("_hz", "Hz"), ("_s", "s"), ("_c", "°C"),
                                    ("_kj_per_mol", "kJ mol⁻¹")):
            if name.endswith(suffix):
                quantity, fixed = name[: -len(suffix)].replace("_", " "), suffix_unit
                break
    shown_unit = unit_text(unit) if unit else fixed
    return f"{quantity} / {shown_unit}" if shown_unit else quantity


def _pairs(columns) -> tuple[dict, dict]:
    """Value->uncertainty and low->high column pairs found by name.

    ``value``/``stderr``, ``X``/``X_stderr``, ``X_value``/``X_stderr``; intervals
    ``ci95_low``/``ci95_high`` and ``X_ci95_low``/``X_ci95_high``.
    """
    columns = [str(c) for c in columns]
    uncertain, intervals = {}, {}
    for column in columns:
        if column.endswith("stderr"):
            stem = column[: -len("stderr")].rstrip("_")
            for candidate in ((stem + "_value") if stem else "value", stem):
                if candidate and candidate in columns:
                    uncertain[candidate] = column
                    break
        if column.endswith("ci95_low"):
            high = column[: -len("low")] + "high"
            if high in columns:
                intervals[column] = high
    return uncertain, intervals


def human_frame(frame, units: Mapping[str, str] | None = None, uncertain: Mapping[str, str] | None = None):
    """A copy of ``frame`` for people: numbers as text, "quantity / unit" headings.

    Parameters
    ----------
    frame : DataFrame
    units : mapping column -> unit, optional
        Units of columns whose unit depends on the data (``{"k": "s^-1"}``).  A table with
        a ``unit`` column has its value and interval cells in that row's unit.
    uncertain : mapping value column -> uncertainty column, optional
        Pairs shown as one "value ± uncertainty" column (rounded together); the uncertainty
        column is dropped.  Pairs named as in :func:`_pairs` are found without it.

    Returns
    -------
    DataFrame of str
        Intervals (``*ci95_low``/``*ci95_high``) become one "95 % interval" column with
        both ends rounded to the same decimal place.
    """
    import pandas as pd

    units = dict(units or {})
    found, intervals = _pairs(frame.columns)
    uncertain = found | dict(uncertain or {})
    out = {}
    dropped = set(uncertain.values()) | set(intervals.values())
    for column in frame.columns:
        column_name = str(column)
        if column in dropped:
            continue
        values = frame[column]
        if column in intervals:
            stem = column_name[: -len("ci95_low")].rstrip("_")
            heading = f"{column_heading(stem + '_value').replace(' value', '') if stem else ''} 95 % interval".strip()
            if units.get(stem):
                heading += f" / {unit_text(units[stem])}"
            highs = frame[intervals[column]]
            cells = [format_interval(lo, hi) if _finite(lo) and _finite(hi) else "–" for lo, hi in zip(values, highs)]
            out[heading] = cells
            continue
        heading = column_heading(column_name, units.get(column))
        if column in uncertain:
            heading = heading.replace(" value", "") if heading.endswith(" value") else heading
            u_values = frame[uncertain[column]]
            exponent = None
            sizes = [abs(float(v)) for v in values if _finite(v) and float(v) != 0.0]
            if " / " in heading and sizes and any(not (1e-3 <= x < 1e4) for x in sizes):
                exponent = int(math.floor(math.log10(max(sizes))))  # one power of ten for the column
            cells = []
            for v, u in zip(values, u_values):
                if not _finite(v):
                    cells.append("–")
                elif not (_finite(u) and float(u) > 0):
                    cells.append(_number_cell(v, column_name))
                elif exponent is None:
                    cells.append(format_uncertain(v, u))
                else:
                    r = round_pair(v, u, exponent=exponent)
                    cells.append(f"{_signed(r.value)} ± {r.uncertainty}")
            if exponent is not None:
                quantity, unit = heading.split(" / ", 1)
                heading = f"{quantity} / 10{superscript(exponent)} {unit}"
            if heading == "value":
                heading = "value ± u"
            else:
                heading = heading.split(" / ")[0] + " ± u" + (" / " + heading.split(" / ", 1)[1] if " / " in heading else "")
        elif pd.api.types.is_bool_dtype(values):
            cells = ["yes" if v else "no" for v in values]
        elif pd.api.types.is_numeric_dtype(values):
            cells = [_number_cell(v, column_name) for v in values]
        else:
            cells = ["–" if v is None or (isinstance(v, float) and math.isnan(v)) else
                     (unit_text(v) if column_name == "unit" else str(v)) for v in values]
        out[heading] = cells
    return pd.DataFrame(out)


def _finite(value) -> bool:
    try:
        return value is not None and math.isfinite(float(value))
    except (TypeError, ValueError):
        return False


def _number_cell(value, column: str) -> str:
    if not _finite(value):
        return "–"
    if column in {"n_params", "n_points", "dof", "index"} or (float(value).is_integer() and abs(value) < 1e6
                                                             and column not in COLUMN_HEADINGS):
        return f"{int(value)}"
    if column in {"temperature_kelvin", "temperature_c"}:
        return f"{float(value):.2f}"
    if column in {"akaike_weight", "width_ratio_two_step_over_global", "reduced_chi_square"}:
        return f"{float(value):.2f}"
    if column in {"chi_square", "aicc", "delta_aicc", "bic"}:
        return f"{float(value):.1f}"
    return format_value(value, 4)

