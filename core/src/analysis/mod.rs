//! Checking a model against service criteria, with what-if scenarios: the engine of
//! `ringmain check`.
//!
//! Entry points, in the order a check uses them:
//! 1. [`Criteria::apply`] reads a `[criteria]` table (the model's, then a criteria file's);
//! 2. [`diagnose_model`] lists warnings about the model's data (no solve needed);
//! 3. [`Scenario::apply`] makes the what-if model (closed links, a demand factor);
//! 4. [`run_scenario`] solves it and evaluates the criteria ([`evaluate()`]), giving an
//!    [`Outcome`];
//! 5. [`sweep_pipes`] closes every open pipe of that model in turn, on all cores (rayon), and
//!    gives one [`Outcome`] per closure, with the nodes that lose supply.
//!
//! # The sweep
//! Closing a pipe changes only its status, so the symbolic analysis of the head matrix (ordering
//! and symbolic factorization, see `solve::pattern`) stays valid: each worker thread builds one
//! [`Solver`] and one copy of the model, and reuses both for every closure it takes from a shared
//! counter (closing the pipe, solving, reopening it). Each closure starts from the solver's
//! previous converged flows (a warm start), which are close to the answer since one pipe differs;
//! results therefore agree with a cold-started solve to the solver's tolerances, not bit for bit.
//!
//! A node *loses supply* in a closure when a fixed head reached it in the base scenario and none
//! does with the pipe closed.

pub mod criteria;
pub mod diagnostics;
pub mod evaluate;

pub use criteria::{Criteria, Group, Quantity, SupplyMargin};
pub use diagnostics::{diagnose_model, diagnose_solution, Diagnostic, DiagnosticKind};
pub use evaluate::{evaluate, warning_checks, CheckResult, Finding};

use crate::error::{printable, Element, ModelError, SolveError};
use crate::model::{LinkKind, LinkStatus, Model, NodeKind};
use crate::solve::{Solution, SolveOptions, Solver};
use std::sync::atomic::{AtomicUsize, Ordering};

/// Whether `text` matches `pattern`, where `*` stands for any run of characters and `?` for one.
pub fn glob_match(pattern: &str, text: &str) -> bool {
    let p: Vec<char> = pattern.chars().collect();
    let t: Vec<char> = text.chars().collect();
    let (mut pi, mut ti) = (0, 0);
    // Where the last `*` was, and the text position it currently absorbs up to.
    let mut star: Option<(usize, usize)> = None;
    while ti < t.len() {
        if pi < p.len() && (p[pi] == '?' || (p[pi] != '*' && p[pi] == t[ti])) {
            pi += 1;
            ti += 1;
        } else if pi < p.len() && p[pi] == '*' {
            star = Some((pi, ti));
            pi += 1;
        } else if let Some((sp, st)) = star {
            pi = sp + 1;
            ti = st + 1;
            star = Some((sp, st + 1));
        } else {
            return false;
        }
    }
    p[pi..].iter().all(|&c| c == '*')
}

/// A what-if change of the model: links closed and all demands scaled.
#[derive(Clone, Debug, PartialEq)]
pub struct Scenario {
    /// Ids of links to close.
    pub close: Vec<String>,
    /// Factor on every junction demand (1 leaves them as they are).
    pub demand_factor: f64,
}

impl Default for Scenario {
    fn default() -> Self {
        Scenario { close: Vec::new(), demand_factor: 1.0 }
    }
}

impl Scenario {
    /// Whether the scenario changes nothing.
    pub fn is_base(&self) -> bool {
        self.close.is_empty() && self.demand_factor == 1.0
    }

    /// A short description for reports ("base", "P-7 closed, demand x1.8").
    pub fn label(&self) -> String {
        let mut parts = Vec::new();
        if !self.close.is_empty() {
            let ids: Vec<String> = self.close.iter().map(|c| printable(c)).collect();
            parts.push(format!("{} closed", ids.join(", ")));
        }
        if self.demand_factor != 1.0 {
            parts.push(format!("demand x{}", self.demand_factor));
        }
        if parts.is_empty() {
            "base".to_owned()
        } else {
            parts.join(", ")
        }
    }

