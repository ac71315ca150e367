//! The solver's own input, [`Conditions`]: every way of changing a solve through it gives the
//! answer of a fresh solve of a model edited the same way, and bad values are errors naming the
//! element and the key.
//!
//! These are agreement checks between solving paths (the reference is a cold, fresh solve of an
//! edited model, itself checked against published references in `tests/python`); the tolerances
//! are set tight so that both sides converge to round-off.

use ringmain_core::analysis::{run_scenario, sweep_candidates, sweep_pipes, CheckOptions, Criteria};
use ringmain_core::generate::{generate, NetworkSpec};
use ringmain_core::solve::{Conditions, Scenario, SolveOptions, Solver};
use ringmain_core::{solve, LinkKind, LinkStatus, Model, NodeKind, Solution};

/// A generated street network (invented: see `ringmain_core::generate`) with tight tolerances.
fn network(junctions: usize, seed: u64) -> Model {
    let mut m = generate(&NetworkSpec::new(junctions, seed)).expect("generated");
    m.options.head_tolerance = 1e-9;
    m.options.flow_tolerance = 1e-12;
    m
}

/// Heads agree to 1e-6 m and flows to 1e-9 m³/s (or both are NaN: cut off).
fn assert_same(got: &Solution, want: &Solution, what: &str) {
    for (i, (a, b)) in got.head.iter().zip(&want.head).enumerate() {
        assert!((a - b).abs() <= 1e-6 || (a.is_nan() && b.is_nan()), "{what}: head of node {i}: {a} vs {b}");
    }
    for (k, (a, b)) in got.flow.iter().zip(&want.flow).enumerate() {
        assert!((a - b).abs() <= 1e-9, "{what}: flow of link {k}: {a} vs {b}");
    }
    assert_eq!(got.connected, want.connected, "{what}: connectivity");
    assert_eq!(got.link_state, want.link_state, "{what}: link states");
}

#[test]
fn each_closure_of_the_sweep_equals_a_fresh_solve_of_the_closed_model() {
    let m = network(400, 11);
    let conditions = Conditions::from_model(&m);
    let mut solver = Solver::new(&m).expect("analysis");
    let cold = SolveOptions::from_model(&m);
    solver.solve(&m, &conditions, &cold).expect("the base solves");
    let pipes = sweep_candidates(&m);
    let scenarios: Vec<Scenario> =
        pipes.iter().map(|&k| Scenario { statuses: vec![(k, LinkStatus::Closed)], ..Scenario::default() }).collect();
    // As the sweep solves them: warm from the base case, on every thread.
    let warm = SolveOptions { warm_start: true, ..cold };
    let batch = solver.solve_batch(&m, &conditions, &warm, &scenarios);
    // And as the sweep solves them now: one closure at a time on the base case's factor, with a
    // Woodbury correction or Newton's steps where the chord is slow (`solve/sweep.rs`).
    let mut fresh_base = Solver::new(&m).expect("analysis");
    let (base_result, closures) =
        fresh_base.solve_closures(&m, &conditions, &cold, &pipes, &mut |_| {}, &|_, r| r.cloned());
    assert_same(&base_result.expect("the base solves"), &solve(&m).expect("the base solves"), "base");
    for ((&k, got), swept) in pipes.iter().zip(&batch).zip(&closures) {
        let mut closed = m.clone();
        closed.set_status(k, LinkStatus::Closed).expect("closes");
        let want = solve(&closed).expect("the closed model solves");
        let what = format!("pipe {} closed", m.links()[k].id);
        assert_same(got.as_ref().expect("the closure solves"), &want, &what);
        let swept = swept.as_ref().expect("the closure solves");
        assert_same(swept, &want, &format!("{what}, one closure at a time"));
        for (a, b) in swept.pressure.iter().zip(&want.pressure) {
            assert!((a - b).abs() <= 1e-6 || (a.is_nan() && b.is_nan()), "{what}: pressure {a} vs {b}");
        }
        for (a, b) in swept.velocity.iter().zip(&want.velocity) {
            assert!((a - b).abs() <= 1e-7 || (a.is_nan() && b.is_nan()), "{what}: velocity {a} vs {b}");
        }
    }
    // And the sweep's verdicts are those of single runs of the closed models.
    let criteria = Criteria { min_pressure: Some(25.0), ..Criteria::default() };
    let (base, _) = run_scenario(&m, &criteria, &mut solver, &cold, None, &CheckOptions::default());
    let swept = sweep_pipes(&m, &pipes, &criteria, &base.connected, &CheckOptions::default(), &|_, _| {});
    for (k, outcome) in swept.iter().step_by(7) {
        let mut closed = m.clone();
        closed.set_status(*k, LinkStatus::Closed).expect("closes");
        let mut fresh = Solver::new(&closed).expect("analysis");
        let options = SolveOptions::from_model(&closed);
        let (single, _) =
            run_scenario(&closed, &criteria, &mut fresh, &options, Some(&base.connected), &CheckOptions::default());
        assert_eq!(single.passed(), outcome.passed(), "pipe {}", m.links()[*k].id);
        assert_eq!(single.lost_supply, outcome.lost_supply, "pipe {}", m.links()[*k].id);
    }
}

