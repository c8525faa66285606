"""Files of an exploration: the resume log, ``explore.csv``, ``explore.json`` and ``explore.png``.

The resume log ``explore-rows.jsonl`` is append-only: one JSON line per finished design,
``{"hash", "values", "row"}``, flushed and synced as each design finishes, so an interrupted
exploration keeps every row it wrote (a torn last line is ignored on reading).
"""

from __future__ import annotations

import csv
import json
import math
import os
from pathlib import Path

import numpy as np

from simloop.explore import OBJECTIVES, Axis, axis_numeric, objective_value, pareto_front

ROWS_FILE = "explore-rows.jsonl"

# Display of SI axis values: unit → (shown unit, divisor).
_DISPLAY = {"m": ("m", 1.0), "Hz": ("kHz", 1e3), "F": ("pF", 1e-12), "H": ("µH", 1e-6), "S/m": ("S/m", 1.0),
            "deg": ("deg", 1.0), "Ω": ("Ω", 1.0), "": ("", 1.0)}


# --------------------------------------------------------------------------------------------
# The resume log
# --------------------------------------------------------------------------------------------

def read_rows(out_dir) -> dict:
    """Rows already finished in ``out_dir``: design hash → row (later lines win)."""
    path = Path(out_dir) / ROWS_FILE
    rows = {}
    if not path.exists():
        return rows
    for line in path.read_text().splitlines():
        try:
            rec = json.loads(line)
            rows[rec["hash"]] = rec["row"]
        except (json.JSONDecodeError, KeyError, TypeError):
            continue  # a line torn by an interruption
    return rows


def append_row(out_dir, design, axes, row) -> None:
    """Append one finished design to the resume log, synced to disk."""
    path = Path(out_dir) / ROWS_FILE
    path.parent.mkdir(parents=True, exist_ok=True)
    rec = {"hash": design.hash, "values": {a.key: v for a, v in zip(axes, design.values)}, "row": row}
    torn = path.exists() and path.stat().st_size > 0 and not path.read_bytes().endswith(b"\n")
    with open(path, "a") as fh:
        # A line torn by an interruption is closed first, so it cannot swallow this record.
        fh.write(("\n" if torn else "") + json.dumps(rec, allow_nan=False, default=_jsonable) + "\n")
        fh.flush()
        os.fsync(fh.fileno())


def _jsonable(x):
    if isinstance(x, np.generic):
        return x.item()
    raise TypeError(f"{type(x).__name__} is not JSON data")


def keep_on_resume(row: dict) -> bool:
    """A finished row is kept unless its failure may not recur (solver, worker)."""
    return row.get("error_kind") in (None, "spec")


# --------------------------------------------------------------------------------------------
# The table
# --------------------------------------------------------------------------------------------

def table(designs, axes, rows: dict) -> list[dict]:
    """One record per design, in design order: its hash, its varied values, then its row."""
    out = []
    for d in designs:
        row = rows.get(d.hash)
        if row is None:
            continue
        out.append({"design": d.hash, **{a.key: v for a, v in zip(axes, d.values)}, **row})
    return out


def _khz(x):
    return None if x is None else round(x / 1e3, 3)


def _csv_record(rec: dict, axes, boost: bool = False) -> dict:
    s = rec.get("solves") or {}
    out = {"design": rec["design"]}
    for a in axes:
        out[a.key] = a.label(rec[a.key])
    ok = rec.get("error") is None
    out["status"] = "ok" if ok else "error"
    out["coverage_pct"] = round(100 * rec["coverage"], 2) if ok else None
    out["channels_covered"] = rec.get("channels_covered")
    out["channels"] = rec.get("channels")
    out["gap_khz"] = _khz(rec.get("gap_hz"))
    out["gaps_khz"] = "; ".join(f"{a / 1e3:.0f}-{b / 1e3:.0f}" for a, b in rec.get("gaps_hz") or [])
    for where in ("bottom", "middle", "top"):
        q = rec.get(f"q_{where}")
        out[f"q_{where}"] = None if q is None else round(q, 1)
        out[f"bandwidth_{where}_khz"] = _khz(rec.get(f"bandwidth_{where}_hz"))
    out["q_median"] = None if rec.get("q_median") is None else round(rec["q_median"], 1)
    if boost:
        for key in ("boost_bottom_db", "boost_middle_db", "boost_top_db", "boost_median_db"):
            out[key] = None if rec.get(key) is None else round(rec[key], 2)
    out["verdict"] = rec.get("verdict")
    srf = rec.get("self_resonance_hz")
    out["self_resonance_mhz"] = None if srf is None else round(srf / 1e6, 4)
    out["segments"] = rec.get("segments")
    for role in ("circuit", "direct", "check", "total", "cached"):
        out[f"solves_{role}"] = s.get(role)
    rt = rec.get("runtime_s")
    out["runtime_s"] = None if rt is None else round(rt, 2)
    out["error"] = rec.get("error") or ""
    return out


