/*
 * tests.c -- speckle or planet: tests with numbers. Each test gives a value,
 * what a planet would give, a pass limit and pass/fail, or says it is not
 * possible with the data given. What a planet gives is measured, not
 * assumed: the injection-recovery fakes (errors.c) are planets of the fitted
 * contrast at the fitted separation, and every statistic below is computed
 * for them exactly as for the candidate; their median is the expectation.
 * The pass rules are ours (stated in docs/vet.md); a t value (Mawet et al.
 * 2014, ApJ 792, 97) has unit variance under noise, and at a signal t the
 * noise estimate from n apertures adds a relative error 1/sqrt(2(n - 1)) (the
 * large-sample variance of a sample standard deviation, Var(s) = sigma^2 /
 * (2(n - 1)) for normal data; Kendall & Stuart, The Advanced Theory of
 * Statistics, vol. 1, sec. 10.8), so the S/N of a planet scatters by
 * sqrt(1 + t^2 / (2 dof)); that sets the allowance max(3 sqrt(1 + t^2 /
 * (2 dof)), 3 x the fakes' spread) below (3 sigma, one-sided; t the fakes'
 * median).
 *  - snr: the S/N at the fit reaches the t threshold of the chosen sigma at
 *    its degrees of freedom (a detection at all);
 *  - modes: at every mode count the S/N stays within the allowance below the
 *    fakes' (a noise peak comes and goes as the residuals change, a planet
 *    follows its self-subtraction);
 *  - halves: the same for each half of the sequence (independent frames);
 *  - shape: the correlation of the data with the forward model of the fitted
 *    companion (the subtraction's own self-subtraction included) is compared
 *    with the correlations of the model plus the residual noise of the same
 *    annulus at other angles: a planet is one draw of that distribution;
 *  - negated, scrambled: derotating with the angles negated or in scrambled
 *    order moves a sky-fixed source by 2 theta_i (or theta_i - theta_pi(i))
 *    in each frame and smears it; the S/N left must not exceed the fakes' by
 *    more than the allowance (possible only when most frames move by more
 *    than FWHM/2);
 *  - spectral (4-D cubes): a speckle's separation scales with wavelength, a
 *    planet's does not (Sparks & Ford 2002, ApJ 578, 543, the principle of
 *    spectral deconvolution); the fitted slope of separation against
 *    lambda / mean(lambda) is 0 for a planet and sep for a speckle.
 */
#include "core/internal.h"
#include "vet/internal.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

#define DEG (M_PI / 180)

static const char *names[GL_VET_NTESTS] = {"snr",     "modes",     "halves",   "shape",
                                           "negated", "scrambled", "spectral", "epochs"};
static const char *rules[GL_VET_NTESTS] = {
    "S/N at the fit >= the t threshold of --threshold sigma",
    "min over mode counts of (S/N - fakes' S/N) >= -max(3, 3 spread)",
    "min over the halves of (S/N - fakes' S/N) >= -max(3, 3 spread)",
    "correlation with the forward model >= median - 3 spread of model+noise draws",
    "S/N with negated angles - fakes' <= max(3, 3 spread)",
    "S/N with scrambled angles - fakes' <= max(3, 3 spread)",
    "|d sep / d(lambda/mean)| < sep / 2 (a speckle gives sep)",
    "background track rejected (p < 0.0027) and common motion not (p >= 0.0027)"};

const char *gl_vet_test_name(gl_vet_test_id id)
{
    return id >= 0 && id < GL_VET_NTESTS ? names[id] : "?";
}
const char *gl_vet_test_rule(gl_vet_test_id id)
{
    return id >= 0 && id < GL_VET_NTESTS ? rules[id] : "?";
}

static void not_possible(gl_vet_test *t, const char *why)
{
    t->possible = 0;
    t->passed = 0;
    t->value = t->expected = t->limit = NAN;
    snprintf(t->note, sizeof t->note, "%s", why);
}

/* Fraction of frames whose source lands within FWHM/2 of its place when
 * frame i is derotated by the wrong angle: offset[i] degrees of arc. */
