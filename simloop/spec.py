"""The spec file: TOML in, frozen dataclasses of SI floats out.

``load(path)`` / ``loads(text)`` read a spec (README, "The spec file") in two stages, each of
which collects every problem before raising one :class:`~simloop.errors.SpecError` with one line per problem,
``dotted.key: message``:

1. **Structure** — TOML syntax (with line and column), unknown keys (with the near miss:
   ``frame.widht: unknown key; did you mean "width"?``), missing sections and keys, types, units
   and signs (``must be > 0, got "-3 mm"``), and keys that exclude or require each other
   (``wire.gauge`` *or* ``wire.diameter``; ``ground.soil`` *or* permittivity and conductivity;
   the keys of each ``tuner.kind``).
2. **Physics** — rules between values: turns that would touch, a spiral whose inner turn
   collapses, taps out of order or beyond the winding, leads too close to the wire, a reversed
   sweep, segments thinner than the wire, a frame in the ground, and so on.

Messages quote values as the user wrote them (``"6 mm"``), or as readable derived values
(``0.8118 mm``), never raw SI floats; pydantic's own error text is never shown.

Keys and defaults (sections other than frame, winding, wire and taps are optional)::

    name                 folder name under results/; default: the file name without .toml
    [frame]    width, height                       outer turn [length]
    [winding]  style = "stacked" | "spiral"        default "stacked"
               turns (int >= 1), pitch [length]    centre-to-centre spacing of turns
    [wire]     gauge ("20 AWG") OR diameter [length]
               metal = "copper" (default) | "aluminium" | "lossless" | "custom"
               OR conductivity [S/m] (then metal is "custom")
    [taps]     turns = [..]                        1 to 8 increasing tap positions in turns
    [leads]    offset [length]                     default "30 mm"
    [sweep]    start, stop [frequency], points     default 520 kHz, 1710 kHz, 25 points
    [mesh]     quality = "draft" | "standard" | "fine" (default "standard"),
               segment_length [length]             expert override of the quality setting
    [ground]   kind = "free-space" | "perfect" | "real"  (required when the section is given)
               height [length]                     frame centre above ground (perfect, real)
               soil = "sea-water" | "wet" | "fresh-water" | "medium-dry" | "very-dry"
               OR permittivity [-] and conductivity [S/m]  (real only)
    [tuner]    kind = "range": min, max [capacitance], q (default 1000)
               kind = "plates": plate_width, plate_length, dielectric_thickness [length],
                       travel [length], gaps (default 2), stray [capacitance] (default "10 pF"),
                       dielectric = "air" | "ptfe" | "polypropylene" | "polyethylene" |
                       "polystyrene" | "polyester" | "kraft-paper" | "card" | "glass",
                       permittivity [-] (default: the dielectric's typical value; one of the
                       two is required), q (default: from the dielectric, 1/tan δ, see
                       simloop.tuner.plate_q)
    [receiver] rod_length, rod_diameter [length], permeability [-], coil_turns (int),
               coil_length [length], loaded_q [-], position = [x, y, z] [length],
               axis = [ax, ay, az] (default [0, 1, 0], normalised), coil_inductance [inductance]
               (optional: the measured inductance of the rod coil), coil_offset [length]
               (optional, default 0: the coil's centre from the rod's middle)
    [pattern]  frequency (default "1 MHz"), elevation = [angles] (default ["0 deg"]),
               polarization = "vertical" (default) | "horizontal"
"""

from __future__ import annotations

import difflib
import math
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Annotated, Any, Final, Literal

import numpy as np
from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, PlainValidator, ValidationError
from pydantic_core import PydanticCustomError

from simloop.constants import F_MAX_HZ as _F_MAX_HZ, F_MIN_HZ as _F_MIN_HZ  # docs/references.md §13
from simloop.errors import SpecError
from simloop.tuner import DIELECTRICS, dielectric_by_name, plate_q
from simloop.units import (
    as_written,
    awg_diameter_m,
    format_quantity,
    is_imperial,
    parse_gauge,
    parse_quantity,
)

__all__ = [
    "FrameSpec",
    "GroundSpec",
    "LeadsSpec",
    "MeshSpec",
    "METAL_CONDUCTIVITY_S_M",
    "PatternSpec",
    "ReceiverSpec",
    "SOIL_CLASSES",
    "Spec",
    "SweepSpec",
    "TapsSpec",
    "TunerSpec",
    "WindingSpec",
    "WireSpec",
    "load",
    "loads",
]

# --- Material tables -----------------------------------------------------------------------------

#: Conductivity of the wire metals at 20 °C [S/m]; ``None`` means a lossless conductor.
METAL_CONDUCTIVITY_S_M: Final[dict[str, float | None]] = {
    # IEC 60028, International Annealed Copper Standard: ρ20 = 1/58 Ω·mm²/m -> σ = 58e6 S/m.
    "copper": 5.8e7,
    # From memory, common practice: hard-drawn aluminium per IEC 60889 is about 61 % IACS,
    # 0.61 × 58e6 ≈ 3.54e7 S/m; 3.5e7 S/m is the round value usually used.
    "aluminium": 3.5e7,
    "lossless": None,
}

#: Ground classes at MF as (relative permittivity [-], conductivity [S/m]).
#: ITU-R P.527 classes; the values are FROM MEMORY, read off its Fig. 1 — verify before relying
#: on them.
SOIL_CLASSES: Final[dict[str, tuple[float, float]]] = {
    "sea-water": (70.0, 5.0),
    "wet": (30.0, 1e-2),
    "fresh-water": (80.0, 3e-3),
    "medium-dry": (15.0, 1e-3),
    "very-dry": (3.0, 1e-4),
}

# Limits of the model (our own choices, docs/references.md §13): _F_MIN_HZ/_F_MAX_HZ come from
# simloop.constants (10 kHz .. 30 MHz brackets every use of a medium-wave loop with a wide margin).
_MAX_POINTS: Final = 2001
_MAX_TAPS: Final = 8
_LEAD_OFFSET_DIAMETERS: Final = 4.0  # leads at least 4 wire diameters from the winding
_GROUND_CLEARANCE_M: Final = 0.01  # the lowest lead must stay 1 cm above ground

