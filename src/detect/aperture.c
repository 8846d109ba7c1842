/*
 * aperture.c -- exact circular-aperture photometry: the area of overlap of a
 * disk with every pixel it touches, in closed form, and weighted sums.
 *
 * Method. With the disk of radius R at the origin, S(t) = the disk's area
 * left of the line x = t is t sqrt(R^2 - t^2) + R^2 asin(t/R) + pi R^2 / 2
 * (a standard integral). The area of the disk in the quadrant {x <= a,
 * y <= b}, Q(a, b), follows from S alone: when (a, b) is inside the disk the
 * two chords through it cut the disk into four pieces whose alternating sum
 * is 4ab (differentiate with respect to a and b: 4b and 4a), so
 *     Q(a, b) = (S(a) + S(b)) / 2 - pi R^2 / 4 + a b;
 * outside the disk the chords do not meet inside it and Q is 0, S(a), S(b)
 * or S(a) + S(b) - pi R^2 depending on the quadrant. A pixel's overlap is
 * the inclusion-exclusion of Q at its four corners. One aperture thus costs
 * one asin per grid line it crosses and a few flops per pixel corner. This is
 * the quantity photutils computes with method="exact" (checked in the tests).
 *
 * Pixel (i, j) covers [i - 1/2, i + 1/2] x [j - 1/2, j + 1/2] (centres on
 * integers, the FITS and photutils convention with 0-based indices).
 */
#include "core/internal.h"
#include "detect/internal.h"

#include <math.h>

struct gl_aperture_plan {
    double radius;
    long span; /* most pixels an aperture covers along one axis */
};

/* Disk area left of x = t (disk of radius r at the origin). */
static inline double left_area(double t, double r)
{
    if (t <= -r)
        return 0.0;
    if (t >= r)
        return M_PI * r * r;
    return t * sqrt(r * r - t * t) + r * r * asin(t / r) + 0.5 * M_PI * r * r;
}

/* Disk area in {x <= a, y <= b}, given sa = S(a), sb = S(b). */
static inline double quadrant_area(double a, double b, double sa, double sb, double r)
{
    if (a <= -r || b <= -r)
        return 0.0;
    if (a >= r)
        return sb;
    if (b >= r)
        return sa;
    if (a * a + b * b < r * r)
        return 0.5 * (sa + sb) - 0.25 * M_PI * r * r + a * b;
    if (a > 0 && b > 0)
        return sa + sb - M_PI * r * r;
    if (a < 0 && b < 0)
        return 0.0;
    return a > 0 ? sb : sa;
}

double gl_detect_pixel_overlap(double cx, double cy, double radius, double i, double j)
{
    if (!(radius > 0))
        return 0.0;
    double a0 = i - 0.5 - cx, a1 = i + 0.5 - cx;
    double b0 = j - 0.5 - cy, b1 = j + 0.5 - cy;
    double sa0 = left_area(a0, radius), sa1 = left_area(a1, radius);
    double sb0 = left_area(b0, radius), sb1 = left_area(b1, radius);
    double v = quadrant_area(a1, b1, sa1, sb1, radius) - quadrant_area(a0, b1, sa0, sb1, radius) -
               quadrant_area(a1, b0, sa1, sb0, radius) + quadrant_area(a0, b0, sa0, sb0, radius);
    return v < 0 ? 0.0 : (v > 1 ? 1.0 : v);
}

gl_status gl_detect_aperture_plan_new(double radius, gl_aperture_plan **out)
{
    *out = NULL;
    if (!(radius > 0 && radius <= 1000))
        return gl_error_set(GL_ERR_USAGE, "aperture radius %g px is outside (0, 1000]", radius);
    gl_aperture_plan *p = gl_calloc(1, sizeof *p);
    if (!p)
        return gl_error_nomem("aperture plan");
    p->radius = radius;
    p->span = (long)ceil(2 * radius) + 2;
    *out = p;
    return GL_OK;
}

void gl_detect_aperture_plan_free(gl_aperture_plan *p)
{
    gl_free(p);
}

double gl_detect_aperture_radius(const gl_aperture_plan *p)
{
    return p->radius;
}

size_t gl_detect_aperture_worksize(const gl_aperture_plan *p)
{
    /* S at the vertical and horizontal grid lines, two rows of Q */
    return 4 * (size_t)(p->span + 2);
}

/* Pixels whose overlap is below this are rounding noise of a zero. */
#define OVERLAP_FLOOR 1e-12

int gl_detect_aperture_sum(const gl_aperture_plan *p, const float *img, long nx, long ny, double cx,
                           double cy, double *work, double *sum, double *area)
{
    const double r = p->radius;
    long i0 = (long)floor(cx - r + 0.5), i1 = (long)ceil(cx + r - 0.5);
    long j0 = (long)floor(cy - r + 0.5), j1 = (long)ceil(cy + r - 0.5);
    long w = i1 - i0 + 1, h = j1 - j0 + 1;
    *sum = NAN;
    if (area)
        *area = NAN;
    if (!isfinite(cx) || !isfinite(cy) || w > p->span || h > p->span)
        return 0;
    /* every pixel of the bounding box touches the disk (pixel i0 holds the
     * disk's leftmost point, and so on): a box beyond the image means an
     * incomplete aperture; the area is then not needed either */
    if (!area && (i0 < 0 || j0 < 0 || i1 >= nx || j1 >= ny))
        return 0;
    double *sx = work, *sy = sx + (w + 1), *qlo = sy + (h + 1), *qhi = qlo + (w + 1);
    for (long k = 0; k <= w; k++)
        sx[k] = left_area((double)(i0 + k) - 0.5 - cx, r);
    for (long l = 0; l <= h; l++)
        sy[l] = left_area((double)(j0 + l) - 0.5 - cy, r);
    for (long k = 0; k <= w; k++)
        qlo[k] = quadrant_area((double)(i0 + k) - 0.5 - cx, (double)j0 - 0.5 - cy, sx[k], sy[0], r);
    double s = 0, a = 0;
    int ok = 1;
    for (long l = 1; l <= h; l++) {
        const double b = (double)(j0 + l) - 0.5 - cy;
        for (long k = 0; k <= w; k++)
            qhi[k] = quadrant_area((double)(i0 + k) - 0.5 - cx, b, sx[k], sy[l], r);
        const long j = j0 + l - 1;
        for (long k = 0; k < w; k++) {
            double wt = qhi[k + 1] - qhi[k] - qlo[k + 1] + qlo[k];
            if (wt < OVERLAP_FLOOR)
                continue;
            const long i = i0 + k;
            if (i < 0 || i >= nx || j < 0 || j >= ny) {
                ok = 0;
                continue;
            }
            const float v = img[(size_t)j * (size_t)nx + (size_t)i];
            if (isnan(v))
                ok = 0;
            s += wt * (double)v;
            a += wt;
        }
        double *t = qlo;
        qlo = qhi;
        qhi = t;
    }
    if (area)
        *area = a;
    if (!ok)
        return 0;
    *sum = s;
    return 1;
}
