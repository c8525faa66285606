"""Speed of the coupling layer: Biot–Savart field of a loop at many points, loop–rod M over a
placement map, and the rod model.

Run: ``.venv/bin/python benchmarks/bench_couple.py``. Prints a table. Targets: a 41 × 41 map for
three orientations (≈ 80 000 field points) well under a second; the rod model under 0.5 s.
Timings depend on the machine and its load.
"""

from __future__ import annotations

import os
import time

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

from _machine import machine  # noqa: E402

import numpy as np  # noqa: E402

from simloop.coupling import mutual_inductance_h  # noqa: E402
from simloop.fields import h_field, quasi_static_source  # noqa: E402
from simloop.geometry import build_loop  # noqa: E402
from simloop.receiver import _slices, build_rod  # noqa: E402


def main() -> None:
    print(f"machine: {machine()}")
    geom = build_loop(width_m=0.8, height_m=0.6, turns=10, pitch_m=0.006, wire_radius_m=0.0004,
                      tap_turns=(6, 8, 10), lead_offset_m=0.03, style="stacked")
    src = quasi_static_source(geom)
    rows = []
    pts = np.random.default_rng(0).uniform(-1, 1, (10_000, 3))
    t0 = time.perf_counter()
    h_field(src, pts)
    rows.append(("H of 3 taps at 10 000 points", len(geom.kinds), time.perf_counter() - t0))
    _slices.cache_clear()
    t0 = time.perf_counter()
    rod = build_rod(0.1, 0.01, 125, 65, 0.02, 60)
    rows.append(("rod model (160 slices, L computed)", 160, time.perf_counter() - t0))
    x = np.linspace(-1, 1, 41)
    xx, yy = np.meshgrid(x, x)
    pos = np.stack([xx.ravel(), yy.ravel(), np.full(xx.size, -0.3)], axis=1)
    t0 = time.perf_counter()
    for deg in (0, 45, 90):
        th = np.radians(deg)
        mutual_inductance_h(src, rod, pos, np.broadcast_to([np.sin(th), np.cos(th), 0], pos.shape))
    rows.append(("M over a 41 × 41 map, 3 orientations", pos.shape[0] * 3 * rod.sample_m.size,
                 time.perf_counter() - t0))
    print(f"{'what':<40} {'size':>8} {'seconds':>8}")
    for what, size, sec in rows:
        print(f"{what:<40} {size:>8} {sec:>8.3f}")


if __name__ == "__main__":
    main()
