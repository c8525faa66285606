"""The pattern report: ``pattern.json``, ``pattern.png`` and the printed null list.

Causes and notes arrive from :mod:`simloop.patterns` as codes with numbers; they are worded here.
The figure is drawn on a :class:`matplotlib.figure.Figure` with the Agg canvas directly, so
importing this module never changes a notebook's matplotlib backend.
"""

from __future__ import annotations

import textwrap

from pathlib import Path

import numpy as np

from simloop.mesh import C0
from simloop.patterns import DEPTH_FLOOR_DB, PatternResult
from simloop.report import complex_pairs, write_json

#: The figure's dB floor: the rings run from here to 0 dB. [dB]
PLOT_FLOOR_DB = -40.0

#: Line styles distinguishable in grey print: (line style, grey level, width, null marker).
STYLES = {"loop": ("-", "0.0", 1.8, "v"), "receiver": ("--", "0.45", 1.3, "^"), "system": (":", "0.25", 2.0, "s")}
LABELS = {"loop": "loop (voltage on the tuned capacitor)", "receiver": "radio's rod alone", "system": "system: the radio with the loop beside it"}

MODELS = {
    "mom": "NEC (method of moments)",
    "mom-below-floor": "NEC below its breakdown floor: currents, and so null depths, suspect",
    "dipole": "the rod as a small magnetic dipole (analytic)",
    "circuit": "the circuit solver's dipole moments (quasi-static, no breakdown floor)",
    "receiver": "the rod model of the receiver (its own pickup at its position and axis)",
    "two-port": "the loop-rod 2-port: loop tuned, radio peaked once with the loop facing the station",
}


#: Where the loop's response came from, short, for the figure's title.
SOURCE_SHORT = {"mom": "NEC", "mom-below-floor": "NEC below its breakdown floor (suspect)",
                "circuit": "the circuit solver (below NEC's floor)"}


def cause_text(null) -> str:
    """One line saying what limits a null's depth."""
    d = null.detail
    if null.cause == "electric-dipole":
        return (f"electric-dipole filling (antenna effect of leads and tuner): e = {d['e']:.3g}, "
                f"law 20·log10(e/√(1+e²)) = {d['law_db']:.1f} dB; without it {d['without_electric_db']:.1f} dB")
    if null.cause == "beyond-dipole":
        return (f"the field beyond the two dipoles (finite size, lead geometry); "
                f"without it {d['without_rest_db']:.1f} dB (electric term e = {d['e']:.3g})")
    if null.cause == "combined":
        return (f"electric dipole (e = {d['e']:.3g}) and the field beyond the dipoles together "
                f"(removing either alone: {d['without_electric_db']:.1f} / {d['without_rest_db']:.1f} dB)")
    if null.cause in ("rod-pickup", "loop-pickup", "loop-null", "rod-null"):
        return _system_cause_text(null)
    if null.cause == "exact":
        return f"an exact zero of the model (deeper than {-DEPTH_FLOOR_DB:.0f} dB): nothing in it fills this null"
    if null.cause == "not-split":
        return "not split into causes over a ground (the dipole split needs the free-space sphere)"
    return null.cause


def _system_cause_text(null) -> str:
    d = null.detail
    law = ""
    if "law_depth_db" in d:
        law = (f"; law for ρ = {d['rod_over_loop']:.3g}, ψ = {d['phase_deg']:.0f}°, rod at β = "
               f"{d['rod_angle_deg']:.0f}° from the loop axis: {d['law_depth_db']:.1f} dB at {d['law_azimuth_deg']:.2f}°")
    if null.cause == "rod-pickup":
        head = (f"the radio's own rod pickup fills it (without it {d['without_rod_db']:.1f} dB) and moves it "
                f"{d['shift_deg']:+.2f}° from the loop's null")
    elif null.cause == "loop-pickup":
        head = (f"the rod's own null (the rod's pickup dominates, ρ = {d['rod_over_loop']:.3g}), filled by the "
                f"loop's pickup through the coupling (without the loop {d['without_loop_db']:.1f} dB)")
    elif null.cause == "rod-null":
        head = f"the rod's own null (the rod's pickup dominates, ρ = {d['rod_over_loop']:.3g})"
    else:
        head = (f"the loop's own null carried through the coupling, {d['shift_deg']:+.2f}° from it "
                f"(without the rod {d['without_rod_db']:.1f} dB): what limits the loop's null limits this one")
    return head + law


