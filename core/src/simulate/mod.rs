//! Extended-period simulation: the network over hours and days, with demand patterns, tanks
//! that fill and drain, controls, and pump energy.
//!
//! Entry points: [`simulate`] runs a model's `[simulation]`; [`simulate_with`] takes
//! [`SimulateOptions`] and a progress callback. The result is a [`Run`].
//!
//! # The method
//! The state is the volume `V` stored in each tank. Between events every outside input
//! (multipliers of patterns, control settings) is constant, and the tanks obey
//! `dV/dt = Q_in(V)`, where `Q_in` is the net inflow that a hydraulic snapshot solve gives with
//! each tank's head fixed at `floor + level(V)`. This system is integrated with the
//! Bogacki–Shampine pair (Bogacki & Shampine 1989, "A 3(2) pair of Runge–Kutta formulas", Appl.
//! Math. Lett. 2(4)): a third-order explicit Runge–Kutta method with an embedded second-order
//! estimate of the local error, using the last stage of a step as the first of the next (three
//! hydraulic solves per step). Every stage is one hydraulic solve with the same [`Solver`]
//! (its symbolic analysis done once) warm-started from the previous solution.
//!
//! Error: the local error of a step is `O(h⁴)` and the global error `O(h³)` (halving every step
//! divides the error at a fixed time by about 8; `tests/simulate.rs` measures it). Each step's
//! error estimate — the difference between the third- and second-order results, an upper bound
//! for the third-order result that is kept — is held below the level tolerance
//! (`[simulation] level_tolerance`, default 1 mm per step) in every tank by the usual step-size
//! rule `h ← h · clamp(0.9 (tol/err)^(1/3), 0.2, 5)`; a rejected step is retried shorter. Steps
//! never exceed the hydraulic step.
//!
//! # Events
//! Steps land exactly on every pattern boundary, reporting time, clock-time and elapsed-time
//! control instant, and the end. Events that depend on the state — a tank reaching its highest
//! or lowest level, a level or pressure condition of a control becoming true — are located by
//! root finding on the computed trajectory: when such a value changes sign over a step, the
//! Illinois variant of the false-position method finds the step length at which it has just
//! crossed (value within 1e-6 m of its threshold, or the bracket shorter than 1 ms), each trial
//! being a full Runge–Kutta step from the start of the interval. The run then continues from the
//! event with the event's consequences applied.
//!
//! # Volume balance
//! The volumes supplied by reservoirs and delivered to demands are integrated with the same
//! weights as the tank volumes, so `supplied = delivered + change in storage` holds to the mass
//! balance of the individual solves (round-off).

pub mod controls;
pub mod network;
pub mod results;

use crate::error::{printable, Element, ModelError, SolveError};
use crate::model::time::{Action, SimulationSettings};
use crate::model::{LinkStatus, Model};
use crate::solve::Solution;
use network::{LinkSettings, Network, Stage, TankMode};
pub use results::{Balance, Event, EventKind, PumpSummary, Run, Snapshot, Statistics, TankSummary, WithoutWater};
use std::fmt;

#[cfg(doc)]
use crate::solve::Solver;

/// Options of a run beyond the model's `[simulation]`.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct SimulateOptions {
    /// Take every step this long (s), with no error control (steps still land on events and
    /// scheduled times). For studying the integrator; `None`: adaptive steps.
    pub fixed_step: Option<f64>,
    /// Replaces the model's level tolerance, m.
    pub level_tolerance: Option<f64>,
}

/// A run could not be completed.
#[derive(Clone, Debug, PartialEq)]
#[non_exhaustive]
pub enum SimulateError {
    /// The model cannot be simulated as it is.
    Model(ModelError),
    /// A hydraulic solve failed.
    Solve {
        /// Elapsed time, s.
        time: f64,
        /// What the solver said.
        error: SolveError,
    },
    /// Closing and reopening links at a full or empty tank did not settle.
    TankLimits {
        /// Elapsed time, s.
        time: f64,
        /// The tank.
        tank: String,
    },
    /// The error control asked for a step shorter than [`MIN_STEP`].
    StepTooSmall {
        /// Elapsed time, s.
        time: f64,
    },
    /// The sink of [`simulate_streaming`] could not take a reported state.
    Output {
        /// Elapsed time of the state, s.
        time: f64,
        /// What the sink said.
        message: String,
    },
}

impl From<ModelError> for SimulateError {
    fn from(e: ModelError) -> Self {
        SimulateError::Model(e)
    }
}

impl From<SolveError> for SimulateError {
    fn from(e: SolveError) -> Self {
        match e {
            SolveError::Model(m) => SimulateError::Model(m),
            error => SimulateError::Solve { time: 0.0, error },
        }
    }
}