/// Every kind of closure a batch near a base case meets (its first steps are chord steps on
/// the base case's factor; see `solve/chord.rs`), each compared with a fresh solve of the closed
/// model: dead-end pipes (their subtree cut off, the core's matrix unchanged), grid pipes (a
/// loop opened: a rank-one change), the mains that join a tank or a reservoir (a source cut
/// off), and closures of devices and of pipes next to them: check-valve pipes (closures that
/// reverse a flow make them shut: device states that differ from the base case's) and a
/// pressure-reducing valve that regulates in the base case (an active valve: no chord steps).
#[test]
fn every_kind_of_closure_in_a_batch_equals_a_fresh_solve_of_the_closed_model() {
    use ringmain_core::model::{Valve, ValveType};
    let mut m = network(500, 5);
    let base_solution = solve(&m).expect("the generated network solves");
    // Grid pipes: both ends with three links or more.
    let mut degree = vec![0usize; m.nodes().len()];
    for l in m.links() {
        degree[l.from] += 1;
        degree[l.to] += 1;
    }
    let grid: Vec<usize> = (0..m.links().len())
        .filter(|&k| {
            let l = &m.links()[k];
            matches!(l.kind, LinkKind::Pipe(_)) && degree[l.from] >= 3 && degree[l.to] >= 3
        })
        .collect();
    // Every 20th grid pipe gets a check valve, oriented with its base flow.
    for &k in grid.iter().step_by(20) {
        let mut link = m.links()[k].clone();
        if base_solution.flow[k] < 0.0 {
            std::mem::swap(&mut link.from, &mut link.to);
        }
        if let LinkKind::Pipe(p) = &mut link.kind {
            p.check_valve = true;
        }
        m.replace_link(k, link).expect("a check-valve pipe");
    }
    // The pipe into a dead-end branch of two or more junctions (fed through it alone) becomes a
    // pressure-reducing valve, set 3 m below the pressure it had downstream: it regulates.
    let analysed = Solver::new(&m).expect("analysis");
    let trees = &analysed.structure().trees;
    let in_tree = &analysed.structure().in_tree;
    let k = trees
        .iter()
        .find(|t| {
            !in_tree[t.parent as usize]
                && trees.iter().any(|u| u.parent == t.child)
                && base_solution.flow[t.link as usize].abs() > 1e-4
        })
        .map(|t| t.link as usize)
        .expect("a pipe into a branch");
    let mut link = m.links()[k].clone();
    if base_solution.flow[k] < 0.0 {
        std::mem::swap(&mut link.from, &mut link.to);
    }
    let diameter = link.diameter().expect("a pipe has a diameter");
    let setting = base_solution.pressure[link.to] - 3.0;
    link.kind = LinkKind::Valve(Valve {
        valve: ValveType::PressureReducing,
        diameter,
        setting,
        minor_loss: 0.0,
        automatic: true,
    });
    m.replace_link(k, link).expect("a pressure-reducing valve");
    let prv = k;

    let conditions = Conditions::from_model(&m);
    let mut solver = Solver::new(&m).expect("analysis");
    let cold = SolveOptions::from_model(&m);
    let base = solver.solve(&m, &conditions, &cold).expect("the base solves");
    assert_eq!(base.link_state[prv], ringmain_core::LinkState::Active, "the valve must regulate in the base case");
    let structure = solver.structure();
    let links: Vec<usize> = (0..m.links().len()).collect();
    let dead_ends = links.iter().filter(|&&k| structure.core_position[k] == u32::MAX).count();
    let source_mains = links
        .iter()
        .filter(|&&k| {
            let l = &m.links()[k];
            m.nodes()[l.from].fixed_head().is_some() || m.nodes()[l.to].fixed_head().is_some()
        })
        .count();
    assert!(dead_ends > 20 && source_mains >= 2, "{dead_ends} dead-end pipes, {source_mains} source mains");
    let scenarios: Vec<Scenario> =
        links.iter().map(|&k| Scenario { statuses: vec![(k, LinkStatus::Closed)], ..Scenario::default() }).collect();
    let warm = SolveOptions { warm_start: true, ..cold };
    let batch = solver.solve_batch(&m, &conditions, &warm, &scenarios);
    // One closure at a time as the sweep solves them (devices in the base case: every closure
    // takes the general solve from the base case's solution).
    let (_, one_by_one) = solver.solve_closures(&m, &conditions, &cold, &links, &mut |_| {}, &|_, r| r.cloned());
    let mut state_changes = 0;
    for ((&k, got), swept) in links.iter().zip(&batch).zip(&one_by_one) {
        let mut closed = m.clone();
        closed.set_status(k, LinkStatus::Closed).expect("closes");
        let what = format!("link {} closed", m.links()[k].id);
        match (swept, &solve(&closed)) {
            (Ok(got), Ok(want)) => assert_same(got, want, &format!("{what}, one closure at a time")),
            (Err(_), Err(_)) => {}
            (got, want) => panic!("{what}: one at a time {:?} vs fresh {:?}", got.as_ref().err(), want.as_ref().err()),
        }
        match (got, solve(&closed)) {
            (Ok(got), Ok(want)) => {
                assert_same(got, &want, &what);
                state_changes += usize::from(got.link_state.iter().zip(&base.link_state).any(|(a, b)| {
                    a != b && *a != ringmain_core::LinkState::Closed && *a != ringmain_core::LinkState::Disconnected
                }));
            }
            (Err(_), Err(_)) => {}
            (got, want) => panic!("{what}: batch {:?} vs fresh {:?}", got.as_ref().err(), want.err()),
        }
    }
    assert!(state_changes > 0, "some closure must change a device's state");
}

