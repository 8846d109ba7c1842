/*
 * ledger.c -- the memory of a run folder: which steps finished, with which
 * options, on which inputs, leaving which products (RUN/ledger.json, read
 * and written with cJSON). It makes a run resumable: a step whose options
 * and inputs are unchanged, and whose products are still there as it left
 * them, is not run again. A step's products are every file it wrote into
 * the folder (found by listing the folder before and after it), figures and
 * ECSV twins included, so that a deleted or edited one reruns the step. Files are compared by
 * CRC-32 (zlib) of their bytes, not by dates, so that a copied or touched file does not rerun a
 * step and an edited one always does.
 */
#include "run/internal.h"

#include "gloam/io.h"

#include <cjson/cJSON.h>
#include <dirent.h>
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

struct gl_ledger {
    char path[4096];
    cJSON *root; /* {"version": 1, "steps": {"align": {...}, ...}} */
};

static cJSON *steps_of(const gl_ledger *l)
{
    return cJSON_GetObjectItemCaseSensitive(l->root, "steps");
}

gl_status gl_ledger_open(const char *folder, gl_ledger **out)
{
    *out = NULL;
    gl_status st = GL_OK;
    char *text = NULL;
    gl_ledger *l = calloc(1, sizeof *l);
    if (!l)
        return gl_error_nomem("ledger");
    int n = snprintf(l->path, sizeof l->path, "%s/ledger.json", folder);
    if (n < 0 || (size_t)n >= sizeof l->path) {
        st = gl_error_set(GL_ERR_USAGE, "%s: the run folder's name is too long", folder);
        goto cleanup;
    }
    FILE *f = fopen(l->path, "rb");
    if (f) {
        long size = -1;
        if (fseek(f, 0, SEEK_END) == 0)
            size = ftell(f);
        if (size >= 0 && fseek(f, 0, SEEK_SET) == 0 && (text = malloc((size_t)size + 1)) &&
            fread(text, 1, (size_t)size, f) == (size_t)size)
            text[size] = '\0';
        else {
            free(text);
            text = NULL;
        }
        fclose(f);
        if (!text) {
            st = gl_error_set(GL_ERR_IO, "%s: cannot read the run's ledger", l->path);
            goto cleanup;
        }
        l->root = cJSON_Parse(text);
        cJSON *steps = l->root ? steps_of(l) : NULL;
        if (!l->root || !cJSON_IsObject(steps)) {
            st = gl_error_set(GL_ERR_INPUT,
                              "%s: not a gloam ledger (remove it, or the run folder, to start "
                              "the run afresh)",
                              l->path);
            goto cleanup;
        }
    } else if (errno != ENOENT) {
        st = gl_error_set(GL_ERR_IO, "%s: cannot open the run's ledger: %s", l->path,
                          strerror(errno));
        goto cleanup;
    } else {
        l->root = cJSON_CreateObject();
        if (!l->root || !cJSON_AddNumberToObject(l->root, "version", 1) ||
            !cJSON_AddObjectToObject(l->root, "steps")) {
            st = gl_error_nomem("ledger");
            goto cleanup;
        }
    }
cleanup:
    free(text);
    if (st)
        gl_ledger_free(l);
    else
        *out = l;
    return st;
}

void gl_ledger_free(gl_ledger *l)
{
    if (!l)
        return;
    cJSON_Delete(l->root);
    free(l);
}

/* 1 when every file of the list {path: crc} still has its checksum. */
static int files_match(const cJSON *files)
{
    if (!cJSON_IsObject(files))
        return 0;
    const cJSON *f;
    cJSON_ArrayForEach(f, files)
    {
        unsigned long crc;
        if (!cJSON_IsString(f) || gl_file_crc32(f->string, &crc) != GL_OK)
            return 0;
        char hex[16];
        snprintf(hex, sizeof hex, "%08lx", crc & 0xffffffffUL);
        if (strcmp(hex, f->valuestring) != 0)
            return 0;
    }
    return 1;
}

