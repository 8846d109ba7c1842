/*
 * errors.c -- uncertainties of the negative-companion fit by injection and
 * recovery: the candidate is removed (its fitted negative planted), fakes of
 * the fitted contrast are planted one at a time at the fitted separation and
 * other position angles, each is found (brightest pixel near the planted
 * place, as a detection would) and fitted exactly as the candidate was; the
 * rms of (recovered - planted) in separation, position angle and contrast is
 * the measurement error (common practice in negative-companion work, e.g.
 * Wertz et al. 2017, A&A 598, A83, sec. 3.3). It holds the speckle noise, the
 * self-subtraction and the fit's own bias at that separation; it assumes the
 * noise at other angles of the annulus is like the noise at the candidate.
 * The star-centring, north-offset and pixel-scale errors are added in
 * quadrature by the caller. The fakes are planets by construction: the
 * statistics of the tests are computed for each (vet_stats_run), and their
 * medians are what the tests expect of a planet.
 */
#include "core/internal.h"
#include "vet/internal.h"

#include <math.h>
#include <string.h>

gl_status vet_errors_run(vet_problem *p, const gl_vet_params *vp, const vet_fit *fit, double sigma2,
                         double throughput, gl_vet_result *r)
{
    gl_cube *clean = NULL, *with = NULL, *img = NULL;
    gl_status st = GL_OK;
    r->nfakes = 0;
    r->sep_err_fit = r->pa_err_fit = r->contrast_err_fit = NAN;
    /* fakes 2 FWHM apart and from the candidate */
    long nmax = (long)floor(2 * M_PI * fit->sep / (2 * p->fwhm)) - 1;
    long n = GL_MIN(GL_MIN((long)vp->error_fakes, nmax), VET_MAX_FAKES);
    p->nfake_stats = 0;
    /* too few fakes asked for is said once by the caller (cmd_vet.c); too
     * few that fit at this separation is said here */
    if (n < 2) {
        if (vp->error_fakes >= 2)
            gl_log(GL_LOG_WARN,
                   "vet: at %.1f px fewer than 2 fakes fit 2 FWHM apart; no measurement error",
                   fit->sep);
        return GL_OK;
    }
    if (n < GL_VET_MIN_ERROR_FAKES && n < vp->error_fakes)
        gl_log(GL_LOG_WARN,
               "vet: at %.1f px only %ld fakes fit 2 FWHM apart (%d asked): the errors are the "
               "rms of %ld recoveries, uncertain by about %.0f%% themselves",
               fit->sep, n, vp->error_fakes, n, 100 / sqrt(2.0 * (double)n));
    if ((st = gl_cube_new(p->nx, p->ny, p->nchan, p->nframe, &clean)) ||
        (st = gl_cube_new(p->nx, p->ny, p->nchan, p->nframe, &with)))
        goto cleanup;
    memcpy(clean->data, p->crop->data, gl_cube_size(clean) * sizeof *clean->data);
    gl_companion neg = {fit->sep, fit->pa, -fit->contrast};
    if ((st = gl_inject_companions(clean, p->angles, p->sp.north_offset, p->psf, &neg, 1, NULL)))
        goto cleanup;
    double s_sep = 0, s_pa = 0, s_c = 0;
    for (long k = 1; k <= n; k++) {
        gl_companion fake = {fit->sep, fmod(fit->pa + 360.0 * (double)k / (double)(n + 1), 360),
                             fit->contrast};
        memcpy(with->data, clean->data, gl_cube_size(clean) * sizeof *clean->data);
        if ((st = gl_inject_companions(with, p->angles, p->sp.north_offset, p->psf, &fake, 1,
                                       NULL)) ||
            (st = vet_subtract(p, with, p->angles, p->refs, &p->sp, NULL, 0, &img)))
            goto cleanup;
        double tx, ty, x, y, sep0, pa0;
        vet_xy(p, fake.sep_px, fake.pa_deg, &tx, &ty);
        const float *im = gl_cube_plane(img, 0, 0);
        vet_peak(p, im, tx, ty, &x, &y);
        vet_seppa(p, x, y, &sep0, &pa0);
        double f = vet_flux(p, im, x, y);
        double c0 = f / (throughput * p->psf_apflux);
        if (!(c0 > 0))
            c0 = fit->contrast;
        gl_cube_free(img);
        img = NULL;
        vet_fit rec;
        if ((st = vet_fit_run(p, with, sep0, pa0, c0, sigma2, vp->max_evals, &rec)))
            goto cleanup;
        double rx, ry;
        vet_xy(p, rec.sep, rec.pa, &rx, &ry);
        if ((st = vet_stats_run(p, with, rx, ry, &p->fake_stats[p->nfake_stats])))
            goto cleanup;
        p->nfake_stats++;
        double dpa = fmod(rec.pa - fake.pa_deg + 540, 360) - 180;
        s_sep += (rec.sep - fake.sep_px) * (rec.sep - fake.sep_px);
        s_pa += dpa * dpa;
        s_c += (rec.contrast - fake.contrast) * (rec.contrast - fake.contrast);
        gl_log(GL_LOG_DEBUG,
               "vet: fake at %.1f deg started %+.3f px, %+.3f deg, %+.1f%%, recovered %+.3f px, "
               "%+.3f deg, %+.1f%%",
               fake.pa_deg, sep0 - fake.sep_px, fmod(pa0 - fake.pa_deg + 540, 360) - 180,
               100 * (c0 - fake.contrast) / fake.contrast, rec.sep - fake.sep_px, dpa,
               100 * (rec.contrast - fake.contrast) / fake.contrast);
        gl_progress("vet errors", k, n);
    }
    r->nfakes = (int)n;
    r->sep_err_fit = sqrt(s_sep / (double)n);
    r->pa_err_fit = sqrt(s_pa / (double)n);
    r->contrast_err_fit = sqrt(s_c / (double)n);
cleanup:
    gl_cube_free(img);
    gl_cube_free(clean);
    gl_cube_free(with);
    return st;
}
