"""Design-space exploration: many loop designs, each an independent sweep and tune.

A builder's question — which frame size, turn count and taps cover my band, and with how much
Q — is answered by varying keys of a spec over a grid (or a Latin-hypercube sample) and running
every design as its own task. A design is a pure function of its spec text: the task
(:func:`evaluate_design`) loads the text through the normal spec validation
(:func:`simloop.spec.loads`), sweeps and tunes it, and returns one row of plain data (no numpy,
no objects), so any :class:`concurrent.futures.Executor` can run it: a local process pool, or a
Dask distributed cluster through ``distributed.Client(address).get_executor()``. A design that
cannot be built or solved is a row with its error, never a dead run.

Each task runs the sweep's solves one at a time (``workers=1``): process pools do not nest, and
the designs are the parallel unit. Solver children are started from inside the task, so a Dask
worker must not be a daemon process (:data:`DAEMON_RULE`).

Rows are keyed by :func:`design_hash` (the spec text, the band plan and the code version), so a
rerun can skip every design already finished and, through the shared solve cache, every
frequency already solved.

The row builder is a list of column functions (:data:`COLUMNS`), each ``f(spec, sweep, tune) →
dict``; a new figure of merit is one more function in that list (the boost at the radio's rod,
:func:`boost_columns`, is one) and, to rank by it, one entry in :data:`OBJECTIVES`.
"""

from __future__ import annotations

import hashlib
import json
import math
import multiprocessing
import time
from collections import Counter
from concurrent.futures import as_completed
from dataclasses import dataclass
from itertools import product

import numpy as np

from simloop.errors import SimloopError, SpecError
from simloop.units import KINDS, as_written, parse_quantity

__all__ = [
    "Axis",
    "COLUMNS",
    "DAEMON_RULE",
    "Design",
    "OBJECTIVES",
    "SolveBudget",
    "design_hash",
    "designs_grid",
    "designs_sample",
    "dump_toml",
    "evaluate_design",
    "objective_value",
    "Vary",
    "build_axes",
    "pareto_front",
    "run_designs",
    "solve_budget",
]

#: Version of the row layout; part of the design hash, so a changed row is recomputed.
ROW_VERSION = "explore-row-3"
#: Largest number of designs one exploration may ask for (grid or sample).
MAX_DESIGNS = 10000
#: Why a design task cannot run in a daemonic worker, and what to do.
DAEMON_RULE = ("the Dask workers run as daemon processes, which may not start the solver's child "
               "processes; start them with DASK_DISTRIBUTED__WORKER__DAEMON=False (or "
               "dask.config.set({'distributed.worker.daemon': False}) before LocalCluster)")
_VARY_RULE = ('write KEY=START:STOP (whole numbers, every value), KEY=START:STOP:COUNT (COUNT values, '
              'ends included; quantities with units such as "0.5 m":"1 m":6) or KEY=V1,V2,... '
              '(a list, e.g. taps.turns=[3,5,7],[4,6,8])')


# --------------------------------------------------------------------------------------------
# Axes of the exploration (the command line reads --vary into Vary; here they are checked)
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class Axis:
    """One varied spec key and its values.

    Attributes
    ----------
    key : str
        Dotted spec key (``"frame.width"``).
    values : tuple
        TOML values in grid order (int, float, str or list), as written into each design.
    numeric : tuple of float or None
        Each value as a number for plots and sampling: SI for quantities (lengths in m), the
        number itself otherwise; None for values without an order (lists, choices).
    unit : str
        SI unit of ``numeric`` ("" for counts and plain numbers).
    continuous : tuple or None
        ``(low, high, unit, scale, kind)`` of a quantity range, which a sample may draw between
        the grid's values (low and high in SI; the value written is SI/scale in ``unit``).
    """

    key: str
    values: tuple
    numeric: tuple | None
    unit: str = ""
    continuous: tuple | None = None

    def label(self, value) -> str:
        """The value as the user would write it (strings unquoted)."""
        return value if isinstance(value, str) else as_written(value)


def _quantity_kind(value: str) -> str | None:
    for kind in KINDS:
        try:
            parse_quantity(value, kind)
            return kind
        except SpecError:
            continue
    return None


