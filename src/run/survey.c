/*
 * survey.c -- many targets reduced with one plan: target i runs on process
 * i mod size (one process per target under mpirun when there are as many
 * processes as targets; all of them in turn serially), each into its own
 * run folder, a failure confined to its target. The processes then share
 * each target's outcome (a fixed-size record per target, combined by the
 * caller's function: MPI_Allreduce under MPI), and process 0 writes the
 * survey products from the targets' summaries: a table, a page linking the
 * targets' reports and one figure with every contrast curve.
 *
 * The library itself does not link MPI: the command line passes the
 * combining function, so the serial build needs no MPI at all. Products do
 * not depend on how targets were spread over processes (no timings in the
 * table), so a survey run with mpirun equals the serial one.
 */
#include "run/internal.h"

#include "core/internal.h"
#include "gloam/io.h"

#include <cairo.h>
#include <cjson/cJSON.h>
#include <dirent.h>
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

enum { MSG = 480 };

/* What every process learns of a target: its status (0 ok, else 1 + the
 * gl_status) and its message. */
typedef struct outcome_rec {
    unsigned char status;
    char message[MSG];
} outcome_rec;

void gl_survey_params_init(gl_survey_params *p)
{
    memset(p, 0, sizeof *p);
    p->size = 1;
    gl_run_params_init(&p->run);
}

static double jnum(const cJSON *o, const char *path)
{
    /* path: "a.b.c" through objects */
    char buf[128];
    snprintf(buf, sizeof buf, "%s", path);
    const cJSON *cur = o;
    char *save = NULL;
    for (char *k = strtok_r(buf, ".", &save); k && cur; k = strtok_r(NULL, ".", &save))
        cur = cJSON_GetObjectItemCaseSensitive(cur, k);
    return cJSON_IsNumber(cur) ? cur->valuedouble : NAN;
}

/* contrast_c50 of the summary's list (at_fwhm or at_arcsec) where key == v */
static double contrast_where(const cJSON *s, const char *list, const char *key, double v)
{
    const cJSON *c = cJSON_GetObjectItemCaseSensitive(s, "contrast");
    const cJSON *arr = c ? cJSON_GetObjectItemCaseSensitive(c, list) : NULL, *e;
    cJSON_ArrayForEach(e, arr)
    {
        if (fabs(jnum(e, key) - v) < 1e-9)
            return jnum(e, "contrast_c50");
    }
    return NAN;
}

enum { NCOL = 13 };
static const char *const col_names[NCOL] = {"ok",
                                            "frames_in",
                                            "frames_kept",
                                            "field_rotation_deg",
                                            "fwhm_px",
                                            "detections",
                                            "best_snr",
                                            "contrast_c50_0.2arcsec",
                                            "contrast_c50_0.5arcsec",
                                            "contrast_c50_1arcsec",
                                            "contrast_c50_3fwhm",
                                            "contrast_c50_5fwhm",
                                            "contrast_c50_10fwhm"};
static const char *const col_units[NCOL] = {"", "", "", "deg", "pix", "", "",
                                            "", "", "", "",    "",    ""};

static void table_row(const cJSON *s, int ok, double *v)
{
    v[0] = ok;
    v[1] = jnum(s, "frames.in");
    v[2] = jnum(s, "frames.kept");
    v[3] = jnum(s, "field_rotation_deg");
    v[4] = jnum(s, "fwhm_px");
    const cJSON *det = s ? cJSON_GetObjectItemCaseSensitive(s, "detections") : NULL, *e;
    v[5] = det ? cJSON_GetArraySize(det) : NAN;
    v[6] = NAN;
    cJSON_ArrayForEach(e, det)
    {
        double t = jnum(e, "snr");
        if (isfinite(t) && !(t <= v[6]))
            v[6] = t;
    }
    v[7] = contrast_where(s, "at_arcsec", "sep_arcsec", 0.2);
    v[8] = contrast_where(s, "at_arcsec", "sep_arcsec", 0.5);
    v[9] = contrast_where(s, "at_arcsec", "sep_arcsec", 1.0);
    v[10] = contrast_where(s, "at_fwhm", "sep_fwhm", 3);
    v[11] = contrast_where(s, "at_fwhm", "sep_fwhm", 5);
    v[12] = contrast_where(s, "at_fwhm", "sep_fwhm", 10);
}

