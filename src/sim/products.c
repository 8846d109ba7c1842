/*
 * products.c -- simulate's two tables, written beside the simulator so that
 * every caller (gloam simulate, a program of others) writes the same files:
 * truth.csv, the companions planted (the parameters given and where they
 * land north-up, with their flux), and frames.csv, what each frame saw
 * (parallactic angle, star position, hour angle, declination, time).
 */
#include "gloam/io.h"
#include "gloam/sim.h"

#include <stdlib.h>

gl_status gl_sim_tables_write(const gl_sim_params *p, const gl_sim_result *r, const char *truth_csv,
                              const char *frames_csv)
{
    gl_status st = GL_OK;
    double *idx = NULL;
    if (truth_csv) {
        int m = r->ncompanions;
        double sep[GL_SIM_MAX_COMPANIONS], pa[GL_SIM_MAX_COMPANIONS], con[GL_SIM_MAX_COMPANIONS];
        double sepas[GL_SIM_MAX_COMPANIONS];
        for (int k = 0; k < m; k++) {
            sep[k] = p->companions[k].sep_px;
            pa[k] = p->companions[k].pa_deg;
            con[k] = p->companions[k].contrast;
            sepas[k] = sep[k] * p->pixscale_mas / 1000.0;
        }
        const char *cn[] = {"sep_px",     "pa_deg",     "contrast", "sep_arcsec",
                            "x_north_up", "y_north_up", "flux"};
        const double *cc[] = {sep, pa, con, sepas, r->comp_x_north, r->comp_y_north, r->comp_flux};
        const char *cu[] = {"pix", "deg", "", "arcsec", "pix", "pix", ""};
        gl_table t = {.ncols = 7, .nrows = m, .names = cn, .units = cu, .cols = cc};
        if ((st = gl_table_write_csv(truth_csv, &t)))
            return st;
    }
    if (frames_csv) {
        idx = malloc(2 * (size_t)r->nframes * sizeof(double));
        if (!idx)
            return gl_error_nomem("frame table");
        double *tsec = idx + r->nframes;
        for (long i = 0; i < r->nframes; i++) {
            idx[i] = (double)i;
            /* seconds from DATE-OBS to mid-exposure (full precision, unlike an MJD) */
            tsec[i] = 0.5 * p->exptime_s + (double)i * p->cadence_s;
        }
        const char *cn[] = {"frame",          "angle_deg",       "star_x", "star_y",
                            "hour_angle_deg", "declination_deg", "time_s"};
        const double *cc[] = {idx,       r->angle_deg,   r->star_x, r->star_y,
                              r->ha_deg, r->obs_dec_deg, tsec};
        const char *cu[] = {"", "deg", "pix", "pix", "deg", "deg", "s"};
        gl_table t = {.ncols = 7, .nrows = r->nframes, .names = cn, .units = cu, .cols = cc};
        st = gl_table_write_csv(frames_csv, &t);
    }
    free(idx);
    return st;
}
