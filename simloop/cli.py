"""Command line: parse, load, call, write. No mathematics here.

Exit status: 0 done, 2 bad input (the message names the key), 1 anything else (a message, no
traceback unless --debug), including a sweep in which any MoM solve failed (unless --keep-going);
130 interrupted (Ctrl-C), 143 terminated (SIGTERM), 141 output pipe closed.
"""

from __future__ import annotations

import argparse
import codecs
import contextlib
import math
import os
import signal
import sys
import threading
import time
import traceback
import warnings
from importlib import resources
from pathlib import Path

from simloop.errors import CacheWarning, SimloopError, SpecError

DEMO_SPEC = "demo-loop.toml"

DESCRIPTION = ("Design a tuned receiving loop for the medium-wave band: from a spec file (frame, "
               "turns, taps, wire, tuning capacitor) simloop computes each tap's impedance, which "
               "channels the tuner reaches on which tap, the bandwidth and the signal, and how far "
               "each number can be trusted.")
EPILOG = ("Quantities take units: spec values such as \"31.5 in\" or \"26 1/2 in\", options such as "
          "--field 1mV/m and --z0 50ohm. Exit status: 0 done, 2 bad input (the message names the "
          "key), 1 anything else. See README.md.")


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
    env = os.environ.get("SIMLOOP_CACHE")
    root = Path(env) if env else Path("results") / ".cache"
    if root.exists() and not root.is_dir():
        key = "SIMLOOP_CACHE" if env else "results/.cache"
        raise SpecError(key, f"{str(root)!r} is a file, not a folder; point SIMLOOP_CACHE at a folder "
                             f"or pass --no-cache")
    cache = SolveCache(root)
    args.cache_in_use = cache
    return cache


def _out_dir(args, spec) -> Path:
    from simloop.report import check_out_dir

    return check_out_dir(args.out if args.out is not None else Path("results") / spec.name)


def _solve_failures(args, sweep) -> int:
    """Report failed MoM solves on stderr; exit status 1 for them unless --keep-going."""
    if not sweep.failures:
        return 0
    print(f"simloop: {len(sweep.failures)} MoM solve(s) failed; the sweep points they should have "
          f"backed are marked unreliable (error estimate 1) and listed under 'failures' in sweep.json:",
          file=sys.stderr)
    for f in sweep.failures:
        print(f"  {f.role} solve at {f.reason}", file=sys.stderr)
    if getattr(args, "keep_going", False):
        print("simloop: --keep-going: finished with the failures recorded", file=sys.stderr)
        return 0
    cache = getattr(args, "cache_in_use", None)
    kept = " (the solves that finished are cached)" if cache is not None and cache.writable else ""
    print(f"simloop: rerun to retry them{kept}, or pass --keep-going to accept", file=sys.stderr)
    return 1


def cmd_check(args) -> int:
    from simloop.impedance import plan_sources, prepare
    from simloop.mesh import C0, segment_rule
    from simloop.spec import load

    spec = load(args.spec)
    geom, mesh, rules = prepare(spec)
    lam_lo, lam_hi = C0 / spec.sweep.start_hz, C0 / spec.sweep.stop_hz
    print(f"{spec.name}: {spec.winding.turns} turns {spec.winding.style}, "
          f"{spec.frame.width_m * 1e3:.0f} × {spec.frame.height_m * 1e3:.0f} mm, "
          f"pitch {spec.winding.pitch_m * 1e3:.2f} mm, wire radius {spec.wire.radius_m * 1e3:.3f} mm, "
          f"taps at {', '.join(map(str, spec.taps.turns))} turns")
    if spec.imperial:
        from simloop.units import format_length_imperial as inch

        print(f"  frame {inch(spec.frame.width_m)} × {inch(spec.frame.height_m)}, "
              f"pitch {inch(spec.winding.pitch_m)}")

        print(f"wire to cut: winding {inch(geom.winding_length_m)} + leads {inch(geom.lead_length_m)} "
              f"= {inch(geom.wire_length_m)}")
    else:
        print(f"wire to cut: winding {geom.winding_length_m:.3f} m + leads {geom.lead_length_m:.3f} m "
              f"= {geom.wire_length_m:.3f} m")
    seg_rule = segment_rule(geom, mesh.quality, spec.sweep.stop_hz, spec.winding.turns)
    print(f"mesh ({mesh.quality}): {mesh.n_segments} segments on {mesh.segments.size} wires; "
          f"segment {mesh.shortest_m * 1e3:.2f}–{mesh.longest_m * 1e3:.2f} mm "
          f"(target {mesh.target_m * 1e3:.2f} mm)")
    pitch = (f"{mesh.winding_segment_m / spec.winding.pitch_m:.2f} × pitch, " if spec.winding.turns > 1
             else "")
    print(f"  = {mesh.shortest_m / lam_lo:.2e}–{mesh.longest_m / lam_hi:.2e} λ over the sweep, {pitch}"
          f"{mesh.shortest_m / spec.wire.radius_m:.1f}–{mesh.longest_m / spec.wire.radius_m:.1f} × radius")
    print(f"  segment length set by: {seg_rule}")
    width = max(len(r.name) for r in rules)
    for r in rules:
        print(f"  [{r.status:>4}] {r.name:<{width}}  {r.detail}")
    plan = plan_sources(spec, geom, mesh)
    print("sources (decided before any solve):")
    for line in plan.coverage(spec.sweep.start_hz, spec.sweep.stop_hz):
        print(f"  {line}")
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
    out = _out_dir(args, spec)  # checked before the first solve
    return spec, out, sweep or _run_sweep(args, spec)


