"""The study report: one self-contained HTML file a builder can read offline and print.

The report is a list of sections, :data:`SECTIONS`, each ``(name, heading, function)`` where
``function(result) -> str | None`` returns the section's HTML fragment (None leaves the section
out, for a study that did not produce its data). Adding a section is one render function and one
entry in that list (or :func:`register_section`).

Everything is embedded: figures as SVG data URIs (text outlined, so no fonts are needed), the
style sheet inline, no scripts and no network (a Content-Security-Policy forbids both). Text
from the spec (name, notes, file name) is escaped with :func:`html.escape`. Values outside where
the model is trusted carry the class ``untrusted`` (grey, italic, dotted underline and a "?"),
explained in the legend at the top.
"""

from __future__ import annotations

import base64
import html
import math
from pathlib import Path

import numpy as np

from simloop.report import number_or_none

__all__ = ["SECTIONS", "SUMMARIES", "format_summary", "register_section", "render_report", "summary_dict",
           "write_report"]

CSS = """
:root { --ink:#1b1b1b; --muted:#6b6b6b; --rule:#c8c8c8; --warn:#9b2a24; --ok:#2f6f4f; --caution:#8a5a00; }
* { box-sizing: border-box; }
html { font: 10pt/1.4 "DejaVu Sans", "Helvetica Neue", Arial, sans-serif; color: var(--ink); background: #fff; }
body { max-width: 182mm; margin: 10mm auto; padding: 0 6mm; }
h1 { font-size: 17pt; margin: 0 0 1mm; }
h2 { font-size: 13pt; margin: 8mm 0 2mm; padding-bottom: 1mm; border-bottom: 1.5px solid var(--ink);
     break-after: avoid; page-break-after: avoid; }
h3 { font-size: 10.5pt; margin: 4mm 0 1.5mm; break-after: avoid; page-break-after: avoid; }
p { margin: 1.5mm 0; }
.sub { color: var(--muted); margin: 0 0 3mm; }
figure { margin: 3mm 0; break-inside: avoid; page-break-inside: avoid; }
figure img { display: block; max-width: 100%; height: auto; }
figcaption { font-size: 8.5pt; color: var(--muted); margin-top: 1mm; }
table { border-collapse: collapse; font-size: 8.5pt; margin: 2mm 0; font-variant-numeric: tabular-nums; }
th, td { padding: 0.6mm 2.2mm; text-align: right; border-bottom: 0.5px solid var(--rule); vertical-align: top; }
th { border-bottom: 1px solid var(--ink); font-weight: 600; }
th:first-child, td:first-child, td.text, th.text { text-align: left; }
tr { break-inside: avoid; page-break-inside: avoid; }
thead { display: table-header-group; }
.untrusted { color: var(--muted); font-style: italic; text-decoration: underline dotted; }
.untrusted::after { content: "?"; font-style: normal; font-weight: 700; margin-left: 0.3mm; }
.gap td { color: var(--warn); }
.cols { display: flex; gap: 4mm; align-items: flex-start; }
.cols table { flex: 1 1 0; }
table.channels th, table.channels td { padding: 0.4mm 1.4mm; }
table.channels td { white-space: nowrap; }
table.channels tr.gap td.text { white-space: normal; }
.badge { display: inline-block; padding: 0.3mm 2mm; border: 1.5px solid currentColor; border-radius: 1mm;
         font-weight: 700; text-transform: uppercase; letter-spacing: 0.04em; }
.ok { color: var(--ok); } .caution { color: var(--caution); } .unreliable { color: var(--warn); }
.legend { border: 1px solid var(--rule); padding: 1.5mm 3mm; font-size: 8.5pt; margin: 3mm 0; }
.notes { white-space: pre-wrap; border-left: 3px solid var(--rule); padding-left: 3mm; }
.caution-box { border: 1.5px solid var(--warn); padding: 2mm 4mm; break-inside: avoid; }
.caution-box li { margin: 1mm 0; }
footer { margin-top: 8mm; font-size: 8pt; color: var(--muted); border-top: 1px solid var(--rule); }
footer td, footer th { font-size: 8pt; }
code { font-size: 8.5pt; }
@page { margin: 14mm 12mm; }
@media print {
  html { font-size: 9.5pt; }
  body { margin: 0; padding: 0; max-width: none; }
  h2 { margin-top: 5mm; }
  section.newpage { break-before: page; page-break-before: always; }
  a { color: inherit; text-decoration: none; }
}
"""


def esc(value) -> str:
    """Escape text for HTML (quotes too): every string that is not our own markup goes through this."""
    return html.escape(str(value), quote=True)


def _cell(text: str, trusted: bool = True, cls: str = "") -> str:
    classes = " ".join(c for c in (cls, "" if trusted else "untrusted") if c)
    return f'<td class="{classes}">{text}</td>' if classes else f"<td>{text}</td>"


def _table(header: list[str], rows: list[str], cls: str = "", text_cols: tuple[int, ...] = (0,)) -> str:
    head = "".join(f'<th class="{"text" if i in text_cols else ""}">{h}</th>' for i, h in enumerate(header))
    return (f'<table class="{cls}"><thead><tr>{head}</tr></thead><tbody>' + "".join(rows)
            + "</tbody></table>")


def _svg_img(svg: str, alt: str, width_mm: float | None = None) -> str:
    data = base64.b64encode(svg.encode()).decode()
    style = f' style="width:{width_mm:.1f}mm"' if width_mm else ""
    return f'<img src="data:image/svg+xml;base64,{data}" alt="{esc(alt)}"{style}>'


def _figure(svg: str, alt: str, caption: str, width_mm: float | None = None) -> str:
    return f"<figure>{_svg_img(svg, alt, width_mm)}<figcaption>{caption}</figcaption></figure>"


def _lengths(value_m: float, system: str) -> tuple[str, str]:
    """A cut length in the builder's units (feet and inches, or millimetres) and in metres."""
    from simloop.report_plots import length_text

    own = length_text(value_m, system) if system == "imperial" else f"{value_m * 1e3:,.0f} mm".replace(",", " ")
    return own, f"{value_m:.3f} m"


