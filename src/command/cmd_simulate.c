/*
 * cmd_simulate.c -- `gloam simulate DIR`: writes a simulated coronagraphic
 * pupil-tracking sequence with known truth (cube.fits, angles.txt, psf.fits,
 * truth.csv, frames.csv, and refs.fits with --refs). The physics is in
 * src/sim; this file parses options, creates DIR and writes the products all
 * or nothing.
 */
#include "command/cli.h"

#include <math.h>

#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

static const char help[] =
    "usage: gloam simulate DIR [options]\n"
    "Simulates a coronagraphic pupil-tracking sequence (physical optics) and writes\n"
    "DIR/cube.fits DIR/angles.txt DIR/psf.fits DIR/truth.csv DIR/frames.csv\n"
    "(and DIR/refs.fits with --refs). DIR is created if missing.\n\n"
    "sequence:\n"
    "  --frames N              number of frames (48)\n"
    "  --size PX               frame width and height (128)\n"
    "  --seed S                random seed (1)\n"
    "  --companion SEP_PX:PA_DEG:CONTRAST   plant a companion (repeatable)\n"
    "optics:\n"
    "  --wavelengths UM[,UM..] wavelength channels, shortest first (1.65)\n"
    "  --sampling PX           pixels per lambda/D at the first wavelength (4)\n"
    "  --pixscale MAS          pixel scale (12)\n"
    "  --coronagraph MODEL     none, perfect or lyot (perfect)\n"
    "  --lyot-mask LD          Lyot focal-mask radius, lambda/D (2)\n"
    "  --lyot-stop FRAC        Lyot-stop diameter / pupil diameter (0.9)\n"
    "  --obstruction FRAC      central obstruction / diameter (0.14)\n"
    "  --spiders N             spider arms (4)\n"
    "  --spider-width FRAC     arm width / diameter (0.006)\n"
    "wavefront errors (nm rms):\n"
    "  --static-nm NM          static non-common-path error (30)\n"
    "  --quasi-nm NM           each quasi-static pattern (15)\n"
    "  --quasi-modes N         quasi-static patterns (4)\n"
    "  --quasi-period MIN      shortest drift period, minutes (20)\n"
    "  --ao-nm NM              fast AO residual inside the control radius (65)\n"
    "  --subexposures N        AO screens averaged per frame (24)\n"
    "photometry:\n"
    "  --star-flux E           star electrons per frame and channel (1e9)\n"
    "  --read-noise E          read noise, electrons rms (5)\n"
    "  --no-noise              no photon or read noise\n"
    "  --jitter MAS            pointing jitter rms per axis (0)\n"
    "  --spots LD[:CONTRAST]   satellite spots at LD lambda/D (contrast 2e-3)\n"
    "  --refs                  also write a reference-star sequence (refs.fits)\n"
    "observation:\n"
    "  --latitude DEG          site latitude (-30.6)\n"
    "  --longitude DEG         site longitude, east positive (-70.4)\n"
    "  --dec DEG               target declination (-51)\n"
    "  --ha-start H            hour angle at the middle of the first frame (-0.5)\n"
    "  --exptime S             exposure per frame (60)\n"
    "  --cadence S             start-to-start interval (75)\n"
    "  --date YYYY-MM-DDThh:mm:ss   UTC start (2021-06-12T04:10:00)\n"
    "  --target NAME           target name (Veyra-3141)\n"
    "  --site NAME             observatory name (Loma Tenue Observatory)\n";

enum {
    O_FRAMES = CLI_OPT_FIRST_COMMAND_OPTION,
    O_SIZE,
    O_SEED,
    O_COMP,
    O_WAVE,
    O_SAMPLING,
    O_PIXSCALE,
    O_CORO,
    O_LYOTMASK,
    O_LYOTSTOP,
    O_OBSTR,
    O_SPIDERS,
    O_SPIDERW,
    O_STATIC,
    O_QUASI,
    O_QMODES,
    O_QPERIOD,
    O_AO,
    O_NSUB,
    O_FLUX,
    O_RON,
    O_NONOISE,
    O_JITTER,
    O_SPOTS,
    O_REFS,
    O_LAT,
    O_LON,
    O_DEC,
    O_HA,
    O_EXPTIME,
    O_CADENCE,
    O_DATE,
    O_TARGET,
    O_SITE
};

