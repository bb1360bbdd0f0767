"""External checks of Bulirsch–Stoer: Kepler orbits, scipy's DOP853, a head-on merger.

Sources beside each reference value:
* Kepler's equation M = E - e sin E and the orbit x = a (cos E - e), y = a sqrt(1 - e^2) sin E
  (Kepler 1609; any celestial mechanics text, e.g. Murray & Dermott 1999, Sect. 2.4).
* Radial (head-on) fall from rest at separation d0 under G M: the energy integral gives
  t(d) = sqrt(d0^3 / (2 G M)) [sqrt(u (1 - u)) + arccos sqrt(u)], u = d / d0
  (radial Kepler orbit; formula from memory, cross-checked here by quadrature).
* scipy.integrate.solve_ivp with method DOP853 (Hairer, Nørsett & Wanner 1993, II.5).
"""
import math

import numpy as np
import pytest

import libration as lb

scipy_integrate = pytest.importorskip("scipy.integrate")


def kepler_state(e, E):
    r = 1 - e * math.cos(E)
    x = np.array([math.cos(E) - e, math.sqrt(1 - e * e) * math.sin(E), 0.0])
    v = np.array([-math.sin(E), math.sqrt(1 - e * e) * math.cos(E), 0.0]) / r
    return x, v


def closing_error(e, tolerance, E0):
    """|r(P) - r(0)| / |r(0)| for a test particle about a unit mass (G = 1, a = 1, P = 2 pi)."""
    x0, v0 = kepler_state(e, E0)
    s = lb.System([1.0, 0.0], [[0, 0, 0], x0], [[0, 0, 0], v0])
    p = lb.Propagator(s, "bulirsch-stoer", tolerance=tolerance)
    p.advance(2 * math.pi)
    return np.linalg.norm(p.system.position[1] - x0) / np.linalg.norm(x0)


def test_kepler_e099_closes_after_one_period():
    # started at apocentre (E = pi): the orbit closes to 1e-10 relative at tolerance 1e-12
    assert closing_error(0.99, 1e-12, math.pi) < 1e-10


def test_kepler_e09_error_scales_with_tolerance():
    # geometric mean over eight starting phases (one phase alone is noisy: a step landing
    # near pericentre or not changes the error by ~10x); over four decades of tolerance the
    # ratio error / tolerance stays within a factor of ten
    phases = np.linspace(0, 2 * math.pi, 8, endpoint=False)
    ratios = []
    for tolerance in (1e-6, 1e-8, 1e-10):
        errors = [closing_error(0.9, tolerance, E0) for E0 in phases]
        ratios.append(math.exp(np.mean(np.log(errors))) / tolerance)
    assert max(ratios) / min(ratios) < 10.0, ratios
    assert max(ratios) < 1e3


def test_random_few_body_systems_agree_with_dop853():
    rng = np.random.default_rng(2024)
    for trial in range(3):
        n = 4
        mass = rng.uniform(0.5, 1.5, n)
        while True:
            position = rng.uniform(-2, 2, (n, 3))
            d = np.linalg.norm(position[:, None] - position[None], axis=-1) + np.eye(n) * 9
            if d.min() > 0.8:
                break
        velocity = rng.normal(0, 0.3, (n, 3))
        system = lb.System(mass, position, velocity).barycentric()
        t_end = 2.0

        def rhs(t, y):
            x = y[:3 * n].reshape(n, 3)
            dx = x[None, :, :] - x[:, None, :]
            r3 = np.linalg.norm(dx, axis=-1) ** 3 + np.eye(n)
            acc = (mass[None, :, None] * dx / r3[:, :, None]).sum(axis=1)
            return np.concatenate([y[3 * n:], acc.ravel()])

        y0 = np.concatenate([system.position.ravel(), system.velocity.ravel()])
        ref = scipy_integrate.solve_ivp(rhs, (0, t_end), y0, method="DOP853", rtol=1e-13, atol=1e-13)
        p = lb.Propagator(system, "bulirsch-stoer", tolerance=1e-13)
        p.advance(t_end)
        np.testing.assert_allclose(p.system.position.ravel(), ref.y[:3 * n, -1], rtol=0, atol=1e-10)
        np.testing.assert_allclose(p.system.velocity.ravel(), ref.y[3 * n:, -1], rtol=0, atol=1e-10)


@pytest.mark.parametrize("method, time_tolerance", [("bulirsch-stoer", 1e-10), ("yoshida8", 1e-8)])
def test_head_on_merger_at_the_analytic_contact_time(method, time_tolerance):
    d0, total, radius = 1.0, 1.0, 0.05
    u = 2 * radius / d0
    contact = math.sqrt(d0 ** 3 / (2 * total)) * (math.sqrt(u * (1 - u)) + math.acos(math.sqrt(u)))
    quad = scipy_integrate.quad(lambda r: 1 / math.sqrt(2 * total * (1 / r - 1 / d0)), 2 * radius, d0)[0]
    assert abs(contact - quad) < 1e-9
    # shifted and moving, so that momentum and centre of mass are not trivially zero
    drift = np.array([0.3, -0.2, 0.1])
    position = np.array([[-0.5, 0, 0], [0.5, 0, 0]]) + [2.0, 1.0, -1.0]
    velocity = np.zeros((2, 3)) + drift
    s = lb.System([0.5, 0.5], position, velocity, radius=[radius, radius], names=["west", "east"])
    kw = {"tolerance": 1e-13} if method == "bulirsch-stoer" else {"step": 1e-3}
    p = lb.Propagator(s, method, events={"collision": "merge"}, **kw)
    p.advance(1.5)
    (entry,) = p.event_log
    assert entry["kind"] == "collision" and entry["action"] == "merge"
    assert abs(entry["time"] - contact) < time_tolerance
    merged = p.system
    assert merged.n == 1 and merged.names == ["west"]
    assert merged.mass[0] == 1.0
    assert math.isclose(merged.radius[0], radius * 2 ** (1 / 3), rel_tol=1e-15)
    # momentum and centre of mass (which moves uniformly) conserved to roundoff (of ~10^3
    # steps of coordinates of size ~2 before and after the merger)
    np.testing.assert_allclose(merged.velocity[0], drift, rtol=0, atol=1e-13)
    np.testing.assert_allclose(merged.position[0], [2.0, 1.0, -1.0] + drift * 1.5, rtol=0, atol=2e-12)
