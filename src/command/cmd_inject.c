/*
 * cmd_inject.c -- `gloam inject`: plant fake companions into a sequence.
 */
#include "command/cli.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const char help[] =
    "usage: gloam inject CUBE [--angles FILE] --psf PSF.fits --companion "
    "SEP_PX:PA_DEG:CONTRAST...\n"
    "                    --out CUBE2.fits [options]\n\n"
    "Plants fake companions: the off-axis PSF times --psf-scale (its total flux is the\n"
    "star's flux per frame) times the contrast, moved with sub-pixel accuracy to where a\n"
    "source at that separation and sky position angle sits in each frame. Writes\n"
    "CUBE2.fits and the planted list CUBE2.planted.csv.\n\n"
    "options:\n"
    "  --angles FILE          parallactic angles (deg), one per frame (default: the\n"
    "                         cube's ANGLES table, written by gloam align)\n"
    "  --psf FILE             unsaturated off-axis PSF (2-D, or 3-D/4-D per channel)\n"
    "  --companion S:PA:C     separation (px), position angle (deg), contrast; repeatable;\n"
    "                         a negative contrast removes a known companion\n"
    "  --out FILE             the cube with companions\n"
    "  --psf-scale F          multiplies the PSF to the science exposure (default 1)\n"
    "  --north-offset DEG     true north offset of the detector (default 0)\n"
    "  --spectrum F1,F2,...   per-channel contrast multipliers for 4-D cubes (default "
    "flat)\n" CLI_ANGLE_HELP;

enum {
    OPT_ANGLES = CLI_OPT_FIRST_COMMAND_OPTION,
    OPT_PSF,
    OPT_COMP,
    OPT_OUT,
    OPT_SCALE,
    OPT_NORTH,
    OPT_SPECTRUM
};

#define MAX_COMPANIONS 256

/* CUBE2.fits -> CUBE2.planted.csv */
static void planted_name(const char *out, char *dst, size_t size)
{
    size_t len = strlen(out);
    const char *dot = strrchr(out, '.');
    const char *slash = strrchr(out, '/');
    if (dot && (!slash || dot > slash))
        len = (size_t)(dot - out);
    snprintf(dst, size, "%.*s.planted.csv", (int)len, out);
}