# ------------------------------------------------------------------------------------------------
# Section: the loop as built
# ------------------------------------------------------------------------------------------------


def cut_list(geom) -> list[tuple[str, float]]:
    """Pieces of wire to cut, in building order: (what, length) [m]; the last entry is the total.

    The winding is one wire from the start terminal; a tap is a mark at the given distance along
    it. Lengths are along the wire's centreline, without what joints and terminals need.
    """
    from simloop.geometry import COLLECTOR, DROP, RUN, WINDING

    kinds = np.array(geom.kinds)
    lengths = geom.lengths_m
    winding = np.flatnonzero(kinds == WINDING)
    along = np.cumsum(lengths[winding])
    rows = []
    for i, n in enumerate(geom.tap_turns):
        last = np.flatnonzero(geom.turn[winding] == n - 1)[-1]
        rows.append((f"winding: start terminal to tap {n} (mark the wire here)", float(along[last])))
    rows.append(("winding wire (one piece, start terminal to its end)", geom.winding_length_m))
    for i, n in enumerate(geom.tap_turns):
        sel = ((kinds == DROP) | (kinds == RUN)) & (geom.tap == i)
        rows.append((f"lead of tap {n} (drop and run)", float(lengths[sel].sum())))
    rows.append(("collector (start terminal to the lead levels)", float(lengths[kinds == COLLECTOR].sum())))
    rows.append(("total wire", geom.wire_length_m))
    return rows


def _spec_table(spec) -> str:
    from simloop.report_plots import length_text
    from simloop.units import format_gauge

    sys = spec.length_system
    w = spec.wire
    gauge = f"{format_gauge(w.gauge_awg)}, " if w.gauge_awg is not None else ""
    t = spec.tuner
    if t is None:
        tuner = "none given (tune assumes a 12–365 pF variable capacitor)"
    elif t.kind == "range":
        tuner = f"variable capacitor {t.min_f * 1e12:.4g}–{t.max_f * 1e12:.4g} pF, Q {t.q:g}"
    else:
        tuner = (f"sliding plates {length_text(t.plate_width_m, sys)} × {length_text(t.plate_length_m, sys)}, "
                 f"{t.gaps} gap(s), dielectric {length_text(t.dielectric_thickness_m, sys)} "
                 f"(εr {t.permittivity:g}), travel {length_text(t.travel_m, sys)}")
    rows = [
        ("frame (outer turn, centreline)", f"{length_text(spec.frame.width_m, sys, both=True)} wide × "
                                           f"{length_text(spec.frame.height_m, sys, both=True)} high"),
        ("winding", f"{spec.winding.turns} turns, {spec.winding.style}, pitch "
                    f"{length_text(spec.winding.pitch_m, sys, both=True)} centre to centre"),
        ("wire", f"{gauge}{w.diameter_m * 1e3:.3f} mm diameter, {w.metal}"),
        ("taps", ", ".join(f"{n} turns" for n in spec.taps.turns) + " from the start terminal"),
        ("leads", f"offset {length_text(spec.leads.offset_m, sys, both=True)} from the winding"),
        ("tuner", tuner),
        ("ground", spec.ground.kind + (f", frame centre {spec.ground.height_m:.2f} m up"
                                       if spec.ground.height_m is not None else "")),
    ]
    r = spec.receiver
    if r is not None:
        x, y, z = (length_text(v, sys) for v in r.position_m)
        rows.append(("radio (ferrite rod)", f"centre at x {x}, y {y}, z {z} from the frame centre; rod "
                                            f"{length_text(r.rod_length_m, sys)} long"))
    body = "".join(f'<tr><td class="text">{esc(a)}</td><td class="text">{esc(b)}</td></tr>' for a, b in rows)
    return f'<table class="spec"><tbody>{body}</tbody></table>'


def section_loop(result) -> str:
    from simloop.report_plots import plot_loop_drawing

    spec, geom = result.spec, result.sweep.geometry
    sys = spec.length_system
    parts = [_spec_table(spec)]
    parts.append(_figure(plot_loop_drawing(spec, geom), "front and side views of the loop",
                         "Drawn to scale in each view; dimensions of the outer turn's centreline. "
                         "x across the frame, y along the loop axis, z up; the tuner connects "
                         "between the start terminal and the chosen tap's lead."))
    own = "ft, in" if sys == "imperial" else "mm"
    rows = []
    for what, length in cut_list(geom):
        a, b = _lengths(length, sys)
        strong = what == "total wire"
        row = f'<td class="text">{esc(what)}</td><td>{esc(a)}</td><td>{esc(b)}</td>'
        rows.append(f"<tr><th class='text'>{esc(what)}</th><th>{esc(a)}</th><th>{esc(b)}</th></tr>"
                    if strong else f"<tr>{row}</tr>")
    parts.append("<h3>Cut list</h3>")
    parts.append(_table(["piece", f"length [{own}]", "length [m]"], rows))
    parts.append("<p>Lengths along the wire's centreline as modelled; add what your joints, terminals "
                 "and strain relief need.</p>")
    if spec.notes:
        parts.append(f'<h3>Notes from the spec</h3><p class="notes">{esc(spec.notes)}</p>')
    return "".join(parts)


# ------------------------------------------------------------------------------------------------
# Section: band coverage and the channel chart
# ------------------------------------------------------------------------------------------------


