"""The MoM sweep against published formulas and the quasi-static partial-inductance model.

Sources: Terman 1943, Grover 1946, Balanis 2016 (docs/references.md §1, §3). Check values are
computed from the formulas named beside them (docs/references.md marks them [computed]).
"""

import textwrap

import numpy as np
import pytest

from simloop import reference
from simloop.impedance import run_sweep
from simloop.spec import loads

SINGLE_TURN = """
name = "single-turn"
[frame]
width = "1.0 m"
height = "0.6 m"
[winding]
turns = 1
pitch = "10 mm"
[wire]
diameter = "2 mm"
metal = "lossless"
[taps]
turns = [1]
[leads]
offset = "5 cm"
[sweep]
start = "520 kHz"
stop = "1710 kHz"
points = 9
"""


@pytest.fixture(scope="module")
def single_turn():
    return run_sweep(loads(textwrap.dedent(SINGLE_TURN)))


def test_single_turn_inductance_matches_terman(single_turn):
    # Terman, Radio Engineers' Handbook (1943) sec. 2 / Grover (1946): 1.0 x 0.6 m rectangle of
    # 2 mm wire, high frequency: 3.74570 uH [docs/references.md §1, calc]. The model also carries the tuner
    # lead detour (5 cm drop, run and collector); its increment is taken from Grover's partial
    # inductances of the same pieces, so the check is Terman + lead increment.
    terman = reference.inductance_rectangle_terman1943(1.0, 0.6, 2e-3)
    assert terman == pytest.approx(3.74570e-6, rel=2e-6, abs=0)
    geom = single_turn.geometry
    path = reference.inductance_partial_sum(*geom.current_path(0), geom.wire_radius_m)
    corners = np.array([(-0.5, 0, -0.3), (0.5, 0, -0.3), (0.5, 0, 0.3), (-0.5, 0, 0.3)])
    closed = reference.inductance_partial_sum(corners, np.roll(corners, -1, axis=0), geom.wire_radius_m)
    expected = terman + (path - closed)
    # Measured +1.05 % (cause not isolated: 2 mm wire at 15 mm segments, Δ/a = 15, near the
    # thin-wire kernel's limit of 8 from Burke & Poggio 1981, docs/references.md §9); 1.5 % holds it.
    assert single_turn.inductance_h[0] == pytest.approx(expected, rel=0.015, abs=0)


def test_single_turn_radiation_resistance_matches_small_loop_law(single_turn):
    # Balanis, Antenna Theory, ch. 5: R_r = 320 pi^4 (A/lambda^2)^2 for perimeter < 0.1 lambda.
    # Lossless wire, so the MoM resistance is all radiation; direct MoM points only.
    mom = single_turn.source == "mom"
    assert mom.any(), "the mesh puts some sweep points above the breakdown floor"
    area = float(single_turn.geometry.turn_area_m2()[0])
    f = single_turn.frequencies_hz[mom]
    assert np.all(2 * (1.0 + 0.6) < 0.1 * reference.SPEED_OF_LIGHT / f)
    r_law = reference.radiation_resistance_small_loop(area, f)
    r_mom = single_turn.z_ohm[mom, 0, 0].real
    # Measured +1.2 to +1.4 %. 2 %, the same window validate's R_rad rows are held to
    # (tests/test_validation.py); the law's own constant is 0.07 % high (η0 = 120π, §3).
    assert np.allclose(r_mom, r_law, rtol=0.02, atol=0)


def test_model_points_carry_the_law_below_the_floor(single_turn):
    # Below the floor the resistance comes from the fitted f^4 law: it must stay on Balanis' line.
    # Measured +4.8 to +4.9 %, i.e. 3.5 % above the direct MoM points (cause not yet found; noted
    # in docs/notes/engineering.md). 6 % holds today's value and still catches a worse fit; the
    # direct points above are held to 2 %.
    model = single_turn.source == "model"
    assert model.any()
    area = float(single_turn.geometry.turn_area_m2()[0])
    f = single_turn.frequencies_hz[model]
    r_law = reference.radiation_resistance_small_loop(area, f)
    assert np.allclose(single_turn.z_ohm[model, 0, 0].real, r_law, rtol=0.06, atol=0)