#[test]
fn every_solving_path_gives_the_answer_of_the_edited_model() {
    let m = network(600, 4);
    let options = SolveOptions::from_model(&m);
    // The edit: a demand factor of 1.3, one grid pipe closed, one pipe narrowed and roughened,
    // one reservoir's head raised and the tank's level lowered.
    let pipe = (0..m.links().len()).find(|&k| matches!(m.links()[k].kind, LinkKind::Pipe(_))).expect("a pipe");
    let other = (pipe + 1..m.links().len()).find(|&k| matches!(m.links()[k].kind, LinkKind::Pipe(_))).expect("a pipe");
    let reservoir = m.nodes().iter().position(|n| matches!(n.kind, NodeKind::Reservoir { .. })).expect("a reservoir");
    let tank = m.nodes().iter().position(|n| matches!(n.kind, NodeKind::Tank(_))).expect("a tank");
    let mut edited = m.clone();
    for i in 0..edited.nodes().len() {
        if let NodeKind::Junction { demand } = edited.nodes()[i].kind {
            edited.set_demand(i, demand * 1.3).expect("demand");
        }
    }
    edited.set_status(other, LinkStatus::Closed).expect("status");
    let mut link = edited.links()[pipe].clone();
    if let LinkKind::Pipe(p) = &mut link.kind {
        p.diameter *= 0.8;
        p.roughness = 95.0;
        p.minor_loss = 2.5;
    }
    edited.replace_link(pipe, link).expect("pipe");
    let mut node = edited.nodes()[reservoir].clone();
    let raised = if let NodeKind::Reservoir { head } = node.kind { head + 3.0 } else { unreachable!() };
    node.kind = NodeKind::Reservoir { head: raised };
    edited.replace_node(reservoir, node).expect("reservoir");
    let mut node = edited.nodes()[tank].clone();
    if let NodeKind::Tank(t) = &mut node.kind {
        t.level = 2.0;
    }
    let tank_floor = node.elevation;
    edited.replace_node(tank, node).expect("tank");
    let want = solve(&edited).expect("the edited model solves");

    // The same edit written into conditions.
    let mut c = Conditions::from_model(&m);
    let p = edited.links()[pipe].as_pipe().expect("pipe").clone();
    c.set_diameter(&m, pipe, p.diameter).expect("diameter");
    c.set_roughness(&m, pipe, p.roughness).expect("roughness");
    c.set_minor_loss(&m, pipe, p.minor_loss).expect("minor loss");
    c.set_reservoir_head(&m, reservoir, raised).expect("head");
    c.set_tank_level(&m, tank, 2.0).expect("level");
    assert_eq!(c.fixed_head(tank), Some(tank_floor + 2.0));
    let scenario = Scenario { demand_factor: 1.3, statuses: vec![(other, LinkStatus::Closed)] };

    // Cold, on a solver that first solved the unedited conditions (its laws are then refreshed
    // from the journal, not rebuilt).
    let mut solver = Solver::new(&m).expect("analysis");
    let base = Conditions::from_model(&m);
    solver.solve(&m, &base, &options).expect("base");
    let mut journalled = Conditions::from_model(&m);
    solver.solve(&m, &journalled, &options).expect("before the edit");
    journalled.set_diameter(&m, pipe, p.diameter).expect("diameter");
    journalled.set_roughness(&m, pipe, p.roughness).expect("roughness");
    journalled.set_minor_loss(&m, pipe, p.minor_loss).expect("minor loss");
    journalled.set_reservoir_head(&m, reservoir, raised).expect("head");
    journalled.set_tank_level(&m, tank, 2.0).expect("level");
    scenario.apply(&m, &mut journalled).expect("scenario");
    assert_same(&solver.solve(&m, &journalled, &options).expect("journalled"), &want, "cold, journalled laws");
    // Warm from the unedited answer.
    let warm = SolveOptions { warm_start: true, ..options };
    solver.solve(&m, &base, &options).expect("base again");
    assert_same(&solver.solve(&m, &journalled, &warm).expect("warm"), &want, "warm");
    // Back to the base conditions: the changed laws are rebuilt for them.
    assert_same(&solver.solve(&m, &base, &options).expect("base"), &solve(&m).expect("base"), "back to the base");
    // A scenario on conditions, alone and in a batch (cold and warm).
    assert_same(&solver.solve_scenario(&m, &c, &options, &scenario).expect("scenario"), &want, "scenario");
    for opts in [options, warm] {
        let batch = solver.solve_batch(&m, &c, &opts, &[Scenario::default(), scenario.clone()]);
        assert_same(batch[1].as_ref().expect("batch"), &want, "batch");
    }
}

