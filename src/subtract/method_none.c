/*
 * method_none.c -- no subtraction: each frame, cut to the region between the
 * mask and the outer radius, is its own "residual", so the frames are only
 * derotated and combined. Used after the spectral step (SDI alone), to look
 * at a sequence north-up, or to check the derotation on known sources.
 */
#include "subtract/internal.h"

#include <math.h>

static gl_status none_run(const sub_ctx *c)
{
    double cx = (double)(c->nx / 2), cy = (double)(c->ny / 2);
#pragma omp parallel for schedule(static)
    for (long i = 0; i < c->nframe; i++) {
        const float *in = c->sci + (size_t)i * (size_t)c->npix;
        float *out = c->work + (size_t)i * (size_t)c->npix;
        for (long y = 0; y < c->ny; y++)
            for (long x = 0; x < c->nx; x++) {
                double r = hypot((double)x - cx, (double)y - cy);
                long j = y * c->nx + x;
                out[j] = (c->usable[i] && r >= c->r_in && r < c->r_out) ? in[j] : NAN;
            }
    }
    return c->sink(c->sink_data, 0, c->work);
}

const sub_method sub_method_none = {"none", 0, none_run};
