"""simloop validate: MoM against the quasi-static model and handbook formulas, mesh convergence,
average gain test, real-ground resolution, and the command line.

Sources: Balanis 2016 ch. 5 (small-loop radiation; docs/references.md §3), Grover 1946 and Rosa
1908 (inductance; §1), the average gain test (common practice in NEC modelling; §9), Richardson
1911 (§9), and our measured PyNEC windows (docs/notes/pynec.md).

The loops are small and written here (4 turns, 0.4 × 0.3 m, pitch 20 mm, 20 AWG, draft mesh,
about 600 segments): a sweep plus a validation takes one to two seconds.
"""

import json
import math
import re

import numpy as np
import pytest

from simloop import constants, reference
from simloop.cli import main
from simloop.errors import SpecError
from simloop.impedance import run_sweep
from simloop.solve import Environment, solve_ports
from simloop.spec import loads
from tests.conftest import USER_OUTPUT_FORBIDDEN
from simloop.validation import (
    AGT_ACCEPT,
    BELOW_RESOLUTION,
    GROUND_RESOLUTION_OHM,
    average_gain,
    magnetic_moment_area_m2,
    radiation_resistance_moment,
    richardson,
    rosa_b,
    rosa_round_wire_correction,
    run_validate,
    sphere_weights,
)

ETA0 = constants.ETA0_OHM


def spec_text(style="stacked", taps="[2, 4]", width="0.4 m", height="0.3 m", metal="copper",
              mesh='quality = "draft"', extra=""):
    return f"""
name = "t-{style}"
[frame]
width = "{width}"
height = "{height}"
[winding]
style = "{style}"
turns = 4
pitch = "20 mm"
[wire]
gauge = "20 AWG"
metal = "{metal}"
[taps]
turns = {taps}
[mesh]
{mesh}
{extra}
"""


def validated(text, convergence=True):
    spec = loads(text)
    sweep = run_sweep(spec)
    return spec, sweep, run_validate(spec, sweep, convergence=convergence)


@pytest.fixture(scope="module")
def stacked():
    return validated(spec_text("stacked"))


@pytest.fixture(scope="module")
def spiral():
    return validated(spec_text("spiral", width="0.4 m", height="0.4 m"))


def rows(result, quantity, tap=None):
    return [c for c in result.checks if c.quantity == quantity and (tap is None or c.tap == tap)]


# ------------------------------------------------------------------------------------------------
# Pure formulas of the validation module
# ------------------------------------------------------------------------------------------------


def test_sphere_weights_integrate_the_solid_angle():
    theta, phi = np.arange(0, 181, 5.0), np.arange(0, 360, 5.0)
    w = sphere_weights(theta, phi)
    th = np.radians(theta)[None, :]
    assert w.sum() == pytest.approx(4 * np.pi, rel=1e-5, abs=0)  # ∮ dΩ = 4π
    assert np.sum(w * np.sin(th) ** 2) == pytest.approx(8 * np.pi / 3, rel=1e-5, abs=0)  # ∮ sin²θ dΩ


def test_sphere_weights_refuse_an_odd_number_of_theta_intervals():
    with pytest.raises(ValueError, match="even number"):
        sphere_weights(np.arange(0, 181, 20.0), np.arange(0, 360, 10.0))


def test_average_gain_of_a_small_loop_pattern_is_one():
    # Small loop of vector area A along y (Balanis, Antenna Theory, 4th ed., 2016, ch. 5): far field
    # |rE| = η k² I A sin ψ / (4π), ψ the angle from the loop axis; P_in = ½ R_r I² with
    # R_r = 320 π⁴ (A/λ²)². Energy balance: the average gain is exactly 1.
    f, area, current = 1.7e6, 0.6, 0.3
    k = 2 * np.pi * f / reference.SPEED_OF_LIGHT
    theta, phi = np.arange(0, 181, 5.0), np.arange(0, 360, 5.0)
    th, ph = np.meshgrid(np.radians(theta), np.radians(phi))  # (nφ, nθ)
    sin_psi = np.sqrt(1 - (np.sin(th) * np.sin(ph)) ** 2)
    e_abs = ETA0 * k**2 * current * area * sin_psi / (4 * np.pi)
    r_r = radiation_resistance_moment([0.0, area, 0.0], f)
    agt, p_rad = average_gain(e_abs, np.zeros_like(e_abs), theta, phi, 0.5 * r_r * current**2)
    assert agt == pytest.approx(1.0, abs=1e-4)


