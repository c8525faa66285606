"""Explore: designs per minute on the local process pool and on a two-worker Dask LocalCluster.

The same 20-design grid of the bundled demo loop (turns 9…13 × frame width 0.5…0.8 m, draft mesh,
Region 1 band) runs through ``simloop explore`` twice, without the solve cache so that both runs
do the same work (each design a sweep — the circuit solver over the band, NEC above its floor —
and the tuning chart): once on the local pool (two processes), once through ``--scheduler`` on a
LocalCluster of two single-thread worker processes on 127.0.0.1. The rows of the two runs must be
identical apart from the run times; the script checks that and prints designs per minute for
each. The goal is that the cluster keeps up with the local pool (its overhead ≤ 10 %: measured
cluster rate / local rate ≥ 0.9) on the same two cores. At draft quality each design takes
seconds, so the whole benchmark takes a few minutes.

Run once: ``python benchmarks/bench_explore.py [--out results/bench-explore]``.
"""

from __future__ import annotations

import argparse
import json
import os
import tempfile
import time
from importlib import resources
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

from _machine import load, machine  # noqa: E402

from simloop.cli import main as simloop  # noqa: E402

GRID = ["--vary", "winding.turns=9:13", "--vary", 'frame.width="0.5 m":"0.8 m":4',
        "--vary", "mesh.quality=draft", "--band", "itu-1", "--no-cache", "--quiet"]


def _rows(out: Path) -> list[dict]:
    rows = json.loads((out / "explore.json").read_text())["designs"]
    for r in rows:
        r.pop("runtime_s", None)
        if r.get("solves"):  # solver times (MoM and circuit) are timings too
            for key in ("seconds", "circuit_seconds"):
                r["solves"].pop(key, None)
    return rows


def budget(out: Path) -> str:
    """The grid's factorisations by role, summed over its designs (from the rows)."""
    rows = json.loads((out / "explore.json").read_text())["designs"]
    keys = ("circuit", "direct", "check", "total")
    sums = {k: sum((r.get("solves") or {}).get(k, 0) for r in rows) for k in keys}
    sec = sum((r.get("solves") or {}).get("circuit_seconds", 0.0) for r in rows)
    mom = sum((r.get("solves") or {}).get("seconds", 0.0) for r in rows)
    return (f"{sums['circuit']} circuit fills ({sec:.0f} s), {sums['total']} NEC factorisations "
            f"(direct {sums['direct']}, cross-check {sums['check']}; {mom:.0f} s)")


def run(spec: Path, out: Path, *extra) -> float:
    t0 = time.perf_counter()
    code = simloop(["explore", str(spec), *GRID, "--out", str(out), *extra])
    if code != 0:
        raise SystemExit(f"simloop explore exited {code}")
    return time.perf_counter() - t0


def main(argv=None):
    import dask
    from distributed import LocalCluster

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default=None, help="keep the two runs' outputs here")
    args = ap.parse_args(argv)
    root = Path(args.out) if args.out else Path(tempfile.mkdtemp(prefix="bench-explore-"))
    spec = root / "demo-loop.toml"
    root.mkdir(parents=True, exist_ok=True)
    spec.write_text(resources.files("simloop").joinpath("data", "demo-loop.toml").read_text())
    for d in ("local", "dask"):
        (root / d / "explore-rows.jsonl").unlink(missing_ok=True)  # a fresh run, not a resume
    print(f"machine: {machine()}")
    t_local = run(spec, root / "local", "--workers", "2")
    print(f"local pool done: {load()}", flush=True)
    with dask.config.set({"distributed.worker.daemon": False}):
        with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                          dashboard_address=":0") as cluster:
            print(f"cluster started: {load()}", flush=True)
            t_dask = run(spec, root / "dask", "--scheduler", cluster.scheduler_address)
    print(f"cluster done: {load()}")
    local, remote = _rows(root / "local"), _rows(root / "dask")
    n = len(local)
    same = local == remote
    print(f"{n} designs; rows identical (run times aside): {same}")
    r_local, r_dask = n / (t_local / 60), n / (t_dask / 60)
    print(f"local pool (2 processes): {t_local:.1f} s, {r_local:.1f} designs/min")
    print(f"LocalCluster (2 workers): {t_dask:.1f} s, {r_dask:.1f} designs/min")
    print(f"solve budget of the grid (each run): {budget(root / 'local')}")
    print(f"cluster rate / local rate: measured {r_dask / r_local:.2f} / target ≥ 0.9 "
          f"({'met' if r_dask / r_local >= 0.9 else 'NOT met'})")
    print(f"outputs in {root}/local and {root}/dask")
    if not same:
        raise SystemExit("the two runs' rows differ")


if __name__ == "__main__":
    main()
