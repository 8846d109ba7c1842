/*
 * cmd_vet.c -- `gloam vet`: characterise and vet the candidates of a table
 * (negative-companion fit, injection-recovery errors, speckle-or-planet
 * tests, optional multi-epoch astrometry); writes one table (CSV and FITS),
 * one figure per candidate (PNG and SVG) and a DS9 region file.
 */
#include "command/subtract_options.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const char help[] =
    "usage: gloam vet CUBE --angles FILE --psf PSF.fits --fwhm PX --candidates FILE\n"
    "                 --out PREFIX [options]\n\n"
    "Characterises and vets each candidate of a table (gloam detect's CSV or FITS table,\n"
    "columns sep_px and pa_deg, or x and y of the north-up image): fits a negative fake\n"
    "companion (separation, position angle, contrast) through the same subtraction,\n"
    "limited to the candidate's annulus; errors from fakes of the same contrast at the\n"
    "same separation and other angles; tests of speckle or planet (S/N over mode counts\n"
    "and halves of the sequence, shape against the forward model, negated and scrambled\n"
    "angles, radial motion with wavelength, background-star track over epochs).\n"
    "Writes PREFIX.vet.csv, .vet.fits, .vet.reg and PREFIX.vet-N.png/.svg per candidate.\n"
    "The tests reduce, and do not remove, the chance of a false claim (docs/vet.md).\n\n"
    "options:\n"
    "  --angles FILE          parallactic angles (deg), one per frame\n"
    "  --psf FILE             unsaturated off-axis PSF\n"
    "  --candidates FILE      the candidates (CSV or FITS table)\n"
    "  --out PREFIX           prefix of the products\n"
    "  --psf-scale F          multiplies the PSF to the science exposure (default 1)\n"
    "  --threshold SIGMA      S/N a planet keeps at every mode count (default 5)\n"
    "  --error-fakes N        fakes for the injection-recovery errors (default 6)\n"
    "  --merit-radius R       merit aperture radius, FWHM (default 1)\n"
    "  --ring-half-width W    half-width of the fitted annulus, FWHM (default 2.5)\n"
    "  --max-evaluations N    merit evaluations per fit (default 120)\n"
    "  --centre-error PX      star-centring error per axis, px (default 0)\n"
    "  --star-table FILE      gloam align's star-position table: adds the error of the\n"
    "                         mean star position (per-frame x_err, y_err over\n"
    "                         sqrt(frames), plus the common x_err_abs, y_err_abs)\n"
    "  --north-error DEG      error of the north offset (default 0)\n"
    "  --pixscale MAS         pixel scale (default: from the WCS of the cube)\n"
    "  --pixscale-error MAS   error of the pixel scale (default 0)\n"
    "  --epochs FILE          offsets at other dates (CSV: mjd,dra_mas,ddec_mas,dra_err_mas,\n"
    "                         ddec_err_mas[,candidate]); this data set's date (DATE-OBS or\n"
    "                         MJD-OBS) and fitted offsets join them\n"
    "  --star-position RA,DEC ICRS degrees at --star-epoch (default: RA, DEC of the header)\n"
    "  --proper-motion PMRA,PMDEC  mas/yr (PMRA = mu_alpha cos dec)\n"
    "  --parallax MAS         the star's parallax\n"
    "  --radial-velocity KMS  the star's radial velocity (default 0)\n"
    "  --star-epoch YEAR      Julian epoch of the star's position (default 2016.0)\n"
    "  --title TEXT           title of the figures (default: OBJECT, or the file name)\n"
    "  (vet runs on one thread unless --threads is given: its subtractions are small)\n"
    "subtraction options:\n";

enum {
    OPT_ANGLES = CLI_OPT_FIRST_COMMAND_OPTION,
    OPT_PSF,
    OPT_OUT,
    OPT_CANDIDATES,
    OPT_SCALE,
    OPT_THRESHOLD,
    OPT_FAKES,
    OPT_MERIT,
    OPT_RING_HALF,
    OPT_EVALS,
    OPT_CENTRE_ERR,
    OPT_STAR_TABLE,
    OPT_NORTH_ERR,
    OPT_PIXSCALE,
    OPT_PIXSCALE_ERR,
    OPT_EPOCHS,
    OPT_STAR_POS,
    OPT_PM,
    OPT_PARALLAX,
    OPT_RV,
    OPT_STAR_EPOCH,
    OPT_TITLE
};

typedef struct vet_opts {
    gl_vet_params vp;
    gl_vet_star star;
    double psf_scale;
    int have_pos, have_pm;
} vet_opts;

static int parse_pair(const gl_cli *cli, const char *opt, const char *arg, double *a, double *b)
{
    char *end;
    *a = strtod(arg, &end);
    if (end != arg && *end == ',') {
        const char *q = end + 1;
        *b = strtod(q, &end);
        if (end != q && !*end && isfinite(*a) && isfinite(*b))
            return 0;
    }
    cli_usage(cli, "%s expects two numbers separated by a comma (got '%s')", opt, arg);
    return -1;
}

