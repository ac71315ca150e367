//! The bad-input catalogue, run through the `ringmain` binary.
//!
//! Every kind of invalid model must end with exit code 2 and one clear message on standard error
//! that names the file, the element and the key (or, for syntax errors, the line and column); a
//! model the solver cannot finish ends with exit code 3 and a diagnosis; nothing ever panics.
//! The success cases check the three output formats and `--output`.
//!
//! Each invalid model is made from one valid base model by a single textual change, and the
//! helper checks that the change really happened, so that no case can pass by testing the base.

use serde_json::Value;
use std::path::{Path, PathBuf};

mod common;
use common::{run, scratch, Run};

/// A small valid model: one reservoir, two junctions, one loop.
const BASE: &str = r#"title = "cli base model"

[[nodes]]
id = "R1"
kind = "reservoir"
head = 50.0

[[nodes]]
id = "J1"
elevation = 10.0
demand = 5.0

[[nodes]]
id = "J2"
elevation = 12.0
demand = 3.0

[[links]]
id = "P1"
from = "R1"
to = "J1"
length = 400.0
diameter = 150
roughness = 120

[[links]]
id = "P2"
from = "J1"
to = "J2"
length = 300.0
diameter = 100
roughness = 110

[[links]]
id = "P3"
from = "R1"
to = "J2"
length = 800.0
diameter = 100
roughness = 100
"#;

/// The same network as [`BASE`] in JSON.
const BASE_JSON: &str = r#"{
  "title": "cli base model",
  "nodes": [
    {"id": "R1", "kind": "reservoir", "head": 50.0},
    {"id": "J1", "elevation": 10.0, "demand": 5.0},
    {"id": "J2", "elevation": 12.0, "demand": 3.0}
  ],
  "links": [
    {"id": "P1", "from": "R1", "to": "J1", "length": 400.0, "diameter": 150, "roughness": 120},
    {"id": "P2", "from": "J1", "to": "J2", "length": 300.0, "diameter": 100, "roughness": 110},
    {"id": "P3", "from": "R1", "to": "J2", "length": 800.0, "diameter": 100, "roughness": 100}
  ]
}
"#;

/// Writes `contents` as `file` in the test's scratch directory and runs `ringmain solve` on it.
fn solve_file(test: &str, file: &str, contents: &[u8], extra: &[&str]) -> (PathBuf, Run) {
    let path = scratch(test).join(file);
    std::fs::write(&path, contents).expect("write model");
    let mut args: Vec<&std::ffi::OsStr> = vec!["solve".as_ref(), path.as_os_str()];
    args.extend(extra.iter().map(|a| std::ffi::OsStr::new(*a)));
    let run = run(&args);
    (path, run)
}

/// [`BASE`] with `old` replaced by `new`; `old` must occur exactly once.
fn base_with(old: &str, new: &str) -> String {
    assert_eq!(BASE.matches(old).count(), 1, "the edit {old:?} must match the base model exactly once");
    BASE.replacen(old, new, 1)
}

/// Checks an invalid-model run: exit code 2, one `error:` line naming the file, and every needle.
/// A snippet of the offending line may follow the error line (as `check` shows it); the error
/// is printed once.
fn assert_invalid(path: &Path, run: &Run, needles: &[&str]) {
    assert_eq!(run.code, Some(2), "expected exit code 2; stderr:\n{}", run.stderr);
    assert!(run.stdout.is_empty(), "no results may be printed for an invalid model:\n{}", run.stdout);
    let lines: Vec<&str> = run.stderr.lines().collect();
    assert!(!lines.is_empty(), "expected an error line");
    for later in &lines[1..] {
        assert!(
            !later.to_ascii_lowercase().starts_with("error") && !later.contains("Error:"),
            "the error must be printed once, the snippet after it:\n{}",
            run.stderr
        );
    }
    let line = lines[0];
    assert!(line.starts_with("error: "), "{line}");
    let file = path.display().to_string();
    assert!(line.contains(&file), "the message must name the file {file}: {line}");
    for needle in needles {
        assert!(line.contains(needle), "the message must contain {needle:?}: {line}");
    }
}

/// Runs an edited base model and checks the error.
fn check_edit(test: &str, old: &str, new: &str, needles: &[&str]) {
    let (path, run) = solve_file(test, "model.toml", base_with(old, new).as_bytes(), &[]);
    assert_invalid(&path, &run, needles);
}

/// The `line:column` right after the file name in an error message.
fn position(path: &Path, run: &Run) -> (usize, usize) {
    let prefix = format!("error: {}:", path.display());
    let rest = run.stderr.strip_prefix(&prefix).unwrap_or_else(|| panic!("no position in: {}", run.stderr));
    let mut parts = rest.splitn(3, ':');
    let line = parts.next().and_then(|s| s.parse().ok()).expect("line number");
    let col = parts.next().and_then(|s| s.parse().ok()).expect("column number");
    (line, col)
}

