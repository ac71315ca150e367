/* Load the demo model, solve it, read every result and check it against the network's own
 * balance equations; change values between solves; save and reload.
 *
 *   test_basic MODEL.toml TMPDIR
 */
#define _POSIX_C_SOURCE 200809L
#include "check.h"

#include <unistd.h>

#define PI 3.14159265358979323846

static char *node_id(const ringmain_model *m, size_t i) {
    size_t needed = 0;
    FAILS_WITH(ringmain_model_node_id(m, i, NULL, 0, &needed), RINGMAIN_BUFFER_TOO_SMALL);
    char *id = malloc(needed);
    EXPECT(id != NULL);
    OK(ringmain_model_node_id(m, i, id, needed, &needed));
    EXPECT(strlen(id) + 1 == needed);
    return id;
}

static void expect_label(const ringmain_model *m, uint32_t quantity, const char *expected) {
    char label[16];
    OK(ringmain_model_unit_label(m, quantity, label, sizeof label, NULL));
    if (strcmp(label, expected) != 0) {
        fprintf(stderr, "unit label of quantity %u is \"%s\", expected \"%s\"\n", (unsigned)quantity, label, expected);
        exit(1);
    }
}

typedef struct {
    size_t nodes, links;
    double *head, *pressure, *demand, *flow, *velocity, *headloss;
    uint32_t *state;
    bool *connected;
} arrays;

static arrays read_arrays(const ringmain_results *r) {
    arrays a;
    OK(ringmain_results_node_count(r, &a.nodes));
    OK(ringmain_results_link_count(r, &a.links));
    size_t count = 0;
    /* Ask for the size first, as a caller who does not know it would. */
    FAILS_WITH(ringmain_results_heads(r, NULL, 0, &count), RINGMAIN_BUFFER_TOO_SMALL);
    EXPECT(count == a.nodes);
    a.head = calloc(a.nodes, sizeof(double));
    a.pressure = calloc(a.nodes, sizeof(double));
    a.demand = calloc(a.nodes, sizeof(double));
    a.connected = calloc(a.nodes, sizeof(bool));
    a.flow = calloc(a.links, sizeof(double));
    a.velocity = calloc(a.links, sizeof(double));
    a.headloss = calloc(a.links, sizeof(double));
    a.state = calloc(a.links, sizeof(uint32_t));
    OK(ringmain_results_heads(r, a.head, a.nodes, &count));
    EXPECT(count == a.nodes);
    OK(ringmain_results_pressures(r, a.pressure, a.nodes, &count));
    OK(ringmain_results_demands(r, a.demand, a.nodes, &count));
    OK(ringmain_results_connected(r, a.connected, a.nodes, &count));
    OK(ringmain_results_flows(r, a.flow, a.links, &count));
    EXPECT(count == a.links);
    OK(ringmain_results_velocities(r, a.velocity, a.links, &count));
    OK(ringmain_results_headlosses(r, a.headloss, a.links, NULL));
    OK(ringmain_results_link_states(r, a.state, a.links, NULL));
    return a;
}

static void free_arrays(arrays *a) {
    free(a->head);
    free(a->pressure);
    free(a->demand);
    free(a->connected);
    free(a->flow);
    free(a->velocity);
    free(a->headloss);
    free(a->state);
}

/* Mass balance at every connected junction and energy at every open pipe, from the results
 * alone: the equations the gradient method solves (Todini & Pilati 1988). */
static void check_balances(const ringmain_model *m, const arrays *a) {
    double *net = calloc(a->nodes, sizeof(double));
    for (size_t k = 0; k < a->links; k++) {
        size_t from, to;
        OK(ringmain_model_link_nodes(m, k, &from, &to));
        net[to] += a->flow[k];
        net[from] -= a->flow[k];
        uint32_t kind;
        OK(ringmain_model_link_kind(m, k, &kind));
        if (a->connected[from] && a->connected[to]) {
            /* Pumps report H_from - H_to (a gain is a negative loss), other links |H_from - H_to|. */
            double difference = a->head[from] - a->head[to];
            EXPECT_NEAR(a->headloss[k], kind == RINGMAIN_LINK_PUMP ? difference : fabs(difference), 1e-9);
        }
        if (kind == RINGMAIN_LINK_PIPE) {
            /* Mean velocity V = Q / (pi D^2 / 4): flow in L/s, diameter in mm, velocity in m/s. */
            double d;
            OK(ringmain_model_get_pipe_diameter(m, k, &d));
            double area = PI * (d / 1000.0) * (d / 1000.0) / 4.0;
            EXPECT_NEAR(a->velocity[k], a->flow[k] / 1000.0 / area, 1e-9);
        }
        if (a->state[k] == RINGMAIN_STATE_CLOSED) {
            EXPECT(a->flow[k] == 0.0);
        }
    }
    for (size_t i = 0; i < a->nodes; i++) {
        uint32_t kind;
        OK(ringmain_model_node_kind(m, i, &kind));
        double elevation;
        OK(ringmain_model_get_elevation(m, i, &elevation));
        if (kind == RINGMAIN_NODE_JUNCTION && a->connected[i]) {
            double demand;
            OK(ringmain_model_get_demand(m, i, &demand));
            EXPECT_NEAR(a->demand[i], demand, 1e-12);
            EXPECT_NEAR(net[i], demand, 1e-6);
        } else if (kind == RINGMAIN_NODE_RESERVOIR) {
            double head;
            OK(ringmain_model_get_reservoir_head(m, i, &head));
            EXPECT_NEAR(a->head[i], head, 1e-12);
        } else if (kind == RINGMAIN_NODE_TANK) {
            double level;
            OK(ringmain_model_get_tank_level(m, i, &level));
            EXPECT_NEAR(a->head[i], elevation + level, 1e-12);
        }
        /* Pressure in m of water is the head above the node. */
        if (a->connected[i]) {
            EXPECT_NEAR(a->pressure[i], a->head[i] - elevation, 1e-9);
        } else {
            EXPECT(isnan(a->head[i]));
        }
    }
    free(net);
}

