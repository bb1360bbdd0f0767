"""Peak memory of the demo run against the size of its state arrays.

Target (issue 2): the demo's memory stays within 2x the size of its state arrays plus a
fixed overhead.  numpy registers its allocations with tracemalloc, so the traced peak
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
    system = demo_system(particles)
    state_bytes = 8 * 8 * system.n
    tracemalloc.start()
    tracemalloc.reset_peak()
    base, _ = tracemalloc.get_traced_memory()
    propagator = lb.Propagator(system, method, step=2.0)
    for k in range(1, 11):
        propagator.advance(span_days * k / 10)
        propagator.system  # outputs are part of the job
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    extra = peak - base
    return {"particles": particles, "bodies": system.n, "method": method, "state_bytes": state_bytes,
            "peak_extra_bytes": extra, "ratio_to_state": extra / state_bytes}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--particles", type=int, nargs="+", default=[3000, 30000, 300000])
    parser.add_argument("--span", type=float, default=200.0, help="days per measurement")
    args = parser.parse_args()
    method = "wisdom-holman" if "wisdom-holman" in lb.METHODS else "leapfrog"
    rows = [measure(n, args.span, method) for n in args.particles]
    print(f"{'particles':>10} {'state MB':>10} {'peak extra MB':>14} {'ratio':>7}")
    for row in rows:
        print(f"{row['particles']:>10} {row['state_bytes'] / 1e6:>10.2f} {row['peak_extra_bytes'] / 1e6:>14.2f} "
              f"{row['ratio_to_state']:>7.2f}")
    out = pathlib.Path(__file__).parent / "results" / "demo_memory.json"
    out.parent.mkdir(exist_ok=True)
    out.write_text(json.dumps({"rows": rows}, indent=2))


if __name__ == "__main__":
    main()
