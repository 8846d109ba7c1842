/*
 * test_subtract.c -- starlight subtraction: invariants and error paths.
 *  - the annular reference library against a brute-force listing;
 *  - the KL basis is orthonormal and KLIP residuals are orthogonal to it
 *    (Soummer, Pueyo & Larkin 2012, eqs. 5-9: the projection is onto an
 *    orthonormal basis), by both the eigen (frames < pixels) and SVD routes;
 *  - per-target weights equal the full-basis projection when the library is
 *    every other row (same equations written in row space);
 *  - the NaN-ignoring median against sorting;
 *  - identical output for 1 and 2 threads, every method;
 *  - bad input (non-positive FWHM, too many modes, zero rotation, a gap that
 *    leaves no references, a reference cube of another size) and allocation
 *    failures at every step return a status and leave nothing behind.
 * Numerical agreement with numpy's SVD is in tests/py/test_subtract.py.
 */
#include "gloam/gloam.h"
#include "subtract/internal.h"
#include "check.h"

#include <cblas.h>
#include <math.h>
#include <omp.h>
#include <stdlib.h>
#include <string.h>

static double urand(unsigned *s)
{
    *s = *s * 1103515245u + 12345u;
    return ((*s >> 8) & 0xffffff) / (double)0x1000000;
}

static void test_library(void)
{
    unsigned seed = 7;
    double ang[60];
    long idx[60];
    for (int trial = 0; trial < 200; trial++) {
        long n = 5 + (long)(urand(&seed) * 50);
        for (long i = 0; i < n; i++)
            ang[i] = -40 + 80 * urand(&seed);
        if (trial % 3 == 0)
            for (long i = 0; i < n; i++)
                ang[i] = -30 + 60.0 * (double)i / (double)n; /* regular, with ties in distance */
        unsigned char usable[60];
        for (long i = 0; i < n; i++)
            usable[i] = urand(&seed) > 0.1;
        long t = (long)(urand(&seed) * (double)n);
        double r = 3 + 40 * urand(&seed), gap = 4 * urand(&seed) * 3;
        long nearest = trial % 2 ? (long)(urand(&seed) * 10) : 0;
        long m = gl_subtract_library_select(ang, usable, n, t, r, gap, nearest, idx);
        /* brute force: every qualifying frame */
        long q = 0, qual[60];
        for (long j = 0; j < n; j++)
            if (j != t && usable[j] && r * fabs(ang[j] - ang[t]) * M_PI / 180 >= gap)
                qual[q++] = j;
        for (long i = 0; i < m; i++) {
            long j = idx[i];
            CHECK(j != t && usable[j], "trial %d: library holds target or unusable frame", trial);
            CHECK(r * fabs(ang[j] - ang[t]) * M_PI / 180 >= gap,
                  "trial %d: frame %ld closer than the gap", trial, j);
            if (i)
                CHECK(idx[i] > idx[i - 1], "trial %d: library in frame order", trial);
        }
        long want = nearest > 0 && q > nearest ? nearest : q;
        CHECK(m == want, "trial %d: %ld frames, brute force %ld", trial, m, want);
        if (nearest > 0 && q > nearest) {
            /* no excluded qualifying frame is nearer than an included one */
            double far = 0;
            for (long i = 0; i < m; i++)
                far = fmax(far, fabs(ang[idx[i]] - ang[t]));
            for (long k = 0; k < q; k++) {
                int in = 0;
                for (long i = 0; i < m; i++)
                    in |= idx[i] == qual[k];
                if (!in)
                    CHECK(fabs(ang[qual[k]] - ang[t]) >= far,
                          "trial %d: a nearer qualifying frame was left out", trial);
            }
        }
    }
}

/* Angles crossing +-180 are close in field rotation. */
static void test_library_wrap(void)
{
    double ang[4] = {178.0, 179.5, -179.5, -178.0};
    long idx[4];
    /* radius 100 px: 1 deg = 1.745 px of arc; gap 3 px needs >= 1.72 deg */
    long m = gl_subtract_library_select(ang, NULL, 4, 1, 100, 3.0, 0, idx);
    CHECK(m == 1 && idx[0] == 3, "across +-180: %ld frames", m);
    m = gl_subtract_library_select(ang, NULL, 4, 2, 100, 0.5, 1, idx);
    CHECK(m == 1 && idx[0] == 1, "nearest across +-180: frame %ld", m ? idx[0] : -1);
}

