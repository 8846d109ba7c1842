/*
 * klip.c -- the linear algebra of KLIP/PCA (Soummer, Pueyo & Larkin 2012,
 * ApJL 755, L28): centring of the frames x pixels matrix, its covariance, the
 * Karhunen-Loeve basis and the per-target projection weights used when every
 * target has a library of its own.
 *
 * Workload: a few hundred frames of tens of thousands of pixels. The
 * covariance X X^T comes from ssyrk/sgemm tiles; the basis from the
 * eigendecomposition of X X^T (dsyevr, only the leading pairs) when there are
 * fewer frames than pixels, else from an SVD of X (dgesdd). Every BLAS call
 * covers one tile of fixed size, and each tile is computed by one thread, so
 * results are bit-identical whatever the number of threads.
 */
#include "core/internal.h"
#include "subtract/internal.h"

#include <cblas.h>
#include <float.h>
#include <lapacke.h>
#include <math.h>
#include <omp.h>
#include <string.h>

#define TILE_M 128
#define TILE_N 2048
#define COV_TILE 128
#define COV_CHUNK 2048

int sub_max_threads(void)
{
    return omp_get_max_threads();
}

void sub_centre(float *X, long nrow, long ncol, gl_centring mode, const unsigned char *basis)
{
    if (mode == GL_CENTRE_FRAME) {
#pragma omp parallel for schedule(static)
        for (long i = 0; i < nrow; i++) {
            float *row = X + (size_t)i * (size_t)ncol;
            double s = 0;
            long n = 0;
            for (long j = 0; j < ncol; j++)
                if (!isnan(row[j])) {
                    s += row[j];
                    n++;
                }
            float m = n ? (float)(s / (double)n) : 0.0f;
            for (long j = 0; j < ncol; j++)
                row[j] = isnan(row[j]) ? 0.0f : row[j] - m;
        }
        return;
    }
#pragma omp parallel for schedule(static)
    for (long j = 0; j < ncol; j++) {
        double s = 0;
        long n = 0;
        for (long i = 0; i < nrow; i++) {
            float v = X[(size_t)i * (size_t)ncol + (size_t)j];
            if ((!basis || basis[i]) && !isnan(v)) {
                s += v;
                n++;
            }
        }
        float m = n ? (float)(s / (double)n) : 0.0f;
        for (long i = 0; i < nrow; i++) {
            float *v = &X[(size_t)i * (size_t)ncol + (size_t)j];
            *v = isnan(*v) ? 0.0f : *v - m;
        }
    }
}

size_t sub_covariance_work_size(void)
{
    return 2 * (size_t)COV_TILE * COV_CHUNK * (size_t)sub_max_threads();
}

void sub_covariance_chunk(const float *X, long ldx, long n, long w, int first, double *C,
                          double *work)
{
    /* tiles of equal height (a multiple of 8, at most COV_TILE: 104 for 400
     * frames, not 3 x 128 + 16), taken by the threads as they come free: each
     * tile is one BLAS call whichever thread runs it, so the result does not
     * depend on the thread count; the static split of 128-row tiles left one
     * of two threads idle a third of the time */
    long nb = (n + COV_TILE - 1) / COV_TILE, ts = ((n + nb - 1) / nb + 7) / 8 * 8;
    long ntiles = nb * (nb + 1) / 2;
    size_t per = 2 * (size_t)COV_TILE * COV_CHUNK;
    double beta = first ? 0.0 : 1.0;
#pragma omp parallel for schedule(dynamic, 1)
    for (long t = 0; t < ntiles; t++) {
        /* tile t -> (bi, bj) with bi <= bj, row by row */
        long bi = 0, rem = t;
        while (rem >= nb - bi) {
            rem -= nb - bi;
            bi++;
        }
        long bj = bi + rem;
        long i0 = bi * ts, j0 = bj * ts;
        long mi = GL_SUB_MIN(ts, n - i0), mj = GL_SUB_MIN(ts, n - j0);
        double *A = work + per * (size_t)omp_get_thread_num(),
               *B = A + (size_t)COV_TILE * COV_CHUNK;
        double *Cij = C + (size_t)i0 * (size_t)n + (size_t)j0;
        /* converted to double and accumulated in double: the eigenvectors of
         * trailing modes need more than float32 sums over tens of thousands
         * of pixels */
        for (long i = 0; i < mi; i++)
            for (long j = 0; j < w; j++)
                A[i * w + j] = X[(size_t)(i0 + i) * (size_t)ldx + (size_t)j];
        if (bi == bj) {
            cblas_dsyrk(CblasRowMajor, CblasUpper, CblasNoTrans, (int)mi, (int)w, 1.0, A, (int)w,
                        beta, Cij, (int)n);
            continue;
        }
        for (long i = 0; i < mj; i++)
            for (long j = 0; j < w; j++)
                B[i * w + j] = X[(size_t)(j0 + i) * (size_t)ldx + (size_t)j];
        cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasTrans, (int)mi, (int)mj, (int)w, 1.0, A,
                    (int)w, B, (int)w, beta, Cij, (int)n);
    }
}

