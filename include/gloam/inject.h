/*
 * gloam/inject.h -- the off-axis PSF model and planting of fake companions
 * into pupil-tracking sequences.
 *
 * Conventions (docs/conventions.md): the off-axis PSF, multiplied by
 * psf_scale, has the star's flux per frame as its total flux; a companion of
 * contrast c at separation s (px) and sky position angle pa (deg, north
 * through east) is c * psf_scaled centred, in raw frame i, at angle
 * 90 + pa + theta_i + north_offset degrees counter-clockwise from +x about the
 * star (nx/2, ny/2). Sub-pixel placement uses the Fourier shift of the
 * geometry module, so planted flux is exact.
 */
#ifndef GLOAM_INJECT_H
#define GLOAM_INJECT_H

#include "gloam/core.h"

#ifdef __cplusplus
extern "C" {
#endif

/* The off-axis PSF prepared for planting: one frame-sized image per channel,
 * peak centred on (nx/2, ny/2) to sub-pixel accuracy, multiplied by psf_scale.
 * Read-only after creation, so it can be shared between threads. */
typedef struct gl_psf_model {
    long nx, ny, nchan;
    float *images;   /* nchan planes of nx*ny */
    double *flux;    /* per channel: total flux of the scaled PSF (the star flux) */
    double *peak;    /* per channel: peak of the scaled, centred PSF */
    double *fwhm_px; /* per channel: FWHM measured from the PSF's radial profile */
    double psf_scale;
    double centre_x, centre_y; /* where the PSF's centre was found in the input (0-based) */
} gl_psf_model;

/* Builds the model for frames of nx x ny pixels with nchan channels from a
 * PSF image (2-D), a stack of PSF frames (3-D: averaged), or one PSF per
 * channel (3-D with nchan planes when nchan > 1, or 4-D: averaged over frames).
 * The PSF's centre is found by an iterated centre of light within one FWHM of
 * the peak (exact for a symmetric PSF), then the PSF is moved there with the
 * FFT shift. name is used in messages. A background level estimated in the
 * stamp's outer part that biases the flux by 1.5% or more is reported with
 * gl_log (GL_LOG_WARN), the PSF left as given (src/inject/psf.c).
 * Errors: GL_ERR_USAGE (psf_scale not positive), GL_ERR_INPUT (no positive
 * signal, NaN-only, larger than the frame, channel count mismatch, less than
 * half of the light within 3 FWHM of the peak: not an off-axis PSF). */
GL_API gl_status gl_psf_model_new(const gl_cube *psf, const char *name, long nx, long ny,
                                  long nchan, double psf_scale, gl_psf_model **out);
GL_API void gl_psf_model_free(gl_psf_model *m);

/* One companion on the sky. */
typedef struct gl_companion {
    double sep_px;
    double pa_deg;
    double contrast; /* companion flux / star flux (per channel: times spectrum[c]);
                        negative removes a source */
} gl_companion;

/* Position of a companion in raw frame of parallactic angle theta_deg. */
GL_API void gl_companion_position(const gl_companion *c, double theta_deg, double north_offset_deg,
                                  long nx, long ny, double *x, double *y);

/* Parses "SEP_PX:PA_DEG:CONTRAST" (e.g. "24.5:131:2e-4"); the separation
 * must be positive and the contrast non-zero (negative: a negative copy of the
 * PSF, to remove a known companion). Errors: GL_ERR_USAGE with a message
 * quoting the text. */
GL_API gl_status gl_companion_parse(const char *text, gl_companion *out);

/* Adds companions to every frame of cube (nframe angles in degrees).
 * spectrum: NULL (flat) or nchan multipliers of the contrast per channel.
 * A companion whose centre falls outside the image in any frame is refused.
 * Frames are processed in parallel; the result does not depend on the
 * thread count. */
GL_API gl_status gl_inject_companions(gl_cube *cube, const double *angles_deg,
                                      double north_offset_deg, const gl_psf_model *psf,
                                      const gl_companion *comps, int ncompanions,
                                      const double *spectrum);

/* inject's table of planted companions (src/inject/products.c), normally
 * to a temporary name from gl_outset_add: one row per companion:
 * companion (from 1), sep_px, pa_deg, contrast, flux (contrast x
 * star_flux: the PSF's total times the spectrum's first channel), x_frame1,
 * y_frame1 (gl_companion_position at theta0_deg, the first frame's angle).
 * Errors: GL_ERR_IO naming the file, GL_ERR_NOMEM. */
GL_API gl_status gl_inject_planted_write(const char *csv, const gl_companion *comps, int n,
                                         double theta0_deg, double north_offset_deg, long nx,
                                         long ny, double star_flux);

#ifdef __cplusplus
}
#endif
#endif