def test_radiation_resistance_from_the_vector_area_is_balanis():
    # Balanis (2016) ch. 5: R_r = 320 π⁴ (N A / λ²)²; docs/references.md §3 check [calc]: N = 10,
    # A = 1 m², 530 kHz → 30.4488 µΩ. The vector area of ten stacked 1 m squares is 10 m². The
    # constant 320π⁴ takes η0 = 120π; with η0 = μ0·c the value is lower by 376.730/376.991.
    starts, ends = reference.box_coil_pieces(1.0, 1.0, 10, 5e-3)
    area = magnetic_moment_area_m2(starts, ends)
    assert np.linalg.norm(area) == pytest.approx(10.0, rel=1e-12, abs=0)
    eta_ratio = ETA0 / (120 * np.pi)
    assert radiation_resistance_moment(area, 530e3) == pytest.approx(30.4488e-6 * eta_ratio, rel=1e-5, abs=0)


def test_rosa_b_reproduces_rosas_table():
    # E. B. Rosa, Bull. Bureau of Standards 4 (1908), correction B for N turns [mem], against the
    # defining sum over pairs of turns evaluated here
    for turns, b in [(2, 0.1137), (3, 0.1663), (4, 0.1973), (10, 0.2664)]:
        assert rosa_b(turns) == pytest.approx(b, abs=1e-4)
    assert rosa_b(1) == 0.0


@pytest.mark.parametrize("side, turns, pitch, radius, partial_sum", [
    # docs/references.md §1 box-coil check values [calc]: partial-inductance sum of N stacked squares
    (1.0, 10, 5e-3, 0.5e-3, 303.350e-6),
    (1.0, 10, 10e-3, 0.5e-3, 254.759e-6),
    (0.6, 20, 3e-3, 0.25e-3, 594.470e-6),
])
def test_round_wire_correction_closes_most_of_the_sheet_formula_gap(side, turns, pitch, radius, partial_sum):
    # Grover's square-coil formula is a current sheet; docs/references.md §1: 1–4 % (here up to 6.7 %)
    # below the filament sum. Rosa's round-wire correction brings it within 2.5 % (the rest is
    # the sheet formula's own approximation; the DC value of A adds ≈ +0.2 %).
    sheet = float(reference.inductance_square_coil_grover1946(side, turns, turns * pitch))
    corrected = sheet + rosa_round_wire_correction(4 * side, turns, pitch, 2 * radius)
    assert abs(corrected / partial_sum - 1) < 0.025
    assert abs(corrected / partial_sum - 1) < abs(sheet / partial_sum - 1)


def test_richardson_recovers_a_power_law_and_refuses_no_trend():
    d = np.array([0.015, 0.010, 0.0075])
    v = 1.0 - 3.0 * d**1.5  # L(Δ) = L* − cΔ^1.5
    est, order, _ = richardson(d, v)
    assert est == pytest.approx(1.0, rel=1e-12, abs=0)
    assert order == pytest.approx(1.5, rel=1e-6, abs=0)
    est, order, reason = richardson(d, np.array([1.0, 1.01, 1.005]))
    assert est is None and "not monotone" in reason