void sub_covariance_mirror(double *C, long n)
{
    for (long i = 0; i < n; i++)
        for (long j = 0; j < i; j++)
            C[(size_t)i * (size_t)n + (size_t)j] = C[(size_t)j * (size_t)n + (size_t)i];
}

long sub_covariance_chunk_width(void)
{
    return COV_CHUNK;
}

gl_status sub_covariance(const float *X, long n, long ncol, double *C, double *work)
{
    int nth = sub_max_threads();
    size_t per = 2 * (size_t)COV_TILE * COV_CHUNK;
    double *buf = work ? work : gl_malloc(sizeof(double) * per * (size_t)nth);
    if (!buf)
        return gl_error_nomem("covariance workspace");
    /* columns in chunks of fixed width, each tile accumulated chunk after
     * chunk (the streamed path feeds the same chunks) */
    for (long c0 = 0; c0 < ncol; c0 += COV_CHUNK)
        sub_covariance_chunk(X + c0, ncol, n, GL_SUB_MIN(COV_CHUNK, ncol - c0), c0 == 0, C, buf);
    if (buf != work)
        gl_free(buf);
    sub_covariance_mirror(C, n);
    return GL_OK;
}

void sub_gemm(long m, long n, long k, float alpha, const float *A, long lda, const float *B,
              long ldb, int transB, float beta, float *C, long ldc)
{
    if (m <= 0 || n <= 0)
        return;
    long mb = (m + TILE_M - 1) / TILE_M, nbk = (n + TILE_N - 1) / TILE_N;
#pragma omp parallel for schedule(static)
    for (long t = 0; t < mb * nbk; t++) {
        long i0 = (t / nbk) * TILE_M, j0 = (t % nbk) * TILE_N;
        long mi = GL_SUB_MIN(TILE_M, m - i0), nj = GL_SUB_MIN(TILE_N, n - j0);
        const float *Bt = transB ? B + (size_t)j0 * (size_t)ldb : B + j0;
        if (k <= 0) {
            for (long i = 0; i < mi; i++)
                for (long j = 0; j < nj; j++)
                    C[(size_t)(i0 + i) * (size_t)ldc + (size_t)(j0 + j)] *= beta;
            continue;
        }
        cblas_sgemm(CblasRowMajor, CblasNoTrans, transB ? CblasTrans : CblasNoTrans, (int)mi,
                    (int)nj, (int)k, alpha, A + (size_t)i0 * (size_t)lda, (int)lda, Bt, (int)ldb,
                    beta, C + (size_t)i0 * (size_t)ldc + j0, (int)ldc);
    }
}

/* An eigenvalue counts as zero only when it is at the rounding level of the
 * double-precision covariance: lambda <= n * DBL_EPSILON * lambda_max, with n
 * the larger of the matrix's two sizes (frames, pixels). The covariance of
 * float32 data summed in double carries entry errors of order
 * ncol * eps * |C| at worst, and a symmetric eigensolver adds backward errors
 * of order nrow * eps * |C| (Golub & Van Loan, Matrix Computations, 4th ed.,
 * sec. 8.1.2); anything above that is signal that numpy's float64 SVD also
 * keeps (numpy.linalg.matrix_rank uses the same max(M, N) * eps rule on
 * singular values). The earlier cut at 1e-6 of lambda_max threw away real
 * modes of bright, clear (non-coronagraphic) sequences. */
static double eig_zero_level(double lmax, long nrow, long ncol)
{
    return (double)GL_SUB_MAX(nrow, ncol) * DBL_EPSILON * lmax;
}