impl fmt::Display for SimulateError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let at = |t: f64| format!("at {} into the run", crate::model::time::format_duration(t.round()));
        match self {
            SimulateError::Model(e) => e.fmt(f),
            SimulateError::Solve { time, error } => write!(f, "{}: {error}", at(*time)),
            SimulateError::TankLimits { time, tank } => write!(
                f,
                "{}: the links of tank '{}' kept opening and closing at its level limit",
                at(*time),
                printable(tank)
            ),
            SimulateError::StepTooSmall { time } => write!(
                f,
                "{}: the tank levels change too abruptly for the level tolerance (step below {MIN_STEP} s); \
                 raise [simulation] level_tolerance or check the model",
                at(*time)
            ),
            SimulateError::Output { time, message } => write!(f, "{}: {message}", at(*time)),
        }
    }
}

impl std::error::Error for SimulateError {}

/// Shortest step the error control may ask for, s.
pub const MIN_STEP: f64 = 1e-3;
/// An event is located when its value is within this of its threshold, m.
pub const EVENT_TOLERANCE: f64 = 1e-6;
/// Or when it is bracketed within this time, s.
pub const EVENT_TIME_TOLERANCE: f64 = 1e-3;
/// A control that fired acts again only after its condition value fell below `−REARM` (m), so
/// that round-off around a threshold cannot fire it twice.
pub const REARM: f64 = 10.0 * EVENT_TOLERANCE;
/// A tank within this of a limit, with flow towards it, is at the limit, m.
const LIMIT_EPS: f64 = 1e-6;
/// Flows below this (m³/s) do not push a tank into a limit.
const FLOW_EPS: f64 = 1e-10;
/// First trial step of an adaptive run, s.
const FIRST_STEP: f64 = 300.0;

// Bogacki–Shampine 3(2): nodes 0, 1/2, 3/4, 1; weights of the third-order result; error weights
// (third-order minus second-order result).
const B: [f64; 3] = [2.0 / 9.0, 1.0 / 3.0, 4.0 / 9.0];
const E: [f64; 4] = [-5.0 / 72.0, 1.0 / 12.0, 1.0 / 9.0, -1.0 / 8.0];

/// Runs the model's `[simulation]`.
pub fn simulate(model: &Model) -> Result<Run, SimulateError> {
    simulate_with(model, &SimulateOptions::default(), &mut |_| {})
}

/// Something that follows a run step by step (the water-quality transport does).
pub trait StepObserver {
    /// The run moved from elapsed time `t0` to `t1` (s); `start` is the hydraulic solution in
    /// force from `t0` (after that instant's events) and `end` the one reached at `t1` (before
    /// that instant's events). Intervals come in order and cover the run.
    fn interval(&mut self, t0: f64, t1: f64, start: &Solution, end: &Solution);
}

/// Like [`simulate_with`], telling `observer` about every step.
pub fn simulate_observed(
    model: &Model,
    options: &SimulateOptions,
    progress: &mut dyn FnMut(f64),
    observer: &mut dyn StepObserver,
) -> Result<Run, SimulateError> {
    let sim = simulation_settings(model)?;
    check_options(options)?;
    let mut engine = Engine::new(model, sim, *options)?;
    engine.observer = Some(observer);
    engine.run(progress, None)
}

fn simulation_settings(model: &Model) -> Result<SimulationSettings, SimulateError> {
    Ok(model.time.simulation.ok_or_else(|| {
        ModelError::at(
            Some(Element::Table("simulation".into())),
            None,
            "the model has no [simulation] table; add one with at least duration = \"24h\"",
        )
    })?)
}

fn check_options(options: &SimulateOptions) -> Result<(), SimulateError> {
    if let Some(h) = options.fixed_step {
        if !(h.is_finite() && h > 0.0) {
            return Err(ModelError::new(format!("the fixed step must be longer than zero, found {h}")).into());
        }
    }
    Ok(())
}

/// Runs the model's `[simulation]` with options; `progress` is told the fraction done after
/// every step.
pub fn simulate_with(
    model: &Model,
    options: &SimulateOptions,
    progress: &mut dyn FnMut(f64),
) -> Result<Run, SimulateError> {
    run_engine(model, options, progress, None)
}

/// Where [`simulate_streaming`] sends each reported state as the run makes it. An error (a
/// message, say "cannot write series.csv: disk full") stops the run with
/// [`SimulateError::Output`].
pub type SeriesSink<'s> = dyn FnMut(&Snapshot) -> Result<(), String> + 's;

/// Runs the model's `[simulation]` and hands every reported state to `sink` in time order as
/// soon as it is final, instead of keeping the series: memory stays that of one or two
/// snapshots however long the run. The returned [`Run`] has everything but its `series`, which
/// is empty. `sink` sees exactly the snapshots [`simulate_with`] would have kept, in order.
pub fn simulate_streaming(
    model: &Model,
    options: &SimulateOptions,
    progress: &mut dyn FnMut(f64),
    sink: &mut SeriesSink<'_>,
) -> Result<Run, SimulateError> {
    run_engine(model, options, progress, Some(sink))
}

