//! A one-off solve (`Solver::solve_once`, and `Solver::analyse_and_solve_once`, which
//! `ringmain solve` and `ringmain_core::solve` use: it frees the solver's work arrays before the solution is made) gives the answer of an
//! ordinary solve bit for bit, on every demo model and on generated networks with and without
//! outflows that follow pressure; the solver still solves afterwards; and a model whose id
//! indices were freed (`Model::release_id_index`) answers every lookup as before and still
//! refuses a duplicate id.
//!
//! These are agreement checks between two paths of the same solver (the ordinary path is itself
//! checked against published references in `tests/python` and `tests/solver.rs`): the answers
//! must be identical, not merely close.

use ringmain_core::generate::{generate, NetworkSpec};
use ringmain_core::model::outflow::{Leakage, PressureDemand};
use ringmain_core::{Model, Node, Solution, Solver};
use std::path::PathBuf;

fn model_file(dir: &str, name: &str) -> Model {
    let path = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join(dir).join(name);
    let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    ringmain_core::read_str(&text, ringmain_core::Format::Toml, name).unwrap_or_else(|e| panic!("{name}: {e}"))
}

/// Every demo model and test network of the repository, with its name.
fn demo_models() -> Vec<(String, Model)> {
    let mut out = Vec::new();
    for dir in ["examples", "tests/data"] {
        let root = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join(dir);
        let mut names: Vec<String> = std::fs::read_dir(&root)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .filter(|n| n.ends_with(".toml") && n != "FIELDS.toml")
            .collect();
        names.sort();
        for name in names {
            out.push((name.clone(), model_file(dir, &name)));
        }
    }
    assert!(out.len() >= 6, "demo models found: {}", out.len());
    out
}

/// Two solutions are the same value for value, bit for bit (NaN where the other is NaN).
fn assert_identical(got: &Solution, want: &Solution, what: &str) {
    let same = |a: &[f64], b: &[f64], field: &str| {
        assert_eq!(a.len(), b.len(), "{what}: {field} length");
        for (i, (x, y)) in a.iter().zip(b).enumerate() {
            assert!(x.to_bits() == y.to_bits() || (x.is_nan() && y.is_nan()), "{what}: {field}[{i}]: {x} vs {y}");
        }
    };
    same(&got.head, &want.head, "head");
    same(&got.pressure, &want.pressure, "pressure");
    same(&got.demand, &want.demand, "demand");
    same(&got.delivered, &want.delivered, "delivered");
    same(&got.leakage, &want.leakage, "leakage");
    same(&got.outlet, &want.outlet, "outlet");
    same(&got.flow, &want.flow, "flow");
    same(&got.velocity, &want.velocity, "velocity");
    same(&got.headloss, &want.headloss, "headloss");
    assert_eq!(got.connected, want.connected, "{what}: connected");
    assert_eq!(got.link_state, want.link_state, "{what}: link states");
    assert_eq!(got.pumps, want.pumps, "{what}: pumps");
    assert_eq!(got.warnings, want.warnings, "{what}: warnings");
    assert_eq!(
        (got.iterations, got.status_changes, got.ending),
        (want.iterations, want.status_changes, want.ending),
        "{what}: iterations"
    );
    for (field, x, y) in [
        ("max_mass_residual", got.max_mass_residual, want.max_mass_residual),
        ("max_energy_residual", got.max_energy_residual, want.max_energy_residual),
        ("last_head_change", got.last_head_change, want.last_head_change),
        ("last_flow_change", got.last_flow_change, want.last_flow_change),
    ] {
        assert_eq!(x.to_bits(), y.to_bits(), "{what}: {field}: {x} vs {y}");
    }
}

