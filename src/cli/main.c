/*
 * main.c -- the `gloam` executable: `gloam COMMAND [options]` is
 * gl_command_exec (the library's command layer, src/command/) with the
 * process's stdout and stderr; this file adds --help and --version, and in
 * a build with MPI (meson option mpi) the processes `gloam survey` spreads
 * its targets over under mpirun. The MPI calls are all here, so that the
 * library stays serial.
 */
#include "gloam/gloam.h"

#include <cblas.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <unistd.h>

#ifdef GL_HAVE_MPI
#include <mpi.h>

/* Under mpirun (the launcher sets these), not for a plain start. */
static int started_by_mpirun(void)
{
    return getenv("OMPI_COMM_WORLD_SIZE") || getenv("PMI_SIZE") || getenv("PMIX_RANK");
}

static int mpi_start(void *user, int *rank, int *size)
{
    (void)user;
    if (!started_by_mpirun())
        return 0;
    if (MPI_Init(NULL, NULL) != MPI_SUCCESS)
        return -1;
    MPI_Comm_rank(MPI_COMM_WORLD, rank);
    MPI_Comm_size(MPI_COMM_WORLD, size);
    return 1;
}

static void mpi_finish(void *user)
{
    (void)user;
    MPI_Finalize();
}

static int mpi_share(void *user, unsigned char *buf, size_t n)
{
    (void)user;
    return MPI_Allreduce(MPI_IN_PLACE, buf, (int)n, MPI_UNSIGNED_CHAR, MPI_MAX, MPI_COMM_WORLD) !=
           MPI_SUCCESS;
}
#endif

/* OpenBLAS built for several processors (Debian's: DYNAMIC_ARCH) picks its
 * kernels from the processor's model number when it loads, before main, and
 * falls back to its SSE3 ones ("Prescott") on models newer than its release:
 * Debian 12's 0.3.21 does so on Intel family 6 model 207, where the
 * covariance of klip-frame then runs 2.5-3x slower than with its AVX-512
 * (SkylakeX) kernels (bench/README.md, issue 13 seventh round). The library
 * reads the choice from OPENBLAS_CORETYPE only at load time, so where it
 * fell back although the processor has AVX-512 (or AVX2 and FMA), gloam
 * sets the variable to those kernels and starts itself again, once. A
 * variable the user has set is never changed, and if the new start fails
 * the program goes on with the fallback. */
static void blas_kernels_fix(char **argv)
{
    if (getenv("OPENBLAS_CORETYPE"))
        return;
    const char *core = openblas_get_corename();
    if (!core || strcasecmp(core, "prescott") != 0)
        return;
    __builtin_cpu_init();
    const char *want = NULL;
    if (__builtin_cpu_supports("avx512f") && __builtin_cpu_supports("avx512cd") &&
        __builtin_cpu_supports("avx512bw") && __builtin_cpu_supports("avx512dq") &&
        __builtin_cpu_supports("avx512vl"))
        want = "SkylakeX";
    else if (__builtin_cpu_supports("avx2") && __builtin_cpu_supports("fma"))
        want = "Haswell";
    if (!want || setenv("OPENBLAS_CORETYPE", want, 1) != 0)
        return;
    execv("/proc/self/exe", argv);
    unsetenv("OPENBLAS_CORETYPE"); /* the new start failed: go on as we are */
}

static void print_help(FILE *out)
{
    fprintf(out,
            "gloam %s -- from a coronagraphic image sequence to detections and limits\n\n"
            "usage: gloam COMMAND [options]\n\ncommands:\n",
            gl_version());
    for (const gl_command_info *c = gl_command_list(); c->name; c++)
        fprintf(out, "  %-10s %s\n", c->name, c->summary);
    fprintf(out, "\n'gloam COMMAND --help' describes a command's options.\n"
                 "Exit status: 0 success, 1 bad input or usage, 2 internal failure.\n");
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
    blas_kernels_fix(argv);
#ifdef GL_HAVE_MPI
    const gl_command_processes mpi = {
        .start = mpi_start,
        .finish = mpi_finish,
        .share = mpi_share,
        .about = "this build runs targets in parallel under mpirun (MPI)",
        .tag = " [MPI]",
    };
    gl_command_set_processes(&mpi);
#endif
    return gl_command_exec(argc, argv, stdout, stderr);
}
