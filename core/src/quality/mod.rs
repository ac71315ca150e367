//! Water quality over time: water age, source blending and reacting substances, carried by the
//! flows of an extended-period simulation.
//!
//! Entry point: [`simulate`] runs the hydraulic simulation ([`mod@crate::simulate`]) with a
//! [`QualityEngine`] watching every hydraulic step, and returns both results. The engine only
//! consumes link flows: over each hydraulic interval `[t_i, t_{i+1}]` it takes the mean of the
//! flows at its two ends (the trapezoidal rule; node demands and tank inflows follow from the
//! flows by continuity, so the water balance of the transport holds to round-off), cuts the
//! interval into transport steps no longer than `[simulation] transport_step`, and advances the
//! water in every pipe and tank by each of them.
//!
//! # A transport step
//! 1. Reactions: every pipe's water reacts at its first-order rate ([`reaction`]), every tank's
//!    in the bulk; ages grow by the step.
//! 2. Tanks give their outflow value for the step ([`tanks`]).
//! 3. Nodes are swept in flow order (a topological order of the directed flow graph, reservoirs
//!    and tanks first): a junction's value is the flow-weighted mean of what arrives along its
//!    inflowing links and any water it injects; a booster raises it to its floor; the node then
//!    sends its water into its outflowing links, each of which gives out at its far end the
//!    same volume ([`transport`]). Sweeping in flow order lets water cross several short pipes
//!    in one step. (A loop of flow, possible only through a pump, is swept in index order; what
//!    arrives late is mixed at the next step.)
//! 4. Tanks take in what arrived.
//!
//! Reported values are the water at each node at the reported instant, resolved to the transport
//! step: a junction reports the mix of the water that reached it in the last transport step, a
//! tank its contents at its outlet, a reservoir its source value. A link reports the mean over
//! its volume.
//!
//! # Mass balance
//! For each constituent, over the run: stored at the start + in from sources + added by boosters
//! plus gained by reaction = out with demands + stored at the end + discrepancy. For ages the
//! "reaction" is the ageing of the stored water (volume × time); for source traces there is
//! none. Every term is summed as it happens, so the discrepancy measures the round-off of the
//! transport (see [`balance`]).

// Loops over constituents index several parallel arrays at once (values, masses, balances);
// an index reads clearer there than zipped iterators.
#![allow(clippy::needless_range_loop)]

pub mod balance;
pub mod constituents;
pub mod criteria;
pub mod reaction;
pub mod tanks;
pub mod transport;

use crate::model::{LinkKind, Model, NodeKind};
use crate::simulate::{Run, SimulateError, SimulateOptions, StepObserver};
use crate::solve::Solution;
pub use balance::MassBalance;
pub use constituents::{Constituent, ConstituentKind, Mixing, QualityData, Reaction, SourceValue};
use tanks::TankState;
use transport::{Merge, Segments, Transform};

/// Default longest transport step, s, and the fraction of the hydraulic step used when that is
/// shorter.
pub const TRANSPORT_STEP: f64 = 300.0;
/// The default transport step is at most the hydraulic step divided by this.
pub const STEPS_PER_HYDRAULIC_STEP: f64 = 12.0;
/// Default merge tolerance (relative to the larger value; for ages, of [`AGE_SCALE`]).
pub const TOLERANCE: f64 = 1e-3;
/// The age difference that [`TOLERANCE`] is a fraction of, s (10 h: ages merge within 36 s).
pub const AGE_SCALE: f64 = 36_000.0;
/// Flows smaller than this (m³/s) carry no water in the transport.
pub const FLOW_EPS: f64 = 1e-9;

/// Values at one reported time.
#[derive(Clone, Debug, PartialEq)]
pub struct QualityRecord {
    /// Elapsed time, s.
    pub time: f64,
    /// Per constituent, per node: value (internal units).
    pub node: Vec<Vec<f64>>,
    /// Per constituent, per link: mean value over the link's water (internal units).
    pub link: Vec<Vec<f64>>,
}

