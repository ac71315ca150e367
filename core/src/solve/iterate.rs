//! The Newton iteration: factor, solve, correct the heads, reassemble; device states applied
//! before and examined after each converged inner solve; the diagnosis of a case that does not
//! converge.

use super::assemble::*;
use super::chord::{Chord, CHORD_CONTRACTION, CHORD_MARGIN, CHORD_STEPS};
use super::solution::{add_link_flows, energy_residuals};
use super::status::{self, LinkState, StatusTracker};
use super::structure::NONE;
use super::{topology, Conditions, Pinned, Solution, SolveOptions, Solver, STALLED_ITERATIONS};
use crate::error::{Element, Offender, SolveError};
use crate::model::{LinkKind, Model, ValveType};
use std::time::Instant;

/// Largest mass residual of an answer, relative to the flow scale of the solve.
pub(super) const MASS_GATE: f64 = 1e-7;

/// Largest head change (m) the stopping test puts down to the floating-point floor of the heads
/// (heads of a network are at most some thousand metres; their round-off, even at a million
/// unknowns, is many orders of magnitude below this).
pub(super) const FLOOR_HEAD_CHANGE: f64 = 1.0;

/// Full Newton steps after a change of device states before damped ones (with relations of
/// pressure only; see `iterate`).
const DAMPING_AFTER: u32 = 12;

