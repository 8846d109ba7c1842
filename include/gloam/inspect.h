/*
 * gloam/inspect.h -- a first look at a science cube before any processing:
 * layout on disk, missing data, saturation, per-frame flux and background,
 * field rotation from the parallactic angles, and the observation keywords
 * found in the header. Everything `gloam inspect` reports is computed here;
 * the command only formats it.
 */
#ifndef GLOAM_INSPECT_H
#define GLOAM_INSPECT_H

#include "gloam/core.h"
#include "gloam/io.h"

#ifdef __cplusplus
extern "C" {
#endif

/* What the user sets (gl_inspect_params_init gives the defaults). */
typedef struct gl_inspect_params {
    double fwhm_px;        /* FWHM for "rotation in FWHM"; default 4 px (assumed) */
    int fwhm_given;        /* 0: fwhm_px is the default, reported as an assumption */
    double bg_inner_frac;  /* background region: pixels at a distance >= this
                              fraction of min(nx, ny)/2 from the star (nx/2, ny/2),
                              i.e. the outer annulus and the corners; default 0.75 */
    double outlier_nsigma; /* a frame is an outlier when its flux or background
                              lies further than this many robust sigmas (across
                              frames) from the median frame; default 5 */
    double nan_excess;     /* ... or when its NaN fraction exceeds the median
                              frame's by more than this; default 0.05 */
} gl_inspect_params;

/* Fills p with the defaults listed above. */
GL_API void gl_inspect_params_init(gl_inspect_params *p);

/* How saturated pixels were recognised. */
typedef enum gl_saturation_rule {
    GL_SAT_NONE = 0,   /* float data without a SATURATE keyword: not assessed */
    GL_SAT_KEYWORD,    /* value >= SATURATE (or SATLEVEL), in data units */
    GL_SAT_INTEGER_MAX /* integer data at the largest value BITPIX can hold,
                          after BSCALE/BZERO */
} gl_saturation_rule;

/* Statistics of one image plane (frame, channel). */
typedef struct gl_inspect_plane {
    long frame, chan; /* 0-based */
    long npix, nnan, nsat;
    double nan_fraction;
    double flux;      /* sum of the finite pixels (NaN for an empty plane) */
    double peak;      /* largest finite pixel */
    double bg_median; /* median of the background region (NaN if it is empty) */
    double bg_sigma;  /* 1.4826 * MAD there */
    long bg_count;    /* finite pixels in the background region */
    unsigned outlier; /* GL_INSPECT_OUT_* bits */
} gl_inspect_plane;

enum {
    GL_INSPECT_OUT_FLUX = 1,
    GL_INSPECT_OUT_BG_MEDIAN = 2,
    GL_INSPECT_OUT_BG_SIGMA = 4,
    GL_INSPECT_OUT_NAN = 8,
    GL_INSPECT_OUT_EMPTY = 16 /* no finite pixel at all: the plane holds no data */
};

/* min, median, max over planes (finite values only). */
typedef struct gl_inspect_range {
    double min, median, max;
} gl_inspect_range;

#define GL_INSPECT_MAX_SEPS 8

typedef struct gl_inspect_report {
    char path[1024];
    gl_fits_info fits;
    gl_obsinfo obs;
    long nx, ny, nchan, nframe, nplanes;
    gl_inspect_plane *planes; /* nplanes, frame-major ([frame][chan]) */

    double nan_fraction;  /* over the whole cube */
    long worst_nan_plane; /* index into planes */
    gl_saturation_rule sat_rule;
    double sat_level; /* NaN when sat_rule == GL_SAT_NONE */
    long nsat;        /* saturated pixels in the whole cube */
    double center_x, center_y, bg_inner_px;

    gl_inspect_range flux, bg_median, bg_sigma;
    long noutliers;
    long nempty; /* planes with no finite pixel (also flagged GL_INSPECT_OUT_EMPTY) */

    /* field rotation; has_angles == 0 when no angles were given */
    int has_angles;
    char angles_path[1024];
    long nangles;
    double angle_first_deg, angle_last_deg;
    double rotation_deg; /* total field rotation (range of the unwrapped angles) */
    double fwhm_px;
    int fwhm_assumed;
    int nseps;
    double sep_px[GL_INSPECT_MAX_SEPS];
    double rotation_fwhm[GL_INSPECT_MAX_SEPS]; /* arc length sep * rotation (rad), in FWHM */
    double sep_one_fwhm_px; /* separation where the arc is 1 FWHM (inf: no rotation) */
} gl_inspect_report;

/* Total field rotation of a sequence, degrees: the range (max - min) of the
 * angles after unwrapping jumps larger than 180 degrees between consecutive
 * frames (a target passing the pole side of zenith crosses +-180).
 * n >= 1; all angles finite. */
GL_API double gl_inspect_rotation_total(const double *angles_deg, long n);

/* Reads cube_path (first image HDU; 2-D, 3-D or 4-D) and, when angles_path is
 * not NULL, its parallactic angles, and computes the report.
 * Errors: those of gl_fits_read_cube and gl_angles_read (missing file, not
 * FITS, no image HDU, 1-D image, wrong angle count, bad angle line),
 * GL_ERR_USAGE for bad params, GL_ERR_NOMEM. A frame with no finite pixel
 * is not an error: it is reported (GL_INSPECT_OUT_EMPTY, nempty), as the
 * report is a description of the data, not a judgement of it. */
GL_API gl_status gl_inspect_report_new(const char *cube_path, const char *angles_path,
                                       const gl_inspect_params *p, gl_inspect_report **out);
GL_API void gl_inspect_report_free(gl_inspect_report *r);

/* The full report as one JSON object (cJSON, printed formatted), allocated
 * with malloc: the caller frees it with free(). NaN values are written as
 * null. Errors: GL_ERR_NOMEM. */
GL_API gl_status gl_inspect_report_json(const gl_inspect_report *r, char **json);

/* Name of a saturation rule, e.g. "SATURATE keyword". */
GL_API const char *gl_saturation_rule_name(gl_saturation_rule rule);

#ifdef __cplusplus
}
#endif
#endif
