r"""Validation: can the formulas a loop was designed with be trusted, and can the MoM model?

``run_validate`` sets the method-of-moments results of a finished sweep against two independent
references, tap by tap:

* the **quasi-static model** of the real wire path (no MoM): the partial-inductance sum of the
  tap's current path including its leads, the radiation resistance of that path's magnetic moment,
  and the exact round-wire skin-effect resistance times the path's length (plus the proximity
  term of :mod:`simloop.losses`);
* the **handbook formulas** a designer uses with pencil and paper: Terman/Grover for the rectangle,
  Grover's square-coil (current-sheet) formula for stacked turns, a current-sheet formula for flat
  square spirals, Balanis' small-loop radiation resistance with N·A of the frame, the surface-
  resistance loss and Smith's proximity factor, and Medhurst's self-capacitance.

Quantities: inductance (L0 from the fitted model, and the series inductance at each check
frequency), radiation resistance (a lossless re-solve of the same mesh, and the far field), wire
loss with and without the proximity effect, Q with and without it, and the self-resonance (a
direct MoM solve either side of the fitted model's prediction).

The checks run where the MoM is valid: at frequencies of the sweep's own fit window (segments
above the low-frequency breakdown floor, below ~0.6 × self-resonance). Series quantities there
have the fitted shunt capacitance removed, Z_s = (Y − jωC)⁻¹, so that they are comparable with
formulas that know nothing of self-capacitance; a tuned circuit's Q is ωL/R_s of that series
branch.

Mesh convergence reruns the MoM on a coarser and a finer mesh at one common frequency above every
mesh's floor, reports the spread of L and R, and extrapolates in the winding segment length with
the measured exponent 1.5 (Richardson) where the three values form a trend.

The average gain test (AGT) drives each tap of the lossless loop in free space (other taps open,
by superposition of the short-circuit excitations), integrates the radiated power over the
sphere with sin θ weights and divides it by the input power ½ Re(V I*). Energy conservation makes
it 1 for any lossless model; PyNEC's ``get_gain_mean`` is a mean of dB values and is not it.

Over real ground a loss-free input resistance that is negative or below ~0.1 Ω is not resolved
by the solver (docs/notes/pynec.md: a lossless coil showed −0.05 Ω over Sommerfeld ground); it is
reported as below the solver's resolution, never as a number.

This module computes only: no printing and no files (:mod:`simloop.report_validate` writes).
"""

from __future__ import annotations

import dataclasses
import time
import warnings
from dataclasses import dataclass, field

import numpy as np

from simloop import reference
from simloop.reference import (
    average_gain,
    inductance_square_spiral_current_sheet,
    magnetic_moment_area_m2,
    radiation_resistance_moment,
    richardson_extrapolation,
    rosa_round_wire_correction,
)
from simloop.constants import MAX_SEGMENTS  # docs/references.md §13
from simloop.errors import SolverError
from simloop.geometry import LoopGeometry, turn_sides_m
from simloop.impedance import ASYMMETRY_LIMIT, MOM_MAX_SEGMENTS, WINDOW_TOP, SweepResult
from simloop.lumped import series_branch
from simloop.losses import proximity_factors, proximity_resistance, winding_length_to_turn
from simloop.mesh import FLOOR_ABSOLUTE, FLOOR_TRUSTED, KERNEL_WARN, Mesh, build_mesh, mesh_rules
from simloop.units import FREQUENCY_MATCH_REL, same_frequency
from simloop.solve import Environment, SolveCache, SolveRequest, solve_many

#: Over real ground, a loss-free input resistance below this is not resolved (docs/notes/pynec.md:
#: a lossless coil showed R = −0.05 Ω with Sommerfeld ground). [Ω]
GROUND_RESOLUTION_OHM = 0.1
BELOW_RESOLUTION = "below solver resolution"
#: Accepted range of the power balance (radiated over accepted power of a lossless model): ±5 %,
#: common practice in method-of-moments modelling (our tolerance, not a published limit).
AGT_ACCEPT = (0.95, 1.05)
#: Beyond this range the input resistance is not merely imprecise but wrong (this tool's choice:
#: 4–5 times the accepted deviation, and symmetric in dB, ±1 dB).
AGT_BROKEN = (0.8, 1.25)
#: Convergence meshes, as multiples of the sweep mesh's target segment length (this tool's choice:
#: a 2:1 span of segment lengths, the finest still within the segment limits of mesh.py).
COARSE_FACTOR = 1.5
FINE_FACTOR = 0.75
#: Exponent of the pitch-rule error in the winding segment length (docs/notes/pynec.md: Richardson
#: extrapolation with 1.5 from the 2.5 and 1.67 × pitch pair recovered L within 0.1–0.4 %).
RICHARDSON_ORDER = 1.5
#: Observed orders outside this range do not count as a trend (this tool's choice, half to twice
#: the measured order 1.5).
ORDER_RANGE = (0.75, 3.0)
#: Verdict thresholds on |L_MoM / L_quasi-static − 1| and on the convergence spread of L (this
#: tool's choice, of the size of the measured pitch-rule bias at Δ/pitch = 2.5 and 3.3: about 2 %
#: and 4 %, docs/notes/pynec.md).
L_OK, L_CAUTION = 0.02, 0.04
SPREAD_OK, SPREAD_CAUTION = 0.02, 0.05
#: Spread of the series resistance over the meshes above which Q is less certain (this tool's
#: choice, equal to R_LOSS_CAUTION).
R_SPREAD_CAUTION = 0.05
#: MoM copper loss against the exact skin-effect formula (NEC type-5 loads were within
#: 0.1–0.3 % on a single loop, docs/notes/pynec.md); beyond this something else is in the loss.
R_LOSS_CAUTION = 0.05
#: Direct-MoM check of the self-resonance: bracket either side of the model's prediction (±4 %:
#: wider than the 0.7–2 % misfit measured for fits near the self-resonance, docs/notes/pynec.md);
#: a caution when the misfit moves the model's impedance at the top of the band by more than 1 %
#: (this tool's choice, a fifth of RELIABLE_BELOW).
SRF_BRACKET = 0.04
SRF_CAUTION = 0.01
#: Reciprocity defect of the port matrix that earns a caution (the sweep's hard limit is
#: :data:`simloop.impedance.ASYMMETRY_LIMIT`): within the 3–7 % measured on tapped coils whose
#: inductances were right (simloop.impedance), so a caution, not a failure.
ASYMMETRY_CAUTION = 0.05
#: Which loop Q the tune and couple studies use.
Q_USED_BY_TUNE = "proximity-corrected"
#: Far-field grid step for the average gain test. [deg]
AGT_STEP_DEG = 5.0
#: Frame sides equal within this are a square (the handbook source then needs no "equal perimeter"). [m]
SQUARE_TOL_M = 1e-9
#: Self-resonance brackets of different taps closer than this fraction share their solves, and a
#: bracket frequency is found among the solves within it (the brackets are 2 × SRF_BRACKET wide). [-]
SRF_MERGE_REL = 1e-6


