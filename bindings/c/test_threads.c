/* Several models solved in parallel threads give exactly the answers of the same scenarios solved
 * one after another; one results handle and one model are read from every thread at once; each
 * thread keeps its own last error.
 *
 *   test_threads MODEL.toml
 */
#define _POSIX_C_SOURCE 200809L
#include "check.h"

#include <pthread.h>

#define THREADS 4
#define SCENARIOS 12

static const char *model_path;
static size_t n_nodes;
static double *base_demand;          /* per node; NaN for fixed-head nodes */
static double reference[SCENARIOS][512];
static const ringmain_model *shared_model;
static const ringmain_results *shared_results;

/* Scenario s scales every junction's demand by 0.5 + 0.1 s (from half to 1.6 times the base). */
static double factor(int s) { return 0.5 + 0.1 * s; }

static int run_scenario(ringmain_model *m, int s, double *heads) {
    for (size_t i = 0; i < n_nodes; i++) {
        if (!isnan(base_demand[i]) && ringmain_model_set_demand(m, i, base_demand[i] * factor(s)) != RINGMAIN_OK) {
            return 0;
        }
    }
    ringmain_results *r = NULL;
    if (ringmain_model_solve(m, &r) != RINGMAIN_OK) return 0;
    size_t count = 0;
    ringmain_status st = ringmain_results_heads(r, heads, n_nodes, &count);
    ringmain_results_free(r);
    return st == RINGMAIN_OK && count == n_nodes;
}

typedef struct {
    int id;
    int ok;
    char message[256];
} job;

static void *worker(void *arg) {
    job *j = arg;
    j->ok = 0;
    /* Even threads read the file; odd ones copy the shared model (a const use of it). */
    ringmain_model *m = NULL;
    ringmain_status st = (j->id % 2 == 0) ? ringmain_model_load(model_path, &m)
                                          : ringmain_model_clone(shared_model, &m);
    if (st != RINGMAIN_OK) {
        snprintf(j->message, sizeof j->message, "thread %d: could not make its model", j->id);
        return NULL;
    }
    /* This thread's own error, to be found again after all the work below. */
    char expected[64];
    snprintf(expected, sizeof expected, "node index %d is out of range", 1000 + j->id);
    if (ringmain_model_set_demand(m, (size_t)(1000 + j->id), 1.0) != RINGMAIN_OUT_OF_RANGE) {
        snprintf(j->message, sizeof j->message, "thread %d: no out-of-range error", j->id);
        ringmain_model_free(m);
        return NULL;
    }
    double heads[512];
    for (int pass = 0; pass < 2; pass++) {
        for (int n = 0; n < SCENARIOS; n++) {
            int s = (n + 3 * j->id) % SCENARIOS; /* each thread in its own order */
            if (!run_scenario(m, s, heads)) {
                snprintf(j->message, sizeof j->message, "thread %d: scenario %d failed", j->id, s);
                ringmain_model_free(m);
                return NULL;
            }
            for (size_t i = 0; i < n_nodes; i++) {
                /* Bit for bit: a solve depends only on its model. */
                if (memcmp(&heads[i], &reference[s][i], sizeof(double)) != 0) {
                    snprintf(j->message, sizeof j->message, "thread %d: scenario %d node %zu differs", j->id, s, i);
                    ringmain_model_free(m);
                    return NULL;
                }
            }
            /* Everyone reads the same results and the same model at the same time. */
            double h;
            size_t k;
            if (ringmain_results_node_head(shared_results, (size_t)n % n_nodes, &h) != RINGMAIN_OK ||
                ringmain_model_node_index(shared_model, "J-101", &k) != RINGMAIN_OK) {
                snprintf(j->message, sizeof j->message, "thread %d: shared read failed", j->id);
                ringmain_model_free(m);
                return NULL;
            }
        }
    }
    char message[256];
    ringmain_status got = ringmain_last_error(message, sizeof message, NULL);
    if (got != RINGMAIN_OK) {
        snprintf(j->message, sizeof j->message, "thread %d: ringmain_last_error returned %u", j->id, (unsigned)got);
    } else if (strstr(message, expected) == NULL) {
        snprintf(j->message, sizeof j->message, "thread %d: last error is \"%.200s\"", j->id, message);
    } else {
        j->ok = 1;
    }
    ringmain_model_free(m);
    return NULL;
}

int main(int argc, char **argv) {
    if (argc != 2) {
        fprintf(stderr, "usage: %s MODEL.toml\n", argv[0]);
        return 2;
    }
    model_path = argv[1];
    ringmain_model *m = NULL;
    OK(ringmain_model_load(model_path, &m));
    OK(ringmain_model_node_count(m, &n_nodes));
    EXPECT(n_nodes <= 512);
    base_demand = malloc(n_nodes * sizeof(double));
    for (size_t i = 0; i < n_nodes; i++) {
        uint32_t kind;
        OK(ringmain_model_node_kind(m, i, &kind));
        base_demand[i] = NAN;
        if (kind == RINGMAIN_NODE_JUNCTION) OK(ringmain_model_get_demand(m, i, &base_demand[i]));
    }
    /* The reference: every scenario, one after another, on a fresh copy of the model. */
    ringmain_model *ref = NULL;
    OK(ringmain_model_clone(m, &ref));
    for (int s = 0; s < SCENARIOS; s++) EXPECT(run_scenario(ref, s, reference[s]));
    ringmain_model_free(ref);
    /* Higher demand, lower heads somewhere. */
    int lower = 0;
    for (size_t i = 0; i < n_nodes; i++) lower |= reference[SCENARIOS - 1][i] < reference[0][i];
    EXPECT(lower);

    ringmain_results *r = NULL;
    OK(ringmain_model_solve(m, &r));
    shared_model = m;
    shared_results = r;

    pthread_t threads[THREADS];
    job jobs[THREADS];
    for (int t = 0; t < THREADS; t++) {
        jobs[t].id = t;
        jobs[t].message[0] = '\0';
        EXPECT(pthread_create(&threads[t], NULL, worker, &jobs[t]) == 0);
    }
    for (int t = 0; t < THREADS; t++) {
        EXPECT(pthread_join(threads[t], NULL) == 0);
        if (!jobs[t].ok) fprintf(stderr, "%s\n", jobs[t].message);
        EXPECT(jobs[t].ok);
    }
    /* The main thread's last error is its own (it has had none). */
    EXPECT(strcmp(last_error(), "") == 0);

    ringmain_results_free(r);
    ringmain_model_free(m);
    free(base_demand);
    size_t live_models = 1, live_results = 1;
    OK(ringmain_live_handles(&live_models, &live_results));
    EXPECT(live_models == 0 && live_results == 0);
    report("test_threads");
    return 0;
}
