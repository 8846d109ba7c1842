/*
 * methods.c -- the centring methods behind one interface (a table of
 * gl_centre_ops), and the automatic choice between them.
 *
 *  core       per-frame profile fit, Gaussian or Moffat (profile.c)
 *  reference  per-frame cross-correlation with a reference frame (xcorr.c;
 *             Guizar-Sicairos et al. 2008) plus one absolute centre of the
 *             reference: a Gaussian fit when the star is an unsaturated
 *             compact peak or a residual core behind a coronagraph (a
 *             compact peak near the halo's centre of symmetry, fainter than
 *             the mask-edge ring), else halo symmetry
 *  spots      satellite spots found on the reference, refitted in every
 *             frame (spots.c)
 *  halo       per-frame centre of point symmetry (xcorr.c)
 *
 * Automatic choice (common practice, no published rule): satellite spots
 * when four are found, are comparable to the brightest feature and cross at
 * the centre of symmetry of the halo (a quadrilateral of speckles or a
 * companion does not); otherwise a core fit when the reference shows an
 * unsaturated compact star or a residual core bright enough in single frames, the reference
 * registration when it is too faint in single frames; otherwise the halo
 * symmetry of each frame (which followed the star better than registration
 * on simulated coronagraphic sequences, where the speckles evolve).
 * gl_centre_auto skips methods already tried, so that the caller can fall
 * back when a method loses most of the frames.
 */
#include "align/internal.h"
#include "core/internal.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

static const char *const method_names[GL_CENTRE_NMETHODS] = {"core", "reference", "spots", "halo"};

int gl_centre_method_from_name(const char *name)
{
    if (strcmp(name, "auto") == 0)
        return GL_CENTRE_AUTO;
    for (int i = 0; i < GL_CENTRE_NMETHODS; i++)
        if (strcmp(name, method_names[i]) == 0)
            return i;
    return -2;
}

const char *gl_centre_method_name(gl_centre_method m)
{
    return m >= 0 && m < GL_CENTRE_NMETHODS ? method_names[m] : "auto";
}

/* ---- profile fits ------------------------------------------------------- */

typedef struct profile_ctx {
    gl_profile_kind kind;
    const gl_align_params *p;
} profile_ctx;

static int profile_frame(const float *img, long nx, long ny, const void *ctx, double *x, double *y,
                         double *ex, double *ey, double *q)
{
    const profile_ctx *c = ctx;
    gl_profile_fit fit;
    if (gl_profile_centre(img, nx, ny, c->kind, c->p, &fit))
        return -1;
    *x = fit.x;
    *y = fit.y;
    *ex = fit.err_x;
    *ey = fit.err_y;
    *q = fit.rms_residual / fit.amplitude;
    return 0;
}

/* Stamp half-size for a residual core: the ring of the mask's edge lies
 * around it, so the stamp covers the core to 1.5 FWHM (past its first dark
 * ring, 1.2 FWHM for an Airy core, Born & Wolf sec. 8.5) instead of the
 * 2 FWHM of a free star; --stamp when given. */
static int core_stamp(const gl_align_params *p, double fwhm)
{
    if (p->stamp_half > 0)
        return p->stamp_half;
    return isfinite(fwhm) && fwhm > 0 ? (int)GL_MIN(GL_MAX(ceil(1.5 * fwhm), 3), 32) : 4;
}

/* ---- frames registered on the reference -------------------------------- */

/* What a method makes of frame f once its registration shift (dx, dy) onto
 * the reference and the residual err of the match are known; shifted is 0
 * (and dx, dy, err NaN) where the shift could not be measured. It fills
 * c's entries for f and nothing else, so frames run in parallel. */
typedef void (*shifted_frame_fn)(const float *img, long f, int shifted, double dx, double dy,
                                 double err, const void *ctx, gl_centres *c);

/* The one loop over frames registered on ref (upsampled DFT cross-correlation,
 * Guizar-Sicairos et al. 2008): a plan built once, a work space per thread,
 * a static schedule, progress under task; fn turns each shift into a centre.
 * Returns a no-memory status naming work when a thread's work space failed
 * (those frames are marked as not shifted). */
