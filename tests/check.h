/*
 * check.h -- the tiny assertion kit of the C unit tests. Each test program
 * runs its checks, prints one line per failure, and exits non-zero when any
 * failed. Outside references are named in the test files beside each check.
 */
#ifndef GLOAM_TESTS_CHECK_H
#define GLOAM_TESTS_CHECK_H

#include <math.h>
#include <stdio.h>

static int check_failures;
static int check_count;

#define CHECK(cond, ...)                                                                           \
    do {                                                                                           \
        check_count++;                                                                             \
        if (!(cond)) {                                                                             \
            check_failures++;                                                                      \
            fprintf(stderr, "%s:%d: check failed: %s: ", __FILE__, __LINE__, #cond);               \
            fprintf(stderr, __VA_ARGS__);                                                          \
            fputc('\n', stderr);                                                                   \
        }                                                                                          \
    } while (0)

/* |a - b| <= tol */
#define CHECK_CLOSE(a, b, tol, what)                                                               \
    do {                                                                                           \
        double check_a_ = (a), check_b_ = (b);                                                     \
        CHECK(fabs(check_a_ - check_b_) <= (tol), "%s: %.10g vs %.10g (tol %.3g)", what, check_a_, \
              check_b_, (double)(tol));                                                            \
    } while (0)

#define CHECK_DONE()                                                                               \
    do {                                                                                           \
        printf("%d checks, %d failed\n", check_count, check_failures);                             \
        return check_failures ? 1 : 0;                                                             \
    } while (0)

#endif