static void test_median(void)
{
    float a[] = {5, NAN, 1, 4, 2, NAN, 3};
    CHECK(sub_nanmedian(a, 7) == 3.0f, "odd count median");
    float b[] = {NAN, 4, 1, 3, 2};
    CHECK(sub_nanmedian(b, 5) == 2.5f, "even count median");
    float c[] = {NAN, NAN};
    CHECK(isnan(sub_nanmedian(c, 2)), "all NaN");
    unsigned seed = 3;
    for (int trial = 0; trial < 50; trial++) {
        float v[41], s[41];
        long n = 1 + trial % 41;
        for (long i = 0; i < n; i++)
            v[i] = s[i] = (float)floor(urand(&seed) * 10); /* many ties */
        for (long i = 1; i < n; i++)
            for (long k = i; k > 0 && s[k - 1] > s[k]; k--) {
                float x = s[k];
                s[k] = s[k - 1];
                s[k - 1] = x;
            }
        float want = n % 2 ? s[n / 2] : 0.5f * (s[n / 2 - 1] + s[n / 2]);
        CHECK(sub_nanmedian(v, n) == want, "median of %ld values", n);
    }
}

static void test_basis(long nrow, long ncol)
{
    unsigned seed = 11;
    float *X = malloc(sizeof(float) * (size_t)(nrow * ncol));
    for (long i = 0; i < nrow * ncol; i++)
        X[i] = (float)(urand(&seed) - 0.5);
    /* a few strong common modes so the spectrum is well separated */
    for (long i = 0; i < nrow; i++)
        for (long j = 0; j < ncol; j++)
            X[i * ncol + j] += (float)(5 * sin(0.1 * (double)j) * cos((double)i) +
                                       3 * cos(0.37 * (double)j) * sin(0.5 * (double)i));
    sub_centre(X, nrow, ncol, GL_CENTRE_FRAME, NULL);
    long k = 4;
    sub_basis b;
    CHECK(sub_basis_build(X, nrow, ncol, k, &b) == GL_OK, "basis %ldx%ld", nrow, ncol);
    double maxdev = 0;
    for (long a = 0; a < k; a++)
        for (long c = 0; c < k; c++) {
            double d = 0;
            for (long j = 0; j < ncol; j++)
                d += (double)b.Z[a * ncol + j] * b.Z[c * ncol + j];
            maxdev = fmax(maxdev, fabs(d - (a == c)));
        }
    CHECK(maxdev < 1e-4, "basis %ldx%ld orthonormal: %g", nrow, ncol, maxdev);
    for (long a = 1; a < k; a++)
        CHECK(b.eigval[a] <= b.eigval[a - 1] * (1 + 1e-6), "eigenvalues decrease");
    /* residual of row 0 is orthogonal to the basis */
    double res_dot = 0, norm = 0;
    for (long a = 0; a < k; a++) {
        double cf = 0;
        for (long j = 0; j < ncol; j++)
            cf += (double)X[j] * b.Z[a * ncol + j];
        double d = 0;
        for (long j = 0; j < ncol; j++) {
            double r = X[j];
            for (long q = 0; q < k; q++) {
                double cq = 0;
                for (long jj = 0; jj < ncol; jj++)
                    cq += (double)X[jj] * b.Z[q * ncol + jj];
                r -= cq * b.Z[q * ncol + j];
            }
            d += r * b.Z[a * ncol + j];
            norm += r * r;
        }
        (void)cf;
        res_dot = fmax(res_dot, fabs(d));
    }
    CHECK(res_dot < 1e-3 * sqrt(norm), "residual orthogonal to the basis: %g", res_dot);
    sub_basis_free(&b);
    CHECK(sub_basis_build(X, nrow, ncol, nrow + 1, &b) == GL_ERR_USAGE, "too many modes refused");
    free(X);
}

/* Library = every other row: the row-space weights must give the projection
 * onto the KL basis of those rows. */
