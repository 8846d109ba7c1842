/*
 * report_json.c -- the inspect report as one JSON object, built with cJSON.
 * Numbers that could not be computed (NaN) are written as null, never as a
 * number; frame and channel indices count from 0, like pixel indices.
 */
#include "core/internal.h"
#include "gloam/inspect.h"

#include <cjson/cJSON.h>
#include <math.h>
#include <string.h>

/* Adds a number, or null when it is not finite. */
static void add_num(cJSON *o, const char *name, double v)
{
    if (isfinite(v))
        cJSON_AddNumberToObject(o, name, v);
    else
        cJSON_AddNullToObject(o, name);
}

static cJSON *range_json(const gl_inspect_range *rg)
{
    cJSON *o = cJSON_CreateObject();
    if (o) {
        add_num(o, "min", rg->min);
        add_num(o, "median", rg->median);
        add_num(o, "max", rg->max);
    }
    return o;
}

static void add_scaling(cJSON *o, const char *name, int present, double value)
{
    cJSON *s = cJSON_AddObjectToObject(o, name);
    if (!s)
        return;
    cJSON_AddBoolToObject(s, "present", present);
    add_num(s, "value", value);
}

static cJSON *header_json(const gl_obsinfo *h)
{
    cJSON *o = cJSON_CreateObject();
    if (!o)
        return NULL;
    cJSON *found = cJSON_AddArrayToObject(o, "found");
    char buf[sizeof h->found];
    snprintf(buf, sizeof buf, "%s", h->found);
    for (char *save = NULL, *tok = strtok_r(buf, " ", &save); tok && found;
         tok = strtok_r(NULL, " ", &save))
        cJSON_AddItemToArray(found, cJSON_CreateString(tok));
    cJSON_AddStringToObject(o, "date_obs", h->date_obs);
    add_num(o, "mjd_obs", h->mjd_obs);
    add_num(o, "exptime_s", h->exptime);
    add_num(o, "ra_deg", h->ra_deg);
    add_num(o, "dec_deg", h->dec_deg);
    cJSON *site = cJSON_AddObjectToObject(o, "site");
    if (site) {
        add_num(site, "latitude_deg", h->site_lat_deg);
        add_num(site, "longitude_deg", h->site_lon_deg);
        add_num(site, "height_m", h->site_height_m);
    }
    cJSON_AddStringToObject(o, "telescope", h->telescope);
    cJSON_AddStringToObject(o, "instrument", h->instrument);
    cJSON_AddStringToObject(o, "object", h->object);
    cJSON_AddStringToObject(o, "filter", h->filter);
    add_num(o, "wavelength_um", h->wavelength_um);
    cJSON_AddBoolToObject(o, "wcs", h->has_wcs);
    add_num(o, "pixscale_mas", h->pixscale_mas);
    add_num(o, "saturate", h->saturate);
    return o;
}

static cJSON *plane_json(const gl_inspect_plane *ps)
{
    cJSON *o = cJSON_CreateObject();
    if (!o)
        return NULL;
    cJSON_AddNumberToObject(o, "frame", (double)ps->frame);
    cJSON_AddNumberToObject(o, "channel", (double)ps->chan);
    cJSON_AddNumberToObject(o, "nan_pixels", (double)ps->nnan);
    add_num(o, "nan_fraction", ps->nan_fraction);
    add_num(o, "flux", ps->flux);
    add_num(o, "peak", ps->peak);
    add_num(o, "background_median", ps->bg_median);
    add_num(o, "background_sigma", ps->bg_sigma);
    cJSON_AddNumberToObject(o, "background_pixels", (double)ps->bg_count);
    cJSON_AddNumberToObject(o, "saturated_pixels", (double)ps->nsat);
    cJSON_AddBoolToObject(o, "empty", (ps->outlier & GL_INSPECT_OUT_EMPTY) != 0);
    return o;
}

static cJSON *outlier_json(const gl_inspect_plane *ps)
{
    cJSON *o = cJSON_CreateObject();
    if (!o)
        return NULL;
    cJSON_AddNumberToObject(o, "frame", (double)ps->frame);
    cJSON_AddNumberToObject(o, "channel", (double)ps->chan);
    cJSON *why = cJSON_AddArrayToObject(o, "reasons");
    static const struct {
        unsigned bit;
        const char *name;
    } reasons[] = {{GL_INSPECT_OUT_FLUX, "flux"},
                   {GL_INSPECT_OUT_BG_MEDIAN, "background_median"},
                   {GL_INSPECT_OUT_BG_SIGMA, "background_sigma"},
                   {GL_INSPECT_OUT_NAN, "nan_fraction"},
                   {GL_INSPECT_OUT_EMPTY, "empty"}};
    for (size_t k = 0; why && k < sizeof reasons / sizeof reasons[0]; k++)
        if (ps->outlier & reasons[k].bit)
            cJSON_AddItemToArray(why, cJSON_CreateString(reasons[k].name));
    return o;
}

