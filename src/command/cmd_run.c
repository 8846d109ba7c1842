/*
 * cmd_run.c -- `gloam run PLAN --out FOLDER`: a whole reduction of one
 * target from a plan file (the library's run stage, gl_run_target, which
 * runs each step through gl_command_exec with the step's files of the run
 * folder as its streams). This file parses the options.
 */
#include "command/cli.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const char help[] =
    "usage: gloam run PLAN --out FOLDER [options]\n"
    "       gloam run --example\n\n"
    "Runs the steps of a plan (inspect, align, subtract, detect, limits, vet) for\n"
    "one target into a run folder: every product under a fixed name, log.txt,\n"
    "summary.json (machine readable: steps, detections, contrast at fixed\n"
    "separations, versions, command lines) and report.html (one self-contained\n"
    "page). A step whose inputs and options are unchanged since the last run into\n"
    "the same folder is not run again.\n\n"
    "options:\n"
    "  --out FOLDER      the run folder (created; an existing one must be a run folder)\n"
    "  --target NAME     the plan's target to run (default: its only target)\n"
    "  --force STEP      run STEP again even when it is unchanged (repeatable; all: every step)\n"
    "  --dry-run         print each step's command line, marked up to date or to\n"
    "                    run again (and why), and run nothing\n"
    "  --example         print a commented example plan\n";

enum { OPT_OUT = CLI_OPT_FIRST_COMMAND_OPTION, OPT_TARGET, OPT_FORCE, OPT_DRY, OPT_EXAMPLE };

int cli_parse_force(const gl_cli *cli, const char *arg, int force[GL_NSTEPS])
{
    int s = gl_step_from_name(arg);
    if (strcmp(arg, "all") == 0) {
        for (int i = 0; i < GL_NSTEPS; i++)
            force[i] = 1;
    } else if (s < 0) {
        cli_usage(cli,
                  "--force %s: not a step (inspect, align, subtract, detect, limits, vet, all)",
                  arg);
        return -1;
    } else {
        force[s] = 1;
    }
    return 0;
}

int cmd_run(gl_cli *cli, int argc, char **argv)
{
    static const struct option opts[] = {{"out", required_argument, 0, OPT_OUT},
                                         {"target", required_argument, 0, OPT_TARGET},
                                         {"force", required_argument, 0, OPT_FORCE},
                                         {"dry-run", no_argument, 0, OPT_DRY},
                                         {"example", no_argument, 0, OPT_EXAMPLE},
                                         CLI_COMMON_OPTIONS,
                                         {0, 0, 0, 0}};
    gl_run_params rp;
    gl_run_params_init(&rp);
    const char *target = NULL;
    int example = 0, k, c;
    while ((k = cli_next_option(cli, argc, argv, opts, help, &c)) > 0) {
        switch (c) {
        case OPT_OUT: rp.folder = optarg; break;
        case OPT_TARGET: target = optarg; break;
        case OPT_FORCE:
            if (cli_parse_force(cli, optarg, rp.force))
                return 1;
            break;
        case OPT_DRY: rp.dry_run = 1; break;
        case OPT_EXAMPLE: example = 1; break;
        default: return cli_bad_option(cli, argv);
        }
    }
    if (k < 0)
        return cli_exit_status(k);
    if (example) {
        fputs(gl_run_example_plan(), cli->out);
        return 0;
    }
    const char *plan_path = cli_positional(cli, argc, argv, "the plan file");
    if (!plan_path)
        return 1;
    if (!rp.dry_run) {
        const char *names[] = {"--out"};
        const void *vals[] = {rp.folder};
        if (cli_missing(cli, 1, names, vals))
            return 1;
    } else if (!rp.folder) {
        rp.folder = "RUN";
    }
    cli_start(cli);
    cli_work_started(cli); /* each step holds its own lines; the run's are said at once */

    gl_plan *plan = NULL;
    gl_status st = gl_plan_read(plan_path, &plan);
    if (st)
        return cli_fail(cli, st);
    int rc = 0;
    if (!target) {
        if (gl_plan_target_count(plan) > 1) {
            rc = cli_usage(cli,
                           "%s lists %d targets: choose one with --target (or use gloam survey)",
                           plan_path, gl_plan_target_count(plan));
            goto cleanup;
        }
        target = gl_plan_target_name(plan, 0);
    } else {
        int found = 0;
        for (int i = 0; i < gl_plan_target_count(plan); i++)
            found |= strcmp(gl_plan_target_name(plan, i), target) == 0;
        if (!found) {
            rc = cli_usage(cli, "%s has no target %s", plan_path, target);
            goto cleanup;
        }
    }
    gl_run_outcome out;
    st = gl_run_target(plan, target, &rp, &out);
    if (st) {
        rc = cli_fail(cli, st);
        goto cleanup;
    }
    if (!rp.dry_run && !cli->quiet)
        fprintf(cli->out, "%s: run folder %s (report.html, summary.json, log.txt)\n", target,
                rp.folder);
cleanup:
    gl_plan_free(plan);
    return rc;
}
