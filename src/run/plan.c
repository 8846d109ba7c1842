/*
 * plan.c -- the plan of a whole reduction: an INI file read with libinih
 * (a small, widely packaged reader of a format astronomers already edit by
 * hand; chosen over YAML because a plan is flat: sections of key = value,
 * no nesting, no types to guess). The parser records every key with its
 * section, target and line, refuses what cannot be meant (unknown sections,
 * a key twice in a section, empty values), and answers the questions of the
 * run stage: which targets, which value a target sees for a key (its own
 * override, else the step's default), and which keys nobody used (a
 * misspelt option is an error, not a silent default).
 *
 * libinih calls its handler without the line number in the Debian build, so
 * the file is fed through a reader that counts lines: the handler is always
 * called for the line the reader returned last.
 */
#include "gloam/run.h"

#include "core/internal.h"

#include <errno.h>
#include <glob.h>
#include <ini.h>
#include <limits.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

typedef struct plan_entry {
    char *section; /* "subtract", "inputs", ...; "target" for [target NAME] */
    char *target;  /* NAME of a [target NAME] section, else NULL */
    char *key;
    char *value;
    int line;
    int used;
} plan_entry;

struct gl_plan {
    char name[4096];
    plan_entry *e;
    int n, cap;
    char **targets;
    int ntargets;
};

static const char *const known_sections[] = {"run",     "inputs", "steps",    "survey",
                                             "inspect", "align",  "subtract", "detect",
                                             "limits",  "vet",    NULL};

typedef struct parse_state {
    gl_plan *plan;
    const char *text; /* the remaining text of the plan */
    int line;         /* the line the reader returned last */
    gl_status st;     /* the first error, and its line and message */
    int error_line;
    char error[1024];
} parse_state;

/* An fgets over the text in memory that counts the lines it hands out. */
static char *read_line(char *buf, int size, void *stream)
{
    parse_state *ps = stream;
    if (!*ps->text)
        return NULL;
    const char *nl = strchr(ps->text, '\n');
    size_t len = nl ? (size_t)(nl - ps->text) + 1 : strlen(ps->text);
    if (len >= (size_t)size) {
        if (ps->st == GL_OK) {
            ps->st = GL_ERR_INPUT;
            ps->error_line = ps->line + 1;
            snprintf(ps->error, sizeof ps->error, "line longer than %d characters", size - 3);
        }
        len = (size_t)size - 1;
    }
    memcpy(buf, ps->text, len);
    buf[len] = '\0';
    ps->text += len;
    if (len && buf[len - 1] == '\n')
        ps->line++;
    else if (!*ps->text)
        ps->line++;
    return buf;
}

static int fail(parse_state *ps, gl_status st, const char *fmt, const char *a, const char *b)
{
    if (ps->st == GL_OK) {
        ps->st = st;
        ps->error_line = ps->line;
        snprintf(ps->error, sizeof ps->error, fmt, a, b);
    }
    return 0;
}

static int add_target(gl_plan *p, const char *name)
{
    for (int i = 0; i < p->ntargets; i++)
        if (strcmp(p->targets[i], name) == 0)
            return 1;
    char **t = realloc(p->targets, sizeof *t * (size_t)(p->ntargets + 1));
    if (!t)
        return 0;
    p->targets = t;
    if (!(p->targets[p->ntargets] = gl_strdup(name)))
        return 0;
    p->ntargets++;
    return 1;
}

