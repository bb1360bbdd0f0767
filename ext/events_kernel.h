/* Per-step event checks called from inside the compiled stepping loops.
 * PLACEHOLDER: the full implementation belongs to the events work (issue 4). */
#ifndef LIBRATION_EVENTS_KERNEL_H
#define LIBRATION_EVENTS_KERNEL_H
#include <stddef.h>

typedef struct {
    int enabled;              /* 0: no checks at all (the loops skip the call) */
    int collisions;           /* check |r_i - r_j| < radius_i + radius_j */
    double encounter_hill;    /* > 0: check |r_i - r_j| < encounter_hill * mutual Hill radius */
    double escape_distance;   /* > 0: check |r_i - r_com| > escape_distance and bound energy > 0 */
} lb_event_config;

/* 0 when nothing happened; else the event kind (1 collision, 2 encounter, 3 escape)
 * with the bodies in *body_i, *body_j (-1 where not applicable). */
static int lb_check_events(const double *position, const double *velocity, const double *mass,
                           const double *radius, ptrdiff_t n, ptrdiff_t n_active, double G,
                           const lb_event_config *config, ptrdiff_t *body_i, ptrdiff_t *body_j)
{
    (void)position; (void)velocity; (void)mass; (void)radius; (void)n; (void)n_active;
    (void)G; (void)config; *body_i = -1; *body_j = -1;
    return 0;
}
#endif
