/*
 * outset.c -- all-or-nothing writing of a command's products.
 *
 * Every product is written under a temporary name (".NAME.tmp-PID-N") in its
 * destination folder and renamed into place by gl_outset_commit, so an error
 * midway leaves no partial product and never replaces an existing file. A
 * destination that exists is refused at registration unless overwriting was
 * asked for; a destination that is one of the inputs is always refused.
 * A CSV product (NAME.csv) brings its ECSV twin (NAME.ecsv, written by the
 * table writer beside the CSV's temporary name) under the same rules.
 */
#include "core/internal.h"
#include "io/internal.h"

#include <errno.h>
#include <libgen.h>
#include <stdio.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>
#include <zlib.h>

/* Every temporary name handed out in this process and its destination, so
 * that a message about a failed write can name the product the user asked
 * for (gl_outset_error_names), even after the set is freed. Names longer
 * than the slots are not recorded (their messages keep the temporary name). */
enum { NAME_SLOTS = 32, NAME_LEN = 1024 };
static char tmp_names[NAME_SLOTS][NAME_LEN], dest_names[NAME_SLOTS][NAME_LEN];
static int nnames;

static void remember_names(const char *tmp, const char *dest)
{
    if (strlen(tmp) >= NAME_LEN || strlen(dest) >= NAME_LEN)
        return;
    int k = nnames++ % NAME_SLOTS;
    snprintf(tmp_names[k], NAME_LEN, "%s", tmp);
    snprintf(dest_names[k], NAME_LEN, "%s", dest);
}

gl_status gl_outset_error_names(gl_status st)
{
    char msg[2048], out[2048];
    snprintf(msg, sizeof msg, "%s", gl_error_message());
    int changed = 0;
    for (int k = 0; k < GL_MIN(nnames, NAME_SLOTS); k++) {
        char *at = strstr(msg, tmp_names[k]);
        if (!at)
            continue;
        size_t head = (size_t)(at - msg), nd = strlen(dest_names[k]);
        size_t tail = strlen(at + strlen(tmp_names[k]));
        if (head + nd + tail >= sizeof msg)
            continue;
        memcpy(out, msg, head);
        memcpy(out + head, dest_names[k], nd);
        memcpy(out + head + nd, at + strlen(tmp_names[k]), tail + 1);
        memcpy(msg, out, head + nd + tail + 1);
        changed = 1;
    }
    if (changed)
        gl_error_set(st, "%s", msg);
    return st;
}

typedef struct outfile {
    char *path;
    char *tmp;
    int twin;    /* the ECSV twin of the CSV product before it */
    int written; /* renamed into place by gl_outset_commit */
} outfile;

struct gl_outset {
    int overwrite;
    int committed;
    int n, cap;
    outfile *files;
};

gl_status gl_outset_new(int overwrite, gl_outset **out)
{
    *out = gl_calloc(1, sizeof **out);
    if (!*out)
        return gl_error_nomem("output set");
    (*out)->overwrite = overwrite;
    return GL_OK;
}

static int same_file(const char *a, const char *b)
{
    struct stat sa, sb;
    if (stat(a, &sa) != 0 || stat(b, &sb) != 0)
        return 0;
    return sa.st_dev == sb.st_dev && sa.st_ino == sb.st_ino;
}

/* The checks a destination must pass before it is registered. */
static gl_status check_destination(const gl_outset *s, const char *path, const gl_provenance *prov)
{
    struct stat sb;
    if (!path || !*path)
        return gl_error_set(GL_ERR_USAGE, "an output file name is empty");
    if (prov)
        for (int i = 0; i < prov->ninputs; i++)
            if (same_file(path, prov->inputs[i]))
                return gl_error_set(GL_ERR_USAGE, "%s: output would replace an input file", path);
    for (int i = 0; i < s->n; i++)
        if (strcmp(s->files[i].path, path) == 0)
            return gl_error_set(GL_ERR_USAGE, "%s: named twice as an output", path);
    if (lstat(path, &sb) == 0) {
        if (S_ISDIR(sb.st_mode))
            return gl_error_set(GL_ERR_IO, "%s: is a folder, not a file name", path);
        if (!s->overwrite)
            return gl_error_set(GL_ERR_EXISTS, "%s: exists (use --overwrite to replace it)", path);
    }
    char *copy = gl_strdup(path);
    if (!copy)
        return gl_error_nomem("output path");
    char *dir = dirname(copy);
    gl_status st = gl_outset_folder_check(path, dir);
    if (!st && access(dir, W_OK | X_OK) != 0)
        st = gl_error_set(GL_ERR_IO, "%s: folder %s is not writable", path, dir);
    gl_free(copy);
    return st;
}

