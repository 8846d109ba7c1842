/*
 * curve.c -- contrast curves: noise per separation from the apertures of the
 * annulus, small-sample thresholds (Mawet et al. 2014, ApJ 792, 97),
 * completeness (Jensen-Clem et al. 2018, AJ 155, 19), and throughput
 * measured by planting fake companions and running the user's own
 * subtraction again.
 *
 * Throughput: the fakes are planted in `fake_runs` separate runs, one fake
 * per FWHM of separation, consecutive separations going to different runs
 * (so within a run fakes are `fake_runs` FWHM apart radially) and turning by
 * the golden angle in position angle, the runs spread evenly in angle.
 * What survives is the aperture sum in (run with fakes) - (run without), so
 * the noise of the image itself cancels and only the fakes' own processing
 * remains; divided by contrast x PSF aperture flux it is the throughput at
 * that separation. Fakes are planted at `fake_level` times the local aperture
 * noise (common practice: bright enough to measure, faint enough not to
 * drive the KL modes).
 */
#include "core/internal.h"
#include "gloam/detect.h"
#include "gloam/limits.h"

#include <math.h>
#include <string.h>

void gl_limits_params_init(gl_limits_params *p)
{
    memset(p, 0, sizeof *p);
    p->sigma = 5;
    p->completeness = 0.95;
    p->fake_runs = 2;
    p->fake_level = 10;
}

void gl_limits_result_free(gl_limits_result *r)
{
    if (!r)
        return;
    double *arrays[] = {r->sep_px,       r->napertures, r->dof,
                        r->noise,        r->mean,       r->t_threshold,
                        r->throughput,   r->contrast,   r->completeness_of_contrast,
                        r->contrast_c50, r->contrast_cq};
    for (size_t i = 0; i < sizeof arrays / sizeof arrays[0]; i++)
        gl_free(arrays[i]);
    gl_free(r->fakes);
    gl_cube_free(r->image);
    memset(r, 0, sizeof *r);
}

/* Aperture noise at separation sep in one plane: std and mean of the sums of
 * the non-overlapping apertures (those touching NaN or the edge left out). */
static void ring_noise(const gl_aperture_plan *ap, const float *img, long nx, long ny, double sep,
                       double diam, double *work, double *xs, double *ys, double *sums,
                       long *nvalid, double *stddev, double *mean)
{
    long n = gl_detect_ring_count(sep, diam), m = 0;
    gl_detect_ring_positions((double)(nx / 2), (double)(ny / 2), sep, 0.0, n, xs, ys);
    for (long k = 0; k < n; k++) {
        double s;
        if (gl_detect_aperture_sum(ap, img, nx, ny, xs[k], ys[k], work, &s, NULL))
            sums[m++] = s;
    }
    *nvalid = m;
    *stddev = *mean = NAN;
    if (m < 3)
        return;
    double mu = 0, ss = 0;
    for (long k = 0; k < m; k++)
        mu += sums[k];
    mu /= (double)m;
    for (long k = 0; k < m; k++)
        ss += (sums[k] - mu) * (sums[k] - mu);
    *mean = mu;
    *stddev = sqrt(ss / (double)(m - 1));
}

/* Linear interpolation of y(x) at xq from nk sorted points; held constant
 * beyond the ends; NaN without points. */
static double interp(const double *x, const double *y, long nk, double xq)
{
    if (nk == 0)
        return NAN;
    if (xq <= x[0])
        return y[0];
    if (xq >= x[nk - 1])
        return y[nk - 1];
    long k = 1;
    while (x[k] < xq)
        k++;
    double f = (xq - x[k - 1]) / (x[k] - x[k - 1]);
    return y[k - 1] + f * (y[k] - y[k - 1]);
}

