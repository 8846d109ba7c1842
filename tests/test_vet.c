/*
 * test_vet.c -- the vetting stage: the negative-companion fit recovers a
 * planted companion (Lagrange et al. 2010; Marois et al. 2010: the method
 * description, checked by recovery of known plants), its errors are finite
 * and its tests pass; bad positions and parameters are refused with nothing
 * returned; the epoch fit obeys its identities (a source on the background
 * track has chi2 0 under that hypothesis, constant offsets have chi2 0 under
 * common motion); allocation failures are reported, never crash. The track
 * itself is compared with astropy in tests/py/test_vet.py.
 */
#include "gloam/gloam.h"
#include "check.h"
#include "fixtures.h"

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>
#include <omp.h>

/* White Gaussian noise (sigma 1), angles 0..90 deg, a Gaussian PSF of FWHM
 * 3 px and peak 50. */
static void test_fit(void)
{
    gl_cube *cube = NULL, *psfc = NULL;
    double *angles = NULL;
    gl_psf_model *psf = NULL;
    gl_vet_result r = {0}, bad = {0};
    make_inputs(32, 12, 23, &cube, &angles, &psfc);
    CHECK(gl_psf_model_new(psfc, "psf", 32, 32, 1, 1.0, &psf) == GL_OK, "psf model");
    gl_companion truth = {9, 70, 0.06};
    CHECK(gl_inject_companions(cube, angles, 0, psf, &truth, 1, NULL) == GL_OK, "plant");
    gl_subtract_params sp;
    gl_subtract_params_init(&sp);
    sp.method = GL_SUBTRACT_MEDIAN;
    sp.fwhm = 3;
    gl_vet_params vp;
    gl_vet_params_init(&vp);
    vp.error_fakes = 3;
    vp.pixscale_mas = 10;
    CHECK(gl_vet_candidate(cube, angles, NULL, &sp, psf, &vp, 9.6, 72, NULL, NULL, &r) == GL_OK,
          "vet: %s", gl_error_message());
    CHECK(fabs(r.sep_px - truth.sep_px) < 0.3, "sep %g vs %g", r.sep_px, truth.sep_px);
    CHECK(fabs(r.pa_deg - truth.pa_deg) < 1, "pa %g vs %g", r.pa_deg, truth.pa_deg);
    CHECK(fabs(r.contrast / truth.contrast - 1) < 0.1, "contrast %g vs %g", r.contrast,
          truth.contrast);
    CHECK(r.nfakes == 3 && r.sep_err > 0 && r.pa_err > 0 && r.contrast_err > 0,
          "errors from 3 fakes (%d: %g %g %g)", r.nfakes, r.sep_err, r.pa_err, r.contrast_err);
    CHECK(r.npossible >= 4 && r.npassed == r.npossible, "planted companion passes (%d of %d)",
          r.npassed, r.npossible);
    for (int k = 0; k < GL_VET_NTESTS; k++)
        if (r.tests[k].possible && !r.tests[k].passed)
            fprintf(stderr, "  %s: %g (planet %g, limit %g) %s\n", gl_vet_test_name(k),
                    r.tests[k].value, r.tests[k].expected, r.tests[k].limit, r.tests[k].note);
    CHECK(!r.tests[GL_VET_TEST_EPOCHS].possible && !r.tests[GL_VET_TEST_SPECTRAL].possible,
          "no epochs, no channels: not possible");
    /* sky offsets: east = sep sin(pa), north = sep cos(pa), times the scale */
    CHECK_CLOSE(r.dra_mas, r.sep_px * 10 * sin(r.pa_deg * M_PI / 180), 1e-9, "dra");
    CHECK_CLOSE(r.ddec_mas, r.sep_px * 10 * cos(r.pa_deg * M_PI / 180), 1e-9, "ddec");
    CHECK_CLOSE(r.dmag, -2.5 * log10(r.contrast), 1e-12, "dmag");
    CHECK(r.stamp_n > 0 && r.stamp_data && r.stamp_model && r.stamp_resid, "stamps");
    CHECK(gl_vet_figure_write(NULL, NULL, &r, "t") == GL_OK, "figure with no paths");

    /* the centring error adds in quadrature */
    gl_vet_params vc = vp;
    vc.centre_err_px = 0.5;
    vc.error_fakes = 0;
    vc.max_evals = 40;
    gl_vet_result rc = {0};
    CHECK(gl_vet_candidate(cube, angles, NULL, &sp, psf, &vc, 9.6, 72, NULL, NULL, &rc) == GL_OK,
          "vet without fakes: %s", gl_error_message());
    CHECK(rc.nfakes == 0 && isnan(rc.sep_err_fit), "no fakes: no measurement error");
    gl_vet_result_free(&rc);

    /* refusals */
    CHECK(gl_vet_candidate(cube, angles, NULL, &sp, psf, &vp, 15, 10, NULL, NULL, &bad) ==
                  GL_ERR_USAGE &&
              !bad.stamp_data,
          "outside the field refused");
    sp.mask_radius = 8;
    CHECK(gl_vet_candidate(cube, angles, NULL, &sp, psf, &vp, 9, 70, NULL, NULL, &bad) ==
              GL_ERR_USAGE,
          "masked zone refused");
    sp.mask_radius = 0;
    gl_vet_params vb = vp;
    vb.merit_radius_fwhm = 0;
    CHECK(gl_vet_candidate(cube, angles, NULL, &sp, psf, &vb, 9, 70, NULL, NULL, &bad) ==
              GL_ERR_USAGE,
          "merit radius 0 refused");
    gl_vet_result_free(&bad);
    gl_vet_result_free(&r);
    gl_vet_result_free(NULL);
    gl_psf_model_free(psf);
    gl_cube_free(cube);
    gl_cube_free(psfc);
    gl_free(angles);
}

