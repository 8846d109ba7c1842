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
 * sequences): in double by Hoare's selection (Hoare 1961, CACM 4, 321:
 * "FIND"; linear expected time, no allocation); in float, for the per-pixel
 * stacks of subtract, by most-significant-digit radix selection on the
 * order-preserving integer keys of the floats (exact, linear, branch-free
 * passes; Knuth, TAOCP vol. 3, sec. 5.2.5, radix sorting).
 */
#include "core/internal.h"

#include <gsl/gsl_sort.h>
#include <gsl/gsl_statistics_double.h>
#include <math.h>
#include <stdint.h>
#include <string.h>

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
 * (the lower one is the largest value left of position n/2). A template kept
 * for other element types. */
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

/* Order-preserving integer key of a float: the sign bit flipped for
 * positives, all bits flipped for negatives (so -0 sorts just below +0). */
static inline uint32_t float_key(float f)
{
    uint32_t u;
    memcpy(&u, &f, sizeof u);
    return u ^ ((uint32_t)((int32_t)u >> 31) | 0x80000000u);
}

static inline float key_float(uint32_t k)
{
    uint32_t u = k ^ (((k >> 31) - 1u) | 0x80000000u);
    float f;
    memcpy(&f, &u, sizeof f);
    return f;
}

/* The k-th smallest key of K[0..n-1] by most-significant-digit radix
 * selection, 8 bits a pass: each pass counts the digits of the survivors,
 * keeps those in the bin holding rank k (branch-free compaction; K is
 * overwritten) and goes on to the next digit. *next receives the (k+1)-th
 * smallest key (UINT32_MAX when k is the largest): the smallest key dropped
 * above the survivors, or the survivors' own key when rank k+1 is among them.
 * Exact, O(n) whatever the input (duplicates included), and free of the
 * mispredicted branches of a comparison partition, which dominate Hoare's
 * selection on a few hundred values (the per-pixel stacks of a sequence). */
__attribute__((target_clones("avx2", "default"))) static uint32_t
radix_select(uint32_t *K, long n, long k, uint32_t *next)
{
    uint32_t above = UINT32_MAX;
    for (int shift = 24; shift >= 0 && n > 1; shift -= 8) {
        long cnt[256] = {0};
        for (long i = 0; i < n; i++)
            cnt[(K[i] >> shift) & 255u]++;
        unsigned b = 0;
        while (k >= cnt[b])
            k -= cnt[b++];
        long m = 0;
        for (long i = 0; i < n; i++) {
            uint32_t v = K[i], d = (v >> shift) & 255u;
            uint32_t g = d > b ? v : UINT32_MAX;
            above = g < above ? g : above;
            K[m] = v;
            m += d == b;
        }
        n = m;
    }
    *next = k + 1 < n ? K[0] : above;
    return K[0];
}

float gl_stats_median_inplace_float(float *v, long n)
{
    if (n <= 0)
        return NAN;
    uint32_t *K = (uint32_t *)(void *)v; /* keys written over the values */
    for (long i = 0; i < n; i++) {
        uint32_t u = float_key(v[i]);
        memcpy(&v[i], &u, sizeof u);
    }
    uint32_t next;
    if (n % 2)
        return key_float(radix_select(K, n, n / 2, &next));
    float lo = key_float(radix_select(K, n, n / 2 - 1, &next));
    return 0.5f * (lo + key_float(next));
}
