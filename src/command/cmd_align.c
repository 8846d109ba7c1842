/*
 * cmd_align.c -- `gloam align CUBE --out ALIGNED.fits`: find the star in
 * every frame and move it to (nx/2, ny/2), with the preparation around it
 * (bad pixels, frame selection, crop, binning, angles from the headers).
 */
#include "command/cli.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

static const char help[] =
    "usage: gloam align CUBE --out ALIGNED.fits [options]\n"
    "Finds the star in every frame and shifts it to pixel (nx/2, ny/2).\n\n"
    "  --out FILE            aligned cube (required)\n"
    "  --table FILE          star-position table (CSV): frame,x,y,x_err,y_err,method,...\n"
    "                        (x_err, y_err from comparing the methods, docs/align.md)\n"
    "  --method M            what the centre is measured on:\n"
    "                          auto (default): chosen from the data; a method that\n"
    "                            loses most frames hands over to the next one, and\n"
    "                            one clearly worse than another is replaced\n"
    "                          core: a profile fitted to the star's core (--profile)\n"
    "                          halo: the centre of symmetry of the halo (coronagraph)\n"
    "                          spots: the crossing of four satellite spots\n"
    "                          reference: registration to a reference frame\n"
    "  --profile P           core profile: gaussian (default) or moffat\n"
    "  --precision PX        sub-pixel precision of registration and halo symmetry,\n"
    "                        pixels (default 0.01)\n"
    "  --interp I            shift interpolator: fft (default) or cubic\n"
    "  --fwhm PX|auto        star FWHM guess for the profile fits (default and auto:\n"
    "                        estimated from the data)\n"
    "  --stamp PX            half-size of the profile-fit stamp (default: 2 FWHM)\n"
    "  --spot-search PX      search radius around the median-frame spots (default 5)\n"
    "  --spot-radius PX      expected distance of the satellite spots from the star\n"
    "  --bad-pixels SIGMA    find hot, cold, NaN and transient pixels and replace them\n"
    "  --bad-pixel-map FILE  write the bad-pixel map (bits: 1 hot, 2 cold, 4 NaN,\n"
    "                        8 transient); implies --bad-pixels 5 unless given\n"
    "  --reject-outliers SIGMA  reject frames whose flux or correlation with the\n"
    "                        median frame is an outlier by SIGMA\n"
    "  --crop PX             output frames of PX x PX pixels around the star\n"
    "  --bin N               average N consecutive kept frames (angles averaged)\n"
    "  --angles FILE         parallactic angles of the input frames (default: the\n"
    "                        input's ANGLES table, if any); the angles of the output\n"
    "                        frames are stored in ALIGNED.fits (an ANGLES table that\n"
    "                        subtract, limits, inject and inspect read)\n"
    "  --angles-from-header  compute them from the header (DATE-OBS/MJD-OBS, EXPTIME,\n"
    "                        RA, DEC, site); per-frame starts from a binary-table\n"
    "                        extension with a column MJD when present\n"
    "  --frame-cadence S     seconds between frame starts (default: header CADENCE,\n"
    "                        else EXPTIME)\n"
    "  --angles-out FILE     also write the output frames' angles as a text file\n";

enum {
    OPT_OUT = CLI_OPT_FIRST_COMMAND_OPTION,
    OPT_TABLE,
    OPT_METHOD,
    OPT_INTERP,
    OPT_UPSAMPLE,
    OPT_PROFILE,
    OPT_PRECISION,
    OPT_FWHM,
    OPT_STAMP,
    OPT_SPOT_SEARCH,
    OPT_SPOT_RADIUS,
    OPT_BADPIX,
    OPT_BADPIX_MAP,
    OPT_REJECT,
    OPT_CROP,
    OPT_BIN,
    OPT_ANGLES,
    OPT_ANGLES_HEADER,
    OPT_CADENCE,
    OPT_ANGLES_OUT
};

/* --method NAME, with the first release's names still accepted (a note
 * each): gaussian and moffat are the core method with that profile,
 * register is reference, symmetry is halo (docs/names.md). */