/// The results of a water-quality run.
#[derive(Clone, Debug, PartialEq)]
pub struct QualityRun {
    /// The constituents, in model order.
    pub constituents: Vec<Constituent>,
    /// Values at every reported time (the same times as the hydraulic run's reports).
    pub records: Vec<QualityRecord>,
    /// Mass balance per constituent.
    pub balance: Vec<MassBalance>,
    /// Largest number of segments held at once (pipes and layered tanks).
    pub max_segments: usize,
    /// Segments held at the end.
    pub end_segments: usize,
    /// Transport steps taken.
    pub steps: u64,
    /// The longest transport step used, s.
    pub transport_step: f64,
}

impl QualityRun {
    /// The record at elapsed time `t`, if it was reported.
    pub fn at(&self, t: f64) -> Option<&QualityRecord> {
        self.records.iter().find(|r| r.time == t)
    }
}

/// Runs the model's `[simulation]` with its `[[quality]]` constituents.
pub fn simulate(
    model: &Model,
    options: &SimulateOptions,
    progress: &mut dyn FnMut(f64),
) -> Result<(Run, QualityRun), SimulateError> {
    let mut engine = QualityEngine::new(model)?;
    let run = crate::simulate::simulate_observed(model, options, progress, &mut engine)?;
    Ok((run, engine.finish()))
}

/// Where [`simulate_streaming`] sends each reported state, with the water-quality values of
/// that instant (`None` only if the transport has no record of it, which its report times
/// agreeing with the hydraulics' rule out). An error stops the run as in
/// [`crate::simulate::simulate_streaming`].
pub type QualitySink<'s> = dyn FnMut(&crate::simulate::Snapshot, Option<&QualityRecord>) -> Result<(), String> + 's;

/// Runs the model's `[simulation]` with its `[[quality]]` constituents and hands every reported
/// state to `sink` with its water-quality values as soon as it is final, instead of keeping the
/// series. The returned [`Run`] has no series; the [`QualityRun`] keeps of each reported time
/// only the node values (what the summary, the criteria and the charts read: one number per
/// node and constituent a report), the link values being dropped once handed on.
pub fn simulate_streaming(
    model: &Model,
    options: &SimulateOptions,
    progress: &mut dyn FnMut(f64),
    sink: &mut QualitySink<'_>,
) -> Result<(Run, QualityRun), SimulateError> {
    let engine = std::cell::RefCell::new(QualityEngine::new(model)?);
    // The run calls the observer and the sink in turn, never one inside the other, so each
    // borrow of the engine ends before the next begins.
    struct Shared<'a, 'm>(&'a std::cell::RefCell<QualityEngine<'m>>);
    impl StepObserver for Shared<'_, '_> {
        fn interval(&mut self, t0: f64, t1: f64, start: &Solution, end: &Solution) {
            self.0.borrow_mut().interval(t0, t1, start, end);
        }
    }
    let mut observer = Shared(&engine);
    let run = crate::simulate::simulate_streaming_observed(model, options, progress, &mut observer, &mut |s| {
        let mut e = engine.borrow_mut();
        let found = e.records.iter().rposition(|r| (r.time - s.time).abs() <= 1e-6 * s.time.max(1.0));
        let result = sink(s, found.map(|i| &e.records[i]));
        if let Some(i) = found {
            e.records[i].link = Vec::new();
        }
        result
    })?;
    Ok((run, engine.into_inner().finish()))
}

