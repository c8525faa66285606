"""Independent reference for the rod model: a full axisymmetric surface-charge solution of a
permeable cylinder in a uniform axial field (test helper, not part of the package).

Unknown: the magnetic surface-charge density σ on the end cap and the side (odd in z, so only the
upper half is discretised and the lower half mirrored). Continuity of normal B across the surface,
μ(H̄_n − σ/2) = H̄_n + σ/2 with H̄_n the principal-value normal field, gives the second-kind equation
σ − 2λ K σ = 2λ H0·n, λ = (μ − 1)/(μ + 1) (e.g. Jackson, Classical Electrodynamics, 3rd ed.,
sec. 5.9–5.10 for the scalar-potential formulation). K is built from the exact field of a ring
of charge (complete elliptic integrals; Smythe, Static and Dynamic Electricity, 1950, sec. 5.321),
panel-constant σ, collocation at panel midpoints, panels graded to the rim. Unlike
:mod:`simloop.receiver` it lets M vary over the cross-section. Converges slowly (O(h) near the rim
singularity), so callers extrapolate three resolutions (Aitken).
"""

from __future__ import annotations

import numpy as np
from scipy import integrate, special


def ring_field(q, b, zp, rho, z):
    """(H_ρ, H_z) at (ρ, z) of a ring of total charge q, radius b, height zp (H = q r̂/(4πr²) per point)."""
    dz = z - zp
    dp2 = (rho + b) ** 2 + dz**2
    dm2 = (rho - b) ** 2 + dz**2
    m = np.clip(4 * rho * b / dp2, 0, 1 - 1e-16)
    k_, e_ = special.ellipk(m), special.ellipe(m)
    dp = np.sqrt(dp2)
    hz = q / (4 * np.pi) * (2 / np.pi) * dz * e_ / (dm2 * dp)
    with np.errstate(divide="ignore", invalid="ignore"):
        hr = np.where(rho > 1e-12, q / (4 * np.pi) / (np.pi * rho) / dp
                      * (k_ - (b * b - rho * rho + dz * dz) / dm2 * e_), 0.0)
    return hr, hz


def _graded(n, a, b, p=2.5):
    t = np.linspace(0, 1, n + 1)
    return a + (b - a) * (1 - (1 - t) ** p)


def _quad_points(s0, s1, xg, wg, parts=4):
    sub = np.linspace(s0, s1, parts + 1)
    sp = (0.5 * (sub[1:, None] - sub[:-1, None]) * xg + 0.5 * (sub[1:, None] + sub[:-1, None])).ravel()
    sw = (0.5 * (sub[1:, None] - sub[:-1, None]) * wg).ravel()
    return sp, sw


def _rings(kind, sp, h):
    return (sp, np.full_like(sp, h)) if kind == "cap" else (np.ones_like(sp), sp)


def fluxmetric_factor(length_over_radius, mu, n_cap=40, n_side=120, ng=8):
    """N_f at the middle of a cylinder of radius 1 and length ``length_over_radius``."""
    h = length_over_radius / 2
    rc, zs = _graded(n_cap, 0.0, 1.0), _graded(n_side, 0.0, h)
    panels = [("cap", rc[i], rc[i + 1]) for i in range(n_cap)]
    panels += [("side", zs[i], zs[i + 1]) for i in range(n_side)]
    col = np.array([(0.5 * (s0 + s1), h, 0.0, 1.0) if kind == "cap" else (1.0, 0.5 * (s0 + s1), 1.0, 0.0)
                    for kind, s0, s1 in panels])
    xg, wg = np.polynomial.legendre.leggauss(ng)
    n = len(panels)
    a = np.zeros((n, n))
    for j, (kind, s0, s1) in enumerate(panels):
        sp, sw = _quad_points(s0, s1, xg, wg)
        b, zp = _rings(kind, sp, h)
        q = 2 * np.pi * b * sw
        hr1, hz1 = ring_field(q[None], b[None], zp[None], col[:, :1], col[:, 1:2])
        hr2, hz2 = ring_field(-q[None], b[None], -zp[None], col[:, :1], col[:, 1:2])
        a[:, j] = (hr1 + hr2).sum(1) * col[:, 2] + (hz1 + hz2).sum(1) * col[:, 3]
        rho_i, z_i = col[j, 0], col[j, 1]
        if kind == "side":     # log-singular self term: adaptive quadrature split at the point
            f = lambda zz: ring_field(2 * np.pi, 1.0, zz, rho_i, z_i)[0]  # noqa: E731
            own = integrate.quad(f, s0, z_i, limit=200)[0] + integrate.quad(f, z_i, s1, limit=200)[0]
            a[j, j] = own + (hr2[j] * col[j, 2]).sum()
        else:                  # a flat panel's own normal field is zero; keep the mirror's
            a[j, j] = hz2[j].sum()
    lam = (mu - 1) / (mu + 1)
    sigma = np.linalg.solve(np.eye(n) - 2 * lam * a, 2 * lam * col[:, 3])
    xr, wr = np.polynomial.legendre.leggauss(60)
    rr, wrr = 0.5 * (xr + 1), 0.5 * wr
    hz_mid = np.ones_like(rr)
    for j, (kind, s0, s1) in enumerate(panels):
        sp, sw = _quad_points(s0, s1, xg, wg)
        b, zp = _rings(kind, sp, h)
        q = sigma[j] * 2 * np.pi * b * sw
        hz_mid += (ring_field(q[None], b[None], zp[None], rr[:, None], 0.0)[1]
                   + ring_field(-q[None], b[None], -zp[None], rr[:, None], 0.0)[1]).sum(1)
    h_avg = 2 * np.sum(hz_mid * rr * wrr)
    return (1 - h_avg) / ((mu - 1) * h_avg)


def fluxmetric_factor_extrapolated(length_over_radius, mu):
    """Aitken extrapolation of three resolutions (40/120, 80/240, 160/480 panels)."""
    r = [fluxmetric_factor(length_over_radius, mu, nc, ns) for nc, ns in ((40, 120), (80, 240), (160, 480))]
    d1, d2 = r[1] - r[0], r[2] - r[1]
    return r[2] + d2 * d2 / (d1 - d2)
