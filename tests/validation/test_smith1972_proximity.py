"""Proximity effect of closely wound turns (G. S. Smith, IEEE Trans. AP-20, 1972).

Sources: Smith 1972, Miron 2006. The table is docs/references.md §4: values computed there with the same 2-D model
(perfect-conductor limit, coplanar wires, c/a = half spacing / wire radius) [calc]. The method is
confirmed via Miron, *Small Antenna Design* (2006), app. D [src]; Smith's own printed table is
NOT confirmed, so it is not used here.
"""

import numpy as np
import pytest
from scipy import integrate

from simloop.reference import proximity_factor_smith1972, proximity_factor_two_wires_exact
from simloop.reference import _proximity_coefficients  # internal: to check the boundary condition

SPACINGS = (1.2, 1.5, 2.0, 3.0, 4.0)
TABLE = {  # docs/references.md §4, R_p/R_0 [calc], printed to 3 decimals
    2: (0.268, 0.192, 0.116, 0.054, 0.031),
    4: (0.777, 0.469, 0.252, 0.106, 0.058),
    6: (1.210, 0.658, 0.330, 0.133, 0.072),
    8: (1.577, 0.796, 0.382, 0.149, 0.080),
}


@pytest.mark.parametrize("turns", sorted(TABLE))
@pytest.mark.parametrize("column", range(len(SPACINGS)))
def test_table_to_printed_decimals(turns, column):
    value = proximity_factor_smith1972(turns, SPACINGS[column])
    # must round to the printed value: within half a unit of the third decimal
    assert abs(value - TABLE[turns][column]) <= 5e-4 + 1e-12


@pytest.mark.parametrize("ca", [1.01, 1.05, 1.2, 1.5, 2.0, 3.0, 4.0, 10.0])
def test_two_wires_match_exact_conformal_solution(ca):
    # [num] Fourier-series (multipole) solution against the closed-form two-wire result derived
    # by conformal mapping (see proximity_factor_two_wires_exact): independent methods
    assert proximity_factor_smith1972(2, ca) == pytest.approx(
        float(proximity_factor_two_wires_exact(ca)), abs=0.0, rel=1e-10)


def test_exact_two_wire_far_limit():
    # c ≫ a: the first harmonic alone, c₁ = a/c, gives R_p/R_0 = c₁²/2 = a²/(2c²) [derived];
    # the next term is of relative order (a/c)² (observed −0.25 (a/c)²)
    for ca in (20.0, 100.0):
        assert proximity_factor_two_wires_exact(ca) == pytest.approx(1 / (2 * ca**2),
                                                                     abs=0.0, rel=1 / ca**2)


def test_converged_in_harmonics():
    ref = proximity_factor_smith1972(8, 1.2)
    assert proximity_factor_smith1972(8, 1.2, harmonics=200) == pytest.approx(ref, abs=0.0,
                                                                              rel=1e-12)
    # too few harmonics is visibly wrong at close spacing: the default is not a no-op
    assert abs(proximity_factor_smith1972(8, 1.2, harmonics=2) - ref) > 1e-3


def test_single_wire_and_bad_input():
    assert proximity_factor_smith1972(1, 1.5) == 0.0
    with pytest.raises(ValueError):
        proximity_factor_smith1972(4, 1.0)  # touching wires
    with pytest.raises(ValueError):
        proximity_factor_smith1972(0, 2.0)


@pytest.mark.parametrize("turns, ca", [(4, 1.5), (3, 1.2)])
def test_solution_makes_every_wire_a_flux_line(turns, ca):
    # Independent check of the N-wire solution: with the solved surface currents, the vector
    # potential A_z ∝ Σ_p ∮ K_p(φ') ln|r − r_p(φ')| dφ', integrated numerically, must be the same
    # all round each wire (perfect conductor). Compare its spread with that for uniform currents.
    harmonics = 40
    coeffs = _proximity_coefficients(turns, ca, harmonics)  # radius a = 1, c0 = 1
    centres = (2 * np.arange(turns) - (turns - 1)) * ca
    m = np.arange(1, harmonics + 1)

    def potential(n, phi, with_harmonics):
        r = np.array([centres[n] + np.cos(phi), np.sin(phi)])
        total = 0.0
        for p in range(turns):
            c = coeffs[p] if with_harmonics else np.zeros(harmonics)

            def f(t, p=p, c=c):
                k = 1.0 + np.dot(c, np.cos(m * t))
                return k * np.log(np.hypot(r[0] - centres[p] - np.cos(t), r[1] - np.sin(t)))

            if p == n:  # log singularity at t = φ: integrate one period centred on it
                val = integrate.quad(f, phi - np.pi, phi + np.pi, points=[phi], limit=400,
                                     epsabs=1e-13, epsrel=1e-13)[0]
            else:
                val = integrate.quad(f, 0.0, 2 * np.pi, limit=400, epsabs=1e-13,
                                     epsrel=1e-13)[0]
            total += val
        return total

    angles = np.linspace(0.0, np.pi, 7)  # symmetric about the plane: half a turn suffices
    for n in range(turns):
        solved = [potential(n, a, True) for a in angles]
        uniform = [potential(n, a, False) for a in angles]
        assert np.ptp(uniform) > 0.05
        assert np.ptp(solved) < 1e-7 * np.ptp(uniform)
