/*
 * gloam/limits.h -- detection limits: noise and small-sample thresholds per
 * separation, throughput from fake companions, and contrast curves at a
 * chosen false-positive fraction and completeness.
 */
#ifndef GLOAM_LIMITS_H
#define GLOAM_LIMITS_H

#include "gloam/core.h"
#include "gloam/io.h"
#include "gloam/inject.h"
#include "gloam/subtract.h"

#ifdef __cplusplus
extern "C" {
#endif

/* Completeness (true-positive fraction) of the two-sample t-test: the
 * probability P(T > tau) for T noncentral-t with nu degrees of freedom and
 * noncentrality delta (Jensen-Clem et al. 2018). NaN for invalid input. */
GL_API double gl_limits_completeness(double delta, double tau, double nu);

/* The noncentrality giving completeness q (0 < q < 1) at threshold tau.
 * Errors: GL_ERR_USAGE (q or nu out of range), GL_ERR_NUMERIC. */
GL_API gl_status gl_limits_delta_for_completeness(double q, double tau, double nu, double *delta);

/* Completeness when the companion also changes the reference apertures: T
 * doubly noncentral t, nu degrees of freedom, numerator noncentrality delta
 * and denominator noncentrality lambda = sum over the references of
 * (g_k - mean g)^2 / sigma^2 (g_k the companion's noise-free response in
 * reference k). Equals gl_limits_completeness for lambda = 0. NaN for
 * invalid input. */
GL_API double gl_limits_completeness_lobes(double delta, double lambda, double tau, double nu);

/* ---- contrast curves ---------------------------------------------------- */

typedef struct gl_limits_params {
    double sigma;        /* threshold in Gaussian sigma, as an FPF (default 5) */
    double completeness; /* second curve's completeness (default 0.95) */
    double step_px;      /* separation step of the curve; 0: FWHM / 2 */
    double r_min_px;     /* first separation; 0: max(FWHM, mask + FWHM / 2) */
    double r_max_px;     /* last separation; 0: as far as apertures fit */
    int fake_runs;       /* runs with fake companions (default 2): each one subtraction, or one
                            per brightness batch where the fakes share the frame's coefficients
                            (klip-frame, the spectral step; gl_limits_result.nbatches) */
    double fake_level;   /* fake flux in units of the local aperture noise; 0 (default):
                            the flux reaching 50% completeness at throughput 1, at least 10 */
    double pa0_deg;      /* position angle of the first fake (default 0) */
    int skip_flanking;   /* leave the two apertures flanking the test one out of the references */
    int navoid;          /* known sources: left out of the noise (apertures closer than
                            1 FWHM), and the fakes keep 2 FWHM away from them */
    const double *avoid_sep_px, *avoid_pa_deg; /* navoid each, not owned */
} gl_limits_params;

/* Fills p with the defaults listed above. */
GL_API void gl_limits_params_init(gl_limits_params *p);

/* One planted fake and what survived of it in each output plane. All from
 * the difference image (with fakes - without) on the ring of the detection
 * test at the fake (test aperture on the fake), per unit contrast and in
 * units of F, except snr. */
typedef struct gl_limits_fake {
    double sep_px, pa_deg, contrast;
    int run;                                  /* 0-based run (set of separations) */
    int batch;                                /* 0-based subtraction that held it */
    int nref;                                 /* references of its t test */
    double throughput[GL_SUBTRACT_MAX_MODES]; /* test-aperture sum / (contrast F) */
    double signal[GL_SUBTRACT_MAX_MODES];     /* (test - mean of the references) / (contrast F) */
    double ref_spread[GL_SUBTRACT_MAX_MODES]; /* sqrt(sum (ref - mean)^2) / (contrast F) */
    double snr[GL_SUBTRACT_MAX_MODES];        /* the detection t at the fake, image with fakes */
} gl_limits_fake;

/* The curves, one set per output plane of the subtraction (one per mode
 * count). Arrays of n separations; per-plane arrays are [plane * n + i]. */
typedef struct gl_limits_result {
    long n;
    int nplanes;
    long modes[GL_SUBTRACT_MAX_MODES]; /* mode count of each plane (0: no modes) */
    double *sep_px;
    double *napertures, *dof;         /* per plane */
    double *noise, *mean;             /* std and mean of the aperture sums, per plane */
    double *t_threshold;              /* t for the FPF at dof, per plane */
    double *throughput;               /* local linear fit of the fakes' throughput, per plane */
    double *signal;                   /* the same of their signal (test - mean of references) */
    double *throughput_scatter;       /* std of the fakes' throughput about that fit */
    double *fakes_used;               /* fakes within 1.5 FWHM that calibrate the point */
    double *contrast;                 /* t sigma sqrt(1+1/n2) / (throughput F), per plane */
    double *completeness_of_contrast; /* completeness reached by `contrast` (fake model) */
    double *contrast_c50;             /* 50% completeness at the FPF (fake model) */
    double *contrast_cq;              /* params.completeness at the FPF (fake model) */
    double psf_aperture_flux;         /* F: aperture sum of the scaled PSF */
    double fpf;                       /* the FPF of params.sigma */
    int nfakes;
    gl_limits_fake *fakes;
    int nbatches;      /* subtractions with fakes (>= the runs for full-frame methods) */
    gl_cube *image;    /* the subtraction without fakes (north-up) */
    double fwhm;       /* px, the aperture diameter */
    int skip_flanking; /* the references of the detection test leave the flanking two out */
} gl_limits_result;

/* Computes the curves.
 * Given: the cube, its angles, optional reference cube, the subtraction
 *        parameters (run exactly as given), the PSF model (star flux) and
 *        the limits parameters.
 * Method: one subtraction of the cube; noise from the non-overlapping 1-FWHM
 *        apertures of each separation (those near known sources left out);
 *        the threshold from the two-sample t-test (Mawet et al. 2014); fakes
 *        planted in `fake_runs` runs of the same subtraction, each measured
 *        on the difference image over the whole ring of its detection test;
 *        the completeness at each separation is the average, over the fakes
 *        within 1.5 FWHM, of the doubly noncentral t probability with their
 *        measured signal and reference spread (Jensen-Clem et al. 2018 with
 *        the fakes' lobes; docs/limits.md).
 * Errors: GL_ERR_USAGE (parameters, separations beyond the frame),
 *        GL_ERR_INPUT, GL_ERR_NOMEM, and whatever the subtraction returns. */
GL_API gl_status gl_limits_compute(const gl_cube *cube, const double *angles, const gl_cube *refs,
                                   const gl_subtract_params *sp, const gl_psf_model *psf,
                                   const gl_limits_params *lp, gl_limits_result *out);
GL_API void gl_limits_result_free(gl_limits_result *r);

/* Throughput-corrected aperture photometry of a source in one plane of the
 * curves' image, as the fakes are measured: flux = 1-FWHM aperture sum at
 * (sep, pa) (north-up, conventions.md); background = mean of the other
 * apertures of the ring of its detection test (nref of them; the flanking
 * two left out with skip_flanking); contrast = (flux - background) /
 * (signal x F), signal the fakes' (test - mean of the references) per unit
 * flux at that separation; contrast_err = noise sqrt(1 + 1/nref) / (signal
 * x F), noise the std of the aperture sums there (statistical only: the
 * throughput's own error is not included). The background matters: a
 * median-combined residual sits below zero, and a bright source darkens its
 * own ring (docs/limits.md); throughput (the test aperture alone) is given
 * for reference. */
typedef struct gl_limits_photometry {
    double flux, background, noise, throughput, signal, contrast, contrast_err;
    int nref;
} gl_limits_photometry;

/* Errors: GL_ERR_USAGE (plane out of range, separation outside the curve,
 * aperture off the image or on missing data). */
GL_API gl_status gl_limits_photometry_at(const gl_limits_result *r, int plane, double sep_px,
                                         double pa_deg, gl_limits_photometry *out);

/* The tables of a contrast curve (see src/limits/products.c); paths are
 * normally temporary names from gl_outset_add.
 * gl_limits_tables_write: PREFIX.limits.csv and .fits (extension LIMITS), one
 *   block of rows per plane, columns in TUNIT, keys (assumptions) in the
 *   header; q is the chosen completeness (column names contrast_cNN);
 *   pixscale in mas (<= 0: no arcsec column values).
 * gl_limits_fakes_write: every fake companion planted and recovered.
 * gl_limits_companions_write: the throughput-corrected contrast of the n
 *   candidates at (sep, pa) in every plane, with its statistical error.
 * Errors: GL_ERR_IO naming the file, GL_ERR_NOMEM. */
GL_API gl_status gl_limits_tables_write(const char *csv, const char *fits,
                                        const gl_limits_result *r, double pixscale, double q,
                                        const gl_header *keys, const gl_provenance *prov);
GL_API gl_status gl_limits_fakes_write(const char *csv, const gl_limits_result *r);
GL_API gl_status gl_limits_companions_write(const char *csv, const gl_limits_result *r,
                                            const double *sep, const double *pa, int n,
                                            double pixscale);

/* A contrast-curve figure: curves against separation, with notes (the
 * assumptions) printed on the figure. */
typedef struct gl_limits_series {
    const double *contrast; /* n values; NaN or <= 0 leaves a gap */
    const char *label;
} gl_limits_series;

#define GL_LIMITS_PLOT_MAX_CURVES 12

typedef struct gl_limits_plot {
    long n;
    const double *sep_px;
    int ncurves;
    gl_limits_series curves[GL_LIMITS_PLOT_MAX_CURVES];
    double pixscale_mas; /* > 0 adds an arcsec axis */
    const char *title;
    int nnotes;
    const char *notes[8];
    /* candidates marked on the figure (nmarks 0: none) */
    int nmarks;
    const double *mark_sep_px, *mark_contrast;
    const char *const *mark_labels; /* may be NULL */
} gl_limits_plot;

/* Draws the figure to a PNG and/or an SVG file (either path may be NULL).
 * Errors: GL_ERR_IO. */
GL_API gl_status gl_limits_plot_write(const char *png_path, const char *svg_path,
                                      const gl_limits_plot *p);
/* The same figure for a journal: a PDF one column (3.5 in) wide with 7-8 pt
 * fonts and the notes under the plot. Errors: GL_ERR_IO. */
GL_API gl_status gl_limits_plot_write_pdf(const char *pdf_path, const gl_limits_plot *p);

#ifdef __cplusplus
}
#endif
#endif
