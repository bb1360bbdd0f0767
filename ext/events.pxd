# cython: language_level=3
# The event checks (events_kernel.h) as the compiled stepping loops see them.
# cimport this; it contains declarations only, so nothing is imported at run time.

cdef extern from "events_kernel.h" nogil:
    enum:
        LB_EVENT_COLLISION
        LB_EVENT_ENCOUNTER
        LB_EVENT_ESCAPE
        LB_EVENT_TRACK_MAX
    ctypedef struct lb_event_config:
        int enabled
        int collisions
        double encounter_hill
        double escape_distance
        int last_kind
        int last_i
        int last_j
        int tracked
    int lb_event_is_tracked(const lb_event_config* c, int kind, Py_ssize_t i, Py_ssize_t j)
    int lb_event_report(lb_event_config* c, int kind, Py_ssize_t i, Py_ssize_t j,
                        Py_ssize_t* body_i, Py_ssize_t* body_j)
    int lb_check_events(const double* position, const double* velocity, const double* mass,
                        const double* radius, Py_ssize_t n, Py_ssize_t n_active, double G,
                        const lb_event_config* config, Py_ssize_t* body_i, Py_ssize_t* body_j)