def note_text(code: str) -> str:
    kind, _, value = code.partition(":")
    if kind == "below-floor":
        return (f"the pattern frequency lies below NEC's breakdown floor of this mesh ({float(value) / 1e6:.3g} MHz): "
                "its currents and so its null depths are suspect (over a ground the circuit solver's "
                "free-space dipoles cannot replace them)")
    if kind == "horizontal-at-horizon":
        return ("a horizontally polarised wave at the horizon does not couple to the loop's magnetic moment: "
                "the loop's response there is its antenna effect alone")
    if kind == "circuit-below-floor":
        return (f"the pattern frequency lies below NEC's breakdown floor of this mesh ({float(value) / 1e6:.3g} MHz): "
                "the loop's response comes from the circuit solver's magnetic and electric dipole moments "
                "(free space), not from NEC")
    if kind == "receiver-assumed":
        return ("no [receiver] in the spec: a typical radio's rod (10 × 100 mm, μi 125, 65 turns, loaded Q 60) "
                "is assumed 15 cm in front of the winding, its axis along the loop's")
    if kind == "efficiency":
        return f"power check passed: radiated / input power of the tap = {float(value):.3g}"
    if kind == "ground":
        return (f"{value} ground: relative field patterns (the input power of such loops over ground is near "
                "the solver's resolution); null causes not split")
    return code


def pattern_dict(result: PatternResult) -> dict:
    """Everything in ``pattern.json`` (keys carry units)."""
    m, p = result.magnetic_moment, result.electric_moment
    e_ratio = float(C0 * np.linalg.norm(p) / np.linalg.norm(m)) if np.all(np.isfinite(m)) else float("nan")
    return {
        "frequency_hz": result.frequency_hz,
        "polarization": result.polarization,
        "azimuth_deg": result.azimuth_deg.tolist(),
        "elevation_deg": result.elevation_deg.tolist(),
        "response_db": {k: v.tolist() for k, v in result.response_db.items()},
        "models": {k: MODELS.get(v, v) for k, v in result.models.items()},
        "tap": result.tap_turns,
        "capacitance_f": result.capacitance_f,
        "loop_volts_per_v_m": result.loop_volts_per_v_m,
        "nulls": [{"azimuth_deg": n.azimuth_deg, "elevation_deg": n.elevation_deg, "depth_db": n.depth_db,
                   "of": n.of, "cause": n.cause, "cause_text": cause_text(n), "detail": n.detail}
                  for n in result.nulls],
        "dipole": {"magnetic_moment_a_m2": complex_pairs(m), "electric_moment_c_m": complex_pairs(p),
                   "electric_over_magnetic": e_ratio, "multipole_residual": result.multipole_residual},
        "floor_hz": result.floor_hz,
        "system": _system_dict(result.system),
        "notes": [note_text(c) for c in result.notes],
    }


def _system_dict(model) -> dict | None:
    if model is None:
        return None
    return {"tap_index": model.tap, "mutual_inductance_h": model.mutual_inductance_h,
            "loop_capacitance_f": model.loop_capacitance_f, "radio_capacitance_f": model.radio_capacitance_f,
            "radio_capacitance_exact_tune_f": model.radio_capacitance_exact_f,
            "rod_position_m": list(model.rod_position_m), "rod_axis": list(model.rod_axis),
            "rod_angle_deg": model.rod_angle_deg, "rod_assumed": model.rod_assumed,
            "transfer_loop": complex_pairs(np.array([model.t_loop]))[0], "transfer_rod": complex_pairs(np.array([model.t_rod]))[0]}


def format_pattern_summary(result: PatternResult) -> str:
    """The printed summary: each null with its depth and cause."""
    lines = [f"pattern at {result.frequency_hz / 1e6:.4g} MHz, {result.polarization} polarisation, "
             f"tap {result.tap_turns} tuned with {result.capacitance_f * 1e12:.1f} pF "
             f"(at the maximum {result.loop_volts_per_v_m:.3g} V on the capacitor per V/m of field)"]
    for name, model in result.models.items():
        lines.append(f"  {name}: {MODELS.get(model, model)}")
    sm = result.system
    if sm is not None:
        lines.append(f"  system: rod at {tuple(round(v, 3) for v in sm.rod_position_m)} m, turned "
                     f"{sm.rod_angle_deg:.0f}° from the loop axis, M = {sm.mutual_inductance_h * 1e9:.3g} nH; "
                     f"radio peaked at {sm.radio_capacitance_f * 1e12:.1f} pF "
                     f"(its coil alone tunes at {sm.radio_capacitance_exact_f * 1e12:.1f} pF)")
    for n in sorted(result.nulls, key=lambda n: (n.of, n.elevation_deg, n.azimuth_deg)):
        depth = f"{n.depth_db:7.1f} dB" if n.depth_db > DEPTH_FLOOR_DB else "  exact   "
        lines.append(f"  null of {n.of:<8} at azimuth {n.azimuth_deg:6.2f}°, elevation {n.elevation_deg:4.1f}°: "
                     f"{depth} — {cause_text(n)}")
    lines += [f"  note: {note_text(c)}" for c in result.notes]
    return "\n".join(lines)


