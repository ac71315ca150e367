//! Head-loss laws of links as the solver sees them: `h(Q)` and `dh/dQ`, coefficients computed once.

use crate::model::{HeadLossLaw, Link, LinkKind, Model};
use crate::physics::{minor_loss_coefficient, Friction};
use std::f64::consts::PI;

/// Velocity (m/s) that sets each link's smallest derivative; see [`LinkLaw::min_slope`].
pub const REGULARISATION_VELOCITY: f64 = 1e-4;

/// The head-loss law of one link.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LinkLaw {
    friction: Friction,
    /// m in `h_minor = m Q|Q|`.
    minor: f64,
    /// Flow area, m², for velocities.
    pub area: f64,
    /// Smallest slope dh/dQ used in the Newton matrix.
    ///
    /// Hazen–Williams' slope `n r |Q|^(n-1)` vanishes at Q = 0, which would make the gradient
    /// method's matrix singular (Elhay & Simpson 2011, "Dealing with zero flows in solving the
    /// nonlinear equations for water distribution systems", J. Hydraul. Eng. 137(10)). We
    /// regularise the Jacobian only: the slope is floored at its value at the flow of a velocity of
    /// [`REGULARISATION_VELOCITY`]. The residual `h(Q) − ΔH` is always the exact law, so a
    /// converged answer satisfies the unmodified equations; only the step near zero flow changes.
    pub min_slope: f64,
}

impl LinkLaw {
    /// The law of a link of `model`.
    pub fn new(model: &Model, link: &Link) -> Self {
        let nu = model.options.water_properties().kinematic_viscosity;
        match &link.kind {
            LinkKind::Pipe(p) => {
                let friction = match model.options.headloss {
                    HeadLossLaw::HazenWilliams => Friction::hazen_williams(p.length, p.diameter, p.roughness),
                    HeadLossLaw::DarcyWeisbach => Friction::darcy_weisbach(p.length, p.diameter, p.roughness, nu),
                };
                let area = PI * p.diameter * p.diameter / 4.0;
                let mut law =
                    LinkLaw { friction, minor: minor_loss_coefficient(p.minor_loss, p.diameter), area, min_slope: 0.0 };
                law.min_slope = law.evaluate_exact(REGULARISATION_VELOCITY * area).1;
                law
            }
        }
    }

    /// Exact head loss and slope at flow `q`.
    #[inline]
    pub fn evaluate_exact(&self, q: f64) -> (f64, f64) {
        let (h, d) = self.friction.evaluate(q);
        (h + self.minor * q * q.abs(), d + 2.0 * self.minor * q.abs())
    }

    /// Exact head loss and the regularised slope used in the Newton matrix.
    #[inline]
    pub fn evaluate(&self, q: f64) -> (f64, f64) {
        let (h, d) = self.evaluate_exact(q);
        (h, d.max(self.min_slope))
    }
}
