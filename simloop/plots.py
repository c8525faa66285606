"""Figures. Headless (Agg) and written straight to files; no figure is ever shown."""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from simloop.impedance import RELIABLE_BELOW, SweepResult  # noqa: E402


def plot_impedance(result: SweepResult, path: Path) -> Path:
    """R and X of every tap against frequency.

    Filled markers are reliable points, hollow grey-edged markers unreliable ones; circles are
    direct MoM solves, squares values of the fitted model.
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
    ax_x.plot([], [], "ks", ms=5, ls="none", label="fitted model")
    ax_x.plot([], [], "ko", mfc="none", ms=6, ls="none", label=f"unreliable (error ≥ {RELIABLE_BELOW:.0%})")
    ax_x.set_ylabel("reactance X [Ω]")
    ax_x.legend(fontsize=8, loc="upper left")
    ax_x.grid(alpha=0.3)
    ax_r.set_yscale("log")
    ax_r.set_ylabel("resistance R [Ω]")
    ax_r.set_xlabel("frequency [MHz]")
    ax_r.grid(alpha=0.3, which="both")
    ax_x.set_title(f"{result.name}: tap impedance, other taps open "
                   f"({result.mesh.n_segments} segments, {result.geometry.wire_length_m:.2f} m of wire)")
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path
