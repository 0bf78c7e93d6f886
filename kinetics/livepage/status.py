"""What a live run shows, as plain values: :class:`LiveStatus` and its (label, text) lines.

Shared by the terminal panel (``watchers.views``), the page's details table and its data
(:mod:`kinetics.livepage.data`).  Numbers are written as a chemist writes them
(:mod:`kinetics.numbers`): value and uncertainty rounded together, durations in the unit a
person would use.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from kinetics.numbers import (duration_unit, format_duration, format_estimate, format_interval, format_uncertain,
                             format_value, unit_text)


@dataclass(frozen=True)
class LiveStatus:
    """Everything the views show, as plain values (built by the live loop).

    ``k``, ``conversion`` and ``time_to_target_s`` are parameter dicts
    (``{"value", "stderr", "ci95", "unit"}``) or None when not (yet) known.
    ``concentrations`` maps signal -> (value, stderr or None) of the latest spectrum.
    """

    folder: str
    started_utc: str
    updated_utc: str
    counts: dict[str, int]
    latest_path: str | None = None
    latest_acquired_utc: str | None = None
    latest_time_s: float | None = None
    concentrations: dict[str, tuple[float | None, float | None]] = field(default_factory=dict)
    concentration_unit: str = "mol/L"
    k: dict | None = None
    k_name: str = "k"
    conversion: dict | None = None
    target_conversion: float | None = None
    time_to_target_s: dict | None = None
    fit_message: str = ""
    quarantined: tuple[tuple[str, str], ...] = ()
    pending: int = 0
    stop_reason: str | None = None


def format_parameter(parameter: dict | None, digits: int | None = None) -> str:
    """A parameter dict (``value``, ``stderr``, ``ci95``, ``unit``) as a chemist writes it:
    value and uncertainty rounded together, then the 95 % interval (or a dash)."""
    if not parameter or parameter.get("value") is None:
        return "–"
    if parameter.get("stderr") is not None:
        return format_estimate(parameter)
    interval = parameter.get("ci95")
    text = f"{format_value(parameter['value'])}"
    unit = unit_text(parameter.get("unit") or "")
    if interval and interval[0] is not None and interval[1] is not None:
        return f"{text}{' ' + unit if unit else ''} (95 %: {format_interval(interval[0], interval[1], parameter.get('unit') or '')})"
    return f"{text} {unit}" if unit else text


def format_duration_parameter(parameter: dict | None) -> str:
    """A duration in seconds (``value``, ``ci95``) in the unit a person would use, its
    interval in the same unit."""
    if not parameter or parameter.get("value") is None:
        return "–"
    value = float(parameter["value"])
    unit, scale = duration_unit(value)
    interval = parameter.get("ci95")
    text = format_duration(value, parameter.get("stderr"), significant=3)
    if interval and interval[0] is not None and interval[1] is not None:
        text += f" (95 %: {format_interval(interval[0] / scale, interval[1] / scale, unit)})"
    return text


def status_lines(status: LiveStatus) -> list[tuple[str, str]]:
    """The view's content as (label, text) pairs, shared by the terminal and the page."""
    counts = status.counts
    lines = [
        ("folder", status.folder),
        ("latest spectrum", status.latest_path or "none yet"),
        ("acquired", status.latest_acquired_utc or "–"),
    ]
    if status.latest_time_s is not None:
        lines.append(("time from start", format_duration(status.latest_time_s, significant=3)))
    for name, (value, stderr) in status.concentrations.items():
        lines.append((name, format_uncertain(value, stderr, status.concentration_unit)))
    lines.append((status.k_name, format_parameter(status.k)))
    if status.conversion is not None:
        lines.append(("conversion", format_parameter(status.conversion)))
    if status.target_conversion is not None:
        lines.append((f"time to {status.target_conversion:.0%}",
                      format_duration_parameter(status.time_to_target_s)))
    if status.fit_message:
        lines.append(("fit", status.fit_message))
    lines.append(("files", f"{counts.get('processed', 0)} processed, "
                           f"{counts.get('duplicate', 0)} duplicate, "
                           f"{counts.get('quarantined', 0)} quarantined, "
                           f"{counts.get('replaced', 0)} replaced, {status.pending} waiting"))
    for path, reason in status.quarantined[-5:]:
        lines.append(("quarantined", f"{path}: {reason}"))
    if status.stop_reason:
        lines.append(("stopped", status.stop_reason))
    lines.append(("updated", status.updated_utc))
    return lines


__all__ = ["LiveStatus", "format_duration_parameter", "format_parameter", "status_lines"]
