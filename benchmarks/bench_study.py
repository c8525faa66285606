"""A full study of a converged 10-turn loop on two cores: goal ≤ 60 s.

The study: the sweep of three taps (the circuit solver over the whole band, direct NEC solves at
the sweep points above NEC's low-frequency floor), the whole-band channel chart (ITU Region 1
raster), the boost of the radio's rod per channel with its placement map, and the receive pattern
at 1 MHz (MoM far-field rows every 2° of azimuth, ``simloop.patterns.ROW_STEP_DEG``). It runs
through the Python API (``simloop.sweep``, ``tune``, ``couple``, ``pattern``) with two worker
processes and no solve cache, and prints the time of each stage and the total against the goal.

The loop is the bundled demo loop (0.7 m square, 8 mm pitch, 20 AWG) wound with 10 turns, taps at
6, 8 and 10 turns, mesh quality ``standard``: NEC segments ≤ 1.67 × the pitch, inside the pitch
rule (README, "How far to trust the numbers"; on the 9-turn demo loop NEC's end tap then agrees
with the circuit solver to 0.1 %, ``bench_naive_vs_tune.py``), and the circuit solver's own mesh
(36 segments a turn, 1500 at most). That the circuit's inductance, which every sweep point here
comes from, has converged is measured after the timed study: L0 of every tap again from a circuit
mesh with half the segment length (not timed; ``--no-convergence`` skips it).

Run once: ``python benchmarks/bench_study.py [--workers 2] [--no-convergence]``. The machine line
gives the load average at the start: the machine is shared, and its load scales every time.
"""

from __future__ import annotations

import argparse
import os
import time
from importlib import resources

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from _machine import load, machine  # noqa: E402

import simloop  # noqa: E402
from simloop.spec import loads  # noqa: E402

GOAL_S = 60.0
TURNS, TAPS = 10, (6, 8, 10)


def study_spec(quality: str):
    """The demo loop wound with 10 turns, taps 6/8/10, a 1 MHz pattern at 0° and 30° elevation."""
    text = resources.files("simloop").joinpath("data", "demo-loop.toml").read_text()
    text = (text.replace("turns = 9\n", f"turns = {TURNS}\n")
                .replace("turns = [5, 7, 9]", f"turns = {list(TAPS)}")
                .replace('quality = "standard"', f'quality = "{quality}"'))
    text += '\n[pattern]\nfrequency = "1 MHz"\nelevation = ["0 deg", "30 deg"]\n'
    spec = loads(text)
    if spec.winding.turns != TURNS or tuple(spec.taps.turns) != TAPS:
        raise SystemExit("the demo loop's spec changed: update bench_study.study_spec")
    return spec


def run_study(spec, workers: int) -> tuple[dict, dict]:
    """Sweep → tune → couple → pattern; the results and the seconds of each stage."""
    times, out = {}, {}
    t0 = time.perf_counter()
    out["sweep"] = simloop.sweep(spec, workers=workers, cache=None)
    times["sweep"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    out["tune"] = simloop.tune(spec, out["sweep"], band="itu-1")
    times["tune"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    out["couple"] = simloop.couple(spec, out["sweep"], out["tune"])
    times["couple"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    out["pattern"] = simloop.pattern(spec, out["sweep"], workers=workers, cache=None)
    times["pattern"] = time.perf_counter() - t0
    return out, times


def describe(out: dict) -> list[str]:
    """One line per stage: what it produced (so a fast stage is seen to have done its work)."""
    sw, tu, co, pa = out["sweep"], out["tune"], out["couple"], out["pattern"]
    sources = {str(s): int(np.sum(sw.source == s)) for s in np.unique(sw.source)}
    return [
        f"sweep: {sw.frequencies_hz.size} points × {len(sw.tap_turns)} taps, NEC mesh {sw.mesh.n_segments} "
        f"segments, circuit {sw.circuit_segments}; sources {sources}; {len(sw.solves)} NEC solves; "
        f"L0 {', '.join(f'{x * 1e6:.1f}' for x in sw.inductance_h)} µH",
        f"tune: {tu.chart.frequencies_hz.size} channels, {int(np.sum(tu.chart.channel_tap_index >= 0))} tuned "
        f"on taps {list(tu.tap_turns)}",
        f"couple: boost over {co.frequencies_hz.size} channels {np.nanmin(co.boost_db):.1f}…"
        f"{np.nanmax(co.boost_db):.1f} dB, placement map {co.map_boost_db.shape}",
        f"pattern: {pa.frequency_hz / 1e6:g} MHz, {pa.azimuth_deg.size} azimuths × {pa.elevation_deg.size} "
        f"elevations, {len(pa.nulls)} nulls, models {dict(pa.models)}",
    ]


def circuit_convergence(sweep) -> np.ndarray:
    """L0 per tap from a circuit mesh with half the sweep's circuit segment length, relative to the
    sweep's (not timed). [-]"""
    from simloop.circuit import build_circuit
    from simloop.impedance import _circuit_mesh
    from simloop.mesh import build_mesh

    geom = sweep.geometry
    used = _circuit_mesh(geom, sweep.mesh)  # the mesh the sweep's circuit solver used
    n = used.n_segments
    fine = build_mesh(geom, used.target_m / 2, used.quality)
    cm = build_circuit(fine, resistivity_ohm_m=sweep.resistivity_ohm_m, proximity=True)
    f_low = float(sweep.frequencies_hz.min()) / 100
    l_fine = np.diag(cm.solve(f_low).z_ohm.imag / (2 * np.pi * f_low))
    l_sweep = np.diag(sweep.circuit_inductance_h)
    print(f"circuit L0 with {fine.n_segments} segments (sweep: {n}): "
          f"{', '.join(f'{x * 1e6:.3f}' for x in l_fine)} µH against "
          f"{', '.join(f'{x * 1e6:.3f}' for x in l_sweep)} µH")
    return l_sweep / l_fine - 1.0


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--quality", default="standard")
    ap.add_argument("--no-convergence", action="store_true", help="skip the untimed convergence check")
    args = ap.parse_args(argv)
    print(f"machine: {machine()}")
    spec = study_spec(args.quality)
    print(f"loop: demo loop wound with {TURNS} turns, taps {list(TAPS)}, {args.quality} mesh; "
          f"{args.workers} workers, no cache")
    out, times = run_study(spec, args.workers)
    for line in describe(out):
        print("  " + line)
    print("stage     seconds")
    for name, sec in times.items():
        print(f"{name:8s}  {sec:7.1f}")
    total = sum(times.values())
    print(f"full study: measured {total:.1f} s / target ≤ {GOAL_S:.0f} s "
          f"({'met' if total <= GOAL_S else 'NOT met'}); at the end {load()}")
    if not args.no_convergence:
        d = circuit_convergence(out["sweep"])
        print(f"converged: L0 changes by {', '.join(f'{x:+.2e}' for x in d)} per tap when the circuit's "
              f"segments are halved; {load()}")


if __name__ == "__main__":
    main()
