/*
 * align.c -- the align step from a raw cube to a centred one: bad pixels,
 * centring (through the method table of methods.c), sub-pixel shifts of
 * every channel by the geometry module so that the star lands on
 * (nx/2, ny/2), frame selection on the aligned frames, crop and temporal
 * binning, and the star-position table.
 * 4-D cubes: the star is measured on the mean over channels and every
 * channel of a frame gets the same shift.
 */
#include "align/internal.h"
#include "core/internal.h"
#include "io/internal.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <string.h>
#include <unistd.h>

void gl_align_params_init(gl_align_params *p)
{
    memset(p, 0, sizeof *p);
    p->method = GL_CENTRE_AUTO;
    p->interp = GL_INTERP_FFT;
    p->profile = GL_PROFILE_GAUSSIAN;
    p->precision = 0.01;
    p->spot_search = 5;
    p->bin = 1;
}

void gl_align_result_free(gl_align_result *r)
{
    if (!r)
        return;
    gl_cube_free(r->aligned);
    gl_free(r->x);
    gl_free(r->y);
    gl_free(r->err_x);
    gl_free(r->err_y);
    gl_free(r->quality);
    gl_free(r->flux);
    gl_free(r->correlation);
    gl_free(r->status);
    gl_free(r->angles_out);
    gl_free(r->badpix_map);
    gl_free(r);
}

/* Channel means (NaN-aware) of every frame; aliases the cube for one channel. */
static gl_status measurement_images(const gl_cube *c, float **out, int *owned)
{
    if (c->nchan == 1) {
        *out = c->data;
        *owned = 0;
        return GL_OK;
    }
    gl_status st = gl_cube_channels_average(c, out);
    *owned = st == GL_OK;
    return st;
}

static gl_status check_params(const gl_cube *c, const gl_align_params *p)
{
    if (p->method < GL_CENTRE_AUTO || p->method >= GL_CENTRE_NMETHODS)
        return gl_error_set(GL_ERR_USAGE, "unknown centring method %d", (int)p->method);
    if (!(p->precision >= 0.001 && p->precision <= 1))
        return gl_error_set(GL_ERR_USAGE, "precision %g px is outside [0.001, 1]", p->precision);
    if (p->profile != GL_PROFILE_GAUSSIAN && p->profile != GL_PROFILE_MOFFAT)
        return gl_error_set(GL_ERR_USAGE, "unknown core profile %d", (int)p->profile);
    if (p->crop < 0 || p->crop > GL_MIN(c->nx, c->ny))
        return gl_error_set(GL_ERR_USAGE, "crop size %ld does not fit the %ldx%ld frame", p->crop,
                            c->nx, c->ny);
    if (p->crop > 0 && p->crop < 3)
        return gl_error_set(GL_ERR_USAGE, "crop size %ld is too small", p->crop);
    if (p->bin < 1)
        return gl_error_set(GL_ERR_USAGE, "bin size %ld must be at least 1", p->bin);
    if (c->nx < 8 || c->ny < 8)
        return gl_error_set(GL_ERR_INPUT, "frames of %ldx%ld pixels are too small to align", c->nx,
                            c->ny);
    return GL_OK;
}

/* Refuses a median frame without a star: its brightest 3x3 mean must stand
 * 10 sigma (of a 3x3 mean) above the median level. */
static gl_status check_signal(const float *med, long nx, long ny, const char *name)
{
    long px, py;
    double peak;
    if (!gl_image_peak(med, nx, ny, 1, &px, &py, &peak))
        return gl_error_set(GL_ERR_INPUT, "%s: the frames hold no data (all NaN)", name);
    double bg = gl_image_median(med, nx, ny), noise = gl_image_noise(med, nx, ny) / 3.0;
    if (!(peak - bg > 10 * noise) || !(noise > 0 || peak > bg))
        return gl_error_set(GL_ERR_INPUT,
                            "%s: no star signal: the brightest feature of the "
                            "median frame is only %.1f sigma above the background",
                            name, noise > 0 ? (peak - bg) / noise : 0.0);
    return GL_OK;
}

static gl_status shift_frames(gl_cube *c, const gl_align_params *p, const double *x,
                              const double *y, const int *status)
{
    gl_geom_plan *plan = NULL;
    gl_status st = gl_geom_plan_new(c->nx, c->ny, p->interp, &plan);
    if (st)
        return st;
    double cx = (double)(c->nx / 2), cy = (double)(c->ny / 2);
    int failed = 0;
    long done = 0;
#pragma omp parallel
    {
        gl_geom_work *w = NULL;
        if (gl_geom_work_new(plan, &w)) {
#pragma omp atomic write
            failed = 1;
        }
#pragma omp for schedule(static)
        for (long f = 0; f < c->nframe; f++) {
            if (status[f] == GL_FRAME_KEPT && w)
                for (long ch = 0; ch < c->nchan; ch++)
                    if (gl_geom_shift(plan, w, gl_cube_plane(c, ch, f), cx - x[f], cy - y[f])) {
#pragma omp atomic write
                        failed = 1;
                    }
            long d;
#pragma omp atomic capture
            d = ++done;
            gl_progress("shifting", d, c->nframe);
        }
        gl_geom_work_free(w);
    }
    gl_geom_plan_free(plan);
    return failed ? gl_error_set(GL_ERR_NOMEM, "out of memory (shift work)") : GL_OK;
}

