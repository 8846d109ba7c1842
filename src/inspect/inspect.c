/*
 * inspect.c -- the numbers behind `gloam inspect`: what is in a science cube
 * before anything is done to it.
 *
 * Per image plane: the fraction of NaN (missing) pixels, the flux (sum of the
 * finite pixels), the peak, the background level and noise as the median and
 * 1.4826 * MAD (robust; core/stats.c) of the pixels far from the star (at a
 * distance >= bg_inner_frac * min(nx, ny)/2 from (nx/2, ny/2): the outer
 * annulus and the corners, where the stellar halo is faintest), and saturated
 * pixels; a plane with no finite pixel at all is reported as empty (not an
 * error: the report describes what a later step will have to drop). Across planes: min/median/max
 * of those numbers, and outlier frames that lie more than outlier_nsigma robust sigmas from the
 * median frame (common practice for frame selection; no single published rule).
 *
 * Saturation: a SATURATE (or SATLEVEL) keyword, taken in data units, wins;
 * otherwise integer data are saturated at the largest raw value BITPIX can
 * hold (255 for 8, 2^(BITPIX-1)-1 otherwise), scaled by BSCALE/BZERO as FITS
 * Standard 4.0 sec. 5.3 prescribes; float data without the keyword are not
 * assessed.
 *
 * Field rotation: the range of the unwrapped parallactic angles. A companion
 * at separation r moves along an arc of r * rotation (radians) over the
 * sequence; in FWHM, that arc says whether angular differential imaging can
 * separate it from the speckles (about 1 FWHM or more; common practice).
 */
#include "core/internal.h"
#include "gloam/inspect.h"

#include <gsl/gsl_sort.h>
#include <gsl/gsl_statistics_double.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

void gl_inspect_params_init(gl_inspect_params *p)
{
    memset(p, 0, sizeof *p);
    p->fwhm_px = 4.0;
    p->fwhm_given = 0;
    p->bg_inner_frac = 0.75;
    p->outlier_nsigma = 5.0;
    p->nan_excess = 0.05;
}

const char *gl_saturation_rule_name(gl_saturation_rule rule)
{
    switch (rule) {
    case GL_SAT_NONE: return "none (float data, no SATURATE keyword)";
    case GL_SAT_KEYWORD: return "SATURATE keyword";
    case GL_SAT_INTEGER_MAX: return "integer maximum of BITPIX after BSCALE/BZERO";
    }
    return "unknown";
}

double gl_inspect_rotation_total(const double *angles_deg, long n)
{
    double u = angles_deg[0], lo = u, hi = u;
    for (long i = 1; i < n; i++) {
        double d = fmod(angles_deg[i] - angles_deg[i - 1], 360.0);
        if (d > 180.0)
            d -= 360.0;
        else if (d < -180.0)
            d += 360.0;
        u += d;
        lo = GL_MIN(lo, u);
        hi = GL_MAX(hi, u);
    }
    return hi - lo;
}

void gl_inspect_report_free(gl_inspect_report *r)
{
    if (!r)
        return;
    gl_free(r->planes);
    gl_free(r);
}

/* Saturation level of the data (in data units) and the rule that set it. */
static void saturation_level(const gl_inspect_report *r, gl_saturation_rule *rule, double *level)
{
    if (isfinite(r->obs.saturate)) {
        *rule = GL_SAT_KEYWORD;
        *level = r->obs.saturate;
        return;
    }
    int bp = r->fits.bitpix;
    if (bp > 0) {
        double rawmax = bp == 8 ? 255.0 : ldexp(1.0, bp - 1) - 1.0;
        *rule = GL_SAT_INTEGER_MAX;
        *level = r->fits.bscale * rawmax + r->fits.bzero;
        return;
    }
    *rule = GL_SAT_NONE;
    *level = NAN;
}

/* Statistics of one plane; work holds nx*ny doubles. */
static void plane_stats(const gl_inspect_report *r, const float *img, const unsigned char *bgmask,
                        double *work, gl_inspect_plane *ps)
{
    size_t n = (size_t)r->nx * (size_t)r->ny;
    double flux = 0, peak = -INFINITY;
    long nnan = 0, nsat = 0, nbg = 0;
    /* cfitsio converts raw*BSCALE+BZERO to float, so compare in float too */
    float lev = (float)r->sat_level;
    int sat_up = r->sat_rule == GL_SAT_KEYWORD || r->fits.bscale > 0;
    for (size_t i = 0; i < n; i++) {
        float v = img[i];
        if (!isfinite(v)) {
            nnan++;
            continue;
        }
        flux += v;
        peak = GL_MAX(peak, (double)v);
        if (r->sat_rule != GL_SAT_NONE && (sat_up ? v >= lev : v <= lev))
            nsat++;
        if (bgmask[i])
            work[nbg++] = v;
    }
    ps->npix = (long)n;
    ps->nnan = nnan;
    ps->nsat = nsat;
    ps->nan_fraction = (double)nnan / (double)n;
    ps->flux = nnan == (long)n ? NAN : flux; /* no data: no number, out of the summaries */
    ps->peak = nnan == (long)n ? NAN : peak;
    ps->bg_count = nbg;
    gl_stats_robust(work, (size_t)nbg, work + n, &ps->bg_median, &ps->bg_sigma);
}

