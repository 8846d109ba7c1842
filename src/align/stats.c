/*
 * stats.c -- image statistics used by the align stage: medians (the
 * selection of core/stats.c), NaN-aware median frames, a noise
 * estimate from neighbour differences, peak finding and a quick FWHM guess.
 * Also the per-frame driver that runs a measurement over a stack with a
 * static OpenMP schedule, so results do not depend on the thread count.
 */
#include "align/internal.h"
#include "core/internal.h"

#include <math.h>
#include <omp.h>
#include <stdlib.h>
#include <string.h>

double gl_median_d(double *v, long n)
{
    return gl_stats_median_inplace(v, n);
}

long gl_spread_frames(long nframe, long maxn, long *frames)
{
    long m = GL_MIN(nframe, maxn);
    for (long k = 0; k < m; k++)
        frames[k] = k * nframe / m;
    return m;
}

gl_status gl_median_frame(const float *planes, long nx, long ny, const long *frames, long nframe,
                          float *out)
{
    /* pixels are taken in blocks of 64 neighbours, so that each frame is
     * read a cache line at a time rather than one pixel per frame */
    enum { BLOCK = 64 };
    long npix = nx * ny, nblock = (npix + BLOCK - 1) / BLOCK;
    int nomem = 0;
#pragma omp parallel
    {
        double *buf = gl_malloc((size_t)nframe * BLOCK * sizeof *buf);
        if (!buf) {
#pragma omp atomic write
            nomem = 1;
        }
#pragma omp for schedule(static)
        for (long b = 0; b < nblock; b++) {
            if (!buf)
                continue;
            long i0 = b * BLOCK, nb = GL_MIN(BLOCK, npix - i0);
            long count[BLOCK] = {0};
            for (long f = 0; f < nframe; f++) {
                long k = frames ? frames[f] : f;
                const float *src = planes + (size_t)k * (size_t)npix + (size_t)i0;
                for (long j = 0; j < nb; j++)
                    if (!isnan(src[j]))
                        buf[(size_t)j * (size_t)nframe + (size_t)count[j]++] = src[j];
            }
            for (long j = 0; j < nb; j++)
                out[i0 + j] =
                    count[j] ? (float)gl_median_d(buf + (size_t)j * (size_t)nframe, count[j]) : NAN;
        }
        gl_free(buf);
    }
    return nomem ? gl_error_nomem("median frame") : GL_OK;
}

double gl_image_noise(const float *img, long nx, long ny)
{
    size_t n = (size_t)(nx - 1) * (size_t)ny;
    double *d = gl_malloc(n * sizeof *d), *s = gl_malloc(n * sizeof *s);
    double med = NAN, sig = NAN;
    if (d && s) {
        long m = 0;
        for (long y = 0; y < ny; y++)
            for (long x = 0; x + 1 < nx; x++) {
                double a = img[y * nx + x], b = img[y * nx + x + 1];
                d[m++] = (isfinite(a) && isfinite(b)) ? a - b : NAN;
            }
        gl_stats_robust(d, (size_t)(m), s, &med, &sig);
    }
    gl_free(d);
    gl_free(s);
    return sig / sqrt(2.0);
}

double gl_image_median(const float *img, long nx, long ny)
{
    size_t n = (size_t)nx * (size_t)ny;
    double *v = gl_malloc(n * sizeof *v);
    if (!v)
        return NAN;
    long m = 0;
    for (size_t i = 0; i < n; i++)
        if (!isnan(img[i]))
            v[m++] = img[i];
    double med = gl_median_d(v, m);
    gl_free(v);
    return med;
}

int gl_image_peak(const float *img, long nx, long ny, long margin, long *px, long *py,
                  double *value)
{
    double best = -INFINITY;
    int found = 0;
    for (long y = GL_MAX(margin, 1); y < ny - GL_MAX(margin, 1); y++)
        for (long x = GL_MAX(margin, 1); x < nx - GL_MAX(margin, 1); x++) {
            double s = 0;
            int k = 0;
            for (int j = -1; j <= 1; j++)
                for (int i = -1; i <= 1; i++) {
                    float v = img[(y + j) * nx + x + i];
                    if (!isnan(v)) {
                        s += v;
                        k++;
                    }
                }
            if (k >= 5 && s / k > best) {
                best = s / k;
                *px = x;
                *py = y;
                found = 1;
            }
        }
    *value = best;
    return found;
}

double gl_image_fwhm_estimate(const float *img, long nx, long ny, long px, long py, double bg,
                              long r)
{
    double peak = img[py * nx + px] - bg;
    if (!(peak > 0))
        return NAN;
    long area = 0;
    for (long y = GL_MAX(py - r, 0); y <= GL_MIN(py + r, ny - 1); y++)
        for (long x = GL_MAX(px - r, 0); x <= GL_MIN(px + r, nx - 1); x++)
            if (img[y * nx + x] - bg > 0.5 * peak)
                area++;
    return 2 * sqrt((double)area / M_PI);
}

void gl_centres_each_frame(const gl_align_stack *s, gl_frame_measure_fn fn, const void *ctx,
                           gl_centres *c)
{
    size_t npix = (size_t)s->nx * (size_t)s->ny;
    long done = 0;
#pragma omp parallel for schedule(static)
    for (long f = 0; f < s->nframe; f++) {
        const float *img = s->img + (size_t)f * npix;
        int rc = fn(img, s->nx, s->ny, ctx, &c->x[f], &c->y[f], &c->err_x[f], &c->err_y[f],
                    &c->quality[f]);
        c->ok[f] = rc == 0 && isfinite(c->x[f]) && isfinite(c->y[f]);
        if (!c->ok[f])
            c->x[f] = c->y[f] = c->err_x[f] = c->err_y[f] = c->quality[f] = NAN;
        long d;
#pragma omp atomic capture
        d = ++done;
        gl_progress("centring", d, s->nframe);
    }
}