# Tuner defaults. Common practice for a home-built sliding-plate capacitor: one moving plate
# between two fixed plates (2 dielectric gaps), about 10 pF of stray and lead capacitance (a
# rule-of-thumb estimate, not measured). q = 1000 is an assumption typical of a low-loss film or
# air dielectric at MF, not a measured value; give the real q when it is known.
_TUNER_GAPS: Final = 2
_TUNER_STRAY_F: Final = 10e-12
_TUNER_Q: Final = 1000.0

_NAME_RE: Final = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$")
_NAME_RULE: Final = ('a name is one folder name: letters, digits, ".", "_" and "-", at most 64, '
                     'starting with a letter or digit')


# --- Public result: frozen dataclasses of SI floats ----------------------------------------------

@dataclass(frozen=True)
class FrameSpec:
    """Outer turn of the frame. ``width_m`` horizontal (x), ``height_m`` vertical (z). [m]"""

    width_m: float
    height_m: float


@dataclass(frozen=True)
class WindingSpec:
    """``style`` "stacked" (turns side by side along the loop axis y) or "spiral" (flat, each turn
    inset by the pitch); ``turns`` [-]; ``pitch_m`` centre-to-centre spacing of turns [m]."""

    style: Literal["stacked", "spiral"]
    turns: int
    pitch_m: float


@dataclass(frozen=True)
class WireSpec:
    """Round wire: ``diameter_m`` [m]; ``conductivity_s_m`` [S/m], ``None`` for lossless;
    ``gauge_awg`` the ASTM B258 gauge number n when given as a gauge (4/0 AWG -> -3), else None."""

    diameter_m: float
    metal: Literal["copper", "aluminium", "lossless", "custom"] = "copper"
    conductivity_s_m: float | None = METAL_CONDUCTIVITY_S_M["copper"]
    gauge_awg: int | None = None

    @property
    def radius_m(self) -> float:
        """Wire radius. [m]"""
        return self.diameter_m / 2


@dataclass(frozen=True)
class TapsSpec:
    """Tap positions counted in turns from the start terminal, strictly increasing. [-]"""

    turns: tuple[int, ...]


@dataclass(frozen=True)
class LeadsSpec:
    """How far the tuner leads run from the winding. [m]"""

    offset_m: float = 0.03


@dataclass(frozen=True)
class SweepSpec:
    """Linear frequency sweep from ``start_hz`` to ``stop_hz`` [Hz] with ``points`` points."""

    start_hz: float = 520e3
    stop_hz: float = 1710e3
    points: int = 25

    @property
    def frequencies_hz(self) -> np.ndarray:
        """Sweep frequencies, shape ``(points,)``. [Hz]"""
        return np.linspace(self.start_hz, self.stop_hz, self.points)


@dataclass(frozen=True)
class MeshSpec:
    """Mesh ``quality`` preset, or an explicit uniform ``segment_length_m`` [m] (expert)."""

    quality: Literal["draft", "standard", "fine"] = "standard"
    segment_length_m: float | None = None


@dataclass(frozen=True)
class GroundSpec:
    """Ground under the loop. ``height_m`` frame centre above ground [m] (None in free space);
    ``permittivity`` relative [-] and ``conductivity_s_m`` [S/m] for real ground; ``soil`` the
    ITU-R P.527 class name when the values came from :data:`SOIL_CLASSES`."""

    kind: Literal["free-space", "perfect", "real"] = "free-space"
    height_m: float | None = None
    permittivity: float | None = None
    conductivity_s_m: float | None = None
    soil: str | None = None


@dataclass(frozen=True)
class TunerSpec:
    """Tuning capacitor across the start terminal and the selected tap.

    ``kind="range"``: ``min_f``, ``max_f`` [F] and ``q`` [-]. ``kind="plates"`` (home-built
    parallel-plate capacitor): ``plate_width_m``, ``plate_length_m``, ``dielectric_thickness_m``,
    ``travel_m`` [m], ``gaps`` [-], ``permittivity`` relative [-], ``stray_f`` [F], ``q`` [-].
    Fields the kind does not use are None.
    """

    kind: Literal["range", "plates"]
    min_f: float | None = None
    max_f: float | None = None
    q: float = _TUNER_Q
    plate_width_m: float | None = None
    plate_length_m: float | None = None
    gaps: int | None = None
    dielectric_thickness_m: float | None = None
    permittivity: float | None = None
    travel_m: float | None = None
    stray_f: float | None = None
    dielectric: str | None = None
    q_source: str = "given in the spec (tuner.q)"


@dataclass(frozen=True)
class ReceiverSpec:
    """The portable radio's ferrite-rod antenna.

    ``rod_length_m``, ``rod_diameter_m``, ``coil_length_m`` [m]; ``permeability`` initial
    permeability of the ferrite [-]; ``coil_turns`` [-]; ``loaded_q`` of the radio's tuned rod
    circuit [-]; ``position_m`` rod centre (x, y, z) [m]; ``axis`` unit vector along the rod [-];
    ``coil_inductance_h`` measured rod-coil inductance [H], None when not given;
    ``coil_offset_m`` the coil's centre from the rod's middle [m].
    """

    rod_length_m: float
    rod_diameter_m: float
    permeability: float
    coil_turns: int
    coil_length_m: float
    loaded_q: float
    position_m: tuple[float, float, float]
    axis: tuple[float, float, float] = (0.0, 1.0, 0.0)
    coil_inductance_h: float | None = None
    coil_offset_m: float = 0.0


@dataclass(frozen=True)
class PatternSpec:
    """Pattern cut: ``frequency_hz`` [Hz], ``elevation_deg`` [deg] above the horizon,
    ``polarization`` of the incident wave."""

    frequency_hz: float = 1e6
    elevation_deg: tuple[float, ...] = (0.0,)
    polarization: Literal["vertical", "horizontal"] = "vertical"


