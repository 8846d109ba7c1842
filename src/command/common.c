/*
 * common.c -- option parsing helpers, error printing and the terminal
 * progress bar shared by every command.
 */
#include "command/cli.h"

#include "core/internal.h"

#include <cblas.h>
/* OpenBLAS's own: stops its pool of server threads (exported for its fork
 * handler; it starts the pool again when more threads are asked for). Weak,
 * so that a BLAS without it still links and runs. */
extern int blas_thread_shutdown_(void) __attribute__((weak));
#include <errno.h>
#include <math.h>
#include <omp.h>
#include <stdarg.h>
#include <setjmp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

int cli_fail(gl_cli *cli, gl_status st)
{
    gl_outset_error_names(st); /* name products, never their temporary names */
    cli_bar_clear(cli);
    const char *msg = gl_error_message();
    if (cli->angles_source[0] && strstr(msg, "parallactic angles") &&
        !strstr(msg, cli->angles_source))
        fprintf(cli->err, "gloam %s: %s: %s\n", cli->command, cli->angles_source, msg);
    else
        fprintf(cli->err, "gloam %s: %s\n", cli->command, msg);
    return gl_status_exit_code(st);
}

int cli_usage(const gl_cli *cli, const char *fmt, ...)
{
    char buf[1024];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(buf, sizeof buf, fmt, ap);
    va_end(ap);
    fprintf(cli->err, "gloam %s: %s (see gloam %s --help)\n", cli->command, buf, cli->command);
    return 1;
}

int cli_next_option(gl_cli *cli, int argc, char **argv, const struct option *opts,
                    const char *help_text, int *code)
{
    if (!cli->parsing) {
        cli->parsing = 1;
        opterr = 0;
        optind = 1;
    }
    int c, which = -1;
    while ((c = getopt_long(argc, argv, "", opts, &which)) != -1) {
        int exit_now = 0;
        /* a checked command line (a plan's) names options in full: getopt's
         * abbreviations would let a misspelt key pass for another option */
        if (cli->check_only && c != '?' && which >= 0) {
            /* the option's own element: before its value when that is separate */
            int at = optind - (optarg && optind >= 2 && optarg == argv[optind - 1] ? 2 : 1);
            const char *given = at >= 1 && strncmp(argv[at], "--", 2) == 0 ? argv[at] + 2 : NULL;
            size_t len = given ? strcspn(given, "=") : 0;
            if (given &&
                (len != strlen(opts[which].name) || strncmp(given, opts[which].name, len) != 0)) {
                cli_usage(cli, "unknown option '--%.*s'", (int)len, given);
                return CLI_EXIT_FAIL;
            }
        }
        which = -1;
        int r = cli_common_option(cli, c, optarg, help_text, &exit_now);
        if (r < 0)
            return CLI_EXIT_FAIL;
        if (exit_now)
            return CLI_EXIT_OK;
        if (!r) {
            *code = c;
            return 1;
        }
    }
    return 0;
}

const char *cli_positional(const gl_cli *cli, int argc, char **argv, const char *what)
{
    if (optind >= argc)
        cli_usage(cli, "%s is missing", what);
    else if (optind < argc - 1)
        cli_usage(cli, "%s is given more than once: '%s' is one too many", what, argv[optind + 1]);
    else
        return argv[optind];
    return NULL;
}

int cli_missing(const gl_cli *cli, int n, const char *const *names, const void *const *values)
{
    char list[512] = "";
    int missing = 0;
    for (int i = 0; i < n; i++)
        if (!values[i]) {
            size_t len = strlen(list);
            snprintf(list + len, sizeof list - len, "%s%s", missing ? ", " : "", names[i]);
            missing++;
        }
    if (!missing)
        return 0;
    char *last = strrchr(list, ',');
    if (last) { /* "--a, --b, --c" -> "--a, --b and --c" */
        char tail[512];
        snprintf(tail, sizeof tail, " and%s", last + 1);
        snprintf(last, sizeof list - (size_t)(last - list), "%s", tail);
    }
    return cli_usage(cli, "%s %s needed", list, missing > 1 ? "are" : "is");
}

