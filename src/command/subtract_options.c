/*
 * subtract_options.c -- the options of the starlight subtraction, shared by
 * `gloam subtract` and `gloam limits` (which must run exactly the subtraction
 * the user chose): the getopt table entries, their help lines, parsing into
 * gl_subtract_params, and the checks and loading that need the science cube
 * (reference cube, wavelengths).
 */
#include "command/subtract_options.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

const char cli_subtract_help[] =
    "  --fwhm PX|auto         PSF full width at half maximum, pixels; auto (the default):\n"
    "                         measured on --psf, else recorded in the input's header\n"
    "  --method NAME          how the star's light is modelled and removed (default klip-rings):\n"
    "                           median-frame: each frame minus the median of all frames\n"
    "                             (classical ADI)\n"
    "                           klip-frame: each frame minus its projection on KL modes of the\n"
    "                             whole region; by default the modes come from every frame,\n"
    "                             the frame itself included (full-frame PCA)\n"
    "                           klip-rings: the same ring by ring, each frame's modes built\n"
    "                             only from frames where the sky has turned far enough\n"
    "                           derotate-only: no subtraction, derotate and combine\n"
    "  --modes K1,K2,...      numbers of KL modes to remove, one output plane each (default 5)\n"
    "  --mask-radius PX|auto  pixels closer to the star are left out; auto (default): 0, or for\n"
    "                         klip-rings the first radius where every frame has enough\n"
    "                         references past --gap\n"
    "  --outer-radius PX      outer edge of the region (default: largest circle in the frame)\n"
    "  --basis-frames WHICH   frames behind each frame's KL modes (klip-frame):\n"
    "                           all (default): every frame, itself included\n"
    "                           all-but-target: every frame except itself\n"
    "                           beyond-gap: the frames past --gap at the middle of the region\n"
    "  --ring W               ring width in FWHM (klip-rings, --median-fit; default 1)\n"
    "  --arcs N               cut each ring into N equal arcs of azimuth (klip-rings; default 1)\n"
    "  --gap G                a frame serves as a reference only when the sky has turned far\n"
    "                         enough for a source at the ring's middle to move G FWHM\n"
    "                         (klip-rings; default 0.75)\n"
    "  --keep-closest N       of the frames past the gap, keep the N closest in angle\n"
    "  --median-fit           scale the median frame to each frame ring by ring (median-frame)\n"
    "  --remove-mean HOW      mean taken out before the KL modes are built:\n"
    "                         each-frame (default: each frame's own mean) | each-pixel (each\n"
    "                         pixel's mean over the frames)\n"
    "  --north-offset DEG     true north offset of the detector (default 0)\n"
    "  --interp NAME          derotation: fft (default) | cubic\n"
    "  --combine NAME         median (default) | mean | weighted (inverse residual variance)\n"
    "  --refs FILE            reference-star cube for RDI (same frame size)\n"
    "  --refs-use WHAT        refs (default: basis from the references alone) | both\n"
    "  --refs-best N          keep the N reference frames best correlated with the science\n"
    "  --spectral-step        4-D cubes: remove the star across wavelength channels first, then\n"
    "                         run --method on the result (SDI then ADI)\n"
    "  --wavelengths L1,...   one wavelength per channel (default: the header's WAVE axis)\n"
    "  --spectral-modes K     KL modes of the spectral step (default 1)\n" CLI_ANGLE_HELP;

const char cli_subtract_memory_help[] =
    "  --memory-limit SIZE    memory to stay within, bytes or with K, M, G (default: half of\n"
    "                         the machine's memory); a cube that needs more is read from its\n"
    "                         file in blocks (klip-frame and median-frame; docs/subtract.md)\n";

/* The first release's spellings (docs/names.md): they still work, with one
 * note each. */
static const char *const old_methods[][2] = {{"median", "median-frame"},
                                             {"pca", "klip-frame"},
                                             {"annular", "klip-rings"},
                                             {"none", "derotate-only"}};

