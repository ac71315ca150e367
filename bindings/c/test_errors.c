/* Error paths: bad model text, NULL pointers, indices past the end, integers that name no
 * constant, small buffers, files that cannot be read or written, a solve that cannot converge.
 * Every failure must return its code, leave the outputs untouched and say what is wrong.
 *
 *   test_errors MODEL.toml TMPDIR
 */
#define _XOPEN_SOURCE 700
#include "check.h"

#include <dirent.h>
#include <signal.h>
#include <sys/resource.h>

static ringmain_model *from_toml(const char *text) {
    ringmain_model *m = NULL;
    OK(ringmain_model_from_toml(text, strlen(text), &m));
    return m;
}

static const char *GOOD =
    "[[nodes]]\nid = \"Source\"\nkind = \"reservoir\"\nhead = 50.0\n"
    "[[nodes]]\nid = \"J-1\"\nelevation = 10.0\ndemand = 5.0\n"
    "[[links]]\nid = \"P-1\"\nfrom = \"Source\"\nto = \"J-1\"\nlength = 400.0\ndiameter = 150\nroughness = 120\n";

static void bad_model_text(void) {
    ringmain_model *m = (ringmain_model *)&check_count; /* a sentinel: must stay as it is */
    ringmain_model *const sentinel = m;

    /* A pipe without roughness. */
    const char *missing =
        "[[nodes]]\nid = \"Source\"\nkind = \"reservoir\"\nhead = 50.0\n"
        "[[nodes]]\nid = \"J-1\"\nelevation = 10.0\n"
        "[[links]]\nid = \"P-1\"\nfrom = \"Source\"\nto = \"J-1\"\nlength = 400.0\ndiameter = 150\n";
    FAILS_WITH(ringmain_model_from_toml(missing, strlen(missing), &m), RINGMAIN_MODEL_INVALID);
    EXPECT(m == sentinel);
    EXPECT_ERROR_CONTAINS("TOML text");
    EXPECT_ERROR_CONTAINS("link 'P-1'");
    EXPECT_ERROR_CONTAINS("key 'roughness'");
    EXPECT_ERROR_CONTAINS("is missing");

    /* A misspelt key gets a suggestion. */
    const char *typo =
        "[[nodes]]\nid = \"Source\"\nkind = \"reservoir\"\nhead = 50.0\n"
        "[[nodes]]\nid = \"J-1\"\nelevation = 10.0\ndemnd = 5.0\n";
    FAILS_WITH(ringmain_model_from_toml(typo, strlen(typo), &m), RINGMAIN_MODEL_INVALID);
    EXPECT_ERROR_CONTAINS("node 'J-1'");
    EXPECT_ERROR_CONTAINS("key 'demnd'");
    EXPECT_ERROR_CONTAINS("did you mean 'demand'?");

    /* A negative length. */
    const char *negative =
        "{\"nodes\": [{\"id\": \"R\", \"kind\": \"reservoir\", \"head\": 10},"
        " {\"id\": \"J\", \"elevation\": 0}],"
        " \"links\": [{\"id\": \"P\", \"from\": \"R\", \"to\": \"J\", \"length\": -5, \"diameter\": 100,"
        " \"roughness\": 100}]}";
    FAILS_WITH(ringmain_model_from_json(negative, strlen(negative), &m), RINGMAIN_MODEL_INVALID);
    EXPECT_ERROR_CONTAINS("JSON text");
    EXPECT_ERROR_CONTAINS("link 'P': key 'length': must be greater than zero");

    /* Syntax errors give line and column. */
    const char *syntax = "[[nodes]]\nid = \"A\"\nelevation = \n";
    FAILS_WITH(ringmain_model_from_toml(syntax, strlen(syntax), &m), RINGMAIN_MODEL_INVALID);
    EXPECT_ERROR_CONTAINS("TOML text:3:");

    /* Text that is not UTF-8. */
    const char bytes[] = {'t', 'i', 't', 'l', 'e', ' ', '=', ' ', '"', (char)0xff, '"', '\n'};
    FAILS_WITH(ringmain_model_from_toml(bytes, sizeof bytes, &m), RINGMAIN_MODEL_INVALID);
    EXPECT_ERROR_CONTAINS("not UTF-8");

    /* Empty text. */
    FAILS_WITH(ringmain_model_from_toml(NULL, 0, &m), RINGMAIN_MODEL_INVALID);
    EXPECT_ERROR_CONTAINS("empty");
    EXPECT(m == sentinel);

    /* A model without a fixed head loads (it may still be built on) but does not validate. */
    const char *no_source = "[[nodes]]\nid = \"J-1\"\nelevation = 10.0\n";
    FAILS_WITH(ringmain_model_from_toml(no_source, strlen(no_source), &m), RINGMAIN_MODEL_INVALID);
    EXPECT_ERROR_CONTAINS("no reservoir or tank");
}

