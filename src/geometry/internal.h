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
    fftwf_plan rows_fwd;  /* GL_GEOM_BATCH contiguous rows of length pad, r2c */
    fftwf_plan rows_inv;  /* their c2r */
};

struct gl_geom_work {
    float *copy;            /* nx*ny: the input, for the NaN mask and cubic sampling */
    float *real2d;          /* nx*ny */
    fftwf_complex *spec2d;  /* ny*(nx/2+1) */
    float *padded;          /* pad*pad */
    float *lines;           /* GL_GEOM_BATCH x pad: columns gathered for the y-shear */
    fftwf_complex *specb;   /* GL_GEOM_BATCH spectra of pad/2+1 */
    fftwf_complex *phase_x; /* nx/2+1: phase ramp along x for a 2-D shift */
    fftwf_complex *phase_y; /* ny */
    double *ramp;           /* 8 x (pad/2+1) + 4: shear phase tables (rotate.c) */
    fftwf_complex *group_x; /* GL_GEOM_STAMP_GROUP x (nx/2+1): x ramps of a group of copies */
    fftwf_complex *group_y; /* ny x GL_GEOM_STAMP_GROUP: their weighted y ramps (stamp.c) */
};

/* Keys (1981) cubic convolution sample of img at (x, y); NaN when the point
 * lies outside [0, n-1] or a neighbour with non-zero weight is NaN. */
float gl_geom_cubic_sample(const float *img, long nx, long ny, double x, double y);

/* Phase factors exp(-2 pi i k d / n) for k = 0..m-1 (frequencies of a
 * length-n axis, negative ones above n/2), the Nyquist one made real. */
void gl_geom_phase_ramp(fftwf_complex *ph, long m, long n, double d);

/* Shears run on batches of this many rows or columns at once, so FFTW can
 * vectorise across transforms (columns are gathered into rows first). */
#define GL_GEOM_BATCH 8

/* Shifted copies of a stamp are summed this many at a time (stamp.c). */
#define GL_GEOM_STAMP_GROUP 16

struct gl_geom_stamp {
    long nx, ny;
    fftwf_complex *spec; /* ny x (nx/2+1), already divided by nx*ny */
};

#endif
