/*
 * cube.c -- allocation of the float32 image stack shared by every stage, and
 * the NaN-aware mean over the wavelength channels of each frame that the
 * align and subtract stages measure and subtract on.
 */
#include "core/internal.h"

#include <limits.h>
#include <math.h>

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

gl_status gl_cube_channels_average(const gl_cube *c, float **out)
{
    size_t np = gl_cube_plane_size(c);
    float *o = gl_malloc(sizeof(float) * np * (size_t)c->nframe);
    *out = NULL;
    if (!o)
        return gl_error_nomem("channel average");
#pragma omp parallel for schedule(static)
    for (long f = 0; f < c->nframe; f++)
        for (size_t j = 0; j < np; j++) {
            double s = 0;
            long n = 0;
            for (long k = 0; k < c->nchan; k++) {
                float v = gl_cube_plane(c, k, f)[j];
                if (!isnan(v)) {
                    s += v;
                    n++;
                }
            }
            o[(size_t)f * np + j] = n ? (float)(s / (double)n) : NAN;
        }
    *out = o;
    return GL_OK;
}
