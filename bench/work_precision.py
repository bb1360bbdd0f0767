"""Work–precision of Bulirsch–Stoer beside scipy's DOP853 (numpy right-hand side).

Two problems, in one run (so the ratios mean something on any machine):
  outer-solar-system  the Sun (with the inner planets' mass), Jupiter, Saturn, Uranus,
                      Neptune and Pluto (Hairer, Lubich & Wanner 2006, Sec. I.2.4, Table 2.1;
                      from memory, as in bench/planetary.py), barycentric, over 10^5 days
  pythagorean         masses 3, 4, 5 at rest at (1, 3), (-2, -1), (1, -1), G = 1 (Burrau 1913;
                      Szebehely & Peters 1967, Astron. J. 72, 876), over 0 <= t <= 10: two close
                      approaches (to ~0.01); beyond that chaos amplifies every error so much
                      that a final-error comparison says nothing about the integrators

For each: bulirsch-stoer at tolerance 1e-6 ... 1e-14 and solve_ivp(method="DOP853") at
rtol = atol = 1e-6 ... 1e-13: final position error against a reference (bulirsch-stoer at
tolerance 1e-15, itself checked against DOP853 at rtol = atol = 1e-14), final relative
energy error, force evaluations and wall time (best of several repeats).  The speed-up at
equal final error is DOP853's time over bulirsch-stoer's time interpolated (log-log) at
DOP853's error.  Writes bench/results/work_precision.json and work_precision.png.

    python bench/work_precision.py [--quick] [--output PATH]
"""
from __future__ import annotations

import argparse
import json
import math
import os
import sys
import time

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)
from _machine import describe_machine  # noqa: E402

import libration as lb  # noqa: E402

from _problems import HLW_G, HLW_MASS, HLW_POSITION, HLW_VELOCITY, UNITS  # noqa: E402,F401



def problems() -> dict[str, tuple[lb.System, float]]:
    oss = lb.System(HLW_MASS, HLW_POSITION, HLW_VELOCITY, units=UNITS).barycentric()
    pyth = lb.System([3.0, 4.0, 5.0], [[1.0, 3.0, 0.0], [-2.0, -1.0, 0.0], [1.0, -1.0, 0.0]],
                     np.zeros((3, 3)))
    return {"outer-solar-system": (oss, 1.0e5), "pythagorean": (pyth, 10.0)}


def numpy_rhs(mass: np.ndarray, G: float):
    """The usual vectorised numpy right-hand side y' = (v, a(x)) for solve_ivp."""
    n = mass.size
    gm = G * mass
    eye = np.eye(n)

    def rhs(t, y):
        x = y[:3 * n].reshape(n, 3)
        dx = x[None, :, :] - x[:, None, :]
        r2 = np.einsum("ijk,ijk->ij", dx, dx) + eye
        inv3 = (1.0 - eye) / (r2 * np.sqrt(r2))
        acc = np.einsum("ij,ijk->ik", gm[None, :] * inv3, dx)
        return np.concatenate([y[3 * n:], acc.ravel()])

    return rhs


def timed(function, repeats: int):
    best, result = math.inf, None
    for _ in range(repeats):
        start = time.perf_counter()
        result = function()
        best = min(best, time.perf_counter() - start)
    return best, result


def run_bs(system: lb.System, t_end: float, tolerance: float):
    p = lb.Propagator(system, "bulirsch-stoer", tolerance=tolerance)
    p.advance(t_end)
    return p.system, p.integrator.evaluations, p.steps


def run_dop853(system: lb.System, t_end: float, rtol: float):
    from scipy.integrate import solve_ivp

    n = system.n
    y0 = np.concatenate([system.position.ravel(), system.velocity.ravel()])
    sol = solve_ivp(numpy_rhs(system.mass, system.G), (0.0, t_end), y0, method="DOP853",
                    rtol=rtol, atol=rtol)
    y = sol.y[:, -1]
    out = lb.System(system.mass, y[:3 * n].reshape(n, 3), y[3 * n:].reshape(n, 3), units=system.units)
    return out, int(sol.nfev), int(sol.t.size - 1)


def position_error(a: lb.System, b: lb.System) -> float:
    """Largest position difference over bodies, relative to the system's size."""
    return float(np.max(np.linalg.norm(a.position - b.position, axis=1)) / np.max(np.linalg.norm(b.position, axis=1)))