void cli_subtract_setup_init(cli_subtract_setup *s)
{
    memset(s, 0, sizeof *s);
    gl_subtract_params_init(&s->p);
}

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
 * CRPIX3; Greisen et al. 2006, A&A 446, 747), else from one keyword per
 * channel WAVEL1..WAVELn (as gloam simulate writes them). Returns the count
 * found. */
static int header_wavelengths(const gl_header *h, long nchan, double *w, int max)
{
    char ctype[72];
    double crval, cdelt, crpix = 1;
    if (!gl_header_get_str(h, "CTYPE3", ctype, sizeof ctype) || strncmp(ctype, "WAVE", 4) != 0 ||
        !gl_header_get_dbl(h, "CRVAL3", &crval) || !gl_header_get_dbl(h, "CDELT3", &cdelt)) {
        if (nchan > max)
            return 0;
        for (long k = 0; k < nchan; k++) {
            char key[16];
            snprintf(key, sizeof key, "WAVEL%ld", k + 1);
            if (!gl_header_get_dbl(h, key, &w[k]) || !(w[k] > 0))
                return 0;
        }
        return (int)nchan;
    }
    gl_header_get_dbl(h, "CRPIX3", &crpix);
    if (nchan > max)
        return 0;
    for (long k = 0; k < nchan; k++)
        w[k] = crval + ((double)(k + 1) - crpix) * cdelt;
    return (int)nchan;
}

/* --memory-limit SIZE: bytes, or a number with K, M, G or T (powers of
 * 1024; a trailing B or iB is accepted). At least 1 MiB. */
static int parse_memory_limit(gl_cli *cli, const char *text, double *out)
{
    char *end;
    errno = 0;
    double v = strtod(text, &end);
    double scale = 1;
    const char *units = "KMGT";
    const char *u = *end ? strchr(units, *end == 'k' ? 'K' : *end) : NULL;
    if (*end && u) {
        scale = pow(1024.0, (double)(u - units + 1));
        end++;
        if (strcmp(end, "B") == 0 || strcmp(end, "iB") == 0)
            end += strlen(end);
    } else if (strcmp(end, "B") == 0)
        end++;
    if (end == text || *end || errno || !isfinite(v) || v * scale < 1048576.0) {
        cli_usage(cli, "--memory-limit: '%s' is not a size like 4G, 512M or 1048576 (at least 1M)",
                  text);
        return -1;
    }
    *out = v * scale;
    return 1;
}

int cli_subtract_needs_stream(const cli_subtract_setup *s, const char *cube_path, double *limit)
{
    *limit = s->memory_limit;
    if (!(*limit > 0)) {
        long pages = sysconf(_SC_PHYS_PAGES), size = sysconf(_SC_PAGE_SIZE);
        *limit = pages > 0 && size > 0 ? 0.5 * (double)pages * (double)size : 4e9;
    }
    gl_fits_info info;
    if (gl_fits_image_info(cube_path, &info) || info.naxis < 3)
        return 0;
    long nx = info.naxes[0], ny = info.naxes[1];
    long nchan = info.naxis >= 4 ? info.naxes[2] : 1;
    long nframe = info.naxis >= 4 ? info.naxes[3] : info.naxes[2];
    return gl_subtract_memory_estimate(nx, ny, nchan, nframe, &s->p) > *limit;
}

int cli_subtract_stream_method(cli_subtract_setup *s, const char *cube_path, double limit)
{
    if (s->p.method != GL_SUBTRACT_ANNULAR || s->have_method)
        return 1;
    s->p.method = GL_SUBTRACT_PCA;
    int streamed = cli_subtract_needs_stream(s, cube_path, &limit);
    gl_log(GL_LOG_WARN,
           "%s: the default method klip-rings would need more than --memory-limit %.0f MB; "
           "klip-frame runs instead (one basis from every frame%s; docs/subtract.md)",
           cube_path, limit / 1e6, streamed ? ", the cube read from its file in blocks" : "");
    return streamed;
}

