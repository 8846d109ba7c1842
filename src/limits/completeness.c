/*
 * completeness.c -- the probability that a companion is detected, under the
 * two-sample Student-t test of Mawet et al. (2014, ApJ 792, 97).
 *
 * A companion whose true aperture flux is f, in an annulus where the aperture
 * sums have standard deviation sigma and n2 reference apertures are compared
 * with the test aperture, gives a statistic that follows a noncentral t
 * distribution with nu = n2 - 1 degrees of freedom and noncentrality
 * delta = f / (sigma sqrt(1 + 1/n2)). The completeness (true-positive
 * fraction) at threshold tau is P(T_{nu,delta} > tau) (Jensen-Clem et al.
 * 2018, AJ 155, 19). With T = (Z + delta) / sqrt(V / nu), V ~ chi2(nu):
 *     P(T > tau) = integral_0^inf Q(tau sqrt(v / nu) - delta) p_chi2(v; nu) dv,
 * Q the upper Gaussian tail; evaluated with GSL's adaptive quadrature, and
 * inverted for delta with GSL's Brent root finder.
 *
 * A companion also changes the reference apertures (its self-subtraction
 * lobes, its wings, the KL modes it drives). With g_k its noise-free response
 * in reference aperture k, the references are n_k + g_k, n_k iid normal of
 * std sigma: their mean shifts by mean(g) (absorbed into delta) and their
 * sample variance becomes sigma^2 V / nu with V noncentral chi2 of nu degrees
 * of freedom and noncentrality lambda = sum_k (g_k - mean g)^2 / sigma^2,
 * still independent of the numerator (the sample mean and the deviations
 * from it of normal variables of equal variance are independent). T is then
 * doubly noncentral t (Krishnan 1968, J. Am. Stat. Assoc. 63, 1004):
 *     P(T > tau) = integral_0^inf Q(tau sqrt(v / nu) - delta) p_ncx2(v; nu, lambda) dv,
 * with the noncentral chi2 density in its Bessel form (Johnson, Kotz &
 * Balakrishnan, Continuous Univariate Distributions vol. 2, eq. 29.4),
 * p = 1/2 exp(-(v + lambda) / 2) (v / lambda)^(nu/4 - 1/2) I_(nu/2 - 1)(sqrt(lambda v)),
 * GSL's scaled modified Bessel functions keeping it finite; integrated in
 * u = sqrt(v) by fixed Gauss-Legendre pieces (gl_limits_completeness_lobes).
 */
#include "core/internal.h"
#include "gloam/limits.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_integration.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_roots.h>
#include <gsl/gsl_sf_bessel.h>
#include <math.h>

typedef struct nct_args {
    double tau, nu, delta;
} nct_args;

static double integrand(double v, void *data)
{
    const nct_args *a = data;
    return gsl_cdf_ugaussian_Q(a->tau * sqrt(v / a->nu) - a->delta) * gsl_ran_chisq_pdf(v, a->nu);
}

double gl_limits_completeness(double delta, double tau, double nu)
{
    if (!(nu > 0) || !isfinite(delta) || !isfinite(tau))
        return NAN;
    gsl_set_error_handler_off();
    gsl_integration_workspace *w = gsl_integration_workspace_alloc(256);
    if (!w)
        return NAN;
    nct_args a = {tau, nu, delta};
    gsl_function f = {integrand, &a};
    double result = NAN, err = 0;
    /* the chi2 density vanishes beyond nu + 40 sqrt(2 nu) + 200 to double
     * precision; a finite interval keeps the quadrature robust for small nu */
    double vmax = nu + 40 * sqrt(2 * nu) + 200;
    if (gsl_integration_qags(&f, 0, vmax, 1e-13, 1e-10, 256, w, &result, &err) != GSL_SUCCESS &&
        !(err < 1e-7))
        result = NAN;
    gsl_integration_workspace_free(w);
    return result < 0 ? 0 : (result > 1 ? 1 : result);
}

typedef struct dnct_args {
    double tau, nu, delta, lambda;
} dnct_args;

