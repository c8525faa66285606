r"""Directional response: the loop, the radio's rod, their nulls and what limits the nulls' depth.

Directions follow the spec's convention: azimuth φ from +x (in the loop plane) towards +y (the
loop axis), elevation e up from the horizon. NEC's polar angle is θ = 90° − e, its azimuth is φ.
An arriving plane wave comes *from* the unit vector

.. math:: \hat r = (\cos e\cos\varphi,\ \cos e\sin\varphi,\ \sin e)

and propagates along −r̂. Its electric field is E = a_v θ̂ + a_h φ̂ (1 V/m): "vertical"
polarisation is a_v = 1 (the field lies in the vertical plane through r̂; at the horizon it is
vertical), "horizontal" is a_h = 1. The magnetic field is H = ê × r̂ / η0.

**Receive response by reciprocity.** The open-circuit voltage of port j (other ports open) is
V_j = h_j(r̂) · E (Balanis 2016, eq. 2-93), where the vector effective length h_j follows from the
transmit far field of a unit current at port j, r·E = −jkη0 h_j/(4π) (Balanis 2016, eq. 2-92).
The MoM gives the far field E_m of 1 V at port m with the other ports shorted; a unit current at
port j with the others open is the port voltages V = Z e_j, so E_open,j = Σ_m Z_mj E_m
(superposition; Z = Y_raw⁻¹). One factorisation per frequency serves the whole pattern.

**The dipole model.** A path small against the wavelength with magnetic moment m [A·m²] and
electric moment p [C·m] per unit port current has h = jω(p_⊥ + m × r̂/c), so

.. math:: V = j\omega\,\big(\mathbf p\cdot\hat e + \mathbf m\cdot(\hat r\times\hat e)/c\big)

(the magnetic part is Faraday's law, V = −jωμ0 m·H; the electric part is the short dipole's
V = l·E with jωp = ∫I dl). The loop's m lies along its axis y; the asymmetry of leads and tuner
adds p (the "antenna effect"). At zero elevation, vertical polarisation, with m = m ŷ and p = p ẑ:
V ∝ cos φ − cp/m, so an electric term of relative size e = c|p|/|m| in quadrature fills the axis
null to

.. math:: 20\log_{10}\big(e/\sqrt{1+e^2}\big)\ \text{dB}

(−26.0 / −20.0 / −14.2 dB for e = 0.05 / 0.1 / 0.2), and in phase moves the nulls to 90° ± asin e
without filling them (derived here; :func:`null_filling_depth_db`).

**Elevation and polarisation of the axis null** (derived here; :func:`small_loop_response`). For
a loop whose axis is horizontal (m = ŷ), r̂ × θ̂ = φ̂ and r̂ × φ̂ = −θ̂ give

.. math:: V(\varphi, e) \propto a_v\cos\varphi - a_h\sin e\,\sin\varphi .

* Vertical polarisation: |cos φ| at every elevation — the magnetic field of a vertically
  polarised wave is horizontal and perpendicular to the arrival azimuth, so the axis null stays
  exact at any elevation.
* Horizontal polarisation: sin e |sin φ| — zero at the horizon, and at elevation e the *axis* is
  the maximum, sin e of the vertical-polarisation maximum; the nulls are broadside (φ = 0°, 180°).
* A linear mix in phase (a_h/a_v = t real): the null stays complete but moves off the axis by
  atan(t sin e).
* A mix in quadrature (a_h = ±j t a_v, e.g. the elliptical polarisation of a sky wave after the
  ionosphere): no complete null; the axis null is filled to 20 log10(t sin e) relative to the
  maximum (t sin e < 1). Circular polarisation (t = 1): −15.2 dB at 10°, −6.0 dB at 30°.

This is why a night-time sky-wave station does not null like the same station's ground wave.

**The rod** of a portable radio is a small magnetic dipole along its axis â: its open-circuit
voltage is −jωμ0 μ_rod N A_rod H·â (Faraday's law); the pattern needs only H·â, so
:func:`rod_response` returns that; the pattern study uses the rod model of :mod:`simloop.receiver`
at the spec's position and axis (:func:`rod_pickup`: the same physics with the rod's permeability,
its linkage profile and the wave's phase along it; tested to agree).

**The system** (the radio beside the loop, :func:`system_response`). The loop's tap closed by its
tuning capacitor and the rod coil closed by the radio's form the 2-port of :mod:`simloop.coupling`;
with both capacitors fixed the radio's capacitor voltage is linear in the two open-circuit
voltages, V = t_loop V1 + t_rod V2 (:func:`two_port_transfer`), V1 the loop's by reciprocity (above)
and V2 the rod's own pickup (:func:`rod_pickup`, :mod:`simloop.receiver`). The radio is peaked once,
with the loop facing the station (its largest response), and left there while the loop or the
radio is turned. At exact tune t_rod/t_loop = −(R1)/(jωM): the loop's contribution jωM V1 is in
quadrature with the rod's own R1 V2 (V1 and V2 are both jω times a flux of the same field;
Terman 1943, sec. 3, and :mod:`simloop.coupling`). For a vertically polarised wave, the loop's axis
along y and a horizontal rod turned β from it (axis (sin β, cos β, 0)), the two contributions are
L cos φ and R cos(φ + β), and with ρ = |R/L|

.. math:: |V_{sys}|^2 \propto \cos^2\varphi + \rho^2\cos^2(\varphi+\beta)
          \quad(\text{quadrature}),

a quadratic form in (cos φ, sin φ) whose smaller eigenvalue is the null (derived here;
:func:`system_null_law`, which also takes any phase ψ of R/L):

* β = 0 (rod parallel to the loop axis): both nulls coincide; the system null stays complete and
  on the loop's null.
* Otherwise the null is filled to √(λ_min/λ_max), λ = ½(T ± √(T² − 4D)), T = 1 + ρ², D = ρ² sin²β,
  ≈ 20 log10(ρ |sin β|) for small ρ, and moves from the loop's null by δ,
  tan 2δ = −ρ² sin 2β/(1 + ρ² cos 2β) (≈ −½ρ² sin 2β: the shift is second order, the filling
  first order in ρ). In phase (ψ = 0, a radio detuned far off) the null stays complete but moves.
* On the loop's axis the loop's field at the rod lies along the axis, so M = M0 cos β and
  ρ = ρ0/|cos β|: turning the radio fills the null as ρ0 tan β and moves it by ≈ −ρ0² tan β rad;
  at β = 90° the rod is decoupled and the system is the rod alone.

The loop's own antenna effect (its electric term e, in quadrature with its magnetic term) and
the rod's contribution are then in phase with each other at the null: they add on one side of
the loop and subtract on the other, so the two system nulls differ in depth by about
20 log10((ρ sin β + e)/(ρ sin β − e)).

References
----------
.. [0] F. E. Terman, *Radio Engineers' Handbook*, McGraw-Hill, 1943, sec. 3 (coupled circuits).
.. [1] C. A. Balanis, *Antenna Theory: Analysis and Design*, 4th ed., Wiley, 2016, sec. 2.11
   (vector effective length, eqs. 2-92, 2-93), ch. 5 (small loops: directivity 1.5).
.. [2] J. D. Jackson, *Classical Electrodynamics*, 3rd ed., Wiley, 1999, sec. 9.2–9.3 (electric
   and magnetic dipole fields).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from scipy.interpolate import CubicSpline
from scipy.optimize import minimize_scalar

from simloop.mesh import C0

MU0 = 4e-7 * np.pi  #: vacuum permeability [H/m]
ETA0 = MU0 * C0  #: free-space wave impedance [Ω]

#: A local minimum is reported as a null when it lies at least this far below the response's
#: maximum (a figure-eight loop's nulls are 20–40 dB deep; 6 dB keeps shallow ripples out).
NULL_MIN_DEPTH_DB = 6.0
#: Depths below this are an exact zero of the model (double precision on |V|² ends near −300 dB;
#: the golden-section refinement to 1e-6° ends near −120 dB on a figure-eight).
DEPTH_FLOOR_DB = -120.0


# ------------------------------------------------------------------------------------------------
# Directions and polarisation
# ------------------------------------------------------------------------------------------------

def arrival_frame(azimuth_deg, elevation_deg):
    """Unit vectors r̂ (towards the source), θ̂ and φ̂ (NEC's spherical frame) of an arrival.

    Parameters
    ----------
    azimuth_deg, elevation_deg : array_like
        Azimuth from +x towards +y and elevation above the horizon, broadcast together. [deg]

    Returns
    -------
    r_hat, theta_hat, phi_hat : ndarray, shape (..., 3)
    """
    phi = np.radians(np.asarray(azimuth_deg, dtype=float))
    el = np.radians(np.asarray(elevation_deg, dtype=float))
    phi, el = np.broadcast_arrays(phi, el)
    ce, se, cp, sp = np.cos(el), np.sin(el), np.cos(phi), np.sin(phi)
    r_hat = np.stack([ce * cp, ce * sp, se], axis=-1)
    theta_hat = np.stack([se * cp, se * sp, -ce], axis=-1)  # θ = 90° − e
    phi_hat = np.stack([-sp, cp, np.zeros_like(sp)], axis=-1)
    return r_hat, theta_hat, phi_hat


def polarization_components(polarization) -> tuple[complex, complex]:
    """(a_v, a_h) of a unit incident field E = a_v θ̂ + a_h φ̂.

    ``"vertical"`` → (1, 0), ``"horizontal"`` → (0, 1), or a pair (a_v, a_h) of complex
    amplitudes (normalised here), e.g. (1, 1j) for circular polarisation.
    """
    if isinstance(polarization, str):
        if polarization == "vertical":
            return 1.0 + 0j, 0j
        if polarization == "horizontal":
            return 0j, 1.0 + 0j
        raise ValueError(f"polarization {polarization!r}: use 'vertical', 'horizontal' or (a_v, a_h)")
    a_v, a_h = (complex(a) for a in polarization)
    norm = np.hypot(abs(a_v), abs(a_h))
    if not norm > 0:
        raise ValueError("polarization (0, 0) has no field")
    return a_v / norm, a_h / norm


def incident_field(azimuth_deg, elevation_deg, polarization="vertical") -> np.ndarray:
    """Unit electric field vector ê of the arriving wave, shape (..., 3), complex. [V/m]"""
    _, th, ph = arrival_frame(azimuth_deg, elevation_deg)
    a_v, a_h = polarization_components(polarization)
    return a_v * th + a_h * ph


# ------------------------------------------------------------------------------------------------
# Responses
# ------------------------------------------------------------------------------------------------

def dipole_response(m, p, frequency_hz: float, azimuth_deg, elevation_deg, polarization="vertical"):
    r"""Open-circuit voltage of paths with magnetic and electric dipole moments, per V/m.

    .. math:: V = j\omega\,\big(\mathbf p\cdot\hat e + \mathbf m\cdot(\hat r\times\hat e)/c\big)

    Parameters
    ----------
    m : array_like, shape (k, 3), complex
        Magnetic dipole moment per unit port current (e.g. the circuit solver's
        ``dipole_moments()``). [A·m² per A]
    p : array_like, shape (k, 3), complex
        Electric dipole moment per unit port current. [C·m per A]
    frequency_hz : float
        [Hz]
    azimuth_deg, elevation_deg : array_like
        Arrival directions, broadcast together to shape S. [deg]
    polarization : str or (complex, complex)
        See :func:`polarization_components`.

    Returns
    -------
    ndarray, shape (k, *S), complex
        Open-circuit voltage of each port for a 1 V/m wave (phase referred to the origin). [m]

    References
    ----------
    .. [1] Jackson 1999, eqs. 9.19 and 9.36; Balanis 2016, eq. 2-93.
    """
    m = np.atleast_2d(np.asarray(m, dtype=complex))
    p = np.atleast_2d(np.asarray(p, dtype=complex))
    r_hat, _, _ = arrival_frame(azimuth_deg, elevation_deg)
    e_hat = incident_field(azimuth_deg, elevation_deg, polarization)
    w = 2 * np.pi * float(frequency_hz)
    r_x_e = np.cross(r_hat, e_hat)
    return 1j * w * (np.einsum("kc,...c->k...", p, e_hat) + np.einsum("kc,...c->k...", m, r_x_e) / C0)


def small_loop_response(azimuth_deg, elevation_deg, polarization="vertical"):
    r"""Closed-form response of a small loop with its axis along y, relative to broadside.

    .. math:: V(\varphi, e) = a_v\cos\varphi - a_h\sin e\,\sin\varphi

    (derived in the module notes). Returns complex values, shape of the broadcast inputs. [-]
    """
    phi = np.radians(np.asarray(azimuth_deg, dtype=float))
    el = np.radians(np.asarray(elevation_deg, dtype=float))
    a_v, a_h = polarization_components(polarization)
    return a_v * np.cos(phi) - a_h * np.sin(el) * np.sin(phi)


def axis_null_depth_db(elevation_deg, ratio: float = 1.0, quadrature: bool = True):
    r"""Depth of a small vertical loop's axis null for a wave with both polarisations. [dB]

    With E = a_v θ̂ + a_h φ̂, |a_h/a_v| = t: in quadrature the axis null is filled to
    20 log10(t sin e) below the maximum (while t sin e < 1; above it the axis is the maximum and
    0 dB is returned); in phase the null is complete (−inf) and moves by :func:`axis_null_shift_deg`.
    """
    s = ratio * np.sin(np.radians(np.asarray(elevation_deg, dtype=float)))
    if not quadrature:
        return np.full_like(s, -np.inf)
    with np.errstate(divide="ignore"):
        return np.where(s < 1, 20 * np.log10(s), 0.0)


def axis_null_shift_deg(elevation_deg, ratio: float = 1.0):
    """Azimuth shift of the axis null for an in-phase mix a_h/a_v = t: atan(t sin e). [deg]

    The null moves from 90° to 90° − atan(t sin e) (the sign follows a_v cos φ − a_h sin e sin φ).
    """
    return np.degrees(np.arctan(ratio * np.sin(np.radians(np.asarray(elevation_deg, dtype=float)))))


def null_filling_depth_db(e):
    r"""Depth of a figure-eight null filled by an electric-dipole term in quadrature. [dB]

    .. math:: 20\log_{10}\big(e/\sqrt{1+e^2}\big)

    ``e`` is the electric term's amplitude relative to the magnetic maximum (c|p_⊥|/|m|).
    Derived in the module notes: |cos φ + j e|² runs from 1 + e² to e².
    """
    e = np.asarray(e, dtype=float)
    with np.errstate(divide="ignore"):
        return 20 * np.log10(e / np.sqrt(1 + e * e))


def rod_response(axis, azimuth_deg, elevation_deg, polarization="vertical"):
    r"""H·â of the arriving wave for a rod along ``axis``: the small-magnetic-dipole rod. [A/m per V/m]

    The rod's open-circuit voltage is −jωμ0 μ_rod N A_rod H·â (Faraday's law), so its relative
    pattern is |H·â|/max; for a horizontal rod and a vertically polarised wave at the horizon it is
    |sin| of the angle between the arrival direction and the rod. H = ê × r̂/η0.
    """
    a = np.asarray(axis, dtype=float)
    a = a / np.linalg.norm(a)
    r_hat, _, _ = arrival_frame(azimuth_deg, elevation_deg)
    h = np.cross(incident_field(azimuth_deg, elevation_deg, polarization), r_hat) / ETA0
    return h @ a


# ------------------------------------------------------------------------------------------------
# The MoM far field as a receive response
# ------------------------------------------------------------------------------------------------

class PortFarField:
    """Open-circuit receive response of every port from the MoM's port-excitation far fields.

    Parameters
    ----------
    far_field : object with ``frequency_hz``, ``y_raw`` (k, k), ``theta_deg`` (nθ,),
        ``phi_deg`` (nφ, uniform over [0°, 360°)), ``e_theta_v``, ``e_phi_v`` (k, nφ, nθ):
        r·E of 1 V at each port with the others shorted (:class:`simloop.solve.FarFieldSolution`).

    Between grid points the complex field is interpolated by cubic splines (periodic in φ); the
    field of a small loop is a low-order trigonometric function of the angles, so on a 2° grid
    the interpolation error is far below any null depth this tool reports (tested).
    """

    def __init__(self, far_field):
        self.frequency_hz = float(far_field.frequency_hz)
        z = np.linalg.inv(np.asarray(far_field.y_raw))
        self.z_ohm = z
        self.theta_deg = np.asarray(far_field.theta_deg, dtype=float)
        self.phi_deg = np.asarray(far_field.phi_deg, dtype=float)
        # Unit current at port j, others open: port voltages Z e_j (superposition).
        self.e_theta_v = np.einsum("mj,m...->j...", z, np.asarray(far_field.e_theta_v))
        self.e_phi_v = np.einsum("mj,m...->j...", z, np.asarray(far_field.e_phi_v))
        k = 2 * np.pi * self.frequency_hz / C0
        self._scale = 4j * np.pi / (k * ETA0)  # h = r·E · 4πj/(kη0) per unit current
        both = np.stack([self.e_theta_v, self.e_phi_v])
        self._theta_spline = CubicSpline(self.theta_deg, both, axis=-1) if self.theta_deg.size >= 4 else None
        self._exact = {round(float(t), 9): both[..., i] for i, t in enumerate(self.theta_deg)}
        self._rows: dict[float, CubicSpline] = {}

    @property
    def ports(self) -> int:
        return self.e_theta_v.shape[0]

    def _row(self, theta_deg: float) -> CubicSpline:
        key = round(float(theta_deg), 9)
        if key not in self._rows:
            if key in self._exact:
                row = self._exact[key]  # (2, k, nφ)
            elif self._theta_spline is not None:
                row = self._theta_spline(key)
            else:
                raise ValueError(f"θ = {key}° is not among the far-field rows {sorted(self._exact)}")
            phi = np.append(self.phi_deg, self.phi_deg[0] + 360.0)
            row = np.concatenate([row, row[..., :1]], axis=-1)
            self._rows[key] = CubicSpline(phi, row, axis=-1, bc_type="periodic")
        return self._rows[key]

    def effective_length(self, azimuth_deg, elevation_deg):
        """(h_θ, h_φ) of every port (others open), each shape (k, n) for 1-D directions. [m]"""
        az, el = np.broadcast_arrays(np.atleast_1d(np.asarray(azimuth_deg, dtype=float)),
                                     np.atleast_1d(np.asarray(elevation_deg, dtype=float)))
        out = np.zeros((2, self.ports, az.size), dtype=complex)
        th = 90.0 - el
        if np.any(th < self.theta_deg.min() - 1e-9) or np.any(th > self.theta_deg.max() + 1e-9):
            raise ValueError("an elevation outside the far-field grid was asked for")
        th = np.round(th, 9)
        for t in np.unique(th):
            sel = th == t
            out[:, :, sel] = self._row(t)(np.mod(az[sel] - self.phi_deg[0], 360.0) + self.phi_deg[0])
        return self._scale * out[0], self._scale * out[1]

    def voltage(self, azimuth_deg, elevation_deg, polarization="vertical"):
        """Open-circuit voltage of every port (others open) for a 1 V/m wave, shape (k, n). [m]"""
        h_t, h_p = self.effective_length(azimuth_deg, elevation_deg)
        a_v, a_h = polarization_components(polarization)
        return a_v * h_t + a_h * h_p

    def fit_dipole_moments(self):
        """Magnetic and electric dipole moments per unit port current that best fit the far field.

        Least squares over the full-sphere grid with the solid-angle weights (the dipole terms
        are orthogonal to the higher multipoles there, so this is the projection on them).

        Returns
        -------
        m : ndarray, shape (k, 3), complex  [A·m² per A]
        p : ndarray, shape (k, 3), complex  [C·m per A]
        residual : ndarray, shape (k,)
            Relative rms of the part of the field beyond the two dipoles. [-]
        """
        from simloop.reference import sphere_weights

        w_sr = sphere_weights(self.theta_deg, self.phi_deg)  # (nφ, nθ)
        az, el = np.meshgrid(self.phi_deg, 90.0 - self.theta_deg, indexing="ij")
        r, th, ph = arrival_frame(az, el)
        r, th, ph = (v.reshape(-1, 3) for v in (r, th, ph))
        sw = np.sqrt(w_sr).reshape(-1)
        omega = 2 * np.pi * self.frequency_hz
        # h_θ = jω(p·θ̂ + m·φ̂/c), h_φ = jω(p·φ̂ − m·θ̂/c); unknowns x = (p, m/c)
        a = 1j * omega * np.block([[th, ph], [ph, -th]]) * np.concatenate([sw, sw])[:, None]
        m_out = np.zeros((self.ports, 3), dtype=complex)
        p_out = np.zeros((self.ports, 3), dtype=complex)
        resid = np.zeros(self.ports)
        for j in range(self.ports):
            b = self._scale * np.concatenate([self.e_theta_v[j].reshape(-1), self.e_phi_v[j].reshape(-1)])
            b = b * np.concatenate([sw, sw])
            x, *_ = np.linalg.lstsq(a, b, rcond=None)
            p_out[j], m_out[j] = x[:3], x[3:] * C0
            resid[j] = np.linalg.norm(a @ x - b) / np.linalg.norm(b)
        return m_out, p_out, resid


class DipoleField:
    """The receive response of paths given by their dipole moments, with the interface of
    :class:`PortFarField` (``frequency_hz``, ``ports``, ``voltage``).

    Below NEC's breakdown floor the circuit solver's ``CircuitModel.solve(f).dipole_moments()``
    (m, p per unit port current, other ports open) gives the loop's response here: pass the
    result to :func:`pattern_from_far_field` with ``moments=field.moments`` and
    ``model="circuit"``.

    Parameters
    ----------
    m : array_like, shape (k, 3), complex  [A·m² per A]
    p : array_like, shape (k, 3), complex  [C·m per A]
    frequency_hz : float  [Hz]
    """

    def __init__(self, m, p, frequency_hz: float):
        self.m = np.atleast_2d(np.asarray(m, dtype=complex))
        self.p = np.atleast_2d(np.asarray(p, dtype=complex))
        self.frequency_hz = float(frequency_hz)

    @property
    def ports(self) -> int:
        return self.m.shape[0]

    @property
    def moments(self):
        """(m, p, residual): the split of :func:`null_cause` (nothing lies beyond the dipoles)."""
        return self.m, self.p, np.zeros(self.ports)

    def voltage(self, azimuth_deg, elevation_deg, polarization="vertical"):
        """Open-circuit voltage of every port for a 1 V/m wave, shape (k, n). [m]"""
        az = np.atleast_1d(np.asarray(azimuth_deg, dtype=float))
        return dipole_response(self.m, self.p, self.frequency_hz, az, elevation_deg, polarization)


def directivity(e_theta_v, e_phi_v, theta_deg, phi_deg) -> float:
    r"""Directivity from a full-sphere pattern: 4π max|E|² / ∮|E|² dΩ. [-]"""
    from simloop.reference import sphere_weights

    w = sphere_weights(theta_deg, phi_deg)
    u = np.abs(e_theta_v) ** 2 + np.abs(e_phi_v) ** 2
    return float(4 * np.pi * u.max() / np.sum(w * u))


# ------------------------------------------------------------------------------------------------
# Null finder
# ------------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class Null:
    """One null of one response.

    Attributes
    ----------
    azimuth_deg, elevation_deg : float  [deg]
    depth_db : float
        Response at the null relative to that response's maximum. [dB]
    of : str
        Which response: ``"loop"``, ``"receiver"`` or ``"system"``.
    cause : str
        What limits the depth (a short code, worded by the report layer).
    detail : dict
        Numbers behind the cause (e.g. ``{"e": 0.03, "law_db": -30.5}``).
    """

    azimuth_deg: float
    elevation_deg: float
    depth_db: float
    of: str
    cause: str
    detail: dict = field(default_factory=dict)


def find_minima(magnitude: Callable[[np.ndarray], np.ndarray], azimuth_deg, reference: float,
                min_depth_db: float = NULL_MIN_DEPTH_DB) -> list[tuple[float, float]]:
    """Local minima of a periodic response: coarse grid, then golden-section refinement.

    Parameters
    ----------
    magnitude : callable
        |response| at an array of azimuths [deg] (one elevation).
    azimuth_deg : ndarray
        Uniform grid over [0°, 360°). [deg]
    reference : float
        The response's maximum (depths are relative to it).
    min_depth_db : float
        Minima shallower than this below the reference are not nulls. [dB]

    Returns
    -------
    list of (azimuth_deg, depth_db)
        Depth floored at :data:`DEPTH_FLOOR_DB`.
    """
    az = np.asarray(azimuth_deg, dtype=float)
    step = float(az[1] - az[0])
    v = np.asarray(magnitude(az), dtype=float)
    is_min = (v <= np.roll(v, 1)) & (v < np.roll(v, -1))
    out = []
    for i in np.flatnonzero(is_min):
        res = minimize_scalar(lambda x: float(magnitude(np.array([x]))[0]) ** 2, method="bounded",
                              bounds=(az[i] - step, az[i] + step), options={"xatol": 1e-6})
        x, val = (float(res.x), float(np.sqrt(max(res.fun, 0.0)))) if res.success else (az[i], v[i])
        val = min(val, v[i])
        x = x if val < v[i] else float(az[i])
        depth = 20 * np.log10(val / reference) if val > 0 else DEPTH_FLOOR_DB
        depth = max(depth, DEPTH_FLOOR_DB)
        if depth <= -min_depth_db:
            out.append((float(np.mod(x, 360.0)), float(depth)))
    return out


# ------------------------------------------------------------------------------------------------
# What limits a null: remove one term of the loop's multipole split and see how deep it gets
# ------------------------------------------------------------------------------------------------

#: A term "limits" a null when removing it deepens the null by at least this much. [dB]
CAUSE_MARGIN_DB = 6.0
#: Half-width and step of the fine azimuth scan used to attribute a null's cause. [deg]
CAUSE_SCAN_DEG, CAUSE_STEP_DEG = 5.0, 0.005


def null_cause(total, magnetic, electric, azimuth_deg: float, reference: float):
    """Why a loop null is as deep as it is, from the split V = V_m + V_p + V_rest.

    Parameters
    ----------
    total, magnetic, electric : callable
        Complex response at an array of azimuths [deg]: the whole response, its magnetic-dipole
        part and its electric-dipole part (the rest is what lies beyond the two dipoles).
    azimuth_deg : float
        The refined null. [deg]
    reference : float
        The response's maximum magnitude.

    Returns
    -------
    (cause, detail)
        cause ``"electric-dipole"`` (the antenna effect fills it), ``"beyond-dipole"`` (finite
        size and lead geometry: higher multipoles), or ``"combined"``; detail holds ``e`` (the
        electric term at the null over the magnetic maximum), ``law_db`` (the filling law for that
        e), ``without_electric_db`` and ``without_rest_db`` (null depth with that term removed).
    """
    x = azimuth_deg + np.arange(-CAUSE_SCAN_DEG, CAUSE_SCAN_DEG + CAUSE_STEP_DEG / 2, CAUSE_STEP_DEG)
    v, vm, vp = total(x), magnetic(x), electric(x)
    rest = v - vm - vp

    def depth(values):
        low = float(np.min(np.abs(values)))
        return max(20 * np.log10(low / reference), DEPTH_FLOOR_DB) if low > 0 else DEPTH_FLOOR_DB

    d_all, d_no_p, d_no_rest = depth(v), depth(vm + rest), depth(vm + vp)
    ring = np.mod(np.arange(0.0, 360.0, 1.0), 360.0)
    m_max = float(np.max(np.abs(magnetic(ring))))
    e = float(np.abs(electric(np.array([azimuth_deg])))[0] / m_max) if m_max > 0 else float("inf")
    detail = {"e": e, "law_db": float(null_filling_depth_db(e)) if np.isfinite(e) else 0.0,
              "without_electric_db": d_no_p, "without_rest_db": d_no_rest}
    gains = {"electric-dipole": d_all - d_no_p, "beyond-dipole": d_all - d_no_rest}
    best = max(gains, key=gains.get)
    return (best if gains[best] >= CAUSE_MARGIN_DB else "combined"), detail


# ------------------------------------------------------------------------------------------------
# The system: the loop and the radio's rod as one 2-port (simloop.coupling)
# ------------------------------------------------------------------------------------------------

#: :class:`PortFarField` and :class:`DipoleField` give Balanis's V = h·E, the EMF in the sense of
#: the port current; :mod:`simloop.coupling` works with the passive-convention open-circuit
#: voltage (V = Z I + V_oc), its negative (measured −1.0002 on the single-turn mesh against
#: :func:`simloop.coupling.loop_open_circuit_voltage`; tested).
PASSIVE_SIGN = -1.0


def rod_pickup(rod, position_m, axis, frequency_hz: float) -> Callable:
    """The rod's own open-circuit voltage for any arrival, from :mod:`simloop.receiver`.

    Returns ``at(azimuth_deg, elevation_deg, polarization)`` → complex array (n,) [V per V/m],
    passive sign convention, phase referred to the origin: :func:`simloop.receiver.
    rod_open_circuit_voltage` of the rod at ``position_m`` along ``axis`` for the wave arriving
    from r̂ (travelling along −r̂), by linearity a_v V(θ̂) + a_h V(φ̂).
    """
    from simloop.receiver import rod_open_circuit_voltage

    pos = np.asarray(position_m, dtype=float)
    ax = np.asarray(axis, dtype=float)

    def at(azimuth_deg, elevation_deg, polarization="vertical"):
        az = np.atleast_1d(np.asarray(azimuth_deg, dtype=float))
        r, th, ph = (np.broadcast_to(v, az.shape + (3,)) for v in arrival_frame(az, elevation_deg))
        a_v, a_h = polarization_components(polarization)
        out = np.zeros(az.size, dtype=complex)
        for i in range(az.size):
            for a, e in ((a_v, th[i]), (a_h, ph[i])):
                if a != 0:
                    out[i] += a * rod_open_circuit_voltage(rod, pos, ax, -r[i], e, frequency_hz)
        return out

    at.model_name = "receiver"
    return at


def two_port_transfer(z11, z22, z12, zt1, zt2) -> tuple[complex, complex]:
    r"""The radio's capacitor voltage as a linear map of the two open-circuit voltages.

    Closing the 2-port (V = Z I + V_oc, passive convention) with Z_T1, Z_T2 gives
    (Z + Z_T) I = −V_oc, so with a11 = Z11 + Z_T1, a22 = Z22 + Z_T2, Δ = a11 a22 − Z12²

    .. math:: V_{radio} = I_2 Z_{T2} = \frac{Z_{T2}}{\Delta}\,(Z_{12}V_1 - a_{11}V_2)
              = t_{loop}V_1 + t_{rod}V_2

    (:func:`simloop.coupling.radio_voltage` is its magnitude). Returns (t_loop, t_rod). [-]
    """
    a11, a22 = z11 + zt1, z22 + zt2
    det = a11 * a22 - z12 * z12
    return complex(z12 * zt2 / det), complex(-a11 * zt2 / det)


def system_null_law(ratio, rod_angle_deg, phase_deg=90.0, loop_null_deg=90.0):
    r"""Null of the system at the horizon (vertical polarisation): azimuth and depth. [deg], [dB]

    With the loop's axis along y and a horizontal rod turned β from it (axis (sin β, cos β, 0)),
    a vertically polarised wave from azimuth φ has H ∝ (sin φ, −cos φ, 0), so the loop's
    contribution is L cos φ and the rod's own R cos(φ + β); with ρ e^{jψ} = R/L

    .. math:: |V_{sys}|^2 \propto |\cos\varphi + \rho e^{j\psi}\cos(\varphi+\beta)|^2 = x^T M x,
              \quad x = (\cos\varphi, \sin\varphi),

    M = aaᵀ + bbᵀ + cos ψ (abᵀ + baᵀ), a = (1, 0), b = ρ(cos β, −sin β). The null lies along M's
    smaller eigenvector and its depth is √(λ_min/λ_max) (derived here; for ψ = ±90°, exact tune,
    in closed form: tan 2δ = −ρ² sin 2β/(1 + ρ² cos 2β) from the loop's null at 90°, and
    λ = ½(T ± √(T² − 4D)), T = 1 + ρ², D = ρ² sin²β).

    Parameters
    ----------
    ratio : float
        ρ, the rod's own contribution over the loop's at their maxima. [-]
    rod_angle_deg : float
        β, the rod's horizontal direction from the loop axis towards +x. [deg]
    phase_deg : float
        ψ, the phase of the rod's contribution against the loop's (90° at exact tune). [deg]
    loop_null_deg : float
        φ_L, the loop's own null (90° for an ideal loop; a real winding's steps tilt it by a
        fraction of a degree): the loop's contribution is then L cos(φ − φ_L + 90°),
        a = (sin φ_L, −cos φ_L), and L its value at φ_L − 90°. [deg]

    Returns
    -------
    (azimuth_deg, depth_db)
        One of the two nulls (the other lies 180° away), azimuth in [0°, 180°). Depth −inf when
        the null is complete (ψ = 0° or 180°, or β = 0°).
    """
    b = np.radians(float(rod_angle_deg))
    phi_l = np.radians(float(loop_null_deg))
    a_vec = np.array([np.sin(phi_l), -np.cos(phi_l)])
    b_vec = float(ratio) * np.array([np.cos(b), -np.sin(b)])
    c = np.cos(np.radians(float(phase_deg)))
    m = np.outer(a_vec, a_vec) + np.outer(b_vec, b_vec) + c * (np.outer(a_vec, b_vec) + np.outer(b_vec, a_vec))
    lam, vec = np.linalg.eigh(m)
    az = np.degrees(np.arctan2(vec[1, 0], vec[0, 0])) % 180.0
    with np.errstate(divide="ignore"):
        depth = 10 * np.log10(max(lam[0], 0.0) / lam[1]) if lam[1] > 0 else 0.0
    return float(az), float(depth)


@dataclass(frozen=True)
class SystemModel:
    """The loop–rod 2-port closed by both tuning capacitors at one frequency.

    V_radio = ``t_loop`` V1 + ``t_rod`` V2 for the passive-convention open-circuit voltages of the
    loop's tap (V1) and of the rod coil (V2). Capacitances in [F], M in [H], position in [m].
    """

    frequency_hz: float
    tap: int
    t_loop: complex
    t_rod: complex
    mutual_inductance_h: float
    loop_capacitance_f: float
    radio_capacitance_f: float
    radio_capacitance_exact_f: float
    rod_position_m: tuple
    rod_axis: tuple
    rod_assumed: bool

    @property
    def rod_angle_deg(self) -> float:
        """β: the rod's horizontal direction from the loop axis (+y) towards +x. [deg]"""
        return float(np.degrees(np.arctan2(self.rod_axis[0], self.rod_axis[1])))


