/*
 * geometry/internal.h -- the plan and work structures behind gloam/geometry.h.
 */
#ifndef GLOAM_GEOMETRY_INTERNAL_H
#define GLOAM_GEOMETRY_INTERNAL_H

#include "gloam/geometry.h"

#include <fftw3.h>

struct gl_geom_plan {
    long nx, ny;
    gl_interp interp;
    long pad;             /* side of the square padded buffer for FFT rotation */
    fftwf_plan shift_fwd; /* 2-D r2c, ny x nx */
    fftwf_plan shift_inv; /* 2-D c2r */
    fftwf_plan row_fwd;   /* 1-D r2c of length pad */
    fftwf_plan row_inv;   /* 1-D c2r */
};

struct gl_geom_work {
    float *copy;            /* nx*ny: the input, for the NaN mask and cubic sampling */
    float *real2d;          /* nx*ny */
    fftwf_complex *spec2d;  /* ny*(nx/2+1) */
    float *padded;          /* pad*pad */
    float *row;             /* pad */
    fftwf_complex *spec1d;  /* pad/2+1 */
    fftwf_complex *phase_x; /* nx/2+1: phase ramp along x for a 2-D shift */
    fftwf_complex *phase_y; /* ny */
};

/* Keys (1981) cubic convolution sample of img at (x, y); NaN when the point
 * lies outside [0, n-1] or a neighbour with non-zero weight is NaN. */
float gl_geom_cubic_sample(const float *img, long nx, long ny, double x, double y);

/* Shifts a real sequence of length n (with spectrum buffer of n/2+1) by d
 * samples, periodically, using the given 1-D plans. */
void gl_geom_fft_shift_1d(const gl_geom_plan *p, float *row, fftwf_complex *spec, double d);

#endif
