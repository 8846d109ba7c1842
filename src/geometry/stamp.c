/*
 * stamp.c -- many shifted copies of one image at the cost of one inverse FFT.
 *
 * The shift theorem makes a sum of shifted copies a sum of phase ramps times
 * one spectrum: sum_k w_k F(u) exp(-2 pi i (u dx_k + v dy_k)). The stamp's
 * spectrum is computed once; each call builds the summed ramp (separable in
 * x and y for each copy: a matrix product of the y and x ramps) and transforms
 * back once. Used to plant all the fake companions of a frame together.
 */
#include "core/internal.h"
#include "geometry/internal.h"

#include <cblas.h>
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

/* acc = a (elementwise) acc, in single-precision complex */
static void spectrum_times(long m, const fftwf_complex *restrict a, fftwf_complex *restrict acc)
{
    for (long k = 0; k < m; k++) {
        float re = acc[k][0], im = acc[k][1];
        acc[k][0] = a[k][0] * re - a[k][1] * im;
        acc[k][1] = a[k][0] * im + a[k][1] * re;
    }
}

gl_status gl_geom_stamp_add(const gl_geom_plan *p, gl_geom_work *w, const gl_geom_stamp *s, int n,
                            const double *dx, const double *dy, const double *weight, float *out)
{
    long nx = p->nx, ny = p->ny, mx = nx / 2 + 1;
    if (s->nx != nx || s->ny != ny)
        return gl_error_set(GL_ERR_INTERNAL, "stamp made for another image size");
    for (int k = 0; k < n; k++)
        if (!isfinite(dx[k]) || !isfinite(dy[k]) || !isfinite(weight[k]))
            return gl_error_set(GL_ERR_INTERNAL, "stamp moved by a non-finite amount");
    /* The summed ramp sum_k w_k py_k(v) px_k(u) is a complex matrix product
     * (ny x k) (k x mx), in groups of GL_GEOM_STAMP_GROUP copies: one BLAS
     * call per group instead of a complex multiply-add per copy and sample,
     * then one product with the stamp's spectrum. */
    const fftwf_complex one = {1.0f, 0.0f};
    for (int k0 = 0; k0 < n; k0 += GL_GEOM_STAMP_GROUP) {
        int g = n - k0 < GL_GEOM_STAMP_GROUP ? n - k0 : GL_GEOM_STAMP_GROUP;
        for (int k = 0; k < g; k++) {
            gl_geom_phase_ramp(w->group_x + (size_t)k * (size_t)mx, mx, nx, dx[k0 + k]);
            gl_geom_phase_ramp(w->phase_y, ny, ny, dy[k0 + k]);
            float wk = (float)weight[k0 + k];
            for (long ky = 0; ky < ny; ky++) {
                w->group_y[(size_t)ky * (size_t)g + (size_t)k][0] = w->phase_y[ky][0] * wk;
                w->group_y[(size_t)ky * (size_t)g + (size_t)k][1] = w->phase_y[ky][1] * wk;
            }
        }
        const fftwf_complex beta = {k0 == 0 ? 0.0f : 1.0f, 0.0f};
        cblas_cgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, (int)ny, (int)mx, g, one, w->group_y,
                    g, w->group_x, (int)mx, beta, w->spec2d, (int)mx);
    }
    if (n == 0)
        memset(w->spec2d, 0, (size_t)ny * (size_t)mx * sizeof *w->spec2d);
    spectrum_times(ny * mx, s->spec, w->spec2d);
    fftwf_execute_dft_c2r(p->shift_inv, w->spec2d, w->real2d);
    size_t np = (size_t)nx * (size_t)ny;
    for (size_t i = 0; i < np; i++)
        out[i] += w->real2d[i]; /* NaN (no data) stays NaN */
    return GL_OK;
}
