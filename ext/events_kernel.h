/* Per-step event checks called from inside the compiled stepping loops.
 *
 * Every stepping loop calls lb_check_events() after each (accepted) step when
 * config->enabled is set.  Three conditions are checked, in this order:
 *
 *   1 collision  |r_i - r_j| < radius_i + radius_j                    (pairs with i massive)
 *   2 encounter  |r_i - r_j| < encounter_hill * R_H,  R_H the mutual Hill radius about
 *                body 0 as primary, R_H = ((m_i + m_j) / (3 m_0))^(1/3) (d_i + d_j) / 2,
 *                d the distances from body 0 (Hill 1878 / common practice); pairs with body 0
 *                itself are not encounters
 *   3 escape     |r_i - R_cm| > escape_distance from the barycentre of the massive bodies,
 *                and the two-body energy of body i relative to the rest (their total mass,
 *                centre of mass and its velocity) is positive.
 *
 * Repeated triggers.  A condition that keeps holding over many steps (a slow encounter,
 * an escaper flying away, overlapping bodies after a "record" collision) is reported only
 * once, when it starts: the struct keeps a short list of the conditions currently
 * holding since their report, and they are suppressed until they stop holding (for
 * encounters with a 10% hysteresis: the pair must move beyond 1.1 times the encounter
 * distance, so a pair grazing the boundary does not chatter; an escape ends only when the
 * body comes back inside the escape distance, since the energy of a body in an escaping
 * binary swings in sign along the binary's orbit).  The list lives in the
 * config buffer itself, so every integrator (and every clone made with deepcopy) carries
 * its own; the buffer passed in must therefore be writable memory (the integrators pass
 * a numpy array), although the signature keeps `const` for the callers already written.
 * The kind and bodies of the last report are stored in the struct too, so a caller that
 * only sees the status code can still read what happened.
 */
#ifndef LIBRATION_EVENTS_KERNEL_H
#define LIBRATION_EVENTS_KERNEL_H
#include <math.h>
#include <stddef.h>
#include <string.h>

#define LB_EVENT_COLLISION 1
#define LB_EVENT_ENCOUNTER 2
#define LB_EVENT_ESCAPE 3
/* Conditions tracked at once for the repeat suppression; beyond that they repeat. */
#define LB_EVENT_TRACK_MAX 64
/* An encounter ends when the pair moves beyond this multiple of the encounter distance. */
#define LB_ENCOUNTER_EXIT 1.1

typedef struct {
    int enabled;              /* 0: no checks at all (the loops skip the call) */
    int collisions;           /* check |r_i - r_j| < radius_i + radius_j */
    double encounter_hill;    /* > 0: check |r_i - r_j| < encounter_hill * mutual Hill radius */
    double escape_distance;   /* > 0: check |r_i - r_com| > escape_distance and bound energy > 0 */
    /* ---- fields below are kept by lb_check_events itself (zero-initialise them) ---- */
    int last_kind;            /* kind of the last reported event (0: none yet) */
    int last_i, last_j;       /* its bodies (-1 where not applicable) */
    int tracked;              /* number of entries used in track[] */
    int track[LB_EVENT_TRACK_MAX][3];  /* (kind, i, j) of reported conditions still holding */
} lb_event_config;

/* 1 if (kind, i, j) is in the track list. */
static int lb_event_is_tracked(const lb_event_config *c, int kind, ptrdiff_t i, ptrdiff_t j)
{
    for (int k = 0; k < c->tracked; k++) {
        if (c->track[k][0] == kind && c->track[k][1] == (int)i && c->track[k][2] == (int)j) return 1;
    }
    return 0;
}

static double lb_event_distance(const double *position, ptrdiff_t i, ptrdiff_t j)
{
    double dx = position[3 * i] - position[3 * j];
    double dy = position[3 * i + 1] - position[3 * j + 1];
    double dz = position[3 * i + 2] - position[3 * j + 2];
    return sqrt(dx * dx + dy * dy + dz * dz);
}

