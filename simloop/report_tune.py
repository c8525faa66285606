"""Writing the results of `simloop tune`: tuning.json, tuning.csv, tuning.png, and the summary.

JSON keys carry SI units (the unit is in the key's name); the CSV is the channel chart a builder prints, in the units
one reads off a dial (kHz, pF, mm), each named in its column header.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np

from simloop import __version__
from simloop.impedance import RELIABLE_BELOW
from simloop.report import number_or_none, write_json
from simloop.tuner import PlateTuner
from simloop.tuning import RANGE_MARGIN, TuneResult
from simloop.units import format_length

__all__ = ["format_tune_summary", "tune_dict", "write_tune"]



def _tuner_dict(t) -> dict:
    out = {"kind": t.kind, "source": t.source, "description": t.describe(), "min_f": t.min_f,
           "max_f": t.max_f, "q": t.q, "q_source": t.q_source}
    if isinstance(t, PlateTuner):
        out.update({
            "plate_width_m": t.plate_width_m, "plate_length_m": t.plate_length_m, "gaps": t.gaps,
            "dielectric_thickness_m": t.dielectric_thickness_m, "permittivity": t.permittivity,
            "travel_m": t.travel_m, "stray_f": t.stray_f, "dielectric": t.dielectric, "capacitance_per_length_f_per_m": t.capacitance_per_m,
            "law": "C(x) = stray + gaps·ε0·ε_r·width·min(x, length)/thickness; x from no overlap; "
                   "fringing neglected",
        })
    return out


def _channel(r: TuneResult, j: int) -> dict:
    i = int(r.channel_tap_index[j])
    alternatives = [
        {"tap": int(n), "capacitance_f": float(r.capacitance_all_f[j, a])}
        for a, n in enumerate(r.tap_turns) if r.reachable[j, a] and a != i
    ]
    if i < 0:
        return {"frequency_hz": float(r.frequencies_hz[j]), "tap": None, "capacitance_f": None,
                "bandwidth_hz": None, "covered": False, "reason": r.channel_reason[j],
                "reliable": False, "alternatives": alternatives}
    out = {
        "frequency_hz": float(r.frequencies_hz[j]),
        "tap": int(r.tap_turns[i]),
        "capacitance_f": float(r.capacitance_f[j]),
        "capacitance_error_f": number_or_none(r.capacitance_error_f[j]),
        "capacitance_step_f": number_or_none(r.capacitance_step_f[j]),
        "bandwidth_hz": number_or_none(r.bandwidth_hz[j]),
        "bandwidth_no_proximity_hz": number_or_none(r.bandwidth_no_proximity_hz[j]),
        "q_loop": number_or_none(r.q_loop[j]),
        "q_loaded": number_or_none(r.q_loaded[j]),
        "q_loaded_no_proximity": number_or_none(r.q_loaded_no_proximity[j]),
        "audio_cut": bool(r.audio_cut[j]),
        "audio_loss_db": number_or_none(r.audio_loss_db[j]),
        "covered": True,
        "reliable": bool(r.reliable[j]),
        "edge": bool(r.edge[j]),
        "outside_sweep": bool(r.outside_sweep[j]),
        "error_estimate": number_or_none(r.error_estimate[j]),
        "effective_height_m": number_or_none(r.effective_height_m[j]),
        "voltage_v": number_or_none(r.voltage_v[j]),
        "current_a": number_or_none(r.current_a[j]),
        "alternatives": alternatives,
    }
    if r.tuner.has_position:
        out["position_m"] = number_or_none(r.position_m[j])
        out["position_step_m"] = number_or_none(r.position_step_m[j])
        out["position_error_m"] = number_or_none(r.capacitance_error_f[j] / r.tuner.capacitance_per_m)
        if r.imperial:
            out["position_in"] = number_or_none(r.position_m[j] / 0.0254)
    return out


def _used_span(r: TuneResult, i: int) -> list[float] | None:
    """First and last channel the chart tunes on tap index i. [Hz]"""
    f = r.frequencies_hz[r.channel_tap_index == i]
    return [float(f[0]), float(f[-1])] if f.size else None


def chart_selection(r: TuneResult, rows: int = 24) -> np.ndarray:
    """Channels shown in the short chart, the same in the terminal and in tuning.png: both ends
    of every tap's span and of every gap, filled up evenly through the band to about ``rows``."""
    m = r.frequencies_hz.size
    idx = r.channel_tap_index
    keep = {0, m - 1}
    for j in range(1, m):
        if idx[j] != idx[j - 1]:
            keep.update((j - 1, j))
    spread = np.linspace(0, m - 1, max(rows - len(keep), 2)).round().astype(int)
    keep.update(int(j) for j in spread)
    return np.array(sorted(keep))


