/*
 * dry_run.c -- `gloam run --dry-run`: each asked step's command line, marked
 * as a run would take it: up to date (the ledger's record matches its
 * options, inputs and products, the test run_step makes), to run again with
 * the reason, or not possible. A step reading a file that an earlier step
 * would write again runs again too, since the rewritten file carries a new
 * checksum. Nothing is written: the ledger is only read.
 */
#include "core/internal.h"
#include "run/internal.h"

#include <stdio.h>
#include <string.h>

/* 1 when step s reads a file that step t writes: one of t's declared
 * products or one the ledger recorded t writing. */
static int reads_from(const run_cmd *cmds, int s, int t, const gl_ledger *led)
{
    for (int i = 0; i < cmds[s].ninputs; i++) {
        if (run_ledger_wrote(led, gl_step_name((gl_step)t), cmds[s].inputs[i]))
            return 1;
        for (int k = 0; k < cmds[t].nproducts; k++)
            if (strcmp(cmds[s].inputs[i], cmds[t].products[k]) == 0)
                return 1;
    }
    return 0;
}

/* --dry-run: every asked step's command line, marked as a run would take
 * it: up to date (the ledger's test of run_step), to run again and why, or
 * not possible. A step that reads what an earlier step would write again
 * runs again too (the rewritten products carry new checksums). Opens the
 * ledger read-only: nothing is written, and a missing folder is an empty
 * ledger. */
gl_status run_dry_list(run_cmd *cmds, const gl_run_params *rp, const run_files *f,
                       const char *target)
{
    static char line[1 << 15];
    gl_ledger *led = NULL;
    int runs[GL_NSTEPS] = {0};
    gl_status st = gl_ledger_open(f->folder, &led);
    if (st)
        return st;
    for (int s = 0; s < GL_NSTEPS; s++) {
        if (!cmds[s].asked)
            continue;
        if (cmds[s].why_not[0]) {
            gl_log(GL_LOG_INFO, "%s: %s: not possible: %s", target, gl_step_name((gl_step)s),
                   cmds[s].why_not);
            continue;
        }
        run_join_args(&cmds[s], line, sizeof line);
        char why[128] = "";
        const char *stale =
            run_ledger_stale(led, gl_step_name((gl_step)s), line, cmds[s].inputs, cmds[s].ninputs);
        if (rp->force[s])
            snprintf(why, sizeof why, "--force %s", gl_step_name((gl_step)s));
        else if (stale)
            snprintf(why, sizeof why, "%s", stale);
        else
            for (int t = 0; t < s && !why[0]; t++)
                if (runs[t] && reads_from(cmds, s, t, led))
                    snprintf(why, sizeof why, "%s, whose products it reads, runs again",
                             gl_step_name((gl_step)t));
        runs[s] = why[0] != 0;
        if (runs[s])
            gl_log(GL_LOG_INFO, "%s: %s: would run (%s): %s", target, gl_step_name((gl_step)s), why,
                   line);
        else
            gl_log(GL_LOG_INFO, "%s: %s: up to date, would not run again: %s", target,
                   gl_step_name((gl_step)s), line);
    }
    gl_ledger_free(led);
    return GL_OK;
}
