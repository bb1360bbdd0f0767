"""Throughput of the gravity kernel beside a plain numpy implementation, measured together.

``libration bench`` prints :func:`format_table` of :func:`quick_bench`; the full
benchmark (more sizes, JSON with the machine's description) is ``bench/gravity.py``,
which reuses the helpers here.  Speed is reported as interactions per second and as
ratios against the numpy baseline timed in the same run, never as absolute targets.
"""
from __future__ import annotations

import os
import time
from collections.abc import Callable, Sequence

import numpy as np

from . import _gravity

#: Bodies in the full case; massive bodies and test particles in the test-particle case.
QUICK_FULL_SIZES = (64, 256, 1024, 4096)
QUICK_PARTICLE_SIZES = (100_000,)
PARTICLE_SOURCES = 10


def numpy_accelerations(position: np.ndarray, mass: np.ndarray, n_active: int, G: float,
                        softening: float = 0.0, chunk_elements: int = 1 << 14) -> np.ndarray:
    """Accelerations by a plain vectorised numpy direct sum (the baseline).

    Targets go in chunks so that each broadcast (chunk, n_active) array holds about
    ``chunk_elements`` pairs and stays in cache (2**14 was the fastest of 2**12 to
    2**20 on the development machine); operations are in place where numpy allows,
    and a target's own term is removed by giving it an infinite distance.

    Parameters
    ----------
    position : ndarray, shape (n, 3)
        Positions, in the length unit.
    mass : ndarray, shape (n,)
        Masses, in the mass unit (only the first ``n_active`` are used).
    n_active : int
        Number of massive bodies (they come first).
    G : float
        Gravitational constant.
    softening : float
        Plummer softening length, in the length unit.
    chunk_elements : int
        Target-source pairs per broadcast chunk.

    Returns
    -------
    ndarray, shape (n, 3)
        Accelerations, in length unit per time unit squared.
    """
    n = position.shape[0]
    xs, ys, zs = (np.ascontiguousarray(position[:n_active, k]) for k in range(3))
    gm = G * mass[:n_active]
    out = np.empty((n, 3))
    chunk = max(1, chunk_elements // max(n_active, 1))
    for start in range(0, n, chunk):
        stop = min(n, start + chunk)
        dx = xs[None, :] - position[start:stop, 0, None]
        dy = ys[None, :] - position[start:stop, 1, None]
        dz = zs[None, :] - position[start:stop, 2, None]
        r2 = dx * dx
        r2 += dy * dy
        r2 += dz * dz
        r2 += softening * softening
        own = np.arange(start, min(stop, n_active))
        r2[own - start, own] = np.inf
        weight = np.sqrt(r2)
        weight *= r2
        np.divide(gm, weight, out=weight)
        dx *= weight
        dy *= weight
        dz *= weight
        out[start:stop, 0] = dx.sum(axis=1)
        out[start:stop, 1] = dy.sum(axis=1)
        out[start:stop, 2] = dz.sum(axis=1)
    return out


def best_time(call: Callable[[], object], min_seconds: float = 0.05, repeats: int = 3) -> float:
    """Seconds per call: the best of ``repeats`` batches, each long enough to time."""
    return best_times([call], min_seconds, repeats)[0]


def best_times(calls: Sequence[Callable[[], object]], min_seconds: float = 0.05,
               repeats: int = 3) -> list[float]:
    """Seconds per call of each of ``calls``, their batches interleaved.

    Each call is warmed up, then timed in ``repeats`` rounds; a round times one batch
    of each call in turn (a batch lasts about ``min_seconds``), and the best batch of
    each call counts.  Interleaving exposes every call to the same moments of a
    shared machine, so their ratios stay fair when other work comes and goes.
    """
    batches, best = [], []
    for call in calls:
        call()  # warm up (first touch of buffers, thread start)
        start = time.perf_counter()
        call()
        once = time.perf_counter() - start
        batches.append(max(1, int(min_seconds / max(once, 1e-9))))
        best.append(once)
    for _ in range(repeats):
        for k, call in enumerate(calls):
            start = time.perf_counter()
            for _ in range(batches[k]):
                call()
            best[k] = min(best[k], (time.perf_counter() - start) / batches[k])
    return best


def make_system(n: int, n_active: int, seed: int = 2024) -> tuple[np.ndarray, np.ndarray]:
    """Random bodies in a unit cube, masses in (0, 1]; zero masses past ``n_active``."""
    rng = np.random.default_rng(seed)
    position = rng.uniform(-1.0, 1.0, size=(n, 3))
    mass = rng.uniform(1e-3, 1.0, size=n)
    mass[n_active:] = 0.0
    return position, mass


def measure(case: str, n: int, n_active: int, threads: Sequence[int] = (1, 2),
            baseline: bool = True, min_seconds: float = 0.05, repeats: int = 3,
            numpy_repeats: int | None = None) -> dict:
    """Time the kernel (each thread count) and the numpy baseline on one system.

    Returns a row: ``case``, ``n`` (bodies), ``n_active`` (sources), ``interactions``
    per call (``n_active * n`` less the self pairs), then for each thread count T
    ``kernel_T_s`` (seconds per call) and ``kernel_T_rate`` (interactions/s), and
    ``numpy_s``/``numpy_rate`` (None when skipped), ``vs_numpy`` (one-thread kernel
    rate over numpy's) and ``speedup_2`` (two threads over one, when measured).
    Thread counts are timed in interleaved rounds (:func:`best_times`); numpy after
    them, with ``numpy_repeats`` rounds (default ``repeats``).
    """
    position, mass = make_system(n, n_active)
    interactions = n_active * n - n_active
    scratch = _gravity.workspace(n)
    out = np.empty((n, 3))
    row: dict = {"case": case, "n": n, "n_active": n_active, "interactions": interactions}
    kernels = [lambda t=t: _gravity.accelerations(position, mass, n_active, 1.0, 0.0, t, scratch, out)
               for t in threads]
    for t, seconds in zip(threads, best_times(kernels, min_seconds, repeats)):
        row[f"kernel_{t}_s"] = seconds
        row[f"kernel_{t}_rate"] = interactions / seconds
    row["numpy_s"] = row["numpy_rate"] = row["vs_numpy"] = None
    if baseline:
        seconds = best_time(lambda: numpy_accelerations(position, mass, n_active, 1.0),
                            min_seconds, repeats if numpy_repeats is None else numpy_repeats)
        row["numpy_s"] = seconds
        row["numpy_rate"] = interactions / seconds
        if "kernel_1_rate" in row:
            row["vs_numpy"] = row["kernel_1_rate"] / row["numpy_rate"]
    if "kernel_1_rate" in row and "kernel_2_rate" in row:
        row["speedup_2"] = row["kernel_2_rate"] / row["kernel_1_rate"]
    return row


def usable_cores() -> int:
    """CPU cores this process may run on."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1


def quick_bench() -> list[dict]:
    """A few seconds' benchmark: full systems and the test-particle case, 1 and 2 threads.

    Returns
    -------
    list of dict
        One row per system, as :func:`measure` returns them.
    """
    threads = (1, 2) if _gravity.HAVE_OPENMP and usable_cores() >= 2 else (1,)
    rows = [measure("full", n, n, threads, min_seconds=0.02, repeats=5) for n in QUICK_FULL_SIZES]
    rows += [measure("particles", n + PARTICLE_SOURCES, PARTICLE_SOURCES, threads, min_seconds=0.02, repeats=5)
             for n in QUICK_PARTICLE_SIZES]
    return rows


def _fmt(value: float | None, digits: int = 3) -> str:
    if value is None:
        return "-"
    return f"{value:.{digits}g}" if abs(value) >= 1e4 else f"{value:.2f}"


def format_table(rows: Sequence[dict]) -> str:
    """Rows from :func:`measure` as a fixed-width text table (rates in interactions/s)."""
    thread_counts = sorted({int(k.split("_")[1]) for row in rows for k in row
                            if k.startswith("kernel_") and k.endswith("_rate")})
    header = ["case", "N", "sources"] + [f"kernel {t}T /s" for t in thread_counts]
    header += ["numpy /s", "kernel/numpy"] + (["2T/1T"] if 2 in thread_counts and 1 in thread_counts else [])
    lines = []
    for row in rows:
        cells = [row["case"], str(row["n"]), str(row["n_active"])]
        cells += [_fmt(row.get(f"kernel_{t}_rate")) for t in thread_counts]
        cells += [_fmt(row.get("numpy_rate")), _fmt(row.get("vs_numpy"))]
        if len(header) > len(cells):
            cells.append(_fmt(row.get("speedup_2")))
        lines.append(cells)
    widths = [max(len(h), *(len(c[i]) for c in lines)) if lines else len(h) for i, h in enumerate(header)]
    text = ["  ".join(h.rjust(w) for h, w in zip(header, widths))]
    text.append("  ".join("-" * w for w in widths))
    text += ["  ".join(c.rjust(w) for c, w in zip(cells, widths)) for cells in lines]
    text.append(f"loop variant: {_gravity.best_isa()}; OpenMP: {'yes' if _gravity.HAVE_OPENMP else 'no'}; "
                f"interactions = sources x bodies - self pairs; numpy = chunked broadcast, same run")
    if 2 in thread_counts:
        text.append("2T/1T is meaningful only while no other work runs on the CPUs")
    return "\n".join(text)
