/*
 * curve.c -- contrast curves: noise per separation from the apertures of the
 * annulus, small-sample thresholds (Mawet et al. 2014, ApJ 792, 97), and
 * fake companions planted in extra runs of the user's own subtraction, whose
 * measured responses calibrate the completeness (Jensen-Clem et al. 2018,
 * AJ 155, 19; calibrate.c).
 *
 * Noise: the sample std of the non-overlapping 1-FWHM aperture sums at each
 * separation, apertures closer than 1 FWHM to a known source (--candidates)
 * left out so that a real companion does not inflate it.
 *
 * Fakes: within one run the fakes are 2 FWHM apart in separation (their rings
 * do not share apertures); the `fake_runs` runs are offset by 2 FWHM / runs,
 * so the fakes together sample the separations every 2 FWHM / runs, and turn
 * by the golden angle in position angle, so the fakes near any separation sit
 * at different angles. Each fake is measured on the difference image (run
 * with fakes - run without), so the noise of the image cancels and only what
 * the subtraction did to the fake remains, over the whole ring of the
 * detection test at the fake: its test aperture (the throughput), the mean
 * and the spread of its response in the references (the self-subtraction
 * lobes), and, on the run image itself, the detection S/N a user would get.
 * Fakes are planted, by default, at the flux that throughput 1 would detect
 * half of the time, at least 10 x the local aperture noise (common practice
 * is a fixed 5-10 x: bright enough to measure, faint enough not to drive the
 * KL modes), and from the second run on at the 95% contrast the earlier runs
 * give, so that the fakes bracket the fluxes the curve needs.
 *
 * Where the subtraction fits coefficients over the whole frame (klip-frame,
 * the spectral step), a fake moves the coefficients of every frame and so
 * over- or under-subtracts every other fake of its subtraction, in
 * proportion to its flux; the fakes close in are 100x brighter than those
 * far out. There each run is planted in batches by brightness, one
 * subtraction each (plan_batches; docs/limits.md gives the measured effect
 * and cost). Pixel-local and ring-by-ring methods keep one per run.
 */
#include "core/internal.h"
#include "gloam/detect.h"
#include "limits/internal.h"
#include "subtract/memo.h"

#include <gsl/gsl_errno.h>
#include <math.h>
#include <string.h>

void gl_limits_params_init(gl_limits_params *p)
{
    memset(p, 0, sizeof *p);
    p->sigma = 5;
    p->completeness = 0.95;
    p->fake_runs = 2;
    p->fake_level = 0;
}

void gl_limits_result_free(gl_limits_result *r)
{
    if (!r)
        return;
    double *arrays[] = {r->sep_px,       r->napertures, r->dof,
                        r->noise,        r->mean,       r->t_threshold,
                        r->throughput,   r->signal,     r->throughput_scatter,
                        r->fakes_used,   r->contrast,   r->completeness_of_contrast,
                        r->contrast_c50, r->contrast_cq};
    for (size_t i = 0; i < sizeof arrays / sizeof arrays[0]; i++)
        gl_free(arrays[i]);
    gl_free(r->fakes);
    gl_cube_free(r->image);
    memset(r, 0, sizeof *r);
}

/* North-up image position of (sep, pa) (docs/conventions.md). */
static void sky_xy(double cx, double cy, double sep, double pa_deg, double *x, double *y)
{
    double t = pa_deg * M_PI / 180;
    *x = cx - sep * sin(t);
    *y = cy + sep * cos(t);
}

/* Aperture noise at separation sep in one plane: std and mean of the sums of
 * the non-overlapping apertures (those touching NaN or the edge left out, and
 * those closer than 1 FWHM to a known source). *nvalid counts the apertures
 * on valid data (the ring of the detection test), *nused those in the noise. */
