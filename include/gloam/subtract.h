/*
 * gloam/subtract.h -- starlight subtraction: removes the star's speckle halo
 * from a pupil-tracking sequence, derotates the residuals to north-up and
 * combines them.
 *
 * Methods (one table of function pointers behind gl_subtract_run; the names
 * are the ones the command line and the product header use):
 *  - median-frame: classical ADI (Marois et al. 2006, ApJ 641, 556): every
 *    frame minus the median frame, the median optionally scaled ring by ring
 *    by least squares;
 *  - klip-frame: full-frame KLIP/PCA (Soummer, Pueyo & Larkin 2012, ApJL 755,
 *    L28). By default one Karhunen-Loeve basis from all usable frames,
 *    the target frame included (full-frame PCA as in Amara & Quanz 2012,
 *    MNRAS 427, 948), every mode count of the list in one pass; with
 *    basis_frames each frame gets a basis of its own, built without it
 *    (all-but-target) or without the frames that rotated by less than the
 *    gap at the region's mid radius (beyond-gap);
 *  - klip-rings: KLIP ring by ring (optionally in azimuthal arcs), where each
 *    frame's reference library holds only frames that rotated by at least
 *    `gap` FWHM at the ring's mid radius (the distance r |dtheta| a source
 *    there moves), optionally only the closest N of them in angle. Mode
 *    counts are capped at what each library holds; a frame with no
 *    reference in a ring is left out (NaN) there. By default the first ring
 *    starts where every frame has enough references (gl_subtract_inner_radius).
 *  - derotate-only: no subtraction, derotation and combination only.
 * Reference-star differential imaging (RDI): a reference cube builds the
 * basis alone or together with the science frames. Spectral differential
 * imaging for 4-D cubes (the spectral step, then the angular one: ASDI):
 * channels rescaled by wavelength, KLIP across channels, scaled back and
 * averaged before the angular step.
 *
 * Output: a cube of nx x ny x nmodes (one north-up plane per mode count, in
 * the order given; one plane for the median method). Frame i is derotated
 * counter-clockwise by -(theta_i + north_offset) degrees (conventions.md).
 * NaN marks pixels with no data (inside the mask, outside the region).
 */
#ifndef GLOAM_SUBTRACT_H
#define GLOAM_SUBTRACT_H

#include "gloam/core.h"
#include "gloam/geometry.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef enum gl_subtract_method {
    GL_SUBTRACT_MEDIAN = 0,
    GL_SUBTRACT_PCA = 1,
    GL_SUBTRACT_ANNULAR = 2,
    GL_SUBTRACT_NONE = 3 /* derotate and combine only (after SDI, or a check) */
} gl_subtract_method;

typedef enum gl_combine {
    GL_COMBINE_MEDIAN = 0,
    GL_COMBINE_MEAN = 1,
    GL_COMBINE_WEIGHTED = 2 /* mean weighted by 1 / residual variance per frame and ring */
} gl_combine;

/* The mean removed from the data matrix before the KL basis is built
 * (command line: --remove-mean each-frame | each-pixel). */
typedef enum gl_centring {
    GL_CENTRE_FRAME =
        0, /* each-frame: each frame minus its own mean in the region (Soummer 2012) */
    GL_CENTRE_TEMPORAL = 1 /* each-pixel: each pixel minus its mean over the basis frames */
} gl_centring;

/* Which frames build the basis of klip-frame (command line: --basis-frames). */
typedef enum gl_basis_frames {
    GL_BASIS_ALL = 0,            /* one basis from every frame, the target included */
    GL_BASIS_ALL_BUT_TARGET = 1, /* each frame's basis from the other frames */
    GL_BASIS_BEYOND_GAP = 2      /* each frame's basis from the frames past the gap */
} gl_basis_frames;

/* mask_radius value asking for the inner radius to be chosen from the data. */
#define GL_SUBTRACT_MASK_AUTO (-1.0)

/* What builds the basis when a reference cube is given. */
typedef enum gl_refs_use {
    GL_REFS_ONLY = 0,        /* RDI: the reference frames alone */
    GL_REFS_WITH_SCIENCE = 1 /* reference frames plus the (qualifying) science frames */
} gl_refs_use;

typedef enum gl_sdi_mode {
    GL_SDI_OFF = 0,     /* 4-D input: channels averaged before the angular step */
    GL_SDI_CHANNELS = 1 /* per frame, KLIP across rescaled channels, then the angular step */
} gl_sdi_mode;

