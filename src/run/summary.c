/*
 * summary.c -- RUN/summary.json: what a run found, in a form programs read
 * (cJSON): the steps with their state, duration, exact command line and
 * warnings (from the run's log);
 * the library versions; the frames kept; the detections; the contrast at
 * fixed separations (multiples of the FWHM, and arcsec where the pixel
 * scale is known) read from the contrast table by linear interpolation in
 * separation; the vetting table; and the first look of `inspect`.
 */
#include "run/internal.h"

#include "gloam/io.h"

#include <cjson/cJSON.h>
#include <cairo.h>
#include <fftw3.h>
#include <fitsio.h>
#include <gsl/gsl_version.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <wcslib/wcs.h>
#include <zlib.h>

static const char *state_name(gl_step_state s)
{
    static const char *const names[] = {"not asked",    "ran",    "unchanged",
                                        "not possible", "failed", "not reached"};
    return (int)s >= 0 && (size_t)s < sizeof names / sizeof names[0] ? names[s] : "?";
}

/* Numbers as JSON: a NaN or infinity becomes null (JSON has no NaN). */
static cJSON *num(double v)
{
    return isfinite(v) ? cJSON_CreateNumber(v) : cJSON_CreateNull();
}

int run_step_warnings(const char *log_path, const char *step, char (*out)[1024], int max)
{
    FILE *f = fopen(log_path, "rb");
    if (!f)
        return 0;
    char line[4096], head[64], tag[96];
    snprintf(head, sizeof head, " %s: ", step); /* "== STAMP STEP: options" */
    snprintf(tag, sizeof tag, "gloam %s: warning: ", step);
    int n = 0, inside = 0;
    while (fgets(line, sizeof line, f)) {
        size_t len = strlen(line);
        while (len && (line[len - 1] == '\n' || line[len - 1] == '\r'))
            line[--len] = '\0';
        if (strncmp(line, "== ", 3) == 0) {
            const char *sp = strchr(line + 3, ' ');
            inside = sp && strncmp(sp, head, strlen(head)) == 0;
            if (inside)
                n = 0; /* a later section of the same step replaces the earlier */
            continue;
        }
        if (inside && n < max && strncmp(line, tag, strlen(tag)) == 0)
            snprintf(out[n++], sizeof out[0], "%s", line + strlen(tag));
    }
    fclose(f);
    return n;
}

cJSON *run_read_json(const char *path)
{
    FILE *f = fopen(path, "rb");
    if (!f)
        return NULL;
    cJSON *j = NULL;
    if (fseek(f, 0, SEEK_END) == 0) {
        long n = ftell(f);
        char *t = n > 0 ? malloc((size_t)n + 1) : NULL;
        if (t && fseek(f, 0, SEEK_SET) == 0 && fread(t, 1, (size_t)n, f) == (size_t)n) {
            t[n] = '\0';
            j = cJSON_Parse(t);
        }
        free(t);
    }
    fclose(f);
    return j;
}

/* A CSV table as an array of objects (numeric columns only; NaN as null). */
static cJSON *table_rows(const char *path, long max_rows)
{
    gl_csv *t = NULL;
    if (gl_csv_read(path, &t) != GL_OK) {
        gl_error_clear();
        return NULL;
    }
    cJSON *arr = cJSON_CreateArray();
    for (long r = 0; arr && r < t->nrows && r < max_rows; r++) {
        cJSON *o = cJSON_CreateObject();
        for (int c = 0; o && c < t->ncols; c++)
            cJSON_AddItemToObject(o, t->names[c], num(t->data[(size_t)r * (size_t)t->ncols + c]));
        cJSON_AddItemToArray(arr, o);
    }
    gl_csv_free(t);
    return arr;
}

/* Linear interpolation of column ycol against sep_px over the rows of plane
 * 1; NaN outside the table. */
