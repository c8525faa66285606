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
    run_validate,
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
# The MoM against the quasi-static model (above the breakdown floor, in the fit window)
# ------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("case", ["stacked", "spiral"])
def test_full_winding_tap_agrees_with_the_quasi_static_model(case, request):
    spec, sweep, result = request.getfixturevalue(case)
    floor = sweep.mesh.floor_frequency_hz(5e-5)
    l_rows = rows(result, "L", tap=4) + rows(result, "L0", tap=4)
    assert len(l_rows) >= 3
    mom_rows = [c for c in l_rows if c.mom is not None]
    assert mom_rows  # at least one check frequency above the MoM's floor
    for c in mom_rows:
        assert c.frequency_hz is None or c.frequency_hz >= floor
        assert abs(c.rel_diff_mom) < 0.04, c
    # the circuit column: the partial-inductance sum of the same path (Grover 1946) is its ω → 0
    # limit; the series branch with the fitted shunt C removed stays within 0.5 % in the band
    for c in l_rows:
        assert abs(c.rel_diff_circuit) < 0.005, c
    i = sweep.tap_turns.index(4)
    qs = reference.inductance_partial_sum(*sweep.geometry.current_path(i), sweep.geometry.wire_radius_m)
    assert rows(result, "L0", tap=4)[0].quasi_static == pytest.approx(qs, rel=1e-12, abs=0)


def test_lower_tap_mom_junction_bias_is_shown_against_the_circuit(stacked):
    # NEC puts tap 2 of this loop several per cent above the quasi-static sum (open turns and
    # leads continue the tap's current path at junctions; see README). The circuit solver needs
    # no correction: its column sits on the sum, the MoM column shows the bias, and the average
    # gain test sees that tap's MoM input resistance as less consistent with its far field.
    spec, sweep, result = stacked
    mom = [c for c in rows(result, "L", tap=2) if c.mom is not None]
    assert mom and all(c.rel_diff_mom > 0.01 for c in mom)
    assert all(abs(c.rel_diff_circuit) < 0.005 for c in rows(result, "L", tap=2))
    agt = {a.tap: a.agt for a in result.average_gain}
    assert abs(agt[2] - 1) > abs(agt[4] - 1)


def test_lower_tap_l0_of_the_circuit_agrees_with_the_quasi_static_model(stacked):
    # Grover (1946) partial-inductance sum of tap 2's own current path: 1e-4 (quadrature of the
    # sloped advance pieces), no junction correction.
    spec, sweep, result = stacked
    for c in rows(result, "L0", tap=2):
        assert abs(c.rel_diff_circuit) < 1e-4


@pytest.mark.xfail(strict=True, reason="NEC biases lower taps: an open stub continuing a bent current "
                                       "path at a junction (unused turns at the tap point, the higher "
                                       "taps' leads on the shared collector) adds ~1–3 % each; measured "
                                       "+6.2 to +6.7 % for tap 2 of this loop in the raw direct MoM rows")
def test_lower_tap_raw_direct_mom_agrees_with_the_quasi_static_model(stacked):
    spec, sweep, result = stacked
    for c in rows(result, "L", tap=2):
        if c.mom is not None:
            assert abs(c.rel_diff_mom) < 0.04


def test_wire_loss_and_radiation_of_the_full_tap(stacked):
    spec, sweep, result = stacked
    # The circuit against the exact round-wire skin effect × path length (Ramo et al. 1994):
    # within 1 % at the bottom of the band; higher up the current is no longer uniform along the
    # 5.9 m path (NEC measured 1.03 % at 0.38 × self-resonance), so 2 %.
    f_low = min(result.check_frequencies_hz)
    for c in rows(result, "R_loss skin", tap=4):
        assert abs(c.rel_diff_circuit) < (0.01 if c.frequency_hz == f_low else 0.02), c
        if c.mom is not None:  # NEC's conductivity load: 0.1–0.3 % on a single loop (measured)
            assert abs(c.rel_diff_mom) < 0.02, c
    # radiation resistance against the magnetic moment of the path (Balanis 2016 ch. 5); the
    # circuit uses its own current distribution's moment, which at the top of the band departs
    # from uniform by about (f/f_srf)² ≈ 2 % (measured +1.6 % at 1.71 MHz): 3 %
    for c in rows(result, "R_rad", tap=4):
        assert abs(c.rel_diff_circuit) < 0.03, c
        if c.mom is not None:
            assert abs(c.rel_diff_mom) < 0.02, c
    # proximity-corrected Q is lower than skin-only Q, and tune uses the corrected one
    for a, b in zip(rows(result, "Q skin", tap=4), rows(result, "Q skin+prox", tap=4)):
        assert b.circuit < a.circuit


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
    assert not any(r.params.get("rule") == "pitch" for r in good.verdict.reasons)
    assert bad.verdict.status in ("caution", "unreliable")
    assert any(r.code.startswith("mesh-rule-") and r.params["rule"] == "pitch" for r in bad.verdict.reasons)


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
    floor = sweep.mesh.floor_frequency_hz(5e-5)
    for c in lossless:
        if c.frequency_hz < floor:  # below the MoM's floor: no MoM solve at all
            assert c.mom is None
            continue
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
    assert len(data["verdict"]["codes"]) == len(data["verdict"]["reasons"])
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
# Every number in the column of the model it comes from
# ------------------------------------------------------------------------------------------------


