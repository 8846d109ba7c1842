/*
 * track.c -- the hour-angle track of the target and its parallactic angles.
 *
 * The first exposure starts at DATE-OBS (UTC). The right ascension is chosen
 * so that the hour angle at the middle of frame 0 equals the requested start
 * hour angle: RA = LST - HA, with the local mean sidereal time from the IAU
 * 2006 Greenwich mean sidereal time (ERFA eraGmst06; UT1 taken equal to UTC)
 * plus the east longitude. The hour angle then advances at the sidereal rate
 * (360.98564736629 degrees per UT day; IERS Conventions 2010, ERA rate) and
 * the parallactic angle follows from ERFA eraHd2pa, i.e. Meeus, Astronomical
 * Algorithms, eq. 14.1: tan q = sin H / (tan phi cos dec - sin dec cos H).
 */
#include "sim/internal.h"

#include <erfa.h>
#include <math.h>
#include <stdio.h>

#define SIDEREAL_DEG_PER_S (360.98564736629 / 86400.0)

gl_status sim_track_init(sim_track *t, const gl_sim_params *p)
{
    int y, mo, d, h, mi;
    double s;
    char tail;
    if (sscanf(p->date_obs, "%d-%d-%dT%d:%d:%lf%c", &y, &mo, &d, &h, &mi, &s, &tail) != 6)
        return gl_error_set(GL_ERR_USAGE, "date '%s': expected YYYY-MM-DDThh:mm:ss (UTC)",
                            p->date_obs);
    double u1, u2, a1, a2, t1, t2;
    if (eraDtf2d("UTC", y, mo, d, h, mi, s, &u1, &u2) < 0 || y < 1960 || y > 2200)
        return gl_error_set(GL_ERR_USAGE, "date '%s': not a valid UTC date (1960-2200)",
                            p->date_obs);
    u2 += 0.5 * p->exptime_s / 86400.0;
    if (eraUtctai(u1, u2, &a1, &a2) < 0)
        return gl_error_set(GL_ERR_USAGE, "date '%s': UTC conversion failed", p->date_obs);
    eraTaitt(a1, a2, &t1, &t2);
    double gmst = eraGmst06(u1, u2, t1, t2) * 180.0 / M_PI;
    t->mjd0 = (u1 - 2400000.5) + u2;
    t->lst0_deg = fmod(gmst + p->longitude_deg + 720.0, 360.0);
    t->ha0_deg = 15.0 * p->ha_start_h;
    t->ra_deg = fmod(t->lst0_deg - t->ha0_deg + 720.0, 360.0);
    return GL_OK;
}

void sim_track_at(const sim_track *t, const gl_sim_params *p, double dt, double *ha_deg,
                  double *pa_deg)
{
    double ha = t->ha0_deg + dt * SIDEREAL_DEG_PER_S;
    const double d2r = M_PI / 180.0;
    if (ha_deg)
        *ha_deg = ha;
    if (pa_deg)
        *pa_deg = eraHd2pa(ha * d2r, p->dec_deg * d2r, p->latitude_deg * d2r) / d2r;
}