static double at_sep(const gl_csv *t, int plane_col, int sep_col, int ycol, double sep)
{
    double x0 = NAN, y0 = NAN;
    for (long r = 0; r < t->nrows; r++) {
        const double *row = t->data + (size_t)r * (size_t)t->ncols;
        if (plane_col >= 0 && row[plane_col] != 1)
            continue;
        double x = row[sep_col], y = row[ycol];
        if (!isfinite(x) || !isfinite(y))
            continue;
        if (x == sep)
            return y;
        if (isfinite(x0) && x0 < sep && x > sep)
            return y0 + (y - y0) * (sep - x0) / (x - x0);
        x0 = x;
        y0 = y;
    }
    return NAN;
}

static cJSON *contrast_at(const run_files *f)
{
    gl_csv *t = NULL;
    if (gl_csv_read(f->limits_csv, &t) != GL_OK) {
        gl_error_clear();
        return NULL;
    }
    int plane = gl_csv_column(t, "plane"), sep = gl_csv_column(t, "sep_px");
    int c50 = gl_csv_column(t, "contrast_c50"), cq = -1;
    for (int c = 0; c < t->ncols; c++)
        if (c != c50 && strncmp(t->names[c], "contrast_c", 10) == 0 && cq < 0)
            cq = c;
    cJSON *o = cJSON_CreateObject();
    if (sep < 0 || c50 < 0 || !o) {
        gl_csv_free(t);
        return o;
    }
    cJSON_AddStringToObject(o, "note",
                            "plane 1 of the contrast table, linearly interpolated in separation");
    static const double mult[] = {2, 3, 5, 10, 20}, arcsec[] = {0.1, 0.2, 0.3, 0.5, 1.0};
    for (int unit = 0; unit < 2; unit++) {
        /* unit 0: multiples of the FWHM; 1: arcsec, with a pixel scale */
        double per = unit ? (f->pixscale > 0 ? 1000 / f->pixscale : 0) : f->fwhm;
        if (!(per > 0))
            continue;
        const double *at = unit ? arcsec : mult;
        cJSON *arr = cJSON_AddArrayToObject(o, unit ? "at_arcsec" : "at_fwhm");
        for (size_t i = 0; i < 5; i++) {
            double s = at[i] * per;
            cJSON *e = cJSON_CreateObject();
            cJSON_AddNumberToObject(e, unit ? "sep_arcsec" : "sep_fwhm", at[i]);
            cJSON_AddItemToObject(e, "sep_px", num(s));
            cJSON_AddItemToObject(e, "contrast_c50", num(at_sep(t, plane, sep, c50, s)));
            if (cq >= 0)
                cJSON_AddItemToObject(e, t->names[cq], num(at_sep(t, plane, sep, cq, s)));
            cJSON_AddItemToArray(arr, e);
        }
    }
    gl_csv_free(t);
    return o;
}

static cJSON *frames_kept(const run_files *f)
{
    gl_csv *t = NULL;
    if (gl_csv_read(f->starpos, &t) != GL_OK) {
        gl_error_clear();
        return NULL;
    }
    int kept = gl_csv_column(t, "kept");
    long n = 0;
    for (long r = 0; kept >= 0 && r < t->nrows; r++)
        n += t->data[(size_t)r * (size_t)t->ncols + kept] == 1;
    cJSON *o = cJSON_CreateObject();
    cJSON_AddNumberToObject(o, "in", (double)t->nrows);
    if (kept >= 0)
        cJSON_AddNumberToObject(o, "kept", (double)n);
    gl_csv_free(t);
    return o;
}

static cJSON *versions(void)
{
    cJSON *o = cJSON_CreateObject();
    char buf[64];
    float v = 0;
    fits_get_version(&v);
    snprintf(buf, sizeof buf, "%.3f", v);
    cJSON_AddStringToObject(o, "gloam", gl_version());
    cJSON_AddStringToObject(o, "cfitsio", buf);
    cJSON_AddStringToObject(o, "wcslib", wcslib_version(NULL));
    cJSON_AddStringToObject(o, "fftw", fftw_version);
    cJSON_AddStringToObject(o, "gsl", gsl_version);
    cJSON_AddStringToObject(o, "cairo", cairo_version_string());
    cJSON_AddStringToObject(o, "cjson", cJSON_Version());
    cJSON_AddStringToObject(o, "zlib", zlibVersion());
    return o;
}

