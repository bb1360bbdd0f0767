"""A century of the solar system against the JPL DE421 ephemeris (issue 3, external check).

Source: DE421, Folkner, Williams & Boggs (2008/2009), IPN Progress Report 42-178; the Chebyshev
arrays of the ``de421`` package read by ``jplephem.ephem.Ephemeris``.  Positions are barycentric
(ICRF, TDB) in km and km/day; the Moon's series is geocentric and the Earth-Moon barycentre's
barycentric, split with the ephemeris's EMRAT.  GM values (au^3/day^2: GMS, GM1..GM9, GMB) and
the au in km (AU) are the ephemeris's own constants.

A Newtonian point-mass model of the Sun, eight planets, the Moon and Pluto started from DE421 on
1950 January 1.0 TDB (JD 2433282.5) and run for 100 Julian years leaves the outer planets off
DE421 by what it leaves out (relativity, the asteroids, figure effects).  Measured here with a
1-day step (the same to 1 km for 0.1-1 day and for both coordinate choices): Jupiter 377 km,
Saturn 70, Uranus 71, Neptune 73, Pluto 20 km.  Issue 3 quotes a careful reference integration
with about 500 km for Jupiter and under 250 km for Saturn to Neptune.
"""
import numpy as np
import pytest

import libration as lb

de421 = pytest.importorskip("de421")
ephem = pytest.importorskip("jplephem.ephem")

BODIES = ["sun", "mercury", "venus", "earth", "moon", "mars", "jupiter", "saturn", "uranus",
          "neptune", "pluto"]
START = 2433282.5          # 1950 January 1.0 TDB
SPAN = 100 * 365.25        # days
# Per-planet bounds (km): the measured model-level differences above plus about 10% for Jupiter
# and 30-100% for the others -- tight enough that a 1e-9 error in the Sun's GM (which moves
# Jupiter to 461 km and Saturn to 127 km) fails.
BOUNDS_KM = {"jupiter": 420.0, "saturn": 100.0, "uranus": 100.0, "neptune": 100.0, "pluto": 40.0}


@pytest.fixture(scope="module")
def ephemeris():
    return ephem.Ephemeris(de421)


def de421_state(eph, jd):
    """Barycentric positions (km) and velocities (km/day) of BODIES at TDB Julian date jd."""
    emb_r, emb_v = eph.position_and_velocity("earthmoon", jd)
    moon_r, moon_v = eph.position_and_velocity("moon", jd)      # geocentric
    earth_share = 1.0 / (1.0 + eph.EMRAT)
    moon_share = eph.EMRAT / (1.0 + eph.EMRAT)
    position, velocity = [], []
    for name in BODIES:
        if name == "earth":
            r, v = emb_r - earth_share * moon_r, emb_v - earth_share * moon_v
        elif name == "moon":
            r, v = emb_r + moon_share * moon_r, emb_v + moon_share * moon_v
        else:
            r, v = eph.position_and_velocity(name, jd)
        position.append(np.ravel(r))
        velocity.append(np.ravel(v))
    return np.array(position), np.array(velocity)


def de421_gm(eph):
    """GM of BODIES in au^3/day^2 from the ephemeris constants."""
    earth_moon = eph.GMB
    return np.array([eph.GMS, eph.GM1, eph.GM2, earth_moon * eph.EMRAT / (1.0 + eph.EMRAT),
                     earth_moon / (1.0 + eph.EMRAT), eph.GM4, eph.GM5, eph.GM6, eph.GM7, eph.GM8,
                     eph.GM9])


def century_errors(eph, *, step=1.0, sun_gm_factor=1.0, au_km=None,
                   coordinates="democratic-heliocentric"):
    """Distance (km) of each outer planet from DE421 after 100 years from 1950."""
    au = eph.AU if au_km is None else au_km
    position, velocity = de421_state(eph, START)
    gm = de421_gm(eph)
    # au-msun-day has G = k^2, which is DE421's GMS (the Gaussian constant squared), so GM / GMS
    # are masses in solar masses
    assert abs(eph.GMS / lb.UNIT_SYSTEMS["au-msun-day"].G - 1) < 1e-15
    mass = gm / eph.GMS
    mass[0] *= sun_gm_factor
    system = lb.System(mass, position / au, velocity / au, units="au-msun-day", names=BODIES)
    p = lb.Propagator(system, method="wisdom-holman", step=step, coordinates=coordinates)
    p.advance(SPAN)
    end, _ = de421_state(eph, START + SPAN)
    distance = np.linalg.norm(p.system.position * au - end, axis=1)
    return {name: distance[BODIES.index(name)] for name in BOUNDS_KM}


def within_bounds(errors):
    return all(errors[name] < bound for name, bound in BOUNDS_KM.items())


@pytest.mark.parametrize("coordinates", ["democratic-heliocentric", "jacobi"])
def test_century_matches_de421_outer_planets(ephemeris, coordinates):
    errors = century_errors(ephemeris, coordinates=coordinates)
    assert within_bounds(errors), errors
    # the agreement is at the model level, not accidental: Jupiter's error is dominated by
    # what the model omits, so it is well above the step-size error
    assert errors["jupiter"] > 100.0, errors


@pytest.mark.parametrize("wrong", [
    {"sun_gm_factor": 1 + 1e-9},        # GM of the Sun off by 1e-9 (Jupiter -> ~461 km)
    {"au_km": 1.496e8},                 # a rounded au (1.4e-5 relative): millions of km
    {"step": 10.0},                     # too large a step for the Moon and inner planets
])
def test_deliberately_wrong_runs_fail(ephemeris, wrong):
    errors = century_errors(ephemeris, **wrong)
    assert not within_bounds(errors), errors
