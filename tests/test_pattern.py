"""The pattern physics: small-loop law, directivity, effective height, nulls, their filling,
elevation and polarisation, the rod, and the receive response by reciprocity.

The MoM meshes are single turns (76 segments, well under a second a solve).

Sources: Balanis, *Antenna Theory*, ch. 5 (small loop: |cos φ| pattern, directivity 1.5,
effective height 2πNA/λ); the null-filling law 20·log10(e/√(1+e²)) and the elevation and
polarisation law of a vertical loop, derived in docs/references.md §9 and §18; reciprocity
(Lorentz) between transmit far field and receive voltage.
"""

import numpy as np
import pytest

from simloop import patterns as P
from simloop.geometry import build_loop
from simloop.mesh import C0, build_mesh
from simloop.solve import Environment, solve_far_field

F_HZ = 1e6
SIDE_M = 0.5


@pytest.fixture(scope="module")
def single_turn():
    """A 0.5 m square single turn (0.8 mm wire, 5 cm leads, a 4 mm step where the turn closes),
    lossless, free space, 1 MHz."""
    geom = build_loop(SIDE_M, SIDE_M, 1, 0.004, 0.4e-3, (1,), 0.05, "stacked")
    mesh = build_mesh(geom, 0.03)
    (ff2,) = solve_far_field(mesh, Environment(wire_conductivity_s_m=None), [F_HZ], step_deg=2.0, workers=1)
    return P.PortFarField(ff2), ff2, mesh


def test_small_loop_follows_cos_phi_at_the_horizon(single_turn):
    # Balanis 2016, ch. 5 (published): a small loop's far field is ∝ sin of the angle from its
    # axis; at zero elevation, vertical polarisation, that is |cos φ|. Tolerance 0.2 dB over
    # ±60° of the maximum (the issue's; measured 0.003 dB: the lead's electric term).
    pff, _, _ = single_turn
    for centre in (0.0, 180.0):
        az = centre + np.arange(-60.0, 60.5, 1.0)
        v = np.abs(pff.voltage(az, 0.0)[0])
        ref = np.abs(pff.voltage(np.array([centre]), 0.0)[0, 0])
        law = np.abs(np.cos(np.radians(az)))
        assert np.max(np.abs(20 * np.log10(v / ref) - 20 * np.log10(law))) < 0.2


def test_effective_height_is_two_pi_area_over_lambda(single_turn):
    # Balanis 2016 / Kraus (published): h_e = 2πNA/λ for a small loop; A = 0.25 m² (centreline
    # square, N = 1). The leads add about 0.02 % of area; tolerance 0.5 % (measured 0.03 %).
    pff, _, _ = single_turn
    v = np.abs(pff.voltage(np.arange(0.0, 360.0, 1.0), 0.0)[0]).max()
    assert v == pytest.approx(2 * np.pi * SIDE_M**2 * F_HZ / C0, rel=5e-3, abs=0)


def test_directivity_is_one_and_a_half(single_turn):
    # Balanis 2016, ch. 5 (published): small-loop directivity 1.5 (1.761 dBi), from the pattern
    # integral over the 2° grid (Simpson). Tolerance 0.5 %: the grid's quadrature error on a
    # sin² pattern is ~1e-5 and the lead's electric term adds ~e² ≈ 2e-4 (measured 1.49995).
    pff, _, _ = single_turn
    d = P.directivity(pff.e_theta_v[0], pff.e_phi_v[0], pff.theta_deg, pff.phi_deg)
    assert d == pytest.approx(1.5, rel=5e-3, abs=0)


def test_nulls_lie_on_the_axis_where_the_moment_points(single_turn):
    pff, _, _ = single_turn
    m, p, resid = pff.fit_dipole_moments()
    az = np.arange(0.0, 360.0, 1.0)
    ref = np.abs(pff.voltage(az, 0.0)[0]).max()
    nulls = P.find_minima(lambda a: np.abs(pff.voltage(a, 0.0)[0]), az, ref)
    assert sorted(round(a) for a, _ in nulls) in ([89, 269], [90, 270], [91, 271])
    # The issue: nulls on the axis within 1°. Derived: the null is where m·φ̂ = 0, i.e. at
    # the azimuth of m itself (mod 180°: the leads and the turn step tilt m slightly); 0.01°
    # covers the refinement (1e-6°) and the interpolation.
    axis = np.degrees(np.arctan2(m[0, 1].real, m[0, 0].real))
    for a, depth in nulls:
        off = (a - 90.0 + 90.0) % 180.0 - 90.0
        assert abs(off) < 1.0
        assert abs(((a - axis) + 90.0) % 180.0 - 90.0) < 0.01
        assert depth < -30.0
    assert resid[0] < 1e-3, "a 0.5 m loop at 1 MHz is a dipole to 1e-3 (kD ≈ 0.01)"


