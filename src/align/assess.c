/*
 * assess.c -- how well a centring followed the star, judged from the data
 * alone: the N-cornered hat. Given N independent estimates of the same
 * per-frame position, the variance of the difference of estimates i and j
 * is s_i^2 + s_j^2 when their errors are uncorrelated, so the pairwise
 * difference variances determine every s_k^2: exactly for three estimates
 * (the three-cornered hat of clock metrology, Gray & Allan 1974, Proc. 28th
 * Freq. Control Symp. 243), by weighted least squares for more (the
 * N-cornered hat, e.g. Tavella & Premoli 1994, Metrologia 31, 557; cited
 * from memory). One of the estimates may be the fixed pointing (the star
 * taken not to move): its "error" is the pointing motion itself, which the
 * hat then measures too.
 * Difference variances are plain sample variances, not robust ones: a few
 * frames where one method caught another feature are part of its error (a
 * robust spread hides them, and the reported errors would then miss the
 * frames that matter). A sample variance V of n values has the variance
 * 2 V^2 / (n - 1) (Gaussian errors), which weights the least squares (GSL's
 * gsl_multifit_wlinear_tsvd), iterated with weights from the fitted model;
 * a negative variance is fixed at zero and the rest refitted (an active set);
 * a variance so fixed gets half of the smallest pair variance it enters.
 * Also the judgement of the result (uncertain or not) and its warnings.
 * Assumption: the estimates' errors are uncorrelated with each other and
 * with the pointing motion. A systematic shared by all of them (a halo
 * asymmetric about the star in every frame) is invisible to the hat.
 */
#include "align/internal.h"
#include "core/internal.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_multifit.h>
#include <math.h>
#include <string.h>

#define HAT_MAX 8

/* Sample variance of est[i] - est[j] over the frames with mask set (NULL
 * estimates are zero); NaN with fewer than 3 frames. */
static double diff_var(const double *a, const double *b, const int *mask, long nf, long *n)
{
    long m = 0;
    double s = 0, s2 = 0;
    for (long f = 0; f < nf; f++)
        if (mask[f]) {
            double d = (a ? a[f] : 0.0) - (b ? b[f] : 0.0);
            s += d;
            m++;
        }
    *n = m;
    if (m < 3)
        return NAN;
    double mean = s / (double)m;
    for (long f = 0; f < nf; f++)
        if (mask[f]) {
            double d = (a ? a[f] : 0.0) - (b ? b[f] : 0.0) - mean;
            s2 += d * d;
        }
    return s2 / (double)(m - 1);
}

gl_status gl_centre_hat(int nest, long nf, const double *const *est, const int *mask, double *var)
{
    if (nest < 3 || nest > HAT_MAX)
        return gl_error_set(GL_ERR_INTERNAL, "the hat needs 3 to %d estimates, not %d", HAT_MAX,
                            nest);
    int npair = nest * (nest - 1) / 2;
    double V[HAT_MAX * (HAT_MAX - 1) / 2];
    int pi[HAT_MAX * (HAT_MAX - 1) / 2], pj[HAT_MAX * (HAT_MAX - 1) / 2];
    gsl_matrix *X = gsl_matrix_alloc((size_t)npair, (size_t)nest);
    gsl_vector *y = gsl_vector_alloc((size_t)npair), *w = gsl_vector_alloc((size_t)npair);
    gsl_vector *c = gsl_vector_alloc((size_t)nest);
    gsl_matrix *cov = gsl_matrix_alloc((size_t)nest, (size_t)nest);
    gsl_multifit_linear_workspace *ws = gsl_multifit_linear_alloc((size_t)npair, (size_t)nest);
    gl_status st = GL_OK;
    long n = 0;
    gsl_set_error_handler_off();
    if (!X || !y || !w || !c || !cov || !ws) {
        st = gl_error_nomem("centring assessment");
        goto cleanup;
    }
    for (int i = 0, k = 0; i < nest; i++)
        for (int j = i + 1; j < nest; j++, k++) {
            pi[k] = i;
            pj[k] = j;
            V[k] = diff_var(est[i], est[j], mask, nf, &n);
            if (!isfinite(V[k])) {
                st = gl_error_set(GL_ERR_INPUT, "too few frames to compare the centring methods");
                goto cleanup;
            }
        }
    int fixed[HAT_MAX] = {0};
    double s2[HAT_MAX] = {0};
    double floor = 1e-12;
    for (int k = 0; k < npair; k++)
        floor = fmax(floor, 1e-10 * V[k]);
    /* active set: at most nest passes, each fixing one more variance at 0 */
    for (int pass = 0; pass <= nest; pass++) {
        for (int it = 0; it < 4; it++) {
            for (int k = 0; k < npair; k++) {
                double model = it == 0 ? V[k] : s2[pi[k]] + s2[pj[k]];
                model = fmax(model, floor);
                gsl_vector_set(w, (size_t)k, (double)(n - 1) / (2 * model * model));
                gsl_vector_set(y, (size_t)k, V[k]);
                for (int u = 0; u < nest; u++)
                    gsl_matrix_set(X, (size_t)k, (size_t)u,
                                   !fixed[u] && (u == pi[k] || u == pj[k]) ? 1.0 : 0.0);
            }
            /* a fixed variance's column is all zeros: the truncated SVD
             * leaves that direction out */
            double chisq;
            size_t rank;
            if (gsl_multifit_wlinear_tsvd(X, w, y, 1e-12, c, cov, &chisq, &rank, ws)) {
                st = gl_error_set(GL_ERR_NUMERIC, "centring assessment: the least squares failed");
                goto cleanup;
            }
            for (int u = 0; u < nest; u++)
                s2[u] = fixed[u] ? 0.0 : gsl_vector_get(c, (size_t)u);
        }
        int worst = -1;
        for (int u = 0; u < nest; u++)
            if (!fixed[u] && s2[u] < 0 && (worst < 0 || s2[u] < s2[worst]))
                worst = u;
        if (worst < 0)
            break;
        fixed[worst] = 1;
    }
    /* a variance fixed at 0 is one the pairs cannot resolve, not a
     * measured 0: it gets half of the smallest pair variance it enters,
     * the even split of a pair that the hat cannot apportion */
    for (int u = 0; u < nest; u++) {
        double least = INFINITY;
        for (int k = 0; k < npair; k++)
            if (pi[k] == u || pj[k] == u)
                least = fmin(least, V[k]);
        var[u] = fixed[u] ? 0.5 * least : fmax(s2[u], 0.0);
    }

cleanup:
    gsl_multifit_linear_free(ws);
    gsl_matrix_free(cov);
    gsl_vector_free(c);
    gsl_vector_free(w);
    gsl_vector_free(y);
    gsl_matrix_free(X);
    return st;
}

