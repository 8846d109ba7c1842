/*
 * subtract/memo.h -- derotation NaN masks kept from one subtraction to the
 * next of the same frames (library-internal: `gloam limits` runs the same
 * subtraction three times, on the cube and on copies with fakes, which add
 * no NaN). A frame's kept mask is used only when its angle and its input
 * NaN pixels are those it was made from (combine.c), so a memo can be given
 * to any run; one for other frames or another size is cleared first. It also
 * keeps the runs' large scratch buffers.
 */
#ifndef GLOAM_SUBTRACT_MEMO_H
#define GLOAM_SUBTRACT_MEMO_H

#include "gloam/subtract.h"

#include <stddef.h>

enum { GL_SUBTRACT_MEMO_WORK, GL_SUBTRACT_MEMO_MATRIX, GL_SUBTRACT_MEMO_BUFS };

typedef struct gl_subtract_memo {
    long nx, ny, nframe;
    int interp;              /* the derotation's interpolator they were made with */
    size_t bytes;            /* of one frame's bits */
    unsigned char *in, *out; /* per frame: input and derotated NaN bits */
    double *angle;           /* per frame: the angle they were made at */
    int *known;              /* per frame: set */
    /* the runs' large scratch (residual frames, data matrix) kept between
     * them: their pages are not faulted in and cleared again each run */
    float *buf[GL_SUBTRACT_MEMO_BUFS];
    size_t buf_n[GL_SUBTRACT_MEMO_BUFS];
} gl_subtract_memo;

/* A scratch buffer of at least n floats in slot `slot` of memo, kept for the
 * next run (its content is not), or NULL when out of memory. */
float *gl_subtract_memo_buffer(gl_subtract_memo *m, int slot, size_t n);

/* An empty memo (sized at its first use); NULL when out of memory. */
gl_subtract_memo *gl_subtract_memo_new(void);
void gl_subtract_memo_free(gl_subtract_memo *m);

/* gl_subtract_run with the masks of memo (NULL: none kept beyond the run). */
gl_status gl_subtract_run_memo(const gl_cube *cube, const double *angles, const gl_cube *refs,
                               const gl_subtract_params *p, gl_subtract_memo *memo,
                               gl_subtract_result *out);

#endif
