/*
 * cubic.c -- cubic convolution interpolation (Keys 1981, "Cubic convolution
 * interpolation for digital image processing", IEEE Trans. ASSP 29, 1153),
 * with a = -0.5, the choice that makes the kernel third-order accurate.
 * Samples at integer positions reproduce the input exactly. Neighbours beyond
 * the edge are clamped to the edge; a NaN neighbour with non-zero weight makes
 * the sample NaN, so missing data spread at most two pixels.
 */
#include "core/internal.h"
#include "geometry/internal.h"

#include <math.h>

static inline double keys(double t)
{
    const double a = -0.5;
    t = fabs(t);
    if (t <= 1)
        return ((a + 2) * t - (a + 3)) * t * t + 1;
    if (t < 2)
        return ((a * t - 5 * a) * t + 8 * a) * t - 4 * a;
    return 0;
}

static inline long clampl(long i, long n)
{
    return i < 0 ? 0 : (i >= n ? n - 1 : i);
}

float gl_geom_cubic_sample(const float *img, long nx, long ny, double x, double y)
{
    if (!(x >= -0.5 && x < (double)nx - 0.5 && y >= -0.5 && y < (double)ny - 0.5))
        return NAN;
    long x0 = (long)floor(x), y0 = (long)floor(y);
    double wx[4], wy[4];
    for (int k = 0; k < 4; k++) {
        wx[k] = keys(x - (double)(x0 - 1 + k));
        wy[k] = keys(y - (double)(y0 - 1 + k));
    }
    double sum = 0;
    for (int j = 0; j < 4; j++) {
        if (wy[j] == 0)
            continue;
        const float *row = img + clampl(y0 - 1 + j, ny) * nx;
        double rs = 0;
        for (int i = 0; i < 4; i++) {
            if (wx[i] == 0)
                continue;
            float v = row[clampl(x0 - 1 + i, nx)];
            if (isnan(v))
                return NAN;
            rs += wx[i] * v;
        }
        sum += wy[j] * rs;
    }
    return (float)sum;
}
