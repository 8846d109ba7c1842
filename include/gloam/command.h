/*
 * gloam/command.h -- the gloam commands as library calls: `gloam COMMAND
 * [options]` run in the calling process, reading the same options and
 * writing the same products as the `gloam` program (which is this call and
 * little more), with everything they print sent to streams the caller
 * gives. The run stage (run.h) runs its steps through gl_command_exec.
 */
#ifndef GLOAM_COMMAND_H
#define GLOAM_COMMAND_H

#include "gloam/core.h"
#include "gloam/run.h"

#include <stdio.h>

#ifdef __cplusplus
extern "C" {
#endif

/* One command: its name ("align") and the line `gloam --help` shows. */
typedef struct gl_command_info {
    const char *name;
    const char *summary;
} gl_command_info;

/* Every command, in pipeline order, ended by an entry whose name is NULL
 * (static; the one list behind `gloam --help` and the man pages). */
GL_API const gl_command_info *gl_command_list(void);

/* Runs one command as `gloam` would.
 * Given:    argv[0] the program (any text, "gloam"), argv[1] the command,
 *           argv[2..argc-1] its options and arguments as on a command line
 *           (the array may be permuted, as getopt does); out receives what
 *           the command prints as its result (inspect's report, detect's
 *           table, --help), err its messages (the log, notes, warnings, the
 *           one-line error, the progress bar when err is a terminal).
 * Returned: the command's products, written as by the `gloam` program.
 * Function return value: the exit status, 0 success, 1 bad input or usage,
 *   2 internal failure (an unknown command is 1, with a message on err).
 * Nothing is written to the process's stdout or stderr (unless they are the
 * streams given), and the command never exits the process. The log and
 * progress handlers (core.h) installed before the call are installed again
 * when it returns. Commands share process-wide state (getopt, the log
 * handlers, OpenMP's thread count), so run one at a time. */
GL_API int gl_command_exec(int argc, char **argv, FILE *out, FILE *err);

/* Checks a command line without running the command: the command parses
 * argv exactly as gl_command_exec would (every option name, written out in
 * full, and every value, with the same code and the same messages) and
 * stops where it would start work, before any file is opened.
 * Given and returned as gl_command_exec, except that nothing is read or
 * written and only err receives text (the one-line error).
 * Function return value: 0 when the command line is valid, else the exit
 * status gl_command_exec would give for it (1 for a bad option or value).
 * `--help` is a valid command line (its text goes to err). */
GL_API int gl_command_check(int argc, char **argv, FILE *err);

/* ---- surveys over several processes ---------------------------------------- */

/* How `gloam survey` spreads targets over processes: the library has no
 * MPI of its own; the program that has (the `gloam` executable of a build
 * with MPI) installs these before calling gl_command_exec. Without them a
 * survey runs its targets one after the other. */
typedef struct gl_command_processes {
    /* Called once the survey's options are read: joins the group of
     * processes the program was started in (MPI_Init under mpirun) and sets
     * *rank and *size. Returns 1 when it joined one, 0 when the program was
     * started alone (*rank 0, *size 1; nothing to finish), -1 when the group
     * could not be joined (the survey fails with exit status 2). */
    int (*start)(void *user, int *rank, int *size);
    /* Called after the survey when start returned 1 (MPI_Finalize). */
    void (*finish)(void *user);
    /* Shares the targets' outcomes between the processes (run.h's
     * gl_survey_share_fn); used when *size > 1. */
    gl_survey_share_fn share;
    void *user;
    const char *about; /* the line `gloam survey --help` ends with */
    const char *tag;   /* appended to the survey's closing line in a group (" [MPI]") */
} gl_command_processes;

/* Installs p (copied; NULL: none, targets run one after the other). */
GL_API void gl_command_set_processes(const gl_command_processes *p);

#ifdef __cplusplus
}
#endif

#endif