/* ---- the combined contrast figure ---------------------------------------- */

typedef struct curve {
    double *x, *y;
    long n;
} curve;

/* plane-1 contrast_c50 against separation (arcsec when every target has a
 * scale, else pixels) */
static int read_curve(const char *csv, int arcsec, curve *c)
{
    gl_csv *t = NULL;
    memset(c, 0, sizeof *c);
    if (gl_csv_read(csv, &t) != GL_OK) {
        gl_error_clear();
        return 0;
    }
    int cp = gl_csv_column(t, "plane"), cs = gl_csv_column(t, arcsec ? "sep_arcsec" : "sep_px"),
        cc = gl_csv_column(t, "contrast_c50");
    if (cs >= 0 && cc >= 0) {
        c->x = malloc(sizeof *c->x * (size_t)(t->nrows + 1));
        c->y = malloc(sizeof *c->y * (size_t)(t->nrows + 1));
        for (long r = 0; c->x && c->y && r < t->nrows; r++) {
            const double *row = t->data + (size_t)r * (size_t)t->ncols;
            if ((cp < 0 || row[cp] == 1) && isfinite(row[cs]) && row[cc] > 0) {
                c->x[c->n] = row[cs];
                c->y[c->n] = row[cc];
                c->n++;
            }
        }
    }
    gl_csv_free(t);
    return c->n > 1;
}

/* Target i's line: a qualitative palette of our own, repeated with dashes. */
static void curve_style(cairo_t *cr, int i)
{
    static const double pal[][3] = {{0.18, 0.23, 0.27}, {0.75, 0.46, 0.16}, {0.20, 0.52, 0.50},
                                    {0.55, 0.24, 0.45}, {0.45, 0.55, 0.20}, {0.70, 0.22, 0.20}};
    const double *c = pal[i % 6], dash[] = {6, 3};
    cairo_set_dash(cr, dash, i / 6 % 2 ? 2 : 0, 0);
    cairo_set_source_rgb(cr, c[0], c[1], c[2]);
    cairo_set_line_width(cr, 1.8);
}