static void null_pointers(void) {
    ringmain_model *m = from_toml(GOOD);
    ringmain_results *r = NULL;
    size_t n = 12345;
    double x = 42.0;

    FAILS_WITH(ringmain_model_load(NULL, &m), RINGMAIN_NULL_POINTER);
    EXPECT_ERROR_CONTAINS("argument 'path' is NULL");
    FAILS_WITH(ringmain_model_from_toml(GOOD, strlen(GOOD), NULL), RINGMAIN_NULL_POINTER);
    FAILS_WITH(ringmain_model_from_toml(NULL, 10, &m), RINGMAIN_NULL_POINTER);
    FAILS_WITH(ringmain_model_node_count(NULL, &n), RINGMAIN_NULL_POINTER);
    EXPECT_ERROR_CONTAINS("argument 'model' is NULL");
    FAILS_WITH(ringmain_model_node_count(m, NULL), RINGMAIN_NULL_POINTER);
    FAILS_WITH(ringmain_model_node_index(m, NULL, &n), RINGMAIN_NULL_POINTER);
    EXPECT_ERROR_CONTAINS("argument 'id' is NULL");
    FAILS_WITH(ringmain_model_solve(NULL, &r), RINGMAIN_NULL_POINTER);
    FAILS_WITH(ringmain_model_solve(m, NULL), RINGMAIN_NULL_POINTER);
    FAILS_WITH(ringmain_model_set_demand(NULL, 1, 2.0), RINGMAIN_NULL_POINTER);
    FAILS_WITH(ringmain_model_add_pipe(m, "P-2", NULL, "J-1", 1, 1, 1, 0, false, NULL), RINGMAIN_NULL_POINTER);
    EXPECT_ERROR_CONTAINS("argument 'from' is NULL");
    FAILS_WITH(ringmain_results_node_head(NULL, 0, &x), RINGMAIN_NULL_POINTER);
    FAILS_WITH(ringmain_results_heads(NULL, &x, 1, &n), RINGMAIN_NULL_POINTER);
    FAILS_WITH(ringmain_link_state_text(RINGMAIN_STATE_OPEN, NULL, NULL), RINGMAIN_OK);

    OK(ringmain_model_solve(m, &r));
    /* A buffer of the right length but NULL. */
    FAILS_WITH(ringmain_results_heads(r, NULL, 2, &n), RINGMAIN_NULL_POINTER);
    FAILS_WITH(ringmain_results_residuals(r, &x, NULL), RINGMAIN_NULL_POINTER);
    EXPECT_ERROR_CONTAINS("argument 'energy' is NULL");
    EXPECT(x == 42.0); /* outputs untouched on failure */
    FAILS_WITH(ringmain_model_node_id(m, 0, NULL, 50, NULL), RINGMAIN_NULL_POINTER);

    /* Freeing NULL does nothing. */
    ringmain_model_free(NULL);
    ringmain_results_free(NULL);
    ringmain_results_free(r);
    ringmain_model_free(m);
}