#[test]
fn a_pump_speed_and_a_valve_setting_set_in_conditions_match_the_edited_model() {
    // The invented hillside example: a borehole pump and a pressure-reducing valve. Every pump
    // at 90 % speed, every valve setting at 90 %.
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/examples/hillside.toml");
    let text = std::fs::read_to_string(path).expect("the example exists");
    let m = ringmain_core::read_str(&text, ringmain_core::Format::Toml, path).expect("the example reads");
    assert!(m.links().iter().any(|l| l.as_pump().is_some()) && m.links().iter().any(|l| l.as_valve().is_some()));
    let mut edited = m.clone();
    let mut c = Conditions::from_model(&m);
    for k in 0..m.links().len() {
        match &m.links()[k].kind {
            LinkKind::Pump(p) => {
                edited.set_pump_speed(k, 0.9 * p.speed).expect("speed");
                c.set_pump_speed(&m, k, 0.9 * p.speed).expect("speed");
            }
            LinkKind::Valve(v) => {
                edited.set_valve_setting(k, 0.9 * v.setting).expect("setting");
                c.set_valve_setting(&m, k, 0.9 * v.setting).expect("setting");
            }
            _ => {}
        }
    }
    let want = solve(&edited).expect("the edited demo solves");
    let mut solver = Solver::new(&m).expect("analysis");
    let options = SolveOptions::from_model(&m);
    solver.solve(&m, &Conditions::from_model(&m), &options).expect("the demo solves");
    let got = solver.solve(&m, &c, &options).expect("the changed demo solves");
    assert_same(&got, &want, "pump speeds and valve settings");
    for (a, b) in got.pumps.iter().zip(&want.pumps) {
        assert_eq!(a.speed, b.speed);
        assert!((a.shaft_power - b.shaft_power).abs() <= 1e-6 * b.shaft_power.abs().max(1.0));
    }
}