/// [`simulate_streaming`] telling `observer` about every step (the water-quality transport
/// streams its values beside the hydraulics this way).
pub fn simulate_streaming_observed(
    model: &Model,
    options: &SimulateOptions,
    progress: &mut dyn FnMut(f64),
    observer: &mut dyn StepObserver,
    sink: &mut SeriesSink<'_>,
) -> Result<Run, SimulateError> {
    let sim = simulation_settings(model)?;
    check_options(options)?;
    let mut engine = Engine::new(model, sim, *options)?;
    engine.observer = Some(observer);
    engine.run(progress, Some(sink))
}

fn run_engine(
    model: &Model,
    options: &SimulateOptions,
    progress: &mut dyn FnMut(f64),
    sink: Option<&mut SeriesSink<'_>>,
) -> Result<Run, SimulateError> {
    let sim = model.time.simulation.ok_or_else(|| {
        ModelError::at(
            Some(Element::Table("simulation".into())),
            None,
            "the model has no [simulation] table; add one with at least duration = \"24h\"",
        )
    })?;
    if let Some(h) = options.fixed_step {
        if !(h.is_finite() && h > 0.0) {
            return Err(ModelError::new(format!("the fixed step must be longer than zero, found {h}")).into());
        }
    }
    Engine::new(model, sim, *options)?.run(progress, sink)
}

/// Volumes and energies over one step (or the run).
#[derive(Clone, Debug, Default)]
struct Sums {
    supplied: f64,
    delivered: f64,
    unsupplied: f64,
    leaked: f64,
    outlets: f64,
    /// Per pump: seconds running, m³ pumped, shaft J, hydraulic J.
    pumps: Vec<[f64; 4]>,
}

impl Sums {
    fn zero(pumps: usize) -> Self {
        Sums { pumps: vec![[0.0; 4]; pumps], ..Sums::default() }
    }

    /// `h · Σ w_i stage_i`.
    fn quadrature(h: f64, stages: [&Stage; 3]) -> Self {
        let mut s = Sums::zero(stages[0].pumps.len());
        for (w, st) in B.iter().zip(stages) {
            let hw = h * w;
            s.supplied += hw * st.supplied;
            s.delivered += hw * st.delivered;
            s.unsupplied += hw * st.unsupplied;
            s.leaked += hw * st.leaked;
            s.outlets += hw * st.outlets;
            for (acc, p) in s.pumps.iter_mut().zip(&st.pumps) {
                acc[0] += hw * p[0];
                acc[1] += hw * p[1];
                acc[2] += hw * p[2];
                acc[3] += hw * p[3];
            }
        }
        s
    }

    fn add(&mut self, o: &Sums) {
        self.supplied += o.supplied;
        self.delivered += o.delivered;
        self.unsupplied += o.unsupplied;
        self.leaked += o.leaked;
        self.outlets += o.outlets;
        for (a, b) in self.pumps.iter_mut().zip(&o.pumps) {
            for i in 0..4 {
                a[i] += b[i];
            }
        }
    }
}

/// One Runge–Kutta step tried from the current point.
struct Trial {
    h: f64,
    volumes: Vec<f64>,
    /// Largest estimated local level error over the tolerance.
    err: f64,
    end: Stage,
    sums: Sums,
}

/// Something whose sign change inside a step is an event.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Watch {
    Full(usize),
    Empty(usize),
    Control(usize),
}

struct Engine<'m> {
    model: &'m Model,
    sim: SimulationSettings,
    options: SimulateOptions,
    tolerance: f64,
    net: Network,
    settings: LinkSettings,
    t: f64,
    volumes: Vec<f64>,
    k1: Stage,
    /// Each control's condition value at the current point (after its events), instants off.
    g: Vec<f64>,
    /// Whether each control may fire: true at the start, false once it fires, true again when
    /// its condition has been false by more than [`REARM`].
    armed: Vec<bool>,
    totals: Sums,
    cost: Vec<f64>,
    peak_power: Vec<f64>,
    starts: Vec<u32>,
    running: Vec<bool>,
    tank_summary: Vec<TankSummary>,
    lowest: Option<(usize, f64, f64)>,
    node_min: Vec<f64>,
    /// Controls that changed a link at the current instant, with the link's settings before.
    acted_here: Vec<(usize, (LinkStatus, u64, u64, bool))>,
    /// Per node: when it was first without water (s; NaN: never) and for how long in all (s).
    dry_since: Vec<f64>,
    dry_time: Vec<f64>,
    events: Vec<Event>,
    series: Vec<Snapshot>,
    /// The last reported state of a streamed run, not yet handed on.
    pending: Option<Snapshot>,
    stats: Statistics,
    start_volume: f64,
    observer: Option<&'m mut dyn StepObserver>,
}

