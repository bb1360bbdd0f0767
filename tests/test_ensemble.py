"""Ensembles: determinism across executors, durability (killed workers, failures), outputs."""
from __future__ import annotations

import json
import logging
import math
import multiprocessing
import os
import signal
import threading
import time
from concurrent.futures import ProcessPoolExecutor

import numpy as np
import pytest

import libration as lb
from libration.ensemble import Ensemble, apply_parameters, ensemble_options

TWO_PI = 2.0 * math.pi


def three_body() -> lb.System:
    # An invented star with two light planets (nbody units: G = 1, inner period 2 pi).
    return lb.System.from_elements(1.0, [4e-5, 2e-5], [1.0, 1.5], [0.01, 0.02], [0.0, 0.01], [0.0, 1.0],
                                   [0.0, 2.0], [0.0, 2.5], units="nbody", names=["star", "inner", "outer"])


def small_grid(directory, **kwargs) -> Ensemble:
    settings = dict(until=20 * TWO_PI, method="yoshida4", step=TWO_PI / 50, sample_every=TWO_PI / 5,
                    grid={"outer.semi_major_axis": [1.3, 1.4, 1.5, 1.6],
                          "outer.eccentricity": [0.0, 0.05, 0.1, 0.15]})
    settings.update(kwargs)
    return Ensemble(three_body(), directory, **settings)


def comparable(table: np.ndarray) -> np.ndarray:
    """The results without the wall-clock column (the one field allowed to differ)."""
    names = [n for n in table.dtype.names if n != "wall_seconds"]
    return table[names]


def assert_tables_equal(ta: np.ndarray, tb: np.ndarray) -> None:
    ta, tb = comparable(ta), comparable(tb)
    assert ta.dtype == tb.dtype
    for name in ta.dtype.names:
        if ta.dtype[name].kind == "f":
            # Bit patterns, so that nan == nan and -0.0 != 0.0.
            assert np.array_equal(ta[name].view(np.uint64), tb[name].view(np.uint64)), name
        else:
            assert np.array_equal(ta[name], tb[name]), name


def assert_bitwise_equal(a: Ensemble, b: Ensemble) -> None:
    assert_tables_equal(a.results(), b.results())
    for i in range(len(a)):
        sa, sb = a.final_system(i), b.final_system(i)
        for field in ("mass", "position", "velocity"):
            assert np.array_equal(getattr(sa, field).view(np.uint64), getattr(sb, field).view(np.uint64))


def forkserver_pool(workers: int) -> ProcessPoolExecutor:
    methods = multiprocessing.get_all_start_methods()
    context = multiprocessing.get_context("forkserver" if "forkserver" in methods else "spawn")
    return ProcessPoolExecutor(max_workers=workers, mp_context=context)


# ------------------------------------------------------------------------------- determinism
def test_sequential_pool_and_dask_give_identical_members(tmp_path):
    distributed = pytest.importorskip("distributed")
    sequential = small_grid(tmp_path / "sequential")
    table = sequential.run("sequential")
    assert len(table) == 16 and set(table["status"]) == {"finished"}
    assert np.all(table["time"] == 20 * TWO_PI)
    pooled = small_grid(tmp_path / "pool")
    pooled.run(workers=2)
    assert_bitwise_equal(sequential, pooled)

    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                       dashboard_address="127.0.0.1:0", silence_logs=logging.ERROR)
    try:
        with distributed.Client(cluster) as client:
            on_dask = small_grid(tmp_path / "dask")
            on_dask.run(client)
            processes = {json.load(open(os.path.join(on_dask.member_directory(i), "summary.json")))["process"]
                         for i in range(16)}
            assert len(processes) == 2 and os.getpid() not in {int(p.rsplit(":", 1)[1]) for p in processes}
            assert_bitwise_equal(sequential, on_dask)

            # A lost Dask worker: both worker processes are killed while member 0 runs; the
            # nannies restart them, Dask reschedules the members and they resume from their
            # checkpoints within the same run, ending with the bits of an uninterrupted run.
            reference = small_grid(tmp_path / "reference", **LONG_MEMBERS)
            reference.run("sequential")
            victim = small_grid(tmp_path / "dask-killed", **LONG_MEMBERS)
            pids = list(client.run(os.getpid).values())
            killed = kill_when_checkpointed(victim.member_directory(0), lambda: pids)
            victim.run(client)
            killed.join()
            assert killed.pids, "the member finished before its worker could be killed"
            assert set(victim.results()["status"]) == {"finished"}
            summary = json.load(open(os.path.join(victim.member_directory(0), "summary.json")))
            assert summary["resumed_at"] is not None
            assert_bitwise_equal(reference, victim)
            assert_same_output(reference, victim, 0)
    finally:
        cluster.close()


