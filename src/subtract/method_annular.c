/*
 * method_annular.c -- KLIP annulus by annulus (Soummer, Pueyo & Larkin 2012,
 * ApJL 755, L28, sec. 3, with the frame selection of Lafreniere et al. 2007,
 * ApJ 660, 770): the region is cut into rings --ring FWHM wide (optionally
 * into azimuthal sectors); in each piece every science frame is a target
 * whose reference library holds only the frames that rotated by at least
 * --gap FWHM at the ring's mid radius (arc length r |dtheta|), optionally the
 * nearest N of them in angle, plus the reference-star frames for RDI.
 *
 * Per piece the covariance of all rows is computed once (ssyrk tiles); each
 * target's KL basis comes from the eigendecomposition of its library's block
 * of that covariance, and its projection is written back as weights on the
 * library rows (see sub_target_weights), so a whole block of targets and all
 * mode counts are subtracted with one sgemm. Targets are processed in blocks
 * of fixed size, one block per thread at a time (static schedule), so
 * results do not depend on the thread count.
 *
 * Centring "temporal" subtracts the mean over all basis rows of the piece
 * (not per library): an approximation, stated in docs/subtract.md.
 */
#include "subtract/internal.h"

#include <cblas.h>
#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <string.h>

#define TARGET_BLOCK 8

typedef struct thread_ws {
    sub_eig_work *eig;
    float *W;  /* TARGET_BLOCK * nk x nall */
    float *R;  /* TARGET_BLOCK * nk x npr_max */
    long *lib; /* nall */
} thread_ws;

/* Library of target t (science row) in a piece at radius r: qualifying
 * science frames and/or all reference rows. */
static long piece_library(const sub_ctx *c, long t, double r, long *lib)
{
    const gl_subtract_params *p = c->p;
    long n = 0;
    if (!(c->nref > 0 && p->refs_use == GL_REFS_ONLY))
        n = gl_subtract_library_select(c->angles, c->usable, c->nframe, t, r, p->gap_fwhm * p->fwhm,
                                       p->nearest, lib);
    for (long i = 0; i < c->nref; i++)
        lib[n++] = c->nframe + i;
    return n;
}

/* Checks every library of every ring before any work: the smallest one must
 * hold the largest mode count. */
static gl_status check_libraries(const sub_ctx *c, double width, long nring, long kmax, long *lib)
{
    const gl_subtract_params *p = c->p;
    for (long k = 0; k < nring; k++) {
        double r_in = c->r_in + (double)k * width;
        double r_out = GL_SUB_MIN(c->r_out, r_in + width);
        double rmid = 0.5 * (r_in + r_out);
        for (long t = 0; t < c->nframe; t++) {
            if (!c->usable[t])
                continue;
            long n = piece_library(c, t, rmid, lib);
            if (n == 0)
                return gl_error_set(GL_ERR_USAGE,
                                    "--gap %g FWHM leaves frame %ld without reference frames at "
                                    "radius %.1f px (too little field rotation there): raise "
                                    "--mask-radius past that radius or lower --gap",
                                    p->gap_fwhm, t, rmid);
            if (n < kmax)
                return gl_error_set(GL_ERR_USAGE,
                                    "--modes %ld is larger than the %ld usable reference frames "
                                    "of frame %ld at radius %.1f px (--gap %g FWHM): use fewer "
                                    "modes, a larger --mask-radius or a smaller --gap",
                                    kmax, n, t, rmid, p->gap_fwhm);
        }
    }
    return GL_OK;
}

