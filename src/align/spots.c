/*
 * spots.c -- the star centre from four satellite spots (the faint copies of
 * the star that a grid on the deformable mirror or in the pupil puts at
 * known angles around a coronagraphic image). Candidates are local maxima of
 * the 3x3-smoothed image ranked by their contrast over a surrounding annulus;
 * the brightest set of four forming two diagonals of equal length that cross
 * at right angles and share their midpoint is taken. Each spot is fitted
 * with a 2-D Gaussian on a sloped background (profile.c); the centre is the least-squares
 * intersection of the diagonals (the point minimising the summed squared
 * distances to the lines), with its uncertainty propagated from the spot
 * fits by numerical derivatives.
 * Assumptions: the spots are among the 60 most prominent compact peaks, at
 * least 5 px from the star; the four are arranged as a square around the
 * star (the usual waffle pattern) with similar brightness.
 */
#include "align/internal.h"
#include "core/internal.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#define MAX_CAND 60

typedef struct cand {
    double x, y, contrast;
} cand;

static int cmp_cand(const void *a, const void *b)
{
    double u = ((const cand *)a)->contrast, v = ((const cand *)b)->contrast;
    return (u < v) - (u > v);
}

static double box3(const float *img, long nx, long x, long y)
{
    double s = 0;
    int k = 0;
    for (int j = -1; j <= 1; j++)
        for (int i = -1; i <= 1; i++) {
            float v = img[(y + j) * nx + x + i];
            if (!isnan(v)) {
                s += v;
                k++;
            }
        }
    return k >= 5 ? s / k : NAN;
}

/* Median of the pixels at radius 4..7 around (x, y). */
static double annulus_median(const float *img, long nx, long ny, long x, long y)
{
    double v[256];
    long m = 0;
    for (long j = -7; j <= 7; j++)
        for (long i = -7; i <= 7; i++) {
            long r2 = i * i + j * j;
            if (r2 < 16 || r2 > 49 || x + i < 0 || x + i >= nx || y + j < 0 || y + j >= ny)
                continue;
            float a = img[(y + j) * nx + x + i];
            if (!isnan(a) && m < 256)
                v[m++] = a;
        }
    return gl_median_d(v, m);
}

gl_status gl_align_lines_intersect(int n, const double *x1, const double *y1, const double *x2,
                                   const double *y2, double *cx, double *cy)
{
    double a11 = 0, a12 = 0, a22 = 0, b1 = 0, b2 = 0;
    for (int i = 0; i < n; i++) {
        double dx = x2[i] - x1[i], dy = y2[i] - y1[i], l = hypot(dx, dy);
        if (!(l > 0))
            return gl_error_set(GL_ERR_NUMERIC, "line %d has coincident end points", i);
        dx /= l;
        dy /= l;
        /* projector onto the normal of the line: I - d d^T */
        double p11 = 1 - dx * dx, p12 = -dx * dy, p22 = 1 - dy * dy;
        a11 += p11;
        a12 += p12;
        a22 += p22;
        b1 += p11 * x1[i] + p12 * y1[i];
        b2 += p12 * x1[i] + p22 * y1[i];
    }
    double det = a11 * a22 - a12 * a12;
    if (!(fabs(det) > 1e-9 * (a11 + a22) * (a11 + a22)))
        return gl_error_set(GL_ERR_NUMERIC, "the spot diagonals are parallel");
    *cx = (a22 * b1 - a12 * b2) / det;
    *cy = (a11 * b2 - a12 * b1) / det;
    return GL_OK;
}

