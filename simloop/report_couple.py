"""Writing the results of `simloop couple`: coupling.json, loop-receiver.s2p, boost.png, placement.png.

JSON keys carry SI units in their names (DESIGN §2). Figures are drawn on a bare
:class:`matplotlib.figure.Figure` (no pyplot, no backend switch) and read in grey: lines differ
in style as well as colour, the map uses a monotone-lightness colour scale with labelled contours.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from simloop import __version__
from simloop.coupling import MAP_ORIENTATIONS_DEG, NEAR_WIRE_DIAMETERS, CoupleResult
from simloop.report import complex_pairs, write_json
from simloop.units import format_length

__all__ = ["couple_dict", "format_couple_summary", "write_couple"]

CAUTION = ("Safety: keep any outdoor wire well away from power lines and follow local codes for "
           "lightning protection and grounding.")


def _rod_dict(r: CoupleResult) -> dict:
    rod = r.rod
    return {
        "assumed": r.receiver_assumed,
        "rod_length_m": rod.length_m, "rod_diameter_m": rod.diameter_m,
        "permeability": rod.permeability, "coil_turns": rod.turns,
        "coil_length_m": rod.coil_length_m, "coil_offset_m": rod.coil_offset_m,
        "loaded_q": rod.loaded_q,
        "fluxmetric_factor": rod.fluxmetric_factor,
        "rod_permeability": rod.rod_permeability,
        "coil_permeability": rod.coil_permeability,
        "inductance_h": rod.inductance_h,
        "inductance_source": rod.inductance_source,
        "inductance_error": rod.inductance_error,
        "tuning_capacitance_f": rod.tuning_capacitance_f(r.frequency_hz),
        "effective_height_m": rod.effective_height_m(r.frequency_hz).item(),
        "position_m": r.position_m.tolist(), "axis": r.axis.tolist(),
    }


def couple_dict(r: CoupleResult, z0: float = 50.0) -> dict:
    """Everything in coupling.json (SI units; null where a value does not exist)."""
    t = r.tap_index
    return {
        "simloop_version": __version__, "name": r.name,
        "tap_turns": list(r.tap_turns),
        "loop_inductance_h": r.loop_inductance_h.tolist(),
        "mutual_inductance_h": r.mutual_inductance_h.tolist(),
        "coupling_k": r.coupling_k.tolist(),
        "currents": r.currents_origin,
        "currents_note": _currents_note(r),
        "receiver": _rod_dict(r),
        "wave": {"direction": r.wave_direction.tolist(), "polarization": r.wave_polarization.tolist()},
        "frequencies_hz": r.frequencies_hz.tolist(),
        "channel_tap": [int(r.tap_turns[i]) if i >= 0 else None for i in r.channel_tap],
        "boost_db": r.boost_db.tolist(),
        "radio_pull_hz": r.pull_hz.tolist(),
        "at_frequency": {
            "frequency_hz": r.frequency_hz, "tap": int(r.tap_turns[t]),
            "loop_capacitance_f": r.loop_capacitance_f,
            "critical_k": r.critical_k, "available_power_ratio": r.available_power_ratio,
            "winding_current_per_port_current": r.current_scale,
            "quasi_static_current_scale": _opt(r.quasi_static_scale),
            "curve_interpolation_error": _opt(r.interpolation_error),
            "capacitor_f": r.capacitor_f.tolist(), "capacitor_boost_db": r.capacitor_boost_db.tolist(),
            "capacitor_peak_width_f": r.capacitor_width_f,
            "capacitor_peak_width_travel_m": r.capacitor_width_m,
            "distance_m": r.distance_m.tolist(), "distance_boost_db": r.distance_boost_db.tolist(),
        },
        "optimum_spacing": {"distance_m": r.optimum_spacing_m, "boost_db": r.optimum_spacing_boost_db,
                            "at_near_limit": r.optimum_at_near_limit,
                            "line": "along the loop axis through the receiver's position, on its side of "
                                    "the loop; distance is |y| of the rod's centre"},
        "best_position": {"position_m": r.best_position_m.tolist(), "axis": r.best_axis.tolist(),
                          "orientation_deg": r.best_orientation_deg, "boost_db": r.best_boost_db},
        "placement_map": {"x_m": r.map_x_m.tolist(), "y_m": r.map_y_m.tolist(), "z_m": r.map_z_m,
                          "orientations_deg": list(MAP_ORIENTATIONS_DEG),
                          "boost_db": r.map_boost_db.tolist(), "coupling_k": r.map_k.tolist(),
                          "refused": f"null where the rod comes within {NEAR_WIRE_DIAMETERS:g} rod "
                                     f"diameters of the wire"},
        "two_port": {"file": "loop-receiver.s2p", "z0_ohm": z0, "tap": int(r.tap_turns[t]),
                     "frequencies_hz": r.s_frequencies_hz.tolist(), "z_ohm": complex_pairs(r.s_z_ohm)},
        "definitions": {
            "boost": "|V at the radio's tuning capacitor with the loop| / |alone|, the radio re-peaked "
                     "to the signal in both cases; alone = the radio turned for best reception",
            "radio_pull_hz": "where the radio's dial points when re-peaked with the loop, minus the signal",
            "coupling_k": "M/sqrt(L_loop L_rod); its sign follows the winding senses",
        },
        "notes": list(r.notes),
        "caution": CAUTION,
    }


def write_couple(r: CoupleResult, out: Path, z0: float = 50.0) -> list[Path]:
    """Write coupling.json, loop-receiver.s2p, boost.png and placement.png into ``out``."""
    import skrf

    out.mkdir(parents=True, exist_ok=True)
    written = [write_json(out / "coupling.json", couple_dict(r, z0))]
    freq = skrf.Frequency.from_f(r.s_frequencies_hz, unit="hz")
    net = skrf.Network(frequency=freq, z=r.s_z_ohm, z0=np.full((r.s_frequencies_hz.size, 2), z0),
                       name=f"{r.name}-loop-receiver")
    net.write_touchstone(filename="loop-receiver", dir=str(out), skrf_comment=False)
    written.append(out / "loop-receiver.s2p")
    written.append(plot_boost(r, out / "boost.png"))
    written.append(plot_placement(r, out / "placement.png"))
    return written


def format_couple_summary(r: CoupleResult) -> str:
    """A few lines for the terminal."""
    rod = r.rod
    lines = [f"{r.name}: radio rod {rod.length_m * 1e3:.0f} × {rod.diameter_m * 1e3:.0f} mm, μi "
             f"{rod.permeability:g} → μ_rod {rod.rod_permeability:.1f} (fluxmetric N {rod.fluxmetric_factor:.4f}), "
             f"coil {rod.turns} turns, L {rod.inductance_h * 1e6:.0f} µH ({rod.inductance_source}"
             + (f", ±{rod.inductance_error:.0%}" if rod.inductance_error else "") + ")"]
    for i, n in enumerate(r.tap_turns):
        # |M| and |k|: their sign only says which way the rod's coil is wound against the loop
        lines.append(f"tap {n:>3}: |M| = {abs(r.mutual_inductance_h[i]) * 1e6:.3f} µH, |k| = {abs(r.coupling_k[i]):.5f}")
    ok = np.isfinite(r.boost_db)
    if ok.any():
        lines.append(f"boost over the band: {np.nanmin(r.boost_db):.1f} to {np.nanmax(r.boost_db):.1f} dB "
                     f"({int(ok.sum())}/{ok.size} channels); the loop pulls the radio's dial by up to "
                     f"{np.nanmax(np.abs(r.pull_hz)):.0f} Hz")
    lines.append(f"at {r.frequency_hz / 1e3:.0f} kHz, tap {r.tap_turns[r.tap_index]}: critical k "
                 f"{r.critical_k:.5f}; capacitor peak {r.capacitor_width_f * 1e12:.2f} pF wide (−3 dB)"
                 + (f", {r.capacitor_width_m * 1e3:.1f} mm of slide" if np.isfinite(r.capacitor_width_m) else ""))
    if r.imperial:
        lines.append(f"optimum spacing along the loop axis: {format_length(r.optimum_spacing_m, True)} "
                     f"({r.optimum_spacing_boost_db:.1f} dB)")
    else:
        lines.append(f"optimum spacing along the loop axis: {r.optimum_spacing_m * 100:.1f} cm "
                     f"({r.optimum_spacing_boost_db:.1f} dB)")
    p = r.best_position_m
    where = (f"x {format_length(p[0], True)}, y {format_length(p[1], True)}" if r.imperial
             else f"x {p[0]:+.2f} m, y {p[1]:+.2f} m")
    lines.append(f"best place in the table plane: {where}, rod turned "
                 f"{r.best_orientation_deg:g}° from the loop axis ({r.best_boost_db:.1f} dB)")
    lines.append(_currents_note(r))
    lines += [f"note: {n}" for n in r.notes]
    return "\n".join(lines)


def _opt(x):
    return float(x) if x is not None and np.isfinite(x) else None


def _currents_note(r: CoupleResult) -> str:
    """Where the loop's currents came from, and what they do at the single-frequency studies."""
    at = (f"at {r.frequency_hz / 1e3:.0f} kHz the winding carries {r.current_scale:.3f} A per ampere "
          f"into tap {r.tap_turns[r.tap_index]}")
    if r.currents_origin == "circuit":
        interp = (f"; per channel interpolated between exact solves (error {r.interpolation_error:.1e})"
                  if np.isfinite(r.interpolation_error) else "")
        return (f"loop currents from the circuit solver: {at} as the rod sees it (a uniform current "
                f"with the self-capacitance across the port would give {r.quasi_static_scale:.3f})"
                f"{interp}; M and k are the low-frequency values")
    if r.currents_origin == "quasi-static":
        return (f"loop currents quasi-static (uniform along the tap's path, scaled by the "
                f"self-resonance): {at}")
    return f"loop currents from the caller ({r.currents_origin}): {at}"


