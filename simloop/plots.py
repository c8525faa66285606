"""Figures, written straight to files; no figure is ever shown.

Figures are :class:`matplotlib.figure.Figure` objects saved through their own canvas, as in
:mod:`simloop.report_plots`: no pyplot state, no backend selected, so importing or calling this
module never changes a notebook user's backend."""

from __future__ import annotations

from pathlib import Path

import matplotlib
import matplotlib.ticker
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
import numpy as np

from simloop.impedance import RELIABLE_BELOW, SweepResult


def plot_impedance(result: SweepResult, path: Path) -> Path:
    """R and X of every tap against frequency.

    Filled markers are reliable points, hollow grey-edged markers unreliable ones; circles are
    direct MoM solves, squares values of the circuit solver (or the fitted model).
    """
    f_mhz = result.frequencies_hz / 1e6
    fig = Figure(figsize=(8, 7.5), constrained_layout=True)
    ax_x, ax_r = fig.subplots(2, 1, sharex=True)
    colours = matplotlib.rcParams["axes.prop_cycle"].by_key()["color"]
    mom = result.source == "mom"
    for i, n in enumerate(result.tap_turns):
        c = colours[i % len(colours)]
        z = result.tap_impedance(i)
        ok = result.reliable[:, i]
        for ax, y in ((ax_x, z.imag), (ax_r, z.real)):
            ax.plot(f_mhz, y, "-", color=c, lw=1.0, alpha=0.6)
            for sel, marker in ((mom, "o"), (~mom, "s")):
                good, bad = sel & ok, sel & ~ok
                ax.plot(f_mhz[good], y[good], marker, color=c, ms=5, ls="none")
                ax.plot(f_mhz[bad], y[bad], marker, mfc="none", mec=c, ms=6, ls="none", alpha=0.7)
        srf = result.self_resonance_hz[i]
        label = f"tap {n}: L0 = {result.inductance_h[i] * 1e6:.1f} µH"
        if np.isfinite(srf):
            label += f", SRF {srf / 1e6:.2f} MHz"
        ax_x.plot([], [], "-", color=c, label=label)
    ax_x.plot([], [], "ko", ms=5, ls="none", label="direct MoM")
    ax_x.plot([], [], "ks", ms=5, ls="none", label="circuit solver (PEEC)")
    ax_x.plot([], [], "ko", mfc="none", ms=6, ls="none", label=f"unreliable (error ≥ {RELIABLE_BELOW:.0%})")
    ax_x.set_ylabel("reactance X [Ω]")
    ax_x.legend(fontsize=8, loc="upper left")
    ax_x.grid(alpha=0.3)
    ax_r.set_yscale("log")
    plain = matplotlib.ticker.FuncFormatter(lambda v, _: f"{v:g}")
    ax_r.yaxis.set_major_formatter(plain)
    ax_r.yaxis.set_minor_formatter(plain)
    ax_r.set_ylabel("resistance R [Ω]")
    ax_r.set_xlabel("frequency [MHz]")
    ax_r.grid(alpha=0.3, which="both")
    ax_x.set_title(f"{result.name}: tap impedance, other taps open "
                   f"({result.geometry.wire_length_m:.2f} m of wire)")
    fig.savefig(path, dpi=110)
    return path


def _tap_colour(i: int) -> str:
    colours = matplotlib.rcParams["axes.prop_cycle"].by_key()["color"]
    return colours[i % len(colours)]


def _channel_markers(ax, x, y, trusted, colour, size=3.5):
    """Channels as markers: filled where the model is trusted, hollow where it is not."""
    ax.plot(x[trusted], y[trusted], "o", color=colour, ms=size, ls="none")
    ax.plot(x[~trusted], y[~trusted], "o", mfc="none", mec=colour, ms=size + 0.5, ls="none")