// ---------------------------------------------------------------------------------------------
// The base models themselves are valid (otherwise every case below would prove nothing).

#[test]
fn base_models_solve() {
    let (_, run) = solve_file("base_models_solve", "model.toml", BASE.as_bytes(), &[]);
    assert_eq!(run.code, Some(0), "{}", run.stderr);
    let (_, run) = solve_file("base_models_solve", "model.json", BASE_JSON.as_bytes(), &[]);
    assert_eq!(run.code, Some(0), "{}", run.stderr);
}

// ---------------------------------------------------------------------------------------------
// References and ids.

#[test]
fn missing_node_in_from() {
    check_edit(
        "missing_node_in_from",
        "from = \"J1\"",
        "from = \"J9\"",
        &["link 'P2'", "key 'from'", "'J9'", "not defined", "did you mean 'J1'?"],
    );
}

#[test]
fn missing_node_in_to() {
    check_edit(
        "missing_node_in_to",
        "to = \"J2\"\nlength = 800.0",
        "to = \"Tank-X\"\nlength = 800.0",
        &["link 'P3'", "key 'to'", "'Tank-X'", "not defined"],
    );
}

#[test]
fn duplicate_node_id() {
    check_edit("duplicate_node_id", "id = \"J2\"", "id = \"J1\"", &["node 'J1'", "key 'id'", "unique"]);
}

#[test]
fn duplicate_link_id() {
    check_edit("duplicate_link_id", "id = \"P3\"", "id = \"P1\"", &["link 'P1'", "key 'id'", "unique"]);
}

#[test]
fn link_from_a_node_to_itself() {
    check_edit(
        "link_from_a_node_to_itself",
        "to = \"J2\"\nlength = 300.0",
        "to = \"J1\"\nlength = 300.0",
        &["link 'P2'", "key 'to'", "itself"],
    );
}

// ---------------------------------------------------------------------------------------------
// Values out of range.

#[test]
fn zero_length() {
    check_edit("zero_length", "length = 300.0", "length = 0.0", &["link 'P2'", "key 'length'", "greater than zero"]);
}

#[test]
fn negative_length() {
    check_edit(
        "negative_length",
        "length = 300.0",
        "length = -300.0",
        &["link 'P2'", "key 'length'", "greater than zero"],
    );
}

#[test]
fn zero_diameter() {
    check_edit(
        "zero_diameter",
        "diameter = 150",
        "diameter = 0",
        &["link 'P1'", "key 'diameter'", "greater than zero"],
    );
}

#[test]
fn negative_diameter() {
    check_edit(
        "negative_diameter",
        "diameter = 150",
        "diameter = -150",
        &["link 'P1'", "key 'diameter'", "greater than zero"],
    );
}

#[test]
fn zero_roughness() {
    check_edit(
        "zero_roughness",
        "roughness = 110",
        "roughness = 0",
        &["link 'P2'", "key 'roughness'", "greater than zero"],
    );
}

#[test]
fn negative_roughness() {
    check_edit(
        "negative_roughness",
        "roughness = 110",
        "roughness = -110",
        &["link 'P2'", "key 'roughness'", "greater than zero"],
    );
}

#[test]
fn nan_demand() {
    check_edit("nan_demand", "demand = 5.0", "demand = nan", &["node 'J1'", "key 'demand'", "NaN"]);
}

#[test]
fn nan_length() {
    check_edit("nan_length", "length = 800.0", "length = nan", &["link 'P3'", "key 'length'", "NaN"]);
}

#[test]
fn infinite_length() {
    check_edit("infinite_length", "length = 800.0", "length = inf", &["link 'P3'", "key 'length'", "finite"]);
}

#[test]
fn infinite_elevation() {
    check_edit(
        "infinite_elevation",
        "elevation = 12.0",
        "elevation = -inf",
        &["node 'J2'", "key 'elevation'", "finite"],
    );
}

#[test]
fn infinite_reservoir_head() {
    check_edit("infinite_reservoir_head", "head = 50.0", "head = +inf", &["node 'R1'", "key 'head'", "finite"]);
}

#[test]
fn no_fixed_head_node() {
    check_edit(
        "no_fixed_head_node",
        "kind = \"reservoir\"\nhead = 50.0",
        "elevation = 50.0",
        &["[nodes]", "key 'kind'", "no reservoir or tank"],
    );
}

