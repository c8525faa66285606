"""Writing and printing a validation: ``validation.json`` and the comparison table."""

from __future__ import annotations

import re
from pathlib import Path


from simloop import __version__
from simloop.report import number_or_none, write_json
from simloop.validation import (
    AGT_ACCEPT,
    AGT_STEP_DEG,
    BELOW_RESOLUTION,
    RICHARDSON_ORDER,
    WINDOW_TOP,
    Note,
    Reason,
    ValidationResult,
    Verdict,
)


def _all_within(p: dict) -> str:
    """The ok verdict in words, naming only the checks that ran (older results lack the flags)."""
    parts = [f"every tap's inductance (circuit solver, and MoM where it runs) is within "
             f"{p['inductance'] * 100:g} % of the quasi-static sum"]
    if p.get("convergence_checked", True):
        parts.append(f"the mesh-convergence spread is below {p['spread'] * 100:g} %")
    if p.get("power_balance_run", True):
        parts.append(f"the power balance (radiated over accepted power) is within "
                     f"±{p['power_balance'] * 100:.0f} %")
    if p.get("mom_run", True):
        parts.append("no mesh rule of the MoM warns")
    text = parts[0] if len(parts) == 1 else ", ".join(parts[:-1]) + " and " + parts[-1]
    skipped = [name for key, name in (("convergence_checked", "mesh convergence"),
                                      ("power_balance_run", "power balance")) if not p.get(key, True)]
    return text + (f" ({' and '.join(skipped)} not run: see the notes)" if skipped else "")


def _readable(message: str) -> str:
    """A formula's warning with its long decimals cut to four significant digits."""
    return re.sub(r"\d+\.\d{5,}(?:e[+-]?\d+)?", lambda m: f"{float(m.group()):.4g}", message)


def _where(f) -> str:
    return "L0" if f is None else f"L at {f / 1e6:.3f} MHz"


#: Verdict reason code → its wording from the parameters (:class:`simloop.validation.Reason`).
_REASONS = {
    "mesh-rule-fails": lambda p: f"mesh rule '{p['name']}' fails: {p['detail']}",
    "mesh-rule-warns": lambda p: f"mesh rule '{p['name']}' warns: {p['detail']}",
    "reciprocity": lambda p: (f"port-matrix reciprocity defect {p['defect']:.1%} exceeds {p['limit']:.0%}"
                              if p["status"] == "unreliable" else
                              f"port-matrix reciprocity defect {p['defect']:.1%} (above {p['limit']:.0%})"),
    "fit-above-window": lambda p: (f"the sweep fitted its model up to {p['ratio']:.2f} × self-resonance "
                                   f"(above {p['window_top']}), so its model points are less certain"),
    "circuit-inductance": lambda p: (f"tap {p['tap']}: circuit-solver {_where(p['frequency_hz'])} is "
                                     f"{p['deviation']:+.1%} from the quasi-static sum (beyond {p['limit']:.0%})"),
    "mom-inductance-vs-circuit": lambda p: (f"tap {p['tap']}: MoM L at {p['frequency_hz'] / 1e6:.3f} MHz is "
                                            f"{p['deviation']:+.1%} from the circuit solver's (beyond "
                                            f"{p['limit']:.0%})"),
    "mom-inductance": lambda p: f"tap {p['tap']}: MoM L is {p['deviation']:+.1%} from the quasi-static sum",
    "wire-loss": lambda p: (f"tap {p['tap']}: MoM wire loss is {p['deviation']:+.1%} from the exact "
                            f"skin-effect loss of its path at {p['frequency_hz'] / 1e6:.3f} MHz"),
    "srf-not-found": lambda p: f"tap {p['tap']}: {note_text(Note(p['note_code'], p['note_params']))}",
    "srf-off": lambda p: (f"tap {p['tap']}: direct MoM self-resonance {p['srf_hz'] / 1e6:.3f} MHz is "
                          f"{p['deviation']:+.1%} from the circuit solver's, which moves the sweep's "
                          f"impedance at the top of the band by about {p['in_band']:.1%}"),
    "power-balance-broken": lambda p: (f"tap {p['tap']}: power balance {p['deviation']:+.1%} (radiated "
                                       f"against accepted power): the MoM input resistance disagrees with "
                                       f"its own far field"),
    "power-balance": lambda p: (f"tap {p['tap']}: power balance {p['deviation']:+.1%} (radiated against "
                                f"accepted power), beyond ±{p['accept']:.0%}: its input resistance is "
                                f"inconsistent with its far field by {p['deviation']:+.1%} (radiation "
                                f"resistance uncertain by that much)"),
    "convergence-near-srf": lambda p: (f"mesh convergence could only be compared at {p['srf_ratio']:.2f} × "
                                       f"self-resonance, where the spreads are less certain"),
    "inductance-spread": lambda p: (f"tap {p['tap']}: inductance spread {p['spread']:.1%} over the coarse, "
                                    f"sweep and fine meshes (beyond {p['limit']:.0%})"),
    "resistance-spread": lambda p: (f"tap {p['tap']}: resistance spread {p['spread']:.1%} over the meshes "
                                    f"(Q less certain)"),
    "extrapolation": lambda p: (f"tap {p['tap']}: the sweep mesh's L is {p['deviation']:+.1%} from the "
                                f"extrapolated zero-segment value"),
    "convergence-not-assessed": lambda p: "mesh convergence could not be assessed",
    "convergence-not-checked": lambda p: "mesh convergence not checked (--no-convergence)",
    "all-within": lambda p: _all_within(p),
}