def system_model(ctx, frequency_hz: float, tap: int, zii: complex, loop_c_f: float, q_cap: float, v_loop_max: complex,
                 v_rod_there: complex, repeak_radio: bool = True) -> SystemModel:
    """The 2-port of :mod:`simloop.coupling` for the pattern (tuned loop, radio peaked once).

    The loop's tap ``tap`` is closed by ``loop_c_f`` (with Q ``q_cap``); the radio is re-peaked for
    the arrival where the loop's response is largest (``v_loop_max``, ``v_rod_there``: the two
    open-circuit voltages of that arrival) — the user peaks the radio with the loop facing the
    station, then turns the loop — and its capacitor is kept for every other arrival, so the
    system's response is linear in (V1, V2). ``repeak_radio=False`` keeps the radio at exact tune
    of its own coil (the coupled-circuit law's assumption; Terman 1943, sec. 3).

    ``ctx`` is a :class:`simloop.coupling._Context` (the loop's currents, the rod and where it sits).
    """
    from simloop.coupling import repeak

    f = float(frequency_hz)
    w = 2 * np.pi * f
    # M at this frequency from the loop's own currents (the circuit solver's, exact, when the sweep
    # has one; else the quasi-static path scaled by the winding current per port current)
    m_h = float(np.real(ctx.m_v1(f, tap, ctx.position[None], ctx.axis[None])[0][0]))
    z22 = complex(ctx.rod.series_resistance_ohm(f) + 1j * w * ctx.rod.inductance_h)
    zt1 = 1 / (1j * w * loop_c_f) + 1 / (w * loop_c_f * q_cap)
    c2_exact = float(ctx.rod.tuning_capacitance_f(f))

    def radio(c2):
        t1, t2 = two_port_transfer(zii, z22, 1j * w * m_h, zt1, 1 / (1j * w * c2))
        return abs(t1 * v_loop_max + t2 * v_rod_there)

    c2 = c2_exact
    if repeak_radio:
        c2, _ = repeak(np.vectorize(radio), np.array(c2_exact))
        c2 = float(c2)
    t1, t2 = two_port_transfer(zii, z22, 1j * w * m_h, zt1, 1 / (1j * w * c2))
    return SystemModel(f, tap, t1, t2, m_h, float(loop_c_f), c2, c2_exact,
                       tuple(float(v) for v in ctx.position), tuple(float(v) for v in _unit3(ctx.axis)),
                       bool(ctx.assumed))


