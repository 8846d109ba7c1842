/*
 * params.c -- defaults and validation of the simulation parameters, and the
 * parsers for the companion and coronagraph option texts.
 *
 * The defaults describe an extreme-AO coronagraphic instrument on a 7-m class
 * telescope in the H band (values from memory, common practice): 4 pixels per
 * lambda/D, 12 mas pixels, 30 nm rms static non-common-path error, four
 * quasi-static patterns of 15 nm rms drifting over 20-60 minutes, a 65 nm rms
 * fast AO residual (PSD f^-1.5) inside a 20 lambda/D control radius, averaged
 * over 24 independent screens per frame. These give a raw coronagraphic
 * contrast of about 1e-3 at 2-3 lambda/D and 1e-4 at 5-10 lambda/D (measured,
 * see docs/simulate.md), the regime of extreme-AO instruments (from memory,
 * common practice). The observation is an
 * invented night at an invented southern site: the target crosses the
 * meridian 20 degrees from the zenith, giving about 40 degrees of field
 * rotation in an hour.
 */
#include "sim/internal.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

void gl_sim_params_init(gl_sim_params *p)
{
    memset(p, 0, sizeof *p);
    p->size = 128;
    p->nframes = 48;
    p->seed = 1;
    p->nchan = 1;
    p->wavelength_um[0] = 1.65;
    p->sampling = 4.0;
    p->pixscale_mas = 12.0;
    p->obstruction = 0.14;
    p->nspiders = 4;
    p->spider_width = 0.006;
    p->spider_angle_deg = 45.0;
    p->coronagraph = GL_SIM_CORO_PERFECT;
    p->lyot_mask_ld = 2.0;
    p->lyot_stop = 0.90;
    p->static_nm = 30.0;
    p->static_index = 2.5;
    p->quasi_modes = 4;
    p->quasi_nm = 15.0;
    p->quasi_index = 2.5;
    p->quasi_period_min = 20.0;
    p->ao_nm = 65.0;
    p->ao_index = 1.5;
    p->control_radius_ld = 20.0;
    p->ao_outside_gain = 10.0;
    p->subexposures = 24;
    p->star_flux = 1e9;
    p->noise = 1;
    p->read_noise = 5.0;
    p->jitter_mas = 0.0;
    p->spots_ld = 0.0;
    p->spots_contrast = 2e-3;
    p->refs = 0;
    p->latitude_deg = -30.6;
    p->longitude_deg = -70.4;
    p->height_m = 2480.0;
    p->dec_deg = -51.0;
    p->ha_start_h = -0.5;
    p->exptime_s = 60.0;
    p->cadence_s = 75.0;
    snprintf(p->date_obs, sizeof p->date_obs, "2021-06-12T04:10:00");
    snprintf(p->target, sizeof p->target, "Veyra-3141");
    snprintf(p->site, sizeof p->site, "Loma Tenue Observatory");
}

#define BAD(...) gl_error_set(GL_ERR_USAGE, __VA_ARGS__)

