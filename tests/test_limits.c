/*
 * test_limits.c -- completeness of the two-sample t-test.
 *
 * Reference values: scipy.stats.nct.sf(tau, nu, delta) (SciPy 1.10, Boost's
 * noncentral t) computed for these arguments and copied here; the same
 * comparison runs live against scipy in tests/py/test_limits.py. Invariants:
 * delta = 0 gives the false-positive fraction scipy.stats.t.sf(tau, nu), and
 * completeness grows with delta.
 */
#include "gloam/gloam.h"
#include "check.h"

#include <gsl/gsl_cdf.h>

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

int main(void)
{
    test_completeness();
    CHECK_DONE();
}
