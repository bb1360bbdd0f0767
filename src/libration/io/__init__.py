"""Files of long runs: HDF5 snapshot output, exact checkpoints, and the run loop."""
from .checkpoint import load, save
from .output import Output, OutputWriter, open_output
from .runner import RunResult, resume, run

__all__ = ["Output", "OutputWriter", "RunResult", "load", "open_output", "resume", "run", "save"]
