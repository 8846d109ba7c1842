/*
 * command.c -- the command layer's entry point: the table of commands (the
 * one list behind `gloam --help`, the man pages and the bash completion),
 * gl_command_exec, which runs one of them with the streams it is given,
 * and the hook through which a program with MPI lets `gloam survey` spread
 * its targets over processes.
 */
#include "command/cli.h"

#include "core/internal.h"

#include <setjmp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

typedef struct command {
    gl_command_info info;
    int (*run)(gl_cli *cli, int argc, char **argv);
} command;

static const command commands[] = {
    /* one line per command, in pipeline order */
    {{"simulate", "simulate a coronagraphic sequence with known truth"}, cmd_simulate},
    {{"inspect", "report what a cube holds: shape, NaN, saturation, flux, rotation"}, cmd_inspect},
    {{"align", "find the star in every frame and centre it"}, cmd_align},
    {{"subtract", "remove the star's halo, derotate to north-up and combine"}, cmd_subtract},
    {{"detect", "S/N and false-alarm maps, candidate point sources"}, cmd_detect},
    {{"inject", "plant fake companions into a sequence"}, cmd_inject},
    {{"limits", "contrast curves calibrated by fake companions"}, cmd_limits},
    {{"vet", "characterise candidates (negative companion fit, errors) and test them"}, cmd_vet},
    {{"run", "a whole reduction from a plan: run folder, summary, HTML report"}, cmd_run},
    {{"survey", "every target of a plan, in parallel under mpirun"}, cmd_survey},
};
#define NCOMMANDS (sizeof commands / sizeof commands[0])

const gl_command_info *gl_command_list(void)
{
    static gl_command_info list[NCOMMANDS + 1];
    if (!list[0].name)
        for (size_t i = 0; i < NCOMMANDS; i++)
            list[i] = commands[i].info;
    return list;
}

static gl_command_processes processes;
static int have_processes;

void gl_command_set_processes(const gl_command_processes *p)
{
    have_processes = p != NULL;
    if (p)
        processes = *p;
}

const gl_command_processes *cli_processes(void)
{
    return have_processes ? &processes : NULL;
}

/* --verbose: the process's peak resident memory (VmHWM of /proc/self/status,
 * Linux; nothing elsewhere), what the benchmarks and the memory-limit test
 * read. */
static void print_peak_memory(const gl_cli *cli)
{
    FILE *f = fopen("/proc/self/status", "r");
    char line[256];
    long kb = -1;
    while (f && fgets(line, sizeof line, f))
        if (sscanf(line, "VmHWM: %ld kB", &kb) == 1)
            break;
    if (f)
        fclose(f);
    if (kb >= 0)
        fprintf(cli->err, "gloam %s: peak memory %.1f MB (VmHWM %ld kB)\n", cli->command,
                (double)kb / 1024.0, kb);
}

/* Runs (check 0) or checks (check 1, gl_command_check) one command. */
static int command_run(int argc, char **argv, FILE *out, FILE *err, int check)
{
    if (!out || !err || argc < 2 || !argv || !argv[1]) {
        if (err)
            fprintf(err, "gloam: no command given (see gloam --help)\n");
        return 1;
    }
    const command *cmd = NULL;
    for (size_t i = 0; i < NCOMMANDS && !cmd; i++)
        if (strcmp(argv[1], commands[i].info.name) == 0)
            cmd = &commands[i];
    if (!cmd) {
        fprintf(err, "gloam: unknown command '%s' (see gloam --help)\n", argv[1]);
        return 1;
    }
    gl_cli *cli = calloc(1, sizeof *cli);
    if (!cli) {
        fprintf(err, "gloam %s: out of memory\n", cmd->info.name);
        return 2;
    }
    /* -h is --help for every command */
    for (int a = 2; a < argc; a++)
        if (strcmp(argv[a], "-h") == 0)
            argv[a] = "--help";
    cli->command = cmd->info.name;
    cli->out = out;
    cli->err = err;
    snprintf(cli->program, sizeof cli->program, "gloam %s", gl_version());
    cli->prov.program = cli->program;
    size_t pos = 0;
    for (int a = 0; a < argc && pos < sizeof cli->cmdline - 1; a++)
        pos += (size_t)snprintf(cli->cmdline + pos, sizeof cli->cmdline - pos, "%s%s", a ? " " : "",
                                a ? argv[a] : "gloam");
    cli->prov.command = cli->cmdline;

    /* the caller's printers are put back afterwards (a run's steps are
     * commands inside the command run) */
    gl_log_fn log_fn;
    void *log_user;
    gl_log_level log_max;
    gl_progress_fn progress_fn;
    void *progress_user;
    gl_log_get_handler(&log_fn, &log_user, &log_max);
    gl_progress_get_handler(&progress_fn, &progress_user);

    int rc;
    jmp_buf done;
    cli->check_only = check;
    cli->check_done = &done;
    if (!check)
        rc = cmd->run(cli, argc - 1, argv + 1);
    else if (setjmp(done) == 0)
        rc = cmd->run(cli, argc - 1, argv + 1);
    else
        rc = 0;              /* cli_start reached: every option and value was accepted */
    if (rc == 0)             /* a command that ended well says what it held; a failure, */
        cli_flush_held(cli); /* its one line of error only (cli.h, hold) */
    cli_bar_clear(cli);      /* a task left unfinished by an error leaves no bar behind */
    if (cli->verbose && !check)
        print_peak_memory(cli);
    fflush(out);
    fflush(err);

    gl_log_set_handler(log_fn, log_user, log_max);
    gl_progress_set_handler(progress_fn, progress_user);
    free(cli);
    return rc;
}

int gl_command_exec(int argc, char **argv, FILE *out, FILE *err)
{
    return command_run(argc, argv, out, err, 0);
}

int gl_command_check(int argc, char **argv, FILE *err)
{
    return command_run(argc, argv, err, err, 1);
}
