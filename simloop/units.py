"""Quantities with units in spec files, and American Wire Gauge diameters.

A small strict parser with a closed unit table (no unit registry): ``"0.8 m"``, ``"31.5 in"``,
``"150 pF"``, ``"1.2 MHz"``, ``"5.8e7 S/m"``. A bare number (int or float, never bool) means the SI
base unit of the quantity, with one exception: a bare number for an **angle** means degrees, because
every angle key in simloop is in degrees. Units are case-sensitive (``"150 PF"`` is an error, not
petafarad; ``"1.2 mhz"`` is an error with the hint ``did you mean MHz?``).

Every bad input raises :class:`simloop.errors.SpecError` whose message names the key, the value as
the user wrote it and the rule::

    winding.pitch: "6 qq" has unknown unit "qq"; a length takes m, cm, mm, in, ft

Sign checks live here (``sign="positive"``) so that the message quotes the user's text
(``must be > 0, got "-3 mm"``), never a converted SI value.
"""

from __future__ import annotations

import difflib
import math
import re
import unicodedata
from typing import Final

from simloop.errors import SpecError

__all__ = [
    "KINDS",
    "FREQUENCY_MATCH_REL",
    "awg_diameter_m",
    "as_written",
    "find_frequency",
    "format_gauge",
    "format_length",
    "format_length_imperial",
    "format_quantity",
    "is_imperial",
    "parse_band_raster",
    "parse_gauge",
    "parse_option",
    "parse_quantity",
    "same_frequency",
]

#: Two frequencies are the same point when they differ by less than this fraction: far above the
#: rounding of frequencies built by arithmetic (≈1e-16 relative; the same point reached as
#: ``start + k·step`` or read back from a cache), far below any step this tool uses (1 Hz at
#: 30 MHz is 3e-8). [-]
FREQUENCY_MATCH_REL: Final = 1e-9


def same_frequency(a_hz: float, b_hz: float) -> bool:
    """Whether two frequencies are the same point (within :data:`FREQUENCY_MATCH_REL` of ``b_hz``)."""
    return abs(a_hz - b_hz) <= FREQUENCY_MATCH_REL * b_hz


def find_frequency(frequency_hz: float, candidates):
    """The first of ``candidates`` that is the same point as ``frequency_hz``, or None."""
    return next((g for g in candidates if same_frequency(g, frequency_hz)), None)

# Closed unit table: kind -> {unit: (multiplier, divisor)};
# SI value = number * multiplier / divisor.
# Divisors keep decimal prefixes exact in binary floating point (150 / 1e12, not 150 * 1e-12).
# The micro sign is accepted as U+00B5 or U+03BC (both normalise to U+03BC below) and as "u";
# the ohm as U+03A9 or U+2126, and as "ohm".
_UNITS: Final[dict[str, dict[str, tuple[float, float]]]] = {
    "length": {"m": (1.0, 1.0), "cm": (1.0, 1e2), "mm": (1.0, 1e3),
               "in": (0.0254, 1.0), "ft": (0.3048, 1.0)},  # inch and foot: exact by definition
    "frequency": {"Hz": (1.0, 1.0), "kHz": (1e3, 1.0), "MHz": (1e6, 1.0)},
    "capacitance": {"pF": (1.0, 1e12), "nF": (1.0, 1e9), "\u03bcF": (1.0, 1e6), "uF": (1.0, 1e6),
                    "F": (1.0, 1.0)},
    "inductance": {"\u03bcH": (1.0, 1e6), "uH": (1.0, 1e6), "mH": (1.0, 1e3), "nH": (1.0, 1e9),
                   "H": (1.0, 1.0)},
    # Angles return DEGREES (the exception to "SI inside": every simloop angle key is in degrees).
    "angle": {"deg": (1.0, 1.0), "\u00b0": (1.0, 1.0), "rad": (180.0 / math.pi, 1.0)},
    # mS/m is added beside S/m because ground conductivity is usually quoted in mS/m.
    "conductivity": {"S/m": (1.0, 1.0), "mS/m": (1.0, 1e3)},
    "resistance": {"\u03a9": (1.0, 1.0), "ohm": (1.0, 1.0)},
    # Field strength of a broadcast signal: usually quoted in mV/m or µV/m (dBµV/m is not taken).
    "field": {"V/m": (1.0, 1.0), "mV/m": (1.0, 1e3), "\u03bcV/m": (1.0, 1e6), "uV/m": (1.0, 1e6)},
}

