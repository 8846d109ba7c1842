/*
 * subtract_options.h -- the subtraction options shared by `gloam subtract`
 * and `gloam limits`.
 */
#ifndef GLOAM_CLI_SUBTRACT_OPTIONS_H
#define GLOAM_CLI_SUBTRACT_OPTIONS_H

#include "command/cli.h"

enum {
    CLI_OPT_FWHM = 1050,
    CLI_OPT_METHOD,
    CLI_OPT_MODES,
    CLI_OPT_MASK,
    CLI_OPT_OUTER,
    CLI_OPT_RING,
    CLI_OPT_SECTORS,
    CLI_OPT_GAP,
    CLI_OPT_NEAREST,
    CLI_OPT_MEDFIT,
    CLI_OPT_CENTRE,
    CLI_OPT_NORTH,
    CLI_OPT_INTERP,
    CLI_OPT_COMBINE,
    CLI_OPT_REFS,
    CLI_OPT_REFS_USE,
    CLI_OPT_REFS_BEST,
    CLI_OPT_SDI,
    CLI_OPT_WAVES,
    CLI_OPT_SDI_MODES,
    CLI_OPT_ARCS,
    CLI_OPT_KEEP_CLOSEST,
    CLI_OPT_REMOVE_MEAN,
    CLI_OPT_SPECTRAL,
    CLI_OPT_SPECTRAL_MODES,
    CLI_OPT_BASIS_FRAMES,
    CLI_OPT_MEMORY_LIMIT
};

#define CLI_SUBTRACT_OPTIONS                                                                       \
    {"fwhm", required_argument, 0, CLI_OPT_FWHM},                                                  \
        {"method", required_argument, 0, CLI_OPT_METHOD},                                          \
        {"modes", required_argument, 0, CLI_OPT_MODES},                                            \
        {"mask-radius", required_argument, 0, CLI_OPT_MASK},                                       \
        {"outer-radius", required_argument, 0, CLI_OPT_OUTER},                                     \
        {"ring", required_argument, 0, CLI_OPT_RING},                                              \
        {"arcs", required_argument, 0, CLI_OPT_ARCS},                                              \
        {"sectors", required_argument, 0, CLI_OPT_SECTORS},                                        \
        {"gap", required_argument, 0, CLI_OPT_GAP},                                                \
        {"keep-closest", required_argument, 0, CLI_OPT_KEEP_CLOSEST},                              \
        {"nearest", required_argument, 0, CLI_OPT_NEAREST},                                        \
        {"median-fit", no_argument, 0, CLI_OPT_MEDFIT},                                            \
        {"remove-mean", required_argument, 0, CLI_OPT_REMOVE_MEAN},                                \
        {"centre", required_argument, 0, CLI_OPT_CENTRE},                                          \
        {"basis-frames", required_argument, 0, CLI_OPT_BASIS_FRAMES},                              \
        {"north-offset", required_argument, 0, CLI_OPT_NORTH},                                     \
        {"interp", required_argument, 0, CLI_OPT_INTERP},                                          \
        {"combine", required_argument, 0, CLI_OPT_COMBINE},                                        \
        {"refs", required_argument, 0, CLI_OPT_REFS},                                              \
        {"refs-use", required_argument, 0, CLI_OPT_REFS_USE},                                      \
        {"refs-best", required_argument, 0, CLI_OPT_REFS_BEST},                                    \
        {"spectral-step", no_argument, 0, CLI_OPT_SPECTRAL}, {"sdi", no_argument, 0, CLI_OPT_SDI}, \
        {"wavelengths", required_argument, 0, CLI_OPT_WAVES},                                      \
        {"memory-limit", required_argument, 0, CLI_OPT_MEMORY_LIMIT},                              \
        {"spectral-modes", required_argument, 0, CLI_OPT_SPECTRAL_MODES},                          \
        {"sdi-modes", required_argument, 0, CLI_OPT_SDI_MODES}, CLI_ANGLE_OPTION

/* Help lines of those options. */
extern const char cli_subtract_help[];
/* The help line of --memory-limit as gloam subtract reads it (limits has its
 * own; vet refuses the option). */
extern const char cli_subtract_memory_help[];

typedef struct cli_subtract_setup {
    gl_subtract_params p;
    int have_fwhm;
    int have_method; /* --method given (else the default, klip-rings) */
    int have_basis;  /* --basis-frames given */
    const char *refs_path;
    const char *waves_text;
    double waves[256];
    double memory_limit; /* bytes; 0: the default (half the machine's memory) */
} cli_subtract_setup;

void cli_subtract_setup_init(cli_subtract_setup *s);
/* Handles one of CLI_SUBTRACT_OPTIONS: 1 handled, 0 not one of them, -1 bad
 * value (message printed). */
int cli_subtract_option(gl_cli *cli, int code, const char *arg, cli_subtract_setup *s);
/* Checks what needs no data (--fwhm given, --refs-* with --refs, an option
 * of one method given with another); prints and returns 1 on a problem,
 * else 0. */
int cli_subtract_check(const gl_cli *cli, const cli_subtract_setup *s);
/* With the science cube read: loads the reference cube (added to the
 * provenance), checks its size, resolves the wavelengths for --sdi, and
 * names cube_path in the subtraction's messages (params cube_name). */
gl_status cli_subtract_prepare(gl_cli *cli, cli_subtract_setup *s, const char *cube_path,
                               const gl_cube *cube, gl_cube **refs);
/* The memory limit in force (--memory-limit, else half the machine's
 * physical memory) and whether the cube in cube_path needs the streamed path
 * under it (1), fits in memory (0), or cannot be told (0: the in-memory
 * reader then reports the file's problem). */
int cli_subtract_needs_stream(const cli_subtract_setup *s, const char *cube_path, double *limit);
/* For a cube that needs more than the limit: the streamed path runs
 * klip-frame and median-frame only, so the default klip-rings (not asked
 * for) becomes klip-frame, with one warning naming cube_path and the limit.
 * Returns whether the cube must still be streamed with the method now set. */
int cli_subtract_stream_method(cli_subtract_setup *s, const char *cube_path, double limit);
/* gl_subtract_run, with messages about the data naming cube_path. */
gl_status cli_subtract_run(const cli_subtract_setup *s, const char *cube_path, const gl_cube *cube,
                           const double *angles, const gl_cube *refs, gl_subtract_result *res);

#endif