def cmd_sweep(args, spec=None, sweep=None) -> int:
    from simloop.report import write_sweep

    given = sweep is not None
    spec, out, result = _spec_out_sweep(args, spec, sweep)
    return _publish(args, out, "sweep", spec, lambda stage: write_sweep(result, stage, z0=args.z0),
                    lambda: _sweep_summary(result), result, given,
                    info={"reference_impedance_ohm": args.z0})


def _sweep_summary(result) -> str:
    """Per tap L0, its error and self-resonance, and where the points came from."""
    lines = []
    for i, n in enumerate(result.tap_turns):
        srf = result.self_resonance_hz[i]
        ok = int(result.reliable[:, i].sum())
        lines.append(f"tap {n:>3}: L0 = {result.inductance_h[i] * 1e6:8.2f} µH ± {result.inductance_error[i]:.1%} "
                     f"(quasi-static {result.quasi_static_inductance_h[i] * 1e6:.2f} µH), "
                     f"self-resonance {srf / 1e6:.3f} MHz, {ok}/{result.frequencies_hz.size} points reliable")
    counts = {s: int((result.source == s).sum()) for s in ("circuit", "mom", "model")}
    lines.append(", ".join(f"{n} points from {s}" for s, n in counts.items() if n)
                 + f" ({result.circuit_segments}-segment circuit, reduced-model error "
                 f"{result.circuit_rom_error:.1e}; {len(result.solves)} direct MoM solves)")
    if result.window_note:
        lines.append(f"note: {result.window_note}")
    return "\n".join(lines)


def _tune_options(args):
    """--band and --field as the computation takes them (a band plan, V/m), checked before any solve."""
    from simloop.tuning import band_plan
    from simloop.units import parse_band_raster, parse_option

    text = str(args.band)
    band = band_plan(parse_band_raster(text) if ":" in text else text)
    return band, parse_option(args.field, "field", "--field")


def _publish(args, out, command: str, spec, write, summary, sweep, given: bool, info: dict | None = None) -> int:
    """Write one command's outputs as one set (``write(folder)``), print ``summary()`` unless quiet,
    and report failed solves of a sweep this command ran itself (``given``: the caller's sweep).
    ``info`` joins the set's entry in the manifest."""
    from simloop.report import output_set

    with output_set(out, command, {"name": spec.name, **(info or {})}) as (stage, paths):
        write(stage)
    if not args.quiet:
        print(summary())
        print(f"wrote {len(paths)} files to {out}/")
    return 0 if given else _solve_failures(args, sweep)


def cmd_tune(args, spec=None, sweep=None) -> int:
    from simloop.report_tune import format_tune_summary, write_tune
    from simloop.tuning import run_tune

    given = sweep is not None
    band, field = _tune_options(args)
    spec, out, sweep = _spec_out_sweep(args, spec, sweep)
    result = run_tune(spec, sweep, band=band, field_v_per_m=field)
    return _publish(args, out, "tune", spec, lambda stage: write_tune(result, stage),
                    lambda: format_tune_summary(result), sweep, given)


