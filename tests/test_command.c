/*
 * test_command.c -- the command layer as a library (gloam/command.h) and a
 * whole reduction through the library alone.
 *
 * gl_command_exec writes only to the streams it is given: with the
 * process's own stdout and stderr pointed at files, a command's report,
 * its --help, its messages, a usage error and an unknown command all land
 * in memory streams and nothing reaches the files. gl_run_target, with no
 * program around it, runs a small plan (simulate's sequence; inspect,
 * align, subtract, detect) into a run folder: the steps' products, the
 * inspect report in its file, the steps' messages in log.txt, the summary
 * and report, and nothing on the process's streams. Invariants only: the
 * numbers of these steps are checked against outside references in
 * tests/py/.
 */
#include "gloam/gloam.h"
#include "check.h"

#include <fcntl.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

/* The run's report draws text with cairo, whose fonts come from fontconfig;
 * fontconfig keeps its configuration cache until the process ends, which
 * LeakSanitizer (the test command's ASan pass) counts as leaked. That cache
 * is fontconfig's, not gloam's: only it is suppressed (LSan's documented
 * default-suppressions hook; unused without the sanitizer). */
const char *__lsan_default_suppressions(void);
const char *__lsan_default_suppressions(void)
{
    return "leak:libfontconfig.so\n";
}

static char dir[256];

/* The process's stdout and stderr, pointed at files while a test runs. */
typedef struct captured {
    int saved[2];
    char path[2][300];
} captured;

static void capture(captured *c)
{
    fflush(stdout);
    fflush(stderr);
    for (int k = 0; k < 2; k++) {
        snprintf(c->path[k], sizeof c->path[k], "%s/process-fd%d.txt", dir, k + 1);
        c->saved[k] = dup(k + 1);
        int f = open(c->path[k], O_WRONLY | O_CREAT | O_TRUNC, 0666);
        dup2(f, k + 1);
        close(f);
    }
}

/* Puts the streams back; returns the bytes the process's streams got. */
static long release(captured *c)
{
    fflush(stdout);
    fflush(stderr);
    long n = 0;
    for (int k = 0; k < 2; k++) {
        dup2(c->saved[k], k + 1);
        close(c->saved[k]);
        struct stat sb;
        if (stat(c->path[k], &sb) == 0)
            n += (long)sb.st_size;
    }
    return n;
}

/* Runs a command with memory streams; *out and *err get what it printed. */
static int exec_mem(char **argv, int argc, char **out, char **err)
{
    size_t no = 0, ne = 0;
    FILE *o = open_memstream(out, &no), *e = open_memstream(err, &ne);
    int rc = gl_command_exec(argc, argv, o, e);
    fclose(o);
    fclose(e);
    return rc;
}

static int file_exists(const char *folder, const char *name)
{
    char p[600];
    snprintf(p, sizeof p, "%s/%s", folder, name);
    return access(p, F_OK) == 0;
}

static char *slurp(const char *folder, const char *name)
{
    char p[600];
    snprintf(p, sizeof p, "%s/%s", folder, name);
    FILE *f = fopen(p, "rb");
    if (!f)
        return NULL;
    char *t = calloc(1, 1 << 20);
    if (t)
        (void)!fread(t, 1, (1 << 20) - 1, f);
    fclose(f);
    return t;
}

static void test_the_list(void)
{
    const gl_command_info *c = gl_command_list();
    int n = 0, have_run = 0;
    for (; c[n].name; n++) {
        CHECK(c[n].summary && c[n].summary[0], "%s has a summary", c[n].name);
        have_run |= strcmp(c[n].name, "run") == 0;
    }
    CHECK(n == 10 && strcmp(c[0].name, "simulate") == 0 && have_run, "%d commands", n);
}

static void test_streams(void)
{
    char sim[300], cube[320];
    snprintf(sim, sizeof sim, "%s/sim", dir);
    snprintf(cube, sizeof cube, "%s/cube.fits", sim);
    char *o[5] = {0}, *e[5] = {0};
    int rc[5];
    captured cap;
    capture(&cap);
    {
        char *a[] = {"gloam", "simulate", sim, "--frames",    "12",         "--size",
                     "48",    "--seed",   "5", "--companion", "10:60:5e-3", NULL};
        rc[0] = exec_mem(a, 11, &o[0], &e[0]);
    }
    {
        char *a[] = {"gloam", "inspect", cube, NULL};
        rc[1] = exec_mem(a, 3, &o[1], &e[1]);
    }
    {
        char *a[] = {"gloam", "subtract", "-h", NULL};
        rc[2] = exec_mem(a, 3, &o[2], &e[2]);
    }
    {
        char *a[] = {"gloam", "detect", cube, "--no-such-option", NULL};
        rc[3] = exec_mem(a, 4, &o[3], &e[3]);
    }
    {
        char *a[] = {"gloam", "frobnicate", NULL};
        rc[4] = exec_mem(a, 2, &o[4], &e[4]);
    }
    long leaked = release(&cap);
    CHECK(leaked == 0, "%ld bytes reached the process's stdout/stderr", leaked);
    CHECK(rc[0] == 0, "simulate: %s", e[0]);
    CHECK(rc[1] == 0 && strstr(o[1], "shape       nx 48, ny 48"), "inspect's report: %s", o[1]);
    CHECK(rc[2] == 0 && strstr(o[2], "--modes") && strstr(o[2], "common options:"),
          "subtract --help on out");
    CHECK(rc[3] == 1 && !o[3][0] && strstr(e[3], "gloam detect: unknown option '--no-such-option'"),
          "usage error on err: %s", e[3]);
    CHECK(rc[4] == 1 && strstr(e[4], "unknown command 'frobnicate'"), "%s", e[4]);
    for (int i = 0; i < 5; i++) {
        free(o[i]);
        free(e[i]);
    }
}

