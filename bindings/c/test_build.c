/* Build networks from scratch through the C interface, with every kind of node and link, solve
 * them, and check the answers against formulas worked out here; change every kind of value
 * between solves.
 *
 *   test_build TMPDIR
 */
#define _POSIX_C_SOURCE 200809L
#include "check.h"

#include <unistd.h>

#define PI 3.14159265358979323846

static size_t node_of(const ringmain_model *m, const char *id) {
    size_t i;
    OK(ringmain_model_node_index(m, id, &i));
    return i;
}

static size_t link_of(const ringmain_model *m, const char *id) {
    size_t k;
    OK(ringmain_model_link_index(m, id, &k));
    return k;
}

static double value(ringmain_status (*get)(const ringmain_results *, size_t, double *), const ringmain_results *r,
                    size_t index) {
    double v;
    OK(get(r, index, &v));
    return v;
}

/* Head loss of a pipe by the Hazen-Williams velocity formula V = 0.849 C R^0.63 S^0.54 (SI; R the
 * hydraulic radius D/4, S the friction slope), solved for S: Williams & Hazen, Hydraulic Tables
 * (1920). Q in m3/s, L and D in m. */
static double hazen_williams_loss(double q, double l, double d, double c) {
    double v = fabs(q) / (PI * d * d / 4.0);
    return l * pow(v / (0.849 * c * pow(d / 4.0, 0.63)), 1.0 / 0.54);
}

/* The quadratic through three points, by Newton's divided differences, at x. */
static double quadratic(const double *x, const double *y, double at) {
    double d01 = (y[1] - y[0]) / (x[1] - x[0]);
    double d12 = (y[2] - y[1]) / (x[2] - x[1]);
    double d012 = (d12 - d01) / (x[2] - x[0]);
    return y[0] + d01 * (at - x[0]) + d012 * (at - x[0]) * (at - x[1]);
}

static ringmain_results *solve(ringmain_model *m) {
    ringmain_results *r = NULL;
    OK(ringmain_model_solve(m, &r));
    return r;
}

