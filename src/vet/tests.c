/*
 * tests.c -- speckle or planet: tests with numbers. Each test gives a value,
 * what a planet would give, a pass limit and pass/fail, or says it is not
 * possible with the data given. The rules are ours (common practice in
 * spirit, thresholds chosen here and stated in docs/vet.md); a t value
 * (Mawet et al. 2014, ApJ 792, 97) has unit variance under noise, which sets
 * the allowances of 2 below.
 *  - modes: a planet stays above the detection threshold at every mode count
 *    (a noise peak comes and goes as the residuals change);
 *  - halves: each half of the sequence (independent frames) shows the source
 *    at about S/N / sqrt(2);
 *  - shape: the correlation of the data with the forward model of the fitted
 *    companion (the subtraction's own self-subtraction included) is compared
 *    with the correlations of the model plus the residual noise of the same
 *    annulus at other angles: a planet is one draw of that distribution;
 *  - negated, scrambled: derotating with the angles negated or in scrambled
 *    order moves a sky-fixed source by 2 theta_i (or theta_i - theta_pi(i))
 *    in each frame; only the frames that still overlap within FWHM/2
 *    contribute, so its S/N falls to about S/N x that fraction;
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

static const char *names[GL_VET_NTESTS] = {"modes",     "halves",   "shape", "negated",
                                           "scrambled", "spectral", "epochs"};
static const char *rules[GL_VET_NTESTS] = {
    "lowest S/N over the mode counts >= the detection threshold",
    "lower S/N of the two halves >= max(2, S/N/sqrt(2) - 2)",
    "correlation with the forward model >= median - 3 spread of model+noise draws",
    "S/N with negated angles <= planet expectation + 2",
    "S/N with scrambled angles <= planet expectation + 2",
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

/* S/N at (x, y) of each plane of a subtraction of base with parameters sp. */
static gl_status snr_of_run(vet_problem *p, const gl_cube *base, const double *angles,
                            const gl_subtract_params *sp, double x, double y, double *snr,
                            int *nplanes)
{
    gl_cube *img = NULL;
    gl_status st = vet_subtract(p, base, angles, p->refs, sp, NULL, 0, &img);
    if (st)
        return st;
    *nplanes = (int)img->nframe;
    for (long k = 0; k < img->nframe; k++)
        snr[k] = vet_snr(p, gl_cube_plane(img, 0, k), x, y);
    gl_cube_free(img);
    return GL_OK;
}

static void test_modes(vet_problem *p, const gl_vet_params *vp, double x, double y,
                       gl_vet_result *r)
{
    gl_vet_test *t = &r->tests[GL_VET_TEST_MODES];
    gl_subtract_params sp = p->sp_all;
    if (sp.method != GL_SUBTRACT_PCA && sp.method != GL_SUBTRACT_ANNULAR) {
        not_possible(t, "the method has no mode counts");
        return;
    }
    if (sp.nmodes < 2) {
        /* one count given: half and twice it as well */
        long k = sp.modes[0], lo = GL_MAX(1, k / 2), hi = GL_MIN(2 * k, p->nframe - 2);
        sp.nmodes = 0;
        if (lo < k)
            sp.modes[sp.nmodes++] = lo;
        sp.modes[sp.nmodes++] = k;
        if (hi > k)
            sp.modes[sp.nmodes++] = hi;
    }
    int np = 0;
    if (snr_of_run(p, p->crop, p->angles, &sp, x, y, r->snr_modes, &np)) {
        gl_error_clear();
        sp = p->sp_all;
        if (sp.nmodes < 2 || snr_of_run(p, p->crop, p->angles, &sp, x, y, r->snr_modes, &np)) {
            gl_error_clear();
            not_possible(t, "the subtraction refused the extra mode counts");
            return;
        }
    }
    r->nmodes = np;
    memcpy(r->modes, sp.modes, sizeof r->modes);
    double lo = INFINITY;
    for (int k = 0; k < np; k++)
        lo = isfinite(r->snr_modes[k]) ? GL_MIN(lo, r->snr_modes[k]) : -INFINITY;
    long dof = gl_detect_ring_count(r->sep_px, p->fwhm) - 2;
    t->possible = 1;
    t->value = lo;
    t->expected = r->snr;
    t->limit = gl_detect_t_threshold(vp->threshold_sigma, dof);
    t->passed = lo >= t->limit;
    snprintf(t->note, sizeof t->note, "%d mode counts, threshold %g sigma as t with %ld dof", np,
             vp->threshold_sigma, dof);
}

/* Frames [f0, f1) of the crop as a cube of their own. */
static gl_status frames_of(const vet_problem *p, long f0, long f1, gl_cube **out)
{
    gl_status st = gl_cube_new(p->nx, p->ny, p->nchan, f1 - f0, out);
    if (st)
        return st;
    (*out)->naxis = p->crop->naxis;
    memcpy((*out)->data, gl_cube_plane(p->crop, 0, f0), gl_cube_size(*out) * sizeof *(*out)->data);
    return GL_OK;
}