/// The transport of every constituent through the network; a [`StepObserver`] of a simulation.
#[derive(Debug)]
pub struct QualityEngine<'m> {
    model: &'m Model,
    q: &'m QualityData,
    nc: usize,
    transforms: Vec<Transform>,
    seg: Segments,
    /// Tank index per node (`usize::MAX`: not a tank).
    tank_of: Vec<usize>,
    tank_nodes: Vec<usize>,
    tanks: Vec<TankState>,
    /// Node → incident links (compressed rows).
    adj_start: Vec<u32>,
    adj: Vec<u32>,
    /// Current value per node and constituent (`n * nc + c`).
    value: Vec<f64>,
    /// Mass and volume arrived at each node in the step (kept when they arrive after the sweep
    /// passed the node).
    acc_mass: Vec<f64>,
    acc_vol: Vec<f64>,
    /// Flows of the interval, thresholded.
    flow: Vec<f64>,
    /// Per link and constituent: first-order rate of the interval, 1/s.
    rate: Vec<f64>,
    /// Per link and constituent: `exp(k Δt) − 1` for the interval's transport step.
    em1: Vec<f64>,
    order: Vec<u32>,
    /// The sweep's links: the links flowing out of `order[i]` are
    /// `out_links[out_start[i]..out_start[i + 1]]` (set per interval, so that a transport step
    /// visits only links that carry water).
    out_start: Vec<u32>,
    out_links: Vec<Outflow>,
    indeg: Vec<u32>,
    /// Per node: what it is to the transport.
    role: Vec<Role>,
    /// Reservoirs and tanks (their values are fixed or come from their contents).
    fixed_nodes: Vec<u32>,
    /// Per node: whether it has a booster.
    boosted: Vec<bool>,
    /// Total volume of the pipes, m³ (the ageing of their water per second).
    pipe_volume: f64,
    /// Per tank and constituent: the value of its outflow in the step; per tank, the volume in.
    tank_out_value: Vec<f64>,
    tank_in_vol: Vec<f64>,
    /// Per link: upstream and downstream node of the interval's flow (`u32::MAX`: no flow).
    up: Vec<u32>,
    down: Vec<u32>,
    /// Per node: flow in from links and out into links over the interval, m³/s.
    q_in: Vec<f64>,
    q_out: Vec<f64>,
    t: f64,
    step_max: f64,
    report_interval: f64,
    duration: f64,
    start_clock: f64,
    balance: Vec<MassBalance>,
    records: Vec<QualityRecord>,
    max_segments: usize,
    steps: u64,
    nu: f64,
    scratch: Vec<f64>,
}