static int on_pair(void *user, const char *section, const char *key, const char *value)
{
    parse_state *ps = user;
    gl_plan *p = ps->plan;
    char sec[256], target[256] = "";
    snprintf(sec, sizeof sec, "%s", section);
    if (strncmp(sec, "target", 6) == 0 && (sec[6] == ' ' || sec[6] == '\t')) {
        const char *t = sec + 7;
        while (*t == ' ' || *t == '\t')
            t++;
        snprintf(target, sizeof target, "%s", t);
        sec[6] = '\0';
        if (!*target || strpbrk(target, "/\\ \t"))
            return fail(ps, GL_ERR_INPUT,
                        "[target %s]: a target name is one word without '/' (it names its run "
                        "folder)%s",
                        target, "");
    } else {
        int ok = 0;
        for (int i = 0; known_sections[i]; i++)
            ok |= strcmp(sec, known_sections[i]) == 0;
        if (!*sec)
            return fail(ps, GL_ERR_INPUT, "'%s' comes before any [section]%s", key, "");
        if (!ok)
            return fail(ps, GL_ERR_INPUT,
                        "unknown section [%s] (known: run, inputs, steps, survey, inspect, align, "
                        "subtract, detect, limits, vet, target NAME)%s",
                        sec, "");
    }
    if (!value || !*value)
        return fail(ps, GL_ERR_INPUT, "'%s' has no value%s", key, "");
    for (int i = 0; i < p->n; i++) {
        const plan_entry *e = &p->e[i];
        if (strcmp(e->section, sec) == 0 && strcmp(e->key, key) == 0 &&
            strcmp(e->target ? e->target : "", target) == 0) {
            char first[32];
            snprintf(first, sizeof first, "%d", e->line);
            return fail(ps, GL_ERR_INPUT, "'%s' is given twice in this section (first on line %s)",
                        key, first);
        }
    }
    if (p->n == p->cap) {
        int cap = p->cap ? 2 * p->cap : 32;
        plan_entry *e = realloc(p->e, sizeof *e * (size_t)cap);
        if (!e)
            return fail(ps, GL_ERR_NOMEM, "out of memory (%s)%s", "plan", "");
        p->e = e;
        p->cap = cap;
    }
    plan_entry *e = &p->e[p->n];
    memset(e, 0, sizeof *e);
    e->line = ps->line;
    e->section = gl_strdup(sec);
    e->key = gl_strdup(key);
    e->value = gl_strdup(value);
    e->target = *target ? gl_strdup(target) : NULL;
    if (!e->section || !e->key || !e->value || (*target && !e->target) ||
        (*target && !add_target(p, target))) {
        gl_free(e->section);
        gl_free(e->key);
        gl_free(e->value);
        gl_free(e->target);
        return fail(ps, GL_ERR_NOMEM, "out of memory (%s)%s", "plan", "");
    }
    p->n++;
    return 1;
}

gl_status gl_plan_parse(const char *text, const char *name, gl_plan **out)
{
    static char comment_prefixes[] = ";#";
    gl_status st = GL_OK;
    *out = NULL;
    gl_plan *p = gl_calloc(1, sizeof *p);
    if (!p)
        return gl_error_nomem("plan");
    snprintf(p->name, sizeof p->name, "%s", name);
    /* the Debian build of libinih takes these at run time: lines as long as
     * a path, no continuation lines (a stray indent is an error, not a
     * silent join), '#' and ';' comments after a value */
    ini_use_stack = false;
    ini_max_line = 4096 + 3;
    ini_allow_multiline = false;
    ini_inline_comment_prefixes = comment_prefixes;
    parse_state ps = {p, text, 0, GL_OK, 0, ""};
    int r = ini_parse_stream(read_line, &ps, on_pair, &ps);
    if (ps.st != GL_OK) {
        st = gl_error_set(ps.st, "%s:%d: %s", name, ps.error_line, ps.error);
    } else if (r == -2) {
        st = gl_error_nomem("plan");
    } else if (r != 0) {
        st = gl_error_set(GL_ERR_INPUT, "%s:%d: not a 'key = value' line or a [section] heading",
                          name, r);
    }
    if (st) {
        gl_plan_free(p);
        return st;
    }
    *out = p;
    return GL_OK;
}