gl_status run_summary_write(const run_files *f, const char *target, const char *plan_name,
                            const run_cmd *cmds, const gl_run_outcome *out, const char *path)
{
    static const char *const names[GL_NSTEPS] = {"inspect", "align",  "subtract",
                                                 "detect",  "limits", "vet"};
    cJSON *root = cJSON_CreateObject();
    if (!root)
        return gl_error_nomem("summary");
    cJSON_AddStringToObject(root, "target", target);
    cJSON_AddStringToObject(root, "plan", plan_name);
    cJSON_AddItemToObject(root, "versions", versions());
    cJSON_AddItemToObject(root, "fwhm_px", num(f->fwhm));
    cJSON_AddItemToObject(root, "field_rotation_deg", num(run_rotation_deg(cmds)));
    if (f->pixscale > 0)
        cJSON_AddNumberToObject(root, "pixscale_mas", f->pixscale);
    cJSON *steps = cJSON_AddObjectToObject(root, "steps");
    double total = 0;
    for (int s = 0; s < GL_NSTEPS; s++) {
        cJSON *o = cJSON_CreateObject();
        cJSON_AddStringToObject(o, "state", state_name(out->state[s]));
        cJSON_AddNumberToObject(o, "seconds", out->seconds[s]);
        total += out->seconds[s];
        if (cmds[s].argc > 0 && cmds[s].asked) {
            cJSON *a = cJSON_AddArrayToObject(o, "command");
            for (int i = 0; i < cmds[s].argc; i++)
                cJSON_AddItemToArray(a, cJSON_CreateString(cmds[s].argv[i]));
        }
        if (cmds[s].why_not[0])
            cJSON_AddStringToObject(o, "why_not", cmds[s].why_not);
        if (out->state[s] == GL_STEP_FAILED)
            cJSON_AddStringToObject(o, "message", out->message);
        if (out->state[s] == GL_STEP_RAN || out->state[s] == GL_STEP_CURRENT) {
            static char warn[RUN_MAX_WARNINGS][1024];
            int nw = run_step_warnings(f->log, names[s], warn, RUN_MAX_WARNINGS);
            cJSON *a = nw ? cJSON_AddArrayToObject(o, "warnings") : NULL;
            for (int i = 0; a && i < nw; i++)
                cJSON_AddItemToArray(a, cJSON_CreateString(warn[i]));
        }
        cJSON_AddItemToObject(steps, names[s], o);
    }
    cJSON_AddNumberToObject(root, "seconds", total);
    cJSON *item;
    if ((item = run_read_json(f->inspect_json)))
        cJSON_AddItemToObject(root, "inspect", item);
    if ((item = frames_kept(f)))
        cJSON_AddItemToObject(root, "frames", item);
    if ((item = table_rows(f->candidates_csv, 1000)))
        cJSON_AddItemToObject(root, "detections", item);
    if ((item = contrast_at(f)))
        cJSON_AddItemToObject(root, "contrast", item);
    if ((item = table_rows(f->vet_csv, 1000)))
        cJSON_AddItemToObject(root, "vetting", item);

    char *text = cJSON_Print(root);
    cJSON_Delete(root);
    if (!text)
        return gl_error_nomem("summary");
    gl_outset *os = NULL;
    const char *tmp = NULL;
    gl_status st = gl_outset_new(1, &os);
    if (!st)
        st = gl_outset_add(os, path, NULL, &tmp);
    FILE *fp = st ? NULL : fopen(tmp, "wb");
    if (!st) {
        int bad = !fp || fputs(text, fp) == EOF || fputc('\n', fp) == EOF;
        if (fp && fclose(fp) != 0)
            bad = 1;
        if (bad || gl_outset_commit(os))
            st = gl_error_set(GL_ERR_IO, "%s: cannot write the run summary", path);
    }
    gl_outset_free(os);
    cJSON_free(text);
    return st;
}
