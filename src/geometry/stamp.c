/*
 * stamp.c -- many shifted copies of one image at the cost of one inverse FFT.
 *
 * The shift theorem makes a sum of shifted copies a sum of phase ramps times
 * one spectrum: sum_k w_k F(u) exp(-2 pi i (u dx_k + v dy_k)). The stamp's
 * spectrum is computed once; each call builds the summed ramp (separable in
 * x and y for each copy) and transforms back once. Used to plant all the fake
 * companions of a frame together.
 */
#include "core/internal.h"
#include "geometry/internal.h"

#include <math.h>
#include <string.h>

gl_status gl_geom_stamp_new(const gl_geom_plan *p, gl_geom_work *w, const float *img,
                            gl_geom_stamp **out)
{
    *out = NULL;
    if (p->interp != GL_INTERP_FFT)
        return gl_error_set(GL_ERR_INTERNAL, "stamps need an FFT geometry plan");
    size_t n = (size_t)p->nx * (size_t)p->ny, m = (size_t)p->ny * (size_t)(p->nx / 2 + 1);
    gl_geom_stamp *s = gl_calloc(1, sizeof *s);
    if (!s || !(s->spec = gl_malloc(m * sizeof *s->spec))) {
        gl_geom_stamp_free(s);
        return gl_error_nomem("stamp");
    }
    s->nx = p->nx;
    s->ny = p->ny;
    for (size_t i = 0; i < n; i++)
        w->real2d[i] = isnan(img[i]) ? 0.0f : img[i];
    fftwf_execute_dft_r2c(p->shift_fwd, w->real2d, s->spec);
    float norm = 1.0f / (float)n;
    for (size_t i = 0; i < m; i++) {
        s->spec[i][0] *= norm;
        s->spec[i][1] *= norm;
    }
    *out = s;
    return GL_OK;
}

void gl_geom_stamp_free(gl_geom_stamp *s)
{
    if (!s)
        return;
    gl_free(s->spec);
    gl_free(s);
}

/* One row of the summed ramp: acc += a (phase_x (yr + i yi)). AVX2 where
 * the processor has it: the same IEEE operations, more lanes (not AVX-512,
 * whose complex-product pattern GCC fuses into multiply-adds even in ISO C
 * mode, which changes the last bits). */
__attribute__((target_clones("avx2", "default"))) static void
ramp_row(long mx, float yr, float yi, const fftwf_complex *restrict px,
         const fftwf_complex *restrict a, fftwf_complex *restrict acc)
{
    for (long kx = 0; kx < mx; kx++) {
        float pr = px[kx][0] * yr - px[kx][1] * yi;
        float pi = px[kx][0] * yi + px[kx][1] * yr;
        acc[kx][0] += a[kx][0] * pr - a[kx][1] * pi;
        acc[kx][1] += a[kx][0] * pi + a[kx][1] * pr;
    }
}

gl_status gl_geom_stamp_add(const gl_geom_plan *p, gl_geom_work *w, const gl_geom_stamp *s, int n,
                            const double *dx, const double *dy, const double *weight, float *out)
{
    long nx = p->nx, ny = p->ny, mx = nx / 2 + 1;
    if (s->nx != nx || s->ny != ny)
        return gl_error_set(GL_ERR_INTERNAL, "stamp made for another image size");
    memset(w->spec2d, 0, (size_t)ny * (size_t)mx * sizeof *w->spec2d);
    for (int k = 0; k < n; k++) {
        if (!isfinite(dx[k]) || !isfinite(dy[k]) || !isfinite(weight[k]))
            return gl_error_set(GL_ERR_INTERNAL, "stamp moved by a non-finite amount");
        gl_geom_phase_ramp(w->phase_x, mx, nx, dx[k]);
        gl_geom_phase_ramp(w->phase_y, ny, ny, dy[k]);
        float wk = (float)weight[k];
        for (long ky = 0; ky < ny; ky++)
            ramp_row(mx, w->phase_y[ky][0] * wk, w->phase_y[ky][1] * wk, w->phase_x,
                     s->spec + ky * mx, w->spec2d + ky * mx);
    }
    fftwf_execute_dft_c2r(p->shift_inv, w->spec2d, w->real2d);
    size_t np = (size_t)nx * (size_t)ny;
    for (size_t i = 0; i < np; i++)
        out[i] += w->real2d[i]; /* NaN (no data) stays NaN */
    return GL_OK;
}
