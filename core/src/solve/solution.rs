//! The answer of a solve: heads, pressures, flows, device states, pump results, residuals and the
//! warnings an engineer should read, made once the iteration has converged.

use super::status::{Ending, LinkState, StatusTracker};
use super::{Conditions, LinkLaw, Solver};
use crate::error::Element;
use crate::model::Model;

/// Results of one pump in a solution (SI).
#[derive(Clone, Debug, PartialEq)]
pub struct PumpResult {
    /// Index of the pump's link.
    pub link: usize,
    /// Head added, `H_to − H_from`, m.
    pub head: f64,
    /// Relative speed.
    pub speed: f64,
    /// Efficiency used, fraction.
    pub efficiency: f64,
    /// Hydraulic power ρ g Q H, W.
    pub hydraulic_power: f64,
    /// Shaft power ρ g Q H / η, W.
    pub shaft_power: f64,
    /// Whether it runs past the end of its curve (head below zero).
    pub beyond_curve: bool,
}

pub use crate::warning::{Warning, WarningKind};

/// A solved snapshot, SI units (pressures as pressure head in m of the model's water).
#[derive(Clone, Debug, PartialEq)]
pub struct Solution {
    /// Newton iterations done (linear solves).
    pub iterations: u32,
    /// Device state changes made on the way (check valves, pumps, control valves).
    pub status_changes: u32,
    /// Which rule ended the status logic.
    pub ending: Ending,
    /// Results of every pump, in link order.
    pub pumps: Vec<PumpResult>,
    /// Head per node, m; NaN for disconnected junctions.
    pub head: Vec<f64>,
    /// Pressure head per node, m; NaN for disconnected junctions.
    pub pressure: Vec<f64>,
    /// Demand per node (m³/s) as asked (fixed draws included); zero for fixed-head nodes.
    pub demand: Vec<f64>,
    /// Demand delivered per node, m³/s: the demand asked where it does not follow pressure, what
    /// the pressure gives where it does (Wagner, Shamir & Marks); zero at cut-off junctions.
    /// Empty when no outflow followed pressure in this solve: read it with
    /// [`Solution::delivered`].
    pub delivered: Vec<f64>,
    /// Background leakage leaving at each node, m³/s; empty as `delivered` (read it with
    /// [`Solution::leakage`]).
    pub leakage: Vec<f64>,
    /// Flow of each node's outlet, m³/s; empty as `delivered` (read it with
    /// [`Solution::outlet`]).
    pub outlet: Vec<f64>,
    /// Whether a fixed head reaches the node through open links.
    pub connected: Vec<bool>,
    /// Flow per link, m³/s, positive from `from` to `to`.
    pub flow: Vec<f64>,
    /// Mean velocity per link, m/s, same sign as the flow (NaN for pumps).
    pub velocity: Vec<f64>,
    /// Head difference across the link in the direction of flow (|H_from − H_to|), m; for a closed
    /// link, the head difference it holds; NaN when an end is disconnected.
    pub headloss: Vec<f64>,
    /// State of every link.
    pub link_state: Vec<LinkState>,
    /// Largest |Σ inflow − Σ outflow − demand| over connected junctions, m³/s.
    pub max_mass_residual: f64,
    /// Largest |h(Q) − (H_from − H_to)| over open links, m.
    pub max_energy_residual: f64,
    /// Largest head change of the last iteration, m.
    pub last_head_change: f64,
    /// Relative flow change of the last iteration.
    pub last_flow_change: f64,
    /// Things to look at.
    pub warnings: Vec<Warning>,
}

/// What the junctions asked for and received (SI): the summary of a pressure-dependent solve.
#[derive(Clone, Debug, PartialEq)]
pub struct OutflowSummary {
    /// Σ of the positive demands asked at junctions, m³/s.
    pub asked: f64,
    /// Σ of the demand delivered at those junctions, m³/s.
    pub delivered: f64,
    /// `asked − delivered`, m³/s (never below zero).
    pub shortfall: f64,
    /// Background leakage in total, m³/s.
    pub leakage: f64,
    /// Flow of every outlet in total, m³/s.
    pub outlet: f64,
    /// The junctions of largest shortfall (node index, shortfall m³/s), largest first; only
    /// junctions that lack something.
    pub largest: Vec<(usize, f64)>,
}

impl OutflowSummary {
    /// The shortfall as a percentage of the demand asked (zero when nothing is asked).
    pub fn shortfall_percent(&self) -> f64 {
        if self.asked > 0.0 {
            100.0 * self.shortfall / self.asked
        } else {
            0.0
        }
    }
}

impl Solution {
    /// Demand delivered at node `i`, m³/s (see [`Solution::delivered`](field@Solution::delivered)).
    pub fn delivered(&self, i: usize) -> f64 {
        match self.delivered.get(i) {
            Some(&q) => q,
            None if self.connected[i] => self.demand[i],
            None => 0.0,
        }
    }

    /// Background leakage at node `i`, m³/s.
    pub fn leakage(&self, i: usize) -> f64 {
        self.leakage.get(i).copied().unwrap_or(0.0)
    }

