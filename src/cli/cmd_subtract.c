/*
 * cmd_subtract.c -- `gloam subtract`: starlight subtraction (classical ADI,
 * full-frame and annular KLIP, RDI, SDI/ASDI), derotation to north-up and
 * combination. Parses options into gl_subtract_params and calls
 * gl_subtract_run; writes the image (one plane per mode count) and, when
 * asked, the residual cubes, all or nothing.
 */
#include "cli/cli.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const char help[] =
    "usage: gloam subtract CUBE --angles FILE --fwhm PX --out RESULT.fits [options]\n\n"
    "Removes the star's speckle halo, derotates the residuals to north-up (east left)\n"
    "and combines them. RESULT.fits holds one plane per mode count, in the order given\n"
    "(one plane for --method median or none).\n\n"
    "options:\n"
    "  --angles FILE          parallactic angles (deg), one per frame\n"
    "  --fwhm PX              PSF full width at half maximum, pixels (> 0)\n"
    "  --out FILE             the north-up product\n"
    "  --method NAME          median | pca | annular | none (default pca)\n"
    "                           median: frame minus the median frame (classical ADI)\n"
    "                           pca: full-frame KLIP, one basis for every mode count\n"
    "                           annular: KLIP ring by ring with a rotation gap\n"
    "                           none: derotate and combine only\n"
    "  --modes K1,K2,...      KL mode counts, one output plane each (default 5)\n"
    "  --mask-radius PX       inner mask: pixels closer to the star are left out (default 0)\n"
    "  --outer-radius PX      outer edge of the region (default: largest circle in the frame)\n"
    "  --ring W               annulus width, FWHM (annular, median fit; default 1)\n"
    "  --sectors N            azimuthal sectors per annulus (annular; default 1)\n"
    "  --gap G                least rotation between a frame and its references, FWHM of arc\n"
    "                         at the annulus (annular; default 0.75)\n"
    "  --nearest N            keep only the N qualifying frames nearest in angle (annular)\n"
    "  --median-fit           scale the median frame ring by ring (median)\n"
    "  --centre MODE          frame | temporal: mean removed before the KL basis\n"
    "                         (default frame: each frame minus its own mean)\n"
    "  --north-offset DEG     true north offset of the detector (default 0)\n"
    "  --interp NAME          derotation: fft (default) | cubic\n"
    "  --combine NAME         median (default) | mean | weighted (inverse residual variance)\n"
    "  --refs FILE            reference-star cube for RDI (same frame size)\n"
    "  --refs-use WHAT        refs (default: basis from the references alone) | both\n"
    "  --refs-best N          keep the N reference frames best correlated with the science\n"
    "  --sdi                  spectral step for 4-D cubes before the ADI step (ASDI)\n"
    "  --wavelengths L1,...   one wavelength per channel (default: the header's WAVE axis)\n"
    "  --sdi-modes K          KL modes of the spectral step (default 1)\n"
    "  --residuals FILE       also write the derotated residual cube\n"
    "  --raw-residuals FILE   also write the residuals before derotation\n";

enum {
    OPT_ANGLES = CLI_OPT_FIRST_COMMAND_OPTION,
    OPT_FWHM,
    OPT_OUT,
    OPT_METHOD,
    OPT_MODES,
    OPT_MASK,
    OPT_OUTER,
    OPT_RING,
    OPT_SECTORS,
    OPT_GAP,
    OPT_NEAREST,
    OPT_MEDFIT,
    OPT_CENTRE,
    OPT_NORTH,
    OPT_INTERP,
    OPT_COMBINE,
    OPT_REFS,
    OPT_REFS_USE,
    OPT_REFS_BEST,
    OPT_SDI,
    OPT_WAVES,
    OPT_SDI_MODES,
    OPT_RESID,
    OPT_RAW
};

/* Parses "a,b,c" into up to max doubles; returns the count or -1. */
static int parse_list(const char *text, double *vals, int max)
{
    int n = 0;
    const char *p = text;
    while (*p) {
        char *end;
        errno = 0;
        double v = strtod(p, &end);
        if (end == p || errno || !isfinite(v) || n == max)
            return -1;
        vals[n++] = v;
        if (*end == ',')
            end++;
        else if (*end)
            return -1;
        p = end;
    }
    return n;
}

