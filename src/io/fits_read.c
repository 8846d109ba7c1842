/*
 * fits_read.c -- reading the science image or cube with cfitsio.
 *
 * The first HDU holding an image is used (primary, or the first image
 * extension, including tile-compressed ones, which cfitsio presents as
 * images). Pixels of any BITPIX are read as float with BSCALE/BZERO applied;
 * BLANK (integer) and NaN (float) pixels come back flagged and are stored as
 * NaN, the library's mark for "no data". Reading goes plane by plane so the
 * null-flag buffer stays small for large cubes.
 */
#include "core/internal.h"
#include "io/internal.h"

#include <errno.h>
#include <math.h>
#include <string.h>
#include <sys/stat.h>

gl_status gl_fits_error(gl_status st, const char *path, const char *what, int fstatus)
{
    char msg[FLEN_STATUS] = "";
    fits_get_errstatus(fstatus, msg);
    fits_clear_errmsg();
    return gl_error_set(st, "%s: %s (%s)", path, what, msg);
}

/* Opens path read-only after checking that it exists and is a regular file,
 * so that cfitsio's extended-filename syntax never applies to user paths. */
static gl_status open_readonly(const char *path, fitsfile **f)
{
    struct stat sb;
    if (stat(path, &sb) != 0)
        return gl_error_set(GL_ERR_IO, "%s: cannot open (%s)", path, strerror(errno));
    if (!S_ISREG(sb.st_mode))
        return gl_error_set(GL_ERR_INPUT, "%s: not a regular file", path);
    if (sb.st_size == 0)
        return gl_error_set(GL_ERR_INPUT, "%s: file is empty, not FITS", path);
    int status = 0;
    if (fits_open_diskfile(f, path, READONLY, &status)) {
        if (status == FILE_NOT_OPENED)
            return gl_error_set(GL_ERR_IO, "%s: cannot open", path);
        return gl_error_set(GL_ERR_INPUT, "%s: not a FITS file", path);
    }
    return GL_OK;
}

/* Moves to the first HDU with an image of at least one pixel; sets *hdu. */
static gl_status find_image_hdu(fitsfile *f, const char *path, int *hdu, int *naxis, long naxes[8],
                                int *bitpix)
{
    int nhdu = 0, status = 0;
    fits_get_num_hdus(f, &nhdu, &status);
    for (int i = 1; i <= nhdu && !status; i++) {
        int type = 0;
        if (fits_movabs_hdu(f, i, &type, &status))
            break;
        if (type != IMAGE_HDU)
            continue;
        int nax = 0;
        fits_get_img_param(f, 8, bitpix, &nax, naxes, &status);
        if (status)
            break;
        if (nax == 0)
            continue;
        if (nax > 8) /* naxes holds 8: the rest were not read */
            return gl_error_set(GL_ERR_INPUT,
                                "%s: HDU %d has %d axes; at most 4 (x, y, channel, frame)", path, i,
                                nax);
        *hdu = i;
        *naxis = nax;
        return GL_OK;
    }
    if (status)
        return gl_fits_error(GL_ERR_INPUT, path, "cannot read the HDU list", status);
    return gl_error_set(GL_ERR_INPUT, "%s: no image HDU (the file holds no image data)", path);
}

