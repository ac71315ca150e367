//! `ringmain check` through the binary: criteria, what-if runs, the sweep, the three reports and
//! the exit codes.
//!
//! The check's findings are compared with things computed outside the check: pressures from the
//! `solve` command's JSON, supply lost by a closure from a breadth-first search over the links
//! written here, unit conversions from their exact definitions (1 psi = 6894.757293168 Pa, 1 ft =
//! 0.3048 m) and the density of water at 20 °C, 998.21 kg/m³ (IAPWS-IF97 at 0.1 MPa; from
//! memory, used with a tolerance far wider than its uncertainty).

use serde_json::Value;
use std::collections::{HashMap, HashSet, VecDeque};
use std::path::{Path, PathBuf};
use std::process::Command;

const EXAMPLE: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/larchfield.toml");

fn dir(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("ringmain-check-{}-{name}", std::process::id()));
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn write(dir: &Path, name: &str, text: &str) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, text).unwrap();
    p
}

/// Runs the binary; returns exit code, stdout, stderr.
fn run(args: &[&str]) -> (i32, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_ringmain")).args(args).output().unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
    assert!(!stderr.contains("panicked"), "{stderr}");
    (out.status.code().unwrap_or(-1), String::from_utf8_lossy(&out.stdout).into_owned(), stderr)
}

fn json(args: &[&str]) -> (i32, Value) {
    let mut all = args.to_vec();
    all.extend(["--format", "json"]);
    let (code, stdout, stderr) = run(&all);
    let v = serde_json::from_str(&stdout).unwrap_or_else(|e| panic!("{e}: {stdout} {stderr}"));
    (code, v)
}

fn check<'a>(v: &'a Value, name: &str) -> &'a Value {
    v["checks"].as_array().unwrap().iter().find(|c| c["name"] == name).unwrap_or_else(|| panic!("no {name} in {v}"))
}

/// The example model with its [criteria] table taken out, so that a test's own criteria apply.
fn example_without_criteria() -> String {
    let text = std::fs::read_to_string(EXAMPLE).unwrap();
    let start = text.find("[criteria]").unwrap();
    let end = text.find("[[nodes]]").unwrap();
    format!("{}{}", &text[..start], &text[end..])
}

#[test]
fn the_example_meets_its_own_criteria() {
    let (code, stdout, stderr) = run(&["check", EXAMPLE]);
    assert_eq!(code, 0, "{stdout}{stderr}");
    assert!(stdout.contains("Result: PASSED (exit 0: all criteria met)"), "{stdout}");
    assert!(stdout.contains("licensed engineer"));
    // No progress bar or other noise when standard error is not a terminal.
    assert_eq!(stderr, "");
}

#[test]
fn failing_junctions_are_those_the_solver_puts_below_the_limit_worst_first() {
    let d = dir("pressure");
    let model = write(&d, "m.toml", &example_without_criteria());
    let criteria = write(&d, "c.toml", "[criteria]\nmin_pressure = \"50 m\"\n");
    let (code, v) = json(&["check", model.to_str().unwrap(), "--criteria", criteria.to_str().unwrap()]);
    assert_eq!(code, 1, "{v}");
    let (_, solved, _) = run(&["solve", model.to_str().unwrap(), "--format", "json"]);
    let solved: Value = serde_json::from_str(&solved).unwrap();
    let mut expected: Vec<(String, f64)> = solved["nodes"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|n| n["kind"] == "junction" && n["pressure"].as_f64().unwrap() < 50.0)
        .map(|n| (n["id"].as_str().unwrap().to_owned(), n["pressure"].as_f64().unwrap()))
        .collect();
    expected.sort_by(|a, b| a.1.total_cmp(&b.1));
    assert!(expected.len() >= 3, "the limit must catch several junctions: {expected:?}");
    let c = check(&v["base"], "min_pressure");
    assert_eq!(c["failures"].as_u64().unwrap() as usize, expected.len());
    assert_eq!(c["checked"], 8);
    let worst: Vec<(String, f64)> = c["worst"]
        .as_array()
        .unwrap()
        .iter()
        .map(|w| (w["node"].as_str().unwrap().to_owned(), w["value"].as_f64().unwrap()))
        .collect();
    assert_eq!(worst.iter().map(|w| &w.0).collect::<Vec<_>>(), expected.iter().map(|e| &e.0).collect::<Vec<_>>());
    for (w, e) in worst.iter().zip(&expected) {
        assert!((w.1 - e.1).abs() < 1e-9, "{w:?} {e:?}");
    }
    // The human report lists the worst first too.
    let (_, table, _) = run(&["check", model.to_str().unwrap(), "--criteria", criteria.to_str().unwrap()]);
    let first = table.find(&format!("node '{}'", expected[0].0)).unwrap();
    let last = table.find(&format!("node '{}'", expected.last().unwrap().0)).unwrap();
    assert!(first < last, "{table}");
}

