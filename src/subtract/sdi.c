/*
 * sdi.c -- spectral differential imaging for 4-D cubes (x, y, channel,
 * frame): speckles scale in radius with wavelength while a companion stays
 * put (Racine et al. 1999, PASP 111, 587; Sparks & Ford 2002, ApJ 578, 543).
 * Per frame, every channel is magnified by lambda_max / lambda_c so that its
 * speckles line up with those of the longest wavelength; in the region
 * between the mask and the outer radius each channel is KLIP-subtracted
 * (Soummer et al. 2012) with the other channels of the same frame as its
 * library and --spectral-modes modes; the residuals are scaled back by
 * lambda_c / lambda_max and averaged over the channels that have a residual
 * there (scaling back samples the shorter channels beyond the region near
 * its outer edge: those are NaN, not zero, and left out). The frames
 * that come out go on to the ADI step (--method), which makes ASDI; with
 * --method derotate-only they are only derotated and combined (SDI alone).
 *
 * Assumptions: the star is at (nx/2, ny/2) in every channel; wavelengths are
 * in any one unit. A companion is partly subtracted where its radial shift
 * between channels is below about one FWHM (small separations, narrow
 * bands): the spectral self-subtraction.
 *
 * Frames are processed in parallel (static schedule), each with its own
 * workspace allocated up front; every frame's result depends only on that
 * frame.
 */
#include "subtract/internal.h"

#include <math.h>
#include <omp.h>
#include <stdio.h>
#include <string.h>

typedef struct sdi_ws {
    gl_geom_work *geom;
    float *chans; /* nchan x npix */
    float *M;     /* nchan x npr */
    double *C;    /* nchan x nchan */
    float *W;     /* nchan */
    long *lib;    /* nchan */
    sub_eig_work *eig;
} sdi_ws;

/* The separation inside which the spectral step cannot tell a companion
 * from the speckles. A source at r sits at r lambda_max / lambda_k once
 * channel k's speckles are aligned with the longest wavelength's: the
 * shortest and longest channels put it r (lambda_max / lambda_min - 1)
 * apart, where the FWHM is --fwhm lambda_max / lambda_min (--fwhm taken at
 * the shortest wavelength, as --fwhm auto measures it on the first channel
 * of a 4-D PSF; read at the longest it would give a radius smaller by
 * lambda_min / lambda_max, so this is the cautious reading). One FWHM apart
 * at r = fwhm lambda_max / (lambda_max - lambda_min). */
void sub_sdi_shift_check(const gl_subtract_params *p, long nchan, double r_in, double r_out)
{
    const char *name = p->cube_name ? p->cube_name : "the science cube";
    double lmin = INFINITY, lmax = 0;
    for (long k = 0; k < nchan; k++) {
        lmin = GL_SUB_MIN(lmin, p->wavelengths[k]);
        lmax = GL_SUB_MAX(lmax, p->wavelengths[k]);
    }
    if (!(lmin > 0) || !(p->fwhm > 0))
        return; /* refused later, with its own message */
    if (!(lmax > lmin)) {
        gl_log(GL_LOG_WARN,
               "%s: the wavelengths are all %g: the spectral step does not move a source "
               "against the speckles: expect strong self-subtraction everywhere",
               name, lmin);
        return;
    }
    double r1 = p->fwhm * lmax / (lmax - lmin);
    if (!(r1 > r_in))
        return;
    char whole[64] = "";
    if (r1 >= r_out)
        snprintf(whole, sizeof whole, ", the whole field (out to %.0f px)", r_out);
    gl_log(GL_LOG_WARN,
           "%s: the wavelengths %g-%g move a source radially by less than 1 FWHM against the "
           "speckles inside %.1f px (%.1f FWHM)%s: expect strong self-subtraction there",
           name, lmin, lmax, r1, r1 / p->fwhm, whole);
}