impl<'m> Engine<'m> {
    fn new(model: &'m Model, sim: SimulationSettings, options: SimulateOptions) -> Result<Self, SimulateError> {
        let mut net = Network::new(model)?;
        let settings = LinkSettings::from_model(model);
        let mut volumes = Vec::new();
        let mut tank_summary = Vec::new();
        for t in &net.tanks {
            let crate::model::NodeKind::Tank(tank) = &model.nodes()[t.node].kind else { unreachable!("a tank") };
            volumes.push(t.volume(tank.level));
            tank_summary.push(TankSummary {
                node: t.node,
                min_level: (tank.level, 0.0),
                max_level: (tank.level, 0.0),
                start_level: tank.level,
                end_level: tank.level,
                time_full: 0.0,
                time_empty: 0.0,
            });
        }
        net.configure(model, &settings, sim.start_clock)?;
        let k1 = net.evaluate(model, &volumes, &settings, 0.0)?;
        let n_pumps = net.pumps.len();
        let start_volume = volumes.iter().sum();
        Ok(Engine {
            model,
            sim,
            options,
            tolerance: options.level_tolerance.unwrap_or(sim.level_tolerance),
            net,
            settings,
            t: 0.0,
            volumes,
            k1,
            g: vec![f64::NEG_INFINITY; model.time.controls.len()],
            armed: vec![true; model.time.controls.len()],
            totals: Sums::zero(n_pumps),
            cost: vec![0.0; n_pumps],
            peak_power: vec![0.0; n_pumps],
            starts: vec![0; n_pumps],
            running: vec![false; n_pumps],
            tank_summary,
            lowest: None,
            node_min: vec![f64::NAN; model.nodes().len()],
            acted_here: Vec::new(),
            dry_since: vec![f64::NAN; model.nodes().len()],
            dry_time: vec![0.0; model.nodes().len()],
            events: Vec::new(),
            series: Vec::new(),
            pending: None,
            stats: Statistics::default(),
            start_volume,
            observer: None,
        })
    }

    fn run(
        mut self,
        progress: &mut dyn FnMut(f64),
        mut sink: Option<&mut SeriesSink<'_>>,
    ) -> Result<Run, SimulateError> {
        let duration = self.sim.duration;
        self.act()?;
        for (i, r) in self.running.iter_mut().enumerate() {
            *r = self.k1.pumps[i][0] > 0.0;
        }
        self.observe();
        self.record(&mut sink)?;
        let mut h_try = self.options.fixed_step.unwrap_or(FIRST_STEP.min(self.sim.hydraulic_step));
        while self.t < duration {
            let target = self.next_scheduled();
            let mut h = self.options.fixed_step.unwrap_or(h_try).min(self.sim.hydraulic_step);
            if self.t + h >= target - EVENT_TIME_TOLERANCE * 1e-3 {
                h = target - self.t;
            }
            let trial = loop {
                let trial = self.step(h)?;
                if self.options.fixed_step.is_some() || trial.err <= 1.0 {
                    break trial;
                }
                self.stats.rejected += 1;
                h *= (0.9 * trial.err.powf(-1.0 / 3.0)).clamp(0.2, 0.9);
                if h < MIN_STEP {
                    return Err(SimulateError::StepTooSmall { time: self.t });
                }
            };
            if self.options.fixed_step.is_none() {
                let grow = if trial.err > 0.0 { 0.9 * trial.err.powf(-1.0 / 3.0) } else { 5.0 };
                h_try = trial.h * grow.clamp(0.2, 5.0);
            }
            let crossed = self.crossings(&trial);
            if !crossed.is_empty() {
                let trial = self.locate(trial, crossed)?;
                let t_new = self.t + trial.h;
                self.accept(trial, t_new);
            } else {
                let scheduled = trial.h == target - self.t;
                let t_new = if scheduled { target } else { self.t + trial.h };
                self.accept(trial, t_new);
                if scheduled {
                    self.net.configure(self.model, &self.settings, self.clock())?;
                    self.k1 = self.net.evaluate(self.model, &self.volumes, &self.settings, self.t)?;
                }
            }
            self.act()?;
            self.observe();
            if self.is_report_time() {
                self.record(&mut sink)?;
            }
            progress(self.t / duration);
        }
        if let (Some(sink), Some(last)) = (sink, self.pending.take()) {
            sink(&last).map_err(|message| SimulateError::Output { time: last.time, message })?;
        }
        Ok(self.finish())
    }

    fn clock(&self) -> f64 {
        self.sim.start_clock + self.t
    }

    fn price(&self) -> f64 {
        let e = &self.model.time.energy;
        e.price * e.tariff.map_or(1.0, |p| self.model.time.patterns[p].at(self.clock()))
    }

    /// The next time a step must land on: a report, a pattern boundary, a control instant, the end.
    fn next_scheduled(&self) -> f64 {
        let t = self.t;
        let ri = self.sim.report_interval;
        let mut next = self.sim.duration;
        next = next.min(((t / ri + 1e-9).floor() + 1.0) * ri);
        let clock = self.clock();
        for p in &self.model.time.patterns {
            next = next.min(p.next_boundary(clock + 1e-9) - self.sim.start_clock);
        }
        for c in &self.model.time.controls {
            next = next.min(controls::next_instant(&c.when, t, self.sim.start_clock));
        }
        next
    }

    fn is_report_time(&self) -> bool {
        let ri = self.sim.report_interval;
        let k = (self.t / ri).round();
        (self.t - k * ri).abs() < 1e-6 || self.t >= self.sim.duration
    }

