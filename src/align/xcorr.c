/*
 * xcorr.c -- sub-pixel image registration by cross-correlation, following
 * Guizar-Sicairos, Thurman & Fienup 2008 (Opt. Lett. 33, 156): the integer
 * peak of the FFT cross-correlation, then the correlation evaluated on a
 * 1.5 x 1.5 pixel neighbourhood of that peak with 1/upsample pixel spacing by
 * a matrix-multiply DFT (two complex matrix products through BLAS zgemm)
 * instead of a zero-padded FFT. The same machinery gives the centre of point
 * symmetry of an image: its correlation with its own 180-degree rotation
 * peaks at twice the offset of the symmetry centre from the array centre.
 * Assumptions: the images overlap mostly (shifts well below half the frame);
 * NaN pixels count as 0. Plain (not phase-normalised) correlation, as in the
 * paper.
 */
#include "align/internal.h"
#include "core/internal.h"

#include <cblas.h>
#include <fftw3.h>
#include <math.h>
#include <string.h>

struct gl_xcorr_plan {
    long nx, ny;
    int up, region;     /* upsample factor, side of the upsampled region */
    fftw_plan fwd, inv; /* in-place 2-D c2c on ny x nx */
    fftw_complex *ref;  /* reference spectrum (NULL for symmetry plans) */
    double ref_energy;  /* sum of squared reference pixels */
};

struct gl_xcorr_work {
    fftw_complex *buf;  /* ny x nx */
    fftw_complex *prod; /* ny x nx cross-power spectrum */
    fftw_complex *kx;   /* nx x region */
    fftw_complex *ky;   /* region x ny */
    fftw_complex *tmp;  /* ny x region */
    fftw_complex *up;   /* region x region */
};

/* Integer frequency of DFT index k of a length-n axis (numpy fftfreq * n). */
static inline double freq(long k, long n)
{
    return (double)(k <= (n - 1) / 2 ? k : k - n);
}

static gl_status plan_make(long nx, long ny, int upsample, gl_xcorr_plan **out)
{
    *out = NULL;
    if (nx < 2 || ny < 2 || upsample < 1 || upsample > 1000)
        return gl_error_set(GL_ERR_USAGE, "registration: bad image size %ldx%ld or upsampling %d",
                            nx, ny, upsample);
    gl_xcorr_plan *p = gl_calloc(1, sizeof *p);
    fftw_complex *tmp = gl_malloc((size_t)nx * (size_t)ny * sizeof *tmp);
    if (!p || !tmp) {
        gl_free(p);
        gl_free(tmp);
        return gl_error_nomem("registration plan");
    }
    p->nx = nx;
    p->ny = ny;
    p->up = upsample;
    p->region = (int)ceil(1.5 * upsample);
    p->fwd = fftw_plan_dft_2d((int)ny, (int)nx, tmp, tmp, FFTW_FORWARD, FFTW_ESTIMATE);
    p->inv = fftw_plan_dft_2d((int)ny, (int)nx, tmp, tmp, FFTW_BACKWARD, FFTW_ESTIMATE);
    gl_free(tmp);
    if (!p->fwd || !p->inv) {
        gl_xcorr_plan_free(p);
        return gl_error_set(GL_ERR_INTERNAL, "registration: FFTW could not plan %ldx%ld", nx, ny);
    }
    *out = p;
    return GL_OK;
}

/* Spectrum of img (NaN as 0) into buf; returns the sum of squares. */
static double spectrum(const gl_xcorr_plan *p, const float *img, fftw_complex *buf, int rotate)
{
    size_t n = (size_t)p->nx * (size_t)p->ny;
    double e = 0;
    for (size_t i = 0; i < n; i++) {
        float v = img[rotate ? n - 1 - i : i];
        double d = isnan(v) ? 0.0 : (double)v;
        buf[i][0] = d;
        buf[i][1] = 0;
        e += d * d;
    }
    fftw_execute_dft(p->fwd, buf, buf);
    return e;
}