def _unit3(v) -> np.ndarray:
    v = np.asarray(v, dtype=float)
    return v / np.linalg.norm(v)


# ------------------------------------------------------------------------------------------------
# The pattern study
# ------------------------------------------------------------------------------------------------

#: Azimuth step of the coarse grid the nulls are refined from, and of the output. [deg]
AZIMUTH_STEP_DEG = 1.0


@dataclass(frozen=True)
class PatternResult:
    """Receive patterns at one frequency, each response relative to its own maximum.

    Attributes
    ----------
    frequency_hz : float  [Hz]
    azimuth_deg : ndarray, shape (n,)  [deg]
    elevation_deg : ndarray, shape (e,)  [deg]
    polarization : str
    response_db : dict of str → ndarray, shape (e, n)
        ``"loop"`` (voltage across the tuned capacitor), ``"receiver"`` (the rod's own pickup
        alone) and ``"system"`` (the radio's capacitor voltage with the loop beside it,
        :func:`system_response`), each in dB relative to its maximum over the whole grid.
    nulls : tuple of Null
    models : dict of str → str
        Where each response came from: ``"mom"`` (NEC, above its breakdown floor),
        ``"mom-below-floor"`` (NEC below its floor: currents and null depths suspect),
        ``"circuit"`` (the circuit solver's dipole moments, below NEC's floor), ``"dipole"`` (a
        rod as a small magnetic dipole), ``"receiver"`` (the rod model of
        :mod:`simloop.receiver`), ``"two-port"`` (the system) or a replacement model's name.
    tap_turns : int
        The tap the tuner is connected to.
    capacitance_f : float
        Tuning capacitance at the frequency. [F]
    loop_volts_per_v_m : float
        Largest voltage across the tuned capacitor for a 1 V/m wave. [V per V/m]
    magnetic_moment, electric_moment : ndarray, shape (3,), complex
        The loop's dipole moments per unit port current, fitted to the MoM far field or the
        circuit solver's (free space only; NaN otherwise). [A·m², C·m]
    multipole_residual : float
        Relative rms of the far field beyond the two dipoles. [-]
    floor_hz : float
        NEC's breakdown floor of this mesh. [Hz]
    notes : tuple of str
    system : SystemModel or None
        The loop–rod 2-port behind ``response_db["system"]`` (None without a coupling context).
    """

    frequency_hz: float
    azimuth_deg: np.ndarray
    elevation_deg: np.ndarray
    polarization: str
    response_db: dict
    nulls: tuple
    models: dict
    tap_turns: int
    capacitance_f: float
    loop_volts_per_v_m: float
    magnetic_moment: np.ndarray
    electric_moment: np.ndarray
    multipole_residual: float
    floor_hz: float
    notes: tuple = ()
    system: "SystemModel | None" = None


