/*
 * quicklook.c -- a PNG to look at a detection run at a glance (cairo): the
 * S/N map in a colour scale of our own ("ember": plum below zero, near-black
 * at zero, teal through ochre to cream for positive t), missing data in flat
 * grey, candidates circled at one FWHM and numbered best first, a compass
 * (north and east from the WCS, or north-up east-left), a scale bar in arcsec
 * (or px without a scale), a vertical colour bar, and a title strip.
 */
#include "core/internal.h"
#include "detect/internal.h"

#include <cairo.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

typedef struct rgb {
    double r, g, b;
} rgb;

/* anchors of the colour scale: value in t units, colour */
typedef struct anchor {
    double t;
    rgb c;
} anchor;

static rgb ember(double t, double vmin, double vmax)
{
    const anchor a[] = {
        {vmin, {0.176, 0.118, 0.310}}, {0.0, {0.078, 0.094, 0.110}},
        {2.5, {0.122, 0.435, 0.416}},  {0.5 * (2.5 + vmax * 0.6), {0.851, 0.643, 0.255}},
        {vmax, {0.984, 0.953, 0.863}},
    };
    const int n = (int)(sizeof a / sizeof a[0]);
    if (t <= a[0].t)
        return a[0].c;
    for (int i = 1; i < n; i++)
        if (t <= a[i].t) {
            double f = (t - a[i - 1].t) / (a[i].t - a[i - 1].t);
            rgb p = a[i - 1].c, q = a[i].c;
            return (rgb){p.r + f * (q.r - p.r), p.g + f * (q.g - p.g), p.b + f * (q.b - p.b)};
        }
    return a[n - 1].c;
}

static double nice_length(double target, const double *steps, int n)
{
    double best = steps[0];
    for (int i = 0; i < n; i++)
        if (steps[i] <= target)
            best = steps[i];
    return best;
}

static void arrow(cairo_t *cr, double x0, double y0, double dx, double dy, double len,
                  const char *label)
{
    double x1 = x0 + dx * len, y1 = y0 + dy * len;
    cairo_move_to(cr, x0, y0);
    cairo_line_to(cr, x1, y1);
    cairo_stroke(cr);
    double a = atan2(dy, dx), h = 6;
    cairo_move_to(cr, x1, y1);
    cairo_line_to(cr, x1 - h * cos(a - 0.45), y1 - h * sin(a - 0.45));
    cairo_line_to(cr, x1 - h * cos(a + 0.45), y1 - h * sin(a + 0.45));
    cairo_close_path(cr);
    cairo_fill(cr);
    cairo_move_to(cr, x1 + dx * 9 - 4, y1 + dy * 9 + 4);
    cairo_show_text(cr, label);
}