static void expect_same(const arrays *a, const arrays *b, double tol) {
    EXPECT(a->nodes == b->nodes && a->links == b->links);
    for (size_t i = 0; i < a->nodes; i++) {
        if (!isnan(a->head[i])) EXPECT_NEAR(b->head[i], a->head[i], tol);
    }
    for (size_t k = 0; k < a->links; k++) {
        EXPECT_NEAR(b->flow[k], a->flow[k], tol);
        EXPECT(a->state[k] == b->state[k]);
    }
}

int main(int argc, char **argv) {
    if (argc != 3) {
        fprintf(stderr, "usage: %s MODEL.toml TMPDIR\n", argv[0]);
        return 2;
    }
    EXPECT(strcmp(ringmain_version(), RINGMAIN_VERSION) == 0);

    ringmain_model *m = NULL;
    OK(ringmain_model_load(argv[1], &m));
    EXPECT(m != NULL);
    size_t nodes, links;
    OK(ringmain_model_node_count(m, &nodes));
    OK(ringmain_model_link_count(m, &links));
    EXPECT(nodes > 10 && links > 10);

    /* The demo model is in the default SI units. */
    expect_label(m, RINGMAIN_QUANTITY_LENGTH, "m");
    expect_label(m, RINGMAIN_QUANTITY_DIAMETER, "mm");
    expect_label(m, RINGMAIN_QUANTITY_FLOW, "L/s");
    expect_label(m, RINGMAIN_QUANTITY_PRESSURE, "m");
    expect_label(m, RINGMAIN_QUANTITY_VELOCITY, "m/s");
    expect_label(m, RINGMAIN_QUANTITY_ROUGHNESS, "");
    uint32_t law;
    OK(ringmain_model_get_headloss(m, &law));
    EXPECT(law == RINGMAIN_HEADLOSS_HAZEN_WILLIAMS);

    /* Every id maps back to its index. */
    for (size_t i = 0; i < nodes; i++) {
        char *id = node_id(m, i);
        size_t back;
        OK(ringmain_model_node_index(m, id, &back));
        EXPECT(back == i);
        free(id);
    }

    ringmain_results *r = NULL;
    OK(ringmain_model_solve(m, &r));
    uint32_t iterations = 0, changes = 99;
    OK(ringmain_results_iterations(r, &iterations));
    OK(ringmain_results_status_changes(r, &changes));
    EXPECT(iterations >= 1 && iterations < 200);
    double mass, energy, head_change, flow_change;
    OK(ringmain_results_residuals(r, &mass, &energy));
    OK(ringmain_results_last_changes(r, &head_change, &flow_change));
    EXPECT(mass < 1e-6 && energy < 1e-3);
    /* Converged: heads settled, or (at the floating-point floor) every energy equation within the
       head tolerance. */
    EXPECT((head_change <= 1e-4 || energy <= 1e-4) && flow_change <= 1e-6);

    arrays a = read_arrays(r);
    EXPECT(a.nodes == nodes && a.links == links);
    check_balances(m, &a);

    /* Single values equal the arrays. */
    for (size_t i = 0; i < nodes; i++) {
        double h, p, d;
        OK(ringmain_results_node_head(r, i, &h));
        OK(ringmain_results_node_pressure(r, i, &p));
        OK(ringmain_results_node_demand(r, i, &d));
        EXPECT((isnan(h) && isnan(a.head[i])) || h == a.head[i]);
        EXPECT((isnan(p) && isnan(a.pressure[i])) || p == a.pressure[i]);
        EXPECT(d == a.demand[i]);
    }
    for (size_t k = 0; k < links; k++) {
        double q, v, hl;
        uint32_t st;
        OK(ringmain_results_link_flow(r, k, &q));
        OK(ringmain_results_link_velocity(r, k, &v));
        OK(ringmain_results_link_headloss(r, k, &hl));
        OK(ringmain_results_link_state(r, k, &st));
        /* Pumps have no velocity (NaN). */
        EXPECT(q == a.flow[k] && st == a.state[k]);
        EXPECT((isnan(v) && isnan(a.velocity[k])) || v == a.velocity[k]);
        const char *word = NULL, *reason = NULL;
        OK(ringmain_link_state_text(st, &word, &reason));
        EXPECT(word != NULL && reason != NULL);
        EXPECT(strcmp(word, "open") == 0 || strcmp(word, "closed") == 0 || strcmp(word, "active") == 0);
    }

    /* The Tanner's Lane boundary valve is shut in the demo model. */
    size_t p218, p218_in_results;
    OK(ringmain_model_link_index(m, "P-218", &p218));
    OK(ringmain_results_link_index(r, "P-218", &p218_in_results));
    EXPECT(p218 == p218_in_results);
    EXPECT(a.state[p218] == RINGMAIN_STATE_CLOSED);
    uint32_t status;
    OK(ringmain_model_get_link_status(m, p218, &status));
    EXPECT(status == RINGMAIN_STATUS_CLOSED);
    const char *word = NULL, *reason = NULL;
    OK(ringmain_link_state_text(RINGMAIN_STATE_CLOSED, &word, &reason));
    EXPECT(strcmp(word, "closed") == 0 && strcmp(reason, "") == 0);

    size_t n_warnings;
    OK(ringmain_results_warning_count(r, &n_warnings));
    for (size_t w = 0; w < n_warnings; w++) {
        char text[1024];
        OK(ringmain_results_warning(r, w, text, sizeof text, NULL));
        EXPECT(strlen(text) > 0);
    }

    /* Change a demand without rebuilding: more demand, lower head there; back, the same answer. */
    size_t j;
    OK(ringmain_model_node_index(m, "J-109", &j));
    double base;
    OK(ringmain_model_get_demand(m, j, &base));
    OK(ringmain_model_set_demand(m, j, base + 10.0));
    ringmain_results *r2 = NULL;
    OK(ringmain_model_solve(m, &r2));
    double h2;
    OK(ringmain_results_node_head(r2, j, &h2));
    EXPECT(h2 < a.head[j]);
    arrays b = read_arrays(r2);
    check_balances(m, &b);
    free_arrays(&b);
    ringmain_results_free(r2);
    OK(ringmain_model_set_demand(m, j, base));
    OK(ringmain_model_set_warm_start(m, true));
    OK(ringmain_model_solve(m, &r2));
    b = read_arrays(r2);
    expect_same(&a, &b, 1e-6);
    free_arrays(&b);
    ringmain_results_free(r2);

    /* Close and reopen a pipe. */
    OK(ringmain_model_set_link_status(m, p218, RINGMAIN_STATUS_OPEN));
    OK(ringmain_model_solve(m, &r2));
    uint32_t st;
    OK(ringmain_results_link_state(r2, p218, &st));
    EXPECT(st == RINGMAIN_STATE_OPEN);
    ringmain_results_free(r2);
    OK(ringmain_model_set_link_status(m, p218, RINGMAIN_STATUS_CLOSED));

    /* Save in both formats, read back, solve: the same answer. */
    const char *ext[] = {"json", "toml"};
    for (int f = 0; f < 2; f++) {
        char path[4096];
        snprintf(path, sizeof path, "%s/ringmain-basic-%ld.%s", argv[2], (long)getpid(), ext[f]);
        OK(ringmain_model_save(m, path));
        ringmain_model *back = NULL;
        OK(ringmain_model_load(path, &back));
        remove(path);
        OK(ringmain_model_solve(back, &r2));
        b = read_arrays(r2);
        expect_same(&a, &b, 1e-6);
        free_arrays(&b);
        ringmain_results_free(r2);
        ringmain_model_free(back);
    }
    /* The same through a buffer. */
    size_t needed = 0;
    FAILS_WITH(ringmain_model_write(m, RINGMAIN_FORMAT_JSON, NULL, 0, &needed), RINGMAIN_BUFFER_TOO_SMALL);
    char *json = malloc(needed);
    OK(ringmain_model_write(m, RINGMAIN_FORMAT_JSON, json, needed, &needed));
    ringmain_model *from_text = NULL;
    OK(ringmain_model_from_json(json, strlen(json), &from_text));
    free(json);
    size_t n2;
    OK(ringmain_model_node_count(from_text, &n2));
    EXPECT(n2 == nodes);
    ringmain_model_free(from_text);

    /* Results outlive their model. */
    ringmain_model_free(m);
    double h0;
    OK(ringmain_results_node_head(r, 0, &h0));
    EXPECT(h0 == a.head[0]);
    free_arrays(&a);
    ringmain_results_free(r);

    size_t live_models = 1, live_results = 1;
    OK(ringmain_live_handles(&live_models, &live_results));
    EXPECT(live_models == 0 && live_results == 0);
    report("test_basic");
    return 0;
}
