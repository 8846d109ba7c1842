/*
 * align/internal.h -- declarations shared by the files of the align stage:
 * the centring-method table, the per-frame result arrays, and small robust
 * statistics helpers.
 */
#ifndef GLOAM_ALIGN_INTERNAL_H
#define GLOAM_ALIGN_INTERNAL_H

#include "gloam/align.h"

#include <fftw3.h>
#include <stdio.h>

/* Measurement images handed to a centring method: nframe planes of nx x ny
 * (channel means of the cube), and their median frame. */
typedef struct gl_align_stack {
    const float *img;
    const float *median; /* per-pixel median of the frames (blurred by jitter) */
    const float *sharp;  /* median of frames registered onto it (gl_sharp_reference) */
    long nx, ny, nframe;
    const char *name; /* input file, for messages */
} gl_align_stack;

/* Per-frame output of a method; ok[f] = 0 marks a frame it could not measure
 * (x, y NaN). */
typedef struct gl_centres {
    double *x, *y, *err_x, *err_y, *quality;
    int *ok;
} gl_centres;

/* One centring method. measure() fills every frame of c; it returns an error
 * only when the method cannot work on this sequence at all (the message names
 * the file); a failure on single frames is reported through c->ok. */
typedef struct gl_centre_ops {
    const char *name;
    const char *summary;
    gl_status (*measure)(const gl_align_stack *s, const gl_align_params *p, gl_centres *c);
} gl_centre_ops;

extern const gl_centre_ops gl_centre_core_ops, gl_centre_reference_ops, gl_centre_spots_ops,
    gl_centre_halo_ops;
const gl_centre_ops *gl_centre_ops_get(gl_centre_method m);

/* A sharp reference: up to 64 frames spread over the sequence, registered
 * to the median frame, shifted onto it and median-combined (methods.c).
 * Only s->img and s->median are used. */
gl_status gl_sharp_reference(const gl_align_stack *s, const gl_align_params *p, float *ref);

/* Chooses a method for the stack (logged by the caller with the reason),
 * skipping the methods m with tried[m] set; GL_CENTRE_AUTO when every
 * method has been tried. */
gl_centre_method gl_centre_auto(const gl_align_stack *s, const gl_align_params *p, const int *tried,
                                char *reason, size_t size);

/* A residual core is looked for within this distance (px) of the halo's
 * centre of symmetry (common practice: that centre was found up to 3 px
 * from the star on simulated Lyot sequences). */
#define GL_CORE_SEARCH_PX 5

/* The largest shift of a residual core behind a coronagraph by the
 * aberrations, in core FWHM: 0.13 FWHM (0.37 px) was the most seen on
 * simulated Lyot sequences (5 seeds, tests/py/test_align.py), rounded up
 * (not a published value). */
#define GL_CORE_SHIFT_FWHM 0.15

/* The star's core in an image (methods.c). */
typedef struct gl_star_core {
    gl_profile_fit fit; /* the core's Gaussian fit */
    int behind_mask;    /* 1: not the brightest feature but a residual core near
                           the halo's centre of symmetry (a coronagraph's leak) */
    int far;            /* the brightest compact peak (peak) lies more than 3 FWHM
                           from the centre of symmetry: not the star */
    gl_profile_fit peak;
    double sx, sy; /* the image's centre of point symmetry (NaN: none) */
} gl_star_core;

/* 1 when img shows the star's core: an unsaturated compact star within
 * 3 FWHM of the centre of symmetry, or else a compact residual core within
 * GL_CORE_SEARCH_PX of it (behind a coronagraph, where the halo's bright
 * parts are not point-symmetric about the star). 0 for a saturated or
 * coronagraphic image without a core. */
int gl_star_core_find(const float *img, long nx, long ny, const gl_align_params *p,
                      gl_star_core *c);

/* gl_star_core_find on the sharp reference. */
int gl_star_core_visible(const gl_align_stack *s, const gl_align_params *p);

/* ---- assessment of the centring (assess.c) ------------------------------ */

/* N-cornered hat: est[0..nest-1] are nf-frame estimates of one coordinate
 * (NULL: the fixed pointing, all zero); frames with mask set are compared.
 * var[k] gets the error variance of estimate k (>= 0). 3 <= nest <= 8.
 * GL_ERR_INPUT with fewer than 3 frames. */
gl_status gl_centre_hat(int nest, long nf, const double *const *est, const int *mask, double *var);

/* What the comparison of methods found, for the log and the header. */
typedef struct gl_centre_assessment {
    int assessed;          /* 0: no second method to compare with, or spots */
    int symmetry_only;     /* no spots, no visible core: the absolute centre rests on
                              the halo's point symmetry */
    int uncertain;         /* typical error above 0.1 px, or above the motion */
    double err[2];         /* median reported error per axis, px */
    double motion;         /* pointing motion rms per axis, px (fixed pointing's error) */
    int core_visible;      /* the sharp reference shows the star's core (gl_star_core_find) */
    int core_behind_mask;  /* ... a residual core that is not the brightest feature (a
                              coronagraph's leak) */
    double halo_offset[2]; /* mean halo centre minus the core anchor, px (NaN: not measured) */
    double core_abs[2];    /* the absolute error given to a core behind the mask: |halo_offset|
                              up to core_abs_bound, px (NaN: none) */
    double core_abs_bound; /* GL_CORE_SHIFT_FWHM x the core's FWHM, px */
    double core_shift[2];  /* the core-anchored centres moved by this toward the halo's (px) */
    char compared[256];    /* "halo 0.69/0.71 px, reference 0.07/0.08 px" */
} gl_centre_assessment;

