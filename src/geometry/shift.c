/*
 * shift.c -- sub-pixel translation of an image.
 *
 * FFT: the shift theorem, a linear phase ramp on the 2-D spectrum (exact for
 * band-limited, periodic images; conserves total flux exactly). At the
 * Nyquist frequency of an even axis the ramp exp(-i pi d) is replaced by its
 * real part cos(pi d), which keeps the spectrum Hermitian so the result stays
 * real (the usual symmetric treatment). Content that would wrap around the
 * edge is marked NaN instead, as is every pixel whose nearest source pixel
 * was NaN. Cubic: Keys convolution sampled at (x - dx, y - dy).
 */
#include "core/internal.h"
#include "geometry/internal.h"

#include <math.h>
#include <string.h>

/* Phase factors exp(-2 pi i k d / n) for k = 0..m-1 (frequencies of a length-n
 * axis, negative ones above n/2), Nyquist made real. By complex recurrence in
 * double from two sincos (q^k, and q^k exp(2 pi i d) for the negative
 * frequencies k - n): the rounding grows to ~1e-14 over a few thousand
 * terms, far below float precision. */
void gl_geom_phase_ramp(fftwf_complex *ph, long m, long n, double d)
{
    double a = -2 * M_PI * d / (double)n, qr = cos(a), qi = sin(a);
    double wr = cos(2 * M_PI * d), wi = sin(2 * M_PI * d);
    double zr = 1, zi = 0;
    for (long k = 0; k < m; k++) {
        if (n % 2 == 0 && k == n / 2) {
            ph[k][0] = (float)cos(M_PI * d);
            ph[k][1] = 0;
        } else if (k <= n / 2) {
            ph[k][0] = (float)zr;
            ph[k][1] = (float)zi;
        } else {
            ph[k][0] = (float)(zr * wr - zi * wi);
            ph[k][1] = (float)(zr * wi + zi * wr);
        }
        double t = zr * qr - zi * qi;
        zi = zr * qi + zi * qr;
        zr = t;
    }
}

/* NaN where the nearest source pixel of (x, y) - (dx, dy) is outside or NaN. */
static void mask_shifted(const float *src, float *img, long nx, long ny, double dx, double dy)
{
    for (long y = 0; y < ny; y++) {
        long sy = lround((double)y - dy);
        for (long x = 0; x < nx; x++) {
            long sx = lround((double)x - dx);
            if (sx < 0 || sx >= nx || sy < 0 || sy >= ny || isnan(src[sy * nx + sx]))
                img[y * nx + x] = NAN;
        }
    }
}

gl_status gl_geom_shift(const gl_geom_plan *p, gl_geom_work *w, float *img, double dx, double dy)
{
    if (!isfinite(dx) || !isfinite(dy))
        return gl_error_set(GL_ERR_INTERNAL, "shift by a non-finite amount");
    long nx = p->nx, ny = p->ny;
    size_t n = (size_t)nx * (size_t)ny;
    memcpy(w->copy, img, n * sizeof *img);
    if (dx == 0 && dy == 0)
        return GL_OK;
    if (p->interp == GL_INTERP_CUBIC) {
        for (long y = 0; y < ny; y++)
            for (long x = 0; x < nx; x++)
                img[y * nx + x] =
                    gl_geom_cubic_sample(w->copy, nx, ny, (double)x - dx, (double)y - dy);
        return GL_OK;
    }
    for (size_t i = 0; i < n; i++)
        w->real2d[i] = isnan(img[i]) ? 0.0f : img[i];
    fftwf_execute_dft_r2c(p->shift_fwd, w->real2d, w->spec2d);
    long mx = nx / 2 + 1;
    gl_geom_phase_ramp(w->phase_x, mx, nx, dx);
    gl_geom_phase_ramp(w->phase_y, ny, ny, dy);
    float norm = 1.0f / (float)n;
    for (long ky = 0; ky < ny; ky++) {
        float yr = w->phase_y[ky][0], yi = w->phase_y[ky][1];
        fftwf_complex *s = w->spec2d + ky * mx;
        for (long kx = 0; kx < mx; kx++) {
            float pr = w->phase_x[kx][0] * yr - w->phase_x[kx][1] * yi;
            float pi = w->phase_x[kx][0] * yi + w->phase_x[kx][1] * yr;
            float re = s[kx][0], im = s[kx][1];
            s[kx][0] = (re * pr - im * pi) * norm;
            s[kx][1] = (re * pi + im * pr) * norm;
        }
    }
    fftwf_execute_dft_c2r(p->shift_inv, w->spec2d, img);
    mask_shifted(w->copy, img, nx, ny, dx, dy);
    return GL_OK;
}