/* min/median/max of a field over planes, and outlier flags for it. Outliers
 * are judged channel by channel: channels of a spectral cube differ in flux
 * and background by nature. */
static void summarise(gl_inspect_report *r, size_t offset, double *work, gl_inspect_range *rg,
                      double nsigma, unsigned flag)
{
#define FIELD(i) (*(const double *)((const char *)&r->planes[i] + offset))
    long m = 0, nchan = 1;
    for (long i = 0; i < r->nplanes; i++) {
        double v = FIELD(i);
        if (isfinite(v))
            work[m++] = v;
        if (r->planes[i].chan + 1 > nchan)
            nchan = r->planes[i].chan + 1;
    }
    rg->min = rg->median = rg->max = NAN;
    if (m == 0)
        return;
    gsl_sort(work, 1, (size_t)m);
    rg->min = work[0];
    rg->max = work[m - 1];
    double med, sig;
    gl_stats_robust(work, (size_t)m, work + m, &med, &sig);
    rg->median = med;
    if (!(nsigma > 0))
        return;
    for (long c = 0; c < nchan; c++) {
        m = 0;
        for (long i = 0; i < r->nplanes; i++)
            if (r->planes[i].chan == c && isfinite(FIELD(i)))
                work[m++] = FIELD(i);
        if (m < 3)
            continue;
        gl_stats_robust(work, (size_t)m, work + m, &med, &sig);
        for (long i = 0; i < r->nplanes; i++) {
            double v = FIELD(i);
            if (r->planes[i].chan != c || !isfinite(v))
                continue;
            /* with sig == 0 all but the differing frames are identical */
            double tol = sig > 0 ? nsigma * sig : 1e-6 * fabs(med);
            if (fabs(v - med) > tol)
                r->planes[i].outlier |= flag;
        }
    }
#undef FIELD
}

static void rotation(gl_inspect_report *r, const double *angles, long n, const gl_inspect_params *p)
{
    r->has_angles = 1;
    r->nangles = n;
    r->angle_first_deg = angles[0];
    r->angle_last_deg = angles[n - 1];
    r->rotation_deg = gl_inspect_rotation_total(angles, n);
    r->fwhm_px = p->fwhm_px;
    r->fwhm_assumed = !p->fwhm_given;
    double rad = r->rotation_deg * M_PI / 180.0;
    r->sep_one_fwhm_px = rad > 0 ? p->fwhm_px / rad : INFINITY;
    /* separations of 1, 2, 3, 5, 10, 20 FWHM that fit inside the frame */
    static const double mult[] = {1, 2, 3, 5, 10, 20};
    double rmax = (double)GL_MIN(r->nx, r->ny) / 2.0;
    r->nseps = 0;
    for (size_t k = 0; k < sizeof mult / sizeof mult[0]; k++) {
        double sep = mult[k] * p->fwhm_px;
        if (k > 0 && sep > rmax)
            break;
        r->sep_px[r->nseps] = sep;
        r->rotation_fwhm[r->nseps] = sep * rad / p->fwhm_px;
        r->nseps++;
    }
}