static gl_status each_frame_shifted(const gl_align_stack *s, const gl_align_params *p,
                                    const float *ref, const char *task, const char *work,
                                    shifted_frame_fn fn, const void *ctx, gl_centres *c)
{
    gl_xcorr_plan *plan = NULL;
    gl_status st = gl_xcorr_plan_new(ref, s->nx, s->ny, gl_align_upsample(p), &plan);
    if (st)
        return st;
    size_t npix = (size_t)s->nx * (size_t)s->ny;
    int nomem = 0;
    long done = 0;
#pragma omp parallel
    {
        gl_xcorr_work *w = NULL;
        if (gl_xcorr_work_new(plan, &w)) {
#pragma omp atomic write
            nomem = 1;
        }
#pragma omp for schedule(static)
        for (long f = 0; f < s->nframe; f++) {
            const float *img = s->img + (size_t)f * npix;
            double dx = NAN, dy = NAN, err = NAN;
            int shifted = w && gl_align_xcorr_shift(plan, w, img, &dx, &dy, &err) == GL_OK;
            fn(img, f, shifted, dx, dy, err, ctx, c);
            long d;
#pragma omp atomic capture
            d = ++done;
            gl_progress(task, d, s->nframe);
        }
        gl_xcorr_work_free(w);
    }
    gl_xcorr_plan_free(plan);
    return nomem ? gl_error_nomem(work) : GL_OK;
}

typedef struct core_guided_ctx {
    const gl_align_stack *s;
    const gl_align_params *p; /* the caller's options */
    const gl_align_params *q; /* with the core's stamp and FWHM */
    const gl_profile_fit *ref;
} core_guided_ctx;

static void core_guided_frame(const float *img, long f, int shifted, double dx, double dy,
                              double err, const void *ctx, gl_centres *c)
{
    const core_guided_ctx *g = ctx;
    const gl_align_stack *s = g->s;
    gl_profile_fit fit;
    long gx, gy;
    (void)err;
    c->ok[f] = 0;
    c->x[f] = c->y[f] = c->err_x[f] = c->err_y[f] = c->quality[f] = NAN;
    if (shifted && (gx = lround(g->ref->x - dx)) >= 2 && gx < s->nx - 2 &&
        (gy = lround(g->ref->y - dy)) >= 2 && gy < s->ny - 2 &&
        gl_profile_centre_at(img, s->nx, s->ny, gx, gy, GL_CORE_SEARCH_PX, g->p->profile, g->q,
                             &fit) == 0 &&
        isfinite(fit.x) && isfinite(fit.y)) {
        c->x[f] = fit.x;
        c->y[f] = fit.y;
        c->err_x[f] = fit.err_x;
        c->err_y[f] = fit.err_y;
        c->quality[f] = fit.rms_residual / fit.amplitude;
        c->ok[f] = 1;
    }
}

/* Behind a coronagraph the core is not the brightest feature of a frame:
 * each frame's fit starts at the reference's core moved by the frame's
 * registration shift (as the spots are found, measure_spots). */
static gl_status measure_core_guided(const gl_align_stack *s, const gl_align_params *p,
                                     const gl_profile_fit *ref, gl_centres *c)
{
    gl_align_params q = *p;
    q.stamp_half = core_stamp(p, ref->fwhm);
    if (!(q.fwhm > 0))
        q.fwhm = ref->fwhm;
    core_guided_ctx g = {s, p, &q, ref};
    return each_frame_shifted(s, p, s->sharp, "centring", "core work", core_guided_frame, &g, c);
}

static gl_status measure_core(const gl_align_stack *s, const gl_align_params *p, gl_centres *c)
{
    gl_star_core core;
    if (gl_star_core_find(s->sharp, s->nx, s->ny, p, &core) && core.behind_mask)
        return measure_core_guided(s, p, &core.fit, c);
    profile_ctx ctx = {p->profile, p};
    gl_centres_each_frame(s, profile_frame, &ctx, c);
    return GL_OK;
}

