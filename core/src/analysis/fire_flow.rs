//! Available fire flow: how much water a hydrant can give while the network holds a residual
//! pressure.
//!
//! For a hydrant junction `h`, with every junction drawing its demand times a factor, the extra
//! draw `Q` at `h` (on top of its own demand) is raised until
//!
//! * (a) `hydrant_limited`: the pressure at `h` itself falls to the residual; and, on its own,
//! * (b) `system_limited`: the lowest pressure among the *protected* junctions falls to the
//!   residual. The protected junctions are all junctions but `h` whose pressure without the fire
//!   draw is at or above the residual (a junction already below it cannot be protected by
//!   limiting the draw).
//!
//! The available fire flow is the smaller of the two; `limit` says which. A hydrant already below
//! the residual without a fire draw gets (a) = 0 and a note; with no protected junction, (b) does
//! not exist. A residual of 20 psi (about 140 kPa) is common practice in North America.
//!
//! # Method
//! Pressures fall as the draw grows. Along one main with the Hazen–Williams law the pressure at
//! the draw is `p_s − R Q^1.852`, a straight line in `x = Q^1.852`; the root of
//! `p(Q) − p_residual` is therefore sought in `x`, by the Illinois variant of regula falsi
//! (Dowell & Jarratt, 1971, BIT 11) inside a bracket grown by extrapolation. On a single main the
//! first secant step is exact; on looped networks a few solves suffice. Every solve starts from
//! the previous one (a warm start), and hydrants are spread over all cores, each thread with its
//! own [`Conditions`] (only the hydrant's fixed draw changes) and its own solver sharing one
//! analysis of the network structure; the model is never copied. With `[pressure_demand]` the other
//! junctions' demands (and the hydrant's own) follow their pressures while the fire draw is fixed.

use crate::error::{Element, ModelError, SolveError};
use crate::model::{Model, NodeKind};
use crate::physics::friction::HW_FLOW_EXPONENT;
use crate::solve::{Conditions, SolveOptions, Solver};

/// What limits the available fire flow.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Limit {
    /// The hydrant's own pressure reaches the residual first.
    Hydrant,
    /// A protected junction's pressure reaches the residual first.
    System,
}

impl Limit {
    /// The name used in reports.
    pub fn label(self) -> &'static str {
        match self {
            Limit::Hydrant => "hydrant",
            Limit::System => "system",
        }
    }
}

/// Options of a fire-flow analysis.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct FireFlowOptions {
    /// Residual pressure head to hold, m.
    pub residual: f64,
    /// Factor on every junction demand (not on outlets or leakage).
    pub demand_factor: f64,
}

/// The fire flow available at one hydrant (SI).
#[derive(Clone, Debug, PartialEq)]
pub struct FireFlow {
    /// The hydrant's node index.
    pub node: usize,
    /// Pressure head at the hydrant with no fire draw, m.
    pub static_pressure: f64,
    /// Extra draw at which the hydrant's pressure falls to the residual, m³/s.
    pub hydrant_limited: f64,
    /// Extra draw at which the lowest protected pressure falls to the residual, m³/s (`None`
    /// when no junction is protected).
    pub system_limited: Option<f64>,
    /// The protected junction that sets `system_limited`.
    pub limiting_node: Option<usize>,
    /// Which of the two is smaller.
    pub limit: Limit,
    /// Things the reader should know about this hydrant.
    pub notes: Vec<String>,
}

impl FireFlow {
    /// The available fire flow: the smaller of the two limits, m³/s.
    pub fn available(&self) -> f64 {
        match self.system_limited {
            Some(s) => s.min(self.hydrant_limited),
            None => self.hydrant_limited,
        }
    }
}

/// Pressure differences below this settle a root, m (far below what a fire-flow test reads).
const PRESSURE_TOLERANCE: f64 = 1e-7;
/// The largest extra draw tried, m³/s: a hundred times the largest fire flows asked of a
/// hydrant. A limit not reached below it does not bind.
pub const MAX_DRAW: f64 = 100.0;
/// Solves allowed for one root.
const MAX_SOLVES: usize = 60;

