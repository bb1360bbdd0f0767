"""Events: settings validation, the per-step check kernel, responses and their wiring."""
import math

import numpy as np
import pytest

import libration as lb
from libration import _extrapolation
from libration.events import EventSettings, locate_root, merge_bodies
from libration.exceptions import ValidationError
from libration.methods import METHODS, STATUS_EVENT

ALL_METHODS = sorted(METHODS)
FIXED_STEP = {name: 1e-3 for name, cls in METHODS.items() if not cls.adaptive}


def kw(method, step=1e-3):
    return {"tolerance": 1e-12} if METHODS[method].adaptive else {"step": step}


# --------------------------------------------------------------------- settings
def test_from_user_round_trip_and_defaults():
    settings = EventSettings.from_user({"collision": "merge", "escape": "remove", "escape_distance": 50})
    assert settings.collision == "merge" and settings.escape == "remove" and settings.encounter is None
    assert settings.encounter_hill == 3.0 and settings.escape_distance == 50.0
    assert EventSettings.from_user(settings.to_user()) == settings
    assert settings.response("encounter") == "record"


@pytest.mark.parametrize("user, word", [
    ({"collisions": "stop"}, "collisions"),
    ({"collision": "explode"}, "collision"),
    ({"encounter": "merge"}, "encounter"),
    ({"escape": "merge"}, "escape"),
    ({"encounter": "record", "encounter_hill": 0}, "encounter_hill"),
    ({"escape": "stop", "escape_distance": float("inf")}, "escape_distance"),
    ({"escape": "stop", "escape_distance": True}, "escape_distance"),
], ids=["unknown-key", "bad-response", "encounter-merge", "escape-merge", "zero-hill", "inf-distance",
        "bool-distance"])
def test_from_user_rejects_bad_input_naming_the_key(user, word):
    with pytest.raises(ValidationError, match=word):
        EventSettings.from_user(user)
    with pytest.raises(ValidationError):
        EventSettings.from_user(["collision"])


def test_kernel_config_is_a_fresh_writable_buffer():
    settings = EventSettings.from_user({"collision": "stop"})
    a, b = settings.kernel_config(), settings.kernel_config()
    assert a is not b and a.flags.writeable and a.nbytes == _extrapolation.event_config_size()
    info = _extrapolation.read_event_config(a)
    assert info["enabled"] == 1 and info["collisions"] == 1 and info["escape_distance"] == 0.0
    off = _extrapolation.read_event_config(EventSettings.from_user({}).kernel_config())
    assert off["enabled"] == 0


# ----------------------------------------------------------------- check kernel
def check(settings, mass, position, velocity, radius=None, config=None, G=1.0):
    mass = np.asarray(mass, float)
    n = mass.size
    radius = np.zeros(n) if radius is None else np.asarray(radius, float)
    config = settings.kernel_config() if config is None else config
    n_active = int(np.count_nonzero(mass))
    result = _extrapolation.check_events(np.ascontiguousarray(position, float),
                                         np.ascontiguousarray(velocity, float), mass, radius, n_active,
                                         G, config)
    return result, config


def test_collision_needs_overlap_of_radii():
    settings = EventSettings.from_user({"collision": "record"})
    pos = [[0, 0, 0], [1.0, 0, 0], [3.0, 0, 0]]
    vel = np.zeros((3, 3))
    assert check(settings, [1, 1, 1], pos, vel, radius=[0.45, 0.5, 0.1])[0] == (None, -1, -1)
    assert check(settings, [1, 1, 1], pos, vel, radius=[0.55, 0.5, 0.1])[0] == ("collision", 0, 1)


def test_encounter_uses_mutual_hill_radius_about_body_zero():
    # R_H = ((m1 + m2) / (3 m0))^(1/3) (d1 + d2) / 2; body 2 sits at (1, y), d2 = sqrt(1 + y^2):
    # y = 0.12 gives R_H = 0.12645 (inside), y = 0.13 gives R_H = 0.12653 (outside)
    settings = EventSettings.from_user({"encounter": "record", "encounter_hill": 1.0})
    mass = [1.0, 0.003, 0.003]
    for y in (0.12, 0.13):
        hill = (0.006 / 3) ** (1 / 3) * (1 + math.hypot(1, y)) / 2
        assert (y < hill) == (y == 0.12)
    vel = np.zeros((3, 3))
    outside = [[0, 0, 0], [1.0, 0, 0], [1.0, 0.13, 0]]
    inside = [[0, 0, 0], [1.0, 0, 0], [1.0, 0.12, 0]]
    assert check(settings, mass, outside, vel)[0][0] is None
    assert check(settings, mass, inside, vel)[0] == ("encounter", 1, 2)


