"""Kill-and-resume: a run SIGKILLed at random moments (while stepping, while writing output, and
at every stage of a checkpoint write), then resumed, ends bit for bit like an uninterrupted run,
with the same output data -- for every registered method."""
from __future__ import annotations

import os
import random
import signal
import subprocess
import sys
import textwrap
import time

import numpy as np
import pytest

import libration as lb
from libration.io import checkpoint as ck
from libration.io import open_output, resume

# Shared by this process and the children: the system and the run settings of one method.
SETUP = textwrap.dedent("""
    import numpy as np
    import libration as lb

    def make(method):
        rng = np.random.default_rng(42)
        n_massive, n_test = 3, 8
        radius = np.concatenate([[0.0, 1.0, 1.7], rng.uniform(2.2, 3.0, n_test)])
        phase = rng.uniform(0.0, 2.0 * np.pi, radius.size)
        position = np.stack([radius * np.cos(phase), radius * np.sin(phase),
                             0.02 * rng.normal(size=radius.size)], axis=1)
        speed = np.zeros(radius.size)
        speed[1:] = 1.0 / np.sqrt(radius[1:])
        velocity = np.stack([-speed * np.sin(phase), speed * np.cos(phase),
                             0.01 * rng.normal(size=radius.size)], axis=1)
        mass = np.array([1.0, 1e-3, 4e-4] + [0.0] * n_test)
        system = lb.System(mass, position, velocity).barycentric()
        if lb.METHODS[method].adaptive:
            return lb.Propagator(system, method, tolerance=1e-9)
        return lb.Propagator(system, method, step=0.0021)

    def run(p, until, out, ckpt):
        return p.run(until, output=out, every=until / 1500.5, checkpoint=ckpt,
                     checkpoint_interval=0.02, elements=True, scenario_text="# test")
""")

CHILD = SETUP + textwrap.dedent("""
    import os, signal, sys
    from libration.io import checkpoint as ck, resume

    mode, method, until, out, ckpt, stage, nth = sys.argv[1:8]
    if stage != "none":
        # SIGKILL ourselves at one stage of the nth checkpoint write.
        die = lambda: os.kill(os.getpid(), signal.SIGKILL)
        state = {"count": 0, "armed": False}
        real_write = ck.write

        def write(*args, **kwargs):
            state["count"] += 1
            state["armed"] = state["count"] == int(nth)
            return real_write(*args, **kwargs)

        class Handle:
            def __init__(self, fh):
                self.fh, self.pieces = fh, 0
            def __enter__(self):
                return self
            def __exit__(self, *exc):
                return self.fh.__exit__(*exc)
            def write(self, data):
                self.pieces += 1
                if state["armed"] and stage == "write" and self.pieces == 3:
                    self.fh.write(data[: len(data) // 2]); self.fh.flush(); die()
                return self.fh.write(data)
            def __getattr__(self, name):
                return getattr(self.fh, name)

        class Os:
            path = os.path
            def __getattr__(self, name):
                return getattr(os, name)
            def fsync(self, fd):
                os.fsync(fd)
                if state["armed"] and stage == "fsync":
                    die()
            def link(self, a, b):
                os.link(a, b)
                if state["armed"] and stage == "link":
                    die()
            def replace(self, a, b):
                os.replace(a, b)
                if state["armed"] and stage == ("prev" if b.endswith(".prev") else "final"):
                    die()

        ck.write = write
        ck.os = Os()
        ck.open = lambda *a, **k: Handle(open(*a, **k))
        if stage == "output":
            # Die in the middle of extending the output file: one dataset already longer.
            from libration.io import output
            real_flush = output.OutputWriter.flush
            flushes = {"count": 0}

            def flush(self):
                flushes["count"] += 1
                if flushes["count"] == int(nth) and self._buffered:
                    dataset = self._datasets["snapshots/position"]
                    dataset.resize(self.written + self._buffered, axis=0)
                    dataset[self.written] = self._buffer["snapshots/position"][0]
                    self.file.flush()
                    die()
                return real_flush(self)

            output.OutputWriter.flush = flush
    if mode == "start":
        run(make(method), float(until), out, ckpt)
    else:
        resume(ckpt)
""")

exec(SETUP)  # defines make() and run() here too

STAGES = ["write", "fsync", "link", "prev", "final", "output"]


def _spawn(*args: str) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-c", CHILD, *args], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE)


def _calibrated_until(method: str, wall: float) -> float:
    """A span that takes about ``wall`` seconds here (the children then get killed mid-run)."""
    p = make(method)  # noqa: F821 - from SETUP
    probe, began = 0.5, time.perf_counter()
    while True:
        p.advance(p.time + probe)
        spent = time.perf_counter() - began
        if spent > 0.05:
            break
        probe *= 2
    return float(f"{p.time / spent * wall:.3g}")


def _same_memory(a: dict, b: dict) -> None:
    assert a.keys() == b.keys()
    for key in a:
        x, y = a[key], b[key]
        if isinstance(x, np.ndarray):
            assert x.dtype == y.dtype and x.shape == y.shape, key
            assert x.tobytes() == y.tobytes(), f"{key} differs"
        elif isinstance(x, float):
            assert x.hex() == y.hex(), f"{key}: {x!r} != {y!r}"
        else:
            assert x == y, f"{key}: {x!r} != {y!r}"


