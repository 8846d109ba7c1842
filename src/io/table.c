/*
 * table.c -- result tables: CSV (one header line of column names,
 * numbers at full double precision) and the same columns as a FITS binary
 * table extension through cfitsio, optionally led by one column of text (a
 * target's name, quoted in CSV as RFC 4180 says where needed); reading both
 * back (gl_csv). Every CSV file gets an ECSV twin (ECSV 1.0, the Astropy
 * project's "Enhanced Character Separated Values" format, APE 6): the same
 * lines under a commented YAML header that gives each column's type and
 * unit, so that a reader gets the units the FITS twin has in TUNITn while
 * the CSV keeps its one header line.
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
    return gl_table_write_csv_labelled(path, t, NULL, NULL);
}

void gl_table_ecsv_name(const char *csv, char *buf, size_t size)
{
    size_t n = strlen(csv);
    if (n >= 4 && strcmp(csv + n - 4, ".csv") == 0)
        snprintf(buf, size, "%.*s.ecsv", (int)(n - 4), csv);
    else
        snprintf(buf, size, "%s.ecsv", csv);
}

/* A YAML scalar in single quotes ('' stands for a quote; YAML 1.1, 7.3.2). */
static void yaml_quoted(FILE *fp, const char *s)
{
    fputc('\'', fp);
    for (; *s; s++) {
        if (*s == '\'')
            fputc('\'', fp);
        if ((unsigned char)*s >= 0x20)
            fputc(*s, fp);
    }
    fputc('\'', fp);
}

gl_status gl_table_ecsv_write(const char *csv_path, int ncols, const gl_ecsv_column *cols,
                              const gl_header *meta)
{
    char path[4096];
    gl_table_ecsv_name(csv_path, path, sizeof path);
    FILE *in = fopen(csv_path, "r");
    if (!in)
        return gl_error_set(GL_ERR_IO, "%s: cannot read back (%s)", csv_path, strerror(errno));
    FILE *fp = fopen(path, "w");
    if (!fp) {
        fclose(in);
        return gl_error_set(GL_ERR_IO, "%s: cannot create (%s)", path, strerror(errno));
    }
    fputs("# %ECSV 1.0\n# ---\n# delimiter: ','\n# datatype:\n", fp);
    for (int c = 0; c < ncols; c++) {
        fputs("# - {name: ", fp);
        yaml_quoted(fp, cols[c].name);
        if (cols[c].unit && cols[c].unit[0]) {
            fputs(", unit: ", fp);
            yaml_quoted(fp, cols[c].unit);
        }
        fprintf(fp, ", datatype: %s}\n", cols[c].datatype ? cols[c].datatype : "float64");
    }
    /* the keywords the FITS twin carries for this table, as its metadata */
    if (meta && meta->nkeys > 0) {
        fputs("# meta: !!omap\n", fp);
        for (int k = 0; k < meta->nkeys; k++) {
            const gl_key *key = &meta->keys[k];
            fputs("# - ", fp);
            yaml_quoted(fp, key->name);
            fputs(": ", fp);
            switch (key->type) {
            case GL_KEY_STR: yaml_quoted(fp, key->sval); break;
            case GL_KEY_DBL:
                if (isfinite(key->dval))
                    fprintf(fp, "%.17g", key->dval);
                else
                    fputs(".nan", fp);
                break;
            case GL_KEY_INT: fprintf(fp, "%ld", key->ival); break;
            case GL_KEY_BOOL: fputs(key->ival ? "true" : "false", fp); break;
            }
            fputc('\n', fp);
        }
    }
    fputs("# schema: astropy-2.0\n", fp);
    char buf[1 << 15];
    size_t n;
    while ((n = fread(buf, 1, sizeof buf, in)) > 0)
        fwrite(buf, 1, n, fp);
    int err = ferror(in) || ferror(fp);
    fclose(in);
    if (fclose(fp) != 0 || err) {
        unlink(path);
        return gl_error_set(GL_ERR_IO, "%s: write error", path);
    }
    return GL_OK;
}

