/*
 * cube.c -- allocation of the float32 image stack shared by every stage.
 */
#include "core/internal.h"

#include <limits.h>

gl_status gl_cube_new(long nx, long ny, long nchan, long nframe, gl_cube **out)
{
    *out = NULL;
    if (nx < 1 || ny < 1 || nchan < 1 || nframe < 1)
        return gl_error_set(GL_ERR_INTERNAL, "cube of shape %ldx%ldx%ldx%ld is empty", nx, ny,
                            nchan, nframe);
    size_t n = (size_t)nx * (size_t)ny;
    if (n / (size_t)nx != (size_t)ny ||
        n > SIZE_MAX / sizeof(float) / (size_t)nchan / (size_t)nframe)
        return gl_error_set(GL_ERR_NOMEM, "cube of shape %ldx%ldx%ldx%ld is too large", nx, ny,
                            nchan, nframe);
    n *= (size_t)nchan * (size_t)nframe;
    gl_cube *c = gl_calloc(1, sizeof *c);
    if (!c)
        return gl_error_nomem("cube");
    c->data = gl_calloc(n, sizeof(float));
    c->header = gl_header_new();
    if (!c->data || !c->header) {
        gl_cube_free(c);
        return gl_error_set(GL_ERR_NOMEM, "out of memory for a %ldx%ldx%ldx%ld cube (%.1f MB)", nx,
                            ny, nchan, nframe, (double)n * 4 / 1e6);
    }
    c->nx = nx;
    c->ny = ny;
    c->nchan = nchan;
    c->nframe = nframe;
    c->naxis = nchan > 1 ? 4 : (nframe > 1 ? 3 : 2);
    c->bitpix = -32;
    *out = c;
    return GL_OK;
}

void gl_cube_free(gl_cube *c)
{
    if (!c)
        return;
    gl_free(c->data);
    gl_header_free(c->header);
    gl_free(c);
}