    /// One Bogacki–Shampine step of length `h` from the current point.
    fn step(&mut self, h: f64) -> Result<Trial, SimulateError> {
        let y = self.volumes.clone();
        let q1 = self.k1.tank_inflow.clone();
        let combine = |weights: &[(f64, &[f64])]| -> Vec<f64> {
            y.iter().enumerate().map(|(j, &v)| v + weights.iter().map(|(w, q)| w * q[j]).sum::<f64>()).collect()
        };
        let y2 = combine(&[(0.5 * h, &q1)]);
        let s2 = self.net.evaluate(self.model, &y2, &self.settings, self.t + 0.5 * h)?;
        let y3 = combine(&[(0.75 * h, &s2.tank_inflow)]);
        let s3 = self.net.evaluate(self.model, &y3, &self.settings, self.t + 0.75 * h)?;
        let y4 = combine(&[(B[0] * h, &q1), (B[1] * h, &s2.tank_inflow), (B[2] * h, &s3.tank_inflow)]);
        let s4 = self.net.evaluate(self.model, &y4, &self.settings, self.t + h)?;
        let mut err: f64 = 0.0;
        for (j, tank) in self.net.tanks.iter().enumerate() {
            let e = h * (E[0] * q1[j] + E[1] * s2.tank_inflow[j] + E[2] * s3.tank_inflow[j] + E[3] * s4.tank_inflow[j]);
            let area = tank.area(tank.level(y4[j]));
            err = err.max((e / area).abs() / self.tolerance);
        }
        let sums = Sums::quadrature(h, [&self.k1, &s2, &s3]);
        Ok(Trial { h, volumes: y4, err, end: s4, sums })
    }

    fn level(&self, j: usize, volumes: &[f64]) -> f64 {
        self.net.tanks[j].level(volumes[j])
    }

    fn control_value(&self, c: usize, volumes: &[f64], stage: &Stage, elapsed: f64, instants: bool) -> f64 {
        let tank_index = |node: usize| self.net.tanks.iter().position(|t| t.node == node);
        let level = |node: usize| tank_index(node).map_or(f64::NAN, |j| self.level(j, volumes));
        let probe = controls::Probe {
            level: &level,
            pressure: &stage.solution.pressure,
            elapsed,
            start_clock: self.sim.start_clock,
            instants,
        };
        controls::value(&self.model.time.controls[c].when, &probe)
    }

    fn watch_value(&self, w: Watch, volumes: &[f64], stage: &Stage) -> f64 {
        match w {
            Watch::Full(j) => self.level(j, volumes) - self.net.tanks[j].max_level.unwrap_or(f64::INFINITY),
            Watch::Empty(j) => self.net.tanks[j].min_level - self.level(j, volumes),
            Watch::Control(c) => self.control_value(c, volumes, stage, self.t, false),
        }
    }

    /// The value of a watch at the current point (a control that may not fire counts as true).
    fn watch_now(&self, w: Watch) -> f64 {
        match w {
            Watch::Control(c) if !self.armed[c] => f64::INFINITY,
            Watch::Control(c) => self.g[c],
            _ => self.watch_value(w, &self.volumes, &self.k1),
        }
    }

    /// Watches whose sign goes from negative to zero or positive over the trial step.
    fn crossings(&self, trial: &Trial) -> Vec<Watch> {
        let mut out = Vec::new();
        for (j, t) in self.net.tanks.iter().enumerate() {
            // A tank at one limit can still reach the other within a step (a full tank drained
            // by the zone while its inlet is closed).
            let mode = self.net.mode[j];
            if t.max_level.is_some() && mode != TankMode::Full {
                out.push(Watch::Full(j));
            }
            if mode != TankMode::Empty {
                out.push(Watch::Empty(j));
            }
        }
        for (c, control) in self.model.time.controls.iter().enumerate() {
            if controls::is_continuous(&control.when) {
                out.push(Watch::Control(c));
            }
        }
        out.retain(|&w| self.watch_now(w) < 0.0 && self.watch_value(w, &trial.volumes, &trial.end) >= 0.0);
        out
    }

