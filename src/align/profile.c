/*
 * profile.c -- least-squares fits of a star profile plus a constant
 * background to a stamp: an axis-aligned 2-D Gaussian, or the circular
 * profile of Moffat (1969, A&A 3, 455), I(r) = A (1 + r^2/alpha^2)^-beta,
 * whose FWHM is 2 alpha sqrt(2^(1/beta) - 1). The Levenberg-Marquardt solver
 * with geodesic acceleration off is GSL's multifit_nlinear (trust region,
 * analytic Jacobian). Pixels are unweighted (the gain is not known); the
 * parameter uncertainties are the square roots of the diagonal of
 * (J^T J)^-1 scaled by the residual variance chi^2 / (n - p), the usual
 * estimate when the noise level is unknown. NaN pixels are left out.
 * Assumption: an unsaturated star, the stamp larger than the core.
 */
#include "align/internal.h"
#include "core/internal.h"

#include <gsl/gsl_blas.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_matrix.h>
#include <gsl/gsl_multifit_nlinear.h>
#include <gsl/gsl_vector.h>
#include <math.h>
#include <string.h>

#define NPAR_MAX 8 /* 6 profile parameters, 2 more for a sloped background */
static const double FWHM_PER_SIGMA = 2.3548200450309493; /* 2 sqrt(2 ln 2) */

typedef struct stamp {
    int n;
    double *x, *y, *v;
    gl_profile_kind kind;
    int plane; /* background B + bx (x - xc) + by (y - yc) */
    double xc, yc;
} stamp;

/* Gaussian: p = A, x0, y0, sx, sy, B.  Moffat: p = A, x0, y0, alpha, beta, B. */
static int model_f(const gsl_vector *p, void *data, gsl_vector *f)
{
    const stamp *s = data;
    double A = gsl_vector_get(p, 0), x0 = gsl_vector_get(p, 1), y0 = gsl_vector_get(p, 2);
    double w1 = gsl_vector_get(p, 3), w2 = gsl_vector_get(p, 4), B = gsl_vector_get(p, 5);
    for (int i = 0; i < s->n; i++) {
        double dx = s->x[i] - x0, dy = s->y[i] - y0, m;
        if (s->kind == GL_PROFILE_GAUSSIAN)
            m = A * exp(-0.5 * (dx * dx / (w1 * w1) + dy * dy / (w2 * w2)));
        else
            m = A * pow(1 + (dx * dx + dy * dy) / (w1 * w1), -w2);
        if (s->plane)
            m +=
                gsl_vector_get(p, 6) * (s->x[i] - s->xc) + gsl_vector_get(p, 7) * (s->y[i] - s->yc);
        gsl_vector_set(f, (size_t)i, m + B - s->v[i]);
    }
    return GSL_SUCCESS;
}