/* The CSV of a table and its ECSV twin; a failure leaves neither. */
static gl_status write_csv_twin(const char *path, const gl_table *t, const char *label_name,
                                int labelled)
{
    const int n = t->ncols + labelled;
    gl_ecsv_column *cols = gl_calloc((size_t)n, sizeof *cols);
    if (!cols) {
        unlink(path);
        return gl_error_nomem("table columns");
    }
    if (labelled)
        cols[0] = (gl_ecsv_column){label_name, NULL, "string"};
    for (int c = 0; c < t->ncols; c++)
        cols[c + labelled] =
            (gl_ecsv_column){t->names[c], t->units ? t->units[c] : NULL, "float64"};
    gl_status st = gl_table_ecsv_write(path, n, cols, t->header);
    gl_free(cols);
    if (st)
        unlink(path);
    return st;
}

gl_status gl_table_write_csv_labelled(const char *path, const gl_table *t, const char *label_name,
                                      const char *const *labels)
{
    FILE *fp = fopen(path, "w");
    if (!fp)
        return gl_error_set(GL_ERR_IO, "%s: cannot create (%s)", path, strerror(errno));
    const int lab = labels != NULL;
    if (lab)
        fprintf(fp, "%s", label_name);
    for (int c = 0; c < t->ncols; c++)
        fprintf(fp, "%s%s", c || lab ? "," : "", t->names[c]);
    fputc('\n', fp);
    for (long r = 0; r < t->nrows; r++) {
        if (lab) { /* RFC 4180: quoted when it holds a comma or a quote */
            const char *s = labels[r] ? labels[r] : "";
            if (strpbrk(s, ",\"\n")) {
                fputc('"', fp);
                for (const char *q = s; *q; q++) {
                    if (*q == '"')
                        fputc('"', fp);
                    fputc(*q, fp);
                }
                fputc('"', fp);
            } else {
                fputs(s, fp);
            }
        }
        for (int c = 0; c < t->ncols; c++) {
            double v = t->cols[c][r];
            if (c || lab)
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
    return write_csv_twin(path, t, label_name, lab);
}

/* What was observed, so that a table read on its own says of what star,
 * when, with which filter and at which pixel scale (FITS Standard 4.0
 * keywords; the wavelength as WAVELEN, micrometres; the scale as GLPIXSC,
 * mas per pixel). */
static void write_observation(fitsfile *f, const gl_provenance *prov, int *status)
{
    if (!prov || !prov->has_obs)
        return;
    const gl_obsinfo *o = &prov->obs;
    const struct {
        const char *key, *value, *comment;
    } text[] = {{"OBJECT", o->object, "observed object"},
                {"TELESCOP", o->telescope, "telescope"},
                {"INSTRUME", o->instrument, "instrument"},
                {"FILTER", o->filter, "filter"},
                {"DATE-OBS", o->date_obs, "start of the observation"}};
    for (size_t i = 0; i < sizeof text / sizeof text[0]; i++)
        if (text[i].value[0])
            fits_update_key_str(f, text[i].key, text[i].value, text[i].comment, status);
    if (isfinite(o->mjd_obs))
        fits_update_key_dbl(f, "MJD-OBS", o->mjd_obs, -15, "MJD of the start of the observation",
                            status);
    if (isfinite(o->wavelength_um))
        fits_update_key_dbl(f, "WAVELEN", o->wavelength_um, -12, "[um] wavelength of the data",
                            status);
    if (isfinite(o->pixscale_mas))
        fits_update_key_dbl(f, "GLPIXSC", o->pixscale_mas, -12, "pixel scale, mas (from the WCS)",
                            status);
}

gl_status gl_table_write_fits(const char *path, const gl_table *t, const char *extname,
                              const gl_provenance *prov)
{
    return gl_table_write_fits_labelled(path, t, extname, prov, NULL, NULL);
}

gl_status gl_table_write_fits_labelled(const char *path, const gl_table *t, const char *extname,
                                       const gl_provenance *prov, const char *label_name,
                                       const char *const *labels)
{
    fitsfile *f = NULL;
    int status = 0;
    const int lab = labels != NULL, n = t->ncols + lab;
    char **ttype = gl_calloc((size_t)n, sizeof *ttype);
    char **tform = gl_calloc((size_t)n, sizeof *tform);
    char **tunit = gl_calloc((size_t)n, sizeof *tunit);
    char label_form[32];
    if (!ttype || !tform || !tunit) {
        gl_free(ttype);
        gl_free(tform);
        gl_free(tunit);
        return gl_error_nomem("table columns");
    }
    if (lab) {
        size_t w = 1;
        for (long r = 0; r < t->nrows; r++)
            if (labels[r] && strlen(labels[r]) > w)
                w = strlen(labels[r]);
        snprintf(label_form, sizeof label_form, "%zuA", w);
        ttype[0] = (char *)label_name;
        tform[0] = label_form;
        tunit[0] = "";
    }
    for (int c = 0; c < t->ncols; c++) {
        ttype[c + lab] = (char *)t->names[c];
        tform[c + lab] = "1D";
        tunit[c + lab] = (char *)((t->units && t->units[c]) ? t->units[c] : "");
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
    fits_create_tbl(f, BINARY_TBL, t->nrows, n, ttype, tform, tunit, extname, &status);
    for (long r = 0; lab && r < t->nrows && !status; r++) {
        char *s = (char *)(labels[r] ? labels[r] : "");
        fits_write_col(f, TSTRING, 1, r + 1, 1, 1, &s, &status);
    }
    for (int c = 0; c < t->ncols && !status; c++)
        if (t->nrows > 0)
            fits_write_col(f, TDOUBLE, c + 1 + lab, 1, 1, t->nrows, (void *)t->cols[c], &status);
    gl_fits_write_header(f, t->header, prov, &status);
    gl_fits_write_provenance(f, prov, &status);
    write_observation(f, prov, &status);
    fits_write_chksum(f, &status);
    gl_free(ttype);
    gl_free(tform);
    gl_free(tunit);
    return gl_fits_finish(f, path, "cannot write the table", status);
}

/* ---- reading ------------------------------------------------------------ */

void gl_csv_free(gl_csv *t)
{
    if (!t)
        return;
    for (int c = 0; t->names && c < t->ncols; c++)
        gl_free(t->names[c]);
    gl_free(t->names);
    gl_free(t->data);
    gl_free(t);
}

int gl_csv_column(const gl_csv *t, const char *name)
{
    for (int c = 0; c < t->ncols; c++)
        if (strcmp(t->names[c], name) == 0)
            return c;
    return -1;
}

/* Splits line in place at commas (the trailing newline removed); returns the
 * number of fields, at most max. */
static int split_fields(char *line, char **fields, int max)
{
    line[strcspn(line, "\r\n")] = '\0';
    int n = 0;
    char *p = line;
    while (n < max) {
        fields[n++] = p;
        char *comma = strchr(p, ',');
        if (!comma)
            break;
        *comma = '\0';
        p = comma + 1;
    }
    return n;
}

gl_status gl_csv_read(const char *path, gl_csv **out)
{
    enum { MAXCOLS = 256 };
    *out = NULL;
    FILE *fp = fopen(path, "r");
    if (!fp)
        return gl_error_set(GL_ERR_IO, "%s: cannot open (%s)", path, strerror(errno));
    gl_status st = GL_OK;
    char *line = NULL, *fields[MAXCOLS];
    size_t cap = 0;
    long lineno = 1, rowcap = 64;
    gl_csv *t = gl_calloc(1, sizeof *t);
    if (!t) {
        st = gl_error_nomem("table");
        goto cleanup;
    }
    if (getline(&line, &cap, fp) < 0) {
        st = gl_error_set(GL_ERR_INPUT, "%s: empty, no header line of column names", path);
        goto cleanup;
    }
    t->ncols = split_fields(line, fields, MAXCOLS);
    t->names = gl_calloc((size_t)t->ncols, sizeof *t->names);
    t->data = gl_malloc((size_t)rowcap * (size_t)t->ncols * sizeof *t->data);
    if (!t->names || !t->data) {
        st = gl_error_nomem("table");
        goto cleanup;
    }
    for (int c = 0; c < t->ncols; c++) {
        size_t len = strlen(fields[c]) + 1;
        if (!(t->names[c] = gl_malloc(len))) {
            st = gl_error_nomem("table");
            goto cleanup;
        }
        memcpy(t->names[c], fields[c], len);
    }
    while (getline(&line, &cap, fp) >= 0) {
        lineno++;
        if (line[strspn(line, " \t\r\n")] == '\0')
            continue;
        int n = split_fields(line, fields, MAXCOLS);
        if (n != t->ncols) {
            st = gl_error_set(GL_ERR_INPUT, "%s: line %ld has %d fields, the header %d", path,
                              lineno, n, t->ncols);
            goto cleanup;
        }
        if (t->nrows == rowcap) {
            double *d = gl_malloc((size_t)rowcap * 2 * (size_t)t->ncols * sizeof *d);
            if (!d) {
                st = gl_error_nomem("table");
                goto cleanup;
            }
            memcpy(d, t->data, (size_t)rowcap * (size_t)t->ncols * sizeof *d);
            gl_free(t->data);
            t->data = d;
            rowcap *= 2;
        }
        for (int c = 0; c < n; c++) {
            char *end;
            double v = strtod(fields[c], &end);
            t->data[t->nrows * t->ncols + c] = (end == fields[c] || *end) ? NAN : v;
        }
        t->nrows++;
    }
    *out = t;
    t = NULL;
cleanup:
    free(line);
    gl_csv_free(t);
    fclose(fp);
    return st;
}

gl_status gl_table_read_fits(const char *path, gl_csv **out)
{
    fitsfile *f = NULL;
    int status = 0, hdutype = 0, ncols = 0;
    long nrows = 0;
    gl_status st = GL_OK;
    gl_csv *t = NULL;
    *out = NULL;
    if (fits_open_diskfile(&f, path, READONLY, &status))
        return gl_fits_error(GL_ERR_IO, path, "cannot open", status);
    /* the first binary or ASCII table extension */
    for (int h = 2;; h++) {
        if (fits_movabs_hdu(f, h, &hdutype, &status)) {
            st = gl_error_set(GL_ERR_INPUT, "%s: no table extension", path);
            goto cleanup;
        }
        if (hdutype == BINARY_TBL || hdutype == ASCII_TBL)
            break;
    }
    fits_get_num_rows(f, &nrows, &status);
    fits_get_num_cols(f, &ncols, &status);
    if (status) {
        st = gl_fits_error(GL_ERR_INPUT, path, "cannot read the table layout", status);
        goto cleanup;
    }
    if (!(t = gl_calloc(1, sizeof *t)) ||
        !(t->names = gl_calloc((size_t)ncols, sizeof *t->names)) ||
        !(t->data = gl_calloc((size_t)(nrows ? nrows : 1) * (size_t)ncols, sizeof *t->data))) {
        st = gl_error_nomem("table");
        goto cleanup;
    }
    t->ncols = ncols;
    t->nrows = nrows;
    double *col = gl_malloc((size_t)(nrows ? nrows : 1) * sizeof *col);
    if (!col) {
        st = gl_error_nomem("table");
        goto cleanup;
    }
    for (int c = 0; c < ncols && !st; c++) {
        char key[16], name[72] = "";
        int typecode = 0;
        long repeat = 0, width = 0;
        snprintf(key, sizeof key, "TTYPE%d", c + 1);
        fits_read_key(f, TSTRING, key, name, NULL, &status);
        status = 0;
        size_t len = strlen(name) + 1;
        if (!(t->names[c] = gl_malloc(len))) {
            st = gl_error_nomem("table");
            break;
        }
        memcpy(t->names[c], name, len);
        fits_get_coltype(f, c + 1, &typecode, &repeat, &width, &status);
        /* numeric scalar columns only; others read as NaN */
        if (!status && typecode != TSTRING && repeat == 1 && nrows > 0) {
            double nul = NAN;
            int anynul = 0;
            fits_read_col(f, TDOUBLE, c + 1, 1, 1, nrows, &nul, col, &anynul, &status);
        } else {
            for (long r = 0; r < nrows; r++)
                col[r] = NAN;
        }
        if (status) {
            st = gl_fits_error(GL_ERR_INPUT, path, "cannot read a column", status);
            break;
        }
        for (long r = 0; r < nrows; r++)
            t->data[r * ncols + c] = col[r];
    }
    gl_free(col);
    if (!st) {
        *out = t;
        t = NULL;
    }
cleanup:
    gl_csv_free(t);
    status = 0;
    fits_close_file(f, &status);
    return st;
}

gl_status gl_table_read(const char *path, gl_csv **out)
{
    FILE *fp = fopen(path, "rb");
    char head[6] = "";
    if (!fp)
        return gl_error_set(GL_ERR_IO, "%s: cannot open (%s)", path, strerror(errno));
    size_t n = fread(head, 1, 6, fp);
    fclose(fp);
    if (n == 6 && memcmp(head, "SIMPLE", 6) == 0)
        return gl_table_read_fits(path, out);
    return gl_csv_read(path, out);
}
