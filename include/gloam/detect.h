/*
 * gloam/detect.h -- point-source detection in a north-up, starlight-subtracted
 * image with small-sample statistics, and the aperture machinery that the
 * contrast-curve stage reuses.
 *
 * Three layers, each usable on its own:
 *  1. Exact circular-aperture photometry: the area of overlap of a disk with
 *     each pixel (pixel (i, j) covers [i-1/2, i+1/2] x [j-1/2, j+1/2]), exact
 *     to rounding, the quantity photutils computes with method="exact". An
 *     aperture plan is made once per radius; sums at any sub-pixel centre are
 *     then allocation-free and thread-safe (caller-owned work space).
 *  2. Rings of non-overlapping apertures at one separation (Mawet et al. 2014,
 *     ApJ 792, 97, sec. 3): n = floor(2 pi r / d) apertures of diameter d,
 *     evenly spaced in angle, the first one on the test position.
 *  3. The two-sample Student-t test of one aperture against the n2 others
 *     (Mawet et al. 2014, eq. 9):
 *         t = (x1 - mean2) / (s2 sqrt(1 + 1/n2)),   n2 - 1 degrees of freedom,
 *     its false-positive fraction FPF = P(T > t) (GSL gsl_cdf_tdist_Q), and
 *     conversions between Gaussian sigma and FPF (gsl_cdf_ugaussian_Q/Qinv).
 *
 * On top of them: the S/N (t), FPF and significance maps of a whole image,
 * candidate lists with sub-pixel positions and sky offsets, and a quick-look
 * PNG. The star is at (nx/2, ny/2) (integer division); separations are in
 * pixels; angles of ring positions are counter-clockwise from +x.
 */
#ifndef GLOAM_DETECT_H
#define GLOAM_DETECT_H

#include "gloam/core.h"
#include "gloam/io.h"

