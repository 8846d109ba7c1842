/*
 * epochs.c -- common proper motion or background star: the candidate's
 * offsets from the star measured at two or more dates against the track a
 * stationary, infinitely distant background source would follow as the star
 * moves.
 *
 * Track (IAU SOFA algorithms through ERFA): the star's catalogue place at its
 * epoch is moved along its space motion to each date with eraPmsafe (proper
 * motion, parallax and radial velocity, rigorous); both the star (at its
 * distance) and the background source (no parallax, no motion) go to
 * geocentric apparent place in the GCRS with eraApcg13 + eraAtciq (annual
 * parallax from the Earth's barycentric position, light deflection by the
 * Sun, annual aberration). GCRS rather than CIRS axes, because the north of
 * an astrometric calibration is the ICRS north, not the pole of date. The
 * offsets are the gnomonic coordinates of the source about the star
 * (eraTpxes). Aberration acts almost equally on both and cancels to ~1e-4
 * of the offset. Dates are UTC; TDB is taken as TT (1.7 ms at most, far below
 * any astrometric effect here).
 *
 * Hypotheses: common proper motion (the offsets are constant; orbital motion
 * between the epochs is neglected, which a long baseline may violate) and a
 * background star (its ICRS position fitted by Gauss-Newton). Each has two
 * fitted parameters, chi2 with 2n - 2 degrees of freedom (Gaussian errors
 * assumed) and its upper-tail probability (gsl_cdf_chisq_Q).
 */
#include "core/internal.h"
#include "vet/internal.h"

#include <erfa.h>
#include <gsl/gsl_cdf.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#define MAS (M_PI / 180 / 3600e3)

/* Apparent GCRS places of the star and of the background source at one date. */
static int places(const gl_vet_star *s, double bg_ra, double bg_dec, double mjd, double *ras,
                  double *decs, double *rab, double *decb)
{
    double tai1, tai2, tt1, tt2, ep1, ep2;
    if (eraUtctai(2400000.5, mjd, &tai1, &tai2) < 0 || eraTaitt(tai1, tai2, &tt1, &tt2))
        return -1;
    eraEpj2jd(s->epoch_jyear, &ep1, &ep2);
    double ra2, dec2, pmr2, pmd2, px2, rv2;
    double dec0 = s->dec_deg * M_PI / 180;
    int j = eraPmsafe(s->ra_deg * M_PI / 180, dec0, s->pmra_masyr * MAS / cos(dec0),
                      s->pmdec_masyr * MAS, s->parallax_mas / 1000, s->rv_kms, ep1, ep2, tt1, tt2,
                      &ra2, &dec2, &pmr2, &pmd2, &px2, &rv2);
    if (j < 0 || (j & 4))
        return -1;
    eraASTROM a;
    eraApcg13(tt1, tt2, &a);
    /* already moved to the date: no proper motion left to apply */
    eraAtciq(ra2, dec2, 0, 0, px2, 0, &a, ras, decs);
    eraAtciq(bg_ra, bg_dec, 0, 0, 0, 0, &a, rab, decb);
    return 0;
}

gl_status gl_vet_background_track(const gl_vet_star *star, double bg_ra_deg, double bg_dec_deg,
                                  long n, const double *mjd, double *dra, double *ddec)
{
    if (!(star->parallax_mas > 0) || !isfinite(star->ra_deg) || !isfinite(star->dec_deg) ||
        !isfinite(star->pmra_masyr) || !isfinite(star->pmdec_masyr) || !isfinite(star->epoch_jyear))
        return gl_error_set(GL_ERR_USAGE, "the star needs a position, proper motion, a positive "
                                          "parallax and an epoch");
    for (long k = 0; k < n; k++) {
        double ras, decs, rab, decb, xi, eta;
        if (!isfinite(mjd[k]) ||
            places(star, bg_ra_deg * M_PI / 180, bg_dec_deg * M_PI / 180, mjd[k], &ras, &decs, &rab,
                   &decb) ||
            eraTpxes(rab, decb, ras, decs, &xi, &eta))
            return gl_error_set(GL_ERR_USAGE, "epoch %ld (MJD %g): no apparent place", k + 1,
                                mjd[k]);
        dra[k] = xi / MAS;
        ddec[k] = eta / MAS;
    }
    return GL_OK;
}

