/*
 * run_report.c -- RUN/report.html of one target: what was run and what it
 * found, on one self-contained page (gl_report): the facts of the sequence
 * (frames kept, field rotation, FWHM), the residual image and the S/N map,
 * the candidates and their vetting, the contrast curve, the star positions
 * and rejected frames, the steps with their exact command lines, and the
 * assumptions and cautions a reader of the numbers must keep in mind. Each
 * piece is shown when its product is in the folder.
 */
#include "run/internal.h"

#include "core/internal.h"
#include "gloam/inspect.h"
#include "gloam/io.h"
#include "gloam/subtract.h"

#include <dirent.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

static int exists(const char *path)
{
    return access(path, R_OK) == 0;
}

/* The value following opt in a step's command line, or NULL. */
static const char *arg_after(const run_cmd *c, const char *opt)
{
    for (int i = 0; i + 1 < c->argc; i++)
        if (strcmp(c->argv[i], opt) == 0)
            return c->argv[i + 1];
    return NULL;
}

/* Total field rotation of the angles the subtraction used, degrees (NaN
 * when unknown). */
double run_rotation_deg(const run_cmd *cmds)
{
    const char *path = arg_after(&cmds[GL_STEP_SUBTRACT], "--angles");
    double *a = NULL;
    long n = 0;
    if (!path || !*path || gl_angles_read(path, 0, &a, &n) != GL_OK) {
        gl_error_clear();
        return NAN;
    }
    double r = gl_inspect_rotation_total(a, n);
    gl_free(a);
    return r;
}

/* Writes the rejected rows of the star-position table as their own CSV
 * (the header line and every row whose kept column is 0), whole or not at
 * all (gl_outset); returns the count, -1 when it cannot be written. */
static long write_rejected(const char *starpos, const char *path)
{
    gl_outset *os = NULL;
    const char *tmp = NULL;
    FILE *in = fopen(starpos, "r"), *o = NULL;
    if (!in || gl_outset_new(1, &os) || gl_outset_add(os, path, NULL, &tmp) ||
        !(o = fopen(tmp, "w"))) {
        if (in)
            fclose(in);
        gl_outset_free(os);
        gl_error_clear();
        return -1;
    }
    char line[4096];
    long n = 0;
    int kept_col = -1;
    if (fgets(line, sizeof line, in)) {
        fputs(line, o);
        char *save = NULL, *tok = strtok_r(line, ",\r\n", &save);
        for (int k = 0; tok; k++, tok = strtok_r(NULL, ",\r\n", &save))
            if (strcmp(tok, "kept") == 0)
                kept_col = k;
    }
    while (kept_col >= 0 && fgets(line, sizeof line, in)) {
        char copy[4096];
        snprintf(copy, sizeof copy, "%s", line);
        const char *p = copy;
        for (int k = 0; k < kept_col && p; k++) {
            p = strchr(p, ',');
            if (p)
                p++;
        }
        if (p && p[0] == '0' && (p[1] == ',' || p[1] == '\n' || p[1] == '\r' || !p[1])) {
            fputs(line, o);
            n++;
        }
    }
    fclose(in);
    if (fclose(o) != 0 || gl_outset_commit(os))
        n = -1;
    gl_outset_free(os);
    gl_error_clear();
    return n;
}

static const char *state_text(gl_step_state s)
{
    switch (s) {
    case GL_STEP_RAN: return "ran";
    case GL_STEP_CURRENT: return "unchanged since the last run (not run again)";
    case GL_STEP_NOT_POSSIBLE: return "not possible with these data";
    case GL_STEP_FAILED: return "FAILED";
    case GL_STEP_NOT_REACHED: return "not reached (an earlier step failed)";
    default: return "not asked";
    }
}

/* Every PNG of the folder whose name starts with prefix (vetting figures). */
static gl_status add_images_with_prefix(gl_report *r, const char *folder, const char *prefix,
                                        const char *caption)
{
    DIR *d = opendir(folder);
    if (!d)
        return GL_OK;
    char names[64][256];
    int n = 0;
    for (struct dirent *e; (e = readdir(d)) && n < 64;) {
        size_t len = strlen(e->d_name);
        if (strncmp(e->d_name, prefix, strlen(prefix)) == 0 && len > 4 &&
            strcmp(e->d_name + len - 4, ".png") == 0)
            snprintf(names[n++], sizeof names[0], "%s", e->d_name);
    }
    closedir(d);
    qsort(names, (size_t)n, sizeof names[0], (int (*)(const void *, const void *))strcmp);
    gl_status st = GL_OK;
    for (int i = 0; i < n && !st; i++) {
        char path[4400], cap[600];
        snprintf(path, sizeof path, "%.4000s/%.255s", folder, names[i]);
        snprintf(cap, sizeof cap, "%.300s (%.255s)", caption, names[i]);
        st = gl_report_image(r, path, cap);
    }
    return st;
}

