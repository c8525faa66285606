"""Study: sweep, tune, validate, couple and pattern in one pass that shares every MoM solve.

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

__all__ = ["STAGES", "SharedSolves", "SolveLogEntry", "StageFailure", "StudyContext", "StudyResult",
           "run_study", "spec_digest", "versions"]


@dataclass(frozen=True)
class SolveLogEntry:
    """One request for a solve during a study.

    ``stage`` is the study stage that asked; ``key`` the content hash of one solve piece (mesh,
    environment, frequency, excitation and observation); ``how`` is ``"solved"`` (computed in
    this study), ``"memory"`` (made earlier in this study) or ``"disk"`` (found in the on-disk
    cache). ``group`` identifies what a factorisation depends on (mesh, environment and
    frequency, without the excitation and observation): pieces of one group solved together
    share one factorisation, so a group solved in two stages is a frequency factorised twice.
    ``frequency_hz`` is that frequency [Hz] (NaN when unknown).
    """

    stage: str
    key: str
    how: str
    group: str = ""
    frequency_hz: float = float("nan")


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
        self.groups: dict[str, tuple[str, float]] = {}  # piece key -> (group, frequency [Hz])

    def key(self, mesh_digest: str, env: dict, frequency_hz: float) -> str:
        """The cache's own key (same entries on disk), remembering the piece's factorisation group."""
        key = self.disk.key(mesh_digest, env, frequency_hz) if self.disk is not None else \
            super().key(mesh_digest, env, frequency_hz)
        base = {k: v for k, v in env.items() if k not in ("excitation", "observation")}
        group = super().key(mesh_digest, base, frequency_hz)[:16]
        self.groups[key] = (group, float(frequency_hz))
        return key

    def _entry(self, key: str, how: str) -> SolveLogEntry:
        group, f = self.groups.get(key, ("", float("nan")))
        return SolveLogEntry(self.stage, key, how, group, f)

    def get(self, key: str, expect=None) -> dict | None:
        if key in self.memory:
            self.log.append(self._entry(key, "memory"))
            return self.memory[key]
        hit = self.disk.get(key, expect) if self.disk is not None else None
        if hit is not None:
            self.memory[key] = hit
            self.log.append(self._entry(key, "disk"))
        return hit

    def put(self, key: str, value: dict) -> None:
        self.memory[key] = value
        self.log.append(self._entry(key, "solved"))
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


@dataclass(frozen=True)
class StageFailure:
    """A study stage that could not give a result (its solve failed): the stage's name and why.

    Only the optional stages (couple, pattern) end this way; the study's other results stand,
    the report says the stage is missing and why, and the CLI exits 1 unless ``--keep-going``.
    """

    stage: str
    reason: str


def _stage_couple(ctx: StudyContext):
    from simloop.coupling import run_couple

    return run_couple(ctx.spec, ctx.results["sweep"], ctx.results["tune"])


def _stage_pattern_solve(ctx: StudyContext):
    """The pattern's one factorisation, made before the sweep on the sweep's own mesh and
    environment: when the pattern frequency is also one the sweep (or validate) solves, they find
    its port matrix in the shared store instead of factorising that frequency a second time
    (the other way round, the pattern would need its far fields from a second factorisation).
    Returns the plan's result, or the SolverError (the pattern stage then retries and reports it).
    """
    from simloop.impedance import environment_from_spec, prepare
    from simloop.patterns import pattern_plan
    from simloop.solve import solve_plans
    from simloop.spec import PatternSpec

    ps = ctx.spec.pattern or PatternSpec()
    _, mesh, _ = prepare(ctx.spec)
    plan, _, _ = pattern_plan(mesh, environment_from_spec(ctx.spec), ps.frequency_hz, ps.elevation_deg)
    cb = (lambda d, t: ctx.progress("pattern", d, t)) if ctx.progress else None
    (res,) = solve_plans([plan], workers=ctx.workers, cache=ctx.solves, progress=cb)
    return res


def _stage_pattern(ctx: StudyContext):
    from simloop.errors import SolverError
    from simloop.patterns import run_pattern

    try:
        return run_pattern(ctx.spec, ctx.results["sweep"], workers=ctx.workers, cache=ctx.solves,
                           progress=ctx.progress)
    except SolverError as exc:
        return StageFailure("pattern", str(exc))


def _precheck(spec) -> None:
    """Spec problems of the later stages, found before the sweep (SpecError naming the key)."""
    from simloop.coupling import precheck
    from simloop.patterns import check_pattern_inputs

    precheck(spec)
    check_pattern_inputs(spec)


#: The study's stages in order: (name, function). Later stages read earlier results from
#: ``ctx.results[name]``; the sweep is shared by all. The pattern's factorisation runs first
#: (see :func:`_stage_pattern_solve`), the pattern itself after the sweep it needs.
STAGES: list[tuple[str, Callable[[StudyContext], object]]] = [
    ("pattern-solve", _stage_pattern_solve),
    ("sweep", _stage_sweep),
    ("tune", _stage_tune),
    ("validate", _stage_validate),
    ("couple", _stage_couple),
    ("pattern", _stage_pattern),
]


@dataclass(frozen=True)
class StudyResult:
    """Everything one study produced.

    Attributes
    ----------
    spec : simloop.spec.Spec
    results : dict
        Stage name → that stage's result (``"sweep"``: SweepResult, ``"tune"``: TuneResult,
        ``"validate"``: ValidationResult, ``"couple"``: CoupleResult, ``"pattern"``:
        PatternResult or :class:`StageFailure`, and whatever later stages add).
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

    def _ok(self, name: str):
        r = self.results.get(name)
        return None if isinstance(r, StageFailure) else r

    @property
    def couple(self):
        """The CoupleResult, or None when the stage did not run or failed."""
        return self._ok("couple")

    @property
    def pattern(self):
        """The PatternResult, or None when the stage did not run or failed."""
        return self._ok("pattern")

    @property
    def failures(self) -> tuple[StageFailure, ...]:
        """The stages that ran and failed."""
        return tuple(r for r in self.results.values() if isinstance(r, StageFailure))

    def factorisations(self) -> dict:
        """Factorisations per stage and what was solved twice (both must stay empty).

        ``per_stage``: distinct (mesh, environment, frequency) groups each stage solved (the
        pieces of one group solved together share a factorisation); ``repeated``: piece keys
        solved more than once; ``refactorised``: groups solved in more than one stage, i.e. a
        frequency factorised again; ``shared``: pieces handed over in memory.
        """
        per_stage: dict[str, set] = {}
        seen: dict[str, int] = {}
        stages_of: dict[str, set] = {}
        for e in self.solve_log:
            if e.how == "solved":
                group = e.group or e.key
                per_stage.setdefault(e.stage, set()).add(group)
                stages_of.setdefault(group, set()).add(e.stage)
                seen[e.key] = seen.get(e.key, 0) + 1
        return {"per_stage": {k: len(v) for k, v in per_stage.items()},
                "repeated": sorted(k for k, n in seen.items() if n > 1),
                "refactorised": sorted(g for g, s in stages_of.items() if len(s) > 1),
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
    if stages is None:
        _precheck(spec)
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
