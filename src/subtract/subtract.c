/*
 * subtract.c -- gl_subtract_run: checks the input against the parameters,
 * prepares the science frames (channels averaged, or the spectral step for
 * SDI/ASDI), selects reference frames, runs one method from the table and
 * hands its residuals to the derotate-and-combine sink, then records every
 * parameter in the product header.
 *
 * Methods are chosen through a table of function pointers (sub_method); the
 * library never prints: problems come back as a status and a one-line
 * message naming the parameter or the input at fault.
 */
#include "core/internal.h"
#include "gloam/io.h"
#include "subtract/combine.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

static const sub_method *const method_table[] = {
    [GL_SUBTRACT_MEDIAN] = &sub_method_median,
    [GL_SUBTRACT_PCA] = &sub_method_pca,
    [GL_SUBTRACT_ANNULAR] = &sub_method_annular,
    [GL_SUBTRACT_NONE] = &sub_method_none,
};

void gl_subtract_result_free(gl_subtract_result *r)
{
    if (!r)
        return;
    gl_cube_free(r->image);
    gl_cube_free(r->residuals);
    gl_cube_free(r->raw_residuals);
    memset(r, 0, sizeof *r);
}

static const char *const mean_names[] = {"each-frame", "each-pixel"};
static const char *const basis_names[] = {"all", "all-but-target", "beyond-gap"};

/* One summary of what the per-target KLIP really used: rings where the
 * libraries held fewer modes than asked, and frames left NaN for want of
 * references. Fills the counts of res; writes the text (empty when nothing
 * was capped) into text. */
static void report_summary(const sub_report *r, gl_subtract_result *res, char *text, size_t size,
                           long *nlisted)
{
    size_t len = 0;
    text[0] = '\0';
    res->rings_capped = 0;
    res->frames_without_refs = 0;
    res->fewest_modes = r->kasked;
    *nlisted = 0;
    int listed = 0;
    for (long k = 0; k < r->nring; k++) {
        int capped = r->kmin[k] >= 0 && r->kmin[k] < r->kasked;
        res->rings_capped += capped;
        res->frames_without_refs += r->noref[k];
        if (r->kmin[k] >= 0)
            res->fewest_modes = GL_SUB_MIN(res->fewest_modes, r->kmin[k]);
        if (!capped && !r->noref[k])
            continue;
        ++*nlisted;
        if (listed++ >= 12) {
            if (listed == 14 && len < size)
                len += (size_t)snprintf(text + len, size - len, "; ...");
            continue;
        }
        if (len < size)
            len += (size_t)snprintf(text + len, size - len,
                                    "%sring %ld (%.1f-%.1f px): ", listed > 1 ? "; " : "", k + 1,
                                    r->r_in[k], r->r_out[k]);
        if (len < size && r->kmin[k] >= 0 && r->kmin[k] == r->kmax[k])
            len += (size_t)snprintf(text + len, size - len, "%ld mode%s", r->kmin[k],
                                    r->kmin[k] == 1 ? "" : "s");
        else if (len < size && r->kmin[k] >= 0)
            len +=
                (size_t)snprintf(text + len, size - len, "%ld-%ld modes", r->kmin[k], r->kmax[k]);
        if (len < size && r->noref[k])
            len += (size_t)snprintf(text + len, size - len, "%s%ld frame%s without references",
                                    r->kmin[k] >= 0 ? ", " : "", r->noref[k],
                                    r->noref[k] > 1 ? "s" : "");
    }
}

/* The per-ring record of what the per-target KLIP used, as HISTORY cards. */
static gl_status record_rings(gl_header *h, const sub_report *r)
{
    gl_status st = GL_OK;
    char text[160];
    for (long k = 0; !st && k < r->nring; k++) {
        if (!(r->kmin[k] >= 0 && r->kmin[k] < r->kasked) && !r->noref[k])
            continue;
        if (r->kmin[k] >= 0)
            snprintf(text, sizeof text,
                     "ring %ld, %.1f-%.1f px: %ld-%ld of %ld modes, %ld frames no refs", k + 1,
                     r->r_in[k], r->r_out[k], r->kmin[k], r->kmax[k], r->kasked, r->noref[k]);
        else
            snprintf(text, sizeof text, "ring %ld, %.1f-%.1f px: no frame has refs (NaN)", k + 1,
                     r->r_in[k], r->r_out[k]);
        st = gl_header_add_history(h, text);
    }
    return st;
}