/* ---- star or halo? ------------------------------------------------------ */

/* The fit tests of an unsaturated compact star: a Gaussian describes it
 * (width in range, fit residual below 10 per cent of the peak) and its top
 * is not flat (a saturated core has several pixels at the maximum). */
static int compact_fit(const float *img, long nx, long ny, const gl_profile_fit *fit)
{
    if (!(fit->fwhm > 0.8 && fit->fwhm < GL_MIN(nx, ny) / 4.0))
        return 0;
    if (!(fit->rms_residual < 0.1 * fit->amplitude))
        return 0;
    long px = lround(fit->x), py = lround(fit->y);
    double vmax = -INFINITY;
    for (long y = GL_MAX(py - 2, 0); y <= GL_MIN(py + 2, ny - 1); y++)
        for (long x = GL_MAX(px - 2, 0); x <= GL_MIN(px + 2, nx - 1); x++)
            if (img[y * nx + x] > vmax)
                vmax = img[y * nx + x];
    int nflat = 0;
    for (long y = GL_MAX(py - 2, 0); y <= GL_MIN(py + 2, ny - 1); y++)
        for (long x = GL_MAX(px - 2, 0); x <= GL_MIN(px + 2, nx - 1); x++)
            if (vmax - img[y * nx + x] <= 1e-3 * (vmax - fit->background))
                nflat++;
    return nflat <= 2;
}

/* Mean of the 3x3 box at (x, y), NaN pixels skipped. */
static double box3(const float *img, long nx, long x, long y)
{
    double s = 0;
    int n = 0;
    for (long v = y - 1; v <= y + 1; v++)
        for (long u = x - 1; u <= x + 1; u++)
            if (!isnan(img[v * nx + u])) {
                s += img[v * nx + u];
                n++;
            }
    return n ? s / n : NAN;
}

/* The brightest local maximum of the 3x3 box mean within r px of (cx, cy),
 * 2 px from the edge at least; 0 when there is none. */
static int local_peak_near(const float *img, long nx, long ny, double cx, double cy, double r,
                           long *px, long *py)
{
    double best = -INFINITY;
    int found = 0;
    for (long y = GL_MAX(2, (long)floor(cy - r)); y <= GL_MIN(ny - 3, (long)ceil(cy + r)); y++)
        for (long x = GL_MAX(2, (long)floor(cx - r)); x <= GL_MIN(nx - 3, (long)ceil(cx + r));
             x++) {
            if (hypot(x - cx, y - cy) > r)
                continue;
            double v = box3(img, nx, x, y);
            if (!(v > best))
                continue;
            int top = 1;
            for (long dy = -1; dy <= 1 && top; dy++)
                for (long dx = -1; dx <= 1 && top; dx++)
                    if ((dx || dy) && box3(img, nx, x + dx, y + dy) > v)
                        top = 0;
            if (top) {
                best = v;
                *px = x;
                *py = y;
                found = 1;
            }
        }
    return found;
}

