"""The long-run commands of ``libration``: run, resume, info, plot (and ``demo --write``).

Exit codes (also in README.md): 0 the run reached its end (or the command succeeded);
1 the integration ended early (a stopping event, step underflow, step limit, or a singular
configuration); 2 invalid usage or input (arguments, scenario, damaged or foreign file, missing
optional dependency); 130 interrupted by Ctrl-C or SIGTERM after writing a checkpoint.
"""
from __future__ import annotations

import argparse
import os
import sys

EXIT_OK = 0
EXIT_FAILED = 1
EXIT_USAGE = 2
EXIT_INTERRUPTED = 130


def _say(text: str) -> None:
    print(text, flush=True)


def _finish(result) -> int:
    from .runner import STATUS_DONE, STATUS_INTERRUPTED

    snapshots = f", {result.snapshots} snapshots" if result.output else ""
    _say(f"{result.status}: time {result.time!r}, {result.steps:,} steps{snapshots}, "
         f"relative energy error {result.energy_error:.3e}, {result.wall_seconds:.2f} s wall")
    if result.output:
        _say(f"output: {result.output}  (inspect with `libration info {result.output}`, "
             f"`libration plot {result.output}`)")
    if result.status == STATUS_INTERRUPTED:
        print(f"libration: {result.message}", file=sys.stderr)
        return EXIT_INTERRUPTED
    if result.status != STATUS_DONE:
        print(f"libration: the run ended early: {result.message}", file=sys.stderr)
        return EXIT_FAILED
    return EXIT_OK


def cmd_run(args: argparse.Namespace) -> int:
    """``libration run SCENARIO``."""
    from .. import scenario as scenario_module
    from .runner import run

    scenario = scenario_module.load(args.scenario)
    until = args.until if args.until is not None else scenario.until
    if until is None:
        print(f"libration: error: {args.scenario} has no [run] until; give one there or pass --until",
              file=sys.stderr)
        return EXIT_USAGE
    output = args.output or scenario.path_of(scenario.output)
    every = args.every if args.every is not None else scenario.every
    if output is not None and every is None:
        print("libration: error: --output needs --every (or [output] every in the scenario)", file=sys.stderr)
        return EXIT_USAGE
    checkpoint = args.checkpoint or scenario.path_of(scenario.checkpoint)
    if checkpoint is None:
        stem = os.path.splitext(os.path.basename(args.scenario))[0]
        checkpoint = os.path.join(scenario.directory, stem + ".ckpt")
    if os.path.exists(checkpoint) and not args.overwrite:
        print(f"libration: error: checkpoint {checkpoint} already exists (an earlier run of this scenario): "
              f"continue it with `libration resume {checkpoint}`, or pass --overwrite to start again",
              file=sys.stderr)
        return EXIT_USAGE
    system = scenario.system()
    propagator = scenario.propagator(system)
    units = system.units
    how = f"step {propagator.step!r} {units.time}" if propagator.step is not None else \
        f"tolerance {propagator.tolerance!r}"
    _say(f"{scenario.name}: {system.n:,} bodies ({system.n_active} massive), {propagator.method}, {how}, "
         f"from {propagator.time!r} to {until!r} {units.time}")
    if output:
        _say(f"output: {output}, a snapshot every {every!r} {units.time}")
    interval = scenario.checkpoint_interval
    steps = scenario.checkpoint_steps
    _say(f"checkpoint: {checkpoint}"
         + (f", every {steps:,} steps" if steps else "")
         + (f", every {interval if interval else 60.0:g} s" if interval or not steps else ""))
    result = run(propagator, until, output=output, every=every, checkpoint=checkpoint,
                 checkpoint_interval=interval, checkpoint_steps=steps, progress=not args.quiet,
                 elements=scenario.elements, scenario_text=scenario.text,
                 elements_primary=scenario.elements_primary)
    return _finish(result)


def cmd_resume(args: argparse.Namespace) -> int:
    """``libration resume CHECKPOINT``."""
    from .runner import read_run, resume

    propagator, state = read_run(args.checkpoint)
    until = args.until if args.until is not None else state["until"]
    _say(f"resuming {args.checkpoint}: {propagator.method}, time {propagator.time!r} -> {until!r} "
         f"{propagator.units.time}, {propagator.steps:,} steps done, {state['cursor']} snapshots kept")
    result = resume(args.checkpoint, until=args.until, progress=not args.quiet)
    return _finish(result)


def _info_checkpoint(path: str) -> None:
    import json

    from . import checkpoint

    meta, content = checkpoint.read(path)
    memory = content.get("propagator", {})
    state = content.get("run")
    _say(f"{path}: libration checkpoint (format {meta['format_version']}, written {meta['created']} by "
         f"libration {meta['library_version']}, {'a run' if state else 'Propagator.save'})")
    names = json.loads(memory.get("names_json", "[]"))
    mass = memory.get("integrator/mass")
    massive = int((mass > 0).sum()) if mass is not None else 0
    _say(f"  method        {memory.get('method')}  options {memory.get('options_json')}")
    _say(f"  settings      {memory.get('settings_json')}")
    _say(f"  units         {memory.get('units')}")
    _say(f"  bodies        {len(names):,} ({massive} massive): {', '.join(names[:6])}"
         + (", ..." if len(names) > 6 else ""))
    _say(f"  time          {memory.get('time')!r} after {memory.get('steps'):,} steps")
    log = json.loads(memory.get("event_log_json", "[]"))
    _say(f"  events        {len(log)} logged")
    if state:
        _say(f"  run           until {state['until']!r}, started at {state['t_start']!r}")
        _say(f"  output        {state['output']} ({state['cursor']} snapshots at this checkpoint)")
        _say(f"  energy error  {state['energy_error']:.3e} (relative, at the last snapshot)")
        _say(f"  continue with libration resume {path}")