@dataclass(frozen=True)
class Spec:
    """A whole, checked spec. ``path`` is the file it came from (None for :func:`loads`)."""

    name: str
    frame: FrameSpec
    winding: WindingSpec
    wire: WireSpec
    taps: TapsSpec
    leads: LeadsSpec
    sweep: SweepSpec
    mesh: MeshSpec
    ground: GroundSpec
    tuner: TunerSpec | None
    receiver: ReceiverSpec | None
    pattern: PatternSpec | None
    path: Path | None
    #: Free text from the spec's ``notes`` key, shown (escaped) in the study report.
    notes: str = ""
    #: The frame or winding was written in inches or feet: lengths are printed in inches and feet
    #: as well as metres.
    imperial: bool = False

    @property
    def length_system(self) -> Literal["metric", "imperial"]:
        """The builder's unit system for reports: "imperial" when :attr:`imperial`."""
        return "imperial" if self.imperial else "metric"


# --- Stage 1: structure (pydantic models of what the user wrote) ---------------------------------

@dataclass(frozen=True)
class _Written:
    """A parsed value and the text the user wrote for it (for stage-2 messages)."""

    value: float
    text: str


def _default(value: float, kind: str) -> _Written:
    return _Written(value, f"the default {format_quantity(value, kind)}")


def _problem(message: str) -> PydanticCustomError:
    # The message goes through the context so that braces in the user's text stay literal.
    return PydanticCustomError("simloop", "{msg}", {"msg": message})


def _quantity(kind: str, sign: str = "positive") -> PlainValidator:
    def check(value: Any) -> _Written:
        try:
            return _Written(parse_quantity(value, kind, sign=sign), as_written(value))
        except SpecError as err:
            raise _problem(err.problems[0][1]) from None

    return PlainValidator(check)


def _number(sign: str = "positive") -> PlainValidator:
    """A dimensionless number (permeability, q, ...)."""

    def check(value: Any) -> _Written:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise _problem(f"must be a number, got {as_written(value)}")
        try:
            number = float(value)  # TOML integers are unbounded: 10**400 overflows
        except OverflowError:
            number = math.inf
        if not math.isfinite(number):
            raise _problem(f"must be a finite number, got {as_written(value)}")
        if sign == "positive" and not number > 0:
            raise _problem(f"must be > 0, got {as_written(value)}")
        return _Written(number, as_written(value))

    return PlainValidator(check)


def _check_integer(value: Any) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise _problem(f"must be an integer, got {as_written(value)}")
    return value


def _choice(*options: str) -> PlainValidator:
    listed = ", ".join(f'"{o}"' for o in options)

    def check(value: Any) -> str:
        if not isinstance(value, str):
            raise _problem(f"must be one of {listed}, got {as_written(value)}")
        if value not in options:
            close = difflib.get_close_matches(value, options, n=1, cutoff=0.6)
            hint = f'; did you mean "{close[0]}"?' if close else ""
            raise _problem(f"{as_written(value)} is not one of {listed}{hint}")
        return value

    return PlainValidator(check)


def _check_string(value: Any) -> str:
    if not isinstance(value, str):
        raise _problem(f"must be a string, got {as_written(value)}")
    return value


def _check_gauge(value: Any) -> tuple[int, str]:
    try:
        return parse_gauge(value), as_written(value)
    except SpecError as err:
        raise _problem(err.problems[0][1]) from None


def _listify(value: Any) -> Any:
    return value if isinstance(value, list) else [value]


_Length = Annotated[_Written, _quantity("length")]
_Coordinate = Annotated[_Written, _quantity("length", sign="any")]
_Frequency = Annotated[_Written, _quantity("frequency")]
_Capacitance = Annotated[_Written, _quantity("capacitance")]
_Stray = Annotated[_Written, _quantity("capacitance", sign="non-negative")]
_Inductance = Annotated[_Written, _quantity("inductance")]
_Angle = Annotated[_Written, _quantity("angle", sign="any")]
_WireConductivity = Annotated[_Written, _quantity("conductivity")]
_GroundConductivity = Annotated[_Written, _quantity("conductivity", sign="non-negative")]
_Positive = Annotated[_Written, _number("positive")]
_Component = Annotated[_Written, _number("any")]
_Int = Annotated[int, PlainValidator(_check_integer)]
_Str = Annotated[str, PlainValidator(_check_string)]
_Gauge = Annotated[tuple[int, str], PlainValidator(_check_gauge)]


class _Table(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, strict=True)


class _FrameIn(_Table):
    width: _Length
    height: _Length


class _WindingIn(_Table):
    style: Annotated[str, _choice("stacked", "spiral")] = "stacked"
    turns: _Int
    pitch: _Length


class _WireIn(_Table):
    gauge: _Gauge | None = None
    diameter: _Length | None = None
    metal: Annotated[str, _choice("copper", "aluminium", "lossless", "custom")] | None = None
    conductivity: _WireConductivity | None = None


class _TapsIn(_Table):
    turns: list[_Int]


class _LeadsIn(_Table):
    offset: _Length = _default(LeadsSpec.offset_m, "length")


class _SweepIn(_Table):
    start: _Frequency = _default(SweepSpec.start_hz, "frequency")
    stop: _Frequency = _default(SweepSpec.stop_hz, "frequency")
    points: _Int = SweepSpec.points


class _MeshIn(_Table):
    quality: Annotated[str, _choice("draft", "standard", "fine")] = MeshSpec.quality
    segment_length: _Length | None = None


class _GroundIn(_Table):
    kind: Annotated[str, _choice("free-space", "perfect", "real")]
    height: _Length | None = None
    soil: Annotated[str, _choice(*SOIL_CLASSES)] | None = None
    permittivity: _Positive | None = None
    conductivity: _GroundConductivity | None = None


class _TunerIn(_Table):
    kind: Annotated[str, _choice("range", "plates")]
    min: _Capacitance | None = None
    max: _Capacitance | None = None
    q: _Positive | None = None
    plate_width: _Length | None = None
    plate_length: _Length | None = None
    gaps: _Int | None = None
    dielectric_thickness: _Length | None = None
    permittivity: _Positive | None = None
    travel: _Length | None = None
    stray: _Stray | None = None
    dielectric: Annotated[str, _choice(*(d.key for d in DIELECTRICS))] | None = None