#define GL_SUBTRACT_MAX_MODES 64

typedef struct gl_subtract_params {
    /* ---- set by the user (gl_subtract_params_init gives the defaults) ---- */
    gl_subtract_method method;         /* default klip-frame (GL_SUBTRACT_PCA) */
    double fwhm;                       /* PSF FWHM, pixels; must be > 0 (no default: 0) */
    int nmodes;                        /* number of KL mode counts (default 1) */
    long modes[GL_SUBTRACT_MAX_MODES]; /* the counts, in output order (default 5) */
    double mask_radius;  /* px; pixels closer to the star are NaN. Default GL_SUBTRACT_MASK_AUTO:
                            klip-rings starts where every frame has enough references
                            (gl_subtract_inner_radius), the other methods at 0 */
    double outer_radius; /* px; 0: the largest circle inside the frame */
    double ring_fwhm;    /* annulus width in FWHM (annular; median fit) (default 1) */
    int sectors;         /* azimuthal arcs per ring (klip-rings) (default 1) */
    double gap_fwhm;     /* smallest rotation between a frame and its references (default 0.75) */
    long nearest;        /* keep only the N qualifying frames closest in angle; 0: all */
    gl_basis_frames basis_frames; /* klip-frame (default GL_BASIS_ALL) */
    int median_fit;               /* median: scale the median frame annulus by annulus */
    gl_centring centring;         /* default GL_CENTRE_FRAME */
    double north_offset;          /* degrees (default 0) */
    gl_interp interp;             /* derotation interpolator (default GL_INTERP_FFT) */
    gl_combine combine;           /* default median */
    gl_refs_use refs_use;         /* when a reference cube is given (default refs only) */
    long refs_best;  /* keep the N reference frames best correlated with the science; 0: all */
    gl_sdi_mode sdi; /* default off */
    long sdi_modes;  /* KL modes of the spectral step (default 1) */
    int nwave;       /* number of wavelengths given (0: none) */
    const double *wavelengths; /* one per channel, any unit (SDI), not owned */
    const char *angles_name;   /* the angle list's file, named in messages (NULL: "the angles") */
    const char *cube_name;     /* the science cube's file, named in messages (NULL: "the science
                                  cube") */
    long frame_offset;         /* index in that file of the cube's first frame (the cube a part
                                  of the sequence, as vet's halves): added to the frames named */
    int keep_residuals;        /* also return the derotated residual cube */
    int keep_raw_residuals;    /* also return the residual cube before derotation */
} gl_subtract_params;

/* Fills p with the defaults listed above. */
GL_API void gl_subtract_params_init(gl_subtract_params *p);

/* What gl_subtract_run returns besides the image. Residual cubes are
 * (x, y, mode, frame) when several mode counts were asked for, else
 * (x, y, frame); NULL unless asked for in the params. */
typedef struct gl_subtract_result {
    gl_cube *image;           /* nx x ny x nplanes, north-up */
    gl_cube *residuals;       /* derotated residuals */
    gl_cube *raw_residuals;   /* residuals in the raw frame orientation */
    long nframes_used;        /* usable science frames */
    long nrefs_used;          /* reference frames used (RDI) */
    double inner_radius;      /* px: the inner radius used (chosen from the data when asked) */
    long rings_capped;        /* klip-rings: rings where a library held fewer modes than asked */
    long fewest_modes;        /* the fewest modes any frame of any ring really used */
    long frames_without_refs; /* (ring, frame) pairs left NaN: no reference at all */
} gl_subtract_result;

/* Runs the subtraction.
 * Given: cube (3-D, or 4-D with channels), angles (one per frame, degrees),
 *        refs (NULL, or a reference-star cube of the same nx, ny, nchan),
 *        params.
 * Returned: *out filled (free with gl_subtract_result_free). The image
 *        header carries the input's cards, every parameter (GLSUB* keys) and
 *        a north-up WCS when the input had a simple celestial one.
 *        A frame with no finite pixel in the region is left out, with one
 *        warning (gl_log) naming params->cube_name and the frames, and
 *        GLSNDROP plus a HISTORY card in the header. The channels of a 4-D
 *        cube without the spectral step are averaged (NaN ignored), said in
 *        one log line and in GLSSDI/GLSNCHAN.
 * Function return value: GL_OK; GL_ERR_USAGE (a parameter out of range: FWHM
 *        not positive, modes larger than the usable frames of a klip-frame
 *        basis that holds the target, zero field rotation with an ADI method,
 *        missing wavelengths for SDI); GL_ERR_INPUT (reference cube of another
 *        size, fewer than half of the frames with data in the region);
 *        GL_ERR_NOMEM; GL_ERR_NUMERIC (eigensolver failure). On failure *out
 *        holds nothing. */