def _model_error_dict(r: TuneResult) -> dict:
    h = r.model_error
    if h is None:
        return {"circuit": None, "mom": None,
                "note": "no exact solve outside the fit window in this sweep; nothing to compare "
                        "the model with (none is invented)"}
    return {"circuit": _circuit_error_dict(r, h), "mom": _mom_error_dict(r, h)}


def _circuit_error_dict(r: TuneResult, h) -> dict | None:
    if not h.circuit_hz.size:
        return None
    taps = list(enumerate(r.tap_turns))
    return {
        "quantity": "|Z_ii model − Z_ii circuit| / |Z_ii circuit| and |R_ii model − R_ii circuit| / "
                    "R_ii circuit, both with the proximity loss (the model tune uses against exact "
                    "circuit solves it was not fitted to)",
        "held_back_hz": [float(f) for f in h.circuit_hz],
        "max_relative_error": {str(n): number_or_none(h.circuit_max_relative_error[i]) for i, n in taps},
        "max_resistance_error": {str(n): number_or_none(h.circuit_max_resistance_error[i]) for i, n in taps},
        "relative_error": {str(n): [float(e) for e in h.circuit_relative_error[:, i]] for i, n in taps},
        "resistance_error": {str(n): [float(e) for e in h.circuit_resistance_error[:, i]] for i, n in taps},
        "relative_to_fit": h.circuit_relative_to_fit,
    }


def _mom_error_dict(r: TuneResult, h) -> dict | None:
    if not (h.frequencies_hz.size or h.excluded_hz.size):
        return None
    taps = list(enumerate(r.tap_turns))
    return {
        "quantity": "|Z_ii model − Z_ii MoM| / |Z_ii MoM|, model without the proximity correction",
        "held_back_hz": [float(f) for f in h.frequencies_hz],
        "max_relative_error": ({str(n): number_or_none(h.max_relative_error[i]) for i, n in taps}
                               if h.frequencies_hz.size else None),
        "relative_error": {str(n): [float(e) for e in h.relative_error[:, i]] for i, n in taps},
        "mom_error_estimate": {str(n): [float(e) for e in h.mom_error_estimate[:, i]] for i, n in taps},
        "excluded_hz": [float(f) for f in h.excluded_hz],
        "inside_fit_span": h.inside_fit_span,
        "relative_to_fit": h.relative_to_fit,
        "note": ("" if h.relative_to_fit in ("below", "mixed", "none") else
                 f"points {h.relative_to_fit} the fit window do not test the model's extrapolation "
                 "to lower frequencies"),
    }


