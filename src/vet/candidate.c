/*
 * candidate.c -- gl_vet_candidate: the order of the work for one candidate
 * (crop, start, negative-companion fit, forward model, injection-recovery
 * errors, tests, epochs) and the combination of the error terms:
 *   sep_err^2 = fit^2 + centring^2,
 *   pa_err^2  = fit^2 + (centring / sep)^2 + north^2,
 *   sep_mas error^2 = (sep_err scale)^2 + (sep scale_err)^2,
 * RA/Dec offsets by the usual first-order propagation of (sep, PA), and the
 * magnitude difference dmag = -2.5 log10(contrast) with 2.5 / ln 10 times the
 * relative contrast error. The PSF's own photometric calibration (the
 * --psf-scale) carries no error here.
 */
#include "core/internal.h"
#include "vet/internal.h"

#include <gsl/gsl_cdf.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

#define DEG (M_PI / 180)

void gl_vet_params_init(gl_vet_params *p)
{
    memset(p, 0, sizeof *p);
    p->merit_radius_fwhm = 1;
    p->ring_half_fwhm = 2.5;
    p->error_fakes = 6;
    p->max_evals = 120;
    p->threshold_sigma = 5;
    p->pixscale_mas = NAN;
    p->mjd_obs = NAN;
    p->seed = 1;
}

void gl_vet_result_free(gl_vet_result *r)
{
    if (!r)
        return;
    gl_free(r->stamp_data);
    gl_free(r->stamp_model);
    gl_free(r->stamp_resid);
    r->stamp_data = r->stamp_model = r->stamp_resid = NULL;
}

gl_status gl_vet_check_position(long nx, long ny, const gl_subtract_params *sp,
                                const gl_vet_params *vp, double sep, double pa)
{
    (void)vp;
    double fwhm = sp->fwhm;
    double edge = 0.5 * (double)GL_MIN(nx, ny) - 1;
    if (sp->outer_radius > 0)
        edge = GL_MIN(edge, sp->outer_radius);
    if (!isfinite(sep) || !isfinite(pa) || sep <= 0)
        return gl_error_set(GL_ERR_USAGE, "candidate with no valid separation or position angle");
    if (sep + fwhm > edge)
        return gl_error_set(GL_ERR_USAGE,
                            "candidate at %.2f px, %.1f deg is outside the field (the %ldx%ld "
                            "frame%s leaves room to %.1f px)",
                            sep, pa, nx, ny, sp->outer_radius > 0 ? " and outer radius" : "",
                            edge - fwhm);
    if (sep < sp->mask_radius + fwhm)
        return gl_error_set(GL_ERR_USAGE,
                            "candidate at %.2f px, %.1f deg is in the masked zone (mask radius "
                            "%.1f px + 1 FWHM)",
                            sep, pa, sp->mask_radius);
    if (sep < 1.5 * fwhm)
        return gl_error_set(GL_ERR_USAGE,
                            "candidate at %.2f px, %.1f deg: closer than 1.5 FWHM to the star, no "
                            "ring of reference apertures",
                            sep, pa);
    return GL_OK;
}

static void combine_errors(const gl_vet_params *vp, double centre_px, gl_vet_result *r)
{
    double sep = r->sep_px;
    r->sep_err = hypot(r->sep_err_fit, centre_px);
    double pc = centre_px / sep / DEG;
    r->pa_err =
        sqrt(r->pa_err_fit * r->pa_err_fit + pc * pc + vp->north_err_deg * vp->north_err_deg);
    r->contrast_err = r->contrast_err_fit;
    r->dmag = -2.5 * log10(r->contrast);
    r->dmag_err = 2.5 / log(10.0) * r->contrast_err / r->contrast;
    double s = vp->pixscale_mas;
    r->sep_mas = r->sep_err_mas = r->dra_mas = r->dra_err_mas = r->ddec_mas = r->ddec_err_mas = NAN;
    if (s > 0) {
        double sa = sin(r->pa_deg * DEG), ca = cos(r->pa_deg * DEG), pe = r->pa_err * DEG;
        r->sep_mas = sep * s;
        r->sep_err_mas = hypot(r->sep_err * s, sep * vp->pixscale_err_mas);
        r->dra_mas = r->sep_mas * sa;
        r->ddec_mas = r->sep_mas * ca;
        r->dra_err_mas = hypot(sa * r->sep_err_mas, r->sep_mas * ca * pe);
        r->ddec_err_mas = hypot(ca * r->sep_err_mas, r->sep_mas * sa * pe);
    }
}