static void every_kind(void) {
    ringmain_model *m = NULL;
    OK(ringmain_model_new(RINGMAIN_LENGTH_M, RINGMAIN_DIAMETER_MM, RINGMAIN_FLOW_LPS, RINGMAIN_PRESSURE_M,
                          RINGMAIN_ROUGHNESS_MM, RINGMAIN_HEADLOSS_HAZEN_WILLIAMS, &m));
    size_t index = 99;
    OK(ringmain_model_add_reservoir(m, "Lake", 100.0, &index));
    EXPECT(index == 0);
    OK(ringmain_model_add_reservoir(m, "Well", 20.0, NULL));
    OK(ringmain_model_add_reservoir(m, "Sump", 15.0, NULL));
    OK(ringmain_model_add_tank(m, "Tower", 60.0, 5.0, 1.0, 10.0, NAN, NULL));
    OK(ringmain_model_add_junction(m, "J-1", 50.0, 10.0, &index));
    EXPECT(index == 4);
    OK(ringmain_model_add_junction(m, "J-2", 40.0, 5.0, NULL));
    OK(ringmain_model_add_junction(m, "J-3", 45.0, 1.0, NULL));
    OK(ringmain_model_add_junction(m, "J-5", 45.0, 2.0, NULL));
    OK(ringmain_model_add_junction(m, "J-6", 44.0, 2.0, NULL));
    OK(ringmain_model_add_junction(m, "J-7", 30.0, 0.0, NULL));
    OK(ringmain_model_add_junction(m, "J-8", 12.0, 0.0, NULL));

    OK(ringmain_model_add_pipe(m, "P-1", "Lake", "J-1", 1000.0, 300.0, 130.0, 0.0, false, &index));
    EXPECT(index == 0);
    OK(ringmain_model_add_valve(m, "V-reducing", "J-1", "J-2", RINGMAIN_VALVE_PRESSURE_REDUCING, 200.0, 30.0, 0.5, NULL));
    OK(ringmain_model_add_valve(m, "V-flow", "J-1", "J-3", RINGMAIN_VALVE_FLOW_CONTROL, 150.0, 4.0, 0.5, NULL));
    OK(ringmain_model_add_pipe(m, "P-3", "J-3", "Tower", 500.0, 150.0, 120.0, 0.0, false, NULL));
    OK(ringmain_model_add_valve(m, "V-sustaining", "J-1", "J-5", RINGMAIN_VALVE_PRESSURE_SUSTAINING, 150.0, 40.0, 0.5, NULL));
    OK(ringmain_model_add_valve(m, "V-throttle", "J-5", "J-6", RINGMAIN_VALVE_THROTTLE, 100.0, 10.0, 0.0, NULL));
    OK(ringmain_model_add_pipe(m, "P-6", "J-6", "Tower", 300.0, 100.0, 120.0, 0.0, false, NULL));
    const double flows[] = {0.0, 10.0, 20.0};
    const double heads[] = {60.0, 55.0, 40.0};
    OK(ringmain_model_add_pump_curve(m, "PU-1", "Well", "J-7", flows, heads, 3, 1.0, NULL));
    OK(ringmain_model_add_pipe(m, "P-7", "J-7", "Tower", 800.0, 200.0, 130.0, 0.0, true, NULL));
    OK(ringmain_model_add_pump_power(m, "PU-2", "Sump", "J-8", 5.0, 1.0, NULL));
    OK(ringmain_model_add_pipe(m, "P-8", "J-8", "J-7", 300.0, 150.0, 130.0, 0.0, false, NULL));

    size_t nodes, links;
    OK(ringmain_model_node_count(m, &nodes));
    OK(ringmain_model_link_count(m, &links));
    EXPECT(nodes == 11 && links == 11);
    uint32_t kind;
    OK(ringmain_model_node_kind(m, node_of(m, "Tower"), &kind));
    EXPECT(kind == RINGMAIN_NODE_TANK);
    OK(ringmain_model_link_kind(m, link_of(m, "PU-2"), &kind));
    EXPECT(kind == RINGMAIN_LINK_PUMP);
    OK(ringmain_model_link_kind(m, link_of(m, "V-throttle"), &kind));
    EXPECT(kind == RINGMAIN_LINK_VALVE);
    OK(ringmain_model_get_valve_type(m, link_of(m, "V-sustaining"), &kind));
    EXPECT(kind == RINGMAIN_VALVE_PRESSURE_SUSTAINING);
    uint32_t status;
    OK(ringmain_model_get_link_status(m, link_of(m, "V-reducing"), &status));
    EXPECT(status == RINGMAIN_STATUS_AUTOMATIC);
    OK(ringmain_model_validate(m));

    ringmain_results *r = solve(m);
    uint32_t state;

    /* P-1 carries the whole demand of the Lake side; its loss follows Hazen-Williams. */
    size_t p1 = link_of(m, "P-1");
    double q1 = value(ringmain_results_link_flow, r, p1);
    EXPECT(q1 > 0.0);
    EXPECT_NEAR(value(ringmain_results_link_headloss, r, p1), hazen_williams_loss(q1 / 1000.0, 1000.0, 0.3, 130.0),
                1e-6);
    /* Mean velocity Q / A. */
    EXPECT_NEAR(value(ringmain_results_link_velocity, r, p1), q1 / 1000.0 / (PI * 0.3 * 0.3 / 4.0), 1e-9);

    /* The pressure-reducing valve regulates: J-2 holds its setting of 30 m. */
    OK(ringmain_results_link_state(r, link_of(m, "V-reducing"), &state));
    EXPECT(state == RINGMAIN_STATE_ACTIVE);
    EXPECT_NEAR(value(ringmain_results_node_pressure, r, node_of(m, "J-2")), 30.0, 1e-6);
    EXPECT_NEAR(value(ringmain_results_link_flow, r, link_of(m, "V-reducing")), 5.0, 1e-6);

    /* The flow-control valve holds 4 L/s; what J-3 does not use fills the tower. */
    OK(ringmain_results_link_state(r, link_of(m, "V-flow"), &state));
    EXPECT(state == RINGMAIN_STATE_ACTIVE);
    EXPECT_NEAR(value(ringmain_results_link_flow, r, link_of(m, "V-flow")), 4.0, 1e-6);
    EXPECT_NEAR(value(ringmain_results_link_flow, r, link_of(m, "P-3")), 3.0, 1e-6);

    /* The pressure-sustaining valve: J-1 stands above 40 m, so it is fully open. */
    OK(ringmain_results_link_state(r, link_of(m, "V-sustaining"), &state));
    EXPECT(state == RINGMAIN_STATE_OPEN_ABOVE_SETTING);
    const char *word, *reason;
    OK(ringmain_link_state_text(state, &word, &reason));
    EXPECT(strcmp(word, "open") == 0 && strlen(reason) > 0);
    EXPECT(value(ringmain_results_node_pressure, r, node_of(m, "J-1")) > 40.0);
    /* The throttle valve loses K V^2 / 2g (g = 9.80665 m/s2, CGPM 1901). */
    size_t throttle = link_of(m, "V-throttle");
    double q_throttle = value(ringmain_results_link_flow, r, throttle);
    EXPECT(q_throttle > 0.0);
    EXPECT_NEAR(value(ringmain_results_link_flow, r, link_of(m, "V-sustaining")), q_throttle + 2.0, 1e-6);
    double v_throttle = q_throttle / 1000.0 / (PI * 0.1 * 0.1 / 4.0);
    EXPECT_NEAR(value(ringmain_results_link_headloss, r, throttle), 10.0 * v_throttle * v_throttle / (2.0 * 9.80665), 1e-6);

    /* The curve pump lifts along the quadratic through its three points. */
    size_t pu1 = link_of(m, "PU-1");
    double q_pump = value(ringmain_results_link_flow, r, pu1);
    EXPECT(q_pump > 0.0 && q_pump < 20.0);
    EXPECT_NEAR(value(ringmain_results_pump_head, r, pu1), quadratic(flows, heads, q_pump), 1e-6);
    double hydraulic, shaft, efficiency;
    OK(ringmain_results_pump_power(r, pu1, &hydraulic, &shaft, &efficiency));
    EXPECT_NEAR(efficiency, 75.0, 1e-12);
    EXPECT_NEAR(shaft, hydraulic / 0.75, 1e-9);
    /* The power pump delivers its 5 kW of hydraulic power (rho g Q H). */
    OK(ringmain_results_pump_power(r, link_of(m, "PU-2"), &hydraulic, &shaft, &efficiency));
    EXPECT_NEAR(hydraulic, 5.0, 1e-6);
    ringmain_results_free(r);

    /* Change every kind of value, solve again each time, without rebuilding. */
    OK(ringmain_model_set_valve_setting(m, link_of(m, "V-reducing"), 25.0));
    double setting;
    OK(ringmain_model_get_valve_setting(m, link_of(m, "V-reducing"), &setting));
    EXPECT(setting == 25.0);
    OK(ringmain_model_set_valve_setting(m, link_of(m, "V-flow"), 2.5));
    OK(ringmain_model_set_pump_efficiency(m, pu1, 80.0));
    const double eff_flows[] = {5.0, 10.0, 15.0};
    const double eff_percent[] = {60.0, 70.0, 65.0};
    OK(ringmain_model_set_pump_efficiency_curve(m, link_of(m, "PU-2"), eff_flows, eff_percent, 3));
    r = solve(m);
    EXPECT_NEAR(value(ringmain_results_node_pressure, r, node_of(m, "J-2")), 25.0, 1e-6);
    EXPECT_NEAR(value(ringmain_results_link_flow, r, link_of(m, "V-flow")), 2.5, 1e-6);
    OK(ringmain_results_pump_power(r, pu1, &hydraulic, &shaft, &efficiency));
    EXPECT_NEAR(efficiency, 80.0, 1e-12);
    ringmain_results_free(r);

    /* A valve set open no longer regulates; automatic again, it does. */
    OK(ringmain_model_set_link_status(m, link_of(m, "V-reducing"), RINGMAIN_STATUS_OPEN));
    OK(ringmain_model_get_link_status(m, link_of(m, "V-reducing"), &status));
    EXPECT(status == RINGMAIN_STATUS_OPEN);
    r = solve(m);
    OK(ringmain_results_link_state(r, link_of(m, "V-reducing"), &state));
    EXPECT(state == RINGMAIN_STATE_OPEN);
    EXPECT(value(ringmain_results_node_pressure, r, node_of(m, "J-2")) > 30.0);
    ringmain_results_free(r);
    OK(ringmain_model_set_link_status(m, link_of(m, "V-reducing"), RINGMAIN_STATUS_AUTOMATIC));

    /* A stopped pump carries nothing. */
    OK(ringmain_model_set_pump_speed(m, pu1, 0.0));
    double speed;
    OK(ringmain_model_get_pump_speed(m, pu1, &speed));
    EXPECT(speed == 0.0);
    r = solve(m);
    OK(ringmain_results_link_state(r, pu1, &state));
    EXPECT(state == RINGMAIN_STATE_PUMP_STOPPED);
    EXPECT(value(ringmain_results_link_flow, r, pu1) == 0.0);
    ringmain_results_free(r);
    OK(ringmain_model_set_pump_speed(m, pu1, 0.9));

    /* Fixed heads, pipe data. */
    OK(ringmain_model_set_reservoir_head(m, node_of(m, "Lake"), 105.0));
    OK(ringmain_model_set_tank_level(m, node_of(m, "Tower"), 7.5));
    OK(ringmain_model_set_pipe_diameter(m, p1, 250.0));
    OK(ringmain_model_set_pipe_roughness(m, p1, 110.0));
    double got;
    OK(ringmain_model_get_pipe_diameter(m, p1, &got));
    EXPECT(got == 250.0);
    OK(ringmain_model_get_pipe_roughness(m, p1, &got));
    EXPECT(got == 110.0);
    OK(ringmain_model_get_tank_level(m, node_of(m, "Tower"), &got));
    EXPECT(got == 7.5);
    FAILS_WITH(ringmain_model_set_tank_level(m, node_of(m, "Tower"), 12.0), RINGMAIN_MODEL_INVALID);
    EXPECT_ERROR_CONTAINS("node 'Tower': key 'level': is above max_level");
    r = solve(m);
    EXPECT_NEAR(value(ringmain_results_node_head, r, node_of(m, "Lake")), 105.0, 1e-12);
    EXPECT_NEAR(value(ringmain_results_node_head, r, node_of(m, "Tower")), 67.5, 1e-12);
    q1 = value(ringmain_results_link_flow, r, p1);
    EXPECT_NEAR(value(ringmain_results_link_headloss, r, p1), hazen_williams_loss(q1 / 1000.0, 1000.0, 0.25, 110.0),
                1e-6);

    /* Adding a node and a link after a solve: the next solve analyses the new structure. */
    OK(ringmain_model_add_junction(m, "J-9", 48.0, 1.5, NULL));
    OK(ringmain_model_add_pipe(m, "P-9", "J-1", "J-9", 200.0, 100.0, 120.0, 0.0, false, NULL));
    ringmain_results *r2 = solve(m);
    size_t n2;
    OK(ringmain_results_node_count(r2, &n2));
    EXPECT(n2 == 12);
    EXPECT_NEAR(value(ringmain_results_link_flow, r2, link_of(m, "P-9")), 1.5, 1e-6);
    /* The earlier results keep the earlier structure. */
    OK(ringmain_results_node_count(r, &n2));
    EXPECT(n2 == 11);
    FAILS_WITH(ringmain_results_node_index(r, "J-9", &n2), RINGMAIN_NOT_FOUND);
    ringmain_results_free(r);
    ringmain_results_free(r2);
    ringmain_model_free(m);
}