def cmd_validate(args, spec=None, sweep=None) -> int:
    from simloop.report_validate import format_validate_table, write_validate
    from simloop.validation import run_validate

    given = sweep is not None
    spec, out, sweep = _spec_out_sweep(args, spec, sweep)
    progress = _Progress(args.quiet)
    try:
        result = run_validate(spec, sweep, workers=args.workers, cache=_cache(args), progress=progress,
                              convergence=not args.no_convergence)
    finally:
        progress.close()
    return _publish(args, out, "validate", spec, lambda stage: write_validate(result, stage),
                    lambda: format_validate_table(result), sweep, given)


def cmd_study(args, spec=None, source_text=None) -> int:
    """Sweep, tune, validate, couple and pattern in one pass sharing every solve; all outputs
    plus report.html."""
    from tqdm import tqdm

    from simloop.report import output_set, write_json, write_sweep
    from simloop.report_couple import write_couple
    from simloop.report_html import format_summary, summary_dict, write_report
    from simloop.report_pattern import write_pattern
    from simloop.report_tune import write_tune
    from simloop.report_validate import write_validate
    from simloop.spec import load
    from simloop.studies import run_study

    band, field = _tune_options(args)
    spec = spec or load(args.spec)
    out = _out_dir(args, spec)  # checked before the first solve
    # Progress bars on a terminal only: quiet in logs and CI, and when stdout is for a script.
    show = not (args.quiet or args.format == "json" or not sys.stderr.isatty())
    progress = _Progress(not show)
    try:
        result = run_study(spec, workers=args.workers, cache=_cache(args), progress=progress,
                           band=band, field_v_per_m=field,
                           convergence=not args.no_convergence, source_text=source_text)
    finally:
        progress.close()
    summary = summary_dict(result, out)
    with output_set(out, "study", {"name": spec.name}) as (stage, paths):
        writers = [lambda: write_sweep(result.sweep, stage, z0=args.z0), lambda: write_tune(result.tune, stage),
                   lambda: write_validate(result.validation, stage)]
        if result.couple is not None:
            writers.append(lambda: write_couple(result.couple, stage, z0=args.z0))
        if result.pattern is not None:
            writers.append(lambda: write_pattern(result.pattern, stage))
        writers += [lambda: [write_report(result, stage)], lambda: [write_json(stage / "study.json", summary)]]
        for write in tqdm(writers, desc="writing outputs", unit="file set", leave=False, disable=not show):
            write()
    if args.format == "json":
        import json

        print(json.dumps(summary, indent=1, allow_nan=False, default=str))
    elif not args.quiet:
        print(format_summary(result, out))
        print(f"wrote {len(paths)} files to {out}/")
    return max(_solve_failures(args, result.sweep), _stage_failures(args, result))


def _stage_failures(args, result) -> int:
    """Report study stages that failed (their section in the report says so); exit status 1 for
    them unless --keep-going."""
    for f in result.failures:
        print(f"simloop: the {f.stage} stage failed: {f.reason}; report.html says so and the other "
              f"results are written", file=sys.stderr)
    return 1 if result.failures and not getattr(args, "keep_going", False) else 0


def cmd_couple(args, spec=None, sweep=None) -> int:
    """Loop-to-radio coupling: boost per channel, placement map, optimum spacing, the 2-port."""
    from simloop.coupling import precheck, run_couple
    from simloop.report_couple import format_couple_summary, write_couple
    from simloop.spec import load
    from simloop.tuning import run_tune
    from simloop.units import parse_quantity

    given = sweep is not None
    band, field = _tune_options(args)
    frequency = getattr(args, "frequency", None)
    frequency = parse_quantity(frequency, "frequency", "--frequency", sign="positive") if frequency else None
    spec = spec or load(args.spec)
    precheck(spec, frequency, getattr(args, "tap", None))  # bad --tap/--frequency/rod before any solve
    spec, out, sweep = _spec_out_sweep(args, spec, sweep)
    tune = run_tune(spec, sweep, band=band, field_v_per_m=field)
    result = run_couple(spec, sweep, tune, frequency_hz=frequency, tap_turns=getattr(args, "tap", None))
    return _publish(args, out, "couple", spec, lambda stage: write_couple(result, stage, z0=args.z0),
                    lambda: format_couple_summary(result), sweep, given)


