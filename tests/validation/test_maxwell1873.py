"""Coaxial circular filaments (Maxwell, *Treatise*, 1873, art. 701; Grover 1946).

Sources: Maxwell 1873 art. 701, Neumann's formula by quadrature; check values and marks in
docs/references.md §2.
"""

import numpy as np
import pytest
from simloop.reference import (
    MU0,
    inductance_partial_sum,
    mutual_inductance_coaxial_circles_maxwell1873,
)


def neumann_circles_numerical(a, b, d, points=2**17):
    """Direct Neumann integral for coaxial circles, reduced by symmetry to one angle:
    M = (μ0 a b / 2) ∫₀^{2π} cos φ / √(a² + b² + d² − 2ab cos φ) dφ, by the trapezoidal rule,
    which converges exponentially for this smooth periodic integrand (the nearest complex
    singularity lies about d/√(ab) from the real axis; 2^17 points cover d/√(ab) ≥ 1e-3). [H]"""
    phi = np.arange(points) * (2 * np.pi / points)
    f = np.cos(phi) / np.sqrt(a**2 + b**2 + d**2 - 2 * a * b * np.cos(phi))
    return MU0 * a * b / 2 * (2 * np.pi) * np.mean(f)


@pytest.mark.parametrize("a, b, d, expected_nh", [
    (0.1, 0.1, 0.05, 111.26109),  # docs/references.md §2, Maxwell 1873 art. 701 [calc]
    (0.2, 0.1, 0.1, 69.87325),    # docs/references.md §2 [calc]
])
def test_maxwell_check_values(a, b, d, expected_nh):
    m = mutual_inductance_coaxial_circles_maxwell1873(a, b, d)
    assert m * 1e9 == pytest.approx(expected_nh, abs=5e-6)  # printed to 0.01 pH


@pytest.mark.parametrize("a, b, d", [(0.1, 0.1, 0.05), (0.2, 0.1, 0.1), (0.5, 0.5, 1e-3),
                                     (0.05, 0.4, 0.3), (0.3, 0.3, 2.0)])
def test_maxwell_against_numerical_neumann_integral(a, b, d):
    # [num]: elliptic-integral closed form against direct quadrature of the Neumann integral
    m = mutual_inductance_coaxial_circles_maxwell1873(a, b, d)
    assert m == pytest.approx(neumann_circles_numerical(a, b, d), abs=0.0, rel=1e-9)


def test_maxwell_symmetry_and_dipole_limit():
    assert mutual_inductance_coaxial_circles_maxwell1873(0.2, 0.07, 0.3) == pytest.approx(
        mutual_inductance_coaxial_circles_maxwell1873(0.07, 0.2, 0.3), abs=0.0, rel=1e-14)
    # far apart: two magnetic dipoles on a common axis, M → μ0 π a² b² / (2 d³)
    a, b, d = 0.01, 0.02, 3.0
    dipole = MU0 * np.pi * a**2 * b**2 / (2 * d**3)
    assert mutual_inductance_coaxial_circles_maxwell1873(a, b, d) == pytest.approx(
        dipole, abs=0.0, rel=2 * (a**2 + b**2) / d**2)


def test_maxwell_against_polygon_partial_sum():
    # Cross-check between the library's two routes: mutual inductance of two coaxial regular
    # 180-gons from the filament routine (the mutual part of the partial sum: the pair minus each
    # ring alone) against Maxwell's circles. With the polygons scaled to the circles' areas the
    # difference falls like n^-4 (observed 1.1e-5, 6.8e-7, 5.5e-8, 3.4e-9 for n = 24, 48, 90,
    # 180); unscaled it is 1.8e-4 at n = 180 (∝ n^-2) and would fail this tolerance.
    n = 180
    phi = np.linspace(0.0, 2 * np.pi, n + 1)
    ra, rb, d = 0.1, 0.15, 0.07
    scale = np.sqrt(2 * np.pi / (n * np.sin(2 * np.pi / n)))  # vertex radius for equal area

    def ring(r, z):
        p = np.column_stack([r * scale * np.cos(phi), r * scale * np.sin(phi), np.full(n + 1, z)])
        return p[:-1], p[1:]

    sa, ea = ring(ra, 0.0)
    sb, eb = ring(rb, d)
    both = inductance_partial_sum(np.vstack([sa, sb]), np.vstack([ea, eb]), 1e-4)
    alone = inductance_partial_sum(sa, ea, 1e-4) + inductance_partial_sum(sb, eb, 1e-4)
    m_poly = (both - alone) / 2
    assert m_poly == pytest.approx(mutual_inductance_coaxial_circles_maxwell1873(ra, rb, d),
                                   abs=0.0, rel=3e-8)
