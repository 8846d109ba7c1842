/*
 * sequence.c -- the simulated observing sequence: frames, off-axis PSF,
 * reference-star frames and the truth about planted companions.
 *
 * Each frame is the average of `subexposures` short exposures. All share the
 * static error and the quasi-static error of the frame's mid-time (a few
 * fixed patterns whose weights are sums of slow sinusoids, periods of one to
 * three times quasi_period_min); each has its own AO residual screen, so the
 * fast residual averages into a smooth halo while the quasi-static speckles
 * stay correlated from frame to frame and evolve slowly, the regime where
 * PCA/KLIP beats classical ADI (Soummer, Pueyo & Larkin 2012; Marois et al.
 * 2006). Companions are incoherent, tilted copies of the same pupil field at
 * the position angle of each sub-exposure (so the field rotation within an
 * exposure smears them as on the sky). Photon noise is Poisson, read noise
 * Gaussian (GSL). Each frame draws from its own random stream, and frames are
 * computed in parallel with a static schedule: results do not depend on the
 * number of threads.
 */
#include "core/internal.h"
#include "sim/internal.h"

#include <gsl/gsl_errno.h>
#include <gsl/gsl_randist.h>
#include <math.h>
#include <omp.h>
#include <string.h>

#define NLAW 3 /* sinusoids per quasi-static weight */

typedef struct drift {
    double period_s[NLAW];
    double phase[NLAW];
} drift;

/* What one frame computation uses. */
typedef struct sim_ctx {
    const gl_sim_params *p;
    sim_optics optics;
    sim_screens screens;
    sim_track track;
    double *static_opd; /* S x S, nm */
    double *quasi;      /* quasi_modes x S x S, nm */
    double *spots;      /* S x S, nm, or NULL */
} sim_ctx;

typedef struct frame_job {
    int stream;
    long index;
    double dt;             /* seconds after mid-exposure of frame 0 */
    const drift *laws;     /* quasi_modes laws */
    int companions;        /* plant companions */
    int on_axis;           /* coronagraph mask in */
    int noise;             /* add photon and read noise */
    int jitter;            /* draw pointing jitter */
    int spots;             /* add satellite spots */
    float *out;            /* nchan planes of nx * ny */
    double star_x, star_y; /* returned */
} frame_job;

static double drift_weight(const drift *d, double t)
{
    double w = 0;
    for (int j = 0; j < NLAW; j++)
        w += sqrt(2.0 / NLAW) * sin(2.0 * M_PI * t / d->period_s[j] + d->phase[j]);
    return w;
}

static void draw_laws(const gl_sim_params *p, gsl_rng *r, drift *laws)
{
    for (int k = 0; k < p->quasi_modes; k++)
        for (int j = 0; j < NLAW; j++) {
            laws[k].period_s[j] = 60.0 * p->quasi_period_min * (1.0 + 2.0 * gsl_rng_uniform(r));
            laws[k].phase[j] = 2.0 * M_PI * gsl_rng_uniform(r);
        }
}

