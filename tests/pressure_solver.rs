//! The solver with outflows that follow pressure: properties on random looped networks, devices,
//! dead-end trees and starting points.
//!
//! The relations are those of the model file: demand following pressure after Wagner, Shamir &
//! Marks (1988, J. Water Resour. Plann. Manage. 114(3)), q = d ((p − p0)/(p1 − p0))^e; outlets by
//! the orifice law q = k p^e; background leakage after Germanopoulos (1985), q = r L (p/p_ref)^e,
//! half of each pipe's leak at each end. They are written out again here, independently of the
//! library. The closed forms and an independent solve of the whole nonlinear system (scipy) are in
//! tests/python/test_pressure_reference.py; these tests check what must hold for every network:
//!
//! * each junction's delivered demand, outlet and leak lie on their relation at its pressure (up
//!   to the head tolerance, within which the solver smooths the relations' kinks), and the mass
//!   balance holds;
//! * delivered ≤ asked everywhere;
//! * delivered is monotone in the source head;
//! * the demand-driven answer is recovered when every pressure is above full pressure;
//! * the problem has one solution (its content function is strictly convex), reached from any start;
//! * devices (pumps, check valves, pressure-reducing valves) keep working, without cycling.

mod common;

use proptest::prelude::*;
use ringmain_core::model::outflow::{JunctionOutflow, Leakage, Outlet, PressureDemand};
use ringmain_core::model::HydraulicOptions;
use ringmain_core::solve::{Conditions, NodeLaw};
use ringmain_core::{read_str, Format, Link, LinkKind, LinkStatus, Model, Node, Pipe, Solution, SolveOptions, Solver};
use ringmain_core::{NodeKind, UnitSystem};

/// The head tolerance of every case, m; the relations are smoothed within it.
const TOLERANCE: f64 = 1e-6;

/// Wagner, Shamir & Marks (1988).
fn wagner(p: f64, d: f64, p0: f64, p1: f64, e: f64) -> f64 {
    if p <= p0 {
        0.0
    } else if p >= p1 {
        d
    } else {
        d * ((p - p0) / (p1 - p0)).powf(e)
    }
}

/// The orifice law, and leakage (Germanopoulos 1985) with `k = r L / p_ref^e`.
fn power(p: f64, k: f64, e: f64) -> f64 {
    if p > 0.0 {
        k * p.powf(e)
    } else {
        0.0
    }
}

#[derive(Clone, Debug)]
struct Net {
    head: f64,
    /// (elevation m, demand m³/s, outlet coefficient SI or 0)
    junctions: Vec<(f64, f64, f64)>,
    /// (from, to, length m, diameter m, Hazen–Williams C)
    pipes: Vec<(usize, usize, f64, f64, f64)>,
    /// full pressure, zero pressure, exponent
    relation: (f64, f64, f64),
    /// leakage rate (m³/s per m), reference pressure (m), exponent; rate 0 for none
    leakage: (f64, f64, f64),
}

impl Net {
    fn build(&self) -> Model {
        let options = HydraulicOptions { head_tolerance: TOLERANCE, ..HydraulicOptions::default() };
        let mut m = Model::new(UnitSystem::default(), options);
        m.add_node(Node::reservoir("R", self.head)).unwrap();
        for (i, &(z, d, _)) in self.junctions.iter().enumerate() {
            m.add_node(Node::junction(format!("J{i}"), z, d)).unwrap();
        }
        for (k, &(a, b, length, diameter, roughness)) in self.pipes.iter().enumerate() {
            m.add_link(Link {
                id: format!("P{k}").into(),
                from: a,
                to: b,
                status: LinkStatus::Open,
                kind: LinkKind::Pipe(Pipe { length, diameter, roughness, minor_loss: 0.0, check_valve: false }),
            })
            .unwrap();
        }
        let (full, zero, exponent) = self.relation;
        m.outflow.pressure_demand = Some(PressureDemand { full_pressure: full, zero_pressure: zero, exponent });
        for (i, &(_, _, k)) in self.junctions.iter().enumerate() {
            if k > 0.0 {
                let outlet = Some(Outlet { coefficient: k, exponent: 0.5 });
                m.outflow.junctions.insert(i + 1, JunctionOutflow { outlet, ..JunctionOutflow::default() });
            }
        }
        let (rate, reference_pressure, exponent) = self.leakage;
        if rate > 0.0 {
            m.outflow.leakage = Some(Leakage { rate, reference_pressure, exponent });
        }
        m
    }
}

