/*
 * parang.c -- parallactic angles from the headers. Each frame's mid-exposure
 * time is its start (from a per-frame time table, or the header start plus
 * frame number x cadence) plus half of EXPTIME. The ICRS direction (RA, DEC
 * keywords) goes to observed hour angle and declination with ERFA eraAtco13
 * (IAU SOFA: Earth rotation angle, precession-nutation, annual and diurnal
 * aberration, light deflection), refraction off (it does not change the hour
 * angle's relation to the parallactic angle beyond 0.01 degree away from the
 * horizon), UT1 taken as UTC and polar motion as zero (|UT1 - UTC| < 0.9 s is
 * below 0.004 degree of hour angle). eraHd2pa then gives the parallactic
 * angle (Meeus, Astronomical Algorithms, eq. 14.1):
 *   tan q = sin H / (tan(phi) cos(dec) - sin(dec) cos H).
 * Per-frame times: a binary-table extension of the cube file with a column
 * MJD (UTC start of each exposure, one row per frame) wins over the header;
 * otherwise frame i starts at the header start + i x cadence, the cadence
 * being the caller's, a CADENCE keyword (seconds), or EXPTIME.
 */
#include "align/internal.h"
#include "core/internal.h"
#include "io/internal.h"

#include <erfa.h>
#include <erfam.h>
#include <math.h>
#include <string.h>

gl_status gl_align_parang_from_header(const gl_header *h, long nframe, const gl_frame_times *times,
                                      double *angles, double *ha_deg, double *dec_deg)
{
    gl_obsinfo info;
    gl_obsinfo_from_header(h, &info);
    const char *missing = NULL;
    if (!times || !times->mjd_start) {
        if (!isfinite(info.mjd_obs))
            missing = "DATE-OBS or MJD-OBS (start of the first exposure)";
    }
    if (!missing && !isfinite(info.exptime))
        missing = "EXPTIME (exposure time per frame)";
    else if (!missing && !isfinite(info.ra_deg))
        missing = "RA (target right ascension)";
    else if (!missing && !isfinite(info.dec_deg))
        missing = "DEC (target declination)";
    else if (!missing && !isfinite(info.site_lat_deg))
        missing = "LATITUDE or OBSGEO-B (site latitude)";
    else if (!missing && !isfinite(info.site_lon_deg))
        missing = "LONGITUD or OBSGEO-L (site longitude)";
    if (missing)
        return gl_error_set(GL_ERR_INPUT, "parallactic angles: no %s in the header", missing);
    if (info.exptime < 0)
        return gl_error_set(GL_ERR_INPUT, "parallactic angles: EXPTIME %g is negative",
                            info.exptime);
    /* seconds between frame starts: the caller's, else a CADENCE keyword,
     * else back-to-back exposures */
    double cadence = info.exptime, hc;
    if (times && times->cadence_s > 0)
        cadence = times->cadence_s;
    else if (gl_header_get_dbl(h, "CADENCE", &hc) && hc > 0)
        cadence = hc;
    double height = isfinite(info.site_height_m) ? info.site_height_m : 0.0;
    double phi = info.site_lat_deg * ERFA_DD2R, elong = info.site_lon_deg * ERFA_DD2R;
    for (long f = 0; f < nframe; f++) {
        double start = times && times->mjd_start ? times->mjd_start[f]
                                                 : info.mjd_obs + (double)f * cadence / 86400.0;
        double mid = start + 0.5 * info.exptime / 86400.0;
        double aob, zob, hob, dob, rob, eo;
        int j =
            eraAtco13(info.ra_deg * ERFA_DD2R, info.dec_deg * ERFA_DD2R, 0, 0, 0, 0, ERFA_DJM0, mid,
                      0.0, elong, phi, height, 0, 0, 0, 0, 0, 0, &aob, &zob, &hob, &dob, &rob, &eo);
        if (j < 0)
            return gl_error_set(GL_ERR_INPUT,
                                "parallactic angles: frame %ld time MJD %.6f is "
                                "not a usable date",
                                f, mid);
        angles[f] = eraHd2pa(hob, dob, phi) * ERFA_DR2D;
        if (ha_deg)
            ha_deg[f] = hob * ERFA_DR2D;
        if (dec_deg)
            dec_deg[f] = dob * ERFA_DR2D;
    }
    return GL_OK;
}

gl_status gl_align_frame_times_read(const char *path, long nframe, double **mjd)
{
    fitsfile *f = NULL;
    int status = 0, nhdu = 0;
    gl_status st = GL_OK;
    *mjd = NULL;
    if (fits_open_file(&f, path, READONLY, &status))
        return gl_fits_error(GL_ERR_IO, path, "cannot open", status);
    fits_get_num_hdus(f, &nhdu, &status);
    for (int k = 2; k <= nhdu && !status; k++) {
        int type, col;
        if (fits_movabs_hdu(f, k, &type, &status))
            break;
        if (type != BINARY_TBL)
            continue;
        int cs = 0;
        if (fits_get_colnum(f, CASEINSEN, "MJD", &col, &cs))
            continue;
        long nrows = 0;
        fits_get_num_rows(f, &nrows, &status);
        if (status)
            break;
        if (nrows != nframe) {
            st = gl_error_set(GL_ERR_INPUT,
                              "%s: time table (HDU %d) has %ld rows but the cube "
                              "has %ld frames",
                              path, k, nrows, nframe);
            goto cleanup;
        }
        double *t = gl_malloc((size_t)nframe * sizeof *t);
        if (!t) {
            st = gl_error_nomem("frame times");
            goto cleanup;
        }
        double nulv = NAN;
        int anynul = 0;
        fits_read_col(f, TDOUBLE, col, 1, 1, nrows, &nulv, t, &anynul, &status);
        if (status) {
            gl_free(t);
            break;
        }
        for (long i = 0; i < nframe; i++)
            if (!isfinite(t[i])) {
                gl_free(t);
                st = gl_error_set(GL_ERR_INPUT, "%s: time table row %ld has no valid MJD", path,
                                  i + 1);
                goto cleanup;
            }
        *mjd = t;
        goto cleanup;
    }
    if (status)
        st = gl_fits_error(GL_ERR_INPUT, path, "reading the time table", status);
cleanup:
    status = 0;
    fits_close_file(f, &status);
    return st;
}