def _range_axis(key: str, option: str, ends: tuple, base_value, sampled: bool) -> Axis:
    a, b = ends[0], ends[1]
    count = None
    if len(ends) == 3:
        n = ends[2]
        if isinstance(n, bool) or not isinstance(n, int) or n < 2:
            raise SpecError(option, f"{key}: COUNT must be a whole number ≥ 2, got {as_written(n)}; {_VARY_RULE}")
        count = n
    if all(isinstance(v, int) and not isinstance(v, bool) for v in (a, b)):
        if a >= b:
            raise SpecError(option, f"{key}: start {a} must be below stop {b}")
        if count is None:
            values = tuple(range(a, b + 1))
        else:
            step = (b - a) / (count - 1)
            if isinstance(base_value, int) and step != int(step):
                raise SpecError(option, f"{key}: {a}:{b}:{count} does not give whole numbers "
                                        f"(step {step:g}); {key} takes whole numbers")
            values = tuple(int(v) if step == int(step) else float(v) for v in np.linspace(a, b, count))
        return Axis(key, values, tuple(float(v) for v in values))
    if all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in (a, b)):
        if a >= b:
            raise SpecError(option, f"{key}: start {a} must be below stop {b}")
        if count is None and not sampled:
            raise SpecError(option, f"{key}: a range of decimal numbers needs a COUNT; {_VARY_RULE}")
        values = tuple(float(v) for v in np.linspace(a, b, count or 2))
        return Axis(key, values, values, "", (float(a), float(b), "", 1.0, None))
    return _quantity_axis(key, option, str(a), str(b), count, sampled)


def _quantity_axis(key, option, a: str, b: str, count, sampled) -> Axis:
    kind = _quantity_kind(a)
    if kind is None or _quantity_kind(b) != kind:
        raise SpecError(option, f'{key}: "{a}":"{b}" are not two quantities of the same kind with units '
                                f'(such as "0.5 m":"1 m"); {_VARY_RULE}')
    lo, hi = parse_quantity(a, kind), parse_quantity(b, kind)
    if lo >= hi:
        raise SpecError(option, f'{key}: start "{a}" must be below stop "{b}"')
    if count is None and not sampled:
        raise SpecError(option, f'{key}: a range of quantities needs a COUNT ("{a}":"{b}":6); {_VARY_RULE}')
    unit = a.split(None, 1)[1] if " " in a.strip() else a.lstrip("+-.0123456789eE")
    scale = parse_quantity(f"1 {unit}", kind)
    si = np.linspace(lo, hi, count or 2)
    values = tuple(f"{v / scale:.6g} {unit}" for v in si)
    si_unit = {"length": "m", "frequency": "Hz", "capacitance": "F", "inductance": "H", "angle": "deg",
               "conductivity": "S/m", "resistance": "Ω"}[kind]
    return Axis(key, values, tuple(float(v) for v in si), si_unit, (lo, hi, unit, scale, kind))


def _list_axis(key: str, values: tuple) -> Axis:
    numbers = []
    for v in values:
        if isinstance(v, (int, float)) and not isinstance(v, bool):
            numbers.append(float(v))
        elif isinstance(v, str) and (kind := _quantity_kind(v)) is not None:
            numbers.append(parse_quantity(v, kind))
        else:
            numbers = None
            break
    return Axis(key, values, tuple(numbers) if numbers else None)


def _check_key(key: str, option: str) -> None:
    """The key exists in the spec schema (section and key), and is not the name."""
    # The section models are spec.py's structure stage; they are the only list of the keys.
    from simloop.spec import _SECTIONS

    section, _, leaf = key.partition(".")
    if section not in _SECTIONS or not leaf or "." in leaf:
        raise SpecError(option, f"{key!r} is not a spec key: write section.key with a section of "
                                f"{', '.join(_SECTIONS)}")
    fields = _SECTIONS[section].model_fields
    if leaf not in fields:
        raise SpecError(option, f"{key!r}: [{section}] has no key {leaf!r}; it takes {', '.join(fields)}")


def _check_values(axis: Axis, option: str, base: dict) -> None:
    """Each value passes the structure stage of its section (types, units, signs)."""
    from pydantic import ValidationError

    from simloop.spec import _SECTIONS, _structure_message

    section, _, leaf = axis.key.partition(".")
    for value in axis.values:
        table = {**base.get(section, {}), leaf: value}
        try:
            _SECTIONS[section].model_validate(table)
        except ValidationError as err:
            e = err.errors(include_url=False)[0]
            where = ".".join(str(p) for p in (section, *e["loc"]))
            raise SpecError(option, f"{axis.key} = {as_written(value)}: {where}: {_structure_message(e)}") from None


