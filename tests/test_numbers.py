"""Numbers as a chemist writes them: value and uncertainty rounded together.

Worked examples come from the GUM (JCGM 100:2008), sections 7.2.2 and 7.2.6, as recalled
("from memory"; the GUM writes decimal commas and groups digits, we write points), and from
issue 12 of this project, which states the form it wants.  The one-or-two-digit choice is
this project's rule (the module doc), a common practice; its boundaries are tested as such.
"""

from __future__ import annotations

import math
from datetime import datetime, timedelta, timezone

import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from kinetics import numbers


# ---------------------------------------------------------------- GUM worked examples
def test_gum_7_2_2_mass_standard():
    # GUM 7.2.2 (from memory): m_S = 100.021 47 g with u_c = 0.35 mg, written
    # m_S = (100.021 47 ± 0.000 35) g: two digits of the uncertainty, value to the same place.
    assert numbers.format_uncertain(100.02147, 0.00035, "g") == "100.02147 ± 0.00035 g"


def test_gum_7_2_6_value_rounded_to_its_uncertainty():
    # GUM 7.2.6 (from memory): y = 10.057 62 Ω with u_c(y) = 27 mΩ is rounded to 10.058 Ω.
    rounded = numbers.round_pair(10.05762, 0.027)
    assert (rounded.value, rounded.uncertainty) == ("10.058", "0.027")


def test_gum_7_2_6_uncertainty_rounded_down_when_sensible():
    # GUM 7.2.6 (from memory): u_c(y) = 28.05 kHz "should be rounded down to 28 kHz".
    rounded = numbers.round_pair(1234.4, 28.05)
    assert rounded.uncertainty == "28" and rounded.value == "1234"


def test_gum_7_2_6_rounding_up_is_not_our_default():
    # GUM 7.2.6 (from memory) allows 10.47 mΩ to be rounded *up* to 11 mΩ; this project
    # rounds to the nearest digit (documented choice), giving 10 mΩ.
    assert numbers.round_pair(500.0, 10.47).uncertainty == "10"


def test_issue_12_rate_constant_form():
    # issue 12 asks for k = (1.493 ± 0.008) × 10⁻⁴ s⁻¹ (the demo's 25 °C fit: 1.4934e-4 ± 8.0e-7)
    assert numbers.format_uncertain(1.4934289e-4, 8.003e-7, "s^-1") == "(1.493 ± 0.008) × 10⁻⁴ s⁻¹"


# ---------------------------------------------------------------- the digit rule (common practice)
@pytest.mark.parametrize("uncertainty, expected", [
    (0.0035, "0.0035"),   # leading digits 350 < 355: two digits
    (0.00355, "0.004"),   # 355: one digit
    (0.0094, "0.009"),    # one digit
    (0.0097, "0.010"),    # 970: one digit carries into the next decade, shown with two
    (0.12, "0.12"),
    (2.0, "2.0"),
])
def test_one_or_two_digits(uncertainty, expected):
    assert numbers.round_pair(1.0, uncertainty).uncertainty == expected


def test_negative_values_and_large_numbers():
    # ΔS‡ of the demo: no "± 0" (the defect of issue 12), a real minus sign
    assert numbers.format_uncertain(-119.34, 0.34, "J/(mol K)") == "−119.34 ± 0.34 J mol⁻¹ K⁻¹"
    assert numbers.format_uncertain(1.03e7, 4.1e5, "s^-1") == "(1.03 ± 0.04) × 10⁷ s⁻¹"


def test_missing_uncertainty_is_said():
    assert numbers.format_uncertain(0.5, None, "mol/L") == "0.5000 mol L⁻¹ (uncertainty unknown)"
    assert numbers.format_uncertain(0.5, float("nan")).endswith("(uncertainty unknown)")


def test_interval_ends_share_a_decimal_place():
    assert numbers.format_interval(1.4771538e-4, 1.5097822e-4, "s^-1") == "(1.477 to 1.510) × 10⁻⁴ s⁻¹"
    assert numbers.format_interval(61.471, 62.279, "kJ/mol") == "61.5 to 62.3 kJ mol⁻¹"