impl<'m> QualityEngine<'m> {
    /// Prepares the transport of `model`'s constituents (which must have a `[simulation]`).
    pub fn new(model: &'m Model) -> Result<Self, SimulateError> {
        let sim = model.time.simulation.ok_or_else(|| {
            crate::ModelError::at(
                Some(crate::Element::Table("simulation".into())),
                None,
                "the model has no [simulation] table; add one with at least duration = \"24h\"",
            )
        })?;
        let q = &model.time.quality;
        let nc = q.constituents.len();
        let nodes = model.nodes();
        let links = model.links();
        let tolerance = sim.quality_tolerance.unwrap_or(TOLERANCE);
        let transforms: Vec<Transform> = q
            .constituents
            .iter()
            .map(|c| match c.kind {
                ConstituentKind::Age => Transform::Age,
                ConstituentKind::Source { .. } => Transform::Plain,
                ConstituentKind::Substance(r) if r.bulk_rate == 0.0 && r.wall_rate == 0.0 => Transform::Plain,
                ConstituentKind::Substance(_) => Transform::Decay,
            })
            .collect();
        let merge: Vec<Merge> = (0..nc)
            .map(|c| match q.constituents[c].kind {
                ConstituentKind::Age => Merge { relative: 0.0, absolute: tolerance * AGE_SCALE },
                ConstituentKind::Source { .. } => Merge { relative: tolerance, absolute: tolerance * 1e-3 * 100.0 },
                ConstituentKind::Substance(_) => {
                    let scale = substance_scale(q, c);
                    Merge { relative: tolerance, absolute: tolerance * 1e-3 * scale }
                }
            })
            .collect();
        // Starting values: nodes as given, pipes the mean of their two ends.
        let mut value = vec![0.0; nodes.len() * nc];
        for i in 0..nodes.len() {
            for c in 0..nc {
                value[i * nc + c] = q.initial_at(i, c);
            }
        }
        let volume: Vec<f64> = links
            .iter()
            .map(|l| match &l.kind {
                LinkKind::Pipe(p) => std::f64::consts::PI * p.diameter * p.diameter / 4.0 * p.length,
                _ => 0.0,
            })
            .collect();
        let initial: Vec<Vec<f64>> = links
            .iter()
            .map(|l| (0..nc).map(|c| 0.5 * (value[l.from * nc + c] + value[l.to * nc + c])).collect())
            .collect();
        let seg = Segments::new(transforms.clone(), merge.clone(), volume, &initial);
        // Tanks at their starting volumes.
        let net = crate::simulate::network::Network::new(model)?;
        let mut tank_of = vec![usize::MAX; nodes.len()];
        let mut tank_nodes = Vec::new();
        let mut tanks = Vec::new();
        for info in &net.tanks {
            let NodeKind::Tank(t) = &nodes[info.node].kind else { continue };
            let v0 = info.volume(t.level);
            let init: Vec<f64> = (0..nc).map(|c| value[info.node * nc + c]).collect();
            let state = match q.mixing_of(info.node) {
                Mixing::Complete => TankState::complete(v0, &init),
                Mixing::TwoZone(f) => TankState::two_zone(f, v0, &init),
                Mixing::PlugFlow => TankState::layered(false, v0, &init, transforms.clone(), merge.clone()),
                Mixing::Stacked => TankState::layered(true, v0, &init, transforms.clone(), merge.clone()),
            };
            tank_of[info.node] = tanks.len();
            tank_nodes.push(info.node);
            tanks.push(state);
        }
        // Incidence lists.
        let mut deg = vec![0u32; nodes.len() + 1];
        for l in links {
            deg[l.from + 1] += 1;
            deg[l.to + 1] += 1;
        }
        for i in 0..nodes.len() {
            deg[i + 1] += deg[i];
        }
        let mut fill = deg.clone();
        let mut adj = vec![0u32; 2 * links.len()];
        for (k, l) in links.iter().enumerate() {
            for n in [l.from, l.to] {
                adj[fill[n] as usize] = k as u32;
                fill[n] += 1;
            }
        }
        let role: Vec<Role> = nodes
            .iter()
            .map(|n| match n.kind {
                NodeKind::Reservoir { .. } => Role::Reservoir,
                NodeKind::Tank(_) => Role::Tank,
                _ => Role::Junction,
            })
            .collect();
        let fixed_nodes: Vec<u32> = (0..nodes.len()).filter(|&i| role[i] != Role::Junction).map(|i| i as u32).collect();
        let boosted: Vec<bool> = (0..nodes.len()).map(|i| q.boosters.contains_key(&i)).collect();
        let pipe_volume = seg.volume.iter().sum();
        let ntanks = tanks.len();
        let step_max =
            sim.transport_step.unwrap_or((sim.hydraulic_step / STEPS_PER_HYDRAULIC_STEP).min(TRANSPORT_STEP));
        let mut engine = QualityEngine {
            model,
            q,
            nc,
            transforms,
            seg,
            tank_of,
            tank_nodes,
            tanks,
            adj_start: deg,
            adj,
            value,
            acc_mass: vec![0.0; nodes.len() * nc],
            acc_vol: vec![0.0; nodes.len()],
            flow: vec![0.0; links.len()],
            rate: vec![0.0; links.len() * nc],
            em1: vec![0.0; links.len() * nc],
            order: Vec::with_capacity(nodes.len()),
            out_start: Vec::with_capacity(nodes.len() + 1),
            out_links: Vec::with_capacity(links.len()),
            indeg: vec![0; nodes.len()],
            role,
            fixed_nodes,
            boosted,
            pipe_volume,
            tank_out_value: vec![0.0; ntanks * nc],
            tank_in_vol: vec![0.0; ntanks],
            up: vec![u32::MAX; links.len()],
            down: vec![u32::MAX; links.len()],
            q_in: vec![0.0; nodes.len()],
            q_out: vec![0.0; nodes.len()],
            t: 0.0,
            step_max,
            report_interval: sim.report_interval,
            duration: sim.duration,
            start_clock: sim.start_clock,
            balance: vec![MassBalance::default(); nc],
            records: Vec::new(),
            max_segments: 0,
            steps: 0,
            nu: model.options.water_properties().kinematic_viscosity,
            scratch: vec![0.0; nc],
        };
        engine.set_fixed_values();
        for c in 0..nc {
            engine.balance[c].stored_start = engine.stored(c);
        }
        engine.max_segments = engine.segments();
        engine.record();
        Ok(engine)
    }

    /// Segments held now by pipes and layered tanks.
    pub fn segments(&self) -> usize {
        self.seg.count() + self.tanks.iter().map(TankState::segments).sum::<usize>()
    }

    fn traced(&self, c: usize) -> Option<usize> {
        match self.q.constituents[c].kind {
            ConstituentKind::Source { node } => Some(node),
            _ => None,
        }
    }

