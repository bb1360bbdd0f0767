"""G in each unit system against astropy's constants (IAU 2015 and CODATA 2018)."""
import numpy as np
import pytest

import libration as lb
from libration.units import get_units

astropy = pytest.importorskip("astropy")
from astropy import constants as const  # noqa: E402
from astropy import units as u  # noqa: E402


def test_si_G_is_codata_2018():
    # astropy ships each CODATA release as its own module: compare with the 2018 one.
    from astropy.constants import codata2018

    assert codata2018.G.reference == "CODATA 2018"
    assert get_units("si").G == codata2018.G.value
    # CODATA 2022 kept the same value of G (astropy's default set), so both agree.
    assert get_units("si").G == const.G.value


def test_gaussian_G_matches_iau_2015_solar_GM_to_its_known_offset():
    # k^2 au^3/day^2 is G*M_sun of the Gaussian system; the IAU 2015 nominal GM_sun
    # (astropy const.GM_sun, 1.3271244e20 m^3 s^-2) agrees to about 1e-8 relative: the
    # modern au was fixed (IAU 2012) so that the two systems nearly coincide.
    gm_gauss = get_units("au-msun-day").G * (u.au ** 3 / u.day ** 2)
    ratio = (gm_gauss / const.GM_sun).to_value(u.dimensionless_unscaled)
    assert abs(ratio - 1) < 1e-7


def test_year_system_is_day_system_scaled_by_julian_year():
    assert get_units("au-msun-year").G == pytest.approx(get_units("au-msun-day").G * 365.25 ** 2, rel=1e-15)


def test_quantities_are_converted_once_at_the_boundary():
    s = lb.System([1.0, 1e-3] * u.M_sun, [[0, 0, 0], [1.495978707e8, 0, 0]] * u.km,
                  [[0, 0, 0], [0, 1, 0]] * u.au / u.day, units="au-msun-day")
    assert s.position[1, 0] == pytest.approx(1.0, rel=1e-12)
    assert s.mass[0] == pytest.approx(1.0, rel=1e-7)
    with pytest.raises(lb.UnitError, match="position has unit s"):
        lb.System([1.0], [[0, 0, 1]] * u.s, [[0, 0, 0]], units="si")
    with pytest.raises(lb.UnitError, match="dimensionless"):
        lb.System([1.0], [[0, 0, 1]] * u.m, [[0, 0, 0]], units="nbody")
    np.testing.assert_equal(s.velocity[1], [0, 1, 0])
