"""HDF5 output: the documented schema, read back with plain h5py and with lb.open_output."""
from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap

import h5py
import numpy as np
import pytest

import libration as lb
from libration.exceptions import FileFormatError, ValidationError
from libration.io import open_output
from libration.io.output import ELEMENT_NAMES, OutputWriter


def _system(n_test: int = 6) -> lb.System:
    rng = np.random.default_rng(11)
    mass = np.array([1.0, 1e-3, 3e-4] + [0.0] * n_test)
    radius_orbit = np.concatenate([[0.0, 1.0, 1.6], rng.uniform(2.0, 3.0, n_test)])
    phase = rng.uniform(0, 2 * np.pi, mass.size)
    pos = np.stack([radius_orbit * np.cos(phase), radius_orbit * np.sin(phase), np.zeros(mass.size)], axis=1)
    speed = np.where(radius_orbit > 0, 1.0 / np.sqrt(np.where(radius_orbit > 0, radius_orbit, 1.0)), 0.0)
    vel = np.stack([-speed * np.sin(phase), speed * np.cos(phase), 0.01 * rng.normal(size=mass.size)], axis=1)
    return lb.System(mass, pos, vel, names=["star", "p1", "p2"] + [f"tp{i}" for i in range(n_test)]).barycentric()


def test_schema_with_plain_h5py_and_round_trip(tmp_path):
    system = _system()
    p = lb.Propagator(system, "leapfrog", step=0.01)
    path = tmp_path / "out.h5"
    result = p.run(2.0, output=path, every=0.25, elements=True, scenario_text="# scenario text ✓\n")
    assert result.status == "done" and result.snapshots == 9
    with h5py.File(path, "r") as f:  # any HDF5 reader sees our documented layout
        assert f.attrs["format"] == "libration-output" and f.attrs["format_version"] == 1
        assert f.attrs["units"] == "nbody" and f.attrs["G"] == 1.0 and f.attrs["method"] == "leapfrog"
        assert f.attrs["step"] == 0.01 and f.attrs["every"] == 0.25 and bool(f.attrs["complete"])
        assert json.loads(f.attrs["options"]) == p.options
        assert f["scenario"][()].decode() == "# scenario text ✓\n"
        assert [x.decode() for x in f["bodies/names"][()]] == system.names
        k, n = 9, system.n
        assert f["snapshots/time"].shape == (k,) and f["snapshots/steps"].dtype == np.int64
        assert f["snapshots/position"].shape == (k, n, 3) and f["snapshots/velocity"].shape == (k, n, 3)
        assert f["snapshots/mass"].shape == (k, n)
        assert f["diagnostics/energy"].shape == (k,) and f["diagnostics/angular_momentum"].shape == (k, 3)
        for name in ELEMENT_NAMES:
            assert f[f"elements/{name}"].shape == (k, n)
        assert f["elements"].attrs["primary"] == "star"
        assert json.loads(f["events/log"][()]) == []
        np.testing.assert_array_equal(f["snapshots/time"][()], 0.25 * np.arange(9))
    out = open_output(path)
    assert len(out) == 9 and out.complete and out.units == "nbody" and out.G == 1.0
    assert out.names == system.names and out.scenario.startswith("# scenario")
    # Every stored field matches the propagator at the same time.
    check = lb.Propagator(system, "leapfrog", step=0.01)
    e0 = system.energy()
    l0 = system.angular_momentum()
    for i, t in enumerate(out.time):
        check.advance(t)
        s = check.system
        assert out.steps[i] == check.steps
        np.testing.assert_array_equal(out.position[i], s.position)
        np.testing.assert_array_equal(out.velocity[i], s.velocity)
        np.testing.assert_array_equal(out.mass[i], s.mass)
        assert out.energy[i] == s.energy()
        assert out.energy_error[i] == (s.energy() - e0) / abs(e0)
        # (summed over the massive bodies only, so equal to roundoff, not bitwise)
        np.testing.assert_allclose(out.angular_momentum[i], s.angular_momentum(), rtol=1e-13, atol=0)
        assert out.angular_momentum_error[i] == pytest.approx(
            np.linalg.norm(s.angular_momentum() - l0) / np.linalg.norm(l0), rel=1e-6, abs=1e-15)
    # Elements: star has none; a planet's semi-major axis is close to its orbit radius.
    assert np.isnan(out.elements["semi_major_axis"][:, 0]).all()
    assert abs(out.elements["semi_major_axis"][0, 1] - 1.0) < 0.05
    part = open_output(path, snapshots=slice(2, 8, 3))
    np.testing.assert_array_equal(part.time, out.time[2:8:3])
    np.testing.assert_array_equal(part.position, out.position[2:8:3])