static void out_of_range_and_wrong_kind(void) {
    ringmain_model *m = from_toml(GOOD);
    ringmain_results *r = NULL;
    OK(ringmain_model_solve(m, &r));
    double x = 42.0;
    char buf[64];

    FAILS_WITH(ringmain_model_set_demand(m, 2, 1.0), RINGMAIN_OUT_OF_RANGE);
    EXPECT_ERROR_CONTAINS("node index 2 is out of range (valid: 0 to 1)");
    FAILS_WITH(ringmain_model_set_demand(m, (size_t)-1, 1.0), RINGMAIN_OUT_OF_RANGE);
    FAILS_WITH(ringmain_model_set_pipe_roughness(m, 1, 100.0), RINGMAIN_OUT_OF_RANGE);
    EXPECT_ERROR_CONTAINS("link index 1 is out of range (valid: 0 to 0)");
    FAILS_WITH(ringmain_model_node_id(m, 7, buf, sizeof buf, NULL), RINGMAIN_OUT_OF_RANGE);
    FAILS_WITH(ringmain_results_node_head(r, 2, &x), RINGMAIN_OUT_OF_RANGE);
    FAILS_WITH(ringmain_results_link_flow(r, 1, &x), RINGMAIN_OUT_OF_RANGE);
    FAILS_WITH(ringmain_results_warning(r, 0, buf, sizeof buf, NULL), RINGMAIN_OUT_OF_RANGE);
    EXPECT_ERROR_CONTAINS("there are no warnings");
    EXPECT(x == 42.0);

    /* The right index but the wrong kind of element. */
    FAILS_WITH(ringmain_model_set_demand(m, 0, 1.0), RINGMAIN_WRONG_KIND);
    EXPECT_ERROR_CONTAINS("node 'Source': key 'demand': applies to junctions only; this one is a reservoir");
    FAILS_WITH(ringmain_model_set_reservoir_head(m, 1, 1.0), RINGMAIN_WRONG_KIND);
    FAILS_WITH(ringmain_model_set_tank_level(m, 0, 1.0), RINGMAIN_WRONG_KIND);
    FAILS_WITH(ringmain_model_set_pump_speed(m, 0, 1.0), RINGMAIN_WRONG_KIND);
    EXPECT_ERROR_CONTAINS("link 'P-1': key 'speed': applies to pumps only; this one is a pipe");
    FAILS_WITH(ringmain_model_set_valve_setting(m, 0, 1.0), RINGMAIN_WRONG_KIND);
    FAILS_WITH(ringmain_model_get_valve_setting(m, 0, &x), RINGMAIN_WRONG_KIND);
    FAILS_WITH(ringmain_results_pump_head(r, 0, &x), RINGMAIN_WRONG_KIND);
    EXPECT(x == 42.0);

    /* Values the model rejects name the element and key. */
    FAILS_WITH(ringmain_model_set_demand(m, 1, NAN), RINGMAIN_MODEL_INVALID);
    EXPECT_ERROR_CONTAINS("node 'J-1': key 'demand': must be a number, found NaN");
    FAILS_WITH(ringmain_model_set_pipe_diameter(m, 0, -100.0), RINGMAIN_MODEL_INVALID);
    EXPECT_ERROR_CONTAINS("link 'P-1': key 'diameter': must be greater than zero");
    FAILS_WITH(ringmain_model_set_pipe_roughness(m, 0, INFINITY), RINGMAIN_MODEL_INVALID);
    FAILS_WITH(ringmain_model_set_water_temperature(m, 150.0), RINGMAIN_MODEL_INVALID);
    EXPECT_ERROR_CONTAINS("[hydraulics]: key 'water_temperature'");
    FAILS_WITH(ringmain_model_add_junction(m, "J-1", 0.0, 0.0, NULL), RINGMAIN_MODEL_INVALID);
    EXPECT_ERROR_CONTAINS("node 'J-1': key 'id': is used by another node");
    FAILS_WITH(ringmain_model_add_pipe(m, "P-2", "J-1", "J-7", 10, 100, 100, 0, false, NULL), RINGMAIN_NOT_FOUND);
    EXPECT_ERROR_CONTAINS("link 'P-2': key 'to': refers to node 'J-7', which is not defined (did you mean 'J-1'?)");
    size_t index = 99;
    FAILS_WITH(ringmain_model_link_index(m, "P-9", &index), RINGMAIN_NOT_FOUND);
    EXPECT_ERROR_CONTAINS("no link has the id 'P-9' (did you mean 'P-1'?)");
    FAILS_WITH(ringmain_results_node_index(r, "Sauce", &index), RINGMAIN_NOT_FOUND);
    EXPECT(index == 99);

    /* The model is unchanged by all of that. */
    double demand;
    OK(ringmain_model_get_demand(m, 1, &demand));
    EXPECT(demand == 5.0);
    size_t links;
    OK(ringmain_model_link_count(m, &links));
    EXPECT(links == 1);

    ringmain_results_free(r);
    ringmain_model_free(m);
}

