"""simloop explore: --vary parsing, design generation, error rows, resume, the solve budget, and
the same rows from a Dask LocalCluster as from the local process pool.

Designs are tiny (2–4 turns, draft mesh, 5 sweep points) so that the whole file runs in well
under a minute on two shared cores.

Sources: Latin hypercube sampling, McKay, Beckman & Conover 1979 (docs/references.md, Explore);
the Pareto front's definition (same place) on a hand-worked set; Python's tomllib (TOML 1.0.0) as
the reader our spec writer must round-trip through; ASTM B258 for the 20 AWG diameter (0.812 mm)
that makes a 0.5 mm pitch impossible; the solve cache's own entries as the independent count of
factorisations; the local process pool's rows as the reference for the Dask cluster's.
"""

from __future__ import annotations

import csv
import json
import tomllib
from pathlib import Path

import numpy as np
import pytest

from simloop.cli import main, parse_vary
from simloop.errors import SpecError
from simloop.explore import (design_hash, designs_grid, designs_sample, dump_toml, evaluate_design,
                             pareto_front, solve_budget)
from tests.conftest import write_spec, receiver_table

TINY = """
name = "tiny"
[frame]
width = "0.8 m"
height = "0.6 m"
[winding]
style = "stacked"
turns = 3
pitch = "15 mm"
[wire]
gauge = "20 AWG"
[taps]
turns = [3]
[leads]
offset = "6 cm"
[sweep]
start = "520 kHz"
stop = "1710 kHz"
points = 5
[mesh]
quality = "draft"
[tuner]
kind = "range"
min = "12 pF"
max = "1000 pF"
"""

BASE = tomllib.loads(TINY)
REPO = Path(__file__).resolve().parents[1]


# --------------------------------------------------------------------------------------------
# --vary
# --------------------------------------------------------------------------------------------

def test_integer_range_takes_every_value():
    (axis,) = parse_vary(["winding.turns=8:14"], BASE)
    assert axis.values == (8, 9, 10, 11, 12, 13, 14)


def test_quantity_range_with_count_keeps_the_unit():
    (axis,) = parse_vary(['frame.width="0.5 m":"1 m":6'], BASE)
    assert axis.values == ("0.5 m", "0.6 m", "0.7 m", "0.8 m", "0.9 m", "1 m")
    # SI values for the plot axes: 0.5 … 1 m in steps of 0.1 m (exact decimal arithmetic).
    assert axis.numeric == pytest.approx([0.5, 0.6, 0.7, 0.8, 0.9, 1.0], rel=1e-12, abs=0)
    assert axis.unit == "m"


def test_list_of_tap_sets():
    (axis,) = parse_vary(["taps.turns=[2],[3],[2,3]"], BASE)
    assert axis.values == ([2], [3], [2, 3])
    assert axis.numeric is None


@pytest.mark.parametrize("text,fragment", [
    ("winding.turnz=2:4", "[winding] has no key 'turnz'"),
    ("coil.turns=2:4", "not a spec key"),
    ("winding.turns=4:2", "must be below stop"),
    ("winding.turns=2:5:3", "does not give whole numbers"),
    ("winding.turns=2:4:1", "COUNT must be a whole number ≥ 2"),
    ('frame.width="0.5 m":"1 pF":3', "not two quantities of the same kind"),
    ('frame.width="0.5 m":"1 m"', "needs a COUNT"),
    ("taps.turns=2:4", "takes a list per design"),
    ("winding.turns=2:4:6:8", "a range has 2 or 3 parts"),
    ('frame.width="0.5 kg","1 m"', "frame.width"),
    ("winding.style=stacked,helix", "is not one of"),
    ("winding.turns", "has no values"),
])
def test_bad_vary_is_a_spec_error_naming_the_option(text, fragment):
    with pytest.raises(SpecError) as err:
        parse_vary([text], BASE)
    assert err.value.key == "--vary"
    assert fragment in str(err.value)


