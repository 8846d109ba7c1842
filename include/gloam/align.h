/*
 * gloam/align.h -- frame preparation: finding the star in every frame and
 * moving it to the convention centre (nx/2, ny/2), plus the preparation a
 * real sequence needs around it (bad pixels, frame selection, crop, temporal
 * binning, parallactic angles from the headers).
 *
 * Centring methods, named by what they centre on (one interface, a table of
 * function pointers):
 *  - "core": least-squares fit of a profile (`profile`: a 2-D Gaussian or a
 *    Moffat (1969, A&A 3, 455) profile) plus a constant background to a stamp
 *    around an unsaturated star (GSL multifit_nlinear), with parameter
 *    uncertainties;
 *  - "reference": every frame registered to a reference frame (the median of
 *    registered frames) by cross-correlation refined by a matrix-multiply DFT
 *    (Guizar-Sicairos, Thurman & Fienup 2008, Opt. Lett. 33, 156), then one
 *    absolute centre for the reference (profile fit when the star is
 *    unsaturated, halo symmetry otherwise);
 *  - "spots": four satellite spots found and fitted, the centre being the
 *    least-squares intersection of the two spot diagonals;
 *  - "halo": the centre of point symmetry of a coronagraphic halo, from the
 *    cross-correlation of the frame with its 180-degree rotation.
 * Shifts are applied by the geometry module (gloam/geometry.h).
 *
 * Positions are 0-based pixel coordinates (x, y) of the input frame, pixel
 * centres on integers.
 */
#ifndef GLOAM_ALIGN_H
#define GLOAM_ALIGN_H

#include "gloam/core.h"
#include "gloam/io.h"
#include "gloam/geometry.h"