static void bad_integers(void) {
    ringmain_model *m = NULL;
    FAILS_WITH(ringmain_model_new(0, 0, 99, 0, 0, 0, &m), RINGMAIN_INVALID_ARGUMENT);
    EXPECT_ERROR_CONTAINS("argument 'flow_unit': 99 is not a valid flow unit");
    EXPECT(m == NULL);
    FAILS_WITH(ringmain_model_new(0, 0, 0, 0, 0, 2, &m), RINGMAIN_INVALID_ARGUMENT);
    FAILS_WITH(ringmain_model_new(0xFFFFFFFFu, 0, 0, 0, 0, 0, &m), RINGMAIN_INVALID_ARGUMENT);
    m = from_toml(GOOD);
    FAILS_WITH(ringmain_model_set_link_status(m, 0, 42), RINGMAIN_INVALID_ARGUMENT);
    EXPECT_ERROR_CONTAINS("42 is not a valid link status; expected one of 0 (RINGMAIN_STATUS_OPEN)");
    FAILS_WITH(ringmain_model_set_link_status(m, 0, RINGMAIN_STATUS_AUTOMATIC), RINGMAIN_INVALID_ARGUMENT);
    EXPECT_ERROR_CONTAINS("link 'P-1': key 'status': \"automatic\" applies to valves only");
    FAILS_WITH(ringmain_model_add_valve(m, "V-1", "Source", "J-1", 9, 100, 30, 0, NULL), RINGMAIN_INVALID_ARGUMENT);
    EXPECT_ERROR_CONTAINS("argument 'valve_type': 9 is not a valid valve type");
    char buf[16];
    FAILS_WITH(ringmain_model_unit_label(m, 77, buf, sizeof buf, NULL), RINGMAIN_INVALID_ARGUMENT);
    FAILS_WITH(ringmain_model_write(m, 5, buf, sizeof buf, NULL), RINGMAIN_INVALID_ARGUMENT);
    const char *word = "untouched";
    FAILS_WITH(ringmain_link_state_text(77, &word, NULL), RINGMAIN_INVALID_ARGUMENT);
    EXPECT(strcmp(word, "untouched") == 0);

    /* Every status code has a text; an integer that is none gets one too. */
    for (uint32_t s = 0; s <= RINGMAIN_SOLVE_FAILED; s++) {
        EXPECT(strlen(ringmain_status_text(s)) > 0);
        EXPECT(strcmp(ringmain_status_text(s), "unknown status code") != 0);
    }
    EXPECT(strcmp(ringmain_status_text(12345), "unknown status code") == 0);
    ringmain_model_free(m);
}

/* A save that fails half-way (the process's file-size limit reached after 64 bytes) leaves the
 * file it would have replaced as it was, and no partial file beside it. */
static void save_that_fails_half_way(const char *model_path, const char *tmpdir) {
    char dir[4096], path[4200];
    snprintf(dir, sizeof dir, "%s/half-way", tmpdir);
    snprintf(path, sizeof path, "%s/kept.toml", dir);
    char command[4300];
    snprintf(command, sizeof command, "mkdir -p '%s'", dir);
    EXPECT(system(command) == 0);
    const char *before = "# the model as saved before\n";
    FILE *f = fopen(path, "w");
    EXPECT(f != NULL);
    fputs(before, f);
    fclose(f);
    ringmain_model *demo = NULL;
    OK(ringmain_model_load(model_path, &demo));
    struct rlimit old, small;
    EXPECT(getrlimit(RLIMIT_FSIZE, &old) == 0);
    small = old;
    small.rlim_cur = 64;
    signal(SIGXFSZ, SIG_IGN);
    EXPECT(setrlimit(RLIMIT_FSIZE, &small) == 0);
    ringmain_status s = ringmain_model_save(demo, path);
    EXPECT(setrlimit(RLIMIT_FSIZE, &old) == 0);
    EXPECT(s == RINGMAIN_IO);
    EXPECT_ERROR_CONTAINS("cannot write the file");
    char kept[256] = {0};
    f = fopen(path, "r");
    EXPECT(f != NULL);
    size_t n = fread(kept, 1, sizeof kept - 1, f);
    fclose(f);
    EXPECT(n == strlen(before) && strcmp(kept, before) == 0);
    DIR *d = opendir(dir);
    EXPECT(d != NULL);
    int files = 0;
    for (struct dirent *e = readdir(d); e != NULL; e = readdir(d)) {
        if (strcmp(e->d_name, ".") != 0 && strcmp(e->d_name, "..") != 0) {
            files++;
            EXPECT(strcmp(e->d_name, "kept.toml") == 0);
        }
    }
    closedir(d);
    EXPECT(files == 1);
    /* Without the limit the same save replaces the file. */
    OK(ringmain_model_save(demo, path));
    ringmain_model *back = NULL;
    OK(ringmain_model_load(path, &back));
    ringmain_model_free(back);
    ringmain_model_free(demo);
}

