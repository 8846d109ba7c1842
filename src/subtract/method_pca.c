/*
 * method_pca.c -- klip-frame, full-frame KLIP/PCA (Soummer, Pueyo & Larkin
 * 2012, ApJL 755, L28). The region between the mask radius and the outer
 * radius of every usable frame forms one row of the data matrix; the rows
 * are centred (each frame minus its own mean by default, as in the paper, or
 * each pixel minus its temporal mean); the KL basis of the basis rows
 * (science frames for ADI, reference frames for RDI, or both) is computed
 * once; each science frame minus its projection on the first K modes is its
 * residual. With ADI the basis holds the target frame itself: full-frame PCA
 * as in Amara & Quanz 2012 (MNRAS 427, 948), where a companion's own light
 * is partly in the basis. --basis-frames all-but-target / beyond-gap give
 * each frame a basis without it (sub_klip_local).
 *
 * All mode counts come from one basis in one pass: the counts are taken in
 * increasing order and each step removes only the modes added since the last
 * one, R_k = R_k' - C[:, k':k] Z[k':k, :], with C = T Z^T the projection
 * coefficients of the targets T. Memory: the matrix, the basis and one
 * residual buffer, whatever the number of counts.
 */
#include "subtract/internal.h"
#include "subtract/memo.h"

#include <math.h>
#include <omp.h>
#include <string.h>

