/*
 * test_sim.c -- the simulator's optics against textbook results, and its
 * invariants: normalisation, coronagraph null, determinism (seed, threads),
 * star and companion positions (conventions.md).
 */
#include "gloam/gloam.h"
#include "core/internal.h"
#include "sim/internal.h"
#include "check.h"

#include <gsl/gsl_errno.h>
#include <omp.h>
#include <string.h>

/* A clear circular pupil, no errors, no coronagraph, no noise. */
static void clear_params(gl_sim_params *p)
{
    gl_sim_params_init(p);
    p->obstruction = 0;
    p->nspiders = 0;
    p->static_nm = p->quasi_nm = p->ao_nm = 0;
    p->coronagraph = GL_SIM_CORO_NONE;
    p->noise = 0;
    p->subexposures = 1;
    p->nframes = 1;
    p->size = 64;
}

/* Intensity at the optical axis for a unit source displaced by r pixels:
 * the PSF profile I(r), continuous in r (the tilt is exact). */
static double profile(const sim_optics *o, const double complex *ph, fftw_complex *work,
                      double *acc, double r)
{
    memset(acc, 0, (size_t)o->nx * o->ny * sizeof(double));
    sim_optics_image(o, &o->ch[0], ph, r, 0, 1.0, 0, work, acc);
    return acc[(o->ny / 2) * o->nx + o->nx / 2];
}

static void test_airy(void)
{
    gl_sim_params p;
    clear_params(&p);
    sim_optics o;
    CHECK(sim_optics_init(&o, &p) == GL_OK, "optics: %s", gl_error_message());
    const sim_channel *ch = &o.ch[0];
    double complex *ph = gl_malloc((size_t)ch->P * ch->P * sizeof *ph);
    fftw_complex *work = fftw_malloc(sim_optics_work_size(&o) * sizeof(fftw_complex));
    double *acc = gl_malloc((size_t)o.nx * o.ny * sizeof(double));
    for (int i = 0; i < ch->P * ch->P; i++)
        ph[i] = ch->amp[i];
    double peak = profile(&o, ph, work, acc, 0);
    /* half maximum by bisection */
    double lo = 0, hi = 1.0 * p.sampling;
    for (int it = 0; it < 50; it++) {
        double mid = 0.5 * (lo + hi);
        if (profile(&o, ph, work, acc, mid) > 0.5 * peak)
            lo = mid;
        else
            hi = mid;
    }
    double fwhm_ld = 2 * lo / p.sampling;
    /* Born & Wolf, Principles of Optics, sec. 8.5: FWHM = 1.029 lambda/D */
    CHECK_CLOSE(fwhm_ld, 1.029, 0.01 * 1.029, "Airy FWHM (lambda/D)");
    /* first dark ring at 1.220 lambda/D (Born & Wolf sec. 8.5): the minimum
     * of the profile between 1.0 and 1.45 lambda/D (golden-section search) */
    double a = 1.0 * p.sampling, b = 1.45 * p.sampling, g = 0.5 * (sqrt(5.0) - 1);
    for (int it = 0; it < 60; it++) {
        double x1 = b - g * (b - a), x2 = a + g * (b - a);
        if (profile(&o, ph, work, acc, x1) < profile(&o, ph, work, acc, x2))
            b = x2;
        else
            a = x1;
    }
    double zero_ld = 0.5 * (a + b) / p.sampling;
    CHECK_CLOSE(zero_ld, 1.220, 0.01 * 1.220, "first dark ring (lambda/D)");
    CHECK(profile(&o, ph, work, acc, 0.5 * (a + b)) < 1e-4 * peak, "dark ring is dark");
    /* the Airy peak holds pi/4 q^-2 of the flux for a clear circular pupil
     * (Born & Wolf sec. 8.5.2: I0 = pi D^2 / (4 lambda^2) per unit flux); the
     * grey edge pixels of a 64-sample pupil shift it by about 1% */
    CHECK_CLOSE(peak / p.star_flux, M_PI / 4 / (p.sampling * p.sampling),
                0.015 * peak / p.star_flux, "Airy peak fraction");
    gl_free(acc);
    fftw_free(work);
    gl_free(ph);
    sim_optics_free(&o);
}

static double sum_plane(const float *f, size_t n)
{
    double s = 0;
    for (size_t i = 0; i < n; i++)
        s += f[i];
    return s;
}