def _figure(**kw):
    from matplotlib.figure import Figure

    return Figure(**kw)


def boost_legend_label(turns: int, coupling_k: float) -> str:
    """Legend text of one tap in boost.png: its coupling as |k|.

    The sign of k = M/√(L_loop L_rod) only says which way the rod's coil is wound relative to the
    loop (reversing either winding flips it); the boost depends on |k| alone, so the figure shows
    the magnitude (coupling.json keeps the signed value).
    """
    return f"tap {turns} (|k| = {abs(coupling_k):.4f})"


def plot_boost(r: CoupleResult, path: Path) -> Path:
    """Boost against frequency (per tap), against the loop's capacitor, and against distance."""
    fig = _figure(figsize=(12, 8), constrained_layout=True)
    grid = fig.add_gridspec(2, 2)
    ax_f = fig.add_subplot(grid[0, :])
    styles = ["-o", "--s", ":^", "-.v", "-D"]
    for i, n in enumerate(r.tap_turns):
        sel = r.channel_tap == i
        if sel.any():
            ax_f.plot(r.frequencies_hz[sel] / 1e3, r.boost_db[sel], styles[i % len(styles)], ms=3,
                      lw=1.2, label=boost_legend_label(n, r.coupling_k[i]))
    ax_f.set_xlabel("frequency [kHz]")
    ax_f.set_ylabel("boost [dB]")
    ax_f.set_title(f"{r.name}: boost of the radio's signal, loop re-tuned per channel "
                   f"(radio at {', '.join(f'{v:+.2f}' for v in r.position_m)} m)")
    ax_f.grid(alpha=0.3)
    ax_f.legend(fontsize=8, title="coupling |k| (its sign is only the winding sense)", title_fontsize=7.5)
    ax_c = fig.add_subplot(grid[1, 0])
    ax_c.plot(r.capacitor_f * 1e12, r.capacitor_boost_db, "k-", lw=1.3)
    top = np.nanmax(r.capacitor_boost_db)
    ax_c.axhline(top - 3, color="0.4", ls="--", lw=0.9,
                 label=f"−3 dB: {r.capacitor_width_f * 1e12:.2f} pF wide")
    ax_c.axvline(r.loop_capacitance_f * 1e12, color="0.4", ls=":", lw=0.9, label="loop tuned alone")
    ax_c.set_xlabel("loop tuning capacitor [pF]")
    ax_c.set_ylabel("boost [dB]")
    ax_c.set_title(f"at {r.frequency_hz / 1e3:.0f} kHz, tap {r.tap_turns[r.tap_index]}")
    ax_c.grid(alpha=0.3)
    ax_c.legend(fontsize=8)
    ax_d = fig.add_subplot(grid[1, 1])
    ax_d.plot(r.distance_m * 100, r.distance_boost_db, "k-", lw=1.3)
    near = " (closest allowed)" if r.optimum_at_near_limit else ""
    ax_d.plot([r.optimum_spacing_m * 100], [r.optimum_spacing_boost_db], "k*", ms=11,
              label=f"optimum {r.optimum_spacing_m * 100:.0f} cm{near}, {r.optimum_spacing_boost_db:.1f} dB")
    refused = ~np.isfinite(r.distance_boost_db)
    if refused.any():
        ax_d.axvspan(r.distance_m[0] * 100, r.distance_m[refused].max() * 100, color="0.85", hatch="//",
                     label="too close to the wire for the model")
    ax_d.set_xlabel("rod centre's distance along the loop axis, |y| [cm]")
    ax_d.set_ylabel("boost [dB]")
    ax_d.set_title("moving the radio straight out from the loop")
    ax_d.grid(alpha=0.3)
    ax_d.legend(fontsize=8)
    fig.savefig(path, dpi=110)
    return path


