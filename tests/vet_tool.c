/*
 * vet_tool.c -- test-only driver of the vetting library's astrometry, so that
 * Python tests can compare the background-star track with astropy
 * (SkyCoord.apply_space_motion and the GCRS frame) on the same inputs.
 *   vet_tool track RA DEC PMRA PMDEC PLX RV EPOCH BGRA BGDEC MJD [MJD ...]
 *       one line per date: dra_mas ddec_mas (17 significant digits)
 */
#include "gloam/gloam.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

int main(int argc, char **argv)
{
    if (argc < 12 || strcmp(argv[1], "track") != 0) {
        fprintf(stderr, "usage: vet_tool track RA DEC PMRA PMDEC PLX RV EPOCH BGRA BGDEC MJD...\n");
        return 1;
    }
    gl_vet_star s = {atof(argv[2]), atof(argv[3]), atof(argv[4]), atof(argv[5]),
                     atof(argv[6]), atof(argv[7]), atof(argv[8])};
    long n = argc - 11;
    double mjd[256], a[256], d[256];
    if (n > 256)
        return 1;
    for (long k = 0; k < n; k++)
        mjd[k] = atof(argv[11 + k]);
    if (gl_vet_background_track(&s, atof(argv[9]), atof(argv[10]), n, mjd, a, d)) {
        fprintf(stderr, "vet_tool: %s\n", gl_error_message());
        return 1;
    }
    for (long k = 0; k < n; k++)
        printf("%.17g %.17g\n", a[k], d[k]);
    return 0;
}