# ------------------------------------------------------------------------------------------------
# The MoM against the quasi-static model (above the breakdown floor, in the fit window)
# ------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("case", ["stacked", "spiral"])
def test_full_winding_tap_agrees_with_the_quasi_static_model(case, request):
    spec, sweep, result = request.getfixturevalue(case)
    floor = sweep.mesh.floor_frequency_hz(5e-5)
    l_rows = rows(result, "L", tap=4) + rows(result, "L0", tap=4)
    assert len(l_rows) >= 3
    for c in l_rows:
        assert c.frequency_hz is None or c.frequency_hz >= floor
        # Against Grover's partial-inductance sum (docs/references.md §1). Measured 0.06–0.46 %;
        # 1 % allows the pitch-rule error of the sweep mesh (segment 0.77 × pitch: about 0.3 %
        # by the measured law, docs/notes/pynec.md) and the breakdown error above the floor
        # (≤ 0.1 %), with margin.
        assert abs(c.rel_diff_mom) < 0.01, c
    # the reference in the rows is the partial sum of this tap's own current path, leads included
    i = sweep.tap_turns.index(4)
    qs = reference.inductance_partial_sum(*sweep.geometry.current_path(i), sweep.geometry.wire_radius_m)
    assert rows(result, "L0", tap=4)[0].quasi_static == pytest.approx(qs, rel=1e-12, abs=0)


def test_lower_tap_disagreement_is_flagged_and_seen_by_the_average_gain(stacked):
    # The MoM puts tap 2 of this loop several per cent above the quasi-static sum (NEC at the
    # junctions where open turns and leads continue the tap's current path; see README). The
    # validation must say so, and the average gain test must see that tap's input resistance
    # as less consistent with its far field than the full winding's.
    spec, sweep, result = stacked
    assert result.tap_verdicts[2].status in ("caution", "unreliable")
    assert any(r.startswith("tap 2:") for r in result.verdict.reasons)
    agt = {a.tap: a.agt for a in result.average_gain}
    assert abs(agt[2] - 1) > abs(agt[4] - 1)


def test_lower_tap_l0_after_the_junction_correction_agrees_with_the_quasi_static_model(stacked):
    # The sweep's L0 of tap 2 carries the junction correction (a MoM solve of the tap's own
    # circuit). Against Grover's partial-inductance sum (docs/references.md §1): measured +0.88 %;
    # 2 % is validate's own "ok" threshold (L_OK), which this tap must meet once corrected.
    spec, sweep, result = stacked
    for c in rows(result, "L0", tap=2):
        assert abs(c.rel_diff_mom) < 0.02


@pytest.mark.xfail(strict=True, reason="NEC biases lower taps: an open stub continuing a bent current "
                                       "path at a junction (unused turns at the tap point, the higher "
                                       "taps' leads on the shared collector) adds ~1–3 % each; measured "
                                       "+6.2 to +6.7 % for tap 2 of this loop in the raw direct MoM rows")
def test_lower_tap_raw_direct_mom_agrees_with_the_quasi_static_model(stacked):
    spec, sweep, result = stacked
    for c in rows(result, "L", tap=2):
        assert abs(c.rel_diff_mom) < 0.04


def test_wire_loss_and_radiation_of_the_full_tap(stacked):
    spec, sweep, result = stacked
    f_low = min(result.check_frequencies_hz)
    # NEC's conductivity load against the exact round-wire skin effect × path length
    # (docs/references.md §4): within 0.1–0.3 % on a single loop (docs/notes/pynec.md), 1 % allowed
    # for the self-capacitance removal at the lowest check frequency (measured 0.5 %); higher up
    # the current is no longer uniform along the 5.9 m path (measured 1.06 % at 0.27 × self-
    # resonance), so 2 % there
    for c in rows(result, "R_loss skin", tap=4):
        assert abs(c.rel_diff_mom) < (0.01 if c.frequency_hz == f_low else 0.02), c
    # lossless input resistance against the small-loop law of the path's vector area well below
    # self-resonance (Balanis 2016 ch. 5, docs/references.md §3): measured −0.18 %; 2 % is the
    # window for direct MoM points used throughout (the MoM kept R within ~1 % of the law even
    # below the floor, docs/notes/pynec.md, and the single-turn check measured +1.3 %)
    r = next(c for c in rows(result, "R_rad", tap=4) if c.frequency_hz == f_low)
    assert abs(r.rel_diff_mom) < 0.02
    # proximity (Smith 1972, docs/references.md §4) only adds loss: Q with it is lower
    for a, b in zip(rows(result, "Q skin", tap=4), rows(result, "Q skin+prox", tap=4)):
        assert b.mom < a.mom


