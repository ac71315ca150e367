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
//! The draw is not searched for. Each limit is one solve of the network in which the draw at the
//! hydrant is an unknown and the head at one junction is held at its elevation plus the residual
//! (the bordered Newton step of [`crate::solve::hold`], [`Solver::solve_holding`]): the
//! hydrant's own for (a); for (b) the protected junction expected to reach the residual first
//! (estimated from the pressures without the draw and at a second draw, along the
//! Hazen–Williams power `p(Q) ≈ p(0) − k Q^1.852`). When, at the answer, another protected
//! junction lies below the residual, it is held instead (from there, warm); pressures fall as the
//! draw grows, so the draws only decrease and the junctions held are few (one in most cases).
//! Every hydrant starts from the solution without a fire draw; the hydrants are spread over all
//! cores, each thread with its own solver sharing one analysis of the network structure and
//! one set of [`Conditions`], which no hydrant changes; the model is never copied. With
//! `[pressure_demand]` the other junctions' demands (and the hydrant's own) follow their
//! pressures while the fire draw is fixed. A draw that changes in its last step by more than
//! [`FLOW_TOLERANCE`] is solved again with a hundredfold tighter head tolerance.
//!
//! Where the network has no device states and no relations of pressure (a draw then changes
//! neither which links carry flow nor which junctions the sources reach), each held solve is a
//! light one ([`Solver::solve_holding_light`]): no device logic, no full solution (only the
//! pressures the analysis reads), the border from two sparse forward solves, chord steps on
//! the last factor near the answer, and the draw's step taken along the Hazen–Williams power;
//! each held solve may end once its draw's step is a tenth of [`FLOW_TOLERANCE`] and its heads'
//! change is at most half that of the step before. The hydrant's own limit then needs nothing
//! more (its pressures serve only to estimate which junction the system limit holds first). For the system limit the
//! heads are then known to within ten times their last change: where that error could change the decision
//! (another protected pressure within it of the held one, or of the residual less a tie
//! allowance), the held solve goes on from there to the solver's own tolerances. Elsewhere, and
//! wherever a light solve fails, the general held solve answers.
//!
//! When the held solve cannot answer (a held head that does not follow the draw: a check valve
//! or a regulating valve between them; a draw that would be negative or above [`MAX_DRAW`]),
//! that limit falls back to the search on the draw ([`fire_flows_by_search`], also the reference
//! the held solves are tested against): the root of `p(Q) − p_residual` sought in
//! `x = Q^1.852` (a straight line along one Hazen–Williams main) by the Illinois variant of
//! regula falsi (Dowell & Jarratt, 1971, BIT 11) inside a bracket grown by extrapolation, every
//! solve warm-started from the previous one.

use crate::error::{Element, ModelError, SolveError};
use crate::model::{Model, NodeKind};
use crate::physics::friction::HW_FLOW_EXPONENT;
use crate::solve::{Conditions, HeldHead, LightBase, Solution, SolveOptions, Solver};

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
    /// Whether a limit was found by the search on the draw (always with
    /// [`fire_flows_by_search`]; with [`fire_flows`] only where a held solve cannot answer).
    pub searched: bool,
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

/// The accuracy of every fire flow, m³/s (0.1 L/s, finer than a hydrant flow test reads): each
/// draw is within this of the draw at which its limiting pressure equals the residual.
pub const FLOW_TOLERANCE: f64 = 1e-4;
/// A protected pressure below the residual by less than this at an answer is a tie, not a
/// junction that reaches the residual first, m.
const TIE: f64 = 1e-6;
/// Protected junctions held in turn for one system limit before the search takes over.
const MAX_HELD: usize = 12;

/// How the limits are found.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Method {
    /// One held solve per limit (the search only where it cannot answer).
    Held,
    /// The search on the draw, a whole solve per trial.
    Search,
}

