/*
 * fit.c -- the negative fake companion fit (Lagrange et al. 2010, Science 329,
 * 57; Marois et al. 2010, Nature 468, 1080): a negative copy of the scaled
 * off-axis PSF is planted at (sep, PA, contrast) in every frame, the user's
 * subtraction is run again, and the sum of squares of the residual in a
 * fixed aperture around the candidate (the sum-of-squares figure of merit,
 * after Wertz et al. 2017, A&A 598, A83) is minimised with GSL's Nelder-Mead
 * simplex (gsl_multimin_fminimizer_nmsimplex2).
 *
 * The residual is taken about the background level of the annulus, not
 * about zero: a median-combined PCA or ADI residual is not zero-mean (the
 * per-frame residuals are skewed by bright speckles, and their median over
 * the frames lies below their mean; ring edges of klip-rings add radial
 * steps). On a noiseless 96 px, 30-frame simulation the annulus at 20 px sat
 * at -500 e-/px, and a sum of squares about zero pulled the contrast of 2e-4
 * companions down by 7.5% on average over 8 position angles (the fit lowers
 * the source to fill the negative background). The level is the mean of 1-px
 * rings about the star, the surroundings of the merit aperture (2 FWHM) left
 * out, taken on each evaluation's own residual (vet_level_make): at the
 * solution that residual is the companion-free image, whose level is the one
 * to take out, and a bright source's darkening of its own ring goes with it.
 * The start's aperture photometry subtracts the level of the image with the
 * candidate (vet_flux), as aperture photometry with a background annulus
 * does. Another source at the same separation, further than 2 FWHM, enters
 * the level (as it enters the S/N references).
 *
 * Speed: everything is cropped once to the square that holds the annulus
 * sep +- ring_half FWHM (cube, reference cube, PSF), and the subtraction is
 * limited to that annulus by its inner and outer radii; an evaluation is then
 * one copy of the small cube, one planting and one small subtraction. The
 * aperture plan, the parameters and the scratch cube are made once.
 * Assumption: the annulus-limited subtraction stands for the user's; with
 * full-frame PCA its KL basis is computed from the annulus only (a local
 * basis), which is stated in the products.
 */
#include "core/internal.h"
#include "vet/internal.h"

#include <gsl/gsl_multimin.h>
#include <math.h>
#include <string.h>

#define DEG (M_PI / 180)

void vet_xy(const vet_problem *p, double sep, double pa, double *x, double *y)
{
    *x = p->cx - sep * sin(pa * DEG);
    *y = p->cy + sep * cos(pa * DEG);
}

void vet_seppa(const vet_problem *p, double x, double y, double *sep, double *pa)
{
    *sep = hypot(x - p->cx, y - p->cy);
    double a = atan2(-(x - p->cx), y - p->cy) / DEG;
    *pa = a < 0 ? a + 360 : a;
}

void vet_problem_free(vet_problem *p)
{
    if (!p)
        return;
    gl_cube_free(p->crop);
    gl_cube_free(p->refs);
    gl_cube_free(p->work);
    gl_psf_model_free(p->psf);
    gl_detect_aperture_plan_free(p->ap);
    gl_free(p->work_d);
    gl_free(p->level);
    gl_free(p->merit_level);
    gl_free(p->plan.negated);
    gl_free(p);
}

/* Copies the window (ox, oy, nx, ny) of every plane of src into a new cube. */
static gl_status crop_cube(const gl_cube *src, long ox, long oy, long nx, long ny, gl_cube **out)
{
    gl_status st = gl_cube_new(nx, ny, src->nchan, src->nframe, out);
    if (st)
        return st;
    (*out)->naxis = src->naxis;
    for (long f = 0; f < src->nframe; f++)
        for (long c = 0; c < src->nchan; c++) {
            const float *a = gl_cube_plane(src, c, f);
            float *b = gl_cube_plane(*out, c, f);
            for (long j = 0; j < ny; j++)
                memcpy(b + j * nx, a + (j + oy) * src->nx + ox, (size_t)nx * sizeof *b);
        }
    return GL_OK;
}