#: Check-row note code → its wording from the parameters (:class:`simloop.validation.Note`).
_NOTES = {
    "sweep-error": lambda p: f"sweep error estimate ±{p['error']:.1%}",
    "sheet-without-round-wire": lambda p: (f"bare current-sheet formula without the round-wire correction: "
                                           f"{p['inductance_h'] * 1e6:.3f} µH"),
    "apparent-inductance": lambda p: f"apparent X/ω = {p['inductance_h'] * 1e6:.3f} µH",
    "real-ground-radiation": lambda p: ("lossless wire over real ground: radiation plus ground loss, which the "
                                        "free-space formulas do not have"),
    "below-ground-resolution": lambda p: (f"lossless-wire input resistance "
                                          f"{'negative' if p['resistance_ohm'] < 0 else 'below %g Ω' % p['resolution_ohm']}"
                                          f" over real ground: not resolved by the solver (ground-loss increments "
                                          f"below ~{p['resolution_ohm']} Ω are noise)"),
    "formula-warning": lambda p: _readable(p["message"]),
    "power-ratio": lambda p: f"radiated/accepted power {p['ratio']:.4f}",
    "path-length": lambda p: f"current path {p['path_m']:.3f} m, of which winding {p['winding_m']:.3f} m",
    "proximity-factor": lambda p: (f"R_p/R_0 = {p['factor']:.4f} for {p['turns']} turns at c/a = "
                                   f"{p['spacing_ratio']:.2f}"),
    "open-turn-eddy": lambda p: (f"PEEC counts the eddy loss the tap's current induces in the {p['open_turns']} "
                                 f"open turns beyond it (Smith 1972: a wire with no net current still carries "
                                 f"eddy currents); QS and HB count the tap's own turns only: on this tap their "
                                 f"loss reads lower and their Q higher"),
    "q-includes-ground": lambda p: "MoM Q includes the ground loss; the formulas do not",
    "srf-solves-missing": lambda p: ("direct MoM solves either side of the circuit solver's resonance missing "
                                     "or failed"),
    "srf-model": lambda p: f"circuit solver: {p['frequency_hz'] / 1e6:.4f} MHz",
    "srf-not-bracketed": lambda p: (f"no resonance between {p['low_hz'] / 1e6:.3f} and {p['high_hz'] / 1e6:.3f} MHz "
                                    f"in direct MoM: the circuit solver's resonance ({p['frequency_hz'] / 1e6:.3f} MHz) is "
                                    f"off by more than {p['bracket']:.0%}"),
    "srf-none": lambda p: "the circuit solver finds no self-resonance within its search range",
    "medhurst": lambda p: (f"Medhurst C = {p['capacitance_f'] * 1e12:.1f} pF for the whole winding as a solenoid "
                           f"of equal perimeter (Medhurst 1947 measured solenoids: not meant for flat box loops)"),
}


def note_text(note: Note) -> str:
    """The words for one check-row note (its code and parameters)."""
    try:
        return _NOTES[note.code](note.params)
    except KeyError:
        raise ValueError(f"unknown check note code {note.code!r}") from None


