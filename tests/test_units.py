"""Quantities with units and wire gauges (simloop.units).

Sources: SI prefixes and unit symbols (BIPM, *The International System of Units*, 9th ed., 2019);
AWG diameters from ASTM B258 (docs/references.md §4).
"""

from __future__ import annotations

import math

import pytest

from simloop.errors import SpecError
from simloop.units import (
    KINDS,
    as_written,
    awg_diameter_m,
    format_gauge,
    format_quantity,
    parse_gauge,
    parse_quantity,
)

# --- every unit of the closed table -------------------------------------------------------------

EVERY_UNIT = [
    ("0.8 m", "length", 0.8),
    ("80 cm", "length", 0.8),
    ("6 mm", "length", 6e-3),
    ("31.5 in", "length", 0.8001),  # 1 in = 25.4 mm exactly
    ("2 ft", "length", 0.6096),  # 1 ft = 304.8 mm exactly
    ("26 1/2 in", "length", 0.6731),  # a simple fraction: 26.5 × 25.4 mm
    ("1 mV/m", "field", 1e-3),
    ("50 uV/m", "field", 50e-6),
    ("530 Hz", "frequency", 530.0),
    ("530 kHz", "frequency", 530e3),
    ("1.2 MHz", "frequency", 1.2e6),
    ("150 pF", "capacitance", 150e-12),
    ("4.7 nF", "capacitance", 4.7e-9),
    ("1 \u00b5F", "capacitance", 1e-6),  # micro sign U+00B5
    ("1 \u03bcF", "capacitance", 1e-6),  # Greek mu U+03BC
    ("1 uF", "capacitance", 1e-6),
    ("2 F", "capacitance", 2.0),
    ("180 \u00b5H", "inductance", 180e-6),
    ("180 \u03bcH", "inductance", 180e-6),
    ("180 uH", "inductance", 180e-6),
    ("2.5 mH", "inductance", 2.5e-3),
    ("40 nH", "inductance", 40e-9),
    ("1 H", "inductance", 1.0),
    ("30 deg", "angle", 30.0),
    ("30\u00b0", "angle", 30.0),
    ("5.8e7 S/m", "conductivity", 5.8e7),
    ("1 mS/m", "conductivity", 1e-3),
    ("50 \u03a9", "resistance", 50.0),  # Greek capital omega
    ("50 \u2126", "resistance", 50.0),  # ohm sign
    ("50 ohm", "resistance", 50.0),
]


@pytest.mark.parametrize(("text", "kind", "expected"), EVERY_UNIT)
def test_every_unit_parses_to_si(text, kind, expected):
    assert parse_quantity(text, kind) == pytest.approx(expected, rel=1e-12, abs=0)


def test_every_kind_has_a_tested_unit():
    assert {kind for _, kind, _ in EVERY_UNIT} == set(KINDS)


def test_angles_come_back_in_degrees():
    assert parse_quantity("1 rad", "angle") == pytest.approx(180 / math.pi, rel=1e-15, abs=0)
    assert parse_quantity(f"{math.pi / 2} rad", "angle") == pytest.approx(90.0, rel=1e-15, abs=0)


@pytest.mark.parametrize(
    "text",
    ["6mm", "  6 mm  ", "6\u00a0mm", "+6 mm", "6. mm", ".6e1 mm", "0.6E1 mm", "6e0 mm"],
)
def test_number_forms_and_spacing(text):
    assert parse_quantity(text, "length") == pytest.approx(6e-3, rel=1e-15, abs=0)


def test_unicode_minus_is_a_minus():
    assert parse_quantity("\u22123 mm", "length") == pytest.approx(-3e-3)


def test_decimal_prefixes_are_exact():
    # divided, not multiplied by 1e-12: 150 pF is the float nearest 1.5e-10
    assert parse_quantity("150 pF", "capacitance") == 1.5e-10
    assert parse_quantity("6 mm", "length") == 0.006


# --- bare numbers --------------------------------------------------------------------------------

@pytest.mark.parametrize(("value", "kind", "expected"), [
    (0.8, "length", 0.8),
    (1, "length", 1.0),
    (1_000_000, "frequency", 1e6),
    (1.5e-10, "capacitance", 1.5e-10),
    (1.8e-4, "inductance", 1.8e-4),
    (5.8e7, "conductivity", 5.8e7),
    (50, "resistance", 50.0),
    (30, "angle", 30.0),  # the one exception: a bare angle is in degrees, not radians
])
def test_bare_number_is_the_si_unit(value, kind, expected):
    result = parse_quantity(value, kind)
    assert isinstance(result, float)
    assert result == expected


@pytest.mark.parametrize("value", [True, False])
def test_bool_is_not_a_number(value):
    with pytest.raises(SpecError) as err:
        parse_quantity(value, "length", "frame.width")
    assert str(err.value) == (
        f'frame.width: expected a length such as "6 mm", got {"true" if value else "false"}')


