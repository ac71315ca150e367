//! States of devices (check valves, pumps, control valves) and the rules that move between them.
//!
//! Every device is a set of complementarity conditions, and each state is one branch of them:
//!
//! | device | state | holds | leaves it when |
//! |---|---|---|---|
//! | check valve | open | `Q ≥ 0`, energy equation | `Q < 0` → closed |
//! | | closed | `Q = 0`, `H_from − H_to ≤ 0` | `H_from − H_to > τ` → open |
//! | pump | running | `Q ≥ 0`, `H_to − H_from = H(Q, s)` | `Q < 0` → closed: head above shutoff |
//! | | closed: head above shutoff | `Q = 0`, `H_to − H_from ≥ H(0, s)` | `H_to − H_from < H(0, s) − τ` → running |
//! | pressure-reducing | active | `H_to = z_to + p_set`, `Q ≥ 0`, `H_from ≥ H_to + h_open(Q)` | `Q < 0` → closed; `H_from − h_open(Q) < H_set − τ` → open |
//! | | open | open-valve loss, `Q ≥ 0`, `H_to ≤ H_set` | `Q < 0` → closed; `H_to > H_set + τ` → active |
//! | | closed | `Q = 0`, `H_to ≥ H_set` or `H_from ≤ H_to` | `H_to < H_set − τ` and `H_from > H_to + τ` → open |
//! | pressure-sustaining | active | `H_from = z_from + p_set`, `Q ≥ 0`, `H_to ≤ H_from − h_open(Q)` | `Q < 0` → closed; `H_to + h_open(Q) > H_set + τ` → open |
//! | | open | open-valve loss, `Q ≥ 0`, `H_from ≥ H_set` | `Q < 0` → closed; `H_from < H_set − τ` → active |
//! | | closed | `Q = 0` | `H_from > H_set + τ` and `H_from > H_to + τ` → open |
//! | flow-control | active | `Q = Q_set`, `H_from − H_to ≥ h_open(Q_set)` | `H_from − H_to < h_open(Q_set) − τ` → open |
//! | | open | open-valve loss, `0 ≤ Q ≤ Q_set` | `Q > Q_set` → active; `Q < 0` → closed |
//! | | closed | `Q = 0` | `H_from > H_to + τ` → open |
//!
//! (τ is the head tolerance; `Q < 0` means a reverse flow beyond round-off, see
//! [`ROUND_OFF_FLOW`].) The rules are applied only after the inner Newton iteration has
//! converged for the current states, so every decision is made on a solution of the network, not
//! on an intermediate iterate. Each set of states is remembered. If a set comes back (the
//! heuristic cycling that Deuerlein, Simpson & Dempe 2009 show can happen when every violated
//! device switches at once), the rule switches to changing one device per round — the one whose
//! condition is violated most — which is the active-set strategy; a set that comes back even then
//! is reported as an error naming the devices, never an endless loop.

use super::Conditions;
use crate::model::{LinkKind, LinkStatus, Model, ValveType};
use std::collections::HashSet;

/// The state of a link in a solution.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
#[non_exhaustive]
pub enum LinkState {
    /// Open and carrying flow (pipes, running pumps, throttle and manually opened valves).
    Open,
    /// Closed by the user.
    Closed,
    /// A check valve closed against reverse flow.
    CheckValveClosed,
    /// Open, but cut off from every fixed head.
    Disconnected,
    /// A pump at zero speed.
    PumpStopped,
    /// A pump closed because the system asks for more head than its shutoff head.
    PumpShutoff,
    /// A control valve regulating (holding its pressure or flow setting).
    Active,
    /// A pressure-reducing valve fully open because the upstream head is too low to regulate.
    OpenUpstreamLow,
    /// A pressure-sustaining valve fully open because the upstream pressure is above the setting.
    OpenAboveSetting,
    /// A flow-control valve fully open because the head available cannot drive the set flow.
    OpenBelowSetting,
    /// A control valve closed because flow would reverse (or, for a pressure-reducing valve,
    /// because the downstream pressure is already above the setting).
    ValveClosed,
}

