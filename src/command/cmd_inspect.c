/*
 * cmd_inspect.c -- `gloam inspect CUBE [--angles FILE] [--fwhm PX] [--json]`:
 * a first look at a science cube. The numbers come from the library
 * (gl_inspect_report_new); this file parses options and prints either a
 * readable summary or the full report as one JSON object on the output stream (stdout for the
 * program). Nothing is written to disk.
 */
#include "command/cli.h"

#include <cjson/cJSON.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const char help[] =
    "usage: gloam inspect CUBE [--angles FILE] [--fwhm PX | --psf PSF.fits] [--json]\n\n"
    "Reports what a science cube holds: HDU, shape, BITPIX and scaling, NaN\n"
    "fraction, saturated pixels, per-frame flux and background (median and\n"
    "1.4826*MAD far from the star), outlier and empty (all-NaN) frames, field\n"
    "rotation, and the observation keywords found in the header. Writes no file;\n"
    "exits 0 whatever the data hold, 1 only when the input cannot be read.\n\n"
    "options:\n"
    "  --angles FILE      parallactic angles (degrees, one a line, or 1-D FITS;\n"
    "                     default: the cube's ANGLES table, if any)\n"
    "  --fwhm PX|auto     PSF FWHM for the rotation in FWHM (default: from --psf,\n"
    "                     else 4 px, assumed; auto: from --psf or the file's header)\n"
    "  --psf FILE         the off-axis PSF: its FWHM (azimuthal profile), centre and\n"
    "                     flux are measured and reported; the FWHM then replaces the\n"
    "                     assumed one (the value to give later commands as --fwhm)\n"
    "  --json             print the full report as one JSON object\n";

enum { OPT_ANGLES = CLI_OPT_FIRST_COMMAND_OPTION, OPT_FWHM, OPT_JSON, OPT_PSF };

static void print_range(FILE *o, const char *name, const gl_inspect_range *rg)
{
    if (isfinite(rg->median))
        fprintf(o, "  %-22s min %-12.6g median %-12.6g max %.6g\n", name, rg->min, rg->median,
                rg->max);
    else
        fprintf(o, "  %-22s n/a (no background pixels)\n", name);
}

