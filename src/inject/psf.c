/*
 * psf.c -- preparing the off-axis PSF for planting fake companions.
 *
 * The PSF (an unsaturated image of the star, conventions.md) is collapsed to
 * one image per channel, its centre found by an iterated centre of light in a
 * circular window of one FWHM radius around the peak (for a symmetric PSF the
 * fixed point is the centre of symmetry; common practice), moved to the frame
 * centre (nx/2, ny/2) with the FFT shift, and multiplied by psf_scale. Its
 * total flux, before any cropping, is then the star's flux per frame. The FWHM
 * is read off the azimuthally averaged profile (first crossing of half the
 * peak, linearly interpolated). An image with less than half of its light
 * within 3 FWHM of the peak is refused: a science or coronagraphic cube given
 * as the PSF would set every contrast wrong by orders of magnitude.
 *
 * A background left in the PSF (a constant level over the stamp) adds its
 * level times the stamp's area to the star's flux. It is looked for in three
 * rings of the stamp's outer part (0.5, 0.7 and 0.98 of the largest circle
 * inside the stamp, each 1.2 times as wide as its inner radius, the last
 * reaching into the corners): where their medians agree (within 5 standard
 * errors, or 10% of the level), the PSF's own light has faded there and the
 * level is a background. A level 5 standard errors from zero that adds (or
 * removes) 1.5% or more of the flux is reported in one warning, the PSF left
 * as given. Where the medians still fall, the PSF's halo reaches the edge
 * and nothing can be told from the stamp: an AO halo inside the control
 * radius is nearly flat too (on simulated PSFs of 48-128 px a constant
 * extrapolated under the falling rings read 0.2-3.7% with no background), so
 * no estimate is made. 1.5% is below the few per cent a contrast's
 * photometric budget already holds (neutral-density transmission, PSF
 * variability), and well above the 0.1% a flat estimate is good to.
 */
#include "core/internal.h"
#include "geometry/internal.h"
#include "gloam/inject.h"

#include <math.h>
#include <string.h>

/* the least fraction of the light within 3 FWHM of the peak of an off-axis PSF */
#define GL_PSF_MIN_CORE_FRACTION 0.5
/* the flux a background must add to the PSF's sum to be reported, and its
 * significance in standard errors of the outermost ring's median */
#define GL_PSF_BACKGROUND_BIAS 0.015
#define GL_PSF_BACKGROUND_SIGMA 5.0

void gl_psf_model_free(gl_psf_model *m)
{
    if (!m)
        return;
    gl_free(m->images);
    gl_free(m->flux);
    gl_free(m->peak);
    gl_free(m->fwhm_px);
    gl_free(m);
}

/* Azimuthally averaged profile crossing of half the value at (cx, cy). */
static double profile_fwhm(const float *img, long nx, long ny, double cx, double cy)
{
    const int naz = 32;
    double centre = gl_geom_cubic_sample(img, nx, ny, cx, cy);
    if (!(centre > 0))
        return NAN;
    double prev = centre, rmax = 0.5 * (double)GL_MIN(nx, ny);
    for (double r = 0.05; r < rmax; r += 0.05) {
        double sum = 0;
        int n = 0;
        for (int k = 0; k < naz; k++) {
            double a = 2 * M_PI * k / naz;
            double v = gl_geom_cubic_sample(img, nx, ny, cx + r * cos(a), cy + r * sin(a));
            if (!isnan(v)) {
                sum += v;
                n++;
            }
        }
        if (n == 0)
            return NAN;
        double mean = sum / n;
        if (mean <= 0.5 * centre) {
            double f = (prev - 0.5 * centre) / (prev - mean);
            return 2 * (r - 0.05 + 0.05 * f);
        }
        prev = mean;
    }
    return NAN;
}