def _coverage_text(r) -> str:
    items = []
    for i, n in enumerate(r.tap_turns):
        lo, hi = r.f_low_hz[i], r.f_high_hz[i]
        if not (np.isfinite(lo) and np.isfinite(hi)):
            items.append(f"<li>tap {n}: cannot be tuned with this capacitor</li>")
            continue
        err = max((e for e in r.coverage_error[i] if np.isfinite(e)), default=math.nan)
        used = int(np.sum(r.channel_tap_index == i))
        items.append(f"<li>tap {n}: {lo / 1e3:.0f}–{hi / 1e3:.0f} kHz (± {err:.1%}), chosen for {used} channels</li>")
    if r.gaps_hz.size:
        spans = ", ".join(f"{a / 1e3:.0f}–{b / 1e3:.0f} kHz" for a, b in r.gaps_hz)
        first = int(np.flatnonzero(~r.covered)[0])
        items.append(f'<li class="unreliable"><strong>Gaps: {spans}</strong> ({int(np.sum(~r.covered))} '
                     f"channels no tap reaches; e.g. {r.frequencies_hz[first] / 1e3:.0f} kHz "
                     f"{esc(r.channel_reason[first])})</li>")
    else:
        items.append("<li>No gaps: every channel of the band is reached by some tap.</li>")
    s = r.suggestion
    if s is not None and s.taps:
        cov = ", ".join(f"{n} ({a / 1e3:.0f}–{b / 1e3:.0f} kHz)" for n, a, b in zip(s.taps, s.f_low_hz, s.f_high_hz))
        items.append(f"<li>Suggested taps (an estimate, {s.margin:.0%} overlap; confirm with a new study): "
                     f"{cov}</li>")
        items += [f"<li>Taps alone cannot fix: {esc(p)}</li>" for p in s.problems]
    return "<ul>" + "".join(items) + "</ul>"


def _gap_row(r, js: list[int], span: int) -> str:
    f = r.frequencies_hz
    what = f"{f[js[0]] / 1e3:.0f}" if len(js) == 1 else f"{f[js[0]] / 1e3:.0f}–{f[js[-1]] / 1e3:.0f}"
    reason = esc(r.channel_reason[js[0]]) + ("" if len(js) == 1 else f" (at {f[js[0]] / 1e3:.0f} kHz)")
    return (f'<tr class="gap"><td>{what}</td><td class="text" colspan="{span}">gap, {len(js)} '
            f"channel{'s' if len(js) > 1 else ''}: {reason}</td></tr>")


def _channel_row(r, j: int) -> str:
    ok = bool(r.reliable[j])
    c = f"{r.capacitance_f[j] * 1e12:.1f} ± {r.capacitance_error_f[j] * 1e12:.1f}"
    cells = [f"<td>{r.frequencies_hz[j] / 1e3:.0f}</td>", f"<td>{r.channel_tap[j]}</td>", _cell(c, ok)]
    if r.tuner.has_position:
        cells.append(_cell(f"{r.position_m[j] * 1e3:.1f}", ok))
    cells.append(_cell(f"{r.q_loaded[j]:.0f}", ok))
    cells.append(_cell(f"{r.bandwidth_hz[j] / 1e3:.1f}", ok))
    cells.append(_cell(f"−{r.audio_loss_db[j]:.1f}" if r.audio_cut[j] else "–", ok))
    return "<tr>" + "".join(cells) + "</tr>"


def _channel_rows(r) -> list[str]:
    """One row per channel; a run of channels no tap reaches is one row."""
    span = 6 if r.tuner.has_position else 5
    rows, run = [], []
    for j in range(r.frequencies_hz.size):
        if r.channel_tap_index[j] < 0:
            run.append(j)
            continue
        if run:
            rows.append(_gap_row(r, run, span))
            run = []
        rows.append(_channel_row(r, j))
    if run:
        rows.append(_gap_row(r, run, span))
    return rows


def _two_columns(header: list[str], rows: list[str]) -> str:
    """The rows as two tables side by side (one after the other on a narrow screen)."""
    half = (len(rows) + 1) // 2
    if len(rows) < 16:
        return _table(header, rows, cls="channels")
    return (f'<div class="cols">{_table(header, rows[:half], cls="channels")}'
            f'{_table(header, rows[half:], cls="channels")}</div>')


def section_coverage(result) -> str | None:
    r = result.tune
    if r is None:
        return None
    from simloop.report_plots import plot_coverage, plot_slide_scale

    plates = r.tuner.has_position
    f = r.frequencies_hz
    parts = [f"<p>{esc(r.band.name)} band: {f.size} channels {f[0] / 1e3:.0f}–{f[-1] / 1e3:.0f} kHz every "
             f"{r.band.spacing_hz / 1e3:g} kHz. Tuner: {esc(r.tuner.describe())}.</p>", _coverage_text(r)]
    parts.append(_figure(plot_coverage(r), "coverage, setting and bandwidth against frequency",
                         "Top: what each tap covers with the tuner's range (error bars: the model's "
                         "uncertainty). Middle: the setting of each channel on its chosen tap. Bottom: the "
                         "−3 dB bandwidth with the proximity-effect loss, against the channel's audio."))
    if plates:
        svg, width_mm, scale = plot_slide_scale(r)
        size = ("Printed at 100 % (no “fit to page”) this scale is full size: cut it out and glue it "
                "beside the slide." if scale == 1.0 else f"Drawn at {scale:.2f} × full size (the travel "
                                                          "is longer than the page).")
        parts.append("<h3>Slide scale</h3>")
        parts.append(_figure(svg, "slide scale of the plate capacitor", esc(size), width_mm=width_mm))
    header = ["f [kHz]", "tap [turns]", "C [pF]"] + (["slide [mm]"] if plates else []) + [
        "Q<sub>L</sub> [–]", "BW [kHz]", "treble [dB]"]
    parts.append("<h3>Channel chart</h3>")
    parts.append(f"<p>Per channel: the tap, the capacitance with its uncertainty{' and the slide position' if plates else ''}, "
                 f"the loaded Q, the −3 dB bandwidth and how much the loop's selectivity takes off the top "
                 f"audio frequency (±{r.band.audio_hz / 1e3:g} kHz) where it is narrower than the channel.</p>")
    parts.append(_two_columns(header, _channel_rows(r)))
    parts += [f"<p>Note: {esc(n)}</p>" for n in r.notes]
    return "".join(parts)


# ------------------------------------------------------------------------------------------------
# Section: boost at the radio
# ------------------------------------------------------------------------------------------------


def _failed(result, stage: str) -> str | None:
    """The section's text for a stage that failed (None when it did not)."""
    r = result.results.get(stage)
    from simloop.studies import StageFailure

    if isinstance(r, StageFailure):
        return (f'<p class="unreliable"><strong>Not computed:</strong> {esc(r.reason)}. The other results '
                "stand; rerun the study to retry (finished solves are cached).</p>")
    return None