class _ReceiverIn(_Table):
    rod_length: _Length
    rod_diameter: _Length
    permeability: _Positive
    coil_turns: _Int
    coil_length: _Length
    loaded_q: _Positive
    position: Annotated[list[_Coordinate], Field(min_length=3, max_length=3)]
    axis: Annotated[list[_Component], Field(min_length=3, max_length=3)] = [
        _Written(0.0, "0"), _Written(1.0, "1"), _Written(0.0, "0")]
    coil_inductance: _Inductance | None = None
    coil_offset: _Coordinate | None = None


class _PatternIn(_Table):
    frequency: _Frequency = _default(PatternSpec.frequency_hz, "frequency")
    elevation: Annotated[list[_Angle], BeforeValidator(_listify)] = [_Written(0.0, '"0 deg"')]
    polarization: Annotated[str, _choice("vertical", "horizontal")] = PatternSpec.polarization


class _SpecIn(_Table):
    name: _Str | None = None
    notes: _Str | None = None
    frame: _FrameIn
    winding: _WindingIn
    wire: _WireIn
    taps: _TapsIn
    leads: _LeadsIn = _LeadsIn()
    sweep: _SweepIn = _SweepIn()
    mesh: _MeshIn = _MeshIn()
    ground: _GroundIn | None = None
    tuner: _TunerIn | None = None
    receiver: _ReceiverIn | None = None
    pattern: _PatternIn | None = None


_SECTIONS: Final[dict[str, type[_Table]]] = {
    "frame": _FrameIn, "winding": _WindingIn, "wire": _WireIn, "taps": _TapsIn,
    "leads": _LeadsIn, "sweep": _SweepIn, "mesh": _MeshIn, "ground": _GroundIn,
    "tuner": _TunerIn, "receiver": _ReceiverIn, "pattern": _PatternIn,
}


def _dotted(loc: tuple[str | int, ...]) -> str:
    key = ""
    for part in loc:
        if isinstance(part, int):
            key += f"[{part}]"
        else:
            key += f".{part}" if key else part
    return key


def _allowed_keys(parents: tuple[str | int, ...]) -> list[str]:
    if not parents:
        return ["name", *_SECTIONS]
    model = _SECTIONS.get(str(parents[0])) if len(parents) == 1 else None
    return list(model.model_fields) if model else []


def _near_miss(loc: tuple[str | int, ...]) -> str | None:
    """The allowed key an unknown key at ``loc`` probably meant (difflib), if any."""
    close = difflib.get_close_matches(str(loc[-1]), _allowed_keys(loc[:-1]), n=1, cutoff=0.6)
    return close[0] if close else None


def _homes(loc: tuple[str | int, ...]) -> list[str]:
    """Sections where an unknown key at ``loc`` exists: it was put under the wrong heading."""
    if len(loc) > 2:
        return []
    return [f"[{s}]" for s, m in _SECTIONS.items() if str(loc[-1]) in m.model_fields]


def _suggestion(loc: tuple[str | int, ...]) -> str | None:
    """The key an unknown key at ``loc`` is reported as a misspelling of, if any."""
    return None if _homes(loc) else _near_miss(loc)


def _unknown_key(loc: tuple[str | int, ...], value: Any) -> str:
    parents, name = loc[:-1], str(loc[-1])
    what = "unknown section" if not parents and isinstance(value, dict) else "unknown key"
    homes = _homes(loc)
    if homes:
        return f'{what}; "{name}" belongs in {" or ".join(homes)}'
    close = _suggestion(loc)
    if close:
        return f'{what}; did you mean "{close}"?'
    allowed = _allowed_keys(parents)
    if parents and allowed:
        return f"{what}; [{parents[0]}] takes {', '.join(allowed)}"
    if parents:
        return what
    return f"{what}; a spec takes name and the sections {', '.join(f'[{s}]' for s in _SECTIONS)}"


def _structure_message(err: dict[str, Any]) -> str:
    """One line for one pydantic error, in our words."""
    kind, loc, value = err["type"], tuple(err["loc"]), err.get("input")
    ctx = err.get("ctx") or {}
    if kind == "simloop":
        return str(ctx["msg"])
    if kind == "extra_forbidden":
        return _unknown_key(loc, value)
    if kind == "missing":
        if len(loc) == 1 and loc[0] in _SECTIONS:
            return f"missing required section [{loc[0]}]"
        return "missing required key"
    if kind in ("model_type", "model_attributes_type", "dict_type"):
        section = f" ([{loc[0]}] section)" if len(loc) == 1 else ""
        return f"must be a table{section}, got {as_written(value)}"
    if kind == "list_type":
        return f"must be a list, got {as_written(value)}"
    if kind in ("too_short", "too_long") and loc[-1] in ("position", "axis"):
        return f"must have 3 entries (x, y, z), got {as_written(value)}"
    if kind == "too_short":
        return f"must have at least {ctx.get('min_length')} entries, got {as_written(value)}"
    if kind == "too_long":
        return f"must have at most {ctx.get('max_length')} entries, got {as_written(value)}"
    return f"invalid value {as_written(value)}"  # not expected: every leaf has our own validator


# --- Stage 1b: keys that exclude or require each other, and resolution to SI -------------------

def _resolve_wire(w: _WireIn, problems: list[tuple[str, str]]) -> tuple[WireSpec, str] | None:
    size: tuple[float, int | None, str] | None = None
    if w.gauge is not None and w.diameter is not None:
        problems.append(("wire.diameter", f"{w.diameter.text} conflicts with wire.gauge = "
                                          f"{w.gauge[1]}; give gauge or diameter, not both"))
    elif w.gauge is not None:
        n, text = w.gauge
        d = awg_diameter_m(n)
        size = (d, n, f"the wire diameter {format_quantity(d, 'length')} "
                      f"(wire.gauge = {text})")
    elif w.diameter is not None:
        size = (w.diameter.value, None, f"the wire diameter {w.diameter.text}")
    else:
        problems.append(("wire", 'missing the wire size: give gauge (e.g. "20 AWG") or '
                                 'diameter (e.g. "0.8 mm")'))

    metal: str | None = None
    sigma: float | None = None
    if w.conductivity is not None:
        if w.metal not in (None, "custom"):
            problems.append(("wire.conductivity", f'{w.conductivity.text} conflicts with '
                                                  f'wire.metal = "{w.metal}"; give metal or '
                                                  f'conductivity, not both'))
        else:
            metal, sigma = "custom", w.conductivity.value
    elif w.metal == "custom":
        problems.append(("wire.metal", '"custom" needs wire.conductivity (e.g. "5.8e7 S/m")'))
    else:
        metal = w.metal or "copper"
        sigma = METAL_CONDUCTIVITY_S_M[metal]

    if size is None or metal is None:
        return None
    d, n, text = size
    return WireSpec(diameter_m=d, metal=metal, conductivity_s_m=sigma, gauge_awg=n), text


