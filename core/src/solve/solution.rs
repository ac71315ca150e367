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

/// Something an engineer should look at in a solved network.
#[derive(Clone, Debug, PartialEq)]
pub struct Warning {
    /// The element concerned.
    pub element: Option<Element>,
    /// What to look at.
    pub message: String,
}

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
    /// Demand per node (m³/s) as supplied; zero for fixed-head nodes.
    pub demand: Vec<f64>,
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

impl Solution {
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
        // The mass balance's work array is dropped before the solution's arrays are made (at a
        // million junctions it is some 8 MB at the moment of the process's peak memory).
        let max_energy_residual =
            energy_residuals(&self.structure.ends, &self.laws, &self.flow, &self.head, &self.on_law)
                .fold(0.0, f64::max);
        let max_mass_residual = {
            let mut balance: Vec<f64> = self.demand.iter().map(|d| -d).collect();
            for (&(from, to), &q) in self.structure.ends.iter().zip(&self.flow) {
                balance[to as usize] += q;
                balance[from as usize] -= q;
            }
            nodes
                .iter()
                .enumerate()
                .filter(|(i, n)| n.fixed_head().is_none() && self.connected[*i])
                .map(|(i, _)| balance[i].abs())
                .fold(0.0, f64::max)
        };
        let head = self.head.clone();
        let pressure: Vec<f64> = nodes.iter().zip(&head).map(|(n, h)| h - n.elevation).collect();
        let velocity: Vec<f64> = self
            .flow
            .iter()
            .enumerate()
            .map(|(k, q)| match conditions.flow_area(k) {
                a if a > 0.0 => q / a,
                _ => f64::NAN,
            })
            .collect();
        let headloss: Vec<f64> =
            self.structure.ends.iter().map(|&(from, to)| (head[from as usize] - head[to as usize]).abs()).collect();
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
                let lift = head[l.to] - head[l.from];
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
        let mut warnings = Vec::new();
        let cut_off: Vec<usize> = (0..nodes.len()).filter(|&i| !self.connected[i]).collect();
        for &i in &cut_off {
            let message = if self.demand[i] != 0.0 {
                "cut off from every reservoir and tank by closed links; its demand is not supplied".to_owned()
            } else {
                "cut off from every reservoir and tank by closed links; it has no head".to_owned()
            };
            warnings.push(Warning { element: Some(Element::Node(nodes[i].id.to_string())), message });
        }
        for (i, n) in nodes.iter().enumerate() {
            if n.fixed_head().is_none() && self.connected[i] && pressure[i] < 0.0 {
                warnings.push(Warning {
                    element: Some(Element::Node(n.id.to_string())),
                    message: "negative pressure: the demand cannot really be delivered at this head (consider a \
                              pressure-driven analysis)"
                        .to_owned(),
                });
            }
        }
        for r in &pumps {
            if r.beyond_curve {
                warnings.push(Warning {
                    element: Some(Element::Link(links[r.link].id.to_string())),
                    message: "runs past the end of its head curve (it adds no head and acts as a resistance)".into(),
                });
            }
        }
        Solution {
            iterations,
            status_changes,
            ending,
            pumps,
            // Taken, not copied: a solve rebuilds both from the model before using them.
            demand: std::mem::take(&mut self.demand),
            connected: std::mem::take(&mut self.connected),
            head,
            pressure,
            flow: self.flow.clone(),
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