/* exp(-x) I_a(x) for any real order a (x > 0): I_(-b) = I_b + (2 / pi)
 * sin(b pi) K_b (Abramowitz & Stegun 9.6.2) for the orders below 0. */
static double bessel_i_scaled(double a, double x)
{
    gsl_sf_result r;
    if (a == 0)
        return gsl_sf_bessel_I0_scaled_e(x, &r) == GSL_SUCCESS ? r.val : NAN;
    if (a > 0)
        return gsl_sf_bessel_Inu_scaled_e(a, x, &r) == GSL_SUCCESS ? r.val : NAN;
    double b = -a, i, k;
    i = gsl_sf_bessel_Inu_scaled_e(b, x, &r) == GSL_SUCCESS ? r.val : NAN;
    k = gsl_sf_bessel_Knu_scaled_e(b, x, &r) == GSL_SUCCESS ? r.val : NAN;
    return i + 2 / M_PI * sin(b * M_PI) * k * exp(-2 * x);
}

/* The integrand in u = sqrt(v): Q(tau u / sqrt(nu) - delta) times the density
 * of U = sqrt(V), 2 u p(u^2) = u exp(-(u - sqrt(lambda))^2 / 2)
 * (u / sqrt(lambda))^(nu/2 - 1) exp(-x) I_(nu/2 - 1)(x), x = sqrt(lambda) u. */
/* log(exp(-x) I_a(x)); where GSL's value underflows (x small against the
 * order) the power series I_a(x) = (x/2)^a sum_k (x^2/4)^k / (k! Gamma(a + k
 * + 1)) (Abramowitz & Stegun 9.6.10) in logarithms. */
static double log_bessel_i_scaled(double a, double x)
{
    double v = bessel_i_scaled(a, x);
    if (v > 0 && isfinite(v))
        return log(v);
    if (!(a > -1) || !(x > 0))
        return NAN;
    double t = 1, sum = 1, q = 0.25 * x * x;
    for (int k = 0; k < 10000 && t > 1e-17 * sum; k++)
        sum += (t *= q / ((k + 1) * (a + k + 1)));
    return a * log(0.5 * x) - lgamma(a + 1) - x + log(sum);
}

/* The integrand in u = sqrt(v): Q(tau u / sqrt(nu) - delta) times the density
 * of U = sqrt(V), 2 u p(u^2) = u exp(-(u - sqrt(lambda))^2 / 2)
 * (u / sqrt(lambda))^(nu/2 - 1) exp(-x) I_(nu/2 - 1)(x), x = sqrt(lambda) u. */
static double lobes_integrand(double u, const dnct_args *a)
{
    double sl = sqrt(a->lambda), d = u - sl, o = a->nu / 2 - 1;
    double f = u * exp(-0.5 * d * d + o * log(u / sl) + log_bessel_i_scaled(o, sl * u));
    return gsl_cdf_ugaussian_Q(a->tau * u / sqrt(a->nu) - a->delta) * f;
}

/* Gauss-Legendre nodes per piece of the u axis: 64 keep the integral within
 * 3e-13 of scipy's adaptive quadrature on 400 random parameter sets (nu
 * 1-250, tau 1-41, lambda 1e-6-2e4; 48 gave 5e-9; bench/README.md, third
 * round) */
#define LOBES_NODES 64

static double gauss_legendre(const dnct_args *a, double lo, double hi,
                             const gsl_integration_glfixed_table *t)
{
    if (!(hi > lo))
        return 0;
    double s = 0;
    for (size_t i = 0; i < t->n; i++) {
        double xi, wi;
        gsl_integration_glfixed_point(lo, hi, i, &xi, &wi, t);
        s += wi * lobes_integrand(xi, a);
    }
    return s;
}