def write_csv(path, records, axes) -> Path:
    boost = any("boost_median_db" in r for r in records)
    rows = [_csv_record(r, axes, boost) for r in records]
    path = Path(path)
    with open(path, "w", newline="") as fh:
        if rows:
            w = csv.DictWriter(fh, fieldnames=list(rows[0]))
            w.writeheader()
            for r in rows:
                w.writerow({k: "" if v is None else v for k, v in r.items()})
    return path


def _clean(x):
    if isinstance(x, float) and not math.isfinite(x):
        return None
    if isinstance(x, dict):
        return {k: _clean(v) for k, v in x.items()}
    if isinstance(x, list):
        return [_clean(v) for v in x]
    return x


def rank(records, objective: str) -> list[int]:
    """Indices of the solved designs, best first: the highest objective, and among equals the
    highest value of its Pareto partner (Q for coverage, coverage otherwise)."""
    obj = np.array([objective_value(r, objective) for r in records], dtype=float)
    partner = "coverage" if objective != "coverage" else pareto_against(objective)
    second = np.array([objective_value(r, partner) for r in records], dtype=float)
    order = np.lexsort((-np.nan_to_num(second, nan=-np.inf), -np.nan_to_num(obj, nan=-np.inf)))
    return [int(i) for i in order if np.isfinite(obj[i])]


def pareto_against(objective: str) -> str:
    """The objective plotted against coverage on the Pareto front: the chosen one, or Q."""
    return objective if objective != "coverage" else "q"


def budget_totals(records) -> dict:
    """Factorisations of all designs of this run, by role (cached solves counted apart)."""
    tot = {"circuit": 0, "direct": 0, "check": 0, "total": 0, "cached": 0}
    for r in records:
        for k in tot:
            tot[k] += (r.get("solves") or {}).get(k, 0) or 0
    return tot


def summary(records, objective: str) -> dict:
    """Best design, the Pareto front of coverage against Q, counts and the budget."""
    cov = np.array([objective_value(r, "coverage") for r in records])
    q = np.array([objective_value(r, pareto_against(objective)) for r in records])
    front = pareto_front(cov, q)
    order = rank(records, objective)
    best = order[0] if order else None
    return {
        "objective": objective,
        "objective_column": OBJECTIVES[objective][0],
        "designs": len(records),
        "failed": sum(r.get("error") is not None for r in records),
        "best": records[best]["design"] if best is not None else None,
        "pareto_against": pareto_against(objective),
        "pareto": [records[i]["design"] for i in front],
        "solves": budget_totals(records),
    }


def write_json(path, records, axes, meta: dict, summ: dict) -> Path:
    doc = {**meta, "axes": [{"key": a.key, "values": list(a.values), "unit": a.unit} for a in axes],
           "summary": summ, "designs": records}
    path = Path(path)
    path.write_text(json.dumps(_clean(doc), indent=1, allow_nan=False, default=_jsonable))
    return path


