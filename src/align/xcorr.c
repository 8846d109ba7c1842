/*
 * xcorr.c -- sub-pixel image registration by cross-correlation, following
 * Guizar-Sicairos, Thurman & Fienup 2008 (Opt. Lett. 33, 156): the integer
 * peak of the FFT cross-correlation, then the correlation evaluated on a
 * 1.5 x 1.5 pixel neighbourhood of that peak with 1/upsample pixel spacing by
 * a matrix-multiply DFT (two complex matrix products through BLAS zgemm)
 * instead of a zero-padded FFT. The refinement runs in two stages, first on a
 * 1/sqrt(upsample) grid over 1.5 pixels, then on the 1/upsample grid over
 * +-1 coarse step around the first maximum: the correlation peak is smooth
 * (as wide as the PSF), so this finds the same grid maximum as one fine
 * stage over 1.5 pixels at a sixth of the cost for upsample = 100. Real
 * images: forward and inverse transforms are real-to-complex and back, and
 * the DFT runs over the half spectrum (Hermitian symmetry). The same machinery gives the centre of
 * point symmetry of an image: its correlation with its own 180-degree rotation peaks at twice the
 * offset of the symmetry centre from the array centre. Assumptions: the images overlap mostly
 * (shifts well below half the frame); NaN pixels count as 0. Plain (not phase-normalised)
 * correlation, as in the paper.
 */
#include "align/internal.h"
#include "core/internal.h"

#include <cblas.h>
#include <fftw3.h>
#include <math.h>
#include <string.h>

struct gl_xcorr_plan {
    long nx, ny, mx;    /* mx = nx/2 + 1 columns of the half spectrum */
    int up;             /* final upsampling factor */
    int up1, region1;   /* first stage: factor and region side */
    int region2;        /* second stage region side */
    fftw_plan fwd, inv; /* 2-D r2c and c2r on ny x nx */
    fftw_complex *ref;  /* reference half spectrum (NULL for symmetry plans) */
    double ref_energy;  /* sum of squared reference pixels */
};

struct gl_xcorr_work {
    double *real;       /* ny x nx */
    fftw_complex *half; /* ny x mx scratch spectrum */
    fftw_complex *prod; /* ny x mx cross-power spectrum */
    fftw_complex *kx;   /* mx x region */
    fftw_complex *ky;   /* region x ny */
    fftw_complex *tmp;  /* ny x region */
    fftw_complex *up;   /* region x region */
};

/* Integer frequency of DFT index k of a length-n axis (numpy fftfreq * n). */
static inline double freq(long k, long n)
{
    return (double)(k <= (n - 1) / 2 ? k : k - n);
}

static int max_region(const gl_xcorr_plan *p)
{
    return GL_MAX(p->region1, p->region2);
}

static gl_status plan_make(long nx, long ny, int upsample, gl_xcorr_plan **out)
{
    *out = NULL;
    if (nx < 2 || ny < 2 || upsample < 1 || upsample > 1000)
        return gl_error_set(GL_ERR_USAGE, "registration: bad image size %ldx%ld or upsampling %d",
                            nx, ny, upsample);
    gl_xcorr_plan *p = gl_calloc(1, sizeof *p);
    long mx = nx / 2 + 1;
    double *r = gl_malloc((size_t)nx * (size_t)ny * sizeof *r);
    fftw_complex *h = gl_malloc((size_t)mx * (size_t)ny * sizeof *h);
    if (!p || !r || !h) {
        gl_free(p);
        gl_free(r);
        gl_free(h);
        return gl_error_nomem("registration plan");
    }
    p->nx = nx;
    p->ny = ny;
    p->mx = mx;
    p->up = upsample;
    p->up1 = (int)ceil(sqrt((double)upsample));
    p->region1 = (int)ceil(1.5 * p->up1);
    /* +-1 coarse step (plus one fine step of margin) on the fine grid */
    p->region2 = 2 * ((upsample + p->up1 - 1) / p->up1 + 1) + 1;
    p->fwd = fftw_plan_dft_r2c_2d((int)ny, (int)nx, r, h, FFTW_ESTIMATE);
    p->inv = fftw_plan_dft_c2r_2d((int)ny, (int)nx, h, r, FFTW_ESTIMATE);
    gl_free(r);
    gl_free(h);
    if (!p->fwd || !p->inv) {
        gl_xcorr_plan_free(p);
        return gl_error_set(GL_ERR_INTERNAL, "registration: FFTW could not plan %ldx%ld", nx, ny);
    }
    *out = p;
    return GL_OK;
}