/* Computes one frame (all channels) into job->out. */
static gl_status compute_one_frame(const sim_ctx *x, frame_job *job)
{
    const gl_sim_params *p = x->p;
    const sim_optics *o = &x->optics;
    const sim_screens *sc = &x->screens;
    gl_status st = GL_OK;
    size_t S2 = (size_t)sc->S * sc->S, npix = (size_t)o->nx * o->ny;
    int Pmax = 0;
    for (int c = 0; c < o->nchan; c++)
        Pmax = GL_MAX(Pmax, o->ch[c].P);
    gsl_rng *r = sim_rng_new(p->seed, job->stream, job->index);
    double *base = gl_malloc(S2 * sizeof(double));
    double *opd = gl_malloc(S2 * sizeof(double));
    double *ao = gl_malloc(S2 * sizeof(double));
    double *opd_c = gl_malloc((size_t)Pmax * Pmax * sizeof(double));
    double complex *phasor = gl_malloc((size_t)Pmax * Pmax * sizeof(double complex));
    double *acc = gl_calloc(npix * (size_t)o->nchan, sizeof(double));
    fftw_complex *work = fftw_malloc(sim_optics_work_size(o) * sizeof(fftw_complex));
    fftw_complex *swork = fftw_malloc((size_t)sc->L * sc->L * sizeof(fftw_complex));
    if (!r || !base || !opd || !ao || !opd_c || !phasor || !acc || !work || !swork) {
        st = gl_error_nomem("simulation workspace");
        goto cleanup;
    }
    /* pointing jitter, first draw of the stream */
    double jx = 0, jy = 0;
    if (job->jitter && p->jitter_mas > 0) {
        jx = gsl_ran_gaussian(r, p->jitter_mas / p->pixscale_mas);
        jy = gsl_ran_gaussian(r, p->jitter_mas / p->pixscale_mas);
    }
    job->star_x = (double)(o->nx / 2) + jx;
    job->star_y = (double)(o->ny / 2) + jy;
    /* static + quasi-static (+ spots) at the frame's mid-time */
    memcpy(base, x->static_opd, S2 * sizeof(double));
    for (int k = 0; k < p->quasi_modes; k++) {
        double w = drift_weight(&job->laws[k], job->dt);
        const double *q = x->quasi + (size_t)k * S2;
        for (size_t i = 0; i < S2; i++)
            base[i] += w * q[i];
    }
    if (job->spots && x->spots)
        for (size_t i = 0; i < S2; i++)
            base[i] += x->spots[i];
    sim_psd ao_psd = {p->ao_index, 0.5, p->control_radius_ld, p->ao_outside_gain};
    int nsub = p->subexposures;
    for (int s = 0; s < nsub; s++) {
        const double *use = base;
        if (p->ao_nm > 0) {
            sim_screen_draw(sc, &ao_psd, p->ao_nm, 0, r, swork, ao);
            for (size_t i = 0; i < S2; i++)
                opd[i] = base[i] + ao[i];
            use = opd;
        }
        double dts = job->dt + ((s + 0.5) / nsub - 0.5) * p->exptime_s, theta = 0;
        if (job->companions && p->ncompanions > 0)
            sim_track_at(&x->track, p, dts, NULL, NULL, &theta);
        for (int c = 0; c < o->nchan; c++) {
            const sim_channel *ch = &o->ch[c];
            size_t P2 = (size_t)ch->P * ch->P;
            sim_screen_resample(sc, use, ch->P, ch->dpix, opd_c);
            double k = 2.0 * M_PI / ch->lambda_nm;
            for (size_t i = 0; i < P2; i++)
                phasor[i] = ch->amp[i] * cexp(I * k * opd_c[i]);
            double *a = acc + (size_t)c * npix;
            sim_optics_image(o, ch, phasor, jx, jy, 1.0 / nsub, job->on_axis, work, a);
            for (int m = 0; job->companions && m < p->ncompanions; m++) {
                const gl_sim_companion *cp = &p->companions[m];
                /* conventions.md: angle 90 + pa + theta counter-clockwise from +x */
                double ang = (90.0 + cp->pa_deg + theta) * M_PI / 180.0;
                sim_optics_image(o, ch, phasor, jx + cp->sep_px * cos(ang),
                                 jy + cp->sep_px * sin(ang), cp->contrast / nsub, job->on_axis,
                                 work, a);
            }
        }
    }
    for (size_t i = 0; i < npix * (size_t)o->nchan; i++) {
        double v = acc[i];
        if (job->noise) {
            v = v > 0 ? (double)gsl_ran_poisson(r, v) : 0.0;
            if (p->read_noise > 0)
                v += gsl_ran_gaussian(r, p->read_noise);
        }
        job->out[i] = (float)v;
    }
cleanup:
    fftw_free(swork);
    fftw_free(work);
    gl_free(acc);
    gl_free(phasor);
    gl_free(opd_c);
    gl_free(ao);
    gl_free(opd);
    gl_free(base);
    if (r)
        gsl_rng_free(r);
    return st;
}

/* Computes a whole sequence (science or reference) in parallel. */
static gl_status sequence_compute(const sim_ctx *x, int stream, const drift *laws, int companions,
                                  gl_cube *cube, double *star_x, double *star_y, long *done,
                                  long total)
{
    const gl_sim_params *p = x->p;
    gl_status st = GL_OK;
    int failed = 0;
    size_t fsize = gl_cube_plane_size(cube) * (size_t)cube->nchan;
    char msg[512] = "";
#pragma omp parallel for schedule(static)
    for (long i = 0; i < p->nframes; i++) {
        int skip;
#pragma omp atomic read
        skip = failed;
        if (skip)
            continue;
        frame_job job = {stream, i, (double)i * p->cadence_s,       laws, companions, 1, p->noise,
                         1,      1, cube->data + (size_t)i * fsize, 0,    0};
        gl_status fs = compute_one_frame(x, &job);
        if (fs != GL_OK) {
#pragma omp critical(sim_fail)
            {
                if (!failed) {
                    st = fs;
                    snprintf(msg, sizeof msg, "%s", gl_error_message());
                }
                failed = 1;
            }
            continue;
        }
        if (star_x) {
            star_x[i] = job.star_x;
            star_y[i] = job.star_y;
        }
        long d;
#pragma omp atomic capture
        d = ++*done;
        gl_progress("simulate", d, total);
    }
    if (failed)
        gl_error_set(st, "%s", msg);
    return st;
}