void gl_vet_epoch_fit_free(gl_vet_epoch_fit *f)
{
    if (!f)
        return;
    gl_free(f->pred_dra);
    gl_free(f->pred_ddec);
    f->pred_dra = f->pred_ddec = NULL;
}

/* chi2 of the background model with the source at tangent offsets (u, v)
 * (mas) about the star's catalogue place; predictions into pa, pd. */
static gl_status bg_chi2(const gl_vet_star *s, const gl_vet_epochs *e, double u, double v,
                         double *pa, double *pd, double *chi2)
{
    double a, b;
    eraTpsts(u * MAS, v * MAS, s->ra_deg * M_PI / 180, s->dec_deg * M_PI / 180, &a, &b);
    gl_status st =
        gl_vet_background_track(s, a * 180 / M_PI, b * 180 / M_PI, e->n, e->mjd_utc, pa, pd);
    if (st)
        return st;
    double c = 0;
    for (long k = 0; k < e->n; k++) {
        double ra = (e->dra_mas[k] - pa[k]) / e->dra_err[k];
        double rd = (e->ddec_mas[k] - pd[k]) / e->ddec_err[k];
        c += ra * ra + rd * rd;
    }
    *chi2 = c;
    return GL_OK;
}

gl_status gl_vet_epochs_fit(const gl_vet_star *s, const gl_vet_epochs *e, gl_vet_epoch_fit *out)
{
    gl_status st = GL_OK;
    memset(out, 0, sizeof *out);
    if (e->n < 2)
        return gl_error_set(GL_ERR_USAGE, "the epoch test needs at least 2 epochs (got %ld)", e->n);
    for (long k = 0; k < e->n; k++)
        if (!(e->dra_err[k] > 0) || !(e->ddec_err[k] > 0) || !isfinite(e->dra_mas[k]) ||
            !isfinite(e->ddec_mas[k]))
            return gl_error_set(GL_ERR_USAGE,
                                "epoch %ld: offsets must be numbers and their errors positive",
                                k + 1);
    long n = e->n;
    double *pa = gl_malloc((size_t)n * 4 * sizeof *pa), *pd = pa ? pa + n : NULL,
           *qa = pa ? pa + 2 * n : NULL, *qd = pa ? pa + 3 * n : NULL;
    if (!pa)
        return gl_error_nomem("epoch fit");

    /* common proper motion: weighted mean offsets */
    double wa = 0, ma = 0, wd = 0, md = 0;
    for (long k = 0; k < n; k++) {
        double ia = 1 / (e->dra_err[k] * e->dra_err[k]), id = 1 / (e->ddec_err[k] * e->ddec_err[k]);
        wa += ia;
        ma += ia * e->dra_mas[k];
        wd += id;
        md += id * e->ddec_mas[k];
    }
    ma /= wa;
    md /= wd;
    double cc = 0;
    for (long k = 0; k < n; k++) {
        double ra = (e->dra_mas[k] - ma) / e->dra_err[k],
               rd = (e->ddec_mas[k] - md) / e->ddec_err[k];
        cc += ra * ra + rd * rd;
    }

    /* background: Gauss-Newton on the tangent offsets (u, v) of the source
     * about the star's catalogue place; the model is nearly linear in them */
    double u = e->dra_mas[0], v = e->ddec_mas[0], c0 = 0;
    if ((st = bg_chi2(s, e, u, v, pa, pd, &c0)))
        goto cleanup;
    {
        double d0 = 0, d1 = 0; /* the shift of the track at the first epoch */
        d0 = e->dra_mas[0] - pa[0];
        d1 = e->ddec_mas[0] - pd[0];
        u += d0;
        v += d1;
    }
    for (int it = 0; it < 6; it++) {
        const double h = 1.0; /* mas */
        double c;
        if ((st = bg_chi2(s, e, u, v, pa, pd, &c)) || (st = bg_chi2(s, e, u + h, v, qa, qd, &c)))
            goto cleanup;
        double J[2][2] = {{0, 0}, {0, 0}}, g[2] = {0, 0};
        double *ja = gl_malloc((size_t)n * 2 * sizeof *ja);
        if (!ja) {
            st = gl_error_nomem("epoch fit");
            goto cleanup;
        }
        for (long k = 0; k < n; k++) {
            ja[k] = (qa[k] - pa[k]) / h;
            ja[n + k] = (qd[k] - pd[k]) / h;
        }
        if ((st = bg_chi2(s, e, u, v + h, qa, qd, &c))) {
            gl_free(ja);
            goto cleanup;
        }
        for (long k = 0; k < n; k++) {
            double ia = 1 / (e->dra_err[k] * e->dra_err[k]),
                   id = 1 / (e->ddec_err[k] * e->ddec_err[k]);
            double au = ja[k], du = ja[n + k], av = (qa[k] - pa[k]) / h, dv = (qd[k] - pd[k]) / h;
            double ra = e->dra_mas[k] - pa[k], rd = e->ddec_mas[k] - pd[k];
            J[0][0] += ia * au * au + id * du * du;
            J[0][1] += ia * au * av + id * du * dv;
            J[1][1] += ia * av * av + id * dv * dv;
            g[0] += ia * au * ra + id * du * rd;
            g[1] += ia * av * ra + id * dv * rd;
        }
        gl_free(ja);
        double det = J[0][0] * J[1][1] - J[0][1] * J[0][1];
        if (!(fabs(det) > 0))
            break;
        double du = (J[1][1] * g[0] - J[0][1] * g[1]) / det;
        double dv = (J[0][0] * g[1] - J[0][1] * g[0]) / det;
        u += du;
        v += dv;
        if (hypot(du, dv) < 1e-6)
            break;
    }
    double cb;
    if ((st = bg_chi2(s, e, u, v, pa, pd, &cb)))
        goto cleanup;
    out->pred_dra = gl_malloc((size_t)n * sizeof(double));
    out->pred_ddec = gl_malloc((size_t)n * sizeof(double));
    if (!out->pred_dra || !out->pred_ddec) {
        gl_vet_epoch_fit_free(out);
        st = gl_error_nomem("epoch fit");
        goto cleanup;
    }
    double span = 0; /* the largest offset between two epochs of the track */
    for (long k = 0; k < n; k++) {
        out->pred_dra[k] = pa[k];
        out->pred_ddec[k] = pd[k];
        for (long q = 0; q < k; q++)
            span = GL_MAX(span, hypot(pa[k] - pa[q], pd[k] - pd[q]));
    }
    double a, b;
    eraTpsts(u * MAS, v * MAS, s->ra_deg * M_PI / 180, s->dec_deg * M_PI / 180, &a, &b);
    out->bg_ra_deg = a * 180 / M_PI;
    out->bg_dec_deg = b * 180 / M_PI;
    out->chi2_common = cc;
    out->chi2_background = cb;
    out->dof = 2 * n - 2;
    out->p_common = gsl_cdf_chisq_Q(cc, (double)out->dof);
    out->p_background = gsl_cdf_chisq_Q(cb, (double)out->dof);
    out->track_span_mas = span;
cleanup:
    gl_free(pa);
    return st;
}

