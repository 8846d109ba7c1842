/*
 * fits_write.c -- writing float32 image products with cfitsio.
 *
 * A product header holds, in order: the structural keywords, the cards carried
 * from the input (minus any a product keyword replaces), the product's own
 * typed keywords, provenance (program, command line, inputs and their CRC-32)
 * as HISTORY and GLINPnn/GLCRCnn keywords, then CHECKSUM/DATASUM. Values are
 * formatted by cfitsio, so every product passes fitsverify.
 */
#include "core/internal.h"
#include "io/internal.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <string.h>
#include <unistd.h>

int gl_fits_write_provenance(fitsfile *f, const gl_provenance *prov, int *status)
{
    if (!prov)
        return *status;
    char key[FLEN_KEYWORD];
    if (prov->program)
        fits_update_key_str(f, "GLPROG", prov->program, "program that made this file", status);
    fits_write_date(f, status);
    if (prov->command) {
        /* long command lines go to HISTORY in 70-character pieces */
        fits_write_history(f, "command line:", status);
        size_t len = strlen(prov->command);
        char piece[71];
        for (size_t pos = 0; pos < len; pos += 70) {
            snprintf(piece, sizeof piece, "%.70s", prov->command + pos);
            fits_write_history(f, piece, status);
        }
    }
    for (int i = 0; i < prov->ninputs && i < 16; i++) {
        snprintf(key, sizeof key, "GLINP%02d", i + 1);
        fits_update_key_longstr(f, key, prov->inputs[i], "input file", status);
        snprintf(key, sizeof key, "GLCRC%02d", i + 1);
        char hex[16];
        snprintf(hex, sizeof hex, "%08lx", prov->crc32[i] & 0xffffffffUL);
        fits_update_key_str(f, key, hex, "CRC-32 of that input file (zlib)", status);
    }
    if (prov->ninputs > 0)
        fits_write_key_longwarn(f, status);
    return *status;
}

/* 1 for the provenance keywords of an earlier product (GLPROG, GLINPnn,
 * GLCRCnn): a new product lists its own inputs, and stale entries left over
 * from a product with more inputs would name files this one never read. */
static int is_provenance_key(const char *name)
{
    return strcmp(name, "GLPROG") == 0 ||
           ((strncmp(name, "GLINP", 5) == 0 || strncmp(name, "GLCRC", 5) == 0) &&
            strlen(name) == 7);
}

/* Writes the carried cards, typed keys and history of h into the current HDU.
 * A carried card is dropped when a typed key replaces it, for DATE (rewritten
 * by the provenance) and for earlier provenance when prov is given; the
 * CONTINUE cards of a dropped long string go with it. */
int gl_fits_write_header(fitsfile *f, const gl_header *h, const gl_provenance *prov, int *status)
{
    if (!h)
        return *status;
    char name[FLEN_KEYWORD], card[FLEN_CARD];
    int dropping = 0;
    for (int i = 0; i < h->ncards && !*status; i++) {
        int len = 0, s2 = 0;
        memcpy(card, h->cards[i], 81);
        fits_get_keyname(card, name, &len, &s2);
        if (strcmp(name, "CONTINUE") == 0) {
            if (!dropping)
                fits_write_record(f, card, status);
            continue;
        }
        int replaced = 0;
        for (int k = 0; k < h->nkeys; k++)
            if (strcmp(h->keys[k].name, name) == 0)
                replaced = 1;
        dropping = replaced || strcmp(name, "DATE") == 0 || (prov && is_provenance_key(name));
        if (!dropping)
            fits_write_record(f, card, status);
    }
    for (int k = 0; k < h->nkeys && !*status; k++) {
        const gl_key *key = &h->keys[k];
        const char *comm = key->comment[0] ? key->comment : NULL;
        switch (key->type) {
        case GL_KEY_STR: fits_update_key_str(f, key->name, key->sval, comm, status); break;
        case GL_KEY_DBL: fits_update_key_dbl(f, key->name, key->dval, -15, comm, status); break;
        case GL_KEY_INT: fits_update_key_lng(f, key->name, key->ival, comm, status); break;
        case GL_KEY_BOOL: fits_update_key_log(f, key->name, (int)key->ival, comm, status); break;
        }
    }
    for (int i = 0; i < h->nhistory && !*status; i++)
        fits_write_history(f, h->history[i], status);
    return *status;
}

gl_status gl_fits_write_cube(const char *path, const gl_cube *c, const gl_provenance *prov)
{
    fitsfile *f = NULL;
    int status = 0;

    long naxes[4];
    int naxis = c->naxis;
    if (naxis < 2)
        naxis = 2;
    if (naxis == 2 && (c->nchan > 1 || c->nframe > 1))
        naxis = c->nchan > 1 ? 4 : 3;
    if (naxis == 3 && c->nchan > 1)
        naxis = 4;
    naxes[0] = c->nx;
    naxes[1] = c->ny;
    if (naxis == 3) {
        naxes[2] = c->nframe * c->nchan;
    } else if (naxis == 4) {
        naxes[2] = c->nchan;
        naxes[3] = c->nframe;
    }
    /* path is a temporary name (gl_outset_add checked the destination); a
     * leftover from a crashed run is removed. The diskfile variant takes the
     * name literally, without cfitsio's extended-filename syntax. */
    unlink(path);
    if (fits_create_diskfile(&f, path, &status))
        return gl_fits_error(GL_ERR_IO, path, "cannot create", status);
    fits_create_img(f, FLOAT_IMG, naxis, naxes, &status);
    gl_fits_write_header(f, c->header, prov, &status);
    gl_fits_write_provenance(f, prov, &status);
    if (!status)
        fits_write_img(f, TFLOAT, 1, (LONGLONG)gl_cube_size(c), c->data, &status);
    if (!status)
        fits_write_chksum(f, &status);
    return gl_fits_finish(f, path, "cannot write", status);
}

gl_status gl_fits_finish(fitsfile *f, const char *path, const char *what, int status)
{
    if (status) {
        gl_status st = gl_fits_error(GL_ERR_IO, path, what, status);
        int s2 = 0;
        fits_close_file(f, &s2);
        unlink(path);
        return st;
    }
    if (fits_close_file(f, &status)) {
        unlink(path);
        return gl_fits_error(GL_ERR_IO, path, "cannot finish writing", status);
    }
    return GL_OK;
}
