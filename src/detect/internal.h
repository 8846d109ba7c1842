/*
 * detect/internal.h -- declarations shared by the files of the detection
 * stage, not exported.
 */
#ifndef GLOAM_DETECT_INTERNAL_H
#define GLOAM_DETECT_INTERNAL_H

#include "gloam/detect.h"

/* Turns GSL's abort-on-error handler off (once per process, thread-safe). */
void gl_detect_gsl_quiet(void);

/* Gaussian significance of a t value with dof degrees of freedom, from the
 * upper tail for t >= 0 and minus that of the lower tail for t < 0 (so that
 * negative t keep full precision). */
double gl_detect_sigma_from_t(double t, long dof);

/* References at separation sep: n - 1, or n - 3 without the neighbours. */
long gl_detect_ring_nref(double sep, double diam, int exclude_adjacent);

/* Resolved parameters: diameter, mask and merge radius in px. */
typedef struct detect_geom {
    double diam, mask, merge;
} detect_geom;
void gl_detect_geom(const gl_detect_params *p, detect_geom *g);

#endif
