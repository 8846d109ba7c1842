/*
 * run.c -- a whole reduction of one target from a plan: the command line of
 * each step is composed from the plan (the target's inputs, the step's
 * section, the target's overrides) and from the products of the steps
 * before it, under fixed names in the run folder; every option (name and
 * value) is checked by the command's own parser before anything runs
 * (check.c); a step that the ledger finds current is not run again; then
 * the summary and the report are written from what the folder holds.
 *
 * Each step is its gloam command run in this process through the command
 * layer (gl_command_exec, command.h) with the step's files of the run
 * folder as its streams, so that a run writes exactly the products, with
 * exactly the code, of the single commands.
 */
#include "run/internal.h"

#include "core/internal.h"
#include "gloam/command.h"
#include "gloam/inject.h"
#include "gloam/io.h"

#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <dirent.h>
#include <libgen.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

static const char *const step_names[GL_NSTEPS] = {"inspect", "align",  "subtract",
                                                  "detect",  "limits", "vet"};

const char *gl_step_name(gl_step s)
{
    return (int)s >= 0 && s < GL_NSTEPS ? step_names[s] : NULL;
}

int gl_step_from_name(const char *name)
{
    for (int i = 0; i < GL_NSTEPS; i++)
        if (strcmp(name, step_names[i]) == 0)
            return i;
    return -1;
}

void gl_run_params_init(gl_run_params *p)
{
    memset(p, 0, sizeof *p);
}

gl_status run_files_init(run_files *f, const char *folder)
{
    memset(f, 0, sizeof *f);
    if (strlen(folder) >= sizeof f->folder - 64)
        return gl_error_set(GL_ERR_USAGE, "%s: the run folder's name is too long", folder);
    snprintf(f->folder, sizeof f->folder, "%s", folder);
#define NAME(field, suffix) snprintf(f->field, sizeof f->field, "%s/%s", folder, suffix)
    NAME(log, "log.txt");
    NAME(ledger, "ledger.json");
    NAME(summary, "summary.json");
    NAME(report, "report.html");
    NAME(inspect_json, "inspect.json");
    NAME(aligned, "aligned.fits");
    NAME(starpos, "star-positions.csv");
    NAME(angles, "angles.txt");
    NAME(result, "result.fits");
    NAME(detect, "detect");
    NAME(candidates_csv, "detect.candidates.csv");
    NAME(snr_fits, "detect.snr.fits");
    NAME(snr_png, "detect.snr.png");
    NAME(limits, "limits");
    NAME(limits_csv, "limits.limits.csv");
    NAME(limits_png, "limits.limits.png");
    NAME(vet, "vet");
    NAME(vet_csv, "vet.vet.csv");
    NAME(residual_png, "result.png");
    NAME(starpos_png, "star-positions.png");
    NAME(rejected_csv, "rejected-frames.csv");
#undef NAME
    return GL_OK;
}

/* ---- composing the command lines ---------------------------------------- */

/* Strings of the composed command lines live in one arena per target. */
typedef struct arena {
    char buf[1 << 17];
    size_t used;
} arena;

