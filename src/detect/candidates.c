/*
 * candidates.c -- from S/N maps to a list of point-source candidates.
 *
 * A candidate is a local maximum of the t map (8 neighbours; ties go to the
 * first pixel in raster order) whose t exceeds the threshold for its degrees
 * of freedom (the Gaussian FPF of the threshold in sigma, mapped to Student's
 * t: Mawet et al. 2014, ApJ 792, 97). Maxima are merged greedily, best
 * first, within the merge radius (one FWHM by default, common practice).
 *
 * Each survivor gets a sub-pixel position from a least-squares fit of a
 * circular 2-D Gaussian plus a constant to the image within one FWHM of the
 * peak (GSL multifit_nlinear, trust region with Levenberg-Marquardt steps);
 * when the fit fails or wanders (no convergence, centre more than one FWHM
 * away, width outside a factor of 2 of the FWHM, negative amplitude) the
 * position is the centroid of the positive pixels within FWHM/2 of the peak.
 * The t test is then repeated at that position (the ring starts at its
 * angle), which gives the reported S/N, FPF and significance.
 *
 * Position angle of a north-up image: pa = atan2(-(x - cx), y - cy), degrees
 * in [0, 360) (east of north); sky offsets through the WCS (sky.c).
 */
#include "core/internal.h"
#include "detect/internal.h"

#include <gsl/gsl_blas.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_multifit_nlinear.h>
#include <gsl/gsl_vector.h>
#include <math.h>
#include <stdlib.h>

typedef struct peak {
    long x, y;
    double t;
} peak;

static int peak_cmp(const void *a, const void *b)
{
    const peak *p = a, *q = b;
    if (p->t != q->t)
        return p->t > q->t ? -1 : 1;
    long kp = p->y * 1000000L + p->x, kq = q->y * 1000000L + q->x;
    return kp < kq ? -1 : (kp > kq);
}

static int cand_cmp(const void *a, const void *b)
{
    const gl_candidate *p = a, *q = b;
    double tp = isnan(p->stat.t) ? -INFINITY : p->stat.t;
    double tq = isnan(q->stat.t) ? -INFINITY : q->stat.t;
    if (tp != tq)
        return tp > tq ? -1 : 1;
    return p->peak_snr > q->peak_snr ? -1 : (p->peak_snr < q->peak_snr);
}

/* ---- 2-D Gaussian fit -------------------------------------------------- */

typedef struct stamp {
    double *x, *y, *v;
    size_t n;
} stamp;

/* model: A exp(-((x-x0)^2 + (y-y0)^2) / (2 s^2)) + B; p = (A, x0, y0, s, B) */
static int gauss_f(const gsl_vector *p, void *data, gsl_vector *f)
{
    const stamp *s = data;
    double A = gsl_vector_get(p, 0), x0 = gsl_vector_get(p, 1), y0 = gsl_vector_get(p, 2);
    double sg = gsl_vector_get(p, 3), B = gsl_vector_get(p, 4);
    for (size_t i = 0; i < s->n; i++) {
        double dx = s->x[i] - x0, dy = s->y[i] - y0;
        gsl_vector_set(f, i, A * exp(-(dx * dx + dy * dy) / (2 * sg * sg)) + B - s->v[i]);
    }
    return GSL_SUCCESS;
}

static int gauss_df(const gsl_vector *p, void *data, gsl_matrix *J)
{
    const stamp *s = data;
    double A = gsl_vector_get(p, 0), x0 = gsl_vector_get(p, 1), y0 = gsl_vector_get(p, 2);
    double sg = gsl_vector_get(p, 3);
    for (size_t i = 0; i < s->n; i++) {
        double dx = s->x[i] - x0, dy = s->y[i] - y0, r2 = dx * dx + dy * dy;
        double e = exp(-r2 / (2 * sg * sg));
        gsl_matrix_set(J, i, 0, e);
        gsl_matrix_set(J, i, 1, A * e * dx / (sg * sg));
        gsl_matrix_set(J, i, 2, A * e * dy / (sg * sg));
        gsl_matrix_set(J, i, 3, A * e * r2 / (sg * sg * sg));
        gsl_matrix_set(J, i, 4, 1.0);
    }
    return GSL_SUCCESS;
}