#[test]
fn tank_level_above_max_level() {
    let tank = "[[nodes]]\nid = \"T1\"\nkind = \"tank\"\nelevation = 40.0\nlevel = 6.0\nmax_level = 5.0\n\n[[nodes]]\nid = \"J1\"";
    check_edit(
        "tank_level_above_max_level",
        "[[nodes]]\nid = \"J1\"",
        tank,
        &["node 'T1'", "key 'level'", "above max_level"],
    );
}

// ---------------------------------------------------------------------------------------------
// Keys and names.

#[test]
fn unknown_optional_node_key_with_suggestion() {
    check_edit(
        "unknown_optional_node_key_with_suggestion",
        "demand = 3.0",
        "demnad = 3.0",
        &["node 'J2'", "key 'demnad'", "not a known key", "did you mean 'demand'?"],
    );
}

#[test]
fn misspelt_required_node_key_with_suggestion() {
    check_edit(
        "misspelt_required_node_key_with_suggestion",
        "elevation = 12.0",
        "elevaton = 12.0",
        &["node 'J2'", "key 'elevaton'", "not a known key", "did you mean 'elevation'?"],
    );
}

#[test]
fn unknown_optional_link_key_with_suggestion() {
    check_edit(
        "unknown_optional_link_key_with_suggestion",
        "roughness = 100",
        "roughness = 100\nminor_los = 2.0",
        &["link 'P3'", "key 'minor_los'", "did you mean 'minor_loss'?"],
    );
}

#[test]
fn misspelt_required_link_key_with_suggestion() {
    check_edit(
        "misspelt_required_link_key_with_suggestion",
        "roughness = 100",
        "roughnes = 100",
        &["link 'P3'", "key 'roughnes'", "did you mean 'roughness'?"],
    );
}

#[test]
fn unknown_top_level_key() {
    check_edit(
        "unknown_top_level_key",
        "title = \"cli base model\"",
        "titel = \"cli base model\"",
        &["key 'titel'", "not a known key", "did you mean 'title'?"],
    );
}

#[test]
fn unknown_key_in_units() {
    check_edit(
        "unknown_key_in_units",
        "title = \"cli base model\"\n",
        "title = \"cli base model\"\n[units]\nflwo = \"L/s\"\n",
        &["[units]", "key 'flwo'", "did you mean 'flow'?"],
    );
}

#[test]
fn unknown_key_in_hydraulics() {
    check_edit(
        "unknown_key_in_hydraulics",
        "title = \"cli base model\"\n",
        "title = \"cli base model\"\n[hydraulics]\nmax_iteration = 50\n",
        &["[hydraulics]", "key 'max_iteration'", "did you mean 'max_iterations'?"],
    );
}

#[test]
fn unknown_flow_unit() {
    check_edit(
        "unknown_flow_unit",
        "title = \"cli base model\"\n",
        "title = \"cli base model\"\n[units]\nflow = \"lps\"\n",
        &["[units]", "key 'flow'", "unknown unit \"lps\"", "\"L/s\"", "\"gpm\""],
    );
}

#[test]
fn pressure_unit_in_wrong_case() {
    check_edit(
        "pressure_unit_in_wrong_case",
        "title = \"cli base model\"\n",
        "title = \"cli base model\"\n[units]\npressure = \"Psi\"\n",
        &["[units]", "key 'pressure'", "unknown unit \"Psi\"", "did you mean \"psi\"?"],
    );
}

#[test]
fn unknown_node_kind() {
    check_edit(
        "unknown_node_kind",
        "kind = \"reservoir\"",
        "kind = \"reservior\"",
        &["node 'R1'", "key 'kind'", "unknown kind \"reservior\"", "did you mean \"reservoir\"?"],
    );
}

#[test]
fn unknown_link_kind() {
    check_edit(
        "unknown_link_kind",
        "id = \"P2\"\n",
        "id = \"P2\"\nkind = \"aqueduct\"\n",
        &["link 'P2'", "key 'kind'", "unknown kind \"aqueduct\"", "pipe"],
    );
}

#[test]
fn unknown_status() {
    check_edit(
        "unknown_status",
        "roughness = 110",
        "roughness = 110\nstatus = \"shut\"",
        &["link 'P2'", "key 'status'", "unknown status \"shut\"", "\"closed\""],
    );
}

#[test]
fn junction_with_head_key() {
    check_edit(
        "junction_with_head_key",
        "demand = 3.0",
        "demand = 3.0\nhead = 60.0",
        &["node 'J2'", "key 'head'", "does not apply to a junction"],
    );
}

#[test]
fn string_where_a_number_is_expected() {
    check_edit(
        "string_where_a_number_is_expected",
        "length = 400.0",
        "length = \"400\"",
        &["link 'P1'", "key 'length'", "must be a number, found a string"],
    );
}

