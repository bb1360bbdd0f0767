"""Ensemble throughput: the same 64-member ensemble on 1 and 2 worker processes and on a
2-worker Dask LocalCluster, in one run.

Each member is an invented star with two light planets propagated with leapfrog for a span
calibrated (in this run, sequentially, on one member) to take ``--member-seconds`` of
compute; sampling and checkpoints included.  For each executor the script records the wall
time, the members' own compute time (sum of their ``wall_seconds``), the parallel efficiency
against the 1-process pool measured in the same run,

    efficiency(2 workers) = wall(1 process) / (2 * wall(2 workers)),

and the per-member overhead of the executor,

    overhead = (workers * wall - sum of member compute) / members,

(process start-up, task transfer, file writes outside the member, idle tails), and the
share of the workers' time spent inside members, sum of member compute / (workers * wall).
The 1-process baseline runs first and last; its mean is the baseline.  Results go
to bench/results/ensemble.json with the machine's description.  The issue asks for members of
about one second (64 s per worker-set on 1 process); the default here is scaled down to
0.25 s per member so the run takes about half a minute on a shared 2-core machine; pass
--member-seconds 1 for the full-size run.

    python bench/ensemble.py [--members 64] [--member-seconds 0.25] [--output PATH] [--no-dask]
"""
from __future__ import annotations

import argparse
import json
import logging
import math
import os
import shutil
import sys
import tempfile
import time

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from _machine import describe_machine  # noqa: E402

import libration as lb  # noqa: E402
from libration.ensemble import Ensemble, default_executor  # noqa: E402

TWO_PI = 2.0 * math.pi


def base_system() -> lb.System:
    return lb.System.from_elements(1.0, [5e-5, 3e-5], [1.0, 1.6], [0.01, 0.02], [0.0, 0.01], [0.0, 1.0],
                                   [0.0, 2.0], [0.0, 2.5], units="nbody", names=["star", "inner", "outer"])


def make(directory: str, members: int, orbits: float) -> Ensemble:
    values = np.linspace(1.5, 1.9, members)
    return Ensemble(base_system(), directory, until=orbits * TWO_PI, method="leapfrog", step=TWO_PI / 100,
                    grid={"outer.semi_major_axis": values}, sample_every=TWO_PI / 2, checkpoint_interval=60.0)


def calibrate(scratch: str, seconds: float) -> float:
    """Orbits per member so that one member computes for about ``seconds``."""
    orbits = 20.0
    make(os.path.join(scratch, "warm-up"), 1, orbits).run("sequential")  # first-call costs
    while True:
        directory = os.path.join(scratch, f"calibrate{orbits:g}")
        table = make(directory, 1, orbits).run("sequential")
        taken = float(table["wall_seconds"][0])
        if taken > 0.5 * seconds:
            return orbits * seconds / taken
        orbits *= 2


def measure(name: str, ensemble: Ensemble, executor, workers: int) -> dict:
    start = time.perf_counter()
    table = ensemble.run(executor, workers=workers)
    wall = time.perf_counter() - start
    assert set(table["status"]) == {"finished"}, set(table["status"])
    compute = float(table["wall_seconds"].sum())
    return {"executor": name, "workers": workers, "members": len(table), "wall_seconds": wall,
            "member_compute_seconds": compute, "mean_member_seconds": compute / len(table),
            "overhead_per_member_seconds": (workers * wall - compute) / len(table)}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--members", type=int, default=64)
    parser.add_argument("--member-seconds", type=float, default=0.25)
    parser.add_argument("--no-dask", action="store_true")
    parser.add_argument("--output", default=os.path.join(os.path.dirname(os.path.abspath(__file__)),
                                                         "results", "ensemble.json"))
    args = parser.parse_args()
    machine = describe_machine()
    scratch = tempfile.mkdtemp(prefix="libration-bench-ensemble-")
    runs = []
    try:
        orbits = calibrate(scratch, args.member_seconds)
        print(f"members: {args.members}, about {args.member_seconds:g} s each ({orbits:.0f} orbits, "
              f"{int(orbits * 100)} leapfrog steps)")
        # The 1-process baseline runs first and last, so drifting load on a shared machine
        # affects it as much as the 2-worker runs in between.
        for workers in (1, 2, 1):
            pool = default_executor(workers)
            try:
                # Start the workers before the clock runs (a pool is reused across ensembles).
                list(pool.map(abs, range(4 * workers)))
                result = measure(f"process pool ({workers})", make(os.path.join(scratch, f"pool{len(runs)}"),
                                                                     args.members, orbits), pool, workers)
            finally:
                pool.shutdown()
            runs.append(result)
            print(json.dumps(result))
        if not args.no_dask:
            try:
                import distributed
            except ImportError:
                print("dask.distributed is not installed: no Dask run")
            else:
                cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                                   host="127.0.0.1", dashboard_address="127.0.0.1:0",
                                                   silence_logs=logging.ERROR)
                try:
                    with distributed.Client(cluster) as client:
                        client.run(lambda: __import__("libration"))  # warm the workers' imports
                        result = measure("dask LocalCluster (2)", make(os.path.join(scratch, "dask"),
                                                                       args.members, orbits), client, 2)
                finally:
                    cluster.close()
                runs.append(result)
                print(json.dumps(result))
    finally:
        shutil.rmtree(scratch, ignore_errors=True)
    baseline = float(np.mean([run["wall_seconds"] for run in runs if run["workers"] == 1]))
    baseline_member = float(np.mean([run["mean_member_seconds"] for run in runs if run["workers"] == 1]))
    for run in runs:
        # > 1: members computed slower than alone (cores shared with other work, memory, clocks).
        run["member_slowdown"] = run["mean_member_seconds"] / baseline_member
        run["parallel_efficiency"] = baseline / (run["workers"] * run["wall_seconds"])
        # Share of the workers' time spent inside members (1 - executor overhead share).
        run["compute_fraction"] = run["member_compute_seconds"] / (run["workers"] * run["wall_seconds"])
    report = {"benchmark": "ensemble", "machine": machine, "members": args.members,
              "member_seconds_target": args.member_seconds, "orbits_per_member": orbits,
              "baseline": "mean wall time of the two 1-worker process-pool runs (first and last)", "runs": runs,
              "note": ("member compute time is measured inside each member (wall_seconds); on a shared "
                       "machine other load lowers the efficiency")}
    os.makedirs(os.path.dirname(args.output), exist_ok=True)
    with open(args.output, "w", encoding="utf-8") as fh:
        json.dump(report, fh, indent=1)
        fh.write("\n")
    for run in runs:
        print(f"{run['executor']:24s} wall {run['wall_seconds']:7.2f} s  efficiency {run['parallel_efficiency']:.3f}"
              f"  overhead/member {1e3 * run['overhead_per_member_seconds']:7.1f} ms"
              f"  compute fraction {run['compute_fraction']:.3f}  member slowdown {run['member_slowdown']:.2f}")
    print(f"written {args.output}")


if __name__ == "__main__":
    main()
