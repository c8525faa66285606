r"""Quasi-static magnetic field of straight current segments (Biot–Savart), vectorised.

For a straight filament from **a** to **b** carrying current I, at a point **p** with
**r1** = **p** − **a**, **r2** = **p** − **b**:

.. math:: \mathbf H = \frac{I}{4\pi}\,
          \frac{(\mathbf r_1\times\mathbf r_2)\,(r_1 + r_2)}{r_1 r_2\,(r_1 r_2 + \mathbf r_1\cdot\mathbf r_2)}

(the integral of the Biot–Savart law along the segment, e.g. Jackson, *Classical
Electrodynamics*, 3rd ed., 1999, sec. 5.2 and problem 5.1; equivalent to
μ0I/(4πd)(cos α1 + cos α2)). Points on a filament's line get zero from it. The field of a loop's
wire at the radio is quasi-static to about (kr)² ≈ 10⁻⁴ at MF and these distances.

The field source is a :class:`CurrentSource`: segment end points and the complex current on each
segment per unit port current of each tap. :func:`quasi_static_source` builds it from the wire
path (unit current along each tap's circuit, exact as f/SRF → 0); a circuit solver's segment
currents (``port_currents`` of shape (k, n_seg)) plug in through the same class.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

_CHUNK = 4096


@dataclass(frozen=True)
class CurrentSource:
    """Currents on straight segments, per unit port current of each tap.

    Attributes
    ----------
    starts_m, ends_m : ndarray, (n, 3)
        Segment end points; positive current flows from start to end. [m]
    currents : ndarray, (k, n), complex
        Segment current per ampere at tap i's port (other ports open). [-]
    origin : str
        Where the currents come from (``"quasi-static"``, ``"circuit"``, ``"mom"``).
    """

    starts_m: np.ndarray
    ends_m: np.ndarray
    currents: np.ndarray
    origin: str = "quasi-static"

    def vector_area_m2(self) -> np.ndarray:
        """½ Σ I_s (r_start × r_end) per tap, (k, 3): the vector area of each tap's circuit (for
        closed paths with uniform current; the field-free far-zone moment otherwise). [m²]"""
        cross = np.cross(self.starts_m, self.ends_m)
        return 0.5 * np.real(self.currents) @ cross


def _scale(points, starts, ends):
    """(n1 + n2)/(4π n1 n2 (n1 n2 + r1·r2)) for every point and segment, (p, n), from dot products
    (matrix products: r1·r2 = |p|² − p·(a + b) + a·b, |r1|² = |p|² − 2p·a + |a|²), 0 on a segment."""
    pp = np.einsum("pi,pi->p", points, points)[:, None]
    pa = points @ starts.T
    pb = points @ ends.T
    n1 = np.sqrt(np.maximum(pp - 2 * pa + np.einsum("si,si->s", starts, starts), 0.0))
    n2 = np.sqrt(np.maximum(pp - 2 * pb + np.einsum("si,si->s", ends, ends), 0.0))
    dot = pp - pa - pb + np.einsum("si,si->s", starts, ends)
    nn = n1 * n2
    den = nn * (nn + dot)
    ok = (nn > 0) & (den > 1e-12 * nn * nn)
    return np.where(ok, (n1 + n2) / np.where(ok, den, 1.0), 0.0) / (4 * np.pi)


def h_field(source: CurrentSource, points_m) -> np.ndarray:
    """H of every tap's currents at the points, shape (k, p, 3), complex. [A/m per A at the port]

    With **d** = **a** − **b** and **c** = **a** × **b**, **r1** × **r2** = **p** × **d** + **c**, so
    for weights W = I·scale (p, n): **H** = **p** × (W **d**) + W **c** — two matrix products per tap.

    Parameters
    ----------
    source : CurrentSource
    points_m : array_like, (p, 3)
    """
    pts = np.asarray(points_m, dtype=float).reshape(-1, 3)
    a, b = np.asarray(source.starts_m, dtype=float), np.asarray(source.ends_m, dtype=float)
    d, c = a - b, np.cross(a, b)
    cur = np.asarray(source.currents)
    out = np.empty((cur.shape[0], pts.shape[0], 3), dtype=complex)
    for s in range(0, pts.shape[0], _CHUNK):
        p = pts[s:s + _CHUNK]
        scale = _scale(p, a, b)
        for k in range(cur.shape[0]):
            w = scale * cur[k]
            out[k, s:s + _CHUNK] = np.cross(p, w @ d) + w @ c
    return out


def h_axial(source: CurrentSource, points_m, axes) -> np.ndarray:
    """H·**â** of every tap at points with their own unit directions, shape (k, p), complex.

    (**p** × **d** + **c**)·**â** = (**â** × **p**)·**d** + **â**·**c**: matrix products only.
    """
    pts = np.asarray(points_m, dtype=float).reshape(-1, 3)
    ax = np.broadcast_to(np.asarray(axes, dtype=float), pts.shape)
    a, b = np.asarray(source.starts_m, dtype=float), np.asarray(source.ends_m, dtype=float)
    d, c = a - b, np.cross(a, b)
    cur = np.asarray(source.currents)
    out = np.empty((cur.shape[0], pts.shape[0]), dtype=complex)
    for s in range(0, pts.shape[0], _CHUNK):
        p, u = pts[s:s + _CHUNK], ax[s:s + _CHUNK]
        geo = _scale(p, a, b) * (np.cross(u, p) @ d.T + u @ c.T)
        out[:, s:s + _CHUNK] = cur @ geo.T
    return out


def h_field_polyline(vertices_m, points_m, current_a=1.0) -> np.ndarray:
    """H of a current along a polyline at the points, shape (p, 3). [A/m]"""
    v = np.asarray(vertices_m, dtype=float)
    src = CurrentSource(v[:-1], v[1:], np.full((1, len(v) - 1), current_a, dtype=complex))
    return h_field(src, points_m)[0].real


def circuit_source(segment_starts_m, segment_ends_m, port_currents, origin="circuit") -> CurrentSource:
    """A :class:`CurrentSource` from a solver's segment currents.

    Parameters
    ----------
    segment_starts_m, segment_ends_m : array_like, (n, 3)
        The solver's segments, current positive from start to end. [m]
    port_currents : array_like, (k, n), complex
        Current on each segment per ampere into tap i's port, the other ports open (a circuit
        solver's ``solve(f).port_currents``; divide by the port current first if the solver's
        excitation is a voltage). [-]
    """
    a = np.asarray(segment_starts_m, dtype=float)
    b = np.asarray(segment_ends_m, dtype=float)
    cur = np.atleast_2d(np.asarray(port_currents, dtype=complex))
    if a.shape != b.shape or a.ndim != 2 or a.shape[1] != 3 or cur.shape[1] != a.shape[0]:
        raise ValueError(f"segments {a.shape}/{b.shape} and currents {cur.shape} do not match: "
                         f"need (n, 3), (n, 3) and (k, n)")
    return CurrentSource(a, b, cur, origin)


def quasi_static_source(geom) -> CurrentSource:
    """Unit current along each tap's circuit (:meth:`LoopGeometry.current_path`), 0 on open wires.

    Exact as f/SRF → 0: the open turns and the other taps' leads carry no current there.
    """
    k = len(geom.tap_turns)
    cur = np.zeros((k, len(geom.kinds)), dtype=complex)
    for i in range(k):
        ps, pe = geom.current_path(i)
        fwd = _match(geom.starts, geom.ends, ps, pe)
        rev = _match(geom.starts, geom.ends, pe, ps)
        cur[i, fwd] = 1.0
        cur[i, rev] = -1.0
    return CurrentSource(geom.starts.copy(), geom.ends.copy(), cur, "quasi-static")


def _match(starts, ends, ps, pe) -> np.ndarray:
    """Indices of pieces (starts, ends) equal to one of the directed pieces (ps, pe)."""
    d = (np.linalg.norm(starts[:, None] - ps[None], axis=-1)
         + np.linalg.norm(ends[:, None] - pe[None], axis=-1))
    return np.flatnonzero((d < 1e-9).any(axis=1))
