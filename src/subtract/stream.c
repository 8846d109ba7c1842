/*
 * stream.c -- the subtraction of a cube larger than memory, read piece by
 * piece from its FITS file (gl_subtract_run_streamed): full-frame KLIP/PCA
 * (Soummer, Pueyo & Larkin 2012, ApJL 755, L28) and classical median ADI
 * (Marois et al. 2006, ApJ 641, 556), with the semantics of the in-memory
 * methods (method_pca.c, method_median.c, combine.c).
 *
 * Passes over the file:
 *  0. frame blocks: which frames hold data in the region, and (PCA, frame
 *     centring) each frame's mean over the region;
 *  1. row chunks of every frame (the out-of-core transpose):
 *     PCA: the covariance X X^T, fed in the same 2048-pixel column chunks as
 *     the in-memory sub_covariance (so bit-identical), then its eigenpairs;
 *     median ADI: the per-pixel median frame (exact);
 *  2. row chunks again (PCA): the KL modes Z = Lambda^-1/2 V^T X chunk by
 *     chunk;
 *  3. frame blocks: residuals for every mode count (coefficients, then
 *     R -= C Z count after count, as in memory), derotated, then either
 *     added to per-pixel sums (mean, weighted mean: the same sums in the same
 *     frame order, so the same result) or, for the median combination,
 *     written to a temporary file in $TMPDIR (or /tmp; nplanes x nframes x
 *     frame floats, unlinked as soon as it is made, so nothing is left
 *     behind);
 *  4. (median combination) row chunks of that file: the exact per-pixel
 *     median of the derotated residuals, as in memory.
 * Frame blocks hold a multiple of 128 frames whenever the memory allows, the
 * row tiles of the in-memory matrix products, so results are then
 * bit-identical to gl_subtract_run's; smaller blocks change the last float
 * bits of the projections only (float rounding).
 *
 * Memory: the fixed part (covariance and its eigen work, the modes, the
 * output planes and sums, one column chunk per frame) plus one frame block
 * or row chunk sized to what the limit leaves. Not covered: reference cubes,
 * 4-D cubes, the annular method and residual cubes (they need the whole
 * cube); the caller is told so.
 */
#include "core/internal.h"
#include "io/internal.h"
#include "subtract/combine.h"

#include <errno.h>
#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#define ROW_TILE 128      /* TILE_M of klip.c: frame blocks aligned to it */
#define COMBINE_STACKS 16 /* the sink's per-thread median stacks (combine.c) */

double gl_subtract_memory_estimate(long nx, long ny, long nchan, long nframe,
                                   const gl_subtract_params *p)
{
    double cube = 4.0 * (double)nx * (double)ny * (double)nchan * (double)nframe;
    double frames = 4.0 * (double)nx * (double)ny * (double)nframe;
    double planes =
        p->method == GL_SUBTRACT_MEDIAN || p->method == GL_SUBTRACT_NONE ? 1 : p->nmodes;
    /* the cube, the residual buffer, the region matrix (PCA, annular) or the
     * store of every mode count (annular), residual cubes when asked for */
    double est = cube + frames;
    if (p->method == GL_SUBTRACT_PCA || p->method == GL_SUBTRACT_ANNULAR)
        est += frames;
    if (p->method == GL_SUBTRACT_ANNULAR && planes > 1)
        est += planes * frames;
    if (p->method == GL_SUBTRACT_PCA)
        est += 16.0 * (double)nframe * (double)nframe;
    est += (p->keep_residuals + p->keep_raw_residuals) * planes * frames;
    if (planes > 1) /* the kept derotation masks: 2 bits per pixel and frame */
        est += frames / 16;
    return est;
}

typedef struct stream_run {
    const gl_subtract_params *p;
    gl_fits_stream *fs;
    long nx, ny, npix, nf;
    int nplanes;
    sub_ctx c; /* the whole sequence (angles, usable, radii) */
    sub_region reg;
    float *fmean;    /* nf: per-frame region mean (frame centring) */
    float *colmean;  /* npr: per-pixel mean (temporal centring) */
    long rows;       /* rows per row chunk */
    long block;      /* frames per frame block */
    double *covwork; /* sub_covariance_work_size() */
} stream_run;

/* The frame is usable when a pixel of the region (r_in <= r < r_out) holds
 * data: the rule of gl_subtract_run, with its hypot. */
static int frame_usable(const stream_run *r, const float *f)
{
    double cx = (double)(r->nx / 2), cy = (double)(r->ny / 2);
    for (long y = 0; y < r->ny; y++)
        for (long x = 0; x < r->nx; x++) {
            double d = hypot((double)x - cx, (double)y - cy);
            if (d >= r->c.r_in && d < r->c.r_out && !isnan(f[y * r->nx + x]))
                return 1;
        }
    return 0;
}

