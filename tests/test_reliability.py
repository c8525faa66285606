"""Faults and hostile input: failed solves, kills, interrupts, concurrent runs, unusable paths, sizes.

Every check here is of the tool's own promises (README, "Using it": exit statuses; an interrupted
or failed run loses nothing; nothing unreliable is reported as reliable), not of physics, so the
expected values are the promised behaviour itself.

Sources: the shell convention of exit status 128 + signal number for a process ended by a signal
(POSIX.1-2017, Shell Command Language sec. 2.8.2: 130 SIGINT, 141 SIGPIPE, 143 SIGTERM), common
practice for the rest (atomic rename for consistent outputs, POSIX rename(2)).
"""

from __future__ import annotations

import hashlib
import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from simloop import solve as solve_mod
from simloop.cli import main
from simloop.impedance import run_sweep
from simloop.solve import SolveCache
from simloop.spec import load
from tests.conftest import SMALL_STACKED, write_spec, process_is_gone, receiver_table

ROOT = Path(__file__).resolve().parents[1]
_real_solve = solve_mod._solve_plan


def _env(**extra) -> dict:
    return dict(os.environ, PYTHONPATH=str(ROOT), OPENBLAS_NUM_THREADS="1", **extra)




def _wait_for(predicate, seconds: float = 120.0) -> bool:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if predicate():
            return True
        time.sleep(0.05)
    return predicate()


# ------------------------------------------------------------------------------------------------
# 1. A failed solve never becomes a reliable point; the run says so and exits non-zero.
# ------------------------------------------------------------------------------------------------


def _killing(targets_hz):
    """A worker body that dies by SIGKILL (as under the out-of-memory killer) at the target frequencies."""

    def body(mesh, env, frequency_hz, *plan):
        if any(abs(frequency_hz / f - 1) < 1e-9 for f in targets_hz):
            os.kill(os.getpid(), signal.SIGKILL)
        return _real_solve(mesh, env, frequency_hz, *plan)

    return body


@pytest.mark.parametrize("keep_going", [False, True])
def test_a_worker_killed_mid_sweep_is_recorded_and_its_points_are_unreliable(
        tmp_path, monkeypatch, capsys, keep_going):
    spec_path = write_spec(tmp_path, SMALL_STACKED)
    f_sweep = load(spec_path).sweep.frequencies_hz
    killed = [float(f_sweep[-2]), float(f_sweep[-1])]  # direct-phase points (above the floor)
    monkeypatch.setattr(solve_mod, "_solve_plan", _killing(killed))  # inherited by forked workers
    out = tmp_path / "out"
    argv = ["sweep", str(spec_path), "--out", str(out), "--no-cache", "--workers", "2"]
    status = main(argv + (["--keep-going"] if keep_going else []))
    err = capsys.readouterr().err
    assert status == (0 if keep_going else 1)
    assert "2 MoM solve(s) failed" in err and "died" in err
    data = json.loads((out / "sweep.json").read_text())
    failures = data["failures"]
    assert sorted(f["frequency_hz"] for f in failures) == pytest.approx(killed, rel=1e-12, abs=0)
    assert all(f["role"] == "direct" and "died" in f["reason"] for f in failures)
    for tap in data["taps"].values():
        for m in (len(f_sweep) - 2, len(f_sweep) - 1):
            assert tap["reliable"][m] is False
            assert tap["error_estimate"][m] == 1.0
        assert any(tap["reliable"][:-2]), "the points whose solves succeeded keep their verdicts"


# ------------------------------------------------------------------------------------------------
# 2. Kill and resume: every solve finished before the kill is re-used.
# ------------------------------------------------------------------------------------------------

_SLOW_RUN = """
import os, sys, time
from simloop import solve as solve_mod
from simloop.cli import main

real = solve_mod._solve_plan

def marked(mesh, env, frequency_hz, *plan):
    time.sleep(float(os.environ["TEST_SOLVE_DELAY_S"]))
    out = real(mesh, env, frequency_hz, *plan)
    name = f"{frequency_hz:.6f}-{sum(mesh['segments'])}"
    with open(os.path.join(os.environ["TEST_MARKS"], name), "w"):
        pass
    return out

solve_mod._solve_plan = marked
sys.exit(main(sys.argv[1:]))
"""


