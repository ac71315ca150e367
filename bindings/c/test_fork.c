/* A child made by fork() after its parent solved must be able to solve: the library's worker
 * threads do not survive fork, and the library makes a new pool in the child.
 *
 *   test_fork MODEL.toml
 */
#define _POSIX_C_SOURCE 200809L
#include "check.h"

#include <signal.h>
#include <sys/wait.h>
#include <unistd.h>

static int solve_once(ringmain_model *m, double *head0) {
    ringmain_results *r = NULL;
    if (ringmain_model_solve(m, &r) != RINGMAIN_OK) return 0;
    int ok = ringmain_results_node_head(r, 0, head0) == RINGMAIN_OK;
    ringmain_results_free(r);
    return ok;
}

int main(int argc, char **argv) {
    if (argc != 2) {
        fprintf(stderr, "usage: %s MODEL.toml\n", argv[0]);
        return 2;
    }
    ringmain_model *m = NULL;
    OK(ringmain_model_load(argv[1], &m));
    OK(ringmain_set_threads(4)); /* several workers, so that the parent's pool has threads */
    double parent_head = 0.0;
    EXPECT(solve_once(m, &parent_head));
    for (int round = 0; round < 2; round++) {
        pid_t pid = fork();
        EXPECT(pid >= 0);
        if (pid == 0) {
            alarm(60); /* a hang (the fault this guards against) ends the child with SIGALRM */
            ringmain_model *fresh = NULL;
            double head = 0.0, again = 0.0;
            int ok = solve_once(m, &head) && ringmain_model_load(argv[1], &fresh) == RINGMAIN_OK &&
                     solve_once(fresh, &again) && head == parent_head && again == parent_head;
            ringmain_model_free(fresh);
            _exit(ok ? 0 : 3);
        }
        int status = 0;
        EXPECT(waitpid(pid, &status, 0) == pid);
        if (WIFSIGNALED(status)) fprintf(stderr, "child ended by signal %d\n", WTERMSIG(status));
        EXPECT(WIFEXITED(status) && WEXITSTATUS(status) == 0);
        /* The parent still solves on its own pool. */
        double head = 0.0;
        EXPECT(solve_once(m, &head) && head == parent_head);
    }
    ringmain_model_free(m);
    report("test_fork");
    return 0;
}
