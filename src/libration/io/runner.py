"""The run loop: advance a propagator to a final time, streaming snapshots and checkpoints.

Nothing here changes the trajectory: the loop only chooses where :meth:`Propagator.advance`
stops (snapshot times, and grid points between them so that Ctrl-C, progress and checkpoints
stay responsive), and advancing in many calls gives the same bits as in one.  A run killed at
any moment and resumed from its last checkpoint (:func:`resume`) therefore ends with the same
state and the same output data as an uninterrupted run.
"""
from __future__ import annotations

import math
import os
import signal
import sys
import threading
import time as _time
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..exceptions import FileFormatError, ValidationError
from . import checkpoint as _checkpoint
from .output import ELEMENT_NAMES, OutputWriter

STATUS_DONE = "done"
STATUS_STOPPED = "stopped"
STATUS_INTERRUPTED = "interrupted"
_DEFAULT_CHECKPOINT_SECONDS = 60.0
_STOP_WALL_SECONDS = 0.25  # aim for this much wall time between two stops of the loop


@dataclass
class RunResult:
    """What a run did.

    Attributes
    ----------
    status : str
        ``"done"`` (reached ``until``), ``"stopped"`` (ended early: a stopping event, step
        underflow or the step limit; see ``message``) or ``"interrupted"`` (SIGINT/SIGTERM;
        a checkpoint was written when one is configured).
    time : float
        Final time, time unit.
    steps : int
        Propagator step count at the end.
    snapshots : int
        Snapshots in the output file.
    wall_seconds : float
        Wall time of this call.
    energy_error : float
        Last relative energy error (E - E0) / |E0|, E0 at the start of the run.
    """

    status: str
    time: float
    steps: int
    snapshots: int
    wall_seconds: float
    energy_error: float
    message: str = ""
    signal: str | None = None
    output: str | None = None
    checkpoint: str | None = None


def _finite(value: Any, name: str, *, positive: bool = False) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise ValidationError(f"{name} must be a finite number, got {value!r}") from None
    if not math.isfinite(number) or (positive and number <= 0):
        raise ValidationError(f"{name} must be a finite number{' > 0' if positive else ''}, got {value!r}")
    return number


class _Signals:
    """Turn SIGINT/SIGTERM into a flag checked between stops (main thread only)."""

    def __init__(self, active: bool) -> None:
        self.received: str | None = None
        self.previous: dict[int, Any] = {}
        self.active = active and threading.current_thread() is threading.main_thread()

    def __enter__(self) -> _Signals:
        if self.active:
            for sig in (signal.SIGINT, signal.SIGTERM):
                self.previous[sig] = signal.signal(sig, self._handle)
        return self

    def _handle(self, signum, frame) -> None:  # noqa: ARG002 - signal handler signature
        if self.received is None:
            self.received = signal.Signals(signum).name

    def __exit__(self, *exc) -> None:
        for sig, handler in self.previous.items():
            signal.signal(sig, handler)


class _Progress:
    """A tqdm bar on a terminal (simulated time, steps/s, ETA, energy error); silent otherwise."""

    def __init__(self, enabled: bool, start: float, until: float, time_unit: str, steps: int) -> None:
        self.bar = None
        self.start, self.total = start, abs(until - start)
        self.steps0, self.wall0 = steps, _time.monotonic()
        if not enabled or not sys.stderr.isatty():
            return
        try:
            from tqdm import tqdm
        except ImportError:  # pragma: no cover - tqdm is a dependency
            return
        self.bar = tqdm(total=self.total if self.total > 0 else 1.0, file=sys.stderr, unit=time_unit,
                        dynamic_ncols=True, leave=True,
                        bar_format="{l_bar}{bar}| {n:.6g}/{total:.6g} {unit} [{elapsed}<{remaining}{postfix}]")

    def update(self, time: float, steps: int, energy_error: float) -> None:
        if self.bar is None:
            return
        wall = max(_time.monotonic() - self.wall0, 1e-9)
        self.bar.n = min(abs(time - self.start), self.bar.total)
        self.bar.set_postfix_str(f"{(steps - self.steps0) / wall:,.0f} steps/s, dE/E {energy_error:.2e}",
                                 refresh=False)
        self.bar.refresh()

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()


