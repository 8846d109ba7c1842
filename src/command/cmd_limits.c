/*
 * cmd_limits.c -- `gloam limits`: contrast curves calibrated by fake
 * companions, written as a table (CSV and FITS) and a figure (PNG and SVG)
 * that both carry their assumptions.
 */
#include "command/subtract_options.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const char help[] =
    "usage: gloam limits CUBE --angles FILE --psf PSF.fits --fwhm PX --out PREFIX [options]\n\n"
    "Detection limits: runs the subtraction you choose (same options as gloam subtract),\n"
    "measures the noise at each separation from non-overlapping 1-FWHM apertures, sets\n"
    "the Student-t threshold of the chosen false-positive fraction (Mawet et al. 2014),\n"
    "calibrates the throughput with fake companions planted in extra runs of the same\n"
    "subtraction, and reports the contrast at 50% completeness and at a chosen\n"
    "completeness (Jensen-Clem et al. 2018). Writes PREFIX.limits.csv, .limits.fits,\n"
    "PREFIX.limits.png, .limits.svg, .limits.pdf (one journal column wide) and\n"
    "PREFIX.fakes.csv.\n\n"
    "options:\n"
    "  --angles FILE          parallactic angles (deg), one per frame (default: the\n"
    "                         cube's ANGLES table, written by gloam align)\n"
    "  --psf FILE             unsaturated off-axis PSF\n"
    "  --out PREFIX           prefix of the products\n"
    "  --psf-scale F          multiplies the PSF to the science exposure (default 1)\n"
    "  --threshold SIGMA      false-positive fraction as a Gaussian sigma (default 5)\n"
    "  --completeness Q       completeness of the second curve, 0-1 (default 0.95)\n"
    "  --step PX              separation step (default FWHM/2)\n"
    "  --min-separation PX    first separation (default max(FWHM, mask + FWHM/2))\n"
    "  --max-separation PX    last separation (default: where apertures still fit)\n"
    "  --fake-runs N          runs with fake companions (default 2); klip-frame plants a\n"
    "                         run in batches by brightness, one subtraction each\n"
    "  --fake-level X|auto    fake flux in units of the local aperture noise (default auto:\n"
    "                         the flux a throughput of 1 detects half of the time, >= 10)\n"
    "  --skip-flanking        leave the two apertures flanking the test aperture out of the\n"
    "                         references (noise model and fakes' S/N; docs/names.md\n"
    "                         lists the old spelling)\n"
    "  --pixscale MAS         pixel scale for the arcsec axis (default: from the WCS)\n"
    "  --title TEXT           title of the figure (default: OBJECT, or the file name)\n"
    "  --candidates FILE      a candidates CSV (gloam detect; columns sep_px, pa_deg): left\n"
    "                         out of the noise (apertures within 1 FWHM), fakes keep 2 FWHM\n"
    "                         away from them, and PREFIX.companions.csv gives\n"
    "                         their throughput-corrected contrast in every plane; the\n"
    "                         figures mark them (numbered diamonds, plane 1)\n"
    "  --plot-every-plane     the figures show the 50% curve of every plane (mode count)\n"
    "                         instead of plane 1's two curves\n"
    "  --memory-limit SIZE    here without the streamed path that the subtraction options\n"
    "                         below describe: limits keeps the cube and a copy with the\n"
    "                         fakes in memory and refuses to start when that is more than\n"
    "                         SIZE (without the option it runs whatever the size)\n"
    "subtraction options:\n";

enum {
    OPT_ANGLES = CLI_OPT_FIRST_COMMAND_OPTION,
    OPT_PSF,
    OPT_OUT,
    OPT_SCALE,
    OPT_THRESHOLD,
    OPT_COMPLETENESS,
    OPT_STEP,
    OPT_RMIN,
    OPT_RMAX,
    OPT_FAKE_RUNS,
    OPT_FAKE_LEVEL,
    OPT_SKIP_FLANKING,
    OPT_EXCLUDE_OLD,
    OPT_PIXSCALE,
    OPT_TITLE,
    OPT_CANDIDATES,
    OPT_EVERY_PLANE
};