static const char *keep(arena *a, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
static const char *keep(arena *a, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    int n = vsnprintf(a->buf + a->used, sizeof a->buf - a->used, fmt, ap);
    va_end(ap);
    if (n < 0 || (size_t)n >= sizeof a->buf - a->used)
        return NULL;
    const char *s = a->buf + a->used;
    a->used += (size_t)n + 1;
    return s;
}

static gl_status add_arg(run_cmd *c, const char *s)
{
    if (!s)
        return gl_error_set(GL_ERR_USAGE, "the plan makes a command line too long");
    if (c->argc >= RUN_MAX_ARGS)
        return gl_error_set(GL_ERR_USAGE, "the plan gives a step more than %d arguments",
                            RUN_MAX_ARGS);
    c->argv[c->argc++] = (char *)s;
    c->argv[c->argc] = NULL;
    return GL_OK;
}

static void add_file(const char **list, int *n, const char *path)
{
    if (path && *n < RUN_MAX_FILES)
        list[(*n)++] = path;
}

static int is_yes(const char *v)
{
    return !strcmp(v, "yes") || !strcmp(v, "true") || !strcmp(v, "on");
}

static int is_no(const char *v)
{
    return !strcmp(v, "no") || !strcmp(v, "false") || !strcmp(v, "off");
}

/* Appends the options of the plan's [section] for target: "key = value"
 * becomes --key value; "key = yes" a flag alone, "key = no" nothing. */
static gl_status add_section(gl_plan *plan, const char *target, const char *section, arena *a,
                             run_cmd *c)
{
    gl_plan_item it[64];
    int n = gl_plan_items(plan, target, section, it, 64);
    if (n < 0)
        return GL_ERR_USAGE;
    gl_status st = GL_OK;
    for (int i = 0; i < n && !st; i++) {
        if (is_no(it[i].value))
            continue;
        st = add_arg(c, keep(a, "--%s", it[i].key));
        if (!st && !is_yes(it[i].value))
            st = add_arg(c, keep(a, "%s", it[i].value));
    }
    return st;
}

/* Figures of a run are titled with the plan's target name, unless the
 * step's section gives a title of its own. */
static gl_status add_title(gl_plan *plan, const char *target, const char *section, arena *a,
                           run_cmd *c)
{
    if (gl_plan_value(plan, target, section, "title", NULL))
        return GL_OK;
    gl_status st = add_arg(c, keep(a, "--title"));
    return st ? st : add_arg(c, keep(a, "%s", target));
}

/* The inputs of a target: resolved paths (relative to the plan), or NULL. */
typedef struct target_inputs {
    const char *cube, *angles, *psf, *refs, *psf_scale, *pixscale;
    double wcs_pixscale; /* mas per pixel from the cube's WCS, NaN without */
    int angles_from_header;
    char fwhm[64];
} target_inputs;

static gl_status input_path(gl_plan *plan, const char *target, const char *key, arena *a, int check,
                            const char **out)
{
    int line;
    const char *v = gl_plan_value(plan, target, "inputs", key, &line);
    *out = NULL;
    if (!v)
        return GL_OK;
    char path[4096];
    gl_status st = gl_plan_path(plan, v, path, sizeof path);
    if (st)
        return st;
    if (check && access(path, R_OK) != 0)
        return gl_error_set(GL_ERR_INPUT, "%s:%d: %s = %s: cannot read %s: %s", gl_plan_name(plan),
                            line, key, v, path, strerror(errno));
    *out = keep(a, "%s", path);
    return *out ? GL_OK : gl_error_set(GL_ERR_USAGE, "the plan's paths are too long");
}

/* The FWHM every step is given: the plan's number, else measured on the
 * off-axis PSF (the radial-profile FWHM of gl_psf_model_new, as `gloam
 * inspect --psf` reports it). */
static gl_status resolve_fwhm(gl_plan *plan, const char *target, int check, target_inputs *in)
{
    int line;
    const char *v = gl_plan_value(plan, target, "inputs", "fwhm", &line);
    if (v && strcmp(v, "auto") != 0) {
        char *end;
        double f = strtod(v, &end);
        if (*end || !(f >= GL_FWHM_MIN_PX) || !isfinite(f))
            return gl_error_set(GL_ERR_INPUT, "%s:%d: fwhm = %s: give pixels (>= %.1f) or auto",
                                gl_plan_name(plan), line, v, GL_FWHM_MIN_PX);
        snprintf(in->fwhm, sizeof in->fwhm, "%s", v);
        return GL_OK;
    }
    if (!check) {
        snprintf(in->fwhm, sizeof in->fwhm, "auto");
        return GL_OK;
    }
    if (!in->psf)
        return gl_error_set(GL_ERR_INPUT,
                            "%s: target %s: give [inputs] fwhm (pixels) or a psf to measure it on",
                            gl_plan_name(plan), target);
    gl_cube *pc = NULL;
    gl_psf_model *m = NULL;
    gl_status st = gl_fits_read_cube(in->psf, 2, &pc);
    if (!st)
        st = gl_psf_model_new(pc, in->psf, pc->nx, pc->ny, 1, 1.0, &m);
    if (!st)
        snprintf(in->fwhm, sizeof in->fwhm, "%.4f", m->fwhm_px[0]);
    gl_psf_model_free(m);
    gl_cube_free(pc);
    return st;
}

static gl_status read_inputs(gl_plan *plan, const char *target, arena *a, int check,
                             target_inputs *in)
{
    memset(in, 0, sizeof *in);
    gl_status st;
    if ((st = input_path(plan, target, "cube", a, check, &in->cube)) ||
        (st = input_path(plan, target, "psf", a, check, &in->psf)) ||
        (st = input_path(plan, target, "refs", a, check, &in->refs)))
        return st;
    if (!in->cube)
        return gl_error_set(GL_ERR_INPUT, "%s: target %s has no cube (give [inputs] cube = FILE)",
                            gl_plan_name(plan), target);
    const char *ang = gl_plan_value(plan, target, "inputs", "angles", NULL);
    if (ang && strcmp(ang, "header") == 0)
        in->angles_from_header = 1;
    else if ((st = input_path(plan, target, "angles", a, check, &in->angles)))
        return st;
    in->psf_scale = gl_plan_value(plan, target, "inputs", "psf-scale", NULL);
    in->pixscale = gl_plan_value(plan, target, "inputs", "pixscale", NULL);
    in->wcs_pixscale = NAN;
    if (check && !in->pixscale) { /* the scale of the cube's WCS, for the summary */
        gl_header *h = NULL;
        if (gl_fits_read_header(in->cube, &h) == GL_OK) {
            gl_obsinfo info;
            gl_obsinfo_from_header(h, &info);
            in->wcs_pixscale = info.pixscale_mas;
        }
        gl_header_free(h);
        gl_error_clear();
    }
    return resolve_fwhm(plan, target, check, in);
}

/* Which steps the plan asks for: [steps] run = a, b, ... (commas or
 * blanks); by default every step the inputs allow. */
static gl_status asked_steps(gl_plan *plan, const char *target, const target_inputs *in,
                             int asked[GL_NSTEPS])
{
    int line;
    const char *v = gl_plan_value(plan, target, "steps", "run", &line);
    for (int s = 0; s < GL_NSTEPS; s++)
        asked[s] = !v && (in->psf || (s != GL_STEP_LIMITS && s != GL_STEP_VET));
    if (!v)
        return GL_OK;
    char buf[512];
    snprintf(buf, sizeof buf, "%s", v);
    char *save = NULL;
    for (char *w = strtok_r(buf, ", \t", &save); w; w = strtok_r(NULL, ", \t", &save)) {
        int s = gl_step_from_name(w);
        if (s < 0)
            return gl_error_set(GL_ERR_INPUT,
                                "%s:%d: unknown step '%s' (steps: inspect, align, subtract, "
                                "detect, limits, vet)",
                                gl_plan_name(plan), line, w);
        asked[s] = 1;
    }
    return GL_OK;
}

/* Composes every step's command line for target into cmds; with check 0
 * only the plan is read (no file is opened), to mark the keys a target uses. */
static gl_status compose(gl_plan *plan, const char *target, run_files *f, arena *a, int check,
                         run_cmd cmds[GL_NSTEPS])
{
    target_inputs in;
    int asked[GL_NSTEPS];
    gl_status st;
    memset(cmds, 0, sizeof(run_cmd) * GL_NSTEPS);
    if ((st = read_inputs(plan, target, a, check, &in)) ||
        (st = asked_steps(plan, target, &in, asked)))
        return st;
    f->fwhm = strtod(in.fwhm, NULL);
    f->pixscale =
        in.pixscale ? strtod(in.pixscale, NULL) : (isfinite(in.wcs_pixscale) ? in.wcs_pixscale : 0);
    const char *cube = in.cube, *angles = in.angles;

#define ARG(...)                                                                                   \
    do {                                                                                           \
        if ((st = add_arg(c, keep(a, __VA_ARGS__))))                                               \
            return st;                                                                             \
    } while (0)

    run_cmd *c = &cmds[GL_STEP_INSPECT];
    c->asked = asked[GL_STEP_INSPECT];
    ARG("gloam");
    ARG("inspect");
    ARG("%s", cube);
    if (angles) {
        ARG("--angles");
        ARG("%s", angles);
    }
    if (in.psf) {
        ARG("--psf");
        ARG("%s", in.psf);
    } else {
        ARG("--fwhm");
        ARG("%s", in.fwhm);
    }
    ARG("--json");
    if ((st = add_section(plan, target, "inspect", a, c)))
        return st;
    add_file(c->inputs, &c->ninputs, cube);
    add_file(c->inputs, &c->ninputs, angles);
    add_file(c->inputs, &c->ninputs, in.psf);
    add_file(c->products, &c->nproducts, f->inspect_json);
    c->stdout_path = f->inspect_json;

    c = &cmds[GL_STEP_ALIGN];
    c->asked = asked[GL_STEP_ALIGN];
    ARG("gloam");
    ARG("align");
    ARG("%s", cube);
    ARG("--out");
    ARG("%s", f->aligned);
    ARG("--table");
    ARG("%s", f->starpos);
    if (angles || in.angles_from_header) {
        if (angles) {
            ARG("--angles");
            ARG("%s", angles);
        } else {
            ARG("--angles-from-header");
        }
        ARG("--angles-out");
        ARG("%s", f->angles);
    }
    if ((st = add_section(plan, target, "align", a, c)))
        return st;
    add_file(c->inputs, &c->ninputs, cube);
    add_file(c->inputs, &c->ninputs, angles);
    add_file(c->products, &c->nproducts, f->aligned);
    add_file(c->products, &c->nproducts, f->starpos);
    if (angles || in.angles_from_header)
        add_file(c->products, &c->nproducts, f->angles);
    if (c->asked) { /* later steps work on the aligned cube and its angles */
        cube = f->aligned;
        if (angles || in.angles_from_header)
            angles = f->angles;
    }
    if (!angles)
        for (int s = GL_STEP_SUBTRACT; s < GL_NSTEPS; s++)
            if (asked[s] && s != GL_STEP_DETECT)
                return gl_error_set(GL_ERR_INPUT,
                                    "%s: target %s: %s needs parallactic angles (give [inputs] "
                                    "angles = FILE, or angles = header with align)",
                                    gl_plan_name(plan), target, step_names[s]);

    c = &cmds[GL_STEP_SUBTRACT];
    c->asked = asked[GL_STEP_SUBTRACT];
    ARG("gloam");
    ARG("subtract");
    ARG("%s", cube);
    ARG("--angles");
    ARG("%s", angles ? angles : "");
    ARG("--fwhm");
    ARG("%s", in.fwhm);
    ARG("--out");
    ARG("%s", f->result);
    if (in.refs) {
        ARG("--refs");
        ARG("%s", in.refs);
    }
    if ((st = add_section(plan, target, "subtract", a, c)))
        return st;
    add_file(c->inputs, &c->ninputs, cube);
    add_file(c->inputs, &c->ninputs, angles);
    add_file(c->inputs, &c->ninputs, in.refs);
    add_file(c->products, &c->nproducts, f->result);

    c = &cmds[GL_STEP_DETECT];
    c->asked = asked[GL_STEP_DETECT];
    ARG("gloam");
    ARG("detect");
    ARG("%s", f->result);
    ARG("--fwhm");
    ARG("%s", in.fwhm);
    ARG("--out");
    ARG("%s", f->detect);
    if (in.pixscale) {
        ARG("--pixscale");
        ARG("%s", in.pixscale);
    }
    if ((st = add_section(plan, target, "detect", a, c)) ||
        (st = add_title(plan, target, "detect", a, c)))
        return st;
    add_file(c->inputs, &c->ninputs, f->result);
    add_file(c->products, &c->nproducts, f->snr_fits);
    add_file(c->products, &c->nproducts, f->candidates_csv);

    /* limits and vet run exactly the subtraction of the subtract step */
    for (int s = GL_STEP_LIMITS; s <= GL_STEP_VET; s++) {
        c = &cmds[s];
        c->asked = asked[s];
        if (!in.psf) {
            snprintf(c->why_not, sizeof c->why_not, "no off-axis PSF in the plan ([inputs] psf)");
            continue;
        }
        ARG("gloam");
        ARG("%s", step_names[s]);
        ARG("%s", cube);
        ARG("--angles");
        ARG("%s", angles ? angles : "");
        ARG("--psf");
        ARG("%s", in.psf);
        ARG("--fwhm");
        ARG("%s", in.fwhm);
        ARG("--out");
        ARG("%s", s == GL_STEP_LIMITS ? f->limits : f->vet);
        if (asked[GL_STEP_DETECT]) {
            ARG("--candidates");
            ARG("%s", f->candidates_csv);
        } else if (s == GL_STEP_VET) {
            snprintf(c->why_not, sizeof c->why_not, "vet needs the detect step's candidates");
        }
        if (in.psf_scale) {
            ARG("--psf-scale");
            ARG("%s", in.psf_scale);
        }
        if (in.refs) {
            ARG("--refs");
            ARG("%s", in.refs);
        }
        if (in.pixscale && s == GL_STEP_LIMITS) {
            ARG("--pixscale");
            ARG("%s", in.pixscale);
        }
        /* the vetting's astrometric errors include the star-centring error
         * of the align step (its star table) */
        if (s == GL_STEP_VET && asked[GL_STEP_ALIGN]) {
            ARG("--star-table");
            ARG("%s", f->starpos);
        }
        if ((st = add_section(plan, target, "subtract", a, c)) ||
            (st = add_section(plan, target, step_names[s], a, c)) ||
            (st = add_title(plan, target, step_names[s], a, c)))
            return st;
        add_file(c->inputs, &c->ninputs, cube);
        add_file(c->inputs, &c->ninputs, angles);
        add_file(c->inputs, &c->ninputs, in.psf);
        add_file(c->inputs, &c->ninputs, in.refs);
        if (asked[GL_STEP_DETECT])
            add_file(c->inputs, &c->ninputs, f->candidates_csv);
        if (s == GL_STEP_VET && asked[GL_STEP_ALIGN])
            add_file(c->inputs, &c->ninputs, f->starpos);
        add_file(c->products, &c->nproducts, s == GL_STEP_LIMITS ? f->limits_csv : f->vet_csv);
    }
#undef ARG
    return GL_OK;
}

/* ---- running ----------------------------------------------------------------- */

static double now_s(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

/* Creates the run folder (its parent must exist, as for every product). */
static gl_status make_folder(const char *path)
{
    if (mkdir(path, 0777) == 0 || errno == EEXIST)
        return GL_OK;
    int err = errno;
    if (err == ENOENT || err == ENOTDIR) { /* the --out rule: a missing folder, or a file */
        char *copy = gl_strdup(path);
        if (!copy)
            return gl_error_nomem("run folder");
        gl_status st = gl_outset_folder_check(path, dirname(copy));
        gl_free(copy);
        if (st)
            return st;
    }
    return gl_error_set(GL_ERR_IO, "%s: cannot create the run folder: %s", path, strerror(err));
}

/* A folder is a run folder when it has a ledger, or is empty. */
static gl_status check_folder(const run_files *f)
{
    struct stat sb;
    if (stat(f->folder, &sb) != 0)
        return GL_OK;
    if (!S_ISDIR(sb.st_mode))
        return gl_error_set(GL_ERR_USAGE, "%s: exists and is not a folder", f->folder);
    if (access(f->ledger, F_OK) == 0)
        return GL_OK;
    DIR *d = opendir(f->folder);
    if (!d)
        return gl_error_set(GL_ERR_IO, "%s: cannot read the folder: %s", f->folder,
                            strerror(errno));
    int empty = 1;
    for (struct dirent *e; (e = readdir(d));)
        if (strcmp(e->d_name, ".") != 0 && strcmp(e->d_name, "..") != 0)
            empty = 0;
    closedir(d);
    if (!empty)
        return gl_error_set(GL_ERR_USAGE,
                            "%s: the folder exists and is not a gloam run folder (no ledger.json); "
                            "choose another folder",
                            f->folder);
    return GL_OK;
}

static void append_log(const char *path, const char *fmt, ...)
    __attribute__((format(printf, 2, 3)));
static void append_log(const char *path, const char *fmt, ...)
{
    FILE *f = fopen(path, "a");
    if (!f)
        return;
    va_list ap;
    va_start(ap, fmt);
    vfprintf(f, fmt, ap);
    va_end(ap);
    fclose(f);
}

/* The last non-empty line of the log (the failed command's message). */
static void last_line(const char *path, char *out, size_t size)
{
    out[0] = '\0';
    FILE *f = fopen(path, "rb");
    if (!f)
        return;
    char line[1024];
    while (fgets(line, sizeof line, f)) {
        size_t n = strlen(line);
        while (n && (line[n - 1] == '\n' || line[n - 1] == '\r'))
            line[--n] = '\0';
        if (n && strncmp(line, "== ", 3) != 0)
            snprintf(out, size, "%s", line);
    }
    fclose(f);
}

/* The warnings a step wrote to the log from byte `from` on, passed on to
 * the terminal as the run's own (the log keeps them all): at most
 * RUN_WARN_SHOWN, then how many more the log holds. */
#define RUN_WARN_SHOWN 8
static void pass_warnings(const char *path, long from, const char *target, const char *step)
{
    FILE *f = fopen(path, "rb");
    if (!f)
        return;
    if (from > 0 && fseek(f, from, SEEK_SET) != 0) {
        fclose(f);
        return;
    }
    char line[2048];
    long n = 0;
    while (fgets(line, sizeof line, f)) {
        const char *w = strstr(line, ": warning: ");
        if (!w)
            continue;
        size_t len = strlen(line);
        while (len && (line[len - 1] == '\n' || line[len - 1] == '\r'))
            line[--len] = '\0';
        if (n++ < RUN_WARN_SHOWN)
            gl_log(GL_LOG_WARN, "%s: %s: %s", target, step, w + strlen(": warning: "));
    }
    fclose(f);
    if (n > RUN_WARN_SHOWN)
        gl_log(GL_LOG_WARN, "%s: %s: %ld more warnings in %s", target, step, n - RUN_WARN_SHOWN,
               path);
}

void run_join_args(const run_cmd *c, char *out, size_t size)
{
    size_t pos = 0;
    out[0] = '\0';
    for (int i = 0; i < c->argc && pos < size; i++)
        pos += (size_t)snprintf(out + pos, size - pos, "%s%s", i ? " " : "", c->argv[i]);
}

/* Rows of the CSV table at path (-1 when it cannot be read). */
static long table_rows(const char *path)
{
    gl_csv *t = NULL;
    if (gl_csv_read(path, &t) != GL_OK) {
        gl_error_clear();
        return -1;
    }
    long n = t->nrows;
    gl_csv_free(t);
    return n;
}

/* Runs one step's command in this process: its result text to stdout_path
 * (NULL: to the log) through an output set, so that the file appears, whole,
 * only when the command succeeds; its messages to log_path. Returns the exit
 * status, 2 when a file cannot be opened. */
static int exec_step(int argc, char **argv, const char *stdout_path, const char *log_path)
{
    gl_outset *os = NULL;
    const char *tmp = NULL;
    FILE *log = fopen(log_path, "a"), *out = NULL;
    int rc = 2;
    if (!log) {
        gl_error_set(GL_ERR_IO, "%s: cannot be written: %s", log_path, strerror(errno));
        goto cleanup;
    }
    if (!stdout_path) {
        out = log;
    } else if (gl_outset_new(1, &os) || gl_outset_add(os, stdout_path, NULL, &tmp)) {
        goto cleanup;
    } else if (!(out = fopen(tmp, "w"))) {
        gl_error_set(GL_ERR_IO, "%s: cannot be written: %s", stdout_path, strerror(errno));
        goto cleanup;
    }
    rc = gl_command_exec(argc, argv, out, log);
    if (out != log) {
        int bad = fclose(out) != 0;
        out = NULL;
        if (rc == 0 && (bad || gl_outset_commit(os))) {
            gl_error_set(GL_ERR_IO, "%s: cannot be written", stdout_path);
            rc = 2;
        }
    }
cleanup:
    if (out && out != log)
        fclose(out);
    if (log)
        fclose(log);
    gl_outset_free(os); /* deletes the temporary file of a failed step */
    return rc;
}

static gl_status run_step(gl_step s, run_cmd *c, const gl_run_params *rp, const run_files *f,
                          gl_ledger *led, const char *target, gl_run_outcome *out)
{
    static char options[1 << 15];
    run_join_args(c, options, sizeof options);
    if (s == GL_STEP_VET && !c->why_not[0] && table_rows(f->candidates_csv) == 0)
        snprintf(c->why_not, sizeof c->why_not, "detect found no candidate to vet");
    if (c->why_not[0]) {
        out->state[s] = GL_STEP_NOT_POSSIBLE;
        gl_log(GL_LOG_INFO, "%s: %s: not possible: %s", target, step_names[s], c->why_not);
        return GL_OK;
    }
    if (!rp->force[s] && gl_ledger_is_current(led, step_names[s], options, c->inputs, c->ninputs)) {
        out->state[s] = GL_STEP_CURRENT;
        gl_log(GL_LOG_INFO, "%s: %s: unchanged since the last run, not run again", target,
               step_names[s]);
        return GL_OK;
    }
    /* the products in a run folder are the run's own: a rerun replaces them.
     * The command gets a copy of its argument list, which getopt permutes. */
    char *args[RUN_MAX_ARGS + 2];
    memcpy(args, c->argv, sizeof(char *) * (size_t)c->argc);
    args[c->argc] = "--overwrite";
    args[c->argc + 1] = NULL;
    time_t wall = time(NULL);
    char stamp[32];
    strftime(stamp, sizeof stamp, "%Y-%m-%dT%H:%M:%SZ", gmtime(&wall));
    append_log(f->log, "== %s %s: %s\n", stamp, step_names[s], options);
    run_snapshot *before = NULL;
    gl_status sst = run_snapshot_take(f->folder, &before);
    if (sst)
        return sst;
    struct stat lst;
    long log_from = stat(f->log, &lst) == 0 ? (long)lst.st_size : 0;
    double t0 = now_s();
    int rc = exec_step(c->argc + 1, args, c->stdout_path, f->log);
    out->seconds[s] = now_s() - t0;
    pass_warnings(f->log, log_from, target, step_names[s]);
    if (rc != 0) {
        run_snapshot_free(before);
        out->state[s] = GL_STEP_FAILED;
        out->exit_status = rc;
        char msg[400];
        last_line(f->log, msg, sizeof msg);
        snprintf(out->message, sizeof out->message, "%s", msg);
        return gl_error_set(rc == 1 ? GL_ERR_INPUT : GL_ERR_INTERNAL,
                            "%s: step %s failed: %s (log: %s)", target, step_names[s], msg, f->log);
    }
    out->state[s] = GL_STEP_RAN;
    gl_log(GL_LOG_INFO, "%s: %s: done in %.1f s", target, step_names[s], out->seconds[s]);
    /* every file the step wrote is its product, with those it must write */
    enum { MAXP = 256 };
    static char wrote[MAXP][4400];
    static const char *prods[MAXP + RUN_MAX_FILES];
    run_snapshot *after = NULL;
    gl_status st = run_snapshot_take(f->folder, &after);
    int np = 0, nw = st ? 0 : run_snapshot_changed(before, after, f->folder, wrote, MAXP);
    run_snapshot_free(after);
    run_snapshot_free(before);
    for (int i = 0; i < c->nproducts; i++)
        prods[np++] = c->products[i];
    for (int i = 0; i < nw; i++) {
        int dup = 0;
        for (int k = 0; k < c->nproducts; k++)
            dup |= strcmp(wrote[i], c->products[k]) == 0;
        if (!dup)
            prods[np++] = wrote[i];
    }
    if (!st)
        st = gl_ledger_record(led, step_names[s], options, c->inputs, c->ninputs, prods, np,
                              out->seconds[s]);
    if (!st)
        st = gl_ledger_save(led);
    return st;
}

gl_status gl_run_target(gl_plan *plan, const char *target, const gl_run_params *rp,
                        gl_run_outcome *out)
{
    gl_status st = GL_OK;
    arena *a = NULL, *scratch = NULL;
    run_files *f = NULL, *g = NULL;
    run_cmd *cmds = NULL, *tmp = NULL;
    gl_ledger *led = NULL;
    memset(out, 0, sizeof *out);
    if (!rp->folder)
        return gl_error_set(GL_ERR_USAGE, "gl_run_target: no run folder");
    a = calloc(1, sizeof *a);
    scratch = calloc(1, sizeof *scratch);
    f = calloc(1, sizeof *f);
    g = calloc(1, sizeof *g);
    cmds = calloc(GL_NSTEPS, sizeof *cmds);
    tmp = calloc(GL_NSTEPS, sizeof *tmp);
    if (!a || !scratch || !f || !g || !cmds || !tmp) {
        st = gl_error_nomem("run");
        goto cleanup;
    }
    if ((st = run_files_init(f, rp->folder)))
        goto cleanup;
    gl_plan_value(plan, NULL, "run", "name", NULL); /* read through gl_plan_target_name */
    /* compose every target's steps, so that a key meant for any of them
     * counts as used; then refuse the keys nobody used */
    for (int t = 0; t < gl_plan_target_count(plan); t++) {
        const char *name = gl_plan_target_name(plan, t);
        if (strcmp(name, target) == 0)
            continue;
        scratch->used = 0;
        if ((st = run_files_init(g, rp->folder)) || (st = compose(plan, name, g, scratch, 0, tmp)))
            goto cleanup;
    }
    if ((st = compose(plan, target, f, a, 1, cmds)) || (st = gl_plan_check_used(plan)) ||
        (st = run_check_options(plan, target, cmds)))
        goto cleanup;
    if (rp->dry_run) {
        st = run_dry_list(cmds, rp, f, target);
        goto cleanup;
    }
    /* the ledger is written before the first step, so that a run that fails
     * leaves a run folder that the next run (after a fix) takes up */
    if ((st = check_folder(f)) || (st = make_folder(f->folder)) ||
        (st = gl_ledger_open(f->folder, &led)) || (st = gl_ledger_save(led)))
        goto cleanup;
    int nasked = 0, done = 0;
    for (int s = 0; s < GL_NSTEPS; s++)
        nasked += cmds[s].asked;
    for (int s = 0; s < GL_NSTEPS; s++) {
        if (!cmds[s].asked)
            continue;
        if (st) {
            out->state[s] = GL_STEP_NOT_REACHED;
            continue;
        }
        gl_progress("run", done, nasked);
        st = run_step((gl_step)s, &cmds[s], rp, f, led, target, out);
        done++;
    }
    gl_progress("run", nasked, nasked);
    {
        /* the summary and report say what happened, also after a failure */
        char saved[1024];
        snprintf(saved, sizeof saved, "%s", gl_error_message());
        gl_status s2 = run_summary_write(f, target, gl_plan_name(plan), cmds, out, f->summary);
        if (!s2)
            s2 = run_report_write(f, target, cmds, out, f->report);
        if (st)
            gl_error_set(st, "%s", saved);
        else
            st = s2;
    }
cleanup:
    gl_ledger_free(led);
    free(tmp);
    free(cmds);
    free(g);
    free(f);
    free(scratch);
    free(a);
    return st;
}