static gl_status crop_psf(const gl_psf_model *m, long ox, long oy, long nx, long ny,
                          gl_psf_model **out)
{
    gl_psf_model *c = gl_calloc(1, sizeof *c);
    if (!c)
        return gl_error_nomem("cropped PSF");
    *c = *m;
    c->nx = nx;
    c->ny = ny;
    c->images = gl_malloc((size_t)(nx * ny * m->nchan) * sizeof *c->images);
    c->flux = gl_malloc((size_t)m->nchan * sizeof *c->flux);
    c->peak = gl_malloc((size_t)m->nchan * sizeof *c->peak);
    c->fwhm_px = gl_malloc((size_t)m->nchan * sizeof *c->fwhm_px);
    if (!c->images || !c->flux || !c->peak || !c->fwhm_px) {
        gl_psf_model_free(c);
        return gl_error_nomem("cropped PSF");
    }
    for (long k = 0; k < m->nchan; k++) {
        const float *a = m->images + (size_t)k * (size_t)(m->nx * m->ny);
        float *b = c->images + (size_t)k * (size_t)(nx * ny);
        for (long j = 0; j < ny; j++)
            memcpy(b + j * nx, a + (j + oy) * m->nx + ox, (size_t)nx * sizeof *b);
        c->flux[k] = m->flux[k];
        c->peak[k] = m->peak[k];
        c->fwhm_px[k] = m->fwhm_px[k];
    }
    *out = c;
    return GL_OK;
}

gl_status vet_problem_new(const gl_cube *cube, const double *angles, const gl_cube *refs,
                          const gl_subtract_params *sp, const gl_psf_model *psf,
                          const gl_vet_params *vp, double sep, vet_problem **out)
{
    gl_status st = GL_OK;
    vet_problem *p = gl_calloc(1, sizeof *p);
    *out = NULL;
    if (!p)
        return gl_error_nomem("vet problem");
    const double fwhm = sp->fwhm, h = vp->ring_half_fwhm * fwhm;
    /* the annulus and a margin of one FWHM for the planted PSF's core */
    long half = (long)ceil(sep + h + fwhm) + 2;
    long nx = GL_MIN(cube->nx, 2 * half), ny = GL_MIN(cube->ny, 2 * half);
    p->nx = nx;
    p->ny = ny;
    p->ox = cube->nx / 2 - nx / 2;
    p->oy = cube->ny / 2 - ny / 2;
    p->cx = (double)(nx / 2);
    p->cy = (double)(ny / 2);
    p->nchan = cube->nchan;
    p->nframe = cube->nframe;
    p->angles = angles;
    p->fwhm = fwhm;
    if ((st = crop_cube(cube, p->ox, p->oy, nx, ny, &p->crop)) ||
        (refs && (st = crop_cube(refs, p->ox, p->oy, nx, ny, &p->refs))) ||
        (st = crop_cube(cube, p->ox, p->oy, nx, ny, &p->work)) ||
        (st = crop_psf(psf, p->ox, p->oy, nx, ny, &p->psf)) ||
        (st = gl_detect_aperture_plan_new(fwhm / 2, &p->ap)))
        goto cleanup;
    gl_header_free(p->crop->header);
    p->crop->header = gl_header_copy(cube->header);

    /* the annulus: inner and outer radius around the candidate */
    double edge = 0.5 * (double)GL_MIN(nx, ny) - 1;
    p->sp = *sp;
    p->sp.mask_radius = GL_MAX(sp->mask_radius, sep - h);
    p->sp.outer_radius = GL_MIN(sep + h, edge);
    if (sp->outer_radius > 0)
        p->sp.outer_radius = GL_MIN(p->sp.outer_radius, sp->outer_radius);
    p->sp.keep_residuals = p->sp.keep_raw_residuals = 0;
    p->sp_all = p->sp;
    p->sp.nmodes = 1;

    gl_detect_params_init(&p->dp);
    p->dp.fwhm = fwhm;
    p->dp.mask_radius = GL_MAX(p->sp.mask_radius, fwhm / 2);
    p->work_n = gl_detect_snr_worksize(p->ap, nx, ny) + 2 * (size_t)(nx * ny) + 64;
    p->level = gl_calloc((size_t)(nx * ny), sizeof *p->level);
    p->merit_level = gl_calloc((size_t)(nx * ny), sizeof *p->merit_level);
    if (!(p->work_d = gl_malloc(p->work_n * sizeof *p->work_d)) || !p->level || !p->merit_level) {
        st = gl_error_nomem("vet work space");
        goto cleanup;
    }
    double F = 0;
    for (long c = 0; c < p->nchan; c++) {
        double s = NAN;
        gl_detect_aperture_sum(p->ap, p->psf->images + (size_t)c * (size_t)(nx * ny), nx, ny, p->cx,
                               p->cy, p->work_d, &s, NULL);
        F += s / (double)p->nchan;
    }
    if (!(F > 0)) {
        st = gl_error_set(GL_ERR_INPUT, "the PSF has no flux in a 1-FWHM aperture at its centre");
        goto cleanup;
    }
    p->psf_apflux = F;
    p->merit_r = vp->merit_radius_fwhm * fwhm;
    *out = p;
    p = NULL;
cleanup:
    vet_problem_free(p);
    return st;
}