/* What fixes the absolute centre of the method's frames (GLALABSC). */
static const char *absolute_source(gl_centre_method m, const gl_centre_assessment *a)
{
    if (m == GL_CENTRE_SPOTS)
        return "spots";
    if (m == GL_CENTRE_HALO || !a->core_visible)
        return "halo-symmetry";
    return a->core_behind_mask ? "core-behind-mask" : "core";
}

/* Kept frames, binned and cropped, into a new cube; angles averaged. */
static gl_status assemble(const gl_cube *c, const gl_align_params *p, const char *name,
                          const double *angles, const gl_centre_assessment *a, gl_align_result *r)
{
    long cs_x = p->crop > 0 ? p->crop : c->nx, cs_y = p->crop > 0 ? p->crop : c->ny;
    long x0 = c->nx / 2 - cs_x / 2, y0 = c->ny / 2 - cs_y / 2;
    long nout = (r->nkept + p->bin - 1) / p->bin;
    long *kept = gl_malloc((size_t)r->nkept * sizeof *kept);
    gl_status st = GL_OK;
    if (!kept)
        return gl_error_nomem("kept frames");
    for (long f = 0, j = 0; f < c->nframe; f++)
        if (r->status[f] == GL_FRAME_KEPT)
            kept[j++] = f;
    if ((st = gl_cube_new(cs_x, cs_y, c->nchan, nout, &r->aligned)))
        goto cleanup;
    r->aligned->naxis = c->naxis > 2 ? c->naxis : (nout > 1 ? 3 : 2);
    if (angles && !(r->angles_out = gl_malloc((size_t)nout * sizeof *r->angles_out))) {
        st = gl_error_nomem("output angles");
        goto cleanup;
    }
    r->nout = nout;
    long bad_frame = -1;
#pragma omp parallel for schedule(static)
    for (long o = 0; o < nout; o++) {
        long a = o * p->bin, b = GL_MIN(a + p->bin, r->nkept);
        for (long ch = 0; ch < c->nchan; ch++) {
            float *dst = gl_cube_plane(r->aligned, ch, o);
            long nvalid = 0;
            for (long y = 0; y < cs_y; y++)
                for (long x = 0; x < cs_x; x++) {
                    double s = 0;
                    int k = 0;
                    for (long j = a; j < b; j++) {
                        float v = gl_cube_plane(c, ch, kept[j])[(y + y0) * c->nx + x + x0];
                        if (!isnan(v)) {
                            s += v;
                            k++;
                        }
                    }
                    dst[y * cs_x + x] = k ? (float)(s / k) : NAN;
                    nvalid += k > 0;
                }
            if (nvalid == 0) {
#pragma omp critical(align_bad_frame)
                if (bad_frame < 0 || kept[a] < bad_frame)
                    bad_frame = kept[a];
            }
        }
        if (angles) {
            /* mean of angles unwrapped about the first of the bin */
            double s = 0, first = angles[kept[a]];
            for (long j = a; j < b; j++) {
                double d = angles[kept[j]] - first;
                d -= 360.0 * round(d / 360.0);
                s += first + d;
            }
            r->angles_out[o] = s / (double)(b - a);
        }
    }
    if (bad_frame >= 0) {
        st = gl_error_set(GL_ERR_INPUT,
                          "%s: the %ldx%ld region around the star holds no data "
                          "(all NaN) in frame %ld",
                          name, cs_x, cs_y, bad_frame);
        goto cleanup;
    }
    gl_header_free(r->aligned->header);
    r->aligned->header = gl_header_copy(c->header);
    if (!r->aligned->header) {
        st = gl_error_nomem("header");
        goto cleanup;
    }
    gl_header *h = r->aligned->header;
    double crpix, mx = 0, my = 0;
    {
        double *v = gl_malloc((size_t)r->nkept * sizeof *v);
        if (!v) {
            st = gl_error_nomem("median position");
            goto cleanup;
        }
        for (long j = 0; j < r->nkept; j++)
            v[j] = r->x[kept[j]];
        mx = gl_median_d(v, r->nkept);
        for (long j = 0; j < r->nkept; j++)
            v[j] = r->y[kept[j]];
        my = gl_median_d(v, r->nkept);
        gl_free(v);
    }
    /* the crop moves the pixel grid; per-frame shifts cannot be expressed
     * in one WCS, which then describes the star's median position */
    if (gl_header_get_dbl(h, "CRPIX1", &crpix))
        gl_header_set_dbl(h, "CRPIX1", crpix - (double)x0 + (double)(c->nx / 2) - mx,
                          "reference pixel, star-centred frame");
    if (gl_header_get_dbl(h, "CRPIX2", &crpix))
        gl_header_set_dbl(h, "CRPIX2", crpix - (double)y0 + (double)(c->ny / 2) - my,
                          "reference pixel, star-centred frame");
    gl_header_set_str(h, "GLALMETH", gl_centre_method_name(r->method), "star centring method");
    if (r->method == GL_CENTRE_CORE)
        gl_header_set_str(h, "GLALPROF", p->profile == GL_PROFILE_MOFFAT ? "moffat" : "gaussian",
                          "profile fitted to the core");
    gl_header_set_dbl(h, "GLALPREC", 1.0 / gl_align_upsample(p),
                      "[pix] registration / symmetry precision");
    if (r->method_note[0])
        gl_header_add_history(h, r->method_note);
    if (isfinite(a->err[0]) && isfinite(a->err[1])) {
        gl_header_set_dbl(h, "GLALERRX", a->err[0], "[pix] median centring error, x");
        gl_header_set_dbl(h, "GLALERRY", a->err[1], "[pix] median centring error, y");
    }
    if (a->assessed) {
        gl_header_set_dbl(h, "GLALMOTN", a->motion, "[pix] pointing motion rms per axis");
        char line[320];
        snprintf(line, sizeof line, "gloam align: centring errors by method (x/y): %s",
                 a->compared);
        gl_header_add_history(h, line);
    }
    gl_header_set_bool(h, "GLALUNCE", a->uncertain, "centring uncertain (see HISTORY)");
    gl_header_set_str(h, "GLALABSC", absolute_source(r->method, a),
                      "what fixes the absolute star centre");
    if (a->core_behind_mask && (r->method == GL_CENTRE_CORE || r->method == GL_CENTRE_REFERENCE))
        gl_header_add_history(h, "gloam align: absolute centre from the residual core behind the "
                                 "coronagraph (the brighter halo is not point-symmetric about the "
                                 "star); the aberrations move such a core too: its error holds its "
                                 "share of the disagreement with the halo (at most 0.15 FWHM)");
    if (isfinite(a->halo_offset[0]) && isfinite(a->halo_offset[1])) {
        char line[200];
        snprintf(line, sizeof line,
                 "gloam align: the halo's centres of symmetry lie (%+.3f, %+.3f) px from the "
                 "star's core on average (counted in the halo's error)",
                 a->halo_offset[0], a->halo_offset[1]);
        gl_header_add_history(h, line);
    }
    if (a->core_shift[0] != 0 || a->core_shift[1] != 0) {
        char line[200];
        snprintf(line, sizeof line,
                 "gloam align: absolute centre: the residual core's moved by (%+.3f, %+.3f) px "
                 "toward the halo's centre of symmetry (inverse-variance mean)",
                 a->core_shift[0], a->core_shift[1]);
        gl_header_add_history(h, line);
    }
    if (a->symmetry_only)
        gl_header_add_history(h, "gloam align: no satellite spots and no unsaturated core: the "
                                 "absolute centre is only as good as the halo's point symmetry");
    if (a->uncertain)
        gl_header_add_history(h, "gloam align: centring uncertain: check GLALERRX/GLALERRY and "
                                 "the star table");
    gl_header_set_str(h, "GLALINTP", gl_interp_name(p->interp), "sub-pixel shift interpolator");
    gl_header_set_int(h, "GLALNIN", c->nframe, "frames in the input");
    gl_header_set_int(h, "GLALNKEP", r->nkept, "frames kept");
    gl_header_set_int(h, "GLALBIN", p->bin, "frames averaged per output frame");
    gl_header_set_int(h, "GLALCROP", p->crop, "crop size (0: none)");
    gl_header_set_dbl(h, "GLALREJ", p->reject_sigma, "frame rejection threshold, sigma (0: off)");
    gl_header_set_dbl(h, "GLALBPIX", p->badpix_sigma, "bad-pixel threshold, sigma (0: off)");
    char hist[160];
    snprintf(hist, sizeof hist, "gloam align: star moved to (%ld, %ld) by %s centring", cs_x / 2,
             cs_y / 2, gl_centre_method_name(r->method));
    st = gl_header_add_history(h, hist);

cleanup:
    gl_free(kept);
    if (st) {
        gl_cube_free(r->aligned);
        r->aligned = NULL;
    }
    return st;
}

