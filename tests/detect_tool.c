/*
 * detect_tool.c -- test-only driver of the detection library, so that Python
 * tests can compare its aperture sums and t tests with photutils, numpy and
 * scipy on the same data. Numbers are printed with 17 significant digits.
 *   detect_tool apsum IMG.fits R X Y [X Y ...]       one sum per line (nan if incomplete)
 *   detect_tool snr IMG.fits FWHM EXCL X Y [X Y ...]  per plane and position:
 *                                    plane x y t fpf significance nref noise
 *   detect_tool threshold SIGMA SEP DIAM EXCL          t factor dof
 *   detect_tool fpf T DOF                              fpf significance
 *   detect_tool sigma FPF                              sigma
 */
#include "gloam/gloam.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static int usage(void)
{
    fprintf(stderr, "usage: detect_tool apsum|snr|threshold|fpf|sigma ...\n");
    return 1;
}

int main(int argc, char **argv)
{
    if (argc < 3)
        return usage();
    const char *cmd = argv[1];
    if (strcmp(cmd, "threshold") == 0 && argc == 6) {
        double t, f;
        long dof = gl_detect_threshold_at(atof(argv[2]), atof(argv[3]), atof(argv[4]),
                                          atoi(argv[5]), &t, &f);
        printf("%.17g %.17g %ld\n", t, f, dof);
        return 0;
    }
    if (strcmp(cmd, "fpf") == 0 && argc == 4) {
        double t = atof(argv[2]);
        long dof = atol(argv[3]);
        double fpf = gl_detect_fpf_from_t(t, dof);
        printf("%.17g %.17g\n", fpf, gl_detect_sigma_from_fpf(fpf));
        return 0;
    }
    if (strcmp(cmd, "sigma") == 0 && argc == 3) {
        printf("%.17g\n", gl_detect_sigma_from_fpf(atof(argv[2])));
        return 0;
    }
    int is_snr = strcmp(cmd, "snr") == 0;
    if (!is_snr && strcmp(cmd, "apsum") != 0)
        return usage();
    int first = is_snr ? 5 : 4;
    if (argc < first + 2 || (argc - first) % 2)
        return usage();
    gl_cube *c = NULL;
    gl_aperture_plan *p = NULL;
    double *work = NULL;
    gl_status st = gl_fits_read_cube(argv[2], 2, &c);
    double size = atof(argv[3]);
    gl_detect_params par;
    gl_detect_params_init(&par);
    par.fwhm = size;
    if (is_snr)
        par.exclude_adjacent = atoi(argv[4]);
    if (!st)
        st = gl_detect_aperture_plan_new(is_snr ? 0.5 * size : size, &p);
    if (!st) {
        work = malloc(gl_detect_snr_worksize(p, c->nx, c->ny) * sizeof *work);
        if (!work)
            st = GL_ERR_NOMEM;
    }
    if (st) {
        fprintf(stderr, "detect_tool: %s\n", gl_error_message());
        return 1;
    }
    long nplanes = c->nchan * c->nframe;
    for (long k = 0; k < (is_snr ? nplanes : 1); k++) {
        const float *img = c->data + (size_t)k * gl_cube_plane_size(c);
        for (int a = first; a + 1 < argc; a += 2) {
            double x = atof(argv[a]), y = atof(argv[a + 1]);
            if (is_snr) {
                gl_ttest t;
                gl_detect_snr_at(p, &par, img, c->nx, c->ny, x, y, work, &t);
                printf("%ld %.17g %.17g %.17g %.17g %.17g %ld %.17g\n", k, x, y, t.t, t.fpf,
                       t.significance, t.nref, t.noise);
            } else {
                double s;
                gl_detect_aperture_sum(p, img, c->nx, c->ny, x, y, work, &s, NULL);
                printf("%.17g\n", s);
            }
        }
    }
    free(work);
    gl_detect_aperture_plan_free(p);
    gl_cube_free(c);
    return 0;
}