static double overlap_fraction(const double *offset, long n, double sep, double fwhm)
{
    long k = 0;
    for (long i = 0; i < n; i++)
        k += fabs(offset[i]) * DEG * sep < fwhm / 2;
    return (double)k / (double)n;
}

gl_status vet_plan_make(vet_problem *p, const gl_vet_params *vp, double sep)
{
    vet_plan *pl = &p->plan;
    long n = p->nframe, h = n / 2;
    gl_free(pl->negated);
    memset(pl, 0, sizeof *pl);
    if (!(pl->negated = gl_malloc((size_t)n * 3 * sizeof(double))))
        return gl_error_nomem("vet test angles");
    pl->scrambled = pl->negated + n;
    double *off = pl->negated + 2 * n;

    /* mode counts: the user's, or half, once and twice a single one */
    gl_subtract_params sp = p->sp_all;
    if (sp.method != GL_SUBTRACT_PCA && sp.method != GL_SUBTRACT_ANNULAR) {
        snprintf(pl->why_modes, sizeof pl->why_modes, "the method has no mode counts");
        sp.nmodes = 0;
    } else if (sp.nmodes < 2) {
        long k = sp.modes[0], lo = GL_MAX(1, k / 2), hi = GL_MIN(2 * k, p->nframe - 2);
        sp.nmodes = 0;
        if (lo < k)
            sp.modes[sp.nmodes++] = lo;
        sp.modes[sp.nmodes++] = k;
        if (hi > k)
            sp.modes[sp.nmodes++] = hi;
    }
    pl->modes_sp = sp;

    /* halves: the first mode count, at most what half of the frames allow */
    pl->half_sp = p->sp;
    pl->halves_ok = h >= 4;
    if (!pl->halves_ok)
        snprintf(pl->why_halves, sizeof pl->why_halves, "fewer than 8 frames");
    if ((pl->half_sp.method == GL_SUBTRACT_PCA || pl->half_sp.method == GL_SUBTRACT_ANNULAR) &&
        pl->half_sp.modes[0] > h - 2)
        pl->half_sp.modes[0] = GL_MAX(1, h - 2);

    /* negated angles, and a scrambled order: Fisher-Yates with a 64-bit LCG
     * (Knuth's MMIX constants), the same order for a seed on every machine */
    for (long i = 0; i < n; i++) {
        pl->negated[i] = -p->angles[i];
        off[i] = 2 * p->angles[i];
        pl->scrambled[i] = p->angles[i];
    }
    pl->frac_negated = overlap_fraction(off, n, sep, p->fwhm);
    unsigned long long s = vp->seed * 2862933555777941757ULL + 3037000493ULL;
    for (long i = n - 1; i > 0; i--) {
        s = s * 6364136223846793005ULL + 1442695040888963407ULL;
        long j = (long)((s >> 33) % (unsigned long long)(i + 1));
        double t = pl->scrambled[i];
        pl->scrambled[i] = pl->scrambled[j];
        pl->scrambled[j] = t;
    }
    for (long i = 0; i < n; i++)
        off[i] = p->angles[i] - pl->scrambled[i];
    pl->frac_scrambled = overlap_fraction(off, n, sep, p->fwhm);
    return GL_OK;
}

/* S/N at (x, y) of each plane of a subtraction of base; NaN and the error
 * cleared when the subtraction refuses the configuration. */
static int snr_of_run(vet_problem *p, const gl_cube *base, const double *angles,
                      const gl_subtract_params *sp, double x, double y, double *snr, int *np,
                      char *why, size_t wsize)
{
    gl_cube *img = NULL;
    if (vet_subtract(p, base, angles, p->refs, sp, NULL, 0, &img)) {
        if (why)
            snprintf(why, wsize, "subtraction: %s", gl_error_message());
        gl_error_clear();
        for (int k = 0; k < sp->nmodes; k++)
            snr[k] = NAN;
        *np = 0;
        return 0;
    }
    *np = (int)img->nframe;
    for (long k = 0; k < img->nframe; k++)
        snr[k] = vet_snr(p, gl_cube_plane(img, 0, k), x, y);
    gl_cube_free(img);
    return 1;
}