LONG_MEMBERS = dict(grid={"outer.semi_major_axis": [1.4, 1.5]}, until=300 * TWO_PI, step=TWO_PI / 100,
                    sample_every=TWO_PI / 10, checkpoint_interval=0.02, output_every=TWO_PI)


def assert_same_output(a: Ensemble, b: Ensemble, index: int, count: int | None = 301) -> None:
    """The members' HDF5 snapshot files hold the same data, bit for bit, and are complete."""
    from libration.io import open_output

    fa = open_output(os.path.join(a.member_directory(index), "output.h5"))
    fb = open_output(os.path.join(b.member_directory(index), "output.h5"))
    assert fa.complete and fb.complete
    assert len(fa) == len(fb) and (count is None or len(fa) == count)
    pairs = [(fa.time, fb.time), (fa.position, fb.position), (fa.velocity, fb.velocity),
             (fa.energy_error, fb.energy_error), (fa.elements["eccentricity"], fb.elements["eccentricity"])]
    for x, y in pairs:
        assert np.array_equal(x.view(np.uint64), y.view(np.uint64))


def kill_when_checkpointed(member: str, pids) -> threading.Thread:
    """Start a thread that SIGKILLs the processes ``pids()`` once ``member`` has a checkpoint
    but no summary; the thread's ``pids`` attribute lists what it killed."""
    def watch():
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and not thread.pids:
            if (os.path.exists(os.path.join(member, "state.ckpt"))
                    and not os.path.exists(os.path.join(member, "summary.json"))):
                for pid in list(pids()):
                    os.kill(pid, signal.SIGKILL)
                    thread.pids.append(pid)
            time.sleep(0.002)

    thread = threading.Thread(target=watch)
    thread.pids = []
    thread.start()
    return thread


def test_member_order_does_not_matter(tmp_path):
    forward = small_grid(tmp_path / "forward", grid={"outer.semi_major_axis": [1.3, 1.6]}, until=5 * TWO_PI)
    backward = small_grid(tmp_path / "backward", grid={"outer.semi_major_axis": [1.6, 1.3]}, until=5 * TWO_PI)
    ta, tb = forward.run("sequential"), backward.run("sequential")
    assert np.array_equal(comparable(ta)[::-1]["energy_error"], comparable(tb)["energy_error"])
    assert np.array_equal(forward.final_system(0).position, backward.final_system(1).position)


def test_perturbations_depend_on_seed_and_index_only(tmp_path):
    base = three_body()
    spread = {"outer.mean_anomaly": 1e-3, "inner.x": 1e-9}
    four = Ensemble(base, tmp_path / "a", until=1.0, step=0.01, perturb=spread, count=4, seed=7)
    eight = Ensemble(base, tmp_path / "b", until=1.0, step=0.01, perturb=spread, count=8, seed=7)
    other = Ensemble(base, tmp_path / "c", until=1.0, step=0.01, perturb=spread, count=4, seed=8)
    assert four.parameter_sets == eight.parameter_sets[:4]
    assert four.parameter_sets != other.parameter_sets
    values = np.array([p["outer.mean_anomaly"] for p in eight.parameter_sets])
    assert np.all(np.abs(values - 2.5) < 6e-3) and np.std(values) > 1e-4


# ------------------------------------------------------------------------------- durability
def test_killed_worker_leaves_member_resumable(tmp_path):
    reference = small_grid(tmp_path / "reference", **LONG_MEMBERS)
    reference.run("sequential")

    victim = small_grid(tmp_path / "killed", **LONG_MEMBERS)
    member = victim.member_directory(0)
    pool = forkserver_pool(1)
    killer = kill_when_checkpointed(member, lambda: pool._processes)  # the pool's worker processes
    try:
        with pytest.warns(RuntimeWarning, match="interrupted"):
            victim.run(pool)
    finally:
        killer.join()
        pool.shutdown(wait=True)
    assert killer.pids, "the worker finished before it could be killed"
    assert victim.status().get("interrupted", 0) >= 1
    manifest = json.load(open(victim.manifest_path))
    assert manifest["members"][0]["status"] == "interrupted"

    resumed = small_grid(tmp_path / "killed", **LONG_MEMBERS)  # the same script run again
    table = resumed.run(workers=1)
    assert set(table["status"]) == {"finished"}
    summary = json.load(open(os.path.join(member, "summary.json")))
    assert summary["resumed_at"] is not None and 0 < summary["resumed_at"] < 300 * TWO_PI
    assert_bitwise_equal(reference, resumed)
    assert_same_output(reference, resumed, 0)  # t = 0 and one snapshot per orbit to the end


