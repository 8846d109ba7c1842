/*
 * test_run.c -- the plan of a whole reduction.
 *
 * The INI grammar itself is libinih's; these checks cover what gloam adds:
 * sections and targets, the value a target sees (its own override, else the
 * step's default), keys nobody used, paths relative to the plan, and the
 * errors that name the plan's line. The same plans are read with Python's
 * configparser in tests/py/test_run.py (the outside reader of the format).
 * The ledger of a run folder: a step is current only with the same options,
 * inputs and intact products (CRC-32 by zlib).
 */
#include "gloam/gloam.h"
#include "check.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

static const char survey[] = "# a survey\n"
                             "[run]\n"
                             "name = night-1\n"
                             "[subtract]\n"
                             "method = klip-rings   ; the default of every target\n"
                             "modes = 5,10\n"
                             "\n"
                             "[target Veyra-3141]\n"
                             "cube = v/cube.fits\n"
                             "subtract.modes = 20\n"
                             "[target Orlen-7]\n"
                             "cube = /abs/o.fits\n"
                             "subtract.gap = 1.5\n";

static void test_targets_and_overrides(void)
{
    gl_plan *p = NULL;
    CHECK(gl_plan_parse(survey, "dir/plan.ini", &p) == GL_OK, "%s", gl_error_message());
    if (!p)
        return;
    CHECK(gl_plan_target_count(p) == 2, "two targets");
    CHECK(strcmp(gl_plan_target_name(p, 0), "Veyra-3141") == 0, "order of the plan");
    CHECK(strcmp(gl_plan_target_name(p, 1), "Orlen-7") == 0, "order of the plan");
    int line = 0;
    const char *v = gl_plan_value(p, "Veyra-3141", "subtract", "modes", &line);
    CHECK(v && strcmp(v, "20") == 0 && line == 10, "override wins (%s, line %d)", v, line);
    v = gl_plan_value(p, "Orlen-7", "subtract", "modes", &line);
    CHECK(v && strcmp(v, "5,10") == 0 && line == 6, "default otherwise (%s, line %d)", v, line);
    v = gl_plan_value(p, NULL, "subtract", "method", NULL);
    CHECK(v && strcmp(v, "klip-rings") == 0, "inline comment removed: '%s'", v);
    v = gl_plan_value(p, "Orlen-7", "inputs", "cube", NULL);
    CHECK(v && strcmp(v, "/abs/o.fits") == 0, "a target's own input");

    gl_plan_item it[8];
    int n = gl_plan_items(p, "Orlen-7", "subtract", it, 8);
    CHECK(n == 3, "defaults plus the new key (%d)", n);
    if (n == 3) {
        CHECK(strcmp(it[0].key, "method") == 0 && strcmp(it[1].key, "modes") == 0 &&
                  strcmp(it[2].key, "gap") == 0 && strcmp(it[2].value, "1.5") == 0,
              "order: defaults, then overrides");
    }
    n = gl_plan_items(p, "Veyra-3141", "subtract", it, 8);
    CHECK(n == 2 && strcmp(it[1].value, "20") == 0, "override replaces in place");
    CHECK(gl_plan_items(p, "Veyra-3141", "subtract", it, 1) == -1, "too many keys refused");

    char path[64];
    CHECK(gl_plan_path(p, "v/cube.fits", path, sizeof path) == GL_OK &&
              strcmp(path, "dir/v/cube.fits") == 0,
          "relative to the plan's folder: %s", path);
    CHECK(gl_plan_path(p, "/abs/o.fits", path, sizeof path) == GL_OK &&
              strcmp(path, "/abs/o.fits") == 0,
          "absolute kept");
    CHECK(gl_plan_path(p, "a-very-long-name-that-does-not-fit-in-the-buffer-given.fits", path,
                       16) == GL_ERR_USAGE,
          "too long refused");

    /* the run name has not been asked for */
    CHECK(gl_plan_check_used(p) == GL_ERR_INPUT && strstr(gl_error_message(), "plan.ini:3:") &&
              strstr(gl_error_message(), "'name'"),
          "unused key named with its line: %s", gl_error_message());
    gl_plan_value(p, NULL, "run", "name", NULL);
    gl_plan_value(p, "Veyra-3141", "inputs", "cube", NULL);
    CHECK(gl_plan_check_used(p) == GL_OK, "all used: %s", gl_error_message());
    gl_plan_free(p);
}

static void test_single_target(void)
{
    gl_plan *p = NULL;
    CHECK(gl_plan_parse("[inputs]\ncube = c.fits\n", "plan.ini", &p) == GL_OK, "parse");
    if (!p)
        return;
    CHECK(gl_plan_target_count(p) == 1 && strcmp(gl_plan_target_name(p, 0), "target") == 0,
          "one unnamed target");
    const char *v = gl_plan_value(p, gl_plan_target_name(p, 0), "inputs", "cube", NULL);
    CHECK(v && strcmp(v, "c.fits") == 0, "inputs reach the target");
    char path[64];
    CHECK(gl_plan_path(p, v, path, sizeof path) == GL_OK && strcmp(path, "c.fits") == 0,
          "plan in the current folder");
    gl_plan_free(p);
}

static void expect_error(const char *text, const char *what)
{
    gl_plan *p = (gl_plan *)1;
    gl_status st = gl_plan_parse(text, "bad.ini", &p);
    CHECK(st == GL_ERR_INPUT && p == NULL, "refused: %s", text);
    CHECK(strstr(gl_error_message(), what) != NULL, "message '%s' holds '%s'", gl_error_message(),
          what);
    CHECK(strncmp(gl_error_message(), "bad.ini:", 8) == 0, "names the plan: %s",
          gl_error_message());
}