def _rod_text(c, system: str) -> str:
    from simloop.report_plots import length_text

    rod = c.rod
    err = rod.inductance_error or 0.0
    l_text = f"{rod.inductance_h * 1e6:.0f} µH" + (f" ± {err:.0%}" if err else "")
    where = ", ".join(f"{a} {_signed(v, system)}" for a, v in zip("xyz", c.position_m))
    src = "measured" if rod.inductance_source != "computed" else "computed from the rod model"
    return (f"<p>Radio{' (assumed: no [receiver] in the spec)' if c.receiver_assumed else ''}: ferrite rod "
            f"{length_text(rod.length_m, system)} × {length_text(rod.diameter_m, system)}, μi {rod.permeability:g} "
            f"(apparent μ of the rod {rod.rod_permeability:.1f}), coil {rod.turns} turns, loaded Q {rod.loaded_q:g}, "
            f"coil inductance {_span(l_text, err < 0.05)} ({src}); rod centre at {esc(where)} from the frame "
            "centre. Boost is the voltage at the radio's tuning capacitor with the loop beside it over "
            "that without, the radio re-peaked each time (and, alone, turned for its best reception).</p>")


def _signed(value_m: float, system: str) -> str:
    """A coordinate in the spec's units with its sign (− as the minus sign)."""
    from simloop.report_plots import length_text

    return ("−" if value_m < 0 else "+") + length_text(abs(value_m), system)


def _span(text: str, trusted: bool) -> str:
    return text if trusted else f'<span class="untrusted">{text}</span>'


def _boost_rows(result) -> list[str]:
    from simloop.report_plots import best_spot_at_edge, length_text

    c, sys = result.couple, result.spec.length_system
    tap = c.tap_turns[c.tap_index]
    top = int(np.nanargmax(c.capacitor_boost_db))
    width = (f"{c.capacitor_width_f * 1e12:.2f} pF" if np.isfinite(c.capacitor_width_f) else "not resolved")
    if np.isfinite(c.capacitor_width_m):
        width += f" = {c.capacitor_width_m * 1e3:.1f} mm of slide travel"
    p = c.best_position_m
    edge = best_spot_at_edge(c)
    spot = (f"rod centre at x {_signed(p[0], sys)}, y {_signed(p[1], sys)} from the frame centre, "
            f"rod turned {c.best_orientation_deg:g}° from the loop axis")
    rows = [
        ("capacitor-setting peak", f"{c.capacitor_boost_db[top]:.1f} dB at {c.capacitor_f[top] * 1e12:.1f} pF "
                                   f"(the loop alone tunes at {c.loop_capacitance_f * 1e12:.1f} pF)", True),
        ("width of that peak (−3 dB)", width, bool(np.isfinite(c.capacitor_width_f))),
        ("optimum spacing along the loop axis",
         f"{length_text(c.optimum_spacing_m, sys, both=True)}: {c.optimum_spacing_boost_db:.1f} dB"
         + (" (the closest the model allows; it still rises there)" if c.optimum_at_near_limit else ""),
         not c.optimum_at_near_limit),
        ("best spot in the table plane", f"{spot}: {c.best_boost_db:.1f} dB"
         + (" (borders the zone too close to the wire)" if edge else ""), not edge),
        ("coupling at the radio's position", f"k = {c.coupling_k[c.tap_index]:+.5f}; critical k "
                                             f"{c.critical_k:.5f}", True),
    ]
    out = [f'<tr><td class="text">{esc(a)}</td>{_cell(esc(b), ok, "text")}</tr>' for a, b, ok in rows]
    return [f'<tr><th class="text" colspan="2">at {c.frequency_hz / 1e3:.0f} kHz, tap {tap}</th></tr>'] + out


def section_boost(result) -> str | None:
    failed = _failed(result, "couple")
    if failed is not None:
        return failed
    c = result.couple
    if c is None:
        return None
    from simloop.report_plots import plot_boost, plot_placement

    t, sys = result.tune, result.spec.length_system
    plates = t is not None and t.tuner.has_position
    ok = np.isfinite(c.boost_db)
    parts = [_rod_text(c, sys)]
    if ok.any():
        parts.append(f"<p>Over the band the loop adds {np.nanmin(c.boost_db):.1f} to {np.nanmax(c.boost_db):.1f} dB "
                     f"({int(ok.sum())} of {ok.size} channels tuned by some tap) and pulls the radio's dial by up "
                     f"to {np.nanmax(np.abs(c.pull_hz)):.0f} Hz.</p>")
    parts.append(_figure(plot_boost(c, t, sys, plates), "boost against frequency, capacitor and spacing",
                         "Top: boost per channel (dotted line: the frequency of the studies below). Bottom left: "
                         "the loop's capacitor turned through its peak (shaded: within 3 dB). Bottom right: the "
                         "radio moved straight out along the loop axis (★ the optimum; hatched: too close to the "
                         "wire for the model)."))
    parts.append('<table class="spec"><tbody>' + "".join(_boost_rows(result)) + "</tbody></table>")
    parts.append(_figure(plot_placement(c), "placement maps of the radio in the table plane",
                         f"Boost in the plane z = {c.map_z_m:+.2f} m (the bottom of the frame) with the rod "
                         "turned 0°, 45° and 90° from the loop axis (white bar, lower left). The loop's winding seen from above in grey; white "
                         "dashes: the coupling changes sign (no boost there); blank: too close to the wire for "
                         "the model; □ the radio where the spec puts it, seen from above; ★ the best spot."))
    if c.notes:
        parts.append("<ul>" + "".join(f"<li>{esc(n)}</li>" for n in c.notes) + "</ul>")
    parts.append("<p>With a real radio: tune it to a weak station, then turn the loop's capacitor slowly "
                 "through the peak (it is only as wide as the table says). Closer is not always better: if "
                 "the signal drops or the radio's tuning jumps as you move it in, it is over-coupled; move "
                 "it back.</p>")
    return "".join(parts)


# ------------------------------------------------------------------------------------------------
# Section: patterns and nulls
# ------------------------------------------------------------------------------------------------


