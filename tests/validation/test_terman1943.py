"""Single-turn rectangle (Terman, *Radio Engineers' Handbook*, 1943, sec. 2; Grover 1946), the
circle (Rosa/Grover), and Q / bandwidth relations (Terman 1943, sec. 3).

Sources: Terman 1943, Grover 1946, Rosa 1908; check values and marks in docs/references.md §1 and
§14.
"""

import numpy as np
import pytest
from scipy import optimize

from simloop.reference import (
    MU0,
    bandwidth_3db,
    inductance_circle_rosa,
    inductance_partial_sum,
    inductance_rectangle_terman1943,
    mutual_inductance_coaxial_circles_maxwell1873,
    q_factor,
    q_loaded,
)


def rectangle_pieces(a, b):
    corners = np.array([[0, 0, 0], [a, 0, 0], [a, b, 0], [0, b, 0]], dtype=float)
    return corners, np.roll(corners, -1, axis=0)


@pytest.mark.parametrize("a, b, d, expected_uh", [
    (1.0, 1.0, 2e-3, 4.90779),  # docs/references.md §1, Terman 1943 sec. 2 [calc]
    (1.0, 0.6, 2e-3, 3.74570),  # docs/references.md §1 [calc]
    (0.5, 0.5, 1e-3, 2.45390),  # docs/references.md §1 [calc]
])
def test_terman_rectangle_check_values(a, b, d, expected_uh):
    # printed to 10 pH: half a unit of the last digit
    assert inductance_rectangle_terman1943(a, b, d) * 1e6 == pytest.approx(expected_uh, abs=5e-6)


@pytest.mark.parametrize("a, b, d", [(1.0, 1.0, 2e-3), (1.0, 0.6, 2e-3), (0.5, 0.5, 1e-3),
                                     (0.8, 0.2, 0.8e-3), (0.05, 0.03, 1e-3)])
def test_partial_sum_of_one_rectangle_equals_terman(a, b, d):
    # docs/references.md §1: "Equals the partial-inductance sum" [src secondary + num]. Terman replaces
    # asinh(l/r) by ln(2l/r) and √(l²+r²) by l in the self terms: relative error O((d/a)²).
    starts, ends = rectangle_pieces(a, b)
    exact = inductance_partial_sum(starts, ends, d / 2, model="hf")
    tol = 2 * (d / min(a, b)) ** 2 + 1e-12
    assert inductance_rectangle_terman1943(a, b, d) == pytest.approx(exact, abs=0.0, rel=tol)


def test_dc_adds_internal_inductance_of_the_perimeter():
    # Physics: uniform current adds μ0/(8π) = 0.05 µH per metre of wire (GMD r → r·e^(-1/4)),
    # i.e. 0.1·(a + b) µH for the perimeter 2(a + b). Both the Terman dc value and the dc
    # partial sum show exactly that (the partial sum also shifts the tiny +r terms).
    for a, b, d in [(1.0, 1.0, 2e-3), (1.0, 0.6, 2e-3), (0.5, 0.5, 1e-3)]:
        extra = inductance_rectangle_terman1943(a, b, d, "dc") - inductance_rectangle_terman1943(
            a, b, d, "hf")
        assert extra * 1e6 == pytest.approx(0.1 * (a + b), abs=0.0, rel=1e-12)
        starts, ends = rectangle_pieces(a, b)
        extra_ps = inductance_partial_sum(starts, ends, d / 2, "dc") - inductance_partial_sum(
            starts, ends, d / 2, "hf")
        # the +r terms: 4·(μ0/2π)·r·(e^(-1/4) − 1), about −0.2 nH here
        r_terms = 4 * MU0 / (2 * np.pi) * (d / 2) * (np.exp(-0.25) - 1)
        assert extra_ps == pytest.approx(0.1e-6 * (a + b) + r_terms, abs=0.0, rel=1e-6)


@pytest.mark.xfail(strict=True, reason="a summary we once used said the DC value is 0.2(a+b) µH larger; "
                   "the internal inductance μ0/(8π) per metre over the perimeter 2(a+b) gives "
                   "0.1(a+b) µH, and the dc partial sum agrees with 0.1(a+b) (docs/references.md §1)")
