/*
 * test_detect.c -- unit tests of the detection stage: exact aperture areas
 * against closed-form circle geometry, Student-t and Gaussian tails against
 * published tables, the ring layout of Mawet et al. 2014, thread-count
 * independence of the maps, planted-source recovery, error paths and
 * allocation failures.
 */
#include "check.h"
#include "gloam/gloam.h"

#include <math.h>
#include <omp.h>
#include <stdlib.h>
#include <string.h>

/* Deterministic standard normal deviates (Box-Muller on an LCG): test data. */
static unsigned long long lcg_state = 12345;
static double uniform01(void)
{
    lcg_state = lcg_state * 6364136223846793005ULL + 1442695040888963407ULL;
    return ((double)(lcg_state >> 11) + 0.5) / 9007199254740992.0;
}
static double normal01(void)
{
    double u = uniform01(), v = uniform01();
    return sqrt(-2 * log(u)) * cos(2 * M_PI * v);
}

static void test_overlap_analytic(void)
{
    /* a disk inside one pixel: its full area pi r^2 (circle area) */
    CHECK_CLOSE(gl_detect_pixel_overlap(3, 4, 0.3, 3, 4), M_PI * 0.09, 1e-14, "small disk");
    /* the unit pixel inside a disk of radius > sqrt(2)/2: area 1 */
    CHECK_CLOSE(gl_detect_pixel_overlap(0, 0, 0.75, 0, 0), 1.0, 1e-14, "pixel inside disk");
    /* disk of radius 0.6 on the pixel centre: pi r^2 minus four circular
     * segments at distance 0.5, each r^2 acos(h/r) - h sqrt(r^2 - h^2)
     * (circular-segment area, elementary geometry) */
    double r = 0.6, h = 0.5;
    double seg = r * r * acos(h / r) - h * sqrt(r * r - h * h);
    CHECK_CLOSE(gl_detect_pixel_overlap(0, 0, r, 0, 0), M_PI * r * r - 4 * seg, 1e-14,
                "square minus segments");
    /* disk centred on a pixel corner: a quarter in each of the four pixels */
    for (int k = 0; k < 4; k++)
        CHECK_CLOSE(gl_detect_pixel_overlap(0.5, 0.5, 0.4, k % 2, k / 2), M_PI * 0.16 / 4, 1e-14,
                    "quarter disk");
    /* over all pixels the overlaps add up to pi r^2, at any centre */
    for (int t = 0; t < 20; t++) {
        double cx = 10 + uniform01(), cy = 10 + uniform01(), rr = 0.2 + 4 * uniform01();
        double sum = 0;
        for (int j = 0; j < 21; j++)
            for (int i = 0; i < 21; i++)
                sum += gl_detect_pixel_overlap(cx, cy, rr, i, j);
        CHECK_CLOSE(sum, M_PI * rr * rr, 1e-11, "total area");
    }
}

static void test_aperture_sum(void)
{
    const long n = 32;
    float *img = malloc((size_t)n * n * sizeof *img);
    for (long k = 0; k < n * n; k++)
        img[k] = 2.5f;
    gl_aperture_plan *p = NULL;
    CHECK(gl_detect_aperture_plan_new(2.3, &p) == GL_OK, "plan");
    double *work = malloc(gl_detect_aperture_worksize(p) * sizeof *work), s, a;
    /* constant image: value times the disk area */
    CHECK(gl_detect_aperture_sum(p, img, n, n, 15.37, 16.81, work, &s, &a) == 1, "inside");
    CHECK_CLOSE(s, 2.5 * M_PI * 2.3 * 2.3, 1e-11, "constant image");
    CHECK_CLOSE(a, M_PI * 2.3 * 2.3, 1e-11, "area");
    /* sum equals the pixel-by-pixel overlaps */
    double ref = 0;
    for (long j = 0; j < n; j++)
        for (long i = 0; i < n; i++) {
            img[j * n + i] = (float)(i + 0.1 * j * j);
            ref += gl_detect_pixel_overlap(11.2, 9.9, 2.3, i, j) * img[j * n + i];
        }
    gl_detect_aperture_sum(p, img, n, n, 11.2, 9.9, work, &s, NULL);
    CHECK_CLOSE(s, ref, 1e-10 * fabs(ref), "weights");
    /* leaving the image or touching NaN: incomplete */
    CHECK(gl_detect_aperture_sum(p, img, n, n, 1.0, 10, work, &s, NULL) == 0 && isnan(s), "edge");
    img[10 * n + 11] = NAN;
    CHECK(gl_detect_aperture_sum(p, img, n, n, 11.2, 9.9, work, &s, NULL) == 0, "NaN");
    gl_aperture_plan *bad = NULL;
    CHECK(gl_detect_aperture_plan_new(0, &bad) == GL_ERR_USAGE && !bad, "zero radius");
    gl_detect_aperture_plan_free(p);
    gl_detect_aperture_plan_free(NULL);
    free(work);
    free(img);
}

