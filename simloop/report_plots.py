"""Figures of the study report, in the report style (:mod:`simloop.plot_style`).

Each function takes results and returns SVG text drawn at the size the report shows it; nothing
is written to disk here. Lengths on drawings are given in the spec's own unit system
(:func:`length_text`).
"""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from simloop.geometry import DROP, RUN, WINDING
from simloop.plot_style import (ACCENT, INK, MUTED, TAP_COLOURS, WARN, figure, report_style, tap_style, to_svg,
                                untrusted_style)

__all__ = ["best_spot_at_edge", "boost_figure", "length_text", "pattern_figure", "placement_figure", "plot_boost",
           "plot_coverage", "plot_loop_drawing", "plot_pattern", "plot_placement", "plot_slide_scale"]

#: Width of a full-width figure in the report (A4 text width with 18 mm margins). [mm]
FULL_WIDTH_MM = 170.0


def length_text(value_m: float, system: str = "metric", both: bool = False) -> str:
    """A length in the spec's units: inches (feet and inches above 3 ft) or mm/m; ``both`` adds
    the other system in brackets."""
    if system == "imperial":
        inches = value_m / 0.0254
        if inches >= 36:
            ft = int(inches // 12)
            text = f"{ft} ft {inches - 12 * ft:.1f} in"
        else:
            text = f"{inches:.2f} in" if inches < 10 else f"{inches:.1f} in"
        other = f"{value_m:.3f} m" if value_m >= 1 else f"{value_m * 1e3:.0f} mm"
    else:
        text = f"{value_m:.3f} m" if value_m >= 1 else (f"{value_m * 1e3:.1f} mm" if value_m < 0.1
                                                       else f"{value_m * 1e3:.0f} mm")
        other = f"{value_m / 0.0254:.2f} in"
    return f"{text} ({other})" if both else text


# ------------------------------------------------------------------------------------------------
# The loop as built
# ------------------------------------------------------------------------------------------------


def _dimension(ax, p, q, text, offset, horizontal=True):
    """A dimension line between p and q (data coordinates), shifted by ``offset`` across it."""
    if horizontal:
        a, b = (p[0], p[1] + offset), (q[0], q[1] + offset)
        for x, y in (p, q):
            ax.plot([x, x], [y, y + offset * 1.08], color=MUTED, lw=0.4)
        ax.annotate("", a, b, arrowprops=dict(arrowstyle="<|-|>", lw=0.5, color=INK, shrinkA=0, shrinkB=0,
                                              mutation_scale=6))
        ax.text(0.5 * (a[0] + b[0]), a[1], text, ha="center", va="bottom" if offset > 0 else "top",
                fontsize=7, bbox=dict(fc="white", ec="none", pad=0.6))
    else:
        a, b = (p[0] + offset, p[1]), (q[0] + offset, q[1])
        for x, y in (p, q):
            ax.plot([x, x + offset * 1.08], [y, y], color=MUTED, lw=0.4)
        ax.annotate("", a, b, arrowprops=dict(arrowstyle="<|-|>", lw=0.5, color=INK, shrinkA=0, shrinkB=0,
                                              mutation_scale=6))
        ax.text(a[0], 0.5 * (a[1] + b[1]), text, ha="center", va="center", rotation=90, fontsize=7,
                bbox=dict(fc="white", ec="none", pad=0.6))


def _pieces(ax, geom, axes_idx, receiver_spec=None):
    """Winding pieces in ink, leads in the tap colours; taps and the start terminal marked."""
    kinds = np.array(geom.kinds)
    u, v = axes_idx
    for j in np.flatnonzero(kinds == WINDING):
        p, q = geom.starts[j], geom.ends[j]
        ax.plot([p[u], q[u]], [p[v], q[v]], color=INK, lw=0.7, solid_capstyle="round")
    for j in np.flatnonzero(kinds != WINDING):
        p, q = geom.starts[j], geom.ends[j]
        t = geom.tap[j]
        colour = tap_style(t)["color"] if kinds[j] in (DROP, RUN) and t >= 0 else MUTED
        ax.plot([p[u], q[u]], [p[v], q[v]], color=colour, lw=1.1)
    start = geom.starts[0]
    ax.plot(start[u], start[v], "o", color=INK, ms=3.5, zorder=5)
    for i, n in enumerate(geom.tap_turns):
        drop = geom.port_piece(i)
        p = geom.starts[drop]
        st = tap_style(i)
        ax.plot(p[u], p[v], st["marker"], color=st["color"], ms=4.5, mec="white", mew=0.5, zorder=6)
    if receiver_spec is not None:
        c = np.asarray(receiver_spec.position_m, dtype=float)
        a = np.asarray(receiver_spec.axis, dtype=float) * receiver_spec.rod_length_m / 2
        ax.plot([c[u] - a[u], c[u] + a[u]], [c[v] - a[v], c[v] + a[v]], color=ACCENT, lw=3.0,
                solid_capstyle="butt", zorder=4)
        ax.plot(c[u], c[v], "s", color=ACCENT, ms=3.5, zorder=5)


def _bare(ax):
    ax.set_aspect("equal", adjustable="box")
    ax.grid(False)
    for sp in ax.spines.values():
        sp.set_visible(False)
    ax.set_xticks([])
    ax.set_yticks([])


def _extent(spec, geom):
    pts = np.vstack([geom.starts, geom.ends])
    rec = spec.receiver
    if rec is not None:
        c = np.asarray(rec.position_m)
        a = np.asarray(rec.axis) * rec.rod_length_m / 2
        pts = np.vstack([pts, c - a, c + a])
    return pts.min(axis=0), pts.max(axis=0)


def _lead_detail(ax, spec, geom):
    """Side view of the lead region at a larger scale, each lead's depth labelled."""
    sys = spec.length_system
    _pieces(ax, geom, (1, 2), spec.receiver)
    kinds = np.array(geom.kinds)
    leads = kinds != WINDING
    pts = np.vstack([geom.starts[leads], geom.ends[leads]])
    lo, hi = pts.min(axis=0), pts.max(axis=0)
    size = max(hi[1] - lo[1], hi[2] - lo[2])
    pad = 0.35 * size
    ax.set_xlim(lo[1] - 0.5 * pad, hi[1] + 1.6 * pad)
    ax.set_ylim(lo[2] - 0.5 * pad, hi[2] + 0.5 * pad)
    top = geom.starts[0]
    for i, n in enumerate(geom.tap_turns):
        run = np.flatnonzero((kinds == RUN) & (geom.tap == i))[0]
        p = geom.starts[run]
        depth = abs(p[2] - top[2]) if spec.winding.style == "stacked" else abs(p[1] - top[1])
        ax.text(hi[1] + 0.08 * size, p[2], f"tap {n}: {length_text(depth, sys)}",
                va="center", ha="left", fontsize=6.5, color=tap_style(i)["color"])
    ax.set_title("leads, enlarged")
    word = "below" if spec.winding.style == "stacked" else "in front of"
    ax.text(0.0, -0.02, f"lead depths {word} the winding;\nthe collector starts {length_text(spec.leads.offset_m, sys)} "
            "from the start terminal", transform=ax.transAxes, fontsize=6.5, color=MUTED, va="top")


def plot_loop_drawing(spec, geom) -> str:
    """Front (x–z) and side (y–z) views of the loop and a detail of the leads, as SVG."""
    with report_style():
        return to_svg(loop_drawing_figure(spec, geom))


def loop_drawing_figure(spec, geom) -> Figure:
    """Front (x–z) and side (y–z) views of the frame, turns, taps, leads and the radio, and a
    detail of the leads. Call inside :func:`simloop.plot_style.report_style`."""
    sys = spec.length_system
    w, h, pitch = spec.frame.width_m, spec.frame.height_m, spec.winding.pitch_m
    rec = spec.receiver
    lo, hi = _extent(spec, geom)
    span_x, span_y, span_z = hi - lo
    pad = 0.12 * max(span_x, span_z)
    fig = figure(FULL_WIDTH_MM, 105)
    grid = fig.add_gridspec(1, 3, width_ratios=[1.0, 0.42, 0.55])
    front, side, detail = (fig.add_subplot(grid[k]) for k in range(3))
    for ax in (front, side, detail):
        _bare(ax)
    _pieces(front, geom, (0, 2), rec)
    _pieces(side, geom, (1, 2), rec)
    front.set_title("front view")
    side.set_title("side view")
    _dimension(front, (-w / 2, h / 2), (w / 2, h / 2), f"width {length_text(w, sys)}", 0.06 * span_z)
    _dimension(front, (-w / 2, -h / 2), (-w / 2, h / 2), f"height {length_text(h, sys)}",
               -0.07 * span_x, horizontal=False)
    ys = geom.starts[np.array(geom.kinds) == WINDING][:, 1]
    label = f"{spec.winding.turns} turns\npitch {length_text(pitch, sys)}"
    if spec.winding.style == "stacked":
        side.text(0.5 * (ys.min() + ys.max()), h / 2 + 0.04 * span_z, label, ha="center", va="bottom",
                  fontsize=7)
    else:
        front.text(0, h / 2 - spec.winding.turns * pitch - 0.03 * span_z, label + " (each turn inset)",
                   ha="center", va="top", fontsize=7)
    _lead_detail(detail, spec, geom)
    handles = [front.plot([], [], color=INK, lw=0.7, label="winding (centreline)")[0],
               front.plot([], [], "o", color=INK, ms=3.5, label="start terminal")[0]]
    for i, n in enumerate(geom.tap_turns):
        st = tap_style(i)
        handles.append(front.plot([], [], color=st["color"], marker=st["marker"], lw=1.1, ms=4.5,
                                  label=f"tap {n}: lead; tuner across it and the start terminal")[0])
    handles.append(front.plot([], [], color=MUTED, lw=1.1, label="collector (common lead)")[0])
    if rec is not None:
        handles.append(front.plot([], [], color=ACCENT, lw=3.0, label="radio's ferrite rod")[0])
    fig.legend(handles=handles, loc="outside lower center", ncol=2, fontsize=7)
    for ax, (u, v) in ((front, (0, 2)), (side, (1, 2))):
        ax.set_xlim(lo[u] - pad, hi[u] + pad)
        ax.set_ylim(lo[v] - pad, hi[v] + pad)
    side.set_xlim(0.5 * (lo[1] + hi[1]) - 0.5 * span_z * 0.42, 0.5 * (lo[1] + hi[1]) + 0.5 * span_z * 0.42)
    return fig


# ------------------------------------------------------------------------------------------------
# Band coverage and the channel chart
# ------------------------------------------------------------------------------------------------


def _coverage_bars(ax, r):
    f_k = r.frequencies_hz / 1e3
    lo_b, hi_b = f_k[0], f_k[-1]
    ax.axvspan(lo_b, hi_b, color=ACCENT, alpha=0.08, lw=0)
    k = len(r.tap_turns)
    for i, n in enumerate(r.tap_turns):
        st = tap_style(i)
        lo, hi = r.f_low_hz[i] / 1e3, r.f_high_hz[i] / 1e3
        y = k - 1 - i
        if not (np.isfinite(lo) and np.isfinite(hi)):
            ax.text(lo_b, y, f"tap {n}: cannot be tuned", va="center", fontsize=7, color=WARN)
            continue
        ax.barh(y, hi - lo, left=lo, height=0.5, color=st["color"], alpha=0.85)
        err = r.coverage_error[i]
        for x, e in ((lo, err[0]), (hi, err[1])):
            if np.isfinite(e):
                ax.errorbar(x, y, xerr=x * e, color=INK, lw=0.7, capsize=2)
        shown = (max(lo, lo_b), min(hi, hi_b))
        if shown[1] > shown[0]:
            ax.text(0.5 * (shown[0] + shown[1]), y + 0.3, f"{lo:.0f}–{hi:.0f} kHz", ha="center", va="bottom",
                    fontsize=6.5)
    for g0, g1 in r.gaps_hz / 1e3:
        ax.axvspan(g0, max(g1, g0 + 1.0), facecolor="none", hatch="////", edgecolor=WARN, lw=0)
        ax.text(g0, k - 0.45, f" gap {g0:.0f}–{g1:.0f} kHz", ha="left", va="bottom",
                fontsize=6.5, color=WARN, bbox=dict(fc="white", ec="none", pad=0.8))
    ax.set_yticks(range(k), [f"tap {n}" for n in reversed(r.tap_turns)])
    ax.set_ylim(-0.6, k - 0.05)
    ax.grid(axis="y", visible=False)
    ax.set_title(f"band coverage per tap with the tuner's range ({r.band.name}, shaded; gaps hatched)")


def _setting(ax, r):
    plates = r.tuner.has_position
    scale, unit = (1e3, "slide position [mm]") if plates else (1e12, "tuning capacitance [pF]")
    value = r.position_m if plates else r.capacitance_f
    f_k = r.frequencies_hz / 1e3
    if not plates:
        ax.axhspan(r.tuner.min_f * 1e12, r.tuner.max_f * 1e12, color=ACCENT, alpha=0.08, lw=0)
        ax.set_yscale("log")
        from matplotlib.ticker import FuncFormatter, LogLocator

        ax.yaxis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
        ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
        ax.yaxis.set_minor_formatter(FuncFormatter(lambda v, _: ""))
    for i, n in enumerate(r.tap_turns):
        st = tap_style(i)
        sel = r.channel_tap_index == i
        good, bad = sel & r.reliable, sel & ~r.reliable
        ax.plot(f_k[sel], value[sel] * scale, color=st["color"], ls=st["linestyle"], lw=1.0)
        ax.plot(f_k[good], value[good] * scale, st["marker"], color=st["color"], ms=2.8, ls="none")
        ax.plot(f_k[bad], value[bad] * scale, ms=3.2, **untrusted_style(i))
    ax.set_ylabel(unit)
    if not plates and np.any(r.covered):
        c = r.capacitance_f[r.covered] * 1e12
        ax.set_ylim(min(np.nanmin(c), r.tuner.min_f * 1e12) / 1.3, max(np.nanmax(c), r.tuner.max_f * 1e12) * 1.3)
    ax.set_title("setting per channel on its chosen tap" + ("" if plates else " (tuner's range shaded)"))


def _bandwidth(ax, r):
    f_k = r.frequencies_hz / 1e3
    audio = 2 * r.band.audio_hz / 1e3
    ax.axhline(audio, color=INK, lw=0.7, ls=(0, (4, 2)))
    ax.text(f_k[-1], audio, f"channel audio ±{r.band.audio_hz / 1e3:g} kHz", ha="right", va="bottom",
            fontsize=6.5)
    for i, n in enumerate(r.tap_turns):
        st = tap_style(i)
        sel = r.channel_tap_index == i
        ax.plot(f_k[sel], r.bandwidth_hz[sel] / 1e3, color=st["color"], ls=st["linestyle"], lw=1.0,
                marker=st["marker"], ms=2.4)
    ymax = np.nanmax(np.where(r.covered, r.bandwidth_no_proximity_hz, np.nan)) / 1e3 if np.any(r.covered) else audio
    ax.set_ylim(0, max(audio, ymax) * 1.2)
    ax.set_ylabel("−3 dB bandwidth [kHz]")
    ax.set_xlabel("frequency [kHz]")
    ax.set_title("bandwidth of the tuned loop (below the dashed line it cuts treble)")


def plot_coverage(r) -> str:
    """Coverage bars, the setting per channel and the bandwidth, as SVG."""
    with report_style():
        return to_svg(coverage_figure(r))


def coverage_figure(r) -> Figure:
    """Coverage bars, the setting per channel and the bandwidth, on one frequency axis. Call
    inside :func:`simloop.plot_style.report_style`."""
    fig = figure(FULL_WIDTH_MM, 150)
    ax_c, ax_s, ax_b = fig.subplots(3, 1, sharex=True, height_ratios=[1.0, 1.5, 1.1])
    _coverage_bars(ax_c, r)
    _setting(ax_s, r)
    _bandwidth(ax_b, r)
    handles = []
    for i, n in enumerate(r.tap_turns):
        st = tap_style(i)
        handles.append(ax_s.plot([], [], color=st["color"], ls=st["linestyle"], marker=st["marker"],
                                 ms=2.8, label=f"tap {n}")[0])
    handles.append(ax_s.plot([], [], ms=3.2, label="model not trusted here", **untrusted_style(0))[0])
    fig.legend(handles=handles, loc="outside upper right", ncol=len(handles))
    f_k = r.frequencies_hz / 1e3
    margin = 0.02 * (f_k[-1] - f_k[0])
    ax_b.set_xlim(f_k[0] - margin, f_k[-1] + margin)
    return fig


def plot_slide_scale(r) -> tuple[str, float, float]:
    """The plate tuner's slide scale, 1:1 when the travel fits the page, channels marked.

    Returns the SVG, the width to print it at [mm] and the scale (1.0 = full size) [-].
    """
    with report_style():
        fig, width_mm, scale = slide_scale_figure(r)
        return to_svg(fig), width_mm, scale


def slide_scale_figure(r) -> tuple[Figure, float, float]:
    """The slide scale figure, its print width [mm] and scale [-] (see :func:`plot_slide_scale`)."""
    travel_mm = r.tuner.max_overlap_m * 1e3
    scale = min(1.0, (FULL_WIDTH_MM - 20.0) / travel_mm)
    width_mm = travel_mm * scale + 20.0
    fig = Figure(figsize=(width_mm / 25.4, 34.0 / 25.4))  # fixed layout: 1 mm on paper = 1 mm of slide
    ax = fig.add_axes((10.0 / width_mm, 0.30, travel_mm * scale / width_mm, 0.50))
    ax.set_xlim(0, travel_mm)
    ax.set_ylim(0, 1)
    ax.set_yticks([])
    ax.grid(False)
    ax.spines["left"].set_visible(False)
    ax.set_xticks(np.arange(0, travel_mm + 1e-9, 10.0))
    ax.set_xticks(np.arange(0, travel_mm + 1e-9, 1.0), minor=True)
    ax.tick_params(axis="x", which="minor", length=2.0, width=0.4)
    ax.set_xlabel("plate overlap from the fully open end [mm]")
    f_k = r.frequencies_hz / 1e3
    ok = r.covered & np.isfinite(r.position_m)
    last = -1e9
    for j in np.flatnonzero(ok):
        x = r.position_m[j] * 1e3
        trusted = bool(r.reliable[j])
        ax.plot([x, x], [0, 0.3], color=INK if trusted else MUTED, lw=0.5,
                ls="-" if trusted else (0, (1.5, 1)))
        if abs(x - last) * scale >= 2.2:  # labels at least 2.2 mm apart on paper
            ax.text(x, 0.34, f"{f_k[j]:.0f}", rotation=90, ha="center", va="bottom", fontsize=5.5,
                    color=INK if trusted else MUTED)
            last = x
    ax.set_title("slide scale: channel carriers in kHz (grey dotted: model not trusted)")
    return fig, width_mm, scale


# ------------------------------------------------------------------------------------------------
# Boost at the radio
# ------------------------------------------------------------------------------------------------


def _boost_band(ax, c, tune):
    """Boost per channel, one line per tap; hollow markers where the tuning chart is not trusted."""
    f_k = np.asarray(c.frequencies_hz) / 1e3
    reliable = np.asarray(tune.reliable, dtype=bool) if tune is not None else np.ones(f_k.size, bool)
    for i, n in enumerate(c.tap_turns):
        st = tap_style(i)
        sel = (np.asarray(c.channel_tap) == i) & np.isfinite(c.boost_db)
        if not sel.any():
            continue
        good, bad = sel & reliable, sel & ~reliable
        ax.plot(f_k[sel], c.boost_db[sel], color=st["color"], ls=st["linestyle"], lw=1.0,
                label=f"tap {n} (k = {c.coupling_k[i]:+.4f})")
        ax.plot(f_k[good], c.boost_db[good], st["marker"], color=st["color"], ms=2.6, ls="none")
        ax.plot(f_k[bad], c.boost_db[bad], ms=3.0, **untrusted_style(i))
    if np.any(~reliable & np.isfinite(c.boost_db)):
        ax.plot([], [], ms=3.0, label="tuning not trusted here", **untrusted_style(0))
    ax.axvline(c.frequency_hz / 1e3, color=MUTED, lw=0.6, ls=(0, (1, 1.5)))
    ax.set_xlabel("frequency [kHz]")
    ax.set_ylabel("boost [dB]")
    ax.set_title("boost at the radio, loop tuned per channel with the chart's tap")
    ax.legend(loc="lower right", ncol=2)
    finite = c.boost_db[np.isfinite(c.boost_db)]
    if finite.size:
        lo, hi = float(finite.min()), float(finite.max())
        pad = max(1.0, 0.15 * (hi - lo))
        ax.set_ylim(lo - pad, hi + pad)


def _capacitor_peak(ax, c, tuner_has_position: bool):
    """Boost against the loop's capacitor at the study frequency, the −3 dB span shaded."""
    cap = c.capacitor_f * 1e12
    ax.plot(cap, c.capacitor_boost_db, color=INK, lw=1.1)
    top = int(np.nanargmax(c.capacitor_boost_db))
    peak = float(c.capacitor_boost_db[top])
    inside = c.capacitor_boost_db >= peak - 3.0
    if np.isfinite(c.capacitor_width_f):
        ax.axvspan(cap[inside].min(), cap[inside].max(), color=ACCENT, alpha=0.12, lw=0)
        width = f"−3 dB: {c.capacitor_width_f * 1e12:.2f} pF"
        if tuner_has_position and np.isfinite(c.capacitor_width_m):
            width += f" = {c.capacitor_width_m * 1e3:.1f} mm of slide"
    else:
        width = "−3 dB width not resolved"
    ax.axhline(peak - 3.0, color=MUTED, lw=0.6, ls=(0, (4, 2)))
    ax.axvline(c.loop_capacitance_f * 1e12, color=MUTED, lw=0.8, ls=(0, (1, 1.5)),
               label=f"loop tuned alone: {c.loop_capacitance_f * 1e12:.1f} pF")
    ax.plot([cap[top]], [peak], "v", color=INK, ms=4, label=f"peak {peak:.1f} dB at {cap[top]:.1f} pF\n{width}")
    ax.legend(loc="best", fontsize=6.5, handlelength=1.0, frameon=False)
    ax.set_xlabel("loop tuning capacitor [pF]")
    ax.set_ylabel("boost [dB]")
    ax.set_title(f"the capacitor's peak at {c.frequency_hz / 1e3:.0f} kHz, tap {c.tap_turns[c.tap_index]}")


def _spacing(ax, c, system: str):
    """Boost with the radio moved straight out along the loop axis; the optimum starred."""
    d_cm = c.distance_m * 100
    ax.plot(d_cm, c.distance_boost_db, color=INK, lw=1.1)
    refused = ~np.isfinite(c.distance_boost_db)
    if refused.any():
        ax.axvspan(d_cm[0], d_cm[refused].max(), facecolor="none", hatch="////", edgecolor=WARN, lw=0)
        ax.text(d_cm[refused].max(), ax.get_ylim()[0], " too close for the model", rotation=90, fontsize=6.5,
                color=WARN, va="bottom", ha="left")
    style = dict(marker="*", ms=9, ls="none")
    if c.optimum_at_near_limit:
        style.update(markerfacecolor="white", markeredgecolor=INK)
    else:
        style.update(color=INK)
    ax.plot([c.optimum_spacing_m * 100], [c.optimum_spacing_boost_db], **style)
    word = "at the closest the model allows" if c.optimum_at_near_limit else "optimum"
    ax.lines[-1].set_label(f"{word}: {length_text(c.optimum_spacing_m, system)}, {c.optimum_spacing_boost_db:.1f} dB")
    ax.legend(loc="best", fontsize=6.5, handlelength=1.0, frameon=False)
    ax.set_xlabel("rod centre's distance along the loop axis [cm]")
    ax.set_ylabel("boost [dB]")
    ax.set_title("spacing along the loop axis")


def plot_boost(c, tune, system: str = "metric", plates: bool = False) -> str:
    """Boost against frequency, against the loop's capacitor and against spacing, as SVG."""
    with report_style():
        return to_svg(boost_figure(c, tune, system, plates))


def boost_figure(c, tune, system: str = "metric", plates: bool = False) -> Figure:
    """The boost figure (see :func:`plot_boost`). Call inside :func:`report_style`."""
    fig = figure(FULL_WIDTH_MM, 125)
    grid = fig.add_gridspec(2, 2, height_ratios=[1.0, 1.0])
    _boost_band(fig.add_subplot(grid[0, :]), c, tune)
    _capacitor_peak(fig.add_subplot(grid[1, 0]), c, plates)
    _spacing(fig.add_subplot(grid[1, 1]), c, system)
    return fig


def best_spot_at_edge(c) -> bool:
    """Whether the map's best spot borders the area refused as too close to the wire (a NaN
    among its eight neighbours), i.e. nearer may be better or worse than the model can say."""
    from simloop.coupling import MAP_ORIENTATIONS_DEG

    o = MAP_ORIENTATIONS_DEG.index(c.best_orientation_deg)
    ix = int(np.argmin(np.abs(c.map_x_m - c.best_position_m[0])))
    iy = int(np.argmin(np.abs(c.map_y_m - c.best_position_m[1])))
    window = c.map_boost_db[o, max(iy - 1, 0):iy + 2, max(ix - 1, 0):ix + 2]
    return bool(np.isnan(window).any())


def plot_placement(c) -> str:
    """The placement maps, one per rod orientation, as SVG."""
    with report_style():
        return to_svg(placement_figure(c))


def placement_figure(c) -> Figure:
    """Boost over the table plane for each rod orientation: monotone-lightness colour scale with
    labelled contours (reads in grey), the loop's winding from above, the best spot starred.
    Call inside :func:`report_style`."""
    from matplotlib.patches import Rectangle

    from simloop.coupling import MAP_ORIENTATIONS_DEG

    n = len(MAP_ORIENTATIONS_DEG)
    fig = figure(FULL_WIDTH_MM, 64)
    axes = fig.subplots(1, n, sharey=True)
    finite = c.map_boost_db[np.isfinite(c.map_boost_db)]
    vmin, vmax = (float(np.percentile(finite, 5)), float(finite.max())) if finite.size else (0.0, 1.0)
    step = 3.0 if vmax - vmin > 12 else 1.0
    levels = np.arange(np.floor(vmin / step) * step, np.ceil(vmax / step) * step + step / 2, step)
    xx, yy = np.meshgrid(c.map_x_m, c.map_y_m)
    best = MAP_ORIENTATIONS_DEG.index(c.best_orientation_deg)
    (x0, x1), (y0, y1) = c.footprint_m
    for o, ax in enumerate(axes):
        db = np.clip(c.map_boost_db[o], levels[0], None)
        cf = ax.contourf(xx, yy, db, levels=levels, cmap="cividis")
        cs = ax.contour(xx, yy, db, levels=levels[1::2], colors=INK, linewidths=0.4)
        ax.clabel(cs, fmt="%.0f", fontsize=6)
        k = c.map_k[o]
        if np.nanmin(k) < 0 < np.nanmax(k):
            ax.contour(xx, yy, k, levels=[0.0], colors="white", linewidths=0.9, linestyles=[(0, (3, 2))])
        ax.add_patch(Rectangle((x0, y0), x1 - x0, max(y1 - y0, 0.01), facecolor=MUTED, edgecolor=INK, lw=0.6))
        ax.plot([c.position_m[0]], [c.position_m[1]], "s", mfc="none", mec="white", mew=1.0, ms=5)
        if o == best:
            ax.plot([c.best_position_m[0]], [c.best_position_m[1]], "*", color=INK, mec="white", mew=0.7, ms=11)
        th = np.radians(MAP_ORIENTATIONS_DEG[o])
        u = 0.06 * np.array([np.sin(th), np.cos(th)])
        ax.annotate("", xy=(0.14 + u[0], 0.14 + u[1]), xytext=(0.14 - u[0], 0.14 - u[1]),
                    xycoords="axes fraction", arrowprops=dict(arrowstyle="-", lw=3.0, color="white"))
        ax.set_title(f"rod at {MAP_ORIENTATIONS_DEG[o]:g}°" + ("  (★ best)" if o == best else ""))
        ax.set_xlabel("x, across the frame [m]")
        ax.set_aspect("equal")
        ax.grid(False)
    axes[0].set_ylabel("y, along the loop axis [m]")
    fig.colorbar(cf, ax=list(axes), label="boost [dB]", shrink=0.95, aspect=18)
    return fig


# ------------------------------------------------------------------------------------------------
# Patterns and nulls
# ------------------------------------------------------------------------------------------------

#: The pattern's dB floor in the report's polar plots: rings from here to 0 dB. [dB]
PATTERN_FLOOR_DB = -40.0

#: How each response is drawn, told apart in grey by dash and width as well as colour; a
#: response not listed here takes the next of :data:`_EXTRA_RESPONSES`.
RESPONSE_STYLE = {
    "loop": {"color": INK, "ls": "-", "lw": 1.3, "marker": "v"},
    "receiver": {"color": TAP_COLOURS[1], "ls": (0, (5, 2)), "lw": 1.1, "marker": "^"},
    "system": {"color": TAP_COLOURS[0], "ls": (0, (1, 1.2)), "lw": 1.6, "marker": "s"},
}
_EXTRA_RESPONSES = ({"color": TAP_COLOURS[3], "ls": "-.", "lw": 1.1, "marker": "D"},
                    {"color": TAP_COLOURS[4], "ls": (0, (6, 1, 1, 1)), "lw": 1.1, "marker": "o"})
RESPONSE_LABELS = {"loop": "loop (voltage on its tuned capacitor)", "receiver": "radio's rod alone",
                   "system": "loop + radio"}


def response_style(name: str, order: int = 0) -> dict:
    """Line style of a pattern response (known names fixed; others by their order)."""
    return RESPONSE_STYLE.get(name, _EXTRA_RESPONSES[order % len(_EXTRA_RESPONSES)])


def _polar_panel(ax, p, i, trusted: dict):
    from simloop.patterns import DEPTH_FLOOR_DB

    span = -PATTERN_FLOOR_DB
    phi = np.radians(np.append(p.azimuth_deg, p.azimuth_deg[0] + 360.0))
    el = p.elevation_deg[i]
    for k, (name, db) in enumerate(p.response_db.items()):
        st = response_style(name, k)
        r = np.maximum(np.append(db[i], db[i][0]), PATTERN_FLOOR_DB) + span
        ax.plot(phi, r, color=st["color"], ls=st["ls"], lw=st["lw"] if trusted[name] else 0.7,
                label=RESPONSE_LABELS.get(name, name) + ("" if trusted[name] else " (not trusted)"))
    for k, name in enumerate(p.response_db):
        st = response_style(name, k)
        for x in (x for x in p.nulls if x.of == name and x.elevation_deg == el):
            r = max(x.depth_db, PATTERN_FLOOR_DB) + span
            a = np.radians(x.azimuth_deg)
            ax.plot([a], [r], st["marker"], color=st["color"], mfc="white", mew=0.8, ms=4.5)
            text = f"{x.depth_db:.0f} dB".replace("-", "−") if x.depth_db > DEPTH_FLOOR_DB else "exact"
            side = 1 if k % 2 == 0 else -1
            ax.annotate(text + ("?" if not trusted[name] else ""), (a, r),
                        xytext=(a + side * np.radians(16), 0.45 * span + 4 * k), fontsize=6.5,
                        color=st["color"], ha="center", va="center",
                        bbox=dict(fc="white", ec="none", pad=0.5, alpha=0.9),
                        arrowprops=dict(arrowstyle="-", color=st["color"], lw=0.5))
    ax.set_ylim(0, span)
    ticks = np.arange(10.0, span + 1, 10.0)
    ax.set_yticks(ticks, [f"{t - span:.0f} dB".replace("-", "−") for t in ticks], fontsize=6, color=MUTED)
    ax.set_rlabel_position(202.5)
    ax.set_xticks(np.radians(np.arange(0, 360, 45)),
                  ["0°\nloop plane", "45°", "90°  axis", "135°", "180°", "225°", "270°", "315°"], fontsize=6.5)
    ax.grid(True, color="#d0d0d0", lw=0.4)
    ax.spines["polar"].set_linewidth(0.5)
    ax.set_title(f"elevation {el:g}°", loc="center", pad=10)


def plot_pattern(p, trusted: dict | None = None) -> str:
    """Polar receive patterns with their nulls, one panel per elevation, as SVG."""
    with report_style():
        return to_svg(pattern_figure(p, trusted))


def pattern_figure(p, trusted: dict | None = None) -> Figure:
    """Polar patterns, every response of ``p.response_db`` (loop, receiver, system, ...) relative
    to its own maximum, nulls marked with their depth. ``trusted``: response → bool (thin lines
    and a "?" where not). Two panels a row. Call inside :func:`report_style`."""
    trusted = {k: True for k in p.response_db} | (trusted or {})
    n = p.elevation_deg.size
    cols = min(n, 2)
    rows = -(-n // cols)
    fig = figure(FULL_WIDTH_MM if cols > 1 else 110.0, 82 * rows + 14)
    axes = [fig.add_subplot(rows, cols, i + 1, projection="polar") for i in range(n)]
    for i, ax in enumerate(axes):
        _polar_panel(ax, p, i, trusted)
    handles, labels = axes[0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="outside lower center", ncol=min(3, len(labels)))
    return fig
