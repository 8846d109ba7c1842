/*
 * products.c -- inject's table of planted companions (CUBE2.planted.csv),
 * written beside the planting code so that every caller writes the same
 * file: one row per companion with its separation, position angle,
 * contrast, flux and position in the first frame.
 */
#include "gloam/inject.h"
#include "gloam/io.h"

#include <stdlib.h>

gl_status gl_inject_planted_write(const char *csv, const gl_companion *comps, int n,
                                  double theta0_deg, double north_offset_deg, long nx, long ny,
                                  double star_flux)
{
    double *col = calloc(7 * (size_t)(n > 0 ? n : 1), sizeof(double));
    if (!col)
        return gl_error_nomem("planted table");
    double *idx = col, *sep = col + n, *pa = col + 2 * n, *con = col + 3 * n, *flux = col + 4 * n,
           *x0 = col + 5 * n, *y0 = col + 6 * n;
    for (int k = 0; k < n; k++) {
        idx[k] = k + 1;
        sep[k] = comps[k].sep_px;
        pa[k] = comps[k].pa_deg;
        con[k] = comps[k].contrast;
        flux[k] = comps[k].contrast * star_flux;
        gl_companion_position(&comps[k], theta0_deg, north_offset_deg, nx, ny, &x0[k], &y0[k]);
    }
    const char *names[] = {"companion", "sep_px",   "pa_deg",  "contrast",
                           "flux",      "x_frame1", "y_frame1"};
    const double *cols[] = {idx, sep, pa, con, flux, x0, y0};
    const char *units[] = {"", "pix", "deg", "", "", "pix", "pix"};
    gl_table t = {.ncols = 7, .nrows = n, .names = names, .units = units, .cols = cols};
    gl_status st = gl_table_write_csv(csv, &t);
    free(col);
    return st;
}
