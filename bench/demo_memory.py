"""Peak memory of the demo run against the size of its state arrays.

Target (issue 2): the demo's memory stays within 2x the size of its state arrays plus a
fixed overhead.  Reported as multiples of the state size: memory the propagator holds
between calls, the peak while it is built, the peak while stepping, and the peak while an
output snapshot (``propagator.system``, a new System handed to the caller) is made.  numpy registers its allocations with tracemalloc, so the traced peak
during ``Propagator.advance`` counts every array the run allocates (the state copies,
the kernel's scratch buffers and any temporaries).  The state is mass + radius +
position + velocity: 8 doubles per body.

Usage: python bench/demo_memory.py [--particles N ...]
Writes bench/results/demo_memory.json.
"""
from __future__ import annotations

import argparse
import json
import pathlib
import tracemalloc

import libration as lb
from libration.demo import demo_system


def measure(particles: int, span_days: float, method: str) -> dict:
    """Traced memory of one run, beyond the caller's System, in three views."""
    system = demo_system(particles)
    state_bytes = 8 * 8 * system.n
    tracemalloc.start()
    base, _ = tracemalloc.get_traced_memory()
    propagator = lb.Propagator(system, method, step=2.0)
    held, construction_peak = tracemalloc.get_traced_memory()
    tracemalloc.reset_peak()
    for k in range(1, 11):
        propagator.advance(span_days * k / 10)
    _, stepping_peak = tracemalloc.get_traced_memory()
    tracemalloc.reset_peak()
    for _ in range(3):
        snapshot = propagator.system  # an output: a new System for the caller
        del snapshot
    _, output_peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return {"particles": particles, "bodies": system.n, "method": method, "state_bytes": state_bytes,
            "held_ratio": (held - base) / state_bytes,
            "construction_peak_ratio": (construction_peak - base) / state_bytes,
            "stepping_peak_ratio": (stepping_peak - base) / state_bytes,
            "output_peak_ratio": (output_peak - base) / state_bytes}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--particles", type=int, nargs="+", default=[3000, 30000, 300000])
    parser.add_argument("--span", type=float, default=200.0, help="days per measurement")
    args = parser.parse_args()
    method = "wisdom-holman" if "wisdom-holman" in lb.METHODS else "leapfrog"
    rows = [measure(n, args.span, method) for n in args.particles]
    print("memory beyond the caller's System, as a multiple of its state arrays (8 doubles per body)")
    print(f"{'particles':>10} {'state MB':>9} {'held':>6} {'building':>9} {'stepping':>9} {'+output':>8}")
    for row in rows:
        print(f"{row['particles']:>10} {row['state_bytes'] / 1e6:>9.2f} {row['held_ratio']:>6.2f} "
              f"{row['construction_peak_ratio']:>9.2f} {row['stepping_peak_ratio']:>9.2f} "
              f"{row['output_peak_ratio']:>8.2f}")
    out = pathlib.Path(__file__).parent / "results" / "demo_memory.json"
    out.parent.mkdir(exist_ok=True)
    out.write_text(json.dumps({"rows": rows}, indent=2))


if __name__ == "__main__":
    main()