#[test]
fn boolean_where_a_number_is_expected() {
    check_edit(
        "boolean_where_a_number_is_expected",
        "demand = 3.0",
        "demand = true",
        &["node 'J2'", "key 'demand'", "must be a number, found a boolean"],
    );
}

#[test]
fn viscosity_and_temperature_together() {
    check_edit(
        "viscosity_and_temperature_together",
        "title = \"cli base model\"\n",
        "title = \"cli base model\"\n[hydraulics]\nkinematic_viscosity = 1.0e-6\nwater_temperature = 15.0\n",
        &["[hydraulics]", "key 'water_temperature'", "not both"],
    );
}

#[test]
fn water_temperature_too_high() {
    check_edit(
        "water_temperature_too_high",
        "title = \"cli base model\"\n",
        "title = \"cli base model\"\n[hydraulics]\nwater_temperature = 120.0\n",
        &["[hydraulics]", "key 'water_temperature'", "between 0 and 99", "120"],
    );
}

#[test]
fn water_temperature_below_freezing() {
    check_edit(
        "water_temperature_below_freezing",
        "title = \"cli base model\"\n",
        "title = \"cli base model\"\n[hydraulics]\nwater_temperature = -5\n",
        &["[hydraulics]", "key 'water_temperature'", "between 0 and 99", "-5"],
    );
}

// ---------------------------------------------------------------------------------------------
// Files that are not models.

#[test]
fn malformed_toml_has_line_and_column() {
    // Line 10 of the base model is `elevation = 10.0`; the second `=` is in column 13.
    let text = base_with("elevation = 10.0", "elevation = = 10.0");
    assert_eq!(text.lines().nth(9), Some("elevation = = 10.0"));
    let (path, run) = solve_file("malformed_toml_has_line_and_column", "model.toml", text.as_bytes(), &[]);
    assert_invalid(&path, &run, &["TOML syntax error"]);
    assert_eq!(position(&path, &run), (10, 13), "{}", run.stderr);
}

#[test]
fn malformed_json_has_line_and_column() {
    // A missing comma on line 5: the parser stops at the next key, column 39.
    let text = BASE_JSON.replacen("\"elevation\": 10.0,", "\"elevation\": 10.0", 1);
    assert_ne!(text, BASE_JSON);
    let line = text.lines().nth(4).expect("line 5");
    let column = line.find("\"demand\"").expect("demand key") + 1;
    let (path, run) = solve_file("malformed_json_has_line_and_column", "model.json", text.as_bytes(), &[]);
    assert_invalid(&path, &run, &["JSON syntax error"]);
    assert_eq!(position(&path, &run), (5, column), "{}", run.stderr);
}

#[test]
fn json_duplicate_key() {
    let text = BASE_JSON.replacen("\"demand\": 3.0}", "\"demand\": 3.0,\n     \"demand\": 4.0}", 1);
    assert_ne!(text, BASE_JSON);
    let (path, run) = solve_file("json_duplicate_key", "model.json", text.as_bytes(), &[]);
    assert_invalid(&path, &run, &["duplicate key 'demand'"]);
    assert_eq!(position(&path, &run).0, 7, "{}", run.stderr);
}

#[test]
fn json_model_without_extension_is_recognised() {
    // No extension: the format is guessed from the text, so a JSON error is reported as JSON.
    let text = BASE_JSON.replacen("\"length\": 300.0", "\"length\": \"300\"", 1);
    let (path, run) = solve_file("json_model_without_extension_is_recognised", "model", text.as_bytes(), &[]);
    assert_invalid(&path, &run, &["link 'P2'", "key 'length'", "must be a number, found a string"]);
}

#[test]
fn empty_file() {
    let (path, run) = solve_file("empty_file", "model.toml", b"", &[]);
    assert_invalid(&path, &run, &["empty"]);
}

#[test]
fn whitespace_only_file() {
    let (path, run) = solve_file("whitespace_only_file", "model.toml", b"  \n\t\n   \r\n", &[]);
    assert_invalid(&path, &run, &["empty"]);
}

#[test]
fn binary_file() {
    // Not UTF-8 from the first byte on (0xff never occurs in UTF-8).
    let bytes = [0xff_u8, 0xfe, 0x00, 0x01, b'[', 0x80, 0x90];
    let (path, run) = solve_file("binary_file", "model.toml", &bytes, &[]);
    assert_invalid(&path, &run, &["not UTF-8"]);
    assert_eq!(position(&path, &run), (1, 1), "{}", run.stderr);
}