static void test_target_weights(void)
{
    long n = 12, ncol = 300, t = 5;
    unsigned seed = 5;
    float *X = malloc(sizeof(float) * (size_t)(n * ncol));
    double *C = malloc(sizeof(double) * (size_t)(n * n));
    for (long i = 0; i < n * ncol; i++)
        X[i] = (float)(urand(&seed) - 0.5 +
                       sin(0.05 * (double)(i % ncol) * (1 + (double)(i / ncol) / 7.0)));
    sub_centre(X, n, ncol, GL_CENTRE_FRAME, NULL);
    sub_covariance(X, n, ncol, C, NULL);
    long lib[11], nlib = 0;
    for (long i = 0; i < n; i++)
        if (i != t)
            lib[nlib++] = i;
    float *L = malloc(sizeof(float) * (size_t)(nlib * ncol));
    for (long i = 0; i < nlib; i++)
        memcpy(L + i * ncol, X + lib[i] * ncol, sizeof(float) * (size_t)ncol);
    long ks[2] = {2, 5};
    sub_eig_work *w = NULL;
    float W[2 * 12];
    CHECK(sub_eig_work_new(n, 5, &w) == GL_OK, "eigen workspace");
    long kused = 0;
    CHECK(sub_target_weights(C, n, ncol, lib, nlib, t, ks, 2, w, W, &kused) == GL_OK, "weights");
    CHECK(kused == 5, "all 5 modes used");
    sub_basis b;
    CHECK(sub_basis_build(L, nlib, ncol, 5, &b) == GL_OK, "library basis");
    for (int q = 0; q < 2; q++) {
        double maxd = 0, scale = 0;
        for (long j = 0; j < ncol; j++) {
            double pw = 0, pb = 0;
            for (long i = 0; i < n; i++)
                pw += (double)W[q * n + i] * X[i * ncol + j];
            for (long a = 0; a < ks[q]; a++) {
                double cf = 0;
                for (long jj = 0; jj < ncol; jj++)
                    cf += (double)X[t * ncol + jj] * b.Z[a * ncol + jj];
                pb += cf * b.Z[a * ncol + j];
            }
            maxd = fmax(maxd, fabs(pw - pb));
            scale = fmax(scale, fabs(pb));
        }
        CHECK(maxd < 1e-3 * scale, "row-space projection, %ld modes: %g of %g", ks[q], maxd, scale);
    }
    sub_basis_free(&b);
    sub_eig_work_free(w);
    free(X);
    free(C);
    free(L);
}

/* A small sequence: static speckles, a companion moving with the angles. */
static gl_cube *make_cube(long n, long nf, double rot, double **angles)
{
    gl_cube *c = NULL;
    gl_cube_new(n, n, 1, nf, &c);
    *angles = malloc(sizeof(double) * (size_t)nf);
    unsigned seed = 9;
    double sp[20][3];
    for (int k = 0; k < 20; k++) {
        sp[k][0] = (urand(&seed) - 0.5) * (double)n * 0.7;
        sp[k][1] = (urand(&seed) - 0.5) * (double)n * 0.7;
        sp[k][2] = 1 + 2 * urand(&seed);
    }
    double cx = (double)(n / 2), s2 = 2 * 1.7 * 1.7;
    for (long i = 0; i < nf; i++) {
        double th = -rot / 2 + rot * (double)i / (double)(nf - 1);
        (*angles)[i] = th;
        double a = (90 + 40 + th) * M_PI / 180;
        double xc = cx + 9 * cos(a), yc = cx + 9 * sin(a);
        float *f = gl_cube_plane(c, 0, i);
        for (long y = 0; y < n; y++)
            for (long x = 0; x < n; x++) {
                double v = 30 * exp(-hypot((double)x - cx, (double)y - cx) / 4);
                for (int k = 0; k < 20; k++)
                    v += sp[k][2] * (1 + 0.03 * sin((double)i + k)) *
                         exp(-(pow((double)x - cx - sp[k][0], 2) +
                               pow((double)y - cx - sp[k][1], 2)) /
                             s2);
                v += exp(-(pow((double)x - xc, 2) + pow((double)y - yc, 2)) / s2);
                v += 0.05 * (urand(&seed) - 0.5);
                f[y * n + x] = (float)v;
            }
    }
    return c;
}

static int same_cube(const gl_cube *a, const gl_cube *b)
{
    return a && b && gl_cube_size(a) == gl_cube_size(b) &&
           memcmp(a->data, b->data, sizeof(float) * gl_cube_size(a)) == 0;
}