    /// Finds the earliest step length at which a watched value has just crossed zero.
    fn locate(&mut self, full: Trial, crossed: Vec<Watch>) -> Result<Trial, SimulateError> {
        let estimate = |e: &Self, w: Watch, trial: &Trial| {
            let (g0, g1) = (e.watch_now(w), e.watch_value(w, &trial.volumes, &trial.end));
            if g1.is_finite() && g0.is_finite() {
                trial.h * g0 / (g0 - g1)
            } else {
                0.5 * trial.h
            }
        };
        let mut watch = crossed
            .iter()
            .copied()
            .min_by(|&a, &b| estimate(self, a, &full).total_cmp(&estimate(self, b, &full)))
            .unwrap_or(crossed[0]);
        let mut best = full;
        for _ in 0..=crossed.len() {
            let (mut a, mut ga) = (0.0, self.watch_now(watch));
            let mut b = best.h;
            let mut gb_true = self.watch_value(watch, &best.volumes, &best.end);
            let mut gb = gb_true;
            let mut side = 0;
            for _ in 0..60 {
                if gb_true <= EVENT_TOLERANCE || b - a <= EVENT_TIME_TOLERANCE {
                    break;
                }
                let mut tau =
                    if ga.is_finite() && gb.is_finite() { b - gb * (b - a) / (gb - ga) } else { 0.5 * (a + b) };
                if !(tau > a && tau < b) {
                    tau = 0.5 * (a + b);
                }
                let trial = self.step(tau)?;
                self.stats.locating += 1;
                let g = self.watch_value(watch, &trial.volumes, &trial.end);
                if g >= 0.0 {
                    b = tau;
                    gb = g;
                    gb_true = g;
                    best = trial;
                    if side == 1 {
                        ga *= 0.5;
                    }
                    side = 1;
                } else {
                    a = tau;
                    ga = g;
                    if side == -1 {
                        gb *= 0.5;
                    }
                    side = -1;
                }
            }
            // Another watched value may have crossed earlier still.
            let earlier = crossed
                .iter()
                .copied()
                .find(|&w| w != watch && self.watch_value(w, &best.volumes, &best.end) > EVENT_TOLERANCE);
            match earlier {
                Some(w) => watch = w,
                None => break,
            }
        }
        Ok(best)
    }

    /// Moves the current point to the end of an accepted trial.
    fn accept(&mut self, trial: Trial, t_new: f64) {
        if let Some(o) = self.observer.as_mut() {
            o.interval(self.t, t_new, &self.k1.solution, &trial.end.solution);
        }
        let h = trial.h;
        // Junctions without water over the step: the connections change only at events, where
        // steps end, so the state at the start of the step holds for all of it.
        for (i, n) in self.model.nodes().iter().enumerate() {
            if n.fixed_head().is_none() && !self.k1.solution.connected[i] {
                self.dry_time[i] += h;
            }
        }
        for (j, s) in self.tank_summary.iter_mut().enumerate() {
            match self.net.mode[j] {
                TankMode::Full => s.time_full += h,
                TankMode::Empty => s.time_empty += h,
                TankMode::Normal => {}
            }
        }
        let price = self.price();
        for (i, p) in trial.sums.pumps.iter().enumerate() {
            self.cost[i] += p[2] / 3.6e6 * price;
        }
        self.totals.add(&trial.sums);
        self.volumes = trial.volumes;
        self.t = t_new;
        self.k1 = trial.end;
        self.stats.steps += 1;
    }

    /// Applies what happens at the current point: tanks reaching or leaving limits, controls
    /// whose condition became true (and what they set off in turn).
    fn act(&mut self) -> Result<(), SimulateError> {
        let n_controls = self.model.time.controls.len();
        // An armed control fires when its value is zero or positive; it fires at most once per
        // instant.
        let mut fired_here = vec![false; n_controls];
        self.acted_here.clear();
        for _round in 0..=4 * (n_controls + self.net.tanks.len()) + 2 {
            let mut changed = self.settle_tanks();
            if changed {
                self.k1 = self.net.evaluate(self.model, &self.volumes, &self.settings, self.t)?;
            }
            // Every solved state the controls look at counts for the extremes: a control firing on
            // low pressure changes the pressures it fired on, and the step's end, a pattern's
            // new demands or a tank reaching its limit may be what made them low.
            self.track_pressures();
            let now: Vec<f64> =
                (0..n_controls).map(|c| self.control_value(c, &self.volumes, &self.k1, self.t, true)).collect();
            let firing: Vec<usize> =
                (0..n_controls).filter(|&c| self.armed[c] && !fired_here[c] && now[c] >= 0.0).collect();
            if !firing.is_empty() {
                for &c in &firing {
                    fired_here[c] = true;
                    self.armed[c] = false;
                }
                self.fire(&firing)?;
                self.net.configure(self.model, &self.settings, self.clock())?;
                self.k1 = self.net.evaluate(self.model, &self.volumes, &self.settings, self.t)?;
                changed = true;
            }
            if !changed {
                break;
            }
        }
        self.g = (0..n_controls).map(|c| self.control_value(c, &self.volumes, &self.k1, self.t, false)).collect();
        for (armed, g) in self.armed.iter_mut().zip(&self.g) {
            *armed |= *g < -REARM;
        }
        Ok(())
    }