/* The frames with usable[i] == 0 as "3, 7, 10-14" (0-based, plus offset),
 * cut short with "..." when it does not fit. */
static void frame_list(const unsigned char *usable, long n, long offset, char *text, size_t size)
{
    size_t len = 0;
    text[0] = '\0';
    for (long i = 0; i < n; i++) {
        if (usable[i])
            continue;
        long j = i;
        while (j + 1 < n && !usable[j + 1])
            j++;
        char piece[48];
        snprintf(piece, sizeof piece, j > i ? "%s%ld-%ld" : "%s%ld", len ? ", " : "", i + offset,
                 j + offset);
        if (len + strlen(piece) + 6 >= size) {
            snprintf(text + len, size - len, ", ...");
            return;
        }
        len += (size_t)snprintf(text + len, size - len, "%s", piece);
        i = j;
    }
}

gl_status sub_usable_check(const sub_ctx *c, const char *name)
{
    long nempty = c->nframe - c->nusable;
    if (nempty == 0)
        return GL_OK;
    char list[400];
    frame_list(c->usable, c->nframe, c->p->frame_offset, list, sizeof list);
    if (!name)
        name = "the science cube";
    /* the rule of align's frame selection: a sequence needs at least half
     * of its frames */
    if (2 * c->nusable < c->nframe)
        return gl_error_set(GL_ERR_INPUT,
                            "%s: only %ld of %ld frames hold data between %.1f and %.1f px from "
                            "the star (frames %s, counted from 0, have no finite pixel there): "
                            "at least half are needed; check the cube or leave those frames out",
                            name, c->nusable, c->nframe, c->r_in, c->r_out, list);
    gl_log(GL_LOG_WARN,
           "%s: %ld of %ld frames hold no data between %.1f and %.1f px from the star (no "
           "finite pixel) and are left out: frame%s %s (counted from 0)",
           name, nempty, c->nframe, c->r_in, c->r_out, nempty > 1 ? "s" : "", list);
    return GL_OK;
}

