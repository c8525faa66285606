"""Method-of-moments solves with PyNEC: one factorisation per (mesh, environment, frequency).

This is the only module that imports PyNEC. A :class:`SolvePlan` names a mesh, an environment, a
frequency, a list of excitations (:class:`PortSources`: 1 V at each port in turn, the others
shorted; :class:`PlaneWaves`) and a list of observations (:class:`PortCurrents`,
:class:`SegmentCurrents`, :class:`FarField` on a grid, :class:`NearFieldH` at points). The matrix
is filled and factorised once; every excitation is a back-substitution on it and every
observation is read from each solution. :func:`solve_plans` merges plans that share mesh,
environment and frequency, caches every (excitation, observation) piece on its own, and runs the
jobs on an executor: forked worker processes by default (:class:`ProcessExecutor`), or any
``concurrent.futures`` executor such as a Dask client's (:class:`FuturesExecutor`).
:func:`solve_ports`, :func:`solve_far_field` and :func:`solve_many` are the plans the studies use.

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
from typing import ClassVar
from multiprocessing.connection import wait
from pathlib import Path

import numpy as np

from simloop.constants import MAX_SEGMENTS
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
    if n_total > MAX_SEGMENTS:
        raise SolverError(f"{n_total} segments exceed the {MAX_SEGMENTS} this tool will hand to nec2++")
    for t in mesh["port_tags"]:
        if not (1 <= t <= len(segs)) or segs[t - 1] != 1:
            raise SolverError(f"port tag {t} is not a one-segment wire of the mesh")


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
    if os.getppid() != _PARENT_PID:  # the parent died before the death signal was armed
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
    from simloop.mesh import solve_cost

    return solve_cost(n_segments)[0]


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



# ------------------------------------------------------------------------------------------------
# The solve plan: excitations and observations, one class per kind
# ------------------------------------------------------------------------------------------------
#
# Each kind says, in one place, what it is (its descriptor, which is part of the cache key), what
# the worker does with the PyNEC context (``drive`` for an excitation: one back-substitution per
# sub-solve; ``observe`` for an observation: read one result of the current solution), how much
# it costs, and what shape its output has (checked on every cache read). Adding a kind is adding
# a class here and nothing else.

_EXCITATIONS: dict[str, type] = {}
_OBSERVATIONS: dict[str, type] = {}


def _excitation(cls):
    _EXCITATIONS[cls.kind] = cls
    return cls


def _observation(cls):
    _OBSERVATIONS[cls.kind] = cls
    return cls


class _Results:
    """The worker's own running index of each PyNEC result getter.

    PyNEC keeps one index per getter over every solve of a context and returns None past the
    end; probing for the end at every excitation costs O(n) per call, O(n²) for a pattern of
    hundreds of plane waves. The worker counts what it asked for instead: every ``xq_card``
    adds one set of structure currents, every ``rp_card`` one pattern, every ``nh_card`` one
    near field. :meth:`check` confirms the counts once at the end of a plan (one probe each).
    """

    def __init__(self, ctx):
        self.ctx = ctx
        self.n = {"currents": 0, "pattern": 0, "near": 0}
        self._getters = {"currents": ctx.get_structure_currents, "pattern": ctx.get_radiation_pattern,
                         "near": ctx.get_near_field_pattern}

    def added(self, what: str):
        """The result just produced by a card of kind ``what``."""
        self.n[what] += 1
        out = self._getters[what](self.n[what] - 1)
        if out is None:
            raise RuntimeError(f"PyNEC has fewer {what} results than the worker asked for")
        return out

    def solved(self):
        """Count one solve (``xq_card``) and return its structure currents."""
        return self.added("currents")

    def check(self) -> None:
        for what, getter in self._getters.items():
            if getter(self.n[what]) is not None:
                raise RuntimeError(f"PyNEC holds more {what} results than the worker counted")


@_excitation
@dataclass(frozen=True)
class PortSources:
    """1 V at each tap port in turn, the other ports shorted: k sub-solves (NEC type-0 source;
    type 5 gave 10–13 % higher reactance)."""

    kind: ClassVar[str] = "ports"

    def descriptor(self) -> dict:
        return {"kind": self.kind}

    def count(self, mesh: dict) -> int:
        return len(mesh["port_tags"])

    def drive(self, ctx, mesh: dict, results: _Results):
        for tag in mesh["port_tags"]:
            ctx.ex_card(0, int(tag), 1, 0, 1.0, 0, 0, 0, 0, 0)
            ctx.xq_card(0)
            yield results.solved()


@_excitation
@dataclass(frozen=True)
class PlaneWaves:
    """Linearly polarised 1 V/m plane waves arriving from the directions (θ_i, φ_i) (NEC type 1).

    ``eta_deg`` is NEC's polarisation angle: 0 puts E along NEC's θ̂ reference, 90 along φ̂ (NEC's
    own sign convention; :mod:`simloop.patterns` compares it with the reciprocity result).
    """

    theta_deg: tuple
    phi_deg: tuple
    eta_deg: float = 0.0
    kind: ClassVar[str] = "plane_waves"

    def descriptor(self) -> dict:
        return {"kind": self.kind, "theta_deg": [float(t) for t in self.theta_deg],
                "phi_deg": [float(p) for p in self.phi_deg], "eta_deg": float(self.eta_deg)}

    @classmethod
    def from_descriptor(cls, d: dict) -> "PlaneWaves":
        return cls(tuple(d["theta_deg"]), tuple(d["phi_deg"]), d["eta_deg"])

    def count(self, mesh: dict) -> int:
        return len(self.theta_deg)

    def check(self, env: Environment) -> None:
        if len(self.theta_deg) != len(self.phi_deg):
            raise ValueError("plane waves need as many θ as φ values")
        if env.ground != "free-space" and any(t > 90.0 for t in self.theta_deg):
            raise ValueError("over a ground a plane wave must arrive from above the horizon (θ ≤ 90°)")

    def drive(self, ctx, mesh: dict, results: _Results):
        for t, p in zip(self.theta_deg, self.phi_deg):
            ctx.ex_card(1, 1, 1, 0, float(t), float(p), float(self.eta_deg), 0, 0, 0)
            ctx.xq_card(0)
            yield results.solved()


@_observation
@dataclass(frozen=True)
class PortCurrents:
    """Current in each tap port's segment, shape (k,) per sub-solve. [A]"""

    kind: ClassVar[str] = "port_currents"
    name: str = "port_currents"

    def descriptor(self) -> dict:
        return {"kind": self.kind}

    def shape(self, mesh) -> tuple:
        return (len(mesh.port_tags),)

    def cost(self, mesh) -> float:
        return 0.0

    def observe(self, ctx, mesh: dict, currents, results: _Results) -> np.ndarray:
        return np.asarray(currents.get_current())[_port_index(currents, mesh)]


