/*
 * products.c -- the detection maps as one FITS file: the primary HDU is the
 * S/N (Student t) map, image extensions FPF (float64, so that false-positive
 * fractions far below the float range keep their value) and SIGMA (the
 * one-sided Gaussian sigma with the same FPF, the unit of --threshold). Every HDU carries the
 * celestial WCS of the input (a third axis of a multi-plane input is removed), the parameters (GLD*
 * keywords), provenance and CHECKSUM/DATASUM.
 */
#include "core/internal.h"
#include "detect/internal.h"
#include "io/internal.h"

#include <math.h>
#include <string.h>
#include <unistd.h>

/* Keyword families of a celestial WCS (FITS WCS papers I and II), copied
 * into the extensions: a name starting with one of these, or PVi_m / PSi_m. */
static const char *const wcs_prefix[] = {
    "CTYPE",   "CRPIX",   "CRVAL",    "CDELT",   "CUNIT",    "CROTA",   "CD1_",  "CD2_",
    "PC1_",    "PC2_",    "WCSAXES",  "RADESYS", "RADECSYS", "EQUINOX", "EPOCH", "LONPOLE",
    "LATPOLE", "MJD-OBS", "DATE-OBS", "WCSNAME", "MJDREF",   NULL};

static int is_wcs_key(const char *name)
{
    for (int i = 0; wcs_prefix[i]; i++)
        if (strncmp(name, wcs_prefix[i], strlen(wcs_prefix[i])) == 0)
            return 1;
    return (name[0] == 'P' && (name[1] == 'V' || name[1] == 'S') && name[2] >= '1' &&
            name[2] <= '9' && name[3] == '_');
}

/* Removes the keywords of a third (plane) axis from h. */
static void drop_third_axis(gl_header *h)
{
    static const char *const keys[] = {
        "CTYPE3", "CRPIX3", "CRVAL3", "CDELT3", "CUNIT3", "CROTA3", "CD1_3",  "CD2_3",  "CD3_1",
        "CD3_2",  "CD3_3",  "PC1_3",  "PC2_3",  "PC3_1",  "PC3_2",  "PC3_3",  "CNAME3", "CRDER3",
        "CSYER3", "CD4_4",  "CTYPE4", "CRPIX4", "CRVAL4", "CDELT4", "CUNIT4", NULL};
    for (int i = 0; keys[i]; i++)
        gl_header_remove(h, keys[i]);
    /* WCSAXES must precede the other WCS cards; without it readers count
     * the axes from the keywords, which now describe two */
    double wa;
    if (gl_header_get_dbl(h, "WCSAXES", &wa) && wa > 2)
        gl_header_remove(h, "WCSAXES");
}

static gl_status add_params(gl_header *h, const gl_detect_params *par, long nx, long ny, long plane)
{
    detect_geom g;
    gl_detect_geom(par, &g);
    gl_status st = GL_OK;
    if (!st)
        st = gl_header_set_str(h, "GLDMAP", "SNR", "this HDU: two-sample Student t (S/N)");
    if (!st) /* a ratio: dimensionless, whatever the input's unit */
        st = gl_header_set_str(h, "BUNIT", "", "dimensionless (S/N)");
    if (!st)
        st = gl_header_set_dbl(h, "GLDFWHM", par->fwhm, "[px] PSF FWHM");
    if (!st)
        st = gl_header_set_dbl(h, "GLDDIAM", g.diam, "[px] aperture diameter");
    if (!st)
        st = gl_header_set_dbl(h, "GLDMASK", g.mask, "[px] inner mask radius");
    if (!st)
        st = gl_header_set_dbl(h, "GLDSIGMA", par->threshold_sigma, "threshold, Gaussian sigma");
    if (!st)
        st = gl_header_set_dbl(h, "GLDFPF", gl_detect_fpf_from_sigma(par->threshold_sigma),
                               "threshold false-positive fraction");
    if (!st)
        st = gl_header_set_bool(h, "GLDEXADJ", par->exclude_adjacent,
                                "two apertures next to the test one left out");
    if (!st)
        st = gl_header_set_int(h, "GLDSTARX", nx / 2, "star x, 0-based pixel");
    if (!st)
        st = gl_header_set_int(h, "GLDSTARY", ny / 2, "star y, 0-based pixel");
    if (!st)
        st = gl_header_set_int(h, "GLDPLANE", plane, "plane of the input used (1-based)");
    if (!st)
        st = gl_header_add_history(
            h, "t test of each aperture against the non-overlapping apertures at its "
               "separation (Mawet et al. 2014, ApJ 792, 97, eq. 9); NaN: no statistic");
    if (!st)
        st = gl_header_add_history(
            h, "caution: the FPF assumes Gaussian, independent aperture sums; residual speckles "
               "have heavier tails, so it is optimistic close to the star and a candidate "
               "above the threshold can be a speckle (docs/detect.md, assumptions)");
    return st;
}