/// The available fire flow at each hydrant (node indices, junctions), in parallel, by held
/// solves (see the [module docs](self)).
pub fn fire_flows(model: &Model, hydrants: &[usize], options: &FireFlowOptions) -> Result<Vec<FireFlow>, SolveError> {
    fire_flows_with(model, hydrants, options, Method::Held)
}

/// The same answers as [`fire_flows`] by the search on the draw alone: some ten solves per limit
/// where [`fire_flows`] takes one. The reference its answers are tested against.
pub fn fire_flows_by_search(
    model: &Model,
    hydrants: &[usize],
    options: &FireFlowOptions,
) -> Result<Vec<FireFlow>, SolveError> {
    fire_flows_with(model, hydrants, options, Method::Search)
}

fn fire_flows_with(
    model: &Model,
    hydrants: &[usize],
    options: &FireFlowOptions,
    method: Method,
) -> Result<Vec<FireFlow>, SolveError> {
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
    // The conditions with the demands scaled once; no hydrant changes them (the search's trial
    // draws go into a worker's own copy, made when it first needs one).
    let mut conditions = Conditions::from_model(model);
    conditions.scale_demands(options.demand_factor).map_err(SolveError::Model)?;
    let mut solver = Solver::new(model)?;
    let solve_options = SolveOptions::from_model(model);
    let without = solver.solve(model, &conditions, &solve_options)?;
    let light = if method == Method::Held { solver.light_base(model, &conditions, &without) } else { None };
    let context = Context {
        light: light.as_ref(),
        model,
        conditions: &conditions,
        without: &without,
        options: *options,
        solve_options: SolveOptions { warm_start: true, ..solve_options },
        method,
    };
    // Chunks of neighbouring hydrants (in the order given), each on one thread: a hydrant starts
    // from its predecessor's solution and draw, whose flows are of the size of its own (about
    // a third fewer iterations than from the case without a draw); the chunks, not the threads,
    // decide every start, so the answers do not depend on the number of threads.
    let chunks: Vec<Result<Vec<FireFlow>, SolveError>> = hydrants
        .par_chunks(CHUNK)
        .map(|chunk| {
            let mut worker = Worker { solver: solver.clone(), conditions: None, last: 0.0, from_base: true };
            chunk.iter().map(|&h| context.hydrant(&mut worker, h)).collect()
        })
        .collect();
    let mut out = Vec::with_capacity(hydrants.len());
    for chunk in chunks {
        out.extend(chunk?);
    }
    Ok(out)
}

/// Hydrants per chunk of [`fire_flows`]: enough to chain warm starts, small enough to spread over
/// the cores.
const CHUNK: usize = 32;

/// What every hydrant of one analysis shares.
struct Context<'a> {
    model: &'a Model,
    conditions: &'a Conditions,
    without: &'a Solution,
    options: FireFlowOptions,
    solve_options: SolveOptions,
    method: Method,
    /// The base case of light held solves, where they serve the network.
    light: Option<&'a LightBase>,
}

/// One thread's own solver, and its copy of the conditions for the search (made on first use).
struct Worker {
    solver: Solver,
    conditions: Option<Conditions>,
    last: f64,
    /// Whether the next light held solve starts from the base case (the solver's last point
    /// is not a light solve's answer).
    from_base: bool,
}

