/*
 * check.c -- a plan's options checked before any step runs: each step's
 * composed command line is parsed by its own command, in the command
 * layer's check mode (gl_command_check), which accepts exactly what the
 * command would accept (option names written in full, every value parsed
 * by the command's own code) and stops before the command opens a file.
 * A refusal becomes one line naming the plan, the line, the section and
 * the key that the command's message is about.
 */
#include "run/internal.h"

#include "gloam/command.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* 1 when text names the option `--key` (not a longer one such as --key-x). */
static int names_option(const char *text, const char *key)
{
    size_t n = strlen(key);
    for (const char *p = strstr(text, "--"); p; p = strstr(p + 2, "--")) {
        if (p > text && (p[-1] == '-' || (p[-1] >= 'a' && p[-1] <= 'z')))
            continue;
        if (strncmp(p + 2, key, n) == 0) {
            char next = p[2 + n];
            if (!(next == '-' || (next >= 'a' && next <= 'z') || (next >= '0' && next <= '9')))
                return 1;
        }
    }
    return 0;
}

/* The command's one-line message without "gloam CMD: " in front and
 * " (see gloam CMD --help)" behind, in place. */
static char *bare_message(char *text, const char *command)
{
    char *s = text;
    size_t n = strlen(s);
    while (n && (s[n - 1] == '\n' || s[n - 1] == '\r'))
        s[--n] = '\0';
    char *last = strrchr(s, '\n'); /* the error is the last line */
    if (last)
        s = last + 1;
    char prefix[64];
    snprintf(prefix, sizeof prefix, "gloam %s: ", command);
    if (strncmp(s, prefix, strlen(prefix)) == 0)
        s += strlen(prefix);
    char *see = strstr(s, " (see gloam ");
    if (see)
        *see = '\0';
    return s;
}

/* The plan's sections whose keys reach step s's command line. */
static int sections_of(gl_step s, const char *out[2])
{
    out[0] = gl_step_name(s);
    if (s == GL_STEP_LIMITS || s == GL_STEP_VET) {
        out[0] = "subtract";
        out[1] = gl_step_name(s);
        return 2;
    }
    return 1;
}

/* Which of the plan's keys the message is about (the last given wins, as
 * a target's step option follows the defaults on the line); 0 when none. */
static int blame(gl_plan *plan, const char *target, gl_step s, const char *msg, gl_plan_item *who,
                 const char **section)
{
    const char *secs[2];
    int nsec = sections_of(s, secs), found = 0;
    for (int k = 0; k < nsec; k++) {
        gl_plan_item it[64];
        int n = gl_plan_items(plan, target, secs[k], it, 64);
        for (int i = 0; i < n; i++)
            if (names_option(msg, it[i].key)) {
                *who = it[i];
                *section = secs[k];
                found = 1;
            }
    }
    return found;
}

/* Options that the run sets for every step itself: a plan cannot give them
 * (a step that printed its help, or wrote where the run does not look,
 * would leave the run without its product). */
static const struct {
    const char *key, *why;
} run_owned[] = {
    {"out", "the run names every product in its folder"},
    {"overwrite", "the run replaces its own products (gloam run --overwrite, --force)"},
    {"help", "a step that prints its help makes no product"},
    {"dry-run", "use gloam run --dry-run"},
    {"quiet", "use gloam run --quiet"},
    {"verbose", "use gloam run --verbose"},
};

/* The first key of step s's sections that the run owns: an error naming
 * the plan's line, or GL_OK. */
static gl_status check_run_owned(gl_plan *plan, const char *target, gl_step s)
{
    const char *secs[2];
    int nsec = sections_of(s, secs);
    for (int k = 0; k < nsec; k++) {
        gl_plan_item it[64];
        int n = gl_plan_items(plan, target, secs[k], it, 64);
        for (int i = 0; i < n; i++)
            for (size_t j = 0; j < sizeof run_owned / sizeof run_owned[0]; j++)
                if (strcmp(it[i].key, run_owned[j].key) == 0)
                    return gl_error_set(GL_ERR_INPUT,
                                        "%s:%d: '%s' in [%s] is set by the run itself, not by a "
                                        "plan: %s",
                                        gl_plan_name(plan), it[i].line, it[i].key, secs[k],
                                        run_owned[j].why);
    }
    return GL_OK;
}

gl_status run_check_options(gl_plan *plan, const char *target, const run_cmd *cmds)
{
    gl_status st = GL_OK;
    for (int s = 0; s < GL_NSTEPS && !st; s++) {
        const run_cmd *c = &cmds[s];
        if (!c->asked || c->why_not[0] || c->argc < 2)
            continue;
        if ((st = check_run_owned(plan, target, (gl_step)s)))
            break;
        char *args[RUN_MAX_ARGS + 1]; /* getopt permutes its argument list */
        memcpy(args, c->argv, sizeof(char *) * (size_t)(c->argc + 1));
        char *text = NULL;
        size_t len = 0;
        FILE *err = open_memstream(&text, &len);
        int rc = err ? gl_command_check(c->argc, args, err) : 2;
        if (err)
            fclose(err);
        if (rc == 0) {
            free(text);
            continue;
        }
        if (!text) {
            st = gl_error_set(GL_ERR_NOMEM, "cannot check the options of gloam %s",
                              gl_step_name((gl_step)s));
            break;
        }
        const char *cmd = gl_step_name((gl_step)s);
        char *msg = bare_message(text, cmd);
        gl_plan_item who;
        const char *section = NULL;
        char unknown[300];
        int known = blame(plan, target, (gl_step)s, msg, &who, &section);
        if (known)
            snprintf(unknown, sizeof unknown, "unknown option '--%s'", who.key);
        if (known && strstr(msg, unknown))
            st = gl_error_set(GL_ERR_INPUT, "%s:%d: '%s' in [%s] is not an option of gloam %s",
                              gl_plan_name(plan), who.line, who.key, section, cmd);
        else if (known)
            st = gl_error_set(GL_ERR_INPUT, "%s:%d: [%s] %s = %s: %s", gl_plan_name(plan), who.line,
                              section, who.key, who.value, msg);
        else /* about what the run itself put on the line (the inputs) */
            st = gl_error_set(GL_ERR_INPUT, "%s: target %s: gloam %s refuses its command line: %s",
                              gl_plan_name(plan), target, cmd, msg);
        free(text);
    }
    return st;
}
