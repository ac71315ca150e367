//! Synthetic street networks of any size, for benchmarks and scale tests.
//!
//! [`generate`] builds a [`Model`] from a [`NetworkSpec`] deterministically: the same spec and
//! seed give the same network, bit for bit, on every machine (the random numbers come from a
//! xoshiro256** generator seeded through SplitMix64, written out below, so no dependency or
//! platform can change them). The networks are invented; they imitate the shape of real
//! distribution systems, not any real town.
//!
//! # What a generated network looks like
//! * **Street grid.** About `1 − branch_fraction` of the junctions sit on a rectangular street
//!   grid with blocks of `block_length` (each pipe's length varies by ±15 %). A share
//!   `missing_streets` of the grid's streets is left out at random (blocks merged, parks, rail
//!   lines); streets are put back only where needed to keep the grid in one piece.
//! * **Trunk mains.** Every `trunk_spacing`-th street in each direction is a trunk main and is
//!   never missing: 300 mm, and 500 mm on every third trunk line. Distribution mains are 100,
//!   150 or 200 mm (35 %, 45 %, 20 %).
//! * **Dead-end branches.** `branch_fraction` of the junctions hang off the grid in short
//!   cul-de-sacs (chains of 1 to 8 pipes of 40–90 m, sometimes forking), 80 or 100 mm. With the
//!   grid's own dead ends about 45 % of all junctions lie in trees and the mean node degree is
//!   about 2.4 at the default values.
//! * **Roughness.** Hazen–Williams C drawn per pipe from 100–140 (trunk mains 120–140).
//! * **Sources.** One fixed-head source per `junctions_per_source` junctions (at least two: one
//!   reservoir and one tank), spread over the grid on a regular lattice; every third source is a
//!   tank, the others reservoirs. Each joins the nearest trunk crossing through a 600 mm main.
//!   Reservoir heads stand `service_head` above the mean ground; tanks 2 m lower.
//! * **Ground and demands.** Ground rolls smoothly over `terrain_relief` metres. Junction
//!   demands average `mean_demand` (15 % of junctions draw nothing, the others 0.3–1.7 times
//!   the mean). Because the number of sources grows with the number of junctions, each source
//!   serves the same area and load at every size, so pressures stay in the 20–80 m band from a
//!   thousand junctions to a million.
//!
//! Ids are `J<n>` for junctions, `R<n>` and `T<n>` for sources, `P<n>` for pipes.

use crate::error::ModelError;
use crate::model::{HydraulicOptions, Id, Link, LinkKind, LinkStatus, Model, Node, NodeKind, Pipe, Tank};
use crate::units::UnitSystem;

/// Parameters of a generated network. [`NetworkSpec::new`] gives the documented defaults.
#[derive(Clone, Debug, PartialEq)]
pub struct NetworkSpec {
    /// Number of junctions (sources come on top).
    pub junctions: usize,
    /// Seed of the random numbers.
    pub seed: u64,
    /// Street block length, m.
    pub block_length: f64,
    /// Share of grid streets left out (0 to 0.6).
    pub missing_streets: f64,
    /// Share of junctions in dead-end branches (0 to 0.8).
    pub branch_fraction: f64,
    /// Every this many streets is a trunk main (at least 2).
    pub trunk_spacing: usize,
    /// Junctions served per fixed-head source.
    pub junctions_per_source: usize,
    /// Mean junction demand, m³/s.
    pub mean_demand: f64,
    /// Height range of the ground, m.
    pub terrain_relief: f64,
    /// Reservoir heads above the mean ground, m.
    pub service_head: f64,
}

impl NetworkSpec {
    /// Default block length, m.
    pub const BLOCK_LENGTH: f64 = 120.0;
    /// Default share of missing streets.
    pub const MISSING_STREETS: f64 = 0.40;
    /// Default share of junctions in branches.
    pub const BRANCH_FRACTION: f64 = 0.31;
    /// Default trunk spacing, streets.
    pub const TRUNK_SPACING: usize = 8;
    /// Default junctions per source.
    pub const JUNCTIONS_PER_SOURCE: usize = 12_000;
    /// Default mean demand, m³/s (0.06 L/s: a few households per junction at peak hour).
    pub const MEAN_DEMAND: f64 = 0.06e-3;
    /// Default relief, m.
    pub const TERRAIN_RELIEF: f64 = 20.0;
    /// Default service head above mean ground, m.
    pub const SERVICE_HEAD: f64 = 62.0;