def test_final_snapshot_off_the_grid_and_backward(tmp_path):
    system = _system(2)
    p = lb.Propagator(system, "leapfrog", step=-0.01)
    p.run(-1.1, output=tmp_path / "b.h5", every=0.5)
    out = open_output(tmp_path / "b.h5")
    np.testing.assert_array_equal(out.time, [0.0, -0.5, -1.0, -1.1])


def test_memory_bounded_buffer_flushes_in_chunks(tmp_path):
    writer = OutputWriter(str(tmp_path / "c.h5"), ["a", "b"], np.zeros(2), {"units": "nbody"})
    assert 1 <= writer.capacity <= 4096
    row = {"snapshots/time": 0.0, "snapshots/steps": 0, "snapshots/mass": [1.0, 0.0],
           "snapshots/position": np.zeros((2, 3)), "snapshots/velocity": np.zeros((2, 3)),
           "diagnostics/energy": -1.0, "diagnostics/energy_error": 0.0,
           "diagnostics/angular_momentum": np.zeros(3), "diagnostics/angular_momentum_error": 0.0}
    for i in range(writer.capacity + 3):
        row["snapshots/time"] = float(i)
        writer.append(row)
    # the full buffer went to the file (written by a background thread) and buffering started
    # again, so memory stays bounded; flush() waits until everything is on disk
    assert writer._buffered == 3 and writer.count == writer.capacity + 3
    writer.flush()
    assert writer.written == writer.capacity + 3 == writer.count
    writer.close()
    out = open_output(tmp_path / "c.h5")
    np.testing.assert_array_equal(out.time, np.arange(writer.capacity + 3.0))


def test_bodies_that_disappear_are_nan_in_their_column(tmp_path):
    writer = OutputWriter(str(tmp_path / "d.h5"), ["a", "b", "c"], np.zeros(3), {})
    row = {"snapshots/time": 1.0, "snapshots/steps": 1, "snapshots/mass": [1.0, 3.0],
           "snapshots/position": np.ones((2, 3)), "snapshots/velocity": np.ones((2, 3)),
           "diagnostics/energy": -1.0, "diagnostics/energy_error": 0.0,
           "diagnostics/angular_momentum": np.zeros(3), "diagnostics/angular_momentum_error": 0.0}
    writer.append(row, names=["a", "c"])
    writer.close()
    out = open_output(tmp_path / "d.h5")
    assert out.mass[0, 0] == 1.0 and np.isnan(out.mass[0, 1]) and out.mass[0, 2] == 3.0
    assert np.isnan(out.position[0, 1]).all()


def test_reopen_truncates_to_the_cursor(tmp_path):
    system = _system(2)
    path = tmp_path / "e.h5"
    lb.Propagator(system, "leapfrog", step=0.01).run(1.0, output=path, every=0.1)
    assert len(open_output(path)) == 11
    writer = OutputWriter.reopen(str(path), 4)
    writer.close()
    out = open_output(path)
    np.testing.assert_array_equal(out.time, 0.1 * np.arange(4))
    with pytest.raises(FileFormatError, match="holds 4 snapshots but the checkpoint expects at least 9"):
        OutputWriter.reopen(str(path), 9)


def test_file_of_a_killed_writer_is_readable(tmp_path):
    path = tmp_path / "killed.h5"
    script = textwrap.dedent(f"""
        import os, signal, numpy as np
        from libration.io.output import OutputWriter
        w = OutputWriter({str(path)!r}, ["a"], np.zeros(1), {{}})
        row = {{"snapshots/time": 0.0, "snapshots/steps": 0, "snapshots/mass": [1.0],
               "snapshots/position": np.zeros((1, 3)), "snapshots/velocity": np.zeros((1, 3)),
               "diagnostics/energy": -1.0, "diagnostics/energy_error": 0.0,
               "diagnostics/angular_momentum": np.zeros(3), "diagnostics/angular_momentum_error": 0.0}}
        for i in range(5):
            row["snapshots/time"] = float(i)
            w.append(row)
        w.flush()
        w.append(row)
        os.kill(os.getpid(), signal.SIGKILL)
    """)
    proc = subprocess.run([sys.executable, "-c", script], capture_output=True)
    assert proc.returncode == -9, proc.stderr.decode()
    with pytest.raises(OSError):  # plain HDF5 refuses: the writer never closed it
        h5py.File(path, "r")
    out = open_output(path)
    assert not out.complete
    np.testing.assert_array_equal(out.time, np.arange(5.0))
    writer = OutputWriter.reopen(str(path), 3)  # and a resume repairs it
    writer.close()
    with h5py.File(path, "r") as f:
        assert f["snapshots/time"].shape == (3,)