#[test]
fn limits_with_units_convert_by_their_definitions() {
    let d = dir("units");
    let model = write(&d, "m.toml", &example_without_criteria());
    let criteria = write(
        &d,
        "c.toml",
        "min_pressure = \"30 psi\"\nmax_pressure = \"700 kPa\"\nmax_velocity = \"5 ft/s\"\nmax_headloss = \"0.004 m/m\"\n",
    );
    let (_, v) = json(&["check", model.to_str().unwrap(), "--criteria", criteria.to_str().unwrap()]);
    let rho_g = 998.21 * 9.80665;
    let limit = |name: &str| check(&v["base"], name)["limit"].as_f64().unwrap();
    assert!((limit("min_pressure") - 30.0 * 6894.757293168 / rho_g).abs() < 0.01, "{}", limit("min_pressure"));
    assert!((limit("max_pressure") - 700e3 / rho_g).abs() < 0.01);
    assert!((limit("max_velocity") - 5.0 * 0.3048).abs() < 1e-12);
    // Reported per km in a metric model.
    assert!((limit("max_headloss") - 4.0).abs() < 1e-12);
}

/// Nodes no fixed head reaches when `closed` is closed: a breadth-first search over the links.
fn cut_off(nodes: &[Value], links: &[Value], closed: &str) -> HashSet<String> {
    let mut adj: HashMap<&str, Vec<&str>> = HashMap::new();
    for l in links.iter().filter(|l| l["id"] != closed) {
        let (a, b) = (l["from"].as_str().unwrap(), l["to"].as_str().unwrap());
        adj.entry(a).or_default().push(b);
        adj.entry(b).or_default().push(a);
    }
    let mut seen: HashSet<&str> = HashSet::new();
    let mut queue: VecDeque<&str> = VecDeque::new();
    for n in nodes.iter().filter(|n| n["kind"] != "junction") {
        seen.insert(n["id"].as_str().unwrap());
        queue.push_back(n["id"].as_str().unwrap());
    }
    while let Some(n) = queue.pop_front() {
        for &m in adj.get(n).into_iter().flatten() {
            if seen.insert(m) {
                queue.push_back(m);
            }
        }
    }
    nodes.iter().map(|n| n["id"].as_str().unwrap()).filter(|id| !seen.contains(id)).map(str::to_owned).collect()
}

#[test]
fn the_sweep_reports_the_supply_each_closure_cuts_off() {
    let (code, v) = json(&["check", EXAMPLE, "--each-pipe-closed", "--offenders", "50"]);
    assert_eq!(code, 1, "closing the hill spur cuts off demand");
    let (_, solved, _) = run(&["solve", EXAMPLE, "--format", "json"]);
    let solved: Value = serde_json::from_str(&solved).unwrap();
    let nodes = solved["nodes"].as_array().unwrap();
    let links = solved["links"].as_array().unwrap();
    let sweep = &v["each_pipe_closed"];
    assert_eq!(sweep["closures"].as_u64().unwrap() as usize, links.len());
    let results = sweep["results"].as_array().unwrap();
    let demand: HashMap<&str, f64> =
        nodes.iter().map(|n| (n["id"].as_str().unwrap(), n["demand"].as_f64().unwrap())).collect();
    let mut with_loss = 0;
    for l in links {
        let id = l["id"].as_str().unwrap();
        let expected = cut_off(nodes, links, id);
        let found = results.iter().find(|r| r["closed"] == id);
        if expected.is_empty() {
            assert!(found.map_or(true, |r| r.get("lost_supply").is_none()), "{id}: {found:?}");
            continue;
        }
        with_loss += 1;
        let r = found.unwrap_or_else(|| panic!("closing {id} cuts off {expected:?} but is not reported"));
        let lost: HashSet<String> =
            r["lost_supply"]["nodes"].as_array().unwrap().iter().map(|n| n.as_str().unwrap().to_owned()).collect();
        assert_eq!(lost, expected, "{id}");
        let total: f64 = expected.iter().map(|n| demand[n.as_str()]).sum();
        assert!((r["lost_supply"]["demand"].as_f64().unwrap() - total).abs() < 1e-9, "{id}");
        assert_eq!(r["passed"], false, "{id}: a cut-off demand breaks all_demands_supplied");
    }
    assert!(with_loss >= 2, "the example has a spur whose pipes cut off supply");
    // Worst first: the closure losing the most demand leads.
    let demands: Vec<f64> =
        results.iter().map(|r| r["lost_supply"]["demand"].as_f64().unwrap_or(0.0)).collect::<Vec<_>>();
    assert!(demands.windows(2).all(|w| w[0] >= w[1]), "{demands:?}");
}