static gl_status pca_run(const sub_ctx *c)
{
    const gl_subtract_params *p = c->p;
    gl_status st = GL_OK;
    /* a basis per frame, built without it: the per-target KLIP on one piece,
     * the whole region (method_annular.c) */
    if (p->basis_frames != GL_BASIS_ALL && !(c->nref > 0 && p->refs_use == GL_REFS_ONLY))
        return sub_klip_local(c, (c->r_out - c->r_in) * (1 + 1e-12), 1,
                              p->basis_frames == GL_BASIS_BEYOND_GAP ? p->gap_fwhm * p->fwhm : 0.0,
                              p->nearest, "klip-frame");
    sub_region reg = {0};
    sub_basis basis = {0};
    float *M = NULL, *coef = NULL;
    unsigned char *flags = NULL, *has_nan = NULL;
    long nrow = c->nframe + c->nref;

    st = sub_region_make(c->nx, c->ny, c->r_in, c->r_out, 1, 0, &reg);
    if (st)
        goto cleanup;
    long npr = reg.npix;
    M = c->memo
            ? gl_subtract_memo_buffer(c->memo, GL_SUBTRACT_MEMO_MATRIX, (size_t)nrow * (size_t)npr)
            : gl_malloc(sizeof(float) * (size_t)nrow * (size_t)npr);
    flags = gl_calloc((size_t)nrow, 1);
    has_nan = gl_calloc((size_t)nrow, 1);
    if (!M || !flags || !has_nan) {
        st = gl_error_nomem("PCA data matrix");
        goto cleanup;
    }
    int use_sci = !(c->nref > 0 && p->refs_use == GL_REFS_ONLY);
#pragma omp parallel for schedule(static)
    for (long i = 0; i < nrow; i++) {
        const float *src = i < c->nframe ? c->sci + (size_t)i * (size_t)c->npix
                                         : c->ref + (size_t)(i - c->nframe) * (size_t)c->npix;
        float *row = M + (size_t)i * (size_t)npr;
        int ok = i < c->nframe ? c->usable[i] : 1, nan = 0;
        for (long j = 0; j < npr; j++) {
            row[j] = ok ? src[reg.pix[j]] : NAN;
            nan |= isnan(row[j]);
        }
        has_nan[i] = (unsigned char)nan;
    }
    for (long i = 0; i < nrow; i++)
        flags[i] = i < c->nframe ? (unsigned char)(use_sci && c->usable[i]) : 1;
    sub_centre(M, nrow, npr, p->centring, flags);
    double t0 = omp_get_wtime(), t_la = 0;

    /* the basis rows are contiguous: science rows, then reference rows */
    long b0 = use_sci ? 0 : c->nframe;
    long nb = use_sci ? nrow : c->nref;
    long kmax = 0;
    for (int i = 0; i < p->nmodes; i++)
        kmax = GL_SUB_MAX(kmax, p->modes[i]);
    /* unusable science rows are zero and add nothing to the basis */
    st = sub_basis_build(M + (size_t)b0 * (size_t)npr, nb, npr, kmax, &basis);
    if (st)
        goto cleanup;
    if (basis.rank < kmax)
        gl_log(GL_LOG_WARN,
               "only %ld of the %ld KL modes asked for carry signal; the rest are left out",
               basis.rank, kmax);

    /* projection coefficients of the science frames: C = T Z^T */
    coef = gl_malloc(sizeof(float) * (size_t)c->nframe * (size_t)kmax);
    if (!coef) {
        st = gl_error_nomem("PCA coefficients");
        goto cleanup;
    }
    sub_gemm(c->nframe, kmax, npr, 1.0f, M, npr, basis.Z, npr, 1, 0.0f, coef, kmax);
    t_la = omp_get_wtime() - t0;
    gl_log(GL_LOG_DEBUG, "KL basis of %ld x %ld frames x pixels and coefficients: %.3f s", nb, npr,
           t_la);

    long sorted[GL_SUBTRACT_MAX_MODES];
    int order[GL_SUBTRACT_MAX_MODES], inv[GL_SUBTRACT_MAX_MODES];
    sub_modes_sorted(p, sorted, order);
    for (int i = 0; i < p->nmodes; i++)
        inv[order[i]] = i;
    long kdone = 0;
    for (int s = 0; s < p->nmodes; s++) {
        long k = sorted[s];
        if (k > kdone) {
            double t1 = omp_get_wtime();
            sub_gemm(c->nframe, npr, k - kdone, -1.0f, coef + kdone, kmax,
                     basis.Z + (size_t)kdone * (size_t)npr, npr, 0, 1.0f, M, npr);
            kdone = k;
            t_la += omp_get_wtime() - t1;
        }
        float *work = c->work;
#pragma omp parallel for schedule(static)
        for (long i = 0; i < c->nframe; i++) {
            float *out = work + (size_t)i * (size_t)c->npix;
            const float *in = c->sci + (size_t)i * (size_t)c->npix;
            const float *r = M + (size_t)i * (size_t)npr;
            if (!c->usable[i]) {
                for (long j = 0; j < c->npix; j++)
                    out[j] = NAN;
                continue;
            }
            /* one pass over the frame: the region's pixels come in
             * increasing order, NaN in the gaps between them and where the
             * input was NaN (read only for the frames that have any) */
            long q0 = 0;
            for (long j = 0; j < npr; j++) {
                long q = reg.pix[j];
                for (; q0 < q; q0++)
                    out[q0] = NAN;
                out[q] = has_nan[i] && isnan(in[q]) ? NAN : r[j];
                q0 = q + 1;
            }
            for (; q0 < c->npix; q0++)
                out[q0] = NAN;
        }
        st = c->sink(c->sink_data, inv[s], work);
        if (st)
            goto cleanup;
        gl_progress("KLIP modes", s + 1, p->nmodes);
    }
    {
        /* flops: covariance (n^2 p), basis (2 k n p), coefficients and
         * residual updates (2 k f p each) */
        double n = (double)nb, f = (double)c->nframe, P = (double)npr, k = (double)kmax;
        double gflop = (n * n * P + 2 * k * n * P + 4 * k * f * P) * 1e-9;
        gl_log(GL_LOG_DEBUG, "linear algebra: %.3f s for %.2f GFLOP (%.1f GFLOP/s)", t_la, gflop,
               gflop / (t_la > 0 ? t_la : 1e-9));
    }
cleanup:
    sub_region_free(&reg);
    sub_basis_free(&basis);
    if (!c->memo)
        gl_free(M);
    gl_free(coef);
    gl_free(flags);
    gl_free(has_nan);
    return st;
}

const sub_method sub_method_pca = {"klip-frame", 1, pca_run};