double gl_limits_completeness_lobes(double delta, double lambda, double tau, double nu)
{
    if (!(lambda >= 0) || !isfinite(lambda))
        return NAN;
    if (lambda < 1e-12)
        return gl_limits_completeness(delta, tau, nu);
    if (!(nu > 0) || !isfinite(delta) || !isfinite(tau))
        return NAN;
    gsl_set_error_handler_off();
    gsl_integration_glfixed_table *t = gsl_integration_glfixed_table_alloc(LOBES_NODES);
    if (!t)
        return NAN;
    dnct_args a = {tau, nu, delta, lambda};
    /* U = sqrt(V) has mean near sqrt(nu + lambda) and a standard deviation
     * below 1 (var V / (4 E V) = (nu + 2 lambda) / (2 (nu + lambda))), and
     * tails at least as light as exp(-t^2 / 2): 10 on either side leave out
     * less than 1e-20. Q's step (centre u0, width w in u) is a piece of its
     * own, 8 w on either side; beyond it Q is within 6.2e-16 of 0 or 1, and
     * the piece where it is 0 is left out. */
    double m = sqrt(nu + lambda), lo = GL_MAX(0.0, m - 10), hi = m + 10;
    double result;
    if (tau != 0) {
        double w = sqrt(nu) / fabs(tau), u0 = delta * sqrt(nu) / tau;
        double c1 = GL_MIN(GL_MAX(u0 - 8 * w, lo), hi), c2 = GL_MIN(GL_MAX(u0 + 8 * w, lo), hi);
        result = gauss_legendre(&a, c1, c2, t);
        if (tau > 0)
            result += gauss_legendre(&a, lo, c1, t);
        else
            result += gauss_legendre(&a, c2, hi, t);
    } else {
        result = gauss_legendre(&a, lo, hi, t);
    }
    gsl_integration_glfixed_table_free(t);
    if (isnan(result))
        return NAN;
    return result < 0 ? 0 : (result > 1 ? 1 : result);
}

typedef struct root_args {
    double tau, nu, q;
} root_args;

static double root_fn(double delta, void *data)
{
    const root_args *a = data;
    return gl_limits_completeness(delta, a->tau, a->nu) - a->q;
}

gl_status gl_limits_delta_for_completeness(double q, double tau, double nu, double *delta)
{
    *delta = NAN;
    if (!(q > 0 && q < 1) || !(nu > 0) || !isfinite(tau))
        return gl_error_set(GL_ERR_USAGE,
                            "completeness %g with %g degrees of freedom: need 0 < q < 1, nu > 0", q,
                            nu);
    gsl_set_error_handler_off();
    root_args a = {tau, nu, q};
    gsl_function f = {root_fn, &a};
    /* bracket: the completeness grows monotonically with delta */
    double lo = tau - 10, hi = tau + 10;
    while (root_fn(lo, &a) > 0 && lo > -1e4)
        lo -= 10 + fabs(lo);
    while (root_fn(hi, &a) < 0 && hi < 1e4)
        hi += 10 + fabs(hi);
    if (root_fn(lo, &a) > 0 || root_fn(hi, &a) < 0)
        return gl_error_set(GL_ERR_NUMERIC, "cannot bracket the completeness %g (tau %g, nu %g)", q,
                            tau, nu);
    gsl_root_fsolver *s = gsl_root_fsolver_alloc(gsl_root_fsolver_brent);
    if (!s)
        return gl_error_nomem("root finder");
    gsl_root_fsolver_set(s, &f, lo, hi);
    gl_status st = GL_ERR_NUMERIC;
    for (int it = 0; it < 200; it++) {
        if (gsl_root_fsolver_iterate(s) != GSL_SUCCESS)
            break;
        double a0 = gsl_root_fsolver_x_lower(s), b0 = gsl_root_fsolver_x_upper(s);
        if (gsl_root_test_interval(a0, b0, 1e-10, 1e-12) == GSL_SUCCESS) {
            *delta = gsl_root_fsolver_root(s);
            st = GL_OK;
            break;
        }
    }
    gsl_root_fsolver_free(s);
    if (st)
        return gl_error_set(GL_ERR_NUMERIC,
                            "completeness %g (tau %g, nu %g): root finder did not converge", q, tau,
                            nu);
    return GL_OK;
}
