/*
 * optics.c -- Fraunhofer propagation from the pupil to the focal plane.
 *
 * The focal-plane field is the Fourier transform of the pupil field
 * (Goodman, Introduction to Fourier Optics, ch. 4), computed with FFTW on an
 * M x M grid. With the pupil spanning dpix = M / q grid pixels, focal pixels
 * are lambda / (q D): q pixels per lambda/D. The zero frequency lands on
 * (nx/2, ny/2) of the cropped frame. A source displaced by (dx, dy) focal
 * pixels is a plane wave tilted by the phase ramp exp(2 pi i (dx u + dy v) / M)
 * across the pupil, exact for fractional displacements (band-limited field,
 * Nyquist-sampled for q >= 2). Fluxes are normalised with Parseval's theorem
 * so that an off-axis source has the requested flux over the whole plane.
 */
#include "core/internal.h"
#include "sim/internal.h"

#include <math.h>
#include <string.h>

gl_status sim_optics_init(sim_optics *o, const gl_sim_params *p)
{
    gl_status st = GL_OK;
    fftw_complex *tmp = NULL;
    memset(o, 0, sizeof *o);
    o->nx = o->ny = p->size;
    o->coro = sim_coro_lookup(p->coronagraph);
    o->nchan = p->nchan;
    /* at least 64 pupil samples across D at the reference wavelength, and a
     * grid no smaller than the frame (no wrap-around inside it) */
    int M = sim_fft_size((int)ceil(64.0 * p->sampling));
    if (M < p->size)
        M = sim_fft_size((int)p->size);
    o->M = M;
    for (int c = 0; c < p->nchan; c++) {
        sim_channel *ch = &o->ch[c];
        ch->lambda_nm = 1e3 * p->wavelength_um[c];
        ch->q = p->sampling * p->wavelength_um[c] / p->wavelength_um[0];
        ch->dpix = M / ch->q;
        ch->P = (int)ceil(ch->dpix) + 2;
        if (ch->P > M)
            ch->P = M;
        ch->off = (M - ch->P) / 2;
        ch->amp = gl_malloc((size_t)ch->P * ch->P * sizeof(double));
        if (!ch->amp) {
            st = gl_error_nomem("pupil");
            goto cleanup;
        }
        sim_aperture ap = {1.0, p->obstruction, p->nspiders, p->spider_width, p->spider_angle_deg};
        sim_aperture_draw(&ap, ch->P, ch->dpix, ch->amp);
        ch->amp_sum2 = 0;
        for (size_t k = 0; k < (size_t)ch->P * ch->P; k++)
            ch->amp_sum2 += ch->amp[k] * ch->amp[k];
        ch->flux_norm = p->star_flux / ((double)M * M * ch->amp_sum2);
        if (p->coronagraph == GL_SIM_CORO_LYOT) {
            /* an undersized stop: outer edge, obstruction and spiders all
             * grow by the same margin (common practice) */
            double margin = 1.0 - p->lyot_stop;
            sim_aperture stop = {
                p->lyot_stop, p->obstruction > 0 ? p->obstruction + margin : 0, p->nspiders,
                p->spider_width > 0 ? p->spider_width + margin / 2 : 0, p->spider_angle_deg};
            ch->stop = gl_malloc((size_t)ch->P * ch->P * sizeof(double));
            if (!ch->stop) {
                st = gl_error_nomem("Lyot stop");
                goto cleanup;
            }
            sim_aperture_draw(&stop, ch->P, ch->dpix, ch->stop);
        }
    }
    if (p->coronagraph == GL_SIM_CORO_LYOT) {
        /* the focal mask has a fixed physical (angular) size: its radius in
         * pixels is the same for every channel */
        double r = p->lyot_mask_ld * p->sampling;
        o->focal_mask = gl_malloc((size_t)M * M * sizeof(double));
        if (!o->focal_mask) {
            st = gl_error_nomem("focal mask");
            goto cleanup;
        }
        for (int v = 0; v < M; v++) {
            int fv = v <= M / 2 ? v : v - M;
            for (int u = 0; u < M; u++) {
                int fu = u <= M / 2 ? u : u - M;
                int n = 0;
                for (int sj = 0; sj < 8; sj++)
                    for (int si = 0; si < 8; si++) {
                        double x = fu + (si + 0.5) / 8 - 0.5, y = fv + (sj + 0.5) / 8 - 0.5;
                        n += x * x + y * y <= r * r;
                    }
                o->focal_mask[(size_t)v * M + u] = 1.0 - n / 64.0;
            }
        }
    }
    tmp = fftw_malloc((size_t)M * M * sizeof(fftw_complex));
    if (!tmp) {
        st = gl_error_nomem("FFT grid");
        goto cleanup;
    }
    o->fwd = fftw_plan_dft_2d(M, M, tmp, tmp, FFTW_FORWARD, FFTW_ESTIMATE);
    o->bwd = fftw_plan_dft_2d(M, M, tmp, tmp, FFTW_BACKWARD, FFTW_ESTIMATE);
    if (!o->fwd || !o->bwd)
        st = gl_error_set(GL_ERR_INTERNAL, "FFTW could not plan a %d x %d transform", M, M);
cleanup:
    fftw_free(tmp);
    return st;
}

void sim_optics_free(sim_optics *o)
{
    if (!o)
        return;
    for (int c = 0; c < GL_SIM_MAX_CHANNELS; c++) {
        gl_free(o->ch[c].amp);
        gl_free(o->ch[c].stop);
    }
    gl_free(o->focal_mask);
    if (o->fwd)
        fftw_destroy_plan(o->fwd);
    if (o->bwd)
        fftw_destroy_plan(o->bwd);
    memset(o, 0, sizeof *o);
}

void sim_optics_image(const sim_optics *o, const sim_channel *ch, const double complex *phasor,
                      double dx, double dy, double weight, int coronagraph, fftw_complex *work,
                      double *acc)
{
    int M = o->M, P = ch->P, off = ch->off;
    memset(work, 0, (size_t)M * M * sizeof(fftw_complex));
    /* the tilt as a product of separable ramps, evaluated once per axis;
     * the reference point does not matter (a global phase) */
    double complex *rx = work + (size_t)M * M, *ry = rx + M;
    for (int i = 0; i < P; i++) {
        rx[i] = cexp(2.0 * M_PI * I * dx * (i - 0.5 * (P - 1)) / M);
        ry[i] = cexp(2.0 * M_PI * I * dy * (i - 0.5 * (P - 1)) / M);
    }
    for (int j = 0; j < P; j++) {
        fftw_complex *row = work + (size_t)(j + off) * M + off;
        const double complex *ph = phasor + (size_t)j * P;
        for (int i = 0; i < P; i++)
            row[i] = ph[i] * rx[i] * ry[j];
    }
    o->coro->apply(o, ch, work, coronagraph);
    fftw_execute_dft(o->fwd, work, work);
    double w = weight * ch->flux_norm;
    long nx = o->nx, ny = o->ny;
    for (long y = 0; y < ny; y++) {
        long fy = y - ny / 2;
        long v = ((fy % M) + M) % M;
        for (long x = 0; x < nx; x++) {
            long fx = x - nx / 2;
            long u = ((fx % M) + M) % M;
            fftw_complex e = work[(size_t)v * M + u];
            acc[y * nx + x] += w * (creal(e) * creal(e) + cimag(e) * cimag(e));
        }
    }
}

size_t sim_optics_work_size(const sim_optics *o)
{
    return (size_t)o->M * o->M + 2 * (size_t)o->M;
}