/* Appends one image extension with the WCS cards of h. */
static int append_ext(fitsfile *f, const gl_header *h, const char *extname, const char *what,
                      int bitpix, int datatype, void *data, long nx, long ny,
                      const gl_provenance *prov, int *status)
{
    long naxes[2] = {nx, ny};
    fits_create_img(f, bitpix, 2, naxes, status);
    char name[FLEN_KEYWORD], card[FLEN_CARD];
    for (int i = 0; i < gl_header_ncards(h) && !*status; i++) {
        int len = 0, s2 = 0;
        memcpy(card, gl_header_card(h, i), 81);
        fits_get_keyname(card, name, &len, &s2);
        if (is_wcs_key(name))
            fits_write_record(f, card, status);
    }
    fits_update_key_str(f, "EXTNAME", extname, NULL, status);
    fits_update_key_str(f, "GLDMAP", extname, what, status);
    fits_update_key_str(f, "BUNIT", "", "dimensionless", status);
    gl_fits_write_provenance(f, prov, status);
    fits_write_img(f, datatype, 1, (LONGLONG)nx * ny, data, status);
    fits_write_chksum(f, status);
    return *status;
}

gl_status gl_detect_maps_write(const char *path, const gl_detect_maps *maps,
                               const gl_header *header, const gl_detect_params *par, long plane,
                               const gl_provenance *prov)
{
    gl_status st = GL_OK;
    gl_cube *c = NULL;
    fitsfile *f = NULL;
    int status = 0;
    const long nx = maps->nx, ny = maps->ny;
    if ((st = gl_cube_new(nx, ny, 1, 1, &c)))
        goto cleanup;
    if (header) {
        gl_header *h = gl_header_copy(header);
        if (!h) {
            st = gl_error_nomem("header");
            goto cleanup;
        }
        gl_header_free(c->header);
        c->header = h;
    }
    drop_third_axis(c->header);
    if ((st = add_params(c->header, par, nx, ny, plane)))
        goto cleanup;
    gl_header_set_str(c->header, "EXTNAME", "SNR", NULL);
    memcpy(c->data, maps->snr, (size_t)nx * (size_t)ny * sizeof(float));
    if ((st = gl_fits_write_cube(path, c, prov)))
        goto cleanup;
    if (fits_open_diskfile(&f, path, READWRITE, &status)) {
        st = gl_fits_error(GL_ERR_IO, path, "cannot reopen", status);
        goto cleanup;
    }
    append_ext(f, c->header, "FPF", "false-positive fraction P(T > t)", DOUBLE_IMG, TDOUBLE,
               maps->fpf, nx, ny, prov, &status);
    append_ext(f, c->header, "SIGMA", "Gaussian sigma of the same FPF (cf. --threshold)", FLOAT_IMG,
               TFLOAT, maps->significance, nx, ny, prov, &status);
    st = gl_fits_finish(f, path, "cannot write the map extensions", status);
cleanup:
    gl_cube_free(c);
    return st;
}