/* Iterated Gaussian-windowed centre of light: weights exp(-r^2 / 2 sw^2)
 * around the current estimate, sw the PSF's Gaussian-equivalent width. The
 * smooth window makes the estimate continuous in position, and for a
 * symmetric PSF its fixed point is the centre of symmetry (common practice,
 * as in windowed centroids of source extractors). */
static void light_centre(const float *img, long nx, long ny, double *cx, double *cy, double fwhm)
{
    double sw = fwhm / 2.3548, rad = 4 * sw;
    for (int it = 0; it < 100; it++) {
        double sx = 0, sy = 0, s = 0;
        long x0 = (long)floor(*cx - rad), x1 = (long)ceil(*cx + rad);
        long y0 = (long)floor(*cy - rad), y1 = (long)ceil(*cy + rad);
        for (long y = GL_MAX(y0, 0); y <= GL_MIN(y1, ny - 1); y++)
            for (long x = GL_MAX(x0, 0); x <= GL_MIN(x1, nx - 1); x++) {
                double dx = (double)x - *cx, dy = (double)y - *cy;
                float v = img[y * nx + x];
                if (isnan(v))
                    continue;
                double w = v * exp(-0.5 * (dx * dx + dy * dy) / (sw * sw));
                sx += w * dx;
                sy += w * dy;
                s += w;
            }
        if (!(s > 0))
            return;
        /* the windowed first moment converges to the centre with a factor of
         * about 2 per step for a Gaussian-like core; step twice as far */
        double ddx = 2 * sx / s, ddy = 2 * sy / s;
        *cx += ddx;
        *cy += ddy;
        if (hypot(ddx, ddy) < 1e-6)
            return;
    }
}

/* Fraction of `flux` (the finite sum of the image) within radius r of
 * (cx, cy), whole pixels by their centres. */
static double encircled_fraction(const float *img, long nx, long ny, double cx, double cy, double r,
                                 double flux)
{
    double s = 0;
    for (long y = GL_MAX((long)floor(cy - r), 0); y <= GL_MIN((long)ceil(cy + r), ny - 1); y++)
        for (long x = GL_MAX((long)floor(cx - r), 0); x <= GL_MIN((long)ceil(cx + r), nx - 1);
             x++) {
            float v = img[y * nx + x];
            double dx = (double)x - cx, dy = (double)y - cy;
            if (!isnan(v) && dx * dx + dy * dy <= r * r)
                s += v;
        }
    return s / flux;
}

/* The constant level under the PSF's outer part (see the top of the file):
 * *level (the outermost ring's median), its standard error *err (1.2533
 * sigma / sqrt(n), the median of a Gaussian sample) and the rings' inner
 * radius *r_from. work holds 2 pw*ph doubles. Returns 0, or -1 when nothing
 * can be told: the inner ring closer than 2 FWHM to the centre, fewer than
 * 16 pixels in a ring, or the rings' medians not flat (the PSF's light). */
static int outer_level(const float *img, long pw, long ph, double cx, double cy, double fwhm,
                       double *work, double *level, double *err, double *r_from)
{
    static const double at[3] = {0.5, 0.7, 0.98};
    double big = GL_MIN(GL_MIN(cx, cy), GL_MIN((double)(pw - 1) - cx, (double)(ph - 1) - cy));
    double med[3], sig[3], lo_med = INFINITY, hi_med = -INFINITY, worst = 0;
    if (!(at[0] * big >= 2 * fwhm))
        return -1;
    for (int k = 0; k < 3; k++) {
        double lo = at[k] * big, hi = 1.2 * at[k] * big;
        size_t n = 0;
        for (long y = 0; y < ph; y++)
            for (long x = 0; x < pw; x++) {
                double r = hypot((double)x - cx, (double)y - cy);
                float v = img[y * pw + x];
                if (r >= lo && r < hi && !isnan(v))
                    work[n++] = v;
            }
        if (n < 16)
            return -1;
        size_t used = gl_stats_robust(work, n, work + n, &med[k], &sig[k]);
        worst = GL_MAX(worst, 1.2533 * sig[k] / sqrt((double)used));
        lo_med = GL_MIN(lo_med, med[k]);
        hi_med = GL_MAX(hi_med, med[k]);
        if (k == 2)
            *err = 1.2533 * sig[k] / sqrt((double)used);
    }
    /* the spread of two medians' difference: sqrt(2) standard errors */
    if (hi_med - lo_med > GL_MAX(GL_PSF_BACKGROUND_SIGMA * sqrt(2.0) * worst, 0.1 * fabs(med[2])))
        return -1;
    *level = med[2];
    *r_from = at[0] * big;
    return 0;
}