    /// Outlet flow at node `i`, m³/s.
    pub fn outlet(&self, i: usize) -> f64 {
        self.outlet.get(i).copied().unwrap_or(0.0)
    }

    /// Totals of demand asked and delivered, leakage and outlets, and the `count` junctions of
    /// largest shortfall (a shortfall below 1e-9 of the demand asked there is round-off).
    pub fn outflow_summary(&self, count: usize) -> OutflowSummary {
        let (mut asked, mut delivered) = (0.0, 0.0);
        let mut short: Vec<(usize, f64)> = Vec::new();
        for (i, &d) in self.demand.iter().enumerate() {
            if d > 0.0 {
                let q = self.delivered(i);
                asked += d;
                delivered += q;
                let lack = d - q;
                // None listed: nothing to collect or sort (a sweep asks for the totals only).
                if count > 0 && lack > 1e-9 * d {
                    short.push((i, lack));
                }
            }
        }
        short.sort_by(|a, b| b.1.total_cmp(&a.1).then(a.0.cmp(&b.0)));
        short.truncate(count);
        OutflowSummary {
            asked,
            delivered,
            shortfall: (asked - delivered).max(0.0),
            leakage: self.leakage.iter().sum(),
            outlet: self.outlet.iter().sum(),
            largest: short,
        }
    }

    /// The `shortfall` of [`Solution::outflow_summary`] alone, m³/s. Where no demand follows
    /// pressure (`delivered` empty) it is the demand of the junctions cut off, summed without
    /// the totals: a sweep asks it of every closure, and the summary's two running sums over
    /// every node were a chain of dependent additions. It differs from the summary's
    /// `asked − delivered` by round-off only, and is zero exactly where that is (nothing cut
    /// off that asks for water).
    pub fn shortfall(&self) -> f64 {
        if !self.delivered.is_empty() {
            return self.outflow_summary(0).shortfall;
        }
        let mut cut = 0.0;
        for (&d, &connected) in self.demand.iter().zip(&self.connected) {
            if d > 0.0 && !connected {
                cut += d;
            }
        }
        cut
    }

    /// Net outflow of a node into the network, m³/s (positive: the node supplies water).
    pub fn net_outflow(&self, model: &Model, node: usize) -> f64 {
        model
            .links()
            .iter()
            .zip(&self.flow)
            .map(|(l, &q)| {
                if l.from == node {
                    q
                } else if l.to == node {
                    -q
                } else {
                    0.0
                }
            })
            .sum()
    }
}