/* The log of a test's own subtraction (other mode counts, half of the
 * frames, wrong angles): its warnings are about a configuration the user did
 * not ask for, so they go to the debug level (--verbose), marked as such. */
typedef struct quiet_log {
    gl_log_fn fn;
    void *user;
    gl_log_level max;
} quiet_log;

static gl_status vet_subtract_run(vet_problem *p, const gl_cube *base, const double *angles,
                                  const gl_cube *refs, const gl_subtract_params *sp,
                                  const gl_companion *c, int nc, gl_cube **image);

static void demote(gl_log_level level, const char *msg, void *user)
{
    const quiet_log *q = user;
    if (level == GL_LOG_ERROR) {
        q->fn(level, msg, q->user);
        return;
    }
    if (GL_LOG_DEBUG > q->max)
        return;
    char buf[1100];
    snprintf(buf, sizeof buf, "vet test subtraction: %s", msg);
    q->fn(GL_LOG_DEBUG, buf, q->user);
}

gl_status vet_subtract(vet_problem *p, const gl_cube *base, const double *angles,
                       const gl_cube *refs, const gl_subtract_params *sp, const gl_companion *c,
                       int nc, gl_cube **image)
{
    gl_log_fn fn;
    void *user;
    gl_log_level max;
    gl_log_get_handler(&fn, &user, &max);
    quiet_log q = {fn, user, max};
    int test_run = fn && (sp != &p->sp || angles != p->angles);
    if (test_run)
        gl_log_set_handler(demote, &q, max);
    gl_status st = vet_subtract_run(p, base, angles, refs, sp, c, nc, image);
    if (test_run)
        gl_log_set_handler(fn, user, max);
    return st;
}

static gl_status vet_subtract_run(vet_problem *p, const gl_cube *base, const double *angles,
                                  const gl_cube *refs, const gl_subtract_params *sp,
                                  const gl_companion *c, int nc, gl_cube **image)
{
    gl_subtract_result res = {0};
    gl_cube *tmp = NULL, *use = (gl_cube *)base;
    gl_status st = GL_OK;
    *image = NULL;
    if (nc > 0) {
        if (base->nframe == p->work->nframe) {
            use = p->work;
        } else if ((st = gl_cube_new(base->nx, base->ny, base->nchan, base->nframe, &tmp))) {
            return st;
        } else {
            use = tmp;
        }
        memcpy(use->data, base->data, gl_cube_size(base) * sizeof *base->data);
        if ((st = gl_inject_companions(use, angles, sp->north_offset, p->psf, c, nc, NULL)))
            goto cleanup;
    }
    if ((st = gl_subtract_run(use, angles, refs, sp, &res)))
        goto cleanup;
    *image = res.image;
    res.image = NULL;
cleanup:
    gl_subtract_result_free(&res);
    gl_cube_free(tmp);
    return st;
}

