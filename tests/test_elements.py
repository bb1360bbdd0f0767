"""Orbital elements: Kepler's equation, conversions both ways, singular cases, systems, validation."""
import numpy as np
import pytest

from libration.elements import (
    CIRCULAR_TOLERANCE,
    OrbitalElements,
    _kepler_elliptic,
    _kepler_hyperbolic,
    cartesian_to_elements,
    elements_from_state,
    elements_to_cartesian,
    solve_kepler,
    state_from_elements,
)
from libration.exceptions import ValidationError

TWO_PI = 2.0 * np.pi


def angle_difference(x, y):
    """Smallest absolute difference of two angles (radians)."""
    return np.abs(np.mod(np.asarray(x) - np.asarray(y) + np.pi, TWO_PI) - np.pi)


def relative_state_error(r1, v1, r2, v2):
    dr = np.linalg.norm(r1 - r2, axis=1) / np.linalg.norm(r1, axis=1)
    dv = np.linalg.norm(v1 - v2, axis=1) / np.linalg.norm(v1, axis=1)
    return max(dr.max(), dv.max())


def random_elements(rng, k, kind):
    """Random elements of one kind; mu spread over six decades."""
    mu = 10.0 ** rng.uniform(-3, 3, k)
    inc = rng.uniform(0.0, np.pi, k)
    node = rng.uniform(0.0, TWO_PI, k)
    peri = rng.uniform(0.0, TWO_PI, k)
    if kind == "elliptic":
        e = rng.uniform(0.0, 0.97, k)
        a = 10.0 ** rng.uniform(-2, 2, k)
        M = rng.uniform(0.0, TWO_PI, k)
    elif kind == "near-parabolic-elliptic":
        e = 1.0 - 10.0 ** rng.uniform(-6, -2, k)
        a = 10.0 ** rng.uniform(-2, 2, k)
        M = rng.uniform(0.0, TWO_PI, k)
    elif kind == "hyperbolic":
        e = 1.0 + 10.0 ** rng.uniform(-2, 1, k)
        a = -(10.0 ** rng.uniform(-2, 2, k))
        M = rng.uniform(-5.0, 5.0, k)
    elif kind == "near-parabolic-hyperbolic":
        e = 1.0 + 10.0 ** rng.uniform(-6, -2, k)
        a = -(10.0 ** rng.uniform(-2, 2, k))
        M = rng.uniform(-20.0, 20.0, k)
    else:  # pragma: no cover - test helper misuse
        raise AssertionError(kind)
    return mu, a, e, inc, node, peri, M


# --------------------------------------------------------------------------- Kepler's equation


