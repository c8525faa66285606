r"""Handbook formulas and the quasi-static partial-inductance model.

This module is the project's formula library: pure functions, SI units, no printing and no file
IO. It is what ``validate`` and the validation tests set the method-of-moments results against.

Contents
--------
Inductance
    :func:`self_inductance_straight_wire`, :func:`mutual_inductance_parallel_filaments_grover1946`,
    :func:`mutual_inductance_filaments` (arbitrary straight filaments, Neumann formula),
    :func:`inductance_partial_sum` (closed circuit of straight pieces),
    :func:`box_coil_pieces` (idealised multi-turn rectangular coil),
    :func:`inductance_rectangle_terman1943`, :func:`inductance_circle_rosa`,
    :func:`inductance_square_coil_grover1946`.
Coupling and fields
    :func:`mutual_inductance_coaxial_circles_maxwell1873`, :func:`field_on_axis_circle`,
    :func:`field_on_axis_rectangle`.
Small-loop radiation
    :func:`radiation_resistance_small_loop`, :func:`effective_height_small_loop`,
    :data:`DIRECTIVITY_SMALL_LOOP`.
Wire loss
    :data:`RESISTIVITY_COPPER_IEC60028`, :data:`ALPHA_COPPER_IEC60028`, :func:`resistivity_copper`,
    :func:`skin_depth`, :func:`ac_resistance_ratio_round_wire`,
    :func:`resistance_per_length_round_wire`, :func:`proximity_factor_smith1972`,
    :func:`proximity_factor_two_wires_exact`.
Q and bandwidth
    :func:`q_factor`, :func:`bandwidth_3db`, :func:`q_loaded`.
Self-capacitance
    :func:`self_capacitance_medhurst1947`.
Formulas the validation sets the solvers against
    :func:`magnetic_moment_area_m2`, :func:`radiation_resistance_moment`,
    :func:`inductance_square_spiral_current_sheet` (Mohan 1999), :func:`rosa_b`,
    :func:`rosa_round_wire_correction` (Rosa 1908), :func:`sphere_weights`, :func:`average_gain`,
    :func:`richardson_extrapolation`.

Conventions: every length in metres, every result in SI (H, T, Ω, F, Hz). Formula functions
accept scalars or arrays and broadcast them, returning numpy arrays (0-d for scalar input);
:func:`inductance_partial_sum` and :func:`proximity_factor_smith1972` return floats. Inputs
outside a formula's range raise ``ValueError`` (impossible) or issue
:class:`~simloop.errors.ValidityWarning` (outside the range of validity).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy import special
from scipy.optimize import brentq

from simloop.constants import ETA0_OHM, MU0_H_M as MU0, SPEED_OF_LIGHT_M_S as SPEED_OF_LIGHT  # docs/references.md §13
from simloop.errors import ValidityWarning

__all__ = [
    "ALPHA_COPPER_IEC60028",
    "DIRECTIVITY_SMALL_LOOP",
    "MU0",
    "RESISTIVITY_COPPER_IEC60028",
    "SPEED_OF_LIGHT",
    "ac_resistance_ratio_round_wire",
    "bandwidth_3db",
    "box_coil_pieces",
    "effective_height_small_loop",
    "field_on_axis_circle",
    "field_on_axis_rectangle",
    "inductance_circle_rosa",
    "inductance_partial_sum",
    "inductance_rectangle_terman1943",
    "inductance_square_coil_grover1946",
    "mutual_inductance_coaxial_circles_maxwell1873",
    "mutual_inductance_filaments",
    "mutual_inductance_parallel_filaments_grover1946",
    "proximity_factor_smith1972",
    "proximity_factor_two_wires_exact",
    "q_factor",
    "q_loaded",
    "radiation_resistance_small_loop",
    "resistance_per_length_round_wire",
    "resistivity_copper",
    "self_capacitance_medhurst1947",
    "self_inductance_straight_wire",
    "skin_depth",
]

RESISTIVITY_COPPER_IEC60028 = 1.0 / 58e6
"""Resistivity of the IEC 60028 international annealed copper standard at 20 °C. [Ω·m]"""

ALPHA_COPPER_IEC60028 = 3.93e-3
"""Temperature coefficient of resistance of IEC 60028 annealed copper at 20 °C. [1/K]"""

DIRECTIVITY_SMALL_LOOP = 1.5
"""Directivity of an electrically small loop (and of a short dipole), 1.761 dBi. [-]"""

_MODELS = ("hf", "dc")


def _check_model(model):
    if model not in _MODELS:
        raise ValueError(f"unknown model {model!r}: use 'hf' (surface current) or 'dc' (uniform)")


def _require_positive(name, value):
    value = np.asarray(value, dtype=float)
    if np.any(~(value > 0)):
        raise ValueError(f"{name} must be positive and finite, got {value}")
    return value


def _gmd_self(radius_m, model):
    """Geometric mean distance of a round wire's cross-section from itself. [m]"""
    _check_model(model)
    # Grover (1946), ch. 2: a thin tube (all current on the surface) has GMD = r; a solid round
    # wire with uniform current has GMD = r·exp(-1/4).
    return radius_m if model == "hf" else radius_m * np.exp(-0.25)


# --------------------------------------------------------------------------------------------
# Inductance of straight filaments
# --------------------------------------------------------------------------------------------


def _grover_g(x, d):
    r"""G(x) = |x| ln(|x| + √(x²+d²)) − √(x²+d²), with 0·ln 0 = 0.

    The double antiderivative of 1/√(x²+d²) is F(x) = x·asinh(x/d) − √(x²+d²) = G(x) − |x| ln d.
    Splitting off the ln d part keeps the four-term combination finite and accurate for d → 0
    (collinear filaments), where the ln d parts cancel exactly unless the filaments overlap.
    """
    ax = np.abs(x)
    root = np.hypot(x, d)
    s = ax + root
    with np.errstate(divide="ignore", invalid="ignore"):
        lg = np.where(ax > 0, ax * np.log(np.where(s > 0, s, 1.0)), 0.0)
    return lg - root


def _parallel_sum(l1, l2, offset, d):
    r"""∫₀^{l1}∫_{offset}^{offset+l2} dz₁ dz₂ / √((z₂−z₁)²+d²) for parallel filaments. [m]

    Four-term combination (Grover 1946, ch. 3, unequal filaments in any axial position):
    S = F(p+l₂) − F(p+l₂−l₁) − F(p) + F(p−l₁), F(x) = x·asinh(x/d) − √(x²+d²), p = offset.
    Returns +inf for overlapping collinear filaments (d = 0), whose mutual inductance diverges.
    """
    l1, l2, offset, d = np.broadcast_arrays(
        *(np.asarray(v, dtype=float) for v in (l1, l2, offset, d)))
    xs = (offset + l2, offset + l2 - l1, offset, offset - l1)
    cs = (1.0, -1.0, -1.0, 1.0)
    g = sum(c * _grover_g(x, d) for c, x in zip(cs, xs))
    # Σ c|x| is twice the overlap length of the two filaments' axial extents.
    twice_overlap = sum(c * np.abs(x) for c, x in zip(cs, xs))
    scale = np.maximum(np.maximum(l1, l2), np.abs(offset))
    overlapping = twice_overlap > 1e-12 * scale
    with np.errstate(divide="ignore"):
        logd = np.log(np.where(d > 0, d, 1.0))
    out = np.where(d > 0, g - logd * twice_overlap, np.where(overlapping, np.inf, g))
    return out


def self_inductance_straight_wire(length_m, radius_m, model="hf"):
    r"""Partial self-inductance of a straight round wire.

    Parameters
    ----------
    length_m : array_like
        Wire length. [m]
    radius_m : array_like
        Wire radius. [m]
    model : {"hf", "dc"}
        ``"hf"``: current on the surface (skin depth ≪ radius), GMD = r.
        ``"dc"``: uniform current, GMD = r·e^(−1/4) (adds μ0/(8π) = 50 nH/m of internal
        inductance).

    Returns
    -------
    ndarray
        Partial self-inductance. [H]

    Notes
    -----
    The self-inductance is the mutual inductance of two equal aligned filaments at the geometric
    mean distance g of the cross-section from itself:

    .. math:: L = \frac{\mu_0}{2\pi}\left[l\,\operatorname{asinh}(l/g) - \sqrt{l^2+g^2} + g\right]
              \approx \frac{\mu_0 l}{2\pi}\left[\ln\frac{2l}{g} - 1 + \frac{g}{l}\right]

    References
    ----------
    .. [1] F. W. Grover, *Inductance Calculations: Working Formulas and Tables*, Van Nostrand,
       1946, ch. 3 (straight filaments) and ch. 2 (geometric mean distances).
    """
    length_m = _require_positive("length_m", length_m)
    g = _gmd_self(_require_positive("radius_m", radius_m), model)
    return mutual_inductance_parallel_filaments_grover1946(length_m, g)


