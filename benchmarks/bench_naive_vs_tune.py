"""The naive workflow against ``simloop tune`` for the same channel chart, side by side in one
run; then the dense sweep against direct solves at held-back frequencies.

The naive workflow, implemented honestly: for every channel and every tap, a fresh PyNEC run of
the loop's wire path (the same mesh ``simloop`` uses), the tuning capacitor as a series segment
load on the tap's port segment with a voltage source in the same segment, the other taps' port
segments opened by a 1e-16 F series load (|X| > 1 GΩ at MW), the wire's conductivity as a load,
and a search over capacitor values (Brent's method on log C between the tuner's minimum and
maximum) for the value at which the input reactance vanishes: the channel's resonance. Each
capacitor value changes the matrix, so each is a fill and a factorisation. A channel the tap
cannot reach is found after the two end evaluations show no sign change.

``simloop tune`` for the same chart: one sweep (the circuit solver over the whole band, direct
NEC solves at the sweep points above NEC's low-frequency floor; no cache) and the tuning of every
tap at every channel of the band plan from the lumped model fitted to the circuit.

Both run on one core (the tool with ``workers=1``) so the ratio is one of work, not of
parallelism. The naive run is limited to a subset of channels spread over the band (bottom,
middle, top by default) for every tap, and extrapolated to the whole chart from the measured time
per PyNEC run and runs per search (reachable channel × tap pairs: the measured mean; unreachable:
the two range ends), with the number of reachable pairs from the chart; the script says so in
its output. Goal: the tool ≥ 100× faster.

The naive capacitances are printed beside the tool's. The naive runs are plain NEC: at a mid
tap NEC's wire junctions bias the inductance by a few per cent (the sweep's measured NEC–circuit
difference per tap is printed for comparison), and at the channel frequency PyNEC runs below the
low-frequency breakdown floor of a converged mesh (segments < 7e-5 λ).

The second part re-uses the tool's sweep (goal: within 0.5 % of direct solves at held-back
frequencies): the circuit solver's reduced-order model (what the sweep reports at its points)
against exact circuit solves at the midpoints between sweep points, the lumped model the tuning
reads against the same exact solves, and the reduced model against direct NEC solves at
held-back frequencies above NEC's floor.

Run once: ``python benchmarks/bench_naive_vs_tune.py [--channels 3] [--quality standard]``.
"""

from __future__ import annotations

import argparse
import os
import time
from importlib import resources

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402
import PyNEC  # noqa: E402  (a benchmark may import PyNEC; the package imports it only in solve.py)
from _machine import load, machine  # noqa: E402
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
    print(f"simloop tune (sweep + chart, 1 worker, no cache): {t_tool:.1f} s (circuit stage "
          f"{sweep.circuit_seconds:.1f} s, {len(sweep.solves)} NEC solves); {load()}")

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
    diff = ", ".join(f"tap {n}: {d:.2%}" for n, d in zip(spec.taps.turns, sweep.mom_difference))
    print(f"note: the naive runs are plain NEC; the sweep's measured NEC–circuit difference per tap "
          f"({diff}, de-amplified from the self-resonance) is the bias expected in the naive C "
          f"(C ∝ 1/L). They also lie below this mesh's trusted floor ({floor / 1e6:.2f} MHz), where "
          f"the reactance starts to break down. {load()}")
    print()
    dense_against_direct(spec, mesh, sweep)


def _diag_error(z, exact) -> np.ndarray:
    """|ΔZ_ii| / |Z_ii| per frequency and tap."""
    idx = np.arange(z.shape[1])
    return np.abs(z[:, idx, idx] - exact[:, idx, idx]) / np.abs(exact[:, idx, idx])


def _print_rows(title, freqs, rel, turns):
    print(title)
    print("   kHz  " + "  ".join(f"tap {n:>2} |ΔZ|/|Z|" for n in turns))
    for f, r in zip(freqs, rel):
        print(f"{f / 1e3:6.0f}  " + "  ".join(f"{x:15.4%}" for x in r))


