/*
 * test_limits.c -- completeness of the two-sample t-test.
 *
 * Reference values: scipy.stats.nct.sf(tau, nu, delta) (SciPy 1.10, Boost's
 * noncentral t) computed for these arguments and copied here; the same
 * comparison runs live against scipy in tests/py/test_limits.py. Invariants:
 * delta = 0 gives the false-positive fraction scipy.stats.t.sf(tau, nu), and
 * completeness grows with delta; a Bessel table kept from one calibration
 * point to the next gives the numbers of a table of the point's own.
 * Contrast curves: the contrast is inversely proportional to the PSF scale
 * (the star flux) with everything else equal, the 50% curve lies below the
 * NN% curve, and bad parameters are refused with nothing returned (the
 * numbers themselves are checked against photutils and scipy in
 * tests/py/test_limits.py).
 */
#include "gloam/gloam.h"
#include "check.h"
#include "fixtures.h"
#include "limits/internal.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>

static void test_completeness(void)
{
    static const double cases[][4] = {
        /* delta, tau, nu, scipy.stats.nct.sf(tau, nu, delta) */
        {5, 5, 4, 0.5769147979248739},  {3, 5, 4, 0.19938245192741108},
        {2, 1, 10, 0.8414849404622884}, {6, 5.5, 100, 0.6841409598826955},
        {0, 1, 3, 0.19550110947788524}, {-2, 1, 2, 0.0038626209760062036},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++)
        CHECK_CLOSE(gl_limits_completeness(cases[i][0], cases[i][1], cases[i][2]), cases[i][3],
                    1e-9, "completeness vs scipy.stats.nct.sf");
    /* no companion: the completeness is the false-positive fraction of the
     * central t distribution (GSL's own t tail as the independent check) */
    for (double nu = 1; nu <= 40; nu *= 2)
        CHECK_CLOSE(gl_limits_completeness(0, 3.0, nu), gsl_cdf_tdist_Q(3.0, nu), 1e-9,
                    "delta 0 gives the central t tail");
    double prev = 0;
    for (double d = -3; d <= 12; d += 0.5) {
        double c = gl_limits_completeness(d, 5, 6);
        CHECK(c >= prev, "completeness grows with delta (%g at %g)", c, d);
        prev = c;
    }
    double d;
    CHECK(gl_limits_delta_for_completeness(0.95, 5, 4, &d) == GL_OK, "root found");
    /* scipy: brentq(lambda d: nct.sf(5, 4, d) - 0.95, 0, 50) = 8.100054065044834 */
    CHECK_CLOSE(d, 8.100054065044834, 1e-7, "delta for 95% completeness");
    CHECK(gl_limits_delta_for_completeness(0.5, 5, 4, &d) == GL_OK, "root found");
    CHECK_CLOSE(d, 4.610503245368496, 1e-7, "delta for 50% completeness");
    CHECK(gl_limits_delta_for_completeness(1.5, 5, 4, &d) == GL_ERR_USAGE, "q > 1 refused");
    CHECK(gl_limits_delta_for_completeness(0.5, 5, 0, &d) == GL_ERR_USAGE, "nu 0 refused");
}

/* The doubly noncentral t of a companion with lobes in its references:
 * against scipy (quad of norm.sf x stats.ncx2.pdf, SciPy 1.10, copied here),
 * lambda = 0 giving the noncentral t, and a Monte Carlo of the two-sample t
 * test itself with a fixed lobe pattern added to the references (the
 * derivation: the references' mean and deviations stay independent). */
static void test_completeness_lobes(void)
{
    static const double cases[][5] = {
        /* delta, lambda, tau, nu, quad(norm.sf(tau sqrt(v/nu) - delta) ncx2.pdf(v, nu, lambda)) */
        {5, 3, 5, 4, 0.300891456916811},   {8, 20, 6, 10, 0.130927141574529},
        {3, 0.5, 2, 1, 0.736827587903615}, {10, 100, 7, 26, 0.000519987545854053},
        {6, 2, 5.5, 2, 0.404569143333792},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++)
        CHECK_CLOSE(
            gl_limits_completeness_lobes(cases[i][0], cases[i][1], cases[i][2], cases[i][3]),
            cases[i][4], 1e-8, "doubly noncentral t vs scipy ncx2 + quad");
    CHECK_CLOSE(gl_limits_completeness_lobes(4, 0, 5, 6), gl_limits_completeness(4, 5, 6), 1e-12,
                "lambda 0 is the noncentral t");
    CHECK(isnan(gl_limits_completeness_lobes(4, -1, 5, 6)), "negative lambda refused");

    /* Monte Carlo: n2 = 12 references with a lobe pattern g (negative next
     * to the test aperture), test aperture signal 6 sigma */
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 5);
    enum { N2 = 12, TRIALS = 40000 };
    double g[N2] = {-1.5, -0.8, -0.3, 0, 0, 0, 0, 0, 0, -0.3, -0.8, -1.5}, gm = 0, lam = 0;
    for (int k = 0; k < N2; k++)
        gm += g[k] / N2;
    for (int k = 0; k < N2; k++)
        lam += (g[k] - gm) * (g[k] - gm);
    double tau = 4, sig0 = 6, kf = sqrt(1 + 1.0 / N2);
    long hit = 0;
    for (int t = 0; t < TRIALS; t++) {
        double x0 = sig0 + gsl_ran_gaussian(rng, 1), m = 0, ss = 0, x[N2];
        for (int k = 0; k < N2; k++)
            m += (x[k] = g[k] + gsl_ran_gaussian(rng, 1)) / N2;
        for (int k = 0; k < N2; k++)
            ss += (x[k] - m) * (x[k] - m);
        hit += (x0 - m) / (sqrt(ss / (N2 - 1)) * kf) > tau;
    }
    double p = gl_limits_completeness_lobes((sig0 - gm) / kf, lam, tau, N2 - 1);
    double se = sqrt(p * (1 - p) / TRIALS);
    CHECK(fabs((double)hit / TRIALS - p) < 4 * se, "Monte Carlo %g vs model %g (4 sigma = %g)",
          (double)hit / TRIALS, p, 4 * se);
    gsl_rng_free(rng);
}