# What the messages list (µ written as the micro sign, aliases in parentheses).
_LISTED: Final[dict[str, str]] = {
    "length": "m, cm, mm, in, ft",
    "frequency": "Hz, kHz, MHz",
    "capacitance": "pF, nF, \u00b5F (uF), F",
    "inductance": "nH, \u00b5H (uH), mH, H",
    "angle": "deg (or \u00b0), rad",
    "conductivity": "S/m, mS/m",
    "resistance": "\u03a9 (ohm)",
    "field": "V/m, mV/m, \u00b5V/m (uV/m)",
}

_EXAMPLE: Final[dict[str, str]] = {
    "length": "6 mm", "frequency": "1 MHz", "capacitance": "150 pF", "inductance": "180 uH",
    "angle": "30 deg", "conductivity": "5.8e7 S/m", "resistance": "50 ohm", "field": "1 mV/m",
}

_SI_NAME: Final[dict[str, str]] = {
    "length": "m", "frequency": "Hz", "capacitance": "F", "inductance": "H", "angle": "deg",
    "conductivity": "S/m", "resistance": "\u03a9", "field": "V/m",
}

_ARTICLE: Final[dict[str, str]] = {k: "an" if k[0] in "aeiou" else "a" for k in _UNITS}

#: The quantity kinds :func:`parse_quantity` understands.
KINDS: Final[tuple[str, ...]] = tuple(_UNITS)

_NUMBER = r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"
_QUANTITY_RE = re.compile(rf"^\s*(?P<num>{_NUMBER})\s*(?P<unit>.*?)\s*$")
# A simple fraction, optionally after a whole number: "1/4 in", "26 1/2 in", "-3/8 in".
_FRACTION_RE = re.compile(r"^\s*(?P<sign>[+-]?)(?:(?P<whole>\d+)\s+)?(?P<num>\d+)\s*/\s*(?P<den>\d+)"
                          r"\s*(?P<unit>(?:[^\d\s./].*?)?)\s*$")


def _fraction_value(match: re.Match, key: str, shown: str) -> float:
    """The number of a fraction match: whole + num/den with its sign (den > 0)."""
    den = int(match.group("den"))
    if den == 0:
        raise SpecError(key, f"{shown} divides by zero")
    value = int(match.group("whole") or 0) + int(match.group("num")) / den
    return -value if match.group("sign") == "-" else value


def _normalise(text: str) -> str:
    """Fold the look-alike code points users type: micro sign, ohm sign, Unicode minus."""
    text = text.replace("\u00b5", "\u03bc").replace("\u2126", "\u03a9").replace("\u2212", "-")
    return unicodedata.normalize("NFC", text)


def as_written(value: object) -> str:
    """Show a spec value the way the user wrote it in TOML (strings quoted, booleans lower-case).

    Parameters
    ----------
    value : object
        A value as ``tomllib`` returned it.

    Returns
    -------
    str
        ``'"6 mm"'``, ``'10'``, ``'true'``, ``'[6, 8, 10]'``, ``'a table'``.
    """
    if isinstance(value, str):
        return f'"{value}"'
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, list):
        return "[" + ", ".join(as_written(v) for v in value) + "]"
    if isinstance(value, dict):
        return "a table"
    return str(value)


def _units_hint(kind: str) -> str:
    return f"{_ARTICLE[kind]} {kind} takes {_LISTED[kind]}"


def _kind_of_unit(unit: str) -> str | None:
    for kind, table in _UNITS.items():
        if unit in table:
            return kind
    return None


def _suggest_unit(unit: str, kind: str) -> str | None:
    """Unit of ``kind`` probably meant: same letters in another case, or a near miss."""
    table = _UNITS[kind]
    for candidate in table:
        if candidate.casefold() == unit.casefold():
            return candidate
    close = difflib.get_close_matches(unit, list(table), n=1, cutoff=0.6)
    return close[0] if close else None