@_observation
@dataclass(frozen=True)
class SegmentCurrents:
    """Current at the centre of every segment, in NEC's segment order, shape (n,). [A]"""

    kind: ClassVar[str] = "segment_currents"
    name: str = "segment_currents"

    def descriptor(self) -> dict:
        return {"kind": self.kind}

    def shape(self, mesh) -> tuple:
        return (mesh.n_segments,)

    def cost(self, mesh) -> float:
        return 0.0

    def observe(self, ctx, mesh: dict, currents, results: _Results) -> np.ndarray:
        return np.asarray(currents.get_current())


@_observation
@dataclass(frozen=True)
class FarField:
    """r·E_θ and r·E_φ on a uniform grid, shape (2, nφ, nθ) per sub-solve (range 0: volts).

    θ runs ``theta_start_deg`` + i·``theta_step_deg`` (n_theta values), φ likewise. With a
    ground NEC leaves θ > 90° uncomputed (the arrays hold stale memory), so such grids are
    refused.
    """

    theta_start_deg: float
    theta_step_deg: float
    n_theta: int
    phi_start_deg: float
    phi_step_deg: float
    n_phi: int
    name: str = "far_field"
    kind: ClassVar[str] = "far_field"

    @classmethod
    def sphere(cls, step_deg: float, name: str = "far_field") -> "FarField":
        """θ 0–180°, φ 0–360° (360° excluded) in steps of ``step_deg``."""
        return cls(0.0, step_deg, int(round(180.0 / step_deg)) + 1, 0.0, step_deg,
                   int(round(360.0 / step_deg)), name)

    @classmethod
    def from_descriptor(cls, d: dict) -> "FarField":
        (t0, dt, nt), (p0, dp, n_phi) = d["theta"], d["phi"]
        return cls(t0, dt, nt, p0, dp, n_phi, **({"name": d["name"]} if "name" in d else {}))

    @property
    def theta_deg(self) -> np.ndarray:
        return self.theta_start_deg + self.theta_step_deg * np.arange(self.n_theta)

    @property
    def phi_deg(self) -> np.ndarray:
        return self.phi_start_deg + self.phi_step_deg * np.arange(self.n_phi)

    def descriptor(self) -> dict:
        return {"kind": self.kind, "theta": [float(self.theta_start_deg), float(self.theta_step_deg), int(self.n_theta)],
                "phi": [float(self.phi_start_deg), float(self.phi_step_deg), int(self.n_phi)]}

    def check(self, env: Environment) -> None:
        if env.ground != "free-space" and self.theta_deg.max() > 90.0 + 1e-9:
            raise ValueError("over a ground the far field exists for θ ≤ 90° only (NEC leaves the rest stale)")

    def shape(self, mesh) -> tuple:
        return (2, self.n_phi, self.n_theta)

    def cost(self, mesh) -> float:
        return 5e-8 * mesh.n_segments * self.n_phi * self.n_theta  # measured order, nec2++ 2.3.4

    def observe(self, ctx, mesh: dict, currents, results: _Results) -> np.ndarray:
        ctx.rp_card(0, int(self.n_theta), int(self.n_phi), 1, 0, 0, 0, float(self.theta_start_deg),
                    float(self.phi_start_deg), float(self.theta_step_deg), float(self.phi_step_deg), 0.0, 0.0)
        rp = results.added("pattern")
        shape = (rp.get_nphi(), rp.get_ntheta())
        if shape != (self.n_phi, self.n_theta):
            raise RuntimeError(f"pattern grid {shape} differs from the requested {(self.n_phi, self.n_theta)}")
        return np.stack([np.asarray(rp.get_e_theta()).reshape(shape), np.asarray(rp.get_e_phi()).reshape(shape)])


