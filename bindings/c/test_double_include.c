/* The header can be included twice (include guard) and compiles on its own as C11. Built twice:
 * as test_double_include against the shared library, as test_static against the static one. */
#include "ringmain.h"
#include "ringmain.h"

#include <stdio.h>
#include <string.h>

int main(int argc, char **argv) {
    const char *name = argc > 0 ? strrchr(argv[0], '/') : NULL;
    name = name ? name + 1 : "test_double_include";
    ringmain_model *m = NULL;
    if (ringmain_model_new(0, 0, 0, 0, 0, 0, &m) != RINGMAIN_OK) return 1;
    ringmain_model_free(m);
    if (strcmp(ringmain_version(), RINGMAIN_VERSION) != 0) return 1;
    printf("%s: header version %d.%d.%d, library %s\n", name, RINGMAIN_VERSION_MAJOR,
           RINGMAIN_VERSION_MINOR, RINGMAIN_VERSION_PATCH, ringmain_version());
    return 0;
}
