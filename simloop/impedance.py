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
from simloop.geometry import (LoopGeometry, check_clearances, loop_from_spec, rod_clearance_problems,
                              single_tap_circuit)
from simloop.lumped import LoopModel, fit_loop_model
from simloop.mesh import C0, FLOOR_ABSOLUTE, FLOOR_TRUSTED, Mesh, Rule, build_mesh, mesh_for_spec, mesh_rules
from simloop.solve import Environment, PortSolution, SolveCache, SolveRequest, solve_many, solve_ports

#: A point is reported reliable when its relative impedance error estimate is below this.
RELIABLE_BELOW = 0.05
#: Fit window top as a fraction of the lowest self-resonance (measured: 0.45–0.6 SRF fits
#: predicted 0.7–1 MHz within 0.3 %; fits near the SRF were 0.7–2 % off).
WINDOW_TOP = 0.6
WINDOW_POINTS = 5
#: Largest turn perimeter, in wavelengths, at which the model is fitted: the fitted radiation term
#: is the small-loop law R_r ∝ f⁴, which holds for a perimeter below about λ/10 (Balanis, *Antenna
#: Theory*, 3rd ed., 2005, sec. 5.2); at 0.2 λ the MoM radiation resistance is ~29 % above it.
SMALL_LOOP_PERIMETER = 0.1
#: Port matrices less reciprocal than this make every point of the sweep unreliable.
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
    role: str  # "probe", "window" or "direct"
    seconds: float
    cached: bool
    asymmetry: float
    segment_wavelengths: float