@_observation
@dataclass(frozen=True)
class NearFieldH:
    """Magnetic field (H_x, H_y, H_z) at each point, shape (n, 3) per sub-solve. [A/m]

    Points are in the project's frame (frame centre at the origin); over a ground they are
    shifted with the structure into NEC's frame (ground at z = 0).
    """

    points_m: tuple
    name: str = "near_field_h"
    kind: ClassVar[str] = "near_field_h"

    @classmethod
    def from_descriptor(cls, d: dict) -> "NearFieldH":
        return cls(tuple(tuple(p) for p in d["points_m"]), **({"name": d["name"]} if "name" in d else {}))

    def descriptor(self) -> dict:
        return {"kind": self.kind, "points_m": [[float(c) for c in p] for p in self.points_m]}

    def shape(self, mesh) -> tuple:
        return (len(self.points_m), 3)

    def cost(self, mesh) -> float:
        return 1e-7 * mesh.n_segments * len(self.points_m)

    def observe(self, ctx, mesh: dict, currents, results: _Results) -> np.ndarray:
        shift = mesh.get("z_shift_m", 0.0)
        out = np.zeros((len(self.points_m), 3), dtype=complex)
        for i, (x, y, z) in enumerate(self.points_m):
            ctx.nh_card(0, 1, 1, 1, float(x), float(y), float(z) + shift, 0.0, 0.0, 0.0)
            nf = results.added("near")
            out[i] = [np.asarray(nf.get_field_x())[0], np.asarray(nf.get_field_y())[0], np.asarray(nf.get_field_z())[0]]
        return out