def _pattern_trust(result) -> tuple[dict, bool]:
    """Per response whether its model is trusted, and whether the tuning capacitance is inside
    the tuner's range (outside: the pattern assumes a capacitor that reaches)."""
    from simloop.tuner import tuner_from_spec

    p = result.pattern
    trusted = {k: not str(p.models.get(k, "")).endswith("below-floor") for k in p.response_db}
    tuner = tuner_from_spec(result.spec.tuner)
    return trusted, bool(tuner.min_f <= p.capacitance_f <= tuner.max_f)


def _null_rows(p, trusted: dict) -> list[str]:
    from simloop.patterns import DEPTH_FLOOR_DB
    from simloop.report_pattern import cause_text

    rows = []
    order = {k: i for i, k in enumerate(p.response_db)}
    for n in sorted(p.nulls, key=lambda n: (order.get(n.of, 99), n.elevation_deg, n.azimuth_deg)):
        ok = trusted.get(n.of, True)
        depth = f"{n.depth_db:.1f}" if n.depth_db > DEPTH_FLOOR_DB else f"exact (&lt; {DEPTH_FLOOR_DB:.0f})"
        rows.append(f'<tr><td class="text">{esc(n.of)}</td><td>{n.elevation_deg:g}</td><td>{n.azimuth_deg:.1f}</td>'
                    f'{_cell(depth, ok)}<td class="text">{esc(cause_text(n))}</td></tr>')
    return rows


def section_pattern(result) -> str | None:
    failed = _failed(result, "pattern")
    if failed is not None:
        return failed
    p = result.pattern
    if p is None:
        return None
    from simloop.report_pattern import MODELS, note_text
    from simloop.report_plots import RESPONSE_LABELS, plot_pattern

    trusted, in_range = _pattern_trust(result)
    cap = _span(f"{p.capacitance_f * 1e12:.1f} pF", in_range)
    parts = [f"<p>At {p.frequency_hz / 1e3:.0f} kHz, {esc(p.polarization)} polarisation, tap {p.tap_turns} tuned "
             f"with {cap}" + ("" if in_range else " (outside the tuner's range: the pattern assumes a capacitor "
                                                 "that reaches)")
             + f"; {p.loop_volts_per_v_m:.3g} V on the capacitor per V/m at the loop's maximum. Azimuth from "
             "the loop's plane (+x) towards its axis (+y); each response relative to its own maximum.</p>"]
    items = [f"<li>{esc(RESPONSE_LABELS.get(k, k))}: {_span(esc(MODELS.get(m, m)), trusted.get(k, True))}</li>"
             for k, m in p.models.items()]
    parts.append("<ul>" + "".join(items) + "</ul>")
    parts.append(_figure(plot_pattern(p, trusted), "polar receive patterns with their nulls",
                         "Rings every 10 dB down to −40 dB; each null marked with its depth (a thin line and "
                         "“?”: the response is not trusted there).", width_mm=None))
    if p.nulls:
        parts.append("<h3>Nulls and what fills them</h3>")
        parts.append(_table(["response", "elevation [°]", "azimuth [°]", "depth [dB]", "what limits the depth"],
                            _null_rows(p, trusted), cls="nulls", text_cols=(0, 4)))
    else:
        parts.append("<p>No null deeper than the finder's threshold in these cuts.</p>")
    notes = [note_text(c) for c in p.notes]
    if notes:
        parts.append("<ul>" + "".join(f"<li>{esc(n)}</li>" for n in notes) + "</ul>")
    parts.append("<p>To null an interfering station, point the loop's axis (the face of the frame) at it and "
                 "turn slowly: the null is narrow. A null filled to −20 to −30 dB is the loop's antenna effect: "
                 "shorten and pair the tuner leads and keep the radio out of the loop's electric field. A sky "
                 "wave at night fills the null whatever you do.</p>")
    return "".join(parts)


# ------------------------------------------------------------------------------------------------
# Section: validation
# ------------------------------------------------------------------------------------------------


def _si(value, unit: str) -> str:
    from simloop.report_validate import _si as si

    return si(value, unit)


def _check_rows(v, n, sources: list[str]) -> list[str]:
    from simloop.validation import BELOW_RESOLUTION, L_CAUTION

    def src(text):
        if text is None:
            return "–"
        if text not in sources:
            sources.append(text)
        return str(sources.index(text) + 1)

    rows = []
    for c in (c for c in v.checks if c.tap == n):
        f = "–" if c.frequency_hz is None else f"{c.frequency_hz / 1e6:.3f}"
        mom = _cell("&lt; resolution", False) if c.flag == BELOW_RESOLUTION else _cell(esc(_si(c.mom, c.unit)))
        d_mom = "–" if c.rel_diff_mom is None else f"{c.rel_diff_mom * 100:+.1f} %"
        d_hb = "–" if c.rel_diff_handbook is None else f"{c.rel_diff_handbook * 100:+.1f} %"
        big = c.quantity in ("L0", "L") and c.rel_diff_mom is not None and abs(c.rel_diff_mom) > L_CAUTION
        s = "/".join(src(x) for x in (c.source_mom, c.source_quasi_static, c.source_handbook))
        rows.append(f'<tr><td class="text">{esc(c.quantity)}</td><td>{f}</td>{mom}'
                    f"<td>{esc(_si(c.quasi_static, c.unit))}</td><td>{esc(_si(c.handbook, c.unit))}</td>"
                    f'{_cell(d_mom, not big)}<td>{d_hb}</td><td>{s}</td></tr>')
    return rows


def _convergence_html(v) -> str:
    from simloop.validation import R_SPREAD_CAUTION, SPREAD_OK

    if not v.convergence:
        return "<p>Mesh convergence: not assessed.</p>"
    labels = [m.label for m in v.meshes]
    segs = ", ".join(f"{m.label} {m.segments} segments" for m in v.meshes)
    rows = []
    for c in v.convergence:
        est = "–" if c.extrapolated_inductance_h is None else esc(_si(c.extrapolated_inductance_h, "H"))
        cells = "".join(f"<td>{esc(_si(x, 'H'))}</td>" for x in c.inductance_h)
        rows.append(f"<tr><td>{c.tap}</td>{cells}{_cell(f'{c.inductance_spread:.2%}', c.inductance_spread <= SPREAD_OK)}"
                    f"{_cell(f'{c.resistance_spread:.2%}', c.resistance_spread <= R_SPREAD_CAUTION)}<td>{est}</td></tr>")
    return (f"<h3>Mesh convergence at {v.convergence_frequency_hz / 1e6:.3f} MHz ({segs})</h3>"
            + _table(["tap [turns]"] + [f"L {lb}" for lb in labels] + ["L spread", "R spread", "L extrapolated"],
                     rows))