gl_status gl_plan_read(const char *path, gl_plan **out)
{
    *out = NULL;
    FILE *f = fopen(path, "rb");
    if (!f)
        return gl_error_set(GL_ERR_IO, "%s: cannot open the plan: %s", path, strerror(errno));
    gl_status st = GL_OK;
    char *text = NULL;
    long size = -1;
    if (fseek(f, 0, SEEK_END) == 0)
        size = ftell(f);
    if (size < 0 || size > (64L << 20) || fseek(f, 0, SEEK_SET) != 0) {
        st = gl_error_set(GL_ERR_INPUT, "%s: not a plan file (unreadable, or larger than 64 MiB)",
                          path);
        goto cleanup;
    }
    if (!(text = gl_malloc((size_t)size + 1))) {
        st = gl_error_nomem("plan");
        goto cleanup;
    }
    if (fread(text, 1, (size_t)size, f) != (size_t)size) {
        st = gl_error_set(GL_ERR_IO, "%s: cannot read the plan", path);
        goto cleanup;
    }
    text[size] = '\0';
    if (memchr(text, '\0', (size_t)size)) {
        st = gl_error_set(GL_ERR_INPUT, "%s: not a plan file (it holds binary data)", path);
        goto cleanup;
    }
    st = gl_plan_parse(text, path, out);
cleanup:
    gl_free(text);
    fclose(f);
    return st;
}

void gl_plan_free(gl_plan *p)
{
    if (!p)
        return;
    for (int i = 0; i < p->n; i++) {
        gl_free(p->e[i].section);
        gl_free(p->e[i].key);
        gl_free(p->e[i].value);
        gl_free(p->e[i].target);
    }
    free(p->e);
    for (int i = 0; i < p->ntargets; i++)
        gl_free(p->targets[i]);
    free(p->targets);
    gl_free(p);
}

const char *gl_plan_name(const gl_plan *p)
{
    return p->name;
}

int gl_plan_target_count(const gl_plan *p)
{
    return p->ntargets ? p->ntargets : 1;
}

const char *gl_plan_target_name(const gl_plan *p, int i)
{
    if (p->ntargets)
        return i >= 0 && i < p->ntargets ? p->targets[i] : NULL;
    if (i != 0)
        return NULL;
    for (int k = 0; k < p->n; k++)
        if (strcmp(p->e[k].section, "run") == 0 && strcmp(p->e[k].key, "name") == 0)
            return p->e[k].value;
    return "target";
}

/* The entry for (section, key) as written for target (NULL: the defaults). */
static plan_entry *find(gl_plan *p, const char *target, const char *section, const char *key)
{
    char dotted[512];
    snprintf(dotted, sizeof dotted, "%s.%s", section, key);
    for (int i = 0; i < p->n; i++) {
        plan_entry *e = &p->e[i];
        if (target) {
            if (!e->target || strcmp(e->target, target) != 0)
                continue;
            if (strcmp(e->key, dotted) == 0 ||
                (strcmp(section, "inputs") == 0 && strcmp(e->key, key) == 0))
                return e;
        } else if (!e->target && strcmp(e->section, section) == 0 && strcmp(e->key, key) == 0) {
            return e;
        }
    }
    return NULL;
}

const char *gl_plan_value(gl_plan *p, const char *target, const char *section, const char *key,
                          int *line)
{
    plan_entry *e = target ? find(p, target, section, key) : NULL;
    if (!e)
        e = find(p, NULL, section, key);
    if (line)
        *line = e ? e->line : 0;
    if (!e)
        return NULL;
    e->used = 1;
    return e->value;
}

int gl_plan_items(gl_plan *p, const char *target, const char *section, gl_plan_item *items, int max)
{
    int n = 0;
    size_t slen = strlen(section);
    for (int pass = 0; pass < 2; pass++)
        for (int i = 0; i < p->n; i++) {
            plan_entry *e = &p->e[i];
            const char *key;
            if (pass == 0) { /* the defaults, each replaced by the target's override */
                if (e->target || strcmp(e->section, section) != 0)
                    continue;
                key = e->key;
            } else { /* the target's overrides of keys the defaults do not set */
                if (!target || !e->target || strcmp(e->target, target) != 0 ||
                    strncmp(e->key, section, slen) != 0 || e->key[slen] != '.')
                    continue;
                key = e->key + slen + 1;
                if (find(p, NULL, section, key))
                    continue;
            }
            plan_entry *use = target && pass == 0 ? find(p, target, section, key) : NULL;
            if (!use)
                use = e;
            if (n == max) {
                gl_error_set(GL_ERR_USAGE, "%s: [%s] holds more than %d keys", p->name, section,
                             max);
                return -1;
            }
            use->used = 1;
            e->used = 1;
            items[n].key = key;
            items[n].value = use->value;
            items[n].line = use->line;
            n++;
        }
    return n;
}