def test_escape_needs_distance_and_positive_energy():
    settings = EventSettings.from_user({"escape": "record", "escape_distance": 10.0})
    mass = [1.0, 1e-3]
    far = [[0, 0, 0], [20.0, 0, 0]]
    slow = [[0, 0, 0], [0, 0.2, 0]]     # v^2 / 2 = 0.02 < G M / r = 0.05: bound
    fast = [[0, 0, 0], [0, 0.4, 0]]     # 0.08 > 0.05: unbound
    assert check(settings, mass, far, slow)[0][0] is None
    assert check(settings, mass, far, fast)[0] == ("escape", 1, -1)
    near = [[0, 0, 0], [5.0, 0, 0]]
    assert check(settings, mass, near, [[0, 0, 0], [0, 5.0, 0]])[0][0] is None


def test_a_continuing_condition_is_reported_once_until_it_ends():
    settings = EventSettings.from_user({"encounter": "record", "encounter_hill": 1.0})
    mass = [1.0, 0.003, 0.003]
    vel = np.zeros((3, 3))
    inside = [[0, 0, 0], [1.0, 0, 0], [1.0, 0.05, 0]]
    edge = [[0, 0, 0], [1.0, 0, 0], [1.0, 0.135, 0]]     # beyond R_H = 0.1266, inside 1.1 R_H
    away = [[0, 0, 0], [1.0, 0, 0], [1.0, 0.5, 0]]
    (kind, _, _), config = check(settings, mass, inside, vel)
    assert kind == "encounter"
    assert check(settings, mass, inside, vel, config=config)[0][0] is None   # suppressed
    assert check(settings, mass, edge, vel, config=config)[0][0] is None     # hysteresis
    assert check(settings, mass, inside, vel, config=config)[0][0] is None
    assert check(settings, mass, away, vel, config=config)[0][0] is None     # ends here
    assert check(settings, mass, inside, vel, config=config)[0][0] == "encounter"
    info = _extrapolation.read_event_config(config)
    assert info["last_kind"] == "encounter" and info["last_bodies"] == (1, 2) and info["tracked"] == 1


def test_several_new_conditions_are_drained_one_by_one():
    settings = EventSettings.from_user({"collision": "record"})
    pos = [[0, 0, 0], [0.1, 0, 0], [5, 0, 0], [5.1, 0, 0]]
    (first, config) = check(settings, [1, 1, 1, 1], pos, np.zeros((4, 3)), radius=[0.1] * 4)
    second, _ = check(settings, [1, 1, 1, 1], pos, np.zeros((4, 3)), radius=[0.1] * 4, config=config)
    third, _ = check(settings, [1, 1, 1, 1], pos, np.zeros((4, 3)), radius=[0.1] * 4, config=config)
    assert first == ("collision", 0, 1) and second == ("collision", 2, 3) and third[0] is None


# ------------------------------------------------------------------- responses
def test_merge_bodies_conserves_mass_momentum_centre_and_volume():
    rng = np.random.default_rng(7)
    mass = np.array([2.0, 0.7, 0.3])
    position = rng.normal(size=(3, 3))
    velocity = rng.normal(size=(3, 3))
    radius = np.array([0.3, 0.2, 0.1])
    m, r, v, rad, names = merge_bodies(mass, position, velocity, radius, ["a", "b", "c"], 2, 1)
    assert names == ["a", "b"] and m.shape == (2,)
    assert math.isclose(m.sum(), mass.sum(), rel_tol=1e-15)
    np.testing.assert_allclose((m[:, None] * v).sum(0), (mass[:, None] * velocity).sum(0), rtol=1e-14, atol=1e-15)
    np.testing.assert_allclose((m[:, None] * r).sum(0), (mass[:, None] * position).sum(0), rtol=1e-14, atol=1e-15)
    assert math.isclose(rad[1] ** 3, 0.2 ** 3 + 0.1 ** 3, rel_tol=1e-14)
    assert position[1, 0] != r[1, 0]  # inputs untouched, output moved


def test_locate_root_brackets_and_falls_back_to_the_end():
    assert abs(locate_root(lambda t: 0.3 - t, 0.0, 1.0) - 0.3) < 1e-15
    assert abs(locate_root(lambda t: math.cos(t), 0.0, 3.0) - math.pi / 2) < 1e-14
    assert locate_root(lambda t: -1.0, 0.0, 2.0) == 2.0