@pytest.fixture(scope="module", params=["small-stacked", "small-spiral"])
def multi_turn(request):
    from tests.conftest import SMALL_SPIRAL, SMALL_STACKED

    text = {"small-stacked": SMALL_STACKED, "small-spiral": SMALL_SPIRAL}[request.param]
    return run_sweep(loads(textwrap.dedent(text)))


def _ratio(result, tap_index):
    geom = result.geometry
    qs = reference.inductance_partial_sum(*geom.current_path(tap_index), geom.wire_radius_m)
    return result.inductance_h[tap_index] / qs


def test_every_tap_matches_partial_inductance_sum(multi_turn):
    # Quasi-static partial-inductance sum (Grover 1946 filaments) over the real winding path with
    # its leads: measured +1.07 % / +0.03 % (stacked) and +0.90 % / −0.05 % (spiral) for the mid
    # and end taps. 2 % is validate's "ok" threshold (L_OK). Mid-winding taps need the junction
    # correction for it (below); the end tap needs none.
    for i in range(len(multi_turn.tap_turns)):
        assert abs(_ratio(multi_turn, i) - 1) < 0.02, multi_turn.tap_turns[i]
    assert multi_turn.junction_correction[-1] == 1.0


def test_junction_correction_is_what_brings_mid_taps_in(multi_turn):
    # Without the correction the mid tap of these coils read 3.9-4.7 % high; the correction is a
    # MoM solve of the tap's own circuit, not the quasi-static value, so it can disagree with it.
    geom = multi_turn.geometry
    qs = reference.inductance_partial_sum(*geom.current_path(0), geom.wire_radius_m)
    raw = multi_turn.uncorrected_inductance_h[0] / qs - 1
    assert raw > 0.02
    assert abs(_ratio(multi_turn, 0) - 1) < raw / 2


def test_mid_tap_bias_is_the_open_stub_at_the_tap_junction():
    # Known solver behaviour, measured: the MoM inductance of a mid-winding tap comes out above
    # the quasi-static sum although the open rest of the winding carries no current at low
    # frequency (physically it cannot change L0). Detaching that open stub from the tap by 2 cm
    # removes the excess; this test pins both facts, so a solver change that cures (or worsens)
    # the junction bias shows up here. 3-turn 0.5 x 0.4 m coil, 15 mm pitch, tap at 2 turns.
    from simloop.geometry import WINDING, build_loop
    from simloop.lumped import fit_loop_model
    from simloop.mesh import Mesh, build_mesh
    from simloop.solve import Environment, solve_ports

    geom = build_loop(0.5, 0.4, 3, 0.015, 0.406e-3, (2,), 0.06)
    qs = reference.inductance_partial_sum(*geom.current_path(0), geom.wire_radius_m)
    mesh = build_mesh(geom, 0.02)
    stub = np.flatnonzero((np.array(geom.kinds) == WINDING) & (geom.turn == 2))[0]
    w = int(np.flatnonzero(mesh.piece == stub)[0])
    u = (mesh.ends[w] - mesh.starts[w]) / np.linalg.norm(mesh.ends[w] - mesh.starts[w])
    starts, segs = mesh.starts.copy(), mesh.segments.copy()
    starts[w] = starts[w] + 0.02 * u
    segs[w] -= 1
    detached = Mesh(starts, mesh.ends, segs, mesh.radius_m, mesh.port_tags, mesh.piece,
                    mesh.target_m, mesh.quality, mesh.winding_wire)
    freqs = [2e6, 2.5e6, 3e6]  # above the floor of 20 mm segments, far below resonance (~23 MHz)
    ratios = []
    for m in (mesh, detached):
        sols = solve_ports(m, Environment(wire_conductivity_s_m=None), freqs)
        model = fit_loop_model(freqs, np.array([s.y for s in sols]), geom.wire_radius_m, None)
        ratios.append(model.inductance_h[0, 0] / qs)
    attached, free = ratios
    assert abs(free - 1) < 0.005, "without the open stub the MoM agrees with the quasi-static sum"
    assert attached - 1 > 0.01, "with the open stub attached the MoM reads high (junction bias)"


def test_more_turns_tune_lower(multi_turn):
    # Common practice: a higher tap has more inductance (and so tunes lower with one capacitor).
    assert np.all(np.diff(multi_turn.inductance_h) > 0)