    /// The model with the scenario's changes. Unknown link ids and a bad factor are errors.
    pub fn apply(&self, model: &Model) -> Result<Model, ModelError> {
        let mut m = model.clone();
        for id in &self.close {
            let Some(k) = m.link_index(id) else {
                let hint = crate::units::suggest(id, m.links().iter().map(|l| l.id.as_str()))
                    .map(|s| format!(" (did you mean '{s}'?)"))
                    .unwrap_or_default();
                return Err(ModelError::at(
                    Some(Element::Link(id.clone())),
                    None,
                    format!("cannot be closed: there is no link with this id{hint}"),
                ));
            };
            m.set_status(k, LinkStatus::Closed)?;
        }
        let f = self.demand_factor;
        if !(f.is_finite() && f >= 0.0) {
            return Err(ModelError::new(format!("the demand factor must be a finite number of at least 0, found {f}")));
        }
        if f != 1.0 {
            for i in 0..m.nodes().len() {
                if let NodeKind::Junction { demand } = m.nodes()[i].kind {
                    m.set_demand(i, demand * f)?;
                }
            }
        }
        Ok(m)
    }
}

/// How a check runs.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct CheckOptions {
    /// How many of the worst findings each criterion lists (all are counted).
    pub keep: usize,
}

impl CheckOptions {
    /// Default number of findings listed per criterion.
    pub const KEEP: usize = 10;
}

impl Default for CheckOptions {
    fn default() -> Self {
        CheckOptions { keep: Self::KEEP }
    }
}

/// Why a scenario has no usable answer.
#[derive(Clone, Debug, PartialEq)]
#[non_exhaustive]
pub enum Unsolved {
    /// The solver gave no answer (did not converge, devices cycled, or the system was singular).
    Solver(SolveError),
    /// The equations were solved, but junctions with a demand have a negative pressure (or are
    /// cut off behind a pump that had to shut off): no source can deliver those demands at any
    /// head the network gives, so the demand-driven answer is not one the network can run.
    DemandNotDelivered {
        /// How many junctions with a demand have a negative pressure or are cut off by a pump.
        count: usize,
        /// The worst of them, most negative pressure first (m of head; NaN for cut off).
        nodes: Vec<(String, f64)>,
        /// Pumps involved: shut off against the head, running past the end of their curve, or
        /// delivering to a node with a negative pressure.
        pumps: Vec<String>,
    },
}

impl std::fmt::Display for Unsolved {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Unsolved::Solver(e) => e.fmt(f),
            Unsolved::DemandNotDelivered { count, nodes, pumps } => {
                write!(f, "the demand cannot be delivered at {count} junction(s): ")?;
                let shown: Vec<String> = nodes
                    .iter()
                    .map(|(id, p)| {
                        if p.is_finite() {
                            format!("'{}' ({p:.2} m of pressure head)", printable(id))
                        } else {
                            format!("'{}' (cut off)", printable(id))
                        }
                    })
                    .collect();
                f.write_str(&shown.join(", "))?;
                if *count > nodes.len() {
                    write!(f, " and {} more", count - nodes.len())?;
                }
                if !pumps.is_empty() {
                    let names: Vec<String> = pumps.iter().map(|p| format!("'{}'", printable(p))).collect();
                    write!(f, "; pumps that cannot lift the water there: {}", names.join(", "))?;
                }
                Ok(())
            }
        }
    }
}