static void buffers_files_and_solves(const char *model_path, const char *tmpdir) {
    ringmain_model *m = from_toml(GOOD);

    /* The last error in a buffer too small: cut short like snprintf, the full size reported,
     * the message kept. */
    FAILS_WITH(ringmain_model_set_demand(m, 5, 1.0), RINGMAIN_OUT_OF_RANGE);
    char tiny[5] = "abcd";
    size_t needed = 0;
    FAILS_WITH(ringmain_last_error(tiny, sizeof tiny, &needed), RINGMAIN_BUFFER_TOO_SMALL);
    EXPECT(strcmp(tiny, "node") == 0);
    EXPECT(needed == strlen("node index 5 is out of range (valid: 0 to 1)") + 1);
    EXPECT_ERROR_CONTAINS("node index 5 is out of range");
    char id[3];
    FAILS_WITH(ringmain_model_node_id(m, 0, id, sizeof id, &needed), RINGMAIN_BUFFER_TOO_SMALL);
    EXPECT(needed == strlen("Source") + 1);

    /* Files. */
    ringmain_model *other = NULL;
    FAILS_WITH(ringmain_model_load("/nonexistent/dir/model.toml", &other), RINGMAIN_IO);
    EXPECT_ERROR_CONTAINS("/nonexistent/dir/model.toml: cannot read the file");
    EXPECT(other == NULL);
    char path[4096];
    snprintf(path, sizeof path, "%s/model.txt", tmpdir);
    FAILS_WITH(ringmain_model_save(m, path), RINGMAIN_INVALID_ARGUMENT);
    EXPECT_ERROR_CONTAINS("must end in .toml or .json");
    FAILS_WITH(ringmain_model_save(m, "/nonexistent/dir/model.toml"), RINGMAIN_IO);
    EXPECT_ERROR_CONTAINS("cannot write the file");
    save_that_fails_half_way(model_path, tmpdir);

    /* A solve that cannot converge in one iteration: no results, the iterations in the message. */
    ringmain_model *demo = NULL;
    OK(ringmain_model_load(model_path, &demo));
    OK(ringmain_model_set_solver_options(demo, 1, 1e-4, 1e-6));
    ringmain_results *r = NULL;
    FAILS_WITH(ringmain_model_solve(demo, &r), RINGMAIN_NOT_CONVERGED);
    EXPECT(r == NULL);
    EXPECT_ERROR_CONTAINS(model_path);
    EXPECT_ERROR_CONTAINS("did not converge in 1 iteration:");
    FAILS_WITH(ringmain_model_set_solver_options(demo, 0, 1e-4, 1e-6), RINGMAIN_MODEL_INVALID);
    EXPECT_ERROR_CONTAINS("[hydraulics]: key 'max_iterations'");
    FAILS_WITH(ringmain_model_set_solver_options(demo, 50, -1.0, 1e-6), RINGMAIN_MODEL_INVALID);
    EXPECT_ERROR_CONTAINS("key 'head_tolerance'");
    /* It solves again once the limit is back. */
    OK(ringmain_model_set_solver_options(demo, 200, 1e-4, 1e-6));
    OK(ringmain_model_solve(demo, &r));
    ringmain_results_free(r);
    ringmain_model_free(demo);

    /* A model built without any fixed head cannot be solved. */
    ringmain_model *empty = NULL;
    OK(ringmain_model_new(0, 0, 0, 0, 0, 0, &empty));
    OK(ringmain_model_add_junction(empty, "A", 0.0, 1.0, NULL));
    FAILS_WITH(ringmain_model_validate(empty), RINGMAIN_MODEL_INVALID);
    FAILS_WITH(ringmain_model_solve(empty, &r), RINGMAIN_MODEL_INVALID);
    EXPECT_ERROR_CONTAINS("no reservoir or tank");
    ringmain_model_free(empty);
    ringmain_model_free(m);
}

int main(int argc, char **argv) {
    if (argc != 3) {
        fprintf(stderr, "usage: %s MODEL.toml TMPDIR\n", argv[0]);
        return 2;
    }
    /* Before any failure the last error is empty. */
    EXPECT(strcmp(last_error(), "") == 0);
    bad_model_text();
    null_pointers();
    out_of_range_and_wrong_kind();
    bad_integers();
    buffers_files_and_solves(argv[1], argv[2]);
    size_t live_models = 1, live_results = 1;
    OK(ringmain_live_handles(&live_models, &live_results));
    EXPECT(live_models == 0 && live_results == 0);
    report("test_errors");
    return 0;
}
