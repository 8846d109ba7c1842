/*
 * test_geometry.c -- sub-pixel shifts and rotations against analytic images.
 *
 * References: a shifted or rotated 2-D Gaussian is known in closed form, so
 * the interpolators are checked against the analytic image (the check named
 * in references.md for "image rotation and shifts": analytic rotated
 * Gaussians, flux conservation); the FFT rotation is the three-shear method
 * of Larkin, Oldfield & Klemm 1997 (Opt. Commun. 139, 99). Odd and even sizes.
 */
#include "gloam/gloam.h"
#include "check.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* Elliptical Gaussian centred (x0, y0) with axes sx, sy, long axis at pa
 * radians from +x, unit peak. */
static double gauss(double x, double y, double x0, double y0, double sx, double sy, double pa)
{
    double u = x - x0, v = y - y0, c = cos(pa), s = sin(pa);
    double a = c * u + s * v, b = -s * u + c * v;
    return exp(-0.5 * (a * a / (sx * sx) + b * b / (sy * sy)));
}

static void fill(float *img, long nx, long ny, double x0, double y0, double sx, double sy,
                 double pa)
{
    for (long y = 0; y < ny; y++)
        for (long x = 0; x < nx; x++)
            img[y * nx + x] = (float)gauss((double)x, (double)y, x0, y0, sx, sy, pa);
}

static double total(const float *a, size_t n)
{
    double s = 0;
    for (size_t i = 0; i < n; i++)
        if (!isnan(a[i]))
            s += a[i];
    return s;
}

static void test_shift(long nx, long ny, gl_interp interp, double tol)
{
    gl_geom_plan *p = NULL;
    gl_geom_work *w = NULL;
    CHECK(gl_geom_plan_new(nx, ny, interp, &p) == GL_OK, "plan");
    CHECK(gl_geom_work_new(p, &w) == GL_OK, "work");
    size_t n = (size_t)nx * (size_t)ny;
    float *img = malloc(n * sizeof *img), *ref = malloc(n * sizeof *ref);
    double cx = nx / 2, cy = ny / 2, dx = 1.37, dy = -2.61;
    fill(img, nx, ny, cx + 3.2, cy - 1.1, 2.3, 1.6, 0.4);
    double f0 = total(img, n);
    gl_geom_shift(p, w, img, dx, dy);
    fill(ref, nx, ny, cx + 3.2 + dx, cy - 1.1 + dy, 2.3, 1.6, 0.4);
    /* compare away from the border strips that the shift marks NaN */
    double m = 0;
    for (long y = 4; y < ny - 4; y++)
        for (long x = 4; x < nx - 4; x++) {
            double d = fabs(img[y * nx + x] - ref[y * nx + x]);
            if (!(d <= m))
                m = d;
        }
    CHECK(m < tol, "%s shift %ldx%ld: max error %.2e vs analytic Gaussian", gl_interp_name(interp),
          nx, ny, m);
    CHECK(fabs(total(img, n) - f0) / f0 < 1e-3, "%s shift conserves flux: %g vs %g",
          gl_interp_name(interp), total(img, n), f0);
    CHECK(isnan(img[0]) && isnan(img[(ny - 1) * nx]), "pixels shifted in from outside are NaN");

    /* integer shifts are exact */
    fill(img, nx, ny, cx, cy, 2.0, 2.0, 0);
    fill(ref, nx, ny, cx + 2, cy - 3, 2.0, 2.0, 0);
    gl_geom_shift(p, w, img, 2, -3);
    double mi = 0;
    for (long y = 0; y < ny - 3; y++)
        for (long x = 2; x < nx; x++)
            mi = fmax(mi, fabs(img[y * nx + x] - ref[y * nx + x]));
    CHECK(mi < 1e-5, "%s integer shift exact: %.2e", gl_interp_name(interp), mi);
    free(img);
    free(ref);
    gl_geom_work_free(w);
    gl_geom_plan_free(p);
}

