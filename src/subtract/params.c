/*
 * params.c -- the subtraction parameters: defaults, checks that need no
 * data, and the name tables of methods and combinations (the names of
 * docs/names.md; the command line keeps the first release's spellings as
 * deprecated aliases).
 */
#include "subtract/internal.h"

#include <math.h>
#include <string.h>

void gl_subtract_params_init(gl_subtract_params *p)
{
    memset(p, 0, sizeof *p);
    p->method = GL_SUBTRACT_ANNULAR; /* docs/subtract.md: which method by default */
    p->fwhm = 0;
    p->nmodes = 1;
    p->modes[0] = 5;
    p->mask_radius = GL_SUBTRACT_MASK_AUTO;
    p->outer_radius = 0;
    p->ring_fwhm = 1.0;
    p->sectors = 1;
    p->gap_fwhm = 0.75;
    p->nearest = 0;
    p->basis_frames = GL_BASIS_ALL;
    p->median_fit = 0;
    p->centring = GL_CENTRE_FRAME;
    p->north_offset = 0;
    p->interp = GL_INTERP_FFT;
    p->combine = GL_COMBINE_MEDIAN;
    p->refs_use = GL_REFS_ONLY;
    p->refs_best = 0;
    p->sdi = GL_SDI_OFF;
    p->sdi_modes = 1;
    p->nwave = 0;
    p->wavelengths = NULL;
}

gl_status gl_subtract_params_check(const gl_subtract_params *p)
{
    if (!(p->fwhm >= GL_FWHM_MIN_PX) || !isfinite(p->fwhm))
        return gl_error_set(GL_ERR_USAGE,
                            "--fwhm must be at least 0.5 pixels (the PSF's FWHM in pixels; got %g)",
                            p->fwhm);
    if (p->method < GL_SUBTRACT_MEDIAN || p->method > GL_SUBTRACT_NONE)
        return gl_error_set(GL_ERR_USAGE, "unknown subtraction method %d", (int)p->method);
    if (p->nmodes < 1 || p->nmodes > GL_SUBTRACT_MAX_MODES)
        return gl_error_set(GL_ERR_USAGE, "--modes: between 1 and %d counts are accepted",
                            GL_SUBTRACT_MAX_MODES);
    for (int i = 0; i < p->nmodes; i++)
        if (p->modes[i] < 1)
            return gl_error_set(GL_ERR_USAGE, "--modes: %ld is not a positive mode count",
                                p->modes[i]);
    if (!(p->mask_radius >= 0 || p->mask_radius == GL_SUBTRACT_MASK_AUTO) ||
        !(p->outer_radius >= 0))
        return gl_error_set(GL_ERR_USAGE, "--mask-radius and --outer-radius must be >= 0");
    if (p->basis_frames < GL_BASIS_ALL || p->basis_frames > GL_BASIS_BEYOND_GAP)
        return gl_error_set(GL_ERR_USAGE, "unknown --basis-frames choice %d", (int)p->basis_frames);
    if (!(p->ring_fwhm > 0))
        return gl_error_set(GL_ERR_USAGE, "--ring must be a positive width in FWHM (got %g)",
                            p->ring_fwhm);
    if (p->sectors < 1 || p->sectors > 360)
        return gl_error_set(GL_ERR_USAGE, "--arcs must be between 1 and 360 (got %d)", p->sectors);
    if (!(p->gap_fwhm >= 0))
        return gl_error_set(GL_ERR_USAGE, "--gap must be >= 0 FWHM (got %g)", p->gap_fwhm);
    if (p->nearest < 0 || p->refs_best < 0)
        return gl_error_set(GL_ERR_USAGE, "--keep-closest and --refs-best must be >= 0");
    if (!isfinite(p->north_offset))
        return gl_error_set(GL_ERR_USAGE, "--north-offset must be finite");
    if (p->sdi == GL_SDI_CHANNELS && p->sdi_modes < 1)
        return gl_error_set(GL_ERR_USAGE, "--spectral-modes must be >= 1");
    return GL_OK;
}

static const char *const method_names[] = {"median-frame", "klip-frame", "klip-rings",
                                           "derotate-only"};
static const char *const combine_names[] = {"median", "mean", "weighted"};

/* The first release's names, still found (products of that release carry
 * them in GLSMETH); the command line notes them as deprecated. */
static const char *const old_method_names[] = {"median", "pca", "annular", "none"};

int gl_subtract_method_from_name(const char *name)
{
    for (int i = 0; i < 4; i++)
        if (name && (strcmp(name, method_names[i]) == 0 || strcmp(name, old_method_names[i]) == 0))
            return i;
    return -1;
}

const char *gl_subtract_method_name(gl_subtract_method m)
{
    return (m >= 0 && m <= 3) ? method_names[m] : "?";
}

int gl_combine_from_name(const char *name)
{
    for (int i = 0; i < 3; i++)
        if (name && strcmp(name, combine_names[i]) == 0)
            return i;
    return -1;
}

const char *gl_combine_name(gl_combine c)
{
    return (c >= 0 && c <= 2) ? combine_names[c] : "?";
}
