"""The gravity kernel against physical facts, each with its source named beside it."""
import numpy as np
import pytest

from libration import _gravity


def test_point_mass_at_one_au_with_iau_constants():
    # GM_sun = 1.3271244e20 m^3 s^-2: nominal solar mass parameter, IAU 2015 Resolution B3
    # (Prsa et al. 2016, AJ 152, 41), as astropy.constants.GM_sun.
    # 1 au = 149597870700 m exactly: IAU 2012 Resolution B2, as astropy.constants.au.
    constants = pytest.importorskip("astropy.constants")
    gm_sun = constants.GM_sun.to_value("m3 / s2")
    au = constants.au.to_value("m")
    assert gm_sun == 1.3271244e20 and au == 149597870700.0
    # Newton's law of gravitation (Principia, 1687, Book III, Prop. 7): a = GM / r^2,
    # pointing at the mass.  Here G = 1 and the "mass" is GM itself.
    position = np.array([[0.0, 0.0, 0.0], [0.0, au, 0.0]])
    acc = _gravity.accelerations(position, np.array([gm_sun, 0.0]), 1, 1.0)
    expected = gm_sun / au**2
    assert acc[1, 0] == 0.0 and acc[1, 2] == 0.0
    assert acc[1, 1] < 0.0
    assert abs(-acc[1, 1] - expected) <= 2e-16 * expected
    # The Sun's pull at Earth's distance, about 5.93 mm s^-2 (from memory).
    assert abs(-acc[1, 1] - 5.93e-3) < 0.005e-3


def test_inverse_square_law_in_si_units():
    # G = 6.67430e-11 m^3 kg^-1 s^-2 (CODATA 2018, Tiesinga et al. 2021, RMP 93, 025010);
    # a 1000 kg mass pulls at 2 m with G * 1000 / 4.
    G = 6.67430e-11
    position = np.array([[1.0, 2.0, 3.0], [1.0, 2.0, 5.0], [1.0, 2.0, 7.0]])
    acc = _gravity.accelerations(position, np.array([1000.0, 0.0, 0.0]), 1, G)
    np.testing.assert_allclose(acc[1], [0.0, 0.0, -G * 1000.0 / 4.0], rtol=2e-16, atol=0)
    # Doubling the distance quarters the pull (the inverse-square law).
    np.testing.assert_allclose(acc[2], acc[1] / 4.0, rtol=2e-16, atol=0)


def fibonacci_shell(count, radius):
    """Nearly uniform points on a sphere (golden-angle spiral; common practice)."""
    k = np.arange(count) + 0.5
    polar = np.arccos(1.0 - 2.0 * k / count)
    azimuth = np.pi * (1.0 + 5.0**0.5) * k
    return radius * np.stack([np.cos(azimuth) * np.sin(polar),
                              np.sin(azimuth) * np.sin(polar), np.cos(polar)], axis=1)


def test_shell_theorem():
    # Newton's shell theorem (Principia, 1687, Book I, Props. 70 and 71): a uniform
    # spherical shell attracts an outside body as if its mass sat at the centre, and
    # exerts no net force inside.  A shell of 4000 equal point masses approximates it.
    count, radius, total_mass = 4000, 1.0, 1.0
    shell = fibonacci_shell(count, radius)
    outside = np.array([[0.0, 0.0, 3.0], [2.0, -1.5, 0.4]])
    inside = np.array([[0.0, 0.0, 0.3], [0.2, -0.1, 0.1]])
    position = np.vstack([shell, outside, inside])
    mass = np.concatenate([np.full(count, total_mass / count), np.zeros(4)])
    acc = _gravity.accelerations(position, mass, count, 1.0, threads=2)
    for k, p in enumerate(outside):
        r = np.linalg.norm(p)
        expected = -total_mass * p / r**3
        assert np.linalg.norm(acc[count + k] - expected) < 1e-5 * np.linalg.norm(expected)
    scale = total_mass / radius**2
    for k in range(len(inside)):
        assert np.linalg.norm(acc[count + 2 + k]) < 3e-5 * scale


def test_momentum_conservation(rng):
    # Newton's third law (Principia, 1687, Law III): the forces of a pair are equal and
    # opposite, so sum_i m_i a_i = 0; the kernel sums each body separately, so this
    # holds to roundoff only.
    n = 400
    position = rng.normal(size=(n, 3))
    mass = rng.uniform(0.01, 1.0, size=n)
    acc = _gravity.accelerations(position, mass, n, 1.0)
    total = np.sum(mass[:, None] * acc, axis=0)
    scale = np.sum(mass * np.linalg.norm(acc, axis=1))
    assert np.linalg.norm(total) < 1e-14 * scale


def test_pair_forces_equal_and_opposite():
    # Newton's third law again, pair by pair: m1 a1 = -m2 a2 for an isolated pair.
    position = np.array([[0.1, 0.2, -0.3], [1.7, -0.4, 0.9]])
    mass = np.array([3.0, 0.25])
    acc = _gravity.accelerations(position, mass, 2, 1.0)
    np.testing.assert_allclose(mass[0] * acc[0], -mass[1] * acc[1], rtol=4e-16, atol=0)
