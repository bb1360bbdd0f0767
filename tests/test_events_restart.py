"""Event detector memory survives a checkpoint round trip (no repeated or lost events)."""
import numpy as np
import pytest

import libration as lb


@pytest.mark.parametrize("method, kw", [("leapfrog", {"step": 0.01}), ("bulirsch-stoer", {"tolerance": 1e-10})])
def test_ongoing_escape_is_not_reported_again_after_restart(method, kw):
    # A star and a light body on a hyperbolic path (G = 1): it crosses r = 5 once, near t = 3.
    system = lb.System([1.0, 1e-6], [[0, 0, 0], [1.0, 0, 0]], [[0, 0, 0], [0, 2.0, 0]])
    events = {"escape": "record", "escape_distance": 5.0}
    straight = lb.Propagator(system, method, events=events, **kw)
    straight.advance(20.0)
    assert [e["kind"] for e in straight.event_log] == ["escape"]

    first = lb.Propagator(system, method, events=events, **kw)
    first.advance(8.0)  # after the crossing: the escape is ongoing
    assert len(first.event_log) == 1
    resumed = lb.Propagator.from_memory(first.to_memory())
    resumed.advance(20.0)
    assert [e["kind"] for e in resumed.event_log] == ["escape"]
    assert resumed.event_log[0]["time"] == straight.event_log[0]["time"]
    np.testing.assert_array_equal(resumed.system.position, straight.system.position)