def mutual_inductance_parallel_filaments_grover1946(length_m, distance_m, length2_m=None,
                                                     offset_m=0.0):
    r"""Mutual inductance of two parallel, co-directed straight filaments.

    Parameters
    ----------
    length_m : array_like
        Length l₁ of the first filament, which runs from axial position 0 to l₁. [m]
    distance_m : array_like
        Perpendicular distance d between the filaments (0 allowed for collinear filaments that
        do not overlap). [m]
    length2_m : array_like, optional
        Length l₂ of the second filament; default equal to ``length_m``. [m]
    offset_m : array_like
        Axial position of the start of the second filament, which runs from ``offset_m`` to
        ``offset_m + l₂`` in the same direction as the first. [m]

    Returns
    -------
    ndarray
        Mutual inductance (positive for co-directed currents; negate for antiparallel). [H]
        +inf for overlapping collinear filaments.

    Notes
    -----
    Equal aligned filaments (Grover 1946, ch. 3):

    .. math:: M = \frac{\mu_0}{2\pi}\left[l\ln\left(\frac{l}{d}+\sqrt{1+\frac{l^2}{d^2}}\right)
              - \sqrt{l^2+d^2} + d\right]

    Unequal lengths and axial offset by the four-term combination
    :math:`M = \frac{\mu_0}{4\pi}[F(p+l_2) - F(p+l_2-l_1) - F(p) + F(p-l_1)]`,
    :math:`F(x) = x\operatorname{asinh}(x/d) - \sqrt{x^2+d^2}`, evaluated in a form that stays
    exact for d → 0.

    References
    ----------
    .. [1] F. W. Grover, *Inductance Calculations: Working Formulas and Tables*, Van Nostrand,
       1946, ch. 3 (parallel filaments, equal and unequal, in any relative position).
    """
    l1 = _require_positive("length_m", length_m)
    l2 = l1 if length2_m is None else _require_positive("length2_m", length2_m)
    d = np.asarray(distance_m, dtype=float)
    if np.any(~(d >= 0)):
        raise ValueError(f"distance_m must be non-negative, got {d}")
    return MU0 / (4 * np.pi) * _parallel_sum(l1, l2, np.asarray(offset_m, dtype=float), d)


# Gauss-Legendre rule geometrically graded towards 0 on [0, 1]: subintervals
# [q^(j+1), q^j], j = 0..levels-1, and [0, q^levels], each with `order` points. Used on each half
# of every outer subinterval so that log-type (touching) and near-singular integrands converge.
_GRADE_RATIO = 0.25
_GRADE_LEVELS = 12
_GRADE_ORDER = 10


@lru_cache(maxsize=None)
def _graded_rule(ratio=_GRADE_RATIO, levels=_GRADE_LEVELS, order=_GRADE_ORDER):
    x, w = np.polynomial.legendre.leggauss(order)
    edges = np.concatenate(([0.0], ratio ** np.arange(levels, -1, -1)))
    lo, hi = edges[:-1], edges[1:]
    t = (lo[:, None] + hi[:, None]) / 2 + (hi - lo)[:, None] / 2 * x[None, :]
    wt = (hi - lo)[:, None] / 2 * w[None, :]
    return t.ravel(), wt.ravel()


@lru_cache(maxsize=None)
def _plain_rule(order):
    x, w = np.polynomial.legendre.leggauss(order)
    return (x + 1) / 2, w / 2


def _rowdot(a, b):
    return np.einsum("...i,...i->...", a, b)


def _point_segment_distance(p, b0, v, l2):
    """Distance from points p (..., 3) to segments b0 + t v, t in [0, l2]."""
    t = np.clip(_rowdot(p - b0, v), 0.0, l2)
    return np.linalg.norm(p - (b0 + t[..., None] * v), axis=-1)


def _log_line_integral(x1, r1, r2, rho2, l2):
    r"""∫₀^{l₂} dt / √((t − t₀)² + ρ²) from x₁ = −t₀, R₁, R₂ (distances to b's ends) and ρ². [-]

    asinh(x₂/ρ) − asinh(x₁/ρ), x₂ = x₁ + l₂, written with logarithms so that ρ → 0 does not
    cancel catastrophically (both ends on one side) and the log singularity is explicit (the
    point projects inside b).
    """
    x2 = x1 + l2
    tiny = np.finfo(float).tiny
    case_pos = x1 >= 0  # the point projects before the start of b
    case_neg = x2 <= 0  # the point projects beyond the end of b
    num_pos = np.maximum(x2 + r2, tiny)
    num_neg = np.maximum(r1 - x1, tiny)
    arg = np.where(case_pos, num_pos / np.maximum(x1 + r1, tiny),
                   np.where(case_neg, num_neg / np.maximum(r2 - x2, tiny),
                            num_pos * num_neg / np.maximum(rho2, tiny)))
    return np.log(arg)


def _inner_near(s, a0, u, b0, b1, v, l2):
    """Inner integral at outer nodes s (m, k) for close pairs: vector forms, accurate as ρ → 0."""
    p = a0[:, None, :] + s[..., None] * u[:, None, :]
    w0 = p - b0[:, None, :]
    w1 = p - b1[:, None, :]
    x1 = -_rowdot(w0, v[:, None, :])
    r1 = np.sqrt(_rowdot(w0, w0))
    r2 = np.sqrt(_rowdot(w1, w1))
    c = np.cross(w0, v[:, None, :])
    return _log_line_integral(x1, r1, r2, _rowdot(c, c), l2[:, None])


def _inner_far(s, a0, u, b0, b1, v, l2):
    """Inner integral at outer nodes s (m, k) for pairs far apart (ρ ≥ outer length): scalar
    quadratics in s, no (m, k, 3) temporaries."""
    w0 = a0 - b0
    w1 = a0 - b1
    x1 = -(_rowdot(w0, v)[:, None] + _rowdot(u, v)[:, None] * s)
    r1sq = _rowdot(w0, w0)[:, None] + 2 * _rowdot(w0, u)[:, None] * s + s**2
    r2sq = _rowdot(w1, w1)[:, None] + 2 * _rowdot(w1, u)[:, None] * s + s**2
    r1 = np.sqrt(np.maximum(r1sq, 0.0))
    r2 = np.sqrt(np.maximum(r2sq, 0.0))
    return _log_line_integral(x1, r1, r2, r1sq - x1**2, l2[:, None])