def tuned_tap(sweep, tuner, frequency_hz: float) -> tuple[int, float, complex]:
    """The tap that tunes ``frequency_hz`` inside the tuner's range (most turns first).

    Returns (tap index, tuning capacitance [F], Z_ii [Ω] from the sweep's model with proximity
    loss). When no tap reaches, the one whose capacitance lies nearest the range is returned.
    """
    from simloop.tuning import tuning_capacitance

    k = len(sweep.tap_turns)
    z = sweep.model_z(np.array([frequency_hz]), proximity=True)[0]
    zii = np.array([z[i, i] for i in range(k)])
    c = tuning_capacitance(zii, frequency_hz)
    inside = (c >= tuner.min_f) & (c <= tuner.max_f)
    if np.any(inside):
        i = int(np.flatnonzero(inside)[-1])
    else:
        miss = np.where(c > 0, np.maximum(tuner.min_f / c, c / tuner.max_f), np.inf)
        i = int(np.argmin(miss))
    return i, float(c[i]), complex(zii[i])


def capacitor_divider(z_port_ohm: complex, capacitance_f: float, q: float, frequency_hz: float) -> complex:
    """Voltage across a capacitor (with Q) across a source of impedance Z, per volt of EMF. [-]"""
    w = 2 * np.pi * frequency_hz
    z_c = 1.0 / (w * capacitance_f * (1j + 1.0 / q))
    return z_c / (z_port_ohm + z_c)


