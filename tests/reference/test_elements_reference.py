"""External checks of the orbital-element conversions and of Kepler's equation.

Sources are named beside every reference number.  The textbook values below are
recalled, not copied from the books at hand, and are marked "from memory"; each is
compared at the precision the book prints.
"""
import numpy as np
import pytest

from libration.elements import (
    _kepler_elliptic,
    _kepler_hyperbolic,
    cartesian_to_elements,
    elements_from_state,
    elements_to_cartesian,
    solve_kepler,
    state_from_elements,
)

scipy_optimize = pytest.importorskip("scipy.optimize")
scipy_integrate = pytest.importorskip("scipy.integrate")

MU_EARTH_CURTIS = 398600.0  # km^3/s^2, the value Curtis uses in his examples (from memory)
MU_EARTH_VALLADO = 398600.4418  # km^3/s^2, EGM-96 value Vallado uses (from memory)


def true_anomaly(mean_anomaly, eccentricity):
    """True anomaly (radians) from the mean anomaly, through solve_kepler."""
    M = np.atleast_1d(mean_anomaly)
    e = np.atleast_1d(eccentricity)
    X = solve_kepler(M, e)
    ell = e < 1
    nu = np.empty_like(M)
    nu[ell] = 2 * np.arctan2(np.sqrt(1 + e[ell]) * np.sin(X[ell] / 2), np.sqrt(1 - e[ell]) * np.cos(X[ell] / 2))
    nu[~ell] = 2 * np.arctan(np.sqrt((e[~ell] + 1) / (e[~ell] - 1)) * np.tanh(X[~ell] / 2))
    return nu


class TestTextbookExamples:
    def test_curtis_example_4_3_state_to_elements(self):
        # H. D. Curtis, Orbital Mechanics for Engineering Students (Elsevier),
        # Example 4.3 (2nd and 3rd editions; numbering from memory).  All numbers from memory.
        r = [-6045.0, -3490.0, 2500.0]  # km
        v = [-3.457, 6.618, 2.533]  # km/s
        el = cartesian_to_elements(MU_EARTH_CURTIS, r, v)
        h = np.linalg.norm(np.cross(r, v))
        assert h == pytest.approx(58310.0, abs=5.0)  # km^2/s, printed 58 310
        assert np.degrees(el.inclination[0]) == pytest.approx(153.2, abs=0.05)
        assert np.degrees(el.ascending_node[0]) == pytest.approx(255.3, abs=0.05)
        assert el.eccentricity[0] == pytest.approx(0.1712, abs=5e-5)
        assert np.degrees(el.argument_of_periapsis[0]) == pytest.approx(20.07, abs=0.005)
        nu = true_anomaly(el.mean_anomaly, el.eccentricity)[0]
        assert np.degrees(nu) == pytest.approx(28.45, abs=0.005)
        assert el.semi_major_axis[0] == pytest.approx(8788.0, abs=0.5)  # km

    def test_curtis_example_4_7_elements_to_state_hyperbolic(self):
        # Curtis, Orbital Mechanics for Engineering Students, Example 4.7 (from memory):
        # h = 80 000 km^2/s, e = 1.4, i = 30 deg, RA of node = 40 deg, omega = 60 deg,
        # true anomaly 30 deg  ->  r = [-4040, 4815, 3629] km, v = [-10.39, -4.772, 1.744] km/s.
        mu, h, e = MU_EARTH_CURTIS, 80000.0, 1.4
        a = h * h / mu / (1 - e * e)  # negative: hyperbola
        nu = np.radians(30.0)
        H = 2 * np.arctanh(np.sqrt((e - 1) / (e + 1)) * np.tan(nu / 2))
        M = e * np.sinh(H) - H
        r, v = elements_to_cartesian(mu, a, e, np.radians(30), np.radians(40), np.radians(60), M)
        assert r[0] == pytest.approx([-4040.0, 4815.0, 3629.0], abs=0.5)
        assert v[0, 0] == pytest.approx(-10.39, abs=0.005)
        assert v[0, 1:] == pytest.approx([-4.772, 1.744], abs=5e-4)

    def test_vallado_example_2_5_state_to_elements(self):
        # D. A. Vallado, Fundamentals of Astrodynamics and Applications, 4th ed. (2013),
        # Example 2-5 (algorithm RV2COE).  All numbers from memory.
        r = [6524.834, 6862.875, 6448.296]  # km
        v = [4.901327, 5.533756, -1.976341]  # km/s
        el = cartesian_to_elements(MU_EARTH_VALLADO, r, v)
        a, e = el.semi_major_axis[0], el.eccentricity[0]
        # p and a printed as 11 067.790 km and 36 127.343 km; the book works in canonical
        # units, so its last digits carry its own unit-conversion rounding: compare at 1e-6.
        assert a * (1 - e * e) == pytest.approx(11067.790, rel=1e-6)
        assert a == pytest.approx(36127.343, rel=1e-6)
        assert e == pytest.approx(0.832853, abs=5e-7)
        assert np.degrees(el.inclination[0]) == pytest.approx(87.870, abs=2e-3)
        assert np.degrees(el.ascending_node[0]) == pytest.approx(227.898, abs=5e-4)
        assert np.degrees(el.argument_of_periapsis[0]) == pytest.approx(53.38, abs=5e-3)
        nu = true_anomaly(el.mean_anomaly, el.eccentricity)[0]
        assert np.degrees(nu) == pytest.approx(92.335, abs=5e-4)


