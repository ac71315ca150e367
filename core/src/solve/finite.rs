//! The last gate before a solution leaves the solver: every value it reports must be a finite
//! number, or the solve is an error naming the element.
//!
//! A head, flow or power that overflowed (a dead-end pipe of absurdly small diameter, a demand of
//! 1e308 m³/s) must never reach a report as a blank beside `connected: true`, nor let a criterion
//! pass over the junctions whose values are missing. Values are undefined only where the model
//! says so: heads and pressures of nodes cut off from every source, head differences across a
//! link with a cut-off end, and the velocity of pumps.

use super::Solution;
use crate::error::{Element, SolveError};
use crate::model::Model;

/// Checks every value of `s`; the first non-finite one is the error.
pub fn check(model: &Model, s: &Solution) -> Result<(), SolveError> {
    let nodes = model.nodes();
    let links = model.links();
    let node = |i: usize, quantity: &'static str, value: f64| SolveError::NonFinite {
        element: Element::Node(nodes[i].id.to_string()),
        quantity,
        value,
    };
    let link = |k: usize, quantity: &'static str, value: f64| SolveError::NonFinite {
        element: Element::Link(links[k].id.to_string()),
        quantity,
        value,
    };
    for i in 0..nodes.len() {
        if !s.connected[i] {
            continue;
        }
        if !s.head[i].is_finite() {
            return Err(node(i, "head", s.head[i]));
        }
        if !s.pressure[i].is_finite() {
            return Err(node(i, "pressure", s.pressure[i]));
        }
        for (quantity, value) in
            [("demand", s.demand[i]), ("delivered", s.delivered(i)), ("leakage", s.leakage(i)), ("outlet", s.outlet(i))]
        {
            if !value.is_finite() {
                return Err(node(i, quantity, value));
            }
        }
    }
    for (k, l) in links.iter().enumerate() {
        if !s.flow[k].is_finite() {
            return Err(link(k, "flow", s.flow[k]));
        }
        let ends = s.connected[l.from] && s.connected[l.to];
        if ends && !s.headloss[k].is_finite() {
            return Err(link(k, "head loss", s.headloss[k]));
        }
        if l.as_pump().is_none() && !s.velocity[k].is_finite() {
            return Err(link(k, "velocity", s.velocity[k]));
        }
    }
    for p in &s.pumps {
        for (quantity, value) in [("head gain", p.head), ("power", p.shaft_power), ("efficiency", p.efficiency)] {
            if !value.is_finite() {
                return Err(link(p.link, quantity, value));
            }
        }
    }
    Ok(())
}