static int parse_vet_option(gl_cli *cli, int c, const char *arg, vet_opts *o)
{
    long n;
    gl_vet_params *vp = &o->vp;
    switch (c) {
    case OPT_SCALE: return cli_parse_positive(cli, "--psf-scale", arg, &o->psf_scale) ? -1 : 1;
    case OPT_THRESHOLD:
        return cli_parse_double(cli, "--threshold", arg, 0.5, 20, &vp->threshold_sigma) ? -1 : 1;
    case OPT_FAKES:
        if (cli_parse_long(cli, "--error-fakes", arg, 0, 64, &n))
            return -1;
        vp->error_fakes = (int)n;
        return 1;
    case OPT_MERIT:
        return cli_parse_double(cli, "--merit-radius", arg, 0.25, 3, &vp->merit_radius_fwhm) ? -1
                                                                                             : 1;
    case OPT_RING_HALF:
        return cli_parse_double(cli, "--ring-half-width", arg, 1.5, 10, &vp->ring_half_fwhm) ? -1
                                                                                             : 1;
    case OPT_EVALS:
        if (cli_parse_long(cli, "--max-evaluations", arg, 10, 100000, &n))
            return -1;
        vp->max_evals = (int)n;
        return 1;
    case OPT_CENTRE_ERR:
        return cli_parse_double(cli, "--centre-error", arg, 0, 100, &vp->centre_err_px) ? -1 : 1;
    case OPT_NORTH_ERR:
        return cli_parse_double(cli, "--north-error", arg, 0, 180, &vp->north_err_deg) ? -1 : 1;
    case OPT_PIXSCALE:
        return cli_parse_double(cli, "--pixscale", arg, 1e-3, 1e6, &vp->pixscale_mas) ? -1 : 1;
    case OPT_PIXSCALE_ERR:
        return cli_parse_double(cli, "--pixscale-error", arg, 0, 1e6, &vp->pixscale_err_mas) ? -1
                                                                                             : 1;
    case OPT_STAR_POS:
        o->have_pos = 1;
        return parse_pair(cli, "--star-position", arg, &o->star.ra_deg, &o->star.dec_deg) ? -1 : 1;
    case OPT_PM:
        o->have_pm = 1;
        return parse_pair(cli, "--proper-motion", arg, &o->star.pmra_masyr, &o->star.pmdec_masyr)
                   ? -1
                   : 1;
    case OPT_PARALLAX:
        return cli_parse_double(cli, "--parallax", arg, 1e-6, 1e4, &o->star.parallax_mas) ? -1 : 1;
    case OPT_RV:
        return cli_parse_double(cli, "--radial-velocity", arg, -1e4, 1e4, &o->star.rv_kms) ? -1 : 1;
    case OPT_STAR_EPOCH:
        return cli_parse_double(cli, "--star-epoch", arg, 1000, 3000, &o->star.epoch_jyear) ? -1
                                                                                            : 1;
    default: return 0;
    }
}

/* The candidates' (sep, pa) from the table: sep_px/pa_deg, else x/y. */
static gl_status read_candidates(const char *path, long nx, long ny, double **sep, double **pa,
                                 long *n)
{
    gl_csv *t = NULL;
    gl_status st = gl_table_read(path, &t);
    *sep = *pa = NULL;
    if (st)
        return st;
    int cs = gl_csv_column(t, "sep_px"), cp = gl_csv_column(t, "pa_deg");
    int cx = gl_csv_column(t, "x"), cy = gl_csv_column(t, "y");
    if ((cs < 0 || cp < 0) && (cx < 0 || cy < 0)) {
        st = gl_error_set(GL_ERR_INPUT,
                          "%s: no sep_px and pa_deg (or x and y) columns (a gloam detect "
                          "candidates table is expected)",
                          path);
        goto cleanup;
    }
    /* an empty table is no error: the products say there was nothing */
    *sep = gl_malloc((size_t)(t->nrows + 1) * sizeof **sep);
    *pa = gl_malloc((size_t)(t->nrows + 1) * sizeof **pa);
    if (!*sep || !*pa) {
        st = gl_error_nomem("candidates");
        goto cleanup;
    }
    for (long i = 0; i < t->nrows; i++) {
        const double *row = t->data + i * t->ncols;
        double s, a;
        if (cs >= 0 && cp >= 0) {
            s = row[cs];
            a = row[cp];
        } else {
            double dx = row[cx] - (double)(nx / 2), dy = row[cy] - (double)(ny / 2);
            s = hypot(dx, dy);
            a = atan2(-dx, dy) * 180 / M_PI;
            a = a < 0 ? a + 360 : a;
        }
        if (!isfinite(s) || !isfinite(a)) {
            st = gl_error_set(GL_ERR_INPUT,
                              "%s: row %ld has no position: its %s are empty or not numbers", path,
                              i + 1, cs >= 0 && cp >= 0 ? "sep_px and pa_deg" : "x and y");
            goto cleanup;
        }
        (*sep)[i] = s;
        (*pa)[i] = a;
    }
    *n = t->nrows;
cleanup:
    if (st) {
        gl_free(*sep);
        gl_free(*pa);
        *sep = *pa = NULL;
    }
    gl_csv_free(t);
    return st;
}

