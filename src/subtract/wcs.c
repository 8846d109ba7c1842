/*
 * wcs.c -- the world coordinates of a north-up product. The input's header
 * is parsed by wcslib (Greisen & Calabretta 2002, A&A 395, 1061; Calabretta
 * & Greisen 2002, A&A 395, 1077); the sky position of the star pixel
 * (nx/2, ny/2) and the pixel scale are kept, and the linear part becomes
 * north-up, east-left: CD1_1 = -s, CD2_2 = +s, CD1_2 = CD2_1 = 0, with CRPIX
 * at the star. "Simple" means a celestial pair on axes 1 and 2 with a square
 * pixel scale; anything else is dropped with a HISTORY note, since a rotated
 * product cannot keep a distortion or a non-celestial mix of axes.
 */
#include "io/internal.h"
#include "subtract/internal.h"

#include <math.h>
#include <stdio.h>
#include <string.h>
#include <wcslib/wcs.h>
#include <wcslib/wcshdr.h>

static void drop_linear_keys(gl_header *h)
{
    static const char *const keys[] = {"CD1_1",  "CD1_2",    "CD2_1",    "CD2_2",    "PC1_1",
                                       "PC1_2",  "PC2_1",    "PC2_2",    "CDELT1",   "CDELT2",
                                       "CROTA1", "CROTA2",   "CRPIX1",   "CRPIX2",   "CRVAL1",
                                       "CRVAL2", "PC001001", "PC001002", "PC002001", "PC002002"};
    for (size_t i = 0; i < sizeof keys / sizeof keys[0]; i++)
        gl_header_remove(h, keys[i]);
    /* axes 3 and 4 of the input (channel, frame) do not describe the
     * product's planes (mode counts) */
    static const char *const stems[] = {"CTYPE", "CRPIX", "CRVAL", "CDELT", "CUNIT", "CROTA"};
    char key[32];
    for (int a = 3; a <= 4; a++) {
        for (size_t i = 0; i < sizeof stems / sizeof stems[0]; i++) {
            snprintf(key, sizeof key, "%s%d", stems[i], a);
            gl_header_remove(h, key);
        }
        for (int b = 1; b <= 4; b++) {
            snprintf(key, sizeof key, "CD%d_%d", a, b);
            gl_header_remove(h, key);
            snprintf(key, sizeof key, "PC%d_%d", a, b);
            gl_header_remove(h, key);
            snprintf(key, sizeof key, "CD%d_%d", b, a);
            gl_header_remove(h, key);
            snprintf(key, sizeof key, "PC%d_%d", b, a);
            gl_header_remove(h, key);
        }
    }
}

gl_status sub_wcs_north_up(gl_header *h, long nx, long ny)
{
    int n = gl_header_ncards(h);
    char ctype1[72] = "";
    if (n == 0 || !gl_header_get_str(h, "CTYPE1", ctype1, sizeof ctype1))
        return GL_OK;
    int nwcs = 0, ok = 0;
    struct wcsprm *wcs = NULL;
    double sky[2] = {0, 0}, scale = 0;
    char t1[72] = "", t2[72] = "";
    gl_status st = gl_header_wcs_parse(h, &nwcs, &wcs);
    if (st)
        return st;
    if (wcs && wcs[0].lng == 0 && wcs[0].lat == 1) {
        struct wcsprm *w = &wcs[0];
        int na = w->naxis;
        double pix[4] = {0, 0, 0, 0}, img[4], phi, theta, world[4];
        int stat[1];
        pix[0] = (double)(nx / 2) + 1.0; /* FITS pixels are 1-based */
        pix[1] = (double)(ny / 2) + 1.0;
        for (int k = 2; k < na && k < 4; k++)
            pix[k] = w->crpix[k];
        if (na <= 4 && wcsp2s(w, 1, na, pix, img, &phi, &theta, world, stat) == 0) {
            double m00 = w->cdelt[0] * w->pc[0], m01 = w->cdelt[0] * w->pc[1];
            double m10 = w->cdelt[1] * w->pc[na], m11 = w->cdelt[1] * w->pc[na + 1];
            double s1 = hypot(m00, m10), s2 = hypot(m01, m11);
            if (s1 > 0 && fabs(s1 - s2) <= 1e-3 * s1) {
                sky[0] = world[0];
                sky[1] = world[1];
                scale = sqrt(fabs(m00 * m11 - m01 * m10));
                snprintf(t1, sizeof t1, "%.8s", w->ctype[0]);
                snprintf(t2, sizeof t2, "%.8s", w->ctype[1]);
                ok = 1;
            }
        }
    }
    if (wcs)
        wcsvfree(&nwcs, &wcs);
    drop_linear_keys(h);
    if (!ok)
        return gl_header_add_history(h, "input WCS not simple (celestial axes 1-2, square "
                                        "pixels): not carried to the north-up product");
    if (!st)
        st = gl_header_set_str(h, "CTYPE1", t1, "north-up, east-left");
    if (!st)
        st = gl_header_set_str(h, "CTYPE2", t2, NULL);
    if (!st)
        st = gl_header_set_dbl(h, "CRPIX1", (double)(nx / 2) + 1.0, "the star");
    if (!st)
        st = gl_header_set_dbl(h, "CRPIX2", (double)(ny / 2) + 1.0, "the star");
    if (!st)
        st = gl_header_set_dbl(h, "CRVAL1", sky[0], "deg");
    if (!st)
        st = gl_header_set_dbl(h, "CRVAL2", sky[1], "deg");
    if (!st)
        st = gl_header_set_dbl(h, "CD1_1", -scale, "deg/px, east to the left");
    if (!st)
        st = gl_header_set_dbl(h, "CD1_2", 0.0, NULL);
    if (!st)
        st = gl_header_set_dbl(h, "CD2_1", 0.0, NULL);
    if (!st)
        st = gl_header_set_dbl(h, "CD2_2", scale, "deg/px, north up");
    return st;
}
