/*
 * test_align.c -- unit tests of the align stage on frames built here with
 * known truth (analytic Gaussian, Moffat and Airy-like stars, satellite
 * spots around a dark centre, known sub-pixel jitter, Gaussian noise).
 * Outside references, named at each check:
 *  - Gaussian FWHM = 2 sqrt(2 ln 2) sigma (definition of the normal law);
 *  - Moffat 1969 (A&A 3, 455): I = A (1 + r^2/alpha^2)^-beta,
 *    FWHM = 2 alpha sqrt(2^(1/beta) - 1);
 *  - Guizar-Sicairos, Thurman & Fienup 2008: registration to 1/upsample px;
 *  - Meeus, Astronomical Algorithms 2nd ed., eq. 14.1, for the parallactic
 *    angle from hour angle, declination and latitude;
 *  - Airy pattern: I = (2 J1(v)/v)^2 (Born & Wolf sec. 8.5), GSL's J1.
 */
#include "check.h"
#include "gloam/gloam.h"

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <gsl/gsl_sf_bessel.h>
#include <math.h>
#include <omp.h>
#include <stdlib.h>
#include <string.h>

typedef enum { STAR_GAUSS, STAR_MOFFAT, STAR_AIRY, STAR_SPOTS } star_kind;

/* One frame of a star centred at (x0, y0), pixel-centre sampled, plus noise. */
static void make_frame(float *img, long n, star_kind kind, double x0, double y0, double noise,
                       gsl_rng *rng)
{
    for (long y = 0; y < n; y++)
        for (long x = 0; x < n; x++) {
            double dx = x - x0, dy = y - y0, r = hypot(dx, dy), v;
            switch (kind) {
            case STAR_GAUSS: v = 1000 * exp(-0.5 * r * r / (1.8 * 1.8)); break;
            case STAR_MOFFAT: v = 1000 * pow(1 + r * r / (2.5 * 2.5), -2.5); break;
            case STAR_AIRY: {
                double u = M_PI * r / 2.0; /* first dark ring at 1.22 * 2 px */
                double j = u < 1e-8 ? 1.0 : 2 * gsl_sf_bessel_J1(u) / u;
                v = 1000 * j * j;
                break;
            }
            default: {
                /* coronagraphic halo with a dark centre and four spots */
                v = 300 * exp(-r / 8) * (1 - exp(-0.5 * r * r / 9));
                for (int k = 0; k < 4; k++) {
                    double a = M_PI / 4 + k * M_PI / 2;
                    double sx = x0 + 14 * cos(a), sy = y0 + 14 * sin(a);
                    v += 150 * exp(-0.5 * ((x - sx) * (x - sx) + (y - sy) * (y - sy)) / 2.0);
                }
            }
            }
            img[y * n + x] = (float)(v + 5 + (noise > 0 ? gsl_ran_gaussian(rng, noise) : 0));
        }
}

static gl_cube *make_cube(long n, long nf, star_kind kind, double noise, double jitter, double *tx,
                          double *ty, unsigned long seed)
{
    gl_cube *c = NULL;
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, seed);
    if (gl_cube_new(n, n, 1, nf, &c))
        return NULL;
    for (long f = 0; f < nf; f++) {
        tx[f] = n / 2 + 0.3 + gsl_ran_flat(rng, -jitter, jitter);
        ty[f] = n / 2 - 0.2 + gsl_ran_flat(rng, -jitter, jitter);
        make_frame(gl_cube_plane(c, 0, f), n, kind, tx[f], ty[f], noise, rng);
    }
    gsl_rng_free(rng);
    return c;
}

static double rms_error(const gl_align_result *r, const double *tx, const double *ty)
{
    double s = 0;
    for (long f = 0; f < r->nframe; f++)
        s += pow(r->x[f] - tx[f], 2) + pow(r->y[f] - ty[f], 2);
    return sqrt(s / (2.0 * r->nframe));
}