def cmd_pattern(args, spec=None, sweep=None) -> int:
    """Receive patterns of the loop (and the radio's rod), their nulls and what fills them."""
    from simloop.patterns import check_pattern_inputs, run_pattern
    from simloop.report_pattern import format_pattern_summary, write_pattern
    from simloop.spec import load

    given = sweep is not None
    spec = spec or load(args.spec)
    check_pattern_inputs(spec)  # before the sweep's long work
    spec, out, sweep = _spec_out_sweep(args, spec, sweep)
    progress = _Progress(args.quiet)
    try:
        result = run_pattern(spec, sweep, workers=args.workers, cache=_cache(args), progress=progress)
    finally:
        progress.close()
    return _publish(args, out, "pattern", spec, lambda stage: write_pattern(result, stage),
                    lambda: format_pattern_summary(result), sweep, given)


def cmd_demo(args) -> int:
    """The study of the bundled demo loop: every output and report.html into results/demo/."""
    from simloop.spec import loads

    text = resources.files("simloop").joinpath("data", DEMO_SPEC).read_text()
    spec = loads(text, source=DEMO_SPEC)
    if args.out is None:
        args.out = str(Path("results") / "demo")
    return cmd_study(args, spec=spec, source_text=text)


def _split_top(text: str, sep: str) -> list[str]:
    """Split on ``sep`` outside brackets and quotes."""
    parts, depth, quote, cur = [], 0, "", ""
    for ch in text:
        if quote:
            quote = "" if ch == quote else quote
        elif ch in "\"'":
            quote = ch
        elif ch == "[":
            depth += 1
        elif ch == "]":
            depth -= 1
        elif ch == sep and depth == 0:
            parts.append(cur)
            cur = ""
            continue
        cur += ch
    return [*parts, cur]


def _toml_value(text: str):
    """A TOML value (number, array, quoted string), or the bare text as a string."""
    import tomllib

    text = text.strip()
    try:
        return tomllib.loads(f"v = {text}")["v"]
    except tomllib.TOMLDecodeError:
        return text.strip("\"'")


def parse_vary(texts, base: dict, sampled: bool = False):
    """``--vary KEY=START:STOP[:COUNT]`` or ``KEY=V1,V2,...`` options → checked axes.

    Each part is read as a TOML value (``8``, ``[3, 5, 7]``, ``"0.5 m"``) or else as bare text
    (``0.5 m``, ``spiral``); :func:`simloop.explore.build_axes` checks them against the spec.
    """
    from simloop.explore import Vary, build_axes

    varies = []
    for text in texts:
        key, eq, rest = text.partition("=")
        if not eq or not rest.strip():
            raise SpecError("--vary", f"{text!r} has no values; write KEY=START:STOP, KEY=START:STOP:COUNT "
                                      f"or KEY=V1,V2,...")
        ranges = _split_top(rest, ":")
        if len(ranges) > 1:
            varies.append(Vary(key.strip(), tuple(_toml_value(p) for p in ranges), True))
        else:
            varies.append(Vary(key.strip(), tuple(_toml_value(p) for p in _split_top(rest, ",") if p.strip()), False))
    return build_axes(varies, base, sampled)


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
    axes = parse_vary(args.vary, base, sampled=args.samples is not None)
    band_plan(args.band)
    if args.objective == "boost" and spec.receiver is None:
        raise SpecError("--objective", "boost needs a [receiver] in the spec (the radio the loop is coupled to)")
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


def _add_common_options(p, spec: bool = True) -> None:
    """Options every solving command takes."""
    if spec:
        p.add_argument("spec", help="spec file (TOML)")
    p.add_argument("--out", help="output folder (default results/<name>/)")
    p.add_argument("--workers", type=int, default=None, help="solver processes (default: all CPUs)")
    p.add_argument("--z0", default="50 ohm",
                   help="Touchstone reference impedance, e.g. 50ohm or 75Ω (a bare number is ohms; "
                        "default 50 ohm)")
    p.add_argument("--no-cache", action="store_true", help="do not re-use or store solves")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    p.add_argument("--keep-going", action="store_true",
                   help="exit 0 although some MoM solves failed (they are still recorded and reported)")