/* Encounter distance of the pair (i, j) (0 when undefined: body 0 involved, no mass). */
static double lb_encounter_distance(const double *position, const double *mass, ptrdiff_t i,
                                    ptrdiff_t j, double encounter_hill)
{
    if (i == 0 || j == 0 || !(mass[0] > 0.0)) return 0.0;
    double mu = (mass[i] + mass[j]) / (3.0 * mass[0]);
    if (!(mu > 0.0)) return 0.0;
    double mean_distance = 0.5 * (lb_event_distance(position, i, 0) + lb_event_distance(position, j, 0));
    return encounter_hill * cbrt(mu) * mean_distance;
}

/* Barycentre of the massive bodies: total mass, position and velocity. */
static void lb_event_barycentre(const double *position, const double *velocity, const double *mass,
                                ptrdiff_t n_active, double *total, double *r_cm, double *v_cm)
{
    double m = 0.0;
    r_cm[0] = r_cm[1] = r_cm[2] = 0.0;
    v_cm[0] = v_cm[1] = v_cm[2] = 0.0;
    for (ptrdiff_t i = 0; i < n_active; i++) {
        m += mass[i];
        for (int c = 0; c < 3; c++) {
            r_cm[c] += mass[i] * position[3 * i + c];
            v_cm[c] += mass[i] * velocity[3 * i + c];
        }
    }
    if (m > 0.0) {
        for (int c = 0; c < 3; c++) {
            r_cm[c] /= m;
            v_cm[c] /= m;
        }
    }
    *total = m;
}

/* Escape test for body i: beyond `limit` from the barycentre and unbound from the rest.
 */
static int lb_escape_holds(const double *position, const double *velocity, const double *mass,
                           ptrdiff_t i, ptrdiff_t n_active, double G, double limit, double total,
                           const double *r_cm, const double *v_cm)
{
    double dx = position[3 * i] - r_cm[0], dy = position[3 * i + 1] - r_cm[1];
    double dz = position[3 * i + 2] - r_cm[2];
    if (!(sqrt(dx * dx + dy * dy + dz * dz) > limit)) return 0;
    double mi = i < n_active ? mass[i] : 0.0;
    double rest = total - mi;
    if (!(rest > 0.0)) return 0;
    double rr[3], dr[3], dv[3];
    for (int c = 0; c < 3; c++) {
        rr[c] = (total * r_cm[c] - mi * position[3 * i + c]) / rest;
        double vr = (total * v_cm[c] - mi * velocity[3 * i + c]) / rest;
        dr[c] = position[3 * i + c] - rr[c];
        dv[c] = velocity[3 * i + c] - vr;
    }
    double r = sqrt(dr[0] * dr[0] + dr[1] * dr[1] + dr[2] * dr[2]);
    double energy = 0.5 * (dv[0] * dv[0] + dv[1] * dv[1] + dv[2] * dv[2]) - G * (rest + mi) / r;
    return energy > 0.0;
}

/* Drop tracked conditions that no longer hold. */
static void lb_event_untrack(lb_event_config *c, const double *position, const double *velocity,
                             const double *mass, const double *radius, ptrdiff_t n,
                             ptrdiff_t n_active, double G)
{
    double total = 0.0, r_cm[3], v_cm[3];
    int have_cm = 0, kept = 0;
    for (int k = 0; k < c->tracked; k++) {
        int kind = c->track[k][0];
        ptrdiff_t i = c->track[k][1], j = c->track[k][2];
        int holds = 0;
        if (i < n && j < n) {
            if (kind == LB_EVENT_COLLISION && radius != NULL) {
                holds = lb_event_distance(position, i, j) < radius[i] + radius[j];
            } else if (kind == LB_EVENT_ENCOUNTER) {
                holds = lb_event_distance(position, i, j)
                        < LB_ENCOUNTER_EXIT * lb_encounter_distance(position, mass, i, j, c->encounter_hill);
            } else if (kind == LB_EVENT_ESCAPE) {
                if (!have_cm) {
                    lb_event_barycentre(position, velocity, mass, n_active, &total, r_cm, v_cm);
                    have_cm = 1;
                }
                /* an escaper stays tracked while it stays beyond the escape distance (its
                 * energy relative to the rest may swing in sign when it is part of a binary) */
                double dx = position[3 * i] - r_cm[0], dy = position[3 * i + 1] - r_cm[1];
                double dz = position[3 * i + 2] - r_cm[2];
                holds = sqrt(dx * dx + dy * dy + dz * dz) > c->escape_distance;
            }
        }
        if (holds) {
            c->track[kept][0] = kind;
            c->track[kept][1] = (int)i;
            c->track[kept][2] = (int)j;
            kept++;
        }
    }
    c->tracked = kept;
}

