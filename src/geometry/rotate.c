/*
 * rotate.c -- rotation of an image about the star centre (nx/2, ny/2).
 *
 * FFT: the angle is split into an exact multiple of 90 degrees (a pixel
 * permutation) and a remainder phi in [-45, 45] degrees, done as three shears
 * x-y-x with a = -tan(phi/2), b = sin(phi), each shear a row-wise Fourier
 * shift (Larkin, Oldfield & Klemm 1997, Opt. Commun. 139, 99). The image is
 * placed in a zero-padded square about 1.5 times its side, so that no shear
 * wraps content onto samples that are used (plan.c); each
 * shear conserves every row's flux, so the rotation conserves total flux.
 * The y-shear gathers its columns into contiguous lines first (FFTW's strided
 * column transforms run at half the speed of the row ones; bench/README.md).
 * Cubic: Keys convolution sampled at the inversely rotated position.
 * Either way, output pixels whose source lies outside the input, or whose
 * nearest source pixel is NaN, are NaN.
 */
#include "core/internal.h"
#include "geometry/internal.h"

#include <math.h>
#include <string.h>

/* Inverse rotation of output pixel (x, y) by angle (c = cos, s = sin). */
static inline void source_of(double x, double y, double cx, double cy, double c, double s,
                             double *sx, double *sy)
{
    double u = x - cx, v = y - cy;
    *sx = cx + c * u + s * v;
    *sy = cy - s * u + c * v;
}

/* Output pixels whose nearest source pixel lies outside the input or is NaN
 * become NaN. The source positions of a run of pixels are computed first
 * (the expressions of source_of and nearest, in int: the same values for any
 * frame under 65536 px, and a loop the compiler vectorises), then checked. */
__attribute__((target_clones("avx2", "default"))) static void
mask_rotated(const float *src, float *img, long nx, long ny, double c, double s)
{
    enum { RUN = 256 };
    int ix[RUN], iy[RUN];
    double cx = (double)(nx / 2), cy = (double)(ny / 2);
    for (long y = 0; y < ny; y++)
        for (long x0 = 0; x0 < nx; x0 += RUN) {
            long n = nx - x0 < RUN ? nx - x0 : RUN;
            double v = (double)y - cy;
            for (long k = 0; k < n; k++) {
                double u = (double)(x0 + k) - cx;
                double sx = cx + c * u + s * v, sy = cy - s * u + c * v;
                ix[k] = (int)(sx + 65536.5) - 65536;
                iy[k] = (int)(sy + 65536.5) - 65536;
            }
            for (long k = 0; k < n; k++)
                if ((unsigned)ix[k] >= (unsigned)nx || (unsigned)iy[k] >= (unsigned)ny ||
                    isnan(src[(long)iy[k] * nx + ix[k]]))
                    img[y * nx + x0 + k] = NAN;
        }
}

/* First index of a batch covering lo, aligned to the batch size, kept inside
 * the padded side P (a multiple of 16). */
static long batch_start(long lo)
{
    return lo / GL_GEOM_BATCH * GL_GEOM_BATCH;
}

/* Phase tables of one shear in which line j (row or column) moves by
 * s (j - C) samples, periodically over P: e_k = exp(-2 pi i k s / P) (one
 * line further), e8_k = e_k^8 (one batch further) and b_k, the factor of the
 * first line j0 including the 1/P of the inverse transform. Each table is a
 * geometric sequence in k, built by complex recurrence in double from its
 * ratio (three sincos a shear instead of three a frequency: the rounding
 * grows to ~1e-14 over the P/2 + 1 terms). The factors of later lines come
 * by the same recurrence over at most P lines (~1e-14 too), vectorised over
 * k; both far below float precision. */