def _db(values: np.ndarray, reference: float) -> np.ndarray:
    with np.errstate(divide="ignore"):
        return np.maximum(20 * np.log10(np.abs(values) / reference), DEPTH_FLOOR_DB)


@dataclass(frozen=True)
class _Response:
    """One response's complex values (e, n), its evaluator and what splits its nulls' causes."""

    name: str
    values: np.ndarray
    at: Callable  # (azimuth array, elevation) -> complex array
    model: str
    cause: Callable | None = None  # (azimuth, elevation, reference) -> (cause, detail)


def _loop_response(pff, tap: int, factor: complex, m, p, polarization):
    """The loop's response at (azimuth array, elevation), and its magnetic and electric parts."""
    f = pff.frequency_hz

    def at(az, el):
        return factor * pff.voltage(az, el, polarization)[tap]

    def magnetic(az, el):
        return factor * dipole_response(m[tap:tap + 1], np.zeros((1, 3)), f, az, el, polarization)[0]

    def electric(az, el):
        return factor * dipole_response(np.zeros((1, 3)), p[tap:tap + 1], f, az, el, polarization)[0]

    return at, (magnetic, electric)


def _loop_cause(at, parts):
    if parts is None:
        return None
    magnetic, electric = parts

    def cause(az, el, reference):
        return null_cause(lambda x: at(x, el), lambda x: magnetic(x, el), lambda x: electric(x, el), az, reference)

    return cause


