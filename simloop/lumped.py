r"""Physical model of a multi-port loop fitted to MoM solves, and its evaluation anywhere in the band.

Below its self-resonance a tapped loop is, port for port, a lossy inductance matrix shunted by a
capacitance matrix:

.. math:: Y(\omega) = \left(R_s(\omega) + j\omega L_0\right)^{-1} + j\omega C

With the loss neglected in the imaginary part (its effect there is of order (R/ωL)² ≈ 1e-5),

.. math:: \omega\,\mathrm{Im}\,Y(\omega) = -L_0^{-1} + \omega^2 C,

linear in ω² element by element: the matrix form of the one-port rule 1/L_app = 1/L0 − ω²C. The
series resistance is recovered by removing the shunt capacitance, R_s = Re (Y − jωC)⁻¹, and fitted
with the frequency laws of its two parts: conductor loss ∝ the exact skin-effect ratio of the wire
and radiation resistance ∝ f⁴ (small-loop law).

Fitting where the MoM is valid (segments ≥ 7e-5 λ and f ≲ 0.6 × self-resonance) and evaluating
down to the bottom of the MW band sidesteps the low-frequency breakdown: the model becomes *more*
exact as ω → 0, where Z → R + jωL0.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
from scipy.linalg import eig

from simloop import reference


#: An eigenvalue ω² of L0⁻¹v = ω²Cv counts as real when its imaginary part is below this fraction of
#: its magnitude: LAPACK's eig returns real pairs with rounding-level imaginary parts (≈1e-15 of
#: |λ| for these symmetric matrices), a genuine complex pair is far above it. [-]
EIGEN_REAL_TOL = 1e-9
#: A resonance is seen at a port when its residue there exceeds this fraction of the largest one:
#: an eigenvector with no component at the port has a residue at rounding level. [-]
RESIDUE_SEEN_TOL = 1e-9


def series_branch(y, capacitance_f, frequency_hz) -> np.ndarray:
    r"""Series branch of port admittance matrices with the shunt capacitance removed. [Ω]

    .. math:: Z_s = (Y - j\omega C)^{-1}

    Parameters
    ----------
    y : array_like, shape (..., k, k)
        Short-circuit admittance matrices. [S]
    capacitance_f : array_like, shape (k, k)
        Shunt capacitance matrix of the fitted model. [F]
    frequency_hz : float or array_like, shape (...)
        Frequency of each matrix. [Hz]
    """
    w = 2 * np.pi * np.asarray(frequency_hz, dtype=float)
    return np.linalg.inv(np.asarray(y) - 1j * w[..., None, None] * np.asarray(capacitance_f))


@dataclass(frozen=True)
class LoopModel:
    """Fitted lumped model of a k-port loop.

    Attributes
    ----------
    inductance_h : ndarray, shape (k, k)
        Low-frequency inductance matrix L0 (open-circuit, other ports open). [H]
    capacitance_f : ndarray, shape (k, k)
        Shunt capacitance matrix C. [F]
    loss_coefficients : ndarray, shape (2, k, k)
        R_s = a·g(f) + b·(f/f_ref)⁴; a multiplies the skin-effect ratio g, b the radiation law. [Ω]
    reference_hz : float
        f_ref of the radiation term. [Hz]
    fit_hz : ndarray
        Frequencies the model was fitted on. [Hz]
    fit_residual : float
        Largest relative residual of ω·Im Y over the fit points (diagonal elements). [-]
    extrapolation_spread : float
        Largest relative change of the diagonal of L0 when an ω⁴ term is added to the fit
        (0 with fewer than four fit points): how much the fit's form matters. [-]
    """

    inductance_h: np.ndarray
    capacitance_f: np.ndarray
    loss_coefficients: np.ndarray
    reference_hz: float
    wire_radius_m: float
    resistivity_ohm_m: float | None
    fit_hz: np.ndarray
    fit_residual: float
    extrapolation_spread: float

    @property
    def ports(self) -> int:
        return self.inductance_h.shape[0]

    def scaled(self, scale) -> "LoopModel":
        """The model with every port impedance scaled: Z_ij → s_i s_j Z_ij.

        L0 and the series loss scale as D·X·D, the shunt capacitance as D⁻¹·C·D⁻¹ (D = diag(s)),
        so the self-resonances and the Q stay as fitted.
        """
        d = np.asarray(scale, dtype=float)
        outer = np.outer(d, d)
        return dataclasses.replace(self, inductance_h=self.inductance_h * outer,
                                   capacitance_f=self.capacitance_f / outer,
                                   loss_coefficients=self.loss_coefficients * outer)

    def series_resistance(self, frequency_hz) -> np.ndarray:
        """R_s(f), shape (n, k, k). [Ω]"""
        f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
        g = _skin_shape(f, self.wire_radius_m, self.resistivity_ohm_m)
        rad = (f / self.reference_hz) ** 4
        a, b = self.loss_coefficients
        return g[:, None, None] * a + rad[:, None, None] * b

    def z(self, frequency_hz, lossless: bool = False, extra_series_ohm=None) -> np.ndarray:
        """Open-circuit impedance matrix, shape (n, k, k). [Ω]

        ``extra_series_ohm`` (shape (n, k, k)) adds series loss the MoM does not model, such as
        the proximity effect (:func:`simloop.losses.proximity_resistance`).
        """
        f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
        w = 2 * np.pi * f
        zs = 1j * w[:, None, None] * self.inductance_h
        if not lossless:
            zs = zs + self.series_resistance(f)
        if extra_series_ohm is not None:
            zs = zs + np.asarray(extra_series_ohm)
        y = np.linalg.inv(zs) + 1j * w[:, None, None] * self.capacitance_f
        return np.linalg.inv(y)

    def self_resonance_hz(self, port: int, f_max_hz: float) -> float | None:
        """First parallel resonance seen at ``port`` with the others open (pole of Z_ii). [Hz]

        The lossless model Z(ω) = −jω (ω²C − L0⁻¹)⁻¹ has its poles at the generalised eigenvalues
        ω² of L0⁻¹ v = ω² C v; port i sees those whose eigenvector has a component at i. None if
        no such resonance lies below ``f_max_hz``.
        """
        gamma = np.linalg.inv(self.inductance_h)
        lam, vec = eig(gamma, self.capacitance_f)
        with np.errstate(invalid="ignore", divide="ignore"):
            real = np.isfinite(lam) & (np.abs(lam.imag) <= EIGEN_REAL_TOL * np.abs(lam)) & (lam.real > 0)
        if not np.any(real):
            return None
        lam, vec = lam.real[real], vec.real[:, real]
        # residue of [(ω²C − Γ)⁻¹]_ii at ω² = λ_m is v_i² / (vᵀ C v)
        norm = np.einsum("im,ij,jm->m", vec, self.capacitance_f, vec)
        residue = vec[port] ** 2 / norm
        seen = residue > RESIDUE_SEEN_TOL * np.abs(residue).max()
        if not np.any(seen):
            return None
        f = float(np.sqrt(lam[seen].min()) / (2 * np.pi))
        return f if f <= f_max_hz else None


def _skin_shape(frequency_hz, radius_m, resistivity_ohm_m):
    if resistivity_ohm_m is None:
        return np.zeros_like(np.asarray(frequency_hz, dtype=float))
    return reference.ac_resistance_ratio_round_wire(radius_m, np.asarray(frequency_hz, dtype=float),
                                                    resistivity_ohm_m)


def fit_loop_model(frequency_hz, y, wire_radius_m: float, resistivity_ohm_m: float | None) -> LoopModel:
    """Fit :class:`LoopModel` to short-circuit admittance matrices.

    Parameters
    ----------
    frequency_hz : array_like, shape (n,)
        Fit frequencies, n ≥ 2, all below about 0.6 × the lowest self-resonance. [Hz]
    y : array_like, shape (n, k, k)
        Reciprocal admittance matrices from the MoM. [S]
    wire_radius_m : float
    resistivity_ohm_m : float or None
        None for a lossless wire (then all resistance is radiation).
    """
    f = np.asarray(frequency_hz, dtype=float)
    y = np.asarray(y, dtype=complex)
    if f.size < 2:
        raise ValueError("the loop model needs at least two fit frequencies")
    w = 2 * np.pi * f
    k = y.shape[1]
    lhs = (w[:, None, None] * y.imag).reshape(f.size, -1)  # ω Im Y, one column per element
    scale = w.max() ** 2
    basis2 = np.column_stack([np.ones_like(w), (w**2) / scale])
    coef2, *_ = np.linalg.lstsq(basis2, lhs, rcond=None)
    gamma = -coef2[0].reshape(k, k)
    cap = (coef2[1] / scale).reshape(k, k)
    gamma = 0.5 * (gamma + gamma.T)
    cap = 0.5 * (cap + cap.T)
    l0 = np.linalg.inv(gamma)
    fitted = basis2 @ coef2
    diag = np.ravel_multi_index((np.arange(k), np.arange(k)), (k, k))
    residual = float(np.max(np.abs(fitted[:, diag] - lhs[:, diag]) / np.abs(lhs[:, diag])))
    spread = 0.0
    if f.size >= 4:
        basis3 = np.column_stack([basis2, (w**4) / scale**2])
        coef3, *_ = np.linalg.lstsq(basis3, lhs, rcond=None)
        l0_alt = np.linalg.inv(-0.5 * (coef3[0].reshape(k, k) + coef3[0].reshape(k, k).T))
        spread = float(np.max(np.abs(np.diag(l0_alt) - np.diag(l0)) / np.diag(l0)))

    # Series resistance with the shunt capacitance removed, fitted to its two frequency laws.
    zs = series_branch(y, cap, f)
    rs = zs.real.reshape(f.size, -1)
    f_ref = float(f.max())
    columns = [(f / f_ref) ** 4]
    if resistivity_ohm_m is not None:
        columns.insert(0, _skin_shape(f, wire_radius_m, resistivity_ohm_m))
    basis_r = np.column_stack(columns)
    coef_r, *_ = np.linalg.lstsq(basis_r, rs, rcond=None)
    if resistivity_ohm_m is None:
        coef_r = np.vstack([np.zeros_like(coef_r[0]), coef_r[0]])
    loss = coef_r.reshape(2, k, k)
    loss = 0.5 * (loss + loss.transpose(0, 2, 1))
    return LoopModel(
        inductance_h=l0,
        capacitance_f=cap,
        loss_coefficients=loss,
        reference_hz=f_ref,
        wire_radius_m=float(wire_radius_m),
        resistivity_ohm_m=resistivity_ohm_m,
        fit_hz=f,
        fit_residual=residual,
        extrapolation_spread=spread,
    )