double vet_aperture(vet_problem *p, const float *img, double x, double y)
{
    double s;
    if (!gl_detect_aperture_sum(p->ap, img, p->nx, p->ny, x, y, p->work_d, &s, NULL))
        return NAN;
    return s;
}

double vet_flux(vet_problem *p, const float *img, double x, double y)
{
    return vet_aperture(p, img, x, y) - vet_aperture(p, p->level, x, y);
}

/* the fewest pixels of a 1-px ring that give it a level (else 0: no
 * correction, as before there was one) */
#define VET_LEVEL_MIN_PIXELS 8

gl_status vet_level_make(vet_problem *p, const float *img, double sep, double ex, double ey,
                         float *level)
{
    /* the radii of the merit aperture around any start near sep, and of the
     * photometric aperture, with 2 px to spare */
    double reach = GL_MAX(p->merit_r, p->fwhm / 2) + 2;
    long r0 = GL_MAX(0L, (long)floor(sep - reach)), r1 = (long)ceil(sep + reach);
    long nb = r1 - r0 + 1;
    double *sum = gl_calloc((size_t)nb, sizeof *sum);
    long *cnt = gl_calloc((size_t)nb, sizeof *cnt);
    size_t npix = (size_t)(p->nx * p->ny);
    if (!sum || !cnt) {
        gl_free(sum);
        gl_free(cnt);
        return gl_error_nomem("vet background level");
    }
    for (long j = 0; j < p->ny; j++)
        for (long i = 0; i < p->nx; i++) {
            long k = (long)floor(hypot((double)i - p->cx, (double)j - p->cy)) - r0;
            float v = img[j * p->nx + i];
            if (k < 0 || k >= nb || !isfinite(v) ||
                hypot((double)i - ex, (double)j - ey) < 2 * p->fwhm)
                continue;
            sum[k] += v;
            cnt[k]++;
        }
    memset(level, 0, npix * sizeof *level);
    for (long j = 0; j < p->ny; j++)
        for (long i = 0; i < p->nx; i++) {
            long k = (long)floor(hypot((double)i - p->cx, (double)j - p->cy)) - r0;
            if (k >= 0 && k < nb && cnt[k] >= VET_LEVEL_MIN_PIXELS)
                level[j * p->nx + i] = (float)(sum[k] / (double)cnt[k]);
        }
    gl_free(sum);
    gl_free(cnt);
    return GL_OK;
}

double vet_snr(vet_problem *p, const float *img, double x, double y)
{
    gl_ttest t;
    if (!gl_detect_snr_at(p->ap, &p->dp, img, p->nx, p->ny, x, y, p->work_d, &t))
        return NAN;
    return t.t;
}

double vet_pixel_sigma(vet_problem *p, const float *img, double sep, double ex, double ey)
{
    /* floats after the doubles the statistics need (at most nx*ny) */
    size_t npix = (size_t)(p->nx * p->ny);
    float *v = (float *)(p->work_d + gl_detect_snr_worksize(p->ap, p->nx, p->ny) + npix);
    size_t m = 0;
    for (long j = 0; j < p->ny; j++)
        for (long i = 0; i < p->nx; i++) {
            double r = hypot((double)i - p->cx, (double)j - p->cy);
            if (fabs(r - sep) > p->fwhm || hypot((double)i - ex, (double)j - ey) < 2 * p->fwhm)
                continue;
            v[m++] = img[j * p->nx + i];
        }
    double med, sig;
    double *w = p->work_d;
    if (m < 8)
        return NAN;
    gl_stats_robust_float(v, m, w, &med, &sig);
    return sig;
}

