"""External check: the Hill-stability boundary of two planets on circular coplanar orbits.

Source: Gladman, B. (1993), "Dynamics of systems of two close planets", Icarus 106, 247.
For two planets of masses m1, m2 on initially circular, coplanar orbits about a star of mass
M, the pair is Hill stable (close approaches are impossible for all time) when the orbital
separation exceeds Delta_c = 2 * 3**0.5 mutual Hill radii, with the mutual Hill radius
R_H = ((m1 + m2) / (3 M))**(1/3) * (a1 + a2) / 2 (Gladman 1993, the circular-orbit limit of
his Hill-stability criterion; the value 2 * sqrt(3) ~ 3.46 is from memory of that paper).
Gladman's integrations found the boundary sharp for initially circular orbits: pairs just
inside it soon had close approaches (from memory of the same paper).  The scan below asks
for that: a close approach within 300 inner orbits for every separation inside the boundary,
none outside it, so the numerical boundary falls where Gladman puts it, within one grid step.

The planets are invented (masses 5e-5 and 3e-5 of the star, "light planets").  A close
encounter is a separation below 2 mutual Hill radii (common practice: encounter checks at a
few Hill radii), detected two ways: by the ensemble's own sampling (ten samples per inner
orbit) and by the compiled per-step encounter events, located in time (libration.events).
"""
from __future__ import annotations

import math

import numpy as np

import libration as lb
from libration.ensemble import Ensemble

GLADMAN_CRITICAL = 2.0 * math.sqrt(3.0)  # mutual Hill radii (Gladman 1993, Icarus 106, 247)
TWO_PI = 2.0 * math.pi
M_INNER, M_OUTER = 5e-5, 3e-5


def outer_semi_major_axis(delta: np.ndarray) -> np.ndarray:
    """a2 with a2 - a1 = delta * R_H for a1 = 1 (R_H uses the mean semi-major axis)."""
    k = 0.5 * delta * ((M_INNER + M_OUTER) / 3.0) ** (1.0 / 3.0)
    return (1.0 + k) / (1.0 - k)


def scan(directory, **detection) -> tuple[np.ndarray, np.ndarray]:
    base = lb.System.from_elements(1.0, [M_INNER, M_OUTER], [1.0, 1.2], [0.0, 0.0], [0.0, 0.0], [0.0, 0.0],
                                   [0.0, 0.0], [0.0, 2.0], units="nbody", names=["star", "inner", "outer"])
    deltas = np.arange(2.5, 4.51, 0.25)  # grid resolution 0.25 mutual Hill radii
    ensemble = Ensemble(base, directory, until=300 * TWO_PI, method="leapfrog", step=TWO_PI / 100,
                        grid={"outer.semi_major_axis": outer_semi_major_axis(deltas)}, track=["inner", "outer"],
                        **detection)
    return deltas, ensemble.run("sequential")


def check_boundary(deltas: np.ndarray, table: np.ndarray, spacing: float = 0.25) -> None:
    assert set(table["status"]) <= {"finished", "stopped"}
    # The grid really spans the intended separations (elements rebuilt exactly enough).
    assert np.allclose(outer_semi_major_axis(deltas), table["outer.semi_major_axis"], rtol=0, atol=1e-15)
    met = np.isfinite(table["first_encounter_time"])
    inside = deltas < GLADMAN_CRITICAL
    # Prompt close encounters inside the boundary, within 300 inner orbits ...
    assert met[inside].all(), list(zip(deltas, table["min_separation_hill"]))
    assert np.all(table["status"][inside] == "stopped")
    # ... and none outside, where the pair stays far apart (Hill stable).
    assert not met[~inside].any(), list(zip(deltas, table["min_separation_hill"]))
    assert np.all(table["min_separation_hill"][~inside] > 2.5)
    assert np.all(table["time"][~inside] == 300 * TWO_PI)
    # The numerical boundary: between the widest pair that met and the closest that did not.
    widest_met = deltas[met].max()
    closest_quiet = deltas[~met].min()
    assert closest_quiet - widest_met <= spacing + 1e-12
    assert widest_met < GLADMAN_CRITICAL <= closest_quiet
    assert abs(0.5 * (widest_met + closest_quiet) - GLADMAN_CRITICAL) <= spacing
    # The energy stays conserved to the leapfrog's level up to the encounter or the end.
    assert np.all(table["energy_error"] < 1e-3)


def test_scan_over_outer_semi_major_axis_finds_gladman_boundary(tmp_path):
    sample = TWO_PI / 10
    deltas, sampled = scan(tmp_path / "sampled", sample_every=sample, encounter_hill=2.0, stop_on=["encounter"])
    check_boundary(deltas, sampled)
    _, located = scan(tmp_path / "events", sample_every=TWO_PI / 2,
                      events={"encounter": "stop", "encounter_hill": 2.0})
    check_boundary(deltas, located)
    # Both detections see the same encounters: the located time lies within the sampling
    # interval before the first sample that saw the pair inside 2 Hill radii.
    met = np.isfinite(sampled["first_encounter_time"])
    t_sampled, t_located = sampled["first_encounter_time"][met], located["first_encounter_time"][met]
    assert np.all(t_located <= t_sampled) and np.all(t_located > t_sampled - sample - 1e-9)