int gl_star_core_find(const float *img, long nx, long ny, const gl_align_params *p, gl_star_core *c)
{
    memset(c, 0, sizeof *c);
    c->sx = c->sy = NAN;
    if (gl_align_symmetry_centre(img, nx, ny, gl_align_upsample(p), &c->sx, &c->sy)) {
        gl_error_clear();
        c->sx = c->sy = NAN;
    }
    int have_sym = isfinite(c->sx) && isfinite(c->sy);
    if (gl_profile_centre(img, nx, ny, GL_PROFILE_GAUSSIAN, p, &c->fit) == 0 &&
        compact_fit(img, nx, ny, &c->fit)) {
        /* a compact feature far from the frame's centre of symmetry is not
         * the star (a satellite spot, a companion, a speckle) */
        if (!have_sym || hypot(c->fit.x - c->sx, c->fit.y - c->sy) <= 3 * GL_MAX(c->fit.fwhm, 1.0))
            return 1;
        c->far = 1;
        c->peak = c->fit;
    }
    gl_error_clear();
    if (!have_sym)
        return 0;
    /* behind a coronagraph the brightest features are speckles and the
     * mask-edge ring; the star shows as a fainter residual core near the
     * halo's centre of symmetry (which an asymmetric halo pulls away from
     * the star, up to 3 px on simulated Lyot sequences) */
    long px, py;
    gl_profile_fit fit;
    gl_align_params q = *p;
    if (!local_peak_near(img, nx, ny, c->sx, c->sy, GL_CORE_SEARCH_PX, &px, &py))
        return 0;
    q.stamp_half =
        core_stamp(p, gl_image_fwhm_estimate(img, nx, ny, px, py, gl_image_median(img, nx, ny),
                                             GL_CORE_SEARCH_PX));
    /* the first guess of the width counts ring pixels too: refitted on the
     * stamp that the fitted width gives */
    int rc =
        gl_profile_centre_at(img, nx, ny, px, py, GL_CORE_SEARCH_PX, GL_PROFILE_GAUSSIAN, &q, &fit);
    if (rc == 0 && p->stamp_half <= 0 && core_stamp(p, fit.fwhm) != q.stamp_half) {
        q.stamp_half = core_stamp(p, fit.fwhm);
        px = lround(fit.x);
        py = lround(fit.y);
        rc = gl_profile_centre_at(img, nx, ny, px, py, GL_CORE_SEARCH_PX, GL_PROFILE_GAUSSIAN, &q,
                                  &fit);
    }
    if (rc != 0 || !compact_fit(img, nx, ny, &fit) ||
        hypot(fit.x - c->sx, fit.y - c->sy) > GL_CORE_SEARCH_PX ||
        !(fit.amplitude > 5 * gl_image_noise(img, nx, ny))) {
        gl_error_clear();
        return 0;
    }
    c->fit = fit;
    c->behind_mask = 1;
    return 1;
}

int gl_star_core_visible(const gl_align_stack *s, const gl_align_params *p)
{
    gl_star_core c;
    return gl_star_core_find(s->sharp, s->nx, s->ny, p, &c);
}

/* ---- registration ------------------------------------------------------- */

/* A sharp reference: up to 64 frames spread over the sequence, registered to
 * the (jitter-blurred) median frame, shifted onto it, and median-combined.
 * Its centre measured by a fit or by symmetry is then the centre that the
 * registration of every frame refers to. */
gl_status gl_sharp_reference(const gl_align_stack *s, const gl_align_params *p, float *ref)
{
    long nsub = GL_MIN(s->nframe, 64);
    size_t npix = (size_t)s->nx * (size_t)s->ny;
    gl_xcorr_plan *xp = NULL;
    gl_geom_plan *gp = NULL;
    float *buf = gl_malloc(npix * (size_t)nsub * sizeof *buf);
    gl_status st = buf ? GL_OK : gl_error_nomem("registration reference");
    if (!st)
        st = gl_xcorr_plan_new(s->median, s->nx, s->ny, gl_align_upsample(p), &xp);
    if (!st)
        st = gl_geom_plan_new(s->nx, s->ny, p->interp, &gp);
    int nomem = 0;
    if (!st) {
#pragma omp parallel
        {
            gl_xcorr_work *xw = NULL;
            gl_geom_work *gw = NULL;
            if (gl_xcorr_work_new(xp, &xw) || gl_geom_work_new(gp, &gw)) {
#pragma omp atomic write
                nomem = 1;
            }
#pragma omp for schedule(static)
            for (long k = 0; k < nsub; k++) {
                float *slot = buf + (size_t)k * npix;
                long f = k * s->nframe / nsub;
                memcpy(slot, s->img + (size_t)f * npix, npix * sizeof *slot);
                double dx, dy;
                if (!xw || !gw || gl_align_xcorr_shift(xp, xw, slot, &dx, &dy, NULL) ||
                    gl_geom_shift(gp, gw, slot, dx, dy))
                    for (size_t i = 0; i < npix; i++)
                        slot[i] = NAN;
            }
            gl_geom_work_free(gw);
            gl_xcorr_work_free(xw);
        }
        st = nomem ? gl_error_nomem("registration reference")
                   : gl_median_frame(buf, s->nx, s->ny, NULL, nsub, ref);
    }
    gl_geom_plan_free(gp);
    gl_xcorr_plan_free(xp);
    gl_free(buf);
    return st;
}