/* Pass 0: usable frames and per-frame region means. */
static gl_status pass_frames_info(stream_run *r, float *buf, unsigned char *usable)
{
    for (long f0 = 0; f0 < r->nf; f0 += r->block) {
        long nb = GL_MIN(r->block, r->nf - f0);
        gl_status st = gl_fits_stream_frames(r->fs, f0, nb, buf);
        if (st)
            return st;
#pragma omp parallel for schedule(static)
        for (long b = 0; b < nb; b++) {
            const float *f = buf + (size_t)b * (size_t)r->npix;
            long i = f0 + b;
            usable[i] = (unsigned char)frame_usable(r, f);
            if (!r->fmean)
                continue;
            /* as sub_centre (frame): double sum over the region in pixel
             * order; an unusable frame is all NaN there, mean 0 */
            double s = 0;
            long n = 0;
            for (long j = 0; usable[i] && j < r->reg.npix; j++) {
                float v = f[r->reg.pix[j]];
                if (!isnan(v)) {
                    s += v;
                    n++;
                }
            }
            r->fmean[i] = n ? (float)(s / (double)n) : 0.0f;
        }
        gl_progress("streamed: frames", f0 + nb, r->nf);
    }
    return GL_OK;
}

/* Row chunk rows [y0, y0 + nrows) of every frame are in buf; the region
 * pixels [j0, j1) (plane indices inside the chunk) are written, centred as
 * sub_centre does, into columns j - c0 of X (nf x ldx). */
static void chunk_centred(const stream_run *r, const float *buf, long y0, long nrows, long j0,
                          long j1, long c0, float *X, long ldx)
{
    const gl_subtract_params *p = r->p;
    size_t run = (size_t)nrows * (size_t)r->nx, base = (size_t)y0 * (size_t)r->nx;
    if (p->centring == GL_CENTRE_TEMPORAL) {
#pragma omp parallel for schedule(static)
        for (long j = j0; j < j1; j++) {
            size_t q = (size_t)r->reg.pix[j] - base;
            double s = 0;
            long n = 0;
            for (long i = 0; i < r->nf; i++) {
                float v = r->c.usable[i] ? buf[(size_t)i * run + q] : NAN;
                if (r->c.usable[i] && !isnan(v)) {
                    s += v;
                    n++;
                }
            }
            float m = n ? (float)(s / (double)n) : 0.0f;
            r->colmean[j] = m;
            for (long i = 0; i < r->nf; i++) {
                float v = r->c.usable[i] ? buf[(size_t)i * run + q] : NAN;
                X[(size_t)i * (size_t)ldx + (size_t)(j - c0)] = isnan(v) ? 0.0f : v - m;
            }
        }
        return;
    }
#pragma omp parallel for schedule(static)
    for (long i = 0; i < r->nf; i++) {
        const float *src = buf + (size_t)i * run;
        float *row = X + (size_t)i * (size_t)ldx;
        float m = r->fmean[i];
        for (long j = j0; j < j1; j++) {
            float v = r->c.usable[i] ? src[(size_t)r->reg.pix[j] - base] : NAN;
            row[j - c0] = isnan(v) ? 0.0f : v - m;
        }
    }
}

/* Passes 1 and 2 of PCA: the region's centred columns, chunk by chunk of
 * sub_covariance_chunk_width() columns, to the covariance (Vs == NULL) or to
 * the modes Z = Vs X (kmax rows). */
static gl_status pass_columns(stream_run *r, float *buf, float *X, double *C, const double *Vs,
                              long kmax, float *Z, double *zwork)
{
    long W = sub_covariance_chunk_width(), npr = r->reg.npix;
    long jr = 0, c0 = 0; /* next region pixel, start of the current chunk */
    for (long y0 = 0; y0 < r->ny; y0 += r->rows) {
        long nrows = GL_MIN(r->rows, r->ny - y0);
        long hi = (y0 + nrows) * r->nx; /* plane indices below hi are in this chunk */
        if (jr >= npr)
            break;
        if (r->reg.pix[jr] >= hi)
            continue;
        gl_status st = gl_fits_stream_rows(r->fs, y0, nrows, buf);
        if (st)
            return st;
        while (jr < npr && r->reg.pix[jr] < hi) {
            long j1 = jr;
            while (j1 < npr && r->reg.pix[j1] < hi && j1 < c0 + W)
                j1++;
            chunk_centred(r, buf, y0, nrows, jr, j1, c0, X, W);
            jr = j1;
            if (jr == c0 + W || jr == npr) {
                long w = jr - c0;
                if (!Vs)
                    sub_covariance_chunk(X, W, r->nf, w, c0 == 0, C, r->covwork);
                else
                    sub_basis_rows_chunk(Vs, kmax, X, W, r->nf, w, Z + c0, npr, zwork);
                c0 = jr;
            }
        }
        gl_progress(Vs ? "streamed: KL modes" : "streamed: covariance", y0 + nrows, r->ny);
    }
    return GL_OK;
}

