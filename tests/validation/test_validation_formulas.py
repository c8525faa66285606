"""Formulas the validation sets the solvers against (simloop.reference).

Sources: vector area and magnetic-moment radiation resistance (Balanis 2016 ch. 5;
docs/references.md §3), Rosa's round-wire correction (Rosa 1908, Grover 1946; §1), Simpson weights
on the sphere (Abramowitz and Stegun 1964, eq. 25.4.6; the solid-angle integrals 4π and 8π/3 are
exact), the average gain test (common practice in NEC modelling; §9) and Richardson extrapolation
(Richardson 1911; §9).

Moved here from tests/test_validation.py with the formulas (issue 8).
"""

import numpy as np
import pytest

from simloop import constants, reference
from simloop.reference import (
    average_gain,
    magnetic_moment_area_m2,
    radiation_resistance_moment,
    richardson_extrapolation,
    rosa_b,
    rosa_round_wire_correction,
    sphere_weights,
)

ETA0 = constants.ETA0_OHM


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
    r = richardson_extrapolation(d, v, 1.5)
    assert r.estimate == pytest.approx(1.0, rel=1e-12, abs=0)
    assert r.observed_order == pytest.approx(1.5, rel=1e-6, abs=0)
    assert r.code == "extrapolated"
    r = richardson_extrapolation(d, np.array([1.0, 1.01, 1.005]), 1.5)
    assert r.estimate is None and r.code == "not-monotone"