class TestSolveKepler:
    def test_elliptic_residual_including_e_near_one(self):
        rng = np.random.default_rng(11)
        M = rng.uniform(-20.0, 20.0, 4000)
        e = np.concatenate([rng.uniform(0.0, 1.0, 2000), 1.0 - 10.0 ** rng.uniform(-12, -1, 2000)])
        E = solve_kepler(M, e)
        assert np.all(np.isfinite(E))
        # residual written without cancellation; roundoff of M itself is ~eps*|M|
        residual = np.abs(_kepler_elliptic(E, e) - M)
        assert residual.max() <= 8e-16 * np.maximum(np.abs(M), 1.0).max()
        # same revolution as M: E - M = e sin E is at most e in size
        assert np.all(np.abs(E - M) <= e + 1e-14)

    def test_tiny_mean_anomaly_near_parabolic_relative_residual(self):
        rng = np.random.default_rng(12)
        M = 10.0 ** rng.uniform(-14, 0, 2000)
        e = 1.0 - 10.0 ** rng.uniform(-12, 0, 2000)
        E = solve_kepler(M, e)
        assert np.all(np.abs(_kepler_elliptic(E, e) - M) <= 4e-15 * M)

    def test_hyperbolic_residual(self):
        rng = np.random.default_rng(13)
        M = np.concatenate([rng.uniform(-1e3, 1e3, 1000), 10.0 ** rng.uniform(-14, 1, 1000)])
        e = 1.0 + 10.0 ** rng.uniform(-12, 2, 2000)
        H = solve_kepler(M, e)
        assert np.all(np.isfinite(H))
        assert np.all(np.sign(H) == np.sign(M))
        assert np.all(np.abs(_kepler_hyperbolic(H, e) - M) <= 4e-15 * np.abs(M))

    @pytest.mark.parametrize("e", [0.0, 0.5, 1.0 - 1e-12, 1.0 + 1e-12, 50.0])
    @pytest.mark.parametrize("M", [0.0, 1e-300, 1e-12, np.pi, -np.pi, TWO_PI, 1e6])
    def test_extreme_inputs_are_finite(self, M, e):
        E = solve_kepler(M, e)
        assert E.shape == (1,) and np.isfinite(E[0])
        if e < 1:
            assert abs(_kepler_elliptic(E, np.array([e]))[0] - M) <= 4e-16 * max(abs(M), 1.0)
        else:
            assert abs(_kepler_hyperbolic(E, np.array([e]))[0] - M) <= 4e-15 * max(abs(M), 1e-300)

    def test_zero_eccentricity_is_identity(self):
        M = np.linspace(-7.0, 7.0, 31)
        assert np.array_equal(solve_kepler(M, 0.0), M)

    def test_symmetry(self):
        M = np.linspace(0.01, 3.1, 17)
        for e in (0.3, 0.999, 2.0):
            assert np.allclose(solve_kepler(-M, e), -solve_kepler(M, e), rtol=1e-15, atol=0)

    def test_refuses_bad_input(self):
        with pytest.raises(ValidationError, match=r"eccentricity\[1\].*>= 0.*-0.1"):
            solve_kepler([1.0, 1.0], [0.1, -0.1])
        with pytest.raises(ValidationError, match=r"mean_anomaly\[0\].*finite.*nan"):
            solve_kepler([np.nan], [0.1])
        with pytest.raises(ValidationError, match=r"eccentricity\[0\].*1 - 1e-9.*1 \+ 1e-9"):
            solve_kepler(1.0, 1.0)
        with pytest.raises(ValidationError, match="lengths must match"):
            solve_kepler([1.0, 2.0, 3.0], [0.1, 0.2])


# --------------------------------------------------------------------------- conversions