/* Where the derotated residuals of one block go. */
typedef struct stream_out {
    double *sw, *swx; /* nplanes x npix sums (mean, weighted) */
    FILE *spill;      /* median: nplanes x nf x npix floats */
} stream_out;

/* Block frames f0.. (in sink->c) of plane q: derotated in resid; add them
 * to the sums or spill them. */
static gl_status block_out(stream_run *r, sub_sink *sink, int q, long f0, float *resid,
                           stream_out *o)
{
    const sub_ctx *cb = sink->c;
    const gl_subtract_params *p = r->p;
    size_t plane = (size_t)r->npix;
    if (p->combine == GL_COMBINE_WEIGHTED)
        sub_sink_weights(sink, resid);
    gl_status st = sub_sink_derotate(sink, resid);
    if (st)
        return st;
    if (p->combine == GL_COMBINE_MEDIAN) {
        off_t at = (off_t)(((size_t)q * (size_t)r->nf + (size_t)f0) * plane * sizeof(float));
        size_t n = (size_t)cb->nframe * plane;
        if (fseeko(o->spill, at, SEEK_SET) != 0 || fwrite(resid, sizeof(float), n, o->spill) != n)
            return gl_error_set(GL_ERR_IO,
                                "cannot write the temporary residual file in %s (%s): set "
                                "TMPDIR to a folder with room for %.0f MB",
                                getenv("TMPDIR") ? getenv("TMPDIR") : "/tmp", strerror(errno),
                                (double)r->nplanes * (double)r->nf * (double)plane * 4 / 1e6);
        return GL_OK;
    }
    double *sw = o->sw + (size_t)q * plane, *swx = o->swx + (size_t)q * plane;
#pragma omp parallel for schedule(static)
    for (long j = 0; j < r->npix; j++) {
        for (long b = 0; b < cb->nframe; b++) {
            float v = resid[(size_t)b * plane + (size_t)j];
            if (!cb->usable[b] || isnan(v))
                continue;
            double w = p->combine == GL_COMBINE_WEIGHTED
                           ? sink->weights[(size_t)b * (size_t)sink->nring + (size_t)sink->ring[j]]
                           : 1.0;
            sw[j] += w;
            swx[j] += w * v;
        }
    }
    return GL_OK;
}

/* Pass 3 of PCA. */
static gl_status pass_pca_residuals(stream_run *r, sub_sink *sink, sub_ctx *cb, const float *Z,
                                    long kmax, float *raw, float *M, float *work, float *coef,
                                    stream_out *o)
{
    const gl_subtract_params *p = r->p;
    long npr = r->reg.npix;
    size_t plane = (size_t)r->npix;
    long sorted[GL_SUBTRACT_MAX_MODES];
    int order[GL_SUBTRACT_MAX_MODES], inv[GL_SUBTRACT_MAX_MODES];
    sub_modes_sorted(p, sorted, order);
    for (int i = 0; i < p->nmodes; i++)
        inv[order[i]] = i;
    for (long f0 = 0; f0 < r->nf; f0 += r->block) {
        long nb = GL_MIN(r->block, r->nf - f0);
        gl_status st = gl_fits_stream_frames(r->fs, f0, nb, raw);
        if (st)
            return st;
        cb->nframe = nb;
        cb->angles = r->c.angles + f0;
        cb->usable = r->c.usable + f0;
#pragma omp parallel for schedule(static)
        for (long b = 0; b < nb; b++) {
            const float *src = raw + (size_t)b * plane;
            float *row = M + (size_t)b * (size_t)npr;
            int ok = r->c.usable[f0 + b];
            for (long j = 0; j < npr; j++) {
                float v = ok ? src[r->reg.pix[j]] : NAN;
                float m = p->centring == GL_CENTRE_TEMPORAL ? r->colmean[j] : r->fmean[f0 + b];
                row[j] = isnan(v) ? 0.0f : v - m;
            }
        }
        sub_gemm(nb, kmax, npr, 1.0f, M, npr, Z, npr, 1, 0.0f, coef, kmax);
        long kdone = 0;
        for (int s = 0; s < p->nmodes; s++) {
            long k = sorted[s];
            if (k > kdone) {
                sub_gemm(nb, npr, k - kdone, -1.0f, coef + kdone, kmax, Z + (size_t)kdone * npr,
                         npr, 0, 1.0f, M, npr);
                kdone = k;
            }
#pragma omp parallel for schedule(static)
            for (long b = 0; b < nb; b++) {
                float *out = work + (size_t)b * plane;
                const float *in = raw + (size_t)b * plane;
                const float *res = M + (size_t)b * (size_t)npr;
                for (size_t j = 0; j < plane; j++)
                    out[j] = NAN;
                if (!r->c.usable[f0 + b])
                    continue;
                for (long j = 0; j < npr; j++)
                    out[r->reg.pix[j]] = isnan(in[r->reg.pix[j]]) ? NAN : res[j];
            }
            st = block_out(r, sink, inv[s], f0, work, o);
            if (st)
                return st;
        }
        gl_progress("streamed: residuals", f0 + nb, r->nf);
    }
    return GL_OK;
}