gl_status vet_stats_run(vet_problem *p, const gl_cube *cube, double x, double y, vet_stats *s)
{
    vet_plan *pl = &p->plan;
    double v[GL_SUBTRACT_MAX_MODES];
    int np;
    gl_cube *half = NULL;
    s->nmodes = 0;
    if (pl->modes_sp.nmodes > 0 &&
        snr_of_run(p, cube, p->angles, &pl->modes_sp, x, y, s->modes, &np,
                   pl->why_modes[0] ? NULL : pl->why_modes, sizeof pl->why_modes))
        s->nmodes = np;
    s->half[0] = s->half[1] = NAN;
    long h = p->nframe / 2;
    for (int k = 0; k < 2 && pl->halves_ok; k++) {
        long f0 = k ? h : 0, f1 = k ? p->nframe : h;
        gl_status st = gl_cube_new(p->nx, p->ny, p->nchan, f1 - f0, &half);
        if (st)
            return st;
        half->naxis = cube->naxis;
        memcpy(half->data, gl_cube_plane(cube, 0, f0), gl_cube_size(half) * sizeof *half->data);
        /* messages about its frames name them as frames of the whole sequence */
        gl_subtract_params hs = pl->half_sp;
        char name[1200];
        snprintf(name, sizeof name, "%s, %s half (frames %ld-%ld)",
                 hs.cube_name ? hs.cube_name : "the science cube", k ? "second" : "first", f0,
                 f1 - 1);
        hs.cube_name = name;
        hs.frame_offset = f0;
        if (snr_of_run(p, half, p->angles + f0, &hs, x, y, v, &np, pl->why_halves,
                       sizeof pl->why_halves))
            s->half[k] = v[0];
        gl_cube_free(half);
        half = NULL;
    }
    s->negated = s->scrambled = NAN;
    if (pl->frac_negated <= 0.5 && snr_of_run(p, cube, pl->negated, &p->sp, x, y, v, &np, NULL, 0))
        s->negated = v[0];
    if (pl->frac_scrambled <= 0.5 &&
        snr_of_run(p, cube, pl->scrambled, &p->sp, x, y, v, &np, NULL, 0))
        s->scrambled = v[0];
    return GL_OK;
}

/* Median and allowance of the fakes' values get(k): max(3 sqrt(1 + m^2 /
 * (2 dof)), 3 x robust spread), dof the degrees of freedom of the noise
 * apertures at the candidate's separation (see the top of this file);
 * returns the number of finite values. */
static int fakes_expect(const vet_problem *p, double sep, int which, int index, double *median,
                        double *allow)
{
    double v[VET_MAX_FAKES], w[VET_MAX_FAKES];
    int n = 0;
    for (int k = 0; k < p->nfake_stats; k++) {
        const vet_stats *s = &p->fake_stats[k];
        double x = which == 0   ? (index < s->nmodes ? s->modes[index] : NAN)
                   : which == 1 ? s->half[index]
                   : which == 2 ? s->negated
                                : s->scrambled;
        if (isfinite(x))
            v[n++] = x;
    }
    *median = *allow = NAN;
    if (n < 2)
        return n;
    double sig;
    gl_stats_robust(v, (size_t)n, w, median, &sig);
    double dof = (double)GL_MAX(1, gl_detect_ring_count(sep, p->fwhm) - 2);
    *allow = GL_MAX(3.0 * sqrt(1 + *median * *median / (2 * dof)), 3 * sig);
    return n;
}

static const char *no_fakes = "no injection-recovery fakes to say what a planet gives";