def tune_dict(r: TuneResult) -> dict:
    """Everything `simloop tune` reports, as JSON-ready data (keys listed in README.md)."""
    taps = {}
    for i, n in enumerate(r.tap_turns):
        taps[str(n)] = {
            "turns": int(n),
            "f_low_hz": number_or_none(r.f_low_hz[i]),
            "f_high_hz": number_or_none(r.f_high_hz[i]),
            "f_low_relative_error": number_or_none(r.coverage_error[i, 0]),
            "f_high_relative_error": number_or_none(r.coverage_error[i, 1]),
            # A coverage end outside the swept frequencies is the model's extrapolation.
            "beyond_sweep": bool(r.f_high_hz[i] > r.sweep_range_hz[1] * (1 + 1e-9)
                                 or r.f_low_hz[i] < r.sweep_range_hz[0] * (1 - 1e-9)),
            "inductance_h": float(r.inductance_h[i]),
            "inductance_error": float(r.inductance_error[i]),
            "self_resonance_hz": number_or_none(r.self_resonance_hz[i]),
            "self_capacitance_f": number_or_none(r.self_capacitance_f[i]),
            "channels": int(np.sum(r.channel_tap_index == i)),
            "used_hz": _used_span(r, i),
            "winding_to_tap_m": None if r.tap_wire_m is None else float(r.tap_wire_m[i]),
        }
    s = r.suggestion
    suggested = None if s is None else {
        "taps": list(s.taps),
        "f_low_hz": [float(v) for v in s.f_low_hz],
        "f_high_hz": [float(v) for v in s.f_high_hz],
        "margin": s.margin,
        "covers_band": s.covers_band,
        "problems": list(s.problems),
        "min_capacitance_needed_f": number_or_none(s.capacitance_needed_f[0]),
        "max_capacitance_needed_f": number_or_none(s.capacitance_needed_f[1]),
        "method": s.method,
    }
    ok = r.covered
    at = int(np.nanargmax(np.where(ok, r.voltage_v, -np.inf))) if np.any(ok) else None
    return {
        "simloop_version": __version__,
        "command": "tune",
        "name": r.name,
        "band": {
            "name": r.band.name, "description": r.band.description,
            "first_hz": float(r.frequencies_hz[0]), "last_hz": float(r.frequencies_hz[-1]),
            "spacing_hz": r.band.spacing_hz, "audio_hz": r.band.audio_hz,
            "channels": int(r.frequencies_hz.size),
        },
        "tuner": _tuner_dict(r.tuner),
        "taps": taps,
        "channels": [_channel(r, j) for j in range(r.frequencies_hz.size)],
        "gaps_hz": [[float(a), float(b)] for a, b in r.gaps_hz],
        "tap_rule": r.chart.rule,
        "range_margin": RANGE_MARGIN,
        "switches": [{"from_tap": w.from_tap, "to_tap": w.to_tap, "last_hz": number_or_none(w.last_hz),
                      "first_hz": w.first_hz, "reason": w.reason} for w in r.chart.switches],
        "uncovered_channels_hz": [float(f) for f in r.frequencies_hz[~ok]],
        "overlaps": [{"taps": list(o["taps"]),
                      "span_hz": None if o["span_hz"] is None else list(o["span_hz"]),
                      "margin": o["margin"]} for o in r.overlaps],
        "suggested_taps": suggested,
        "audio_cut_channels": int(np.sum(r.audio_cut)),
        "model_error": _model_error_dict(r),
        "model": {
            "fit_frequencies_hz": [float(f) for f in r.fit_hz],
            "sweep_range_hz": list(r.sweep_range_hz),
            "reliable_below": RELIABLE_BELOW,
            "q_method": "Q = ω·dB/dω / (2G) of the tuned circuit (admittance slope), capacitor loss "
                        "ωC/Q_cap; no receiver loading",
        },
        "tuner_at_field": {
            "field_v_per_m": r.field_v_per_m,
            "max_voltage_v": None if at is None else float(r.voltage_v[at]),
            "max_current_a": None if at is None else number_or_none(np.nanmax(r.current_a[ok])),
            "at_hz": None if at is None else float(r.frequencies_hz[at]),
            "orientation": "wave arriving in the loop plane (maximum response)",
        },
        "cautions": list(r.cautions),
        "notes": list(r.notes),
    }


def _write_csv(r: TuneResult, path: Path) -> Path:
    plates = r.tuner.has_position
    with path.open("w", newline="") as fh:
        w = csv.writer(fh)
        head = ["frequency_khz", "tap", "capacitance_pf", "capacitance_error_pf"]
        if plates:
            head += ["position_mm"] + (["position_in"] if r.imperial else [])
        head += ["q_loaded", "bandwidth_khz", "audio_cut", "audio_loss_db", "reliable", "edge",
                 "tuner_voltage_mv", "note"]
        w.writerow(head)
        for j, f in enumerate(r.frequencies_hz):
            if r.channel_tap_index[j] < 0:
                row = [f"{f / 1e3:.1f}", "", "", ""] + ([""] * (1 + r.imperial) if plates else [])
                row += ["", "", "", "", "false", "", "", r.channel_reason[j]]
                w.writerow(row)
                continue
            row = [f"{f / 1e3:.1f}", int(r.channel_tap[j]), f"{r.capacitance_f[j] * 1e12:.2f}",
                   f"{r.capacitance_error_f[j] * 1e12:.2f}"]
            if plates:
                row.append(f"{r.position_m[j] * 1e3:.2f}")
                if r.imperial:
                    row.append(f"{r.position_m[j] / 0.0254:.3f}")
            note = []
            if r.edge[j]:
                note.append("near a tuner range end")
            if r.outside_sweep[j]:
                note.append("above the sweep")
            row += [f"{r.q_loaded[j]:.1f}", f"{r.bandwidth_hz[j] / 1e3:.2f}",
                    str(bool(r.audio_cut[j])).lower(), f"{r.audio_loss_db[j]:.1f}",
                    str(bool(r.reliable[j])).lower(), str(bool(r.edge[j])).lower(),
                    f"{r.voltage_v[j] * 1e3:.3f}", "; ".join(note)]
            w.writerow(row)
    return path