def _port_index(currents, mesh: dict) -> list[int]:
    if "_port_index" not in mesh:
        tags = np.asarray(currents.get_current_segment_tag())
        mesh["_port_index"] = [int(np.flatnonzero(tags == t)[0]) for t in mesh["port_tags"]]
    return mesh["_port_index"]


def _decode_kind(registry: dict, d: dict):
    """The excitation or observation a descriptor (plus name) stands for."""
    cls = registry[d["kind"]]
    args = {k: v for k, v in d.items() if k != "kind"}
    return cls.from_descriptor(args) if hasattr(cls, "from_descriptor") else cls(**args)


def _solve_plan(mesh: dict, env: dict, frequency_hz: float, excitations: list, observations: list) -> dict:
    """Run in a worker: one fill + LU at one frequency, every excitation and observation on it.

    ``excitations`` / ``observations``: descriptors (observations with their ``name``). Returns
    plain data: per excitation, per observation name, the stacked complex output as re/im lists.
    """
    t0 = time.perf_counter()
    mesh = dict(mesh, z_shift_m=env["height_m"] if env["ground"] != "free-space" else 0.0)
    ctx = _context(mesh, env)
    ctx.fr_card(0, 1, frequency_hz / 1e6, 0)  # MHz; one frequency per fr_card
    results = _Results(ctx)
    obs = [_decode_kind(_OBSERVATIONS, o) for o in observations]
    out = []
    for e in excitations:
        exc = _decode_kind(_EXCITATIONS, e)
        rows: dict[str, list] = {o.name: [] for o in obs}
        for currents in exc.drive(ctx, mesh, results):
            for o in obs:
                rows[o.name].append(o.observe(ctx, mesh, currents, results))
        out.append({name: {"re": np.real(v).tolist(), "im": np.imag(v).tolist()}
                    for name, v in ((n, np.stack(r)) for n, r in rows.items())})
    results.check()
    return {"outputs": out, "seconds": time.perf_counter() - t0}


# ------------------------------------------------------------------------------------------------
# Plans, their merging and caching, and the executors that run them
# ------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SolvePlan:
    """Everything to compute on one factorisation: a mesh, an environment, a frequency, a list
    of excitations and a list of observations (each observation on every excitation's solves).

    Plans sharing mesh, environment and frequency are merged by :func:`solve_plans` into one
    factorisation. Observation names must be unique within a plan.
    """

    mesh: object  # simloop.mesh.Mesh
    env: Environment
    frequency_hz: float
    excitations: tuple = (PortSources(),)
    observations: tuple = (PortCurrents(),)

    def check(self) -> dict:
        """Validate (before PyNEC sees anything); returns the mesh payload."""
        payload = self.mesh.as_payload()
        validate_payload(payload, float(self.frequency_hz))
        for item in (*self.excitations, *self.observations):
            if hasattr(item, "check"):
                item.check(self.env)
        names = [o.name for o in self.observations]
        if len(set(names)) != len(names):
            raise ValueError(f"observation names must be unique in a plan: {names}")
        return payload

    def group(self) -> tuple:
        """What a factorisation depends on: plans with equal groups share one."""
        return (self.mesh.digest(), json.dumps(self.env.as_payload(), sort_keys=True), f"{float(self.frequency_hz):.6f}")


