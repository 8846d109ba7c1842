/*
 * subtract/internal.h -- what the subtraction methods share: the prepared
 * data (science frames as rows of plane pixels, references, angles), the
 * region pixel lists, the linear-algebra kernels (blocked so every output
 * element is computed by one fixed BLAS call, whatever the thread count) and
 * the method table.
 */
#ifndef GLOAM_SUBTRACT_INTERNAL_H
#define GLOAM_SUBTRACT_INTERNAL_H

#include "gloam/subtract.h"

#include <stddef.h>

#define GL_SUB_MIN(a, b) ((a) < (b) ? (a) : (b))
#define GL_SUB_MAX(a, b) ((a) > (b) ? (a) : (b))

/* Pixels of one region of the plane (an annulus, a sector of one, or the
 * whole area between the mask and the outer radius). */
typedef struct sub_region {
    long npix;
    long *pix;   /* plane indices y * nx + x, increasing */
    double r_in; /* inner and outer radius, px */
    double r_out;
    double r_mid;
} sub_region;

/* Lists the pixels with r_in <= r < r_out and, when nsect > 1, azimuth
 * (counter-clockwise from +x, [0, 360)) in sector isect of nsect.
 * r->pix is allocated; free with sub_region_free. An empty region is fine. */
gl_status sub_region_make(long nx, long ny, double r_in, double r_out, int nsect, int isect,
                          sub_region *r);
void sub_region_free(sub_region *r);

/* Called by a method once per mode count (in any order): resid holds
 * nframe x npix raw-orientation residuals (NaN outside the region and in
 * unusable frames) and may be changed by the sink. */
typedef gl_status (*sub_sink_fn)(void *sink, int mode_index, float *resid);

/* What the per-target KLIP (klip-rings, klip-frame with a basis per frame)
 * reports back, per ring: the radii, the fewest and most modes a frame
 * really used for the largest count asked (-1: no frame with references),
 * and the frames left NaN there for want of any reference. Arrays of nring,
 * allocated by the method, freed by sub_report_free. */
typedef struct sub_report {
    long nring;
    double *r_in, *r_out;
    long *kmin, *kmax, *noref;
    long kasked;
} sub_report;
void sub_report_free(sub_report *r);

/* The prepared input every method works from. */
typedef struct sub_ctx {
    const gl_subtract_params *p;
    long nx, ny, npix;           /* plane geometry */
    long nframe;                 /* science frames */
    long nchan;                  /* wavelength channels per input frame (1: a 3-D cube) */
    const float *sci;            /* nframe x npix (channels already combined) */
    const double *angles;        /* nframe, degrees */
    const unsigned char *usable; /* nframe: 1 when the frame holds data */
    long nusable;
    long nref;                     /* selected reference frames (0: no RDI) */
    const float *ref;              /* nref x npix */
    double r_in, r_out;            /* region radii, px */
    float *work;                   /* nframe x npix scratch handed to the sink */
    struct gl_subtract_memo *memo; /* kept between runs (memo.h), or NULL */
    sub_report *report;            /* filled by the per-target KLIP methods */
    sub_sink_fn sink;
    void *sink_data;
} sub_ctx;

typedef struct sub_method {
    const char *name;
    int uses_modes; /* the output has one plane per mode count */
    gl_status (*run)(const sub_ctx *ctx);
} sub_method;

extern const sub_method sub_method_median;
extern const sub_method sub_method_pca;
extern const sub_method sub_method_annular;
extern const sub_method sub_method_none;

/* KLIP with a library of its own for every target (method_annular.c):
 * rings `width` px wide from c->r_in to c->r_out, `nsect` arcs each; a
 * target's library holds the usable science frames that rotated by at least
 * gap_px at the ring's mid radius (gap_px 0: every other frame), the closest
 * `nearest` of them when > 0, plus the reference frames for RDI. Mode counts
 * are capped at the library (and its non-zero eigenvalues); a target with no
 * reference is NaN in that piece. Fills c->report and calls the sink. */
gl_status sub_klip_local(const sub_ctx *c, double width, int nsect, double gap_px, long nearest,
                         const char *label);