def _resolve_ground(g: _GroundIn | None, problems: list[tuple[str, str]]) -> GroundSpec | None:
    if g is None:
        return GroundSpec()
    n_before = len(problems)
    given = {k for k in ("height", "soil", "permittivity", "conductivity")
             if getattr(g, k) is not None}
    allowed = {"free-space": set(), "perfect": {"height"},
               "real": {"height", "soil", "permittivity", "conductivity"}}[g.kind]
    for key in ("height", "soil", "permittivity", "conductivity"):
        if key in given and key not in allowed:
            problems.append((f"ground.{key}", f'not used when ground.kind = "{g.kind}"; remove it '
                                              f'or choose another kind'))
    if g.kind in ("perfect", "real") and g.height is None:
        problems.append(("ground.height", f'missing: ground.kind = "{g.kind}" needs the height '
                                          f'of the frame centre above ground'))
    if g.kind == "real":
        electrical = {"permittivity", "conductivity"} & given
        if "soil" in given and electrical:
            key = sorted(electrical)[0]
            problems.append((f"ground.{key}", "conflicts with ground.soil; give soil, or "
                                              "permittivity and conductivity, not both"))
        elif "soil" not in given and not electrical:
            problems.append(("ground", 'kind = "real" needs soil (e.g. "medium-dry") or '
                                       'permittivity and conductivity'))
        elif "soil" not in given and len(electrical) == 1:
            (have,) = electrical
            need = ({"permittivity", "conductivity"} - electrical).pop()
            problems.append((f"ground.{need}", f"missing: ground.{have} needs ground.{need} too"))
    if len(problems) > n_before:
        return None
    if g.kind == "free-space":
        return GroundSpec()
    height = g.height.value if g.height is not None else None
    if g.kind == "perfect":
        return GroundSpec(kind="perfect", height_m=height)
    if g.soil is not None:
        eps, sigma = SOIL_CLASSES[g.soil]
        return GroundSpec(kind="real", height_m=height, permittivity=eps,
                          conductivity_s_m=sigma, soil=g.soil)
    assert g.permittivity is not None and g.conductivity is not None
    return GroundSpec(kind="real", height_m=height, permittivity=g.permittivity.value,
                      conductivity_s_m=g.conductivity.value)


_TUNER_KEYS: Final[dict[str, tuple[set[str], set[str]]]] = {
    # kind: (required keys, optional keys)
    "range": ({"min", "max"}, {"q"}),
    "plates": ({"plate_width", "plate_length", "dielectric_thickness", "travel"},
               {"gaps", "stray", "q", "permittivity", "dielectric"}),
}


def _resolve_tuner(t: _TunerIn | None, problems: list[tuple[str, str]]) -> TunerSpec | None:
    if t is None:
        return None
    n_before = len(problems)
    required, optional = _TUNER_KEYS[t.kind]
    for key in _TunerIn.model_fields:
        if key == "kind":
            continue
        present = getattr(t, key) is not None
        if present and key not in required | optional:
            problems.append((f"tuner.{key}", f'not used when tuner.kind = "{t.kind}"; remove it '
                                             f'or choose another kind'))
        if not present and key in required:
            problems.append((f"tuner.{key}", f'missing: tuner.kind = "{t.kind}" needs it'))
    if len(problems) > n_before:
        return None
    q = t.q.value if t.q is not None else _TUNER_Q
    q_source = "given in the spec (tuner.q)" if t.q is not None else "assumed for an air-variable"
    if t.kind == "range":
        assert t.min is not None and t.max is not None
        return TunerSpec(kind="range", min_f=t.min.value, max_f=t.max.value, q=q, q_source=q_source)
    if t.permittivity is None and t.dielectric is None:
        problems.append(("tuner.permittivity", 'missing: tuner.kind = "plates" needs it, or name '
                                               'tuner.dielectric (e.g. "polypropylene")'))
        return None
    assert t.plate_width and t.plate_length and t.dielectric_thickness
    assert t.travel is not None
    permittivity = (t.permittivity.value if t.permittivity is not None
                    else dielectric_by_name(t.dielectric).typical_permittivity)
    if t.q is None:  # the plate capacitor's Q comes from its dielectric (simloop.tuner.plate_q)
        q, q_source = plate_q(permittivity, t.dielectric)
    return TunerSpec(
        kind="plates", q=q, q_source=q_source, dielectric=t.dielectric,
        plate_width_m=t.plate_width.value,
        plate_length_m=t.plate_length.value,
        gaps=t.gaps if t.gaps is not None else _TUNER_GAPS,
        dielectric_thickness_m=t.dielectric_thickness.value, permittivity=permittivity,
        travel_m=t.travel.value, stray_f=t.stray.value if t.stray is not None else _TUNER_STRAY_F)


# --- Stage 2: physics ----------------------------------------------------------------------------

def _mm(value_m: float) -> str:
    return format_quantity(value_m, "length")


def _check_name(name: str | None, source: str) -> tuple[str | None, tuple[str, str] | None]:
    if name is None:
        if source.startswith("<"):
            return None, ("name", 'missing required key (a spec read from a string has no file '
                                  'name to default to); add e.g. name = "my-loop"')
        stem = Path(source).stem
        if _NAME_RE.match(stem) is None:
            return None, ("name", f'missing, and the file name "{stem}" is not a safe folder name '
                                  f'({_NAME_RULE}); add name = "..."')
        return stem, None
    if "/" in name or "\\" in name or name.startswith(".") or name == "..":
        return None, ("name", f'"{name}" would write outside the results folder; {_NAME_RULE}')
    if _NAME_RE.match(name) is None:
        return None, ("name", f'"{name}" is not a safe folder name; {_NAME_RULE}')
    return name, None


