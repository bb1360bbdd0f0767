"""Throughput of libration's gravity kernel against N, beside plain numpy, in one run.

Cases:
  full       N bodies, all massive (N = 16 .. 16384): N * (N - 1) interactions per call
  particles  10 massive bodies + 1e4 .. 1e6 test particles: 10 * N - 10 per call
For each: the kernel on 1 and 2 threads (same bits either way) and a chunked-broadcast
numpy implementation (libration.bench.numpy_accelerations), timed in the same process;
ratios kernel/numpy and 2 threads/1 thread; the loop variants (SSE2/AVX2/AVX-512) at
N = 1024 on one thread.  Results go to bench/results/gravity.json with the machine's
description.  A full run takes about a minute here; --quick about 15 s.

    python bench/gravity.py [--quick] [--output PATH] [--threads 1,2]
"""
from __future__ import annotations

import argparse
import json
import os
import sys
import time

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from _machine import cpu_idle_fraction, describe_machine  # noqa: E402

from libration import _gravity  # noqa: E402
from libration.bench import (PARTICLE_SOURCES, best_time, format_table, make_system,  # noqa: E402
                             measure)

FULL_SIZES = (16, 64, 256, 1024, 4096, 16384)
PARTICLE_SIZES = (10_000, 100_000, 1_000_000)
QUICK_FULL_SIZES = (16, 256, 1024, 4096)
QUICK_PARTICLE_SIZES = (100_000,)
#: numpy is slow at the largest sizes: time it once per call there (still the same run).
NUMPY_SINGLE_SHOT_INTERACTIONS = 5e7
#: The issue's targets (issue 2, "Speed and memory"), for the summary line.
TARGET_ONE_CORE_N1024 = 8.4e8
TARGET_TWO_THREAD_SPEEDUP = 1.8
#: A run counts as clean when at least this share of all CPUs was idle just before and after.
CLEAN_IDLE_FRACTION = 0.9


def isa_rows(n: int = 1024) -> list[dict]:
    """Rate of each loop variant on one thread at N = n (all give the same bits)."""
    position, mass = make_system(n, n)
    reference = _gravity.accelerations_with_isa("baseline", position, mass, n, 1.0)
    rows = []
    for isa in _gravity.available_isas():
        seconds = best_time(lambda: _gravity.accelerations_with_isa(isa, position, mass, n, 1.0), repeats=9)
        same = bool(np.array_equal(_gravity.accelerations_with_isa(isa, position, mass, n, 1.0), reference))
        rows.append({"isa": isa, "n": n, "rate": (n * n - n) / seconds, "same_bits_as_baseline": same})
    return rows


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer sizes (about 15 s)")
    parser.add_argument("--output", default=os.path.join(os.path.dirname(os.path.abspath(__file__)),
                                                         "results", "gravity.json"),
                        help="JSON file to write (default bench/results/gravity.json)")
    parser.add_argument("--threads", default="1,2", help="thread counts, comma-separated (default 1,2)")
    args = parser.parse_args(argv)
    threads = tuple(int(t) for t in args.threads.split(","))

    started = time.perf_counter()
    machine = describe_machine()
    full = QUICK_FULL_SIZES if args.quick else FULL_SIZES
    particles = QUICK_PARTICLE_SIZES if args.quick else PARTICLE_SIZES
    rows = []
    for n in full:
        single = n * n > NUMPY_SINGLE_SHOT_INTERACTIONS
        rows.append(measure("full", n, n, threads, min_seconds=0.05, repeats=5 if single else 9,
                            numpy_repeats=1 if single else 5))
        print(f"  full N={n}: done", file=sys.stderr, flush=True)
    for n in particles:
        rows.append(measure("particles", n + PARTICLE_SOURCES, PARTICLE_SOURCES, threads, min_seconds=0.05,
                            repeats=9, numpy_repeats=3))
        print(f"  particles N={n}: done", file=sys.stderr, flush=True)
    variants = isa_rows()
    elapsed = time.perf_counter() - started
    machine["load_average_after"] = [round(x, 2) for x in os.getloadavg()] if hasattr(os, "getloadavg") else None
    machine["cpu_idle_fraction_after"] = cpu_idle_fraction()

    print(format_table(rows))
    print()
    print("loop variants, one thread, N = 1024:")
    for v in variants:
        print(f"  {v['isa']:>9}: {v['rate']:.3g} interactions/s  (same bits as baseline: {v['same_bits_as_baseline']})")
    at_1024 = next((r for r in rows if r["case"] == "full" and r["n"] == 1024), None)
    big = [r for r in rows if r["case"] == "full" and r["n"] >= 4096 and r.get("speedup_2")]
    summary = {}
    if at_1024 is not None:
        summary["one_core_rate_n1024"] = at_1024["kernel_1_rate"]
        summary["one_core_target_n1024"] = TARGET_ONE_CORE_N1024
        summary["vs_numpy_n1024"] = at_1024["vs_numpy"]
    if big:
        summary["min_two_thread_speedup_n_ge_4096"] = min(r["speedup_2"] for r in big)
        summary["two_thread_speedup_target"] = TARGET_TWO_THREAD_SPEEDUP
    tp = [r for r in rows if r["case"] == "particles"]
    if tp and at_1024 is not None:
        summary["particles_rate_over_full_rate_one_core"] = min(r["kernel_1_rate"] for r in tp) / at_1024["kernel_1_rate"]
    print("summary:", json.dumps({k: round(v, 3) if isinstance(v, float) and v < 1e3 else v
                                  for k, v in summary.items()}))
    print(f"machine: {machine['cpu_model']}, {machine['usable_cpus']} usable CPUs, "
          f"idle share of all CPUs {machine['cpu_idle_fraction_before']} before, "
          f"{machine['cpu_idle_fraction_after']} after; {elapsed:.0f} s")

    idle = [machine.get("cpu_idle_fraction_before"), machine.get("cpu_idle_fraction_after")]
    clean = all(x is not None and x >= CLEAN_IDLE_FRACTION for x in idle)
    if not clean:
        print(f"warning: the CPUs were not idle around the run (idle share {idle}); other work "
              f"competed, and the two-thread figures in particular are not meaningful")
    result = {"benchmark": "gravity", "clean": clean, "quick": args.quick, "machine": machine, "elapsed_s": elapsed,
              "units": {"rate": "interactions per second", "time": "seconds per call"},
              "rows": rows, "loop_variants": variants, "summary": summary}
    os.makedirs(os.path.dirname(os.path.abspath(args.output)), exist_ok=True)
    tmp = args.output + ".tmp"
    with open(tmp, "w", encoding="utf-8") as f:
        json.dump(result, f, indent=2)
        f.write("\n")
    os.replace(tmp, args.output)
    print(f"wrote {args.output}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