int cli_bad_option(const gl_cli *cli, char **argv)
{
    const char *arg = argv[optind - 1];
    if (optopt != 0 && strncmp(arg, "--", 2) == 0)
        return cli_usage(cli, "option '%s' needs a value", arg);
    return cli_usage(cli, "unknown option '%s'", arg);
}

int cli_parse_long(const gl_cli *cli, const char *opt, const char *arg, long min, long max,
                   long *out)
{
    char *end;
    errno = 0;
    long v = strtol(arg, &end, 10);
    if (end == arg || *end || errno) {
        cli_usage(cli, "%s: '%s' is not a whole number", opt, arg);
        return -1;
    }
    if (v < min || v > max) {
        cli_usage(cli, "%s: %ld is outside [%ld, %ld]", opt, v, min, max);
        return -1;
    }
    *out = v;
    return 0;
}

int cli_parse_double(const gl_cli *cli, const char *opt, const char *arg, double min, double max,
                     double *out)
{
    char *end;
    errno = 0;
    double v = strtod(arg, &end);
    if (end == arg || *end || errno || !isfinite(v)) {
        cli_usage(cli, "%s: '%s' is not a number", opt, arg);
        return -1;
    }
    if (v < min || v > max) {
        cli_usage(cli, "%s: %g is outside [%g, %g]", opt, v, min, max);
        return -1;
    }
    *out = v;
    return 0;
}

int cli_parse_positive(const gl_cli *cli, const char *opt, const char *arg, double *out)
{
    double v;
    if (cli_parse_double(cli, opt, arg, -INFINITY, INFINITY, &v))
        return -1;
    if (!(v > 0)) {
        cli_usage(cli, "%s must be a positive number (got %s)", opt, arg);
        return -1;
    }
    *out = v;
    return 0;
}

int cli_common_option(gl_cli *cli, int code, const char *arg, const char *help_text, int *exit_now)
{
    long n;
    switch (code) {
    case CLI_OPT_OVERWRITE: cli->overwrite = 1; return 1;
    case CLI_OPT_QUIET: cli->quiet = 1; return 1;
    case CLI_OPT_VERBOSE: cli->verbose = 1; return 1;
    case CLI_OPT_THREADS:
        if (cli_parse_long(cli, "--threads", arg, 1, 1024, &n))
            return -1;
        cli->threads = (int)n;
        return 1;
    case CLI_OPT_ROTATION_SENSE:
        if (strcmp(arg, "counter-clockwise") == 0)
            cli->rotation_sense = 1;
        else if (strcmp(arg, "clockwise") == 0)
            cli->rotation_sense = -1;
        else {
            cli_usage(cli, "--rotation-sense: '%s' is not counter-clockwise or clockwise", arg);
            return -1;
        }
        return 1;
    case CLI_OPT_HELP:
        fputs(help_text, cli->out);
        fputs(CLI_COMMON_HELP, cli->out);
        *exit_now = 1;
        return 1;
    default: return 0;
    }
}

/* Reads a FITS cube and records it with its CRC-32 in the provenance. With
 * more than one thread the CRC-32 is computed beside the read (both take the
 * file from the page cache; the CRC was a tenth of a subtraction's serial
 * start): the same bytes, the same value, in either order. */