static void shear_tables(long P, double s, long j0, double *ramp)
{
    long m = P / 2 + 1, C = P / 2;
    double *er = ramp, *ei = er + m, *br = ei + m, *bi = br + m, *e8r = bi + m, *e8i = e8r + m;
    /* the Nyquist factor of line j, cos(pi s (j - C)), as the real part of
     * exp(i pi s (j - C)), by the same recurrence from line j0 */
    double *nyq = ramp + 8 * m;
    nyq[0] = cos(M_PI * s * (double)(j0 - C));
    nyq[1] = sin(M_PI * s * (double)(j0 - C));
    nyq[2] = cos(M_PI * s);
    nyq[3] = sin(M_PI * s);
    double a1 = -2 * M_PI * s / (double)P, q[3][2];
    double ang[3] = {a1, GL_GEOM_BATCH * a1, a1 * (double)(j0 - C)};
    double *re[3] = {er, e8r, br}, *im[3] = {ei, e8i, bi};
    for (int t = 0; t < 3; t++) {
        q[t][0] = cos(ang[t]);
        q[t][1] = sin(ang[t]);
        double zr = t == 2 ? 1.0 / (double)P : 1.0, zi = 0;
        for (long k = 0; k < m; k++) {
            re[t][k] = zr;
            im[t][k] = zi;
            double u = zr * q[t][0] - zi * q[t][1];
            zi = zr * q[t][1] + zi * q[t][0];
            zr = u;
        }
    }
}

/* Applies the phases to the GL_GEOM_BATCH spectra of w->specb for the next
 * lines of the tables (shear_tables), then moves the tables one batch on.
 * An even length's Nyquist bin gets the real factor cos(pi d) / P (d the
 * line's shift), which keeps the spectrum Hermitian (see shift.c). */
/* AVX-512 or AVX2 where the processor has it: the same IEEE operations (no
 * fused multiply-add in ISO C mode), four or two times the lanes. */
__attribute__((target_clones("avx512f", "avx2", "default"))) static void
shear_batch(long P, double *ramp, fftwf_complex *spec)
{
    long m = P / 2 + 1, kend = P % 2 == 0 ? m - 1 : m;
    double *er = ramp, *ei = er + m, *br = ei + m, *bi = br + m, *e8r = bi + m, *e8i = e8r + m;
    double *pr = ramp + 6 * m, *pi = pr + m;
    memcpy(pr, br, (size_t)m * sizeof *pr);
    memcpy(pi, bi, (size_t)m * sizeof *pi);
    for (int b = 0; b < GL_GEOM_BATCH; b++) {
        float *z = spec[(size_t)b * (size_t)m];
        for (long k = 0; k < kend; k++) {
            double re = z[2 * k], im = z[2 * k + 1];
            z[2 * k] = (float)(re * pr[k] - im * pi[k]);
            z[2 * k + 1] = (float)(re * pi[k] + im * pr[k]);
            double t = pr[k] * er[k] - pi[k] * ei[k];
            pi[k] = pr[k] * ei[k] + pi[k] * er[k];
            pr[k] = t;
        }
        if (P % 2 == 0) {
            double *nyq = ramp + 8 * m, c = nyq[0] / (double)P;
            z[2 * (m - 1)] = (float)(z[2 * (m - 1)] * c);
            z[2 * (m - 1) + 1] = (float)(z[2 * (m - 1) + 1] * c);
            double t = nyq[0] * nyq[2] - nyq[1] * nyq[3];
            nyq[1] = nyq[0] * nyq[3] + nyq[1] * nyq[2];
            nyq[0] = t;
        }
    }
    for (long k = 0; k < m; k++) {
        double t = br[k] * e8r[k] - bi[k] * e8i[k];
        bi[k] = br[k] * e8i[k] + bi[k] * e8r[k];
        br[k] = t;
    }
}

/* The batches of rows that cover rows lo..hi: from *j0 to *j1, whole
 * batches starting at lo (row offsets keep the planning buffer's alignment,
 * the side being a multiple of 16), moved back where they would pass the
 * square's edge. */
static void row_batches(long lo, long hi, long P, long *j0, long *j1)
{
    long n = (hi - lo + GL_GEOM_BATCH) / GL_GEOM_BATCH * GL_GEOM_BATCH;
    *j0 = lo + n > P ? P - n : lo;
    *j1 = *j0 + n - 1;
}

/* x-shear: row j moves by a (j - C), for the batches of rows j0..j1 (the
 * shear of an empty row is empty, so batches may run past the content). */
static void shear_rows(const gl_geom_plan *p, gl_geom_work *w, double a, long j0, long j1)
{
    long P = p->pad;
    shear_tables(P, a, j0, w->ramp);
    for (; j0 <= j1; j0 += GL_GEOM_BATCH) {
        float *rows = w->padded + j0 * P;
        fftwf_execute_dft_r2c(p->rows_fwd, rows, w->specb);
        shear_batch(P, w->ramp, w->specb);
        fftwf_execute_dft_c2r(p->rows_inv, w->specb, rows);
    }
}

