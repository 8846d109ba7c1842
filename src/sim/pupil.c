/*
 * pupil.c -- telescope pupil and Lyot-stop transmission maps.
 *
 * An annular aperture (outer diameter, central obstruction) crossed by thin
 * radial spider arms. Edges are anti-aliased by the area coverage of each
 * pixel, estimated on 8 x 8 sub-samples (common practice for FFT pupil
 * models), so that the PSF does not depend on where the edge falls with
 * respect to the grid.
 */
#include "sim/internal.h"

#include <math.h>

#define SUB 8

static int inside(const sim_aperture *a, double x, double y, const double *ca, const double *sa)
{
    double r2 = x * x + y * y;
    double ro = 0.5 * a->outer, ri = 0.5 * a->obstruction;
    if (r2 > ro * ro || r2 < ri * ri)
        return 0;
    for (int k = 0; k < a->nspiders; k++) {
        /* distance to arm k, which runs from the centre along (ca, sa) */
        double along = x * ca[k] + y * sa[k];
        double across = -x * sa[k] + y * ca[k];
        if (along > 0 && fabs(across) < 0.5 * a->spider_width)
            return 0;
    }
    return 1;
}

void sim_aperture_draw(const sim_aperture *a, int P, double dpix, double *out)
{
    double ca[16], sa[16];
    int ns = a->nspiders < 16 ? a->nspiders : 16;
    for (int k = 0; k < ns; k++) {
        double t = (a->spider_angle_deg + 360.0 * k / ns) * M_PI / 180.0;
        ca[k] = cos(t);
        sa[k] = sin(t);
    }
    sim_aperture lim = *a;
    lim.nspiders = ns;
    double c = 0.5 * (P - 1);
    for (int j = 0; j < P; j++)
        for (int i = 0; i < P; i++) {
            int n = 0;
            for (int sj = 0; sj < SUB; sj++)
                for (int si = 0; si < SUB; si++) {
                    double x = (i - c + (si + 0.5) / SUB - 0.5) / dpix;
                    double y = (j - c + (sj + 0.5) / SUB - 0.5) / dpix;
                    n += inside(&lim, x, y, ca, sa);
                }
            out[(size_t)j * P + i] = (double)n / (SUB * SUB);
        }
}