/* Fits the stamp; returns 1 with (*x, *y, *fwhm) on an acceptable fit. */
static int gauss_fit(stamp *s, double px, double py, double fwhm, double *x, double *y,
                     double *fit_fwhm)
{
    if (s->n < 8)
        return 0;
    double vmax = -INFINITY, vmin = INFINITY;
    for (size_t i = 0; i < s->n; i++) {
        vmax = fmax(vmax, s->v[i]);
        vmin = fmin(vmin, s->v[i]);
    }
    const double sigma0 = fwhm / (2 * sqrt(2 * log(2)));
    double p0[5] = {vmax - vmin, px, py, sigma0, vmin};
    gsl_vector_view pv = gsl_vector_view_array(p0, 5);
    gsl_multifit_nlinear_fdf fdf = {gauss_f, gauss_df, NULL, s->n, 5, s, 0, 0, 0};
    gsl_multifit_nlinear_parameters fp = gsl_multifit_nlinear_default_parameters();
    gsl_multifit_nlinear_workspace *w =
        gsl_multifit_nlinear_alloc(gsl_multifit_nlinear_trust, &fp, s->n, 5);
    if (!w)
        return 0;
    int ok = 0, info = 0;
    if (gsl_multifit_nlinear_init(&pv.vector, &fdf, w) == GSL_SUCCESS &&
        gsl_multifit_nlinear_driver(200, 1e-10, 1e-10, 0.0, NULL, NULL, &info, w) == GSL_SUCCESS) {
        const gsl_vector *r = gsl_multifit_nlinear_position(w);
        double A = gsl_vector_get(r, 0), x0 = gsl_vector_get(r, 1), y0 = gsl_vector_get(r, 2);
        double sg = fabs(gsl_vector_get(r, 3));
        if (A > 0 && isfinite(x0) && isfinite(y0) && hypot(x0 - px, y0 - py) <= fwhm &&
            sg >= 0.5 * sigma0 && sg <= 2 * sigma0) {
            *x = x0;
            *y = y0;
            *fit_fwhm = sg * 2 * sqrt(2 * log(2));
            ok = 1;
        }
    }
    gsl_multifit_nlinear_free(w);
    return ok;
}

/* Centroid of the positive pixels within fwhm/2 of (px, py). */
static void centroid(const float *img, long nx, long ny, long px, long py, double fwhm, double *x,
                     double *y)
{
    double sw = 0, sx = 0, sy = 0, r = fmax(0.5 * fwhm, 1.0);
    long h = (long)ceil(r);
    for (long j = py - h; j <= py + h; j++)
        for (long i = px - h; i <= px + h; i++) {
            if (i < 0 || j < 0 || i >= nx || j >= ny || hypot(i - px, j - py) > r)
                continue;
            double v = img[j * nx + i];
            if (!(v > 0))
                continue;
            sw += v;
            sx += v * (double)i;
            sy += v * (double)j;
        }
    *x = sw > 0 ? sx / sw : (double)px;
    *y = sw > 0 ? sy / sw : (double)py;
}

/* ---- the list ---------------------------------------------------------- */

