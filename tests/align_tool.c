/*
 * align_tool.c -- test-only driver of the align measurements, so that the
 * Python reference tests can compare them with scikit-image, astropy and
 * astroplan on the same data:
 *   align_tool xcorr REF.fits IMG.fits UPSAMPLE      -> "dx dy error" per plane
 *   align_tool fit IMG.fits X0 Y0 HALF gaussian|moffat
 *       -> "x y amplitude background sigma_x sigma_y alpha beta fwhm err_x err_y"
 *   align_tool symmetry IMG.fits UPSAMPLE            -> "x y"
 *   align_tool parang CUBE.fits CADENCE_S            -> "pa ha dec mjd_mid" per frame
 */
#include "gloam/gloam.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static int fail(void)
{
    fprintf(stderr, "align_tool: %s\n", gl_error_message());
    return 1;
}

int main(int argc, char **argv)
{
    gl_cube *a = NULL, *b = NULL;
    if (argc >= 5 && strcmp(argv[1], "xcorr") == 0) {
        if (gl_fits_read_cube(argv[2], 2, &a) || gl_fits_read_cube(argv[3], 2, &b))
            return fail();
        gl_xcorr_plan *p = NULL;
        gl_xcorr_work *w = NULL;
        if (gl_xcorr_plan_new(a->data, a->nx, a->ny, atoi(argv[4]), &p) || gl_xcorr_work_new(p, &w))
            return fail();
        for (long f = 0; f < b->nframe; f++) {
            double dx, dy, e;
            if (gl_align_xcorr_shift(p, w, gl_cube_plane(b, 0, f), &dx, &dy, &e))
                return fail();
            printf("%.6f %.6f %.6g\n", dx, dy, e);
        }
        gl_xcorr_work_free(w);
        gl_xcorr_plan_free(p);
    } else if (argc >= 7 && strcmp(argv[1], "fit") == 0) {
        if (gl_fits_read_cube(argv[2], 2, &a))
            return fail();
        gl_profile_fit f;
        gl_profile_kind k =
            strcmp(argv[6], "moffat") == 0 ? GL_PROFILE_MOFFAT : GL_PROFILE_GAUSSIAN;
        if (gl_align_fit_profile(a->data, a->nx, a->ny, atof(argv[3]), atof(argv[4]), atoi(argv[5]),
                                 0, k, &f))
            return fail();
        printf("%.8f %.8f %.8g %.8g %.8g %.8g %.8g %.8g %.8g %.8g %.8g\n", f.x, f.y, f.amplitude,
               f.background, f.sigma_x, f.sigma_y, f.alpha, f.beta, f.fwhm, f.err_x, f.err_y);
    } else if (argc >= 4 && strcmp(argv[1], "symmetry") == 0) {
        double x, y;
        if (gl_fits_read_cube(argv[2], 2, &a) ||
            gl_align_symmetry_centre(a->data, a->nx, a->ny, atoi(argv[3]), &x, &y))
            return fail();
        printf("%.6f %.6f\n", x, y);
    } else if (argc >= 4 && strcmp(argv[1], "parang") == 0) {
        if (gl_fits_read_cube(argv[2], 2, &a))
            return fail();
        double *mjd = NULL;
        if (gl_align_frame_times_read(argv[2], a->nframe, &mjd))
            return fail();
        gl_frame_times t = {mjd, atof(argv[3])};
        long n = a->nframe;
        double *pa = malloc(sizeof *pa * n), *ha = malloc(sizeof *ha * n),
               *dec = malloc(sizeof *dec * n);
        if (gl_align_parang_from_header(a->header, n, &t, pa, ha, dec))
            return fail();
        for (long f = 0; f < n; f++)
            printf("%.10f %.10f %.10f\n", pa[f], ha[f], dec[f]);
        free(pa);
        free(ha);
        free(dec);
        gl_free(mjd);
    } else {
        fprintf(stderr, "usage: align_tool xcorr|fit|symmetry|parang ...\n");
        return 1;
    }
    gl_cube_free(a);
    gl_cube_free(b);
    return 0;
}
