/*
 * combine.c -- the end of every method: residual frames are derotated to
 * north-up and combined into one plane per mode count.
 *
 * Orientation (conventions.md): frame i rotated counter-clockwise by
 * -(theta_i + north_offset) degrees about the star is north-up, east-left;
 * the rotation is the shared geometry module's (FFT three-shear by default,
 * Larkin, Oldfield & Klemm 1997, Opt. Commun. 139, 99; or cubic convolution).
 * Combination per pixel over the usable frames, NaN ignored:
 *  - median, mean;
 *  - noise-weighted mean: each frame's pixel weighted by the inverse variance
 *    of that frame's residuals in the 1-FWHM ring holding the pixel (computed
 *    before derotation; the radius does not change under rotation about the
 *    star). Weighting by inverse residual variance is the usual
 *    minimum-variance combination (common practice; cf. Bottom et al. 2017,
 *    PASP 129, 104502, from memory).
 * Frames are derotated in parallel, each with its own geometry workspace;
 * each output pixel is combined by one thread, in frame order.
 */
#include "core/internal.h"
#include "subtract/combine.h"

#include <math.h>
#include <omp.h>
#include <stdint.h>
#include <string.h>

#define COMBINE_BLOCK 16

gl_status sub_sink_new(const sub_ctx *c, gl_cube *image, gl_cube *resid, gl_cube *raw,
                       sub_sink **out)
{
    gl_status st = GL_OK;
    *out = NULL;
    sub_sink *s = gl_calloc(1, sizeof *s);
    if (!s)
        return gl_error_nomem("combination workspace");
    s->c = c;
    s->image = image;
    s->resid = resid;
    s->raw = raw;
    s->nth = sub_max_threads();
    st = gl_geom_plan_new(c->nx, c->ny, c->p->interp, &s->plan);
    if (st)
        goto fail;
    s->works = gl_calloc((size_t)s->nth, sizeof *s->works);
    s->scratch = gl_malloc(sizeof(float) * (size_t)s->nth * COMBINE_BLOCK * (size_t)c->nframe);
    s->fstat = gl_calloc((size_t)c->nframe, sizeof *s->fstat);
    double rmax = hypot((double)c->nx, (double)c->ny);
    s->nring = (long)ceil(rmax / c->p->fwhm) + 1;
    s->ring = gl_malloc(sizeof(int) * (size_t)c->npix);
    s->wscratch = gl_malloc(sizeof(double) * (size_t)s->nth * 3 * (size_t)s->nring);
    if (c->p->combine == GL_COMBINE_WEIGHTED)
        s->weights = gl_malloc(sizeof(double) * (size_t)c->nframe * (size_t)s->nring);
    if (!s->works || !s->scratch || !s->wscratch || !s->fstat || !s->ring ||
        (c->p->combine == GL_COMBINE_WEIGHTED && !s->weights)) {
        st = gl_error_nomem("combination workspace");
        goto fail;
    }
    for (int t = 0; t < s->nth; t++) {
        st = gl_geom_work_new(s->plan, &s->works[t]);
        if (st)
            goto fail;
    }
    double cx = (double)(c->nx / 2), cy = (double)(c->ny / 2);
    for (long y = 0; y < c->ny; y++)
        for (long x = 0; x < c->nx; x++)
            s->ring[y * c->nx + x] = (int)(hypot((double)x - cx, (double)y - cy) / c->p->fwhm);
    *out = s;
    return GL_OK;
fail:
    sub_sink_free(s);
    return st;
}

gl_subtract_memo *gl_subtract_memo_new(void)
{
    return gl_calloc(1, sizeof(gl_subtract_memo));
}

static void memo_arrays_free(gl_subtract_memo *m)
{
    gl_free(m->in);
    gl_free(m->out);
    gl_free(m->angle);
    gl_free(m->known);
    m->in = m->out = NULL;
    m->angle = NULL;
    m->known = NULL;
}

void gl_subtract_memo_free(gl_subtract_memo *m)
{
    if (!m)
        return;
    memo_arrays_free(m);
    for (int i = 0; i < GL_SUBTRACT_MEMO_BUFS; i++)
        gl_free(m->buf[i]);
    gl_free(m);
}

float *gl_subtract_memo_buffer(gl_subtract_memo *m, int slot, size_t n)
{
    if (m->buf[slot] && m->buf_n[slot] >= n)
        return m->buf[slot];
    gl_free(m->buf[slot]);
    m->buf[slot] = n <= SIZE_MAX / sizeof(float) ? gl_malloc(n * sizeof(float)) : NULL;
    m->buf_n[slot] = m->buf[slot] ? n : 0;
    return m->buf[slot];
}

/* The memo's arrays for c's frames, made (and cleared) unless they are
 * already those of frames of this size and count, derotated with the same
 * interpolator. */