/// Checks that a converged solution delivers every demand: see [`Unsolved::DemandNotDelivered`].
pub fn demand_delivered(model: &Model, solution: &Solution, keep: usize) -> Result<(), Unsolved> {
    use crate::solve::LinkState;
    let nodes = model.nodes();
    let links = model.links();
    let shut: Vec<usize> = (0..links.len()).filter(|&k| solution.link_state[k] == LinkState::PumpShutoff).collect();
    // Junctions that the shut-off pumps would reach if they could run.
    let behind_pumps: Vec<bool> = if shut.is_empty() {
        Vec::new()
    } else {
        let adjacency = crate::solve::topology::Adjacency::new(model);
        let open: Vec<bool> = (0..links.len())
            .map(|k| {
                let state = solution.link_state[k];
                state.carries_flow() || matches!(state, LinkState::PumpShutoff | LinkState::Disconnected)
            })
            .collect();
        let mut reach = vec![false; nodes.len()];
        crate::solve::topology::mark_connected(
            model,
            &adjacency,
            &crate::solve::topology::link_ends(model),
            &open,
            &mut reach,
            &mut Vec::new(),
        );
        reach
    };
    let mut bad: Vec<(usize, f64)> = nodes
        .iter()
        .enumerate()
        .filter(|(_, n)| matches!(n.kind, NodeKind::Junction { .. }) && n.demand() > 0.0)
        .filter_map(|(i, _)| {
            let p = solution.pressure[i];
            if solution.connected[i] {
                (p < 0.0).then_some((i, p))
            } else {
                // Cut off: a failure of supply (all_demands_supplied), unless a pump that had to
                // shut off would reach it.
                behind_pumps.get(i).copied().unwrap_or(false).then_some((i, f64::NAN))
            }
        })
        .collect();
    if bad.is_empty() {
        return Ok(());
    }
    let count = bad.len();
    bad.sort_by(|a, b| a.1.total_cmp(&b.1).then(a.0.cmp(&b.0)));
    bad.truncate(keep.max(1));
    let pumps: Vec<String> = solution
        .pumps
        .iter()
        .filter(|r| {
            let to = links[r.link].to;
            shut.contains(&r.link) || r.beyond_curve || (solution.connected[to] && solution.pressure[to] < 0.0)
        })
        .map(|r| links[r.link].id.to_string())
        .collect();
    Err(Unsolved::DemandNotDelivered {
        count,
        nodes: bad.into_iter().map(|(i, p)| (nodes[i].id.to_string(), p)).collect(),
        pumps,
    })
}

/// Nodes that lose supply in a scenario.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct LostSupply {
    /// How many nodes lose supply.
    pub count: usize,
    /// Their total demand, m³/s.
    pub demand: f64,
    /// Node indices, largest demand first (at most the number asked for).
    pub nodes: Vec<usize>,
}

/// The result of one scenario.
#[derive(Clone, Debug, PartialEq)]
pub struct Outcome {
    /// Why the scenario has no usable answer, if it has none.
    pub error: Option<Unsolved>,
    /// Newton iterations of the solve (0 when it failed).
    pub iterations: u32,
    /// One result per criterion, `must_converge` first. When the solve failed, only
    /// `must_converge` is there.
    pub checks: Vec<CheckResult>,
    /// Nodes that a fixed head reached in the reference and no longer does.
    pub lost_supply: LostSupply,
    /// Which nodes a fixed head reaches (empty when the solve failed).
    pub connected: Vec<bool>,
}

impl Outcome {
    /// Whether every criterion holds.
    pub fn passed(&self) -> bool {
        self.checks.iter().all(CheckResult::passed)
    }

    /// Whether the scenario has a usable answer.
    pub fn converged(&self) -> bool {
        self.error.is_none()
    }

    /// The criteria that fail.
    pub fn failed(&self) -> impl Iterator<Item = &CheckResult> {
        self.checks.iter().filter(|c| !c.passed())
    }
}

/// The `must_converge` result for a scenario that ended with `error`.
fn convergence_check(criteria: &Criteria, model: &Model, error: Option<&Unsolved>) -> CheckResult {
    let mut c = CheckResult {
        name: "must_converge".into(),
        quantity: Quantity::None,
        limit: f64::NAN,
        checked: 1,
        failures: 0,
        worst: Vec::new(),
    };
    if let (Some(e), true) = (error, criteria.must_converge) {
        c.failures = 1;
        let element = match e {
            Unsolved::Solver(SolveError::NotConverged { worst_nodes, .. }) if !worst_nodes.is_empty() => {
                Element::Node(worst_nodes[0].id.clone())
            }
            Unsolved::Solver(SolveError::StatusCycle { links, .. }) if !links.is_empty() => {
                Element::Link(links[0].clone())
            }
            Unsolved::DemandNotDelivered { nodes, .. } if !nodes.is_empty() => Element::Node(nodes[0].0.clone()),
            _ => Element::Table(model.title.clone().unwrap_or_else(|| "model".into())),
        };
        c.worst.push(Finding { element, value: f64::NAN, limit: f64::NAN, excess: 0.0, detail: Some(e.to_string()) });
    }
    c
}