gl_status gl_outset_folder_check(const char *path, const char *dir)
{
    struct stat sb;
    if (stat(dir, &sb) == 0 && S_ISDIR(sb.st_mode))
        return GL_OK;
    /* missing, or it (or a folder above it) is a file: find the nearest
     * part of the path that exists, and name it when it is a file */
    char *up = gl_strdup(dir);
    gl_status st = GL_OK;
    while (up && stat(up, &sb) != 0 && strcmp(up, ".") != 0 && strcmp(up, "/") != 0) {
        char *parent = gl_strdup(dirname(up));
        gl_free(up);
        up = parent;
    }
    if (!up)
        st = gl_error_nomem("output path");
    else if (stat(up, &sb) == 0 && !S_ISDIR(sb.st_mode))
        st = gl_error_set(GL_ERR_IO, "%s: %s is a file, not a folder", path, up);
    else
        st = gl_error_set(GL_ERR_IO, "%s: the output folder %s does not exist", path, dir);
    gl_free(up);
    return st;
}

static gl_status add_file(gl_outset *s, const char *path, const char *tmp_given, int twin)
{
    if (s->n == s->cap) {
        int ncap = s->cap ? 2 * s->cap : 8;
        outfile *nf = gl_calloc((size_t)ncap, sizeof *nf);
        if (!nf)
            return gl_error_nomem("output set");
        if (s->files)
            memcpy(nf, s->files, (size_t)s->n * sizeof *nf);
        gl_free(s->files);
        s->files = nf;
        s->cap = ncap;
    }
    size_t len = strlen(path) + 64;
    char *tmp = gl_malloc(len);
    char *p2 = gl_strdup(path);
    if (!tmp || !p2) {
        gl_free(tmp);
        gl_free(p2);
        return gl_error_nomem("output path");
    }
    if (tmp_given) {
        snprintf(tmp, len, "%s", tmp_given);
    } else { /* temporary name beside the destination: DIR/.BASE.tmp-PID-N */
        const char *slash = strrchr(path, '/');
        int dirlen = slash ? (int)(slash - path + 1) : 0;
        snprintf(tmp, len, "%.*s.%s.tmp-%ld-%d", dirlen, path, slash ? slash + 1 : path,
                 (long)getpid(), s->n);
    }
    s->files[s->n] = (outfile){.path = p2, .tmp = tmp, .twin = twin};
    remember_names(tmp, path);
    s->n++;
    return GL_OK;
}

gl_status gl_outset_add(gl_outset *s, const char *path, const gl_provenance *prov,
                        const char **tmp_path)
{
    gl_status st = check_destination(s, path, prov);
    size_t n = path ? strlen(path) : 0;
    const int csv = n >= 4 && strcmp(path + n - 4, ".csv") == 0;
    char twin[4096], twin_tmp[4096 + 80];
    if (!st && csv) {
        gl_table_ecsv_name(path, twin, sizeof twin);
        st = check_destination(s, twin, prov);
    }
    if (st || (st = add_file(s, path, NULL, 0)))
        return st;
    *tmp_path = s->files[s->n - 1].tmp;
    if (csv) {
        gl_table_ecsv_name(*tmp_path, twin_tmp, sizeof twin_tmp);
        if ((st = add_file(s, twin, twin_tmp, 1))) {
            s->n--;
            gl_free(s->files[s->n].path);
            gl_free(s->files[s->n].tmp);
            return st;
        }
        *tmp_path = s->files[s->n - 2].tmp;
    }
    return GL_OK;
}

