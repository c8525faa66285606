"""Study: sweep, tune and validate a loop in one pass that shares every MoM solve.

The stages run in the order of :data:`STAGES`; each is one function ``stage(ctx) -> result``
registered there with its name, so a new study (receiver coupling, patterns) is one function and
one line. Every stage gets the same :class:`SharedSolves` store: a solve any stage made (or found
in the on-disk cache) is handed to every later stage that asks for the same mesh, environment and
frequency, so no frequency is factorised twice in a study even with the disk cache switched off.
The store logs every request (:attr:`StudyResult.solve_log`), which is how the tests check it.

This module computes only: no printing and no files (:mod:`simloop.report_html` writes the
report; the CLI writes everything else through :mod:`simloop.report`).
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import hashlib
import platform
import time
from dataclasses import dataclass, field
from importlib import metadata
from typing import Callable

from simloop import __version__
from simloop.solve import SolveCache

__all__ = ["STAGES", "SharedSolves", "SolveLogEntry", "StudyContext", "StudyResult", "run_study",
           "spec_digest", "versions"]


@dataclass(frozen=True)
class SolveLogEntry:
    """One request for a solve during a study.

    ``stage`` is the study stage that asked; ``key`` the content hash of (mesh, environment,
    frequency, kind); ``how`` is ``"solved"`` (a new factorisation), ``"memory"`` (made earlier
    in this study) or ``"disk"`` (found in the on-disk cache).
    """

    stage: str
    key: str
    how: str


class SharedSolves(SolveCache):
    """Solve store shared by every stage of a study: memory first, then the on-disk cache.

    It is a :class:`simloop.solve.SolveCache` for :func:`simloop.solve.solve_many` (same keys),
    so the solver's own look-up does the sharing. New solves are also written to ``disk`` when
    one is given.
    """

    def __init__(self, disk: SolveCache | None = None):
        super().__init__(None)
        self.disk = disk
        self.memory: dict[str, dict] = {}
        self.stage = ""
        self.log: list[SolveLogEntry] = []

    def get(self, key: str, expect=None) -> dict | None:
        if key in self.memory:
            self.log.append(SolveLogEntry(self.stage, key, "memory"))
            return self.memory[key]
        hit = self.disk.get(key, expect) if self.disk is not None else None
        if hit is not None:
            self.memory[key] = hit
            self.log.append(SolveLogEntry(self.stage, key, "disk"))
        return hit

    def put(self, key: str, value: dict) -> None:
        self.memory[key] = value
        self.log.append(SolveLogEntry(self.stage, key, "solved"))
        if self.disk is not None:
            self.disk.put(key, value)


@dataclass
class StudyContext:
    """What every stage receives: the spec, the options, the shared solves and earlier results."""

    spec: object  # simloop.spec.Spec
    solves: SharedSolves
    workers: int | None = None
    progress: Callable | None = None
    band: str = "itu-1"
    field_v_per_m: float = 1e-3
    convergence: bool = True
    results: dict = field(default_factory=dict)


def _stage_sweep(ctx: StudyContext):
    from simloop.impedance import run_sweep

    return run_sweep(ctx.spec, workers=ctx.workers, cache=ctx.solves, progress=ctx.progress)


def _stage_tune(ctx: StudyContext):
    from simloop.tuning import run_tune

    return run_tune(ctx.spec, ctx.results["sweep"], band=ctx.band, field_v_per_m=ctx.field_v_per_m)


def _stage_validate(ctx: StudyContext):
    from simloop.validation import run_validate

    return run_validate(ctx.spec, ctx.results["sweep"], workers=ctx.workers, cache=ctx.solves,
                        progress=ctx.progress, convergence=ctx.convergence)


#: The study's stages in order: (name, function). Later stages read earlier results from
#: ``ctx.results[name]``; the sweep is always first and shared by all.
STAGES: list[tuple[str, Callable[[StudyContext], object]]] = [
    ("sweep", _stage_sweep),
    ("tune", _stage_tune),
    ("validate", _stage_validate),
]


@dataclass(frozen=True)
class StudyResult:
    """Everything one study produced.

    Attributes
    ----------
    spec : simloop.spec.Spec
    results : dict
        Stage name → that stage's result (``"sweep"``: SweepResult, ``"tune"``: TuneResult,
        ``"validate"``: ValidationResult, and whatever later stages add).
    stage_seconds : dict
        Stage name → wall time. [s]
    solve_log : tuple of SolveLogEntry
        Every solve request of every stage, in order.
    spec_sha256 : str
        SHA-256 of the spec text (of the file as read, when there is a file).
    started_utc : str
        ISO 8601 start time (UTC).
    seconds : float
        Wall time of the whole study. [s]
    versions : dict
        simloop and solver library versions.
    """

    spec: object
    results: dict
    stage_seconds: dict
    solve_log: tuple[SolveLogEntry, ...]
    spec_sha256: str
    started_utc: str
    seconds: float
    versions: dict

    @property
    def sweep(self):
        return self.results["sweep"]

    @property
    def tune(self):
        return self.results.get("tune")

    @property
    def validation(self):
        return self.results.get("validate")

    def factorisations(self) -> dict:
        """Count of new solves per stage and the keys solved more than once (must be empty)."""
        per_stage: dict[str, int] = {}
        seen: dict[str, int] = {}
        for e in self.solve_log:
            if e.how == "solved":
                per_stage[e.stage] = per_stage.get(e.stage, 0) + 1
                seen[e.key] = seen.get(e.key, 0) + 1
        return {"per_stage": per_stage, "repeated": sorted(k for k, n in seen.items() if n > 1),
                "shared": sum(1 for e in self.solve_log if e.how == "memory")}


def spec_digest(spec, source_text: str | bytes | None = None) -> str:
    """SHA-256 (hex) of the spec's text: ``source_text`` when given, else the file it came from.

    Without either (a spec built in code) the digest is of the spec's field values.
    """
    if source_text is None and getattr(spec, "path", None) is not None:
        source_text = spec.path.read_bytes()
    if source_text is None:
        source_text = repr(dataclasses.replace(spec, path=None))
    data = source_text.encode() if isinstance(source_text, str) else source_text
    return hashlib.sha256(data).hexdigest()


def versions() -> dict:
    """Versions of simloop, the solver and the numerical libraries (package metadata; PyNEC is
    not imported here)."""
    out = {"simloop": __version__, "python": platform.python_version()}
    for dist in ("PyNEC", "numpy", "scipy", "scikit-rf", "matplotlib"):
        try:
            out[dist] = metadata.version(dist)
        except metadata.PackageNotFoundError:
            out[dist] = "not installed"
    return out


def run_study(spec, *, workers: int | None = None, cache: SolveCache | None = None,
              progress: Callable | None = None, band: str = "itu-1", field_v_per_m: float = 1e-3,
              convergence: bool = True, source_text: str | bytes | None = None,
              stages=None) -> StudyResult:
    """Run every stage of :data:`STAGES` on one spec, sharing every MoM solve.

    Parameters
    ----------
    spec : simloop.spec.Spec
    workers : int, optional
        Worker processes for the MoM solves.
    cache : SolveCache, optional
        On-disk store; solves are shared in memory whether or not one is given.
    progress : callable, optional
        ``progress(stage, done, total)`` for the MoM solve stages.
    band : str
        Band plan for tune (``itu-1``, ``itu-2``, ``itu-3`` or ``START:STOP:STEP``).
    field_v_per_m : float
        Incident field for the tuner voltage. [V/m]
    convergence : bool
        Run validate's mesh-convergence reruns.
    source_text : str or bytes, optional
        The spec text, for the digest (default: the spec's file).
    stages : list, optional
        (name, function) pairs to run instead of :data:`STAGES`.

    Returns
    -------
    StudyResult
    """
    import math

    from simloop.errors import SpecError
    from simloop.tuning import band_plan

    band_plan(band)  # bad options fail before the long work: SpecError("--band", ...)
    if not (field_v_per_m > 0 and math.isfinite(field_v_per_m)):
        raise SpecError("--field", f"{field_v_per_m} must be a field strength > 0 in V/m (e.g. 1e-3)")
    t0 = time.monotonic()
    started = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
    digest = spec_digest(spec, source_text)  # before any long work: an unreadable file fails now
    shared = SharedSolves(cache)
    ctx = StudyContext(spec=spec, solves=shared, workers=workers, progress=progress, band=band,
                       field_v_per_m=field_v_per_m, convergence=convergence)
    seconds = {}
    for name, stage in (STAGES if stages is None else stages):
        shared.stage = name
        t = time.monotonic()
        ctx.results[name] = stage(ctx)
        seconds[name] = time.monotonic() - t
    return StudyResult(spec=spec, results=dict(ctx.results), stage_seconds=seconds,
                       solve_log=tuple(shared.log), spec_sha256=digest, started_utc=started,
                       seconds=time.monotonic() - t0, versions=versions())