static void test_profile_fits(void)
{
    long n = 41;
    float *img = malloc(sizeof(float) * n * n);
    make_frame(img, n, STAR_GAUSS, 20.37, 19.81, 0, NULL);
    gl_profile_fit fit;
    CHECK(gl_align_fit_profile(img, n, n, 20, 20, 8, 0, GL_PROFILE_GAUSSIAN, &fit) == GL_OK, "%s",
          gl_error_message());
    CHECK_CLOSE(fit.x, 20.37, 1e-4, "Gaussian x");
    CHECK_CLOSE(fit.y, 19.81, 1e-4, "Gaussian y");
    CHECK_CLOSE(fit.sigma_x, 1.8, 1e-4, "Gaussian sigma");
    CHECK_CLOSE(fit.amplitude, 1000, 0.1, "Gaussian amplitude");
    CHECK_CLOSE(fit.background, 5, 0.01, "Gaussian background");
    /* FWHM = 2 sqrt(2 ln 2) sigma (normal law) */
    CHECK_CLOSE(fit.fwhm, 2 * sqrt(2 * log(2)) * 1.8, 1e-3, "Gaussian FWHM");

    make_frame(img, n, STAR_MOFFAT, 19.62, 20.44, 0, NULL);
    CHECK(gl_align_fit_profile(img, n, n, 20, 20, 12, 0, GL_PROFILE_MOFFAT, &fit) == GL_OK, "%s",
          gl_error_message());
    CHECK_CLOSE(fit.x, 19.62, 1e-4, "Moffat x");
    CHECK_CLOSE(fit.y, 20.44, 1e-4, "Moffat y");
    CHECK_CLOSE(fit.alpha, 2.5, 1e-3, "Moffat alpha");
    CHECK_CLOSE(fit.beta, 2.5, 1e-3, "Moffat beta");
    /* Moffat 1969: FWHM = 2 alpha sqrt(2^(1/beta) - 1) */
    CHECK_CLOSE(fit.fwhm, 2 * 2.5 * sqrt(pow(2, 1 / 2.5) - 1), 1e-3, "Moffat FWHM");

    /* uncertainties scale with the noise: about sigma_noise / (A sqrt(pi) ...) */
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    make_frame(img, n, STAR_GAUSS, 20.1, 20.2, 2.0, rng);
    CHECK(gl_align_fit_profile(img, n, n, 20, 20, 8, 4, GL_PROFILE_GAUSSIAN, &fit) == GL_OK, "%s",
          gl_error_message());
    CHECK(fit.err_x > 0 && fit.err_x < 0.01, "err_x %g", fit.err_x);
    CHECK(fabs(fit.x - 20.1) < 5 * fit.err_x, "x %g err %g", fit.x, fit.err_x);
    gsl_rng_free(rng);

    /* bad input: stamp outside, flat image */
    CHECK(gl_align_fit_profile(img, n, n, -5, 20, 8, 4, GL_PROFILE_GAUSSIAN, &fit) == GL_ERR_USAGE,
          "outside stamp");
    for (long i = 0; i < n * n; i++)
        img[i] = 3;
    CHECK(gl_align_fit_profile(img, n, n, 20, 20, 8, 4, GL_PROFILE_GAUSSIAN, &fit) ==
              GL_ERR_NUMERIC,
          "flat image");
    free(img);
}

static void test_xcorr_and_symmetry(void)
{
    for (long n = 64; n <= 65; n++) {
        float *a = malloc(sizeof(float) * n * n), *b = malloc(sizeof(float) * n * n);
        make_frame(a, n, STAR_GAUSS, 30.0, 31.0, 0, NULL);
        make_frame(b, n, STAR_GAUSS, 31.37, 29.52, 0, NULL);
        gl_xcorr_plan *p = NULL;
        gl_xcorr_work *w = NULL;
        CHECK(gl_xcorr_plan_new(a, n, n, 100, &p) == GL_OK, "plan");
        CHECK(gl_xcorr_work_new(p, &w) == GL_OK, "work");
        double dx, dy, err;
        gl_align_xcorr_shift(p, w, b, &dx, &dy, &err);
        /* b shifted by (dx, dy) matches a: (-1.37, +1.48), to 1/100 px
         * (Guizar-Sicairos et al. 2008) */
        CHECK_CLOSE(dx, -1.37, 0.011, "xcorr dx");
        CHECK_CLOSE(dy, 1.48, 0.011, "xcorr dy");
        CHECK(err >= 0 && err < 0.05, "registration error %g", err);
        gl_xcorr_work_free(w);
        gl_xcorr_plan_free(p);

        double cx, cy;
        make_frame(a, n, STAR_SPOTS, 31.23, 33.71, 0, NULL);
        CHECK(gl_align_symmetry_centre(a, n, n, 100, &cx, &cy) == GL_OK, "symmetry");
        CHECK_CLOSE(cx, 31.23, 0.01, "symmetry x");
        CHECK_CLOSE(cy, 33.71, 0.01, "symmetry y");
        free(a);
        free(b);
    }
}

