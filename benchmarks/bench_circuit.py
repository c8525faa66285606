"""Speed and accuracy of the circuit solver (PEEC) against the MoM (PyNEC).

For a 10-turn 0.8 × 0.6 m loop meshed ever finer: the circuit's fill time (partial elements and
their projection, once per geometry) and its time per frequency (one LU), beside one PyNEC solve
(fill + LU, per frequency). Then a 200-point sweep from the reduced-order model: its time and its
error against exact circuit solves at every one of the 200 points (not only the held-back ones).

Run: ``.venv/bin/python benchmarks/bench_circuit.py [--quick]``. Prints tables; timings depend on
the machine and its load.
"""

from __future__ import annotations

import argparse
import os
import time

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402
from _machine import load, machine  # noqa: E402

from simloop.circuit import build_circuit  # noqa: E402
from simloop.geometry import build_loop  # noqa: E402
from simloop.mesh import build_mesh  # noqa: E402
from simloop.reference import resistivity_copper  # noqa: E402
from simloop.solve import Environment, PortCurrents, PortSources, _solve_plan  # noqa: E402

RHO = float(resistivity_copper())


def _loop():
    return build_loop(0.8, 0.6, 10, 0.012, 0.406e-3, (6, 8, 10), 0.06)


def _nec_seconds(mesh, frequency_hz: float) -> float:
    """One in-process PyNEC solve of all three ports (fill, LU, back-substitutions), no worker."""
    t0 = time.perf_counter()
    _solve_plan(mesh.as_payload(), Environment().as_payload(), frequency_hz, [PortSources().descriptor()],
                [{**PortCurrents().descriptor(), "name": "i"}])
    return time.perf_counter() - t0


def scaling(targets, nec_up_to: int):
    print("segments  circuit fill s  circuit s/freq  NEC s/freq (3 ports)")
    for target in targets:
        mesh = build_mesh(_loop(), target)
        t0 = time.perf_counter()
        model = build_circuit(mesh, resistivity_ohm_m=RHO)
        fill = time.perf_counter() - t0
        t0 = time.perf_counter()
        model.solve(1e6)
        per_f = time.perf_counter() - t0
        nec = f"{_nec_seconds(mesh, 2e6):10.2f}" if mesh.n_segments <= nec_up_to else "   (skipped)"
        print(f"{mesh.n_segments:8d}  {fill:14.2f}  {per_f:14.3f}  {nec}", flush=True)


def sweep_200(target: float):
    mesh = build_mesh(_loop(), target)
    model = build_circuit(mesh, resistivity_ohm_m=RHO)
    f = np.linspace(520e3, 1710e3, 200)
    t0 = time.perf_counter()
    rom = model.reduced_model(f.min(), f.max())
    build = time.perf_counter() - t0
    t0 = time.perf_counter()
    z = rom.z(f)
    evaluate = time.perf_counter() - t0
    t0 = time.perf_counter()
    exact = np.array([model.solve(x).z_ohm for x in f])
    t_exact = time.perf_counter() - t0
    err = np.linalg.norm(z - exact, axis=(1, 2)) / np.linalg.norm(exact, axis=(1, 2))
    print(f"\n200-point sweep 520–1710 kHz, {mesh.n_segments} segments, 3 ports:")
    print(f"  reduced model: {rom.sample_hz.size} exact samples + {rom.held_back_hz.size} held back, "
          f"basis {rom.basis_dim}, built in {build:.2f} s, 200 points in {evaluate * 1e3:.1f} ms")
    print(f"  its own held-back error {rom.error:.1e}; against all 200 exact solves: max {err.max():.1e}, "
          f"median {np.median(err):.1e}")
    print(f"  200 exact solves instead: {t_exact:.1f} s")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small meshes only")
    args = ap.parse_args()
    print(f"machine: {machine()}")
    targets = [0.06, 0.03, 0.02] if args.quick else [0.06, 0.03, 0.02, 0.012, 0.008]
    scaling(targets, nec_up_to=1500 if args.quick else 4000)
    sweep_200(0.03 if args.quick else 0.02)
    print(f"at the end: {load()}")


if __name__ == "__main__":
    main()