/* y-shear: column i moves by b (i - C), for columns lo..hi. The columns'
 * content lies in rows r0..r1 (zero elsewhere) and only rows o0..o1 of the
 * result are used: each batch of columns is gathered into contiguous lines
 * (w->lines, zero outside r0..r1), shifted there with the row transforms
 * (strided column transforms run at half their speed) and the rows o0..o1
 * written back. */
static void shear_cols(const gl_geom_plan *p, gl_geom_work *w, double b, long lo, long hi, long r0,
                       long r1, long o0, long o1)
{
    enum { B = GL_GEOM_BATCH };
    long P = p->pad, i0 = batch_start(lo);
    float *t = w->lines;
    for (int q = 0; q < B; q++) {
        memset(t + (size_t)q * (size_t)P, 0, (size_t)r0 * sizeof *t);
        memset(t + (size_t)q * (size_t)P + r1 + 1, 0, (size_t)(P - r1 - 1) * sizeof *t);
    }
    shear_tables(P, b, i0, w->ramp);
    for (; i0 <= hi; i0 += B) {
        for (long y = r0; y <= r1; y++) {
            const float *src = w->padded + y * P + i0;
            for (int q = 0; q < B; q++)
                t[(size_t)q * (size_t)P + (size_t)y] = src[q];
        }
        fftwf_execute_dft_r2c(p->rows_fwd, t, w->specb);
        shear_batch(P, w->ramp, w->specb);
        fftwf_execute_dft_c2r(p->rows_inv, w->specb, t);
        for (long y = o0; y <= o1; y++) {
            float *dst = w->padded + y * P + i0;
            for (int q = 0; q < B; q++)
                dst[q] = t[(size_t)q * (size_t)P + (size_t)y];
        }
        /* the inverse transform filled every sample: clear the pad again */
        if (i0 + B <= hi)
            for (int q = 0; q < B; q++) {
                memset(t + (size_t)q * (size_t)P, 0, (size_t)r0 * sizeof *t);
                memset(t + (size_t)q * (size_t)P + r1 + 1, 0, (size_t)(P - r1 - 1) * sizeof *t);
            }
    }
}

static long clamp_index(long v, long P)
{
    return v < 0 ? 0 : (v >= P ? P - 1 : v);
}

__attribute__((target_clones("avx2", "default"))) static void
rotate_fft(const gl_geom_plan *p, gl_geom_work *w, const float *in, float *img, double angle_deg)
{
    long nx = p->nx, ny = p->ny, P = p->pad, C = P / 2;
    long cx = nx / 2, cy = ny / 2;
    long quarter = lround(angle_deg / 90.0);
    double phi = (angle_deg - 90.0 * (double)quarter) * M_PI / 180;
    int k = (int)(((quarter % 4) + 4) % 4);

    /* The content after the quarter turn lies in rows C + vlo .. C + vhi;
     * the first shear runs on the batches r0..r1 around them, the last on
     * the batches o0..o1 around the output window. Only these rows are ever
     * written: the rest of the square stays zero from gl_geom_work_new. */
    long vlo = k == 0 ? -cy : k == 1 ? -cx : k == 2 ? -(ny - 1 - cy) : -(nx - 1 - cx);
    long vhi = k == 0 ? ny - 1 - cy : k == 1 ? nx - 1 - cx : k == 2 ? cy : cx;
    long r0, r1, o0, o1;
    row_batches(C + vlo, C + vhi, P, &r0, &r1);
    row_batches(C - cy, C - cy + ny - 1, P, &o0, &o1);
    long z0 = r0 < o0 ? r0 : o0, z1 = r1 > o1 ? r1 : o1;
    memset(w->padded + z0 * P, 0, (size_t)(z1 - z0 + 1) * (size_t)P * sizeof *w->padded);
    /* exact counter-clockwise quarter turn: (u, v) -> (ru, rv) = (cu u + su v, ...) */
    static const int rot[4][4] = {{1, 0, 0, 1}, {0, -1, 1, 0}, {-1, 0, 0, -1}, {0, 1, -1, 0}};
    const int *R = rot[k];
    for (long y = 0; y < ny; y++) {
        const float *src = in + y * nx;
        long v = y - cy;
        for (long x = 0; x < nx; x++) {
            long u = x - cx;
            long ru = R[0] * u + R[1] * v, rv = R[2] * u + R[3] * v;
            float val = src[x];
            w->padded[(C + rv) * P + (C + ru)] = isnan(val) ? 0.0f : val;
        }
    }
    if (phi != 0) {
        double a = -tan(phi / 2), b = sin(phi);
        long h = (nx > ny ? nx : ny) / 2 + 2;
        long h1 = (long)ceil((double)h * (1 + fabs(a))) + 2;
        shear_rows(p, w, a, r0, r1);
        /* the last shear moves rows independently: only the rows of the
         * output window are needed (the batches around them are shifted
         * whole) */
        shear_cols(p, w, b, clamp_index(C - h1, P), clamp_index(C + h1, P), r0, r1, o0, o1);
        shear_rows(p, w, a, o0, o1);
    }
    for (long y = 0; y < ny; y++)
        memcpy(img + y * nx, w->padded + (C + y - cy) * P + (C - cx), (size_t)nx * sizeof *img);
}