/* Mean of the finite values of planes [first, first + count) of stride n. */
static void mean_planes(const float *src, size_t n, long count, size_t stride_planes, float *dst)
{
    for (size_t i = 0; i < n; i++) {
        double s = 0;
        long k = 0;
        for (long p = 0; p < count; p++) {
            float v = src[(size_t)p * stride_planes * n + i];
            if (!isnan(v)) {
                s += v;
                k++;
            }
        }
        dst[i] = k ? (float)(s / (double)k) : NAN;
    }
}

gl_status gl_psf_model_new(const gl_cube *psf, const char *name, long nx, long ny, long nchan,
                           double psf_scale, gl_psf_model **out)
{
    gl_psf_model *m = NULL;
    gl_geom_plan *plan = NULL;
    gl_geom_work *work = NULL;
    float *plane = NULL;
    double *ring_work = NULL;
    gl_status st = GL_OK;
    *out = NULL;

    if (!(psf_scale > 0) || !isfinite(psf_scale))
        return gl_error_set(GL_ERR_USAGE, "--psf-scale must be a positive number (got %g)",
                            psf_scale);
    long pw = psf->nx, ph = psf->ny;
    if (pw > nx || ph > ny)
        return gl_error_set(GL_ERR_INPUT, "%s: PSF of %ldx%ld px is larger than the %ldx%ld frames",
                            name, pw, ph, nx, ny);
    /* which planes make each channel's PSF */
    int per_channel;
    if (nchan == 1)
        per_channel = 0;
    else if (psf->nchan == nchan)
        per_channel = 1;
    else if (psf->naxis == 3 && psf->nframe == nchan)
        per_channel = 2; /* a 3-D stack read as one plane per channel */
    else if (psf->naxis == 2)
        per_channel = 0;
    else
        return gl_error_set(GL_ERR_INPUT, "%s: PSF has %ld channels but the cube has %ld", name,
                            psf->naxis == 3 ? psf->nframe : psf->nchan, nchan);

    size_t pn = (size_t)pw * (size_t)ph, fn = (size_t)nx * (size_t)ny;
    m = gl_calloc(1, sizeof *m);
    if (!m)
        return gl_error_nomem("PSF model");
    m->nx = nx;
    m->ny = ny;
    m->nchan = nchan;
    m->psf_scale = psf_scale;
    m->images = gl_calloc(fn * (size_t)nchan, sizeof(float));
    m->flux = gl_calloc((size_t)nchan, sizeof(double));
    m->peak = gl_calloc((size_t)nchan, sizeof(double));
    m->fwhm_px = gl_calloc((size_t)nchan, sizeof(double));
    plane = gl_malloc(pn * sizeof *plane);
    ring_work = gl_malloc(2 * pn * sizeof *ring_work);
    if (!m->images || !m->flux || !m->peak || !m->fwhm_px || !plane || !ring_work) {
        st = gl_error_nomem("PSF model");
        goto cleanup;
    }
    if ((st = gl_geom_plan_new(nx, ny, GL_INTERP_FFT, &plan)) ||
        (st = gl_geom_work_new(plan, &work)))
        goto cleanup;

    int nan_said = 0;
    for (long c = 0; c < nchan; c++) {
        /* collapse to one plane */
        if (per_channel == 1)
            mean_planes(gl_cube_plane(psf, c, 0), pn, psf->nframe, (size_t)psf->nchan, plane);
        else if (per_channel == 2)
            memcpy(plane, gl_cube_plane(psf, 0, c), pn * sizeof *plane);
        else
            mean_planes(psf->data, pn, psf->nchan * psf->nframe, 1, plane);

        long ipk = -1;
        double flux = 0;
        size_t npix_finite = 0;
        for (size_t i = 0; i < pn; i++) {
            if (isnan(plane[i]))
                continue;
            flux += plane[i];
            npix_finite++;
            if (ipk < 0 || plane[i] > plane[ipk])
                ipk = (long)i;
        }
        if (ipk < 0 || !(plane[ipk] > 0) || !(flux > 0)) {
            st = gl_error_set(GL_ERR_INPUT,
                              "%s: the PSF's pixels sum to %.3g%s: no star's light to scale "
                              "companions by (an empty or noise-only image?)",
                              name, flux, nchan > 1 ? " in a channel" : "");
            goto cleanup;
        }
        double cx = (double)(ipk % pw), cy = (double)(ipk / pw);
        /* a missing core (masked or saturated) leaves its brightest pixel on
         * the edge of the hole: no profile can be read there */
        long nan_near = 0;
        for (long y = GL_MAX(0, (long)cy - 3); y <= GL_MIN(ph - 1, (long)cy + 3); y++)
            for (long x = GL_MAX(0, (long)cx - 3); x <= GL_MIN(pw - 1, (long)cx + 3); x++)
                nan_near +=
                    isnan(plane[y * pw + x]) && (x - cx) * (x - cx) + (y - cy) * (y - cy) <= 9.0;
        if (nan_near > 0) {
            st = gl_error_set(GL_ERR_INPUT,
                              "%s: %ld pixel%s within 3 px of the PSF's brightest pixel %s NaN%s: "
                              "its flux, and every contrast, cannot be measured (a masked or "
                              "saturated core?)",
                              name, nan_near, nan_near == 1 ? "" : "s",
                              nan_near == 1 ? "is" : "are", nchan > 1 ? " in a channel" : "");
            goto cleanup;
        }
        double fwhm = profile_fwhm(plane, pw, ph, cx, cy);
        light_centre(plane, pw, ph, &cx, &cy, isfinite(fwhm) ? GL_MAX(fwhm, 1.5) : 2.0);
        fwhm = profile_fwhm(plane, pw, ph, cx, cy);
        if (!isfinite(fwhm)) {
            st = gl_error_set(GL_ERR_INPUT,
                              "%s: no PSF-like peak: the light around the brightest pixel never "
                              "falls to half of it (noise, or not a PSF image?)",
                              name);
            goto cleanup;
        }
        /* an off-axis PSF holds most of its light near its core (an Airy
         * pattern 91% within 3.2 lambda/D, about 3 FWHM: Born & Wolf, the
         * encircled energy of the Airy disc; with an AO halo 80-90% in the
         * simulated and demo PSFs), a coronagraphic or science frame a few
         * per cent to a quarter of it around its brightest speckle, and an
         * image with its background left in less the larger it is */
        double ee = encircled_fraction(plane, pw, ph, cx, cy, 3 * fwhm, flux);
        if (!(ee >= GL_PSF_MIN_CORE_FRACTION)) {
            st = gl_error_set(GL_ERR_INPUT,
                              "%s: only %.0f%% of the light lies within 3 FWHM (%.1f px) of the "
                              "peak%s, not an off-axis PSF (a science cube, or a background "
                              "left in?)",
                              name, 100 * ee, 3 * fwhm, nchan > 1 ? " in a channel" : "");
            goto cleanup;
        }
        /* missing pixels: in the core the star's flux cannot be had; outside
         * it they count as 0, which loses their light (said once) */
        long nan_core = 0, nan_out = 0;
        for (long y = 0; y < ph; y++)
            for (long x = 0; x < pw; x++)
                if (isnan(plane[y * pw + x])) {
                    double dx = (double)x - cx, dy = (double)y - cy;
                    if (dx * dx + dy * dy <= 9 * fwhm * fwhm)
                        nan_core++;
                    else
                        nan_out++;
                }
        if (nan_core > 0) {
            st = gl_error_set(GL_ERR_INPUT,
                              "%s: %ld pixel%s within 3 FWHM (%.1f px) of the PSF's peak %s NaN%s: "
                              "its flux, and every contrast, cannot be measured (a masked or "
                              "saturated core?)",
                              name, nan_core, nan_core == 1 ? "" : "s", 3 * fwhm,
                              nan_core == 1 ? "is" : "are", nchan > 1 ? " in a channel" : "");
            goto cleanup;
        }
        if (nan_out > 0 && !nan_said) {
            gl_log(GL_LOG_WARN,
                   "%s: %ld pixel%s of the PSF beyond 3 FWHM of its peak %s NaN%s and count%s "
                   "as 0: whatever light they held is missing from the star's flux",
                   name, nan_out, nan_out == 1 ? "" : "s", nan_out == 1 ? "is" : "are",
                   nchan > 1 ? " (in a channel)" : "", nan_out == 1 ? "s" : "");
            nan_said = 1;
        }
        double level, level_err, r_from;
        if (outer_level(plane, pw, ph, cx, cy, fwhm, ring_work, &level, &level_err, &r_from) == 0) {
            double added = level * (double)npix_finite, bias = added / (flux - added);
            if (fabs(level) > GL_PSF_BACKGROUND_SIGMA * level_err &&
                fabs(bias) >= GL_PSF_BACKGROUND_BIAS)
                gl_log(GL_LOG_WARN,
                       "%s: the PSF's outer part (from %.0f px of its centre%s) sits at %.2g of "
                       "its peak (a background left in?): the star's flux taken from the PSF "
                       "is %.1f%% too %s, and planted companions carry that level times their "
                       "contrast (contrasts measured in apertures much less: docs/inject.md); "
                       "subtract it from the PSF",
                       name, r_from, nchan > 1 ? ", in a channel" : "", level / plane[ipk],
                       100 * fabs(bias), bias > 0 ? "high" : "low");
        }
        if (c == 0) {
            m->centre_x = cx;
            m->centre_y = cy;
        }
        /* embed with the integer part of the offset, then shift the rest */
        long ox = nx / 2 - lround(cx), oy = ny / 2 - lround(cy);
        float *dst = m->images + (size_t)c * fn;
        for (long y = 0; y < ph; y++) {
            long ty = y + oy;
            if (ty < 0 || ty >= ny)
                continue;
            for (long x = 0; x < pw; x++) {
                long tx = x + ox;
                float v = plane[y * pw + x];
                if (tx >= 0 && tx < nx && !isnan(v))
                    dst[ty * nx + tx] = v;
            }
        }
        double fx = (double)(nx / 2) - (cx + (double)ox), fy = (double)(ny / 2) - (cy + (double)oy);
        if ((st = gl_geom_shift(plan, work, dst, fx, fy)))
            goto cleanup;
        for (size_t i = 0; i < fn; i++)
            dst[i] = isnan(dst[i]) ? 0.0f : (float)(dst[i] * psf_scale);
        m->flux[c] = flux * psf_scale;
        m->peak[c] = dst[(ny / 2) * nx + nx / 2];
        m->fwhm_px[c] = fwhm;
    }
    *out = m;
    m = NULL;

cleanup:
    gl_free(ring_work);
    gl_free(plane);
    gl_geom_work_free(work);
    gl_geom_plan_free(plan);
    gl_psf_model_free(m);
    return st;
}