class TestKeplerAgainstBrent:
    def test_elliptic_against_brentq(self):
        # Reference: scipy.optimize.brentq (Brent 1973) on the bracket [M - e, M + e].
        rng = np.random.default_rng(101)
        M = rng.uniform(-10.0, 10.0, 300)
        e = np.concatenate([rng.uniform(0.0, 1.0, 150), 1.0 - 10.0 ** rng.uniform(-12, -1, 150)])
        E = solve_kepler(M, e)
        for Mi, ei, Ei in zip(M, e, E):
            root = scipy_optimize.brentq(
                lambda x: x - ei * np.sin(x) - Mi, Mi - ei - 1e-9, Mi + ei + 1e-9, xtol=1e-15, rtol=1e-15
            )
            assert Ei == pytest.approx(root, rel=1e-13, abs=1e-14)
        # and Kepler's equation itself
        assert np.max(np.abs(E - e * np.sin(E) - M)) < 1e-14

    def test_hyperbolic_against_brentq(self):
        rng = np.random.default_rng(102)
        M = rng.uniform(-100.0, 100.0, 200)
        e = 1.0 + 10.0 ** rng.uniform(-12, 1, 200)
        H = solve_kepler(M, e)
        for Mi, ei, Hi in zip(M, e, H):
            bound = np.arcsinh(abs(Mi) + 10.0)  # e sinh H - H > |M| beyond this for e >= 1
            bound = max(bound, np.cbrt(6 * abs(Mi)))
            root = scipy_optimize.brentq(
                lambda x: ei * np.sinh(x) - x - Mi, -bound, bound, xtol=1e-15, rtol=1e-15
            )
            assert Hi == pytest.approx(root, rel=1e-12, abs=1e-14)
        assert np.all(np.abs(_kepler_hyperbolic(H, e) - M) <= 1e-14 * np.maximum(np.abs(M), 1.0))

    def test_small_anomaly_near_parabolic_relative_accuracy(self):
        # brentq on the cancellation-free residual (1-e) E + e (E - sin E) - M, relative tolerance.
        rng = np.random.default_rng(103)
        M = 10.0 ** rng.uniform(-12, -2, 100)
        e = 1.0 - 10.0 ** rng.uniform(-12, -6, 100)
        E = solve_kepler(M, e)
        for Mi, ei, Ei in zip(M, e, E):
            root = scipy_optimize.brentq(
                lambda x: _kepler_elliptic(np.array([x]), np.array([ei]))[0] - Mi,
                0.0, np.cbrt(6 * Mi / ei) * 1.1 + 1e-300, xtol=1e-300, rtol=1e-15,
            )
            assert Ei == pytest.approx(root, rel=1e-13)


def two_body_rhs(mu):
    def rhs(t, y):
        r = y[:3]
        return np.concatenate([y[3:], -mu * r / np.linalg.norm(r) ** 3])

    return rhs