/* modes (which 0) and halves (which 1): the lowest (S/N - fakes' median). */
static void test_low_side(vet_problem *p, const vet_stats *d, gl_vet_result *r, int which)
{
    gl_vet_test *t = &r->tests[which ? GL_VET_TEST_HALVES : GL_VET_TEST_MODES];
    int n = which ? 2 : d->nmodes;
    const double *val = which ? d->half : d->modes;
    double *exp_out = which ? r->fake_snr_half : r->fake_snr_modes;
    if (n == 0 || (which && !(isfinite(val[0]) && isfinite(val[1])))) {
        const char *why = which ? p->plan.why_halves : p->plan.why_modes;
        char text[160];
        if (!why[0]) { /* the subtractions ran, the S/N there is not a number */
            snprintf(text, sizeof text,
                     which ? "no S/N at the candidate in the %s half (its subtraction leaves "
                             "that place empty: too little rotation in half of the frames?)"
                           : "no S/N at the candidate at any mode count%s",
                     which ? (isfinite(val[0]) ? "second" : "first") : "");
            why = text;
        }
        not_possible(t, why);
        return;
    }
    double worst = INFINITY, allow = 2;
    int used = 0;
    for (int k = 0; k < n; k++) {
        double m, a;
        int nf = fakes_expect(p, r->sep_px, which, k, &m, &a);
        exp_out[k] = m;
        if (nf < 2 || !isfinite(val[k]))
            continue;
        used++;
        if (val[k] - m < worst) {
            worst = val[k] - m;
            allow = a;
        }
    }
    if (!used) {
        not_possible(t, no_fakes);
        return;
    }
    t->possible = 1;
    t->value = worst;
    t->expected = 0;
    t->limit = -allow;
    t->passed = worst >= -allow;
    if (which)
        snprintf(t->note, sizeof t->note, "halves S/N %.2f, %.2f; fakes %.2f, %.2f", val[0], val[1],
                 exp_out[0], exp_out[1]);
    else
        snprintf(t->note, sizeof t->note, "%d mode counts; S/N minus the fakes' median, lowest", n);
}

static void test_wrong(vet_problem *p, const vet_stats *d, gl_vet_result *r, int scrambled)
{
    gl_vet_test *t = &r->tests[scrambled ? GL_VET_TEST_SCRAMBLED : GL_VET_TEST_NEGATED];
    double frac = scrambled ? p->plan.frac_scrambled : p->plan.frac_negated;
    double v = scrambled ? d->scrambled : d->negated, m, a;
    if (frac > 0.5) {
        not_possible(t, "too little rotation: most frames overlap even so");
        return;
    }
    if (!isfinite(v)) {
        not_possible(t, "no S/N with the wrong angles");
        return;
    }
    if (fakes_expect(p, r->sep_px, scrambled ? 3 : 2, 0, &m, &a) < 2) {
        not_possible(t, no_fakes);
        return;
    }
    *(scrambled ? &r->fake_snr_scrambled : &r->fake_snr_negated) = m;
    t->possible = 1;
    t->value = v - m;
    t->expected = 0;
    t->limit = a;
    t->passed = v - m <= a;
    snprintf(t->note, sizeof t->note, "S/N %.2f, fakes %.2f; %.0f%% of frames still overlap", v, m,
             100 * frac);
}

/* Bilinear sample of img at (x, y); NaN outside or next to NaN. */
static double sample(const vet_problem *p, const float *img, double x, double y)
{
    long i = (long)floor(x), j = (long)floor(y);
    if (i < 0 || j < 0 || i + 1 >= p->nx || j + 1 >= p->ny)
        return NAN;
    double fx = x - (double)i, fy = y - (double)j;
    const float *a = img + j * p->nx + i;
    return (1 - fy) * ((1 - fx) * a[0] + fx * a[1]) +
           fy * ((1 - fx) * a[p->nx] + fx * a[p->nx + 1]);
}

static double correlation(const double *a, const double *b, long n)
{
    double ma = 0, mb = 0, sab = 0, saa = 0, sbb = 0;
    for (long k = 0; k < n; k++) {
        ma += a[k];
        mb += b[k];
    }
    ma /= (double)n;
    mb /= (double)n;
    for (long k = 0; k < n; k++) {
        sab += (a[k] - ma) * (b[k] - mb);
        saa += (a[k] - ma) * (a[k] - ma);
        sbb += (b[k] - mb) * (b[k] - mb);
    }
    return saa > 0 && sbb > 0 ? sab / sqrt(saa * sbb) : NAN;
}