/* Whether the centring is uncertain: an absolute centre that rests on the
 * halo's symmetry alone or on a residual core behind the coronagraph, a
 * typical error above 0.1 px (common practice: a
 * tenth of a pixel is where centring starts to cost contrast at a few
 * lambda/D), or an error above the pointing motion itself. */
void gl_centre_judge(gl_centre_assessment *a)
{
    double e = hypot(a->err[0], a->err[1]) / sqrt(2.0);
    a->uncertain = a->symmetry_only || a->core_behind_mask || (isfinite(e) && e > 0.1) ||
                   (a->assessed && isfinite(e) && e > 0.05 && e > a->motion);
}

/* The warnings behind judge_uncertain, logged once the product is made (an
 * error stays one line). */
void gl_centre_warn(const char *name, const gl_align_result *r, const gl_centre_assessment *a)
{
    double e = hypot(a->err[0], a->err[1]) / sqrt(2.0);
    /* below a third of a pixel of pointing motion the halo can follow the
     * coronagraph's mask more than the star, and then it errs as the fixed
     * pointing does: the hat books too little for both (docs/align.md: 3.5x
     * under-reported at 0.27 px of jitter behind the perfect coronagraph) */
    if (a->symmetry_only && a->assessed && isfinite(a->motion) && a->motion < 1.0 / 3)
        gl_log(GL_LOG_WARN,
               "%s: no satellite spots used and no unsaturated core (a coronagraph without "
               "spots?): the absolute centre is only as good as the point symmetry of the halo, "
               "which no comparison of methods can check, and with a pointing motion of only "
               "%.2f px rms the halo may follow the coronagraph's mask rather than the star: "
               "take the reported per-frame errors as lower bounds",
               name, a->motion);
    else if (a->symmetry_only)
        gl_log(GL_LOG_WARN,
               "%s: no satellite spots used and no unsaturated core (a coronagraph without "
               "spots?): the absolute centre is only as good as the point symmetry of the halo, "
               "which no comparison of methods can check",
               name);
    if (a->core_behind_mask && r->method != GL_CENTRE_HALO && r->method != GL_CENTRE_SPOTS) {
        if (isfinite(a->core_abs[0]) && isfinite(a->core_abs[1]))
            gl_log(GL_LOG_WARN,
                   "%s: the absolute centre comes from the residual core behind the "
                   "coronagraph, which the aberrations move too: its error includes its share "
                   "of the disagreement with the halo's symmetry (%.2f/%.2f px, at most %.2f px "
                   "= %.2f FWHM, the most a compact core was moved on simulated Lyot sequences)",
                   name, a->core_abs[0], a->core_abs[1], a->core_abs_bound, GL_CORE_SHIFT_FWHM);
        else
            gl_log(GL_LOG_WARN,
                   "%s: the absolute centre comes from the residual core behind the "
                   "coronagraph, which the aberrations can move by up to %.2f FWHM; no halo "
                   "centre was there to check it, and the reported errors do not include that",
                   name, GL_CORE_SHIFT_FWHM);
    }
    if (isfinite(e) && e > 0.1)
        gl_log(GL_LOG_WARN,
               "%s: centring uncertain: the %s centres are off by %.2f px (x) and %.2f px (y) "
               "(median reported error per frame, the absolute centre's included)",
               name, gl_centre_method_name(r->method), a->err[0], a->err[1]);
    if (a->assessed && isfinite(e) && e > 0.05 && e > a->motion)
        gl_log(GL_LOG_WARN,
               "%s: the centring error (%.2f px) exceeds the pointing motion (%.2f px rms): "
               "the alignment does not follow the star better than leaving the frames alone",
               name, e, a->motion);
}