impl Context<'_> {
    /// The draw at `hydrant` that holds the pressure at `node` at the residual, with the pressures
    /// there; `None` when a held solve cannot answer (see the module docs). With `loose`, a light
    /// solve may end once its draw's step is a tenth of [`FLOW_TOLERANCE`], its heads then within
    /// the answer's `error` of the held answer's.
    fn held(&self, worker: &mut Worker, hydrant: usize, node: usize, start: f64, loose: bool) -> Option<Held> {
        if let Some(base) = self.light {
            if let Some(found) = self.held_light(worker, base, hydrant, node, start, loose) {
                return Some(found);
            }
        }
        worker.from_base = true;
        let solver = &mut worker.solver;
        let model = self.model;
        let mut held =
            HeldHead { draw_at: hydrant, node, head: model.nodes()[node].elevation + self.options.residual, start };
        let mut options = self.solve_options;
        for _ in 0..2 {
            let (solution, draw) = match solver.solve_holding(model, self.conditions, &options, held) {
                Ok(solved) => solved,
                // A start from a neighbour's answer far from this one (a trunk main's draw at the
                // end of a small branch): once more from no draw and a cold start.
                Err(_) if held.start != 0.0 => {
                    held.start = 0.0;
                    options.warm_start = false;
                    solver.solve_holding(model, self.conditions, &options, held).ok()?
                }
                Err(_) => return None,
            };
            if !(0.0..=MAX_DRAW).contains(&draw) {
                return None;
            }
            if solver.held_draw_step() <= FLOW_TOLERANCE {
                return Some(Held { draw, pressure: solution.pressure, error: 0.0 });
            }
            options.head_tolerance *= 1e-2;
        }
        None
    }

    /// [`Context::held`] by light held solves, each from the worker's last answer (or from the
    /// base case after anything else).
    fn held_light(
        &self,
        worker: &mut Worker,
        base: &LightBase,
        hydrant: usize,
        node: usize,
        start: f64,
        loose: bool,
    ) -> Option<Held> {
        let model = self.model;
        let mut held =
            HeldHead { draw_at: hydrant, node, head: model.nodes()[node].elevation + self.options.residual, start };
        let mut options = self.solve_options;
        let mut pressure = Vec::with_capacity(model.nodes().len());
        for _ in 0..3 {
            let from_base = worker.from_base;
            let draw_tolerance = if loose { 0.1 * FLOW_TOLERANCE } else { 0.0 };
            match worker.solver.solve_holding_light(
                model,
                base,
                &options,
                held,
                from_base,
                draw_tolerance,
                &mut pressure,
            ) {
                Ok(draw) => {
                    worker.from_base = false;
                    if !(0.0..=MAX_DRAW).contains(&draw) {
                        return None;
                    }
                    if worker.solver.held_draw_step() <= FLOW_TOLERANCE {
                        return Some(Held { draw, pressure, error: worker.solver.held_head_error() });
                    }
                    // Once more from there, to a hundredfold tighter head tolerance.
                    held.start = draw;
                    options.head_tolerance *= 1e-2;
                }
                // A start from a neighbour's answer far from this one: once more from the base
                // case without a draw.
                Err(_) if !from_base => {
                    worker.from_base = true;
                    held.start = 0.0;
                }
                Err(_) => return None,
            }
        }
        None
    }

    fn hydrant(&self, worker: &mut Worker, h: usize) -> Result<FireFlow, SolveError> {
        let model = self.model;
        let without = self.without;
        let id = model.nodes()[h].id.to_string();
        let named = |message: String| SolveError::Model(ModelError::at(Some(Element::Node(id.clone())), None, message));
        if !without.connected[h] {
            return Err(named("no reservoir or tank reaches this hydrant: it has no fire flow".into()));
        }
        let static_pressure = without.pressure[h];
        let residual = self.options.residual;
        let protected: Vec<usize> = (0..model.nodes().len())
            .filter(|&i| {
                i != h
                    && matches!(model.nodes()[i].kind, NodeKind::Junction { .. })
                    && without.connected[i]
                    && without.pressure[i] >= residual
            })
            .collect();
        let lowest = |p: &[f64]| -> (usize, f64) {
            protected.iter().map(|&i| (i, p[i])).fold((usize::MAX, f64::INFINITY), |a, b| if b.1 < a.1 { b } else { a })
        };
        let held = self.method == Method::Held;
        let mut notes = Vec::new();
        let mut searched = false;
        // A draw and the pressures there, beside those without a draw: where the system limit's
        // first held junction is estimated from.
        let mut sample: Option<(f64, Vec<f64>)> = None;
        // The solver starts from its last solution (the previous hydrant's, or the case without
        // a draw for a chunk's first) and the draw from the previous hydrant's.
        let start = worker.last;
        let hydrant_limited = if static_pressure <= residual {
            notes.push("the hydrant is at or below the residual pressure without a fire draw".to_owned());
            0.0
        } else {
            // The hydrant's own limit may end on its draw's tolerance: its pressures only
            // estimate which junction the system limit holds first.
            let fast = if held { self.held(worker, h, h, start, true).filter(|a| a.draw > 0.0) } else { None };
            match fast {
                Some(Held { draw: q, pressure: p, .. }) => {
                    sample = Some((q, p));
                    worker.last = q;
                    q
                }
                None => match self
                    .search(worker, h, static_pressure, &mut searched, &|p: &[f64]| p[h])
                    .map_err(|e| named(format!("hydrant limit: {e}")))?
                {
                    Some((q, _)) => q,
                    None => {
                        return Err(named(format!(
                            "its pressure stays above the residual at every draw up to {MAX_DRAW} m3/s; check the model"
                        )))
                    }
                },
            }
        };
        let (system_limited, limiting_node) = if protected.is_empty() {
            notes.push("no other junction is at or above the residual pressure without a fire draw".to_owned());
            (None, None)
        } else {
            let (first, at_zero) = lowest(&without.pressure);
            if at_zero <= residual {
                // Exactly at the residual already: nothing can be drawn.
                (Some(0.0), Some(first))
            } else {
                let fast = if held { self.held_system(worker, h, &protected, sample) } else { None };
                match fast {
                    Some((q, node)) => (Some(q), Some(node)),
                    None => match self
                        .search(worker, h, at_zero, &mut searched, &|p: &[f64]| lowest(p).1)
                        .map_err(|e| named(format!("system limit: {e}")))?
                    {
                        Some((q, p)) => (Some(q), Some(lowest(&p).0)),
                        None => {
                            notes.push(format!(
                                "no protected junction falls to the residual pressure at any draw up to {MAX_DRAW} m3/s \
                                 (the hydrant is cut off from them, e.g. by a check valve)"
                            ));
                            (None, None)
                        }
                    },
                }
            }
        };
        let limit = match system_limited {
            Some(s) if s < hydrant_limited => Limit::System,
            _ => Limit::Hydrant,
        };
        Ok(FireFlow {
            node: h,
            static_pressure,
            hydrant_limited,
            system_limited,
            limiting_node,
            limit,
            notes,
            searched,
        })
    }

    /// The system limit by held solves: the draw and the protected junction that sets it, or
    /// `None` when the search must answer.
    fn held_system(
        &self,
        worker: &mut Worker,
        h: usize,
        protected: &[usize],
        sample: Option<(f64, Vec<f64>)>,
    ) -> Option<(f64, usize)> {
        let residual = self.options.residual;
        let p0 = &self.without.pressure;
        // The draw at which junction i reaches the residual, along p(Q) = p(0) − k Q^1.852
        // through the sample (q, p), is q ((p(0) − residual) / (p(0) − p))^(1/1.852): of one
        // sample, the junction first there is the one of the least ratio (the power rises
        // monotonically), found without a power per junction. None falls: infinite.
        let ratio = |q: f64, p: &[f64], i: usize| {
            let fall = p0[i] - p[i];
            if fall > 0.0 && q > 0.0 {
                (p0[i] - residual) / fall
            } else {
                f64::INFINITY
            }
        };
        let first_of = |q: f64, p: &[f64], candidates: &mut dyn Iterator<Item = usize>| {
            candidates
                .map(|i| (i, ratio(q, p, i)))
                .filter(|(_, e)| e.is_finite())
                .min_by(|a, b| a.1.total_cmp(&b.1))
                .map(|(i, _)| i)
        };
        let mut node = match &sample {
            Some((q, p)) => first_of(*q, p, &mut protected.iter().copied())?,
            // No draw yet (the hydrant is below the residual): the lowest protected junction.
            None => protected.iter().copied().min_by(|&a, &b| p0[a].total_cmp(&p0[b]))?,
        };
        for _ in 0..MAX_HELD {
            let start = sample.as_ref().map_or(0.0, |s| s.0);
            let mut answer = self.held(worker, h, node, start, true)?;
            if !settled(&answer, node, protected, residual) {
                // Another protected pressure within the answer's error of a tie: the held solve
                // again from there, to the solver's own tolerances.
                answer = self.held(worker, h, node, answer.draw, false)?;
            }
            let Held { draw: q, pressure: p, .. } = answer;
            let (lowest, at) =
                protected.iter().map(|&i| (i, p[i])).fold((node, p[node]), |a, b| if b.1 < a.1 { b } else { a });
            if at >= residual - TIE {
                return Some((q, lowest));
            }
            // Another junction reached the residual at a smaller draw: hold the first of those.
            node = first_of(q, &p, &mut protected.iter().copied().filter(|&i| p[i] < residual - TIE))?;
        }
        None
    }

    /// The search on the draw for the root of `measure(pressures) = residual`, from `at_zero`
    /// without a draw, in the worker's own conditions.
    fn search(
        &self,
        worker: &mut Worker,
        h: usize,
        at_zero: f64,
        searched: &mut bool,
        measure: &dyn Fn(&[f64]) -> f64,
    ) -> Result<Option<(f64, Vec<f64>)>, SolveError> {
        *searched = true;
        worker.from_base = true;
        let conditions = worker.conditions.get_or_insert_with(|| self.conditions.clone());
        let mut draw =
            Draw { model: self.model, conditions, solver: &mut worker.solver, options: self.solve_options, hydrant: h };
        draw.root(at_zero, self.options.residual, measure)
    }
}