fn network() -> impl Strategy<Value = Net> {
    (3usize..=25, 15.0..90.0f64)
        .prop_flat_map(|(n, head)| {
            (
                Just(head),
                prop::collection::vec(
                    (0.0..40.0f64, 0.5e-3..15e-3f64, prop_oneof![3 => Just(0.0), 1 => 1e-4..3e-3f64]),
                    n,
                ),
                prop::collection::vec((0.0..1.0f64, 100.0..1500.0f64, 0.05..0.3f64, 80.0..140.0f64), n),
                prop::collection::vec((0..=n, 0..=n, 100.0..1500.0f64, 0.05..0.3f64, 80.0..140.0f64), 0..=n),
                (10.0..30.0f64, 0.0..5.0f64, prop_oneof![Just(0.5), Just(1.0), Just(1.5), 0.3..2.0f64]),
                (prop_oneof![Just(0.0), 1e-8..1e-6f64], 20.0..60.0f64, 0.5..2.5f64),
            )
        })
        .prop_map(|(head, junctions, tree, extra, relation, leakage)| {
            let mut pipes = Vec::new();
            // A spanning tree from the reservoir (node 0), then extra pipes closing loops.
            for (t, (u, length, diameter, c)) in tree.into_iter().enumerate() {
                let parent = ((u * (t + 1) as f64) as usize).min(t);
                pipes.push((parent, t + 1, length, diameter, c));
            }
            for (a, b, length, diameter, c) in extra {
                if a != b {
                    pipes.push((a, b, length, diameter, c));
                }
            }
            Net { head, junctions, pipes, relation, leakage }
        })
}

// The property tests below run from a fixed seed (`common::property_config`). Widened by hand to
// 1,000 cases × 3 seeds (`PROPTEST_CASES=1000 PROPTEST_RNG_SEED=1..3`), every random network
// converges, in 2 to 41 iterations (median 6). Before the line search of `search.rs`, a few
// networks of very small pipes asked for large demands stopped with "did not converge" errors,
// or short of the relations' curves (see the test named after that fault below).

fn solve(m: &Model) -> Solution {
    ringmain_core::solve(m).unwrap_or_else(|e| panic!("{e}"))
}

/// Every junction's flows lie on their relations at its pressure: between the relation's values
/// a few head tolerances below and above it.
fn check_relations(net: &Net, m: &Model, s: &Solution) -> Result<(), TestCaseError> {
    let (full, zero, e) = net.relation;
    let w = 4.0 * TOLERANCE;
    let mut leak_length = vec![0.0; m.nodes().len()];
    for &(a, b, length, _, _) in &net.pipes {
        leak_length[a] += 0.5 * length;
        leak_length[b] += 0.5 * length;
    }
    let (rate, reference, leak_e) = net.leakage;
    for (j, &(_, d, k)) in net.junctions.iter().enumerate() {
        let i = j + 1;
        let p = s.pressure[i];
        let within = |got: f64, f: &dyn Fn(f64) -> f64, what: &str| -> Result<(), TestCaseError> {
            let (lo, hi) = (f(p - w), f(p + w));
            let slack = 1e-9 * hi.abs().max(1e-9);
            prop_assert!(got >= lo - slack && got <= hi + slack, "J{j} {what}: {got} not in [{lo}, {hi}] at p = {p}");
            Ok(())
        };
        within(s.delivered(i), &|p| wagner(p, d, zero, full, e), "delivered")?;
        prop_assert!(s.delivered(i) <= d, "J{j} delivered {} > asked {d}", s.delivered(i));
        within(s.outlet(i), &|p| power(p, k, 0.5), "outlet")?;
        let leak_k = rate * leak_length[i] / reference.powf(leak_e);
        within(s.leakage(i), &|p| power(p, leak_k, leak_e), "leakage")?;
    }
    let total: f64 = net.junctions.iter().map(|j| j.1).sum::<f64>() + s.outlet.iter().sum::<f64>();
    // Round-off of the linear solve: 1e-9 of the flows, or 0.1 µL/s.
    prop_assert!(s.max_mass_residual <= (1e-9 * total).max(1e-10), "mass residual {}", s.max_mass_residual);
    Ok(())
}

