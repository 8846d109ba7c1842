/*
 * select.c -- frame selection: frames whose total flux, or whose correlation
 * with the median of the kept frames, is an outlier are rejected (an opening
 * of the AO loop, passing clouds, a bad read). Outliers are judged by a robust
 * z-score, (value - median) / (1.4826 MAD) (Hampel 1974, common practice);
 * low correlation only, flux on both sides. The spread has floors (0.5 per
 * cent of the flux, 0.002 in correlation; common practice) so that a very
 * stable sequence does not lose frames to insignificant differences.
 * Runs on aligned frames, so that jitter is not mistaken for a bad frame.
 * The median frame is that of at most GL_MEDIAN_MAX_FRAMES kept frames
 * spread evenly over the sequence.
 */
#include "align/internal.h"
#include "core/internal.h"

#include <math.h>
#include <string.h>

/* Pearson correlation of a and b over pixels finite in both. */
static double correlation(const float *a, const float *b, size_t n)
{
    double sa = 0, sb = 0, saa = 0, sbb = 0, sab = 0;
    long m = 0;
    for (size_t i = 0; i < n; i++) {
        if (isnan(a[i]) || isnan(b[i]))
            continue;
        sa += a[i];
        sb += b[i];
        m++;
    }
    if (m < 2)
        return NAN;
    double ma = sa / m, mb = sb / m;
    for (size_t i = 0; i < n; i++) {
        if (isnan(a[i]) || isnan(b[i]))
            continue;
        double u = a[i] - ma, v = b[i] - mb;
        saa += u * u;
        sbb += v * v;
        sab += u * v;
    }
    return saa > 0 && sbb > 0 ? sab / sqrt(saa * sbb) : NAN;
}

gl_status gl_select_frames(const float *planes, long nx, long ny, long nframe, double k,
                           const char *name, int *status, double *flux, double *corr)
{
    size_t npix = (size_t)nx * (size_t)ny;
    gl_status st = GL_OK;
    float *med = NULL;
    long *kept = NULL;
    double *v = NULL, *scratch = NULL;
    long nk = 0;
    kept = gl_malloc((size_t)nframe * sizeof *kept);
    med = gl_malloc(npix * sizeof *med);
    v = gl_malloc((size_t)nframe * sizeof *v);
    scratch = gl_malloc((size_t)nframe * sizeof *scratch);
    if (!kept || !med || !v || !scratch) {
        st = gl_error_nomem("frame selection");
        goto cleanup;
    }
    for (long f = 0; f < nframe; f++)
        if (status[f] == GL_FRAME_KEPT)
            kept[nk++] = f;
    if (nk == 0)
        goto cleanup;
    /* the median of kept frames spread over the sequence (at most
     * GL_MEDIAN_MAX_FRAMES of them) */
    {
        long m = GL_MIN(nk, GL_MEDIAN_MAX_FRAMES);
        for (long k = 0; k < m; k++)
            kept[k] = kept[k * nk / m];
        if ((st = gl_median_frame(planes, nx, ny, kept, m, med)))
            goto cleanup;
    }
#pragma omp parallel for schedule(static)
    for (long f = 0; f < nframe; f++) {
        const float *img = planes + (size_t)f * npix;
        double s = 0;
        for (size_t i = 0; i < npix; i++)
            if (!isnan(img[i]) && !isnan(med[i])) /* the same pixels in every frame */
                s += img[i];
        flux[f] = s;
        corr[f] = correlation(img, med, npix);
    }
    if (k <= 0)
        goto cleanup;

    double fm, fs, cm, cs;
    long m = 0;
    for (long f = 0; f < nframe; f++)
        if (status[f] == GL_FRAME_KEPT)
            v[m++] = flux[f];
    gl_stats_robust(v, (size_t)(m), scratch, &fm, &fs);
    fs = fmax(fs, 0.005 * fabs(fm));
    m = 0;
    for (long f = 0; f < nframe; f++)
        if (status[f] == GL_FRAME_KEPT)
            v[m++] = corr[f];
    gl_stats_robust(v, (size_t)(m), scratch, &cm, &cs);
    cs = fmax(cs, 0.002);
    for (long f = 0; f < nframe; f++) {
        if (status[f] != GL_FRAME_KEPT)
            continue;
        double zf = (flux[f] - fm) / fs, zc = (corr[f] - cm) / cs;
        if (!isfinite(corr[f]) || zc < -k) {
            status[f] = GL_FRAME_CORRELATION;
            gl_log(GL_LOG_INFO,
                   "%s: frame %ld rejected: correlation with the median frame %.4f, "
                   "%.1f sigma below the median %.4f",
                   name, f, corr[f], -zc, cm);
        } else if (!isfinite(flux[f]) || fabs(zf) > k) {
            status[f] = GL_FRAME_FLUX;
            gl_log(GL_LOG_INFO,
                   "%s: frame %ld rejected: flux %.6g, %.1f sigma %s the median "
                   "%.6g",
                   name, f, flux[f], fabs(zf), zf > 0 ? "above" : "below", fm);
        }
    }

cleanup:
    gl_free(kept);
    gl_free(med);
    gl_free(v);
    gl_free(scratch);
    return st;
}