gl_status gl_detect_candidates_write(const char *csv, const char *fits, const gl_candidate *cand,
                                     long ncand, const gl_cube *planes, const gl_detect_params *par,
                                     const gl_provenance *prov)
{
    enum { NFIXED = 19 };
    static const char *fixed[NFIXED] = {
        "rank",        "x",      "y",        "sep_px",    "sep_arcsec", "pa_deg", "dra_arcsec",
        "ddec_arcsec", "flux",   "snr",      "fpf",       "sigma",      "noise",  "nref",
        "peak_x",      "peak_y", "peak_snr", "gauss_fit", "fit_fwhm"};
    static const char *units[NFIXED] = {"",       "pix", "pix", "pix", "arcsec", "deg", "arcsec",
                                        "arcsec", "",    "",    "",    "",       "",    "",
                                        "pix",    "pix", "",    "",    "pix"};
    gl_status st = GL_OK;
    double *cols = NULL, *work = NULL;
    char(*extra_names)[32] = NULL;
    gl_aperture_plan *plan = NULL;
    long nplanes = planes ? planes->nchan * planes->nframe : 0;
    long nextra = nplanes > 1 ? nplanes : 0;
    if (nextra > 256) {
        gl_log(GL_LOG_WARN, "--every-plane: only the first 256 planes are reported");
        nextra = 256;
    }
    int ncols = NFIXED + (int)nextra;
    long nrows = ncand;
    const char *names[NFIXED + 256], *unit_list[NFIXED + 256];
    const double *colp[NFIXED + 256];
    cols = gl_calloc((size_t)ncols * (size_t)(nrows > 0 ? nrows : 1), sizeof *cols);
    extra_names = gl_calloc((size_t)(nextra > 0 ? nextra : 1), sizeof *extra_names);
    if (!cols || !extra_names) {
        st = gl_error_nomem("candidate table");
        goto cleanup;
    }
    for (int k = 0; k < ncols; k++) {
        colp[k] = cols + (size_t)k * (size_t)nrows;
        if (k < NFIXED) {
            names[k] = fixed[k];
            unit_list[k] = units[k];
        } else {
            snprintf(extra_names[k - NFIXED], 32, "snr_plane%ld", (long)(k - NFIXED + 1));
            names[k] = extra_names[k - NFIXED];
            unit_list[k] = "";
        }
    }
#define COL(k) (cols + (size_t)(k) * (size_t)nrows)
    for (long r = 0; r < nrows; r++) {
        const gl_candidate *cd = &cand[r];
        double v[NFIXED] = {(double)(r + 1), cd->x,
                            cd->y,           cd->sep_px,
                            cd->sep_arcsec,  cd->pa_deg,
                            cd->dra_arcsec,  cd->ddec_arcsec,
                            cd->flux,        cd->stat.t,
                            cd->stat.fpf,    cd->stat.significance,
                            cd->stat.noise,  (double)cd->stat.nref,
                            cd->peak_x,      cd->peak_y,
                            cd->peak_snr,    cd->gaussian_fit,
                            cd->fit_fwhm};
        for (int k = 0; k < NFIXED; k++)
            COL(k)[r] = v[k];
    }
    if (nextra > 0 && nrows > 0) {
        const long nx = planes->nx, ny = planes->ny;
        double diam = par->diameter > 0 ? par->diameter : par->fwhm;
        if ((st = gl_detect_aperture_plan_new(0.5 * diam, &plan)))
            goto cleanup;
        work = gl_malloc(gl_detect_snr_worksize(plan, nx, ny) * sizeof *work);
        if (!work) {
            st = gl_error_nomem("work space");
            goto cleanup;
        }
        for (long p = 0; p < nextra; p++)
            for (long r = 0; r < nrows; r++) {
                gl_ttest t;
                gl_detect_snr_at(plan, par, planes->data + (size_t)p * gl_cube_plane_size(planes),
                                 nx, ny, cand[r].x, cand[r].y, work, &t);
                COL(NFIXED + p)[r] = t.t; /* NaN: no statistic in that plane */
            }
    }
#undef COL
    {
        gl_table tab = {ncols, nrows, names, unit_list, colp, NULL};
        if ((st = gl_table_write_csv(csv, &tab)) ||
            (st = gl_table_write_fits(fits, &tab, "CANDIDATES", prov)))
            goto cleanup;
    }
cleanup:
    gl_free(work);
    gl_detect_aperture_plan_free(plan);
    gl_free(extra_names);
    gl_free(cols);
    return st;
}