/* Sets a->uncertain: an absolute centre resting on the halo's symmetry
 * alone, a typical error above 0.1 px, or one above the pointing motion. */
void gl_centre_judge(gl_centre_assessment *a);
/* Logs the warnings behind a->uncertain for the input `name`. */
void gl_centre_warn(const char *name, const gl_align_result *r, const gl_centre_assessment *a);

/* The DFT upsampling factor of a registration precision in pixels
 * (1 / precision, rounded, within [1, 1000]). */
static inline int gl_align_upsample(const gl_align_params *p)
{
    double u = p->precision > 0 ? 1.0 / p->precision : 100.0;
    return u < 1 ? 1 : (u > 1000 ? 1000 : (int)(u + 0.5));
}

/* Re-records the current error message as "prefix: message" (the message
 * is copied first: gl_error_set must not read the buffer it writes). */
static inline gl_status gl_align_error_wrap(gl_status st, const char *prefix)
{
    char msg[1024];
    snprintf(msg, sizeof msg, "%s", gl_error_message());
    return gl_error_set(st, "%s: %s", prefix, msg);
}

/* ---- helpers (stats.c) -------------------------------------------------- */

/* Median of n doubles (reorders v); NaN when n == 0. */
double gl_median_d(double *v, long n);
/* NaN-aware per-pixel median of the planes listed in frames (NULL: planes
 * 0..nframe-1); NaN where every one is NaN. */
gl_status gl_median_frame(const float *planes, long nx, long ny, const long *frames, long nframe,
                          float *out);
/* Frames spread evenly over a sequence: at most maxn indices k * nframe / m
 * into frames; returns their number m. */
long gl_spread_frames(long nframe, long maxn, long *frames);
/* Reference frames are medians of at most this many frames spread over the
 * sequence: plenty for a median, and it keeps long sequences fast. */
#define GL_MEDIAN_MAX_FRAMES 255
/* Robust pixel noise of an image: MAD of differences of horizontal
 * neighbours / sqrt(2) (insensitive to smooth structure). */
double gl_image_noise(const float *img, long nx, long ny);
/* Brightest pixel of the 3x3 box mean (NaN skipped), away from the edge by
 * `margin` pixels. Returns 0 when nothing finite. *value is the box mean. */
int gl_image_peak(const float *img, long nx, long ny, long margin, long *px, long *py,
                  double *value);
/* Median of the finite pixels of img. */
double gl_image_median(const float *img, long nx, long ny);
/* FWHM estimate at (px, py): 2 sqrt(area / pi) of the pixels above half the
 * peak over the background within radius r. */
double gl_image_fwhm_estimate(const float *img, long nx, long ny, long px, long py, double bg,
                              long r);

/* Measures every frame with a per-frame function (OpenMP, static schedule).
 * fn returns 0 on success. */
typedef int (*gl_frame_measure_fn)(const float *img, long nx, long ny, const void *ctx, double *x,
                                   double *y, double *ex, double *ey, double *q);
void gl_centres_each_frame(const gl_align_stack *s, gl_frame_measure_fn fn, const void *ctx,
                           gl_centres *c);

/* gl_align_fit_profile with, when plane != 0, a sloped background
 * B + bx (x - xc) + by (y - yc) about the stamp centre (for spots on a halo). */
gl_status gl_fit_profile_plane(const float *img, long nx, long ny, double x0, double y0, int half,
                               double fwhm0, gl_profile_kind kind, int plane, gl_profile_fit *out);

/* Profile centre of the star in an image: peak search, FWHM estimate, fit.
 * Returns 0 on success. */
int gl_profile_centre(const float *img, long nx, long ny, gl_profile_kind kind,
                      const gl_align_params *p, gl_profile_fit *fit);
/* The same fit started at pixel (px, py) instead of the brightest peak, the
 * FWHM guess (without --fwhm) from the pixels within `reach` of it. */
int gl_profile_centre_at(const float *img, long nx, long ny, long px, long py, long reach,
                         gl_profile_kind kind, const gl_align_params *p, gl_profile_fit *fit);

/* Symmetry centre with a caller-owned plan (no reference), work and
 * spectrum buffer ((nx/2+1)*ny complex), for use inside frame loops (xcorr.c). */
gl_status gl_symmetry_plan_new(long nx, long ny, int upsample, gl_xcorr_plan **out);
gl_status gl_symmetry_centre_with(const gl_xcorr_plan *p, gl_xcorr_work *w, fftw_complex *spec,
                                  const float *img, double *x, double *y);

/* ---- preparation (badpix.c, select.c) ----------------------------------- */

/* Finds and replaces bad pixels in every plane of cube (in place); map gets
 * the GL_BADPIX_* bits per pixel. */
gl_status gl_badpix_fix(gl_cube *cube, double sigma, float *map, long *nstatic, long *ntransient);

/* Flags frames (status GL_FRAME_KEPT on entry) whose flux or correlation
 * with the median of kept frames is an outlier; logs each rejection. */
gl_status gl_select_frames(const float *planes, long nx, long ny, long nframe, double sigma,
                           const char *name, int *status, double *flux, double *corr);

#endif
