/*
 * plan.c -- building the FFTW plans and per-thread scratch space used by the
 * shift and rotation interpolators.
 *
 * Plans are made with FFTW_ESTIMATE: FFTW_MEASURE would time candidate
 * algorithms and could pick different ones from run to run, and gloam's
 * results must be identical for identical input. Plan creation is serialised
 * by FFTW's thread-safe planner; execution uses the new-array interface on
 * each thread's own gl_geom_work, whose buffers have the alignment of the
 * planning buffers (gl_malloc gives 64 bytes; row strides are multiples of 16
 * floats).
 */
#include "core/internal.h"
#include "geometry/internal.h"

#include <pthread.h>
#include <string.h>

static pthread_once_t planner_once = PTHREAD_ONCE_INIT;
static void make_planner_safe(void)
{
    fftwf_make_planner_thread_safe();
}

/* Smallest size >= n that is a multiple of 16 with only factors 2, 3 and 5. */
static long good_fft_size(long n)
{
    for (long m = (n + 15) / 16 * 16;; m += 16) {
        long r = m;
        while (r % 2 == 0)
            r /= 2;
        while (r % 3 == 0)
            r /= 3;
        while (r % 5 == 0)
            r /= 5;
        if (r == 1)
            return m;
    }
}

int gl_interp_from_name(const char *name)
{
    if (strcmp(name, "fft") == 0)
        return GL_INTERP_FFT;
    if (strcmp(name, "cubic") == 0)
        return GL_INTERP_CUBIC;
    return -1;
}

const char *gl_interp_name(gl_interp interp)
{
    return interp == GL_INTERP_CUBIC ? "cubic" : "fft";
}

gl_status gl_geom_plan_new(long nx, long ny, gl_interp interp, gl_geom_plan **out)
{
    *out = NULL;
    if (nx < 2 || ny < 2)
        return gl_error_set(GL_ERR_USAGE, "images of %ldx%ld pixels cannot be shifted or rotated",
                            nx, ny);
    if (interp != GL_INTERP_FFT && interp != GL_INTERP_CUBIC)
        return gl_error_set(GL_ERR_USAGE, "unknown interpolator %d", (int)interp);
    pthread_once(&planner_once, make_planner_safe);
    gl_geom_plan *p = gl_calloc(1, sizeof *p);
    if (!p)
        return gl_error_nomem("geometry plan");
    p->nx = nx;
    p->ny = ny;
    p->interp = interp;
    /* padded side: with h the half-side of rotate.c, no shear wraps content
     * onto samples that are used. The first shear (rows of half-width h,
     * moved by up to tan(22.5 deg) h) needs 2.83 h; the second moves the
     * columns out to 1.41 h by up to sin(45 deg) 1.41 h = h, and only its rows
     * of the output window (half-width h) are kept: 2 h + h = 3 h; the third
     * keeps the window of rows 2.83 h wide: 2.83 h. So 3 h and a margin for
     * the rounding of rotate.c's ranges: 320 for 200 px, where twice the side
     * gave 400 (the interpolant differs by 1.6% of the noise rms, aperture
     * fluxes by 1e-6; bench/README.md). */
    long h = (nx > ny ? nx : ny) / 2 + 2;
    p->pad = good_fft_size(3 * h + 8);
    gl_status st = GL_OK;
    if (interp == GL_INTERP_FFT) {
        size_t nc2 = (size_t)ny * (size_t)(nx / 2 + 1);
        float *r = gl_malloc((size_t)nx * (size_t)ny * sizeof *r);
        fftwf_complex *c = gl_malloc(nc2 * sizeof *c);
        int P = (int)p->pad, H = P / 2 + 1, B = GL_GEOM_BATCH;
        float *r1 = gl_malloc((size_t)P * (size_t)P * sizeof *r1);
        fftwf_complex *c1 = gl_malloc((size_t)B * (size_t)H * sizeof *c1);
        if (r && c && r1 && c1) {
            p->shift_fwd = fftwf_plan_dft_r2c_2d((int)ny, (int)nx, r, c, FFTW_ESTIMATE);
            p->shift_inv = fftwf_plan_dft_c2r_2d((int)ny, (int)nx, c, r, FFTW_ESTIMATE);
            p->rows_fwd =
                fftwf_plan_many_dft_r2c(1, &P, B, r1, NULL, 1, P, c1, NULL, 1, H, FFTW_ESTIMATE);
            p->rows_inv =
                fftwf_plan_many_dft_c2r(1, &P, B, c1, NULL, 1, H, r1, NULL, 1, P, FFTW_ESTIMATE);
            if (!p->shift_fwd || !p->shift_inv || !p->rows_fwd || !p->rows_inv)
                st =
                    gl_error_set(GL_ERR_INTERNAL, "FFTW could not plan %ldx%ld transforms", nx, ny);
        } else {
            st = gl_error_nomem("geometry plan buffers");
        }
        gl_free(r);
        gl_free(c);
        gl_free(r1);
        gl_free(c1);
    }
    if (st) {
        gl_geom_plan_free(p);
        return st;
    }
    *out = p;
    return GL_OK;
}