static void print_text(FILE *f, const gl_inspect_report *r)
{
    const gl_fits_info *fi = &r->fits;
    fprintf(f, "file        %s\n", r->path);
    fprintf(f, "HDU         %d%s%s%s\n", fi->hdu, fi->hdu == 1 ? " (primary)" : " (extension)",
            fi->extname[0] ? ", EXTNAME " : "", fi->extname);
    fprintf(f, "shape       nx %ld, ny %ld, channels %ld, frames %ld (NAXIS %d)\n", r->nx, r->ny,
            r->nchan, r->nframe, fi->naxis);
    fprintf(f, "BITPIX      %d", fi->bitpix);
    if (fi->has_bscale || fi->has_bzero)
        fprintf(f, ", BSCALE %s%.10g, BZERO %s%.10g", fi->has_bscale ? "" : "(absent) ", fi->bscale,
                fi->has_bzero ? "" : "(absent) ", fi->bzero);
    else
        fprintf(f, ", no BSCALE/BZERO");
    if (fi->has_blank)
        fprintf(f, ", BLANK %lld", fi->blank);
    fprintf(f, "\n");
    const gl_inspect_plane *w = &r->planes[r->worst_nan_plane];
    fprintf(f, "NaN         %.4f%% of all pixels; worst frame %ld", 100 * r->nan_fraction,
            w->frame);
    if (r->nchan > 1)
        fprintf(f, " channel %ld", w->chan);
    fprintf(f, " (%.4f%%)\n", 100 * w->nan_fraction);
    if (r->sat_rule == GL_SAT_NONE)
        fprintf(f, "saturation  not assessed: %s\n", gl_saturation_rule_name(r->sat_rule));
    else
        fprintf(f, "saturation  %ld pixels >= %.10g (rule: %s)\n", r->nsat, r->sat_level,
                gl_saturation_rule_name(r->sat_rule));

    fprintf(f,
            "\nper frame (%ld planes; frames count from 0; background: r >= %.1f px from "
            "(%.0f, %.0f))\n",
            r->nplanes, r->bg_inner_px, r->center_x, r->center_y);
    if (r->nempty) {
        fprintf(
            f, "  empty frames           %ld (all NaN, no data; drop them before use):", r->nempty);
        long shown = 0;
        for (long i = 0; i < r->nplanes && shown < 20; i++) {
            const gl_inspect_plane *ps = &r->planes[i];
            if (!(ps->outlier & GL_INSPECT_OUT_EMPTY))
                continue;
            shown++;
            fprintf(f, " %ld", ps->frame);
            if (r->nchan > 1)
                fprintf(f, "/%ld", ps->chan);
        }
        fprintf(f, "%s\n", r->nempty > 20 ? " ..." : "");
    }
    print_range(f, "flux (sum)", &r->flux);
    print_range(f, "background median", &r->bg_median);
    print_range(f, "background sigma", &r->bg_sigma);
    if (r->noutliers == 0) {
        fprintf(f, "  outlier frames         none\n");
    } else {
        fprintf(f, "  outlier frames         %ld:", r->noutliers);
        long shown = 0;
        for (long i = 0; i < r->nplanes && shown < 20; i++) {
            const gl_inspect_plane *ps = &r->planes[i];
            if (!ps->outlier)
                continue;
            shown++;
            fprintf(f, " %ld", ps->frame);
            if (r->nchan > 1)
                fprintf(f, "/%ld", ps->chan);
            fprintf(f, "(%s%s%s%s%s)", ps->outlier & GL_INSPECT_OUT_FLUX ? "F" : "",
                    ps->outlier & GL_INSPECT_OUT_BG_MEDIAN ? "B" : "",
                    ps->outlier & GL_INSPECT_OUT_BG_SIGMA ? "S" : "",
                    ps->outlier & GL_INSPECT_OUT_NAN ? "N" : "",
                    ps->outlier & GL_INSPECT_OUT_EMPTY ? "E" : "");
        }
        fprintf(f,
                "%s\n  (F flux, B background level, S background noise, N missing data,"
                " E empty; --json lists all)\n",
                r->noutliers > 20 ? " ..." : "");
    }

    if (r->has_angles) {
        fprintf(f, "\nangles      %s: %ld, from %.4f to %.4f deg\n", r->angles_path, r->nangles,
                r->angle_first_deg, r->angle_last_deg);
        fprintf(f, "rotation    %.4f deg in all; FWHM %.3g px%s\n", r->rotation_deg, r->fwhm_px,
                r->fwhm_assumed ? " (assumed, not measured: give --fwhm or --psf)" : "");
        fprintf(f, "  separation    arc of the rotation\n");
        for (int k = 0; k < r->nseps; k++)
            fprintf(f, "  %6.1f px  %5.1f FWHM  %8.3f FWHM\n", r->sep_px[k],
                    r->sep_px[k] / r->fwhm_px, r->rotation_fwhm[k]);
        if (isfinite(r->sep_one_fwhm_px))
            fprintf(f, "  the rotation reaches 1 FWHM at %.1f px\n", r->sep_one_fwhm_px);
        else
            fprintf(f, "  no field rotation: angular differential imaging cannot work\n");
    } else {
        fprintf(f,
                "\nangles      none given: the field rotation is not known (give --angles FILE)\n");
    }

    const gl_obsinfo *o = &r->obs;
    fprintf(f, "\nheader      %s\n", o->found[0] ? o->found : "(none of the observation keywords)");
    if (o->date_obs[0])
        fprintf(f, "  DATE-OBS  %s\n", o->date_obs);
    if (isfinite(o->mjd_obs))
        fprintf(f, "  MJD-OBS   %.6f\n", o->mjd_obs);
    if (isfinite(o->exptime))
        fprintf(f, "  EXPTIME   %.6g s\n", o->exptime);
    if (isfinite(o->ra_deg) || isfinite(o->dec_deg))
        fprintf(f, "  RA, DEC   %.6f, %.6f deg\n", o->ra_deg, o->dec_deg);
    if (isfinite(o->site_lat_deg) || isfinite(o->site_lon_deg))
        fprintf(f, "  site      latitude %.5f, longitude %.5f deg (east +), height %.0f m\n",
                o->site_lat_deg, o->site_lon_deg, o->site_height_m);
    if (o->telescope[0] || o->instrument[0])
        fprintf(f, "  telescope %s, instrument %s\n", o->telescope[0] ? o->telescope : "?",
                o->instrument[0] ? o->instrument : "?");
    if (o->object[0])
        fprintf(f, "  object    %s\n", o->object);
    if (o->filter[0])
        fprintf(f, "  filter    %s\n", o->filter);
    if (isfinite(o->wavelength_um))
        fprintf(f, "  wavelength %.4g um\n", o->wavelength_um);
    if (o->has_wcs)
        fprintf(f, "  WCS       celestial; pixel scale %.4f mas\n", o->pixscale_mas);
    else
        fprintf(f, "  WCS       none (give --pixscale to later commands for arcsec)\n");
}

