"""Reference problems shared by the benchmarks.

The outer solar system of Hairer, Lubich & Wanner, Geometric Numerical Integration (2nd ed.,
2006), Sec. I.2.4 (Sun with the four inner planets' masses added, Jupiter, Saturn, Uranus,
Neptune, Pluto; AU, days, solar masses; values typed from memory, the same data as
tests/reference/test_outer_solar_system.py).
"""
from __future__ import annotations

import libration as lb
from libration.units import UnitSystem

HLW_G = 2.95912208286e-4
HLW_MASS = [1.00000597682, 0.000954786104043, 0.000285583733151, 0.0000437273164546,
            0.0000517759138449, 1.0 / 1.3e8]
HLW_POSITION = [[0, 0, 0], [-3.5023653, -3.8169847, -1.5507963], [9.0755314, -3.0458353, -1.6483708],
                [8.3101420, -16.2901086, -7.2521278], [11.4707666, -25.7294829, -10.8169456],
                [-15.5387357, -25.2225594, -3.1902382]]
HLW_VELOCITY = [[0, 0, 0], [0.00565429, -0.00412490, -0.00190589], [0.00168318, 0.00483525, 0.00192462],
                [0.00354178, 0.00137102, 0.00055029], [0.00288930, 0.00114527, 0.00039677],
                [0.00276725, -0.00170702, -0.00136504]]
UNITS = UnitSystem("hlw-au-msun-day", HLW_G, "au", "solar mass", "day", None, None)


def outer_solar_system() -> lb.System:
    """The Hairer–Lubich–Wanner outer solar system, in its barycentric frame."""
    return lb.System(HLW_MASS, HLW_POSITION, HLW_VELOCITY, units=UNITS).barycentric()
