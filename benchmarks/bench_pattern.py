"""Benchmark: a pattern of 180 azimuths × 3 elevations costs about one factorisation.

Runs in-process (no worker), on a 10-turn 0.8 × 0.6 m stacked loop at three mesh sizes:

* ports only — the port matrix (fill, LU, one back-substitution per tap): the factorisation;
* pattern rows — the same plus 180 azimuths at each of 3 elevations for every tap excitation;
* pattern plan — what ``simloop pattern`` solves: the rows plus the 5° sphere of the power check
  and the dipole fit.

Run: ``PYTHONPATH=. python benchmarks/bench_pattern.py``. Measured here (2 shared cores, ±20 %
from the load): 971 / 1454 / 2089 segments: ports only 1.48 / 2.98 / 6.89 s; with the 180 × 3 rows
0.87 / 1.10 / 1.25 × that; the whole pattern plan 0.87 / 1.23 / 1.26 × — about one factorisation.
"""

from __future__ import annotations

import os
import time

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

from _machine import machine  # noqa: E402

from simloop.geometry import build_loop  # noqa: E402
from simloop.mesh import build_mesh  # noqa: E402
from simloop.patterns import pattern_plan  # noqa: E402
from simloop.solve import Environment, _solve_plan  # noqa: E402


def seconds(plan) -> float:
    payload = plan.mesh.as_payload()
    obs = [{**o.descriptor(), "name": f"o{i}"} for i, o in enumerate(plan.observations)]
    t0 = time.perf_counter()
    _solve_plan(payload, plan.env.as_payload(), plan.frequency_hz, [e.descriptor() for e in plan.excitations], obs)
    return time.perf_counter() - t0


def main():
    env = Environment()
    print(f"machine: {machine()}")
    print("segments  ports-only s  +180×3 rows s  ratio  full pattern plan s  ratio")
    for target in (0.03, 0.02, 0.014):
        mesh = build_mesh(build_loop(0.8, 0.6, 10, 0.012, 0.406e-3, (6, 8, 10), 0.06), target)
        plan, rows, grid = pattern_plan(mesh, env, 1.5e6, (0.0, 30.0, 60.0))
        ports = type(plan)(mesh, env, 1.5e6)
        only_rows = type(plan)(mesh, env, 1.5e6, plan.excitations, plan.observations[:-1])
        t_ports = min(seconds(ports) for _ in range(2))
        t_rows = min(seconds(only_rows) for _ in range(2))
        t_full = min(seconds(plan) for _ in range(2))
        print(f"{mesh.n_segments:8d}  {t_ports:12.3f}  {t_rows:13.3f}  {t_rows / t_ports:5.2f}  "
              f"{t_full:19.3f}  {t_full / t_ports:5.2f}")


if __name__ == "__main__":
    main()