/* Z (k x ncol, float) = Vs (k x nrow, double) X (nrow x ncol, float), summed
 * in double over column chunks of fixed width (one chunk per thread at a
 * time). The sum V_q^T X cancels the frames' common light down to
 * sqrt(lambda_q): in float32 the trailing modes of a bright sequence keep a
 * part of the leading one of order 1e-7 sqrt(lambda_1 / lambda_q), enough to
 * spoil their projections (measured: 8% rms on the K = 30 residual of a clear
 * sequence against numpy's float64 SVD). */
void sub_basis_rows_chunk(const double *Vs, long k, const float *X, long ldx, long nrow, long w,
                          float *Z, long ldz, double *work)
{
    double *Xd = work, *Zd = Xd + (size_t)nrow * COV_CHUNK;
    for (long i = 0; i < nrow; i++)
        for (long j = 0; j < w; j++)
            Xd[i * w + j] = X[(size_t)i * (size_t)ldx + (size_t)j];
    cblas_dgemm(CblasRowMajor, CblasNoTrans, CblasNoTrans, (int)k, (int)w, (int)nrow, 1.0, Vs,
                (int)nrow, Xd, (int)w, 0.0, Zd, (int)w);
    for (long q = 0; q < k; q++)
        for (long j = 0; j < w; j++)
            Z[(size_t)q * (size_t)ldz + (size_t)j] = (float)Zd[q * w + j];
}

size_t sub_basis_rows_work_size(long nrow, long k)
{
    return (size_t)COV_CHUNK * (size_t)(nrow + k);
}

/* Z (k x ncol, float) = Vs (k x nrow, double) X (nrow x ncol, float), summed
 * in double over column chunks of fixed width (one chunk per thread at a
 * time). The sum V_q^T X cancels the frames' common light down to
 * sqrt(lambda_q): in float32 the trailing modes of a bright sequence keep a
 * part of the leading one of order 1e-7 sqrt(lambda_1 / lambda_q), enough to
 * spoil their projections (measured: 8% rms on the K = 30 residual of a clear
 * sequence against numpy's float64 SVD). */
static gl_status basis_rows_double(const double *Vs, long k, const float *X, long nrow, long ncol,
                                   float *Z)
{
    int nth = sub_max_threads();
    size_t per = sub_basis_rows_work_size(nrow, k);
    double *buf = gl_malloc(sizeof(double) * per * (size_t)nth);
    if (!buf)
        return gl_error_nomem("KL basis workspace");
    long nchunk = (ncol + COV_CHUNK - 1) / COV_CHUNK;
#pragma omp parallel for schedule(static)
    for (long ch = 0; ch < nchunk; ch++) {
        long c0 = ch * COV_CHUNK, w = GL_SUB_MIN(COV_CHUNK, ncol - c0);
        sub_basis_rows_chunk(Vs, k, X + c0, ncol, nrow, w, Z + c0, ncol,
                             buf + per * (size_t)omp_get_thread_num());
    }
    gl_free(buf);
    return GL_OK;
}

gl_status sub_basis_from_cov(double *A, long nrow, long ncol, long kmax, sub_basis *b, double *Vs)
{
    gl_status st = GL_OK;
    double *V = gl_malloc(sizeof(double) * (size_t)nrow * (size_t)kmax);
    double *w = gl_malloc(sizeof(double) * (size_t)nrow);
    lapack_int *isuppz = gl_malloc(sizeof(lapack_int) * 2 * (size_t)nrow);
    if (!V || !w || !isuppz) {
        st = gl_error_nomem("KL basis");
        goto cleanup;
    }
    lapack_int m = 0;
    lapack_int info = LAPACKE_dsyevr(LAPACK_COL_MAJOR, 'V', 'I', 'U', (lapack_int)nrow, A,
                                     (lapack_int)nrow, 0.0, 0.0, (lapack_int)(nrow - kmax + 1),
                                     (lapack_int)nrow, 0.0, &m, w, V, (lapack_int)nrow, isuppz);
    if (info != 0 || m != kmax) {
        st = gl_error_set(GL_ERR_NUMERIC,
                          "KL basis: eigendecomposition of the %ld x %ld covariance failed "
                          "(LAPACK info %d)",
                          nrow, nrow, (int)info);
        goto cleanup;
    }
    /* eigenpairs come in ascending order: mode q is pair kmax - 1 - q */
    double lzero = eig_zero_level(w[kmax - 1], nrow, ncol);
    b->rank = 0;
    for (long q = 0; q < kmax; q++) {
        long src = kmax - 1 - q;
        double lam = w[src];
        b->eigval[q] = lam;
        double s = (lam > lzero && lam > 0) ? 1.0 / sqrt(lam) : 0.0;
        if (s > 0)
            b->rank++;
        for (long i = 0; i < nrow; i++)
            Vs[(size_t)q * (size_t)nrow + (size_t)i] =
                V[(size_t)src * (size_t)nrow + (size_t)i] * s;
    }
cleanup:
    gl_free(V);
    gl_free(w);
    gl_free(isuppz);
    return st;
}