/* The reference library of target t at radius r (science frames past the
 * gap, then reference rows nframe..); returns its size. */
long sub_library(const sub_ctx *c, long t, double r, double gap_px, long nearest, long *lib);

/* gl_subtract_inner_radius with usable-frame flags (NULL: all usable) and the
 * outer radius in px (region.c); *rule (when not NULL) gets the number of
 * references every frame has from the radius chosen (the smallest mode count,
 * or 1 when no ring gives that), 0 when the radius is not chosen that way. */
double sub_inner_radius(const gl_subtract_params *p, const double *angles,
                        const unsigned char *usable, long n, long nref, double r_out, long *rule);

/* ---- linear algebra (klip.c) ------------------------------------------ */

/* Centres rows of X (nrow x ncol, NaN = no data) in place: per-frame mode
 * subtracts each row's mean over its finite pixels; temporal mode subtracts
 * each column's mean over the rows flagged in `basis` (NULL: all rows).
 * NaN become 0 afterwards, so they add nothing to covariances. */
void sub_centre(float *X, long nrow, long ncol, gl_centring mode, const unsigned char *basis);

/* C (n x n, full symmetric, double) = X X^T for X (n x ncol), in tiles of
 * fixed size computed in parallel, accumulated in double over column chunks
 * of fixed width (dsyrk on the diagonal, dgemm off it). work: NULL (then
 * allocated here) or sub_covariance_work_size() doubles, for callers that
 * repeat the call. GL_ERR_NOMEM. */
size_t sub_covariance_work_size(void);
gl_status sub_covariance(const float *X, long n, long ncol, double *C, double *work);
/* The pieces of sub_covariance, for data fed chunk by chunk (stream.c): the
 * upper tiles of C get X X^T of one column chunk X (n x w, row stride ldx;
 * w <= sub_covariance_chunk_width()), stored when first, else added; work
 * as above (not NULL). Fed the same chunks in the same order, the result is
 * bit-identical to sub_covariance's. Then mirror the upper triangle. */
void sub_covariance_chunk(const float *X, long ldx, long n, long w, int first, double *C,
                          double *work);
void sub_covariance_mirror(double *C, long n);
long sub_covariance_chunk_width(void);

/* C (m x n) = beta C + alpha A B with A (m x k), B (k x n), row-major, lda,
 * ldb, ldc row strides; transB transposes B (then B is n x k). Tiled over
 * fixed blocks of C and run in parallel; results do not depend on threads. */
void sub_gemm(long m, long n, long k, float alpha, const float *A, long lda, const float *B,
              long ldb, int transB, float beta, float *C, long ldc);

/* A KL basis of the rows of X: Z (kmax x ncol), orthonormal rows, in
 * decreasing eigenvalue order. Built once, reused for all mode counts. */
typedef struct sub_basis {
    long kmax, ncol;
    long rank; /* modes with a significant eigenvalue (<= kmax) */
    float *Z;
    double *eigval; /* kmax eigenvalues of X X^T (squared singular values) */
} sub_basis;

/* Builds the basis from X (nrow x ncol, centred, no NaN): eigendecomposition
 * of X X^T (LAPACKE_dsyevr, top kmax pairs) when nrow <= ncol, else an SVD of
 * X (LAPACKE_dgesdd, on a double copy). GL_ERR_USAGE when kmax > nrow; GL_ERR_NUMERIC when the
 * solver fails. */
gl_status sub_basis_build(const float *X, long nrow, long ncol, long kmax, sub_basis *b);
/* The steps of sub_basis_build for data fed chunk by chunk (stream.c). The
 * eigen step from the covariance A (nrow x nrow, full symmetric, of rows of
 * ncol pixels; destroyed): b->eigval (allocated by the caller) and b->rank
 * set, and Vs (kmax x nrow) = Lambda^-1/2 V^T. Then the modes of one column
 * chunk (w <= sub_covariance_chunk_width() columns): Z (k x w, row stride
 * ldz) = Vs X in double, X (nrow x w, row stride ldx), work of
 * sub_basis_rows_work_size() doubles; the same chunks give sub_basis_build's
 * modes bit for bit. */