const char *run_ledger_stale(const gl_ledger *l, const char *step, const char *options,
                             const char *const *inputs, int ninputs)
{
    const cJSON *s = cJSON_GetObjectItemCaseSensitive(steps_of(l), step);
    if (!s)
        return "not run in this folder before";
    const cJSON *opt = cJSON_GetObjectItemCaseSensitive(s, "options");
    const cJSON *in = cJSON_GetObjectItemCaseSensitive(s, "inputs");
    if (!cJSON_IsString(opt) || strcmp(opt->valuestring, options) != 0)
        return "its options changed";
    if (!cJSON_IsObject(in) || cJSON_GetArraySize(in) != ninputs)
        return "its inputs changed";
    for (int i = 0; i < ninputs; i++)
        if (!cJSON_GetObjectItemCaseSensitive(in, inputs[i]))
            return "its inputs changed";
    const char *why = NULL;
    gl_error_clear();
    if (!files_match(in))
        why = "an input changed since";
    else if (!files_match(cJSON_GetObjectItemCaseSensitive(s, "products")))
        why = "a product changed or is missing";
    gl_error_clear(); /* an unreadable file only means "run it again" */
    return why;
}

int gl_ledger_is_current(const gl_ledger *l, const char *step, const char *options,
                         const char *const *inputs, int ninputs)
{
    return run_ledger_stale(l, step, options, inputs, ninputs) == NULL;
}

int run_ledger_wrote(const gl_ledger *l, const char *step, const char *path)
{
    const cJSON *s = cJSON_GetObjectItemCaseSensitive(steps_of(l), step);
    const cJSON *pr = s ? cJSON_GetObjectItemCaseSensitive(s, "products") : NULL;
    return cJSON_IsObject(pr) && cJSON_GetObjectItemCaseSensitive(pr, path) != NULL;
}

static gl_status add_files(cJSON *obj, const char *const *paths, int n)
{
    for (int i = 0; i < n; i++) {
        unsigned long crc;
        gl_status st = gl_file_crc32(paths[i], &crc);
        if (st)
            return st;
        char hex[16];
        snprintf(hex, sizeof hex, "%08lx", crc & 0xffffffffUL);
        cJSON_DeleteItemFromObjectCaseSensitive(obj, paths[i]);
        if (!cJSON_AddStringToObject(obj, paths[i], hex))
            return gl_error_nomem("ledger");
    }
    return GL_OK;
}

gl_status gl_ledger_record(gl_ledger *l, const char *step, const char *options,
                           const char *const *inputs, int ninputs, const char *const *products,
                           int nproducts, double seconds)
{
    cJSON *s = cJSON_CreateObject();
    gl_status st = GL_OK;
    cJSON *in, *pr;
    if (!s || !cJSON_AddStringToObject(s, "options", options) ||
        !cJSON_AddNumberToObject(s, "seconds", seconds) ||
        !(in = cJSON_AddObjectToObject(s, "inputs")) ||
        !(pr = cJSON_AddObjectToObject(s, "products"))) {
        st = gl_error_nomem("ledger");
        goto cleanup;
    }
    if ((st = add_files(in, inputs, ninputs)) || (st = add_files(pr, products, nproducts)))
        goto cleanup;
    cJSON *steps = steps_of(l);
    cJSON_DeleteItemFromObjectCaseSensitive(steps, step);
    if (!cJSON_AddItemToObject(steps, step, s)) {
        st = gl_error_nomem("ledger");
        goto cleanup;
    }
    s = NULL;
cleanup:
    cJSON_Delete(s);
    return st;
}

void gl_ledger_forget(gl_ledger *l, const char *step)
{
    cJSON_DeleteItemFromObjectCaseSensitive(steps_of(l), step);
}