def section_validation(result) -> str | None:
    v = result.validation
    if v is None:
        return None
    st = esc(v.verdict.status)
    parts = [f'<p>Verdict: <span class="badge {st}">{st}</span></p>']
    if v.verdict.reasons:
        from simloop.report_validate import verdict_texts  # reasons are codes; worded in the report layer
        parts.append("<ul>" + "".join(f"<li>{esc(x)}</li>" for x in verdict_texts(v.verdict)) + "</ul>")
    parts.append("<p>MoM: the method-of-moments model of the sweep. QS: quasi-static model of the same wire "
                 "path without MoM. HB: the handbook formula. Δ: difference from QS (from MoM where QS has "
                 "none). Series values have the fitted self-capacitance removed.</p>")
    sources: list[str] = []
    header = ["quantity", "f [MHz]", "MoM", "QS", "HB", "ΔMoM", "ΔHB", "sources"]
    for i, n in enumerate(v.tap_turns):
        tv = v.tap_verdicts[n]
        parts.append(f'<h3>Tap {n}: L0 = {v.inductance_h[i] * 1e6:.3f} µH ± {v.inductance_error[i]:.1%} '
                     f'<span class="badge {esc(tv.status)}">{esc(tv.status)}</span></h3>')
        parts.append(_table(header, _check_rows(v, n, sources), cls="checks"))
    parts.append(_convergence_html(v))
    if v.average_gain:
        rows = [f"<tr><td>{a.tap}</td>{_cell(f'{a.agt:.4f}', a.accepted)}<td>{10 * np.log10(a.agt):+.3f}</td></tr>"
                for a in v.average_gain]
        parts.append(f"<h3>Average gain test at {v.agt_frequency_hz / 1e6:.3f} MHz (lossless, free space; "
                     f"accepted 0.95–1.05)</h3>" + _table(["tap [turns]", "AGT [–]", "AGT [dB]"], rows))
    parts.append("<h3>Sources</h3><ol>" + "".join(f"<li>{esc(s)}</li>" for s in sources) + "</ol>")
    if v.notes:
        parts.append("<ul>" + "".join(f"<li>{esc(x)}</li>" for x in v.notes) + "</ul>")
    return "".join(parts)


# ------------------------------------------------------------------------------------------------
# Sections: assumptions and limits, safety, provenance
# ------------------------------------------------------------------------------------------------


def section_assumptions(result) -> str:
    sw = result.sweep
    items = [
        "The impedance across the band comes from a quasi-static circuit solver of the same wire path "
        f"(partial element equivalent circuit, Ruehli 1974; {sw.circuit_segments} segments): no "
        "low-frequency breakdown, no retardation (its error grows as (kD)², D the loop's size), the wires "
        "as filaments on their axes, radiation only from the path's magnetic moment; every point carries "
        "its error estimate.",
        "Thin-wire method of moments (PyNEC) for patterns, ground and the cross-check: wire radius much "
        f"smaller than the pitch and the segment length; {sw.mesh.n_segments} segments "
        f"({esc(sw.mesh.quality)} mesh), trusted only above the low-frequency breakdown floor "
        f"({sw.mesh.floor_frequency_hz() / 1e6:.3f} MHz for this mesh).",
        "NEC's wire loss is skin effect only; the circuit solver adds the proximity effect of close-wound "
        "turns (Smith 1972) for Q, bandwidth and tuning.",
        "No dielectric: the frame, coatings and insulation are not modelled, so a real loop self-resonates "
        "somewhat lower than computed.",
        "No receiver loading: a radio coupled to the loop lowers the loaded Q and widens the bandwidth.",
        "Band plans follow the ITU Radio Regulations, article 5; the channel's audio is taken as half the "
        "channel spacing (common practice).",
    ]
    t = result.tune
    if t is not None:
        items.append(f"Tuner voltage and current are for an incident field of {t.field_v_per_m * 1e3:g} mV/m "
                     "arriving in the loop's plane.")
        h = t.model_error
        if h is not None and np.size(h.circuit_hz):
            items.append(f"The lumped model the channel chart interpolates with differs from exact circuit "
                         f"solves it was not fitted to by at most {float(np.max(h.circuit_max_relative_error)):.2%} "
                         f"in |Z|.")
        if h is not None and h.frequencies_hz.size:
            items.append(f"It differs from direct MoM solves it was not fitted to by at most "
                         f"{float(np.max(h.max_relative_error)):.2%} in |Z|.")
    if result.couple is not None:
        items.append("Boost and placement: the loop's currents are the circuit solver's (exact solves at the "
                     "study frequency, a spline through a few exact solves across the band); the ferrite rod is an "
                     "analytic model (fluxmetric demagnetisation, Chen, Brug & Goldfarb 1991); the radio's "
                     "case, a hand and the table are not modelled; the wave arrives in the loop's plane, "
                     "vertically polarised.")
    if result.pattern is not None:
        items.append("Patterns: by reciprocity from the far field of one MoM solve at the pattern frequency "
                     "where the MoM is trusted, else (free space) from the circuit solver's magnetic and electric "
                     "dipole moments; the null causes come from those dipole moments.")
    if sw.window_note:
        items.append(esc(sw.window_note))
    return "<ul>" + "".join(f"<li>{x}</li>" for x in items) + "</ul>"


SAFETY = (
    "Never put an outdoor wire antenna where it could fall onto, or be blown into, power lines; keep it "
    "clear of them by more than its own length plus a margin, and never work near overhead lines.",
    "Outdoor antennas collect static charge and can be struck by lightning: ground and protect them as "
    "your local electrical code requires, disconnect them in storms, and follow licensed practice.",
    "These loops are for reception. Used to transmit, a loop like this develops kilovolts across its "
    "tuning capacitor even at low power: do not touch a transmitting loop, and follow the rules for "
    "licensed transmitters.",
    "Defer to local electrical codes and licensed practice in every case.",
)