gl_status sub_basis_from_cov(double *A, long nrow, long ncol, long kmax, sub_basis *b, double *Vs);
void sub_basis_rows_chunk(const double *Vs, long k, const float *X, long ldx, long nrow, long w,
                          float *Z, long ldz, double *work);
size_t sub_basis_rows_work_size(long nrow, long k);
void sub_basis_free(sub_basis *b);

/* Per-target KLIP weights (annular and spectral libraries). Given the full
 * covariance C (nall x nall) of the centred rows, a library (lib,
 * nlib rows), the target row t and ascending mode counts, writes for each
 * count k the nall weights w with projection(x_t) = sum_l w_l x_l onto the
 * first k KL modes of the library (Soummer et al. 2012 eqs. 4-8 written in
 * the library's row space). ncol is the number of pixels C was summed over
 * (it sets the level below which an eigenvalue is zero). *kused (may be
 * NULL) receives the modes really used: the largest count, capped at the
 * library size and at the modes with a non-zero eigenvalue. Workspace from
 * sub_eig_work_new. Returns
 * GL_ERR_NUMERIC when the eigensolver fails. */
typedef struct sub_eig_work sub_eig_work;
gl_status sub_eig_work_new(long maxlib, long kmax, sub_eig_work **out);
void sub_eig_work_free(sub_eig_work *w);
gl_status sub_target_weights(const double *C, long nall, long ncol, const long *lib, long nlib,
                             long t, const long *kcounts, int nk, sub_eig_work *w, float *weights,
                             long *kused);

/* ---- reference frames (refs.c) ------------------------------------------ */

/* Keeps the nbest (<= nref_all) reference frames best correlated with the
 * usable science frames of c (c->sci, usable, region set); *ref_out is
 * nbest x npix, allocated; score_out (may be NULL) receives their scores. */
gl_status sub_refs_select(const sub_ctx *c, const float *ref_all, long nref_all, long nbest,
                          float **ref_out, long *nref_out, double *score_out);

/* ---- spectral step (sdi.c) ----------------------------------------------- */

/* Warns, one line naming the cube, when the radial shift of a source
 * across the wavelengths is below 1 FWHM beyond r_in, with the separation
 * inside which it is (sdi.c). */
void sub_sdi_shift_check(const gl_subtract_params *p, long nchan, double r_in, double r_out);

/* For a 4-D cube: per frame, the channels rescaled to a common wavelength
 * (the longest), KLIP across channels with p->sdi_modes modes (each channel's
 * library: the other channels), scaled back and averaged; *out is nframe x
 * npix, allocated. */
gl_status sub_sdi_frames(const gl_cube *cube, const gl_subtract_params *p, double r_in,
                         double r_out, float **out);

/* ---- north-up WCS (wcs.c) ------------------------------------------------ */

/* Rewrites a simple celestial WCS in h (the input's) as north-up, east-left
 * with the star's sky position at the star pixel; notes in HISTORY when the
 * WCS is not simple. Never fails on a bad WCS (it is then dropped, noted). */
gl_status sub_wcs_north_up(gl_header *h, long nx, long ny);

/* ---- product header (subtract.c) ---------------------------------------- */

/* The frames without data in the region (c->usable 0): one warning naming
 * the cube (name, NULL: "the science cube") and the frames; GL_ERR_INPUT
 * when fewer than half of the frames hold data. */
gl_status sub_usable_check(const sub_ctx *c, const char *name);

/* Records every parameter of the run (GLS* keys, HISTORY) in h. */
gl_status sub_record_params(gl_header *h, const gl_subtract_params *p, const sub_ctx *c,
                            int nplanes, int uses_modes, const gl_subtract_result *res);

/* ---- helpers ---------------------------------------------------------- */

/* Median of n floats, ignoring NaN (reorders buf); NaN when none finite. */
float sub_nanmedian(float *buf, long n);
/* Sorted copy of the mode counts (ascending, duplicates kept) and the
 * position of each requested count in it. */
void sub_modes_sorted(const gl_subtract_params *p, long *sorted, int *order);
/* Largest thread count an OpenMP region may use here. */
int sub_max_threads(void);

#endif