def test_kill_and_resume_reuses_every_finished_solve(tmp_path):
    spec_path = write_spec(tmp_path, SMALL_STACKED)
    cache, first, second = tmp_path / "cache", tmp_path / "marks-1", tmp_path / "marks-2"
    first.mkdir()
    second.mkdir()
    argv = ["sweep", str(spec_path), "--out", str(tmp_path / "out"), "--workers", "1", "--quiet"]
    proc = subprocess.Popen([sys.executable, "-c", _SLOW_RUN, *argv],
                            env=_env(SIMLOOP_CACHE=str(cache), TEST_MARKS=str(first), TEST_SOLVE_DELAY_S="2"))
    # three solves finished: both probes and the first of the window batch, whose others are pending
    assert _wait_for(lambda: len(list(first.iterdir())) >= 3), "the run made no progress"
    finished = {p.name for p in first.iterdir()}
    # A solve is stored within milliseconds of its arrival; the window batch needs ≥ 6 s more, so
    # a tool that stores only at the end of a batch shows here as entries missing at the kill.
    _wait_for(lambda: len(list(cache.glob("*.json"))) >= len(finished), 3.0)
    proc.kill()
    proc.wait(timeout=30)
    assert len(finished) < 8, "the kill must land mid-sweep"
    status = subprocess.run([sys.executable, "-c", _SLOW_RUN, *argv], timeout=600,
                            env=_env(SIMLOOP_CACHE=str(cache), TEST_MARKS=str(second), TEST_SOLVE_DELAY_S="0"))
    assert status.returncode == 0
    resolved = {p.name for p in second.iterdir()}
    assert resolved, "the rerun had solves left to do"
    assert not finished & resolved, f"solved again after the kill: {sorted(finished & resolved)}"


# ------------------------------------------------------------------------------------------------
# 3. Outputs: one consistent set per run, atomic files, no stale taps, no redirected writes.
# ------------------------------------------------------------------------------------------------


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _touchstone_z0(path: Path) -> float:
    line = next(s for s in path.read_text().splitlines() if s.startswith("#"))
    return float(line.split()[-1])  # Touchstone 1.0 option line: # <unit> S RI R <z0>


def _assert_consistent(out: Path, command: str = "sweep") -> dict:
    manifest = json.loads((out / "manifest.json").read_text())
    files = manifest["commands"][command]["files"]
    for name, entry in files.items():
        assert _sha(out / name) == entry["sha256"], f"{name} is not the file the manifest lists"
    return files


def test_concurrent_runs_into_one_folder_leave_one_consistent_set(tmp_path, capsys):
    spec_path = write_spec(tmp_path, SMALL_STACKED)
    assert main(["sweep", str(spec_path), "--out", str(tmp_path / "warm"), "--quiet"]) == 0  # fill the cache
    out = tmp_path / "shared"
    procs = [subprocess.Popen([sys.executable, "-m", "simloop.cli", "sweep", str(spec_path), "--out", str(out),
                               "--z0", z0, "--quiet"], env=_env(), stderr=subprocess.PIPE)
             for z0 in ("50", "75", "100")]
    for p in procs:
        _, err = p.communicate(timeout=600)
        assert p.returncode == 0, err.decode()
    files = _assert_consistent(out)
    z0 = json.loads((out / "sweep.json").read_text())["reference_impedance_ohm"]
    touchstone = sorted(out.glob("*.s*p"))
    assert {p.name for p in touchstone} == {"tap-2.s1p", "tap-4.s1p", "taps.s2p"}
    assert all(_touchstone_z0(p) == z0 for p in touchstone), "files from different runs are mixed"
    leftovers = {p.name for p in out.iterdir()} - set(files) - {"manifest.json", ".simloop.lock"}
    assert not leftovers, f"temporaries left behind: {leftovers}"


def test_a_rerun_with_other_taps_removes_the_stale_tap_files(tmp_path):
    out = tmp_path / "out"
    spec_path = write_spec(tmp_path, SMALL_STACKED)
    assert main(["sweep", str(spec_path), "--out", str(out), "--quiet"]) == 0
    assert (out / "tap-2.s1p").exists()
    fewer = write_spec(tmp_path, textwrap.dedent(SMALL_STACKED).replace("turns = [2, 4]", "turns = [4]"), "b.toml")
    assert main(["sweep", str(fewer), "--out", str(out), "--quiet"]) == 0
    files = _assert_consistent(out)
    assert not (out / "tap-2.s1p").exists() and not (out / "taps.s2p").exists()
    assert {n for n in files if n.endswith("p")} == {"tap-4.s1p", "taps.s1p"}


