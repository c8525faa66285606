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
import math
import multiprocessing as mp
import os
import shutil
import signal
import tempfile
import threading
import time
import warnings
from dataclasses import dataclass
from multiprocessing.connection import wait
from pathlib import Path

import numpy as np

from simloop.errors import CacheWarning, SolverError

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


def _die_with_parent() -> None:
    """Ask Linux to SIGKILL this process when its parent dies (prctl PR_SET_PDEATHSIG).

    A parent killed outright (SIGKILL, out of memory) cannot stop its workers; without this they
    would run on under PID 1 until their solve ends. Best effort: a no-op elsewhere.
    """
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, int(signal.SIGKILL), 0, 0, 0)  # 1 = PR_SET_PDEATHSIG
    except (OSError, AttributeError):
        pass


def _worker(conn, function: str, *args):
    """Body of a forked solver process: run ``function`` of this module, send the result back.

    The function is looked up by name at run time, so a test can replace it before the fork.
    Ctrl-C reaches the whole process group: the worker ignores it and the parent, which owns the
    workers, stops them; SIGTERM gets its default action back (the parent may have a handler).
    The parent forks with both signals blocked, so none can arrive before this is set up.
    """
    import faulthandler

    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    _die_with_parent()
    signal.pthread_sigmask(signal.SIG_UNBLOCK, {signal.SIGINT, signal.SIGTERM})
    if os.getppid() == 1:  # the parent died before the death signal was armed
        os._exit(1)
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


#: A temporary cache file older than this belongs to a process that died while writing it (a
#: write takes milliseconds); younger ones may be another run's entry in flight and are left alone.
STALE_TEMPORARY_S = 3600.0


class SolveCache:
    """Content-addressed store of port solutions: one JSON file per (mesh, frequency, environment).

    Every finished solve is stored the moment it arrives, through a temporary file of a unique
    name that is fsynced and renamed into place, so a killed run never leaves a corrupt entry and
    a rerun picks up every frequency already solved. Several runs may share one cache: a run
    deletes only its own temporaries (and ones too old to be anybody's write in flight).

    An entry is checked on read (:meth:`get` with ``expect``): it must answer the request it is
    filed under and hold finite numbers of the expected shape; anything else (truncated, edited,
    binary, a directory in its place) is a miss, and the fresh solve replaces it. A cache that
    cannot be created or written (read-only, full disk) gives one :class:`CacheWarning` and the
    run carries on without storing.
    """

    def __init__(self, root: str | os.PathLike | None):
        self.root = Path(root) if root is not None else None
        self.writable = self.root is not None
        self.problem: str | None = None
        if self.root is None:
            return
        try:
            self.root.mkdir(parents=True, exist_ok=True)
            if not self.root.is_dir():
                raise NotADirectoryError(f"{self.root} is not a folder")
        except OSError as exc:
            self._give_up(exc)
            return
        self._sweep_stale_temporaries()

    def _sweep_stale_temporaries(self) -> None:
        now = time.time()
        for stale in self.root.glob("*.tmp"):
            try:
                if now - stale.lstat().st_mtime > STALE_TEMPORARY_S:
                    stale.unlink()
            except OSError:
                pass

    def _give_up(self, exc: BaseException) -> None:
        """Stop storing (once, with one warning); solving goes on."""
        if not self.writable:
            return
        self.writable = False
        self.problem = f"the solve cache {self.root} cannot be written ({exc}); carrying on without storing solves"
        warnings.warn(self.problem, CacheWarning, stacklevel=3)

    def key(self, mesh_digest: str, env: dict, frequency_hz: float) -> str:
        blob = json.dumps([SOLVER_VERSION, mesh_digest, env, f"{frequency_hz:.6f}"], sort_keys=True)
        return hashlib.sha256(blob.encode()).hexdigest()

    def get(self, key: str, expect=None) -> dict | None:
        """The stored entry for ``key``, or None when absent or unusable.

        ``expect(entry) -> bool`` checks the content (shape, dtype, finiteness); an entry must also
        name ``key`` as the request it answers.
        """
        if self.root is None:
            return None
        path = self.root / f"{key}.json"
        try:
            entry = json.loads(path.read_bytes().decode("utf-8"))
        except (OSError, ValueError, RecursionError):  # missing, a directory, binary, not JSON
            return None
        if not isinstance(entry, dict) or entry.get("key") != key:
            return None
        try:
            ok = expect is None or bool(expect(entry))
        except (KeyError, TypeError, ValueError, IndexError, AttributeError, OverflowError):
            ok = False
        return entry if ok else None

    def put(self, key: str, value: dict) -> None:
        """Store ``value`` under ``key`` atomically; an unwritable cache warns once and is skipped."""
        if self.root is None or not self.writable:
            return
        target = self.root / f"{key}.json"
        tmp = None
        try:
            fd, tmp = tempfile.mkstemp(dir=self.root, prefix=f".{key[:16]}-", suffix=".tmp")
            with os.fdopen(fd, "w") as fh:
                json.dump({**value, "key": key}, fh, allow_nan=False)
                fh.flush()
                os.fsync(fh.fileno())
            if target.is_dir() and not target.is_symlink():  # a bad entry in the way: replace it
                shutil.rmtree(target)
            os.replace(tmp, target)
            tmp = None
        except (OSError, ValueError) as exc:
            self._give_up(exc)
        finally:
            if tmp is not None:
                try:
                    os.unlink(tmp)
                except OSError:
                    pass