gl_status gl_xcorr_plan_new(const float *reference, long nx, long ny, int upsample,
                            gl_xcorr_plan **out)
{
    gl_status st = plan_make(nx, ny, upsample, out);
    if (st || !reference)
        return st;
    gl_xcorr_plan *p = *out;
    p->ref = gl_malloc((size_t)nx * (size_t)ny * sizeof *p->ref);
    if (!p->ref) {
        gl_xcorr_plan_free(p);
        *out = NULL;
        return gl_error_nomem("registration reference");
    }
    p->ref_energy = spectrum(p, reference, p->ref, 0);
    return GL_OK;
}

void gl_xcorr_plan_free(gl_xcorr_plan *p)
{
    if (!p)
        return;
    if (p->fwd)
        fftw_destroy_plan(p->fwd);
    if (p->inv)
        fftw_destroy_plan(p->inv);
    gl_free(p->ref);
    gl_free(p);
}

gl_status gl_xcorr_work_new(const gl_xcorr_plan *p, gl_xcorr_work **out)
{
    *out = NULL;
    size_t n = (size_t)p->nx * (size_t)p->ny, r = (size_t)p->region;
    gl_xcorr_work *w = gl_calloc(1, sizeof *w);
    if (!w)
        return gl_error_nomem("registration work");
    w->buf = gl_malloc(n * sizeof *w->buf);
    w->prod = gl_malloc(n * sizeof *w->prod);
    w->kx = gl_malloc((size_t)p->nx * r * sizeof *w->kx);
    w->ky = gl_malloc((size_t)p->ny * r * sizeof *w->ky);
    w->tmp = gl_malloc((size_t)p->ny * r * sizeof *w->tmp);
    w->up = gl_malloc(r * r * sizeof *w->up);
    if (!w->buf || !w->prod || !w->kx || !w->ky || !w->tmp || !w->up) {
        gl_xcorr_work_free(w);
        return gl_error_nomem("registration work");
    }
    *out = w;
    return GL_OK;
}

void gl_xcorr_work_free(gl_xcorr_work *w)
{
    if (!w)
        return;
    gl_free(w->buf);
    gl_free(w->prod);
    gl_free(w->kx);
    gl_free(w->ky);
    gl_free(w->tmp);
    gl_free(w->up);
    gl_free(w);
}

/* From the cross-power spectrum in w->prod: the shift at the correlation
 * peak, to 1/up pixel, and the peak value |sum_k prod e^{...}|. */
static void locate_peak(const gl_xcorr_plan *p, gl_xcorr_work *w, double *dx, double *dy,
                        double *peak)
{
    long nx = p->nx, ny = p->ny;
    size_t n = (size_t)nx * (size_t)ny;
    memcpy(w->buf, w->prod, n * sizeof *w->buf);
    fftw_execute_dft(p->inv, w->buf, w->buf);
    size_t best = 0;
    double bv = -1;
    for (size_t i = 0; i < n; i++) {
        double a = w->buf[i][0] * w->buf[i][0] + w->buf[i][1] * w->buf[i][1];
        if (a > bv) {
            bv = a;
            best = i;
        }
    }
    long iy = (long)(best / (size_t)nx), ix = (long)(best % (size_t)nx);
    double sy = (double)(iy > ny / 2 ? iy - ny : iy);
    double sx = (double)(ix > nx / 2 ? ix - nx : ix);
    *peak = sqrt(bv);
    if (p->up > 1) {
        /* correlation sampled at s + (u - c) / up, u = 0..region-1, by
         * CC = Ky * P * Kx with Kx[k][v] = exp(2 pi i f(k) s_v / n) */
        int up = p->up, R = p->region;
        double c = floor(R / 2.0);
        sx = round(sx * up) / up;
        sy = round(sy * up) / up;
        for (long k = 0; k < nx; k++) {
            double f = 2 * M_PI * freq(k, nx) / (double)nx;
            for (int v = 0; v < R; v++) {
                double a = f * (sx + (v - c) / up);
                w->kx[(size_t)k * R + v][0] = cos(a);
                w->kx[(size_t)k * R + v][1] = sin(a);
            }
        }
        for (int u = 0; u < R; u++) {
            double s = sy + (u - c) / up;
            for (long k = 0; k < ny; k++) {
                double a = 2 * M_PI * freq(k, ny) / (double)ny * s;
                w->ky[(size_t)u * ny + k][0] = cos(a);
                w->ky[(size_t)u * ny + k][1] = sin(a);
            }
        }
        const double one[2] = {1, 0}, zero[2] = {0, 0};
        cblas_zgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, (int)ny, R, (int)nx, one, w->prod,
                    (int)nx, w->kx, R, zero, w->tmp, R);
        cblas_zgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, R, R, (int)ny, one, w->ky, (int)ny,
                    w->tmp, R, zero, w->up, R);
        int bu = 0, bw = 0;
        bv = -1;
        for (int u = 0; u < R; u++)
            for (int v = 0; v < R; v++) {
                const double *z = w->up[(size_t)u * R + v];
                double a = z[0] * z[0] + z[1] * z[1];
                if (a > bv) {
                    bv = a;
                    bu = u;
                    bw = v;
                }
            }
        sy += (bu - c) / up;
        sx += (bw - c) / up;
        *peak = sqrt(bv) / (double)n; /* the inverse FFT above is unnormalised too */
    } else {
        *peak /= (double)n;
    }
    *dx = sx;
    *dy = sy;
}

