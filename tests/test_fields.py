"""Biot–Savart field of the loop's segments and the loop–rod mutual inductance.

Sources: magpylib 6.x (analytic fields of current polylines, an outside implementation); the
on-axis field of a rectangle and of a circle (Biot–Savart closed forms, docs/references.md §2);
Maxwell, *Treatise*, 1873, art. 701 (coaxial circles, via scipy.special.ellipk/ellipe).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import special

from simloop.coupling import mutual_inductance_h
from simloop.fields import CurrentSource, h_field, h_field_polyline, quasi_static_source
from simloop.geometry import build_loop
from simloop.receiver import build_rod

MU0 = 4e-7 * np.pi


def _demo_geometry():
    return build_loop(width_m=0.7, height_m=0.7, turns=5, pitch_m=0.008, wire_radius_m=0.0004,
                      tap_turns=(3, 5), lead_offset_m=0.04, style="stacked")


def test_tap_paths_against_magpylib_off_axis():
    # magpylib 6.x (Polyline, analytic, SI) is the outside reference; tolerance 0.5 % (issue).
    magpy = pytest.importorskip("magpylib")
    geom = _demo_geometry()
    src = quasi_static_source(geom)
    pts = np.random.default_rng(3).uniform(-0.8, 0.8, (400, 3))
    pts[:, 1] += 0.3     # off the winding's plane
    h = h_field(src, pts)
    for i in range(len(geom.tap_turns)):
        ps, pe = geom.current_path(i)
        assert np.allclose(ps[1:], pe[:-1]) and np.allclose(ps[0], pe[-1])   # one closed chain
        verts = np.vstack([ps, pe[-1:]])
        ref = magpy.current.Polyline(current=1.0, vertices=verts).getH(pts)
        err = np.linalg.norm(h[i].real - ref, axis=1) / np.linalg.norm(ref, axis=1)
        assert err.max() < 5e-3
        assert np.abs(h[i].imag).max() == 0


def _rect(width, height):
    a, b = width / 2, height / 2
    return np.array([[-a, 0, -b], [a, 0, -b], [a, 0, b], [-a, 0, b], [-a, 0, -b]])


@pytest.mark.parametrize("z, b_ut", [(0.0, 1.554921), (0.2, 1.084345), (1.0, 0.089018)])
def test_rectangle_on_axis_closed_form(z, b_ut):
    # On-axis Biot–Savart of a rectangle with half-sides A, B (I = 1 A):
    # B = μ0 I A B /(π √(A²+B²+z²)) [1/(A²+z²) + 1/(B²+z²)]; 1.0 × 0.6 m values [calc from the formula].
    a, b = 0.5, 0.3
    closed = MU0 * a * b / (np.pi * np.sqrt(a * a + b * b + z * z)) * (1 / (a * a + z * z) + 1 / (b * b + z * z))
    h = h_field_polyline(_rect(1.0, 0.6), [[0, z, 0]])[0]
    assert np.linalg.norm(h) * MU0 == pytest.approx(closed, rel=1e-9, abs=0)
    assert closed * 1e6 == pytest.approx(b_ut, rel=1e-5)
    assert abs(h[0]) < 1e-12 and abs(h[2]) < 1e-12


def _maxwell(a, b, d):
    # Maxwell (Treatise, 1873, art. 701): M = μ0 √(ab) [(2/k − k) K(m) − (2/k) E(m)], m = k².
    m = 4 * a * b / ((a + b) ** 2 + d * d)
    k = np.sqrt(m)
    return MU0 * np.sqrt(a * b) * ((2 / k - k) * special.ellipk(m) - 2 / k * special.ellipe(m))


@pytest.mark.parametrize("a, b, d, m_nh", [(0.1, 0.1, 0.05, 111.26109), (0.2, 0.1, 0.1, 69.87325)])
def test_polygon_against_maxwell_coaxial_circles(a, b, d, m_nh):
    # A 720-sided polygon of radius a, its flux through a coaxial circle b at distance d:
    # Gauss–Legendre over the disc. Tolerance 0.1 %: the polygon's area deficit is ~1e-5.
    sides = 720
    t = np.linspace(0, 2 * np.pi, sides + 1)
    verts = np.stack([a * np.cos(t), a * np.sin(t), np.zeros_like(t)], axis=1)
    x, w = np.polynomial.legendre.leggauss(40)
    r = 0.5 * b * (x + 1)
    wr = 0.5 * b * w
    phi = np.linspace(0, 2 * np.pi, 64, endpoint=False)
    rr, pp = np.meshgrid(r, phi, indexing="ij")
    pts = np.stack([rr * np.cos(pp), rr * np.sin(pp), np.full(rr.shape, d)], axis=-1).reshape(-1, 3)
    hz = h_field_polyline(verts, pts)[:, 2].reshape(rr.shape)
    flux = MU0 * np.sum(hz.mean(axis=1) * 2 * np.pi * r * wr)
    assert _maxwell(a, b, d) * 1e9 == pytest.approx(m_nh, rel=1e-6)
    assert flux == pytest.approx(_maxwell(a, b, d), rel=1e-3, abs=0)


@pytest.mark.parametrize("z", [0.0, 0.25, 0.5, 1.0])
def test_mutual_inductance_small_coil_on_axis(z):
    # M = μ0 μ_coil N A (H/I) (reciprocity, small-coil limit) with H from the rectangle's on-axis
    # closed form times the loop's turns; tolerance 3 % (issue): the rod averages the field over
    # its 100 mm length, which the point formula does not.
    turns, pitch = 10, 0.006
    starts, ends = [], []
    for n in range(turns):
        v = _rect(1.0, 1.0)
        v[:, 1] = n * pitch - (turns - 1) * pitch / 2
        starts.append(v[:-1])
        ends.append(v[1:])
    src = CurrentSource(np.vstack(starts), np.vstack(ends), np.ones((1, 4 * turns), dtype=complex))
    rod = build_rod(0.1, 0.01, 400, 80, 0.02, 60)
    m = mutual_inductance_h(src, rod, [[0, z, 0]], [[0, 1, 0]])[0, 0]
    a = b = 0.5
    h_axis = sum(a * b / (np.pi * np.sqrt(a * a + b * b + zz * zz)) * (1 / (a * a + zz * zz) + 1 / (b * b + zz * zz))
                 for zz in z - (np.arange(turns) * pitch - (turns - 1) * pitch / 2))
    expect = MU0 * rod.coil_permeability * rod.turns * rod.area_m2 * h_axis
    assert abs(m) == pytest.approx(expect, rel=0.03, abs=0)


def test_loop_open_circuit_voltage_is_faraday():
    # Reciprocity with the path's currents, −Σ I E·dl, against Faraday's law for a small closed
    # circuit, V = jωμ0 H·S (Jackson 1999, sec. 5.15): the wave's phase across 0.7 m at 1 MHz is
    # 0.015 rad, so they agree to ~(kL)² ≈ 2e-4; tolerance 1e-3.
    from simloop.coupling import loop_open_circuit_voltage
    from simloop.receiver import plane_wave_h

    geom = _demo_geometry()
    src = quasi_static_source(geom)
    f = 1e6
    v = loop_open_circuit_voltage(src, (1, 0, 0), (0, 0, 1), f)
    h0 = plane_wave_h((1, 0, 0), (0, 0, 1), np.zeros(3), f)
    faraday = 1j * 2 * np.pi * f * MU0 * (src.vector_area_m2() @ h0)
    assert v == pytest.approx(faraday, rel=1e-3)
    # vector area of tap i = turns × 0.49 m² along −y (the winding's sense) [geometry]
    assert src.vector_area_m2()[:, 1] == pytest.approx([-3 * 0.49, -5 * 0.49], rel=2e-2)


def test_circuit_source_plugs_in():
    # A solver's currents (here 2 A round a 1.0 × 0.6 m rectangle, given as a (1, n) array)
    # against the on-axis closed form (see above) at 0.2 m: 2 × 1.084345 µT [calc].
    from simloop.fields import circuit_source

    v = _rect(1.0, 0.6)
    src = circuit_source(v[:-1], v[1:], np.full((1, 4), 2.0))
    h = h_field(src, [[0, 0.2, 0]])[0, 0]
    assert np.linalg.norm(h) * MU0 * 1e6 == pytest.approx(2 * 1.084345, rel=1e-5)
    assert src.origin == "circuit"
    with pytest.raises(ValueError):
        circuit_source(v[:-1], v[1:], np.ones((1, 3)))
