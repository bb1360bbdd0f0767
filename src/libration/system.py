"""System: the bodies of an n-body problem as contiguous float64 arrays, with diagnostics."""
from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from . import _gravity
from .exceptions import ValidationError
from .units import UnitSystem, get_units, to_value


def _check_finite(array: np.ndarray, field: str) -> None:
    bad = ~np.isfinite(array)
    if bad.any():
        index = np.argwhere(bad)[0]
        body = int(index[0])
        where = f"{field}[{body}]" if array.ndim == 1 else f"{field}[{body}, {int(index[1])}]"
        raise ValidationError(f"{where} (body {body}) must be finite, got {array[tuple(index)]}")


def _as_vectors(value, n: int | None, field: str, system: UnitSystem, kind: str) -> np.ndarray:
    array = np.ascontiguousarray(to_value(value, system, kind, field), dtype=np.float64)
    if array.ndim == 1 and array.shape == (3,) and n in (None, 1):
        array = array.reshape(1, 3)
    if array.ndim != 2 or array.shape[1] != 3 or (n is not None and array.shape[0] != n):
        expected = f"({n}, 3)" if n is not None else "(n, 3)"
        raise ValidationError(f"{field} must have shape {expected}, got {array.shape}")
    _check_finite(array, field)
    return array


class System:
    """Bodies of a gravitating system: massive bodies first, then test particles.

    Parameters
    ----------
    mass : array_like, shape (n,)
        Masses in the mass unit of ``units`` (solar masses, kg, ...).  Zero marks a test
        particle: it feels gravity but sources none.  Test particles must come after every
        massive body.
    position : array_like, shape (n, 3)
        Positions in the length unit (au, m, ...), in any inertial frame.
    velocity : array_like, shape (n, 3)
        Velocities in length unit per time unit.
    units : str or UnitSystem
        ``"nbody"`` (G = 1), ``"au-msun-day"``, ``"au-msun-year"`` or ``"si"``.
    names : sequence of str, optional
        One unique name per body (default ``"body0"``, ``"body1"``, ...).
    radius : array_like, shape (n,), optional
        Physical radii in the length unit, used by collision events (default 0).

    Notes
    -----
    The input arrays are always copied (as C-contiguous float64), so later changes to the
    caller's arrays never reach the system.  astropy Quantities are converted once.
    """

    def __init__(self, mass, position, velocity, units: str | UnitSystem = "nbody",
                 names: Sequence[str] | None = None, radius=None) -> None:
        self.units = get_units(units)
        mass = np.array(to_value(mass, self.units, "mass", "mass"), dtype=np.float64, order="C", ndmin=1)
        if mass.ndim != 1:
            raise ValidationError(f"mass must be one-dimensional, shape (n,), got {mass.shape}")
        n = mass.shape[0]
        if n == 0:
            raise ValidationError("a System needs at least one body, got 0")
        _check_finite(mass, "mass")
        negative = np.flatnonzero(mass < 0)
        if negative.size:
            i = int(negative[0])
            raise ValidationError(f"mass[{i}] (body {i}) must be finite and >= 0, got {mass[i]}")
        massive = mass > 0
        if not massive.any():
            raise ValidationError("the total mass must be > 0 (at least one massive body), got 0")
        n_active = int(np.count_nonzero(massive))
        if not massive[:n_active].all():
            first_test = int(np.flatnonzero(~massive)[0])
            late = int(np.flatnonzero(massive[first_test:])[0]) + first_test
            raise ValidationError(
                f"test particle {first_test} (mass 0) is listed before massive body {late} "
                f"(mass {mass[late]}); list every massive body first, then the test particles")
        self.mass = mass
        self.position = _as_vectors(position, n, "position", self.units, "length")
        self.velocity = _as_vectors(velocity, n, "velocity", self.units, "speed")
        if radius is None:
            self.radius = np.zeros(n)
        else:
            self.radius = np.array(to_value(radius, self.units, "length", "radius"), dtype=np.float64,
                                   order="C", ndmin=1)
            if self.radius.shape != (n,):
                raise ValidationError(f"radius must have shape ({n},), got {self.radius.shape}")
            _check_finite(self.radius, "radius")
            if (self.radius < 0).any():
                i = int(np.flatnonzero(self.radius < 0)[0])
                raise ValidationError(f"radius[{i}] (body {i}) must be >= 0, got {self.radius[i]}")
        if names is None:
            self.names = [f"body{i}" for i in range(n)]
        else:
            self.names = [str(name) for name in names]
            if len(self.names) != n:
                raise ValidationError(f"names must have {n} entries (one per body), got {len(self.names)}")
            if len(set(self.names)) != n:
                seen: set[str] = set()
                duplicate = next(name for name in self.names if name in seen or seen.add(name))
                raise ValidationError(f"names must be unique, {duplicate!r} appears twice")
        self.n_active = n_active
        self._check_coincident()

    def _check_coincident(self) -> None:
        """Refuse a massive body sharing its exact position with any other body."""
        order = np.lexsort(self.position.T[::-1])
        sorted_position = self.position[order]
        same = np.all(sorted_position[1:] == sorted_position[:-1], axis=1)
        for k in np.flatnonzero(same):
            i, j = sorted(int(b) for b in (order[k], order[k + 1]))
            if i < self.n_active or j < self.n_active:
                raise ValidationError(
                    f"bodies {i} ({self.names[i]}) and {j} ({self.names[j]}) share the position "
                    f"{self.position[i].tolist()}; a massive body must not coincide with another body")

    @classmethod
    def _trusted(cls, mass: np.ndarray, position: np.ndarray, velocity: np.ndarray, units: UnitSystem,
                 names: list[str], radius: np.ndarray) -> System:
        """Wrap arrays the engine itself produced (already validated copies): no copy, no checks."""
        self = cls.__new__(cls)
        self.units, self.mass, self.position, self.velocity = units, mass, position, velocity
        self.radius, self.names = radius, list(names)
        self.n_active = int(np.count_nonzero(mass > 0))
        return self

    # ------------------------------------------------------------------ basics
    @property
    def G(self) -> float:
        """Gravitational constant in this system's units."""
        return self.units.G

    @property
    def n(self) -> int:
        """Number of bodies (massive and test particles)."""
        return self.mass.shape[0]

    def __len__(self) -> int:
        return self.n

    def __repr__(self) -> str:
        return (f"System(n={self.n}, n_active={self.n_active}, units={self.units.name!r}, "
                f"total_mass={self.mass.sum():.6g})")

    def copy(self) -> System:
        """An independent copy."""
        return System(self.mass, self.position, self.velocity, self.units, self.names, self.radius)

    # ------------------------------------------------------------- diagnostics
    def kinetic_energy(self) -> float:
        """Kinetic energy of the massive bodies (mass unit * length^2 / time^2)."""
        v2 = np.einsum("ij,ij->i", self.velocity[:self.n_active], self.velocity[:self.n_active])
        return float(0.5 * np.dot(self.mass[:self.n_active], v2))

    def potential_energy(self, softening: float = 0.0) -> float:
        """Potential energy of the massive bodies, computed in the compiled layer."""
        return float(_gravity.potential_energy(self.position, self.mass, self.n_active, self.G, softening))

    def energy(self, softening: float = 0.0) -> float:
        """Total energy (kinetic + potential); test particles carry none."""
        return self.kinetic_energy() + self.potential_energy(softening)

    def angular_momentum(self) -> np.ndarray:
        """Total angular momentum vector sum m r x v about the origin, shape (3,)."""
        return np.einsum("i,ij->j", self.mass, np.cross(self.position, self.velocity))

    def momentum(self) -> np.ndarray:
        """Total linear momentum vector, shape (3,)."""
        return self.mass @ self.velocity

    def center_of_mass(self) -> tuple[np.ndarray, np.ndarray]:
        """Position and velocity of the centre of mass, each shape (3,)."""
        total = self.mass.sum()
        return self.mass @ self.position / total, self.mass @ self.velocity / total

    def barycentric(self) -> System:
        """A copy moved to the barycentric frame (centre of mass at rest at the origin)."""
        with np.errstate(over="ignore", invalid="ignore"):
            r, v = self.center_of_mass()
        if not (np.isfinite(r).all() and np.isfinite(v).all()):
            raise ValidationError(f"the centre of mass overflows (position {r.tolist()}, velocity "
                                  f"{v.tolist()}): masses, positions or velocities are too large for "
                                  f"float64; rescale the units")
        return System(self.mass, self.position - r, self.velocity - v, self.units, self.names, self.radius)

    # ---------------------------------------------------------------- elements
    @classmethod
    def from_elements(cls, primary_mass: float, mass, semi_major_axis, eccentricity, inclination,
                      ascending_node, argument_of_periapsis, mean_anomaly, *,
                      units: str | UnitSystem = "nbody", frame: str = "jacobi",
                      names: Sequence[str] | None = None, radius=None) -> System:
        """Build a system of a primary and bodies given by orbital elements.

        Parameters
        ----------
        primary_mass : float
            Mass of the central body, in the mass unit.
        mass : array_like, shape (k,)
            Masses of the orbiting bodies (0 for test particles, which come last).
        semi_major_axis : array_like, shape (k,)
            Length unit; negative for hyperbolic orbits.
        eccentricity, inclination, ascending_node, argument_of_periapsis, mean_anomaly : array_like
            Dimensionless eccentricity and angles in radians.
        units : str
            Unit system name.
        frame : {"jacobi", "heliocentric"}
            Each body orbits the primary ("heliocentric") or the centre of mass of the primary
            and all bodies before it ("jacobi").
        names, radius : optional
            As for :class:`System`; ``names``/``radius`` include the primary first.

        Returns
        -------
        System
            In the barycentric frame, primary first.
        """
        from .elements import state_from_elements

        system = get_units(units)
        masses, position, velocity = state_from_elements(
            primary_mass, mass, semi_major_axis, eccentricity, inclination, ascending_node,
            argument_of_periapsis, mean_anomaly, system.G, frame=frame)
        return cls(masses, position, velocity, system, names, radius)

    def elements(self, frame: str = "heliocentric", primary: int = 0):
        """Orbital elements of every body except ``primary`` (an :class:`~libration.elements.OrbitalElements`).

        ``frame`` is ``"heliocentric"`` (about the primary) or ``"jacobi"``.  Angles in radians,
        semi-major axis in the length unit (negative for hyperbolic orbits).
        """
        from .elements import elements_from_state

        return elements_from_state(self.mass, self.position, self.velocity, self.n_active, self.G,
                                   frame=frame, primary=primary)