def speedups(bs_rows, dop_rows):
    """DOP853 time / bulirsch-stoer time at DOP853's final error (log-log interpolation)."""
    pts = sorted((r["error"], r["seconds"]) for r in bs_rows if r["error"] > 0)
    le = np.log([p[0] for p in pts])
    lt = np.log([p[1] for p in pts])
    out = []
    for row in dop_rows:
        e = row["error"]
        if not (pts[0][0] <= e <= pts[-1][0]):
            continue
        t_bs = float(np.exp(np.interp(math.log(e), le, lt)))
        out.append({"error": e, "dop853_seconds": row["seconds"], "bulirsch_stoer_seconds": t_bs,
                    "speedup": row["seconds"] / t_bs, "dop853_rtol": row["tolerance"]})
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer tolerances and repeats")
    parser.add_argument("--output", default=os.path.join(HERE, "results", "work_precision.json"))
    args = parser.parse_args()
    bs_tols = [1e-6, 1e-8, 1e-10, 1e-12, 1e-14] if args.quick else [10.0 ** -k for k in range(6, 15)]
    dop_tols = [1e-6, 1e-9, 1e-12] if args.quick else [10.0 ** -k for k in range(6, 14)]
    repeats_bs, repeats_dop = (3, 1) if args.quick else (7, 3)
    results = {"machine": describe_machine(), "problems": {}}
    for name, (system, t_end) in problems().items():
        e0 = system.energy()
        reference, _, _ = run_bs(system, t_end, 1e-15)
        check, _, _ = run_dop853(system, t_end, 1e-14)
        rows = {"bulirsch-stoer": [], "dop853": []}
        for method, tols, runner, repeats in (("bulirsch-stoer", bs_tols, run_bs, repeats_bs),
                                              ("dop853", dop_tols, run_dop853, repeats_dop)):
            for tol in tols:
                seconds, (final, evaluations, steps) = timed(lambda: runner(system, t_end, tol), repeats)
                rows[method].append({
                    "tolerance": tol, "error": position_error(final, reference),
                    "energy_error": abs(final.energy() / e0 - 1), "evaluations": evaluations,
                    "steps": steps, "seconds": seconds})
                print(f"{name:20s} {method:15s} tol={tol:7.0e} err={rows[method][-1]['error']:9.2e} "
                      f"dE={rows[method][-1]['energy_error']:9.2e} evals={evaluations:8d} "
                      f"time={seconds * 1e3:9.3f} ms", flush=True)
        ratio = speedups(rows["bulirsch-stoer"], rows["dop853"])
        for r in ratio:
            print(f"{name:20s} speed-up at error {r['error']:8.1e}: {r['speedup']:7.1f}x")
        results["problems"][name] = {
            "t_end": t_end, "bodies": system.n, "reference": "bulirsch-stoer at tolerance 1e-15",
            "reference_vs_dop853_1e-14": position_error(check, reference),
            "rows": rows, "speedup_at_equal_error": ratio,
            "min_speedup": min((r["speedup"] for r in ratio), default=None),
        }
    os.makedirs(os.path.dirname(args.output), exist_ok=True)
    with open(args.output, "w", encoding="utf-8") as f:
        json.dump(results, f, indent=1)
    plot(results, os.path.splitext(args.output)[0] + ".png")
    print(f"wrote {args.output}")


def plot(results: dict, path: str) -> None:
    try:
        import matplotlib
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        print("matplotlib missing: no plot")
        return
    names = list(results["problems"])
    fig, axes = plt.subplots(1, len(names), figsize=(5.5 * len(names), 4.2))
    for ax, name in zip(np.atleast_1d(axes), names):
        entry = results["problems"][name]
        for method, style in (("bulirsch-stoer", "o-"), ("dop853", "s--")):
            rows = [r for r in entry["rows"][method] if r["error"] > 0]
            ax.loglog([r["error"] for r in rows], [r["seconds"] for r in rows], style, label=method)
        ax.set_xlabel("final position error (relative to system size)")
        ax.set_ylabel("wall time [s]")
        speed = entry["min_speedup"]
        ax.set_title(f"{name} (t = {entry['t_end']:g})" + (f", min speed-up {speed:.0f}x" if speed else ""))
        ax.grid(True, which="both", alpha=0.3)
        ax.legend()
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    print(f"wrote {path}")


if __name__ == "__main__":
    main()