static void test_flux_and_null(void)
{
    gl_sim_params p;
    clear_params(&p);
    p.size = 256; /* = the FFT grid at 4 pixels per lambda/D: the whole plane */
    gl_sim_result *r = NULL;
    CHECK(gl_sim_run(&p, &r) == GL_OK, "run: %s", gl_error_message());
    if (!r)
        return;
    size_t np = 256 * 256;
    /* Parseval: the whole-plane flux is the star flux */
    CHECK_CLOSE(sum_plane(r->psf->data, np), p.star_flux, 1e-6 * p.star_flux, "PSF flux");
    CHECK_CLOSE(sum_plane(r->cube->data, np), p.star_flux, 1e-6 * p.star_flux, "frame flux");
    /* the star sits at (nx/2, ny/2) */
    long imax = 0;
    for (size_t i = 0; i < np; i++)
        if (r->psf->data[i] > r->psf->data[imax])
            imax = (long)i;
    CHECK(imax == 128 * 256 + 128, "PSF peak at (128,128): %ld", imax);
    double peak = r->psf->data[imax];
    gl_sim_result_free(r);
    /* an ideal coronagraph on an unaberrated pupil removes all starlight
     * (Cavarroc et al. 2006): the residual is round-off */
    p.coronagraph = GL_SIM_CORO_PERFECT;
    p.obstruction = 0.14;
    p.nspiders = 4;
    CHECK(gl_sim_run(&p, &r) == GL_OK, "run: %s", gl_error_message());
    if (!r)
        return;
    double mx = 0;
    for (size_t i = 0; i < np; i++)
        mx = GL_MAX(mx, fabs(r->cube->data[i]));
    CHECK(mx < 1e-10 * peak, "perfect coronagraph null: max %g of peak %g", mx, peak);
    gl_sim_result_free(r);
}

static void test_odd_size_and_lyot(void)
{
    gl_sim_params p;
    clear_params(&p);
    p.size = 63;
    gl_sim_result *r = NULL;
    CHECK(gl_sim_run(&p, &r) == GL_OK, "run: %s", gl_error_message());
    if (!r)
        return;
    long imax = 0;
    for (long i = 0; i < 63 * 63; i++)
        if (r->psf->data[i] > r->psf->data[imax])
            imax = i;
    CHECK(imax == 31 * 63 + 31, "odd frame: peak at (31,31): %ld", imax);
    gl_sim_result_free(r);
    /* Lyot: the mask removes most on-axis light, the stop sets throughput */
    p.coronagraph = GL_SIM_CORO_LYOT;
    CHECK(gl_sim_run(&p, &r) == GL_OK, "run: %s", gl_error_message());
    if (!r)
        return;
    double pk = 0, cmax = 0;
    for (long i = 0; i < 63 * 63; i++) {
        pk = GL_MAX(pk, r->psf->data[i]);
        cmax = GL_MAX(cmax, r->cube->data[i]);
    }
    CHECK(cmax < 0.02 * pk, "Lyot coronagraph attenuates the star: %g of peak", cmax / pk);
    CHECK(r->star_flux_psf < p.star_flux && r->star_flux_psf > 0.7 * p.star_flux,
          "Lyot-stop throughput %g", r->star_flux_psf / p.star_flux);
    gl_sim_result_free(r);
}

static void test_determinism(void)
{
    gl_sim_params p;
    gl_sim_params_init(&p);
    p.size = 48;
    p.nframes = 6;
    p.subexposures = 3;
    p.jitter_mas = 3;
    p.ncompanions = 1;
    p.companions[0] = (gl_sim_companion){10, 40, 1e-3};
    gl_sim_result *a = NULL, *b = NULL, *c = NULL;
    omp_set_num_threads(1);
    CHECK(gl_sim_run(&p, &a) == GL_OK, "run: %s", gl_error_message());
    omp_set_num_threads(2);
    CHECK(gl_sim_run(&p, &b) == GL_OK, "run: %s", gl_error_message());
    p.seed = 2;
    CHECK(gl_sim_run(&p, &c) == GL_OK, "run: %s", gl_error_message());
    if (a && b && c) {
        size_t n = gl_cube_size(a->cube);
        CHECK(memcmp(a->cube->data, b->cube->data, n * sizeof(float)) == 0,
              "same seed, 1 and 2 threads: identical frames");
        CHECK(memcmp(a->star_x, b->star_x, 6 * sizeof(double)) == 0, "identical jitter");
        CHECK(memcmp(a->cube->data, c->cube->data, n * sizeof(float)) != 0,
              "another seed: other frames");
    }
    gl_sim_result_free(a);
    gl_sim_result_free(b);
    gl_sim_result_free(c);
}

