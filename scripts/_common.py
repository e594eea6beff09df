"""Shared by the scripts in this folder: facts about the machine a benchmark ran on, option parsers."""

from __future__ import annotations

import argparse
import os
import platform

__all__ = ["cpu_name", "load_average", "positive", "non_negative_int"]


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


def positive(kind):
    """An argparse type: a number of ``kind`` (int or float) greater than 0."""
    def parse(text: str):
        value = kind(text)
        if value <= 0:
            raise argparse.ArgumentTypeError(f"expected a positive {kind.__name__}, got {text!r}")
        return value
    return parse


def non_negative_int(text: str) -> int:
    """An argparse type: an integer >= 0."""
    value = int(text)
    if value < 0:
        raise argparse.ArgumentTypeError(f"expected an integer >= 0, got {text!r}")
    return value