gl_status cli_read_input(gl_cli *cli, const char *path, int min_naxis, gl_cube **cube)
{
    gl_status st = GL_OK, crc_st = GL_OK;
    unsigned long crc = 0;
    /* the error text is kept per thread: each section carries its own back */
    char read_msg[1024] = "", crc_msg[1024] = "";
    *cube = NULL;
#pragma omp parallel sections num_threads(2) if (omp_get_max_threads() > 1)
    {
#pragma omp section
        {
            if ((st = gl_fits_read_cube(path, min_naxis, cube)))
                snprintf(read_msg, sizeof read_msg, "%s", gl_error_message());
        }
#pragma omp section
        {
            if ((crc_st = gl_file_crc32(path, &crc)))
                snprintf(crc_msg, sizeof crc_msg, "%s", gl_error_message());
        }
    }
    if (st || crc_st) {
        st = st ? gl_error_set(st, "%s", read_msg) : gl_error_set(crc_st, "%s", crc_msg);
        gl_cube_free(*cube);
        *cube = NULL;
    } else
        gl_provenance_add_input_crc(&cli->prov, path, crc);
    if (!st && min_naxis >= 3) /* a science cube, not a PSF: what was observed */
        gl_provenance_add_observation(&cli->prov, (*cube)->header);
    return st;
}

gl_status cli_read_cube_angles(gl_cli *cli, const char *cube_path, const char *angles_path,
                               gl_cube **cube, double **angles)
{
    gl_status st;
    *angles = NULL;
    if ((st = cli_read_input(cli, cube_path, 3, cube)))
        return st;
    return cli_read_angles_of(cli, cube_path, *cube, angles_path, angles);
}

gl_status cli_read_angles_of(gl_cli *cli, const char *cube_path, gl_cube *cube,
                             const char *angles_path, double **angles)
{
    long n = 0;
    gl_status st;
    gl_cube **cubep = &cube;
    *angles = NULL;
    if (angles_path) {
        if ((st = gl_angles_read(angles_path, (*cubep)->nframe, angles, &n)) ||
            (st = gl_provenance_add_input(&cli->prov, angles_path)))
            return st;
        snprintf(cli->angles_source, sizeof cli->angles_source, "%s", angles_path);
    } else {
        if ((st = gl_angles_table_read(cube_path, (*cubep)->nframe, angles, &n)))
            return st;
        if (!*angles)
            return gl_error_set(GL_ERR_USAGE,
                                "%s: no angles: the cube has no %s table (gloam align stores one "
                                "when given --angles or --angles-from-header); give --angles FILE",
                                cube_path, GL_ANGLES_EXTNAME);
        snprintf(cli->angles_source, sizeof cli->angles_source, "%s[%s]", cube_path,
                 GL_ANGLES_EXTNAME);
        gl_log(GL_LOG_INFO, "angles: %ld from the %s table of %s (no --angles given)", n,
               GL_ANGLES_EXTNAME, cube_path);
    }
    cli_check_angles(cli->angles_source, *angles, n);
    return cli_apply_rotation_sense(cli, *cubep, cli->angles_source, *angles, n);
}

gl_status cli_apply_rotation_sense(const gl_cli *cli, gl_cube *cube, const char *source,
                                   double *angles, long n)
{
    char hs[72] = "";
    int sense = cli->rotation_sense, from_header = 0;
    if (!sense && gl_header_get_str(cube->header, "GLROTSNS", hs, sizeof hs)) {
        sense = strcmp(hs, "clockwise") == 0 ? -1 : 1;
        from_header = 1;
    }
    if (!sense)
        sense = 1;
    if (sense < 0) {
        for (long i = 0; i < n; i++)
            angles[i] = -angles[i];
        gl_log(GL_LOG_INFO,
               "%s: the sky turns clockwise as these angles grow (%s): they are used with the "
               "opposite sign",
               source, from_header ? "GLROTSNS of the cube" : "--rotation-sense clockwise");
    }
    return gl_header_set_str(cube->header, "GLROTSNS",
                             sense < 0 ? "clockwise" : "counter-clockwise",
                             "sky turn on the detector as the angle grows");
}

