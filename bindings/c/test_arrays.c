/* Whole arrays both ways, the time series of a simulation, the thread settings and the last
 * error cut short like snprintf.
 *
 *   test_arrays MODEL.toml SIMULATION_MODEL.toml
 */
#include "check.h"

/* Every id in one call equals the ids one at a time. */
static void check_ids(const ringmain_model *m, size_t n) {
    size_t needed = 0;
    FAILS_WITH(ringmain_model_node_ids(m, NULL, 0, &needed), RINGMAIN_BUFFER_TOO_SMALL);
    char *all = malloc(needed);
    EXPECT(all != NULL);
    OK(ringmain_model_node_ids(m, all, needed, &needed));
    const char *p = all;
    for (size_t i = 0; i < n; i++) {
        char one[256];
        OK(ringmain_model_node_id(m, i, one, sizeof one, NULL));
        EXPECT(strcmp(p, one) == 0);
        p += strlen(p) + 1;
    }
    EXPECT((size_t)(p - all) == needed);
    free(all);
}

static void arrays(const char *path) {
    ringmain_model *m = NULL;
    OK(ringmain_model_load(path, &m));
    size_t n = 0, l = 0, count = 0;
    OK(ringmain_model_node_count(m, &n));
    OK(ringmain_model_link_count(m, &l));
    check_ids(m, n);

    uint32_t *kinds = calloc(n, sizeof(uint32_t));
    double *demand = calloc(n, sizeof(double));
    double *x = calloc(n, sizeof(double)), *y = calloc(n, sizeof(double));
    size_t *from = calloc(l, sizeof(size_t)), *to = calloc(l, sizeof(size_t));
    uint32_t *status = calloc(l, sizeof(uint32_t));
    OK(ringmain_model_node_kinds(m, kinds, n, &count));
    EXPECT(count == n);
    OK(ringmain_model_get_demands(m, demand, n, &count));
    OK(ringmain_model_coordinates(m, x, y, n, &count));
    FAILS_WITH(ringmain_model_link_ends(m, from, to, l - 1, &count), RINGMAIN_BUFFER_TOO_SMALL);
    EXPECT(count == l);
    OK(ringmain_model_link_ends(m, from, to, l, &count));
    for (size_t k = 0; k < l; k++) {
        size_t a, b;
        OK(ringmain_model_link_nodes(m, k, &a, &b));
        EXPECT(a == from[k] && b == to[k]);
    }
    for (size_t i = 0; i < n; i++) {
        uint32_t kind;
        OK(ringmain_model_node_kind(m, i, &kind));
        EXPECT(kind == kinds[i]);
        EXPECT((kind == RINGMAIN_NODE_JUNCTION) == !isnan(demand[i]));
    }

    /* Every demand doubled in one call: the results' demands are the new ones. */
    for (size_t i = 0; i < n; i++) demand[i] *= 2.0; /* NaN stays NaN: reservoirs and tanks */
    OK(ringmain_model_set_demands(m, demand, n));
    ringmain_results *r = NULL;
    OK(ringmain_model_solve(m, &r));
    double *solved = calloc(n, sizeof(double));
    OK(ringmain_results_demands(r, solved, n, NULL));
    for (size_t i = 0; i < n; i++)
        if (kinds[i] == RINGMAIN_NODE_JUNCTION) EXPECT_NEAR(solved[i], demand[i], 1e-12);
    ringmain_results_free(r);

    /* A number for a reservoir: nothing changes, the message names the node and the key. */
    size_t reservoir = n;
    for (size_t i = 0; i < n; i++)
        if (kinds[i] == RINGMAIN_NODE_RESERVOIR) reservoir = i;
    EXPECT(reservoir < n);
    double *again = calloc(n, sizeof(double));
    memcpy(again, demand, n * sizeof(double));
    for (size_t i = 0; i < n; i++)
        if (kinds[i] == RINGMAIN_NODE_JUNCTION) again[i] = 0.0;
    again[reservoir] = 1.0;
    FAILS_WITH(ringmain_model_set_demands(m, again, n), RINGMAIN_WRONG_KIND);
    EXPECT_ERROR_CONTAINS("demand");
    OK(ringmain_model_get_demands(m, again, n, NULL));
    for (size_t i = 0; i < n; i++)
        if (kinds[i] == RINGMAIN_NODE_JUNCTION) EXPECT(again[i] == demand[i]);
    FAILS_WITH(ringmain_model_set_demands(m, demand, n - 1), RINGMAIN_OUT_OF_RANGE);

    /* Statuses round trip; the first pipe closed through the array is closed in the results. */
    OK(ringmain_model_get_link_statuses(m, status, l, NULL));
    status[0] = RINGMAIN_STATUS_CLOSED;
    OK(ringmain_model_set_link_statuses(m, status, l));
    OK(ringmain_model_solve(m, &r));
    double q;
    OK(ringmain_results_link_flow(r, 0, &q));
    EXPECT(q == 0.0);
    ringmain_results_free(r);
    status[0] = 77;
    FAILS_WITH(ringmain_model_set_link_statuses(m, status, l), RINGMAIN_INVALID_ARGUMENT);

    /* The last error cut short like snprintf: a prefix, NUL-terminated, and the full size. */
    char small[8];
    size_t needed = 0;
    FAILS_WITH(ringmain_last_error(small, sizeof small, &needed), RINGMAIN_BUFFER_TOO_SMALL);
    EXPECT(strlen(small) <= 7 && needed > sizeof small);
    char *full = malloc(needed);
    OK(ringmain_last_error(full, needed, NULL));
    EXPECT(strncmp(full, small, strlen(small)) == 0 && strlen(full) + 1 == needed);
    free(full);

    free(kinds);
    free(demand);
    free(x);
    free(y);
    free(from);
    free(to);
    free(status);
    free(solved);
    free(again);
    ringmain_model_free(m);
}