def snapshot_row(propagator, state: dict[str, Any]) -> tuple[dict[str, Any], list[str]]:
    """One output row (schema paths -> values) for the propagator's current state, and the
    names of the bodies it describes.  ``state`` holds the run's reference energy and angular
    momentum and its element settings (see :func:`run`)."""
    system = propagator.system  # synchronised copies; the run itself is untouched
    energy = system.energy(propagator.softening)
    momentum = system.angular_momentum()  # test particles (mass 0) contribute nothing
    e0, l0 = state["energy0"], np.asarray(state["angular_momentum0"])
    l0_norm = float(np.linalg.norm(l0))
    row: dict[str, Any] = {
        "snapshots/time": propagator.time,
        "snapshots/steps": propagator.steps,
        "snapshots/mass": system.mass,
        "snapshots/position": system.position,
        "snapshots/velocity": system.velocity,
        "diagnostics/energy": energy,
        "diagnostics/energy_error": (energy - e0) / abs(e0) if e0 != 0 else energy - e0,
        "diagnostics/angular_momentum": momentum,
        "diagnostics/angular_momentum_error": float(np.linalg.norm(momentum - l0)) / l0_norm
        if l0_norm > 0 else float(np.linalg.norm(momentum - l0)),
    }
    if state["elements"]:
        n = system.n
        values = {name: np.full(n, np.nan) for name in ELEMENTS_ORDER}
        primary = state["elements_primary"]
        if primary in system.names:
            index = system.names.index(primary)
            if system.mass[index] > 0:
                from ..elements import elements_from_state

                with np.errstate(all="ignore"):
                    elements = elements_from_state(system.mass, system.position, system.velocity,
                                                   system.n_active, system.G, frame="heliocentric",
                                                   primary=index)
                others = [j for j in range(n) if j != index]
                for name in ELEMENTS_ORDER:
                    values[name][others] = getattr(elements, name)
        for name in ELEMENTS_ORDER:
            row[f"elements/{name}"] = values[name]
    return row, propagator.names


ELEMENTS_ORDER = ELEMENT_NAMES


def run(propagator, until: float, output: str | os.PathLike | None = None, every: float | None = None,
        checkpoint: str | os.PathLike | None = None, checkpoint_interval: float | None = None,
        checkpoint_steps: int | None = None, progress: bool = False, elements: bool = False,
        scenario_text: str | None = None, *, elements_primary: str | None = None,
        _state: dict[str, Any] | None = None) -> RunResult:
    """Advance ``propagator`` to ``until``, streaming snapshots to HDF5 and writing checkpoints.

    Parameters
    ----------
    propagator : Propagator
        Advanced in place.
    until : float
        Final time, time unit (absolute, like :meth:`Propagator.advance`).
    output : str or path-like, optional
        HDF5 output file (replaced if it exists); schema in :mod:`libration.io.output`.
    every : float, optional
        Simulated time between snapshots, time unit, > 0 (required with ``output``).
        Snapshots are taken at ``t_start + k * every`` and at ``until``.
    checkpoint : str or path-like, optional
        Checkpoint file, rewritten atomically (the previous one kept as ``<name>.prev``).
        A final checkpoint is written at the end.  With a checkpoint, SIGINT and SIGTERM
        write one and return with status ``"interrupted"`` instead of raising.
    checkpoint_interval : float, optional
        Wall-clock seconds between checkpoints (default 60 when neither this nor
        ``checkpoint_steps`` is given).
    checkpoint_steps : int, optional
        Steps between checkpoints.
    progress : bool
        Show a progress bar when stderr is a terminal (nothing is printed otherwise).
    elements : bool
        Also store orbital elements about ``elements_primary`` (default: body 0).
    scenario_text : str, optional
        Stored in the output file and the checkpoint.
    elements_primary : str, optional
        Name of the central body for ``elements``.

    Returns
    -------
    RunResult
    """
    wall0 = _time.monotonic()
    if _state is None:
        state = _new_state(propagator, until, output, every, checkpoint, checkpoint_interval,
                           checkpoint_steps, elements, scenario_text, elements_primary)
        writer = None
        if state["output"] is not None:
            writer = OutputWriter(state["output"], propagator.names, propagator.integrator.radius,
                                  output_attributes(propagator, state), state["scenario_text"],
                                  state["elements_primary"] if state["elements"] else None)
    else:
        state = _state
        writer = None
        if state["output"] is not None:
            writer = OutputWriter.reopen(state["output"], state["cursor"])
    try:
        return _loop(propagator, state, writer, progress, wall0)
    finally:
        if writer is not None and writer.file is not None:
            writer.abandon()