def _add_tune_options(p) -> None:
    p.add_argument("--band", default="itu-1",
                   help="band plan: itu-1, itu-2, itu-3 or START:STOP:STEP (e.g. 530k:1700k:10k)")
    p.add_argument("--field", default="1 mV/m",
                   help="incident field strength for the tuner voltage, with its unit: 1mV/m, "
                        "50uV/m, 0.01V/m (a bare number is V/m; default 1 mV/m)")


def _add_study_options(p) -> None:
    _add_tune_options(p)
    p.add_argument("--no-convergence", action="store_true", help="skip the mesh-convergence reruns")
    p.add_argument("--format", choices=("text", "json"), default="text",
                   help="summary on stdout: short text, or JSON for scripts")


def _add_single_commands(sub, debug) -> None:
    """check, sweep, tune, validate, couple and pattern."""
    p = sub.add_parser("check", parents=[debug], help="build the mesh and print the mesh report")
    p.add_argument("spec")
    p.set_defaults(func=cmd_check)
    p = sub.add_parser("sweep", parents=[debug], help="tap impedances over the sweep; JSON, CSV, Touchstone, plot")
    _add_common_options(p)
    p.add_argument("--direct", action="store_true",
                   help="solve every point directly, below the breakdown floor too (flagged unreliable)")
    p.set_defaults(func=cmd_sweep)
    p = sub.add_parser("tune", parents=[debug], help="band coverage per tap, channel tuning chart, bandwidth, tuner voltage")
    _add_common_options(p)
    _add_tune_options(p)
    p.set_defaults(func=cmd_tune)
    p = sub.add_parser("validate", parents=[debug], help="solvers against handbook formulas and the quasi-static model")
    _add_common_options(p)
    p.add_argument("--no-convergence", action="store_true", help="skip the mesh-convergence reruns")
    p.set_defaults(func=cmd_validate)
    p = sub.add_parser("couple", parents=[debug], help="loop-to-radio coupling: boost, placement map, 2-port")
    _add_common_options(p)
    _add_tune_options(p)
    p.add_argument("--tap", type=int, default=None, help="tap (in turns) for the single-frequency studies")
    p.add_argument("--frequency", default=None,
                   help='frequency of the capacitor, distance and placement studies, e.g. "1 MHz" '
                        "(default: the channel nearest 1 MHz)")
    p.set_defaults(func=cmd_couple)
    p = sub.add_parser("pattern", parents=[debug],
                       help="receive patterns of the loop (and the radio's rod), their nulls and what fills them")
    _add_common_options(p)
    p.set_defaults(func=cmd_pattern)


def _add_explore_command(sub, debug) -> None:
    from simloop.explore import OBJECTIVES

    p = sub.add_parser("explore", parents=[debug], help="vary spec keys: one sweep and tune per design, in parallel")
    p.add_argument("spec", help="base spec file (TOML)")
    p.add_argument("--vary", action="append", required=True, metavar="KEY=RANGE",
                   help="KEY=START:STOP, KEY=START:STOP:COUNT or KEY=V1,V2,... (repeat per key)")
    p.add_argument("--samples", type=int, default=None,
                   help="a Latin-hypercube sample of N designs instead of the full grid")
    p.add_argument("--seed", type=int, default=0, help="seed of the sample (default 0)")
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


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="simloop", description=DESCRIPTION, epilog=EPILOG)
    parser.add_argument("--debug", action="store_true", help="show tracebacks")
    sub = parser.add_subparsers(dest="command", required=True)
    # --debug is accepted after the command too; SUPPRESS keeps a global --debug from being reset
    debug = argparse.ArgumentParser(add_help=False)
    debug.add_argument("--debug", action="store_true", default=argparse.SUPPRESS, help="show tracebacks")
    _add_single_commands(sub, debug)
    p = sub.add_parser("study", parents=[debug],
                       help="sweep, tune, validate, couple and pattern in one pass; all outputs plus report.html")
    _add_common_options(p)
    _add_study_options(p)
    p.set_defaults(func=cmd_study)
    p = sub.add_parser("demo", parents=[debug], help="the study of the bundled demo loop into results/demo/")
    _add_common_options(p, spec=False)
    _add_study_options(p)
    p.set_defaults(func=cmd_demo)
    _add_explore_command(sub, debug)
    return parser


