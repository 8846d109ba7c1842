/*
 * coronagraph.c -- the coronagraph models, one table entry each.
 *
 * none:    the field passes unchanged.
 * perfect: the ideal coronagraph of Cavarroc et al. 2006 (A&A 447, 397) and
 *          Sivaramakrishnan et al.: it removes the projection of the pupil
 *          field onto the unaberrated pupil amplitude A,
 *          E' = E - (<A, E> / <A, A>) A, i.e. all coherent on-axis light of
 *          a perfect wavefront; aberrations, tilt and off-axis sources leak.
 * lyot:    classical Lyot coronagraph (Lyot 1939; Sivaramakrishnan et al. 2001,
 *          ApJ 552, 397): FFT to the focal plane, an opaque disc, inverse FFT
 *          to the Lyot plane, an undersized stop. The off-axis path sees only
 *          the stop.
 */
#include "sim/internal.h"

#include <string.h>

static void coro_none(const sim_optics *o, const sim_channel *ch, fftw_complex *field, int on_axis)
{
    (void)o, (void)ch, (void)field, (void)on_axis;
}

static void coro_perfect(const sim_optics *o, const sim_channel *ch, fftw_complex *field,
                         int on_axis)
{
    if (!on_axis)
        return;
    int M = o->M, P = ch->P, off = ch->off;
    double complex dot = 0;
    for (int j = 0; j < P; j++) {
        const fftw_complex *row = field + (size_t)(j + off) * M + off;
        const double *a = ch->amp + (size_t)j * P;
        for (int i = 0; i < P; i++)
            dot += a[i] * row[i];
    }
    dot /= ch->amp_sum2;
    for (int j = 0; j < P; j++) {
        fftw_complex *row = field + (size_t)(j + off) * M + off;
        const double *a = ch->amp + (size_t)j * P;
        for (int i = 0; i < P; i++)
            row[i] -= dot * a[i];
    }
}

static void apply_stop(const sim_optics *o, const sim_channel *ch, fftw_complex *field)
{
    int M = o->M, P = ch->P, off = ch->off;
    for (int j = 0; j < P; j++) {
        fftw_complex *row = field + (size_t)(j + off) * M + off;
        const double *s = ch->stop + (size_t)j * P;
        for (int i = 0; i < P; i++)
            row[i] *= s[i];
    }
}

static void coro_lyot(const sim_optics *o, const sim_channel *ch, fftw_complex *field, int on_axis)
{
    int M = o->M;
    if (on_axis) {
        fftw_execute_dft(o->fwd, field, field);
        double inv = 1.0 / ((double)M * M);
        for (size_t k = 0; k < (size_t)M * M; k++)
            field[k] *= o->focal_mask[k] * inv;
        fftw_execute_dft(o->bwd, field, field);
        /* light diffracted outside the stop region is blocked: clear all
         * but the pupil region, then apply the stop inside it */
        int P = ch->P, off = ch->off;
        for (int v = 0; v < M; v++)
            for (int u = 0; u < M; u++)
                if (v < off || v >= off + P || u < off || u >= off + P)
                    field[(size_t)v * M + u] = 0;
    }
    apply_stop(o, ch, field);
}

static const sim_coro_ops models[] = {
    {"none", coro_none},
    {"perfect", coro_perfect},
    {"lyot", coro_lyot},
};

const sim_coro_ops *sim_coro_lookup(gl_sim_coronagraph c)
{
    if ((int)c < 0 || (size_t)c >= sizeof models / sizeof models[0])
        return NULL;
    return &models[c];
}
