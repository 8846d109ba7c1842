/*
 * wcs_header.c -- the celestial WCS of a header, parsed once by wcslib
 * (wcspih, wcsset: Greisen & Calabretta 2002, A&A 395, 1061; Calabretta &
 * Greisen 2002, A&A 395, 1077) for every stage that needs it: observation
 * metadata (pixel scale), sky offsets of detections, and the north-up WCS of
 * subtraction products.
 *
 * Assumption: the carried cards are 80-character, blank-padded FITS cards
 * (gl_header_add_card pads them). Structural cards (NAXISn) are not carried,
 * so wcslib takes the number of axes from the highest axis number among the
 * WCS keywords; a cube whose header names a third axis (CTYPE3) but gives a
 * CD matrix for the celestial axes only gets CD3_3 = 0 from wcslib, a
 * singular matrix. Such a further axis is a unit axis (frame or channel
 * index), so its zero diagonal element is set to 1 before wcsset.
 */
#include "core/internal.h"
#include "io/internal.h"

#include <string.h>
#include <wcslib/wcs.h>
#include <wcslib/wcshdr.h>

gl_status gl_header_wcs_parse(const gl_header *h, int *nwcs, struct wcsprm **wcs)
{
    *nwcs = 0;
    *wcs = NULL;
    int n = h ? gl_header_ncards(h) : 0;
    if (n == 0)
        return GL_OK;
    char *buf = gl_malloc((size_t)n * 80 + 1);
    if (!buf)
        return gl_error_nomem("WCS header");
    for (int i = 0; i < n; i++)
        memcpy(buf + (size_t)i * 80, gl_header_card(h, i), 80);
    buf[(size_t)n * 80] = '\0';
    int nreject = 0, nw = 0;
    struct wcsprm *w = NULL;
    int ok = wcspih(buf, n, WCSHDR_all, 0, &nreject, &nw, &w) == 0 && nw > 0;
    gl_free(buf);
    if (ok && (w[0].altlin & 2))
        for (int k = 2; k < w[0].naxis; k++)
            if (w[0].cd[k * w[0].naxis + k] == 0.0)
                w[0].cd[k * w[0].naxis + k] = 1.0;
    ok = ok && wcsset(&w[0]) == 0 && w[0].lng >= 0 && w[0].lat >= 0;
    if (!ok) {
        if (w)
            wcsvfree(&nw, &w);
        return GL_OK;
    }
    *nwcs = nw;
    *wcs = w;
    return GL_OK;
}
