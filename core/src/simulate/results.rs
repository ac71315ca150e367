//! What a simulation returns: reported time series, summaries, the event log and the volume
//! balance (SI units, times in seconds from the start).

use crate::model::time::Action;
use crate::model::Model;

/// The state of the network at one reported time.
#[derive(Clone, Debug, PartialEq)]
pub struct Snapshot {
    /// Elapsed time, s.
    pub time: f64,
    /// Head per node, m (NaN where cut off).
    pub head: Vec<f64>,
    /// Pressure head per node, m (NaN where cut off).
    pub pressure: Vec<f64>,
    /// Demand per node, m³/s.
    pub demand: Vec<f64>,
    /// Flow per link, m³/s.
    pub flow: Vec<f64>,
    /// Status word per link ("open", "closed", "active").
    pub status: Vec<&'static str>,
    /// Level per tank (in the order of [`Run::tanks`]), m.
    pub level: Vec<f64>,
    /// Volume per tank, m³.
    pub volume: Vec<f64>,
    /// Whether each tank is full, empty or neither ("full", "empty", "").
    pub tank_state: Vec<&'static str>,
    /// Per pump (in the order of [`Run::pumps`]): relative speed in use (0 when stopped).
    pub pump_speed: Vec<f64>,
    /// Per pump: shaft power, W.
    pub pump_power: Vec<f64>,
    /// Per pump: shaft energy since the start, J (integrated over every step, as the run's
    /// pump summary is; it ends at that summary's total).
    pub pump_energy: Vec<f64>,
    /// Per pump: cost of that energy since the start at the prices in force, in the model's
    /// currency.
    pub pump_cost: Vec<f64>,
    /// Energy price in force, per kWh.
    pub price: f64,
}

/// Summary of one tank over the run.
#[derive(Clone, Debug, PartialEq)]
pub struct TankSummary {
    /// Node index.
    pub node: usize,
    /// Lowest level, m, and when (s).
    pub min_level: (f64, f64),
    /// Highest level, m, and when (s).
    pub max_level: (f64, f64),
    /// Level at the start and at the end, m.
    pub start_level: f64,
    /// Level at the end, m.
    pub end_level: f64,
    /// Time spent full, s.
    pub time_full: f64,
    /// Time spent empty, s.
    pub time_empty: f64,
}

/// Summary of one pump over the run.
#[derive(Clone, Debug, PartialEq)]
pub struct PumpSummary {
    /// Link index.
    pub link: usize,
    /// Time running, s.
    pub time_running: f64,
    /// Number of starts (stopped → running), the start itself not counted.
    pub starts: u32,
    /// Volume pumped, m³.
    pub volume: f64,
    /// Shaft energy, J.
    pub shaft_energy: f64,
    /// Hydraulic energy ρ g Q H, J.
    pub hydraulic_energy: f64,
    /// Cost of the shaft energy at the prices in force, in the model's currency.
    pub cost: f64,
    /// Largest shaft power, W.
    pub peak_power: f64,
}

impl PumpSummary {
    /// Hours run.
    pub fn hours(&self) -> f64 {
        self.time_running / 3600.0
    }

    /// Shaft energy, kWh.
    pub fn kwh(&self) -> f64 {
        self.shaft_energy / 3.6e6
    }

    /// Mean efficiency: hydraulic energy over shaft energy (NaN if it never ran).
    pub fn mean_efficiency(&self) -> f64 {
        if self.shaft_energy > 0.0 {
            self.hydraulic_energy / self.shaft_energy
        } else {
            f64::NAN
        }
    }

    /// Shaft energy per volume pumped, kWh/m³ (NaN if nothing was pumped).
    pub fn kwh_per_m3(&self) -> f64 {
        if self.volume > 0.0 {
            self.kwh() / self.volume
        } else {
            f64::NAN
        }
    }
}

/// The volume balance of the whole run, m³: supplied = delivered + leaked + outlets + change in
/// storage + discrepancy.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Balance {
    /// Net volume the reservoirs gave the network.
    pub supplied: f64,
    /// Volume delivered to junction demands.
    pub delivered: f64,
    /// Increase of the volume stored in tanks (end minus start).
    pub storage_change: f64,
    /// Demand asked but not delivered: at junctions cut off from every source, or short of
    /// pressure where demand follows pressure.
    pub unsupplied: f64,
    /// Volume of background leakage.
    pub leaked: f64,
    /// Volume through outlets.
    pub outlets: f64,
}

impl Balance {
    /// supplied − delivered − leaked − outlets − change in storage, m³.
    pub fn discrepancy(&self) -> f64 {
        self.supplied - self.delivered - self.leaked - self.outlets - self.storage_change
    }

    /// The discrepancy relative to the larger of the volumes supplied and delivered.
    pub fn relative_discrepancy(&self) -> f64 {
        let scale = self.supplied.abs().max(self.delivered.abs()).max(self.storage_change.abs());
        if scale > 0.0 {
            self.discrepancy() / scale
        } else {
            0.0
        }
    }
}