static void test_epochs(void)
{
    /* a nearby star with a large proper motion (invented values) */
    gl_vet_star s = {201.5, -43.2, -310.0, 145.0, 48.0, 12.0, 2016.0};
    double mjd[4] = {57000.5, 57800.2, 58700.9, 59900.1}, a[4], d[4], e[4] = {2, 2, 2, 2};
    CHECK(gl_vet_background_track(&s, 201.5 + 0.4 / 3600, -43.2 + 0.3 / 3600, 4, mjd, a, d) ==
              GL_OK,
          "track: %s", gl_error_message());
    /* over ~8 yr the star moves ~2.7 arcsec: the background offset changes by that */
    double span = hypot(a[3] - a[0], d[3] - d[0]);
    CHECK(span > 2000 && span < 3500, "track span %g mas", span);
    gl_vet_epochs ep = {4, mjd, a, d, e, e};
    gl_vet_epoch_fit f = {0};
    CHECK(gl_vet_epochs_fit(&s, &ep, &f) == GL_OK, "fit: %s", gl_error_message());
    CHECK(f.chi2_background < 1e-4, "on the track: chi2 background %g", f.chi2_background);
    CHECK(f.chi2_common > 1e4, "on the track: common motion rejected (%g)", f.chi2_common);
    CHECK(f.dof == 6, "dof 2n - 2");
    CHECK(fabs(f.bg_ra_deg - (201.5 + 0.4 / 3600)) * 3600e3 * cos(43.2 * M_PI / 180) < 0.01 &&
              fabs(f.bg_dec_deg - (-43.2 + 0.3 / 3600)) * 3600e3 < 0.01,
          "background position recovered");
    gl_vet_epoch_fit_free(&f);
    double ca[4] = {400, 401, 399, 400}, cd[4] = {300, 300, 301, 299};
    gl_vet_epochs ce = {4, mjd, ca, cd, e, e};
    CHECK(gl_vet_epochs_fit(&s, &ce, &f) == GL_OK, "fit constant");
    /* residuals about the means 400 and 300: (0, 1, -1, 0) and (0, 0, 1, -1), sigma 2 */
    CHECK_CLOSE(f.chi2_common, 4.0 / 4.0, 1e-9, "chi2 common");
    CHECK(f.p_background < 1e-10, "background rejected");
    gl_vet_epoch_fit_free(&f);
    gl_vet_epoch_fit_free(NULL);

    /* a distant star that does not move: the track stays put (to the
     * differential aberration, ~1e-4 of the offset) */
    gl_vet_star far = {10, 20, 0, 0, 1e-6, 0, 2016.0};
    CHECK(gl_vet_background_track(&far, 10, 20 + 1.0 / 3600, 4, mjd, a, d) == GL_OK, "far");
    for (int k = 0; k < 4; k++)
        CHECK(fabs(a[k]) < 0.5 && fabs(d[k] - 1000) < 0.5, "static track %g %g", a[k], d[k]);

    /* refusals and allocation failures */
    gl_vet_star nopx = s;
    nopx.parallax_mas = 0;
    CHECK(gl_vet_background_track(&nopx, 1, 1, 4, mjd, a, d) == GL_ERR_USAGE, "no parallax");
    gl_vet_epochs one = {1, mjd, ca, cd, e, e};
    CHECK(gl_vet_epochs_fit(&s, &one, &f) == GL_ERR_USAGE, "one epoch refused");
    int failed = 0;
    for (long k = 1; k <= 6; k++) {
        gl_malloc_fail_after(k);
        gl_status st = gl_vet_epochs_fit(&s, &ep, &f);
        gl_malloc_fail_after(0);
        failed += st == GL_ERR_NOMEM;
        gl_vet_epoch_fit_free(&f);
    }
    CHECK(failed >= 2, "allocation failures reported (%d)", failed);
}

int main(void)
{
    /* one thread, as gloam vet runs by default (many small subtractions) */
    omp_set_num_threads(1);
    test_epochs();
    test_fit();
    CHECK_DONE();
}