/* Record a new event: remember it for the repeat suppression and as the last one. */
static int lb_event_report(lb_event_config *c, int kind, ptrdiff_t i, ptrdiff_t j,
                           ptrdiff_t *body_i, ptrdiff_t *body_j)
{
    if (c->tracked < LB_EVENT_TRACK_MAX) {
        c->track[c->tracked][0] = kind;
        c->track[c->tracked][1] = (int)i;
        c->track[c->tracked][2] = (int)j;
        c->tracked++;
    }
    c->last_kind = kind;
    c->last_i = (int)i;
    c->last_j = (int)j;
    *body_i = i;
    *body_j = j;
    return kind;
}

/* 0 when nothing new happened; else the event kind (1 collision, 2 encounter, 3 escape)
 * with the bodies in *body_i, *body_j (-1 where not applicable).  Called again on the
 * same state it reports the next new condition, so a caller can drain all of them. */
static int lb_check_events(const double *position, const double *velocity, const double *mass,
                           const double *radius, ptrdiff_t n, ptrdiff_t n_active, double G,
                           const lb_event_config *config, ptrdiff_t *body_i, ptrdiff_t *body_j)
{
    /* The suppression list is updated in place (see the header comment). */
    lb_event_config *c = (lb_event_config *)config;
    *body_i = -1;
    *body_j = -1;
    if (!c->enabled) return 0;
    if (c->tracked > 0) lb_event_untrack(c, position, velocity, mass, radius, n, n_active, G);
    const int collisions = c->collisions && radius != NULL;
    const int encounters = c->encounter_hill > 0.0 && n_active > 0 && mass[0] > 0.0;
    if (collisions || encounters) {
        const double hill_scale = encounters ? cbrt(1.0 / (3.0 * mass[0])) * c->encounter_hill : 0.0;
        for (ptrdiff_t i = 0; i < n_active; i++) {
            const double xi = position[3 * i], yi = position[3 * i + 1], zi = position[3 * i + 2];
            const double di = encounters && i > 0 ? lb_event_distance(position, i, 0) : 0.0;
            for (ptrdiff_t j = i + 1; j < n; j++) {
                double dx = position[3 * j] - xi, dy = position[3 * j + 1] - yi;
                double dz = position[3 * j + 2] - zi;
                double d2 = dx * dx + dy * dy + dz * dz;
                if (collisions) {
                    double reach = radius[i] + radius[j];
                    if (d2 < reach * reach && !lb_event_is_tracked(c, LB_EVENT_COLLISION, i, j))
                        return lb_event_report(c, LB_EVENT_COLLISION, i, j, body_i, body_j);
                }
                if (encounters && i > 0) {
                    double mu = mass[i] + (j < n_active ? mass[j] : 0.0);
                    if (mu > 0.0) {
                        double dj = lb_event_distance(position, j, 0);
                        double reach = hill_scale * cbrt(mu) * 0.5 * (di + dj);
                        if (d2 < reach * reach && !lb_event_is_tracked(c, LB_EVENT_ENCOUNTER, i, j))
                            return lb_event_report(c, LB_EVENT_ENCOUNTER, i, j, body_i, body_j);
                    }
                }
            }
        }
    }
    if (c->escape_distance > 0.0) {
        double total, r_cm[3], v_cm[3];
        lb_event_barycentre(position, velocity, mass, n_active, &total, r_cm, v_cm);
        const double limit2 = c->escape_distance * c->escape_distance;
        for (ptrdiff_t i = 0; i < n; i++) {
            double dx = position[3 * i] - r_cm[0], dy = position[3 * i + 1] - r_cm[1];
            double dz = position[3 * i + 2] - r_cm[2];
            if (dx * dx + dy * dy + dz * dz > limit2
                && lb_escape_holds(position, velocity, mass, i, n_active, G, c->escape_distance,
                                   total, r_cm, v_cm)
                && !lb_event_is_tracked(c, LB_EVENT_ESCAPE, i, -1))
                return lb_event_report(c, LB_EVENT_ESCAPE, i, -1, body_i, body_j);
        }
    }
    return 0;
}
#endif
