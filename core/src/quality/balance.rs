//! The mass balance of one constituent over a run.
//!
//! Units are the constituent's internal value times m³ (for a substance in mg/L, that is grams;
//! for an age, s·m³; for a source trace, percent·m³). Every term is summed while the transport
//! runs, independently of the others, so that the discrepancy measures what the transport lost
//! or made up: for age and source traces the round-off of the additions; for reacting
//! substances also the split of the reaction from the mixing within a transport step in tanks
//! (bounded by `|k| Δt` times the tank's mass moved in the step) and the lagged inflow value of
//! completely mixed tanks that both fill and drain in one step (mass is conserved there, so this
//! adds no discrepancy).

/// Terms of the balance: stored at the start + in + boosted + gained = out + stored at the end.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct MassBalance {
    /// In pipes and tanks at the start.
    pub stored_start: f64,
    /// In from reservoirs, injecting junctions and traced tanks.
    pub inflow: f64,
    /// Added by boosters.
    pub boosted: f64,
    /// Gained by reaction (negative for decay); for ages, the ageing of the stored water.
    pub reacted: f64,
    /// Out with demands, into reservoirs and into traced tanks.
    pub outflow: f64,
    /// In pipes and tanks at the end.
    pub stored_end: f64,
}

impl MassBalance {
    /// In − out − change in storage.
    pub fn discrepancy(&self) -> f64 {
        self.stored_start + self.inflow + self.boosted + self.reacted - self.outflow - self.stored_end
    }

    /// The discrepancy relative to the largest term.
    pub fn relative_discrepancy(&self) -> f64 {
        let scale = [self.stored_start, self.inflow, self.boosted, self.reacted, self.outflow, self.stored_end]
            .iter()
            .fold(0.0f64, |a, b| a.max(b.abs()));
        if scale > 0.0 {
            self.discrepancy() / scale
        } else {
            0.0
        }
    }
}