def plot_pattern(result: PatternResult, path: Path) -> Path:
    """Polar plots, one panel per elevation: dB rings, nulls marked with their depth."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    n = result.elevation_deg.size
    fig = Figure(figsize=(max(5.2 * n, 6.5), 6.0), constrained_layout=True)
    FigureCanvasAgg(fig)
    phi = np.radians(np.append(result.azimuth_deg, result.azimuth_deg[0] + 360.0))
    span = -PLOT_FLOOR_DB
    for i, el in enumerate(result.elevation_deg):
        ax = fig.add_subplot(1, n, i + 1, projection="polar")
        for name, db in result.response_db.items():
            ls, grey, lw, _ = STYLES[name]
            r = np.maximum(np.append(db[i], db[i][0]), PLOT_FLOOR_DB) + span
            ax.plot(phi, r, ls=ls, color=grey, lw=lw, label=LABELS[name])
        _mark_nulls(ax, [x for x in result.nulls if x.elevation_deg == el], span)
        ax.set_ylim(0, span)
        ax.set_rlabel_position(202.5)
        ax.set_yticks(np.arange(10.0, span + 1, 10.0))
        ax.set_yticklabels([f"{t - span:.0f} dB" for t in np.arange(10.0, span + 1, 10.0)], fontsize=7)
        ax.set_xticks(np.radians(np.arange(0, 360, 45)))
        ax.set_xticklabels(["0° (loop plane, +x)", "45°", "90° (axis, +y)", "135°", "180°", "225°", "270°", "315°"],
                           fontsize=7)
        ax.set_title(f"elevation {el:g}°", fontsize=10)
        if i == 0:
            ax.legend(loc="lower left", bbox_to_anchor=(-0.1, -0.16), fontsize=7, frameon=False)
    source = SOURCE_SHORT.get(result.models.get("loop"), result.models.get("loop"))
    fig.suptitle(f"Receive pattern at {result.frequency_hz / 1e6:.4g} MHz, {result.polarization} polarisation, "
                 f"tap {result.tap_turns}\n" + textwrap.fill(f"each response relative to its own maximum; "
                                                           f"the loop's from {source}", 75), fontsize=9)
    fig.savefig(path, dpi=110)
    return path


#: Nulls of different responses closer than this share one label. [deg]
NULL_GROUP_DEG = 10.0
#: A null's label sits this far round from the null, off the deep part of the curve. [deg]
NULL_LABEL_TURN_DEG = 28.0
#: Short names of the responses in null labels.
LABEL_SHORT = {"loop": "loop", "receiver": "rod", "system": "loop + radio"}


def _mark_nulls(ax, nulls, span: float) -> None:
    """Mark each null on its curve; nulls of several responses at about the same azimuth share one
    label (one line per response), set off to the side of the null so no two labels overlap."""
    groups: list[list] = []
    for x in sorted(nulls, key=lambda n: n.azimuth_deg):
        _, grey, _, marker = STYLES[x.of]
        r = max(x.depth_db, PLOT_FLOOR_DB) + span
        ax.plot([np.radians(x.azimuth_deg)], [r], marker=marker, color=grey, mfc="white" if x.of != "loop" else grey,
                ms=7, ls="none")
        near = next((g for g in groups if abs((g[0].azimuth_deg - x.azimuth_deg + 180) % 360 - 180) < NULL_GROUP_DEG),
                    None)
        if near is None:
            groups.append([x])
        else:
            near.append(x)
    for g in groups:
        a = np.radians(np.mean([x.azimuth_deg for x in g]))
        lines = [f"{LABEL_SHORT.get(x.of, x.of)} {x.depth_db:.1f} dB" if x.depth_db > DEPTH_FLOOR_DB
                 else f"{LABEL_SHORT.get(x.of, x.of)}: exact" for x in g]
        ax.annotate("nulls\n" + "\n".join(lines), (a, 0.0), xytext=(a + np.radians(NULL_LABEL_TURN_DEG), 0.55 * span),
                    fontsize=7, color="0.15", ha="center", va="center",
                    bbox={"boxstyle": "round,pad=0.2", "fc": "white", "ec": "0.6", "lw": 0.5, "alpha": 0.9},
                    arrowprops={"arrowstyle": "-", "color": "0.4", "lw": 0.6})


def write_pattern(result: PatternResult, out: Path) -> list[Path]:
    """``pattern.json`` and ``pattern.png`` into ``out`` (created)."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    return [write_json(out / "pattern.json", pattern_dict(result)), plot_pattern(result, out / "pattern.png")]