static void test_spots(void)
{
    long n = 64;
    float *img = malloc(sizeof(float) * n * n);
    make_frame(img, n, STAR_SPOTS, 32.4, 31.7, 0, NULL);
    gl_spots s;
    CHECK(gl_align_spots_find(img, n, n, 0, &s) == GL_OK, "%s", gl_error_message());
    CHECK_CLOSE(s.cx, 32.4, 0.05, "spots centre x");
    CHECK_CLOSE(s.cy, 31.7, 0.05, "spots centre y");
    /* two lines crossing at (1, 2) */
    double x1[2] = {0, 1}, y1[2] = {1, 0}, x2[2] = {2, 1}, y2[2] = {3, 5}, cx, cy;
    CHECK(gl_align_lines_intersect(2, x1, y1, x2, y2, &cx, &cy) == GL_OK, "intersect");
    CHECK_CLOSE(cx, 1, 1e-12, "intersection x");
    CHECK_CLOSE(cy, 2, 1e-12, "intersection y");
    double px1[2] = {0, 0}, py1[2] = {0, 1}, px2[2] = {1, 1}, py2[2] = {0, 1};
    CHECK(gl_align_lines_intersect(2, px1, py1, px2, py2, &cx, &cy) == GL_ERR_NUMERIC,
          "parallel lines");
    /* halo without spots */
    for (long y = 0; y < n; y++)
        for (long x = 0; x < n; x++)
            img[y * n + x] = (float)(100 * exp(-hypot(x - 32.0, y - 32.0) / 8));
    CHECK(gl_align_spots_find(img, n, n, 0, &s) == GL_ERR_INPUT, "no spots");
    free(img);
}

/* Whole step on a jittered cube: rms error of the star positions. */
static double run_jitter(star_kind kind, gl_centre_method m, gl_profile_kind prof, double noise,
                         gl_centre_method *used)
{
    long n = 64, nf = 12;
    double tx[12], ty[12];
    gl_cube *c = make_cube(n, nf, kind, noise, 2.0, tx, ty, 7 + (unsigned long)kind);
    gl_align_params p;
    gl_align_params_init(&p);
    p.method = m;
    p.profile = prof;
    gl_align_result *r = NULL;
    gl_status st = gl_align_run(c, NULL, "test", &p, &r);
    CHECK(st == GL_OK, "align %s: %s", gl_centre_method_name(m), gl_error_message());
    double e = st ? INFINITY : rms_error(r, tx, ty);
    if (!st && used)
        *used = r->method;
    if (!st) {
        /* the star now sits at (nx/2, ny/2): the aligned frame's Gaussian
         * fit finds it there */
        gl_profile_fit fit;
        if (kind == STAR_GAUSS &&
            gl_align_fit_profile(gl_cube_plane(r->aligned, 0, 0), n, n, n / 2, n / 2, 8, 4,
                                 GL_PROFILE_GAUSSIAN, &fit) == GL_OK) {
            CHECK_CLOSE(fit.x, n / 2, 0.02, "aligned x");
            CHECK_CLOSE(fit.y, n / 2, 0.02, "aligned y");
        }
    }
    gl_align_result_free(r);
    gl_cube_free(c);
    return e;
}