static const char *status_word(int s)
{
    switch (s) {
    case GL_FRAME_KEPT: return "";
    case GL_FRAME_NO_CENTRE: return "no-centre";
    case GL_FRAME_FLUX: return "flux";
    case GL_FRAME_CORRELATION: return "correlation";
    case GL_FRAME_JUMP: return "centre-jump";
    default: return "?";
    }
}

/* A centre far from all the others is a feature taken for the star (a
 * satellite spot, a bright speckle), not pointing jitter: the frame is
 * marked GL_FRAME_JUMP. Far means beyond max(3 FWHM, 5 x the robust spread
 * of the centres (hypot of the per-axis robust sigmas; e^-25 for Gaussian
 * jitter)); pointing jitter of an AO system stays well inside that (common
 * practice). *mx, *my get the median centre (NaN with fewer than 5 frames,
 * when nothing is marked). */
static gl_status reject_jumps(const gl_align_stack *s, const gl_align_params *p, gl_align_result *r,
                              long nf, double *mx, double *my)
{
    double *v = gl_malloc(3 * (size_t)nf * sizeof *v);
    *mx = *my = NAN;
    if (!v)
        return gl_error_nomem("centre check");
    long m = 0;
    for (long f = 0; f < nf; f++)
        if (r->status[f] == GL_FRAME_KEPT) {
            v[m] = r->x[f];
            v[nf + m] = r->y[f];
            m++;
        }
    if (m >= 5) {
        double sx, sy;
        gl_stats_robust(v, (size_t)m, v + 2 * nf, mx, &sx);
        gl_stats_robust(v + nf, (size_t)m, v + 2 * nf, my, &sy);
        double fwhm = p->fwhm;
        long px, py;
        double peak;
        if (!(fwhm > 0) && gl_image_peak(s->sharp, s->nx, s->ny, 2, &px, &py, &peak))
            fwhm = gl_image_fwhm_estimate(s->sharp, s->nx, s->ny, px, py,
                                          gl_image_median(s->sharp, s->nx, s->ny), 20);
        if (!(fwhm > 0) || !isfinite(fwhm))
            fwhm = 4;
        double lim = GL_MAX(3 * fwhm, 5 * hypot(sx, sy));
        for (long f = 0; f < nf; f++)
            if (r->status[f] == GL_FRAME_KEPT && hypot(r->x[f] - *mx, r->y[f] - *my) > lim)
                r->status[f] = GL_FRAME_JUMP;
    }
    gl_free(v);
    return GL_OK;
}