impl LinkState {
    /// The status word written in results: "open", "closed" or "active".
    pub fn status_label(self) -> &'static str {
        match self {
            LinkState::Open
            | LinkState::Disconnected
            | LinkState::OpenUpstreamLow
            | LinkState::OpenAboveSetting
            | LinkState::OpenBelowSetting => "open",
            LinkState::Closed
            | LinkState::CheckValveClosed
            | LinkState::PumpStopped
            | LinkState::PumpShutoff
            | LinkState::ValveClosed => "closed",
            LinkState::Active => "active",
        }
    }

    /// Why a link is in this state, when there is more to say than its status word.
    pub fn reason(self) -> Option<&'static str> {
        match self {
            LinkState::Open | LinkState::Closed | LinkState::Active => None,
            LinkState::CheckValveClosed => Some("check valve closed against reverse flow"),
            LinkState::Disconnected => Some("no open path to a reservoir or tank"),
            LinkState::PumpStopped => Some("speed is zero"),
            LinkState::PumpShutoff => Some("head above shutoff"),
            LinkState::OpenUpstreamLow => Some("upstream head too low to regulate"),
            LinkState::OpenAboveSetting => Some("upstream pressure above the setting"),
            LinkState::OpenBelowSetting => Some("head available cannot drive the set flow"),
            LinkState::ValveClosed => Some("flow would reverse or downstream pressure is above the setting"),
        }
    }

    /// The link follows its open law (friction, open-valve loss or pump curve) in this state.
    pub fn uses_law(self) -> bool {
        matches!(
            self,
            LinkState::Open | LinkState::OpenUpstreamLow | LinkState::OpenAboveSetting | LinkState::OpenBelowSetting
        )
    }

    /// The link carries flow in this state (law or regulation).
    pub fn carries_flow(self) -> bool {
        self.uses_law() || self == LinkState::Active
    }
}

/// At most one regulating valve holds a node's head: two that would hold the same node at
/// different settings cannot both be active, and two at the same setting would leave the split
/// of flow between them undetermined. The rule, from each device's conditions (table above):
///
/// * pressure-reducing valves feeding the same node (side by side, a duty and a standby valve):
///   the node sits at the **highest** setting — a valve whose setting is below the node's head is
///   closed by its own condition (`H_to ≥ H_set`), so only the highest can regulate;
/// * pressure-sustaining valves drawing from the same node: it sits at the **lowest** setting —
///   a valve with a higher setting than the node's head is closed (`H_from ≤ H_set`), and any
///   one with a lower setting would open fully and drain the node further;
/// * a reducing valve feeding the node that a sustaining valve draws from: the reducing valve
///   holds it; the sustaining valve is fully open when that head is at or above its setting and
///   closed when below;
/// * equal settings: the first in file order regulates, the others close.
///
/// In series (each valve holding a different node) no node is held twice and nothing is
/// settled here: each valve follows its own conditions, so the downstream pressure of two
/// reducing valves in series is the lower setting wherever the first holds less than the
/// second asks, and flow-control valves in series pass the smaller setting (the other is
/// fully open, its flow below its setting). The status logic reaches those states by its rules.
fn settle_shared_pins(model: &Model, conditions: &Conditions, state: &mut [LinkState]) {
    // (held node, link, head setting, reducing?) of every active pressure valve.
    let links = model.links();
    let nodes = model.nodes();
    let mut held: Vec<(usize, usize, f64, bool)> = Vec::new();
    for (k, s) in state.iter().enumerate() {
        if *s != LinkState::Active {
            continue;
        }
        let l = &links[k];
        match l.as_valve() {
            Some(v) if v.valve == ValveType::PressureReducing => {
                held.push((l.to, k, nodes[l.to].elevation + conditions.valve_setting(k), true))
            }
            Some(v) if v.valve == ValveType::PressureSustaining => {
                held.push((l.from, k, nodes[l.from].elevation + conditions.valve_setting(k), false))
            }
            _ => {}
        }
    }
    if held.len() < 2 {
        return;
    }
    held.sort_by_key(|h| (h.0, h.1));
    for group in held.chunk_by(|a, b| a.0 == b.0) {
        if group.len() < 2 {
            continue;
        }
        let reducing = group.iter().filter(|h| h.3);
        // Highest reducing setting, first in file order on ties (the group is in link order).
        let winner = reducing.clone().fold(None, |best: Option<&(usize, usize, f64, bool)>, h| match best {
            Some(b) if b.2 >= h.2 => Some(b),
            _ => Some(h),
        });
        let winner = winner.or_else(|| {
            group.iter().fold(None, |best: Option<&(usize, usize, f64, bool)>, h| match best {
                Some(b) if b.2 <= h.2 => Some(b),
                _ => Some(h),
            })
        });
        let Some(&(_, wk, wset, _)) = winner else { continue };
        for &(_, k, set, is_reducing) in group {
            if k == wk {
                continue;
            }
            state[k] = if !is_reducing
                && links[wk].as_valve().is_some_and(|v| v.valve == ValveType::PressureReducing)
                && wset >= set
            {
                LinkState::OpenAboveSetting
            } else {
                LinkState::ValveClosed
            };
        }
    }
}