class TestRoundTrips:
    @pytest.mark.parametrize(
        "kind, tol",
        [
            ("elliptic", 1e-13),
            ("hyperbolic", 1e-13),
            ("near-parabolic-elliptic", 1e-12),
            ("near-parabolic-hyperbolic", 1e-12),
        ],
    )
    def test_cartesian_elements_cartesian(self, kind, tol):
        rng = np.random.default_rng(21)
        elems = random_elements(rng, 500, kind)
        r, v = elements_to_cartesian(*elems)
        back = cartesian_to_elements(elems[0], r, v)
        r2, v2 = elements_to_cartesian(elems[0], *back)
        # Near-parabolic orbits: (a, e, M) is an ill-conditioned chart of the state
        # (d r / d e ~ 1 / |1 - e|), so the round trip through it costs up to ~1e-12.
        assert relative_state_error(r, v, r2, v2) < tol

    @pytest.mark.parametrize("kind", ["elliptic", "hyperbolic", "near-parabolic-elliptic"])
    def test_elements_cartesian_elements(self, kind):
        rng = np.random.default_rng(22)
        mu, a, e, inc, node, peri, M = random_elements(rng, 500, kind)
        back = cartesian_to_elements(mu, *elements_to_cartesian(mu, a, e, inc, node, peri, M))
        assert np.allclose(back.semi_major_axis, a, rtol=1e-12, atol=0)
        # e has absolute roundoff ~eps from the state; 1 - e is what matters near 1
        assert np.all(np.abs(back.eccentricity - e) <= 1e-14)
        assert np.all(np.abs(back.inclination - inc) <= 1e-13)
        well_posed = (np.sin(inc) > 1e-3) & (e > 1e-3)
        assert np.all(angle_difference(back.ascending_node, node)[np.sin(inc) > 1e-3] < 1e-12)
        assert np.all(angle_difference(back.argument_of_periapsis, peri)[well_posed] < 1e-11)
        if kind == "hyperbolic":
            assert np.allclose(back.mean_anomaly, M, rtol=1e-12, atol=1e-13)
        else:
            # near e = 1 and near periapsis, M = E - e sin E loses ~eps/(1-e) relative
            scale = np.where(e > 0.99, 1e-9, 1e-12)
            assert np.all(angle_difference(back.mean_anomaly, M) < scale)

    def test_e_0_999999_elliptic(self):
        mu, a, e = 2.5, 3.0, 0.999999
        M = np.array([1e-6, 0.01, 1.0, np.pi, 5.0])
        r, v = elements_to_cartesian(mu, a, e, 0.7, 1.1, 2.3, M)
        back = cartesian_to_elements(mu, r, v)
        assert np.allclose(back.semi_major_axis, a, rtol=1e-9)  # cond ~ 1/(1-e) at periapsis
        assert np.allclose(back.eccentricity, e, rtol=0, atol=1e-15)
        assert np.all(angle_difference(back.argument_of_periapsis, 2.3) < 1e-12)
        r2, v2 = elements_to_cartesian(mu, *back)
        assert relative_state_error(r, v, r2, v2) < 1e-12
        # periapsis and apoapsis distances
        rp, _ = elements_to_cartesian(mu, a, e, 0.7, 1.1, 2.3, 0.0)
        ra, _ = elements_to_cartesian(mu, a, e, 0.7, 1.1, 2.3, np.pi)
        assert np.linalg.norm(rp) == pytest.approx(a * (1 - e), rel=1e-12)
        assert np.linalg.norm(ra) == pytest.approx(a * (1 + e), rel=1e-15)

    def test_near_circular(self):
        rng = np.random.default_rng(23)
        k = 200
        e = 10.0 ** rng.uniform(-12, -4, k)
        inc, node, peri, M = rng.uniform(0.2, 2.9, k), *rng.uniform(0, TWO_PI, (3, k))
        r, v = elements_to_cartesian(1.0, 1.5, e, inc, node, peri, M)
        back = cartesian_to_elements(1.0, r, v)
        assert np.all(np.abs(back.eccentricity - e) < 4e-15)  # absolute roundoff, a few eps
        # the argument of latitude (omega + M for small e, to O(e)) is well defined
        assert np.all(angle_difference(back.argument_of_periapsis + back.mean_anomaly, peri + M) < 3 * e + 1e-13)
        r2, v2 = elements_to_cartesian(1.0, *back)
        assert relative_state_error(r, v, r2, v2) < 1e-13

    def test_near_equatorial_prograde_and_retrograde(self):
        rng = np.random.default_rng(24)
        k = 200
        small = 10.0 ** rng.uniform(-12, -4, k)
        inc = np.concatenate([small[:100], np.pi - small[100:]])
        e = rng.uniform(0.05, 0.9, k)
        node, peri, M = rng.uniform(0, TWO_PI, (3, k))
        r, v = elements_to_cartesian(1.0, 2.0, e, inc, node, peri, M)
        back = cartesian_to_elements(1.0, r, v)
        assert np.all(np.abs(back.inclination - inc) < 1e-15)
        # the node direction is still resolved from the tiny out-of-plane components
        assert np.all(angle_difference(back.ascending_node, node) < 1e-9)
        r2, v2 = elements_to_cartesian(1.0, *back)
        assert relative_state_error(r, v, r2, v2) < 1e-13

    def test_retrograde(self):
        rng = np.random.default_rng(25)
        mu, a, e, _, node, peri, M = random_elements(rng, 100, "elliptic")
        inc = rng.uniform(np.pi / 2 + 0.01, np.pi - 0.01, 100)
        r, v = elements_to_cartesian(mu, a, e, inc, node, peri, M)
        hz = np.cross(r, v)[:, 2]
        assert np.all(hz < 0)  # retrograde: angular momentum points down
        back = cartesian_to_elements(mu, r, v)
        assert np.allclose(back.inclination, inc, rtol=0, atol=1e-13)

    def test_output_ranges_and_types(self):
        rng = np.random.default_rng(26)
        r = rng.normal(size=(300, 3))
        v = rng.normal(size=(300, 3))
        el = cartesian_to_elements(1.0, r, v)
        assert isinstance(el, OrbitalElements)
        assert all(f.shape == (300,) and f.dtype == np.float64 for f in el)
        assert np.all((el.inclination >= 0) & (el.inclination <= np.pi))
        for angle in (el.ascending_node, el.argument_of_periapsis):
            assert np.all((angle >= 0) & (angle < TWO_PI))
        ell = el.eccentricity < 1
        assert np.all((el.mean_anomaly[ell] >= 0) & (el.mean_anomaly[ell] < TWO_PI))
        assert np.all(el.semi_major_axis[ell] > 0) and np.all(el.semi_major_axis[~ell] < 0)
        assert ell.any() and (~ell).any()

    def test_energy_and_angular_momentum_match(self):
        rng = np.random.default_rng(27)
        mu, a, e, inc, node, peri, M = random_elements(rng, 200, "hyperbolic")
        r, v = elements_to_cartesian(mu, a, e, inc, node, peri, M)
        energy = 0.5 * np.einsum("ij,ij->i", v, v) - mu / np.linalg.norm(r, axis=1)
        assert np.allclose(energy, -mu / (2 * a), rtol=1e-13)
        h = np.linalg.norm(np.cross(r, v), axis=1)
        assert np.allclose(h, np.sqrt(mu * a * (1 - e * e)), rtol=1e-13)
        cos_i = np.cross(r, v)[:, 2] / h
        assert np.allclose(cos_i, np.cos(inc), atol=1e-14)


