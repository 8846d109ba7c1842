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

/* Writes a header's carried cards, typed keywords and HISTORY into the
 * current HDU (earlier provenance cards dropped when prov is given). */
int gl_fits_write_header(fitsfile *f, const gl_header *h, const gl_provenance *prov, int *status);

/* Writes the provenance of a product into the current HDU. */
int gl_fits_write_provenance(fitsfile *f, const gl_provenance *prov, int *status);

#endif
