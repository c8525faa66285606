"""Reading spec files (simloop.spec): the full example spec, defaults, and every bad input.

Sources: the spec format is the project's own (README, "The spec file"); unit and wire values cite
ASTM B258, IEC 60028 and ITU-R P.527 via docs/references.md §4 and §7.
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np
import pytest

from simloop.errors import SpecError
from simloop.spec import (
    METAL_CONDUCTIVITY_S_M,
    SOIL_CLASSES,
    GroundSpec,
    LeadsSpec,
    MeshSpec,
    Spec,
    SweepSpec,
    WindingSpec,
    load,
    loads,
)
from simloop.units import awg_diameter_m

# The project's full example spec, every section (comments included, they are part of what must parse).
DESIGN_EXAMPLE = '''\
name = "shed-loop"                 # results go to results/<name>/ unless --out is given

[frame]
width = "0.80 m"                   # outer turn, horizontal side
height = "0.60 m"                  # outer turn, vertical side

[winding]
style = "stacked"                  # "stacked": equal turns side by side along the axis
                                   # "spiral":  flat, each turn inset by the pitch
turns = 10
pitch = "6 mm"                     # centre-to-centre spacing of adjacent turns

[wire]
gauge = "20 AWG"                   # or: diameter = "0.8 mm"
metal = "copper"                   # copper | aluminium | lossless ; or: conductivity = "5.8e7 S/m"

[taps]
turns = [6, 8, 10]                 # tap points counted in turns from the start terminal

[leads]
offset = "3 cm"                    # how far the tuner leads run from the winding

[sweep]
start = "500 kHz"
stop = "1800 kHz"
points = 27

[ground]                           # optional; default free space
kind = "real"                      # free-space | perfect | real
height = "1.5 m"                   # frame centre above ground
soil = "medium-dry"                # ITU-R P.527 classes, or permittivity = 15, conductivity = "1e-3 S/m"

[tuner]                            # the tuning capacitor across start terminal and selected tap
kind = "range"                     # "range" or "plates" (a home-built parallel-plate capacitor)
min = "12 pF"
max = "450 pF"
q = 400

[receiver]                         # the portable radio's ferrite-rod antenna
rod_length = "100 mm"
rod_diameter = "10 mm"
permeability = 125                 # initial permeability of the ferrite
coil_turns = 65
coil_length = "20 mm"
loaded_q = 60                      # Q of the radio's tuned rod circuit
position = ["0 m", "0.25 m", "-0.20 m"]   # rod centre
axis = [0, 1, 0]                   # rod axis (normalised by the tool)

[pattern]
frequency = "1 MHz"
elevation = ["0 deg", "30 deg"]
polarization = "vertical"
'''

# A minimal valid spec as {section: {key: TOML literal}}; "" is the top level.
BASE: dict[str, dict[str, str]] = {
    "": {"name": '"t"'},
    "frame": {"width": '"0.8 m"', "height": '"0.6 m"'},
    "winding": {"turns": "10", "pitch": '"6 mm"'},
    "wire": {"gauge": '"20 AWG"'},
    "taps": {"turns": "[6, 8, 10]"},
}


def make(changes: dict[str, str | None] | None = None) -> str:
    """TOML text of BASE with ``{"section.key": literal}`` set, or removed when None."""
    tables = {section: dict(keys) for section, keys in BASE.items()}
    for dotted, literal in (changes or {}).items():
        section, _, key = dotted.rpartition(".")
        table = tables.setdefault(section, {})
        if literal is None:
            table.pop(key, None)
        else:
            table[key] = literal
    lines = [f"{k} = {v}" for k, v in tables.pop("").items()]
    for section, keys in tables.items():
        lines.append(f"[{section}]")
        lines += [f"{k} = {v}" for k, v in keys.items()]
    return "\n".join(lines) + "\n"


def problems_of(text: str, source: str = "<string>") -> SpecError:
    with pytest.raises(SpecError) as err:
        loads(text, source)
    return err.value


# --- the full example spec -----------------------------------------------------------------------

def test_design_example_parses_to_si():
    spec = loads(DESIGN_EXAMPLE)
    assert spec.name == "shed-loop"
    assert spec.path is None
    assert (spec.frame.width_m, spec.frame.height_m) == pytest.approx((0.80, 0.60), rel=1e-15, abs=0)
    assert spec.winding.style == "stacked"
    assert spec.winding.turns == 10 and isinstance(spec.winding.turns, int)
    assert spec.winding.pitch_m == pytest.approx(6e-3, rel=1e-15, abs=0)
    assert spec.wire.gauge_awg == 20
    assert spec.wire.diameter_m == pytest.approx(0.8118e-3, abs=0.5e-7)  # ASTM B258 [calc]
    assert spec.wire.radius_m == pytest.approx(spec.wire.diameter_m / 2, rel=1e-15, abs=0)
    assert spec.wire.metal == "copper"
    assert spec.wire.conductivity_s_m == 5.8e7
    assert spec.taps.turns == (6, 8, 10)
    assert spec.leads.offset_m == pytest.approx(0.03, rel=1e-15, abs=0)
    assert (spec.sweep.start_hz, spec.sweep.stop_hz, spec.sweep.points) == (500e3, 1800e3, 27)
    assert spec.mesh == MeshSpec(quality="standard", segment_length_m=None)
    assert spec.ground == GroundSpec(kind="real", height_m=1.5, permittivity=15.0,
                                     conductivity_s_m=1e-3, soil="medium-dry")
    tuner = spec.tuner
    assert tuner is not None and tuner.kind == "range"
    assert tuner.min_f == pytest.approx(12e-12, rel=1e-15, abs=0)
    assert tuner.max_f == pytest.approx(450e-12, rel=1e-15, abs=0)
    assert tuner.q == 400.0
    assert (tuner.plate_width_m, tuner.gaps, tuner.stray_f) == (None, None, None)
    rx = spec.receiver
    assert rx is not None
    assert rx.rod_length_m == pytest.approx(0.100) and rx.rod_diameter_m == pytest.approx(0.010)
    assert rx.permeability == 125.0 and rx.coil_turns == 65 and rx.loaded_q == 60.0
    assert rx.coil_length_m == pytest.approx(0.020)
    assert rx.position_m == pytest.approx((0.0, 0.25, -0.20))
    assert rx.axis == (0.0, 1.0, 0.0)
    assert rx.coil_inductance_h is None
    pattern = spec.pattern
    assert pattern is not None
    assert pattern.frequency_hz == 1e6
    assert pattern.elevation_deg == (0.0, 30.0)
    assert pattern.polarization == "vertical"


def test_sweep_frequencies_are_linear():
    spec = loads(DESIGN_EXAMPLE)
    f = spec.sweep.frequencies_hz
    assert f.shape == (27,)
    assert f[0] == 500e3 and f[-1] == 1800e3
    assert np.allclose(np.diff(f), 50e3, rtol=1e-12)


def test_result_is_frozen_dataclasses_of_floats():
    spec = loads(DESIGN_EXAMPLE)
    assert isinstance(spec, Spec)
    with pytest.raises(dataclasses.FrozenInstanceError):
        spec.frame.width_m = 1.0  # type: ignore[misc]
    with pytest.raises(dataclasses.FrozenInstanceError):
        spec.name = "x"  # type: ignore[misc]
    for section in (spec.frame, spec.winding, spec.wire, spec.sweep, spec.ground, spec.tuner,
                    spec.receiver, spec.pattern):
        assert dataclasses.is_dataclass(section)
    assert type(spec.frame.width_m) is float


def test_load_reads_a_file_and_records_its_path(tmp_path: Path):
    path = tmp_path / "shed.toml"
    path.write_text(DESIGN_EXAMPLE, encoding="utf-8")
    spec = load(path)
    assert spec.path == path
    assert spec.name == "shed-loop"  # the name key wins over the file name


def test_name_defaults_to_file_stem(tmp_path: Path):
    path = tmp_path / "attic-loop.toml"
    path.write_text(make({"name": None}), encoding="utf-8")
    assert load(path).name == "attic-loop"
    assert loads(make({"name": None}), source="geometries/garden_1.toml").name == "garden_1"


def test_name_required_without_a_file():
    err = problems_of(make({"name": None}))
    assert str(err).startswith("name: missing required key")


def test_unsafe_file_stem_needs_a_name():
    err = problems_of(make({"name": None}), source="geometries/my loop.toml")
    assert 'name: missing, and the file name "my loop" is not a safe folder name' in str(err)


def test_utf8_bom_is_accepted(tmp_path: Path):
    path = tmp_path / "bom.toml"
    path.write_bytes(b"\xef\xbb\xbf" + make().encode())
    assert load(path).name == "t"


def test_missing_file_names_the_path(tmp_path: Path):
    path = tmp_path / "nope.toml"
    with pytest.raises(SpecError) as err:
        load(path)
    assert str(err.value) == f"{path}: cannot read the spec file: no such file"


def test_non_utf8_file(tmp_path: Path):
    path = tmp_path / "latin1.toml"
    path.write_bytes(make({"name": '"caf\xe9"'}).encode("latin-1"))
    with pytest.raises(SpecError, match=r"not UTF-8 text \(bad byte at offset 11\)"):
        load(path)


# --- defaults ------------------------------------------------------------------------------------

def test_optional_sections_default():
    spec = loads(make())
    assert spec.winding.style == "stacked"
    assert spec.leads == LeadsSpec(offset_m=0.03)
    assert spec.sweep == SweepSpec(start_hz=520e3, stop_hz=1710e3, points=25)
    assert spec.mesh == MeshSpec(quality="standard", segment_length_m=None)
    assert spec.ground == GroundSpec(kind="free-space")
    assert (spec.tuner, spec.receiver, spec.pattern) == (None, None, None)
    assert spec.wire.metal == "copper"


def test_pattern_defaults():
    spec = loads(make({"pattern.polarization": '"horizontal"'}))
    assert spec.pattern is not None
    assert spec.pattern.frequency_hz == 1e6
    assert spec.pattern.elevation_deg == (0.0,)
    assert spec.pattern.polarization == "horizontal"


def test_single_elevation_may_be_a_scalar():
    spec = loads(make({"pattern.elevation": '"0.5 rad"'}))
    assert spec.pattern is not None
    assert spec.pattern.elevation_deg == pytest.approx((math.degrees(0.5),))


def test_plates_tuner_defaults():
    spec = loads(make({"tuner.kind": '"plates"', "tuner.plate_width": '"10 cm"',
                       "tuner.plate_length": '"20 cm"', "tuner.dielectric_thickness": '"0.1 mm"',
                       "tuner.permittivity": "2.2", "tuner.travel": '"15 cm"'}))
    t = spec.tuner
    assert t is not None and t.kind == "plates"
    # Without tuner.q the Q comes from the dielectric: ε_r 2.2 matches PTFE, polypropylene and
    # kraft paper; the lossiest, paper (tan δ 0.01, approximate), gives Q = 1/tan δ = 100.
    assert (t.gaps, t.stray_f) == (2, 10e-12)
    assert t.q == pytest.approx(100.0, rel=1e-12, abs=0) and "kraft paper" in t.q_source
    assert t.plate_width_m == pytest.approx(0.1) and t.plate_length_m == pytest.approx(0.2)
    assert t.dielectric_thickness_m == pytest.approx(1e-4) and t.travel_m == pytest.approx(0.15)
    assert t.permittivity == 2.2
    assert (t.min_f, t.max_f) == (None, None)


def test_range_tuner_default_q():
    spec = loads(make({"tuner.kind": '"range"', "tuner.min": '"12 pF"', "tuner.max": '"365 pF"'}))
    assert spec.tuner is not None and spec.tuner.q == 1000.0


def test_receiver_axis_is_normalised_and_inductance_optional():
    spec = loads(make({
        "receiver.rod_length": '"100 mm"', "receiver.rod_diameter": '"10 mm"',
        "receiver.permeability": "125", "receiver.coil_turns": "65",
        "receiver.coil_length": '"20 mm"', "receiver.loaded_q": "60",
        "receiver.position": '["0 m", "0.25 m", -0.2]', "receiver.axis": "[3, 4, 0]",
        "receiver.coil_inductance": '"237 uH"'}))
    rx = spec.receiver
    assert rx is not None
    assert rx.axis == pytest.approx((0.6, 0.8, 0.0), rel=1e-15, abs=0)
    assert rx.position_m == pytest.approx((0.0, 0.25, -0.2))
    assert rx.coil_inductance_h == pytest.approx(237e-6)


# --- wire ----------------------------------------------------------------------------------------

def test_copper_conductivity_per_iec_60028():
    # IEC 60028 annealed copper standard: ρ20 = 1/58 Ω·mm²/m = (1/58)·1e-6 Ω·m [src secondary]
    assert METAL_CONDUCTIVITY_S_M["copper"] == pytest.approx(1 / (1e-6 / 58), rel=1e-12, abs=0)
    assert 1 / METAL_CONDUCTIVITY_S_M["copper"] == pytest.approx(1.7241e-8, rel=1e-4, abs=0)


def test_aluminium_and_lossless():
    # aluminium 3.5e7 S/m: common practice, from memory (≈ 61 % IACS hard-drawn, IEC 60889)
    al = loads(make({"wire.metal": '"aluminium"'})).wire
    assert (al.metal, al.conductivity_s_m) == ("aluminium", 3.5e7)
    lossless = loads(make({"wire.metal": '"lossless"'})).wire
    assert (lossless.metal, lossless.conductivity_s_m) == ("lossless", None)


def test_custom_conductivity_and_diameter():
    wire = loads(make({"wire.gauge": None, "wire.diameter": '"1.5 mm"',
                       "wire.conductivity": '"4.1e7 S/m"'})).wire
    assert wire.diameter_m == pytest.approx(1.5e-3)
    assert wire.gauge_awg is None
    assert (wire.metal, wire.conductivity_s_m) == ("custom", 4.1e7)


def test_aught_gauge():
    # pitch ≥ 3 wire diameters (35.05 mm) so the tap leads clear the neighbouring turn
    wire = loads(make({"wire.gauge": '"4/0 AWG"', "winding.pitch": '"36 mm"',
                       "leads.offset": '"5 cm"'})).wire
    assert wire.gauge_awg == -3
    assert wire.diameter_m == pytest.approx(awg_diameter_m(-3)) == pytest.approx(11.684e-3)


# --- ground --------------------------------------------------------------------------------------

@pytest.mark.parametrize(("soil", "eps", "sigma"), [
    # ITU-R P.527 classes, values from memory (read off its Fig. 1), docs/references.md §7 [mem]
    ("sea-water", 70.0, 5.0), ("wet", 30.0, 1e-2), ("fresh-water", 80.0, 3e-3),
    ("medium-dry", 15.0, 1e-3), ("very-dry", 3.0, 1e-4),
])
def test_soil_classes(soil, eps, sigma):
    assert SOIL_CLASSES[soil] == (eps, sigma)
    ground = loads(make({"ground.kind": '"real"', "ground.height": '"2 m"',
                         "ground.soil": f'"{soil}"'})).ground
    assert (ground.permittivity, ground.conductivity_s_m, ground.soil) == (eps, sigma, soil)


def test_real_ground_from_numbers_and_perfect_ground():
    ground = loads(make({"ground.kind": '"real"', "ground.height": '"2 m"',
                         "ground.permittivity": "13", "ground.conductivity": '"5 mS/m"'})).ground
    assert ground == GroundSpec(kind="real", height_m=2.0, permittivity=13.0,
                                conductivity_s_m=5e-3, soil=None)
    perfect = loads(make({"ground.kind": '"perfect"', "ground.height": '"1 m"'})).ground
    assert perfect == GroundSpec(kind="perfect", height_m=1.0)


# --- every bad input: (changes, dotted key, fragments the message must contain) ------------------

_PLATES = {"tuner.kind": '"plates"', "tuner.plate_width": '"10 cm"',
           "tuner.plate_length": '"20 cm"', "tuner.dielectric_thickness": '"0.1 mm"',
           "tuner.permittivity": "2.2", "tuner.travel": '"15 cm"'}
_RANGE = {"tuner.kind": '"range"', "tuner.min": '"12 pF"', "tuner.max": '"450 pF"'}
_RECEIVER = {"receiver.rod_length": '"100 mm"', "receiver.rod_diameter": '"10 mm"',
             "receiver.permeability": "125", "receiver.coil_turns": "65",
             "receiver.coil_length": '"20 mm"', "receiver.loaded_q": "60",
             "receiver.position": '["0 m", "0.25 m", "-0.20 m"]'}
_REAL = {"ground.kind": '"real"', "ground.height": '"1.5 m"', "ground.soil": '"medium-dry"'}

BAD = [
    # units, types and signs (stage 1)
    ({"winding.pitch": '"6 qq"'}, "winding.pitch",
     ['"6 qq" has unknown unit "qq"; a length takes m, cm, mm, in, ft']),
    ({"sweep.start": '"1.2 mhz"'}, "sweep.start", ['"1.2 mhz"', "did you mean MHz?"]),
    ({**_RANGE, "tuner.max": '"150 PF"'}, "tuner.max", ['"150 PF"', "did you mean pF?"]),
    ({"wire.gauge": '"20 awg"'}, "wire.gauge", ['"20 awg"', "did you mean AWG?"]),
    ({"frame.width": '"150 pF"'}, "frame.width", ['"150 pF" is a capacitance, not a length']),
    ({"frame.width": '"-0.8 m"'}, "frame.width", ['must be > 0, got "-0.8 m"']),
    ({"frame.height": "0"}, "frame.height", ["must be > 0, got 0"]),
    ({"winding.pitch": '"-3 mm"'}, "winding.pitch", ['must be > 0, got "-3 mm"']),
    ({"winding.turns": "10.5"}, "winding.turns", ["must be an integer, got 10.5"]),
    ({"winding.turns": '"10"'}, "winding.turns", ['must be an integer, got "10"']),
    ({"winding.style": '"helix"'}, "winding.style",
     ['"helix" is not one of "stacked", "spiral"']),
    ({"taps.turns": "[6, 6.5]"}, "taps.turns[1]", ["must be an integer, got 6.5"]),
    ({"taps.turns": "6"}, "taps.turns", ["must be a list, got 6"]),
    ({"mesh.quality": '"ultra"'}, "mesh.quality", ['"ultra" is not one of "draft"']),
    ({"ground.kind": '"swamp"'}, "ground.kind", ['"swamp" is not one of "free-space"']),
    ({**_REAL, "ground.soil": '"medium dry"'}, "ground.soil",
     ['"medium dry" is not one of', 'did you mean "medium-dry"?']),
    ({**_RANGE, "tuner.q": "0"}, "tuner.q", ["must be > 0, got 0"]),
    ({**_PLATES, "tuner.stray": '"-2 pF"'}, "tuner.stray", ['must be >= 0, got "-2 pF"']),
    ({**_RECEIVER, "receiver.position": '["0 m", "0.25 m"]'}, "receiver.position",
     ['must have 3 entries (x, y, z), got ["0 m", "0.25 m"]']),
    ({**_RECEIVER, "receiver.axis": '[0, "y", 0]'}, "receiver.axis[1]",
     ['must be a number, got "y"']),
    ({"pattern.polarization": '"circular"'}, "pattern.polarization",
     ['"circular" is not one of "vertical", "horizontal"']),
    ({"name": "3"}, "name", ["must be a string, got 3"]),
    ({**_RECEIVER, "receiver.loaded_q": "1" + "0" * 400}, "receiver.loaded_q",
     ["must be a finite number"]),
    ({**_RECEIVER, "receiver.loaded_q": "nan"}, "receiver.loaded_q",
     ["must be a finite number, got nan"]),
    # keys that exclude or require each other (stage 1)
    ({"wire.diameter": '"1 mm"'}, "wire.diameter",
     ['"1 mm" conflicts with wire.gauge = "20 AWG"', "not both"]),
    ({"wire.gauge": None}, "wire", ["give gauge", "or diameter"]),
    ({"wire.conductivity": '"5e7 S/m"', "wire.metal": '"copper"'}, "wire.conductivity",
     ['"5e7 S/m" conflicts with wire.metal = "copper"']),
    ({"wire.metal": '"custom"'}, "wire.metal", ['"custom" needs wire.conductivity']),
    ({"ground.kind": '"free-space"', "ground.height": '"1 m"'}, "ground.height",
     ['not used when ground.kind = "free-space"']),
    ({"ground.kind": '"perfect"'}, "ground.height", ['missing: ground.kind = "perfect" needs']),
    ({"ground.kind": '"real"', "ground.height": '"2 m"'}, "ground",
     ['kind = "real" needs soil']),
    ({**_REAL, "ground.permittivity": "15"}, "ground.permittivity",
     ["conflicts with ground.soil"]),
    ({"ground.kind": '"real"', "ground.height": '"2 m"', "ground.permittivity": "15"},
     "ground.conductivity", ["missing: ground.permittivity needs ground.conductivity too"]),
    ({"tuner.kind": '"plates"'}, "tuner.plate_width", ['missing: tuner.kind = "plates" needs it']),
    ({**_RANGE, "tuner.travel": '"1 cm"'}, "tuner.travel",
     ['not used when tuner.kind = "range"']),
    # physics (stage 2)
    ({"winding.turns": "0", "taps.turns": "[]"}, "winding.turns", ["must be at least 1, got 0"]),
    ({"winding.pitch": '"0.5 mm"'}, "winding.pitch",
     ['"0.5 mm" must exceed the wire diameter 0.8118 mm (wire.gauge = "20 AWG")',
      "the turns would touch"]),
    ({"winding.style": '"spiral"', "winding.pitch": '"30 mm"'}, "winding.turns",
     ['10 turns at pitch "30 mm"', 'frame.height = "0.6 m"', "the inner turn collapses"]),
    ({"taps.turns": "[]"}, "taps.turns", ["needs at least one tap"]),
    ({"taps.turns": "[1, 2, 3, 4, 5, 6, 7, 8, 9]", "winding.turns": "10"}, "taps.turns",
     ["at most 8 taps, got 9"]),
    ({"taps.turns": "[0, 5]"}, "taps.turns", ["tap 0 in [0, 5] must be at least 1"]),
    ({"taps.turns": "[6, 10, 8]"}, "taps.turns",
     ["[6, 10, 8] must be strictly increasing; 8 comes after 10"]),
    ({"taps.turns": "[6, 6]"}, "taps.turns", ["6 comes after 6"]),
    ({"taps.turns": "[6, 12]"}, "taps.turns",
     ["tap 12 in [6, 12] is beyond the winding (winding.turns = 10)"]),
    ({"leads.offset": '"2 mm"'}, "leads.offset",
     ['"2 mm" must be at least 4 × the wire diameter 0.8118 mm', "= 3.247 mm"]),
    ({"wire.gauge": '"1/0 AWG"', "winding.pitch": '"10 mm"'}, "leads.offset",
     ['the default 30 mm must be at least 4 × the wire diameter 8.251 mm '
      '(wire.gauge = "1/0 AWG")']),
    ({"sweep.start": '"1800 kHz"', "sweep.stop": '"500 kHz"'}, "sweep.stop",
     ['"500 kHz" must be above sweep.start = "1800 kHz" (reversed sweep)']),
    ({"sweep.start": '"1800 kHz"'}, "sweep.stop",
     ['the default 1.71 MHz must be above sweep.start = "1800 kHz" (reversed sweep)']),
    ({"sweep.points": "1"}, "sweep.points", ["must be at least 2, got 1"]),
    ({"sweep.points": "5000"}, "sweep.points", ["must be at most 2001, got 5000"]),
    ({"sweep.start": '"5 kHz"'}, "sweep.start", ['"5 kHz" is below 10 kHz']),
    ({"sweep.stop": '"50 MHz"'}, "sweep.stop", ['"50 MHz" is above 30 MHz']),
    ({"mesh.segment_length": '"0.5 mm"'}, "mesh.segment_length",
     ['"0.5 mm" must exceed 2 × the wire radius, that is the wire diameter 0.8118 mm']),
    ({**_REAL, "ground.height": '"0.3 m"'}, "ground.height",
     ['"0.3 m" puts the frame in the ground', 'frame.height ("0.6 m")',
      "leads.offset (the default 30 mm)", "= 0.34 m"]),
    ({"ground.kind": '"real"', "ground.height": '"2 m"', "ground.permittivity": "0.5",
      "ground.conductivity": '"1e-3 S/m"'}, "ground.permittivity",
     ["must be at least 1, got 0.5"]),
    ({**_RANGE, "tuner.min": '"450 pF"', "tuner.max": '"12 pF"'}, "tuner.max",
     ['"12 pF" must be above tuner.min = "450 pF"']),
    ({**_PLATES, "tuner.gaps": "0"}, "tuner.gaps", ["must be at least 1, got 0"]),
    ({**_PLATES, "tuner.permittivity": "0.5"}, "tuner.permittivity",
     ["must be at least 1, got 0.5"]),
    ({**_RECEIVER, "receiver.rod_length": '"8 mm"'}, "receiver.rod_length",
     ['"8 mm" must exceed receiver.rod_diameter = "10 mm"']),
    ({**_RECEIVER, "receiver.axis": "[0, 0.0, 0]"}, "receiver.axis",
     ["[0, 0.0, 0] has no direction"]),
    ({**_RECEIVER, "receiver.permeability": "0.5"}, "receiver.permeability",
     ["must be at least 1, got 0.5"]),
    ({**_RECEIVER, "receiver.coil_turns": "0"}, "receiver.coil_turns",
     ["must be at least 1, got 0"]),
    ({"pattern.elevation": '["0 deg", "90 deg"]'}, "pattern.elevation[1]",
     ['"90 deg" is outside [0, 90) degrees']),
    ({"pattern.elevation": '["-5 deg"]'}, "pattern.elevation[0]",
     ['"-5 deg" is outside [0, 90) degrees']),
    ({"pattern.elevation": "[]"}, "pattern.elevation", ["needs at least one elevation"]),
    ({"pattern.frequency": '"5 kHz"'}, "pattern.frequency",
     ['"5 kHz" is outside 10 kHz to 30 MHz']),
    ({"name": '"../x"'}, "name", ['"../x" would write outside the results folder']),
    ({"name": '"/etc"'}, "name", ['"/etc" would write outside the results folder']),
    ({"name": '".."'}, "name", ['".." would write outside the results folder']),
    ({"name": '"a\\\\b"'}, "name", ['"a\\b" would write outside the results folder']),
    ({"name": '"my loop"'}, "name", ['"my loop" is not a safe folder name']),
    ({"name": '""'}, "name", ['"" is not a safe folder name']),
    ({"name": '"' + "x" * 65 + '"'}, "name", ["is not a safe folder name", "at most 64"]),
]


@pytest.mark.parametrize(("changes", "key", "fragments"), BAD,
                         ids=[f"{k}-{i}" for i, (_, k, _) in enumerate(BAD)])
def test_bad_input_names_key_and_value(changes, key, fragments):
    err = problems_of(make(changes))
    lines = str(err).splitlines()
    matching = [line for line in lines if line.startswith(f"{key}: ")]
    assert matching, f"no line for {key!r} in:\n{err}"
    for fragment in fragments:
        assert any(fragment in line for line in matching), f"{fragment!r} not in:\n{err}"
    assert (key, matching[0][len(key) + 2:]) in err.problems


@pytest.mark.parametrize(("changes", "key", "fragments"), BAD,
                         ids=[f"{k}-{i}" for i, (_, k, _) in enumerate(BAD)])
def test_messages_never_show_pydantic_text(changes, key, fragments):
    message = str(problems_of(make(changes)))
    for pydantic_words in ("Input should", "validation error", "pydantic", "type=", "Value error"):
        assert pydantic_words not in message


def test_spiral_inner_turn_rule_boundary():
    # rule: side - 2 × turns × pitch > 2 × pitch; 10 turns in a 0.6 m high frame -> pitch < 27.27 mm
    ok = loads(make({"winding.style": '"spiral"', "winding.pitch": '"27 mm"'}))
    assert ok.winding == WindingSpec(style="spiral", turns=10, pitch_m=0.027)
    err = problems_of(make({"winding.style": '"spiral"', "winding.pitch": '"28 mm"'}))
    assert str(err) == (
        'winding.turns: 10 turns at pitch "28 mm" in frame.height = "0.6 m": the inner turn '
        "collapses (height - 2 × turns × pitch = 40 mm must exceed 2 × pitch = 56 mm)")


def test_stacked_winding_has_no_inner_turn_rule():
    assert loads(make({"winding.pitch": '"28 mm"'})).winding.style == "stacked"


def test_sign_message_shows_the_users_text_not_si():
    message = str(problems_of(make({"winding.pitch": '"-3 mm"'})))
    assert message == 'winding.pitch: must be > 0, got "-3 mm"'
    assert "0.003" not in message


def test_valid_names_pass():
    for name in ("a", "shed-loop", "Loop_2.v3", "9", "x" * 64, "a..b"):
        assert loads(make({"name": f'"{name}"'})).name == name


# --- unknown keys, missing keys ------------------------------------------------------------------

def test_unknown_key_suggests_near_miss():
    text = make({"frame.width": None, "frame.widht": '"0.8 m"'})
    err = problems_of(text)
    assert str(err) == 'frame.widht: unknown key; did you mean "width"?'  # no "missing width" noise


def test_unknown_section_suggests_near_miss():
    text = make().replace("[frame]", "[frmae]")
    assert str(problems_of(text)) == 'frmae: unknown section; did you mean "frame"?'


def test_key_in_the_wrong_section_names_its_home():
    err = problems_of(make({"frame.pitch": '"6 mm"'}))
    assert str(err) == 'frame.pitch: unknown key; "pitch" belongs in [winding]'


def test_unknown_key_without_near_miss_lists_the_keys():
    err = problems_of(make({"frame.colour": '"red"'}))
    assert str(err) == "frame.colour: unknown key; [frame] takes width, height"


def test_missing_required_section_and_key():
    text = make({"winding.pitch": None}).split("[taps]")[0]
    err = problems_of(text)
    assert err.problems == [("winding.pitch", "missing required key"),
                            ("taps", "missing required section [taps]")]


def test_section_that_is_not_a_table():
    text = make({"frame.width": None, "frame.height": None}).replace("[frame]\n", "")
    text = "frame = 3\n" + text
    err = problems_of(text)
    assert "frame: must be a table ([frame] section), got 3" in str(err).splitlines()


# --- all problems are reported -------------------------------------------------------------------

def test_all_structure_problems_are_reported_together():
    err = problems_of(make({"winding.pitch": '"6 qq"', "winding.turns": "10.5",
                            "frame.height": '"-0.6 m"', "sweep.strat": '"500 kHz"'}))
    keys = [k for k, _ in err.problems]
    assert sorted(keys) == ["frame.height", "sweep.strat", "winding.pitch", "winding.turns"]
    assert len(str(err).splitlines()) == 4
    assert 'sweep.strat: unknown key; did you mean "start"?' in str(err).splitlines()


def test_all_physics_problems_are_reported_together():
    err = problems_of(make({"taps.turns": "[6, 10, 8]", "leads.offset": '"2 mm"',
                            "sweep.start": '"1800 kHz"', "sweep.stop": '"500 kHz"',
                            "name": '"../x"'}))
    assert [k for k, _ in err.problems] == ["name", "taps.turns", "leads.offset", "sweep.stop"]
    assert err.key == "name"


def test_structure_problems_come_before_physics():
    # a unit error stops the spec before the physics stage, which would flag the reversed sweep
    err = problems_of(make({"winding.pitch": '"6 qq"', "sweep.start": '"1800 kHz"',
                            "sweep.stop": '"500 kHz"'}))
    assert [k for k, _ in err.problems] == ["winding.pitch"]


# --- TOML syntax ---------------------------------------------------------------------------------

def test_toml_syntax_error_has_line_and_column():
    text = 'name = "t"\n[frame]\nwidth = 0.8 m\n'
    err = problems_of(text, source="geometries/bad.toml")
    assert str(err).startswith("geometries/bad.toml: TOML syntax error at line 3, column 13: ")
    assert err.key == "geometries/bad.toml"


def test_toml_syntax_error_at_end_of_file():
    err = problems_of('name = "t"\nx = "open\n')
    assert str(err) == "<string>: TOML syntax error at line 2, column 10: Illegal character '\\n'"


def test_toml_syntax_error_from_a_file(tmp_path: Path):
    path = tmp_path / "broken.toml"
    path.write_text('name = "t"\n\n[frame\n', encoding="utf-8")
    with pytest.raises(SpecError) as err:
        load(path)
    assert str(err.value).startswith(f"{path}: TOML syntax error at line 3, column ")