def test_interpolated_response_matches_a_finer_solve(single_turn):
    # The 2° grid is interpolated; a 1° solve of the same excitation gives the odd degrees
    # directly (and θ = 59° for an elevation of 31°, off the 2° grid).
    pff, _, mesh = single_turn
    (ff1,) = solve_far_field(mesh, Environment(wire_conductivity_s_m=None), [F_HZ], step_deg=1.0, workers=1)
    fine = P.PortFarField(ff1)
    az = np.arange(1.0, 360.0, 2.0)
    for el in (0.0, 31.0):
        for pol in ("vertical", "horizontal"):
            a, b = pff.voltage(az, el, pol)[0], fine.voltage(az, el, pol)[0]
            scale = np.abs(fine.voltage(np.arange(0.0, 360.0, 1.0), el, "vertical")[0]).max()
            assert np.max(np.abs(a - b)) < 1e-5 * scale  # −100 dB: far below any null reported


@pytest.mark.parametrize("e, depth_db", [(0.05, -26.0), (0.1, -20.0), (0.2, -14.2)])
def test_electric_dipole_fills_the_null_by_the_law(e, depth_db):
    # Derived (module notes): |cos φ + j e| has its null at e/√(1+e²) of its maximum; values
    # computed from the formula to 0.1 dB as printed. The null finder on the vector dipole
    # model must reproduce the law to 1e-3 dB (golden-section refinement to 1e-6°).
    m = np.array([[0.0, 1.0, 0.0]])
    p = np.array([[0.0, 0.0, 1j * e / C0]])
    az = np.arange(0.0, 360.0, 1.0)
    v = np.abs(P.dipole_response(m, p, F_HZ, az, 0.0)[0])
    nulls = P.find_minima(lambda a: np.abs(P.dipole_response(m, p, F_HZ, a, 0.0)[0]), az, v.max())
    assert len(nulls) == 2
    for a, d in nulls:
        assert d == pytest.approx(float(P.null_filling_depth_db(e)), abs=1e-3)
        assert d == pytest.approx(depth_db, abs=0.06)  # printed to 0.1 dB; −14.15 prints as −14.2
        assert abs(((a - 90.0) + 90.0) % 180.0 - 90.0) < 1e-3


def test_electric_dipole_in_phase_moves_the_null():
    # Derived: cos φ − e = 0 → the nulls move to 90° − asin e (and its mirror), unfilled.
    e = 0.1
    m = np.array([[0.0, 1.0, 0.0]])
    p = np.array([[0.0, 0.0, e / C0]])  # V ∝ m_y cos φ − c p_z (ê = θ̂ = −ẑ at the horizon)
    az = np.arange(0.0, 360.0, 1.0)
    v = np.abs(P.dipole_response(m, p, F_HZ, az, 0.0)[0])
    nulls = P.find_minima(lambda a: np.abs(P.dipole_response(m, p, F_HZ, a, 0.0)[0]), az, v.max())
    expected = np.degrees(np.arccos(e))  # = 90° − asin e
    assert sorted(round(a, 3) for a, _ in nulls) == pytest.approx([expected, 360.0 - expected], abs=1e-3)
    assert all(d < -80.0 for _, d in nulls)


def test_cause_of_a_filled_null_is_the_electric_dipole(single_turn):
    pff, _, _ = single_turn
    m, p, _ = pff.fit_dipole_moments()
    az = np.arange(0.0, 360.0, 1.0)
    ref = np.abs(pff.voltage(az, 0.0)[0]).max()
    (a, depth), _ = P.find_minima(lambda x: np.abs(pff.voltage(x, 0.0)[0]), az, ref)
    cause, detail = P.null_cause(lambda x: pff.voltage(x, 0.0)[0],
                                 lambda x: P.dipole_response(m, 0 * p, F_HZ, x, 0.0)[0],
                                 lambda x: P.dipole_response(0 * m, p, F_HZ, x, 0.0)[0], a, ref)
    assert cause == "electric-dipole"
    # the filling law with the fitted e predicts the MoM's depth (within 0.5 dB: the rest of
    # the field beyond the dipoles is 1e-4 of the maximum, 30 dB below this null)
    assert depth == pytest.approx(detail["law_db"], abs=0.5)