    /// The default network of `junctions` junctions from `seed`.
    pub fn new(junctions: usize, seed: u64) -> Self {
        NetworkSpec {
            junctions,
            seed,
            block_length: Self::BLOCK_LENGTH,
            missing_streets: Self::MISSING_STREETS,
            branch_fraction: Self::BRANCH_FRACTION,
            trunk_spacing: Self::TRUNK_SPACING,
            junctions_per_source: Self::JUNCTIONS_PER_SOURCE,
            mean_demand: Self::MEAN_DEMAND,
            terrain_relief: Self::TERRAIN_RELIEF,
            service_head: Self::SERVICE_HEAD,
        }
    }

    fn check(&self) -> Result<(), ModelError> {
        let bad = |what: &str| Err(ModelError::new(format!("network generator: {what}")));
        if self.junctions < 4 {
            return bad("at least 4 junctions are needed");
        }
        if self.junctions > 50_000_000 {
            return bad("at most 50 000 000 junctions");
        }
        if !(0.0..=0.6).contains(&self.missing_streets) {
            return bad("missing_streets must be between 0 and 0.6");
        }
        if !(0.0..=0.8).contains(&self.branch_fraction) {
            return bad("branch_fraction must be between 0 and 0.8");
        }
        if self.trunk_spacing < 2 {
            return bad("trunk_spacing must be at least 2");
        }
        if self.junctions_per_source == 0 {
            return bad("junctions_per_source must be at least 1");
        }
        for (v, name) in [
            (self.block_length, "block_length"),
            (self.mean_demand, "mean_demand"),
            (self.terrain_relief + 1.0, "terrain_relief"),
            (self.service_head, "service_head"),
        ] {
            if !(v.is_finite() && v > 0.0) {
                return bad(&format!("{name} must be a positive number"));
            }
        }
        Ok(())
    }
}

/// xoshiro256** (Blackman & Vigna 2018), seeded through SplitMix64 (Steele, Lea & Flood 2014).
#[derive(Clone, Debug)]
pub struct Rng {
    s: [u64; 4],
}

impl Rng {
    /// A generator from a 64-bit seed.
    pub fn new(seed: u64) -> Self {
        let mut x = seed;
        Rng { s: [splitmix64(&mut x), splitmix64(&mut x), splitmix64(&mut x), splitmix64(&mut x)] }
    }

    /// The next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        let s = &mut self.s;
        let result = s[1].wrapping_mul(5).rotate_left(7).wrapping_mul(9);
        let t = s[1] << 17;
        s[2] ^= s[0];
        s[3] ^= s[1];
        s[1] ^= s[2];
        s[0] ^= s[3];
        s[2] ^= t;
        s[3] = s[3].rotate_left(45);
        result
    }

    /// Uniform in [0, 1).
    pub fn unit(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
    }

    /// Uniform in [a, b).
    pub fn range(&mut self, a: f64, b: f64) -> f64 {
        a + (b - a) * self.unit()
    }

    /// Uniform integer in 0..n (n > 0).
    pub fn below(&mut self, n: usize) -> usize {
        (((self.next_u64() >> 32) * n as u64) >> 32) as usize
    }
}