def _nulls_of(resp: _Response, azimuth_deg, elevation_deg, reference: float) -> list[Null]:
    out = []
    for el in elevation_deg:
        def mag(az, el=el):
            return np.abs(resp.at(np.asarray(az, dtype=float), el))

        for az, depth in find_minima(mag, azimuth_deg, reference):
            if depth <= DEPTH_FLOOR_DB or resp.cause is None:
                cause, detail = ("exact" if depth <= DEPTH_FLOOR_DB else "not-split"), {}
            else:
                cause, detail = resp.cause(az, float(el), reference)
            out.append(Null(az, float(el), depth, resp.name, cause, detail))
    return out


def _min_near(fn, azimuth_deg: float, half_deg: float = 45.0, step_deg: float = 0.25):
    """(azimuth, |fn|) of the smallest |fn| within ±half_deg of an azimuth (grid, then refined)."""
    x = azimuth_deg + np.arange(-half_deg, half_deg + step_deg / 2, step_deg)
    v = np.abs(fn(x))
    i = int(np.argmin(v))
    res = minimize_scalar(lambda t: float(np.abs(fn(np.array([t]))[0])) ** 2, method="bounded",
                          bounds=(x[i] - step_deg, x[i] + step_deg), options={"xatol": 1e-6})
    if res.success and np.sqrt(max(res.fun, 0.0)) < v[i]:
        return float(res.x), float(np.sqrt(max(res.fun, 0.0)))
    return float(x[i]), float(v[i])


def _rel_db(value: float, reference: float) -> float:
    return max(20 * np.log10(value / reference), DEPTH_FLOOR_DB) if value > 0 else DEPTH_FLOOR_DB


def _wrap180(deg: float) -> float:
    return float((deg + 180.0) % 360.0 - 180.0)


def system_null_cause(loop_part, rod_part, azimuth_deg: float, reference: float, rod_angle_deg=None):
    """Why a system null is as deep as it is, and where it moved, from V = V_loop + V_rod.

    Parameters
    ----------
    loop_part, rod_part : callable
        The loop's contribution (t_loop V1) and the rod's own (t_rod V2) at an array of azimuths.
    azimuth_deg : float
        The refined system null. [deg]
    reference : float
        The system's maximum magnitude.
    rod_angle_deg : float, optional
        β of :func:`system_null_law`; when given (vertical polarisation, a rod not vertical) the
        law's null and depth are added for this ρ and ψ.

    Returns
    -------
    (cause, detail)
        Where the loop's contribution is the larger (ρ < 1, the usual case): ``"rod-pickup"`` (the
        rod's own pickup fills or moves the loop's null by :data:`CAUSE_MARGIN_DB` or more) or
        ``"loop-null"`` (as deep as the loop's own null through the coupling: its antenna effect
        limits it). Where the rod's is: ``"loop-pickup"`` (the loop's pickup fills the rod's null)
        or ``"rod-null"``. detail: ``without_rod_db``, ``without_loop_db``, ``shift_deg`` (from the
        dominant part's own null), ``rod_over_loop`` (ρ), and, with ``rod_angle_deg``,
        ``phase_deg`` (ψ), ``law_azimuth_deg``, ``law_depth_db``.
    """
    x = np.array([azimuth_deg])
    total = float(np.abs(loop_part(x) + rod_part(x))[0])
    ring = np.arange(0.0, 360.0, 2.0)
    loop_max, rod_max = float(np.max(np.abs(loop_part(ring)))), float(np.max(np.abs(rod_part(ring))))
    # The dominant part's null nearest the system null (a dipole's nulls lie 180° apart).
    az_nr, v_nr = _min_near(loop_part, azimuth_deg, half_deg=89.0)
    az_nl, v_nl = _min_near(rod_part, azimuth_deg, half_deg=89.0)
    d_all, d_no_rod, d_no_loop = (_rel_db(v, reference) for v in (total, v_nr, v_nl))
    loop_rules = loop_max >= rod_max
    detail = {"without_rod_db": d_no_rod, "without_loop_db": d_no_loop,
              "shift_deg": _wrap180(azimuth_deg - (az_nr if loop_rules else az_nl)),
              "rod_over_loop": rod_max / loop_max if loop_max > 0 else float("inf")}
    if rod_angle_deg is not None:
        phi_l = az_nr % 180.0   # L cos(φ − φ_L + 90°) is L at φ_L − 90° (the law's convention)
        big_l = complex(loop_part(np.array([phi_l - 90.0]))[0])
        # the rod's contribution R cos(φ + β) with R taken at the null itself (the wave's phase
        # across the rod's distance from the loop then drops out), at its maximum when β ≈ 0
        c_null = np.cos(np.radians(azimuth_deg + float(rod_angle_deg)))
        big_r = (complex(rod_part(x)[0]) / c_null if abs(c_null) > 0.1
                 else complex(rod_part(np.array([-float(rod_angle_deg)]))[0]))
        rho, psi = abs(big_r / big_l), float(np.degrees(np.angle(big_r / big_l)))
        law_az, law_db = system_null_law(rho, rod_angle_deg, psi, loop_null_deg=phi_l)
        law_az += 180.0 * round((azimuth_deg - law_az) / 180.0)
        detail.update(rod_over_loop=rho, phase_deg=psi, rod_angle_deg=float(rod_angle_deg),
                      law_azimuth_deg=float(law_az % 360.0), law_depth_db=max(law_db, DEPTH_FLOOR_DB))
    if loop_rules:
        cause = "rod-pickup" if d_all - d_no_rod >= CAUSE_MARGIN_DB else "loop-null"
    else:
        cause = "loop-pickup" if d_all - d_no_loop >= CAUSE_MARGIN_DB else "rod-null"
    return cause, detail


def _receiver_response(receiver, context, rod_voltage, f, az, els, polarization):
    """The rod alone: the receiver model at the context's placement, or the ideal dipole."""
    if context is not None:
        rod = rod_voltage or rod_pickup(context.rod, context.position, context.axis, f)
    elif receiver is not None:
        rod = rod_voltage or (lambda a, e, pol: rod_response(receiver.axis, a, e, pol))
    else:
        return None, None
    model = getattr(rod, "model_name", "dipole" if rod_voltage is None and context is None else "receiver")

    def rod_fn(a, e):
        return rod(a, e, polarization)

    return rod, _Response("receiver", np.array([rod_fn(az, e) for e in els]), rod_fn, model)


