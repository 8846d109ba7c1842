/*
 * calibrate.c -- the completeness of the detection test at one separation,
 * calibrated by the fake companions planted around it.
 *
 * Model (docs/limits.md, "Completeness"). The detection statistic is the
 * two-sample t test of Mawet et al. (2014, ApJ 792, 97) at the companion's
 * position against the other apertures of its ring. A companion of contrast c
 * changes every aperture of that ring by c F g_k, g_k its noise-free response
 * per unit contrast and PSF aperture flux F: the fake's own core (g_0, the
 * throughput) and, in the references, its self-subtraction lobes, wings and
 * whatever the KL modes it drove did. Each fake measures g on the difference
 * image (with fakes - without), so noise cancels. With iid normal aperture
 * noise of std sigma, the statistic is doubly noncentral t with noncentrality
 *     delta = c F (g_0 - mean g_ref) / (sigma sqrt(1 + 1/n2))
 * and denominator noncentrality lambda = (c F)^2 sum (g_ref - mean)^2 / sigma^2
 * (completeness.c). The completeness of Jensen-Clem et al. (2018, AJ 155, 19)
 * becomes the average over the fakes within 1.5 FWHM of the separation of
 * that probability, each fake's core and lobes moved to the separation by
 * the ratios of their own local linear fits in separation (so the average is
 * over position angles, not over the radial trend). The contrast at completeness q solves
 * mean P(c) = q (Brent). The companion's own lobes can make the S/N saturate
 * with c; when even an infinitely bright companion misses q the contrast is
 * left empty.
 *
 * The noise is the curve's estimate sigma_hat from n apertures, sigma_hat =
 * sigma s with s^2 (n - 1) ~ chi2(n - 1): a companion at x units of sigma_hat
 * has x s units of the true noise, and the probability that an independent
 * sequence of the same kind detects it is the model above at x s averaged
 * over s (the predictive completeness; generalized Gauss-Laguerre quadrature
 * of the chi2 weight). Without this average c95 from one sequence was found
 * in another only 80-93% of the time (docs/limits.md).
 *
 * Assumptions: aperture noise iid normal (the test's own assumption); the
 * response is linear in c between the fake's contrast and the one solved for
 * (the fakes are planted around the 50% and 95% levels to keep that small); the fakes
 * near one separation sample the position-angle dependence of the response.
 */
#include "core/internal.h"
#include "limits/internal.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_integration.h>
#include <gsl/gsl_roots.h>
#include <math.h>

#define WINDOW_FWHM 1.5
#define MAX_WINDOW 64
/* Gauss-Laguerre nodes for the scatter of the curve's own noise estimate */
#define NOISE_NODES 16
/* mean completeness values kept per point (the root finders of the 50% and
 * q contrasts ask again for the values of their common bracket) */
#define KEPT_VALUES 64

/* Fakes that calibrate one point: their responses moved to the point. */
typedef struct window {
    int n;
    double a[MAX_WINDOW]; /* signal / sqrt(1 + 1/n2) */
    double h[MAX_WINDOW]; /* ref_spread */
    double tau, nu;
    /* the curve's noise estimate: sigma_hat = sigma s, s^2 m ~ chi2(m), m =
     * n - 1; the completeness is averaged over s (nodes s[j], weights ws[j]
     * summing to 1); one node s = 1 when the noise is taken as exact */
    int ns;
    double s[NOISE_NODES], ws[NOISE_NODES];
    limits_bessel_table *bessel; /* of order nu/2 - 1; NULL: direct */
    int nkept;
    double kept_x[KEPT_VALUES], kept_p[KEPT_VALUES];
} window;

/* Least-squares line through (x, y), evaluated at xq clamped to the range of
 * x; the mean when x has no spread. */
static double line_at(const double *x, const double *y, int n, double xq, double minspread)
{
    double mx = 0, my = 0, sxx = 0, sxy = 0, lo = x[0], hi = x[0];
    for (int i = 0; i < n; i++) {
        mx += x[i] / n;
        my += y[i] / n;
        lo = GL_MIN(lo, x[i]);
        hi = GL_MAX(hi, x[i]);
    }
    for (int i = 0; i < n; i++) {
        sxx += (x[i] - mx) * (x[i] - mx);
        sxy += (x[i] - mx) * (y[i] - my);
    }
    if (n < 2 || hi - lo < minspread)
        return my;
    xq = GL_MIN(GL_MAX(xq, lo), hi);
    return my + sxy / sxx * (xq - mx);
}

/* The predictive average over the noise estimate: s = sqrt(W / m), W ~
 * chi2(m), by generalized Gauss-Laguerre quadrature of weight W^(m/2 - 1)
 * exp(-W / 2) (the chi2 density up to its constant, which the normalised
 * weights remove). */