gl_status gl_detect_candidates_find(const float *img, long nx, long ny, const gl_detect_maps *maps,
                                    const gl_detect_params *par, const gl_detect_sky *sky,
                                    gl_candidate **out, long *n)
{
    gl_status st = GL_OK;
    peak *pk = NULL;
    double *thr = NULL, *work = NULL;
    gl_aperture_plan *plan = NULL;
    gl_candidate *cand = NULL;
    stamp s = {0};
    long npk = 0, cap = 0, ncand = 0;
    *out = NULL;
    *n = 0;
    gl_detect_gsl_quiet();
    if ((st = gl_detect_params_check(par, nx, ny)))
        return st;
    detect_geom g;
    gl_detect_geom(par, &g);
    const double sx = (double)(nx / 2), sy = (double)(ny / 2);

    /* thresholds by degrees of freedom */
    int maxdof = 0;
    for (size_t k = 0; k < (size_t)nx * (size_t)ny; k++)
        maxdof = maps->dof[k] > maxdof ? maps->dof[k] : maxdof;
    thr = gl_malloc(((size_t)maxdof + 1) * sizeof *thr);
    if (!thr) {
        st = gl_error_nomem("thresholds");
        goto cleanup;
    }
    for (int d = 0; d <= maxdof; d++)
        thr[d] = d > 0 ? gl_detect_t_threshold(par->threshold_sigma, d) : INFINITY;

    for (long y = 0; y < ny; y++)
        for (long x = 0; x < nx; x++) {
            size_t k = (size_t)y * (size_t)nx + (size_t)x;
            double t = maps->snr[k];
            if (!(t >= thr[maps->dof[k]]))
                continue;
            int is_max = 1;
            for (long dy = -1; dy <= 1 && is_max; dy++)
                for (long dx = -1; dx <= 1; dx++) {
                    long xx = x + dx, yy = y + dy;
                    if ((!dx && !dy) || xx < 0 || yy < 0 || xx >= nx || yy >= ny)
                        continue;
                    double u = maps->snr[(size_t)yy * (size_t)nx + (size_t)xx];
                    /* a plateau belongs to its first pixel in raster order */
                    int before = dy < 0 || (dy == 0 && dx < 0);
                    if (u > t || (before && u == t)) {
                        is_max = 0;
                        break;
                    }
                }
            if (!is_max)
                continue;
            if (npk == cap) {
                cap = cap ? 2 * cap : 64;
                peak *np = gl_malloc((size_t)cap * sizeof *np);
                if (!np) {
                    st = gl_error_nomem("peaks");
                    goto cleanup;
                }
                for (long i = 0; i < npk; i++)
                    np[i] = pk[i];
                gl_free(pk);
                pk = np;
            }
            pk[npk++] = (peak){x, y, t};
        }
    if (npk == 0)
        goto cleanup;
    qsort(pk, (size_t)npk, sizeof *pk, peak_cmp);
    /* greedy merge: a peak within the merge radius of a better kept one goes */
    for (long i = 0; i < npk; i++) {
        if (!isfinite(pk[i].t))
            continue;
        pk[ncand++] = pk[i];
        for (long j = i + 1; j < npk; j++)
            if (hypot((double)(pk[j].x - pk[i].x), (double)(pk[j].y - pk[i].y)) <= g.merge)
                pk[j].t = NAN;
    }

    cand = gl_calloc((size_t)ncand, sizeof *cand);
    long h = (long)ceil(par->fwhm);
    size_t smax = (size_t)(2 * h + 1) * (size_t)(2 * h + 1);
    s.x = gl_malloc(smax * sizeof(double));
    s.y = gl_malloc(smax * sizeof(double));
    s.v = gl_malloc(smax * sizeof(double));
    if ((st = gl_detect_aperture_plan_new(0.5 * g.diam, &plan)))
        goto cleanup;
    work = gl_malloc(gl_detect_snr_worksize(plan, nx, ny) * sizeof *work);
    if (!cand || !s.x || !s.y || !s.v || !work) {
        st = gl_error_nomem("candidates");
        goto cleanup;
    }
    for (long c = 0; c < ncand; c++) {
        gl_candidate *cd = &cand[c];
        long px = pk[c].x, py = pk[c].y;
        cd->peak_x = (int)px;
        cd->peak_y = (int)py;
        cd->peak_snr = pk[c].t;
        s.n = 0;
        for (long j = py - h; j <= py + h; j++)
            for (long i = px - h; i <= px + h; i++) {
                if (i < 0 || j < 0 || i >= nx || j >= ny || hypot(i - px, j - py) > (double)h)
                    continue;
                float v = img[(size_t)j * (size_t)nx + (size_t)i];
                if (isnan(v))
                    continue;
                s.x[s.n] = (double)i;
                s.y[s.n] = (double)j;
                s.v[s.n] = v;
                s.n++;
            }
        cd->fit_fwhm = NAN;
        cd->gaussian_fit =
            gauss_fit(&s, (double)px, (double)py, par->fwhm, &cd->x, &cd->y, &cd->fit_fwhm);
        if (!cd->gaussian_fit)
            centroid(img, nx, ny, px, py, par->fwhm, &cd->x, &cd->y);
        if (!gl_detect_snr_at(plan, par, img, nx, ny, cd->x, cd->y, work, &cd->stat)) {
            /* the refined position lost its statistic (edge, mask): keep the peak */
            cd->x = (double)px;
            cd->y = (double)py;
            cd->gaussian_fit = 0;
            cd->fit_fwhm = NAN;
            gl_detect_snr_at(plan, par, img, nx, ny, cd->x, cd->y, work, &cd->stat);
        }
        gl_detect_aperture_sum(plan, img, nx, ny, cd->x, cd->y, work, &cd->flux, NULL);
        double dx = cd->x - sx, dy = cd->y - sy;
        cd->sep_px = hypot(dx, dy);
        double pa = atan2(-dx, dy) * 180.0 / M_PI;
        cd->pa_deg = pa < 0 ? pa + 360.0 : pa;
        if (cd->pa_deg >= 360.0)
            cd->pa_deg -= 360.0;
        double scale = gl_detect_sky_pixscale(sky);
        cd->sep_arcsec = isfinite(scale) ? cd->sep_px * scale / 1000.0 : NAN;
        gl_detect_sky_offsets(sky, cd->x, cd->y, sx, sy, &cd->dra_arcsec, &cd->ddec_arcsec);
    }
    qsort(cand, (size_t)ncand, sizeof *cand, cand_cmp);
    *out = cand;
    *n = ncand;
    cand = NULL;
cleanup:
    gl_free(cand);
    gl_free(s.x);
    gl_free(s.y);
    gl_free(s.v);
    gl_free(work);
    gl_detect_aperture_plan_free(plan);
    gl_free(thr);
    gl_free(pk);
    return st;
}