def _physics_winding(m: _SpecIn, d: float, wire_text: str) -> list[tuple[str, str]]:
    """Stage 2, winding: the (key, message) problems of this section."""
    p: list[tuple[str, str]] = []
    win = m.winding
    if win.turns < 1:
        p.append(("winding.turns", f"must be at least 1, got {win.turns}"))
    if not win.pitch.value > d:
        p.append(("winding.pitch", f"{win.pitch.text} must exceed {wire_text}; the turns would "
                                   f"touch"))
    if win.style == "spiral" and win.turns >= 1:
        pitch = win.pitch.value
        for side, dim in (("width", m.frame.width), ("height", m.frame.height)):
            inner = dim.value - 2 * win.turns * pitch
            if not inner > 2 * pitch:
                p.append(("winding.turns", f"{win.turns} turns at pitch {win.pitch.text} in "
                                           f"frame.{side} = {dim.text}: the inner turn collapses "
                                           f"({side} - 2 × turns × pitch = {_mm(inner)} must "
                                           f"exceed 2 × pitch = {_mm(2 * pitch)})"))
                break
    return p


def _physics_taps(m: _SpecIn) -> list[tuple[str, str]]:
    """Stage 2, taps: the (key, message) problems of this section."""
    p: list[tuple[str, str]] = []
    win = m.winding
    taps = m.taps.turns
    if not taps:
        p.append(("taps.turns", "needs at least one tap, got []"))
    elif len(taps) > _MAX_TAPS:
        p.append(("taps.turns", f"at most {_MAX_TAPS} taps, got {len(taps)}: "
                                f"{as_written(taps)}"))
    for tap in taps:
        if tap < 1:
            p.append(("taps.turns", f"tap {tap} in {as_written(taps)} must be at least 1"))
            break
    for before, tap in zip(taps, taps[1:]):
        if not tap > before:
            p.append(("taps.turns", f"{as_written(taps)} must be strictly increasing; {tap} "
                                    f"comes after {before}"))
            break
    if win.turns >= 1:
        beyond = [t for t in taps if t > win.turns]
        if beyond:
            p.append(("taps.turns", f"tap {beyond[0]} in {as_written(taps)} is beyond the "
                                    f"winding (winding.turns = {win.turns})"))
    return p


def _physics_leads(m: _SpecIn, d: float, wire_text: str) -> list[tuple[str, str]]:
    """Stage 2, leads: the (key, message) problems of this section."""
    p: list[tuple[str, str]] = []
    offset = m.leads.offset
    if offset.value < _LEAD_OFFSET_DIAMETERS * d:
        p.append(("leads.offset", f"{offset.text} must be at least 4 × {wire_text} = "
                                  f"{_mm(_LEAD_OFFSET_DIAMETERS * d)}"))
    return p


def _physics_sweep(m: _SpecIn) -> list[tuple[str, str]]:
    """Stage 2, sweep: the (key, message) problems of this section."""
    p: list[tuple[str, str]] = []
    s = m.sweep
    if not s.stop.value > s.start.value:
        p.append(("sweep.stop", f"{s.stop.text} must be above sweep.start = {s.start.text} "
                                f"(reversed sweep)"))
    if s.start.value < _F_MIN_HZ:
        p.append(("sweep.start", f"{s.start.text} is below 10 kHz, the lowest frequency simloop "
                                 f"models"))
    if s.stop.value > _F_MAX_HZ:
        p.append(("sweep.stop", f"{s.stop.text} is above 30 MHz, the highest frequency simloop "
                                f"models"))
    if s.points < 2:
        p.append(("sweep.points", f"must be at least 2, got {s.points}"))
    elif s.points > _MAX_POINTS:
        p.append(("sweep.points", f"must be at most {_MAX_POINTS}, got {s.points}"))
    return p


def _physics_mesh(m: _SpecIn, d: float, wire_text: str) -> list[tuple[str, str]]:
    """Stage 2, mesh: the (key, message) problems of this section."""
    p: list[tuple[str, str]] = []
    seg = m.mesh.segment_length
    if seg is not None and not seg.value > d:
        p.append(("mesh.segment_length", f"{seg.text} must exceed 2 × the wire radius, that "
                                         f"is {wire_text}"))
    return p


def _physics_ground(m: _SpecIn) -> list[tuple[str, str]]:
    """Stage 2, ground: the (key, message) problems of this section."""
    p: list[tuple[str, str]] = []
    offset = m.leads.offset
    g = m.ground
    if g is not None and g.height is not None:
        need = m.frame.height.value / 2 + offset.value + _GROUND_CLEARANCE_M
        if not g.height.value > need:
            p.append(("ground.height", f"{g.height.text} puts the frame in the ground: it must "
                                       f"exceed half of frame.height ({m.frame.height.text}) + "
                                       f"leads.offset ({offset.text}) + 1 cm = {_mm(need)}"))
    if g is not None and g.permittivity is not None and g.permittivity.value < 1:
        p.append(("ground.permittivity", f"must be at least 1, got {g.permittivity.text}"))
    return p


def _physics_tuner(m: _SpecIn) -> list[tuple[str, str]]:
    """Stage 2, tuner: the (key, message) problems of this section."""
    p: list[tuple[str, str]] = []
    t = m.tuner
    if t is not None and t.kind == "range" and t.min is not None and t.max is not None:
        if not t.max.value > t.min.value:
            p.append(("tuner.max", f"{t.max.text} must be above tuner.min = {t.min.text}"))
    if t is not None and t.kind == "plates":
        if t.gaps is not None and t.gaps < 1:
            p.append(("tuner.gaps", f"must be at least 1, got {t.gaps}"))
        if t.permittivity is not None and t.permittivity.value < 1:
            p.append(("tuner.permittivity", f"must be at least 1, got {t.permittivity.text}"))
    return p