/// Solves `model` (a scenario's model) with `solver` and evaluates `criteria`. `reference` is
/// which nodes were supplied before the scenario's change, for [`LostSupply`].
pub fn run_scenario(
    model: &Model,
    criteria: &Criteria,
    solver: &mut Solver,
    solve_options: &SolveOptions,
    reference: Option<&[bool]>,
    options: &CheckOptions,
) -> (Outcome, Option<Solution>) {
    match solver.solve_with(model, solve_options) {
        Ok(solution) => {
            let error = demand_delivered(model, &solution, options.keep).err();
            let mut checks = vec![convergence_check(criteria, model, error.as_ref())];
            checks.extend(evaluate(criteria, model, &solution, options.keep));
            let lost_supply =
                reference.map(|r| lost_supply(model, r, &solution.connected, options.keep)).unwrap_or_default();
            let outcome = Outcome {
                error,
                iterations: solution.iterations,
                checks,
                lost_supply,
                connected: solution.connected.clone(),
            };
            (outcome, Some(solution))
        }
        Err(e) => (unsolved(criteria, model, Unsolved::Solver(e)), None),
    }
}

/// The outcome of a scenario the solver could not finish.
fn unsolved(criteria: &Criteria, model: &Model, e: Unsolved) -> Outcome {
    let checks = vec![convergence_check(criteria, model, Some(&e))];
    Outcome { error: Some(e), iterations: 0, checks, lost_supply: LostSupply::default(), connected: Vec::new() }
}

fn lost_supply(model: &Model, reference: &[bool], now: &[bool], keep: usize) -> LostSupply {
    let nodes = model.nodes();
    let mut lost: Vec<usize> = (0..nodes.len()).filter(|&i| reference.get(i) == Some(&true) && !now[i]).collect();
    let demand = lost.iter().map(|&i| nodes[i].demand().max(0.0)).sum();
    let count = lost.len();
    lost.sort_by(|&a, &b| nodes[b].demand().total_cmp(&nodes[a].demand()).then(a.cmp(&b)));
    lost.truncate(keep);
    LostSupply { count, demand, nodes: lost }
}

/// Which nodes a fixed head reaches through links not closed by the user (no solve needed).
pub fn supplied_by_topology(model: &Model) -> Vec<bool> {
    let adjacency = crate::solve::topology::Adjacency::new(model);
    let open: Vec<bool> = model.links().iter().map(|l| l.status != LinkStatus::Closed).collect();
    let mut connected = vec![false; model.nodes().len()];
    let mut stack = Vec::new();
    crate::solve::topology::mark_connected(
        model,
        &adjacency,
        &crate::solve::topology::link_ends(model),
        &open,
        &mut connected,
        &mut stack,
    );
    connected
}

/// The pipes a sweep closes: every pipe of `model` that is not closed already.
pub fn sweep_candidates(model: &Model) -> Vec<usize> {
    model
        .links()
        .iter()
        .enumerate()
        .filter(|(_, l)| matches!(l.kind, LinkKind::Pipe(_)) && l.status == LinkStatus::Open)
        .map(|(k, _)| k)
        .collect()
}

