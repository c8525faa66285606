"""The naive workflow against ``simloop tune`` for the same channel chart, side by side in one
run; then the dense sweep (the fitted model) against direct solves at held-back frequencies.

The naive workflow, implemented honestly: for every channel and every tap, a fresh PyNEC run of
the loop's wire path (the same mesh ``simloop`` uses), the tuning capacitor as a series segment
load on the tap's port segment with a voltage source in the same segment, the other taps' port
segments opened by a 1e-16 F series load (|X| > 1 GΩ at MW), the wire's conductivity as a load,
and a search over capacitor values (Brent's method on log C between the tuner's minimum and
maximum) for the value at which the input reactance vanishes: the channel's resonance. Each
capacitor value changes the matrix, so each is a fill and a factorisation. A channel the tap
cannot reach is found after the two end evaluations show no sign change.

``simloop tune`` for the same chart: one sweep (probe, window, direct and junction solves; no
cache) and the tuning of every tap at every channel of the band plan from the fitted model.

Both run on one core (the tool with ``workers=1``) so the ratio is one of work, not of
parallelism. The naive run is limited to a subset of channels spread over the band (bottom,
middle, top by default) for every tap, and extrapolated to the whole chart from the measured time
per PyNEC run and runs per search (reachable channel × tap pairs: the measured mean; unreachable:
the two range ends), with the number of reachable pairs from the chart; the script says so in
its output. Goal: the tool ≥ 100× faster.

The naive capacitances are printed beside the tool's. The naive runs have no junction
correction, so mid taps read their inductance a few per cent high (the tool's κ − 1 is printed
for comparison), and PyNEC at the channel frequency runs below the low-frequency breakdown floor
of a converged mesh (segments < 7e-5 λ), where the reactance starts to break down.

The second part re-uses the tool's sweep: the model against direct MoM solves at frequencies
it was not fitted to (goal: within 0.5 %).

Run once: ``python benchmarks/bench_naive_vs_tune.py [--channels 3] [--quality standard]``.
"""

from __future__ import annotations

import argparse
import os
import platform
import time
from importlib import resources

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402
import PyNEC  # noqa: E402  (a benchmark may import PyNEC; the package imports it only in solve.py)
from scipy.optimize import brentq  # noqa: E402

from simloop.impedance import prepare, run_sweep  # noqa: E402
from simloop.spec import loads  # noqa: E402
from simloop.tuner import tuner_from_spec  # noqa: E402
from simloop.tuning import band_plan, run_tune  # noqa: E402

OPEN_F = 1e-16  # series capacitance that opens a port segment: 1/(2π·1 MHz·1e-16 F) ≈ 1.6 GΩ


def naive_input_impedance(mesh, conductivity, tap_index: int, frequency_hz: float, c_f: float) -> complex:
    """A fresh PyNEC run: the loop with a series C at tap ``tap_index``'s port, fed there."""
    ctx = PyNEC.nec_context()
    geo = ctx.get_geometry()
    for tag, (p, q, n) in enumerate(zip(mesh.starts, mesh.ends, mesh.segments), start=1):
        geo.wire(tag, int(n), *map(float, p), *map(float, q), float(mesh.radius_m), 1.0, 1.0)
    ctx.geometry_complete(0)
    ctx.gn_card(-1, 0, 0, 0, 0, 0, 0, 0)
    # Every load in one uninterrupted run of ld_cards (another card in between drops the earlier).
    if conductivity is not None:
        ctx.ld_card(5, 0, 0, 0, float(conductivity), 0, 0)
    for j, tag in enumerate(mesh.port_tags):
        ctx.ld_card(0, int(tag), 1, 1, 0.0, 0.0, float(c_f if j == tap_index else OPEN_F))
    ctx.fr_card(0, 1, frequency_hz / 1e6, 0)
    ctx.ex_card(0, int(mesh.port_tags[tap_index]), 1, 0, 1.0, 0, 0, 0, 0, 0)
    ctx.xq_card(0)
    return complex(ctx.get_input_parameters(0).get_impedance()[0])