gl_status gl_ledger_save(const gl_ledger *l)
{
    char tmp[4200];
    snprintf(tmp, sizeof tmp, "%s.tmp", l->path);
    char *text = cJSON_Print(l->root);
    if (!text)
        return gl_error_nomem("ledger");
    gl_status st = GL_OK;
    FILE *f = fopen(tmp, "wb");
    if (!f) {
        st = gl_error_set(GL_ERR_IO, "%s: cannot write the run's ledger: %s", l->path,
                          strerror(errno));
    } else {
        size_t n = strlen(text);
        int bad = fwrite(text, 1, n, f) != n || fputc('\n', f) == EOF;
        bad |= fclose(f) != 0;
        if (bad || rename(tmp, l->path) != 0) {
            remove(tmp);
            st = gl_error_set(GL_ERR_IO, "%s: cannot write the run's ledger", l->path);
        }
    }
    cJSON_free(text);
    return st;
}

/* ---- what a step wrote ---------------------------------------------------- */

/* A step's products are every file of the run folder it created or
 * replaced (products are renamed into place, so a rewritten file has a new
 * inode), found by comparing the folder before and after the step: the
 * ledger then tracks every figure and ECSV twin a command writes, without a
 * list to keep in step with each command. */
typedef struct snap_entry {
    char name[256];
    ino_t ino;
    off_t size;
    struct timespec mtime;
} snap_entry;

struct run_snapshot {
    snap_entry *e;
    int n;
};

/* Files of the run itself, not of a step. */
static int run_own_file(const char *name)
{
    static const char *const own[] = {"log.txt", "ledger.json", "ledger.json.tmp", "summary.json",
                                      "report.html"};
    for (size_t i = 0; i < sizeof own / sizeof own[0]; i++)
        if (strcmp(name, own[i]) == 0)
            return 1;
    return name[0] == '.'; /* temporary names of an output set */
}

gl_status run_snapshot_take(const char *folder, run_snapshot **out)
{
    *out = NULL;
    run_snapshot *s = calloc(1, sizeof *s);
    if (!s)
        return gl_error_nomem("run folder listing");
    DIR *d = opendir(folder);
    if (!d) {
        free(s);
        return gl_error_set(GL_ERR_IO, "%s: cannot read the folder: %s", folder, strerror(errno));
    }
    gl_status st = GL_OK;
    int cap = 0;
    for (struct dirent *de; (de = readdir(d)) && !st;) {
        char path[4400];
        struct stat sb;
        if (run_own_file(de->d_name) || strlen(de->d_name) >= sizeof s->e[0].name)
            continue;
        snprintf(path, sizeof path, "%s/%s", folder, de->d_name);
        if (stat(path, &sb) != 0 || !S_ISREG(sb.st_mode))
            continue;
        if (s->n == cap) {
            cap = cap ? 2 * cap : 64;
            snap_entry *e = realloc(s->e, sizeof *e * (size_t)cap);
            if (!e) {
                st = gl_error_nomem("run folder listing");
                break;
            }
            s->e = e;
        }
        snap_entry *e = &s->e[s->n++];
        snprintf(e->name, sizeof e->name, "%s", de->d_name);
        e->ino = sb.st_ino;
        e->size = sb.st_size;
        e->mtime = sb.st_mtim;
    }
    closedir(d);
    if (st)
        run_snapshot_free(s);
    else
        *out = s;
    return st;
}

void run_snapshot_free(run_snapshot *s)
{
    if (!s)
        return;
    free(s->e);
    free(s);
}

int run_snapshot_changed(const run_snapshot *before, const run_snapshot *after, const char *folder,
                         char (*paths)[4400], int max)
{
    int n = 0;
    for (int i = 0; i < after->n && n < max; i++) {
        const snap_entry *a = &after->e[i];
        int same = 0;
        for (int k = 0; k < before->n && !same; k++) {
            const snap_entry *b = &before->e[k];
            same = strcmp(a->name, b->name) == 0 && a->ino == b->ino && a->size == b->size &&
                   a->mtime.tv_sec == b->mtime.tv_sec && a->mtime.tv_nsec == b->mtime.tv_nsec;
        }
        if (!same)
            snprintf(paths[n++], sizeof paths[0], "%s/%s", folder, a->name);
    }
    return n;
}
