"""What machine a benchmark ran on (shared by the benchmark scripts in this folder)."""

from __future__ import annotations

import platform
from pathlib import Path


def cpu_model() -> str:
    """The CPU model name from /proc/cpuinfo, or what the platform module knows."""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"
