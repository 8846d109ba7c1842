/*
 * cli.h -- what the command layer (src/command/, gl_command_exec) shares
 * between commands: the run context (provenance, common options, the
 * streams it prints to), option-value parsing with messages that name the
 * option, and the mapping from library statuses to one-line messages and
 * exit codes. Internal to the library: programs use gloam/command.h.
 */
#ifndef GLOAM_CLI_H
#define GLOAM_CLI_H

#include "gloam/gloam.h"

#include <getopt.h>
#include <stdio.h>

enum { CLI_SAID = 8, CLI_NOTED = 16, CLI_HELD = 16 };

typedef struct gl_cli {
    const char *command; /* "simulate", ... */
    int overwrite;
    int quiet;
    int verbose;
    int threads; /* 0: the OpenMP default */
    char cmdline[4096];
    char program[64];
    gl_provenance prov;
    int parsing; /* set by cli_next_option once getopt has been reset */
    /* gl_command_check: parse only; cli_start returns to the caller there,
     * through check_done, before the command touches a file */
    int check_only;
    void *check_done;   /* jmp_buf * */
    int rotation_sense; /* --rotation-sense: 0 not given, +1 counter-clockwise, -1 clockwise */
    char angles_source[1024]; /* where cli_read_cube_angles found the angles ("" before) */
    /* where the command writes: its products' text (reports, tables, --help)
     * to out, messages (log, errors, notes, the progress bar) to err; never
     * to the process's own stdout/stderr unless these are they */
    FILE *out, *err;
    /* the printers' memory, per command run (not per process) */
    char said[CLI_SAID][512]; /* the last log messages, each said once */
    int nsaid;
    /* information lines held from cli_start until the products are
     * registered (cli_work_started), a warning is said or the command ends
     * well; a command that fails before then says its one line of error
     * only (command.c drops them) */
    int hold;
    char held[CLI_HELD][512];
    int nheld;
    int bar_on;                /* the error stream is a terminal: progress is drawn */
    char noted[CLI_NOTED][64]; /* old spellings already noted (cli_deprecated) */
    int nnoted;
    /* the progress bar: one line for the outermost task (the first reported
     * and not finished), the latest task inside it as a label */
    struct {
        char task[32], inner[32];
        long done, total, inner_done, inner_total;
        double start, last;
        int shown; /* a bar is on the line now */
    } bar;
} gl_cli;

/* Option codes shared by every command (above the range of short options). */
enum {
    CLI_OPT_OVERWRITE = 1000,
    CLI_OPT_QUIET,
    CLI_OPT_VERBOSE,
    CLI_OPT_THREADS,
    CLI_OPT_HELP,
    CLI_OPT_ROTATION_SENSE,
    CLI_OPT_FIRST_COMMAND_OPTION = 1100
};

/* --rotation-sense, for every command that reads an angle list (subtract,
 * limits, inject): handled by cli_common_option, applied in one place,
 * cli_read_cube_angles. */
#define CLI_ANGLE_OPTION                                                                           \
    {                                                                                              \
        "rotation-sense", required_argument, 0, CLI_OPT_ROTATION_SENSE                             \
    }
#define CLI_ANGLE_HELP                                                                             \
    "  --rotation-sense WAY   which way the sky turns on the detector as the angle grows:\n"       \
    "                         counter-clockwise (default; or the input header's GLROTSNS)\n"       \
    "                         | clockwise (the angles are then used with the opposite sign)\n"

#define CLI_COMMON_OPTIONS                                                                         \
    {"overwrite", no_argument, 0, CLI_OPT_OVERWRITE}, {"quiet", no_argument, 0, CLI_OPT_QUIET},    \
        {"verbose", no_argument, 0, CLI_OPT_VERBOSE},                                              \
        {"threads", required_argument, 0, CLI_OPT_THREADS},                                        \
    {                                                                                              \
        "help", no_argument, 0, CLI_OPT_HELP                                                       \
    }

#define CLI_COMMON_HELP                                                                            \
    "common options:\n"                                                                            \
    "  --overwrite        replace existing products\n"                                             \
    "  --threads N        worker threads (results do not depend on N)\n"                           \
    "  --quiet            only warnings and errors on stderr\n"                                    \
    "  --verbose          debugging detail on stderr\n"                                            \
    "  --help             this text\n"

/* Steps through the command line with getopt_long, handling the common
 * options itself. Returns 1 with *code set to the next command option (optarg
 * holds its value), 0 after the last option, CLI_EXIT_FAIL when the command
 * must exit 1 (a common option's bad value, message printed) and
 * CLI_EXIT_OK when it must exit 0 (--help printed). The first call resets
 * getopt. Usage:
 *     while ((k = cli_next_option(cli, argc, argv, opts, help, &c)) > 0)
 *         switch (c) { ... }
 *     if (k < 0) return cli_exit_status(k); */
