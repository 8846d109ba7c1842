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