/* The error of the mean star position from gloam align's table: the
 * per-frame errors average down over the frames, the part common to every
 * frame (x_err_abs, y_err_abs: the error of the absolute centre, in tables
 * of this version) does not. */
static gl_status star_table_error(const char *path, double *err)
{
    gl_csv *t = NULL;
    gl_status st = gl_csv_read(path, &t);
    if (st)
        return st;
    int cx = gl_csv_column(t, "x_err"), cy = gl_csv_column(t, "y_err");
    int ax = gl_csv_column(t, "x_err_abs"), ay = gl_csv_column(t, "y_err_abs");
    int ck = gl_csv_column(t, "kept"); /* the aligned cube holds the kept frames only */
    double s = 0, c = 0;
    long m = 0;
    if (cx < 0 || cy < 0) {
        st = gl_error_set(GL_ERR_INPUT, "%s: no x_err and y_err columns (gloam align's --table)",
                          path);
        goto cleanup;
    }
    for (long i = 0; i < t->nrows; i++) {
        const double *row = t->data + i * t->ncols;
        double a = row[cx], b = row[cy];
        double ca = ax >= 0 && isfinite(row[ax]) ? fmin(row[ax], a) : 0.0;
        double cb = ay >= 0 && isfinite(row[ay]) ? fmin(row[ay], b) : 0.0;
        if (isfinite(a) && isfinite(b) && !(ck >= 0 && row[ck] == 0)) {
            s += (a * a - ca * ca + b * b - cb * cb) / 2;
            c += (ca * ca + cb * cb) / 2;
            m++;
        }
    }
    if (m == 0) {
        st = gl_error_set(GL_ERR_INPUT, "%s: no frame with centring errors", path);
        goto cleanup;
    }
    /* a common offset that the table does not know of belongs in
     * --centre-error */
    *err = sqrt(s / (double)m / (double)m + c / (double)m);
cleanup:
    gl_csv_free(t);
    return st;
}

/* Epochs of one candidate (1-based) from the epoch table. */
typedef struct epoch_table {
    gl_csv *t;
    int cm, ca, cd, cea, ced, cc;
} epoch_table;

static gl_status epochs_read(const char *path, epoch_table *e)
{
    gl_status st = gl_csv_read(path, &e->t);
    if (st)
        return st;
    e->cm = gl_csv_column(e->t, "mjd");
    e->ca = gl_csv_column(e->t, "dra_mas");
    e->cd = gl_csv_column(e->t, "ddec_mas");
    e->cea = gl_csv_column(e->t, "dra_err_mas");
    e->ced = gl_csv_column(e->t, "ddec_err_mas");
    e->cc = gl_csv_column(e->t, "candidate");
    if (e->cm < 0 || e->ca < 0 || e->cd < 0 || e->cea < 0 || e->ced < 0)
        return gl_error_set(GL_ERR_INPUT,
                            "%s: the epoch table needs columns mjd, dra_mas, ddec_mas, "
                            "dra_err_mas, ddec_err_mas",
                            path);
    for (long i = 0; i < e->t->nrows; i++) {
        const double *r = e->t->data + i * e->t->ncols;
        if (!isfinite(r[e->cm]) || !isfinite(r[e->ca]) || !isfinite(r[e->cd]) || !(r[e->cea] > 0) ||
            !(r[e->ced] > 0))
            return gl_error_set(GL_ERR_INPUT,
                                "%s: row %ld: a date, offsets and positive errors "
                                "are needed",
                                path, i + 1);
    }
    return GL_OK;
}

static long epochs_of(const epoch_table *e, long cand, double *buf)
{
    long n = 0, nr = e->t->nrows;
    for (long i = 0; i < nr; i++) {
        const double *r = e->t->data + i * e->t->ncols;
        if (e->cc >= 0 ? lround(r[e->cc]) != cand : cand != 1)
            continue;
        buf[n] = r[e->cm];
        buf[nr + n] = r[e->ca];
        buf[2 * nr + n] = r[e->cd];
        buf[3 * nr + n] = r[e->cea];
        buf[4 * nr + n] = r[e->ced];
        n++;
    }
    return n;
}

/* The table: one row per candidate. */
enum { NFIX = 33, NCOLS = NFIX + 4 * GL_VET_NTESTS };

