//! One case through every solving path, one answer.
//!
//! The library solves a network along five paths: a cold solve (a fresh solver and fresh
//! conditions), a warm solve (a solver that has solved the base case before, starting from its
//! solution), a batch ([`Solver::solve_batch`], on the thread pool), a scenario
//! ([`Solver::solve_scenario`]) and the C library (values set through its setters, solved by
//! `ringmain_model_solve`, read back in the model's units). They share the laws and the
//! iteration but not the bookkeeping around them (which laws are rebuilt, where values are
//! written, how they are converted), so this harness runs the same cases through all five and
//! requires the same heads and flows:
//!
//! - cold, batch and scenario: bit for bit (the same arithmetic in the same order);
//! - warm and C: within the solver's own convergence rule (heads to 1e-4 m, below the default
//!   head tolerance's reach, and flows to 1e-4 relative); the warm solve starts elsewhere and the
//!   C library scales demands in the model's units before converting them.
//!
//! The cases: the demo town (`examples/hillside.toml`, invented), the two-loop benchmark network
//! of the literature (`tests/data/two-loop.toml`, its source named there) and an invented small
//! scheme with a pump, a pressure-reducing valve and a closed pipe. Each is solved for the base
//! case, for every demand scaled by 1.3, and for one pipe closed with demands scaled by 0.8.

use ringmain::*;
use ringmain_core::solve::{Conditions, Scenario, Solution, SolveOptions, Solver};
use ringmain_core::units::Quantity;
use ringmain_core::{read_bytes, Format, LinkKind, LinkStatus, Model};
use std::path::Path;

const SMALL: &str = r#"
[[nodes]]
id = "Intake"
kind = "reservoir"
head = 40.0
[[nodes]]
id = "Hilltop"
kind = "tank"
elevation = 72.0
level = 3.0
min_level = 0.5
max_level = 6.0
diameter = 12.0
[[nodes]]
id = "N1"
elevation = 30.0
demand = 4.0
[[nodes]]
id = "N2"
elevation = 34.0
demand = 3.0
[[nodes]]
id = "N3"
elevation = 20.0
demand = 2.5
[[nodes]]
id = "N4"
elevation = 25.0
demand = 1.5
[[links]]
id = "Booster"
kind = "pump"
from = "Intake"
to = "N1"
head_curve = [[0.0, 70.0], [15.0, 60.0], [30.0, 35.0]]
[[links]]
id = "M1"
from = "N1"
to = "N2"
length = 400.0
diameter = 200.0
roughness = 120.0
[[links]]
id = "M2"
from = "Hilltop"
to = "N2"
length = 600.0
diameter = 200.0
roughness = 110.0
[[links]]
id = "M3"
from = "N2"
to = "N4"
length = 300.0
diameter = 150.0
roughness = 120.0
[[links]]
id = "M4"
from = "N1"
to = "N4"
length = 500.0
diameter = 100.0
roughness = 100.0
status = "closed"
[[links]]
id = "Reducer"
kind = "valve"
valve = "pressure-reducing"
from = "N4"
to = "N3"
diameter = 100.0
setting = 30.0
"#;

/// A case: the model's text and the name it is read under.
fn cases() -> Vec<(String, String)> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("..");
    let mut cases = vec![("small scheme".to_owned(), SMALL.to_owned())];
    for file in ["examples/hillside.toml", "tests/data/two-loop.toml"] {
        cases.push((file.to_owned(), std::fs::read_to_string(root.join(file)).expect("read the case")));
    }
    cases
}

/// The scenarios of every case: the base, demands × 1.3, and the first open pipe that is not a
/// dead end's only feed closed with demands × 0.8 (the first pipe whose closing still solves).
fn scenarios(model: &Model) -> Vec<Scenario> {
    let mut list = vec![Scenario::default(), Scenario { demand_factor: 1.3, statuses: Vec::new() }];
    let options = SolveOptions::from_model(model);
    let conditions = Conditions::from_model(model);
    let mut solver = Solver::new(model).expect("the case is valid");
    for (k, l) in model.links().iter().enumerate() {
        if !matches!(l.kind, LinkKind::Pipe(_)) || l.status == LinkStatus::Closed {
            continue;
        }
        let s = Scenario { demand_factor: 0.8, statuses: vec![(k, LinkStatus::Closed)] };
        let solved = solver.solve_scenario(model, &conditions, &options, &s);
        if solved.is_ok_and(|sol| sol.connected.iter().all(|&c| c)) {
            list.push(s);
            break;
        }
    }
    assert_eq!(list.len(), 3, "no pipe of the case can be closed");
    list
}

fn cold(model: &Model, s: &Scenario) -> Solution {
    let mut conditions = Conditions::from_model(model);
    s.apply(model, &mut conditions).unwrap();
    Solver::new(model).unwrap().solve(model, &conditions, &SolveOptions::from_model(model)).unwrap()
}