/* Centre of s (diagonals 0-2 and 1-3) and its propagated uncertainty. */
static gl_status spots_centre(gl_spots *s)
{
    double x1[2] = {s->x[0], s->x[1]}, y1[2] = {s->y[0], s->y[1]};
    double x2[2] = {s->x[2], s->x[3]}, y2[2] = {s->y[2], s->y[3]};
    gl_status st = gl_align_lines_intersect(2, x1, y1, x2, y2, &s->cx, &s->cy);
    if (st)
        return st;
    double vx = 0, vy = 0, h = 1e-3;
    for (int k = 0; k < 8; k++) {
        double px[4], py[4];
        memcpy(px, s->x, sizeof px);
        memcpy(py, s->y, sizeof py);
        double sig = k < 4 ? s->err_x[k] : s->err_y[k - 4];
        if (k < 4)
            px[k] += h;
        else
            py[k - 4] += h;
        double a1[2] = {px[0], px[1]}, b1[2] = {py[0], py[1]};
        double a2[2] = {px[2], px[3]}, b2[2] = {py[2], py[3]}, cx, cy;
        if (gl_align_lines_intersect(2, a1, b1, a2, b2, &cx, &cy))
            continue;
        vx += pow((cx - s->cx) / h * sig, 2);
        vy += pow((cy - s->cy) / h * sig, 2);
    }
    s->err_cx = sqrt(vx);
    s->err_cy = sqrt(vy);
    return GL_OK;
}

/* Gaussian fit of one spot near (x, y). */
static gl_status fit_spot(const float *img, long nx, long ny, double x, double y, gl_spots *s,
                          int k)
{
    gl_profile_fit fit;
    int half = (int)GL_MIN(GL_MAX(ceil(1.5 * s->fwhm), 3), 9);
    gl_status st =
        gl_fit_profile_plane(img, nx, ny, x, y, half, s->fwhm, GL_PROFILE_GAUSSIAN, 1, &fit);
    if (st)
        return st;
    if (hypot(fit.x - x, fit.y - y) > fmax(3, s->fwhm))
        return gl_error_set(GL_ERR_NUMERIC, "spot %d fit wandered off (%.1f, %.1f)", k + 1, x, y);
    s->x[k] = fit.x;
    s->y[k] = fit.y;
    s->err_x[k] = fit.err_x;
    s->err_y[k] = fit.err_y;
    return GL_OK;
}