def _finite_array(values, shape) -> bool:
    a = np.asarray(values, dtype=float)
    return a.shape == tuple(shape) and bool(np.all(np.isfinite(a)))


def _ports_entry_ok(entry: dict, k: int) -> bool:
    """A cached port matrix: k × k finite, invertible, with a finite non-negative solve time."""
    seconds = entry["seconds"]
    if not (_finite_array(entry["y_re"], (k, k)) and _finite_array(entry["y_im"], (k, k))
            and isinstance(seconds, (int, float)) and math.isfinite(seconds) and seconds >= 0):
        return False
    y = np.asarray(entry["y_re"], dtype=float) + 1j * np.asarray(entry["y_im"], dtype=float)
    try:
        return bool(np.all(np.isfinite(np.linalg.inv(y))))
    except np.linalg.LinAlgError:
        return False


def _far_field_entry_ok(entry: dict, k: int, step_deg: float) -> bool:
    n_theta = int(round(180.0 / step_deg)) + 1
    n_phi = int(round(360.0 / step_deg))
    shape = (k, n_phi, n_theta)
    return (_ports_entry_ok(entry, k) and _finite_array(entry["theta_deg"], (n_theta,))
            and _finite_array(entry["phi_deg"], (n_phi,))
            and all(_finite_array(entry[name], shape) for name in ("e_theta_re", "e_theta_im", "e_phi_re", "e_phi_im")))


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

    PyNEC details (notes/pynec.md): one frequency per fr_card (an fr_card with n > 1 makes later
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
    with a ground, NEC leaves the points below the horizon uncomputed (notes/pynec.md).

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
    ``timeout_s`` per solve defaults to 20 × the largest cost estimate + 60 s. Each finished
    solve is stored in ``cache`` as it arrives, so an interrupted call keeps every solve it
    finished; the worker processes are stopped when the call ends for any reason.
    """
    requests = list(requests)
    results: list = [None] * len(requests)
    jobs = []  # (request index, worker args, cache key, cost)
    for i, r in enumerate(requests):
        args, key_env, cost = _job(r)
        f = float(r.frequency_hz)
        key = cache.key(r.mesh.digest(), key_env, f) if cache else None
        hit = cache.get(key, expect=_entry_check(r)) if cache else None
        if hit is not None:
            results[i] = _solution(r, hit, cached=True)
        else:
            jobs.append((i, args, key, cost))
    total = len(requests)
    done = total - len(jobs)
    if progress:
        progress(done, total)

    def arrived(j: int, status: str, out) -> None:
        i, _, key, _ = jobs[j]
        results[i] = _result(requests[i], status, out)
        if cache and not isinstance(results[i], SolverError):
            cache.put(key, {**out, "frequency_hz": float(requests[i].frequency_hz), "kind": requests[i].kind})

    order = sorted(range(len(jobs)), key=lambda j: -jobs[j][3])
    workers = max(1, workers or os.cpu_count() or 1)
    timeout_s = timeout_s or (20 * max((c for *_, c in jobs), default=0.0) + 60)
    _run_many([a for _, a, _, _ in jobs], order, workers, timeout_s, progress, done, total, on_result=arrived)
    return results


def _job(r: SolveRequest) -> tuple[tuple, dict, float]:
    """Worker arguments, the environment part of the cache key, and the cost estimate of a request."""
    payload = r.mesh.as_payload()
    env_payload = r.env.as_payload()
    f = float(r.frequency_hz)
    validate_payload(payload, f)
    if r.kind == "ports":
        return ("_solve_ports", payload, env_payload, f), env_payload, estimated_seconds(r.mesh.n_segments)
    if r.kind != "far_field":
        raise ValueError(f"unknown solve kind {r.kind!r}")
    if r.env.ground != "free-space":
        raise ValueError(f"a full-sphere far field needs free space, not ground {r.env.ground!r}")
    ratio = 90.0 / float(r.step_deg)
    if not abs(ratio - round(ratio)) < 1e-9:
        raise ValueError(f"step_deg = {r.step_deg!r}: 90 / step must be a whole number")
    key_env = {**env_payload, "far_field_step_deg": float(r.step_deg)}
    args = ("_solve_far_field", payload, env_payload, f, float(r.step_deg))
    n_dirs = (int(round(180 / r.step_deg)) + 1) * int(round(360 / r.step_deg))
    cost = estimated_seconds(r.mesh.n_segments) + len(r.mesh.port_tags) * 5e-8 * r.mesh.n_segments * n_dirs
    return args, key_env, cost


def _entry_check(r: SolveRequest):
    """The content check a cache entry for request ``r`` must pass (see :meth:`SolveCache.get`)."""
    k = len(r.mesh.port_tags)
    if r.kind == "ports":
        return lambda e: _ports_entry_ok(e, k)
    return lambda e: _far_field_entry_ok(e, k, float(r.step_deg))


def _solution(r: SolveRequest, data: dict, cached: bool):
    f = float(r.frequency_hz)
    if r.kind == "ports":
        return PortSolution(f, np.array(data["y_re"]) + 1j * np.array(data["y_im"]), data["seconds"], cached=cached)
    return _far_field_from(f, data, cached=cached)


def _result(r: SolveRequest, status: str, out):
    """A worker's answer as a solution, or the SolverError saying why there is none."""
    f = float(r.frequency_hz)
    label = "" if r.kind == "ports" else " (far field)"
    if status != "ok":
        return SolverError(f"{f / 1e6:.6g} MHz{label}: {out}")
    sol = _solution(r, out, cached=False)
    arrays = [sol.y_raw] if r.kind == "ports" else [sol.y_raw, sol.e_theta_v, sol.e_phi_v]
    if not all(np.all(np.isfinite(a)) for a in arrays):
        return SolverError(f"{f / 1e6:.6g} MHz{label}: the solver returned NaN")
    return sol


_BLOCKED = {signal.SIGINT, signal.SIGTERM}


def _start(ctx, job):
    """Fork one worker with SIGINT and SIGTERM blocked (the worker sets up its own handling)."""
    reader, writer = ctx.Pipe(duplex=False)
    proc = ctx.Process(target=_worker, args=(writer, *job), daemon=True)
    main = threading.current_thread() is threading.main_thread()
    old = signal.pthread_sigmask(signal.SIG_BLOCK, _BLOCKED) if main else None
    try:
        proc.start()
    finally:
        if old is not None:
            signal.pthread_sigmask(signal.SIG_SETMASK, old)
        writer.close()
    return reader, proc


def _stop(running: dict) -> None:
    """Kill and reap every worker still running (on an interrupt, an error or a signal)."""
    for reader, (_, proc, _) in list(running.items()):
        if proc.is_alive():
            proc.kill()
    for reader, (_, proc, _) in list(running.items()):
        proc.join(timeout=5)
        reader.close()
    running.clear()


def _collect(reader, proc, started, ready, now, timeout_s):
    """(status, payload) of a worker that answered, died or timed out; None while it still runs."""
    if reader in ready:
        try:
            status, payload = reader.recv()
        except (EOFError, OSError):
            proc.join()
            return "error", f"the solver process died (exit code {proc.exitcode})"
        proc.join()
        return status, payload
    if now - started > timeout_s:
        proc.kill()
        proc.join()
        return "error", f"no answer within {timeout_s:.0f} s (killed)"
    return None


def _run_many(jobs, order, workers, timeout_s, progress, done, total, on_result=None):
    """Run jobs (function name, *args) in :func:`_worker` processes in the given order, at most
    ``workers`` at a time; a crash or a timeout becomes ("error", message) for that job.

    ``on_result(j, status, payload)`` runs for each job the moment it ends (the caller stores the
    solve there). However this returns (done, an exception, KeyboardInterrupt, a signal handler
    raising), no worker is left running.
    """
    ctx = mp.get_context("fork")
    out: list = [None] * len(jobs)
    todo = list(order)
    running: dict = {}
    try:
        while todo or running:
            while todo and len(running) < workers:
                j = todo.pop(0)
                reader, proc = _start(ctx, jobs[j])
                running[reader] = (j, proc, time.monotonic())
            ready = wait(list(running), timeout=1.0)
            now = time.monotonic()
            for reader in list(running):
                j, proc, started = running[reader]
                got = _collect(reader, proc, started, ready, now, timeout_s)
                if got is None:
                    continue
                reader.close()
                del running[reader]
                out[j] = got
                if on_result is not None:
                    on_result(j, *got)
                done += 1
                if progress:
                    progress(done, total)
    finally:
        _stop(running)
    return out