/// Closes each pipe of `pipes` in turn in `model`, solves and evaluates `criteria`, on every
/// thread of rayon's pool. `reference` is which nodes are supplied with no pipe closed (the base
/// solution's `connected`). `progress(done, total)` is called after each closure, from the worker
/// threads. Returns `(link index, outcome)` in the order of `pipes`.
pub fn sweep_pipes(
    model: &Model,
    pipes: &[usize],
    criteria: &Criteria,
    reference: &[bool],
    options: &CheckOptions,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Vec<(usize, Outcome)> {
    let next = AtomicUsize::new(0);
    let done = AtomicUsize::new(0);
    let total = pipes.len();
    let solve_options = SolveOptions { warm_start: true, ..SolveOptions::from_model(model) };
    let parts: Vec<Vec<(usize, usize, Outcome)>> = rayon::broadcast(|_| {
        let mut mine = Vec::new();
        let mut local = model.clone();
        // The model was validated by the caller; should it not be, every closure says so.
        let mut solver = Solver::new(&local).map_err(Unsolved::Solver);
        loop {
            let i = next.fetch_add(1, Ordering::Relaxed);
            if i >= total {
                return mine;
            }
            let k = pipes[i];
            let outcome = match (&mut solver, local.links().get(k).map(|l| l.status)) {
                (Err(e), _) => unsolved(criteria, model, e.clone()),
                (Ok(_), None) => unsolved(
                    criteria,
                    model,
                    Unsolved::Solver(SolveError::Model(ModelError::new(format!("no link at index {k}")))),
                ),
                (Ok(solver), Some(before)) => {
                    // Closing and reopening a link that exists cannot fail.
                    let _ = local.set_status(k, LinkStatus::Closed);
                    let (mut outcome, _) =
                        run_scenario(&local, criteria, solver, &solve_options, Some(reference), options);
                    let _ = local.set_status(k, before);
                    outcome.connected = Vec::new(); // not needed per closure; saves memory on large sweeps
                    outcome
                }
            };
            mine.push((i, k, outcome));
            progress(done.fetch_add(1, Ordering::Relaxed) + 1, total);
        }
    });
    let mut all: Vec<(usize, usize, Outcome)> = parts.into_iter().flatten().collect();
    all.sort_by_key(|(i, _, _)| *i);
    all.into_iter().map(|(_, k, o)| (k, o)).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::{Link, Node, Pipe};

    #[test]
    fn glob_patterns() {
        assert!(glob_match("HZ-*", "HZ-12"));
        assert!(glob_match("*", ""));
        assert!(glob_match("J-?", "J-1"));
        assert!(!glob_match("J-?", "J-12"));
        assert!(glob_match("*-1*", "A-B-12"));
        assert!(glob_match("a*b*c", "aXXbYYc"));
        assert!(!glob_match("a*b*c", "aXXbYY"));
        assert!(glob_match("Hill*", "Hillside"));
        assert!(!glob_match("hill*", "Hillside"));
    }

    fn pipe(id: &str, from: usize, to: usize) -> Link {
        Link {
            id: id.into(),
            from,
            to,
            status: LinkStatus::Open,
            kind: LinkKind::Pipe(Pipe {
                length: 500.0,
                diameter: 0.15,
                roughness: 120.0,
                minor_loss: 0.0,
                check_valve: false,
            }),
        }
    }

    /// A reservoir feeding a loop A-B-C with a dead end D hanging off C.
    fn network() -> Model {
        let mut m = Model::default();
        m.add_node(Node::reservoir("R", 60.0)).unwrap();
        for (id, d) in [("A", 0.004), ("B", 0.004), ("C", 0.004), ("D", 0.002)] {
            m.add_node(Node::junction(id, 10.0, d)).unwrap();
        }
        m.add_link(pipe("RA", 0, 1)).unwrap();
        m.add_link(pipe("AB", 1, 2)).unwrap();
        m.add_link(pipe("BC", 2, 3)).unwrap();
        m.add_link(pipe("CA", 3, 1)).unwrap();
        m.add_link(pipe("CD", 3, 4)).unwrap();
        m
    }

    #[test]
    fn sweep_finds_lost_supply_and_matches_single_runs() {
        let m = network();
        let criteria = Criteria { min_pressure: Some(30.0), ..Criteria::default() };
        let mut solver = Solver::new(&m).unwrap();
        let (base, _) =
            run_scenario(&m, &criteria, &mut solver, &SolveOptions::from_model(&m), None, &CheckOptions::default());
        assert!(base.passed(), "{base:?}");
        let pipes = sweep_candidates(&m);
        let results = sweep_pipes(&m, &pipes, &criteria, &base.connected, &CheckOptions::default(), &|_, _| {});
        assert_eq!(results.len(), 5);
        let by_id = |id: &str| &results.iter().find(|(k, _)| m.links()[*k].id == id).unwrap().1;
        // Closing the only supply main cuts off everything: 14 L/s of demand lost.
        let ra = by_id("RA");
        assert_eq!(ra.lost_supply.count, 4);
        assert!((ra.lost_supply.demand - 0.014).abs() < 1e-12);
        assert!(!ra.passed());
        // Closing one side of the loop supplies everything the other way round.
        assert_eq!(by_id("AB").lost_supply.count, 0);
        assert_eq!(by_id("CD").lost_supply.nodes, vec![4]);
        // Each closure agrees with a cold single run of the same scenario.
        for (k, outcome) in &results {
            let scenario = Scenario { close: vec![m.links()[*k].id.to_string()], demand_factor: 1.0 };
            let sm = scenario.apply(&m).unwrap();
            let mut cold = Solver::new(&sm).unwrap();
            let (single, _) = run_scenario(
                &sm,
                &criteria,
                &mut cold,
                &SolveOptions::from_model(&sm),
                Some(&base.connected),
                &CheckOptions::default(),
            );
            assert_eq!(single.passed(), outcome.passed());
            assert_eq!(single.lost_supply.count, outcome.lost_supply.count);
        }
    }

    #[test]
    fn a_pump_that_cannot_lift_is_named_with_the_junctions_it_leaves_dry() {
        use crate::model::{Pump, PumpDrive};
        use crate::physics::pump::{Efficiency, HeadCurve};
        // A well at 10 m lifts to a hill junction at 60 m; the pump's shutoff head is 30 m.
        let mut m = Model::default();
        m.add_node(Node::reservoir("Well", 10.0)).unwrap();
        m.add_node(Node::junction("Suction", 5.0, 0.0)).unwrap();
        m.add_node(Node::junction("Hill", 60.0, 0.002)).unwrap();
        m.add_link(pipe("S", 0, 1)).unwrap();
        let points = vec![(0.0, 30.0), (0.01, 25.0), (0.02, 15.0)];
        let curve = HeadCurve::fit(&points).unwrap();
        let pump = Pump {
            drive: PumpDrive::Curve { points, curve },
            efficiency_points: None,
            efficiency: Efficiency::Constant(0.7),
            speed: 1.0,
            elevation: None,
            npsh_required: None,
        };
        m.add_link(Link {
            id: "Lift".into(),
            from: 1,
            to: 2,
            status: LinkStatus::Open,
            kind: LinkKind::Pump(Box::new(pump)),
        })
        .unwrap();
        let criteria = Criteria::default();
        let mut solver = Solver::new(&m).unwrap();
        let (outcome, _) =
            run_scenario(&m, &criteria, &mut solver, &SolveOptions::from_model(&m), None, &CheckOptions::default());
        let e = outcome.error.clone().expect("a pump that cannot lift must not give a usable answer");
        let text = e.to_string();
        // 30 m of shutoff head from a 10 m well cannot reach 60 m of ground: the pressure is below zero.
        assert!(text.contains("'Hill'") && text.contains("'Lift'"), "{text}");
        assert!(!outcome.passed());
        assert_eq!(outcome.checks[0].name, "must_converge");
        assert!(!outcome.checks[0].passed());
    }

    #[test]
    fn scenario_closes_and_scales() {
        let m = network();
        let s = Scenario { close: vec!["AB".into()], demand_factor: 2.0 };
        assert_eq!(s.label(), "AB closed, demand x2");
        let w = s.apply(&m).unwrap();
        assert_eq!(w.links()[1].status, LinkStatus::Closed);
        assert!((w.nodes()[1].demand() - 0.008).abs() < 1e-15);
        let e = Scenario { close: vec!["XB".into()], demand_factor: 1.0 }.apply(&m).unwrap_err();
        assert!(e.to_string().contains("did you mean 'AB'"), "{e}");
        assert!(Scenario { close: vec![], demand_factor: f64::NAN }.apply(&m).is_err());
    }
}