int cmd_inspect(gl_cli *cli, int argc, char **argv)
{
    static const struct option opts[] = {{"angles", required_argument, 0, OPT_ANGLES},
                                         {"fwhm", required_argument, 0, OPT_FWHM},
                                         {"json", no_argument, 0, OPT_JSON},
                                         {"psf", required_argument, 0, OPT_PSF},
                                         CLI_COMMON_OPTIONS,
                                         {0, 0, 0, 0}};
    gl_inspect_params p;
    gl_inspect_params_init(&p);
    const char *angles = NULL, *psf_path = NULL;
    int json = 0, c;
    int k;
    while ((k = cli_next_option(cli, argc, argv, opts, help, &c)) > 0) {
        switch (c) {
        case OPT_ANGLES: angles = optarg; break;
        case OPT_FWHM:
            if (cli_parse_fwhm(cli, optarg, &p.fwhm_px))
                return 1;
            p.fwhm_given = p.fwhm_px > 0; /* auto: from --psf, else the file's header */
            break;
        case OPT_JSON: json = 1; break;
        case OPT_PSF: psf_path = optarg; break;
        default: return cli_bad_option(cli, argv);
        }
    }
    if (k < 0)
        return cli_exit_status(k);
    const char *in = cli_positional(cli, argc, argv, "the cube to inspect");
    if (!in)
        return 1;
    cli_start(cli);

    gl_inspect_report *r = NULL;
    gl_psf_model *psf = NULL;
    char *text = NULL;
    gl_status st = GL_OK;
    if (psf_path) {
        /* the PSF measured on its own grid, with the code inject and limits use */
        if ((st = cli_psf_measure(cli, psf_path, &psf)))
            return cli_fail(cli, st);
        if (!p.fwhm_given) {
            p.fwhm_px = psf->fwhm_px[0];
            p.fwhm_given = 1;
        }
    }
    if (!p.fwhm_given && p.fwhm_px == CLI_FWHM_AUTO) {
        /* --fwhm auto without --psf: a FWHM recorded in the file's header */
        gl_cube *c = NULL;
        double v = 0;
        st = gl_fits_read_cube(in, 2, &c);
        if (!st)
            st = cli_resolve_fwhm(cli, &v, NULL, 1, c->header, in);
        gl_cube_free(c);
        if (st)
            return cli_fail(cli, st);
        p.fwhm_px = v;
        p.fwhm_given = 1;
    }
    st = gl_inspect_report_new(in, angles, &p, &r);
    if (st) {
        gl_psf_model_free(psf);
        return cli_fail(cli, st);
    }
    if (json) {
        st = gl_inspect_report_json(r, &text);
        cJSON *root = st ? NULL : cJSON_Parse(text);
        if (root && psf) {
            cJSON *o = cJSON_AddObjectToObject(root, "psf");
            cJSON_AddStringToObject(o, "file", psf_path);
            cJSON_AddNumberToObject(o, "fwhm_px", psf->fwhm_px[0]);
            cJSON_AddNumberToObject(o, "centre_x", psf->centre_x);
            cJSON_AddNumberToObject(o, "centre_y", psf->centre_y);
            cJSON_AddNumberToObject(o, "total_flux", psf->flux[0]);
            cJSON_AddNumberToObject(o, "peak", psf->peak[0]);
        }
        char *out = root ? cJSON_Print(root) : NULL;
        if (out)
            fprintf(cli->out, "%s\n", out);
        else if (!st)
            st = gl_error_set(GL_ERR_NOMEM, "out of memory (JSON report)");
        cJSON_free(out);
        cJSON_Delete(root);
        free(text);
    } else {
        print_text(cli->out, r);
        if (psf)
            fprintf(cli->out,
                    "PSF         %s: FWHM %.3f px (azimuthal profile), centre (%.3f, %.3f),\n"
                    "            total flux %.6g, peak %.6g (with --psf-scale 1)\n",
                    psf_path, psf->fwhm_px[0], psf->centre_x, psf->centre_y, psf->flux[0],
                    psf->peak[0]);
    }
    gl_psf_model_free(psf);
    gl_inspect_report_free(r);
    if (st)
        return cli_fail(cli, st);
    return 0;
}