#ifdef __cplusplus
extern "C" {
#endif

/* ---- 1. exact aperture photometry -------------------------------------- */

/* Area of the intersection of the disk of `radius` centred at (cx, cy) with
 * the unit pixel centred at (i, j). Exact (closed form), in [0, 1]. */
GL_API double gl_detect_pixel_overlap(double cx, double cy, double radius, double i, double j);

/* A circular aperture of one radius, set up once and reused at any centre.
 * Read-only after creation: one plan may be shared by many threads. */
typedef struct gl_aperture_plan gl_aperture_plan;

/* Plans apertures of the given radius (px, > 0 and <= 1000).
 * Errors: GL_ERR_USAGE (radius), GL_ERR_NOMEM. */
GL_API gl_status gl_detect_aperture_plan_new(double radius, gl_aperture_plan **out);
GL_API void gl_detect_aperture_plan_free(gl_aperture_plan *p);
GL_API double gl_detect_aperture_radius(const gl_aperture_plan *p);
/* Number of doubles of work space one call of gl_detect_aperture_sum needs. */
GL_API size_t gl_detect_aperture_worksize(const gl_aperture_plan *p);

/* Exact aperture sum of img (nx x ny, row-major [y][x]) in the disk centred
 * at (cx, cy): sum over pixels of overlap area times pixel value. `work`
 * holds gl_detect_aperture_worksize(p) doubles (one buffer per thread).
 * Returns 1 and sets *sum when every pixel the disk touches lies inside the
 * image and is not NaN; returns 0 (and *sum = NaN) otherwise. *area (may be
 * NULL) receives the summed overlap area (pi r^2 up to rounding). */
GL_API int gl_detect_aperture_sum(const gl_aperture_plan *p, const float *img, long nx, long ny,
                                  double cx, double cy, double *work, double *sum, double *area);

/* ---- 2. rings of non-overlapping apertures ----------------------------- */

/* Number of non-overlapping apertures of diameter diam that fit on the circle
 * of radius sep: floor(2 pi sep / diam) (Mawet et al. 2014); 0 when sep <= 0. */
GL_API long gl_detect_ring_count(double sep, double diam);

/* Centres of the n apertures at separation sep from the star (sx, sy),
 * starting at angle theta (radians, counter-clockwise from +x) and going
 * counter-clockwise in steps of 2 pi / n. x and y hold n values; the first
 * centre is (sx + sep cos theta, sy + sep sin theta). */
GL_API void gl_detect_ring_positions(double sx, double sy, double sep, double theta, long n,
                                     double *x, double *y);

/* ---- 3. small-sample statistics ---------------------------------------- */

/* Result of the two-sample t test of one aperture against the others. */
typedef struct gl_ttest {
    double t;            /* Student t (the S/N of Mawet et al. 2014, eq. 9) */
    double fpf;          /* P(T > t) with dof degrees of freedom */
    double significance; /* Gaussian-equivalent sigma of fpf (one-sided) */
    double noise;        /* s2 sqrt(1 + 1/n2): the denominator of t */
    double ref_mean;     /* mean of the reference apertures */
    double ref_std;      /* sample standard deviation (n2 - 1) of the references */
    long nref;           /* n2, references used */
    long dof;            /* n2 - 1 */
} gl_ttest;

/* Two-sample t test of the aperture flux `test` against nref reference
 * fluxes (Mawet et al. 2014, eq. 9, n1 = 1). Needs nref >= 2 finite values
 * that are not all equal.
 * Errors: GL_ERR_USAGE (nref < 2, non-finite value), GL_ERR_NUMERIC (zero
 * spread of the references). */
GL_API gl_status gl_detect_ttest(double test, const double *ref, long nref, gl_ttest *out);

/* FPF of a t value: the upper tail P(T > t) of Student's t with dof degrees
 * of freedom (gsl_cdf_tdist_Q). NaN when dof < 1. */
GL_API double gl_detect_fpf_from_t(double t, long dof);
/* FPF of a one-sided Gaussian threshold of `sigma` (gsl_cdf_ugaussian_Q);
 * 5 sigma gives 2.867e-7. */
GL_API double gl_detect_fpf_from_sigma(double sigma);
/* Gaussian sigma of an FPF (gsl_cdf_ugaussian_Qinv). FPF below the smallest
 * normal double is taken as that value (about 37.5 sigma): the scale stays
 * finite. NaN for fpf outside (0, 1]. */
GL_API double gl_detect_sigma_from_fpf(double fpf);
/* The t value whose FPF with dof degrees of freedom equals the Gaussian FPF
 * of `sigma` (gsl_cdf_tdist_Qinv). NaN when dof < 1. */
GL_API double gl_detect_t_threshold(double sigma, long dof);

/* The threshold at a separation: with n = gl_detect_ring_count(sep, diam)
 * apertures, n2 = n - 1 references (n - 3 when the two neighbours of the test
 * aperture are left out), dof = n2 - 1. Sets *t (the t threshold) and, when
 * not NULL, *factor = t sqrt(1 + 1/n2): the threshold in units of the
 * references' standard deviation, i.e. the aperture-flux threshold over
 * s2 (Mawet et al. 2014, sec. 3-4). Returns the dof, or 0 (outputs NaN) when
 * too few apertures fit. */
GL_API long gl_detect_threshold_at(double sigma, double sep, double diam, int exclude_adjacent,
                                   double *t, double *factor);

/* ---- 4. S/N at a position and S/N maps --------------------------------- */

typedef struct gl_detect_params {
    double fwhm;            /* PSF FWHM, px (required, > 0) */
    double diameter;        /* aperture diameter, px; 0: one FWHM (default) */
    double mask_radius;     /* no test apertures closer to the star, px; 0: one FWHM */
    double threshold_sigma; /* detection threshold, Gaussian sigma (default 5) */
    int exclude_adjacent;   /* leave out the two apertures next to the test
                               aperture (ADI self-subtraction wings); default 0 */
    double merge_radius;    /* candidates closer than this merge, px; 0: one FWHM */
    double pixscale_mas;    /* mas/px; NaN: from the WCS when there is one */
} gl_detect_params;

/* Fills p with the defaults listed above (fwhm 0: the caller must set it). */
GL_API void gl_detect_params_init(gl_detect_params *p);
/* Checks the parameters against an nx x ny image: fwhm > 0, fwhm <= min(nx,
 * ny) / 4, diameter, radii and threshold sensible.
 * Errors: GL_ERR_USAGE with the parameter named. */
GL_API gl_status gl_detect_params_check(const gl_detect_params *p, long nx, long ny);

/* The t test of the aperture centred at (x, y) in img against the ring of
 * apertures at its separation from the star (nx/2, ny/2). Reference apertures
 * that leave the image or touch NaN are dropped; the test aperture must be
 * complete. `work` is a buffer of gl_detect_snr_worksize(p, nx, ny) doubles.
 * Returns 1 with *out filled, 0 when no statistic exists there (inside the
 * mask, incomplete test aperture, fewer than 2 references; *out has NaN). */
GL_API size_t gl_detect_snr_worksize(const gl_aperture_plan *p, long nx, long ny);
GL_API int gl_detect_snr_at(const gl_aperture_plan *p, const gl_detect_params *par,
                            const float *img, long nx, long ny, double x, double y, double *work,
                            gl_ttest *out);

/* Maps of one image: t (S/N), FPF and Gaussian significance, NaN where no
 * statistic exists (mask, edges, no data). Also the degrees of freedom. */
typedef struct gl_detect_maps {
    long nx, ny;
    float *snr;
    double *fpf; /* double: FPF far below float range stays exact */
    float *significance;
    int *dof; /* 0 where undefined */
} gl_detect_maps;

/* Computes the maps of img in parallel (OpenMP, static schedule: the result
 * does not depend on the thread count).
 * Errors: GL_ERR_USAGE (parameters), GL_ERR_INPUT (image all NaN),
 * GL_ERR_NOMEM. */
GL_API gl_status gl_detect_maps_compute(const float *img, long nx, long ny,
                                        const gl_detect_params *par, gl_detect_maps **out);
GL_API void gl_detect_maps_free(gl_detect_maps *m);

/* ---- 5. candidates ----------------------------------------------------- */

/* Sky geometry of an image: pixel scale and, when the header holds a
 * celestial WCS, offsets from the star through wcslib. */
typedef struct gl_detect_sky gl_detect_sky;

/* From a header (may have no WCS); pixscale_mas overrides the WCS scale when
 * finite. Never fails for lack of a WCS. Errors: GL_ERR_NOMEM. */
GL_API gl_status gl_detect_sky_new(const gl_header *h, double pixscale_mas, gl_detect_sky **out);
GL_API void gl_detect_sky_free(gl_detect_sky *s);
/* mas per pixel, NaN when unknown. */
GL_API double gl_detect_sky_pixscale(const gl_detect_sky *s);
/* 1 when offsets on the sky can be computed. */
GL_API int gl_detect_sky_has_wcs(const gl_detect_sky *s);
/* Offsets (arcsec, east and north on the tangent plane at the star, ERFA
 * eraTpxes) of pixel (x, y) from the star pixel (sx, sy); 0-based pixels.
 * Returns 0 (NaN outputs) without a WCS. */
GL_API int gl_detect_sky_offsets(const gl_detect_sky *s, double x, double y, double sx, double sy,
                                 double *dra_arcsec, double *ddec_arcsec);
/* Direction of north and east on the image (unit vectors in pixel x, y) from
 * the WCS, or (0, 1) and (-1, 0) for a north-up image without one. */
GL_API void gl_detect_sky_compass(const gl_detect_sky *s, double sx, double sy, double north[2],
                                  double east[2]);

typedef struct gl_candidate {
    double x, y;        /* sub-pixel position, 0-based pixels */
    int peak_x, peak_y; /* the S/N-map maximum it came from */
    int gaussian_fit;   /* 1: position from a 2-D Gaussian fit; 0: centroid */
    double fit_fwhm;    /* FWHM of the fitted Gaussian, px (NaN for centroid) */
    double sep_px, sep_arcsec, pa_deg;
    double dra_arcsec, ddec_arcsec; /* NaN without WCS */
    double flux;                    /* aperture flux at (x, y) */
    gl_ttest stat;                  /* t test at (x, y) */
    double peak_snr;                /* map value at the peak pixel */
} gl_candidate;

/* Finds candidates in img with its maps: local maxima of the S/N map whose t
 * exceeds the threshold for their degrees of freedom, greedily merged within
 * the merge radius (best kept), then measured at a sub-pixel position (2-D
 * Gaussian least squares with GSL multifit_nlinear; centroid when the fit
 * fails). Sorted best first (largest t at the measured position). *out is
 * allocated with gl_malloc (NULL when none).
 * Errors: GL_ERR_NOMEM. */
GL_API gl_status gl_detect_candidates_find(const float *img, long nx, long ny,
                                           const gl_detect_maps *maps, const gl_detect_params *par,
                                           const gl_detect_sky *sky, gl_candidate **out, long *n);

/* ---- 6. quick look ----------------------------------------------------- */

/* Writes a PNG of the S/N map with candidates circled and numbered, a compass
 * (north and east), a scale bar (arcsec when the scale is known, else px)
 * and a colour bar. title may be NULL. Errors: GL_ERR_IO. */
GL_API gl_status gl_detect_quicklook_write(const char *path, const gl_detect_maps *maps,
                                           const gl_candidate *cand, long ncand,
                                           const gl_detect_params *par, const gl_detect_sky *sky,
                                           const char *title);

/* Writes the maps as one FITS file: primary HDU the S/N map (2-D), image
 * extensions FPF and SIGMA, each with `header` (the input's cards, with any
 * third-axis WCS removed) and the parameters (GLDxxxx keywords), provenance
 * and checksums. Errors: GL_ERR_IO, GL_ERR_NOMEM. */
GL_API gl_status gl_detect_maps_write(const char *path, const gl_detect_maps *maps,
                                      const gl_header *header, const gl_detect_params *par,
                                      long plane, const gl_provenance *prov);

/* The candidate table: PREFIX.candidates.csv and its FITS twin (extension
 * CANDIDATES), one row per candidate best first: rank, x, y, sep_px,
 * sep_arcsec, pa_deg, dra_arcsec, ddec_arcsec, flux, snr, fpf, sigma, noise,
 * nref, peak_x, peak_y, peak_snr, gauss_fit, fit_fwhm; with planes (a cube
 * of more than one plane, NULL: none) also snr_plane1..N, each candidate's
 * S/N in every plane (at most 256). Errors: GL_ERR_IO naming the file,
 * GL_ERR_NOMEM. */
GL_API gl_status gl_detect_candidates_write(const char *csv, const char *fits,
                                            const gl_candidate *cand, long ncand,
                                            const gl_cube *planes, const gl_detect_params *par,
                                            const gl_provenance *prov);

#ifdef __cplusplus
}
#endif
#endif