def naive_channel(mesh, conductivity, tap_index, frequency_hz, c_min, c_max):
    """The capacitance that tunes one channel on one tap (NaN if out of range), and the runs made."""
    runs = [0]

    def reactance(log_c):
        runs[0] += 1
        return naive_input_impedance(mesh, conductivity, tap_index, frequency_hz, float(np.exp(log_c))).imag

    lo, hi = np.log(c_min), np.log(c_max)
    x_lo, x_hi = reactance(lo), reactance(hi)
    if np.sign(x_lo) == np.sign(x_hi):
        return np.nan, runs[0]
    log_c = brentq(reactance, lo, hi, xtol=1e-4, rtol=1e-6)  # C to 0.01 %
    return float(np.exp(log_c)), runs[0]


def machine() -> str:
    return f"{platform.platform()}, {platform.processor() or platform.machine()}, {os.cpu_count()} CPUs"


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--channels", type=int, default=3, help="naive channels, spread over the band (bottom to top)")
    ap.add_argument("--quality", default="standard", help="mesh quality of the demo loop")
    ap.add_argument("--band", default="itu-1")
    args = ap.parse_args(argv)
    text = resources.files("simloop").joinpath("data", "demo-loop.toml").read_text()
    text = text.replace('quality = "standard"', f'quality = "{args.quality}"')
    spec = loads(text)
    _geom, mesh, _rules = prepare(spec)
    tuner = tuner_from_spec(spec.tuner)
    plan = band_plan(args.band)
    print(f"machine: {machine()}")
    print(f"loop: demo loop, {spec.winding.turns} turns, taps {list(spec.taps.turns)}, {args.quality} mesh, "
          f"{mesh.n_segments} segments; band {args.band}: {plan.frequencies_hz.size} channels × "
          f"{len(spec.taps.turns)} taps")

    t0 = time.perf_counter()
    sweep = run_sweep(spec, workers=1, cache=None)
    tune = run_tune(spec, sweep, band=args.band)
    t_tool = time.perf_counter() - t0
    print(f"simloop tune (sweep + chart, 1 worker, no cache): {t_tool:.1f} s")

    f_all = plan.frequencies_hz
    pick = np.unique(np.linspace(0, f_all.size - 1, args.channels).round().astype(int))
    t_naive, n_runs, rows = 0.0, 0, []
    for j in pick:
        for i in range(len(spec.taps.turns)):
            t1 = time.perf_counter()
            c, runs = naive_channel(mesh, spec.wire.conductivity_s_m, i, float(f_all[j]), tuner.min_f, tuner.max_f)
            dt = time.perf_counter() - t1
            t_naive += dt
            n_runs += runs
            c_tool = tune.capacitance_all_f[j, i] if tune.reachable[j, i] else np.nan
            rows.append((f_all[j], spec.taps.turns[i], c, c_tool, runs, dt))
    print("channel kHz  tap  naive C pF  tool C pF  naive/tool-1  PyNEC runs  naive s")
    for f, n, c, ct, runs, dt in rows:
        rel = c / ct - 1 if np.isfinite(c) and np.isfinite(ct) else np.nan
        print(f"{f / 1e3:11.0f}  {n:3d}  {c * 1e12:10.1f}  {ct * 1e12:9.1f}  {rel:+12.2%}  {runs:10d}  {dt:7.1f}")
    # Extrapolation: seconds per fresh PyNEC run (measured), runs per search for a reachable
    # channel × tap (measured mean) and 2 runs for an unreachable one (the two range ends, no sign
    # change), weighted by how many of the chart's channel × tap pairs the tuner reaches (from the
    # tool's chart; the table above shows whether the naive searches reach the same pairs).
    pairs = len(rows)
    total_pairs = f_all.size * len(spec.taps.turns)
    per_run = t_naive / n_runs
    reach_runs = [r[4] for r in rows if np.isfinite(r[2])]
    runs_reach = float(np.mean(reach_runs)) if reach_runs else 2.0
    n_reach = int(np.sum(tune.reachable))
    runs_full = n_reach * runs_reach + (total_pairs - n_reach) * 2
    t_naive_full = per_run * runs_full
    print(f"naive: {pairs} channel × tap searches measured ({n_runs} fresh PyNEC runs, {t_naive:.1f} s, "
          f"{per_run:.2f} s a run, {runs_reach:.1f} runs a reachable search); the whole chart "
          f"({total_pairs} pairs, {n_reach} reachable) extrapolated: {runs_full:.0f} runs, {t_naive_full:.0f} s")
    ratio = t_naive_full / t_tool
    print(f"speed-up of simloop tune over the naive workflow: measured {ratio:.0f}× / target ≥ 100× "
          f"({'met' if ratio >= 100 else 'NOT met'})")
    floor = mesh.floor_frequency_hz()
    kappa = ", ".join(f"tap {n}: {k - 1:+.2%}" for n, k in zip(spec.taps.turns, sweep.junction_correction))
    print(f"note: the naive runs have no junction correction; the tool's κ − 1 ({kappa}) is the "
          f"difference expected on the mid taps (C ∝ 1/L). They also lie below this mesh's trusted "
          f"floor ({floor / 1e6:.2f} MHz), where the reactance starts to break down.")
    print()
    dense_against_direct(spec, mesh, sweep)