fn warm(model: &Model, s: &Scenario) -> Solution {
    let base = Conditions::from_model(model);
    let mut options = SolveOptions::from_model(model);
    let mut solver = Solver::new(model).unwrap();
    solver.solve(model, &base, &options).unwrap();
    options.warm_start = true;
    let mut conditions = base.clone();
    s.apply(model, &mut conditions).unwrap();
    solver.solve(model, &conditions, &options).unwrap()
}

fn batch(model: &Model, all: &[Scenario]) -> Vec<Solution> {
    let solver = Solver::new(model).unwrap();
    let base = Conditions::from_model(model);
    solver.solve_batch(model, &base, &SolveOptions::from_model(model), all).into_iter().map(Result::unwrap).collect()
}

fn scenario(model: &Model, s: &Scenario) -> Solution {
    let base = Conditions::from_model(model);
    Solver::new(model).unwrap().solve_scenario(model, &base, &SolveOptions::from_model(model), s).unwrap()
}

/// Heads and flows in SI from the C library, for scenario `s` set through its setters.
fn c_api(text: &str, model: &Model, s: &Scenario) -> (Vec<f64>, Vec<f64>) {
    let u = model.converter();
    // SAFETY: valid text, out pointers and buffers of the lengths given; every handle freed.
    unsafe {
        let mut m = std::ptr::null_mut();
        assert_eq!(ringmain_model_from_toml(text.as_ptr().cast(), text.len(), &mut m), ringmain_status::RINGMAIN_OK);
        let n = model.nodes().len();
        let mut demands = vec![0.0; n];
        let got = ringmain_model_get_demands(m, demands.as_mut_ptr(), n, std::ptr::null_mut());
        assert_eq!(got, ringmain_status::RINGMAIN_OK);
        let scaled: Vec<f64> = demands.iter().map(|d| d * s.demand_factor).collect();
        assert_eq!(ringmain_model_set_demands(m, scaled.as_ptr(), n), ringmain_status::RINGMAIN_OK);
        for &(k, status) in &s.statuses {
            let code = match status {
                LinkStatus::Open => ringmain_link_status::RINGMAIN_STATUS_OPEN,
                LinkStatus::Closed => ringmain_link_status::RINGMAIN_STATUS_CLOSED,
            };
            assert_eq!(ringmain_model_set_link_status(m, k, code as u32), ringmain_status::RINGMAIN_OK);
        }
        let mut r = std::ptr::null_mut();
        assert_eq!(ringmain_model_solve(m, &mut r), ringmain_status::RINGMAIN_OK);
        let mut heads = vec![0.0; n];
        let mut flows = vec![0.0; model.links().len()];
        let null = std::ptr::null_mut();
        assert_eq!(ringmain_results_heads(r, heads.as_mut_ptr(), n, null), ringmain_status::RINGMAIN_OK);
        assert_eq!(ringmain_results_flows(r, flows.as_mut_ptr(), flows.len(), null), ringmain_status::RINGMAIN_OK);
        ringmain_results_free(r);
        ringmain_model_free(m);
        (
            heads.iter().map(|&h| u.to_si(Quantity::Length, h)).collect(),
            flows.iter().map(|&q| u.to_si(Quantity::Flow, q)).collect(),
        )
    }
}

fn close(what: &str, a: &[f64], b: &[f64], absolute: f64, relative: f64) {
    assert_eq!(a.len(), b.len(), "{what}: lengths");
    for (i, (x, y)) in a.iter().zip(b).enumerate() {
        let allowed = absolute + relative * x.abs().max(y.abs());
        assert!((x - y).abs() <= allowed, "{what}[{i}]: {x} against {y} (allowed {allowed:e})");
    }
}

fn bits(v: &[f64]) -> Vec<u64> {
    v.iter().map(|x| x.to_bits()).collect()
}

#[test]
fn every_solving_path_gives_the_same_answer() {
    let mut compared = 0;
    for (name, text) in cases() {
        let model = read_bytes(text.as_bytes(), Format::Toml, &name).expect("the case reads");
        let all = scenarios(&model);
        let batched = batch(&model, &all);
        for (i, s) in all.iter().enumerate() {
            let what = format!("{name}, scenario {i} ({s:?})");
            let reference = cold(&model, s);
            for (path, other) in [("batch", &batched[i]), ("scenario", &scenario(&model, s))] {
                assert_eq!(bits(&other.head), bits(&reference.head), "{what}: {path} heads");
                assert_eq!(bits(&other.flow), bits(&reference.flow), "{what}: {path} flows");
            }
            let w = warm(&model, s);
            close(&format!("{what}: warm heads"), &w.head, &reference.head, 1e-4, 0.0);
            close(&format!("{what}: warm flows"), &w.flow, &reference.flow, 1e-7, 1e-4);
            let (heads, flows) = c_api(&text, &model, s);
            close(&format!("{what}: C heads"), &heads, &reference.head, 1e-4, 0.0);
            close(&format!("{what}: C flows"), &flows, &reference.flow, 1e-7, 1e-4);
            compared += 1;
        }
    }
    assert_eq!(compared, 9, "three cases of three scenarios each");
}
