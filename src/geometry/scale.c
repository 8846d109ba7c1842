/*
 * scale.c -- magnification of an image about the star (nx/2, ny/2), used by
 * spectral differential imaging to bring speckles of different wavelengths
 * to the same radius (speckle radius scales with wavelength; Racine et al.
 * 1999, PASP 111, 587; Sparks & Ford 2002, ApJ 578, 543).
 *
 * Sampling is the module's cubic convolution (Keys 1981, IEEE Trans. ASSP
 * 29, 1153), whatever interpolator the plan was made for: a magnification is
 * not a shear, so the FFT rotation's machinery does not apply. Surface
 * brightness is kept (not total flux). A pixel whose source falls outside
 * the image, or next to missing data, becomes NaN.
 */
#include "core/internal.h"
#include "geometry/internal.h"

#include <math.h>
#include <string.h>

gl_status gl_geom_scale(const gl_geom_plan *p, gl_geom_work *w, float *img, double factor)
{
    if (!(factor > 0) || !isfinite(factor))
        return gl_error_set(GL_ERR_USAGE, "magnification factor %g is not positive", factor);
    long nx = p->nx, ny = p->ny;
    memcpy(w->copy, img, sizeof(float) * (size_t)nx * (size_t)ny);
    double cx = (double)(nx / 2), cy = (double)(ny / 2), inv = 1.0 / factor;
    for (long y = 0; y < ny; y++) {
        double sy = cy + ((double)y - cy) * inv;
        for (long x = 0; x < nx; x++) {
            double sx = cx + ((double)x - cx) * inv;
            img[y * nx + x] = gl_geom_cubic_sample(w->copy, nx, ny, sx, sy);
        }
    }
    return GL_OK;
}