def test_failing_member_is_reported_and_others_complete(tmp_path):
    ensemble = small_grid(tmp_path / "e", grid={"outer.eccentricity": [0.0, 0.05, 1.5, 0.1]}, until=5 * TWO_PI)
    table = ensemble.run("sequential")
    assert list(table["status"]) == ["finished", "finished", "failed", "finished"]
    assert "eccentricity" in table["message"][2] and "ValidationError" in table["message"][2]
    assert np.all(table["time"][[0, 1, 3]] == 5 * TWO_PI) and math.isnan(table["time"][2])
    manifest = json.load(open(ensemble.manifest_path))
    assert manifest["counts"] == {"finished": 3, "failed": 1}
    assert "eccentricity" in manifest["members"][2]["message"]


def test_rerun_skips_finished_members(tmp_path):
    ensemble = small_grid(tmp_path / "e", grid={"outer.semi_major_axis": [1.4, 1.5]}, until=5 * TWO_PI)
    ensemble.run("sequential")
    path = os.path.join(ensemble.member_directory(1), "summary.json")
    before = os.stat(path).st_mtime_ns
    calls = []
    again = small_grid(tmp_path / "e", grid={"outer.semi_major_axis": [1.4, 1.5]}, until=5 * TWO_PI)
    again.run("sequential", progress=lambda done, total: calls.append((done, total)))
    assert os.stat(path).st_mtime_ns == before
    assert calls == [(2, 2)]


def test_directory_of_another_ensemble_is_refused(tmp_path):
    small_grid(tmp_path / "e", grid={"outer.semi_major_axis": [1.4]}, until=TWO_PI).run("sequential")
    other = small_grid(tmp_path / "e", grid={"outer.semi_major_axis": [1.45]}, until=TWO_PI)
    with pytest.raises(lb.ValidationError, match="different ensemble"):
        other.run("sequential")


# ---------------------------------------------------------------------------------- outputs
def test_results_files_and_reopening(tmp_path):
    ensemble = small_grid(tmp_path / "e", grid={"outer.semi_major_axis": [1.4, 1.5],
                                               "outer.eccentricity": [0.0, 0.1]}, until=3 * TWO_PI)
    table = ensemble.run("sequential")
    with open(os.path.join(ensemble.directory, "summary.csv")) as fh:
        header = fh.readline().strip().split(",")
        first = fh.readline().strip().split(",")
    assert header[:3] == ["index", "outer.semi_major_axis", "outer.eccentricity"]
    column = header.index("energy_error")
    assert float(first[column]) == table["energy_error"][0]  # written exactly
    h5py = pytest.importorskip("h5py")
    assert os.path.exists(os.path.join(ensemble.directory, "summary.h5"))  # written by run()
    with h5py.File(ensemble.to_hdf5(), "r") as fh:
        stored = fh["summary"][()]
    assert np.array_equal(stored["energy_error"], table["energy_error"])
    assert stored["status"][0] == b"finished"
    reopened = Ensemble.open(ensemble.directory)
    assert reopened.fingerprint == ensemble.fingerprint
    assert_tables_equal(reopened.results(), table)
    pandas = pytest.importorskip("pandas")
    frame = ensemble.dataframe()
    assert isinstance(frame, pandas.DataFrame) and len(frame) == 4
    pytest.importorskip("matplotlib")
    png = ensemble.plot_map("outer.semi_major_axis", "outer.eccentricity", value="outer.max_eccentricity")
    with open(png, "rb") as fh:
        assert fh.read(8) == b"\x89PNG\r\n\x1a\n"
    # What `libration plot` is given: the directory, its manifest or its summary.csv.
    from libration.ensemble import plot_cli

    drawn = plot_cli(os.path.join(ensemble.directory, "summary.csv"), tmp_path / "map.png")
    assert drawn == str(tmp_path / "map.png") and os.path.getsize(drawn) > 1000
    assert plot_cli(tmp_path / "nothing-here") is None
    with pytest.raises(lb.ValidationError, match="not a column"):
        ensemble.plot_map("outer.semi_major_axis", None, value="no_such_column")


