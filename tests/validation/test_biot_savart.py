"""On-axis fields of circular and rectangular filaments (Biot–Savart).

Sources: the Biot–Savart law (Jackson 1999, ch. 5) and reciprocity; check values and marks in
docs/references.md §2 (rod permeability §6). The numerical references integrate
the Biot–Savart law dB = μ0 I dl × R / (4π R³) along the wire directly.
"""

import numpy as np
import pytest
from scipy import integrate

from simloop.reference import MU0, field_on_axis_circle, field_on_axis_rectangle


def biot_savart_polyline_axial(corners, point, current=1.0):
    """z-component of B at ``point`` from a closed polyline, by quadrature along each side. [T]"""
    corners = np.asarray(corners, dtype=float)
    bz = 0.0
    for p0, p1 in zip(corners, np.roll(corners, -1, axis=0)):
        dl = p1 - p0

        def integrand(t, p0=p0, dl=dl):
            r = point - (p0 + t * dl)
            return np.cross(dl, r)[2] / np.linalg.norm(r) ** 3

        bz += integrate.quad(integrand, 0.0, 1.0, epsabs=0.0, epsrel=1e-12)[0]
    return MU0 * current / (4 * np.pi) * bz


@pytest.mark.parametrize("z, expected_ut", [
    (0.0, 1.554921),  # docs/references.md §2, 1.0 × 0.6 m rectangle, I = 1 A [calc]
    (0.2, 1.084345),  # docs/references.md §2 [calc]
    (1.0, 0.089018),  # docs/references.md §2 [calc]
])
def test_rectangle_check_values(z, expected_ut):
    assert field_on_axis_rectangle(1.0, 0.6, z, 1.0) * 1e6 == pytest.approx(expected_ut,
                                                                          abs=5e-7)


@pytest.mark.parametrize("w, h, z", [(1.0, 0.6, 0.0), (1.0, 0.6, 0.2), (0.3, 0.9, -0.45),
                                     (0.8, 0.8, 3.0)])
def test_rectangle_against_numerical_biot_savart(w, h, z):
    # [num]: closed form against quadrature of the Biot–Savart law (counter-clockwise seen from
    # +z, i.e. right-handed about +z)
    corners = [[-w / 2, -h / 2, 0], [w / 2, -h / 2, 0], [w / 2, h / 2, 0], [-w / 2, h / 2, 0]]
    ref = biot_savart_polyline_axial(corners, np.array([0.0, 0.0, z]), 2.5)
    assert field_on_axis_rectangle(w, h, z, 2.5) == pytest.approx(ref, abs=0.0, rel=1e-10)


@pytest.mark.parametrize("radius, z", [(0.5, 0.0), (0.5, 0.3), (0.1, -1.0)])
def test_circle_against_numerical_biot_savart(radius, z):
    # [num]: on the axis each element contributes μ0 I R dφ · R / (4π (R²+z²)^{3/2}) along z;
    # integrate the full vector expression numerically instead
    def integrand(phi):
        pos = np.array([radius * np.cos(phi), radius * np.sin(phi), 0.0])
        dl = np.array([-radius * np.sin(phi), radius * np.cos(phi), 0.0])
        r = np.array([0.0, 0.0, z]) - pos
        return np.cross(dl, r)[2] / np.linalg.norm(r) ** 3

    ref = MU0 / (4 * np.pi) * integrate.quad(integrand, 0, 2 * np.pi, epsrel=1e-12)[0]
    assert field_on_axis_circle(radius, z, 1.0) == pytest.approx(ref, abs=0.0, rel=1e-10)


def test_square_far_field_is_a_dipole_of_the_same_area():
    # far on the axis any loop looks like a magnetic dipole m = I·A: B → μ0 I A / (2π z³)
    side, z = 0.5, 40.0
    dipole = MU0 * side**2 / (2 * np.pi * z**3)
    assert field_on_axis_rectangle(side, side, z) == pytest.approx(dipole, abs=0.0,
                                                                   rel=2 * side**2 / z**2)
    assert field_on_axis_circle(0.3, z) == pytest.approx(MU0 * np.pi * 0.09 / (2 * np.pi * z**3),
                                                         abs=0.0, rel=2 * 0.09 / z**2)


@pytest.mark.parametrize("z, expected_uh", [
    (0.0, 3.1267),   # docs/references.md §2, loop-to-rod mutual inductance, small-coil limit [calc]
    (0.25, 2.3583),  # docs/references.md §2 [calc]
    (0.5, 1.2765),   # docs/references.md §2 [calc]
    (1.0, 0.3610),   # docs/references.md §2 [calc]
])
def test_loop_to_rod_example(z, expected_uh):
    # 10-turn 1 m square loop (turns taken coincident), coaxial rod 10 × 100 mm with 80 turns.
    # M = μ0 μ_rod N_rod A_rod (H/I) with H from the on-axis rectangle field. μ_rod = 43.98 is
    # printed rounded; it is μ_i = 400 with the prolate-spheroid demagnetising factor of
    # docs/references.md §6 (Osborn 1945, m = 10), evaluated here unrounded (43.9847).
    m = 10.0
    root = np.sqrt(m**2 - 1)
    n_d = ((m / root) * np.log(m + root) - 1) / (m**2 - 1)
    mu_rod = 400 / (1 + n_d * (400 - 1))
    assert mu_rod == pytest.approx(43.98, abs=5e-3)
    h_per_a = 10 * field_on_axis_rectangle(1.0, 1.0, z) / MU0
    mutual = MU0 * mu_rod * 80 * np.pi * 0.005**2 * h_per_a
    assert mutual * 1e6 == pytest.approx(expected_uh, abs=5e-5)  # printed to 0.1 nH
