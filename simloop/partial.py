r"""Partial elements of a wire mesh: partial inductances and partial potential coefficients.

Both are double line integrals of 1/R over pairs of straight pieces (Ruehli 1972, 1974):

.. math:: L_{p,ij} = \frac{\mu_0}{4\pi}(\hat u_i\cdot\hat u_j)\iint\frac{ds\,dt}{R},\qquad
          P_{ij} = \frac{1}{4\pi\varepsilon_0\,l_i l_j}\iint\frac{ds\,dt}{R}

so one integral serves both (for parallel cells :math:`P_{ij} = L_{p,ij}/(\mu_0\varepsilon_0 l_i l_j)`).
How each pair is integrated:

* parallel pieces: Grover's exact four-term formula (:func:`simloop.reference.mutual_inductance_parallel_filaments_grover1946`),
  with the centre distance, or the wire radius for collinear pieces and a piece with itself (the
  geometric mean distance of a thin tube, so that cutting a straight wire into segments leaves
  its inductance unchanged);
* other pieces closer than :data:`NEAR` lengths: the inner integral in closed form, the outer one
  by graded Gauss–Legendre quadrature (:func:`simloop.reference.mutual_inductance_filaments`);
* other pieces farther apart: 2 × 2-point Gauss–Legendre (relative error below 1e-4 there), and
  beyond :data:`FAR` lengths the midpoint rule (below 1e-3 of an element that is itself a small
  part of the row sum).

Perpendicular pairs have no partial mutual inductance and are skipped for L. Everything is
vectorised over pairs in chunks; nothing depends on frequency.

References
----------
.. [1] A. E. Ruehli, "Inductance calculations in a complex integrated circuit environment",
   IBM J. Res. Dev. 16(5), 1972.
.. [2] A. E. Ruehli, "Equivalent circuit models for three-dimensional multiconductor systems",
   IEEE Trans. Microwave Theory Tech. 22(3), 1974.
.. [3] F. W. Grover, *Inductance Calculations: Working Formulas and Tables*, Van Nostrand, 1946,
   ch. 3.
"""

from __future__ import annotations

import numpy as np

from simloop import reference
from simloop.reference import MU0

EPS0 = 1.0 / (MU0 * 299_792_458.0**2)  #: vacuum permittivity [F/m]
#: pairs whose distance is below NEAR × the longer piece are integrated exactly
NEAR = 2.0
#: pairs farther apart than FAR × the longer piece use the midpoint rule
FAR = 12.0
_CHUNK = 400_000

_GX = np.array([0.5 - 0.5 / np.sqrt(3.0), 0.5 + 0.5 / np.sqrt(3.0)])  # 2-point Gauss on [0, 1]


def _unit(starts, ends):
    d = ends - starts
    length = np.linalg.norm(d, axis=1)
    return d / length[:, None], length


def _parallel(a0, u, la, b0, b1, lb, radius):
    """Raw integral for parallel or antiparallel pairs (exact). [m]"""
    s0 = np.einsum("ij,ij->i", b0 - a0, u)
    s1 = np.einsum("ij,ij->i", b1 - a0, u)
    perp = (b0 - a0) - s0[:, None] * u
    d = np.linalg.norm(perp, axis=1)
    d = np.where(d < 0.5 * radius, radius, d)  # collinear pieces and self terms: thin tube
    return reference._parallel_sum(la, lb, np.minimum(s0, s1), d)


def _gauss_far(a0, u, la, b0, v, lb, points):
    """Raw integral by a points × points product rule on both pieces. [m]"""
    if points == 1:
        ta = tb = np.array([0.5])
        w = np.array([1.0])
    else:
        ta = tb = _GX
        w = np.array([0.5, 0.5])
    pa = a0[:, None, :] + (la[:, None] * ta[None, :])[..., None] * u[:, None, :]
    pb = b0[:, None, :] + (lb[:, None] * tb[None, :])[..., None] * v[:, None, :]
    r = np.linalg.norm(pa[:, :, None, :] - pb[:, None, :, :], axis=-1)
    return la * lb * np.einsum("i,j,nij->n", w, w, 1.0 / r)


