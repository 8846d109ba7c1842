/*
 * refs.c -- choosing reference-star frames for RDI: keeps the N reference
 * frames whose speckle pattern best matches the science sequence, scored by
 * the median over usable science frames of the Pearson correlation inside the
 * subtraction region (frame selection by correlation is common practice in
 * RDI; cf. Ruane et al. 2019, AJ 157, 118, from memory). Ties go to the
 * earlier frame; the kept frames stay in their original order.
 */
#include "subtract/internal.h"

#include <math.h>
#include <string.h>

gl_status sub_refs_select(const sub_ctx *c, const float *ref_all, long nref_all, long nbest,
                          float **ref_out, long *nref_out, double *score_out)
{
    gl_status st = GL_OK;
    sub_region reg = {0};
    long nall = c->nframe + nref_all;
    float *M = NULL, *buf = NULL;
    double *C = NULL;
    double *score = NULL;
    long *rank = NULL;
    *ref_out = NULL;
    *nref_out = 0;
    st = sub_region_make(c->nx, c->ny, c->r_in, c->r_out, 1, 0, &reg);
    if (st)
        goto cleanup;
    M = gl_malloc(sizeof(float) * (size_t)nall * (size_t)reg.npix);
    C = gl_malloc(sizeof(double) * (size_t)nall * (size_t)nall);
    buf = gl_malloc(sizeof(float) * (size_t)c->nframe);
    score = gl_malloc(sizeof(double) * (size_t)nref_all);
    rank = gl_malloc(sizeof(long) * (size_t)nref_all);
    *ref_out = gl_malloc(sizeof(float) * (size_t)nbest * (size_t)c->npix);
    if (!M || !C || !buf || !score || !rank || !*ref_out) {
        st = gl_error_nomem("reference selection");
        goto cleanup;
    }
    for (long i = 0; i < nall; i++) {
        const float *src = i < c->nframe ? c->sci + (size_t)i * (size_t)c->npix
                                         : ref_all + (size_t)(i - c->nframe) * (size_t)c->npix;
        for (long j = 0; j < reg.npix; j++)
            M[(size_t)i * (size_t)reg.npix + (size_t)j] = src[reg.pix[j]];
    }
    sub_centre(M, nall, reg.npix, GL_CENTRE_FRAME, NULL);
    st = sub_covariance(M, nall, reg.npix, C, NULL);
    if (st)
        goto cleanup;
    for (long r = 0; r < nref_all; r++) {
        long ir = c->nframe + r, n = 0;
        double crr = C[(size_t)ir * (size_t)nall + (size_t)ir];
        for (long i = 0; i < c->nframe; i++) {
            if (!c->usable[i])
                continue;
            double cii = C[(size_t)i * (size_t)nall + (size_t)i];
            double den = sqrt(cii * crr);
            buf[n++] = den > 0 ? (float)(C[(size_t)i * (size_t)nall + (size_t)ir] / den) : NAN;
        }
        float med = sub_nanmedian(buf, n);
        score[r] = isnan(med) ? -2.0 : med;
        rank[r] = r;
    }
    /* stable insertion sort by decreasing score */
    for (long i = 1; i < nref_all; i++) {
        long v = rank[i], k = i - 1;
        while (k >= 0 && score[rank[k]] < score[v]) {
            rank[k + 1] = rank[k];
            k--;
        }
        rank[k + 1] = v;
    }
    /* keep the best nbest, in original order */
    long m = 0;
    for (long r = 0; r < nref_all; r++) {
        int kept = 0;
        for (long q = 0; q < nbest; q++)
            if (rank[q] == r)
                kept = 1;
        if (!kept)
            continue;
        memcpy(*ref_out + (size_t)m * (size_t)c->npix, ref_all + (size_t)r * (size_t)c->npix,
               sizeof(float) * (size_t)c->npix);
        if (score_out)
            score_out[m] = score[r];
        m++;
    }
    *nref_out = m;
cleanup:
    if (st) {
        gl_free(*ref_out);
        *ref_out = NULL;
    }
    sub_region_free(&reg);
    gl_free(M);
    gl_free(C);
    gl_free(buf);
    gl_free(score);
    gl_free(rank);
    return st;
}