impl Solver {
    /// Iterates from the prepared laws, outflows and starting values to a solution whose device
    /// states all hold (see the [solver's docs](super) and [`status`]).
    pub(super) fn iterate(
        &mut self,
        model: &Model,
        conditions: &Conditions,
        options: &SolveOptions,
        warm: bool,
    ) -> Result<Solution, SolveError> {
        let nodes = model.nodes();
        let links = model.links();
        let clock = Instant::now();
        let mut tracker = StatusTracker::new(model, conditions);
        self.timings.status += clock.elapsed();
        let mut iterations = 0u32;
        let mut status_changes = 0u32;
        let mut head_change = f64::INFINITY;
        let mut flow_change = f64::INFINITY;
        let mut states_stale = true;
        let mut since_change = 0u32;
        // Chord steps on a base case's factor (see `chord.rs`): whether the next step is one,
        // how many were taken, and the largest head correction of the last one.
        let mut chord = Chord::Off;
        let mut chord_steps = 0u32;
        let mut chord_change = f64::INFINITY;

        loop {
            if states_stale {
                let clock = Instant::now();
                self.apply_states(model, conditions, &mut tracker);
                self.timings.status += clock.elapsed();
                let clock = Instant::now();
                self.tree_flows();
                self.timings.forest += clock.elapsed();
                let clock = Instant::now();
                // Chord steps from the base case's point take its linearisation as it is;
                // anything else is linearised here.
                chord = if chord_steps < CHORD_STEPS { self.chord_start() } else { Chord::Off };
                if chord == Chord::Off {
                    // The secant start only on a cold start's first step.
                    self.linearise(iterations < SECANT_STEPS && !warm);
                    self.begin_assembly();
                    for i in 0..self.structure.core.len() {
                        self.scatter(i);
                    }
                    self.scatter_relations();
                    self.end_assembly();
                }
                self.timings.assembly += clock.elapsed();
                states_stale = false;
            }
            if iterations >= options.max_iterations {
                self.sync_flows();
                self.tree_heads();
                return Err(self.not_converged(model, iterations, head_change, flow_change));
            }
            iterations += 1;
            since_change += 1;
            if since_change > STALLED_ITERATIONS {
                // An active pressure valve whose pinned head cannot be held (no sink for the flow
                // it would pass, or a head it cannot reach) makes its flow drift without a fixed
                // point. Such a valve cannot regulate: it closes, and the status logic decides
                // again from the next converged solution.
                if let Some(k) = self.drifting_pressure_valve() {
                    self.sync_flows();
                    tracker.state[k] = LinkState::ValveClosed;
                    status_changes += 1;
                    states_stale = true;
                    since_change = 0;
                    head_change = f64::INFINITY;
                    continue;
                }
            }
            let chord_step = chord != Chord::Off;
            if let Chord::On(rank_one) = chord {
                let clock = Instant::now();
                self.chord_solve(rank_one);
                chord_steps += 1;
                self.timings.solves += clock.elapsed();
            } else {
                let assembled = Instant::now();
                let factored = self.factor.factor(&self.structure);
                let clock = Instant::now();
                self.timings.factorization += clock - assembled;
                self.timings.factorizations += 1;
                factored.map_err(|e| SolveError::Numerical {
                    iteration: iterations,
                    detail: match self.structure.node_of_unknown.get(e.unknown) {
                        Some(&node) => format!("pivot of node '{}' is not positive", nodes[node as usize].id),
                        None => "a pivot is not positive".to_owned(),
                    },
                })?;
                self.factor.solve(&self.structure, &mut self.rhs);
                self.timings.solves += clock.elapsed();
            }
            let solved = Instant::now();
            std::mem::swap(&mut self.rhs, &mut self.delta);
            // A held head (`hold.rs`): the draw's step, and its share of the corrections.
            let draw_step = self.hold_step(model, iterations)?;
            head_change = 0.0;
            let mut finite = true;
            // Relations of pressure make the Newton step's slopes span many orders of magnitude.
            // Full Newton steps first: a relation thrown across its kink comes back in one step
            // (its barrier is a straight line). An iteration that has not settled after a dozen
            // of them has its step length chosen on the content function from then on
            // (`search.rs`), after one full step without the outflow guard of
            // `update_relations`, which restores the mass balance the search relies on; where
            // the search's premises do not hold, it takes damped steps.
            let slow = !self.relations.is_empty() && since_change > DAMPING_AFTER;
            let unguarded = slow && self.searches_line(chord_step);
            let searched = unguarded && since_change > DAMPING_AFTER + 1;
            let damping = if searched {
                self.line_search()
            } else if !slow || unguarded {
                1.0
            } else if since_change <= 4 * DAMPING_AFTER {
                0.5
            } else {
                0.25
            };
            for (u, delta) in self.delta.iter_mut().enumerate() {
                if self.free[u] {
                    *delta *= damping;
                    finite &= delta.is_finite();
                    head_change = head_change.max(delta.abs());
                    self.unknown_head[u] += *delta;
                }
            }
            // A chord step after the first (which is a Newton step) converges linearly: it may
            // end the iteration only if it contracted by CHORD_CONTRACTION at least, and with its
            // changes within CHORD_MARGIN of the tolerances. Newton steps take over when the
            // chord contracts too slowly (or too long).
            let mut share = 1.0;
            if chord_step {
                // (A NaN change stalls it too.)
                let stalled =
                    chord_steps > 1 && (head_change.is_nan() || head_change > CHORD_CONTRACTION * chord_change);
                if stalled || chord_steps >= CHORD_STEPS {
                    chord = Chord::Off;
                }
                if chord_steps > 1 {
                    share = if stalled { 0.0 } else { CHORD_MARGIN };
                }
                chord_change = head_change;
            }
            if iterations == 1 {
                // No previous iterate to compare with.
                head_change = f64::INFINITY;
            }
            self.hold_apply(damping * draw_step);
            // The largest |p − P(q)| of the relations of pressure at the new point, beyond
            // round-off (none in chord steps, which run without them).
            let mut relation_residual = 0.0;
            let (change, energy_residual) = if chord == Chord::Off {
                // The next step's matrix is filled as the new flows are computed.
                self.begin_assembly();
                let relations = self.update_relations(damping, !unguarded);
                relation_residual = relations.unsettled;
                let secant = !warm && iterations < SECANT_STEPS;
                let result = self.update_links(model, secant, relations, damping);
                self.end_assembly();
                result
            } else {
                // The next step is a chord step: its matrix is the base case's.
                self.chord_update()
            };
            flow_change = change.max(self.hold_change());
            self.timings.assembly += solved.elapsed();
            if !finite || !flow_change.is_finite() {
                // Name the element whose value overflowed: the first head, then the first flow.
                let node = (0..self.delta.len())
                    .find(|&u| self.free[u] && !self.unknown_head[u].is_finite())
                    .map(|u| (self.structure.node_of_unknown[u] as usize, self.unknown_head[u]));
                if let Some((i, value)) = node {
                    return Err(SolveError::NonFinite {
                        element: Element::Node(nodes[i].id.to_string()),
                        quantity: "head",
                        value,
                    });
                }
                let link = self.structure.core.iter().zip(&self.cq).find(|(_, q)| !q.is_finite());
                if let Some((c, &value)) = link {
                    return Err(SolveError::NonFinite {
                        element: Element::Link(links[c.link as usize].id.to_string()),
                        quantity: "flow",
                        value,
                    });
                }
                return Err(SolveError::Numerical {
                    iteration: iterations,
                    detail: "heads or flows became NaN".into(),
                });
            }
            if damping < 1.0 {
                // A shortened step's own size understates how far the iterate still is from the
                // answer: the stopping test takes the full step's.
                head_change /= damping;
                flow_change /= damping;
            }
            let (head_tolerance, flow_tolerance) = (share * options.head_tolerance, share * options.flow_tolerance);
            let heads_settled = head_change <= head_tolerance
                // Heads that still move by more than a tight tolerance while every energy
                // equation already holds to it (possible when the tolerance is near the
                // floating-point floor of a large network): the energy residual decides. Not
                // after a step of a metre or more, which no floor explains (a step that large, just
                // after a change of device states, leaves the round-off of its own size in the
                // balances; the next step clears it).
                || (flow_change <= flow_tolerance
                    && iterations > 1
                    && energy_residual <= head_tolerance
                    && head_change < FLOOR_HEAD_CHANGE);
            // An active pressure valve's flow enters the other node's balance one step late (see
            // `update_links`): its last change is that node's mass residual, which must be a tenth
            // of the last gate's before the iteration may stop.
            let lag_settled = self.pinned.iter().all(|v| v.change <= 0.1 * MASS_GATE * self.demand_scale);
            // Every relation of pressure on its (regularised) curve to the head tolerance: its flow
            // may be tiny beside the network's flows, so the relative flow change alone does not
            // show that it has settled (the last step's linearisation error stays in it).
            let relations_settled = relation_residual <= options.head_tolerance;
            if heads_settled && flow_change <= flow_tolerance && lag_settled && relations_settled {
                if !tracker.has_devices() {
                    break;
                }
                let clock = Instant::now();
                self.sync_flows();
                let laws = &self.laws;
                let open_loss = |k: usize, q: f64| laws[k].evaluate_exact(q).0;
                let shutoff = |k: usize| laws[k].shutoff_head().unwrap_or(f64::INFINITY);
                let seen = status::Observed {
                    flow: &self.flow,
                    head: &self.head,
                    connected: &self.connected,
                    open_loss: &open_loss,
                    shutoff: &shutoff,
                    tolerance: options.head_tolerance,
                    reverse_floor: status::ROUND_OFF_FLOW * self.demand_scale,
                };
                let update = tracker.update(model, conditions, &seen);
                self.timings.status += clock.elapsed();
                match update {
                    Ok(0) => break,
                    Ok(n) => {
                        status_changes += n;
                        states_stale = true;
                        since_change = 0;
                        head_change = f64::INFINITY;
                    }
                    Err(cycling) => {
                        return Err(SolveError::StatusCycle {
                            iterations,
                            links: cycling.into_iter().map(|k| links[k].id.to_string()).collect(),
                        })
                    }
                }
            }
        }
        self.sync_flows();
        let clock = Instant::now();
        self.tree_heads();
        self.timings.forest += clock.elapsed();
        let clock = Instant::now();
        let ending = tracker.ending(status_changes);
        let solution =
            self.finish(model, conditions, iterations, status_changes, head_change, flow_change, &tracker, ending);
        self.timings.results += clock.elapsed();
        self.timings.iterations = iterations;
        super::finite::check(model, &solution)?;
        // The last gate: the mass balance holds to round-off (of the flows moving, or of the
        // demand); an iteration that stopped elsewhere is not an answer.
        // And every relation of pressure on its exact curve, within the smoothing (the iteration
        // may stop at a point the smoothing cannot explain only by failing: never an answer).
        let w = 10.0 * self.relation_tolerance;
        let off_curve = self.relations.iter().find(|r| {
            let i = r.node as usize;
            if !solution.connected[i] {
                return false;
            }
            let p = solution.pressure[i];
            let (q, law) = (r.reported(), r.law());
            // The flow tolerance allows each flow to move by its share of the relative change.
            let slack = 1e-9 * law.flow + 10.0 * options.flow_tolerance * self.demand_scale;
            q < law.flow(p - w) - slack || q > law.flow(p + w) + slack
        });
        if let Some(r) = off_curve {
            return Err(SolveError::NotConverged {
                iterations,
                head_change,
                flow_change,
                energy_residual: solution.max_energy_residual,
                worst_nodes: vec![Offender { id: nodes[r.node as usize].id.to_string(), value: head_change }],
                worst_links: Vec::new(),
                worst_balances: Vec::new(),
            });
        }
        if solution.max_mass_residual > MASS_GATE * self.demand_scale {
            return Err(self.unbalanced(model, &solution, iterations, head_change, flow_change));
        }
        Ok(solution)
    }