/* Median of the finite values of v (n values; reorders a copy in w). */
static double median_finite(const double *v, long n, double *w)
{
    long m = 0;
    for (long i = 0; i < n; i++)
        if (isfinite(v[i]))
            w[m++] = v[i];
    return gl_median_d(w, m);
}

/* Mean of a - b over the frames with mask set, and the squared standard
 * error of that mean (at least 2 frames). */
static void mean_difference(const double *a, const double *b, const int *mask, long nf,
                            double *mean, double *sem2)
{
    double sm = 0, s2 = 0;
    long n = 0;
    for (long f = 0; f < nf; f++)
        if (mask[f]) {
            sm += a[f] - b[f];
            n++;
        }
    sm /= (double)n;
    for (long f = 0; f < nf; f++)
        if (mask[f])
            s2 += pow(a[f] - b[f] - sm, 2);
    *mean = sm;
    *sem2 = s2 / (double)(n - 1) / (double)n;
}

/* The other centring estimates of every frame (halo, reference, and core
 * when the reference shows an unsaturated core: on a coronagraphic image a
 * core fit catches any speckle and estimates nothing),
 * compared with the chosen one by the N-cornered hat (assess.c) together with
 * the fixed pointing: each method's frame-to-frame error per axis, and the
 * pointing motion. The reference method's single absolute centre gets the
 * standard error of the mean of the per-frame halo-minus-registration
 * differences (single-frame absolute centres scatter by their spread; their
 * mean by that over sqrt(n)). With auto, a method whose error is under 2/3
 * of the chosen one's, when that is above 0.05 px, replaces it. The reported
 * x_err, y_err are the quadrature sum of the method's formal per-frame error,
 * the hat's error and the absolute-centre error. Satellite spots are left
 * out: without spots to lock on, the other methods follow the coronagraph's
 * axis as much as the star, errors correlated with the motion that the hat
 * cannot separate (their own errors add the spots' geometric residual,
 * measure_spots). */