gl_status gl_detect_quicklook_write(const char *path, const gl_detect_maps *maps,
                                    const gl_candidate *cand, long ncand,
                                    const gl_detect_params *par, const gl_detect_sky *sky,
                                    const char *title)
{
    gl_status st = GL_OK;
    const long nx = maps->nx, ny = maps->ny;
    const double zoom = fmax(1.0, 560.0 / (double)(nx > ny ? nx : ny));
    const double iw = zoom * (double)nx, ih = zoom * (double)ny;
    const double margin = 20, top = 56, barw = 16, right = 90, bottom = 24;
    const int W = (int)ceil(margin + iw + 24 + barw + right);
    const int H = (int)ceil(top + ih + bottom);

    double vmax = 10;
    for (size_t k = 0; k < (size_t)nx * (size_t)ny; k++)
        if (isfinite(maps->snr[k]) && maps->snr[k] > vmax)
            vmax = maps->snr[k];
    vmax = ceil(vmax);
    const double vmin = -5;

    cairo_surface_t *img = cairo_image_surface_create(CAIRO_FORMAT_RGB24, (int)nx, (int)ny);
    cairo_surface_t *surf = cairo_image_surface_create(CAIRO_FORMAT_RGB24, W, H);
    cairo_t *cr = NULL;
    if (cairo_surface_status(img) || cairo_surface_status(surf)) {
        st = gl_error_set(GL_ERR_NOMEM, "%s: cannot make the drawing surface", path);
        goto cleanup;
    }
    /* the map, flipped so that +y is up */
    cairo_surface_flush(img);
    unsigned char *px = cairo_image_surface_get_data(img);
    int stride = cairo_image_surface_get_stride(img);
    for (long y = 0; y < ny; y++) {
        uint32_t *row = (uint32_t *)(px + (size_t)(ny - 1 - y) * (size_t)stride);
        for (long x = 0; x < nx; x++) {
            float t = maps->snr[(size_t)y * (size_t)nx + (size_t)x];
            rgb c = isfinite(t) ? ember(t, vmin, vmax) : (rgb){0.54, 0.54, 0.52};
            row[x] = ((uint32_t)(c.r * 255 + 0.5) << 16) | ((uint32_t)(c.g * 255 + 0.5) << 8) |
                     (uint32_t)(c.b * 255 + 0.5);
        }
    }
    cairo_surface_mark_dirty(img);

    cr = cairo_create(surf);
    cairo_set_source_rgb(cr, 0.957, 0.945, 0.918);
    cairo_paint(cr);
    cairo_select_font_face(cr, "sans-serif", CAIRO_FONT_SLANT_NORMAL, CAIRO_FONT_WEIGHT_NORMAL);

    /* title strip */
    cairo_set_source_rgb(cr, 0.17, 0.17, 0.17);
    cairo_set_font_size(cr, 14);
    cairo_move_to(cr, margin, 22);
    cairo_show_text(cr, title && title[0] ? title : "S/N map");
    char line[256];
    snprintf(line, sizeof line,
             "%ld candidate%s above %.3g sigma (FPF %.3g per test aperture); FWHM %.3g px", ncand,
             ncand == 1 ? "" : "s", par->threshold_sigma,
             gl_detect_fpf_from_sigma(par->threshold_sigma), par->fwhm);
    cairo_set_font_size(cr, 11);
    cairo_move_to(cr, margin, 42);
    cairo_show_text(cr, line);

    /* image */
    cairo_save(cr);
    cairo_translate(cr, margin, top);
    cairo_scale(cr, zoom, zoom);
    cairo_set_source_surface(cr, img, 0, 0);
    cairo_pattern_set_filter(cairo_get_source(cr), CAIRO_FILTER_NEAREST);
    cairo_paint(cr);
    cairo_restore(cr);

    /* display coordinates of a pixel centre */
#define DX(x) (margin + ((x) + 0.5) * zoom)
#define DY(y) (top + ih - ((y) + 0.5) * zoom)

    /* candidates */
    cairo_set_line_width(cr, 1.6);
    cairo_set_font_size(cr, 12);
    for (long c = 0; c < ncand; c++) {
        double x = DX(cand[c].x), y = DY(cand[c].y), r = fmax(1.5 * par->fwhm * zoom, 6);
        cairo_set_source_rgb(cr, 0.90, 0.33, 0.23);
        cairo_new_path(cr);
        cairo_arc(cr, x, y, r, 0, 2 * M_PI);
        cairo_stroke(cr);
        char lab[24];
        snprintf(lab, sizeof lab, "%ld", c + 1);
        cairo_move_to(cr, x + 0.75 * r + 2, y - 0.75 * r - 2);
        cairo_text_path(cr, lab);
        cairo_set_source_rgb(cr, 0.08, 0.08, 0.08);
        cairo_set_line_width(cr, 3);
        cairo_stroke_preserve(cr);
        cairo_set_source_rgb(cr, 1.0, 0.92, 0.80);
        cairo_fill(cr);
        cairo_set_line_width(cr, 1.6);
    }

    /* compass, lower left */
    double north[2], east[2];
    gl_detect_sky_compass(sky, (double)(nx / 2), (double)(ny / 2), north, east);
    double len = fmax(0.09 * fmin(iw, ih), 18), cx0 = margin + 30 + len,
           cy0 = top + ih - 16 - len * 0.3;
    cairo_set_source_rgb(cr, 0.98, 0.95, 0.86);
    cairo_set_line_width(cr, 1.5);
    cairo_set_font_size(cr, 11);
    arrow(cr, cx0, cy0, north[0], -north[1], len, "N");
    arrow(cr, cx0, cy0, east[0], -east[1], len, "E");

    /* scale bar, lower right */
    double scale = gl_detect_sky_pixscale(sky), blen_px, bval;
    char blab[32];
    if (isfinite(scale)) {
        static const double as[] = {0.01, 0.02, 0.05, 0.1, 0.2, 0.25, 0.5, 1, 2, 5, 10, 20, 60};
        bval = nice_length(0.22 * (double)nx * scale / 1000.0, as, 13);
        blen_px = bval * 1000.0 / scale;
        snprintf(blab, sizeof blab, "%g\"", bval);
    } else {
        static const double ps[] = {1, 2, 5, 10, 20, 25, 50, 100, 200, 500, 1000};
        bval = nice_length(0.22 * (double)nx, ps, 11);
        blen_px = bval;
        snprintf(blab, sizeof blab, "%g px", bval);
    }
    double bx1 = margin + iw - 14, bx0 = bx1 - blen_px * zoom, by = top + ih - 16;
    cairo_set_line_width(cr, 3);
    cairo_move_to(cr, bx0, by);
    cairo_line_to(cr, bx1, by);
    cairo_stroke(cr);
    cairo_text_extents_t ext;
    cairo_text_extents(cr, blab, &ext);
    cairo_move_to(cr, 0.5 * (bx0 + bx1) - 0.5 * ext.width, by - 6);
    cairo_show_text(cr, blab);

    /* colour bar */
    double cbx = margin + iw + 24, cby0 = top, cby1 = top + ih;
    for (int k = 0; k < (int)ih; k++) {
        double t = vmin + (vmax - vmin) * (1.0 - ((double)k + 0.5) / ih);
        rgb c = ember(t, vmin, vmax);
        cairo_set_source_rgb(cr, c.r, c.g, c.b);
        cairo_rectangle(cr, cbx, cby0 + k, barw, 1.2);
        cairo_fill(cr);
    }
    cairo_set_source_rgb(cr, 0.17, 0.17, 0.17);
    cairo_set_line_width(cr, 1);
    cairo_rectangle(cr, cbx, cby0, barw, ih);
    cairo_stroke(cr);
    double step = vmax - vmin > 60 ? 20 : (vmax - vmin > 25 ? 10 : 5);
    cairo_set_font_size(cr, 10);
    for (double t = ceil(vmin / step) * step; t <= vmax + 1e-9; t += step) {
        double y = cby1 - (t - vmin) / (vmax - vmin) * ih;
        cairo_move_to(cr, cbx + barw, y);
        cairo_line_to(cr, cbx + barw + 4, y);
        cairo_stroke(cr);
        snprintf(line, sizeof line, "%g", fabs(t) < 1e-9 ? 0.0 : t);
        cairo_move_to(cr, cbx + barw + 7, y + 3.5);
        cairo_show_text(cr, line);
    }
    cairo_save(cr);
    cairo_move_to(cr, cbx + barw + 44, cby0 + 0.5 * ih + 30);
    cairo_rotate(cr, -M_PI / 2);
    cairo_set_font_size(cr, 11);
    cairo_show_text(cr, "S/N (Student t)");
    cairo_restore(cr);
#undef DX
#undef DY

    cairo_surface_flush(surf);
    if (cairo_status(cr) || cairo_surface_write_to_png(surf, path) != CAIRO_STATUS_SUCCESS)
        st = gl_error_set(GL_ERR_IO, "%s: cannot write the PNG", path);
cleanup:
    if (cr)
        cairo_destroy(cr);
    cairo_surface_destroy(surf);
    cairo_surface_destroy(img);
    return st;
}