    /// Recomputes, for the current device states, which links carry flow, which nodes a fixed
    /// head reaches, which heads are pinned by active pressure valves, and how every core link
    /// enters the iteration.
    fn apply_states(&mut self, model: &Model, conditions: &Conditions, tracker: &mut StatusTracker) {
        let links = model.links();
        let nodes = model.nodes();
        loop {
            for (k, s) in tracker.state.iter().enumerate() {
                self.open[k] = s.carries_flow();
            }
            let structure = &*self.structure;
            topology::mark_connected(model, &structure.ends, &self.open, &mut self.connected, &mut self.reach_scratch);
            for (i, known) in self.known_head.iter_mut().enumerate() {
                *known = conditions.fixed_head(i).unwrap_or(f64::NAN);
            }
            for (k, &(from, to)) in self.structure.ends.iter().enumerate() {
                self.open[k] &= self.connected[from as usize] && self.connected[to as usize];
                self.on_law[k] = self.open[k] && tracker.state[k].uses_law();
                if !self.open[k] {
                    self.flow[k] = 0.0;
                    continue;
                }
                if tracker.state[k] == LinkState::Active {
                    let l = &links[k];
                    if let LinkKind::Valve(v) = &l.kind {
                        match v.valve {
                            ValveType::PressureReducing => {
                                self.known_head[l.to] = nodes[l.to].elevation + conditions.valve_setting(k);
                            }
                            ValveType::PressureSustaining => {
                                self.known_head[l.from] = nodes[l.from].elevation + conditions.valve_setting(k);
                            }
                            ValveType::FlowControl => self.flow[k] = conditions.valve_setting(k),
                            ValveType::Throttle => {}
                        }
                    }
                }
            }
            // A group of junctions joined to every known head only through regulating valves has
            // no head the equations can fix (its matrix block would be singular), and a valve
            // cannot regulate a branch whose demand alone sets its flow: such a valve is fully open.
            // (Nothing to look for when no valve is regulating.)
            if !tracker.state.contains(&LinkState::Active) {
                break;
            }
            topology::mark_reached(
                &self.structure.ends,
                &self.on_law,
                self.known_head.iter().map(|h| !h.is_nan()),
                &mut self.anchored,
                &mut self.reach_scratch,
            );
            let mut forced = false;
            for i in 0..nodes.len() {
                if !self.connected[i] || self.anchored[i] {
                    continue;
                }
                let adjacent = self.structure.adjacency.of(i);
                // The valve held open: of flow-control valves in series the one with the larger
                // setting (the smaller one limits the flow, the other cannot reach its setting);
                // otherwise the first active one.
                let flow_setting = |k: u32| {
                    links[k as usize]
                        .as_valve()
                        .filter(|v| v.valve == ValveType::FlowControl)
                        .map(|_| conditions.valve_setting(k as usize))
                };
                let active = adjacent.iter().copied().filter(|&k| tracker.state[k as usize] == LinkState::Active);
                let widest = active.clone().filter_map(|k| flow_setting(k).map(|s| (k, s))).fold(
                    None,
                    |best: Option<(u32, f64)>, (k, s)| match best {
                        Some((_, b)) if b >= s => best,
                        _ => Some((k, s)),
                    },
                );
                if let Some(k) = widest.map(|(k, _)| k).or_else(|| active.clone().next()) {
                    tracker.hold_open(model, k as usize);
                    forced = true;
                    break;
                }
            }
            if !forced {
                break;
            }
        }
        // Heads: pinned ones at their setting, cut-off ones undefined, newly reached ones from
        // any finite value (the mean of the others would do as well as this one).
        let fallback = self.head.iter().copied().find(|h| h.is_finite()).unwrap_or(0.0);
        for i in 0..nodes.len() {
            if !self.connected[i] {
                self.head[i] = f64::NAN;
            } else if !self.known_head[i].is_nan() {
                self.head[i] = self.known_head[i];
            } else if !self.head[i].is_finite() {
                self.head[i] = fallback;
            }
        }
        for (u, &node) in self.structure.node_of_unknown.iter().enumerate() {
            let node = node as usize;
            self.free[u] = self.connected[node] && self.known_head[node].is_nan();
            self.unknown_head[u] = self.head[node];
        }
        self.pinned.clear();
        for (i, c) in self.structure.core.iter().enumerate() {
            let k = c.link as usize;
            self.cq[i] = self.flow[k];
            let mut mode = if !self.open[k] {
                MODE_CLOSED
            } else if self.on_law[k] {
                MODE_LAW
            } else {
                MODE_FIXED_FLOW
            };
            if mode == MODE_FIXED_FLOW {
                let l = &links[k];
                let pinned = match l.as_valve().map(|v| v.valve) {
                    Some(ValveType::PressureReducing) => Some((l.to, 1.0)),
                    Some(ValveType::PressureSustaining) => Some((l.from, -1.0)),
                    _ => None,
                };
                if let Some((node, sign)) = pinned {
                    self.pinned.push(Pinned { core: i as u32, link: c.link, node: node as u32, sign, change: 0.0 });
                    mode = MODE_PINNED;
                }
            }
            if mode != MODE_CLOSED {
                let s = c.slots;
                if s.from != NONE && self.free[s.from as usize] {
                    mode |= FREE_FROM;
                }
                if s.to != NONE && self.free[s.to as usize] {
                    mode |= FREE_TO;
                }
            }
            // The law bit stays as the laws were built.
            self.mode[i] = mode | (self.mode[i] & LAW_GENERAL);
        }
    }