static gl_status write_table(const char *csv, const char *fits, const gl_vet_result *r,
                             const long *num, long n, const gl_header *keys,
                             const gl_provenance *prov)
{
    static const char *fixed[NFIX] = {
        "candidate",    "sep_px",           "sep_err",       "pa_deg",       "pa_err",
        "sep_mas",      "sep_err_mas",      "dra_mas",       "dra_err_mas",  "ddec_mas",
        "ddec_err_mas", "contrast",         "contrast_err",  "dmag",         "dmag_err",
        "snr",          "throughput",       "start_sep_px",  "start_pa_deg", "start_contrast",
        "fit_merit",    "fit_evals",        "fit_converged", "error_fakes",  "sep_err_fit",
        "pa_err_fit",   "contrast_err_fit", "snr_half1",     "snr_half2",    "tests_possible",
        "tests_passed", "table_sep_px",     "table_pa_deg"};
    static const char *funits[NFIX] = {
        "", "pix", "pix", "deg", "deg", "mas", "mas", "mas", "mas", "mas", "mas",
        "", "",    "mag", "mag", "",    "",    "pix", "deg", "",    "",    "",
        "", "",    "pix", "deg", "",    "",    "",    "",    "",    "pix", "deg"};
    char tn[4 * GL_VET_NTESTS][32];
    const char *names[NCOLS], *units[NCOLS];
    const double *cols[NCOLS];
    double *buf = gl_calloc((size_t)(n + 1) * NCOLS, sizeof *buf);
    if (!buf)
        return gl_error_nomem("vet table");
    for (int c = 0; c < NFIX; c++) {
        names[c] = fixed[c];
        units[c] = funits[c];
    }
    static const char *suffix[4] = {"value", "planet", "limit", "pass"};
    for (int k = 0; k < GL_VET_NTESTS; k++)
        for (int q = 0; q < 4; q++) {
            int c = NFIX + 4 * k + q;
            snprintf(tn[4 * k + q], sizeof tn[0], "%s_%s", gl_vet_test_name((gl_vet_test_id)k),
                     suffix[q]);
            names[c] = tn[4 * k + q];
            units[c] = "";
        }
    for (int c = 0; c < NCOLS; c++)
        cols[c] = buf + (size_t)c * (size_t)n;
    for (long i = 0; i < n; i++) {
        const gl_vet_result *v = &r[i];
        double f[NFIX] = {(double)num[i],
                          v->sep_px,
                          v->sep_err,
                          v->pa_deg,
                          v->pa_err,
                          v->sep_mas,
                          v->sep_err_mas,
                          v->dra_mas,
                          v->dra_err_mas,
                          v->ddec_mas,
                          v->ddec_err_mas,
                          v->contrast,
                          v->contrast_err,
                          v->dmag,
                          v->dmag_err,
                          v->snr,
                          v->throughput,
                          v->start_sep,
                          v->start_pa,
                          v->start_contrast,
                          v->merit,
                          v->nevals,
                          v->converged,
                          v->nfakes,
                          v->sep_err_fit,
                          v->pa_err_fit,
                          v->contrast_err_fit,
                          v->tests[GL_VET_TEST_HALVES].possible ? v->snr_half[0] : NAN,
                          v->tests[GL_VET_TEST_HALVES].possible ? v->snr_half[1] : NAN,
                          v->npossible,
                          v->npassed,
                          v->given_sep,
                          v->given_pa};
        for (int c = 0; c < NFIX; c++)
            buf[(size_t)c * (size_t)n + (size_t)i] = isfinite(f[c]) ? f[c] : NAN;
        for (int k = 0; k < GL_VET_NTESTS; k++) {
            const gl_vet_test *t = &v->tests[k];
            double q[4] = {t->value, t->expected, t->limit, t->possible ? t->passed : NAN};
            for (int j = 0; j < 4; j++)
                buf[(size_t)(NFIX + 4 * k + j) * (size_t)n + (size_t)i] =
                    t->possible && isfinite(q[j]) ? q[j] : NAN;
        }
    }
    gl_table t = {NCOLS, n, names, units, cols, keys};
    gl_status st = gl_table_write_csv(csv, &t);
    if (!st)
        st = gl_table_write_fits(fits, &t, "VET", prov);
    gl_free(buf);
    return st;
}

static gl_status write_regions(const char *path, const gl_vet_result *r, const long *num, long n,
                               long nx, long ny)
{
    FILE *fp = fopen(path, "w");
    if (!fp)
        return gl_error_set(GL_ERR_IO, "%s: cannot create", path);
    fprintf(fp, "# Region file format: DS9 version 4.1\n"
                "# gloam vet: fitted positions in the north-up subtracted image (1-based pixels)\n"
                "global color=green font=\"helvetica 10 normal\"\nimage\n");
    for (long i = 0; i < n; i++) {
        double x = (double)(nx / 2) - r[i].sep_px * sin(r[i].pa_deg * M_PI / 180) + 1;
        double y = (double)(ny / 2) + r[i].sep_px * cos(r[i].pa_deg * M_PI / 180) + 1;
        fprintf(fp, "circle(%.3f,%.3f,%.3f) # color=%s text={%ld: %d/%d tests, c=%.3g}\n", x, y,
                r[i].merit_radius_px, r[i].npassed == r[i].npossible ? "green" : "red", num[i],
                r[i].npassed, r[i].npossible, r[i].contrast);
    }
    int bad = ferror(fp);
    if (fclose(fp) || bad)
        return gl_error_set(GL_ERR_IO, "%s: write error", path);
    return GL_OK;
}

/* Re-records the library's message as "FILE: row N: message". */
static void row_error(const char *path, long row, gl_status st)
{
    char msg[1024];
    snprintf(msg, sizeof msg, "%s", gl_error_message());
    gl_error_set(st, "%s: row %ld: %s", path, row + 1, msg);
}