def system_response(pff, tap: int, zii: complex, capacitance_f: float, q_cap: float, context, rod,
                    azimuth_deg, elevation_deg, polarization="vertical", repeak_radio: bool = True):
    """The system's response: the radio's capacitor voltage with the loop beside it, per arrival.

    V = t_loop V1 + t_rod V2 (:class:`SystemModel`), V1 the loop tap's open-circuit voltage by
    reciprocity (``pff``, turned to the passive convention with :data:`PASSIVE_SIGN`), V2 the
    rod's own (``rod(az, el, polarization)``, e.g. :func:`rod_pickup`).

    Returns
    -------
    (SystemModel, _Response)
    """
    f = pff.frequency_hz
    az, els = np.asarray(azimuth_deg, dtype=float), np.asarray(elevation_deg, dtype=float)

    def v1(a, e):
        return PASSIVE_SIGN * pff.voltage(a, e, polarization)[tap]

    loop_vals = np.array([v1(az, e) for e in els])
    i_e, i_a = np.unravel_index(np.argmax(np.abs(loop_vals)), loop_vals.shape)
    v2_there = rod(az[i_a:i_a + 1], els[i_e], polarization)[0]
    model = system_model(context, f, tap, zii, capacitance_f, q_cap, loop_vals[i_e, i_a], v2_there, repeak_radio)

    def loop_part(a, e):
        return model.t_loop * v1(a, e)

    def rod_part(a, e):
        return model.t_rod * rod(a, e, polarization)

    def at(a, e):
        return loop_part(a, e) + rod_part(a, e)

    axis = np.asarray(model.rod_axis)
    law_beta = model.rod_angle_deg if (polarization == "vertical" and np.hypot(axis[0], axis[1]) > 1e-6) else None

    def cause(a, e, reference):
        return system_null_cause(lambda x: loop_part(x, e), lambda x: rod_part(x, e), a, reference, law_beta)

    return model, _Response("system", np.array([at(az, e) for e in els]), at, "two-port", cause)


def pattern_from_far_field(pff: PortFarField, sweep, tuner, *, moments=None, elevation_deg=(0.0,),
                           polarization="vertical", receiver=None, rod_voltage=None, floor_hz: float = 0.0,
                           azimuth_step_deg: float = AZIMUTH_STEP_DEG, notes=(),
                           model: str | None = None, context=None, repeak_radio: bool = True) -> PatternResult:
    """Loop, rod and system patterns, with their nulls, from a solved far field.

    Parameters
    ----------
    pff : PortFarField or DipoleField
        Port-excitation far fields at the pattern frequency, with rows at the elevations.
    moments : (m, p, residual), optional
        The loop's dipole moments (:meth:`PortFarField.fit_dipole_moments`, free space); they
        split each loop null into its causes. None (over ground): causes are not split.
    sweep : simloop.impedance.SweepResult
        Its model gives the tap impedance for the tuned-capacitor voltage.
    tuner : simloop.tuner.RangeTuner or PlateTuner
    elevation_deg : sequence of float  [deg]
    polarization : str or (complex, complex)
    receiver : simloop.spec.ReceiverSpec, optional
        Without ``context``: the rod as an ideal dipole along its axis (no system response).
    rod_voltage : callable, optional
        ``rod_voltage(azimuth_deg, elevation_deg, polarization)`` → complex open-circuit voltage
        of the rod (passive convention); default :func:`rod_pickup` of the context's rod.
    floor_hz : float
        NEC's breakdown floor of the mesh: below it the loop pattern is flagged. [Hz]
    azimuth_step_deg : float
        Coarse grid step. [deg]
    notes : sequence of str
        Note codes to carry into the result.
    model : str, optional
        Where the loop response came from (default ``"mom"``, or ``"mom-below-floor"`` below
        ``floor_hz``); ``"circuit"`` for a :class:`DipoleField` of the circuit solver.
    context : simloop.coupling._Context, optional
        The loop's currents, the rod and its placement: adds the rod's own pickup
        (:mod:`simloop.receiver`) and the system response (:func:`system_response`).
    repeak_radio : bool
        Peak the radio once with the loop (True) or keep it at exact tune of its coil.
    """
    f = pff.frequency_hz
    tap, cap, zii = tuned_tap(sweep, tuner, f)
    factor = capacitor_divider(zii, cap, tuner.q, f)
    az = np.arange(0.0, 360.0, azimuth_step_deg)
    els = np.asarray(elevation_deg, dtype=float)
    loop_model = model or ("mom" if f >= floor_hz else "mom-below-floor")
    if moments is not None:
        m, p, resid = moments
        at, parts = _loop_response(pff, tap, factor, m, p, polarization)
    else:
        nan = np.full((pff.ports, 3), np.nan + 0j)
        m, p, resid = nan, nan, np.full(pff.ports, np.nan)
        at, parts = _loop_response(pff, tap, factor, m, p, polarization)[0], None
    responses = [_Response("loop", np.array([at(az, e) for e in els]), at, loop_model, _loop_cause(at, parts))]
    rod, rod_resp = _receiver_response(receiver, context, rod_voltage, f, az, els, polarization)
    system = None
    if rod_resp is not None:
        responses.append(rod_resp)
    if context is not None:
        system, sys_resp = system_response(pff, tap, zii, cap, tuner.q, context, rod, az, els, polarization,
                                           repeak_radio)
        responses.append(sys_resp)
    response_db, nulls = {}, []
    for r in responses:
        ref = float(np.max(np.abs(r.values)))
        response_db[r.name] = _db(r.values, ref)
        nulls += _nulls_of(r, az, els, ref)
    notes = list(notes) + _pattern_notes(f, floor_hz, els, polarization, model)
    if system is not None and system.rod_assumed:
        notes.append("receiver-assumed")
    return PatternResult(
        frequency_hz=f, azimuth_deg=az, elevation_deg=els,
        polarization=polarization if isinstance(polarization, str) else str(polarization),
        response_db=response_db, nulls=tuple(nulls), models={r.name: r.model for r in responses},
        tap_turns=int(sweep.tap_turns[tap]), capacitance_f=cap,
        loop_volts_per_v_m=float(np.max(np.abs(responses[0].values))),
        magnetic_moment=m[tap], electric_moment=p[tap], multipole_residual=float(resid[tap]),
        floor_hz=float(floor_hz), notes=tuple(notes), system=system)


def _pattern_notes(f: float, floor_hz: float, els, polarization, model) -> list[str]:
    notes = []
    if f < floor_hz and model is None:
        notes.append(f"below-floor:{floor_hz:.6g}")
    if polarization == "horizontal" and np.any(els == 0.0):
        notes.append("horizontal-at-horizon")
    return notes


def radiated_power_w(e_theta_v, e_phi_v, theta_deg, phi_deg) -> float:
    r"""Power radiated by r·E on a θ–φ grid over the sphere (θ 0–180°) or the upper half space
    (θ 0–90°, over a ground), P = ∮ (|rE_θ|² + |rE_φ|²)/(2η0) dΩ. [W]

    Composite Simpson in θ with the sin θ of the solid angle, uniform in φ (the sphere case is
    :func:`simloop.reference.sphere_weights`).
    """
    th = np.radians(np.asarray(theta_deg, dtype=float))
    n = th.size - 1
    if n < 2 or n % 2 or abs(th[0]) > 1e-9 or not (abs(th[-1] - np.pi) < 1e-9 or abs(th[-1] - np.pi / 2) < 1e-9):
        raise ValueError("θ must run uniformly from 0° to 180° or 90° with an even number of intervals")
    simpson = np.ones(th.size)
    simpson[1:-1:2], simpson[2:-1:2] = 4.0, 2.0
    w = np.radians(360.0 / len(phi_deg)) * (simpson * (th[1] - th[0]) / 3 * np.sin(th))[None, :]
    return float(np.sum(w * (np.abs(e_theta_v) ** 2 + np.abs(e_phi_v) ** 2)) / (2 * ETA0))


#: Radiated over input power may exceed 1 by this much before a solve is refused: the average
#: gain test's acceptance band (common practice in NEC modelling: 0.95–1.05).
POWER_EXCESS = 0.05