typedef struct register_ctx {
    double cx, cy;   /* the reference's absolute centre */
    double ecx, ecy; /* and its uncertainty */
    double quant;    /* rounding to the 1/upsample grid */
} register_ctx;

static void register_frame(const float *img, long f, int shifted, double dx, double dy, double err,
                           const void *ctx, gl_centres *c)
{
    const register_ctx *r = ctx;
    (void)img;
    (void)shifted; /* dx, dy are NaN then */
    /* frame f shifted by (dx, dy) matches the median frame */
    c->x[f] = r->cx - dx;
    c->y[f] = r->cy - dy;
    c->err_x[f] = hypot(r->ecx, r->quant);
    c->err_y[f] = hypot(r->ecy, r->quant);
    c->quality[f] = err;
    c->ok[f] = isfinite(dx) && isfinite(dy);
}

static gl_status measure_register(const gl_align_stack *s, const gl_align_params *p, gl_centres *c)
{
    gl_star_core core;
    double cx, cy, ecx, ecy;
    const float *ref = s->sharp;
    gl_status st = GL_OK;
    int fitted = gl_star_core_find(ref, s->nx, s->ny, p, &core);
    if (core.far)
        gl_log(GL_LOG_WARN,
               "registration: the compact peak at (%.2f, %.2f) lies %.1f px from the "
               "frame's centre of symmetry (%.2f, %.2f): not the star; taking %s",
               core.peak.x, core.peak.y, hypot(core.peak.x - core.sx, core.peak.y - core.sy),
               core.sx, core.sy,
               fitted ? "the residual core near that centre" : "the symmetry centre");
    if (fitted) {
        cx = core.fit.x;
        cy = core.fit.y;
        ecx = core.fit.err_x;
        ecy = core.fit.err_y;
        if (core.behind_mask)
            gl_log(GL_LOG_INFO,
                   "registration: absolute centre (%.3f, %.3f) from a Gaussian fit of the "
                   "residual core (FWHM %.2f px, fainter than the brightest feature) that the "
                   "registered median frame shows %.2f px from its halo's centre of symmetry "
                   "(%.3f, %.3f)",
                   cx, cy, core.fit.fwhm, hypot(cx - core.sx, cy - core.sy), core.sx, core.sy);
        else
            gl_log(GL_LOG_INFO,
                   "registration: absolute centre (%.3f, %.3f) from a Gaussian fit of "
                   "the registered median frame",
                   cx, cy);
    } else {
        cx = core.sx;
        cy = core.sy;
        if (!isfinite(cx) || !isfinite(cy)) {
            st = gl_error_set(GL_ERR_NUMERIC,
                              "%s: no centre of symmetry in the registered "
                              "median frame",
                              s->name);
            goto cleanup;
        }
        ecx = ecy = 0.5 / gl_align_upsample(p);
        gl_log(GL_LOG_INFO,
               "registration: absolute centre (%.3f, %.3f) from the point symmetry "
               "of the registered median frame",
               cx, cy);
    }
    register_ctx r = {cx, cy, ecx, ecy, 1.0 / (gl_align_upsample(p) * sqrt(12.0))};
    st = each_frame_shifted(s, p, ref, "registering", "registration work", register_frame, &r, c);
cleanup:
    return st;
}

/* ---- symmetry ----------------------------------------------------------- */

