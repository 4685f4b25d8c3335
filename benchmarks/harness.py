"""Timing, load and machine-description helpers for the benchmark suite."""

from __future__ import annotations

import datetime as _dt
import gc
import importlib.metadata
import os
import platform
import resource
import statistics
import time
from dataclasses import dataclass
from typing import Any, Callable

__all__ = ["Row", "Timings", "alternate", "median", "Load", "wait_quiet", "machine", "fmt_time", "fmt_rate"]


@dataclass
class Row:
    """One line of the results table. ``met`` is True/False, or None when there is no target (or the
    figure was not measured)."""

    figure: str
    value: str
    target: str = "—"
    met: bool | None = None
    how: str = ""
    status: str = ""  # overrides the "met" column text when set (e.g. "not measured")

    @property
    def met_text(self) -> str:
        if self.status:
            return self.status
        return "—" if self.met is None else ("met" if self.met else "NOT met")


class Timings(dict):
    """Variant name -> list of wall times, one per round; ``load[r]`` is the share of the machine's
    CPU that other processes used during round r (see :class:`Load`)."""

    load: list[float]

    def quiet_rounds(self, limit: float) -> list[int]:
        return [r for r, x in enumerate(self.load) if x < limit]


def alternate(variants: dict[str, Callable[[int], Any]], rounds: int) -> Timings:
    """Wall times of each variant over ``rounds`` rounds; the order of the variants is reversed on
    every other round so that drifts in machine load fall on all of them alike. Each call gets the
    round number (for seeds). A garbage collection precedes every timed call."""
    names = list(variants)
    times = Timings({k: [] for k in names})
    times.load = []
    for r in range(rounds):
        with Load() as load:
            for k in (names if r % 2 == 0 else names[::-1]):
                gc.collect()
                t0 = time.perf_counter()
                variants[k](r)
                times[k].append(time.perf_counter() - t0)
        times.load.append(load.other_share)
    return times


def median(values: list[float]) -> float:
    return float(statistics.median(values))


def _proc_stat() -> tuple[float, float]:
    """(busy, total) CPU seconds of the whole machine since boot, from /proc/stat."""
    try:
        with open("/proc/stat") as fh:
            fields = [float(x) for x in fh.readline().split()[1:]]
    except OSError:
        return float("nan"), float("nan")
    hz = os.sysconf("SC_CLK_TCK")
    idle = fields[3] + (fields[4] if len(fields) > 4 else 0.0)  # idle + iowait
    total = sum(fields[:8])  # user nice system idle iowait irq softirq steal
    return (total - idle) / hz, total / hz


def _own_cpu() -> float:
    me, kids = resource.getrusage(resource.RUSAGE_SELF), resource.getrusage(resource.RUSAGE_CHILDREN)
    return me.ru_utime + me.ru_stime + kids.ru_utime + kids.ru_stime


class Load:
    """Measures how much CPU other processes used while a block ran: (machine busy time - this
    process's and its children's CPU time) / (cores x wall time)."""

    def __enter__(self) -> "Load":
        self._busy0, _ = _proc_stat()
        self._own0 = _own_cpu()
        self._t0 = time.perf_counter()
        return self

    def __exit__(self, *exc) -> None:
        busy1, _ = _proc_stat()
        self.wall = time.perf_counter() - self._t0
        own = _own_cpu() - self._own0
        cores = os.cpu_count() or 1
        other = (busy1 - self._busy0) - own
        self.other_share = max(0.0, other) / (cores * self.wall) if self.wall > 0 else float("nan")

    @property
    def text(self) -> str:
        return f"other processes used {100 * self.other_share:.0f}% of the machine's CPU"


def wait_quiet(max_seconds: float, threshold: float = 0.10, window: float = 3.0) -> float:
    """Wait until other processes use less than ``threshold`` of the machine's CPU over ``window``
    seconds, or until ``max_seconds`` have passed; return the last measured share. (This process is
    idle meanwhile, so all busy time is other processes'.)"""
    end = time.perf_counter() + max_seconds
    while True:
        b0, t0 = _proc_stat()
        time.sleep(window)
        b1, t1 = _proc_stat()
        share = (b1 - b0) / (t1 - t0) if t1 > t0 else float("nan")
        if not share >= threshold or time.perf_counter() >= end:
            return share


def _version(dist: str) -> str:
    try:
        return importlib.metadata.version(dist)
    except importlib.metadata.PackageNotFoundError:
        return "not installed"


def machine() -> dict[str, str]:
    """Cores, CPU model, memory, numpy's SIMD level, library versions and the date (UTC)."""
    cpu = platform.processor() or "unknown"
    try:
        with open("/proc/cpuinfo") as fh:
            for line in fh:
                if line.lower().startswith("model name"):
                    cpu = line.split(":", 1)[1].strip()
                    break
    except OSError:
        pass
    mem = "unknown"
    try:
        with open("/proc/meminfo") as fh:
            kb = int(next(ln for ln in fh if ln.startswith("MemTotal")).split()[1])
            mem = f"{kb / 2**20:.1f} GiB"
    except (OSError, StopIteration, ValueError):
        pass
    simd = "unknown"
    try:
        import numpy as np

        feats = np._core._multiarray_umath.__cpu_features__  # numpy's runtime dispatch table
        simd = ", ".join(f for f in ("AVX512F", "AVX512_SKX", "AVX2", "FMA3") if feats.get(f)) or "baseline"
    except Exception:  # private attribute: informative only
        pass
    try:
        affinity = len(os.sched_getaffinity(0))
    except AttributeError:
        affinity = os.cpu_count() or 1
    libs = {d: _version(d) for d in ("numpy", "scipy", "pandas", "pyarrow", "simpy", "PySide6-Essentials",
                                     "pyqtgraph", "pyinstrument", "line_profiler")}
    return {
        "date (UTC)": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M"),
        "cores": f"{os.cpu_count()} logical ({affinity} usable by this process)",
        "CPU": cpu,
        "memory": mem,
        "numpy SIMD": simd,
        "OS": f"{platform.system()} {platform.release()}",
        "Python": platform.python_version(),
        **libs,
    }


def fmt_time(seconds: float) -> str:
    if seconds >= 1:
        return f"{seconds:.2f} s"
    if seconds >= 1e-3:
        return f"{seconds * 1e3:.1f} ms"
    return f"{seconds * 1e6:.0f} µs"


def fmt_rate(per_second: float) -> str:
    if per_second >= 1e6:
        return f"{per_second / 1e6:.2f} M/s"
    return f"{per_second / 1e3:.0f} k/s"
