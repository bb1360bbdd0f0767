"""Cost of a long run's files: ``Propagator.run`` with output and checkpoints against bare advance().

Targets (issue 5): with a snapshot every 100 steps and a checkpoint every minute, ``run()``
costs at most 5 % more wall time than ``advance()`` over the same span, and its peak memory
does not grow with the span.

Method, all in one invocation:
- wall time: the demo system (invented star, four planets, N belt test particles,
  wisdom-holman, step 2 days) is advanced over ``--steps`` steps by a bare ``advance(until)``
  and by ``run(until, output=..., every=100 steps, checkpoint=..., checkpoint_interval=60)``,
  alternately, ``--repeats`` times; the best time of each is kept (the least disturbed by
  other processes), and overhead = best run / best advance - 1, in wall time and in CPU
  time of the process; and, within each run, the time spent outside ``advance()``
  (snapshots, file writes, checkpoints) over the time inside it, which does not depend on
  load changes between runs.
- memory: ``run()`` over the span and over four times the span, each in a fresh subprocess
  that reports its peak resident set size (ru_maxrss) and the peak of Python/numpy
  allocations traced by tracemalloc during the run (numpy registers its buffers with it).

Usage: python bench/longrun.py [--particles 3000] [--steps 40000] [--repeats 3]   (about 2 minutes)
Writes bench/results/longrun.json.
"""
from __future__ import annotations

import argparse
import json
import os
import pathlib
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
from _machine import describe_machine  # noqa: E402

STEP = 2.0  # days
EVERY_STEPS = 100

CHILD = """
import json, resource, sys, tempfile, tracemalloc, os
import libration as lb
from libration.demo import demo_system
particles, steps = int(sys.argv[1]), int(sys.argv[2])
p = lb.Propagator(demo_system(particles), "wisdom-holman", step={step})
with tempfile.TemporaryDirectory() as tmp:
    import h5py  # imported before measuring, like the parent's warm runs
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    tracemalloc.start()
    p.run(steps * {step}, output=os.path.join(tmp, "o.h5"), every={every} * {step},
          checkpoint=os.path.join(tmp, "c.ckpt"), checkpoint_interval=60.0)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    size = os.path.getsize(os.path.join(tmp, "o.h5"))
print(json.dumps({{"steps": steps, "traced_peak_bytes": peak, "maxrss_kib_before": before,
                  "maxrss_kib_after": after, "output_bytes": size}}))
""".format(step=STEP, every=EVERY_STEPS)


def time_once(system, steps: int, with_files: bool, directory: str) -> tuple[float, float, float]:
    """Wall and CPU seconds of one run, and the wall seconds spent inside advance() during it."""
    import libration as lb

    p = lb.Propagator(system, "wisdom-holman", step=STEP)
    inside = [0.0]
    advance = p.advance

    def timed_advance(t):
        began = time.perf_counter()
        try:
            return advance(t)
        finally:
            inside[0] += time.perf_counter() - began

    p.advance = timed_advance  # instance attribute: only this propagator is timed
    until = steps * STEP
    began, cpu = time.perf_counter(), time.process_time()
    if with_files:
        p.run(until, output=os.path.join(directory, "o.h5"), every=EVERY_STEPS * STEP,
              checkpoint=os.path.join(directory, "c.ckpt"), checkpoint_interval=60.0)
    else:
        p.advance(until)
    return time.perf_counter() - began, time.process_time() - cpu, inside[0]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--particles", type=int, default=3000)
    parser.add_argument("--steps", type=int, default=40000)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--output", default=str(pathlib.Path(__file__).parent / "results" / "longrun.json"))
    args = parser.parse_args()

    import h5py  # noqa: F401 - import cost is not part of a run

    from libration.demo import demo_system

    machine = describe_machine()
    system = demo_system(args.particles)
    bare, files = [], []
    with tempfile.TemporaryDirectory() as tmp:
        time_once(system, min(args.steps, 2000), True, tmp)  # warm caches, the file system, imports
        for _ in range(args.repeats):
            bare.append(time_once(system, args.steps, False, tmp))
            files.append(time_once(system, args.steps, True, tmp))
    overhead = min(w for w, _, _ in files) / min(w for w, _, _ in bare) - 1.0
    cpu_overhead = min(c for _, c, _ in files) / min(c for _, c, _ in bare) - 1.0
    # Within each run: the time outside advance() (snapshots, file writes, checkpoints) over
    # the time inside it -- immune to load changes between runs.
    internal = min((w - inside) / inside for w, _, inside in files)
    memory = []
    for steps in (args.steps, 4 * args.steps):
        out = subprocess.run([sys.executable, "-c", CHILD, str(args.particles), str(steps)],
                             capture_output=True, text=True, check=True)
        memory.append(json.loads(out.stdout))
    growth_traced = memory[1]["traced_peak_bytes"] / memory[0]["traced_peak_bytes"]
    growth_rss = memory[1]["maxrss_kib_after"] / memory[0]["maxrss_kib_after"]
    result = {
        "benchmark": "longrun",
        "system": f"demo: 5 massive bodies + {args.particles} test particles, wisdom-holman, step {STEP} days",
        "steps": args.steps, "snapshot_every_steps": EVERY_STEPS, "checkpoint_interval_s": 60.0,
        "advance_seconds": [w for w, _, _ in bare], "run_seconds": [w for w, _, _ in files],
        "advance_cpu_seconds": [c for _, c, _ in bare], "run_cpu_seconds": [c for _, c, _ in files],
        "run_seconds_inside_advance": [i for _, _, i in files],
        "overhead_outside_advance": internal,
        "overhead": overhead, "overhead_target": 0.05, "overhead_ok": overhead <= 0.05,
        "cpu_overhead": cpu_overhead,
        "memory": memory,
        "traced_peak_ratio_4x_span": growth_traced, "maxrss_ratio_4x_span": growth_rss,
        "machine": machine,
    }
    pathlib.Path(args.output).parent.mkdir(parents=True, exist_ok=True)
    with open(args.output, "w") as fh:
        json.dump(result, fh, indent=2)
    print(f"advance(): best {min(w for w, _, _ in bare):.3f} s   run() with output + checkpoints: "
          f"best {min(w for w, _, _ in files):.3f} s")
    print(f"wall-time overhead {100 * overhead:+.2f} % (target <= 5 %); CPU-time overhead "
          f"{100 * cpu_overhead:+.2f} % (all threads)")
    print(f"within run(): time outside advance() / time inside = {100 * internal:.2f} % (best run)")
    for m in memory:
        print(f"span {m['steps']:>7} steps: traced peak {m['traced_peak_bytes'] / 2**20:.2f} MiB, "
              f"max RSS {m['maxrss_kib_after'] / 1024:.1f} MiB, output file {m['output_bytes'] / 2**20:.1f} MiB")
    print(f"4x the span: traced peak x{growth_traced:.3f}, max RSS x{growth_rss:.3f}")
    print(f"wrote {args.output}")


if __name__ == "__main__":
    main()