int cli_subtract_option(gl_cli *cli, int code, const char *optarg, cli_subtract_setup *s)
{
    gl_subtract_params *pp = &s->p;
#define p (*pp)
    long n;
    double list[GL_SUBTRACT_MAX_MODES];
    switch (code) {
    case CLI_OPT_REFS: s->refs_path = optarg; return 1;
    case CLI_OPT_WAVES: s->waves_text = optarg; return 1;
    case CLI_OPT_MEDFIT: p.median_fit = 1; return 1;
    case CLI_OPT_SDI: cli_deprecated(cli, "--sdi", "--spectral-step"); /* fall through */
    case CLI_OPT_SPECTRAL: p.sdi = GL_SDI_CHANNELS; return 1;
    case CLI_OPT_FWHM:
        if (cli_parse_fwhm(cli, optarg, &p.fwhm)) /* auto: cli_resolve_fwhm */
            return -1;
        s->have_fwhm = 1;
        return 1;
    case CLI_OPT_METHOD: {
        int m = -1;
        for (int i = 0; i < 4; i++)
            if (strcmp(optarg, old_methods[i][0]) == 0) {
                char old[64], now[64];
                snprintf(old, sizeof old, "--method %s", old_methods[i][0]);
                snprintf(now, sizeof now, "--method %s", old_methods[i][1]);
                cli_deprecated(cli, old, now);
                m = gl_subtract_method_from_name(old_methods[i][1]);
            }
        if (m < 0)
            m = gl_subtract_method_from_name(optarg);
        if (m < 0) {
            cli_usage(cli,
                      "--method: '%s' is not median-frame, klip-frame, klip-rings or "
                      "derotate-only",
                      optarg);
            return -1;
        }
        p.method = (gl_subtract_method)m;
        s->have_method = 1;
        return 1;
    }
    case CLI_OPT_MODES: {
        int k = parse_list(optarg, list, GL_SUBTRACT_MAX_MODES);
        if (k < 1) {
            cli_usage(cli, "--modes: '%s' is not a list of mode counts like 5,10,20", optarg);
            return -1;
        }
        for (int i = 0; i < k; i++) {
            if (list[i] < 1 || list[i] != floor(list[i]) || list[i] > 1e6) {
                cli_usage(cli, "--modes: %g is not a positive whole number", list[i]);
                return -1;
            }
            p.modes[i] = (long)list[i];
        }
        p.nmodes = k;
        return 1;
    }
    case CLI_OPT_MASK:
        if (strcmp(optarg, "auto") == 0) {
            p.mask_radius = GL_SUBTRACT_MASK_AUTO;
            return 1;
        }
        return cli_parse_double(cli, "--mask-radius", optarg, 0, 1e6, &p.mask_radius) ? -1 : 1;
    case CLI_OPT_OUTER:
        return cli_parse_double(cli, "--outer-radius", optarg, 0, 1e6, &p.outer_radius) ? -1 : 1;
    case CLI_OPT_RING:
        return cli_parse_double(cli, "--ring", optarg, 1e-3, 1e4, &p.ring_fwhm) ? -1 : 1;
    case CLI_OPT_SECTORS: cli_deprecated(cli, "--sectors", "--arcs"); /* fall through */
    case CLI_OPT_ARCS:
        if (cli_parse_long(cli, code == CLI_OPT_ARCS ? "--arcs" : "--sectors", optarg, 1, 360, &n))
            return -1;
        p.sectors = (int)n;
        return 1;
    case CLI_OPT_GAP: return cli_parse_double(cli, "--gap", optarg, 0, 1e4, &p.gap_fwhm) ? -1 : 1;
    case CLI_OPT_NEAREST: cli_deprecated(cli, "--nearest", "--keep-closest"); /* fall through */
    case CLI_OPT_KEEP_CLOSEST:
        return cli_parse_long(cli, code == CLI_OPT_NEAREST ? "--nearest" : "--keep-closest", optarg,
                              1, 1000000, &p.nearest)
                   ? -1
                   : 1;
    case CLI_OPT_REMOVE_MEAN:
        if (strcmp(optarg, "each-frame") == 0)
            p.centring = GL_CENTRE_FRAME;
        else if (strcmp(optarg, "each-pixel") == 0)
            p.centring = GL_CENTRE_TEMPORAL;
        else {
            cli_usage(cli, "--remove-mean: '%s' is not each-frame or each-pixel", optarg);
            return -1;
        }
        return 1;
    case CLI_OPT_CENTRE:
        if (strcmp(optarg, "frame") == 0) {
            cli_deprecated(cli, "--centre frame", "--remove-mean each-frame");
            p.centring = GL_CENTRE_FRAME;
        } else if (strcmp(optarg, "temporal") == 0) {
            cli_deprecated(cli, "--centre temporal", "--remove-mean each-pixel");
            p.centring = GL_CENTRE_TEMPORAL;
        } else {
            cli_usage(cli,
                      "--centre (the old spelling of --remove-mean): '%s' is not frame or "
                      "temporal",
                      optarg);
            return -1;
        }
        return 1;
    case CLI_OPT_BASIS_FRAMES:
        if (strcmp(optarg, "all") == 0)
            p.basis_frames = GL_BASIS_ALL;
        else if (strcmp(optarg, "all-but-target") == 0)
            p.basis_frames = GL_BASIS_ALL_BUT_TARGET;
        else if (strcmp(optarg, "beyond-gap") == 0)
            p.basis_frames = GL_BASIS_BEYOND_GAP;
        else {
            cli_usage(cli, "--basis-frames: '%s' is not all, all-but-target or beyond-gap", optarg);
            return -1;
        }
        s->have_basis = 1;
        return 1;
    case CLI_OPT_NORTH:
        return cli_parse_double(cli, "--north-offset", optarg, -360, 360, &p.north_offset) ? -1 : 1;
    case CLI_OPT_INTERP: {
        int m = gl_interp_from_name(optarg);
        if (m < 0) {
            cli_usage(cli, "--interp: '%s' is not fft or cubic", optarg);
            return -1;
        }
        p.interp = (gl_interp)m;
        return 1;
    }
    case CLI_OPT_COMBINE: {
        int m = gl_combine_from_name(optarg);
        if (m < 0) {
            cli_usage(cli, "--combine: '%s' is not median, mean or weighted", optarg);
            return -1;
        }
        p.combine = (gl_combine)m;
        return 1;
    }
    case CLI_OPT_REFS_USE:
        if (strcmp(optarg, "refs") == 0)
            p.refs_use = GL_REFS_ONLY;
        else if (strcmp(optarg, "both") == 0)
            p.refs_use = GL_REFS_WITH_SCIENCE;
        else {
            cli_usage(cli, "--refs-use: '%s' is not refs or both", optarg);
            return -1;
        }
        return 1;
    case CLI_OPT_REFS_BEST:
        return cli_parse_long(cli, "--refs-best", optarg, 1, 1000000, &p.refs_best) ? -1 : 1;
    case CLI_OPT_SDI_MODES:
        cli_deprecated(cli, "--sdi-modes", "--spectral-modes"); /* fall through */
    case CLI_OPT_SPECTRAL_MODES:
        return cli_parse_long(cli, code == CLI_OPT_SDI_MODES ? "--sdi-modes" : "--spectral-modes",
                              optarg, 1, 1000, &p.sdi_modes)
                   ? -1
                   : 1;
    case CLI_OPT_MEMORY_LIMIT: return parse_memory_limit(cli, optarg, &s->memory_limit);
    default: return 0;
    }
#undef p
}

