"""Bulirsch–Stoer: contract, dense output, exact restarts, statuses and option checks."""
import math
import warnings

import numpy as np
import pytest

import libration as lb
from libration import _extrapolation
from libration.bulirsch_stoer import BulirschStoer
from libration.exceptions import MethodError, ValidationError
from libration.methods import STATUS_MAX_STEPS, STATUS_OK, STATUS_STEP_UNDERFLOW, get_method


def planetary():
    # invented: star + two planets + two test particles (G = 1)
    mass = np.array([1.0, 1e-3, 3e-4, 0.0, 0.0])
    position = np.array([[0, 0, 0], [1.0, 0, 0.01], [0, 1.7, 0], [-2.4, 0, 0], [0, -3.1, 0.1]])
    velocity = np.array([[0, 0, 0], [0, 1.0, 0], [-0.77, 0, 0.01], [0, -0.64, 0], [0.57, 0, 0]])
    return lb.System(mass, position, velocity).barycentric()


def kepler_state(e, E):
    """Relative state (G M = 1, a = 1) at eccentric anomaly E (Kepler's equation; any text)."""
    r = 1 - e * math.cos(E)
    x = np.array([math.cos(E) - e, math.sqrt(1 - e * e) * math.sin(E), 0.0])
    v = np.array([-math.sin(E), math.sqrt(1 - e * e) * math.cos(E), 0.0]) / r
    return x, v


def kepler_at(e, t, E0=0.0):
    """Relative position at time t after eccentric anomaly E0 (Newton on Kepler's equation)."""
    M = (E0 - e * math.sin(E0)) + t
    E = M if e < 0.8 else math.pi
    for _ in range(60):
        E -= (E - e * math.sin(E) - M) / (1 - e * math.cos(E))
    return kepler_state(e, E)


def test_registered_adaptive_and_coefficient_identities():
    cls = get_method("bulirsch-stoer")
    assert cls is BulirschStoer and cls.adaptive
    # scratch covers the tableau, the substep buffers and the gravity workspace
    n = 7
    assert _extrapolation.scratch_size(n) >= 10 * 6 * n + 7 * n
    # initial target line grows with the requested digits and stays inside the tableau
    lines = [_extrapolation.initial_order(tol) for tol in (1e-4, 1e-8, 1e-12, 1e-15)]
    assert lines == sorted(lines) and 2 <= lines[0] and lines[-1] <= 9


@pytest.mark.parametrize("options, error", [
    ({"absolute_tolerance": -1.0}, MethodError),
    ({"max_steps": 0}, MethodError),
    ({"max_steps": 2.5}, MethodError),
    ({"min_step": float("nan")}, MethodError),
    ({"order": 3}, MethodError),
], ids=["negative-atol", "zero-max-steps", "float-max-steps", "nan-min-step", "unknown-option"])
def test_bad_options_raise_naming_the_option(options, error):
    with pytest.raises(error) as info:
        lb.Propagator(planetary(), "bulirsch-stoer", **options)
    assert list(options)[0] in str(info.value)


def test_step_and_tolerance_misuse_raise():
    with pytest.raises(MethodError):
        lb.Propagator(planetary(), "bulirsch-stoer", step=0.1)
    with pytest.raises(ValidationError):
        lb.Propagator(planetary(), "bulirsch-stoer", tolerance=-1e-9)
    with pytest.raises(ValidationError):
        lb.Propagator(planetary(), "bulirsch-stoer", tolerance=1e-18)


def test_dense_output_matches_kepler_inside_long_steps():
    e = 0.5
    x0, v0 = kepler_state(e, 0.0)
    s = lb.System([1.0, 0.0], [[0, 0, 0], x0], [[0, 0, 0], v0])
    p = lb.Propagator(s, "bulirsch-stoer", tolerance=1e-12)
    worst = 0.0
    for t in np.linspace(0.1, 2 * math.pi, 53):
        p.advance(t)
        start, end = p.integrator.last_step
        assert start <= t <= end          # outputs come from inside an accepted step
        x, _ = kepler_at(e, t)
        worst = max(worst, np.linalg.norm(p.system.position[1] - x))
    assert worst < 1e-10
    # the steps are long compared with the output spacing: dense output did the work
    assert p.steps < 53


