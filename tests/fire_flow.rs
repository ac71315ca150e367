//! `ringmain fire-flow` against closed forms on single mains, and its bad input.
//!
//! Closed forms: Hazen–Williams in its SI velocity form V = 0.849 C R^0.63 S^0.54 (R = D/4 for a
//! full pipe), written out here; on a main fed from a reservoir, the pressure head at distance
//! along it falls by r·Q^1.852 for a draw Q past that point, so the draw that brings the pressure
//! head at a point to the residual is ((H0 − z − p_R)/r)^0.54.

use std::path::PathBuf;
use std::process::Command;

fn dir() -> PathBuf {
    let d = std::env::temp_dir().join(format!("ringmain-fire-flow-{}", std::process::id()));
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn write(name: &str, text: &str) -> PathBuf {
    let path = dir().join(name);
    std::fs::write(&path, text).unwrap();
    path
}

fn run(args: &[&str]) -> (Option<i32>, String, String) {
    let out = Command::new(env!("CARGO_BIN_EXE_ringmain")).args(args).output().unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
    assert!(!stderr.contains("panicked"), "{stderr}");
    (out.status.code(), String::from_utf8_lossy(&out.stdout).into_owned(), stderr)
}

fn json(args: &[&str]) -> serde_json::Value {
    let (code, out, err) = run(args);
    assert_eq!(code, Some(0), "{err}");
    serde_json::from_str(&out).unwrap_or_else(|e| panic!("{e}: {out}"))
}

/// A reservoir at 70 m feeding "Mid" (elevation 10 m, 600 m of 200 mm C 120) and beyond it the
/// hydrant "End" (elevation 14 m, 500 m of 150 mm C 110); no demands. Pressures in m of head.
const LINE: &str = r#"
title = "orchard lane main"
[hydraulics]
head_tolerance = 1e-7
[[nodes]]
id = "Source"
kind = "reservoir"
head = 70.0
[[nodes]]
id = "Mid"
elevation = 10.0
[[nodes]]
id = "End"
elevation = 14.0
[[links]]
id = "A"
from = "Source"
to = "Mid"
length = 600.0
diameter = 200
roughness = 120
[[links]]
id = "B"
from = "Mid"
to = "End"
length = 500.0
diameter = 150
roughness = 110
"#;

/// Hazen–Williams resistance r in h = r Q^1.852 (SI) from V = 0.849 C R^0.63 S^0.54.
fn resistance(length: f64, d: f64, c: f64) -> f64 {
    let area = std::f64::consts::PI * d * d / 4.0;
    let k = 0.849 * c * area * (d / 4.0).powf(0.63);
    length / k.powf(1.0 / 0.54)
}

#[test]
fn hydrant_and_system_limits_on_a_single_main_match_the_closed_form() {
    let path = write("line.toml", LINE);
    let v = json(&["fire-flow", path.to_str().unwrap(), "--residual", "20 m", "--at", "End", "--format", "json"]);
    let row = &v["hydrants"][0];
    assert_eq!(row["id"], "End");
    let (r1, r2) = (resistance(600.0, 0.2, 120.0), resistance(500.0, 0.15, 110.0));
    // (a) the hydrant itself: 70 − 14 − 20 = 36 m over both pipes.
    let hydrant = (36.0 / (r1 + r2)).powf(0.54) * 1e3;
    // (b) Mid, protected (60 m static): 70 − 10 − 20 = 40 m over the first pipe.
    let system = (40.0 / r1).powf(0.54) * 1e3;
    assert!((row["hydrant_limited"].as_f64().unwrap() - hydrant).abs() < 1e-5 * hydrant, "{row} vs {hydrant}");
    assert!((row["system_limited"].as_f64().unwrap() - system).abs() < 1e-5 * system, "{row} vs {system}");
    assert_eq!(row["limiting_node"], "Mid");
    assert_eq!(row["limit"], if hydrant < system { "hydrant" } else { "system" });
    assert!((row["static_pressure"].as_f64().unwrap() - 56.0).abs() < 1e-6);
    // The stated accuracy, 0.1 L/s, in the model's flow unit.
    assert!((v["flow_tolerance"].as_f64().unwrap() - 0.1).abs() < 1e-12, "{v}");
    assert!((row["available"].as_f64().unwrap() - hydrant.min(system)).abs() < 1e-5 * system);
    // With Mid on a hill (elevation 40 m, 30 m static) and a residual of 25 m, Mid reaches the
    // residual first: the system limit binds.
    let hill =
        write("hill.toml", &LINE.replacen("id = \"Mid\"\nelevation = 10.0", "id = \"Mid\"\nelevation = 40.0", 1));
    let v = json(&["fire-flow", hill.to_str().unwrap(), "--residual", "25", "--at", "End", "--format", "json"]);
    let row = &v["hydrants"][0];
    let hydrant = (31.0 / (r1 + r2)).powf(0.54) * 1e3;
    let system = (5.0 / r1).powf(0.54) * 1e3;
    assert!(system < hydrant);
    assert_eq!(row["limit"], "system");
    assert!((row["system_limited"].as_f64().unwrap() - system).abs() < 1e-5 * system, "{row} vs {system}");
    assert!((row["hydrant_limited"].as_f64().unwrap() - hydrant).abs() < 1e-5 * hydrant, "{row} vs {hydrant}");
}

#[test]
fn a_hydrant_below_the_residual_gets_zero_and_a_note_and_no_protected_junction_gives_null() {
    let path = write("below.toml", LINE);
    // 58 m: End (56 m static) is below; Mid (60 m) is protected.
    let v = json(&["fire-flow", path.to_str().unwrap(), "--residual", "58 m", "--at", "End", "--format", "json"]);
    let row = &v["hydrants"][0];
    assert_eq!(row["hydrant_limited"], 0.0);
    assert_eq!(row["available"], 0.0);
    assert!(row["notes"].as_array().unwrap().iter().any(|n| n.as_str().unwrap().contains("below the residual")));
    // 61 m: nobody is protected.
    let v = json(&["fire-flow", path.to_str().unwrap(), "--residual", "61 m", "--at", "Mid", "--format", "json"]);
    let row = &v["hydrants"][0];
    assert!(row["system_limited"].is_null() && row["limiting_node"].is_null(), "{row}");
}

#[test]
fn many_hydrants_in_parallel_agree_with_one_at_a_time() {
    let path = write("many.toml", LINE);
    let p = path.to_str().unwrap();
    let all = json(&["fire-flow", p, "--residual", "20 psi", "--all-junctions", "--format", "json"]);
    for row in all["hydrants"].as_array().unwrap() {
        let id = row["id"].as_str().unwrap();
        let one = json(&["fire-flow", p, "--residual", "20 psi", "--at", id, "--format", "json"]);
        for key in ["hydrant_limited", "system_limited", "static_pressure"] {
            let (a, b) = (row[key].as_f64(), one["hydrants"][0][key].as_f64());
            match (a, b) {
                (Some(a), Some(b)) => assert!((a - b).abs() <= 1e-6 * a.abs().max(1.0), "{id} {key}: {a} vs {b}"),
                _ => assert_eq!(a, b, "{id} {key}"),
            }
        }
    }
    // CSV and table carry the same hydrants.
    let (code, csv, _) = run(&["fire-flow", p, "--residual", "20 psi", "--all-junctions", "--format", "csv"]);
    assert_eq!(code, Some(0));
    assert!(csv.starts_with("id,static_pressure_m,hydrant_limited_L/s,system_limited_L/s,available_L/s,limit"));
    assert_eq!(csv.lines().count(), 3);
    let (code, table, _) = run(&["fire-flow", p, "--residual", "20 psi", "--at", "End"]);
    assert_eq!(code, Some(0));
    assert!(table.contains("End") && table.contains("licensed engineer"), "{table}");
}

#[test]
fn demand_factor_scales_the_background_demands() {
    // With a demand at Mid, a larger factor leaves less for the hydrant.
    let text = LINE.replacen("id = \"Mid\"\nelevation = 10.0", "id = \"Mid\"\nelevation = 10.0\ndemand = 20.0", 1);
    let path = write("factor.toml", &text);
    let p = path.to_str().unwrap();
    let flow = |f: &str| {
        json(&["fire-flow", p, "--residual", "20 m", "--at", "End", "--demand-factor", f, "--format", "json"])
            ["hydrants"][0]["hydrant_limited"]
            .as_f64()
            .unwrap()
    };
    let (a, b) = (flow("0"), flow("2"));
    assert!(a > b, "{a} {b}");
    // Factor 0: no background draw, the closed form of the bare main.
    let (r1, r2) = (resistance(600.0, 0.2, 120.0), resistance(500.0, 0.15, 110.0));
    let bare = (36.0 / (r1 + r2)).powf(0.54) * 1e3;
    assert!((a - bare).abs() < 1e-5 * bare);
}

#[test]
fn bad_fire_flow_arguments_exit_2_naming_what_is_wrong() {
    let path = write("bad.toml", LINE);
    let p = path.to_str().unwrap();
    let cases: &[(&[&str], &str)] = &[
        (&["--residual", "20 psi", "--at", "Ned"], "'Ned'"),
        (&["--residual", "20 psi", "--at", "Source"], "must be a junction"),
        (&["--residual", "20 psx", "--at", "End"], "unknown pressure unit"),
        (&["--residual", "twenty", "--at", "End"], "--residual"),
        (&["--residual", "nan psi", "--at", "End"], "--residual"),
        (&["--residual", "20 psi"], "--at"),
        (&["--residual", "20 psi", "--zone", "nowhere"], "'nowhere'"),
        (&["--residual", "20 psi", "--at", "End", "--demand-factor=-1"], "--demand-factor"),
        (&["--residual", "20 psi", "--at", "End", "--output", p], "model file"),
    ];
    for (extra, want) in cases {
        let mut args = vec!["fire-flow", p];
        args.extend_from_slice(extra);
        let (code, out, err) = run(&args);
        assert_eq!(code, Some(2), "{args:?}: {err}");
        assert!(err.contains(want), "{args:?}: expected {want:?} in {err}");
        assert!(out.is_empty(), "{args:?}");
    }
    // The model is untouched.
    assert_eq!(std::fs::read_to_string(&path).unwrap(), LINE);
}

// ---------------------------------------------------------------------------------------------
// The held solves against the search on the draw.
//
// `fire_flows` answers each limit by one solve in which the draw is an unknown and one head is
// held at the residual; `fire_flows_by_search` by the search on the draw alone (whole solves
// until the pressure is within 1e-7 m of the residual). Both must give the same answers within
// the stated `FLOW_TOLERANCE` (0.1 L/s), the same limiting junctions and the same notes: on
// hydrants in the core and on dead-end branches, hydrants already below the residual, hydrants
// with no protected junction, with `[pressure_demand]`, and with pumps, a pressure-reducing
// valve and a tank.

use ringmain_core::analysis::fire_flow::{fire_flows, fire_flows_by_search, FireFlow, FireFlowOptions, FLOW_TOLERANCE};
use ringmain_core::generate::{generate, NetworkSpec};
use ringmain_core::{Format, Model, NodeKind, Solver};

fn junctions(model: &Model) -> Vec<usize> {
    (0..model.nodes().len()).filter(|&i| matches!(model.nodes()[i].kind, NodeKind::Junction { .. })).collect()
}

/// Asserts that the held solves and the search agree on `hydrants`; returns the held answers.
fn held_equals_search(model: &Model, hydrants: &[usize], residual: f64, demand_factor: f64) -> Vec<FireFlow> {
    let options = FireFlowOptions { residual, demand_factor };
    let fast = fire_flows(model, hydrants, &options).unwrap();
    let slow = fire_flows_by_search(model, hydrants, &options).unwrap();
    assert_eq!(fast.len(), hydrants.len());
    // The held solves answer (almost) every hydrant themselves: this compares two methods, not
    // the search with itself. (The search is kept where a held head does not follow the draw:
    // behind a pressure-reducing valve, for one.)
    let searched = fast.iter().filter(|f| f.searched).count();
    assert!(searched * 10 <= hydrants.len(), "{searched} of {} hydrants searched", hydrants.len());
    for (f, s) in fast.iter().zip(&slow) {
        let id = &model.nodes()[f.node].id;
        assert_eq!(f.node, s.node);
        assert_eq!(f.static_pressure, s.static_pressure, "{id}");
        assert!((f.hydrant_limited - s.hydrant_limited).abs() <= FLOW_TOLERANCE, "{id}: {f:?} vs {s:?}");
        match (f.system_limited, s.system_limited) {
            (Some(a), Some(b)) => assert!((a - b).abs() <= FLOW_TOLERANCE, "{id}: {f:?} vs {s:?}"),
            (None, None) => {}
            _ => panic!("{id}: {f:?} vs {s:?}"),
        }
        assert_eq!(f.limiting_node, s.limiting_node, "{id}: {f:?} vs {s:?}");
        assert_eq!(f.notes, s.notes, "{id}");
        if (f.hydrant_limited - f.system_limited.unwrap_or(f64::INFINITY)).abs() > 2.0 * FLOW_TOLERANCE {
            assert_eq!(f.limit, s.limit, "{id}");
        }
    }
    fast
}

/// A generated street network (`ringmain generate`'s networks: a grid with dead-end branches).
fn street_network(junctions: usize, seed: u64) -> Model {
    generate(&NetworkSpec::new(junctions, seed)).unwrap()
}

#[test]
fn held_solves_equal_the_search_on_core_and_dead_end_hydrants() {
    let m = street_network(400, 11);
    let hydrants: Vec<usize> = junctions(&m).into_iter().step_by(5).collect();
    let solver = Solver::new(&m).unwrap();
    let in_tree = hydrants.iter().filter(|&&h| solver.structure().in_tree[h]).count();
    assert!(in_tree > 5 && in_tree + 5 < hydrants.len(), "{in_tree} of {} on dead-end branches", hydrants.len());
    // 20 psi (about 14 m of head) is common practice in North America.
    let found = held_equals_search(&m, &hydrants, 14.0, 1.0);
    assert!(found.iter().any(|f| f.limit == ringmain_core::analysis::fire_flow::Limit::System));
    assert!(found.iter().any(|f| f.limit == ringmain_core::analysis::fire_flow::Limit::Hydrant));
    // Twice the demands.
    held_equals_search(&m, &hydrants, 14.0, 2.0);
}

#[test]
fn held_solves_equal_the_search_below_the_residual_and_without_protected_junctions() {
    let m = street_network(300, 5);
    let base = ringmain_core::solve(&m).unwrap();
    let all = junctions(&m);
    let mut pressures: Vec<f64> = all.iter().map(|&i| base.pressure[i]).collect();
    pressures.sort_by(f64::total_cmp);
    let hydrants: Vec<usize> = all.iter().copied().step_by(9).collect();
    // The median: about half the hydrants are below it already.
    let median = pressures[pressures.len() / 2];
    let found = held_equals_search(&m, &hydrants, median, 1.0);
    assert!(found.iter().any(|f| f.hydrant_limited == 0.0) && found.iter().any(|f| f.hydrant_limited > 0.0));
    // Between the two highest pressures: only the highest junction is above the residual; it has
    // no protected junction, and every other hydrant has that one alone.
    let (top, second) = (pressures[pressures.len() - 1], pressures[pressures.len() - 2]);
    assert!(top > second);
    let highest = *all.iter().find(|&&i| base.pressure[i] == top).unwrap();
    let mut chosen = hydrants.clone();
    chosen.push(highest);
    let found = held_equals_search(&m, &chosen, 0.5 * (top + second), 1.0);
    let last = found.last().unwrap();
    assert!(last.system_limited.is_none() && last.hydrant_limited > 0.0, "{last:?}");
    assert!(found.iter().filter(|f| f.node != highest).all(|f| f.limiting_node == Some(highest)));
}

#[test]
fn held_solves_equal_the_search_with_pressure_dependent_demand() {
    let m = street_network(300, 8);
    let mut doc: serde_json::Value =
        serde_json::from_str(&ringmain_core::format::write::to_string(&m, Format::Json)).unwrap();
    doc["pressure_demand"] = serde_json::json!({ "full_pressure": 40.0, "zero_pressure": 5.0, "exponent": 0.5 });
    let pdd = ringmain_core::read_str(&doc.to_string(), Format::Json, "pdd.json").unwrap();
    assert!(pdd.outflow.is_active());
    let hydrants: Vec<usize> = junctions(&pdd).into_iter().step_by(7).collect();
    let found = held_equals_search(&pdd, &hydrants, 14.0, 3.0);
    assert!(found.iter().all(|f| f.available() > 0.0));
}

#[test]
fn held_solves_equal_the_search_with_outlets_and_leakage() {
    // Background leakage on every main (0.05 L/s per km at 50 m, exponent 1.18: a commonly quoted
    // network average) and an orifice to atmosphere at every eleventh junction (0.1 L/s at 1 m,
    // exponent 0.5: the orifice law); invented values. The outflows follow pressure, so the
    // general held solve answers (the light one serves fixed outflows only).
    let m = street_network(300, 4);
    let mut doc: serde_json::Value =
        serde_json::from_str(&ringmain_core::format::write::to_string(&m, Format::Json)).unwrap();
    doc["leakage"] = serde_json::json!({ "rate": 0.05, "reference_pressure": 50.0, "exponent": 1.18 });
    let nodes = doc["nodes"].as_array_mut().unwrap();
    for node in nodes.iter_mut().filter(|n| n["kind"] == "junction").step_by(11) {
        node["outlet"] = serde_json::json!({ "coefficient": 0.1, "exponent": 0.5 });
    }
    let leaky = ringmain_core::read_str(&doc.to_string(), Format::Json, "leaky.json").unwrap();
    let hydrants: Vec<usize> = junctions(&leaky).into_iter().step_by(6).collect();
    let found = held_equals_search(&leaky, &hydrants, 14.0, 1.0);
    assert!(found.iter().all(|f| f.available() > 0.0));
}

#[test]
fn held_solves_equal_the_search_with_pumps_valves_and_a_tank() {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/hillside.toml");
    let m = ringmain_core::read_str(&std::fs::read_to_string(path).unwrap(), Format::Toml, path).unwrap();
    let hydrants = junctions(&m);
    held_equals_search(&m, &hydrants, 14.0, 1.0);
    held_equals_search(&m, &hydrants, 25.0, 1.5);
}

#[test]
fn held_solves_equal_the_search_when_each_hydrant_starts_from_a_very_different_neighbour() {
    // Hydrants in a chunk start from their predecessor's answer: order them largest, smallest,
    // next largest, ... fire flow, so that every start is as far from its answer as the network
    // allows (a trunk main's draw at the end of a small branch, and back).
    let m = street_network(400, 3);
    let sample: Vec<usize> = junctions(&m).into_iter().step_by(4).collect();
    let options = FireFlowOptions { residual: 14.0, demand_factor: 1.0 };
    let mut found = fire_flows(&m, &sample, &options).unwrap();
    found.sort_by(|a, b| a.hydrant_limited.total_cmp(&b.hydrant_limited));
    assert!(found[found.len() - 1].hydrant_limited > 5.0 * found[0].hydrant_limited);
    let mut order = Vec::new();
    let (mut lo, mut hi) = (0, found.len());
    while lo < hi {
        hi -= 1;
        order.push(found[hi].node);
        if lo < hi {
            order.push(found[lo].node);
            lo += 1;
        }
    }
    held_equals_search(&m, &order, 14.0, 1.0);
}