static gl_status ctx_init(sim_ctx *x, const gl_sim_params *p, drift *laws)
{
    gl_status st;
    memset(x, 0, sizeof *x);
    x->p = p;
    if ((st = sim_optics_init(&x->optics, p)) != GL_OK)
        return st;
    if ((st = sim_track_init(&x->track, p)) != GL_OK)
        return st;
    double dmax = 0;
    for (int c = 0; c < p->nchan; c++)
        dmax = GL_MAX(dmax, x->optics.ch[c].dpix);
    if ((st = sim_screens_init(&x->screens, (int)ceil(dmax) + 2, dmax)) != GL_OK)
        return st;
    const sim_screens *sc = &x->screens;
    size_t S2 = (size_t)sc->S * sc->S;
    x->static_opd = gl_calloc(S2, sizeof(double));
    x->quasi = gl_calloc(S2 * (size_t)(p->quasi_modes > 0 ? p->quasi_modes : 1), sizeof(double));
    fftw_complex *swork = fftw_malloc((size_t)sc->L * sc->L * sizeof(fftw_complex));
    gsl_rng *r = sim_rng_new(p->seed, SIM_STREAM_SETUP, 0);
    if (!x->static_opd || !x->quasi || !swork || !r) {
        st = gl_error_nomem("phase screens");
        goto cleanup;
    }
    sim_psd ps = {p->static_index, 0.5, 0, 0};
    sim_screen_draw(sc, &ps, p->static_nm, 1, r, swork, x->static_opd);
    sim_psd pq = {p->quasi_index, 0.5, 0, 0};
    for (int k = 0; k < p->quasi_modes; k++)
        sim_screen_draw(sc, &pq, p->quasi_nm, 1, r, swork, x->quasi + (size_t)k * S2);
    draw_laws(p, r, laws);
    if (p->spots_ld > 0) {
        /* a phase a [cos(2 pi f x) + cos(2 pi f y)] makes four spots at +-f
         * cycles per pupil, each of relative intensity J1(a)^2 ~ (a/2)^2 */
        x->spots = gl_malloc(S2 * sizeof(double));
        if (!x->spots) {
            st = gl_error_nomem("satellite spots");
            goto cleanup;
        }
        double a = 2.0 * sqrt(p->spots_contrast), lam = 1e3 * p->wavelength_um[0];
        double cs = 0.5 * (sc->S - 1);
        for (int j = 0; j < sc->S; j++)
            for (int i = 0; i < sc->S; i++) {
                double u = (i - cs) / dmax, v = (j - cs) / dmax;
                x->spots[(size_t)j * sc->S + i] =
                    a * lam / (2.0 * M_PI) *
                    (cos(2.0 * M_PI * p->spots_ld * u) + cos(2.0 * M_PI * p->spots_ld * v));
            }
    }
cleanup:
    fftw_free(swork);
    if (r)
        gsl_rng_free(r);
    return st;
}

static void ctx_free(sim_ctx *x)
{
    gl_free(x->spots);
    gl_free(x->quasi);
    gl_free(x->static_opd);
    sim_screens_free(&x->screens);
    sim_optics_free(&x->optics);
}

void gl_sim_result_free(gl_sim_result *r)
{
    if (!r)
        return;
    gl_cube_free(r->cube);
    gl_cube_free(r->psf);
    gl_cube_free(r->refs);
    gl_free(r->angle_deg);
    gl_free(r->ha_deg);
    gl_free(r->obs_dec_deg);
    gl_free(r->mjd_mid);
    gl_free(r->star_x);
    gl_free(r->star_y);
    gl_free(r);
}