def test_bad_vary_exits_2_before_any_solve(tmp_path, capsys):
    spec = write_spec(tmp_path, TINY)
    out = tmp_path / "out"
    assert main(["explore", str(spec), "--vary", "winding.turns=4:2", "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "--vary" in err and "must be below stop" in err
    assert not out.exists(), "nothing is solved or written for bad input"


# --------------------------------------------------------------------------------------------
# Designs
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("path", sorted((REPO / "geometries").glob("*.toml")) + [REPO / "simloop/data/demo-loop.toml"],
                         ids=lambda p: p.name)
def test_toml_writer_round_trips_through_tomllib(path):
    # The standard library's TOML reader is the reference for what our writer wrote.
    data = tomllib.loads(path.read_text())
    assert tomllib.loads(dump_toml(data)) == data


def test_grid_is_the_cartesian_product_with_the_values_in_each_spec():
    axes = parse_vary(["winding.turns=2:3", 'frame.width="0.6 m":"1 m":3'], BASE)
    designs = designs_grid(BASE, "tiny", axes, "itu-1")
    assert len(designs) == 6
    assert len({d.hash for d in designs}) == 6
    for d in designs:
        data = tomllib.loads(d.spec_text)
        assert (data["winding"]["turns"], data["frame"]["width"]) == d.values
        assert data["name"] == "tiny"


def test_latin_hypercube_puts_one_sample_in_each_stratum():
    # The defining property of a Latin hypercube sample (McKay, Beckman & Conover 1979): with N
    # samples, each of the N equal intervals of every axis holds exactly one sample.
    axes = parse_vary(['frame.width="0.5 m":"1 m"', 'tuner.max="300 pF":"900 pF"'], BASE, sampled=True)
    designs = designs_sample(BASE, "tiny", axes, "itu-1", samples=8, seed=3)
    assert len(designs) == 8
    widths = np.array([float(tomllib.loads(d.spec_text)["frame"]["width"].split()[0]) for d in designs])
    strata = np.floor((widths - 0.5) / 0.5 * 8).astype(int)
    assert sorted(strata) == list(range(8))
    again = designs_sample(BASE, "tiny", axes, "itu-1", samples=8, seed=3)
    assert [d.hash for d in again] == [d.hash for d in designs], "a fixed seed gives the same designs"


def test_hash_depends_on_the_band():
    assert design_hash(TINY, "itu-1") != design_hash(TINY, "itu-2")


def test_pareto_front_of_a_hand_worked_set():
    # (coverage, Q): (0.5, 100) and (1, 50) and (0.8, 80) are non-dominated; (0.5, 60) is beaten
    # by (0.5, 100), (0.7, 70) by (0.8, 80); NaN never counts.
    x = [0.5, 1.0, 0.8, 0.5, 0.7, np.nan]
    y = [100, 50, 80, 60, 70, 200]
    assert list(pareto_front(x, y)) == [0, 2, 1]


# --------------------------------------------------------------------------------------------
# One design
# --------------------------------------------------------------------------------------------

def test_impossible_design_is_an_error_row():
    # 20 AWG is 0.812 mm thick (ASTM B258): a 0.5 mm pitch makes the turns touch.
    text = TINY.replace('pitch = "15 mm"', 'pitch = "0.5 mm"')
    row = evaluate_design(text, "itu-1")
    assert row["error_kind"] == "spec"
    assert "winding.pitch" in row["error"]


def test_solve_budget_counts_every_factorisation(tmp_path):
    # Every MoM solve the sweep makes writes one cache entry: a fresh cache holds exactly as many
    # entries as the budget counts, and a rerun reads every one of them back.
    text = TINY.replace("turns = 3", "turns = 4").replace("turns = [3]", "turns = [2, 4]")
    cache = tmp_path / "cache"
    row = evaluate_design(text, "itu-1", str(cache))
    assert row["error"] is None
    assert row["solves"]["total"] > 0 and row["solves"]["circuit"] == 1
    assert row["solves"]["total"] == len(list(cache.glob("*.json")))
    rerun = evaluate_design(text, "itu-1", str(cache))
    assert rerun["solves"]["cached"] == rerun["solves"]["total"]
    from simloop.impedance import run_sweep
    from simloop.solve import SolveCache
    from simloop.spec import loads

    budget = solve_budget(run_sweep(loads(text), workers=1, cache=SolveCache(cache)))
    assert budget.total == row["solves"]["total"]


# --------------------------------------------------------------------------------------------
# The command: error rows, resume, Dask
# --------------------------------------------------------------------------------------------

def _rows(out: Path) -> list[dict]:
    return json.loads((out / "explore.json").read_text())["designs"]


def _strip_timing(rows):
    out = []
    for r in rows:
        r = {k: v for k, v in r.items() if k != "runtime_s"}
        if r.get("solves"):
            r["solves"] = {k: v for k, v in r["solves"].items() if k not in ("seconds", "circuit_seconds", "cached")}
        out.append(r)
    return out


GRID = ["--vary", "winding.turns=2:3", "--vary", "taps.turns=[2],[3]"]


def test_failed_design_is_a_row_and_resume_skips_finished(tmp_path):
    spec = write_spec(tmp_path, TINY)
    out = tmp_path / "out"
    # taps [3] on 2 turns cannot be built: an error row beside three solved designs.
    assert main(["explore", str(spec), *GRID, "--out", str(out), "--workers", "1", "--quiet"]) == 0
    rows = _rows(out)
    assert len(rows) == 4
    bad = [r for r in rows if r["error"] is not None]
    assert len(bad) == 1 and bad[0]["winding.turns"] == 2 and bad[0]["taps.turns"] == [3]
    assert "beyond the winding" in bad[0]["error"]
    with open(out / "explore.csv") as fh:
        table = list(csv.DictReader(fh))
    assert [r["status"] for r in table].count("error") == 1
    assert (out / "explore.png").stat().st_size > 10_000
    log = out / "explore-rows.jsonl"
    assert len(log.read_text().splitlines()) == 4
    with open(log, "a") as fh:
        fh.write('{"hash": "torn')  # an interrupted write
    # A wider grid: only the two new designs run; the log grows by two lines.
    wider = ["--vary", "winding.turns=2:4", "--vary", "taps.turns=[2],[3]"]
    assert main(["explore", str(spec), *wider, "--out", str(out), "--workers", "1", "--quiet"]) == 0
    lines = log.read_text().splitlines()
    assert len(lines) == 7  # 4 + the torn line + 2
    assert json.loads((out / "explore.json").read_text())["designs_run"] == 2
    assert _strip_timing(_rows(out))[:4] == _strip_timing(rows)


@pytest.fixture(scope="module")
def dask_cluster():
    dask = pytest.importorskip("dask")
    distributed = pytest.importorskip("distributed")
    # Design tasks start solver processes: the workers must not be daemons. The scheduler's HTTP
    # server listens even with dashboard_address=None (on 8787, which another cluster on a
    # shared machine may hold): ":0" takes a free port.
    with dask.config.set({"distributed.worker.daemon": False}):
        cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                           host="127.0.0.1", dashboard_address=":0")
    yield cluster.scheduler_address
    cluster.close()


def test_dask_cluster_gives_the_local_pool_rows(tmp_path, dask_cluster):
    spec = write_spec(tmp_path, TINY)
    local, remote = tmp_path / "local", tmp_path / "dask"
    common = [str(spec), *GRID, "--no-cache", "--quiet"]
    assert main(["explore", *common, "--out", str(local), "--workers", "2"]) == 0
    assert main(["explore", *common, "--out", str(remote), "--scheduler", dask_cluster]) == 0
    assert json.loads((remote / "explore.json").read_text())["executor"] == "dask"
    a, b = _strip_timing(_rows(local)), _strip_timing(_rows(remote))
    assert len(a) == 4 and sum(r["error"] is None for r in a) == 3
    assert a == b


def test_daemon_workers_are_refused_before_any_design(tmp_path, capsys):
    distributed = pytest.importorskip("distributed")
    spec = write_spec(tmp_path, TINY)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=":0") as cluster:
        code = main(["explore", str(spec), *GRID, "--out", str(tmp_path / "o"), "--scheduler",
                     cluster.scheduler_address])
    assert code == 2
    assert "--scheduler" in capsys.readouterr().err