/* Half spectrum of img (NaN as 0; rotated by 180 degrees when rotate) into
 * spec, through w->real; returns the sum of squares. */
static double spectrum(const gl_xcorr_plan *p, gl_xcorr_work *w, const float *img,
                       fftw_complex *spec, int rotate)
{
    size_t n = (size_t)p->nx * (size_t)p->ny;
    double e = 0;
    for (size_t i = 0; i < n; i++) {
        float v = img[rotate ? n - 1 - i : i];
        double d = isnan(v) ? 0.0 : (double)v;
        w->real[i] = d;
        e += d * d;
    }
    fftw_execute_dft_r2c(p->fwd, w->real, spec);
    return e;
}

gl_status gl_xcorr_plan_new(const float *reference, long nx, long ny, int upsample,
                            gl_xcorr_plan **out)
{
    gl_status st = plan_make(nx, ny, upsample, out);
    if (st || !reference)
        return st;
    gl_xcorr_plan *p = *out;
    gl_xcorr_work *w = NULL;
    p->ref = gl_malloc((size_t)p->mx * (size_t)ny * sizeof *p->ref);
    if (!p->ref || gl_xcorr_work_new(p, &w)) {
        gl_xcorr_plan_free(p);
        *out = NULL;
        return gl_error_nomem("registration reference");
    }
    p->ref_energy = spectrum(p, w, reference, p->ref, 0);
    gl_xcorr_work_free(w);
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
    size_t n = (size_t)p->nx * (size_t)p->ny, nh = (size_t)p->mx * (size_t)p->ny;
    size_t r = (size_t)max_region(p);
    gl_xcorr_work *w = gl_calloc(1, sizeof *w);
    if (!w)
        return gl_error_nomem("registration work");
    w->real = gl_malloc(n * sizeof *w->real);
    w->half = gl_malloc(nh * sizeof *w->half);
    w->prod = gl_malloc(nh * sizeof *w->prod);
    w->kx = gl_malloc((size_t)p->mx * r * sizeof *w->kx);
    w->ky = gl_malloc((size_t)p->ny * r * sizeof *w->ky);
    w->tmp = gl_malloc((size_t)p->ny * r * sizeof *w->tmp);
    w->up = gl_malloc(r * r * sizeof *w->up);
    if (!w->real || !w->half || !w->prod || !w->kx || !w->ky || !w->tmp || !w->up) {
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
    gl_free(w->real);
    gl_free(w->half);
    gl_free(w->prod);
    gl_free(w->kx);
    gl_free(w->ky);
    gl_free(w->tmp);
    gl_free(w->up);
    gl_free(w);
}

/* The cross-correlation sampled at (sy + (u - c)/up, sx + (v - c)/up),
 * u, v = 0..R-1, c = floor(R/2), as CC = Re(Ky * P * Kx) over the half
 * spectrum P (columns kx = 0..nx/2): for a real correlation the columns
 * 0 < kx < nx/2 stand for their Hermitian mirrors too (weight 2, real part
 * taken), column 0 and an even axis' Nyquist column count once (the Nyquist
 * phase made real, cos(pi s), as in the FFT shift). Returns the grid maximum
 * of |CC| and moves (sx, sy) onto it. */
static double refine(const gl_xcorr_plan *p, gl_xcorr_work *w, int up, int R, double *sx,
                     double *sy)
{
    long nx = p->nx, ny = p->ny, mx = p->mx;
    double c = floor(R / 2.0);
    for (long k = 0; k < mx; k++) {
        int nyquist = nx % 2 == 0 && k == nx / 2;
        double wgt = (k == 0 || nyquist) ? 1.0 : 2.0;
        for (int v = 0; v < R; v++) {
            double a = 2 * M_PI * (double)k / (double)nx * (*sx + (v - c) / up);
            w->kx[(size_t)k * R + v][0] = wgt * cos(a);
            w->kx[(size_t)k * R + v][1] = nyquist ? 0.0 : wgt * sin(a);
        }
    }
    for (int u = 0; u < R; u++) {
        double s = *sy + (u - c) / up;
        for (long k = 0; k < ny; k++) {
            double a = 2 * M_PI * freq(k, ny) / (double)ny * s;
            w->ky[(size_t)u * ny + k][0] = cos(a);
            w->ky[(size_t)u * ny + k][1] = sin(a);
        }
    }
    const double one[2] = {1, 0}, zero[2] = {0, 0};
    cblas_zgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, (int)ny, R, (int)mx, one, w->prod,
                (int)mx, w->kx, R, zero, w->tmp, R);
    cblas_zgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, R, R, (int)ny, one, w->ky, (int)ny,
                w->tmp, R, zero, w->up, R);
    int bu = 0, bw = 0;
    double bv = -1;
    for (int u = 0; u < R; u++)
        for (int v = 0; v < R; v++) {
            double a = fabs(w->up[(size_t)u * R + v][0]);
            if (a > bv) {
                bv = a;
                bu = u;
                bw = v;
            }
        }
    *sy += (bu - c) / up;
    *sx += (bw - c) / up;
    return bv;
}