#: Mesh rules (:attr:`simloop.mesh.Rule.key`) whose warning makes the verdict a caution: those that
#: bias the MoM's L or R (the floor and size warnings only move points to the circuit solver).
MESH_RULES_CAUTION = ("pitch", "uniform", "kernel", "wavelength")
#: The fit window may reach this factor beyond WINDOW_TOP × self-resonance before it earns a
#: caution: 5 %, our allowance for the grid step of the fit frequencies (not a published value).
WINDOW_SLACK = 1.05
#: Ceiling of x = (f_stop / f_srf)² in the SRF-misfit estimate 2δx/(1 − x), which diverges at
#: x = 1 (a band reaching the resonance is judged as if it ended 0.5 % below it). [-]
SRF_X_CEILING = 0.99


# ------------------------------------------------------------------------------------------------
# Results
# ------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Check:
    """One row of the comparison: a quantity of one tap, by MoM, circuit solver, the lumped model
    tune uses, quasi-static model and handbook; each value sits in the column of the model it
    comes from (``model``: the lumped L-C model fitted to the circuit solver, never in ``mom``).

    ``rel_diff_mom`` = mom / reference − 1 and ``rel_diff_handbook`` = handbook / reference − 1,
    where ``reference`` names the column they refer to (the quasi-static model where it exists,
    else the MoM). None where a column does not apply; ``flag`` says why a value is missing when
    it is not simply inapplicable (``"below solver resolution"``).
    """

    quantity: str
    unit: str
    tap: int
    frequency_hz: float | None
    mom: float | None
    quasi_static: float | None
    handbook: float | None
    source_mom: str | None
    source_quasi_static: str | None
    source_handbook: str | None
    reference: str | None
    rel_diff_mom: float | None
    rel_diff_handbook: float | None
    flag: str | None = None
    notes: tuple = ()  # of Note, worded by simloop.report_validate.check_note
    circuit: float | None = None
    source_circuit: str | None = None
    rel_diff_circuit: float | None = None
    model: float | None = None
    source_model: str | None = None
    rel_diff_model: float | None = None


def _with_model(check: Check, value, source: str) -> Check:
    """The check with its lumped-model column filled (relative to its reference column)."""
    if value is None or not np.isfinite(value):
        return check
    return dataclasses.replace(check, model=float(value), source_model=source,
                               rel_diff_model=_rel(float(value), _reference_value(check)))


def _reference_value(check: Check) -> float | None:
    """The value of the column the row's relative differences refer to (QS, else MoM, else none:
    a handbook value is never the reference)."""
    return {"quasi_static": check.quasi_static, "mom": check.mom}.get(check.reference)


def _with_circuit(check: Check, value, source: str) -> Check:
    """The check with its circuit-solver column filled (relative to its reference column)."""
    if value is None or not np.isfinite(value):
        return check
    return dataclasses.replace(check, circuit=float(value), source_circuit=source,
                               rel_diff_circuit=_rel(float(value), _reference_value(check)))


@dataclass(frozen=True)
class MeshRun:
    """One mesh of the convergence study."""

    label: str  # "coarse", "sweep" or "fine"
    target_m: float
    segments: int
    winding_segment_m: float
    segment_over_pitch: float
    floor_hz: float
    rules: tuple = ()


@dataclass(frozen=True)
class Convergence:
    """L and R of one tap on the three meshes at one frequency.

    ``inductance_h``/``resistance_ohm`` are the series values with the fitted shunt capacitance
    removed, in the order of :attr:`ValidationResult.meshes`; spreads are (max − min) / the sweep
    mesh's value.
    """

    tap: int
    frequency_hz: float
    inductance_h: np.ndarray
    apparent_inductance_h: np.ndarray
    resistance_ohm: np.ndarray
    inductance_spread: float
    resistance_spread: float
    extrapolated_inductance_h: float | None
    observed_order: float | None
    #: Richardson outcome: code and parameters (see :class:`simloop.reference.RichardsonResult`),
    #: worded by :func:`simloop.report_validate.trend_text`.
    trend_code: str
    trend_params: dict


@dataclass(frozen=True)
class AverageGain:
    """Average gain test of one tap driven alone (others open), lossless wire, free space."""

    tap: int
    frequency_hz: float
    agt: float
    radiated_power_w: float
    input_power_w: float
    input_resistance_ohm: float
    accepted: bool


@dataclass(frozen=True)
class Note:
    """A remark on one check row: a code and the numbers behind it, worded by
    :func:`simloop.report_validate.note_text` (codes listed there)."""

    code: str
    params: dict


def _note(code: str, **params) -> Note:
    return Note(code, params)


@dataclass(frozen=True)
class Reason:
    """One reason of a verdict: its status, a code and the numbers behind it.

    Worded by :func:`simloop.report_validate.reason_text`; the codes and their parameters are
    listed there.
    """

    status: str  # "ok" | "caution" | "unreliable"
    code: str
    params: dict


@dataclass(frozen=True)
class Verdict:
    status: str  # "ok" | "caution" | "unreliable"
    reasons: tuple[Reason, ...]


@dataclass(frozen=True)
class ValidationResult:
    """Everything ``simloop validate`` reports.

    Attributes
    ----------
    checks : tuple of Check
    meshes : tuple of MeshRun
        Convergence meshes, coarse to fine (empty when convergence was not run).
    convergence : tuple of Convergence
    average_gain : tuple of AverageGain
    verdict : Verdict
    tap_verdicts : dict
        Tap turns → Verdict.
    check_frequencies_hz : ndarray
        Frequencies of the per-frequency checks (inside the sweep's fit window). [Hz]
    convergence_frequency_hz : float or None
    agt_frequency_hz : float or None
    """

    name: str
    tap_turns: tuple[int, ...]
    style: str
    ground: str
    checks: tuple[Check, ...]
    meshes: tuple[MeshRun, ...]
    convergence: tuple[Convergence, ...]
    average_gain: tuple[AverageGain, ...]
    verdict: Verdict
    tap_verdicts: dict
    check_frequencies_hz: np.ndarray
    convergence_frequency_hz: float | None
    agt_frequency_hz: float | None
    inductance_h: np.ndarray
    inductance_error: np.ndarray
    quasi_static_inductance_h: np.ndarray
    self_resonance_hz: np.ndarray
    sweep_mesh: MeshRun
    notes: tuple[str, ...] = ()
    seconds: float = 0.0
    q_used_by_tune: str = Q_USED_BY_TUNE


# ------------------------------------------------------------------------------------------------
# Helpers
# ------------------------------------------------------------------------------------------------


def _rel(value, ref):
    if value is None or ref is None or not np.isfinite(value) or not np.isfinite(ref) or ref == 0:
        return None
    return float(value / ref - 1.0)


def _check(quantity, unit, tap, f, mom, qs, hb, src_mom, src_qs, src_hb, flag=None, notes=()):
    mom = None if mom is None or not np.isfinite(mom) else float(mom)
    qs = None if qs is None or not np.isfinite(qs) else float(qs)
    hb = None if hb is None or not np.isfinite(hb) else float(hb)
    ref_name, ref = ("quasi_static", qs) if qs is not None else (("mom", mom) if mom is not None else (None, None))
    return Check(
        quantity=quantity, unit=unit, tap=int(tap), frequency_hz=None if f is None else float(f),
        mom=mom, quasi_static=qs, handbook=hb,
        source_mom=src_mom if mom is not None or flag else None,
        source_quasi_static=src_qs if qs is not None else None,
        source_handbook=src_hb if hb is not None else None,
        reference=ref_name,
        rel_diff_mom=_rel(mom, ref) if ref_name == "quasi_static" else None,
        rel_diff_handbook=_rel(hb, ref),
        flag=flag, notes=tuple(notes),
    )