def _info_output(path: str) -> None:
    from .output import open_output

    out = open_output(path)
    a = out.attrs
    _say(f"{path}: libration output (format {a.get('format_version')}, written {a.get('created')} by "
         f"libration {a.get('library_version')}){'' if out.complete else ' -- INCOMPLETE: run in progress or interrupted'}")
    _say(f"  method        {a.get('method')}  step {a.get('step')}  tolerance {a.get('tolerance')}  "
         f"options {a.get('options')}")
    _say(f"  units         {a.get('units')} (G = {a.get('G')!r}; {a.get('length_unit')}, {a.get('mass_unit')}, "
         f"{a.get('time_unit')})")
    _say(f"  bodies        {len(out.names):,}: {', '.join(out.names[:6])}" + (", ..." if len(out.names) > 6 else ""))
    if len(out):
        _say(f"  snapshots     {len(out)} from time {float(out.time[0])!r} to {float(out.time[-1])!r} (every {a.get('every')!r})")
        err = out.energy_error
        _say(f"  energy error  final {err[-1]:.3e}, largest |dE/E| {abs(err).max():.3e}")
        _say(f"  ang. momentum largest relative error {out.angular_momentum_error.max():.3e}")
    else:
        _say("  snapshots     0")
    _say(f"  elements      {'about ' + str(out.elements_primary) if out.elements else 'not stored'}")
    _say(f"  events        {len(out.event_log)} logged")
    if out.scenario:
        first = next((line for line in out.scenario.splitlines() if line.strip().startswith("name")), "")
        _say(f"  scenario      stored ({len(out.scenario.splitlines())} lines) {first.strip()}")


def cmd_info(args: argparse.Namespace) -> int:
    """``libration info FILE``: a summary of an output or checkpoint file."""
    from ..exceptions import FileFormatError

    path = args.file
    if not os.path.exists(path):
        raise FileFormatError(f"{path} does not exist")
    with open(path, "rb") as fh:
        magic = fh.read(8)
    if magic == b"\x89LBRCKP\n":
        _info_checkpoint(path)
    elif magic == b"\x89HDF\r\n\x1a\n":
        _info_output(path)
    else:
        raise FileFormatError(f"{path} is neither a libration output file (HDF5) nor a checkpoint")
    return EXIT_OK


def cmd_plot(args: argparse.Namespace) -> int:
    """``libration plot FILE``: orbit projections, energy error and a/e/i against time (PNG)."""
    from .plot import plot_output

    target = args.output or os.path.splitext(args.file)[0] + ".png"
    plot_output(args.file, target, max_particles=args.particles)
    _say(f"wrote {target}")
    return EXIT_OK


def write_demo(path: str, overwrite: bool = False) -> int:
    """``libration demo --write FILE``: the demo scenario as a starting point."""
    from ..scenario import demo_text

    if os.path.exists(path) and not overwrite:
        print(f"libration: error: {path} exists; choose another name or remove it", file=sys.stderr)
        return EXIT_USAGE
    with open(path, "w", encoding="utf-8") as fh:
        fh.write(demo_text())
    _say(f"wrote {path}; run it with `libration run {path}`")
    return EXIT_OK


def _file_errors(command):
    """Report operating-system errors (permissions, full disk, missing directory) in one line."""
    import functools

    @functools.wraps(command)
    def wrapper(args: argparse.Namespace) -> int:
        try:
            return command(args)
        except OSError as exc:
            where = f" {exc.filename}" if getattr(exc, "filename", None) else ""
            print(f"libration: error:{where} {exc.strerror or exc}", file=sys.stderr)
            return EXIT_USAGE

    return wrapper


def add_commands(commands) -> None:
    """Add run, resume, info and plot to the ``libration`` sub-command parser."""
    run = commands.add_parser("run", help="run a scenario file (TOML) with output, checkpoints and progress")
    run.add_argument("scenario", help="scenario file (see README, 'Scenario files')")
    run.add_argument("--until", type=float, default=None, help="final time (default: [run] until)")
    run.add_argument("--output", default=None, help="HDF5 output file (default: [output] file)")
    run.add_argument("--every", type=float, default=None, help="time between snapshots (default: [output] every)")
    run.add_argument("--checkpoint", default=None,
                     help="checkpoint file (default: [checkpoint] file, else SCENARIO.ckpt)")
    run.add_argument("--overwrite", action="store_true", help="start again even if the checkpoint exists")
    run.add_argument("--quiet", action="store_true", help="no progress bar")
    run.set_defaults(func=_file_errors(cmd_run))

    resume = commands.add_parser("resume", help="continue a run exactly from its checkpoint")
    resume.add_argument("checkpoint", help="checkpoint file written by `libration run`")
    resume.add_argument("--until", type=float, default=None, help="a new final time (extends the run)")
    resume.add_argument("--quiet", action="store_true", help="no progress bar")
    resume.set_defaults(func=_file_errors(cmd_resume))

    info = commands.add_parser("info", help="summarise an output (.h5) or checkpoint file")
    info.add_argument("file")
    info.set_defaults(func=_file_errors(cmd_info))

    plot = commands.add_parser("plot", help="PNG of orbits, energy error and a/e/i against time (needs matplotlib)")
    plot.add_argument("file", help="output file (.h5)")
    plot.add_argument("-o", "--output", default=None, help="PNG file (default: FILE with .png)")
    plot.add_argument("--particles", type=int, default=500, help="test particles drawn at most (default 500)")
    plot.set_defaults(func=_file_errors(cmd_plot))