def _general_exact(a0, a1, b0, b1):
    """Raw integral for non-parallel pairs by the reference quadrature. [m]"""
    u, la = _unit(a0, a1)
    v, lb = _unit(b0, b1)
    swap = la > lb  # integrate along the shorter piece
    A0 = np.where(swap[:, None], b0, a0)
    B0 = np.where(swap[:, None], a0, b0)
    B1 = np.where(swap[:, None], a1, b1)
    U = np.where(swap[:, None], v, u)
    V = np.where(swap[:, None], u, v)
    return reference._general_neumann(A0, U, np.where(swap, lb, la), B0, B1, V, np.where(swap, la, lb))


def _raw_chunk(starts, ends, i, j, radius, skip_perpendicular):
    a0, a1, b0, b1 = starts[i], ends[i], starts[j], ends[j]
    u, la = _unit(a0, a1)
    v, lb = _unit(b0, b1)
    uv = np.einsum("ij,ij->i", u, v)
    sin2 = np.sum(np.cross(u, v) ** 2, axis=1)
    out = np.zeros(i.size)
    par = sin2 < 1e-14
    if np.any(par):
        k = np.flatnonzero(par)
        out[k] = _parallel(a0[k], u[k], la[k], b0[k], b1[k], lb[k], radius)
    rest = ~par
    if skip_perpendicular:
        rest &= np.abs(uv) > 1e-9
    if not np.any(rest):
        return out
    k = np.flatnonzero(rest)
    lmax = np.maximum(la[k], lb[k])
    dist = np.linalg.norm((a0[k] + a1[k]) / 2 - (b0[k] + b1[k]) / 2, axis=1)
    near = dist < (NEAR + 1.0) * lmax
    far = dist >= (FAR + 1.0) * lmax
    mid = ~(near | far)
    for sel, how in ((near, "exact"), (mid, 2), (far, 1)):
        kk = k[sel]
        if kk.size == 0:
            continue
        if how == "exact":
            out[kk] = _general_exact(a0[kk], a1[kk], b0[kk], b1[kk])
        else:
            out[kk] = _gauss_far(a0[kk], u[kk], la[kk], b0[kk], v[kk], lb[kk], how)
    return out


def _triangle_blocks(m: int):
    """Upper-triangle pair indices (i ≤ j) in blocks of about ``_CHUNK`` pairs."""
    rows = max(1, _CHUNK // max(m, 1))
    for r0 in range(0, m, rows):
        r1 = min(m, r0 + rows)
        ii, jj = np.meshgrid(np.arange(r0, r1), np.arange(r0, m), indexing="ij")
        keep = jj >= ii
        yield ii[keep], jj[keep]


def _symmetric_fill(starts, ends, radius_m, scale, skip_perpendicular):
    m = starts.shape[0]
    out = np.zeros((m, m))
    for i, j in _triangle_blocks(m):
        vals = scale(i, j) * _raw_chunk(starts, ends, i, j, radius_m, skip_perpendicular)
        out[i, j] = vals
        out[j, i] = vals
    return out


def partial_inductance_matrix(starts, ends, radius_m: float) -> np.ndarray:
    """Partial inductance matrix of straight segments (thin-tube self terms), shape (m, m). [H]

    References
    ----------
    .. [1] A. E. Ruehli, IBM J. Res. Dev. 16(5), 1972; F. W. Grover, *Inductance Calculations*,
       1946, ch. 3.
    """
    starts = np.asarray(starts, dtype=float)
    ends = np.asarray(ends, dtype=float)
    u, _ = _unit(starts, ends)
    return _symmetric_fill(starts, ends, radius_m,
                           lambda i, j: MU0 / (4 * np.pi) * np.einsum("ij,ij->i", u[i], u[j]), True)


def potential_matrix(starts, ends, radius_m: float) -> np.ndarray:
    """Partial potential coefficients of uniformly charged straight pieces, shape (m, m). [1/F]

    P_ij is the mean potential over piece i per unit charge on piece j.

    References
    ----------
    .. [1] A. E. Ruehli and P. A. Brennan, "Efficient capacitance calculations for
       three-dimensional multiconductor systems", IEEE Trans. MTT 21(2), 1973.
    """
    starts = np.asarray(starts, dtype=float)
    ends = np.asarray(ends, dtype=float)
    length = np.linalg.norm(ends - starts, axis=1)
    return _symmetric_fill(starts, ends, radius_m,
                           lambda i, j: 1.0 / (4 * np.pi * EPS0 * length[i] * length[j]), False)
