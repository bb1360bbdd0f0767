"""The outer solar system under the Wisdom–Holman map (issue 3, external checks).

Problem and data: Hairer, Lubich & Wanner, Geometric Numerical Integration, 2nd ed. (Springer
2006), Sec. I.2.4, Table 2.1 ("Data for the outer solar system"): the Sun (with the inner
planets' mass added), Jupiter, Saturn, Uranus, Neptune and Pluto; masses relative to the Sun,
G = 2.95912208286e-4 au^3 / (Msun day^2), heliocentric positions (au) and velocities (au/day)
at 5 September 1994.  Values transcribed from memory of the printed table.
"""
import numpy as np
import pytest

import libration as lb
from libration.units import UnitSystem

HLW_G = 2.95912208286e-4                          # HLW 2006, Sec. I.2.4 (from memory)
HLW_MASS = np.array([1.00000597682,               # Sun + inner planets
                     0.000954786104043,           # Jupiter
                     0.000285583733151,           # Saturn
                     0.0000437273164546,          # Uranus
                     0.0000517759138449,          # Neptune
                     1.0 / 1.3e8])                # Pluto
HLW_POSITION = np.array([[0.0, 0.0, 0.0],
                         [-3.5023653, -3.8169847, -1.5507963],
                         [9.0755314, -3.0458353, -1.6483708],
                         [8.3101420, -16.2901086, -7.2521278],
                         [11.4707666, -25.7294829, -10.8169456],
                         [-15.5387357, -25.2225594, -3.1902382]])
HLW_VELOCITY = np.array([[0.0, 0.0, 0.0],
                         [0.00565429, -0.00412490, -0.00190589],
                         [0.00168318, 0.00483525, 0.00192462],
                         [0.00354178, 0.00137102, 0.00055029],
                         [0.00288930, 0.00114527, 0.00039677],
                         [0.00276725, -0.00170702, -0.00136504]])
HLW_UNITS = UnitSystem("hlw-au-msun-day", HLW_G, "au", "solar mass", "day", None, None)


def outer_solar_system() -> lb.System:
    return lb.System(HLW_MASS, HLW_POSITION, HLW_VELOCITY, units=HLW_UNITS)


def energy_series(step: float, n_steps: int, samples: int, **options) -> np.ndarray:
    """Relative energy error at ``samples`` equally spaced times (on the step grid)."""
    p = lb.Propagator(outer_solar_system(), method="wisdom-holman", step=step, **options)
    e0 = p.energy()
    out = np.empty(samples)
    for k in range(samples):
        p.advance(step * (n_steps * (k + 1) // samples))
        out[k] = p.energy() / e0 - 1.0
    return out


def test_energy_bounded_over_a_million_steps_without_drift():
    """10^6 steps of 100 days (274,000 years): the relative energy error stays bounded, about
    1e-6 (issue 3: "we measured about 1e-6 with a plain C implementation of the same map"; we
    measure 8.5e-7), and a straight-line fit changes by far less than the oscillation (measured
    ~8e-10 against a peak-to-peak 1.7e-6): no secular drift."""
    errors = energy_series(100.0, 10**6, 1000)
    peak_to_peak = errors.max() - errors.min()
    assert np.max(np.abs(errors)) < 2e-6
    assert peak_to_peak > 1e-7                       # the oscillation is there (test has teeth)
    slope, _ = np.polyfit(np.arange(errors.size), errors, 1)
    assert abs(slope * errors.size) < 0.01 * peak_to_peak


@pytest.mark.parametrize("coordinates", ["democratic-heliocentric", "jacobi"])
def test_halving_the_step_quarters_the_energy_error(coordinates):
    """Second order: over 2e5 days the error amplitude falls by ~4 per halving of the step
    (measured 4.01 and 4.00 for 100 -> 50 -> 25 days, democratic heliocentric)."""
    amplitudes = [np.max(np.abs(energy_series(h, int(2e5 / h), 400, coordinates=coordinates)))
                  for h in (100.0, 50.0, 25.0)]
    for coarse, fine in zip(amplitudes, amplitudes[1:]):
        assert 3.6 < coarse / fine < 4.4, amplitudes


def _dop853_reference(t_end: float) -> np.ndarray:
    """Positions at t_end from scipy's DOP853 (rtol = atol = 1e-13) with a numpy right-hand side."""
    from scipy.integrate import solve_ivp
    gm = HLW_G * HLW_MASS

    def rhs(_t, y):
        r = y[:18].reshape(6, 3)
        d = r[None, :, :] - r[:, None, :]
        r2 = np.einsum("ijk,ijk->ij", d, d)
        np.fill_diagonal(r2, 1.0)
        inv3 = r2 ** -1.5
        np.fill_diagonal(inv3, 0.0)
        acc = np.einsum("ij,ijk->ik", inv3 * gm[None, :], d)
        return np.concatenate([y[18:], acc.ravel()])

    y0 = np.concatenate([HLW_POSITION.ravel(), HLW_VELOCITY.ravel()])
    solution = solve_ivp(rhs, (0.0, t_end), y0, method="DOP853", rtol=1e-13, atol=1e-13)
    assert solution.status == 0
    return solution.y[:18, -1].reshape(6, 3)


def test_against_dop853_converges_as_step_squared():
    """270 years (98,617.5 days) against scipy DOP853 at rtol = atol = 1e-13.  Measured largest
    position differences (democratic heliocentric): 9.1e-6 au at 20 days, 2.3e-6 at 10,
    5.7e-7 at 5, 1.4e-7 at 2.5 (Jacobi: 2.6e-6, 6.5e-7, 1.6e-7, 4.1e-8): the step-size
    error, falling as step^2."""
    t_end = 270 * 365.25
    reference = _dop853_reference(t_end)
    for coordinates, bound in (("democratic-heliocentric", 2e-5), ("jacobi", 6e-6)):
        errors = []
        for h in (20.0, 10.0, 5.0):
            n = int(round(t_end / h))
            p = lb.Propagator(outer_solar_system(), method="wisdom-holman", step=t_end / n,
                              coordinates=coordinates)
            p.advance(t_end)
            errors.append(np.max(np.abs(p.system.position - reference)))
        assert errors[0] < bound, (coordinates, errors)
        for coarse, fine in zip(errors, errors[1:]):
            assert 3.6 < coarse / fine < 4.4, (coordinates, errors)
