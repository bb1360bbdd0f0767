"""The wisdom-holman method: contract (lazy synchronisation, exact continuation, frames,
backward steps, failures), test particles, symplectic correctors and events."""
import numpy as np
import pytest

import libration as lb
from libration import ConvergenceError, MethodError
from libration.methods import STATUS_NO_CONVERGENCE, STATUS_OK, raise_for_status
from libration.wisdom_holman import WisdomHolman, corrector_coefficients

COORDS = ["democratic-heliocentric", "jacobi"]
K2 = 0.01720209895 ** 2  # G in au^3 / (Msun day^2) (Gauss's constant squared)


def planets(n_particles=0, mass_scale=1.0, eccentricity=0.05, boost=(0.0, 0.0, 0.0), seed=1):
    """An invented system: a solar-mass star, three giant planets on low-inclination orbits,
    and test particles between them (au, Msun, day)."""
    rng = np.random.default_rng(seed)
    a = np.concatenate([[5.0, 9.0, 16.0], rng.uniform(6.0, 8.0, n_particles)])
    m = np.concatenate([[1.0], mass_scale * np.array([1e-3, 3e-4, 5e-5]), np.zeros(n_particles)])
    phase = rng.uniform(0, 2 * np.pi, a.size)
    inc = rng.uniform(0, 0.05, a.size)
    pos = [np.zeros(3)]
    vel = [np.zeros(3)]
    for ak, ph, ik in zip(a, phase, inc):
        r = ak * (1 - eccentricity)
        speed = np.sqrt(K2 * (1 + eccentricity) / r)  # pericentre speed
        pos.append(r * np.array([np.cos(ph), np.sin(ph) * np.cos(ik), np.sin(ph) * np.sin(ik)]))
        vel.append(speed * np.array([-np.sin(ph), np.cos(ph) * np.cos(ik), np.cos(ph) * np.sin(ik)]))
    pos = np.array(pos)
    vel = np.array(vel) + np.asarray(boost)
    return lb.System(m, pos, vel, units="au-msun-day")


@pytest.mark.parametrize("coordinates", COORDS)
def test_split_invariance_and_outputs_do_not_change_the_trajectory(coordinates):
    system = planets(2)
    one = lb.Propagator(system, method="wisdom-holman", step=20.0, coordinates=coordinates)
    one.advance(20.0 * 500)
    many = lb.Propagator(system, method="wisdom-holman", step=20.0, coordinates=coordinates)
    for k in range(1, 50):
        many.advance(20.0 * 10 * k)
        many.energy()                      # outputs synchronise a copy only
        many.advance(20.0 * 10 * k + 7.3)  # off the grid: finished on a copy
        _ = many.system
    many.advance(20.0 * 500)
    np.testing.assert_array_equal(one.system.position, many.system.position)
    np.testing.assert_array_equal(one.system.velocity, many.system.velocity)


@pytest.mark.parametrize("coordinates", COORDS)
def test_checkpoint_continues_bit_for_bit(coordinates):
    system = planets(1)
    reference = lb.Propagator(system, method="wisdom-holman", step=15.0, coordinates=coordinates,
                              corrector=3 if coordinates == "jacobi" else 0)
    reference.advance(15.0 * 400)
    first = lb.Propagator(system, method="wisdom-holman", step=15.0, coordinates=coordinates,
                          corrector=3 if coordinates == "jacobi" else 0)
    first.advance(15.0 * 173)
    second = lb.Propagator.from_memory(first.to_memory())
    second.advance(15.0 * 400)
    np.testing.assert_array_equal(reference.system.position, second.system.position)
    np.testing.assert_array_equal(reference.system.velocity, second.system.velocity)


def test_jacobi_two_body_is_exact():
    """With one planet the Jacobi map has no interaction term: it is the exact Kepler motion of
    the pair, whatever the step (checked against the relative Kepler drift)."""
    from libration._kepler import drift
    m = np.array([1.0, 1e-3])
    pos = np.array([[0.0, 0.0, 0.0], [3.0, 0.5, 0.1]])
    vel = np.array([[0.0, 0.0, 0.0], [-0.002, 0.009, 0.0005]])
    system = lb.System(m, pos, vel, units="au-msun-day")
    p = lb.Propagator(system, method="wisdom-holman", step=123.0, coordinates="jacobi")
    p.advance(123.0 * 200)
    out = p.system
    rel_r, rel_v = drift(K2 * m.sum(), pos[1] - pos[0], vel[1] - vel[0], 123.0 * 200)
    np.testing.assert_allclose(out.position[1] - out.position[0], rel_r, rtol=0, atol=1e-11)
    np.testing.assert_allclose(out.velocity[1] - out.velocity[0], rel_v, rtol=0, atol=1e-14)
    # the barycentre moves uniformly
    com = m @ out.position / m.sum()
    np.testing.assert_allclose(com, (m @ pos + m @ vel * 123.0 * 200) / m.sum(), rtol=0, atol=1e-13)


