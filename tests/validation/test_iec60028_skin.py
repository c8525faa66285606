"""Copper resistivity (IEC 60028), skin depth and the exact round-wire AC resistance.

Sources: IEC 60028, ASTM B258, the Bessel-function skin-effect solution (Ramo, Whinnery, Van Duzer);
check values and marks in docs/references.md §4.
"""

import warnings
from fractions import Fraction
from math import factorial

import numpy as np
import pytest
from scipy import special

from simloop.reference import (
    ALPHA_COPPER_IEC60028,
    MU0,
    RESISTIVITY_COPPER_IEC60028,
    ac_resistance_ratio_round_wire,
    resistance_per_length_round_wire,
    resistivity_copper,
    skin_depth,
)

RHO = RESISTIVITY_COPPER_IEC60028


def awg_diameter_m(n):
    # ASTM B258, docs/references.md §4 [src secondary]: d = 0.127 mm · 92^((36 − n)/39)
    return 0.127e-3 * 92 ** ((36 - n) / 39)


def kelvin_ratio(radius, frequency, rho):
    """R/R_dc from Kelvin functions, x = √2·a/δ:
    (x/2)(ber x · bei' x − bei x · ber' x)/(ber'² x + bei'² x) [standard form, mem; checked here
    against the Bessel form]."""
    x = np.sqrt(2) * radius / skin_depth(rho, frequency)
    ber, bei, berp, beip = special.ber(x), special.bei(x), special.berp(x), special.beip(x)
    return x / 2 * (ber * beip - bei * berp) / (berp**2 + beip**2)


def test_iec60028_constants():
    # docs/references.md §4 [src secondary]: ρ20 = 1/58 Ω·mm²/m = 1.7241e-8 Ω·m, α20 = 3.93e-3 /K
    assert RHO == pytest.approx(1.7241e-8, abs=5e-13)
    assert ALPHA_COPPER_IEC60028 == 3.93e-3
    assert resistivity_copper() == RHO
    assert resistivity_copper(70.0) == pytest.approx(RHO * (1 + 3.93e-3 * 50), abs=0.0, rel=1e-15)
    assert resistivity_copper(np.array([0.0, 20.0])).shape == (2,)


@pytest.mark.parametrize("f, expected_um", [
    (530e3, 90.775),  # docs/references.md §4 copper skin depth [calc]
    (1e6, 66.085),    # docs/references.md §4 [calc]
])
def test_skin_depth_check_values(f, expected_um):
    assert skin_depth(RHO, f) * 1e6 == pytest.approx(expected_um, abs=5e-4)


def test_skin_depth_scaling():
    d = skin_depth(RHO, 1e6)
    assert skin_depth(RHO, 4e6) == pytest.approx(d / 2, abs=0.0, rel=1e-14)
    assert skin_depth(RHO, 1e6, mu_r=9.0) == pytest.approx(d / 3, abs=0.0, rel=1e-14)


@pytest.mark.parametrize("gauge, expected_ratio, expected_mohm_per_m", [
    (14, 6.41523, 53.15),   # docs/references.md §4, copper 20 °C, 1 MHz [calc]
    (20, 3.33598, 111.12),  # docs/references.md §4 [calc]
    (24, 2.20594, None),    # docs/references.md §4 [calc]
])
def test_round_wire_check_values(gauge, expected_ratio, expected_mohm_per_m):
    a = awg_diameter_m(gauge) / 2
    assert ac_resistance_ratio_round_wire(a, 1e6, RHO) == pytest.approx(expected_ratio, abs=5e-6)
    if expected_mohm_per_m is not None:
        assert resistance_per_length_round_wire(a, 1e6, RHO) * 1e3 == pytest.approx(
            expected_mohm_per_m, abs=5e-3)


def test_awg_diameters_used_above():
    # docs/references.md §4 [calc]: 14 → 1.6277 mm; 20 → 0.8118; 24 → 0.5106
    for n, d_mm in [(14, 1.6277), (18, 1.0237), (20, 0.8118), (22, 0.6438), (24, 0.5106)]:
        assert awg_diameter_m(n) * 1e3 == pytest.approx(d_mm, abs=5e-5)


@pytest.mark.parametrize("a_over_delta", [0.05, 0.3, 1.0, 2.0, 3.7, 8.0, 20.0])
def test_bessel_ratio_equals_kelvin_functions(a_over_delta):
    # docs/references.md §4 [num]: Kelvin functions give the same ratio. Tolerance 1e-9: scipy's
    # ber/bei/berp/beip are themselves off by 1.1e-10 relative near x = 11 (a/δ = 8), as the
    # exact-arithmetic series below shows (the Bessel form is right to 2e-16 there).
    f = 1e6
    a = a_over_delta * skin_depth(RHO, f)
    assert ac_resistance_ratio_round_wire(a, f, RHO) == pytest.approx(
        kelvin_ratio(a, f, RHO), abs=0.0, rel=1e-9)