static void test_shape(vet_problem *p, double x, double y, const float *img, const float *model,
                       const float *resid, gl_vet_result *r)
{
    gl_vet_test *t = &r->tests[GL_VET_TEST_SHAPE];
    double rad = p->merit_r, sep = r->sep_px;
    long side = 2 * (long)ceil(rad) + 1, cap = side * side;
    double *d = gl_malloc((size_t)cap * 3 * sizeof *d), *m = d ? d + cap : NULL,
           *s = d ? d + 2 * cap : NULL;
    double draws[64], spread_work[64];
    long nd = 0;
    if (!d) {
        gl_error_clear();
        not_possible(t, "out of memory");
        return;
    }
    /* pixel offsets inside the aperture around the fitted position */
    long n = 0;
    long ci = lround(x), cj = lround(y);
    for (long j = cj - side / 2; j <= cj + side / 2; j++)
        for (long i = ci - side / 2; i <= ci + side / 2; i++) {
            if (hypot((double)i - x, (double)j - y) > rad || i < 0 || j < 0 || i >= p->nx ||
                j >= p->ny)
                continue;
            double a = img[j * p->nx + i], b = model[j * p->nx + i];
            if (!isfinite(a) || !isfinite(b))
                continue;
            d[n] = a;
            m[n] = b;
            n++;
        }
    double rc = n > 4 ? correlation(d, m, n) : NAN;
    /* draws: model + the residual noise of the annulus at other angles */
    long nang = (long)floor(2 * M_PI * sep / (2 * rad));
    for (long k = 2; k + 1 < nang && nd < 64; k++) {
        double phi = 2 * M_PI * (double)k / (double)nang, cs = cos(phi), sn = sin(phi);
        long q = 0, ok = 1;
        for (long j = cj - side / 2; j <= cj + side / 2 && ok; j++)
            for (long i = ci - side / 2; i <= ci + side / 2 && ok; i++) {
                if (hypot((double)i - x, (double)j - y) > rad || i < 0 || j < 0 || i >= p->nx ||
                    j >= p->ny)
                    continue;
                if (!isfinite(img[j * p->nx + i]) || !isfinite(model[j * p->nx + i]))
                    continue;
                double dx = (double)i - p->cx, dy = (double)j - p->cy;
                double v = sample(p, resid, p->cx + cs * dx - sn * dy, p->cy + sn * dx + cs * dy);
                if (!isfinite(v))
                    ok = 0;
                else {
                    s[q] = m[q] + v;
                    q++;
                }
            }
        if (ok && q == n)
            draws[nd++] = correlation(s, m, n);
    }
    gl_free(d);
    if (!isfinite(rc) || nd < 4) {
        not_possible(t, "too few pixels or noise samples in the annulus");
        return;
    }
    double med, sig;
    gl_stats_robust(draws, (size_t)nd, spread_work, &med, &sig);
    t->possible = 1;
    t->value = rc;
    t->expected = med;
    t->limit = med - 3 * GL_MAX(sig, 0.02);
    t->passed = rc >= t->limit;
    snprintf(t->note, sizeof t->note,
             "%ld pixels within %.1f px; %ld draws of model + annulus noise (spread %.3f)", n, rad,
             nd, sig);
}

