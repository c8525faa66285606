"""Speed of the solver layer: seconds per frequency against segment count, and the overhead of a
sweep over the bare PyNEC factorisations it needed.

Run: ``make bench`` (or ``.venv/bin/python benchmarks/bench_sweep.py [--quick]``). Prints a table;
targets: the ratio of a sweep's MoM time (its circuit stage apart) to the bare factorisations
it made ≤ 1.3. Timings depend on the machine and its load (±10 % here).
"""

from __future__ import annotations

import argparse
import os
import time
import textwrap

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

from _machine import machine  # noqa: E402


from simloop.geometry import build_loop  # noqa: E402
from simloop.impedance import run_sweep  # noqa: E402
from simloop.mesh import build_mesh  # noqa: E402
from simloop.solve import (Environment, PortCurrents, PortSources, _solve_plan, estimated_seconds,  # noqa: E402
                           solve_ports)
from simloop.spec import loads  # noqa: E402


def bare_factorisation_seconds(mesh, frequency_hz: float) -> float:
    """One in-process PyNEC solve with a single source: geometry, fill and LU, no workers."""
    payload = mesh.as_payload()
    one_port = dict(payload, port_tags=payload["port_tags"][:1])
    t0 = time.perf_counter()
    _solve_plan(one_port, Environment().as_payload(), frequency_hz, [PortSources().descriptor()],
                [{**PortCurrents().descriptor(), "name": "i"}])
    return time.perf_counter() - t0


def scaling(sizes):
    print("segments  bare s/freq  tool s/freq (3 ports, 1 worker)  ratio  model s/freq")
    for target in sizes:
        geom = build_loop(0.8, 0.6, 10, 0.012, 0.406e-3, (6, 8, 10), 0.06)
        mesh = build_mesh(geom, target)
        bare = min(bare_factorisation_seconds(mesh, 2e6) for _ in range(2))
        t0 = time.perf_counter()
        solve_ports(mesh, Environment(), [2e6], workers=1)
        tool = time.perf_counter() - t0
        print(f"{mesh.n_segments:8d}  {bare:11.3f}  {tool:31.3f}  {tool / bare:5.2f}  "
              f"{estimated_seconds(mesh.n_segments):12.3f}")


SPEC = """
name = "bench"
[frame]
width = "0.8 m"
height = "0.6 m"
[winding]
turns = 10
pitch = "12 mm"
[wire]
gauge = "20 AWG"
[taps]
turns = [6, 8, 10]
[leads]
offset = "6 cm"
[sweep]
start = "520 kHz"
stop = "1710 kHz"
points = 25
[mesh]
quality = "{quality}"
"""


def sweep_overhead(quality: str):
    """A sweep's MoM time against the bare factorisations it made; the circuit solver apart.

    The sweep runs the circuit solver over the whole band and the MoM only above its floor, so the
    ratio compares the MoM part of the sweep (its total less the circuit stage) with the same
    number of bare in-process factorisations: the overhead of the workers, payloads and checks.
    """
    spec = loads(textwrap.dedent(SPEC.format(quality=quality)))
    t0 = time.perf_counter()
    res = run_sweep(spec, workers=1, cache=None)
    total = time.perf_counter() - t0
    print(f"sweep ({quality}, {res.mesh.n_segments} MoM segments, circuit {res.circuit_segments} segments, "
          f"25 points, 1 worker): {total:.2f} s, of which the circuit stage {res.circuit_seconds:.2f} s")
    if not res.solves:
        print("  no MoM solve (the band lies below the MoM's floor): no overhead ratio")
    else:
        bare = sum(bare_factorisation_seconds(res.mesh, s.frequency_hz) for s in res.solves)
        mom = total - res.circuit_seconds
        print(f"  {len(res.solves)} MoM frequencies: {mom:.2f} s in the sweep, bare factorisations {bare:.2f} s; "
              f"ratio measured {mom / bare:.2f} / target ≤ 1.3")
    t0 = time.perf_counter()
    run_sweep(spec, cache=None)
    print(f"same sweep with {os.cpu_count()} workers: {time.perf_counter() - t0:.2f} s")


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small meshes only")
    args = parser.parse_args()
    print(f"machine: {machine()}")
    scaling([0.04, 0.02] if args.quick else [0.04, 0.02, 0.012, 0.008])
    sweep_overhead("draft")
