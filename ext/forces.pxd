# cython: language_level=3
# The gravity kernel (gravity_kernel.h) as other compiled modules see it.
# cimport this; it contains declarations only, so nothing is imported at run time.

cdef extern from "gravity_kernel.h" nogil:
    int lb_gravity_accelerations(const double* position, const double* mass,
                                 Py_ssize_t n, Py_ssize_t n_active, double G, double eps2,
                                 double* acc, double* soa, int threads, Py_ssize_t* bad)
    double lb_gravity_potential(const double* position, const double* mass,
                                Py_ssize_t n_active, double G, double eps2)
    int lb_have_openmp()