def test_direct_self_resonance_is_a_parallel_resonance_of_fresh_solves(stacked):
    # The reported direct-MoM self-resonance, checked by new PyNEC solves 1 % either side of it
    # (not by the bracket the search ran in): the tap reactance (other taps open) must turn from
    # inductive to capacitive across it, as at any parallel resonance (common practice).
    spec, sweep, result = stacked
    srf_rows = rows(result, "SRF")
    assert {c.tap for c in srf_rows} == set(sweep.tap_turns)
    for c in srf_rows:
        i = sweep.tap_turns.index(c.tap)
        assert c.mom is not None
        sols = solve_ports(sweep.mesh, Environment(wire_conductivity_s_m=spec.wire.conductivity_s_m),
                           [0.99 * c.mom, 1.01 * c.mom])
        below, above = (np.linalg.inv(s.y_raw)[i, i].imag for s in sols)
        assert below > 0 > above, c


# ------------------------------------------------------------------------------------------------
# Average gain test
# ------------------------------------------------------------------------------------------------


def test_average_gain_of_a_lossless_loop_in_free_space():
    # common NEC practice (docs/references.md §9): a lossless antenna in free space has average gain 1;
    # accept 0.95–1.05 (written out here, so a change of validate's window cannot loosen the test)
    spec, sweep, result = validated(spec_text("stacked", taps="[4]", metal="lossless"), convergence=False)
    assert len(result.average_gain) == 1
    a = result.average_gain[0]
    assert 0.95 <= a.agt <= 1.05
    assert AGT_ACCEPT == (0.95, 1.05)
    assert a.frequency_hz >= sweep.mesh.floor_frequency_hz()  # above the breakdown floor


# ------------------------------------------------------------------------------------------------
# Mesh rules and convergence
# ------------------------------------------------------------------------------------------------


def test_mesh_that_violates_the_pitch_rule_is_not_ok():
    good = validated(spec_text("stacked", taps="[4]"), convergence=False)[2]
    bad = validated(spec_text("stacked", taps="[4]", mesh='segment_length = "60 mm"'), convergence=False)[2]
    assert not any("pitch" in r for r in good.verdict.reasons)
    assert bad.verdict.status in ("caution", "unreliable")
    assert any("2 x pitch" in r for r in bad.verdict.reasons)


def test_mesh_far_beyond_the_pitch_rule_is_refused_before_validation(tmp_path):
    path = tmp_path / "coarse.toml"
    path.write_text(spec_text("stacked", taps="[4]", mesh='segment_length = "80 mm"'))
    with pytest.raises(SpecError, match="mesh.segment_length"):
        run_sweep(loads(path.read_text()))
    assert main(["validate", str(path), "--out", str(tmp_path / "out"), "--no-cache", "--quiet"]) == 2


def test_convergence_reports_three_meshes_at_one_frequency_above_every_floor(stacked):
    spec, sweep, result = stacked
    assert [m.label for m in result.meshes] == ["coarse", "sweep", "fine"]
    segs = [m.winding_segment_m for m in result.meshes]
    assert segs[0] > segs[1] > segs[2]
    assert result.convergence_frequency_hz >= max(m.floor_hz for m in result.meshes) * (5 / 7) - 1
    for c in result.convergence:
        assert c.inductance_h.shape == (3,)
    full = next(c for c in result.convergence if c.tap == 4)
    assert full.inductance_spread < 0.02  # segments at half the pitch: converged
    # Refining the mesh moves the full tap towards Grover's partial-inductance sum
    # (docs/references.md §1), and the finest mesh is within 1 % of it (measured: +0.45 %,
    # +0.38 %, +0.26 % for the coarse, sweep and fine meshes; 1 % as for the sweep's own rows).
    i = sweep.tap_turns.index(4)
    qs = reference.inductance_partial_sum(*sweep.geometry.current_path(i), sweep.geometry.wire_radius_m)
    dist = np.abs(full.inductance_h / qs - 1)
    assert dist[2] <= dist[0]
    assert dist[2] < 0.01


# ------------------------------------------------------------------------------------------------
# Real ground: unresolved resistance is a flag, never a number
# ------------------------------------------------------------------------------------------------


