"""Speed goals that used to be asserted in tests: measured against their targets.

Run: ``.venv/bin/python benchmarks/bench_timing.py``. Prints one line per goal,
``name  measured  target  ok/SLOW``; exits 0 either way (timings depend on the machine and its
load, so they are reported, never failed on).

Goals:

* partial-inductance sum of 600 straight pieces (179 700 pairs), the size of a split 10-turn
  coil: under 2 s (best of three);
* a hung solve with a 1 s timeout comes back as an error: under 10 s from the call (worker start,
  the timeout itself, the kill and the clean-up).
"""

from __future__ import annotations

import os
import time

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

from _machine import machine  # noqa: E402

import numpy as np  # noqa: E402

from simloop import solve as solve_mod  # noqa: E402
from simloop.geometry import build_loop  # noqa: E402
from simloop.mesh import build_mesh  # noqa: E402
from simloop.reference import box_coil_pieces, inductance_partial_sum  # noqa: E402
from simloop.solve import Environment, solve_ports  # noqa: E402


def partial_sum_600_pieces_s() -> float:
    starts, ends = box_coil_pieces(0.8, 0.6, 10, 6e-3)
    t = np.linspace(0.0, 1.0, 16)
    s = (starts[:, None, :] + (ends - starts)[:, None, :] * t[None, :-1, None]).reshape(-1, 3)
    e = (starts[:, None, :] + (ends - starts)[:, None, :] * t[None, 1:, None]).reshape(-1, 3)
    best = np.inf
    for _ in range(3):
        t0 = time.perf_counter()
        inductance_partial_sum(s, e, 0.4e-3)
        best = min(best, time.perf_counter() - t0)
    return best


def _hang(*args):
    time.sleep(60)


def hung_solve_killed_s() -> float:
    mesh = build_mesh(build_loop(0.4, 0.3, 3, 0.02, 0.406e-3, (2, 3), 0.06, "stacked"), 0.02)
    original = solve_mod._solve_plan
    solve_mod._solve_plan = _hang  # inherited by the forked worker
    try:
        t0 = time.monotonic()
        (res,) = solve_ports(mesh, Environment(), [1e6], timeout_s=1.0)
        elapsed = time.monotonic() - t0
    finally:
        solve_mod._solve_plan = original
    if not isinstance(res, Exception):
        raise RuntimeError("the hung solve was not turned into an error")
    return elapsed


def main() -> None:
    goals = [("partial sum, 600 pieces [s]", partial_sum_600_pieces_s, 2.0),
             ("hung solve killed (timeout 1 s) [s]", hung_solve_killed_s, 10.0)]
    print(f"machine: {machine()}")
    print(f"{'goal':40s} {'measured':>9s} {'target':>7s}")
    for name, run, target in goals:
        measured = run()
        print(f"{name:40s} {measured:9.3f} {target:7.1f}  {'ok' if measured <= target else 'SLOW'}")


if __name__ == "__main__":
    main()
