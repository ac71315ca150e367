//! How a junction draws water: its outflow as a law of its head.
//!
//! In the mass balance of junction `i` the outflow `q_i` is what leaves the network there. Today
//! it is the demand as given, whatever the pressure ([`NodeLaw::FixedDemand`]). A law that makes
//! the outflow depend on the pressure (a pressure-dependent demand) enters the same Newton system
//! without breaking its symmetry: linearised at the current head `H_i`,
//!
//! ```text
//! q_i(H') ≈ q_i(H) + s_i (H' − H),   s_i = dq_i/dH_i ≥ 0,
//! ```
//!
//! so in the head-correction form (see the [solver's docs](super)) junction `i`'s row gains `s_i`
//! on its diagonal and its right-hand side takes `−q_i(H)` where it now takes `−d_i`. The matrix
//! stays symmetric and positive definite as long as every slope is zero or more (an outflow that
//! never falls when the pressure rises).
//!
//! # Where a law is evaluated (the hook)
//! [`Solver`](super::Solver) asks [`NodeLaw::outflow`] for every junction once per set of device
//! states, in the forest phase (`forest.rs`, `Solver::tree_flows`), where the outflows of tree
//! junctions are summed towards their roots and the core unknowns' outflows are set. A law with
//! [`NodeLaw::depends_on_head`] true must instead be evaluated at every iteration:
//! * in `assemble.rs`, `Solver::begin_assembly` fills the right-hand side from the unknowns'
//!   outflows and is where `s_i` goes onto the diagonal slot `structure.diag_slot[u]` of each
//!   free unknown `u`;
//! * tree junctions' outflows then depend on their heads, which follow from their roots' only
//!   after the core converges: such a law either keeps trees in the core (analyse with no
//!   peeling) or iterates the forest sweep with the core;
//! * the mass residual reported in the solution must use `q_i(H)` at the final heads.

/// The outflow law of the junctions.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
#[non_exhaustive]
pub enum NodeLaw {
    /// The outflow is the demand as given, at any pressure (a demand-driven analysis).
    #[default]
    FixedDemand,
}

/// A junction's outflow and its slope at one head.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Outflow {
    /// Outflow, m³/s.
    pub flow: f64,
    /// dq/dH, m²/s (zero or more).
    pub slope: f64,
}

impl NodeLaw {
    /// Outflow of a junction with demand `demand` (m³/s) and elevation `elevation` (m) at head
    /// `head` (m).
    #[inline]
    pub fn outflow(self, demand: f64, elevation: f64, head: f64) -> Outflow {
        let _ = (elevation, head);
        match self {
            NodeLaw::FixedDemand => Outflow { flow: demand, slope: 0.0 },
        }
    }

    /// Whether the outflow changes with the head (and must then be evaluated every iteration).
    pub fn depends_on_head(self) -> bool {
        match self {
            NodeLaw::FixedDemand => false,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_fixed_demand_ignores_the_head() {
        for head in [-10.0, 0.0, 35.0, 1e4] {
            let o = NodeLaw::FixedDemand.outflow(0.012, 20.0, head);
            assert_eq!(o, Outflow { flow: 0.012, slope: 0.0 });
        }
        assert!(!NodeLaw::FixedDemand.depends_on_head());
    }
}
