"""Command line: parse, load, call, write. No mathematics here.

Exit status: 0 done, 2 bad input (the message names the key), 1 anything else (a message, no
traceback unless --debug).
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import traceback
from importlib import resources
from pathlib import Path

from simloop.errors import SimloopError, SpecError

DEMO_SPEC = "demo-loop.toml"


class _Progress:
    """tqdm on a terminal; on a log, one line per finished solve at most every 10 s."""

    def __init__(self, quiet: bool = False):
        self.quiet = quiet
        self.tty = sys.stderr.isatty()
        self.bar = None
        self.stage = None
        self.last = 0.0

    def __call__(self, stage: str, done: int, total: int):
        if self.quiet:
            return
        if self.tty:
            from tqdm import tqdm

            if stage != self.stage:
                self.close()
                self.bar = tqdm(total=total, desc=f"MoM {stage}", unit="freq", leave=False)
                self.stage = stage
            self.bar.n = done
            self.bar.refresh()
            return
        now = time.monotonic()
        if done == total or now - self.last > 10:
            print(f"[simloop] {stage} solves: {done}/{total}", file=sys.stderr, flush=True)
            self.last = now

    def close(self):
        if self.bar is not None:
            self.bar.close()
            self.bar = None


def _cache(args):
    from simloop.solve import SolveCache

    if args.no_cache:
        return None
    root = os.environ.get("SIMLOOP_CACHE") or str(Path("results") / ".cache")
    return SolveCache(root)


def _out_dir(args, spec) -> Path:
    return Path(args.out) if args.out else Path("results") / spec.name


def cmd_check(args) -> int:
    from simloop.impedance import prepare
    from simloop.mesh import C0
    from simloop.spec import load

    spec = load(args.spec)
    geom, mesh, rules = prepare(spec)
    lam_lo, lam_hi = C0 / spec.sweep.start_hz, C0 / spec.sweep.stop_hz
    print(f"{spec.name}: {spec.winding.turns} turns {spec.winding.style}, "
          f"{spec.frame.width_m * 1e3:.0f} × {spec.frame.height_m * 1e3:.0f} mm, "
          f"pitch {spec.winding.pitch_m * 1e3:.2f} mm, wire radius {spec.wire.radius_m * 1e3:.3f} mm, "
          f"taps at {', '.join(map(str, spec.taps.turns))} turns")
    print(f"wire to cut: winding {geom.winding_length_m:.3f} m + leads {geom.lead_length_m:.3f} m "
          f"= {geom.wire_length_m:.3f} m")
    print(f"mesh ({mesh.quality}): {mesh.n_segments} segments on {mesh.segments.size} wires; "
          f"segment {mesh.shortest_m * 1e3:.2f}–{mesh.longest_m * 1e3:.2f} mm "
          f"(target {mesh.target_m * 1e3:.2f} mm)")
    print(f"  = {mesh.shortest_m / lam_lo:.2e}–{mesh.longest_m / lam_hi:.2e} λ over the sweep, "
          f"{mesh.winding_segment_m / spec.winding.pitch_m:.2f} × pitch, "
          f"{mesh.shortest_m / spec.wire.radius_m:.1f}–{mesh.longest_m / spec.wire.radius_m:.1f} × radius")
    width = max(len(r.name) for r in rules)
    for r in rules:
        print(f"  [{r.status:>4}] {r.name:<{width}}  {r.detail}")
    return 0


def _run_sweep(args, spec):
    from simloop.impedance import run_sweep

    from simloop.explore import solve_budget

    progress = _Progress(args.quiet)
    try:
        result = run_sweep(spec, workers=args.workers, cache=_cache(args), progress=progress,
                           direct=getattr(args, "direct", False))
    finally:
        progress.close()
    if not args.quiet:
        print(solve_budget(result).describe())
    return result


def _spec_out_sweep(args, spec, sweep):
    """The spec (loaded unless given), the output folder and the sweep (run unless given)."""
    from simloop.spec import load

    spec = spec or load(args.spec)
    return spec, _out_dir(args, spec), sweep or _run_sweep(args, spec)


def cmd_sweep(args, spec=None, sweep=None) -> int:
    from simloop.report import write_sweep

    spec, out, result = _spec_out_sweep(args, spec, sweep)
    paths = write_sweep(result, out, z0=args.z0)
    if not args.quiet:
        for i, n in enumerate(result.tap_turns):
            srf = result.self_resonance_hz[i]
            ok = int(result.reliable[:, i].sum())
            kappa = result.junction_correction[i]
            fix = f", junction-corrected {kappa - 1:+.1%}" if kappa != 1.0 else ""
            print(f"tap {n:>3}: L0 = {result.inductance_h[i] * 1e6:8.2f} µH ± {result.inductance_error[i]:.1%} "
                  f"(quasi-static {result.quasi_static_inductance_h[i] * 1e6:.2f} µH{fix}), "
                  f"self-resonance {srf / 1e6:.3f} MHz, {ok}/{result.frequencies_hz.size} points reliable")
        n_mom = int((result.source == "mom").sum())
        print(f"{n_mom} points by direct MoM, {result.source.size - n_mom} from the model fitted at "
              f"{', '.join(f'{f / 1e6:.3f}' for f in result.model.fit_hz)} MHz")
        if result.window_note:
            print(f"note: {result.window_note}")
        print(f"wrote {len(paths)} files to {out}/")
    return 0


def cmd_tune(args, spec=None, sweep=None) -> int:
    from simloop.report_tune import format_tune_summary, write_tune
    from simloop.tuning import run_tune

    spec, out, sweep = _spec_out_sweep(args, spec, sweep)
    result = run_tune(spec, sweep, band=args.band, field_v_per_m=args.field)
    paths = write_tune(result, out)
    if not args.quiet:
        print(format_tune_summary(result))
        print(f"wrote {len(paths)} files to {out}/")
    return 0


def cmd_validate(args, spec=None, sweep=None) -> int:
    from simloop.report_validate import format_validate_table, write_validate
    from simloop.validation import run_validate

    spec, out, sweep = _spec_out_sweep(args, spec, sweep)
    progress = _Progress(args.quiet)
    try:
        result = run_validate(spec, sweep, workers=args.workers, cache=_cache(args), progress=progress,
                              convergence=not args.no_convergence)
    finally:
        progress.close()
    paths = write_validate(result, out)
    if not args.quiet:
        print(format_validate_table(result))
        print(f"wrote {len(paths)} files to {out}/")
    return 0


def cmd_demo(args) -> int:
    """Sweep, tune and validate the bundled demo loop: every output into one folder."""
    from simloop.spec import loads

    text = resources.files("simloop").joinpath("data", DEMO_SPEC).read_text()
    spec = loads(text, source=DEMO_SPEC)
    args.out = args.out or str(Path("results") / "demo")
    args.band, args.field, args.no_convergence = "itu-1", 1e-3, False
    sweep = _run_sweep(args, spec)
    cmd_sweep(args, spec=spec, sweep=sweep)
    cmd_tune(args, spec=spec, sweep=sweep)
    return cmd_validate(args, spec=spec, sweep=sweep)


def _explore_executor(args, n_designs: int):
    """A local process pool, or the executor of a running Dask cluster (checked before use);
    its description, and the function that closes it."""
    from concurrent.futures import ProcessPoolExecutor

    if not args.scheduler:
        workers = args.workers or os.cpu_count() or 1
        pool = ProcessPoolExecutor(max_workers=max(1, min(workers, n_designs)))
        return pool, f"local pool of {workers} processes", lambda: pool.shutdown(cancel_futures=True)
    import multiprocessing

    from distributed import Client

    from simloop.explore import DAEMON_RULE

    try:
        client = Client(args.scheduler, timeout="5s")
    except (OSError, TimeoutError, ValueError, TypeError) as exc:
        raise SpecError("--scheduler", f"no Dask scheduler answers at {args.scheduler!r} "
                                       f"(write tcp://HOST:PORT): {exc}") from None
    daemons = client.run(lambda: multiprocessing.current_process().daemon)
    if not daemons:
        client.close()
        raise SpecError("--scheduler", f"the cluster at {args.scheduler} has no workers")
    if any(daemons.values()):
        client.close()
        raise SpecError("--scheduler", DAEMON_RULE)
    executor = client.get_executor()

    def close():
        executor.shutdown(wait=False)
        client.close()

    return executor, f"Dask cluster {args.scheduler} ({len(daemons)} workers)", close


def cmd_explore(args) -> int:
    """Vary spec keys over a grid or sample; one sweep and tune per design, in parallel."""
    import tomllib

    from simloop import explore as ex
    from simloop import report_explore as rep
    from simloop.spec import load
    from simloop.tuning import band_plan

    spec = load(args.spec)
    base = tomllib.loads(Path(args.spec).read_text(encoding="utf-8-sig"))
    axes = ex.parse_vary(args.vary, base, sampled=args.samples is not None)
    band_plan(args.band)
    if args.samples is not None:
        designs = ex.designs_sample(base, spec.name, axes, args.band, args.samples, args.seed)
    else:
        designs = ex.designs_grid(base, spec.name, axes, args.band)
    out = Path(args.out) if args.out else Path("results") / spec.name / "explore"
    done = {h: r for h, r in rep.read_rows(out).items() if rep.keep_on_resume(r)}
    todo = [d for d in designs if d.hash not in done]
    cache = None if args.no_cache else (os.environ.get("SIMLOOP_CACHE") or str(Path("results") / ".cache"))
    cache = str(Path(cache).resolve()) if cache else None
    rows = dict(done)
    started = time.monotonic()
    if todo:
        executor, where, close = _explore_executor(args, len(todo))
        if not args.quiet:
            print(f"{len(designs)} designs ({len(designs) - len(todo)} finished earlier), on the {where}")
            if spec.mesh.quality != "draft" and all(a.key != "mesh.quality" for a in axes):
                print(f"note: mesh quality {spec.mesh.quality!r}; for exploration draft is usually enough "
                      f"and several times faster (--vary mesh.quality=draft)")

        def on_row(design, row):
            rep.append_row(out, design, axes, row)

        def progress(n, total):
            if not args.quiet:
                print(f"[simloop] designs: {n}/{total}", file=sys.stderr, flush=True)

        try:
            rows.update(ex.run_designs(todo, executor, args.band, cache, on_row=on_row, progress=progress))
        finally:
            close()
    minutes = (time.monotonic() - started) / 60
    records = rep.table(designs, axes, rows)
    summ = rep.summary(records, args.objective)
    meta = {"spec": spec.name, "band": args.band, "objective": args.objective,
            "executor": "dask" if args.scheduler else "local", "run_minutes": minutes,
            "designs_run": len(todo)}
    out.mkdir(parents=True, exist_ok=True)
    paths = [rep.write_csv(out / "explore.csv", records, axes),
             rep.write_json(out / "explore.json", records, axes, meta, summ),
             rep.plot_explore(out / "explore.png", records, axes, summ,
                              f"{spec.name}: {len(records)} designs, band {args.band}")]
    if not args.quiet:
        print(rep.format_summary(records, axes, summ))
        if todo and minutes > 0:
            print(f"{len(todo)} designs in {minutes * 60:.1f} s ({len(todo) / minutes:.1f} designs/min)")
        print(f"wrote {len(paths)} files to {out}/")
    if summ["designs"] == summ["failed"]:
        print("simloop: no design could be solved; the errors are in explore.csv", file=sys.stderr)
        return 1
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="simloop", description=__doc__.splitlines()[0])
    parser.add_argument("--debug", action="store_true", help="show tracebacks")
    sub = parser.add_subparsers(dest="command", required=True)
    # --debug is accepted after the command too; SUPPRESS keeps a global --debug from being reset
    debug = argparse.ArgumentParser(add_help=False)
    debug.add_argument("--debug", action="store_true", default=argparse.SUPPRESS, help="show tracebacks")

    def common(p, spec=True):
        if spec:
            p.add_argument("spec", help="spec file (TOML)")
        p.add_argument("--out", help="output folder (default results/<name>/)")
        p.add_argument("--workers", type=int, default=None, help="solver processes (default: all CPUs)")
        p.add_argument("--z0", type=float, default=50.0, help="Touchstone reference impedance [Ω]")
        p.add_argument("--no-cache", action="store_true", help="do not re-use or store solves")
        p.add_argument("--quiet", action="store_true", help="print nothing but errors")

    p = sub.add_parser("check", parents=[debug], help="build the mesh and print the mesh report")
    p.add_argument("spec")
    p.set_defaults(func=cmd_check)
    p = sub.add_parser("sweep", parents=[debug], help="tap impedances over the sweep; JSON, CSV, Touchstone, plot")
    common(p)
    p.add_argument("--direct", action="store_true",
                   help="solve every point directly, below the breakdown floor too (flagged unreliable)")
    p.set_defaults(func=cmd_sweep)
    p = sub.add_parser("tune", parents=[debug], help="band coverage per tap, channel tuning chart, bandwidth, tuner voltage")
    common(p)
    p.add_argument("--band", default="itu-1",
                   help="band plan: itu-1, itu-2, itu-3 or START:STOP:STEP (e.g. 530k:1700k:10k)")
    p.add_argument("--field", type=float, default=1e-3,
                   help="incident field strength for the tuner voltage [V/m] (default 1 mV/m)")
    p.set_defaults(func=cmd_tune)
    p = sub.add_parser("validate", parents=[debug], help="MoM against handbook formulas and the quasi-static model")
    common(p)
    p.add_argument("--no-convergence", action="store_true", help="skip the mesh-convergence reruns")
    p.set_defaults(func=cmd_validate)
    p = sub.add_parser("demo", parents=[debug], help="sweep, tune and validate the bundled demo loop into results/demo/")
    common(p, spec=False)
    p.set_defaults(func=cmd_demo)
    p = sub.add_parser("explore", parents=[debug], help="vary spec keys: one sweep and tune per design, in parallel")
    p.add_argument("spec", help="base spec file (TOML)")
    p.add_argument("--vary", action="append", required=True, metavar="KEY=RANGE",
                   help="KEY=START:STOP, KEY=START:STOP:COUNT or KEY=V1,V2,... (repeat per key)")
    p.add_argument("--samples", type=int, default=None,
                   help="a Latin-hypercube sample of N designs instead of the full grid")
    p.add_argument("--seed", type=int, default=0, help="seed of the sample (default 0)")
    from simloop.explore import OBJECTIVES

    p.add_argument("--objective", choices=list(OBJECTIVES), default="coverage",
                   help="rank designs by: " + "; ".join(f"{k}: {v[1]}" for k, v in OBJECTIVES.items()))
    p.add_argument("--band", default="itu-1", help="band plan, as for tune")
    p.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="run on a Dask cluster (tcp://HOST:PORT) instead of the local pool")
    p.add_argument("--out", help="output folder (default results/<name>/explore/)")
    p.add_argument("--workers", type=int, default=None, help="local design processes (default: all CPUs)")
    p.add_argument("--no-cache", action="store_true", help="do not re-use or store solves")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    p.set_defaults(func=cmd_explore)
    return parser


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        if getattr(args, "z0", 50.0) <= 0:
            raise SpecError("--z0", f"{args.z0} must be > 0 (reference impedance in ohms)")
        if getattr(args, "workers", None) is not None and args.workers < 1:
            raise SpecError("--workers", f"{args.workers} must be ≥ 1")
        return args.func(args)
    except SpecError as exc:
        print(f"simloop: bad input\n{exc}", file=sys.stderr)
        if args.debug:
            traceback.print_exc()
        return 2
    except SimloopError as exc:
        print(f"simloop: {exc}", file=sys.stderr)
        if args.debug:
            traceback.print_exc()
        return 1
    except KeyboardInterrupt:
        print("simloop: interrupted; solved frequencies are kept in the cache", file=sys.stderr)
        return 130
    except Exception as exc:  # noqa: BLE001 - the CLI promises no traceback without --debug
        print(f"simloop: unexpected error: {type(exc).__name__}: {exc} (run with --debug for details)",
              file=sys.stderr)
        if args.debug:
            traceback.print_exc()
        return 1


if __name__ == "__main__":
    sys.exit(main())
