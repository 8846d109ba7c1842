/*
 * badpix.c -- bad pixels found by sigma clipping in space and in time and
 * replaced from their neighbours (common practice; robust sigma = 1.4826 x
 * median absolute deviation, Hampel 1974).
 *  - static (hot, cold): in the median frame, a pixel further than k sigma
 *    from the median of its 24 neighbours in a 5x5 box, sigma being the
 *    robust spread of those neighbours (which protects the star's core and
 *    steep halo) but never below the frame's pixel noise;
 *  - transient (cosmic rays, flashes): in one frame, a pixel above its own
 *    time series by k sigma AND above its 5x5 neighbours by k sigma; both
 *    tests are needed so that a star that jitters is not taken for a flash;
 *  - NaN pixels.
 * Each flagged pixel is replaced by the median of the unflagged finite
 * pixels of its 5x5 box in the same frame (at least 8 of them); otherwise it
 * is left as it was (NaN stays NaN: a region without data stays a mask).
 */
#include "align/internal.h"
#include "core/internal.h"

#include <math.h>
#include <string.h>

/* Median and robust sigma of the finite 5x5 neighbours of (x, y), skipping
 * flagged ones (flags may be NULL). Returns their number. */
static int neighbours(const float *img, const unsigned char *flags, long nx, long ny, long x,
                      long y, double *med, double *sig)
{
    double v[24], s[24];
    int m = 0;
    for (long j = -2; j <= 2; j++)
        for (long i = -2; i <= 2; i++) {
            long xx = x + i, yy = y + j;
            if ((!i && !j) || xx < 0 || yy < 0 || xx >= nx || yy >= ny)
                continue;
            size_t k = (size_t)yy * (size_t)nx + (size_t)xx;
            if (isnan(img[k]) || (flags && flags[k]))
                continue;
            v[m++] = img[k];
        }
    if (m == 0)
        return 0;
    gl_stats_robust(v, (size_t)(m), s, med, sig);
    return m;
}