def test_references_dc_statement_0p2_a_plus_b():
    a, b, d = 1.0, 0.6, 2e-3
    starts, ends = rectangle_pieces(a, b)
    extra = inductance_partial_sum(starts, ends, d / 2, "dc") - inductance_partial_sum(
        starts, ends, d / 2, "hf")
    assert extra * 1e6 == pytest.approx(0.2 * (a + b), abs=0.0, rel=1e-3)


# --- circle (Rosa / Grover) ------------------------------------------------------------------

def test_rosa_circle_check_value():
    # docs/references.md §1: b = 0.5 m, r = 1 mm → 3.95467 µH (HF) [calc]; formula [mem]
    assert inductance_circle_rosa(0.5, 1e-3, "hf") * 1e6 == pytest.approx(3.95467, abs=5e-6)


def test_rosa_dc_minus_hf():
    # DC constant −1.75 instead of −2: difference μ0·b/4 [mem], = internal inductance μ0/(8π)
    # times the circumference 2πb
    b, r = 0.3, 0.5e-3
    diff = inductance_circle_rosa(b, r, "dc") - inductance_circle_rosa(b, r, "hf")
    assert diff == pytest.approx(MU0 / (8 * np.pi) * 2 * np.pi * b, abs=0.0, rel=1e-12)


@pytest.mark.parametrize("b, r", [(0.5, 1e-3), (0.1, 1e-3), (0.5, 1e-4)])
def test_rosa_against_maxwell_filaments_at_gmd(b, r):
    # Independent check: the HF self-inductance of a thin ring is the mutual inductance of two
    # coaxial filaments of radius b a distance r (the GMD of a tube) apart, from Maxwell's
    # elliptic-integral formula; they agree to O((r/b)² ln(8b/r)).
    exact = mutual_inductance_coaxial_circles_maxwell1873(b, b, r)
    tol = (r / b) ** 2 * np.log(8 * b / r)
    assert inductance_circle_rosa(b, r) == pytest.approx(exact, abs=0.0, rel=tol)


# --- Q and bandwidth ---------------------------------------------------------------------------

def test_q_factor_and_bandwidth_of_series_rlc():
    # Terman 1943 sec. 3: Q = X/R; the half-power bandwidth of a series RLC is f0/Q — exactly,
    # since ω2 − ω1 = R/L. Found here by solving |I|² = ½|I0|² numerically.
    L, C, R = 200e-6, 180e-12, 3.0
    w0 = 1 / np.sqrt(L * C)
    f0 = w0 / (2 * np.pi)
    q = q_factor(w0 * L, R)

    def half_power(w):
        x = w * L - 1 / (w * C)
        return R**2 / (R**2 + x**2) - 0.5

    w1 = optimize.brentq(half_power, 0.5 * w0, w0, xtol=1e-6, rtol=1e-15)
    w2 = optimize.brentq(half_power, w0, 2 * w0, xtol=1e-6, rtol=1e-15)
    assert (w2 - w1) / (2 * np.pi) == pytest.approx(bandwidth_3db(f0, q), abs=0.0, rel=1e-9)
    assert q_factor(-w0 * L, R) == q  # sign of the reactance does not matter


def test_q_loaded_adds_series_losses():
    # coil resistance R_L and capacitor ESR R_C in series: Q = ωL/(R_L + R_C) = 1/(1/Q_L + 1/Q_C)
    L, C, r_l, r_c = 250e-6, 150e-12, 4.0, 0.6
    w0 = 1 / np.sqrt(L * C)
    q_l = q_factor(w0 * L, r_l)
    q_c = q_factor(1 / (w0 * C), r_c)
    assert q_loaded(q_l, q_c) == pytest.approx(w0 * L / (r_l + r_c), abs=0.0, rel=1e-12)
    assert q_loaded(q_l, q_c, 1e300) == pytest.approx(q_loaded(q_l, q_c), abs=0.0, rel=1e-12)
    assert q_loaded(100.0, 400.0, 200.0) == pytest.approx(1 / (1 / 100 + 1 / 400 + 1 / 200))
    with pytest.raises(ValueError):
        q_loaded(100.0, 0.0)
