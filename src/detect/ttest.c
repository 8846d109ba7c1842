/*
 * ttest.c -- small-sample statistics of aperture photometry.
 *
 * Close to the star only n = floor(2 pi r / d) independent resolution
 * elements of diameter d fit on the circle of radius r, so the noise is
 * estimated from a handful of apertures. Mawet et al. 2014 (ApJ 792, 97,
 * eq. 9) compare the test aperture (n1 = 1) with the n2 others by Welch's /
 * Student's two-sample t statistic
 *     t = (x1 - mean2) / (s2 sqrt(1 + 1/n2)),
 * s2 the sample standard deviation (n2 - 1 in the denominator), which follows
 * Student's t with n2 - 1 degrees of freedom when the apertures are
 * independent Gaussian draws. The false-positive fraction is the upper tail
 * of that distribution (GSL gsl_cdf_tdist_Q); a threshold "N sigma" is the
 * Gaussian one-sided tail of N (gsl_cdf_ugaussian_Q: 5 sigma = 2.867e-7)
 * mapped to t with the same dof (gsl_cdf_tdist_Qinv).
 */
#include "detect/internal.h"

#include <float.h>
#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <math.h>
#include <pthread.h>

static void gsl_handler_off(void)
{
    gsl_set_error_handler_off();
}

void gl_detect_gsl_quiet(void)
{
    /* once per process: the statistics run inside parallel loops, and GSL's
     * handler is one global variable */
    static pthread_once_t once = PTHREAD_ONCE_INIT;
    pthread_once(&once, gsl_handler_off);
}

gl_status gl_detect_ttest(double test, const double *ref, long nref, gl_ttest *out)
{
    out->t = out->fpf = out->significance = out->noise = NAN;
    out->ref_mean = out->ref_std = NAN;
    out->nref = nref;
    out->dof = nref - 1;
    if (nref < 2)
        return gl_error_set(GL_ERR_USAGE, "t test: %ld reference apertures (at least 2 needed)",
                            nref);
    if (!isfinite(test))
        return gl_error_set(GL_ERR_USAGE, "t test: the test aperture flux is not finite");
    /* two passes, in a fixed order: the result does not depend on threads */
    double mean = 0;
    for (long k = 0; k < nref; k++) {
        if (!isfinite(ref[k]))
            return gl_error_set(GL_ERR_USAGE, "t test: reference aperture %ld is not finite", k);
        mean += ref[k];
    }
    mean /= (double)nref;
    double ss = 0;
    for (long k = 0; k < nref; k++)
        ss += (ref[k] - mean) * (ref[k] - mean);
    double sd = sqrt(ss / (double)(nref - 1));
    out->ref_mean = mean;
    out->ref_std = sd;
    if (!(sd > 0))
        return gl_error_set(GL_ERR_NUMERIC, "t test: the reference apertures are all equal");
    out->noise = sd * sqrt(1.0 + 1.0 / (double)nref);
    out->t = (test - mean) / out->noise;
    out->fpf = gl_detect_fpf_from_t(out->t, out->dof);
    out->significance = gl_detect_sigma_from_t(out->t, out->dof);
    return GL_OK;
}

double gl_detect_fpf_from_t(double t, long dof)
{
    if (dof < 1 || isnan(t))
        return NAN;
    gl_detect_gsl_quiet();
    return gsl_cdf_tdist_Q(t, (double)dof);
}

double gl_detect_fpf_from_sigma(double sigma)
{
    if (isnan(sigma))
        return NAN;
    gl_detect_gsl_quiet();
    return gsl_cdf_ugaussian_Q(sigma);
}

double gl_detect_sigma_from_fpf(double fpf)
{
    if (!(fpf >= 0 && fpf <= 1))
        return NAN;
    /* the scale saturates instead of reaching +-infinity */
    if (fpf < DBL_MIN)
        fpf = DBL_MIN;
    if (fpf > 1 - DBL_MIN)
        fpf = 1 - DBL_EPSILON;
    gl_detect_gsl_quiet();
    return gsl_cdf_ugaussian_Qinv(fpf);
}

double gl_detect_sigma_from_t(double t, long dof)
{
    if (dof < 1 || isnan(t))
        return NAN;
    gl_detect_gsl_quiet();
    /* below the median the lower tail keeps full precision */
    if (t < 0)
        return -gl_detect_sigma_from_fpf(gsl_cdf_tdist_P(t, (double)dof));
    return gl_detect_sigma_from_fpf(gsl_cdf_tdist_Q(t, (double)dof));
}

double gl_detect_t_threshold(double sigma, long dof)
{
    if (dof < 1 || isnan(sigma))
        return NAN;
    gl_detect_gsl_quiet();
    return gsl_cdf_tdist_Qinv(gsl_cdf_ugaussian_Q(sigma), (double)dof);
}

long gl_detect_ring_nref(double sep, double diam, int exclude_adjacent)
{
    long n = gl_detect_ring_count(sep, diam);
    long nref = n - 1 - (exclude_adjacent ? 2 : 0);
    return nref < 0 ? 0 : nref;
}

long gl_detect_threshold_at(double sigma, double sep, double diam, int exclude_adjacent, double *t,
                            double *factor)
{
    long nref = gl_detect_ring_nref(sep, diam, exclude_adjacent);
    *t = NAN;
    if (factor)
        *factor = NAN;
    if (nref < 2)
        return 0;
    *t = gl_detect_t_threshold(sigma, nref - 1);
    if (factor)
        *factor = *t * sqrt(1.0 + 1.0 / (double)nref);
    return nref - 1;
}
