"""Contract tests run on every geometry builder (stacked and spiral), and the mesh rules.

Sources: NEC-2 modelling rules (Burke & Poggio, NOSC TD 116, 1981; docs/references.md §9) and our
measured PyNEC windows (docs/notes/pynec.md); the geometry contracts are the project's own.
"""

import numpy as np
import pytest

from simloop.geometry import COLLECTOR, DROP, RUN, WINDING, build_loop, check_clearances, rod_clearance_problems
from simloop.mesh import C0, build_mesh, mesh_rules

CASES = {
    "stacked-10": dict(width_m=0.8, height_m=0.6, turns=10, pitch_m=0.006, wire_radius_m=0.406e-3,
                       tap_turns=(6, 8, 10), lead_offset_m=0.03, style="stacked"),
    "spiral-8": dict(width_m=0.6, height_m=0.6, turns=8, pitch_m=0.01, wire_radius_m=0.512e-3,
                     tap_turns=(5, 8), lead_offset_m=0.045, style="spiral"),
    "single-turn": dict(width_m=1.0, height_m=0.6, turns=1, pitch_m=0.01, wire_radius_m=1e-3,
                        tap_turns=(1,), lead_offset_m=0.05, style="stacked"),
    "spiral-mid-taps": dict(width_m=0.5, height_m=0.4, turns=6, pitch_m=0.012, wire_radius_m=0.4e-3,
                            tap_turns=(2, 3, 4, 6), lead_offset_m=0.04, style="spiral"),
}


@pytest.fixture(params=sorted(CASES))
def case(request):
    kw = CASES[request.param]
    return kw, build_loop(**kw)


def _winding(geom):
    sel = np.array([k == WINDING for k in geom.kinds])
    return geom.starts[sel], geom.ends[sel]


def test_winding_is_one_open_chain(case):
    kw, geom = case
    starts, ends = _winding(geom)
    assert np.allclose(starts[1:], ends[:-1], atol=1e-12), "each winding piece starts where the last ended"
    assert not np.allclose(starts[0], ends[-1]), "the winding is open: start terminal and end differ"
    assert len(starts) == 5 * kw["turns"]


def test_no_zero_length_or_overshort_pieces(case):
    kw, geom = case
    # every piece is at least one lead offset long: no short jog anywhere
    assert geom.lengths_m.min() >= kw["lead_offset_m"] - 1e-12
    mesh = build_mesh(geom, min(0.02, kw["lead_offset_m"] / 3))
    seg = mesh.segment_lengths_m
    assert seg.min() > 2 * kw["wire_radius_m"]
    # uniform segmentation everywhere, leads included (a single short segment sets the breakdown floor)
    assert seg.max() / seg.min() < 1.6


def test_taps_in_order_and_on_the_winding(case):
    kw, geom = case
    starts, _ = _winding(geom)
    kinds = np.array(geom.kinds)
    drops = geom.starts[kinds == DROP]
    for n, point in zip(kw["tap_turns"], drops):
        if n < kw["turns"]:
            # a mid tap is the start of turn n: the first piece of that turn begins there
            assert np.allclose(point, starts[5 * n])
        else:
            assert np.allclose(point, geom.ends[np.flatnonzero(kinds == WINDING)[-1]])
    assert list(geom.tap_turns) == sorted(geom.tap_turns)


def test_leads_clear_the_winding(case):
    _, geom = case
    assert check_clearances(geom) == []


def test_every_tap_has_a_one_segment_port_of_equal_length(case):
    kw, geom = case
    mesh = build_mesh(geom, min(0.02, kw["lead_offset_m"] / 3))
    assert len(mesh.port_tags) == len(kw["tap_turns"])
    assert all(mesh.segments[t - 1] == 1 for t in mesh.port_tags)
    lengths = mesh.segment_lengths_m[[t - 1 for t in mesh.port_tags]]
    assert np.ptp(lengths) < 1e-12
    # the port lies on its tap's drop, with segments of the same length on either side
    for i, t in enumerate(mesh.port_tags):
        assert geom.kinds[mesh.piece[t - 1]] == DROP and geom.tap[mesh.piece[t - 1]] == i


def test_current_path_is_closed_and_follows_the_current(case):
    kw, geom = case
    for i in range(len(kw["tap_turns"])):
        starts, ends = geom.current_path(i)
        assert np.allclose(starts[1:], ends[:-1], atol=1e-12)
        assert np.allclose(ends[-1], starts[0], atol=1e-12), "the circuit closes at the start terminal"


def test_stacked_wire_length_matches_hand_count():
    # Ten turns of 0.8 x 0.6 m: each turn is the rectangle perimeter with the advance of one pitch
    # spread over half the bottom side: sqrt((w/2)^2 + p^2) instead of w/2 (plain geometry).
    kw = CASES["stacked-10"]
    geom = build_loop(**kw)
    w, h, p, n = kw["width_m"], kw["height_m"], kw["pitch_m"], kw["turns"]
    per_turn = w / 2 + h + w + h + np.hypot(w / 2, p)
    assert geom.winding_length_m == pytest.approx(n * per_turn, rel=1e-12, abs=0)


def test_spiral_turns_are_inset_by_the_pitch():
    kw = CASES["spiral-8"]
    geom = build_loop(**kw)
    areas = geom.turn_area_m2()
    w, h, p = kw["width_m"], kw["height_m"], kw["pitch_m"]
    # area of turn k: (w - 2kp)(h - 2kp), less the small wedge cut by the advance of one pitch
    # over half the bottom side, (w/2 - kp) * p / 2 (plane geometry)
    k = np.arange(kw["turns"])
    expected = (w - 2 * k * p) * (h - 2 * k * p) - (w / 2 - k * p) * p / 2
    assert np.allclose(areas, expected, rtol=1e-12)


def test_rod_through_the_wire_is_refused():
    geom = build_loop(**CASES["stacked-10"])
    # a rod lying across the bottom side of the frame
    problems = rod_clearance_problems(geom, (0.2, 0.0, -0.3), (0, 1, 0), 0.1, 0.01)
    assert problems and problems[0][0] == "receiver.position"
    assert rod_clearance_problems(geom, (0.0, 0.25, -0.2), (0, 1, 0), 0.1, 0.01) == []


def test_mesh_rules_flag_the_pitch_rule_and_the_floor():
    kw = CASES["stacked-10"]
    geom = build_loop(**kw)
    coarse = build_mesh(geom, 5 * kw["pitch_m"])
    rules = {r.key: r.status for r in mesh_rules(coarse, geom, 520e3, 1710e3, kw["turns"])}
    assert rules["pitch"] == "fail"
    fine = build_mesh(geom, 1.5 * kw["pitch_m"])
    rules = {r.key: r for r in mesh_rules(fine, geom, 520e3, 1710e3, kw["turns"])}
    assert rules["pitch"].status == "pass"
    # 9 mm segments at 520 kHz are 1.6e-5 wavelengths: below the 7e-5 floor
    assert rules["floor"].status == "warn"
    assert fine.floor_frequency_hz() == pytest.approx(7e-5 * C0 / fine.shortest_m)


def test_lead_kinds_present():
    geom = build_loop(**CASES["spiral-mid-taps"])
    kinds = np.array(geom.kinds)
    k = len(geom.tap_turns)
    assert (kinds == DROP).sum() == k and (kinds == RUN).sum() == k and (kinds == COLLECTOR).sum() == k + 1