def test_apply_parameters_sets_elements_mass_and_coordinates():
    base = three_body()
    changed = apply_parameters(base, {"outer.semi_major_axis": 1.7, "outer.eccentricity": 0.2, "inner.mass": 1e-4,
                                      "2.z": 0.05})
    elements = changed.elements(frame="jacobi")
    assert changed.mass[1] == 1e-4
    assert changed.position[2, 2] == 0.05
    before = base.elements(frame="jacobi")
    assert abs(before.semi_major_axis[0] - 1.0) < 1e-12
    changed_no_z = apply_parameters(base, {"outer.semi_major_axis": 1.7, "outer.eccentricity": 0.2})
    el = changed_no_z.elements(frame="jacobi")
    assert abs(el.semi_major_axis[1] - 1.7) < 1e-12 and abs(el.eccentricity[1] - 0.2) < 1e-12
    assert abs(el.semi_major_axis[0] - before.semi_major_axis[0]) < 1e-12
    assert elements.semi_major_axis.shape == (2,)
    with pytest.raises(lb.ValidationError, match="no body named"):
        apply_parameters(base, {"pluto.mass": 1.0})
    with pytest.raises(lb.ValidationError, match="field one of"):
        apply_parameters(base, {"outer.colour": 1.0})


def test_misuse_raises_before_anything_runs(tmp_path):
    with pytest.raises(lb.ValidationError, match="exactly one of"):
        Ensemble(three_body(), tmp_path, until=1.0, step=0.1)
    with pytest.raises(lb.MethodError):
        Ensemble(three_body(), tmp_path, until=1.0, method="no-such-method", grid={"outer.mass": [1e-5]})
    with pytest.raises(lb.ValidationError, match="stop_on"):
        Ensemble(three_body(), tmp_path, until=1.0, step=0.1, grid={"outer.mass": [1e-5]}, stop_on=["boredom"])
    with pytest.raises(lb.ValidationError, match="no body named"):
        Ensemble(three_body(), tmp_path, until=1.0, step=0.1, grid={"pluto.mass": [1e-5]})


def test_ensemble_table_of_a_scenario():
    options = ensemble_options({"grid": {"b.semi_major_axis": {"start": 1.0, "stop": 2.0, "count": 5},
                                         "b.eccentricity": [0.0, 0.1]}, "stop_on": ["encounter"]})
    assert options["grid"]["b.semi_major_axis"] == [1.0, 1.25, 1.5, 1.75, 2.0]
    assert options["stop_on"] == ["encounter"]
    with pytest.raises(lb.ScenarioError, match="unknown key"):
        ensemble_options({"gird": {}})
    with pytest.raises(lb.ScenarioError, match="count"):
        ensemble_options({"grid": {"b.mass": {"start": 0, "stop": 1, "count": 0}}})


SCENARIO = """
[scenario]
name = "two invented planets"
units = "nbody"
angle_unit = "degree"

[[body]]
name = "star"
mass = 1.0
position = [0.0, 0.0, 0.0]
velocity = [0.0, 0.0, 0.0]

[[body]]
name = "inner"
mass = 5e-5
primary = "star"
semi_major_axis = 1.0

[ensemble]
directory = "scan"
sample_every = 0.5
stop_on = ["encounter"]
encounter_hill = 2.0

[ensemble.grid]
"outer.semi_major_axis" = { start = 1.1, stop = 1.3, count = 3 }
"outer.mean_anomaly" = [0.0, 90.0]

[[body]]
name = "outer"
mass = 3e-5
primary = "star"
semi_major_axis = 1.2
mean_anomaly = 115.0

[integrator]
method = "leapfrog"
step = 0.0628

[run]
until = 30.0
"""


