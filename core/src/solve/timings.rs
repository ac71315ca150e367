//! Where the time of a solve went, phase by phase (wall-clock, this thread).

use std::time::Duration;

/// Where the time of the last solve went (wall-clock, this thread).
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Timings {
    /// Structure analysis (forest-core split, ordering, symbolic factorization), when this solver
    /// did it; zero when the analysis was reused.
    pub analysis: Duration,
    /// Laws, demands and initial values of this solve.
    pub preparation: Duration,
    /// Link coefficients (flows, head losses, slopes) and scattering them into the matrix.
    pub assembly: Duration,
    /// Numeric Cholesky factorization.
    pub factorization: Duration,
    /// Triangular solves.
    pub solves: Duration,
    /// Device states: connectivity, pinned heads, state rules.
    pub status: Duration,
    /// Dead-end trees: flows from demands, heads from their roots.
    pub forest: Duration,
    /// Residuals, pressures, velocities, warnings of the solution.
    pub results: Duration,
    /// Newton iterations done.
    pub iterations: u32,
    /// Numeric factorizations done (fewer than the iterations when chord steps reused a base
    /// case's factor).
    pub factorizations: u32,
}

impl Timings {
    /// Time spent inside the iterations (assembly, factorization, solves).
    pub fn iterating(&self) -> Duration {
        self.assembly + self.factorization + self.solves
    }

    /// Everything but the analysis.
    pub fn solve_total(&self) -> Duration {
        self.preparation + self.iterating() + self.status + self.forest + self.results
    }
}
