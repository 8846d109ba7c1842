/*
 * header.c -- FITS keywords of the simulated products.
 *
 * Observation keywords follow the FITS standard and the WCS papers: DATE-OBS
 * and MJD-OBS (start of the first exposure, UTC), EXPTIME, RA/DEC (ICRS,
 * degrees), OBSGEO-B/L/H (geodetic site, Calabretta & Greisen / WCS paper VII
 * usage). The celestial WCS is a gnomonic (TAN) projection centred on the star
 * pixel (nx/2, ny/2), 0-based, with the orientation of frame 0: north lies at
 * 90 + theta_0 degrees counter-clockwise from +x (conventions.md), east to its
 * left. Greisen & Calabretta 2002 (A&A 395, 1061), eq. for PCi_j with CDELTi.
 * Later frames are rotated by their own parallactic angles (angles.txt).
 */
#include "sim/internal.h"

#include <math.h>
#include <stdio.h>

gl_status sim_header_fill(gl_header *h, const gl_sim_params *p, const sim_optics *o,
                          const sim_track *t, double angle0_deg, double telescope_m,
                          const char *what)
{
    gl_status st = GL_OK;
    char buf[96];
#define TRY(x)                                                                                     \
    do {                                                                                           \
        if ((st = (x)) != GL_OK)                                                                   \
            return st;                                                                             \
    } while (0)
    TRY(gl_header_set_str(h, "BUNIT", "electron", "photo-electrons per exposure"));
    TRY(gl_header_set_str(h, "OBJECT", p->target, "invented target (simulated data)"));
    snprintf(buf, sizeof buf, "%s %.1f-m", p->site, telescope_m);
    TRY(gl_header_set_str(h, "TELESCOP", buf, "invented telescope (simulated data)"));
    TRY(gl_header_set_str(h, "OBSERVAT", p->site, "invented observatory"));
    TRY(gl_header_set_str(h, "INSTRUME", "gloam simulate", "physical-optics simulation"));
    TRY(gl_header_set_str(h, "DATE-OBS", p->date_obs, "UTC start of the first exposure"));
    TRY(gl_header_set_dbl(h, "MJD-OBS", t->mjd0 - 0.5 * p->exptime_s / 86400.0,
                          "[d] MJD (UTC) start of the first exposure"));
    TRY(gl_header_set_dbl(h, "EXPTIME", p->exptime_s, "[s] exposure time per frame"));
    TRY(gl_header_set_dbl(h, "CADENCE", p->cadence_s, "[s] start-to-start frame interval"));
    TRY(gl_header_set_dbl(h, "RA", t->ra_deg, "[deg] right ascension (ICRS)"));
    TRY(gl_header_set_dbl(h, "DEC", p->dec_deg, "[deg] declination (ICRS)"));
    TRY(gl_header_set_str(h, "RADESYS", "ICRS", "reference system of RA and DEC"));
    TRY(gl_header_set_dbl(h, "OBSGEO-B", p->latitude_deg, "[deg] site geodetic latitude"));
    TRY(gl_header_set_dbl(h, "OBSGEO-L", p->longitude_deg, "[deg] site longitude, east +"));
    TRY(gl_header_set_dbl(h, "OBSGEO-H", p->height_m, "[m] site height"));
    TRY(gl_header_set_dbl(h, "HASTART", p->ha_start_h,
                          "[h] hour angle, middle of the first frame"));
    TRY(gl_header_set_dbl(h, "LSTSTART", t->lst0_deg / 15.0,
                          "[h] mean sidereal time, middle of first frame"));
    TRY(gl_header_set_dbl(h, "PIXSCAL", p->pixscale_mas, "[mas] pixel scale"));
    TRY(gl_header_set_dbl(h, "TELDIAM", telescope_m, "[m] telescope diameter"));
    if (p->nchan == 1) {
        TRY(gl_header_set_dbl(h, "WAVELEN", p->wavelength_um[0], "[um] wavelength"));
    } else {
        TRY(gl_header_set_int(h, "NCHAN", p->nchan, "wavelength channels (axis 3)"));
        for (int c = 0; c < p->nchan; c++) {
            char key[16];
            snprintf(key, sizeof key, "WAVEL%d", c + 1);
            snprintf(buf, sizeof buf, "[um] wavelength of channel %d", c + 1);
            TRY(gl_header_set_dbl(h, key, p->wavelength_um[c], buf));
        }
    }
    TRY(gl_header_set_dbl(h, "LAMBDAD", p->sampling,
                          "[pix] pixels per lambda/D at the first wavelength"));
    /* the parameters of the simulation */
    TRY(gl_header_set_int(h, "SIMSEED", (long)p->seed, "random seed"));
    TRY(gl_header_set_str(h, "SIMCORO", o->coro->name, "coronagraph model"));
    TRY(gl_header_set_dbl(h, "SIMSTAT", p->static_nm, "[nm] static error rms"));
    TRY(gl_header_set_int(h, "SIMQMOD", p->quasi_modes, "quasi-static patterns"));
    TRY(gl_header_set_dbl(h, "SIMQUAS", p->quasi_nm, "[nm] rms of each quasi-static pattern"));
    TRY(gl_header_set_dbl(h, "SIMAO", p->ao_nm, "[nm] AO residual rms inside control radius"));
    TRY(gl_header_set_int(h, "SIMNSUB", p->subexposures, "AO screens averaged per frame"));
    TRY(gl_header_set_dbl(h, "SIMFLUX", p->star_flux, "[electron] star flux per frame"));
    TRY(gl_header_set_bool(h, "SIMNOISE", p->noise, "photon and read noise added"));
    TRY(gl_header_set_dbl(h, "SIMRON", p->read_noise, "[electron] read noise rms"));
    TRY(gl_header_set_dbl(h, "SIMJITT", p->jitter_mas, "[mas] pointing jitter rms per axis"));
    if (p->spots_ld > 0) {
        TRY(gl_header_set_dbl(h, "SIMSPOTS", p->spots_ld, "[lambda/D] satellite-spot separation"));
        TRY(gl_header_set_dbl(h, "SIMSPOTC", p->spots_contrast, "satellite-spot contrast"));
    }
    /* celestial WCS for the orientation of frame 0 */
    double s = p->pixscale_mas / 3.6e6, th = angle0_deg * M_PI / 180.0;
    TRY(gl_header_set_int(h, "WCSAXES", 2, "celestial axes 1 and 2"));
    TRY(gl_header_set_str(h, "CTYPE1", "RA---TAN", "gnomonic projection"));
    TRY(gl_header_set_str(h, "CTYPE2", "DEC--TAN", "gnomonic projection"));
    TRY(gl_header_set_str(h, "CUNIT1", "deg", ""));
    TRY(gl_header_set_str(h, "CUNIT2", "deg", ""));
    TRY(gl_header_set_dbl(h, "CRPIX1", (double)(o->nx / 2) + 1.0, "star pixel (1-based)"));
    TRY(gl_header_set_dbl(h, "CRPIX2", (double)(o->ny / 2) + 1.0, "star pixel (1-based)"));
    TRY(gl_header_set_dbl(h, "CRVAL1", t->ra_deg, "[deg] star RA"));
    TRY(gl_header_set_dbl(h, "CRVAL2", p->dec_deg, "[deg] star DEC"));
    TRY(gl_header_set_dbl(h, "CDELT1", -s, "[deg] pixel scale, east to the left"));
    TRY(gl_header_set_dbl(h, "CDELT2", s, "[deg] pixel scale"));
    TRY(gl_header_set_dbl(h, "PC1_1", cos(th), "orientation of the first frame"));
    TRY(gl_header_set_dbl(h, "PC1_2", sin(th), ""));
    TRY(gl_header_set_dbl(h, "PC2_1", -sin(th), ""));
    TRY(gl_header_set_dbl(h, "PC2_2", cos(th), ""));
    TRY(gl_header_add_history(h, what));
    TRY(gl_header_add_history(h, "Simulated data: invented target, site and night."));
#undef TRY
    return st;
}
