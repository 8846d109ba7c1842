/*
 * plant.c -- planting fake companions into a pupil-tracking sequence.
 *
 * Each companion is the prepared PSF times its contrast, moved by an FFT
 * phase ramp to where conventions.md puts a source of that separation and
 * position angle in each raw frame (angle 90 + pa + theta_i + north_offset
 * from +x). The PSF's spectrum is computed once per channel and all the
 * companions of a frame are added with one inverse FFT (gl_geom_stamp). The
 * move is periodic, so the PSF's far wings that leave one edge re-enter at
 * the other: with the PSF centred in a frame-sized image that is the light
 * beyond half a frame from the companion, negligible for a real PSF. Frames
 * are independent, so they are shared among threads with a static schedule;
 * each frame is written by one thread only, in a fixed companion order, so the
 * result does not depend on the thread count.
 */
#include "core/internal.h"
#include "gloam/geometry.h"
#include "gloam/inject.h"

#include <errno.h>
#include <math.h>
#include <omp.h>
#include <stdlib.h>
#include <string.h>

void gl_companion_position(const gl_companion *c, double theta_deg, double north_offset_deg,
                           long nx, long ny, double *x, double *y)
{
    double a = (90.0 + c->pa_deg + theta_deg + north_offset_deg) * M_PI / 180.0;
    *x = (double)(nx / 2) + c->sep_px * cos(a);
    *y = (double)(ny / 2) + c->sep_px * sin(a);
}

gl_status gl_companion_parse(const char *text, gl_companion *out)
{
    double v[3];
    const char *p = text;
    for (int i = 0; i < 3; i++) {
        char *end;
        errno = 0;
        v[i] = strtod(p, &end);
        if (end == p || errno || !isfinite(v[i]) || (i < 2 && *end != ':') || (i == 2 && *end))
            return gl_error_set(
                GL_ERR_USAGE, "--companion '%s': expected SEP_PX:PA_DEG:CONTRAST, e.g. 20:45:1e-4",
                text);
        p = end + 1;
    }
    if (!(v[0] > 0))
        return gl_error_set(GL_ERR_USAGE, "--companion '%s': separation must be positive", text);
    /* a negative contrast plants a negative copy: the way to remove a known
     * companion (negative fake companion, Lagrange et al. 2010) */
    if (v[2] == 0)
        return gl_error_set(GL_ERR_USAGE, "--companion '%s': contrast must not be zero", text);
    out->sep_px = v[0];
    out->pa_deg = v[1];
    out->contrast = v[2];
    return GL_OK;
}

gl_status gl_inject_companions(gl_cube *cube, const double *angles_deg, double north_offset_deg,
                               const gl_psf_model *psf, const gl_companion *comps, int ncompanions,
                               const double *spectrum)
{
    long nx = cube->nx, ny = cube->ny, nchan = cube->nchan, nframe = cube->nframe;
    if (psf->nx != nx || psf->ny != ny || psf->nchan != nchan)
        return gl_error_set(GL_ERR_INTERNAL, "PSF model prepared for another frame size");
    /* every companion must stay on the image in every frame: check first so
     * that a refusal leaves the cube untouched */
    for (int k = 0; k < ncompanions; k++)
        for (long f = 0; f < nframe; f++) {
            double x, y;
            gl_companion_position(&comps[k], angles_deg[f], north_offset_deg, nx, ny, &x, &y);
            if (x < 0 || y < 0 || x > (double)(nx - 1) || y > (double)(ny - 1))
                return gl_error_set(GL_ERR_USAGE,
                                    "companion %d (separation %g px, PA %g deg) falls off the "
                                    "%ldx%ld image in frame %ld (counted from 0)",
                                    k + 1, comps[k].sep_px, comps[k].pa_deg, nx, ny, f);
        }
    if (ncompanions == 0)
        return GL_OK;

    int nthreads = omp_get_max_threads();
    gl_geom_plan *plan = NULL;
    gl_geom_work **work = gl_calloc((size_t)nthreads, sizeof *work);
    gl_geom_stamp **stamps = gl_calloc((size_t)nchan, sizeof *stamps);
    double *args = gl_malloc((size_t)nthreads * 3 * (size_t)ncompanions * sizeof *args);
    gl_status st = GL_OK;
    size_t fn = (size_t)nx * (size_t)ny;
    if (!work || !stamps || !args) {
        st = gl_error_nomem("injection work space");
        goto cleanup;
    }
    if ((st = gl_geom_plan_new(nx, ny, GL_INTERP_FFT, &plan)))
        goto cleanup;
    for (int t = 0; t < nthreads; t++)
        if ((st = gl_geom_work_new(plan, &work[t])))
            goto cleanup;
    for (long c = 0; c < nchan; c++)
        if ((st = gl_geom_stamp_new(plan, work[0], psf->images + (size_t)c * fn, &stamps[c])))
            goto cleanup;

    long done = 0;
#pragma omp parallel for schedule(static)
    for (long f = 0; f < nframe; f++) {
        int t = omp_get_thread_num();
        double *dx = args + (size_t)t * 3 * (size_t)ncompanions, *dy = dx + ncompanions,
               *wt = dy + ncompanions;
        for (int k = 0; k < ncompanions; k++) {
            double x, y;
            gl_companion_position(&comps[k], angles_deg[f], north_offset_deg, nx, ny, &x, &y);
            dx[k] = x - (double)(nx / 2);
            dy[k] = y - (double)(ny / 2);
        }
        for (long c = 0; c < nchan; c++) {
            double sc = spectrum ? spectrum[c] : 1.0;
            for (int k = 0; k < ncompanions; k++)
                wt[k] = comps[k].contrast * sc;
            gl_status sf = gl_geom_stamp_add(plan, work[t], stamps[c], ncompanions, dx, dy, wt,
                                             gl_cube_plane(cube, c, f));
            if (sf) {
#pragma omp critical(plant_status)
                if (!st)
                    st = sf;
            }
        }
        long now;
#pragma omp atomic capture
        now = ++done;
        if (t == 0)
            gl_progress("inject", now, nframe);
    }
    gl_progress("inject", nframe, nframe);

cleanup:
    if (work)
        for (int t = 0; t < nthreads; t++)
            gl_geom_work_free(work[t]);
    if (stamps)
        for (long c = 0; c < nchan; c++)
            gl_geom_stamp_free(stamps[c]);
    gl_free(work);
    gl_free(stamps);
    gl_free(args);
    gl_geom_plan_free(plan);
    return st;
}