def parse_quantity(value: object, kind: str, key: str = "", *, sign: str = "any") -> float:
    """Parse a spec quantity into SI (degrees for angles).

    Parameters
    ----------
    value : str or int or float
        ``"0.8 m"``, ``"150 pF"``, ``"5.8e7 S/m"``, or a bare number meaning the SI base unit
        (degrees for ``kind="angle"``). Booleans are rejected.
    kind : str
        One of :data:`KINDS`: ``"length"``, ``"frequency"``, ``"capacitance"``, ``"inductance"``,
        ``"angle"``, ``"conductivity"``, ``"resistance"``.
    key : str
        Dotted key path named in error messages (``"winding.pitch"``).
    sign : {"any", "positive", "non-negative"}
        ``"positive"`` requires > 0, ``"non-negative"`` requires >= 0; the message quotes the
        user's text.

    Returns
    -------
    float
        The value in SI units [m, Hz, F, H, S/m, Ω], or in degrees for angles [deg].

    Raises
    ------
    SpecError
        Unknown or wrong-kind unit, missing unit, not a number, not finite, or wrong sign.
    """
    if kind not in _UNITS:
        raise ValueError(f"unknown quantity kind {kind!r}; expected one of {', '.join(KINDS)}")
    if sign not in ("any", "positive", "non-negative"):
        raise ValueError(f"unknown sign rule {sign!r}")
    shown = as_written(value)
    example = _EXAMPLE[kind]

    if isinstance(value, bool) or not isinstance(value, (str, int, float)):
        raise SpecError(key, f'expected {_ARTICLE[kind]} {kind} such as "{example}", got {shown}')
    if isinstance(value, (int, float)):
        try:
            result = float(value)  # TOML integers are unbounded: 10**400 overflows
        except OverflowError:
            result = math.inf
        if not math.isfinite(result):
            raise SpecError(key, f"must be a finite number, got {shown}")
    else:
        fraction = _FRACTION_RE.match(_normalise(value))
        match = None if fraction else _QUANTITY_RE.match(_normalise(value))
        if fraction:
            number, unit = _fraction_value(fraction, key, shown), fraction.group("unit") or ""
        elif match is None:
            raise SpecError(key, f'{shown} is not {_ARTICLE[kind]} {kind}; write a number and a '
                                 f'unit, e.g. "{example}"')
        else:
            number, unit = match.group("num"), match.group("unit")
        if not unit:
            bare = "degrees" if kind == "angle" else _SI_NAME[kind]
            raise SpecError(key, f"{shown} has no unit; {_units_hint(kind)} "
                                 f"(a bare number without quotes is read in {bare})")
        table = _UNITS[kind]
        if unit not in table:
            other = _kind_of_unit(unit)
            if other is not None:
                raise SpecError(key, f'{shown} is {_ARTICLE[other]} {other}, not {_ARTICLE[kind]} '
                                 f'{kind}; {_units_hint(kind)}')
            suggestion = _suggest_unit(unit, kind)
            hint = f"; did you mean {suggestion}? (units are case-sensitive)" if suggestion else ""
            raise SpecError(key, f'{shown} has unknown unit "{unit}"{hint}; {_units_hint(kind)}')
        multiplier, divisor = table[unit]
        result = float(number) * multiplier / divisor
        if not math.isfinite(result):
            raise SpecError(key, f"must be a finite number, got {shown}")

    if sign == "positive" and not result > 0:
        raise SpecError(key, f"must be > 0, got {shown}")
    if sign == "non-negative" and not result >= 0:
        raise SpecError(key, f"must be >= 0, got {shown}")
    return result


# Display units per kind, largest first: (unit, scale, threshold) -> value/scale shown in `unit`
# when |value| >= threshold. Every unit here is one parse_quantity accepts, so output round-trips.
_DISPLAY: Final[dict[str, tuple[tuple[str, float, float], ...]]] = {
    "length": (("m", 1.0, 0.1), ("mm", 1e-3, 0.0)),
    "frequency": (("MHz", 1e6, 1e6), ("kHz", 1e3, 1e3), ("Hz", 1.0, 0.0)),
    "capacitance": (("F", 1.0, 1.0), ("uF", 1e-6, 1e-6), ("nF", 1e-9, 1e-9), ("pF", 1e-12, 0.0)),
    "inductance": (("H", 1.0, 1.0), ("mH", 1e-3, 1e-3), ("uH", 1e-6, 1e-6), ("nH", 1e-9, 0.0)),
    "angle": (("deg", 1.0, 0.0),),
    "conductivity": (("S/m", 1.0, 0.0),),
    "resistance": (("ohm", 1.0, 0.0),),
    "field": (("V/m", 1.0, 1.0), ("mV/m", 1e-3, 1e-3), ("uV/m", 1e-6, 0.0)),
}


def format_quantity(value: float, kind: str, digits: int = 4) -> str:
    """Readable text for an SI value (degrees for angles), e.g. ``0.0008118 -> "0.8118 mm"``.

    The unit chosen is always one :func:`parse_quantity` accepts (ASCII ``uF``/``uH``/``ohm``), so
    ``parse_quantity(format_quantity(x, kind), kind)`` returns ``x`` to ``digits`` significant
    figures.

    Parameters
    ----------
    value : float
        Value in SI units [m, Hz, F, H, S/m, Ω] or degrees for angles [deg].
    kind : str
        One of :data:`KINDS`.
    digits : int
        Significant figures.

    Returns
    -------
    str
    """
    if kind not in _DISPLAY:
        raise ValueError(f"unknown quantity kind {kind!r}; expected one of {', '.join(KINDS)}")
    if not math.isfinite(value):
        return f"{value} {_DISPLAY[kind][-1][0]}"
    unit, scale = next((u, s) for u, s, threshold in _DISPLAY[kind] if abs(value) >= threshold)
    return f"{value / scale:.{digits}g} {unit}"