static void test_errors(void)
{
    expect_error("[subtarct]\nmodes = 5\n", "bad.ini:2: unknown section [subtarct]");
    expect_error("[subtract]\nmodes = 5\nmodes = 6\n", "bad.ini:3: 'modes' is given twice");
    expect_error("[subtract]\nmodes =\n", "bad.ini:2: 'modes' has no value");
    expect_error("modes = 5\n", "bad.ini:1: 'modes' comes before any [section]");
    expect_error("[subtract]\njust words\n", "bad.ini:2: not a 'key = value' line");
    expect_error("[target a/b]\ncube = x\n", "a target name is one word");
    expect_error("[subtract]\nmodes = 5\n  10\n", "bad.ini:3:");
    char longline[6000];
    memset(longline, 'x', sizeof longline);
    memcpy(longline, "[inputs]\ncube = ", 16);
    longline[sizeof longline - 2] = '\n';
    longline[sizeof longline - 1] = '\0';
    expect_error(longline, "longer than");

    gl_plan *p = (gl_plan *)1;
    CHECK(gl_plan_read("/nonexistent/plan.ini", &p) == GL_ERR_IO && p == NULL, "missing file");
    CHECK(strstr(gl_error_message(), "/nonexistent/plan.ini") != NULL, "names the file");
    gl_plan_free(NULL);
}

static void test_allocation_failures(void)
{
    /* every allocation of the parse fails in turn: a status, never a crash
     * or a leak (the sanitizer run checks the leaks) */
    for (long k = 0; k < 40; k++) {
        gl_plan *p = NULL;
        gl_malloc_fail_after(k);
        gl_status st = gl_plan_parse(survey, "plan.ini", &p);
        gl_malloc_fail_after(-1);
        CHECK((st == GL_OK) == (p != NULL), "status and plan agree at failure %ld", k);
        CHECK(st == GL_OK || st == GL_ERR_NOMEM, "only out of memory at failure %ld: %s", k,
              gl_error_message());
        gl_plan_free(p);
    }
}

static void write_file(const char *path, const char *text)
{
    FILE *f = fopen(path, "w");
    if (f) {
        fputs(text, f);
        fclose(f);
    }
}

static void test_ledger(void)
{
    char dir[] = "/tmp/gloam-ledger-XXXXXX";
    if (!mkdtemp(dir)) {
        CHECK(0, "mkdtemp");
        return;
    }
    char in[256], prod[256], led[256];
    snprintf(in, sizeof in, "%s/cube.fits", dir);
    snprintf(prod, sizeof prod, "%s/result.fits", dir);
    snprintf(led, sizeof led, "%s/ledger.json", dir);
    write_file(in, "input bytes");
    write_file(prod, "product bytes");
    const char *ins[] = {in}, *prods[] = {prod};

    gl_ledger *l = NULL;
    CHECK(gl_ledger_open(dir, &l) == GL_OK && l, "a new folder has an empty ledger");
    if (!l)
        return;
    CHECK(!gl_ledger_is_current(l, "subtract", "modes=5", ins, 1), "nothing done yet");
    CHECK(gl_ledger_record(l, "subtract", "modes=5", ins, 1, prods, 1, 1.5) == GL_OK, "record");
    CHECK(gl_ledger_is_current(l, "subtract", "modes=5", ins, 1), "done, same options");
    CHECK(!gl_ledger_is_current(l, "subtract", "modes=10", ins, 1), "other options rerun");
    CHECK(!gl_ledger_is_current(l, "subtract", "modes=5", ins, 0), "other inputs rerun");
    CHECK(gl_ledger_save(l) == GL_OK, "save");
    gl_ledger_free(l);

    l = NULL;
    CHECK(gl_ledger_open(dir, &l) == GL_OK && l, "reopen");
    if (!l)
        return;
    CHECK(gl_ledger_is_current(l, "subtract", "modes=5", ins, 1), "kept across runs");
    write_file(in, "input bytes, edited");
    CHECK(!gl_ledger_is_current(l, "subtract", "modes=5", ins, 1), "an edited input reruns");
    write_file(in, "input bytes");
    CHECK(gl_ledger_is_current(l, "subtract", "modes=5", ins, 1), "restored bytes: current");
    write_file(prod, "product bytes, damaged");
    CHECK(!gl_ledger_is_current(l, "subtract", "modes=5", ins, 1), "a changed product reruns");
    write_file(prod, "product bytes");
    remove(prod);
    CHECK(!gl_ledger_is_current(l, "subtract", "modes=5", ins, 1), "a missing product reruns");
    write_file(prod, "product bytes");
    gl_ledger_forget(l, "subtract");
    CHECK(!gl_ledger_is_current(l, "subtract", "modes=5", ins, 1), "forgotten (--force)");
    const char *missing[] = {"/nonexistent/x.fits"};
    CHECK(gl_ledger_record(l, "detect", "", missing, 1, prods, 1, 0) == GL_ERR_IO,
          "an unreadable input is an error when recording");
    gl_ledger_free(l);

    write_file(led, "{ not json");
    l = (gl_ledger *)1;
    CHECK(gl_ledger_open(dir, &l) == GL_ERR_INPUT && l == NULL, "a damaged ledger is refused");
    CHECK(strstr(gl_error_message(), "ledger.json") != NULL, "names it: %s", gl_error_message());
    remove(led);
    remove(in);
    remove(prod);
    rmdir(dir);
    gl_ledger_free(NULL);
}

int main(void)
{
    test_targets_and_overrides();
    test_single_target();
    test_errors();
    test_allocation_failures();
    test_ledger();
    CHECK_DONE();
}