void cli_check_angles(const char *source, const double *angles, long n)
{
    /* a list without rotation is refused where rotation is needed (subtract,
     * limits), with cli_fail naming the source; inject and RDI need none */
    if (!gl_angles_constant(angles, n) && gl_angles_look_like_radians(angles, n)) {
        double lo = angles[0], hi = angles[0];
        for (long i = 1; i < n; i++) {
            lo = angles[i] < lo ? angles[i] : lo;
            hi = angles[i] > hi ? angles[i] : hi;
        }
        gl_log(GL_LOG_WARN,
               "%s: the angles look like radians (all within +-2 pi, spread %.4g): gloam reads "
               "degrees, so this is %.4g deg of field rotation; if they are radians, multiply "
               "by 180/pi (%.4g deg)",
               source, hi - lo, hi - lo, (hi - lo) * 180 / M_PI);
    }
}

int cli_parse_fwhm(const gl_cli *cli, const char *arg, double *out)
{
    if (strcmp(arg, "auto") == 0) {
        *out = CLI_FWHM_AUTO;
        return 0;
    }
    char *end;
    errno = 0;
    double v = strtod(arg, &end);
    if (end == arg || *end || errno || !isfinite(v) || !(v >= GL_FWHM_MIN_PX) || v > 1e4) {
        cli_usage(cli, "--fwhm must be the PSF's FWHM in pixels (at least %g) or auto (got %s)",
                  GL_FWHM_MIN_PX, arg);
        return -1;
    }
    *out = v;
    return 0;
}

gl_status cli_psf_measure(gl_cli *cli, const char *psf_path, gl_psf_model **out)
{
    gl_cube *pc = NULL;
    *out = NULL;
    gl_status st = cli_read_input(cli, psf_path, 2, &pc);
    if (!st)
        st = gl_psf_model_new(pc, psf_path, pc->nx, pc->ny, 1, 1.0, out);
    gl_cube_free(pc);
    return st;
}

gl_status cli_resolve_fwhm(gl_cli *cli, double *fwhm, const char *psf_path, int psf_option,
                           const gl_header *h, const char *product_path)
{
    static const char *const keys[] = {"GLSFWHM", "GLFWHM"};
    if (*fwhm > 0) {
        gl_log(GL_LOG_DEBUG, "FWHM %.3f px (given with --fwhm)", *fwhm);
        return GL_OK;
    }
    if (psf_path) {
        gl_psf_model *m = NULL;
        gl_status st = cli_psf_measure(cli, psf_path, &m);
        if (st)
            return st;
        double v = m->fwhm_px[0];
        gl_psf_model_free(m);
        if (!(v >= GL_FWHM_MIN_PX) || !isfinite(v))
            return gl_error_set(GL_ERR_INPUT, "%s: no FWHM could be measured on the PSF", psf_path);
        *fwhm = v;
        gl_log(GL_LOG_INFO, "FWHM %.3f px, measured on %s (azimuthal profile)", v, psf_path);
        return GL_OK;
    }
    for (size_t k = 0; h && k < sizeof keys / sizeof keys[0]; k++) {
        double v;
        if (gl_header_get_dbl(h, keys[k], &v) && v >= GL_FWHM_MIN_PX && isfinite(v)) {
            *fwhm = v;
            gl_log(GL_LOG_INFO, "FWHM %.3f px, recorded in %s (%s)", v, product_path, keys[k]);
            return GL_OK;
        }
    }
    if (psf_option)
        return gl_error_set(GL_ERR_USAGE,
                            "%s: --fwhm auto: no FWHM to use: no --psf was given to measure it "
                            "on, and no earlier gloam step recorded one in this file (keyword "
                            "GLSFWHM or GLFWHM); give --fwhm PX (the PSF's FWHM in pixels) or "
                            "--psf PSF.fits (the off-axis PSF, measured)",
                            product_path);
    return gl_error_set(GL_ERR_USAGE,
                        "%s: --fwhm auto: no FWHM to use: no earlier gloam step recorded one in "
                        "this file (keyword GLSFWHM or GLFWHM); give --fwhm PX (the PSF's FWHM "
                        "in pixels; gloam inspect --psf PSF.fits measures it)",
                        product_path);
}

