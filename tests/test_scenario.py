"""Scenario files: the demo parses; malformed files are refused naming the line, key and expectation."""
from __future__ import annotations

import re

import numpy as np
import pytest

import libration as lb
from libration import scenario as sc
from libration.exceptions import ScenarioError

BASE = """\
[scenario]
name = "test"
units = "nbody"
angle_unit = "radian"

[[body]]
name = "sun"
mass = 1.0
position = [0.0, 0.0, 0.0]
velocity = [0.0, 0.0, 0.0]

[[body]]
name = "planet"
mass = 0.001
primary = "sun"
semi_major_axis = 1.0
eccentricity = 0.1
inclination = 0.05

[[population]]
name = "ring"
count = 10
primary = "sun"
seed = 5
semi_major_axis = { distribution = "uniform", min = 2.0, max = 3.0 }
eccentricity = { distribution = "rayleigh", scale = 0.02 }
mean_anomaly = { distribution = "uniform", min = 0.0, max = 6.283 }

[integrator]
method = "leapfrog"
step = 0.01

[run]
until = 1.0

[output]
file = "out.h5"
every = 0.1

[checkpoint]
file = "run.ckpt"
interval = 30.0
"""


def _edit(line: int, new: str | None) -> str:
    """BASE with 1-based ``line`` replaced by ``new`` (None deletes it)."""
    lines = BASE.splitlines()
    if new is None:
        del lines[line - 1]
    else:
        lines[line - 1] = new
    return "\n".join(lines) + "\n"


MALFORMED = [
    ("negative mass", _edit(8, "mass = -1.0"),
     r"line 8: \[\[body\]\] #1 key 'mass' must be a number >= 0, got -1.0"),
    ("unknown units", _edit(3, 'units = "furlongs"'),
     r"line 3: \[scenario\] key 'units' must be one of 'nbody', .*got 'furlongs'"),
    ("unknown method", _edit(30, 'method = "rk4"'),
     r"line 30: \[integrator\] key 'method' must be one of .*'leapfrog'.*got 'rk4'"),
    ("zero step", _edit(31, "step = 0"), r"line 31: \[integrator\] key 'step' must be nonzero, got 0"),
    ("missing step", _edit(31, None), r"line 29: \[integrator\] needs 'step' for method 'leapfrog'"),
    ("step not a number", _edit(31, "step = true"),
     r"line 31: \[integrator\] key 'step' must be a finite number, got True"),
    ("unknown primary", _edit(15, 'primary = "moon"'),
     r"line 15: \[\[body\]\] #2 \('planet'\) key 'primary': 'moon' is not a body defined before it"),
    ("negative eccentricity", _edit(17, "eccentricity = -0.1"),
     r"line 17: \[\[body\]\] #2 \('planet'\) key 'eccentricity' must be >= 0, got -0.1"),
    ("semi-major axis sign", _edit(16, "semi_major_axis = -1.0"),
     r"line 16: .*'semi_major_axis' must be > 0 for e < 1 and < 0 for e > 1, got a = -1.0 with e = 0.1"),
    ("short position", _edit(9, "position = [0.0, 0.0]"),
     r"line 9: \[\[body\]\] #1 key 'position' must be an array of 3 numbers, got \[0.0, 0.0\]"),
    ("text in velocity", _edit(10, 'velocity = [0.0, "fast", 0.0]'),
     r"line 10: \[\[body\]\] #1 key 'velocity' must be a finite number, got 'fast'"),
    ("duplicate name", _edit(13, 'name = "sun"'),
     r"line 13: \[\[body\]\] #2 key 'name': 'sun' is already used by an earlier body"),
    ("misspelt key", _edit(14, "mas = 0.001"),
     r"line 14: unknown key 'mas' in \[\[body\]\] #2; expected one of .*mass"),
    ("zero count", _edit(22, "count = 0"),
     r"line 22: \[\[population\]\] #1 key 'count' must be an integer >= 1, got 0"),
    ("negative seed", _edit(24, "seed = -3"),
     r"line 24: \[\[population\]\] #1 key 'seed' must be an integer >= 0, got -3"),
    ("unknown distribution", _edit(25, 'semi_major_axis = { distribution = "gaussian", min = 2.0, max = 3.0 }'),
     r"line 25: .*'semi_major_axis': 'distribution' must be one of 'uniform'.*got 'gaussian'"),
    ("min above max", _edit(25, 'semi_major_axis = { distribution = "uniform", min = 3.0, max = 2.0 }'),
     r"line 25: .*'max' must be > 'min', got min = 3.0, max = 2.0"),
    ("missing parameter", _edit(26, 'eccentricity = { distribution = "rayleigh" }'),
     r"line 26: .*a rayleigh distribution needs scale; 'scale' is missing"),
    ("non-positive every", _edit(38, "every = -0.1"),
     r"line 38: \[output\] key 'every' must be a number > 0, got -0.1"),
    ("output without every", _edit(38, None), r"line 36: \[output\] has 'file' but no 'every'"),
    ("interval as text", _edit(42, 'interval = "soon"'),
     r"line 42: \[checkpoint\] key 'interval' must be a finite number, got 'soon'"),
    ("TOML syntax", _edit(8, "mass = 1.0.0"), r"not valid TOML: .*line 8"),
    ("misspelt table", _edit(29, "[integrater]"),
     r"line 29: unknown top-level key or table 'integrater'"),
    ("until behind start", _edit(34, "until = -1.0"),
     r"line 34: \[run\] key 'until' \(-1.0\) lies behind 'start' \(0.0\) for step 0.01"),
    ("Cartesian and elements", _edit(16, "semi_major_axis = 1.0\nposition = [1.0, 0.0, 0.0]"),
     r"line 12: \[\[body\]\] #2 \('planet'\) mixes a Cartesian state .* with orbital elements"),
    ("massless primary", _edit(8, "mass = 0.0"),
     r"line 23: \[\[population\]\] #1 key 'primary': 'sun' has mass 0"),
    ("newer schema", _edit(2, 'name = "test"\nformat_version = 2'),
     r"line 3: \[scenario\] key 'format_version' is 2, newer than this libration reads \(1\)"),
    ("angle unit", _edit(4, 'angle_unit = "grad"'),
     r"line 4: \[scenario\] key 'angle_unit' must be one of 'degree', 'radian', got 'grad'"),
    ("options not a table", _edit(31, "step = 0.01\noptions = 3"),
     r"line 32: \[integrator\] key 'options' must be a table \[integrator.options\]"),
    ("checkpoint without file", _edit(41, None), r"line 40: \[checkpoint\] sets 'interval' or 'steps' but no 'file'"),
    ("no state", _edit(9, None).replace("velocity = [0.0, 0.0, 0.0]\n", ""),
     r"line 6: \[\[body\]\] #1 \('sun'\) has no 'position'"),
    ("inclination beyond pi", _edit(18, "inclination = 4.0"),
     r"line 18: \[\[body\]\] #2 key 'inclination' must be <= 3.14159, got 4.0"),
    ("no bodies", '[integrator]\nmethod = "leapfrog"\nstep = 1.0\n', r"no bodies: add at least one \[\[body\]\]"),
]