def _quietly(fn, *args, **kwargs):
    """Call a reference formula, returning (value, warning texts) instead of raising warnings."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        value = fn(*args, **kwargs)
    return value, [str(w.message) for w in caught]


def _mesh_run(label, mesh: Mesh, geom: LoopGeometry, spec) -> MeshRun:
    rules = mesh_rules(mesh, geom, spec.sweep.start_hz, spec.sweep.stop_hz, spec.winding.turns)
    return MeshRun(label=label, target_m=mesh.target_m, segments=mesh.n_segments,
                   winding_segment_m=mesh.winding_segment_m,
                   segment_over_pitch=mesh.winding_segment_m / geom.pitch_m,
                   floor_hz=mesh.floor_frequency_hz(FLOOR_TRUSTED), rules=tuple(rules))


def _turn_sides(spec, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Centre-line sides (width, height) of the first n turns. [m]"""
    return turn_sides_m(spec.winding.style, spec.frame.width_m, spec.frame.height_m, spec.winding.pitch_m, n)


def _handbook_inductance(spec, n: int) -> tuple[float, str]:
    w, h = spec.frame.width_m, spec.frame.height_m
    d = spec.wire.diameter_m
    p = spec.winding.pitch_m
    if n == 1:
        return float(reference.inductance_rectangle_terman1943(w, h, d)), \
            "Terman 1943 sec. 2 / Grover 1946: single-turn rectangle"
    if spec.winding.style == "stacked":
        s = 0.5 * (w + h)
        sheet = float(reference.inductance_square_coil_grover1946(s, n, n * p))
        src = (f"Grover 1946 square-coil current-sheet formula (side {s * 1e3:.0f} mm"
               f"{', square of equal perimeter' if abs(w - h) > SQUARE_TOL_M else ''}, length N·pitch) "
               f"+ Rosa 1908 round-wire correction A + B")
        return sheet + rosa_round_wire_correction(4 * s, n, p, d), src
    ws, hs = _turn_sides(spec, n)
    d_out = 0.5 * (ws[0] + hs[0]) + d
    d_in = 0.5 * (ws[-1] + hs[-1]) - d
    src = ("Mohan et al. 1999 current-sheet expression for square spirals (empirical, fitted to planar "
           "spirals; coefficients approximate, to be confirmed against the paper)"
           + (", mean side of the rectangle" if abs(w - h) > SQUARE_TOL_M else ""))
    return inductance_square_spiral_current_sheet(d_out, d_in, n), src


def _turn_area_and_perimeter(spec, n: int) -> tuple[float, float]:
    """Mean area and mean perimeter of the first n turns (handbook: N·A, N·P). [m², m]"""
    ws, hs = _turn_sides(spec, n)
    return float(np.mean(ws * hs)), float(np.mean(2 * (ws + hs)))


def _path_length(starts, ends) -> float:
    return float(np.linalg.norm(np.asarray(ends) - np.asarray(starts), axis=1).sum())


# ------------------------------------------------------------------------------------------------
# The study
# ------------------------------------------------------------------------------------------------


_SRC_QS_L = "partial-inductance sum of the tap's current path incl. leads (Grover 1946, Ruehli 1972)"
_SRC_QS_RR = "magnetic moment of the current path, η0 k⁴ |A|² / 6π"
_SRC_HB_RR = "Balanis 2016 ch. 5, 320π⁴(NA/λ²)², mean turn area"


@dataclass(frozen=True)
class _TapFormulas:
    """The frequency-independent parts of one tap's quasi-static and handbook values."""

    turns: int
    l_qs: float
    l_hb: float
    src_hb: str
    l_sheet: float | None
    area_vector_m2: np.ndarray
    mean_area_m2: float
    mean_perimeter_m: float
    path_length_m: float
    winding_length_m: float
    proximity_factor: float


def _tap_formulas(spec, sweep: SweepResult, i: int) -> _TapFormulas:
    geom = sweep.geometry
    n = sweep.tap_turns[i]
    starts, ends = geom.current_path(i)
    l_hb, src_hb = _handbook_inductance(spec, n)
    sheet = None
    if spec.winding.style == "stacked" and n > 1:
        sheet = float(reference.inductance_square_coil_grover1946(
            0.5 * (spec.frame.width_m + spec.frame.height_m), n, n * spec.winding.pitch_m))
    area, perimeter = _turn_area_and_perimeter(spec, n)
    return _TapFormulas(
        turns=n, l_qs=float(sweep.quasi_static_inductance_h[i]), l_hb=l_hb, src_hb=src_hb, l_sheet=sheet,
        area_vector_m2=magnetic_moment_area_m2(starts, ends), mean_area_m2=area, mean_perimeter_m=perimeter,
        path_length_m=_path_length(starts, ends), winding_length_m=winding_length_to_turn(geom, n),
        proximity_factor=float(proximity_factors(geom)[i]))


def _formula_resistances(sweep: SweepResult, i: int, tf: _TapFormulas, f: float) -> dict:
    """Quasi-static and handbook loss and radiation resistances of tap i at f. [Ω]"""
    geom = sweep.geometry
    rho = sweep.resistivity_ohm_m
    image = 2.0 if sweep.environment.ground == "perfect" else 1.0  # h ≪ λ, horizontal moment
    rr_hb, warn = _quietly(reference.radiation_resistance_small_loop, tf.mean_area_m2, f, tf.turns,
                           tf.mean_perimeter_m)
    out = {"rr_qs": image * radiation_resistance_moment(tf.area_vector_m2, f), "rr_hb": image * float(rr_hb),
           "warn": warn, "qs_skin": 0.0, "hb_skin": 0.0, "prox": 0.0, "hb_prox": 0.0}
    if rho is not None:
        r_per_m = float(reference.resistance_per_length_round_wire(geom.wire_radius_m, f, rho))
        rs_surface = float(np.sqrt(np.pi * f * reference.MU0 * rho))
        out["qs_skin"] = r_per_m * tf.path_length_m
        out["hb_skin"] = tf.turns * tf.mean_perimeter_m * rs_surface / (2 * np.pi * geom.wire_radius_m)
        out["prox"] = float(proximity_resistance(geom, f, rho)[0, i, i])
        out["hb_prox"] = out["hb_skin"] * (1 + tf.proximity_factor)
    return out


_SRC_CIRCUIT = "circuit solver (PEEC of the same path; series branch, fitted shunt C removed)"
_SRC_MODEL = "lumped L-C model fitted to the circuit solver (what tune and couple use)"