def exact_series_ratio(a_over_delta, terms=160):
    """Re{(ka/2) J0(ka)/J1(ka)} = Re{S0/S1} from the power series in exact rational arithmetic,
    with (ka/2)² = −j (a/δ)²/2, S0 = Σ (−q)^k/(k!)², S1 = Σ (−q)^k/(k!(k+1)!)."""
    y = Fraction(a_over_delta)
    q = (Fraction(0), -y * y / 2)
    p = (Fraction(1), Fraction(0))
    s0 = [Fraction(0), Fraction(0)]
    s1 = [Fraction(0), Fraction(0)]
    for k in range(terms):
        sign = -1 if k % 2 else 1
        f0 = Fraction(sign, factorial(k) ** 2)
        f1 = Fraction(sign, factorial(k) * factorial(k + 1))
        s0 = [s0[0] + f0 * p[0], s0[1] + f0 * p[1]]
        s1 = [s1[0] + f1 * p[0], s1[1] + f1 * p[1]]
        p = (p[0] * q[0] - p[1] * q[1], p[0] * q[1] + p[1] * q[0])
    return float((s0[0] * s1[0] + s0[1] * s1[1]) / (s1[0] ** 2 + s1[1] ** 2))


@pytest.mark.parametrize("a_over_delta", [0.3, 3.7, 8.0, 20.0])
def test_bessel_ratio_against_exact_series(a_over_delta):
    # [num] exact rational arithmetic: the only rounding is the final conversion to float
    f = 1e6
    a = a_over_delta * skin_depth(RHO, f)
    # a/δ is recomputed from a; its rounding (1e-16) enters the ratio at first order
    exact = exact_series_ratio(float(a / skin_depth(RHO, f)))
    assert ac_resistance_ratio_round_wire(a, f, RHO) == pytest.approx(exact, abs=0.0, rel=1e-14)


def test_low_frequency_series():
    # small x = √2 a/δ: R/R_dc = 1 + x⁴/192 − ... [mem; the Kelvin-function series]
    f = 1e6
    for ratio in (0.02, 0.1):
        a = ratio * skin_depth(RHO, f)
        x = np.sqrt(2) * ratio
        assert ac_resistance_ratio_round_wire(a, f, RHO) - 1 == pytest.approx(x**4 / 192,
                                                                               abs=0.0, rel=x**4)


@pytest.mark.parametrize("a_over_delta", [50.0, 1e3, 1e5])
def test_large_radius_no_overflow_and_asymptote(a_over_delta):
    # a ≫ δ: R/R_dc = a/(2δ) + 1/4 + 3δ/(32a) + O((δ/a)²) [derived from the Hankel asymptotics]
    f = 1e6
    a = a_over_delta * skin_depth(RHO, f)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        ratio = ac_resistance_ratio_round_wire(a, f, RHO)
    assert np.isfinite(ratio)
    asym = a_over_delta / 2 + 0.25 + 3 / (32 * a_over_delta)
    assert ratio == pytest.approx(asym, abs=0.0, rel=1 / a_over_delta**3 + 1e-12)


def test_dc_limit_and_per_length():
    # 1 Hz: a/δ = 0.006, the ratio is 1 + x⁴/192 = 1 + 2.8e-11 and R' = ρ/(π a²) to that
    a = 0.4e-3
    assert ac_resistance_ratio_round_wire(a, 1.0, RHO) == pytest.approx(1.0, abs=1e-10)
    assert resistance_per_length_round_wire(a, 1.0, RHO) == pytest.approx(RHO / (np.pi * a**2),
                                                                          abs=0.0, rel=1e-10)
    # defaults to IEC copper
    assert resistance_per_length_round_wire(a, 1e6) == resistance_per_length_round_wire(a, 1e6,
                                                                                         RHO)


def test_high_frequency_limit_is_surface_resistance():
    # a ≫ δ: R' → R_s/(2πa), R_s = ρ/δ = √(π f μ0 ρ), to O(δ/a)
    a, f = 2e-3, 30e6
    delta = skin_depth(RHO, f)
    r_s = np.sqrt(np.pi * f * MU0 * RHO)
    assert resistance_per_length_round_wire(a, f, RHO) == pytest.approx(r_s / (2 * np.pi * a),
                                                                        abs=0.0, rel=delta / a)