/* From the cross-power half spectrum in w->prod: the shift at the
 * correlation peak, to 1/up pixel, and the peak value divided by the number
 * of pixels (the correlation sum itself). */
static void locate_peak(const gl_xcorr_plan *p, gl_xcorr_work *w, double *dx, double *dy,
                        double *peak)
{
    long nx = p->nx, ny = p->ny, mx = p->mx;
    size_t n = (size_t)nx * (size_t)ny, nh = (size_t)mx * (size_t)ny;
    memcpy(w->half, w->prod, nh * sizeof *w->half); /* c2r overwrites its input */
    fftw_execute_dft_c2r(p->inv, w->half, w->real);
    size_t best = 0;
    double bv = -1;
    for (size_t i = 0; i < n; i++)
        if (fabs(w->real[i]) > bv) {
            bv = fabs(w->real[i]);
            best = i;
        }
    long iy = (long)(best / (size_t)nx), ix = (long)(best % (size_t)nx);
    double sy = (double)(iy > ny / 2 ? iy - ny : iy);
    double sx = (double)(ix > nx / 2 ? ix - nx : ix);
    double pk = bv;
    if (p->up > 1) {
        pk = refine(p, w, p->up1, p->region1, &sx, &sy);
        if (p->up > p->up1) {
            /* onto the fine grid, then +-1 coarse step around it */
            sx = round(sx * p->up) / p->up;
            sy = round(sy * p->up) / p->up;
            pk = refine(p, w, p->up, p->region2, &sx, &sy);
        }
    }
    *peak = pk / (double)n; /* both transforms are unnormalised */
    *dx = sx;
    *dy = sy;
}

gl_status gl_align_xcorr_shift(const gl_xcorr_plan *p, gl_xcorr_work *w, const float *img,
                               double *dx, double *dy, double *error)
{
    if (!p->ref)
        return gl_error_set(GL_ERR_INTERNAL, "registration plan without a reference");
    size_t nh = (size_t)p->mx * (size_t)p->ny;
    double e = spectrum(p, w, img, w->half, 0);
    if (!(e > 0))
        return gl_error_set(GL_ERR_NUMERIC, "registration of an image without data");
    for (size_t i = 0; i < nh; i++) {
        double fr = p->ref[i][0], fi = p->ref[i][1], gr = w->half[i][0], gi = w->half[i][1];
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
    size_t nh = (size_t)p->mx * (size_t)p->ny;
    double e = spectrum(p, w, img, spec, 0);
    if (!(e > 0))
        return gl_error_set(GL_ERR_NUMERIC, "symmetry centre of an empty image");
    spectrum(p, w, img, w->half, 1);
    for (size_t i = 0; i < nh; i++) {
        double fr = spec[i][0], fi = spec[i][1], gr = w->half[i][0], gi = w->half[i][1];
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
    if (!st && !(spec = gl_malloc((size_t)(nx / 2 + 1) * (size_t)ny * sizeof *spec)))
        st = gl_error_nomem("symmetry spectrum");
    if (!st)
        st = gl_symmetry_centre_with(p, w, spec, img, x, y);
    gl_free(spec);
    gl_xcorr_work_free(w);
    gl_xcorr_plan_free(p);
    return st;
}
