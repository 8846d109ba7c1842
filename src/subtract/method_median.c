/*
 * method_median.c -- classical ADI (Marois et al. 2006, ApJ 641, 556): the
 * pixel-wise median of the sequence is a model of the star's quasi-static
 * halo (a companion moves with the field and is mostly rejected by the
 * median); each frame minus that model is its residual. Optionally the model
 * is scaled annulus by annulus (rings of --ring FWHM) by least squares,
 * a = sum(x m) / sum(m m), which follows slow changes of the halo's
 * brightness. With a reference cube the median of the reference frames (or of
 * both sets) is the model (classical RDI).
 *
 * The companion is partly subtracted where it moved by less than about one
 * FWHM over the sequence (self-subtraction), i.e. close to the star.
 */
#include "subtract/internal.h"

#include <math.h>
#include <omp.h>
#include <string.h>

static gl_status median_run(const sub_ctx *c)
{
    const gl_subtract_params *p = c->p;
    gl_status st = GL_OK;
    int nth = sub_max_threads();
    int use_sci = !(c->nref > 0 && p->refs_use == GL_REFS_ONLY);
    long nb = (use_sci ? c->nframe : 0) + c->nref;
    double width = p->ring_fwhm * p->fwhm;
    long nring = (long)ceil((c->r_out - c->r_in) / width);
    if (nring < 1)
        nring = 1;
    float *model = gl_malloc(sizeof(float) * (size_t)c->npix);
    float *scratch = gl_malloc(sizeof(float) * (size_t)nth * (size_t)nb);
    int *ring = gl_malloc(sizeof(int) * (size_t)c->npix);
    double *sums = gl_malloc(sizeof(double) * 2 * (size_t)nring * (size_t)nth);
    if (!model || !scratch || !ring || !sums) {
        st = gl_error_nomem("median model");
        goto cleanup;
    }
    double cx = (double)(c->nx / 2), cy = (double)(c->ny / 2);
    for (long y = 0; y < c->ny; y++)
        for (long x = 0; x < c->nx; x++) {
            double r = hypot((double)x - cx, (double)y - cy);
            long k = (long)floor((r - c->r_in) / width);
            ring[y * c->nx + x] =
                (r < c->r_in || r >= c->r_out) ? -1 : (int)GL_SUB_MIN(k, nring - 1);
        }
#pragma omp parallel for schedule(static)
    for (long j = 0; j < c->npix; j++) {
        float *buf = scratch + (size_t)omp_get_thread_num() * (size_t)nb;
        if (ring[j] < 0) {
            model[j] = NAN;
            continue;
        }
        long n = 0;
        if (use_sci)
            for (long i = 0; i < c->nframe; i++)
                buf[n++] = c->usable[i] ? c->sci[(size_t)i * (size_t)c->npix + (size_t)j] : NAN;
        for (long i = 0; i < c->nref; i++)
            buf[n++] = c->ref[(size_t)i * (size_t)c->npix + (size_t)j];
        model[j] = sub_nanmedian(buf, n);
    }
#pragma omp parallel for schedule(static)
    for (long i = 0; i < c->nframe; i++) {
        double *s = sums + (size_t)omp_get_thread_num() * 2 * (size_t)nring;
        const float *in = c->sci + (size_t)i * (size_t)c->npix;
        float *out = c->work + (size_t)i * (size_t)c->npix;
        for (long k = 0; k < 2 * nring; k++)
            s[k] = p->median_fit ? 0.0 : 1.0;
        if (p->median_fit)
            for (long j = 0; j < c->npix; j++)
                if (ring[j] >= 0 && !isnan(in[j]) && !isnan(model[j])) {
                    s[2 * ring[j]] += (double)in[j] * model[j];
                    s[2 * ring[j] + 1] += (double)model[j] * model[j];
                }
        for (long j = 0; j < c->npix; j++) {
            if (ring[j] < 0 || !c->usable[i]) {
                out[j] = NAN;
                continue;
            }
            double den = s[2 * ring[j] + 1];
            double a = den > 0 ? s[2 * ring[j]] / den : 1.0;
            out[j] = in[j] - (float)a * model[j];
        }
    }
    st = c->sink(c->sink_data, 0, c->work);
cleanup:
    gl_free(model);
    gl_free(scratch);
    gl_free(ring);
    gl_free(sums);
    return st;
}

const sub_method sub_method_median = {"median", 0, median_run};
