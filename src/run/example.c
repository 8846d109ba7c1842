/*
 * example.c -- the commented plan `gloam run --example` prints: every
 * section a plan may hold, with the demo sequence as its target.
 */
#include "gloam/run.h"

static const char example[] =
    "# A gloam plan: one target reduced from the raw cube to vetted candidates\n"
    "# and a contrast curve. `gloam run PLAN --out FOLDER` runs it; running it\n"
    "# again reruns only the steps whose inputs or options changed.\n"
    "#\n"
    "# Paths are relative to the folder of this file. Every key of a step's\n"
    "# section is an option of that command without its leading \"--\" (see\n"
    "# gloam COMMAND --help); \"key = yes\" gives a flag, \"key = no\" leaves it out.\n"
    "# Comments start with # or ;. The inputs below are the demo's files: save\n"
    "# this plan beside them to try it (gloam run --example > demo-frames/my.ini;\n"
    "# gloam run demo-frames/my.ini --out my-run).\n"
    "\n"
    "[run]\n"
    "name = Veyra-3141            ; names the target in the report and summary\n"
    "\n"
    "[inputs]\n"
    "cube = cube.fits\n"
    "angles = header              ; from the FITS headers, or a file: one angle a line, deg\n"
    "psf = psf.fits               ; the unsaturated off-axis PSF\n"
    "psf-scale = 1                ; brings the PSF to the science exposure\n"
    "fwhm = auto                  ; measured on the PSF, or a number of pixels\n"
    "# refs = refstar.fits        ; a reference-star cube (RDI)\n"
    "# pixscale = 12.25           ; mas per pixel, when the header has no WCS\n"
    "\n"
    "[steps]\n"
    "run = inspect, align, subtract, detect, limits, vet\n"
    "\n"
    "[align]\n"
    "method = auto\n"
    "\n"
    "[subtract]                   ; limits and vet run exactly this subtraction\n"
    "method = klip-rings\n"
    "modes = 5,10\n"
    "mask-radius = 6\n"
    "gap = 0.75\n"
    "\n"
    "[detect]\n"
    "threshold = 5\n"
    "mask-radius = 6\n"
    "\n"
    "[limits]\n"
    "completeness = 0.95\n"
    "\n"
    "# A survey (gloam survey PLAN) adds one section per target: its keys are\n"
    "# the target's inputs, and \"step.option\" overrides a step's option for\n"
    "# that target alone; every other value comes from the sections above.\n"
    "# [target Orlen-7]\n"
    "# cube = orlen7/cube.fits\n"
    "# angles = orlen7/angles.txt\n"
    "# psf = orlen7/psf.fits\n"
    "# subtract.modes = 5,10,20\n";

const char *gl_run_example_plan(void)
{
    return example;
}