def test_elevation_and_polarisation_law_on_the_mom_loop(single_turn):
    # Derived (module notes): V ∝ a_v cos φ − a_h sin e sin φ.
    # The law is for m along the axis; this loop's turn step and leads add m_z (0.2 % of m_y)
    # and p_x (c|p_x|/|m_y| = 1.5 %), whose largest possible effect on the axis response bounds
    # the tolerance (0.1 dB at 10°).
    pff, _, _ = single_turn
    m, p, _ = pff.fit_dipole_moments()
    broadside = abs(pff.voltage(np.array([0.0]), 0.0)[0, 0])
    for el in (10.0, 30.0, 60.0):
        s = np.sin(np.radians(el))
        # horizontal polarisation: the axis is the maximum, sin e of the broadside maximum
        axis_h = abs(pff.voltage(np.array([90.0]), el, "horizontal")[0, 0])
        stray = abs(m[0, 2]) * np.cos(np.radians(el)) + C0 * abs(p[0, 0])
        bound_db = 20 * np.log10(1 + stray / (abs(m[0, 1]) * s)) + 0.01
        assert 20 * np.log10(axis_h / broadside) == pytest.approx(20 * np.log10(s), abs=bound_db)
        # vertical polarisation: the axis null stays (filled only by the lead's electric term,
        # e ≈ 3e-3 → about −50 dB) within 1° of the axis at every elevation
        az = np.arange(0.0, 360.0, 1.0)
        vv = np.abs(pff.voltage(az, el, "vertical")[0])
        nulls = P.find_minima(lambda a: np.abs(pff.voltage(a, el, "vertical")[0]), az, vv.max())
        assert sorted(round(a / 90.0) for a, _ in nulls) == [1, 3]
        assert all(abs(a % 180.0 - 90.0) < 1.0 and d < -40.0 for a, d in nulls)
        # circular polarisation: the axis null fills to 20 log10(sin e) (quadrature law);
        # 0.3 dB covers the loop's own electric term (−50 dB) added to a −4…−15 dB fill
        vc = np.abs(pff.voltage(az, el, (1.0, 1j))[0])
        ref = np.abs(pff.voltage(az, 0.0, (1.0, 1j))[0]).max()
        assert 20 * np.log10(vc.min() / ref) == pytest.approx(float(P.axis_null_depth_db(el)), abs=0.3)
        # in-phase linear mix: a complete null, moved by atan(t sin e)
        t = 0.5
        mix = (1.0, t)
        nulls = P.find_minima(lambda a: np.abs(pff.voltage(a, el, mix)[0]), az,
                              np.abs(pff.voltage(az, el, mix)[0]).max())
        expected = 90.0 - float(P.axis_null_shift_deg(el, t))
        assert min(abs(a - expected) for a, _ in nulls) < 1.0  # 1°: the moment's 0.8° tilt


def test_closed_form_law_agrees_with_the_vector_dipole():
    az = np.arange(0.0, 360.0, 7.0)
    for el in (0.0, 20.0, 45.0):
        for pol in ("vertical", "horizontal", (1.0, 0.5j), (0.3, 0.8)):
            vec = P.dipole_response([[0, 1, 0]], [[0, 0, 0]], C0 / (2 * np.pi), az, el, pol)[0]
            law = P.small_loop_response(az, el, pol)
            assert np.allclose(np.abs(vec), np.abs(law), rtol=0, atol=1e-12)


def test_rod_is_a_magnetic_dipole_along_its_axis():
    # A plane wave's |H| = |E|/η0 (Balanis 2016, eq. 2-... uniform plane wave; η0 = μ0 c);
    # a horizontal rod along x nulls arrivals along x and peaks broadside to its axis.
    az = np.arange(0.0, 360.0, 1.0)
    h = np.abs(P.rod_response((1.0, 0.0, 0.0), az, 0.0))
    assert h.max() == pytest.approx(1 / (4e-7 * np.pi * C0), rel=1e-12, abs=0)
    assert h[0] < 1e-15 * h.max() and h[180] < 1e-15 * h.max()
    assert np.allclose(h / h.max(), np.abs(np.sin(np.radians(az))), atol=1e-12)
    # a rod along the loop axis (y) has the loop's pattern: |cos φ|
    hy = np.abs(P.rod_response((0.0, 1.0, 0.0), az, 0.0))
    assert np.allclose(hy / hy.max(), np.abs(np.cos(np.radians(az))), atol=1e-12)