def format_summary(records, axes, summ: dict, top: int = 5) -> str:
    """Text for the terminal: the best designs, the Pareto front and the solve budget."""
    obj = summ["objective"]
    ok = [records[i] for i in rank(records, obj)]
    lines = [f"{len(records)} designs, {summ['failed']} failed; ranked by {OBJECTIVES[obj][1]}"]
    for r in ok[:top]:
        vals = ", ".join(f"{a.key}={a.label(r[a.key])}" for a in axes)
        q = r.get("q_median")
        q_text = "—" if q is None else f"{q:.0f}"
        gap = f", gap {r['gap_hz'] / 1e3:.0f} kHz" if r["gaps_hz"] else ""
        b = r.get("boost_median_db")
        boost = "" if b is None else f", median boost {b:.1f} dB"
        lines.append(f"  {vals}: coverage {100 * r['coverage']:.1f} %, median Q {q_text}{boost}, "
                     f"{r['verdict']}{gap}")
    lines.append(f"Pareto front (coverage against {_short(summ['pareto_against'])}): "
                 f"{len(summ['pareto'])} designs")
    for r in records:
        if r.get("error") is not None and r.get("error_kind") == "spec":
            vals = ", ".join(f"{a.key}={a.label(r[a.key])}" for a in axes)
            lines.append(f"  cannot be built: {vals}: {r['error'].splitlines()[0]}")
            break
    s = summ["solves"]
    lines.append(f"solve budget: {s['circuit']} circuit fills, {s['total']} MoM factorisations (direct "
                 f"{s['direct']}, cross-check {s['check']}); {s['cached']} of them came from the cache")
    return "\n".join(lines)


# --------------------------------------------------------------------------------------------
# The figure
# --------------------------------------------------------------------------------------------

def _axis_label(axis: Axis) -> tuple[str, float]:
    unit, div = _DISPLAY.get(axis.unit, (axis.unit, 1.0))
    return (f"{axis.key} [{unit}]" if unit else axis.key), div


def _design_label(rec, axes) -> str:
    return ", ".join(f"{a.key.split('.')[-1]} {a.label(rec[a.key])}" for a in axes if len(a.values) > 1)


def _short(objective: str) -> str:
    """An objective's name in titles."""
    return {"coverage": "band coverage", "q": "median loaded Q", "boost": "median boost"}.get(objective, objective)


def _integer_ticks(ax, *axes):
    from matplotlib.ticker import MaxNLocator

    for axis, target in zip(axes, (ax.xaxis, ax.yaxis)):
        if all(isinstance(v, int) for v in axis.values):
            target.set_major_locator(MaxNLocator(integer=True))


def _objective_panel(ax, records, axes, objective, best_design=None):
    """The objective over the first one or two ordered axes (best over the other axes)."""
    ordered = [a for a in axes if a.numeric is not None]
    _column, meaning = OBJECTIVES[objective]
    name = _short(objective)
    scale = 100.0 if objective == "coverage" else 1.0
    label = "band channels tuned [%]" if objective == "coverage" else meaning
    val = np.array([objective_value(r, objective) for r in records]) * scale
    if len(ordered) >= 2:
        ax_x, ax_y = ordered[:2]
        (xl, dx), (yl, dy) = _axis_label(ax_x), _axis_label(ax_y)
        pts = {}
        for r, v in zip(records, val):
            key = (axis_numeric(ax_x, r[ax_x.key]) / dx, axis_numeric(ax_y, r[ax_y.key]) / dy)
            pts.setdefault(key, []).append(v)
        xy = np.array(list(pts))
        best = np.array([np.nanmax(v) if np.any(np.isfinite(v)) else np.nan for v in pts.values()])
        good = np.isfinite(best)
        sc = ax.scatter(xy[good, 0], xy[good, 1], c=best[good], cmap="viridis", s=260, marker="s",
                        edgecolors="k", linewidths=0.4)
        if np.any(~good):
            ax.scatter(xy[~good, 0], xy[~good, 1], marker="x", color="0.4", s=60, label="no design solved")
        for (x, y), b in zip(xy[good], best[good]):
            ax.annotate(f"{b:.0f}", (x, y), ha="center", va="center", fontsize=7,
                        color="w" if b < np.nanmax(best) * 0.6 else "k")
        ax.figure.colorbar(sc, ax=ax, label=label)
        best_rec = next((r for r in records if r["design"] == best_design), None)
        if best_rec is not None:
            ax.scatter(axis_numeric(ax_x, best_rec[ax_x.key]) / dx, axis_numeric(ax_y, best_rec[ax_y.key]) / dy,
                       s=420, marker="s", facecolors="none", edgecolors="tab:red", linewidths=1.5)
        _integer_ticks(ax, ax_x, ax_y)
        ax.set_xlabel(xl)
        ax.set_ylabel(yl)
        others = [a.key for a in axes if a not in (ax_x, ax_y) and len(a.values) > 1]
        title = f"{name} over {ax_x.key} and {ax_y.key}\n("
        title += f"best over {', '.join(others)}; " if others else ""
        ax.set_title(title + "red: the best design)", fontsize=9)
        if np.any(~good):
            ax.legend(fontsize=7, loc="best")
        return
    if len(ordered) == 1:
        ax_x = ordered[0]
        xl, dx = _axis_label(ax_x)
        rest = [a for a in axes if a is not ax_x]
        groups = {}
        for r, v in zip(records, val):
            g = ", ".join(f"{a.key}={a.label(r[a.key])}" for a in rest) or "designs"
            groups.setdefault(g, []).append((axis_numeric(ax_x, r[ax_x.key]) / dx, v))
        for g, pts in groups.items():
            pts.sort()
            ax.plot([p[0] for p in pts], [p[1] for p in pts], "o-", label=g)
        _integer_ticks(ax, ax_x)
        ax.set_xlabel(xl)
        ax.set_ylabel(label)
        ax.set_title(f"{name} against {ax_x.key}", fontsize=9)
        ax.legend(fontsize=7, loc="best")
        ax.grid(alpha=0.3)
        return
    ax.bar(np.arange(len(records)), np.nan_to_num(val))
    ax.set_xticks(np.arange(len(records)), [_design_label(r, axes) for r in records], rotation=60,
                  ha="right", fontsize=6)
    ax.set_ylabel(label)
    ax.set_title(f"{name} per design", fontsize=9)


