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

/* ---- the angle table of a product -------------------------------------- */

gl_status gl_angles_table_append(const char *path, const double *angles, long n)
{
    fitsfile *f = NULL;
    int status = 0;
    char *ttype[] = {"ANGLE"}, *tform[] = {"1D"}, *tunit[] = {"deg"};
    if (fits_open_diskfile(&f, path, READWRITE, &status))
        return gl_fits_error(GL_ERR_IO, path, "cannot reopen to add the angle table", status);
    fits_create_tbl(f, BINARY_TBL, (LONGLONG)n, 1, ttype, tform, tunit, GL_ANGLES_EXTNAME, &status);
    fits_write_col(f, TDOUBLE, 1, 1, 1, (LONGLONG)n, (void *)angles, &status);
    fits_update_key_str(f, "TTYPE1", "ANGLE", "parallactic angle of the frame at mid-exposure",
                        &status);
    fits_write_comment(f,
                       "gloam: parallactic angles (degrees), one row per frame of the image "
                       "HDU, in frame order; read by later gloam commands when --angles is "
                       "not given",
                       &status);
    fits_write_chksum(f, &status);
    return gl_fits_finish(f, path, "cannot write the angle table", status);
}

gl_status gl_angles_table_read(const char *path, long expected, double **angles, long *n)
{
    fitsfile *f = NULL;
    int status = 0, col = 0;
    gl_status st = GL_OK;
    double *a = NULL;
    long rows = 0;
    *angles = NULL;
    *n = 0;
    if (!looks_like_fits(path))
        return GL_OK;
    if (fits_open_diskfile(&f, path, READONLY, &status))
        return gl_fits_error(GL_ERR_IO, path, "cannot open", status);
    if (fits_movnam_hdu(f, BINARY_TBL, GL_ANGLES_EXTNAME, 0, &status)) {
        status = 0; /* no table: not an error */
        goto cleanup;
    }
    if (fits_get_colnum(f, CASEINSEN, "ANGLE", &col, &status) ||
        fits_get_num_rows(f, &rows, &status)) {
        st = gl_fits_error(GL_ERR_INPUT, path, "ANGLES table without an ANGLE column", status);
        goto cleanup;
    }
    if (expected > 0 && rows != expected) {
        st = gl_error_set(GL_ERR_INPUT,
                          "%s: its ANGLES table holds %ld angles but the cube has "
                          "%ld frames",
                          path, rows, expected);
        goto cleanup;
    }
    if (rows == 0) {
        st = gl_error_set(GL_ERR_INPUT, "%s: its ANGLES table is empty", path);
        goto cleanup;
    }
    if (!(a = gl_malloc((size_t)rows * sizeof *a))) {
        st = gl_error_nomem("angles");
        goto cleanup;
    }
    double nulv = NAN;
    int anynul = 0;
    if (fits_read_col(f, TDOUBLE, col, 1, 1, rows, &nulv, a, &anynul, &status)) {
        st = gl_fits_error(GL_ERR_INPUT, path, "cannot read the ANGLES table", status);
        goto cleanup;
    }
    for (long i = 0; i < rows; i++)
        if (!isfinite(a[i])) {
            st = gl_error_set(GL_ERR_INPUT, "%s: ANGLES table row %ld is not a finite angle", path,
                              i + 1);
            goto cleanup;
        }
    *angles = a;
    *n = rows;
    a = NULL;
cleanup:
    gl_free(a);
    if (f) {
        int s2 = 0;
        fits_close_file(f, &s2);
    }
    return st;
}

/* ---- plausibility ------------------------------------------------------- */

int gl_angles_look_like_radians(const double *a, long n)
{
    if (n < 2)
        return 0;
    double lo = a[0], hi = a[0], amax = 0;
    for (long i = 0; i < n; i++) {
        lo = GL_MIN(lo, a[i]);
        hi = GL_MAX(hi, a[i]);
        amax = GL_MAX(amax, fabs(a[i]));
    }
    double spread = hi - lo;
    int whole = 1; /* every angle a whole number: degrees, written by hand */
    for (long i = 0; i < n && whole; i++)
        whole = a[i] == floor(a[i]);
    return !whole && amax <= 2 * M_PI + 1e-9 && spread >= GL_ANGLES_RADIAN_MIN_SPREAD &&
           spread <= 2 * M_PI;
}

int gl_angles_constant(const double *a, long n)
{
    for (long i = 1; i < n; i++) {
        double d = fmod(a[i] - a[0], 360.0);
        if (fabs(d) > 1e-6 && fabs(fabs(d) - 360.0) > 1e-6)
            return 0;
    }
    return 1;
}

gl_status gl_angles_write(const char *path, const double *a, long n, const char *product)
{
    FILE *fp = fopen(path, "w");
    if (!fp)
        return gl_error_set(GL_ERR_IO, "%s: cannot create (%s)", path, strerror(errno));
    fprintf(fp, "# parallactic angles (degrees) of the frames of %s\n", product);
    for (long i = 0; i < n; i++)
        fprintf(fp, "%.8f\n", a[i]);
    int err = ferror(fp);
    if (fclose(fp) != 0 || err)
        return gl_error_set(GL_ERR_IO, "%s: write error", path);
    return GL_OK;
}