/* Ring of each pixel as method_median.c numbers them (-1 outside). */
static void median_rings(const stream_run *r, int *ring, long *nring_out)
{
    double width = r->p->ring_fwhm * r->p->fwhm;
    long nring = (long)ceil((r->c.r_out - r->c.r_in) / width);
    if (nring < 1)
        nring = 1;
    double cx = (double)(r->nx / 2), cy = (double)(r->ny / 2);
    for (long y = 0; y < r->ny; y++)
        for (long x = 0; x < r->nx; x++) {
            double d = hypot((double)x - cx, (double)y - cy);
            long k = (long)floor((d - r->c.r_in) / width);
            ring[y * r->nx + x] =
                (d < r->c.r_in || d >= r->c.r_out) ? -1 : (int)GL_SUB_MIN(k, nring - 1);
        }
    *nring_out = nring;
}

/* Median ADI, passes 1 and 3: the median frame by row chunks, then the
 * residual of every frame (optionally the median scaled ring by ring). */
static gl_status run_median(stream_run *r, sub_sink *sink, sub_ctx *cb, float **bufp, float **rawp,
                            float **workp, stream_out *o)
{
    const gl_subtract_params *p = r->p;
    gl_status st = GL_OK;
    int nth = sub_max_threads();
    size_t plane = (size_t)r->npix;
    long nring = 0;
    float *model = gl_malloc(sizeof(float) * plane);
    int *ring = gl_malloc(sizeof(int) * plane);
    float *scratch = gl_malloc(sizeof(float) * (size_t)nth * (size_t)r->nf);
    double *sums = NULL;
    if (!model || !ring || !scratch) {
        st = gl_error_nomem("median model");
        goto cleanup;
    }
    median_rings(r, ring, &nring);
    sums = gl_malloc(sizeof(double) * 2 * (size_t)nring * (size_t)nth);
    float *buf = *bufp = gl_malloc(sizeof(float) * (size_t)r->nf * (size_t)r->rows * (size_t)r->nx);
    if (!sums || !buf) {
        st = gl_error_nomem("median model");
        goto cleanup;
    }
    for (long y0 = 0; y0 < r->ny; y0 += r->rows) {
        long nrows = GL_MIN(r->rows, r->ny - y0);
        size_t run = (size_t)nrows * (size_t)r->nx, base = (size_t)y0 * (size_t)r->nx;
        if ((st = gl_fits_stream_rows(r->fs, y0, nrows, buf)))
            goto cleanup;
#pragma omp parallel for schedule(static)
        for (size_t q = 0; q < run; q++) {
            float *b = scratch + (size_t)omp_get_thread_num() * (size_t)r->nf;
            if (ring[base + q] < 0) {
                model[base + q] = NAN;
                continue;
            }
            for (long i = 0; i < r->nf; i++)
                b[i] = r->c.usable[i] ? buf[(size_t)i * run + q] : NAN;
            model[base + q] = sub_nanmedian(b, r->nf);
        }
        gl_progress("streamed: median frame", y0 + nrows, r->ny);
    }
    gl_free(buf);
    *bufp = NULL;
    float *raw = *rawp = gl_malloc(sizeof(float) * (size_t)r->block * plane);
    float *work = *workp = gl_malloc(sizeof(float) * (size_t)r->block * plane);
    if (!raw || !work) {
        st = gl_error_nomem("residual block");
        goto cleanup;
    }
    for (long f0 = 0; f0 < r->nf; f0 += r->block) {
        long nb = GL_MIN(r->block, r->nf - f0);
        if ((st = gl_fits_stream_frames(r->fs, f0, nb, raw)))
            goto cleanup;
        cb->nframe = nb;
        cb->angles = r->c.angles + f0;
        cb->usable = r->c.usable + f0;
#pragma omp parallel for schedule(static)
        for (long b = 0; b < nb; b++) {
            double *s = sums + (size_t)omp_get_thread_num() * 2 * (size_t)nring;
            const float *in = raw + (size_t)b * plane;
            float *out = work + (size_t)b * plane;
            for (long k = 0; k < 2 * nring; k++)
                s[k] = p->median_fit ? 0.0 : 1.0;
            if (p->median_fit)
                for (size_t j = 0; j < plane; j++)
                    if (ring[j] >= 0 && !isnan(in[j]) && !isnan(model[j])) {
                        s[2 * ring[j]] += (double)in[j] * model[j];
                        s[2 * ring[j] + 1] += (double)model[j] * model[j];
                    }
            for (size_t j = 0; j < plane; j++) {
                if (ring[j] < 0 || !r->c.usable[f0 + b]) {
                    out[j] = NAN;
                    continue;
                }
                double den = s[2 * ring[j] + 1];
                double a = den > 0 ? s[2 * ring[j]] / den : 1.0;
                out[j] = in[j] - (float)a * model[j];
            }
        }
        if ((st = block_out(r, sink, 0, f0, work, o)))
            goto cleanup;
        gl_progress("streamed: residuals", f0 + nb, r->nf);
    }
cleanup:
    gl_free(model);
    gl_free(ring);
    gl_free(scratch);
    gl_free(sums);
    return st;
}