gl_status vet_epochs_test(const gl_vet_star *star, const gl_vet_epochs *given, double mjd_now,
                          gl_vet_result *r)
{
    gl_vet_test *t = &r->tests[GL_VET_TEST_EPOCHS];
    t->possible = 0;
    t->value = t->expected = t->limit = NAN;
    if (!given || given->n == 0 || !star) {
        snprintf(t->note, sizeof t->note, "no other epochs given");
        return GL_OK;
    }
    long n = given->n + (isfinite(mjd_now) && isfinite(r->dra_mas) && r->dra_err_mas > 0);
    double *buf = gl_malloc((size_t)n * 5 * sizeof *buf);
    gl_vet_epoch_fit fit = {0}, ideal = {0};
    gl_status st = GL_OK;
    if (!buf)
        return gl_error_nomem("epochs");
    double *m = buf, *a = buf + n, *d = buf + 2 * n, *ea = buf + 3 * n, *ed = buf + 4 * n;
    for (long k = 0; k < given->n; k++) {
        m[k] = given->mjd_utc[k];
        a[k] = given->dra_mas[k];
        d[k] = given->ddec_mas[k];
        ea[k] = given->dra_err[k];
        ed[k] = given->ddec_err[k];
    }
    if (n > given->n) {
        m[n - 1] = mjd_now;
        a[n - 1] = r->dra_mas;
        d[n - 1] = r->ddec_mas;
        ea[n - 1] = r->dra_err_mas;
        ed[n - 1] = r->ddec_err_mas;
    }
    gl_vet_epochs e = {n, m, a, d, ea, ed};
    if (n < 2) {
        snprintf(t->note, sizeof t->note, "one epoch only (these data have no date or no scale)");
        goto cleanup;
    }
    if ((st = gl_vet_epochs_fit(star, &e, &fit)))
        goto cleanup;
    /* what a comoving source would give: the weighted mean offsets at every
     * epoch, fitted by the background model */
    {
        double wa = 0, sa = 0, wd = 0, sd = 0;
        for (long k = 0; k < n; k++) {
            wa += 1 / (ea[k] * ea[k]);
            sa += a[k] / (ea[k] * ea[k]);
            wd += 1 / (ed[k] * ed[k]);
            sd += d[k] / (ed[k] * ed[k]);
        }
        double *ca = gl_malloc((size_t)n * 2 * sizeof *ca);
        if (!ca) {
            st = gl_error_nomem("epochs");
            goto cleanup;
        }
        for (long k = 0; k < n; k++) {
            ca[k] = sa / wa;
            ca[n + k] = sd / wd;
        }
        gl_vet_epochs ce = {n, m, ca, ca + n, ea, ed};
        st = gl_vet_epochs_fit(star, &ce, &ideal);
        gl_free(ca);
        if (st)
            goto cleanup;
    }
    double rms_err = 0;
    for (long k = 0; k < n; k++)
        rms_err += (ea[k] * ea[k] + ed[k] * ed[k]) / (double)n;
    rms_err = sqrt(rms_err);
    t->value = fit.chi2_background - fit.chi2_common;
    t->expected = ideal.chi2_background;
    t->limit = gsl_cdf_chisq_Qinv(0.0027, (double)fit.dof);
    if (fit.track_span_mas < 3 * rms_err) {
        snprintf(t->note, sizeof t->note,
                 "a background star would move %.2f mas between the farthest epochs, under 3x "
                 "the errors (%.2f mas)",
                 fit.track_span_mas, rms_err);
        goto cleanup;
    }
    t->possible = 1;
    t->passed = fit.p_background < 0.0027 && fit.p_common >= 0.0027;
    snprintf(t->note, sizeof t->note,
             "%ld epochs: chi2 common %.2f (p %.3g), background %.2f (p %.3g), %ld dof; a "
             "background star would move %.1f mas between the farthest epochs",
             n, fit.chi2_common, fit.p_common, fit.chi2_background, fit.p_background, fit.dof,
             fit.track_span_mas);
cleanup:
    gl_vet_epoch_fit_free(&fit);
    gl_vet_epoch_fit_free(&ideal);
    gl_free(buf);
    return st;
}