@dataclass(frozen=True)
class Vary:
    """One ``--vary`` as the command line read it: the key, and either a range (start, stop and
    optionally a count) or a list of values, each a TOML value (quantities as strings)."""

    key: str
    values: tuple
    is_range: bool


def build_axes(varies, base: dict, sampled: bool = False) -> tuple[Axis, ...]:
    """Axes from the ``--vary`` options, checked against the spec schema.

    Parameters
    ----------
    varies : sequence of Vary
    base : dict
        The base spec as TOML data (its values tell whole-number keys and fill sections).
    sampled : bool
        A random sample follows: quantity ranges may omit COUNT.

    Raises
    ------
    SpecError
        ``"--vary"``: unknown key, a key given twice, a bad range, or a value of the wrong type
        or unit (the rule is in the message). Nothing is solved before this check.
    """
    axes, seen, option = [], set(), "--vary"
    for v in varies:
        _check_key(v.key, option)
        if v.key in seen:
            raise SpecError(option, f"{v.key} is varied twice; give each key once")
        seen.add(v.key)
        section, _, leaf = v.key.partition(".")
        base_value = base.get(section, {}).get(leaf)
        if v.is_range:
            if not 2 <= len(v.values) <= 3 or isinstance(base_value, list):
                why = f"{v.key} takes a list per design" if isinstance(base_value, list) else "a range has 2 or 3 parts"
                raise SpecError(option, f"{v.key}: {why}; {_VARY_RULE}")
            axis = _range_axis(v.key, option, v.values, base_value, sampled)
        else:
            if not v.values:
                raise SpecError(option, f"{v.key} has no values; {_VARY_RULE}")
            axis = _list_axis(v.key, v.values)
        _check_values(axis, option, base)
        axes.append(axis)
    return tuple(axes)


# --------------------------------------------------------------------------------------------
# Designs
# --------------------------------------------------------------------------------------------

def _toml_scalar(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError(f"TOML has no {value!r} here")
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)  # a JSON string is a TOML basic string
    if isinstance(value, list):
        return "[" + ", ".join(_toml_scalar(v) for v in value) + "]"
    raise TypeError(f"cannot write {type(value).__name__} as a TOML value")


def dump_toml(data: dict, prefix: str = "") -> str:
    """TOML text of nested tables of scalars and arrays (the shape of a spec).

    Written here because the standard library reads TOML but does not write it; the round
    trip through :mod:`tomllib` is tested.
    """
    lines = [f"{k} = {_toml_scalar(v)}" for k, v in data.items() if not isinstance(v, dict)]
    for k, v in data.items():
        if isinstance(v, dict):
            lines += ["", f"[{prefix}{k}]", dump_toml(v, f"{prefix}{k}.").rstrip("\n")]
    return "\n".join(lines).strip("\n") + "\n"


@dataclass(frozen=True)
class Design:
    """One point of the exploration: its varied values and the spec text that defines it."""

    values: tuple  # one TOML value per axis
    spec_text: str
    hash: str


def design_hash(spec_text: str, band: str) -> str:
    """Key of a design's row: its spec text, the band plan and the code version (16 hex)."""
    import simloop
    from simloop.solve import SOLVER_VERSION

    blob = json.dumps([ROW_VERSION, simloop.__version__, SOLVER_VERSION, band, spec_text])
    return hashlib.sha256(blob.encode()).hexdigest()[:16]


def _design(base: dict, name: str, axes, values, band: str) -> Design:
    data = {k: (dict(v) if isinstance(v, dict) else v) for k, v in base.items()}
    data["name"] = name
    for axis, value in zip(axes, values):
        section, _, leaf = axis.key.partition(".")
        data.setdefault(section, {})[leaf] = value
    text = dump_toml(data)
    return Design(tuple(values), text, design_hash(text, band))


def _unique(designs) -> list[Design]:
    seen, out = set(), []
    for d in designs:
        if d.hash not in seen:
            seen.add(d.hash)
            out.append(d)
    return out


