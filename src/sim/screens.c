/*
 * screens.c -- random optical-path-difference screens with power-law power
 * spectral densities.
 *
 * The Fourier filtering method (e.g. Lane, Glindemann & Dainty 1992, Waves in
 * Random Media 2, 209): complex white Gaussian noise is multiplied by the
 * square root of the PSD on an L x L frequency grid and transformed back; the
 * real part is a Gaussian random field with that PSD. The grid spans about
 * twice the pupil so that the screen is not forced to be periodic across the
 * aperture. Wavefront-error spectra of polished optics and of AO residuals
 * fall as f^-2 to f^-3 (from memory, common practice); beyond the AO control
 * radius the uncorrected turbulence follows Kolmogorov's f^-11/3.
 */
#include "core/internal.h"
#include "sim/internal.h"

#include <gsl/gsl_randist.h>
#include <math.h>
#include <string.h>

/* Smallest integer >= n whose only prime factors are 2, 3, 5 and 7 (fast
 * FFTW sizes). */
int sim_fft_size(int n)
{
    for (;; n++) {
        int m = n;
        for (int f = 2; f <= 7; f++)
            while (m % f == 0)
                m /= f;
        if (m == 1)
            return n;
    }
}

gl_status sim_screens_init(sim_screens *s, int S, double dmax)
{
    memset(s, 0, sizeof *s);
    s->S = S;
    s->L = sim_fft_size(2 * S);
    s->dmax = dmax;
    s->pupil = gl_malloc((size_t)S * S * sizeof(double));
    fftw_complex *tmp = fftw_malloc((size_t)s->L * s->L * sizeof(fftw_complex));
    if (!s->pupil || !tmp) {
        fftw_free(tmp);
        return gl_error_nomem("phase screens");
    }
    double c = 0.5 * (S - 1);
    s->npupil = 0;
    for (int j = 0; j < S; j++)
        for (int i = 0; i < S; i++) {
            double x = (i - c) / dmax, y = (j - c) / dmax;
            double in = (x * x + y * y <= 0.25) ? 1.0 : 0.0;
            s->pupil[(size_t)j * S + i] = in;
            s->npupil += in;
        }
    s->plan = fftw_plan_dft_2d(s->L, s->L, tmp, tmp, FFTW_BACKWARD, FFTW_ESTIMATE);
    fftw_free(tmp);
    if (!s->plan)
        return gl_error_set(GL_ERR_INTERNAL, "FFTW could not plan a %d x %d transform", s->L, s->L);
    return GL_OK;
}

void sim_screens_free(sim_screens *s)
{
    if (!s)
        return;
    if (s->plan)
        fftw_destroy_plan(s->plan);
    gl_free(s->pupil);
    memset(s, 0, sizeof *s);
}

static double psd_value(const sim_psd *p, double f)
{
    if (f < p->fmin || f <= 0)
        return 0.0;
    if (p->fcut > 0 && f >= p->fcut)
        return pow(p->fcut, -p->index) * p->gain * pow(f / p->fcut, -11.0 / 3.0);
    return pow(f, -p->index);
}

void sim_screen_draw(const sim_screens *s, const sim_psd *psd, double rms_nm, int exact,
                     gsl_rng *rng, fftw_complex *work, double *out)
{
    int L = s->L, S = s->S;
    double df = s->dmax / L; /* frequency step, cycles per pupil */
    double var_in = 0;       /* expected variance inside the cut */
    for (int v = 0; v < L; v++) {
        int fv = v <= L / 2 ? v : v - L;
        for (int u = 0; u < L; u++) {
            int fu = u <= L / 2 ? u : u - L;
            double f = df * sqrt((double)fu * fu + (double)fv * fv);
            double pw = psd_value(psd, f);
            if (psd->fcut <= 0 || f < psd->fcut)
                var_in += pw;
            double a = sqrt(pw);
            double re = gsl_ran_gaussian(rng, 1.0), im = gsl_ran_gaussian(rng, 1.0);
            work[(size_t)v * L + u] = a * (re + I * im);
        }
    }
    fftw_execute_dft(s->plan, work, work);
    /* real part: variance = sum of the PSD; remove piston over the pupil */
    double mean = 0;
    for (int j = 0; j < S; j++)
        for (int i = 0; i < S; i++) {
            double v = creal(work[(size_t)j * L + i]);
            out[(size_t)j * S + i] = v;
            mean += v * s->pupil[(size_t)j * S + i];
        }
    mean /= s->npupil;
    /* remove tip and tilt too (least squares over the pupil): the AO loop
     * and the coronagraph centring take them out, and the star must stay at
     * (nx/2, ny/2) */
    double c = 0.5 * (S - 1), sxx = 0, syy = 0, sxz = 0, syz = 0;
    for (int j = 0; j < S; j++)
        for (int i = 0; i < S; i++) {
            double w = s->pupil[(size_t)j * S + i], z = out[(size_t)j * S + i] - mean;
            sxx += w * (i - c) * (i - c);
            syy += w * (j - c) * (j - c);
            sxz += w * (i - c) * z;
            syz += w * (j - c) * z;
        }
    double tx = sxx > 0 ? sxz / sxx : 0, ty = syy > 0 ? syz / syy : 0;
    double ss = 0;
    for (int j = 0; j < S; j++)
        for (int i = 0; i < S; i++) {
            size_t k = (size_t)j * S + i;
            out[k] -= mean + tx * (i - c) + ty * (j - c);
            ss += out[k] * out[k] * s->pupil[k];
        }
    double scale;
    if (exact)
        scale = ss > 0 ? rms_nm / sqrt(ss / s->npupil) : 0.0;
    else
        scale = var_in > 0 ? rms_nm / sqrt(var_in) : 0.0;
    for (size_t k = 0; k < (size_t)S * S; k++)
        out[k] *= scale;
}

void sim_screen_resample(const sim_screens *s, const double *screen, int P, double dpix,
                         double *out)
{
    int S = s->S;
    double cs = 0.5 * (S - 1), cp = 0.5 * (P - 1), r = s->dmax / dpix;
    for (int j = 0; j < P; j++) {
        double y = cs + (j - cp) * r;
        int y0 = (int)floor(y);
        if (y0 < 0)
            y0 = 0;
        if (y0 > S - 2)
            y0 = S - 2;
        double ty = y - y0;
        for (int i = 0; i < P; i++) {
            double x = cs + (i - cp) * r;
            int x0 = (int)floor(x);
            if (x0 < 0)
                x0 = 0;
            if (x0 > S - 2)
                x0 = S - 2;
            double tx = x - x0;
            const double *a = screen + (size_t)y0 * S + x0;
            out[(size_t)j * P + i] =
                (1 - ty) * ((1 - tx) * a[0] + tx * a[1]) + ty * ((1 - tx) * a[S] + tx * a[S + 1]);
        }
    }
}