static const struct option options[] = {{"frames", required_argument, 0, O_FRAMES},
                                        {"size", required_argument, 0, O_SIZE},
                                        {"seed", required_argument, 0, O_SEED},
                                        {"companion", required_argument, 0, O_COMP},
                                        {"wavelengths", required_argument, 0, O_WAVE},
                                        {"sampling", required_argument, 0, O_SAMPLING},
                                        {"pixscale", required_argument, 0, O_PIXSCALE},
                                        {"coronagraph", required_argument, 0, O_CORO},
                                        {"lyot-mask", required_argument, 0, O_LYOTMASK},
                                        {"lyot-stop", required_argument, 0, O_LYOTSTOP},
                                        {"obstruction", required_argument, 0, O_OBSTR},
                                        {"spiders", required_argument, 0, O_SPIDERS},
                                        {"spider-width", required_argument, 0, O_SPIDERW},
                                        {"static-nm", required_argument, 0, O_STATIC},
                                        {"quasi-nm", required_argument, 0, O_QUASI},
                                        {"quasi-modes", required_argument, 0, O_QMODES},
                                        {"quasi-period", required_argument, 0, O_QPERIOD},
                                        {"ao-nm", required_argument, 0, O_AO},
                                        {"subexposures", required_argument, 0, O_NSUB},
                                        {"star-flux", required_argument, 0, O_FLUX},
                                        {"read-noise", required_argument, 0, O_RON},
                                        {"no-noise", no_argument, 0, O_NONOISE},
                                        {"jitter", required_argument, 0, O_JITTER},
                                        {"spots", required_argument, 0, O_SPOTS},
                                        {"refs", no_argument, 0, O_REFS},
                                        {"latitude", required_argument, 0, O_LAT},
                                        {"longitude", required_argument, 0, O_LON},
                                        {"dec", required_argument, 0, O_DEC},
                                        {"ha-start", required_argument, 0, O_HA},
                                        {"exptime", required_argument, 0, O_EXPTIME},
                                        {"cadence", required_argument, 0, O_CADENCE},
                                        {"date", required_argument, 0, O_DATE},
                                        {"target", required_argument, 0, O_TARGET},
                                        {"site", required_argument, 0, O_SITE},
                                        CLI_COMMON_OPTIONS,
                                        {0, 0, 0, 0}};

static int parse_wavelengths(const gl_cli *cli, const char *arg, gl_sim_params *p)
{
    const char *s = arg;
    int n = 0;
    while (*s) {
        char *end;
        errno = 0;
        double v = strtod(s, &end);
        if (end == s || errno || (*end && *end != ',') || n >= GL_SIM_MAX_CHANNELS)
            return cli_usage(cli, "--wavelengths: '%s' is not a list of up to %d numbers (um)", arg,
                             GL_SIM_MAX_CHANNELS),
                   -1;
        p->wavelength_um[n++] = v;
        s = *end ? end + 1 : end;
    }
    if (n == 0)
        return cli_usage(cli, "--wavelengths: empty list"), -1;
    p->nchan = n;
    return 0;
}

static int parse_spots(const gl_cli *cli, const char *arg, gl_sim_params *p)
{
    char *end;
    errno = 0;
    double sep = strtod(arg, &end), c = p->spots_contrast;
    if (end == arg || errno || !(sep > 0 && sep < 1000))
        return cli_usage(cli, "--spots: '%s' is not LD[:CONTRAST] with LD > 0", arg), -1;
    if (*end == ':') {
        const char *s = end + 1;
        c = strtod(s, &end);
        if (end == s || *end || !(c > 0 && c < 0.1))
            return cli_usage(cli, "--spots: '%s': contrast must be in (0, 0.1)", arg), -1;
    } else if (*end) {
        return cli_usage(cli, "--spots: '%s' is not LD[:CONTRAST]", arg), -1;
    }
    p->spots_ld = sep;
    p->spots_contrast = c;
    return 0;
}

static int copy_name(const gl_cli *cli, const char *opt, const char *arg, char *dst, size_t size)
{
    if (!*arg || strlen(arg) >= size || strchr(arg, '\''))
        return cli_usage(cli, "%s: '%s' must be 1 to %zu characters without quotes", opt, arg,
                         size - 1),
               -1;
    snprintf(dst, size, "%s", arg);
    return 0;
}

/* Writes angles.txt: one angle a line after a '#' header. */
static gl_status write_angles(const char *path, const gl_sim_result *r, const gl_cli *cli)
{
    FILE *f = fopen(path, "w");
    if (!f)
        return gl_error_set(GL_ERR_IO, "%s: cannot write: %s", path, strerror(errno));
    fprintf(f, "# parallactic angle (deg) at mid-exposure, one per frame\n# %s\n", cli->cmdline);
    for (long i = 0; i < r->nframes; i++)
        fprintf(f, "%.10f\n", r->angle_deg[i]);
    if (fclose(f) != 0)
        return gl_error_set(GL_ERR_IO, "%s: write failed: %s", path, strerror(errno));
    return GL_OK;
}

