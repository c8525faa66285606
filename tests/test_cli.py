"""The command line: exit status 2 with the key for every kind of bad input, outputs of check and sweep.

Sources: the exit-status convention is the project's own (README, "Using it"); the Touchstone
option line follows IBIS Touchstone 1.1 (docs/references.md §8).
"""

import json
import subprocess
import sys
import textwrap

import pytest

from simloop.cli import main
from tests.conftest import SMALL_STACKED, write_spec, receiver_table

BAD = [
    # (key expected in the message, old text, new text) applied to the small stacked spec
    ("frame.width", 'width = "0.5 m"', 'width = "-0.5 m"'),
    ("frame.widht", 'width = "0.5 m"', 'widht = "0.5 m"'),  # unknown key (near miss)
    ("winding.pitch", 'pitch = "15 mm"', 'pitch = "0.5 mm"'),  # pitch below the wire diameter
    ("sweep", 'start = "520 kHz"', 'start = "1800 kHz"'),  # reversed sweep
    ("taps.turns", "turns = [2, 4]", "turns = [4, 2]"),  # out of order
    ("taps.turns", "turns = [2, 4]", "turns = [2, 6]"),  # beyond the winding
    ("name", 'name = "small-stacked"', 'name = "../outside"'),  # writes outside results/
    ("leads.offset", 'offset = "6 cm"', 'offset = "6 qq"'),  # unknown unit
    ("wire.gauge", 'gauge = "20 AWG"', 'gauge = "20 awg"'),
]


@pytest.mark.parametrize("key,old,new", BAD, ids=[f"{k}:{n}" for k, _, n in BAD])
def test_bad_input_exits_2_naming_the_key(key, old, new, tmp_path, capsys):
    text = textwrap.dedent(SMALL_STACKED)
    assert old in text
    spec = write_spec(tmp_path, text.replace(old, new))
    assert main(["sweep", str(spec), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert key in err
    assert "Traceback" not in err
    assert not (tmp_path / "out").exists(), "nothing is written for bad input"


def test_spiral_whose_inner_turn_collapses(tmp_path, capsys):
    text = textwrap.dedent(SMALL_STACKED).replace('style = "stacked"', 'style = "spiral"')
    text = text.replace("turns = 4", "turns = 14")
    spec = write_spec(tmp_path, text.replace("turns = [2, 4]", "turns = [2, 14]"))
    assert main(["check", str(spec)]) == 2
    assert "winding" in capsys.readouterr().err


def test_rod_through_the_winding(tmp_path, capsys):
    text = textwrap.dedent(SMALL_STACKED) + receiver_table('["0.25 m", "0 m", "0 m"]', "[0, 0, 1]")
    spec = write_spec(tmp_path, text)
    assert main(["check", str(spec)]) == 2
    err = capsys.readouterr().err
    assert "receiver.position" in err and "Traceback" not in err


def test_broken_toml_names_the_line(tmp_path, capsys):
    spec = write_spec(tmp_path, "[frame]\nwidth = \"0.5 m\n")
    assert main(["check", str(spec)]) == 2
    assert "line" in capsys.readouterr().err


def test_check_prints_the_mesh_report(tmp_path, capsys):
    spec = write_spec(tmp_path, textwrap.dedent(SMALL_STACKED))
    assert main(["check", str(spec)]) == 0
    out = capsys.readouterr().out
    for text in ("segments", "wire to cut", "[pass]", "low-frequency floor", "2 x pitch"):
        assert text in out
    # before any solve it says which source covers which part of the band
    assert "sources (decided before any solve)" in out and "circuit (PEEC" in out and "mom (direct NEC)" in out


def test_sweep_writes_every_output(tmp_path, capsys):
    spec = write_spec(tmp_path, textwrap.dedent(SMALL_STACKED))
    out = tmp_path / "res"
    assert main(["sweep", str(spec), "--out", str(out), "--z0", "75"]) == 0
    names = {p.name for p in out.iterdir()}
    assert {"sweep.json", "tap-2.s1p", "tap-4.s1p", "taps.s2p", "impedance.csv", "impedance.png"} <= names
    data = json.loads((out / "sweep.json").read_text())
    assert data["reference_impedance_ohm"] == 75
    # Touchstone 1.1 option line (IBIS Open Forum): "# <unit> <parameter> <format> R <n>"
    assert "# Hz S RI R 75" in (out / "taps.s2p").read_text()


def test_console_script_exit_status(tmp_path):
    # The installed entry point, as a user runs it: exit 2 and no traceback.
    spec = write_spec(tmp_path, textwrap.dedent(SMALL_STACKED).replace("turns = 4", "turns = 0"))
    proc = subprocess.run([sys.executable, "-m", "simloop.cli", "check", str(spec)],
                          capture_output=True, text=True)
    assert proc.returncode == 2
    assert "winding.turns" in proc.stderr and "Traceback" not in proc.stderr


def test_tune_on_a_single_turn_loop_over_perfect_ground(tmp_path, capsys):
    # Regression: a loop whose self-resonance lies far above the band gave a slightly negative
    # fitted self-capacitance, NaN in the tap suggestion and a JSON error that lost the output.
    text = textwrap.dedent("""
        name = "one-turn"
        [frame]
        width = "0.3 m"
        height = "0.8 m"
        [winding]
        style = "spiral"
        turns = 1
        pitch = "8 mm"
        [wire]
        gauge = "20 AWG"
        metal = "aluminium"
        [taps]
        turns = [1]
        [leads]
        offset = "8 cm"
        [sweep]
        start = "1 MHz"
        stop = "5 MHz"
        points = 9
        [ground]
        kind = "perfect"
        height = "2 m"
    """)
    spec = write_spec(tmp_path, text)
    out = tmp_path / "res"
    assert main(["tune", str(spec), "--out", str(out), "--debug"]) == 0
    data = json.loads((out / "tuning.json").read_text())
    assert data["gaps_hz"], "one 0.3 x 0.8 m turn (a few µH) cannot reach the MW band with 12-365 pF"
