"""Figures. Headless (Agg) and written straight to files; no figure is ever shown."""

from __future__ import annotations

from pathlib import Path

import matplotlib
import matplotlib.ticker

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from simloop.impedance import RELIABLE_BELOW, SweepResult  # noqa: E402


def plot_impedance(result: SweepResult, path: Path) -> Path:
    """R and X of every tap against frequency.

    Filled markers are reliable points, hollow grey-edged markers unreliable ones; circles are
    direct MoM solves, squares values of the circuit solver (or the fitted model).
    """
    f_mhz = result.frequencies_hz / 1e6
    fig, (ax_x, ax_r) = plt.subplots(2, 1, figsize=(8, 7.5), sharex=True, constrained_layout=True)
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
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
    plt.close(fig)
    return path


def plot_tuning(result, path: Path) -> Path:
    """Tuning chart: capacitance against frequency per tap, tuner range shaded, gaps marked.

    Top: the capacitance each tap needs (lines, dashed outside the tuner's range), the channels
    on their chosen tap (filled: model trusted; hollow: not), the tuner's range shaded and the
    gaps hatched. A plate tuner adds the slide position. Bottom: the −3 dB bandwidth of the
    chosen tap against the channel's audio. A side table lists a selection of channels.
    """
    from matplotlib.patches import Patch

    r = result
    plates = r.tuner.has_position
    f_k = r.frequencies_hz / 1e3
    fc_k = r.curve_frequencies_hz / 1e3
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    rows = 3 if plates else 2
    ratios = [3.0, 1.6, 1.6] if plates else [3.0, 1.6]
    fig = plt.figure(figsize=(13, 8.5 if plates else 7.5), constrained_layout=True)
    grid = fig.add_gridspec(rows, 2, width_ratios=[3.3, 1.0], height_ratios=ratios)
    ax_c = fig.add_subplot(grid[0, 0])
    axes = [ax_c]
    ax_p = fig.add_subplot(grid[1, 0], sharex=ax_c) if plates else None
    if ax_p is not None:
        axes.append(ax_p)
    ax_b = fig.add_subplot(grid[rows - 1, 0], sharex=ax_c)
    axes.append(ax_b)
    ax_t = fig.add_subplot(grid[:, 1])
    ax_t.axis("off")

    c_lo, c_hi = r.tuner.min_f * 1e12, r.tuner.max_f * 1e12
    ax_c.axhspan(c_lo, c_hi, color="tab:green", alpha=0.10, lw=0)
    for c in (c_lo, c_hi):
        ax_c.axhline(c, color="tab:green", lw=0.8, alpha=0.7)
    handles = [Patch(facecolor="tab:green", alpha=0.25, label=f"tuner range {c_lo:.4g} to {c_hi:.4g} pF")]
    for g0, g1 in r.gaps_hz / 1e3:
        for ax in axes:
            ax.axvspan(g0, max(g1, g0 + 1.0), facecolor="tab:red", alpha=0.15, hatch="///",
                       edgecolor="tab:red", lw=0)
    if r.gaps_hz.size:
        handles.append(Patch(facecolor="tab:red", alpha=0.3, hatch="///", edgecolor="tab:red",
                             label="gap: no tap reaches"))
        for g0, g1 in r.gaps_hz / 1e3:
            ax_c.annotate(f"gap\n{g0:.0f}–{g1:.0f} kHz", xy=(0.5 * (g0 + g1), 0.03),
                          xycoords=("data", "axes fraction"), xytext=(4, 0), textcoords="offset points",
                          color="tab:red", fontsize=8, ha="left", va="bottom")
    cmin = np.nanmin(r.curve_capacitance_f[r.curve_capacitance_f > 0]) * 1e12 if np.any(
        r.curve_capacitance_f > 0) else c_lo
    for i, n in enumerate(r.tap_turns):
        col = colours[i % len(colours)]
        c_curve = r.curve_capacitance_f[:, i] * 1e12
        inside = (c_curve >= c_lo) & (c_curve <= c_hi)
        ax_c.plot(fc_k, np.where(inside, c_curve, np.nan), "-", color=col, lw=1.6)
        ax_c.plot(fc_k, np.where(~inside & (c_curve > 0), c_curve, np.nan), "--", color=col, lw=0.9,
                  alpha=0.6)
        sel = r.channel_tap_index == i
        good, bad = sel & r.reliable, sel & ~r.reliable
        ax_c.plot(f_k[good], r.capacitance_f[good] * 1e12, "o", color=col, ms=3.5)
        ax_c.plot(f_k[bad], r.capacitance_f[bad] * 1e12, "o", mfc="none", mec=col, ms=4)
        lo, hi = r.f_low_hz[i] / 1e3, r.f_high_hz[i] / 1e3
        label = f"tap {n}: {lo:.0f}–{hi:.0f} kHz ({int(sel.sum())} channels)"
        handles.append(plt.Line2D([], [], color=col, marker="o", ms=4, label=label))
        if ax_p is not None:
            ax_p.plot(f_k[sel], r.position_m[sel] * 1e3, "o-", color=col, ms=3, lw=1.0)
        bw = r.bandwidth_hz[sel] / 1e3
        ax_b.plot(f_k[sel], bw, "o-", color=col, ms=3, lw=1.0)
        ax_b.plot(f_k[sel], r.bandwidth_no_proximity_hz[sel] / 1e3, ":", color=col, lw=1.0)
    handles.append(plt.Line2D([], [], color="grey", marker="o", mfc="none", ls="none",
                              label="channel, model not trusted"))
    ax_c.set_yscale("log")
    from matplotlib.ticker import FuncFormatter, LogLocator

    ax_c.yaxis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
    ax_c.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
    top = max(c_hi, np.nanmax(r.capacitance_f) * 1e12 if np.any(r.covered) else c_hi) * 1.6
    ax_c.set_ylim(max(min(c_lo, cmin) / 1.6, 0.5), top)
    ax_c.set_ylabel("tuning capacitance [pF]")
    ax_c.grid(alpha=0.3, which="both")
    ax_c.legend(handles=handles, fontsize=8, loc="upper right")
    ax_c.set_title(f"{r.name}: tuning chart, {r.band.name} band ({r.frequencies_hz.size} channels "
                   f"every {r.band.spacing_hz / 1e3:g} kHz)", fontsize=11)
    if ax_p is not None:
        ax_p.set_ylabel("slide position [mm]")
        ax_p.set_ylim(0, r.tuner.max_overlap_m * 1e3)
        ax_p.grid(alpha=0.3)
    audio = 2 * r.band.audio_hz / 1e3
    ax_b.axhline(audio, color="k", lw=0.9, ls="--",
                 label=f"channel audio ±{r.band.audio_hz / 1e3:g} kHz: below, the loop cuts treble")
    ax_b.axhspan(0, audio, color="tab:orange", alpha=0.10, lw=0)
    ax_b.plot([], [], "k:", label="without proximity effect")
    ax_b.legend(fontsize=8, loc="lower right")
    ax_b.set_ylabel("−3 dB bandwidth [kHz]")
    ymax = np.nanmax(r.bandwidth_no_proximity_hz) / 1e3 if np.any(r.covered) else audio
    ax_b.set_ylim(0, max(audio, ymax) * 1.25)
    ax_b.grid(alpha=0.3)
    ax_b.set_xlabel("frequency [kHz]")
    ax_c.set_xlim(fc_k[0], fc_k[-1])

    # Side table: about 30 channels evenly through the band.
    m = r.frequencies_hz.size
    pick = np.unique(np.linspace(0, m - 1, min(m, 30)).round().astype(int))
    head = "  kHz  tap     pF" + ("    mm" if plates else "") + "  BW kHz"
    lines = ["channel chart (selection;", "all channels in tuning.csv)", "", head]
    for j in pick:
        if r.channel_tap_index[j] < 0:
            lines.append(f"{f_k[j]:5.0f}   --  (gap)")
            continue
        mark = "" if r.reliable[j] else " ?"
        pos = f"{r.position_m[j] * 1e3:6.1f}" if plates else ""
        lines.append(f"{f_k[j]:5.0f}  {r.channel_tap[j]:3d} {r.capacitance_f[j] * 1e12:6.1f}{pos}"
                     f"  {r.bandwidth_hz[j] / 1e3:5.1f}{mark}")
    lines.append("")
    lines.append("? = model not trusted there")
    lines.append(f"tuner: {r.tuner.kind}, Q {r.tuner.q:g}")
    ax_t.text(0.0, 1.0, "\n".join(lines), family="monospace", fontsize=8, va="top", ha="left",
              transform=ax_t.transAxes)
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path