static gl_status memo_fit(gl_subtract_memo *m, const sub_ctx *c, size_t bytes)
{
    if (m->in && m->nx == c->nx && m->ny == c->ny && m->nframe == c->nframe && m->bytes == bytes &&
        m->interp == (int)c->p->interp)
        return GL_OK;
    memo_arrays_free(m);
    m->interp = (int)c->p->interp;
    m->nx = c->nx;
    m->ny = c->ny;
    m->nframe = c->nframe;
    m->bytes = bytes;
    m->in = gl_malloc(bytes * (size_t)c->nframe);
    m->out = gl_malloc(bytes * (size_t)c->nframe);
    m->angle = gl_malloc(sizeof(double) * (size_t)c->nframe);
    m->known = gl_calloc((size_t)c->nframe, sizeof(int));
    if (!m->in || !m->out || !m->angle || !m->known) {
        memo_arrays_free(m);
        return gl_error_nomem("derotation masks");
    }
    return GL_OK;
}

gl_status sub_sink_keep_masks(sub_sink *s, gl_subtract_memo *memo)
{
    const sub_ctx *c = s->c;
    s->mask_bytes = ((size_t)c->npix + 7) / 8;
    s->mask_scratch = gl_malloc(s->mask_bytes * (size_t)s->nth);
    if (!s->mask_scratch)
        return gl_error_nomem("derotation masks");
    if (memo) {
        gl_status st = memo_fit(memo, c, s->mask_bytes);
        if (st)
            return st;
        s->mask_in = memo->in;
        s->mask_out = memo->out;
        s->mask_angle = memo->angle;
        s->mask_known = memo->known;
        s->masks_lent = 1;
        return GL_OK;
    }
    s->mask_in = gl_malloc(s->mask_bytes * (size_t)c->nframe);
    s->mask_out = gl_malloc(s->mask_bytes * (size_t)c->nframe);
    s->mask_angle = gl_malloc(sizeof(double) * (size_t)c->nframe);
    s->mask_known = gl_calloc((size_t)c->nframe, sizeof(int));
    if (!s->mask_in || !s->mask_out || !s->mask_angle || !s->mask_known)
        return gl_error_nomem("derotation masks");
    return GL_OK;
}

/* Rotation of frame i by ang, with its NaN mask reused when the last one
 * was made at the same angle from the same input NaN pixels. */
static gl_status derotate_frame(sub_sink *s, long i, float *img, double ang)
{
    gl_geom_work *w = s->works[omp_get_thread_num()];
    if (!s->mask_out)
        return gl_geom_rotate(s->plan, w, img, ang);
    size_t nb = s->mask_bytes;
    long n = s->c->npix;
    unsigned char *in = s->mask_in + nb * (size_t)i,
                  *now = s->mask_scratch + nb * (size_t)omp_get_thread_num();
    gl_geom_nan_bits(img, n, now);
    if (!s->mask_known[i] || s->mask_angle[i] != ang || memcmp(in, now, nb) != 0) {
        memcpy(in, now, nb);
        s->mask_angle[i] = ang;
        s->mask_known[i] = 0;
    }
    return gl_geom_rotate_masked(s->plan, w, img, ang, s->mask_out + nb * (size_t)i,
                                 &s->mask_known[i]);
}

void sub_sink_free(sub_sink *s)
{
    if (!s)
        return;
    if (!s->masks_lent) {
        gl_free(s->mask_in);
        gl_free(s->mask_out);
        gl_free(s->mask_angle);
        gl_free(s->mask_known);
    }
    gl_free(s->mask_scratch);
    if (s->works)
        for (int t = 0; t < s->nth; t++)
            gl_geom_work_free(s->works[t]);
    gl_free(s->works);
    gl_geom_plan_free(s->plan);
    gl_free(s->scratch);
    gl_free(s->wscratch);
    gl_free(s->fstat);
    gl_free(s->ring);
    gl_free(s->weights);
    gl_free(s);
}

void sub_sink_weights(sub_sink *s, const float *resid)
{
    const sub_ctx *c = s->c;
    long nr = s->nring;
#pragma omp parallel for schedule(static)
    for (long i = 0; i < c->nframe; i++) {
        double *acc = s->wscratch + (size_t)omp_get_thread_num() * 3 * (size_t)nr;
        double *cnt = acc, *sum = acc + nr, *dev = acc + 2 * nr;
        double *w = s->weights + (size_t)i * (size_t)nr;
        const float *r = resid + (size_t)i * (size_t)c->npix;
        for (long k = 0; k < 3 * nr; k++)
            acc[k] = 0;
        for (long j = 0; j < c->npix; j++)
            if (!isnan(r[j])) {
                cnt[s->ring[j]] += 1;
                sum[s->ring[j]] += r[j];
            }
        for (long k = 0; k < nr; k++)
            sum[k] = cnt[k] > 0 ? sum[k] / cnt[k] : 0;
        for (long j = 0; j < c->npix; j++)
            if (!isnan(r[j])) {
                double d = r[j] - sum[s->ring[j]];
                dev[s->ring[j]] += d * d;
            }
        for (long k = 0; k < nr; k++) {
            double var = cnt[k] > 1 ? dev[k] / (cnt[k] - 1) : 0;
            w[k] = (c->usable[i] && var > 0) ? 1.0 / var : 0.0;
        }
    }
}