static gl_status compare_methods(const gl_align_stack *s, const gl_align_params *p,
                                 gl_align_result *r, gl_centre_assessment *a)
{
    enum { NM = 4, NV = 5 };
    long nf = s->nframe;
    gl_centre_method list[NM] = {r->method};
    int nm = 1, usable[NM] = {1};
    const gl_centre_method others[3] = {GL_CENTRE_HALO, GL_CENTRE_REFERENCE, GL_CENTRE_CORE};
    gl_star_core found;
    int core = gl_star_core_find(s->sharp, s->nx, s->ny, p, &found);
    for (int k = 0; k < 3; k++)
        if (others[k] != r->method && (others[k] != GL_CENTRE_CORE || core))
            list[nm++] = others[k];
    double *v = gl_malloc((size_t)nf * NV * NM * sizeof *v), *w = gl_malloc((size_t)nf * sizeof *w);
    int *ok = gl_malloc((size_t)nf * (NM + 1) * sizeof *ok), *mask = ok + (size_t)nf * NM;
    gl_status st = GL_OK;
    memset(a, 0, sizeof *a);
    a->err[0] = a->err[1] = a->motion = NAN;
    a->symmetry_only = (r->method == GL_CENTRE_HALO || r->method == GL_CENTRE_REFERENCE) && !core;
    a->core_visible = core;
    a->core_behind_mask = core && found.behind_mask && r->method != GL_CENTRE_SPOTS;
    a->halo_offset[0] = a->halo_offset[1] = a->core_abs[0] = a->core_abs[1] = NAN;
    a->core_shift[0] = a->core_shift[1] = 0;
    if (!v || !w || !ok) {
        st = gl_error_nomem("centring comparison");
        goto cleanup;
    }
    if (r->method == GL_CENTRE_SPOTS)
        goto cleanup;
#define COL(k, j) (v + ((size_t)(k)*NV + (j)) * (size_t)nf)
    memcpy(COL(0, 0), r->x, (size_t)nf * sizeof *v);
    memcpy(COL(0, 1), r->y, (size_t)nf * sizeof *v);
    memcpy(COL(0, 2), r->err_x, (size_t)nf * sizeof *v);
    memcpy(COL(0, 3), r->err_y, (size_t)nf * sizeof *v);
    memcpy(COL(0, 4), r->quality, (size_t)nf * sizeof *v);
    long nkept = 0;
    for (long f = 0; f < nf; f++) {
        ok[f] = r->status[f] == GL_FRAME_KEPT;
        nkept += ok[f];
    }
    for (int k = 1; k < nm; k++) {
        gl_centres c = {COL(k, 0), COL(k, 1), COL(k, 2), COL(k, 3), COL(k, 4), ok + (size_t)k * nf};
        st = gl_centre_ops_get(list[k])->measure(s, p, &c);
        if (st == GL_ERR_INPUT) {
            gl_error_clear();
            st = GL_OK;
            usable[k] = 0;
            continue;
        }
        if (st)
            goto cleanup;
        long n = 0;
        for (long f = 0; f < nf; f++)
            n += ok[f] && c.ok[f];
        /* a method that loses frames would shrink the comparison */
        usable[k] = n >= nkept - nkept / 10;
    }
    int nest = 0, idx[NM];
    long nmask = 0;
    for (long f = 0; f < nf; f++) {
        mask[f] = ok[f];
        for (int k = 1; k < nm; k++)
            if (usable[k] && !ok[(size_t)k * nf + f])
                mask[f] = 0;
        nmask += mask[f];
    }
    for (int k = 0; k < nm; k++)
        if (usable[k])
            idx[nest++] = k;
    if (nest < 2 || nmask < 5) {
        gl_log(GL_LOG_INFO, "centring error: no second method to compare with on enough "
                            "frames; the errors are the method's own");
        goto cleanup;
    }
    double var[2][NM + 1], absv[2][NM] = {{0}}, halo_offset[2] = {NAN, NAN};
    double core_abs[2] = {NAN, NAN}, core_shift[2] = {0, 0};
    for (int ax = 0; ax < 2; ax++) {
        const double *est[NM + 1];
        for (int i = 0; i < nest; i++)
            est[i] = COL(idx[i], ax);
        est[nest] = NULL; /* the fixed pointing */
        if ((st = gl_centre_hat(nest + 1, nf, est, mask, var[ax])))
            goto cleanup;
        /* absolute centres, which the hat (frame-to-frame differences)
         * cannot check: the registration's single one by the per-frame
         * core fits when the reference shows a core, else by the halo
         * (the squared standard error of the mean of their differences);
         * with a core, the halo's symmetry centres by the core: an
         * asymmetric halo (behind a Lyot mask, the mask-edge ring and the
         * speckles pinned to it) moves every halo centre alike, and the
         * mean offset from the core anchor is the halo's absolute error */
        int ih = -1, ir = -1, ic = -1;
        for (int i = 0; i < nest; i++) {
            ih = list[idx[i]] == GL_CENTRE_HALO ? i : ih;
            ir = list[idx[i]] == GL_CENTRE_REFERENCE ? i : ir;
            ic = list[idx[i]] == GL_CENTRE_CORE ? i : ic;
        }
        int check = core && ic >= 0 ? ic : ih, anchor = ic >= 0 ? ic : ir;
        double mean, sem2;
        if (check >= 0 && ir >= 0) {
            mean_difference(est[check], est[ir], mask, nf, &mean, &sem2);
            absv[ax][ir] = sem2;
        }
        if (core && ih >= 0 && anchor >= 0) {
            mean_difference(est[ih], est[anchor], mask, nf, &mean, &sem2);
            absv[ax][ih] = mean * mean + sem2;
            halo_offset[ax] = mean;
            /* a residual core behind a coronagraph is itself moved by the
             * aberrations (the same pinned light): the data cannot say
             * which of it and the halo is off. The squared disagreement is
             * split evenly (as the hat does with a pair it cannot
             * resolve), the core's share bounded by what a compact core is
             * moved (GL_CORE_SHIFT_FWHM), the halo keeping the rest; the
             * core-anchored centres move to the inverse-variance mean of
             * the two absolute centres, whose variance they get (the
             * midpoint while the split is even, the core as the halo's
             * share grows) */
            if (found.behind_mask) {
                double bound = GL_CORE_SHIFT_FWHM * found.fit.fwhm, d2 = mean * mean;
                double vc = fmin(0.5 * d2, bound * bound), vh = d2 - vc;
                core_abs[ax] = sqrt(vc);
                core_shift[ax] = d2 > 0 ? mean * vc / d2 : 0.0;
                double vm = d2 > 0 ? vc * vh / d2 : 0.0;
                absv[ax][ih] = vh + sem2;
                if (ir >= 0)
                    absv[ax][ir] += vm;
                if (ic >= 0)
                    absv[ax][ic] += vm;
            }
        }
    }
    /* choice: total error variance of each method over both axes */
    int best = 0;
    double tot[NM];
    for (int i = 0; i < nest; i++) {
        tot[i] = var[0][i] + var[1][i] + absv[0][i] + absv[1][i];
        if (tot[i] < tot[best])
            best = i;
        snprintf(a->compared + strlen(a->compared), sizeof a->compared - strlen(a->compared),
                 "%s%s %.3f/%.3f px", i ? ", " : "", gl_centre_method_name(list[idx[i]]),
                 sqrt(var[0][i] + absv[0][i]), sqrt(var[1][i] + absv[1][i]));
    }
    a->assessed = 1;
    a->motion = sqrt(0.5 * (var[0][nest] + var[1][nest]));
    if (isfinite(halo_offset[0]) && isfinite(halo_offset[1])) {
        a->halo_offset[0] = halo_offset[0];
        a->halo_offset[1] = halo_offset[1];
        a->core_abs[0] = core_abs[0];
        a->core_abs[1] = core_abs[1];
        a->core_abs_bound = GL_CORE_SHIFT_FWHM * found.fit.fwhm;
        gl_log(GL_LOG_INFO,
               "the halo's centres of symmetry lie (%+.3f, %+.3f) px from the star's core on "
               "average (a halo %s about the star); counted in the halo's error",
               halo_offset[0], halo_offset[1],
               hypot(halo_offset[0], halo_offset[1]) > 0.1 ? "asymmetric" : "nearly symmetric");
    }
    gl_log(GL_LOG_INFO,
           "centring error per frame (x/y), from the comparison of %d methods and the fixed "
           "pointing (N-cornered hat): %s; pointing motion %.3f px rms",
           nest, a->compared, a->motion);
    if (best != 0 && p->method == GL_CENTRE_AUTO && tot[best] < tot[0] / 2.25 &&
        sqrt(0.5 * tot[0]) > 0.05) {
        int k = idx[best];
        gl_log(GL_LOG_INFO,
               "centring method: %s, chosen because its error (%.3f px) is under that of %s "
               "(%.3f px) in the comparison above",
               gl_centre_method_name(list[k]), sqrt(0.5 * tot[best]),
               gl_centre_method_name(r->method), sqrt(0.5 * tot[0]));
        memcpy(r->x, COL(k, 0), (size_t)nf * sizeof *v);
        memcpy(r->y, COL(k, 1), (size_t)nf * sizeof *v);
        memcpy(r->err_x, COL(k, 2), (size_t)nf * sizeof *v);
        memcpy(r->err_y, COL(k, 3), (size_t)nf * sizeof *v);
        memcpy(r->quality, COL(k, 4), (size_t)nf * sizeof *v);
        for (long f = 0; f < nf; f++)
            if (r->status[f] == GL_FRAME_KEPT && !ok[(size_t)k * nf + f])
                r->status[f] = GL_FRAME_NO_CENTRE;
        r->method = list[k];
        double mx, my;
        if ((st = reject_jumps(s, p, r, nf, &mx, &my)))
            goto cleanup;
        a->symmetry_only =
            (r->method == GL_CENTRE_HALO || r->method == GL_CENTRE_REFERENCE) && !core;
    } else {
        best = 0;
    }
    if (found.behind_mask &&
        (list[idx[best]] == GL_CENTRE_CORE || list[idx[best]] == GL_CENTRE_REFERENCE)) {
        for (long f = 0; f < nf; f++) {
            r->x[f] += core_shift[0];
            r->y[f] += core_shift[1];
        }
        a->core_shift[0] = core_shift[0];
        a->core_shift[1] = core_shift[1];
        if (core_shift[0] != 0 || core_shift[1] != 0)
            gl_log(GL_LOG_INFO,
                   "absolute centre: the residual core's, moved by (%+.3f, %+.3f) px toward the "
                   "halo's centre of symmetry (the inverse-variance mean of the two)",
                   core_shift[0], core_shift[1]);
    }
    r->abs_err_x = sqrt(absv[0][best]);
    r->abs_err_y = sqrt(absv[1][best]);
    for (int ax = 0; ax < 2; ax++) {
        double *e = ax ? r->err_y : r->err_x;
        for (long f = 0; f < nf; f++)
            e[f] = isfinite(r->x[f])
                       ? sqrt((isfinite(e[f]) ? e[f] * e[f] : 0.0) + var[ax][best] + absv[ax][best])
                       : NAN;
    }
#undef COL
cleanup:
    if (w) {
        a->err[0] = median_finite(r->err_x, nf, w);
        a->err[1] = median_finite(r->err_y, nf, w);
    }
    gl_free(v);
    gl_free(w);
    gl_free(ok);
    return st;
}