/// A held solve's answer: the draw, the pressure heads there, and how far those heads may be
/// from the held answer's (m; zero when the solve ended on the solver's own tolerances).
struct Held {
    draw: f64,
    pressure: Vec<f64>,
    error: f64,
}

/// Whether a held answer for the system limit at `node` decides it as the exact answer would:
/// every other protected pressure is either clearly above the held one (then `node` sets the
/// limit) or one of them clearly below the residual less [`TIE`] (then another junction is held
/// next), each by more than the answer's head error.
fn settled(answer: &Held, node: usize, protected: &[usize], residual: f64) -> bool {
    let (p, e) = (&answer.pressure, answer.error);
    if e == 0.0 {
        return true;
    }
    let others = protected.iter().filter(|&&i| i != node).map(|&i| p[i]).fold(f64::INFINITY, f64::min);
    others - e > p[node] + e || others + e < residual - TIE
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

#[cfg(test)]
mod tests {
    use super::*;

    fn answer(pressure: Vec<f64>, error: f64) -> Held {
        Held { draw: 0.1, pressure, error }
    }

    #[test]
    fn a_loose_system_answer_is_settled_only_when_its_error_cannot_change_the_decision() {
        // Junction 0 held at the residual 14 m; 1 and 2 protected; 3 not protected.
        let protected = [0, 1, 2];
        // Exact answers always settle.
        assert!(settled(&answer(vec![14.0, 14.0, 30.0, 0.0], 0.0), 0, &protected, 14.0));
        // The others clearly above the held junction: it sets the limit.
        assert!(settled(&answer(vec![14.0, 14.1, 30.0, 0.0], 1e-3), 0, &protected, 14.0));
        // One clearly below the residual: another junction is held next.
        assert!(settled(&answer(vec![14.0, 13.9, 30.0, 0.0], 1e-3), 0, &protected, 14.0));
        // One within the error of the held pressure, above or below it: not settled.
        assert!(!settled(&answer(vec![14.0, 14.001, 30.0, 0.0], 1e-3), 0, &protected, 14.0));
        assert!(!settled(&answer(vec![14.0, 13.9995, 30.0, 0.0], 1e-3), 0, &protected, 14.0));
        // A junction that is not protected does not count.
        assert!(settled(&answer(vec![14.0, 14.1, 30.0, 14.0], 1e-3), 0, &protected, 14.0));
    }
}
