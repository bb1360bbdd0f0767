"""The contract every fixed-step method meets (parametrised over the registry)."""
import numpy as np
import pytest

import libration as lb
from libration.exceptions import MethodError, ValidationError
from libration.methods import METHODS

FIXED = sorted(name for name, cls in METHODS.items() if not cls.adaptive)


def planetary():
    # invented: star + two planets + two test particles (G = 1)
    mass = np.array([1.0, 1e-3, 3e-4, 0.0, 0.0])
    position = np.array([[0, 0, 0], [1.0, 0, 0.01], [0, 1.7, 0], [-2.4, 0, 0], [0, -3.1, 0.1]])
    velocity = np.array([[0, 0, 0], [0, 1.0, 0], [-0.77, 0, 0.01], [0, -0.64, 0], [0.57, 0, 0]])
    return lb.System(mass, position, velocity).barycentric()


@pytest.mark.parametrize("method", FIXED)
def test_split_calls_and_off_grid_outputs_do_not_change_a_bit(method):
    system = planetary()
    one = lb.Propagator(system, method, step=0.05)
    one.advance(20.0)
    many = lb.Propagator(system, method, step=0.05)
    for t in np.linspace(0.013, 20.0, 37):  # off-grid times finish on a copy
        many.advance(t)
        _ = many.system
    assert many.steps == one.steps == 400
    np.testing.assert_array_equal(one.system.position, many.system.position)
    np.testing.assert_array_equal(one.system.velocity, many.system.velocity)


@pytest.mark.parametrize("method", FIXED)
def test_forward_then_backward_returns_to_the_start(method):
    system = planetary()
    forward = lb.Propagator(system, method, step=0.02)
    forward.advance(10.0)
    backward = lb.Propagator(forward.system, method, step=-0.02, time=10.0)
    backward.advance(0.0)
    assert backward.steps == 500
    np.testing.assert_allclose(backward.system.position, system.position, rtol=0, atol=1e-11)
    np.testing.assert_allclose(backward.system.velocity, system.velocity, rtol=0, atol=1e-11)


@pytest.mark.parametrize("method", FIXED)
def test_time_is_t0_plus_steps_times_step(method):
    p = lb.Propagator(planetary(), method, step=0.1, time=5.0)
    p.advance(5.0 + 0.1 * 333)
    assert p.steps == 333
    assert p.time == 5.0 + 0.1 * 333
    p.advance(5.0 + 0.1 * 333 + 0.05)
    assert p.steps == 333  # off grid: finished on a copy


@pytest.mark.parametrize("method", FIXED)
def test_energy_and_angular_momentum_are_conserved(method):
    system = planetary()
    p = lb.Propagator(system, method, step=0.01)
    p.advance(30.0)
    assert abs(p.system.energy() / system.energy() - 1) < 1e-5
    np.testing.assert_allclose(p.system.angular_momentum(), system.angular_momentum(), rtol=1e-10, atol=1e-14)


@pytest.mark.parametrize("value", [0.0, float("nan"), float("inf"), "abc"])
def test_bad_step_is_refused(value):
    with pytest.raises(ValidationError, match="step must be"):
        lb.Propagator(planetary(), "leapfrog", step=value)


def test_unknown_method_lists_the_known_ones():
    with pytest.raises(MethodError, match="leapfrog.*yoshida4.*got 'rk4'"):
        lb.Propagator(planetary(), "rk4", step=0.1)


def test_missing_step_and_unknown_option_and_backward_time():
    with pytest.raises(MethodError, match="needs a fixed step"):
        lb.Propagator(planetary(), "leapfrog")
    with pytest.raises(MethodError, match="has no option 'colour'"):
        lb.Propagator(planetary(), "leapfrog", step=0.1, colour="red")
    p = lb.Propagator(planetary(), "leapfrog", step=0.1)
    p.advance(1.0)
    with pytest.raises(ValidationError, match="negative step"):
        p.advance(0.5)
    for bad in (-1, 0, 1.5, True):
        with pytest.raises(ValidationError, match="threads must be an integer >= 1"):
            lb.Propagator(planetary(), "leapfrog", step=0.1, threads=bad)


def test_propagator_does_not_alias_the_input_system():
    system = planetary()
    before = system.position.copy()
    p = lb.Propagator(system, "leapfrog", step=0.1)
    p.advance(3.0)
    np.testing.assert_array_equal(system.position, before)
    snapshot = p.system
    snapshot.position[:] = 0
    assert np.any(p.system.position != 0)


def test_memory_round_trip_continues_bit_for_bit():
    system = planetary()
    a = lb.Propagator(system, "yoshida4", step=0.05)
    a.advance(7.33)
    b = lb.Propagator.from_memory(a.to_memory())
    assert b.time == a.time and b.steps == a.steps
    a.advance(15.0)
    b.advance(15.0)
    np.testing.assert_array_equal(a.system.position, b.system.position)
    np.testing.assert_array_equal(a.system.velocity, b.system.velocity)