def dense_against_direct(spec, mesh, sweep, target=0.005):
    """The fitted model (the dense sweep) against direct MoM at frequencies it was not fitted to.

    Held back: the geometric midpoints of consecutive fit frequencies and the sweep's own direct
    points that were not fitted (all inside the trusted range: above the breakdown floor, below
    0.6 × self-resonance), and one point 5 % above the fit window, reported apart (extrapolation
    towards the self-resonance). Direct solves get the sweep's junction correction, as the model.
    """
    from simloop.impedance import environment_from_spec
    from simloop.solve import solve_ports

    fit = np.sort(sweep.model.fit_hz)
    fit_set = set(np.round(fit, 3))
    mids = np.sqrt(fit[:-1] * fit[1:])
    own = [float(r.frequency_hz) for r in sweep.solves if r.role == "direct" and round(r.frequency_hz, 3) not in fit_set]
    held = np.array(sorted([*mids, *own]))
    above = np.array([1.05 * fit[-1]])
    freqs = np.concatenate([held, above])
    t0 = time.perf_counter()
    sols = solve_ports(mesh, environment_from_spec(spec), freqs, workers=1)
    t_direct = (time.perf_counter() - t0) / freqs.size
    scale = np.sqrt(sweep.junction_correction)
    k = len(sweep.tap_turns)
    idx = np.arange(k)
    z_mom = np.array([s.scaled(scale).z[idx, idx] for s in sols])
    z_mod = sweep.model_z(freqs, proximity=False)[:, idx, idx]
    rel = np.abs(z_mod - z_mom) / np.abs(z_mom)
    print(f"dense sweep (fitted model) against direct MoM at held-back frequencies; fit at "
          f"{', '.join(f'{f / 1e3:.0f}' for f in fit)} kHz")
    print("   kHz  " + "  ".join(f"tap {n:>2} |ΔZ|/|Z|" for n in sweep.tap_turns))
    for f, r in zip(freqs, rel):
        tag = "  (above the fit window)" if f in above else ""
        print(f"{f / 1e3:6.0f}  " + "  ".join(f"{x:15.3%}" for x in r) + tag)
    worst = float(rel[: held.size].max())
    print(f"held-back error: measured {worst:.3%} / target ≤ {target:.1%} ({'met' if worst <= target else 'NOT met'}); "
          f"above the window: {float(rel[held.size:].max()):.3%}")
    n_dense = 2000
    t1 = time.perf_counter()
    sweep.model_z(np.linspace(sweep.frequencies_hz.min(), sweep.frequencies_hz.max(), n_dense))
    t_dense = time.perf_counter() - t1
    print(f"a {n_dense}-point dense sweep from the model: {t_dense * 1e3:.1f} ms; by direct MoM it would take "
          f"{n_dense * t_direct:.0f} s ({t_direct:.1f} s a frequency here)")


if __name__ == "__main__":
    main()
