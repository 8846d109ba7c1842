/*
 * cmd_detect.c -- `gloam detect RESULT.fits --fwhm PX --out PREFIX`: S/N,
 * FPF and Gaussian-sigma maps of a north-up starlight-subtracted image (or one
 * plane of a cube of them) and the list of point-source candidates above a
 * threshold given in Gaussian sigma, with small-sample statistics.
 *
 * Products: PREFIX.snr.fits (S/N map; extensions FPF and SIGMA),
 * PREFIX.candidates.csv and .fits (best first), PREFIX.snr.png.
 */
#include "command/cli.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const char help[] =
    "usage: gloam detect RESULT.fits [--fwhm PX] --out PREFIX [options]\n"
    "\n"
    "S/N (two-sample Student t), false-positive-fraction and Gaussian-sigma maps of a\n"
    "north-up starlight-subtracted image, and the candidates above a threshold.\n"
    "The star is at pixel (nx/2, ny/2).\n"
    "\n"
    "  --fwhm PX|auto       PSF FWHM in pixels (apertures are 1 FWHM wide); default and\n"
    "                       auto: the FWHM gloam subtract recorded in RESULT.fits\n"
    "  --out PREFIX         writes PREFIX.snr.fits (HDUs SNR, FPF, SIGMA),\n"
    "                       PREFIX.candidates.csv, PREFIX.candidates.fits, PREFIX.snr.png\n"
    "  --plane K            plane of a 3-D input, 1-based (default 1)\n"
    "  --threshold SIGMA    detection threshold as a Gaussian sigma (default 5:\n"
    "                       FPF 2.867e-7 per test aperture), converted to Student t\n"
    "  --mask-radius PX     no detections closer to the star (default 1 FWHM)\n"
    "  --aperture-diameter PX   aperture diameter (default 1 FWHM)\n"
    "  --skip-flanking      leave out the two apertures flanking the test aperture\n"
    "                       (negative self-subtraction wings of ADI)\n"
    "  --merge-radius PX    maxima closer than this are one candidate (default 1 FWHM)\n"
    "  --pixscale MAS       pixel scale in mas (default: from the WCS, if any)\n"
    "  --every-plane        report each candidate's S/N in every plane (snr_plane1..N)\n"
    "  --title TEXT         title of PREFIX.snr.png (default: the input file and plane)\n";

enum {
    OPT_FWHM = CLI_OPT_FIRST_COMMAND_OPTION,
    OPT_OUT,
    OPT_PLANE,
    OPT_THRESHOLD,
    OPT_MASK,
    OPT_DIAM,
    OPT_EXCL,
    OPT_EXCL_OLD,
    OPT_MERGE,
    OPT_PIXSCALE,
    OPT_EVERY,
    OPT_TITLE
};

/* Prefixes the library's last message with the input file name. */
static int fail_file(gl_cli *cli, const char *path, gl_status st)
{
    return cli_fail(cli, cli_error_in_file(path, st));
}