@pytest.mark.parametrize("value", [[1, 2], {"a": 1}, None])
def test_other_types_are_rejected(value):
    with pytest.raises(SpecError, match=r'^frame\.width: expected a length such as "6 mm", got'):
        parse_quantity(value, "length", "frame.width")


@pytest.mark.parametrize("value", [math.inf, -math.inf, math.nan])
def test_bare_non_finite_is_rejected(value):
    with pytest.raises(SpecError, match=r"^frame\.width: must be a finite number, got "):
        parse_quantity(value, "length", "frame.width")


def test_overflowing_quantity_is_rejected():
    with pytest.raises(SpecError, match=r'^frame\.width: must be a finite number, got "1e400 m"$'):
        parse_quantity("1e400 m", "length", "frame.width")
    with pytest.raises(SpecError, match=r"^frame\.width: must be a finite number, got 1000"):
        parse_quantity(10**400, "length", "frame.width")


# --- case sensitivity and bad units --------------------------------------------------------------

def test_unknown_unit_message_names_key_value_and_rule():
    with pytest.raises(SpecError) as err:
        parse_quantity("6 qq", "length", "winding.pitch")
    assert str(err.value) == (
        'winding.pitch: "6 qq" has unknown unit "qq"; a length takes m, cm, mm, in, ft')
    assert err.value.key == "winding.pitch"
    assert err.value.problems == [
        ("winding.pitch", '"6 qq" has unknown unit "qq"; a length takes m, cm, mm, in, ft')]


@pytest.mark.parametrize(("text", "kind", "hint"), [
    ("150 PF", "capacitance", "did you mean pF?"),  # not petafarad
    ("1.2 mhz", "frequency", "did you mean MHz?"),
    ("530 KHZ", "frequency", "did you mean kHz?"),
    ("6 MM", "length", "did you mean mm?"),
    ("180 UH", "inductance", "did you mean uH?"),
    ("5.8e7 s/m", "conductivity", "did you mean S/m?"),
    ("30 Deg", "angle", "did you mean deg?"),
])
def test_units_are_case_sensitive_with_a_hint(text, kind, hint):
    with pytest.raises(SpecError) as err:
        parse_quantity(text, kind, "some.key")
    message = str(err.value)
    assert message.startswith(f'some.key: "{text}" has unknown unit ')
    assert hint in message
    assert "case-sensitive" in message


def test_petafarad_is_not_read_silently():
    with pytest.raises(SpecError, match=r'"150 PF" has unknown unit "PF"; did you mean pF\?'):
        parse_quantity("150 PF", "capacitance", "tuner.max")


def test_near_miss_unit_hint():
    with pytest.raises(SpecError, match=r'"6 mmm" has unknown unit "mmm"; did you mean mm\?'):
        parse_quantity("6 mmm", "length", "winding.pitch")


def test_unit_of_another_kind():
    with pytest.raises(SpecError) as err:
        parse_quantity("150 pF", "length", "frame.width")
    assert str(err.value) == (
        'frame.width: "150 pF" is a capacitance, not a length; a length takes m, cm, mm, in, ft')


def test_string_without_unit():
    with pytest.raises(SpecError) as err:
        parse_quantity("0.8", "length", "frame.width")
    assert str(err.value) == ('frame.width: "0.8" has no unit; a length takes m, cm, mm, in, ft '
                              '(a bare number without quotes is read in m)')


def test_angle_string_without_unit_says_degrees():
    with pytest.raises(SpecError, match=r"read in degrees\)$"):
        parse_quantity("30", "angle", "pattern.elevation[0]")


@pytest.mark.parametrize("text", ["abc", "", "mm", "6 6 mm", "1,5 mm", "inf m", "nan m"])
def test_not_a_quantity(text):
    with pytest.raises(SpecError) as err:
        parse_quantity(text, "length", "frame.width")
    assert str(err.value).startswith(f'frame.width: "{text}" ')


def test_unknown_kind_is_a_programming_error():
    with pytest.raises(ValueError, match="unknown quantity kind 'weight'"):
        parse_quantity("1 kg", "weight")


# --- signs ---------------------------------------------------------------------------------------

@pytest.mark.parametrize(("value", "shown"), [("-3 mm", '"-3 mm"'), ("0 m", '"0 m"'), (-3, "-3"),
                                              (0.0, "0.0")])
def test_positive_keys_quote_the_users_text(value, shown):
    with pytest.raises(SpecError) as err:
        parse_quantity(value, "length", "winding.pitch", sign="positive")
    assert str(err.value) == f"winding.pitch: must be > 0, got {shown}"
    assert "-0.003" not in str(err.value)  # never the SI value the user did not write


def test_non_negative_allows_zero_only():
    assert parse_quantity("0 pF", "capacitance", sign="non-negative") == 0.0
    with pytest.raises(SpecError, match=r'^tuner\.stray: must be >= 0, got "-1 pF"$'):
        parse_quantity("-1 pF", "capacitance", "tuner.stray", sign="non-negative")


