/*
 * region.c -- the pixels a subtraction works on: annuli about the star (the
 * convention centre (nx/2, ny/2)), optionally cut into azimuthal sectors, and
 * the reference library of each target frame for annular KLIP.
 *
 * The library rule is the usual protection against self-subtraction in ADI
 * (Marois et al. 2006, ApJ 641, 556, sec. 3; Lafreniere et al. 2007, ApJ 660,
 * 770): a frame may serve as a reference for a target only when the field
 * rotated between them by at least `gap` at the annulus' radius, measured as
 * the arc length r |dtheta|.
 *
 * The default inner radius of klip-rings follows from the same rule: the
 * smallest radius at which the first ring gives every frame as many
 * references as the largest mode count (else at least one).
 */
#include "subtract/internal.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

gl_status sub_region_make(long nx, long ny, double r_in, double r_out, int nsect, int isect,
                          sub_region *r)
{
    memset(r, 0, sizeof *r);
    r->r_in = r_in;
    r->r_out = r_out;
    r->r_mid = 0.5 * (r_in + r_out);
    double cx = (double)(nx / 2), cy = (double)(ny / 2);
    long n = 0;
    for (int pass = 0; pass < 2; pass++) {
        n = 0;
        for (long y = 0; y < ny; y++)
            for (long x = 0; x < nx; x++) {
                double dx = (double)x - cx, dy = (double)y - cy;
                double rr = sqrt(dx * dx + dy * dy);
                if (rr < r_in || rr >= r_out)
                    continue;
                if (nsect > 1) {
                    double az = atan2(dy, dx) * (180.0 / M_PI);
                    if (az < 0)
                        az += 360.0;
                    int s = (int)(az / (360.0 / nsect));
                    if (s >= nsect)
                        s = nsect - 1;
                    if (s != isect)
                        continue;
                }
                if (pass == 1)
                    r->pix[n] = y * nx + x;
                n++;
            }
        if (pass == 0) {
            if (n == 0)
                break;
            r->pix = gl_malloc(sizeof(long) * (size_t)n);
            if (!r->pix)
                return gl_error_nomem("region pixel list");
        }
    }
    r->npix = n;
    return GL_OK;
}

void sub_region_free(sub_region *r)
{
    if (!r)
        return;
    gl_free(r->pix);
    r->pix = NULL;
    r->npix = 0;
}

/* |a - b| in degrees as a field rotation: angles that cross +-180 (a star
 * transiting north of the zenith) are a few degrees apart, not ~360. */
static double rotation_between(double a, double b)
{
    double d = fmod(fabs(a - b), 360.0);
    return d > 180.0 ? 360.0 - d : d;
}

long gl_subtract_library_select(const double *angles, const unsigned char *usable, long n,
                                long target, double radius_px, double gap_px, long nearest,
                                long *idx)
{
    long m = 0;
    for (long j = 0; j < n; j++) {
        if (j == target || (usable && !usable[j]))
            continue;
        double arc = radius_px * rotation_between(angles[j], angles[target]) * (M_PI / 180.0);
        if (arc >= gap_px)
            idx[m++] = j;
    }
    if (nearest > 0 && m > nearest) {
        /* insertion sort by angular distance, ties to the lower index; the
         * libraries are a few hundred frames at most */
        for (long i = 1; i < m; i++) {
            long v = idx[i];
            double dv = rotation_between(angles[v], angles[target]);
            long k = i - 1;
            while (k >= 0) {
                double dk = rotation_between(angles[idx[k]], angles[target]);
                if (dk < dv || (dk == dv && idx[k] < v))
                    break;
                idx[k + 1] = idx[k];
                k--;
            }
            idx[k + 1] = v;
        }
        m = nearest;
        /* back to index order, so the library's rows keep the frame order */
        for (long i = 1; i < m; i++) {
            long v = idx[i], k = i - 1;
            while (k >= 0 && idx[k] > v) {
                idx[k + 1] = idx[k];
                k--;
            }
            idx[k + 1] = v;
        }
    }
    return m;
}

/* Rotation (radians) to the m-th farthest usable frame from t; 0 when t has
 * fewer than m usable companions in the sequence. */
static double mth_farthest(const double *angles, const unsigned char *usable, long n, long t,
                           long m, double *buf)
{
    long k = 0;
    for (long j = 0; j < n; j++)
        if (j != t && (!usable || usable[j]))
            buf[k++] = rotation_between(angles[j], angles[t]) * (M_PI / 180.0);
    if (k < m || m < 1)
        return 0.0;
    /* partial selection sort, descending: m is a few tens at most */
    for (long i = 0; i < m; i++) {
        long b = i;
        for (long j = i + 1; j < k; j++)
            if (buf[j] > buf[b])
                b = j;
        double v = buf[i];
        buf[i] = buf[b];
        buf[b] = v;
    }
    return buf[m - 1];
}

double sub_inner_radius(const gl_subtract_params *p, const double *angles,
                        const unsigned char *usable, long n, long nref, double r_out, long *rule)
{
    long dummy;
    if (!rule)
        rule = &dummy;
    *rule = 0;
    if (p->mask_radius >= 0)
        return p->mask_radius;
    if (p->method != GL_SUBTRACT_ANNULAR || (nref > 0 && p->refs_use == GL_REFS_ONLY) ||
        !(p->gap_fwhm > 0))
        return 0.0;
    /* the smallest count: its plane is whole from the inner radius out, the
     * larger counts use what the libraries hold there (capped, reported) */
    long kmin = p->modes[0];
    for (int i = 1; i < p->nmodes; i++)
        kmin = GL_SUB_MIN(kmin, p->modes[i]);
    if (p->nearest > 0)
        kmin = GL_SUB_MIN(kmin, p->nearest);
    kmin -= nref; /* GL_REFS_WITH_SCIENCE: the reference frames are always there */
    if (kmin < 1)
        return 0.0;
    double gap = p->gap_fwhm * p->fwhm, half = 0.5 * p->ring_fwhm * p->fwhm;
    double *buf = gl_malloc(sizeof(double) * (size_t)(n > 0 ? n : 1));
    if (!buf)
        return 0.0; /* no memory: no mask; the run itself reports the shortage */
    double r_in = 0.0;
    /* enough references for the smallest count, else at least one each */
    long tries[2] = {kmin, 1};
    for (int a = 0; a < 2; a++) {
        double dmin = INFINITY;
        for (long t = 0; t < n; t++)
            if (!usable || usable[t])
                dmin = GL_SUB_MIN(dmin, mth_farthest(angles, usable, n, t, tries[a], buf));
        /* the first ring's mid radius r_in + half must give r_mid dmin >=
         * gap; a hair more keeps the comparison clear of rounding */
        double r = dmin > 0 && isfinite(dmin) ? gap / dmin * (1 + 1e-9) - half : INFINITY;
        if (r + 2 * half <= r_out) { /* the whole first ring inside the field */
            r_in = GL_SUB_MAX(r, 0.0);
            *rule = tries[a];
            break;
        }
    }
    gl_free(buf);
    return r_in;
}

double gl_subtract_inner_radius(const gl_subtract_params *p, const double *angles, long nframe,
                                long nref, long nx, long ny)
{
    double cx = (double)(nx / 2), cy = (double)(ny / 2);
    double rmax = GL_SUB_MIN(GL_SUB_MIN(cx, cy), GL_SUB_MIN((double)nx - cx, (double)ny - cy));
    double r_out = p->outer_radius > 0 ? GL_SUB_MIN(p->outer_radius, rmax) : rmax;
    return sub_inner_radius(p, angles, NULL, nframe, nref, r_out, NULL);
}
