"""Facts about the machine a benchmark ran on, shared by the scripts in this folder."""

from __future__ import annotations

import os
import platform

__all__ = ["cpu_name", "load_average"]


def cpu_name() -> str:
    """The CPU's model name (from /proc/cpuinfo where there is one)."""
    try:
        with open("/proc/cpuinfo") as f:
            for line in f:
                if line.startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def load_average() -> list[float] | None:
    """1, 5 and 15 minute load averages (None where the OS has none): other work on the machine."""
    try:
        return [round(v, 2) for v in os.getloadavg()]
    except (AttributeError, OSError):
        return None