    /// Whether tank `node`'s water is outside the balance of constituent `c`: a source trace at a
    /// tank that some trace follows. Water leaving such a tank is 100 % its own and 0 % of every
    /// other source (it starts again from there), so percentages still add up to 100.
    fn outside(&self, c: usize, node: usize) -> bool {
        matches!(self.q.constituents[c].kind, ConstituentKind::Source { .. })
            && self.q.constituents.iter().any(|k| k.kind == ConstituentKind::Source { node })
    }

    fn own_value(&self, c: usize, node: usize) -> f64 {
        if self.traced(c) == Some(node) {
            100.0
        } else {
            0.0
        }
    }

    /// Mass of constituent `c` stored in pipes and tanks (a traced tank's own water is outside).
    fn stored(&self, c: usize) -> f64 {
        let pipes: f64 = (0..self.model.links().len()).map(|p| self.seg.mass(p, c, self.t)).sum();
        let tanks: f64 = self
            .tanks
            .iter()
            .zip(&self.tank_nodes)
            .filter(|(_, &n)| !self.outside(c, n))
            .map(|(s, _)| s.mass(c, self.t))
            .sum();
        pipes + tanks
    }

    /// The value a source node gives constituent `c` now (reservoirs and injecting junctions).
    fn source_value(&self, node: usize, c: usize) -> f64 {
        match self.q.constituents[c].kind {
            ConstituentKind::Age => 0.0,
            ConstituentKind::Source { node: n } => {
                if n == node {
                    100.0
                } else {
                    0.0
                }
            }
            ConstituentKind::Substance(_) => {
                let Some(list) = self.q.sources.get(&node) else { return 0.0 };
                let Some(s) = list.iter().find(|s| s.constituent == c) else { return 0.0 };
                let clock = self.start_clock + self.t;
                s.value * s.pattern.map_or(1.0, |p| self.model.time.patterns[p].at(clock))
            }
        }
    }

    /// Reservoirs report their source values and tanks their contents.
    fn set_fixed_values(&mut self) {
        let nc = self.nc;
        let nodes = self.model.nodes();
        for &i in &self.fixed_nodes {
            let i = i as usize;
            match nodes[i].kind {
                NodeKind::Reservoir { .. } => {
                    for c in 0..nc {
                        self.value[i * nc + c] = self.source_value(i, c);
                    }
                }
                NodeKind::Tank(_) => {
                    let j = self.tank_of[i];
                    for c in 0..nc {
                        if self.outside(c, i) {
                            self.value[i * nc + c] = self.own_value(c, i);
                        } else if let Some(v) = self.tanks[j].value(c, self.t) {
                            self.value[i * nc + c] = v;
                        }
                    }
                }
                _ => {}
            }
        }
    }

    fn is_report_time(&self, t: f64) -> bool {
        let ri = self.report_interval;
        let k = (t / ri).round();
        (t - k * ri).abs() < 1e-6 || t >= self.duration
    }

    fn record(&mut self) {
        if self.records.last().is_some_and(|r| r.time == self.t) {
            self.records.pop();
        }
        let nc = self.nc;
        let nn = self.model.nodes().len();
        let node: Vec<Vec<f64>> = (0..nc).map(|c| (0..nn).map(|i| self.value[i * nc + c]).collect()).collect();
        let link: Vec<Vec<f64>> = (0..nc)
            .map(|c| {
                self.model
                    .links()
                    .iter()
                    .enumerate()
                    .map(|(k, l)| {
                        if self.seg.volume[k] > 0.0 {
                            self.seg.mean(k, c, self.t)
                        } else {
                            let up = if self.flow[k] < 0.0 { l.to } else { l.from };
                            self.value[up * nc + c]
                        }
                    })
                    .collect()
            })
            .collect();
        self.records.push(QualityRecord { time: self.t, node, link });
    }

