/*
 * subtract/combine.h -- the sink every method hands its residuals to:
 * derotation to north-up and combination into one output plane.
 */
#ifndef GLOAM_SUBTRACT_COMBINE_H
#define GLOAM_SUBTRACT_COMBINE_H

#include "subtract/internal.h"
#include "subtract/memo.h"

typedef struct sub_sink {
    const sub_ctx *c;
    gl_cube *image; /* nx x ny x nplanes */
    gl_cube *resid; /* derotated residuals, or NULL */
    gl_cube *raw;   /* raw-orientation residuals, or NULL */
    int nth;
    gl_geom_plan *plan;
    gl_geom_work **works; /* one per thread */
    float *scratch;       /* nth x COMBINE_BLOCK x nframe (median stacks) */
    double *wscratch;     /* nth x 3 x nring */
    gl_status *fstat;     /* per frame rotation status */
    long nring;
    int *ring;       /* ring of each pixel, 1 FWHM wide */
    double *weights; /* nframe x nring (weighted mean only) */
    /* NaN masks kept between mode counts (sub_sink_keep_masks), or NULL:
     * per frame the input's and the derotated output's NaN bits, the angle
     * and whether they are set; nth scratch rows for the input's bits */
    unsigned char *mask_in, *mask_out, *mask_scratch;
    double *mask_angle;
    int *mask_known;
    size_t mask_bytes; /* bytes of one frame's bits */
    int masks_lent;    /* the per-frame masks belong to a gl_subtract_memo */
} sub_sink;

/* Builds the sink for ctx (geometry plan and per-thread work). */
gl_status sub_sink_new(const sub_ctx *c, gl_cube *image, gl_cube *resid, gl_cube *raw,
                       sub_sink **out);
void sub_sink_free(sub_sink *s);
/* Keeps each frame's derotated NaN mask from one mode count to the next
 * (reused when the frame's angle and input NaN pixels are the same): a
 * quarter bit per pixel and frame; in memo when given (kept beyond the run,
 * memo.h), else the sink's own. */
gl_status sub_sink_keep_masks(sub_sink *s, gl_subtract_memo *memo);
/* Inverse residual variance per frame of s->c and ring (0 where undefined)
 * into s->weights, from resid before derotation. */
void sub_sink_weights(sub_sink *s, const float *resid);
/* Derotates the usable frames of resid (s->c->nframe planes) in place. */
gl_status sub_sink_derotate(sub_sink *s, float *resid);
/* The sub_sink_fn: derotates resid in place and fills plane mode_index. */
gl_status sub_sink_put(void *sink, int mode_index, float *resid);

#endif
