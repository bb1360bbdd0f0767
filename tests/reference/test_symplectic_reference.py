"""External checks of the fixed-step compositions (leapfrog, Yoshida 4/6/8).

Sources: Kepler's equation (analytic two-body solution, e.g. Murray & Dermott 1999, Solar
System Dynamics, Sec. 2.4); the figure-eight choreography of Chenciner & Montgomery (2000,
Ann. Math. 152, 881) with the initial conditions computed by Simó and printed there;
Yoshida (1990, Phys. Lett. A 150, 262) for the orders of the compositions.
"""
import numpy as np
import pytest
from scipy.optimize import brentq

import libration as lb
from conftest import kepler_two_body

COMPOSITIONS = ["leapfrog", "yoshida4", "yoshida6", "yoshida8"]


def analytic_two_body(eccentricity, mass_ratio, t):
    """Positions of the two bodies at time t from Kepler's equation M = E - e sin E (a = 1, G = 1)."""
    mu = 1.0 + mass_ratio
    mean = np.sqrt(mu) * t
    e = eccentricity
    k = np.floor(mean / (2 * np.pi))
    m = mean - 2 * np.pi * k
    E = brentq(lambda x: x - e * np.sin(x) - m, 0.0, 2 * np.pi, xtol=1e-15, rtol=1e-15)
    rel = np.array([np.cos(E) - e, np.sqrt(1 - e * e) * np.sin(E), 0.0])
    return np.array([-mass_ratio / mu * rel, 1.0 / mu * rel])


@pytest.mark.parametrize("eccentricity, steps_per_orbit, tol", [(0.0, 200, 1e-9), (0.5, 2000, 1e-9),
                                                                 (0.9, 20000, 1e-8)])
def test_two_body_orbit_matches_keplers_equation(eccentricity, steps_per_orbit, tol):
    mass, position, velocity, period = kepler_two_body(eccentricity)
    p = lb.Propagator(lb.System(mass, position, velocity), "yoshida8", step=period / steps_per_orbit)
    for orbits in (1.0, 2.5, 4.0):
        p.advance(orbits * period)
        expected = analytic_two_body(eccentricity, mass[1], orbits * period)
        assert np.max(np.abs(p.system.position - expected)) < tol


def test_figure_eight_returns_after_one_period():
    # Chenciner & Montgomery (2000), initial conditions by Simó as printed there (from memory):
    # x1 = -x2 = (0.97000436, -0.24308753), x3 = 0, v3 = -2 v1 = (-0.93240737, -0.86473146),
    # period T = 6.32591398 (G = 1, unit masses).
    x1 = np.array([0.97000436, -0.24308753, 0.0])
    v3 = np.array([-0.93240737, -0.86473146, 0.0])
    position = np.array([x1, -x1, np.zeros(3)])
    velocity = np.array([-v3 / 2, -v3 / 2, v3])
    period = 6.32591398
    system = lb.System([1.0, 1.0, 1.0], position, velocity)
    p = lb.Propagator(system, "yoshida8", step=period / 4000)
    p.advance(period)
    # the printed 8-digit data limit the closure to about 1e-7
    assert np.max(np.abs(p.system.position - position)) < 2e-6
    assert np.max(np.abs(p.system.velocity - velocity)) < 2e-6
    # and half-way, the bodies are far from where they started (the check can fail)
    q = lb.Propagator(system, "yoshida8", step=period / 4000)
    q.advance(period / 2)
    assert np.max(np.abs(q.system.position - position)) > 0.5


def _three_body():
    # A hierarchical triple (G = 1): a star, a planet at 1, a planet at 1.6; invented.
    mass = np.array([1.0, 1e-3, 5e-4])
    position = np.array([[0, 0, 0], [1.0, 0, 0], [0, 1.6, 0.05]])
    velocity = np.array([[0, 0, 0], [0, 1.0, 0.02], [-0.79, 0, 0]])
    return lb.System(mass, position, velocity).barycentric()


@pytest.mark.parametrize("method, order, steps", [("leapfrog", 2, (400, 800, 1600)),
                                                  ("yoshida4", 4, (100, 200, 400)),
                                                  ("yoshida6", 6, (40, 80, 160)),
                                                  ("yoshida8", 8, (30, 45, 60))])
def test_measured_convergence_order(method, order, steps):
    system = _three_body()
    span = 6.0
    reference = lb.Propagator(system, "yoshida8", step=span / 2000)
    reference.advance(span)
    errors = []
    for n in steps:
        p = lb.Propagator(system, method, step=span / n)
        p.advance(span)
        errors.append(np.max(np.abs(p.system.position - reference.system.position)))
    measured = np.log(errors[0] / errors[-1]) / np.log(steps[-1] / steps[0])
    assert abs(measured - order) < 0.35, (method, errors, measured)


@pytest.mark.parametrize("method", ["leapfrog", "yoshida4"])
def test_energy_error_is_bounded_without_drift_over_1e5_steps(method):
    mass, position, velocity, period = kepler_two_body(0.6)
    system = lb.System(mass, position, velocity)
    e0 = system.energy()
    p = lb.Propagator(system, method, step=period / 400)
    times = np.linspace(0, 1e5 * p.step, 488)[1:]  # incommensurate with the period
    errors = []
    for t in times:
        p.advance(t)
        errors.append(p.system.energy() / e0 - 1)
    errors = np.array(errors)
    amplitude = errors.max() - errors.min()
    slope = np.polyfit(times, errors, 1)[0]
    assert p.steps == 100000
    # symplectic: the error oscillates; a linear fit changes far less than the oscillation
    assert abs(slope * (times[-1] - times[0])) < 0.05 * amplitude
    assert np.max(np.abs(errors)) < (5e-3 if method == "leapfrog" else 1e-4)
