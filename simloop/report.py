"""Writing results: JSON, CSV, Touchstone and plots. The only layer besides the CLI that writes files."""

from __future__ import annotations

import csv
import json
import math
import os
from pathlib import Path

import numpy as np

from simloop import __version__
from simloop.impedance import RELIABLE_BELOW, SweepResult


def _pairs(z) -> list:
    """Complex array → nested [re, im] pairs (DESIGN §2)."""
    z = np.asarray(z)
    if z.ndim == 0:
        return [float(z.real), float(z.imag)]
    return [_pairs(v) for v in z]


def _num(x) -> float | None:
    x = float(x)
    return None if not math.isfinite(x) else x


def _finite(value):
    """Non-finite floats become null (JSON has no NaN); everything else is kept."""
    if isinstance(value, dict):
        return {k: _finite(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_finite(v) for v in value]
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def write_json(path: Path, data: dict) -> Path:
    """Write JSON atomically (temporary file, then rename), so a crash never leaves half a file.

    A value that is not a finite number is written as null: a quantity the tool could not
    determine is reported as absent, never as a number.
    """
    tmp = path.with_suffix(path.suffix + ".tmp")
    tmp.write_text(json.dumps(_finite(data), indent=1, allow_nan=False) + "\n")
    os.replace(tmp, path)
    return path


def mesh_summary(result: SweepResult) -> dict:
    mesh, geom = result.mesh, result.geometry
    return {
        "segments": mesh.n_segments,
        "wires": int(mesh.segments.size),
        "wire_length_m": geom.wire_length_m,
        "winding_length_m": geom.winding_length_m,
        "lead_length_m": geom.lead_length_m,
        "quality": mesh.quality,
        "segment_target_m": mesh.target_m,
        "segment_min_m": mesh.shortest_m,
        "segment_max_m": mesh.longest_m,
        "winding_segment_m": mesh.winding_segment_m,
        "floor_trusted_hz": mesh.floor_frequency_hz(),
        "floor_absolute_hz": mesh.floor_frequency_hz(5e-5),
        "rules": [{"rule": r.name, "status": r.status, "detail": r.detail} for r in result.rules],
    }


def sweep_dict(result: SweepResult, z0: float) -> dict:
    """Everything `simloop sweep` reports, as JSON-ready data (keys of DESIGN §6)."""
    taps = {}
    for i, n in enumerate(result.tap_turns):
        zi = result.tap_impedance(i)
        taps[str(n)] = {
            "turns": n,
            "impedance_ohm": _pairs(zi),
            "inductance_h": float(result.inductance_h[i]),
            "inductance_error": float(result.inductance_error[i]),
            "quasi_static_inductance_h": float(result.quasi_static_inductance_h[i]),
            "junction_correction": float(result.junction_correction[i]),
            "uncorrected_inductance_h": float(result.uncorrected_inductance_h[i]),
            "self_resonance_hz": _num(result.self_resonance_hz[i]),
            "self_capacitance_f": _num(result.self_capacitance_f[i]),
            "reliable": [bool(v) for v in result.reliable[:, i]],
            "source": [str(s) for s in result.source],
            "error_estimate": [float(e) for e in result.error_estimate[:, i]],
            "mom_difference": _num(result.mom_difference[i]) if result.mom_difference.size else None,
            "mom_self_resonance_hz": (_num(result.mom_self_resonance_hz[i])
                                      if result.mom_self_resonance_hz.size else None),
        }
    m = result.model
    return {
        "simloop_version": __version__,
        "command": "sweep",
        "name": result.name,
        "frequencies_hz": [float(f) for f in result.frequencies_hz],
        "reference_impedance_ohm": z0,
        "reliable_below": RELIABLE_BELOW,
        "taps": taps,
        "impedance_matrix_ohm": _pairs(result.z_ohm),
        "model": {
            "form": "Y = (R_s + jωL0)^-1 + jωC, fitted to ω·Im Y = -L0^-1 + ω²C of circuit solves",
            "fit_frequencies_hz": [float(f) for f in m.fit_hz],
            "fit_residual": m.fit_residual,
            "extrapolation_spread": m.extrapolation_spread,
            "inductance_matrix_h": m.inductance_h.tolist(),
            "capacitance_matrix_f": m.capacitance_f.tolist(),
            "note": result.window_note,
        },
        "circuit": {
            "solver": "PEEC (quasi-static partial element equivalent circuit, Ruehli 1974)",
            "segments": result.circuit_segments,
            "seconds": result.circuit_seconds,
            "reduced_model_error": _num(result.circuit_rom_error),
            "coverage": list(result.coverage),
        },
        "mesh": mesh_summary(result),
        "environment": result.environment.as_payload(),
        "solves": [
            {"frequency_hz": s.frequency_hz, "role": s.role, "seconds": s.seconds, "cached": s.cached,
             "asymmetry": float(s.asymmetry), "segment_wavelengths": s.segment_wavelengths}
            for s in result.solves
        ],
    }


def write_sweep(result: SweepResult, out: Path, z0: float = 50.0) -> list[Path]:
    """Write sweep.json, tap-<n>.s1p, taps.s<k>p, impedance.csv and impedance.png into ``out``."""
    out.mkdir(parents=True, exist_ok=True)
    written = [write_json(out / "sweep.json", sweep_dict(result, z0))]
    for i, n in enumerate(result.tap_turns):
        net = result.tap_network(i, z0)
        net.write_touchstone(filename=f"tap-{n}", dir=str(out), skrf_comment=False)
        written.append(out / f"tap-{n}.s1p")
    k = len(result.tap_turns)
    result.to_network(z0).write_touchstone(filename="taps", dir=str(out), skrf_comment=False)
    written.append(out / f"taps.s{k}p")
    written.append(_write_impedance_csv(result, out / "impedance.csv"))
    from simloop.plots import plot_impedance

    written.append(plot_impedance(result, out / "impedance.png"))
    return written


def _write_impedance_csv(result: SweepResult, path: Path) -> Path:
    with path.open("w", newline="") as fh:
        w = csv.writer(fh)
        header = ["frequency_hz", "source"]
        for n in result.tap_turns:
            header += [f"tap{n}_resistance_ohm", f"tap{n}_reactance_ohm", f"tap{n}_error_estimate",
                       f"tap{n}_reliable"]
        w.writerow(header)
        for m, f in enumerate(result.frequencies_hz):
            row = [f"{f:.6f}", result.source[m]]
            for i in range(len(result.tap_turns)):
                z = result.z_ohm[m, i, i]
                row += [f"{z.real:.6e}", f"{z.imag:.6e}", f"{result.error_estimate[m, i]:.4f}",
                        str(bool(result.reliable[m, i])).lower()]
            w.writerow(row)
    return path