def designs_grid(base: dict, name: str, axes, band: str) -> list[Design]:
    """Every combination of the axes' values (the last axis varies fastest)."""
    n = math.prod(len(a.values) for a in axes)
    if n > MAX_DESIGNS:
        raise SpecError("--vary", f"the grid has {n} designs, more than {MAX_DESIGNS}; use --samples")
    return _unique(_design(base, name, axes, vals, band) for vals in product(*(a.values for a in axes)))


def _sample_value(axis: Axis, u: float):
    if axis.continuous is not None:
        lo, hi, unit, scale, _kind = axis.continuous
        v = lo + u * (hi - lo)
        return f"{v / scale:.4g} {unit}" if unit else float(f"{v:.6g}")
    return axis.values[min(int(u * len(axis.values)), len(axis.values) - 1)]


def designs_sample(base: dict, name: str, axes, band: str, samples: int, seed: int = 0) -> list[Design]:
    """A Latin-hypercube sample of the axes (scipy.stats.qmc; fixed seed, so a rerun resumes).

    Quantity and decimal ranges are drawn continuously between their ends; whole-number ranges
    and lists by index, each value equally likely.
    """
    from scipy.stats import qmc

    if not 1 <= samples <= MAX_DESIGNS:
        raise SpecError("--samples", f"{samples} must be between 1 and {MAX_DESIGNS}")
    u = qmc.LatinHypercube(d=len(axes), seed=seed).random(samples)
    return _unique(_design(base, name, axes, tuple(_sample_value(a, x) for a, x in zip(axes, row)), band)
                   for row in u)


def axis_numeric(axis: Axis, value) -> float | None:
    """A design's value on an axis as a number (SI for quantities), None without an order."""
    if isinstance(value, bool):
        return None
    if isinstance(value, (int, float)):
        return float(value)
    if isinstance(value, str) and (kind := _quantity_kind(value)) is not None:
        return parse_quantity(value, kind)
    return None


# --------------------------------------------------------------------------------------------
# The solve budget
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class SolveBudget:
    """Matrix factorisations a sweep needed, by role.

    ``circuit`` is the circuit solver's fill of its partial elements (one per geometry; its
    reduced-order model then costs a few small exact solves); ``direct`` the MoM solves at sweep
    points above NEC's floor and ``check`` the MoM cross-check solves above the floor when the
    whole band lies below it (both from :attr:`SweepResult.solves`); ``cached`` the MoM solves
    read from the cache instead of factorised; ``seconds`` the MoM solver time and
    ``circuit_seconds`` the circuit solver's. [s]
    """

    circuit: int
    direct: int
    check: int
    cached: int
    seconds: float
    circuit_seconds: float

    @property
    def total(self) -> int:
        """MoM factorisations (the expensive ones; each is one cache entry)."""
        return self.direct + self.check

    def describe(self) -> str:
        """One line: the factorisations by role."""
        cached = f"; {self.cached} of them read from the cache" if self.cached else ""
        return (f"solve budget: circuit fill {self.circuit} ({self.circuit_seconds:.1f} s), "
                f"{self.total} MoM factorisations (direct {self.direct}, cross-check {self.check}), "
                f"{self.seconds:.1f} s of MoM solver time{cached}")

    def as_dict(self) -> dict:
        return {"circuit": self.circuit, "direct": self.direct, "check": self.check,
                "total": self.total, "cached": self.cached, "seconds": self.seconds,
                "circuit_seconds": self.circuit_seconds}


def solve_budget(sweep) -> SolveBudget:
    """Count the factorisations of a :class:`~simloop.impedance.SweepResult` by role."""
    roles = Counter(r.role for r in sweep.solves)
    return SolveBudget(circuit=int(sweep.circuit is not None), direct=roles.get("direct", 0),
                       check=roles.get("check", 0), cached=sum(r.cached for r in sweep.solves),
                       seconds=float(sum(r.seconds for r in sweep.solves)),
                       circuit_seconds=float(sweep.circuit_seconds))


# --------------------------------------------------------------------------------------------
# The row of one design
# --------------------------------------------------------------------------------------------

def _finite(x) -> float | None:
    x = float(x)
    return x if math.isfinite(x) else None


