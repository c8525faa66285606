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
    if n_total > 20000:
        raise SolverError(f"{n_total} segments exceed the 20000 this tool will hand to nec2++")
    for t in mesh["port_tags"]:
        if not (1 <= t <= len(segs)) or segs[t - 1] != 1:
            raise SolverError(f"port tag {t} is not a one-segment wire of the mesh")


def _count(getter) -> int:
    i = 0
    while getter(i) is not None:
        i += 1
    return i


def _solve_ports(mesh: dict, env: dict, frequency_hz: float) -> dict:
    """Run in a worker: one fill + LU, one back-substitution per port. Returns plain data."""
    import PyNEC  # the only import of PyNEC in the project

    t0 = time.perf_counter()
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
    ctx.fr_card(0, 1, frequency_hz / 1e6, 0)  # MHz; one frequency per fr_card
    ports = mesh["port_tags"]
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
        current = np.asarray(sc.get_current())
        y[:, j] = current[index]
    seconds = time.perf_counter() - t0
    return {"y_re": y.real.tolist(), "y_im": y.imag.tolist(), "seconds": seconds}


def _worker(conn, mesh, env, frequency_hz):
    import faulthandler

    faulthandler.disable()  # a crash of nec2++ is reported by the parent, not dumped by the child
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    try:
        out = _solve_ports(mesh, env, frequency_hz)
        conn.send(("ok", out))
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
    payload = mesh.as_payload()
    env_payload = env.as_payload()
    digest = mesh.digest()
    freqs = [float(f) for f in frequencies_hz]
    for f in freqs:
        validate_payload(payload, f)
    workers = max(1, workers or os.cpu_count() or 1)
    timeout_s = timeout_s or (20 * estimated_seconds(mesh.n_segments) + 60)
    results: list = [None] * len(freqs)
    todo = []
    for i, f in enumerate(freqs):
        hit = cache.get(cache.key(digest, env_payload, f)) if cache else None
        if hit is not None:
            y = np.array(hit["y_re"]) + 1j * np.array(hit["y_im"])
            results[i] = PortSolution(f, y, hit["seconds"], cached=True)
        else:
            todo.append(i)
    done = len(freqs) - len(todo)
    if progress:
        progress(done, len(freqs))
    ctx = mp.get_context("fork")
    running: dict = {}  # reader -> (index, process, started)
    while todo or running:
        while todo and len(running) < workers:
            i = todo.pop(0)
            reader, writer = ctx.Pipe(duplex=False)
            proc = ctx.Process(target=_worker, args=(writer, payload, env_payload, freqs[i]), daemon=True)
            proc.start()
            writer.close()
            running[reader] = (i, proc, time.monotonic())
        ready = wait(list(running), timeout=1.0)
        now = time.monotonic()
        for reader in list(running):
            i, proc, started = running[reader]
            if reader in ready:
                try:
                    status, out = reader.recv()
                except EOFError:
                    proc.join()
                    status, out = "error", f"the solver process died (exit code {proc.exitcode})"
                proc.join()
            elif now - started > timeout_s:
                proc.kill()
                proc.join()
                status, out = "error", f"no answer within {timeout_s:.0f} s (killed)"
            else:
                continue
            reader.close()
            del running[reader]
            f = freqs[i]
            if status == "ok":
                y = np.array(out["y_re"]) + 1j * np.array(out["y_im"])
                if not np.all(np.isfinite(y)):
                    results[i] = SolverError(f"{f / 1e6:.6g} MHz: the solver returned NaN")
                else:
                    results[i] = PortSolution(f, y, out["seconds"])
                    if cache:
                        cache.put(cache.key(digest, env_payload, f), out)
            else:
                results[i] = SolverError(f"{f / 1e6:.6g} MHz: {out}")
            done += 1
            if progress:
                progress(done, len(freqs))
    return results