gl_status gl_limits_compute(const gl_cube *cube, const double *angles, const gl_cube *refs,
                            const gl_subtract_params *sp, const gl_psf_model *psf,
                            const gl_limits_params *lp, gl_limits_result *out)
{
    gl_limits_result r = {0};
    gl_subtract_result base = {0}, run = {0};
    gl_subtract_params sp1 = *sp;
    gl_aperture_plan *ap = NULL;
    gl_cube *work_cube = NULL;
    gl_companion *comps = NULL;
    double *work = NULL, *xs = NULL, *ys = NULL, *sums = NULL, *fr = NULL, *ft = NULL;
    gl_status st = GL_OK;
    memset(out, 0, sizeof *out);

    long nx = cube->nx, ny = cube->ny;
    double fwhm = sp->fwhm, diam = fwhm, cx = (double)(nx / 2), cy = (double)(ny / 2);
    if (!(lp->sigma > 0) || !(lp->completeness > 0 && lp->completeness < 1) || lp->fake_runs < 1 ||
        lp->fake_runs > 64 || !(lp->fake_level > 0) || lp->step_px < 0)
        return gl_error_set(GL_ERR_USAGE, "limits: threshold, completeness (0-1), fake runs "
                                          "(1-64), fake level (> 0) or step out of range");
    if (!(fwhm > 0))
        return gl_error_set(GL_ERR_USAGE, "--fwhm must be positive");
    sp1.keep_residuals = sp1.keep_raw_residuals = 0;

    /* separations */
    double step = lp->step_px > 0 ? lp->step_px : fwhm / 2;
    /* the subtraction's inner radius (chosen from the field rotation when asked) */
    double mask =
        gl_subtract_inner_radius(sp, angles, cube->nframe, refs ? refs->nframe : 0, nx, ny);
    double r0 = lp->r_min_px > 0 ? lp->r_min_px : GL_MAX(fwhm, mask + fwhm / 2);
    double edge = 0.5 * (double)GL_MIN(nx, ny) - diam / 2 - 1;
    if (sp->outer_radius > 0)
        edge = GL_MIN(edge, sp->outer_radius - diam / 2);
    double r1 = lp->r_max_px > 0 ? lp->r_max_px : edge;
    if (r1 > edge + 1e-9)
        return gl_error_set(GL_ERR_USAGE,
                            "--max-separation %g px: apertures of %g px reach beyond the %ldx%ld "
                            "frame (or the outer radius) past %.1f px",
                            r1, diam, nx, ny, edge);
    if (r0 > r1)
        return gl_error_set(GL_ERR_USAGE,
                            "no separation fits between %.1f px (%s) and %.1f px (%s)", r0,
                            lp->r_min_px > 0 ? "--min-separation" : "mask + FWHM/2, the first", r1,
                            lp->r_max_px > 0 ? "--max-separation" : "frame edge, the last");
    long n = (long)floor((r1 - r0) / step + 1e-9) + 1;

    if ((st = gl_detect_aperture_plan_new(diam / 2, &ap)))
        goto cleanup;
    long nmax = gl_detect_ring_count(r1, diam) + 1;
    work = gl_malloc(gl_detect_aperture_worksize(ap) * sizeof *work);
    xs = gl_malloc((size_t)nmax * sizeof *xs);
    ys = gl_malloc((size_t)nmax * sizeof *ys);
    sums = gl_malloc((size_t)nmax * sizeof *sums);
    if (!work || !xs || !ys || !sums) {
        st = gl_error_nomem("limits work space");
        goto cleanup;
    }

    /* PSF aperture flux: mean over channels, as the subtraction averages them */
    double F = 0;
    for (long c = 0; c < psf->nchan; c++) {
        double s = NAN;
        gl_detect_aperture_sum(ap, psf->images + (size_t)c * (size_t)nx * (size_t)ny, nx, ny, cx,
                               cy, work, &s, NULL);
        F += s / (double)psf->nchan;
    }
    if (!(F > 0)) {
        st = gl_error_set(GL_ERR_INPUT, "the PSF has no flux in a 1-FWHM aperture at its centre");
        goto cleanup;
    }

    /* the subtraction as the user asked for it */
    gl_progress("limits", 0, 1 + lp->fake_runs);
    if ((st = gl_subtract_run(cube, angles, refs, &sp1, &base)))
        goto cleanup;
    int np = (int)base.image->nframe;
    r.nplanes = np;
    for (int k = 0; k < np; k++)
        r.modes[k] =
            (sp->method == GL_SUBTRACT_PCA || sp->method == GL_SUBTRACT_ANNULAR) ? sp->modes[k] : 0;
    r.n = n;
    r.psf_aperture_flux = F;
    r.fpf = gl_detect_fpf_from_sigma(lp->sigma);
    size_t nn = (size_t)n * (size_t)np;
    r.sep_px = gl_calloc((size_t)n, sizeof(double));
    double **per_plane[] = {
        &r.napertures,   &r.dof,        &r.noise,    &r.mean,
        &r.t_threshold,  &r.throughput, &r.contrast, &r.completeness_of_contrast,
        &r.contrast_c50, &r.contrast_cq};
    int ok = r.sep_px != NULL;
    for (size_t i = 0; i < sizeof per_plane / sizeof per_plane[0]; i++)
        ok &= (*per_plane[i] = gl_calloc(nn, sizeof(double))) != NULL;
    if (!ok) {
        st = gl_error_nomem("limits curves");
        goto cleanup;
    }

    /* noise and thresholds */
    for (long i = 0; i < n; i++)
        r.sep_px[i] = r0 + step * (double)i;
    for (int k = 0; k < np; k++) {
        const float *img = gl_cube_plane(base.image, 0, k);
        for (long i = 0; i < n; i++) {
            size_t j = (size_t)k * (size_t)n + (size_t)i;
            long m;
            ring_noise(ap, img, nx, ny, r.sep_px[i], diam, work, xs, ys, sums, &m, &r.noise[j],
                       &r.mean[j]);
            long n2 = m - 1 - (lp->exclude_adjacent ? 2 : 0);
            r.napertures[j] = (double)m;
            r.dof[j] = n2 >= 2 ? (double)(n2 - 1) : NAN;
            r.t_threshold[j] = n2 >= 2 ? gl_detect_t_threshold(lp->sigma, n2 - 1) : NAN;
        }
    }

    {
        long noisy = 0;
        for (long i = 0; i < n; i++)
            noisy += r.noise[i] > 0;
        if (noisy == 0) {
            st = gl_error_set(GL_ERR_INPUT,
                              "the subtracted image has no noise at any separation (a constant "
                              "or empty cube?): no limit can be set");
            goto cleanup;
        }
    }

    /* fakes: one per FWHM of separation, consecutive ones in different
     * runs, golden-angle steps in position angle */
    long nf = (long)floor((r1 - r0) / fwhm + 1e-9) + 1;
    r.fakes = gl_calloc((size_t)nf, sizeof *r.fakes);
    comps = gl_calloc((size_t)nf, sizeof *comps);
    fr = gl_malloc((size_t)nf * sizeof *fr);
    ft = gl_malloc((size_t)nf * sizeof *ft);
    if (!r.fakes || !comps || !fr || !ft) {
        st = gl_error_nomem("fake companions");
        goto cleanup;
    }
    for (long j = 0; j < nf; j++) {
        gl_limits_fake *f = &r.fakes[r.nfakes];
        f->sep_px = r0 + fwhm * (double)j;
        f->run = (int)(j % lp->fake_runs);
        f->pa_deg =
            fmod(lp->pa0_deg + 360.0 * f->run / lp->fake_runs + 137.50776 * (double)j, 360.0);
        /* keep clear of known sources: turn by 30 degree steps */
        for (int turn = 0; turn < 12; turn++) {
            int clear = 1;
            for (int a = 0; a < lp->navoid; a++) {
                double d = 2 * sin(0.5 * (f->pa_deg - lp->avoid_pa_deg[a]) * M_PI / 180);
                double dx = f->sep_px - lp->avoid_sep_px[a];
                /* distance between the two points at (sep, pa) */
                double dist2 = dx * dx + f->sep_px * lp->avoid_sep_px[a] * d * d;
                clear &= dist2 > 4 * fwhm * fwhm;
            }
            if (clear)
                break;
            f->pa_deg = fmod(f->pa_deg + 30.0, 360.0);
        }
        /* brightness from the first plane's noise at that separation */
        double sig = interp(r.sep_px, r.noise, n, f->sep_px);
        if (!(sig > 0))
            continue;
        f->contrast = lp->fake_level * sig / F;
        r.nfakes++;
    }
    for (int b = 0; b < lp->fake_runs; b++) {
        int nc = 0;
        for (int j = 0; j < r.nfakes; j++)
            if (r.fakes[j].run == b)
                comps[nc++] =
                    (gl_companion){r.fakes[j].sep_px, r.fakes[j].pa_deg, r.fakes[j].contrast};
        if (nc == 0)
            continue;
        gl_cube_free(work_cube);
        work_cube = NULL;
        if ((st = gl_cube_new(nx, ny, cube->nchan, cube->nframe, &work_cube)))
            goto cleanup;
        memcpy(work_cube->data, cube->data, gl_cube_size(cube) * sizeof(float));
        work_cube->naxis = cube->naxis;
        if ((st = gl_inject_companions(work_cube, angles, sp->north_offset, psf, comps, nc, NULL)))
            goto cleanup;
        gl_subtract_result_free(&run);
        if ((st = gl_subtract_run(work_cube, angles, refs, &sp1, &run)))
            goto cleanup;
        for (int j = 0; j < r.nfakes; j++) {
            gl_limits_fake *f = &r.fakes[j];
            if (f->run != b)
                continue;
            double t = f->pa_deg * M_PI / 180;
            double x = cx - f->sep_px * sin(t), y = cy + f->sep_px * cos(t);
            for (int k = 0; k < np; k++) {
                double s1, s0;
                int ok1 = gl_detect_aperture_sum(ap, gl_cube_plane(run.image, 0, k), nx, ny, x, y,
                                                 work, &s1, NULL);
                int ok0 = gl_detect_aperture_sum(ap, gl_cube_plane(base.image, 0, k), nx, ny, x, y,
                                                 work, &s0, NULL);
                f->throughput[k] = ok1 && ok0 ? (s1 - s0) / (f->contrast * F) : NAN;
            }
        }
        gl_progress("limits", 2 + b, 1 + lp->fake_runs);
    }

    /* throughput on the grid, and the contrasts */
    for (int k = 0; k < np; k++) {
        long nk = 0;
        for (int j = 0; j < r.nfakes; j++) /* fakes are in increasing separation */
            if (isfinite(r.fakes[j].throughput[k])) {
                fr[nk] = r.fakes[j].sep_px;
                ft[nk] = r.fakes[j].throughput[k];
                nk++;
            }
        for (long i = 0; i < n; i++) {
            size_t j = (size_t)k * (size_t)n + (size_t)i;
            double T = interp(fr, ft, nk, r.sep_px[i]);
            r.throughput[j] = T;
            double n2 = r.dof[j] + 1, sig = r.noise[j], t = r.t_threshold[j];
            r.contrast[j] = r.contrast_c50[j] = r.contrast_cq[j] = NAN;
            r.completeness_of_contrast[j] = NAN;
            /* a throughput below 1% leaves nothing to calibrate */
            if (!(T > 0.01) || !isfinite(sig) || !isfinite(t))
                continue;
            double scale = sig * sqrt(1 + 1 / n2) / (T * F), d50, dq;
            r.contrast[j] = t * scale;
            r.completeness_of_contrast[j] = gl_limits_completeness(t, t, r.dof[j]);
            if (gl_limits_delta_for_completeness(0.5, t, r.dof[j], &d50) == GL_OK)
                r.contrast_c50[j] = d50 * scale;
            if (gl_limits_delta_for_completeness(lp->completeness, t, r.dof[j], &dq) == GL_OK)
                r.contrast_cq[j] = dq * scale;
        }
    }
    gl_progress("limits", 1 + lp->fake_runs, 1 + lp->fake_runs);
    long usable = 0, low = 0;
    for (long i = 0; i < n; i++) {
        usable += isfinite(r.contrast_c50[i]);
        low += isfinite(r.noise[i]) && !(r.throughput[i] > 0.01);
    }
    if (usable == 0) {
        st = gl_error_set(GL_ERR_USAGE,
                          "no separation kept a measurable throughput (above 1%%): the fakes "
                          "(%g x the local noise) were removed by the subtraction; lower "
                          "--fake-level or use fewer modes",
                          lp->fake_level);
        goto cleanup;
    }
    if (low > 0)
        gl_log(GL_LOG_WARN,
               "%ld of %ld separations have a throughput below 1%% and no contrast (plane 1)", low,
               n);
    r.image = base.image;
    r.fwhm = fwhm;
    base.image = NULL;
    *out = r;
    memset(&r, 0, sizeof r);

cleanup:
    gl_limits_result_free(&r);
    gl_subtract_result_free(&base);
    gl_subtract_result_free(&run);
    gl_detect_aperture_plan_free(ap);
    gl_cube_free(work_cube);
    gl_free(comps);
    gl_free(work);
    gl_free(xs);
    gl_free(ys);
    gl_free(sums);
    gl_free(fr);
    gl_free(ft);
    return st;
}