gl_status sub_sdi_frames(const gl_cube *cube, const gl_subtract_params *p, double r_in,
                         double r_out, float **out)
{
    gl_status st = GL_OK;
    long nc = cube->nchan, nf = cube->nframe;
    size_t np = gl_cube_plane_size(cube);
    int nth = sub_max_threads();
    gl_geom_plan *plan = NULL;
    sdi_ws *ws = gl_calloc((size_t)nth, sizeof *ws);
    gl_status *fst = gl_calloc((size_t)nf, sizeof *fst);
    sub_region reg = {0};
    float *o = gl_malloc(sizeof(float) * np * (size_t)nf);
    unsigned char *inside = NULL;
    *out = NULL;
    if (!ws || !fst || !o) {
        st = gl_error_nomem("spectral step");
        goto cleanup;
    }
    double lmax = 0;
    for (long k = 0; k < nc; k++) {
        if (!(p->wavelengths[k] > 0) || !isfinite(p->wavelengths[k])) {
            st = gl_error_set(GL_ERR_USAGE, "wavelength %ld (%g) is not positive", k + 1,
                              p->wavelengths[k]);
            goto cleanup;
        }
        lmax = GL_SUB_MAX(lmax, p->wavelengths[k]);
    }
    st = sub_region_make(cube->nx, cube->ny, r_in, r_out, 1, 0, &reg);
    if (!st)
        st = gl_geom_plan_new(cube->nx, cube->ny, GL_INTERP_CUBIC, &plan);
    if (st)
        goto cleanup;
    long npr = reg.npix;
    inside = gl_calloc(np, 1);
    if (!inside) {
        st = gl_error_nomem("spectral step");
        goto cleanup;
    }
    for (long j = 0; j < npr; j++)
        inside[reg.pix[j]] = 1;
    for (int t = 0; t < nth; t++) {
        sdi_ws *w = &ws[t];
        st = gl_geom_work_new(plan, &w->geom);
        if (!st)
            st = sub_eig_work_new(nc - 1, p->sdi_modes, &w->eig);
        if (st)
            goto cleanup;
        w->chans = gl_malloc(sizeof(float) * (size_t)nc * np);
        w->M = gl_malloc(sizeof(float) * (size_t)nc * (size_t)GL_SUB_MAX(npr, 1));
        w->C = gl_malloc(sizeof(double) * (size_t)nc * (size_t)nc);
        w->W = gl_malloc(sizeof(float) * (size_t)nc);
        w->lib = gl_malloc(sizeof(long) * (size_t)nc);
        if (!w->chans || !w->M || !w->C || !w->W || !w->lib) {
            st = gl_error_nomem("spectral step");
            goto cleanup;
        }
    }
    long kk = p->sdi_modes;
#pragma omp parallel for schedule(static)
    for (long f = 0; f < nf; f++) {
        sdi_ws *w = &ws[omp_get_thread_num()];
        gl_status e = GL_OK;
        for (long k = 0; k < nc && !e; k++) {
            float *ch = w->chans + (size_t)k * np;
            memcpy(ch, gl_cube_plane(cube, k, f), sizeof(float) * np);
            e = gl_geom_scale(plan, w->geom, ch, lmax / p->wavelengths[k]);
        }
        for (long k = 0; k < nc; k++)
            for (long j = 0; j < npr; j++)
                w->M[(size_t)k * (size_t)npr + (size_t)j] =
                    w->chans[(size_t)k * np + (size_t)reg.pix[j]];
        sub_centre(w->M, nc, npr, GL_CENTRE_FRAME, NULL);
        /* a handful of channels: the covariance in plain double sums */
        for (long a = 0; a < nc; a++)
            for (long b = a; b < nc; b++) {
                const float *ra = w->M + (size_t)a * (size_t)npr,
                            *rb = w->M + (size_t)b * (size_t)npr;
                double s = 0;
                for (long j = 0; j < npr; j++)
                    s += (double)ra[j] * rb[j];
                w->C[a * nc + b] = w->C[b * nc + a] = s;
            }
        for (long t = 0; t < nc && !e; t++) {
            long nlib = 0;
            for (long k = 0; k < nc; k++)
                if (k != t)
                    w->lib[nlib++] = k;
            e = sub_target_weights(w->C, nc, npr, w->lib, nlib, t, &kk, 1, w->eig, w->W, NULL);
            float *ch = w->chans + (size_t)t * np;
            /* residual of channel t inside the region; NaN elsewhere */
            for (long j = 0; j < npr && !e; j++) {
                double r = w->M[(size_t)t * (size_t)npr + (size_t)j];
                for (long k = 0; k < nc; k++)
                    r -= (double)w->W[k] * w->M[(size_t)k * (size_t)npr + (size_t)j];
                float orig = ch[reg.pix[j]];
                /* the NaN mask of the scaled channel stays */
                ch[reg.pix[j]] = isnan(orig) ? NAN : (float)r;
            }
        }
        /* residuals went to chans, M is untouched: every target saw the same
         * library */
        float *of = o + (size_t)f * np;
        for (size_t j = 0; j < np; j++)
            of[j] = NAN;
        for (long k = 0; k < nc && !e; k++) {
            float *ch = w->chans + (size_t)k * np;
            /* outside the region there is no residual: NaN there, so that
             * scaling back (a demagnification, which samples channel k at
             * lambda_max / lambda_k times the radius) leaves NaN wherever
             * the kernel reaches past the region, the outer band of the
             * shorter channels above all, and the average below takes only
             * the channels that have a residual at a pixel (zeros there
             * diluted it and no starlight crosses the edge either way) */
            for (size_t j = 0; j < np; j++)
                if (!inside[j])
                    ch[j] = NAN;
            e = gl_geom_scale(plan, w->geom, ch, p->wavelengths[k] / lmax);
        }
        for (long j = 0; j < npr && !e; j++) {
            long pj = reg.pix[j];
            double s = 0;
            long n = 0;
            for (long k = 0; k < nc; k++) {
                float v = w->chans[(size_t)k * np + (size_t)pj];
                if (!isnan(v)) {
                    s += v;
                    n++;
                }
            }
            of[pj] = n ? (float)(s / (double)n) : NAN;
        }
        fst[f] = e;
    }
    for (long f = 0; f < nf; f++)
        if (fst[f]) {
            st = gl_error_set(fst[f], "spectral step failed on frame %ld", f);
            goto cleanup;
        }
    *out = o;
    o = NULL;
cleanup:
    if (ws)
        for (int t = 0; t < nth; t++) {
            gl_geom_work_free(ws[t].geom);
            sub_eig_work_free(ws[t].eig);
            gl_free(ws[t].chans);
            gl_free(ws[t].M);
            gl_free(ws[t].C);
            gl_free(ws[t].W);
            gl_free(ws[t].lib);
        }
    gl_free(ws);
    gl_free(fst);
    gl_free(o);
    gl_free(inside);
    gl_geom_plan_free(plan);
    sub_region_free(&reg);
    return st;
}