def check_note(check) -> str:
    """A check row's notes in words, joined by "; " ("" when it has none)."""
    return "; ".join(note_text(n) for n in check.notes)


def reason_text(reason: Reason) -> str:
    """The words for one verdict reason (its code and parameters)."""
    try:
        word = _REASONS[reason.code]
    except KeyError:
        raise ValueError(f"unknown verdict reason code {reason.code!r}") from None
    return word({**reason.params, "status": reason.status})


def verdict_texts(verdict: Verdict) -> list[str]:
    """A verdict's reasons in words, most serious first."""
    return [reason_text(r) for r in verdict.reasons]


def verdict_dict(verdict: Verdict) -> dict:
    """A verdict as JSON: status, the reasons in words, and the same reasons as codes."""
    return {"status": verdict.status, "reasons": verdict_texts(verdict),
            "codes": [{"status": r.status, "code": r.code, "params": r.params} for r in verdict.reasons]}


def trend_text(code: str, params: dict) -> str:
    """The words for a Richardson outcome of the mesh convergence (codes of
    :class:`simloop.reference.RichardsonResult`)."""
    p = params
    if code == "agree":
        return f"the three meshes agree within {p['agree_within'] * 100:g} %"
    if code == "not-monotone":
        return (f"not monotone in segment length (coarse → sweep {p['coarse_step']:+.2%}, sweep → "
                f"fine {p['fine_step']:+.2%}): no power-law trend to extrapolate")
    if code == "faster-than-power-law":
        return (f"converged between the finer two: coarse → sweep {p['coarse_step']:+.2%}, sweep → "
                f"fine {p['fine_step']:+.2%}; the steps shrink faster than any power law")
    if code == "no-shrink":
        return (f"the steps do not shrink with the segment length (coarse → sweep "
                f"{p['coarse_step']:+.2%}, sweep → fine {p['fine_step']:+.2%}): no power-law trend")
    if code == "order-outside":
        lo, hi = p["order_range"]
        return (f"observed order {p['observed_order']:.2f} lies outside {lo}–{hi}: the meshes are not in "
                f"the asymptotic range")
    if code == "extrapolated":
        return f"Richardson, p = {p['order']} (observed {p['observed_order']:.2f})"
    raise ValueError(f"unknown convergence trend code {code!r}")


def _check_entry(c) -> dict:
    return {
        "quantity": c.quantity,
        "unit": c.unit,
        "tap": c.tap,
        "frequency_hz": number_or_none(c.frequency_hz),
        "mom": number_or_none(c.mom),
        "circuit": number_or_none(c.circuit),
        "model": number_or_none(c.model),
        "quasi_static": number_or_none(c.quasi_static),
        "handbook": number_or_none(c.handbook),
        "source": {"mom": c.source_mom, "circuit": c.source_circuit, "model": c.source_model,
                   "quasi_static": c.source_quasi_static, "handbook": c.source_handbook},
        "reference": c.reference,
        "rel_diff": {"mom": number_or_none(c.rel_diff_mom), "circuit": number_or_none(c.rel_diff_circuit),
                     "model": number_or_none(c.rel_diff_model),
                     "handbook": number_or_none(c.rel_diff_handbook)},
        "flag": c.flag,
        "note": check_note(c),
        "note_codes": [{"code": n.code, "params": n.params} for n in c.notes],
    }


def _convergence_entry(c, meshes) -> dict:
    return {
        "tap": c.tap,
        "frequency_hz": c.frequency_hz,
        "meshes": [m.label for m in meshes],
        "winding_segment_m": [m.winding_segment_m for m in meshes],
        "inductance_h": [float(v) for v in c.inductance_h],
        "apparent_inductance_h": [float(v) for v in c.apparent_inductance_h],
        "resistance_ohm": [float(v) for v in c.resistance_ohm],
        "inductance_spread": c.inductance_spread,
        "resistance_spread": c.resistance_spread,
        "extrapolated_inductance_h": number_or_none(c.extrapolated_inductance_h),
        "observed_order": number_or_none(c.observed_order),
        "richardson_order": RICHARDSON_ORDER,
        "note": trend_text(c.trend_code, c.trend_params),
        "trend": {"code": c.trend_code, "params": c.trend_params},
    }