/* Copies the non-structural cards of the current HDU into h. */
static gl_status read_cards(fitsfile *f, const char *path, gl_header *h)
{
    int nkeys = 0, status = 0;
    if (fits_get_hdrspace(f, &nkeys, NULL, &status))
        return gl_fits_error(GL_ERR_INPUT, path, "cannot read the header", status);
    char card[FLEN_CARD], name[FLEN_KEYWORD];
    for (int i = 1; i <= nkeys; i++) {
        int len = 0;
        if (fits_read_record(f, i, card, &status))
            return gl_fits_error(GL_ERR_INPUT, path, "cannot read a header card", status);
        if (fits_get_keyname(card, name, &len, &status)) {
            status = 0;
            continue;
        }
        if (gl_header_is_structural(name))
            continue;
        /* boilerplate that cfitsio writes into every file it creates */
        if (strcmp(name, "COMMENT") == 0 &&
            (strstr(card, "FITS (Flexible Image Transport System) format") ||
             strstr(card, "and Astrophysics', volume 376") || strstr(card, "long string keyword") ||
             strstr(card, "continued over multiple keywords") ||
             strstr(card, "character at the end of each substring") ||
             strstr(card, "on the next keyword which has the name CONTINUE")))
            continue;
        if (strcmp(name, "LONGSTRN") == 0)
            continue;
        /* tile-compression bookkeeping keywords are not image metadata */
        if (name[0] == 'Z' && (strncmp(name, "ZNAXIS", 6) == 0 || strcmp(name, "ZBITPIX") == 0 ||
                               strncmp(name, "ZTILE", 5) == 0 || strcmp(name, "ZCMPTYPE") == 0 ||
                               strncmp(name, "ZNAME", 5) == 0 || strncmp(name, "ZVAL", 4) == 0 ||
                               strcmp(name, "ZSIMPLE") == 0 || strcmp(name, "ZEXTEND") == 0 ||
                               strcmp(name, "ZQUANTIZ") == 0 || strcmp(name, "ZDITHER0") == 0))
            continue;
        gl_status st = gl_header_add_card(h, card);
        if (st)
            return st;
    }
    return GL_OK;
}

gl_status gl_fits_read_cube(const char *path, int min_naxis, gl_cube **out)
{
    fitsfile *f = NULL;
    gl_cube *c = NULL;
    unsigned char *nulls = NULL;
    gl_status st;
    int status = 0;
    *out = NULL;

    if ((st = open_readonly(path, &f)))
        goto cleanup;

    int hdu = 0, naxis = 0, bitpix = 0;
    long naxes[8] = {0};
    if ((st = find_image_hdu(f, path, &hdu, &naxis, naxes, &bitpix)))
        goto cleanup;
    if (naxis < min_naxis) {
        st = gl_error_set(GL_ERR_INPUT, "%s: HDU %d is a %d-D image; a %s is needed", path, hdu,
                          naxis, min_naxis >= 3 ? "3-D cube (x, y, frame)" : "2-D image or a cube");
        goto cleanup;
    }
    /* trailing axes of length 1 beyond the 4th carry no data */
    while (naxis > 4 && naxes[naxis - 1] == 1)
        naxis--;
    if (naxis > 4) {
        st = gl_error_set(GL_ERR_INPUT, "%s: HDU %d has %d axes; at most 4 (x, y, channel, frame)",
                          path, hdu, naxis);
        goto cleanup;
    }
    for (int i = 0; i < naxis; i++) {
        if (naxes[i] < 1) {
            st = gl_error_set(GL_ERR_INPUT, "%s: HDU %d: axis %d is empty", path, hdu, i + 1);
            goto cleanup;
        }
    }
    long nx = naxes[0], ny = naxis > 1 ? naxes[1] : 1;
    long nchan = naxis == 4 ? naxes[2] : 1;
    long nframe = naxis == 4 ? naxes[3] : (naxis == 3 ? naxes[2] : 1);
    if ((st = gl_cube_new(nx, ny, nchan, nframe, &c)))
        goto cleanup;
    c->naxis = naxis < 2 ? 2 : naxis;
    c->bitpix = bitpix;
    if ((st = read_cards(f, path, c->header)))
        goto cleanup;

    size_t plane = gl_cube_plane_size(c);
    nulls = gl_malloc(plane);
    if (!nulls) {
        st = gl_error_nomem("null flags");
        goto cleanup;
    }
    size_t nplanes = (size_t)nchan * (size_t)nframe;
    for (size_t p = 0; p < nplanes; p++) {
        float *dst = c->data + p * plane;
        int anynul = 0;
        LONGLONG first = (LONGLONG)(p * plane) + 1;
        if (fits_read_imgnull(f, TFLOAT, first, (LONGLONG)plane, dst, (char *)nulls, &anynul,
                              &status)) {
            st = gl_fits_error(GL_ERR_INPUT, path, "cannot read the image data", status);
            goto cleanup;
        }
        if (anynul)
            for (size_t i = 0; i < plane; i++)
                if (nulls[i])
                    dst[i] = NAN;
        if (nplanes > 8)
            gl_progress("read", (long)p + 1, (long)nplanes);
    }
    *out = c;
    c = NULL;
    st = GL_OK;

cleanup:
    gl_free(nulls);
    gl_cube_free(c);
    if (f) {
        int s2 = 0;
        fits_close_file(f, &s2);
    }
    return st;
}