gl_status sub_sink_derotate(sub_sink *s, float *resid)
{
    const sub_ctx *c = s->c;
    size_t plane = (size_t)c->npix;
    /* frames handed out as threads come free (each frame is derotated by
     * one thread whichever it is: the same result at any count): a thread
     * held up by the system no longer leaves the other idle at the end */
#pragma omp parallel for schedule(dynamic, 4)
    for (long i = 0; i < c->nframe; i++) {
        s->fstat[i] = GL_OK;
        if (!c->usable[i])
            continue;
        double ang = -(c->angles[i] + c->p->north_offset);
        s->fstat[i] = derotate_frame(s, i, resid + (size_t)i * plane, ang);
    }
    for (long i = 0; i < c->nframe; i++)
        if (s->fstat[i])
            return gl_error_set(s->fstat[i], "derotation of frame %ld failed", i);
    return GL_OK;
}

gl_status sub_sink_put(void *sink, int mode_index, float *resid)
{
    sub_sink *s = sink;
    const sub_ctx *c = s->c;
    const gl_subtract_params *p = c->p;
    size_t plane = (size_t)c->npix;
    int nk = (int)(s->image->nframe);

    if (s->raw) {
        /* (x, y, mode, frame): frame-major, mode inside */
        for (long i = 0; i < c->nframe; i++)
            memcpy(s->raw->data + ((size_t)i * (size_t)nk + (size_t)mode_index) * plane,
                   resid + (size_t)i * plane, sizeof(float) * plane);
    }
    if (p->combine == GL_COMBINE_WEIGHTED)
        sub_sink_weights(s, resid);
    gl_status st = sub_sink_derotate(s, resid);
    if (st)
        return st;

    if (s->resid)
        for (long i = 0; i < c->nframe; i++)
            memcpy(s->resid->data + ((size_t)i * (size_t)nk + (size_t)mode_index) * plane,
                   resid + (size_t)i * plane, sizeof(float) * plane);

    float *out = s->image->data + (size_t)mode_index * plane;
    if (p->combine == GL_COMBINE_MEDIAN) {
        /* blocks of COMBINE_BLOCK pixels: each frame's run of the block is
         * read once (a cache line) into the block's per-pixel stacks */
        long nb = (c->npix + COMBINE_BLOCK - 1) / COMBINE_BLOCK;
#pragma omp parallel for schedule(dynamic, 32)
        for (long b = 0; b < nb; b++) {
            float *buf =
                s->scratch + (size_t)omp_get_thread_num() * COMBINE_BLOCK * (size_t)c->nframe;
            long j0 = b * COMBINE_BLOCK, nj = GL_SUB_MIN(COMBINE_BLOCK, c->npix - j0);
            /* each pixel's stack keeps its non-NaN values only (written
             * always, counted when not NaN: no branch) */
            long cnt[COMBINE_BLOCK] = {0};
            for (long i = 0; i < c->nframe; i++) {
                if (!c->usable[i])
                    continue;
                const float *r = resid + (size_t)i * plane + (size_t)j0;
                for (long q = 0; q < nj; q++) {
                    buf[(size_t)q * (size_t)c->nframe + (size_t)cnt[q]] = r[q];
                    cnt[q] += r[q] == r[q];
                }
            }
            for (long q = 0; q < nj; q++)
                out[j0 + q] =
                    gl_stats_median_inplace_float(buf + (size_t)q * (size_t)c->nframe, cnt[q]);
        }
        return GL_OK;
    }
#pragma omp parallel for schedule(static)
    for (long j = 0; j < c->npix; j++) {
        double sw = 0, swx = 0;
        for (long i = 0; i < c->nframe; i++) {
            float v = resid[(size_t)i * plane + (size_t)j];
            if (!c->usable[i] || isnan(v))
                continue;
            double w = p->combine == GL_COMBINE_WEIGHTED
                           ? s->weights[(size_t)i * (size_t)s->nring + (size_t)s->ring[j]]
                           : 1.0;
            sw += w;
            swx += w * v;
        }
        out[j] = sw > 0 ? (float)(swx / sw) : NAN;
    }
    return GL_OK;
}