static void test_rotate(long nx, long ny, gl_interp interp, double tol)
{
    gl_geom_plan *p = NULL;
    gl_geom_work *w = NULL;
    CHECK(gl_geom_plan_new(nx, ny, interp, &p) == GL_OK, "plan");
    CHECK(gl_geom_work_new(p, &w) == GL_OK, "work");
    size_t n = (size_t)nx * (size_t)ny;
    float *img = malloc(n * sizeof *img), *ref = malloc(n * sizeof *ref);
    double cx = nx / 2, cy = ny / 2;
    const double angles[] = {17.3, -62.0, 90.0, 133.7, -180.0, 271.2};
    for (size_t k = 0; k < sizeof angles / sizeof angles[0]; k++) {
        double t = angles[k] * M_PI / 180, r = 11.5, a0 = 0.3;
        fill(img, nx, ny, cx + r * cos(a0), cy + r * sin(a0), 2.4, 1.5, 0.2);
        double f0 = total(img, n);
        gl_geom_rotate(p, w, img, angles[k]);
        /* counter-clockwise: the blob moves from angle a0 to a0 + t and its
         * long axis turns by t */
        fill(ref, nx, ny, cx + r * cos(a0 + t), cy + r * sin(a0 + t), 2.4, 1.5, 0.2 + t);
        double m = 0;
        for (long y = 0; y < ny; y++)
            for (long x = 0; x < nx; x++) {
                double dxr = x - cx, dyr = y - cy;
                if (dxr * dxr + dyr * dyr > 0.2 * nx * nx)
                    continue; /* corners come from outside the input */
                double d = fabs(img[y * nx + x] - ref[y * nx + x]);
                if (!(d <= m))
                    m = d;
            }
        CHECK(m < tol, "%s rotation %ldx%ld by %g deg: max error %.2e vs analytic Gaussian",
              gl_interp_name(interp), nx, ny, angles[k], m);
        CHECK(fabs(total(img, n) - f0) / f0 < 1e-3, "%s rotation by %g conserves flux: %g vs %g",
              gl_interp_name(interp), angles[k], total(img, n), f0);
    }
    /* a quarter turn of a square image is an exact pixel permutation */
    if (nx == ny) {
        for (size_t i = 0; i < n; i++)
            img[i] = (float)(i % 97);
        for (long y = 0; y < ny; y++)
            for (long x = 0; x < nx; x++) {
                /* output (x, y) comes from source (cx + (y - cy), cy - (x - cx)) */
                long sx = (long)cx + (y - (long)cy), sy = (long)cy - (x - (long)cx);
                ref[y * nx + x] =
                    (sx >= 0 && sx < nx && sy >= 0 && sy < ny) ? (float)((sy * nx + sx) % 97) : NAN;
            }
        gl_geom_rotate(p, w, img, 90.0);
        double m = 0;
        int nan_ok = 1;
        for (size_t i = 0; i < n; i++) {
            if (isnan(ref[i]) || isnan(img[i])) {
                nan_ok &= isnan(ref[i]) == isnan(img[i]);
                continue;
            }
            m = fmax(m, fabs(img[i] - ref[i]));
        }
        CHECK(m < 1e-3 && nan_ok, "%s quarter turn is a permutation: %.2e", gl_interp_name(interp),
              m);
    }
    /* a NaN pixel reappears at its rotated place, and only around it */
    fill(img, nx, ny, cx, cy, 3, 3, 0);
    long px = (long)cx + 6, py = (long)cy;
    img[py * nx + px] = NAN;
    gl_geom_rotate(p, w, img, 90.0);
    CHECK(isnan(img[((long)cy + 6) * nx + (long)cx]), "NaN carried to its rotated position");
    CHECK(!isnan(img[(long)cy * nx + (long)cx]), "centre still valid");
    /* gl_geom_rotate_masked: recorded, then reused on another image with the
     * same NaN pixels, the output equals gl_geom_rotate's bit for bit */
    unsigned char *bits = malloc((n + 7) / 8);
    int known = 0, same = 1;
    for (int pass = 0; pass < 2; pass++) {
        fill(img, nx, ny, cx + 3 + pass, cy - 2, 2.0 + pass, 1.5, 0.3);
        for (long x = 0; x < nx; x++)
            img[x] = img[(ny - 1) * nx + x] = NAN;
        img[py * nx + px] = NAN;
        memcpy(ref, img, n * sizeof *ref);
        gl_geom_rotate_masked(p, w, img, 37.9, bits, &known);
        gl_geom_rotate(p, w, ref, 37.9);
        same = same && known == 1 && memcmp(img, ref, n * sizeof *img) == 0;
    }
    CHECK(same, "%s rotation with a recorded NaN mask equals gl_geom_rotate",
          gl_interp_name(interp));
    free(bits);
    free(img);
    free(ref);
    gl_geom_work_free(w);
    gl_geom_plan_free(p);
}