static gl_status measure_symmetry(const gl_align_stack *s, const gl_align_params *p, gl_centres *c)
{
    gl_xcorr_plan *plan = NULL;
    gl_status st = gl_symmetry_plan_new(s->nx, s->ny, gl_align_upsample(p), &plan);
    if (st)
        return st;
    size_t npix = (size_t)s->nx * (size_t)s->ny;
    int nomem = 0;
    long done = 0;
#pragma omp parallel
    {
        gl_xcorr_work *w = NULL;
        fftw_complex *spec = gl_malloc((size_t)(s->nx / 2 + 1) * (size_t)s->ny * sizeof *spec);
        if (gl_xcorr_work_new(plan, &w) || !spec) {
#pragma omp atomic write
            nomem = 1;
        }
#pragma omp for schedule(static)
        for (long f = 0; f < s->nframe; f++) {
            double x = NAN, y = NAN;
            c->ok[f] =
                w && spec &&
                gl_symmetry_centre_with(plan, w, spec, s->img + (size_t)f * npix, &x, &y) == GL_OK;
            c->x[f] = x;
            c->y[f] = y;
            c->err_x[f] = c->err_y[f] = NAN; /* no formal uncertainty */
            c->quality[f] = NAN;
            long d;
#pragma omp atomic capture
            d = ++done;
            gl_progress("centring", d, s->nframe);
        }
        gl_free(spec);
        gl_xcorr_work_free(w);
    }
    gl_xcorr_plan_free(plan);
    return nomem ? gl_error_nomem("symmetry work") : GL_OK;
}

/* ---- satellite spots ---------------------------------------------------- */

typedef struct spots_ctx {
    const gl_align_stack *s;
    const gl_align_params *p;
    const gl_spots *ref; /* the spots of the reference */
} spots_ctx;

static void spots_frame(const float *img, long f, int shifted, double dx, double dy, double err,
                        const void *ctx, gl_centres *c)
{
    const spots_ctx *g = ctx;
    gl_spots guess = *g->ref, sp;
    (void)err;
    c->ok[f] = 0;
    c->x[f] = c->y[f] = c->err_x[f] = c->err_y[f] = c->quality[f] = NAN;
    if (!shifted)
        return;
    for (int k = 0; k < 4; k++) {
        guess.x[k] -= dx;
        guess.y[k] -= dy;
    }
    if (gl_align_spots_refit(img, g->s->nx, g->s->ny, &guess, g->p->spot_search, &sp) != GL_OK)
        return;
    /* relative spread of the four spot distances from the centre */
    double r[4], m = 0, v = 0;
    for (int k = 0; k < 4; k++) {
        r[k] = hypot(sp.x[k] - sp.cx, sp.y[k] - sp.cy);
        m += r[k] / 4;
    }
    for (int k = 0; k < 4; k++)
        v += (r[k] - m) * (r[k] - m) / 3;
    c->quality[f] = sqrt(v) / m;
    /* the fits' errors miss what displaces the spots (speckles under them):
     * the two diagonals' midpoints, two independent centres, then disagree.
     * Their difference d has twice the variance of each, four times that of
     * their mean: |d| / 2 per axis (the x and y parts pooled, 2 degrees of
     * freedom per frame). A radial bias common to the four spots (the halo's
     * slope) moves no midpoint and no centre. */
    double ddx = 0.5 * (sp.x[0] + sp.x[2] - sp.x[1] - sp.x[3]);
    double ddy = 0.5 * (sp.y[0] + sp.y[2] - sp.y[1] - sp.y[3]);
    double closure = 0.5 * sqrt(0.5 * (ddx * ddx + ddy * ddy));
    c->x[f] = sp.cx;
    c->y[f] = sp.cy;
    c->err_x[f] = hypot(sp.err_cx, closure);
    c->err_y[f] = hypot(sp.err_cy, closure);
    c->ok[f] = isfinite(sp.cx) && isfinite(sp.cy);
}

/* Spots found on the sharp reference; in each frame they are looked for
 * around their reference positions moved by the frame's registration shift,
 * so that large jitter does not lose them. */
