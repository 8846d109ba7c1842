/*
 * products.c -- the tables of a contrast curve: PREFIX.limits.csv and its
 * FITS twin (one block of rows per output plane, the assumptions in the
 * header), PREFIX.fakes.csv (every fake companion and what was recovered of
 * it) and PREFIX.companions.csv (the throughput-corrected contrast of known
 * candidates). The library writes them so that every caller (gloam limits,
 * a whole run) writes the same tables with the same code.
 */
#include "core/internal.h"
#include "gloam/io.h"
#include "gloam/limits.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

/* Writes the long-format table (one block of rows per output plane). */
gl_status gl_limits_tables_write(const char *csv, const char *fits, const gl_limits_result *r,
                                 double pixscale, double q, const gl_header *keys,
                                 const gl_provenance *prov)
{
    long rows = r->n * r->nplanes;
    enum { NCOL = 19 };
    double *buf = gl_calloc((size_t)rows * NCOL, sizeof *buf);
    if (!buf)
        return gl_error_nomem("limits table");
    char cq_name[32], dq_name[32];
    snprintf(cq_name, sizeof cq_name, "contrast_c%02.0f", 100 * q);
    snprintf(dq_name, sizeof dq_name, "delta_mag_c%02.0f", 100 * q);
    const char *names[NCOL] = {"plane",
                               "modes",
                               "sep_px",
                               "sep_arcsec",
                               "napertures",
                               "dof",
                               "noise",
                               "mean",
                               "t_threshold",
                               "throughput",
                               "throughput_scatter",
                               "fakes_used",
                               "contrast",
                               "delta_mag",
                               "completeness",
                               "contrast_c50",
                               cq_name,
                               "delta_mag_c50",
                               dq_name};
    const char *units[NCOL] = {"", "", "pix", "arcsec", "", "", "", "",    "",   "",
                               "", "", "",    "mag",    "", "", "", "mag", "mag"};
    const double *cols[NCOL];
    for (int c = 0; c < NCOL; c++)
        cols[c] = buf + (size_t)c * (size_t)rows;
    for (int k = 0; k < r->nplanes; k++)
        for (long i = 0; i < r->n; i++) {
            long row = k * r->n + i;
            size_t j = (size_t)row;
            double v[NCOL] = {k + 1,
                              (double)r->modes[k],
                              r->sep_px[i],
                              pixscale > 0 ? r->sep_px[i] * pixscale / 1000 : NAN,
                              r->napertures[j],
                              r->dof[j],
                              r->noise[j],
                              r->mean[j],
                              r->t_threshold[j],
                              r->throughput[j],
                              r->throughput_scatter[j],
                              r->fakes_used[j],
                              r->contrast[j],
                              -2.5 * log10(r->contrast[j]),
                              r->completeness_of_contrast[j],
                              r->contrast_c50[j],
                              r->contrast_cq[j],
                              -2.5 * log10(r->contrast_c50[j]),
                              -2.5 * log10(r->contrast_cq[j])};
            for (int c = 0; c < NCOL; c++)
                buf[(size_t)c * (size_t)rows + j] = isfinite(v[c]) ? v[c] : NAN;
        }
    gl_table t = {NCOL, rows, names, units, cols, keys};
    gl_status st = gl_table_write_csv(csv, &t);
    if (!st)
        st = gl_table_write_fits(fits, &t, "LIMITS", prov);
    gl_free(buf);
    return st;
}

/* The fakes, one row each: where, how bright, which run, and per plane what
 * the subtraction left of them (throughput, signal and reference spread of
 * the t test, per unit contrast and PSF aperture flux) and their S/N. */