/* One pipe from a reservoir to a junction, in the units chosen. */
static ringmain_model *single_pipe(uint32_t length, uint32_t diameter, uint32_t flow, uint32_t pressure,
                                   uint32_t roughness, double head, double pipe_length, double pipe_diameter,
                                   double pipe_roughness, double elevation, double demand) {
    ringmain_model *m = NULL;
    OK(ringmain_model_new(length, diameter, flow, pressure, roughness, RINGMAIN_HEADLOSS_DARCY_WEISBACH, &m));
    OK(ringmain_model_add_reservoir(m, "R", head, NULL));
    OK(ringmain_model_add_junction(m, "J", elevation, demand, NULL));
    OK(ringmain_model_add_pipe(m, "P", "R", "J", pipe_length, pipe_diameter, pipe_roughness, 0.0, false, NULL));
    return m;
}

static void units(const char *tmpdir) {
    /* The same pipe in SI and in US customary units. Exact factors: 1 ft = 0.3048 m, 1 in =
     * 0.0254 m (international yard and pound, 1959), 1 US gal = 3.785411784 L. */
    ringmain_model *si = single_pipe(RINGMAIN_LENGTH_M, RINGMAIN_DIAMETER_MM, RINGMAIN_FLOW_LPS, RINGMAIN_PRESSURE_M,
                                     RINGMAIN_ROUGHNESS_MM, 100.0, 1000.0, 300.0, 0.1, 20.0, 50.0);
    double ft = 0.3048, in = 0.0254, gpm = 3.785411784 / 60.0;
    ringmain_model *us = single_pipe(RINGMAIN_LENGTH_FT, RINGMAIN_DIAMETER_IN, RINGMAIN_FLOW_GPM,
                                     RINGMAIN_PRESSURE_PSI, RINGMAIN_ROUGHNESS_IN, 100.0 / ft, 1000.0 / ft,
                                     0.3 / in, 0.0001 / in, 20.0 / ft, 50.0 / gpm);
    char label[16];
    OK(ringmain_model_unit_label(us, RINGMAIN_QUANTITY_FLOW, label, sizeof label, NULL));
    EXPECT(strcmp(label, "gpm") == 0);
    OK(ringmain_model_unit_label(us, RINGMAIN_QUANTITY_PRESSURE, label, sizeof label, NULL));
    EXPECT(strcmp(label, "psi") == 0);
    OK(ringmain_model_unit_label(us, RINGMAIN_QUANTITY_ROUGHNESS, label, sizeof label, NULL));
    EXPECT(strcmp(label, "in") == 0);
    OK(ringmain_model_unit_label(us, RINGMAIN_QUANTITY_POWER, label, sizeof label, NULL));
    EXPECT(strcmp(label, "hp") == 0);
    OK(ringmain_model_unit_label(us, RINGMAIN_QUANTITY_VELOCITY, label, sizeof label, NULL));
    EXPECT(strcmp(label, "ft/s") == 0);

    ringmain_results *rs = solve(si), *ru = solve(us);
    double h_si = value(ringmain_results_node_head, rs, 1), h_us = value(ringmain_results_node_head, ru, 1);
    EXPECT_NEAR(h_us * ft, h_si, 1e-9);
    EXPECT_NEAR(value(ringmain_results_link_flow, ru, 0) * gpm, value(ringmain_results_link_flow, rs, 0), 1e-9);
    EXPECT_NEAR(value(ringmain_results_link_velocity, ru, 0) * ft, value(ringmain_results_link_velocity, rs, 0),
                1e-9);
    /* One metre of water at 20 deg C is about 1.42 psi (common practice: 9.79 kPa / 6.895 kPa). */
    double p_si = value(ringmain_results_node_pressure, rs, 1), p_us = value(ringmain_results_node_pressure, ru, 1);
    EXPECT_NEAR(p_us / p_si, 1.4198, 1e-3);

    /* Save the US model and read it back: same units, same answer. */
    char path[4096];
    snprintf(path, sizeof path, "%s/ringmain-build-%ld.toml", tmpdir, (long)getpid());
    OK(ringmain_model_save(us, path));
    ringmain_model *back = NULL;
    OK(ringmain_model_load(path, &back));
    remove(path);
    OK(ringmain_model_unit_label(back, RINGMAIN_QUANTITY_FLOW, label, sizeof label, NULL));
    EXPECT(strcmp(label, "gpm") == 0);
    uint32_t law;
    OK(ringmain_model_get_headloss(back, &law));
    EXPECT(law == RINGMAIN_HEADLOSS_DARCY_WEISBACH);
    ringmain_results *rb = solve(back);
    EXPECT_NEAR(value(ringmain_results_node_head, rb, 1), h_us, 1e-9);

    /* A warmer water is less viscous: less friction, a higher head at the junction. */
    OK(ringmain_model_set_water_temperature(si, 40.0));
    ringmain_results *warm = solve(si);
    EXPECT(value(ringmain_results_node_head, warm, 1) > h_si);

    ringmain_results_free(warm);
    ringmain_results_free(rb);
    ringmain_results_free(rs);
    ringmain_results_free(ru);
    ringmain_model_free(back);
    ringmain_model_free(si);
    ringmain_model_free(us);
}

int main(int argc, char **argv) {
    if (argc != 2) {
        fprintf(stderr, "usage: %s TMPDIR\n", argv[0]);
        return 2;
    }
    every_kind();
    units(argv[1]);
    size_t live_models = 1, live_results = 1;
    OK(ringmain_live_handles(&live_models, &live_results));
    EXPECT(live_models == 0 && live_results == 0);
    report("test_build");
    return 0;
}
