"""The Pythagorean three-body problem with Bulirsch–Stoer (external check).

Source: Burrau (1913, Astron. Nachr. 195, 113) posed it; Szebehely & Peters (1967,
Astron. J. 72, 876) integrated it to its end: masses 3, 4, 5 (G = 1) start at rest at the
vertices of a 3-4-5 right triangle, each opposite the side of its own length,
positions (1, 3), (-2, -1), (1, -1).  Published outcome (Szebehely & Peters 1967): after a
long sequence of close approaches the lightest body (mass 3) is ejected and the two others
leave in the opposite direction as a bound binary (escape settled by t ~ 70, from memory).
"""
import numpy as np
import pytest

import libration as lb


def pythagorean():
    mass = [3.0, 4.0, 5.0]
    position = [[1.0, 3.0, 0.0], [-2.0, -1.0, 0.0], [1.0, -1.0, 0.0]]
    # radii only to log the closest approaches as (recorded) collisions
    return lb.System(mass, position, np.zeros((3, 3)), names=["three", "four", "five"],
                     radius=[0.005, 0.005, 0.005])


def two_body_energy(mass, position, velocity, i, j):
    """Energy of the relative motion of i and j (reduced mass), G = 1."""
    mu = mass[i] * mass[j] / (mass[i] + mass[j])
    dv = velocity[i] - velocity[j]
    return 0.5 * mu * dv @ dv - mass[i] * mass[j] / np.linalg.norm(position[i] - position[j])


@pytest.fixture(scope="module")
def run():
    system = pythagorean()
    p = lb.Propagator(system, "bulirsch-stoer", tolerance=1e-14,
                      events={"escape": "record", "escape_distance": 10.0, "collision": "record"})
    energies = []
    e0 = system.energy()
    for t in np.arange(0.5, 70.01, 0.5):
        p.advance(t)
        energies.append(abs(p.system.energy() / e0 - 1))
    closest = min([e["distance"] for e in p.event_log if e["kind"] == "collision"], default=np.inf)
    return p, np.array(energies), closest


def test_energy_error_stays_below_1e10_through_the_close_approaches(run):
    p, energies, closest = run
    # the close approaches are real (pairs came within 0.01, logged as recorded contacts) ...
    assert closest < 0.01
    # ... and the bound (Szebehely & Peters needed regularisation for it) holds
    assert energies.max() < 1e-10, energies.max()


def test_published_outcome_lightest_ejected_binary_of_the_others(run):
    p, _, _ = run
    s = p.system
    m, x, v = s.mass, s.position, s.velocity
    # bodies four and five form a bound binary
    assert two_body_energy(m, x, v, 1, 2) < 0
    # body three is unbound relative to that binary's centre of mass and moving away
    mb = m[1] + m[2]
    xb = (m[1] * x[1] + m[2] * x[2]) / mb
    vb = (m[1] * v[1] + m[2] * v[2]) / mb
    mu = m[0] * mb / (m[0] + mb)
    dx, dv = x[0] - xb, v[0] - vb
    assert 0.5 * mu * dv @ dv - m[0] * mb / np.linalg.norm(dx) > 0
    assert dx @ dv > 0 and np.linalg.norm(dx) > 20.0


def test_the_ejection_is_reported_as_an_escape_event(run):
    p, _, _ = run
    escapes = [e for e in p.event_log if e["kind"] == "escape"]
    assert [e["names"] for e in escapes] == [["three"]]
    assert 40.0 < escapes[0]["time"] < 70.0
