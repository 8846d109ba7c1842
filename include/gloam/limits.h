/*
 * gloam/limits.h -- detection limits: noise and small-sample thresholds per
 * separation, throughput from fake companions, and contrast curves at a
 * chosen false-positive fraction and completeness.
 */
#ifndef GLOAM_LIMITS_H
#define GLOAM_LIMITS_H

#include "gloam/core.h"
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

/* ---- contrast curves ---------------------------------------------------- */

typedef struct gl_limits_params {
    double sigma;         /* threshold in Gaussian sigma, as an FPF (default 5) */
    double completeness;  /* second curve's completeness (default 0.95) */
    double step_px;       /* separation step of the curve; 0: FWHM / 2 */
    double r_min_px;      /* first separation; 0: max(FWHM, mask + FWHM / 2) */
    double r_max_px;      /* last separation; 0: as far as apertures fit */
    int fake_runs;        /* runs with fake companions, each one subtraction (default 2) */
    double fake_level;    /* fake flux in units of the local aperture noise (default 10) */
    double pa0_deg;       /* position angle of the first fake (default 0) */
    int exclude_adjacent; /* leave out the two apertures next to the test one */
    int navoid;           /* known sources the fakes keep 2 FWHM away from */
    const double *avoid_sep_px, *avoid_pa_deg; /* navoid each, not owned */
} gl_limits_params;

/* Fills p with the defaults listed above. */
GL_API void gl_limits_params_init(gl_limits_params *p);

/* One planted fake and what survived of it in each output plane. */
typedef struct gl_limits_fake {
    double sep_px, pa_deg, contrast;
    int run;
    double throughput[GL_SUBTRACT_MAX_MODES];
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
    double *throughput;               /* interpolated from the fakes, per plane */
    double *contrast;                 /* t sigma sqrt(1+1/n2) / (throughput F), per plane */
    double *completeness_of_contrast; /* completeness reached by `contrast` */
    double *contrast_c50;             /* 50% completeness at the FPF (exact) */
    double *contrast_cq;              /* params.completeness at the FPF */
    double psf_aperture_flux;         /* F: aperture sum of the scaled PSF */
    double fpf;                       /* the FPF of params.sigma */
    int nfakes;
    gl_limits_fake *fakes;
    gl_cube *image; /* the subtraction without fakes (north-up) */
    double fwhm;    /* px, the aperture diameter */
} gl_limits_result;

/* Computes the curves.
 * Given: the cube, its angles, optional reference cube, the subtraction
 *        parameters (run exactly as given), the PSF model (star flux) and
 *        the limits parameters.
 * Method: one subtraction of the cube; noise from the non-overlapping 1-FWHM
 *        apertures of each separation; the threshold and completeness from
 *        the two-sample t-test (Mawet et al. 2014; Jensen-Clem et al. 2018);
 *        throughput from fakes planted in `fake_runs` runs of the same
 *        subtraction, measured as (with fakes - without) aperture sums and
 *        interpolated linearly in separation (held at the end values beyond
 *        the outermost fakes).
 * Errors: GL_ERR_USAGE (parameters, separations beyond the frame),
 *        GL_ERR_INPUT, GL_ERR_NOMEM, and whatever the subtraction returns. */
GL_API gl_status gl_limits_compute(const gl_cube *cube, const double *angles, const gl_cube *refs,
                                   const gl_subtract_params *sp, const gl_psf_model *psf,
                                   const gl_limits_params *lp, gl_limits_result *out);
GL_API void gl_limits_result_free(gl_limits_result *r);

/* Throughput-corrected aperture photometry of a source in one plane of the
 * curves' image: flux = 1-FWHM aperture sum at (sep, pa) (north-up,
 * conventions.md); noise = std of the aperture sums at that separation;
 * contrast = flux / (throughput x F), contrast_err = noise / (throughput x F)
 * (statistical only: the throughput's own error is not included). */
typedef struct gl_limits_photometry {
    double flux, noise, throughput, contrast, contrast_err;
} gl_limits_photometry;

/* Errors: GL_ERR_USAGE (plane out of range, separation outside the curve,
 * aperture off the image or on missing data). */
GL_API gl_status gl_limits_photometry_at(const gl_limits_result *r, int plane, double sep_px,
                                         double pa_deg, gl_limits_photometry *out);

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
