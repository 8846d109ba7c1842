/*
 * eigen_bench.c -- which LAPACK route gives the leading eigenpairs of the
 * small per-target library covariances of klip-rings fastest (not a test).
 *
 * For library sizes n seen in annular KLIP (30-200 frames) and 10 pairs, it
 * times on the same positive semi-definite matrix (a low-rank speckle part
 * plus noise, 800 pixels): dsyevr with an index range (bisection and inverse
 * iteration for a subset), dsytrd + dstemr with an index range + dormtr
 * (multiple relatively robust representations, what sub_target_weights
 * uses), dsyevd (divide and conquer, all pairs) and dsyevr with all pairs.
 * Median of 15 runs of 20 calls, one thread.
 *
 * build: gcc -O2 bench/eigen_bench.c -o eigen_bench -llapacke -lopenblas -lm
 * run:   OPENBLAS_NUM_THREADS=1 ./eigen_bench
 */
#include <lapacke.h>
#include <cblas.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <math.h>
#include <time.h>
static double now()
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return t.tv_sec + 1e-9 * t.tv_nsec;
}
static int cmpd(const void *a, const void *b)
{
    double x = *(double *)a, y = *(double *)b;
    return x < y ? -1 : x > y;
}
int main(int argc, char **argv)
{
    int sizes[] = {30, 50, 70, 90, 120, 160, 200};
    int k = 10, p = 800;
    for (int si = 0; si < 7; si++) {
        int n = sizes[si];
        double *X = malloc(sizeof(double) * n * p), *C = malloc(sizeof(double) * n * n),
               *A = malloc(sizeof(double) * n * n), *W = malloc(sizeof(double) * n),
               *V = malloc(sizeof(double) * n * n);
        double *d = malloc(8 * n), *e = malloc(8 * n), *tau = malloc(8 * n);
        int *isuppz = malloc(sizeof(int) * 2 * n);
        srand(1);
        for (int i = 0; i < n * p; i++) {
            double u = 0;
            for (int j = 0; j < 4; j++)
                u += rand() / (double)RAND_MAX - 0.5;
            X[i] = u;
        }
        for (int q = 0; q < 15; q++) {
            for (int j = 0; j < p; j++) {
                double m = (rand() / (double)RAND_MAX - 0.5) * 10.0 / (q + 1);
                for (int i = 0; i < n; i++)
                    X[i * p + j] += m * ((i * (q + 3)) % 7 - 3);
            }
        }
        cblas_dsyrk(CblasColMajor, CblasUpper, CblasTrans, n, p, 1.0, X, p, 0.0, C, n);
        enum { R = 15, INNER = 20 };
        double ts[4][R];
        for (int r = 0; r < R; r++)
            for (int m = 0; m < 4; m++) {
                double t0 = now();
                for (int q = 0; q < INNER; q++) {
                    memcpy(A, C, sizeof(double) * n * n);
                    lapack_int mm;
                    if (m == 0)
                        LAPACKE_dsyevr(LAPACK_COL_MAJOR, 'V', 'I', 'U', n, A, n, 0, 0, n - k + 1, n,
                                       0, &mm, W, V, n, isuppz);
                    if (m == 1) {
                        LAPACKE_dsytrd(LAPACK_COL_MAJOR, 'U', n, A, n, d, e, tau);
                        lapack_logical tr = 1;
                        LAPACKE_dstemr(LAPACK_COL_MAJOR, 'V', 'I', n, d, e, 0, 0, n - k + 1, n, &mm,
                                       W, V, n, k, isuppz, &tr);
                        LAPACKE_dormtr(LAPACK_COL_MAJOR, 'L', 'U', 'N', n, mm, A, n, tau, V, n);
                    }
                    if (m == 2)
                        LAPACKE_dsyevd(LAPACK_COL_MAJOR, 'V', 'U', n, A, n, W);
                    if (m == 3)
                        LAPACKE_dsyevr(LAPACK_COL_MAJOR, 'V', 'A', 'U', n, A, n, 0, 0, 0, 0, 0, &mm,
                                       W, V, n, isuppz);
                }
                ts[m][r] = (now() - t0) / INNER * 1e6;
            }
        printf("n=%3d", n);
        const char *nm[] = {"syevr_I", "trd+stemr_I", "syevd", "syevr_A"};
        for (int m = 0; m < 4; m++) {
            qsort(ts[m], R, 8, cmpd);
            printf("  %s %.0f us", nm[m], ts[m][R / 2]);
        }
        printf("\n");
        fflush(stdout);
        free(X);
        free(C);
        free(A);
        free(W);
        free(V);
        free(d);
        free(e);
        free(tau);
        free(isuppz);
    }
}