proptest! {
    // (`the_demand_driven_answer_is_recovered_above_full_pressure` assumes its networks high
    // enough: most random ones are not, so widened runs need room for the rejected ones.)
    #![proptest_config(proptest::test_runner::Config { max_global_rejects: 1 << 20, ..common::property_config(128) })]

    #[test]
    fn relations_and_mass_balance_hold(net in network()) {
        let m = net.build();
        let s = solve(&m);
        check_relations(&net, &m, &s)?;
        let o = s.outflow_summary(5);
        prop_assert!(o.delivered <= o.asked * (1.0 + 1e-12));
        prop_assert!((o.shortfall - (o.asked - o.delivered).max(0.0)).abs() <= 1e-15);
    }

    #[test]
    fn delivered_is_monotone_in_the_source_head(net in network(), rise in 0.5..30.0f64) {
        let low = solve(&net.build());
        let high_net = Net { head: net.head + rise, ..net.clone() };
        let high = solve(&high_net.build());
        for (i, &(_, d, _)) in net.junctions.iter().enumerate() {
            let (a, b) = (low.delivered(i + 1), high.delivered(i + 1));
            prop_assert!(b >= a - 1e-9 * d, "J{i}: {a} at {} m, {b} at {} m", net.head, high_net.head);
        }
    }

    #[test]
    fn the_demand_driven_answer_is_recovered_above_full_pressure(net in network()) {
        // Without outlets and leakage, with the source high enough that the demand-driven
        // answer has every pressure above some level, and full pressure below that level.
        let plain = Net {
            junctions: net.junctions.iter().map(|&(z, d, _)| (z, d, 0.0)).collect(),
            leakage: (0.0, 1.0, 1.0),
            ..net.clone()
        };
        let mut m = plain.build();
        let mut conditions = Conditions::from_model(&m);
        conditions.set_node_law(NodeLaw::FixedDemand);
        let mut solver = Solver::new(&m).unwrap();
        let driven = solver.solve(&m, &conditions, &SolveOptions::from_model(&m)).unwrap();
        let lowest = driven.pressure[1..].iter().copied().fold(f64::INFINITY, f64::min);
        prop_assume!(lowest > 2.0);
        m.outflow.pressure_demand = Some(PressureDemand { full_pressure: lowest - 1.0, zero_pressure: 0.0, exponent: net.relation.2 });
        let pressure = solve(&m);
        // Above full pressure the smoothed relation passes the demand plus (p − p1)/1e9 of it (its
        // barrier line, see physics::outflow): heads move by at most n h (p − p1)/1e9, ~1e-5 m.
        for i in 0..m.nodes().len() {
            prop_assert!((pressure.head[i] - driven.head[i]).abs() <= 1e-5, "head {i}: {} vs {}", pressure.head[i], driven.head[i]);
            prop_assert!((pressure.delivered(i) - driven.demand[i]).abs() <= 1e-9 * driven.demand[i].abs().max(1e-6));
        }
        // Each solve stops when its flows move by at most 1e-6 of all the water moving (the
        // relative flow tolerance, Σ|ΔQ|/Σ|Q|): a small flow in a loop is known to that share of
        // the total, not of itself.
        let total: f64 = net.junctions.iter().map(|j| j.1).sum();
        for k in 0..m.links().len() {
            let bound = 1e-6 * driven.flow[k].abs().max(total);
            prop_assert!((pressure.flow[k] - driven.flow[k]).abs() <= bound, "flow {k}: {} vs {}", pressure.flow[k], driven.flow[k]);
        }
    }

    #[test]
    fn one_solution_from_any_start(net in network(), start in prop_oneof![Just(-60.0), Just(0.0), Just(200.0)]) {
        let m = net.build();
        let cold = solve(&m);
        // Warm start from the solution of a very different source head (nothing delivered below
        // the ground, everything at 200 m).
        let mut solver = Solver::new(&m).unwrap();
        let mut conditions = Conditions::from_model(&m);
        conditions.set_reservoir_head(&m, 0, start).unwrap();
        let options = SolveOptions::from_model(&m);
        // (The known limit in `config`: a start whose own solve stops with an error is no start.)
        prop_assume!(solver.solve(&m, &conditions, &options).is_ok());
        conditions.set_reservoir_head(&m, 0, net.head).unwrap();
        let warm = solver.solve(&m, &conditions, &SolveOptions { warm_start: true, ..options }).unwrap();
        for i in 0..m.nodes().len() {
            // Both stop within the tolerances (heads 1e-6 m, flows 1e-6 relative), from different sides.
            prop_assert!((warm.head[i] - cold.head[i]).abs() <= 1e-5, "head {i}: {} vs {}", warm.head[i], cold.head[i]);
            prop_assert!((warm.delivered(i) - cold.delivered(i)).abs() <= 1e-8);
        }
    }
}

