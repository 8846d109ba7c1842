/*
 * cmd_survey.c -- `gloam survey PLAN --out FOLDER`: every target of a plan
 * (gl_survey_run). The library has no MPI: a program that has (the gloam
 * executable of a build with MPI, src/cli/main.c) installs the processes
 * with gl_command_set_processes, and under mpirun the targets are spread
 * over them, one process per target when there are as many; otherwise they
 * run one after the other.
 */
#include "command/cli.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const char help[] =
    "usage: gloam survey PLAN --out FOLDER [options]\n\n"
    "Runs every target of a plan (its [target NAME] sections, or the folders of\n"
    "[survey] folders = PATTERN) as gloam run does, each into FOLDER/NAME/; a\n"
    "failed target is reported and does not stop the others. Then writes\n"
    "FOLDER/survey.csv and survey.fits (one row per target), survey.html (linking\n"
    "every target's report) and contrast.png (every contrast curve).\n"
    "Started with mpirun (for example mpirun -np 4 gloam survey PLAN --out DIR),\n"
    "the targets are spread over the processes; the products are the same.\n\n"
    "options:\n"
    "  --out FOLDER      the survey folder\n"
    "  --force STEP      run STEP again for every target (repeatable; all: every step)\n";

enum { OPT_OUT = CLI_OPT_FIRST_COMMAND_OPTION, OPT_FORCE };

int cmd_survey(gl_cli *cli, int argc, char **argv)
{
    static const struct option opts[] = {{"out", required_argument, 0, OPT_OUT},
                                         {"force", required_argument, 0, OPT_FORCE},
                                         CLI_COMMON_OPTIONS,
                                         {0, 0, 0, 0}};
    gl_survey_params sp;
    gl_survey_params_init(&sp);
    const gl_command_processes *pr = cli_processes();
    char help_text[sizeof help + 256];
    snprintf(help_text, sizeof help_text, "%s\n%s\n", help,
             pr && pr->about ? pr->about
                             : "this program has no MPI: targets run one after the other");
    int k, c;
    while ((k = cli_next_option(cli, argc, argv, opts, help_text, &c)) > 0) {
        switch (c) {
        case OPT_OUT: sp.folder = optarg; break;
        case OPT_FORCE:
            if (cli_parse_force(cli, optarg, sp.run.force))
                return 1;
            break;
        default: return cli_bad_option(cli, argv);
        }
    }
    if (k < 0)
        return cli_exit_status(k);
    const char *plan_path = cli_positional(cli, argc, argv, "the plan file");
    if (!plan_path)
        return 1;
    {
        const char *names[] = {"--out"};
        const void *vals[] = {sp.folder};
        if (cli_missing(cli, 1, names, vals))
            return 1;
    }
    int group = 0;
    if (pr && pr->start) {
        group = pr->start(pr->user, &sp.rank, &sp.size);
        if (group < 0) {
            fprintf(cli->err, "gloam survey: the processes of the survey could not start\n");
            return 2;
        }
        if (sp.size > 1) {
            sp.share = pr->share;
            sp.share_user = pr->user;
        }
        if (sp.rank != 0)
            cli->quiet = 1; /* one voice on the terminal: process 0's */
    }
    cli_start(cli);
    cli_work_started(cli); /* as in gloam run */
    int rc = 0, nfailed = 0;
    gl_plan *plan = NULL;
    gl_status st = gl_plan_read(plan_path, &plan);
    if (!st) {
        st = gl_survey_run(plan, &sp, &nfailed);
    }
    if (st) {
        rc = sp.rank == 0 ? cli_fail(cli, st) : gl_status_exit_code(st);
    } else if (sp.rank == 0 && !cli->quiet) {
        int nt = gl_plan_target_count(plan);
        fprintf(cli->out, "%d target%s, %d failed; survey folder %s (survey.csv, survey.html)%s\n",
                nt, nt == 1 ? "" : "s", nfailed, sp.folder, group && pr->tag ? pr->tag : "");
    }
    if (!rc && nfailed)
        rc = 1;
    gl_plan_free(plan);
    if (group && pr->finish)
        pr->finish(pr->user);
    return rc;
}