gl_status sub_record_params(gl_header *h, const gl_subtract_params *p, const sub_ctx *c,
                            int nplanes, int uses_modes, const gl_subtract_result *res)
{
    gl_status st = GL_OK;
    char key[32], text[160];
#define SET(call)                                                                                  \
    do {                                                                                           \
        if (!st)                                                                                   \
            st = (call);                                                                           \
    } while (0)
    SET(gl_header_set_str(h, "GLSMETH", gl_subtract_method_name(p->method), "subtraction method"));
    SET(gl_header_set_dbl(h, "GLSFWHM", p->fwhm, "PSF FWHM, px"));
    SET(gl_header_set_int(h, "GLSNPLN", nplanes, "output planes"));
    for (int i = 0; uses_modes && i < nplanes; i++) {
        snprintf(key, sizeof key, "GLSMOD%d", i + 1);
        snprintf(text, sizeof text, "KL modes of plane %d", i + 1);
        SET(gl_header_set_int(h, key, p->modes[i], text));
    }
    SET(gl_header_set_dbl(h, "GLSMASK", c->r_in, "inner mask radius, px"));
    SET(gl_header_set_bool(h, "GLSMAUTO", p->mask_radius < 0,
                           "inner radius from the auto rule (not given)"));
    SET(gl_header_set_dbl(h, "GLSROUT", c->r_out, "outer radius, px"));
    if (p->method == GL_SUBTRACT_ANNULAR || (p->method == GL_SUBTRACT_MEDIAN && p->median_fit))
        SET(gl_header_set_dbl(h, "GLSRING", p->ring_fwhm, "ring width, FWHM"));
    if (p->method == GL_SUBTRACT_PCA)
        SET(gl_header_set_str(h, "GLSBASIS", basis_names[p->basis_frames],
                              "frames in each frame's basis"));
    int local = p->method == GL_SUBTRACT_ANNULAR ||
                (p->method == GL_SUBTRACT_PCA && p->basis_frames != GL_BASIS_ALL);
    if (p->method == GL_SUBTRACT_ANNULAR)
        SET(gl_header_set_int(h, "GLSSECT", p->sectors, "azimuthal arcs per ring"));
    if (p->method == GL_SUBTRACT_ANNULAR ||
        (p->method == GL_SUBTRACT_PCA && p->basis_frames == GL_BASIS_BEYOND_GAP))
        SET(gl_header_set_dbl(h, "GLSGAP", p->gap_fwhm, "least rotation to a reference, FWHM"));
    if (local) {
        SET(gl_header_set_int(h, "GLSNEAR", p->nearest, "closest qualifying refs kept (0 all)"));
        SET(gl_header_set_int(h, "GLSKCAPR", res->rings_capped,
                              "rings where fewer modes than asked were used"));
        SET(gl_header_set_int(h, "GLSKLOW", res->fewest_modes, "fewest modes used in any ring"));
        SET(gl_header_set_int(h, "GLSNOREF", res->frames_without_refs,
                              "ring-frame pairs left NaN: no reference"));
        if (c->report && c->report->nring)
            SET(record_rings(h, c->report));
    }
    if (p->method == GL_SUBTRACT_MEDIAN)
        SET(gl_header_set_bool(h, "GLSFIT", p->median_fit, "median scaled per annulus"));
    if (uses_modes)
        SET(gl_header_set_str(h, "GLSCENT", mean_names[p->centring],
                              "mean removed before the KL basis"));
    SET(gl_header_set_dbl(h, "GLSNORTH", p->north_offset, "north offset, deg"));
    SET(gl_header_set_str(h, "GLSINTRP", gl_interp_name(p->interp), "derotation interpolator"));
    SET(gl_header_set_str(h, "GLSCOMB", gl_combine_name(p->combine), "frame combination"));
    SET(gl_header_set_int(h, "GLSNFRM", c->nusable, "science frames used"));
    SET(gl_header_set_int(h, "GLSNDROP", c->nframe - c->nusable,
                          "frames left out: no finite pixel in the region"));
    if (c->nusable < c->nframe) {
        char list[400], hist[480];
        frame_list(c->usable, c->nframe, p->frame_offset, list, sizeof list);
        snprintf(hist, sizeof hist, "frames left out (no finite pixel in the region, from 0): %s",
                 list);
        SET(gl_header_add_history(h, hist));
    }
    SET(gl_header_set_int(h, "GLSNREF", c->nref, "reference frames used (RDI)"));
    if (c->nref > 0) {
        SET(gl_header_set_str(h, "GLSREFS", p->refs_use == GL_REFS_ONLY ? "refs" : "both",
                              "frames in the basis"));
        SET(gl_header_set_int(h, "GLSRBEST", p->refs_best, "best-correlated refs kept (0 all)"));
    }
    if (c->nchan > 1) {
        SET(gl_header_set_int(h, "GLSNCHAN", c->nchan, "wavelength channels per input frame"));
        if (p->sdi != GL_SDI_CHANNELS) {
            SET(gl_header_set_str(h, "GLSSDI", "average", "channels averaged, no spectral step"));
            snprintf(text, sizeof text,
                     "the %ld wavelength channels of each frame averaged (NaN ignored) before "
                     "the subtraction (no --spectral-step)",
                     c->nchan);
            SET(gl_header_add_history(h, text));
        }
    }
    if (p->sdi == GL_SDI_CHANNELS) {
        SET(gl_header_set_str(h, "GLSSDI", "channels", "spectral step"));
        SET(gl_header_set_int(h, "GLSSDIK", p->sdi_modes, "KL modes of the spectral step"));
        for (int i = 0; i < p->nwave && i < 99; i++) {
            snprintf(key, sizeof key, "GLSWAV%d", i + 1);
            SET(gl_header_set_dbl(h, key, p->wavelengths[i], "wavelength of the channel"));
        }
    }
    snprintf(text, sizeof text, "starlight subtracted (%s), derotated to north-up, combined by %s",
             gl_subtract_method_name(p->method), gl_combine_name(p->combine));
    SET(gl_header_add_history(h, text));
#undef SET
    return st;
}