gl_status gl_fits_read_header(const char *path, gl_header **out)
{
    fitsfile *f = NULL;
    gl_header *h = NULL;
    gl_status st;
    *out = NULL;
    int hdu = 0, naxis = 0, bitpix = 0;
    long naxes[8] = {0};
    if ((st = open_readonly(path, &f)) ||
        (st = find_image_hdu(f, path, &hdu, &naxis, naxes, &bitpix)))
        goto cleanup;
    if (!(h = gl_header_new())) {
        st = gl_error_nomem("header");
        goto cleanup;
    }
    if ((st = read_cards(f, path, h)))
        goto cleanup;
    *out = h;
    h = NULL;
cleanup:
    gl_header_free(h);
    if (f) {
        int s2 = 0;
        fits_close_file(f, &s2);
    }
    return st;
}

gl_status gl_fits_image_info(const char *path, gl_fits_info *info)
{
    fitsfile *f = NULL;
    gl_status st;
    int status = 0;
    memset(info, 0, sizeof *info);
    info->bscale = 1;
    if ((st = open_readonly(path, &f)))
        return st;
    long naxes[8] = {0};
    if ((st = find_image_hdu(f, path, &info->hdu, &info->naxis, naxes, &info->bitpix)))
        goto cleanup;
    for (int i = 0; i < info->naxis && i < 8; i++)
        info->naxes[i] = naxes[i];
    char comm[FLEN_COMMENT];
    double d;
    LONGLONG ll;
    /* cfitsio reports a missing keyword as KEY_NO_EXIST; anything else is a
     * malformed value */
    if (fits_read_key(f, TDOUBLE, "BSCALE", &d, comm, &status) == 0) {
        info->has_bscale = 1;
        info->bscale = d;
    }
    status = 0;
    if (fits_read_key(f, TDOUBLE, "BZERO", &d, comm, &status) == 0) {
        info->has_bzero = 1;
        info->bzero = d;
    }
    status = 0;
    if (info->bitpix > 0 && fits_read_key(f, TLONGLONG, "BLANK", &ll, comm, &status) == 0) {
        info->has_blank = 1;
        info->blank = (long long)ll;
    }
    status = 0;
    char extname[FLEN_VALUE] = "";
    if (fits_read_key(f, TSTRING, "EXTNAME", extname, comm, &status) == 0)
        snprintf(info->extname, sizeof info->extname, "%s", extname);
    status = 0;
    fits_clear_errmsg();
    st = GL_OK;

cleanup:
    if (f) {
        int s2 = 0;
        fits_close_file(f, &s2);
    }
    return st;
}

/* ---- reading a cube piece by piece (the streamed subtraction) ---------- */

struct gl_fits_stream {
    fitsfile *f;
    char *path;
    long nx, ny, nchan, nframe;
    gl_header *header;
    unsigned char *nulls; /* one plane of null flags */
};