def head_on(radius=0.05):
    return lb.System([0.5, 0.5], [[-0.5, 0, 0], [0.5, 0, 0]], np.zeros((2, 3)), radius=[radius, radius],
                     names=["west", "east"])


@pytest.mark.parametrize("method", ALL_METHODS)
def test_collision_stop_returns_with_the_event_and_can_go_on(method):
    p = lb.Propagator(head_on(), method, events={"collision": "stop"}, **kw(method))
    report = p.advance(1.5)
    assert report.status == STATUS_EVENT and p.status == STATUS_EVENT
    assert p.time < 1.2 and "west and east" in p.message
    (entry,) = p.event_log
    assert entry["kind"] == "collision" and entry["names"] == ["west", "east"] and entry["action"] == "stop"
    assert entry["time"] <= entry["step_end"]
    assert abs(entry["distance"] - 0.1) < 1e-4            # located at contact
    # going on: the overlap continues, so it is not reported again
    p.advance(1.1)
    assert len(p.event_log) == 1


@pytest.mark.parametrize("method", ALL_METHODS)
def test_record_mode_does_not_change_the_trajectory(method):
    mass = np.array([1.0, 1e-3, 1e-3])
    v2 = 1.05 ** -0.5
    position = np.array([[0, 0, 0], [1.0, 0, 0], [1.05 * math.cos(0.3), 1.05 * math.sin(0.3), 0]])
    velocity = np.array([[0, 0, 0], [0, 1.0, 0], [-v2 * math.sin(0.3), v2 * math.cos(0.3), 0]])
    system = lb.System(mass, position, velocity).barycentric()
    plain = lb.Propagator(system, method, **kw(method, 2e-3))
    watched = lb.Propagator(system, method, events={"encounter": "record", "encounter_hill": 5.0,
                                                    "escape": "record", "escape_distance": 1.02},
                            **kw(method, 2e-3))
    plain.advance(6.0)
    watched.advance(6.0)
    assert watched.event_log                      # something was recorded
    np.testing.assert_array_equal(plain.system.position, watched.system.position)
    np.testing.assert_array_equal(plain.system.velocity, watched.system.velocity)


def test_a_slow_encounter_is_logged_once_per_passage():
    # two small planets on circular orbits 0.1 apart (beyond 2 sqrt(3) mutual Hill radii, so
    # they pass rather than turn back); the outer one starts 0.5 rad ahead and the inner one
    # catches up at 1 - 1.1^-1.5 = 0.133 rad per time unit: one conjunction near t = 3.8,
    # about a hundred steps inside 15 mutual Hill radii (0.138)
    mass = np.array([1.0, 1e-6, 1e-6])
    a1, a2, phase = 1.0, 1.1, 0.5
    position = np.array([[0, 0, 0], [a1, 0, 0], [a2 * math.cos(phase), a2 * math.sin(phase), 0]])
    velocity = np.array([[0, 0, 0], [0, a1 ** -0.5, 0],
                         [-a2 ** -0.5 * math.sin(phase), a2 ** -0.5 * math.cos(phase), 0]])
    system = lb.System(mass, position, velocity)
    p = lb.Propagator(system, "leapfrog", step=1e-2, events={"encounter": "record", "encounter_hill": 15.0})
    p.advance(8.0)
    assert [e["kind"] for e in p.event_log] == ["encounter"], p.event_log
    assert 3.0 < p.event_log[0]["time"] < 4.0
    assert abs(p.event_log[0]["distance"] - 0.138) < 0.005


def test_escape_remove_drops_the_body_and_logs_its_state():
    mass = [1.0, 1e-3, 0.0]
    position = [[0, 0, 0], [1.0, 0, 0], [2.0, 0, 0]]
    velocity = [[0, 0, 0], [0, 1.0, 0], [2.0, 0, 0]]
    s = lb.System(mass, position, velocity, names=["star", "planet", "comet"]).barycentric()
    for method in ("bulirsch-stoer", "leapfrog"):
        p = lb.Propagator(s, method, events={"escape": "remove", "escape_distance": 5.0}, **kw(method, 1e-2))
        p.advance(4.0)
        assert p.names == ["star", "planet"] and p.system.n == 2
        (entry,) = p.event_log
        assert entry["kind"] == "escape" and entry["removed"] == "comet"
        # located when the comet crossed 5 length units from the barycentre (to the step)
        crossing = np.linalg.norm(entry["state"]["position"][0])
        assert abs(crossing - 5.0) < (1e-9 if method == "bulirsch-stoer" else 1e-4)
        assert p.time == 4.0