@dataclass(frozen=True)
class PlanResult:
    """The outputs of one plan. ``outputs[(i, name)]``: observation ``name`` on excitation i,
    stacked over its sub-solves (shape (sub-solves, *observation shape))."""

    frequency_hz: float
    outputs: dict
    seconds: float
    cached: bool = False

    def get(self, excitation: int = 0, name: str = "port_currents") -> np.ndarray:
        return self.outputs[(excitation, name)]


def _desc(item) -> str:
    return json.dumps(item.descriptor(), sort_keys=True)


def _piece_key(cache: SolveCache, plan: SolvePlan, exc, obs) -> str:
    """Cache key of one (excitation, observation) piece of a plan.

    The port matrix keeps the key (and the entry format) it always had, so existing caches and
    the sweep's entries stay valid; every other piece adds its two descriptors to it.
    """
    env = plan.env.as_payload()
    if not (isinstance(exc, PortSources) and isinstance(obs, PortCurrents)):
        env = {**env, "excitation": exc.descriptor(), "observation": obs.descriptor()}
    return cache.key(plan.mesh.digest(), env, float(plan.frequency_hz))


def _encode_piece(exc, obs, values: np.ndarray, seconds: float) -> dict:
    if isinstance(exc, PortSources) and isinstance(obs, PortCurrents):
        y = values.T  # column j: port currents for 1 V at port j
        return {"y_re": y.real.tolist(), "y_im": y.imag.tolist(), "seconds": seconds}
    return {"re": values.real.tolist(), "im": values.imag.tolist(), "seconds": seconds}


def _decode_piece(exc, obs, entry: dict) -> np.ndarray:
    if isinstance(exc, PortSources) and isinstance(obs, PortCurrents):
        return (np.asarray(entry["y_re"], dtype=float) + 1j * np.asarray(entry["y_im"], dtype=float)).T
    return np.asarray(entry["re"], dtype=float) + 1j * np.asarray(entry["im"], dtype=float)


def _piece_check(exc, obs, mesh):
    shape = (exc.count(mesh.as_payload()), *obs.shape(mesh))
    if isinstance(exc, PortSources) and isinstance(obs, PortCurrents):
        return lambda e: _ports_entry_ok(e, shape[0])
    return lambda e: (_finite_array(e["re"], shape) and _finite_array(e["im"], shape)
                      and isinstance(e["seconds"], (int, float)) and math.isfinite(e["seconds"]))


@dataclass
class _Group:
    """Plans sharing one factorisation: their merged excitations and observations, and pieces."""

    plan: SolvePlan  # the first plan (mesh, env, frequency)
    excitations: dict = dataclasses.field(default_factory=dict)  # descriptor → excitation
    observations: dict = dataclasses.field(default_factory=dict)  # descriptor → observation
    pieces: dict = dataclasses.field(default_factory=dict)  # (exc desc, obs desc) → array
    seconds: float = 0.0
    error: SolverError | None = None
    all_cached: bool = True


def _group_plans(plans) -> tuple[dict, list]:
    groups: dict = {}
    where = []
    for p in plans:
        p.check()
        g = groups.setdefault(p.group(), _Group(p))
        for e in p.excitations:
            g.excitations.setdefault(_desc(e), e)
        for o in p.observations:
            g.observations.setdefault(_desc(o), o)
        where.append(p.group())
    return groups, where


def _cached_pieces(g: _Group, cache: SolveCache | None) -> list[tuple]:
    """Load the group's cached pieces; return the (exc desc, obs desc) pairs still to solve."""
    missing = []
    for de, e in g.excitations.items():
        for do, o in g.observations.items():
            hit = cache.get(_piece_key(cache, g.plan, e, o), expect=_piece_check(e, o, g.plan.mesh)) if cache else None
            if hit is None:
                missing.append((de, do))
            else:
                g.pieces[(de, do)] = _decode_piece(e, o, hit)
                g.seconds = max(g.seconds, float(hit["seconds"]))
    return missing


