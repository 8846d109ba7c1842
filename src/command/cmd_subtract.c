/*
 * cmd_subtract.c -- `gloam subtract`: starlight subtraction (classical ADI,
 * KLIP over the whole region or ring by ring, RDI, SDI/ASDI), derotation to north-up and
 * combination. Parses options into gl_subtract_params and calls
 * gl_subtract_run; writes the image (one plane per mode count) and, when
 * asked, the residual cubes, all or nothing.
 */
#include "command/subtract_options.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const char help[] =
    "usage: gloam subtract CUBE --angles FILE [--fwhm PX|--psf PSF.fits] --out RESULT.fits\n"
    "                      [options]\n\n"
    "Removes the star's speckle halo, derotates the residuals to north-up (east left)\n"
    "and combines them. RESULT.fits holds one plane per mode count, in the order given\n"
    "(one plane for --method median-frame or derotate-only).\n\n"
    "options:\n"
    "  --angles FILE          parallactic angles (deg), one per frame (default: the\n"
    "                         cube's ANGLES table, written by gloam align)\n"
    "  --out FILE             the north-up product\n"
    "  --psf FILE             the off-axis PSF, to measure the FWHM on (--fwhm auto; --psf\n"
    "                         alone implies it)\n"
    "  --residuals FILE       also write the derotated residual cube\n"
    "  --raw-residuals FILE   also write the residuals before derotation\n"
    "subtraction options:\n";

enum { OPT_ANGLES = CLI_OPT_FIRST_COMMAND_OPTION, OPT_OUT, OPT_RESID, OPT_RAW, OPT_PSF };