#[test]
fn non_utf8_in_the_middle_of_a_model() {
    let mut bytes = BASE.as_bytes().to_vec();
    let at = BASE.find("J2").expect("J2") + 1;
    bytes[at] = 0xe9; // a Latin-1 'é' byte, invalid on its own in UTF-8
    let (path, run) = solve_file("non_utf8_in_the_middle_of_a_model", "model.toml", &bytes, &[]);
    assert_invalid(&path, &run, &["not UTF-8"]);
    let line = BASE[..at].matches('\n').count() + 1;
    assert_eq!(position(&path, &run).0, line, "{}", run.stderr);
}

#[test]
fn missing_file() {
    let path = scratch("missing_file").join("no-such-model.toml");
    let run = run(&["solve".as_ref(), path.as_os_str()]);
    assert_invalid(&path, &run, &["cannot read the file"]);
}

// ---------------------------------------------------------------------------------------------
// A model the solver cannot finish.

fn capped_iterations(n: u32) -> String {
    base_with(
        "title = \"cli base model\"\n",
        &format!("title = \"cli base model\"\n[hydraulics]\nmax_iterations = {n}\n"),
    )
}

#[test]
fn not_converged_names_nodes_links_and_residuals() {
    let (path, run) = solve_file("not_converged", "model.toml", capped_iterations(2).as_bytes(), &[]);
    assert_eq!(run.code, Some(3), "{}", run.stderr);
    assert!(run.stdout.is_empty(), "no results may be printed for an unconverged solve:\n{}", run.stdout);
    let msg = run.stderr.trim_end();
    assert!(msg.starts_with(&format!("error: {}:", path.display())), "{msg}");
    for needle in ["did not converge in 2 iterations", "head change", "energy residual", "'J1'", "'J2'", "'P1'", "'P3'"]
    {
        assert!(msg.contains(needle), "missing {needle:?}: {msg}");
    }
}

#[test]
fn not_converged_after_one_iteration_exits_3_without_panic() {
    let (_, run) = solve_file("not_converged_one", "model.toml", capped_iterations(1).as_bytes(), &[]);
    assert_eq!(run.code, Some(3), "{}", run.stderr);
    assert!(run.stderr.contains("did not converge"), "{}", run.stderr);
    // After one iteration no head change exists yet; the links with the largest energy residual
    // are named.
    assert!(run.stderr.contains("no head change measured yet") && run.stderr.contains("'P1'"), "{}", run.stderr);
}

#[test]
fn not_converged_after_one_iteration_reports_numbers() {
    let (_, run) = solve_file("not_converged_one_numbers", "model.toml", capped_iterations(1).as_bytes(), &[]);
    assert_eq!(run.code, Some(3), "{}", run.stderr);
    assert!(!run.stderr.contains("NaN"), "the diagnosis must not show NaN values: {}", run.stderr);
}

// ---------------------------------------------------------------------------------------------
// Success: the output formats.

fn number(v: &Value, key: &str) -> f64 {
    v[key].as_f64().unwrap_or_else(|| panic!("{key} is not a number in {v}"))
}

fn by_id<'a>(items: &'a [Value], id: &str) -> &'a Value {
    items.iter().find(|v| v["id"] == id).unwrap_or_else(|| panic!("no entry '{id}'"))
}

#[test]
fn json_output_has_every_field_and_balances() {
    let (_, run) = solve_file("json_output", "model.toml", BASE.as_bytes(), &["--format", "json"]);
    assert_eq!(run.code, Some(0), "{}", run.stderr);
    let doc: Value = serde_json::from_str(&run.stdout).expect("the output is JSON");
    assert_eq!(doc["converged"], Value::Bool(true));
    let iterations = doc["iterations"].as_u64().expect("iterations");
    assert!((1..=50).contains(&iterations), "{iterations}");
    let nodes = doc["nodes"].as_array().expect("nodes");
    let links = doc["links"].as_array().expect("links");
    assert_eq!(nodes.len(), 3);
    assert_eq!(links.len(), 3);
    for n in nodes {
        assert!(n["id"].is_string(), "{n}");
        for key in ["head", "pressure", "demand"] {
            assert!(number(n, key).is_finite(), "{n}");
        }
    }
    for l in links {
        assert!(l["id"].is_string(), "{l}");
        for key in ["flow", "velocity", "headloss"] {
            assert!(number(l, key).is_finite(), "{l}");
        }
        assert_eq!(l["status"], "open", "{l}");
    }
    // Internal consistency in the file's units (m, L/s, mm; pressure in m of water):
    // pressure = head - elevation, mass balance at each junction, headloss = head difference,
    // velocity = flow / area.
    let (r1, j1, j2) = (by_id(nodes, "R1"), by_id(nodes, "J1"), by_id(nodes, "J2"));
    assert_eq!(number(r1, "head"), 50.0);
    assert!((number(j1, "pressure") - (number(j1, "head") - 10.0)).abs() < 1e-9);
    assert!((number(j2, "pressure") - (number(j2, "head") - 12.0)).abs() < 1e-9);
    assert_eq!(number(j1, "demand"), 5.0);
    let (p1, p2, p3) = (by_id(links, "P1"), by_id(links, "P2"), by_id(links, "P3"));
    let (q1, q2, q3) = (number(p1, "flow"), number(p2, "flow"), number(p3, "flow"));
    assert!((q1 - q2 - 5.0).abs() < 1e-9, "J1 balance: {q1} - {q2}");
    assert!((q2 + q3 - 3.0).abs() < 1e-9, "J2 balance: {q2} + {q3}");
    assert!((number(p1, "headloss") - (50.0 - number(j1, "head"))).abs() < 1e-9);
    assert!((number(p2, "headloss") - (number(j1, "head") - number(j2, "head")).abs()).abs() < 1e-9);
    let area = std::f64::consts::PI * 0.15 * 0.15 / 4.0;
    assert!((number(p1, "velocity") - q1 * 1e-3 / area).abs() < 1e-9);
}

