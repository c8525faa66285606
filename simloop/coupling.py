r"""The loop and the radio's ferrite rod as one 2-port driven by an incident wave.

Port 1 is a loop tap closed by the tuning capacitor (series loss R_C = 1/(ωCQ_C)); port 2 is the
rod coil closed by the radio's tuning capacitor, the coil's series resistance ωL₂/Q_L standing for
the radio's loaded Q. With the passive sign convention each port obeys V = Z I + V_oc, with

* Z₁₁ the tap's impedance from the sweep's model, Z₂₂ = ωL₂/Q_L + jωL₂, Z₁₂ = Z₂₁ = jωM;
* M = μ0 N A Σ_s w_s **H**_s·**â** per unit port current (:func:`mutual_inductance_h`): the loop's
  field sampled along the rod and weighted with the rod's linkage profile (:mod:`simloop.receiver`);
* V_oc of the loop by reciprocity, −Σ I_s **E**_inc·**dl**_s over its segment currents per unit
  port current (= jωμ0 **H**·**S** for a small closed path), and of the rod jωμ0 N A Σ w_s **H**·**â**.

The loop's currents. When the sweep has the circuit solver (``sweep.circuit``), M and the
loop's V_oc come from its segment currents for 1 A into each port (``solve(f).port_currents``):
exact solves at the frequency of the single-frequency studies, and for the per-channel and
2-port curves exact solves at :data:`CIRCUIT_NODES` log-spaced frequencies, interpolated (a
cubic spline of M(f)·(1 − (f/f_srf)²) and V_oc(f)/f·(1 − (f/f_srf)²), which are nearly flat)
with the interpolation error measured at one held-back exact solve. They carry what the
circuit knows: the rise of the winding current above the port current near the self-resonance
and its uneven share among the turns. M and k per tap are the ω → 0 values (unit current along
the tap's path, the limit of the circuit's currents), as L0 is. Without a circuit the
quasi-static currents (unit current along the tap's path) are scaled per frequency by
1/(1 − (f/f_srf)²), the winding current per port current of the sweep's model (self-capacitance
across the port), whose Z₁₁ is used. A caller's own segment currents are used as they are.

Closing the ports with Z_T gives (Z + Z_T) I = −V_oc; the radio hears V = I₂/(jωC₂). Solving the
two equations together keeps the rod's back-reaction on the loop and the loop's detuning of the
radio.

Both-tuned gain (coupled circuits, Terman 1943, sec. 3). At exact tuning of both circuits the
loop matrix is [[R₁, jωM], [jωM, R₂]] and

.. math:: I_2 = -\frac{R_1 V_2 - j\omega M V_1}{R_1R_2 + \omega^2M^2},\qquad
          \frac{I_2}{I_2|_{M=0}} = \frac{1 - j\,\omega M V_1/(R_1V_2)}{1 + b},\quad b = k^2Q_1Q_2.

For V₁/V₂ real (both voltages are jω times a flux of the same field) the loop's part is in
quadrature with the rod's own, and with ρ² = (V₁²/R₁)/(V₂²/R₂), the ratio of the two circuits'
available powers, (ωM V₁/(R₁V₂))² = bρ², so

.. math:: G = \frac{\sqrt{1 + b\rho^2}}{1 + b}.

Weak coupling: G → √(1 + bρ²). G is largest at b* = 1 − 2/ρ² (near critical coupling
k_c = 1/√(Q₁Q₂); closer is not always better), G_max = ρ²/(2√(ρ² − 1)) ≈ ρ/2; no gain unless
ρ > √2. Over-coupled (b > 1) the response against frequency splits into two peaks near
f₀/√(1 ± k).

References
----------
.. [1] F. E. Terman, *Radio Engineers' Handbook*, McGraw-Hill, 1943, sec. 3 (coupled circuits).
.. [2] J. D. Jackson, *Classical Electrodynamics*, 3rd ed., Wiley, 1999, sec. 5.2 (Biot–Savart).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from simloop.errors import SpecError
from simloop.fields import CurrentSource, circuit_source, h_axial, quasi_static_source
from simloop.geometry import segment_distance_m
from simloop.receiver import ETA0, MU0, RodModel, plane_wave_h, rod_from_spec, rod_open_circuit_voltage

#: The incident wave assumed for boost: arriving horizontally in the loop's plane (along +x, the
#: loop's best direction), vertically polarised (a ground wave), so its H lies along the loop axis.
DEFAULT_WAVE = ((1.0, 0.0, 0.0), (0.0, 0.0, 1.0))

#: Exact circuit solves spanning the per-channel and 2-port curves (interpolated in between).
CIRCUIT_NODES = 6

#: Re-peaking grid for the radio's capacitor: C₂ = C₂,₀ (1 + x), x in ±30 %, then refined.
_PEAK_SPAN, _PEAK_POINTS = 0.30, 121


def both_tuned_gain(b, rho2) -> np.ndarray:
    """G = √(1 + bρ²)/(1 + b), the both-tuned voltage gain (module notes; Terman 1943). [-]"""
    b = np.asarray(b, dtype=float)
    return np.sqrt(1 + b * np.asarray(rho2, dtype=float)) / (1 + b)


def rod_sample_points(rod: RodModel, positions_m, axes) -> np.ndarray:
    """Field sample points along rods at ``positions_m`` (p, 3) with unit ``axes`` (p, 3): (p, s, 3)."""
    pos = np.asarray(positions_m, dtype=float).reshape(-1, 3)
    ax = _unit(axes).reshape(-1, 3)
    return pos[:, None, :] + rod.sample_m[None, :, None] * ax[:, None, :]


def _unit(v) -> np.ndarray:
    v = np.asarray(v, dtype=float)
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def mutual_inductance_h(source: CurrentSource, rod: RodModel, positions_m, axes) -> np.ndarray:
    """Loop–rod mutual inductance per tap at each rod placement, shape (k, p). [H]

    M = μ0 N A Σ_s w_s **H**_s·**â** with **H** per unit port current (reciprocity; the rod small
    against its distance from the wire, so the field is taken on the rod's axis).
    """
    pts = rod_sample_points(rod, positions_m, axes)
    p, s = pts.shape[:2]
    ax = np.broadcast_to(_unit(axes).reshape(-1, 1, 3), (p, s, 3)).reshape(-1, 3)
    h_ax = h_axial(source, pts.reshape(-1, 3), ax).reshape(-1, p, s)
    m = MU0 * rod.turns * rod.area_m2 * (h_ax @ rod.weights)
    return m.real if np.all(np.abs(m.imag) <= 1e-9 * np.abs(m).max(initial=0)) else m


def loop_open_circuit_voltage(source: CurrentSource, direction, polarization, frequency_hz,
                              field_v_per_m=1.0) -> np.ndarray:
    r"""Open-circuit voltage of each tap for an incident plane wave, shape (k,) or (n, k). [V]

    Reciprocity with the segment currents per unit port current, V_oc = −Σ_s I_s **E**(**r**_s)·
    **dl**_s (midpoint rule; the phase of **E** across a segment is ≲ 0.02 rad at MF), which for
    a small closed circuit equals jωμ0 **H**·**S** (Faraday).
    """
    k_hat = _unit(direction)
    f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
    mid = 0.5 * (source.starts_m + source.ends_m)
    dl = source.ends_m - source.starts_m
    out = []
    for fi in f:
        h = plane_wave_h(direction, polarization, mid, fi, field_v_per_m)
        e = ETA0 * np.cross(h, k_hat)                # E = η0 H × k̂ for a plane wave
        out.append(-(source.currents @ np.einsum("si,si->s", e, dl)))
    out = np.asarray(out)
    return out[0] if np.ndim(frequency_hz) == 0 else out


def radio_voltage(z11, z22, z12, zt1, zt2, v1, v2) -> np.ndarray:
    """|V| across the radio's capacitor (impedance ``zt2``) with the loop closed by ``zt1``. [V]

    Solves (Z + Z_T) I = −V_oc for the 2-port; every argument broadcasts.
    """
    a11, a22 = z11 + zt1, z22 + zt2
    det = a11 * a22 - z12 * z12
    i2 = -(a11 * v2 - z12 * v1) / det
    return np.abs(i2 * zt2)


def _golden_peak(fun, lo, hi, iters=40):
    """Maximise fun(x) elementwise on [lo, hi] (arrays) by golden-section search."""
    g = (np.sqrt(5) - 1) / 2
    a, b = np.array(lo, dtype=float), np.array(hi, dtype=float)
    c, d = b - g * (b - a), a + g * (b - a)
    fc, fd = fun(c), fun(d)
    for _ in range(iters):
        left = fc > fd
        b = np.where(left, d, b)
        a = np.where(left, a, c)
        c_new, d_new = b - g * (b - a), a + g * (b - a)
        c, d = c_new, d_new
        fc, fd = fun(c), fun(d)
    x = 0.5 * (a + b)
    return x, fun(x)


def repeak(response, c0):
    """Radio capacitor C₂ that maximises ``response(C₂)`` near ``c0`` (arrays): (C₂, peak).

    A grid of ±30 % finds the highest peak (an over-coupled pair has two), golden section refines it.
    """
    c0 = np.asarray(c0, dtype=float)
    x = np.linspace(-_PEAK_SPAN, _PEAK_SPAN, _PEAK_POINTS).reshape((-1,) + (1,) * c0.ndim)
    grid = response(c0 * (1 + x))
    j = np.argmax(grid, axis=0)
    step = 2 * _PEAK_SPAN / (_PEAK_POINTS - 1)
    xj = np.take_along_axis(np.broadcast_to(x, grid.shape), j[None], 0)[0]
    xbest, peak = _golden_peak(lambda xx: response(c0 * (1 + xx)), xj - step, xj + step)
    return c0 * (1 + xbest), peak


def boost(frequency_hz, z11, m_h, rod: RodModel, c1_f, q1_cap, v1, v2, v2_best=None):
    """Boost of the radio's signal by the loop, the radio re-peaked in both cases.

    Parameters
    ----------
    frequency_hz : array_like
        Signal frequency. [Hz]
    z11 : array_like, complex
        Loop tap impedance (other taps open). [Ω]
    m_h : array_like
        Loop–rod mutual inductance. [H]
    rod : RodModel
    c1_f, q1_cap : array_like
        Loop tuning capacitance [F] and its Q [-].
    v1, v2 : array_like, complex
        Open-circuit voltages of the loop tap and of the rod coil at this placement. [V]
    v2_best : array_like, optional
        The rod's open-circuit voltage alone at its best orientation (the reference); ``v2`` when
        not given. [V]

    Returns
    -------
    boost : ndarray
        |V_radio with loop| / |V_radio alone|. [-]
    pull_hz : ndarray
        Where the re-peaked radio's dial points (its capacitor with the coil alone) minus the
        signal frequency. [Hz]
    """
    f = np.asarray(frequency_hz, dtype=float)
    w = 2 * np.pi * f
    z22 = rod.series_resistance_ohm(f) + 1j * w * rod.inductance_h
    zt1 = 1 / (1j * w * c1_f) + 1 / (w * c1_f * q1_cap)
    z12 = 1j * w * m_h
    c2_0 = rod.tuning_capacitance_f(f)
    shape = np.broadcast(f, z11, m_h, c1_f, v1, v2).shape
    c2_0 = np.broadcast_to(c2_0, shape)
    c2, with_loop = repeak(lambda c2: radio_voltage(z11, z22, z12, zt1, 1 / (1j * w * c2), v1, v2), c2_0)
    ref = v2 if v2_best is None else v2_best
    _, alone = repeak(lambda c2: radio_voltage(z11, z22, 0.0, zt1, 1 / (1j * w * c2), 0.0, ref), c2_0)
    dial = 1 / (2 * np.pi * np.sqrt(rod.inductance_h * c2))
    return with_loop / alone, dial - f


def coupling_k(m_h, loop_inductance_h, rod: RodModel) -> np.ndarray:
    """k = M/√(L_loop L_rod). [-]"""
    return np.asarray(m_h) / np.sqrt(np.asarray(loop_inductance_h) * rod.inductance_h)




# --- The whole study of one spec -----------------------------------------------------------------


#: Orientations of the placement map: the rod's axis in the map's plane, turned from the loop axis.
MAP_ORIENTATIONS_DEG = (0.0, 45.0, 90.0)

#: A rod closer to the wire than this many rod diameters (axis to wire) is refused: the field is
#: taken on the rod's axis, which needs the rod small against its distance from the wire.
NEAR_WIRE_DIAMETERS = 2.0


@dataclass(frozen=True)
class CoupleResult:
    """Loop–radio coupling of a spec (see :func:`run_couple` for the meaning of each part).

    Arrays per tap have shape (k,), per channel (m,), per capacitor setting (c,), per distance (d,),
    maps (o, ny, nx) for the orientations in :data:`MAP_ORIENTATIONS_DEG`.
    ``mutual_inductance_h`` and ``coupling_k`` are the low-frequency values; ``current_scale`` is
    M(f)/M(ω → 0) at the spec's placement with the currents used (``currents_origin``),
    ``quasi_static_scale`` the lumped 1/(1 − (f/f_srf)²) for comparison, and
    ``interpolation_error`` the per-channel spline's largest relative error against a held-back
    exact circuit solve (NaN without a circuit).
    """

    name: str
    rod: RodModel
    receiver_assumed: bool
    position_m: np.ndarray
    axis: np.ndarray
    wave_direction: np.ndarray
    wave_polarization: np.ndarray
    tap_turns: tuple[int, ...]
    loop_inductance_h: np.ndarray
    mutual_inductance_h: np.ndarray
    coupling_k: np.ndarray
    frequencies_hz: np.ndarray
    channel_tap: np.ndarray
    boost_db: np.ndarray
    pull_hz: np.ndarray
    frequency_hz: float
    tap_index: int
    loop_capacitance_f: float
    capacitor_f: np.ndarray
    capacitor_boost_db: np.ndarray
    capacitor_width_f: float
    capacitor_width_m: float
    distance_m: np.ndarray
    distance_boost_db: np.ndarray
    optimum_spacing_m: float
    optimum_spacing_boost_db: float
    optimum_at_near_limit: bool
    map_x_m: np.ndarray
    map_y_m: np.ndarray
    map_z_m: float
    map_boost_db: np.ndarray
    map_k: np.ndarray
    best_position_m: np.ndarray
    best_axis: np.ndarray
    best_orientation_deg: float
    best_boost_db: float
    s_frequencies_hz: np.ndarray
    s_z_ohm: np.ndarray
    critical_k: float
    available_power_ratio: float
    currents_origin: str
    current_scale: float
    footprint_m: tuple[tuple[float, float], tuple[float, float]]
    notes: tuple[str, ...] = field(default=())
    quasi_static_scale: float = np.nan
    interpolation_error: float = np.nan
    imperial: bool = False


def _db(x):
    with np.errstate(divide="ignore", invalid="ignore"):
        return 20 * np.log10(x)


def near_wire(geom, rod: RodModel, positions_m, axes) -> np.ndarray:
    """True where a rod placement touches or nearly touches the wire (p,)."""
    pos = np.asarray(positions_m, dtype=float).reshape(-1, 3)
    ax = _unit(axes).reshape(-1, 3)
    a0 = pos - ax * rod.length_m / 2
    a1 = pos + ax * rod.length_m / 2
    d = segment_distance_m(a0[:, None], a1[:, None], geom.starts[None], geom.ends[None]).min(axis=1)
    limit = max(rod.diameter_m / 2 + geom.wire_radius_m, NEAR_WIRE_DIAMETERS * rod.diameter_m)
    return d < limit


class _Context:
    """What every analysis of one spec shares: the loop, its currents, the rod and the wave."""

    def __init__(self, spec, sweep, source, wave):
        self.spec, self.sweep = spec, sweep
        self.geom = sweep.geometry
        self.given = source
        self.circuit = getattr(sweep, "circuit", None) if source is None else None
        self.source = source if source is not None else quasi_static_source(self.geom)
        self._solved: dict[float, CurrentSource] = {}
        self._curves: dict = {}
        self.interpolation_error = np.nan
        self.rod, self.assumed = rod_from_spec(spec.receiver)
        from simloop.tuner import tuner_from_spec

        self.tuner = tuner_from_spec(spec.tuner)
        self.direction, self.polarization = (np.asarray(v, dtype=float) for v in wave)
        if spec.receiver is not None:
            self.position = np.asarray(spec.receiver.position_m, dtype=float)
            self.axis = np.asarray(spec.receiver.axis, dtype=float)
        else:
            front = float(self.geom.starts[:, 1].max())
            self.position = np.array([0.0, front + 0.15, self.bottom_z])
            self.axis = np.array([0.0, 1.0, 0.0])
        self.l_loop = np.asarray(sweep.inductance_h, dtype=float)

    @property
    def origin(self) -> str:
        return "circuit" if self.circuit is not None else self.source.origin

    @property
    def bottom_z(self) -> float:
        kinds = np.array(self.geom.kinds)
        return float(self.geom.starts[kinds == "winding", 2].min())

    def footprint(self):
        """(x_min, x_max), (y_min, y_max) of the winding. [m]"""
        w = np.array(self.geom.kinds) == "winding"
        pts = np.vstack([self.geom.starts[w], self.geom.ends[w]])
        return ((float(pts[:, 0].min()), float(pts[:, 0].max())),
                (float(pts[:, 1].min()), float(pts[:, 1].max())))

    def z11(self, f, tap):
        return self.sweep.model_z(np.atleast_1d(f))[:, tap, tap]

    def loop_c(self, f, tap):
        """Capacitance that series-resonates the tap alone at f. [F]"""
        return 1.0 / (2 * np.pi * np.asarray(f) * self.z11(f, tap).imag)

    def srf_factor(self, f, tap):
        """1/(1 − (f/f_srf)²) of the tap's measured self-resonance (NaN above it). [-]"""
        f = np.asarray(f, dtype=float)
        srf = float(np.asarray(self.sweep.self_resonance_hz)[tap])
        if not np.isfinite(srf):
            return np.ones_like(f)
        with np.errstate(divide="ignore"):
            return np.where(f < srf, 1.0 / (1.0 - (f / srf) ** 2), np.nan)

    def scale(self, f, tap):
        """Winding current per port current applied to the quasi-static source, 1/(1 − (f/f_srf)²).

        The sweep's model puts the tap's self-capacitance across its port, so per ampere into the
        port the winding carries 1/(1 − (f/f_srf)²) A; its Z₁₁ includes that, so the field and the
        pickup of the same currents must too. 1 for a solver's own currents; NaN above f_srf.
        ``self.source`` stays the quasi-static source when the circuit is used (for M and k at
        ω → 0), so this keeps its meaning for callers that scale ``self.source``; the circuit's
        currents (:meth:`m_v1`) need no scale.
        """
        if self.source.origin != "quasi-static":
            return np.ones_like(np.asarray(f, dtype=float))
        return self.srf_factor(f, tap)

    def source_at(self, f) -> CurrentSource:
        """The segment currents per unit port current at f (an exact circuit solve, cached)."""
        if self.circuit is None:
            return self.source
        key = float(f)
        if key not in self._solved:
            sol = self.circuit.solve(key)
            self._solved[key] = circuit_source(sol.segment_starts_m, sol.segment_ends_m, sol.port_currents)
        return self._solved[key]

    def m_v1(self, f, tap, positions, axes):
        """M at placements (p,) [H] and the loop tap's V_oc [V] at one frequency f, exact."""
        src = self.source_at(f)
        a = 1.0 if self.circuit is not None else self.scale(f, tap)
        m = mutual_inductance_h(src, self.rod, positions, axes)[tap] * a
        v1 = loop_open_circuit_voltage(src, self.direction, self.polarization, f)[tap] * a
        return m, v1

    def m_v1_curve(self, f, tap):
        """M [H] and loop V_oc [V] at the spec's placement over frequencies f (n,).

        Exact per frequency for given or quasi-static currents; for the circuit, exact solves at
        :data:`CIRCUIT_NODES` log-spaced frequencies over the band and a spline in between (module
        notes), its error measured at one held-back solve.
        """
        f = np.atleast_1d(np.asarray(f, dtype=float))
        if self.circuit is None:
            mv = [self.m_v1(fi, tap, self.position[None], self.axis[None]) for fi in f]
            return np.array([m[0] for m, _ in mv]), np.array([v for _, v in mv])
        spline = self._curve(tap)
        flat = spline(f)
        g = self.srf_factor(f, tap)
        return (flat[:, 0] + 1j * flat[:, 1]) * g, (flat[:, 2] + 1j * flat[:, 3]) * g * f

    def _curve_range(self):
        lo = float(np.min(self.sweep.frequencies_hz))
        hi = float(np.max(self.sweep.frequencies_hz))
        return 0.95 * lo, 1.05 * hi

    def _curve(self, tap):
        from scipy.interpolate import CubicSpline

        if tap in self._curves:
            return self._curves[tap]
        lo, hi = self._curve_range()
        nodes = np.geomspace(lo, hi, CIRCUIT_NODES)
        rows = [self._flat(fn, tap) for fn in nodes]
        spline = CubicSpline(nodes, np.array(rows), axis=0)
        f_check = float(np.sqrt(nodes[-2] * nodes[-1]))      # widest relative curvature: the top
        exact, approx = self._flat(f_check, tap), spline(f_check)
        err = float(max(abs(complex(*approx[:2]) / complex(*exact[:2]) - 1),
                        abs(complex(*approx[2:]) / complex(*exact[2:]) - 1)))
        self.interpolation_error = float(np.nanmax([self.interpolation_error, err]))
        self._curves[tap] = spline
        return spline

    def _flat(self, f, tap):
        """[Re, Im of M(f)/g(f), Re, Im of V_oc(f)/(f g(f))], g = 1/(1 − (f/f_srf)²)."""
        m, v1 = self.m_v1(f, tap, self.position[None], self.axis[None])
        g = float(self.srf_factor(f, tap))
        g = g if np.isfinite(g) else 1.0
        return np.array([m[0].real, m[0].imag, v1.real, v1.imag]) / np.array([g, g, g * f, g * f])

    def rod_voltages(self, f, positions, axes):
        """Rod V_oc at each placement (p,) and of the rod alone best-turned (p,)."""
        v2 = rod_open_circuit_voltage(self.rod, positions, axes, self.direction, self.polarization, f)
        h = plane_wave_h(self.direction, self.polarization, np.zeros(3), f)
        best_axis = np.real(h) / np.linalg.norm(np.real(h))
        v2b = rod_open_circuit_voltage(self.rod, positions, np.broadcast_to(best_axis, np.shape(positions)),
                                       self.direction, self.polarization, f)
        return v2, v2b

    def boost_at(self, f, tap, positions, axes, c1=None):
        """Boost [dB], pull [Hz] and M [H] at placements (p,) for tap ``tap`` at frequency f."""
        m, v1 = self.m_v1(f, tap, positions, axes)
        v2, v2b = self.rod_voltages(f, positions, axes)
        c1 = self.loop_c(f, tap)[0] if c1 is None else c1
        g, pull = boost(f, self.z11(f, tap)[0], m, self.rod, c1, self.tuner.q, v1, v2, v2b)
        return _db(g), pull, m


def _channels(ctx: _Context, tune):
    """Boost per channel, the loop re-tuned with the chart's tap and capacitance."""
    f = np.asarray(tune.frequencies_hz, dtype=float)
    taps = np.asarray(tune.channel_tap_index, dtype=int)
    out_db, pull = np.full(f.size, np.nan), np.full(f.size, np.nan)
    for t in np.unique(taps[taps >= 0]):
        sel = np.flatnonzero((taps == t) & np.isfinite(tune.capacitance_f))
        if sel.size == 0:
            continue
        m, v1 = ctx.m_v1_curve(f[sel], t)
        v2 = np.array([ctx.rod_voltages(fi, ctx.position, ctx.axis) for fi in f[sel]])
        z11 = ctx.z11(f[sel], t)
        g, p = boost(f[sel], z11, m, ctx.rod, tune.capacitance_f[sel], ctx.tuner.q, v1,
                     v2[:, 0], v2[:, 1])
        out_db[sel], pull[sel] = _db(g), p
    return f, taps, out_db, pull


def _q_loop(ctx: _Context, f, tap) -> float:
    z = ctx.z11(f, tap)[0]
    c = ctx.loop_c(f, tap)[0]
    return float(z.imag / (z.real + 1 / (2 * np.pi * f * c * ctx.tuner.q)))


def _capacitor_sweep(ctx: _Context, f, tap):
    """Boost against the loop's capacitor at one frequency; the −3 dB width of its peak."""
    c0 = float(ctx.loop_c(f, tap)[0])
    span = max(6.0 / _q_loop(ctx, f, tap), 0.005)
    c = c0 * (1 + np.linspace(-span, span, 301))
    db, _, _ = ctx.boost_at(f, tap, ctx.position[None], ctx.axis[None], c1=c)
    top = int(np.nanargmax(db))
    inside = db >= db[top] - 3.0
    lo, hi = top, top
    while lo > 0 and inside[lo - 1]:
        lo -= 1
    while hi < c.size - 1 and inside[hi + 1]:
        hi += 1
    width = float(c[hi] - c[lo]) if (lo > 0 and hi < c.size - 1) else np.nan
    travel = np.nan
    if ctx.tuner.has_position and np.isfinite(width):
        travel = float(abs(ctx.tuner.position_m(c[hi]) - ctx.tuner.position_m(c[lo])))
    return c0, c, db, width, travel


def _distance_line(ctx: _Context, f, tap, points=80):
    """Boost with the rod moved along the loop axis through the receiver's position, on the
    receiver's side of the loop; distances are |y| of the rod's centre."""
    side = 1.0 if ctx.position[1] >= 0 else -1.0
    front = float(np.max(side * np.concatenate([ctx.geom.starts[:, 1], ctx.geom.ends[:, 1]])))
    far = max(1.5, 3.0 * ctx.spec.frame.width_m)
    d = np.linspace(max(front, 0.0) + ctx.rod.diameter_m, far, points)
    pos = np.repeat(ctx.position[None], points, axis=0)
    pos[:, 1] = side * d
    ax = np.repeat(ctx.axis[None], points, axis=0)
    db, _, _ = ctx.boost_at(f, tap, pos, ax)
    db[near_wire(ctx.geom, ctx.rod, pos, ax)] = np.nan
    return d, db


def _placement_map(ctx: _Context, f, tap, points=41):
    """Boost and k over a grid in the table plane for each map orientation."""
    half = 0.5 * max(ctx.spec.frame.width_m, ctx.spec.frame.height_m) + 0.6
    x = np.linspace(-half, half, points)
    y = np.linspace(-half, half, points)
    xx, yy = np.meshgrid(x, y)
    z = ctx.bottom_z
    pos = np.stack([xx.ravel(), yy.ravel(), np.full(xx.size, z)], axis=1)
    dbs, ks = [], []
    for deg in MAP_ORIENTATIONS_DEG:
        th = np.radians(deg)
        ax = np.broadcast_to(np.array([np.sin(th), np.cos(th), 0.0]), pos.shape)
        db, _, m = ctx.boost_at(f, tap, pos, ax)
        bad = near_wire(ctx.geom, ctx.rod, pos, ax)
        db[bad] = np.nan
        k = coupling_k(np.real(m), ctx.l_loop[tap], ctx.rod)
        k[bad] = np.nan
        dbs.append(db.reshape(xx.shape))
        ks.append(k.reshape(xx.shape))
    return x, y, z, np.array(dbs), np.array(ks)


def _default_frequency(tune) -> tuple[float, int]:
    """The channel nearest 1 MHz that a tap reaches; (1 MHz, −1) when no tap reaches any."""
    ok = np.flatnonzero(np.asarray(tune.channel_tap_index) >= 0)
    if ok.size == 0:
        return 1e6, -1
    j = ok[np.argmin(np.abs(np.asarray(tune.frequencies_hz)[ok] - 1e6))]
    return float(tune.frequencies_hz[j]), int(tune.channel_tap_index[j])


def _check_choice(ctx: _Context, tune, frequency_hz, tap_turns):
    """Frequency and tap index for the single-frequency analyses (SpecError for bad choices)."""
    f, t = _default_frequency(tune)
    if frequency_hz is not None:
        if not (np.isfinite(frequency_hz) and 10e3 <= frequency_hz <= 30e6):
            raise SpecError("--frequency", f"{frequency_hz} Hz is outside 10 kHz to 30 MHz")
        f = float(frequency_hz)
        near = int(np.argmin(np.abs(np.asarray(tune.frequencies_hz) - f)))
        t = int(tune.channel_tap_index[near])
    if tap_turns is not None:
        if tap_turns not in ctx.sweep.tap_turns:
            raise SpecError("--tap", f"{tap_turns} is not a tap; the taps are at "
                                     f"{', '.join(map(str, ctx.sweep.tap_turns))} turns")
        t = ctx.sweep.tap_turns.index(tap_turns)
    if t < 0:   # no tap reaches f with the tuner: the tap needing a capacitance nearest its range
        cs = np.array([ctx.loop_c(f, i)[0] for i in range(len(ctx.sweep.tap_turns))])
        mid = np.sqrt(ctx.tuner.min_f * ctx.tuner.max_f)
        t = int(np.argmin(np.where(cs > 0, np.abs(np.log(np.where(cs > 0, cs, 1) / mid)), np.inf)))
    c = float(ctx.loop_c(f, t)[0])
    if not c > 0:
        raise SpecError("--frequency", f"tap {ctx.sweep.tap_turns[t]} is above its self-resonance at "
                                       f"{f / 1e3:.0f} kHz; choose a lower frequency or another tap")
    return f, t


def two_port_z(ctx: _Context, tap: int, frequencies_hz) -> np.ndarray:
    """Z of the loop-tap–rod-coil 2-port (no tuning capacitors), shape (n, 2, 2). [Ω]"""
    f = np.asarray(frequencies_hz, dtype=float)
    w = 2 * np.pi * f
    m, _ = ctx.m_v1_curve(f, tap)
    z = np.empty((f.size, 2, 2), dtype=complex)
    z[:, 0, 0] = ctx.z11(f, tap)
    z[:, 1, 1] = ctx.rod.series_resistance_ohm(f) + 1j * w * ctx.rod.inductance_h
    z[:, 0, 1] = z[:, 1, 0] = 1j * w * m
    return z


def _current_scale(ctx: _Context, f, tap, m0) -> float:
    """M(f)/M(ω → 0) at the spec's placement: the winding current per port current as the rod
    sees it (1/(1 − (f/f_srf)²) for the quasi-static currents). [-]"""
    m, _ = ctx.m_v1(f, tap, ctx.position[None], ctx.axis[None])
    return float(np.real(m[0]) / m0) if m0 != 0 else float("nan")


def _placement_problem(ctx: _Context):
    if near_wire(ctx.geom, ctx.rod, ctx.position[None], ctx.axis[None])[0]:
        key = "receiver.position" if not ctx.assumed else "<default receiver>"
        raise SpecError(key, f"the rod at {tuple(round(float(v), 4) for v in ctx.position)} m comes "
                             f"within {NEAR_WIRE_DIAMETERS:g} rod diameters of the wire; the coupling "
                             f"model needs the rod small against its distance from the wire: move it "
                             f"further out")


def _available_ratio(ctx: _Context, f, tap):
    """ρ² (available powers, loop over rod) and the critical coupling 1/√(Q₁Q₂) at the spec's placement."""
    _, v1 = ctx.m_v1(f, tap, ctx.position[None], ctx.axis[None])
    v2, _ = ctx.rod_voltages(f, ctx.position[None], ctx.axis[None])
    z = ctx.z11(f, tap)[0]
    r1 = z.real + 1 / (2 * np.pi * f * ctx.loop_c(f, tap)[0] * ctx.tuner.q)
    r2 = float(ctx.rod.series_resistance_ohm(f))
    rho2 = float((abs(v1) ** 2 / r1) / (abs(v2[0]) ** 2 / r2))
    return rho2, 1 / np.sqrt(_q_loop(ctx, f, tap) * ctx.rod.loaded_q)


def _notes(ctx: _Context, tune, dist_db, j, best_map, iy, ix) -> list[str]:
    """What the user should know about this run's numbers."""
    notes = []
    if not np.any(np.asarray(tune.channel_tap_index) >= 0):
        notes.append("no tap reaches any channel with this tuner: the studies at one frequency "
                     "assume the loop tuned there anyway")
    if ctx.assumed:
        notes.append("no [receiver] in the spec: a typical radio's rod is assumed "
                     "(10 × 100 mm, μi 125, 65 turns, loaded Q 60)")
    if np.isfinite(dist_db).any() and j == int(np.flatnonzero(np.isfinite(dist_db))[0]):
        notes.append("the boost still rises at the closest spacing the model allows: the optimum "
                     "may be closer still; try it by ear")
    window = best_map[max(iy - 1, 0):iy + 2, max(ix - 1, 0):ix + 2]
    if np.isnan(window).any():
        notes.append("the best spot on the map borders the zone too close to the wire, where the "
                     "model stops: nearer may be better or worse; try it by ear")
    if ctx.rod.inductance_source == "computed":
        notes.append(f"rod-coil inductance computed from the rod model (expected error "
                     f"±{ctx.rod.inductance_error:.0%}); measure it and give receiver.coil_inductance")
    return notes


def precheck(spec, frequency_hz=None, tap_turns=None) -> None:
    """Bad input for :func:`run_couple` found before any solve: SpecError naming the key."""
    if frequency_hz is not None and not (np.isfinite(frequency_hz) and 10e3 <= frequency_hz <= 30e6):
        raise SpecError("--frequency", f"{frequency_hz} Hz is outside 10 kHz to 30 MHz")
    if tap_turns is not None and tap_turns not in spec.taps.turns:
        raise SpecError("--tap", f"{tap_turns} is not a tap; the taps are at "
                                 f"{', '.join(map(str, spec.taps.turns))} turns")
    from simloop.geometry import loop_from_spec

    ctx = _Context.__new__(_Context)
    ctx.geom = loop_from_spec(spec)
    ctx.rod, ctx.assumed = rod_from_spec(spec.receiver)
    if spec.receiver is not None:
        ctx.position = np.asarray(spec.receiver.position_m, dtype=float)
        ctx.axis = np.asarray(spec.receiver.axis, dtype=float)
        _placement_problem(ctx)


def run_couple(spec, sweep, tune, *, source: CurrentSource | None = None, frequency_hz=None,
               tap_turns=None, wave=DEFAULT_WAVE, map_points: int = 41) -> CoupleResult:
    """Loop–radio coupling: M and k per tap, boost per channel, capacitor and distance sweeps,
    placement map and the loop–receiver 2-port (module notes for the model).

    Parameters
    ----------
    spec : simloop.spec.Spec
        Its ``[receiver]`` (None: :data:`simloop.receiver.DEFAULT_RECEIVER` at 15 cm in front of
        the winding in the table plane, and the result says so).
    sweep : simloop.impedance.SweepResult
        The loop's impedance (its fitted model gives Z₁₁ at any frequency) and geometry.
    tune : simloop.tuning.TuneResult
        The channel chart: which tap and capacitance per channel.
    source : CurrentSource, optional
        Segment currents per unit port current, used as they are at every frequency. When None:
        the sweep's circuit solver's currents at each frequency (module notes), or, without a
        circuit, the quasi-static currents of the wire path scaled by 1/(1 − (f/f_srf)²).
    frequency_hz : float, optional
        Frequency of the capacitor sweep, distance line and map (default: the channel nearest 1 MHz).
    tap_turns : int, optional
        Tap for those (default: the chart's tap at that frequency).
    wave : (direction, polarization)
        The incident wave (default :data:`DEFAULT_WAVE`).
    map_points : int
        Grid points per side of the placement map.
    """
    ctx = _Context(spec, sweep, source, wave)
    _placement_problem(ctx)
    f, t = _check_choice(ctx, tune, frequency_hz, tap_turns)
    m = mutual_inductance_h(ctx.source, ctx.rod, ctx.position, ctx.axis)[:, 0]
    k = coupling_k(np.real(m), ctx.l_loop, ctx.rod)
    freqs, taps, ch_db, pull = _channels(ctx, tune)
    c0, caps, cap_db, width, travel = _capacitor_sweep(ctx, f, t)
    dist, dist_db = _distance_line(ctx, f, t)
    mx, my, mz, map_db, map_k = _placement_map(ctx, f, t, map_points)
    o, iy, ix = np.unravel_index(np.nanargmax(map_db), map_db.shape)
    th = np.radians(MAP_ORIENTATIONS_DEG[o])
    j = int(np.nanargmax(dist_db))
    rho2, kc = _available_ratio(ctx, f, t)
    notes = _notes(ctx, tune, dist_db, j, map_db[o], iy, ix)
    return CoupleResult(
        name=spec.name, rod=ctx.rod, receiver_assumed=ctx.assumed, position_m=ctx.position,
        axis=ctx.axis / np.linalg.norm(ctx.axis), wave_direction=ctx.direction,
        wave_polarization=ctx.polarization, tap_turns=tuple(sweep.tap_turns),
        loop_inductance_h=ctx.l_loop, mutual_inductance_h=np.real(m), coupling_k=k,
        frequencies_hz=freqs, channel_tap=taps, boost_db=ch_db, pull_hz=pull, frequency_hz=f,
        tap_index=t, loop_capacitance_f=c0, capacitor_f=caps, capacitor_boost_db=cap_db,
        capacitor_width_f=width, capacitor_width_m=travel, distance_m=dist,
        distance_boost_db=dist_db, optimum_spacing_m=float(dist[j]),
        optimum_spacing_boost_db=float(dist_db[j]),
        optimum_at_near_limit=bool(j == int(np.flatnonzero(np.isfinite(dist_db))[0])), map_x_m=mx, map_y_m=my, map_z_m=mz,
        map_boost_db=map_db, map_k=map_k, best_position_m=np.array([mx[ix], my[iy], mz]),
        best_axis=np.array([np.sin(th), np.cos(th), 0.0]),
        best_orientation_deg=MAP_ORIENTATIONS_DEG[o], best_boost_db=float(map_db[o, iy, ix]),
        s_frequencies_hz=np.asarray(sweep.frequencies_hz, dtype=float),
        s_z_ohm=two_port_z(ctx, t, sweep.frequencies_hz), critical_k=float(kc),
        available_power_ratio=rho2, currents_origin=ctx.origin,
        current_scale=_current_scale(ctx, f, t, m[t]), footprint_m=ctx.footprint(), notes=tuple(notes),
        quasi_static_scale=float(ctx.srf_factor(f, t)),
        interpolation_error=float(ctx.interpolation_error),
        imperial=bool(getattr(spec, "imperial", False)))