    /// Sets the flows and rates of an interval and the order of the sweep.
    fn prepare(&mut self, start: &Solution, end: &Solution) {
        let links = self.model.links();
        self.q_in.iter_mut().for_each(|x| *x = 0.0);
        self.q_out.iter_mut().for_each(|x| *x = 0.0);
        for (k, l) in links.iter().enumerate() {
            let q = 0.5 * (start.flow[k] + end.flow[k]);
            let q = if q.abs() < FLOW_EPS || !q.is_finite() { 0.0 } else { q };
            self.flow[k] = q;
            let (u, w) = match q {
                q if q > 0.0 => (l.from as u32, l.to as u32),
                q if q < 0.0 => (l.to as u32, l.from as u32),
                _ => (u32::MAX, u32::MAX),
            };
            self.up[k] = u;
            self.down[k] = w;
            if u != u32::MAX {
                self.q_out[u as usize] += q.abs();
                self.q_in[w as usize] += q.abs();
            }
        }
        let nc = self.nc;
        for (c, con) in self.q.constituents.iter().enumerate() {
            let ConstituentKind::Substance(r) = con.kind else { continue };
            for (k, l) in links.iter().enumerate() {
                self.rate[k * nc + c] = match &l.kind {
                    LinkKind::Pipe(p) => reaction::pipe_rate(&r, p.diameter, p.length, self.flow[k], self.nu),
                    _ => 0.0,
                };
            }
        }
        // Kahn's algorithm on the directed flow graph; reservoirs and tanks start it.
        let nodes = self.model.nodes();
        self.order.clear();
        for (i, n) in nodes.iter().enumerate() {
            let mut d = 0;
            if matches!(n.kind, NodeKind::Junction { .. }) {
                for &k in self.incident(i) {
                    if self.downstream(k as usize) == Some(i) {
                        d += 1;
                    }
                }
            }
            self.indeg[i] = d;
            if self.indeg[i] == 0 {
                self.order.push(i as u32);
            }
        }
        let mut head = 0;
        while head < self.order.len() {
            let n = self.order[head] as usize;
            head += 1;
            for a in self.adj_start[n] as usize..self.adj_start[n + 1] as usize {
                let k = self.adj[a] as usize;
                if self.upstream(k) != Some(n) {
                    continue;
                }
                let w = self.other(k, n);
                if matches!(nodes[w].kind, NodeKind::Junction { .. }) && self.indeg[w] > 0 {
                    self.indeg[w] -= 1;
                    if self.indeg[w] == 0 {
                        self.order.push(w as u32);
                    }
                }
            }
        }
        if self.order.len() < nodes.len() {
            // A loop of flow (through a pump): the rest in index order.
            for i in 0..nodes.len() {
                if self.indeg[i] > 0 {
                    self.order.push(i as u32);
                }
            }
        }
        // The links each node sends water into, in the order of the sweep.
        self.out_start.clear();
        self.out_links.clear();
        for oi in 0..self.order.len() {
            self.out_start.push(self.out_links.len() as u32);
            let n = self.order[oi];
            for a in self.adj_start[n as usize] as usize..self.adj_start[n as usize + 1] as usize {
                let k = self.adj[a] as usize;
                if self.up[k] == n {
                    let q = self.flow[k];
                    self.out_links.push(Outflow {
                        link: k as u32,
                        down: self.down[k],
                        forward: q > 0.0,
                        piped: self.seg.volume[k] > 0.0,
                        flow: q.abs(),
                    });
                }
            }
        }
        self.out_start.push(self.out_links.len() as u32);
    }

    fn incident(&self, n: usize) -> &[u32] {
        &self.adj[self.adj_start[n] as usize..self.adj_start[n + 1] as usize]
    }

    fn other(&self, k: usize, n: usize) -> usize {
        let l = &self.model.links()[k];
        if l.from == n {
            l.to
        } else {
            l.from
        }
    }

    fn upstream(&self, k: usize) -> Option<usize> {
        let u = self.up[k];
        (u != u32::MAX).then_some(u as usize)
    }

    fn downstream(&self, k: usize) -> Option<usize> {
        let w = self.down[k];
        (w != u32::MAX).then_some(w as usize)
    }