/// The available fire flow at each hydrant (node indices, junctions), in parallel.
pub fn fire_flows(model: &Model, hydrants: &[usize], options: &FireFlowOptions) -> Result<Vec<FireFlow>, SolveError> {
    use rayon::prelude::*;
    let check = |key: &str, v: f64, ok: bool| {
        if ok {
            Ok(())
        } else {
            Err(SolveError::Model(ModelError::at(None, Some(key), format!("is not valid: {v}"))))
        }
    };
    check("residual", options.residual, options.residual.is_finite())?;
    check("demand_factor", options.demand_factor, options.demand_factor.is_finite() && options.demand_factor >= 0.0)?;
    for &h in hydrants {
        let node = model.nodes().get(h).ok_or_else(|| SolveError::Model(ModelError::new(format!("no node {h}"))))?;
        if !matches!(node.kind, NodeKind::Junction { .. }) {
            return Err(SolveError::Model(ModelError::at(
                Some(Element::Node(node.id.to_string())),
                None,
                format!("a hydrant must be a junction; this node is a {}", node.kind.label()),
            )));
        }
    }
    // The conditions with the demands scaled once; every hydrant changes only its own demand.
    let mut conditions = Conditions::from_model(model);
    conditions.scale_demands(options.demand_factor).map_err(SolveError::Model)?;
    let mut solver = Solver::new(model)?;
    let solve_options = SolveOptions::from_model(model);
    let without = solver.solve(model, &conditions, &solve_options)?;
    let (solver, conditions) = (&solver, &conditions);
    hydrants
        .par_iter()
        .map_init(
            || (conditions.clone(), solver.clone()),
            |(conditions, solver), &h| one_hydrant(model, conditions, solver, &without, h, options, &solve_options),
        )
        .collect()
}

/// The pressure heads of `model` with extra draw `q` at `hydrant`.
struct Draw<'a> {
    model: &'a Model,
    conditions: &'a mut Conditions,
    solver: &'a mut Solver,
    options: SolveOptions,
    hydrant: usize,
}

impl Draw<'_> {
    /// The fire draw is a fixed draw on top of the hydrant's demand: it does not follow the
    /// hydrant's pressure, whereas the demand may (`[pressure_demand]`).
    fn pressures(&mut self, q: f64) -> Result<Vec<f64>, SolveError> {
        self.conditions.set_fixed_draw(self.model, self.hydrant, q).map_err(SolveError::Model)?;
        let solved = self.solver.solve(self.model, self.conditions, &self.options);
        self.conditions.set_fixed_draw(self.model, self.hydrant, 0.0).map_err(SolveError::Model)?;
        Ok(solved?.pressure)
    }

    /// The extra draw at which `measure(pressures)` falls to `target`, given its value `at_zero`
    /// (> target) without a draw. Returns the draw and the pressures there, or `None` when no
    /// draw up to [`MAX_DRAW`] gets it there.
    fn root(
        &mut self,
        at_zero: f64,
        target: f64,
        measure: &dyn Fn(&[f64]) -> f64,
    ) -> Result<Option<(f64, Vec<f64>)>, SolveError> {
        let x_of = |q: f64| q.powf(HW_FLOW_EXPONENT);
        let q_of = |x: f64| x.max(0.0).powf(1.0 / HW_FLOW_EXPONENT);
        // Bracket [lo, hi] in x with g(lo) > 0 > g(hi), g = measure − target.
        let (mut lo, mut g_lo) = (0.0, at_zero - target);
        let scale = self.conditions.demands().iter().map(|d| d.abs()).sum::<f64>().max(1e-2);
        let mut x = x_of(0.1 * scale);
        let mut hi = None;
        let x_max = x_of(MAX_DRAW);
        for _ in 0..MAX_SOLVES {
            let p = self.pressures(q_of(x))?;
            let g = measure(&p) - target;
            if g.abs() <= PRESSURE_TOLERANCE {
                return Ok(Some((q_of(x), p)));
            }
            if g < 0.0 {
                hi = Some((x, g));
                break;
            }
            if x >= x_max {
                return Ok(None);
            }
            // Still above: extrapolate along the secant from the last point above.
            let next = if g_lo > g { x + (x - lo) * g / (g_lo - g) } else { 2.0 * x };
            lo = x;
            g_lo = g;
            x = next.clamp(1.1 * x, 100.0 * x).min(x_max);
        }
        let Some((mut hi_x, mut g_hi)) = hi else {
            return Err(SolveError::Model(ModelError::new("the residual pressure is not reached by any draw tried")));
        };
        // Illinois iterations inside the bracket.
        let mut side = 0i8;
        for _ in 0..MAX_SOLVES {
            let x = (lo * g_hi - hi_x * g_lo) / (g_hi - g_lo);
            let p = self.pressures(q_of(x))?;
            let g = measure(&p) - target;
            if g.abs() <= PRESSURE_TOLERANCE || (hi_x - lo) <= 1e-13 * hi_x {
                return Ok(Some((q_of(x), p)));
            }
            if g > 0.0 {
                lo = x;
                g_lo = g;
                if side == 1 {
                    g_hi *= 0.5;
                }
                side = 1;
            } else {
                hi_x = x;
                g_hi = g;
                if side == -1 {
                    g_lo *= 0.5;
                }
                side = -1;
            }
        }
        Err(SolveError::Model(ModelError::new("the search for the residual pressure did not settle")))
    }
}

