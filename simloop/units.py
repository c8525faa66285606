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
    "awg_diameter_m",
    "as_written",
    "format_gauge",
    "format_quantity",
    "parse_gauge",
    "parse_quantity",
]

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
}

_EXAMPLE: Final[dict[str, str]] = {
    "length": "6 mm", "frequency": "1 MHz", "capacitance": "150 pF", "inductance": "180 uH",
    "angle": "30 deg", "conductivity": "5.8e7 S/m", "resistance": "50 ohm",
}

_SI_NAME: Final[dict[str, str]] = {
    "length": "m", "frequency": "Hz", "capacitance": "F", "inductance": "H", "angle": "deg",
    "conductivity": "S/m", "resistance": "\u03a9",
}

_ARTICLE: Final[dict[str, str]] = {k: "an" if k[0] in "aeiou" else "a" for k in _UNITS}

#: The quantity kinds :func:`parse_quantity` understands.
KINDS: Final[tuple[str, ...]] = tuple(_UNITS)

_NUMBER = r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"
_QUANTITY_RE = re.compile(rf"^\s*(?P<num>{_NUMBER})\s*(?P<unit>.*?)\s*$")


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
        match = _QUANTITY_RE.match(_normalise(value))
        if match is None:
            raise SpecError(key, f'{shown} is not {_ARTICLE[kind]} {kind}; write a number and a '
                                 f'unit, e.g. "{example}"')
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