/* Wavelengths from a FITS spectral axis 3 (CTYPE3 WAVE*, CRVAL3, CDELT3,
 * CRPIX3; Greisen et al. 2006, A&A 446, 747). Returns the count found. */
static int header_wavelengths(const gl_header *h, long nchan, double *w, int max)
{
    char ctype[72];
    double crval, cdelt, crpix = 1;
    if (!gl_header_get_str(h, "CTYPE3", ctype, sizeof ctype) || strncmp(ctype, "WAVE", 4) != 0 ||
        !gl_header_get_dbl(h, "CRVAL3", &crval) || !gl_header_get_dbl(h, "CDELT3", &cdelt))
        return 0;
    gl_header_get_dbl(h, "CRPIX3", &crpix);
    if (nchan > max)
        return 0;
    for (long k = 0; k < nchan; k++)
        w[k] = crval + ((double)(k + 1) - crpix) * cdelt;
    return (int)nchan;
}

int cmd_subtract(gl_cli *cli, int argc, char **argv)
{
    static const struct option opts[] = {{"angles", required_argument, 0, OPT_ANGLES},
                                         {"fwhm", required_argument, 0, OPT_FWHM},
                                         {"out", required_argument, 0, OPT_OUT},
                                         {"method", required_argument, 0, OPT_METHOD},
                                         {"modes", required_argument, 0, OPT_MODES},
                                         {"mask-radius", required_argument, 0, OPT_MASK},
                                         {"outer-radius", required_argument, 0, OPT_OUTER},
                                         {"ring", required_argument, 0, OPT_RING},
                                         {"sectors", required_argument, 0, OPT_SECTORS},
                                         {"gap", required_argument, 0, OPT_GAP},
                                         {"nearest", required_argument, 0, OPT_NEAREST},
                                         {"median-fit", no_argument, 0, OPT_MEDFIT},
                                         {"centre", required_argument, 0, OPT_CENTRE},
                                         {"north-offset", required_argument, 0, OPT_NORTH},
                                         {"interp", required_argument, 0, OPT_INTERP},
                                         {"combine", required_argument, 0, OPT_COMBINE},
                                         {"refs", required_argument, 0, OPT_REFS},
                                         {"refs-use", required_argument, 0, OPT_REFS_USE},
                                         {"refs-best", required_argument, 0, OPT_REFS_BEST},
                                         {"sdi", no_argument, 0, OPT_SDI},
                                         {"wavelengths", required_argument, 0, OPT_WAVES},
                                         {"sdi-modes", required_argument, 0, OPT_SDI_MODES},
                                         {"residuals", required_argument, 0, OPT_RESID},
                                         {"raw-residuals", required_argument, 0, OPT_RAW},
                                         CLI_COMMON_OPTIONS,
                                         {0, 0, 0, 0}};
    const char *angles_path = NULL, *out_path = NULL, *refs_path = NULL, *resid_path = NULL,
               *raw_path = NULL, *waves_text = NULL;
    gl_subtract_params p;
    gl_subtract_params_init(&p);
    int exit_now = 0, c, have_fwhm = 0;
    long n;
    double list[GL_SUBTRACT_MAX_MODES];
    double waves[256];

    opterr = 0;
    optind = 1;
    while ((c = getopt_long(argc, argv, "", opts, NULL)) != -1) {
        int r = cli_common_option(cli, c, optarg, help, &exit_now);
        if (r < 0)
            return 1;
        if (exit_now)
            return 0;
        if (r)
            continue;
        switch (c) {
        case OPT_ANGLES: angles_path = optarg; break;
        case OPT_OUT: out_path = optarg; break;
        case OPT_REFS: refs_path = optarg; break;
        case OPT_RESID: resid_path = optarg; break;
        case OPT_RAW: raw_path = optarg; break;
        case OPT_WAVES: waves_text = optarg; break;
        case OPT_MEDFIT: p.median_fit = 1; break;
        case OPT_SDI: p.sdi = GL_SDI_CHANNELS; break;
        case OPT_FWHM:
            if (cli_parse_double(cli, "--fwhm", optarg, -INFINITY, INFINITY, &p.fwhm))
                return 1;
            if (!(p.fwhm > 0))
                return cli_usage(cli, "--fwhm must be a positive number of pixels (got %s)",
                                 optarg);
            have_fwhm = 1;
            break;
        case OPT_METHOD: {
            int m = gl_subtract_method_from_name(optarg);
            if (m < 0)
                return cli_usage(cli, "--method: '%s' is not median, pca, annular or none", optarg);
            p.method = (gl_subtract_method)m;
            break;
        }
        case OPT_MODES: {
            int k = parse_list(optarg, list, GL_SUBTRACT_MAX_MODES);
            if (k < 1)
                return cli_usage(cli, "--modes: '%s' is not a list of mode counts like 5,10,20",
                                 optarg);
            for (int i = 0; i < k; i++) {
                if (list[i] < 1 || list[i] != floor(list[i]) || list[i] > 1e6)
                    return cli_usage(cli, "--modes: %g is not a positive whole number", list[i]);
                p.modes[i] = (long)list[i];
            }
            p.nmodes = k;
            break;
        }
        case OPT_MASK:
            if (cli_parse_double(cli, "--mask-radius", optarg, 0, 1e6, &p.mask_radius))
                return 1;
            break;
        case OPT_OUTER:
            if (cli_parse_double(cli, "--outer-radius", optarg, 0, 1e6, &p.outer_radius))
                return 1;
            break;
        case OPT_RING:
            if (cli_parse_double(cli, "--ring", optarg, 1e-3, 1e4, &p.ring_fwhm))
                return 1;
            break;
        case OPT_SECTORS:
            if (cli_parse_long(cli, "--sectors", optarg, 1, 360, &n))
                return 1;
            p.sectors = (int)n;
            break;
        case OPT_GAP:
            if (cli_parse_double(cli, "--gap", optarg, 0, 1e4, &p.gap_fwhm))
                return 1;
            break;
        case OPT_NEAREST:
            if (cli_parse_long(cli, "--nearest", optarg, 1, 1000000, &p.nearest))
                return 1;
            break;
        case OPT_CENTRE:
            if (strcmp(optarg, "frame") == 0)
                p.centring = GL_CENTRE_FRAME;
            else if (strcmp(optarg, "temporal") == 0)
                p.centring = GL_CENTRE_TEMPORAL;
            else
                return cli_usage(cli, "--centre: '%s' is not frame or temporal", optarg);
            break;
        case OPT_NORTH:
            if (cli_parse_double(cli, "--north-offset", optarg, -360, 360, &p.north_offset))
                return 1;
            break;
        case OPT_INTERP: {
            int m = gl_interp_from_name(optarg);
            if (m < 0)
                return cli_usage(cli, "--interp: '%s' is not fft or cubic", optarg);
            p.interp = (gl_interp)m;
            break;
        }
        case OPT_COMBINE: {
            int m = gl_combine_from_name(optarg);
            if (m < 0)
                return cli_usage(cli, "--combine: '%s' is not median, mean or weighted", optarg);
            p.combine = (gl_combine)m;
            break;
        }
        case OPT_REFS_USE:
            if (strcmp(optarg, "refs") == 0)
                p.refs_use = GL_REFS_ONLY;
            else if (strcmp(optarg, "both") == 0)
                p.refs_use = GL_REFS_WITH_SCIENCE;
            else
                return cli_usage(cli, "--refs-use: '%s' is not refs or both", optarg);
            break;
        case OPT_REFS_BEST:
            if (cli_parse_long(cli, "--refs-best", optarg, 1, 1000000, &p.refs_best))
                return 1;
            break;
        case OPT_SDI_MODES:
            if (cli_parse_long(cli, "--sdi-modes", optarg, 1, 1000, &p.sdi_modes))
                return 1;
            break;
        default: return cli_usage(cli, "unknown option '%s'", argv[optind - 1]);
        }
    }
    if (optind != argc - 1)
        return cli_usage(cli,
                         optind >= argc ? "the input cube is missing" : "expected one input cube");
    const char *cube_path = argv[optind];
    if (!angles_path || !out_path || !have_fwhm)
        return cli_usage(cli, "--angles, --fwhm and --out are needed");
    if (!refs_path && (p.refs_use != GL_REFS_ONLY || p.refs_best))
        return cli_usage(cli, "--refs-use and --refs-best need --refs");
    cli_start(cli);

    gl_cube *cube = NULL, *refs = NULL;
    gl_outset *outs = NULL;
    double *angles = NULL;
    long nangles = 0;
    gl_subtract_result res = {0};
    const char *tmp_out = NULL, *tmp_resid = NULL, *tmp_raw = NULL;
    gl_status st;

    if ((st = gl_fits_read_cube(cube_path, 3, &cube)) ||
        (st = gl_provenance_add_input(&cli->prov, cube_path)) ||
        (st = gl_angles_read(angles_path, cube->nframe, &angles, &nangles)) ||
        (st = gl_provenance_add_input(&cli->prov, angles_path)))
        goto cleanup;
    if (refs_path) {
        if ((st = gl_fits_read_cube(refs_path, 3, &refs)) ||
            (st = gl_provenance_add_input(&cli->prov, refs_path)))
            goto cleanup;
        if (refs->nx != cube->nx || refs->ny != cube->ny || refs->nchan != cube->nchan) {
            st = gl_error_set(GL_ERR_INPUT,
                              "%s: reference cube is %ld x %ld px with %ld channel(s), but %s is "
                              "%ld x %ld px with %ld",
                              refs_path, refs->nx, refs->ny, refs->nchan, cube_path, cube->nx,
                              cube->ny, cube->nchan);
            goto cleanup;
        }
    }
    if (p.sdi == GL_SDI_CHANNELS && cube->nchan < 2) {
        st = gl_error_set(GL_ERR_USAGE,
                          "%s: --sdi needs a 4-D cube (x, y, wavelength, frame); this one has "
                          "one channel",
                          cube_path);
        goto cleanup;
    }
    if (p.sdi == GL_SDI_CHANNELS) {
        int nw = waves_text ? parse_list(waves_text, waves, 256)
                            : header_wavelengths(cube->header, cube->nchan, waves, 256);
        if (nw < 0 || (waves_text && nw != cube->nchan)) {
            st = gl_error_set(GL_ERR_USAGE,
                              "--wavelengths '%s': expected %ld positive numbers separated by "
                              "commas (one per channel of %s)",
                              waves_text, cube->nchan, cube_path);
            goto cleanup;
        }
        if (nw == 0) {
            st = gl_error_set(GL_ERR_USAGE,
                              "%s: --sdi needs --wavelengths or a WAVE axis 3 in the header",
                              cube_path);
            goto cleanup;
        }
        p.nwave = nw;
        p.wavelengths = waves;
    } else if (waves_text) {
        st = gl_error_set(GL_ERR_USAGE, "--wavelengths is only used with --sdi");
        goto cleanup;
    }
    p.keep_residuals = resid_path != NULL;
    p.keep_raw_residuals = raw_path != NULL;

    if ((st = gl_outset_new(cli->overwrite, &outs)) ||
        (st = gl_outset_add(outs, out_path, &cli->prov, &tmp_out)) ||
        (resid_path && (st = gl_outset_add(outs, resid_path, &cli->prov, &tmp_resid))) ||
        (raw_path && (st = gl_outset_add(outs, raw_path, &cli->prov, &tmp_raw))))
        goto cleanup;

    if ((st = gl_subtract_run(cube, angles, refs, &p, &res))) {
        if (st == GL_ERR_INPUT) {
            /* name the file the message is about */
            char msg[1024];
            snprintf(msg, sizeof msg, "%s", gl_error_message());
            gl_error_set(st, "%s: %s", cube_path, msg);
        }
        goto cleanup;
    }
    if ((st = gl_fits_write_cube(tmp_out, res.image, &cli->prov)) ||
        (tmp_resid && (st = gl_fits_write_cube(tmp_resid, res.residuals, &cli->prov))) ||
        (tmp_raw && (st = gl_fits_write_cube(tmp_raw, res.raw_residuals, &cli->prov))) ||
        (st = gl_outset_commit(outs)))
        goto cleanup;
    gl_log(GL_LOG_INFO, "%s: %s subtraction of %ld frames%s, %ld plane%s", out_path,
           gl_subtract_method_name(p.method), res.nframes_used,
           res.nrefs_used ? " with reference frames" : "", res.image->nframe,
           res.image->nframe > 1 ? "s" : "");

cleanup:
    gl_outset_free(outs);
    gl_subtract_result_free(&res);
    gl_cube_free(cube);
    gl_cube_free(refs);
    gl_free(angles);
    return st ? cli_fail(cli, st) : 0;
}