def _circuit_values(circuits, sweep: SweepResult, f: float) -> list[dict]:
    """Per tap: the circuit solver's series L, R_rad, wire loss and Q at f (keys as Check.quantity).

    Like the MoM column: series branch with the fitted shunt C removed; radiation resistance from
    the lossless circuit's series branch, wire loss as lossy − lossless."""
    with_prox, skin_only, lossless = circuits
    cap = sweep.model.capacitance_f
    w = 2 * np.pi * f
    zs0 = series_branch(np.linalg.inv(skin_only.solve(f).z_ohm), cap, f)
    zsp = series_branch(np.linalg.inv(with_prox.solve(f).z_ohm), cap, f)
    zsl = series_branch(np.linalg.inv(lossless.solve(f).z_ohm), cap, f)
    out = []
    for i in range(zs0.shape[0]):
        rr = float(zsl[i, i].real)
        out.append({"L": zs0[i, i].imag / w, "R_rad": rr, "R_loss skin": zs0[i, i].real - rr,
                    "R_loss skin+prox": zsp[i, i].real - rr, "Q skin": zs0[i, i].imag / zs0[i, i].real,
                    "Q skin+prox": zsp[i, i].imag / zsp[i, i].real, "Q tune": zsp[i, i].imag / zsp[i, i].real})
    return out


def _add_circuit(rows: list[Check], values: dict | None) -> list[Check]:
    if not values:
        return rows
    return [_with_circuit(r, values.get(r.quantity), _SRC_CIRCUIT) for r in rows]


def _with_open_turn_note(check: Check, open_turns: int) -> Check:
    """A mid tap's proximity-loss row notes that only the circuit solver counts the eddy loss of
    the open turns beyond the tap (Smith 1972: a wire with no net current still carries eddy
    currents); the quasi-static and handbook columns count the tap's own turns."""
    if open_turns <= 0 or check.quantity != "R_loss skin+prox" or check.circuit is None:
        return check
    return dataclasses.replace(check, notes=check.notes + (_note("open-turn-eddy", open_turns=open_turns),))


def _frequency_checks(sweep: SweepResult, i: int, tf: _TapFormulas, f: float, lossy, lossless,
                      agt: float | None) -> list[Check]:
    """L, radiation resistance, wire loss and Q of tap i at one MoM frequency."""
    n = tf.turns
    w = 2 * np.pi * f
    cap = sweep.model.capacitance_f
    ground = sweep.environment.ground
    perfect = ground == "perfect"
    ok_l = lossy is not None and not isinstance(lossy, SolverError)
    ok_o = lossless is not None and not isinstance(lossless, SolverError)
    zs_l = series_branch(np.linalg.inv(lossy.z), cap, f)[i, i] if ok_l else None
    zs_o = series_branch(np.linalg.inv(lossless.z), cap, f)[i, i] if ok_o else None
    fr = _formula_resistances(sweep, i, tf, f)
    rows = []
    # Inductance of the series branch
    l_app = lossy.z[i, i].imag / w if ok_l else None
    rows.append(_check("L", "H", n, f, None if zs_l is None else zs_l.imag / w, tf.l_qs, tf.l_hb,
                       "MoM, series branch (fitted shunt C removed)", _SRC_QS_L, tf.src_hb,
                       notes=() if l_app is None else [_note("apparent-inductance", inductance_h=l_app)]))
    # Radiation resistance: free space; doubled by a perfect ground; real ground adds its loss
    r_in0 = None if zs_o is None else zs_o.real
    if ground == "real":
        flag, note = None, _note("real-ground-radiation")
        if r_in0 is not None and r_in0 < GROUND_RESOLUTION_OHM:
            flag = BELOW_RESOLUTION
            note = _note("below-ground-resolution", resistance_ohm=float(r_in0), resolution_ohm=GROUND_RESOLUTION_OHM)
            r_in0 = None
        rows.append(Check("R_rad+ground", "ohm", n, f, r_in0, None, None, "MoM, lossless wire, series branch",
                          None, None, None, None, None, flag=flag, notes=(note,)))
    else:
        tail = " × 2 (image)" if perfect else ""
        rows.append(_check("R_rad", "ohm", n, f, r_in0, fr["rr_qs"], fr["rr_hb"],
                           "MoM, lossless wire, series branch" + (" over perfect ground" if perfect else ""),
                           _SRC_QS_RR + tail, _SRC_HB_RR + tail, notes=[_note("formula-warning", message=w) for w in fr["warn"]]))
        if agt is not None and r_in0 is not None and not perfect:
            rows.append(_check("R_rad far field", "ohm", n, f, agt * r_in0, fr["rr_qs"], fr["rr_hb"],
                               "MoM far field: AGT × lossless input resistance", _SRC_QS_RR, _SRC_HB_RR,
                               notes=[_note("power-ratio", ratio=agt)]))
    # Wire loss: skin effect only (what NEC models), then with the proximity effect
    rho = sweep.resistivity_ohm_m
    if rho is not None:
        r_loss = zs_l.real - zs_o.real if (zs_l is not None and zs_o is not None) else None
        rows.append(_check(
            "R_loss skin", "ohm", n, f, r_loss, fr["qs_skin"], fr["hb_skin"],
            "MoM: lossy − lossless series resistance (NEC conductivity load: skin effect only)",
            "exact round-wire skin effect (Ramo et al. 1994 sec. 5.6) × length of the current path",
            "surface resistance √(πfμ0ρ)/(2πa) × N × mean turn perimeter (no leads)",
            notes=[_note("path-length", path_m=tf.path_length_m, winding_m=tf.winding_length_m)]))
        rows.append(_check(
            "R_loss skin+prox", "ohm", n, f, None if r_loss is None else r_loss + fr["prox"],
            fr["qs_skin"] + fr["prox"], fr["hb_prox"],
            "MoM skin loss + proximity term of simloop.losses (NEC has no proximity effect)",
            "exact skin effect × path length + Smith 1972 proximity factor on the winding",
            "Smith 1972: (N P/(2πa)) R_s (1 + R_p/R_0)",
            notes=[_note("proximity-factor", factor=tf.proximity_factor, turns=n,
                         spacing_ratio=sweep.geometry.pitch_m / (2 * sweep.geometry.wire_radius_m))]))
    # Q of the tuned circuit: ωL/R_s of the series branch
    q_note = [_note("q-includes-ground")] if ground == "real" else []
    ok_q = zs_l is not None and zs_l.real > 0
    rows.append(_check("Q skin", "-", n, f, zs_l.imag / zs_l.real if ok_q else None,
                       w * tf.l_qs / (fr["qs_skin"] + fr["rr_qs"]), w * tf.l_hb / (fr["hb_skin"] + fr["rr_hb"]),
                       "MoM series branch, ωL/R_s (skin effect only)",
                       "ωL_qs / (skin loss + radiation), quasi-static",
                       "ωL_hb / (surface-resistance loss + Balanis R_rad)", notes=q_note))
    if rho is not None:
        rows.append(_check("Q skin+prox", "-", n, f, zs_l.imag / (zs_l.real + fr["prox"]) if ok_q else None,
                           w * tf.l_qs / (fr["qs_skin"] + fr["prox"] + fr["rr_qs"]),
                           w * tf.l_hb / (fr["hb_prox"] + fr["rr_hb"]),
                           "MoM series branch + proximity term of simloop.losses (NEC has no proximity "
                           "effect)",
                           "ωL_qs / (skin + proximity loss + radiation), quasi-static",
                           "ωL_hb / (Smith 1972 loss + Balanis R_rad)", notes=q_note))
    return rows