static void test_statistics(void)
{
    /* Gaussian upper tail at 5 sigma: 2.8665e-7 (conventions; Abramowitz &
     * Stegun 26.2.19 table) */
    CHECK_CLOSE(gl_detect_fpf_from_sigma(5), 2.8665157e-7, 1e-12, "Q(5)");
    CHECK_CLOSE(gl_detect_sigma_from_fpf(2.8665157e-7), 5, 1e-6, "Qinv");
    /* Student t percentage points (Abramowitz & Stegun Table 26.10):
     * t(0.05; 5) = 2.015, t(0.025; 10) = 2.228, t(0.005; 3) = 5.841 */
    CHECK_CLOSE(gl_detect_fpf_from_t(2.015, 5), 0.05, 2e-4, "t 5 dof");
    CHECK_CLOSE(gl_detect_fpf_from_t(2.228, 10), 0.025, 2e-4, "t 10 dof");
    CHECK_CLOSE(gl_detect_fpf_from_t(5.841, 3), 0.005, 2e-5, "t 3 dof");
    CHECK(isnan(gl_detect_fpf_from_t(1, 0)), "no dof");
    /* threshold round trip */
    double t = gl_detect_t_threshold(3, 7);
    CHECK_CLOSE(gl_detect_fpf_from_t(t, 7), gl_detect_fpf_from_sigma(3), 1e-12, "t threshold");
    /* far tails stay finite */
    CHECK(isfinite(gl_detect_sigma_from_fpf(0)) && gl_detect_sigma_from_fpf(0) > 37, "fpf 0");
    CHECK(isnan(gl_detect_sigma_from_fpf(-1)), "bad fpf");

    /* two-sample t of Mawet et al. 2014 eq. 9, by hand:
     * refs 1..5: mean 3, s = sqrt(2.5); t = (10 - 3) / (s sqrt(1 + 1/5)) */
    double ref[5] = {1, 2, 3, 4, 5};
    gl_ttest r;
    CHECK(gl_detect_ttest(10, ref, 5, &r) == GL_OK, "ttest");
    CHECK_CLOSE(r.t, 7 / (sqrt(2.5) * sqrt(1.2)), 1e-12, "t value");
    CHECK(r.dof == 4 && r.nref == 5, "dof");
    CHECK(gl_detect_ttest(10, ref, 1, &r) == GL_ERR_USAGE, "too few");
    double same[3] = {1, 1, 1};
    CHECK(gl_detect_ttest(2, same, 3, &r) == GL_ERR_NUMERIC, "zero spread");
}

static void test_ring(void)
{
    /* n = floor(2 pi r / d): 6 at r = d, 12 at 2d, 31 at 5d (Mawet et al. 2014) */
    CHECK(gl_detect_ring_count(4, 4) == 6, "1 FWHM");
    CHECK(gl_detect_ring_count(8, 4) == 12, "2 FWHM");
    CHECK(gl_detect_ring_count(20, 4) == 31, "5 FWHM");
    CHECK(gl_detect_ring_count(0, 4) == 0, "centre");
    double x[6], y[6];
    gl_detect_ring_positions(10, 10, 4, 0, 6, x, y);
    CHECK_CLOSE(x[0], 14, 1e-12, "first x");
    CHECK_CLOSE(y[1], 10 + 4 * sin(M_PI / 3), 1e-12, "second y");
    /* the count is by arc length (Mawet et al. 2014): neighbours are at least
     * one diameter apart along the circle; the chord between centres is
     * shorter by sin(pi/n)/(pi/n), at worst 4.5 % for n = 6 (a slight overlap
     * that the published layout accepts; docs/detect.md) */
    for (double r = 4; r < 40; r += 0.37) {
        long n = gl_detect_ring_count(r, 4);
        CHECK(2 * M_PI * r / (double)n >= 4 - 1e-9, "arc spacing at r = %g", r);
        CHECK(2 * r * sin(M_PI / (double)n) >= 0.95 * 4, "chord spacing at r = %g", r);
    }
    double t, f;
    long dof = gl_detect_threshold_at(5, 4, 4, 0, &t, &f);
    CHECK(dof == 4, "dof at 1 FWHM: 6 apertures, 5 references");
    CHECK_CLOSE(f, t * sqrt(1 + 1.0 / 5), 1e-12, "factor");
    CHECK(gl_detect_threshold_at(5, 2, 4, 1, &t, &f) == 0 && isnan(t), "too close");
}