#[test]
fn what_if_options_equal_the_same_changes_made_in_the_file() {
    let d = dir("whatif");
    let text = std::fs::read_to_string(EXAMPLE).unwrap();
    // The same scenario written into the file: P-4 closed, every demand times 2.5.
    let mut edited = String::new();
    let mut in_p4 = false;
    for line in text.lines() {
        if let Some(v) = line.strip_prefix("demand = ") {
            edited.push_str(&format!("demand = {}\n", v.parse::<f64>().unwrap() * 2.5));
            continue;
        }
        edited.push_str(line);
        edited.push('\n');
        if line == "id = \"P-4\"" {
            in_p4 = true;
        }
        if in_p4 && line.starts_with("roughness") {
            edited.push_str("status = \"closed\"\n");
            in_p4 = false;
        }
    }
    let copy = write(&d, "edited.toml", &edited);
    let (code_a, a) = json(&["check", EXAMPLE, "--close", "P-4", "--demand-factor", "2.5"]);
    let (code_b, b) = json(&["check", copy.to_str().unwrap()]);
    assert_eq!(code_a, code_b);
    assert_eq!(a["scenario"]["label"], "P-4 closed, demand x2.5");
    assert_eq!(a["scenario"]["closed"], serde_json::json!(["P-4"]));
    for (ca, cb) in a["base"]["checks"].as_array().unwrap().iter().zip(b["base"]["checks"].as_array().unwrap()) {
        assert_eq!(ca["name"], cb["name"]);
        assert_eq!(ca["failures"], cb["failures"], "{}", ca["name"]);
        assert_eq!(ca["checked"], cb["checked"], "{}", ca["name"]);
    }
}

#[test]
fn junit_has_one_case_per_criterion_and_scenario_and_escapes_ids() {
    let d = dir("junit");
    let model = write(
        &d,
        "m.toml",
        "title = \"A & B <works>\"\n[criteria]\nmin_pressure = 45\n\
         [[nodes]]\nid = \"R\"\nkind = \"reservoir\"\nhead = 60\n\
         [[nodes]]\nid = \"J<1>\"\nelevation = 10\ndemand = 2\n\
         [[nodes]]\nid = \"J&2\"\nelevation = 12\ndemand = 2\n\
         [[links]]\nid = \"P'1\"\nfrom = \"R\"\nto = \"J<1>\"\nlength = 900\ndiameter = 100\nroughness = 100\n\
         [[links]]\nid = \"P2\"\nfrom = \"J<1>\"\nto = \"J&2\"\nlength = 900\ndiameter = 100\nroughness = 100\n\
         [[links]]\nid = \"P3\"\nfrom = \"R\"\nto = \"J&2\"\nlength = 900\ndiameter = 100\nroughness = 100\n",
    );
    let junit = d.join("report.xml");
    let (code, v) = json(&["check", model.to_str().unwrap(), "--each-pipe-closed", "--junit", junit.to_str().unwrap()]);
    let xml = std::fs::read_to_string(&junit).unwrap();
    let criteria = v["base"]["checks"].as_array().unwrap().len();
    let scenarios = 1 + v["each_pipe_closed"]["closures"].as_u64().unwrap() as usize;
    assert_eq!(xml.matches("<testcase ").count(), criteria * scenarios, "{xml}");
    let failed_cases = xml.matches("<failure ").count();
    let failed_json = v["base"]["checks"].as_array().unwrap().iter().filter(|c| c["passed"] == false).count()
        + v["each_pipe_closed"]["results"]
            .as_array()
            .unwrap()
            .iter()
            .map(|r| r["checks"].as_array().unwrap().len())
            .sum::<usize>();
    assert_eq!(failed_cases, failed_json);
    assert!(failed_cases > 0 && code == 1);
    assert!(xml.contains(&format!("tests=\"{}\" failures=\"{failed_cases}\"", criteria * scenarios)), "{xml}");
    assert!(xml.contains("J&lt;1&gt;") || xml.contains("J&amp;2"), "{xml}");
    assert!(xml.contains("P&apos;1 closed"), "{xml}");
    assert!(!xml.contains("J<1>") && !xml.contains("J&2"), "{xml}");
    // Every element opened is closed: a crude well-formedness check.
    assert_eq!(xml.matches("<testsuite ").count(), xml.matches("</testsuite>").count());
}

