r"""The portable radio's ferrite-rod antenna: rod, coil, tuned circuit and own pickup.

The rod is a cylinder of length ``l``, radius ``a`` and initial permeability μ_i (χ = μ_i − 1).
NEC has no magnetic material, so the rod is modelled analytically here.

Magnetostatic model of the rod
------------------------------
The magnetisation is taken axial and uniform over each cross-section, ``M(z)``. The rod is cut
into ``n`` slices (finer towards the ends); slice ``j`` carries a uniform ``M_j``. In a
homogeneous ferrite the magnetic poles sit on the surface (∇·M = χ∇·H = 0 inside): each step of M
between slices is a ring of charge on the rod's side and the ends are charged discs. Averaged over
a coaxial disc of the rod's radius ``a`` at axial distance ``u·a`` (Fourier–Bessel fields,
⟨J0(kρ)⟩ = 2J1(ka)/(ka) over the disc), a disc of density σ gives

.. math:: \langle H_z\rangle = \sigma\,\mathrm{sgn}(u)\,g(|u|),\qquad
          g(u) = \int_0^\infty \frac{J_1(k)^2}{k} e^{-ku}\,dk,\qquad g(0) = \tfrac12,

and a ring carrying the step ΔM (charge πa²ΔM) gives ΔM sgn(u) ½∫J0(k)J1(k)e^(−ku)dk (¼ΔM at
u → 0, half the disc's: spreading the poles over the section, as a purely 1-D model does,
overstates the demagnetisation by about 12 % in N_f at l/d 10). Slice averages need the
integrals over u, :math:`G(u) = \int_0^\infty J_1^2 (1 - e^{-ku})/k^2\,dk` and
:math:`G_r(u) = \tfrac12\int_0^\infty J_0J_1(1 - e^{-ku})/k\,dk`, done by Gauss–Legendre
quadrature to k = 160 plus the asymptotic tail. Against a full axisymmetric surface-charge
solution (M free to vary over the section) N_f agrees within about 2 % for l/d 5–20
(``tests/test_receiver.py``). The slice equations ``M_i = χ (H_0,i + Σ_j A_ij M_j)`` are solved
for a uniform applied field (the flux profile and the fluxmetric factor N_f), for the field of the
coil itself (its inductance), and adjointly (the coil's linkage per unit field at each slice, the
weights :attr:`RodModel.weights` with which the loop's field is averaged along the rod).

Exact limits the model keeps (and the tests check): χ → 0 gives the magnetometric factor of a
uniformly magnetised cylinder, N_m = 2G(l/a)/(l/a) (Joseph 1966), and the coil's inductance on a
rod of μ = 1 is the current-sheet (Nagaoka) inductance, since a current sheet is a uniformly
magnetised cylinder. A thin disc has N = 1, a long rod N → 0.

Rod permeability (DeVore & Bohley 1977): μ_rod = μ_i / (1 + N (μ_i − 1)); with N the fluxmetric
factor at the middle of the rod, μ_rod is the apparent permeability seen by a short centre coil.

References
----------
.. [1] D.-X. Chen, J. A. Brug, R. B. Goldfarb, "Demagnetizing factors for cylinders",
       IEEE Trans. Magn. 27(4), 1991, 3601–3619.
.. [2] J. A. Osborn, "Demagnetizing factors of the general ellipsoid", Phys. Rev. 67, 1945, 351.
.. [3] E. C. Stoner, "The demagnetizing factors for ellipsoids", Phil. Mag. 36, 1945, 803.
.. [4] R. I. Joseph, "Ballistic demagnetizing factor in uniformly magnetized cylinders",
       J. Appl. Phys. 37, 1966, 4639.
.. [5] R. C. DeVore, P. Bohley, "The electrically small magnetically loaded multiturn loop
       antenna", IEEE Trans. Antennas Propag. AP-25(4), 1977, 496–505.
.. [6] H. Nagaoka, "The inductance coefficients of solenoids", J. Coll. Sci. Tokyo 27, 1909.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy import special

from simloop.constants import ETA0_OHM as ETA0  # defined once (docs/references.md §13)
from simloop.constants import MU0_H_M as MU0
from simloop.constants import SPEED_OF_LIGHT_M_S as C0
from simloop.errors import SpecError

#: Expected error of the computed rod-coil inductance when the user gives none: the spread of
#: initial permeability of MF ferrite grades (±20 %, common practice), the coil wound on a former
#: larger than the rod and the uniform-magnetisation-per-section model; see :func:`build_rod`.
INDUCTANCE_APPROX_ERROR = 0.30

#: The receiver assumed when a spec has no ``[receiver]``: a 10 × 100 mm rod of μ_i 125 with a
#: 65-turn, 20 mm centre coil, loaded Q 60 (typical of portable MW radios; common practice).
DEFAULT_RECEIVER = dict(rod_length_m=0.100, rod_diameter_m=0.010, permeability=125.0,
                        coil_turns=65, coil_length_m=0.020, loaded_q=60.0, coil_offset_m=0.0)

_K_MAX = 160.0


@lru_cache(maxsize=1)
def _k_nodes():
    """Gauss–Legendre nodes and weights on [0, K_MAX], one panel per half-period of J1²."""
    x, w = np.polynomial.legendre.leggauss(8)
    edges = np.linspace(0.0, _K_MAX, int(_K_MAX / (np.pi / 2)) + 1)
    lo, hi = edges[:-1, None], edges[1:, None]
    k = (0.5 * (hi - lo) * x + 0.5 * (hi + lo)).ravel()
    wk = (0.5 * (hi - lo) * w).ravel()
    return k, wk, special.j1(k) ** 2


def disc_field_integral_G(u) -> np.ndarray:
    r"""G(u) = ∫0^u g = ∫ J1(k)² (1 − e^(−ku))/k² dk (u in radii). [-]"""
    u = np.abs(np.asarray(u, dtype=float))
    k, wk, j2 = _k_nodes()
    flat = u.ravel()
    res = np.empty(flat.size)
    for s in range(0, flat.size, 2048):
        uu = flat[s:s + 2048, None]
        res[s:s + 2048] = (j2 / k**2 * -np.expm1(-k * uu)) @ wk
    ku = _K_MAX * flat
    tail = (0.5 - special.expn(3, ku)) / (np.pi * _K_MAX**2)   # ∫_K^∞ (1 − e^(−ku))/(πk³) dk
    return (res + tail).reshape(u.shape)


def demag_factor_prolate_spheroid(aspect) -> np.ndarray:
    r"""Demagnetising factor along the long axis of a prolate spheroid (Osborn 1945; Stoner 1945).

    .. math:: N = \frac{1}{m^2-1}\left[\frac{m}{\sqrt{m^2-1}}\ln\left(m+\sqrt{m^2-1}\right)-1\right]

    Parameters
    ----------
    aspect : array_like
        Length over diameter m > 1. [-]

    References
    ----------
    .. [1] J. A. Osborn, Phys. Rev. 67, 1945, 351. .. [2] E. C. Stoner, Phil. Mag. 36, 1945, 803.
    """
    m = np.asarray(aspect, dtype=float)
    if np.any(m <= 1):
        raise ValueError(f"aspect ratio must exceed 1, got {aspect}")
    s = np.sqrt(m * m - 1)
    return (m / s * np.log(m + s) - 1) / (m * m - 1)


def rod_permeability(initial_permeability, demag_factor) -> np.ndarray:
    """Apparent permeability μ_i/(1 + N(μ_i − 1)) (DeVore & Bohley 1977). [-]"""
    mu = np.asarray(initial_permeability, dtype=float)
    n = np.asarray(demag_factor, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.where(np.isinf(mu), 1.0 / n, mu / (1 + n * (mu - 1)))


def _faces(length_r: float, n: int) -> np.ndarray:
    """Slice faces along a rod of length ``length_r`` radii centred on 0, graded to the ends."""
    t = np.linspace(0.0, np.pi, n + 1)
    cos_faces = -0.5 * length_r * np.cos(t)
    uniform = np.linspace(-0.5 * length_r, 0.5 * length_r, n + 1)
    return 0.5 * (cos_faces + uniform)


def ring_field_integral_Gr(u) -> np.ndarray:
    r"""G_r(u) = ½ ∫ J0(k) J1(k) (1 − e^(−ku))/k dk: the integral over u of the axial field of a
    ring of charge π (on the rod's surface, radius 1) averaged over a coaxial disc of radius 1. [-]"""
    u = np.abs(np.asarray(u, dtype=float))
    k, wk, _ = _k_nodes()
    j = special.j0(k) * special.j1(k)
    flat = u.ravel()
    res = np.empty(flat.size)
    for s in range(0, flat.size, 2048):
        uu = flat[s:s + 2048, None]
        res[s:s + 2048] = (0.5 * j / k * -np.expm1(-k * uu)) @ wk
    return res.reshape(u.shape)   # the tail beyond K is oscillatory, O(1/K²)


def _interaction(faces: np.ndarray) -> np.ndarray:
    """A_ij: slice-i average of the axial field of slice j's unit magnetisation. [-]

    The poles of a homogeneous ferrite sit on its surface (∇·M = χ∇·H = 0 inside): a step of M
    between slices is a ring of charge on the side, the rod's ends are charged discs.
    """
    d = np.diff(faces)
    diff = faces[:, None] - faces[None, :]
    k_face = disc_field_integral_G(diff[:, [0, -1]])
    iu = np.triu_indices(faces.size)
    k_ring = np.empty_like(diff)
    k_ring[iu] = ring_field_integral_Gr(diff[iu])       # symmetric in |u|: half the work
    k_ring.T[iu] = k_ring[iu]
    k_ring[:, 0], k_ring[:, -1] = k_face[:, 0], k_face[:, 1]
    per_face = (k_ring[1:] - k_ring[:-1]) / d[:, None]      # (n slices, n + 1 faces)
    n = d.size
    charge = np.zeros((n + 1, n))                            # face p carries M_(p−1) − M_p
    charge[np.arange(n), np.arange(n)] = -1.0
    charge[np.arange(1, n + 1), np.arange(n)] = 1.0
    return per_face @ charge


def _sheet_field(faces: np.ndarray, z0: float, z1: float) -> np.ndarray:
    """Slice averages of the axial H of a unit current sheet (n I / length = 1) from z0 to z1 on the
    rod's radius (a uniformly magnetised cylinder: its pole discs plus M inside). [-]"""
    g = disc_field_integral_G
    lo, hi = faces[:-1], faces[1:]
    d = hi - lo
    poles = ((g(hi - z1) - g(lo - z1)) - (g(hi - z0) - g(lo - z0))) / d
    inside = np.clip(np.minimum(hi, z1) - np.maximum(lo, z0), 0, None) / d
    return poles + inside


def _overlap(faces: np.ndarray, z0: float, z1: float) -> np.ndarray:
    lo, hi = faces[:-1], faces[1:]
    return np.clip(np.minimum(hi, z1) - np.maximum(lo, z0), 0, None)


@dataclass(frozen=True)
class RodSolution:
    """Magnetisation of a cylinder rod in a uniform axial field.

    Attributes
    ----------
    faces_m : ndarray, (n + 1,)
        Slice faces along the rod, centre at 0. [m]
    flux_profile : ndarray, (n,)
        Flux in each slice over the flux at the middle. [-]
    fluxmetric_factor : float
        N_f at the middle of the rod. [-]
    magnetometric_factor : float
        N_m, the volume-averaged demagnetising field over the mean magnetisation. [-]
    """

    faces_m: np.ndarray
    flux_profile: np.ndarray
    fluxmetric_factor: float
    magnetometric_factor: float


@lru_cache(maxsize=16)
def _slices(length_r: float, slices: int):
    faces = _faces(length_r, slices)
    faces.flags.writeable = False
    inter = _interaction(faces)
    inter.flags.writeable = False
    return faces, inter


def _system(length_m, diameter_m, permeability, slices):
    a = diameter_m / 2
    faces, inter = _slices(float(length_m / a), int(slices))
    inv_chi = 0.0 if not np.isfinite(permeability) else 1.0 / (permeability - 1.0)
    return a, faces, inv_chi, np.eye(slices) * inv_chi - inter


def solve_rod(length_m: float, diameter_m: float, permeability: float, slices: int = 160) -> RodSolution:
    """Rod in a uniform axial field: flux profile and demagnetising factors (module notes).

    Parameters
    ----------
    length_m, diameter_m : float
        Rod length and diameter. [m]
    permeability : float
        Initial permeability μ_i > 1 of the ferrite (``inf`` allowed). [-]
    slices : int
        Slices along the rod (graded to the ends; 160 converge N_f to ~0.1 % for l/d ≤ 20).

    References
    ----------
    .. [1] D.-X. Chen, J. A. Brug, R. B. Goldfarb, IEEE Trans. Magn. 27(4), 1991.
    """
    if not permeability > 1:
        raise ValueError(f"permeability must exceed 1, got {permeability}")
    a, faces, inv_chi, system = _system(length_m, diameter_m, permeability, slices)
    m = np.linalg.solve(system, np.ones(slices))          # M per unit applied H
    d = np.diff(faces)
    mid = 0.5 * (faces[:-1] + faces[1:])
    m0 = float(np.interp(0.0, mid, m))
    n_f = 1.0 / m0 - inv_chi
    h_d = (np.eye(slices) * inv_chi - system) @ m
    n_m = -float(np.dot(h_d, d)) / float(np.dot(m, d))
    return RodSolution(faces_m=faces * a, flux_profile=m / m0, fluxmetric_factor=n_f,
                       magnetometric_factor=n_m)


@dataclass(frozen=True)
class RodModel:
    """A ferrite rod with its coil, ready for coupling.

    Attributes
    ----------
    length_m, diameter_m, coil_length_m, coil_offset_m : float
        Rod and coil geometry; the coil's centre sits ``coil_offset_m`` from the rod's middle. [m]
    permeability : float
        Initial permeability μ_i. [-]
    turns : int
    loaded_q : float
        Loaded Q of the radio's tuned rod circuit. [-]
    fluxmetric_factor : float
        N_f at the rod's middle. [-]
    rod_permeability : float
        μ_rod = μ_i/(1 + N_f(μ_i − 1)), the apparent permeability at the middle. [-]
    coil_permeability : float
        Effective permeability of the coil: its linked flux per turn over μ0 A H for a uniform
        axial field (μ_rod times the flux profile averaged over the coil). [-]
    inductance_h : float
        Coil inductance. [H]
    inductance_source : str
        ``"spec"`` (measured, given by the user) or ``"computed"`` (the rod model).
    inductance_error : float
        Expected relative error of ``inductance_h`` (0 for a measured value: the user's own). [-]
    sample_m : ndarray, (s,)
        Points along the rod (from its middle) where the loop's field is sampled. [m]
    weights : ndarray, (s,)
        Effective permeability carried by each sample: M = μ0 N A Σ w_s H_s/I. Sums to
        ``coil_permeability``. [-]
    flux_profile_m, flux_profile : ndarray
        Slice centres [m] and flux over the middle's flux [-] in a uniform field.
    """

    length_m: float
    diameter_m: float
    permeability: float
    turns: int
    coil_length_m: float
    coil_offset_m: float
    loaded_q: float
    fluxmetric_factor: float
    rod_permeability: float
    coil_permeability: float
    inductance_h: float
    inductance_source: str
    inductance_error: float
    sample_m: np.ndarray
    weights: np.ndarray
    flux_profile_m: np.ndarray
    flux_profile: np.ndarray

    @property
    def area_m2(self) -> float:
        """Rod cross-section. [m²]"""
        return np.pi * self.diameter_m**2 / 4

    def tuning_capacitance_f(self, frequency_hz) -> np.ndarray:
        """The radio's tuning capacitance that resonates the coil, 1/(ω² L). [F]"""
        w = 2 * np.pi * np.asarray(frequency_hz, dtype=float)
        return 1.0 / (w * w * self.inductance_h)

    def series_resistance_ohm(self, frequency_hz) -> np.ndarray:
        """Series resistance giving the loaded Q, ωL/Q_L (coil, core and the radio's loading). [Ω]"""
        return 2 * np.pi * np.asarray(frequency_hz, dtype=float) * self.inductance_h / self.loaded_q

    def effective_height_m(self, frequency_hz) -> np.ndarray:
        """Effective height 2π N A μ_coil/λ for a wave whose H lies along the rod. [m]

        References
        ----------
        .. [1] J. D. Kraus, *Antennas*, 2nd ed., McGraw-Hill, 1988, ch. 6 (loop with a core).
        """
        lam = C0 / np.asarray(frequency_hz, dtype=float)
        return 2 * np.pi * self.turns * self.area_m2 * self.coil_permeability / lam


def _coil_span(rod_len_r, coil_len_r, offset_r):
    z0, z1 = offset_r - coil_len_r / 2, offset_r + coil_len_r / 2
    return max(z0, -rod_len_r / 2), min(z1, rod_len_r / 2)


def _computed_inductance(faces, system, inv_chi, a, turns, z0, z1) -> float:
    """Coil on the rod driven by its own current: N × flux linked per ampere (module notes)."""
    c = z1 - z0
    h_app = _sheet_field(faces, z0, z1) * turns / (c * a)     # A/m per ampere, slice averages
    m = np.linalg.solve(system, h_app)
    b_over_mu0 = h_app + (np.eye(m.size) * inv_chi - system) @ m + m
    link = np.dot(_overlap(faces, z0, z1), b_over_mu0) / c     # mean over the coil
    return float(MU0 * turns * np.pi * a * a * link)


def build_rod(rod_length_m, rod_diameter_m, permeability, coil_turns, coil_length_m, loaded_q,
              coil_offset_m=0.0, coil_inductance_h=None, slices=160, samples=16) -> RodModel:
    """Rod and coil model from the receiver's dimensions (see the module notes).

    Parameters
    ----------
    rod_length_m, rod_diameter_m, coil_length_m, coil_offset_m : float
        [m]; the coil's centre sits ``coil_offset_m`` from the rod's middle.
    permeability : float
        Initial permeability of the ferrite. [-]
    coil_turns : int
    loaded_q : float
    coil_inductance_h : float, optional
        Measured coil inductance [H]; otherwise computed with the rod model, expected error
        :data:`INDUCTANCE_APPROX_ERROR` (ferrite tolerance dominates).
    slices, samples : int
        Slices of the rod model; field samples along the rod.
    """
    a = rod_diameter_m / 2
    rod_len_r = rod_length_m / a
    z0, z1 = _coil_span(rod_len_r, coil_length_m / a, coil_offset_m / a)
    if not z1 > z0:
        raise SpecError("receiver.coil_offset", f"{coil_offset_m} m puts the coil off the rod "
                        f"(half-length {rod_length_m / 2} m)")
    _, faces, inv_chi, system = _system(rod_length_m, rod_diameter_m, permeability, slices)
    sol = solve_rod(rod_length_m, rod_diameter_m, permeability, slices)
    mu_rod = float(rod_permeability(permeability, sol.fluxmetric_factor))
    # Adjoint: linkage per unit applied field at slice j, w = (1 + 1/χ) S⁻ᵀ s, s = coil overlap / c.
    s = _overlap(faces, z0, z1) / (z1 - z0)
    w_slices = (1 + inv_chi) * np.linalg.solve(system.T, s)
    mid = 0.5 * (faces[:-1] + faces[1:])
    bins = np.minimum((np.searchsorted(np.linspace(-rod_len_r / 2, rod_len_r / 2, samples + 1), mid) - 1)
                      .clip(0), samples - 1)
    weights = np.bincount(bins, w_slices, samples)
    sample = np.bincount(bins, w_slices * mid, samples) / np.where(weights != 0, weights, 1)
    if coil_inductance_h is None:
        ind = _computed_inductance(faces, system, inv_chi, a, coil_turns, z0, z1)
        src, err = "computed", INDUCTANCE_APPROX_ERROR
    else:
        ind, src, err = float(coil_inductance_h), "spec", 0.0
    return RodModel(length_m=rod_length_m, diameter_m=rod_diameter_m, permeability=permeability,
                    turns=int(coil_turns), coil_length_m=coil_length_m, coil_offset_m=coil_offset_m,
                    loaded_q=loaded_q, fluxmetric_factor=sol.fluxmetric_factor,
                    rod_permeability=mu_rod, coil_permeability=float(w_slices.sum()),
                    inductance_h=ind, inductance_source=src, inductance_error=err,
                    sample_m=sample * a, weights=weights, flux_profile_m=mid * a,
                    flux_profile=sol.flux_profile)


def rod_from_spec(receiver_spec) -> tuple[RodModel, bool]:
    """The rod model of a spec's ``[receiver]``, or of :data:`DEFAULT_RECEIVER` when None.

    Returns the model and whether it is the assumed default.
    """
    if receiver_spec is None:
        return build_rod(**DEFAULT_RECEIVER), True
    r = receiver_spec
    return build_rod(r.rod_length_m, r.rod_diameter_m, r.permeability, r.coil_turns, r.coil_length_m,
                     r.loaded_q, coil_offset_m=r.coil_offset_m,
                     coil_inductance_h=r.coil_inductance_h), False


def plane_wave_h(direction, polarization, points_m, frequency_hz, field_v_per_m=1.0):
    """Incident plane-wave H at points, phase referred to the origin. [A/m]

    Parameters
    ----------
    direction : array_like (3,)
        Unit vector the wave travels along (from the source towards the origin).
    polarization : array_like (3,)
        Direction of E (made orthogonal to ``direction`` and normalised).
    points_m : array_like (..., 3)
    """
    k_hat = np.asarray(direction, dtype=float)
    k_hat = k_hat / np.linalg.norm(k_hat)
    e = np.asarray(polarization, dtype=float)
    e = e - np.dot(e, k_hat) * k_hat
    if not np.linalg.norm(e) > 0:
        raise ValueError("polarization must not be parallel to the direction of travel")
    e = e / np.linalg.norm(e)
    k = 2 * np.pi * np.asarray(frequency_hz, dtype=float) / C0
    phase = np.exp(-1j * k * (np.asarray(points_m, dtype=float) @ k_hat))
    return field_v_per_m / ETA0 * phase[..., None] * np.cross(k_hat, e)


def rod_open_circuit_voltage(rod: RodModel, position_m, axis, direction, polarization, frequency_hz,
                             field_v_per_m=1.0) -> np.ndarray:
    r"""Open-circuit voltage of the rod coil for an incident plane wave. [V]

    .. math:: V_{oc} = j\omega\mu_0 N A \sum_s w_s\,\mathbf H_{inc}(\mathbf r_s)\cdot\hat a

    (passive sign convention: the port voltage with the coil open, the winding's positive sense
    along ``axis``; the phase is referred to the origin).

    Parameters
    ----------
    rod : RodModel
    position_m, axis : array_like, (3,) or (p, 3)
        Rod centre(s) [m] and axis direction(s) (normalised here).
    direction, polarization : array_like, (3,)
        Direction of travel of the wave and of its E field.
    frequency_hz : float
    field_v_per_m : float
        Incident E (rms or peak; the voltage follows). [V/m]

    Returns
    -------
    complex or ndarray (p,)
    """
    pos = np.asarray(position_m, dtype=float)
    ax = np.asarray(axis, dtype=float)
    ax = ax / np.linalg.norm(ax, axis=-1, keepdims=True)
    pts = pos[..., None, :] + rod.sample_m[:, None] * ax[..., None, :]
    h = plane_wave_h(direction, polarization, pts, frequency_hz, field_v_per_m)
    h_axial = np.einsum("...si,...i->...s", h, np.broadcast_to(ax, pos.shape))
    w = 2 * np.pi * float(frequency_hz)
    return 1j * w * MU0 * rod.turns * rod.area_m2 * (h_axial @ rod.weights)


def rod_effective_height_m(rod: RodModel, axis, direction, polarization, frequency_hz) -> float:
    """|V_oc| per unit incident field for a wave of given direction and polarisation (the rod's
    directional response; ``rod.effective_height_m`` times |cos| of H's angle to the rod). [m]"""
    return float(np.abs(rod_open_circuit_voltage(rod, (0.0, 0.0, 0.0), axis, direction,
                                                 polarization, frequency_hz)))