def write_tune(result: TuneResult, out: Path) -> list[Path]:
    """Write tuning.json, tuning.csv, tuning.png (and for a plate tuner the 1:1 slide scale,
    slide-scale.svg and .png) into ``out``."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    written = [write_json(out / "tuning.json", tune_dict(result)),
               _write_csv(result, out / "tuning.csv")]
    from simloop.plots import plot_slide_scale, plot_tuning

    written.append(plot_tuning(result, out / "tuning.png"))
    if result.tuner.has_position and np.any(np.isfinite(result.position_m)):
        written += [plot_slide_scale(result, out / "slide-scale.svg"),
                    plot_slide_scale(result, out / "slide-scale.png")]
    return written


def _khz(f: float) -> str:
    return f"{f / 1e3:.0f}"


def _span(a: float, b: float) -> str:
    return f"{a / 1e3:.0f}–{b / 1e3:.0f} kHz"


def chart_table(r: TuneResult) -> list[str]:
    """Rows of the short chart (:func:`chart_selection`): kHz, tap, pF, slide, bandwidth."""
    plates = r.tuner.has_position
    unit = "in" if r.imperial else "mm"
    head = "  kHz  tap      pF" + (f"  {unit:>6}" if plates else "") + "  BW kHz"
    out = [head]
    f = r.frequencies_hz
    for j in chart_selection(r):
        if r.channel_tap_index[j] < 0:
            out.append(f"{f[j] / 1e3:5.0f}   --  gap")
            continue
        pos = ""
        if plates:
            x = r.position_m[j]
            pos = f"  {x / 0.0254:6.3f}" if r.imperial else f"  {x * 1e3:6.1f}"
        out.append(f"{f[j] / 1e3:5.0f}  {r.channel_tap[j]:3d} {r.capacitance_f[j] * 1e12:7.1f}{pos}"
                   f"  {r.bandwidth_hz[j] / 1e3:6.2f}" + ("" if r.reliable[j] else " ?"))
    out.append("? = model not trusted there")
    return out


def format_tune_summary(r: TuneResult) -> str:
    """A short human summary: coverage per tap, gaps, suggested taps, audio-cut channels."""
    f = r.frequencies_hz
    lines = [f"{r.name}: {r.band.name} band, {f.size} channels {_span(f[0], f[-1])} every "
             f"{r.band.spacing_hz / 1e3:g} kHz", f"tuner: {r.tuner.describe(r.imperial)}"]
    lines += _summary_coverage(r) + _summary_channels(r) + _summary_model_error(r)
    ok = r.covered
    # The short chart: the same channels as the table in tuning.png.
    if np.any(ok):
        lines.append("chart (the same channels as in tuning.png; every channel in tuning.csv):")
        lines.extend("  " + row for row in chart_table(r))
    for n in r.notes:
        lines.append(f"note: {n}")
    if r.imperial and r.tuner.has_position:
        lines.append("slide positions are in inches (the spec is written in inches); "
                     "slide-scale.svg / slide-scale.png print the scale 1:1")
    for c in r.cautions:
        lines.append(f"CAUTION: {c}")
    return "\n".join(lines)


def _summary_coverage(r: TuneResult) -> list[str]:
    """Per tap what it covers and where it is used; gaps; suggested taps."""
    f = r.frequencies_hz
    lines = []
    for i, n in enumerate(r.tap_turns):
        used = int(np.sum(r.channel_tap_index == i))
        lo, hi = r.f_low_hz[i], r.f_high_hz[i]
        if not (np.isfinite(lo) and np.isfinite(hi)):
            lines.append(f"  tap {n:>3}: cannot be tuned (not inductive in the model)")
            continue
        err = max((e for e in r.coverage_error[i] if np.isfinite(e)), default=math.nan)
        span = _used_span(r, i)
        use = f"used for {_span(*span)} ({used} channels)" if span else "not used"
        wire = ("" if r.tap_wire_m is None else
                f"; {format_length(float(r.tap_wire_m[i]), r.imperial)} of winding from the start")
        lines.append(f"  tap {n:>3}: covers {_span(lo, hi)} (±{err:.1%}), {use}{wire}")
    if r.gaps_hz.size:
        n_gap = int(np.sum(~r.covered))
        spans = ", ".join(_span(a, b) for a, b in r.gaps_hz)
        lines.append(f"GAPS: {spans}: {n_gap} channel{'s' if n_gap != 1 else ''} no tap reaches")
        first = next(j for j in range(f.size) if not r.covered[j])
        lines.append(f"  e.g. {_khz(f[first])} kHz {r.channel_reason[first]}")
    else:
        lines.append("no gaps: every channel is reached by some tap")
    s = r.suggestion
    if s is not None:
        cov = ", ".join(f"{n} ({_span(a, b)})" for n, a, b in zip(s.taps, s.f_low_hz, s.f_high_hz))
        lines.append(f"suggested taps ({s.margin:.0%} overlap margin, estimate): {cov}")
        for p in s.problems:
            lines.append(f"  taps alone cannot fix: {p}")
    return lines


def _summary_channels(r: TuneResult) -> list[str]:
    """Loaded Q, bandwidth against the audio, the proximity effect's share, trust, tuner voltage."""
    f = r.frequencies_hz
    lines = []
    ok = r.covered
    if np.any(ok):
        n_cut = int(np.sum(r.audio_cut))
        ql = r.q_loaded[ok]
        bw = r.bandwidth_hz[ok]
        lines.append(f"loaded Q {np.nanmin(ql):.0f}–{np.nanmax(ql):.0f}, −3 dB bandwidth "
                     f"{np.nanmin(bw) / 1e3:.1f}–{np.nanmax(bw) / 1e3:.1f} kHz; {n_cut} of {int(ok.sum())} "
                     f"channels narrower than the audio (±{r.band.audio_hz / 1e3:g} kHz)"
                     + (f": a high-Q loop cuts treble, up to {np.nanmax(r.audio_loss_db):.1f} dB at "
                        f"{r.band.audio_hz / 1e3:g} kHz" if n_cut else ""))
        qnp = r.q_loaded_no_proximity[ok]
        drop = 1 - ql / qnp
        lines.append(f"  (without the proximity effect, which NEC leaves out, loaded Q would be "
                     f"{np.nanmin(qnp):.0f}–{np.nanmax(qnp):.0f}: it costs {np.nanmin(drop):.1%}–"
                     f"{np.nanmax(drop):.1%} of Q)")
        n_unrel = int(np.sum(ok & ~r.reliable))
        if n_unrel:
            lines.append(f"model not trusted (error ≥ {RELIABLE_BELOW:.0%}) on {n_unrel} channels")
        j = int(np.nanargmax(np.where(ok, r.voltage_v, -np.inf)))
        lines.append(f"at {r.field_v_per_m * 1e3:g} mV/m: up to {r.voltage_v[j] * 1e3:.3g} mV across the "
                     f"tuner ({_khz(f[j])} kHz), capacitor current up to "
                     f"{np.nanmax(r.current_a[ok]) * 1e6:.3g} µA")
    return lines