def test_q_tune_rows_carry_the_lumped_model_in_its_own_column(stacked):
    # The Q tune uses is the lumped L-C model's (fitted to the circuit solver with its proximity
    # loss): it belongs in the "model" column, never in the MoM column.
    spec, sweep, result = stacked
    q_rows = rows(result, "Q tune")
    assert q_rows
    mp = sweep.model_proximity
    for c in q_rows:
        i = sweep.tap_turns.index(c.tap)
        w = 2 * np.pi * c.frequency_hz
        expect = w * mp.inductance_h[i, i] / mp.series_resistance([c.frequency_hz])[0, i, i]
        assert c.mom is None and c.source_mom is None and c.rel_diff_mom is None
        assert c.model == pytest.approx(expect, rel=1e-12, abs=0)
        assert "lumped" in c.source_model and c.rel_diff_model == pytest.approx(c.model / c.quasi_static - 1)
        # The lumped model is fitted to the circuit solver: within 5 % of its Q (this tool's fit
        # tolerance, measured 0.1–4 % on the frame loop) — a sign it is that model's number.
        assert c.model == pytest.approx(c.circuit, rel=0.05)
    for c in result.checks:  # every MoM value is a MoM solve (possibly plus the proximity term)
        if c.mom is not None:
            assert c.source_mom.startswith(("MoM", "direct MoM")), c
    l0 = rows(result, "L0")
    assert all(c.mom is None and c.model == pytest.approx(sweep.inductance_h[sweep.tap_turns.index(c.tap)],
                                                         rel=1e-12, abs=0) for c in l0)


def test_mid_tap_proximity_rows_say_the_circuit_counts_the_open_turns(stacked):
    # Smith (1972): a wire with no net current still carries eddy currents, so the circuit solver
    # puts loss into tap 2's two open turns that the quasi-static term (the tap's own turns) has
    # not: tap 2's PEEC proximity loss stands further above QS than the full tap's.
    spec, sweep, result = stacked
    mid, full = rows(result, "R_loss skin+prox", tap=2), rows(result, "R_loss skin+prox", tap=4)
    assert mid and all(any(n.code == "open-turn-eddy" and n.params["open_turns"] == 2 for n in c.notes)
                       for c in mid)
    assert not any(n.code == "open-turn-eddy" for c in full for n in c.notes)
    for a, b in zip(mid, full):
        assert a.rel_diff_circuit > b.rel_diff_circuit


def test_srf_row_differences_refer_to_the_mom_not_the_handbook(stacked):
    # The SRF row has no quasi-static value: its differences are from the direct MoM (marked *),
    # never from Medhurst's handbook estimate.
    spec, sweep, result = stacked
    for c in rows(result, "SRF"):
        if c.mom is not None and c.circuit is not None:
            assert c.reference == "mom"
            assert c.rel_diff_circuit == pytest.approx(c.circuit / c.mom - 1, rel=1e-12, abs=0)
        elif c.mom is None:
            assert c.rel_diff_circuit is None and c.rel_diff_handbook is None


def test_printed_table_has_a_model_column_and_readable_notes(stacked):
    from simloop.report_validate import format_validate_table, note_text, reason_text, validation_dict
    from simloop.validation import Note, Reason

    spec, sweep, result = stacked
    table = format_validate_table(result)
    header = next(line for line in table.splitlines() if line.strip().startswith("quantity"))
    assert header.split()[3:6] == ["MoM", "PEEC", "model"]
    for line in table.splitlines():
        if line.strip().startswith("Q tune"):
            assert line.split()[3] == "-", line  # the MoM column of a Q tune row is empty
    data = validation_dict(result)
    for row in data["checks"]:
        if row["quantity"] == "Q tune":
            assert row["mom"] is None and row["model"] is not None and "lumped" in row["source"]["model"]
    # A formula's warning keeps four significant digits.
    text = note_text(Note("formula-warning", {"message": "l/D = 0.08055365778435365 lies outside"}))
    assert text == "l/D = 0.08055 lies outside"
    # The ok verdict names only the checks that ran.
    ok = dict(inductance=0.02, spread=0.02, power_balance=0.05, convergence_checked=False,
              power_balance_run=False, mom_run=False)
    words = reason_text(Reason("ok", "all-within", ok))
    assert "spread" not in words and "radiated" not in words and "mesh rule" not in words
    assert "not run" in words


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
    # L0 now comes from the circuit solver; against Grover's partial-inductance sum of the same
    # path (docs/references.md §1) it is exact to the quadrature of the sloped pieces (1e-4), and
    # the MoM rows above NEC's floor stay within validate's own "ok" threshold L_OK (2 %).
    assert abs(rows(result, "L0", tap=full)[0].rel_diff_circuit) < 1e-3
    mom = [c for c in rows(result, "L", tap=full) if c.mom is not None]
    assert all(abs(c.rel_diff_mom) < 0.02 for c in mom)
    assert next(c for c in result.convergence if c.tap == full).inductance_spread < 0.02
    assert all(a.accepted for a in result.average_gain if a.tap == full)