static gl_status basis_from_eig(const float *X, long nrow, long ncol, long kmax, sub_basis *b)
{
    gl_status st = GL_OK;
    double *A = gl_malloc(sizeof(double) * (size_t)nrow * (size_t)nrow);
    double *Vs = gl_malloc(sizeof(double) * (size_t)kmax * (size_t)nrow);
    if (!A || !Vs) {
        st = gl_error_nomem("KL basis");
        goto cleanup;
    }
    st = sub_covariance(X, nrow, ncol, A, NULL);
    if (!st)
        st = sub_basis_from_cov(A, nrow, ncol, kmax, b, Vs);
    /* Z = Lambda^-1/2 V^T X (Soummer et al. 2012, eq. 5) */
    if (!st)
        st = basis_rows_double(Vs, kmax, X, nrow, ncol, b->Z);
cleanup:
    gl_free(A);
    gl_free(Vs);
    return st;
}

/* More frames than pixels: an SVD of X itself, in double precision (the
 * matrix is small in this case, at most a few thousand pixels), for the same
 * reason as basis_rows_double: a float32 SVD leaves trailing singular vectors
 * of a bright sequence with a part of the leading one of order
 * 1e-7 sigma_1 / sigma_q. */
static gl_status basis_from_svd(const float *X, long nrow, long ncol, long kmax, sub_basis *b)
{
    gl_status st = GL_OK;
    long mn = GL_SUB_MIN(nrow, ncol);
    double *A = gl_malloc(sizeof(double) * (size_t)nrow * (size_t)ncol);
    double *U = gl_malloc(sizeof(double) * (size_t)nrow * (size_t)mn);
    double *VT = gl_malloc(sizeof(double) * (size_t)mn * (size_t)ncol);
    double *s = gl_malloc(sizeof(double) * (size_t)mn);
    if (!A || !U || !VT || !s) {
        st = gl_error_nomem("KL basis (SVD)");
        goto cleanup;
    }
    for (size_t i = 0; i < (size_t)nrow * (size_t)ncol; i++)
        A[i] = X[i];
    lapack_int info = LAPACKE_dgesdd(LAPACK_ROW_MAJOR, 'S', (lapack_int)nrow, (lapack_int)ncol, A,
                                     (lapack_int)ncol, s, U, (lapack_int)mn, VT, (lapack_int)ncol);
    if (info != 0) {
        st = gl_error_set(GL_ERR_NUMERIC,
                          "KL basis: SVD of the %ld x %ld matrix failed (LAPACK info %d)", nrow,
                          ncol, (int)info);
        goto cleanup;
    }
    double lzero = eig_zero_level(s[0] * s[0], nrow, ncol);
    b->rank = 0;
    for (long q = 0; q < kmax; q++) {
        double lam = q < mn ? s[q] * s[q] : 0.0;
        b->eigval[q] = lam;
        int keep = q < mn && lam > lzero && lam > 0;
        if (keep)
            b->rank++;
        for (long j = 0; j < ncol; j++)
            b->Z[(size_t)q * (size_t)ncol + (size_t)j] =
                keep ? (float)VT[(size_t)q * (size_t)ncol + (size_t)j] : 0.0f;
    }
cleanup:
    gl_free(A);
    gl_free(U);
    gl_free(VT);
    gl_free(s);
    return st;
}