/// What the head-dependent rules need to know about the current solution.
pub struct Observed<'a> {
    /// Link flows, m³/s.
    pub flow: &'a [f64],
    /// Node heads, m (NaN where disconnected).
    pub head: &'a [f64],
    /// Whether each node is connected to a fixed head.
    pub connected: &'a [bool],
    /// Head loss of each valve when fully open at its current flow (NaN for other links).
    pub open_loss: &'a dyn Fn(usize, f64) -> f64,
    /// Shutoff head of each pump at its speed.
    pub shutoff: &'a dyn Fn(usize) -> f64,
    /// Head tolerance τ, m.
    pub tolerance: f64,
    /// Largest reverse flow that is round-off, m³/s (see [`ROUND_OFF_FLOW`]).
    pub reverse_floor: f64,
}

/// Share of the network's flow scale (its total demand, at least 1 L/s) below which a reverse
/// flow is round-off, not reverse flow. A device that carries no flow at all (a check valve in
/// front of a dead end without demand, a pump station's header with its pumps off) solves to a
/// flow of zero give or take some 1e-27 m³/s, whose sign depends on the order of the
/// factorization's operations; a rule that closed on any negative flow would cut such a node
/// off on the sign of round-off. 1e-12 of the flow scale is ten orders of magnitude above that
/// round-off and six below the flow tolerance.
pub const ROUND_OFF_FLOW: f64 = 1e-12;

/// Device states during one solve.
#[derive(Debug)]
pub struct StatusTracker {
    /// State of every link.
    pub state: Vec<LinkState>,
    /// Links with state rules.
    devices: Vec<usize>,
    visited: HashSet<Vec<LinkState>>,
    one_at_a_time: bool,
}

/// How the status logic ended.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Ending {
    /// All device conditions held at the first converged solution.
    FirstSolution,
    /// Switching every violated device at once reached a consistent set of states.
    SimultaneousSwitching,
    /// Cycling was detected; switching one device per round reached a consistent set.
    OneAtATime,
}

impl Ending {
    /// A sentence for reports.
    pub fn describe(self) -> &'static str {
        match self {
            Ending::FirstSolution => "every device condition held at the first converged solution",
            Ending::SimultaneousSwitching => "device states settled by switching every violated device together",
            Ending::OneAtATime => {
                "device states settled by switching the most violated device one at a time (after cycling was detected)"
            }
        }
    }
}

impl StatusTracker {
    /// Initial states from `conditions`: user closures, stopped pumps, automatic valves active.
    pub fn new(model: &Model, conditions: &Conditions) -> Self {
        let mut state = Vec::with_capacity(model.links().len());
        let mut devices = Vec::new();
        for (k, l) in model.links().iter().enumerate() {
            let s = if conditions.status(k) == LinkStatus::Closed {
                LinkState::Closed
            } else {
                match &l.kind {
                    LinkKind::Pipe(p) => {
                        if p.check_valve {
                            devices.push(k);
                        }
                        LinkState::Open
                    }
                    LinkKind::Pump(_) => {
                        if conditions.pump_speed(k) <= 0.0 {
                            LinkState::PumpStopped
                        } else {
                            devices.push(k);
                            LinkState::Open
                        }
                    }
                    LinkKind::Valve(v) => {
                        if !conditions.automatic(k) || v.valve == ValveType::Throttle {
                            LinkState::Open
                        } else {
                            devices.push(k);
                            match v.valve {
                                // Pressure valves start fully open: they become active only when a
                                // solution shows the pressure they watch on the wrong side of the
                                // setting, so no head is ever pinned where it cannot be held.
                                ValveType::PressureReducing => LinkState::OpenUpstreamLow,
                                ValveType::PressureSustaining => LinkState::OpenAboveSetting,
                                // A flow-control valve's active state fixes only its own flow.
                                _ => LinkState::Active,
                            }
                        }
                    }
                }
            };
            state.push(s);
        }
        let mut visited = HashSet::new();
        visited.insert(state.clone());
        StatusTracker { state, devices, visited, one_at_a_time: false }
    }

    /// Whether any link has state rules.
    pub fn has_devices(&self) -> bool {
        !self.devices.is_empty()
    }

    /// The ending so far (valid once [`StatusTracker::update`] returned no change).
    pub fn ending(&self, changes: u32) -> Ending {
        if changes == 0 {
            Ending::FirstSolution
        } else if self.one_at_a_time {
            Ending::OneAtATime
        } else {
            Ending::SimultaneousSwitching
        }
    }

