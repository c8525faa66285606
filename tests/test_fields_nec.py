"""The quasi-static Biot–Savart field of a loop's segment currents against NEC's own near field.

simloop.coupling takes the loop's field at the radio's rod from Biot–Savart (simloop.fields) on
segment currents. Here the currents are NEC's (the SegmentCurrents observation of a SolvePlan) and
the reference is NEC's near-field H at the same points (the NearFieldH observation), on the
closed 0.5 m square of the solve-plan tests (44 segments of 4.5 cm, 1 mm wire).

Sources: Biot–Savart for straight segments (Jackson 1999, sec. 5.2); the full field of a current
element is the quasi-static one times (1 + jkr) e^{−jkr} = 1 + (kr)²/2 + O((kr)³) (Jackson 1999,
eq. 9.18), so the relative difference is of order (k r_max)², r_max the farthest wire from the
point; the thin-wire current of radius a against a filament differs by order (a/d)² at distance d
from the nearest wire.
"""

import numpy as np
import pytest

from simloop.fields import circuit_source, h_field
from simloop.mesh import C0
from simloop.solve import Environment, NearFieldH, PortCurrents, PortSources, SegmentCurrents, SolvePlan, solve_plans
from tests.test_solve_plan import square_loop

#: Points where a radio's rod might sit, 9–45 cm from the wire. [m]
POINTS = ((0.0, 0.15, -0.1), (0.1, 0.25, -0.2), (0.0, 0.3, 0.0), (0.2, 0.1, 0.25), (0.05, 0.08, -0.3))


def _segments(mesh):
    a, b = [], []
    for s, e, n in zip(mesh.starts, mesh.ends, mesh.segments):
        t = np.linspace(0.0, 1.0, n + 1)[:, None]
        p = s + (e - s) * t
        a.append(p[:-1])
        b.append(p[1:])
    return np.vstack(a), np.vstack(b)


def _distance_to_wire(points, starts, ends):
    """Distance from each point to the nearest segment (clamped projection). [m]"""
    seg = ends - starts
    t = np.einsum("psi,si->ps", points[:, None] - starts[None], seg) / np.einsum("si,si->s", seg, seg)
    foot = starts[None] + np.clip(t, 0.0, 1.0)[..., None] * seg[None]
    return np.linalg.norm(points[:, None] - foot, axis=-1).min(axis=1)


def _difference(mesh, f):
    plan = SolvePlan(mesh, Environment(wire_conductivity_s_m=None), f, (PortSources(),),
                     (PortCurrents(), SegmentCurrents(), NearFieldH(POINTS)))
    (r,) = solve_plans([plan], workers=1)
    port = r.get(0, "port_currents")[0, 0]
    starts, ends = _segments(mesh)
    source = circuit_source(starts, ends, (r.get(0, "segment_currents")[0] / port)[None], origin="mom")
    ours = h_field(source, np.array(POINTS))[0]
    nec = r.get(0, "near_field_h")[0] / port
    return np.linalg.norm(ours - nec, axis=1) / np.linalg.norm(nec, axis=1), starts, ends


@pytest.mark.parametrize("frequency_hz", [1e6, 5e6])
def test_biot_savart_of_nec_currents_matches_nec_near_field(frequency_hz):
    mesh = square_loop()
    diff, starts, ends = _difference(mesh, frequency_hz)
    pts = np.array(POINTS)
    k = 2 * np.pi * frequency_hz / C0
    r_max = np.max(np.linalg.norm(pts[:, None] - np.vstack([starts, ends])[None], axis=-1), axis=1)
    d = _distance_to_wire(pts, starts, ends)
    # tolerance: twice the two orders of magnitude named in the module notes (measured at 1 MHz
    # 1.3e-5–8.5e-5 against a tolerance of 2.0e-4–6.1e-4)
    tol = 2 * ((k * r_max) ** 2 + (mesh.radius_m / d) ** 2)
    assert np.all(diff < tol)


def test_the_difference_is_retardation():
    # (kr)² scaling: from 1 to 5 MHz the difference at the points well clear of the wire (where
    # the (a/d)² term is below a tenth of it) grows 25-fold; 15–30 allows the (a/d)² floor.
    mesh = square_loop()
    d1, _, _ = _difference(mesh, 1e6)
    d5, _, _ = _difference(mesh, 5e6)
    clear = slice(0, 4)
    assert np.all((d5[clear] / d1[clear] > 15) & (d5[clear] / d1[clear] < 30))
