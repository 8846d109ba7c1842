/*
 * geom_tool.c -- test-only driver of the geometry module: reads a FITS image,
 * shifts or rotates every plane, writes the result, so that Python tests can
 * compare with scipy.ndimage on the same data.
 *   geom_tool IN.fits OUT.fits shift DX DY fft|cubic
 *   geom_tool IN.fits OUT.fits rotate DEG fft|cubic
 */
#include "gloam/gloam.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

int main(int argc, char **argv)
{
    if (argc < 6) {
        fprintf(stderr, "usage: geom_tool IN OUT shift DX DY INTERP | rotate DEG INTERP\n");
        return 1;
    }
    int is_shift = strcmp(argv[3], "shift") == 0;
    int interp = gl_interp_from_name(argv[is_shift ? 6 : 5]);
    gl_cube *c = NULL;
    gl_geom_plan *p = NULL;
    gl_geom_work *w = NULL;
    gl_outset *s = NULL;
    const char *tmp;
    gl_status st = gl_fits_read_cube(argv[1], 2, &c);
    if (!st)
        st = gl_geom_plan_new(c->nx, c->ny, (gl_interp)interp, &p);
    if (!st)
        st = gl_geom_work_new(p, &w);
    for (long f = 0; !st && f < c->nframe * c->nchan; f++) {
        float *img = c->data + (size_t)f * gl_cube_plane_size(c);
        st = is_shift ? gl_geom_shift(p, w, img, atof(argv[4]), atof(argv[5]))
                      : gl_geom_rotate(p, w, img, atof(argv[4]));
    }
    if (!st)
        st = gl_outset_new(1, &s);
    if (!st)
        st = gl_outset_add(s, argv[2], NULL, &tmp);
    if (!st)
        st = gl_fits_write_cube(tmp, c, NULL);
    if (!st)
        st = gl_outset_commit(s);
    if (st)
        fprintf(stderr, "geom_tool: %s\n", gl_error_message());
    gl_outset_free(s);
    gl_geom_work_free(w);
    gl_geom_plan_free(p);
    gl_cube_free(c);
    return gl_status_exit_code(st);
}