static void test_spectral(vet_problem *p, const gl_subtract_params *usp, double x, double y,
                          gl_vet_result *r)
{
    gl_vet_test *t = &r->tests[GL_VET_TEST_SPECTRAL];
    long nc = p->nchan;
    double w[256];
    if (nc < 2) {
        not_possible(t, "one wavelength channel");
        return;
    }
    if (nc > 256) {
        not_possible(t, "more than 256 channels");
        return;
    }
    int have = usp->wavelengths && usp->nwave == nc;
    for (long c = 0; c < nc; c++) {
        char key[16];
        snprintf(key, sizeof key, "WAVEL%ld", c + 1);
        if (have)
            w[c] = usp->wavelengths[c];
        else if (!gl_header_get_dbl(p->crop->header, key, &w[c]) || !(w[c] > 0)) {
            not_possible(t, "no wavelengths (--wavelengths with --sdi, or WAVELn keywords)");
            return;
        }
    }
    double wm = 0, wlo = INFINITY, whi = -INFINITY;
    for (long c = 0; c < nc; c++) {
        wm += w[c] / (double)nc;
        wlo = GL_MIN(wlo, w[c]);
        whi = GL_MAX(whi, w[c]);
    }
    if (r->sep_px * (whi - wlo) / wm < p->fwhm / 2) {
        not_possible(t, "a speckle would move less than FWHM/2 across the band");
        return;
    }
    gl_subtract_params sp = p->sp;
    sp.sdi = GL_SDI_OFF;
    sp.nwave = 0;
    sp.wavelengths = NULL;
    double sx = 0, sy = 0, sxx = 0, sxy = 0;
    for (long c = 0; c < nc; c++) {
        gl_cube *one = NULL, *img = NULL;
        gl_status st = gl_cube_new(p->nx, p->ny, 1, p->nframe, &one);
        for (long f = 0; !st && f < p->nframe; f++)
            memcpy(gl_cube_plane(one, 0, f), gl_cube_plane(p->crop, c, f),
                   gl_cube_plane_size(one) * sizeof(float));
        /* references hold every channel: the spectral test runs without */
        if (!st)
            st = vet_subtract(p, one, p->angles, NULL, &sp, NULL, 0, &img);
        double px, py, sep, pa;
        if (!st) {
            vet_peak(p, gl_cube_plane(img, 0, 0), x, y, &px, &py);
            vet_seppa(p, px, py, &sep, &pa);
        }
        gl_cube_free(one);
        gl_cube_free(img);
        if (st) {
            char why[200];
            snprintf(why, sizeof why, "channel %ld: %s", c + 1, gl_error_message());
            gl_error_clear();
            not_possible(t, why);
            return;
        }
        double u = w[c] / wm - 1;
        sx += u;
        sy += sep;
        sxx += u * u;
        sxy += u * sep;
    }
    double slope = ((double)nc * sxy - sx * sy) / ((double)nc * sxx - sx * sx);
    t->possible = 1;
    t->value = slope;
    t->expected = 0;
    t->limit = r->sep_px / 2;
    t->passed = fabs(slope) < t->limit;
    snprintf(t->note, sizeof t->note,
             "%ld channels %.4g-%.4g; a speckle would give %.2f px per unit lambda/mean", nc, wlo,
             whi, r->sep_px);
}

gl_status vet_tests_run(vet_problem *p, const gl_vet_params *vp, const gl_subtract_params *sp,
                        const vet_stats *d, const float *img, const float *model,
                        const float *resid, gl_vet_result *r)
{
    double x, y;
    vet_xy(p, r->sep_px, r->pa_deg, &x, &y);
    r->nmodes = d->nmodes;
    memcpy(r->modes, p->plan.modes_sp.modes, sizeof r->modes);
    memcpy(r->snr_modes, d->modes, sizeof r->snr_modes);
    r->snr_half[0] = d->half[0];
    r->snr_half[1] = d->half[1];
    r->snr_negated = d->negated;
    r->snr_scrambled = d->scrambled;
    r->fake_snr_half[0] = r->fake_snr_half[1] = r->fake_snr_negated = r->fake_snr_scrambled = NAN;
    for (int k = 0; k < GL_SUBTRACT_MAX_MODES; k++)
        r->fake_snr_modes[k] = NAN;

    gl_vet_test *t = &r->tests[GL_VET_TEST_SNR];
    long dof = gl_detect_ring_count(r->sep_px, p->fwhm) - 2;
    t->possible = isfinite(r->snr);
    t->value = r->snr;
    t->limit = gl_detect_t_threshold(vp->threshold_sigma, dof);
    t->expected = t->limit;
    t->passed = r->snr >= t->limit;
    snprintf(t->note, sizeof t->note, "threshold %g sigma as Student t with %ld dof",
             vp->threshold_sigma, dof);
    if (!t->possible)
        not_possible(t, "no S/N at the fitted position");
    test_low_side(p, d, r, 0);
    test_low_side(p, d, r, 1);
    test_shape(p, x, y, img, model, resid, r);
    test_wrong(p, d, r, 0);
    test_wrong(p, d, r, 1);
    test_spectral(p, sp, x, y, r);
    return GL_OK;
}