static gl_status annular_run(const sub_ctx *c)
{
    const gl_subtract_params *p = c->p;
    gl_status st = GL_OK;
    int nth = sub_max_threads();
    int nk = p->nmodes;
    long nall = c->nframe + c->nref;
    double width = p->ring_fwhm * p->fwhm;
    long nring = (long)ceil((c->r_out - c->r_in) / width - 1e-9);
    if (nring < 1)
        nring = 1;
    int nsect = p->sectors > 1 ? p->sectors : 1;
    long sorted[GL_SUBTRACT_MAX_MODES];
    int order[GL_SUBTRACT_MAX_MODES];
    sub_modes_sorted(p, sorted, order);
    long kmax = sorted[nk - 1];

    float *M = NULL, *store = NULL;
    double *C = NULL;
    unsigned char *flags = NULL;
    thread_ws *ws = gl_calloc((size_t)nth, sizeof *ws);
    long *lib0 = gl_malloc(sizeof(long) * (size_t)nall);
    gl_status *tst = gl_calloc((size_t)nth, sizeof *tst);
    sub_region *regs = NULL;
    double *covwork = NULL;
    if (!ws || !lib0 || !tst) {
        st = gl_error_nomem("annular workspace");
        goto cleanup;
    }
    st = check_libraries(c, width, nring, kmax, lib0);
    if (st)
        goto cleanup;

    /* plan: every piece's pixel list, once; the largest bounds the buffers */
    long npieces = nring * nsect, done = 0;
    regs = gl_calloc((size_t)npieces, sizeof *regs);
    covwork = gl_malloc(sizeof(double) * sub_covariance_work_size());
    if (!regs || !covwork) {
        st = gl_error_nomem("annular plan");
        goto cleanup;
    }
    long npr_max = 0;
    for (long k = 0; k < nring; k++) {
        double r_in = c->r_in + (double)k * width;
        for (int s = 0; s < nsect; s++) {
            st = sub_region_make(c->nx, c->ny, r_in, GL_SUB_MIN(c->r_out, r_in + width), nsect, s,
                                 &regs[k * nsect + s]);
            if (st)
                goto cleanup;
            npr_max = GL_SUB_MAX(npr_max, regs[k * nsect + s].npix);
        }
    }
    M = gl_malloc(sizeof(float) * (size_t)nall * (size_t)GL_SUB_MAX(npr_max, 1));
    C = gl_malloc(sizeof(double) * (size_t)nall * (size_t)nall);
    flags = gl_malloc((size_t)nall);
    store = nk == 1 ? c->work
                    : gl_malloc(sizeof(float) * (size_t)nk * (size_t)c->nframe * (size_t)c->npix);
    if (!M || !C || !flags || !store) {
        st = gl_error_nomem("annular data matrix");
        goto cleanup;
    }
    for (int t = 0; t < nth; t++) {
        st = sub_eig_work_new(nall, kmax, &ws[t].eig);
        if (st)
            goto cleanup;
        ws[t].W = gl_malloc(sizeof(float) * TARGET_BLOCK * (size_t)nk * (size_t)nall);
        ws[t].R =
            gl_malloc(sizeof(float) * TARGET_BLOCK * (size_t)nk * (size_t)GL_SUB_MAX(npr_max, 1));
        ws[t].lib = gl_malloc(sizeof(long) * (size_t)nall);
        if (!ws[t].W || !ws[t].R || !ws[t].lib) {
            st = gl_error_nomem("annular workspace");
            goto cleanup;
        }
    }
    for (size_t i = 0; i < (size_t)nk * (size_t)c->nframe * (size_t)c->npix; i++)
        store[i] = NAN;
    int use_sci = !(c->nref > 0 && p->refs_use == GL_REFS_ONLY);
    for (long i = 0; i < nall; i++)
        flags[i] = i < c->nframe ? (unsigned char)(use_sci && c->usable[i]) : 1;

    long ntb = (c->nframe + TARGET_BLOCK - 1) / TARGET_BLOCK;
    for (long k = 0; k < nring; k++) {
        double r_in = c->r_in + (double)k * width;
        double r_out = GL_SUB_MIN(c->r_out, r_in + width);
        double rmid = 0.5 * (r_in + r_out);
        for (int s = 0; s < nsect; s++) {
            const sub_region *reg = &regs[k * nsect + s];
            long npr = reg->npix;
            if (npr == 0)
                continue;
#pragma omp parallel for schedule(static)
            for (long i = 0; i < nall; i++) {
                const float *src = i < c->nframe
                                       ? c->sci + (size_t)i * (size_t)c->npix
                                       : c->ref + (size_t)(i - c->nframe) * (size_t)c->npix;
                float *row = M + (size_t)i * (size_t)npr;
                int ok = i < c->nframe ? c->usable[i] : 1;
                for (long j = 0; j < npr; j++)
                    row[j] = ok ? src[reg->pix[j]] : NAN;
            }
            sub_centre(M, nall, npr, p->centring, flags);
            st = sub_covariance(M, nall, npr, C, covwork);
            if (st)
                goto cleanup;

#pragma omp parallel for schedule(static)
            for (long b = 0; b < ntb; b++) {
                int tid = omp_get_thread_num();
                thread_ws *w = &ws[tid];
                if (tst[tid])
                    continue;
                long t0 = b * TARGET_BLOCK, t1 = GL_SUB_MIN(c->nframe, t0 + TARGET_BLOCK);
                long nt = t1 - t0;
                for (long t = t0; t < t1; t++) {
                    float *Wt = w->W + (size_t)(t - t0) * (size_t)nk * (size_t)nall;
                    if (!c->usable[t]) {
                        memset(Wt, 0, sizeof(float) * (size_t)nk * (size_t)nall);
                        continue;
                    }
                    long nlib = piece_library(c, t, rmid, w->lib);
                    gl_status e = sub_target_weights(C, nall, npr, w->lib, nlib, t, sorted, nk,
                                                     w->eig, Wt, NULL);
                    if (e)
                        tst[tid] = e;
                    for (int q = 0; q < nk; q++)
                        memcpy(w->R + ((size_t)(t - t0) * (size_t)nk + (size_t)q) * (size_t)npr,
                               M + (size_t)t * (size_t)npr, sizeof(float) * (size_t)npr);
                }
                /* residuals of the whole block, every mode count: R -= W M */
                cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, (int)(nt * nk), (int)npr,
                            (int)nall, -1.0f, w->W, (int)nall, M, (int)npr, 1.0f, w->R, (int)npr);
                for (long t = t0; t < t1; t++) {
                    if (!c->usable[t])
                        continue;
                    const float *in = c->sci + (size_t)t * (size_t)c->npix;
                    for (int q = 0; q < nk; q++) {
                        const float *r =
                            w->R + ((size_t)(t - t0) * (size_t)nk + (size_t)q) * (size_t)npr;
                        float *out =
                            store + ((size_t)q * (size_t)c->nframe + (size_t)t) * (size_t)c->npix;
                        for (long j = 0; j < npr; j++)
                            out[reg->pix[j]] = isnan(in[reg->pix[j]]) ? NAN : r[j];
                    }
                }
            }
            for (int t = 0; t < nth; t++)
                if (tst[t]) {
                    /* messages are per thread: restate it on this one */
                    st = gl_error_set(tst[t],
                                      "annular KLIP: eigendecomposition of a reference library "
                                      "failed at radius %.1f px",
                                      rmid);
                    goto cleanup;
                }
            gl_progress("annular KLIP", ++done, npieces);
        }
    }
    /* hand each count over in the order asked */
    for (int i = 0; i < nk; i++) {
        int q = order[i];
        if (store != c->work)
            memcpy(c->work, store + (size_t)q * (size_t)c->nframe * (size_t)c->npix,
                   sizeof(float) * (size_t)c->nframe * (size_t)c->npix);
        st = c->sink(c->sink_data, i, c->work);
        if (st)
            goto cleanup;
    }
cleanup:
    if (regs)
        for (long i = 0; i < nring * nsect; i++)
            sub_region_free(&regs[i]);
    gl_free(regs);
    gl_free(covwork);
    if (ws)
        for (int t = 0; t < nth; t++) {
            sub_eig_work_free(ws[t].eig);
            gl_free(ws[t].W);
            gl_free(ws[t].R);
            gl_free(ws[t].lib);
        }
    gl_free(ws);
    gl_free(lib0);
    gl_free(tst);
    gl_free(M);
    gl_free(C);
    gl_free(flags);
    if (store != c->work)
        gl_free(store);
    return st;
}

const sub_method sub_method_annular = {"annular", 1, annular_run};