def _mesh_entry(m) -> dict:
    return {"label": m.label, "segments": m.segments, "target_m": m.target_m,
            "winding_segment_m": m.winding_segment_m, "segment_over_pitch": m.segment_over_pitch,
            "floor_hz": m.floor_hz,
            "rules": [{"rule": r.name, "key": r.key, "status": r.status, "detail": r.detail} for r in m.rules]}


def _tap_entries(result: ValidationResult) -> dict:
    return {str(n): {
        "turns": n,
        "inductance_h": float(result.inductance_h[i]),
        "inductance_source": "lumped L-C model fitted to the circuit solver (L0, what tune uses)",
        "inductance_error": float(result.inductance_error[i]),
        "quasi_static_inductance_h": float(result.quasi_static_inductance_h[i]),
        "self_resonance_hz": number_or_none(result.self_resonance_hz[i]),
        "verdict": verdict_dict(result.tap_verdicts[n]),
    } for i, n in enumerate(result.tap_turns)}


def _power_balance_entries(result: ValidationResult) -> dict:
    """"average_gain" kept for existing readers; "power_balance" says the same in plain words."""
    return {
        "power_balance": {
            "quantity": "radiated power over accepted power, lossless wire, free space",
            "taps": [{"tap": a.tap, "radiated_power_w": a.radiated_power_w,
                      "accepted_power_w": a.input_power_w, "deviation": a.agt - 1,
                      "passed": a.accepted} for a in result.average_gain],
        },
        "average_gain": {
            "frequency_hz": number_or_none(result.agt_frequency_hz),
            "accept": list(AGT_ACCEPT),
            "configuration": "lossless wire, free space, each tap driven alone (other taps open)",
            "grid": f"θ 0–180°, φ 0–{360 - AGT_STEP_DEG:g}° in {AGT_STEP_DEG:g}° steps; Simpson in θ "
                    f"with sin θ weights",
            "taps": [{"tap": a.tap, "agt": a.agt, "radiated_power_w": a.radiated_power_w,
                      "input_power_w": a.input_power_w, "input_resistance_ohm": a.input_resistance_ohm,
                      "accepted": a.accepted} for a in result.average_gain],
        },
    }


def validation_dict(result: ValidationResult) -> dict:
    """Everything ``simloop validate`` reports, as JSON-ready data."""
    return {
        "simloop_version": __version__,
        "command": "validate",
        "name": result.name,
        "ground": result.ground,
        "verdict": verdict_dict(result.verdict),
        "q_used_by_tune": result.q_used_by_tune,
        "check_frequencies_hz": [float(f) for f in result.check_frequencies_hz],
        "taps": _tap_entries(result),
        "checks": [_check_entry(c) for c in result.checks],
        "convergence": [_convergence_entry(c, result.meshes) for c in result.convergence],
        "convergence_frequency_hz": number_or_none(result.convergence_frequency_hz),
        "meshes": [_mesh_entry(m) for m in result.meshes] or [_mesh_entry(result.sweep_mesh)],
        **_power_balance_entries(result),
        "notes": list(result.notes),
        "seconds": result.seconds,
    }


def write_validate(result: ValidationResult, out: Path) -> list[Path]:
    """Write validation.json into ``out``."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    return [write_json(out / "validation.json", validation_dict(result))]


# ------------------------------------------------------------------------------------------------
# The printed table
# ------------------------------------------------------------------------------------------------

_PREFIX = [(1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "µ"), (1e-9, "n"), (1e-12, "p")]
_UNIT = {"H": "H", "ohm": "Ω", "Hz": "Hz", "-": ""}


def _si(value, unit: str) -> str:
    if value is None:
        return "-"
    u = _UNIT.get(unit, unit)
    if unit == "-":
        return f"{value:.4g}"
    if unit == "Hz":
        return f"{value / 1e6:.4f} MHz"
    mag = abs(value)
    for scale, p in _PREFIX:
        if mag >= scale * 0.9995 or scale == 1e-12:
            return f"{value / scale:.4g} {p}{u}"
    return f"{value:.4g} {u}"


def _pct(x) -> str:
    return "-" if x is None else f"{x * 100:+.1f} %"


def _mhz(f) -> str:
    return "-" if f is None else f"{f / 1e6:.3f}"


class _Sources:
    """Numbered list of the sources named in the table's src column."""

    def __init__(self):
        self.texts: list[str] = []

    def number(self, text) -> str:
        if text is None:
            return "-"
        if text not in self.texts:
            self.texts.append(text)
        return str(self.texts.index(text) + 1)


