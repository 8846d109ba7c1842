/*
 * gloam/geometry.h -- sub-pixel shifts and rotations of images about the star
 * (the convention centre (nx/2, ny/2), integer division).
 *
 * Two interpolators stand behind one interface:
 *  - GL_INTERP_FFT: shifts by a Fourier phase ramp; rotations by three
 *    shears, each a row-wise Fourier shift (Larkin, Oldfield & Klemm 1997,
 *    Opt. Commun. 139, 99), on a zero-padded copy so nothing wraps. Exact for
 *    band-limited images, conserves flux.
 *  - GL_INTERP_CUBIC: separable cubic convolution (Keys 1981, IEEE ASSP 29,
 *    1153, a = -0.5); local, so NaN spread only to the 4x4 neighbourhood.
 * NaN (no data) in the input is treated as 0 by the FFT interpolator; an
 * output pixel is NaN when the nearest input pixel of its source position is
 * NaN or lies outside the image.
 *
 * Plan, then execute: a gl_geom_plan holds FFTW plans for one image size and
 * is built once (not thread-safe to build); gl_geom_* execute functions take a
 * caller-owned gl_geom_work (one per thread) and never allocate.
 */
#ifndef GLOAM_GEOMETRY_H
#define GLOAM_GEOMETRY_H

#include "gloam/core.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef enum gl_interp { GL_INTERP_FFT = 0, GL_INTERP_CUBIC = 1 } gl_interp;

typedef struct gl_geom_plan gl_geom_plan;
typedef struct gl_geom_work gl_geom_work;

/* Plans shifts and rotations of nx x ny images with the given interpolator. */
GL_API gl_status gl_geom_plan_new(long nx, long ny, gl_interp interp, gl_geom_plan **out);
GL_API void gl_geom_plan_free(gl_geom_plan *p);
/* Scratch space for one thread. */
GL_API gl_status gl_geom_work_new(const gl_geom_plan *p, gl_geom_work **out);
GL_API void gl_geom_work_free(gl_geom_work *w);

/* Shifts img (nx x ny, in place) so that content at (x, y) moves to
 * (x + dx, y + dy). */
GL_API gl_status gl_geom_shift(const gl_geom_plan *p, gl_geom_work *w, float *img, double dx,
                               double dy);

/* Rotates img in place counter-clockwise (x right, y up) by angle_deg about
 * the star centre (nx/2, ny/2). Pixels whose source lies outside the input
 * become NaN. */
GL_API gl_status gl_geom_rotate(const gl_geom_plan *p, gl_geom_work *w, float *img,
                                double angle_deg);

/* gl_geom_rotate for images rotated again by the same angle with the same
 * NaN pixels (e.g. one frame's residuals for several mode counts): `bits`
 * (nx*ny bits, bit j%8 of byte j/8 for pixel j) records the output's NaN
 * pixels. With *known == 0 they are computed as gl_geom_rotate does and
 * recorded, and *known is set; with *known == 1 they are taken from `bits`
 * (the caller vouches for the angle and the input's NaN pixels). The output
 * is identical either way. */
/* The NaN pixels of img (n pixels) as bits, as gl_geom_rotate_masked keeps
 * them: pixel j is bit j % 8 of byte j / 8 ((n + 7) / 8 bytes). */
GL_API void gl_geom_nan_bits(const float *img, long n, unsigned char *bits);
GL_API gl_status gl_geom_rotate_masked(const gl_geom_plan *p, gl_geom_work *w, float *img,
                                       double angle_deg, unsigned char *bits, int *known);

/* Magnifies img (in place) by `factor` about the star centre: content at
 * distance d from the star moves to factor * d. Cubic convolution sampling
 * whatever the plan's interpolator (src/geometry/scale.c); surface brightness
 * is kept; pixels whose source lies outside the input become NaN.
 * Errors: GL_ERR_USAGE (factor not positive). */
GL_API gl_status gl_geom_scale(const gl_geom_plan *p, gl_geom_work *w, float *img, double factor);

/* An image kept as its Fourier transform, to add many shifted copies of it
 * cheaply (fake companions): read-only once made, shareable by threads. Needs
 * a plan made with GL_INTERP_FFT. */
typedef struct gl_geom_stamp gl_geom_stamp;

/* Transforms img (the plan's nx x ny) once, using w as scratch.
 * Errors: GL_ERR_INTERNAL (plan not GL_INTERP_FFT), GL_ERR_NOMEM. */
GL_API gl_status gl_geom_stamp_new(const gl_geom_plan *p, gl_geom_work *w, const float *img,
                                   gl_geom_stamp **out);
/* Frees a stamp; NULL is a no-op. */
GL_API void gl_geom_stamp_free(gl_geom_stamp *s);

/* out (nx x ny) += sum over k of weight[k] x the stamp moved by (dx[k],
 * dy[k]), by phase ramps summed in the Fourier domain and one inverse
 * transform. The move is periodic: what leaves one edge re-enters at the
 * opposite one, so keep the stamp's content well inside the frame. NaN pixels
 * of out stay NaN. */
GL_API gl_status gl_geom_stamp_add(const gl_geom_plan *p, gl_geom_work *w, const gl_geom_stamp *s,
                                   int n, const double *dx, const double *dy, const double *weight,
                                   float *out);

/* Parses "fft" or "cubic"; returns -1 for anything else. */
GL_API int gl_interp_from_name(const char *name);
GL_API const char *gl_interp_name(gl_interp interp);

#ifdef __cplusplus
}
#endif
#endif