/* The tabulated Bessel function (one table per order, as the calibration
 * uses it) against GSL's modified Bessel functions evaluated at every node
 * (gl_limits_completeness_lobes without a table): random parameter sets over
 * the range the curves meet (nu 1-250, tau 1-41, lambda 1e-10 to 1e12, delta
 * from below the threshold to far above it), and the scipy cases above. */
static void test_completeness_lobes_table(void)
{
    static const double cases[][5] = {
        {5, 3, 5, 4, 0.300891456916811},   {8, 20, 6, 10, 0.130927141574529},
        {3, 0.5, 2, 1, 0.736827587903615}, {10, 100, 7, 26, 0.000519987545854053},
        {6, 2, 5.5, 2, 0.404569143333792},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        limits_bessel_table *t = gl_limits_bessel_table_new(cases[i][3] / 2 - 1);
        CHECK(t != NULL, "table of order %g", cases[i][3] / 2 - 1);
        CHECK_CLOSE(gl_limits_completeness_lobes_tabled(t, cases[i][0], cases[i][1], cases[i][2],
                                                        cases[i][3]),
                    cases[i][4], 1e-8, "tabled doubly noncentral t vs scipy ncx2 + quad");
        gl_limits_bessel_table_free(t);
    }
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 11);
    double worst = 0;
    for (int k = 0; k < 40; k++) {
        double nu = (double)(1 + gsl_rng_uniform_int(rng, 250));
        limits_bessel_table *t = gl_limits_bessel_table_new(nu / 2 - 1);
        for (int i = 0; i < 25; i++) {
            double tau = 1 + 40 * gsl_rng_uniform(rng);
            double lambda = pow(10, -10 + 22 * gsl_rng_uniform(rng));
            double delta =
                tau * (0.5 + 2 * gsl_rng_uniform(rng)) + sqrt(lambda) * gsl_rng_uniform(rng);
            double p0 = gl_limits_completeness_lobes(delta, lambda, tau, nu);
            double p1 = gl_limits_completeness_lobes_tabled(t, delta, lambda, tau, nu);
            worst = fmax(worst, fabs(p1 - p0));
        }
        gl_limits_bessel_table_free(t);
    }
    CHECK(worst < 1e-12, "tabled vs direct Bessel: largest difference %g", worst);
    CHECK(gl_limits_bessel_table_new(-1) == NULL, "order -1 refused");
    CHECK_CLOSE(gl_limits_completeness_lobes_tabled(NULL, 8, 20, 6, 10),
                gl_limits_completeness_lobes(8, 20, 6, 10), 0, "no table: direct");
    gsl_rng_free(rng);
}

/* A Bessel table kept from point to point (as the curve's threads keep
 * theirs) gives the numbers of a table of the point's own: after a point of
 * another order (the table replaced) and again with its pieces already
 * built (the table reused), bit for bit. */
static void test_calibrate_kept_table(void)
{
    gl_limits_fake fakes[6] = {0};
    for (int i = 0; i < 6; i++) {
        fakes[i].sep_px = 10 + i;
        fakes[i].throughput[0] = 0.6 + 0.01 * i;
        fakes[i].signal[0] = 0.65 + 0.015 * i - 0.002 * i * i;
        fakes[i].ref_spread[0] = 0.2 + 0.01 * (i % 3);
    }
    limits_point base = {.sep_px = 12.5,
                         .fwhm = 4,
                         .noise = 0.15,
                         .tau = 6.2,
                         .nref = 17,
                         .noise_dof = 15,
                         .psf_flux = 1e4,
                         .q = 0.95};
    limits_point own = base, other = base, replaced = base, reused = base;
    gl_limits_calibrate_point(&own, fakes, 6, 0, NULL);
    limits_bessel_table *keep = NULL;
    other.nref = 23;
    other.tau = 5.1;
    gl_limits_calibrate_point(&other, fakes, 6, 0, &keep);
    gl_limits_calibrate_point(&replaced, fakes, 6, 0, &keep);
    gl_limits_calibrate_point(&reused, fakes, 6, 0, &keep);
    gl_limits_bessel_table_free(keep);
    CHECK(isfinite(own.contrast_c50) && isfinite(own.contrast_cq) && own.completeness > 0,
          "calibrated: c50 %g, c95 %g, completeness %g", own.contrast_c50, own.contrast_cq,
          own.completeness);
    const limits_point *p[2] = {&replaced, &reused};
    for (int k = 0; k < 2; k++)
        CHECK(p[k]->contrast_c50 == own.contrast_c50 && p[k]->contrast_cq == own.contrast_cq &&
                  p[k]->completeness == own.completeness && p[k]->contrast == own.contrast,
              "%s table: the numbers of a table of its own", k ? "reused" : "replaced");
}