def _group_job(g: _Group, missing: list) -> tuple[tuple, float, list, list]:
    """Worker arguments and cost for the missing pieces of a group (whole excitations re-run)."""
    excs = [d for d in g.excitations if any(m[0] == d for m in missing)]
    obss = [d for d in g.observations if any(m[1] == d for m in missing)]
    mesh = g.plan.mesh
    payload = mesh.as_payload()
    obs_args = [{**g.observations[d].descriptor(), "name": f"o{i}"} for i, d in enumerate(obss)]
    args = ("_solve_plan", payload, g.plan.env.as_payload(), float(g.plan.frequency_hz),
            [g.excitations[d].descriptor() for d in excs], obs_args)
    subs = sum(g.excitations[d].count(payload) for d in excs)
    cost = estimated_seconds(mesh.n_segments) + subs * sum(g.observations[d].cost(mesh) for d in obss)
    return args, cost, excs, obss


def _store_group(g: _Group, out: dict, excs: list, obss: list, cache: SolveCache | None) -> None:
    g.all_cached = False
    g.seconds = float(out["seconds"])
    label = f"{float(g.plan.frequency_hz) / 1e6:.6g} MHz"
    for i, de in enumerate(excs):
        for j, do in enumerate(obss):
            data = out["outputs"][i][f"o{j}"]
            values = np.asarray(data["re"], dtype=float) + 1j * np.asarray(data["im"], dtype=float)
            if not np.all(np.isfinite(values)):
                g.error = SolverError(f"{label}: the solver returned NaN")
                return
            g.pieces[(de, do)] = values
    if cache:
        for (de, do), values in g.pieces.items():
            if de in excs and do in obss:
                e, o = g.excitations[de], g.observations[do]
                cache.put(_piece_key(cache, g.plan, e, o), _encode_piece(e, o, values, g.seconds))


def solve_plans(plans, *, executor=None, workers: int | None = None, timeout_s: float | None = None,
                cache: SolveCache | None = None, progress=None) -> list[PlanResult | SolverError]:
    """Run solve plans: one factorisation per distinct (mesh, environment, frequency).

    Plans with the same mesh, environment and frequency are merged; every (excitation,
    observation) piece is cached on its own, so only missing pieces are solved. Jobs run longest
    first on ``executor`` (default :class:`ProcessExecutor`: forked workers with a timeout; or
    :class:`FuturesExecutor` around any ``concurrent.futures`` executor, e.g. a Dask client's
    ``get_executor()``). ``progress(done, total)`` counts factorisations.

    Returns a :class:`PlanResult` per plan, or the :class:`SolverError` its solve raised.
    """
    plans = list(plans)
    groups, where = _group_plans(plans)
    jobs = []  # (group key, args, cost, excs, obss)
    for key, g in groups.items():
        missing = _cached_pieces(g, cache)
        if missing:
            jobs.append((key, *_group_job(g, missing)))
    total = len(groups)
    done = total - len(jobs)
    if progress:
        progress(done, total)

    def arrived(j: int, status: str, out) -> None:
        key, _, _, excs, obss = jobs[j]
        g = groups[key]
        if status != "ok":
            g.error = SolverError(f"{float(g.plan.frequency_hz) / 1e6:.6g} MHz: {out}")
        else:
            _store_group(g, out, excs, obss, cache)

    executor = executor or ProcessExecutor(workers, timeout_s)
    executor.run([a for _, a, _, _, _ in jobs], [c for _, _, c, _, _ in jobs], arrived, progress, done, total)
    return [_plan_result(p, groups[k]) for p, k in zip(plans, where)]


def _plan_result(p: SolvePlan, g: _Group) -> PlanResult | SolverError:
    if g.error is not None:
        return g.error
    outputs = {(i, o.name): g.pieces[(_desc(e), _desc(o))]
               for i, e in enumerate(p.excitations) for o in p.observations}
    return PlanResult(float(p.frequency_hz), outputs, g.seconds, cached=g.all_cached)