static gl_status measure_spots(const gl_align_stack *s, const gl_align_params *p, gl_centres *c)
{
    gl_spots ref;
    gl_status st = gl_align_spots_find(s->sharp, s->nx, s->ny, p->spot_radius, &ref);
    if (st)
        return gl_align_error_wrap(st, s->name);
    gl_log(GL_LOG_INFO,
           "satellite spots in the registered median frame at (%.1f,%.1f) (%.1f,%.1f) "
           "(%.1f,%.1f) (%.1f,%.1f); centre (%.3f, %.3f)",
           ref.x[0], ref.y[0], ref.x[1], ref.y[1], ref.x[2], ref.y[2], ref.x[3], ref.y[3], ref.cx,
           ref.cy);
    spots_ctx g = {s, p, &ref};
    return each_frame_shifted(s, p, s->sharp, "centring", "spot work", spots_frame, &g, c);
}

/* ---- table and automatic choice ----------------------------------------- */

const gl_centre_ops gl_centre_core_ops = {
    "core", "profile fit (Gaussian or Moffat 1969) of the star's core per frame", measure_core};
const gl_centre_ops gl_centre_reference_ops = {
    "reference", "cross-correlation with a reference frame (upsampled DFT)", measure_register};
const gl_centre_ops gl_centre_spots_ops = {"spots", "intersection of satellite-spot diagonals",
                                           measure_spots};
const gl_centre_ops gl_centre_halo_ops = {
    "halo", "point symmetry of the halo (correlation with its 180-degree rotation)",
    measure_symmetry};

const gl_centre_ops *gl_centre_ops_get(gl_centre_method m)
{
    static const gl_centre_ops *const table[GL_CENTRE_NMETHODS] = {
        &gl_centre_core_ops, &gl_centre_reference_ops, &gl_centre_spots_ops, &gl_centre_halo_ops};
    return m >= 0 && m < GL_CENTRE_NMETHODS ? table[m] : NULL;
}

/* 1 when the four spots of sp are satellite spots of the star: their
 * faintest is comparable to the brightest feature (2 per cent), and their
 * diagonals cross at the centre of point symmetry of the reference (within
 * max(3 px, 1 spot FWHM): that centre is itself uncertain by a pixel or two
 * on a jittered reference; and no spot within 2 FWHM of it). Quasi-static speckles come
 * in point-symmetric pairs too, but two random pairs rarely pass the
 * geometric tests of gl_align_spots_find; a set that includes the star's
 * own residual core or a companion crosses away from the centre of
 * symmetry, which is what this catches (common practice). */
static int spots_plausible(const gl_align_stack *s, const gl_align_params *p, const gl_spots *sp,
                           double bg, double peak, char *why, size_t size)
{
    double weakest = INFINITY;
    for (int k = 0; k < 4; k++) {
        long x = lround(sp->x[k]), y = lround(sp->y[k]);
        double v = s->sharp[y * s->nx + x] - bg;
        if (v < weakest)
            weakest = v;
    }
    if (!(weakest > 0.02 * (peak - bg))) {
        snprintf(why, size,
                 "four spot-like peaks, but the faintest (%.3g) is under 2%% of the "
                 "brightest feature (%.3g)",
                 weakest, peak - bg);
        return 0;
    }
    double sx, sy;
    if (gl_align_symmetry_centre(s->sharp, s->nx, s->ny, gl_align_upsample(p), &sx, &sy)) {
        gl_error_clear();
        snprintf(why, size, "four spot-like peaks, but no centre of symmetry to check them on");
        return 0;
    }
    double off = hypot(sp->cx - sx, sp->cy - sy), nearest = INFINITY;
    for (int k = 0; k < 4; k++)
        nearest = GL_MIN(nearest, hypot(sp->x[k] - sx, sp->y[k] - sy));
    if (off > GL_MAX(3.0, sp->fwhm) || nearest < 2 * GL_MAX(sp->fwhm, 1.0)) {
        snprintf(why, size,
                 "four spot-like peaks crossing at (%.1f, %.1f), %.1f px from the halo's "
                 "centre of symmetry (%.1f, %.1f): speckles or a companion, not satellite spots",
                 sp->cx, sp->cy, off, sx, sy);
        return 0;
    }
    snprintf(why, size,
             "four satellite spots in the registered median frame crossing at the halo's "
             "centre of symmetry (faintest %.3g above the background; brightest 3x3 feature "
             "%.3g)",
             weakest, peak - bg);
    return 1;
}