static void test_threads(void)
{
    double *ang = NULL;
    gl_cube *c = make_cube(40, 16, 50, &ang);
    double *rang = NULL;
    gl_cube *refs = make_cube(40, 6, 10, &rang);
    free(rang);
    for (int m = 0; m < 5; m++) {
        gl_subtract_params p;
        gl_subtract_params_init(&p);
        p.fwhm = 4;
        p.mask_radius = 3;
        p.method = m == 3 ? GL_SUBTRACT_PCA : (gl_subtract_method)m;
        p.nmodes = 2;
        p.modes[0] = 3;
        p.modes[1] = 1;
        p.sectors = m == 2 ? 2 : 1;
        p.gap_fwhm = 0.5;
        p.combine = (gl_combine)(m % 3);
        p.keep_residuals = 1;
        const gl_cube *r = m == 3 ? refs : NULL;
        if (m == 4) {
            p.method = GL_SUBTRACT_ANNULAR;
            p.refs_use = GL_REFS_WITH_SCIENCE;
            p.refs_best = 4;
            r = refs;
        }
        gl_subtract_result r1, r2;
        omp_set_num_threads(1);
        gl_status s1 = gl_subtract_run(c, ang, r, &p, &r1);
        omp_set_num_threads(2);
        gl_status s2 = gl_subtract_run(c, ang, r, &p, &r2);
        CHECK(s1 == GL_OK && s2 == GL_OK, "case %d runs: %s", m, gl_error_message());
        if (!s1 && !s2) {
            CHECK(same_cube(r1.image, r2.image), "case %d: image identical for 1 and 2 threads", m);
            CHECK(same_cube(r1.residuals, r2.residuals), "case %d: residuals identical", m);
            long nfin = 0;
            for (size_t i = 0; i < gl_cube_size(r1.image); i++)
                nfin += isfinite(r1.image->data[i]);
            CHECK(nfin > 0, "case %d: finite output", m);
        }
        gl_subtract_result_free(&r1);
        gl_subtract_result_free(&r2);
    }
    gl_cube_free(c);
    gl_cube_free(refs);
    free(ang);
}

static void test_errors(void)
{
    double *ang = NULL;
    gl_cube *c = make_cube(32, 8, 40, &ang);
    gl_subtract_params p;
    gl_subtract_result r;
    gl_subtract_params_init(&p);
    p.method = GL_SUBTRACT_PCA; /* more modes than frames is refused by klip-frame */
    p.fwhm = 0;
    CHECK(gl_subtract_run(c, ang, NULL, &p, &r) == GL_ERR_USAGE && !r.image, "FWHM 0");
    p.fwhm = -2;
    CHECK(gl_subtract_run(c, ang, NULL, &p, &r) == GL_ERR_USAGE, "negative FWHM");
    p.fwhm = 4;
    p.modes[0] = 9;
    CHECK(gl_subtract_run(c, ang, NULL, &p, &r) == GL_ERR_USAGE && !r.image, "9 modes of 8 frames");
    CHECK(strstr(gl_error_message(), "--modes") != NULL, "message names --modes: %s",
          gl_error_message());
    p.modes[0] = 2;
    double *zero = calloc(8, sizeof(double));
    CHECK(gl_subtract_run(c, zero, NULL, &p, &r) == GL_ERR_USAGE, "zero field rotation");
    CHECK(strstr(gl_error_message(), "rotation") != NULL, "message: %s", gl_error_message());
    p.method = GL_SUBTRACT_ANNULAR;
    p.gap_fwhm = 50;
    CHECK(gl_subtract_run(c, ang, NULL, &p, &r) == GL_ERR_USAGE, "gap leaves no references");
    CHECK(strstr(gl_error_message(), "--gap") != NULL, "message: %s", gl_error_message());
    p.gap_fwhm = 0.5;
    gl_cube *other = NULL;
    gl_cube_new(30, 32, 1, 4, &other);
    CHECK(gl_subtract_run(c, ang, other, &p, &r) == GL_ERR_INPUT, "reference cube of another size");
    /* RDI allows zero rotation */
    double *rang = NULL;
    gl_cube *refs = make_cube(32, 5, 10, &rang);
    free(rang);
    p.method = GL_SUBTRACT_PCA;
    CHECK(gl_subtract_run(c, zero, refs, &p, &r) == GL_OK, "RDI with zero rotation: %s",
          gl_error_message());
    gl_subtract_result_free(&r);
    /* allocation failures anywhere: a status, never a crash or a leak */
    int nomem = 0;
    for (long k = 1; k < 400; k += 3) {
        gl_malloc_fail_after(k);
        gl_status st = gl_subtract_run(c, ang, refs, &p, &r);
        gl_malloc_fail_after(0);
        if (st == GL_OK) {
            gl_subtract_result_free(&r);
            break;
        }
        nomem += st == GL_ERR_NOMEM;
        CHECK(st == GL_ERR_NOMEM && r.image == NULL, "allocation %ld fails cleanly (%d)", k, st);
    }
    CHECK(nomem > 5, "fault injection reached %d allocations", nomem);
    /* the same for klip-rings with its per-ring report */
    p.method = GL_SUBTRACT_ANNULAR;
    p.mask_radius = 0;
    nomem = 0;
    for (long k = 1; k < 400; k += 3) {
        gl_malloc_fail_after(k);
        gl_status st = gl_subtract_run(c, ang, NULL, &p, &r);
        gl_malloc_fail_after(0);
        if (st == GL_OK) {
            gl_subtract_result_free(&r);
            break;
        }
        nomem += st == GL_ERR_NOMEM;
        CHECK(st == GL_ERR_NOMEM && r.image == NULL,
              "klip-rings: allocation %ld fails cleanly (%d)", k, st);
    }
    CHECK(nomem > 5, "klip-rings fault injection reached %d allocations", nomem);
    gl_cube_free(refs);
    gl_cube_free(other);
    gl_cube_free(c);
    free(ang);
    free(zero);
}