int cmd_inject(gl_cli *cli, int argc, char **argv)
{
    static const struct option opts[] = {{"angles", required_argument, 0, OPT_ANGLES},
                                         {"psf", required_argument, 0, OPT_PSF},
                                         {"companion", required_argument, 0, OPT_COMP},
                                         {"out", required_argument, 0, OPT_OUT},
                                         {"psf-scale", required_argument, 0, OPT_SCALE},
                                         {"north-offset", required_argument, 0, OPT_NORTH},
                                         {"spectrum", required_argument, 0, OPT_SPECTRUM},
                                         CLI_ANGLE_OPTION,
                                         CLI_COMMON_OPTIONS,
                                         {0, 0, 0, 0}};
    const char *angles_path = NULL, *psf_path = NULL, *out_path = NULL, *spectrum_text = NULL;
    gl_companion comps[MAX_COMPANIONS];
    int ncompanions = 0, c;
    double psf_scale = 1, north = 0;
    gl_status st;

    int k;
    while ((k = cli_next_option(cli, argc, argv, opts, help, &c)) > 0) {
        switch (c) {
        case OPT_ANGLES: angles_path = optarg; break;
        case OPT_PSF: psf_path = optarg; break;
        case OPT_OUT: out_path = optarg; break;
        case OPT_SPECTRUM: spectrum_text = optarg; break;
        case OPT_SCALE:
            if (cli_parse_positive(cli, "--psf-scale", optarg, &psf_scale))
                return 1;
            break;
        case OPT_NORTH:
            if (cli_parse_double(cli, "--north-offset", optarg, -360, 360, &north))
                return 1;
            break;
        case OPT_COMP:
            if (ncompanions == MAX_COMPANIONS)
                return cli_usage(cli, "at most %d companions", MAX_COMPANIONS);
            if ((st = gl_companion_parse(optarg, &comps[ncompanions])))
                return cli_fail(cli, st);
            ncompanions++;
            break;
        default: return cli_bad_option(cli, argv);
        }
    }
    if (k < 0)
        return cli_exit_status(k);
    const char *cube_path = cli_positional(cli, argc, argv, "the input cube");
    if (!cube_path)
        return 1;
    {
        const char *names[] = {"--psf", "--out", "--companion"};
        const void *vals[] = {psf_path, out_path, ncompanions ? names : NULL};
        if (cli_missing(cli, 3, names, vals))
            return 1;
    }
    char out_buf[4096];
    if (!(out_path =
              cli_output_name(cli, out_path, cube_path, ".injected.fits", out_buf, sizeof out_buf)))
        return 1;
    cli_start(cli);

    gl_cube *cube = NULL, *psfc = NULL;
    gl_psf_model *psf = NULL;
    gl_outset *outs = NULL;
    double *angles = NULL, *spectrum = NULL;
    char planted[4096];
    const char *tmp_cube, *tmp_csv;

    if ((st = cli_read_cube_angles(cli, cube_path, angles_path, &cube, &angles)) ||
        (st = cli_read_input(cli, psf_path, 2, &psfc)))
        goto cleanup;
    if (spectrum_text) {
        spectrum = gl_calloc((size_t)cube->nchan, sizeof *spectrum);
        if (!spectrum) {
            st = gl_error_nomem("spectrum");
            goto cleanup;
        }
        const char *p = spectrum_text;
        for (long i = 0; i < cube->nchan; i++) {
            char *end;
            spectrum[i] = strtod(p, &end);
            if (end == p || !(spectrum[i] >= 0) || (i < cube->nchan - 1 && *end != ',') ||
                (i == cube->nchan - 1 && *end)) {
                st = gl_error_set(GL_ERR_USAGE,
                                  "--spectrum '%s': expected %ld non-negative numbers separated by "
                                  "commas (one per channel)",
                                  spectrum_text, cube->nchan);
                goto cleanup;
            }
            p = end + 1;
        }
    }
    if ((st = gl_psf_model_new(psfc, psf_path, cube->nx, cube->ny, cube->nchan, psf_scale, &psf)))
        goto cleanup;

    planted_name(out_path, planted, sizeof planted);
    if ((st = gl_outset_new(cli->overwrite, &outs)) ||
        (st = gl_outset_add(outs, out_path, &cli->prov, &tmp_cube)) ||
        (st = gl_outset_add(outs, planted, &cli->prov, &tmp_csv)))
        goto cleanup;
    cli_work_started(cli);
    gl_log(GL_LOG_INFO, "PSF centre (%.3f, %.3f) in %s, FWHM %.2f px, star flux %.6g per frame",
           psf->centre_x, psf->centre_y, psf_path, psf->fwhm_px[0], psf->flux[0]);
    if ((st = gl_inject_companions(cube, angles, north, psf, comps, ncompanions, spectrum)))
        goto cleanup;

    gl_header_set_dbl(cube->header, "GLPSFSC", psf_scale, "PSF scale used for the fake companions");
    gl_header_set_dbl(cube->header, "GLNORTH", north, "[deg] north offset used");
    gl_header_set_int(cube->header, "GLNFAKE", ncompanions, "fake companions planted");
    for (int k = 0; k < ncompanions; k++) {
        char line[128];
        snprintf(line, sizeof line, "fake companion %d: sep %.4f px, PA %.4f deg, contrast %.6g",
                 k + 1, comps[k].sep_px, comps[k].pa_deg, comps[k].contrast);
        gl_header_add_history(cube->header, line);
    }
    if ((st = gl_fits_write_cube(tmp_cube, cube, &cli->prov)) ||
        (st = gl_angles_table_append(tmp_cube, angles, cube->nframe)))
        goto cleanup;

    if ((st = gl_inject_planted_write(tmp_csv, comps, ncompanions, angles[0], north, cube->nx,
                                      cube->ny, psf->flux[0] * (spectrum ? spectrum[0] : 1.0))))
        goto cleanup;
    if ((st = gl_outset_commit(outs)))
        goto cleanup;
    gl_log(GL_LOG_INFO, "planted %d companion%s into %s; list in %s", ncompanions,
           ncompanions > 1 ? "s" : "", out_path, planted);

cleanup:
    gl_outset_free(outs);
    gl_psf_model_free(psf);
    gl_cube_free(psfc);
    gl_cube_free(cube);
    gl_free(angles);
    gl_free(spectrum);
    return st ? cli_fail(cli, st) : 0;
}