/* Pass 4: per-pixel medians of the spilled residuals, row chunk by chunk. */
static gl_status pass_spill_median(stream_run *r, FILE *spill, float *buf, gl_cube *image)
{
    int nth = sub_max_threads();
    size_t plane = (size_t)r->npix;
    float *scratch = gl_malloc(sizeof(float) * (size_t)nth * (size_t)r->nf);
    if (!scratch)
        return gl_error_nomem("median stacks");
    gl_status st = GL_OK;
    for (int q = 0; q < r->nplanes && !st; q++)
        for (long y0 = 0; y0 < r->ny && !st; y0 += r->rows) {
            long nrows = GL_MIN(r->rows, r->ny - y0);
            size_t run = (size_t)nrows * (size_t)r->nx, base = (size_t)y0 * (size_t)r->nx;
            for (long i = 0; i < r->nf; i++) {
                off_t at = (off_t)((((size_t)q * (size_t)r->nf + (size_t)i) * plane + base) *
                                   sizeof(float));
                if (fseeko(spill, at, SEEK_SET) != 0 ||
                    fread(buf + (size_t)i * run, sizeof(float), run, spill) != run) {
                    st = gl_error_set(GL_ERR_IO, "cannot read back the temporary residual file");
                    break;
                }
            }
            if (st)
                break;
            float *out = image->data + (size_t)q * plane + base;
#pragma omp parallel for schedule(static)
            for (size_t j = 0; j < run; j++) {
                float *b = scratch + (size_t)omp_get_thread_num() * (size_t)r->nf;
                long n = 0;
                for (long i = 0; i < r->nf; i++)
                    if (r->c.usable[i])
                        b[n++] = buf[(size_t)i * run + j];
                out[j] = sub_nanmedian(b, n);
            }
            gl_progress("streamed: median", (long)q * r->ny + y0 + nrows, r->nplanes * r->ny);
        }
    gl_free(scratch);
    return st;
}

/* Field rotation and mode checks of gl_subtract_run. */
static gl_status check_sequence(const stream_run *r, long kmax)
{
    const gl_subtract_params *p = r->p;
    double lo = 0, hi = 0, cur = 0, prev = NAN;
    for (long i = 0; i < r->nf; i++) {
        if (!r->c.usable[i])
            continue;
        if (!isnan(prev)) {
            double d = fmod(r->c.angles[i] - prev, 360.0);
            d += d > 180 ? -360 : (d < -180 ? 360 : 0);
            cur += d;
            lo = GL_SUB_MIN(lo, cur);
            hi = GL_SUB_MAX(hi, cur);
        }
        prev = r->c.angles[i];
    }
    if (!(hi - lo > 1e-6))
        return gl_error_set(GL_ERR_USAGE,
                            "the parallactic angles do not change (zero field "
                            "rotation): method %s needs field rotation",
                            gl_subtract_method_name(p->method));
    long allowed = r->c.nusable - (p->centring == GL_CENTRE_TEMPORAL ? 1 : 0);
    if (p->method == GL_SUBTRACT_PCA && kmax > allowed)
        return gl_error_set(GL_ERR_USAGE,
                            "--modes %ld is larger than the %ld usable frames of the basis", kmax,
                            allowed);
    if (p->method == GL_SUBTRACT_PCA && r->nf > r->reg.npix)
        return gl_error_set(GL_ERR_USAGE,
                            "the streamed PCA needs fewer frames (%ld) than region pixels (%ld)",
                            r->nf, r->reg.npix);
    return GL_OK;
}