gl_status run_report_write(const run_files *f, const char *target, const run_cmd *cmds,
                           const gl_run_outcome *out, const char *path)
{
    static const char *const step_title[GL_NSTEPS] = {"inspect", "align",  "subtract",
                                                      "detect",  "limits", "vet"};
    gl_report *r = NULL;
    gl_outset *os = NULL;
    char title[400];
    snprintf(title, sizeof title, "%s: gloam reduction", target);
    gl_status st = gl_report_new(title, &r);
    if (st)
        return st;

    /* the facts */
    char v[8][128];
    const char *names[8], *vals[8];
    int nf = 0;
    gl_csv *sp = NULL;
    if (exists(f->starpos) && gl_csv_read(f->starpos, &sp) == GL_OK) {
        int k = gl_csv_column(sp, "kept");
        long kept = 0;
        for (long i = 0; k >= 0 && i < sp->nrows; i++)
            kept += sp->data[(size_t)i * (size_t)sp->ncols + k] == 1;
        snprintf(v[nf], sizeof v[0], "%ld of %ld", kept, sp->nrows);
        names[nf] = "frames kept by align";
        vals[nf] = v[nf];
        nf++;
        gl_csv_free(sp);
    }
    gl_error_clear();
    double rot = run_rotation_deg(cmds);
    if (isfinite(rot)) {
        snprintf(v[nf], sizeof v[0], "%.1f deg", rot);
        names[nf] = "field rotation";
        vals[nf] = v[nf];
        nf++;
    }
    snprintf(v[nf], sizeof v[0], "%.3f px", f->fwhm);
    names[nf] = "FWHM given to every step";
    vals[nf] = v[nf];
    nf++;
    if (f->pixscale > 0) {
        snprintf(v[nf], sizeof v[0], "%.3f mas/px", f->pixscale);
        names[nf] = "pixel scale";
        vals[nf] = v[nf];
        nf++;
    }
    const char *method = arg_after(&cmds[GL_STEP_SUBTRACT], "--method");
    char dflt[64];
    if (!method) { /* the library's default, named */
        gl_subtract_params dp;
        gl_subtract_params_init(&dp);
        snprintf(dflt, sizeof dflt, "%s (the default)", gl_subtract_method_name(dp.method));
    }
    names[nf] = "subtraction";
    vals[nf++] = method ? method : dflt;
    const char *refs = arg_after(&cmds[GL_STEP_SUBTRACT], "--refs");
    char refs_text[600];
    if (refs) { /* RDI: which reference star, and how its frames were used */
        const char *use = arg_after(&cmds[GL_STEP_SUBTRACT], "--refs-use");
        const char *best = arg_after(&cmds[GL_STEP_SUBTRACT], "--refs-best");
        snprintf(refs_text, sizeof refs_text, "%s (%s%s%s)", refs,
                 use && strcmp(use, "both") == 0 ? "basis from the references and the science "
                                                   "frames"
                                                 : "basis from the references alone",
                 best ? ", the best-correlated " : "", best ? best : "");
        names[nf] = "reference star (RDI)";
        vals[nf++] = refs_text;
    }
    const char *modes = arg_after(&cmds[GL_STEP_SUBTRACT], "--modes");
    if (modes) {
        names[nf] = "KL mode counts (one plane each)";
        vals[nf++] = modes;
    }
    if ((st = gl_report_section(r, "The sequence")) || (st = gl_report_facts(r, names, vals, nf)))
        goto cleanup;
    if (out->exit_status) {
        char msg[700];
        snprintf(msg, sizeof msg, "The run stopped at a failed step: %s", out->message);
        if ((st = gl_report_caution(r, msg)))
            goto cleanup;
    }

    /* images */
    if (exists(f->result) || exists(f->snr_png)) {
        if ((st = gl_report_section(r, "Residual image and S/N map")))
            goto cleanup;
        if (exists(f->result) && run_figure_residual(f->result, f->residual_png, target) == GL_OK &&
            (st = gl_report_image(r, f->residual_png,
                                  "Starlight-subtracted, derotated and combined image")))
            goto cleanup;
        gl_error_clear();
        if (exists(f->snr_png) &&
            (st = gl_report_image(r, f->snr_png,
                                  "S/N map (two-sample Student t of 1-FWHM apertures); "
                                  "candidates numbered best first")))
            goto cleanup;
    }

    /* candidates and vetting */
    if (exists(f->candidates_csv)) {
        if ((st = gl_report_section(r, "Candidates")) ||
            (st = gl_report_table(r, f->candidates_csv,
                                  "Candidates above the detection threshold (best first)", 20)))
            goto cleanup;
    }
    if (exists(f->vet_csv)) {
        if ((st = gl_report_section(r, "Vetting")) ||
            (st = gl_report_table(r, f->vet_csv,
                                  "Characterisation and speckle-or-planet tests per candidate",
                                  20)) ||
            (st = add_images_with_prefix(r, f->folder, "vet", "Vetting figure")) ||
            (st = gl_report_caution(
                 r, "The vetting tests reduce, but do not remove, the chance of taking a "
                    "speckle for a planet; a second epoch showing common proper motion is "
                    "still the proof.")))
            goto cleanup;
    } else if (cmds[GL_STEP_VET].asked && cmds[GL_STEP_VET].why_not[0]) {
        char msg[400];
        snprintf(msg, sizeof msg, "Vetting was not possible: %s.", cmds[GL_STEP_VET].why_not);
        if ((st = gl_report_section(r, "Vetting")) || (st = gl_report_text(r, msg)))
            goto cleanup;
    }

    /* the contrast curve */
    if (exists(f->limits_png)) {
        char comp[4300];
        snprintf(comp, sizeof comp, "%s/limits.companions.csv", f->folder);
        if ((st = gl_report_section(r, "Contrast curve")) ||
            (st = gl_report_image(r, f->limits_png,
                                  "Detection limits calibrated with fake companions")) ||
            (exists(comp) &&
             (st = gl_report_table(r, comp, "Throughput-corrected contrast of the candidates",
                                   20))) ||
            (st = gl_report_caution(
                 r, "The contrast curve holds at the stated false-positive fraction and "
                    "completeness for point sources, under the assumptions recorded in the "
                    "header of limits.limits.fits (threshold, completeness model, throughput "
                    "from fake companions through the same subtraction, aperture of 1 FWHM). "
                    "The innermost FWHM, where the field rotated least, and the separations "
                    "of real companions are the least reliable.")))
            goto cleanup;
    }

    /* star positions */
    if (exists(f->starpos)) {
        if ((st = gl_report_section(r, "Star positions")))
            goto cleanup;
        if (run_figure_star_positions(f->starpos, f->starpos_png) == GL_OK &&
            (st = gl_report_image(r, f->starpos_png, "Star position found in every frame")))
            goto cleanup;
        gl_error_clear();
        long nrej = write_rejected(f->starpos, f->rejected_csv);
        if (nrej > 0 && (st = gl_report_table(r, f->rejected_csv, "Rejected frames", 50)))
            goto cleanup;
        if (nrej == 0 && (st = gl_report_text(r, "No frame was rejected.")))
            goto cleanup;
    }

    /* steps */
    if ((st = gl_report_section(r, "Steps")))
        goto cleanup;
    for (int s = 0; s < GL_NSTEPS; s++) {
        if (!cmds[s].asked)
            continue;
        char line[8192];
        size_t pos = 0;
        pos += (size_t)snprintf(line + pos, sizeof line - pos, "%s: %s", step_title[s],
                                state_text(out->state[s]));
        if (out->state[s] == GL_STEP_RAN)
            pos += (size_t)snprintf(line + pos, sizeof line - pos, " in %.1f s", out->seconds[s]);
        if (out->state[s] == GL_STEP_NOT_POSSIBLE && pos < sizeof line)
            pos += (size_t)snprintf(line + pos, sizeof line - pos, " (%s)", cmds[s].why_not);
        if (cmds[s].argc > 0 && pos < sizeof line) {
            pos += (size_t)snprintf(line + pos, sizeof line - pos, ". Command:");
            for (int i = 0; i < cmds[s].argc && pos < sizeof line; i++)
                pos += (size_t)snprintf(line + pos, sizeof line - pos, " %s", cmds[s].argv[i]);
        }
        if ((st = gl_report_text(r, line)))
            goto cleanup;
        if (out->state[s] == GL_STEP_RAN || out->state[s] == GL_STEP_CURRENT) {
            static char warn[RUN_MAX_WARNINGS][1024];
            int nw = run_step_warnings(f->log, step_title[s], warn, RUN_MAX_WARNINGS);
            for (int i = 0; i < nw; i++) {
                char msg[1100];
                snprintf(msg, sizeof msg, "%s warned: %.1023s", step_title[s], warn[i]);
                if ((st = gl_report_caution(r, msg)))
                    goto cleanup;
            }
        }
    }
    if ((st = gl_report_caution(
             r, "Simulated or real, every number here depends on the star centre, the "
                "parallactic angles and the off-axis PSF scaling given; check them in the "
                "inspect and align products before quoting a result.")))
        goto cleanup;

    const char *tmp = NULL;
    if ((st = gl_outset_new(1, &os)) || (st = gl_outset_add(os, path, NULL, &tmp)) ||
        (st = gl_report_write(r, tmp)) || (st = gl_outset_commit(os)))
        gl_outset_error_names(st);
cleanup:
    gl_outset_free(os);
    gl_report_free(r);
    return st;
}