def test_a_crash_while_writing_leaves_the_previous_outputs_intact(tmp_path, monkeypatch, capsys):
    out = tmp_path / "out"
    spec_path = write_spec(tmp_path, SMALL_STACKED)
    assert main(["sweep", str(spec_path), "--out", str(out), "--quiet"]) == 0
    before = {p.name: _sha(p) for p in out.iterdir() if p.is_file()}

    def dies_while_writing(result, path):
        Path(path).write_bytes(b"")  # the file is opened (truncated), then the process is stopped
        raise RuntimeError("killed while writing the plot")

    monkeypatch.setattr("simloop.plots.plot_impedance", dies_while_writing)
    assert main(["sweep", str(spec_path), "--out", str(out), "--z0", "75", "--quiet"]) == 1
    after = {p.name: _sha(p) for p in out.iterdir() if p.is_file()}
    assert after == before, "a failed write changed the published outputs"
    assert all((out / n).stat().st_size > 0 for n in _assert_consistent(out))


def test_a_planted_symlink_does_not_redirect_a_write(tmp_path):
    out, victim = tmp_path / "out", tmp_path / "victim.txt"
    out.mkdir()
    victim.write_text("precious")
    for name in ("sweep.json.tmp", "manifest.json.tmp", "impedance.csv.tmp", ".simloop.lock.tmp"):
        (out / name).symlink_to(victim)
    spec_path = write_spec(tmp_path, SMALL_STACKED)
    assert main(["sweep", str(spec_path), "--out", str(out), "--quiet"]) == 0
    assert victim.read_text() == "precious"
    _assert_consistent(out)


# ------------------------------------------------------------------------------------------------
# 4. Bad options and paths: exit 2 naming the option, before the first solve.
# ------------------------------------------------------------------------------------------------


@pytest.fixture
def no_solves(monkeypatch):
    def refuse(*args, **kwargs):
        raise AssertionError("a solve started before the input was checked")

    monkeypatch.setattr(solve_mod, "_run_many", refuse)


@pytest.mark.parametrize("out", ["/dev/null", "a-file", "", "/proc/x"])
def test_an_unusable_out_is_refused_before_any_solve(tmp_path, monkeypatch, capsys, no_solves, out):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "a-file").write_text("in the way")
    spec_path = write_spec(tmp_path, SMALL_STACKED)
    assert main(["sweep", str(spec_path), "--out", out, "--no-cache"]) == 2
    err = capsys.readouterr().err
    assert "--out" in err and "Traceback" not in err
    assert not (tmp_path / "results").exists()


@pytest.mark.parametrize("z0", ["inf", "nan", "0", "-50"])
def test_a_bad_reference_impedance_exits_2(tmp_path, capsys, no_solves, z0):
    spec_path = write_spec(tmp_path, SMALL_STACKED)
    assert main(["sweep", str(spec_path), "--out", str(tmp_path / "out"), f"--z0={z0}"]) == 2
    assert "--z0" in capsys.readouterr().err
    assert not (tmp_path / "out").exists()


def test_a_cache_variable_pointing_at_a_file_is_named(tmp_path, monkeypatch, capsys, no_solves):
    blocker = tmp_path / "cache-file"
    blocker.write_text("not a folder")
    monkeypatch.setenv("SIMLOOP_CACHE", str(blocker))
    spec_path = write_spec(tmp_path, SMALL_STACKED)
    assert main(["sweep", str(spec_path), "--out", str(tmp_path / "out")]) == 2
    assert "SIMLOOP_CACHE" in capsys.readouterr().err


# ------------------------------------------------------------------------------------------------
# 5. Size: refused from the spec's numbers, before anything is built, naming the keys.
# ------------------------------------------------------------------------------------------------


@pytest.fixture
def nothing_built(monkeypatch):
    def refuse(*args, **kwargs):
        raise AssertionError("geometry was built before the size check")

    monkeypatch.setattr("simloop.geometry.build_loop", refuse)


@pytest.mark.parametrize("old,new,key,extra", [
    ("turns = 4", "turns = 1000", "winding.turns", "segments"),
    ("turns = 4", "turns = 1" + "0" * 400, "winding.turns", "segments"),
    ('width = "0.5 m"', "width = 80", "frame.width", "bare number"),  # read as 80 m
    ('width = "0.5 m"', 'width = "1e-300 m"', "frame.width", "too small"),
], ids=["1000-turns", "10^400-turns", "bare-80", "1e-300-m"])
@pytest.mark.parametrize("command", ["check", "sweep"])
def test_a_spec_too_large_or_small_is_refused_before_building(tmp_path, capsys, nothing_built, no_solves,
                                                               old, new, key, extra, command):
    text = textwrap.dedent(SMALL_STACKED).replace('quality = "draft"', 'quality = "standard"')
    if "turns = 1" in new:
        text = text.replace("turns = [2, 4]", "turns = [2]")
    spec_path = write_spec(tmp_path, text.replace(old, new, 1))
    assert main([command, str(spec_path)] + (["--out", str(tmp_path / "o")] if command == "sweep" else [])) == 2
    err = capsys.readouterr().err
    assert key in err and extra in err and "Traceback" not in err