enum { CLI_EXIT_FAIL = -1, CLI_EXIT_OK = -2 };
int cli_next_option(gl_cli *cli, int argc, char **argv, const struct option *opts,
                    const char *help_text, int *code);
static inline int cli_exit_status(int k)
{
    return k == CLI_EXIT_OK ? 0 : 1;
}

/* Handles a common option; returns 1 when handled, 0 when not common,
 * -1 on a bad value (message printed). help_text is printed for --help, after
 * which the caller returns with *exit_now set. */
int cli_common_option(gl_cli *cli, int code, const char *arg, const char *help_text, int *exit_now);

/* Prints "gloam CMD: <library message>" and returns the exit code. A
 * message about the parallactic angles that does not name a file gets the
 * angles' source (cli->angles_source) in front. */
int cli_fail(gl_cli *cli, gl_status st);
/* Prints "gloam CMD: <message>" plus a hint to --help; returns 1. */
int cli_usage(const gl_cli *cli, const char *fmt, ...) __attribute__((format(printf, 2, 3)));

/* The one positional argument left after getopt_long (`what` names it in
 * messages: "the input cube"); NULL after printing a usage message when it
 * is missing or followed by another. */
const char *cli_positional(const gl_cli *cli, int argc, char **argv, const char *what);

/* Checks required options: names[i] is missing when values[i] is NULL.
 * Prints "--a, --b are needed" naming only the missing ones and returns 1;
 * returns 0 when all are there. */
int cli_missing(const gl_cli *cli, int n, const char *const *names, const void *const *values);

/* Reports the option getopt_long rejected ('?'): unknown, or missing its
 * value. Returns 1. Call with the argv given to getopt_long. */
int cli_bad_option(const gl_cli *cli, char **argv);

/* Parse option values; on failure print a message naming the option and
 * return -1. */
int cli_parse_long(const gl_cli *cli, const char *opt, const char *arg, long min, long max,
                   long *out);
int cli_parse_double(const gl_cli *cli, const char *opt, const char *arg, double min, double max,
                     double *out);
/* A finite number > 0 (a scale factor such as --psf-scale); message and -1
 * otherwise. */
int cli_parse_positive(const gl_cli *cli, const char *opt, const char *arg, double *out);

/* Reads an input FITS image or cube (at least min_naxis axes) and records it
 * in the provenance. On failure *cube is NULL and the library's message
 * names the file. */
gl_status cli_read_input(gl_cli *cli, const char *path, int min_naxis, gl_cube **cube);

/* Reads the science cube (3-D or 4-D) and its angle list (one angle per
 * frame), recording both in the provenance. angles_path NULL (no --angles):
 * the cube's own angle table (the ANGLES extension gloam align and inject
 * write), an error naming the cube when it has none. The source is logged
 * and kept in cli->angles_source; angles that look like radians get a
 * warning naming it (gl_angles_look_like_radians). On failure the message
 * names the file at fault; the caller frees whatever is not NULL.
 * The rotation sense (--rotation-sense, else the cube header's GLROTSNS,
 * else counter-clockwise) is applied here and only here: with clockwise the
 * angles are negated, so that everything downstream (subtraction,
 * derotation, fake companions) keeps the convention of docs/conventions.md;
 * the sense is recorded as GLROTSNS in the cube's header, which products
 * copy. */
gl_status cli_read_cube_angles(gl_cli *cli, const char *cube_path, const char *angles_path,
                               gl_cube **cube, double **angles);
/* The angles part of cli_read_cube_angles for a cube already in hand (or a
 * stand-in holding only the file's header and frame count: the streamed
 * subtraction). */
gl_status cli_read_angles_of(gl_cli *cli, const char *cube_path, gl_cube *cube,
                             const char *angles_path, double **angles);

/* The rotation-sense step of cli_read_cube_angles, for a cube and angle list
 * read another way; source names the angles in the log. */
gl_status cli_apply_rotation_sense(const gl_cli *cli, gl_cube *cube, const char *source,
                                   double *angles, long n);

/* Warns (naming source) about an angle list that looks like radians; used
 * wherever angles are read. */
void cli_check_angles(const char *source, const double *angles, long n);

/* --fwhm: a width in pixels, or "auto" (CLI_FWHM_AUTO), resolved by
 * cli_resolve_fwhm once the inputs are read. */
#define CLI_FWHM_AUTO (-1.0)
/* Parses a --fwhm value: "auto" gives CLI_FWHM_AUTO, else a number in
 * [GL_FWHM_MIN_PX, 1e4]. Prints a message and returns -1 on a bad value. */
int cli_parse_fwhm(const gl_cli *cli, const char *arg, double *out);
/* Settles the FWHM (pixels) a command uses, and logs the value and where it
 * came from. *fwhm > 0: given with --fwhm, kept. CLI_FWHM_AUTO or 0 (not
 * given): measured on psf_path when given (the PSF's azimuthal profile, the
 * code behind inspect --psf), else read from the header h of product_path
 * where a previous step recorded it (GLSFWHM from subtract, GLFWHM).
 * psf_option: 1 when the command has a --psf option (the message then
 * offers it).
 * Errors: GL_ERR_USAGE when neither is there (naming the file, saying that
 * no earlier step recorded one and what to give instead), the PSF's
 * reading errors. */