def test_real_ground_resistance_below_resolution_is_a_flag(tmp_path):
    ground = '[ground]\nkind = "real"\nheight = "1.5 m"\nsoil = "medium-dry"'
    spec, sweep, result = validated(spec_text("stacked", taps="[4]", extra=ground), convergence=False)
    lossless = rows(result, "R_rad+ground")
    assert lossless and not rows(result, "R_rad")
    for c in lossless:
        assert (c.mom is None and c.flag == BELOW_RESOLUTION) or c.mom >= GROUND_RESOLUTION_OHM
    # this small loop's ground loss (NEC showed −0.05 Ω for a lossless coil over Sommerfeld
    # ground, docs/notes/pynec.md) lies below the resolution: flagged, and null in the JSON
    assert any(c.flag == BELOW_RESOLUTION for c in lossless)
    from simloop.report_validate import write_validate

    data = json.loads(write_validate(result, tmp_path)[0].read_text())
    flagged = [r for r in data["checks"] if r["flag"] == BELOW_RESOLUTION]
    assert flagged and all(r["mom"] is None for r in flagged)
    assert result.average_gain  # the average gain test still runs, in free space


# ------------------------------------------------------------------------------------------------
# Command line and JSON
# ------------------------------------------------------------------------------------------------


def test_cli_validate_writes_every_row(tmp_path, capsys):
    path = tmp_path / "loop.toml"
    path.write_text(spec_text("spiral", width="0.4 m", height="0.4 m"))
    out = tmp_path / "out"
    assert main(["validate", str(path), "--out", str(out), "--no-cache"]) == 0
    printed = capsys.readouterr().out
    assert "VERDICT:" in printed and "tap 4 turns" in printed
    # The far-field check in our own words: a power balance, radiated against accepted power.
    assert "power balance" in printed and "average gain" not in printed
    assert re.search(r"tap 4: radiated \S+ W of \S+ W accepted, [+-]\d+\.\d%", printed)
    for word in USER_OUTPUT_FORBIDDEN:
        assert word not in printed, word
    data = json.loads((out / "validation.json").read_text())
    for key in ("checks", "convergence", "verdict", "average_gain", "q_used_by_tune", "meshes"):
        assert key in data
    assert data["verdict"]["status"] in ("ok", "caution", "unreliable") and data["verdict"]["reasons"]
    for row in data["checks"]:
        for key in ("quantity", "tap", "frequency_hz", "mom", "quasi_static", "handbook", "source",
                    "rel_diff", "unit"):
            assert key in row
        for v in (row["mom"], row["quasi_static"], row["handbook"]):
            assert v is None or math.isfinite(v)
    quantities = {r["quantity"] for r in data["checks"]}
    assert {"L0", "L", "R_rad", "R_loss skin", "R_loss skin+prox", "Q skin", "Q skin+prox", "SRF"} <= quantities
    taps = {r["tap"] for r in data["checks"]}
    assert taps == {2, 4}
    assert len(data["convergence"]) == 2 and all(len(c["inductance_h"]) == 3 for c in data["convergence"])
    # Average gain test (common practice, docs/references.md §9): the full tap passes the
    # 0.95–1.05 window (measured 1.001); tap 2 carries the junction bias (measured 0.949) and must
    # not be reported as accepted.
    agt = {a["tap"]: a for a in data["average_gain"]["taps"]}
    assert 0.95 <= agt[4]["agt"] <= 1.05
    assert not agt[2]["accepted"] and agt[2]["agt"] < 0.95


# ------------------------------------------------------------------------------------------------
# Full size (slow)
# ------------------------------------------------------------------------------------------------


@pytest.mark.slow
def test_spiral_panel_validates_with_converged_full_tap():
    from pathlib import Path

    from simloop.spec import load

    spec = load(Path(__file__).parents[1] / "geometries" / "spiral-panel.toml")
    sweep = run_sweep(spec)
    result = run_validate(spec, sweep)
    full = spec.taps.turns[-1]
    assert abs(rows(result, "L0", tap=full)[0].rel_diff_mom) < 0.02
    assert next(c for c in result.convergence if c.tap == full).inductance_spread < 0.02
    assert all(a.accepted for a in result.average_gain if a.tap == full)
