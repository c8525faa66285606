"""The machine line every benchmark prints: platform, CPUs and the load average at that moment.

The benchmark machines are shared, so a time means little without the load it was taken under.
Imported by the scripts beside it (``python benchmarks/bench_*.py`` puts this folder on the path).
"""

from __future__ import annotations

import os
import platform


def load() -> str:
    """The 1-, 5- and 15-minute load averages, e.g. ``"load 4.7 / 5.0 / 5.5"``."""
    one, five, fifteen = os.getloadavg()
    return f"load {one:.1f} / {five:.1f} / {fifteen:.1f}"


def machine() -> str:
    """Platform, processor, CPU count and the load average now."""
    return (f"{platform.platform()}, {platform.processor() or platform.machine()}, "
            f"{os.cpu_count()} CPUs, Python {platform.python_version()}; {load()}")
