//! Many solves of one structure: a [`Scenario`] is a change of [`Conditions`] (links closed or
//! opened, every demand scaled); [`Solver::solve_batch`] and [`Solver::solve_batch_map`] solve
//! many of them on rayon's pool, every thread with its own solver (sharing the one analysis) and
//! its own copy of the conditions, which it changes for a scenario and changes back after it. No
//! model is cloned and no law is rebuilt for a change of statuses or demands.
//!
//! # Warm starts in a batch
//! With [`SolveOptions::warm_start`] and a solver that has solved before (the base case, say),
//! every scenario starts from that solver's last solution, whichever thread takes it: scenarios
//! near the base case then converge in a few iterations, and every answer is the same from run to
//! run (it does not depend on which scenario a thread solved before). Without either, every
//! scenario starts cold. Warm scenarios also share the base case's factor: their first steps
//! are chord steps on it (see `chord.rs`), and each ends with Newton steps and the solver's own
//! convergence test.

use super::{Conditions, Solution, SolveOptions, Solver};
use crate::error::{printable, Element, ModelError, SolveError};
use crate::model::{LinkStatus, Model};
use crate::units::did_you_mean;

/// A change of a network's conditions: some links' user status set, every junction's demand
/// scaled. What the criteria checks call a what-if case, the each-pipe-closed sweep a closure,
/// and [`Solver::solve_batch`] a scenario.
#[derive(Clone, Debug, PartialEq)]
pub struct Scenario {
    /// Factor on every junction demand (1 = as in the conditions).
    pub demand_factor: f64,
    /// Links (by index) and the user status each takes.
    pub statuses: Vec<(usize, LinkStatus)>,
}

impl Default for Scenario {
    fn default() -> Self {
        Scenario { demand_factor: 1.0, statuses: Vec::new() }
    }
}

impl Scenario {
    /// The scenario closing the links with ids `close` of `model` and scaling every demand by
    /// `demand_factor`. An unknown id is an error naming it (with the nearest id, when one is
    /// close), a bad factor an error naming the key.
    pub fn closing(model: &Model, close: &[String], demand_factor: f64) -> Result<Self, ModelError> {
        let mut statuses = Vec::with_capacity(close.len());
        for id in close {
            let Some(k) = model.link_index(id) else {
                let hint = did_you_mean(id, model.links().iter().map(|l| l.id.as_str()), '\'');
                return Err(ModelError::at(
                    Some(Element::Link(id.clone())),
                    None,
                    format!("cannot be closed: there is no link with this id{hint}"),
                ));
            };
            statuses.push((k, LinkStatus::Closed));
        }
        let scenario = Scenario { demand_factor, statuses };
        scenario.check(model)?;
        Ok(scenario)
    }

    /// Whether the scenario changes nothing.
    pub fn is_base(&self) -> bool {
        self.statuses.is_empty() && self.demand_factor == 1.0
    }