static cJSON *angles_json(const gl_inspect_report *r)
{
    cJSON *o = cJSON_CreateObject();
    if (!o)
        return NULL;
    cJSON_AddStringToObject(o, "file", r->angles_path);
    cJSON_AddNumberToObject(o, "count", (double)r->nangles);
    add_num(o, "first_deg", r->angle_first_deg);
    add_num(o, "last_deg", r->angle_last_deg);
    add_num(o, "total_rotation_deg", r->rotation_deg);
    add_num(o, "fwhm_px", r->fwhm_px);
    cJSON_AddBoolToObject(o, "fwhm_assumed", r->fwhm_assumed);
    add_num(o, "separation_for_1_fwhm_px", r->sep_one_fwhm_px);
    cJSON *arr = cJSON_AddArrayToObject(o, "rotation_at_separation");
    for (int k = 0; arr && k < r->nseps; k++) {
        cJSON *e = cJSON_CreateObject();
        if (!e)
            break;
        add_num(e, "sep_px", r->sep_px[k]);
        add_num(e, "sep_fwhm", r->sep_px[k] / r->fwhm_px);
        add_num(e, "rotation_fwhm", r->rotation_fwhm[k]);
        cJSON_AddItemToArray(arr, e);
    }
    return o;
}

gl_status gl_inspect_report_json(const gl_inspect_report *r, char **json)
{
    *json = NULL;
    cJSON *o = cJSON_CreateObject();
    if (!o)
        return gl_error_nomem("JSON report");
    cJSON_AddStringToObject(o, "file", r->path);
    cJSON_AddNumberToObject(o, "hdu", r->fits.hdu);
    cJSON_AddStringToObject(o, "extname", r->fits.extname);
    cJSON *shape = cJSON_AddObjectToObject(o, "shape");
    if (shape) {
        cJSON_AddNumberToObject(shape, "nx", (double)r->nx);
        cJSON_AddNumberToObject(shape, "ny", (double)r->ny);
        cJSON_AddNumberToObject(shape, "channels", (double)r->nchan);
        cJSON_AddNumberToObject(shape, "frames", (double)r->nframe);
    }
    cJSON_AddNumberToObject(o, "naxis", r->fits.naxis);
    cJSON_AddNumberToObject(o, "bitpix", r->fits.bitpix);
    cJSON *scaling = cJSON_AddObjectToObject(o, "scaling");
    if (scaling) {
        add_scaling(scaling, "bscale", r->fits.has_bscale, r->fits.bscale);
        add_scaling(scaling, "bzero", r->fits.has_bzero, r->fits.bzero);
        add_scaling(scaling, "blank", r->fits.has_blank,
                    r->fits.has_blank ? (double)r->fits.blank : NAN);
    }
    add_num(o, "nan_fraction", r->nan_fraction);
    const gl_inspect_plane *w = &r->planes[r->worst_nan_plane];
    cJSON *worst = cJSON_AddObjectToObject(o, "nan_worst_frame");
    if (worst) {
        cJSON_AddNumberToObject(worst, "frame", (double)w->frame);
        cJSON_AddNumberToObject(worst, "channel", (double)w->chan);
        add_num(worst, "nan_fraction", w->nan_fraction);
    }
    cJSON *sat = cJSON_AddObjectToObject(o, "saturation");
    if (sat) {
        cJSON_AddStringToObject(sat, "rule", gl_saturation_rule_name(r->sat_rule));
        add_num(sat, "level", r->sat_level);
        if (r->sat_rule == GL_SAT_NONE)
            cJSON_AddNullToObject(sat, "pixels");
        else
            cJSON_AddNumberToObject(sat, "pixels", (double)r->nsat);
    }
    cJSON *bg = cJSON_AddObjectToObject(o, "background_region");
    if (bg) {
        cJSON_AddNumberToObject(bg, "center_x", r->center_x);
        cJSON_AddNumberToObject(bg, "center_y", r->center_y);
        cJSON_AddNumberToObject(bg, "inner_radius_px", r->bg_inner_px);
    }
    cJSON *sum = cJSON_AddObjectToObject(o, "summary");
    if (sum) {
        cJSON_AddItemToObject(sum, "flux", range_json(&r->flux));
        cJSON_AddItemToObject(sum, "background_median", range_json(&r->bg_median));
        cJSON_AddItemToObject(sum, "background_sigma", range_json(&r->bg_sigma));
    }
    cJSON *outl = cJSON_AddArrayToObject(o, "outliers");
    for (long i = 0; outl && i < r->nplanes; i++)
        if (r->planes[i].outlier)
            cJSON_AddItemToArray(outl, outlier_json(&r->planes[i]));
    cJSON *empty = cJSON_AddArrayToObject(o, "empty_frames");
    for (long i = 0; empty && i < r->nplanes; i++)
        if (r->planes[i].outlier & GL_INSPECT_OUT_EMPTY) {
            cJSON *e = cJSON_CreateObject();
            if (!e)
                break;
            cJSON_AddNumberToObject(e, "frame", (double)r->planes[i].frame);
            cJSON_AddNumberToObject(e, "channel", (double)r->planes[i].chan);
            cJSON_AddItemToArray(empty, e);
        }
    cJSON *frames = cJSON_AddArrayToObject(o, "frames");
    for (long i = 0; frames && i < r->nplanes; i++)
        cJSON_AddItemToArray(frames, plane_json(&r->planes[i]));
    if (r->has_angles)
        cJSON_AddItemToObject(o, "angles", angles_json(r));
    else
        cJSON_AddNullToObject(o, "angles");
    cJSON_AddItemToObject(o, "header", header_json(&r->obs));

    *json = cJSON_Print(o);
    cJSON_Delete(o);
    if (!*json)
        return gl_error_nomem("JSON report");
    return GL_OK;
}