static gl_status write_products(gl_cli *cli, const char *dir, const gl_sim_params *p,
                                const gl_sim_result *r)
{
    gl_status st;
    gl_outset *set = NULL;
    char path[6][4096];
    const char *names[6] = {"/cube.fits", "/angles.txt", "/psf.fits",
                            "/truth.csv", "/frames.csv", "/refs.fits"};
    const char *tmp[6] = {0};
    int nout = p->refs ? 6 : 5;
    if ((st = gl_outset_new(cli->overwrite, &set)) != GL_OK)
        return st;
    for (int i = 0; i < nout; i++)
        if ((st = cli_add_product(cli, set, dir, names[i], path[i], sizeof path[i], &tmp[i])))
            goto cleanup;
    if ((st = gl_fits_write_cube(tmp[0], r->cube, &cli->prov)) != GL_OK)
        goto cleanup;
    if ((st = write_angles(tmp[1], r, cli)) != GL_OK)
        goto cleanup;
    if ((st = gl_fits_write_cube(tmp[2], r->psf, &cli->prov)) != GL_OK)
        goto cleanup;
    if ((st = gl_sim_tables_write(p, r, tmp[3], tmp[4])) != GL_OK)
        goto cleanup;
    if (p->refs && (st = gl_fits_write_cube(tmp[5], r->refs, &cli->prov)) != GL_OK)
        goto cleanup;
    st = gl_outset_commit(set);
cleanup:
    gl_outset_free(set);
    return st;
}

