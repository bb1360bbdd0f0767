# cython: language_level=3
# Shared status codes and inline helpers for the compiled kernels.
# Declarations and inline functions only: cimporting it imports nothing at run time.

# Status codes every kernel loop returns to Python (0 = success).
cdef enum:
    STATUS_OK = 0
    STATUS_SINGULAR = 1        # a distance was zero or a value became non-finite
    STATUS_NO_CONVERGENCE = 2  # an iterative solver (Kepler, extrapolation) failed
    STATUS_STEP_UNDERFLOW = 3  # the adaptive step fell below the allowed minimum
    STATUS_MAX_STEPS = 4       # an adaptive run reached its step limit
    STATUS_EVENT = 5           # an event condition stopped the loop


cdef inline void kahan_add(double* total, double* carry, double value) noexcept nogil:
    """Compensated summation: total += value, with the lost low bits kept in carry."""
    cdef double y = value - carry[0]
    cdef double t = total[0] + y
    carry[0] = (t - total[0]) - y
    total[0] = t