gl_status gl_align_xcorr_shift(const gl_xcorr_plan *p, gl_xcorr_work *w, const float *img,
                               double *dx, double *dy, double *error)
{
    if (!p->ref)
        return gl_error_set(GL_ERR_INTERNAL, "registration plan without a reference");
    size_t n = (size_t)p->nx * (size_t)p->ny;
    double e = spectrum(p, img, w->buf, 0);
    if (!(e > 0))
        return gl_error_set(GL_ERR_NUMERIC, "registration of an image without data");
    for (size_t i = 0; i < n; i++) {
        double fr = p->ref[i][0], fi = p->ref[i][1], gr = w->buf[i][0], gi = w->buf[i][1];
        w->prod[i][0] = fr * gr + fi * gi; /* F conj(G) */
        w->prod[i][1] = fi * gr - fr * gi;
    }
    double peak;
    locate_peak(p, w, dx, dy, &peak);
    if (error) {
        double denom = p->ref_energy * e;
        *error = denom > 0 ? sqrt(fabs(1 - peak * peak / denom)) : NAN;
    }
    return GL_OK;
}

gl_status gl_symmetry_centre_with(const gl_xcorr_plan *p, gl_xcorr_work *w, fftw_complex *spec,
                                  const float *img, double *x, double *y)
{
    size_t n = (size_t)p->nx * (size_t)p->ny;
    double e = spectrum(p, img, spec, 0);
    if (!(e > 0))
        return gl_error_set(GL_ERR_NUMERIC, "symmetry centre of an empty image");
    spectrum(p, img, w->buf, 1);
    for (size_t i = 0; i < n; i++) {
        double fr = spec[i][0], fi = spec[i][1], gr = w->buf[i][0], gi = w->buf[i][1];
        w->prod[i][0] = fr * gr + fi * gi;
        w->prod[i][1] = fi * gr - fr * gi;
    }
    double sx, sy, peak;
    locate_peak(p, w, &sx, &sy, &peak);
    /* the rotation about ((n-1)/2) maps a centre c to 2 (n-1)/2 - c, so the
     * shift back onto the image is 2 (c - (n-1)/2) */
    *x = 0.5 * (double)(p->nx - 1) + 0.5 * sx;
    *y = 0.5 * (double)(p->ny - 1) + 0.5 * sy;
    return GL_OK;
}

gl_status gl_symmetry_plan_new(long nx, long ny, int upsample, gl_xcorr_plan **out)
{
    return plan_make(nx, ny, upsample, out);
}

gl_status gl_align_symmetry_centre(const float *img, long nx, long ny, int upsample, double *x,
                                   double *y)
{
    gl_xcorr_plan *p = NULL;
    gl_xcorr_work *w = NULL;
    fftw_complex *spec = NULL;
    gl_status st = plan_make(nx, ny, upsample, &p);
    if (!st)
        st = gl_xcorr_work_new(p, &w);
    if (!st && !(spec = gl_malloc((size_t)nx * (size_t)ny * sizeof *spec)))
        st = gl_error_nomem("symmetry spectrum");
    if (!st)
        st = gl_symmetry_centre_with(p, w, spec, img, x, y);
    gl_free(spec);
    gl_xcorr_work_free(w);
    gl_xcorr_plan_free(p);
    return st;
}