gl_status cli_error_in_file(const char *path, gl_status st)
{
    char msg[1024];
    snprintf(msg, sizeof msg, "%s", gl_error_message());
    if (strncmp(msg, path, strlen(path)) != 0)
        gl_error_set(st, "%s: %s", path, msg);
    return st;
}

/* 1 when an --out value names a folder: an existing one, or any name
 * ending in '/'. */
static int names_folder(const char *out)
{
    struct stat sb;
    size_t n = strlen(out);
    return n > 0 && (out[n - 1] == '/' || (stat(out, &sb) == 0 && S_ISDIR(sb.st_mode)));
}

/* The file name of path without its folder and its FITS extension
 * (".fits", ".fit", ".fts", optionally compressed ".gz"/".fz"). */
static void input_stem(const char *path, char *stem, size_t size)
{
    const char *base = strrchr(path, '/');
    base = base ? base + 1 : path;
    snprintf(stem, size, "%s", base);
    static const char *const ext[] = {".gz", ".fz", ".fits", ".fit", ".fts"};
    for (size_t k = 0; k < sizeof ext / sizeof ext[0]; k++) {
        size_t n = strlen(stem), e = strlen(ext[k]);
        if (n > e && strcmp(stem + n - e, ext[k]) == 0)
            stem[n - e] = '\0';
    }
    if (!stem[0])
        snprintf(stem, size, "gloam");
}

/* DIR + '/' (unless there) + stem of input + suffix into buf; 0 when it
 * does not fit. */
static int inside_folder(const char *dir, const char *input, const char *suffix, char *buf,
                         size_t size)
{
    char stem[1024];
    input_stem(input ? input : "", stem, sizeof stem);
    size_t n = strlen(dir);
    int k = snprintf(buf, size, "%s%s%s%s", dir, n && dir[n - 1] == '/' ? "" : "/", stem, suffix);
    return k >= 0 && (size_t)k < size;
}

const char *cli_output_name(const gl_cli *cli, const char *out, const char *input,
                            const char *suffix, char *buf, size_t size)
{
    if (!out || !names_folder(out))
        return out;
    if (!inside_folder(out, input, suffix, buf, size)) {
        cli_usage(cli, "--out %.60s...: the product name is too long", out);
        return NULL;
    }
    return buf;
}

gl_status cli_add_product(gl_cli *cli, gl_outset *outs, const char *prefix, const char *suffix,
                          char *path, size_t size, const char **tmp)
{
    int n;
    if (suffix[0] != '/' && names_folder(prefix)) /* PREFIX a folder: DIR/STEM.suffix */
        n = inside_folder(prefix, cli->prov.ninputs ? cli->prov.inputs[0] : NULL, suffix, path,
                          size)
                ? (int)strlen(path)
                : -1;
    else
        n = snprintf(path, size, "%s%s", prefix, suffix);
    if (n < 0 || (size_t)n >= size)
        return gl_error_set(GL_ERR_USAGE, "%.60s...%s: the product name is too long", prefix,
                            suffix);
    return gl_outset_add(outs, path, &cli->prov, tmp);
}

/* The length of path without its last extension ("a/b.limits.csv" ->
 * "a/b.limits"), the key that groups a product with its twins. */
static size_t product_stem(const char *path)
{
    const char *dot = strrchr(path, '.'), *slash = strrchr(path, '/');
    return dot && (!slash || dot > slash) ? (size_t)(dot - path) : strlen(path);
}