def power_check(grid: PortFarField, tap: int, where: str) -> float:
    """Refuse a solve that breaks energy conservation for the tap the pattern uses.

    With a unit current into the tap (other taps open) the input power is ½ Re Z_ii and the
    radiated power the integral of the open-port far field; over a lossy ground or with lossy wire
    the ratio (radiation efficiency) lies in (0, 1]. A negative input resistance (NEC's numerical
    noise for small loops near real ground) or a ratio above 1 + :data:`POWER_EXCESS` is refused.

    Returns the ratio. Raises :class:`~simloop.errors.SolverError` with the reason.
    """
    from simloop.errors import SolverError

    r_in = float(grid.z_ohm[tap, tap].real)
    p_rad = radiated_power_w(grid.e_theta_v[tap], grid.e_phi_v[tap], grid.theta_deg, grid.phi_deg)
    if not r_in > 0:
        raise SolverError(f"{where}: the MoM input resistance of the tap is {r_in:.3g} Ω (≤ 0): the solve is "
                          "numerical noise here (small loops near real ground do this); no pattern is reported. "
                          "Raise the loop, or model free space or perfect ground")
    ratio = p_rad / (0.5 * r_in)
    if ratio > 1 + POWER_EXCESS:
        raise SolverError(f"{where}: radiated power is {ratio:.3g} × the input power (energy is not conserved): "
                          "the solve is not trusted; no pattern is reported")
    return ratio


#: Azimuth step of the MoM's far-field rows (180 azimuths per elevation). [deg]
ROW_STEP_DEG = 2.0
#: Grid step of the sphere (free space) or upper half space (ground) used for the power check
#: and the dipole fit; 90/step must be even (Simpson). [deg]
GRID_STEP_DEG = 7.5


def pattern_plan(mesh, env, frequency_hz: float, elevation_deg):
    """The solve plan of a pattern: the port excitations, their currents, one far-field row per
    elevation and a coarse sphere (or upper half space over a ground) — one factorisation."""
    from simloop.solve import FarField, PortCurrents, PortSources, SolvePlan

    thetas = sorted({round(90.0 - float(e), 9) for e in elevation_deg})
    n_phi = int(round(360.0 / ROW_STEP_DEG))
    rows = tuple(FarField(t, 0.0, 1, 0.0, ROW_STEP_DEG, n_phi, name=f"row{i}") for i, t in enumerate(thetas))
    n_theta = int(round((180.0 if env.ground == "free-space" else 90.0) / GRID_STEP_DEG)) + 1
    grid = FarField(0.0, GRID_STEP_DEG, n_theta, 0.0, GRID_STEP_DEG, int(round(360.0 / GRID_STEP_DEG)), name="grid")
    plan = SolvePlan(mesh, env, float(frequency_hz), (PortSources(),), (PortCurrents(), *rows, grid))
    return plan, rows, grid


def _rows_field(result, rows) -> PortFarField:
    from simloop.solve import FarFieldSolution

    ff = np.concatenate([result.get(0, r.name) for r in rows], axis=-1)  # (k, 2, nφ, rows)
    return PortFarField(FarFieldSolution(result.frequency_hz, result.get(0, "port_currents").T,
                                         np.array([r.theta_start_deg for r in rows]), rows[0].phi_deg,
                                         ff[:, 0], ff[:, 1], result.seconds, result.cached))


def check_pattern_inputs(spec) -> None:
    """Refuse pattern inputs that cannot give an answer, before any solve.

    Over real ground the space wave vanishes at the horizon (the reflection coefficient of either
    polarisation tends to −1 at grazing incidence) and NEC's far field carries no ground wave, so
    a pattern at 0° elevation would be the ratio of two zeros.
    """
    from simloop.errors import SpecError
    from simloop.spec import PatternSpec

    from simloop.coupling import precheck

    precheck(spec)  # a rod too close to the wire for the coupling model
    ps = spec.pattern or PatternSpec()
    if spec.ground.kind == "real" and any(float(e) <= 0.0 for e in ps.elevation_deg):
        where = "" if spec.pattern is not None else " (the default when [pattern] is absent)"
        raise SpecError("pattern.elevation", f'"0 deg"{where} over real ground: the space wave vanishes at '
                        "grazing incidence and the far field has no ground wave; give elevations of 1° or more, "
                        'e.g. elevation = ["2 deg", "30 deg"]')


def run_pattern(spec, sweep, *, workers: int | None = None, cache=None, progress=None,
                rod_voltage=None, executor=None) -> PatternResult:
    """The pattern study of a spec: one MoM factorisation at the ``[pattern]`` frequency.

    Parameters
    ----------
    spec : simloop.spec.Spec
        ``[pattern]`` (frequency, elevations, polarisation; defaults when absent), ``[tuner]``,
        ``[receiver]`` (optional: the rod), ``[ground]``.
    sweep : simloop.impedance.SweepResult
        The same spec's sweep (mesh, environment and the tap impedance model).
    workers, cache, progress, executor
        As for :func:`simloop.solve.solve_plans`; ``progress(stage, done, total)``.
    rod_voltage : callable, optional
        A receiver model's rod voltage, see :func:`pattern_from_far_field`.

    Raises
    ------
    SolverError
        When the MoM solve fails or fails the power check (:func:`power_check`).
    """
    from simloop.errors import SolverError
    from simloop.solve import far_field_solution, solve_plans
    from simloop.spec import PatternSpec
    from simloop.tuner import tuner_from_spec

    check_pattern_inputs(spec)
    ps = spec.pattern or PatternSpec()
    env = sweep.environment
    tuner = tuner_from_spec(spec.tuner)
    floor_hz = sweep.mesh.floor_frequency_hz()
    if ps.frequency_hz < floor_hz and env.ground == "free-space" and getattr(sweep, "circuit", None) is not None:
        return _circuit_pattern(spec, sweep, tuner, ps, floor_hz, rod_voltage)
    plan, rows, grid = pattern_plan(sweep.mesh, env, ps.frequency_hz, ps.elevation_deg)
    cb = (lambda d, t: progress("pattern", d, t)) if progress else None
    (res,) = solve_plans([plan], executor=executor, workers=workers, cache=cache, progress=cb)
    if isinstance(res, SolverError):
        raise res
    sphere = PortFarField(far_field_solution(res, grid))
    tap, _, _ = tuned_tap(sweep, tuner, ps.frequency_hz)
    efficiency = power_check(sphere, tap, f"{ps.frequency_hz / 1e6:.6g} MHz over {env.ground}")
    moments = sphere.fit_dipole_moments() if env.ground == "free-space" else None
    notes = [f"efficiency:{efficiency:.3g}"] + ([] if moments is not None else [f"ground:{env.ground}"])
    return pattern_from_far_field(_rows_field(res, rows), sweep, tuner, moments=moments,
                                  elevation_deg=ps.elevation_deg, polarization=ps.polarization,
                                  receiver=spec.receiver, rod_voltage=rod_voltage,
                                  floor_hz=floor_hz, notes=notes, context=couple_context(spec, sweep))


def _circuit_pattern(spec, sweep, tuner, ps, floor_hz: float, rod_voltage) -> PatternResult:
    """Below NEC's breakdown floor (free space): the loop's response from the circuit solver's
    magnetic and electric dipole moments (:class:`DipoleField`; the loop is small against the
    wavelength there, so the two dipoles are its whole far field — tested against the MoM above
    the floor)."""
    sol = sweep.circuit.solve(ps.frequency_hz)
    m, p = sol.dipole_moments()
    dip = DipoleField(m, p, ps.frequency_hz)
    return pattern_from_far_field(dip, sweep, tuner, moments=dip.moments, elevation_deg=ps.elevation_deg,
                                  polarization=ps.polarization, receiver=spec.receiver, rod_voltage=rod_voltage,
                                  floor_hz=floor_hz, notes=[f"circuit-below-floor:{floor_hz:.6g}"],
                                  model="circuit", context=couple_context(spec, sweep))


def couple_context(spec, sweep):
    """The loop's quasi-static currents, the rod and its placement as :mod:`simloop.coupling`
    sees them (the default receiver 15 cm in front of the winding when the spec has none)."""
    from simloop.coupling import DEFAULT_WAVE, _Context

    return _Context(spec, sweep, None, DEFAULT_WAVE)