def _physics_receiver(m: _SpecIn) -> list[tuple[str, str]]:
    """Stage 2, receiver: the (key, message) problems of this section."""
    p: list[tuple[str, str]] = []
    r = m.receiver
    if r is not None:
        if not r.rod_length.value > r.rod_diameter.value:
            p.append(("receiver.rod_length", f"{r.rod_length.text} must exceed "
                                             f"receiver.rod_diameter = {r.rod_diameter.text}"))
        if r.permeability.value < 1:
            p.append(("receiver.permeability", f"must be at least 1, got "
                                               f"{r.permeability.text}"))
        if r.coil_turns < 1:
            p.append(("receiver.coil_turns", f"must be at least 1, got {r.coil_turns}"))
        off = r.coil_offset
        if off is not None and not abs(off.value) + r.coil_length.value / 2 <= r.rod_length.value / 2:
            p.append(("receiver.coil_offset", f"{off.text} puts the coil (length {r.coil_length.text}) "
                                              f"past the end of the rod (length {r.rod_length.text})"))
        if all(c.value == 0 for c in r.axis):
            p.append(("receiver.axis", f"[{', '.join(c.text for c in r.axis)}] has no direction; "
                                       f"give a non-zero vector such as [0, 1, 0]"))
    return p


def _physics_pattern(m: _SpecIn) -> list[tuple[str, str]]:
    """Stage 2, pattern: the (key, message) problems of this section."""
    p: list[tuple[str, str]] = []
    pat = m.pattern
    if pat is not None:
        if not pat.elevation:
            p.append(("pattern.elevation", 'needs at least one elevation, e.g. ["0 deg"]'))
        for i, el in enumerate(pat.elevation):
            if not 0 <= el.value < 90:
                p.append((f"pattern.elevation[{i}]", f"{el.text} is outside [0, 90) degrees"))
        f = pat.frequency
        if not _F_MIN_HZ <= f.value <= _F_MAX_HZ:
            p.append(("pattern.frequency", f"{f.text} is outside 10 kHz to 30 MHz, the range "
                                           f"simloop models"))
    return p


def _physics(m: _SpecIn, wire: WireSpec, wire_text: str) -> list[tuple[str, str]]:
    """Stage 2: the physical rules, section by section, as (key, message) problems."""
    d = wire.diameter_m
    return [problem for stage in (
        _physics_winding(m, d, wire_text),
        _physics_taps(m),
        _physics_leads(m, d, wire_text),
        _physics_sweep(m),
        _physics_mesh(m, d, wire_text),
        _physics_ground(m),
        _physics_tuner(m),
        _physics_receiver(m),
        _physics_pattern(m),
    ) for problem in stage]


# --- Stage 3: size (estimated from the numbers, before any geometry is built) ------------------

def _bare(w: _Written) -> bool:
    """True when the user wrote a bare number (read as the SI unit) rather than a quantity string."""
    return not w.text.startswith(('"', "'", "the default"))


def _size_problems(m: _SpecIn, wire: WireSpec) -> list[tuple[str, str]]:
    """Refuse a spec whose mesh would exceed :data:`simloop.mesh.MAX_SEGMENTS`, naming the keys
    that drive the count, with a units hint for lengths written as bare numbers (metres)."""
    from simloop.mesh import MAX_SEGMENTS, solve_cost, estimate_segments

    fr, wd, ms = m.frame, m.winding, m.mesh
    smallest = 6 * 2 * wire.radius_m  # a side must hold segments of at least two wire radii
    for key, w in (("frame.width", fr.width), ("frame.height", fr.height)):
        if not w.value >= smallest:
            return [(key, f"{w.text} is too small to mesh: a side must be at least six wire diameters "
                          f"({smallest * 1e3:.3g} mm) long{_units_hint(key, w)}")]
    seg = ms.segment_length
    n, limit = estimate_segments(fr.width.value, fr.height.value, wd.turns, wd.pitch.value, wd.style,
                                 ms.quality, m.sweep.stop.value, seg.value if seg is not None else None)
    if n <= MAX_SEGMENTS:
        return []
    drivers = [("frame.width", fr.width), ("frame.height", fr.height)]
    by = {"segment_length": [("mesh.segment_length", seg)],
          "turn": [("mesh.quality", _Written(0, f'"{ms.quality}"'))],
          "pitch": [("winding.pitch", wd.pitch), ("mesh.quality", _Written(0, f'"{ms.quality}"'))],
          "wavelength": [("sweep.stop", m.sweep.stop)]}[limit]
    turns = str(wd.turns) if len(str(wd.turns)) <= 12 else f"a {len(str(wd.turns))}-digit number"
    drivers = [("winding.turns", _Written(0, turns))] + drivers + by
    if math.isfinite(n) and n < 1e12:
        seconds, memory_b = solve_cost(n)
        size = (f"at least {n:,.0f} segments, more than the {MAX_SEGMENTS} this tool solves (about "
                f"{memory_b / 1e9:.3g} GB and {seconds / 3600:.3g} h per frequency)")
    else:
        size = f"more segments than any computer can solve (this tool solves at most {MAX_SEGMENTS})"
    message = (f"the mesh would have {size}; the size comes from {', '.join(f'{k} = {w.text}' for k, w in drivers)}: fewer turns, a "
               f"smaller frame or a coarser mesh make it smaller")
    bare = [(k, w) for k, w in drivers if k not in ("winding.turns", "mesh.quality") and _bare(w)]
    message += "".join(_units_hint(k, w) for k, w in bare)
    key = bare[0][0] if bare else "winding.turns"
    return [(key, message)]


def _units_hint(key: str, w: _Written) -> str:
    if not _bare(w):
        return ""
    unit = "Hz" if key == "sweep.stop" else "m"
    return (f". Note: {key} = {w.text} is a bare number, read in the SI unit as {w.text} {unit}; "
            f"write the unit if you meant another (\"{w.text} cm\", \"{w.text} in\", \"{w.text} mm\")"
            if unit == "m" else
            f". Note: {key} = {w.text} is a bare number, read as {w.text} Hz; write \"{w.text} kHz\" if meant")


# --- Building the result -------------------------------------------------------------------------