def _same_output(a: str, b: str, least: int = 100) -> None:
    x, y = open_output(a), open_output(b)
    assert x.complete and y.complete and len(x) == len(y) > least
    for name in ("time", "steps", "mass", "position", "velocity", "energy", "energy_error",
                 "angular_momentum", "angular_momentum_error"):
        assert getattr(x, name).tobytes() == getattr(y, name).tobytes(), f"output {name} differs"
    assert (x.elements is None) == (y.elements is None)
    for name in x.elements or {}:
        assert np.array_equal(x.elements[name], y.elements[name], equal_nan=True), f"elements {name}"
    assert x.names == y.names and x.scenario == y.scenario
    assert {k: repr(v) for k, v in x.attrs.items() if k != "created"} == \
           {k: repr(v) for k, v in y.attrs.items() if k != "created"}


def _wait_for(path: str, proc: subprocess.Popen, limit: float = 60.0) -> None:
    began = time.monotonic()
    while not os.path.exists(path):
        if proc.poll() is not None:
            raise AssertionError(f"child ended before its first checkpoint: {proc.stderr.read().decode()}")
        if time.monotonic() - began > limit:
            proc.kill()
            raise AssertionError("no checkpoint appeared")
        time.sleep(0.005)


@pytest.mark.parametrize("method", sorted(lb.METHODS))
def test_killed_and_resumed_run_is_bit_identical(method, tmp_path):
    seed = random.SystemRandom().randrange(2**32)
    rng = random.Random(seed)
    until = _calibrated_until(method, 0.8)  # ample margin: the kill must land before the end
    note = f"(method {method}, seed {seed}, until {until})"

    # The uninterrupted run, and the same span in one advance() call.
    ref_out, ref_ckpt = str(tmp_path / "ref.h5"), str(tmp_path / "ref.ckpt")
    reference = make(method)  # noqa: F821
    result = run(reference, until, ref_out, ref_ckpt)  # noqa: F821
    assert result.status == "done" and reference.time == until
    one_call = make(method)  # noqa: F821
    one_call.advance(until)
    assert one_call.system.position.tobytes() == reference.system.position.tobytes(), note
    assert one_call.system.velocity.tobytes() == reference.system.velocity.tobytes(), note

    # 1. SIGKILL at a random moment while stepping / writing output.
    out, ckpt = str(tmp_path / "run.h5"), str(tmp_path / "run.ckpt")
    child = _spawn("start", method, repr(until), out, ckpt, "none", "0")
    _wait_for(ckpt, child)
    time.sleep(rng.uniform(0.0, 0.15))
    child.send_signal(signal.SIGKILL)
    child.wait()
    assert child.returncode == -signal.SIGKILL, f"the first child was not killed {note}"

    # 2. Resume, and SIGKILL it at one stage of one of its checkpoint writes.
    # (the stage rotates with the method, so that every stage is exercised in each test run)
    stage, nth = STAGES[sorted(lb.METHODS).index(method) % len(STAGES)], rng.randint(1, 2)
    child = _spawn("resume", method, repr(until), out, ckpt, stage, str(nth))
    _, err = child.communicate(timeout=120)
    assert child.returncode == -signal.SIGKILL, f"not killed at stage {stage}: {err.decode()} {note}"
    if stage == "write":
        assert os.path.exists(ckpt + ".tmp")  # a half-written checkpoint was left behind ...

    # 3. Resume here to the end.
    final = resume(ckpt)  # ... and never read
    assert final.status == "done", note
    _same_memory(ck.read(ref_ckpt)[1]["propagator"], ck.read(ckpt)[1]["propagator"])
    ref_run, run_state = ck.read(ref_ckpt)[1]["run"], ck.read(ckpt)[1]["run"]
    assert ref_run["cursor"] == run_state["cursor"] and ref_run["energy_error"] == run_state["energy_error"]
    _same_output(ref_out, out)


def test_signal_writes_a_checkpoint_and_says_how_to_resume(tmp_path):
    out, ckpt = str(tmp_path / "s.h5"), str(tmp_path / "s.ckpt")
    until = _calibrated_until("leapfrog", 1.0)
    script = SETUP + textwrap.dedent(f"""
        import os, signal, threading
        p = make("leapfrog")
        threading.Timer(0.3, lambda: os.kill(os.getpid(), signal.SIGTERM)).start()
        r = run(p, {until!r}, {out!r}, {ckpt!r})
        print(r.status, r.signal, p.time < {until!r})
        print(r.message)
    """)
    proc = subprocess.run([sys.executable, "-c", script], capture_output=True, timeout=120)
    lines = proc.stdout.decode().splitlines()
    assert proc.returncode == 0, proc.stderr.decode()
    assert lines[0] == "interrupted SIGTERM True"
    assert f"libration resume {ckpt}" in lines[1]
    assert not open_output(out).complete
    finished = resume(ckpt)
    assert finished.status == "done" and finished.time == until
    reference = make("leapfrog")  # noqa: F821
    reference.advance(until)
    assert reference.system.position.tobytes() == lb.Propagator.load(ckpt).system.position.tobytes()


def test_damaged_checkpoint_resumes_from_the_previous_one(tmp_path):
    out, ckpt = str(tmp_path / "d.h5"), str(tmp_path / "d.ckpt")
    p = make("leapfrog")  # noqa: F821
    p.run(0.5, output=out, every=0.05, checkpoint=ckpt, checkpoint_steps=50)
    assert os.path.exists(ckpt + ".prev")
    with open(ckpt, "r+b") as fh:
        fh.seek(100)
        fh.write(b"\x00\x01\x02")
    with pytest.raises(lb.FileFormatError, match=r"damaged.*d\.ckpt\.prev.*libration resume"):
        resume(ckpt)
    result = resume(ckpt + ".prev", until=1.0)
    assert result.status == "done" and result.checkpoint == ckpt and lb.Propagator.load(ckpt).time == 1.0
    reference = make("leapfrog")  # noqa: F821
    reference.run(1.0, output=str(tmp_path / "r.h5"), every=0.05)
    _same_output(str(tmp_path / "r.h5"), out, least=20)