impl Solver {
    /// The solution of the converged iteration: residuals, pressures, velocities, pump results,
    /// warnings.
    #[allow(clippy::too_many_arguments)]
    pub(super) fn finish(
        &mut self,
        model: &Model,
        conditions: &Conditions,
        iterations: u32,
        status_changes: u32,
        last_head_change: f64,
        last_flow_change: f64,
        tracker: &StatusTracker,
        ending: Ending,
    ) -> Solution {
        let nodes = model.nodes();
        let links = model.links();
        // First what needs the laws and the iteration's arrays; then, in a one-off solve, they
        // are freed before the solution's arrays are made (see `Solver::solve_once`).
        let max_energy_residual =
            energy_residuals(&self.structure.ends, &self.laws, &self.flow, &self.head, &self.on_law)
                .fold(0.0, f64::max);
        let link_state: Vec<LinkState> = tracker
            .state
            .iter()
            .enumerate()
            .map(|(k, &s)| if s.carries_flow() && !self.open[k] { LinkState::Disconnected } else { s })
            .collect();
        let rho_g = self.water.density * crate::units::GRAVITY;
        let pumps: Vec<PumpResult> = links
            .iter()
            .enumerate()
            .filter_map(|(k, l)| {
                let pump = l.as_pump()?;
                let q = self.flow[k];
                let lift = self.head[l.to] - self.head[l.from];
                let running = link_state[k] == LinkState::Open;
                let speed = conditions.pump_speed(k);
                let efficiency = pump.efficiency.at(q, speed);
                let hydraulic_power = if running { rho_g * q * lift } else { 0.0 };
                Some(PumpResult {
                    link: k,
                    head: if running { lift } else { 0.0 },
                    speed,
                    efficiency,
                    hydraulic_power,
                    shaft_power: hydraulic_power / efficiency,
                    beyond_curve: running && self.laws[k].beyond_curve(q),
                })
            })
            .collect();
        let (head, flow) = if self.one_off {
            self.release_workspaces();
            (std::mem::take(&mut self.head), std::mem::take(&mut self.flow))
        } else {
            (self.head.clone(), self.flow.clone())
        };
        // Per node: what is asked and what leaves (fixed outflows and relations of pressure).
        let n_nodes = nodes.len();
        let mut demand: Vec<f64> = conditions.demands().to_vec();
        for &(i, q) in conditions.fixed_draws() {
            demand[i as usize] += q;
        }
        // Arrays of the relations only when there are relations (a million-junction demand-driven
        // solve does not carry three more arrays of copies and zeros).
        let relations = !self.relations.is_empty();
        let mut delivered: Vec<f64> = if relations {
            (0..n_nodes).map(|i| if self.connected[i] { self.demand[i] } else { 0.0 }).collect()
        } else {
            Vec::new()
        };
        let (mut leakage, mut outlet) =
            if relations { (vec![0.0; n_nodes], vec![0.0; n_nodes]) } else { (Vec::new(), Vec::new()) };
        // The mass balance takes the relations' flows as iterated; the values reported are held
        // within the relation's range (`NodeRelation::reported`).
        let mut outflow: Vec<f64> = delivered.clone();
        for r in &self.relations {
            let i = r.node as usize;
            if !self.connected[i] {
                continue;
            }
            outflow[i] += r.q;
            let q = r.reported();
            match r.relation {
                super::Relation::Demand => delivered[i] += q,
                super::Relation::Outlet => outlet[i] += q,
                super::Relation::Leakage => leakage[i] += q,
            }
        }
        // The mass balance's work array is dropped before the solution's last arrays are made.
        let max_mass_residual = {
            let mut balance: Vec<f64> = if relations {
                outflow.iter().map(|q| -q).collect()
            } else {
                (0..n_nodes).map(|i| if self.connected[i] { -self.demand[i] } else { 0.0 }).collect()
            };
            drop(outflow);
            add_link_flows(&self.structure.ends, &flow, &mut balance);
            nodes
                .iter()
                .enumerate()
                .filter(|(i, n)| n.fixed_head().is_none() && self.connected[*i])
                .map(|(i, _)| balance[i].abs())
                .fold(0.0, f64::max)
        };
        let pressure: Vec<f64> = nodes.iter().zip(&head).map(|(n, h)| h - n.elevation).collect();
        let velocity: Vec<f64> = flow
            .iter()
            .enumerate()
            .map(|(k, q)| match conditions.flow_area(k) {
                a if a > 0.0 => q / a,
                _ => f64::NAN,
            })
            .collect();
        let headloss: Vec<f64> =
            self.structure.ends.iter().map(|&(from, to)| (head[from as usize] - head[to as usize]).abs()).collect();
        let mut warnings = Vec::new();
        let cut_off: Vec<usize> = (0..nodes.len()).filter(|&i| !self.connected[i]).collect();
        for &i in &cut_off {
            let message = if demand[i] != 0.0 {
                "cut off from every reservoir and tank by closed links; its demand is not supplied".to_owned()
            } else {
                "cut off from every reservoir and tank by closed links; it has no head".to_owned()
            };
            warnings.push(Warning {
                kind: WarningKind::CutOff,
                element: Some(Element::Node(nodes[i].id.to_string())),
                key: None,
                message,
            });
        }
        for (i, n) in nodes.iter().enumerate() {
            // Where the outflow follows pressure, a negative pressure delivers nothing, as it should.
            if n.fixed_head().is_none() && self.connected[i] && pressure[i] < 0.0 && self.demand[i] > 0.0 {
                warnings.push(Warning {
                    kind: WarningKind::NegativePressure,
                    element: Some(Element::Node(n.id.to_string())),
                    message: "negative pressure: the demand cannot really be delivered at this head (consider a \
                              pressure-driven analysis)"
                        .to_owned(),
                    key: None,
                });
            }
        }
        for r in &pumps {
            if r.beyond_curve {
                warnings.push(Warning {
                    kind: WarningKind::PumpPastCurve,
                    element: Some(Element::Link(links[r.link].id.to_string())),
                    key: None,
                    message: "runs past the end of its head curve (it adds no head and acts as a resistance)".into(),
                });
            }
        }
        Solution {
            iterations,
            status_changes,
            ending,
            pumps,
            demand,
            delivered,
            leakage,
            outlet,
            // Taken, not copied: a solve rebuilds it from the model before using it.
            connected: std::mem::take(&mut self.connected),
            head,
            pressure,
            flow,
            velocity,
            headloss,
            link_state,
            max_mass_residual,
            max_energy_residual,
            last_head_change,
            last_flow_change,
            warnings,
        }
    }
}

/// Adds each link's flow to the balance of its `to` node and takes it from its `from` node's.
pub(super) fn add_link_flows(ends: &[(u32, u32)], flow: &[f64], balance: &mut [f64]) {
    for (&(from, to), &q) in ends.iter().zip(flow) {
        balance[to as usize] += q;
        balance[from as usize] -= q;
    }
}

/// |h(Q) − (H_from − H_to)| per link on its law (zero for closed and regulating links, whose
/// energy equation is replaced by their constraint).
pub(super) fn energy_residuals<'a>(
    ends: &'a [(u32, u32)],
    laws: &'a [LinkLaw],
    flow: &'a [f64],
    head: &'a [f64],
    on_law: &'a [bool],
) -> impl Iterator<Item = f64> + 'a {
    ends.iter().enumerate().map(|(k, &(from, to))| {
        if on_law[k] {
            (laws[k].evaluate_exact(flow[k]).0 - (head[from as usize] - head[to as usize])).abs()
        } else {
            0.0
        }
    })
}
