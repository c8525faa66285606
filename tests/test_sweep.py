"""The sweep: provenance of every point, error estimates, breakdown detection, Touchstone output.

Sources: our measured PyNEC accuracy windows (docs/notes/pynec.md), Touchstone 1.1/2.0
(docs/references.md §8) read back with scikit-rf 2.2 as the independent reader, the exact round-wire
skin effect (docs/references.md §4) and Balanis' small-loop law (docs/references.md §3).
"""

import json
import textwrap

import numpy as np
import pytest
import skrf

from simloop import reference
from simloop.constants import SPEED_OF_LIGHT_M_S
from simloop.geometry import build_loop
from simloop.impedance import breakdown_error, pitch_bias, run_sweep
from simloop.mesh import build_mesh
from simloop.report import write_sweep
from simloop.solve import Environment, solve_ports
from simloop.spec import loads
from tests.conftest import SMALL_STACKED


@pytest.fixture(scope="module")
def result():
    return run_sweep(loads(textwrap.dedent(SMALL_STACKED)))


def test_every_point_has_provenance_and_an_error(result):
    n, k = result.frequencies_hz.size, len(result.tap_turns)
    assert set(result.source) <= {"mom", "model"}
    assert result.error_estimate.shape == (n, k) and result.reliable.shape == (n, k)
    assert np.all(result.error_estimate > 0)
    floor = result.mesh.floor_frequency_hz()
    f = result.frequencies_hz
    assert np.all(result.source[f < floor * (1 - 1e-9)] == "model")
    assert np.all(result.source[f >= floor] == "mom")


def test_model_agrees_with_direct_mom_where_both_exist(result):
    # Points above the floor are solved directly; the fitted model must reproduce them (the fit
    # window lies below, so these are held-back points for the model).
    mom = result.source == "mom"
    f = result.frequencies_hz[mom]
    held_back = ~np.isin(f, result.model.fit_hz)
    z_model = result.model.z(f[held_back])
    z_mom = result.z_ohm[mom][held_back]
    # Measured 0.20–0.24 % at 0.08–0.13 × SRF; fits over 0.45–0.6 × SRF predicted held-back
    # points within 0.3 % in our PyNEC runs (docs/notes/pynec.md); 1 % leaves a factor 3.
    for i in range(len(result.tap_turns)):
        rel = np.abs(z_model[:, i, i] - z_mom[:, i, i]) / np.abs(z_mom[:, i, i])
        assert rel.max() < 0.01


def test_fit_window_is_in_the_trusted_range(result):
    # Trusted window (docs/notes/pynec.md, "Accuracy windows"): segments never below 5e-5
    # wavelengths, and the fit below about 0.6 × SRF (measured 0.59 here; 0.65 allows for the
    # self-resonance being itself a product of the fit).
    fit = result.model.fit_hz
    assert fit.min() >= result.mesh.floor_frequency_hz(5e-5) * (1 - 1e-9)
    assert fit.max() <= 0.65 * np.nanmin(result.self_resonance_hz)


def test_self_resonance_from_the_model_is_where_the_reactance_turns(result):
    # At the fitted self-resonance the model's tap reactance changes sign (parallel resonance).
    for i, srf in enumerate(result.self_resonance_hz):
        x = result.model.z(np.array([0.98, 1.02]) * srf, lossless=True)[:, i, i].imag
        assert x[0] > 0 > x[1]


@pytest.mark.parametrize("side_m, segment_m", [(0.3, 0.005), (0.3, 0.01), (0.5, 0.008)])
def test_breakdown_error_bounds_fresh_mom_solves(side_m, segment_m):
    # The error model against new PyNEC solves (not against its own table): a single turn of
    # 0.1 mm wire solved where its shortest segment is 1e-4, 5e-5, 3e-5 and 2e-5 wavelengths. The
    # reactance change from the 1e-4 solve must stay within the model's two errors. Measured here:
    # 0.02–0.4 %, 0.3–4.6 % and 4–25 % against bounds of 1.1 %, 9 % and 52 %.
    geom = build_loop(side_m, side_m, 1, 0.01, 0.1e-3, (1,), 0.03)
    mesh = build_mesh(geom, segment_m)
    fractions = np.array([1e-4, 5e-5, 3e-5, 2e-5])
    freqs = fractions * SPEED_OF_LIGHT_M_S / mesh.shortest_m
    sols = solve_ports(mesh, Environment(wire_conductivity_s_m=None), list(freqs))
    l_app = np.array([np.linalg.inv(s.y_raw)[0, 0].imag for s in sols]) / (2 * np.pi * freqs)
    for x, l in zip(fractions[1:], l_app[1:]):
        assert abs(l / l_app[0] - 1) <= breakdown_error(x) + breakdown_error(1e-4), x
    # ... and at 1e-4 wavelengths the MoM agrees with Grover's partial-inductance sum
    # (docs/references.md §1): measured +0.4 to +0.7 %, 1 % allowed (leads meshed at a few mm)
    qs = reference.inductance_partial_sum(*geom.current_path(0), geom.wire_radius_m)
    assert l_app[0] == pytest.approx(qs, rel=0.01, abs=0)