static void noise_nodes(window *w, double m)
{
    w->ns = 1;
    w->s[0] = 1;
    w->ws[0] = 1;
    if (!(m >= 1) || !isfinite(m))
        return;
    gsl_integration_fixed_workspace *q = gsl_integration_fixed_alloc(
        gsl_integration_fixed_laguerre, NOISE_NODES, 0.0, 0.5, m / 2 - 1, 0.0);
    if (!q)
        return;
    const double *x = gsl_integration_fixed_nodes(q), *wt = gsl_integration_fixed_weights(q);
    double sum = 0;
    for (int j = 0; j < NOISE_NODES; j++)
        sum += wt[j];
    if (sum > 0) {
        for (int j = 0; j < NOISE_NODES; j++) {
            w->s[j] = sqrt(x[j] / m);
            w->ws[j] = wt[j] / sum;
        }
        w->ns = NOISE_NODES;
    }
    gsl_integration_fixed_free(q);
}

/* Mean completeness of the window's fakes for an aperture flux of x units of
 * the curve's noise estimate (x = c F / sigma_hat): a companion of that
 * contrast has x s units of the true noise, s = sigma_hat / sigma, and the
 * detection test on an independent sequence sees it against that sequence's
 * own noise; averaged over s (the predictive completeness). */
static double mean_completeness(window *w, double x)
{
    for (int k = 0; k < w->nkept; k++)
        if (w->kept_x[k] == x)
            return w->kept_p[k];
    double s = 0;
    for (int j = 0; j < w->ns; j++) {
        double xs = x * w->s[j], sj = 0;
        for (int i = 0; i < w->n; i++) {
            double p = gl_limits_completeness_lobes_tabled(
                w->bessel, xs * w->a[i], xs * xs * w->h[i] * w->h[i], w->tau, w->nu);
            if (isnan(p)) {
                s = NAN;
                break;
            }
            sj += p;
        }
        if (isnan(s))
            break;
        s += w->ws[j] * sj / w->n;
    }
    if (w->nkept < KEPT_VALUES) {
        w->kept_x[w->nkept] = x;
        w->kept_p[w->nkept++] = s;
    }
    return s;
}

typedef struct solve_args {
    window *w;
    double q;
} solve_args;

/* The probit of the mean completeness minus that of q: the same root as
 * P - q (the probit is increasing), but nearly straight in x where P is a
 * sigmoid, so the root finder needs about half the steps near q = 0.95. P
 * is held within [1e-300, 1 - 2^-53], where the probit is finite. */
static double probit(double p)
{
    return gsl_cdf_ugaussian_Pinv(GL_MIN(GL_MAX(p, 1e-300), 1 - 0x1p-53));
}

static double solve_fn(double x, void *data)
{
    const solve_args *a = data;
    double p = mean_completeness(a->w, x);
    return isnan(p) ? NAN : probit(p) - probit(a->q);
}

/* x with mean completeness q; NaN when none (saturation, numerics). */
static double solve(window *w, double q)
{
    double amax = 0;
    for (int i = 0; i < w->n; i++)
        amax = GL_MAX(amax, w->a[i]);
    if (!(amax > 0))
        return NAN;
    solve_args args = {w, q};
    /* delta = tau for the best fake: near the answer for small lobes */
    double lo = 0, hi = w->tau / amax, f;
    int it = 0;
    while ((f = solve_fn(hi, &args)) < 0 && it++ < 40) {
        lo = hi;
        hi *= 2;
    }
    if (!(f >= 0))
        return NAN; /* saturated: the lobes grow as fast as the signal */
    /* the values already computed at this point (the other root's solve, the
     * classical contrast) narrow the bracket; it stays one: f(lo) < 0 <=
     * f(hi) */
    for (int k = 0; k < w->nkept; k++) {
        double xk = w->kept_x[k], pk = w->kept_p[k];
        if (xk > lo && xk < hi && !isnan(pk)) {
            if (pk < q)
                lo = xk;
            else
                hi = xk;
        }
    }
    gsl_function fn = {solve_fn, &args};
    gsl_root_fsolver *s = gsl_root_fsolver_alloc(gsl_root_fsolver_brent);
    if (!s)
        return NAN;
    double x = NAN;
    gsl_root_fsolver_set(s, &fn, lo, hi);
    for (int k = 0; k < 100; k++) {
        if (gsl_root_fsolver_iterate(s) != GSL_SUCCESS)
            break;
        double a = gsl_root_fsolver_x_lower(s), b = gsl_root_fsolver_x_upper(s);
        if (gsl_root_test_interval(a, b, 0, 1e-12) == GSL_SUCCESS) {
            x = gsl_root_fsolver_root(s);
            break;
        }
    }
    gsl_root_fsolver_free(s);
    return x;
}