int cmd_simulate(gl_cli *cli, int argc, char **argv)
{
    gl_sim_params p;
    gl_sim_params_init(&p);
    long n;
    int c;
    int k;
    while ((k = cli_next_option(cli, argc, argv, options, help, &c)) > 0) {
        int bad = 0;
        switch (c) {
        case O_FRAMES: bad = cli_parse_long(cli, "--frames", optarg, 1, 100000, &p.nframes); break;
        case O_SIZE: bad = cli_parse_long(cli, "--size", optarg, 8, 4096, &p.size); break;
        case O_SEED:
            bad = cli_parse_long(cli, "--seed", optarg, 0, 2147483647L, &n);
            p.seed = (unsigned long)n;
            break;
        case O_COMP:
            if (p.ncompanions >= GL_SIM_MAX_COMPANIONS)
                return cli_usage(cli, "--companion: at most %d companions", GL_SIM_MAX_COMPANIONS);
            if (gl_companion_parse(optarg, &p.companions[p.ncompanions]) != GL_OK)
                return cli_usage(cli, "%s", gl_error_message());
            p.ncompanions++;
            break;
        case O_WAVE: bad = parse_wavelengths(cli, optarg, &p); break;
        case O_SAMPLING:
            bad = cli_parse_double(cli, "--sampling", optarg, 2, 32, &p.sampling);
            break;
        case O_PIXSCALE:
            bad = cli_parse_double(cli, "--pixscale", optarg, 1e-3, 1e5, &p.pixscale_mas);
            break;
        case O_CORO:
            if (gl_sim_coronagraph_parse(optarg, &p.coronagraph) != GL_OK)
                return cli_usage(cli, "--coronagraph: %s", gl_error_message());
            break;
        case O_LYOTMASK:
            bad = cli_parse_double(cli, "--lyot-mask", optarg, 0.1, 20, &p.lyot_mask_ld);
            break;
        case O_LYOTSTOP:
            bad = cli_parse_double(cli, "--lyot-stop", optarg, 0.31, 1, &p.lyot_stop);
            break;
        case O_OBSTR:
            bad = cli_parse_double(cli, "--obstruction", optarg, 0, 0.89, &p.obstruction);
            break;
        case O_SPIDERS:
            bad = cli_parse_long(cli, "--spiders", optarg, 0, 12, &n);
            p.nspiders = (int)n;
            break;
        case O_SPIDERW:
            bad = cli_parse_double(cli, "--spider-width", optarg, 0, 0.19, &p.spider_width);
            break;
        case O_STATIC:
            bad = cli_parse_double(cli, "--static-nm", optarg, 0, 2000, &p.static_nm);
            break;
        case O_QUASI:
            bad = cli_parse_double(cli, "--quasi-nm", optarg, 0, 2000, &p.quasi_nm);
            break;
        case O_QMODES:
            bad = cli_parse_long(cli, "--quasi-modes", optarg, 0, 64, &n);
            p.quasi_modes = (int)n;
            break;
        case O_QPERIOD:
            bad = cli_parse_double(cli, "--quasi-period", optarg, 0.01, 1e6, &p.quasi_period_min);
            break;
        case O_AO: bad = cli_parse_double(cli, "--ao-nm", optarg, 0, 2000, &p.ao_nm); break;
        case O_NSUB:
            bad = cli_parse_long(cli, "--subexposures", optarg, 1, 1000, &n);
            p.subexposures = (int)n;
            break;
        case O_FLUX:
            bad = cli_parse_double(cli, "--star-flux", optarg, 1e-3, 1e14, &p.star_flux);
            break;
        case O_RON:
            bad = cli_parse_double(cli, "--read-noise", optarg, 0, 1e5, &p.read_noise);
            break;
        case O_NONOISE: p.noise = 0; break;
        case O_JITTER:
            bad = cli_parse_double(cli, "--jitter", optarg, 0, 1e4, &p.jitter_mas);
            break;
        case O_SPOTS: bad = parse_spots(cli, optarg, &p); break;
        case O_REFS: p.refs = 1; break;
        case O_LAT:
            bad = cli_parse_double(cli, "--latitude", optarg, -89.9, 89.9, &p.latitude_deg);
            break;
        case O_LON:
            bad = cli_parse_double(cli, "--longitude", optarg, -360, 360, &p.longitude_deg);
            break;
        case O_DEC: bad = cli_parse_double(cli, "--dec", optarg, -89.9, 89.9, &p.dec_deg); break;
        case O_HA: bad = cli_parse_double(cli, "--ha-start", optarg, -12, 12, &p.ha_start_h); break;
        case O_EXPTIME:
            bad = cli_parse_double(cli, "--exptime", optarg, 1e-3, 1e5, &p.exptime_s);
            break;
        case O_CADENCE:
            bad = cli_parse_double(cli, "--cadence", optarg, 1e-3, 1e6, &p.cadence_s);
            break;
        case O_DATE: bad = copy_name(cli, "--date", optarg, p.date_obs, sizeof p.date_obs); break;
        case O_TARGET: bad = copy_name(cli, "--target", optarg, p.target, sizeof p.target); break;
        case O_SITE: bad = copy_name(cli, "--site", optarg, p.site, sizeof p.site); break;
        default: return cli_bad_option(cli, argv);
        }
        if (bad)
            return 1;
    }
    if (k < 0)
        return cli_exit_status(k);
    if (optind != argc - 1)
        return cli_usage(cli,
                         optind >= argc ? "missing output folder DIR"
                                        : "expected one output folder DIR, got '%s' too",
                         optind < argc - 1 ? argv[optind + 1] : "");
    const char *dir = argv[optind];
    cli_start(cli);
    gl_status st = gl_sim_params_check(&p);
    if (st != GL_OK)
        return cli_fail(cli, st);
    /* refuse existing products before any work */
    gl_outset *probe = NULL;
    struct stat sb;
    int made_dir = 0;
    if (stat(dir, &sb) == 0) {
        if (!S_ISDIR(sb.st_mode))
            return cli_usage(cli, "%s: exists and is not a folder", dir);
        if ((st = gl_outset_new(cli->overwrite, &probe)) != GL_OK)
            return cli_fail(cli, st);
        const char *names[] = {"/cube.fits", "/angles.txt", "/psf.fits",
                               "/truth.csv", "/frames.csv", "/refs.fits"};
        for (int i = 0; i < (p.refs ? 6 : 5) && st == GL_OK; i++) {
            char path[4096];
            const char *t;
            st = cli_add_product(cli, probe, dir, names[i], path, sizeof path, &t);
        }
        gl_outset_free(probe);
        if (st != GL_OK)
            return cli_fail(cli, st);
    } else if (mkdir(dir, 0777) != 0) {
        int err = errno;
        char parent[4096];
        snprintf(parent, sizeof parent, "%s", dir);
        char *slash = strrchr(parent, '/');
        while (slash && slash > parent && slash[1] == '\0') { /* "a/b/" */
            *slash = '\0';
            slash = strrchr(parent, '/');
        }
        if (slash)
            *slash = '\0';
        if ((err == ENOENT || err == ENOTDIR) &&
            (st = gl_outset_folder_check(dir, slash ? (slash == parent ? "/" : parent) : ".")))
            return cli_fail(cli, st); /* the --out rule: a missing folder, or a file */
        fprintf(cli->err, "gloam simulate: %s: cannot create the folder: %s\n", dir, strerror(err));
        return 1;
    } else {
        made_dir = 1;
    }
    cli_work_started(cli);
    gl_sim_result *res = NULL;
    st = gl_sim_run(&p, &res);
    if (st == GL_OK) {
        /* the rotation over the sequence, unwrapped through +-180 degrees */
        double rot = 0;
        for (long i = 1; i < p.nframes; i++)
            rot += remainder(res->angle_deg[i] - res->angle_deg[i - 1], 360.0);
        gl_log(GL_LOG_INFO, "%ld frames of %ld x %ld, %d channel(s), field rotation %.1f deg",
               p.nframes, p.size, p.size, p.nchan, fabs(rot));
        st = write_products(cli, dir, &p, res);
    }
    gl_sim_result_free(res);
    if (st != GL_OK) {
        if (made_dir)
            rmdir(dir);
        return cli_fail(cli, st);
    }
    return 0;
}