def test_unreachable_scheduler_exits_2(tmp_path, capsys):
    spec = write_spec(tmp_path, TINY)
    code = main(["explore", str(spec), *GRID, "--out", str(tmp_path / "o"), "--scheduler", "tcp://127.0.0.1:9"])
    assert code == 2
    assert "--scheduler" in capsys.readouterr().err


RECEIVER = receiver_table('["0 m", "0.15 m", "-0.125 m"]', None, coil_turns=60)


def test_boost_columns_only_with_a_receiver(tmp_path, capsys):
    spec = write_spec(tmp_path, TINY)
    # Without a [receiver] there is nothing to boost: exit 2 before anything is solved.
    assert main(["explore", str(spec), "--vary", "winding.turns=2:3", "--objective", "boost",
                 "--out", str(tmp_path / "none")]) == 2
    assert "--objective" in capsys.readouterr().err
    assert not (tmp_path / "none").exists()
    with_rod = write_spec(tmp_path, TINY + RECEIVER, name="rod.toml")
    out = tmp_path / "rod"
    assert main(["explore", str(with_rod), "--vary", 'frame.width="0.6 m":"0.8 m":2', "--objective", "boost",
                 "--out", str(out), "--workers", "1", "--quiet"]) == 0
    rows = _rows(out)
    assert all(r["boost_median_db"] is not None for r in rows)
    assert json.loads((out / "explore.json").read_text())["summary"]["pareto_against"] == "boost"
    with open(out / "explore.csv") as fh:
        assert "boost_median_db" in next(csv.DictReader(fh))
    plain = evaluate_design(TINY, "itu-1")
    assert not any(k.startswith("boost") for k in plain)