    /// One transport step of length `dt` with the interval's flows.
    fn transport(&mut self, dt: f64) {
        let nc = self.nc;
        let nlinks = self.model.links().len();
        // 1. Reactions and ageing over the step; then the clock moves on.
        let t_new = self.t + dt;
        for c in 0..nc {
            match self.q.constituents[c].kind {
                ConstituentKind::Age => {
                    self.balance[c].reacted += self.pipe_volume * dt;
                }
                ConstituentKind::Substance(_) if self.transforms[c] == Transform::Decay => {
                    let mut gained = 0.0;
                    for p in 0..nlinks {
                        let em1 = self.em1[p * nc + c];
                        if em1 != 0.0 && self.seg.volume[p] > 0.0 {
                            gained += self.seg.react_by(p, c, em1 + 1.0, em1, self.t);
                        }
                    }
                    self.balance[c].reacted += gained;
                }
                _ => {}
            }
        }
        for j in 0..self.tanks.len() {
            let node = self.tank_nodes[j];
            for c in 0..nc {
                let (k, age) = match self.q.constituents[c].kind {
                    ConstituentKind::Age => (0.0, true),
                    ConstituentKind::Substance(r) => (r.bulk_rate, false),
                    ConstituentKind::Source { .. } => continue,
                };
                if k == 0.0 && !age {
                    continue;
                }
                let g = self.tanks[j].react(c, k, age, dt, self.t);
                if !self.outside(c, node) {
                    self.balance[c].reacted += g;
                }
            }
        }
        self.t = t_new;
        let t = self.t;
        // 2. Tanks' outflows.
        let mut x = std::mem::take(&mut self.scratch);
        for j in 0..self.tanks.len() {
            let node = self.tank_nodes[j];
            let (v_in, v_out) = (self.q_in[node] * dt, self.q_out[node] * dt);
            self.tank_in_vol[j] = v_in;
            x.iter_mut().for_each(|m| *m = 0.0);
            self.tanks[j].outflow(v_in, v_out, dt, &mut x, t);
            for c in 0..nc {
                let v = if self.outside(c, node) {
                    let v = self.own_value(c, node);
                    self.balance[c].inflow += v * v_out;
                    v
                } else if v_out > 0.0 {
                    x[c] / v_out
                } else {
                    self.tanks[j].value(c, t).unwrap_or(self.value[node * nc + c])
                };
                self.tank_out_value[j * nc + c] = v;
            }
        }
        // 3. The sweep.
        for oi in 0..self.order.len() {
            let n = self.order[oi] as usize;
            let (v_in, v_out) = (self.q_in[n] * dt, self.q_out[n] * dt);
            let role = self.role[n];
            match role {
                Role::Reservoir => {
                    for c in 0..nc {
                        x[c] = self.source_value(n, c);
                        self.balance[c].inflow += x[c] * v_out;
                    }
                }
                Role::Tank => {
                    let j = self.tank_of[n];
                    x.copy_from_slice(&self.tank_out_value[j * nc..(j + 1) * nc]);
                }
                Role::Junction => {
                    // Injection (negative demand) by continuity.
                    let inject = (v_out - v_in).max(0.0);
                    let vol = self.acc_vol[n] + inject;
                    for c in 0..nc {
                        if vol > 0.0 {
                            let s = if inject > 0.0 { self.source_value(n, c) } else { 0.0 };
                            self.balance[c].inflow += s * inject;
                            x[c] = (self.acc_mass[n * nc + c] + s * inject) / vol;
                        } else {
                            x[c] = self.value[n * nc + c];
                        }
                        self.acc_mass[n * nc + c] = 0.0;
                    }
                    self.acc_vol[n] = 0.0;
                }
            }
            let demand = if role == Role::Junction { (v_in - v_out).max(0.0) } else { 0.0 };
            // Boosters raise the water leaving the node.
            if self.boosted[n] {
                if let Some(list) = self.q.boosters.get(&n) {
                    for &(c, floor) in list {
                        if x[c] < floor {
                            self.balance[c].boosted += (floor - x[c]) * (v_out + demand);
                            x[c] = floor;
                        }
                    }
                }
            }
            if demand > 0.0 {
                for c in 0..nc {
                    self.balance[c].outflow += x[c] * demand;
                }
            }
            for c in 0..nc {
                self.value[n * nc + c] = x[c];
            }
            // Into the outflowing links, out at their far ends.
            for a in self.out_start[oi] as usize..self.out_start[oi + 1] as usize {
                let Outflow { link: k, down: w, forward, piped, flow } = self.out_links[a];
                let (k, w) = (k as usize, w as usize);
                let vol = flow * dt;
                let m = &mut self.acc_mass[w * nc..(w + 1) * nc];
                if piped {
                    self.seg.push(k, forward, vol, &x, t);
                    let taken = self.seg.pop(k, !forward, vol, m, t);
                    if taken < vol {
                        for c in 0..nc {
                            m[c] += x[c] * (vol - taken);
                        }
                    }
                } else {
                    for c in 0..nc {
                        m[c] += x[c] * vol;
                    }
                }
                self.acc_vol[w] += vol;
            }
        }
        // 4. Reservoirs and tanks take in what arrived.
        for f in 0..self.fixed_nodes.len() {
            let i = self.fixed_nodes[f] as usize;
            if self.role[i] == Role::Tank {
                let j = self.tank_of[i];
                x.copy_from_slice(&self.acc_mass[i * nc..(i + 1) * nc]);
                self.tanks[j].settle(self.tank_in_vol[j], &x, t);
                for c in 0..nc {
                    if self.outside(c, i) {
                        self.balance[c].outflow += x[c];
                    }
                }
            } else {
                for c in 0..nc {
                    self.balance[c].outflow += self.acc_mass[i * nc + c];
                }
            }
            self.acc_mass[i * nc..(i + 1) * nc].iter_mut().for_each(|m| *m = 0.0);
            self.acc_vol[i] = 0.0;
        }
        self.scratch = x;
        self.set_fixed_values();
        self.steps += 1;
    }