class ProcessExecutor:
    """Forked worker processes, at most ``workers`` at a time, each with a timeout: a crash or a
    hang of nec2++ becomes an error for that job (default executor).

    ``timeout_s`` defaults to 20 × the largest cost estimate + 60 s.
    """

    def __init__(self, workers: int | None = None, timeout_s: float | None = None):
        self.workers = max(1, workers or os.cpu_count() or 1)
        self.timeout_s = timeout_s

    def run(self, jobs, costs, on_result, progress=None, done=0, total=0) -> None:
        order = sorted(range(len(jobs)), key=lambda j: -costs[j])
        timeout = self.timeout_s or (20 * max(costs, default=0.0) + 60)
        _run_many(jobs, order, self.workers, timeout, progress, done, total, on_result=on_result)


def _call(function: str, *args):
    """Run a worker function of this module and return (status, payload), never raising."""
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    try:
        return "ok", globals()[function](*args)
    except Exception as exc:  # noqa: BLE001 - reported to the caller as data
        return "error", f"{type(exc).__name__}: {exc}"


class FuturesExecutor:
    """Any ``concurrent.futures.Executor`` runs the same jobs, e.g. a Dask cluster's
    ``distributed.Client(...).get_executor()``. The isolation against crashes is then the
    cluster's (a dead worker fails its future); ``timeout_s`` bounds the wait for each result.
    """

    def __init__(self, executor, timeout_s: float | None = None):
        self.executor = executor
        self.timeout_s = timeout_s

    def run(self, jobs, costs, on_result, progress=None, done=0, total=0) -> None:
        import concurrent.futures as cf

        order = sorted(range(len(jobs)), key=lambda j: -costs[j])
        futures = {self.executor.submit(_call, *jobs[j]): j for j in order}
        timeout = self.timeout_s or (20 * sum(costs) + 60)
        try:
            for fut in cf.as_completed(futures, timeout=timeout):
                try:
                    status, payload = fut.result()
                except Exception as exc:  # noqa: BLE001 - a lost worker fails its future
                    status, payload = "error", f"{type(exc).__name__}: {exc}"
                on_result(futures[fut], status, payload)
                done += 1
                if progress:
                    progress(done, total)
        except cf.TimeoutError:
            for fut, j in futures.items():
                if not fut.done():
                    fut.cancel()
                    on_result(j, "error", f"no answer within {timeout:.0f} s")


# ------------------------------------------------------------------------------------------------
# The calls the studies use: port matrices and full-sphere far fields, as plans
# ------------------------------------------------------------------------------------------------


def solve_ports(mesh, env: Environment, frequencies_hz, *, workers: int | None = None,
                timeout_s: float | None = None, cache: SolveCache | None = None,
                progress=None, executor=None) -> list[PortSolution | SolverError]:
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
    executor : ProcessExecutor or FuturesExecutor, optional
        Overrides ``workers`` and ``timeout_s``.

    Returns
    -------
    list
        A :class:`PortSolution` per frequency, or the :class:`SolverError` that frequency raised.
    """
    return solve_many([SolveRequest(mesh, env, float(f)) for f in frequencies_hz], workers=workers,
                      timeout_s=timeout_s, cache=cache, progress=progress, executor=executor)


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
        Polar angle from +z. [deg]
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


def far_field_solution(result: PlanResult, grid: FarField, excitation: int = 0) -> FarFieldSolution:
    """A plan's port excitation (with :class:`PortCurrents` and ``grid``) as a FarFieldSolution."""
    ff = result.get(excitation, grid.name)
    return FarFieldSolution(result.frequency_hz, result.get(excitation, "port_currents").T, grid.theta_deg,
                            grid.phi_deg, ff[:, 0], ff[:, 1], result.seconds, result.cached)