def _tuning_capacitance_panel(ax, r, handles):
    """Capacitance each tap needs, the tuner's range shaded, the channels on their chosen tap."""
    from matplotlib.patches import Patch

    f_k, fc_k = r.frequencies_hz / 1e3, r.curve_frequencies_hz / 1e3
    c_lo, c_hi = r.tuner.min_f * 1e12, r.tuner.max_f * 1e12
    ax.axhspan(c_lo, c_hi, color="tab:green", alpha=0.10, lw=0)
    for c in (c_lo, c_hi):
        ax.axhline(c, color="tab:green", lw=0.8, alpha=0.7)
    from simloop.units import format_quantity

    handles.append(Patch(facecolor="tab:green", alpha=0.25,
                         label=f"tuner range {format_quantity(r.tuner.min_f, 'capacitance', 3)} to "
                               f"{format_quantity(r.tuner.max_f, 'capacitance', 3)}"))
    for g0, g1 in r.gaps_hz / 1e3:
        ax.annotate(f"gap\n{g0:.0f}–{g1:.0f} kHz", xy=(0.5 * (g0 + g1), 0.03),
                    xycoords=("data", "axes fraction"), xytext=(4, 0), textcoords="offset points",
                    color="tab:red", fontsize=8, ha="left", va="bottom")
    for i, n in enumerate(r.tap_turns):
        col = _tap_colour(i)
        c_curve = r.curve_capacitance_f[:, i] * 1e12
        inside = (c_curve >= c_lo) & (c_curve <= c_hi)
        ax.plot(fc_k, np.where(inside, c_curve, np.nan), "-", color=col, lw=1.6)
        ax.plot(fc_k, np.where(~inside & (c_curve > 0), c_curve, np.nan), "--", color=col, lw=0.9, alpha=0.6)
        sel = r.channel_tap_index == i
        _channel_markers(ax, f_k[sel], r.capacitance_f[sel] * 1e12, r.reliable[sel], col)
        used = f_k[sel]
        span = f"uses {used[0]:.0f}–{used[-1]:.0f} kHz" if used.size else "not used"
        handles.append(Line2D([], [], color=col, marker="o", ms=4,
                                  label=f"tap {n}: reaches {r.f_low_hz[i] / 1e3:.0f}–{r.f_high_hz[i] / 1e3:.0f} kHz, {span}"))
    for w in r.chart.switches:
        ax.axvline(0.5 * (w.last_hz + w.first_hz) / 1e3, color="k", lw=0.8, ls="-.", alpha=0.6)
    if r.chart.switches:
        handles.append(Line2D([], [], color="k", lw=0.8, ls="-.", label="tap switch point"))
    handles.append(Line2D([], [], color="grey", marker="o", mfc="none", ls="none",
                              label="channel, model not trusted (hollow)"))
    pos = r.curve_capacitance_f[r.curve_capacitance_f > 0]
    cmin = float(np.nanmin(pos)) * 1e12 if pos.size else c_lo
    ax.set_yscale("log")
    ax.yaxis.set_major_locator(matplotlib.ticker.LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
    ax.yaxis.set_major_formatter(matplotlib.ticker.FuncFormatter(lambda v, _: f"{v:g}"))
    top = max(c_hi, np.nanmax(r.capacitance_f) * 1e12 if np.any(r.covered) else c_hi) * 1.6
    ax.set_ylim(max(min(c_lo, cmin) / 1.6, 0.5), top)
    ax.set_ylabel("tuning capacitance [pF]")
    ax.grid(alpha=0.3, which="both")
    ax.legend(handles=handles, fontsize=7.5, loc="upper right")
    ax.set_title(f"{r.name}: tuning chart, {r.band.name} band ({r.frequencies_hz.size} channels "
                 f"every {r.band.spacing_hz / 1e3:g} kHz)", fontsize=11)


def _slide_panel(ax, r):
    """Slide position of each channel, scaled to the span the band uses; an inset bar shows that
    span on the whole travel."""
    f_k = r.frequencies_hz / 1e3
    inch = r.imperial
    scale, unit = (1 / 0.0254, "in") if inch else (1e3, "mm")
    for i in range(len(r.tap_turns)):
        sel = r.channel_tap_index == i
        ax.plot(f_k[sel], r.position_m[sel] * scale, "-", color=_tap_colour(i), lw=1.0)
        _channel_markers(ax, f_k[sel], r.position_m[sel] * scale, r.reliable[sel], _tap_colour(i), 3)
    used = r.position_m[np.isfinite(r.position_m)] * scale
    travel = r.tuner.max_overlap_m * scale
    if used.size:
        lo, hi = float(used.min()), float(used.max())
        pad = max(0.08 * (hi - lo), 0.02 * travel)
        ax.set_ylim(max(lo - pad, 0), min(hi + pad, travel))
        bar = ax.inset_axes([0.56, 0.78, 0.42, 0.1])
        bar.barh(0, travel, color="lightgrey", height=1)
        bar.barh(0, hi - lo, left=lo, color="tab:blue", height=1)
        bar.set_xlim(0, travel)
        bar.set_yticks([])
        bar.tick_params(labelsize=6)
        bar.set_title(f"used {lo:.3g}–{hi:.3g} of {travel:.3g} {unit} travel", fontsize=7, pad=2)
    ax.set_ylabel(f"slide position [{unit}]\n(used span only)")
    ax.grid(alpha=0.3)


def _q_panel(ax, r):
    """Loaded Q of every tap wherever the tuner reaches it; the chosen channels marked."""
    f_k = r.frequencies_hz / 1e3
    for i, n in enumerate(r.tap_turns):
        col = _tap_colour(i)
        ax.plot(f_k, r.chart.q_loaded_all[:, i], "-", color=col, lw=0.8, alpha=0.5)
        sel = r.channel_tap_index == i
        _channel_markers(ax, f_k[sel], r.q_loaded[sel], r.reliable[sel], col, 3)
    ax.plot([], [], "k-", lw=0.8, alpha=0.5, label="every tap where the tuner reaches it")
    ax.plot([], [], "ko", ms=3, label="chosen tap")
    ax.legend(fontsize=7.5, loc="lower right")
    ax.set_ylabel(f"loaded Q\n(capacitor Q {r.tuner.q:.4g})")
    ax.grid(alpha=0.3)


#: Stacking order of the bandwidth panel: the line without proximity effect above the channel
#: markers (matplotlib draws lines and markers at zorder 2), so a few-per-cent difference shows.
NO_PROXIMITY_ZORDER = 4


def proximity_bandwidth_spread(r) -> tuple[float, float] | None:
    """Smallest and largest relative narrowing of the bandwidth without the proximity effect,
    1 − B_no-prox / B, over the covered channels (None when no channel is covered). [-]"""
    with np.errstate(invalid="ignore", divide="ignore"):
        d = 1 - r.bandwidth_no_proximity_hz / r.bandwidth_hz
    d = d[np.asarray(r.covered, dtype=bool) & np.isfinite(d)]
    return (float(d.min()), float(d.max())) if d.size else None


#: Below this fraction of the panel's height the two bandwidth lines cannot be told apart and the
#: legend says so (this tool's choice: about 2 px of a 200 px panel).
SAME_LINE_FRACTION = 0.01


def proximity_bandwidth_label(spread: tuple[float, float] | None, coincide: bool = False) -> str:
    """Legend text of the bandwidth without proximity effect: how much narrower it is, and
    whether it lies on the solid line at the panel's scale (``coincide``)."""
    if spread is None:
        return "without proximity effect"
    lo, hi = spread
    word = "narrower" if hi >= 0 else "wider"
    lo, hi = sorted((abs(lo), abs(hi)))
    amount = f"{hi:.1%}" if f"{lo:.1%}" == f"{hi:.1%}" else f"{lo:.1%}–{hi:.1%}"
    return f"without proximity effect: {word} by {amount}" + (", on the solid line at this scale" if coincide else "")


def _bandwidth_panel(ax, r):
    """−3 dB bandwidth of the chosen tap against the channel's audio; without proximity effect a
    thin black dashed line with a white edge, drawn above the channel markers."""
    from matplotlib import patheffects

    f_k = r.frequencies_hz / 1e3
    halo = [patheffects.withStroke(linewidth=2.6, foreground="white")]
    for i in range(len(r.tap_turns)):
        col = _tap_colour(i)
        sel = r.channel_tap_index == i
        ax.plot(f_k[sel], r.bandwidth_hz[sel] / 1e3, "-", color=col, lw=1.0)
        _channel_markers(ax, f_k[sel], r.bandwidth_hz[sel] / 1e3, r.reliable[sel], col, 3)
        ax.plot(f_k[sel], r.bandwidth_no_proximity_hz[sel] / 1e3, "--", color="k", lw=0.9,
                dashes=(4, 2), path_effects=halo, zorder=NO_PROXIMITY_ZORDER, gid="no-proximity")
    audio = 2 * r.band.audio_hz / 1e3
    ax.axhline(audio, color="k", lw=0.9, ls=":",
               label=f"channel audio ±{r.band.audio_hz / 1e3:g} kHz: below, the loop cuts treble")
    ax.axhspan(0, audio, color="tab:orange", alpha=0.10, lw=0)
    both = np.concatenate([r.bandwidth_hz, r.bandwidth_no_proximity_hz]) / 1e3
    ymax = np.nanmax(both) if np.any(np.isfinite(both)) else audio
    ytop = max(audio, ymax) * 1.25
    ax.set_ylim(0, ytop)
    step = np.abs(r.bandwidth_hz - r.bandwidth_no_proximity_hz)[np.asarray(r.covered, dtype=bool)] / 1e3
    coincide = bool(step.size) and np.nanmax(step) < SAME_LINE_FRACTION * ytop
    ax.plot([], [], "--", color="k", lw=0.9, dashes=(4, 2), path_effects=halo,
            label=proximity_bandwidth_label(proximity_bandwidth_spread(r), coincide))
    ax.legend(fontsize=7.5, loc="upper left")
    ax.set_ylabel("−3 dB bandwidth [kHz]")
    ax.grid(alpha=0.3)
    ax.set_xlabel("frequency [kHz]")


def plot_tuning(result, path: Path) -> Path:
    """Tuning chart: capacitance per tap, slide position (plate tuner), loaded Q per tap,
    bandwidth, and the channel table (the same channels the terminal summary lists).

    Filled markers: channels where the model is trusted; hollow: not trusted. Gaps are hatched on
    every panel; dash-dotted lines mark the tap switch points.
    """
    from matplotlib.patches import Patch

    from simloop.report_tune import chart_table

    r = result
    plates = r.tuner.has_position
    ratios = [3.0, 1.5, 1.5, 1.5] if plates else [3.0, 1.5, 1.5]
    fig = Figure(figsize=(13, 11 if plates else 9.5), constrained_layout=True)
    grid = fig.add_gridspec(len(ratios), 2, width_ratios=[3.3, 1.0], height_ratios=ratios)
    ax_c = fig.add_subplot(grid[0, 0])
    axes = [ax_c] + [fig.add_subplot(grid[k, 0], sharex=ax_c) for k in range(1, len(ratios))]
    handles = []
    for g0, g1 in r.gaps_hz / 1e3:
        for ax in axes:
            ax.axvspan(g0, max(g1, g0 + 1.0), facecolor="tab:red", alpha=0.15, hatch="///",
                       edgecolor="tab:red", lw=0)
    if r.gaps_hz.size:
        handles.append(Patch(facecolor="tab:red", alpha=0.3, hatch="///", edgecolor="tab:red",
                             label="gap: no tap reaches"))
    _tuning_capacitance_panel(ax_c, r, handles)
    if plates:
        _slide_panel(axes[1], r)
    _q_panel(axes[-2], r)
    _bandwidth_panel(axes[-1], r)
    ax_c.set_xlim(r.curve_frequencies_hz[0] / 1e3, r.curve_frequencies_hz[-1] / 1e3)
    ax_t = fig.add_subplot(grid[:, 1])
    ax_t.axis("off")
    lines = ["channel chart (selection: the same", "channels as the terminal summary;",
             "all channels in tuning.csv)", ""] + chart_table(r)
    lines += ["", f"tuner: {r.tuner.kind}, Q {r.tuner.q:.4g}"]
    for w in r.chart.switches:
        lines.append(f"switch {w.from_tap}→{w.to_tap} at {w.first_hz / 1e3:.0f} kHz")
    ax_t.text(0.0, 1.0, "\n".join(lines), family="monospace", fontsize=7.5, va="top", ha="left",
              transform=ax_t.transAxes)
    fig.savefig(path, dpi=110)
    return path


def plot_slide_scale(result, path: Path) -> Path:
    """A printable slide scale for a plate tuner, 1:1 on paper (print at 100 %, no fit-to-page).

    One strip per tap along the travel, a tick at every channel's slide position labelled in kHz
    (every channel where there is room), and a ruler in mm (and inches for an inch spec) to check
    the printed scale. Written as SVG or PNG (300 dpi) by the file's suffix.
    """
    r = result
    t = r.tuner
    travel_in = t.max_overlap_m / 0.0254
    margin_in = 0.6
    taps = [i for i in range(len(r.tap_turns)) if np.any(r.channel_tap_index == i)]
    height_in = 1.3 + 0.7 * max(len(taps), 1)
    width_in = travel_in + 2 * margin_in
    fig = Figure(figsize=(width_in, height_in))
    ax = fig.add_axes([margin_in / width_in, 0.0, travel_in / width_in, 1.0])
    ax.set_xlim(0, t.max_overlap_m * 1e3)
    ax.set_ylim(0, height_in)
    ax.axis("off")
    # Ruler: mm ticks (and inches) along the bottom.
    y0 = 0.35
    ax.plot([0, t.max_overlap_m * 1e3], [y0, y0], "k-", lw=0.8)
    for mm in range(0, int(t.max_overlap_m * 1e3) + 1):
        h = 0.12 if mm % 10 == 0 else (0.08 if mm % 5 == 0 else 0.04)
        ax.plot([mm, mm], [y0, y0 + h], "k-", lw=0.4)
        if mm % 10 == 0:
            ax.text(mm, y0 - 0.04, f"{mm}", fontsize=5, ha="center", va="top")
    if r.imperial:
        for k in range(int(travel_in * 8) + 1):
            x = k * 25.4 / 8
            h = 0.12 if k % 8 == 0 else (0.07 if k % 4 == 0 else 0.035)
            ax.plot([x, x], [y0, y0 - h], "b-", lw=0.4)
            if k % 8 == 0:
                ax.text(x, y0 - 0.2, f"{k // 8} in", fontsize=5, ha="center", va="top", color="b")
    for row, i in enumerate(taps):
        y = y0 + 0.5 + 0.7 * row
        sel = np.flatnonzero((r.channel_tap_index == i) & np.isfinite(r.position_m))
        ax.plot([0, t.max_overlap_m * 1e3], [y, y], "k-", lw=0.6)
        ax.text(-2, y + 0.05, f"tap {r.tap_turns[i]}", fontsize=6, ha="right", va="bottom")
        last_x = -1e9
        for j in sel:
            x = r.position_m[j] * 1e3
            ax.plot([x, x], [y, y + 0.12], "k-", lw=0.4)
            if abs(x - last_x) >= 3.0:  # room for a label: 3 mm apart
                ax.text(x, y + 0.14, f"{r.frequencies_hz[j] / 1e3:.0f}", fontsize=4.5, rotation=90,
                        ha="center", va="bottom")
                last_x = x
    ax.text(0, height_in - 0.12,
            f"{r.name}: slide scale 1:1 (1 mm on paper = 1 mm of slide). Print at 100 % (no "
            f"fit-to-page) and check the ruler: 10 mm between numbered ticks. 0 = plates just not "
            f"overlapping; channel marks in kHz, one strip per tap.", fontsize=5, ha="left", va="top")
    ax.text(0, height_in - 0.32, t.describe(r.imperial), fontsize=4.5, ha="left", va="top")
    fig.savefig(path, dpi=300)
    return path