def _summary_model_error(r: TuneResult) -> list[str]:
    """The lumped model against held-back exact circuit solves and MoM points."""
    lines = []
    h = r.model_error
    if h is not None and h.circuit_hz.size:
        errs = ", ".join(f"tap {n} {h.circuit_max_relative_error[i]:.2%} (R {h.circuit_max_resistance_error[i]:.1%})"
                         for i, n in enumerate(r.tap_turns))
        lines.append(f"lumped model vs exact circuit solves at {h.circuit_hz.size} held-back frequencies "
                     f"({_span(h.circuit_hz.min(), h.circuit_hz.max())}): max |Z| error {errs}")
    if h is None or not (h.frequencies_hz.size or h.excluded_hz.size):
        lines.append("model vs MoM at held-back points: none in this sweep")
    elif h.frequencies_hz.size:
        errs = ", ".join(f"tap {n} {h.max_relative_error[i]:.2%}" for i, n in enumerate(r.tap_turns))
        lines.append(f"model vs MoM at {h.frequencies_hz.size} held-back points "
                     f"({_span(h.frequencies_hz.min(), h.frequencies_hz.max())}): max {errs}"
                     + f" ({h.relative_to_fit} the fit window)")
    else:
        lines.append(f"model vs MoM: the {h.excluded_hz.size} held-back points lie below the MoM floor; "
                     "no comparison")
    return lines