gl_status gl_limits_fakes_write(const char *csv, const gl_limits_result *r)
{
    enum { PER_PLANE = 4 };
    enum { FIXED = 6 };
    int nc = FIXED + PER_PLANE * r->nplanes;
    size_t nr = (size_t)(r->nfakes ? r->nfakes : 1);
    double *buf = gl_calloc(nr * (size_t)nc, sizeof *buf);
    const char **names = gl_calloc((size_t)nc, sizeof *names);
    const double **cols = gl_calloc((size_t)nc, sizeof *cols);
    char(*pn)[40] = gl_calloc((size_t)r->nplanes * PER_PLANE, sizeof *pn);
    gl_status st = GL_OK;
    if (!buf || !names || !cols || !pn) {
        st = gl_error_nomem("fakes table");
        goto cleanup;
    }
    static const char *fixed[] = {"sep_px", "pa_deg", "contrast", "run", "batch", "nref"};
    static const char *stem[PER_PLANE] = {"throughput", "signal", "ref_spread", "snr"};
    for (int c = 0; c < FIXED; c++)
        names[c] = fixed[c];
    for (int q = 0; q < PER_PLANE; q++)
        for (int k = 0; k < r->nplanes; k++) {
            int c = FIXED + q * r->nplanes + k;
            snprintf(pn[c - FIXED], sizeof pn[0], "%s_plane%d", stem[q], k + 1);
            names[c] = pn[c - FIXED];
        }
    for (int c = 0; c < nc; c++)
        cols[c] = buf + (size_t)c * nr;
    for (int j = 0; j < r->nfakes; j++) {
        const gl_limits_fake *f = &r->fakes[j];
        double v[FIXED] = {f->sep_px, f->pa_deg, f->contrast, f->run + 1, f->batch + 1, f->nref};
        for (int c = 0; c < FIXED; c++)
            buf[(size_t)c * nr + (size_t)j] = v[c];
        for (int k = 0; k < r->nplanes; k++) {
            const double w[PER_PLANE] = {f->throughput[k], f->signal[k], f->ref_spread[k],
                                         f->snr[k]};
            for (int q = 0; q < PER_PLANE; q++)
                buf[(size_t)(FIXED + q * r->nplanes + k) * nr + (size_t)j] = w[q];
        }
    }
    const char **units = gl_calloc((size_t)nc, sizeof *units);
    if (!units) {
        st = gl_error_nomem("fakes table");
        goto cleanup;
    }
    units[0] = "pix";
    units[1] = "deg";
    gl_table t = {nc, r->nfakes, names, units, cols, NULL};
    st = gl_table_write_csv(csv, &t);
    gl_free(units);
cleanup:
    gl_free(buf);
    gl_free(names);
    gl_free(cols);
    gl_free(pn);
    return st;
}

/* Throughput-corrected photometry of the candidates, one row per candidate
 * and plane. */
gl_status gl_limits_companions_write(const char *csv, const gl_limits_result *r, const double *sep,
                                     const double *pa, int n, double pixscale)
{
    enum { NC = 15 };
    long rows = (long)n * r->nplanes;
    double *buf = gl_calloc((size_t)(rows ? rows : 1) * NC, sizeof *buf);
    if (!buf)
        return gl_error_nomem("companions table");
    const char *names[NC] = {"candidate", "plane",    "modes",        "sep_px",    "sep_arcsec",
                             "pa_deg",    "flux",     "background",   "noise",     "throughput",
                             "signal",    "contrast", "contrast_err", "delta_mag", "delta_mag_err"};
    const char *units[NC] = {"", "", "", "pix", "arcsec", "deg", "",   "",
                             "", "", "", "",    "",       "mag", "mag"};
    const double *cols[NC];
    for (int c = 0; c < NC; c++)
        cols[c] = buf + (size_t)c * (size_t)rows;
    for (int i = 0; i < n; i++)
        for (int k = 0; k < r->nplanes; k++) {
            size_t j = (size_t)i * (size_t)r->nplanes + (size_t)k;
            gl_limits_photometry ph;
            int ok = gl_limits_photometry_at(r, k, sep[i], pa[i], &ph) == GL_OK;
            if (!ok)
                gl_log(GL_LOG_WARN, "candidate %d (%.2f px, %.1f deg), plane %d: %s", i + 1, sep[i],
                       pa[i], k + 1, gl_error_message());
            double v[NC] = {i + 1,
                            k + 1,
                            (double)r->modes[k],
                            sep[i],
                            pixscale > 0 ? sep[i] * pixscale / 1000 : NAN,
                            pa[i],
                            ok ? ph.flux : NAN,
                            ok ? ph.background : NAN,
                            ok ? ph.noise : NAN,
                            ok ? ph.throughput : NAN,
                            ok ? ph.signal : NAN,
                            ok ? ph.contrast : NAN,
                            ok ? ph.contrast_err : NAN,
                            ok ? -2.5 * log10(ph.contrast) : NAN,
                            ok ? 2.5 / log(10.0) * ph.contrast_err / ph.contrast : NAN};
            for (int c = 0; c < NC; c++)
                buf[(size_t)c * (size_t)rows + j] = isfinite(v[c]) ? v[c] : NAN;
        }
    gl_table t = {NC, rows, names, units, cols, NULL};
    gl_status st = gl_table_write_csv(csv, &t);
    gl_free(buf);
    return st;
}