def test_bad_output_files_are_refused(tmp_path):
    with pytest.raises(FileFormatError, match="does not exist"):
        open_output(tmp_path / "none.h5")
    text = tmp_path / "text.h5"
    text.write_text("not hdf5")
    with pytest.raises(FileFormatError, match="not an HDF5 file"):
        open_output(text)
    foreign = tmp_path / "foreign.h5"
    with h5py.File(foreign, "w") as f:
        f["x"] = 1
    with pytest.raises(FileFormatError, match="not a libration output file"):
        open_output(foreign)
    good = tmp_path / "good.h5"
    lb.Propagator(_system(1), "leapfrog", step=0.01).run(0.1, output=good, every=0.05)
    newer = tmp_path / "newer.h5"
    newer.write_bytes(good.read_bytes())
    with h5py.File(newer, "r+") as f:
        f.attrs["format_version"] = 99
    with pytest.raises(FileFormatError, match="newer libration.*upgrade"):
        open_output(newer)
    truncated = tmp_path / "truncated.h5"
    truncated.write_bytes(good.read_bytes()[:1500])
    with pytest.raises(FileFormatError, match="damaged or truncated"):
        open_output(truncated)
    ckpt = tmp_path / "x.ckpt"
    lb.Propagator(_system(1), "leapfrog", step=0.01).save(ckpt)
    with pytest.raises(FileFormatError, match="is a libration checkpoint"):
        open_output(ckpt)


def test_run_argument_errors(tmp_path):
    p = lb.Propagator(_system(1), "leapfrog", step=0.01)
    with pytest.raises(ValidationError, match="every= .* required"):
        p.run(1.0, output=tmp_path / "x.h5")
    with pytest.raises(ValidationError, match="every must be a finite number > 0"):
        p.run(1.0, output=tmp_path / "x.h5", every=0.0)
    with pytest.raises(ValidationError, match="lies behind"):
        p.run(-1.0)
    with pytest.raises(ValidationError, match="checkpoint_steps must be an integer >= 1"):
        p.run(1.0, checkpoint=tmp_path / "x.ckpt", checkpoint_steps=0)
    with pytest.raises(ValidationError, match="different files"):
        p.run(1.0, output=tmp_path / "x", every=0.1, checkpoint=tmp_path / "x")
    with pytest.raises(ValidationError, match="elements_primary must name a body"):
        p.run(1.0, output=tmp_path / "x.h5", every=0.1, elements=True, elements_primary="nobody")
    assert p.time == 0.0 and not os.path.exists(tmp_path / "x.h5")


