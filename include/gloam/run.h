/*
 * run.h -- whole reductions: the plan file, the run folder and its ledger of
 * finished steps, the machine-readable summary and the HTML report.
 *
 * A plan is an INI file (read with libinih): sections [run], [inputs],
 * [steps], one section per step ([inspect], [align], [subtract], [detect],
 * [limits], [vet]) whose keys are that command's long options without the
 * leading "--", and, for surveys, [target NAME] sections holding a target's
 * inputs and per-target overrides written "step.key = value". Comments start
 * with '#' or ';'. `gloam run --example` prints a commented plan.
 */
#ifndef GLOAM_RUN_H
#define GLOAM_RUN_H

#include "gloam/core.h"

#include <stddef.h>

#ifdef __cplusplus
extern "C" {
#endif

/* ---- the plan ------------------------------------------------------------ */

typedef struct gl_plan gl_plan;

/* One key of a plan as a step sees it: the effective value for a target
 * (the target's override when there is one, else the step section's) and
 * where it was written, for messages ("PLAN:LINE"). */
typedef struct gl_plan_item {
    const char *key;
    const char *value;
    int line;
} gl_plan_item;

/* Reads the plan at path.
 * Given:    path, an INI file.
 * Returned: *out, the plan (free with gl_plan_free), NULL on failure.
 * Function return value: GL_OK; GL_ERR_IO (cannot be read); GL_ERR_INPUT
 *   ("PLAN:LINE: ..." for a line that is not INI, a section of unknown name,
 *   a key given twice in one section, a value that is empty); GL_ERR_NOMEM. */
GL_API gl_status gl_plan_read(const char *path, gl_plan **out);
/* The same from text in memory; name stands for the file in messages. */
GL_API gl_status gl_plan_parse(const char *text, const char *name, gl_plan **out);
GL_API void gl_plan_free(gl_plan *p);

/* The file name the plan was read from. */
GL_API const char *gl_plan_name(const gl_plan *p);

/* Targets, in the order the plan lists them: one per [target NAME] section;
 * a plan without any holds one target, named by [run] name (else "target").
 * Returns the count; name(i) for 0 <= i < count. */
GL_API int gl_plan_target_count(const gl_plan *p);
GL_API const char *gl_plan_target_name(const gl_plan *p, int i);

/* The effective value of section.key for target (NULL target: the plan's
 * defaults). For section "inputs" a target's own plain key wins
 * ([target X] cube = ...); for other sections its "section.key" override.
 * Returns NULL when the key is not set. *line (may be NULL) gets the line.
 * Marks the key as used. */
GL_API const char *gl_plan_value(gl_plan *p, const char *target, const char *section,
                                 const char *key, int *line);

/* The effective keys of a step section for a target, in the order of the
 * plan (defaults first, then overrides of keys the section does not set).
 * Returns the count written into items[0..max-1] (the values stay owned by
 * the plan) and marks them used; -1 with GL_ERR_USAGE recorded when more
 * than max. */
GL_API int gl_plan_items(gl_plan *p, const char *target, const char *section, gl_plan_item *items,
                         int max);

/* Fails with "PLAN:LINE: key is not used by gloam run" naming the first key
 * nothing asked for (a misspelt option) and GL_ERR_INPUT; GL_OK when every
 * key was used. */
GL_API gl_status gl_plan_check_used(const gl_plan *p);

/* A survey given as "[survey] folders = PATTERN" (a glob, relative to the
 * plan): each matching folder becomes a target named after the folder,
 * whose inputs are the [inputs] file names inside that folder. Does nothing
 * without the key. GL_ERR_INPUT naming the line when nothing matches or a
 * folder name repeats a target. */
GL_API gl_status gl_plan_expand_folders(gl_plan *p);

/* Resolves a path written in the plan: relative paths are relative to the
 * plan file's folder. Writes into out[size]; GL_ERR_USAGE when it does not fit. */
GL_API gl_status gl_plan_path(const gl_plan *p, const char *value, char *out, size_t size);

/* ---- the ledger of a run folder ------------------------------------------ */

/* What a run folder remembers of its finished steps (RUN/ledger.json): for
 * each step the options it ran with, the CRC-32 of every input and every
 * product, and its duration. A step is current, and is not run again, when
 * its options and inputs are unchanged and its products are still there
 * with the checksums it left; a changed product of an earlier step changes
 * the inputs of the later ones, so they run again too. */
typedef struct gl_ledger gl_ledger;

/* Opens the ledger of folder (an empty one when the folder has none).
 * GL_ERR_INPUT naming the file when it exists but is not a ledger. */
GL_API gl_status gl_ledger_open(const char *folder, gl_ledger **out);
GL_API void gl_ledger_free(gl_ledger *l);
/* 1 when step finished with exactly these options and inputs and its
 * products are intact; 0 otherwise (also when a file cannot be read). */
GL_API int gl_ledger_is_current(const gl_ledger *l, const char *step, const char *options,
                                const char *const *inputs, int ninputs);
/* Records step as finished (replacing an earlier record), checksumming the
 * inputs and products now. GL_ERR_IO naming a file that cannot be read. */
GL_API gl_status gl_ledger_record(gl_ledger *l, const char *step, const char *options,
                                  const char *const *inputs, int ninputs,
                                  const char *const *products, int nproducts, double seconds);
/* Forgets step (so that it runs again). */
GL_API void gl_ledger_forget(gl_ledger *l, const char *step);
/* Writes the ledger back (a temporary file renamed into place). */
GL_API gl_status gl_ledger_save(const gl_ledger *l);

/* ---- running one target ------------------------------------------------- */

/* The steps of a reduction, in pipeline order. */
typedef enum gl_step {
    GL_STEP_INSPECT,
    GL_STEP_ALIGN,
    GL_STEP_SUBTRACT,
    GL_STEP_DETECT,
    GL_STEP_LIMITS,
    GL_STEP_VET,
    GL_NSTEPS
} gl_step;

/* "inspect", "align", ...; NULL out of range. */
GL_API const char *gl_step_name(gl_step s);
/* The step of that name, or -1. */
GL_API int gl_step_from_name(const char *name);

typedef struct gl_run_params {
    /* set by the user */
    const char *folder;   /* the run folder; created when missing */
    int force[GL_NSTEPS]; /* nonzero: run the step even when it is current */
    int dry_run;          /* print each step's command line, run nothing */
} gl_run_params;

GL_API void gl_run_params_init(gl_run_params *p);

/* What happened to each step of a target's run. */
typedef enum gl_step_state {
    GL_STEP_NOT_ASKED, /* not in the plan's steps */
    GL_STEP_RAN,
    GL_STEP_CURRENT,      /* finished before with the same inputs and options: not run again */
    GL_STEP_NOT_POSSIBLE, /* asked, but the data do not allow it (no PSF, no candidate) */
    GL_STEP_FAILED,
    GL_STEP_NOT_REACHED /* after a failed step */
} gl_step_state;

typedef struct gl_run_outcome {
    gl_step_state state[GL_NSTEPS];
    double seconds[GL_NSTEPS];
    int exit_status;   /* of the failed step; 0 when none failed */
    char message[512]; /* the failed step's last message, or why a step was not possible */
} gl_run_outcome;

/* Runs the plan's steps for target into rp->folder: each step's command
 * line is composed from the plan (inputs, the step's section and the
 * target's overrides) and the products of the steps before it, is skipped
 * when the ledger says it is current, and is run in this process through
 * gl_command_exec (command.h), its result text going to its file of the
 * run folder and its messages to RUN/log.txt. Then
 * writes RUN/summary.json and RUN/report.html. Every key of the plan that
 * no step used is an error before anything runs (see gl_plan_check_used).
 * Function return value: GL_OK when every asked step ran or was current
 * (out says which); GL_ERR_INPUT naming the plan's line for a bad plan;
 * GL_ERR_IO for the folder; the failed step's status otherwise (out->message
 * holds its last message). */
GL_API gl_status gl_run_target(gl_plan *plan, const char *target, const gl_run_params *rp,
                               gl_run_outcome *out);

/* A commented example plan (static text). */
GL_API const char *gl_run_example_plan(void);

/* ---- surveys: many targets ---------------------------------------------- */

/* Combines buf (n bytes) element by element with the same buffer of every
 * other process of the survey, keeping the largest byte, so that every
 * process ends with all of them (an MPI_Allreduce with MPI_MAX on bytes).
 * Returns 0 on success. */
typedef int (*gl_survey_share_fn)(void *user, unsigned char *buf, size_t n);

typedef struct gl_survey_params {
    /* set by the user */
    const char *folder;       /* the survey folder: one run folder per target inside */
    int rank, size;           /* this process and the number of processes (0 and 1: serial) */
    gl_survey_share_fn share; /* NULL when size is 1 */
    void *share_user;
    gl_run_params run; /* how each target is run; its folder is set per target */
} gl_survey_params;

GL_API void gl_survey_params_init(gl_survey_params *p);

/* Runs every target of the plan, target i on process i mod size, each into
 * FOLDER/NAME/ (gl_run_target); a failed target does not stop the others.
 * Then process 0 writes the survey products: FOLDER/survey.csv and
 * survey.fits (one row per target: state, frames, field rotation,
 * detections, contrast at fixed separations), survey.html (linking each
 * target's report) and contrast.png (every target's curve in one figure).
 * *nfailed gets the number of failed targets (the same on every process).
 * Function return value: GL_OK when the survey ran (even with failed
 * targets); GL_ERR_INPUT/GL_ERR_USAGE for a bad plan or folder; GL_ERR_IO. */
GL_API gl_status gl_survey_run(gl_plan *plan, const gl_survey_params *sp, int *nfailed);

/* ---- the HTML report ---------------------------------------------------- */

/* A self-contained HTML page built piece by piece: every image is embedded
 * (base64 data URIs), styles are inline, nothing is fetched, so the page
 * works offline and can be mailed as one file. Text is HTML-escaped. */
typedef struct gl_report gl_report;

/* Starts a page titled title (escaped). Returns GL_ERR_NOMEM on failure. */
GL_API gl_status gl_report_new(const char *title, gl_report **out);
GL_API void gl_report_free(gl_report *r);
/* A section heading. */
GL_API gl_status gl_report_section(gl_report *r, const char *heading);
/* A paragraph of plain text. */
GL_API gl_status gl_report_text(gl_report *r, const char *text);
/* A boxed caution: an assumption or a limit the reader must not miss. */
GL_API gl_status gl_report_caution(gl_report *r, const char *text);
/* A two-column list of names and values. */
GL_API gl_status gl_report_facts(gl_report *r, const char *const *names, const char *const *values,
                                 int n);
/* The PNG file at path, embedded, with a caption. GL_ERR_IO/GL_ERR_INPUT
 * naming the file when it cannot be read or is not a PNG. */
GL_API gl_status gl_report_image(gl_report *r, const char *path, const char *caption);
/* The CSV table at path (one header line, then rows; quoted fields allowed),
 * at most max_rows rows shown (the count of the rest is said), with a
 * caption. GL_ERR_IO/GL_ERR_INPUT naming the file. */
GL_API gl_status gl_report_table(gl_report *r, const char *path, const char *caption,
                                 long max_rows);
/* A link to another page (relative href), for survey pages. */
GL_API gl_status gl_report_link(gl_report *r, const char *href, const char *text);
/* Writes the page to path (the caller chooses a temporary name; see
 * gl_outset). GL_ERR_IO naming the file. */
GL_API gl_status gl_report_write(const gl_report *r, const char *path);
/* The page so far (NUL-terminated; valid until the next call on r). */
GL_API const char *gl_report_html(gl_report *r);

#ifdef __cplusplus
}
#endif
#endif
