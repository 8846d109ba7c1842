/*
 * limits/internal.h -- what the files of the contrast-curve stage share.
 */
#ifndef GLOAM_LIMITS_INTERNAL_H
#define GLOAM_LIMITS_INTERNAL_H

#include "gloam/limits.h"

/* The calibration of one separation of one plane: what the curve knows there
 * (noise, threshold, references) and where the results go. */
typedef struct limits_point {
    double sep_px, fwhm;
    double noise; /* sigma: std of the aperture sums (known sources left out) */
    double tau;   /* t threshold */
    double nref;  /* n2 */
    double
        noise_dof; /* n - 1 of the noise estimate (its own scatter in the model); 0: exact noise */
    double psf_flux; /* F */
    double q;        /* completeness of the second curve */
    /* results */
    double throughput, throughput_scatter, fakes_used;
    double signal; /* the same local fit of the fakes' signal (test - mean of references) */
    double contrast, completeness, contrast_c50, contrast_cq;
} limits_point;

typedef struct limits_bessel_table limits_bessel_table;

/* Fills the results of pt from the fakes (plane `plane`): throughput by a
 * local linear fit of the fakes within 1.5 FWHM, the classical contrast, and
 * the contrasts at 50% and q completeness of the fake-averaged doubly
 * noncentral t model (calibrate.c). Results NaN where no value exists.
 * bessel: NULL, or the calling thread's Bessel table kept from call to call
 * (NULL at first; the caller frees it), used again where the point's order
 * is the same (the planes of one separation) and replaced otherwise. */
void gl_limits_calibrate_point(limits_point *pt, const gl_limits_fake *fakes, int nfakes, int plane,
                               limits_bessel_table **bessel);

/* log(exp(-x) I_o(x) / x^o) of one order o, tabulated piece by piece as
 * the quadrature asks for it (completeness.c); one per thread. NULL for an
 * order <= -1 or on allocation failure. */
limits_bessel_table *gl_limits_bessel_table_new(double order);
void gl_limits_bessel_table_free(limits_bessel_table *t);
/* t where it has this order, else a new table of it (t freed); NULL on
 * failure */
limits_bessel_table *gl_limits_bessel_table_keep(limits_bessel_table *t, double order);

/* gl_limits_completeness_lobes with the Bessel function from the table of
 * order nu/2 - 1 (evaluated directly when t is NULL or of another order). */
double gl_limits_completeness_lobes_tabled(limits_bessel_table *t, double delta, double lambda,
                                           double tau, double nu);

/* Whether the subtraction fits coefficients over the whole frame (klip-frame,
 * the spectral step), so that every fake planted moves every other one. */
int gl_limits_fakes_share_frame(const gl_subtract_params *sp);

/* In such a subtraction a fake shares it only with fakes at most this many
 * times as bright (curve.c). */
#define GL_LIMITS_BATCH_RATIO 4.0

#endif