int cli_subtract_check(const gl_cli *cli, const cli_subtract_setup *s)
{
    if (!s->have_fwhm)
        return cli_usage(cli, "--fwhm is needed");
    if (!s->refs_path && (s->p.refs_use != GL_REFS_ONLY || s->p.refs_best))
        return cli_usage(cli, "--refs-use and --refs-best need --refs");
    /* an option that only another method reads would be silently ignored */
    const char *dflt = s->have_method ? "" : " (the default)";
    if (s->have_basis && s->p.method != GL_SUBTRACT_PCA)
        return cli_usage(cli,
                         "--basis-frames chooses the basis of --method klip-frame, not of %s%s",
                         gl_subtract_method_name(s->p.method), dflt);
    if (s->p.median_fit && s->p.method != GL_SUBTRACT_MEDIAN)
        return cli_usage(cli,
                         "--median-fit scales the median of --method median-frame, not of %s%s",
                         gl_subtract_method_name(s->p.method), dflt);
    return 0;
}

gl_status cli_subtract_prepare(gl_cli *cli, cli_subtract_setup *s, const char *cube_path,
                               const gl_cube *cube, gl_cube **refs_out)
{
    gl_cube *refs = NULL;
    gl_status st = GL_OK;
    *refs_out = NULL;
    s->p.cube_name = cube_path; /* named in the subtraction's warnings */
    if (s->refs_path) {
        if ((st = cli_read_input(cli, s->refs_path, 3, &refs)))
            goto cleanup;
        if (refs->nx != cube->nx || refs->ny != cube->ny || refs->nchan != cube->nchan) {
            st = gl_error_set(GL_ERR_INPUT,
                              "%s: reference cube is %ld x %ld px with %ld channel(s), but %s is "
                              "%ld x %ld px with %ld channel(s)",
                              s->refs_path, refs->nx, refs->ny, refs->nchan, cube_path, cube->nx,
                              cube->ny, cube->nchan);
            goto cleanup;
        }
    }
    if (s->p.sdi == GL_SDI_CHANNELS && cube->nchan < 2) {
        st = gl_error_set(
            GL_ERR_USAGE,
            "%s: --spectral-step needs a 4-D cube (x, y, wavelength, frame); this one has "
            "one channel",
            cube_path);
        goto cleanup;
    }
    if (s->p.sdi == GL_SDI_CHANNELS) {
        int nw = s->waves_text ? parse_list(s->waves_text, s->waves, 256)
                               : header_wavelengths(cube->header, cube->nchan, s->waves, 256);
        if (nw < 0 || (s->waves_text && nw != cube->nchan)) {
            st = gl_error_set(GL_ERR_USAGE,
                              "--wavelengths '%s': expected %ld positive numbers separated by "
                              "commas (one per channel of %s)",
                              s->waves_text, cube->nchan, cube_path);
            goto cleanup;
        }
        if (nw == 0) {
            st = gl_error_set(GL_ERR_USAGE,
                              "%s: --spectral-step needs --wavelengths, a WAVE axis 3 or WAVEL1..n "
                              "keywords in the header",
                              cube_path);
            goto cleanup;
        }
        s->p.nwave = nw;
        s->p.wavelengths = s->waves;
    } else if (s->waves_text) {
        st = gl_error_set(GL_ERR_USAGE, "--wavelengths is only used with --spectral-step");
        goto cleanup;
    }
    *refs_out = refs;
    refs = NULL;
cleanup:
    gl_cube_free(refs);
    return st;
}

gl_status cli_subtract_run(const cli_subtract_setup *s, const char *cube_path, const gl_cube *cube,
                           const double *angles, const gl_cube *refs, gl_subtract_result *res)
{
    gl_status st = gl_subtract_run(cube, angles, refs, &s->p, res);
    return st == GL_ERR_INPUT ? cli_error_in_file(cube_path, st) : st;
}