@pytest.mark.parametrize("coordinates", COORDS)
def test_inertial_frame_with_moving_barycentre(coordinates):
    """A uniformly moving barycentre is carried apart: the boosted system's output is the
    unboosted one shifted by the boost (to rounding)."""
    boost = np.array([0.003, -0.001, 0.0005])
    still = lb.Propagator(planets(1), method="wisdom-holman", step=10.0, coordinates=coordinates)
    moving = lb.Propagator(planets(1, boost=boost), method="wisdom-holman", step=10.0,
                           coordinates=coordinates)
    t = 10.0 * 3000
    still.advance(t)
    moving.advance(t)
    a, b = still.system, moving.system
    # the input barycentre of the still system is not exactly at rest (the star sits at 0)
    _, v_cm = planets(1).center_of_mass()
    # rounding differences of the two inputs (boost added to ~1e-2 au/day) grow over 3000 steps
    np.testing.assert_allclose(b.position - a.position, np.broadcast_to(boost * t, a.position.shape),
                               rtol=0, atol=1e-10)
    np.testing.assert_allclose(b.velocity - a.velocity, np.broadcast_to(boost, a.velocity.shape),
                               rtol=0, atol=1e-13)
    assert np.linalg.norm(v_cm) > 0  # the test is not trivial


@pytest.mark.parametrize("coordinates", COORDS)
def test_backward_integration_returns(coordinates):
    system = planets(2)
    forward = lb.Propagator(system, method="wisdom-holman", step=12.0, coordinates=coordinates)
    forward.advance(12.0 * 2000)
    backward = lb.Propagator(forward.system, method="wisdom-holman", step=-12.0,
                             coordinates=coordinates)
    backward.advance(-12.0 * 2000)
    back = backward.system
    np.testing.assert_allclose(back.position, system.position, rtol=0, atol=1e-10)
    np.testing.assert_allclose(back.velocity, system.velocity, rtol=0, atol=1e-13)


@pytest.mark.parametrize("coordinates", COORDS)
def test_test_particles_ride_along(coordinates):
    """Test particles give the same motion as 1e-20-mass bodies in the same map (to rounding),
    and leave the planets untouched."""
    with_tp = planets(4)
    mass = with_tp.mass.copy()
    mass[4:] = 1e-20
    massive = lb.System(mass, with_tp.position, with_tp.velocity, units="au-msun-day")
    a = lb.Propagator(with_tp, method="wisdom-holman", step=8.0, coordinates=coordinates)
    b = lb.Propagator(massive, method="wisdom-holman", step=8.0, coordinates=coordinates)
    planets_only = lb.Propagator(lb.System(with_tp.mass[:4], with_tp.position[:4], with_tp.velocity[:4],
                                           units="au-msun-day"),
                                 method="wisdom-holman", step=8.0, coordinates=coordinates)
    for p in (a, b, planets_only):
        p.advance(8.0 * 3000)
    np.testing.assert_allclose(a.system.position, b.system.position, rtol=0, atol=1e-11)
    np.testing.assert_array_equal(a.system.position[:4], planets_only.system.position)


@pytest.mark.parametrize("coordinates", COORDS)
def test_test_particles_against_yoshida8(coordinates):
    """Test particles under the map converge (as step^2) to the same particles integrated as
    1e-20-mass bodies by the Yoshida-8 composition at a tiny step (issue 3)."""
    with_tp = planets(3, eccentricity=0.02)
    mass = with_tp.mass.copy()
    mass[4:] = 1e-20
    exact = lb.Propagator(lb.System(mass, with_tp.position, with_tp.velocity, units="au-msun-day"),
                          method="yoshida8", step=2.0)
    t = 4000.0
    exact.advance(t)
    errors = []
    for h in (20.0, 10.0):
        p = lb.Propagator(with_tp, method="wisdom-holman", step=h, coordinates=coordinates)
        p.advance(t)
        errors.append(np.max(np.abs(p.system.position[4:] - exact.system.position[4:])))
    # measured 8.1e-6 au (democratic heliocentric) and 8.3e-6 au (Jacobi) at 20 days over 11
    # years, ratio 4.000 on halving
    assert errors[0] < 2e-5
    assert 3.0 < errors[0] / errors[1] < 5.0, errors


