"""Unit systems and the gravitational constant in each.

=============  ===================  ==========================================================
name           units                G
=============  ===================  ==========================================================
nbody          dimensionless        1
au-msun-day    au, solar mass, day  k**2, k = 0.01720209895 (Gaussian gravitational constant)
au-msun-year   au, solar mass,      k**2 * 365.25**2 (Julian year of 365.25 days)
               Julian year
si             m, kg, s             6.67430e-11 m^3 kg^-1 s^-2 (CODATA 2018)
=============  ===================  ==========================================================

In the astronomical systems the mass unit is the Sun's mass *as implied by the
Gaussian constant*: G * M_sun = k**2 au^3 / day^2 exactly.  Quantities from astropy are
converted once, at the boundary, with the IAU 2012 au (149 597 870 700 m), the day of
86 400 s, the Julian year and astropy's IAU 2015 nominal solar mass parameter
(GM_sun / G); astropy is an optional extra (``pip install libration[units]``).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .exceptions import UnitError

GAUSSIAN_K = 0.01720209895
"""Gaussian gravitational constant (IAU 1976 system of astronomical constants)."""
CODATA2018_G = 6.67430e-11
"""Newtonian constant of gravitation, CODATA 2018, m^3 kg^-1 s^-2."""
AU_M = 149_597_870_700.0
"""Astronomical unit in metres (IAU 2012 Resolution B2)."""
DAY_S = 86_400.0
JULIAN_YEAR_DAYS = 365.25


@dataclass(frozen=True)
class UnitSystem:
    """A unit system: its name, G, and the SI size of its units (None for nbody)."""

    name: str
    G: float
    length: str
    mass: str
    time: str
    length_si: float | None
    time_si: float | None

    @property
    def mass_si(self) -> float | None:
        """The mass unit in kg, where the system is dimensional (needs astropy for AU systems)."""
        if self.name == "si":
            return 1.0
        if self.length_si is None:
            return None
        try:
            from astropy import constants
        except ImportError as exc:  # pragma: no cover - optional extra
            raise UnitError("converting solar masses to kg needs astropy: pip install libration[units]") from exc
        return float(constants.GM_sun.value / constants.G.value)


UNIT_SYSTEMS: dict[str, UnitSystem] = {
    "nbody": UnitSystem("nbody", 1.0, "length unit", "mass unit", "time unit", None, None),
    "au-msun-day": UnitSystem("au-msun-day", GAUSSIAN_K**2, "au", "solar mass", "day", AU_M, DAY_S),
    "au-msun-year": UnitSystem("au-msun-year", (GAUSSIAN_K * JULIAN_YEAR_DAYS) ** 2, "au", "solar mass",
                               "Julian year", AU_M, DAY_S * JULIAN_YEAR_DAYS),
    "si": UnitSystem("si", CODATA2018_G, "m", "kg", "s", 1.0, 1.0),
}


def get_units(units: str | UnitSystem) -> UnitSystem:
    """Return the :class:`UnitSystem` called ``units`` (or ``units`` itself)."""
    if isinstance(units, UnitSystem):
        return units
    if not isinstance(units, str) or units not in UNIT_SYSTEMS:
        raise UnitError(f"units must be one of {', '.join(UNIT_SYSTEMS)}, got {units!r}")
    return UNIT_SYSTEMS[units]


def _astropy_unit(system: UnitSystem, kind: str):
    from astropy import units as u

    if system.name == "si":
        return {"length": u.m, "mass": u.kg, "time": u.s, "speed": u.m / u.s}[kind]
    length = u.au
    time = u.day if system.name == "au-msun-day" else u.day * JULIAN_YEAR_DAYS
    mass = u.Unit(system.mass_si * u.kg)
    return {"length": length, "mass": mass, "time": time, "speed": length / time}[kind]


def to_value(value, system: UnitSystem, kind: str, field: str) -> np.ndarray:
    """Convert ``value`` (array-like or astropy Quantity) to float64 in ``system``'s ``kind`` unit.

    ``kind`` is one of ``"length"``, ``"mass"``, ``"time"``, ``"speed"``.  Plain numbers are
    taken to be in the system's units already.
    """
    if hasattr(value, "unit") and hasattr(value, "to_value"):
        if system.name == "nbody":
            raise UnitError(f"{field} is an astropy Quantity but units='nbody' is dimensionless; "
                            f"pass plain numbers or choose 'au-msun-day', 'au-msun-year' or 'si'")
        try:
            return np.asarray(value.to_value(_astropy_unit(system, kind)), dtype=np.float64)
        except Exception as exc:  # astropy raises UnitConversionError
            raise UnitError(f"{field} has unit {value.unit}, which cannot be converted to a "
                            f"{kind} in the {system.name} system: {exc}") from exc
    try:
        return np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise UnitError(f"{field} must be numeric, got {type(value).__name__}") from exc