/* Shifted copies of a stamp summed in the Fourier domain equal the analytic
 * shifted Gaussians (shift theorem). */
static void test_stamp(long nx, long ny)
{
    gl_geom_plan *p = NULL;
    gl_geom_work *w = NULL;
    gl_geom_stamp *s = NULL;
    size_t n = (size_t)nx * (size_t)ny;
    float *img = malloc(n * sizeof *img), *out = calloc(n, sizeof *out);
    double *ref = calloc(n, sizeof *ref);
    double cx = nx / 2, cy = ny / 2;
    CHECK(gl_geom_plan_new(nx, ny, GL_INTERP_FFT, &p) == GL_OK, "plan");
    CHECK(gl_geom_work_new(p, &w) == GL_OK, "work");
    fill(img, nx, ny, cx, cy, 1.7, 1.7, 0);
    CHECK(gl_geom_stamp_new(p, w, img, &s) == GL_OK, "stamp");
    const double dx[] = {10.3, -7.85, 0.5}, dy[] = {-4.2, 12.6, 0}, wt[] = {1e-2, 3e-3, 0.5};
    out[0] = NAN;
    CHECK(gl_geom_stamp_add(p, w, s, 3, dx, dy, wt, out) == GL_OK, "add");
    double m = 0;
    for (long y = 0; y < ny; y++)
        for (long x = 0; x < nx; x++) {
            double v = 0;
            for (int k = 0; k < 3; k++)
                v += wt[k] * gauss((double)x, (double)y, cx + dx[k], cy + dy[k], 1.7, 1.7, 0);
            if (x || y)
                m = fmax(m, fabs(out[y * nx + x] - v));
        }
    CHECK(m < 2e-6, "stamp copies %ldx%ld: max error %.2e vs analytic Gaussians", nx, ny, m);
    CHECK(isnan(out[0]), "NaN stays NaN");
    gl_geom_stamp_free(s);
    gl_geom_stamp_free(NULL);
    gl_geom_work_free(w);
    gl_geom_plan_free(p);
    free(img);
    free(out);
    free(ref);
}

int main(void)
{
    test_stamp(64, 64);
    test_stamp(63, 58);
    test_shift(64, 64, GL_INTERP_FFT, 2e-5);
    test_shift(65, 57, GL_INTERP_FFT, 2e-5);
    test_shift(64, 64, GL_INTERP_CUBIC, 2e-2);
    test_shift(65, 57, GL_INTERP_CUBIC, 2e-2);
    test_rotate(64, 64, GL_INTERP_FFT, 2e-5);
    test_rotate(65, 65, GL_INTERP_FFT, 2e-5);
    test_rotate(72, 61, GL_INTERP_FFT, 2e-5);
    test_rotate(64, 64, GL_INTERP_CUBIC, 2e-2);
    test_rotate(65, 65, GL_INTERP_CUBIC, 2e-2);
    gl_geom_plan *p = NULL;
    CHECK(gl_geom_plan_new(1, 5, GL_INTERP_FFT, &p) == GL_ERR_USAGE && !p, "1-px image refused");
    gl_geom_plan_free(NULL);
    gl_geom_work_free(NULL);
    CHECK_DONE();
}