/* White Gaussian noise cube (no star) and a Gaussian PSF stamp. */
static void test_curves(void)
{
    gl_cube *cube = NULL, *psfc = NULL;
    double *angles = NULL;
    gl_psf_model *m1 = NULL, *m4 = NULL;
    gl_limits_result r1 = {0}, r4 = {0}, bad = {0};
    make_inputs(40, 16, 17, &cube, &angles, &psfc);
    gl_subtract_params sp;
    gl_subtract_params_init(&sp);
    sp.method = GL_SUBTRACT_MEDIAN;
    sp.fwhm = 3;
    gl_limits_params lp;
    gl_limits_params_init(&lp);
    CHECK(gl_psf_model_new(psfc, "psf", 40, 40, 1, 1.0, &m1) == GL_OK, "psf model");
    CHECK(gl_psf_model_new(psfc, "psf", 40, 40, 1, 4.0, &m4) == GL_OK, "psf model x4");
    CHECK(gl_limits_compute(cube, angles, NULL, &sp, m1, &lp, &r1) == GL_OK, "limits: %s",
          gl_error_message());
    CHECK(gl_limits_compute(cube, angles, NULL, &sp, m4, &lp, &r4) == GL_OK, "limits x4: %s",
          gl_error_message());
    CHECK(r1.n > 5 && r1.n == r4.n && r1.nplanes == 1, "same grid");
    CHECK_CLOSE(r4.psf_aperture_flux, 4 * r1.psf_aperture_flux, 1e-9 * r4.psf_aperture_flux,
                "F scales with the PSF scale");
    int finite = 0;
    for (long i = 0; i < r1.n; i++) {
        if (!isfinite(r1.contrast_c50[i]))
            continue;
        finite++;
        /* same fake fluxes (level x noise), same throughput: contrast ~ 1 / star flux */
        CHECK_CLOSE(r4.throughput[i], r1.throughput[i], 1e-12, "throughput independent of scale");
        CHECK_CLOSE(4 * r4.contrast_c50[i], r1.contrast_c50[i], 1e-9 * r1.contrast_c50[i],
                    "contrast x psf scale is constant");
        /* 95% may be out of reach where the fakes' lobes cap their S/N */
        CHECK(!(r1.contrast_cq[i] <= r1.contrast_c50[i]), "50%% below 95%% completeness");
        CHECK(r1.completeness_of_contrast[i] > 0 && r1.completeness_of_contrast[i] < 1,
              "classical curve: a completeness (%g)", r1.completeness_of_contrast[i]);
        /* several fakes calibrate every point, with their scatter */
        CHECK(r1.fakes_used[i] >= 2, "fakes per point (%g)", r1.fakes_used[i]);
    }
    CHECK(finite >= 5, "curve has values (%d)", finite);
    CHECK(r1.image && r1.nfakes > 3, "image and fakes returned");

    /* refusals: nothing returned */
    gl_limits_params lb = lp;
    lb.r_max_px = 25; /* beyond a 40 px frame */
    CHECK(gl_limits_compute(cube, angles, NULL, &sp, m1, &lb, &bad) == GL_ERR_USAGE &&
              bad.sep_px == NULL && bad.image == NULL,
          "separation beyond the frame refused");
    lb = lp;
    lb.completeness = 1.0;
    CHECK(gl_limits_compute(cube, angles, NULL, &sp, m1, &lb, &bad) == GL_ERR_USAGE,
          "completeness 1 refused");
    lb = lp;
    lb.fake_runs = 0;
    CHECK(gl_limits_compute(cube, angles, NULL, &sp, m1, &lb, &bad) == GL_ERR_USAGE,
          "no fake runs refused");
    gl_limits_result_free(&bad);
    gl_limits_result_free(&r1);
    gl_limits_result_free(&r4);
    gl_limits_result_free(NULL);
    gl_psf_model_free(m1);
    gl_psf_model_free(m4);
    gl_cube_free(cube);
    gl_cube_free(psfc);
    gl_free(angles);
}

int main(void)
{
    test_completeness();
    test_completeness_lobes();
    test_completeness_lobes_table();
    test_calibrate_kept_table();
    test_curves();
    CHECK_DONE();
}