def _general_neumann(a0, u, l1, b0, b1, v, l2):
    r"""Neumann integral ∫∫ ds dt / R for non-parallel straight filaments (vectorised). [m]

    Inner integral along b analytic; outer along a by Gauss-Legendre. Close pairs (distance
    below the outer length l₁): subintervals split at the point of a closest to b and at the
    points of a closest to b's ends and to b's line, each half graded geometrically towards its
    split point. Pairs farther apart than l₁ (4 l₁) use a plain 10-point (6-point) rule: the
    nearest singularity of the integrand then lies at least 2 (8) half-lengths from the interval,
    for an error below 1e-14.
    """
    n = a0.shape[0]
    out = np.zeros(n)
    if n == 0:
        return out
    # Breakpoints on a: its ends, the points nearest b0 and b1, the line-line closest point.
    s_b0 = np.clip(_rowdot(b0 - a0, u), 0.0, l1)
    s_b1 = np.clip(_rowdot(b1 - a0, u), 0.0, l1)
    uv = _rowdot(u, v)
    w = a0 - b0
    denom = 1.0 - uv**2
    s_line = np.clip((uv * _rowdot(w, v) - _rowdot(w, u)) / np.where(denom > 0, denom, 1.0),
                     0.0, l1)
    inner = np.sort(np.stack([s_b0, s_b1, s_line], axis=1), axis=1)
    bps = np.concatenate([np.zeros((n, 1)), inner, l1[:, None]], axis=1)  # (n, 5)
    # Distance between the segments: attained at one of the breakpoints of a.
    pts = a0[:, None, :] + bps[..., None] * u[:, None, :]
    dmin = np.min(_point_segment_distance(pts, b0[:, None, :], v[:, None, :], l2[:, None]),
                  axis=1)
    tiers = ((dmin >= 4 * l1, 6), ((dmin >= l1) & (dmin < 4 * l1), 10), (dmin < l1, None))
    for sel, order in tiers:
        idx = np.nonzero(sel)[0]
        if idx.size == 0:
            continue
        if order is None:
            t, wt = _graded_rule()
            lo = bps[idx, :-1]
            hi = bps[idx, 1:]
            half = (hi - lo) / 2  # (m, 4)
            # left halves graded towards lo, right halves towards hi
            s = np.concatenate([lo[..., None] + half[..., None] * t,
                                hi[..., None] - half[..., None] * t], axis=2)
            ws = np.concatenate([half[..., None] * wt, half[..., None] * wt], axis=2)
            s = s.reshape(idx.size, -1)
            ws = ws.reshape(idx.size, -1)
            inner_fn = _inner_near
        else:
            t, wt = _plain_rule(order)
            s = l1[idx, None] * t[None, :]
            ws = l1[idx, None] * wt[None, :]
            inner_fn = _inner_far
        # Chunk to bound memory: (pairs × nodes × 3) doubles.
        chunk = max(1, 1_000_000 // s.shape[1])
        for k in range(0, idx.size, chunk):
            j = idx[k:k + chunk]
            vals = inner_fn(s[k:k + chunk], a0[j], u[j], b0[j], b1[j], v[j], l2[j])
            out[j] = np.sum(ws[k:k + chunk] * vals, axis=1)
    return out


def _as_pieces(p, name):
    p = np.asarray(p, dtype=float)
    if p.shape[-1:] != (3,):
        raise ValueError(f"{name} must have shape (..., 3), got {p.shape}")
    return p


def mutual_inductance_filaments(a0, a1, b0, b1):
    r"""Partial mutual inductance of directed straight filaments in 3-D (Neumann formula).

    Parameters
    ----------
    a0, a1 : array_like, shape (..., 3)
        Start and end points of the first filaments; current flows from ``a0`` to ``a1``. [m]
    b0, b1 : array_like, shape (..., 3)
        Start and end points of the second filaments. [m] All four broadcast together.

    Returns
    -------
    ndarray, shape (...)
        Partial mutual inductance with sign (the dot product of the current directions). [H]
        +inf for collinear filaments that overlap.

    Notes
    -----
    .. math:: M = \frac{\mu_0}{4\pi}\,(\hat u\cdot\hat v)\int_0^{l_1}\!\!\int_0^{l_2}
              \frac{ds\,dt}{|\mathbf a_0 + s\hat u - \mathbf b_0 - t\hat v|}

    Parallel and antiparallel pairs use Grover's exact four-term formula (see
    :func:`mutual_inductance_parallel_filaments_grover1946`); perpendicular pairs give exactly 0.
    Other pairs: the inner integral is done analytically
    (:math:`\operatorname{asinh}(x_2/\rho) - \operatorname{asinh}(x_1/\rho)` in logarithmic form),
    the outer one by Gauss–Legendre quadrature on the outer filament split at the point of closest
    approach to the other filament (and at the points nearest its ends), each part graded
    geometrically towards the split points (ratio 1/4, 12 levels, 10 points per subinterval), so
    that touching pieces — two pieces sharing an endpoint at an angle, or crossing — converge.
    Relative accuracy is about 1e-9 against adaptive double quadrature (see the validation tests).

    References
    ----------
    .. [1] F. E. Neumann (1845); F. W. Grover, *Inductance Calculations*, 1946, ch. 1 and 3.
    .. [2] A. E. Ruehli, "Inductance calculations in a complex integrated circuit environment",
       IBM J. Res. Dev. 16(5), 1972 (partial inductance).
    """
    arrs = np.broadcast_arrays(*(_as_pieces(p, n) for p, n in
                                 ((a0, "a0"), (a1, "a1"), (b0, "b0"), (b1, "b1"))))
    shape = arrs[0].shape[:-1]
    a0, a1, b0, b1 = (x.reshape(-1, 3) for x in arrs)
    return _mutual_flat(a0, a1, b0, b1).reshape(shape)


def _mutual_flat(a0, a1, b0, b1):
    da = a1 - a0
    db = b1 - b0
    l1 = np.linalg.norm(da, axis=1)
    l2 = np.linalg.norm(db, axis=1)
    if np.any(~(l1 > 0)) or np.any(~(l2 > 0)):
        raise ValueError("filaments must have positive, finite length")
    u = da / l1[:, None]
    v = db / l2[:, None]
    uv = _rowdot(u, v)
    sin2 = np.sum(np.cross(u, v) ** 2, axis=1)
    parallel = sin2 < 1e-20
    perpendicular = np.abs(uv) < 1e-12
    general = ~(parallel | perpendicular)
    out = np.zeros(a0.shape[0])
    if np.any(parallel):
        i = np.nonzero(parallel)[0]
        s0 = _rowdot(b0[i] - a0[i], u[i])
        s1 = _rowdot(b1[i] - a0[i], u[i])
        perp = (b0[i] - a0[i]) - s0[:, None] * u[i]
        d = np.linalg.norm(perp, axis=1)
        # snap floating-point noise in the distance of collinear pieces to 0
        d = np.where(d < 1e-12 * np.maximum(l1[i], l2[i]), 0.0, d)
        out[i] = np.sign(uv[i]) * MU0 / (4 * np.pi) * _parallel_sum(
            l1[i], l2[i], np.minimum(s0, s1), d)
    if np.any(general):
        i = np.nonzero(general)[0]
        # Integrate along the shorter filament (M is symmetric): fewer far pairs need grading.
        swap = l1[i] > l2[i]
        A0 = np.where(swap[:, None], b0[i], a0[i])
        B0 = np.where(swap[:, None], a0[i], b0[i])
        B1 = np.where(swap[:, None], a1[i], b1[i])
        U = np.where(swap[:, None], v[i], u[i])
        V = np.where(swap[:, None], u[i], v[i])
        L1 = np.where(swap, l2[i], l1[i])
        L2 = np.where(swap, l1[i], l2[i])
        out[i] = uv[i] * MU0 / (4 * np.pi) * _general_neumann(A0, U, L1, B0, B1, V, L2)
    return out


def inductance_partial_sum(starts, ends, radius_m, model="hf"):
    r"""Quasi-static inductance of a closed circuit of straight round-wire pieces.

    Parameters
    ----------
    starts, ends : array_like, shape (n, 3)
        Start and end points of the pieces, each directed along the current and in circuit
        order or not (order does not matter, direction does). Pieces that carry no current
        (open stubs) must not be passed. [m]
    radius_m : float or array_like, shape (n,)
        Wire radius. [m]
    model : {"hf", "dc"}
        Current distribution used for the self terms (see
        :func:`self_inductance_straight_wire`).

    Returns
    -------
    float
        Loop inductance :math:`L = \sum_i L_i + \sum_{i \ne j} M_{ij}`. [H]

    Notes
    -----
    Partial-inductance method: the self terms use GMD = r (hf) or r·e^(−1/4) (dc); mutual terms
    are centre-line (filament) Neumann integrals — for parallel round wires with rotationally
    symmetric current that is exact, since the GMD of two circles is their centre distance.
    Neglected: the proximity redistribution of current between close turns, and at joints the
    wire is treated as a bent filament. Consequence: splitting a straight piece into k collinear
    sub-pieces adds (k−1)·μ0·r/(2π) + O(r²/l) — the mutual of touching collinear pieces on the
    axis exceeds its GMD-form value by μ0 r/(2π) — negligible while pieces are much longer than
    the radius (a 600-side polygon of a 0.5 m ring of 1 mm wire, pieces 5 mm long, is 3 % high).

    Vectorised over all pairs (parallel pairs by the exact formula, perpendicular pairs skipped);
    600 pieces of a box coil take about 0.1 s, 600 pieces with no parallel pairs about 0.5–1 s.

    References
    ----------
    .. [1] A. E. Ruehli, "Inductance calculations in a complex integrated circuit environment",
       IBM J. Res. Dev. 16(5), 1972.
    .. [2] F. W. Grover, *Inductance Calculations*, Van Nostrand, 1946, ch. 3.
    """
    starts = _as_pieces(starts, "starts").reshape(-1, 3)
    ends = _as_pieces(ends, "ends").reshape(-1, 3)
    if starts.shape != ends.shape:
        raise ValueError(f"starts {starts.shape} and ends {ends.shape} differ in shape")
    n = starts.shape[0]
    lengths = np.linalg.norm(ends - starts, axis=1)
    if n == 0 or np.any(~(lengths > 0)):
        raise ValueError("need at least one piece, each of positive, finite length")
    radius = np.broadcast_to(_require_positive("radius_m", radius_m), (n,))
    total = np.sum(self_inductance_straight_wire(lengths, radius, model))
    i, j = np.triu_indices(n, k=1)
    if i.size:
        m = _mutual_flat(starts[i], ends[i], starts[j], ends[j])
        if not np.all(np.isfinite(m)):
            bad = np.nonzero(~np.isfinite(m))[0][0]
            raise ValueError(f"pieces {i[bad]} and {j[bad]} overlap (collinear): infinite "
                             "mutual inductance")
        total += 2.0 * np.sum(m)
    return float(total)


def box_coil_pieces(width_m, height_m, turns, pitch_m):
    r"""Straight pieces of an idealised stacked multi-turn rectangular (box) coil.

    Parameters
    ----------
    width_m : float
        Horizontal side (along x). [m]
    height_m : float
        Vertical side (along z). [m]
    turns : int
        Number of turns N. [-]
    pitch_m : float
        Centre-to-centre spacing of adjacent turns along the axis y. [m]

    Returns
    -------
    starts, ends : ndarray, shape (4 N, 3)
        Pieces directed along the current. [m]

    Notes
    -----
    The path is N closed, identical rectangles in the x–z plane, centred on the y axis at
    y_k = (k − (N−1)/2)·pitch, all carrying the same current in the same sense (right-handed
    about +y), i.e. N closed turns in series with the turn-to-turn steps and the terminal leads
    left out. With ``"hf"`` self terms in :func:`inductance_partial_sum` this is the idealised
    path that reproduces the docs/references.md §1 box-coil check values to all printed digits
    (303.3496, 254.7587, 594.4700 µH against 303.350, 254.759, 594.470). Two helical variants
    do not: closing each turn onto the next with a slanted last side gives 303.3511, 254.7644,
    594.4734 µH, and closed turns joined by axial step pieces give 303.388, 254.847, 594.529 µH.
    The real winding path (with leads) is the geometry module's job.

    References
    ----------
    .. [1] F. W. Grover, *Inductance Calculations*, Van Nostrand, 1946 (partial inductances of
       straight filaments, ch. 3).
    """
    turns = int(turns)
    if turns < 1:
        raise ValueError(f"turns must be at least 1, got {turns}")
    w = float(_require_positive("width_m", width_m)) / 2
    h = float(_require_positive("height_m", height_m)) / 2
    pitch = float(np.asarray(pitch_m, dtype=float))
    if turns > 1 and not pitch > 0:
        raise ValueError(f"pitch_m must be positive for several turns, got {pitch_m}")
    # Corners (x, z) in the order of the current: along +x at the top (z = +h), so that the
    # circulation is right-handed about +y (z × x = y).
    corners = np.array([[-w, h], [w, h], [w, -h], [-w, -h]])
    ys = (np.arange(turns) - (turns - 1) / 2) * (pitch if turns > 1 else 0.0)
    starts, ends = [], []
    for y in ys:
        pts = np.column_stack([corners[:, 0], np.full(4, y), corners[:, 1]])
        starts.append(pts)
        ends.append(np.roll(pts, -1, axis=0))
    return np.vstack(starts), np.vstack(ends)


def inductance_rectangle_terman1943(a_m, b_m, diameter_m, model="hf"):
    r"""Inductance of a single-turn rectangle of round wire.

    Parameters
    ----------
    a_m, b_m : array_like
        Sides of the rectangle (wire centre lines). [m]
    diameter_m : array_like
        Wire diameter d. [m]
    model : {"hf", "dc"}
        ``"hf"``: current on the wire surface; ``"dc"``: uniform current, which adds the internal
        inductance μ0/(8π) per metre of wire, 0.1·(a + b) µH (a, b in metres).

    Returns
    -------
    ndarray
        Inductance. [H]

    Notes
    -----
    With :math:`g = \sqrt{a^2+b^2}`, lengths in metres (Terman 1943, sec. 2; Grover 1946):

    .. math:: L[\mu H] = 0.4\left[(a+b)\ln\frac{4ab}{d} - a\ln(a+g) - b\ln(b+g)\right]
              + 0.4\left[2g + d - 2(a+b)\right]

    It equals the partial-inductance sum of the four sides (GMD = r self terms, exact
    antiparallel mutuals) up to terms of order (d/a)².

    References
    ----------
    .. [1] F. E. Terman, *Radio Engineers' Handbook*, McGraw-Hill, 1943, sec. 2.
    .. [2] F. W. Grover, *Inductance Calculations*, Van Nostrand, 1946.
    """
    _check_model(model)
    a = _require_positive("a_m", a_m)
    b = _require_positive("b_m", b_m)
    d = _require_positive("diameter_m", diameter_m)
    g = np.hypot(a, b)
    l_uh = 0.4 * ((a + b) * np.log(4 * a * b / d) - a * np.log(a + g) - b * np.log(b + g)) \
        + 0.4 * (2 * g + d - 2 * (a + b))
    if model == "dc":
        # internal inductance μ0/(8π) = 0.05 µH/m over the perimeter 2(a + b)
        l_uh = l_uh + 0.1 * (a + b)
    return l_uh * 1e-6


def inductance_circle_rosa(loop_radius_m, wire_radius_m, model="hf"):
    r"""Inductance of a circular loop of round wire (thin-wire limit).

    Parameters
    ----------
    loop_radius_m : array_like
        Loop radius b (to the wire centre). [m]
    wire_radius_m : array_like
        Wire radius r. [m]
    model : {"hf", "dc"}
        Surface current (``"hf"``) or uniform current (``"dc"``).

    Returns
    -------
    ndarray
        Inductance. [H]

    Notes
    -----
    .. math:: L = \mu_0 b\left[\ln\frac{8b}{r} - 2\right]\ \text{(hf)},\qquad
              L = \mu_0 b\left[\ln\frac{8b}{r} - 1.75\right]\ \text{(dc)}

    Valid for r ≪ b; the next terms are of relative order (r/b)².

    References
    ----------
    .. [1] E. B. Rosa, "The self and mutual inductances of linear conductors", Bull. Bureau of
       Standards 4(2), 1908; F. W. Grover, *Inductance Calculations*, 1946 [citation details
       from memory].
    """
    _check_model(model)
    b = _require_positive("loop_radius_m", loop_radius_m)
    r = _require_positive("wire_radius_m", wire_radius_m)
    return MU0 * b * (np.log(8 * b / r) - (2.0 if model == "hf" else 1.75))


def inductance_square_coil_grover1946(side_m, turns, winding_length_m):
    r"""Handbook (current-sheet) inductance of a single-layer square coil.

    Parameters
    ----------
    side_m : array_like
        Side s of the square. [m]
    turns : array_like
        Number of turns N. [-]
    winding_length_m : array_like
        Winding length b along the axis. [m]

    Returns
    -------
    ndarray
        Inductance. [H]

    Notes
    -----
    With s and b in centimetres:

    .. math:: L[\mu H] = 0.008\,N^2 s\left[\ln\frac{1.4142\,s N}{(N+1)\,b} + 0.37942
              + 0.3333\frac{(N+1)\,b}{s N}\right]

    A current-sheet formula, for short coils (b ≪ s). Within 1–4 % of the partial-inductance sum
    depending on whether b is taken as N·pitch or (N−1)·pitch (docs/references.md §1).

    References
    ----------
    .. [1] F. W. Grover, *Inductance Calculations*, Van Nostrand, 1946 (square coils); the
       constants are from memory and were confirmed numerically (docs/references.md §1).
    """
    s_cm = 100 * _require_positive("side_m", side_m)
    n = _require_positive("turns", turns)
    b_cm = 100 * _require_positive("winding_length_m", winding_length_m)
    l_uh = 0.008 * n**2 * s_cm * (np.log(1.4142 * s_cm * n / ((n + 1) * b_cm)) + 0.37942
                                  + 0.3333 * (n + 1) * b_cm / (s_cm * n))
    return l_uh * 1e-6


# --------------------------------------------------------------------------------------------
# Coupling and fields
# --------------------------------------------------------------------------------------------


def mutual_inductance_coaxial_circles_maxwell1873(a_m, b_m, d_m):
    r"""Mutual inductance of two coaxial circular filaments.

    Parameters
    ----------
    a_m, b_m : array_like
        Radii of the circles. [m]
    d_m : array_like
        Axial distance between their planes. [m]

    Returns
    -------
    ndarray
        Mutual inductance (same sense of circulation). [H]

    Notes
    -----
    .. math:: M = \mu_0\sqrt{ab}\left[\left(\frac{2}{k} - k\right)K(m)
              - \frac{2}{k}E(m)\right],\qquad m = k^2 = \frac{4ab}{(a+b)^2 + d^2}

    with complete elliptic integrals of parameter m (``scipy.special.ellipk/ellipe`` take m,
    not the modulus k).

    References
    ----------
    .. [1] J. C. Maxwell, *A Treatise on Electricity and Magnetism*, 1873, vol. 2, art. 701.
    .. [2] F. W. Grover, *Inductance Calculations*, Van Nostrand, 1946 (coaxial circles).
    """
    a = _require_positive("a_m", a_m)
    b = _require_positive("b_m", b_m)
    d = np.asarray(d_m, dtype=float)
    m = 4 * a * b / ((a + b) ** 2 + d**2)
    k = np.sqrt(m)
    return MU0 * np.sqrt(a * b) * ((2 / k - k) * special.ellipk(m) - 2 / k * special.ellipe(m))


def field_on_axis_circle(radius_m, z_m, current_a=1.0):
    r"""Magnetic flux density on the axis of a circular filament (Biot–Savart).

    Parameters
    ----------
    radius_m : array_like
        Loop radius R. [m]
    z_m : array_like
        Position on the axis from the loop centre. [m]
    current_a : array_like
        Current I, positive counter-clockwise seen from +z (right-hand rule). [A]

    Returns
    -------
    ndarray
        Axial flux density B_z (the only component on the axis). [T]

    Notes
    -----
    .. math:: B = \frac{\mu_0 I R^2}{2 (R^2 + z^2)^{3/2}}

    References
    ----------
    .. [1] J. D. Jackson, *Classical Electrodynamics*, 3rd ed., Wiley, 1999, ch. 5 [section
       from memory].
    """
    r = _require_positive("radius_m", radius_m)
    z = np.asarray(z_m, dtype=float)
    return MU0 * np.asarray(current_a, dtype=float) * r**2 / (2 * (r**2 + z**2) ** 1.5)


def field_on_axis_rectangle(width_m, height_m, z_m, current_a=1.0):
    r"""Magnetic flux density on the axis of a rectangular filament (Biot–Savart).

    Parameters
    ----------
    width_m, height_m : array_like
        Full sides of the rectangle. [m]
    z_m : array_like
        Position on the axis through the centre, perpendicular to the plane. [m]
    current_a : array_like
        Current I, positive in the right-hand sense about the axis. [A]

    Returns
    -------
    ndarray
        Axial flux density (the only component on the axis). [T]

    Notes
    -----
    With half-sides A = width/2, B = height/2 (sum of the four straight sides):

    .. math:: B = \frac{\mu_0 I A B}{\pi\sqrt{A^2+B^2+z^2}}
              \left[\frac{1}{A^2+z^2} + \frac{1}{B^2+z^2}\right]

    References
    ----------
    .. [1] Biot–Savart law for a finite straight segment (e.g. D. J. Griffiths, *Introduction
       to Electrodynamics*, 4th ed., 2017, ch. 5), summed over the four sides.
    """
    a = _require_positive("width_m", width_m) / 2
    b = _require_positive("height_m", height_m) / 2
    z = np.asarray(z_m, dtype=float)
    i = np.asarray(current_a, dtype=float)
    return MU0 * i * a * b / (np.pi * np.sqrt(a**2 + b**2 + z**2)) * (
        1 / (a**2 + z**2) + 1 / (b**2 + z**2))


# --------------------------------------------------------------------------------------------
# Small-loop radiation
# --------------------------------------------------------------------------------------------


def _wavelength(frequency_hz):
    return SPEED_OF_LIGHT / _require_positive("frequency_hz", frequency_hz)


def _warn_if_large(perimeter_m, wavelength_m):
    if perimeter_m is None:
        return
    ratio = np.asarray(perimeter_m, dtype=float) / wavelength_m
    if np.any(ratio > 0.1):
        warnings.warn(f"loop perimeter is {np.max(ratio):.3g} wavelengths; the small-loop formula "
                      "holds for perimeter ≲ 0.1 λ", ValidityWarning, stacklevel=3)


def radiation_resistance_small_loop(area_m2, frequency_hz, turns=1, perimeter_m=None):
    r"""Radiation resistance of an electrically small loop of any shape.

    Parameters
    ----------
    area_m2 : array_like
        Area enclosed by one turn. [m²]
    frequency_hz : array_like
        Frequency. [Hz]
    turns : array_like
        Series turns N. [-]
    perimeter_m : array_like, optional
        Perimeter of one turn; if given, a :class:`~simloop.errors.ValidityWarning` is issued
        when it exceeds 0.1 λ. [m]

    Returns
    -------
    ndarray
        Radiation resistance. [Ω]

    Notes
    -----
    .. math:: R_r = 320\pi^4\left(\frac{N A}{\lambda^2}\right)^2
              \approx 31171\left(\frac{N A}{\lambda^2}\right)^2

    (Balanis ch. 5, small loop of any shape; equation numbers not checked).

    References
    ----------
    .. [1] C. A. Balanis, *Antenna Theory: Analysis and Design*, 4th ed., Wiley, 2016, ch. 5.
    .. [2] J. D. Kraus, *Antennas*, 2nd ed., McGraw-Hill, 1988, ch. 6.
    """
    lam = _wavelength(frequency_hz)
    _warn_if_large(perimeter_m, lam)
    na = np.asarray(turns, dtype=float) * _require_positive("area_m2", area_m2)
    return 320 * np.pi**4 * (na / lam**2) ** 2


def effective_height_small_loop(area_m2, frequency_hz, turns=1, permeability=1.0,
                                perimeter_m=None):
    r"""Effective height of an electrically small loop.

    Parameters
    ----------
    area_m2 : array_like
        Area enclosed by one turn. [m²]
    frequency_hz : array_like
        Frequency. [Hz]
    turns : array_like
        Series turns N. [-]
    permeability : array_like
        Apparent (rod) permeability μ_rod of a core filling the loop, 1 for an air loop. [-]
    perimeter_m : array_like, optional
        Perimeter of one turn; warns (ValidityWarning) above 0.1 λ. [m]

    Returns
    -------
    ndarray
        Effective height h_e (open-circuit voltage per unit incident electric field, for the
        optimum orientation). [m]

    Notes
    -----
    .. math:: h_e = \frac{2\pi N A \mu_{rod}}{\lambda},\qquad
              R_r = 80\pi^2\left(\frac{h_e}{\lambda}\right)^2\ \text{(air loop)}

    References
    ----------
    .. [1] J. D. Kraus, *Antennas*, 2nd ed., McGraw-Hill, 1988, ch. 6.
    .. [2] C. A. Balanis, *Antenna Theory*, 4th ed., Wiley, 2016, ch. 5.
    """
    lam = _wavelength(frequency_hz)
    _warn_if_large(perimeter_m, lam)
    return (2 * np.pi * np.asarray(turns, dtype=float) * _require_positive("area_m2", area_m2)
            * np.asarray(permeability, dtype=float) / lam)


# --------------------------------------------------------------------------------------------
# Wire loss
# --------------------------------------------------------------------------------------------


def resistivity_copper(temperature_c=20.0):
    r"""Resistivity of IEC 60028 annealed copper at a temperature.

    Parameters
    ----------
    temperature_c : array_like
        Conductor temperature. [°C]

    Returns
    -------
    ndarray
        Resistivity ρ = ρ20 (1 + α20 (T − 20 °C)). [Ω·m]

    References
    ----------
    .. [1] IEC 60028, *International standard of resistance for copper*, 1925 (ρ20 = 1/58 Ω·mm²/m,
       α20 = 0.00393 /K).
    """
    t = np.asarray(temperature_c, dtype=float)
    return RESISTIVITY_COPPER_IEC60028 * (1 + ALPHA_COPPER_IEC60028 * (t - 20.0))


def skin_depth(resistivity_ohm_m, frequency_hz, mu_r=1.0):
    r"""Skin depth of a good conductor.

    Parameters
    ----------
    resistivity_ohm_m : array_like
        Resistivity ρ. [Ω·m]
    frequency_hz : array_like
        Frequency f. [Hz]
    mu_r : array_like
        Relative permeability. [-]

    Returns
    -------
    ndarray
        :math:`\delta = \sqrt{\rho / (\pi f \mu_0 \mu_r)}`. [m]

    References
    ----------
    .. [1] S. Ramo, J. R. Whinnery, T. Van Duzer, *Fields and Waves in Communication
       Electronics*, 3rd ed., Wiley, 1994, ch. 5 [section from memory].
    """
    rho = _require_positive("resistivity_ohm_m", resistivity_ohm_m)
    f = _require_positive("frequency_hz", frequency_hz)
    return np.sqrt(rho / (np.pi * f * MU0 * np.asarray(mu_r, dtype=float)))


def ac_resistance_ratio_round_wire(radius_m, frequency_hz, resistivity_ohm_m=None):
    r"""Ratio R_ac/R_dc of an isolated straight round wire (exact, Bessel functions).

    Parameters
    ----------
    radius_m : array_like
        Wire radius a. [m]
    frequency_hz : array_like
        Frequency. [Hz]
    resistivity_ohm_m : array_like, optional
        Resistivity; default IEC 60028 copper at 20 °C. [Ω·m]

    Returns
    -------
    ndarray
        R_ac / R_dc (≥ 1). [-]

    Notes
    -----
    .. math:: \frac{R}{R_{dc}} = \operatorname{Re}\left\{\frac{ka}{2}
              \frac{J_0(ka)}{J_1(ka)}\right\},\qquad k = \frac{1 - j}{\delta}

    evaluated with exponentially scaled Bessel functions (``scipy.special.jve``, the scale
    factors cancel in the ratio), so it does not overflow at large a/δ; there it tends to
    a/(2δ) + 1/4 + 3δ/(32a). Proximity of other turns is not included (see
    :func:`proximity_factor_smith1972`).

    References
    ----------
    .. [1] S. Ramo, J. R. Whinnery, T. Van Duzer, *Fields and Waves in Communication
       Electronics*, 3rd ed., Wiley, 1994, ch. 5 (internal impedance of a round wire) [section
       from memory].
    """
    rho = RESISTIVITY_COPPER_IEC60028 if resistivity_ohm_m is None else resistivity_ohm_m
    a = _require_positive("radius_m", radius_m)
    delta = skin_depth(rho, frequency_hz)
    ka = (1 - 1j) * a / delta
    return np.real(ka / 2 * special.jve(0, ka) / special.jve(1, ka))


def resistance_per_length_round_wire(radius_m, frequency_hz, resistivity_ohm_m=None):
    r"""AC resistance per unit length of an isolated straight round wire.

    Parameters
    ----------
    radius_m : array_like
        Wire radius a. [m]
    frequency_hz : array_like
        Frequency. [Hz]
    resistivity_ohm_m : array_like, optional
        Resistivity; default IEC 60028 copper at 20 °C. [Ω·m]

    Returns
    -------
    ndarray
        R' = ρ/(π a²) · R_ac/R_dc. [Ω/m]

    References
    ----------
    .. [1] S. Ramo, J. R. Whinnery, T. Van Duzer, *Fields and Waves in Communication
       Electronics*, 3rd ed., Wiley, 1994, ch. 5 [section from memory].
    """
    rho = RESISTIVITY_COPPER_IEC60028 if resistivity_ohm_m is None else resistivity_ohm_m
    a = _require_positive("radius_m", radius_m)
    return np.asarray(rho, dtype=float) / (np.pi * a**2) * ac_resistance_ratio_round_wire(
        a, frequency_hz, rho)


def _proximity_coefficients(turns, spacing_ratio, harmonics):
    """Fourier coefficients c[n, m-1] / c0 of the surface current on N coplanar wires."""
    n_w = int(turns)
    kk = np.arange(1, harmonics + 1)
    m = kk
    centres = (2 * np.arange(n_w) - (n_w - 1)) * spacing_ratio  # in units of a (x/a)
    size = n_w * harmonics
    mat = np.eye(size)
    rhs = np.zeros(size)
    # binomial C(m+k-1, k) as (k, m) matrix, via log-gamma to stay finite
    lg = special.gammaln(m[None, :] + kk[:, None]) - special.gammaln(kk[:, None] + 1) \
        - special.gammaln(m[None, :])
    for n in range(n_w):
        for p in range(n_w):
            if p == n:
                continue
            t = 1.0 / (centres[n] - centres[p])  # a / D_np, D = z_n - z_p
            sgn_t = np.sign(t)
            at = abs(t)
            # block: (-1)^k (k/m) C(m+k-1,k) t^(m+k)
            logmag = lg + np.log(kk[:, None] / m[None, :]) + (m[None, :] + kk[:, None]) * np.log(at)
            sign = (-1.0) ** kk[:, None] * sgn_t ** (m[None, :] + kk[:, None])
            mat[n * harmonics:(n + 1) * harmonics, p * harmonics:(p + 1) * harmonics] += \
                sign * np.exp(logmag)
            rhs[n * harmonics:(n + 1) * harmonics] += 2 * (-1.0) ** (kk + 1) * t**kk
    return np.linalg.solve(mat, rhs).reshape(n_w, harmonics)


def proximity_factor_smith1972(turns, spacing_ratio, harmonics=None):
    r"""Proximity-effect loss factor R_p/R_0 of N parallel, coplanar, equally spaced wires.

    Parameters
    ----------
    turns : int
        Number N of parallel wires (turns), each carrying the same current. [-]
    spacing_ratio : float
        c/a: half the centre-to-centre spacing over the wire radius (> 1). [-]
    harmonics : int, optional
        Number of Fourier harmonics per wire; default chosen from c/a so that R_p/R_0 is
        converged to better than 1e-9 relative.

    Returns
    -------
    float
        R_p/R_0, the proximity contribution relative to the skin-effect loss of the isolated
        wires. Total ohmic resistance of an N-turn loop of loop radius b:
        :math:`R_{ohm} = (N b/a)\,R_s\,(R_p/R_0 + 1)`, R_s the surface resistance.

    Notes
    -----
    Two-dimensional model (G. S. Smith 1972): infinitely long, perfectly conducting round wires
    of radius a, centres at x_n = (2n − N − 1)c, carrying equal currents I in the skin-effect
    limit. The surface current on wire n is :math:`K_n(\varphi) = \frac{I}{2\pi a}[1 +
    \sum_{m\ge1} c_{nm}\cos m\varphi]` (only cosines, by symmetry about the plane). Requiring
    the vector potential A_z to be constant on each wire surface, with the logarithm and
    multipoles of wire p expanded about the centre of wire n (D = x_n − x_p):

    .. math:: c_{nk} + \sum_{p\ne n}\sum_{m\ge1}(-1)^k\frac{k}{m}\binom{m+k-1}{k}
              \left(\frac{a}{D}\right)^{m+k} c_{pm} = 2(-1)^{k+1}\sum_{p\ne n}
              \left(\frac{a}{D}\right)^{k}

    The loss per wire is proportional to :math:`\oint K^2\,a\,d\varphi`, hence
    :math:`R_p/R_0 = \frac{1}{N}\sum_n\sum_m c_{nm}^2/2`.

    The method is confirmed via Miron (2006), app. D; Smith's own printed table is NOT
    confirmed here. For N = 2 the result agrees with the exact solution
    :func:`proximity_factor_two_wires_exact`.

    References
    ----------
    .. [1] G. S. Smith, "Radiation efficiency of electrically small multiturn loop antennas",
       IEEE Trans. Antennas Propag. AP-20(5), 1972 [pages from memory: 656–657].
    .. [2] D. B. Miron, *Small Antenna Design*, Newnes/Elsevier, 2006, app. D.
    """
    n_w = int(turns)
    if n_w < 1:
        raise ValueError(f"turns must be at least 1, got {turns}")
    ca = float(spacing_ratio)
    if not ca > 1:
        raise ValueError(f"spacing_ratio c/a must exceed 1 (wires may not touch), got {ca}")
    if n_w == 1:
        return 0.0
    if harmonics is None:
        # interactions decay like (a/(2c))^(m+k); keep terms down to ~1e-17 relative
        harmonics = int(np.clip(np.ceil(-40 / np.log(1 / (2 * ca))) + 8, 8, 400))
    c = _proximity_coefficients(n_w, ca, int(harmonics))
    return float(np.sum(c**2) / (2 * n_w))


def proximity_factor_two_wires_exact(spacing_ratio):
    r"""Exact R_p/R_0 for two parallel perfectly conducting wires with equal co-directed currents.

    Parameters
    ----------
    spacing_ratio : array_like
        c/a: half the centre spacing over the wire radius (> 1). [-]

    Returns
    -------
    ndarray
        R_p/R_0 (same definition as :func:`proximity_factor_smith1972`). [-]

    Notes
    -----
    Derivation (conformal mapping). With h = √(c² − a²), ζ = (z − h)/(z + h) maps the outside of
    the two circles onto the annulus e^(−L) < |ζ| < e^L, L = acosh(c/a), and z = ∞ onto ζ = 1.
    In τ = ln ζ = u + jv the vector potential is A_z = (μ0 I/π) g with g periodic in v,
    constant on u = ±L and g ≈ ln|τ| at τ = 0; by Fourier series in v,

    .. math:: g = \frac{|u|}{2} - \sum_{m\ge1}\frac{\sinh m(L-|u|)}{m\cosh mL}\cos mv,

    so on a wire :math:`K = \frac{I}{\pi}S(v)\left|\frac{d\tau}{dz}\right|` with
    :math:`S = \tfrac12 + \sum_m \cos(mv)/\cosh(mL)` and
    :math:`|d\tau/dz| = (\cosh L - \cos v)/h`. Integrating K² along the wire
    (dl = |dz/dτ| dv) and dividing by the uniform-current loss I²/(2πa):

    .. math:: \frac{R}{R_0} = \frac{2}{\sinh L}\left[\cosh L\left(\tfrac12
              + \sum_{m\ge1}\operatorname{sech}^2 mL\right)
              - \sum_{m\ge0}\operatorname{sech}(mL)\operatorname{sech}((m+1)L)\right],
              \qquad \frac{R_p}{R_0} = \frac{R}{R_0} - 1.

    For c ≫ a this tends to a²/(2c²). The series converge like e^(−2mL).
    """
    ca = np.asarray(spacing_ratio, dtype=float)
    if np.any(~(ca > 1)):
        raise ValueError(f"spacing_ratio c/a must exceed 1, got {ca}")
    big_l = np.arccosh(ca)[..., None]
    terms = max(8, int(np.ceil(40 / np.min(big_l))) + 2)
    m = np.arange(1, terms + 1)
    sech = 1 / np.cosh(m * big_l)
    sech0 = np.concatenate([np.ones_like(big_l), sech], axis=-1)
    s2 = np.sum(sech**2, axis=-1)
    cross = np.sum(sech0[..., :-1] * sech0[..., 1:], axis=-1)
    big_l = big_l[..., 0]
    ratio = 2 / np.sinh(big_l) * (np.cosh(big_l) * (0.5 + s2) - cross)
    return ratio - 1


# --------------------------------------------------------------------------------------------
# Q and bandwidth
# --------------------------------------------------------------------------------------------


def q_factor(reactance_ohm, resistance_ohm):
    r"""Quality factor of a reactive element, Q = |X| / R.

    Parameters
    ----------
    reactance_ohm : array_like
        Reactance X. [Ω]
    resistance_ohm : array_like
        Series loss resistance R (> 0). [Ω]

    Returns
    -------
    ndarray
        Q. [-]

    References
    ----------
    .. [1] F. E. Terman, *Radio Engineers' Handbook*, McGraw-Hill, 1943, sec. 3.
    """
    r = _require_positive("resistance_ohm", resistance_ohm)
    return np.abs(np.asarray(reactance_ohm, dtype=float)) / r


def bandwidth_3db(frequency_hz, q):
    r"""Half-power (−3 dB) bandwidth of a resonant circuit, B = f₀ / Q.

    Parameters
    ----------
    frequency_hz : array_like
        Resonant frequency f₀. [Hz]
    q : array_like
        Loaded quality factor. [-]

    Returns
    -------
    ndarray
        Bandwidth between the half-power points. [Hz]

    References
    ----------
    .. [1] F. E. Terman, *Radio Engineers' Handbook*, McGraw-Hill, 1943, sec. 3.
    """
    return _require_positive("frequency_hz", frequency_hz) / _require_positive("q", q)


def q_loaded(q_coil, q_capacitor, *q_other):
    r"""Q of a resonant circuit whose losses add: 1/Q = Σ 1/Q_i.

    Parameters
    ----------
    q_coil : array_like
        Q of the coil (loop) alone. [-]
    q_capacitor : array_like
        Q of the tuning capacitor. [-]
    *q_other : array_like
        Further loss contributions (e.g. a coupled load), each as a Q. [-]

    Returns
    -------
    ndarray
        Combined Q. [-]

    References
    ----------
    .. [1] F. E. Terman, *Radio Engineers' Handbook*, McGraw-Hill, 1943, sec. 3.
    """
    inv = sum(1 / _require_positive("q", q) for q in (q_coil, q_capacitor, *q_other))
    return 1 / inv


# --------------------------------------------------------------------------------------------
# Self-capacitance
# --------------------------------------------------------------------------------------------

# Medhurst (1947), table of H against l/D (docs/references.md §5; the 0.8–1.0 entry as two nodes).
_MEDHURST_LD = np.array([0.1, 0.2, 0.3, 0.5, 0.8, 1.0, 2.0, 3.0, 5.0, 10.0])
_MEDHURST_H = np.array([0.96, 0.70, 0.60, 0.50, 0.46, 0.46, 0.50, 0.61, 0.81, 1.32])


def self_capacitance_medhurst1947(length_m, diameter_m):
    r"""Self-capacitance of a single-layer solenoid, Medhurst's empirical table.

    Parameters
    ----------
    length_m : array_like
        Winding length l. [m]
    diameter_m : array_like
        Coil diameter D. [m]

    Returns
    -------
    ndarray
        Self-capacitance C = H(l/D)·D, with C in pF for D in cm. [F]

    Notes
    -----
    H is interpolated piecewise-linearly in log(l/D) between the tabulated points
    (0.1, 0.2, 0.3, 0.5, 0.8, 1.0, 2, 3, 5, 10), and extrapolated linearly in log(l/D) from the
    end intervals outside 0.1–10 with a :class:`~simloop.errors.ValidityWarning`. Meant for
    solenoid-shaped coils (e.g. the rod coil), not for large flat box loops (docs/references.md §5).

    References
    ----------
    .. [1] R. G. Medhurst, "H.F. resistance and self-capacitance of single-layer solenoids",
       Wireless Engineer 24, 1947 [title and pages from memory: pp. 35–43, 80–92].
    """
    l = _require_positive("length_m", length_m)
    d = _require_positive("diameter_m", diameter_m)
    ratio = l / d
    if np.any((ratio < _MEDHURST_LD[0]) | (ratio > _MEDHURST_LD[-1])):
        warnings.warn(f"l/D = {ratio} lies outside Medhurst's table (0.1 to 10): extrapolated",
                      ValidityWarning, stacklevel=2)
    x = np.log(ratio)
    xs = np.log(_MEDHURST_LD)
    h = np.interp(x, xs, _MEDHURST_H)
    lo = x < xs[0]
    hi = x > xs[-1]
    slope_lo = (_MEDHURST_H[1] - _MEDHURST_H[0]) / (xs[1] - xs[0])
    slope_hi = (_MEDHURST_H[-1] - _MEDHURST_H[-2]) / (xs[-1] - xs[-2])
    h = np.where(lo, _MEDHURST_H[0] + slope_lo * (x - xs[0]), h)
    h = np.where(hi, _MEDHURST_H[-1] + slope_hi * (x - xs[-1]), h)
    return h * (100 * d) * 1e-12


# ------------------------------------------------------------------------------------------------
# Formulas the validation sets the solvers against
# ------------------------------------------------------------------------------------------------


def magnetic_moment_area_m2(starts, ends) -> np.ndarray:
    r"""Vector area of a closed circuit of straight pieces, m/I = ½ ∮ r × dl. [m²]

    For a straight piece from p to q, ∫ r × dr = p × q, so the vector area is ½ Σ p_k × q_k,
    independent of the origin when the circuit is closed.

    References
    ----------
    .. [1] J. D. Jackson, *Classical Electrodynamics*, 3rd ed., Wiley, 1999, sec. 5.6
       (magnetic moment m = ½ ∮ r × I dl) [section from memory].
    """
    p = np.asarray(starts, dtype=float).reshape(-1, 3)
    q = np.asarray(ends, dtype=float).reshape(-1, 3)
    return 0.5 * np.cross(p, q).sum(axis=0)


def radiation_resistance_moment(area_vector_m2, frequency_hz) -> float:
    r"""Radiation resistance of an electrically small closed circuit from its vector area. [Ω]

    .. math:: R_r = \frac{\eta_0 k^4}{6\pi}\,|\mathbf{A}|^2 \approx 320\pi^4\frac{|\mathbf{A}|^2}{\lambda^4}

    The magnetic-dipole term of any small current loop; for N equal plane turns |A| = N·A and it
    is Balanis' small-loop formula (C. A. Balanis, *Antenna Theory*, 4th ed., 2016, ch. 5), whose
    constant 320π⁴ takes η0 = 120π; with η0 = μ0·c, as here and in NEC, it is 0.07 % lower.
    Using the vector area of the actual winding path takes in the unequal turns of a spiral and
    the lead loop.

    References
    ----------
    .. [1] C. A. Balanis, *Antenna Theory: Analysis and Design*, 4th ed., Wiley, 2016, ch. 5.
    .. [2] J. D. Jackson, *Classical Electrodynamics*, 3rd ed., Wiley, 1999, sec. 9.3
       (magnetic dipole radiation) [section from memory].
    """
    k = 2 * np.pi * float(frequency_hz) / SPEED_OF_LIGHT
    a2 = float(np.dot(area_vector_m2, area_vector_m2))
    return ETA0_OHM * k**4 * a2 / (6 * np.pi)


def inductance_square_spiral_current_sheet(d_out_m, d_in_m, turns) -> float:
    r"""Current-sheet inductance of a flat square spiral (Mohan et al. 1999). [H]

    .. math:: L = \frac{\mu_0 n^2 d_{avg} c_1}{2}\left[\ln\frac{c_2}{\rho} + c_3\rho
              + c_4\rho^2\right],\quad d_{avg} = \frac{d_{out} + d_{in}}{2},\quad
              \rho = \frac{d_{out} - d_{in}}{d_{out} + d_{in}}

    with c1 = 1.27, c2 = 2.07, c3 = 0.18, c4 = 0.13 for a square spiral; d_out and d_in are the
    outer and inner side lengths of the winding (conductor edges).

    References
    ----------
    .. [1] S. S. Mohan, M. del Mar Hershenson, S. P. Boyd, T. H. Lee, "Simple accurate
       expressions for planar spiral inductances", IEEE J. Solid-State Circuits 34(10), 1999,
       pp. 1419–1424 (current-sheet expression, table of c1–c4). Coefficients from memory
       [mem]: confirm against the paper before relying on them.
    """
    d_out, d_in, n = float(d_out_m), float(d_in_m), float(turns)
    d_avg = 0.5 * (d_out + d_in)
    rho = (d_out - d_in) / (d_out + d_in)
    c1, c2, c3, c4 = 1.27, 2.07, 0.18, 0.13
    return MU0 * n**2 * d_avg * c1 / 2 * (np.log(c2 / rho) + c3 * rho + c4 * rho**2)


def rosa_b(turns: int) -> float:
    r"""Rosa's correction B for the mutual inductances of N round-wire turns against a sheet. [-]

    .. math:: B = -\frac{2}{N}\sum_{k=1}^{N-1}(N-k)\left[F(k) - \ln k\right],\quad
              F(k) = \tfrac12\left[(k+1)^2\ln(k+1) + (k-1)^2\ln|k-1| - 2k^2\ln k\right]
              - \tfrac32

    F(k) is the mean of ln(distance) between two strips of unit width whose centres are k apart;
    B is its difference from the filaments' ln k, summed over the pairs of turns. The sum
    reproduces Rosa's table (B = 0.1137, 0.1663, 0.1973 for N = 2, 3, 4; 0.2664 for N = 10;
    0.3365 as N → ∞) [mem for the table; the sum is derived here].

    References
    ----------
    .. [1] E. B. Rosa, "The self and mutual inductances of linear conductors", Bull. Bureau of
       Standards 4(2), 1908 (correction B and its table).
    .. [2] F. W. Grover, *Inductance Calculations*, Van Nostrand, 1946.
    """
    n = int(turns)

    def f(k):
        km1 = (k - 1) ** 2 * np.log(abs(k - 1)) if k != 1 else 0.0
        return 0.5 * ((k + 1) ** 2 * np.log(k + 1) + km1 - 2 * k**2 * np.log(k)) - 1.5

    return float(-(2.0 / n) * sum((n - k) * (f(k) - np.log(k)) for k in range(1, n)))


def rosa_round_wire_correction(turn_length_m, turns, pitch_m, wire_diameter_m) -> float:
    r"""Round-wire correction of a current-sheet inductance (Rosa 1908; Grover 1946). [H]

    .. math:: L = L_{sheet} - \frac{\mu_0}{2\pi}\,\ell N (A + B),\qquad
              A = \tfrac54 - \ln\frac{2p}{d}

    ℓ is the length of one turn, p the pitch, d the wire diameter, B from :func:`rosa_b`. A is
    Rosa's value for a uniform (DC) current; with the current on the surface it is 0.25 larger.
    For spaced windings (p ≫ d) A is negative and the correction adds inductance: a current sheet
    underestimates thin wires.

    References
    ----------
    .. [1] E. B. Rosa, "The self and mutual inductances of linear conductors", Bull. Bureau of
       Standards 4(2), 1908 (corrections A and B).
    .. [2] F. W. Grover, *Inductance Calculations*, Van Nostrand, 1946.
    """
    a = 1.25 - np.log(2 * float(pitch_m) / float(wire_diameter_m))
    return float(-MU0 / (2 * np.pi) * float(turn_length_m) * int(turns) * (a + rosa_b(turns)))


def sphere_weights(theta_deg, phi_deg) -> np.ndarray:
    r"""Quadrature weights on a θ–φ grid for ∮ F dΩ = Σ w F, shape (nφ, nθ). [sr]

    Composite Simpson in θ over [0°, 180°] (an even number of intervals) with the sin θ factor of
    the solid angle, uniform (periodic) weights in φ over [0°, 360°).

    References
    ----------
    .. [1] M. Abramowitz, I. A. Stegun, *Handbook of Mathematical Functions*, NBS, 1964,
       eq. 25.4.6 (extended Simpson's rule) [equation number from memory].
    """
    th = np.radians(np.asarray(theta_deg, dtype=float))
    ph = np.asarray(phi_deg, dtype=float)
    n = th.size - 1
    if n < 2 or n % 2:
        raise ValueError(f"θ needs an even number of intervals for Simpson's rule, got {n}")
    h = th[1] - th[0]
    if not np.allclose(np.diff(th), h) or abs(th[0]) > 1e-9 or abs(th[-1] - np.pi) > 1e-9:
        raise ValueError("θ must run uniformly from 0° to 180°")
    dph = 360.0 / ph.size
    if not np.allclose(ph, ph[0] + dph * np.arange(ph.size)):
        raise ValueError("φ must be uniform over [0°, 360°)")
    simpson = np.ones(th.size)
    simpson[1:-1:2], simpson[2:-1:2] = 4.0, 2.0
    w_theta = simpson * h / 3 * np.sin(th)
    return np.radians(dph) * np.broadcast_to(w_theta, (ph.size, th.size))


def average_gain(e_theta_v, e_phi_v, theta_deg, phi_deg, input_power_w) -> tuple[float, float]:
    r"""Average gain of a pattern: radiated power over the sphere / input power. [-]

    .. math:: P_{rad} = \oint \frac{|rE_\theta|^2 + |rE_\phi|^2}{2\eta_0}\,d\Omega,\qquad
              \mathrm{AGT} = P_{rad}/P_{in}

    Returns (AGT, P_rad [W]). ``e_theta_v``, ``e_phi_v``: r·E, shape (nφ, nθ), peak values. [V]

    References
    ----------
    .. [1] C. A. Balanis, *Antenna Theory: Analysis and Design*, 4th ed., Wiley, 2016, ch. 2
       (radiated power from the radiation intensity) [chapter from memory].
    """
    w = sphere_weights(theta_deg, phi_deg)
    density = (np.abs(e_theta_v) ** 2 + np.abs(e_phi_v) ** 2) / (2 * ETA0_OHM)
    p_rad = float(np.sum(w * density))
    return p_rad / float(input_power_w), p_rad


@dataclass(frozen=True)
class RichardsonResult:
    """Outcome of :func:`richardson_extrapolation`.

    ``code`` names the outcome (``"agree"``, ``"not-monotone"``, ``"faster-than-power-law"``,
    ``"no-shrink"``, ``"order-outside"``, ``"extrapolated"``); ``params`` holds the numbers a
    report words it with: ``coarse_step`` and ``fine_step`` (relative changes coarse → middle and
    middle → fine), ``order``, ``observed_order``, ``order_range``, ``agree_within``.
    """

    estimate: float | None
    observed_order: float | None
    code: str
    params: dict


#: Relative change between the three values below which they count as equal (0.01 %: below the
#: 0.1–0.4 % extrapolation error measured for the pitch rule, docs/notes/pynec.md). [-]
RICHARDSON_AGREE = 1e-4
#: Bracket of the observed-order search (a root outside it is not a power law worth the name). [-]
RICHARDSON_ORDER_BRACKET = (0.05, 8.0)


def richardson_extrapolation(step, values, order: float, order_range=(0.75, 3.0)) -> RichardsonResult:
    r"""Extrapolate values(Δ) = v* + cΔ^p to Δ → 0 from the two finest of three steps.

    Parameters
    ----------
    step : array_like, shape (3,)
        Step sizes (segment lengths), coarse to fine. [m]
    values : array_like, shape (3,)
    order : float
        p used for the extrapolation. [-]
    order_range : (float, float)
        Observed orders outside this range do not count as a trend. [-]

    Returns
    -------
    RichardsonResult
        The estimate only when the three values are monotone in Δ and the order they imply lies in
        ``order_range`` (or when they agree within :data:`RICHARDSON_AGREE`); ``code`` says why
        not otherwise.

    References
    ----------
    .. [1] L. F. Richardson, "The approximate arithmetical solution by finite differences of
       physical problems", Phil. Trans. R. Soc. A 210, 1911, pp. 307–357.
    .. [2] P. J. Roache, *Verification and Validation in Computational Science and Engineering*,
       Hermosa, 1998 (observed order from three grids).
    """
    d = np.asarray(step, dtype=float)
    v = np.asarray(values, dtype=float)
    d1, d2 = v[0] - v[1], v[1] - v[2]
    scale = abs(v[2])
    steps = {"coarse_step": float(-d1 / scale), "fine_step": float(-d2 / scale)}
    if abs(d1) < RICHARDSON_AGREE * scale and abs(d2) < RICHARDSON_AGREE * scale:
        return RichardsonResult(float(v[2]), None, "agree", {"agree_within": RICHARDSON_AGREE})
    if d1 * d2 <= 0:
        return RichardsonResult(None, None, "not-monotone", steps)
    ratio = d1 / d2

    def mismatch(p):
        return (d[0] ** p - d[1] ** p) / (d[1] ** p - d[2] ** p) - ratio

    lo, hi = RICHARDSON_ORDER_BRACKET
    if mismatch(hi) < 0:
        return RichardsonResult(None, None, "faster-than-power-law", steps)
    if mismatch(lo) > 0:
        return RichardsonResult(None, None, "no-shrink", steps)
    p_obs = float(brentq(mismatch, lo, hi))
    if not order_range[0] <= p_obs <= order_range[1]:
        return RichardsonResult(None, p_obs, "order-outside",
                                {"observed_order": p_obs, "order_range": tuple(order_range)})
    c = (v[1] - v[2]) / (d[1] ** order - d[2] ** order)
    return RichardsonResult(float(v[2] - c * d[2] ** order), p_obs, "extrapolated",
                            {"order": order, "observed_order": p_obs})