def test_corrector_coefficients_cancel_the_error_series():
    """sum_i 2 b_i a_i^(2k+1) / (2k+1)! equals the coefficient of z^(2k+2) in (z/2) coth(z/2)
    (1/12, -1/720, 1/30240, -1/1209600, 1/47900160: Abramowitz & Stegun 4.5.67 / 23.1.2)."""
    target = [1 / 12, -1 / 720, 1 / 30240, -1 / 1209600, 1 / 47900160]
    import math
    for order in (3, 5, 7, 9, 11):
        pairs = corrector_coefficients(order)
        assert len(pairs) == (order - 1) // 2
        for k in range(len(pairs)):
            total = sum(2 * b * a ** (2 * k + 1) / math.factorial(2 * k + 1) for a, b in pairs)
            assert abs(total - target[k]) < 1e-15 * abs(target[k]) * 10 ** k


def _energy_error(system, h, t_end, **options):
    """Largest relative energy error at 100 output times on the step grid (t_end / 100 must be
    a multiple of h: a corrected state finished off the grid is only second-order accurate)."""
    p = lb.Propagator(system, method="wisdom-holman", step=h, **options)
    e0 = p.energy()
    worst = 0.0
    for k in range(1, 101):
        p.advance(t_end * k / 100)
        worst = max(worst, abs(p.energy() / e0 - 1))
    return worst


def test_correctors_raise_the_order():
    """With small planet masses (eps ~ 1e-6, so the eps^2 h^2 term is negligible) the energy
    error of the corrected Jacobi map falls like h^(corrector+1) instead of h^2."""
    system = planets(0, mass_scale=1e-3, eccentricity=0.1)
    t_end = 20000.0
    plain = [_energy_error(system, h, t_end, coordinates="jacobi") for h in (100.0, 50.0)]
    third = [_energy_error(system, h, t_end, coordinates="jacobi", corrector=3) for h in (100.0, 50.0)]
    fifth = [_energy_error(system, h, t_end, coordinates="jacobi", corrector=5) for h in (100.0, 50.0)]
    assert 3.0 < plain[0] / plain[1] < 5.0, plain
    assert third[0] < plain[0] / 30 and 10.0 < third[0] / third[1], third
    assert fifth[0] < third[0] and 30.0 < fifth[0] / fifth[1], fifth


@pytest.mark.parametrize("order", [0, 3, 5, 7, 9, 11])
def test_every_corrector_order_is_reached(order):
    """Planet masses 1e-4 of Jupiter's (eps ~ 1e-7): halving the step from 400 to 200 days cuts
    the energy error by ~2^(order+1) (measured 4.3, 21.7, 102, 412, 1482, 3380 for orders
    0..11; required: half of 2^(order+1), and 3.5 for the plain map)."""
    system = planets(0, mass_scale=1e-4, eccentricity=0.1)
    coarse, fine = (_energy_error(system, h, 80000.0, coordinates="jacobi", corrector=order)
                    for h in (400.0, 200.0))
    expected = 2.0 ** (order + 1) if order else 4.0
    assert coarse / fine > (0.5 * expected if order else 3.5), (coarse, fine)


def test_corrector_direction_matters():
    """The corrector applied the other way round (C^-1 at output) must not improve the error:
    the test above therefore checks the construction, not just an extra smoothing."""
    system = planets(0, mass_scale=1e-3, eccentricity=0.1)
    good = _energy_error(system, 100.0, 20000.0, coordinates="jacobi", corrector=3)
    integ_cls = WisdomHolman
    original = integ_cls._apply_corrector

    def swapped(self, q, p, *, inverse):
        return original(self, q, p, inverse=not inverse)
    integ_cls._apply_corrector = swapped
    try:
        bad = _energy_error(system, 100.0, 20000.0, coordinates="jacobi", corrector=3)
    finally:
        integ_cls._apply_corrector = original
    assert bad > 10 * good


def test_options_are_validated():
    system = planets(0)
    with pytest.raises(MethodError, match="coordinates"):
        lb.Propagator(system, method="wisdom-holman", step=1.0, coordinates="heliocentric")
    with pytest.raises(MethodError, match="corrector"):
        lb.Propagator(system, method="wisdom-holman", step=1.0, coordinates="jacobi", corrector=4)
    with pytest.raises(MethodError, match="democratic-heliocentric map offers corrector=0"):
        lb.Propagator(system, method="wisdom-holman", step=1.0, corrector=3)
    with pytest.raises(MethodError, match="softening"):
        lb.Propagator(system, method="wisdom-holman", step=1.0, softening=0.01)
    with pytest.raises(MethodError, match="no option"):
        lb.Propagator(system, method="wisdom-holman", step=1.0, order=4)


