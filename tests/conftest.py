"""Shared fixtures and helpers for the test suite."""
import numpy as np
import pytest


def kepler_two_body(eccentricity, mass_ratio=1e-3):
    """A two-body system (G = 1, total mass 1 + mass_ratio) starting at periapsis, a = 1.

    Returns (mass, position, velocity, period).  Relative orbit: r_p = 1 - e,
    v_p = sqrt(mu (1 + e) / (a (1 - e))) (vis-viva; any orbital mechanics text).
    """
    mu = 1.0 + mass_ratio
    rp = 1.0 - eccentricity
    vp = np.sqrt(mu * (1 + eccentricity) / rp)
    mass = np.array([1.0, mass_ratio])
    rel_r = np.array([rp, 0.0, 0.0])
    rel_v = np.array([0.0, vp, 0.0])
    position = np.array([-mass_ratio / mu * rel_r, 1.0 / mu * rel_r])
    velocity = np.array([-mass_ratio / mu * rel_v, 1.0 / mu * rel_v])
    return mass, position, velocity, 2 * np.pi / np.sqrt(mu)


@pytest.fixture
def rng():
    return np.random.default_rng(12345)


# Property-based tests explore new random examples on developers' machines; CI replays a fixed
# sequence (derandomize) so that a landing never depends on the luck of the draw.
try:
    from hypothesis import settings as _hypothesis_settings
except ImportError:  # pragma: no cover - hypothesis is in the test extra
    pass
else:
    import os as _os

    _hypothesis_settings.register_profile("ci", derandomize=True, database=None)
    if _os.environ.get("CI"):
        _hypothesis_settings.load_profile("ci")