def test_command_line_runs_a_scenario_ensemble_and_draws_its_map(tmp_path, capsys):
    from libration.cli import main
    from libration.ensemble import ensemble_from_scenario

    path = tmp_path / "scan.toml"
    path.write_text(SCENARIO)
    ensemble, _ = ensemble_from_scenario(path)
    assert ensemble.directory == str(tmp_path / "scan") and len(ensemble) == 6
    # Angles in the scenario's unit (degrees), elements about each body's primary.
    assert ensemble.parameter_sets[1] == {"outer.semi_major_axis": 1.1, "outer.mean_anomaly": math.pi / 2}
    assert ensemble.settings["method"] == "leapfrog" and ensemble.settings["until"] == 30.0
    assert main(["ensemble", str(path), "--sequential", "--no-progress", "--plot"]) == 0
    out = capsys.readouterr().out
    assert "finished" in out and "map:" in out
    table = Ensemble.open(tmp_path / "scan").results()
    assert set(table["status"]) <= {"finished", "stopped"} and len(table) == 6
    assert (tmp_path / "scan" / "map_first_encounter_time.png").exists()
    # `libration plot` draws an ensemble directory's map too.
    png = tmp_path / "energy.png"
    assert main(["plot", str(tmp_path / "scan"), "-o", str(png), "--value", "energy_error"]) == 0
    assert png.read_bytes()[:4] == b"\x89PNG"
    # Running again resumes nothing and succeeds; a missing [ensemble] table is a usage error.
    assert main(["ensemble", str(tmp_path / "scan"), "--sequential", "--no-progress"]) == 0
    plain = tmp_path / "plain.toml"
    plain.write_text(SCENARIO.split("[ensemble]")[0] + SCENARIO.split('mean_anomaly" = [0.0, 90.0]')[1])
    assert main(["ensemble", str(plain), "--sequential", "--no-progress"]) == 2
    assert "no [ensemble] table" in capsys.readouterr().err


def test_demo_ensemble_from_the_command_line(tmp_path, capsys):
    from libration.cli import main

    assert main(["ensemble", "--demo", "--directory", str(tmp_path / "demo"), "--sequential", "--no-progress"]) == 0
    table = Ensemble.open(tmp_path / "demo").results()
    assert len(table) == 8 and set(table["status"]) == {"finished"}
    assert np.all(table["energy_error"] < 1e-6)
    # Perturbed members really differ, and the planets stay bound and far apart.
    assert np.unique(table["Calyra c.final_semi_major_axis"]).size == 8
    assert np.all(table["min_separation_hill"] > 3.0)


def build_from_parameters(parameters: dict) -> lb.System:
    """A base function: the outer planet's mass and distance from the member's parameters."""
    return lb.System.from_elements(1.0, [4e-5, parameters["outer_mass"]], [1.0, parameters["outer_distance"]],
                                   [0.0, 0.0], [0.0, 0.0], [0.0, 0.0], [0.0, 0.0], [0.0, 2.0], units="nbody",
                                   names=["star", "inner", "outer"])


def test_a_base_function_builds_each_member(tmp_path):
    members = [{"outer_mass": 1e-5, "outer_distance": 1.4}, {"outer_mass": 3e-5, "outer_distance": 1.6}]
    ensemble = Ensemble(build_from_parameters, tmp_path / "f", until=2 * TWO_PI, step=TWO_PI / 50,
                        members=members)
    table = ensemble.run("sequential")
    assert list(table["outer_mass"]) == [1e-5, 3e-5] and set(table["status"]) == {"finished"}
    assert ensemble.final_system(1).mass[2] == 3e-5
    assert abs(table["outer.final_semi_major_axis"][1] - 1.6) < 1e-2
    reopened = Ensemble.open(tmp_path / "f")  # the function is found again by its import path
    assert reopened.fingerprint == ensemble.fingerprint
    with pytest.raises(lb.ValidationError, match="module-level function"):
        Ensemble(lambda p: three_body(), tmp_path / "g", until=1.0, step=0.1, members=[{"x": 1.0}])


@pytest.mark.parametrize("method, settings", [("yoshida4", {"step": TWO_PI / 50}),
                                              ("wisdom-holman", {"step": TWO_PI / 40}),
                                              ("bulirsch-stoer", {"tolerance": 1e-10})],
                         ids=["yoshida4", "wisdom-holman", "bulirsch-stoer"])