/// A zone behind a pump, a pressure-reducing valve and a check valve, with dead-end branches:
/// every device keeps its rule while the junctions draw by pressure.
const DEVICES: &str = r#"
[units]
flow = "L/s"
[hydraulics]
head_tolerance = 1e-6
[pressure_demand]
full_pressure = 20.0
zero_pressure = 2.0
[background_leakage]
rate = 0.02
reference_pressure = 30.0
exponent = 1.18

[[nodes]]
id = "Low Well"
kind = "reservoir"
head = 40.0
[[nodes]]
id = "A"
elevation = 30.0
demand = 3.0
[[nodes]]
id = "B"
elevation = 25.0
demand = 4.0
[[nodes]]
id = "C"
elevation = 10.0
demand = 6.0
[[nodes]]
id = "D"
elevation = 12.0
demand = 2.0
[[nodes]]
id = "E"
elevation = 14.0
demand = 2.5
outlet = { coefficient = 0.8, exponent = 0.5 }
[[nodes]]
id = "Hill Tank"
kind = "tank"
elevation = 60.0
level = 2.0
min_level = 0.0
max_level = 6.0
diameter = 12.0

[[links]]
id = "Booster"
kind = "pump"
from = "Low Well"
to = "A"
head_curve = [[0.0, 55.0], [20.0, 45.0], [40.0, 20.0]]
[[links]]
id = "A-B"
from = "A"
to = "B"
length = 600
diameter = 150
roughness = 120
[[links]]
id = "B-Tank"
from = "B"
to = "Hill Tank"
length = 400
diameter = 150
roughness = 120
check_valve = true
[[links]]
id = "A-Tank"
from = "A"
to = "Hill Tank"
length = 900
diameter = 100
roughness = 110
[[links]]
id = "Reducer"
kind = "valve"
valve = "pressure-reducing"
from = "B"
to = "C"
diameter = 100
setting = 28.0
[[links]]
id = "C-D"
from = "C"
to = "D"
length = 300
diameter = 100
roughness = 120
[[links]]
id = "D-E"
from = "D"
to = "E"
length = 250
diameter = 80
roughness = 120
"#;

fn devices() -> Model {
    read_str(DEVICES, Format::Toml, "devices.toml").unwrap_or_else(|e| panic!("{e}"))
}

#[test]
fn devices_keep_their_rules_with_pressure_dependent_outflows() {
    let m = devices();
    let s = solve(&m);
    let i = |id: &str| m.node_index(id).unwrap();
    let k = |id: &str| m.link_index(id).unwrap();
    // The valve holds C at its setting (28 m of pressure head) and passes what C, D and E draw.
    assert!((s.pressure[i("C")] - 28.0).abs() < 1e-6, "{}", s.pressure[i("C")]);
    let downstream = ["C", "D", "E"].iter().map(|n| s.delivered(i(n)) + s.leakage(i(n)) + s.outlet(i(n))).sum::<f64>();
    assert!((s.flow[k("Reducer")] - downstream).abs() < 1e-9, "{} vs {downstream}", s.flow[k("Reducer")]);
    // The pump lifts; the check valve passes forward only.
    assert!(s.flow[k("Booster")] > 0.0 && s.flow[k("B-Tank")] >= 0.0);
    // E's outlet runs by the orifice law at E's pressure (0.8 L/s at 1 m of head).
    let p = s.pressure[i("E")];
    assert!((s.outlet(i("E")) - 0.8e-3 * p.sqrt()).abs() < 1e-9, "{} at {p} m", s.outlet(i("E")));
    assert!(s.status_changes < 10, "{} status changes", s.status_changes);
}