gl_status gl_inspect_report_new(const char *cube_path, const char *angles_path,
                                const gl_inspect_params *p, gl_inspect_report **out)
{
    gl_status st;
    gl_cube *c = NULL;
    gl_inspect_report *r = NULL;
    double *angles = NULL, *work = NULL;
    unsigned char *bgmask = NULL;
    long nangles = 0;
    *out = NULL;

    if (!(p->fwhm_px > 0) || !isfinite(p->fwhm_px))
        return gl_error_set(GL_ERR_USAGE, "FWHM must be a positive number of pixels");
    if (!(p->bg_inner_frac >= 0 && p->bg_inner_frac < 1))
        return gl_error_set(GL_ERR_USAGE, "background inner radius fraction must be in [0, 1)");

    r = gl_calloc(1, sizeof *r);
    if (!r)
        return gl_error_nomem("inspect report");
    snprintf(r->path, sizeof r->path, "%s", cube_path);
    if ((st = gl_fits_image_info(cube_path, &r->fits)))
        goto cleanup;
    if ((st = gl_fits_read_cube(cube_path, 2, &c)))
        goto cleanup;
    if (angles_path) {
        if ((st = gl_angles_read(angles_path, c->nframe, &angles, &nangles)))
            goto cleanup;
        snprintf(r->angles_path, sizeof r->angles_path, "%s", angles_path);
    } else {
        /* a product's own angle table (gloam align, inject) */
        if ((st = gl_angles_table_read(cube_path, c->nframe, &angles, &nangles)))
            goto cleanup;
        if (angles)
            snprintf(r->angles_path, sizeof r->angles_path, "%s[%s]", cube_path, GL_ANGLES_EXTNAME);
    }
    if (angles && gl_angles_look_like_radians(angles, nangles))
        gl_log(GL_LOG_WARN,
               "%s: the angles look like radians (all within +-2 pi): gloam reads degrees; "
               "if they are radians, multiply by 180/pi",
               r->angles_path);
    gl_obsinfo_from_header(c->header, &r->obs);
    r->nx = c->nx;
    r->ny = c->ny;
    r->nchan = c->nchan;
    r->nframe = c->nframe;
    r->nplanes = c->nchan * c->nframe;
    saturation_level(r, &r->sat_rule, &r->sat_level);

    size_t plane = gl_cube_plane_size(c);
    size_t nwork = GL_MAX(2 * plane, 2 * (size_t)r->nplanes);
    r->planes = gl_calloc((size_t)r->nplanes, sizeof *r->planes);
    work = gl_malloc(nwork * sizeof *work);
    bgmask = gl_malloc(plane);
    if (!r->planes || !work || !bgmask) {
        st = gl_error_nomem("inspect statistics");
        goto cleanup;
    }

    /* background region: the star is at (nx/2, ny/2), integer division */
    r->center_x = (double)(c->nx / 2);
    r->center_y = (double)(c->ny / 2);
    r->bg_inner_px = p->bg_inner_frac * (double)GL_MIN(c->nx, c->ny) / 2.0;
    for (long y = 0; y < c->ny; y++)
        for (long x = 0; x < c->nx; x++) {
            double dx = (double)x - r->center_x, dy = (double)y - r->center_y;
            bgmask[(size_t)y * (size_t)c->nx + (size_t)x] =
                sqrt(dx * dx + dy * dy) >= r->bg_inner_px;
        }

    long total_nan = 0;
    for (long f = 0; f < c->nframe; f++)
        for (long ch = 0; ch < c->nchan; ch++) {
            long i = f * c->nchan + ch;
            gl_inspect_plane *ps = &r->planes[i];
            ps->frame = f;
            ps->chan = ch;
            plane_stats(r, gl_cube_plane(c, ch, f), bgmask, work, ps);
            if (ps->nnan == ps->npix) { /* no data: reported, not refused */
                ps->outlier |= GL_INSPECT_OUT_EMPTY;
                r->nempty++;
            }
            total_nan += ps->nnan;
            r->nsat += ps->nsat;
            if (ps->nan_fraction > r->planes[r->worst_nan_plane].nan_fraction)
                r->worst_nan_plane = i;
        }
    r->nan_fraction = (double)total_nan / (double)gl_cube_size(c);

    summarise(r, offsetof(gl_inspect_plane, flux), work, &r->flux, p->outlier_nsigma,
              GL_INSPECT_OUT_FLUX);
    summarise(r, offsetof(gl_inspect_plane, bg_median), work, &r->bg_median, p->outlier_nsigma,
              GL_INSPECT_OUT_BG_MEDIAN);
    summarise(r, offsetof(gl_inspect_plane, bg_sigma), work, &r->bg_sigma, p->outlier_nsigma,
              GL_INSPECT_OUT_BG_SIGMA);
    gl_inspect_range nanr;
    summarise(r, offsetof(gl_inspect_plane, nan_fraction), work, &nanr, 0, 0);
    for (long i = 0; i < r->nplanes; i++) {
        if (r->nplanes >= 3 && r->planes[i].nan_fraction > nanr.median + p->nan_excess)
            r->planes[i].outlier |= GL_INSPECT_OUT_NAN;
        if (r->planes[i].outlier)
            r->noutliers++;
    }

    if (angles)
        rotation(r, angles, nangles, p);
    *out = r;
    r = NULL;
    st = GL_OK;

cleanup:
    gl_free(bgmask);
    gl_free(work);
    gl_free(angles);
    gl_cube_free(c);
    gl_inspect_report_free(r);
    return st;
}
