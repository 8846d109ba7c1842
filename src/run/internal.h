/*
 * internal.h -- what the files of the run stage share: the composed command
 * line of a step and the fixed names of a run folder's products.
 */
#ifndef GLOAM_RUN_INTERNAL_H
#define GLOAM_RUN_INTERNAL_H

#include "gloam/run.h"

#include <cairo.h>
#include <cjson/cJSON.h>

enum { RUN_MAX_ARGS = 160, RUN_MAX_FILES = 12 };

/* One step's command line and the files it reads and leaves. */
typedef struct run_cmd {
    int asked; /* in the plan's steps */
    int argc;
    char *argv[RUN_MAX_ARGS + 1];
    int ninputs, nproducts;
    const char *inputs[RUN_MAX_FILES];
    const char *products[RUN_MAX_FILES];
    const char *stdout_path; /* receives the command's stdout (NULL: the log) */
    char why_not[256];       /* set when the step cannot run with the data given */
} run_cmd;

/* The products of a run folder, by fixed name. */
typedef struct run_files {
    char folder[4096];
    char log[4200], ledger[4200], summary[4200], report[4200];
    char inspect_json[4200];
    char aligned[4200], starpos[4200], angles[4200];
    char result[4200];
    char detect[4200], candidates_csv[4200], snr_fits[4200], snr_png[4200];
    char limits[4200], limits_csv[4200], limits_png[4200];
    char vet[4200], vet_csv[4200];
    char residual_png[4200], starpos_png[4200], rejected_csv[4200];
    double fwhm;     /* the FWHM every step was given, pixels */
    double pixscale; /* mas per pixel, 0 when the plan gives none */
} run_files;

gl_status run_files_init(run_files *f, const char *folder);

/* The regular files of a run folder (not the run's own log, ledger,
 * summary and report), to find what a step wrote (see ledger.c). */
typedef struct run_snapshot run_snapshot;
gl_status run_snapshot_take(const char *folder, run_snapshot **out);
void run_snapshot_free(run_snapshot *s);
/* Full paths (folder/NAME) of the files of after that are new or replaced
 * since before, at most max; returns their count. */
int run_snapshot_changed(const run_snapshot *before, const run_snapshot *after, const char *folder,
                         char (*paths)[4400], int max);

/* The step's command line, its words joined by spaces (run.c): the
 * options the ledger records. */
void run_join_args(const run_cmd *c, char *out, size_t size);
/* --dry-run: the listing of every asked step, marked up to date, to run
 * (and why) or not possible, through gl_log (dry_run.c). */
gl_status run_dry_list(run_cmd *cmds, const gl_run_params *rp, const run_files *f,
                       const char *target);

/* Why step would run again: NULL when it finished with exactly these
 * options and inputs and its inputs and products are intact (what
 * gl_ledger_is_current tells), else a phrase ("its options changed", ...)
 * for the dry-run listing (ledger.c). */
const char *run_ledger_stale(const gl_ledger *l, const char *step, const char *options,
                             const char *const *inputs, int ninputs);
/* 1 when the ledger records path among step's products. */
int run_ledger_wrote(const gl_ledger *l, const char *step, const char *path);

/* Parses every asked step's command line with its command's own parser,
 * without running it (gl_command_check); GL_ERR_INPUT naming the plan's
 * line, section and key of the first option refused (see check.c). */
gl_status run_check_options(gl_plan *plan, const char *target, const run_cmd *cmds);

/* RUN/summary.json from the products present (see summary.c). */
gl_status run_summary_write(const run_files *f, const char *target, const char *plan_name,
                            const run_cmd *cmds, const gl_run_outcome *out, const char *path);
/* RUN/report.html from the products present (see run_report.c). */
gl_status run_report_write(const run_files *f, const char *target, const run_cmd *cmds,
                           const gl_run_outcome *out, const char *path);

/* Total field rotation of the angles the subtraction used, degrees (NaN
 * when unknown; see run_report.c). */
double run_rotation_deg(const run_cmd *cmds);

/* The warnings of step `step` in the run's log: the lines "gloam STEP:
 * warning: ..." of the step's last section (the run that made its current
 * products, also when a later run found it unchanged), at most max of them
 * (see summary.c). Returns their count, 0 without a log. */
enum { RUN_MAX_WARNINGS = 32 };
int run_step_warnings(const char *log_path, const char *step, char (*out)[1024], int max);

/* A JSON file parsed (cJSON; NULL when missing or not JSON; see summary.c). */
cJSON *run_read_json(const char *path);

/* Writes a cairo image surface as PNG and destroys it; GL_ERR_IO naming the
 * file (see figures.c). */
gl_status run_png_finish(cairo_surface_t *s, const char *path);

/* The figures of the report (see figures.c). */
gl_status run_figure_residual(const char *fits_path, const char *png_path, const char *title);
gl_status run_figure_star_positions(const char *csv_path, const char *png_path);

#endif