gl_status sub_basis_build(const float *X, long nrow, long ncol, long kmax, sub_basis *b)
{
    memset(b, 0, sizeof *b);
    if (kmax < 1 || kmax > nrow)
        return gl_error_set(GL_ERR_USAGE, "KL basis: %ld modes asked from %ld frames", kmax, nrow);
    b->kmax = kmax;
    b->ncol = ncol;
    b->Z = gl_malloc(sizeof(float) * (size_t)kmax * (size_t)ncol);
    b->eigval = gl_malloc(sizeof(double) * (size_t)kmax);
    if (!b->Z || !b->eigval) {
        sub_basis_free(b);
        return gl_error_nomem("KL basis");
    }
    gl_status st = nrow <= ncol ? basis_from_eig(X, nrow, ncol, kmax, b)
                                : basis_from_svd(X, nrow, ncol, kmax, b);
    if (st)
        sub_basis_free(b);
    return st;
}

void sub_basis_free(sub_basis *b)
{
    if (!b)
        return;
    gl_free(b->Z);
    gl_free(b->eigval);
    memset(b, 0, sizeof *b);
}

/* ---- per-target weights ------------------------------------------------ */

/* Per-target eigenpairs: Householder tridiagonalisation (dsytrd), the
 * leading pairs of the tridiagonal matrix by multiple relatively robust
 * representations (dstemr, range of indices) and the back-transformation
 * (dormtr). Measured on the 60-200-frame libraries of annular KLIP (10 of
 * n pairs; bench/README.md) this is 15-25 per cent faster than dsyevr with
 * an index range, which falls back to bisection and inverse iteration for a
 * subset, and 1.5-2x faster than dsyevd or dsyevr with all pairs. */
struct sub_eig_work {
    long maxlib, kmax;
    double *S, *V, *w, *work, *c, *a, *d, *e, *tau;
    lapack_int *iwork, *isuppz;
    lapack_int lwork, liwork;
};

gl_status sub_eig_work_new(long maxlib, long kmax, sub_eig_work **out)
{
    *out = NULL;
    if (maxlib < 1)
        maxlib = 1;
    if (kmax > maxlib)
        kmax = maxlib;
    sub_eig_work *w = gl_calloc(1, sizeof *w);
    if (!w)
        return gl_error_nomem("eigen workspace");
    w->maxlib = maxlib;
    w->kmax = kmax;
    /* dstemr needs lwork 18 n, liwork 10 n; dsytrd and dormtr n x block
     * (64 is above LAPACK's blocking for these) */
    w->lwork = (lapack_int)(GL_SUB_MAX(18, 64) * maxlib);
    w->liwork = (lapack_int)(10 * maxlib);
    w->S = gl_malloc(sizeof(double) * (size_t)maxlib * (size_t)maxlib);
    w->V = gl_malloc(sizeof(double) * (size_t)maxlib * (size_t)kmax);
    w->w = gl_malloc(sizeof(double) * (size_t)maxlib);
    w->work = gl_malloc(sizeof(double) * (size_t)w->lwork);
    w->c = gl_malloc(sizeof(double) * (size_t)maxlib);
    w->a = gl_malloc(sizeof(double) * (size_t)kmax);
    w->iwork = gl_malloc(sizeof(lapack_int) * (size_t)w->liwork);
    w->isuppz = gl_malloc(sizeof(lapack_int) * 2 * (size_t)maxlib);
    w->d = gl_malloc(sizeof(double) * (size_t)maxlib);
    w->e = gl_malloc(sizeof(double) * (size_t)maxlib);
    w->tau = gl_malloc(sizeof(double) * (size_t)maxlib);
    if (!w->S || !w->V || !w->w || !w->work || !w->c || !w->a || !w->iwork || !w->isuppz || !w->d ||
        !w->e || !w->tau) {
        sub_eig_work_free(w);
        return gl_error_nomem("eigen workspace");
    }
    *out = w;
    return GL_OK;
}

void sub_eig_work_free(sub_eig_work *w)
{
    if (!w)
        return;
    gl_free(w->S);
    gl_free(w->V);
    gl_free(w->w);
    gl_free(w->work);
    gl_free(w->c);
    gl_free(w->a);
    gl_free(w->iwork);
    gl_free(w->isuppz);
    gl_free(w->d);
    gl_free(w->e);
    gl_free(w->tau);
    gl_free(w);
}

