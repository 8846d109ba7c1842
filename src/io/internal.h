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

#endif