/* Centres every frame with the method asked for, or with the automatic
 * choice and its fallbacks: a method that keeps fewer than half of the
 * frames (no centre, or a centre that jumps away from the others) has not
 * found the star, and the next method is tried (auto) or the run stops
 * (a method asked for). Fills r->x, y, err_x, err_y, quality, status and
 * r->method. */
static gl_status centre_frames(const gl_align_stack *s, const gl_align_params *p, const char *name,
                               gl_align_result *r, gl_centre_assessment *a)
{
    long nf = s->nframe;
    int tried[GL_CENTRE_NMETHODS] = {0};
    int *ok = gl_malloc((size_t)nf * sizeof *ok);
    gl_status st = GL_OK;
    char reason[512], left[256] = "";
    if (!ok)
        return gl_error_nomem("centring");
    for (;;) {
        gl_centre_method m = p->method;
        if (m == GL_CENTRE_AUTO) {
            m = gl_centre_auto(s, p, tried, reason, sizeof reason);
            if (m == GL_CENTRE_AUTO) {
                st = gl_error_set(GL_ERR_INPUT,
                                  "%s: no centring method found the star in most frames (%s); "
                                  "see the log, or try --method with --fwhm or --spot-radius",
                                  name, left);
                break;
            }
            gl_log(GL_LOG_INFO, "centring method: %s, chosen because the data show %s",
                   gl_centre_method_name(m), reason);
        } else {
            gl_log(GL_LOG_INFO, "centring method: %s (as asked)", gl_centre_method_name(m));
        }
        tried[m] = 1;
        r->method = m;
        const gl_centre_ops *ops = gl_centre_ops_get(m);
        gl_centres cen = {r->x, r->y, r->err_x, r->err_y, r->quality, ok};
        st = ops->measure(s, p, &cen);
        if (st && !(st == GL_ERR_INPUT && p->method == GL_CENTRE_AUTO))
            break;
        long nok = 0, nfail = 0;
        double mx = NAN, my = NAN;
        if (!st) {
            for (long f = 0; f < nf; f++)
                r->status[f] = ok[f] ? GL_FRAME_KEPT : GL_FRAME_NO_CENTRE;
            if ((st = reject_jumps(s, p, r, nf, &mx, &my)))
                break;
            for (long f = 0; f < nf; f++)
                nok += r->status[f] == GL_FRAME_KEPT;
        } else {
            gl_error_clear();
            st = GL_OK;
        }
        nfail = nf - nok;
        if (2 * nok >= nf) {
            for (long f = 0; f < nf; f++)
                if (r->status[f] == GL_FRAME_NO_CENTRE)
                    gl_log(GL_LOG_WARN, "%s: frame %ld rejected: the %s centring found no star",
                           name, f, ops->name);
                else if (r->status[f] == GL_FRAME_JUMP)
                    gl_log(GL_LOG_WARN,
                           "%s: frame %ld rejected: its centre (%.2f, %.2f) lies %.1f px from "
                           "the others' median (%.2f, %.2f): a satellite spot or another "
                           "feature taken for the star",
                           name, f, r->x[f], r->y[f], hypot(r->x[f] - mx, r->y[f] - my), mx, my);
            break;
        }
        char what[128];
        snprintf(what, sizeof what, "%s%s lost %ld of %ld frames", left[0] ? "; " : "", ops->name,
                 nfail, nf);
        snprintf(left + strlen(left), sizeof left - strlen(left), "%s", what);
        if (p->method != GL_CENTRE_AUTO) {
            st = gl_error_set(GL_ERR_INPUT,
                              "%s: the %s centring found the star in only %ld of the %ld frames "
                              "(no centre, or a centre far from the others): it does not suit "
                              "these data; try another --method (auto falls back by itself)",
                              name, ops->name, nok, nf);
            break;
        }
        gl_log(GL_LOG_WARN,
               "%s: the %s centring found the star in only %ld of the %ld frames; trying the "
               "next method",
               name, ops->name, nok, nf);
    }
    if (!st && left[0])
        snprintf(r->method_note, sizeof r->method_note,
                 "gloam align: centring fell back to %s (%s)", gl_centre_method_name(r->method),
                 left);
    gl_free(ok);
    if (!st)
        st = compare_methods(s, p, r, a);
    if (!st)
        gl_centre_judge(a);
    return st;
}

