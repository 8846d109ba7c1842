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

#ifdef __cplusplus
}
#endif
#endif