void vet_peak(const vet_problem *p, const float *img, double x0, double y0, double *x, double *y)
{
    /* the peak the position sits on: steepest ascent over the 8 neighbours
     * from the nearest pixel, within 1 FWHM of (x0, y0). The brightest pixel
     * of that disc would jump to a brighter neighbour (a speckle, the inner
     * edge of the field) when the position is on a source's flank. */
    double r = p->fwhm;
    long bi = lround(x0), bj = lround(y0);
    *x = x0;
    *y = y0;
    if (bi < 1 || bj < 1 || bi >= p->nx - 1 || bj >= p->ny - 1 || !isfinite(img[bj * p->nx + bi]))
        return;
    for (;;) {
        long ni = bi, nj = bj;
        double best = img[bj * p->nx + bi];
        for (long j = bj - 1; j <= bj + 1; j++)
            for (long i = bi - 1; i <= bi + 1; i++) {
                if (i < 1 || j < 1 || i >= p->nx - 1 || j >= p->ny - 1 ||
                    hypot((double)i - x0, (double)j - y0) > r)
                    continue;
                double v = img[j * p->nx + i];
                if (isfinite(v) && v > best) {
                    best = v;
                    ni = i;
                    nj = j;
                }
            }
        if (ni == bi && nj == bj)
            break;
        bi = ni;
        bj = nj;
    }
    double sw = 0, sx = 0, sy = 0;
    for (long j = bj - 1; j <= bj + 1; j++)
        for (long i = bi - 1; i <= bi + 1; i++) {
            double v = img[j * p->nx + i];
            if (isfinite(v) && v > 0) {
                sw += v;
                sx += v * (double)i;
                sy += v * (double)j;
            }
        }
    *x = sw > 0 ? sx / sw : (double)bi;
    *y = sw > 0 ? sy / sw : (double)bj;
}

gl_status vet_throughput(vet_problem *p, const gl_cube *base, const float *img, double sep,
                         double pa, double flux, double *throughput)
{
    gl_cube *with = NULL;
    double c = flux / p->psf_apflux;
    gl_companion fake = {sep, fmod(pa + 180, 360), c > 0 ? c : 1e-4};
    gl_status st = vet_subtract(p, base, p->angles, p->refs, &p->sp, &fake, 1, &with);
    if (st)
        return st;
    double x, y;
    vet_xy(p, fake.sep_px, fake.pa_deg, &x, &y);
    double a = vet_aperture(p, gl_cube_plane(with, 0, 0), x, y), b = vet_aperture(p, img, x, y);
    *throughput = (a - b) / (fake.contrast * p->psf_apflux);
    gl_log(GL_LOG_DEBUG, "vet: throughput fake at %.2f px, %.1f deg: %.4g - %.4g over %.4g", sep,
           fake.pa_deg, a, b, fake.contrast * p->psf_apflux);
    gl_cube_free(with);
    if (!(*throughput > 0.02))
        return gl_error_set(GL_ERR_INPUT,
                            "throughput at %.2f px is %.3g: the subtraction removes a point "
                            "source there (too little rotation, or too many modes)",
                            sep, *throughput);
    return GL_OK;
}

/* ---- the minimisation ---------------------------------------------------- */

typedef struct merit_ctx {
    vet_problem *p;
    const gl_cube *base;
    double sep0, pa0, c0;
    double ax, ay; /* the fixed merit aperture */
    double sigma2;
    gl_status st;
} merit_ctx;

static void unpack(const merit_ctx *m, const gsl_vector *v, double *sep, double *pa, double *c)
{
    *sep = m->sep0 + gsl_vector_get(v, 0);
    *pa = m->pa0 + gsl_vector_get(v, 1) / GL_MAX(*sep, 1e-3) / DEG;
    *c = m->c0 * (1 + 0.2 * gsl_vector_get(v, 2));
}

