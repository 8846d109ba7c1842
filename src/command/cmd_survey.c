/*
 * cmd_survey.c -- `gloam survey PLAN --out FOLDER`: every target of a plan
 * (gl_survey_run). Started by mpirun in a build with MPI (meson option
 * mpi), the targets are spread over the processes, one process per target
 * when there are as many; otherwise they run one after the other. The MPI
 * calls are all here: the library only receives the function that combines
 * the processes' outcomes.
 */
#include "command/cli.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#ifdef GL_HAVE_MPI
#include <mpi.h>
#endif

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
    "  --force STEP      run STEP again for every target (repeatable; all: every step)\n"
#ifdef GL_HAVE_MPI
    "\nthis build runs targets in parallel under mpirun (MPI)\n"
#else
    "\nthis build has no MPI: targets run one after the other\n"
#endif
    ;

enum { OPT_OUT = CLI_OPT_FIRST_COMMAND_OPTION, OPT_FORCE };

#ifdef GL_HAVE_MPI
static int share_mpi(void *user, unsigned char *buf, size_t n)
{
    (void)user;
    return MPI_Allreduce(MPI_IN_PLACE, buf, (int)n, MPI_UNSIGNED_CHAR, MPI_MAX, MPI_COMM_WORLD) !=
           MPI_SUCCESS;
}

/* Under mpirun (the launcher sets these), not for a plain start. */
static int started_by_mpirun(void)
{
    return getenv("OMPI_COMM_WORLD_SIZE") || getenv("PMI_SIZE") || getenv("PMIX_RANK");
}
#endif

int cmd_survey(gl_cli *cli, int argc, char **argv)
{
    static const struct option opts[] = {{"out", required_argument, 0, OPT_OUT},
                                         {"force", required_argument, 0, OPT_FORCE},
                                         CLI_COMMON_OPTIONS,
                                         {0, 0, 0, 0}};
    gl_survey_params sp;
    gl_survey_params_init(&sp);
    int k, c;
    while ((k = cli_next_option(cli, argc, argv, opts, help, &c)) > 0) {
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
    int mpi = 0;
#ifdef GL_HAVE_MPI
    if (started_by_mpirun()) {
        if (MPI_Init(NULL, NULL) != MPI_SUCCESS) {
            fprintf(stderr, "gloam survey: MPI could not start\n");
            return 2;
        }
        mpi = 1;
        MPI_Comm_rank(MPI_COMM_WORLD, &sp.rank);
        MPI_Comm_size(MPI_COMM_WORLD, &sp.size);
        sp.share = share_mpi;
        if (sp.rank != 0)
            cli->quiet = 1; /* one voice on the terminal: process 0's */
    }
#endif
    cli_start(cli);
    int rc = 0, nfailed = 0;
    gl_plan *plan = NULL;
    gl_status st = gl_plan_read(plan_path, &plan);
    if (!st) {
        sp.run.exec = cli_exec_in_process;
        sp.run.exec_user = cli;
        st = gl_survey_run(plan, &sp, &nfailed);
    }
    if (st) {
        rc = sp.rank == 0 ? cli_fail(cli, st) : gl_status_exit_code(st);
    } else if (sp.rank == 0 && !cli->quiet) {
        int nt = gl_plan_target_count(plan);
        printf("%d target%s, %d failed; survey folder %s (survey.csv, survey.html)%s\n", nt,
               nt == 1 ? "" : "s", nfailed, sp.folder, mpi ? " [MPI]" : "");
    }
    if (!rc && nfailed)
        rc = 1;
    gl_plan_free(plan);
#ifdef GL_HAVE_MPI
    if (mpi)
        MPI_Finalize();
#endif
    return rc;
}