#[test]
fn devices_reach_the_same_answer_from_a_warm_start_after_a_dry_spell() {
    let m = devices();
    let cold = solve(&m);
    let mut solver = Solver::new(&m).unwrap();
    let mut conditions = Conditions::from_model(&m);
    let options = SolveOptions::from_model(&m);
    let tank = m.node_index("Hill Tank").unwrap();
    let well = m.node_index("Low Well").unwrap();
    // An empty tank and a low well first: most junctions get little or nothing.
    conditions.set_tank_level(&m, tank, 0.0).unwrap();
    conditions.set_reservoir_head(&m, well, 5.0).unwrap();
    let dry = solver.solve(&m, &conditions, &options).unwrap();
    assert!(dry.outflow_summary(3).shortfall > 0.0);
    let fresh = Conditions::from_model(&m);
    let warm = solver.solve(&m, &fresh, &SolveOptions { warm_start: true, ..options }).unwrap();
    for i in 0..m.nodes().len() {
        assert!(
            (warm.head[i] - cold.head[i]).abs() < 2e-6,
            "{}: {} vs {}",
            m.nodes()[i].id,
            warm.head[i],
            cold.head[i]
        );
    }
    for k in 0..m.links().len() {
        assert_eq!(warm.link_state[k], cold.link_state[k], "{}", m.links()[k].id);
    }
}

/// Junctions cut off by a closed pipe receive nothing; the shortfall counts their demand.
#[test]
fn a_cut_off_junction_delivers_nothing_and_counts_in_the_shortfall() {
    let mut m = devices();
    let k = m.link_index("C-D").unwrap();
    m.set_status(k, LinkStatus::Closed).unwrap();
    let s = solve(&m);
    let (d, e) = (m.node_index("D").unwrap(), m.node_index("E").unwrap());
    assert!(!s.connected[d] && !s.connected[e]);
    assert_eq!((s.delivered(d), s.delivered(e), s.outlet(e), s.leakage(e)), (0.0, 0.0, 0.0, 0.0));
    let o = s.outflow_summary(10);
    assert!(o.shortfall >= 4.5e-3 - 1e-12, "{o:?}");
    assert!(o.largest.iter().any(|&(i, lack)| i == d && (lack - 2e-3).abs() < 1e-12));
}

/// An outlet at the end of a dead-end branch: the branch stays in the matrix, and the outlet's
/// flow is the orifice law at its pressure; the fixed-demand junctions of other branches are
/// still solved in trees.
#[test]
fn an_outlet_at_a_dead_end_is_solved_with_the_core() {
    let text = DEVICES
        .replace("[pressure_demand]\nfull_pressure = 20.0\nzero_pressure = 2.0\n", "")
        .replace("[background_leakage]\nrate = 0.02\nreference_pressure = 30.0\nexponent = 1.18\n", "");
    let m = read_str(&text, Format::Toml, "outlet.toml").unwrap();
    let solver = Solver::new(&m).unwrap();
    let e = m.node_index("E").unwrap();
    assert!(!solver.structure().in_tree[e], "the outlet's junction is in the core");
    let s = solve(&m);
    let p = s.pressure[e];
    assert!((s.outlet(e) - 0.8e-3 * p.sqrt()).abs() < 1e-9);
    // Fixed demands elsewhere: delivered in full.
    for id in ["A", "B", "C", "D"] {
        let i = m.node_index(id).unwrap();
        assert_eq!(s.delivered(i), s.demand[i], "{id}");
    }
    assert!(s.max_mass_residual < 1e-12);
}