gl_status gl_badpix_fix(gl_cube *cube, double k, float *map, long *nstatic, long *ntransient)
{
    long nx = cube->nx, ny = cube->ny, nf = cube->nframe;
    size_t npix = gl_cube_plane_size(cube);
    gl_status st = GL_OK;
    float *planes = NULL, *med = NULL;
    unsigned char *flags = NULL;
    double *tmed = NULL, *tsig = NULL;
    memset(map, 0, npix * sizeof *map);
    *nstatic = *ntransient = 0;
    planes = gl_malloc(npix * (size_t)nf * sizeof *planes);
    med = gl_malloc(npix * sizeof *med);
    flags = gl_malloc(npix * (size_t)nf);
    tmed = gl_malloc(npix * sizeof *tmed);
    tsig = gl_malloc(npix * sizeof *tsig);
    if (!planes || !med || !flags || !tmed || !tsig) {
        st = gl_error_nomem("bad-pixel search");
        goto cleanup;
    }
    for (long ch = 0; ch < cube->nchan; ch++) {
        for (long f = 0; f < nf; f++)
            memcpy(planes + (size_t)f * npix, gl_cube_plane(cube, ch, f), npix * sizeof *planes);
        if ((st = gl_median_frame(planes, nx, ny, NULL, nf, med)))
            goto cleanup;
        double noise = gl_image_noise(med, nx, ny);
        if (!(noise > 0))
            noise = 0;
        /* static: hot and cold pixels of the median frame */
        unsigned char *stat = flags; /* frame 0's flags hold the static map for now */
        memset(flags, 0, npix * (size_t)nf);
#pragma omp parallel for schedule(static)
        for (long y = 0; y < ny; y++)
            for (long x = 0; x < nx; x++) {
                size_t i = (size_t)y * (size_t)nx + (size_t)x;
                double m, s;
                if (isnan(med[i]) || neighbours(med, NULL, nx, ny, x, y, &m, &s) < 8)
                    continue;
                s = fmax(s, noise);
                if (!(s > 0))
                    continue;
                if (med[i] - m > k * s)
                    stat[i] = GL_BADPIX_HOT;
                else if (m - med[i] > k * s)
                    stat[i] = GL_BADPIX_COLD;
            }
        for (size_t i = 0; i < npix; i++) {
            map[i] = (float)((int)map[i] | stat[i]);
            for (long f = 1; f < nf; f++)
                flags[(size_t)f * npix + i] = stat[i];
        }
        /* temporal statistics of every pixel (static bad ones included: they
         * are replaced anyway) */
#pragma omp parallel
        {
            double *buf = gl_malloc((size_t)nf * 2 * sizeof *buf);
#pragma omp for schedule(static)
            for (long i = 0; i < (long)npix; i++) {
                tmed[i] = tsig[i] = NAN;
                if (!buf)
                    continue;
                for (long f = 0; f < nf; f++)
                    buf[f] = planes[(size_t)f * npix + (size_t)i];
                gl_stats_robust(buf, (size_t)(nf), buf + nf, &tmed[i], &tsig[i]);
            }
            gl_free(buf);
        }
        /* transient outliers and NaN, frame by frame */
#pragma omp parallel for schedule(static)
        for (long f = 0; f < nf; f++) {
            const float *img = planes + (size_t)f * npix;
            unsigned char *fl = flags + (size_t)f * npix;
            double fnoise = gl_image_noise(img, nx, ny);
            if (!(fnoise > 0))
                fnoise = 0;
            for (long y = 0; y < ny; y++)
                for (long x = 0; x < nx; x++) {
                    size_t i = (size_t)y * (size_t)nx + (size_t)x;
                    if (isnan(img[i])) {
                        fl[i] |= GL_BADPIX_NAN;
                        continue;
                    }
                    if (fl[i] || nf < 5 || !(img[i] - tmed[i] > k * fmax(tsig[i], fnoise)))
                        continue;
                    double m, s;
                    if (neighbours(img, NULL, nx, ny, x, y, &m, &s) >= 8 &&
                        img[i] - m > k * fmax(s, fnoise))
                        fl[i] |= GL_BADPIX_TRANSIENT;
                }
        }
        for (long f = 0; f < nf; f++)
            for (size_t i = 0; i < npix; i++) {
                unsigned char b = flags[(size_t)f * npix + i];
                if (b & (GL_BADPIX_NAN | GL_BADPIX_TRANSIENT)) {
                    map[i] = (float)((int)map[i] | (b & (GL_BADPIX_NAN | GL_BADPIX_TRANSIENT)));
                    if (b & GL_BADPIX_TRANSIENT)
                        (*ntransient)++;
                }
            }
            /* replacement, reading from the untouched copy */
#pragma omp parallel for schedule(static)
        for (long f = 0; f < nf; f++) {
            const float *img = planes + (size_t)f * npix;
            const unsigned char *fl = flags + (size_t)f * npix;
            float *out = gl_cube_plane(cube, ch, f);
            for (long y = 0; y < ny; y++)
                for (long x = 0; x < nx; x++) {
                    size_t i = (size_t)y * (size_t)nx + (size_t)x;
                    double m, s;
                    if (fl[i] && neighbours(img, fl, nx, ny, x, y, &m, &s) >= 8)
                        out[i] = (float)m;
                }
        }
    }
    for (size_t i = 0; i < npix; i++)
        if ((int)map[i] & (GL_BADPIX_HOT | GL_BADPIX_COLD))
            (*nstatic)++;

cleanup:
    gl_free(planes);
    gl_free(med);
    gl_free(flags);
    gl_free(tmed);
    gl_free(tsig);
    return st;
}

gl_status gl_align_badpix_map_write(const char *path, const float *map, long nx, long ny,
                                    const gl_provenance *prov)
{
    gl_cube *c = NULL;
    gl_status st = gl_cube_new(nx, ny, 1, 1, &c);
    if (st)
        return st;
    memcpy(c->data, map, (size_t)nx * (size_t)ny * sizeof *map);
    gl_header_set_str(c->header, "BUNIT", "", "bit codes");
    gl_header_add_history(c->header,
                          "gloam bad-pixel map: bit 1 hot, 2 cold (both in the "
                          "median frame), 4 NaN in some frame, 8 transient in some frame");
    st = gl_fits_write_cube(path, c, prov);
    gl_cube_free(c);
    return st;
}
