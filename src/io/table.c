/*
 * table.c -- writing result tables: CSV (one header line of column names,
 * numbers at full double precision) and the same columns as a FITS binary
 * table extension through cfitsio.
 */
#include "core/internal.h"
#include "io/internal.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

/* 12 significant digits: every column is a measured or derived quantity
 * known to far fewer digits, and the file stays readable (0.0966, not
 * 0.096599999999999908). The FITS table twin keeps full double precision. */
static void print_double(FILE *fp, double v)
{
    fprintf(fp, "%.12g", v);
}

gl_status gl_table_write_csv(const char *path, const gl_table *t)
{
    FILE *fp = fopen(path, "w");
    if (!fp)
        return gl_error_set(GL_ERR_IO, "%s: cannot create (%s)", path, strerror(errno));
    for (int c = 0; c < t->ncols; c++)
        fprintf(fp, "%s%s", c ? "," : "", t->names[c]);
    fputc('\n', fp);
    for (long r = 0; r < t->nrows; r++) {
        for (int c = 0; c < t->ncols; c++) {
            double v = t->cols[c][r];
            if (c)
                fputc(',', fp);
            /* integers print as integers; NaN (no value) as an empty field */
            if (isnan(v))
                continue;
            if (v == (double)(long long)v && fabs(v) < 1e15)
                fprintf(fp, "%lld", (long long)v);
            else
                print_double(fp, v);
        }
        fputc('\n', fp);
    }
    int err = ferror(fp);
    if (fclose(fp) != 0 || err) {
        unlink(path);
        return gl_error_set(GL_ERR_IO, "%s: write error", path);
    }
    return GL_OK;
}

gl_status gl_table_write_fits(const char *path, const gl_table *t, const char *extname,
                              const gl_provenance *prov)
{
    fitsfile *f = NULL;
    int status = 0;
    char **ttype = gl_calloc((size_t)t->ncols, sizeof *ttype);
    char **tform = gl_calloc((size_t)t->ncols, sizeof *tform);
    char **tunit = gl_calloc((size_t)t->ncols, sizeof *tunit);
    if (!ttype || !tform || !tunit) {
        gl_free(ttype);
        gl_free(tform);
        gl_free(tunit);
        return gl_error_nomem("table columns");
    }
    for (int c = 0; c < t->ncols; c++) {
        ttype[c] = (char *)t->names[c];
        tform[c] = "1D";
        tunit[c] = (char *)((t->units && t->units[c]) ? t->units[c] : "");
    }
    unlink(path);
    if (fits_create_diskfile(&f, path, &status)) {
        gl_free(ttype);
        gl_free(tform);
        gl_free(tunit);
        return gl_fits_error(GL_ERR_IO, path, "cannot create", status);
    }
    fits_create_img(f, FLOAT_IMG, 0, NULL, &status);
    gl_fits_write_provenance(f, prov, &status);
    fits_write_chksum(f, &status);
    fits_create_tbl(f, BINARY_TBL, t->nrows, t->ncols, ttype, tform, tunit, extname, &status);
    for (int c = 0; c < t->ncols && !status; c++)
        if (t->nrows > 0)
            fits_write_col(f, TDOUBLE, c + 1, 1, 1, t->nrows, (void *)t->cols[c], &status);
    gl_fits_write_header(f, t->header, prov, &status);
    gl_fits_write_provenance(f, prov, &status);
    fits_write_chksum(f, &status);
    gl_free(ttype);
    gl_free(tform);
    gl_free(tunit);
    return gl_fits_finish(f, path, "cannot write the table", status);
}