def test_outputs_never_change_the_accepted_steps():
    system = planetary()
    one = lb.Propagator(system, "bulirsch-stoer", tolerance=1e-11)
    one.advance(20.0)
    many = lb.Propagator(system, "bulirsch-stoer", tolerance=1e-11)
    for t in np.linspace(0.013, 20.0, 37):
        many.advance(t)
        _ = many.system
    np.testing.assert_array_equal(one.integrator.control, many.integrator.control)
    np.testing.assert_array_equal(one.system.position, many.system.position)
    np.testing.assert_array_equal(one.system.velocity, many.system.velocity)


def test_memory_restore_continues_bit_for_bit():
    system = planetary()
    straight = lb.Propagator(system, "bulirsch-stoer", tolerance=1e-10)
    straight.advance(30.0)
    first = lb.Propagator(system, "bulirsch-stoer", tolerance=1e-10)
    first.advance(13.7)
    resumed = lb.Propagator.from_memory(first.to_memory())
    resumed.advance(30.0)
    assert resumed.steps == straight.steps
    np.testing.assert_array_equal(resumed.integrator.control, straight.integrator.control)
    np.testing.assert_array_equal(resumed.system.position, straight.system.position)
    np.testing.assert_array_equal(resumed.system.velocity, straight.system.velocity)


def test_deterministic_and_thread_count_independent():
    system = planetary()
    runs = []
    for threads in (1, 2, 1):
        p = lb.Propagator(system, "bulirsch-stoer", tolerance=1e-10, threads=threads)
        p.advance(5.0)
        runs.append((p.integrator.control.copy(), p.system.position))
    for control, position in runs[1:]:
        np.testing.assert_array_equal(control, runs[0][0])
        np.testing.assert_array_equal(position, runs[0][1])


def test_nonzero_start_time():
    system = planetary()
    a = lb.Propagator(system, "bulirsch-stoer", tolerance=1e-10)
    a.advance(4.0)
    b = lb.Propagator(system, "bulirsch-stoer", tolerance=1e-10, time=100.0)
    b.advance(104.0)
    assert b.time == 104.0
    np.testing.assert_allclose(b.system.position, a.system.position, rtol=0, atol=1e-12)


def test_energy_bound_and_test_particles_follow_their_orbits():
    system = planetary()
    p = lb.Propagator(system, "bulirsch-stoer", tolerance=1e-12)
    e0 = system.energy()
    p.advance(50.0)
    assert abs(p.energy() / e0 - 1) < 1e-10
    # a test particle feels gravity: it has moved along its (nearly circular) orbit
    r = np.linalg.norm(p.system.position[3] - p.system.position[0])
    assert 2.0 < r < 3.0


def test_max_steps_ends_with_a_status_and_warning_not_an_exception():
    p = lb.Propagator(planetary(), "bulirsch-stoer", tolerance=1e-10, max_steps=5)
    with pytest.warns(RuntimeWarning, match="max_steps"):
        report = p.advance(100.0)
    assert report.status == STATUS_MAX_STEPS and p.status == STATUS_MAX_STEPS
    assert report.steps_done == 5 and p.time < 100.0
    # the run can go on with another call
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        p.advance(100.0)
    assert p.steps == 10


def test_step_underflow_ends_with_a_status():
    # a near-collision needs steps far below min_step
    mass = [1.0, 1.0]
    s = lb.System(mass, [[0, 0, 0], [1.0, 0, 0]], [[0, 0, 0], [0, 1e-4, 0]])
    p = lb.Propagator(s, "bulirsch-stoer", tolerance=1e-12, min_step=1e-3)
    with pytest.warns(RuntimeWarning, match="minimum"):
        report = p.advance(5.0)
    assert report.status == STATUS_STEP_UNDERFLOW
    assert p.time < 5.0


def test_state_at_outside_the_last_step_raises():
    p = lb.Propagator(planetary(), "bulirsch-stoer", tolerance=1e-10)
    p.advance(1.0)
    start, end = p.integrator.last_step
    with pytest.raises(ValidationError):
        p.integrator.state_at(start - 1.0)
    assert p.integrator.advance_to(start).status == STATUS_OK  # already past: no step
    assert p.integrator.last_step == (start, end)


def test_backward_requests_raise():
    p = lb.Propagator(planetary(), "bulirsch-stoer", tolerance=1e-10)
    p.advance(3.0)
    start, _ = p.integrator.last_step
    with pytest.raises(ValidationError, match="forward only"):
        p.advance(start - 0.5)