static int parse_limits_option(gl_cli *cli, int c, const char *arg, gl_limits_params *lp,
                               double *psf_scale, double *pixscale)
{
    long n;
    switch (c) {
    case OPT_SCALE: return cli_parse_positive(cli, "--psf-scale", arg, psf_scale) ? -1 : 1;
    case OPT_THRESHOLD:
        return cli_parse_double(cli, "--threshold", arg, 0.5, 20, &lp->sigma) ? -1 : 1;
    case OPT_COMPLETENESS:
        if (cli_parse_double(cli, "--completeness", arg, 0.01, 0.999, &lp->completeness))
            return -1;
        return 1;
    case OPT_STEP: return cli_parse_double(cli, "--step", arg, 0.1, 1e4, &lp->step_px) ? -1 : 1;
    case OPT_RMIN:
        return cli_parse_double(cli, "--min-separation", arg, 0.1, 1e5, &lp->r_min_px) ? -1 : 1;
    case OPT_RMAX:
        return cli_parse_double(cli, "--max-separation", arg, 0.1, 1e5, &lp->r_max_px) ? -1 : 1;
    case OPT_FAKE_RUNS:
        if (cli_parse_long(cli, "--fake-runs", arg, 1, 64, &n))
            return -1;
        lp->fake_runs = (int)n;
        return 1;
    case OPT_FAKE_LEVEL:
        if (strcmp(arg, "auto") == 0) {
            lp->fake_level = 0;
            return 1;
        }
        return cli_parse_double(cli, "--fake-level", arg, 0.1, 1e4, &lp->fake_level) ? -1 : 1;
    case OPT_EXCLUDE_OLD:
        cli_deprecated(cli, "--exclude-adjacent", "--skip-flanking");
        lp->skip_flanking = 1;
        return 1;
    case OPT_SKIP_FLANKING: lp->skip_flanking = 1; return 1;
    case OPT_PIXSCALE:
        return cli_parse_double(cli, "--pixscale", arg, 1e-3, 1e6, pixscale) ? -1 : 1;
    default: return 0;
    }
}