gl_status gl_sim_params_check(const gl_sim_params *p)
{
    if (p->size < 8 || p->size > 4096)
        return BAD("size %ld: must be in [8, 4096] pixels", p->size);
    if (p->nframes < 1 || p->nframes > 100000)
        return BAD("frames %ld: must be in [1, 100000]", p->nframes);
    if (p->nchan < 1 || p->nchan > GL_SIM_MAX_CHANNELS)
        return BAD("wavelength channels %d: must be in [1, %d]", p->nchan, GL_SIM_MAX_CHANNELS);
    for (int c = 0; c < p->nchan; c++) {
        double l = p->wavelength_um[c];
        if (!(l >= 0.3 && l <= 30.0))
            return BAD("wavelength %g um: must be in [0.3, 30]", l);
        /* the focal plane must stay Nyquist-sampled for the intensity */
        if (c > 0 && !(l > p->wavelength_um[c - 1]))
            return BAD("wavelength %g um: list the channels from the shortest wavelength up", l);
        if (!(p->sampling * l / p->wavelength_um[0] >= 2.0))
            return BAD("wavelength %g um: %g pixels per lambda/D is below Nyquist (2); "
                       "list the shortest wavelength first or raise the sampling",
                       l, p->sampling * l / p->wavelength_um[0]);
    }
    if (!(p->sampling >= 2.0 && p->sampling <= 32.0))
        return BAD("sampling %g pixels per lambda/D: must be in [2, 32]", p->sampling);
    /* the PSF's FWHM is 1.03 lambda/D (Airy pattern, Born & Wolf sec. 8.5.2);
     * detect, limits and vet need frames of at least 4 FWHM */
    double fwhm = 1.03 * p->sampling;
    if ((double)p->size < 4 * fwhm)
        return BAD("--size %ld: frames under 4 FWHM wide (FWHM %.1f px at --sampling %g) leave "
                   "no room to detect anything; use --size %ld or more",
                   p->size, fwhm, p->sampling, (long)ceil(4 * fwhm));
    if (!(p->pixscale_mas > 0 && p->pixscale_mas < 1e5))
        return BAD("pixel scale %g mas: must be positive", p->pixscale_mas);
    if (!(p->obstruction >= 0 && p->obstruction < 0.9))
        return BAD("obstruction %g: must be in [0, 0.9) of the diameter", p->obstruction);
    if (p->nspiders < 0 || p->nspiders > 12)
        return BAD("spiders %d: must be in [0, 12]", p->nspiders);
    if (!(p->spider_width >= 0 && p->spider_width < 0.2))
        return BAD("spider width %g: must be in [0, 0.2) of the diameter", p->spider_width);
    if (!sim_coro_lookup(p->coronagraph))
        return BAD("unknown coronagraph model %d", (int)p->coronagraph);
    if (p->coronagraph == GL_SIM_CORO_LYOT) {
        if (!(p->lyot_mask_ld > 0 && p->lyot_mask_ld < 20))
            return BAD("Lyot mask radius %g lambda/D: must be in (0, 20)", p->lyot_mask_ld);
        if (!(p->lyot_stop > 0.3 && p->lyot_stop <= 1))
            return BAD("Lyot stop %g: must be in (0.3, 1] of the diameter", p->lyot_stop);
    }
    const double nm[] = {p->static_nm, p->quasi_nm, p->ao_nm};
    const char *nm_name[] = {"static error", "quasi-static error", "AO residual"};
    for (int i = 0; i < 3; i++)
        if (!(nm[i] >= 0 && nm[i] <= 2000))
            return BAD("%s %g nm: must be in [0, 2000]", nm_name[i], nm[i]);
    const double ix[] = {p->static_index, p->quasi_index, p->ao_index};
    for (int i = 0; i < 3; i++)
        if (!(ix[i] >= 0 && ix[i] <= 6))
            return BAD("PSD index %g: must be in [0, 6]", ix[i]);
    if (p->quasi_modes < 0 || p->quasi_modes > 64)
        return BAD("quasi-static patterns %d: must be in [0, 64]", p->quasi_modes);
    if (!(p->quasi_period_min > 0))
        return BAD("quasi-static period %g min: must be positive", p->quasi_period_min);
    if (!(p->control_radius_ld > 0) || !(p->ao_outside_gain >= 0))
        return BAD("AO control radius and gain must be positive");
    if (p->subexposures < 1 || p->subexposures > 1000)
        return BAD("sub-exposures %d: must be in [1, 1000]", p->subexposures);
    if (!(p->star_flux > 0 && p->star_flux < 1e15))
        return BAD("star flux %g: must be in (0, 1e15) electrons per frame", p->star_flux);
    if (!(p->read_noise >= 0 && p->read_noise < 1e6))
        return BAD("read noise %g: must be >= 0", p->read_noise);
    if (!(p->jitter_mas >= 0 && p->jitter_mas < 1e4))
        return BAD("jitter %g mas: must be >= 0", p->jitter_mas);
    if (!(p->spots_ld >= 0) ||
        (p->spots_ld > 0 && !(p->spots_contrast > 0 && p->spots_contrast < 0.1)))
        return BAD("satellite spots: separation must be >= 0 and contrast in (0, 0.1)");
    if (!(fabs(p->latitude_deg) < 90) || !(fabs(p->dec_deg) < 90))
        return BAD("latitude and declination must be within (-90, 90) degrees");
    if (!(fabs(p->longitude_deg) <= 360) || !isfinite(p->height_m))
        return BAD("longitude %g: must be within [-360, 360] degrees", p->longitude_deg);
    if (!(fabs(p->ha_start_h) <= 12))
        return BAD("start hour angle %g h: must be within [-12, 12]", p->ha_start_h);
    if (!(p->exptime_s > 0 && p->exptime_s < 1e5) || !(p->cadence_s >= p->exptime_s))
        return BAD("exposure %g s and cadence %g s: need 0 < exposure <= cadence", p->exptime_s,
                   p->cadence_s);
    if (p->ncompanions < 0 || p->ncompanions > GL_SIM_MAX_COMPANIONS)
        return BAD("companions %d: at most %d", p->ncompanions, GL_SIM_MAX_COMPANIONS);
    for (int i = 0; i < p->ncompanions; i++) {
        const gl_sim_companion *c = &p->companions[i];
        if (c->sep_px > 0.5 * (double)p->size - 1)
            return BAD("companion %d at %g px: outside the %ld-px frame (at most %g px from "
                       "the star)",
                       i + 1, c->sep_px, p->size, 0.5 * (double)p->size - 1);
        if (!(c->sep_px >= 0 && c->sep_px < 4096) || !isfinite(c->pa_deg) ||
            !(c->contrast > 0 && c->contrast <= 1))
            return BAD("companion %d (%g:%g:%g): need separation >= 0, finite angle and "
                       "0 < contrast <= 1",
                       i + 1, c->sep_px, c->pa_deg, c->contrast);
    }
    return GL_OK;
}

gl_status gl_sim_coronagraph_parse(const char *text, gl_sim_coronagraph *c)
{
    static const struct {
        const char *name;
        gl_sim_coronagraph v;
    } names[] = {
        {"none", GL_SIM_CORO_NONE}, {"perfect", GL_SIM_CORO_PERFECT}, {"lyot", GL_SIM_CORO_LYOT}};
    for (size_t i = 0; i < sizeof names / sizeof names[0]; i++)
        if (strcmp(text, names[i].name) == 0) {
            *c = names[i].v;
            return GL_OK;
        }
    return BAD("coronagraph '%s': expected none, perfect or lyot", text);
}