def test_checkpoint_continues_bit_for_bit_with_the_event_log(tmp_path):
    # the Pythagorean start (Szebehely & Peters 1967) with small radii: contacts get recorded
    s = lb.System([3.0, 4.0, 5.0], [[1, 3, 0], [-2, -1, 0], [1, -1, 0]], np.zeros((3, 3)),
                  radius=[0.005] * 3)
    events = {"collision": "record", "escape": "record", "escape_distance": 10.0}
    straight = lb.Propagator(s, "bulirsch-stoer", tolerance=1e-13, events=events)
    straight.advance(30.0)
    first = lb.Propagator(s, "bulirsch-stoer", tolerance=1e-13, events=events)
    first.advance(15.83)       # inside the closest approach: the contact is in progress
    first.save(tmp_path / "run.ckpt")
    resumed = lb.Propagator.load(tmp_path / "run.ckpt")
    resumed.advance(30.0)
    np.testing.assert_array_equal(resumed.system.position, straight.system.position)
    assert [(e["kind"], e["time"]) for e in resumed.event_log] == \
        [(e["kind"], e["time"]) for e in straight.event_log]
    assert any(e["kind"] == "collision" for e in straight.event_log)


@pytest.mark.parametrize("method", ["bulirsch-stoer", "yoshida4"])
def test_collision_remove_drops_the_lighter_body(method):
    s = lb.System([0.7, 0.3], [[-0.5, 0, 0], [0.5, 0, 0]], np.zeros((2, 3)), radius=[0.05, 0.05],
                  names=["big", "small"])
    p = lb.Propagator(s, method, events={"collision": "remove"}, **kw(method))
    p.advance(1.5)
    assert p.names == ["big"] and p.event_log[0]["removed"] == "small"
    assert p.system.mass.tolist() == [0.7]


def test_bulirsch_stoer_finds_a_contact_shorter_than_its_step():
    # a fast massless dart crosses the disc of a (nearly massless) planet 0.005 from its
    # centre: the contact (radius 0.01) lasts ~1e-3, the steps ~4e-2; both step ends are clear
    t_hit, speed, b = 0.5, 20.0, 0.005
    planet_at = np.array([math.cos(t_hit), math.sin(t_hit), 0.0])
    start = planet_at + [0.0, b, 0.0] - np.array([speed * t_hit, 0.0, 0.0])
    s = lb.System([1.0, 1e-9, 0.0], [[0, 0, 0], [1, 0, 0], start], [[0, 0, 0], [0, 1, 0], [speed, 0, 0]],
                  radius=[0.0, 0.01, 0.0], names=["star", "planet", "dart"])
    p = lb.Propagator(s, "bulirsch-stoer", tolerance=1e-10, events={"collision": "record"})
    p.advance(1.0)
    assert p.steps < 100
    (entry,) = p.event_log
    assert entry["names"] == ["planet", "dart"] and entry["step_end"] > entry["time"] + 1e-3
    assert abs(entry["distance"] - 0.01) < 1e-9       # located at first contact
    assert abs(entry["time"] - (t_hit - math.sqrt(0.01 ** 2 - b ** 2) / speed)) < 1e-3


@pytest.mark.parametrize("method", ["bulirsch-stoer", "leapfrog"])
def test_two_contacts_in_one_step_are_both_logged(method):
    # two head-on pairs 100 apart (their mutual pull is ~1e-4 of the pairs' own): contacts at
    # t = 1.0953 and ~1.0969, inside the one leapfrog step [1.09, 1.10]
    position = [[-0.5, 0, 0], [0.5, 0, 0], [-0.5005, 100, 0], [0.5005, 100, 0]]
    s = lb.System([0.5] * 4, position, np.zeros((4, 3)), radius=[0.05] * 4)
    p = lb.Propagator(s, method, events={"collision": "record"}, **kw(method, 0.01))
    p.advance(1.1)
    pairs = sorted(tuple(e["bodies"]) for e in p.event_log)
    assert pairs == [(0, 1), (2, 3)]
    assert p.event_log[0]["step_end"] == p.event_log[1]["step_end"]   # found in one check
    for entry in p.event_log:
        assert abs(entry["distance"] - 0.1) < 1e-3
        assert 1.09 < entry["time"] < 1.1