static gl_status contrast_figure(const char *path, const char *const *names, const curve *cv, int n,
                                 int arcsec)
{
    double xmax = 0, ymin = INFINITY, ymax = 0;
    for (int i = 0; i < n; i++)
        for (long k = 0; k < cv[i].n; k++) {
            xmax = fmax(xmax, cv[i].x[k]);
            ymin = fmin(ymin, cv[i].y[k]);
            ymax = fmax(ymax, cv[i].y[k]);
        }
    if (!(xmax > 0) || !(ymax > 0))
        return GL_OK; /* no curve: no figure */
    double lo = floor(log10(ymin)), hi = ceil(log10(ymax));
    if (hi <= lo)
        hi = lo + 1;
    const int W = 760, H = 480, L = 70, R = 190, T = 30, B = 50;
    cairo_surface_t *s = cairo_image_surface_create(CAIRO_FORMAT_RGB24, W, H);
    cairo_t *cr = cairo_create(s);
    cairo_set_source_rgb(cr, 1, 1, 1);
    cairo_paint(cr);
    cairo_select_font_face(cr, "sans-serif", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_NORMAL);
    cairo_set_font_size(cr, 12);
#define PX(x) (L + (W - L - R) * (x) / xmax)
#define PY(y) (T + (H - T - B) * (hi - log10(y)) / (hi - lo))
    cairo_set_line_width(cr, 1);
    for (double e = lo; e <= hi; e++) {
        cairo_set_source_rgb(cr, 0.88, 0.86, 0.8);
        cairo_move_to(cr, L, PY(pow(10, e)));
        cairo_line_to(cr, W - R, PY(pow(10, e)));
        cairo_stroke(cr);
        char lab[32];
        snprintf(lab, sizeof lab, "1e%.0f", e);
        cairo_set_source_rgb(cr, 0.2, 0.2, 0.2);
        cairo_move_to(cr, L - 36, PY(pow(10, e)) + 4);
        cairo_show_text(cr, lab);
    }
    cairo_set_source_rgb(cr, 0.4, 0.4, 0.4);
    cairo_rectangle(cr, L, T, W - L - R, H - T - B);
    cairo_stroke(cr);
    /* separation ticks: 1, 2 or 5 times a power of ten, about six of them */
    double raw = xmax / 6, p10 = pow(10, floor(log10(raw))), m = raw / p10;
    double step = (m < 1.5 ? 1 : m < 3.5 ? 2 : m < 7.5 ? 5 : 10) * p10;
    for (double x = 0; x <= xmax * (1 + 1e-9); x += step) {
        char lab[32];
        snprintf(lab, sizeof lab, "%g", x);
        cairo_move_to(cr, PX(x), H - B);
        cairo_line_to(cr, PX(x), H - B + 4);
        cairo_stroke(cr);
        cairo_move_to(cr, PX(x) - 8, H - B + 16);
        cairo_show_text(cr, lab);
    }
    char xl[96];
    snprintf(xl, sizeof xl, "separation (%s)", arcsec ? "arcsec" : "px");
    cairo_move_to(cr, L + (W - L - R) / 2 - 40, H - 8);
    cairo_show_text(cr, xl);
    cairo_save(cr);
    cairo_move_to(cr, 18, T + (H - T - B) / 2 + 80);
    cairo_rotate(cr, -M_PI / 2);
    cairo_show_text(cr, "contrast (companion / star)");
    cairo_restore(cr);
    cairo_set_font_size(cr, 13);
    cairo_move_to(cr, L, 16);
    cairo_show_text(cr, "50%-completeness contrast of every target (plane 1; each at the "
                        "threshold of its own report)");
    cairo_set_font_size(cr, 12);
    cairo_save(cr);
    cairo_rectangle(cr, L, T, W - L - R, H - T - B);
    cairo_clip(cr);
    for (int i = 0; i < n; i++) {
        curve_style(cr, i);
        for (long k = 0; k < cv[i].n; k++) {
            if (k == 0)
                cairo_move_to(cr, PX(cv[i].x[k]), PY(cv[i].y[k]));
            else
                cairo_line_to(cr, PX(cv[i].x[k]), PY(cv[i].y[k]));
        }
        cairo_stroke(cr);
    }
    cairo_restore(cr); /* the legend, outside the plot */
    for (int i = 0; i < n; i++) {
        curve_style(cr, i);
        cairo_move_to(cr, W - R + 12, T + 14 + 18 * i);
        cairo_line_to(cr, W - R + 36, T + 14 + 18 * i);
        cairo_stroke(cr);
        cairo_set_dash(cr, NULL, 0, 0);
        cairo_set_source_rgb(cr, 0.14, 0.15, 0.17);
        cairo_move_to(cr, W - R + 42, T + 18 + 18 * i);
        cairo_show_text(cr, names[i]);
    }
#undef PX
#undef PY
    cairo_destroy(cr);
    return run_png_finish(s, path);
}

/* ---- the survey products ----------------------------------------------- */