static void test_jitter_recovery(void)
{
    gl_centre_method used = GL_CENTRE_AUTO;
    double e;
    /* issue 3: rms error < 0.02 px on unsaturated stars */
    e = run_jitter(STAR_GAUSS, GL_CENTRE_AUTO, GL_PROFILE_GAUSSIAN, 2.0, &used);
    CHECK(e < 0.02, "auto on a Gaussian star: rms %g", e);
    CHECK(used == GL_CENTRE_CORE, "auto chose %s", gl_centre_method_name(used));
    e = run_jitter(STAR_MOFFAT, GL_CENTRE_CORE, GL_PROFILE_MOFFAT, 2.0, NULL);
    CHECK(e < 0.02, "Moffat fit: rms %g", e);
    e = run_jitter(STAR_AIRY, GL_CENTRE_REFERENCE, GL_PROFILE_GAUSSIAN, 2.0, NULL);
    CHECK(e < 0.02, "registration on an Airy star: rms %g", e);
    e = run_jitter(STAR_AIRY, GL_CENTRE_CORE, GL_PROFILE_GAUSSIAN, 2.0, NULL);
    CHECK(e < 0.02, "Gaussian fit of an Airy star: rms %g", e);
    /* issue 3: rms error < 0.1 px with satellite spots */
    e = run_jitter(STAR_SPOTS, GL_CENTRE_AUTO, GL_PROFILE_GAUSSIAN, 2.0, &used);
    CHECK(e < 0.1, "spots: rms %g", e);
    CHECK(used == GL_CENTRE_SPOTS, "auto chose %s", gl_centre_method_name(used));
    e = run_jitter(STAR_SPOTS, GL_CENTRE_HALO, GL_PROFILE_GAUSSIAN, 2.0, NULL);
    CHECK(e < 0.1, "halo: rms %g", e);
}

static void test_preparation(void)
{
    long n = 48, nf = 10;
    double tx[10], ty[10];
    gl_cube *c = make_cube(n, nf, STAR_GAUSS, 1.0, 0.5, tx, ty, 3);
    /* a hot pixel in every frame, a cosmic ray in frame 4, a NaN in frame 2,
     * a frame with half the flux (clouds) */
    for (long f = 0; f < nf; f++)
        gl_cube_plane(c, 0, f)[10 * n + 12] += 500;
    gl_cube_plane(c, 0, 4)[35 * n + 30] += 800;
    gl_cube_plane(c, 0, 2)[5 * n + 40] = NAN;
    for (long i = 0; i < n * n; i++)
        gl_cube_plane(c, 0, 7)[i] *= 0.5f;
    double angles[10];
    for (long f = 0; f < nf; f++)
        angles[f] = -10 + 2.0 * f;
    gl_align_params p;
    gl_align_params_init(&p);
    p.method = GL_CENTRE_CORE;
    p.badpix_sigma = 5;
    p.reject_sigma = 5;
    p.crop = 21;
    p.bin = 2;
    gl_align_result *r = NULL;
    CHECK(gl_align_run(c, angles, "prep", &p, &r) == GL_OK, "%s", gl_error_message());
    if (r) {
        CHECK((int)r->badpix_map[10 * n + 12] & GL_BADPIX_HOT, "hot pixel found");
        CHECK((int)r->badpix_map[35 * n + 30] & GL_BADPIX_TRANSIENT, "cosmic ray found");
        CHECK((int)r->badpix_map[5 * n + 40] & GL_BADPIX_NAN, "NaN found");
        CHECK(r->nbad_static <= 3, "few static bad pixels: %ld", r->nbad_static);
        CHECK(r->status[7] == GL_FRAME_FLUX, "cloudy frame rejected (%d)", r->status[7]);
        CHECK(r->nkept == 9, "kept %ld", r->nkept);
        CHECK(r->nout == 5 && r->aligned->nx == 21 && r->aligned->nframe == 5, "shape");
        /* the last bin holds frames 8 and 9 (7 rejected) */
        CHECK_CLOSE(r->angles_out[3], 0.5 * (angles[6] + angles[8]), 1e-12, "binned angle");
        CHECK_CLOSE(r->angles_out[4], angles[9], 1e-12, "last bin angle");
        gl_profile_fit fit;
        CHECK(gl_align_fit_profile(gl_cube_plane(r->aligned, 0, 0), 21, 21, 10, 10, 6, 4,
                                   GL_PROFILE_GAUSSIAN, &fit) == GL_OK,
              "fit cropped");
        CHECK_CLOSE(fit.x, 10, 0.02, "cropped star x");
        CHECK_CLOSE(fit.y, 10, 0.02, "cropped star y");
    }
    gl_align_result_free(r);
    gl_cube_free(c);
}

/* A frame taken with the AO loop open: same flux, a broad blob; its
 * correlation with the median frame is the outlier. */
