/*
 * main.c -- the `gloam` executable: dispatches `gloam COMMAND [options]` to
 * the command's function through one table, and handles --help/--version.
 */
#include "command/cli.h"

#include <stdio.h>
#include <string.h>

typedef struct command {
    const char *name;
    int (*run)(gl_cli *cli, int argc, char **argv);
    const char *summary;
} command;

static const command commands[] = {
    /* one line per command, in pipeline order */
    {"simulate", cmd_simulate, "simulate a coronagraphic sequence with known truth"},
    {"inspect", cmd_inspect, "report what a cube holds: shape, NaN, saturation, flux, rotation"},
    {"align", cmd_align, "find the star in every frame and centre it"},
    {"subtract", cmd_subtract, "remove the star's halo, derotate to north-up and combine"},
    {"detect", cmd_detect, "S/N and false-alarm maps, candidate point sources"},
    {"inject", cmd_inject, "plant fake companions into a sequence"},
    {"limits", cmd_limits, "contrast curves calibrated by fake companions"},
    {"vet", cmd_vet, "characterise candidates (negative companion fit, errors) and test them"},
    {"run", cmd_run, "a whole reduction from a plan: run folder, summary, HTML report"},
    {"survey", cmd_survey, "every target of a plan, in parallel under mpirun"},
    {NULL, NULL, NULL},
};

static void print_help(FILE *out)
{
    fprintf(out,
            "gloam %s -- from a coronagraphic image sequence to detections and limits\n\n"
            "usage: gloam COMMAND [options]\n\ncommands:\n",
            gl_version());
    for (size_t i = 0; commands[i].name; i++)
        fprintf(out, "  %-10s %s\n", commands[i].name, commands[i].summary);
    fprintf(out, "\n'gloam COMMAND --help' describes a command's options.\n"
                 "Exit status: 0 success, 1 bad input or usage, 2 internal failure.\n");
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
        fprintf(stderr, "gloam %s: peak memory %.1f MB (VmHWM %ld kB)\n", cli->command,
                (double)kb / 1024.0, kb);
}

int cli_run_command(int argc, char **argv)
{
    for (size_t i = 0; commands[i].name; i++) {
        if (strcmp(argv[1], commands[i].name) != 0)
            continue;
        /* -h is --help for every command */
        for (int a = 2; a < argc; a++)
            if (strcmp(argv[a], "-h") == 0)
                argv[a] = "--help";
        gl_cli cli = {0};
        cli.command = commands[i].name;
        snprintf(cli.program, sizeof cli.program, "gloam %s", gl_version());
        cli.prov.program = cli.program;
        size_t pos = 0;
        for (int a = 0; a < argc && pos < sizeof cli.cmdline - 1; a++)
            pos += (size_t)snprintf(cli.cmdline + pos, sizeof cli.cmdline - pos, "%s%s",
                                    a ? " " : "", a ? argv[a] : "gloam");
        cli.prov.command = cli.cmdline;
        int rc = commands[i].run(&cli, argc - 1, argv + 1);
        if (cli.verbose)
            print_peak_memory(&cli);
        return rc;
    }
    fprintf(stderr, "gloam: unknown command '%s' (see gloam --help)\n", argv[1]);
    return 1;
}

int main(int argc, char **argv)
{
    if (argc < 2) {
        print_help(stderr);
        return 1;
    }
    if (strcmp(argv[1], "--help") == 0 || strcmp(argv[1], "-h") == 0 ||
        strcmp(argv[1], "help") == 0) {
        print_help(stdout);
        return 0;
    }
    if (strcmp(argv[1], "--version") == 0) {
        printf("gloam %s\n", gl_version());
        return 0;
    }
    return cli_run_command(argc, argv);
}