class TestTwoBodyAnalytic:
    """Advancing the mean anomaly by n t reproduces a numerical solution of the two-body ODE
    (scipy.integrate.solve_ivp, DOP853 of Hairer, Norsett & Wanner, rtol = atol = 1e-12)."""

    @pytest.mark.parametrize(
        "a, e, span",
        [(1.0, 0.0, 3.0), (1.0, 0.5, 3.0), (1.0, 0.9, 3.0), (-1.0, 1.5, 6.0), (1.0, 1 - 1e-4, 0.4)],
        ids=["circular", "e0.5", "e0.9", "hyperbolic", "e0.9999"],
    )
    def test_mean_anomaly_advance_matches_ode(self, a, e, span):
        mu = 1.3
        inc, node, peri, M0 = 0.4, 1.1, 2.2, -0.3 if e > 1 else 5.9
        n = np.sqrt(mu / abs(a) ** 3)
        period = 2 * np.pi / n
        times = np.linspace(0.0, span * period, 7)
        r0, v0 = elements_to_cartesian(mu, a, e, inc, node, peri, M0)
        sol = scipy_integrate.solve_ivp(
            two_body_rhs(mu), (0.0, times[-1]), np.concatenate([r0[0], v0[0]]),
            method="DOP853", rtol=1e-12, atol=1e-12, t_eval=times,
        )
        assert sol.success
        r, v = elements_to_cartesian(mu, a, e, inc, node, peri, M0 + n * times)
        scale_r = np.linalg.norm(r, axis=1)
        scale_v = np.linalg.norm(v, axis=1)
        err_r = np.linalg.norm(r - sol.y[:3].T, axis=1) / scale_r
        err_v = np.linalg.norm(v - sol.y[3:].T, axis=1) / scale_v
        # DOP853's global error at this tolerance over a few orbits; common practice: ~1e-9
        assert err_r.max() < 1e-8 and err_v.max() < 1e-8
        # and the elements of the ODE solution stay those we started from
        el = cartesian_to_elements(mu, sol.y[:3].T, sol.y[3:].T)
        assert np.allclose(el.semi_major_axis, a, rtol=1e-8)
        assert np.allclose(el.eccentricity, e, atol=1e-8)

    def test_parabolic_mean_anomaly_rate(self):
        # Barker's equation (e.g. Vallado 4th ed. sec. 2.2; from memory):
        # tan(nu/2) + tan^3(nu/2)/3 = sqrt(mu / (2 q^3)) (t - T).
        mu, q = 2.0, 0.7
        r0 = np.array([q, 0.0, 0.0])
        v0 = np.array([0.0, 0.0, np.sqrt(2 * mu / q)])  # escape speed at periapsis
        times = np.linspace(0.0, 5.0, 6)
        sol = scipy_integrate.solve_ivp(
            two_body_rhs(mu), (0.0, times[-1]), np.concatenate([r0, v0]),
            method="DOP853", rtol=1e-12, atol=1e-12, t_eval=times,
        )
        el = cartesian_to_elements(mu, r0, v0)
        assert el.eccentricity[0] == 1.0 and np.isinf(el.semi_major_axis[0])
        assert el.mean_anomaly[0] == 0.0
        # The ODE solution leaves the exact parabola by ~1e-12 in energy; put each state back
        # on it by rescaling the speed to escape speed (direction kept), which changes the
        # mean anomaly by ~1e-12 relative, far below the tolerance.
        r, v = sol.y[:3].T, sol.y[3:].T
        v = v * (np.sqrt(2 * mu / np.linalg.norm(r, axis=1)) / np.linalg.norm(v, axis=1))[:, None]
        el = cartesian_to_elements(mu, r, v)
        assert np.all(el.eccentricity == 1.0) and np.all(np.isinf(el.semi_major_axis))
        assert np.allclose(el.mean_anomaly, np.sqrt(mu / (2 * q**3)) * times, rtol=1e-9, atol=1e-12)


class TestFramesAgainstIntegration:
    def test_jacobi_elements_of_hierarchical_triple_track_keplerian_motion(self):
        # A tight inner binary with a distant third body: in Jacobi coordinates the outer
        # orbit is very nearly Keplerian about the inner pair's centre of mass with
        # mu = G (m0 + m1 + m2), while heliocentric elements of the outer body wobble at
        # the inner period.  Hierarchical-triple reasoning, common practice.
        G, m0, masses = 1.0, 1.0, np.array([0.5, 1e-3])
        a = np.array([0.05, 5.0])
        e = np.array([0.1, 0.2])
        m_tot, pos, vel = state_from_elements(m0, masses, a, e, [0.0, 0.3], [0.0, 1.0], [0.0, 2.0],
                                              [0.0, 1.0], G=G, frame="jacobi")
        period_outer = 2 * np.pi * np.sqrt(a[1] ** 3 / (G * m_tot.sum()))

        def rhs(t, y):
            x = y[:9].reshape(3, 3)
            acc = np.zeros((3, 3))
            for i in range(3):
                for j in range(3):
                    if i != j:
                        d = x[j] - x[i]
                        acc[i] += G * m_tot[j] * d / np.linalg.norm(d) ** 3
            return np.concatenate([y[9:], acc.ravel()])

        t_end = 0.02 * period_outer  # about 14 inner orbits
        sol = scipy_integrate.solve_ivp(rhs, (0, t_end), np.concatenate([pos.ravel(), vel.ravel()]),
                                        method="DOP853", rtol=1e-11, atol=1e-13, t_eval=np.linspace(0, t_end, 40))
        jac = np.array([elements_from_state(m_tot, s[:9].reshape(3, 3), s[9:].reshape(3, 3), 3, G,
                                            frame="jacobi").semi_major_axis[1] for s in sol.y.T])
        hel = np.array([elements_from_state(m_tot, s[:9].reshape(3, 3), s[9:].reshape(3, 3), 3, G,
                                            frame="heliocentric").semi_major_axis[1] for s in sol.y.T])
        jac_spread = np.ptp(jac) / a[1]
        hel_spread = np.ptp(hel) / a[1]
        assert jac_spread < 1e-3
        assert hel_spread > 10 * jac_spread