/* Companion-only image (run with minus run without), centroid in a disc of
 * radius 8 px around the expected position, recentred twice. */
static void test_companion_position(void)
{
    gl_sim_params p;
    clear_params(&p);
    p.size = 80;
    p.nframes = 3;
    p.cadence_s = 900; /* large steps of field rotation */
    p.ncompanions = 1;
    p.companions[0] = (gl_sim_companion){17.3, 61.7, 1e-2};
    gl_sim_result *w = NULL, *wo = NULL;
    CHECK(gl_sim_run(&p, &w) == GL_OK, "run: %s", gl_error_message());
    p.ncompanions = 0;
    CHECK(gl_sim_run(&p, &wo) == GL_OK, "run: %s", gl_error_message());
    if (!w || !wo)
        goto done;
    for (long f = 0; f < 3; f++) {
        /* conventions.md: angle 90 + pa + theta_i counter-clockwise from +x */
        double a = (90 + 61.7 + w->angle_deg[f]) * M_PI / 180;
        double ex = 40 + 17.3 * cos(a), ey = 40 + 17.3 * sin(a), cx = ex, cy = ey;
        const float *A = gl_cube_plane(w->cube, 0, f), *B = gl_cube_plane(wo->cube, 0, f);
        for (int it = 0; it < 3; it++) {
            double sx = 0, sy = 0, s = 0;
            for (int y = 0; y < 80; y++)
                for (int x = 0; x < 80; x++) {
                    if (hypot(x - cx, y - cy) > 8)
                        continue;
                    double v = (double)A[y * 80 + x] - (double)B[y * 80 + x];
                    sx += v * x, sy += v * y, s += v;
                }
            cx = sx / s, cy = sy / s;
        }
        CHECK(hypot(cx - ex, cy - ey) < 0.05,
              "frame %ld: companion at (%.3f, %.3f), expected (%.3f, %.3f)", f, cx, cy, ex, ey);
    }
    CHECK(fabs(w->angle_deg[2] - w->angle_deg[0]) > 5, "the field rotated: %g deg",
          w->angle_deg[2] - w->angle_deg[0]);
done:
    gl_sim_result_free(w);
    gl_sim_result_free(wo);
}

static void test_bad_params(void)
{
    gl_sim_params p;
    gl_sim_params_init(&p);
    gl_sim_result *r = (gl_sim_result *)&p;
    p.size = 4;
    CHECK(gl_sim_run(&p, &r) == GL_ERR_USAGE && r == NULL, "tiny frame refused");
    CHECK(strstr(gl_error_message(), "size") != NULL, "message names the size: %s",
          gl_error_message());
    gl_sim_companion c;
    CHECK(gl_companion_parse("10:20", &c) == GL_ERR_USAGE, "two fields refused");
    CHECK(gl_companion_parse("10:20:0", &c) == GL_ERR_USAGE, "zero contrast refused");
    CHECK(gl_companion_parse("10:20:1e-4x", &c) == GL_ERR_USAGE, "trailing text refused");
    CHECK(gl_companion_parse("10.5:-20:1e-4", &c) == GL_OK && c.sep_px == 10.5 && c.pa_deg == -20 &&
              c.contrast == 1e-4,
          "good companion parsed");
    gl_sim_params_init(&p);
    snprintf(p.date_obs, sizeof p.date_obs, "2021-13-01T00:00:00");
    CHECK(gl_sim_run(&p, &r) == GL_ERR_USAGE, "bad date refused");
    gl_sim_result_free(NULL);
}

static int gsl_handler_calls;
static void counting_handler(const char *reason, const char *file, int line, int gsl_errno)
{
    (void)reason, (void)file, (void)line, (void)gsl_errno;
    gsl_handler_calls++;
}

/* The library never aborts: the random streams turn GSL's error handler off
 * (a failed gsl_rng_alloc would otherwise call abort()). */
static void test_gsl_handler_off(void)
{
    gsl_set_error_handler(counting_handler);
    gsl_rng *r = sim_rng_new(7, 1, 2);
    CHECK(r != NULL, "random stream");
    gsl_rng_free(r);
    gsl_error_handler_t *prev = gsl_set_error_handler(NULL);
    CHECK(prev != counting_handler, "GSL's error handler was turned off by the simulator");
    gsl_set_error_handler_off();
}

int main(void)
{
    test_airy();
    test_flux_and_null();
    test_odd_size_and_lyot();
    test_determinism();
    test_companion_position();
    test_bad_params();
    test_gsl_handler_off();
    CHECK_DONE();
}
