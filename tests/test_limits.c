/*
 * test_limits.c -- completeness of the two-sample t-test.
 *
 * Reference values: scipy.stats.nct.sf(tau, nu, delta) (SciPy 1.10, Boost's
 * noncentral t) computed for these arguments and copied here; the same
 * comparison runs live against scipy in tests/py/test_limits.py. Invariants:
 * delta = 0 gives the false-positive fraction scipy.stats.t.sf(tau, nu), and
 * completeness grows with delta. Contrast curves: the contrast is inversely
 * proportional to the PSF scale (the star flux) with everything else equal,
 * the 50% curve lies below the NN% curve, and bad parameters are refused with
 * nothing returned (the numbers themselves are checked against photutils and
 * scipy in tests/py/test_limits.py).
 */
#include "gloam/gloam.h"
#include "check.h"

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

/* White Gaussian noise cube (no star) and a Gaussian PSF stamp. */
static void make_inputs(long n, long nf, gl_cube **cube, double **angles, gl_cube **psf)
{
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 17);
    CHECK(gl_cube_new(n, n, 1, nf, cube) == GL_OK, "cube");
    CHECK(gl_cube_new(15, 15, 1, 1, psf) == GL_OK, "psf");
    *angles = gl_malloc((size_t)nf * sizeof **angles);
    for (size_t i = 0; i < gl_cube_size(*cube); i++)
        (*cube)->data[i] = (float)gsl_ran_gaussian(rng, 1.0);
    for (long f = 0; f < nf; f++)
        (*angles)[f] = 90.0 * (double)f / (double)(nf - 1);
    double s = 3.0 / (2 * sqrt(2 * log(2)));
    for (long y = 0; y < 15; y++)
        for (long x = 0; x < 15; x++)
            (*psf)->data[y * 15 + x] =
                (float)(50 * exp(-0.5 * ((x - 7) * (x - 7) + (y - 7) * (y - 7)) / (s * s)));
    gsl_rng_free(rng);
}

static void test_curves(void)
{
    gl_cube *cube = NULL, *psfc = NULL;
    double *angles = NULL;
    gl_psf_model *m1 = NULL, *m4 = NULL;
    gl_limits_result r1 = {0}, r4 = {0}, bad = {0};
    make_inputs(40, 16, &cube, &angles, &psfc);
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
        CHECK(r1.contrast_c50[i] < r1.contrast_cq[i], "50%% below 95%% completeness");
        CHECK(r1.completeness_of_contrast[i] > 0.5 && r1.completeness_of_contrast[i] < 0.7,
              "classical curve: completeness a bit above 50%% (%g)",
              r1.completeness_of_contrast[i]);
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
    test_curves();
    CHECK_DONE();
}