def test_resumed_member_matches_uninterrupted_for_each_method(tmp_path, method, settings):
    import copy

    from libration.ensemble import run_member

    definition = dict(until=10 * TWO_PI, method=method, grid={"outer.semi_major_axis": [1.45]},
                      sample_every=TWO_PI / 7, output_every=TWO_PI, **settings)
    reference = Ensemble(three_body(), tmp_path / "reference", **definition)
    reference.run("sequential")
    interrupted = Ensemble(three_body(), tmp_path / "interrupted", **definition)
    interrupted._prepare_directory()
    # Run member 0 only part of the way (as a worker lost after a checkpoint would have),
    # then let the ensemble resume it from that checkpoint.
    # Stop at sample 28, which is also an output sample (7 samples per orbit), exactly
    # where an uninterrupted run samples it (on the step grid for fixed steps).
    task = copy.deepcopy(interrupted.tasks()[0])
    if "step" in settings:
        stride = round((TWO_PI / 7) / settings["step"])
        stop = 0.0 + (28 * stride) * settings["step"]
    else:
        stop = 0.0 + 28 * (TWO_PI / 7)
    task["settings"]["until"] = stop
    assert run_member(task)["status"] == "finished"
    os.remove(os.path.join(interrupted.member_directory(0), "summary.json"))
    assert interrupted.status() == {"interrupted": 1}
    table = interrupted.run("sequential")
    assert table["status"][0] == "finished"
    summary = json.load(open(os.path.join(interrupted.member_directory(0), "summary.json")))
    assert summary["resumed_at"] == stop
    assert_bitwise_equal(reference, interrupted)
    with open(os.path.join(reference.member_directory(0), "series.csv")) as a, \
            open(os.path.join(interrupted.member_directory(0), "series.csv")) as b:
        assert a.read() == b.read()
    assert_same_output(reference, interrupted, 0, count=None)


def test_series_is_thinned_to_a_bounded_length(tmp_path, monkeypatch):
    import libration.ensemble as module

    monkeypatch.setattr(module, "_SERIES_ROWS", 10)
    ensemble = small_grid(tmp_path / "e", grid={"outer.semi_major_axis": [1.45]}, until=7 * TWO_PI,
                          sample_every=TWO_PI / 20)  # 140 samples
    table = ensemble.run("sequential")
    with open(os.path.join(ensemble.member_directory(0), "series.csv")) as fh:
        rows = fh.read().strip().splitlines()
    times = [float(row.split(",")[0]) for row in rows[1:]]
    assert rows[0].startswith("time,inner.semi_major_axis,outer.semi_major_axis,inner.eccentricity")
    assert 10 <= len(times) <= 12 and times[0] == 0.0 and times[-1] == 7 * TWO_PI
    assert float(rows[-1].split(",")[2]) == table["outer.final_semi_major_axis"][0]


def test_event_columns_from_the_propagators_event_log(tmp_path):
    # Planets with large radii (invented) on close orbits: one member collides (and stops,
    # as asked), the others do not; the encounter events are recorded along the way.
    base = lb.System.from_elements(1.0, [4e-5, 2e-5], [1.0, 1.05], [0.0, 0.0], [0.0, 0.0], [0.0, 0.0],
                                   [0.0, 0.0], [0.0, 0.3], units="nbody", names=["star", "inner", "outer"],
                                   radius=[0.005, 0.01, 0.01])
    ensemble = Ensemble(base, tmp_path / "e", until=50 * TWO_PI, step=TWO_PI / 200, sample_every=TWO_PI / 10,
                        grid={"outer.semi_major_axis": [1.05, 1.5]},
                        events={"collision": "stop", "encounter": "record", "encounter_hill": 1.0})
    table = ensemble.run("sequential")
    collided, quiet = table
    assert collided["status"] == "stopped" and "collision" in collided["message"]
    # The located collision time lies within the step at whose end the member stopped.
    assert collided["first_encounter_time"] < collided["first_collision_time"] <= collided["time"]
    assert collided["time"] - collided["first_collision_time"] < TWO_PI / 200
    final = ensemble.final_system(0)
    assert np.linalg.norm(final.position[1] - final.position[2]) < 0.02  # the surfaces overlap
    assert quiet["status"] == "finished" and math.isnan(quiet["first_collision_time"])
    assert math.isnan(quiet["first_encounter_time"]) and quiet["min_separation_hill"] > 5


def test_one_run_at_a_time_per_directory(tmp_path):
    from libration.ensemble import _DirectoryLock

    ensemble = small_grid(tmp_path / "e", grid={"outer.semi_major_axis": [1.45]}, until=TWO_PI)
    ensemble._prepare_directory()
    with _DirectoryLock(os.path.join(ensemble.directory, "run.lock")):
        with pytest.raises(lb.ValidationError, match="is being run by process"):
            ensemble.run("sequential")
    assert set(ensemble.run("sequential")["status"]) == {"finished"}