def section_safety(result) -> str:
    items = list(SAFETY)
    if result.tune is not None:
        items += list(result.tune.cautions)
    return '<div class="caution-box"><ul>' + "".join(f"<li>{esc(x)}</li>" for x in items) + "</ul></div>"


def section_provenance(result) -> str:
    v = result.versions
    fact = result.factorisations()
    new = sum(fact["per_stage"].values())
    path = result.spec.path
    rows = [
        ("simloop", v.get("simloop")),
        ("spec", f"{result.spec.name} ({path.name if path is not None else 'bundled'}), SHA-256 {result.spec_sha256}"),
        ("solver", f"PyNEC {v.get('PyNEC')}; numpy {v.get('numpy')}, scipy {v.get('scipy')}, "
                   f"scikit-rf {v.get('scikit-rf')}, matplotlib {v.get('matplotlib')}, Python {v.get('python')}"),
        ("run", f"started {result.started_utc}, {result.seconds:.1f} s "
                + "(" + ", ".join(f"{k} {s:.1f} s" for k, s in result.stage_seconds.items()) + ")"),
        ("solves", f"{new} MoM factorisations ("
                   + ", ".join(f"{k} {n}" for k, n in fact["per_stage"].items())
                   + f"), {fact['shared']} results re-used within the study, "
                   f"{sum(1 for e in result.solve_log if e.how == 'disk')} from the cache, "
                   f"{len(fact['refactorised'])} frequencies factorised twice"),
    ]
    body = "".join(f'<tr><th class="text">{esc(a)}</th><td class="text">{esc(b)}</td></tr>' for a, b in rows)
    return f"<table><tbody>{body}</tbody></table>"


#: The report's sections in order: (name, heading, render function). A render function returns
#: the section's HTML (its heading is added here) or None to leave it out.
SECTIONS: list[tuple[str, str, object]] = [
    ("loop", "The loop as built", section_loop),
    ("coverage", "Band coverage and channel chart", section_coverage),
    ("boost", "Boost at the radio", section_boost),
    ("pattern", "Patterns and nulls", section_pattern),
    ("validation", "Validation", section_validation),
    ("assumptions", "Assumptions and limits", section_assumptions),
    ("safety", "Safety", section_safety),
    ("provenance", "Provenance", section_provenance),
]


def register_section(name: str, heading: str, render, before: str | None = None) -> None:
    """Add a section (replacing one of the same name), before section ``before`` or at the end of
    the results (before the assumptions)."""
    SECTIONS[:] = [s for s in SECTIONS if s[0] != name]
    names = [s[0] for s in SECTIONS]
    at = names.index(before or "assumptions")
    SECTIONS.insert(at, (name, heading, render))


def render_report(result) -> str:
    """The whole report as one HTML document (str)."""
    spec = result.spec
    body = []
    for name, heading, render in SECTIONS:
        fragment = render(result)
        if fragment is None:
            continue
        cls = ' class="newpage"' if name in ("validation",) else ""
        tag = "footer" if name == "provenance" else "section"
        body.append(f'<{tag} id="{name}"{cls}><h2>{esc(heading)}</h2>{fragment}</{tag}>')
    v = result.validation
    verdict = f" · validation: {esc(v.verdict.status)}" if v is not None else ""
    csp = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"
    return (
        "<!DOCTYPE html>\n"
        f'<html lang="en"><head><meta charset="utf-8">'
        f'<meta http-equiv="Content-Security-Policy" content="{csp}">'
        f'<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{esc(spec.name)}: loop study</title><style>{CSS}</style></head><body>"
        f"<h1>{esc(spec.name)}: loop study</h1>"
        f'<p class="sub">{spec.winding.turns} turns {esc(spec.winding.style)}, taps at '
        f"{esc(', '.join(map(str, spec.taps.turns)))} turns · simloop {esc(result.versions.get('simloop'))} · "
        f"{esc(result.started_utc[:10])}{verdict}</p>"
        f'<p class="legend">How to read the numbers: every number carries its unit (in the table heads '
        f'for tables). <span class="untrusted">12.3</span> marks a value outside where the model is trusted '
        f"(error estimate ≥ 5 %, or a check beyond its caution limit): use it with care.</p>"
        + "".join(body) + "</body></html>\n"
    )


def write_report(result, out: Path) -> Path:
    """Write ``report.html`` into ``out`` atomically."""
    import os

    out.mkdir(parents=True, exist_ok=True)
    path = out / "report.html"
    tmp = path.with_suffix(".html.tmp")
    tmp.write_text(render_report(result), encoding="utf-8")
    os.replace(tmp, path)
    return path


# ------------------------------------------------------------------------------------------------
# Summary for scripts and the terminal
# ------------------------------------------------------------------------------------------------


def summary_tune(result) -> dict | None:
    """Coverage per tap, gaps, channels covered and suggested taps."""
    t = result.tune
    if t is None:
        return None
    return {
        "band": t.band.name,
        "coverage": [{"tap": n, "f_low_hz": number_or_none(t.f_low_hz[i]),
                      "f_high_hz": number_or_none(t.f_high_hz[i]),
                      "channels": int(np.sum(t.channel_tap_index == i))} for i, n in enumerate(t.tap_turns)],
        "gaps_hz": [[number_or_none(a), number_or_none(b)] for a, b in t.gaps_hz],
        "channels": int(t.frequencies_hz.size),
        "channels_covered": int(np.sum(t.covered)),
        "suggested_taps": list(t.suggestion.taps) if t.suggestion is not None else None,
    }


def summary_validation(result) -> dict | None:
    """The verdict and its reasons."""
    v = result.validation
    if v is None:
        return None
    from simloop.report_validate import verdict_dict  # reasons in words, and as codes

    return {"verdict": verdict_dict(v.verdict)}