static void test_correlation_rejection(void)
{
    long n = 48, nf = 9;
    double tx[9], ty[9];
    gl_cube *c = make_cube(n, nf, STAR_GAUSS, 1.0, 0.5, tx, ty, 12);
    float *img = gl_cube_plane(c, 0, 3);
    double s = 1.8 * 1.8 / (6.0 * 6.0); /* same total flux, sigma 6 */
    for (long y = 0; y < n; y++)
        for (long x = 0; x < n; x++)
            img[y * n + x] =
                (float)(5 + 1000 * s * exp(-0.5 * (pow(x - tx[3], 2) + pow(y - ty[3], 2)) / 36.0));
    gl_align_params p;
    gl_align_params_init(&p);
    p.method = GL_CENTRE_CORE;
    p.reject_sigma = 5;
    gl_align_result *r = NULL;
    CHECK(gl_align_run(c, NULL, "ao", &p, &r) == GL_OK, "%s", gl_error_message());
    if (r) {
        CHECK(r->status[3] == GL_FRAME_CORRELATION, "open-loop frame: status %d", r->status[3]);
        CHECK(r->nkept == nf - 1, "kept %ld", r->nkept);
    }
    gl_align_result_free(r);
    gl_cube_free(c);
}

static void test_bad_input(void)
{
    long n = 32, nf = 4;
    gl_cube *c = NULL;
    gl_align_params p;
    gl_align_params_init(&p);
    gl_align_result *r = NULL;
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gl_cube_new(n, n, 1, nf, &c);
    for (size_t i = 0; i < gl_cube_size(c); i++)
        c->data[i] = (float)gsl_ran_gaussian(rng, 1.0);
    CHECK(gl_align_run(c, NULL, "noise.fits", &p, &r) == GL_ERR_INPUT && !r, "no star");
    CHECK(strstr(gl_error_message(), "noise.fits: no star signal") != NULL, "%s",
          gl_error_message());
    p.crop = 40;
    CHECK(gl_align_run(c, NULL, "x", &p, &r) == GL_ERR_USAGE, "crop too large");
    gl_cube_free(c);
    gsl_rng_free(rng);

    /* a star whose core is NaN (masked saturation): the halo centres it, but
     * a 5-px crop around it holds no data */
    double tx[4], ty[4];
    c = make_cube(n, nf, STAR_SPOTS, 1.0, 0.3, tx, ty, 5);
    for (long f = 0; f < nf; f++)
        for (long y = 0; y < n; y++)
            for (long x = 0; x < n; x++)
                if (hypot(x - tx[f], y - ty[f]) < 5)
                    gl_cube_plane(c, 0, f)[y * n + x] = NAN;
    gl_align_params_init(&p);
    p.method = GL_CENTRE_HALO;
    p.crop = 5;
    CHECK(gl_align_run(c, NULL, "hole.fits", &p, &r) == GL_ERR_INPUT, "NaN crop");
    CHECK(strstr(gl_error_message(), "holds no data") != NULL, "%s", gl_error_message());
    gl_cube_free(c);

    c = make_cube(n, nf, STAR_GAUSS, 1.0, 0.3, tx, ty, 5);
    gl_align_params_init(&p);
    p.method = GL_CENTRE_SPOTS;
    CHECK(gl_align_run(c, NULL, "star.fits", &p, &r) == GL_ERR_INPUT, "spots not found");
    CHECK(strstr(gl_error_message(), "satellite spots") != NULL, "%s", gl_error_message());
    gl_cube_free(c);
}