def _pareto_panel(ax, records, axes, summ):
    other = summ["pareto_against"]
    cov = np.array([objective_value(r, "coverage") for r in records]) * 100
    q = np.array([objective_value(r, other) for r in records])
    colours = {"ok": "tab:green", "caution": "tab:orange", "unreliable": "tab:red"}
    for verdict, colour in colours.items():
        sel = np.array([r.get("verdict") == verdict for r in records], dtype=bool) & np.isfinite(q)
        if np.any(sel):
            ax.scatter(cov[sel], q[sel], color=colour, s=25, label=f"verdict {verdict}", zorder=2)
    index = {r["design"]: i for i, r in enumerate(records)}
    front = [index[h] for h in summ["pareto"]]
    if front:
        ax.plot(cov[front], q[front], "k-", lw=1, zorder=1)
        ax.scatter(cov[front], q[front], s=80, facecolors="none", edgecolors="k", zorder=3,
                   label="Pareto front")
        right = np.nanmax(cov[front])
        for i in front:
            left_side = cov[i] > 0.7 * right  # labels of the right-hand points go to their left
            ax.annotate(_design_label(records[i], axes), (cov[i], q[i]), fontsize=6,
                        xytext=(-4 if left_side else 4, 4), textcoords="offset points",
                        ha="right" if left_side else "left")
    ax.set_xlabel("band channels tuned [%]")
    ax.set_ylabel(OBJECTIVES[other][1])
    ax.set_title(f"coverage against {_short(other)}: the Pareto front (up and right is better)", fontsize=9)
    ax.grid(alpha=0.3)
    if ax.get_legend_handles_labels()[0]:
        ax.legend(fontsize=7, loc="best")
    else:
        ax.text(0.5, 0.5, "no design tunes any channel", transform=ax.transAxes, ha="center")


def plot_explore(path, records, axes, summ, title: str) -> Path:
    """``explore.png``: the objective over the varied axes, and coverage against Q."""
    from matplotlib.figure import Figure  # no pyplot: headless without choosing a backend

    fig = Figure(figsize=(13, 5.2), layout="constrained")
    a1, a2 = fig.subplots(1, 2)
    _objective_panel(a1, records, axes, summ["objective"], summ["best"])
    _pareto_panel(a2, records, axes, summ)
    fig.suptitle(title, fontsize=10)
    fig.savefig(path, dpi=120)
    return Path(path)