    /// The active pressure valve whose flow changed most in the last step, if any.
    pub(super) fn drifting_pressure_valve(&self) -> Option<usize> {
        self.pinned.iter().max_by(|a, b| a.change.total_cmp(&b.change)).map(|v| v.link as usize)
    }

    /// The error of a solution refused by the mass balance's gate, naming the junctions of the
    /// largest imbalance (from the solution's flows: the solver's arrays are the solution's now).
    fn unbalanced(
        &self,
        model: &Model,
        solution: &Solution,
        iterations: u32,
        head_change: f64,
        flow_change: f64,
    ) -> SolveError {
        let nodes = model.nodes();
        let mut balance: Vec<f64> =
            (0..nodes.len()).map(|i| -(solution.delivered(i) + solution.leakage(i) + solution.outlet(i))).collect();
        add_link_flows(&self.structure.ends, &solution.flow, &mut balance);
        let worst_balances = worst(
            nodes
                .iter()
                .enumerate()
                .filter(|&(i, n)| n.fixed_head().is_none() && solution.connected[i])
                .map(|(i, n)| Offender { id: n.id.to_string(), value: balance[i].abs() })
                .filter(|o| o.value > 0.0),
        );
        SolveError::NotConverged {
            iterations,
            head_change,
            flow_change,
            energy_residual: solution.max_energy_residual,
            worst_nodes: Vec::new(),
            worst_links: Vec::new(),
            worst_balances,
        }
    }