class TestSingularCases:
    def test_circular_sets_periapsis_to_zero_and_measures_from_node(self):
        node, u = 0.8, 2.0
        r, v = elements_to_cartesian(1.0, 1.0, 0.0, 0.5, node, 0.0, u)
        el = cartesian_to_elements(1.0, r, v)
        assert el.eccentricity[0] < CIRCULAR_TOLERANCE
        assert el.argument_of_periapsis[0] == 0.0
        assert el.mean_anomaly[0] == pytest.approx(u, abs=1e-14)
        assert el.ascending_node[0] == pytest.approx(node, abs=1e-14)
        # a circular orbit given with omega != 0 comes back with omega folded into M
        r, v = elements_to_cartesian(1.0, 1.0, 0.0, 0.5, node, 1.0, u - 1.0)
        el = cartesian_to_elements(1.0, r, v)
        assert (el.argument_of_periapsis[0], el.mean_anomaly[0]) == (0.0, pytest.approx(u, abs=1e-14))

    def test_equatorial_sets_node_to_zero_and_measures_periapsis_from_x(self):
        e, peri_longitude = 0.4, 1.3
        r, v = elements_to_cartesian(1.0, 1.0, e, 0.0, 0.0, peri_longitude, 0.0)  # at periapsis
        el = cartesian_to_elements(1.0, r, v)
        assert el.ascending_node[0] == 0.0 and el.inclination[0] == 0.0
        assert el.argument_of_periapsis[0] == pytest.approx(peri_longitude, abs=1e-14)
        assert np.arctan2(r[0, 1], r[0, 0]) == pytest.approx(peri_longitude, abs=1e-14)
        # given with a node, the node is folded into the argument of periapsis
        r, v = elements_to_cartesian(1.0, 1.0, e, 0.0, 0.5, peri_longitude - 0.5, 0.3)
        el = cartesian_to_elements(1.0, r, v)
        assert el.ascending_node[0] == 0.0
        assert el.argument_of_periapsis[0] == pytest.approx(peri_longitude, abs=1e-14)

    def test_retrograde_equatorial_measures_in_direction_of_motion(self):
        r, v = elements_to_cartesian(1.0, 1.0, 0.3, np.pi, 0.0, 0.0, 0.0)
        el = cartesian_to_elements(1.0, r, v)
        assert el.ascending_node[0] == 0.0
        # periapsis on +x; an angle later in the motion lies clockwise (y < 0)
        assert el.argument_of_periapsis[0] == pytest.approx(0.0, abs=1e-14) or el.argument_of_periapsis[
            0
        ] == pytest.approx(TWO_PI, abs=1e-14)
        r2, _ = elements_to_cartesian(1.0, 1.0, 0.3, np.pi, 0.0, 0.5, 0.0)
        assert r2[0, 1] < 0
        el2 = cartesian_to_elements(1.0, *elements_to_cartesian(1.0, 1.0, 0.3, np.pi, 0.0, 0.5, 0.0))
        assert el2.argument_of_periapsis[0] == pytest.approx(0.5, abs=1e-14)

    def test_circular_equatorial_gives_true_longitude(self):
        for inc, sense in ((0.0, 1.0), (np.pi, -1.0)):
            r, v = elements_to_cartesian(1.0, 2.0, 0.0, inc, 0.4, 0.9, 1.7)
            el = cartesian_to_elements(1.0, r, v)
            assert el.ascending_node[0] == 0.0 and el.argument_of_periapsis[0] == 0.0
            longitude = np.mod(sense * np.arctan2(r[0, 1], r[0, 0]), TWO_PI)
            assert angle_difference(el.mean_anomaly[0], longitude) < 1e-14
            r2, v2 = elements_to_cartesian(1.0, *el)
            assert relative_state_error(r, v, r2, v2) < 1e-15

    def test_parabolic_refused_forward_reported_backward(self):
        with pytest.raises(ValidationError, match=r"eccentricity\[1\].*parabolic.*1 - 1e-9"):
            elements_to_cartesian(1.0, [1.0, 1.0], [0.5, 1.0 + 2e-15], 0.1, 0.0, 0.0, 0.0)
        # escape speed exactly: a parabola
        q = 2.0
        r = np.array([[q, 0.0, 0.0], [0.0, 3.0, 0.0]])
        v = np.array([[0.0, np.sqrt(2.0 / q), 0.0], [-np.sqrt(2.0 / 3.0), 0.0, 0.0]])
        el = cartesian_to_elements(1.0, r, v)
        assert np.all(el.eccentricity == 1.0) and np.all(np.isinf(el.semi_major_axis))
        assert el.mean_anomaly[0] == 0.0  # at periapsis
        assert el.mean_anomaly[1] == 0.0  # also at periapsis (moving perpendicular to r)
        # a point past periapsis: true anomaly 90 degrees, D = tan(45 deg) = 1, M = 1 + 1/3
        p = 2 * q
        r = np.array([[0.0, p, 0.0]])  # r = p at nu = 90 deg
        v = np.array([[-np.sqrt(1.0 / p), np.sqrt(1.0 / p), 0.0]])
        el = cartesian_to_elements(1.0, r, v)
        assert el.eccentricity[0] == 1.0
        assert el.mean_anomaly[0] == pytest.approx(4.0 / 3.0, rel=1e-14)

    def test_rectilinear_and_origin_refused(self):
        with pytest.raises(ValidationError, match=r"position\[1\] and velocity\[1\].*parallel"):
            cartesian_to_elements(1.0, [[1.0, 0, 0], [1.0, 2.0, 3.0]], [[0, 1.0, 0], [2.0, 4.0, 6.0]])
        with pytest.raises(ValidationError, match=r"velocity\[0\] must be non-zero"):
            cartesian_to_elements(1.0, [1.0, 0.0, 0.0], [0.0, 0.0, 0.0])
        with pytest.raises(ValidationError, match=r"position\[0\].*non-zero"):
            cartesian_to_elements(1.0, [0.0, 0.0, 0.0], [1.0, 0.0, 0.0])