void cli_log_written(const gl_outset *outs)
{
    int n = gl_outset_count(outs);
    char line[900] = "";
    size_t len = 0;
    for (int i = 0; i < n; i++) {
        const char *p = gl_outset_written(outs, i);
        size_t stem = p ? product_stem(p) : 0;
        int seen = 0; /* grouped already with an earlier product of its stem */
        for (int j = 0; p && j < i && !seen; j++) {
            const char *q = gl_outset_written(outs, j);
            seen = q && product_stem(q) == stem && strncmp(p, q, stem) == 0;
        }
        if (!p || seen)
            continue;
        char group[1200];
        size_t g = (size_t)snprintf(group, sizeof group, "%s", p);
        int twins = 0;
        for (int j = i + 1; j < n && g < sizeof group; j++) {
            const char *q = gl_outset_written(outs, j);
            if (q && product_stem(q) == stem && strncmp(p, q, stem) == 0)
                g += (size_t)snprintf(group + g, sizeof group - g, "%s%s", twins++ ? ", " : " (",
                                      q + stem);
        }
        if (twins && g < sizeof group)
            snprintf(group + g, sizeof group - g, ")");
        if (len && len + strlen(group) + 2 >= sizeof line) { /* a long list: more lines */
            gl_log(GL_LOG_INFO, "wrote %s", line);
            len = 0;
            line[0] = '\0';
        }
        len += (size_t)snprintf(line + len, sizeof line - len, "%s%s", len ? ", " : "", group);
    }
    if (len)
        gl_log(GL_LOG_INFO, "wrote %s", line);
}

void cli_deprecated(gl_cli *cli, const char *old, const char *now)
{
    for (int i = 0; i < cli->nnoted && i < CLI_NOTED; i++)
        if (strcmp(cli->noted[i], old) == 0)
            return;
    if (cli->nnoted < CLI_NOTED)
        snprintf(cli->noted[cli->nnoted++], sizeof cli->noted[0], "%s", old);
    if (!cli->quiet)
        fprintf(cli->err,
                "gloam %s: note: %s is the old spelling of %s; it will be removed in the next "
                "release\n",
                cli->command, old, now);
}

/* ---- log and progress printers ---------------------------------------- */

void cli_work_started(gl_cli *cli)
{
    cli->hold = 0;
    cli_flush_held(cli);
}

void cli_flush_held(gl_cli *cli)
{
    if (cli->nheld)
        cli_bar_clear(cli);
    for (int i = 0; i < cli->nheld; i++)
        fprintf(cli->err, "gloam %s: %s\n", cli->command, cli->held[i]);
    cli->nheld = 0;
}

static void print_log(gl_log_level level, const char *msg, void *user)
{
    gl_cli *cli = user;
    /* a command that runs a step several times (limits: the subtraction
     * with and without fakes) says each thing once */
    for (int i = 0; i < cli->nsaid && i < CLI_SAID; i++)
        if (strncmp(cli->said[i], msg, sizeof cli->said[i] - 1) == 0)
            return;
    snprintf(cli->said[cli->nsaid++ % CLI_SAID], sizeof cli->said[0], "%s", msg);
    if (level == GL_LOG_INFO && cli->hold) {
        if (cli->nheld == CLI_HELD)
            cli_flush_held(cli);
        snprintf(cli->held[cli->nheld++], sizeof cli->held[0], "%s", msg);
        return;
    }
    cli_flush_held(cli);
    const char *tag = level == GL_LOG_ERROR ? "error: " : level == GL_LOG_WARN ? "warning: " : "";
    cli_bar_clear(cli);
    fprintf(cli->err, "gloam %s: %s%s\n", cli->command, tag, msg);
}