/// `solve_once` equals `solve_model` on `model`; the solver then solves again (cold, with its
/// work arrays made afresh) to the same answer, by either path.
fn check_one_off(model: &Model, what: &str) {
    let want = Solver::new(model).and_then(|mut s| s.solve_model(model)).unwrap_or_else(|e| panic!("{what}: {e}"));
    let mut solver = Solver::new(model).unwrap_or_else(|e| panic!("{what}: {e}"));
    let got = solver.solve_once(model).unwrap_or_else(|e| panic!("{what}: {e}"));
    assert_identical(&got, &want, what);
    let again = solver.solve_model(model).unwrap_or_else(|e| panic!("{what}, solved again: {e}"));
    assert_identical(&again, &want, &format!("{what}, solved again"));
    let once_more = solver.solve_once(model).unwrap_or_else(|e| panic!("{what}, once more: {e}"));
    assert_identical(&once_more, &want, &format!("{what}, once more"));
    // The free function is the one-off path too.
    assert_identical(&ringmain_core::solve(model).unwrap(), &want, &format!("{what}, solve()"));
    // The analysis beside the laws and conditions (what `ringmain solve` runs); the solver it
    // gives back solves again.
    let (solver, got) = Solver::analyse_and_solve_once(model);
    assert_identical(&got.unwrap_or_else(|e| panic!("{what}: {e}")), &want, &format!("{what}, side by side"));
    let mut solver = solver.unwrap_or_else(|| panic!("{what}: no solver"));
    assert!(solver.timings().iterations > 0, "{what}");
    let again = solver.solve_model(model).unwrap_or_else(|e| panic!("{what}, side by side, again: {e}"));
    assert_identical(&again, &want, &format!("{what}, side by side, solved again"));
}

#[test]
fn a_one_off_solve_equals_an_ordinary_solve_on_every_demo_model() {
    for (name, model) in demo_models() {
        check_one_off(&model, &name);
    }
}

#[test]
fn a_one_off_solve_equals_an_ordinary_solve_on_generated_networks() {
    let m = generate(&NetworkSpec::new(20_000, 3)).expect("generated");
    check_one_off(&m, "generated 20 000");
    // Outflows that follow pressure (Wagner's relation for the demand, and background leakage):
    // the solution's arrays of relations are made after the work arrays are freed.
    let mut m = generate(&NetworkSpec::new(2_000, 5)).expect("generated");
    m.outflow.pressure_demand = Some(PressureDemand { full_pressure: 30.0, zero_pressure: 5.0, exponent: 0.5 });
    m.outflow.leakage = Some(Leakage { rate: 1e-7, reference_pressure: 30.0, exponent: 1.18 });
    let s = ringmain_core::solve(&m).unwrap();
    assert!(!s.delivered.is_empty() && !s.leakage.is_empty(), "the relations are active");
    check_one_off(&m, "generated 2 000, pressure-dependent");
}

#[test]
fn a_model_without_its_id_index_answers_every_lookup_as_before() {
    for (name, mut model) in demo_models()
        .into_iter()
        .take(3)
        .chain([("generated 5 000".to_owned(), generate(&NetworkSpec::new(5_000, 9)).expect("generated"))])
    {
        let nodes: Vec<Option<usize>> = model.nodes().iter().map(|n| model.node_index(&n.id)).collect();
        let links: Vec<Option<usize>> = model.links().iter().map(|l| model.link_index(&l.id)).collect();
        assert!(nodes.iter().enumerate().all(|(i, &k)| k == Some(i)), "{name}: nodes");
        assert!(links.iter().enumerate().all(|(i, &k)| k == Some(i)), "{name}: links");
        model.release_id_index();
        for (i, n) in model.nodes().iter().enumerate() {
            assert_eq!(model.node_index(&n.id), Some(i), "{name}: node {}", n.id);
        }
        model.release_id_index();
        for (k, l) in model.links().iter().enumerate() {
            assert_eq!(model.link_index(&l.id), Some(k), "{name}: link {}", l.id);
        }
        assert_eq!(model.node_index("no such node"), None, "{name}");
        assert_eq!(model.link_index("no such link"), None, "{name}");
        // Adding after a release: a duplicate id is still refused with the entry it repeats; a
        // new id is found where it was put.
        model.release_id_index();
        let first = model.nodes()[0].id.to_string();
        let err = model.add_node(Node::junction(first.as_str(), 10.0, 0.0)).unwrap_err().to_string();
        assert!(err.contains("nodes entry #1 has the same id"), "{name}: {err}");
        model.release_id_index();
        let k = model.add_node(Node::junction("J-added-after-release", 10.0, 0.0)).unwrap();
        assert_eq!(model.node_index("J-added-after-release"), Some(k), "{name}");
        assert_eq!(model.node_index(&first), Some(0), "{name}");
    }
}
