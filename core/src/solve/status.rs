//! Status logic of check valves, applied after each converged inner solve.
//!
//! A check valve imposes a complementarity condition: either it is open with `Q ≥ 0` and its
//! energy equation holds, or it is closed with `Q = 0` and the head difference `H_from − H_to`
//! is not positive (it cannot push water backwards, and nothing pushes forwards). The rule below
//! moves between these two states only when the current one is violated by more than the
//! tolerance: an open valve with reverse flow closes; a closed valve whose upstream head exceeds
//! the downstream head by more than the head tolerance opens. Each set of states is remembered;
//! meeting one again is reported as cycling rather than looping forever.

use crate::model::{LinkKind, Model};
use std::collections::HashSet;

/// States of every check valve, and the sets of states already visited.
#[derive(Debug)]
pub struct StatusTracker {
    /// Links that are check valves.
    valves: Vec<usize>,
    /// Closed flag per link (only check valves can be closed here).
    closed: Vec<bool>,
    visited: HashSet<Vec<bool>>,
}

impl StatusTracker {
    /// Every check valve starts open.
    pub fn new(model: &Model) -> Self {
        let valves: Vec<usize> = model
            .links()
            .iter()
            .enumerate()
            .filter(|(_, l)| matches!(&l.kind, LinkKind::Pipe(p) if p.check_valve))
            .map(|(k, _)| k)
            .collect();
        let closed = vec![false; model.links().len()];
        let mut visited = HashSet::new();
        visited.insert(valves.iter().map(|&k| closed[k]).collect());
        StatusTracker { valves, closed, visited }
    }

    /// Whether link `k` is a check valve closed by this logic.
    pub fn is_closed(&self, k: usize) -> bool {
        self.closed[k]
    }

    /// Applies the rule; returns the number of changes, or the valves that changed when the new
    /// set of states was met before (cycling).
    pub fn update(
        &mut self,
        model: &Model,
        flow: &[f64],
        head: &[f64],
        connected: &[bool],
        head_tolerance: f64,
    ) -> Result<u32, Vec<usize>> {
        let links = model.links();
        let mut changed = Vec::new();
        for &k in &self.valves {
            let l = &links[k];
            if model.links()[k].status == crate::model::LinkStatus::Closed {
                continue;
            }
            if self.closed[k] {
                let opens = match (connected[l.from], connected[l.to]) {
                    (true, true) => head[l.from] - head[l.to] > head_tolerance,
                    // Downstream is cut off only by this valve: opening lets the supply through.
                    (true, false) => true,
                    _ => false,
                };
                if opens {
                    self.closed[k] = false;
                    changed.push(k);
                }
            } else if flow[k] < 0.0 {
                self.closed[k] = true;
                changed.push(k);
            }
        }
        if changed.is_empty() {
            return Ok(0);
        }
        let key: Vec<bool> = self.valves.iter().map(|&k| self.closed[k]).collect();
        if !self.visited.insert(key) {
            return Err(changed);
        }
        Ok(changed.len() as u32)
    }
}