    /// A short description for reports ("base", "P-7 closed, demand x1.8").
    pub fn label(&self, model: &Model) -> String {
        let mut parts = Vec::new();
        let named = |status: LinkStatus| -> Vec<String> {
            self.statuses
                .iter()
                .filter(|(_, s)| *s == status)
                .map(|&(k, _)| model.links().get(k).map_or_else(|| format!("#{k}"), |l| printable(&l.id)))
                .collect()
        };
        let closed = named(LinkStatus::Closed);
        if !closed.is_empty() {
            parts.push(format!("{} closed", closed.join(", ")));
        }
        let opened = named(LinkStatus::Open);
        if !opened.is_empty() {
            parts.push(format!("{} opened", opened.join(", ")));
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

    /// Checks the scenario against `model`: a finite demand factor of zero or more, and links
    /// that exist.
    pub fn check(&self, model: &Model) -> Result<(), ModelError> {
        let f = self.demand_factor;
        if !(f.is_finite() && f >= 0.0) {
            return Err(ModelError::new(format!("the demand factor must be a finite number of at least 0, found {f}")));
        }
        if let Some(&(k, _)) = self.statuses.iter().find(|(k, _)| *k >= model.links().len()) {
            return Err(ModelError::at(
                None,
                Some("statuses"),
                format!("link index {k} does not exist (the model has {} links)", model.links().len()),
            ));
        }
        Ok(())
    }

    /// Applies the scenario to `conditions` (of `model`).
    pub fn apply(&self, model: &Model, conditions: &mut Conditions) -> Result<(), ModelError> {
        self.check(model)?;
        for &(k, s) in &self.statuses {
            conditions.set_status(model, k, s)?;
        }
        if self.demand_factor != 1.0 {
            conditions.scale_demands(self.demand_factor)?;
        }
        Ok(())
    }

    /// Undoes [`Scenario::apply`] on `conditions`, back to `base` (the conditions it was applied
    /// to), touching only what the scenario changed.
    fn undo(&self, model: &Model, conditions: &mut Conditions, base: &Conditions) -> Result<(), ModelError> {
        for &(k, _) in &self.statuses {
            conditions.set_status(model, k, base.status(k))?;
        }
        if self.demand_factor != 1.0 {
            conditions.set_demands(model, base.demands())?;
        }
        Ok(())
    }
}

impl Solver {
    /// Solves one scenario of `conditions`, which stay as they are.
    pub fn solve_scenario(
        &mut self,
        model: &Model,
        conditions: &Conditions,
        options: &SolveOptions,
        scenario: &Scenario,
    ) -> Result<Solution, SolveError> {
        if scenario.is_base() {
            return self.solve(model, conditions, options);
        }
        if !conditions.fits(model) {
            return Err(SolveError::Model(conditions.mismatch(model)));
        }
        let mut changed = conditions.clone();
        scenario.apply(model, &mut changed)?;
        self.solve(model, &changed, options)
    }

    /// Solves every scenario of `conditions` in parallel; results in the scenarios' order. See
    /// the [module docs](self) for warm starts.
    pub fn solve_batch(
        &self,
        model: &Model,
        conditions: &Conditions,
        options: &SolveOptions,
        scenarios: &[Scenario],
    ) -> Vec<Result<Solution, SolveError>> {
        self.solve_batch_map(model, conditions, options, scenarios, &|_, result| result)
    }

    /// Like [`Solver::solve_batch`], handing each scenario's result to `reduce` on the thread that
    /// solved it (with the scenario's index), so that a large batch keeps only what it needs of
    /// each solution.
    pub fn solve_batch_map<T: Send>(
        &self,
        model: &Model,
        conditions: &Conditions,
        options: &SolveOptions,
        scenarios: &[Scenario],
        reduce: &(dyn Fn(usize, Result<Solution, SolveError>) -> T + Sync),
    ) -> Vec<T> {
        use rayon::prelude::*;
        let fresh;
        let base = if self.structure.fits(model) {
            self
        } else {
            match Solver::new(model) {
                Ok(s) => {
                    fresh = s;
                    &fresh
                }
                Err(e) => return scenarios.iter().enumerate().map(|(i, _)| reduce(i, Err(e.clone()))).collect(),
            }
        };
        if !conditions.fits(model) {
            let e = SolveError::Model(conditions.mismatch(model));
            return scenarios.iter().enumerate().map(|(i, _)| reduce(i, Err(e.clone()))).collect();
        }
        let warm = options.warm_start && base.has_previous;
        let scenario_options = SolveOptions { warm_start: warm, ..*options };
        // Warm scenarios start at the base case's solution, where its factor is the first
        // Newton step's (see `chord.rs`).
        let chord = if warm { base.chord_base() } else { None };
        scenarios
            .par_iter()
            .enumerate()
            .map_init(
                || {
                    let mut solver = base.clone();
                    solver.use_chord(chord.clone());
                    let local = conditions.clone();
                    // The copy has its own identity; the base solver's laws, if they are up to
                    // date with `conditions`, are up to date with it too.
                    if conditions.stale_since(base.laws_seen) == Some(&[]) {
                        solver.laws_seen = Some(local.laws_seen());
                    }
                    (solver, local)
                },
                |(solver, local), (i, scenario)| {
                    if warm {
                        solver.start_from(base);
                    }
                    // `apply` checks the scenario before it changes anything.
                    let result = match scenario.apply(model, local) {
                        Ok(()) => {
                            let result = solver.solve(model, local, &scenario_options);
                            // Back to the base conditions for the thread's next scenario
                            // (undoing what a checked scenario set cannot fail; should it, every
                            // value is copied back).
                            if scenario.undo(model, local, conditions).is_err() {
                                local.restore_from(conditions);
                            }
                            result
                        }
                        Err(e) => Err(SolveError::Model(e)),
                    };
                    reduce(i, result)
                },
            )
            .collect()
    }
}