static void series(const char *path) {
    ringmain_model *m = NULL;
    OK(ringmain_model_load(path, &m));
    ringmain_run *run = NULL;
    OK(ringmain_model_simulate(m, &run));
    ringmain_run_summary s;
    OK(ringmain_run_get_summary(run, &s));
    EXPECT(s.times > 2 && s.duration > 0.0);
    size_t nt = 0, n = 0, tanks = 0, count = 0;
    OK(ringmain_model_node_count(m, &n));
    FAILS_WITH(ringmain_run_times(run, NULL, 0, &nt), RINGMAIN_BUFFER_TOO_SMALL);
    EXPECT(nt == s.times);
    double *t = calloc(nt, sizeof(double));
    OK(ringmain_run_times(run, t, nt, NULL));
    EXPECT(t[0] == 0.0);
    for (size_t i = 1; i < nt; i++) EXPECT(t[i] > t[i - 1]);
    EXPECT_NEAR(t[nt - 1], s.duration, 1e-9);
    /* Heads: times x nodes. */
    FAILS_WITH(ringmain_run_series(run, RINGMAIN_SERIES_HEAD, NULL, 0, &count), RINGMAIN_BUFFER_TOO_SMALL);
    EXPECT(count == nt * n);
    /* Tank levels: times x tanks; the volume balance closes (supplied = delivered + storage). */
    FAILS_WITH(ringmain_run_columns(run, RINGMAIN_SERIES_LEVEL, NULL, 0, &tanks), RINGMAIN_BUFFER_TOO_SMALL);
    EXPECT(tanks >= 1);
    double *level = calloc(nt * tanks, sizeof(double));
    OK(ringmain_run_series(run, RINGMAIN_SERIES_LEVEL, level, nt * tanks, &count));
    EXPECT(count == nt * tanks);
    EXPECT(fabs(s.supplied - s.delivered - s.storage_change - s.discrepancy) <= 1e-9 * s.supplied);
    EXPECT(fabs(s.discrepancy) <= 1e-6 * s.supplied);
    FAILS_WITH(ringmain_run_series(run, 99, level, nt * tanks, &count), RINGMAIN_INVALID_ARGUMENT);
    if (s.events > 0) {
        double when = -1.0;
        size_t size = 0;
        FAILS_WITH(ringmain_run_event(run, 0, &when, NULL, 0, &size), RINGMAIN_BUFFER_TOO_SMALL);
        char *text = malloc(size);
        OK(ringmain_run_event(run, 0, &when, text, size, NULL));
        EXPECT(when >= 0.0 && when <= s.duration && strlen(text) + 1 == size);
        free(text);
    }
    FAILS_WITH(ringmain_run_event(run, s.events, NULL, NULL, 0, NULL), RINGMAIN_OUT_OF_RANGE);
    free(t);
    free(level);
    ringmain_run_free(run);
    ringmain_model_free(m);
}

int main(int argc, char **argv) {
    if (argc != 3) {
        fprintf(stderr, "usage: %s MODEL.toml SIMULATION_MODEL.toml\n", argv[0]);
        return 2;
    }
    size_t threads = 0;
    OK(ringmain_set_threads(2));
    OK(ringmain_get_threads(&threads));
    EXPECT(threads == 2);
    FAILS_WITH(ringmain_set_threads(100000), RINGMAIN_INVALID_ARGUMENT);
    OK(ringmain_set_threads(0));
    arrays(argv[1]);
    series(argv[2]);
    report("test_arrays");
    return 0;
}