    /// Ends the run: the closing balance.
    pub fn finish(mut self) -> QualityRun {
        self.seg.resum();
        for c in 0..self.nc {
            self.balance[c].stored_end = self.stored(c);
        }
        let end_segments = self.segments();
        QualityRun {
            constituents: self.q.constituents.clone(),
            records: self.records,
            balance: self.balance,
            max_segments: self.max_segments.max(end_segments),
            end_segments,
            steps: self.steps,
            transport_step: self.step_max,
        }
    }
}

impl StepObserver for QualityEngine<'_> {
    fn interval(&mut self, t0: f64, t1: f64, start: &Solution, end: &Solution) {
        debug_assert!((t0 - self.t).abs() < 1e-6 * t1.max(1.0));
        let length = t1 - t0;
        if length <= 0.0 {
            return;
        }
        self.prepare(start, end);
        let n = (length / self.step_max - 1e-9).ceil().max(1.0);
        let dt = length / n;
        for (e, k) in self.em1.iter_mut().zip(&self.rate) {
            *e = (k * dt).exp_m1();
        }
        for _ in 0..n as u64 {
            self.transport(dt);
        }
        self.t = t1;
        if self.steps % 64 < n as u64 {
            // Now and then: the stored sums from the segments, and the segment count.
            self.seg.resum();
        }
        self.max_segments = self.max_segments.max(self.segments());
        if self.is_report_time(t1) {
            self.record();
        }
    }
}

/// A link the sweep sends water into (its data gathered in the order of the sweep).
#[derive(Clone, Copy, Debug)]
struct Outflow {
    link: u32,
    /// The node it delivers to.
    down: u32,
    /// Whether it flows from its `from` node to its `to` node.
    forward: bool,
    /// Whether it holds water (a pipe) or passes it through at once (pumps, valves).
    piped: bool,
    /// |Q|, m³/s.
    flow: f64,
}

/// What a node is to the transport.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Role {
    /// Mixes what arrives (and what it injects), sends it on, delivers its demand.
    Junction,
    /// Gives its source values, takes in what arrives.
    Reservoir,
    /// Gives its contents, takes in what arrives.
    Tank,
}

/// The scale of a substance's values: the largest value any node gives it (1 if none).
fn substance_scale(q: &QualityData, c: usize) -> f64 {
    let mut scale = q.constituents[c].initial.abs();
    for list in q.sources.values() {
        for s in list.iter().filter(|s| s.constituent == c) {
            scale = scale.max(s.value.abs());
        }
    }
    for list in q.initial.values().chain(q.boosters.values()) {
        for &(k, v) in list.iter().filter(|(k, _)| *k == c) {
            let _ = k;
            scale = scale.max(v.abs());
        }
    }
    if scale > 0.0 {
        scale
    } else {
        1.0
    }
}