# --- Inches for inch builders -------------------------------------------------------------------

INCH_M: Final = 0.0254  #: the international inch (1959), exact. [m]
FOOT_M: Final = 0.3048  #: the international foot, exact. [m]


def is_imperial(text: object) -> bool:
    """True when a spec value was written in inches or feet (``"31.5 in"``, ``"1/4 in"``, ``"2 ft"``)."""
    return isinstance(text, str) and re.search(r"(?:\d|\s)(?:in|ft)\s*$",
                                               _normalise(text).strip().strip('"')) is not None


def format_length_imperial(value_m: float, fraction: int = 32) -> str:
    """A length in inches and feet with the metric value after it.

    Below a foot: inches to the nearest 1/``fraction`` in, ``0.00635 -> '1/4 in (6.35 mm)'``; from
    a foot up: feet and inches to the nearest 1/8 in, then inches, ``0.6731 -> '2 ft 2 1/2 in
    (26 1/2 in, 0.6731 m)'``.

    Parameters
    ----------
    value_m : float
        Length. [m]
    fraction : int
        Finest fraction of an inch shown below a foot (a power of two). [-]
    """
    if not math.isfinite(value_m):
        return format_quantity(value_m, "length")
    sign = "-" if value_m < 0 else ""
    metric = format_quantity(value_m, "length")
    if abs(value_m) < FOOT_M:
        return f"{sign}{_inches(round(abs(value_m) / INCH_M * fraction), fraction)} in ({metric})"
    eighths = round(abs(value_m) / INCH_M * 8)
    feet, rest = divmod(eighths, 12 * 8)
    ft = f"{sign}{feet} ft" + (f" {_inches(rest, 8)} in" if rest else "")
    return f"{ft} ({sign}{_inches(eighths, 8)} in, {metric})"


def _inches(units: int, fraction: int) -> str:
    """``units`` of 1/``fraction`` inch as a whole number and a reduced fraction: 52, 2 → '26'."""
    whole, rest = divmod(units, fraction)
    if rest == 0:
        return f"{whole}"
    g = math.gcd(rest, fraction)
    frac = f"{rest // g}/{fraction // g}"
    return f"{whole} {frac}" if whole else frac


def format_length(value_m: float, imperial: bool = False) -> str:
    """A length for the user: metric, or inches/feet with the metric value when ``imperial``."""
    return format_length_imperial(value_m) if imperial else format_quantity(value_m, "length")


# --- Command-line options ------------------------------------------------------------------------

def parse_option(text: object, kind: str, option: str, *, sign: str = "positive") -> float:
    """Parse a command-line quantity such as ``--field 1mV/m`` or ``--z0 50ohm`` into SI.

    A bare number is the SI base unit of ``kind`` (V/m, Ω, Hz), as in spec files. Errors are
    :class:`SpecError` naming the option.
    """
    if isinstance(text, str):
        stripped = text.strip()
        try:
            return parse_quantity(float(stripped), kind, option, sign=sign)
        except ValueError:
            return parse_quantity(stripped, kind, option, sign=sign)
    return parse_quantity(text, kind, option, sign=sign)


_SHORT_FREQUENCY = re.compile(r"^\s*([+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?)\s*([kKM]?)\s*$")
_RASTER_RULE = ("use itu-1, itu-2, itu-3 or START:STOP:STEP with frequencies such as 530k, 1.7M, "
                "530kHz or 530000 (bare numbers are Hz), e.g. 530k:1700k:10k")


def parse_band_raster(text: str, option: str = "--band") -> tuple[float, float, float]:
    """``"530k:1700k:10k"`` → (start, stop, step) in Hz; ``k``/``M`` alone are kHz/MHz here.

    Only the syntax is checked here; the band's own rules (order, limits) are the tuning
    module's (:func:`simloop.tuning.band_plan`).
    """
    parts = str(text).split(":")
    if len(parts) != 3:
        raise SpecError(option, f'"{text}" is not a band plan; {_RASTER_RULE}')
    out = []
    for part in parts:
        m = _SHORT_FREQUENCY.match(part)
        if m:
            out.append(float(m.group(1)) * {"": 1.0, "k": 1e3, "K": 1e3, "M": 1e6}[m.group(2)])
            continue
        try:
            out.append(parse_quantity(part.strip(), "frequency", option))
        except SpecError:
            raise SpecError(option, f'"{text}": "{part}" is not a frequency; {_RASTER_RULE}') from None
    return out[0], out[1], out[2]