static double merit_of(const merit_ctx *m, const float *img)
{
    const vet_problem *p = m->p;
    double s = 0, r = p->merit_r;
    long nbad = 0;
    for (long j = (long)floor(m->ay - r); j <= (long)ceil(m->ay + r); j++)
        for (long i = (long)floor(m->ax - r); i <= (long)ceil(m->ax + r); i++) {
            if (hypot((double)i - m->ax, (double)j - m->ay) > r)
                continue;
            if (i < 0 || j < 0 || i >= p->nx || j >= p->ny || !isfinite(img[j * p->nx + i])) {
                nbad++;
                continue;
            }
            double v = img[j * p->nx + i] - p->merit_level[j * p->nx + i];
            s += v * v;
        }
    return nbad ? INFINITY : s / m->sigma2;
}

static double merit_fn(const gsl_vector *v, void *params)
{
    merit_ctx *m = params;
    if (m->st)
        return GSL_POSINF;
    double sep, pa, c;
    unpack(m, v, &sep, &pa, &c);
    if (!(sep > m->p->sp.mask_radius + m->p->fwhm / 2 &&
          sep < m->p->sp.outer_radius - m->p->fwhm / 2))
        return GSL_POSINF;
    gl_companion neg = {sep, pa, -c};
    gl_cube *img = NULL;
    m->p->nevals++;
    if ((m->st = vet_subtract(m->p, m->base, m->p->angles, m->p->refs, &m->p->sp, &neg, 1, &img)))
        return GSL_POSINF;
    const float *res = gl_cube_plane(img, 0, 0);
    if ((m->st = vet_level_make(m->p, res, m->sep0, m->ax, m->ay, m->p->merit_level))) {
        gl_cube_free(img);
        return GSL_POSINF;
    }
    double f = merit_of(m, res);
    gl_cube_free(img);
    return f;
}

gl_status vet_fit_run(vet_problem *p, const gl_cube *base, double sep0, double pa0, double c0,
                      double sigma2, int max_evals, vet_fit *out)
{
    gl_detect_gsl_quiet();
    merit_ctx m = {p, base, sep0, pa0, c0, 0, 0, sigma2 > 0 ? sigma2 : 1, GL_OK};
    vet_xy(p, sep0, pa0, &m.ax, &m.ay);
    gsl_multimin_fminimizer *s =
        gsl_multimin_fminimizer_alloc(gsl_multimin_fminimizer_nmsimplex2, 3);
    gsl_vector *x = gsl_vector_calloc(3), *step = gsl_vector_alloc(3);
    gl_status st = GL_OK;
    if (!s || !x || !step) {
        st = gl_error_nomem("fit minimiser");
        goto cleanup;
    }
    /* steps: half a pixel radially and along the arc, 10% in contrast (the
     * third coordinate counts fifths of the start contrast) */
    gsl_vector_set(step, 0, 0.5);
    gsl_vector_set(step, 1, 0.5);
    gsl_vector_set(step, 2, 0.5);
    gsl_multimin_function fn = {merit_fn, 3, &m};
    int start = p->nevals;
    double f0 = merit_fn(x, &m);
    if (m.st) {
        st = m.st;
        goto cleanup;
    }
    gsl_multimin_fminimizer_set(s, &fn, x, step);
    int status = GSL_CONTINUE;
    while (status == GSL_CONTINUE && p->nevals - start < max_evals) {
        if (gsl_multimin_fminimizer_iterate(s))
            break;
        if (m.st) {
            st = m.st;
            goto cleanup;
        }
        /* converged when the simplex is ~0.03 px and ~0.6% of the contrast:
         * well below the errors the injection-recovery finds */
        status = gsl_multimin_test_size(gsl_multimin_fminimizer_size(s), 0.03);
    }
    unpack(&m, s->x, &out->sep, &out->pa, &out->contrast);
    out->pa = fmod(fmod(out->pa, 360) + 360, 360);
    out->merit = s->fval;
    out->merit0 = f0;
    out->nevals = p->nevals - start;
    out->converged = status == GSL_SUCCESS;
cleanup:
    gsl_multimin_fminimizer_free(s);
    gsl_vector_free(x);
    gsl_vector_free(step);
    return st;
}