    /// Puts tanks into and out of their limit modes; returns whether a mode changed in a way
    /// that needs a new solve.
    fn settle_tanks(&mut self) -> bool {
        let mut changed = false;
        for j in 0..self.net.tanks.len() {
            let tank = &self.net.tanks[j];
            let level = tank.level(self.volumes[j]);
            let inflow = self.k1.tank_inflow[j];
            let node = tank.node;
            match self.net.mode[j] {
                TankMode::Normal => {
                    let full = tank.max_level.is_some_and(|m| level >= m - LIMIT_EPS) && inflow > FLOW_EPS;
                    let empty = level <= tank.min_level + LIMIT_EPS && inflow < -FLOW_EPS;
                    if full || empty {
                        self.net.mode[j] = if full { TankMode::Full } else { TankMode::Empty };
                        changed = true;
                    }
                }
                TankMode::Full | TankMode::Empty => {
                    let full = self.net.mode[j] == TankMode::Full;
                    let towards = if full { inflow > FLOW_EPS } else { inflow < -FLOW_EPS };
                    // A full tank that has given water back (its level fell below the limit by
                    // more than the level tolerance while other links drew from it) is full no
                    // longer, whatever stays closed: its closures go, and the next solve decides
                    // afresh. The same for an empty tank that has been refilled.
                    let left = if full {
                        tank.max_level.is_some_and(|m| level < m - self.tolerance)
                    } else {
                        level > tank.min_level + self.tolerance
                    };
                    if left || (self.net.closed_at(self.model, j).is_empty() && !towards) {
                        if left {
                            self.net.release(self.model, j);
                            changed = true;
                        }
                        self.net.mode[j] = TankMode::Normal;
                        self.events.push(Event { time: self.t, kind: EventKind::TankReleased { tank: node } });
                    }
                }
            }
        }
        // Full and empty events are logged by `observe`, once the solve has settled the closures.
        changed
    }

    /// Applies the actions of controls firing at the same instant, settling disagreements on a
    /// link by priority (then by file order: the later wins).
    fn fire(&mut self, firing: &[usize]) -> Result<(), SimulateError> {
        let controls = &self.model.time.controls;
        let mut links: Vec<usize> = firing.iter().map(|&c| controls[c].link).collect();
        links.sort_unstable();
        links.dedup();
        for link in links {
            let on_link: Vec<usize> = firing.iter().copied().filter(|&c| controls[c].link == link).collect();
            let Some(&winner) = on_link.iter().max_by_key(|&&c| (controls[c].priority, c)) else { continue };
            let action = controls[winner].action;
            let overruled: Vec<usize> =
                on_link.iter().copied().filter(|&c| c != winner && controls[c].action != action).collect();
            let before = self.link_settings(link);
            let changed = self.apply(link, action);
            // Actions that change something are logged, and so is a winner that changes nothing
            // when it overrules another control (the loser must be named).
            if changed || !overruled.is_empty() {
                self.events.push(Event {
                    time: self.t,
                    kind: EventKind::Control { control: winner, link, action, overruled, changed },
                });
            }
            if changed {
                // A control that puts the link back as another one found it at this instant,
                // before that one acted: the two undo each other.
                let after = self.link_settings(link);
                if let Some(&(first, _)) =
                    self.acted_here.iter().find(|(c, was)| controls[*c].link == link && *c != winner && *was == after)
                {
                    self.events
                        .push(Event { time: self.t, kind: EventKind::ControlsCycling { link, first, second: winner } });
                }
                self.acted_here.push((winner, before));
            }
        }
        Ok(())
    }

    /// A link's settings as controls set them (status, speed, setting, automatic), to compare.
    fn link_settings(&self, k: usize) -> (LinkStatus, u64, u64, bool) {
        let s = &self.settings;
        (s.status[k], s.speed[k].to_bits(), s.setting[k].to_bits(), s.automatic[k])
    }

    /// Applies an action to a link's settings; returns whether anything changed.
    fn apply(&mut self, k: usize, action: Action) -> bool {
        let before = (self.settings.status[k], self.settings.speed[k].to_bits(), self.settings.setting[k].to_bits());
        let automatic = self.settings.automatic[k];
        let s = &mut self.settings;
        match action {
            Action::Open => {
                s.status[k] = LinkStatus::Open;
                s.automatic[k] = false;
            }
            Action::Close => s.status[k] = LinkStatus::Closed,
            Action::Automatic => {
                s.status[k] = LinkStatus::Open;
                s.automatic[k] = true;
            }
            Action::Speed(v) => {
                s.speed[k] = v;
                if v > 0.0 {
                    s.status[k] = LinkStatus::Open;
                }
            }
            Action::Setting(v) => {
                s.setting[k] = v;
                s.status[k] = LinkStatus::Open;
                s.automatic[k] = true;
            }
        }
        let after = (self.settings.status[k], self.settings.speed[k].to_bits(), self.settings.setting[k].to_bits());
        before != after || automatic != self.settings.automatic[k]
    }

    /// Tracks extremes and logs limit events at the current point.
    fn observe(&mut self) {
        for j in 0..self.net.tanks.len() {
            let level = self.level(j, &self.volumes);
            let s = &mut self.tank_summary[j];
            if level < s.min_level.0 {
                s.min_level = (level, self.t);
            }
            if level > s.max_level.0 {
                s.max_level = (level, self.t);
            }
            s.end_level = level;
            let node = self.net.tanks[j].node;
            let mode = self.net.mode[j];
            let logged = self.events.iter().rev().find_map(|e| match &e.kind {
                EventKind::TankFull { tank, .. } if *tank == node => Some(TankMode::Full),
                EventKind::TankEmpty { tank, .. } if *tank == node => Some(TankMode::Empty),
                EventKind::TankReleased { tank } if *tank == node => Some(TankMode::Normal),
                _ => None,
            });
            if mode != TankMode::Normal && logged != Some(mode) {
                let closed = self.net.closed_at(self.model, j);
                let kind = if mode == TankMode::Full {
                    EventKind::TankFull { tank: node, closed }
                } else {
                    EventKind::TankEmpty { tank: node, closed }
                };
                self.events.push(Event { time: self.t, kind });
            }
        }
        self.track_pressures();
        for (i, p) in self.k1.pumps.iter().enumerate() {
            let on = p[0] > 0.0;
            if on && !self.running[i] {
                self.starts[i] += 1;
            }
            self.running[i] = on;
            self.peak_power[i] = self.peak_power[i].max(p[2]);
        }
    }