static float *noise_image(long n, double amp, double px, double py, double fwhm)
{
    float *img = malloc((size_t)n * (size_t)n * sizeof *img);
    double s = fwhm / (2 * sqrt(2 * log(2)));
    for (long j = 0; j < n; j++)
        for (long i = 0; i < n; i++) {
            double r2 = (i - px) * (i - px) + (j - py) * (j - py);
            img[j * n + i] = (float)(normal01() + amp * exp(-r2 / (2 * s * s)));
        }
    return img;
}

static void test_maps_and_candidates(void)
{
    const long n = 64;
    const double px = 20.3, py = 40.6; /* sep 14.96 px from (32, 32) */
    float *img = noise_image(n, 12, px, py, 3);
    gl_detect_params par;
    gl_detect_params_init(&par);
    par.fwhm = 3;
    gl_detect_maps *m1 = NULL, *m2 = NULL;
    omp_set_num_threads(1);
    CHECK(gl_detect_maps_compute(img, n, n, &par, &m1) == GL_OK, "maps 1 thread");
    omp_set_num_threads(2);
    CHECK(gl_detect_maps_compute(img, n, n, &par, &m2) == GL_OK, "maps 2 threads");
    if (m1 && m2) {
        size_t bytes = (size_t)n * n * sizeof(float);
        CHECK(memcmp(m1->snr, m2->snr, bytes) == 0, "same S/N at any thread count");
        CHECK(memcmp(m1->fpf, m2->fpf, 2 * bytes) == 0, "same FPF");
        CHECK(isnan(m1->snr[32 * n + 32]), "star masked");
        CHECK(isnan(m1->snr[0]), "corner left out");
    }
    gl_detect_sky *sky = NULL;
    CHECK(gl_detect_sky_new(NULL, NAN, &sky) == GL_OK, "sky");
    gl_candidate *c = NULL;
    long nc = 0;
    CHECK(gl_detect_candidates_find(img, n, n, m1, &par, sky, &c, &nc) == GL_OK, "find");
    CHECK(nc >= 1, "planted source found");
    if (nc >= 1) {
        CHECK(hypot(c[0].x - px, c[0].y - py) < 0.2, "position %g %g", c[0].x, c[0].y);
        /* pa = atan2(-(x - cx), y - cy) (conventions) */
        double pa = atan2(-(px - 32), py - 32) * 180 / M_PI;
        CHECK_CLOSE(c[0].pa_deg, pa < 0 ? pa + 360 : pa, 0.5, "position angle");
        CHECK(c[0].gaussian_fit == 1, "Gaussian fit used");
        CHECK(isnan(c[0].sep_arcsec) && isnan(c[0].dra_arcsec), "no scale, no WCS");
    }
    gl_free(c);
    gl_detect_sky_free(sky);

    /* allocation failures: a clean NOMEM at every step, nothing leaked */
    for (long k = 1; k <= 8; k++) {
        gl_detect_maps *m3 = NULL;
        gl_malloc_fail_after(k);
        gl_status st = gl_detect_maps_compute(img, n, n, &par, &m3);
        gl_malloc_fail_after(0);
        CHECK(st == GL_OK || st == GL_ERR_NOMEM, "allocation failure %ld: %d", k, (int)st);
        gl_detect_maps_free(m3);
    }

    /* bad input */
    par.fwhm = 17;
    gl_detect_maps *m5 = NULL;
    CHECK(gl_detect_maps_compute(img, n, n, &par, &m5) == GL_ERR_USAGE && !m5, "FWHM > n/4");
    par.fwhm = 3;
    for (long k = 0; k < n * n; k++)
        img[k] = NAN;
    gl_detect_maps *m4 = NULL;
    CHECK(gl_detect_maps_compute(img, n, n, &par, &m4) == GL_ERR_INPUT, "all NaN");
    gl_detect_maps_free(m1);
    gl_detect_maps_free(m2);
    gl_detect_maps_free(NULL);
    free(img);
}

int main(void)
{
    test_overlap_analytic();
    test_aperture_sum();
    test_statistics();
    test_ring();
    test_maps_and_candidates();
    CHECK_DONE();
}
