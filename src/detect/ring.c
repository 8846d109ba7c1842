/*
 * ring.c -- the ring of non-overlapping apertures at one separation and the
 * t test of a test aperture against it (Mawet et al. 2014, ApJ 792, 97,
 * sec. 3: n = floor(2 pi r / d) resolution elements of diameter d at radius
 * r, evenly spaced, the first on the test position). Also the parameters of
 * the detection stage.
 *
 * Assumptions: the star is at (nx/2, ny/2); apertures of one ring do not
 * overlap (2 pi r / n >= d), so their fluxes are independent when the noise
 * is uncorrelated beyond one resolution element. References that leave the
 * image or touch missing data (NaN) are dropped rather than patched.
 */
#include "core/internal.h"
#include "detect/internal.h"

#include <math.h>

void gl_detect_params_init(gl_detect_params *p)
{
    p->fwhm = 0;
    p->diameter = 0;
    p->mask_radius = 0;
    p->threshold_sigma = 5;
    p->exclude_adjacent = 0;
    p->merge_radius = 0;
    p->pixscale_mas = NAN;
}

void gl_detect_geom(const gl_detect_params *p, detect_geom *g)
{
    g->diam = p->diameter > 0 ? p->diameter : p->fwhm;
    g->mask = p->mask_radius > 0 ? p->mask_radius : p->fwhm;
    g->merge = p->merge_radius > 0 ? p->merge_radius : p->fwhm;
}

gl_status gl_detect_params_check(const gl_detect_params *p, long nx, long ny)
{
    long nmin = nx < ny ? nx : ny;
    if (!(p->fwhm >= GL_FWHM_MIN_PX) || !isfinite(p->fwhm))
        return gl_error_set(GL_ERR_USAGE, "FWHM %g px: must be at least 0.5 pixels", p->fwhm);
    if (p->fwhm > 0.25 * (double)nmin)
        return gl_error_set(GL_ERR_USAGE,
                            "FWHM %g px is larger than a quarter of the image (%ld x %ld px)",
                            p->fwhm, nx, ny);
    if (!(p->diameter >= 0) || p->diameter > 0.25 * (double)nmin)
        return gl_error_set(GL_ERR_USAGE,
                            "aperture diameter %g px: must be in (0, %g] (a quarter of the image)",
                            p->diameter, 0.25 * (double)nmin);
    if (!(p->mask_radius >= 0) || p->mask_radius >= 0.5 * (double)nmin)
        return gl_error_set(GL_ERR_USAGE, "mask radius %g px: must be in [0, %g)", p->mask_radius,
                            0.5 * (double)nmin);
    if (!(p->merge_radius >= 0) || !isfinite(p->merge_radius))
        return gl_error_set(GL_ERR_USAGE, "merge radius %g px: must be >= 0", p->merge_radius);
    if (!(p->threshold_sigma > 0 && p->threshold_sigma <= 30))
        return gl_error_set(GL_ERR_USAGE, "threshold %g sigma: must be in (0, 30]",
                            p->threshold_sigma);
    if (!(isnan(p->pixscale_mas) || (p->pixscale_mas > 0 && isfinite(p->pixscale_mas))))
        return gl_error_set(GL_ERR_USAGE, "pixel scale %g mas: must be positive", p->pixscale_mas);
    return GL_OK;
}

long gl_detect_ring_count(double sep, double diam)
{
    if (!(sep > 0) || !(diam > 0))
        return 0;
    /* a tiny allowance keeps exact multiples (sep = k d / 2 pi) from losing
     * an aperture to rounding */
    return (long)floor(2 * M_PI * sep / diam * (1 + 1e-12));
}

void gl_detect_ring_positions(double sx, double sy, double sep, double theta, long n, double *x,
                              double *y)
{
    for (long k = 0; k < n; k++) {
        double a = theta + 2 * M_PI * (double)k / (double)n;
        x[k] = sx + sep * cos(a);
        y[k] = sy + sep * sin(a);
    }
}

/* Most ring apertures a position on (or near) an nx x ny image can need. */
static long ring_capacity(const gl_aperture_plan *p, long nx, long ny)
{
    double rmax = 0.5 * hypot((double)nx, (double)ny) + 2;
    return gl_detect_ring_count(rmax, 2 * gl_detect_aperture_radius(p)) + 2;
}

size_t gl_detect_snr_worksize(const gl_aperture_plan *p, long nx, long ny)
{
    return (size_t)ring_capacity(p, nx, ny) + gl_detect_aperture_worksize(p);
}

int gl_detect_snr_at(const gl_aperture_plan *p, const gl_detect_params *par, const float *img,
                     long nx, long ny, double x, double y, double *work, gl_ttest *out)
{
    detect_geom g;
    gl_detect_geom(par, &g);
    const double diam = 2 * gl_detect_aperture_radius(p);
    const double sx = (double)(nx / 2), sy = (double)(ny / 2);
    const double dx = x - sx, dy = y - sy, sep = hypot(dx, dy);
    const int excl = par->exclude_adjacent != 0;
    out->t = out->fpf = out->significance = out->noise = out->ref_mean = out->ref_std = NAN;
    out->nref = out->dof = 0;
    if (!(sep >= g.mask))
        return 0;
    long n = gl_detect_ring_count(sep, diam);
    /* beyond the capacity the test aperture is off the image anyway */
    if (n - 1 - 2 * excl < 2 || n > ring_capacity(p, nx, ny))
        return 0;
    double *flux = work, *apwork = work + n;
    double test;
    if (!gl_detect_aperture_sum(p, img, nx, ny, x, y, apwork, &test, NULL))
        return 0;
    const double theta = atan2(dy, dx);
    long m = 0;
    for (long k = 1; k < n; k++) {
        if (excl && (k == 1 || k == n - 1))
            continue;
        double a = theta + 2 * M_PI * (double)k / (double)n;
        if (gl_detect_aperture_sum(p, img, nx, ny, sx + sep * cos(a), sy + sep * sin(a), apwork,
                                   &flux[m], NULL))
            m++;
    }
    if (m < 2)
        return 0;
    if (gl_detect_ttest(test, flux, m, out) != GL_OK) {
        gl_error_clear();
        return 0;
    }
    return 1;
}