/// One step of SplitMix64: advances `x` and returns the next output.
pub fn splitmix64(x: &mut u64) -> u64 {
    *x = x.wrapping_add(0x9E37_79B9_7F4A_7C15);
    let mut z = *x;
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// Union–find over grid nodes, to keep the street grid in one piece.
struct Components {
    parent: Vec<u32>,
}

impl Components {
    fn new(n: usize) -> Self {
        Components { parent: (0..n as u32).collect() }
    }
    fn root(&mut self, mut i: u32) -> u32 {
        while self.parent[i as usize] != i {
            let p = self.parent[self.parent[i as usize] as usize];
            self.parent[i as usize] = p;
            i = p;
        }
        i
    }
    /// Joins the sets of `a` and `b`; false when they were one set already.
    fn join(&mut self, a: u32, b: u32) -> bool {
        let (ra, rb) = (self.root(a), self.root(b));
        if ra == rb {
            return false;
        }
        self.parent[ra.max(rb) as usize] = ra.min(rb);
        true
    }
}

const MAIN_DIAMETERS: [(f64, f64); 3] = [(0.100, 0.35), (0.150, 0.45), (0.200, 0.20)];

struct Builder {
    model: Model,
    rng: Rng,
    links: usize,
}

impl Builder {
    fn pipe(&mut self, from: usize, to: usize, length: f64, diameter: f64, c: f64) -> Result<(), ModelError> {
        self.links += 1;
        self.model.add_link_with_new_id(Link {
            id: numbered(b'P', self.links),
            from,
            to,
            status: LinkStatus::Open,
            kind: LinkKind::Pipe(Pipe { length, diameter, roughness: c.round(), minor_loss: 0.0, check_valve: false }),
        })?;
        Ok(())
    }
}

/// Ground elevation at (x, y), m: two long swells and a ripple over `relief` metres.
fn ground(x: f64, y: f64, relief: f64, phase: (f64, f64, f64)) -> f64 {
    use std::f64::consts::TAU;
    let a = (TAU * x / 9000.0 + phase.0).sin() * (TAU * y / 7000.0 + phase.1).cos();
    let b = (TAU * (x + y) / 3100.0 + phase.2).sin();
    relief * (0.5 + 0.35 * a + 0.15 * b)
}

/// Builds the network that `spec` describes.
pub fn generate(spec: &NetworkSpec) -> Result<Model, ModelError> {
    spec.check()?;
    let n = spec.junctions;
    let mut rng = Rng::new(spec.seed);
    let phase = (rng.range(0.0, 6.3), rng.range(0.0, 6.3), rng.range(0.0, 6.3));
    let n_branch = ((spec.branch_fraction * n as f64).round() as usize).min(n - 4);
    let n_grid = n - n_branch;
    let nx = (n_grid as f64).sqrt().ceil() as usize;
    let ny = n_grid.div_ceil(nx);
    let block = spec.block_length;
    let trunk = spec.trunk_spacing;

    let mut model = Model::new(UnitSystem::default(), HydraulicOptions::default());
    model.title = Some(format!("generated street network: {n} junctions, seed {}", spec.seed));
    // Every count is known before the elements are added (the sources' below): no list grows.
    // The ids are numbered, so unique by construction: they are not looked up as they are added
    // (the model makes its id index at its first lookup).
    let n_sources = n.div_ceil(spec.junctions_per_source).max(2);
    model.reserve(n + n_sources, 0);
    let mut b = Builder { model, rng, links: 0 };

    // Grid junctions, row by row; the last row may be short.
    let mut coords: Vec<(f64, f64)> = Vec::with_capacity(n);
    for g in 0..n_grid {
        let (i, j) = (g % nx, g / nx);
        let (x, y) = (i as f64 * block, j as f64 * block);
        coords.push((x, y));
    }
    let demand = |rng: &mut Rng| {
        if rng.unit() < 0.15 {
            0.0
        } else {
            spec.mean_demand / 0.85 * rng.range(0.3, 1.7)
        }
    };
    for (g, &(x, y)) in coords.iter().enumerate() {
        let elevation = ground(x, y, spec.terrain_relief, phase) + b.rng.range(-0.5, 0.5);
        let d = demand(&mut b.rng);
        let node = Node { coordinates: Some((x, y)), ..Node::junction(numbered(b'J', g + 1), round2(elevation), d) };
        b.model.add_node_with_new_id(node)?;
    }

    // Streets: trunk lines always, the others unless missing; then the fewest missing streets
    // put back to join the pieces.
    let id = |i: usize, j: usize| j * nx + i;
    let mut kept: Vec<(usize, usize, usize)> = Vec::new(); // (a, b, line index along which it runs)
    let mut dropped: Vec<(usize, usize, usize)> = Vec::new();
    let mut parts = Components::new(n_grid);
    for j in 0..ny {
        for i in 0..nx {
            let a = id(i, j);
            if a >= n_grid {
                continue;
            }
            // East (runs along row j), north (along column i).
            for (bi, bj, line) in [(i + 1, j, j), (i, j + 1, i)] {
                if bi >= nx || id(bi, bj) >= n_grid {
                    continue;
                }
                let other = id(bi, bj);
                if line % trunk == 0 || b.rng.unit() >= spec.missing_streets {
                    parts.join(a as u32, other as u32);
                    kept.push((a, other, line));
                } else {
                    dropped.push((a, other, line));
                }
            }
        }
    }
    // Shuffle the dropped streets so that the ones put back are spread evenly.
    for k in (1..dropped.len()).rev() {
        let r = b.rng.below(k + 1);
        dropped.swap(k, r);
    }
    for &(a, o, line) in &dropped {
        if parts.join(a as u32, o as u32) {
            kept.push((a, o, line));
        }
    }
    kept.sort_unstable();
    b.model.reserve(0, kept.len() + n_branch + n_sources);
    for (a, o, line) in kept {
        let is_trunk = line % trunk == 0;
        let (diameter, c) = if is_trunk {
            (if line % (3 * trunk) == 0 { 0.500 } else { 0.300 }, b.rng.range(120.0, 140.0))
        } else {
            let u = b.rng.unit();
            let mut acc = 0.0;
            let mut d = MAIN_DIAMETERS[2].0;
            for &(size, share) in &MAIN_DIAMETERS {
                acc += share;
                if u < acc {
                    d = size;
                    break;
                }
            }
            (d, b.rng.range(100.0, 140.0))
        };
        let length = round2(block * b.rng.range(0.85, 1.15));
        b.pipe(a, o, length, diameter, c)?;
    }

    // Dead-end branches, hung off random grid junctions.
    let mut placed = 0usize;
    let mut chain: Vec<usize> = Vec::with_capacity(8);
    while placed < n_branch {
        let anchor = b.rng.below(n_grid);
        let mut size = 1;
        while size < 8 && b.rng.unit() < 0.55 {
            size += 1;
        }
        let size = size.min(n_branch - placed);
        let angle = b.rng.range(0.0, std::f64::consts::TAU);
        chain.clear();
        chain.push(anchor);
        for _ in 0..size {
            let parent = if chain.len() > 2 && b.rng.unit() < 0.2 {
                chain[1 + b.rng.below(chain.len() - 1)]
            } else {
                *chain.last().expect("chain starts with its anchor")
            };
            let (px, py) = coords[parent];
            let length = round2(b.rng.range(40.0, 90.0));
            let turn = angle + b.rng.range(-0.6, 0.6);
            let (x, y) = (round2(px + length * turn.cos()), round2(py + length * turn.sin()));
            let index = coords.len();
            coords.push((x, y));
            let elevation = ground(x, y, spec.terrain_relief, phase) + b.rng.range(-0.5, 0.5);
            let d = demand(&mut b.rng);
            b.model.add_node_with_new_id(Node {
                coordinates: Some((x, y)),
                ..Node::junction(numbered(b'J', index + 1), round2(elevation), d)
            })?;
            let diameter = if b.rng.unit() < 0.3 { 0.080 } else { 0.100 };
            let c = b.rng.range(100.0, 140.0);
            b.pipe(parent, index, length, diameter, c)?;
            chain.push(index);
            placed += 1;
        }
    }

    // Sources on a lattice over the grid, each joined to the nearest trunk crossing.
    let sx = ((n_sources as f64 * nx as f64 / ny as f64).sqrt().round() as usize).clamp(1, n_sources);
    let sy = n_sources.div_ceil(sx);
    let mean_ground = spec.terrain_relief * 0.5;
    let mut sources = 0usize;
    for cj in 0..sy {
        for ci in 0..sx {
            if sources == n_sources {
                break;
            }
            let snap = |v: f64, limit: usize| {
                let v = ((v / trunk as f64).round() as usize * trunk).min(limit - 1);
                v - v % trunk
            };
            let i = snap((ci as f64 + 0.5) * nx as f64 / sx as f64, nx);
            let mut j = snap((cj as f64 + 0.5) * ny as f64 / sy as f64, ny);
            while id(i, j) >= n_grid {
                j -= trunk.min(j);
            }
            let target = id(i, j);
            let (x, y) = coords[target];
            let tank = sources % 3 == 2 || (n_sources == 2 && sources == 1);
            let (x, y) = (x + 150.0, y + 90.0);
            let node = if tank {
                let floor = mean_ground + spec.service_head - 2.0 - 6.0;
                Node {
                    coordinates: Some((x, y)),
                    kind: NodeKind::Tank(Box::new(Tank {
                        level: 6.0,
                        min_level: 1.0,
                        max_level: Some(9.0),
                        diameter: Some(30.0),
                    })),
                    ..Node::junction(numbered(b'T', sources / 3 + 1), round2(floor), 0.0)
                }
            } else {
                let head = mean_ground + spec.service_head;
                Node {
                    coordinates: Some((x, y)),
                    ..Node::reservoir(numbered(b'R', sources - sources / 3 + 1), round2(head))
                }
            };
            let index = b.model.add_node_with_new_id(node)?;
            let c = b.rng.range(125.0, 140.0);
            b.pipe(index, target, 175.0, 0.600, c)?;
            sources += 1;
        }
    }
    Ok(b.model)
}

/// The id `prefix` followed by `n` in decimal (`J17`), made inline without formatting machinery
/// (a million ids of each kind).
fn numbered(prefix: u8, n: usize) -> Id {
    let mut text = [0u8; 24];
    let mut at = text.len();
    let mut rest = n;
    loop {
        at -= 1;
        text[at] = b'0' + (rest % 10) as u8;
        rest /= 10;
        if rest == 0 {
            break;
        }
    }
    at -= 1;
    text[at] = prefix;
    // ASCII digits after an ASCII prefix: always UTF-8.
    Id::from(std::str::from_utf8(&text[at..]).unwrap_or_default())
}

fn round2(v: f64) -> f64 {
    (v * 100.0).round() / 100.0
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The numbered ids are unique (they are added without a lookup), and the model's id index,
    /// made at the first lookup, finds each where it is.
    #[test]
    fn generated_ids_are_unique_and_found() {
        let m = generate(&NetworkSpec::new(3_000, 2)).unwrap();
        let nodes: std::collections::HashSet<&str> = m.nodes().iter().map(|n| n.id.as_str()).collect();
        let links: std::collections::HashSet<&str> = m.links().iter().map(|l| l.id.as_str()).collect();
        assert_eq!((nodes.len(), links.len()), (m.nodes().len(), m.links().len()));
        for (i, n) in m.nodes().iter().enumerate() {
            assert_eq!(m.node_index(&n.id), Some(i));
        }
        for (k, l) in m.links().iter().enumerate() {
            assert_eq!(m.link_index(&l.id), Some(k));
        }
    }

    /// The ids made without formatting machinery are those `format!` makes.
    #[test]
    fn numbered_ids_are_the_formatted_ones() {
        let mut n = 0usize;
        while n < usize::MAX / 3 {
            for m in [n, n + 1, n + 9, n.saturating_sub(1)] {
                assert_eq!(numbered(b'J', m), format!("J{m}"));
            }
            n = n * 3 + 1;
        }
        assert_eq!(numbered(b'P', usize::MAX), format!("P{}", usize::MAX));
        assert_eq!(numbered(b'R', 0), "R0");
    }

    #[test]
    fn xoshiro_reference_values() {
        // The first outputs of xoshiro256** from the state [1, 2, 3, 4], worked out from the
        // published definition (Blackman & Vigna 2018): the first three by hand
        // (rotl(2·5, 7)·9 = 11520; then 0; then rotl(262149·5, 7)·9), all four checked with a
        // separate Python transcription of the algorithm.
        let mut r = Rng { s: [1, 2, 3, 4] };
        assert_eq!(r.next_u64(), 11520);
        assert_eq!(r.next_u64(), 0);
        assert_eq!(r.next_u64(), 1509978240);
        assert_eq!(r.next_u64(), 1215971899390074240);
    }

    #[test]
    fn splitmix_reference_value() {
        // First output of SplitMix64 from seed 0, the value widely quoted for it (from memory;
        // checked with a separate Python transcription of Steele, Lea & Flood 2014).
        let mut x = 0;
        assert_eq!(splitmix64(&mut x), 0xE220_A839_7B1D_CDAF);
    }

    #[test]
    fn same_seed_same_network_other_seed_other_network() {
        let a = generate(&NetworkSpec::new(500, 7)).unwrap();
        let b = generate(&NetworkSpec::new(500, 7)).unwrap();
        let c = generate(&NetworkSpec::new(500, 8)).unwrap();
        assert_eq!(a, b);
        assert_ne!(a, c);
    }

    #[test]
    fn counts_degree_and_sources() {
        let m = generate(&NetworkSpec::new(20_000, 1)).unwrap();
        let junctions = m.nodes().iter().filter(|n| n.fixed_head().is_none()).count();
        assert_eq!(junctions, 20_000);
        let sources = m.nodes().len() - junctions;
        assert_eq!(sources, 2);
        let degree = 2.0 * m.links().len() as f64 / m.nodes().len() as f64;
        assert!((2.3..2.5).contains(&degree), "mean degree {degree}");
        assert!(m.nodes().iter().any(|n| matches!(n.kind, NodeKind::Tank(_))));
        let trees = crate::solve::Solver::new(&m).unwrap().structure().tree_junctions() as f64 / 20_000.0;
        eprintln!("mean degree {degree}, {trees} of the junctions in trees");
        assert!((0.40..0.50).contains(&trees), "{trees} of the junctions in trees");
        let m = generate(&NetworkSpec::new(100_000, 1)).unwrap();
        let sources = m.nodes().iter().filter(|n| n.fixed_head().is_some()).count();
        assert_eq!(sources, 9);
    }

    #[test]
    fn bad_specs_are_errors() {
        assert!(generate(&NetworkSpec::new(2, 1)).is_err());
        let spec = NetworkSpec { missing_streets: 0.9, ..NetworkSpec::new(100, 1) };
        assert!(generate(&spec).is_err());
        let spec = NetworkSpec { mean_demand: f64::NAN, ..NetworkSpec::new(100, 1) };
        assert!(generate(&spec).is_err());
    }
}
