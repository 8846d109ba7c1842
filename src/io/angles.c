/*
 * angles.c -- parallactic-angle lists: a text file with one angle (degrees) a
 * line, '#' starting a comment, or a 1-D FITS image of angles.
 */
#include "core/internal.h"
#include "io/internal.h"

#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static int looks_like_fits(const char *path)
{
    FILE *fp = fopen(path, "rb");
    if (!fp)
        return 0;
    char buf[9] = {0};
    size_t n = fread(buf, 1, 8, fp);
    fclose(fp);
    return n == 8 && memcmp(buf, "SIMPLE  ", 8) == 0;
}

static gl_status read_fits_angles(const char *path, double **angles, long *n)
{
    gl_cube *c = NULL;
    gl_status st = gl_fits_read_cube(path, 1, &c);
    if (st)
        return st;
    long count = (long)gl_cube_size(c);
    if (c->naxis > 2 || (c->nx > 1 && c->ny > 1)) {
        gl_cube_free(c);
        return gl_error_set(GL_ERR_INPUT, "%s: angles must be a 1-D FITS image", path);
    }
    double *a = gl_malloc((size_t)count * sizeof *a);
    if (!a) {
        gl_cube_free(c);
        return gl_error_nomem("angles");
    }
    for (long i = 0; i < count; i++) {
        a[i] = c->data[i];
        if (!isfinite(a[i])) {
            gl_free(a);
            gl_cube_free(c);
            return gl_error_set(GL_ERR_INPUT, "%s: angle %ld is not a finite number", path, i + 1);
        }
    }
    gl_cube_free(c);
    *angles = a;
    *n = count;
    return GL_OK;
}

static gl_status read_text_angles(const char *path, double **angles, long *n)
{
    FILE *fp = fopen(path, "r");
    if (!fp)
        return gl_error_set(GL_ERR_IO, "%s: cannot open (%s)", path, strerror(errno));
    gl_status st = GL_OK;
    long cap = 256, count = 0, lineno = 0;
    double *a = gl_malloc((size_t)cap * sizeof *a);
    char *line = NULL;
    size_t linecap = 0;
    if (!a) {
        st = gl_error_nomem("angles");
        goto cleanup;
    }
    while (getline(&line, &linecap, fp) >= 0) {
        lineno++;
        char *hash = strchr(line, '#');
        if (hash)
            *hash = '\0';
        char *p = line;
        while (isspace((unsigned char)*p))
            p++;
        if (!*p)
            continue;
        char *end;
        errno = 0;
        double v = strtod(p, &end);
        while (isspace((unsigned char)*end))
            end++;
        if (end == p || *end || errno == ERANGE || !isfinite(v)) {
            char *nl = strpbrk(p, "\r\n");
            if (nl)
                *nl = '\0';
            st = gl_error_set(GL_ERR_INPUT, "%s: line %ld: '%.40s' is not an angle in degrees",
                              path, lineno, p);
            goto cleanup;
        }
        if (count == cap) {
            double *b = gl_malloc((size_t)cap * 2 * sizeof *b);
            if (!b) {
                st = gl_error_nomem("angles");
                goto cleanup;
            }
            memcpy(b, a, (size_t)cap * sizeof *b);
            gl_free(a);
            a = b;
            cap *= 2;
        }
        a[count++] = v;
    }
    if (ferror(fp)) {
        st = gl_error_set(GL_ERR_IO, "%s: read error", path);
        goto cleanup;
    }
    *angles = a;
    *n = count;
    a = NULL;

cleanup:
    free(line);
    gl_free(a);
    fclose(fp);
    return st;
}

gl_status gl_angles_read(const char *path, long expected, double **angles, long *n)
{
    double *a = NULL;
    long count = 0;
    *angles = NULL;
    *n = 0;
    gl_status st = looks_like_fits(path) ? read_fits_angles(path, &a, &count)
                                         : read_text_angles(path, &a, &count);
    if (st)
        return st;
    if (count == 0) {
        gl_free(a);
        return gl_error_set(GL_ERR_INPUT, "%s: holds no angles", path);
    }
    if (expected > 0 && count != expected) {
        gl_free(a);
        return gl_error_set(GL_ERR_INPUT, "%s: holds %ld angles but the cube has %ld frames", path,
                            count, expected);
    }
    *angles = a;
    *n = count;
    return GL_OK;
}
