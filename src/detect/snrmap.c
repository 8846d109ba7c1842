/*
 * snrmap.c -- the S/N (Student t), false-positive-fraction and significance
 * maps of a whole image: at every pixel, the t test of the aperture centred
 * there against the ring of non-overlapping apertures at its separation
 * (Mawet et al. 2014, ApJ 792, 97).
 *
 * Cost: one exact aperture per ring member, about 2 pi r / d per pixel. The
 * aperture plan is made once; rows are shared among threads with a static
 * schedule, each pixel is computed by one thread from the input alone, so the
 * maps are the same for any thread count.
 */
#include "core/internal.h"
#include "detect/internal.h"

#include <math.h>
#include <omp.h>

void gl_detect_maps_free(gl_detect_maps *m)
{
    if (!m)
        return;
    gl_free(m->snr);
    gl_free(m->fpf);
    gl_free(m->significance);
    gl_free(m->dof);
    gl_free(m);
}

gl_status gl_detect_maps_compute(const float *img, long nx, long ny, const gl_detect_params *par,
                                 gl_detect_maps **out)
{
    gl_status st = GL_OK;
    gl_detect_maps *m = NULL;
    gl_aperture_plan *plan = NULL;
    *out = NULL;
    if ((st = gl_detect_params_check(par, nx, ny)))
        return st;
    size_t npix = (size_t)nx * (size_t)ny, nfinite = 0;
    for (size_t k = 0; k < npix; k++)
        nfinite += !isnan(img[k]);
    if (nfinite == 0)
        return gl_error_set(GL_ERR_INPUT, "the image holds no data (every pixel is NaN)");

    detect_geom g;
    gl_detect_geom(par, &g);
    if ((st = gl_detect_aperture_plan_new(0.5 * g.diam, &plan)))
        goto cleanup;
    m = gl_calloc(1, sizeof *m);
    if (!m) {
        st = gl_error_nomem("S/N maps");
        goto cleanup;
    }
    m->nx = nx;
    m->ny = ny;
    m->snr = gl_malloc(npix * sizeof *m->snr);
    m->fpf = gl_malloc(npix * sizeof *m->fpf);
    m->significance = gl_malloc(npix * sizeof *m->significance);
    m->dof = gl_calloc(npix, sizeof *m->dof);
    if (!m->snr || !m->fpf || !m->significance || !m->dof) {
        st = gl_error_nomem("S/N maps");
        goto cleanup;
    }
    for (size_t k = 0; k < npix; k++)
        m->snr[k] = m->fpf[k] = m->significance[k] = NAN;

    const size_t wsize = gl_detect_snr_worksize(plan, nx, ny);
    int failed = 0;
    long rows_done = 0;
#pragma omp parallel
    {
        double *work = gl_malloc(wsize * sizeof *work);
        if (!work) {
#pragma omp atomic write
            failed = 1;
        }
#pragma omp for schedule(static, 1)
        for (long y = 0; y < ny; y++) {
            if (!work)
                continue;
            for (long x = 0; x < nx; x++) {
                gl_ttest t;
                if (!gl_detect_snr_at(plan, par, img, nx, ny, (double)x, (double)y, work, &t))
                    continue;
                size_t k = (size_t)y * (size_t)nx + (size_t)x;
                m->snr[k] = (float)t.t;
                m->fpf[k] = t.fpf;
                m->significance[k] = (float)t.significance;
                m->dof[k] = (int)t.dof;
            }
            long done;
#pragma omp atomic capture
            done = ++rows_done;
            gl_progress("S/N map", done, ny);
        }
        gl_free(work);
    }
    if (failed) {
        st = gl_error_nomem("S/N map work space");
        goto cleanup;
    }
    *out = m;
    m = NULL;
cleanup:
    gl_detect_maps_free(m);
    gl_detect_aperture_plan_free(plan);
    return st;
}