GL_API gl_status gl_subtract_run(const gl_cube *cube, const double *angles, const gl_cube *refs,
                                 const gl_subtract_params *params, gl_subtract_result *out);
/* Peak memory, bytes, that gl_subtract_run is expected to need for a cube of
 * this shape with these params (the cube, the residual buffer, the region
 * matrix or the store of every mode count, the covariance, residual cubes
 * when asked for): what decides between it and gl_subtract_run_streamed. */
GL_API double gl_subtract_memory_estimate(long nx, long ny, long nchan, long nframe,
                                          const gl_subtract_params *p);

/* Runs the subtraction of the 3-D cube in the FITS file `path` without
 * holding it in memory, within about memory_limit bytes (src/subtract/
 * stream.c): the file is read several times, in blocks of frames and in
 * chunks of rows of every frame. Methods pca and median, any combination,
 * no reference cube, no residual cubes. The median combination keeps the
 * derotated residuals in a temporary file in $TMPDIR (or /tmp), nplanes x
 * nframes x frame size floats, removed at once from the folder; its medians
 * are exact. Results equal gl_subtract_run's (bit for bit when blocks of 128
 * frames fit, else to float rounding of the projections).
 * Errors: those of gl_subtract_run and of reading the file; GL_ERR_USAGE for
 * an unsupported method or option, or a limit too small (the message gives
 * the least that works); GL_ERR_IO when the temporary file fails. */
GL_API gl_status gl_subtract_run_streamed(const char *path, const double *angles,
                                          const gl_subtract_params *p, double memory_limit,
                                          gl_subtract_result *out);

/* Frees what a result holds (not the struct itself); NULL members are fine. */
GL_API void gl_subtract_result_free(gl_subtract_result *r);

/* The inner radius the subtraction will use, px: p->mask_radius when it is
 * >= 0; for GL_SUBTRACT_MASK_AUTO with klip-rings (and science frames in the
 * libraries) the smallest radius at which the first ring, --ring FWHM wide
 * and whole inside the outer radius, gives every frame at least as many
 * references past the gap as the smallest mode count (capped by `nearest`,
 * less the reference-star frames with GL_REFS_WITH_SCIENCE); when no ring
 * inside the frame does, the smallest at which every frame has at least
 * one; when none does either, 0. Else 0.
 *
 * angles: nframe, degrees; nref: reference-star frames (0 without RDI);
 * nx, ny: the frame size (the outer radius). */
GL_API double gl_subtract_inner_radius(const gl_subtract_params *p, const double *angles,
                                       long nframe, long nref, long nx, long ny);

/* Checks params alone (not against data): GL_OK or GL_ERR_USAGE with a
 * message naming the parameter. */
GL_API gl_status gl_subtract_params_check(const gl_subtract_params *p);

/* Name tables: return -1 for an unknown name. gl_subtract_method_from_name
 * also knows the first release's names (median, pca, annular, none), which
 * older products carry in GLSMETH; gl_subtract_method_name gives the new ones. */
GL_API int gl_subtract_method_from_name(const char *name);
GL_API const char *gl_subtract_method_name(gl_subtract_method m);
GL_API int gl_combine_from_name(const char *name);
GL_API const char *gl_combine_name(gl_combine c);

/* The reference library of one target frame for klip-rings: the indices
 * j != target with radius_px * |angles[j] - angles[target]| (radians) >=
 * gap_px, skipping frames with usable[j] == 0 (usable may be NULL). When
 * nearest > 0 only the `nearest` qualifying frames closest in angle are kept
 * (ties: lower index first). Written to idx (room for n entries) in
 * increasing index order. Returns the number of frames written. */
GL_API long gl_subtract_library_select(const double *angles, const unsigned char *usable, long n,
                                       long target, double radius_px, double gap_px, long nearest,
                                       long *idx);

#ifdef __cplusplus
}
#endif
#endif