class _Terminated(BaseException):
    """SIGTERM, raised in the main thread so that every worker is stopped on the way out."""


def _on_sigterm(signum, frame):
    raise _Terminated


_FALLBACK = {"µ": "u", "Ω": "Ohm", "λ": "lambda", "×": "x", "–": "-", "—": "-", "±": "+/-", "≥": ">=",
             "≤": "<=", "→": "->", "≈": "~", "κ": "kappa", "π": "pi", "…": "...", "·": "*", "²": "^2",
             "³": "^3", "⁴": "^4", "⁻": "^-", "¹": "1", "ε": "eps", "Δ": "d", "θ": "theta", "φ": "phi"}


def _transliterate(exc):
    """Codec error handler: spell the symbols we print in ASCII when the terminal cannot show them."""
    text = exc.object[exc.start:exc.end]
    return "".join(_FALLBACK.get(c, "?") for c in text), exc.end


codecs.register_error("simloop-ascii", _transliterate)


def _setup_streams() -> None:
    for stream in (sys.stdout, sys.stderr):
        if hasattr(stream, "reconfigure"):
            stream.reconfigure(errors="simloop-ascii")


def _show_warning(message, category, filename, lineno, file=None, line=None):
    print(f"simloop: warning: {message}", file=sys.stderr)


def _report(args, text: str, status: int) -> int:
    print(text, file=sys.stderr)
    if getattr(args, "debug", False):
        traceback.print_exc()
    return status


def _check_options(args) -> None:
    if hasattr(args, "z0"):
        from simloop.units import parse_option

        args.z0 = parse_option(args.z0, "resistance", "--z0")
    z0 = getattr(args, "z0", 50.0)
    if not (math.isfinite(z0) and z0 > 0):
        raise SpecError("--z0", f"{z0} must be a finite number > 0 (reference impedance in ohms)")
    if getattr(args, "workers", None) is not None and args.workers < 1:
        raise SpecError("--workers", f"{args.workers} must be ≥ 1")


def _interrupted(args) -> str:
    cache = getattr(args, "cache_in_use", None)
    kept = (f"every finished solve is kept in the cache ({cache.root})" if cache is not None and cache.writable
            else "no usable cache: the solves of this run are lost")
    return f"simloop: interrupted; {kept}"


def main(argv=None) -> int:
    _setup_streams()
    in_main = threading.current_thread() is threading.main_thread()
    old_term = signal.signal(signal.SIGTERM, _on_sigterm) if in_main else None
    args = argparse.Namespace(debug=False)
    with warnings.catch_warnings():  # restores the filters and showwarning on the way out
        warnings.simplefilter("always", CacheWarning)  # a cache problem is said, and the run goes on
        warnings.showwarning = _show_warning
        try:
            return _run(argv, args)
        finally:
            if old_term is not None:
                signal.signal(signal.SIGTERM, old_term)


def _run(argv, args) -> int:
    """Parse and run one command; every outcome becomes an exit status (see the module docstring)."""
    try:
        args = build_parser().parse_args(argv)
        _check_options(args)
        status = args.func(args)
        sys.stdout.flush()  # a closed pipe shows here, inside the handlers, not at interpreter exit
        return status
    except SpecError as exc:
        return _report(args, f"simloop: bad input\n{exc}", 2)
    except SimloopError as exc:
        return _report(args, f"simloop: {exc}", 1)
    except KeyboardInterrupt:
        return _report(args, _interrupted(args), 130)
    except _Terminated:
        return _report(args, _interrupted(args).replace("interrupted", "terminated (SIGTERM)"), 143)
    except BrokenPipeError:
        # the reader went away (``simloop check spec | head -1``): nothing left to say to it
        with contextlib.suppress(OSError, ValueError):
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 141
    except Exception as exc:  # noqa: BLE001 - the CLI promises no traceback without --debug
        return _report(args, f"simloop: unexpected error: {type(exc).__name__}: {exc} "
                             f"(run with --debug for details)", 1)


if __name__ == "__main__":
    sys.exit(main())
