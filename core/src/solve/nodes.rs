//! How a junction draws water: its outflow as a law of its pressure.
//!
//! In the mass balance of junction `i` the outflow is what leaves the network there. In a
//! demand-driven analysis ([`NodeLaw::FixedDemand`]) it is the demand as given, whatever the
//! pressure. With [`NodeLaw::PressureDependent`] a junction's outflow is the sum of
//!
//! * a fixed part: a negative demand (an inflow), a demand with no `[pressure_demand]`, and any
//!   fixed draw of the conditions (a fire draw, [`Conditions::set_fixed_draw`]);
//! * up to three relations of its pressure ([`crate::physics::outflow`]): the demand following
//!   pressure (Wagner, Shamir & Marks 1988), an outlet (the orifice law) and the leak of the pipe
//!   halves ending there (Germanopoulos 1985).
//!
//! # How the relations enter the Newton step
//! Each relation is handled like a link from the junction to the atmosphere at the junction's
//! elevation, in the inverse (pressure-from-flow) form compared by Todini et al. (2021, J. Water
//! Resour. Plann. Manage. 147(8)): the relation's own flow `q` is an unknown beside the heads, its
//! "head loss" is the pressure `P(q)` that passes it, regularised within the head tolerance (see
//! [`PowerLaw::inverse`]). Linearised at `(q, p)`, its next flow is `q' = c + g δ` with `g =
//! 1/P'(q)` and `c = q + g (p − P(q))` ([`PowerLaw::step`]), where `δ` is the junction's head
//! correction; so the junction's row of the head matrix gains `g` on its diagonal and its
//! right-hand side takes `−c`, exactly like a link to a fixed head. The matrix stays symmetric
//! positive definite. `P` is strictly increasing, so the content of the whole network (the
//! links' contents plus `∫P dq` of every relation) is strictly convex and the problem has exactly
//! one solution. The iteration takes full Newton steps first; one that has not settled after a
//! dozen chooses its step lengths on that content function (`search.rs`), which makes it
//! converge from any start, and it stops only with every relation on its curve to the head
//! tolerance. Should it still stop short, the last gates of `iterate.rs` make that an error,
//! never an answer.
//!
//! A junction with a relation stays in the core of the matrix: the dead-end trees (see
//! [`structure`](super::structure)) are peeled only through junctions whose outflow is fixed,
//! since a tree's flows are summed from its outflows before its heads are known.
//!
//! [`Conditions::set_fixed_draw`]: super::Conditions::set_fixed_draw

use super::Conditions;
use crate::model::{Model, NodeKind};
use crate::physics::outflow::{PowerLaw, Smoothed, Step};

/// How the junctions draw water.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
#[non_exhaustive]
pub enum NodeLaw {
    /// The outflow is the demand as given, at any pressure (a demand-driven analysis), even when
    /// the model has pressure-dependent data.
    #[default]
    FixedDemand,
    /// Demands, outlets and leakage follow pressure as the model's outflow data say
    /// (`[pressure_demand]`, node `outlet`, background leakage).
    PressureDependent,
}

impl NodeLaw {
    /// The law a model asks for: pressure-dependent when it has any outflow data that depends
    /// on pressure.
    pub fn of_model(model: &Model) -> Self {
        if model.outflow.is_active() {
            NodeLaw::PressureDependent
        } else {
            NodeLaw::FixedDemand
        }
    }

    /// Whether outflows depend on the head (and are then evaluated at every iteration).
    pub fn depends_on_head(self) -> bool {
        match self {
            NodeLaw::FixedDemand => false,
            NodeLaw::PressureDependent => true,
        }
    }
}

/// Which relation of a junction.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Relation {
    /// Demand following pressure.
    Demand,
    /// An outlet to atmosphere.
    Outlet,
    /// Background leakage of the pipe halves ending at the junction.
    Leakage,
}

/// One relation of one junction, with its state in the iteration.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(super) struct NodeRelation {
    /// The junction.
    pub node: u32,
    /// Its elevation, m.
    pub elevation: f64,
    /// Which relation.
    pub relation: Relation,
    /// The relation and its regularised inverse for the solve's tolerance.
    pub smooth: Smoothed,
    /// Its current flow, m³/s.
    pub q: f64,
    /// Its linearisation at the current flow and pressure.
    pub step: Step,
}

impl NodeRelation {
    /// The relation.
    #[inline]
    pub fn law(&self) -> &PowerLaw {
        &self.smooth.law
    }

    /// The flow reported for it, m³/s: the iterated flow held within the relation's range (a flow
    /// a hair beyond the demand, or below zero, is the smoothing's barrier at work: a few 1e-10 of
    /// the flow).
    pub fn reported(&self) -> f64 {
        let law = self.law();
        if law.capped {
            self.q.clamp(0.0, law.flow)
        } else {
            self.q.max(0.0)
        }
    }
}

/// Junctions that must stay in the core of the matrix (their outflow may depend on pressure).
pub(super) fn pressure_nodes(model: &Model) -> Vec<bool> {
    let nodes = model.nodes();
    let junction = |i: usize| matches!(nodes[i].kind, NodeKind::Junction { .. });
    let data = &model.outflow;
    let mut keep = vec![false; nodes.len()];
    if data.pressure_demand.is_some() {
        // Any junction may be given a positive demand by the conditions.
        for (i, k) in keep.iter_mut().enumerate() {
            *k = junction(i);
        }
    }
    for (&i, j) in &data.junctions {
        if j.outlet.is_some() && i < keep.len() {
            keep[i] = junction(i);
        }
    }
    if data.leakage.is_some() {
        for l in model.links() {
            if l.as_pipe().is_some() {
                for end in [l.from, l.to] {
                    keep[end] = junction(end);
                }
            }
        }
    }
    keep
}

/// Builds the relations of every junction under `conditions` into `out` (by node, in node
/// order), each regularised within the pressure tolerance `w` (m), and each junction's fixed
/// outflow into `fixed` (m³/s, per node).
pub(super) fn build(model: &Model, conditions: &Conditions, w: f64, fixed: &mut [f64], out: &mut Vec<NodeRelation>) {
    out.clear();
    for (i, f) in fixed.iter_mut().enumerate() {
        *f = conditions.demand(i);
    }
    for &(i, q) in conditions.fixed_draws() {
        fixed[i as usize] += q;
    }
    if conditions.node_law() == NodeLaw::FixedDemand || !model.outflow.is_active() {
        return;
    }
    let nodes = model.nodes();
    for (i, laws) in model.outflow.laws(model, conditions.demands()).nodes {
        let relation = |relation: Relation, law: PowerLaw| NodeRelation {
            node: i as u32,
            elevation: nodes[i].elevation,
            relation,
            smooth: law.smoothed(w),
            q: 0.0,
            step: Step { conductance: 0.0, constant: 0.0 },
        };
        if let Some(law) = laws.demand {
            // The demand follows pressure: it leaves the fixed part.
            fixed[i] -= conditions.demand(i);
            out.push(relation(Relation::Demand, law));
        }
        if let Some(law) = laws.outlet {
            out.push(relation(Relation::Outlet, law));
        }
        if let Some(law) = laws.leakage {
            out.push(relation(Relation::Leakage, law));
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_model_without_outflow_data_is_demand_driven() {
        let m = Model::new(crate::units::UnitSystem::default(), crate::model::HydraulicOptions::default());
        assert_eq!(NodeLaw::of_model(&m), NodeLaw::FixedDemand);
        assert!(!NodeLaw::FixedDemand.depends_on_head());
        assert!(NodeLaw::PressureDependent.depends_on_head());
    }
}
