/*
 * gloam/limits.h -- detection limits: noise and small-sample thresholds per
 * separation, throughput from fake companions, and contrast curves at a
 * chosen false-positive fraction and completeness.
 */
#ifndef GLOAM_LIMITS_H
#define GLOAM_LIMITS_H

#include "gloam/core.h"

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

/* A contrast-curve figure: curves against separation, with notes (the
 * assumptions) printed on the figure. */
typedef struct gl_limits_series {
    const double *contrast; /* n values; NaN or <= 0 leaves a gap */
    const char *label;
} gl_limits_series;

typedef struct gl_limits_plot {
    long n;
    const double *sep_px;
    int ncurves;
    gl_limits_series curves[4];
    double pixscale_mas; /* > 0 adds an arcsec axis */
    const char *title;
    int nnotes;
    const char *notes[8];
} gl_limits_plot;

/* Draws the figure to a PNG and/or an SVG file (either path may be NULL).
 * Errors: GL_ERR_IO. */
GL_API gl_status gl_limits_plot_write(const char *png_path, const char *svg_path,
                                      const gl_limits_plot *p);

#ifdef __cplusplus
}
#endif
#endif