def _table_header(result: ValidationResult) -> list[str]:
    m = result.sweep_mesh
    return [
        f"Validation of {result.name}: {len(result.tap_turns)} taps ({', '.join(map(str, result.tap_turns))} "
        f"turns), {result.style} winding, {result.ground}",
        f"mesh: {m.segments} segments, winding segment {m.winding_segment_m * 1e3:.2f} mm = "
        f"{m.segment_over_pitch:.2f} × pitch; direct MoM trusted above {m.floor_hz / 1e6:.3f} MHz",
        f"checks at {', '.join(_mhz(f) for f in result.check_frequencies_hz)} MHz (the band below "
        f"{WINDOW_TOP} × self-resonance; MoM only above its floor)",
        "MoM = method of moments (- where it does not run: below its floor, or no MoM); PEEC = circuit "
        "solver of the same path (what the sweep reports); model = lumped L-C model fitted to PEEC "
        "(what tune and couple use); QS = quasi-static formulas of the real wire path; HB = handbook formula",
        "ΔMoM, ΔPEEC, Δmodel, ΔHB: relative difference from QS (from MoM where QS has no value); "
        "series values have the fitted self-capacitance removed; † = MoM + the proximity term of the "
        "loss model (NEC models the skin effect only)",
    ]


_COLUMNS = (f"  {'quantity':<17} {'f [MHz]':>7}  {'MoM':>12}  {'PEEC':>12}  {'model':>12}  {'QS':>12}  "
            f"{'HB':>12}  {'ΔMoM':>8}  {'ΔPEEC':>8}  {'Δmodel':>8}  {'ΔHB':>8}  src")

#: Rows whose MoM value has the proximity term of the loss model added (marked † in the table).
MOM_PLUS_PROXIMITY = ("R_loss skin+prox", "Q skin+prox")


def _check_line(c, sources: _Sources) -> str:
    mom = "< resolution" if c.flag == BELOW_RESOLUTION else _si(c.mom, c.unit)
    if c.mom is not None and c.quantity in MOM_PLUS_PROXIMITY:
        mom += "†"
    star = "*" if c.reference == "mom" else ""  # relative to MoM (no quasi-static value)
    c_d, m_d, hb_d = (_pct(x) + (star if x is not None else "")
                      for x in (c.rel_diff_circuit, c.rel_diff_model, c.rel_diff_handbook))
    src = "/".join(sources.number(x) for x in (c.source_mom, c.source_circuit, c.source_model,
                                                c.source_quasi_static, c.source_handbook))
    return (f"  {c.quantity:<17} {_mhz(c.frequency_hz):>7}  {mom:>12}  "
            f"{_si(c.circuit, c.unit):>12}  {_si(c.model, c.unit):>12}  "
            f"{_si(c.quasi_static, c.unit):>12}  {_si(c.handbook, c.unit):>12}  "
            f"{_pct(c.rel_diff_mom):>8}  {c_d:>8}  {m_d:>8}  "
            f"{hb_d:>8}  {src}")


def _tap_table(result: ValidationResult, i: int, n: int, sources: _Sources) -> list[str]:
    v = result.tap_verdicts[n]
    lines = ["", f"tap {n} turns: L0 = {result.inductance_h[i] * 1e6:.3f} µH ± {result.inductance_error[i]:.1%} "
                 f"(lumped model fitted to the circuit solver), quasi-static {result.quasi_static_inductance_h[i] * 1e6:.3f} µH; "
                 f"verdict {v.status}",
             _COLUMNS, "  " + "-" * (len(_COLUMNS) - 2)]
    previous_f = "start"
    for c in (c for c in result.checks if c.tap == n):
        if c.frequency_hz is not None and previous_f not in ("start", None) and c.frequency_hz != previous_f \
                and c.quantity != "Q tune":
            lines.append("")
        previous_f = c.frequency_hz
        lines.append(_check_line(c, sources))
    for c in (c for c in result.checks if c.tap == n and c.quantity in ("L0", "SRF") and c.notes):
        lines.append(f"  {c.quantity}: {check_note(c)}")
    eddy = next((c for c in result.checks if c.tap == n and any(x.code == "open-turn-eddy" for x in c.notes)), None)
    if eddy is not None:
        lines.append(f"  {eddy.quantity}: {note_text(next(x for x in eddy.notes if x.code == 'open-turn-eddy'))}")
    flagged = next((c for c in result.checks if c.tap == n and c.flag), None)
    if flagged is not None:
        lines.append(f"  {flagged.quantity}: {check_note(flagged)}")
    return lines