static double now_s(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

enum { BAR_LINE = 79 }; /* characters: one line of an 80-column terminal */

void cli_bar_clear(gl_cli *cli)
{
    if (!cli->bar.shown)
        return;
    fprintf(cli->err, "\r%*s\r", BAR_LINE, "");
    fflush(cli->err);
    cli->bar.shown = 0;
}

/* A one-line bar on the error stream, redrawn at most ten times a second;
 * only installed when that stream is a terminal, so piped runs and run
 * folders' logs stay free of it. Tasks nest (limits runs subtractions, a
 * run runs whole commands): the first task reported is the bar until it
 * finishes, and a task reported meanwhile is shown as its label, so there
 * is never more than one bar on the line. */
static void print_progress(const char *task, long done, long total, void *user)
{
    gl_cli *cli = user;
    if (!cli->bar_on)
        return;
    double t = now_s();
    int first = 0;
    if (!cli->bar.task[0]) {
        snprintf(cli->bar.task, sizeof cli->bar.task, "%s", task);
        cli->bar.start = t;
        cli->bar.inner[0] = '\0';
        first = 1;
    }
    if (strncmp(cli->bar.task, task, sizeof cli->bar.task - 1) == 0) {
        cli->bar.done = done;
        cli->bar.total = total;
        if (done >= total) { /* the outer task is over: the line is free */
            cli_bar_clear(cli);
            cli->bar.task[0] = '\0';
            cli->bar.inner[0] = '\0';
            return;
        }
    } else if (done >= total) {
        cli->bar.inner[0] = '\0';
    } else {
        snprintf(cli->bar.inner, sizeof cli->bar.inner, "%s", task);
        cli->bar.inner_done = done;
        cli->bar.inner_total = total;
    }
    if (!first && t - cli->bar.last < 0.1)
        return;
    cli->bar.last = t;
    double frac = cli->bar.total > 0 ? (double)cli->bar.done / (double)cli->bar.total : 1;
    frac = frac < 0 ? 0 : frac;
    char bar[32], line[160], inner[64] = "";
    int width = 24, fill = (int)(frac * width + 0.5);
    for (int i = 0; i < width; i++)
        bar[i] = i < fill ? '#' : '.';
    bar[width] = '\0';
    double el = t - cli->bar.start, eta = frac > 0 ? el * (1 - frac) / frac : 0;
    if (cli->bar.inner[0])
        snprintf(inner, sizeof inner, "  (%s %ld/%ld)", cli->bar.inner, cli->bar.inner_done,
                 cli->bar.inner_total);
    snprintf(line, sizeof line, "  %-12.12s [%s] %3.0f%%  %ld/%ld  %.0fs left%s", cli->bar.task,
             bar, 100 * frac, cli->bar.done, cli->bar.total, eta, inner);
    line[BAR_LINE] = '\0'; /* never wider than the line: a wrapped bar cannot be redrawn */
    fprintf(cli->err, "\r%-*s", BAR_LINE, line);
    fflush(cli->err);
    cli->bar.shown = 1;
}

void cli_start(gl_cli *cli)
{
    if (cli->check_only) /* gl_command_check: the command line was valid */
        longjmp(*(jmp_buf *)cli->check_done, 1);
    if (cli->threads > 0) {
        omp_set_num_threads(cli->threads);
    }
    /* BLAS runs single-threaded inside our own parallel loops; this also
     * keeps results independent of the thread count */
    openblas_set_num_threads(1);
    /* ... and its idle server threads, which spin for a while after the
     * library starts, are stopped: beside the read of the input and the
     * first parallel loops they cost about 4% of a subtraction
     * (bench/README.md, issue 13 fifth round) */
    if (blas_thread_shutdown_)
        blas_thread_shutdown_();
    cli->hold = !cli->verbose;
    gl_log_set_handler(print_log, cli,
                       cli->quiet ? GL_LOG_WARN : (cli->verbose ? GL_LOG_DEBUG : GL_LOG_INFO));
    /* which kernels OpenBLAS runs (src/cli/main.c sets them where it fell
     * back on a processor newer than itself) */
    gl_log(GL_LOG_DEBUG, "OpenBLAS kernels: %s%s", openblas_get_corename(),
           getenv("OPENBLAS_CORETYPE") ? " (OPENBLAS_CORETYPE)" : "");
    gl_progress_fn outer;
    void *outer_user;
    gl_progress_get_handler(&outer, &outer_user);
    if (outer) /* inside another command: its bar shows this one's progress */
        return;
    int fd = fileno(cli->err);
    cli->bar_on = !cli->quiet && fd >= 0 && isatty(fd);
    gl_progress_set_handler(print_progress, cli); /* draws only when bar_on */
}