    /// Applies the rules to a converged solution. Returns the number of changes made, or the
    /// links involved when states cycle even one device at a time.
    pub fn update(&mut self, model: &Model, conditions: &Conditions, seen: &Observed<'_>) -> Result<u32, Vec<usize>> {
        let mut proposals: Vec<(usize, LinkState, f64)> = Vec::new();
        for &k in &self.devices {
            if let Some((next, violation)) = self.rule(model, conditions, k, seen) {
                proposals.push((k, next, violation));
            }
        }
        if proposals.is_empty() {
            return Ok(0);
        }
        loop {
            let chosen: Vec<(usize, LinkState, f64)> = if self.one_at_a_time {
                let best = proposals.iter().copied().max_by(|a, b| a.2.total_cmp(&b.2)).into_iter().collect();
                best
            } else {
                proposals.clone()
            };
            let mut next = self.state.clone();
            for &(k, s, _) in &chosen {
                next[k] = s;
            }
            settle_shared_pins(model, conditions, &mut next);
            if self.visited.insert(next.clone()) {
                self.state = next;
                return Ok(chosen.len() as u32);
            }
            if self.one_at_a_time {
                return Err(proposals.iter().map(|p| p.0).collect());
            }
            self.one_at_a_time = true;
        }
    }

    /// Holds a regulating valve fully open (it has nothing to regulate against).
    pub fn hold_open(&mut self, model: &Model, k: usize) {
        if let Some(v) = model.links()[k].as_valve() {
            self.state[k] = match v.valve {
                ValveType::PressureReducing => LinkState::OpenUpstreamLow,
                ValveType::PressureSustaining => LinkState::OpenAboveSetting,
                ValveType::FlowControl => LinkState::OpenBelowSetting,
                ValveType::Throttle => LinkState::Open,
            };
        }
    }