def solve_far_field(mesh, env: Environment, frequencies_hz, *, step_deg: float = 5.0,
                    workers: int | None = None, timeout_s: float | None = None,
                    cache: SolveCache | None = None, progress=None,
                    executor=None) -> list[FarFieldSolution | SolverError]:
    """Port admittances and the full-sphere far field of every port excitation, per frequency.

    One matrix factorisation per frequency serves all ports and their patterns. Free space only:
    with a ground, NEC leaves the points below the horizon uncomputed (use a :class:`FarField`
    grid with θ ≤ 90° in a :class:`SolvePlan` instead).

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
    workers, timeout_s, cache, progress, executor
        As for :func:`solve_ports`.

    Returns
    -------
    list
        A :class:`FarFieldSolution` per frequency, or the :class:`SolverError` it raised.
    """
    return solve_many([SolveRequest(mesh, env, float(f), "far_field", float(step_deg)) for f in frequencies_hz],
                      workers=workers, timeout_s=timeout_s, cache=cache, progress=progress, executor=executor)


@dataclass(frozen=True)
class SolveRequest:
    """One solve for :func:`solve_many`: port matrix (``kind="ports"``) or full-sphere far field."""

    mesh: object  # simloop.mesh.Mesh
    env: Environment
    frequency_hz: float
    kind: str = "ports"  # "ports" | "far_field"
    step_deg: float = 5.0

    def plan(self) -> SolvePlan:
        if self.kind == "ports":
            return SolvePlan(self.mesh, self.env, float(self.frequency_hz))
        if self.kind != "far_field":
            raise ValueError(f"unknown solve kind {self.kind!r}")
        if self.env.ground != "free-space":
            raise ValueError(f"a full-sphere far field needs free space, not ground {self.env.ground!r}")
        ratio = 90.0 / float(self.step_deg)
        if not abs(ratio - round(ratio)) < 1e-9:
            raise ValueError(f"step_deg = {self.step_deg!r}: 90 / step must be a whole number")
        return SolvePlan(self.mesh, self.env, float(self.frequency_hz), (PortSources(),),
                         (PortCurrents(), FarField.sphere(float(self.step_deg))))

    def solution(self, result):
        """The plan's result as a PortSolution / FarFieldSolution (errors pass through, labelled)."""
        if isinstance(result, SolverError):
            return SolverError(f"{result} (far field)") if self.kind == "far_field" else result
        if self.kind == "ports":
            return PortSolution(result.frequency_hz, result.get().T, result.seconds, cached=result.cached)
        return far_field_solution(result, FarField.sphere(float(self.step_deg)))


def solve_many(requests, *, workers: int | None = None, timeout_s: float | None = None,
               cache: SolveCache | None = None, progress=None, executor=None) -> list:
    """Solves of different meshes, environments and kinds in one worker pool.

    Each request becomes a :class:`PortSolution` (kind ``"ports"``, the same cache entries as
    :func:`solve_ports`) or a :class:`FarFieldSolution` (kind ``"far_field"``, as
    :func:`solve_far_field`), or the :class:`SolverError` it raised. Requests sharing mesh,
    environment and frequency share one factorisation (:func:`solve_plans`); misses run longest
    first. Each finished solve is stored in ``cache`` as it arrives, so an interrupted call keeps
    every solve it finished; the worker processes are stopped when the call ends for any reason.
    """
    requests = list(requests)
    results = solve_plans([r.plan() for r in requests], executor=executor, workers=workers,
                          timeout_s=timeout_s, cache=cache, progress=progress)
    return [r.solution(res) for r, res in zip(requests, results)]


_BLOCKED = {signal.SIGINT, signal.SIGTERM}
_PARENT_PID = os.getpid()  # set again before every fork: the worker compares it with its getppid()


def _start(ctx, job):
    """Fork one worker with SIGINT and SIGTERM blocked (the worker sets up its own handling)."""
    global _PARENT_PID
    _PARENT_PID = os.getpid()
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