#[test]
fn json_input_gives_the_same_results_as_toml() {
    let (_, toml_run) = solve_file("json_input_same", "model.toml", BASE.as_bytes(), &["--format", "json"]);
    let (_, json_run) = solve_file("json_input_same", "model.json", BASE_JSON.as_bytes(), &["--format", "json"]);
    assert_eq!(toml_run.code, Some(0), "{}", toml_run.stderr);
    assert_eq!(json_run.code, Some(0), "{}", json_run.stderr);
    assert_eq!(toml_run.stdout, json_run.stdout);
}

/// The CSV carries every table one value a row (`table,id,quantity,value,unit`), with the JSON
/// output's numbers at seven significant digits.
#[test]
fn csv_output() {
    let (_, json) = solve_file("csv_output", "model.toml", BASE.as_bytes(), &["--format", "json"]);
    let doc: Value = serde_json::from_str(&json.stdout).expect("JSON");
    let (_, run) = solve_file("csv_output", "model.toml", BASE.as_bytes(), &["--format", "csv"]);
    assert_eq!(run.code, Some(0), "{}", run.stderr);
    let mut lines = run.stdout.lines();
    assert_eq!(lines.next(), Some("table,id,quantity,value,unit"));
    let rows: Vec<Vec<&str>> = lines.map(|l| l.split(',').collect()).collect();
    let seven_digits = |a: f64, b: f64, what: &[&str]| {
        assert!((a - b).abs() <= 5e-7 * b.abs(), "{a} vs {b}: {what:?}");
    };
    let heads: Vec<&Vec<&str>> = rows.iter().filter(|r| r[0] == "nodes" && r[2] == "head").collect();
    assert_eq!(heads.len(), 3);
    for row in heads {
        assert_eq!(row[4], "m");
        let node = by_id(doc["nodes"].as_array().expect("nodes"), row[1]);
        seven_digits(row[3].parse::<f64>().expect("head"), number(node, "head"), row);
    }
    let flows: Vec<&Vec<&str>> = rows.iter().filter(|r| r[0] == "links" && r[2] == "flow").collect();
    assert_eq!(flows.len(), 3);
    for row in flows {
        assert_eq!(row[4], "L/s");
        let link = by_id(doc["links"].as_array().expect("links"), row[1]);
        seven_digits(row[3].parse::<f64>().expect("flow"), number(link, "flow"), row);
        let status = rows.iter().find(|r| r[0] == "links" && r[1] == row[1] && r[2] == "status").expect("status");
        assert_eq!(status[3], "open");
    }
    assert!(rows.iter().any(|r| r[0] == "summary" && r[2] == "total_demand"));
}

#[test]
fn output_option_writes_the_file() {
    let (path, to_stdout) = solve_file("output_option", "model.toml", BASE.as_bytes(), &["--format", "csv"]);
    let out = path.with_file_name("results.csv");
    let run = run(&[
        "solve".as_ref(),
        path.as_os_str(),
        "--format".as_ref(),
        "csv".as_ref(),
        "--output".as_ref(),
        out.as_os_str(),
    ]);
    assert_eq!(run.code, Some(0), "{}", run.stderr);
    assert!(run.stdout.is_empty(), "with --output nothing goes to standard output: {}", run.stdout);
    let written = std::fs::read_to_string(&out).expect("the results file exists");
    assert_eq!(written, to_stdout.stdout);
}