    /// Pressure extremes and junctions without water at the current solved instant. Called on
    /// every state the controls are evaluated on (each accepted step's end, scheduled changes,
    /// and each round of actions at an instant) and after the actions, so the extremes cover
    /// every solved instant of the trajectory, not only report times.
    fn track_pressures(&mut self) {
        let sol = &self.k1.solution;
        for (i, n) in self.model.nodes().iter().enumerate() {
            if n.fixed_head().is_some() {
                continue;
            }
            if !sol.connected[i] {
                if self.dry_since[i].is_nan() {
                    self.dry_since[i] = self.t;
                }
                continue;
            }
            let p = sol.pressure[i];
            if !p.is_finite() {
                continue;
            }
            if self.node_min[i].is_nan() || p < self.node_min[i] {
                self.node_min[i] = p;
            }
            if self.lowest.map_or(true, |(_, v, _)| p < v) {
                self.lowest = Some((i, p, self.t));
            }
        }
    }

    /// Takes the state at a report time. A later state at the same instant (after the events
    /// there) replaces it, so a streamed state is handed on only once the run has moved on.
    fn record(&mut self, sink: &mut Option<&mut SeriesSink<'_>>) -> Result<(), SimulateError> {
        if self.series.last().is_some_and(|s| s.time == self.t) {
            self.series.pop();
        }
        if let Some(sink) = sink {
            if let Some(done) = self.pending.take().filter(|p| p.time != self.t) {
                sink(&done).map_err(|message| SimulateError::Output { time: done.time, message })?;
            }
        }
        let sol = &self.k1.solution;
        let conditions = self.net.conditions();
        let snapshot = Snapshot {
            time: self.t,
            head: sol.head.clone(),
            pressure: sol.pressure.clone(),
            demand: conditions.demands().to_vec(),
            flow: sol.flow.clone(),
            status: sol.link_state.iter().map(|s| s.status_label()).collect(),
            level: (0..self.net.tanks.len()).map(|j| self.level(j, &self.volumes)).collect(),
            volume: self.volumes.clone(),
            tank_state: self
                .net
                .mode
                .iter()
                .map(|m| match m {
                    TankMode::Full => "full",
                    TankMode::Empty => "empty",
                    TankMode::Normal => "",
                })
                .collect(),
            pump_speed: self
                .net
                .pumps
                .iter()
                .zip(&self.k1.pumps)
                .map(|(&k, p)| if p[0] > 0.0 { conditions.pump_speed(k) } else { 0.0 })
                .collect(),
            pump_power: self.k1.pumps.iter().map(|p| p[2]).collect(),
            pump_energy: self.totals.pumps.iter().map(|p| p[2]).collect(),
            pump_cost: self.cost.clone(),
            price: self.price(),
        };
        if sink.is_some() {
            self.pending = Some(snapshot);
        } else {
            self.series.push(snapshot);
        }
        Ok(())
    }

    fn finish(mut self) -> Run {
        self.stats.solves = self.net.solves;
        let storage_change = self.volumes.iter().sum::<f64>() - self.start_volume;
        let pump_summary = self
            .net
            .pumps
            .iter()
            .enumerate()
            .map(|(i, &link)| {
                let s = self.totals.pumps[i];
                PumpSummary {
                    link,
                    time_running: s[0],
                    starts: self.starts[i],
                    volume: s[1],
                    shaft_energy: s[2],
                    hydraulic_energy: s[3],
                    cost: self.cost[i],
                    peak_power: self.peak_power[i],
                }
            })
            .collect();
        Run {
            start_clock: self.sim.start_clock,
            duration: self.sim.duration,
            tanks: self.net.tanks.iter().map(|t| t.node).collect(),
            pumps: self.net.pumps.clone(),
            series: self.series,
            tank_summary: self.tank_summary,
            pump_summary,
            lowest_pressure: self.lowest,
            node_min_pressure: self.node_min,
            without_water: (0..self.dry_since.len())
                .filter(|&i| !self.dry_since[i].is_nan())
                .map(|i| results::WithoutWater { node: i, first: self.dry_since[i], time: self.dry_time[i] })
                .collect(),
            balance: Balance {
                supplied: self.totals.supplied,
                delivered: self.totals.delivered,
                storage_change,
                unsupplied: self.totals.unsupplied,
                leaked: self.totals.leaked,
                outlets: self.totals.outlets,
            },
            events: self.events,
            statistics: self.stats,
        }
    }
}
