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

gl_status sub_record_params(gl_header *h, const gl_subtract_params *p, const sub_ctx *c,
                            int nplanes, int uses_modes)
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
    SET(gl_header_set_dbl(h, "GLSROUT", c->r_out, "outer radius, px"));
    if (p->method == GL_SUBTRACT_ANNULAR || (p->method == GL_SUBTRACT_MEDIAN && p->median_fit))
        SET(gl_header_set_dbl(h, "GLSRING", p->ring_fwhm, "annulus width, FWHM"));
    if (p->method == GL_SUBTRACT_ANNULAR) {
        SET(gl_header_set_int(h, "GLSSECT", p->sectors, "azimuthal sectors per annulus"));
        SET(gl_header_set_dbl(h, "GLSGAP", p->gap_fwhm, "least rotation to a reference, FWHM"));
        SET(gl_header_set_int(h, "GLSNEAR", p->nearest, "nearest qualifying refs kept (0 all)"));
    }
    if (p->method == GL_SUBTRACT_MEDIAN)
        SET(gl_header_set_bool(h, "GLSFIT", p->median_fit, "median scaled per annulus"));
    if (uses_modes)
        SET(gl_header_set_str(h, "GLSCENT", p->centring == GL_CENTRE_FRAME ? "frame" : "temporal",
                              "mean removed before the KL basis"));
    SET(gl_header_set_dbl(h, "GLSNORTH", p->north_offset, "north offset, deg"));
    SET(gl_header_set_str(h, "GLSINTRP", gl_interp_name(p->interp), "derotation interpolator"));
    SET(gl_header_set_str(h, "GLSCOMB", gl_combine_name(p->combine), "frame combination"));
    SET(gl_header_set_int(h, "GLSNFRM", c->nusable, "science frames used"));
    SET(gl_header_set_int(h, "GLSNREF", c->nref, "reference frames used (RDI)"));
    if (c->nref > 0) {
        SET(gl_header_set_str(h, "GLSREFS", p->refs_use == GL_REFS_ONLY ? "refs" : "both",
                              "frames in the basis"));
        SET(gl_header_set_int(h, "GLSRBEST", p->refs_best, "best-correlated refs kept (0 all)"));
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
    gl_status st = GL_OK;
    float *sci_owned = NULL, *ref_avg = NULL, *ref_sel = NULL, *work = NULL;
    unsigned char *usable = NULL;
    sub_sink *sink = NULL;
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
            return gl_error_set(GL_ERR_INPUT, "angle of frame %ld is not finite", i);
    if (refs && (refs->nx != nx || refs->ny != ny))
        return gl_error_set(GL_ERR_INPUT,
                            "reference cube is %ld x %ld px but the science cube is %ld x %ld px",
                            refs->nx, refs->ny, nx, ny);
    if (refs && refs->nchan != cube->nchan)
        return gl_error_set(GL_ERR_INPUT,
                            "reference cube has %ld channels but the science cube has %ld",
                            refs->nchan, cube->nchan);
    if (p->sdi == GL_SDI_CHANNELS && cube->nchan < 2)
        return gl_error_set(GL_ERR_USAGE, "--sdi needs a 4-D cube with several wavelength "
                                          "channels");
    if (p->sdi == GL_SDI_CHANNELS && p->nwave != cube->nchan)
        return gl_error_set(GL_ERR_USAGE, "--sdi needs one wavelength per channel (%ld), got %d",
                            cube->nchan, p->nwave);
    if (p->sdi == GL_SDI_CHANNELS && p->sdi_modes >= cube->nchan)
        return gl_error_set(GL_ERR_USAGE,
                            "--sdi-modes %ld is not below the %ld channels of each frame",
                            p->sdi_modes, cube->nchan);

    sub_ctx c = {0};
    c.p = p;
    c.nx = nx;
    c.ny = ny;
    c.npix = (long)np;
    c.nframe = nf;
    c.angles = angles;
    double cx = (double)(nx / 2), cy = (double)(ny / 2);
    double rmax = GL_SUB_MIN(GL_SUB_MIN(cx, cy), GL_SUB_MIN((double)nx - cx, (double)ny - cy));
    c.r_in = p->mask_radius;
    c.r_out = p->outer_radius > 0 ? GL_SUB_MIN(p->outer_radius, rmax) : rmax;
    if (c.r_in >= c.r_out)
        return gl_error_set(GL_ERR_USAGE,
                            "--mask-radius %g px leaves nothing inside the outer radius %g px",
                            c.r_in, c.r_out);

    if (cube->nchan == 1)
        c.sci = cube->data;
    else {
        st = p->sdi == GL_SDI_CHANNELS ? sub_sdi_frames(cube, p, c.r_in, c.r_out, &sci_owned)
                                       : gl_cube_channels_average(cube, &sci_owned);
        if (st)
            goto cleanup;
        c.sci = sci_owned;
    }
    /* usable frames: any finite pixel inside the region */
    usable = gl_calloc((size_t)nf, 1);
    if (!usable) {
        st = gl_error_nomem("frame flags");
        goto cleanup;
    }
    for (long i = 0; i < nf; i++) {
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
    c.usable = usable;
    if (c.nusable == 0) {
        st = gl_error_set(GL_ERR_INPUT, "no frame holds data between %g and %g px from the star",
                          c.r_in, c.r_out);
        goto cleanup;
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
                              "the parallactic angles do not change (zero field rotation): "
                              "method %s needs field rotation (or --refs for RDI)",
                              method->name);
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
    if (p->method == GL_SUBTRACT_PCA) {
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
    work = gl_malloc(sizeof(float) * np * (size_t)nf);
    if (!work) {
        st = gl_error_nomem("residual frames");
        goto cleanup;
    }
    c.work = work;
    st = sub_sink_new(&c, res.image, res.residuals, res.raw_residuals, &sink);
    if (st)
        goto cleanup;
    c.sink = sub_sink_put;
    c.sink_data = sink;
    st = method->run(&c);
    if (st)
        goto cleanup;

    /* the product header: the input's cards, the parameters, north-up WCS */
    gl_header_free(res.image->header);
    res.image->header = gl_header_copy(cube->header);
    if (!res.image->header) {
        st = gl_error_nomem("product header");
        goto cleanup;
    }
    st = sub_wcs_north_up(res.image->header, nx, ny);
    if (!st)
        st = sub_record_params(res.image->header, p, &c, nplanes, method->uses_modes);
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
            st = sub_record_params(rc->header, p, &c, nplanes, method->uses_modes);
    }
    if (st)
        goto cleanup;
    res.nframes_used = c.nusable;
    res.nrefs_used = c.nref;
    *out = res;
    memset(&res, 0, sizeof res);
cleanup:
    sub_sink_free(sink);
    gl_subtract_result_free(&res);
    gl_free(sci_owned);
    gl_free(ref_avg);
    gl_free(ref_sel);
    gl_free(work);
    gl_free(usable);
    return st;
}