gl_status vet_stamps(const vet_problem *p, const float *img, const float *model, const float *resid,
                     double x, double y, gl_vet_result *r)
{
    long n = 2 * (long)ceil(2.5 * p->fwhm) + 1, ci = lround(x), cj = lround(y);
    size_t nn = (size_t)(n * n);
    r->stamp_n = n;
    r->stamp_scale = 1;
    r->stamp_data = gl_malloc(nn * sizeof(float));
    r->stamp_model = gl_malloc(nn * sizeof(float));
    r->stamp_resid = gl_malloc(nn * sizeof(float));
    if (!r->stamp_data || !r->stamp_model || !r->stamp_resid)
        return gl_error_nomem("vet stamps");
    for (long j = 0; j < n; j++)
        for (long i = 0; i < n; i++) {
            long a = ci - n / 2 + i, b = cj - n / 2 + j;
            int in = a >= 0 && b >= 0 && a < p->nx && b < p->ny;
            size_t k = (size_t)(j * n + i), q = in ? (size_t)(b * p->nx + a) : 0;
            r->stamp_data[k] = in ? img[q] : NAN;
            r->stamp_model[k] = in ? model[q] : NAN;
            r->stamp_resid[k] = in ? resid[q] : NAN;
        }
    return GL_OK;
}

