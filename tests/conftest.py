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
