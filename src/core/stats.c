/*
 * stats.c -- robust location and scale of pixel samples: the median and the
 * normalised median absolute deviation (MAD), which ignore the few bright
 * outliers (companions, cosmic rays, hot pixels) that dominate a mean and a
 * standard deviation. Sorting and medians come from GSL (gsl_sort,
 * gsl_stats_median_from_sorted_data); NaN marks missing data and is skipped.
 *
 * The MAD is scaled by 1/Phi^-1(3/4) = 1.482602218505602 so that it estimates
 * the standard deviation of Gaussian noise (Hampel 1974, JASA 69, 383; the
 * same constant as scipy.stats.median_abs_deviation(scale="normal")).
 *
 * Also the in-place medians of hot loops (per-pixel medians of long
 * sequences), by Hoare's selection (Hoare 1961, CACM 4, 321: "FIND"; linear
 * expected time, no allocation), in double and float from one template so
 * that the align and subtract stages share one implementation.
 */
#include "core/internal.h"

#include <gsl/gsl_sort.h>
#include <gsl/gsl_statistics_double.h>
#include <math.h>

#define GL_MAD_TO_SIGMA 1.482602218505602

/* Median and scaled MAD of the n values already copied into work. */
static void robust_of_work(double *work, size_t n, double *median, double *sigma)
{
    if (n == 0) {
        *median = NAN;
        *sigma = NAN;
        return;
    }
    gsl_sort(work, 1, n);
    double med = gsl_stats_median_from_sorted_data(work, 1, n);
    for (size_t i = 0; i < n; i++)
        work[i] = fabs(work[i] - med);
    gsl_sort(work, 1, n);
    *median = med;
    *sigma = GL_MAD_TO_SIGMA * gsl_stats_median_from_sorted_data(work, 1, n);
}

size_t gl_stats_robust_float(const float *x, size_t n, double *work, double *median, double *sigma)
{
    size_t m = 0;
    for (size_t i = 0; i < n; i++)
        if (isfinite(x[i]))
            work[m++] = x[i];
    robust_of_work(work, m, median, sigma);
    return m;
}

size_t gl_stats_robust(const double *x, size_t n, double *work, double *median, double *sigma)
{
    size_t m = 0;
    for (size_t i = 0; i < n; i++)
        if (isfinite(x[i]))
            work[m++] = x[i];
    robust_of_work(work, m, median, sigma);
    return m;
}

/* k-th smallest of v[0..n-1] by Hoare's selection (reorders v), then the
 * median: the middle value, or for even n the mean of the two middle ones
 * (the lower one is the largest value left of position n/2). */
#define GL_DEFINE_MEDIAN_INPLACE(NAME, T, HALF)                                                    \
    static T NAME##_select(T *v, long n, long k)                                                   \
    {                                                                                              \
        long lo = 0, hi = n - 1;                                                                   \
        while (lo < hi) {                                                                          \
            T pivot = v[lo + (hi - lo) / 2];                                                       \
            long i = lo, j = hi;                                                                   \
            while (i <= j) {                                                                       \
                while (v[i] < pivot)                                                               \
                    i++;                                                                           \
                while (v[j] > pivot)                                                               \
                    j--;                                                                           \
                if (i <= j) {                                                                      \
                    T t = v[i];                                                                    \
                    v[i++] = v[j];                                                                 \
                    v[j--] = t;                                                                    \
                }                                                                                  \
            }                                                                                      \
            if (k <= j)                                                                            \
                hi = j;                                                                            \
            else if (k >= i)                                                                       \
                lo = i;                                                                            \
            else                                                                                   \
                break;                                                                             \
        }                                                                                          \
        return v[k];                                                                               \
    }                                                                                              \
    T NAME(T *v, long n)                                                                           \
    {                                                                                              \
        if (n <= 0)                                                                                \
            return (T)NAN;                                                                         \
        T hi = NAME##_select(v, n, n / 2);                                                         \
        if (n % 2)                                                                                 \
            return hi;                                                                             \
        T lo = v[0];                                                                               \
        for (long i = 1; i < n / 2; i++)                                                           \
            if (v[i] > lo)                                                                         \
                lo = v[i];                                                                         \
        return HALF * (lo + hi);                                                                   \
    }

GL_DEFINE_MEDIAN_INPLACE(gl_stats_median_inplace, double, 0.5)
GL_DEFINE_MEDIAN_INPLACE(gl_stats_median_inplace_float, float, 0.5f)
