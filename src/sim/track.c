/*
 * track.c -- the hour-angle track of the target and its parallactic angles.
 *
 * The first exposure starts at DATE-OBS (UTC). The target's ICRS right
 * ascension is chosen so that its observed hour angle at the middle of frame
 * 0 equals the requested start hour angle; its ICRS declination is the one
 * requested. Every (sub-)exposure then goes from ICRS to observed hour angle
 * and declination with ERFA eraAtco13 (precession, nutation, aberration and
 * Earth rotation; no refraction, UT1 taken equal to UTC, no polar motion),
 * and the parallactic angle follows from ERFA eraHd2pa, i.e. Meeus,
 * Astronomical Algorithms, eq. 14.1: tan q = sin H / (tan phi cos dec - sin
 * dec cos H). This is the same chain `gloam align --angles-from-header` uses,
 * so angles recomputed from the simulated headers agree with angles.txt.
 */
#include "sim/internal.h"

#include <erfa.h>
#include <erfam.h>
#include <math.h>
#include <stdio.h>

/* Observed hour angle and declination (radians) of ICRS (ra, dec) at UTC MJD. */
static int observed(const gl_sim_params *p, double ra, double dec, double mjd, double *ha,
                    double *dob)
{
    double aob, zob, rob, eo;
    return eraAtco13(ra, dec, 0, 0, 0, 0, ERFA_DJM0, mjd, 0.0, p->longitude_deg * ERFA_DD2R,
                     p->latitude_deg * ERFA_DD2R, 0.0, 0, 0, 0, 0, 0, 0, &aob, &zob, ha, dob, &rob,
                     &eo);
}

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
    t->mjd0 = (u1 - ERFA_DJM0) + u2;
    t->lst0_deg = fmod(gmst + p->longitude_deg + 720.0, 360.0);
    t->ha0_deg = 15.0 * p->ha_start_h;
    /* first guess from the mean sidereal time, then correct the right
     * ascension by the observed hour-angle error until it vanishes */
    double ra = (t->lst0_deg - t->ha0_deg) * ERFA_DD2R, dec = p->dec_deg * ERFA_DD2R;
    for (int it = 0; it < 8; it++) {
        double ha, dob;
        if (observed(p, ra, dec, t->mjd0, &ha, &dob) < 0)
            return gl_error_set(GL_ERR_USAGE, "date '%s': ERFA cannot place the target",
                                p->date_obs);
        double err = eraAnpm(ha - t->ha0_deg * ERFA_DD2R);
        ra = eraAnp(ra + err);
        if (fabs(err) < 1e-12)
            break;
    }
    t->ra_deg = ra * ERFA_DR2D;
    return GL_OK;
}

void sim_track_at(const sim_track *t, const gl_sim_params *p, double dt, double *ha_deg,
                  double *dec_deg, double *pa_deg)
{
    double ha = 0, dob = 0;
    observed(p, t->ra_deg * ERFA_DD2R, p->dec_deg * ERFA_DD2R, t->mjd0 + dt / 86400.0, &ha, &dob);
    if (ha_deg)
        *ha_deg = ha * ERFA_DR2D;
    if (dec_deg)
        *dec_deg = dob * ERFA_DR2D;
    if (pa_deg)
        *pa_deg = eraHd2pa(ha, dob, p->latitude_deg * ERFA_DD2R) * ERFA_DR2D;
}
