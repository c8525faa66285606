"""Electrically small loop: radiation resistance, effective height, directivity.

Sources: Balanis, *Antenna Theory*, ch. 5; Kraus, *Antennas*, ch. 6. Check values and marks in
docs/references.md §3.
"""

import warnings

import numpy as np
import pytest
from scipy import integrate

from simloop.errors import ValidityWarning
from simloop.reference import (
    DIRECTIVITY_SMALL_LOOP,
    SPEED_OF_LIGHT,
    effective_height_small_loop,
    radiation_resistance_small_loop,
)


@pytest.mark.parametrize("turns, area, f, expected, unit, half_digit", [
    (1, 1.0, 1e6, 3.85893, 1e-6, 5e-6),     # docs/references.md §3 [calc]: 3.85893 µΩ
    (10, 1.0, 530e3, 30.4488, 1e-6, 5e-5),  # docs/references.md §3 [calc]: 30.4488 µΩ
    (10, 1.0, 1.7e6, 3.22302, 1e-3, 5e-6),  # docs/references.md §3 [calc]: 3.22302 mΩ
])
def test_radiation_resistance_check_values(turns, area, f, expected, unit, half_digit):
    r = radiation_resistance_small_loop(area, f, turns)
    # half a unit of the last printed digit
    assert r / unit == pytest.approx(expected, abs=half_digit)


def test_radiation_resistance_constant():
    # docs/references.md §3: 320 π⁴ ≈ 31171 [mem for equation numbers]
    lam = SPEED_OF_LIGHT / 1e6
    r = radiation_resistance_small_loop(1.0, 1e6)
    assert r / (1.0 / lam**2) ** 2 == pytest.approx(31171, abs=0.5)


def test_effective_height_relation():
    # docs/references.md §3 [num]: h_e = 2πNA/λ and R_r = 80π²(h_e/λ)² for an air loop
    for turns, area, f in [(1, 1.0, 1e6), (10, 0.48, 530e3), (7, 0.2, 1.7e6)]:
        lam = SPEED_OF_LIGHT / f
        h_e = effective_height_small_loop(area, f, turns)
        assert h_e == pytest.approx(2 * np.pi * turns * area / lam, abs=0.0, rel=1e-14)
        assert radiation_resistance_small_loop(area, f, turns) == pytest.approx(
            80 * np.pi**2 * (h_e / lam) ** 2, abs=0.0, rel=1e-12)
    # a ferrite core multiplies the effective height by the rod permeability
    assert effective_height_small_loop(1e-4, 1e6, 60, permeability=35.0) == pytest.approx(
        35.0 * effective_height_small_loop(1e-4, 1e6, 60), abs=0.0, rel=1e-14)


def test_directivity_from_the_pattern():
    # docs/references.md §3 [mem + num]: pattern ∝ sin θ (θ from the loop axis), power ∝ sin² θ;
    # D = 4π / ∫ sin²θ dΩ = 1.5 = 1.761 dBi
    omega = integrate.quad(lambda t: np.sin(t) ** 2 * 2 * np.pi * np.sin(t), 0, np.pi)[0]
    assert DIRECTIVITY_SMALL_LOOP == pytest.approx(4 * np.pi / omega, abs=0.0, rel=1e-12)
    assert 10 * np.log10(DIRECTIVITY_SMALL_LOOP) == pytest.approx(1.761, abs=5e-4)


def test_validity_warning_above_a_tenth_wavelength():
    # docs/references.md §3: valid for perimeter ≲ 0.1 λ. λ(1 MHz) = 299.8 m.
    with pytest.warns(ValidityWarning, match="wavelengths"):
        radiation_resistance_small_loop(16.0, 1e6, 1, perimeter_m=32.0)
    with pytest.warns(ValidityWarning):
        effective_height_small_loop(16.0, 1e6, 1, perimeter_m=32.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        radiation_resistance_small_loop(1.0, 1.7e6, 10, perimeter_m=4.0)  # 0.023 λ: no warning
        radiation_resistance_small_loop(1.0, 1.7e6, 10)  # no perimeter: no check


def test_vectorised_over_frequency():
    f = np.array([530e3, 1e6, 1.7e6])
    r = radiation_resistance_small_loop(1.0, f, 10)
    assert r.shape == (3,)
    # ∝ f⁴
    assert r[2] / r[0] == pytest.approx((1.7e6 / 530e3) ** 4, abs=0.0, rel=1e-12)