static int model_df(const gsl_vector *p, void *data, gsl_matrix *J)
{
    const stamp *s = data;
    double A = gsl_vector_get(p, 0), x0 = gsl_vector_get(p, 1), y0 = gsl_vector_get(p, 2);
    double w1 = gsl_vector_get(p, 3), w2 = gsl_vector_get(p, 4);
    for (int i = 0; i < s->n; i++) {
        double dx = s->x[i] - x0, dy = s->y[i] - y0;
        size_t r = (size_t)i;
        if (s->kind == GL_PROFILE_GAUSSIAN) {
            double e = exp(-0.5 * (dx * dx / (w1 * w1) + dy * dy / (w2 * w2)));
            gsl_matrix_set(J, r, 0, e);
            gsl_matrix_set(J, r, 1, A * e * dx / (w1 * w1));
            gsl_matrix_set(J, r, 2, A * e * dy / (w2 * w2));
            gsl_matrix_set(J, r, 3, A * e * dx * dx / (w1 * w1 * w1));
            gsl_matrix_set(J, r, 4, A * e * dy * dy / (w2 * w2 * w2));
        } else {
            double r2 = dx * dx + dy * dy, u = 1 + r2 / (w1 * w1);
            double m = pow(u, -w2), m1 = m / u;
            gsl_matrix_set(J, r, 0, m);
            gsl_matrix_set(J, r, 1, 2 * A * w2 * dx / (w1 * w1) * m1);
            gsl_matrix_set(J, r, 2, 2 * A * w2 * dy / (w1 * w1) * m1);
            gsl_matrix_set(J, r, 3, 2 * A * w2 * r2 / (w1 * w1 * w1) * m1);
            gsl_matrix_set(J, r, 4, -A * m * log(u));
        }
        gsl_matrix_set(J, r, 5, 1.0);
        if (s->plane) {
            gsl_matrix_set(J, r, 6, s->x[i] - s->xc);
            gsl_matrix_set(J, r, 7, s->y[i] - s->yc);
        }
    }
    return GSL_SUCCESS;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

gl_status gl_fit_profile_plane(const float *img, long nx, long ny, double x0, double y0, int half,
                               double fwhm0, gl_profile_kind kind, int plane, gl_profile_fit *out)
{
    const int NPAR = plane ? 8 : 6;
    gl_status st = GL_OK;
    stamp s = {0};
    double *border = NULL;
    gsl_multifit_nlinear_workspace *ws = NULL;
    gsl_matrix *covar = NULL;
    memset(out, 0, sizeof *out);
    out->kind = kind;
    gsl_set_error_handler_off();

    long cx = lround(x0), cy = lround(y0);
    if (half < 2 || !isfinite(x0) || !isfinite(y0) || cx < 0 || cy < 0 || cx >= nx || cy >= ny)
        return gl_error_set(GL_ERR_USAGE,
                            "profile fit: stamp at (%.1f, %.1f) of half-size %d "
                            "is outside the %ldx%ld image",
                            x0, y0, half, nx, ny);
    long xa = GL_MAX(cx - half, 0), xb = GL_MIN(cx + half, nx - 1);
    long ya = GL_MAX(cy - half, 0), yb = GL_MIN(cy + half, ny - 1);
    size_t cap = (size_t)(xb - xa + 1) * (size_t)(yb - ya + 1);
    s.x = gl_malloc(cap * sizeof *s.x);
    s.y = gl_malloc(cap * sizeof *s.y);
    s.v = gl_malloc(cap * sizeof *s.v);
    border = gl_malloc(cap * sizeof *border);
    if (!s.x || !s.y || !s.v || !border) {
        st = gl_error_nomem("profile fit stamp");
        goto cleanup;
    }
    s.kind = kind;
    s.plane = plane;
    s.xc = (double)cx;
    s.yc = (double)cy;
    int nb = 0;
    double vmax = -INFINITY;
    for (long y = ya; y <= yb; y++)
        for (long x = xa; x <= xb; x++) {
            double v = img[y * nx + x];
            if (!isfinite(v))
                continue;
            s.x[s.n] = (double)x;
            s.y[s.n] = (double)y;
            s.v[s.n++] = v;
            if (x == xa || x == xb || y == ya || y == yb)
                border[nb++] = v;
            double r2 = (x - x0) * (x - x0) + (y - y0) * (y - y0);
            if (r2 <= 2.0 && v > vmax)
                vmax = v;
        }
    if (s.n < 3 * NPAR || nb == 0 || !isfinite(vmax)) {
        st = gl_error_set(GL_ERR_NUMERIC, "profile fit at (%.1f, %.1f): too few valid pixels", x0,
                          y0);
        goto cleanup;
    }
    qsort(border, (size_t)nb, sizeof *border, cmp_double);
    double bg = border[nb / 2];
    double fwhm = fwhm0 > 0 ? fwhm0 : 0.5 * half;

    double p0[NPAR_MAX] = {0};
    p0[0] = vmax - bg;
    p0[1] = x0;
    p0[2] = y0;
    if (kind == GL_PROFILE_GAUSSIAN) {
        p0[3] = p0[4] = fwhm / FWHM_PER_SIGMA;
    } else {
        p0[4] = 2.5;
        p0[3] = fwhm / (2 * sqrt(pow(2, 1 / p0[4]) - 1));
    }
    p0[5] = bg;
    if (!(p0[0] > 0)) {
        st = gl_error_set(GL_ERR_NUMERIC,
                          "profile fit at (%.1f, %.1f): no peak above the "
                          "background",
                          x0, y0);
        goto cleanup;
    }

    gsl_multifit_nlinear_parameters fp = gsl_multifit_nlinear_default_parameters();
    ws = gsl_multifit_nlinear_alloc(gsl_multifit_nlinear_trust, &fp, (size_t)s.n, (size_t)NPAR);
    covar = gsl_matrix_alloc((size_t)NPAR, (size_t)NPAR);
    if (!ws || !covar) {
        st = gl_error_nomem("profile fit workspace");
        goto cleanup;
    }
    gsl_multifit_nlinear_fdf fdf = {.f = model_f,
                                    .df = model_df,
                                    .fvv = NULL,
                                    .n = (size_t)s.n,
                                    .p = (size_t)NPAR,
                                    .params = &s};
    gsl_vector_view pv = gsl_vector_view_array(p0, (size_t)NPAR);
    int info = 0;
    gsl_multifit_nlinear_init(&pv.vector, &fdf, ws);
    int rc = gsl_multifit_nlinear_driver(200, 1e-10, 1e-10, 0.0, NULL, NULL, &info, ws);
    const gsl_vector *pf = gsl_multifit_nlinear_position(ws);
    double p[NPAR_MAX];
    for (int k = 0; k < NPAR; k++)
        p[k] = gsl_vector_get(pf, (size_t)k);
    if (rc != GSL_SUCCESS && rc != GSL_EMAXITER) {
        st = gl_error_set(GL_ERR_NUMERIC, "profile fit at (%.1f, %.1f) did not converge (%s)", x0,
                          y0, gsl_strerror(rc));
        goto cleanup;
    }
    /* reaching the iteration limit is accepted: a Moffat fit of a nearly
     * Gaussian star drifts towards beta -> infinity (the Gaussian limit)
     * with the centre long settled */
    if (!isfinite(p[1]) || !isfinite(p[2]) || !(p[0] > 0) || !(p[3] > 0) || !(p[4] > 0) ||
        fabs(p[1] - x0) > half || fabs(p[2] - y0) > half) {
        st = gl_error_set(GL_ERR_NUMERIC,
                          "profile fit at (%.1f, %.1f) found no star "
                          "(no convergence, non-positive width or centre off the stamp)",
                          x0, y0);
        goto cleanup;
    }
    const gsl_matrix *J = gsl_multifit_nlinear_jac(ws);
    gsl_multifit_nlinear_covar(J, 0.0, covar);
    double chi2;
    gsl_blas_ddot(gsl_multifit_nlinear_residual(ws), gsl_multifit_nlinear_residual(ws), &chi2);
    double scale = chi2 / (double)(s.n - NPAR);
    double e[NPAR_MAX];
    for (int k = 0; k < NPAR; k++)
        e[k] = sqrt(fmax(gsl_matrix_get(covar, (size_t)k, (size_t)k), 0) * scale);

    out->x = p[1];
    out->y = p[2];
    out->amplitude = p[0];
    out->background = p[5];
    out->err_x = e[1];
    out->err_y = e[2];
    out->err_amplitude = e[0];
    out->err_background = e[5];
    out->rms_residual = sqrt(chi2 / s.n);
    out->npix = s.n;
    out->iterations = (int)gsl_multifit_nlinear_niter(ws);
    if (kind == GL_PROFILE_GAUSSIAN) {
        out->sigma_x = p[3];
        out->sigma_y = p[4];
        out->err_sigma_x = e[3];
        out->err_sigma_y = e[4];
        out->alpha = out->beta = out->err_alpha = out->err_beta = NAN;
        out->fwhm = FWHM_PER_SIGMA * sqrt(p[3] * p[4]);
    } else {
        out->alpha = p[3];
        out->beta = p[4];
        out->err_alpha = e[3];
        out->err_beta = e[4];
        out->sigma_x = out->sigma_y = out->err_sigma_x = out->err_sigma_y = NAN;
        out->fwhm = 2 * p[3] * sqrt(pow(2, 1 / p[4]) - 1);
    }

cleanup:
    gsl_matrix_free(covar);
    if (ws)
        gsl_multifit_nlinear_free(ws);
    gl_free(border);
    gl_free(s.x);
    gl_free(s.y);
    gl_free(s.v);
    return st;
}

gl_status gl_align_fit_profile(const float *img, long nx, long ny, double x0, double y0, int half,
                               double fwhm0, gl_profile_kind kind, gl_profile_fit *out)
{
    return gl_fit_profile_plane(img, nx, ny, x0, y0, half, fwhm0, kind, 0, out);
}

int gl_profile_centre(const float *img, long nx, long ny, gl_profile_kind kind,
                      const gl_align_params *p, gl_profile_fit *fit)
{
    long px, py;
    double peak;
    if (!gl_image_peak(img, nx, ny, 2, &px, &py, &peak))
        return -1;
    return gl_profile_centre_at(img, nx, ny, px, py, GL_MIN(GL_MIN(nx, ny) / 4, 20), kind, p, fit);
}

int gl_profile_centre_at(const float *img, long nx, long ny, long px, long py, long reach,
                         gl_profile_kind kind, const gl_align_params *p, gl_profile_fit *fit)
{
    double bg = gl_image_median(img, nx, ny);
    double fwhm = p->fwhm > 0 ? p->fwhm : gl_image_fwhm_estimate(img, nx, ny, px, py, bg, reach);
    if (!(fwhm > 0))
        fwhm = 3;
    int half = p->stamp_half > 0 ? p->stamp_half : (int)GL_MIN(GL_MAX(ceil(2 * fwhm), 4), 32);
    double x0 = (double)px, y0 = (double)py;
    /* second pass with the stamp centred on the first solution: a stamp
     * symmetric about the star keeps the background estimate unbiased */
    for (int pass = 0; pass < 2; pass++) {
        if (gl_align_fit_profile(img, nx, ny, x0, y0, half, fwhm, kind, fit))
            return -1;
        if (lround(fit->x) == lround(x0) && lround(fit->y) == lround(y0))
            break;
        x0 = fit->x;
        y0 = fit->y;
        fwhm = fit->fwhm;
    }
    return 0;
}
