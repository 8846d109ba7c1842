/*
 * io/internal.h -- helpers shared by the FITS readers and writers.
 */
#ifndef GLOAM_IO_INTERNAL_H
#define GLOAM_IO_INTERNAL_H

#include "gloam/io.h"

#include <fitsio.h>

/* Records a cfitsio failure as "PATH: what: cfitsio's message" and returns
 * the given gloam status. */
gl_status gl_fits_error(gl_status st, const char *path, const char *what, int fstatus);

/* Closes a FITS file being written to path. When status is non-zero on
 * entry (what went wrong: "cannot write ...") or closing fails, the file is
 * deleted and GL_ERR_IO returned with "PATH: what (cfitsio's message)". */
gl_status gl_fits_finish(fitsfile *f, const char *path, const char *what, int status);

/* Writes a header's carried cards, typed keywords and HISTORY into the
 * current HDU (earlier provenance cards dropped when prov is given). */
int gl_fits_write_header(fitsfile *f, const gl_header *h, const gl_provenance *prov, int *status);

/* Writes the provenance of a product into the current HDU. */
int gl_fits_write_provenance(fitsfile *f, const gl_provenance *prov, int *status);

/* Celestial WCS of a header's carried cards, parsed by wcslib (wcspih, then
 * wcsset; a CD matrix given for the celestial axes only gets a unit diagonal
 * on further axes). Given h (may be NULL). Returned: *wcs, an array of *nwcs
 * wcsprm to free with wcsvfree(nwcs, wcs), when wcs[0] is set and has a
 * celestial pair (lng, lat >= 0); else *wcs = NULL, *nwcs = 0. Function
 * return value: GL_OK (also without a WCS), GL_ERR_NOMEM. */
struct wcsprm;
gl_status gl_header_wcs_parse(const gl_header *h, int *nwcs, struct wcsprm **wcs);

/* A cube read piece by piece (fits_read.c), for data larger than memory:
 * the image HDU, BITPIX conversion, scaling and null handling of
 * gl_fits_read_cube, so every pixel comes back exactly as that reads it.
 * Open: GL_ERR_IO / GL_ERR_INPUT as gl_fits_read_cube (3-D or 4-D only).
 * frames: nf whole frames from f0 into dst (nf x ny x nx; 3-D cubes only).
 * rows: rows y0 .. y0 + nrows - 1 of every frame into dst (frame after
 * frame, each nrows x nx; 3-D cubes only). Read errors: GL_ERR_IO. */
typedef struct gl_fits_stream gl_fits_stream;
gl_status gl_fits_stream_open(const char *path, gl_fits_stream **out);
void gl_fits_stream_close(gl_fits_stream *s);
void gl_fits_stream_shape(const gl_fits_stream *s, long *nx, long *ny, long *nchan, long *nframe);
const gl_header *gl_fits_stream_header(const gl_fits_stream *s);
gl_status gl_fits_stream_frames(gl_fits_stream *s, long f0, long nf, float *dst);
gl_status gl_fits_stream_rows(gl_fits_stream *s, long y0, long nrows, float *dst);

/* The ECSV twin of a CSV table (table.c): PATH.csv -> PATH.ecsv, any other
 * name + ".ecsv" (the rule gl_outset_add follows for a CSV product's twin). */
void gl_table_ecsv_name(const char *csv, char *buf, size_t size);

/* One column of an ECSV header: datatype "float64", "int64", "bool" or
 * "string"; unit NULL or "" for none. */
typedef struct gl_ecsv_column {
    const char *name, *unit, *datatype;
} gl_ecsv_column;

/* Writes the ECSV twin of the CSV file csv_path (already written, its first
 * line the column names): the ECSV 1.0 header (delimiter ',', the columns,
 * meta's keywords as metadata when given) followed by the CSV's lines.
 * Errors: GL_ERR_IO (naming the file); on error no twin is left. */
gl_status gl_table_ecsv_write(const char *csv_path, int ncols, const gl_ecsv_column *cols,
                              const gl_header *meta);

#endif