gl_status gl_plan_check_used(const gl_plan *p)
{
    for (int i = 0; i < p->n; i++) {
        const plan_entry *e = &p->e[i];
        if (e->used)
            continue;
        if (e->target)
            return gl_error_set(GL_ERR_INPUT,
                                "%s:%d: '%s' in [target %s] is not used by gloam (an input is "
                                "cube, angles, psf, psf-scale or refs; an override is written "
                                "step.option)",
                                p->name, e->line, e->key, e->target);
        return gl_error_set(GL_ERR_INPUT, "%s:%d: '%s' in [%s] is not used by gloam", p->name,
                            e->line, e->key, e->section);
    }
    return GL_OK;
}

gl_status gl_plan_path(const gl_plan *p, const char *value, char *out, size_t size)
{
    int n;
    const char *slash = strrchr(p->name, '/');
    if (value[0] == '/' || !slash)
        n = snprintf(out, size, "%s", value);
    else
        n = snprintf(out, size, "%.*s/%s", (int)(slash - p->name), p->name, value);
    if (n < 0 || (size_t)n >= size)
        return gl_error_set(GL_ERR_USAGE, "%s: the path '%s' is too long", p->name, value);
    return GL_OK;
}

gl_status gl_plan_expand_folders(gl_plan *p)
{
    int line = 0;
    const char *pattern = gl_plan_value(p, NULL, "survey", "folders", &line);
    if (!pattern)
        return GL_OK;
    char full[4096];
    gl_status st = gl_plan_path(p, pattern, full, sizeof full);
    if (st)
        return st;
    glob_t g;
    memset(&g, 0, sizeof g);
    int r = glob(full, GLOB_ONLYDIR | GLOB_MARK, NULL, &g);
    if (r == GLOB_NOMATCH || (r == 0 && g.gl_pathc == 0)) {
        globfree(&g);
        return gl_error_set(GL_ERR_INPUT, "%s:%d: folders = %s matches no folder", p->name, line,
                            pattern);
    }
    if (r != 0) {
        globfree(&g);
        return gl_error_set(GL_ERR_IO, "%s:%d: folders = %s: cannot list the folders", p->name,
                            line, pattern);
    }
    static const char *const keys[] = {"cube", "angles", "psf", "refs"};
    for (size_t i = 0; i < g.gl_pathc && !st; i++) {
        char dir[PATH_MAX], name[256];
        if (!realpath(g.gl_pathv[i], dir)) {
            st = gl_error_set(GL_ERR_IO, "%s: cannot resolve the folder", g.gl_pathv[i]);
            break;
        }
        const char *base = strrchr(dir, '/');
        snprintf(name, sizeof name, "%.255s", base ? base + 1 : dir);
        parse_state ps = {p, "", line, GL_OK, 0, ""};
        char section[300];
        snprintf(section, sizeof section, "target %s", name);
        for (size_t k = 0; k < sizeof keys / sizeof keys[0]; k++) {
            int kl;
            const char *v = gl_plan_value(p, NULL, "inputs", keys[k], &kl);
            if (!v || (strcmp(keys[k], "angles") == 0 && strcmp(v, "header") == 0))
                continue;
            char value[PATH_MAX + 512];
            snprintf(value, sizeof value, "%s/%s", dir, v);
            /* the folder's own copy of the input: an entry of [target NAME] */
            if (!on_pair(&ps, section, keys[k], value) && ps.st != GL_OK)
                break;
        }
        if (ps.st != GL_OK)
            st = gl_error_set(ps.st, "%s:%d: folders = %s: %s", p->name, line, pattern, ps.error);
        else if (p->ntargets == 0 || strcmp(p->targets[p->ntargets - 1], name) != 0)
            st = gl_error_set(GL_ERR_INPUT,
                              "%s:%d: folders = %s: %s gives no input ([inputs] names the files "
                              "each folder holds)",
                              p->name, line, pattern, dir);
    }
    globfree(&g);
    return st;
}
