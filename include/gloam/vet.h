/*
 * gloam/vet.h -- characterising and vetting a candidate companion: where it
 * is and how bright, with uncertainties, and a set of numbered tests of
 * "planet or speckle".
 *
 * Characterisation (negative fake companion: Lagrange et al. 2010, Science
 * 329, 57; Marois et al. 2010, Nature 468, 1080): a negative copy of the
 * scaled off-axis PSF is planted at (sep, PA, contrast) in every frame, the
 * subtraction is run again, and the sum of squares of the residual image in
 * an aperture around the candidate (the sum-of-squares merit, after Wertz et
 * al. 2017, A&A 598, A83) is minimised over the three parameters with GSL's
 * Nelder-Mead simplex (nmsimplex2). To keep each evaluation cheap the cube,
 * the reference cube and the PSF are cropped to the square that holds the
 * annulus sep +- `ring_half_fwhm` FWHM, and the subtraction runs only in that
 * annulus (same method and options otherwise): every number vet reports comes
 * from this annulus-limited subtraction, whose KL basis differs from a
 * full-frame one.
 *
 * Uncertainties: fakes of the fitted contrast are planted at the fitted
 * separation and other position angles of the data with the candidate
 * removed, found and fitted exactly like the candidate; the rms of
 * (recovered - planted) is the measurement error, combined in quadrature
 * with the star-centring error, the north-offset error and the pixel-scale
 * error given by the caller.
 *
 * Tests (each with a value, what a planet would give, pass/fail, or "not
 * possible with these data"): S/N against the threshold; S/N stability across
 * mode counts and across the two halves of the sequence, against what the
 * injection-recovery fakes (planets by construction) give; the shape of the residual against the
 * forward model; sky-fixed motion (angles negated, angles scrambled); radial motion with wavelength
 * for 4-D cubes; the background-star track of ERFA against measured offsets at several epochs. They
 * reduce, and do not remove, the chance of a false claim.
 */
#ifndef GLOAM_VET_H
#define GLOAM_VET_H

#include "gloam/core.h"
#include "gloam/inject.h"
#include "gloam/subtract.h"