static void test_halves(vet_problem *p, double x, double y, gl_vet_result *r)
{
    gl_vet_test *t = &r->tests[GL_VET_TEST_HALVES];
    long h = p->nframe / 2;
    gl_subtract_params sp = p->sp;
    if (h < 4) {
        not_possible(t, "fewer than 8 frames");
        return;
    }
    if ((sp.method == GL_SUBTRACT_PCA || sp.method == GL_SUBTRACT_ANNULAR) && sp.modes[0] > h - 2)
        sp.modes[0] = h - 2;
    for (int k = 0; k < 2; k++) {
        gl_cube *half = NULL;
        int np;
        double snr[GL_SUBTRACT_MAX_MODES];
        long f0 = k ? h : 0, f1 = k ? p->nframe : h;
        gl_status st = frames_of(p, f0, f1, &half);
        if (!st)
            st = snr_of_run(p, half, p->angles + f0, &sp, x, y, snr, &np);
        gl_cube_free(half);
        if (st) {
            char why[200];
            snprintf(why, sizeof why, "half %d: %s", k + 1, gl_error_message());
            gl_error_clear();
            not_possible(t, why);
            return;
        }
        r->snr_half[k] = snr[0];
    }
    t->possible = 1;
    t->value = GL_MIN(r->snr_half[0], r->snr_half[1]);
    t->expected = r->snr / sqrt(2.0);
    t->limit = GL_MAX(2.0, t->expected - 2);
    t->passed = t->value >= t->limit;
    snprintf(t->note, sizeof t->note, "frames 1-%ld: S/N %.2f; %ld-%ld: S/N %.2f", h,
             r->snr_half[0], h + 1, p->nframe, r->snr_half[1]);
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

/* Fraction of frames whose source lands within FWHM/2 of its place when
 * frame i is derotated by the wrong angle: offset[i] degrees of arc. */
static double overlap_fraction(const double *offset, long n, double sep, double fwhm)
{
    long k = 0;
    for (long i = 0; i < n; i++)
        k += fabs(offset[i]) * DEG * sep < fwhm / 2;
    return (double)k / (double)n;
}

static void test_wrong_angles(vet_problem *p, const gl_vet_params *vp, double x, double y,
                              gl_vet_result *r, int scrambled)
{
    gl_vet_test *t = &r->tests[scrambled ? GL_VET_TEST_SCRAMBLED : GL_VET_TEST_NEGATED];
    long n = p->nframe;
    double *a = gl_malloc((size_t)n * 2 * sizeof *a), *off = a ? a + n : NULL;
    if (!a) {
        gl_error_clear();
        not_possible(t, "out of memory");
        return;
    }
    if (scrambled) {
        /* Fisher-Yates with a 64-bit LCG (Knuth's MMIX constants): the same
         * order for the same seed on every machine */
        unsigned long long s = vp->seed * 2862933555777941757ULL + 3037000493ULL;
        for (long i = 0; i < n; i++)
            a[i] = p->angles[i];
        for (long i = n - 1; i > 0; i--) {
            s = s * 6364136223846793005ULL + 1442695040888963407ULL;
            long j = (long)((s >> 33) % (unsigned long long)(i + 1));
            double tmp = a[i];
            a[i] = a[j];
            a[j] = tmp;
        }
        for (long i = 0; i < n; i++)
            off[i] = p->angles[i] - a[i];
    } else {
        for (long i = 0; i < n; i++) {
            a[i] = -p->angles[i];
            off[i] = 2 * p->angles[i];
        }
    }
    double frac = overlap_fraction(off, n, r->sep_px, p->fwhm);
    double snr[GL_SUBTRACT_MAX_MODES];
    int np;
    gl_status st = frac <= 0.5 ? snr_of_run(p, p->crop, a, &p->sp, x, y, snr, &np) : GL_OK;
    gl_free(a);
    if (frac > 0.5) {
        not_possible(t, "too little rotation: most frames overlap even so");
        return;
    }
    if (st) {
        char why[200];
        snprintf(why, sizeof why, "subtraction: %s", gl_error_message());
        gl_error_clear();
        not_possible(t, why);
        return;
    }
    *(scrambled ? &r->snr_scrambled : &r->snr_negated) = snr[0];
    t->possible = 1;
    t->value = snr[0];
    t->expected = r->snr * frac;
    t->limit = t->expected + 2;
    t->passed = isfinite(snr[0]) && snr[0] <= t->limit;
    snprintf(t->note, sizeof t->note, "%.0f%% of the frames still overlap within FWHM/2",
             100 * frac);
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
        gl_cube *refs = p->refs;
        p->refs = NULL; /* references hold every channel: the spectral test runs without */
        if (!st)
            st = vet_subtract(p, one, p->angles, NULL, &sp, NULL, 0, &img);
        p->refs = refs;
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
                        const float *img, const float *model, const float *resid, gl_vet_result *r)
{
    double x, y;
    vet_xy(p, r->sep_px, r->pa_deg, &x, &y);
    test_modes(p, vp, x, y, r);
    gl_progress("vet tests", 1, 5);
    test_halves(p, x, y, r);
    gl_progress("vet tests", 2, 5);
    test_shape(p, x, y, img, model, resid, r);
    test_wrong_angles(p, vp, x, y, r, 0);
    gl_progress("vet tests", 3, 5);
    test_wrong_angles(p, vp, x, y, r, 1);
    gl_progress("vet tests", 4, 5);
    test_spectral(p, sp, x, y, r);
    gl_progress("vet tests", 5, 5);
    return GL_OK;
}
