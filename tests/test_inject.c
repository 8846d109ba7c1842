/*
 * test_inject.c -- fake-companion placement and the PSF model.
 *
 * References: docs/conventions.md (angle 90 + pa + theta from +x about
 * (nx/2, ny/2)); an analytic Gaussian PSF has known centre and FWHM
 * (FWHM = 2 sqrt(2 ln 2) sigma).
 */
#include "gloam/gloam.h"
#include "check.h"

#include <math.h>
#include <string.h>

static void test_position(void)
{
    gl_companion c = {10, 0, 1e-3};
    double x, y;
    /* PA 0 (north) with zero parallactic angle points up (+y) */
    gl_companion_position(&c, 0, 0, 64, 64, &x, &y);
    CHECK_CLOSE(x, 32, 1e-12, "north at theta 0: x");
    CHECK_CLOSE(y, 42, 1e-12, "north at theta 0: y");
    /* PA 90 (east) is to the left in a north-up image */
    c.pa_deg = 90;
    gl_companion_position(&c, 0, 0, 65, 65, &x, &y);
    CHECK_CLOSE(x, 22, 1e-12, "east at theta 0: x");
    CHECK_CLOSE(y, 32, 1e-12, "east at theta 0: y");
    /* the parallactic angle and north offset add to the angle */
    gl_companion_position(&c, 30, 60, 64, 64, &x, &y);
    CHECK_CLOSE(x, 32 + 10 * cos(270 * M_PI / 180), 1e-12, "theta + offset: x");
    CHECK_CLOSE(y, 32 + 10 * sin(270 * M_PI / 180), 1e-12, "theta + offset: y");
}

static void test_parse(void)
{
    gl_companion c;
    CHECK(gl_companion_parse("24.5:131:2e-4", &c) == GL_OK && c.sep_px == 24.5 && c.pa_deg == 131 &&
              c.contrast == 2e-4,
          "parse");
    CHECK(gl_companion_parse("24.5:131", &c) == GL_ERR_USAGE, "two fields refused");
    CHECK(gl_companion_parse("24.5:131:2e-4:7", &c) == GL_ERR_USAGE, "four fields refused");
    CHECK(gl_companion_parse("-3:131:2e-4", &c) == GL_ERR_USAGE, "negative separation refused");
    CHECK(gl_companion_parse("3:131:0", &c) == GL_ERR_USAGE, "zero contrast refused");
    CHECK(gl_companion_parse("3:131:-2e-4", &c) == GL_OK && c.contrast == -2e-4,
          "negative contrast (removal of a known companion) accepted");
}

static void test_psf_model(void)
{
    gl_cube *psf = NULL;
    gl_psf_model *m = NULL;
    const double sigma = 1.6, x0 = 10.37, y0 = 9.81;
    CHECK(gl_cube_new(21, 19, 1, 1, &psf) == GL_OK, "psf cube");
    double total = 0;
    for (long y = 0; y < 19; y++)
        for (long x = 0; x < 21; x++) {
            double v = exp(-0.5 * ((x - x0) * (x - x0) + (y - y0) * (y - y0)) / (sigma * sigma));
            psf->data[y * 21 + x] = (float)v;
            total += (float)v;
        }
    CHECK(gl_psf_model_new(psf, "psf", 48, 48, 1, 2.0, &m) == GL_OK, "model: %s",
          gl_error_message());
    if (m) {
        CHECK_CLOSE(m->centre_x, x0, 2e-3, "PSF centre x (analytic Gaussian)");
        CHECK_CLOSE(m->centre_y, y0, 2e-3, "PSF centre y (analytic Gaussian)");
        /* read off the cubic-interpolated profile: 2% is its accuracy here */
        CHECK_CLOSE(m->fwhm_px[0], 2 * sqrt(2 * log(2)) * sigma, 0.02 * 3.77,
                    "FWHM = 2 sqrt(2 ln 2) sigma");
        CHECK_CLOSE(m->flux[0], 2.0 * total, 1e-9 * total, "scaled flux");
        CHECK_CLOSE(m->peak[0], 2.0, 2e-3, "centred peak of the scaled unit Gaussian");
    }
    gl_psf_model_free(m);
    m = NULL;
    CHECK(gl_psf_model_new(psf, "psf", 20, 48, 1, 1.0, &m) == GL_ERR_INPUT && !m,
          "PSF wider than the frame refused");
    CHECK(gl_psf_model_new(psf, "psf", 48, 48, 1, -1.0, &m) == GL_ERR_USAGE && !m,
          "negative scale refused");
    memset(psf->data, 0, 21 * 19 * sizeof(float));
    CHECK(gl_psf_model_new(psf, "psf", 48, 48, 1, 1.0, &m) == GL_ERR_INPUT && !m,
          "PSF without signal refused");
    gl_cube_free(psf);
    gl_psf_model_free(NULL);
}

int main(void)
{
    test_position();
    test_parse();
    test_psf_model();
    CHECK_DONE();
}