/// Negative demands (inflows) stay fixed with `[pressure_demand]`.
#[test]
fn an_inflow_stays_fixed() {
    let mut m = devices();
    let b = m.node_index("B").unwrap();
    let mut node = m.nodes()[b].clone();
    if let NodeKind::Junction { demand, .. } = &mut node.kind {
        *demand = -1.5e-3;
    }
    m.replace_node(b, node).unwrap();
    let s = solve(&m);
    assert_eq!(s.delivered(b), -1.5e-3);
}

/// `min_delivered` (per junction and in total) and `min_fire_flow` for a group, through
/// `ringmain check`: the values are the solver's own delivered demand and the fire-flow search's
/// available flow, here checked against the same model solved by the library.
#[test]
fn check_reads_and_applies_min_delivered_and_min_fire_flow() {
    let m = devices();
    let s = solve(&m);
    let o = s.outflow_summary(10);
    let total = 100.0 * o.delivered / o.asked;
    assert!(total < 99.0, "the scenario is meant to fall short: {total} %");
    let dir = common::scratch("check");
    let run = |criteria: &str| {
        let path = dir.join("model.toml");
        std::fs::write(&path, format!("{DEVICES}\n{criteria}")).unwrap();
        let r = common::run(&["check", path.to_str().unwrap(), "--format", "json"]);
        (r.code, r.stdout, r.stderr)
    };
    // Just above the network's share: the total fails; far below every junction's: it passes.
    let (code_high, stdout, _) = run(&format!("[criteria]\nmin_delivered = \"{} %\"\n", total + 0.5));
    assert_eq!(code_high, Some(1), "{stdout}");
    assert!(stdout.contains("min_delivered.total"), "{stdout}");
    let lowest = (0..m.nodes().len())
        .filter(|&i| s.demand[i] > 0.0)
        .map(|i| 100.0 * s.delivered(i) / s.demand[i])
        .fold(f64::INFINITY, f64::min);
    if lowest > 1.0 {
        let (code_low, out_low, _) = run(&format!("[criteria]\nmin_delivered = \"{} %\"\n", 0.5 * lowest));
        assert_eq!(code_low, Some(0), "{out_low}");
    }
    // A bad share is refused naming the key.
    let (code_bad, _, err_bad) = run("[criteria]\nmin_delivered = \"140 %\"\n");
    assert_eq!(code_bad, Some(2), "{err_bad}");
    assert!(err_bad.contains("min_delivered"), "{err_bad}");
    // min_fire_flow: E's available flow from the library's own search at 20 psi.
    let e = m.node_index("E").unwrap();
    let residual =
        ringmain_core::analysis::criteria::fire_residual(&ringmain_core::analysis::criteria::Criteria::default(), &m);
    let options = ringmain_core::analysis::fire_flow::FireFlowOptions { residual, demand_factor: 1.0 };
    let available = ringmain_core::analysis::fire_flow::fire_flows(&m, &[e], &options).unwrap()[0].available();
    let group = |limit: f64| {
        format!("[[criteria.groups]]\nname = \"hydrant E\"\nids = \"E\"\nmin_fire_flow = \"{} L/s\"\n", limit * 1e3)
    };
    let (pass, out_pass, _) = run(&group(0.9 * available));
    let (fail, out_fail, _) = run(&group(1.1 * available));
    assert_eq!((pass, fail), (Some(0), Some(1)), "{out_pass}\n{out_fail}");
    assert!(out_fail.contains("groups.hydrant E.min_fire_flow"), "{out_fail}");
}