def _convergence_table(result: ValidationResult) -> list[str]:
    if not result.convergence:
        return ["", "mesh convergence: not assessed"]
    lines = ["", f"mesh convergence at {_mhz(result.convergence_frequency_hz)} MHz "
                 f"(series L and R, fitted self-capacitance removed):",
             f"  {'mesh':<7} {'segments':>8} {'Δ [mm]':>7} {'Δ/pitch':>7}  rules that warn or fail"]
    for mr in result.meshes:
        bad = [f"{r.name} ({r.status})" for r in mr.rules if r.status != "pass" and r.key not in ("floor", "size")]
        lines.append(f"  {mr.label:<7} {mr.segments:>8} {mr.winding_segment_m * 1e3:>7.2f} "
                     f"{mr.segment_over_pitch:>7.2f}  {'; '.join(bad) or '-'}")
    labels = [mr.label for mr in result.meshes]
    lines.append(f"  {'tap':<4} " + " ".join(f"{'L ' + lb:>12}" for lb in labels)
                 + f" {'L spread':>9} {'R spread':>9} {'L extrap.':>12}  trend")
    for c in result.convergence:
        est = "-" if c.extrapolated_inductance_h is None else _si(c.extrapolated_inductance_h, "H")
        lines.append(f"  {c.tap:<4} " + " ".join(f"{_si(v, 'H'):>12}" for v in c.inductance_h)
                     + f" {c.inductance_spread:>9.2%} {c.resistance_spread:>9.2%} {est:>12}  "
                       f"{trend_text(c.trend_code, c.trend_params)}")
    return lines


def _power_balance_table(result: ValidationResult) -> list[str]:
    if not result.average_gain:
        return ["", "power balance (radiated against accepted power): not run"]
    lines = ["", f"power balance at {_mhz(result.agt_frequency_hz)} MHz (lossless wire, free space, each "
                 f"tap driven alone): power radiated into the far field against power accepted at "
                 f"the port; a lossless model must radiate all it accepts (pass within "
                 f"±{(AGT_ACCEPT[1] - 1):.0%}):"]
    for a in result.average_gain:
        lines.append(f"  tap {a.tap}: radiated {a.radiated_power_w:.4g} W of {a.input_power_w:.4g} W "
                     f"accepted, {a.agt - 1:+.1%}  "
                     f"{'pass' if a.accepted else 'FAIL: input resistance and far field disagree'}")
    return lines


def _table_footer(result: ValidationResult, sources: _Sources) -> list[str]:
    lines = ["", f"Q used by tune: {result.q_used_by_tune}, the lumped model's (row 'Q tune', column "
                 f"model; PEEC's at the same frequency beside it); NEC's wire loss models the skin "
                 f"effect only",
             f"VERDICT: {result.verdict.status.upper()}"]
    lines += [f"  - {r}" for r in verdict_texts(result.verdict)]
    if result.notes:
        lines.append("notes:")
        lines += [f"  - {note}" for note in result.notes]
    lines.append("sources (src column: MoM/PEEC/model/QS/HB, - where the column is empty):")
    lines += [f"  {k}. {s}" for k, s in enumerate(sources.texts, start=1)]
    lines.append(f"validation took {result.seconds:.1f} s")
    return lines


def format_validate_table(result: ValidationResult) -> str:
    """The comparison table, fixed width, as printed by ``simloop validate``."""
    sources = _Sources()
    lines = _table_header(result)
    for i, n in enumerate(result.tap_turns):
        lines += _tap_table(result, i, n, sources)
    if any(c.reference == "mom" and (c.rel_diff_handbook, c.rel_diff_circuit, c.rel_diff_model) != (None,) * 3
           for c in result.checks):
        lines.append("  * relative to MoM (no quasi-static value)")
    lines += _convergence_table(result) + _power_balance_table(result) + _table_footer(result, sources)
    return "\n".join(lines)