def test_battery_has_at_least_twenty_cases():
    assert len(MALFORMED) >= 20
    assert len({text for _, text, _ in MALFORMED}) == len(MALFORMED)


@pytest.mark.parametrize("text, expected", [(t, e) for _, t, e in MALFORMED], ids=[m[0] for m in MALFORMED])
def test_malformed_scenario_is_refused(text, expected):
    with pytest.raises(ScenarioError, match=expected) as info:
        sc.parse(text, "bad.toml")
    assert str(info.value).startswith("bad.toml")
    assert isinstance(info.value, ValueError)


def test_drawn_unbound_particle_is_refused_with_the_population_line():
    text = _edit(26, 'eccentricity = { distribution = "normal", mean = 1.5, sd = 0.01 }')
    scenario = sc.parse(text, "bad.toml")
    with pytest.raises(ScenarioError, match=r"line 20: \[\[population\]\] 'ring': particle 0 drew a "
                                            r"semi-major axis whose sign does not match"):
        scenario.system()


def test_drawn_inclination_outside_its_range_is_refused():
    text = _edit(27, 'mean_anomaly = 0.0\ninclination = { distribution = "normal", mean = 0.0, sd = 0.1 }')
    with pytest.raises(ScenarioError, match=r"line 20: \[\[population\]\] 'ring': particle \d+ drew an "
                                            r"inclination outside \[0, 180\] degrees \(-"):
        sc.parse(text, "bad.toml").system()


def test_unreadable_files(tmp_path):
    with pytest.raises(ScenarioError, match="cannot read scenario file"):
        sc.load(tmp_path / "missing.toml")
    binary = tmp_path / "binary.toml"
    binary.write_bytes(b"\xff\xfe\x00junk")
    with pytest.raises(ScenarioError, match="not UTF-8"):
        sc.load(binary)


def test_base_scenario_builds_the_stated_system(tmp_path):
    path = tmp_path / "ok.toml"
    path.write_text(BASE)
    scenario = sc.load(path)
    assert scenario.path_of(scenario.output) == str(tmp_path / "out.h5")
    assert scenario.checkpoint_interval == 30.0 and scenario.until == 1.0 and scenario.every == 0.1
    system = scenario.system()
    assert system.names[:2] == ["sun", "planet"] and system.names[2:] == [f"ring{i:05d}" for i in range(10)]
    assert system.n_active == 2 and system.units.name == "nbody"
    # barycentric frame
    np.testing.assert_allclose(system.center_of_mass()[0], 0.0, atol=1e-15)
    # the planet's orbit about the sun is the one written in the file
    elements = system.elements(frame="heliocentric", primary=0)
    assert elements.semi_major_axis[0] == pytest.approx(1.0, rel=1e-12)
    assert elements.eccentricity[0] == pytest.approx(0.1, rel=1e-12)
    assert elements.inclination[0] == pytest.approx(0.05, rel=1e-12)
    a = elements.semi_major_axis[1:]
    assert ((a >= 2.0) & (a <= 3.0)).all()
    # the same seed gives the same particles; the propagator is the one described
    again = scenario.system()
    np.testing.assert_array_equal(system.position, again.position)
    p = scenario.propagator(system)
    assert p.method == "leapfrog" and p.step == 0.01