static void test_parang_meeus(void)
{
    gl_header *h = gl_header_new();
    gl_header_set_str(h, "DATE-OBS", "2026-03-14T03:00:00.000", "");
    gl_header_set_dbl(h, "EXPTIME", 60, "");
    gl_header_set_dbl(h, "RA", 150.0, "");
    gl_header_set_dbl(h, "DEC", -30.0, "");
    gl_header_set_dbl(h, "LATITUDE", -24.6, "");
    gl_header_set_dbl(h, "LONGITUD", -70.4, "");
    gl_header_set_dbl(h, "OBSGEO-H", 2600, "");
    long nf = 240; /* 4 hours, crossing the meridian */
    double *pa = malloc(sizeof(double) * nf), *ha = malloc(sizeof(double) * nf),
           *dec = malloc(sizeof(double) * nf);
    gl_frame_times t = {NULL, 60};
    CHECK(gl_align_parang_from_header(h, nf, &t, pa, ha, dec) == GL_OK, "%s", gl_error_message());
    int east = 0, west = 0;
    double phi = -24.6 * M_PI / 180;
    for (long f = 0; f < nf; f++) {
        double H = ha[f] * M_PI / 180, d = dec[f] * M_PI / 180;
        /* Meeus eq. 14.1 */
        double q = atan2(sin(H), tan(phi) * cos(d) - sin(d) * cos(H)) * 180 / M_PI;
        CHECK_CLOSE(pa[f], q, 1e-9, "Meeus 14.1");
        east += H < 0;
        west += H > 0;
    }
    CHECK(east > 10 && west > 10, "both sides of the meridian (%d, %d)", east, west);
    gl_header_remove(h, "EXPTIME");
    CHECK(gl_align_parang_from_header(h, nf, &t, pa, ha, dec) == GL_ERR_INPUT &&
              strstr(gl_error_message(), "EXPTIME"),
          "missing EXPTIME: %s", gl_error_message());
    free(pa);
    free(ha);
    free(dec);
    gl_header_free(h);
}

/* Identical results for 1 and 2 threads (project rule 5). */
static void test_threads(void)
{
    long n = 48, nf = 6;
    double tx[6], ty[6];
    float *out[2] = {NULL, NULL};
    for (int t = 0; t < 2; t++) {
        omp_set_num_threads(t + 1);
        gl_cube *c = make_cube(n, nf, STAR_AIRY, 1.0, 1.0, tx, ty, 11);
        gl_align_params p;
        gl_align_params_init(&p);
        p.method = GL_CENTRE_REFERENCE;
        p.badpix_sigma = 5;
        gl_align_result *r = NULL;
        CHECK(gl_align_run(c, NULL, "t", &p, &r) == GL_OK, "%s", gl_error_message());
        if (r) {
            out[t] = malloc(gl_cube_size(r->aligned) * sizeof(float));
            memcpy(out[t], r->aligned->data, gl_cube_size(r->aligned) * sizeof(float));
        }
        gl_align_result_free(r);
        gl_cube_free(c);
    }
    CHECK(out[0] && out[1] && memcmp(out[0], out[1], (size_t)(n * n * nf) * sizeof(float)) == 0,
          "1 and 2 threads differ");
    free(out[0]);
    free(out[1]);
}

/* Allocation failures at every step: a clean status, nothing leaked (the
 * sanitizer build checks the leaks), the input cube still usable. */
static void test_allocation_failures(void)
{
    long n = 32, nf = 4;
    double tx[4], ty[4], angles[4] = {0, 1, 2, 3};
    gl_centre_method methods[3] = {GL_CENTRE_CORE, GL_CENTRE_REFERENCE, GL_CENTRE_SPOTS};
    int bad = 0;
    for (int m = 0; m < 3; m++)
        for (long k = 1; k <= 120; k++) {
            gl_cube *c = make_cube(n, nf, m == 2 ? STAR_SPOTS : STAR_GAUSS, 1.0, 0.5, tx, ty, 9);
            gl_align_params p;
            gl_align_params_init(&p);
            p.method = methods[m];
            p.badpix_sigma = 5;
            p.reject_sigma = 5;
            p.crop = 21;
            p.bin = 2;
            gl_align_result *r = NULL;
            gl_malloc_fail_after(k);
            gl_status st = gl_align_run(c, angles, "alloc", &p, &r);
            gl_malloc_fail_after(0);
            if (!(st == GL_OK || st == GL_ERR_NOMEM || st == GL_ERR_INPUT) || (st && r))
                bad++;
            gl_align_result_free(r);
            gl_cube_free(c);
        }
    CHECK(bad == 0, "%d allocation-failure runs ended badly", bad);
}

int main(void)
{
    test_profile_fits();
    test_xcorr_and_symmetry();
    test_spots();
    test_jitter_recovery();
    test_preparation();
    test_correlation_rejection();
    test_bad_input();
    test_parang_meeus();
    test_threads();
    test_allocation_failures();
    CHECK_DONE();
}