static int parse_method(gl_cli *cli, const char *name, gl_align_params *p, int *profile_given)
{
    static const struct {
        const char *old, *now;
        gl_centre_method m;
        int profile; /* -1: unchanged */
    } renamed[] = {
        {"gaussian", "--method core --profile gaussian", GL_CENTRE_CORE, GL_PROFILE_GAUSSIAN},
        {"moffat", "--method core --profile moffat", GL_CENTRE_CORE, GL_PROFILE_MOFFAT},
        {"register", "--method reference", GL_CENTRE_REFERENCE, -1},
        {"symmetry", "--method halo", GL_CENTRE_HALO, -1},
    };
    for (size_t i = 0; i < sizeof renamed / sizeof renamed[0]; i++)
        if (strcmp(name, renamed[i].old) == 0) {
            char old[64];
            snprintf(old, sizeof old, "--method %s", name);
            cli_deprecated(cli, old, renamed[i].now);
            p->method = renamed[i].m;
            if (renamed[i].profile >= 0) {
                p->profile = (gl_profile_kind)renamed[i].profile;
                *profile_given = 1;
            }
            return 0;
        }
    int m = gl_centre_method_from_name(name);
    if (m == -2)
        return cli_usage(cli, "--method: '%s' is not auto, core, halo, spots or reference", name);
    p->method = (gl_centre_method)m;
    return 0;
}