/* The default inner radius of klip-rings against a brute-force scan: at the
 * radius returned every frame's library at the first ring's middle holds the
 * largest mode count; a little further in, some frame's does not. */
static void test_inner_radius(void)
{
    long n = 30;
    double ang[30];
    for (long i = 0; i < n; i++)
        ang[i] = -10.0 + 20.0 * (double)i / (double)(n - 1) + 0.01 * sin((double)i);
    gl_subtract_params p;
    gl_subtract_params_init(&p);
    p.method = GL_SUBTRACT_ANNULAR;
    p.fwhm = 4;
    p.modes[0] = 5;
    long idx[30];
    double r = gl_subtract_inner_radius(&p, ang, n, 0, 128, 128);
    double half = 0.5 * p.ring_fwhm * p.fwhm, gap = p.gap_fwhm * p.fwhm;
    CHECK(r > 0 && r < 64, "inner radius inside the frame: %g", r);
    long fewest = n, fewest_in = n;
    for (long t = 0; t < n; t++) {
        long m = gl_subtract_library_select(ang, NULL, n, t, r + half, gap, 0, idx);
        long m2 = gl_subtract_library_select(ang, NULL, n, t, r - 0.01 + half, gap, 0, idx);
        fewest = m < fewest ? m : fewest;
        fewest_in = m2 < fewest_in ? m2 : fewest_in;
    }
    CHECK(fewest >= 5, "every frame has 5 references at %g px (fewest %ld)", r, fewest);
    CHECK(fewest_in < 5, "0.01 px further in, some frame has fewer (%ld)", fewest_in);
    /* too many modes for any ring inside a 40-px frame: at least one each */
    p.modes[0] = 28;
    r = gl_subtract_inner_radius(&p, ang, n, 0, 40, 40);
    fewest = n;
    for (long t = 0; t < n; t++) {
        long m = gl_subtract_library_select(ang, NULL, n, t, r + half, gap, 0, idx);
        fewest = m < fewest ? m : fewest;
    }
    CHECK(r > 0 && fewest >= 1, "fallback: one reference each at %g px (%ld)", r, fewest);
    /* an explicit radius, other methods, RDI alone: no choice made */
    p.mask_radius = 3;
    CHECK(gl_subtract_inner_radius(&p, ang, n, 0, 128, 128) == 3, "explicit radius kept");
    p.mask_radius = GL_SUBTRACT_MASK_AUTO;
    p.method = GL_SUBTRACT_PCA;
    CHECK(gl_subtract_inner_radius(&p, ang, n, 0, 128, 128) == 0, "klip-frame starts at 0");
    p.method = GL_SUBTRACT_ANNULAR;
    CHECK(gl_subtract_inner_radius(&p, ang, n, 4, 128, 128) == 0, "RDI alone starts at 0");
}

/* Method names: the new ones both ways, the first release's found too. */
static void test_names(void)
{
    const char *now[] = {"median-frame", "klip-frame", "klip-rings", "derotate-only"};
    const char *old[] = {"median", "pca", "annular", "none"};
    for (int i = 0; i < 4; i++) {
        CHECK(gl_subtract_method_from_name(now[i]) == i, "%s", now[i]);
        CHECK(gl_subtract_method_from_name(old[i]) == i, "old name %s", old[i]);
        CHECK(strcmp(gl_subtract_method_name((gl_subtract_method)i), now[i]) == 0, "name %d", i);
    }
    CHECK(gl_subtract_method_from_name("loci") == -1, "unknown name");
}

int main(void)
{
    openblas_set_num_threads(1);
    test_library();
    test_library_wrap();
    test_median();
    test_basis(20, 500); /* eigen route */
    test_basis(60, 40);  /* SVD route */
    test_target_weights();
    test_threads();
    test_errors();
    test_inner_radius();
    test_names();
    CHECK_DONE();
}