gl_status gl_vet_candidate(const gl_cube *cube, const double *angles, const gl_cube *refs,
                           const gl_subtract_params *sp, const gl_psf_model *psf,
                           const gl_vet_params *vp, double sep0, double pa0,
                           const gl_vet_star *star, const gl_vet_epochs *epochs, gl_vet_result *out)
{
    vet_problem *p = NULL;
    gl_cube *img = NULL, *resid = NULL;
    float *model = NULL;
    gl_status st;
    memset(out, 0, sizeof *out);
    out->given_sep = sep0;
    out->given_pa = pa0;
    if (!(vp->merit_radius_fwhm > 0.2 && vp->merit_radius_fwhm <= 3) ||
        !(vp->ring_half_fwhm >= 1.5 && vp->ring_half_fwhm <= 10) || vp->error_fakes < 0 ||
        vp->error_fakes > 64 || vp->max_evals < 10 || !(vp->threshold_sigma > 0) ||
        !(vp->centre_err_px >= 0) || !(vp->north_err_deg >= 0) || !(vp->pixscale_err_mas >= 0))
        return gl_error_set(GL_ERR_USAGE, "vet: a parameter is out of range (merit radius "
                                          "0.2-3 FWHM, ring half-width 1.5-10 FWHM, 0-64 fakes, "
                                          ">= 10 evaluations, errors >= 0)");
    if ((st = gl_vet_check_position(cube->nx, cube->ny, sp, vp, sep0, pa0)) ||
        (st = vet_problem_new(cube, angles, refs, sp, psf, vp, sep0, &p)))
        goto cleanup;

    /* the start: the peak detect's position sits on (found as the
     * fakes of the error estimate are), throughput-corrected aperture flux */
    double x0, y0, tx, ty;
    vet_xy(p, sep0, pa0, &tx, &ty);
    if ((st = vet_subtract(p, p->crop, angles, p->refs, &p->sp, NULL, 0, &img)))
        goto cleanup;
    const float *im = gl_cube_plane(img, 0, 0);
    vet_peak(p, im, tx, ty, &x0, &y0);
    vet_seppa(p, x0, y0, &sep0, &pa0);
    if ((st = vet_level_make(p, im, sep0, x0, y0, p->level)))
        goto cleanup;
    double f0 = vet_flux(p, im, x0, y0);
    if (!(f0 > 0)) {
        st = gl_error_set(GL_ERR_INPUT,
                          "candidate at %.2f px, %.1f deg: no positive flux there in the "
                          "subtracted image",
                          sep0, pa0);
        goto cleanup;
    }
    double sigma = vet_pixel_sigma(p, im, sep0, x0, y0);
    if (!(sigma > 0)) {
        st = gl_error_set(GL_ERR_INPUT,
                          "candidate at %.2f px, %.1f deg: no noise measurable in its annulus",
                          sep0, pa0);
        goto cleanup;
    }
    if ((st = vet_throughput(p, p->crop, im, sep0, pa0, f0, &out->throughput)))
        goto cleanup;
    out->start_sep = sep0;
    out->start_pa = pa0;
    if ((st = gl_vet_check_position(cube->nx, cube->ny, sp, vp, sep0, pa0))) {
        char why[512];
        snprintf(why, sizeof why, "%s", gl_error_message());
        st = gl_error_set(st,
                          "the start of the fit, the peak within 1 FWHM of the "
                          "table's %.2f px, %.1f deg, is not usable: %s",
                          out->given_sep, out->given_pa, why);
        goto cleanup;
    }
    out->start_contrast = f0 / (out->throughput * p->psf_apflux);

    /* the fit */
    vet_fit fit;
    if ((st = vet_fit_run(p, p->crop, sep0, pa0, out->start_contrast, sigma * sigma, vp->max_evals,
                          &fit)))
        goto cleanup;
    if (!(fit.contrast > 0)) {
        st = gl_error_set(GL_ERR_INPUT,
                          "candidate at %.2f px, %.1f deg: the negative-companion fit ends at a "
                          "non-positive contrast (no point source there)",
                          sep0, pa0);
        goto cleanup;
    }
    out->sep_px = fit.sep;
    out->pa_deg = fit.pa;
    out->contrast = fit.contrast;
    out->merit = fit.merit;
    out->merit_start = fit.merit0;
    out->nevals = fit.nevals;
    out->converged = fit.converged;
    out->merit_radius_px = p->merit_r;
    gl_progress("vet fit", 1, 1);

    /* forward model: the subtraction with the source minus without it */
    gl_companion neg = {fit.sep, fit.pa, -fit.contrast};
    if ((st = vet_subtract(p, p->crop, angles, p->refs, &p->sp, &neg, 1, &resid)))
        goto cleanup;
    size_t npix = (size_t)(p->nx * p->ny);
    if (!(model = gl_malloc(npix * sizeof *model))) {
        st = gl_error_nomem("vet model");
        goto cleanup;
    }
    const float *rs = gl_cube_plane(resid, 0, 0);
    for (size_t k = 0; k < npix; k++)
        model[k] = im[k] - rs[k];
    double x, y;
    vet_xy(p, fit.sep, fit.pa, &x, &y);
    out->snr = vet_snr(p, im, x, y);
    vet_stats data;
    if ((st = vet_plan_make(p, vp, fit.sep)) || (st = vet_stats_run(p, p->crop, x, y, &data)))
        goto cleanup;

    if ((st = vet_errors_run(p, vp, &fit, sigma * sigma, out->throughput, out)))
        goto cleanup;
    double centre = vp->centre_err_px;
    combine_errors(vp, centre, out);
    if ((st = vet_tests_run(p, vp, sp, &data, im, model, rs, out)))
        goto cleanup;
    if ((st = vet_epochs_test(star, epochs, vp->mjd_obs, out)))
        goto cleanup;
    for (int k = 0; k < GL_VET_NTESTS; k++) {
        out->npossible += out->tests[k].possible;
        out->npassed += out->tests[k].possible && out->tests[k].passed;
    }
    st = vet_stamps(p, im, model, rs, x, y, out);
cleanup:
    if (st)
        gl_vet_result_free(out);
    gl_free(model);
    gl_cube_free(img);
    gl_cube_free(resid);
    vet_problem_free(p);
    return st;
}