def summary_couple(result) -> dict | None:
    """Best boost and where (position, rod axis and orientation), the optimum spacing, the
    boost over the band; each with the flag that says whether it sits at the model's limit."""
    from simloop.report_plots import best_spot_at_edge

    if "couple" not in result.results:
        return None
    c = result.couple
    if c is None:
        return {"boost": {"failed": result.results["couple"].reason}}
    ok = np.isfinite(c.boost_db)
    return {"boost": {
        "frequency_hz": c.frequency_hz, "tap": int(c.tap_turns[c.tap_index]),
        "best": {"boost_db": number_or_none(c.best_boost_db), "position_m": [float(v) for v in c.best_position_m],
                 "axis": [float(v) for v in c.best_axis], "orientation_deg": float(c.best_orientation_deg),
                 "at_near_wire_limit": best_spot_at_edge(c)},
        "optimum_spacing": {"distance_m": number_or_none(c.optimum_spacing_m),
                            "boost_db": number_or_none(c.optimum_spacing_boost_db),
                            "at_near_limit": bool(c.optimum_at_near_limit)},
        "capacitor_peak_width_f": number_or_none(c.capacitor_width_f),
        "capacitor_peak_width_travel_m": number_or_none(c.capacitor_width_m),
        "band_boost_db": [number_or_none(np.nanmin(c.boost_db)), number_or_none(np.nanmax(c.boost_db))]
        if ok.any() else None,
        "receiver_assumed": bool(c.receiver_assumed)}}


def summary_pattern(result) -> dict | None:
    """The deepest null of each response (loop, receiver, system, ... as the pattern has them)."""
    from simloop.patterns import DEPTH_FLOOR_DB

    if "pattern" not in result.results:
        return None
    p = result.pattern
    if p is None:
        return {"nulls": {"failed": result.results["pattern"].reason}}
    trusted, in_range = _pattern_trust(result)
    deepest = {}
    for name in p.response_db:
        mine = [n for n in p.nulls if n.of == name]
        if not mine:
            deepest[name] = None
            continue
        n = min(mine, key=lambda n: n.depth_db)
        deepest[name] = {"azimuth_deg": float(n.azimuth_deg), "elevation_deg": float(n.elevation_deg),
                         "depth_db": float(n.depth_db), "exact": bool(n.depth_db <= DEPTH_FLOOR_DB),
                         "cause": n.cause, "trusted": bool(trusted[name])}
    return {"nulls": {"frequency_hz": p.frequency_hz, "polarization": p.polarization, "tap": int(p.tap_turns),
                      "capacitance_in_tuner_range": in_range, "deepest": deepest}}


#: Parts of the JSON summary, in order: functions ``result -> dict | None`` whose keys are merged
#: into the summary (a new study adds its headline numbers with one entry here).
SUMMARIES: list = [summary_tune, summary_couple, summary_pattern, summary_validation]


def summary_dict(result, out: Path | None = None) -> dict:
    """The study's headline numbers for scripts: coverage, gaps, best boost and position, optimum
    spacing, deepest nulls, verdict, solves, files."""
    d: dict = {"name": result.spec.name, "spec_sha256": result.spec_sha256}
    for part in SUMMARIES:
        d.update(part(result) or {})
    fact = result.factorisations()
    d["solves"] = {"factorisations": fact["per_stage"], "shared": fact["shared"],
                   "repeated": len(fact["repeated"]), "refactorised": len(fact["refactorised"])}
    if result.failures:
        d["failed_stages"] = {f.stage: f.reason for f in result.failures}
    d["seconds"] = result.seconds
    if out is not None:
        d["report"] = str(out / "report.html")
    return d


def format_summary(result, out: Path | None = None) -> str:
    """A few lines for the terminal: coverage, gaps, verdict, where the report is."""
    d = summary_dict(result, out)
    s = d.get("solves")
    budget = (f" (solve budget: {sum(s['factorisations'].values())} MoM factorisations, "
              f"{s['repeated']} repeated)" if s else "")
    lines = [f"{d['name']}: study done in {d['seconds']:.0f} s{budget}"]
    for c in d.get("coverage", []):
        if c["f_low_hz"] is None or c["f_high_hz"] is None:
            lines.append(f"  tap {c['tap']:>3}: cannot be tuned with this capacitor")
            continue
        lines.append(f"  tap {c['tap']:>3}: {c['f_low_hz'] / 1e3:.0f}–{c['f_high_hz'] / 1e3:.0f} kHz, "
                     f"{c['channels']} channels")
    if "gaps_hz" in d:
        gaps = ", ".join(f"{a / 1e3:.0f}–{b / 1e3:.0f} kHz" for a, b in d["gaps_hz"])
        lines.append(f"  gaps: {gaps}" if gaps else "  no gaps in the band")
    b = d.get("boost", {})
    if "failed" in b:
        lines.append(f"  boost: not computed ({b['failed']})")
    elif b:
        best, sp = b["best"], b["optimum_spacing"]
        x, y, _ = best["position_m"]
        lines.append(f"  boost: best {best['boost_db']:.1f} dB at x {x:+.2f} m, y {y:+.2f} m, rod at "
                     f"{best['orientation_deg']:g}°; optimum spacing {sp['distance_m'] * 100:.0f} cm "
                     f"({sp['boost_db']:.1f} dB{', closest allowed' if sp['at_near_limit'] else ''})")
    nl = d.get("nulls", {})
    if "failed" in nl:
        lines.append(f"  pattern: not computed ({nl['failed']})")
    elif nl:
        parts = [f"{k} {v['depth_db']:.0f} dB at {v['azimuth_deg']:.0f}°" if not v["exact"] else f"{k} exact"
                 for k, v in nl["deepest"].items() if v is not None]
        lines.append(f"  deepest nulls at {nl['frequency_hz'] / 1e3:.0f} kHz: " + (", ".join(parts) or "none"))
    if "verdict" in d:
        status, reasons = d["verdict"]["status"], d["verdict"]["reasons"]
        if status == "ok" or not reasons:
            lines.append(f"  validation: {status.upper()}" + (f": {reasons[0]}" if reasons else ""))
        else:
            lines.append(f"  validation: {status.upper()}, {len(reasons)} reason{'s' if len(reasons) > 1 else ''} "
                         f"(first: {reasons[0]})")
    if out is not None:
        lines.append(f"report: {out / 'report.html'}")
    return "\n".join(lines)
