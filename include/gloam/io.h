/*
 * gloam/io.h -- FITS input and output (cfitsio), observation metadata and WCS
 * (wcslib), parallactic-angle lists, CSV tables, and safe product writing.
 *
 * Inputs are opened read-only. Products are written to a temporary name in the
 * destination folder and renamed into place only when every product of a
 * command is complete (gl_outset), so a failure leaves nothing behind and an
 * existing file is replaced only when overwriting was asked for.
 */
#ifndef GLOAM_IO_H
#define GLOAM_IO_H

#include "gloam/core.h"

#include <stdio.h>

#ifdef __cplusplus
extern "C" {
#endif

/* ---- reading ----------------------------------------------------------- */

/* Reads the first HDU of `path` that holds an image (primary or extension).
 * 2-D, 3-D (x, y, frame) and 4-D (x, y, channel, frame) data of any BITPIX;
 * BSCALE/BZERO applied, BLANK and NaN pixels become NaN. The header's
 * non-structural cards are kept in (*out)->header.
 * min_naxis: 2 accepts single images, 3 requires a cube.
 * Errors: GL_ERR_IO (missing, unreadable), GL_ERR_INPUT (not FITS, no image
 * HDU, fewer than min_naxis axes, more than 4 axes, an empty axis). */
GL_API gl_status gl_fits_read_cube(const char *path, int min_naxis, gl_cube **out);

/* Layout of the image HDU that gl_fits_read_cube would use, for reports:
 * HDU number (1 = primary, as cfitsio counts), BITPIX on disk, axes, and the
 * scaling keywords (which the cube reader applies and does not carry). */
typedef struct gl_fits_info {
    int hdu;          /* 1-based HDU number */
    char extname[72]; /* EXTNAME of that HDU, or "" */
    int bitpix;       /* BITPIX as written (16 for BZERO=32768 unsigned data) */
    int naxis;        /* NAXIS as written */
    long naxes[8];    /* NAXISn (first 8) */
    int has_bscale, has_bzero, has_blank;
    double bscale;   /* 1 when absent */
    double bzero;    /* 0 when absent */
    long long blank; /* BLANK of integer images, when has_blank */
} gl_fits_info;

/* Fills info for the first image HDU of path (the one gl_fits_read_cube
 * reads). Errors as for gl_fits_read_cube (GL_ERR_IO, GL_ERR_INPUT). */
GL_API gl_status gl_fits_image_info(const char *path, gl_fits_info *info);

/* The header of that HDU alone (its carried cards, as gl_fits_read_cube
 * keeps them), without the data. Errors as gl_fits_image_info. */
GL_API gl_status gl_fits_read_header(const char *path, gl_header **out);

/* Observation metadata found in a header. Fields absent from the header are
 * NaN (numbers) or "" (strings); `found` lists the keywords seen. */
typedef struct gl_obsinfo {
    char date_obs[72];   /* DATE-OBS as written */
    double mjd_obs;      /* MJD-OBS, or from DATE-OBS (UTC) through ERFA */
    double exptime;      /* EXPTIME (or EXPOSURE, ITIME), seconds */
    double ra_deg;       /* RA, degrees (sexagesimal hours accepted) */
    double dec_deg;      /* DEC, degrees (sexagesimal accepted) */
    double site_lat_deg; /* LATITUDE / OBSGEO-B / SITELAT */
    double site_lon_deg; /* LONGITUD / OBSGEO-L / SITELONG, east positive */
    double site_height_m;
    char telescope[72];
    char instrument[72];
    char object[72];
    char filter[72];
    double wavelength_um; /* WAVELEN / WAVELENG / LAMBDA, micrometres (see obsinfo.c), or NaN */
    int has_wcs;          /* a celestial WCS was parsed by wcslib */
    double pixscale_mas;  /* from the WCS (geometric mean of axis scales), or NaN */
    double saturate;      /* SATURATE keyword, or NaN */
    char found[512];      /* space-separated keywords found */
} gl_obsinfo;

/* Fills info from a header; never fails (missing items stay NaN/""). */
GL_API void gl_obsinfo_from_header(const gl_header *h, gl_obsinfo *info);

/* ---- parallactic angles ------------------------------------------------ */

/* Reads angles in degrees from a text file (one number a line, '#' starts a
 * comment, blank lines skipped) or from a 1-D FITS image. When expected > 0
 * the count must equal it. *angles is allocated with gl_malloc.
 * Errors: GL_ERR_IO, GL_ERR_INPUT (bad number, with its line; wrong count;
 * not finite; empty). */
GL_API gl_status gl_angles_read(const char *path, long expected, double **angles, long *n);

/* Writes n angles (degrees, 8 decimals, one a line) to a text file that
 * gl_angles_read reads back, with a comment line naming the product they
 * belong to. Errors: GL_ERR_IO naming path. */
GL_API gl_status gl_angles_write(const char *path, const double *angles, long n,
                                 const char *product);

/* Extension name of the angle table a product carries. */
#define GL_ANGLES_EXTNAME "ANGLES"

/* Appends the angle table to the FITS file `path` (normally a product just
 * written under its temporary name): a binary-table extension EXTNAME
 * 'ANGLES' with one column ANGLE (TUNIT 'deg', 1D), one row per frame in
 * frame order, with CHECKSUM/DATASUM. On failure the file is deleted.
 * Errors: GL_ERR_IO naming path. */
GL_API gl_status gl_angles_table_append(const char *path, const double *angles, long n);

/* Reads the angle table of a product (the 'ANGLES' binary-table extension).
 * A file without one (or not FITS) is not an error: *angles stays NULL.
 * When expected > 0 the row count must equal it.
 * Errors: GL_ERR_IO, GL_ERR_INPUT (no ANGLE column, wrong count, empty, not
 * finite), each naming path. */
GL_API gl_status gl_angles_table_read(const char *path, long expected, double **angles, long *n);

/* Smallest spread (max - min) of an angle list that gl_angles_look_like_radians
 * considers: below it the list is close to constant in either unit. */
#define GL_ANGLES_RADIAN_MIN_SPREAD 0.01

/* 1 when an angle list (degrees expected) looks like radians: every |angle|
 * <= 2 pi, a spread between GL_ANGLES_RADIAN_MIN_SPREAD and 2 pi, and not
 * every angle a whole number. Parallactic angles in radians lie in
 * [-pi, pi] (or [0, 2 pi)) and are not whole numbers, so a radian list
 * always passes; a degree list passes only when the whole sequence stays
 * within 6.3 degrees of zero, i.e. a short sequence through the meridian
 * with at most 6.3 degrees of field rotation, for which a warning is worth
 * having anyway; a hand-written list of whole degrees (0, 1, 2, 3) does not
 * (common practice, no published rule). */
GL_API int gl_angles_look_like_radians(const double *a, long n);

/* 1 when every angle equals the first (modulo 360, within 1e-6 deg): no
 * field rotation. */
GL_API int gl_angles_constant(const double *a, long n);

/* ---- provenance -------------------------------------------------------- */

/* What made a product: recorded in every FITS product's header (HISTORY and
 * GLxxx keywords). CSV tables stay plain (one header line of column names);
 * their FITS-table twin carries the provenance. */
typedef struct gl_provenance {
    const char *program; /* "gloam 0.1.0" */
    const char *command; /* the full command line */
    int ninputs;
    const char *inputs[16];
    unsigned long crc32[16]; /* CRC-32 (zlib) of each input file's bytes */
    /* what was observed, from the first science input (see
     * gl_provenance_add_observation): written into every table product */
    int has_obs;
    gl_obsinfo obs;
} gl_provenance;

/* Records what was observed (OBJECT, TELESCOP, INSTRUME, FILTER, DATE-OBS,
 * MJD-OBS, the pixel scale of the WCS) from the header of the first science
 * input; later calls keep the first. FITS tables then carry these keywords
 * (gl_table_write_fits), images carry them through their own header. */
GL_API void gl_provenance_add_observation(gl_provenance *p, const gl_header *h);

/* Adds an input file and its CRC-32 (silently ignores more than 16). */
GL_API gl_status gl_provenance_add_input(gl_provenance *p, const char *path);

/* The same with the CRC-32 already computed (gl_file_crc32), for a caller
 * that computes it beside the read of the file. */
GL_API void gl_provenance_add_input_crc(gl_provenance *p, const char *path, unsigned long crc);

/* ---- writing ----------------------------------------------------------- */

/* A set of products written together: each file goes to a temporary name in
 * its destination folder; gl_outset_commit renames all into place, or
 * gl_outset_free (without commit) deletes them. */
typedef struct gl_outset gl_outset;

/* New set. With overwrite == 0 an existing destination is an error. */
GL_API gl_status gl_outset_new(int overwrite, gl_outset **out);
/* Registers `path` as a product. Checks at once that it does not exist (unless
 * overwriting), that its folder is writable, and that it is not one of the
 * inputs named in prov (when prov is given). Returns the temporary path to
 * write to (owned by the set) in *tmp_path.
 * Errors: GL_ERR_EXISTS, GL_ERR_IO, GL_ERR_USAGE (output equals an input). */
GL_API gl_status gl_outset_add(gl_outset *s, const char *path, const gl_provenance *prov,
                               const char **tmp_path);
/* The folder rule of every product (gl_outset_add, and the folders simulate
 * and run create): GL_OK when dir is an existing folder; else GL_ERR_IO with
 * a message naming path and either the part of dir that is a file ("PATH:
 * some.txt is a file, not a folder") or the missing folder ("PATH: the
 * output folder DIR does not exist"); GL_ERR_NOMEM. */
GL_API gl_status gl_outset_folder_check(const char *path, const char *dir);
/* Rewrites the last error message so that it names products, not the
 * temporary names gl_outset_add handed out for them (in this process);
 * returns st. The CLI calls it before printing any error. */
GL_API gl_status gl_outset_error_names(gl_status st);
/* Renames every temporary file into place. */
GL_API gl_status gl_outset_commit(gl_outset *s);
/* Takes back product `path` before the commit (a product that will not be
 * made after all): its temporary file, if written, is deleted. Unknown paths
 * are ignored. */
GL_API void gl_outset_drop(gl_outset *s, const char *path);
/* The products of a set, in the order registered (a CSV's ECSV twin after
 * it): gl_outset_count gives how many were registered, gl_outset_written
 * the name of product i when the commit put it in place (NULL before the
 * commit, and for a CSV twin its writer did not write), so that a command
 * can list exactly what it wrote. */
GL_API int gl_outset_count(const gl_outset *s);
GL_API const char *gl_outset_written(const gl_outset *s, int i);
/* Deletes uncommitted temporary files and frees the set; NULL is a no-op. */
GL_API void gl_outset_free(gl_outset *s);

/* Writes a cube as a float32 FITS image to `path` (normally a temporary name
 * from gl_outset_add): NAXIS 2, 3 or 4 from c->naxis, the cube's header cards
 * and keywords, provenance, and CHECKSUM/DATASUM. NaN stays NaN (IEEE). */
GL_API gl_status gl_fits_write_cube(const char *path, const gl_cube *c, const gl_provenance *prov);

/* A table of double columns, written as CSV (one header line of column
 * names; NaN as an empty field) or as a FITS file with an empty primary HDU
 * and one binary-table extension named extname (columns "1D"). */
typedef struct gl_table {
    int ncols;
    long nrows;
    const char **names;      /* column names */
    const char **units;      /* may be NULL or hold NULL entries */
    const double **cols;     /* ncols arrays of nrows doubles */
    const gl_header *header; /* optional keywords for the FITS table HDU (NULL: none) */
} gl_table;

/* Write t to path (normally a temporary name from gl_outset_add); a failed
 * write leaves no file. Errors: GL_ERR_IO (naming path), GL_ERR_NOMEM. */
/* The same tables led by one column of text (label_name; labels holds
 * t->nrows strings: a target's name, a status), quoted in CSV where
 * RFC 4180 asks; in FITS a character column as wide as the longest label. */
GL_API gl_status gl_table_write_csv_labelled(const char *path, const gl_table *t,
                                             const char *label_name, const char *const *labels);
GL_API gl_status gl_table_write_fits_labelled(const char *path, const gl_table *t,
                                              const char *extname, const gl_provenance *prov,
                                              const char *label_name, const char *const *labels);
GL_API gl_status gl_table_write_csv(const char *path, const gl_table *t);

/* A CSV table read back: one header line of column names, then rows of
 * numbers (an empty or non-numeric field reads as NaN). data is row-major,
 * nrows x ncols. Free with gl_csv_free. */
typedef struct gl_csv {
    int ncols;
    long nrows;
    char **names;
    double *data;
} gl_csv;

/* Reads a CSV file written by gloam (or any with that layout).
 * Errors: GL_ERR_IO, GL_ERR_INPUT (no header line, a row with another number
 * of fields, naming the line). */
GL_API gl_status gl_csv_read(const char *path, gl_csv **out);
GL_API void gl_csv_free(gl_csv *t);
/* Index of a column by name, or -1. */
GL_API int gl_csv_column(const gl_csv *t, const char *name);
/* Reads the first table extension of a FITS file into the same structure
 * (numeric scalar columns; others, and nulls, read as NaN).
 * Errors: GL_ERR_IO, GL_ERR_INPUT (not FITS, no table extension). */
GL_API gl_status gl_table_read_fits(const char *path, gl_csv **out);
/* A table as CSV or as a FITS table (by the file's first bytes, "SIMPLE"). */
GL_API gl_status gl_table_read(const char *path, gl_csv **out);
GL_API gl_status gl_table_write_fits(const char *path, const gl_table *t, const char *extname,
                                     const gl_provenance *prov);

/* CRC-32 of a file's bytes (zlib). */
GL_API gl_status gl_file_crc32(const char *path, unsigned long *crc);

#ifdef __cplusplus
}
#endif
#endif