/* The log handler of the caller survives a command. */
static int seen;
static void count_log(gl_log_level level, const char *msg, void *user)
{
    (void)level;
    (void)msg;
    (void)user;
    seen++;
}

static void test_handlers_put_back(void)
{
    gl_log_set_handler(count_log, NULL, GL_LOG_INFO);
    char *o = NULL, *e = NULL;
    char *a[] = {"gloam", "inspect", "/no/such/cube.fits", NULL};
    int rc = exec_mem(a, 3, &o, &e);
    CHECK(rc == 1 && strstr(e, "/no/such/cube.fits"), "one line naming the file: %s", e);
    gl_log(GL_LOG_INFO, "after the command");
    CHECK(seen == 1, "the caller's handler is back (%d)", seen);
    gl_log_set_handler(NULL, NULL, GL_LOG_INFO);
    free(o);
    free(e);
}

static void test_pipeline_through_the_library(void)
{
    char plan_path[300], folder[300];
    snprintf(plan_path, sizeof plan_path, "%s/plan.ini", dir);
    snprintf(folder, sizeof folder, "%s/run", dir);
    FILE *f = fopen(plan_path, "w");
    fprintf(f, "[run]\nname = Tarn-12\n"
               "[inputs]\ncube = sim/cube.fits\nangles = sim/angles.txt\npsf = sim/psf.fits\n"
               "[steps]\nrun = inspect, align, subtract, detect\n"
               "[subtract]\nmethod = pca\nmodes = 3\nmask-radius = 4\n"
               "[detect]\nmask-radius = 4\n");
    fclose(f);
    gl_plan *plan = NULL;
    CHECK(gl_plan_read(plan_path, &plan) == GL_OK, "%s", gl_error_message());
    if (!plan)
        return;
    gl_run_params rp;
    gl_run_params_init(&rp);
    rp.folder = folder;
    gl_run_outcome out;
    captured cap;
    capture(&cap);
    gl_status st = gl_run_target(plan, "Tarn-12", &rp, &out);
    long leaked = release(&cap);
    CHECK(st == GL_OK, "%s", gl_error_message());
    CHECK(leaked == 0, "%ld bytes reached the process's stdout/stderr", leaked);
    for (int s = GL_STEP_INSPECT; s <= GL_STEP_DETECT; s++)
        CHECK(out.state[s] == GL_STEP_RAN, "%s ran (%d)", gl_step_name(s), out.state[s]);
    CHECK(out.state[GL_STEP_LIMITS] == GL_STEP_NOT_ASKED, "limits not asked");
    static const char *const names[] = {"inspect.json",    "aligned.fits", "result.fits",
                                        "detect.snr.fits", "summary.json", "report.html"};
    for (size_t i = 0; i < sizeof names / sizeof names[0]; i++)
        CHECK(file_exists(folder, names[i]), "%s written", names[i]);
    char *json = slurp(folder, "inspect.json"), *log = slurp(folder, "log.txt");
    CHECK(json && json[0] == '{' && strstr(json, "\"nx\""), "inspect's report in its file");
    CHECK(log && strstr(log, "== ") && strstr(log, "gloam subtract: "),
          "the steps' messages in the log");
    free(json);
    free(log);

    /* a second run finds every step current */
    capture(&cap);
    st = gl_run_target(plan, "Tarn-12", &rp, &out);
    leaked = release(&cap);
    CHECK(st == GL_OK && leaked == 0, "%s", gl_error_message());
    for (int s = GL_STEP_INSPECT; s <= GL_STEP_DETECT; s++)
        CHECK(out.state[s] == GL_STEP_CURRENT, "%s current (%d)", gl_step_name(s), out.state[s]);
    gl_plan_free(plan);
}

int main(void)
{
    const char *tmp = getenv("TMPDIR");
    snprintf(dir, sizeof dir, "%s/gloam-test-command-XXXXXX", tmp && *tmp ? tmp : "/tmp");
    if (!mkdtemp(dir)) {
        perror(dir);
        return 1;
    }
    test_the_list();
    test_streams();
    test_handlers_put_back();
    test_pipeline_through_the_library();
    char cmd[600];
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
    if (!check_failures && system(cmd) != 0)
        fprintf(stderr, "%s: could not be removed\n", dir);
    CHECK_DONE();
}