def test_default_sign_allows_negative():
    assert parse_quantity("-0.20 m", "length") == pytest.approx(-0.2)


# --- formatting ----------------------------------------------------------------------------------

@pytest.mark.parametrize(("value", "kind", "text"), [
    (0.8118209703737738e-3, "length", "0.8118 mm"),
    (0.03, "length", "30 mm"),
    (0.8, "length", "0.8 m"),
    (1710e3, "frequency", "1.71 MHz"),
    (530e3, "frequency", "530 kHz"),
    (50.0, "frequency", "50 Hz"),
    (150e-12, "capacitance", "150 pF"),
    (4.7e-9, "capacitance", "4.7 nF"),
    (184e-6, "inductance", "184 uH"),
    (2.5e-3, "inductance", "2.5 mH"),
    (30.0, "angle", "30 deg"),
    (5.8e7, "conductivity", "5.8e+07 S/m"),
    (0.05315, "resistance", "0.05315 ohm"),
])
def test_format_quantity(value, kind, text):
    assert format_quantity(value, kind) == text


@pytest.mark.parametrize("kind", KINDS)
@pytest.mark.parametrize("value", [1.234567e-13, 3.3e-9, 7.1e-5, 0.0123, 0.8, 12.5, 4.4e5, 2.2e7])
def test_format_round_trips_through_parse(kind, value):
    assert parse_quantity(format_quantity(value, kind), kind) == pytest.approx(value, rel=1e-3, abs=0)


def test_as_written():
    assert as_written("6 mm") == '"6 mm"'
    assert as_written(True) == "true"
    assert as_written(10) == "10"
    assert as_written([6, "8", 1.5]) == '[6, "8", 1.5]'
    assert as_written({"a": 1}) == "a table"


# --- AWG (ASTM B258) -----------------------------------------------------------------------------

# docs/references.md §4: d = 0.127 mm · 92^((36 − n)/39). Check values [calc] from the B258 formula,
# rounded to 0.0001 mm here (the standard tabulates to 0.0001 in), hence abs = 0.5e-4 mm.
@pytest.mark.parametrize(("gauge", "diameter_mm"), [
    (14, 1.6277), (18, 1.0237), (20, 0.8118), (22, 0.6438), (24, 0.5106),
])
def test_awg_diameter_matches_b258_formula_check_values(gauge, diameter_mm):
    assert awg_diameter_m(gauge) * 1e3 == pytest.approx(diameter_mm, abs=0.5e-4)


def test_awg_4_0_matches_b258_table():
    # 4/0 AWG = 0.4600 in = 11.684 mm, from the B258 table [mem]; n = 1 − 4 = −3.
    assert awg_diameter_m(-3) == pytest.approx(0.4600 * 25.4e-3, rel=1e-12, abs=0)
    assert awg_diameter_m("4/0") == pytest.approx(11.684e-3, rel=1e-12, abs=0)


def test_awg_36_is_the_defining_5_mil_wire():
    # the formula is anchored at 36 AWG = 0.005 in = 0.127 mm
    assert awg_diameter_m(36) == pytest.approx(0.127e-3, rel=1e-15, abs=0)


@pytest.mark.parametrize(("text", "n"), [
    ("20 AWG", 20), ("20AWG", 20), (" 24 AWG ", 24), ("1/0 AWG", 0), ("0 AWG", 0),
    ("2/0 AWG", -1), ("00 AWG", -1), ("4/0 AWG", -3), ("0000 AWG", -3), (20, 20),
])
def test_parse_gauge(text, n):
    assert parse_gauge(text) == n


@pytest.mark.parametrize(("n", "text"), [(20, "20 AWG"), (1, "1 AWG"), (0, "1/0 AWG"),
                                         (-3, "4/0 AWG")])
def test_format_gauge_inverts_parse(n, text):
    assert format_gauge(n) == text
    assert parse_gauge(text) == n


@pytest.mark.parametrize(("value", "fragment"), [
    ("20 awg", 'has unknown unit "awg"; did you mean AWG?'),
    ("20 SWG", 'has unknown unit "SWG"'),
    ("20", "has no unit"),
    ("AWG 20", "is not a wire gauge"),
    ("0.8 mm", "is not a wire gauge"),
    (True, 'expected a wire gauge such as "20 AWG", got true'),
    (20.5, 'expected a wire gauge such as "20 AWG", got 20.5'),
    ("60 AWG", "outside the gauges simloop accepts (4/0 AWG to 50 AWG)"),
    ("5/0 AWG", "outside the gauges simloop accepts"),
])
def test_bad_gauges_name_key_and_value(value, fragment):
    with pytest.raises(SpecError) as err:
        parse_gauge(value, "wire.gauge")
    message = str(err.value)
    assert message.startswith("wire.gauge: ")
    assert as_written(value) in message
    assert fragment in message