def _build(m: _SpecIn, name: str, wire: WireSpec, ground: GroundSpec, tuner: TunerSpec | None,
           path: Path | None) -> Spec:
    receiver = None
    if m.receiver is not None:
        r = m.receiver
        ax = np.array([c.value for c in r.axis])
        ax = ax / np.max(np.abs(ax))  # scaled first: the norm of [1e-320, 0, 0] or [1e308, 1e308, 0]
        ax = ax / np.linalg.norm(ax)  # under- or overflows, and a NaN axis would pass every check
        receiver = ReceiverSpec(
            rod_length_m=r.rod_length.value, rod_diameter_m=r.rod_diameter.value,
            permeability=r.permeability.value, coil_turns=r.coil_turns,
            coil_length_m=r.coil_length.value, loaded_q=r.loaded_q.value,
            position_m=(r.position[0].value, r.position[1].value, r.position[2].value),
            axis=(float(ax[0]), float(ax[1]), float(ax[2])),
            coil_inductance_h=r.coil_inductance.value if r.coil_inductance else None,
            coil_offset_m=r.coil_offset.value if r.coil_offset else 0.0)
    pattern = None
    if m.pattern is not None:
        pattern = PatternSpec(frequency_hz=m.pattern.frequency.value,
                              elevation_deg=tuple(e.value for e in m.pattern.elevation),
                              polarization=m.pattern.polarization)  # type: ignore[arg-type]
    seg = m.mesh.segment_length
    return Spec(
        name=name,
        frame=FrameSpec(width_m=m.frame.width.value, height_m=m.frame.height.value),
        winding=WindingSpec(style=m.winding.style,  # type: ignore[arg-type]
                            turns=m.winding.turns, pitch_m=m.winding.pitch.value),
        wire=wire,
        taps=TapsSpec(turns=tuple(m.taps.turns)),
        leads=LeadsSpec(offset_m=m.leads.offset.value),
        sweep=SweepSpec(start_hz=m.sweep.start.value, stop_hz=m.sweep.stop.value,
                        points=m.sweep.points),
        mesh=MeshSpec(quality=m.mesh.quality,  # type: ignore[arg-type]
                      segment_length_m=seg.value if seg is not None else None),
        ground=ground,
        tuner=tuner,
        receiver=receiver,
        pattern=pattern,
        path=path,
        notes=m.notes or "",
        imperial=any(is_imperial(v.text) for v in (m.frame.width, m.frame.height, m.winding.pitch)),
    )


def _toml_error(err: tomllib.TOMLDecodeError, text: str, source: str) -> SpecError:
    message = str(err)
    match = re.match(r"^(?P<what>.*) \(at line (?P<line>\d+), column (?P<col>\d+)\)$", message)
    if match:
        where = f"line {match['line']}, column {match['col']}"
        what = match["what"]
    elif message.endswith(" (at end of document)"):
        where = f"the end of the file (line {text.count(chr(10)) + 1})"
        what = message.removesuffix(" (at end of document)")
    else:  # pragma: no cover - tomllib always says where
        where, what = "an unknown place", message
    return SpecError(source, f"TOML syntax error at {where}: {what}")


def _parse(text: str, source: str, path: Path | None) -> Spec:
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise _toml_error(err, text, source) from None
    except RecursionError:
        raise SpecError(source, "TOML nested too deeply (arrays or tables inside each other "
                                "thousands of levels deep); a spec needs at most three levels") from None

    # Stage 1: structure.
    try:
        model = _SpecIn.model_validate(data)
    except ValidationError as err:
        errors = err.errors(include_url=False)
        # "frame.width: missing" is noise beside "frame.widht: unknown key; did you mean "width"?"
        meant = {(*e["loc"][:-1], _suggestion(tuple(e["loc"]))) for e in errors
                 if e["type"] == "extra_forbidden"}
        problems = [(_dotted(tuple(e["loc"])), _structure_message(e)) for e in errors
                    if not (e["type"] == "missing" and tuple(e["loc"]) in meant)]
        raise SpecError(problems[0][0], problems[0][1], problems) from None
    problems: list[tuple[str, str]] = []
    name, name_problem = _check_name(model.name, source)
    wire_and_text = _resolve_wire(model.wire, problems)
    ground = _resolve_ground(model.ground, problems)
    tuner = _resolve_tuner(model.tuner, problems)
    if problems:
        raise SpecError(problems[0][0], problems[0][1], problems)

    # Stage 2: physics.
    assert wire_and_text is not None and ground is not None
    wire, wire_text = wire_and_text
    problems = ([name_problem] if name_problem else []) + _physics(model, wire, wire_text)
    if problems:
        raise SpecError(problems[0][0], problems[0][1], problems)
    problems = _size_problems(model, wire)  # before anything is built: see simloop.mesh.MAX_SEGMENTS
    if problems:
        raise SpecError(problems[0][0], problems[0][1], problems)
    assert name is not None
    return _build(model, name, wire, ground, tuner, path)


def loads(text: str, source: str = "<string>") -> Spec:
    """Read a spec from TOML text.

    Parameters
    ----------
    text : str
        The spec in TOML.
    source : str
        Named in messages as the file; when it is a file name (not ``"<...>"``) its stem is the
        default ``name``.

    Returns
    -------
    Spec

    Raises
    ------
    SpecError
        Every problem found in the stage that failed, one ``dotted.key: message`` line each.
    """
    return _parse(text, source, None)


def load(path: str | Path) -> Spec:
    """Read a spec file (TOML, UTF-8). The default ``name`` is the file name without suffix.

    Parameters
    ----------
    path : str or Path
        The spec file.

    Returns
    -------
    Spec
        With ``path`` set to the file read.

    Raises
    ------
    SpecError
        The file cannot be read, or the spec is wrong (see :func:`loads`).
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise SpecError(str(path), "cannot read the spec file: no such file") from None
    except IsADirectoryError:
        raise SpecError(str(path), "cannot read the spec file: it is a directory") from None
    except OSError as err:
        raise SpecError(str(path), f"cannot read the spec file: {err.strerror}") from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        raise SpecError(str(path), f"not UTF-8 text (bad byte at offset {err.start})") from None
    return _parse(text, str(path), path)