#ifdef __cplusplus
extern "C" {
#endif

/* ---- profile fits -------------------------------------------------------- */

typedef enum gl_profile_kind { GL_PROFILE_GAUSSIAN = 0, GL_PROFILE_MOFFAT = 1 } gl_profile_kind;

/* Result of a profile fit. Gaussian: A exp(-(dx^2/2 sx^2 + dy^2/2 sy^2)) + B,
 * axes along x and y. Moffat (1969): A (1 + r^2/alpha^2)^-beta + B, circular.
 * Every value has its 1-sigma uncertainty (covariance of the least-squares
 * solution scaled by the residual variance). */
typedef struct gl_profile_fit {
    gl_profile_kind kind;
    double x, y, amplitude, background;
    double sigma_x, sigma_y; /* Gaussian widths (NaN for Moffat) */
    double alpha, beta;      /* Moffat core width and power (NaN for Gaussian) */
    double fwhm; /* Gaussian: 2 sqrt(2 ln 2) sqrt(sx sy); Moffat: 2 alpha sqrt(2^(1/beta)-1) */
    double err_x, err_y, err_amplitude, err_background;
    double err_sigma_x, err_sigma_y, err_alpha, err_beta;
    double rms_residual; /* rms of the fit residuals */
    int npix;            /* pixels used (NaN pixels skipped) */
    int iterations;
} gl_profile_fit;

/* Fits a profile to the stamp of half-size `half` (a (2 half + 1)^2 box)
 * centred on the pixel nearest (x0, y0) of img (nx x ny), starting from
 * (x0, y0) and the width guess fwhm0 (pixels; <= 0: estimated from the
 * stamp). NaN pixels are left out.
 * Errors: GL_ERR_USAGE (stamp outside the image or half < 2),
 * GL_ERR_NUMERIC (too few valid pixels, no convergence, the fitted centre
 * leaves the stamp, or a width that is not positive). */
GL_API gl_status gl_align_fit_profile(const float *img, long nx, long ny, double x0, double y0,
                                      int half, double fwhm0, gl_profile_kind kind,
                                      gl_profile_fit *out);

/* ---- cross-correlation registration -------------------------------------- */

/* Plan for registering nx x ny images to one reference: FFTW plans and the
 * reference spectrum. Built once; gl_align_xcorr_shift is then safe to call
 * from several threads, each with its own work. */
typedef struct gl_xcorr_plan gl_xcorr_plan;
typedef struct gl_xcorr_work gl_xcorr_work;

/* upsample >= 1: the sub-pixel resolution is 1/upsample pixel. NaN pixels of
 * the reference count as 0. */
GL_API gl_status gl_xcorr_plan_new(const float *reference, long nx, long ny, int upsample,
                                   gl_xcorr_plan **out);
GL_API void gl_xcorr_plan_free(gl_xcorr_plan *p);
GL_API gl_status gl_xcorr_work_new(const gl_xcorr_plan *p, gl_xcorr_work **out);
GL_API void gl_xcorr_work_free(gl_xcorr_work *w);
/* Shift (dx, dy) that moves img onto the reference (img shifted by it
 * matches the reference), to 1/upsample pixel: the peak of the cross-
 * correlation, refined by an upsampled DFT on a 1.5 x 1.5 pixel neighbourhood
 * (Guizar-Sicairos et al. 2008). *error (may be NULL) is their normalised
 * root-mean-square registration error (0 for a perfect match). */
GL_API gl_status gl_align_xcorr_shift(const gl_xcorr_plan *p, gl_xcorr_work *w, const float *img,
                                      double *dx, double *dy, double *error);

/* Centre of point symmetry of img (nx x ny): the cross-correlation of the
 * image with its 180-degree rotation, refined to 1/upsample pixel. */
GL_API gl_status gl_align_symmetry_centre(const float *img, long nx, long ny, int upsample,
                                          double *x, double *y);

/* ---- satellite spots ----------------------------------------------------- */

/* Four satellite spots, in order around the centre: spot k and k + 2 are the
 * ends of one diagonal. */
typedef struct gl_spots {
    double x[4], y[4];
    double err_x[4], err_y[4];
    double cx, cy, err_cx, err_cy; /* least-squares intersection of the diagonals */
    double fwhm;                   /* spot FWHM used for the fits, px */
} gl_spots;

/* Looks for four spots in img: compact peaks (local maxima of the 3x3 mean,
 * 5 sigma above the median of an annulus of radius 4-7 px around them)
 * forming two diagonals of equal length (within 10 per cent) that cross at
 * right angles (within 10 degrees) and share their midpoint (within 2 px),
 * each spot at least 5 px from that midpoint, the four within a factor 5 in
 * brightness. radius > 0: the spots' distance from the star, px, known to
 * 25 per cent (0: any). Of the qualifying sets, the one whose faintest spot
 * is brightest wins. Spots are fitted with Gaussians.
 * Errors: GL_ERR_INPUT (no such set of four spots). */
GL_API gl_status gl_align_spots_find(const float *img, long nx, long ny, double radius,
                                     gl_spots *out);
/* Refits spots near the positions of `guess` (within `search` pixels) in img
 * and recomputes the centre. Errors: GL_ERR_NUMERIC (a spot not found). */
GL_API gl_status gl_align_spots_refit(const float *img, long nx, long ny, const gl_spots *guess,
                                      double search, gl_spots *out);
/* Least-squares intersection of n lines, line i through (x1[i], y1[i]) and
 * (x2[i], y2[i]): the point minimising the summed squared distances.
 * Errors: GL_ERR_NUMERIC (parallel lines). */
GL_API gl_status gl_align_lines_intersect(int n, const double *x1, const double *y1,
                                          const double *x2, const double *y2, double *cx,
                                          double *cy);

/* ---- parallactic angles -------------------------------------------------- */

/* Where per-frame times come from. */
typedef struct gl_frame_times {
    const double *mjd_start; /* nframe exposure starts (UTC MJD), e.g. from a
                                time table; NULL: header start + i * cadence */
    double cadence_s;        /* seconds between frame starts; <= 0: the header's
                                CADENCE keyword, else EXPTIME */
} gl_frame_times;

/* Parallactic angle (degrees) of every frame at mid-exposure. Needs in the
 * header: DATE-OBS or MJD-OBS (UTC start of the first frame), EXPTIME
 * (seconds, per frame), RA/DEC (ICRS degrees), site latitude/longitude
 * (height defaults to 0). The ICRS direction goes to observed hour angle and
 * declination through ERFA eraAtco13 (Earth rotation angle, precession-
 * nutation, aberration; no refraction; UT1 taken as UTC and polar motion as 0,
 * an error below 0.004 degree of hour angle), then eraHd2pa gives the angle.
 * ha_deg and dec_deg (may be NULL) receive the observed hour angle and
 * declination per frame.
 * Errors: GL_ERR_INPUT naming the missing keyword. */
GL_API gl_status gl_align_parang_from_header(const gl_header *h, long nframe,
                                             const gl_frame_times *times, double *angles,
                                             double *ha_deg, double *dec_deg);

/* Reads a per-frame time table from `path`: the first binary-table extension
 * with a column MJD (UTC exposure start, one row per frame). *mjd is NULL
 * when the file has no such table (not an error).
 * Errors: GL_ERR_IO, GL_ERR_INPUT (wrong number of rows, non-finite time). */
GL_API gl_status gl_align_frame_times_read(const char *path, long nframe, double **mjd);

/* ---- the whole step ------------------------------------------------------- */

typedef enum gl_centre_method {
    GL_CENTRE_AUTO = -1,
    GL_CENTRE_CORE = 0, /* profile fit of the star's core (gl_align_params.profile) */
    GL_CENTRE_REFERENCE,
    GL_CENTRE_SPOTS,
    GL_CENTRE_HALO,
    GL_CENTRE_NMETHODS
} gl_centre_method;

/* Method by name ("auto", "core", "reference", "spots", "halo"); -2 for an
 * unknown name. */
GL_API int gl_centre_method_from_name(const char *name);
GL_API const char *gl_centre_method_name(gl_centre_method m);

typedef struct gl_align_params {
    /* set by the user */
    gl_centre_method method; /* GL_CENTRE_AUTO: chosen from the data (logged) */
    gl_interp interp;        /* shift interpolator (default FFT) */
    gl_profile_kind profile; /* profile of the "core" method (Gaussian) */
    double precision;        /* sub-pixel precision of registration and symmetry, px
                                (0.01); the DFT upsampling factor is 1 / precision */
    int stamp_half;          /* profile-fit stamp half-size, px (0: from the FWHM) */
    double fwhm;             /* star FWHM guess, px (0: estimated) */
    double spot_search;      /* px around the median-frame spot positions (5) */
    double spot_radius;      /* expected spot distance from the star, px (0: any) */
    double badpix_sigma;     /* > 0: find and replace bad pixels at this threshold */
    double reject_sigma;     /* > 0: reject frames whose flux or correlation with
                                the median frame is an outlier by this many sigma */
    long crop;               /* > 0: output size crop x crop around the star */
    long bin;                /* > 1: average this many consecutive kept frames */
} gl_align_params;

/* Defaults: auto method, Gaussian core profile, FFT shifts, precision
 * 0.01 px, no bad-pixel correction, no frame selection, no crop, no
 * binning. */
GL_API void gl_align_params_init(gl_align_params *p);

/* Bit codes of the bad-pixel map. */
enum {
    GL_BADPIX_HOT = 1,      /* above its neighbours in the median frame */
    GL_BADPIX_COLD = 2,     /* below its neighbours in the median frame */
    GL_BADPIX_NAN = 4,      /* NaN in at least one frame */
    GL_BADPIX_TRANSIENT = 8 /* an outlier in time in at least one frame */
};

/* Why a frame is not in the output. */
typedef enum gl_frame_status {
    GL_FRAME_KEPT = 0,
    GL_FRAME_NO_CENTRE = 1,   /* the centring failed on this frame */
    GL_FRAME_FLUX = 2,        /* flux outlier */
    GL_FRAME_CORRELATION = 3, /* low correlation with the median frame */
    GL_FRAME_JUMP = 4         /* centre far from all the others: a wrong feature */
} gl_frame_status;

/* Everything the step produced. */
typedef struct gl_align_result {
    gl_cube *aligned;           /* kept (and binned, cropped) frames, star at (nx/2, ny/2) */
    gl_centre_method method;    /* the method used (after any fallback) */
    char method_note[256];      /* methods tried before it and why they were left, or "" */
    long nframe;                /* input frames */
    double *x, *y;              /* star in each input frame (NaN when not found) */
    double *err_x, *err_y;      /* 1-sigma uncertainties */
    double *quality;            /* method-specific: fit rms / registration error */
    double *flux, *correlation; /* frame flux and correlation with the median (aligned) */
    int *status;                /* gl_frame_status per input frame */
    long nkept;                 /* frames kept (before binning) */
    long nout;                  /* output frames */
    double *angles_out;         /* nout angles (NULL when no angles were given) */
    float *badpix_map;          /* nx x ny bit map (NULL unless bad pixels were sought) */
    long nbad_static, nbad_transient;
    double abs_err_x, abs_err_y; /* the part of err_x, err_y common to every frame (the error
                                    of the absolute centre found by comparison), px */
} gl_align_result;

/* Frees a result and everything it owns; NULL is a no-op. */
GL_API void gl_align_result_free(gl_align_result *r);

/* Runs the step on cube, which serves as the working copy: its pixels are
 * overwritten (bad pixels replaced, frames shifted); the product is
 * (*out)->aligned. angles (nframe values, may be NULL) are carried to the
 * kept frames and averaged over bins. On failure *out is NULL. Per-frame
 * measurements do not depend on the number of OpenMP threads.
 * Errors: GL_ERR_USAGE (bad parameter, crop larger than the frame),
 * GL_ERR_INPUT (no star signal; spots not found; every frame rejected; the
 * crop region holds no data; the method centred fewer than half of the
 * frames), GL_ERR_NUMERIC, GL_ERR_NOMEM. Messages name `name` (the input
 * file).
 * Most frames lost: a method that centres the star in fewer than half of the
 * frames (counting frames whose centre jumps away from the others) has not
 * found the star. With GL_CENTRE_AUTO the next method of the automatic order
 * is tried (logged with the reason, recorded in method_note); with a method
 * asked for, or when every method has failed, the run stops with
 * GL_ERR_INPUT rather than return a product without most of the data. */
GL_API gl_status gl_align_run(gl_cube *cube, const double *angles, const char *name,
                              const gl_align_params *p, gl_align_result **out);

/* Writes the star-position table as CSV: frame,x,y,x_err,y_err,method,
 * quality,flux,correlation,kept,reason[,angle]. angles may be NULL. */
GL_API gl_status gl_align_table_write_csv(const char *path, const gl_align_result *r,
                                          const double *angles);

/* Writes a bad-pixel map (the result's badpix_map, nx x ny) as a FITS image
 * whose HISTORY explains the bits: 1 hot, 2 cold, 4 NaN, 8 transient.
 * Errors: GL_ERR_IO naming path, GL_ERR_NOMEM. */
GL_API gl_status gl_align_badpix_map_write(const char *path, const float *map, long nx, long ny,
                                           const gl_provenance *prov);

#ifdef __cplusplus
}
#endif
#endif