gl_status sub_target_weights(const double *C, long nall, long ncol, const long *lib, long nlib,
                             long t, const long *kcounts, int nk, sub_eig_work *w, float *weights,
                             long *kused)
{
    memset(weights, 0, sizeof(float) * (size_t)nk * (size_t)nall);
    if (kused)
        *kused = 0;
    if (nlib < 1)
        return GL_OK;
    long kmax = kcounts[nk - 1];
    if (kmax > nlib)
        kmax = nlib;
    if (kmax > w->kmax || nlib > w->maxlib)
        return gl_error_set(GL_ERR_INTERNAL, "eigen workspace too small (%ld > %ld)", nlib,
                            w->maxlib);
    for (long i = 0; i < nlib; i++) {
        const double *Ci = C + (size_t)lib[i] * (size_t)nall;
        for (long j = 0; j < nlib; j++)
            w->S[(size_t)j * (size_t)nlib + (size_t)i] = Ci[lib[j]];
        w->c[i] = C[(size_t)lib[i] * (size_t)nall + (size_t)t];
    }
    lapack_int m = 0, n = (lapack_int)nlib;
    lapack_logical tryrac = 1;
    lapack_int info = LAPACKE_dsytrd_work(LAPACK_COL_MAJOR, 'U', n, w->S, n, w->d, w->e, w->tau,
                                          w->work, w->lwork);
    if (info == 0)
        info = LAPACKE_dstemr_work(LAPACK_COL_MAJOR, 'V', 'I', n, w->d, w->e, 0.0, 0.0,
                                   (lapack_int)(nlib - kmax + 1), n, &m, w->w, w->V, n,
                                   (lapack_int)kmax, w->isuppz, &tryrac, w->work, w->lwork,
                                   w->iwork, w->liwork);
    if (info == 0 && m == kmax)
        info = LAPACKE_dormtr_work(LAPACK_COL_MAJOR, 'L', 'U', 'N', n, m, w->S, n, w->tau, w->V, n,
                                   w->work, w->lwork);
    if (info != 0 || m != kmax)
        return gl_error_set(GL_ERR_NUMERIC,
                            "KL basis of a %ld-frame library: eigensolver failed (info %d)", nlib,
                            (int)info);
    double lzero = eig_zero_level(w->w[kmax - 1], nlib, ncol);
    long rank = 0;
    /* a_q = (v_q . c_t) / lambda_q: the projection of x_t onto KL mode q,
     * z_q = lambda_q^-1/2 sum_l v_ql x_l, written back on the library rows */
    for (long q = 0; q < kmax; q++) {
        long src = kmax - 1 - q;
        double lam = w->w[src];
        const double *v = w->V + (size_t)src * (size_t)nlib;
        double dot = 0;
        for (long i = 0; i < nlib; i++)
            dot += v[i] * w->c[i];
        int keep = lam > lzero && lam > 0;
        w->a[q] = keep ? dot / lam : 0.0;
        rank += keep;
    }
    if (kused)
        *kused = rank;
    long q0 = 0;
    for (int ik = 0; ik < nk; ik++) {
        float *wk = weights + (size_t)ik * (size_t)nall;
        if (ik > 0)
            memcpy(wk, wk - nall, sizeof(float) * (size_t)nall);
        long q1 = GL_SUB_MIN(kcounts[ik], kmax);
        for (long q = q0; q < q1; q++) {
            const double *v = w->V + (size_t)(kmax - 1 - q) * (size_t)nlib;
            for (long i = 0; i < nlib; i++)
                wk[lib[i]] += (float)(w->a[q] * v[i]);
        }
        q0 = GL_SUB_MAX(q0, q1);
    }
    return GL_OK;
}

/* ---- helpers ------------------------------------------------------------ */

float sub_nanmedian(float *buf, long n)
{
    long m = 0;
    for (long i = 0; i < n; i++)
        if (!isnan(buf[i]))
            buf[m++] = buf[i];
    return gl_stats_median_inplace_float(buf, m);
}

void sub_modes_sorted(const gl_subtract_params *p, long *sorted, int *order)
{
    int n = p->nmodes;
    int idx[GL_SUBTRACT_MAX_MODES];
    for (int i = 0; i < n; i++)
        idx[i] = i;
    /* insertion sort by count, stable */
    for (int i = 1; i < n; i++) {
        int v = idx[i], j = i - 1;
        while (j >= 0 && p->modes[idx[j]] > p->modes[v]) {
            idx[j + 1] = idx[j];
            j--;
        }
        idx[j + 1] = v;
    }
    for (int i = 0; i < n; i++) {
        sorted[i] = p->modes[idx[i]];
        order[idx[i]] = i;
    }
}