gl_status gl_sim_run(const gl_sim_params *p, gl_sim_result **out)
{
    gl_status st;
    sim_ctx x;
    drift laws[64], ref_laws[64];
    gl_sim_result *r = NULL;
    *out = NULL;
    gsl_set_error_handler_off();
    memset(&x, 0, sizeof x);
    if ((st = gl_sim_params_check(p)) != GL_OK)
        return st;
    if ((st = ctx_init(&x, p, laws)) != GL_OK)
        goto cleanup;
    long n = p->nframes, nx = p->size;
    r = gl_calloc(1, sizeof *r);
    if (!r) {
        st = gl_error_nomem("simulation result");
        goto cleanup;
    }
    r->nframes = n;
    r->angle_deg = gl_malloc((size_t)n * sizeof(double));
    r->ha_deg = gl_malloc((size_t)n * sizeof(double));
    r->obs_dec_deg = gl_malloc((size_t)n * sizeof(double));
    r->mjd_mid = gl_malloc((size_t)n * sizeof(double));
    r->star_x = gl_malloc((size_t)n * sizeof(double));
    r->star_y = gl_malloc((size_t)n * sizeof(double));
    if (!r->angle_deg || !r->ha_deg || !r->obs_dec_deg || !r->mjd_mid || !r->star_x || !r->star_y) {
        st = gl_error_nomem("simulation tables");
        goto cleanup;
    }
    for (long i = 0; i < n; i++) {
        double dt = (double)i * p->cadence_s;
        sim_track_at(&x.track, p, dt, &r->ha_deg[i], &r->obs_dec_deg[i], &r->angle_deg[i]);
        r->mjd_mid[i] = x.track.mjd0 + dt / 86400.0;
    }
    if ((st = gl_cube_new(nx, nx, p->nchan, n, &r->cube)) != GL_OK)
        goto cleanup;
    r->cube->naxis = p->nchan > 1 ? 4 : 3;
    if ((st = gl_cube_new(nx, nx, 1, p->nchan, &r->psf)) != GL_OK)
        goto cleanup;
    r->psf->naxis = p->nchan > 1 ? 3 : 2;
    long done = 0, total = n * (p->refs ? 2 : 1) + 1;
    /* the off-axis PSF: same static and quasi-static state as frame 0, its
     * own AO screens, no mask, no jitter, no spots, no noise */
    frame_job pj = {SIM_STREAM_PSF, 0, 0.0, laws, 0, 0, 0, 0, 0, r->psf->data, 0, 0};
    if ((st = compute_one_frame(&x, &pj)) != GL_OK)
        goto cleanup;
    gl_progress("simulate", ++done, total);
    if ((st = sequence_compute(&x, SIM_STREAM_FRAME, laws, 1, r->cube, r->star_x, r->star_y, &done,
                               total)) != GL_OK)
        goto cleanup;
    if (p->refs) {
        gsl_rng *rr = sim_rng_new(p->seed, SIM_STREAM_REF_SETUP, 0);
        if (!rr) {
            st = gl_error_nomem("random generator");
            goto cleanup;
        }
        draw_laws(p, rr, ref_laws);
        gsl_rng_free(rr);
        if ((st = gl_cube_new(nx, nx, p->nchan, n, &r->refs)) != GL_OK)
            goto cleanup;
        r->refs->naxis = r->cube->naxis;
        if ((st = sequence_compute(&x, SIM_STREAM_REF_FRAME, ref_laws, 0, r->refs, NULL, NULL,
                                   &done, total)) != GL_OK)
            goto cleanup;
    }
    gl_progress("simulate", total, total);
    /* truth: fluxes relative to the whole-plane off-axis flux, which a Lyot
     * stop reduces by its throughput */
    const sim_channel *c0 = &x.optics.ch[0];
    double thr = 1.0;
    if (c0->stop) {
        double s2 = 0;
        for (size_t i = 0; i < (size_t)c0->P * c0->P; i++)
            s2 += c0->amp[i] * c0->amp[i] * c0->stop[i] * c0->stop[i];
        thr = s2 / c0->amp_sum2;
    }
    r->star_flux_psf = p->star_flux * thr;
    /* the star flux of the conventions is the total of psf.fits (what
     * inject and limits scale by), which misses the light beyond the frame */
    double psf_total = 0;
    for (size_t i = 0; i < gl_cube_plane_size(r->psf); i++)
        psf_total += r->psf->data[i];
    r->ncompanions = p->ncompanions;
    for (int m = 0; m < p->ncompanions; m++) {
        const gl_sim_companion *cp = &p->companions[m];
        double a = (90.0 + cp->pa_deg) * M_PI / 180.0;
        r->comp_flux[m] = cp->contrast * psf_total;
        r->comp_x_north[m] = (double)(nx / 2) + cp->sep_px * cos(a);
        r->comp_y_north[m] = (double)(nx / 2) + cp->sep_px * sin(a);
    }
    r->telescope_m =
        1e-6 * p->wavelength_um[0] / (p->sampling * p->pixscale_mas / 3.6e6 * M_PI / 180.0);
    r->ra_deg = x.track.ra_deg;
    r->dec_deg = p->dec_deg;
    if ((st = sim_header_fill(r->cube->header, p, &x.optics, &x.track, r->angle_deg[0],
                              r->telescope_m, "simulated coronagraphic science frames")) != GL_OK)
        goto cleanup;
    if ((st = sim_header_fill(r->psf->header, p, &x.optics, &x.track, r->angle_deg[0],
                              r->telescope_m, "simulated off-axis PSF, no coronagraph mask")) !=
        GL_OK)
        goto cleanup;
    if ((st = gl_header_set_dbl(r->psf->header, "PSFSCALE", 1.0,
                                "multiply by this to match a science frame")) != GL_OK)
        goto cleanup;
    if (r->refs &&
        (st = sim_header_fill(r->refs->header, p, &x.optics, &x.track, r->angle_deg[0],
                              r->telescope_m, "simulated reference-star frames")) != GL_OK)
        goto cleanup;
    *out = r;
    r = NULL;
cleanup:
    gl_sim_result_free(r);
    ctx_free(&x);
    return st;
}
