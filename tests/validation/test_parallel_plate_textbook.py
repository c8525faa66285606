"""The sliding-plate tuner against the textbook parallel-plate law C = ε0 ε_r A/d.

Sources: the law is in every electromagnetism textbook (e.g. Terman, *Radio Engineers' Handbook*, 1943,
sec. 2 [mem for the section]); it neglects fringing. ε0 = 8.8541878128e-12 F/m is CODATA 2018; the
code derives ε0 from μ0 = 4π·10⁻⁷ H/m and c, 8.854187817e-12 F/m, 6e-10 away.
"""

import numpy as np
import pytest

from simloop.tuner import (
    EPSILON0_F_M,
    PlateTuner,
    air_layer_factor,
    fringing_excess_palmer1937,
    parallel_plate_capacitance,
)

EPS0_CODATA2018 = 8.8541878128e-12


def test_epsilon0():
    assert EPSILON0_F_M == pytest.approx(EPS0_CODATA2018, rel=1e-9, abs=0)


def test_textbook_examples():
    # 1 m² at 1 mm in air: ε0 A/d = 8.854 nF [calc]; 10 × 10 cm at 1 mm: 88.54 pF [calc].
    assert parallel_plate_capacitance(1.0, 1e-3) == pytest.approx(8.8541878e-9, rel=1e-7, abs=0)
    assert parallel_plate_capacitance(0.01, 1e-3) == pytest.approx(88.541878e-12, rel=1e-7, abs=0)
    # ε_r and parallel gaps multiply.
    assert parallel_plate_capacitance(0.01, 1e-3, 3.2, 2) == pytest.approx(2 * 3.2 * 88.541878e-12, rel=1e-7, abs=0)


def test_plate_tuner_against_the_law():
    t = PlateTuner(plate_width_m=0.08, plate_length_m=0.12, gaps=2, dielectric_thickness_m=1e-4,
                   permittivity=3.2, travel_m=0.12, stray_f=10e-12, q=1000.0)
    x = np.array([0.0, 0.01, 0.06, 0.12])
    expected = 10e-12 + 2 * EPS0_CODATA2018 * 3.2 * 0.08 * x / 1e-4
    assert t.capacitance_f(x) == pytest.approx(expected, rel=1e-8, abs=0)
    assert t.min_f == 10e-12
    assert t.max_f == pytest.approx(expected[-1], rel=1e-8, abs=0)
    # The inverse: position for a capacitance; NaN outside the tuner's range.
    assert t.position_m(expected) == pytest.approx(x, rel=1e-8, abs=1e-15)  # ε0 values differ by 6e-10
    assert np.isnan(t.position_m([5e-12, 2 * t.max_f])).all()
    # A travel longer than the plates adds nothing beyond the plate length.
    longer = PlateTuner(0.08, 0.12, 2, 1e-4, 3.2, 0.2, 10e-12, 1000.0)
    assert longer.max_f == pytest.approx(t.max_f, rel=1e-12, abs=0)


def test_air_layer_is_a_series_capacitor():
    # d/ε_r of dielectric in series with t of air: C = C1 C2/(C1 + C2) [calc from the law].
    a, d, er, t = 0.01, 1e-4, 3.2, 10e-6
    c1 = EPS0_CODATA2018 * er * a / d
    c2 = EPS0_CODATA2018 * a / t
    assert air_layer_factor(d, er, t) == pytest.approx((c1 * c2 / (c1 + c2)) / c1, rel=1e-12, abs=0)


def test_palmer_fringing_is_small_for_thin_dielectrics():
    # Palmer (1937) [mem]: (d/πa)(1 + ln(2πa/d)); a = 80 mm, d = 0.1 mm: 3.979e-4 × (1 + ln 5026.5)
    # = 3.789e-3 [calc, by hand]; a = 10 mm: 3.183e-3 × (1 + ln 628.3) = 2.369e-2 [calc].
    assert fringing_excess_palmer1937(0.08, 1e-4) == pytest.approx(3.789e-3, rel=1e-3, abs=0)
    assert fringing_excess_palmer1937(0.01, 1e-4) == pytest.approx(2.369e-2, rel=1e-3, abs=0)
    assert fringing_excess_palmer1937(0.0, 1e-4) == 0.0
