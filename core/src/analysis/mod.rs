//! Checking a model against service criteria, with what-if scenarios: the engine of
//! `ringmain check`.
//!
//! Entry points, in the order a check uses them:
//! 1. [`Criteria::apply`] reads a `[criteria]` table (the model's, then a criteria file's);
//! 2. [`diagnose_model`] lists warnings about the model's data (no solve needed);
//! 3. [`Scenario::closing`] reads the what-if case (closed links, a demand factor) and
//!    [`what_if_model`] makes the model the reports describe;
//! 4. [`run_scenario`] solves it and evaluates the criteria ([`evaluate()`]), giving an
//!    [`Outcome`];
//! 5. [`sweep_pipes`] closes every open pipe of that model in turn, on all cores (rayon), and
//!    gives one [`Outcome`] per closure, with the nodes that lose supply.
//!
//! # The sweep
//! Closing a pipe changes only its status, so the analysis of the head matrix (ordering and
//! symbolic factorization, see `solve::structure`) and every link's law stay valid: the sweep is
//! one [`Solver::solve_closures`] over the model's [`Conditions`] (no model is cloned), which
//! solves the base case, then each closure on every core, handing each solution to the criteria
//! as soon as it is found (no solution is kept). A closure starts from the base case's solution
//! on the base case's Cholesky factor (the closed pipe's rank-one change by Sherman–Morrison, a
//! Woodbury correction of the links that moved most where the chord is slow, Newton's steps
//! where it diverges: see `solve/sweep.rs`), with connectivity from a bridge table and the
//! dead-end trees from the base case; closures the fast path does not serve (devices with state
//! rules, core bridges) take the general solve from the base case's solution. Results agree with
//! a cold-started solve of the closed model to the solver's tolerances, not bit for bit, and are
//! the same from run to run.
//!
//! A node *loses supply* in a closure when a fixed head reached it in the base scenario and none
//! does with the pipe closed.

pub mod criteria;
pub mod diagnostics;
pub mod evaluate;
pub mod fire_flow;

pub use criteria::{Criteria, Group, Quantity, SupplyMargin};
pub use diagnostics::{diagnose_model, diagnose_solution, plausibility, DiagnosticKind};
pub use evaluate::{evaluate, evaluate_indexed, warning_checks, CheckResult, Finding, NodeIndex};

pub use crate::solve::Scenario;

use crate::error::{printable, Element, ModelError, SolveError};
use crate::model::{LinkKind, LinkStatus, Model, NodeKind};
use crate::solve::{Conditions, Outputs, Solution, SolveOptions, Solver};
use std::sync::atomic::{AtomicUsize, Ordering};

/// The model a what-if `scenario` of `model` describes (its links closed, its demands scaled),
/// for the checks and reports that read the model; the solver's paths apply a scenario to
/// [`Conditions`] instead. An invalid scenario is an error naming the key.
pub fn what_if_model(model: &Model, scenario: &Scenario) -> Result<Model, ModelError> {
    scenario.check(model)?;
    let mut m = model.clone();
    for &(k, s) in &scenario.statuses {
        m.set_status(k, s)?;
    }
    let f = scenario.demand_factor;
    if f != 1.0 {
        for i in 0..m.nodes().len() {
            if let NodeKind::Junction { demand } = m.nodes()[i].kind {
                m.set_demand(i, demand * f)?;
            }
        }
    }
    Ok(m)
}

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
    demand_delivered_indexed(model, &NodeIndex::new(model), solution, keep)
}

