"""The embedded demo: an invented planetary system with a belt of test particles.

The star "Calyra" (1.05 solar masses) hosts four invented planets and a belt of test
particles between the second and third planet.  None of this describes a real system;
it exists so that ``libration demo`` shows the engine at work in about ten seconds.
"""
from __future__ import annotations

import time as _time
from dataclasses import dataclass

import numpy as np

from .propagator import Propagator
from .system import System

STAR_MASS = 1.05  # solar masses
# name, mass (solar masses), semi-major axis (au), eccentricity, inclination (rad)
PLANETS = [
    ("Calyra b", 3.0e-6, 0.62, 0.020, 0.010),
    ("Calyra c", 4.5e-5, 1.45, 0.045, 0.021),
    ("Calyra d", 8.0e-4, 4.80, 0.038, 0.017),
    ("Calyra e", 2.2e-4, 9.60, 0.055, 0.030),
]
BELT = {"count": 3000, "inner": 2.1, "outer": 3.4, "max_eccentricity": 0.12, "max_inclination": 0.15,
        "seed": 20261202}


def demo_system(belt_count: int | None = None) -> System:
    """Build the demo system (units au-msun-day, barycentric frame)."""
    rng = np.random.default_rng(BELT["seed"])
    count = BELT["count"] if belt_count is None else int(belt_count)
    names = ["Calyra"] + [p[0] for p in PLANETS] + [f"belt{i:05d}" for i in range(count)]
    mass = [p[1] for p in PLANETS] + [0.0] * count
    a = [p[2] for p in PLANETS] + list(rng.uniform(BELT["inner"], BELT["outer"], count))
    e = [p[3] for p in PLANETS] + list(rng.uniform(0.0, BELT["max_eccentricity"], count))
    inc = [p[4] for p in PLANETS] + list(rng.uniform(0.0, BELT["max_inclination"], count))
    k = len(PLANETS) + count
    node, peri, mean = (rng.uniform(0.0, 2 * np.pi, k) for _ in range(3))
    return System.from_elements(STAR_MASS, mass, a, e, inc, node, peri, mean, units="au-msun-day",
                                frame="jacobi", names=names)


@dataclass
class DemoResult:
    """Summary of a demo run."""

    simulated_days: float
    steps: int
    wall_seconds: float
    relative_energy_error: float
    bodies: int
    method: str

    @property
    def steps_per_second(self) -> float:
        return self.steps / self.wall_seconds if self.wall_seconds > 0 else float("inf")

    def summary(self) -> str:
        years = self.simulated_days / 365.25
        return "\n".join([
            f"libration demo: star Calyra, {len(PLANETS)} planets, {self.bodies - len(PLANETS) - 1} "
            f"belt test particles ({self.method})",
            f"  simulated time        {self.simulated_days:,.0f} days ({years:,.1f} years)",
            f"  steps                 {self.steps:,}",
            f"  wall time             {self.wall_seconds:.2f} s",
            f"  steps per second      {self.steps_per_second:,.0f}",
            f"  relative energy error {self.relative_energy_error:.3e}",
        ])


def run_demo(span_days: float = 36525.0, step_days: float = 2.0, method: str | None = None,
             belt_count: int | None = None, progress=None) -> DemoResult:
    """Propagate the demo system and return a :class:`DemoResult`.

    ``method`` defaults to the Wisdom–Holman map where it is available, else ``yoshida4``.
    ``progress`` is an optional callable ``progress(fraction)``.
    """
    from .methods import METHODS

    system = demo_system(belt_count)
    if method is None:
        method = "wisdom-holman" if "wisdom-holman" in METHODS else "leapfrog"
    propagator = Propagator(system, method, step=step_days)
    energy0 = system.energy()
    start = _time.perf_counter()
    chunks = 20
    for k in range(1, chunks + 1):
        propagator.advance(span_days * k / chunks)
        if progress is not None:
            progress(k / chunks)
    wall = _time.perf_counter() - start
    error = abs(propagator.energy() / energy0 - 1.0)
    return DemoResult(propagator.time, propagator.steps, wall, error, system.n, method)