int cmd_vet(gl_cli *cli, int argc, char **argv)
{
    static const struct option opts[] = {{"angles", required_argument, 0, OPT_ANGLES},
                                         {"psf", required_argument, 0, OPT_PSF},
                                         {"out", required_argument, 0, OPT_OUT},
                                         {"candidates", required_argument, 0, OPT_CANDIDATES},
                                         {"psf-scale", required_argument, 0, OPT_SCALE},
                                         {"threshold", required_argument, 0, OPT_THRESHOLD},
                                         {"error-fakes", required_argument, 0, OPT_FAKES},
                                         {"merit-radius", required_argument, 0, OPT_MERIT},
                                         {"ring-half-width", required_argument, 0, OPT_RING_HALF},
                                         {"max-evaluations", required_argument, 0, OPT_EVALS},
                                         {"centre-error", required_argument, 0, OPT_CENTRE_ERR},
                                         {"star-table", required_argument, 0, OPT_STAR_TABLE},
                                         {"north-error", required_argument, 0, OPT_NORTH_ERR},
                                         {"pixscale", required_argument, 0, OPT_PIXSCALE},
                                         {"pixscale-error", required_argument, 0, OPT_PIXSCALE_ERR},
                                         {"epochs", required_argument, 0, OPT_EPOCHS},
                                         {"star-position", required_argument, 0, OPT_STAR_POS},
                                         {"proper-motion", required_argument, 0, OPT_PM},
                                         {"parallax", required_argument, 0, OPT_PARALLAX},
                                         {"radial-velocity", required_argument, 0, OPT_RV},
                                         {"star-epoch", required_argument, 0, OPT_STAR_EPOCH},
                                         {"title", required_argument, 0, OPT_TITLE},
                                         CLI_SUBTRACT_OPTIONS,
                                         CLI_COMMON_OPTIONS,
                                         {0, 0, 0, 0}};
    const char *angles_path = NULL, *psf_path = NULL, *prefix = NULL, *cand_path = NULL,
               *star_table = NULL, *epochs_path = NULL, *title = NULL;
    cli_subtract_setup setup;
    cli_subtract_setup_init(&setup);
    vet_opts o;
    memset(&o, 0, sizeof o);
    gl_vet_params_init(&o.vp);
    o.psf_scale = 1;
    o.star.ra_deg = o.star.dec_deg = o.star.parallax_mas = NAN;
    o.star.epoch_jyear = 2016.0;
    int c, k;
    char full_help[8192];
    snprintf(full_help, sizeof full_help, "%s%s", help, cli_subtract_help);
    while ((k = cli_next_option(cli, argc, argv, opts, full_help, &c)) > 0) {
        int r = cli_subtract_option(cli, c, optarg, &setup);
        if (r == 0)
            r = parse_vet_option(cli, c, optarg, &o);
        if (r < 0)
            return 1;
        if (r)
            continue;
        switch (c) {
        case OPT_ANGLES: angles_path = optarg; break;
        case OPT_PSF: psf_path = optarg; break;
        case OPT_OUT: prefix = optarg; break;
        case OPT_CANDIDATES: cand_path = optarg; break;
        case OPT_STAR_TABLE: star_table = optarg; break;
        case OPT_EPOCHS: epochs_path = optarg; break;
        case OPT_TITLE: title = optarg; break;
        default: return cli_bad_option(cli, argv);
        }
    }
    if (k < 0)
        return cli_exit_status(k);
    const char *cube_path = cli_positional(cli, argc, argv, "the input cube");
    if (!cube_path)
        return 1;
    {
        /* angles: cli_read_cube_angles (the cube's ANGLES table without --angles) */
        const char *names[] = {"--psf", "--candidates", "--out"};
        const void *vals[] = {psf_path, cand_path, prefix};
        if (cli_missing(cli, 3, names, vals))
            return 1;
    }
    if (!setup.have_fwhm) { /* --fwhm auto: measured on the PSF */
        setup.p.fwhm = CLI_FWHM_AUTO;
        setup.have_fwhm = 1;
    }
    if (cli_subtract_check(cli, &setup))
        return 1;
    if (setup.memory_limit > 0)
        return cli_usage(cli, "--memory-limit: vet keeps the cube in memory (its subtractions "
                              "run on each candidate's annulus) and has no streamed path");
    if (epochs_path && (!o.have_pm || !(o.star.parallax_mas > 0)))
        return cli_usage(cli, "--epochs needs the star's --proper-motion and --parallax");
    /* hundreds of small subtractions: one thread unless asked, because the
     * parallel regions are too short to pay for waking the others (15x
     * slower with 2 threads on a busy 2-core machine); results are the same */
    if (cli->threads == 0)
        cli->threads = 1;
    cli_start(cli);

    gl_cube *cube = NULL, *refs = NULL, *psfc = NULL;
    gl_psf_model *psf = NULL;
    gl_outset *outs = NULL;
    gl_header *keys = NULL;
    double *angles = NULL, *sep = NULL, *pa = NULL, *ebuf = NULL;
    long *num = NULL;          /* each candidate's row in the table (1-based): its number */
    char(*failed)[600] = NULL; /* why a candidate could not be vetted ("" when it was) */
    gl_vet_result *res = NULL;
    epoch_table et = {0};
    long ncand = 0;
    gl_status st;
    char p_csv[4096], p_fits[4096], p_reg[4096];
    const char *t_csv, *t_fits, *t_reg;
    char(*p_png)[4096] = NULL, (*p_svg)[4096] = NULL;
    const char **t_png = NULL, **t_svg = NULL;

    if ((st = cli_read_cube_angles(cli, cube_path, angles_path, &cube, &angles)) ||
        (st = cli_resolve_fwhm(cli, &setup.p.fwhm, setup.p.fwhm > 0 ? NULL : psf_path, 1,
                               cube->header, cube_path)) || /* --fwhm auto */
        (st = cli_read_input(cli, psf_path, 2, &psfc)) ||
        (st = cli_subtract_prepare(cli, &setup, cube_path, cube, &refs)) ||
        (st = gl_psf_model_new(psfc, psf_path, cube->nx, cube->ny, cube->nchan, o.psf_scale, &psf)))
        goto cleanup;
    if ((st = read_candidates(cand_path, cube->nx, cube->ny, &sep, &pa, &ncand)) ||
        (st = gl_provenance_add_input(&cli->prov, cand_path)))
        goto cleanup;
    /* the inner radius the subtraction will really use (klip-rings chooses
     * it from the rotation when the mask is auto), so that the checks and the
     * fit's annulus know the masked zone */
    if (setup.p.mask_radius == GL_SUBTRACT_MASK_AUTO)
        setup.p.mask_radius = gl_subtract_inner_radius(&setup.p, angles, cube->nframe,
                                                       refs ? refs->nframe : 0, cube->nx, cube->ny);
    /* a candidate that cannot be vetted where it lies is left out with a
     * warning; a table where none can be is refused */
    if (!(num = gl_malloc((size_t)(ncand + 1) * sizeof *num))) {
        st = gl_error_nomem("vet candidates");
        goto cleanup;
    }
    long nkept = 0;
    for (long i = 0; i < ncand; i++)
        if (!gl_vet_check_position(cube->nx, cube->ny, &setup.p, &o.vp, sep[i], pa[i]))
            nkept++;
    gl_error_clear();
    for (long i = 0, j = 0; i < ncand; i++) {
        if ((st = gl_vet_check_position(cube->nx, cube->ny, &setup.p, &o.vp, sep[i], pa[i]))) {
            row_error(cand_path, i, st);
            if (nkept == 0)
                goto cleanup;
            gl_log(GL_LOG_WARN, "%s; left out, the other candidates are vetted",
                   gl_error_message());
            gl_error_clear();
            st = GL_OK;
            continue;
        }
        sep[j] = sep[i];
        pa[j] = pa[i];
        num[j++] = i + 1;
    }
    ncand = nkept;
    /* fewer fakes than an error bar needs: said once, for every candidate */
    if (ncand > 0 && o.vp.error_fakes < GL_VET_MIN_ERROR_FAKES) {
        int nf = o.vp.error_fakes;
        if (nf < 2)
            gl_log(GL_LOG_WARN,
                   "--error-fakes %d: %s, so no measurement errors (the *_err columns stay "
                   "empty) and no planet values for the tests that compare with fakes; use at "
                   "least %d (default 6)",
                   nf, nf ? "one fake gives no rms" : "no injection-recovery fakes",
                   GL_VET_MIN_ERROR_FAKES);
        else
            gl_log(GL_LOG_WARN,
                   "--error-fakes %d: the errors are the rms of %d recoveries, uncertain by "
                   "about %.0f%% themselves (1/sqrt(2N)), and the tests compare with %d fakes; "
                   "use at least %d (default 6)",
                   nf, nf, 100 / sqrt(2.0 * nf), nf, GL_VET_MIN_ERROR_FAKES);
    }
    if (star_table) {
        double e = 0;
        if ((st = star_table_error(star_table, &e)) ||
            (st = gl_provenance_add_input(&cli->prov, star_table)))
            goto cleanup;
        o.vp.centre_err_px = hypot(o.vp.centre_err_px, e);
        gl_log(GL_LOG_INFO, "star-centring error %.3f px per axis (%.3f px from %s)",
               o.vp.centre_err_px, e, star_table);
    }
    gl_obsinfo info;
    gl_obsinfo_from_header(cube->header, &info);
    if (!(o.vp.pixscale_mas > 0) && info.pixscale_mas > 0)
        o.vp.pixscale_mas = info.pixscale_mas;
    o.vp.mjd_obs = info.mjd_obs;
    if (!o.have_pos) {
        o.star.ra_deg = info.ra_deg;
        o.star.dec_deg = info.dec_deg;
    }
    if (epochs_path) {
        if ((st = epochs_read(epochs_path, &et)) ||
            (st = gl_provenance_add_input(&cli->prov, epochs_path)))
            goto cleanup;
        if (!isfinite(o.star.ra_deg) || !isfinite(o.star.dec_deg)) {
            st = gl_error_set(GL_ERR_USAGE,
                              "%s: --epochs needs the star's position "
                              "(--star-position, or RA and DEC in the header)",
                              cube_path);
            goto cleanup;
        }
        if (!(o.vp.pixscale_mas > 0))
            gl_log(GL_LOG_WARN,
                   "no pixel scale (--pixscale or a WCS): this epoch's offsets "
                   "cannot join %s",
                   epochs_path);
        if (!(ebuf = gl_malloc((size_t)(et.t->nrows + 1) * 5 * sizeof *ebuf))) {
            st = gl_error_nomem("epochs");
            goto cleanup;
        }
    }
    if ((st = gl_outset_new(cli->overwrite, &outs)) ||
        (st = cli_add_product(cli, outs, prefix, ".vet.csv", p_csv, sizeof p_csv, &t_csv)) ||
        (st = cli_add_product(cli, outs, prefix, ".vet.fits", p_fits, sizeof p_fits, &t_fits)) ||
        (st = cli_add_product(cli, outs, prefix, ".vet.reg", p_reg, sizeof p_reg, &t_reg)))
        goto cleanup;
    if (ncand == 0)
        gl_log(GL_LOG_INFO, "no candidates in %s: the tables are written empty", cand_path);
    p_png = gl_calloc((size_t)ncand + 1, sizeof *p_png);
    p_svg = gl_calloc((size_t)ncand + 1, sizeof *p_svg);
    t_png = gl_calloc((size_t)ncand + 1, sizeof *t_png);
    t_svg = gl_calloc((size_t)ncand + 1, sizeof *t_svg);
    res = gl_calloc((size_t)ncand + 1, sizeof *res);
    failed = gl_calloc((size_t)ncand + 1, sizeof *failed);
    if (!p_png || !p_svg || !t_png || !t_svg || !res || !failed) {
        st = gl_error_nomem("vet products");
        goto cleanup;
    }
    for (long i = 0; i < ncand; i++) {
        char suf[64];
        snprintf(suf, sizeof suf, ".vet-%ld.png", num[i]);
        if ((st = cli_add_product(cli, outs, prefix, suf, p_png[i], sizeof p_png[i], &t_png[i])))
            goto cleanup;
        snprintf(suf, sizeof suf, ".vet-%ld.svg", num[i]);
        if ((st = cli_add_product(cli, outs, prefix, suf, p_svg[i], sizeof p_svg[i], &t_svg[i])))
            goto cleanup;
    }
    cli_work_started(cli);

    for (long i = 0; i < ncand; i++) {
        gl_vet_epochs ep = {0};
        gl_progress("vet", i, ncand); /* the bar; the fits and fakes inside it are its label */
        if (epochs_path) {
            long nr = et.t->nrows;
            ep.n = epochs_of(&et, num[i], ebuf);
            ep.mjd_utc = ebuf;
            ep.dra_mas = ebuf + nr;
            ep.ddec_mas = ebuf + 2 * nr;
            ep.dra_err = ebuf + 3 * nr;
            ep.ddec_err = ebuf + 4 * nr;
        }
        gl_log(GL_LOG_INFO, "candidate %ld: %.2f px, %.2f deg in %s (table_sep_px, table_pa_deg)",
               num[i], sep[i], pa[i], cand_path);
        if ((st = gl_vet_candidate(cube, angles, refs, &setup.p, psf, &o.vp, sep[i], pa[i],
                                   epochs_path ? &o.star : NULL, epochs_path ? &ep : NULL,
                                   &res[i]))) {
            if (st != GL_ERR_INPUT && st != GL_ERR_USAGE)
                goto cleanup;
            /* this candidate cannot be characterised (its fit leaves the
             * usable annulus, no flux there, ...): the others still are */
            row_error(cand_path, num[i] - 1, st);
            snprintf(failed[i], sizeof failed[i], "%s", gl_error_message());
            gl_error_clear();
            st = GL_OK;
            gl_vet_result_free(&res[i]);
            memset(&res[i], 0, sizeof res[i]);
            gl_outset_drop(outs, p_png[i]);
            gl_outset_drop(outs, p_svg[i]);
            continue;
        }
        const gl_vet_result *v = &res[i];
        gl_log(
            GL_LOG_INFO,
            "  start of the fit %.2f px, %.2f deg, contrast %.3g: the peak the position sits on, "
            "its aperture flux over the throughput (start_sep_px, start_pa_deg, "
            "start_contrast)",
            v->start_sep, v->start_pa, v->start_contrast);
        gl_log(GL_LOG_INFO,
               "  fitted sep %.2f +- %.2f px, PA %.2f +- %.2f deg, contrast %.3g +- %.2g (%.2f +- "
               "%.2f mag), S/N %.1f; tests passed %d of %d possible",
               v->sep_px, v->sep_err, v->pa_deg, v->pa_err, v->contrast, v->contrast_err, v->dmag,
               v->dmag_err, v->snr, v->npassed, v->npossible);
        for (int q = 0; q < GL_VET_NTESTS; q++) {
            const gl_vet_test *t = &v->tests[q];
            if (t->possible)
                gl_log(GL_LOG_INFO, "    %-9s %s: value %.3g, planet %.3g, limit %.3g (%s)",
                       gl_vet_test_name((gl_vet_test_id)q), t->passed ? "pass" : "FAIL", t->value,
                       t->expected, t->limit, t->note);
            else
                gl_log(GL_LOG_INFO, "    %-9s not possible: %s",
                       gl_vet_test_name((gl_vet_test_id)q), t->note);
        }
        char ttl[256];
        snprintf(ttl, sizeof ttl, "%s -- candidate %ld",
                 title            ? title
                 : info.object[0] ? info.object
                                  : cube_path,
                 num[i]);
        if ((st = gl_vet_figure_write(t_png[i], t_svg[i], v, ttl)))
            goto cleanup;
    }
    gl_progress("vet", ncand, ncand);
    {
        long nok = 0, nbad = 0, first = -1;
        for (long i = 0; i < ncand; i++)
            if (failed[i][0]) {
                nbad++;
                first = first < 0 ? i : first;
            } else {
                res[nok] = res[i];
                num[nok++] = num[i];
            }
        if (nbad && nok == 0) { /* nothing vetted: one line, nothing written */
            if (ncand == 1)
                st = gl_error_set(GL_ERR_INPUT, "%s", failed[first]);
            else
                st =
                    gl_error_set(GL_ERR_INPUT, "%s: none of the %ld candidates could be vetted; %s",
                                 cand_path, ncand, failed[first]);
            ncand = 0;
            goto cleanup;
        }
        for (long i = 0; i < ncand; i++)
            if (failed[i][0])
                gl_log(GL_LOG_WARN, "%s; left out, the other candidates are vetted", failed[i]);
        ncand = nok;
    }

    if (!(keys = gl_header_new())) {
        st = gl_error_nomem("vet header");
        goto cleanup;
    }
    gl_header_set_str(keys, "GLVMETH", "negative fake companion, Lagrange+2010, Marois+2010",
                      "characterisation");
    gl_header_set_str(keys, "GLVMERIT", "sum of squares in an aperture, Wertz+2017",
                      "figure of merit");
    gl_header_set_dbl(keys, "GLVMRAD", o.vp.merit_radius_fwhm, "merit aperture radius, FWHM");
    gl_header_set_dbl(keys, "GLVRING", o.vp.ring_half_fwhm, "half-width of fitted annulus, FWHM");
    gl_header_set_int(keys, "GLVFAKES", o.vp.error_fakes, "injection-recovery fakes");
    gl_header_set_dbl(keys, "GLVTHR", o.vp.threshold_sigma, "threshold of the mode test, sigma");
    gl_header_set_dbl(keys, "GLVCERR", o.vp.centre_err_px, "[pix] star-centring error per axis");
    gl_header_set_dbl(keys, "GLVNERR", o.vp.north_err_deg, "[deg] north-offset error");
    if (o.vp.pixscale_mas > 0)
        gl_header_set_dbl(keys, "GLVSCALE", o.vp.pixscale_mas, "[mas/pix] pixel scale");
    gl_header_set_dbl(keys, "GLVSCERR", o.vp.pixscale_err_mas, "[mas/pix] pixel-scale error");
    gl_header_set_str(keys, "GLMETHOD", gl_subtract_method_name(setup.p.method),
                      "subtraction method");
    gl_header_set_dbl(keys, "GLFWHM", setup.p.fwhm, "[pix] FWHM");
    gl_header_set_dbl(keys, "GLPSFSC", o.psf_scale, "PSF scale to the science exposure");
    gl_header_add_history(keys, "caution: the tests reduce, and do not remove, the chance of a "
                                "false claim; a pass is not a confirmation (docs/vet.md)");
    gl_header_add_history(keys, "all numbers come from the subtraction limited to each "
                                "candidate's annulus; errors = injection-recovery scatter plus "
                                "centring, north and scale errors; no PSF-calibration error");
    for (int q = 0; q < GL_VET_NTESTS; q++) {
        char h[200];
        snprintf(h, sizeof h, "test %s: %s", gl_vet_test_name((gl_vet_test_id)q),
                 gl_vet_test_rule((gl_vet_test_id)q));
        gl_header_add_history(keys, h);
    }
    if ((st = write_table(t_csv, t_fits, res, num, ncand, keys, &cli->prov)) ||
        (st = write_regions(t_reg, res, num, ncand, cube->nx, cube->ny)) ||
        (st = gl_outset_commit(outs)))
        goto cleanup;
    cli_log_written(outs);

cleanup:
    gl_outset_free(outs);
    for (long i = 0; res && i < ncand; i++)
        gl_vet_result_free(&res[i]);
    gl_free(res);
    gl_free(p_png);
    gl_free(p_svg);
    gl_free(t_png);
    gl_free(t_svg);
    gl_free(sep);
    gl_free(pa);
    gl_free(num);
    gl_free(failed);
    gl_free(ebuf);
    gl_csv_free(et.t);
    gl_header_free(keys);
    gl_psf_model_free(psf);
    gl_cube_free(cube);
    gl_cube_free(refs);
    gl_cube_free(psfc);
    gl_free(angles);
    return st ? cli_fail(cli, st) : 0;
}
