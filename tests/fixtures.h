/*
 * fixtures.h -- small inputs the C unit tests share: a white-noise cube
 * (unit Gaussian, GSL's MT19937 seeded as asked) with 90 degrees of field
 * rotation spread evenly over its frames, and a 15x15 Gaussian PSF of 3 px
 * FWHM (sigma = FWHM / (2 sqrt(2 ln 2))) peaking at 50.
 */
#ifndef GLOAM_TESTS_FIXTURES_H
#define GLOAM_TESTS_FIXTURES_H

#include "check.h"
#include "gloam/gloam.h"

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>

static void make_inputs(long n, long nf, unsigned long seed, gl_cube **cube, double **angles,
                        gl_cube **psf)
{
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, seed);
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

#endif