# --- American Wire Gauge -------------------------------------------------------------------------

#: Gauges simloop accepts, as the integer n of the ASTM B258 formula (4/0 -> -3). The range is our
#: own choice (wires a loop builder might use), not a limit of the standard.
AWG_MIN: Final[int] = -3
AWG_MAX: Final[int] = 50

_GAUGE_RE = re.compile(r"^\s*(?P<g>\d+/0|0{2,}|\d+)\s*(?P<unit>(?:[^\d\s./].*?)?)\s*$")


def awg_diameter_m(gauge: int | str) -> float:
    r"""Diameter of a solid round wire of American Wire Gauge ``gauge`` (ASTM B258).

    Parameters
    ----------
    gauge : int or str
        The gauge number n; for the "aught" sizes either the string ``"k/0"`` or the integer
        n = 1 − k (``"1/0"`` → 0, ``"4/0"`` → −3).

    Returns
    -------
    float
        Wire diameter. [m]

    Notes
    -----
    .. math:: d = 0.127\,\mathrm{mm} \cdot 92^{(36 - n)/39}

    The standard tabulates diameters rounded to 0.0001 in; this returns the unrounded formula.

    References
    ----------
    .. [1] ASTM B258, *Standard Specification for Standard Nominal Diameters and Cross-Sectional
       Areas of AWG Sizes of Solid Round Wires Used as Electrical Conductors*.
    """
    n = _gauge_number(gauge) if isinstance(gauge, str) else gauge
    if isinstance(n, bool) or not isinstance(n, int):
        raise TypeError(f"gauge must be an int or a 'k/0' string, got {gauge!r}")
    return 0.127e-3 * 92.0 ** ((36 - n) / 39)


def _gauge_number(text: str) -> int:
    """'20' -> 20, '4/0' -> -3, '0000' -> -3, '0' -> 0."""
    text = text.strip()
    if text.endswith("/0"):
        return 1 - int(text[:-2])
    if len(text) > 1 and set(text) == {"0"}:
        return 1 - len(text)
    return int(text)


def format_gauge(n: int) -> str:
    """``20 -> "20 AWG"``, ``-3 -> "4/0 AWG"`` (inverse of :func:`parse_gauge`)."""
    return f"{1 - n}/0 AWG" if n <= 0 else f"{n} AWG"


def parse_gauge(value: object, key: str = "") -> int:
    """Parse a wire gauge such as ``"20 AWG"``, ``"4/0 AWG"`` or ``"0000 AWG"``.

    A bare integer (``gauge = 20``) is read as AWG too, since the key admits no other unit.

    Parameters
    ----------
    value : str or int
        The gauge as written in the spec file.
    key : str
        Dotted key path named in error messages (``"wire.gauge"``).

    Returns
    -------
    int
        The gauge number n of the ASTM B258 formula (``"4/0 AWG"`` → −3); see
        :func:`awg_diameter_m`.

    Raises
    ------
    SpecError
        Not a gauge, a unit other than AWG, or outside 4/0 … 50 AWG.
    """
    shown = as_written(value)
    if isinstance(value, bool) or not isinstance(value, (str, int)):
        raise SpecError(key, f'expected a wire gauge such as "20 AWG", got {shown}')
    if isinstance(value, int):
        n = value
    else:
        match = _GAUGE_RE.match(value)
        if match is None:
            raise SpecError(key, f'{shown} is not a wire gauge; write e.g. "20 AWG" or "4/0 AWG", '
                                 f'or give the size as a diameter')
        unit = match.group("unit")
        if unit != "AWG":
            if not unit:
                why = "has no unit"
            elif unit.casefold() == "awg":
                why = f'has unknown unit "{unit}"; did you mean AWG? (units are case-sensitive)'
            else:
                why = f'has unknown unit "{unit}"'
            raise SpecError(key, f'{shown} {why}; a gauge takes AWG (ASTM B258), e.g. "20 AWG"; '
                                 f'for other wire give diameter instead')
        n = _gauge_number(match.group("g"))
    if not AWG_MIN <= n <= AWG_MAX:
        raise SpecError(key, f"{shown} is outside the gauges simloop accepts "
                             f"({format_gauge(AWG_MIN)} to {format_gauge(AWG_MAX)})")
    return n