static gl_status write_products(gl_plan *plan, const gl_survey_params *sp, const outcome_rec *rec)
{
    const int nt = gl_plan_target_count(plan);
    gl_status st = GL_OK;
    double *cols = calloc((size_t)NCOL * (size_t)nt, sizeof *cols);
    const char **labels = calloc((size_t)nt, sizeof *labels);
    curve *cv = calloc((size_t)nt, sizeof *cv);
    const char **cv_names = calloc((size_t)nt, sizeof *cv_names);
    cJSON **sums = calloc((size_t)nt, sizeof *sums);
    gl_report *r = NULL;
    gl_outset *os = NULL;
    if (!cols || !labels || !cv || !cv_names || !sums) {
        st = gl_error_nomem("survey");
        goto cleanup;
    }
    int all_arcsec = 1, ncv = 0;
    for (int i = 0; i < nt; i++) {
        char path[4400];
        labels[i] = gl_plan_target_name(plan, i);
        snprintf(path, sizeof path, "%s/%s/summary.json", sp->folder, labels[i]);
        sums[i] = run_read_json(path);
        all_arcsec &= sums[i] && isfinite(jnum(sums[i], "pixscale_mas"));
        double v[NCOL];
        table_row(sums[i], rec[i].status == 0, v);
        for (int c = 0; c < NCOL; c++)
            cols[(size_t)c * (size_t)nt + (size_t)i] = v[c];
    }
    const double *colp[NCOL];
    for (int c = 0; c < NCOL; c++)
        colp[c] = cols + (size_t)c * (size_t)nt;
    gl_table tab = {NCOL, nt, (const char **)col_names, (const char **)col_units, colp, NULL};
    char csv[4400], fits[4400], png[4400], html[4400];
    snprintf(csv, sizeof csv, "%s/survey.csv", sp->folder);
    snprintf(fits, sizeof fits, "%s/survey.fits", sp->folder);
    snprintf(png, sizeof png, "%s/contrast.png", sp->folder);
    snprintf(html, sizeof html, "%s/survey.html", sp->folder);
    gl_provenance prov;
    memset(&prov, 0, sizeof prov);
    prov.program = "gloam survey";
    prov.command = gl_plan_name(plan);
    /* one set: the survey's products replace the previous ones together
     * (the CSV with its ECSV twin), or none is touched */
    const char *csv_tmp, *fits_tmp, *png_tmp = NULL, *html_tmp;
    if ((st = gl_outset_new(1, &os)) || (st = gl_outset_add(os, csv, NULL, &csv_tmp)) ||
        (st = gl_outset_add(os, fits, NULL, &fits_tmp)) ||
        (st = gl_outset_add(os, html, NULL, &html_tmp)))
        goto cleanup;
    if ((st = gl_table_write_csv_labelled(csv_tmp, &tab, "target", labels)) ||
        (st = gl_table_write_fits_labelled(fits_tmp, &tab, "SURVEY", &prov, "target", labels)))
        goto cleanup;

    for (int i = 0; i < nt; i++) {
        char path[4400];
        snprintf(path, sizeof path, "%s/%s/limits.limits.csv", sp->folder, labels[i]);
        if (read_curve(path, all_arcsec, &cv[ncv]))
            cv_names[ncv++] = labels[i];
        else
            free(cv[ncv].x), free(cv[ncv].y), memset(&cv[ncv], 0, sizeof cv[ncv]);
    }
    if (ncv > 0 && ((st = gl_outset_add(os, png, NULL, &png_tmp)) ||
                    (st = contrast_figure(png_tmp, cv_names, cv, ncv, all_arcsec))))
        goto cleanup;

    char title[300];
    const char *name = gl_plan_value(plan, NULL, "run", "name", NULL);
    snprintf(title, sizeof title, "Survey %s: %d target%s", name ? name : "", nt,
             nt == 1 ? "" : "s");
    if ((st = gl_report_new(title, &r)) || (st = gl_report_section(r, "Targets")) ||
        (st = gl_report_table(r, csv_tmp, "One row per target (survey.csv)", 10000)))
        goto cleanup;
    for (int i = 0; i < nt; i++) {
        char href[600], text[900];
        if (rec[i].status == 0) {
            snprintf(href, sizeof href, "%.255s/report.html", labels[i]);
            snprintf(text, sizeof text, "%.255s: report", labels[i]);
            st = gl_report_link(r, href, text);
        } else {
            snprintf(text, sizeof text, "%.255s FAILED: %s", labels[i], rec[i].message);
            st = gl_report_caution(r, text);
            if (!st && sums[i]) {
                snprintf(href, sizeof href, "%.255s/report.html", labels[i]);
                snprintf(text, sizeof text, "%.255s: report of the failed run", labels[i]);
                st = gl_report_link(r, href, text);
            }
        }
        if (st)
            goto cleanup;
    }
    if (ncv > 0 && ((st = gl_report_section(r, "Contrast curves")) ||
                    (st = gl_report_image(r, png_tmp,
                                          "Every target's 50%-completeness curve "
                                          "(plane 1 of each contrast table)"))))
        goto cleanup;
    if ((st = gl_report_caution(
             r, "Curves of different targets differ in field rotation, frames kept, star "
                "brightness and subtraction; compare them only with the table's columns in "
                "view, and each under the assumptions stated in its own report.")))
        goto cleanup;
    if ((st = gl_report_write(r, html_tmp)) || (st = gl_outset_commit(os)))
        goto cleanup;
cleanup:
    if (st)
        gl_outset_error_names(st);
    gl_outset_free(os);
    gl_report_free(r);
    for (int i = 0; sums && i < nt; i++)
        cJSON_Delete(sums[i]);
    for (int i = 0; cv && i < nt; i++) {
        free(cv[i].x);
        free(cv[i].y);
    }
    free(sums);
    free(cv_names);
    free(cv);
    free(labels);
    free(cols);
    return st;
}