gl_status gl_align_spots_find(const float *img, long nx, long ny, double radius, gl_spots *out)
{
    cand c[MAX_CAND + 1];
    int nc = 0;
    memset(out, 0, sizeof *out);
    double noise = gl_image_noise(img, nx, ny) / 3.0;
    if (!(noise > 0))
        noise = 1e-30;
    for (long y = 3; y < ny - 3; y++)
        for (long x = 3; x < nx - 3; x++) {
            double v = box3(img, nx, x, y);
            if (!isfinite(v))
                continue;
            int is_max = 1;
            for (int j = -2; j <= 2 && is_max; j++)
                for (int i = -2; i <= 2 && is_max; i++) {
                    if (!i && !j)
                        continue;
                    double u = box3(img, nx, x + i, y + j);
                    /* ties: only the first in scan order counts */
                    if (u > v || (u == v && (j < 0 || (j == 0 && i < 0))))
                        is_max = 0;
                }
            if (!is_max)
                continue;
            double contrast = v - annulus_median(img, nx, ny, x, y);
            if (!(contrast > 5 * noise))
                continue;
            cand cd = {(double)x, (double)y, contrast};
            if (nc < MAX_CAND) {
                c[nc++] = cd;
                qsort(c, (size_t)nc, sizeof *c, cmp_cand);
            } else if (contrast > c[MAX_CAND - 1].contrast) {
                c[MAX_CAND - 1] = cd;
                qsort(c, (size_t)nc, sizeof *c, cmp_cand);
            }
        }
    double best = -1;
    int bi[4] = {0};
    for (int a = 0; a < nc; a++)
        for (int b = a + 1; b < nc; b++) {
            double mx1 = 0.5 * (c[a].x + c[b].x), my1 = 0.5 * (c[a].y + c[b].y);
            double l1 = hypot(c[b].x - c[a].x, c[b].y - c[a].y);
            if (l1 < 10 || (radius > 0 && fabs(0.5 * l1 - radius) > 0.25 * radius))
                continue;
            for (int d = a + 1; d < nc; d++) {
                if (d == b)
                    continue;
                for (int e = d + 1; e < nc; e++) {
                    if (e == b)
                        continue;
                    double mx2 = 0.5 * (c[d].x + c[e].x), my2 = 0.5 * (c[d].y + c[e].y);
                    double l2 = hypot(c[e].x - c[d].x, c[e].y - c[d].y);
                    if (hypot(mx1 - mx2, my1 - my2) > 2 || fabs(l1 - l2) > 0.1 * 0.5 * (l1 + l2))
                        continue;
                    double cosang = ((c[b].x - c[a].x) * (c[e].x - c[d].x) +
                                     (c[b].y - c[a].y) * (c[e].y - c[d].y)) /
                                    (l1 * l2);
                    if (fabs(cosang) > sin(10 * M_PI / 180))
                        continue;
                    double lo = fmin(fmin(c[a].contrast, c[b].contrast),
                                     fmin(c[d].contrast, c[e].contrast));
                    double hi = fmax(fmax(c[a].contrast, c[b].contrast),
                                     fmax(c[d].contrast, c[e].contrast));
                    if (hi > 5 * lo || lo <= best)
                        continue;
                    best = lo;
                    bi[0] = a;
                    bi[1] = d;
                    bi[2] = b;
                    bi[3] = e;
                }
            }
        }
    if (best < 0)
        return gl_error_set(GL_ERR_INPUT,
                            "no four satellite spots found (%d compact peaks, none "
                            "forming two equal perpendicular diagonals)",
                            nc);
    /* spot width from the half-maximum area of the faintest spot over its
     * surroundings */
    out->fwhm = 3;
    {
        int k = 0;
        for (int j = 1; j < 4; j++)
            if (c[bi[j]].contrast < c[bi[k]].contrast)
                k = j;
        long px = lround(c[bi[k]].x), py = lround(c[bi[k]].y);
        double f =
            gl_image_fwhm_estimate(img, nx, ny, px, py, annulus_median(img, nx, ny, px, py), 4);
        if (f >= 1.5)
            out->fwhm = fmin(f, 6);
    }
    for (int k = 0; k < 4; k++) {
        gl_status st = fit_spot(img, nx, ny, c[bi[k]].x, c[bi[k]].y, out, k);
        if (st) {
            char where[96];
            snprintf(where, sizeof where, "satellite spot %d at (%.0f, %.0f) could not be fitted",
                     k + 1, c[bi[k]].x, c[bi[k]].y);
            return gl_align_error_wrap(GL_ERR_INPUT, where);
        }
    }
    return spots_centre(out) ? gl_align_error_wrap(GL_ERR_INPUT, "satellite spots") : GL_OK;
}

gl_status gl_align_spots_refit(const float *img, long nx, long ny, const gl_spots *guess,
                               double search, gl_spots *out)
{
    memset(out, 0, sizeof *out);
    out->fwhm = guess->fwhm > 0 ? guess->fwhm : 3;
    long r = (long)ceil(search);
    for (int k = 0; k < 4; k++) {
        long gx = lround(guess->x[k]), gy = lround(guess->y[k]), bx = -1, by = -1;
        double bv = -INFINITY;
        for (long y = GL_MAX(gy - r, 1); y <= GL_MIN(gy + r, ny - 2); y++)
            for (long x = GL_MAX(gx - r, 1); x <= GL_MIN(gx + r, nx - 2); x++) {
                if ((x - gx) * (x - gx) + (y - gy) * (y - gy) > r * r)
                    continue;
                double v = box3(img, nx, x, y);
                if (v > bv) {
                    bv = v;
                    bx = x;
                    by = y;
                }
            }
        if (bx < 0)
            return gl_error_set(GL_ERR_NUMERIC, "satellite spot %d not found near (%.1f, %.1f)",
                                k + 1, guess->x[k], guess->y[k]);
        gl_status st = fit_spot(img, nx, ny, (double)bx, (double)by, out, k);
        if (st)
            return st;
    }
    return spots_centre(out);
}