void gl_geom_plan_free(gl_geom_plan *p)
{
    if (!p)
        return;
    if (p->shift_fwd)
        fftwf_destroy_plan(p->shift_fwd);
    if (p->shift_inv)
        fftwf_destroy_plan(p->shift_inv);
    fftwf_plan plans[] = {p->rows_fwd, p->rows_inv};
    for (int i = 0; i < 2; i++)
        if (plans[i])
            fftwf_destroy_plan(plans[i]);
    gl_free(p);
}

gl_status gl_geom_work_new(const gl_geom_plan *p, gl_geom_work **out)
{
    *out = NULL;
    gl_geom_work *w = gl_calloc(1, sizeof *w);
    if (!w)
        return gl_error_nomem("geometry work space");
    size_t n = (size_t)p->nx * (size_t)p->ny;
    w->copy = gl_malloc(n * sizeof(float));
    int ok = w->copy != NULL;
    if (p->interp == GL_INTERP_FFT) {
        size_t pad = (size_t)p->pad;
        w->real2d = gl_malloc(n * sizeof(float));
        w->spec2d = gl_malloc((size_t)p->ny * (size_t)(p->nx / 2 + 1) * sizeof(fftwf_complex));
        /* zero once: a rotation writes only the rows it shears (rotate.c) */
        w->padded = gl_calloc(pad * pad, sizeof(float));
        w->lines = gl_malloc((size_t)GL_GEOM_BATCH * pad * sizeof(float));
        w->specb = gl_malloc((size_t)GL_GEOM_BATCH * (pad / 2 + 1) * sizeof(fftwf_complex));
        w->phase_x = gl_malloc((size_t)(p->nx / 2 + 1) * sizeof(fftwf_complex));
        w->phase_y = gl_malloc((size_t)p->ny * sizeof(fftwf_complex));
        w->ramp = gl_malloc((8 * (pad / 2 + 1) + 4) * sizeof(double));
        w->group_x = gl_malloc((size_t)GL_GEOM_STAMP_GROUP * (size_t)(p->nx / 2 + 1) *
                               sizeof(fftwf_complex));
        w->group_y = gl_malloc((size_t)GL_GEOM_STAMP_GROUP * (size_t)p->ny * sizeof(fftwf_complex));
        ok = ok && w->real2d && w->spec2d && w->padded && w->lines && w->specb && w->phase_x &&
             w->phase_y && w->ramp && w->group_x && w->group_y;
    }
    if (!ok) {
        gl_geom_work_free(w);
        return gl_error_nomem("geometry work space");
    }
    *out = w;
    return GL_OK;
}

void gl_geom_work_free(gl_geom_work *w)
{
    if (!w)
        return;
    gl_free(w->copy);
    gl_free(w->real2d);
    gl_free(w->spec2d);
    gl_free(w->padded);
    gl_free(w->lines);
    gl_free(w->specb);
    gl_free(w->phase_x);
    gl_free(w->phase_y);
    gl_free(w->ramp);
    gl_free(w->group_x);
    gl_free(w->group_y);
    gl_free(w);
}