gl_status gl_outset_commit(gl_outset *s)
{
    for (int i = 0; i < s->n; i++) {
        struct stat sb;
        if (!s->files[i].twin && stat(s->files[i].tmp, &sb) != 0)
            return gl_error_set(GL_ERR_INTERNAL, "%s: product was not written", s->files[i].path);
    }
    for (int i = 0; i < s->n; i++) {
        struct stat sb;
        if (s->files[i].twin && stat(s->files[i].tmp, &sb) != 0) {
            /* a CSV written without its twin: no stale twin stays beside it */
            unlink(s->files[i].path);
            gl_free(s->files[i].tmp);
            s->files[i].tmp = NULL;
            continue;
        }
        if (rename(s->files[i].tmp, s->files[i].path) != 0)
            return gl_error_set(GL_ERR_IO, "%s: cannot rename into place (%s)", s->files[i].path,
                                strerror(errno));
        gl_free(s->files[i].tmp);
        s->files[i].tmp = NULL;
        s->files[i].written = 1;
    }
    s->committed = 1;
    return GL_OK;
}

void gl_outset_drop(gl_outset *s, const char *path)
{
    for (int i = 0; s && !s->committed && i < s->n; i++) {
        if (strcmp(s->files[i].path, path) != 0)
            continue;
        /* the product and its twin, if any (a CSV's ECSV follows it) */
        int n = 1 + (i + 1 < s->n && s->files[i + 1].twin);
        for (int k = i; k < i + n; k++) {
            if (s->files[k].tmp)
                unlink(s->files[k].tmp);
            gl_free(s->files[k].tmp);
            gl_free(s->files[k].path);
        }
        memmove(s->files + i, s->files + i + n, (size_t)(s->n - i - n) * sizeof *s->files);
        s->n -= n;
        return;
    }
}

int gl_outset_count(const gl_outset *s)
{
    return s ? s->n : 0;
}

const char *gl_outset_written(const gl_outset *s, int i)
{
    return s && i >= 0 && i < s->n && s->files[i].written ? s->files[i].path : NULL;
}

void gl_outset_free(gl_outset *s)
{
    if (!s)
        return;
    for (int i = 0; i < s->n; i++) {
        if (s->files[i].tmp) {
            unlink(s->files[i].tmp);
            gl_free(s->files[i].tmp);
        }
        gl_free(s->files[i].path);
    }
    gl_free(s->files);
    gl_free(s);
}

gl_status gl_file_crc32(const char *path, unsigned long *crc)
{
    FILE *fp = fopen(path, "rb");
    if (!fp)
        return gl_error_set(GL_ERR_IO, "%s: cannot open (%s)", path, strerror(errno));
    unsigned char buf[1 << 16];
    uLong c = crc32(0L, Z_NULL, 0);
    size_t n;
    while ((n = fread(buf, 1, sizeof buf, fp)) > 0)
        c = crc32(c, buf, (uInt)n);
    int err = ferror(fp);
    fclose(fp);
    if (err)
        return gl_error_set(GL_ERR_IO, "%s: read error", path);
    *crc = c;
    return GL_OK;
}

void gl_provenance_add_observation(gl_provenance *p, const gl_header *h)
{
    if (p->has_obs || !h)
        return;
    gl_obsinfo_from_header(h, &p->obs);
    p->has_obs = 1;
}

/* Whether path is already listed, or the list is full. */
static int provenance_has(const gl_provenance *p, const char *path)
{
    if (p->ninputs >= 16)
        return 1;
    for (int i = 0; i < p->ninputs; i++)
        if (strcmp(p->inputs[i], path) == 0) /* read twice: listed once */
            return 1;
    return 0;
}

void gl_provenance_add_input_crc(gl_provenance *p, const char *path, unsigned long crc)
{
    if (provenance_has(p, path))
        return;
    p->inputs[p->ninputs] = path;
    p->crc32[p->ninputs] = crc;
    p->ninputs++;
}

gl_status gl_provenance_add_input(gl_provenance *p, const char *path)
{
    if (provenance_has(p, path))
        return GL_OK;
    unsigned long crc = 0;
    gl_status st = gl_file_crc32(path, &crc);
    if (!st)
        gl_provenance_add_input_crc(p, path, crc);
    return st;
}
