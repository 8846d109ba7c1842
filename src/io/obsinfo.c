/*
 * obsinfo.c -- observation metadata from a header: time (DATE-OBS, MJD-OBS,
 * EXPTIME), pointing (RA, DEC), site, instrument, filter and wavelength,
 * saturation level, and the celestial WCS, parsed by wcslib (gl_header_wcs_parse) rather than by
 * hand. Calendar dates become MJD through ERFA (eraDtf2d, UTC scale).
 */
#include "core/internal.h"
#include "io/internal.h"

#include <ctype.h>
#include <erfa.h>
#include <erfam.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <wcslib/wcs.h>
#include <wcslib/wcshdr.h>
#include <wcslib/wcsunits.h>

static void note_found(gl_obsinfo *info, const char *key)
{
    size_t len = strlen(info->found);
    snprintf(info->found + len, sizeof info->found - len, "%s%s", len ? " " : "", key);
}

/* First of a list of keywords that holds a number. */
static double first_dbl(const gl_header *h, gl_obsinfo *info, const char *const *keys)
{
    double v;
    for (int i = 0; keys[i]; i++)
        if (gl_header_get_dbl(h, keys[i], &v) && isfinite(v)) {
            note_found(info, keys[i]);
            return v;
        }
    return NAN;
}

static void first_str(const gl_header *h, gl_obsinfo *info, const char *const *keys, char *out,
                      size_t size)
{
    out[0] = '\0';
    for (int i = 0; keys[i]; i++)
        if (gl_header_get_str(h, keys[i], out, size) && out[0]) {
            note_found(info, keys[i]);
            return;
        }
}

/* Parses "[+-]a:b:c" or "a b c" sexagesimal into a number of units of a. */
static int parse_sexagesimal(const char *s, double *out)
{
    double a = 0, b = 0, c = 0;
    char sign = 0;
    while (isspace((unsigned char)*s))
        s++;
    if (*s == '-' || *s == '+')
        sign = *s++;
    if (sscanf(s, "%lf%*[: hd]%lf%*[: m']%lf", &a, &b, &c) < 2)
        return 0;
    double v = a + b / 60 + c / 3600;
    *out = sign == '-' ? -v : v;
    return 1;
}

/* An angle keyword given as a number of degrees or as sexagesimal text
 * (hours when hours != 0). */
static double angle_key(const gl_header *h, gl_obsinfo *info, const char *const *keys, int hours)
{
    for (int i = 0; keys[i]; i++) {
        double v;
        char s[72];
        if (gl_header_get_dbl(h, keys[i], &v) && isfinite(v)) {
            note_found(info, keys[i]);
            return v;
        }
        if (gl_header_get_str(h, keys[i], s, sizeof s) && parse_sexagesimal(s, &v)) {
            note_found(info, keys[i]);
            return hours ? v * 15 : v;
        }
    }
    return NAN;
}

/* MJD (UTC) of an ISO-8601 date "YYYY-MM-DD[Thh:mm:ss[.s]]", NaN if invalid. */
static double iso_to_mjd(const char *s)
{
    int y, mo, d, hh = 0, mi = 0;
    double sec = 0;
    int n = sscanf(s, "%d-%d-%d%*[T ]%d:%d:%lf", &y, &mo, &d, &hh, &mi, &sec);
    if (n < 3)
        return NAN;
    double d1, d2;
    if (eraDtf2d("UTC", y, mo, d, hh, mi, sec, &d1, &d2) < 0)
        return NAN;
    return (d1 - ERFA_DJM0) + d2;
}

/* Celestial WCS of a header through wcslib; sets has_wcs and pixscale_mas. */
static void parse_wcs(const gl_header *h, gl_obsinfo *info)
{
    int nwcs = 0;
    struct wcsprm *wcs = NULL;
    if (gl_header_wcs_parse(h, &nwcs, &wcs) != GL_OK || !wcs)
        return;
    const double *cd = wcs[0].pc, *cdelt = wcs[0].cdelt;
    int na = wcs[0].naxis, il = wcs[0].lng, ib = wcs[0].lat;
    /* linear part: CDELTi * PCij over the two celestial axes */
    double m00 = cdelt[il] * cd[il * na + il], m01 = cdelt[il] * cd[il * na + ib];
    double m10 = cdelt[ib] * cd[ib * na + il], m11 = cdelt[ib] * cd[ib * na + ib];
    double det = fabs(m00 * m11 - m01 * m10);
    if (det > 0) {
        info->has_wcs = 1;
        info->pixscale_mas = sqrt(det) * 3600e3;
        note_found(info, "WCS");
    }
    wcsvfree(&nwcs, &wcs);
}

/* The unit a keyword's comment gives in square brackets at its start
 * ("/ [nm] central wavelength", FITS Standard 4.0, section 4.3.2); "" when
 * none. Typed keywords are looked at before carried cards, as the getters do. */