def test_command_line_run_info_plot_resume(tmp_path, capsys):
    from libration.cli import main

    scenario = tmp_path / "s.toml"
    assert main(["demo", "--write", str(scenario)]) == 0
    assert main(["demo", "--write", str(scenario)]) == 2  # never overwrites
    text = scenario.read_text().replace("count = 3000", "count = 40").replace(
        "until = 36525.0", "until = 730.5").replace("every = 365.25", "every = 73.05")
    scenario.write_text(text)
    assert main(["run", str(scenario), "--quiet"]) == 0
    out, ckpt = tmp_path / "calyra.h5", tmp_path / "calyra.ckpt"
    data = open_output(out)
    assert len(data) == 11 and data.complete and data.scenario == text and data.elements is not None
    assert main(["run", str(scenario), "--quiet"]) == 2  # the checkpoint of that run exists
    assert "libration resume" in capsys.readouterr().err
    assert main(["resume", str(ckpt), "--until", "876.6", "--quiet"]) == 0
    again = open_output(out)
    assert len(again) == 13 and again.time[-1] == 876.6
    np.testing.assert_array_equal(again.position[:11], data.position)
    capsys.readouterr()
    assert main(["info", str(out)]) == 0 and main(["info", str(ckpt)]) == 0
    printed = capsys.readouterr().out
    assert "libration output" in printed and "13 from time 0.0 to 876.6" in printed
    assert "libration checkpoint" in printed and "continue with libration resume" in printed
    pytest.importorskip("matplotlib")
    assert main(["plot", str(out), "-o", str(tmp_path / "p.png")]) == 0
    assert (tmp_path / "p.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    (tmp_path / "junk").write_text("junk")
    assert main(["info", str(tmp_path / "junk")]) == 2
    assert "neither a libration output file" in capsys.readouterr().err


def test_run_with_events_logs_them_and_keeps_columns(tmp_path):
    # Two planets fall into the star (merged) and a particle escapes (stop): a quick event storm.
    system = lb.System([1.0, 1e-3, 1e-3, 0.0], [[0, 0, 0], [1, 0, 0], [-1, 0, 0], [3, 0, 0]],
                       [[0, 0, 0], [0, 1, 0], [0, 1, 0], [0, 2, 0]],
                       radius=[0.005, 0.05, 0.05, 0.0]).barycentric()
    p = lb.Propagator(system, "leapfrog", step=0.001,
                      events={"collision": "merge", "escape": "stop", "escape_distance": 20.0})
    result = p.run(200.0, output=tmp_path / "ev.h5", every=1.0)
    assert result.status == "stopped" and "escape" in result.message and p.time < 200.0
    out = open_output(tmp_path / "ev.h5")
    assert out.complete and out.names == ["body0", "body1", "body2", "body3"]
    assert out.time[-1] == p.time and np.all(np.diff(out.time) > 0)
    assert [e["kind"] for e in out.event_log] == [e["kind"] for e in p.event_log]
    assert np.isnan(out.mass[-1, 1:3]).all() and out.mass[-1, 0] == pytest.approx(1.002)
    assert not np.isnan(out.mass[0]).any()


def test_flipped_byte_in_the_data_is_refused(tmp_path):
    path = tmp_path / "flip.h5"
    lb.Propagator(_system(3), "leapfrog", step=0.01).run(1.0, output=path, every=0.1)
    with h5py.File(path, "r") as f:
        offset = f["snapshots/position"].id.get_chunk_info(0).byte_offset
    data = bytearray(path.read_bytes())
    data[offset + 40] ^= 0x01
    path.write_bytes(bytes(data))
    with pytest.raises(FileFormatError, match="damaged"):
        open_output(path)
    with pytest.raises(FileFormatError, match="damaged and cannot be continued"):
        OutputWriter.reopen(str(path), 5)
    assert not os.path.exists(str(path) + ".rebuild")


def test_moved_run_resumes_from_its_new_directory(tmp_path):
    first, second = tmp_path / "cluster", tmp_path / "laptop"
    first.mkdir()
    p = lb.Propagator(_system(2), "leapfrog", step=0.01)
    p.run(0.5, output=first / "m.h5", every=0.1, checkpoint=first / "m.ckpt")
    first.rename(second)
    result = lb.io.resume(second / "m.ckpt", until=1.0)
    assert result.output == str(second / "m.h5") and result.checkpoint == str(second / "m.ckpt")
    assert len(open_output(second / "m.h5")) == 11


def test_plot_without_matplotlib_says_how_to_install(tmp_path, monkeypatch, capsys):
    from libration.cli import main

    path = tmp_path / "x.h5"
    lb.Propagator(_system(1), "leapfrog", step=0.01).run(0.1, output=path, every=0.05)
    monkeypatch.setitem(sys.modules, "matplotlib", None)  # as if the extra were not installed
    assert main(["plot", str(path)]) == 2
    assert "pip install 'libration[plot]'" in capsys.readouterr().err


def test_progress_bar_on_a_terminal_only(tmp_path, monkeypatch, capsys):
    import io

    p = lb.Propagator(_system(2), "leapfrog", step=0.01)
    p.run(0.5, output=tmp_path / "q.h5", every=0.1, progress=True)
    assert capsys.readouterr().err == ""  # not a terminal (a log file): quiet

    class Terminal(io.StringIO):
        def isatty(self) -> bool:
            return True

    screen = Terminal()
    monkeypatch.setattr(sys, "stderr", screen)
    p.run(1.0, output=tmp_path / "r.h5", every=0.1, progress=True)
    text = screen.getvalue()
    assert "100%" in text and "steps/s" in text and "dE/E" in text and "time unit" in text


def test_random_damage_is_refused_or_harmless(tmp_path):
    """Flipped bytes anywhere (half of them in the metadata at the start of the file): the
    reader refuses the file or returns exactly the original data, never something else."""
    import random

    path = tmp_path / "fuzz.h5"
    system = _system(2)
    lb.Propagator(system, "leapfrog", step=0.01).run(0.5, output=path, every=0.1, elements=True,
                                                     scenario_text="name = 'fuzz'")
    good = path.read_bytes()
    reference = open_output(path)
    rng = random.Random(20261202)
    damaged = tmp_path / "damaged.h5"
    outcomes = {"refused": 0, "same": 0}
    for _ in range(150):
        data = bytearray(good)
        for _ in range(rng.randint(1, 3)):
            i = rng.randrange(len(data)) if rng.random() < 0.5 else rng.randrange(12_000)
            data[i] ^= rng.randint(1, 255)
        damaged.write_bytes(bytes(data))
        try:
            out = open_output(damaged)
        except FileFormatError:
            outcomes["refused"] += 1
            continue
        for name in ("time", "steps", "mass", "position", "velocity", "energy", "energy_error",
                     "angular_momentum", "angular_momentum_error", "radius"):
            assert np.array_equal(getattr(out, name), getattr(reference, name), equal_nan=True), name
        for name in reference.elements:
            assert np.array_equal(out.elements[name], reference.elements[name], equal_nan=True)
        assert (out.names, out.scenario, out.event_log, out.complete) == \
               (reference.names, reference.scenario, reference.event_log, reference.complete)
        assert repr(out.attrs) == repr(reference.attrs)
        outcomes["same"] += 1
    assert outcomes["refused"] > 50  # the damage was real