#[test]
fn output_into_a_missing_directory_exits_4() {
    let dir = scratch("output_missing_dir");
    let path = dir.join("model.toml");
    std::fs::write(&path, BASE).expect("write model");
    let out = dir.join("no-such-dir").join("results.txt");
    let run = run(&["solve".as_ref(), path.as_os_str(), "-o".as_ref(), out.as_os_str()]);
    assert_eq!(run.code, Some(4), "{}", run.stderr);
    assert!(run.stderr.contains("cannot write the results"), "{}", run.stderr);
    assert!(run.stderr.contains(&out.display().to_string()), "{}", run.stderr);
}

#[test]
fn generate_into_a_missing_directory_exits_4_naming_the_file() {
    let dir = scratch("generate_missing_dir");
    let out = dir.join("no-such-dir").join("town.json");
    let run = run(&["generate".as_ref(), "--junctions".as_ref(), "50".as_ref(), "-o".as_ref(), out.as_os_str()]);
    assert_eq!(run.code, Some(4), "{}", run.stderr);
    assert!(run.stderr.contains("cannot write the model"), "{}", run.stderr);
    assert!(run.stderr.contains(&out.display().to_string()), "{}", run.stderr);
}

/// A device that is always full: the results fail part-way (or when the buffer is flushed),
/// after the file was opened.
#[cfg(target_os = "linux")]
#[test]
fn a_write_failure_after_the_file_is_open_exits_4_naming_the_file() {
    let dir = scratch("output_device_full");
    let path = dir.join("model.toml");
    std::fs::write(&path, BASE).expect("write model");
    for format in ["json", "csv", "table"] {
        let run = run(&[
            "solve".as_ref(),
            path.as_os_str(),
            "--format".as_ref(),
            format.as_ref(),
            "-o".as_ref(),
            "/dev/full".as_ref(),
        ]);
        assert_eq!(run.code, Some(4), "{format}: {}", run.stderr);
        assert!(run.stderr.contains("cannot write the results to /dev/full"), "{format}: {}", run.stderr);
    }
}

#[test]
fn json_results_have_one_node_or_link_a_line() {
    let (_, run) = solve_file("json_layout", "model.toml", BASE.as_bytes(), &["--format", "json"]);
    assert_eq!(run.code, Some(0), "{}", run.stderr);
    let doc: serde_json::Value = serde_json::from_str(&run.stdout).expect("JSON");
    let lines: Vec<&str> = run.stdout.lines().collect();
    let elements: Vec<&str> = lines.iter().copied().filter(|l| l.starts_with("    {")).collect();
    let (nodes, links) = (doc["nodes"].as_array().expect("nodes"), doc["links"].as_array().expect("links"));
    assert_eq!(elements.len(), nodes.len() + links.len(), "{}", run.stdout);
    // Each such line is a whole element, equal to the element of the parsed document (the
    // links come first: the top-level keys of the results are in alphabetical order).
    for (line, element) in elements.iter().zip(links.iter().chain(nodes)) {
        let one: serde_json::Value =
            serde_json::from_str(line.trim().trim_end_matches(',')).unwrap_or_else(|e| panic!("{e}: {line}"));
        assert_eq!(&one, element);
    }
    assert_eq!(lines.first(), Some(&"{"));
    assert!(lines.contains(&"  \"nodes\": ["), "{}", run.stdout);
}

#[test]
fn table_output_has_the_summary() {
    let (_, run) = solve_file("table_output", "model.toml", BASE.as_bytes(), &[]);
    assert_eq!(run.code, Some(0), "{}", run.stderr);
    let text = &run.stdout;
    assert!(text.starts_with("cli base model\n"), "{text}");
    for needle in [
        "Nodes",
        "Links",
        "Summary",
        "  iterations                ",
        "  largest mass residual     ",
        "  largest energy residual   ",
        "  total demand              8.000 L/s",
        "  lowest pressure           ",
        "licensed engineer",
    ] {
        assert!(text.contains(needle), "missing {needle:?} in:\n{text}");
    }
    let source = text.lines().find(|l| l.trim_start().starts_with("reservoir R1")).unwrap_or_default();
    assert!(source.trim_end().ends_with("supplying 8.000 L/s"), "source line: {source:?}\n{text}");
    assert!(run.stderr.is_empty(), "no warnings expected: {}", run.stderr);
}

#[test]
fn warning_for_a_junction_cut_off_by_a_closed_pipe() {
    let text = BASE.to_owned()
        + "\n[[nodes]]\nid = \"J3\"\nelevation = 5.0\ndemand = 1.0\n\n[[links]]\nid = \"P4\"\nfrom = \"J2\"\nto = \"J3\"\nlength = 100.0\ndiameter = 100\nroughness = 100\nstatus = \"closed\"\n";
    let (_, run) = solve_file("warning_cut_off", "model.toml", text.as_bytes(), &[]);
    assert_eq!(run.code, Some(0), "{}", run.stderr);
    assert!(run.stderr.contains("warning: node 'J3': cut off"), "{}", run.stderr);
    assert!(run.stdout.contains("Warnings"), "{}", run.stdout);
}