gl_status gl_align_run(gl_cube *cube, const double *angles, const char *name,
                       const gl_align_params *p, gl_align_result **out)
{
    gl_status st;
    gl_align_result *r = NULL;
    float *meas = NULL, *median = NULL, *sharp = NULL;
    int owned = 0;
    size_t npix = gl_cube_plane_size(cube);
    long nf = cube->nframe;
    *out = NULL;
    if ((st = check_params(cube, p))) {
        if (st == GL_ERR_INPUT)
            st = gl_align_error_wrap(st, name);
        return st;
    }
    r = gl_calloc(1, sizeof *r);
    if (!r)
        return gl_error_nomem("align result");
    r->nframe = nf;
    r->x = gl_malloc((size_t)nf * sizeof(double));
    r->y = gl_malloc((size_t)nf * sizeof(double));
    r->err_x = gl_malloc((size_t)nf * sizeof(double));
    r->err_y = gl_malloc((size_t)nf * sizeof(double));
    r->quality = gl_malloc((size_t)nf * sizeof(double));
    r->flux = gl_malloc((size_t)nf * sizeof(double));
    r->correlation = gl_malloc((size_t)nf * sizeof(double));
    r->status = gl_calloc((size_t)nf, sizeof(int));
    median = gl_malloc(npix * sizeof *median);
    if (!r->x || !r->y || !r->err_x || !r->err_y || !r->quality || !r->flux || !r->correlation ||
        !r->status || !median) {
        st = gl_error_nomem("align result");
        goto cleanup;
    }

    if (p->badpix_sigma > 0) {
        if (!(r->badpix_map = gl_malloc(npix * sizeof *r->badpix_map))) {
            st = gl_error_nomem("bad-pixel map");
            goto cleanup;
        }
        if ((st = gl_badpix_fix(cube, p->badpix_sigma, r->badpix_map, &r->nbad_static,
                                &r->nbad_transient)))
            goto cleanup;
        gl_log(GL_LOG_INFO,
               "bad pixels: %ld static (hot or cold), %ld transient (pixel-frames) "
               "above %.1f sigma, replaced from their neighbours",
               r->nbad_static, r->nbad_transient, p->badpix_sigma);
    }

    if ((st = measurement_images(cube, &meas, &owned)))
        goto cleanup;
    {
        long *idx = gl_malloc((size_t)nf * sizeof *idx);
        if (!idx) {
            st = gl_error_nomem("median frame");
            goto cleanup;
        }
        long m = gl_spread_frames(nf, GL_MEDIAN_MAX_FRAMES, idx);
        st = gl_median_frame(meas, cube->nx, cube->ny, idx, m, median);
        gl_free(idx);
        if (st)
            goto cleanup;
    }
    if ((st = check_signal(median, cube->nx, cube->ny, name)))
        goto cleanup;

    gl_align_stack stack = {meas, median, NULL, cube->nx, cube->ny, nf, name};
    if (!(sharp = gl_malloc(npix * sizeof *sharp))) {
        st = gl_error_nomem("reference frame");
        goto cleanup;
    }
    if ((st = gl_sharp_reference(&stack, p, sharp)))
        goto cleanup;
    stack.sharp = sharp;
    gl_centre_assessment assessment;
    if ((st = centre_frames(&stack, p, name, r, &assessment)))
        goto cleanup;
    if ((st = shift_frames(cube, p, r->x, r->y, r->status)))
        goto cleanup;
    if (owned) {
        gl_free(meas);
        meas = NULL;
        owned = 0;
        if ((st = measurement_images(cube, &meas, &owned)))
            goto cleanup;
    }
    if ((st = gl_select_frames(owned ? meas : cube->data, cube->nx, cube->ny, nf, p->reject_sigma,
                               name, r->status, r->flux, r->correlation)))
        goto cleanup;
    for (long f = 0; f < nf; f++)
        r->nkept += r->status[f] == GL_FRAME_KEPT;
    if (r->nkept == 0) {
        st = gl_error_set(GL_ERR_INPUT,
                          "%s: every frame was rejected (%ld frames; see the "
                          "log for the reasons)",
                          name, nf);
        goto cleanup;
    }
    if (r->nkept < nf)
        gl_log(GL_LOG_INFO, "%ld of %ld frames kept", r->nkept, nf);
    st = assemble(cube, p, name, angles, &assessment, r);
    if (!st)
        gl_centre_warn(name, r, &assessment);

cleanup:
    if (owned)
        gl_free(meas);
    gl_free(median);
    gl_free(sharp);
    if (st) {
        gl_align_result_free(r);
        return st;
    }
    *out = r;
    return GL_OK;
}