def test_degrees_and_radians_agree():
    radians = sc.parse(BASE, "r.toml").system()
    degrees_text = BASE.replace('angle_unit = "radian"', 'angle_unit = "degree"').replace(
        "inclination = 0.05", f"inclination = {float(np.degrees(0.05))!r}").replace(
        "max = 6.283 }", f"max = {float(np.degrees(6.283))!r} }}")
    degrees = sc.parse(degrees_text, "d.toml").system()
    np.testing.assert_allclose(degrees.position, radians.position, rtol=0, atol=1e-13)


@pytest.mark.parametrize("spec, low, high, mean", [
    # mean of density proportional to x on [1, 2]: (2/3)(2^3 - 1)/(2^2 - 1) = 14/9 (calculus)
    ({"distribution": "powerlaw", "exponent": 1.0, "min": 1.0, "max": 2.0}, 1.0, 2.0, 14 / 9),
    # log-uniform on [1, e]: mean = (e - 1)/ln(e) = e - 1 (calculus)
    ({"distribution": "loguniform", "min": 1.0, "max": np.e}, 1.0, np.e, np.e - 1),
    # Rayleigh(scale s): mean s*sqrt(pi/2) (standard result, from memory)
    ({"distribution": "rayleigh", "scale": 0.1}, 0.0, np.inf, 0.1 * np.sqrt(np.pi / 2)),
    ({"distribution": "normal", "mean": 3.0, "sd": 0.5}, -np.inf, np.inf, 3.0),
])
def test_distributions_draw_what_they_state(spec, low, high, mean):
    values = sc._draw(np.random.default_rng(0), spec, 40_000)
    assert values.min() >= low and values.max() <= high
    assert values.mean() == pytest.approx(mean, rel=0.01)


def test_demo_scenario_parses_into_the_invented_system():
    scenario = sc.demo()
    assert scenario.units == "au-msun-day" and scenario.name == "Calyra"
    assert scenario.output == "calyra.h5" and scenario.checkpoint == "calyra.ckpt"
    system = scenario.system(population_counts={"belt": 200})
    assert system.n == 205 and system.n_active == 5
    assert system.names[:5] == ["Calyra", "Calyra b", "Calyra c", "Calyra d", "Calyra e"]
    elements = system.elements(frame="heliocentric", primary=0)
    np.testing.assert_allclose(elements.semi_major_axis[:4], [0.62, 1.45, 4.80, 9.60], rtol=1e-12)
    belt = elements.semi_major_axis[4:]
    assert ((belt > 2.1) & (belt < 3.4)).all()
    assert np.degrees(elements.inclination[4:]).max() <= 8.6 + 1e-9
    assert re.search(r"\[\[population\]\]", sc.demo_text())
    assert scenario.method in lb.METHODS


# --- property-based: any edit of a valid scenario is either accepted or refused clearly --------
from hypothesis import HealthCheck, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

_VALUES = st.one_of(st.integers(-5, 5), st.floats(allow_nan=True, allow_infinity=True), st.booleans(),
                    st.sampled_from(['"sun"', '"x"', '""', "[1.0, 2.0]", "[]", "{ distribution = \"uniform\" }",
                                     "{}", '"uniform"', "[1, 2, 3]", "1e400"]))


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(st.integers(1, 42), st.one_of(st.none(), _VALUES)), min_size=1, max_size=3))
def test_edited_scenarios_parse_or_fail_with_a_scenario_error(edits):
    lines = BASE.splitlines()
    for line, value in edits:
        i = (line - 1) % len(lines)
        if value is None:
            lines[i] = ""  # a deleted line
        elif "=" in lines[i]:
            key = lines[i].split("=", 1)[0]
            text = value if isinstance(value, str) else (repr(value).lower() if isinstance(value, bool)
                                                          else repr(value))
            lines[i] = f"{key}= {text.replace('inf', '1e400').replace('nan', 'nan')}"
    try:
        scenario = sc.parse("\n".join(lines) + "\n", "edited.toml")
        scenario.system()
    except ScenarioError as exc:
        assert str(exc).startswith("edited.toml")


def test_events_and_options_reach_the_propagator_or_name_their_table():
    scenario = sc.parse(BASE + '\n[events]\ncollision = "merge"\nescape_distance = 50.0\n', "ev.toml")
    p = scenario.propagator()
    assert p.event_settings.collision == "merge" and p.event_settings.escape_distance == 50.0
    bad = sc.parse(BASE + '\n[events]\ncolision = "merge"\n', "ev.toml")
    with pytest.raises(ScenarioError, match=r"ev\.toml, line 44: \[events\]: .*'colision'"):
        bad.propagator()
    options = sc.parse(_edit(31, "step = 0.01\n[integrator.options]\nflavour = 3"), "op.toml")
    with pytest.raises(ScenarioError, match=r"op\.toml, line 29: \[integrator\]: .*flavour"):
        options.propagator()