def coverage_columns(spec, sweep, tune) -> dict:
    """Share of the band plan's channels some tap tunes, and the gaps. [-], [Hz]"""
    gaps = [[float(a), float(b)] for a, b in np.asarray(tune.gaps_hz).reshape(-1, 2)]
    return {"coverage": float(np.mean(tune.covered)),
            "channels": int(tune.covered.size),
            "channels_covered": int(np.sum(tune.covered)),
            "gap_hz": float(sum(b - a for a, b in gaps)),
            "gaps_hz": gaps}


def q_columns(spec, sweep, tune) -> dict:
    """Loaded Q and −3 dB bandwidth at the band's bottom, middle and top channel, and the median
    loaded Q over the covered channels (None where no tap tunes the channel). [-], [Hz]"""
    m = tune.frequencies_hz.size
    out = {}
    for where, j in (("bottom", 0), ("middle", m // 2), ("top", m - 1)):
        out[f"f_{where}_hz"] = float(tune.frequencies_hz[j])
        out[f"q_{where}"] = _finite(tune.q_loaded[j])
        out[f"bandwidth_{where}_hz"] = _finite(tune.bandwidth_hz[j])
    q = tune.q_loaded[tune.covered]
    out["q_median"] = _finite(np.median(q)) if q.size else None
    return out


def _grade(share_reliable: float) -> str:
    return "ok" if share_reliable == 1.0 else ("caution" if share_reliable >= 0.5 else "unreliable")


def verdict_columns(spec, sweep, tune) -> dict:
    """Verdict from the sweep's reliability, the worse of two grades: the share of reliable sweep
    points (all taps) and the share of reliable tuned channels (when any is tuned). Each is
    ``ok`` when all are reliable, ``caution`` when at least half are, else ``unreliable``."""
    sweep_ok = float(np.mean(sweep.reliable))
    tuned = int(np.sum(tune.covered))
    chan_ok = float(np.sum(tune.reliable)) / tuned if tuned else None
    grades = [_grade(sweep_ok)] + ([_grade(chan_ok)] if chan_ok is not None else [])
    verdict = max(grades, key=["ok", "caution", "unreliable"].index)
    srf = np.asarray(sweep.self_resonance_hz, dtype=float)
    return {"verdict": verdict, "reliable_sweep": sweep_ok, "reliable_channels": chan_ok,
            "inductance_h": [float(x) for x in sweep.inductance_h],
            "self_resonance_hz": _finite(np.nanmin(srf)) if np.any(np.isfinite(srf)) else None,
            "segments": int(sweep.mesh.n_segments)}


def boost_columns(spec, sweep, tune) -> dict:
    """Boost of the tuned loop at the radio's rod (:func:`simloop.coupling.run_couple`) at the
    band's bottom, middle and top channel, and the median over the tuned channels; only when the
    spec has a ``[receiver]`` (no columns otherwise). [dB]

    The placement map of ``run_couple`` is not used here, so it runs on its coarsest grid.
    """
    if spec.receiver is None:
        return {}
    from simloop.coupling import run_couple

    couple = run_couple(spec, sweep, tune, map_points=3)
    db = np.asarray(couple.boost_db, dtype=float)
    m = db.size
    out = {f"boost_{where}_db": _finite(db[j]) for where, j in (("bottom", 0), ("middle", m // 2), ("top", m - 1))}
    ok = db[np.isfinite(db)]
    out["boost_median_db"] = _finite(np.median(ok)) if ok.size else None
    return out


def budget_columns(spec, sweep, tune) -> dict:
    """The sweep's factorisations by role (:func:`solve_budget`)."""
    return {"solves": solve_budget(sweep).as_dict()}


#: The row builder: each function maps (spec, sweep, tune) to columns of the design's row.
COLUMNS = [coverage_columns, q_columns, boost_columns, verdict_columns, budget_columns]

#: Objectives a design can be ranked by (``--objective``): its column, and what it means. A
#: column function added to :data:`COLUMNS` becomes an objective with one entry here; the Pareto
#: front plots coverage against the chosen objective (against Q when ranking by coverage).
OBJECTIVES = {
    "coverage": ("coverage", "share of the band's channels tuned [-]"),
    "q": ("q_median", "median loaded Q over the tuned channels [-]"),
    "boost": ("boost_median_db", "median boost at the radio over the tuned channels [dB]"),
}


def objective_value(row: dict, objective: str) -> float:
    """The row's value of an objective (NaN for a failed design or a missing value)."""
    v = row.get(OBJECTIVES[objective][0]) if row.get("error") is None else None
    return float(v) if v is not None else math.nan


def _error_row(kind: str, exc: BaseException) -> dict:
    message = str(exc) if isinstance(exc, SimloopError) else f"{type(exc).__name__}: {exc}"
    return {"error": message, "error_kind": kind}


def evaluate_design(spec_text: str, band: str, cache_root: str | None = None) -> dict:
    """Load, sweep and tune one design; its row as plain data (JSON types only).

    The task of an exploration: a pure function of its arguments, run in any worker process.
    The sweep's solves run one at a time (``workers=1``; process pools do not nest). Errors are
    returned, never raised: ``error_kind`` is ``"spec"`` (the design cannot be built: the spec's
    rules, kept on a rerun) or ``"solve"`` (the solver or tuning failed: retried on a rerun).

    Parameters
    ----------
    spec_text : str
        The design's spec (TOML).
    band : str
        Band plan for the tuning (``itu-1``… or ``START:STOP:STEP``).
    cache_root : str, optional
        Folder of the shared solve cache.
    """
    t0 = time.perf_counter()
    from simloop.impedance import prepare, run_sweep
    from simloop.spec import loads
    from simloop.tuning import run_tune

    try:
        spec = loads(spec_text, source="<design>")
        prepare(spec)  # geometry and mesh rules: a design that cannot be modelled is a spec error
    except SpecError as exc:
        return {**_error_row("spec", exc), "runtime_s": time.perf_counter() - t0}
    try:
        if multiprocessing.current_process().daemon:
            raise SimloopError(DAEMON_RULE)
        from simloop.solve import SolveCache

        cache = SolveCache(cache_root) if cache_root else None
        sweep = run_sweep(spec, workers=1, cache=cache)
        tune = run_tune(spec, sweep, band=band)
        row = {"error": None, "error_kind": None}
        for columns in COLUMNS:
            row.update(columns(spec, sweep, tune))
    except Exception as exc:  # noqa: BLE001 - a failed design is a row, never a dead run
        return {**_error_row("solve", exc), "runtime_s": time.perf_counter() - t0}
    row["runtime_s"] = time.perf_counter() - t0
    return row


# --------------------------------------------------------------------------------------------
# Running and ranking
# --------------------------------------------------------------------------------------------

def run_designs(designs, executor, band: str, cache_root: str | None = None, on_row=None, progress=None) -> dict:
    """Submit every design to ``executor`` and collect its row as it finishes.

    Parameters
    ----------
    designs : sequence of Design
        Designs to run (those already finished are left out by the caller).
    executor : concurrent.futures.Executor
        A process pool, or ``distributed.Client(address).get_executor()``.
    band : str
    cache_root : str, optional
    on_row : callable, optional
        ``on_row(design, row)`` as each design finishes (the caller stores it for a resume).
    progress : callable, optional
        ``progress(done, total)``.

    Returns
    -------
    dict
        design hash → row. A task that died (its worker lost) is an error row too.
    """
    futures = {executor.submit(evaluate_design, d.spec_text, band, cache_root): d for d in designs}
    rows, done = {}, 0
    for fut in as_completed(futures):
        d = futures[fut]
        try:
            row = fut.result()
        except Exception as exc:  # noqa: BLE001 - the worker, not the design, failed
            row = {**_error_row("worker", exc), "runtime_s": None}
        rows[d.hash] = row
        done += 1
        if on_row:
            on_row(d, row)
        if progress:
            progress(done, len(futures))
    return rows


def pareto_front(x, y) -> np.ndarray:
    """Indices of the points no other point beats in both x and y (both maximised), by x.

    A point is dominated when another is at least as good in both and better in one. NaN
    points are never on the front.
    """
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    ok = np.flatnonzero(np.isfinite(x) & np.isfinite(y))
    front = []
    for i in ok:
        beaten = (x[ok] >= x[i]) & (y[ok] >= y[i]) & ((x[ok] > x[i]) | (y[ok] > y[i]))
        if not np.any(beaten):
            front.append(i)
    return np.array(sorted(front, key=lambda i: (x[i], -y[i])), dtype=int)