/* The NaN pixels of img as bits (pixel j: bit j % 8 of byte j / 8), eight
 * pixels a byte. */
__attribute__((target_clones("avx2", "default"))) static void
nan_bits_record(const float *img, long n, unsigned char *bits)
{
    long n8 = n / 8;
    for (long b = 0; b < n8; b++) {
        const float *v = img + 8 * b;
        unsigned m = 0;
        for (int q = 0; q < 8; q++)
            m |= (unsigned)(v[q] != v[q]) << q;
        bits[b] = (unsigned char)m;
    }
    if (n % 8) {
        unsigned m = 0;
        for (long j = 8 * n8; j < n; j++)
            m |= (unsigned)(img[j] != img[j]) << (j % 8);
        bits[n8] = (unsigned char)m;
    }
}

static void nan_bits_apply(float *img, long n, const unsigned char *bits)
{
    for (long b = 0; b < (n + 7) / 8; b++)
        if (bits[b])
            for (long j = b * 8; j < b * 8 + 8 && j < n; j++)
                if (bits[b] >> (j % 8) & 1)
                    img[j] = NAN;
}

void gl_geom_nan_bits(const float *img, long n, unsigned char *bits)
{
    nan_bits_record(img, n, bits);
}

gl_status gl_geom_rotate_masked(const gl_geom_plan *p, gl_geom_work *w, float *img,
                                double angle_deg, unsigned char *bits, int *known)
{
    long n = p->nx * p->ny;
    if (!*known || p->interp != GL_INTERP_FFT || !isfinite(angle_deg)) {
        gl_status st = gl_geom_rotate(p, w, img, angle_deg);
        if (!st) {
            nan_bits_record(img, n, bits);
            *known = 1;
        }
        return st;
    }
    /* the input is read before the output is written: no copy needed */
    rotate_fft(p, w, img, img, angle_deg);
    nan_bits_apply(img, n, bits);
    return GL_OK;
}

gl_status gl_geom_rotate(const gl_geom_plan *p, gl_geom_work *w, float *img, double angle_deg)
{
    if (!isfinite(angle_deg))
        return gl_error_set(GL_ERR_INTERNAL, "rotation by a non-finite angle");
    long nx = p->nx, ny = p->ny;
    memcpy(w->copy, img, (size_t)nx * (size_t)ny * sizeof *img);
    double t = angle_deg * M_PI / 180, c = cos(t), s = sin(t);
    /* exact values at quarter turns keep the NaN mask a clean permutation */
    if (fmod(angle_deg, 90.0) == 0) {
        long q = ((lround(angle_deg / 90.0) % 4) + 4) % 4;
        c = q == 0 ? 1 : (q == 2 ? -1 : 0);
        s = q == 1 ? 1 : (q == 3 ? -1 : 0);
    }
    if (p->interp == GL_INTERP_CUBIC) {
        double cx = (double)(nx / 2), cy = (double)(ny / 2);
        for (long y = 0; y < ny; y++)
            for (long x = 0; x < nx; x++) {
                double sx, sy;
                source_of((double)x, (double)y, cx, cy, c, s, &sx, &sy);
                img[y * nx + x] = gl_geom_cubic_sample(w->copy, nx, ny, sx, sy);
            }
        return GL_OK;
    }
    rotate_fft(p, w, w->copy, img, angle_deg);
    mask_rotated(w->copy, img, nx, ny, c, s);
    return GL_OK;
}
