"""Shared fixtures: small, fast loop specs (each MoM solve well under a second) and a session cache."""

from __future__ import annotations

import os
import textwrap
from pathlib import Path

import pytest


@pytest.fixture(autouse=True, scope="session")
def _session_cache(tmp_path_factory):
    """Solves are cached per test session only, so tests never see results of an older code."""
    os.environ["SIMLOOP_CACHE"] = str(tmp_path_factory.mktemp("solve-cache"))
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    yield


#: Words user output must not contain: citations of reading material outside the repository (the
#: names are built from pieces so this file does not trip tests/test_repository.py) and memory
#: marks, which belong in docs/references.md, not in what a user reads.
USER_OUTPUT_FORBIDDEN = ("REFER" + "ENCES", "DES" + "IGN", "[mem]", "from memory")


def receiver_table(position: str, axis: str | None = "[0, 1, 0]", *, rod_length: str = "100 mm",
                   permeability: int = 125, coil_turns: int = 65, coil_length: str = "20 mm") -> str:
    """A ``[receiver]`` table (a portable radio's ferrite rod, invented typical values) at
    ``position`` (a TOML array of lengths) with ``axis`` (a TOML array; None: the default axis)."""
    text = f"""
[receiver]
rod_length = "{rod_length}"
rod_diameter = "10 mm"
permeability = {permeability}
coil_turns = {coil_turns}
coil_length = "{coil_length}"
loaded_q = 60
position = {position}
"""
    return text + (f"axis = {axis}\n" if axis is not None else "")


def write_spec(directory: Path, text: str, name: str = "spec.toml") -> Path:
    path = Path(directory) / name
    path.write_text(textwrap.dedent(text))
    return path


SMALL_STACKED = """
name = "small-stacked"
[frame]
width = "0.5 m"
height = "0.4 m"
[winding]
style = "stacked"
turns = 4
pitch = "15 mm"
[wire]
gauge = "20 AWG"
[taps]
turns = [2, 4]
[leads]
offset = "6 cm"
[sweep]
start = "520 kHz"
stop = "1710 kHz"
points = 7
[mesh]
quality = "draft"
"""

SMALL_SPIRAL = """
name = "small-spiral"
[frame]
width = "0.5 m"
height = "0.5 m"
[winding]
style = "spiral"
turns = 5
pitch = "20 mm"
[wire]
gauge = "18 AWG"
[taps]
turns = [3, 5]
[leads]
offset = "6 cm"
[sweep]
start = "520 kHz"
stop = "1710 kHz"
points = 7
[mesh]
quality = "draft"
"""


@pytest.fixture
def small_stacked(tmp_path):
    return write_spec(tmp_path, SMALL_STACKED, "small-stacked.toml")


@pytest.fixture
def small_spiral(tmp_path):
    return write_spec(tmp_path, SMALL_SPIRAL, "small-spiral.toml")


def process_is_gone(pid: int) -> bool:
    """True when the process has ended (a zombie nobody reaps counts as ended); Linux /proc."""
    try:
        with open(f"/proc/{pid}/status") as fh:
            return any(line.startswith("State:") and "Z" in line.split()[1] for line in fh)
    except FileNotFoundError:
        return True