@settings(max_examples=300, deadline=None)
@given(st.floats(-1e6, 1e6, allow_nan=False), st.floats(1e-9, 1e5))
def test_rounding_is_faithful(value, uncertainty):
    # Analytic bounds: rounding to one digit moves the uncertainty by at most 0.5/3.55 of
    # itself (leading digits >= 355), to two digits by at most 0.5/10, and a carry
    # (950-999 -> 1000) by at most 0.05/0.95; the value moves by at most half its last digit.
    r = numbers.round_pair(value, uncertainty)
    scale = 10.0 ** r.exponent
    u = float(r.uncertainty) * scale
    assert abs(u - uncertainty) <= 0.5 / 3.55 * uncertainty * (1 + 1e-9)
    assert len(r.value.split(".")[-1]) == len(r.uncertainty.split(".")[-1]) or r.decimals == 0
    last_digit = 10.0 ** (r.exponent - r.decimals)
    assert abs(float(r.value) * scale - value) <= 0.5 * last_digit * (1 + 1e-9) + 1e-12 * abs(value)
    significant = r.uncertainty.replace(".", "").lstrip("0")
    assert 1 <= len(significant) <= 2


# ---------------------------------------------------------------- times
def test_durations_in_sensible_units():
    assert numbers.format_duration(30) == "30 s"
    assert numbers.format_duration(4641) == "77 min"          # 77.35 min
    assert numbers.format_duration(4641, 25) == "77.4 ± 0.4 min"
    assert numbers.format_duration(7444) == "2.1 h"
    assert numbers.format_duration(3.2 * 86400) == "3.2 d"
    assert numbers.format_duration(float("nan")) == "–"


def test_clock_time_after_a_known_start():
    start = datetime(2026, 3, 10, 23, 50, tzinfo=timezone.utc)
    assert numbers.format_clock(start, 4641) == "01:07 UTC (+1 d)"  # 23:50 + 77 min 21 s
    naive = datetime(2026, 3, 10, 8, 30)
    assert numbers.format_clock(naive, 3600) == "09:30"
    assert numbers.format_clock(naive, timedelta(hours=2, seconds=29).total_seconds()) == "10:30"


# ---------------------------------------------------------------- units and headings
def test_units_typeset():
    assert numbers.unit_text("s^-1") == "s⁻¹"
    assert numbers.unit_text("ln(s^-1)") == "ln(s⁻¹)"
    assert numbers.unit_text("L mol^-1 s^-1") == "L mol⁻¹ s⁻¹"
    assert numbers.unit_text("kJ/mol") == "kJ mol⁻¹"


def test_headings_have_units_and_csv_names_stay():
    assert numbers.column_heading("ea_kj_per_mol") == "Ea / kJ mol⁻¹"
    assert numbers.column_heading("temperature_kelvin") == "T / K"
    assert numbers.column_heading("inverse_temperature_per_k") == "1/T / K⁻¹"
    assert numbers.column_heading("shift_ppm") == "shift / ppm"
    assert numbers.column_heading("k", "s^-1") == "k / s⁻¹"
    frame = pd.DataFrame({"label": ["25 °C", "55 °C"], "k": [1.4934e-4, 1.4646e-3],
                          "k_stderr": [8.0e-7, 7.9e-6], "ci95_low": [1.477e-4, 1.448e-3],
                          "ci95_high": [1.510e-4, 1.481e-3]})
    shown = numbers.human_frame(frame, units={"k": "s^-1"})
    # one power of ten for the whole column, written in the heading (a chemist's table)
    assert list(shown.columns) == ["run", "k ± u / 10⁻³ s⁻¹", "95 % interval"]
    assert list(shown.iloc[:, 1]) == ["0.1493 ± 0.0008", "1.465 ± 0.008"]
    assert list(frame.columns) == ["label", "k", "k_stderr", "ci95_low", "ci95_high"]  # untouched


def test_summary_line_from_the_project_shape():
    # the demo's 25 °C rate constant as fit.to_dict() gives it (issue 12's worked example)
    entry = {"value": 1.4934289e-4, "stderr": 8.003e-7, "ci95": [1.4771538e-4, 1.5097822e-4], "unit": "s^-1"}
    assert numbers.format_estimate(entry) == "(1.493 ± 0.008) × 10⁻⁴ s⁻¹ (95 %: (1.477 to 1.510) × 10⁻⁴ s⁻¹)"
    entry = {"value": -119.34, "stderr": 0.34, "ci95": [-120.8, -117.9], "unit": "J/(mol K)"}
    assert numbers.format_estimate(entry) == "−119.34 ± 0.34 J mol⁻¹ K⁻¹ (95 %: −120.8 to −117.9 J mol⁻¹ K⁻¹)"