// ---------------------------------------------------------------------------------------------
// Plausibility warnings: valid values that are almost certainly typing mistakes.

/// Fault: a Darcy–Weisbach roughness comparable to the diameter (a Hazen–Williams C left in
/// after switching the law), a relative pump speed typed in rpm and a head tolerance of metres
/// were taken silently. Each is warned about by `solve`, `simulate` and `check`, naming the
/// element and key; the same model with plausible values gives none of these warnings. Ranges:
/// ε/D ≤ 0.05 (end of the Moody diagram), speed ≤ 2 and tolerance ≤ 1 m (common practice).
#[test]
fn implausible_roughness_pump_speed_and_head_tolerance_are_warned_by_solve_simulate_and_check() {
    let model = |roughness: &str, speed: &str, tolerance: &str| {
        format!(
            r#"
[hydraulics]
headloss = "darcy-weisbach"
head_tolerance = {tolerance}
[simulation]
duration = "2h"
[[nodes]]
id = "Sump"
kind = "reservoir"
head = 5.0
[[nodes]]
id = "R1"
kind = "reservoir"
head = 50.0
[[nodes]]
id = "J1"
elevation = 10.0
demand = 5.0
[[links]]
id = "P1"
from = "R1"
to = "J1"
length = 400.0
diameter = 150
roughness = {roughness}
[[links]]
id = "Booster"
kind = "pump"
from = "Sump"
to = "J1"
head_curve = [[0, 60], [10, 50], [20, 30]]
speed = {speed}
"#
        )
    };
    let dir = scratch("plausibility");
    let bad = dir.join("typos.toml");
    std::fs::write(&bad, model("120", "1450", "5")).unwrap();
    let good = dir.join("plausible.toml");
    std::fs::write(&good, model("0.1", "1.0", "0.0001")).unwrap();
    for command in ["solve", "simulate", "check"] {
        // `check` lists warnings by code and element; `solve` and `simulate` by element and key.
        let expected: [&str; 3] = if command == "check" {
            ["roughness-range: link 'P1'", "pump-speed: link 'Booster'", "head-tolerance: [hydraulics]"]
        } else {
            ["link 'P1': key 'roughness'", "link 'Booster': key 'speed'", "[hydraulics]: key 'head_tolerance'"]
        };
        let out = run(&[command.as_ref(), bad.as_os_str()]);
        let all = format!("{}{}", out.stderr, out.stdout);
        for e in expected {
            assert!(all.contains(e), "{command}: no warning {e:?} in:\n{all}");
        }
        assert!(all.contains("Moody") && all.contains("rpm") && all.contains("common practice"), "{all}");
        let out = run(&[command.as_ref(), good.as_os_str()]);
        let all = format!("{}{}", out.stderr, out.stdout);
        for e in expected {
            assert!(!all.contains(e), "{command}: a plausible model warned {e:?}:\n{all}");
        }
    }
}

/// Every command that writes tables, JSON and CSV only refuses GeoJSON and Parquet the same way
/// (exit code 2, a message naming the format and the commands that write it) before doing any
/// work: the refusal has one home, `format_refusal` in the program.
#[test]
fn formats_a_command_cannot_write_are_refused_alike_by_every_command() {
    let model = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/hillside.toml");
    let commands: [&[&str]; 5] = [
        &["water-properties", "--temperature", "20"],
        &["friction-factor", "--reynolds", "1e5", "--relative-roughness", "1e-4"],
        &["duty", "--pump", "no-such-pump", model],
        &["fire-flow", "--residual", "20", model],
        &["fittings"],
    ];
    for command in commands {
        for (format, says) in [
            ("geojson", "--format geojson applies to solve and simulate"),
            ("parquet", "--format parquet applies to solve and simulate"),
        ] {
            let mut args: Vec<&std::ffi::OsStr> = command.iter().map(std::ffi::OsStr::new).collect();
            args.extend([std::ffi::OsStr::new("--format"), std::ffi::OsStr::new(format)]);
            let r = run(&args);
            assert_eq!(r.code, Some(2), "{command:?} --format {format}: {}", r.stderr);
            assert!(r.stderr.contains(says), "{command:?} --format {format}: {}", r.stderr);
            assert!(r.stdout.is_empty(), "{command:?} --format {format} printed: {}", r.stdout);
        }
    }
}