@dataclass(frozen=True)
class SolveFailure:
    """One MoM solve the sweep asked for and did not get (worker crashed, hung, returned NaN)."""

    frequency_hz: float
    role: str  # "probe", "window" or "direct"
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
        ``"mom"`` (direct solve) or ``"model"`` (fitted model) per point.
    error_estimate : ndarray, shape (n, k)
        Relative error estimate of |Z_ii| per point and tap. [-]
    reliable : ndarray of bool, shape (n, k)
    tap_turns : tuple of int
    model : LoopModel
    self_resonance_hz : ndarray, shape (k,)
        Self-resonance of each tap from the model (NaN if above the model's reach). [Hz]
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
        model, is added to the series resistance (:mod:`simloop.losses`).
        """
        from simloop.losses import proximity_resistance

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


def _lowest_resonance(model: LoopModel, f_max: float) -> float | None:
    found = [model.self_resonance_hz(i, f_max) for i in range(model.ports)]
    found = [f for f in found if f is not None]
    return min(found) if found else None


def _unique(freqs, existing):
    out = []
    for f in freqs:
        if all(abs(f - g) > 1e-9 * g for g in list(existing) + out):
            out.append(float(f))
    return out


def junction_correction(spec, geom: LoopGeometry, mesh: Mesh, env: Environment, model: LoopModel,
                        fit_hz, resistivity, workers=None, cache=None, progress=None) -> np.ndarray:
    """Ratio κ_i of each tap's low-frequency inductance without and with the open wires.

    NEC reads a tap's impedance a few per cent high when open wire (the rest of the winding, the
    other taps' leads) continues its current path straight through a junction, although that
    wire carries no current at low frequency and cannot change L0 (measured: detaching the open
    stub removed the excess to 0.01 %; finer meshes and the extended kernel did not). Each tap's
    own circuit (:func:`simloop.geometry.single_tap_circuit`, meshed with the same segment and port
    lengths) is solved at the lowest and highest fit frequency and its L0 fitted;
    κ_i = L0_own/L0_full. (A third, middle frequency moved κ by only 0.007–0.013 % on the demo
    loop's two mid taps at standard quality, against a 1.2 % mesh bias: it bought nothing. One
    frequency alone, without the fitted capacitance, was 4–22 % off.)
    The tap at the end of the winding has no open wire continuing its path (the other leads
    leave it at right angles) and keeps κ = 1.
    """
    k = len(geom.tap_turns)
    kappa = np.ones(k)
    port_len = float(mesh.segment_lengths_m[mesh.port_tags[0] - 1])
    picks = sorted({fit_hz[0], fit_hz[-1]})
    todo = [i for i, n in enumerate(geom.tap_turns) if not (i == k - 1 and n == spec.winding.turns)]
    meshes = {i: build_mesh(single_tap_circuit(spec, i), mesh.target_m, mesh.quality, port_length_m=port_len)
              for i in todo}
    requests = [SolveRequest(meshes[i], env, f) for i in todo for f in picks]
    cb = (lambda d, t: progress("junction", d, t)) if progress else None
    out = solve_many(requests, workers=workers, cache=cache, progress=cb)
    for n_done, i in enumerate(todo):
        sols = out[n_done * len(picks):(n_done + 1) * len(picks)]
        failed = [s for s in sols if isinstance(s, SolverError)]
        if failed:
            raise SolverError(f"tap {geom.tap_turns[i]}: its own circuit could not be solved: {failed[0]}")
        own = fit_loop_model(picks, np.array([s.y for s in sols]), geom.wire_radius_m, resistivity)
        kappa[i] = own.inductance_h[0, 0] / model.inductance_h[i, i]
    return kappa


def _turn_perimeter_m(geom: LoopGeometry) -> float:
    """Wire length of the first (outer) turn. [m]"""
    kinds = np.array(geom.kinds)
    return float(geom.lengths_m[(kinds == "winding") & (geom.turn == 0)].sum())


def run_sweep(spec, *, workers: int | None = None, cache: SolveCache | None = None,
              progress=None, direct: bool = False, correct_junctions: bool = True) -> SweepResult:
    """Sweep the impedance of every tap of a loop spec.

    Parameters
    ----------
    spec : simloop.spec.Spec
    workers : int, optional
        Worker processes for the MoM solves.
    cache : SolveCache, optional
        Store of solved frequencies; a rerun re-uses every frequency already solved.
    progress : callable, optional
        ``progress(stage, done, total)``.
    direct : bool
        Solve every sweep point directly, below the floor too (for studies of the breakdown);
        such points carry the breakdown error estimate and are flagged unreliable.
    correct_junctions : bool
        Remove the junction bias of mid-winding taps (:func:`junction_correction`).
    """
    geom, mesh, rules = prepare(spec)
    env = environment_from_spec(spec)
    resistivity = env.resistivity_ohm_m
    solved: dict[float, PortSolution] = {}
    records: list[SolveRecord] = []
    failed: list[SolveFailure] = []

    def solve(freqs, role):
        freqs = _unique(freqs, solved)
        if not freqs:
            return {}
        cb = (lambda d, t: progress(role, d, t)) if progress else None
        out = solve_ports(mesh, env, freqs, workers=workers, cache=cache, progress=cb)
        failures = {}
        for f, res in zip(freqs, out):
            if isinstance(res, SolverError):
                failures[f] = res
                failed.append(SolveFailure(f, role, str(res)))
                continue
            solved[f] = res
            records.append(SolveRecord(f, role, res.seconds, res.cached, res.asymmetry,
                                       mesh.shortest_m * f / C0))
        return failures

    f7 = mesh.floor_frequency_hz(FLOOR_TRUSTED)
    f5 = mesh.floor_frequency_hz(FLOOR_ABSOLUTE)
    note = ""

    # 1. Probe at the floors to locate the self-resonance.
    probe = [f5, f7]
    failures = solve(probe, "probe")
    ok = [f for f in probe if f in solved]
    if len(ok) < 2:
        raise SolverError(f"the MoM probe solves failed: {'; '.join(map(str, failures.values()))}")
    x_probe = np.array([solved[f].z.diagonal().imag for f in ok])
    if np.any(x_probe <= 0):
        if np.all(x_probe[0] > 0):  # resonance between the two floors: fit on the lower side only
            probe = [f5, 1.1 * f5]
            solve(probe, "probe")
            ok = [f for f in probe if f in solved]
            x_probe = np.array([solved[f].z.diagonal().imag for f in ok]) if len(ok) == 2 else None
        if x_probe is None or np.any(x_probe <= 0):
            raise SolverError(
                f"the loop self-resonates below {f5 / 1e6:.3f} MHz, the lowest frequency this mesh "
                f"can be solved at (segments ≥ 5e-5 λ): no valid fit window. Use a larger pitch or "
                f"fewer turns, or a coarser mesh (mesh.quality = \"draft\").")
    model = fit_loop_model(ok, np.array([solved[f].y for f in ok]), geom.wire_radius_m, resistivity)
    srf = _lowest_resonance(model, 40 * f7)

    # 2. The fit window, moved once more if the fitted resonance lands below the first guess.
    # The fitted radiation term is the small-loop law (∝ f⁴), which holds only while a turn is
    # electrically small: the window stays below perimeter ≤ SMALL_LOOP_PERIMETER λ (Balanis).
    f_small = SMALL_LOOP_PERIMETER * C0 / _turn_perimeter_m(geom)
    for _ in range(3):
        f_hi = min(WINDOW_TOP * srf if srf is not None else 1.6 * f7, f_small)
        f_lo = f7
        if f_lo > f_hi / 1.3:
            f_lo = max(f5, f_hi / 1.3)
            if f_lo > f_hi / 1.3:
                f_hi = 1.3 * f_lo
                note = (f"fit window {f_lo / 1e6:.3f}–{f_hi / 1e6:.3f} MHz reaches above "
                        f"{WINDOW_TOP} × self-resonance; model points are less certain")
            else:
                note = "floor relaxed towards 5e-5 λ to fit below 0.6 × self-resonance"
        inside = [f for f in solved if f_lo * (1 - 1e-9) <= f <= f_hi * (1 + 1e-9)]
        # WINDOW_POINTS spread over the whole window; a point already solved nearby stands in.
        window = [float(f) for f in np.geomspace(f_lo, f_hi, WINDOW_POINTS)
                  if all(abs(f / g - 1) > 0.03 for g in inside)]
        solve(window, "window")
        fit_hz = sorted(f for f in solved if f_lo * (1 - 1e-9) <= f <= f_hi * (1 + 1e-9))
        if len(fit_hz) < 2:
            raise SolverError("fewer than two window solves succeeded; the loop model cannot be fitted")
        model = fit_loop_model(fit_hz, np.array([solved[f].y for f in fit_hz]), geom.wire_radius_m,
                               resistivity)
        srf_new = _lowest_resonance(model, 40 * f_hi)
        if srf_new is None or f_hi <= 1.05 * WINDOW_TOP * srf_new or f_lo >= f_hi / 1.3 * 0.999:
            break
        srf = srf_new

    # 3. Direct MoM above the floor.
    f_sweep = np.asarray(spec.sweep.frequencies_hz, dtype=float)
    floor = 0.0 if direct else f7
    lost = solve([float(f) for f in f_sweep if f >= floor * (1 - 1e-9)], "direct")

    # 4. Junction correction: each tap's own circuit, without the open wires hanging from it.
    k = len(geom.tap_turns)
    raw_l0 = np.diag(model.inductance_h).copy()
    kappa = junction_correction(spec, geom, mesh, env, model, fit_hz, resistivity, workers, cache,
                                progress) if correct_junctions else np.ones(k)
    scale = np.sqrt(kappa)
    model = model.scaled(scale)
    for f in solved:
        solved[f] = solved[f].scaled(scale)
    srf_taps = np.array([model.self_resonance_hz(i, 40 * f_hi) for i in range(k)], dtype=float)  # None → NaN
    l_qs = np.array([reference.inductance_partial_sum(*geom.current_path(i), geom.wire_radius_m)
                     for i in range(k)])
    l_fit = np.diag(model.inductance_h)
    mesh_bias = pitch_bias(mesh.winding_segment_m / geom.pitch_m) if spec.winding.turns > 1 else 2e-3
    eps_mesh = np.maximum(mesh_bias, np.abs(l_fit / l_qs - 1.0))
    eps_floor_fit = breakdown_error(mesh.shortest_m * min(fit_hz) / C0)
    eps_l = np.sqrt(eps_mesh**2 + eps_floor_fit**2 + model.fit_residual**2 + model.extrapolation_spread**2)
    worst_asymmetry = max(r.asymmetry for r in records)
    n = f_sweep.size
    z = np.zeros((n, k, k), dtype=complex)
    source = np.empty(n, dtype=object)
    eps = np.zeros((n, k))
    z_model = model.z(f_sweep)
    with np.errstate(divide="ignore"):
        amplify = np.where(np.isfinite(srf_taps), 1.0 / np.abs(1.0 - (f_sweep[:, None] / srf_taps) ** 2), 1.0)
    for m, f in enumerate(f_sweep):
        key = next((g for g in solved if abs(g - f) <= 1e-9 * f), None)
        if key is not None and f >= floor * (1 - 1e-9):
            z[m] = solved[key].z
            source[m] = "mom"
            base = np.sqrt(eps_mesh**2 + breakdown_error(mesh.shortest_m * f / C0) ** 2)
        else:
            z[m] = z_model[m]
            source[m] = "model"
            base = eps_l
        eps[m] = np.minimum(base * amplify[m], 1.0)
        if any(abs(g - f) <= 1e-9 * f for g in lost):  # its direct solve failed: no backing
            eps[m] = 1.0
    if worst_asymmetry > ASYMMETRY_LIMIT:
        eps[:] = 1.0
        note = (note + "; " if note else "") + (
            f"port matrix reciprocity defect {worst_asymmetry:.0%} exceeds {ASYMMETRY_LIMIT:.0%}: "
            f"all points unreliable")
    reliable = eps < RELIABLE_BELOW
    return SweepResult(
        name=spec.name,
        frequencies_hz=f_sweep,
        z_ohm=z,
        source=source.astype(str),
        error_estimate=eps,
        reliable=reliable,
        tap_turns=geom.tap_turns,
        model=model,
        self_resonance_hz=srf_taps,
        inductance_error=eps_l,
        quasi_static_inductance_h=l_qs,
        junction_correction=kappa,
        uncorrected_inductance_h=raw_l0,
        geometry=geom,
        mesh=mesh,
        rules=tuple(rules),
        solves=tuple(sorted(records, key=lambda r: r.frequency_hz)),
        window_note=note,
        environment=env,
        failures=tuple(sorted(failed, key=lambda r: r.frequency_hz)),
    )