#[test]
fn bad_conditions_are_errors_naming_the_element_and_the_key() {
    let m = network(200, 2);
    let mut c = Conditions::from_model(&m);
    let junction = m.nodes().iter().position(|n| matches!(n.kind, NodeKind::Junction { .. })).unwrap();
    let reservoir = m.nodes().iter().position(|n| matches!(n.kind, NodeKind::Reservoir { .. })).unwrap();
    let tank = m.nodes().iter().position(|n| matches!(n.kind, NodeKind::Tank(_))).unwrap();
    let pipe = 0;
    let before = c.clone();
    let cases: Vec<(Result<(), ringmain_core::ModelError>, String, &str)> = vec![
        (c.set_demand(&m, junction, f64::NAN), m.nodes()[junction].id.to_string(), "demand"),
        (c.set_demand(&m, reservoir, 0.01), m.nodes()[reservoir].id.to_string(), "demand"),
        (c.set_reservoir_head(&m, junction, 50.0), m.nodes()[junction].id.to_string(), "head"),
        (c.set_reservoir_head(&m, reservoir, f64::INFINITY), m.nodes()[reservoir].id.to_string(), "head"),
        (c.set_tank_level(&m, tank, -1.0), m.nodes()[tank].id.to_string(), "level"),
        (c.set_pump_speed(&m, pipe, 1.0), m.links()[pipe].id.to_string(), "speed"),
        (c.set_valve_setting(&m, pipe, 1.0), m.links()[pipe].id.to_string(), "setting"),
        (c.set_valve_automatic(&m, pipe, true), m.links()[pipe].id.to_string(), "status"),
        (c.set_diameter(&m, pipe, 0.0), m.links()[pipe].id.to_string(), "diameter"),
        (c.set_roughness(&m, pipe, 0.5), m.links()[pipe].id.to_string(), "roughness"),
        (c.set_roughness(&m, pipe, f64::NAN), m.links()[pipe].id.to_string(), "roughness"),
        (c.set_minor_loss(&m, pipe, -0.1), m.links()[pipe].id.to_string(), "minor_loss"),
    ];
    for (result, id, key) in cases {
        let e = result.expect_err("a bad value must be refused");
        let text = e.to_string();
        assert!(text.contains(&id), "the error names the element '{id}': {text}");
        assert_eq!(e.key.as_deref(), Some(key), "{text}");
    }
    // Out of range indices, a wrong number of demands and a bad factor are errors too.
    assert!(c.set_status(&m, m.links().len(), LinkStatus::Closed).is_err());
    assert!(c.set_demands(&m, &[0.0]).is_err());
    assert!(c.scale_demands(-1.0).is_err());
    assert!(c.scale_demands(f64::NAN).is_err());
    // A refused value changes nothing.
    assert_eq!(c.demands(), before.demands());
    assert_eq!(c.statuses(), before.statuses());
    // Conditions of another network are refused by the solver, not read out of bounds.
    let other = network(100, 3);
    let mut solver = Solver::new(&m).expect("analysis");
    let e = solver.solve(&m, &Conditions::from_model(&other), &SolveOptions::from_model(&m)).unwrap_err();
    assert!(e.to_string().contains("conditions were made for a network"), "{e}");
}