gl_centre_method gl_centre_auto(const gl_align_stack *s, const gl_align_params *p, const int *tried,
                                char *reason, size_t size)
{
    long px, py;
    double peak;
    double bg = gl_image_median(s->sharp, s->nx, s->ny);
    char spots_why[320] = "";
    gl_image_peak(s->sharp, s->nx, s->ny, 2, &px, &py, &peak);
    gl_spots sp;
    if (!tried[GL_CENTRE_SPOTS] &&
        gl_align_spots_find(s->sharp, s->nx, s->ny, p->spot_radius, &sp) == GL_OK) {
        if (spots_plausible(s, p, &sp, bg, peak, reason, size))
            return GL_CENTRE_SPOTS;
        snprintf(spots_why, sizeof spots_why, "%s; ", reason);
    }
    gl_error_clear();
    gl_star_core core;
    int compact = gl_star_core_find(s->sharp, s->nx, s->ny, p, &core);
    const gl_profile_fit fit = core.fit;
    if (core.far)
        /* a compact peak far from the centre of symmetry is a companion, a
         * speckle or a background source, not the star (as in measure_register) */
        snprintf(spots_why + strlen(spots_why), sizeof spots_why - strlen(spots_why),
                 "a compact peak at (%.1f, %.1f), %.1f px from the centre of symmetry: not the "
                 "star; ",
                 core.peak.x, core.peak.y, hypot(core.peak.x - core.sx, core.peak.y - core.sy));
    if (compact && core.behind_mask)
        snprintf(spots_why + strlen(spots_why), sizeof spots_why - strlen(spots_why),
                 "a residual core at (%.2f, %.2f), %.1f px from the halo's centre of symmetry, "
                 "fainter than the brightest feature (a coronagraph's leak); ",
                 fit.x, fit.y, hypot(fit.x - core.sx, fit.y - core.sy));
    if ((!tried[GL_CENTRE_CORE] || !tried[GL_CENTRE_REFERENCE]) && compact) {
        double noise = gl_image_noise(s->img, s->nx, s->ny);
        double snr = noise > 0 ? fit.amplitude / noise : INFINITY;
        if (snr >= 20 && !tried[GL_CENTRE_CORE]) {
            snprintf(reason, size, "%s%s (FWHM %.2f px, peak S/N %.0f in one frame)", spots_why,
                     core.behind_mask ? "bright enough to fit in every frame"
                                      : "an unsaturated star",
                     fit.fwhm, snr);
            return GL_CENTRE_CORE;
        }
        if (!tried[GL_CENTRE_REFERENCE]) {
            snprintf(reason, size,
                     "%s%s (peak S/N %.1f in one frame): registration uses the "
                     "whole stack",
                     spots_why,
                     core.behind_mask ? "too faint to fit in single frames" : "an unsaturated star",
                     snr);
            return GL_CENTRE_REFERENCE;
        }
    }
    gl_error_clear();
    if (!tried[GL_CENTRE_HALO]) {
        if (tried[GL_CENTRE_CORE] || tried[GL_CENTRE_REFERENCE])
            snprintf(reason, size,
                     "%sthe star's core or the reference frame lost most frames: centred frame "
                     "by frame on the symmetry of the halo",
                     spots_why);
        else
            snprintf(reason, size,
                     "%sno unsaturated compact star%s: a saturated or coronagraphic image, "
                     "centred frame by frame on the symmetry of its halo",
                     spots_why,
                     spots_why[0] || tried[GL_CENTRE_SPOTS] ? "" : " and no satellite spots");
        return GL_CENTRE_HALO;
    }
    /* the last resort: registration to the reference works on any image */
    if (!tried[GL_CENTRE_REFERENCE]) {
        snprintf(reason, size,
                 "%sthe other methods lost most frames: registration to the "
                 "reference frame",
                 spots_why);
        return GL_CENTRE_REFERENCE;
    }
    snprintf(reason, size, "every method has been tried");
    return GL_CENTRE_AUTO;
}