def _band_q_checks(spec, sweep: SweepResult, i: int, tf: _TapFormulas) -> list[Check]:
    """The Q tune uses, at the bottom, middle and top of the band: fitted model + proximity."""
    band = [spec.sweep.start_hz, 0.5 * (spec.sweep.start_hz + spec.sweep.stop_hz), spec.sweep.stop_hz]
    mp = sweep.model_proximity
    r_model = (mp if mp is not None else sweep.model).series_resistance(band)[:, i, i]
    l_tune = mp.inductance_h[i, i] if mp is not None else sweep.inductance_h[i]
    rows = []
    for b, f in enumerate(band):
        w = 2 * np.pi * f
        fr = _formula_resistances(sweep, i, tf, f)
        r_tot = r_model[b] + (0.0 if mp is not None else fr["prox"])
        row = _check("Q tune", "-", tf.turns, f, None,
                     w * tf.l_qs / (fr["qs_skin"] + fr["prox"] + fr["rr_qs"]),
                     w * tf.l_hb / (fr["hb_prox"] + fr["rr_hb"]),
                     None, "ωL_qs / (skin + proximity loss + radiation), quasi-static",
                     "ωL_hb / (Smith 1972 loss + Balanis R_rad)")
        rows.append(_with_model(row, w * l_tune / r_tot if r_tot > 0 else None,
                                _SRC_MODEL + " with its proximity loss: ωL0/R_s, the Q tune uses"))
    return rows


def _srf_check(spec, sweep: SweepResult, i: int, srf_solves: dict) -> Check:
    """Self-resonance by direct MoM either side of the circuit solver's, and Medhurst's."""
    f_model = float(sweep.self_resonance_hz[i])
    srf_mom, notes = None, []
    if np.isfinite(f_model):
        lo_f, hi_f = f_model * (1 - SRF_BRACKET), f_model * (1 + SRF_BRACKET)
        a = next((s for g, s in srf_solves.items() if abs(g / lo_f - 1) < SRF_MERGE_REL), None)
        b = next((s for g, s in srf_solves.items() if abs(g / hi_f - 1) < SRF_MERGE_REL), None)
        if a is None or b is None or isinstance(a, SolverError) or isinstance(b, SolverError):
            notes.append(_note("srf-solves-missing"))
        else:
            g = [2 * np.pi * s.frequency_hz * (1 / s.z[i, i]).imag for s in (a, b)]  # ω·Im Y_in ≈ ω²C − 1/L
            w2 = [(2 * np.pi * s.frequency_hz) ** 2 for s in (a, b)]
            if g[0] < 0 < g[1]:
                srf_mom = float(np.sqrt(w2[0] - g[0] * (w2[1] - w2[0]) / (g[1] - g[0])) / (2 * np.pi))
                notes.append(_note("srf-model", frequency_hz=f_model))
            else:
                notes.append(_note("srf-not-bracketed", low_hz=lo_f, high_hz=hi_f, frequency_hz=f_model,
                                   bracket=SRF_BRACKET))
    else:
        notes.append(_note("srf-none"))
    hb_srf = None
    if spec.winding.style == "stacked" and spec.winding.turns > 1:
        big_n = spec.winding.turns
        d_eq = 2 * (spec.frame.width_m + spec.frame.height_m) / np.pi
        c_med, warn = _quietly(reference.self_capacitance_medhurst1947, big_n * spec.winding.pitch_m, d_eq)
        l_full, _ = _handbook_inductance(spec, big_n)
        hb_srf = float(1 / (2 * np.pi * np.sqrt(l_full * float(c_med))))
        notes += [_note("medhurst", capacitance_f=float(c_med))] + [_note("formula-warning", message=w) for w in warn]
    return _check("SRF", "Hz", sweep.tap_turns[i], None, srf_mom, None, hb_srf,
                  "direct MoM, zero of Im Y_in bracketed ±4 % around the circuit solver's resonance", None,
                  "Medhurst 1947 self-capacitance with the handbook L" if hb_srf else None, notes=notes)


def _average_gains(ff, sweep: SweepResult, f: float):
    """AGT of each tap driven alone (others open), by superposition of the shorted excitations."""
    if isinstance(ff, SolverError):
        return [], {}, [f"power balance (radiated against accepted power) not run: {ff}"]
    rows, by_tap, notes = [], {}, []
    z = np.linalg.inv(ff.y_raw)  # as solved, not symmetrised: the exact open-circuit drive
    for i, n in enumerate(sweep.tap_turns):
        v = z[:, i]  # port voltages for 1 A into port i and none into the others
        e_t = np.tensordot(v, ff.e_theta_v, axes=1)
        e_p = np.tensordot(v, ff.e_phi_v, axes=1)
        p_in = 0.5 * float(z[i, i].real)  # ½ Re(V I*), I = 1 A
        if p_in <= 0:
            notes.append(f"tap {n}: lossless input resistance {z[i, i].real:.3e} Ω is not positive; no power balance")
            continue
        agt, p_rad = average_gain(e_t, e_p, ff.theta_deg, ff.phi_deg, p_in)
        rows.append(AverageGain(n, f, agt, p_rad, p_in, float(z[i, i].real), AGT_ACCEPT[0] <= agt <= AGT_ACCEPT[1]))
        by_tap[i] = agt
    return rows, by_tap, notes