int cmd_align(gl_cli *cli, int argc, char **argv)
{
    static const struct option opts[] = {{"out", required_argument, 0, OPT_OUT},
                                         {"table", required_argument, 0, OPT_TABLE},
                                         {"method", required_argument, 0, OPT_METHOD},
                                         {"interp", required_argument, 0, OPT_INTERP},
                                         {"upsample", required_argument, 0, OPT_UPSAMPLE},
                                         {"profile", required_argument, 0, OPT_PROFILE},
                                         {"precision", required_argument, 0, OPT_PRECISION},
                                         {"fwhm", required_argument, 0, OPT_FWHM},
                                         {"stamp", required_argument, 0, OPT_STAMP},
                                         {"spot-search", required_argument, 0, OPT_SPOT_SEARCH},
                                         {"spot-radius", required_argument, 0, OPT_SPOT_RADIUS},
                                         {"bad-pixels", required_argument, 0, OPT_BADPIX},
                                         {"bad-pixel-map", required_argument, 0, OPT_BADPIX_MAP},
                                         {"reject-outliers", required_argument, 0, OPT_REJECT},
                                         {"crop", required_argument, 0, OPT_CROP},
                                         {"bin", required_argument, 0, OPT_BIN},
                                         {"angles", required_argument, 0, OPT_ANGLES},
                                         {"angles-from-header", no_argument, 0, OPT_ANGLES_HEADER},
                                         {"frame-cadence", required_argument, 0, OPT_CADENCE},
                                         {"angles-out", required_argument, 0, OPT_ANGLES_OUT},
                                         CLI_COMMON_OPTIONS,
                                         {0, 0, 0, 0}};
    gl_align_params p;
    gl_align_params_init(&p);
    const char *out = NULL, *table = NULL, *map_path = NULL, *angles_in = NULL, *angles_out = NULL;
    int from_header = 0, profile_given = 0;
    double cadence = 0, d;
    long n;
    int c;
    int k;
    while ((k = cli_next_option(cli, argc, argv, opts, help, &c)) > 0) {
        switch (c) {
        case OPT_OUT: out = optarg; break;
        case OPT_TABLE: table = optarg; break;
        case OPT_METHOD:
            if (parse_method(cli, optarg, &p, &profile_given))
                return 1;
            break;
        case OPT_PROFILE:
            if (strcmp(optarg, "gaussian") == 0)
                p.profile = GL_PROFILE_GAUSSIAN;
            else if (strcmp(optarg, "moffat") == 0)
                p.profile = GL_PROFILE_MOFFAT;
            else
                return cli_usage(cli, "--profile: '%s' is neither gaussian nor moffat", optarg);
            profile_given = 1;
            break;
        case OPT_PRECISION:
            if (cli_parse_double(cli, "--precision", optarg, 0.001, 1, &p.precision))
                return 1;
            break;
        case OPT_INTERP: {
            int i = gl_interp_from_name(optarg);
            if (i < 0)
                return cli_usage(cli, "--interp: '%s' is neither fft nor cubic", optarg);
            p.interp = (gl_interp)i;
            break;
        }
        case OPT_UPSAMPLE: /* the old spelling: precision 1/N px */
            cli_deprecated(cli, "--upsample", "--precision (--upsample N = --precision 1/N)");
            if (cli_parse_long(cli, "--upsample", optarg, 1, 1000, &n))
                return 1;
            p.precision = 1.0 / (double)n;
            break;
        case OPT_FWHM:
            if (cli_parse_fwhm(cli, optarg, &p.fwhm))
                return 1;
            if (p.fwhm < 0) /* auto: estimated from the data, as without --fwhm */
                p.fwhm = 0;
            break;
        case OPT_STAMP:
            if (cli_parse_long(cli, "--stamp", optarg, 2, 500, &n))
                return 1;
            p.stamp_half = (int)n;
            break;
        case OPT_SPOT_SEARCH:
            if (cli_parse_double(cli, "--spot-search", optarg, 1, 1000, &p.spot_search))
                return 1;
            break;
        case OPT_SPOT_RADIUS:
            if (cli_parse_double(cli, "--spot-radius", optarg, 5, 100000, &p.spot_radius))
                return 1;
            break;
        case OPT_BADPIX:
            if (cli_parse_double(cli, "--bad-pixels", optarg, 1, 1000, &p.badpix_sigma))
                return 1;
            break;
        case OPT_BADPIX_MAP: map_path = optarg; break;
        case OPT_REJECT:
            if (cli_parse_double(cli, "--reject-outliers", optarg, 0.5, 1000, &p.reject_sigma))
                return 1;
            break;
        case OPT_CROP:
            if (cli_parse_long(cli, "--crop", optarg, 3, 1000000, &p.crop))
                return 1;
            break;
        case OPT_BIN:
            if (cli_parse_long(cli, "--bin", optarg, 1, 1000000, &p.bin))
                return 1;
            break;
        case OPT_ANGLES: angles_in = optarg; break;
        case OPT_ANGLES_HEADER: from_header = 1; break;
        case OPT_CADENCE:
            if (cli_parse_double(cli, "--frame-cadence", optarg, 0, 1e7, &d))
                return 1;
            cadence = d;
            break;
        case OPT_ANGLES_OUT: angles_out = optarg; break;
        default: return cli_bad_option(cli, argv);
        }
    }
    if (k < 0)
        return cli_exit_status(k);
    if (profile_given && p.method != GL_CENTRE_CORE && p.method != GL_CENTRE_AUTO)
        return cli_usage(cli, "--profile applies to --method core (or auto), not %s",
                         gl_centre_method_name(p.method));
    const char *in = cli_positional(cli, argc, argv, "the input cube");
    if (!in)
        return 1;
    if (!out)
        return cli_usage(cli, "--out is required");
    char out_buf[4096];
    if (!(out = cli_output_name(cli, out, in, ".aligned.fits", out_buf, sizeof out_buf)))
        return 1;
    if (angles_in && from_header)
        return cli_usage(cli, "--angles and --angles-from-header exclude each other");
    if (angles_out && !angles_in && !from_header)
        return cli_usage(cli, "--angles-out needs --angles or --angles-from-header");
    if (map_path && p.badpix_sigma <= 0)
        p.badpix_sigma = 5;
    cli_start(cli);

    gl_status st;
    gl_cube *cube = NULL;
    gl_outset *set = NULL;
    gl_align_result *r = NULL;
    double *angles = NULL, *mjd = NULL;
    long nang = 0;
    const char *t_out = NULL, *t_table = NULL, *t_map = NULL, *t_angles = NULL;

    if ((st = gl_provenance_add_input(&cli->prov, in)))
        goto done;
    if ((st = gl_fits_read_cube(in, 2, &cube)))
        goto done;
    if (angles_in) {
        if ((st = gl_provenance_add_input(&cli->prov, angles_in)) ||
            (st = gl_angles_read(angles_in, cube->nframe, &angles, &nang)))
            goto done;
        cli_check_angles(angles_in, angles, nang);
    } else if (!from_header) {
        /* the input's own angle table, when it has one */
        if ((st = gl_angles_table_read(in, cube->nframe, &angles, &nang)))
            goto done;
        if (angles) {
            char src[1100];
            snprintf(src, sizeof src, "%s[%s]", in, GL_ANGLES_EXTNAME);
            gl_log(GL_LOG_INFO, "angles: %ld from the %s table of %s", nang, GL_ANGLES_EXTNAME, in);
            cli_check_angles(src, angles, nang);
        }
    } else {
        if ((st = gl_align_frame_times_read(in, cube->nframe, &mjd)))
            goto done;
        gl_frame_times times = {mjd, cadence};
        if (!(angles = gl_malloc((size_t)cube->nframe * sizeof *angles))) {
            st = gl_error_nomem("angles");
            goto done;
        }
        if ((st = gl_align_parang_from_header(cube->header, cube->nframe, &times, angles, NULL,
                                              NULL))) {
            char msg[1024];
            snprintf(msg, sizeof msg, "%s", gl_error_message());
            st = gl_error_set(st, "%s: %s", in, msg);
            goto done;
        }
        if (mjd)
            gl_log(GL_LOG_INFO, "angles from the header: frame starts from the MJD time table");
        else
            gl_log(GL_LOG_INFO,
                   "angles from the header: frame f starts at the header start + f "
                   "x %s",
                   cadence > 0 ? "--frame-cadence" : "CADENCE (or EXPTIME)");
    }

    if ((st = gl_outset_new(cli->overwrite, &set)) ||
        (st = gl_outset_add(set, out, &cli->prov, &t_out)) ||
        (table && (st = gl_outset_add(set, table, &cli->prov, &t_table))) ||
        (map_path && (st = gl_outset_add(set, map_path, &cli->prov, &t_map))) ||
        (angles_out && (st = gl_outset_add(set, angles_out, &cli->prov, &t_angles))))
        goto done;
    cli_work_started(cli);

    long nx = cube->nx, ny = cube->ny;
    if ((st = gl_align_run(cube, angles, in, &p, &r)))
        goto done;
    if (!angles && r->nout != r->nframe)
        gl_log(GL_LOG_WARN,
               "%ld input frames became %ld output frames: an angle list of the input no "
               "longer matches (give it with --angles: the output then carries the angles "
               "of its frames)",
               r->nframe, r->nout);
    if ((st = gl_fits_write_cube(t_out, r->aligned, &cli->prov)) ||
        (r->angles_out && (st = gl_angles_table_append(t_out, r->angles_out, r->nout))))
        goto done;
    if (t_table && (st = gl_align_table_write_csv(t_table, r, angles)))
        goto done;
    if (t_map && (st = gl_align_badpix_map_write(t_map, r->badpix_map, nx, ny, &cli->prov)))
        goto done;
    if (t_angles && (st = gl_angles_write(t_angles, r->angles_out, r->nout, out)))
        goto done;
    if ((st = gl_outset_commit(set)))
        goto done;
    gl_log(GL_LOG_INFO, "wrote %s: %ld frame%s of %ldx%ld, star at (%ld, %ld)", out, r->nout,
           r->nout == 1 ? "" : "s", r->aligned->nx, r->aligned->ny, r->aligned->nx / 2,
           r->aligned->ny / 2);
    if (!angles) /* said after the product, so that an error stays one line */
        gl_log(GL_LOG_INFO,
               "no angles given: %s carries no %s table (give --angles FILE or "
               "--angles-from-header for later steps to find them)",
               out, GL_ANGLES_EXTNAME);

done:;
    int rc = st ? cli_fail(cli, st) : 0;
    gl_align_result_free(r);
    gl_outset_free(set);
    gl_free(angles);
    gl_free(mjd);
    gl_cube_free(cube);
    return rc;
}