def _new_state(propagator, until, output, every, checkpoint, checkpoint_interval, checkpoint_steps,
               elements, scenario_text, elements_primary) -> dict[str, Any]:
    until = _finite(until, "until")
    start = propagator.time
    if propagator.step is not None and (until - start) * propagator.step < 0:
        raise ValidationError(f"until = {until!r} lies behind the current time {start!r} for step "
                              f"{propagator.step!r}; create the Propagator with a negative step to go backward")
    if output is not None and every is None:
        raise ValidationError("every= (simulated time between snapshots, > 0) is required with output=")
    if every is not None:
        every = _finite(every, "every", positive=True)
    if checkpoint_interval is not None:
        checkpoint_interval = _finite(checkpoint_interval, "checkpoint_interval", positive=True)
    if checkpoint_steps is not None:
        if isinstance(checkpoint_steps, bool) or not isinstance(checkpoint_steps, (int, np.integer)) \
                or checkpoint_steps < 1:
            raise ValidationError(f"checkpoint_steps must be an integer >= 1, got {checkpoint_steps!r}")
        checkpoint_steps = int(checkpoint_steps)
    if checkpoint is not None and checkpoint_interval is None and checkpoint_steps is None:
        checkpoint_interval = _DEFAULT_CHECKPOINT_SECONDS
    names = propagator.names
    if elements:
        elements_primary = names[0] if elements_primary is None else str(elements_primary)
        if elements_primary not in names:
            raise ValidationError(f"elements_primary must name a body ({', '.join(names[:5])}, ...), "
                                  f"got {elements_primary!r}")
    if output is not None and checkpoint is not None and \
            os.path.abspath(os.fspath(output)) == os.path.abspath(os.fspath(checkpoint)):
        raise ValidationError("output and checkpoint must be different files")
    system = propagator.system
    direction = 1.0 if until >= start else -1.0
    return {
        "until": until, "t_start": start, "direction": direction, "every": every,
        "output": None if output is None else os.path.abspath(os.fspath(output)),
        "checkpoint": None if checkpoint is None else os.path.abspath(os.fspath(checkpoint)),
        "checkpoint_interval": checkpoint_interval, "checkpoint_steps": checkpoint_steps,
        "elements": bool(elements), "elements_primary": elements_primary,
        "scenario_text": scenario_text or "",
        "next_index": 0, "cursor": 0, "last_snapshot_time": None,
        "energy0": float(system.energy(propagator.softening)),
        "angular_momentum0": np.einsum("i,ij->j", system.mass[:system.n_active],
                                       np.cross(system.position[:system.n_active],
                                                system.velocity[:system.n_active])),
        "energy_error": 0.0,
    }


def output_attributes(propagator, state) -> dict[str, Any]:
    """Root attributes of an output file: units, G, method, options, step, span settings."""
    import json

    units = propagator.units
    return {
        "units": units.name, "G": float(units.G), "length_unit": units.length, "mass_unit": units.mass,
        "time_unit": units.time, "method": propagator.method,
        "options": json.dumps(propagator.options, sort_keys=True, default=str),
        "step": np.nan if propagator.step is None else float(propagator.step),
        "tolerance": np.nan if propagator.tolerance is None else float(propagator.tolerance),
        "softening": float(propagator.softening),
        "every": float(state["every"]), "t_start": float(state["t_start"]),
    }


def _output_time(state: dict[str, Any], k: int) -> float:
    t = state["t_start"] + state["direction"] * k * state["every"]
    # A grid time that equals the end time but for roundoff is the end time (no near-duplicate).
    return state["until"] if abs(t - state["until"]) <= 1e-9 * state["every"] else t


def _before(a: float, b: float, direction: float) -> bool:
    return a * direction < b * direction