@pytest.mark.parametrize("coordinates", COORDS)
def test_kepler_failure_is_reported_with_body_and_state(coordinates):
    """A test particle whose state cannot be drifted (a non-finite velocity, which System would
    refuse: the integrator is built directly) stops the kernel with a status naming it, never a
    silent NaN, and raise_for_status turns that into ConvergenceError."""
    system = planets(2)
    vel = system.velocity.copy()
    vel[5, 1] = np.inf
    integ = WisdomHolman(system.mass, system.position, vel, system.n_active, system.G, step=5.0,
                         coordinates=coordinates)
    report = integ.take_steps(10)
    if report.status == STATUS_OK:
        pytest.fail("the singular particle was stepped")
    assert report.status == STATUS_NO_CONVERGENCE
    assert report.steps_done == 0
    assert report.bodies == (5,)
    assert "body 5" in report.message and "velocity" in report.message
    with pytest.raises(ConvergenceError, match="body 5"):
        raise_for_status(report)
    assert np.all(np.isfinite(integ._q))


@pytest.mark.parametrize("coordinates", COORDS)
def test_events_stop_the_loop(coordinates):
    """A test particle on a crossing orbit meets a planet: the encounter check (events kernel,
    issue 4) stops the compiled loop and the propagator records it."""
    system = planets(0)
    # a particle on the planet-1 orbit, slightly behind it: it comes within 3 Hill radii
    pos = np.vstack([system.position, system.position[1] * 1.0005])
    vel = np.vstack([system.velocity, system.velocity[1] * 0.9995])
    mass = np.append(system.mass, 0.0)
    s = lb.System(mass, pos, vel, units="au-msun-day")
    p = lb.Propagator(s, method="wisdom-holman", step=5.0, coordinates=coordinates,
                      events={"encounter": "stop", "encounter_hill": 3.0})
    p.advance(5.0 * 200)
    assert p.event_log and p.event_log[0]["kind"] == "encounter"
    assert sorted(p.event_log[0]["bodies"]) == [1, 4]
    assert p.time < 5.0 * 200


def test_corrected_outputs_off_the_step_grid_keep_the_corrector_accuracy():
    """An output between grid points is finished with the corrected map of the partial step, so
    its energy error stays at the corrected level (the uncorrected level is ~1e4 times higher
    here; a plain partial step from the kernel state measured ~800 times worse)."""
    system = planets(0, mass_scale=1e-3, eccentricity=0.1)
    p = lb.Propagator(system, method="wisdom-holman", step=100.0, coordinates="jacobi", corrector=5)
    e0 = p.energy()
    on_grid = off_grid = 0.0
    for k in range(1, 51):
        p.advance(200.0 * k)
        on_grid = max(on_grid, abs(p.energy() / e0 - 1))
        p.advance(200.0 * k + 37.0)
        off_grid = max(off_grid, abs(p.energy() / e0 - 1))
    plain = _energy_error(system, 100.0, 10000.0, coordinates="jacobi")
    assert off_grid < 3 * on_grid + 1e-14
    assert off_grid < plain / 1000


@pytest.mark.parametrize("coordinates", COORDS)
def test_thread_count_does_not_change_a_bit(coordinates):
    """Enough test particles for the gravity kernel to use two threads: same bits as one."""
    system = planets(70_000)
    runs = []
    for threads in (1, 2):
        p = lb.Propagator(system, method="wisdom-holman", step=10.0, coordinates=coordinates,
                          threads=threads)
        p.advance(10.0 * 5)
        runs.append(p.system)
    np.testing.assert_array_equal(runs[0].position, runs[1].position)
    np.testing.assert_array_equal(runs[0].velocity, runs[1].velocity)


def test_checkpoint_file_round_trip(tmp_path):
    """Through a checkpoint file (libration.io), saved off the step grid, with a corrector."""
    system = planets(2)
    reference = lb.Propagator(system, method="wisdom-holman", step=10.0, coordinates="jacobi", corrector=5)
    reference.advance(5000.0)
    first = lb.Propagator(system, method="wisdom-holman", step=10.0, coordinates="jacobi", corrector=5)
    first.advance(2003.0)
    first.save(tmp_path / "run.ckpt")
    second = lb.Propagator.load(tmp_path / "run.ckpt")
    assert second.options == {"coordinates": "jacobi", "corrector": 5}
    second.advance(5000.0)
    np.testing.assert_array_equal(second.system.position, reference.system.position)
    np.testing.assert_array_equal(second.system.velocity, reference.system.velocity)
