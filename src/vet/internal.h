/*
 * vet/internal.h -- declarations shared by the files of the vetting stage,
 * not exported: the cropped fitting problem, the negative-companion fit and
 * the helpers the tests and the error estimate share.
 */
#ifndef GLOAM_VET_INTERNAL_H
#define GLOAM_VET_INTERNAL_H

#include "gloam/detect.h"
#include "gloam/vet.h"

/* The data cropped to the square around the annulus of one candidate, with
 * what every evaluation reuses: the cropped cube, reference cube and PSF, an
 * aperture plan, the annulus-limited subtraction parameters and scratch. */
/* The S/N of a source at one place under the test configurations: every
 * mode count, each half of the sequence, negated and scrambled angles (NaN
 * where a configuration is not possible). */
typedef struct vet_stats {
    int nmodes;
    double modes[GL_SUBTRACT_MAX_MODES];
    double half[2];
    double negated, scrambled;
} vet_stats;

/* What the configurations are, decided once per candidate (tests.c). */
typedef struct vet_plan {
    gl_subtract_params modes_sp; /* every mode count (nmodes 0: not possible) */
    gl_subtract_params half_sp;  /* the first mode count, clipped to a half */
    int halves_ok;
    double *negated, *scrambled;         /* nframe angles each (owned by the problem) */
    double frac_negated, frac_scrambled; /* frames that still overlap */
    char why_modes[200], why_halves[200];
} vet_plan;

#define VET_MAX_FAKES 64

typedef struct vet_problem {
    long nx, ny, nchan, nframe; /* the crop; star at (nx/2, ny/2) */
    double cx, cy;
    long ox, oy;               /* crop origin in the input frame */
    gl_cube *crop;             /* owned */
    gl_cube *refs;             /* owned, NULL without references */
    gl_cube *work;             /* scratch cube of the crop's shape */
    gl_psf_model *psf;         /* the PSF model cropped (owned) */
    const double *angles;      /* nframe, not owned */
    gl_subtract_params sp;     /* annulus-limited, first mode count only */
    gl_subtract_params sp_all; /* annulus-limited, every mode count */
    double fwhm;
    gl_aperture_plan *ap; /* diameter 1 FWHM (conventions.md) */
    gl_detect_params dp;
    double *work_d; /* aperture / S/N / statistics work space */
    size_t work_n;
    double psf_apflux;  /* 1-FWHM aperture sum of the scaled PSF */
    double merit_r;     /* merit aperture radius, px */
    float *level;       /* nx*ny background level of the start image (vet_level_make) */
    float *merit_level; /* the same of the fit's residual in hand (scratch) */
    int nevals;
    vet_plan plan;
    int nfake_stats; /* the fakes' statistics (errors.c) */
    vet_stats fake_stats[VET_MAX_FAKES];
} vet_problem;

gl_status vet_problem_new(const gl_cube *cube, const double *angles, const gl_cube *refs,
                          const gl_subtract_params *sp, const gl_psf_model *psf,
                          const gl_vet_params *vp, double sep, vet_problem **out);
void vet_problem_free(vet_problem *p);

/* North-up pixel of (sep, pa) in the crop (conventions.md) and back. */
void vet_xy(const vet_problem *p, double sep, double pa, double *x, double *y);
void vet_seppa(const vet_problem *p, double x, double y, double *sep, double *pa);

/* Subtraction of `base` (nframe frames with `angles`) with nc companions
 * planted first (nc may be 0), parameters sp; *image gets the north-up
 * result (owned by the caller). Uses p->work as scratch when base is the
 * crop's shape, else a temporary copy. */
gl_status vet_subtract(vet_problem *p, const gl_cube *base, const double *angles,
                       const gl_cube *refs, const gl_subtract_params *sp, const gl_companion *c,
                       int nc, gl_cube **image);

/* 1-FWHM aperture sum at (x, y) of img (crop-sized); NaN when incomplete. */
double vet_aperture(vet_problem *p, const float *img, double x, double y);
/* The same minus the background level (p->level) in that aperture: the flux
 * of a source in the residual image of the candidate's annulus. */
double vet_flux(vet_problem *p, const float *img, double x, double y);
/* Sets level (nx*ny; p->level for the start, p->merit_level in the fit)
 * from img, a residual image of the candidate's annulus: the mean of img in
 * 1-px rings about the star over the radii the merit aperture spans around
 * sep, leaving out pixels within 2 FWHM of (ex, ey); 0 elsewhere and in
 * rings of fewer than 8 pixels. */
gl_status vet_level_make(vet_problem *p, const float *img, double sep, double ex, double ey,
                         float *level);
/* S/N (two-sample t, Mawet et al. 2014) at (x, y); NaN when undefined. */
double vet_snr(vet_problem *p, const float *img, double x, double y);
/* Robust pixel standard deviation in the annulus sep +- FWHM of img,
 * leaving out pixels within 2 FWHM of (ex, ey). */
double vet_pixel_sigma(vet_problem *p, const float *img, double sep, double ex, double ey);

/* The local maximum of img that (x0, y0) sits on (steepest ascent from the
 * nearest pixel, staying within one FWHM of it), refined by the centre of
 * light of its positive 3x3 neighbourhood. */
void vet_peak(const vet_problem *p, const float *img, double x0, double y0, double *x, double *y);

/* The negative-companion fit from a start. */
typedef struct vet_fit {
    double sep, pa, contrast;
    double merit, merit0;
    int nevals, converged;
} vet_fit;

/* Fits (sep, pa, contrast) of a source in `base` (the crop or a cube of its
 * shape) by minimising the sum of squares in the merit aperture centred on
 * the start position, in units of the pixel variance sigma2. */
gl_status vet_fit_run(vet_problem *p, const gl_cube *base, double sep0, double pa0, double c0,
                      double sigma2, int max_evals, vet_fit *out);

/* The start: throughput at the candidate's separation (a fake at pa + 180),
 * and the throughput-corrected contrast of the aperture flux. */
gl_status vet_throughput(vet_problem *p, const gl_cube *base, const float *img, double sep,
                         double pa, double flux, double *throughput);

/* Injection-recovery errors of a fit (errors.c): fills nfakes and the
 * *_err_fit members of r. */
gl_status vet_errors_run(vet_problem *p, const gl_vet_params *vp, const vet_fit *fit, double sigma2,
                         double throughput, gl_vet_result *r);

/* Decides the test configurations for a source at sep (tests.c). */
gl_status vet_plan_make(vet_problem *p, const gl_vet_params *vp, double sep);
/* The S/N of a source at (x, y) of cube under every configuration. */
gl_status vet_stats_run(vet_problem *p, const gl_cube *cube, double x, double y, vet_stats *s);

/* The speckle-or-planet tests of gl_vet_candidate (tests.c). */
gl_status vet_tests_run(vet_problem *p, const gl_vet_params *vp, const gl_subtract_params *sp,
                        const vet_stats *data, const float *img, const float *model,
                        const float *resid, gl_vet_result *r);

/* The multi-epoch test (epochs.c): the given epochs plus this one (when
 * mjd_now is finite); not possible without star or epochs. */
gl_status vet_epochs_test(const gl_vet_star *star, const gl_vet_epochs *given, double mjd_now,
                          gl_vet_result *r);

/* Stamps for the figure, copies of n x n pixels around (x, y). */
gl_status vet_stamps(const vet_problem *p, const float *img, const float *model, const float *resid,
                     double x, double y, gl_vet_result *r);

/* Turns GSL's abort-on-error handler off (gl_detect_gsl_quiet). */
void gl_detect_gsl_quiet(void);

#endif