static void ring_noise(const gl_aperture_plan *ap, const float *img, long nx, long ny, double sep,
                       double diam, const gl_limits_params *lp, double *work, double *xs,
                       double *ys, double *sums, long *nvalid, long *nused, double *stddev,
                       double *mean)
{
    long n = gl_detect_ring_count(sep, diam), m = 0, v = 0;
    double cx = (double)(nx / 2), cy = (double)(ny / 2);
    gl_detect_ring_positions(cx, cy, sep, 0.0, n, xs, ys);
    for (long k = 0; k < n; k++) {
        double s;
        if (!gl_detect_aperture_sum(ap, img, nx, ny, xs[k], ys[k], work, &s, NULL))
            continue;
        v++;
        int near = 0;
        for (int a = 0; a < lp->navoid && !near; a++) {
            double x, y;
            sky_xy(cx, cy, lp->avoid_sep_px[a], lp->avoid_pa_deg[a], &x, &y);
            near = hypot(xs[k] - x, ys[k] - y) < diam;
        }
        if (!near)
            sums[m++] = s;
    }
    *nvalid = v;
    *nused = m;
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

/* Measures one fake in every plane: on the ring of its detection test (the
 * test aperture on the fake, the others following counter-clockwise), the
 * difference (with fakes - without) in the test aperture and in the
 * references (the flanking two left out with skip_flanking), and the
 * detection S/N on the image with fakes. */
static void measure_fake(gl_limits_fake *f, const gl_aperture_plan *ap,
                         const gl_detect_params *dpar, const gl_cube *base, const gl_cube *run,
                         int np, double F, int skip, double *work, double *xs, double *ys,
                         double *snr_work)
{
    long nx = base->nx, ny = base->ny;
    double cx = (double)(nx / 2), cy = (double)(ny / 2), x, y;
    sky_xy(cx, cy, f->sep_px, f->pa_deg, &x, &y);
    long n = gl_detect_ring_count(f->sep_px, 2 * gl_detect_aperture_radius(ap));
    gl_detect_ring_positions(cx, cy, f->sep_px, atan2(y - cy, x - cx), n, xs, ys);
    double unit = f->contrast * F;
    for (int k = 0; k < np; k++) {
        const float *i1 = gl_cube_plane(run, 0, k), *i0 = gl_cube_plane(base, 0, k);
        f->throughput[k] = f->signal[k] = f->ref_spread[k] = f->snr[k] = NAN;
        double s1, s0, d[2048];
        long m = 0;
        for (long a = 0; a < n && m < 2048; a++) {
            if (a > 0 && skip && (a == 1 || a == n - 1))
                continue;
            int ok = gl_detect_aperture_sum(ap, i1, nx, ny, xs[a], ys[a], work, &s1, NULL) &&
                     gl_detect_aperture_sum(ap, i0, nx, ny, xs[a], ys[a], work, &s0, NULL);
            if (a == 0 && !ok)
                break;
            if (ok)
                d[m++] = (s1 - s0) / unit;
        }
        gl_ttest t;
        if (gl_detect_snr_at(ap, dpar, i1, nx, ny, x, y, snr_work, &t))
            f->snr[k] = t.t;
        f->nref = (int)(m > 0 ? m - 1 : 0);
        if (m < 3)
            continue;
        double mu = 0, ss = 0;
        for (long a = 1; a < m; a++)
            mu += d[a] / (double)(m - 1);
        for (long a = 1; a < m; a++)
            ss += (d[a] - mu) * (d[a] - mu);
        f->throughput[k] = d[0];
        f->signal[k] = d[0] - mu;
        f->ref_spread[k] = sqrt(ss);
    }
}

/* The contrast of 95% completeness (50% where 95% is out of reach) at fake
 * j's separation from the fakes of the runs before run b (plane 1), within a
 * factor 4 of its first guess; the first guess where none can be computed.
 * The first run's fakes sit below the curve, these above it: between them
 * they bracket the fluxes the 50% and 95% contrasts need (full-frame PCA
 * absorbs a brighter companion more; measured in docs/limits.md). */
static double provisional_level(const gl_limits_result *r, int j, int b, double fwhm, double F)
{
    const gl_limits_fake *f = &r->fakes[j];
    gl_limits_fake *done = gl_malloc((size_t)r->nfakes * sizeof *done);
    if (!done)
        return f->contrast;
    int nd = 0;
    for (int i = 0; i < r->nfakes; i++)
        if (r->fakes[i].run < b)
            done[nd++] = r->fakes[i];
    double dof = interp(r->sep_px, r->dof, r->n, f->sep_px);
    limits_point pt = {.sep_px = f->sep_px,
                       .fwhm = fwhm,
                       .noise = interp(r->sep_px, r->noise, r->n, f->sep_px),
                       .tau = interp(r->sep_px, r->t_threshold, r->n, f->sep_px),
                       .nref = dof + 1,
                       .noise_dof = interp(r->sep_px, r->napertures, r->n, f->sep_px) - 1,
                       .psf_flux = F,
                       .q = 0.95};
    gl_limits_calibrate_point(&pt, done, nd, 0, NULL);
    gl_free(done);
    double c = isfinite(pt.contrast_cq) ? pt.contrast_cq : pt.contrast_c50;
    if (!(c > 0))
        return f->contrast;
    return GL_MIN(GL_MAX(c, 0.25 * f->contrast), 4 * f->contrast);
}

int gl_limits_fakes_share_frame(const gl_subtract_params *sp)
{
    return sp->method == GL_SUBTRACT_PCA || sp->sdi == GL_SDI_CHANNELS;
}

/* Fake i before fake j: brighter first, ties by separation (a fixed order). */
static int brighter(const gl_limits_fake *fi, const gl_limits_fake *fj)
{
    return fi->contrast > fj->contrast || (fi->contrast == fj->contrast && fi->sep_px < fj->sep_px);
}

/* Puts the fakes of run b into batches numbered from `first`, one
 * subtraction each, and returns their count. Where the subtraction fits
 * coefficients over the whole frame (full_frame), every planted fake moves
 * the coefficients of every other one, by an amount proportional to its own
 * flux: a fake joins a batch only when the brightest fake in it is at most
 * GL_LIMITS_BATCH_RATIO times its own contrast (brightest first, so a batch
 * is a band of brightness; fakes of about the same brightness still share
 * one, and disturb each other by a few per cent at most, docs/limits.md).
 * Otherwise (rings, the median frame: the fakes, 2 FWHM apart, share no
 * coefficients) the run is one batch. */
static int plan_batches(gl_limits_fake *fakes, int nfakes, int b, int full_frame, int *order,
                        int first)
{
    int n = 0;
    for (int j = 0; j < nfakes; j++)
        if (fakes[j].run == b)
            order[n++] = j;
    if (n == 0)
        return 0;
    if (!full_frame) {
        for (int i = 0; i < n; i++)
            fakes[order[i]].batch = first;
        return 1;
    }
    for (int i = 1; i < n; i++) /* insertion sort: a few dozen fakes */
        for (int k = i; k > 0 && brighter(&fakes[order[k]], &fakes[order[k - 1]]); k--) {
            int t = order[k];
            order[k] = order[k - 1];
            order[k - 1] = t;
        }
    int g = first;
    double top = fakes[order[0]].contrast; /* the brightest of batch g */
    for (int i = 0; i < n; i++) {
        gl_limits_fake *f = &fakes[order[i]];
        if (top > GL_LIMITS_BATCH_RATIO * f->contrast) {
            g++;
            top = f->contrast;
        }
        f->batch = g;
    }
    return g - first + 1;
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
    gl_subtract_memo *memo = NULL;
    int *order = NULL;
    double *work = NULL, *xs = NULL, *ys = NULL, *sums = NULL, *snr_work = NULL;
    gl_status st = GL_OK;
    memset(out, 0, sizeof *out);

    long nx = cube->nx, ny = cube->ny;
    double fwhm = sp->fwhm, diam = fwhm, cx = (double)(nx / 2), cy = (double)(ny / 2);
    if (!(lp->sigma > 0) || !(lp->completeness > 0 && lp->completeness < 1) || lp->fake_runs < 1 ||
        lp->fake_runs > 64 || !(lp->fake_level >= 0) || lp->step_px < 0)
        return gl_error_set(GL_ERR_USAGE, "limits: threshold, completeness (0-1), fake runs "
                                          "(1-64), fake level (>= 0) or step out of range");
    if (!(fwhm > 0))
        return gl_error_set(GL_ERR_USAGE, "--fwhm must be positive");
    sp1.keep_residuals = sp1.keep_raw_residuals = 0;
    int full_frame = gl_limits_fakes_share_frame(sp);

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
        return gl_error_set(
            GL_ERR_USAGE, "%s: no separation fits between %.1f px (%s) and %.1f px (%s)%s",
            sp->cube_name ? sp->cube_name : "the science cube", r0,
            lp->r_min_px > 0       ? "--min-separation"
            : sp->mask_radius >= 0 ? "--mask-radius + FWHM/2, the first"
                                   : "the automatic inner radius + FWHM/2, the first",
            r1, lp->r_max_px > 0 ? "--max-separation" : "frame edge, the last",
            lp->r_min_px > 0 || sp->mask_radius >= 0
                ? ""
                : ": too little rotation for klip-rings here; give --mask-radius, or use "
                  "--method klip-frame or --refs");
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
    /* the runs with fakes derotate the same frames at the same angles, with
     * the same NaN pixels: their derotation masks are kept from this run */
    if (!(memo = gl_subtract_memo_new())) {
        st = gl_error_nomem("derotation masks");
        goto cleanup;
    }
    if ((st = gl_subtract_run_memo(cube, angles, refs, &sp1, memo, &base)))
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
    double **per_plane[] = {&r.napertures,
                            &r.dof,
                            &r.noise,
                            &r.mean,
                            &r.t_threshold,
                            &r.throughput,
                            &r.signal,
                            &r.throughput_scatter,
                            &r.fakes_used,
                            &r.contrast,
                            &r.completeness_of_contrast,
                            &r.contrast_c50,
                            &r.contrast_cq};
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
            long m, used;
            ring_noise(ap, img, nx, ny, r.sep_px[i], diam, lp, work, xs, ys, sums, &m, &used,
                       &r.noise[j], &r.mean[j]);
            long n2 = m - 1 - (lp->skip_flanking ? 2 : 0);
            r.napertures[j] = (double)used;
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

    /* fakes: 2 FWHM apart within a run, the runs offset by 2 FWHM / runs,
     * golden-angle steps in position angle */
    double dsep = 2 * fwhm / lp->fake_runs;
    long nf = (long)floor((r1 - r0) / dsep + 1e-9) + 1;
    r.fakes = gl_calloc((size_t)nf, sizeof *r.fakes);
    comps = gl_calloc((size_t)nf, sizeof *comps);
    order = gl_calloc((size_t)nf, sizeof *order);
    if (!r.fakes || !comps || !order) {
        st = gl_error_nomem("fake companions");
        goto cleanup;
    }
    for (long j = 0; j < nf; j++) {
        gl_limits_fake *f = &r.fakes[r.nfakes];
        memset(f, 0, sizeof *f);
        f->sep_px = r0 + dsep * (double)j;
        f->run = (int)(j % lp->fake_runs);
        f->batch = -1; /* set when its run is planted */
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
        double sig = interp(r.sep_px, r.noise, n, f->sep_px), level = lp->fake_level;
        if (!(sig > 0))
            continue;
        if (!(level > 0)) {
            long n2 = gl_detect_ring_count(f->sep_px, diam) - 1 - (lp->skip_flanking ? 2 : 0);
            double d50 = NAN, tau = gl_detect_t_threshold(lp->sigma, n2 - 1);
            if (n2 >= 2 && gl_limits_delta_for_completeness(0.5, tau, (double)(n2 - 1), &d50))
                gl_error_clear();
            level = isfinite(d50) ? GL_MAX(10.0, d50 * sqrt(1 + 1.0 / (double)n2)) : 10.0;
        }
        f->contrast = level * sig / F;
        r.nfakes++;
    }
    gl_detect_params dpar;
    gl_detect_params_init(&dpar);
    dpar.fwhm = fwhm;
    dpar.diameter = diam;
    dpar.mask_radius = 1e-6; /* the curve's own separations decide */
    dpar.exclude_adjacent = lp->skip_flanking;
    snr_work = gl_malloc(gl_detect_snr_worksize(ap, nx, ny) * sizeof *snr_work);
    if (!snr_work) {
        st = gl_error_nomem("fake S/N");
        goto cleanup;
    }
    /* one copy of the cube for the runs with fakes, refilled for each */
    if ((st = gl_cube_new(nx, ny, cube->nchan, cube->nframe, &work_cube)))
        goto cleanup;
    work_cube->naxis = cube->naxis;
    for (int b = 0; b < lp->fake_runs; b++) {
        /* automatic level: from the second run on, the fakes go in at the
         * 95% contrast the earlier runs give (the subtraction is not linear
         * in the companion's flux: calibrate where the curve will be); each
         * fake's level from the earlier runs only, so in parallel (taken by
         * the threads as they come free: only the run's fakes cost) */
        if (b > 0 && !(lp->fake_level > 0)) {
#pragma omp parallel for schedule(dynamic, 1)
            for (int j = 0; j < r.nfakes; j++)
                if (r.fakes[j].run == b)
                    comps[j].contrast = provisional_level(&r, j, b, fwhm, F);
            for (int j = 0; j < r.nfakes; j++)
                if (r.fakes[j].run == b)
                    r.fakes[j].contrast = comps[j].contrast;
        }
        /* the run's fakes in batches by brightness (one batch unless the
         * method's coefficients span the whole frame), one subtraction each */
        int nbatch = plan_batches(r.fakes, r.nfakes, b, full_frame, order, r.nbatches);
        for (int g = r.nbatches; g < r.nbatches + nbatch; g++) {
            int nc = 0;
            for (int j = 0; j < r.nfakes; j++)
                if (r.fakes[j].batch == g)
                    comps[nc++] =
                        (gl_companion){r.fakes[j].sep_px, r.fakes[j].pa_deg, r.fakes[j].contrast};
            {
                /* the copy in pieces over the threads (tens of MB) */
                size_t total = gl_cube_size(cube), piece = (size_t)1 << 20;
                long npieces = (long)((total + piece - 1) / piece);
#pragma omp parallel for schedule(static)
                for (long q = 0; q < npieces; q++) {
                    size_t o = (size_t)q * piece, len = total - o < piece ? total - o : piece;
                    memcpy(work_cube->data + o, cube->data + o, len * sizeof(float));
                }
            }
            if ((st = gl_inject_companions(work_cube, angles, sp->north_offset, psf, comps, nc,
                                           NULL)))
                goto cleanup;
            gl_subtract_result_free(&run);
            if ((st = gl_subtract_run_memo(work_cube, angles, refs, &sp1, memo, &run)))
                goto cleanup;
            for (int j = 0; j < r.nfakes; j++)
                if (r.fakes[j].batch == g)
                    measure_fake(&r.fakes[j], ap, &dpar, base.image, run.image, np, F,
                                 lp->skip_flanking, work, xs, ys, snr_work);
        }
        r.nbatches += nbatch;
        gl_progress("limits", 2 + b, 1 + lp->fake_runs);
    }

    /* throughput and completeness on the grid, from the fakes around each
     * separation: every point on its own, the planes of one separation by
     * one thread (they share the order of the Bessel table, which that
     * thread keeps), the separations taken by the threads as they come free
     * (a point's numbers do not depend on which thread computes it or on
     * what it computed before) */
    gsl_set_error_handler_off();
#pragma omp parallel
    {
        limits_bessel_table *bessel = NULL; /* this thread's */
#pragma omp for schedule(dynamic, 1)
        for (long i = 0; i < n; i++)
            for (int k = 0; k < np; k++) {
                size_t j = (size_t)k * (size_t)n + (size_t)i;
                limits_point pt = {.sep_px = r.sep_px[i],
                                   .fwhm = fwhm,
                                   .noise = r.noise[j],
                                   .tau = r.t_threshold[j],
                                   .nref = r.dof[j] + 1,
                                   .noise_dof = r.napertures[j] - 1,
                                   .psf_flux = F,
                                   .q = lp->completeness};
                gl_limits_calibrate_point(&pt, r.fakes, r.nfakes, k, &bessel);
                r.throughput[j] = pt.throughput;
                r.signal[j] = pt.signal;
                r.throughput_scatter[j] = pt.throughput_scatter;
                r.fakes_used[j] = pt.fakes_used;
                r.contrast[j] = pt.contrast;
                r.completeness_of_contrast[j] = pt.completeness;
                r.contrast_c50[j] = pt.contrast_c50;
                r.contrast_cq[j] = pt.contrast_cq;
            }
        gl_limits_bessel_table_free(bessel);
    }
    gl_progress("limits", 1 + lp->fake_runs, 1 + lp->fake_runs);
    long usable = 0, low = 0, capped = 0, capped95 = 0;
    for (long i = 0; i < n; i++) {
        int thr = isfinite(r.noise[i]) && r.throughput[i] > 0.01;
        usable += thr;
        low += isfinite(r.noise[i]) && !thr;
        capped += thr && isfinite(r.t_threshold[i]) && !isfinite(r.contrast_c50[i]);
        capped95 += thr && isfinite(r.t_threshold[i]) && !isfinite(r.contrast_cq[i]);
    }
    if (usable == 0) {
        char level[48];
        if (lp->fake_level > 0)
            snprintf(level, sizeof level, "%g x the local noise", lp->fake_level);
        else
            snprintf(level, sizeof level, "near the 50%% level");
        st = gl_error_set(GL_ERR_USAGE,
                          "no separation kept a measurable throughput (above 1%%): the fakes "
                          "(%s) were removed by the subtraction; lower --fake-level or use fewer "
                          "modes",
                          level);
        goto cleanup;
    }
    if (low > 0)
        gl_log(GL_LOG_WARN,
               "%ld of %ld separations have a throughput below 1%% and no contrast (plane 1)", low,
               n);
    if ((capped > 0 || capped95 > 0) && refs && sp->refs_use == GL_REFS_ONLY)
        /* a basis of reference frames alone has no self-subtraction lobes:
         * the companion's own light in the few apertures of a short ring
         * (its PSF wings, and what its projection on the reference modes
         * takes from them) grows with it, against a high t threshold */
        gl_log(GL_LOG_WARN,
               "%ld of %ld separations have no 50%% contrast and %ld no %g%% contrast (plane 1): "
               "the ring there holds only a few apertures (high t threshold) and a companion's "
               "own light in its reference apertures (its PSF wings, and what its projection "
               "on the reference modes removes from them) grows with it and caps its S/N below "
               "the threshold, however bright (--skip-flanking or a lower --threshold help)",
               capped, n, capped95, 100 * lp->completeness);
    else if (capped > 0 || capped95 > 0)
        gl_log(GL_LOG_WARN,
               "%ld of %ld separations have no 50%% contrast and %ld no %g%% contrast (plane 1): "
               "a companion's own self-subtraction lobes cap its S/N below the threshold there, "
               "however bright (more field rotation, --skip-flanking or a lower --threshold help)",
               capped, n, capped95, 100 * lp->completeness);
    if (r.nbatches > lp->fake_runs)
        gl_log(GL_LOG_INFO,
               "fakes planted in %d subtractions, not %d: %s fits its coefficients over the "
               "whole frame, so a fake shares a subtraction only with fakes at most %g times "
               "as bright",
               r.nbatches, lp->fake_runs,
               sp->method == GL_SUBTRACT_PCA ? "klip-frame" : "the spectral step",
               GL_LIMITS_BATCH_RATIO);
    r.image = base.image;
    r.fwhm = fwhm;
    r.skip_flanking = lp->skip_flanking;
    base.image = NULL;
    *out = r;
    memset(&r, 0, sizeof r);

cleanup:
    gl_limits_result_free(&r);
    gl_subtract_result_free(&base);
    gl_subtract_result_free(&run);
    gl_detect_aperture_plan_free(ap);
    gl_cube_free(work_cube);
    gl_subtract_memo_free(memo);
    gl_free(comps);
    gl_free(order);
    gl_free(work);
    gl_free(xs);
    gl_free(ys);
    gl_free(sums);
    gl_free(snr_work);
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
    const double *sig = r->signal + (size_t)plane * (size_t)r->n;
    const double *thr = r->throughput + (size_t)plane * (size_t)r->n;
    const float *img = gl_cube_plane(r->image, 0, plane);
    /* the ring of the detection test at the source, as for the fakes
     * (measure_fake): the source's aperture first */
    long n = gl_detect_ring_count(sep_px, r->fwhm);
    gl_aperture_plan *ap = NULL;
    gl_status st = gl_detect_aperture_plan_new(r->fwhm / 2, &ap);
    if (st)
        return st;
    double *work = gl_malloc(gl_detect_aperture_worksize(ap) * sizeof *work);
    double *xs = gl_malloc((size_t)(n + 1) * sizeof *xs),
           *ys = gl_malloc((size_t)(n + 1) * sizeof *ys);
    if (!work || !xs || !ys) {
        st = gl_error_nomem("photometry");
        goto cleanup;
    }
    double cx = (double)(nx / 2), cy = (double)(ny / 2), x, y, flux;
    sky_xy(cx, cy, sep_px, pa_deg, &x, &y);
    gl_detect_ring_positions(cx, cy, sep_px, atan2(y - cy, x - cx), n, xs, ys);
    if (!gl_detect_aperture_sum(ap, img, nx, ny, x, y, work, &flux, NULL)) {
        st = gl_error_set(GL_ERR_USAGE,
                          "separation %.2f px, PA %.2f deg: the aperture touches the edge or "
                          "missing data",
                          sep_px, pa_deg);
        goto cleanup;
    }
    double bg = 0;
    long m = 0;
    for (long a = 1; a < n; a++) {
        double s;
        if (r->skip_flanking && (a == 1 || a == n - 1))
            continue;
        if (gl_detect_aperture_sum(ap, img, nx, ny, xs[a], ys[a], work, &s, NULL)) {
            bg += s;
            m++;
        }
    }
    if (m < 2) {
        st = gl_error_set(GL_ERR_USAGE,
                          "separation %.2f px, PA %.2f deg: fewer than 2 reference apertures on "
                          "valid data",
                          sep_px, pa_deg);
        goto cleanup;
    }
    out->flux = flux;
    out->background = bg / (double)m;
    out->noise = interp(r->sep_px, noise, r->n, sep_px);
    out->throughput = interp(r->sep_px, thr, r->n, sep_px);
    out->signal = interp(r->sep_px, sig, r->n, sep_px);
    out->nref = (int)m;
    double denom = out->signal * r->psf_aperture_flux;
    out->contrast = denom > 0 ? (flux - out->background) / denom : NAN;
    out->contrast_err = denom > 0 ? out->noise * sqrt(1 + 1 / (double)m) / denom : NAN;
cleanup:
    gl_free(xs);
    gl_free(ys);
    gl_free(work);
    gl_detect_aperture_plan_free(ap);
    return st;
}