gl_status gl_survey_run(gl_plan *plan, const gl_survey_params *sp, int *nfailed)
{
    *nfailed = 0;
    gl_status st = gl_plan_expand_folders(plan);
    if (st)
        return st;
    const int nt = gl_plan_target_count(plan);
    if (!sp->folder || sp->size < 1 || sp->rank < 0 || sp->rank >= sp->size ||
        (sp->size > 1 && !sp->share))
        return gl_error_set(GL_ERR_USAGE, "gl_survey_run: bad folder, rank or size");
    /* the survey folder: new, or one an earlier survey wrote */
    char marker[4400];
    snprintf(marker, sizeof marker, "%s/survey.csv", sp->folder);
    struct stat sb;
    if (stat(sp->folder, &sb) == 0) {
        DIR *d = opendir(sp->folder);
        int empty = 1;
        for (struct dirent *e; d && (e = readdir(d));)
            empty &= !strcmp(e->d_name, ".") || !strcmp(e->d_name, "..");
        if (d)
            closedir(d);
        if (!empty && access(marker, F_OK) != 0)
            return gl_error_set(GL_ERR_USAGE,
                                "%s: the folder exists and is not a gloam survey folder (no "
                                "survey.csv); choose another folder",
                                sp->folder);
    }
    if (sp->rank == 0 && mkdir(sp->folder, 0777) != 0 && errno != EEXIST)
        return gl_error_set(GL_ERR_IO, "%s: cannot create the survey folder: %s", sp->folder,
                            strerror(errno));
    outcome_rec *rec = calloc((size_t)nt, sizeof *rec);
    if (!rec)
        return gl_error_nomem("survey");
    mkdir(sp->folder, 0777); /* every process: the first one may not have made it yet */
    for (int i = sp->rank; i < nt; i += sp->size) {
        const char *name = gl_plan_target_name(plan, i);
        char folder[4400];
        snprintf(folder, sizeof folder, "%s/%s", sp->folder, name);
        gl_run_params rp = sp->run;
        rp.folder = folder;
        gl_run_outcome out;
        gl_progress("survey", i, nt);
        gl_status ts = gl_run_target(plan, name, &rp, &out);
        if (ts) {
            rec[i].status = (unsigned char)(1 + ts);
            snprintf(rec[i].message, sizeof rec[i].message, "%s", gl_error_message());
            gl_error_clear();
        }
    }
    gl_progress("survey", nt, nt);
    if (sp->size > 1 && sp->share(sp->share_user, (unsigned char *)rec, sizeof *rec * (size_t)nt))
        st = gl_error_set(GL_ERR_INTERNAL, "the survey's processes could not share their results");
    for (int i = 0; i < nt && !st; i++)
        *nfailed += rec[i].status != 0;
    /* process 0 speaks for every target, those of the other processes too
     * (they are quiet: one voice on the terminal) */
    for (int i = 0; i < nt && !st && sp->rank == 0; i++) {
        char who[64] = "";
        if (sp->size > 1)
            snprintf(who, sizeof who, " (process %d)", i % sp->size);
        if (rec[i].status)
            gl_log(GL_LOG_WARN, "target %s%s failed: %s", gl_plan_target_name(plan, i), who,
                   rec[i].message);
        else
            gl_log(GL_LOG_INFO, "target %s%s: done, run folder %s/%s", gl_plan_target_name(plan, i),
                   who, sp->folder, gl_plan_target_name(plan, i));
    }
    if (!st && sp->rank == 0)
        st = write_products(plan, sp, rec);
    free(rec);
    return st;
}