int cmd_subtract(gl_cli *cli, int argc, char **argv)
{
    static const struct option opts[] = {{"angles", required_argument, 0, OPT_ANGLES},
                                         {"out", required_argument, 0, OPT_OUT},
                                         {"residuals", required_argument, 0, OPT_RESID},
                                         {"raw-residuals", required_argument, 0, OPT_RAW},
                                         {"psf", required_argument, 0, OPT_PSF},
                                         CLI_SUBTRACT_OPTIONS,
                                         CLI_COMMON_OPTIONS,
                                         {0, 0, 0, 0}};
    const char *angles_path = NULL, *out_path = NULL, *resid_path = NULL, *raw_path = NULL;
    const char *psf_path = NULL;
    cli_subtract_setup setup;
    cli_subtract_setup_init(&setup);
    gl_subtract_params *pp = &setup.p;
    int c;
    char full_help[8192];
    snprintf(full_help, sizeof full_help, "%s%s%s", help, cli_subtract_help,
             cli_subtract_memory_help);

    int k;
    while ((k = cli_next_option(cli, argc, argv, opts, full_help, &c)) > 0) {
        int r;
        r = cli_subtract_option(cli, c, optarg, &setup);
        if (r < 0)
            return 1;
        if (r)
            continue;
        switch (c) {
        case OPT_ANGLES: angles_path = optarg; break;
        case OPT_OUT: out_path = optarg; break;
        case OPT_RESID: resid_path = optarg; break;
        case OPT_RAW: raw_path = optarg; break;
        case OPT_PSF: psf_path = optarg; break;
        default: return cli_bad_option(cli, argv);
        }
    }
    if (k < 0)
        return cli_exit_status(k);
    const char *cube_path = cli_positional(cli, argc, argv, "the input cube");
    if (!cube_path)
        return 1;
    if (!setup.have_fwhm) { /* --fwhm auto: measured on --psf, else the header's */
        pp->fwhm = CLI_FWHM_AUTO;
        setup.have_fwhm = 1;
    }
    if (psf_path && pp->fwhm > 0)
        return cli_usage(cli,
                         "--psf is read only to measure the FWHM (--fwhm auto); with --fwhm %g "
                         "it would not be used: give one of them",
                         pp->fwhm);
    {
        const char *names[] = {"--out"}; /* angles: cli_read_cube_angles */
        const void *vals[] = {out_path};
        if (cli_missing(cli, 1, names, vals))
            return 1;
    }
    if (cli_subtract_check(cli, &setup))
        return 1;
    char out_buf[4096]; /* --out DIR/: DIR/STEM.subtracted.fits (cli_output_name) */
    if (!(out_path = cli_output_name(cli, out_path, cube_path, ".subtracted.fits", out_buf,
                                     sizeof out_buf)))
        return 1;
    cli_start(cli);

    gl_cube *cube = NULL, *refs = NULL;
    gl_outset *outs = NULL;
    double *angles = NULL;
    gl_subtract_result res = {0};
    const char *tmp_out = NULL, *tmp_resid = NULL, *tmp_raw = NULL;
    gl_status st;

    pp->keep_residuals = resid_path != NULL;
    pp->keep_raw_residuals = raw_path != NULL;
    double limit = 0;
    int streamed = cli_subtract_needs_stream(&setup, cube_path, &limit);
    if (streamed)
        streamed = cli_subtract_stream_method(&setup, cube_path, limit);
    if (streamed) {
        /* larger than the memory limit: read from the file in blocks; a
         * stand-in cube of one pixel carries the header and the frame count
         * for the angle and FWHM rules */
        gl_fits_info info;
        if ((st = gl_fits_image_info(cube_path, &info)))
            goto cleanup;
        if (setup.refs_path || pp->sdi == GL_SDI_CHANNELS) {
            st = gl_error_set(GL_ERR_USAGE,
                              "%s: the cube does not fit in --memory-limit %.0f MB, and the "
                              "streamed path takes no --refs or --spectral",
                              cube_path, limit / 1e6);
            goto cleanup;
        }
        if ((st = gl_cube_new(1, 1, 1, info.naxes[info.naxis >= 4 ? 3 : 2], &cube)))
            goto cleanup;
        gl_header_free(cube->header);
        cube->header = NULL;
        if ((st = gl_fits_read_header(cube_path, &cube->header)) ||
            (st = gl_provenance_add_input(&cli->prov, cube_path)) ||
            (st = cli_read_angles_of(cli, cube_path, cube, angles_path, &angles)) ||
            (st = cli_resolve_fwhm(cli, &pp->fwhm, psf_path, 1, cube->header, cube_path)))
            goto cleanup;
    } else {
        if ((st = cli_read_cube_angles(cli, cube_path, angles_path, &cube, &angles)) ||
            (st = cli_resolve_fwhm(cli, &pp->fwhm, psf_path, 1, cube->header, cube_path)))
            goto cleanup;
        if ((st = cli_subtract_prepare(cli, &setup, cube_path, cube, &refs)))
            goto cleanup;
    }
    pp->angles_name = cli->angles_source;

    if ((st = gl_outset_new(cli->overwrite, &outs)) ||
        (st = gl_outset_add(outs, out_path, &cli->prov, &tmp_out)) ||
        (resid_path && (st = gl_outset_add(outs, resid_path, &cli->prov, &tmp_resid))) ||
        (raw_path && (st = gl_outset_add(outs, raw_path, &cli->prov, &tmp_raw))))
        goto cleanup;
    cli_work_started(cli);

    if (streamed) {
        char sense[72];
        st = gl_subtract_run_streamed(cube_path, angles, pp, limit, &res);
        if (!st && gl_header_get_str(cube->header, "GLROTSNS", sense, sizeof sense))
            st = gl_header_set_str(res.image->header, "GLROTSNS", sense,
                                   "sky turn on the detector as the angle grows");
    } else
        st = cli_subtract_run(&setup, cube_path, cube, angles, refs, &res);
    if (st)
        goto cleanup;
    if ((st = gl_fits_write_cube(tmp_out, res.image, &cli->prov)) ||
        (tmp_resid && (st = gl_fits_write_cube(tmp_resid, res.residuals, &cli->prov))) ||
        (tmp_raw && (st = gl_fits_write_cube(tmp_raw, res.raw_residuals, &cli->prov))) ||
        (st = gl_outset_commit(outs)))
        goto cleanup;
    char of[48] = ""; /* frames left out were named in a warning */
    if (res.nframes_used < cube->nframe)
        snprintf(of, sizeof of, " of %ld", cube->nframe);
    gl_log(GL_LOG_INFO, "%s: %s subtraction of %ld%s frames%s, %ld plane%s, from %.1f px out",
           out_path, gl_subtract_method_name(pp->method), res.nframes_used, of,
           res.nrefs_used ? " with reference frames" : "", res.image->nframe,
           res.image->nframe > 1 ? "s" : "", res.inner_radius);

cleanup:
    gl_outset_free(outs);
    gl_subtract_result_free(&res);
    gl_cube_free(cube);
    gl_cube_free(refs);
    gl_free(angles);
    return st ? cli_fail(cli, st) : 0;
}