int cmd_detect(gl_cli *cli, int argc, char **argv)
{
    static const struct option opts[] = {{"fwhm", required_argument, 0, OPT_FWHM},
                                         {"out", required_argument, 0, OPT_OUT},
                                         {"plane", required_argument, 0, OPT_PLANE},
                                         {"threshold", required_argument, 0, OPT_THRESHOLD},
                                         {"mask-radius", required_argument, 0, OPT_MASK},
                                         {"aperture-diameter", required_argument, 0, OPT_DIAM},
                                         {"skip-flanking", no_argument, 0, OPT_EXCL},
                                         {"exclude-adjacent", no_argument, 0, OPT_EXCL_OLD},
                                         {"merge-radius", required_argument, 0, OPT_MERGE},
                                         {"pixscale", required_argument, 0, OPT_PIXSCALE},
                                         {"every-plane", no_argument, 0, OPT_EVERY},
                                         {"title", required_argument, 0, OPT_TITLE},
                                         CLI_COMMON_OPTIONS,
                                         {0, 0, 0, 0}};
    gl_detect_params par;
    gl_detect_params_init(&par);
    const char *prefix = NULL, *title_given = NULL;
    long plane = 1;
    int every = 0, c;
    int k;
    while ((k = cli_next_option(cli, argc, argv, opts, help, &c)) > 0) {
        switch (c) {
        case OPT_FWHM:
            if (cli_parse_fwhm(cli, optarg, &par.fwhm))
                return 1;
            break;
        case OPT_OUT: prefix = optarg; break;
        case OPT_PLANE:
            if (cli_parse_long(cli, "--plane", optarg, 1, 1000000, &plane))
                return 1;
            break;
        case OPT_THRESHOLD:
            if (cli_parse_double(cli, "--threshold", optarg, 0.1, 30, &par.threshold_sigma))
                return 1;
            break;
        case OPT_MASK:
            if (cli_parse_double(cli, "--mask-radius", optarg, 0, 1e5, &par.mask_radius))
                return 1;
            break;
        case OPT_DIAM:
            if (cli_parse_double(cli, "--aperture-diameter", optarg, 0.1, 1e4, &par.diameter))
                return 1;
            break;
        case OPT_EXCL_OLD:
            cli_deprecated(cli, "--exclude-adjacent", "--skip-flanking");
            par.exclude_adjacent = 1;
            break;
        case OPT_EXCL: par.exclude_adjacent = 1; break;
        case OPT_MERGE:
            if (cli_parse_double(cli, "--merge-radius", optarg, 0, 1e5, &par.merge_radius))
                return 1;
            break;
        case OPT_PIXSCALE:
            if (cli_parse_double(cli, "--pixscale", optarg, 1e-3, 1e6, &par.pixscale_mas))
                return 1;
            break;
        case OPT_EVERY: every = 1; break;
        case OPT_TITLE: title_given = optarg; break;
        default: return cli_bad_option(cli, argv);
        }
    }
    if (k < 0)
        return cli_exit_status(k);
    const char *input = cli_positional(cli, argc, argv, "the input image (RESULT.fits)");
    if (!input)
        return 1;
    {
        const char *names[] = {"--out"};
        const void *vals[] = {prefix && *prefix ? prefix : NULL};
        if (cli_missing(cli, 1, names, vals))
            return 1;
    }
    cli_start(cli);

    int rc = 0;
    gl_status st = GL_OK;
    gl_cube *cube = NULL;
    gl_detect_maps *maps = NULL;
    gl_detect_sky *sky = NULL;
    gl_candidate *cand = NULL;
    gl_outset *out = NULL;
    long ncand = 0, nplanes = 0;
    char path_map[4096], path_csv[4096], path_tab[4096], path_png[4096];
    const char *tmp_map, *tmp_csv, *tmp_tab, *tmp_png;

    if ((st = gl_provenance_add_input(&cli->prov, input)) ||
        (st = gl_fits_read_cube(input, 2, &cube))) {
        rc = fail_file(cli, input, st);
        goto cleanup;
    }
    gl_provenance_add_observation(&cli->prov, cube->header);
    if ((st = cli_resolve_fwhm(cli, &par.fwhm, NULL, 0, cube->header, input))) {
        rc = cli_fail(cli, st);
        goto cleanup;
    }
    nplanes = cube->nchan * cube->nframe;
    if (plane > nplanes) {
        st =
            gl_error_set(GL_ERR_USAGE, "%s: --plane %ld is out of range: the image has %ld plane%s",
                         input, plane, nplanes, nplanes == 1 ? "" : "s");
        rc = cli_fail(cli, st);
        goto cleanup;
    }
    const long nx = cube->nx, ny = cube->ny;
    const float *img = cube->data + (size_t)(plane - 1) * gl_cube_plane_size(cube);
    if ((st = gl_detect_params_check(&par, nx, ny))) {
        rc = fail_file(cli, input, st);
        goto cleanup;
    }
    size_t nfinite = 0;
    for (size_t k = 0; k < gl_cube_plane_size(cube); k++)
        nfinite += !isnan(img[k]);
    if (nfinite == 0) {
        st = gl_error_set(GL_ERR_INPUT, "%s: plane %ld holds no data (every pixel is NaN)", input,
                          plane);
        rc = cli_fail(cli, st);
        goto cleanup;
    }

    if ((st = gl_outset_new(cli->overwrite, &out)) ||
        (st =
             cli_add_product(cli, out, prefix, ".snr.fits", path_map, sizeof path_map, &tmp_map)) ||
        (st = cli_add_product(cli, out, prefix, ".candidates.csv", path_csv, sizeof path_csv,
                              &tmp_csv)) ||
        (st = cli_add_product(cli, out, prefix, ".candidates.fits", path_tab, sizeof path_tab,
                              &tmp_tab)) ||
        (st = cli_add_product(cli, out, prefix, ".snr.png", path_png, sizeof path_png, &tmp_png))) {
        rc = cli_fail(cli, st);
        goto cleanup;
    }

    {
        /* a product of gloam subtract records its method (GLSMETH); without
         * it the input may be a raw or only aligned cube, whose star light
         * makes every S/N meaningless */
        char meth[72];
        if (!gl_header_get_str(cube->header, "GLSMETH", meth, sizeof meth))
            gl_log(GL_LOG_WARN,
                   "%s: not a product of gloam subtract (no GLSMETH record)%s: detect expects "
                   "a starlight-subtracted, north-up image; S/N on raw frames is not "
                   "meaningful",
                   input,
                   cube->naxis >= 3 && cube->nframe * cube->nchan > 1 ? ", and a cube of frames"
                                                                      : "");
    }
    if ((st = gl_detect_sky_new(cube->header, par.pixscale_mas, &sky)) ||
        (st = gl_detect_maps_compute(img, nx, ny, &par, &maps)) ||
        (st = gl_detect_candidates_find(img, nx, ny, maps, &par, sky, &cand, &ncand))) {
        rc = fail_file(cli, input, st);
        goto cleanup;
    }
    {
        /* data, but nowhere a ring of reference apertures: an empty map would
         * read as "nothing there" */
        size_t nsnr = 0;
        for (size_t k = 0; k < (size_t)nx * (size_t)ny; k++)
            nsnr += isfinite(maps->snr[k]);
        if (nsnr == 0) {
            double rlo = INFINITY, rhi = 0;
            for (long y = 0; y < ny; y++)
                for (long x = 0; x < nx; x++)
                    if (!isnan(img[y * nx + x])) {
                        double r = hypot((double)(x - nx / 2), (double)(y - ny / 2));
                        rlo = r < rlo ? r : rlo;
                        rhi = r > rhi ? r : rhi;
                    }
            st = gl_error_set(GL_ERR_INPUT,
                              "%s: plane %ld: no S/N anywhere: its %zu pixels with data, "
                              "%.1f-%.1f px from the star, hold no test aperture with a ring of "
                              "references around it (a subtraction whose inner radius left "
                              "too little? see its log)",
                              input, plane, nfinite, rlo, rhi);
            rc = cli_fail(cli, st);
            goto cleanup;
        }
    }
    cli_work_started(cli); /* the input is good: what was held is said */

    char title[512];
    snprintf(title, sizeof title, "%s  (plane %ld of %ld)", title_given ? title_given : input,
             plane, nplanes);
    if ((st = gl_detect_maps_write(tmp_map, maps, cube->header, &par, plane, &cli->prov)) ||
        (st = gl_detect_candidates_write(tmp_csv, tmp_tab, cand, ncand,
                                         every && nplanes > 1 ? cube : NULL, &par, &cli->prov)) ||
        (st = gl_detect_quicklook_write(tmp_png, maps, cand, ncand, &par, sky, title)) ||
        (st = gl_outset_commit(out))) {
        rc = cli_fail(cli, st);
        goto cleanup;
    }

    if (!cli->quiet) {
        fprintf(cli->out,
                "%ld candidate%s whose S/N-map peak passes %g sigma (FPF %.4g per test aperture) "
                "in %s plane %ld\n",
                ncand, ncand == 1 ? "" : "s", par.threshold_sigma,
                gl_detect_fpf_from_sigma(par.threshold_sigma), input, plane);
        if (ncand > 0)
            fprintf(cli->out,
                    "(position, S/N and significance at the fitted sub-pixel position, or at "
                    "the peak pixel where the fit failed, gauss_fit 0 in the table; the "
                    "S/N-map peak is in peak_x, peak_y, peak_snr)\n");
        if (ncand > 0)
            fprintf(cli->out, "%4s %9s %9s %8s %8s %8s %10s %8s\n", "rank", "x", "y", "sep_px",
                    "pa_deg", "snr", "fpf", "sigma");
        /* a peak that passes may fall below at the fitted position: say so */
        long nbelow = 0;
        for (long r = 0; r < ncand; r++) {
            int below = !(cand[r].stat.significance >= par.threshold_sigma);
            nbelow += below;
            fprintf(cli->out, "%4ld %9.3f %9.3f %8.3f %8.2f %8.2f %10.3g %8.2f%s\n", r + 1,
                    cand[r].x, cand[r].y, cand[r].sep_px, cand[r].pa_deg, cand[r].stat.t,
                    cand[r].stat.fpf, cand[r].stat.significance, below ? "  below" : "");
        }
        if (nbelow)
            fprintf(cli->out,
                    "(%ld marked below: under %g sigma at the fitted position, though the "
                    "S/N-map peak passes)\n",
                    nbelow, par.threshold_sigma);
    }

cleanup:
    gl_free(cand);
    gl_detect_maps_free(maps);
    gl_detect_sky_free(sky);
    gl_outset_free(out);
    gl_cube_free(cube);
    return rc;
}