gl_status cli_resolve_fwhm(gl_cli *cli, double *fwhm, const char *psf_path, int psf_option,
                           const gl_header *h, const char *product_path);
/* The off-axis PSF measured on its own grid (one channel, scale 1): FWHM,
 * centre, flux; recorded in the provenance. Shared by inspect and
 * cli_resolve_fwhm. */
gl_status cli_psf_measure(gl_cli *cli, const char *psf_path, gl_psf_model **out);

/* Re-records the library's last message as "PATH: message" (unless it
 * already starts with path) so that it names the file; returns st. */
gl_status cli_error_in_file(const char *path, gl_status st);

/* The one --out rule (docs/conventions.md, "Where products go"):
 *  - file commands (align, subtract, inject) take a file name; PREFIX
 *    commands (detect, limits) take a prefix to which each product's suffix
 *    is appended; simulate takes a folder (created if missing);
 *  - --out naming a folder (an existing one, or a name ending in '/') puts
 *    the products inside it, named after the input file without its FITS
 *    extension: `align raw/night.fits --out red/` writes
 *    red/night.aligned.fits, `detect night.subtracted.fits --out red/`
 *    writes red/night.subtracted.snr.fits, ...;
 *  - a folder that does not exist is an error naming it (gl_outset_add).
 * cli_output_name applies it to a file command's --out: out itself, or
 * DIR/STEM SUFFIX in buf (SUFFIX e.g. ".aligned.fits"); NULL after a usage
 * message when the name does not fit. */
const char *cli_output_name(const gl_cli *cli, const char *out, const char *input,
                            const char *suffix, char *buf, size_t size);

/* Logs every product of a committed set, a product and its twins of the
 * same name on one line ("wrote l.limits.csv (.ecsv, .fits, .png), ...");
 * what was not written (a CSV without its twin) is not listed. */
void cli_log_written(const gl_outset *outs);

/* Registers the product PREFIX SUFFIX (an --out prefix, or "DIR" and
 * "/NAME") in outs: the name is written into path[size] (refused with
 * GL_ERR_USAGE when it does not fit) and *tmp gets the temporary name to
 * write to. A PREFIX that names a folder gives DIR/STEM SUFFIX, STEM from
 * the first input of the provenance (cli_output_name's rule). */
gl_status cli_add_product(gl_cli *cli, gl_outset *outs, const char *prefix, const char *suffix,
                          char *path, size_t size, const char **tmp);

/* Notes on the error stream, once per command run and spelling, that an old option spelling
 * or value (`old`, e.g. "--upsample" or "--method gaussian") still works for
 * this release but is replaced by `now` (e.g. "--precision"); quiet with
 * --quiet. Every renamed option goes through this one note, so the
 * transition table in docs/names.md and the messages agree. */
void cli_deprecated(gl_cli *cli, const char *old, const char *now);

/* Removes the progress bar from the terminal line (if one is drawn), so
 * that a message starts on a clean line; the next report draws it again. */
void cli_bar_clear(gl_cli *cli);
/* Says the information lines held since cli_start (cli.h, hold). */
void cli_flush_held(gl_cli *cli);
/* The inputs are read and every product is registered (nothing can be
 * refused as bad input any more): what was held is said, and from now on
 * every line at once. */
void cli_work_started(gl_cli *cli);

/* Applies --threads and installs the log and progress printers. The bar
 * is drawn only on a terminal and not with --quiet; a command run inside
 * another (a run's steps) leaves the enclosing command's bar in place, so
 * its progress shows there as the inner label, never as a second bar. */
void cli_start(gl_cli *cli);

/* Every command (one file each: cmd_NAME.c). */
int cmd_align(gl_cli *cli, int argc, char **argv);
int cmd_inject(gl_cli *cli, int argc, char **argv);
int cmd_inspect(gl_cli *cli, int argc, char **argv);
int cmd_simulate(gl_cli *cli, int argc, char **argv);
int cmd_subtract(gl_cli *cli, int argc, char **argv);
int cmd_detect(gl_cli *cli, int argc, char **argv);
int cmd_limits(gl_cli *cli, int argc, char **argv);
int cmd_vet(gl_cli *cli, int argc, char **argv);
int cmd_run(gl_cli *cli, int argc, char **argv);
int cmd_survey(gl_cli *cli, int argc, char **argv);

/* --force STEP of run and survey: sets force[step] (every step for "all");
 * prints a message and returns -1 for an unknown step. */
int cli_parse_force(const gl_cli *cli, const char *arg, int force[GL_NSTEPS]);

/* The processes `gloam survey` spreads its targets over, as the program
 * installed them (gl_command_set_processes); NULL: none. */
const gl_command_processes *cli_processes(void);

#endif
