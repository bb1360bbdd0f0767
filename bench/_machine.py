"""Describe the machine a benchmark ran on (shared by every script in bench/).

``describe_machine()`` returns a JSON-ready dict: CPU model and flags that matter for
the kernels, cores, load, compiler, Python/numpy/libration versions, the build's
choices (OpenMP, loop variant, native tuning) and the time of the run.
"""
from __future__ import annotations

import datetime
import os
import platform
import re
import shutil
import subprocess
import sys
import sysconfig
import time

import numpy as np

#: CPU flags that change what the compiled kernels can use.
INTERESTING_FLAGS = ("sse2", "avx", "avx2", "fma", "avx512f", "avx512dq", "avx512vl", "neon", "asimd")


def _cpuinfo() -> dict[str, str]:
    """First processor's fields from /proc/cpuinfo (Linux), else {}."""
    fields: dict[str, str] = {}
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as f:
            for line in f:
                if not line.strip():
                    if fields:
                        break
                    continue
                key, _, value = line.partition(":")
                fields.setdefault(key.strip(), value.strip())
    except OSError:
        pass
    return fields


def _compiler() -> str:
    """First line of the C compiler's version banner (the one setuptools would use)."""
    cc = os.environ.get("CC") or (sysconfig.get_config_var("CC") or "cc").split()[0]
    if shutil.which(cc) is None:
        return f"{cc} (not found)"
    try:
        out = subprocess.run([cc, "--version"], capture_output=True, text=True, timeout=10, check=False)
    except (OSError, subprocess.SubprocessError):
        return cc
    return (out.stdout or out.stderr).splitlines()[0].strip() if (out.stdout or out.stderr) else cc


def _build_flags() -> list[str] | None:
    """The compile flags in the repository's setup.py (None when not run from a checkout)."""
    setup = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "setup.py")
    try:
        with open(setup, encoding="utf-8") as f:
            text = f.read()
    except OSError:
        return None
    match = re.search(r"^COMPILE = \[(.*?)\]", text, re.MULTILINE)
    return re.findall(r'"([^"]+)"', match.group(1)) if match else None


def cpu_idle_fraction(seconds: float = 1.0) -> float | None:
    """Share of all CPUs' time spent idle over the next ``seconds`` (Linux), else None.

    Unlike the load average (a slow moving mean), this says whether other work is
    running right now, which is what decides whether a thread speed-up is meaningful.
    """
    def sample() -> tuple[int, int]:
        with open("/proc/stat", encoding="ascii") as f:
            values = [int(v) for v in f.readline().split()[1:]]
        return values[3] + values[4], sum(values)  # idle + iowait, total
    try:
        idle0, total0 = sample()
        time.sleep(seconds)
        idle1, total1 = sample()
    except (OSError, ValueError, IndexError):
        return None
    return round((idle1 - idle0) / max(1, total1 - total0), 3)


def describe_machine() -> dict:
    """Everything needed to compare benchmark results between machines and builds."""
    info = _cpuinfo()
    flags = set((info.get("flags") or info.get("Features") or "").split())
    try:
        usable = len(os.sched_getaffinity(0))
    except AttributeError:
        usable = os.cpu_count() or 1
    try:
        load = [round(x, 2) for x in os.getloadavg()]
    except OSError:
        load = None
    description = {
        "date_utc": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
        "cpu_model": info.get("model name") or platform.processor() or platform.machine(),
        "cpu_flags": sorted(flags.intersection(INTERESTING_FLAGS)),
        "logical_cpus": os.cpu_count(),
        "usable_cpus": usable,
        "load_average_1_5_15min": load,
        "cpu_idle_fraction_before": cpu_idle_fraction(),
        "platform": platform.platform(),
        "machine": platform.machine(),
        "python": sys.version.split()[0],
        "numpy": np.__version__,
        "compiler": _compiler(),
        "build_flags": _build_flags(),
        "env": {k: os.environ[k] for k in ("OMP_NUM_THREADS", "LIBRATION_NATIVE", "CFLAGS")
                if k in os.environ},
    }
    try:
        import libration
        from libration import _gravity
        description["libration"] = libration.__version__
        description["openmp"] = bool(_gravity.HAVE_OPENMP)
        description["gravity_loop_variant"] = _gravity.best_isa()
        description["gravity_loop_variants_available"] = _gravity.available_isas()
        description["gravity_parallel_min_interactions"] = _gravity.PARALLEL_MIN_INTERACTIONS
    except ImportError as exc:  # the package is not built; describe the machine anyway
        description["libration"] = f"not importable: {exc}"
    return description


if __name__ == "__main__":
    import json

    print(json.dumps(describe_machine(), indent=2))
