/*
 * method_annular.c -- KLIP with a reference library of its own for every
 * target frame (Soummer, Pueyo & Larkin 2012, ApJL 755, L28, sec. 3, with
 * the frame selection of Lafreniere et al. 2007, ApJ 660, 770).
 *
 * klip-rings: the region is cut into rings --ring FWHM wide (optionally into
 * --arcs azimuthal arcs); in each piece every science frame is a target whose
 * reference library holds only the frames that rotated by at least --gap FWHM
 * at the ring's mid radius (the distance r |dtheta| a source there moves),
 * optionally the closest N of them in angle, plus the reference-star frames
 * for RDI. klip-frame with --basis-frames all-but-target / beyond-gap is the
 * same computation on one piece, the whole region (the basis of frame i
 * built without frame i, or without the frames closer than the gap at the
 * region's mid radius).
 *
 * Per piece the covariance of all rows is computed once; each target's KL
 * basis comes from the eigendecomposition of its library's block of that
 * covariance, and its projection is written back as weights on the library
 * rows (see sub_target_weights), so a whole block of targets and all mode
 * counts are subtracted with one sgemm. Targets are processed in blocks of
 * fixed size, one block per thread at a time (static schedule), so results
 * do not depend on the thread count.
 *
 * Small libraries do not stop the run: a count larger than a library (or
 * than its non-zero eigenvalues) uses what the library holds, and a target
 * with no reference at all is NaN in that piece (left out of the
 * combination there). What was really used is reported per ring
 * (sub_report), for one summary warning and the product header.
 *
 * Mean removal "each-pixel" subtracts the mean over all basis rows of the
 * piece (not per library): an approximation, stated in docs/subtract.md.
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

long sub_library(const sub_ctx *c, long t, double r, double gap_px, long nearest, long *lib)
{
    const gl_subtract_params *p = c->p;
    long n = 0;
    if (!(c->nref > 0 && p->refs_use == GL_REFS_ONLY))
        n = gl_subtract_library_select(c->angles, c->usable, c->nframe, t, r, gap_px, nearest, lib);
    for (long i = 0; i < c->nref; i++)
        lib[n++] = c->nframe + i;
    return n;
}

void sub_report_free(sub_report *r)
{
    if (!r)
        return;
    gl_free(r->r_in);
    gl_free(r->r_out);
    gl_free(r->kmin);
    gl_free(r->kmax);
    gl_free(r->noref);
    memset(r, 0, sizeof *r);
}

gl_status sub_klip_local(const sub_ctx *c, double width, int nsect, double gap_px, long nearest,
                         const char *label)
{
    const gl_subtract_params *p = c->p;
    gl_status st = GL_OK;
    int nth = sub_max_threads();
    int nk = p->nmodes;
    long nall = c->nframe + c->nref;
    long nring = (long)ceil((c->r_out - c->r_in) / width - 1e-9);
    if (nring < 1)
        nring = 1;
    if (nsect < 1)
        nsect = 1;
    long sorted[GL_SUBTRACT_MAX_MODES];
    int order[GL_SUBTRACT_MAX_MODES];
    sub_modes_sorted(p, sorted, order);
    long kmax = sorted[nk - 1];

    float *M = NULL, *store = NULL;
    double *C = NULL;
    unsigned char *flags = NULL;
    thread_ws *ws = gl_calloc((size_t)nth, sizeof *ws);
    gl_status *tst = gl_calloc((size_t)nth, sizeof *tst);
    sub_region *regs = NULL;
    double *covwork = NULL;
    long *kused = NULL;
    sub_report *rep = c->report;
    if (!ws || !tst) {
        st = gl_error_nomem("annular workspace");
        goto cleanup;
    }

    /* plan: every piece's pixel list, once; the largest bounds the buffers */
    long npieces = nring * nsect, done = 0;
    regs = gl_calloc((size_t)npieces, sizeof *regs);
    covwork = gl_malloc(sizeof(double) * sub_covariance_work_size());
    /* modes really used by each (piece, target); -1: no reference */
    kused = gl_calloc((size_t)npieces * (size_t)c->nframe, sizeof(long));
    if (rep) {
        sub_report_free(rep);
        rep->nring = nring;
        rep->kasked = kmax;
        rep->r_in = gl_malloc(sizeof(double) * (size_t)nring);
        rep->r_out = gl_malloc(sizeof(double) * (size_t)nring);
        rep->kmin = gl_malloc(sizeof(long) * (size_t)nring);
        rep->kmax = gl_malloc(sizeof(long) * (size_t)nring);
        rep->noref = gl_calloc((size_t)nring, sizeof(long));
    }
    if (!regs || !covwork || !kused ||
        (rep && (!rep->r_in || !rep->r_out || !rep->kmin || !rep->kmax || !rep->noref))) {
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
                    long nlib = sub_library(c, t, rmid, gap_px, nearest, w->lib);
                    long *ku = &kused[(size_t)(k * nsect + s) * (size_t)c->nframe + (size_t)t];
                    gl_status e = sub_target_weights(C, nall, npr, w->lib, nlib, t, sorted, nk,
                                                     w->eig, Wt, ku);
                    if (e)
                        tst[tid] = e;
                    if (nlib == 0)
                        *ku = -1;
                    for (int q = 0; q < nk; q++)
                        memcpy(w->R + ((size_t)(t - t0) * (size_t)nk + (size_t)q) * (size_t)npr,
                               M + (size_t)t * (size_t)npr, sizeof(float) * (size_t)npr);
                }
                /* residuals of the whole block, every mode count: R -= W M */
                cblas_sgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, (int)(nt * nk), (int)npr,
                            (int)nall, -1.0f, w->W, (int)nall, M, (int)npr, 1.0f, w->R, (int)npr);
                for (long t = t0; t < t1; t++) {
                    /* no reference: no model, the frame is left out here */
                    if (!c->usable[t] ||
                        kused[(size_t)(k * nsect + s) * (size_t)c->nframe + (size_t)t] < 0)
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
                                      "%s: eigendecomposition of a reference library "
                                      "failed at radius %.1f px",
                                      label, rmid);
                    goto cleanup;
                }
            gl_progress(label, ++done, npieces);
        }
    }
    /* per ring: fewest and most modes used, frames without references */
    for (long k = 0; rep && k < nring; k++) {
        rep->r_in[k] = c->r_in + (double)k * width;
        rep->r_out[k] = GL_SUB_MIN(c->r_out, rep->r_in[k] + width);
        rep->kmin[k] = -1;
        rep->kmax[k] = -1;
        for (int s = 0; s < nsect; s++) {
            if (regs[k * nsect + s].npix == 0)
                continue;
            for (long t = 0; t < c->nframe; t++) {
                if (!c->usable[t])
                    continue;
                long u = kused[(size_t)(k * nsect + s) * (size_t)c->nframe + (size_t)t];
                if (u < 0) {
                    rep->noref[k]++;
                    continue;
                }
                rep->kmin[k] = rep->kmin[k] < 0 ? u : GL_SUB_MIN(rep->kmin[k], u);
                rep->kmax[k] = GL_SUB_MAX(rep->kmax[k], u);
            }
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
    gl_free(tst);
    gl_free(kused);
    gl_free(M);
    gl_free(C);
    gl_free(flags);
    if (store != c->work)
        gl_free(store);
    return st;
}

static gl_status rings_run(const sub_ctx *c)
{
    const gl_subtract_params *p = c->p;
    return sub_klip_local(c, p->ring_fwhm * p->fwhm, p->sectors, p->gap_fwhm * p->fwhm, p->nearest,
                          "klip-rings");
}

const sub_method sub_method_annular = {"klip-rings", 1, rings_run};