def test_toml_nested_thousands_deep_exits_2(tmp_path, capsys):
    spec_path = write_spec(tmp_path, "a = " + "[" * 5000 + "]" * 5000 + "\n" + textwrap.dedent(SMALL_STACKED))
    assert main(["check", str(spec_path)]) == 2
    assert "nested" in capsys.readouterr().err


@pytest.mark.parametrize("axis", ["1e-320, 0, 0", "1e308, 1e308, 0"])
def test_an_extreme_receiver_axis_still_meets_the_rod_check(tmp_path, capsys, axis):
    # the rod is centred on the right-hand side of the winding: it crosses the wire
    text = textwrap.dedent(SMALL_STACKED) + receiver_table('["0.25 m", "0 m", "0 m"]', f"[{axis}]")
    spec_path = write_spec(tmp_path, text)
    assert main(["check", str(spec_path)]) == 2
    assert "receiver.position" in capsys.readouterr().err


# ------------------------------------------------------------------------------------------------
# 6. Signals, pipes and terminals.
# ------------------------------------------------------------------------------------------------

_HANGING_RUN = """
import os, sys, time
from simloop import solve as solve_mod
from simloop.cli import main

def hang(mesh, env, frequency_hz, *plan):
    with open(os.path.join(os.environ["TEST_MARKS"], str(os.getpid())), "w"):
        pass
    time.sleep(120)

solve_mod._solve_plan = hang
sys.exit(main(sys.argv[1:]))
"""


@pytest.mark.parametrize("sig,status", [(signal.SIGTERM, 143), (signal.SIGINT, 130)])
def test_a_signal_stops_the_workers_and_exits_with_one_line(tmp_path, sig, status):
    spec_path = write_spec(tmp_path, SMALL_STACKED)
    marks = tmp_path / "marks"
    marks.mkdir()
    proc = subprocess.Popen([sys.executable, "-c", _HANGING_RUN, "sweep", str(spec_path), "--out",
                             str(tmp_path / "out"), "--no-cache", "--workers", "2", "--quiet"],
                            env=_env(TEST_MARKS=str(marks)), stderr=subprocess.PIPE, start_new_session=True)
    assert _wait_for(lambda: len(list(marks.iterdir())) >= 2), "the workers did not start"
    workers = [int(p.name) for p in marks.iterdir()]
    os.killpg(proc.pid, sig)  # as a terminal's Ctrl-C or a service manager would: the whole group
    _, err = proc.communicate(timeout=60)
    lines = err.decode().strip().splitlines()
    assert proc.returncode == status
    assert len(lines) == 1 and "Traceback" not in err.decode(), err.decode()
    assert _wait_for(lambda: all(process_is_gone(p) for p in workers), 10), "workers outlived the run"


def test_a_closed_output_pipe_is_quiet(tmp_path):
    spec_path = write_spec(tmp_path, SMALL_STACKED)
    proc = subprocess.Popen([sys.executable, "-m", "simloop.cli", "check", str(spec_path)], env=_env(),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    proc.stdout.close()  # as `simloop check spec | head -0`: the reader is gone before any output
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 141
    assert b"unexpected error" not in err and b"Traceback" not in err and b"Exception" not in err


def test_an_ascii_terminal_gets_ascii(tmp_path):
    spec_path = write_spec(tmp_path, SMALL_STACKED)
    res = subprocess.run([sys.executable, "-m", "simloop.cli", "check", str(spec_path)], capture_output=True,
                         env=_env(PYTHONIOENCODING="ascii"), timeout=120)
    assert res.returncode == 0, res.stderr.decode()
    text = res.stdout.decode("ascii")  # would raise if anything else came out
    assert "lambda" in text and "segments" in text


def test_a_sweep_with_an_unusable_cache_warns_once_and_finishes(tmp_path, monkeypatch, capsys):
    monkeypatch.setenv("SIMLOOP_CACHE", "/proc/simloop-cache")  # a folder that cannot be made
    spec_path = write_spec(tmp_path, SMALL_STACKED)
    assert main(["sweep", str(spec_path), "--out", str(tmp_path / "out"), "--quiet"]) == 0
    err = capsys.readouterr().err
    assert err.count("cannot be written") == 1, err
    assert (tmp_path / "out" / "sweep.json").exists()


def test_run_sweep_records_no_failure_when_all_solves_succeed(tmp_path):
    spec = load(write_spec(tmp_path, SMALL_STACKED))
    result = run_sweep(spec, cache=SolveCache(tmp_path / "cache"))
    assert result.failures == ()