    pub(super) fn not_converged(
        &self,
        model: &Model,
        iterations: u32,
        head_change: f64,
        flow_change: f64,
    ) -> SolveError {
        let energy: Vec<f64> =
            energy_residuals(&self.structure.ends, &self.laws, &self.flow, &self.head, &self.on_law).collect();
        // The last head corrections are still in `delta`.
        let worst_nodes = worst((0..self.structure.n).filter(|&u| self.free[u]).map(|u| {
            let node = self.structure.node_of_unknown[u] as usize;
            Offender { id: model.nodes()[node].id.to_string(), value: self.delta[u].abs() }
        }));
        let worst_links = worst(
            model
                .links()
                .iter()
                .enumerate()
                .filter(|(k, _)| self.on_law[*k])
                .map(|(k, l)| Offender { id: l.id.to_string(), value: energy[k] }),
        );
        SolveError::NotConverged {
            iterations,
            head_change,
            flow_change,
            energy_residual: energy.iter().copied().fold(0.0, f64::max),
            worst_nodes,
            worst_links,
            worst_balances: Vec::new(),
        }
    }
}

/// The five largest finite offenders, largest first.
fn worst(offenders: impl Iterator<Item = Offender>) -> Vec<Offender> {
    let mut all: Vec<Offender> = offenders.filter(|o| o.value.is_finite()).collect();
    all.sort_by(|a, b| b.value.total_cmp(&a.value));
    all.truncate(5);
    all
}