gl_status gl_align_table_write_csv(const char *path, const gl_align_result *r, const double *angles)
{
    FILE *fp = fopen(path, "w");
    if (!fp)
        return gl_error_set(GL_ERR_IO, "%s: cannot create (%s)", path, strerror(errno));
    fprintf(fp,
            "frame,x,y,x_err,y_err,method,quality,flux,correlation,kept,reason,x_err_abs,"
            "y_err_abs%s\n",
            angles ? ",angle" : "");
    const char *mname = gl_centre_method_name(r->method);
    for (long f = 0; f < r->nframe; f++) {
        double v[7] = {r->x[f],       r->y[f],    r->err_x[f],      r->err_y[f],
                       r->quality[f], r->flux[f], r->correlation[f]};
        fprintf(fp, "%ld", f);
        for (int k = 0; k < 7; k++) {
            if (k == 4)
                fprintf(fp, ",%s", mname);
            fputc(',', fp);
            if (isfinite(v[k])) /* no value: an empty field */
                fprintf(fp, "%.10g", v[k]);
        }
        fprintf(fp, ",%d,%s", r->status[f] == GL_FRAME_KEPT, status_word(r->status[f]));
        /* the part of x_err, y_err common to every frame */
        for (int ax = 0; ax < 2; ax++) {
            double e = ax ? r->abs_err_y : r->abs_err_x;
            fputc(',', fp);
            if (isfinite(r->x[f]) && isfinite(e))
                fprintf(fp, "%.10g", e);
        }
        if (angles)
            fprintf(fp, ",%.10g", angles[f]);
        fputc('\n', fp);
    }
    int err = ferror(fp);
    if (fclose(fp) != 0 || err) {
        unlink(path);
        return gl_error_set(GL_ERR_IO, "%s: write error", path);
    }
    /* the ECSV twin: types and units of the columns above */
    static const gl_ecsv_column cols[] = {
        {"frame", NULL, "int64"},         {"x", "pix", "float64"},
        {"y", "pix", "float64"},          {"x_err", "pix", "float64"},
        {"y_err", "pix", "float64"},      {"method", NULL, "string"},
        {"quality", NULL, "float64"},     {"flux", NULL, "float64"},
        {"correlation", NULL, "float64"}, {"kept", NULL, "int64"},
        {"reason", NULL, "string"},       {"x_err_abs", "pix", "float64"},
        {"y_err_abs", "pix", "float64"},  {"angle", "deg", "float64"}};
    gl_status st = gl_table_ecsv_write(path, angles ? 14 : 13, cols, NULL);
    if (st)
        unlink(path);
    return st;
}