#[test]
fn a_network_that_cannot_deliver_its_demand_exits_3_naming_the_junction() {
    let d = dir("unsolved");
    let model = write(
        &d,
        "m.toml",
        "[[nodes]]\nid = \"Low Source\"\nkind = \"reservoir\"\nhead = 40\n\
         [[nodes]]\nid = \"Hilltop\"\nelevation = 75\ndemand = 1\n\
         [[links]]\nid = \"P1\"\nfrom = \"Low Source\"\nto = \"Hilltop\"\nlength = 500\ndiameter = 100\nroughness = 120\n",
    );
    let (code, stdout, _) = run(&["check", model.to_str().unwrap()]);
    assert_eq!(code, 3, "{stdout}");
    assert!(stdout.contains("the demand cannot be delivered at 1 junction(s): 'Hilltop'"), "{stdout}");
    // With must_converge = false the finding is a note and the exit code follows the criteria.
    let relaxed = write(&d, "c.toml", "must_converge = false\n");
    let (code, stdout, _) = run(&["check", model.to_str().unwrap(), "--criteria", relaxed.to_str().unwrap()]);
    assert_eq!(code, 0, "{stdout}");
    assert!(stdout.contains("note: no usable answer"), "{stdout}");
}

#[test]
fn an_iteration_limit_too_low_exits_3_naming_links() {
    let d = dir("iterations");
    let text = std::fs::read_to_string(EXAMPLE)
        .unwrap()
        .replace("headloss = \"hazen-williams\"", "headloss = \"hazen-williams\"\nmax_iterations = 1");
    let model = write(&d, "m.toml", &text);
    let (code, stdout, _) = run(&["check", model.to_str().unwrap()]);
    assert_eq!(code, 3, "{stdout}");
    assert!(stdout.contains("did not converge in 1 iteration:"), "{stdout}");
    assert!(stdout.contains("links with the largest energy residual: '"), "{stdout}");
    let (code, v) = json(&["check", model.to_str().unwrap(), "--each-pipe-closed"]);
    assert_eq!(code, 3);
    assert_eq!(v["each_pipe_closed"]["not_converged"], v["each_pipe_closed"]["closures"]);
}

#[test]
fn warnings_count_as_failures_when_the_criteria_ask() {
    let d = dir("warnings");
    let text = example_without_criteria().replace(
        "[[links]]\nid = \"H-P3\"",
        "[[links]]\nid = \"P-1b\"\nfrom = \"L-2\"\nto = \"L-1\"\nlength = 400.0\ndiameter = 200\nroughness = 110\n\n\
         [[links]]\nid = \"H-P3\"",
    );
    let model = write(&d, "m.toml", &text);
    let (code, stdout, _) = run(&["check", model.to_str().unwrap()]);
    assert_eq!(code, 0, "a warning alone does not fail: {stdout}");
    assert!(stdout.contains("parallel-pipes: link 'P-1b': joins 'L-1' and 'L-2' like pipe 'P-1'"), "{stdout}");
    assert!(stdout.contains("a duplicate entry?"), "{stdout}");
    let strict = write(&d, "c.toml", "[criteria]\nfail_on_warnings = [\"parallel-pipes\"]\n");
    let (code, v) = json(&["check", model.to_str().unwrap(), "--criteria", strict.to_str().unwrap()]);
    assert_eq!(code, 1);
    let c = check(&v["base"], "warnings.parallel-pipes");
    assert_eq!(c["failures"], 1);
    assert_eq!(c["worst"][0]["link"], "P-1b");
}

#[test]
fn a_criteria_file_overrides_the_models_table_key_by_key() {
    let d = dir("override");
    // The model's table asks 20 m globally and 15 m on the hill; raise only the global limit.
    let criteria = write(&d, "c.toml", "[criteria]\nmin_pressure = \"40 m\"\n");
    let (code, v) = json(&["check", EXAMPLE, "--criteria", criteria.to_str().unwrap()]);
    assert_eq!(code, 0, "every junction outside the hill group is above 40 m: {v}");
    assert_eq!(check(&v["base"], "min_pressure")["limit"], 40.0);
    assert_eq!(check(&v["base"], "groups.hill.min_pressure")["limit"], 15.0);
    // The hill group replaces the global limit for its nodes: 5 junctions, not 8.
    assert_eq!(check(&v["base"], "min_pressure")["checked"], 5);
    // A group that selects nothing is said so.
    let none = write(&d, "g.toml", "[[criteria.groups]]\nzone = \"nowhere\"\nmin_pressure = 10\n");
    let (_, stdout, _) = run(&["check", EXAMPLE, "--criteria", none.to_str().unwrap()]);
    assert!(stdout.contains("criteria group '1' selects no node of this model"), "{stdout}");
}