/// The each-pipe-closed sweep with `[pressure_demand]`: every closure's `shortfall_caused` is the
/// shortfall of the network with that pipe closed (solved on its own by the library) less the
/// base case's, and the closures are listed largest first.
#[test]
fn the_sweep_ranks_closures_by_the_shortfall_they_cause() {
    let m = devices();
    let base = solve(&m).outflow_summary(0).shortfall;
    let path = common::scratch("sweep").join("model.toml");
    std::fs::write(&path, DEVICES).unwrap();
    let text = common::run(&["check", path.to_str().unwrap(), "--each-pipe-closed", "--format", "json"]).stdout;
    let v: serde_json::Value = serde_json::from_str(&text).unwrap_or_else(|e| panic!("{e}: {text}"));
    let results = v["each_pipe_closed"]["results"].as_array().unwrap();
    assert!(!results.is_empty(), "{text}");
    let mut previous = f64::INFINITY;
    for r in results {
        let caused = r["shortfall_caused"].as_f64().unwrap() * 1e-3; // L/s in the model
        assert!(caused <= previous + 1e-12, "not largest first: {text}");
        previous = caused;
        let id = r["closed"].as_str().unwrap();
        let mut closed = m.clone();
        closed.set_status(m.link_index(id).unwrap(), LinkStatus::Closed).unwrap();
        let own = solve(&closed).outflow_summary(0).shortfall - base;
        assert!((caused - own).abs() < 1e-9, "{id}: {caused} vs {own}");
    }
}

/// The simulation's volume balance with outflows that follow pressure: the volumes supplied equal
/// those delivered, leaked and through outlets plus the change in storage; the
/// demand not delivered is what the junctions asked less what they received.
#[test]
fn the_simulation_balance_counts_leakage_outlets_and_shortfall() {
    let model =
        format!("{}\n[simulation]\nduration = \"6h\"\nhydraulic_step = \"1h\"\nreport_interval = \"1h\"\n", DEVICES);
    let path = common::scratch("simulation").join("model.toml");
    std::fs::write(&path, model).unwrap();
    let out = common::run(&["simulate", path.to_str().unwrap(), "--format", "json"]);
    assert_eq!(out.code, Some(0), "{}", out.stderr);
    let v: serde_json::Value = serde_json::from_str(&out.stdout).unwrap_or_else(|e| panic!("{e}"));
    let b = &v["summary"]["volume_balance"];
    let f = |k: &str| b[k].as_f64().unwrap_or_else(|| panic!("no {k}: {b}"));
    let (supplied, delivered, leaked, outlets, storage) =
        (f("supplied"), f("delivered"), f("leaked"), f("outlets"), f("storage_change"));
    assert!(leaked > 0.0 && outlets > 0.0, "{b}");
    // The tank's volume follows its level, integrated by the simulation at the solver's
    // tolerances: the balance closes to a millionth of the volume supplied.
    let residual = supplied - delivered - leaked - outlets - storage;
    assert!(residual.abs() <= 1e-6 * supplied.abs().max(1.0), "{b}");
    assert!((residual - f("discrepancy")).abs() <= 1e-9 * supplied.abs().max(1.0), "{b}");
    assert!(f("not_delivered") > 0.0, "the scenario falls short of pressure: {b}");
}

/// The fault this names: a junction whose demand (exponent 1.5) and outlet took turns crossing
/// their kinks, full Newton steps throwing one into its barrier and back for ten steps; damped
/// after a dozen, the iteration then stopped on a head change of 1e-6 m with the outlet still
/// 5e-6 m off its curve (beyond the four tolerances `check_relations` allows). With the step
/// length chosen on the content function and the stopping test asking every relation to be on its
/// curve, it converges quadratically in a handful of steps.
#[test]
fn a_demand_and_an_outlet_crossing_their_kinks_in_turn_settle_on_their_curves() {
    let small = (0.0, 0.0005, 0.0);
    let net = Net {
        head: 68.26577387807941,
        junctions: vec![small, small, small, small, (0.0, 0.01038046187782691, 0.000631069117265206)],
        pipes: vec![
            (0, 1, 100.0, 0.05, 80.0),
            (0, 2, 100.0, 0.05, 80.0),
            (0, 3, 100.0, 0.05, 80.0),
            (0, 4, 100.0, 0.05, 80.0),
            (0, 5, 832.893942216794, 0.06756480862773827, 110.39208935209618),
        ],
        relation: (28.234948937082358, 4.967492064908513, 1.5),
        leakage: (0.0, 20.0, 0.5),
    };
    let m = net.build();
    let s = solve(&m);
    check_relations(&net, &m, &s).unwrap();
    // 23 iterations before the line search, and an answer off its curve; now 12 full steps, one
    // to rebalance and one searched.
    assert!(s.iterations <= 16, "{} iterations", s.iterations);
}