gl_status gl_subtract_run(const gl_cube *cube, const double *angles, const gl_cube *refs,
                          const gl_subtract_params *p, gl_subtract_result *out)
{
    return gl_subtract_run_memo(cube, angles, refs, p, NULL, out);
}

gl_status gl_subtract_run_memo(const gl_cube *cube, const double *angles, const gl_cube *refs,
                               const gl_subtract_params *p, gl_subtract_memo *memo,
                               gl_subtract_result *out)
{
    gl_status st = GL_OK;
    float *sci_owned = NULL, *ref_avg = NULL, *ref_sel = NULL, *work = NULL;
    unsigned char *usable = NULL;
    sub_sink *sink = NULL;
    sub_report report = {0};
    gl_subtract_result res = {0};
    memset(out, 0, sizeof *out);

    st = gl_subtract_params_check(p);
    if (st)
        return st;
    if (!cube || !angles)
        return gl_error_set(GL_ERR_USAGE, "subtraction needs a cube and its angles");
    long nx = cube->nx, ny = cube->ny, nf = cube->nframe;
    size_t np = gl_cube_plane_size(cube);
    const sub_method *method = method_table[p->method];
    if (nf < 2)
        return gl_error_set(GL_ERR_INPUT,
                            "the science cube holds %ld frame; a sequence of at "
                            "least 2 is needed",
                            nf);
    for (long i = 0; i < nf; i++)
        if (!isfinite(angles[i]))
            return gl_error_set(GL_ERR_USAGE, "%s: angle of frame %ld is not finite",
                                p->angles_name ? p->angles_name : "the angles", i);
    if (refs && (refs->nx != nx || refs->ny != ny))
        return gl_error_set(GL_ERR_INPUT,
                            "reference cube is %ld x %ld px but the science cube is %ld x %ld px",
                            refs->nx, refs->ny, nx, ny);
    if (refs && refs->nchan != cube->nchan)
        return gl_error_set(GL_ERR_INPUT,
                            "reference cube has %ld channels but the science cube has %ld",
                            refs->nchan, cube->nchan);
    if (p->sdi == GL_SDI_CHANNELS && cube->nchan < 2)
        return gl_error_set(GL_ERR_USAGE,
                            "--spectral-step needs a 4-D cube with several wavelength "
                            "channels");
    if (p->sdi == GL_SDI_CHANNELS && p->nwave != cube->nchan)
        return gl_error_set(GL_ERR_USAGE,
                            "--spectral-step needs one wavelength per channel (%ld), got %d",
                            cube->nchan, p->nwave);
    if (p->sdi == GL_SDI_CHANNELS && p->sdi_modes >= cube->nchan)
        return gl_error_set(GL_ERR_USAGE,
                            "--spectral-modes %ld is not below the %ld channels of each frame",
                            p->sdi_modes, cube->nchan);

    sub_ctx c = {0};
    c.p = p;
    c.nx = nx;
    c.ny = ny;
    c.npix = (long)np;
    c.nframe = nf;
    c.nchan = cube->nchan;
    c.angles = angles;
    double cx = (double)(nx / 2), cy = (double)(ny / 2);
    double rmax = GL_SUB_MIN(GL_SUB_MIN(cx, cy), GL_SUB_MIN((double)nx - cx, (double)ny - cy));
    c.r_in = p->mask_radius >= 0 ? p->mask_radius : 0.0;
    c.r_out = p->outer_radius > 0 ? GL_SUB_MIN(p->outer_radius, rmax) : rmax;
    if (c.r_in >= c.r_out)
        return gl_error_set(GL_ERR_USAGE,
                            "--mask-radius %g px leaves nothing inside the outer radius %g px",
                            c.r_in, c.r_out);

    if (cube->nchan == 1)
        c.sci = cube->data;
    else {
        if (p->sdi != GL_SDI_CHANNELS)
            gl_log(GL_LOG_INFO,
                   "%s: %ld wavelength channels per frame, averaged into one image per frame "
                   "(NaN ignored)%s before the subtraction; --spectral-step subtracts the star "
                   "across the channels first",
                   p->cube_name ? p->cube_name : "the science cube", cube->nchan,
                   refs && refs->nchan > 1 ? ", as are the reference cube's," : "");
        else
            gl_log(GL_LOG_INFO,
                   "%s: %ld wavelength channels per frame: the spectral step (%ld KL mode%s "
                   "across the channels of each frame), then the channels averaged",
                   p->cube_name ? p->cube_name : "the science cube", cube->nchan, p->sdi_modes,
                   p->sdi_modes > 1 ? "s" : "");
        if (p->sdi == GL_SDI_CHANNELS)
            sub_sdi_shift_check(p, cube->nchan, c.r_in, c.r_out);
        st = p->sdi == GL_SDI_CHANNELS ? sub_sdi_frames(cube, p, c.r_in, c.r_out, &sci_owned)
                                       : gl_cube_channels_average(cube, &sci_owned);
        if (st)
            goto cleanup;
        c.sci = sci_owned;
    }
    /* usable frames: any finite pixel inside the region; once more when the
     * inner radius is then chosen from the rotation of the usable frames */
    usable = gl_calloc((size_t)nf, 1);
    if (!usable) {
        st = gl_error_nomem("frame flags");
        goto cleanup;
    }
    long nref_given =
        refs && p->method != GL_SUBTRACT_NONE
            ? (p->refs_best > 0 ? GL_SUB_MIN(p->refs_best, refs->nframe) : refs->nframe)
            : 0;
    long rule = 0; /* references every frame has from the automatic radius */
    for (int pass = 0; pass < (p->mask_radius < 0 ? 2 : 1); pass++) {
        if (pass == 1) {
            c.r_in = sub_inner_radius(p, angles, usable, nf, nref_given, c.r_out, &rule);
            c.nusable = 0;
        }
        for (long i = 0; i < nf; i++) {
            usable[i] = 0;
            const float *f = c.sci + (size_t)i * np;
            for (long y = 0; y < ny && !usable[i]; y++)
                for (long x = 0; x < nx; x++) {
                    double r = hypot((double)x - cx, (double)y - cy);
                    if (r >= c.r_in && r < c.r_out && !isnan(f[y * nx + x])) {
                        usable[i] = 1;
                        break;
                    }
                }
            c.nusable += usable[i];
        }
    }
    c.usable = usable;
    if ((st = sub_usable_check(&c, p->cube_name)))
        goto cleanup;
    if (p->mask_radius < 0 && rule > 0 && c.r_in > 0) { /* said once the frames are good */
        long kmin = p->modes[0];
        for (int i = 1; i < p->nmodes; i++)
            kmin = GL_SUB_MIN(kmin, p->modes[i]);
        char why[160];
        if (rule > 1 || kmin == 1)
            snprintf(why, sizeof why,
                     "%ld reference%s past --gap %g FWHM (the smallest of --modes%s)", rule,
                     rule > 1 ? "s" : "", p->gap_fwhm,
                     p->nmodes > 1 ? "; the larger counts use what the libraries hold" : "");
        else
            snprintf(why, sizeof why,
                     "one reference past --gap %g FWHM (no ring gives every frame %ld, the "
                     "smallest of --modes: the modes are capped, see below)",
                     p->gap_fwhm, kmin);
        gl_log(GL_LOG_INFO,
               "inner radius %.1f px (%.2f FWHM): from there every frame has at least %s; "
               "set --mask-radius to choose another",
               c.r_in, c.r_in / p->fwhm, why);
        if (c.r_in > c.r_out / sqrt(2.0)) /* most of the field's area lost */
            gl_log(GL_LOG_WARN,
                   "%s: the automatic inner radius %.1f px leaves only %.1f-%.1f px of the field "
                   "(too little rotation for klip-rings closer in): give --mask-radius to go "
                   "closer with smaller libraries, or use --method klip-frame or --refs",
                   p->cube_name ? p->cube_name : "the science cube", c.r_in, c.r_in, c.r_out);
    }

    /* reference frames */
    if (refs && p->method != GL_SUBTRACT_NONE) {
        const float *ra = refs->data;
        if (refs->nchan > 1) {
            st = gl_cube_channels_average(refs, &ref_avg);
            if (st)
                goto cleanup;
            ra = ref_avg;
        }
        long nbest = p->refs_best > 0 ? GL_SUB_MIN(p->refs_best, refs->nframe) : refs->nframe;
        if (p->refs_best > refs->nframe)
            gl_log(GL_LOG_WARN,
                   "--refs-best %ld: the reference cube has %ld frames, and all of them are used",
                   p->refs_best, refs->nframe);
        if (nbest < refs->nframe) {
            st = sub_refs_select(&c, ra, refs->nframe, nbest, &ref_sel, &c.nref, NULL);
            if (st)
                goto cleanup;
            c.ref = ref_sel;
        } else {
            c.ref = ra;
            c.nref = refs->nframe;
        }
    }

    /* field rotation for ADI */
    int use_sci = !(c.nref > 0 && p->refs_use == GL_REFS_ONLY);
    if (p->method != GL_SUBTRACT_NONE && use_sci) {
        /* span of the unwrapped sequence (angles may cross +-180) */
        double lo = 0, hi = 0, cur = 0, prev = NAN;
        for (long i = 0; i < nf; i++) {
            if (!usable[i])
                continue;
            if (!isnan(prev)) {
                double d = fmod(angles[i] - prev, 360.0);
                d += d > 180 ? -360 : (d < -180 ? 360 : 0);
                cur += d;
                lo = GL_SUB_MIN(lo, cur);
                hi = GL_SUB_MAX(hi, cur);
            }
            prev = angles[i];
        }
        double span = hi - lo;
        if (!(span > 1e-6)) {
            st = gl_error_set(GL_ERR_USAGE,
                              "%s: the parallactic angles do not change (zero field rotation): "
                              "method %s needs field rotation (or --refs for RDI)",
                              p->angles_name ? p->angles_name : "the angles", method->name);
            goto cleanup;
        }
        double rmid = 0.5 * (c.r_in + c.r_out);
        double arc = rmid * span * M_PI / 180.0 / p->fwhm;
        if (arc < 1.0)
            gl_log(GL_LOG_WARN,
                   "field rotation of %.2f deg moves a source by only %.2f FWHM at %.0f px: "
                   "expect strong self-subtraction",
                   span, arc, rmid);
    }
    long kmax = 0;
    for (int i = 0; i < p->nmodes; i++)
        kmax = GL_SUB_MAX(kmax, p->modes[i]);
    if (p->method == GL_SUBTRACT_PCA && (p->basis_frames == GL_BASIS_ALL || !use_sci)) {
        long nb = (use_sci ? c.nusable : 0) + c.nref;
        long allowed = nb - (p->centring == GL_CENTRE_TEMPORAL ? 1 : 0);
        if (kmax > allowed) {
            st = gl_error_set(GL_ERR_USAGE,
                              "--modes %ld is larger than the %ld usable frames of the basis%s",
                              kmax, allowed,
                              p->centring == GL_CENTRE_TEMPORAL ? " (one less after the "
                                                                  "temporal mean)"
                                                                : "");
            goto cleanup;
        }
    }

    int nplanes = method->uses_modes ? p->nmodes : 1;
    st = gl_cube_new(nx, ny, 1, nplanes, &res.image);
    if (!st && p->keep_residuals)
        st = gl_cube_new(nx, ny, nplanes, nf, &res.residuals);
    if (!st && p->keep_raw_residuals)
        st = gl_cube_new(nx, ny, nplanes, nf, &res.raw_residuals);
    if (st)
        goto cleanup;
    c.memo = memo;
    work = memo ? gl_subtract_memo_buffer(memo, GL_SUBTRACT_MEMO_WORK, np * (size_t)nf)
                : gl_malloc(sizeof(float) * np * (size_t)nf);
    if (!work) {
        st = gl_error_nomem("residual frames");
        goto cleanup;
    }
    c.work = work;
    st = sub_sink_new(&c, res.image, res.residuals, res.raw_residuals, &sink);
    /* several mode counts: every frame is derotated once per count, with the
     * same angle and (for most methods) the same NaN pixels; with a memo,
     * also from one run to the next */
    if (!st && (res.image->nframe > 1 || memo))
        st = sub_sink_keep_masks(sink, memo);
    if (st)
        goto cleanup;
    c.sink = sub_sink_put;
    c.sink_data = sink;
    c.report = &report;
    st = method->run(&c);
    if (st)
        goto cleanup;
    res.inner_radius = c.r_in;
    for (long k = 0; k < report.nring; k++) /* where data really start */
        if (report.kmin[k] >= 0) {
            res.inner_radius = GL_SUB_MAX(c.r_in, report.r_in[k]);
            break;
        }
    res.fewest_modes = kmax;
    if (report.nring > 0) {
        long any = 0;
        for (long k = 0; k < report.nring; k++)
            any += report.kmin[k] >= 0;
        if (!any) {
            int rad = gl_angles_look_like_radians(angles, nf);
            st = gl_error_set(GL_ERR_USAGE,
                              "%s: no frame has a reference past --gap %g FWHM in any ring: %s",
                              p->angles_name ? p->angles_name : "the angles", p->gap_fwhm,
                              rad ? "the angles look like radians (gloam reads degrees; "
                                    "multiply them by 180/pi)"
                                  : "the sequence turns too little for that gap; lower --gap");
            goto cleanup;
        }
        char text[1024];
        long nlisted = 0; /* rings with fewer modes than asked or frames without any */
        report_summary(&report, &res, text, sizeof text, &nlisted);
        char none[96] = "";
        if (res.frames_without_refs)
            snprintf(none, sizeof none, "; %ld ring-frame pair%s had none (left NaN)",
                     res.frames_without_refs, res.frames_without_refs == 1 ? "" : "s");
        if (text[0])
            gl_log(GL_LOG_WARN,
                   "%s: the libraries held fewer references than asked (%ld mode%s) in %ld "
                   "ring%s%s: %s",
                   method->name, kmax, kmax == 1 ? "" : "s", nlisted, nlisted == 1 ? "" : "s", none,
                   text);
    }

    /* the product header: the input's cards, the parameters, north-up WCS */
    gl_header_free(res.image->header);
    res.image->header = gl_header_copy(cube->header);
    if (!res.image->header) {
        st = gl_error_nomem("product header");
        goto cleanup;
    }
    st = sub_wcs_north_up(res.image->header, nx, ny);
    if (!st)
        st = sub_record_params(res.image->header, p, &c, nplanes, method->uses_modes, &res);
    for (int k = 0; !st && k < 2; k++) {
        gl_cube *rc = k ? res.raw_residuals : res.residuals;
        if (!rc)
            continue;
        gl_header_free(rc->header);
        /* raw residuals keep the input orientation and so its header */
        rc->header = gl_header_copy(k ? cube->header : res.image->header);
        if (!rc->header)
            st = gl_error_nomem("residual header");
        else if (k)
            st = sub_record_params(rc->header, p, &c, nplanes, method->uses_modes, &res);
    }
    if (st)
        goto cleanup;
    res.nframes_used = c.nusable;
    res.nrefs_used = c.nref;
    *out = res;
    memset(&res, 0, sizeof res);
cleanup:
    sub_sink_free(sink);
    sub_report_free(&report);
    gl_subtract_result_free(&res);
    gl_free(sci_owned);
    gl_free(ref_avg);
    gl_free(ref_sel);
    if (!memo)
        gl_free(work);
    gl_free(usable);
    return st;
}