def test_pitch_bias_bounds_fresh_mom_solves():
    # The pitch-rule model against new PyNEC solves: a 3-turn coil, 20 mm pitch, meshed at 1, 2.5
    # and 4 pitches, at 2 MHz (all segments above 1e-4 wavelengths, so no breakdown). Change of L
    # from the finest mesh, measured +1.3 % and -5.4 %, against the model's 2.7 % and 6.7 %.
    geom = build_loop(0.4, 0.3, 3, 0.02, 0.406e-3, (3,), 0.06, "stacked")
    l_app = {}
    for ratio in (1.0, 2.5, 4.0):
        mesh = build_mesh(geom, ratio * 0.02)
        assert mesh.shortest_m * 2e6 / SPEED_OF_LIGHT_M_S >= 1e-4
        (sol,) = solve_ports(mesh, Environment(wire_conductivity_s_m=None), [2e6])
        l_app[ratio] = np.linalg.inv(sol.y_raw)[0, 0].imag / (2 * np.pi * 2e6)
    for ratio in (2.5, 4.0):
        assert abs(l_app[ratio] / l_app[1.0] - 1) <= pitch_bias(ratio) + pitch_bias(1.0), ratio
    # long segments read low (docs/notes/pynec.md, "Accuracy windows")
    assert l_app[4.0] < l_app[1.0]


def test_a_broken_down_mesh_is_flagged_unreliable():
    # 4 mm segments solved directly at 520 kHz are 7e-6 wavelengths: deep in the breakdown, where
    # the reactance has random sign. Forced direct solves there must never be called reliable.
    text = textwrap.dedent(SMALL_STACKED).replace('quality = "draft"', 'segment_length = "4 mm"')
    text = text.replace('offset = "6 cm"', 'offset = "2 cm"').replace("points = 7", "points = 4")
    res = run_sweep(loads(text), direct=True)
    below = res.frequencies_hz < res.mesh.floor_frequency_hz(5e-5)
    assert below.any() and np.all(res.source == "mom")
    assert not res.reliable[below].any()
    assert np.all(res.error_estimate[below] >= 0.2)


def test_touchstone_round_trip(result, tmp_path):
    write_sweep(result, tmp_path, z0=50.0)
    k = len(result.tap_turns)
    multi = skrf.Network(str(tmp_path / f"taps.s{k}p"))
    assert np.allclose(multi.f, result.frequencies_hz, rtol=1e-12, atol=0)
    assert np.allclose(multi.z, result.z_ohm, rtol=1e-10, atol=0)
    for i, n in enumerate(result.tap_turns):
        one = skrf.Network(str(tmp_path / f"tap-{n}.s1p"))
        assert np.allclose(one.z[:, 0, 0], result.z_ohm[:, i, i], rtol=1e-10, atol=0)
    data = json.loads((tmp_path / "sweep.json").read_text())
    for key in ("frequencies_hz", "taps", "mesh"):
        assert key in data
    tap = data["taps"][str(result.tap_turns[0])]
    for key in ("impedance_ohm", "inductance_h", "self_resonance_hz", "reliable", "source", "error_estimate"):
        assert key in tap
    assert data["mesh"]["segments"] == result.mesh.n_segments
    assert data["mesh"]["wire_length_m"] == pytest.approx(result.geometry.wire_length_m, rel=1e-12, abs=0)
    assert (tmp_path / "impedance.png").stat().st_size > 10_000
    header = (tmp_path / "impedance.csv").read_text().splitlines()[0]
    assert header.startswith("frequency_hz,source,tap2_resistance_ohm")


def test_touchstone_s_parameters_follow_the_standard():
    # Touchstone 1.1/2.0 (IBIS Open Forum): S = (Z - R)/(Z + R) for a one-port normalised to R.
    # Check [calc, docs/references.md §8]: Z = 1 + j997.2102 ohm, R = 50 -> S11 = 0.994885 + j0.100018.
    net = skrf.Network(frequency=skrf.Frequency.from_f([530e3], unit="hz"),
                       z=np.array([[[1 + 997.2102j]]]), z0=np.array([[50.0]]))
    s = net.s[0, 0, 0]
    assert s.real == pytest.approx(0.994885, abs=5e-7)
    assert s.imag == pytest.approx(0.100018, abs=5e-7)


def test_loss_model_follows_the_skin_effect(result):
    # The fitted conductor-loss coefficient times the exact skin-effect ratio must reproduce the
    # resistance the MoM gave at the fit points (NEC's type-5 load is skin effect only).
    geom = result.geometry
    path_len = np.linalg.norm(np.subtract(*geom.current_path(1)[::-1]), axis=1).sum()
    f = result.model.fit_hz
    per_m = reference.resistance_per_length_round_wire(geom.wire_radius_m, f, result.resistivity_ohm_m)
    r_model = result.model.series_resistance(f)[:, 1, 1]
    # series resistance of the full tap ~ its path length x R' (leads included), exact round-wire
    # skin effect (docs/references.md §4): measured −1.4 to −0.5 %; 3 % as NEC's conductivity load
    # was within 0.3 % on a single loop (docs/notes/pynec.md) and the current is not uniform
    # along the leads
    assert np.allclose(r_model, path_len * per_m, rtol=0.03, atol=0)


def test_junction_scaling_keeps_resonance_and_q(result):
    # Z_ij -> s_i s_j Z_ij scales every tap's impedance; the poles (self-resonances) and the ratio
    # X/R of each tap must not move (D·L·D, D·R·D, D^-1·C·D^-1 share the generalised eigenvalues).
    s = np.array([0.97, 1.0])
    scaled = result.model.scaled(s)
    for i in range(2):
        assert scaled.self_resonance_hz(i, 1e9) == pytest.approx(result.model.self_resonance_hz(i, 1e9), rel=1e-9, abs=0)
    f = np.array([600e3, 1.2e6])
    z0, z1 = result.model.z(f), scaled.z(f)
    assert np.allclose(z1[:, 0, 0], s[0] ** 2 * z0[:, 0, 0], rtol=1e-9, atol=0)
    assert np.allclose(z1[:, 0, 1], s[0] * s[1] * z0[:, 0, 1], rtol=1e-9, atol=0)
