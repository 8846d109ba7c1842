/*
 * fits_roundtrip.c -- a test-only tool (never installed): reads IN with
 * gl_fits_read_cube and writes it as a float32 product OUT with
 * gl_fits_write_cube through gl_outset, exactly as a command would, so the
 * Python tests can compare the library's FITS input and output with
 * astropy.io.fits and fitsverify.
 *
 * usage: fits_roundtrip IN OUT [--overwrite]
 * Exit status: 0 done, 1 bad input or usage, 2 internal failure.
 */
#include "gloam/gloam.h"

#include <stdio.h>
#include <string.h>

int main(int argc, char **argv)
{
    int overwrite = 0;
    const char *paths[2] = {NULL, NULL};
    int np = 0;
    char cmdline[2048] = "fits_roundtrip";
    for (int i = 1; i < argc; i++) {
        size_t len = strlen(cmdline);
        snprintf(cmdline + len, sizeof cmdline - len, " %s", argv[i]);
        if (strcmp(argv[i], "--overwrite") == 0)
            overwrite = 1;
        else if (np < 2 && argv[i][0] != '-')
            paths[np++] = argv[i];
        else {
            fprintf(stderr, "fits_roundtrip: unexpected argument '%s'\n", argv[i]);
            return 1;
        }
    }
    if (np != 2) {
        fprintf(stderr, "usage: fits_roundtrip IN OUT [--overwrite]\n");
        return 1;
    }
    char program[64];
    snprintf(program, sizeof program, "gloam %s", gl_version());
    gl_provenance prov = {.program = program, .command = cmdline};
    gl_cube *c = NULL;
    gl_outset *out = NULL;
    const char *tmp = NULL;
    gl_status st;
    if ((st = gl_fits_read_cube(paths[0], 2, &c)) ||
        (st = gl_provenance_add_input(&prov, paths[0])) || (st = gl_outset_new(overwrite, &out)) ||
        (st = gl_outset_add(out, paths[1], &prov, &tmp)) ||
        (st = gl_header_add_history(c->header, "written by the FITS round-trip test tool")) ||
        (st = gl_fits_write_cube(tmp, c, &prov)) || (st = gl_outset_commit(out)))
        fprintf(stderr, "fits_roundtrip: %s\n", gl_error_message());
    gl_outset_free(out);
    gl_cube_free(c);
    return gl_status_exit_code(st);
}