#ifdef __cplusplus
extern "C" {
#endif

/* The fewest error fakes whose rms is an error bar worth quoting: an rms of
 * N recoveries is itself uncertain by about 1/sqrt(2N) (50% for N = 2; the
 * large-sample variance of a standard deviation, Kendall & Stuart, The
 * Advanced Theory of Statistics, vol. 1), and the tests take the median and
 * spread of the fakes' values. */
#define GL_VET_MIN_ERROR_FAKES 3

typedef struct gl_vet_params {
    /* ---- set by the user (gl_vet_params_init gives the defaults) ---- */
    double merit_radius_fwhm; /* merit aperture radius, FWHM (default 1) */
    double ring_half_fwhm;    /* half-width of the fitted annulus, FWHM (default 2.5) */
    int error_fakes;          /* injection-recovery fakes for the errors (default 6;
                                 fewer than GL_VET_MIN_ERROR_FAKES draw a warning) */
    int max_evals;            /* merit evaluations per fit (default 120) */
    double threshold_sigma;   /* S/N a planet keeps in every mode count (default 5) */
    double centre_err_px;     /* star-centring error per axis, px (default 0) */
    double north_err_deg;     /* error of the north offset, deg (default 0) */
    double pixscale_mas;      /* mas/px; NaN: sky offsets left out */
    double pixscale_err_mas;  /* error of the pixel scale (default 0) */
    unsigned long seed;       /* of the scrambled angle order (default 1) */
    double mjd_obs;           /* date of these data, MJD (UTC); NaN: unknown. With epochs,
                                 the fitted offsets at this date join the list */
} gl_vet_params;

/* Fills p with the defaults listed above. */
GL_API void gl_vet_params_init(gl_vet_params *p);

/* The tests, in table order. */
typedef enum gl_vet_test_id {
    GL_VET_TEST_SNR = 0,       /* S/N at the fit against the threshold of --threshold sigma */
    GL_VET_TEST_MODES = 1,     /* S/N over the mode counts, minus what the fakes give */
    GL_VET_TEST_HALVES = 2,    /* S/N in the two halves of the sequence, minus the fakes' */
    GL_VET_TEST_SHAPE = 3,     /* correlation of the residual with the forward model */
    GL_VET_TEST_NEGATED = 4,   /* S/N with the angles negated, minus the fakes' */
    GL_VET_TEST_SCRAMBLED = 5, /* S/N with the angles in a scrambled order, minus the fakes' */
    GL_VET_TEST_SPECTRAL = 6,  /* radial drift with wavelength, px per unit lambda/mean */
    GL_VET_TEST_EPOCHS = 7,    /* chi2 of the background track minus that of common motion */
    GL_VET_NTESTS = 8
} gl_vet_test_id;

typedef struct gl_vet_test {
    int possible;    /* 0: not possible with the data given (note says why) */
    double value;    /* the measured number */
    double expected; /* what a planet would give */
    double limit;    /* the pass limit */
    int passed;      /* 1 planet-like, 0 not */
    char note[200];
} gl_vet_test;

/* Name of a test ("snr", "modes", "halves", "shape", "negated", "scrambled",
 * "spectral", "epochs") and a one-line description of its pass rule. */
GL_API const char *gl_vet_test_name(gl_vet_test_id id);
GL_API const char *gl_vet_test_rule(gl_vet_test_id id);

/* The star and the measured offsets of the candidate at several dates. */
typedef struct gl_vet_star {
    double ra_deg, dec_deg; /* ICRS position at epoch_jyear */
    double pmra_masyr;      /* mu_alpha* = mu_alpha cos(dec), mas/yr */
    double pmdec_masyr;     /* mas/yr */
    double parallax_mas;    /* > 0 */
    double rv_kms;          /* radial velocity (0 if unknown) */
    double epoch_jyear;     /* epoch of the position (Gaia DR3: 2016.0) */
} gl_vet_star;

typedef struct gl_vet_epochs {
    long n;
    const double *mjd_utc;            /* date of each epoch, MJD (UTC) */
    const double *dra_mas, *ddec_mas; /* candidate minus star, east and north */
    const double *dra_err, *ddec_err; /* 1-sigma, mas */
} gl_vet_epochs;

/* Offsets (mas, east and north on the tangent plane at the star's apparent
 * place) of a fixed, infinitely distant background source at ICRS (bg_ra,
 * bg_dec) from the star at each date. The star is moved by eraPmsafe (space
 * motion from epoch_jyear to the date), then both go to geocentric apparent
 * place in the GCRS (eraApcg13 + eraAtciq: parallax from the star's distance,
 * light deflection by the Sun, annual aberration), and the offset is the
 * gnomonic projection eraTpxes. GCRS axes, not those of date, so north is
 * the ICRS north the astrometric calibration refers to.
 * Errors: GL_ERR_USAGE (parallax not positive, dates not finite). */
GL_API gl_status gl_vet_background_track(const gl_vet_star *star, double bg_ra_deg,
                                         double bg_dec_deg, long n, const double *mjd_utc,
                                         double *dra_mas, double *ddec_mas);

/* Both hypotheses for measured offsets: common proper motion (offsets
 * constant: 2 fitted parameters) and a stationary background star (its ICRS
 * position fitted, 2 parameters), each with chi2 and dof = 2n - 2.
 * Errors: GL_ERR_USAGE (fewer than 2 epochs, non-positive errors). */
typedef struct gl_vet_epoch_fit {
    double chi2_common, chi2_background;
    long dof;
    double p_common, p_background; /* chi2 upper-tail probabilities */
    double bg_ra_deg, bg_dec_deg;  /* fitted background position */
    double track_span_mas;         /* largest offset between two epochs of the background track */
    double *pred_dra, *pred_ddec;  /* n predicted background offsets (owned) */
} gl_vet_epoch_fit;
GL_API gl_status gl_vet_epochs_fit(const gl_vet_star *star, const gl_vet_epochs *e,
                                   gl_vet_epoch_fit *out);
GL_API void gl_vet_epoch_fit_free(gl_vet_epoch_fit *f);

/* A candidate characterised and tested. Positions are north-up: sep in px,
 * PA in degrees north through east. */
typedef struct gl_vet_result {
    double given_sep, given_pa;                 /* the position given (the candidate table's) */
    double start_sep, start_pa, start_contrast; /* start of the fit: the brightest pixel near
                                                   it (centre of light), its corrected flux */
    double sep_px, pa_deg, contrast;            /* the fit */
    double merit, merit_start;                  /* sum of squares / pixel variance */
    int nevals, converged;
    double throughput;                                /* of the start estimate */
    int nfakes;                                       /* fakes used for the errors */
    double sep_err_fit, pa_err_fit, contrast_err_fit; /* their scatter */
    double sep_err, pa_err, contrast_err;             /* total (with centring, north, scale) */
    double sep_mas, sep_err_mas, dra_mas, dra_err_mas, ddec_mas, ddec_err_mas; /* NaN: no scale */
    double dmag, dmag_err;
    double snr; /* S/N of the first mode count at the fit */
    int nmodes;
    long modes[GL_SUBTRACT_MAX_MODES];
    double snr_modes[GL_SUBTRACT_MAX_MODES];
    double snr_half[2], snr_negated, snr_scrambled;
    /* the same S/N for a planet: medians over the injection-recovery fakes */
    double fake_snr_modes[GL_SUBTRACT_MAX_MODES];
    double fake_snr_half[2], fake_snr_negated, fake_snr_scrambled;
    gl_vet_test tests[GL_VET_NTESTS];
    int npossible, npassed;
    /* stamps around the fitted position (stamp_n x stamp_n, north-up):
     * the data, the forward model of the fitted companion, and the data
     * after the negative companion */
    long stamp_n;
    double stamp_scale; /* px of the frame per stamp pixel (1) */
    float *stamp_data, *stamp_model, *stamp_resid;
    double merit_radius_px;
} gl_vet_result;

/* Characterises and tests one candidate.
 * Given: the cube (3-D or 4-D), its angles, an optional reference cube, the
 *        subtraction parameters (the first mode count is fitted; all are
 *        used by the mode test), the PSF model, vet parameters, the start
 *        (sep px, PA deg, from detect), and optional epochs (NULL or n = 0)
 *        with the star (needed with epochs).
 * Errors: GL_ERR_USAGE (candidate outside the field or in the masked zone,
 *        no positive flux at the start, parameters), GL_ERR_NOMEM, and what
 *        the subtraction returns. The message names the candidate by its
 *        position. */
GL_API gl_status gl_vet_candidate(const gl_cube *cube, const double *angles, const gl_cube *refs,
                                  const gl_subtract_params *sp, const gl_psf_model *psf,
                                  const gl_vet_params *vp, double sep_px, double pa_deg,
                                  const gl_vet_star *star, const gl_vet_epochs *epochs,
                                  gl_vet_result *out);
/* Frees the stamps (not the struct); NULL members are fine. */
GL_API void gl_vet_result_free(gl_vet_result *r);

/* Checks that (sep, pa) can be vetted in frames of nx x ny with the
 * subtraction parameters: inside the field with room for the annulus, and
 * outside the mask. GL_OK or GL_ERR_USAGE with a message. */
GL_API gl_status gl_vet_check_position(long nx, long ny, const gl_subtract_params *sp,
                                       const gl_vet_params *vp, double sep_px, double pa_deg);

/* Draws the figure of one candidate (stamps, S/N per mode count and per half,
 * the tests) to PNG and/or SVG (either path may be NULL). Errors: GL_ERR_IO. */
GL_API gl_status gl_vet_figure_write(const char *png_path, const char *svg_path,
                                     const gl_vet_result *r, const char *title);

#ifdef __cplusplus
}
#endif
#endif