def dense_against_direct(spec, mesh, sweep, target=0.005):
    """The dense sweep against direct solves at frequencies it was not built from.

    1. The circuit's reduced-order model (rebuilt as the sweep builds it) against exact circuit
       solves at the geometric midpoints of consecutive sweep points (none of them a sample or
       held-back frequency of the model). 2. The lumped model the tuning reads (``model_z``)
       against the same exact solves. 3. The reduced model against direct NEC solves at held-back
       frequencies above NEC's trusted floor (midpoints of the sweep points there; if fewer than
       two, 1.02 and 1.25 × the floor, compared with exact circuit solves).
    """
    from simloop.impedance import environment_from_spec
    from simloop.solve import solve_ports

    f_sweep = np.sort(np.asarray(sweep.frequencies_hz, dtype=float))
    cm = sweep.circuit
    t0 = time.perf_counter()
    rom = cm.reduced_model(float(f_sweep.min()), float(f_sweep.max()))
    t_rom = time.perf_counter() - t0
    used = np.concatenate([rom.sample_hz, rom.held_back_hz])
    mids = np.sqrt(f_sweep[:-1] * f_sweep[1:])
    held = np.array([f for f in mids if not np.any(np.abs(used - f) <= 1e-6 * f)])
    t0 = time.perf_counter()
    exact = np.array([cm.solve(f).z_ohm for f in held])
    t_exact = (time.perf_counter() - t0) / held.size
    rel_rom = _diag_error(rom.z(held), exact)
    rel_lumped = _diag_error(sweep.model_z(held, proximity=True), exact)
    turns = sweep.tap_turns
    print(f"dense sweep: reduced model ({rom.sample_hz.size} samples, basis {rom.basis_dim}, its own "
          f"held-back error {rom.error:.1e}) against {held.size} exact circuit solves at the midpoints "
          f"between sweep points: worst {rel_rom.max():.2e} per tap {', '.join(f'{x:.1e}' for x in rel_rom.max(axis=0))}")
    print(f"held-back error, reduced model vs exact circuit: measured {rel_rom.max():.1e} / target ≤ {target:.0e} "
          f"({'met' if rel_rom.max() <= target else 'NOT met'})")
    print(f"the lumped model the tuning reads vs the same exact solves: worst {rel_lumped.max():.3%} "
          f"(per tap {', '.join(f'{x:.3%}' for x in rel_lumped.max(axis=0))}; fitted "
          f"{sweep.model.fit_hz.min() / 1e3:.0f}–{sweep.model.fit_hz.max() / 1e3:.0f} kHz)")
    floor = mesh.floor_frequency_hz()
    above = np.array([f for f in mids if f >= floor])
    beyond = above.size < 2
    if beyond:
        above = np.array([1.02 * floor, 1.25 * floor])
    t0 = time.perf_counter()
    sols = solve_ports(mesh, environment_from_spec(spec), above, workers=1)
    t_direct = (time.perf_counter() - t0) / above.size
    bad = [s for s in sols if isinstance(s, Exception)]
    if bad:
        print(f"NEC solves failed: {bad}")
        return
    z_nec = np.array([s.z for s in sols])
    z_circ = np.array([cm.solve(f).z_ohm for f in above]) if beyond else rom.z(above)
    rel_nec = _diag_error(z_circ, z_nec)
    srf = sweep.self_resonance_hz
    _print_rows(f"{'exact circuit' if beyond else 'reduced model'} against direct NEC above its floor "
                f"({floor / 1e6:.3f} MHz; {mesh.n_segments} NEC segments, circuit {sweep.circuit_segments}); "
                f"self-resonances {', '.join(f'{x / 1e6:.2f}' for x in srf)} MHz", above, rel_nec, turns)
    end = [i for i, n in enumerate(turns) if n == max(turns)]
    worst_end = float(rel_nec[:, end].max())
    amp = 1.0 / np.abs(1.0 - (above[:, None] / srf[None, :]) ** 2)
    print(f"  the same divided by the resonance amplification 1/|1 − (f/f_srf)²| (up to {amp.max():.2f} here): "
          f"worst per tap {', '.join(f'{x:.2%}' for x in (rel_nec / amp).max(axis=0))}")
    print(f"held-back error against NEC, end tap (no wire junction in its path): measured {worst_end:.3%} / "
          f"target ≤ {target:.1%} ({'met' if worst_end <= target else 'NOT met'}); mid taps up to "
          f"{rel_nec.max():.2%} (NEC's junction bias; the sweep's measured difference "
          f"{', '.join(f'{d:.2%}' for d in sweep.mom_difference)})")
    n_dense = 2000
    t1 = time.perf_counter()
    rom.z(np.linspace(f_sweep.min(), f_sweep.max(), n_dense))
    t_dense = time.perf_counter() - t1
    print(f"a {n_dense}-point dense sweep from the reduced model: {t_dense:.2f} s (built in {t_rom:.2f} s); "
          f"by exact circuit solves {n_dense * t_exact:.0f} s ({t_exact * 1e3:.0f} ms each), by direct NEC "
          f"{n_dense * t_direct:.0f} s ({t_direct:.1f} s a frequency here); {load()}")


if __name__ == "__main__":
    main()
