"""The embedded demo: an invented planetary system with a belt of test particles.

The star "Calyra" (1.05 solar masses) hosts four invented planets and a belt of test
particles between the second and third planet.  None of this describes a real system;
it exists so that ``libration demo`` shows the engine at work in about ten seconds.
"""
from __future__ import annotations

import time as _time
from dataclasses import dataclass


from .propagator import Propagator
from .system import System

# The system itself is described once, in the scenario file shipped as package data
# (src/libration/data/demo.toml, also written by `libration demo --write FILE`).


def demo_system(belt_count: int | None = None) -> System:
    """Build the demo system from the shipped scenario (units au-msun-day, barycentric frame).

    ``belt_count`` replaces the number of belt test particles (3000 in the scenario).
    """
    from .scenario import demo

    counts = None if belt_count is None else {"belt": int(belt_count)}
    return demo().system(population_counts=counts)


@dataclass
class DemoResult:
    """Summary of a demo run."""

    simulated_days: float
    steps: int
    wall_seconds: float
    relative_energy_error: float
    bodies: int
    method: str
    massive: int = 5

    @property
    def steps_per_second(self) -> float:
        return self.steps / self.wall_seconds if self.wall_seconds > 0 else float("inf")

    def summary(self) -> str:
        years = self.simulated_days / 365.25
        return "\n".join([
            f"libration demo: star Calyra, {self.massive - 1} planets, {self.bodies - self.massive} "
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

    ``method`` defaults to the Wisdom–Holman map (democratic heliocentric).
    ``progress`` is an optional callable ``progress(fraction)``.
    """
    system = demo_system(belt_count)
    if method is None:
        method = "wisdom-holman"
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
    return DemoResult(propagator.time, propagator.steps, wall, error, system.n, method, system.n_active)