def _loop(p, state: dict[str, Any], writer: OutputWriter | None, progress: bool, wall0: float) -> RunResult:
    until, direction = state["until"], state["direction"]
    ckpt = state["checkpoint"]
    fixed = p.step is not None
    last_ckpt_wall, last_ckpt_steps = _time.monotonic(), p.steps
    stop_steps = 64  # fixed step: grid steps between stops, adapted to ~_STOP_WALL_SECONDS
    stop_span = abs(until - p.time) / 1000.0 or 1.0  # adaptive: simulated time between stops
    bar = _Progress(progress, state["t_start"], until, p.units.time, p.steps)
    status, message, received = STATUS_DONE, "", None

    def snapshot() -> None:
        if writer is None or state["last_snapshot_time"] == p.time:
            return
        row, names = snapshot_row(p, state)
        writer.append(row, names)
        state["last_snapshot_time"] = p.time
        state["cursor"] = writer.count
        state["energy_error"] = float(row["diagnostics/energy_error"])

    def save() -> None:
        if writer is not None:
            writer.flush()
            state["cursor"] = writer.count
        _checkpoint.write(ckpt, {"propagator": p.to_memory(), "run": state}, kind="run")

    with _Signals(ckpt is not None) as signals:
        try:
            while True:
                # The next place to stop: a snapshot time, or a grid point on the way there.
                target = until
                if writer is not None:
                    t_out = _output_time(state, state["next_index"])
                    if _before(t_out, until, direction) or t_out == until:
                        target = t_out
                if fixed:
                    grid = p.t0 + (p.steps + stop_steps) * p.step
                else:
                    grid = p.time + direction * stop_span
                stop_is_grid = _before(grid, target, direction)
                if stop_is_grid:
                    target = grid
                began = _time.monotonic()
                p.advance(target)
                spent = _time.monotonic() - began
                if stop_is_grid:  # adapt the distance between stops to the wall clock
                    if spent < _STOP_WALL_SECONDS / 2:
                        stop_steps, stop_span = min(stop_steps * 2, 1 << 24), stop_span * 2
                    elif spent > _STOP_WALL_SECONDS * 2:
                        stop_steps, stop_span = max(stop_steps // 2, 1), stop_span / 2
                if p.time != target:  # the propagator stopped early (event, underflow, step limit)
                    snapshot()
                    status, message = STATUS_STOPPED, p.message or "the propagator stopped early"
                    break
                if writer is not None and not stop_is_grid and p.time == _output_time(state, state["next_index"]):
                    snapshot()
                    state["next_index"] += 1
                if p.time == until:
                    snapshot()  # the final state, also when until is off the snapshot grid
                    break
                if writer is None and bar.bar is not None:
                    state["energy_error"] = _energy_error(p, state)
                bar.update(p.time, p.steps, state["energy_error"])
                if signals.received:
                    received = signals.received
                    status = STATUS_INTERRUPTED
                    break
                if ckpt is not None:
                    due = (state["checkpoint_interval"] is not None
                           and _time.monotonic() - last_ckpt_wall >= state["checkpoint_interval"])
                    due = due or (state["checkpoint_steps"] is not None
                                  and p.steps - last_ckpt_steps >= state["checkpoint_steps"])
                    if due:
                        save()
                        last_ckpt_wall, last_ckpt_steps = _time.monotonic(), p.steps
            if writer is None:
                state["energy_error"] = _energy_error(p, state)
            bar.update(p.time, p.steps, state["energy_error"])
            if ckpt is not None:
                save()
            if writer is not None:
                if status == STATUS_INTERRUPTED:
                    writer.abandon()
                else:
                    writer.close(p.event_log)
        finally:
            bar.close()
    if received:
        message = f"interrupted by {received} at time {p.time!r}"
        if ckpt is not None:
            message += f"; checkpoint written to {ckpt}; continue with: libration resume {ckpt}"
    return RunResult(status, p.time, p.steps, state["cursor"], _time.monotonic() - wall0,
                     state["energy_error"], message, received, state["output"], ckpt)


def _energy_error(p, state: dict[str, Any]) -> float:
    energy = p.system.energy(p.softening)
    e0 = state["energy0"]
    return (energy - e0) / abs(e0) if e0 != 0 else energy - e0


def read_run(path: str | os.PathLike):
    """Load a run checkpoint: returns ``(propagator, run_state)``."""
    from ..propagator import Propagator

    meta, content = _checkpoint.read(path)
    memory, state = content.get("propagator"), content.get("run")
    if not isinstance(memory, dict):
        raise FileFormatError(f"{os.fspath(path)} holds no propagator state")
    if not isinstance(state, dict):
        raise FileFormatError(f"{os.fspath(path)} was written by Propagator.save, not by a run: it holds "
                              "no run settings; load it with lb.Propagator.load(path) and call run()")
    return Propagator.from_memory(memory), state


def resume(path: str | os.PathLike, *, until: float | None = None, progress: bool = False) -> RunResult:
    """Continue the run whose checkpoint is ``path``, exactly where it stopped.

    The output file is brought back to the checkpoint's snapshot count (later snapshots,
    written after the checkpoint, are dropped and recomputed identically).

    Parameters
    ----------
    path : str or path-like
        A checkpoint written by :func:`run`.
    until : float, optional
        A new final time (time unit) to extend a run; default: the run's own.
    progress : bool
        Progress bar on a terminal.
    """
    propagator, state = read_run(path)
    if until is not None:
        until = _finite(until, "until")
        if (until - propagator.time) * state["direction"] < 0:
            raise ValidationError(f"until = {until!r} lies behind the checkpoint's time {propagator.time!r}")
        state["until"] = until
    # Continue in the checkpoint's own place (the run's files may have been moved together to
    # another directory or machine); resuming from NAME.prev writes NAME again.
    checkpoint = os.path.abspath(os.fspath(path))
    state["checkpoint"] = checkpoint[:-len(".prev")] if checkpoint.endswith(".prev") else checkpoint
    if state["output"] is not None:
        beside = os.path.join(os.path.dirname(checkpoint), os.path.basename(state["output"]))
        if os.path.exists(beside):
            state["output"] = beside
    if state["output"] is not None and not os.path.exists(state["output"]):
        raise FileFormatError(f"the output file {state['output']} named in checkpoint {os.fspath(path)} "
                              "is missing; restore it (the run appends to it) and resume again")
    return run(propagator, state["until"], progress=progress, _state=state)
