/*
 * sky.c -- where a detection lies on the sky: the pixel scale (from the WCS,
 * or given), offsets east and north of the star on the tangent plane, and
 * the directions of north and east on the image for plots.
 *
 * The celestial WCS is parsed by wcslib (wcspih, wcsp2s: Greisen & Calabretta
 * 2002; Calabretta & Greisen 2002); the offsets are the gnomonic standard
 * coordinates of the candidate about the star's sky position (ERFA eraTpxes),
 * so they stay exact far from the celestial equator.
 */
#include "core/internal.h"
#include "detect/internal.h"
#include "io/internal.h"

#include <erfa.h>
#include <erfam.h>
#include <math.h>
#include <string.h>
#include <wcslib/wcs.h>
#include <wcslib/wcshdr.h>

struct gl_detect_sky {
    double pixscale_mas;
    struct wcsprm *wcs; /* NULL without a celestial WCS */
    int nwcs;
};

gl_status gl_detect_sky_new(const gl_header *h, double pixscale_mas, gl_detect_sky **out)
{
    gl_status st = GL_OK;
    *out = NULL;
    gl_detect_sky *s = gl_calloc(1, sizeof *s);
    if (!s)
        return gl_error_nomem("sky geometry");
    gl_obsinfo info;
    gl_obsinfo_from_header(h, &info);
    s->pixscale_mas = isfinite(pixscale_mas) ? pixscale_mas : info.pixscale_mas;
    if (info.has_wcs && (st = gl_header_wcs_parse(h, &s->nwcs, &s->wcs)))
        goto cleanup;
    *out = s;
    s = NULL;
cleanup:
    gl_detect_sky_free(s);
    return st;
}

void gl_detect_sky_free(gl_detect_sky *s)
{
    if (!s)
        return;
    if (s->wcs)
        wcsvfree(&s->nwcs, &s->wcs);
    gl_free(s);
}

double gl_detect_sky_pixscale(const gl_detect_sky *s)
{
    return s ? s->pixscale_mas : NAN;
}

int gl_detect_sky_has_wcs(const gl_detect_sky *s)
{
    return s && s->wcs;
}

/* World coordinates (radians) of 0-based pixel (x, y); 0 on failure. */
static int pix2world(const gl_detect_sky *s, double x, double y, double *lng, double *lat)
{
    struct wcsprm *w = &s->wcs[0];
    double pix[16], img[16], wrl[16], phi, theta;
    int stat;
    if (w->naxis > 16)
        return 0;
    for (int k = 0; k < w->naxis; k++)
        pix[k] = 1.0; /* further axes: their first pixel */
    pix[0] = x + 1.0;
    pix[1] = y + 1.0;
    if (wcsp2s(w, 1, w->naxis, pix, img, &phi, &theta, wrl, &stat) != 0)
        return 0;
    *lng = wrl[w->lng] * ERFA_DD2R;
    *lat = wrl[w->lat] * ERFA_DD2R;
    return isfinite(*lng) && isfinite(*lat);
}

int gl_detect_sky_offsets(const gl_detect_sky *s, double x, double y, double sx, double sy,
                          double *dra_arcsec, double *ddec_arcsec)
{
    *dra_arcsec = *ddec_arcsec = NAN;
    if (!gl_detect_sky_has_wcs(s))
        return 0;
    double a, b, a0, b0, xi, eta;
    if (!pix2world(s, x, y, &a, &b) || !pix2world(s, sx, sy, &a0, &b0))
        return 0;
    if (eraTpxes(a, b, a0, b0, &xi, &eta) != 0)
        return 0;
    *dra_arcsec = xi * ERFA_DR2AS;
    *ddec_arcsec = eta * ERFA_DR2AS;
    return 1;
}

void gl_detect_sky_compass(const gl_detect_sky *s, double sx, double sy, double north[2],
                           double east[2])
{
    north[0] = 0;
    north[1] = 1;
    east[0] = -1;
    east[1] = 0;
    double e1, n1, e2, n2;
    if (!gl_detect_sky_offsets(s, sx + 1, sy, sx, sy, &e1, &n1) ||
        !gl_detect_sky_offsets(s, sx, sy + 1, sx, sy, &e2, &n2))
        return;
    /* J maps a pixel step to (east, north); its inverse maps directions back */
    double det = e1 * n2 - e2 * n1;
    if (!(fabs(det) > 0))
        return;
    double nx = -e2 / det, ny = e1 / det; /* J^-1 (0, 1) */
    double ex = n2 / det, ey = -n1 / det; /* J^-1 (1, 0) */
    double ln = hypot(nx, ny), le = hypot(ex, ey);
    north[0] = nx / ln;
    north[1] = ny / ln;
    east[0] = ex / le;
    east[1] = ey / le;
}