/// [`demand_delivered`] with the index of `model`'s nodes made once (a sweep's many solutions).
pub fn demand_delivered_indexed(
    model: &Model,
    index: &NodeIndex,
    solution: &Solution,
    keep: usize,
) -> Result<(), Unsolved> {
    use crate::solve::LinkState;
    let nodes = model.nodes();
    let links = model.links();
    // Only a pump shuts off: its links are listed in the index.
    let shut: Vec<usize> =
        index.pumps.iter().map(|&k| k as usize).filter(|&k| solution.link_state[k] == LinkState::PumpShutoff).collect();
    // Junctions that the shut-off pumps would reach if they could run.
    let behind_pumps: Vec<bool> = if shut.is_empty() {
        Vec::new()
    } else {
        let open: Vec<bool> = (0..links.len())
            .map(|k| {
                let state = solution.link_state[k];
                state.carries_flow() || matches!(state, LinkState::PumpShutoff | LinkState::Disconnected)
            })
            .collect();
        let mut reach = vec![false; nodes.len()];
        crate::solve::topology::mark_connected(
            model,
            &crate::solve::topology::link_ends(model),
            &open,
            &mut reach,
            &mut Vec::new(),
        );
        reach
    };
    let mut bad: Vec<(usize, f64)> = index
        .demanding
        .iter()
        .map(|&i| i as usize)
        .filter_map(|i| {
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
    /// How many of them are junctions with a demand (the ones `all_demands_supplied` counts; the
    /// others are junctions without a demand, tanks cut off from every other source, and the
    /// like).
    pub with_demand: usize,
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
    /// In a sweep: findings left out because the base case has them too (the same element
    /// failing the same criterion); zero elsewhere.
    pub repeated_from_base: usize,
    /// Demand asked but not delivered, m³/s: at junctions cut off, and where demand follows
    /// pressure, what low pressure takes away (zero when the solve failed).
    pub shortfall: f64,
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
        quantity: Quantity::Number,
        limit: f64::NAN,
        checked: 1,
        failures: 0,
        worst: Vec::new(),
    };
    if let (Some(e), true) = (error, criteria.must_converge) {
        c.failures = 1;
        let element = match e {
            Unsolved::Solver(SolveError::NotConverged { worst_nodes, worst_balances, .. })
                if !worst_nodes.is_empty() || !worst_balances.is_empty() =>
            {
                let first = if worst_nodes.is_empty() { &worst_balances[0] } else { &worst_nodes[0] };
                Element::Node(first.id.clone())
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
        Ok(solution) => (judge(model, criteria, &solution, reference, options), Some(solution)),
        Err(e) => (unsolved(criteria, model, Unsolved::Solver(e)), None),
    }
}

/// The outcome of a solution of `model` against `criteria` (the model's demands are the ones
/// solved; statuses are read from the solution's link states).
fn judge(
    model: &Model,
    criteria: &Criteria,
    solution: &Solution,
    reference: Option<&[bool]>,
    options: &CheckOptions,
) -> Outcome {
    let error = demand_delivered(model, solution, options.keep).err();
    let mut checks = vec![convergence_check(criteria, model, error.as_ref())];
    checks.extend(evaluate(criteria, model, solution, options.keep));
    // Fire flows on the scenarios themselves, not on each closure of a sweep (a search of
    // several solves per junction).
    if reference.is_none() {
        checks.extend(fire_flow_checks(criteria, model, options.keep));
    }
    let lost_supply = reference.map(|r| lost_supply(model, r, &solution.connected, options.keep)).unwrap_or_default();
    Outcome {
        error,
        iterations: solution.iterations,
        checks,
        lost_supply,
        connected: solution.connected.clone(),
        repeated_from_base: 0,
        shortfall: solution.outflow_summary(0).shortfall,
    }
}

/// [`judge`] for a closure of a sweep: no fire flows, the closure's connectivity is not copied
/// (the sweep keeps only what it reports), and the index of the model's nodes is the sweep's.
fn judge_closure(
    (model, index): (&Model, &NodeIndex),
    criteria: &Criteria,
    solution: &Solution,
    reference: &[bool],
    options: &CheckOptions,
) -> Outcome {
    let error = demand_delivered_indexed(model, index, solution, options.keep).err();
    let mut checks = vec![convergence_check(criteria, model, error.as_ref())];
    checks.extend(evaluate_indexed(criteria, model, index, solution, options.keep));
    Outcome {
        error,
        iterations: solution.iterations,
        checks,
        lost_supply: lost_supply(model, reference, &solution.connected, options.keep),
        connected: Vec::new(),
        repeated_from_base: 0,
        shortfall: solution.shortfall(),
    }
}

/// `min_fire_flow` of every group that sets it: the available fire flow at each of the group's
/// junctions at the criteria's residual pressure (see [`fire_flow`]).
fn fire_flow_checks(criteria: &Criteria, model: &Model, keep: usize) -> Vec<CheckResult> {
    let residual = criteria::fire_residual(criteria, model);
    let mut out = Vec::new();
    for g in criteria.groups.iter().filter(|g| g.min_fire_flow.is_some()) {
        let limit = g.min_fire_flow.unwrap_or(0.0);
        let mut c = CheckResult::new(format!("groups.{}.min_fire_flow", g.name), Quantity::Flow, limit);
        let hydrants: Vec<usize> = model
            .nodes()
            .iter()
            .enumerate()
            .filter(|(_, n)| matches!(n.kind, NodeKind::Junction { .. }) && g.selects(&n.id, n.zone.as_deref()))
            .map(|(i, _)| i)
            .collect();
        c.checked = hydrants.len();
        let options = fire_flow::FireFlowOptions { residual, demand_factor: 1.0 };
        // All the group's hydrants in one parallel search over one analysis.
        match fire_flow::fire_flows(model, &hydrants, &options) {
            Ok(flows) => {
                for (&h, f) in hydrants.iter().zip(&flows) {
                    let available = f.available();
                    if available < limit {
                        let id = Element::Node(model.nodes()[h].id.to_string());
                        c.add(Finding::over(id, available, limit, limit - available), keep);
                    }
                }
            }
            Err(e) => {
                let element = match &e {
                    SolveError::Model(m) => m.element.clone(),
                    _ => None,
                };
                c.add(
                    Finding {
                        element: element.unwrap_or_else(|| Element::Table(format!("groups.{}", g.name))),
                        value: f64::NAN,
                        limit,
                        excess: limit,
                        detail: Some(format!("no fire flow could be found: {e}")),
                    },
                    keep,
                );
            }
        }
        out.push(c);
    }
    out
}

/// The outcome of a scenario the solver could not finish.
fn unsolved(criteria: &Criteria, model: &Model, e: Unsolved) -> Outcome {
    let checks = vec![convergence_check(criteria, model, Some(&e))];
    Outcome {
        error: Some(e),
        iterations: 0,
        checks,
        lost_supply: LostSupply::default(),
        connected: Vec::new(),
        repeated_from_base: 0,
        shortfall: 0.0,
    }
}

fn lost_supply(model: &Model, reference: &[bool], now: &[bool], keep: usize) -> LostSupply {
    let nodes = model.nodes();
    // (A reference shorter than the nodes leaves the others out.)
    let mut lost: Vec<usize> =
        reference.iter().zip(now).enumerate().filter(|(_, (&was, &is))| was && !is).map(|(i, _)| i).collect();
    let demand = lost.iter().map(|&i| nodes[i].demand().max(0.0)).sum();
    let count = lost.len();
    let with_demand =
        lost.iter().filter(|&&i| matches!(nodes[i].kind, NodeKind::Junction { .. }) && nodes[i].demand() > 0.0).count();
    lost.sort_by(|&a, &b| nodes[b].demand().total_cmp(&nodes[a].demand()).then(a.cmp(&b)));
    lost.truncate(keep);
    LostSupply { count, with_demand, demand, nodes: lost }
}

/// Which nodes a fixed head reaches through links not closed by the user (no solve needed).
pub fn supplied_by_topology(model: &Model) -> Vec<bool> {
    let open: Vec<bool> = model.links().iter().map(|l| l.status != LinkStatus::Closed).collect();
    let mut connected = vec![false; model.nodes().len()];
    let ends = crate::solve::topology::link_ends(model);
    crate::solve::topology::mark_connected(model, &ends, &open, &mut connected, &mut Vec::new());
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

/// What the base case of a sweep fails: per criterion, the elements that fail it.
#[derive(Debug, Default)]
struct BaseFailures {
    failing: std::collections::HashMap<String, std::collections::HashSet<Element>>,
}

impl BaseFailures {
    fn of(base: &Outcome) -> Self {
        let mut failing = std::collections::HashMap::new();
        for c in base.checks.iter().filter(|c| !c.passed()) {
            failing.insert(c.name.clone(), c.worst.iter().map(|f| f.element.clone()).collect());
        }
        BaseFailures { failing }
    }

    /// Leaves out of `o` (evaluated with every finding kept) the findings the base case has
    /// too, then keeps the `keep` worst of the others. A criterion whose every failure the base
    /// case shares passes in the closure's report: the closure changed nothing there.
    fn remove_from(&self, o: &mut Outcome, keep: usize) {
        for c in &mut o.checks {
            if let Some(base) = self.failing.get(&c.name) {
                let before = c.worst.len();
                c.worst.retain(|f| !base.contains(&f.element));
                let repeated = before - c.worst.len();
                o.repeated_from_base += repeated;
                c.failures -= repeated;
            }
            c.worst.truncate(keep);
        }
    }
}

/// Closes each pipe of `pipes` in turn in `model`, solves and evaluates `criteria`, on every
/// thread of rayon's pool (see [the sweep](self#the-sweep)). `reference` is which nodes are
/// supplied with no pipe closed (the base solution's `connected`). `progress(done, total)` is
/// called after each closure, from the worker threads. Returns `(link index, outcome)` in the
/// order of `pipes`.
///
/// Each closure's outcome is relative to the base case: a finding the base case already has
/// (the same element failing the same criterion) is left out and counted in
/// [`Outcome::repeated_from_base`], so that a criterion fails in a closure only where the
/// closure makes something fail that did not before. `must_converge` and the supply lost are
/// the closure's own.
pub fn sweep_pipes(
    model: &Model,
    pipes: &[usize],
    criteria: &Criteria,
    reference: &[bool],
    options: &CheckOptions,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Vec<(usize, Outcome)> {
    let done = AtomicUsize::new(0);
    let total = pipes.len();
    // The model was validated by the caller; should it not be, every closure says so.
    let mut solver = match Solver::new(model) {
        Ok(s) => s,
        Err(e) => {
            return pipes
                .iter()
                .map(|&k| {
                    progress(done.fetch_add(1, Ordering::Relaxed) + 1, total);
                    (k, unsolved(criteria, model, Unsolved::Solver(e.clone())))
                })
                .collect()
        }
    };
    let conditions = Conditions::from_model(model);
    let options_all = CheckOptions { keep: usize::MAX };
    // The base case, from which every closure starts (a base that does not solve leaves every
    // closure a cold start), and what it already fails: every finding, not only the worst. The
    // closures are judged as they are solved (their solutions live only that long).
    let base_failures = std::sync::OnceLock::new();
    let mut on_base = |base: &Result<Solution, SolveError>| {
        let failures = match base {
            Ok(base) => BaseFailures::of(&judge(model, criteria, base, None, &options_all)),
            Err(_) => BaseFailures::default(),
        };
        let _ = base_failures.set(failures);
    };
    let solve_options = SolveOptions::from_model(model);
    let index = NodeIndex::new(model);
    let outputs = outputs_read(criteria);
    let judged = &|_, result: Result<&Solution, SolveError>| {
        let mut outcome = match result {
            Ok(solution) => {
                let mut o = judge_closure((model, &index), criteria, solution, reference, &options_all);
                if let Some(base) = base_failures.get() {
                    base.remove_from(&mut o, options.keep);
                }
                o
            }
            Err(e) => unsolved(criteria, model, Unsolved::Solver(e)),
        };
        outcome.connected = Vec::new();
        progress(done.fetch_add(1, Ordering::Relaxed) + 1, total);
        outcome
    };
    let (_, outcomes) =
        solver.solve_closures_reading(model, &conditions, &solve_options, pipes, outputs, &mut on_base, judged);
    pipes.iter().copied().zip(outcomes).collect()
}

/// The link results that judging a closure against `criteria` reads (see [`judge_closure`]):
/// velocities for `max_velocity`, head differences for `max_headloss`, flows for the supply of
/// the sources. The others are left out of the closures' solutions (see [`Outputs`]); a read of
/// one fails at once (see `evaluate::computed`).
fn outputs_read(criteria: &Criteria) -> Outputs {
    Outputs {
        flows: !criteria.source_capacity.is_empty() || criteria.min_supply_margin.is_some(),
        velocities: criteria.max_velocity.is_some(),
        head_differences: criteria.max_headloss.is_some(),
    }
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

    /// The node index a sweep makes once lists the junctions and, of them, those with a demand,
    /// in the model's order (a reservoir and a junction without demand left out of the second).
    #[test]
    fn the_node_index_lists_junctions_and_demands() {
        let mut m = network();
        m.add_node(Node::junction("E", 10.0, 0.0)).unwrap();
        let index = NodeIndex::new(&m);
        assert_eq!(index.junctions, [1, 2, 3, 4, 5]);
        assert_eq!(index.demanding, [1, 2, 3, 4]);
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
            let scenario = Scenario::closing(&m, &[m.links()[*k].id.to_string()], 1.0).unwrap();
            let sm = what_if_model(&m, &scenario).unwrap();
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
    fn the_sweep_reports_what_each_closure_changes_from_the_base() {
        let m = network();
        // A limit the base case itself fails at some junctions: the lowest base pressure plus
        // half the spread.
        let base_solution = crate::solve::solve(&m).unwrap();
        let p: Vec<f64> = (1..5).map(|i| base_solution.pressure[i]).collect();
        let (lo, hi) = p.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| (a.min(x), b.max(x)));
        let criteria = Criteria { min_pressure: Some(0.5 * (lo + hi)), ..Criteria::default() };
        let all = CheckOptions { keep: usize::MAX };
        let mut solver = Solver::new(&m).unwrap();
        let (base, _) = run_scenario(&m, &criteria, &mut solver, &SolveOptions::from_model(&m), None, &all);
        assert!(!base.passed(), "the base must fail for this test: {base:?}");
        let base_failing: Vec<(String, Element)> =
            base.failed().flat_map(|c| c.worst.iter().map(move |f| (c.name.clone(), f.element.clone()))).collect();
        let results = sweep_pipes(&m, &sweep_candidates(&m), &criteria, &base.connected, &all, &|_, _| {});
        let mut repeated = 0;
        for (k, outcome) in &results {
            // No failure the base case has is repeated...
            for c in outcome.failed() {
                for f in &c.worst {
                    assert!(!base_failing.contains(&(c.name.clone(), f.element.clone())), "{c:?}");
                }
            }
            // ...and what is left out plus what is reported is everything a single run finds.
            let sm = what_if_model(&m, &Scenario::closing(&m, &[m.links()[*k].id.to_string()], 1.0).unwrap()).unwrap();
            let mut cold = Solver::new(&sm).unwrap();
            let (single, _) =
                run_scenario(&sm, &criteria, &mut cold, &SolveOptions::from_model(&sm), Some(&base.connected), &all);
            let single_failures: usize = single.checks.iter().map(|c| c.failures).sum();
            let reported: usize = outcome.checks.iter().map(|c| c.failures).sum();
            assert_eq!(reported + outcome.repeated_from_base, single_failures, "{}", m.links()[*k].id);
            // The junctions with a demand that lose supply are the ones all_demands_supplied counts.
            let cut = outcome.checks.iter().find(|c| c.name == "all_demands_supplied").unwrap();
            assert_eq!(cut.failures, outcome.lost_supply.with_demand, "{}", m.links()[*k].id);
            repeated += outcome.repeated_from_base;
        }
        assert!(repeated > 0, "closures that keep the base's failures must leave them out");
        // Closing one side of the loop leaves D's supply; closing CD cuts D off (one junction with
        // a demand), and RA everything.
        let by_id = |id: &str| &results.iter().find(|(k, _)| m.links()[*k].id == id).unwrap().1;
        assert_eq!(by_id("CD").lost_supply.with_demand, 1);
        assert_eq!(by_id("RA").lost_supply.with_demand, 4);
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
        // The index lists the pump: the only link whose shutoff the delivery check looks for.
        assert_eq!(NodeIndex::new(&m).pumps, [1]);
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

    /// The shortfall a sweep's closure reports (`Solution::shortfall`) is the outflow summary's:
    /// zero with every junction supplied, the demand cut off (here D's 2 L/s) with a dead end
    /// closed, to round-off.
    #[test]
    fn the_closures_shortfall_is_the_summarys() {
        let mut m = network();
        let s = Solver::new(&m).unwrap().solve(&m, &Conditions::from_model(&m), &SolveOptions::from_model(&m)).unwrap();
        assert_eq!((s.shortfall(), s.outflow_summary(0).shortfall), (0.0, 0.0));
        m.set_status(4, LinkStatus::Closed).unwrap();
        let s = Solver::new(&m).unwrap().solve(&m, &Conditions::from_model(&m), &SolveOptions::from_model(&m)).unwrap();
        assert!(!s.connected[4]);
        let summary = s.outflow_summary(0).shortfall;
        assert!((summary - 0.002).abs() <= 1e-15, "{summary}");
        assert!((s.shortfall() - summary).abs() <= 1e-15, "{} vs {summary}", s.shortfall());
    }

    #[test]
    fn scenario_closes_and_scales() {
        let m = network();
        let s = Scenario::closing(&m, &["AB".into()], 2.0).unwrap();
        assert_eq!(s.label(&m), "AB closed, demand x2");
        let w = what_if_model(&m, &s).unwrap();
        assert_eq!(w.links()[1].status, LinkStatus::Closed);
        assert!((w.nodes()[1].demand() - 0.008).abs() < 1e-15);
        let e = Scenario::closing(&m, &["XB".into()], 1.0).unwrap_err();
        assert!(e.to_string().contains("did you mean 'AB'"), "{e}");
        assert!(Scenario::closing(&m, &[], f64::NAN).is_err());
    }
}