def test_empty_inputs_give_empty_outputs():
    r, v = elements_to_cartesian(1.0, [], 0.1, 0.1, 0.0, 0.0, 0.0)
    assert r.shape == (0, 3) and v.shape == (0, 3)
    assert cartesian_to_elements(1.0, np.zeros((0, 3)), np.zeros((0, 3))).mean_anomaly.shape == (0,)
    for frame in ("jacobi", "heliocentric"):
        m, p, u = state_from_elements(2.0, [], [], [], [], [], [], [], G=1.0, frame=frame)
        assert m.tolist() == [2.0] and np.all(p == 0) and np.all(u == 0)
        assert elements_from_state(m, p, u, 1, 1.0, frame=frame).eccentricity.shape == (0,)


class TestValidation:
    good = dict(mu=1.0, semi_major_axis=[1.0, 2.0], eccentricity=[0.1, 0.2], inclination=[0.1, 0.2],
                ascending_node=[0.0, 1.0], argument_of_periapsis=[0.0, 1.0], mean_anomaly=[0.0, 1.0])

    @pytest.mark.parametrize(
        "field, value, pattern",
        [
            ("eccentricity", [0.1, np.nan], r"eccentricity\[1\] must be finite and >= 0, got nan"),
            ("eccentricity", [-0.2, 0.1], r"eccentricity\[0\] must be finite and >= 0, got -0.2"),
            ("inclination", [0.1, 3.5], r"inclination\[1\] must be finite and in \[0, pi\].*3.5"),
            ("inclination", [-0.1, 0.1], r"inclination\[0\].*-0.1"),
            ("semi_major_axis", [1.0, -2.0], r"semi_major_axis\[1\] must be > 0 for an elliptic.*-2.0"),
            ("semi_major_axis", [np.inf, 1.0], r"semi_major_axis\[0\] must be finite, got inf"),
            ("mu", [1.0, 0.0], r"mu\[1\] must be finite and > 0.*0.0"),
            ("mu", -1.0, r"mu\[0\] must be finite and > 0.*-1.0"),
            ("ascending_node", [0.0, np.nan], r"ascending_node\[1\] must be finite"),
            ("argument_of_periapsis", [np.inf, 0.0], r"argument_of_periapsis\[0\] must be finite"),
            ("mean_anomaly", [0.0, np.nan], r"mean_anomaly\[1\] must be finite"),
            ("mean_anomaly", [[0.0, 1.0]], r"mean_anomaly must be a scalar or a 1-D array"),
        ],
    )
    def test_elements_to_cartesian_messages(self, field, value, pattern):
        kwargs = dict(self.good, **{field: value})
        with pytest.raises(ValidationError, match=pattern):
            elements_to_cartesian(**kwargs)

    def test_hyperbolic_needs_negative_a(self):
        with pytest.raises(ValidationError, match=r"semi_major_axis\[0\] must be < 0 for a hyperbolic.*2.0"):
            elements_to_cartesian(1.0, 2.0, 1.5, 0.1, 0.0, 0.0, 0.0)

    def test_cartesian_to_elements_messages(self):
        with pytest.raises(ValidationError, match=r"position\[1\] must be finite"):
            cartesian_to_elements(1.0, [[1.0, 0, 0], [np.nan, 0, 0]], [[0, 1.0, 0], [0, 1.0, 0]])
        with pytest.raises(ValidationError, match=r"velocity must have the same shape"):
            cartesian_to_elements(1.0, [[1.0, 0, 0]], [[0, 1.0, 0], [0, 1.0, 0]])
        with pytest.raises(ValidationError, match=r"position must have shape \(k, 3\)"):
            cartesian_to_elements(1.0, [[1.0, 0]], [[0, 1.0]])
        with pytest.raises(ValidationError, match=r"mu\[0\] must be finite and > 0"):
            cartesian_to_elements(np.nan, [1.0, 0, 0], [0, 1.0, 0])