void gl_limits_calibrate_point(limits_point *pt, const gl_limits_fake *fakes, int nfakes, int plane,
                               limits_bessel_table **bessel)
{
    pt->throughput = pt->throughput_scatter = pt->fakes_used = pt->signal = NAN;
    pt->contrast = pt->completeness = pt->contrast_c50 = pt->contrast_cq = NAN;
    double r[MAX_WINDOW], t[MAX_WINDOW], a[MAX_WINDOW], h[MAX_WINDOW];
    int n = 0;
    /* the fakes within the window; at least the two nearest */
    for (int j = 0; j < nfakes && n < MAX_WINDOW; j++) {
        const gl_limits_fake *f = &fakes[j];
        if (fabs(f->sep_px - pt->sep_px) <= WINDOW_FWHM * pt->fwhm + 1e-9 &&
            isfinite(f->throughput[plane]) && isfinite(f->signal[plane]) &&
            isfinite(f->ref_spread[plane])) {
            r[n] = f->sep_px;
            t[n] = f->throughput[plane];
            a[n] = f->signal[plane];
            h[n] = f->ref_spread[plane];
            n++;
        }
    }
    for (int want = 1; n < 2 && want <= 2; want++) {
        /* fewer than two in the window: the nearest ones (ends of the curve) */
        double best = INFINITY;
        int jb = -1;
        for (int j = 0; j < nfakes; j++) {
            const gl_limits_fake *f = &fakes[j];
            double d = fabs(f->sep_px - pt->sep_px);
            int used = 0;
            for (int i = 0; i < n; i++)
                used |= r[i] == f->sep_px;
            if (!used && d < best && isfinite(f->throughput[plane]) && isfinite(f->signal[plane]) &&
                isfinite(f->ref_spread[plane])) {
                best = d;
                jb = j;
            }
        }
        if (jb < 0)
            break;
        r[n] = fakes[jb].sep_px;
        t[n] = fakes[jb].throughput[plane];
        a[n] = fakes[jb].signal[plane];
        h[n] = fakes[jb].ref_spread[plane];
        n++;
    }
    if (n == 0)
        return;
    double minspread = 0.05 * pt->fwhm;
    double T = line_at(r, t, n, pt->sep_px, minspread);
    double A = line_at(r, a, n, pt->sep_px, minspread);
    pt->throughput = T;
    pt->signal = A;
    pt->fakes_used = n;
    if (n >= 3) {
        double ss = 0;
        for (int i = 0; i < n; i++) {
            /* residual about the fit through all of them at that fake */
            double d = t[i] - line_at(r, t, n, r[i], minspread);
            ss += d * d;
        }
        pt->throughput_scatter = sqrt(ss / (n - 2));
    }
    /* a throughput below 1% leaves nothing to calibrate */
    if (!(T > 0.01) || !(pt->noise > 0) || !isfinite(pt->tau) || !(pt->nref >= 2))
        return;
    double k = sqrt(1 + 1 / pt->nref);
    window w = {.n = n, .tau = pt->tau, .nu = pt->nref - 1};
    /* the table's pieces depend on its order only: one kept from the
     * previous point of that order gives the same values */
    if (bessel)
        w.bessel = *bessel = gl_limits_bessel_table_keep(*bessel, w.nu / 2 - 1);
    else
        w.bessel = gl_limits_bessel_table_new(w.nu / 2 - 1);
    noise_nodes(&w, pt->noise_dof);
    double H = line_at(r, h, n, pt->sep_px, minspread);
    for (int i = 0; i < n; i++) {
        /* move the fake's response to this separation, its core and its
         * lobes each by the ratio of their own trend: the lobes grow with
         * separation at another rate than the core (the arc a companion
         * sweeps grows with it), so a fake two FWHM away must not bring its
         * own lobe-to-core ratio */
        double at = line_at(r, a, n, r[i], minspread), ht = line_at(r, h, n, r[i], minspread);
        double s = (at > 0 && A > 0) ? A / at : 1;
        double sh = (ht > 0 && H > 0) ? H / ht : s;
        w.a[i] = a[i] * s / k;
        w.h[i] = h[i] * sh;
    }
    double unit = pt->noise / pt->psf_flux; /* contrast of x = 1 */
    pt->contrast = pt->tau * k * unit / T;  /* Mawet et al. 2014, the classical curve */
    pt->completeness = mean_completeness(&w, pt->contrast / unit);
    pt->contrast_c50 = solve(&w, 0.5) * unit;
    pt->contrast_cq = solve(&w, pt->q) * unit;
    if (!bessel)
        gl_limits_bessel_table_free(w.bessel);
}