    /// The state device `k` should move to, with the size of the violated condition (m or m³/s).
    fn rule(&self, model: &Model, conditions: &Conditions, k: usize, o: &Observed<'_>) -> Option<(LinkState, f64)> {
        let l = &model.links()[k];
        let (a, b) = (l.from, l.to);
        let q = o.flow[k];
        let tau = o.tolerance;
        let (ha, hb) = (o.head[a], o.head[b]);
        let both = o.connected[a] && o.connected[b];
        let state = self.state[k];
        // Flowing backwards beyond round-off.
        let reverse = q < -o.reverse_floor;
        match &l.kind {
            LinkKind::Pipe(_) => match state {
                LinkState::Open if reverse => Some((LinkState::CheckValveClosed, -q)),
                LinkState::CheckValveClosed => {
                    if both && ha - hb > tau {
                        Some((LinkState::Open, ha - hb))
                    } else if o.connected[a] && !o.connected[b] {
                        Some((LinkState::Open, f64::INFINITY))
                    } else {
                        None
                    }
                }
                _ => None,
            },
            LinkKind::Pump(_) => match state {
                LinkState::Open if reverse => Some((LinkState::PumpShutoff, -q)),
                LinkState::PumpShutoff => {
                    let lift = hb - ha;
                    let shutoff = (o.shutoff)(k);
                    if !both {
                        (o.connected[a] && !o.connected[b]).then_some((LinkState::Open, f64::INFINITY))
                    } else {
                        (lift < shutoff - tau).then_some((LinkState::Open, shutoff - lift))
                    }
                }
                _ => None,
            },
            LinkKind::Valve(v) => {
                if !both {
                    return None;
                }
                let fixed_to = model.nodes()[b].fixed_head().is_some();
                let fixed_from = model.nodes()[a].fixed_head().is_some();
                match v.valve {
                    ValveType::PressureReducing => {
                        let set = model.nodes()[b].elevation + conditions.valve_setting(k);
                        match state {
                            LinkState::Active if reverse => Some((LinkState::ValveClosed, -q)),
                            // Another device holds the downstream head above this setting.
                            LinkState::Active if hb > set + tau => Some((LinkState::ValveClosed, hb - set)),
                            LinkState::Active => {
                                let available = ha - (o.open_loss)(k, q);
                                (available < set - tau).then_some((LinkState::OpenUpstreamLow, set - available))
                            }
                            LinkState::OpenUpstreamLow if reverse => Some((LinkState::ValveClosed, -q)),
                            LinkState::OpenUpstreamLow if hb > set + tau => {
                                let next = if fixed_to { LinkState::ValveClosed } else { LinkState::Active };
                                Some((next, hb - set))
                            }
                            // A closed valve reopens fully first; it becomes active only if the open
                            // solution then shows the downstream pressure above the setting.
                            LinkState::ValveClosed if hb < set - tau && ha > hb + tau => {
                                Some((LinkState::OpenUpstreamLow, (set - hb).min(ha - hb)))
                            }
                            _ => None,
                        }
                    }
                    ValveType::PressureSustaining => {
                        let set = model.nodes()[a].elevation + conditions.valve_setting(k);
                        match state {
                            LinkState::Active if reverse => Some((LinkState::ValveClosed, -q)),
                            // Another device holds the upstream head above this setting.
                            LinkState::Active if ha > set + tau => Some((LinkState::OpenAboveSetting, ha - set)),
                            LinkState::Active => {
                                let needed = hb + (o.open_loss)(k, q);
                                (needed > set + tau).then_some((LinkState::OpenAboveSetting, needed - set))
                            }
                            LinkState::OpenAboveSetting if reverse => Some((LinkState::ValveClosed, -q)),
                            LinkState::OpenAboveSetting if ha < set - tau => {
                                let next = if fixed_from { LinkState::ValveClosed } else { LinkState::Active };
                                Some((next, set - ha))
                            }
                            LinkState::ValveClosed if ha > set + tau && ha > hb + tau => {
                                Some((LinkState::OpenAboveSetting, (ha - set).min(ha - hb)))
                            }
                            _ => None,
                        }
                    }
                    ValveType::FlowControl => {
                        let set = conditions.valve_setting(k);
                        match state {
                            LinkState::Active => {
                                let needed = (o.open_loss)(k, set);
                                (ha - hb < needed - tau).then_some((LinkState::OpenBelowSetting, needed - (ha - hb)))
                            }
                            LinkState::OpenBelowSetting if reverse => Some((LinkState::ValveClosed, -q)),
                            LinkState::OpenBelowSetting if q > set * (1.0 + 1e-9) + 1e-12 => {
                                Some((LinkState::Active, q - set))
                            }
                            LinkState::ValveClosed if ha > hb + tau => Some((LinkState::OpenBelowSetting, ha - hb)),
                            _ => None,
                        }
                    }
                    ValveType::Throttle => None,
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::{HydraulicOptions, Link, Node, Pipe};
    use crate::units::UnitSystem;

    /// Fault: with one order of the factorization's operations, the check valve in front of a
    /// pump station's header (no demand: its flow is zero give or take 1e-27 m³/s) closed on a
    /// reverse flow of round-off and cut the header off. The class: every rule that closes a
    /// device on reverse flow (check valves, pumps, regulating valves) takes a reverse flow within
    /// round-off as none, and one beyond it as reverse flow.
    #[test]
    fn a_reverse_flow_of_round_off_closes_no_device() {
        let mut m = Model::new(UnitSystem::default(), HydraulicOptions::default());
        m.add_node(Node::reservoir("R", 50.0)).unwrap();
        m.add_node(Node::junction("J1", 0.0, 1e-3)).unwrap();
        m.add_node(Node::junction("Header", 0.0, 0.0)).unwrap();
        let pipe = |id: &str, from, to, check_valve| Link {
            id: id.into(),
            from,
            to,
            status: LinkStatus::Open,
            kind: LinkKind::Pipe(Pipe { length: 100.0, diameter: 0.1, roughness: 120.0, minor_loss: 0.0, check_valve }),
        };
        m.add_link(pipe("P1", 0, 1, false)).unwrap();
        m.add_link(pipe("CV", 2, 1, true)).unwrap();
        let conditions = Conditions::from_model(&m);
        let decide = |reverse: f64| {
            let mut tracker = StatusTracker::new(&m, &conditions);
            let flow = [1e-3, -reverse];
            let seen = Observed {
                flow: &flow,
                head: &[50.0, 49.9, 49.9],
                connected: &[true, true, true],
                open_loss: &|_, _| f64::NAN,
                shutoff: &|_| f64::INFINITY,
                tolerance: 1e-4,
                reverse_floor: ROUND_OFF_FLOW * 1e-3,
            };
            let changes = tracker.update(&m, &conditions, &seen).unwrap();
            (changes, tracker.state[1])
        };
        assert_eq!(decide(1e-27), (0, LinkState::Open));
        assert_eq!(decide(0.9 * ROUND_OFF_FLOW * 1e-3), (0, LinkState::Open));
        assert_eq!(decide(1e-9), (1, LinkState::CheckValveClosed));
    }
}