/// Something that happened during the run.
#[derive(Clone, Debug, PartialEq)]
pub enum EventKind {
    /// A tank reached its highest level; the links filling it were closed.
    TankFull {
        /// Tank node index.
        tank: usize,
        /// Links closed.
        closed: Vec<usize>,
    },
    /// A tank reached its lowest level; the links drawing from it were closed.
    TankEmpty {
        /// Tank node index.
        tank: usize,
        /// Links closed.
        closed: Vec<usize>,
    },
    /// A tank is no longer at a limit (its flows reversed).
    TankReleased {
        /// Tank node index.
        tank: usize,
    },
    /// A control acted.
    Control {
        /// Index into the model's controls.
        control: usize,
        /// Link acted on.
        link: usize,
        /// What was done.
        action: Action,
        /// Controls on the same link at the same instant that lost (on priority, or on file order
        /// when their priorities are equal to the winner's), with a different action.
        overruled: Vec<usize>,
        /// Whether the action changed the link (a winner that leaves the link as it was is still
        /// logged when it overrules another control).
        changed: bool,
    },
    /// Controls that undo each other at the same instant: `first` acted on the link, then
    /// `second`, firing on the state `first` made, put it back. The link keeps what `second`
    /// set; the model's controls should not fight like this (a dead band between their
    /// thresholds is the usual cure).
    ControlsCycling {
        /// The link both act on.
        link: usize,
        /// The control that acted first.
        first: usize,
        /// The control that undid it.
        second: usize,
    },
}

/// An event with its time.
#[derive(Clone, Debug, PartialEq)]
pub struct Event {
    /// Elapsed time, s.
    pub time: f64,
    /// What happened.
    pub kind: EventKind,
}

impl Event {
    /// A sentence for reports (ids from `model`).
    pub fn describe(&self, model: &Model) -> String {
        let node = |i: usize| model.nodes()[i].id.as_str();
        let link = |k: usize| model.links()[k].id.as_str();
        let list = |ks: &[usize]| ks.iter().map(|&k| format!("'{}'", link(k))).collect::<Vec<_>>().join(", ");
        match &self.kind {
            EventKind::TankFull { tank, closed } => {
                format!("tank '{}' full; stops taking water (closed: {})", node(*tank), list(closed))
            }
            EventKind::TankEmpty { tank, closed } => {
                format!("tank '{}' empty; stops giving water (closed: {})", node(*tank), list(closed))
            }
            EventKind::TankReleased { tank } => format!("tank '{}' leaves its limit", node(*tank)),
            EventKind::ControlsCycling { link: k, first, second } => format!(
                "cycling controls: '{}' and '{}' undo each other on '{}' at this instant; '{}' acted last and \
                 stands",
                model.time.controls[*first].id,
                model.time.controls[*second].id,
                link(*k),
                model.time.controls[*second].id
            ),
            EventKind::Control { control, link: k, action, overruled, changed } => {
                let what = match action {
                    Action::Open => "opens".to_owned(),
                    Action::Close => "closes".to_owned(),
                    Action::Automatic => "sets to automatic".to_owned(),
                    Action::Speed(s) => format!("sets speed {s} on"),
                    Action::Setting(s) => format!("sets setting {s} (SI) on"),
                };
                let controls = &model.time.controls;
                let mut text = format!("control '{}' {what} '{}'", controls[*control].id, link(*k));
                if !changed {
                    text.push_str(" (no change: it already was so)");
                }
                let winner = controls[*control].priority;
                let by_priority: Vec<String> = overruled
                    .iter()
                    .filter(|&&c| controls[c].priority < winner)
                    .map(|&c| format!("'{}'", controls[c].id))
                    .collect();
                let by_order: Vec<String> = overruled
                    .iter()
                    .filter(|&&c| controls[c].priority >= winner)
                    .map(|&c| format!("'{}'", controls[c].id))
                    .collect();
                if !by_priority.is_empty() {
                    text.push_str(&format!(" (overruling {} by priority)", by_priority.join(", ")));
                }
                if !by_order.is_empty() {
                    text.push_str(&format!(
                        " (overruling {} of equal priority by file order: the later control wins)",
                        by_order.join(", ")
                    ));
                }
                text
            }
        }
    }
}

/// Counts of the work done.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct Statistics {
    /// Steps accepted.
    pub steps: u64,
    /// Steps rejected by the error estimate and retried shorter.
    pub rejected: u64,
    /// Steps taken while locating events.
    pub locating: u64,
    /// Hydraulic solves.
    pub solves: u64,
}

/// A junction cut off from every source during a run.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct WithoutWater {
    /// Node index.
    pub node: usize,
    /// Elapsed time it was first without water, s.
    pub first: f64,
    /// Time it spent without water in all, s.
    pub time: f64,
}

/// The results of a simulation.
#[derive(Clone, Debug, PartialEq)]
pub struct Run {
    /// Clock time at the start, s after midnight.
    pub start_clock: f64,
    /// Length of the run, s.
    pub duration: f64,
    /// Tank node indices, in node order.
    pub tanks: Vec<usize>,
    /// Pump link indices, in link order.
    pub pumps: Vec<usize>,
    /// The state at every reported time.
    pub series: Vec<Snapshot>,
    /// Per tank.
    pub tank_summary: Vec<TankSummary>,
    /// Per pump.
    pub pump_summary: Vec<PumpSummary>,
    /// Lowest pressure head at a junction that had water: node, value (m), time (s). Taken
    /// over every solved instant (each accepted step's end and each scheduled change, before
    /// and after the controls and tank limits acting there), not only the report times.
    pub lowest_pressure: Option<(usize, f64, f64)>,
    /// Junctions that were without water (cut off from every source) at some solved instant:
    /// below any pressure, so a low-pressure control on them fires.
    pub without_water: Vec<WithoutWater>,
    /// Lowest pressure head each node reached (m; NaN if never connected).
    pub node_min_pressure: Vec<f64>,
    /// The volume balance.
    pub balance: Balance,
    /// Every event, in time order.
    pub events: Vec<Event>,
    /// Work done.
    pub statistics: Statistics,
}