def _check_frequencies(sweep: SweepResult) -> list[float]:
    fit = np.sort(np.asarray(sweep.model.fit_hz, dtype=float))
    picks = [fit[0], fit[len(fit) // 2], fit[-1]]
    out = []
    for f in picks:
        if not any(same_frequency(f, g) for g in out):
            out.append(float(f))
    return out


def run_validate(spec, sweep: SweepResult, *, workers: int | None = None,
                 cache: SolveCache | None = None, progress=None,
                 convergence: bool = True) -> ValidationResult:
    """Validate a sweep: MoM against the quasi-static model and handbook formulas, per tap.

    Parameters
    ----------
    spec : simloop.spec.Spec
    sweep : SweepResult
        The sweep of the same spec (its mesh, fitted model and environment are re-used).
    workers : int, optional
        Worker processes for the extra MoM solves.
    cache : SolveCache, optional
        Re-uses the sweep's solves (the fit-window frequencies are checked again) and stores the
        new ones.
    progress : callable, optional
        ``progress(stage, done, total)``.
    convergence : bool
        Rerun the MoM on a coarser and a finer mesh.

    Returns
    -------
    ValidationResult
    """
    t_start = time.monotonic()
    planned = _plan_solves(sweep, convergence)
    results = solve_many(planned.requests, workers=workers, cache=cache,
                         progress=(lambda d, t: progress("validate", d, t)) if progress else None)
    solved = _collect_solves(sweep, planned, results)
    notes = planned.notes + solved.notes
    agt_rows, agt_by_tap, agt_notes = (_average_gains(solved.far_field, sweep, planned.agt_hz)
                                       if planned.mom_ok else ([], {}, []))
    notes += agt_notes
    checks = tuple(_all_checks(spec, sweep, planned, solved, agt_by_tap))
    if sweep.environment.ground == "real" and any(c.flag == BELOW_RESOLUTION for c in checks):
        notes.append("over real ground the lossless-wire input resistance (radiation + ground loss) is "
                     "below the solver's resolution: radiation resistance not validated there; the "
                     "power balance ran in free space")
    meshes: list[MeshRun] = []
    conv: list[Convergence] = []
    if planned.convergence is not None:
        meshes, conv, conv_notes = _convergence(spec, sweep, planned.convergence, solved.convergence)
        notes += conv_notes
    elif convergence:
        notes.append("mesh convergence needs three solvable meshes; not assessed")
    verdict, tap_verdicts = _verdict(sweep, checks, conv, agt_rows, convergence and planned.mom_ok,
                                     planned.convergence, planned.mom_ok)
    return ValidationResult(
        name=sweep.name,
        tap_turns=tuple(sweep.tap_turns),
        style=spec.winding.style,
        ground=sweep.environment.ground,
        checks=checks,
        meshes=tuple(meshes),
        convergence=tuple(conv),
        average_gain=tuple(agt_rows),
        verdict=verdict,
        tap_verdicts=tap_verdicts,
        check_frequencies_hz=np.array(planned.frequencies_hz),
        convergence_frequency_hz=None if planned.convergence is None else planned.convergence["frequency_hz"],
        agt_frequency_hz=None if isinstance(solved.far_field, SolverError) else planned.agt_hz,
        inductance_h=sweep.inductance_h,
        inductance_error=np.asarray(sweep.inductance_error, dtype=float),
        quasi_static_inductance_h=np.asarray(sweep.quasi_static_inductance_h, dtype=float),
        self_resonance_hz=np.asarray(sweep.self_resonance_hz, dtype=float),
        sweep_mesh=_mesh_run("sweep", sweep.mesh, sweep.geometry, spec),
        notes=tuple(notes + ([sweep.window_note] if sweep.window_note else [])),
        seconds=time.monotonic() - t_start,
    )


@dataclass
class _PlannedSolves:
    """Every extra MoM solve of a validation, planned up front to run in one worker pool, and
    where each check finds its solve (indices into ``requests``)."""

    frequencies_hz: list
    mom_ok: bool
    agt_hz: float
    requests: list = field(default_factory=list)
    index: dict = field(default_factory=dict)
    lossy: dict = field(default_factory=dict)
    lossless: dict = field(default_factory=dict)
    far_field: int | None = None
    srf: dict = field(default_factory=dict)
    convergence: dict | None = None
    convergence_index: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)

    def add(self, m, e, f, kind="ports") -> int:
        key = (id(m), e, round(float(f), 3), kind)
        if key not in self.index:
            self.index[key] = len(self.requests)
            self.requests.append(SolveRequest(m, e, float(f), kind, AGT_STEP_DEG))
        return self.index[key]


def _plan_solves(sweep: SweepResult, convergence: bool) -> _PlannedSolves:
    """Lossy and lossless solves at the check frequencies, the far field of the power balance, the
    brackets of each self-resonance and the convergence meshes."""
    mesh, env = sweep.mesh, sweep.environment
    freqs = _check_frequencies(sweep)
    # The MoM is checked where it can be: at most MOM_MAX_SEGMENTS, above its absolute floor.
    mom_ok = mesh.n_segments <= MOM_MAX_SEGMENTS
    f_floor_abs = mesh.floor_frequency_hz(FLOOR_ABSOLUTE)
    p = _PlannedSolves(freqs, mom_ok, max(freqs[-1], mesh.floor_frequency_hz(FLOOR_TRUSTED)))
    mom_freqs = [f for f in freqs if f >= f_floor_abs] if mom_ok else []
    if not mom_ok:
        p.notes.append(f"no MoM column: {mesh.n_segments} segments exceed the {MOM_MAX_SEGMENTS} a direct "
                       f"MoM solve is attempted for; the circuit solver is checked against the formulas")
    elif len(mom_freqs) < len(freqs):
        p.notes.append(f"MoM column empty at the check frequencies below {f_floor_abs / 1e6:.3f} MHz, where "
                       f"segments are shorter than 5e-5 λ (the solver's floor; trusted above "
                       f"{mesh.floor_frequency_hz(FLOOR_TRUSTED) / 1e6:.3f} MHz)")
    p.lossy = {f: p.add(mesh, env, f) for f in mom_freqs}
    if mom_ok:
        p.far_field = p.add(mesh, Environment(wire_conductivity_s_m=None), p.agt_hz, "far_field")
    if sweep.resistivity_ohm_m is None:
        p.lossless = dict(p.lossy)
    else:
        lossless_env = dataclasses.replace(env, wire_conductivity_s_m=None)
        p.lossless = {f: p.add(mesh, lossless_env, f) for f in mom_freqs
                      if not (env.ground == "free-space" and f == p.agt_hz)}
    # Direct MoM self-resonance: bracket either side of each distinct circuit prediction.
    srf_model = np.asarray(sweep.self_resonance_hz, dtype=float)
    for f in srf_model[np.isfinite(srf_model)] if mom_ok else []:
        for g in (f * (1 - SRF_BRACKET), f * (1 + SRF_BRACKET)):
            if g >= f_floor_abs and all(abs(g / b - 1) > SRF_MERGE_REL for b in p.srf):
                p.srf[float(g)] = p.add(mesh, env, g)
    p.convergence = _convergence_plan(sweep) if convergence and mom_ok else None
    if p.convergence is not None:
        p.notes += p.convergence["notes"]
        p.convergence_index = {label: p.add(m, env, p.convergence["frequency_hz"])
                               for label, m in p.convergence["meshes"]}
    return p


@dataclass(frozen=True)
class _Solved:
    lossy: dict
    lossless: dict
    far_field: object
    srf: dict
    convergence: dict
    notes: list


def _collect_solves(sweep: SweepResult, p: _PlannedSolves, results) -> _Solved:
    """The results by purpose; failed solves become notes (their checks are omitted)."""
    ff = results[p.far_field] if p.far_field is not None else SolverError("no MoM: mesh too large")
    lossless = {f: results[j] for f, j in p.lossless.items()}
    if sweep.environment.ground == "free-space" and sweep.resistivity_ohm_m is not None \
            and not isinstance(ff, SolverError):
        lossless[p.agt_hz] = ff  # the same lossless free-space factorisation
    failed = sorted({str(r) for r in results if isinstance(r, SolverError)})
    return _Solved(lossy={f: results[j] for f, j in p.lossy.items()}, lossless=lossless, far_field=ff,
                   srf={g: results[j] for g, j in p.srf.items()},
                   convergence={lb: results[j] for lb, j in p.convergence_index.items()},
                   notes=[f"solve failed, checks that need it are omitted: {m}" for m in failed])


def _circuit_columns(sweep: SweepResult):
    """The circuit solver's values per frequency (memoised) and its L0 per tap."""
    circuits = None if sweep.circuit is None else (
        sweep.circuit, sweep.circuit.with_proximity(False),
        dataclasses.replace(sweep.circuit, resistivity_ohm_m=None))
    cache_c: dict[float, list] = {}

    def circ_values(f):
        if circuits is None:
            return [None] * len(sweep.tap_turns)
        if f not in cache_c:
            cache_c[f] = _circuit_values(circuits, sweep, f)
        return cache_c[f]

    circ_l0 = [None if sweep.circuit is None else {"L0": float(sweep.circuit_inductance_h[i, i])}
               for i in range(len(sweep.tap_turns))]
    return circ_values, circ_l0


def _all_checks(spec, sweep: SweepResult, p: _PlannedSolves, solved: _Solved, agt_by_tap: dict) -> list[Check]:
    """Every row of the comparison, tap by tap: L0, the per-frequency rows, the band Q and SRF."""
    circ_values, circ_l0 = _circuit_columns(sweep)
    srf_model = np.asarray(sweep.self_resonance_hz, dtype=float)
    checks: list[Check] = []
    for i, n in enumerate(sweep.tap_turns):
        tf = _tap_formulas(spec, sweep, i)
        l0_notes = [_note("sweep-error", error=float(sweep.inductance_error[i]))]
        if tf.l_sheet is not None:
            l0_notes.append(_note("sheet-without-round-wire", inductance_h=tf.l_sheet))
        l0_row = _check("L0", "H", n, None, None, tf.l_qs, tf.l_hb, None, _SRC_QS_L, tf.src_hb, notes=l0_notes)
        l0_row = _with_model(l0_row, float(sweep.inductance_h[i]), _SRC_MODEL + ", L0")
        checks.append(_add_circuit([l0_row], circ_l0[i])[0])
        open_turns = spec.winding.turns - n
        for f in p.frequencies_hz:
            rows = _add_circuit(_frequency_checks(sweep, i, tf, f, solved.lossy.get(f), solved.lossless.get(f),
                                                  agt_by_tap.get(i) if f == p.agt_hz else None),
                                circ_values(f)[i])
            checks += [_with_open_turn_note(r, open_turns) for r in rows]
        checks += [_add_circuit([r], circ_values(r.frequency_hz)[i])[0] for r in _band_q_checks(spec, sweep, i, tf)]
        checks.append(_add_circuit([_srf_check(spec, sweep, i, solved.srf)], {"SRF": srf_model[i]})[0])
    return checks


def _convergence_plan(sweep: SweepResult) -> dict | None:
    """Coarser and finer meshes and one common frequency above every mesh's floor."""
    geom = sweep.geometry
    notes = []
    candidates = [("coarse", build_mesh(geom, COARSE_FACTOR * sweep.mesh.target_m, sweep.mesh.quality)),
                  ("sweep", sweep.mesh),
                  ("fine", build_mesh(geom, FINE_FACTOR * sweep.mesh.target_m, sweep.mesh.quality))]
    for label, m in candidates:
        if m.shortest_m < KERNEL_WARN * m.radius_m or m.n_segments > MAX_SEGMENTS:
            return None
    srf = float(np.nanmin(sweep.self_resonance_hz)) if np.any(np.isfinite(sweep.self_resonance_hz)) else None
    f_floor = max(m.floor_frequency_hz(FLOOR_TRUSTED) for _, m in candidates)
    f_floor_abs = max(m.floor_frequency_hz(FLOOR_ABSOLUTE) for _, m in candidates)
    near_srf = False
    if srf is None or f_floor <= WINDOW_TOP * srf:
        f_c = f_floor
    else:
        f_c = max(f_floor_abs, WINDOW_TOP * srf)
        near_srf = f_c > WINDOW_TOP * srf * (1 + FREQUENCY_MATCH_REL)
        notes.append(f"mesh convergence compared at {f_c / 1e6:.3f} MHz = {f_c / srf:.2f} × self-resonance: "
                     f"the finest mesh's floor (7e-5 λ) lies at {f_floor / 1e6:.3f} MHz, "
                     + ("so the floor was relaxed towards 5e-5 λ" if f_c < f_floor else "")
                     + (" and the shunt-capacitance correction is large there" if near_srf else ""))
    return {"meshes": candidates, "frequency_hz": float(f_c), "near_srf": near_srf,
            "srf_ratio": None if srf is None else f_c / srf, "notes": notes}


def _convergence(spec, sweep: SweepResult, plan: dict, solved: dict):
    """L and R of each tap on the three meshes at the plan's frequency."""
    geom, model = sweep.geometry, sweep.model
    f_c = plan["frequency_hz"]
    failed = [f"{lb} mesh: {r}" for lb, r in solved.items() if isinstance(r, SolverError)]
    if failed:
        return [], [], [f"mesh convergence not assessed, a solve failed: {'; '.join(failed)}"]
    runs = [_mesh_run(label, m, geom, spec) for label, m in plan["meshes"]]
    results = [solved[label] for label, _ in plan["meshes"]]
    segs = np.array([r.winding_segment_m for r in runs])
    w = 2 * np.pi * f_c
    conv = []
    zs = [series_branch(s.y, model.capacitance_f, f_c) for s in results]
    for i, n in enumerate(sweep.tap_turns):
        l_s = np.array([z[i, i].imag / w for z in zs])
        r_s = np.array([z[i, i].real for z in zs])
        l_app = np.array([s.z[i, i].imag / w for s in results])
        spread_l = float((l_s.max() - l_s.min()) / l_s[1])
        spread_r = float((r_s.max() - r_s.min()) / abs(r_s[1]))
        trend = richardson_extrapolation(segs, l_s, RICHARDSON_ORDER, ORDER_RANGE)
        conv.append(Convergence(tap=n, frequency_hz=f_c, inductance_h=l_s, apparent_inductance_h=l_app,
                                resistance_ohm=r_s, inductance_spread=spread_l, resistance_spread=spread_r,
                                extrapolated_inductance_h=trend.estimate, observed_order=trend.observed_order,
                                trend_code=trend.code, trend_params=trend.params))
    return runs, conv, []


def _reason(status: str, code: str, **params) -> Reason:
    return Reason(status, code, params)


def _inductance_verdict(sweep: SweepResult, n: int, rows) -> list[Reason]:
    """Judge a tap's inductance: the circuit column (what the sweep reports) against the
    quasi-static sum, and the MoM of the end tap against the circuit. A mid tap's MoM reads high
    by NEC's junction bias (open wire continuing its path), shown in the table, not judged."""
    out = []
    c_rows = [c for c in rows if c.quantity in ("L0", "L") and c.rel_diff_circuit is not None]
    if c_rows:
        worst = max(c_rows, key=lambda c: abs(c.rel_diff_circuit))
        d = worst.rel_diff_circuit
        for status, limit in (("unreliable", L_CAUTION), ("caution", L_OK)):
            if abs(d) > limit:
                out.append(_reason(status, "circuit-inductance", tap=n, frequency_hz=worst.frequency_hz,
                                   deviation=d, limit=limit))
                break
    m_rows = [c for c in rows if c.quantity == "L" and c.mom is not None and c.circuit is not None]
    if m_rows and n == sweep.tap_turns[-1]:
        worst = max(m_rows, key=lambda c: abs(c.mom / c.circuit - 1))
        d = worst.mom / worst.circuit - 1
        if abs(d) > L_CAUTION:
            out.append(_reason("caution", "mom-inductance-vs-circuit", tap=n, frequency_hz=worst.frequency_hz,
                               deviation=d, limit=L_CAUTION))
    if not c_rows:  # no circuit: the MoM against the quasi-static sum, as before
        l_rows = [c for c in rows if c.quantity in ("L0", "L") and c.rel_diff_mom is not None]
        if l_rows:
            d = max(l_rows, key=lambda c: abs(c.rel_diff_mom)).rel_diff_mom
            for status, limit in (("unreliable", L_CAUTION), ("caution", L_OK)):
                if abs(d) > limit:
                    out.append(_reason(status, "mom-inductance", tap=n, deviation=d, limit=limit))
                    break
    return out


def _mesh_reasons(sweep: SweepResult) -> list[Reason]:
    """The MoM mesh's rules that fail (unreliable) or warn (caution, for the rules that bias L)."""
    out = []
    for r in sweep.rules:
        if r.status == "fail":
            out.append(_reason("unreliable", "mesh-rule-fails", rule=r.key, name=r.name, detail=r.detail))
        elif r.status == "warn" and r.key in MESH_RULES_CAUTION:
            out.append(_reason("caution", "mesh-rule-warns", rule=r.key, name=r.name, detail=r.detail))
    return out


def _sweep_reasons(sweep: SweepResult) -> list[Reason]:
    """Reciprocity of the port matrices and the top of the sweep's fit window."""
    out = []
    worst_asym = max((s.asymmetry for s in sweep.solves), default=0.0)
    if worst_asym > ASYMMETRY_LIMIT:
        out.append(_reason("unreliable", "reciprocity", defect=worst_asym, limit=ASYMMETRY_LIMIT))
    elif worst_asym > ASYMMETRY_CAUTION:
        out.append(_reason("caution", "reciprocity", defect=worst_asym, limit=ASYMMETRY_CAUTION))
    srf_low = np.nanmin(sweep.self_resonance_hz) if np.any(np.isfinite(sweep.self_resonance_hz)) else None
    top = float(np.max(sweep.model.fit_hz))
    if srf_low is not None and top > WINDOW_SLACK * WINDOW_TOP * srf_low:
        out.append(_reason("caution", "fit-above-window", ratio=top / srf_low, window_top=WINDOW_TOP))
    return out


def _loss_reasons(n: int, rows) -> list[Reason]:
    """MoM wire loss against the exact skin-effect loss of the tap's path."""
    loss = [c for c in rows if c.quantity == "R_loss skin" and c.rel_diff_mom is not None]
    if not loss:
        return []
    worst = max(loss, key=lambda c: abs(c.rel_diff_mom))
    if abs(worst.rel_diff_mom) <= R_LOSS_CAUTION:
        return []
    return [_reason("caution", "wire-loss", tap=n, deviation=worst.rel_diff_mom, frequency_hz=worst.frequency_hz)]


def _srf_reasons(sweep: SweepResult, n: int, rows, mom_ok: bool) -> list[Reason]:
    """Direct-MoM self-resonance against the circuit's, judged by its effect at the top of the band."""
    srf = next((c for c in rows if c.quantity == "SRF"), None)
    f_model = sweep.self_resonance_hz[sweep.tap_turns.index(n)]
    if srf is None or not np.isfinite(f_model):
        return []
    if srf.mom is None:
        first = srf.notes[0]
        return [_reason("caution", "srf-not-found", tap=n, note_code=first.code, note_params=first.params)] \
            if mom_ok else []
    # An SRF misfit δ moves the model's |Z| at the top of the band by about
    # 2δ·x/(1 − x), x = (f_stop / f_srf)²: that is what matters for tuning.
    delta = srf.mom / f_model - 1
    x = min((sweep.frequencies_hz.max() / f_model) ** 2, SRF_X_CEILING)
    in_band = 2 * abs(delta) * x / (1 - x)
    if in_band <= SRF_CAUTION:
        return []
    return [_reason("caution", "srf-off", tap=n, srf_hz=srf.mom, deviation=delta, in_band=in_band)]


def _power_balance_reasons(agt_rows) -> list[Reason]:
    out = []
    for a in agt_rows:
        if not AGT_BROKEN[0] <= a.agt <= AGT_BROKEN[1]:
            out.append(_reason("unreliable", "power-balance-broken", tap=a.tap, deviation=a.agt - 1))
        elif not a.accepted:
            out.append(_reason("caution", "power-balance", tap=a.tap, deviation=a.agt - 1,
                               accept=AGT_ACCEPT[1] - 1))
    return out


def _convergence_reasons(conv, plan: dict | None) -> tuple[list[Reason], list[Reason]]:
    """(overall, per-tap) reasons from the mesh-convergence study."""
    overall = []
    if plan["near_srf"]:
        overall.append(_reason("caution", "convergence-near-srf", srf_ratio=plan["srf_ratio"]))
    per_tap = []
    for c in conv:
        for status, limit in (("unreliable", SPREAD_CAUTION), ("caution", SPREAD_OK)):
            if c.inductance_spread > limit:
                per_tap.append(_reason(status, "inductance-spread", tap=c.tap, spread=c.inductance_spread,
                                       limit=limit))
                break
        if c.resistance_spread > R_SPREAD_CAUTION:
            per_tap.append(_reason("caution", "resistance-spread", tap=c.tap, spread=c.resistance_spread))
        if c.extrapolated_inductance_h is not None:
            off = c.inductance_h[1] / c.extrapolated_inductance_h - 1
            if abs(off) > L_OK:
                per_tap.append(_reason("caution", "extrapolation", tap=c.tap, deviation=off))
    return overall, per_tap


_RANK = {"ok": 0, "caution": 1, "unreliable": 2}


def _status(items) -> str:
    return max((r.status for r in items), key=_RANK.get, default="ok")


def _verdict(sweep: SweepResult, checks, conv, agt_rows, convergence_run: bool, plan: dict | None,
             mom_ok: bool = True):
    """ok | caution | unreliable, with the reasons as codes and parameters (see the README).

    Without a MoM (mesh too large to solve) the MoM's mesh rules, convergence and self-resonance
    bracket do not apply: the sweep's numbers come from the circuit solver alone."""
    overall = (_mesh_reasons(sweep) if mom_ok else []) + _sweep_reasons(sweep)
    per_tap: dict[int, list[Reason]] = {n: [] for n in sweep.tap_turns}
    for n in sweep.tap_turns:
        rows = [c for c in checks if c.tap == n]
        per_tap[n] += _inductance_verdict(sweep, n, rows) + _loss_reasons(n, rows) \
            + _srf_reasons(sweep, n, rows, mom_ok)
    for r in _power_balance_reasons(agt_rows):
        per_tap[r.params["tap"]].append(r)
    if convergence_run and conv:
        conv_overall, conv_taps = _convergence_reasons(conv, plan)
        overall += conv_overall
        for r in conv_taps:
            per_tap[r.params["tap"]].append(r)
    elif convergence_run:
        overall.append(_reason("caution", "convergence-not-assessed"))
    elif mom_ok:
        overall.append(_reason("caution", "convergence-not-checked"))
    # (no MoM: nothing of it to converge)

    tap_verdicts = {n: Verdict(_status(items), tuple(items)) for n, items in per_tap.items()}
    everything = overall + [x for items in per_tap.values() for x in items]
    st = _status(everything)
    reasons = tuple(sorted(everything, key=lambda r: -_RANK[r.status]))
    if st == "ok":
        reasons = (_reason("ok", "all-within", inductance=L_OK, spread=SPREAD_OK, power_balance=AGT_ACCEPT[1] - 1,
                           convergence_checked=bool(convergence_run and conv), power_balance_run=bool(agt_rows), mom_run=bool(mom_ok)),)
    return Verdict(st, reasons), tap_verdicts