# --------------------------------------------------------------------------- systems


def jacobi_reference(primary_mass, mass, rho, rho_v):
    """Straightforward loop: each massive body about the centre of mass of those before it."""
    pos = [np.zeros(3)]
    vel = [np.zeros(3)]
    masses = [primary_mass]
    n_massive = int(np.sum(mass > 0))
    for k in range(len(mass)):
        interior = np.array(masses[: 1 + min(k, n_massive)])
        com_r = sum(m * p for m, p in zip(interior, pos)) / interior.sum()
        com_v = sum(m * u for m, u in zip(interior, vel)) / interior.sum()
        pos.append(com_r + rho[k])
        vel.append(com_v + rho_v[k])
        masses.append(mass[k])
    return np.array(pos), np.array(vel)


class TestSystems:
    def setup_method(self):
        rng = np.random.default_rng(31)
        self.M0 = 1.3
        self.mass = np.array([1e-3, 3e-4, 5e-5, 0.0, 0.0, 0.0])
        k = self.mass.size
        self.elems = dict(
            semi_major_axis=np.array([1.0, 2.3, 5.0, 1.7, -3.0, 9.0]),
            eccentricity=np.array([0.05, 0.3, 0.0, 0.9, 1.4, 0.2]),
            inclination=np.array([0.0, 0.1, 2.0, 0.5, 1.0, np.pi]),
            ascending_node=rng.uniform(0, TWO_PI, k),
            argument_of_periapsis=rng.uniform(0, TWO_PI, k),
            mean_anomaly=np.array([0.1, 2.0, 4.0, 0.5, -1.0, 3.0]),
        )
        self.G = 0.7

    @pytest.mark.parametrize("frame", ["heliocentric", "jacobi"])
    def test_round_trip_and_barycentre(self, frame):
        masses, pos, vel = state_from_elements(self.M0, self.mass, G=self.G, frame=frame, **self.elems)
        assert masses.shape == (7,) and pos.shape == (7, 3) and vel.shape == (7, 3)
        assert masses[0] == self.M0
        assert np.allclose((masses[:, None] * pos).sum(0), 0.0, atol=1e-16)
        assert np.allclose((masses[:, None] * vel).sum(0), 0.0, atol=1e-16)
        back = elements_from_state(masses, pos, vel, n_active=4, G=self.G, frame=frame)
        r1, v1 = elements_to_cartesian(1.0, *[self.elems[f] for f in OrbitalElements._fields])
        r2, v2 = elements_to_cartesian(1.0, *back)
        assert relative_state_error(r1, v1, r2, v2) < 1e-13
        assert np.allclose(back.semi_major_axis, self.elems["semi_major_axis"], rtol=1e-13)
        assert np.allclose(back.eccentricity, self.elems["eccentricity"], atol=1e-14)

    def test_heliocentric_definition(self):
        masses, pos, vel = state_from_elements(self.M0, self.mass, G=self.G, frame="heliocentric", **self.elems)
        mu = self.G * (self.M0 + self.mass)
        r, v = elements_to_cartesian(mu, *[self.elems[f] for f in OrbitalElements._fields])
        assert np.allclose(pos[1:] - pos[0], r, rtol=0, atol=1e-14)
        assert np.allclose(vel[1:] - vel[0], v, rtol=0, atol=1e-14)

    def test_jacobi_definition(self):
        masses, pos, vel = state_from_elements(self.M0, self.mass, G=self.G, frame="jacobi", **self.elems)
        interior = self.M0 + np.array([0.0, 1e-3, 1.3e-3, 1.35e-3, 1.35e-3, 1.35e-3])
        mu = self.G * (interior + self.mass)
        rho, rho_v = elements_to_cartesian(mu, *[self.elems[f] for f in OrbitalElements._fields])
        ref_r, ref_v = jacobi_reference(self.M0, self.mass, rho, rho_v)
        assert np.allclose(pos - pos[0], ref_r, rtol=0, atol=1e-13)
        assert np.allclose(vel - vel[0], ref_v, rtol=0, atol=1e-13)

    def test_one_body_frames_agree(self):
        kw = {f: v[:1] for f, v in self.elems.items()}
        a = state_from_elements(self.M0, self.mass[:1], G=self.G, frame="jacobi", **kw)
        b = state_from_elements(self.M0, self.mass[:1], G=self.G, frame="heliocentric", **kw)
        for x, y in zip(a, b):
            assert np.array_equal(x, y)

    def test_other_primary_and_shuffled_frame(self):
        masses, pos, vel = state_from_elements(self.M0, self.mass, G=self.G, frame="heliocentric", **self.elems)
        # move the primary to index 2; massive bodies still first
        order = [1, 2, 0, 3, 4, 5, 6]
        shift = np.array([5.0, -3.0, 1.0])
        back = elements_from_state(masses[order], pos[order] + shift, vel[order] - shift, n_active=4,
                                   G=self.G, frame="heliocentric", primary=2)
        ref = elements_from_state(masses, pos, vel, n_active=4, G=self.G, frame="heliocentric")
        for f in ("semi_major_axis", "eccentricity", "inclination"):
            assert np.allclose(getattr(back, f), getattr(ref, f), rtol=1e-12, atol=1e-14)

    def test_massive_after_test_particle_refused(self):
        mass = np.array([1e-3, 0.0, 2e-4])
        with pytest.raises(ValidationError, match=r"mass\[2\].*after the test particle mass\[1\]"):
            state_from_elements(1.0, mass, 1.0, 0.1, 0.1, 0.0, 0.0, 0.0, G=1.0)

    def test_system_validation_messages(self):
        with pytest.raises(ValidationError, match=r"frame must be one of 'heliocentric', 'jacobi', got 'bary'"):
            state_from_elements(1.0, [0.0], 1.0, 0.1, 0.1, 0.0, 0.0, 0.0, G=1.0, frame="bary")
        with pytest.raises(ValidationError, match=r"primary_mass must be finite and > 0, got -1.0"):
            state_from_elements(-1.0, [0.0], 1.0, 0.1, 0.1, 0.0, 0.0, 0.0, G=1.0)
        with pytest.raises(ValidationError, match=r"mass\[1\] must be finite and >= 0, got -0.5"):
            state_from_elements(1.0, [0.1, -0.5], 1.0, 0.1, 0.1, 0.0, 0.0, 0.0, G=1.0)
        with pytest.raises(ValidationError, match=r"G must be finite and > 0, got 0"):
            state_from_elements(1.0, [0.1], 1.0, 0.1, 0.1, 0.0, 0.0, 0.0, G=0)
        pos = np.eye(3)
        with pytest.raises(ValidationError, match=r"n_active must be an integer in \[1, 3\], got 0"):
            elements_from_state([1.0, 0.0, 0.0], pos, pos, n_active=0, G=1.0)
        with pytest.raises(ValidationError, match=r"primary must be the index of a massive body.*got 2"):
            elements_from_state([1.0, 1.0, 0.0], pos, pos, n_active=2, G=1.0, primary=2)
        with pytest.raises(ValidationError, match=r"velocity must have shape \(3, 3\)"):
            elements_from_state([1.0, 0.0, 0.0], pos, pos[:2], n_active=1, G=1.0)