gl_status gl_limits_photometry_at(const gl_limits_result *r, int plane, double sep_px,
                                  double pa_deg, gl_limits_photometry *out)
{
    memset(out, 0, sizeof *out);
    if (plane < 0 || plane >= r->nplanes || !r->image)
        return gl_error_set(GL_ERR_USAGE, "plane %d: the curves have %d", plane + 1, r->nplanes);
    if (!(sep_px >= r->sep_px[0] && sep_px <= r->sep_px[r->n - 1]))
        return gl_error_set(GL_ERR_USAGE,
                            "separation %.2f px is outside the curve (%.2f to %.2f px)", sep_px,
                            r->sep_px[0], r->sep_px[r->n - 1]);
    long nx = r->image->nx, ny = r->image->ny;
    const double *noise = r->noise + (size_t)plane * (size_t)r->n;
    const double *thr = r->throughput + (size_t)plane * (size_t)r->n;
    gl_aperture_plan *ap = NULL;
    gl_status st = gl_detect_aperture_plan_new(r->fwhm / 2, &ap);
    if (st)
        return st;
    double *work = gl_malloc(gl_detect_aperture_worksize(ap) * sizeof *work);
    if (!work) {
        gl_detect_aperture_plan_free(ap);
        return gl_error_nomem("photometry");
    }
    double t = pa_deg * M_PI / 180, flux;
    double x = (double)(nx / 2) - sep_px * sin(t), y = (double)(ny / 2) + sep_px * cos(t);
    if (!gl_detect_aperture_sum(ap, gl_cube_plane(r->image, 0, plane), nx, ny, x, y, work, &flux,
                                NULL))
        st = gl_error_set(GL_ERR_USAGE,
                          "separation %.2f px, PA %.2f deg: the aperture touches the edge or "
                          "missing data",
                          sep_px, pa_deg);
    if (!st) {
        out->flux = flux;
        out->noise = interp(r->sep_px, noise, r->n, sep_px);
        out->throughput = interp(r->sep_px, thr, r->n, sep_px);
        double denom = out->throughput * r->psf_aperture_flux;
        out->contrast = denom > 0 ? flux / denom : NAN;
        out->contrast_err = denom > 0 ? out->noise / denom : NAN;
    }
    gl_free(work);
    gl_detect_aperture_plan_free(ap);
    return st;
}