int cmd_limits(gl_cli *cli, int argc, char **argv)
{
    static const struct option opts[] = {{"angles", required_argument, 0, OPT_ANGLES},
                                         {"psf", required_argument, 0, OPT_PSF},
                                         {"out", required_argument, 0, OPT_OUT},
                                         {"psf-scale", required_argument, 0, OPT_SCALE},
                                         {"threshold", required_argument, 0, OPT_THRESHOLD},
                                         {"completeness", required_argument, 0, OPT_COMPLETENESS},
                                         {"step", required_argument, 0, OPT_STEP},
                                         {"min-separation", required_argument, 0, OPT_RMIN},
                                         {"max-separation", required_argument, 0, OPT_RMAX},
                                         {"fake-runs", required_argument, 0, OPT_FAKE_RUNS},
                                         {"fake-level", required_argument, 0, OPT_FAKE_LEVEL},
                                         {"skip-flanking", no_argument, 0, OPT_SKIP_FLANKING},
                                         {"exclude-adjacent", no_argument, 0, OPT_EXCLUDE_OLD},
                                         {"pixscale", required_argument, 0, OPT_PIXSCALE},
                                         {"title", required_argument, 0, OPT_TITLE},
                                         {"candidates", required_argument, 0, OPT_CANDIDATES},
                                         {"plot-every-plane", no_argument, 0, OPT_EVERY_PLANE},
                                         CLI_SUBTRACT_OPTIONS,
                                         CLI_COMMON_OPTIONS,
                                         {0, 0, 0, 0}};
    const char *angles_path = NULL, *psf_path = NULL, *prefix = NULL, *title = NULL,
               *cand_path = NULL;
    int every_plane = 0;
    cli_subtract_setup setup;
    cli_subtract_setup_init(&setup);
    gl_limits_params lp;
    gl_limits_params_init(&lp);
    double psf_scale = 1, pixscale = NAN;
    int c;
    char full_help[8192];
    snprintf(full_help, sizeof full_help, "%s%s", help, cli_subtract_help);

    int k;
    while ((k = cli_next_option(cli, argc, argv, opts, full_help, &c)) > 0) {
        int r = cli_subtract_option(cli, c, optarg, &setup);
        if (r == 0)
            r = parse_limits_option(cli, c, optarg, &lp, &psf_scale, &pixscale);
        if (r < 0)
            return 1;
        if (r)
            continue;
        switch (c) {
        case OPT_ANGLES: angles_path = optarg; break;
        case OPT_PSF: psf_path = optarg; break;
        case OPT_OUT: prefix = optarg; break;
        case OPT_TITLE: title = optarg; break;
        case OPT_CANDIDATES: cand_path = optarg; break;
        case OPT_EVERY_PLANE: every_plane = 1; break;
        default: return cli_bad_option(cli, argv);
        }
    }
    if (k < 0)
        return cli_exit_status(k);
    const char *cube_path = cli_positional(cli, argc, argv, "the input cube");
    if (!cube_path)
        return 1;
    {
        const char *names[] = {"--psf", "--out"}; /* angles: cli_read_cube_angles */
        const void *vals[] = {psf_path, prefix};
        if (cli_missing(cli, 2, names, vals))
            return 1;
    }
    if (!setup.have_fwhm) { /* --fwhm auto: measured on the PSF */
        setup.p.fwhm = CLI_FWHM_AUTO;
        setup.have_fwhm = 1;
    }
    if (cli_subtract_check(cli, &setup))
        return 1;
    if (lp.r_min_px > 0 && lp.r_max_px > 0 && lp.r_min_px > lp.r_max_px)
        return cli_usage(cli, "--min-separation is beyond --max-separation");
    cli_start(cli);

    gl_cube *cube = NULL, *refs = NULL, *psfc = NULL;
    gl_psf_model *psf = NULL;
    gl_outset *outs = NULL;
    gl_header *keys = NULL;
    double *angles = NULL;
    gl_limits_result res = {0};
    gl_status st;
    gl_csv *cands = NULL;
    double *cand_sep = NULL, *cand_pa = NULL;
    char p_csv[4096], p_fits[4096], p_png[4096], p_svg[4096], p_pdf[4096], p_fakes[4096],
        p_comp[4096];
    const char *t_csv, *t_fits, *t_png, *t_svg, *t_pdf, *t_fakes, *t_comp = NULL;

    /* no streamed path here: the cube and a copy with the fakes stay in
     * memory, so a --memory-limit below what the runs need is refused */
    if (setup.memory_limit > 0) {
        gl_fits_info info;
        if (!gl_fits_image_info(cube_path, &info) && info.naxis >= 3) {
            long nchan = info.naxis >= 4 ? info.naxes[2] : 1;
            long nframe = info.naxis >= 4 ? info.naxes[3] : info.naxes[2];
            double need =
                gl_subtract_memory_estimate(info.naxes[0], info.naxes[1], nchan, nframe, &setup.p) +
                4.0 * (double)info.naxes[0] * (double)info.naxes[1] * (double)nchan *
                    (double)nframe;
            if (need > setup.memory_limit) {
                st = gl_error_set(GL_ERR_USAGE,
                                  "%s: gloam limits holds the cube and a copy with the fakes in "
                                  "memory (about %.0f MB), above --memory-limit %.0f MB; it has "
                                  "no streamed path (gloam subtract has)",
                                  cube_path, need / 1e6, setup.memory_limit / 1e6);
                goto cleanup;
            }
        }
    }
    if ((st = cli_read_cube_angles(cli, cube_path, angles_path, &cube, &angles)) ||
        (st = cli_resolve_fwhm(cli, &setup.p.fwhm, setup.p.fwhm > 0 ? NULL : psf_path, 1,
                               cube->header, cube_path)) ||
        (st = cli_read_input(cli, psf_path, 2, &psfc)) ||
        (st = cli_subtract_prepare(cli, &setup, cube_path, cube, &refs)) ||
        (st = gl_psf_model_new(psfc, psf_path, cube->nx, cube->ny, cube->nchan, psf_scale, &psf)))
        goto cleanup;
    if ((st = gl_outset_new(cli->overwrite, &outs)) ||
        (st = cli_add_product(cli, outs, prefix, ".limits.csv", p_csv, sizeof p_csv, &t_csv)) ||
        (st = cli_add_product(cli, outs, prefix, ".limits.fits", p_fits, sizeof p_fits, &t_fits)) ||
        (st = cli_add_product(cli, outs, prefix, ".limits.png", p_png, sizeof p_png, &t_png)) ||
        (st = cli_add_product(cli, outs, prefix, ".limits.svg", p_svg, sizeof p_svg, &t_svg)) ||
        (st = cli_add_product(cli, outs, prefix, ".limits.pdf", p_pdf, sizeof p_pdf, &t_pdf)) ||
        (st = cli_add_product(cli, outs, prefix, ".fakes.csv", p_fakes, sizeof p_fakes, &t_fakes)))
        goto cleanup;
    if (cand_path) {
        if ((st = gl_csv_read(cand_path, &cands)) ||
            (st = gl_provenance_add_input(&cli->prov, cand_path)) ||
            (st = cli_add_product(cli, outs, prefix, ".companions.csv", p_comp, sizeof p_comp,
                                  &t_comp)))
            goto cleanup;
        int cs = gl_csv_column(cands, "sep_px"), cp = gl_csv_column(cands, "pa_deg");
        if (cs < 0 || cp < 0) {
            st = gl_error_set(GL_ERR_INPUT,
                              "%s: no sep_px and pa_deg columns (a gloam detect "
                              "candidates table is expected)",
                              cand_path);
            goto cleanup;
        }
        cand_sep = gl_calloc((size_t)cands->nrows + 1, sizeof *cand_sep);
        cand_pa = gl_calloc((size_t)cands->nrows + 1, sizeof *cand_pa);
        if (!cand_sep || !cand_pa) {
            st = gl_error_nomem("candidates");
            goto cleanup;
        }
        for (long i = 0; i < cands->nrows; i++) {
            cand_sep[i] = cands->data[i * cands->ncols + cs];
            cand_pa[i] = cands->data[i * cands->ncols + cp];
            if (!isfinite(cand_sep[i]) || !isfinite(cand_pa[i])) {
                st = gl_error_set(GL_ERR_INPUT, "%s: row %ld has no sep_px or pa_deg", cand_path,
                                  i + 1);
                goto cleanup;
            }
        }
        lp.navoid = (int)cands->nrows;
        lp.avoid_sep_px = cand_sep;
        lp.avoid_pa_deg = cand_pa;
    }
    cli_work_started(cli);

    setup.p.angles_name = cli->angles_source;
    gl_obsinfo info;
    gl_obsinfo_from_header(cube->header, &info);
    if (!(pixscale > 0) && info.pixscale_mas > 0)
        pixscale = info.pixscale_mas;
    if (!(psf->fwhm_px[0] > 0.7 * setup.p.fwhm && psf->fwhm_px[0] < 1.4 * setup.p.fwhm))
        gl_log(GL_LOG_WARN,
               "--fwhm %.2f px differs from the FWHM measured on %s (%.2f px): apertures and "
               "rings are sized by --fwhm",
               setup.p.fwhm, psf_path, psf->fwhm_px[0]);
    if ((st = gl_limits_compute(cube, angles, refs, &setup.p, psf, &lp, &res))) {
        if (st == GL_ERR_INPUT)
            cli_error_in_file(cube_path, st);
        goto cleanup;
    }
    /* logged after the checks in gl_limits_compute, so that a refused run
     * prints its one error line and nothing else */
    gl_log(GL_LOG_INFO, "PSF in %s: FWHM %.2f px measured (--fwhm %.2f), star flux %.6g per frame",
           psf_path, psf->fwhm_px[0], setup.p.fwhm, psf->flux[0]);

    /* the assumptions, recorded with the table and printed on the figure */
    char modes_text[256] = "";
    for (int k = 0; k < res.nplanes && res.modes[k]; k++)
        snprintf(modes_text + strlen(modes_text), sizeof modes_text - strlen(modes_text), "%s%ld",
                 k ? "," : "", res.modes[k]);
    keys = gl_header_new();
    if (!keys) {
        st = gl_error_nomem("limits header");
        goto cleanup;
    }
    gl_header_set_dbl(keys, "GLSIGMA", lp.sigma, "threshold, Gaussian-equivalent sigma");
    gl_header_set_dbl(keys, "GLFPF", res.fpf, "false-positive fraction of the threshold");
    gl_header_set_str(keys, "GLSTAT", "two-sample Student-t, Mawet+2014",
                      "small-sample statistics per separation");
    gl_header_set_dbl(keys, "GLCOMPL", lp.completeness, "completeness of the second curve");
    gl_header_set_str(keys, "GLCMPREF", "doubly noncentral t of the fakes, Jensen-Clem+2018",
                      "completeness model (docs/limits.md)");
    gl_header_set_dbl(keys, "GLFWHM", setup.p.fwhm, "[pix] FWHM = aperture diameter");
    gl_header_set_dbl(keys, "GLPSFSC", psf_scale, "PSF scale to the science exposure");
    gl_header_set_dbl(keys, "GLPSFAP", res.psf_aperture_flux, "aperture flux of the scaled PSF");
    gl_header_set_dbl(keys, "GLSTARF", psf->flux[0], "star flux per frame = scaled PSF total");
    gl_header_set_str(keys, "GLMETHOD", gl_subtract_method_name(setup.p.method),
                      "subtraction method");
    if (modes_text[0])
        gl_header_set_str(keys, "GLMODES", modes_text, "KL mode counts, one per plane");
    gl_header_set_dbl(keys, "GLMASK",
                      gl_subtract_inner_radius(&setup.p, angles, cube->nframe,
                                               refs ? refs->nframe : 0, cube->nx, cube->ny),
                      "[pix] inner mask radius");
    {
        char sense[72];
        if (gl_header_get_str(cube->header, "GLROTSNS", sense, sizeof sense))
            gl_header_set_str(keys, "GLROTSNS", sense, "sky turn on the detector as angle grows");
    }
    gl_header_set_int(keys, "GLFKRUNS", lp.fake_runs, "subtraction runs with fake companions");
    gl_header_set_int(keys, "GLNFAKE", res.nfakes, "fake companions planted");
    gl_header_set_int(keys, "GLFKSUBS", res.nbatches, "subtractions with fakes (brightness)");
    if (lp.fake_level > 0)
        gl_header_set_dbl(keys, "GLFAKELV", lp.fake_level, "fake flux / local aperture noise");
    else
        gl_header_set_str(keys, "GLFAKELV", "auto", "fake flux: 50% at throughput 1, >= 10 noise");
    gl_header_set_str(keys, "GLTHRU", "injection-recovery, local linear fit",
                      "throughput: fakes within 1.5 FWHM, (with - without)");
    gl_header_set_bool(keys, "GLSKIPFL", lp.skip_flanking, "flanking apertures out of the refs");
    gl_header_set_int(keys, "GLNAVOID", lp.navoid, "known sources left out of the noise");
    gl_header_add_history(keys, "completeness: mean over the fakes within 1.5 FWHM of the doubly "
                                "noncentral t with their measured signal and reference spread "
                                "(self-subtraction lobes); empty where the lobes cap the S/N");
    gl_header_add_history(keys, "predictive: averaged over the scatter of this curve's noise "
                                "estimate (chi2 of n-1 dof), so cNN is the fraction of "
                                "independent sequences that detect a companion at that contrast");
    gl_header_add_history(keys, "caveat: response taken as linear around the fakes' fluxes "
                                "(docs/limits.md)");
    gl_header_add_history(keys, "contrast = t sigma sqrt(1+1/n2) / (throughput x PSF aperture "
                                "flux); sigma = std of the aperture sums at the separation");

    if ((st = gl_limits_tables_write(t_csv, t_fits, &res, pixscale, lp.completeness, keys,
                                     &cli->prov)) ||
        (st = gl_limits_fakes_write(t_fakes, &res)) ||
        (t_comp &&
         (st = gl_limits_companions_write(t_comp, &res, cand_sep, cand_pa, lp.navoid, pixscale))))
        goto cleanup;

    {
        char ttl[256], n1[160], n2[160], n3[200], n4[200], l1[96], l2[96];
        if (title)
            snprintf(ttl, sizeof ttl, "%s", title);
        else
            snprintf(ttl, sizeof ttl, "%s -- detection limits",
                     info.object[0] ? info.object : cube_path);
        snprintf(l1, sizeof l1, "%g sigma, 50%% completeness", lp.sigma);
        snprintf(l2, sizeof l2, "%g sigma, %.0f%% completeness", lp.sigma, 100 * lp.completeness);
        snprintf(n1, sizeof n1, "FPF %.3g per aperture (%g sigma), Student-t per separation",
                 res.fpf, lp.sigma);
        snprintf(n2, sizeof n2, "%s%s%s; FWHM %.2f px = aperture diameter; mask %.1f px",
                 gl_subtract_method_name(setup.p.method), modes_text[0] ? ", modes " : "",
                 modes_text[0] ? modes_text : "", setup.p.fwhm,
                 gl_subtract_inner_radius(&setup.p, angles, cube->nframe, refs ? refs->nframe : 0,
                                          cube->nx, cube->ny));
        if (lp.fake_level > 0)
            snprintf(n3, sizeof n3,
                     "throughput from %d fakes in %d runs at %g x noise; PSF scale %g", res.nfakes,
                     lp.fake_runs, lp.fake_level, psf_scale);
        else
            snprintf(n3, sizeof n3,
                     "throughput from %d fakes in %d runs near the 50%% level; PSF scale %g",
                     res.nfakes, lp.fake_runs, psf_scale);
        snprintf(n4, sizeof n4, "plane 1 of %d; star flux = scaled off-axis PSF total",
                 res.nplanes);
        const char *n5 = "completeness from the fakes' lobes, for this sequence's noise "
                         "(docs/limits.md)";
        gl_limits_plot plot = {.n = res.n,
                               .sep_px = res.sep_px,
                               .ncurves = 2,
                               .curves = {{res.contrast_c50, l1}, {res.contrast_cq, l2}},
                               .pixscale_mas = pixscale > 0 ? pixscale : 0,
                               .title = ttl,
                               .nnotes = 5,
                               .notes = {n1, n2, n3, n4, n5}};
        /* every plane's 50% curve, one colour each */
        char plane_label[GL_LIMITS_PLOT_MAX_CURVES][96];
        if (every_plane && res.nplanes > 1) {
            plot.ncurves =
                res.nplanes < GL_LIMITS_PLOT_MAX_CURVES ? res.nplanes : GL_LIMITS_PLOT_MAX_CURVES;
            for (int k = 0; k < plot.ncurves; k++) {
                snprintf(plane_label[k], sizeof plane_label[k],
                         "%g sigma, 50%% completeness, %ld modes", lp.sigma, res.modes[k]);
                plot.curves[k].contrast = res.contrast_c50 + (size_t)k * (size_t)res.n;
                plot.curves[k].label = plane_label[k];
            }
            snprintf(n4, sizeof n4,
                     "every plane (mode count); star flux = scaled off-axis PSF "
                     "total");
        }
        /* the candidates, at their throughput-corrected contrast in plane 1 */
        double *mark_c = NULL;
        char(*mark_l)[16] = NULL;
        const char **mark_lp = NULL;
        if (t_comp && lp.navoid > 0) {
            mark_c = gl_calloc((size_t)lp.navoid, sizeof *mark_c);
            mark_l = gl_calloc((size_t)lp.navoid, sizeof *mark_l);
            mark_lp = gl_calloc((size_t)lp.navoid, sizeof *mark_lp);
            if (!mark_c || !mark_l || !mark_lp) {
                gl_free(mark_c);
                gl_free(mark_l);
                gl_free(mark_lp);
                st = gl_error_nomem("candidate marks");
                goto cleanup;
            }
            for (int i = 0; i < lp.navoid; i++) {
                gl_limits_photometry ph;
                mark_c[i] = gl_limits_photometry_at(&res, 0, cand_sep[i], cand_pa[i], &ph) == GL_OK
                                ? ph.contrast
                                : NAN;
                gl_error_clear();
                snprintf(mark_l[i], sizeof mark_l[i], "%d", i + 1);
                mark_lp[i] = mark_l[i];
            }
            plot.nmarks = lp.navoid;
            plot.mark_sep_px = cand_sep;
            plot.mark_contrast = mark_c;
            plot.mark_labels = mark_lp;
        }
        st = gl_limits_plot_write(t_png, t_svg, &plot);
        if (!st)
            st = gl_limits_plot_write_pdf(t_pdf, &plot);
        gl_free(mark_c);
        gl_free(mark_l);
        gl_free(mark_lp);
        if (st)
            goto cleanup;
    }
    if ((st = gl_outset_commit(outs)))
        goto cleanup;
    for (long i = 0; i<res.n; i += res.n> 8 ? res.n / 8 : 1) {
        if (isfinite(res.contrast_c50[i]))
            gl_log(GL_LOG_INFO,
                   "  %6.1f px: throughput %.2f, contrast %.3g (%.1f mag) at %g sigma and 50%% "
                   "completeness",
                   res.sep_px[i], res.throughput[i], res.contrast_c50[i],
                   -2.5 * log10(res.contrast_c50[i]), lp.sigma);
        else
            gl_log(GL_LOG_INFO, "  %6.1f px: throughput %.2f, no contrast reaches 50%% at %g sigma",
                   res.sep_px[i], res.throughput[i], lp.sigma);
    }
    cli_log_written(outs);

cleanup:
    gl_outset_free(outs);
    gl_csv_free(cands);
    gl_free(cand_sep);
    gl_free(cand_pa);
    gl_limits_result_free(&res);
    gl_psf_model_free(psf);
    gl_header_free(keys);
    gl_cube_free(cube);
    gl_cube_free(refs);
    gl_cube_free(psfc);
    gl_free(angles);
    return st ? cli_fail(cli, st) : 0;
}
