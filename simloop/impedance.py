"""The impedance sweep: where to trust the MoM, what to fit, and how far to trust every point.

PyNEC is right for these loops only inside a window (measured with PyNEC 2.3.4, docs/notes/pynec.md):

* segments ≲ 2 × pitch, or the inductance comes out low (the pitch rule, a mesh property);
* segments ≥ 7e-5 λ (never < 5e-5 λ), or the reactance breaks down (a frequency floor);
* a lumped L–C model fits only below about 0.6 × self-resonance.

For close-wound coils the first two collide below ~1.7 MHz, so the sweep

1. probes the MoM at the floor to locate the self-resonance,
2. solves a fit window [floor, 0.6 × SRF] (relaxing the floor to 5e-5 λ if the window would be
   empty), and fits :class:`simloop.lumped.LoopModel`,
3. solves every requested point above the floor directly, and
4. evaluates the model at the points below it.

Every point says where it came from (``"mom"`` or ``"model"``) and carries a relative error
estimate of its impedance. Per tap, the inductance error is the larger of the pitch-rule bias
(measured) and the distance of the fitted L0 from the quasi-static partial-inductance sum of the
same wire path (an independent model, exact for L0 in the thin-filament limit), combined with
the breakdown proximity of the segments (measured) and, for model points, the fit residual and
how much the fit's form matters. All of it is amplified near the self-resonance, where |Z|
depends on the inductance as 1/|1 − (f/f_srf)²|. A point is reliable when its estimate is below
:data:`RELIABLE_BELOW`.

The reciprocity defect of the MoM port matrix (``asymmetry``) is reported with every solve. On
tapped coils it reached 3–7 % where the tap inductances were 0.2–3.4 % from the quasi-static sum:
a warning sign, not a measure of the error, so it enters the verdict only through
:data:`ASYMMETRY_LIMIT`.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from simloop import reference
from simloop.errors import SolverError, SpecError
from simloop.geometry import LoopGeometry, check_clearances, loop_from_spec, rod_clearance_problems
from simloop.circuit import CircuitModel, build_circuit
from simloop.lumped import LoopModel, fit_loop_model
from simloop.mesh import C0, FLOOR_TRUSTED, Mesh, Rule, build_mesh, mesh_for_spec, mesh_rules
from simloop.solve import Environment, PortSolution, SolveCache, solve_ports
from simloop.units import FREQUENCY_MATCH_REL, find_frequency

#: A point is reported reliable when its relative impedance error estimate is below this (this
#: tool's choice: 5 % in |Z| ≈ ωL moves a channel's tuning capacitance C = 1/(ω²L) by about 5 %).
RELIABLE_BELOW = 0.05
#: Fit window top as a fraction of the lowest self-resonance (measured: 0.45–0.6 SRF fits
#: predicted 0.7–1 MHz within 0.3 %; fits near the SRF were 0.7–2 % off).
WINDOW_TOP = 0.6
#: Fit points in the window: the two-term fit plus the ω⁴ check of the fit's form, which needs at
#: least four (:class:`simloop.lumped.LoopModel`); five is this tool's choice.
WINDOW_POINTS = 5
#: Largest turn perimeter, in wavelengths, at which the model is fitted: the fitted radiation term
#: is the small-loop law R_r ∝ f⁴, which holds for a perimeter below about λ/10 (Balanis, *Antenna
#: Theory*, 3rd ed., 2005, sec. 5.2); at 0.2 λ the MoM radiation resistance is ~29 % above it.
SMALL_LOOP_PERIMETER = 0.1
#: Port matrices less reciprocal than this make every point of the sweep unreliable (this tool's
#: choice: twice the 3–7 % measured on tapped coils whose inductances were right, see above).
ASYMMETRY_LIMIT = 0.15

# Measured inductance bias of PyNEC against segment/pitch on 10-turn coils, pitch 3/6/12 mm
# (upper ends of the measured ranges): 1.67 → 1.2 %, 2.5 → 2.1 %, 3.3 → 4 %, 5 → 10 %.
_PITCH_RATIO = np.array([1.67, 2.5, 3.3, 5.0])
_PITCH_BIAS = np.array([0.012, 0.021, 0.04, 0.10])


def pitch_bias(segment_over_pitch: float) -> float:
    """Expected relative inductance error from segments long against the turn pitch. [-]

    Log-log interpolation of measured values; below 1.67 it falls as (ratio)^1.5, the exponent
    with which Richardson extrapolation in segment length recovered L within 0.1–0.4 %.
    """
    r = float(segment_over_pitch)
    if r <= _PITCH_RATIO[0]:
        return float(_PITCH_BIAS[0] * (r / _PITCH_RATIO[0]) ** 1.5)
    if r >= _PITCH_RATIO[-1]:
        return float(_PITCH_BIAS[-1] * (r / _PITCH_RATIO[-1]) ** 2)
    return float(np.exp(np.interp(np.log(r), np.log(_PITCH_RATIO), np.log(_PITCH_BIAS))))


def breakdown_error(segment_wavelengths: float) -> float:
    """Expected relative reactance error from segments short against the wavelength. [-]

    Measured: ≤ 0.1 % at 1e-4 λ, 0.1–1 % at 5e-5 λ, 0.4–14 % at 2–2.5e-5 λ on 10-turn coils,
    and -47 % at 2e-5 λ on a single turn with leads. The upper ends are joined by power laws
    (exponent 3.3 from 1e-4 to 5e-5 λ, 4.3 below), floored at 0.05 %.
    """
    x = float(segment_wavelengths)
    if x >= 5e-5:
        return float(max(5e-4, 1e-3 * (1e-4 / x) ** (np.log(10) / np.log(2))))
    return float(1e-2 * (5e-5 / x) ** 4.3)


def environment_from_spec(spec) -> Environment:
    g = spec.ground
    if g.kind == "free-space":
        return Environment(wire_conductivity_s_m=spec.wire.conductivity_s_m)
    return Environment(
        ground=g.kind,
        height_m=g.height_m,
        permittivity=g.permittivity if g.permittivity is not None else 1.0,
        conductivity_s_m=g.conductivity_s_m if g.conductivity_s_m is not None else 0.0,
        wire_conductivity_s_m=spec.wire.conductivity_s_m,
    )


@dataclass(frozen=True)
class SolveRecord:
    """One MoM solve the sweep made: its role, cost and self-check."""

    frequency_hz: float
    role: str  # "direct" (a sweep point) or "check" (a cross-check above the floor)
    seconds: float
    cached: bool
    asymmetry: float
    segment_wavelengths: float


@dataclass(frozen=True)
class SolveFailure:
    """One MoM solve the sweep asked for and did not get (worker crashed, hung, returned NaN)."""

    frequency_hz: float
    role: str  # "direct" (a sweep point) or "check" (a cross-check above the floor)
    reason: str


@dataclass(frozen=True)
class SweepResult:
    """Impedance of every tap over the sweep, with provenance and error estimates.

    Attributes
    ----------
    frequencies_hz : ndarray, shape (n,)
    z_ohm : ndarray, shape (n, k, k), complex
        Open-circuit impedance matrix of the k tap ports (unused taps open). [Ω]
    source : ndarray of str, shape (n,)
        ``"circuit"`` (the PEEC circuit solver), ``"mom"`` (direct NEC solve, where its error
        estimate is the smaller) or ``"model"`` (fitted lumped model) per point.
    error_estimate : ndarray, shape (n, k)
        Relative error estimate of |Z_ii| per point and tap. [-]
    reliable : ndarray of bool, shape (n, k)
    tap_turns : tuple of int
    model : LoopModel
        Lumped L-C model fitted to exact circuit solves (skin loss only), for tuning.
    self_resonance_hz : ndarray, shape (k,)
        Self-resonance of each tap from the circuit solver (NaN if none below 40 × the top of
        the sweep). [Hz]
    inductance_error : ndarray, shape (k,)
        Relative error estimate of L0 per tap. [-]
    quasi_static_inductance_h : ndarray, shape (k,)
        Partial-inductance sum of each tap's current path (no MoM). [H]
    junction_correction : ndarray, shape (k,)
        κ applied to each tap (impedances scale as √(κ_i κ_j)); 1 where none was needed. [-]
    uncorrected_inductance_h : ndarray, shape (k,)
        L0 of the MoM model before the junction correction. [H]
    failures : tuple of SolveFailure
        Solves that failed. A sweep point whose direct solve failed carries the model value with
        error estimate 1 and is never reliable.
        L0 of each tap from the circuit solver (which needs no junction correction). [H]
    circuit_rom_error : float
        Error of the circuit's reduced-order model against held-back exact solves. [-]
    mom_difference : ndarray, shape (k,)
        Largest |Z_ii(MoM)/Z_ii(circuit) − 1| over the direct MoM solves, divided by the resonance
        amplification 1/|1 − (f/f_srf)²|; NaN without MoM solves. For mid taps it is mostly the
        NEC junction bias. [-]
    mom_self_resonance_hz : ndarray, shape (k,)
        Self-resonance implied by a direct MoM solve near it (NaN if none). [Hz]
    coverage : tuple of str
        Which source covered which part of the band.
    circuit_inductance_h : ndarray, shape (k, k)
        Low-frequency inductance matrix from the circuit solver. [H]
    circuit : CircuitModel
        The filled circuit (re-used by validate, coupling and patterns).
    model_proximity : LoopModel
        Lumped model fitted to the circuit with its proximity loss (what ``model_z`` uses).
    """

    name: str
    frequencies_hz: np.ndarray
    z_ohm: np.ndarray
    source: np.ndarray
    error_estimate: np.ndarray
    reliable: np.ndarray
    tap_turns: tuple[int, ...]
    model: LoopModel
    self_resonance_hz: np.ndarray
    inductance_error: np.ndarray
    quasi_static_inductance_h: np.ndarray
    junction_correction: np.ndarray
    uncorrected_inductance_h: np.ndarray
    geometry: LoopGeometry = field(repr=False)
    mesh: Mesh = field(repr=False)
    rules: tuple[Rule, ...] = ()
    solves: tuple[SolveRecord, ...] = ()
    window_note: str = ""
    environment: Environment = field(default_factory=Environment)
    failures: tuple[SolveFailure, ...] = ()
    circuit_rom_error: float = float("nan")
    mom_difference: np.ndarray = field(default_factory=lambda: np.zeros(0))
    mom_self_resonance_hz: np.ndarray = field(default_factory=lambda: np.zeros(0))
    coverage: tuple[str, ...] = ()
    circuit_segments: int = 0
    circuit_seconds: float = 0.0
    circuit_inductance_h: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    circuit: CircuitModel | None = field(default=None, repr=False)
    model_proximity: LoopModel | None = None

    @property
    def inductance_h(self) -> np.ndarray:
        """Low-frequency inductance L0 of each tap (others open). [H]"""
        return np.diag(self.model.inductance_h).copy()

    @property
    def self_capacitance_f(self) -> np.ndarray:
        """Equivalent self-capacitance per tap, 1/((2π f_srf)² L0). [F]"""
        return 1.0 / ((2 * np.pi * self.self_resonance_hz) ** 2 * self.inductance_h)

    @property
    def resistivity_ohm_m(self) -> float | None:
        """Wire resistivity, None for a lossless wire. [Ω·m]"""
        return self.environment.resistivity_ohm_m

    def model_z(self, frequency_hz, proximity: bool = True) -> np.ndarray:
        """Impedance matrix from the fitted model at any frequency, shape (n, k, k). [Ω]

        With ``proximity`` the proximity-effect loss of close-wound turns, which NEC does not
        model, is included: from the lumped model fitted to the circuit solver with its proximity
        loss (``model_proximity``; it has the open turns' eddy loss of mid taps), else added by
        :mod:`simloop.losses`.
        """
        from simloop.losses import proximity_resistance

        if proximity and self.model_proximity is not None:
            return self.model_proximity.z(frequency_hz)
        extra = proximity_resistance(self.geometry, frequency_hz, self.resistivity_ohm_m) if proximity else None
        return self.model.z(frequency_hz, extra_series_ohm=extra)

    def tap_impedance(self, tap_index: int) -> np.ndarray:
        """Z_ii of one tap over the sweep, shape (n,). [Ω]"""
        return self.z_ohm[:, tap_index, tap_index]

    def to_network(self, z0: float = 50.0):
        """All taps as one k-port :class:`skrf.Network` (reference impedance ``z0``)."""
        import skrf

        freq = skrf.Frequency.from_f(self.frequencies_hz, unit="hz")
        k = self.z_ohm.shape[1]
        return skrf.Network(frequency=freq, z=self.z_ohm, z0=np.full((self.frequencies_hz.size, k), z0),
                            name=f"{self.name}-taps")

    def tap_network(self, tap_index: int, z0: float = 50.0):
        """One tap as a one-port :class:`skrf.Network`, the other taps open."""
        import skrf

        freq = skrf.Frequency.from_f(self.frequencies_hz, unit="hz")
        z = self.z_ohm[:, tap_index, tap_index][:, None, None]
        return skrf.Network(frequency=freq, z=z, z0=np.full((self.frequencies_hz.size, 1), z0),
                            name=f"{self.name}-tap-{self.tap_turns[tap_index]}")


def _geometry_problems(spec, geom: LoopGeometry) -> list[tuple[str, str]]:
    problems = check_clearances(geom)
    r = spec.receiver
    if r is not None:
        problems += rod_clearance_problems(geom, r.position_m, r.axis, r.rod_length_m, r.rod_diameter_m)
    return problems


def prepare(spec) -> tuple[LoopGeometry, Mesh, list[Rule]]:
    """Geometry, mesh and mesh rules for a spec; SpecError for geometry that cannot be modelled."""
    geom = loop_from_spec(spec)
    problems = _geometry_problems(spec, geom)
    if problems:
        raise SpecError(problems[0][0], problems[0][1], problems)
    mesh = mesh_for_spec(spec, geom)
    rules = mesh_rules(mesh, geom, spec.sweep.start_hz, spec.sweep.stop_hz, spec.winding.turns)
    failed = [r for r in rules if r.status == "fail"]
    if failed:
        key = "mesh.segment_length" if spec.mesh.segment_length_m is not None else "mesh.quality"
        raise SpecError(key, "; ".join(f"mesh rule '{r.name}' fails: {r.detail}" for r in failed))
    return geom, mesh, rules








# ------------------------------------------------------------------------------------------------
# The sweep with two solvers: the circuit (PEEC) across the band, the MoM where its rules hold
# ------------------------------------------------------------------------------------------------

#: The circuit solver's mesh is coarsened to about this many segments (it has no pitch rule:
#: parallel partial inductances are exact at any segment length).
CIRCUIT_MAX_SEGMENTS = 1500
#: ... and needs no more than this many segments per turn.
CIRCUIT_PER_TURN = 36
#: MoM cross-check solves above the floor are made only while the floor lies below this multiple
#: of the top of the band (higher up they would sit among the winding's higher resonances).
CHECK_REACH = 4.0
#: Above this many segments a direct MoM solve is not attempted (about 1 min and 1 GB each).
MOM_MAX_SEGMENTS = 6000
#: Bound of the circuit's retardation error as a multiple of (kD)², D the loop's largest
#: dimension: the residual against NEC on the three validation loops (tests/validation/
#: test_circuit_against_nec.py), de-amplified by 1/|1 − (f/f_srf)²|, stayed below 0.75 (kD)².
RETARDATION_COEF = 1.0
#: The self-resonance search runs up to this multiple of the top sweep frequency (this tool's
#: choice: 10-turn MW coils self-resonated at 2.9–3.3 MHz, docs/notes/pynec.md, twice the band top;
#: 40 × leaves room for small single turns).
SRF_SEARCH = 40.0
#: Two segment targets are the same length when they differ by less than this fraction (rounding
#: of the same product computed twice is ≈1e-16). [-]
SAME_LENGTH_REL = 1e-9
#: Without MoM points in the band, the cross-check solves sit this far above the MoM's floor (just
#: above it, and a quarter above it; this tool's choice, not a measurement). [-]
CHECK_ABOVE_FLOOR = (1.02, 1.25)
#: The fit window of the tuning model must span at least this ratio (top/bottom) to separate its
#: ω² term; otherwise it falls back to FALLBACK_WINDOW × the lowest self-resonance (this tool's
#: choice, not a measurement). [-]
MIN_WINDOW_RATIO = 1.3
FALLBACK_WINDOW = (0.1, 0.5)
#: A direct MoM solve infers the MoM's self-resonance only within this factor of the circuit's
#: (farther away the two-resonator ratio is dominated by the L0 difference; this tool's choice). [-]
SRF_NEAR_FACTOR = 1.6
#: Mesh bias assumed for a single turn (no pitch rule applies): 0.2 %, a margin above the single
#: turn's X/ωL deviations measured above the floor (docs/notes/pynec.md: 1.0007 and 0.9996, i.e.
#: 0.07 % and 0.04 %); the margin is this tool's choice. [-]
SINGLE_TURN_MESH_BIAS = 2e-3


@dataclass(frozen=True)
class SourcePlan:
    """Which solver covers which part of the band, decided before any solve.

    Attributes
    ----------
    circuit_mesh : Mesh
        Mesh of the circuit solver (the MoM's, or a coarser one of the same path).
    mom_floor_hz : float
        Lowest frequency of trusted direct MoM reactance (segments ≥ 7e-5 λ). [Hz]
    mom_hz : tuple of float
        Sweep points solved directly by the MoM. [Hz]
    check_hz : tuple of float
        Extra MoM solves above the floor to cross-check the circuit (none when sweep points
        already lie above the floor). [Hz]
    mom_note : str
        Why the MoM covers what it covers.
    """

    circuit_mesh: Mesh
    mom_floor_hz: float
    mom_hz: tuple[float, ...]
    check_hz: tuple[float, ...]
    mom_note: str

    def coverage(self, start_hz: float, stop_hz: float) -> list[str]:
        """Plain-language lines: which source covers which part of the band."""
        mhz = lambda f: f"{f / 1e6:.3f} MHz"  # noqa: E731
        lines = [f"circuit (PEEC, {self.circuit_mesh.n_segments} segments): every point "
                 f"{mhz(start_hz)}–{mhz(stop_hz)}"]
        if self.mom_hz:
            lines.append(f"mom (direct NEC): {len(self.mom_hz)} points {mhz(min(self.mom_hz))}–"
                         f"{mhz(max(self.mom_hz))} solved and compared; reported where its error "
                         f"estimate is the smaller")
        else:
            lines.append(f"mom (direct NEC): no sweep point ({self.mom_note})")
        if self.check_hz:
            lines.append("mom cross-check above the floor at " + ", ".join(mhz(f) for f in self.check_hz))
        lines.append("model (fitted lumped L-C): none; the fit to the circuit only serves tuning")
        return lines


def _circuit_mesh(geom: LoopGeometry, mesh: Mesh) -> Mesh:
    """The MoM's mesh, or a coarser one of the same path: the circuit needs no pitch rule, and
    CIRCUIT_PER_TURN segments per turn keep its self-resonance within 2e-4 (frame loop: 457, 724
    and 1220 segments gave 2.22900, 2.22870 and 2.22857 MHz)."""
    turn_length = geom.winding_length_m / (int(geom.turn.max()) + 1)
    target = max(mesh.target_m, turn_length / CIRCUIT_PER_TURN,
                 mesh.target_m * mesh.n_segments / CIRCUIT_MAX_SEGMENTS)
    if target <= mesh.target_m * (1 + SAME_LENGTH_REL):
        return mesh
    return build_mesh(geom, target, mesh.quality)


def plan_sources(spec, geom: LoopGeometry, mesh: Mesh, direct: bool = False) -> SourcePlan:
    """Decide the coverage of the band by the circuit and the MoM (no solve)."""
    f_sweep = np.asarray(spec.sweep.frequencies_hz, dtype=float)
    floor = mesh.floor_frequency_hz(FLOOR_TRUSTED)
    cmesh = _circuit_mesh(geom, mesh)
    if mesh.n_segments > MOM_MAX_SEGMENTS and not direct:
        return SourcePlan(cmesh, floor, (), (), f"{mesh.n_segments} segments exceed the "
                          f"{MOM_MAX_SEGMENTS} a direct MoM solve is attempted for")
    if direct:
        return SourcePlan(cmesh, floor, tuple(float(f) for f in f_sweep), (), "every point forced")
    mom = tuple(float(f) for f in f_sweep if f >= floor * (1 - FREQUENCY_MATCH_REL))
    check = () if mom or floor > CHECK_REACH * float(f_sweep.max()) else tuple(k * floor for k in CHECK_ABOVE_FLOOR)
    note = "" if mom else f"the band lies below the MoM's floor {floor / 1e6:.3f} MHz"
    if not mom and not check:
        note += f", more than {CHECK_REACH:g} × the top of the band: no cross-check"
    return SourcePlan(cmesh, floor, mom, tuple(float(f) for f in check), note)


@dataclass(frozen=True)
class CircuitStage:
    """What the circuit solver gave the sweep."""

    model: CircuitModel
    z_ohm: np.ndarray  # (n, k, k) at the sweep points, from the reduced model
    rom_error: float
    self_resonance_hz: np.ndarray  # (k,), NaN if none below SRF_SEARCH × stop
    inductance_h: np.ndarray  # (k, k) at ω → 0
    lumped: LoopModel
    lumped_proximity: LoopModel
    seconds: float


def _lumped_from_circuit(cm: CircuitModel, geom: LoopGeometry, srf: np.ndarray, f_sweep,
                         resistivity, proximity: bool = False) -> LoopModel:
    """The lumped L-C model fitted to exact circuit solves (skin loss only, as from the MoM), for
    tuning: over the band up to 0.6 × the lowest self-resonance (where its form holds) and up to
    a turn perimeter of :data:`SMALL_LOOP_PERIMETER` wavelengths (where its f⁴ radiation law
    holds), or 0.1–0.5 × the resonance if the band starts above that."""
    top = np.nanmin(srf) if np.any(np.isfinite(srf)) else np.inf
    outer_turn = float(geom.lengths_m[(np.array(geom.kinds) == "winding") & (geom.turn == 0)].sum())
    small = SMALL_LOOP_PERIMETER * C0 / outer_turn  # where the fitted f⁴ radiation law holds
    lo, hi = float(np.min(f_sweep)), min(float(np.max(f_sweep)), WINDOW_TOP * top, small)
    if hi < MIN_WINDOW_RATIO * lo:
        hi = min(FALLBACK_WINDOW[1] * top, small)
        lo = min(FALLBACK_WINDOW[0] * top, hi / MIN_WINDOW_RATIO)
    fit_hz = np.geomspace(lo, hi, WINDOW_POINTS)
    circuit = cm if proximity else cm.with_proximity(False)
    y = np.array([np.linalg.inv(circuit.solve(f).z_ohm) for f in fit_hz])
    return fit_loop_model(fit_hz, y, geom.wire_radius_m, resistivity)


def _circuit_stage(geom: LoopGeometry, plan: SourcePlan, env: Environment, f_sweep,
                   progress=None) -> CircuitStage:
    import time

    t0 = time.perf_counter()
    if progress:
        progress("circuit", 0, 3)
    cm = build_circuit(plan.circuit_mesh, resistivity_ohm_m=env.resistivity_ohm_m, proximity=True)
    if progress:
        progress("circuit", 1, 3)
    rom = cm.reduced_model(float(f_sweep.min()), float(f_sweep.max()))
    z = rom.z(f_sweep)
    srf = np.array(cm.self_resonances_hz(SRF_SEARCH * float(f_sweep.max()), float(f_sweep.min()) / 4),
                   dtype=float)
    if progress:
        progress("circuit", 2, 3)
    f_low = float(f_sweep.min()) / 100
    l0 = cm.solve(f_low).z_ohm.imag / (2 * np.pi * f_low)
    lumped = _lumped_from_circuit(cm, geom, srf, f_sweep, env.resistivity_ohm_m)
    lumped_p = _lumped_from_circuit(cm, geom, srf, f_sweep, env.resistivity_ohm_m, proximity=True)
    if progress:
        progress("circuit", 3, 3)
    return CircuitStage(cm, z, rom.error, srf, l0, lumped, lumped_p, time.perf_counter() - t0)


def _mom_stage(mesh: Mesh, env: Environment, freqs, workers, cache, progress, check_hz=()):
    """Direct MoM solves: {frequency: PortSolution}, their records and the failures."""
    solved: dict[float, PortSolution] = {}
    records: list[SolveRecord] = []
    failures: dict[float, SolverError] = {}
    freqs = [float(f) for f in freqs]
    if not freqs:
        return solved, records, failures
    cb = (lambda d, t: progress("mom", d, t)) if progress else None
    for f, res in zip(freqs, solve_ports(mesh, env, freqs, workers=workers, cache=cache, progress=cb)):
        if isinstance(res, SolverError):
            failures[f] = res
            continue
        solved[f] = res
        role = "check" if any(abs(f - g) <= 1e-9 * g for g in check_hz) else "direct"
        records.append(SolveRecord(f, role, res.seconds, res.cached, res.asymmetry,
                                   mesh.shortest_m * f / C0))
    return solved, records, failures


def _amplification(f, srf) -> np.ndarray:
    """1/|1 − (f/f_srf)²| per frequency and tap, shape (n, k); 1 where no resonance is known."""
    f = np.atleast_1d(np.asarray(f, dtype=float))
    with np.errstate(divide="ignore", invalid="ignore"):
        amp = 1.0 / np.abs(1.0 - (f[:, None] / srf[None, :]) ** 2)
    return np.where(np.isfinite(amp), amp, 1.0)


def _mom_difference(circ: CircuitStage, solved: dict, end_tap: np.ndarray) -> np.ndarray:
    """max |Z_ii(mom)/Z_ii(circuit) − 1| over the MoM solves, de-amplified, per tap (NaN: none).

    Both sides near the resonance differ as the amplification 1/|1 − (f/f_srf)²| times the
    difference of their L and C, so the de-amplified value is comparable across frequencies.
    """
    k = circ.z_ohm.shape[1]
    out = np.full(k, np.nan)
    for f, sol in solved.items():
        z_c = circ.model.solve(f).z_ohm
        amp = _amplification([f], circ.self_resonance_hz)[0]
        d = np.abs(np.diag(sol.z) / np.diag(z_c) - 1.0) / amp
        out = np.fmax(out, d)
    return out


def _mom_self_resonance(circ: CircuitStage, solved: dict) -> np.ndarray:
    """The MoM's self-resonance per tap, inferred from direct solves near it (NaN: none usable).

    With equal L0 on both sides, X_mom/X_circ = (1 − (f/s_c)²)/(1 − (f/s_m)²); solved for s_m at
    the MoM solve closest to the circuit's resonance s_c (within :data:`SRF_NEAR_FACTOR`).
    """
    srf = circ.self_resonance_hz
    out = np.full(srf.size, np.nan)
    for i, s_c in enumerate(srf):
        near = [f for f in solved if np.isfinite(s_c) and abs(np.log(f / s_c)) < np.log(SRF_NEAR_FACTOR)]
        if not near:
            continue
        f = min(near, key=lambda g: abs(np.log(g / s_c)))
        ratio = solved[f].z[i, i].imag / circ.model.solve(f).z_ohm[i, i].imag
        inner = 1.0 - (1.0 - (f / s_c) ** 2) / ratio
        if inner > 0:
            out[i] = f / np.sqrt(inner)
    return out


def filament_error(geom: LoopGeometry) -> float:
    r"""Order-of-magnitude error of the filament (thin-wire) approximation at the winding's pitch. [-]

    The circuit carries each wire's current on its axis (exact for the mutual inductance of round
    wires with rotationally symmetric current); close turns crowd the current (the proximity
    effect), which changes the field energy near the wires. Estimated as the relative change of
    the surface current energy of two wires at the pitch, R_p/R_0 (exact two-wire solution), times
    the share of the inductance stored within about a pitch of the wire, 1/(2 ln(l_turn/a)).
    Not measured against a finer model; 5e-4 at a pitch of 8 diameters.
    """
    if geom.turn.max() < 1:
        return 0.0
    ca = geom.pitch_m / (2 * geom.wire_radius_m)
    turn_len = geom.winding_length_m / (int(geom.turn.max()) + 1)
    factor = float(reference.proximity_factor_two_wires_exact(ca))
    return factor / (2 * np.log(turn_len / geom.wire_radius_m))


def ground_effect(geom: LoopGeometry, env: Environment) -> np.ndarray:
    """Relative change of each tap's L0 by a perfectly conducting ground's image, shape (k,). [-]

    The circuit solver works in free space; over ground this bounds what it leaves out of L0
    (a real ground at MF reflects less than a perfect one). The image of a current element at
    height z is the mirrored element with its horizontal components reversed.
    """
    k = len(geom.tap_turns)
    if env.ground == "free-space":
        return np.zeros(k)
    out = np.zeros(k)
    for i in range(k):
        s, e = geom.current_path(i)
        flip = np.array([1.0, 1.0, -1.0])
        ms, me = s * flip - [0, 0, 2 * env.height_m], e * flip - [0, 0, 2 * env.height_m]
        # image current = −(mirrored direction): swap the mirrored piece's ends
        a0, a1 = s[:, None, :], e[:, None, :]
        m = reference.mutual_inductance_filaments(a0, a1, me[None, :, :], ms[None, :, :])
        out[i] = abs(float(m.sum())) / reference.inductance_partial_sum(s, e, geom.wire_radius_m)
    return out


def _loop_size_m(geom: LoopGeometry) -> float:
    pts = np.concatenate([geom.starts, geom.ends])
    return float(np.linalg.norm(pts.max(axis=0) - pts.min(axis=0)))


def _point_errors(geom, mesh, env, circ: CircuitStage, f_sweep, d_mom, end_tap, asym):
    """Relative |Z| error estimates per point and tap: (circuit, mom) each (n, k)."""
    amp = _amplification(f_sweep, circ.self_resonance_hz)
    ret = RETARDATION_COEF * (2 * np.pi * f_sweep / C0 * _loop_size_m(geom)) ** 2
    d_end = float(np.nanmax(np.where(end_tap, d_mom, np.nan))) if np.any(np.isfinite(d_mom[end_tap])) else 0.0
    base_c = np.sqrt(ret[:, None] ** 2 + filament_error(geom) ** 2 + circ.rom_error**2 + d_end**2
                     + ground_effect(geom, env)[None, :] ** 2)
    eps_c = np.minimum(base_c * amp, 1.0)
    mesh_bias = pitch_bias(mesh.winding_segment_m / geom.pitch_m) if geom.turn.max() >= 1 else SINGLE_TURN_MESH_BIAS
    brk = np.array([breakdown_error(mesh.shortest_m * f / C0) for f in f_sweep])
    junction = np.where(end_tap, 0.0, np.nan_to_num(d_mom, nan=0.0))
    # the measured MoM–circuit difference is charged to both sides: it does not say which is off
    eps_m = np.sqrt(mesh_bias**2 + brk[:, None] ** 2 + junction[None, :] ** 2 + d_end**2) * amp
    eps_m = np.where(asym > ASYMMETRY_LIMIT, 1.0, np.minimum(eps_m, 1.0))
    return eps_c, eps_m


def _assemble(f_sweep, circ: CircuitStage, solved: dict, eps_c, eps_m, direct: bool):
    """Pick each point's source (the smaller error estimate; the MoM everywhere if ``direct``)."""
    n, k = eps_c.shape
    z = circ.z_ohm.copy()
    source = np.full(n, "circuit", dtype=object)
    eps = eps_c.copy()
    for m, f in enumerate(f_sweep):
        key = find_frequency(f, solved)
        if key is None:
            continue
        if direct or eps_m[m].max() < eps_c[m].max():
            z[m] = solved[key].z
            source[m] = "mom"
            eps[m] = eps_m[m]
    return z, source.astype(str), eps


def run_sweep(spec, *, workers: int | None = None, cache: SolveCache | None = None,
              progress=None, direct: bool = False) -> SweepResult:
    """Sweep the impedance of every tap of a loop spec.

    Stages: plan the coverage (:func:`plan_sources`); the circuit solver over the whole band
    (reduced-order model, self-resonances, L0, a lumped fit for tuning); direct MoM solves where
    its rules hold (and a cross-check above its floor); the measured MoM–circuit difference; each
    point's source and error estimate.

    Parameters
    ----------
    spec : simloop.spec.Spec
    workers : int, optional
        Worker processes for the MoM solves.
    cache : SolveCache, optional
        Store of solved MoM frequencies.
    progress : callable, optional
        ``progress(stage, done, total)``.
    direct : bool
        Solve every sweep point directly with the MoM, below its floor too, and report those (for
        studies of the breakdown; such points carry the breakdown error and are flagged).
    """
    geom, mesh, rules = prepare(spec)
    env = environment_from_spec(spec)
    f_sweep = np.asarray(spec.sweep.frequencies_hz, dtype=float)
    plan = plan_sources(spec, geom, mesh, direct=direct)
    circ = _circuit_stage(geom, plan, env, f_sweep, progress)
    solved, records, failures = _mom_stage(mesh, env, plan.mom_hz + plan.check_hz, workers, cache, progress,
                                           plan.check_hz)
    k = len(geom.tap_turns)
    end_tap = np.array([n == spec.winding.turns for n in geom.tap_turns])
    d_mom = _mom_difference(circ, solved, end_tap)
    asym = max((r.asymmetry for r in records), default=0.0)
    eps_c, eps_m = _point_errors(geom, mesh, env, circ, f_sweep, d_mom, end_tap, asym)
    z, source, eps = _assemble(f_sweep, circ, solved, eps_c, eps_m, direct)
    l_qs = np.array([reference.inductance_partial_sum(*geom.current_path(i), geom.wire_radius_m)
                     for i in range(k)])
    l0 = np.diag(circ.inductance_h)
    l_fit = np.diag(circ.lumped.inductance_h)  # what SweepResult.inductance_h reports
    off = np.maximum(np.abs(l0 / l_qs - 1.0), np.abs(l_fit / l_qs - 1.0))
    eps_l = np.sqrt(filament_error(geom) ** 2 + circ.rom_error**2 + off**2)
    # A failed MoM solve leaves its points without the cross-check they were to get: they are
    # never reported as reliable (the run says so and exits non-zero unless told to carry on).
    lost = np.array([find_frequency(f, failures) is not None for f in f_sweep], dtype=bool)
    eps[lost] = 1.0
    notes = [f"MoM solve failed at {f / 1e6:.3f} MHz: {e}" for f, e in failures.items()]
    if asym > ASYMMETRY_LIMIT:
        notes.append(f"MoM port matrix reciprocity defect {asym:.0%} exceeds {ASYMMETRY_LIMIT:.0%}: "
                     f"MoM points unreliable")
    return SweepResult(
        name=spec.name, frequencies_hz=f_sweep, z_ohm=z, source=source, error_estimate=eps,
        reliable=eps < RELIABLE_BELOW, tap_turns=geom.tap_turns, model=circ.lumped,
        self_resonance_hz=circ.self_resonance_hz, inductance_error=eps_l,
        quasi_static_inductance_h=l_qs, junction_correction=np.ones(k), uncorrected_inductance_h=l0,
        geometry=geom, mesh=mesh, rules=tuple(rules),
        solves=tuple(sorted(records, key=lambda r: r.frequency_hz)), window_note="; ".join(notes),
        environment=env, circuit_rom_error=circ.rom_error, mom_difference=d_mom,
        mom_self_resonance_hz=_mom_self_resonance(circ, solved),
        coverage=tuple(plan.coverage(float(f_sweep.min()), float(f_sweep.max()))),
        circuit_segments=plan.circuit_mesh.n_segments, circuit_seconds=circ.seconds,
        circuit_inductance_h=circ.inductance_h, circuit=circ.model, model_proximity=circ.lumped_proximity,
        failures=tuple(SolveFailure(f, "check" if f in plan.check_hz else "direct", str(e))
                       for f, e in sorted(failures.items())))
