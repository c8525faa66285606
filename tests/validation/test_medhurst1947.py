"""Self-capacitance of single-layer solenoids (Medhurst, Wireless Engineer 24, 1947).

Sources: Medhurst 1947; table and marks in docs/references.md §5: C[pF] = H·D[cm] [src secondary].
"""

import warnings

import numpy as np
import pytest

from simloop.errors import ValidityWarning
from simloop.reference import self_capacitance_medhurst1947

TABLE = [  # docs/references.md §5, (l/D, H) [src secondary]; "0.8–1.0: 0.46" entered as two points
    (0.1, 0.96), (0.2, 0.70), (0.3, 0.60), (0.5, 0.50), (0.8, 0.46), (1.0, 0.46), (2.0, 0.50),
    (3.0, 0.61), (5.0, 0.81), (10.0, 1.32),
]


@pytest.mark.parametrize("ld, h", TABLE)
def test_table_points(ld, h):
    d = 0.02  # 2 cm diameter
    c = self_capacitance_medhurst1947(ld * d, d)
    assert c == pytest.approx(h * 2.0 * 1e-12, abs=0.0, rel=1e-12)  # H · D[cm] pF


def test_interpolation_is_linear_in_log_l_over_d():
    # documented: piecewise linear in log(l/D); the geometric mean of two nodes gets the mean H
    d = 0.01
    ld = np.sqrt(2.0 * 3.0)
    assert self_capacitance_medhurst1947(ld * d, d) == pytest.approx((0.50 + 0.61) / 2 * 1e-12,
                                                                     abs=0.0, rel=1e-12)
    # flat between 0.8 and 1.0
    assert self_capacitance_medhurst1947(0.9 * d, d) == pytest.approx(0.46e-12, abs=0.0, rel=1e-12)
    # a rod coil of 20 mm length on a 10 mm rod: l/D = 2 → 0.50 pF
    assert self_capacitance_medhurst1947(0.020, 0.010) == pytest.approx(0.50e-12, abs=0.0,
                                                                        rel=1e-12)


def test_warns_and_extrapolates_outside_the_table():
    with pytest.warns(ValidityWarning, match="outside"):
        c_short = self_capacitance_medhurst1947(0.05, 1.0)
    with pytest.warns(ValidityWarning):
        self_capacitance_medhurst1947(0.3, 0.02)  # l/D = 15
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        self_capacitance_medhurst1947(0.1, 1.0)  # l/D = 0.1 is in the table
    # extrapolated from the 0.1–0.2 interval: H rises as l/D falls
    assert c_short > self_capacitance_medhurst1947(0.1, 1.0)


def test_box_loop_extrapolation_example():
    # docs/references.md §5 [calc]: for a 1 m, 10-turn, 10 mm pitch box loop "extrapolated Medhurst
    # gives ~100 pF" (MoM: 23.4 pF, so the table is not for such loops). Winding length
    # (N − 1)·pitch = 90 mm, D = 1 m: l/D = 0.09, just outside the table.
    with pytest.warns(ValidityWarning):
        c = self_capacitance_medhurst1947(0.09, 1.0)
    assert 90e-12 < c < 110e-12