gl_status gl_fits_stream_open(const char *path, gl_fits_stream **out)
{
    gl_fits_stream *s = NULL;
    gl_status st;
    *out = NULL;
    s = gl_calloc(1, sizeof *s);
    if (!s)
        return gl_error_nomem("FITS stream");
    if ((st = open_readonly(path, &s->f)))
        goto fail;
    int hdu = 0, naxis = 0, bitpix = 0;
    long naxes[8] = {0};
    if ((st = find_image_hdu(s->f, path, &hdu, &naxis, naxes, &bitpix)))
        goto fail;
    while (naxis > 4 && naxes[naxis - 1] == 1)
        naxis--;
    if (naxis < 3 || naxis > 4) {
        st = gl_error_set(GL_ERR_INPUT,
                          "%s: HDU %d is a %d-D image; a 3-D cube (x, y, frame) is "
                          "needed",
                          path, hdu, naxis);
        goto fail;
    }
    for (int i = 0; i < naxis; i++)
        if (naxes[i] < 1) {
            st = gl_error_set(GL_ERR_INPUT, "%s: HDU %d: axis %d is empty", path, hdu, i + 1);
            goto fail;
        }
    s->nx = naxes[0];
    s->ny = naxes[1];
    s->nchan = naxis == 4 ? naxes[2] : 1;
    s->nframe = naxis == 4 ? naxes[3] : naxes[2];
    s->header = gl_header_new();
    s->path = gl_malloc(strlen(path) + 1);
    s->nulls = gl_malloc((size_t)s->nx * (size_t)s->ny);
    if (!s->header || !s->path || !s->nulls) {
        st = gl_error_nomem("FITS stream");
        goto fail;
    }
    memcpy(s->path, path, strlen(path) + 1);
    if ((st = read_cards(s->f, path, s->header)))
        goto fail;
    *out = s;
    return GL_OK;
fail:
    gl_fits_stream_close(s);
    return st;
}

void gl_fits_stream_close(gl_fits_stream *s)
{
    if (!s)
        return;
    if (s->f) {
        int s2 = 0;
        fits_close_file(s->f, &s2);
    }
    gl_header_free(s->header);
    gl_free(s->nulls);
    gl_free(s->path);
    gl_free(s);
}

void gl_fits_stream_shape(const gl_fits_stream *s, long *nx, long *ny, long *nchan, long *nframe)
{
    *nx = s->nx;
    *ny = s->ny;
    *nchan = s->nchan;
    *nframe = s->nframe;
}

const gl_header *gl_fits_stream_header(const gl_fits_stream *s)
{
    return s->header;
}

/* n pixels from pixel index first (0-based, over the whole cube) into dst,
 * null pixels as NaN (as gl_fits_read_cube reads them). */
static gl_status stream_read(gl_fits_stream *s, size_t first, size_t n, float *dst)
{
    int status = 0, anynul = 0;
    if (fits_read_imgnull(s->f, TFLOAT, (LONGLONG)first + 1, (LONGLONG)n, dst, (char *)s->nulls,
                          &anynul, &status))
        return gl_fits_error(GL_ERR_IO, s->path, "cannot read the image data", status);
    if (anynul)
        for (size_t i = 0; i < n; i++)
            if (s->nulls[i])
                dst[i] = NAN;
    return GL_OK;
}

gl_status gl_fits_stream_frames(gl_fits_stream *s, long f0, long nf, float *dst)
{
    size_t plane = (size_t)s->nx * (size_t)s->ny;
    if (s->nchan != 1 || f0 < 0 || nf < 0 || f0 + nf > s->nframe)
        return gl_error_set(GL_ERR_INTERNAL, "%s: frames %ld..%ld asked of %ld", s->path, f0,
                            f0 + nf - 1, s->nframe);
    for (long i = 0; i < nf; i++) {
        gl_status st = stream_read(s, (size_t)(f0 + i) * plane, plane, dst + (size_t)i * plane);
        if (st)
            return st;
    }
    return GL_OK;
}

gl_status gl_fits_stream_rows(gl_fits_stream *s, long y0, long nrows, float *dst)
{
    size_t plane = (size_t)s->nx * (size_t)s->ny, run = (size_t)nrows * (size_t)s->nx;
    if (s->nchan != 1 || y0 < 0 || nrows < 0 || y0 + nrows > s->ny)
        return gl_error_set(GL_ERR_INTERNAL, "%s: rows %ld..%ld asked of %ld", s->path, y0,
                            y0 + nrows - 1, s->ny);
    for (long i = 0; i < s->nframe; i++) {
        gl_status st = stream_read(s, (size_t)i * plane + (size_t)y0 * (size_t)s->nx, run,
                                   dst + (size_t)i * run);
        if (st)
            return st;
    }
    return GL_OK;
}