static void comment_unit(const gl_header *h, const char *key, char *unit, size_t size)
{
    const char *comment = NULL;
    unit[0] = '\0';
    for (int k = 0; k < h->nkeys && !comment; k++)
        if (strcmp(h->keys[k].name, key) == 0)
            comment = h->keys[k].comment;
    size_t len = strlen(key);
    for (int c = 0; c < h->ncards && !comment; c++) {
        const char *card = h->cards[c];
        if (strncmp(card, key, len) == 0 && (card[len] == ' ' || card[len] == '=') &&
            strncmp(card + 8, "= ", 2) == 0) {
            const char *v = card + 10;
            while (*v == ' ')
                v++;
            if (*v == '\'') /* a text value: its own quotes first */
                for (v++; *v && !(*v == '\'' && v[1] != '\''); v += *v == '\'' ? 2 : 1)
                    ;
            comment = strchr(v, '/');
            comment = comment ? comment + 1 : "";
        }
    }
    if (!comment)
        return;
    while (*comment == ' ')
        comment++;
    const char *close = *comment == '[' ? strchr(comment, ']') : NULL;
    if (close)
        snprintf(unit, size, "%.*s", (int)(close - comment - 1), comment + 1);
}

/* The wavelength in micrometres: the unit in the keyword's comment converted
 * by wcslib (wcsunits); without one, micrometres below 100 and nanometres
 * above (no coronagraph observes at 100 um or at 100 nm). */
static double wavelength_key(const gl_header *h, gl_obsinfo *info)
{
    static const char *const keys[] = {"WAVELEN", "WAVELENG", "LAMBDA", NULL};
    for (int i = 0; keys[i]; i++) {
        double v, scale, offset, power;
        char unit[72];
        if (!gl_header_get_dbl(h, keys[i], &v) || !(v > 0) || !isfinite(v))
            continue;
        comment_unit(h, keys[i], unit, sizeof unit);
        if (!unit[0])
            v = v < 100 ? v : v * 1e-3;
        else if (wcsunits(unit, "um", &scale, &offset, &power) == 0 && offset == 0 && power == 1)
            v *= scale;
        else
            continue; /* a unit that is not a length */
        note_found(info, keys[i]);
        return v;
    }
    return NAN;
}

void gl_obsinfo_from_header(const gl_header *h, gl_obsinfo *info)
{
    memset(info, 0, sizeof *info);
    info->mjd_obs = info->exptime = info->ra_deg = info->dec_deg = NAN;
    info->site_lat_deg = info->site_lon_deg = info->site_height_m = NAN;
    info->pixscale_mas = info->saturate = info->wavelength_um = NAN;
    if (!h)
        return;

    static const char *const k_date[] = {"DATE-OBS", "DATE-BEG", NULL};
    static const char *const k_mjd[] = {"MJD-OBS", "MJD-BEG", NULL};
    static const char *const k_exp[] = {"EXPTIME", "EXPOSURE", "ITIME", NULL};
    static const char *const k_ra[] = {"RA", "OBJRA", "RA_OBJ", NULL};
    static const char *const k_dec[] = {"DEC", "OBJDEC", "DEC_OBJ", NULL};
    static const char *const k_lat[] = {"LATITUDE", "OBSGEO-B", "SITELAT", "LAT-OBS", NULL};
    static const char *const k_lon[] = {"LONGITUD", "OBSGEO-L", "SITELONG", "LONG-OBS", NULL};
    static const char *const k_hgt[] = {"OBSGEO-H", "ALTITUDE", "SITEELEV", NULL};
    static const char *const k_tel[] = {"TELESCOP", NULL};
    static const char *const k_ins[] = {"INSTRUME", NULL};
    static const char *const k_obj[] = {"OBJECT", NULL};
    static const char *const k_fil[] = {"FILTER", "FILTER1", NULL};
    static const char *const k_sat[] = {"SATURATE", "SATLEVEL", NULL};

    first_str(h, info, k_date, info->date_obs, sizeof info->date_obs);
    info->mjd_obs = first_dbl(h, info, k_mjd);
    if (!isfinite(info->mjd_obs) && info->date_obs[0])
        info->mjd_obs = iso_to_mjd(info->date_obs);
    info->exptime = first_dbl(h, info, k_exp);
    /* RA as a bare number is degrees (FITS practice); as text, hours */
    info->ra_deg = angle_key(h, info, k_ra, 1);
    info->dec_deg = angle_key(h, info, k_dec, 0);
    info->site_lat_deg = angle_key(h, info, k_lat, 0);
    info->site_lon_deg = angle_key(h, info, k_lon, 0);
    info->site_height_m = first_dbl(h, info, k_hgt);
    first_str(h, info, k_tel, info->telescope, sizeof info->telescope);
    first_str(h, info, k_ins, info->instrument, sizeof info->instrument);
    first_str(h, info, k_obj, info->object, sizeof info->object);
    first_str(h, info, k_fil, info->filter, sizeof info->filter);
    info->wavelength_um = wavelength_key(h, info);
    info->saturate = first_dbl(h, info, k_sat);
    parse_wcs(h, info);
}
