"""Method-of-moments solves with PyNEC, one worker process per frequency.

This is the only module that imports PyNEC. Each frequency is one matrix fill and one LU
factorisation; every excitation at that frequency (here: a unit voltage source at each tap port in
turn, the other ports shorted) is a back-substitution on the same factorisation, so a k-tap loop
costs one solve plus k cheap right-hand sides. Further excitations (plane waves, near-field points)
belong in the same worker call for the same reason.

nec2++ turns bad input into silent NaN, garbage, hangs or segfaults, and reports every exception as
"Unknown exception". So the mesh is validated before PyNEC sees it (:func:`validate_payload`), and
each solve runs in a forked worker process with a timeout: a crash or hang becomes a
:class:`~simloop.errors.SolverError` for that frequency, not a dead run.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import multiprocessing as mp
import os
import tempfile
import time
from dataclasses import dataclass
from multiprocessing.connection import wait
from pathlib import Path

import numpy as np

from simloop.constants import MAX_SEGMENTS
from simloop.errors import SolverError

SOLVER_VERSION = "pynec-2.3.4/simloop-solve-1"


@dataclass(frozen=True)
class Environment:
    """Everything besides the mesh and the frequency that a solve depends on.

    Attributes
    ----------
    ground : {"free-space", "perfect", "real"}
    height_m : float
        Height of the frame centre above ground (ignored in free space). [m]
    permittivity, conductivity_s_m : float
        Ground constants for ``"real"`` (Sommerfeld integrals, ``gn_card`` type 2).
    wire_conductivity_s_m : float or None
        Conductivity of the wire (NEC type-5 load: skin effect only), None for lossless.
    """

    ground: str = "free-space"
    height_m: float = 0.0
    permittivity: float = 1.0
    conductivity_s_m: float = 0.0
    wire_conductivity_s_m: float | None = 5.8e7

    @property
    def resistivity_ohm_m(self) -> float | None:
        """Wire resistivity, None for a lossless wire. [Ω·m]"""
        c = self.wire_conductivity_s_m
        return None if c is None else 1.0 / c

    def as_payload(self) -> dict:
        return {
            "ground": self.ground,
            "height_m": float(self.height_m),
            "permittivity": float(self.permittivity),
            "conductivity_s_m": float(self.conductivity_s_m),
            "wire_conductivity_s_m": None if self.wire_conductivity_s_m is None else float(self.wire_conductivity_s_m),
        }


@dataclass(frozen=True)
class PortSolution:
    """Short-circuit admittance matrix of all ports at one frequency.

    Attributes
    ----------
    frequency_hz : float
    y_raw : ndarray, shape (k, k), complex
        Column j holds the port currents for 1 V at port j, the others shorted. [S]
    seconds : float
        Wall time of the solve in the worker (geometry, fill, LU and all right-hand sides). [s]
    cached : bool
        True when the result came from the cache.
    """

    frequency_hz: float
    y_raw: np.ndarray
    seconds: float
    cached: bool = False

    @property
    def z(self) -> np.ndarray:
        """Open-circuit impedance matrix (unused ports open), made reciprocal. [Ω]

        Z = Y_raw⁻¹ is exactly what the MoM gives with the other ports open (superposition of
        the k solutions); its diagonal is kept as solved and only the off-diagonal pairs are
        averaged. (Symmetrising Y first moves the diagonal: Y of tightly coupled taps is
        ill-conditioned.)
        """
        z = np.linalg.inv(self.y_raw)
        return 0.5 * (z + z.T)

    @property
    def y(self) -> np.ndarray:
        """Admittance matrix of the reciprocal network :attr:`z`. [S]"""
        return np.linalg.inv(self.z)

    def scaled(self, scale) -> "PortSolution":
        """The solution with port impedances scaled, Z_ij → s_i s_j Z_ij (Y_raw → Y_raw / s_i s_j)."""
        d = np.asarray(scale, dtype=float)
        return dataclasses.replace(self, y_raw=self.y_raw / np.outer(d, d))

    @property
    def asymmetry(self) -> float:
        """max |Zij − Zji| / max(|Zij|, |Zji|) over port pairs of Y_raw⁻¹; 0 for one port.

        A self-check of the MoM (a Galerkin solution would be exactly reciprocal); reported with
        every solve.
        """
        z = np.linalg.inv(self.y_raw)
        k = z.shape[0]
        worst = 0.0
        for i in range(k):
            for j in range(i):
                a, b = z[i, j], z[j, i]
                worst = max(worst, abs(a - b) / max(abs(a), abs(b), 1e-300))
        return worst


def validate_payload(mesh: dict, frequency_hz: float) -> None:
    """Reject inputs that nec2++ turns into NaN, garbage, hangs or crashes (before it sees them)."""
    if not (np.isfinite(frequency_hz) and frequency_hz > 0):
        raise SolverError(f"frequency {frequency_hz!r} Hz must be finite and > 0")
    starts, ends = np.asarray(mesh["starts"]), np.asarray(mesh["ends"])
    radius = mesh["radius_m"]
    if not (np.all(np.isfinite(starts)) and np.all(np.isfinite(ends))):
        raise SolverError("non-finite wire coordinate in the mesh")
    if not (np.isfinite(radius) and radius > 0):
        raise SolverError(f"wire radius {radius!r} m must be > 0")
    lengths = np.linalg.norm(ends - starts, axis=1)
    segs = np.asarray(mesh["segments"])
    if np.any(lengths <= 0):
        raise SolverError("zero-length wire in the mesh")
    if np.any(segs < 1):
        raise SolverError("wire with fewer than one segment in the mesh")
    if np.any(lengths / segs < 2 * radius):
        raise SolverError("segment shorter than two wire radii: the thin-wire model is invalid")
    n_total = int(segs.sum())
    if n_total > MAX_SEGMENTS:
        raise SolverError(f"{n_total} segments exceed the {MAX_SEGMENTS} this tool will hand to nec2++")
    for t in mesh["port_tags"]:
        if not (1 <= t <= len(segs)) or segs[t - 1] != 1:
            raise SolverError(f"port tag {t} is not a one-segment wire of the mesh")


def _count(getter) -> int:
    i = 0
    while getter(i) is not None:
        i += 1
    return i


def _context(mesh: dict, env: dict):
    """A nec_context holding the mesh, the ground and the wire loss, in the order nec2++ needs."""
    import PyNEC  # the only import of PyNEC in the project

    shift = env["height_m"] if env["ground"] != "free-space" else 0.0  # NEC's ground is z = 0
    ctx = PyNEC.nec_context()
    geo = ctx.get_geometry()
    radius = mesh["radius_m"]
    for tag, (p, q, n) in enumerate(zip(mesh["starts"], mesh["ends"], mesh["segments"]), start=1):
        geo.wire(tag, int(n), float(p[0]), float(p[1]), float(p[2]) + shift,
                 float(q[0]), float(q[1]), float(q[2]) + shift, float(radius), 1.0, 1.0)
    ctx.geometry_complete(0)  # exactly once; never add wires afterwards
    # Ground first, then the whole load list without any other card in between.
    if env["ground"] == "free-space":
        ctx.gn_card(-1, 0, 0, 0, 0, 0, 0, 0)
    elif env["ground"] == "perfect":
        ctx.gn_card(1, 0, 0, 0, 0, 0, 0, 0)
    else:
        ctx.gn_card(2, 0, float(env["permittivity"]), float(env["conductivity_s_m"]), 0, 0, 0, 0)
    if env["wire_conductivity_s_m"] is not None:
        ctx.ld_card(5, 0, 0, 0, float(env["wire_conductivity_s_m"]), 0, 0)
    return ctx


def _drive_ports(ctx, ports, frequency_hz: float, after_each=None) -> np.ndarray:
    """1 V at each port in turn, the others shorted: one fill + LU, then a back-substitution each.

    ``after_each(j)`` runs while excitation j is the current solution (for patterns, near fields).
    Returns the raw short-circuit admittance matrix (column j: port currents for 1 V at port j).
    """
    ctx.fr_card(0, 1, frequency_hz / 1e6, 0)  # MHz; one frequency per fr_card
    k = len(ports)
    y = np.zeros((k, k), dtype=complex)
    index = None
    for j, tag in enumerate(ports):
        ctx.ex_card(0, int(tag), 1, 0, 1.0, 0, 0, 0, 0, 0)  # one source per solve; type 0
        ctx.xq_card(0)
        sc = ctx.get_structure_currents(_count(ctx.get_structure_currents) - 1)
        if index is None:
            tags = np.asarray(sc.get_current_segment_tag())
            index = [int(np.flatnonzero(tags == t)[0]) for t in ports]
        y[:, j] = np.asarray(sc.get_current())[index]
        if after_each is not None:
            after_each(j)
    return y


def _solve_ports(mesh: dict, env: dict, frequency_hz: float) -> dict:
    """Run in a worker: the port admittance matrix at one frequency, as plain data."""
    t0 = time.perf_counter()
    y = _drive_ports(_context(mesh, env), mesh["port_tags"], frequency_hz)
    return {"y_re": y.real.tolist(), "y_im": y.imag.tolist(), "seconds": time.perf_counter() - t0}


def _worker(conn, function: str, *args):
    """Body of a forked solver process: run ``function`` of this module, send the result back.

    The function is looked up by name at run time, so a test can replace it before the fork.
    """
    import faulthandler

    faulthandler.disable()  # a crash of nec2++ is reported by the parent, not dumped by the child
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    try:
        conn.send(("ok", globals()[function](*args)))
    except BaseException as exc:  # noqa: BLE001 - reported to the parent as data
        conn.send(("error", f"{type(exc).__name__}: {exc}"))
    finally:
        conn.close()


def estimated_seconds(n_segments: int) -> float:
    """CPU time of one frequency (fill + LU), measured for PyNEC 2.3.4 on one core. [s]"""
    return 1.8e-7 * n_segments**2 + 2.9e-10 * n_segments**3


class SolveCache:
    """Content-addressed store of port solutions: one JSON file per (mesh, frequency, environment).

    Writes go to a temporary file, are fsynced and renamed into place, so a killed run never leaves
    a corrupt entry and a rerun picks up every frequency already solved.
    """

    def __init__(self, root: str | os.PathLike | None):
        self.root = Path(root) if root is not None else None
        if self.root is not None:
            self.root.mkdir(parents=True, exist_ok=True)
            for stale in self.root.glob("*.tmp"):
                stale.unlink(missing_ok=True)

    def key(self, mesh_digest: str, env: dict, frequency_hz: float) -> str:
        blob = json.dumps([SOLVER_VERSION, mesh_digest, env, f"{frequency_hz:.6f}"], sort_keys=True)
        return hashlib.sha256(blob.encode()).hexdigest()

    def get(self, key: str) -> dict | None:
        if self.root is None:
            return None
        path = self.root / f"{key}.json"
        try:
            return json.loads(path.read_text())
        except (FileNotFoundError, json.JSONDecodeError):
            return None

    def put(self, key: str, value: dict) -> None:
        if self.root is None:
            return
        fd, tmp = tempfile.mkstemp(dir=self.root, suffix=".tmp")
        with os.fdopen(fd, "w") as fh:
            json.dump(value, fh)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, self.root / f"{key}.json")


def solve_ports(mesh, env: Environment, frequencies_hz, *, workers: int | None = None,
                timeout_s: float | None = None, cache: SolveCache | None = None,
                progress=None) -> list[PortSolution | SolverError]:
    """Solve the port admittance matrix at each frequency, in parallel worker processes.

    Parameters
    ----------
    mesh : simloop.mesh.Mesh
    env : Environment
    frequencies_hz : array_like
        Frequencies to solve. [Hz]
    workers : int, optional
        Concurrent worker processes (default: number of CPUs).
    timeout_s : float, optional
        Per-frequency limit; default 20 × the measured cost estimate + 60 s.
    cache : SolveCache, optional
    progress : callable, optional
        Called with (done, total) after each frequency.

    Returns
    -------
    list
        A :class:`PortSolution` per frequency, or the :class:`SolverError` that frequency raised.
    """
    return solve_many([SolveRequest(mesh, env, float(f)) for f in frequencies_hz], workers=workers,
                      timeout_s=timeout_s, cache=cache, progress=progress)


# ------------------------------------------------------------------------------------------------
# Far field (average gain test): the same factorisation, one pattern per port excitation.
# ------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class FarFieldSolution:
    """Port admittances and the far field of each port excitation at one frequency, free space.

    Excitation j is 1 V at port j with every other port shorted (as in :func:`solve_ports`), so
    the field of any port drive follows by superposition: ports driven by voltages V give
    E = Σ_j V_j E_j.

    Attributes
    ----------
    frequency_hz : float
    y_raw : ndarray, shape (k, k), complex
        Column j holds the port currents for 1 V at port j, the others shorted. [S]
    theta_deg : ndarray, shape (nθ,)
        Polar angle from +z, 0 to 180°. [deg]
    phi_deg : ndarray, shape (nφ,)
        Azimuth from +x, uniform over [0°, 360°). [deg]
    e_theta_v, e_phi_v : ndarray, shape (k, nφ, nθ), complex
        r·E_θ and r·E_φ of excitation j (NEC range 0, the e^(−jkr) factor removed). [V]
    seconds : float
        Wall time in the worker. [s]
    cached : bool
    """

    frequency_hz: float
    y_raw: np.ndarray
    theta_deg: np.ndarray
    phi_deg: np.ndarray
    e_theta_v: np.ndarray
    e_phi_v: np.ndarray
    seconds: float
    cached: bool = False

    @property
    def z(self) -> np.ndarray:
        """Open-circuit impedance matrix Y_raw⁻¹ (diagonal as solved, off-diagonal averaged). [Ω]"""
        z = np.linalg.inv(self.y_raw)
        return 0.5 * (z + z.T)


def _solve_far_field(mesh: dict, env: dict, frequency_hz: float, step_deg: float) -> dict:
    """Run in a worker: one fill + LU; per port one back-substitution and one full-sphere pattern.

    PyNEC details (docs/notes/pynec.md): one frequency per fr_card (an fr_card with n > 1 makes later
    rp_cards repeat); getters keep a running index, so the newest result is at count − 1;
    get_e_theta/get_e_phi are flat and reshape to (nφ, nθ); range 0 gives r·E in volts.
    """
    t0 = time.perf_counter()
    ctx = _context(mesh, env)
    ports = mesh["port_tags"]
    k = len(ports)
    n_theta = int(round(180.0 / step_deg)) + 1
    n_phi = int(round(360.0 / step_deg))
    e_theta = np.zeros((k, n_phi, n_theta), dtype=complex)
    e_phi = np.zeros((k, n_phi, n_theta), dtype=complex)
    angles = {}

    def pattern(j):
        ctx.rp_card(0, n_theta, n_phi, 1, 0, 0, 0, 0.0, 0.0, float(step_deg), float(step_deg), 0.0, 0.0)
        rp = ctx.get_radiation_pattern(_count(ctx.get_radiation_pattern) - 1)
        shape = (rp.get_nphi(), rp.get_ntheta())
        if shape != (n_phi, n_theta):
            raise RuntimeError(f"pattern grid {shape} differs from the requested {(n_phi, n_theta)}")
        e_theta[j] = np.asarray(rp.get_e_theta()).reshape(shape)
        e_phi[j] = np.asarray(rp.get_e_phi()).reshape(shape)
        angles["theta"] = np.asarray(rp.get_theta_angles(), dtype=float)
        angles["phi"] = np.asarray(rp.get_phi_angles(), dtype=float)

    y = _drive_ports(ctx, ports, frequency_hz, after_each=pattern)
    theta, phi = angles["theta"], angles["phi"]
    seconds = time.perf_counter() - t0
    return {
        "y_re": y.real.tolist(), "y_im": y.imag.tolist(),
        "theta_deg": theta.tolist(), "phi_deg": phi.tolist(),
        "e_theta_re": e_theta.real.tolist(), "e_theta_im": e_theta.imag.tolist(),
        "e_phi_re": e_phi.real.tolist(), "e_phi_im": e_phi.imag.tolist(),
        "seconds": seconds,
    }


def _far_field_from(f: float, data: dict, cached: bool) -> FarFieldSolution:
    return FarFieldSolution(
        frequency_hz=f,
        y_raw=np.array(data["y_re"]) + 1j * np.array(data["y_im"]),
        theta_deg=np.array(data["theta_deg"]),
        phi_deg=np.array(data["phi_deg"]),
        e_theta_v=np.array(data["e_theta_re"]) + 1j * np.array(data["e_theta_im"]),
        e_phi_v=np.array(data["e_phi_re"]) + 1j * np.array(data["e_phi_im"]),
        seconds=data["seconds"],
        cached=cached,
    )


def solve_far_field(mesh, env: Environment, frequencies_hz, *, step_deg: float = 5.0,
                    workers: int | None = None, timeout_s: float | None = None,
                    cache: SolveCache | None = None, progress=None) -> list[FarFieldSolution | SolverError]:
    """Port admittances and the full-sphere far field of every port excitation, per frequency.

    One matrix factorisation per frequency serves all ports and their patterns. Free space only:
    with a ground, NEC leaves the points below the horizon uncomputed (docs/notes/pynec.md).

    Parameters
    ----------
    mesh : simloop.mesh.Mesh
    env : Environment
        Must have ``ground == "free-space"``; the wire loss is applied as given (the average gain
        test wants ``wire_conductivity_s_m=None``).
    frequencies_hz : array_like
        Frequencies. [Hz]
    step_deg : float
        Grid step in θ (0–180°) and φ (0–360°, 360° excluded); 90 / step must be an integer, so
        that θ has an even number of intervals. [deg]
    workers, timeout_s, cache, progress
        As for :func:`solve_ports`.

    Returns
    -------
    list
        A :class:`FarFieldSolution` per frequency, or the :class:`SolverError` it raised.
    """
    return solve_many([SolveRequest(mesh, env, float(f), "far_field", float(step_deg)) for f in frequencies_hz],
                      workers=workers, timeout_s=timeout_s, cache=cache, progress=progress)


@dataclass(frozen=True)
class SolveRequest:
    """One solve for :func:`solve_many`: port matrix (``kind="ports"``) or far field."""

    mesh: object  # simloop.mesh.Mesh
    env: Environment
    frequency_hz: float
    kind: str = "ports"  # "ports" | "far_field"
    step_deg: float = 5.0


def solve_many(requests, *, workers: int | None = None, timeout_s: float | None = None,
               cache: SolveCache | None = None, progress=None) -> list:
    """Independent solves of different meshes, environments and kinds in one worker pool.

    Each request becomes a :class:`PortSolution` (kind ``"ports"``, the same cache entries as
    :func:`solve_ports`) or a :class:`FarFieldSolution` (kind ``"far_field"``, as
    :func:`solve_far_field`), or the :class:`SolverError` it raised. Misses run longest first
    (by the measured cost law), so that one big mesh does not finish alone at the end.
    ``timeout_s`` per solve defaults to 20 × the largest cost estimate + 60 s.
    """
    requests = list(requests)
    results: list = [None] * len(requests)
    jobs, where, keys, costs = [], [], [], []
    for i, r in enumerate(requests):
        payload = r.mesh.as_payload()
        env_payload = r.env.as_payload()
        f = float(r.frequency_hz)
        validate_payload(payload, f)
        if r.kind == "ports":
            key_env, args = env_payload, ("_solve_ports", payload, env_payload, f)
            cost = estimated_seconds(r.mesh.n_segments)
        elif r.kind == "far_field":
            if r.env.ground != "free-space":
                raise ValueError(f"a full-sphere far field needs free space, not ground {r.env.ground!r}")
            ratio = 90.0 / float(r.step_deg)
            if not abs(ratio - round(ratio)) < 1e-9:
                raise ValueError(f"step_deg = {r.step_deg!r}: 90 / step must be a whole number")
            key_env = {**env_payload, "far_field_step_deg": float(r.step_deg)}
            args = ("_solve_far_field", payload, env_payload, f, float(r.step_deg))
            n_dirs = (int(round(180 / r.step_deg)) + 1) * int(round(360 / r.step_deg))
            cost = estimated_seconds(r.mesh.n_segments) + len(r.mesh.port_tags) * 5e-8 * r.mesh.n_segments * n_dirs
        else:
            raise ValueError(f"unknown solve kind {r.kind!r}")
        key = cache.key(r.mesh.digest(), key_env, f) if cache else None
        hit = cache.get(key) if cache else None
        if hit is not None:
            results[i] = (PortSolution(f, np.array(hit["y_re"]) + 1j * np.array(hit["y_im"]), hit["seconds"],
                                       cached=True) if r.kind == "ports" else _far_field_from(f, hit, cached=True))
            continue
        jobs.append(args)
        where.append(i)
        keys.append(key)
        costs.append(cost)
    total = len(requests)
    done = total - len(jobs)
    if progress:
        progress(done, total)
    order = sorted(range(len(jobs)), key=lambda j: -costs[j])
    workers = max(1, workers or os.cpu_count() or 1)
    timeout_s = timeout_s or (20 * max(costs, default=0.0) + 60)
    outs = _run_many(jobs, order, workers, timeout_s, progress, done, total)
    for j, (status, out) in enumerate(outs):
        i = where[j]
        r = requests[i]
        f = float(r.frequency_hz)
        label = "" if r.kind == "ports" else " (far field)"
        if status != "ok":
            results[i] = SolverError(f"{f / 1e6:.6g} MHz{label}: {out}")
            continue
        if r.kind == "ports":
            sol = PortSolution(f, np.array(out["y_re"]) + 1j * np.array(out["y_im"]), out["seconds"])
            finite = np.all(np.isfinite(sol.y_raw))
        else:
            sol = _far_field_from(f, out, cached=False)
            finite = (np.all(np.isfinite(sol.y_raw)) and np.all(np.isfinite(sol.e_theta_v))
                      and np.all(np.isfinite(sol.e_phi_v)))
        if not finite:
            results[i] = SolverError(f"{f / 1e6:.6g} MHz{label}: the solver returned NaN")
            continue
        results[i] = sol
        if cache:
            cache.put(keys[j], out)
    return results


def _run_many(jobs, order, workers, timeout_s, progress, done, total):
    """Run jobs (function name, *args) in :func:`_worker` processes in the given order, at most
    ``workers`` at a time; a crash or a timeout becomes ("error", message) for that job."""
    ctx = mp.get_context("fork")
    out: list = [None] * len(jobs)
    todo = list(order)
    running: dict = {}
    while todo or running:
        while todo and len(running) < workers:
            j = todo.pop(0)
            reader, writer = ctx.Pipe(duplex=False)
            proc = ctx.Process(target=_worker, args=(writer, *jobs[j]), daemon=True)
            proc.start()
            writer.close()
            running[reader] = (j, proc, time.monotonic())
        ready = wait(list(running), timeout=1.0)
        now = time.monotonic()
        for reader in list(running):
            j, proc, started = running[reader]
            if reader in ready:
                try:
                    status, payload = reader.recv()
                except EOFError:
                    proc.join()
                    status, payload = "error", f"the solver process died (exit code {proc.exitcode})"
                proc.join()
            elif now - started > timeout_s:
                proc.kill()
                proc.join()
                status, payload = "error", f"no answer within {timeout_s:.0f} s (killed)"
            else:
                continue
            reader.close()
            del running[reader]
            out[j] = (status, payload)
            done += 1
            if progress:
                progress(done, total)
    return out