def plot_placement(r: CoupleResult, path: Path) -> Path:
    """Boost maps in the table plane for each rod orientation; best spot starred, refused area blank."""
    n = len(MAP_ORIENTATIONS_DEG)
    fig = _figure(figsize=(5.2 * n, 5.4), constrained_layout=True)
    axes = [fig.add_subplot(1, n, i + 1) for i in range(n)]
    finite = r.map_boost_db[np.isfinite(r.map_boost_db)]
    vmin, vmax = (np.percentile(finite, 2), finite.max()) if finite.size else (0, 1)
    step = 3.0 if vmax - vmin > 12 else 1.0
    levels = np.arange(np.floor(vmin / step) * step, np.ceil(vmax / step) * step + step / 2, step)
    xx, yy = np.meshgrid(r.map_x_m, r.map_y_m)
    for o, ax in enumerate(axes):
        db = np.clip(r.map_boost_db[o], vmin, None)
        cf = ax.contourf(xx, yy, db, levels=levels, cmap="cividis")
        cs = ax.contour(xx, yy, db, levels=levels[::2], colors="k", linewidths=0.6)
        ax.clabel(cs, fmt="%.0f dB", fontsize=7)
        kmap = r.map_k[o]
        if np.nanmin(kmap) < 0 < np.nanmax(kmap):
            ax.contour(xx, yy, kmap, levels=[0.0], colors="w", linewidths=1.2, linestyles="--")
        ax.add_patch(_frame_patch(r))
        ax.plot([r.best_position_m[0]] if o == MAP_ORIENTATIONS_DEG.index(r.best_orientation_deg) else [],
                [r.best_position_m[1]] if o == MAP_ORIENTATIONS_DEG.index(r.best_orientation_deg) else [],
                "w*", ms=16, mec="k")
        th = np.radians(MAP_ORIENTATIONS_DEG[o])
        ax.annotate("", xy=(0.12 + 0.07 * np.sin(th), 0.12 + 0.07 * np.cos(th)),
                    xytext=(0.12 - 0.07 * np.sin(th), 0.12 - 0.07 * np.cos(th)),
                    xycoords="axes fraction", arrowprops=dict(arrowstyle="-", lw=4, color="w"))
        ax.text(0.12, 0.22, "rod", transform=ax.transAxes, ha="center", color="w", fontsize=9,
                fontweight="bold")
        ax.set_title(f"rod {MAP_ORIENTATIONS_DEG[o]:g}° from the loop axis")
        ax.set_xlabel("x, across the frame [m]")
        ax.set_ylabel("y, along the loop axis [m]")
        ax.set_aspect("equal")
    fig.colorbar(cf, ax=axes, label="boost [dB]", shrink=0.85)
    fig.suptitle(f"{r.name}: where to stand the radio (plane z = {r.map_z_m:+.2f} m, {r.frequency_hz / 1e3:.0f} kHz, "
                 f"tap {r.tap_turns[r.tap_index]}); ★ best, white dashes: coupling vanishes, blank: too close to the wire")
    fig.savefig(path, dpi=100)
    return path


def _frame_patch(r: CoupleResult):
    """The loop's winding seen from above: a grey bar, frame width × winding depth."""
    from matplotlib.patches import Rectangle

    (x0, x1), (y0, y1) = r.footprint_m
    return Rectangle((x0, y0), x1 - x0, max(y1 - y0, 0.01), facecolor="0.6", edgecolor="k", lw=1.0)
