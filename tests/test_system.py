"""System construction, validation messages and diagnostics."""
import math

import numpy as np
import pytest

import libration as lb
from libration.exceptions import UnitError, ValidationError


def make(mass=(1.0, 1e-3), position=((0, 0, 0), (1, 0, 0)), velocity=((0, 0, 0), (0, 1, 0)), **kw):
    return lb.System(mass, position, velocity, **kw)


def test_arrays_are_contiguous_float64_copies():
    position = np.array([[0, 0, 0], [1, 0, 0]], dtype=np.int32)
    s = make(position=position)
    assert s.position.dtype == np.float64 and s.position.flags.c_contiguous
    position[1, 0] = 7
    assert s.position[1, 0] == 1.0


@pytest.mark.parametrize("field, index, value", [
    ("mass", 1, math.nan), ("mass", 0, math.inf), ("position", 1, math.nan), ("velocity", 0, -math.inf)])
def test_non_finite_values_are_refused_naming_field_and_body(field, index, value):
    data = {"mass": np.array([1.0, 1e-3]), "position": np.array([[0.0, 0, 0], [1, 0, 0]]),
            "velocity": np.array([[0.0, 0, 0], [0, 1, 0]])}
    data[field][index] = value
    with pytest.raises(ValidationError, match=rf"{field}\[{index}.*body {index}.*finite.*{value}"):
        lb.System(**data)


def test_negative_mass_names_body_range_and_value():
    with pytest.raises(ValidationError, match=r"mass\[1\] \(body 1\) must be finite and >= 0, got -0.5"):
        make(mass=(1.0, -0.5))


def test_test_particle_before_massive_body_is_refused():
    with pytest.raises(ValidationError, match="test particle 0 .* before massive body 1"):
        make(mass=(0.0, 1.0))


def test_coincident_massive_bodies_are_refused():
    with pytest.raises(ValidationError, match="bodies 0 .* and 1 .* share the position"):
        make(position=((1, 2, 3), (1, 2, 3)))


def test_two_test_particles_may_share_a_position():
    s = lb.System([1.0, 0, 0], [[0, 0, 0], [1, 0, 0], [1, 0, 0]], np.zeros((3, 3)))
    assert s.n_active == 1 and s.n == 3


def test_zero_total_mass_is_refused():
    with pytest.raises(ValidationError, match="total mass must be > 0"):
        make(mass=(0.0, 0.0))


@pytest.mark.parametrize("kw, message", [
    ({"position": np.zeros((2, 2))}, r"position must have shape \(2, 3\), got \(2, 2\)"),
    ({"velocity": np.zeros((3, 3))}, r"velocity must have shape \(2, 3\), got \(3, 3\)"),
    ({"mass": np.ones((2, 1))}, r"mass must be one-dimensional"),
    ({"radius": [1.0]}, r"radius must have shape \(2,\), got \(1,\)"),
    ({"names": ["a"]}, r"names must have 2 entries"),
    ({"names": ["a", "a"]}, r"names must be unique, 'a' appears twice"),
    ({"radius": [1.0, -1.0]}, r"radius\[1\] \(body 1\) must be >= 0, got -1.0"),
])
def test_shape_and_metadata_errors(kw, message):
    with pytest.raises(ValidationError, match=message):
        make(**kw)


def test_unknown_units_list_the_known_ones():
    with pytest.raises(UnitError, match="nbody, au-msun-day, au-msun-year, si.*'furlongs'"):
        make(units="furlongs")


def test_errors_are_value_errors():
    assert issubclass(ValidationError, ValueError)
    assert issubclass(UnitError, ValueError)


def test_diagnostics_of_a_simple_pair():
    # Two unit masses at +-1/2 on x moving +-v on y: analytic values.
    v = 0.5
    s = lb.System([1.0, 1.0], [[-0.5, 0, 0], [0.5, 0, 0]], [[0, -v, 0], [0, v, 0]])
    assert s.kinetic_energy() == pytest.approx(v * v)
    assert s.potential_energy() == pytest.approx(-1.0)
    assert s.energy() == pytest.approx(v * v - 1.0)
    np.testing.assert_allclose(s.angular_momentum(), [0, 0, 2 * 0.5 * v])
    np.testing.assert_allclose(s.momentum(), 0, atol=1e-15)


def test_barycentric_frame_and_test_particles_carry_no_mass():
    s = lb.System([2.0, 1.0, 0.0], [[1, 0, 0], [4, 0, 0], [9, 9, 9]], [[0, 1, 0], [0, 4, 0], [5, 5, 5]])
    b = s.barycentric()
    r, v = b.center_of_mass()
    np.testing.assert_allclose(r, 0, atol=1e-15)
    np.testing.assert_allclose(v, 0, atol=1e-15)
    assert s.n_active == 2
    # the test particle adds nothing to the energy
    assert s.energy() == pytest.approx(lb.System(s.mass[:2], s.position[:2], s.velocity[:2]).energy())


def test_barycentric_overflow_is_refused_not_returned_as_inf():
    # m v overflows float64 (max ~1.8e308): the frame change must say so, never return inf
    s = lb.System([1e300, 1.0], [[0, 0, 0], [1, 0, 0]], [[0, 1e10, 0], [0, 0, 0]])
    with pytest.raises(ValidationError, match="centre of mass overflows"):
        s.barycentric()
