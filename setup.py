"""Build table of libration's compiled kernels; all metadata lives in pyproject.toml.

Environment variables (documented in DEVELOPERS.md):
  LIBRATION_NATIVE=1   tune for this CPU (-march=native); the default build is portable
  LIBRATION_DEBUG=1    bounds checking and -O0 -g for debugging the kernels
  LIBRATION_OPENMP=0   build without OpenMP even where the compiler has it
"""
import os
import subprocess
import sys
import tempfile

import numpy
from Cython.Build import cythonize
from setuptools import Extension, setup

# One row per compiled module: libration._<name> built from ext/<name>.pyx.
EXTENSIONS = ["gravity", "symplectic", "kepler", "extrapolation", "wisdom_holman"]

DEBUG = os.environ.get("LIBRATION_DEBUG", "0") == "1"
NATIVE = os.environ.get("LIBRATION_NATIVE", "0") == "1"

DIRECTIVES = {
    "language_level": 3,
    "boundscheck": DEBUG,
    "wraparound": False,
    "cdivision": True,
    "initializedcheck": DEBUG,
    "embedsignature": True,
}

# IEEE-preserving optimisation: no -ffast-math, ever.  -fno-math-errno lets sqrt
# vectorise; -ffp-contract=off keeps every code path (and every CPU) bit-identical.
COMPILE = ["-O3", "-fno-math-errno", "-fno-trapping-math", "-ffp-contract=off", "-std=c11"]
if DEBUG:
    COMPILE = ["-O0", "-g", "-ffp-contract=off", "-std=c11"]
MACROS = [("NPY_NO_DEPRECATED_API", "NPY_1_7_API_VERSION")]
if NATIVE:
    COMPILE.append("-march=native")
    MACROS.append(("LIBRATION_NATIVE", "1"))


def openmp_flags():
    """Return the OpenMP flag if the compiler accepts it, else an empty list."""
    if os.environ.get("LIBRATION_OPENMP", "1") == "0" or sys.platform == "win32":
        return []
    compiler = os.environ.get("CC", "cc")
    with tempfile.TemporaryDirectory() as tmp:
        src = os.path.join(tmp, "t.c")
        with open(src, "w") as f:
            f.write("#include <omp.h>\nint main(void){return omp_get_max_threads() < 1;}\n")
        try:
            result = subprocess.run([compiler, "-fopenmp", src, "-o", os.path.join(tmp, "t")],
                                    capture_output=True, check=False)
        except OSError:
            return []
        return ["-fopenmp"] if result.returncode == 0 else []


OPENMP = openmp_flags()

extensions = [
    Extension(f"libration._{name}", [f"ext/{name}.pyx"], include_dirs=["ext", numpy.get_include()],
              define_macros=MACROS, extra_compile_args=COMPILE + OPENMP, extra_link_args=OPENMP)
    for name in EXTENSIONS
]

setup(ext_modules=cythonize(extensions, compiler_directives=DIRECTIVES, include_path=["ext"]))