gl_status gl_subtract_run_streamed(const char *path, const double *angles,
                                   const gl_subtract_params *p, double memory_limit,
                                   gl_subtract_result *out)
{
    gl_status st = GL_OK;
    stream_run r = {0};
    unsigned char *usable = NULL;
    double *C = NULL;
    double *Vs = NULL, *zwork = NULL;
    float *Z = NULL, *X = NULL, *buf = NULL, *raw = NULL, *M = NULL, *work = NULL;
    float *coef = NULL;
    sub_basis basis = {0};
    sub_sink *sink = NULL;
    stream_out o = {0};
    gl_subtract_result res = {0};
    memset(out, 0, sizeof *out);

    if ((st = gl_subtract_params_check(p)))
        return st;
    if (p->method != GL_SUBTRACT_PCA && p->method != GL_SUBTRACT_MEDIAN)
        return gl_error_set(GL_ERR_USAGE,
                            "%s: the cube does not fit in --memory-limit %.0f MB, and only "
                            "--method klip-frame and median-frame run streamed from the file",
                            path, memory_limit / 1e6);
    if (p->method == GL_SUBTRACT_PCA && p->basis_frames != GL_BASIS_ALL)
        return gl_error_set(GL_ERR_USAGE,
                            "%s: the cube does not fit in --memory-limit %.0f MB; the streamed "
                            "path builds one basis from all frames (--basis-frames all)",
                            path, memory_limit / 1e6);
    if (p->keep_residuals || p->keep_raw_residuals)
        return gl_error_set(GL_ERR_USAGE,
                            "%s: the cube does not fit in --memory-limit %.0f MB; residual "
                            "cubes are not written by the streamed path",
                            path, memory_limit / 1e6);
    r.p = p;
    if ((st = gl_fits_stream_open(path, &r.fs)))
        return st;
    long nchan;
    gl_fits_stream_shape(r.fs, &r.nx, &r.ny, &nchan, &r.nf);
    if (nchan != 1) {
        st = gl_error_set(GL_ERR_USAGE,
                          "%s: the cube does not fit in --memory-limit %.0f MB, and the streamed "
                          "path reads 3-D cubes only (this one has %ld channels)",
                          path, memory_limit / 1e6, nchan);
        goto cleanup;
    }
    if (r.nf < 2) {
        st = gl_error_set(GL_ERR_INPUT, "%s: a sequence of at least 2 frames is needed", path);
        goto cleanup;
    }
    for (long i = 0; i < r.nf; i++)
        if (!isfinite(angles[i])) {
            st = gl_error_set(GL_ERR_INPUT, "angle of frame %ld is not finite", i);
            goto cleanup;
        }
    r.npix = r.nx * r.ny;
    r.nplanes = p->method == GL_SUBTRACT_PCA ? p->nmodes : 1;
    double cx = (double)(r.nx / 2), cy = (double)(r.ny / 2);
    double rmax = GL_SUB_MIN(GL_SUB_MIN(cx, cy), GL_SUB_MIN((double)r.nx - cx, (double)r.ny - cy));
    r.c.p = p;
    r.c.nx = r.nx;
    r.c.ny = r.ny;
    r.c.npix = r.npix;
    r.c.nframe = r.nf;
    r.c.nchan = 1;
    r.c.angles = angles;
    r.c.r_in = p->mask_radius >= 0 ? p->mask_radius : 0.0; /* automatic: 0 for these methods */
    r.c.r_out = p->outer_radius > 0 ? GL_SUB_MIN(p->outer_radius, rmax) : rmax;
    if (r.c.r_in >= r.c.r_out) {
        st = gl_error_set(GL_ERR_USAGE,
                          "--mask-radius %g px leaves nothing inside the outer radius %g px",
                          r.c.r_in, r.c.r_out);
        goto cleanup;
    }
    if ((st = sub_region_make(r.nx, r.ny, r.c.r_in, r.c.r_out, 1, 0, &r.reg)))
        goto cleanup;
    long kmax = 0;
    for (int i = 0; i < p->nmodes; i++)
        kmax = GL_SUB_MAX(kmax, p->modes[i]);
    if (p->method != GL_SUBTRACT_PCA)
        kmax = 0;

    /* memory: the fixed part, then blocks and chunks from what is left. The
     * budget counts one thread's work space, so that block and chunk sizes,
     * and with them the last bits of the projections, do not depend on the
     * thread count; each further thread adds its derotation and covariance
     * work (docs/subtract.md) */
    int nth = 1;
    double plane = 4.0 * (double)r.npix, nf = (double)r.nf;
    /* output planes, ring maps and median frame (3 planes), region list */
    double fixed = (r.nplanes + 3) * plane + 8.0 * (double)r.reg.npix;
    if (p->combine != GL_COMBINE_MEDIAN)
        fixed += 4.0 * r.nplanes * plane; /* two double sums per plane */
    if (p->method == GL_SUBTRACT_PCA)
        fixed += 16.0 * nf * nf + 8.0 * kmax * nf + 4.0 * kmax * (double)r.reg.npix + 4.0 * nf +
                 8.0 * GL_SUB_MAX((double)sub_basis_rows_work_size(r.nf, kmax),
                                  (double)sub_covariance_work_size() / sub_max_threads()) +
                 4.0 * nf * (double)sub_covariance_chunk_width() + 4.0 * (double)r.reg.npix;
    /* derotation work per thread: the padded square (4 frames) and 3 more */
    fixed += nth * 7.0 * plane + 4.0 * nth * COMBINE_STACKS * nf;
    double left = memory_limit - fixed;
    double per_frame = 3 * plane + 4.0 * (double)kmax, per_row = 4.0 * nf * (double)r.nx;
    if (left < per_frame || left < per_row) {
        st = gl_error_set(GL_ERR_USAGE,
                          "--memory-limit %.1f MB is too small for %s streamed: at least %.1f MB "
                          "are needed",
                          memory_limit / 1e6, path,
                          (fixed + GL_SUB_MAX(per_frame, per_row)) / 1e6 + 0.1);
        goto cleanup;
    }
    r.block = (long)GL_SUB_MIN(nf, floor(left / per_frame));
    if (r.block >= ROW_TILE)
        r.block = r.block / ROW_TILE * ROW_TILE;
    r.rows = (long)GL_SUB_MIN((double)r.ny, floor(left / per_row));
    gl_log(GL_LOG_INFO,
           "%s: streamed from the file (in memory it would need about %.0f MB): blocks of %ld "
           "frames, chunks of %ld rows",
           path, gl_subtract_memory_estimate(r.nx, r.ny, 1, r.nf, p) / 1e6, r.block, r.rows);

    usable = gl_calloc((size_t)r.nf, 1);
    raw = gl_malloc(sizeof(float) * (size_t)r.block * (size_t)r.npix);
    if (p->method == GL_SUBTRACT_PCA && p->centring == GL_CENTRE_FRAME)
        r.fmean = gl_malloc(sizeof(float) * (size_t)r.nf);
    if (!usable || !raw ||
        (p->method == GL_SUBTRACT_PCA && p->centring == GL_CENTRE_FRAME && !r.fmean)) {
        st = gl_error_nomem("streamed subtraction");
        goto cleanup;
    }
    if ((st = pass_frames_info(&r, raw, usable)))
        goto cleanup;
    /* passes hold either a frame block or a row chunk, never both */
    gl_free(raw);
    raw = NULL;
    r.c.usable = usable;
    for (long i = 0; i < r.nf; i++)
        r.c.nusable += usable[i];
    if ((st = sub_usable_check(&r.c, path)))
        goto cleanup;
    if ((st = check_sequence(&r, kmax)))
        goto cleanup;

    /* the combination: output planes, sums or the temporary file, a sink
     * for blocks (geometry plans and weights) */
    if ((st = gl_cube_new(r.nx, r.ny, 1, r.nplanes, &res.image)))
        goto cleanup;
    if (p->combine == GL_COMBINE_MEDIAN) {
        const char *dir = getenv("TMPDIR") && *getenv("TMPDIR") ? getenv("TMPDIR") : "/tmp";
        char tmpl[4096];
        snprintf(tmpl, sizeof tmpl, "%s/gloam-residuals-XXXXXX", dir);
        int fd = mkstemp(tmpl);
        if (fd >= 0) {
            unlink(tmpl);
            o.spill = fdopen(fd, "w+b");
            if (!o.spill)
                close(fd);
        }
        if (!o.spill) {
            st = gl_error_set(GL_ERR_IO, "cannot make a temporary residual file in %s (%s)", dir,
                              strerror(errno));
            goto cleanup;
        }
    } else {
        o.sw = gl_calloc((size_t)r.nplanes * (size_t)r.npix, sizeof(double));
        o.swx = gl_calloc((size_t)r.nplanes * (size_t)r.npix, sizeof(double));
        if (!o.sw || !o.swx) {
            st = gl_error_nomem("combination sums");
            goto cleanup;
        }
    }
    sub_ctx cb = r.c; /* the block's view of the sequence, moved block by block */
    cb.nframe = r.block;
    if ((st = sub_sink_new(&cb, res.image, NULL, NULL, &sink)))
        goto cleanup;

    if (p->method == GL_SUBTRACT_PCA) {
        long W = sub_covariance_chunk_width();
        C = gl_malloc(sizeof(double) * (size_t)r.nf * (size_t)r.nf);
        X = gl_malloc(sizeof(float) * (size_t)r.nf * (size_t)W);
        Vs = gl_malloc(sizeof(double) * (size_t)kmax * (size_t)r.nf);
        r.covwork = gl_malloc(sizeof(double) * sub_covariance_work_size());
        buf = gl_malloc(sizeof(float) * (size_t)r.nf * (size_t)r.rows * (size_t)r.nx);
        if (p->centring == GL_CENTRE_TEMPORAL)
            r.colmean = gl_malloc(sizeof(float) * (size_t)r.reg.npix);
        basis.eigval = gl_malloc(sizeof(double) * (size_t)kmax);
        if (!C || !X || !Vs || !r.covwork || !buf || !basis.eigval ||
            (p->centring == GL_CENTRE_TEMPORAL && !r.colmean)) {
            st = gl_error_nomem("streamed PCA");
            goto cleanup;
        }
        if ((st = pass_columns(&r, buf, X, C, NULL, 0, NULL, NULL)))
            goto cleanup;
        sub_covariance_mirror(C, r.nf);
        gl_free(r.covwork); /* pass 2 needs its own work instead */
        r.covwork = NULL;
        if ((st = sub_basis_from_cov(C, r.nf, r.reg.npix, kmax, &basis, Vs)))
            goto cleanup;
        if (basis.rank < kmax)
            gl_log(GL_LOG_WARN,
                   "only %ld of the %ld KL modes asked for carry signal; the rest are left out",
                   basis.rank, kmax);
        gl_free(C);
        C = NULL;
        Z = gl_malloc(sizeof(float) * (size_t)kmax * (size_t)r.reg.npix);
        zwork = gl_malloc(sizeof(double) * sub_basis_rows_work_size(r.nf, kmax));
        if (!Z || !zwork) {
            st = gl_error_nomem("KL modes");
            goto cleanup;
        }
        if ((st = pass_columns(&r, buf, X, NULL, Vs, kmax, Z, zwork)))
            goto cleanup;
        gl_free(zwork);
        zwork = NULL;
        gl_free(buf);
        buf = NULL;
        gl_free(X);
        X = NULL;
        M = gl_malloc(sizeof(float) * (size_t)r.block * (size_t)r.reg.npix);
        coef = gl_malloc(sizeof(float) * (size_t)r.block * (size_t)kmax);
        raw = gl_malloc(sizeof(float) * (size_t)r.block * (size_t)r.npix);
        work = gl_malloc(sizeof(float) * (size_t)r.block * (size_t)r.npix);
        if (!M || !coef || !raw || !work) {
            st = gl_error_nomem("residual block");
            goto cleanup;
        }
        if ((st = pass_pca_residuals(&r, sink, &cb, Z, kmax, raw, M, work, coef, &o)))
            goto cleanup;
    } else {
        if ((st = run_median(&r, sink, &cb, &buf, &raw, &work, &o)))
            goto cleanup;
    }
    gl_free(raw);
    raw = NULL;
    gl_free(work);
    work = NULL;
    gl_free(M);
    M = NULL;

    if (p->combine == GL_COMBINE_MEDIAN) {
        if (!buf)
            buf = gl_malloc(sizeof(float) * (size_t)r.nf * (size_t)r.rows * (size_t)r.nx);
        if (!buf) {
            st = gl_error_nomem("row chunk");
            goto cleanup;
        }
        if ((st = pass_spill_median(&r, o.spill, buf, res.image)))
            goto cleanup;
    } else {
        size_t n = (size_t)r.nplanes * (size_t)r.npix;
        for (size_t j = 0; j < n; j++)
            res.image->data[j] = o.sw[j] > 0 ? (float)(o.swx[j] / o.sw[j]) : NAN;
    }

    /* the product header, as gl_subtract_run writes it */
    gl_header_free(res.image->header);
    res.image->header = gl_header_copy(gl_fits_stream_header(r.fs));
    if (!res.image->header) {
        st = gl_error_nomem("product header");
        goto cleanup;
    }
    if ((st = sub_wcs_north_up(res.image->header, r.nx, r.ny)) ||
        (st = sub_record_params(res.image->header, p, &r.c, r.nplanes, p->method == GL_SUBTRACT_PCA,
                                &res)) ||
        (st = gl_header_add_history(res.image->header,
                                    "streamed from the file in blocks (--memory-limit)")))
        goto cleanup;
    res.nframes_used = r.c.nusable;
    *out = res;
    memset(&res, 0, sizeof res);
cleanup:
    if (o.spill)
        fclose(o.spill);
    gl_free(o.sw);
    gl_free(o.swx);
    sub_sink_free(sink);
    gl_subtract_result_free(&res);
    sub_region_free(&r.reg);
    gl_fits_stream_close(r.fs);
    gl_free(r.fmean);
    gl_free(r.colmean);
    gl_free(r.covwork);
    gl_free(usable);
    gl_free(C);
    gl_free(Vs);
    gl_free(zwork);
    gl_free(Z);
    gl_free(X);
    gl_free(buf);
    gl_free(raw);
    gl_free(M);
    gl_free(work);
    gl_free(coef);
    gl_free(basis.eigval);
    return st;
}