fn one_hydrant(
    model: &Model,
    conditions: &mut Conditions,
    solver: &mut Solver,
    without: &crate::solve::Solution,
    h: usize,
    options: &FireFlowOptions,
    solve_options: &SolveOptions,
) -> Result<FireFlow, SolveError> {
    let id = model.nodes()[h].id.to_string();
    let named = |message: String| SolveError::Model(ModelError::at(Some(Element::Node(id.clone())), None, message));
    if !without.connected[h] {
        return Err(named("no reservoir or tank reaches this hydrant: it has no fire flow".into()));
    }
    let static_pressure = without.pressure[h];
    let residual = options.residual;
    let protected: Vec<usize> = (0..model.nodes().len())
        .filter(|&i| {
            i != h
                && matches!(model.nodes()[i].kind, NodeKind::Junction { .. })
                && without.connected[i]
                && without.pressure[i] >= residual
        })
        .collect();
    let mut notes = Vec::new();
    let mut draw =
        Draw { model, conditions, solver, options: SolveOptions { warm_start: true, ..*solve_options }, hydrant: h };
    let hydrant_limited = if static_pressure <= residual {
        notes.push("the hydrant is at or below the residual pressure without a fire draw".to_owned());
        0.0
    } else {
        match draw
            .root(static_pressure, residual, &|p: &[f64]| p[h])
            .map_err(|e| named(format!("hydrant limit: {e}")))?
        {
            Some((q, _)) => q,
            None => {
                return Err(named(format!(
                    "its pressure stays above the residual at every draw up to {MAX_DRAW} m3/s; check the model"
                )))
            }
        }
    };
    let lowest = |p: &[f64]| -> (usize, f64) {
        protected.iter().map(|&i| (i, p[i])).fold((usize::MAX, f64::INFINITY), |a, b| if b.1 < a.1 { b } else { a })
    };
    let (system_limited, limiting_node) = if protected.is_empty() {
        notes.push("no other junction is at or above the residual pressure without a fire draw".to_owned());
        (None, None)
    } else {
        let at_zero = lowest(&without.pressure).1;
        if at_zero <= residual {
            // Exactly at the residual already: nothing can be drawn.
            (Some(0.0), Some(lowest(&without.pressure).0))
        } else {
            match draw
                .root(at_zero, residual, &|p: &[f64]| lowest(p).1)
                .map_err(|e| named(format!("system limit: {e}")))?
            {
                Some((q, p)) => (Some(q), Some(lowest(&p).0)),
                None => {
                    notes.push(format!(
                        "no protected junction falls to the residual pressure at any draw up to {MAX_DRAW} m3/s (the \
                         hydrant is cut off from them, e.g. by a check valve)"
                    ));
                    (None, None)
                }
            }
        }
    };
    let limit = match system_limited {
        Some(s) if s < hydrant_limited => Limit::System,
        _ => Limit::Hydrant,
    };
    Ok(FireFlow { node: h, static_pressure, hydrant_limited, system_limited, limiting_node, limit, notes })
}
