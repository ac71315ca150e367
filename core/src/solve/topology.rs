//! Which junctions an open path joins to a fixed head.
//!
//! Junctions cut off from every reservoir and tank by closed links have no defined head; they are
//! reported as disconnected (never given a made-up head) and kept out of the Newton system by a
//! unit diagonal in their row.

use crate::model::Model;

/// Adjacency of a network in compressed form: for each node, the links that touch it.
#[derive(Debug, Clone)]
pub struct Adjacency {
    /// 32-bit offsets: twice the links fit (the solver's analysis checks the model's size).
    start: Vec<u32>,
    links: Vec<u32>,
}

impl Adjacency {
    /// Builds the adjacency of `model`.
    pub fn new(model: &Model) -> Self {
        let n = model.nodes().len();
        let mut start = vec![0u32; n + 1];
        for l in model.links() {
            start[l.from + 1] += 1;
            start[l.to + 1] += 1;
        }
        for i in 0..n {
            start[i + 1] += start[i];
        }
        let mut fill: Vec<usize> = start[..n].iter().map(|&s| s as usize).collect();
        let mut links = vec![0u32; start[n] as usize];
        for (k, l) in model.links().iter().enumerate() {
            links[fill[l.from]] = k as u32;
            fill[l.from] += 1;
            links[fill[l.to]] = k as u32;
            fill[l.to] += 1;
        }
        Adjacency { start, links }
    }

    /// Links touching node `i`.
    pub fn of(&self, i: usize) -> &[u32] {
        &self.links[self.start[i] as usize..self.start[i + 1] as usize]
    }
}

/// The end points `(from, to)` of every link, compact for the passes over all links.
pub fn link_ends(model: &Model) -> Vec<(u32, u32)> {
    model.links().iter().map(|l| (l.from as u32, l.to as u32)).collect()
}

/// Marks in `connected` every node that a path of links with `open[k]` joins to a fixed head.
/// `ends` holds every link's `(from, to)`; `stack` is scratch space.
pub fn mark_connected(
    model: &Model,
    adjacency: &Adjacency,
    ends: &[(u32, u32)],
    open: &[bool],
    connected: &mut [bool],
    stack: &mut Vec<u32>,
) {
    let seeds = model.nodes().iter().map(|n| n.fixed_head().is_some());
    mark_reached(adjacency, ends, open, seeds, connected, stack);
}

/// Marks in `reached` every node that a path of links with `open[k]` joins to a node for which
/// `seeds` yields true. `ends` holds every link's `(from, to)`; `stack` is scratch space.
pub fn mark_reached(
    adjacency: &Adjacency,
    ends: &[(u32, u32)],
    open: &[bool],
    seeds: impl Iterator<Item = bool>,
    reached: &mut [bool],
    stack: &mut Vec<u32>,
) {
    reached.iter_mut().for_each(|c| *c = false);
    stack.clear();
    for (i, seed) in seeds.enumerate() {
        if seed {
            reached[i] = true;
            stack.push(i as u32);
        }
    }
    while let Some(i) = stack.pop() {
        for &k in adjacency.of(i as usize) {
            if !open[k as usize] {
                continue;
            }
            let (from, to) = ends[k as usize];
            let other = if from == i { to } else { from } as usize;
            if !reached[other] {
                reached[other] = true;
                stack.push(other as u32);
            }
        }
    }
}
