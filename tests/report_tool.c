/*
 * report_tool.c -- builds an HTML report from the command line, for the
 * reference tests of the report (tests/py/test_run.py):
 *   report_tool OUT.html TITLE [text:T] [caution:T] [image:PNG:CAPTION]
 *               [table:CSV:CAPTION:MAXROWS] [link:HREF:TEXT] [section:H]
 * Prints the library's message and exits 1 on failure.
 */
#include "gloam/gloam.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

int main(int argc, char **argv)
{
    if (argc < 3) {
        fprintf(stderr, "usage: report_tool OUT.html TITLE [piece]...\n");
        return 1;
    }
    gl_report *r = NULL;
    gl_status st = gl_report_new(argv[2], &r);
    for (int i = 3; i < argc && !st; i++) {
        char *a = argv[i], *colon = strchr(a, ':');
        if (!colon) {
            fprintf(stderr, "report_tool: bad piece %s\n", a);
            return 1;
        }
        *colon = '\0';
        char *rest = colon + 1;
        if (!strcmp(a, "text"))
            st = gl_report_text(r, rest);
        else if (!strcmp(a, "caution"))
            st = gl_report_caution(r, rest);
        else if (!strcmp(a, "section"))
            st = gl_report_section(r, rest);
        else if (!strcmp(a, "image") || !strcmp(a, "link") || !strcmp(a, "table")) {
            char *c2 = strchr(rest, ':');
            if (!c2)
                return 1;
            *c2 = '\0';
            if (!strcmp(a, "image"))
                st = gl_report_image(r, rest, c2 + 1);
            else if (!strcmp(a, "link"))
                st = gl_report_link(r, rest, c2 + 1);
            else {
                char *c3 = strrchr(c2 + 1, ':');
                long max = c3 ? strtol(c3 + 1, NULL, 10) : 100;
                if (c3)
                    *c3 = '\0';
                st = gl_report_table(r, rest, c2 + 1, max);
            }
        } else {
            fprintf(stderr, "report_tool: unknown piece %s\n", a);
            return 1;
        }
    }
    if (!st)
        st = gl_report_write(r, argv[1]);
    gl_report_free(r);
    if (st) {
        fprintf(stderr, "%s\n", gl_error_message());
        return 1;
    }
    return 0;
}
