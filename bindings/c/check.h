/* Small test helpers shared by the C tests of libringmain. */
#ifndef RINGMAIN_CHECK_H
#define RINGMAIN_CHECK_H

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "ringmain.h"

static int check_count = 0;

/* The calling thread's last error message (a static buffer: one thread at a time). */
static const char *last_error(void) {
    static char buf[4096];
    size_t needed = 0;
    if (ringmain_last_error(buf, sizeof buf, &needed) != RINGMAIN_OK) {
        snprintf(buf, sizeof buf, "(the last error did not fit in %zu bytes; %zu needed)", sizeof buf, needed);
    }
    return buf;
}

static void fail(const char *file, int line, const char *what) {
    fprintf(stderr, "%s:%d: check failed: %s\n", file, line, what);
    exit(1);
}

/* A call that must succeed. */
#define OK(call)                                                                                   \
    do {                                                                                           \
        ringmain_status s_ = (call);                                                               \
        check_count++;                                                                             \
        if (s_ != RINGMAIN_OK) {                                                                   \
            fprintf(stderr, "%s:%d: %s returned %u (%s): %s\n", __FILE__, __LINE__, #call,         \
                    (unsigned)s_, ringmain_status_text(s_), last_error());                         \
            exit(1);                                                                               \
        }                                                                                          \
    } while (0)

/* A call that must fail with the given status. */
#define FAILS_WITH(call, expected)                                                                 \
    do {                                                                                           \
        ringmain_status s_ = (call);                                                               \
        check_count++;                                                                             \
        if (s_ != (expected)) {                                                                    \
            fprintf(stderr, "%s:%d: %s returned %u (%s), expected %s\n", __FILE__, __LINE__,       \
                    #call, (unsigned)s_, ringmain_status_text(s_), #expected);                     \
            exit(1);                                                                               \
        }                                                                                          \
    } while (0)

#define EXPECT(cond)                                                                               \
    do {                                                                                           \
        check_count++;                                                                             \
        if (!(cond)) fail(__FILE__, __LINE__, #cond);                                              \
    } while (0)

/* |a - b| <= tol * max(1, |b|) */
#define EXPECT_NEAR(a, b, tol)                                                                     \
    do {                                                                                           \
        double a_ = (a), b_ = (b);                                                                 \
        check_count++;                                                                             \
        if (!(fabs(a_ - b_) <= (tol) * (fabs(b_) > 1.0 ? fabs(b_) : 1.0))) {                       \
            fprintf(stderr, "%s:%d: %s = %.12g, expected %.12g (tolerance %g)\n", __FILE__,        \
                    __LINE__, #a, a_, b_, (double)(tol));                                          \
            exit(1);                                                                               \
        }                                                                                          \
    } while (0)

/* The last error must contain every one of the given fragments. */
#define EXPECT_ERROR_CONTAINS(fragment)                                                            \
    do {                                                                                           \
        check_count++;                                                                             \
        if (strstr(last_error(), (fragment)) == NULL) {                                            \
            fprintf(stderr, "%s:%d: the last error \"%s\" does not contain \"%s\"\n", __FILE__,    \
                    __LINE__, last_error(), (fragment));                                           \
            exit(1);                                                                               \
        }                                                                                          \
    } while (0)

static void report(const char *name) {
    printf("%s: %d checks passed\n", name, check_count);
}

#endif
