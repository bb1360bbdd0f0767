"""Type stubs for the compiled leapfrog / Yoshida composition loops (ext/symplectic.pyx)."""
import numpy as np
import numpy.typing as npt

def run_composition(position: npt.NDArray[np.float64], velocity: npt.NDArray[np.float64],
                    mass: npt.NDArray[np.float64], radius: npt.NDArray[np.float64], n_active: int,
                    G: float, softening: float, step: float, kick_weights: npt.NDArray[np.float64],
                    drift_weights: npt.NDArray[np.float64], n_steps: int,
                    acc_scratch: npt.NDArray[np.float64], soa_scratch: npt.NDArray[np.float64],
                    threads: int, event_config: npt.NDArray[np.uint8]) -> tuple[int, int, int, int]: ...
def event_config_size() -> int: ...
