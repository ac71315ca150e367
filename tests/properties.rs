//! Property tests of the solver on random connected networks.
//!
//! Each case is a random spanning tree over 3..=40 junctions and 1..=3 reservoirs, plus random
//! extra links that close loops (parallel pipes included), with random lengths, diameters,
//! roughnesses, minor losses, elevations and demands, under either Hazen–Williams or
//! Darcy–Weisbach. The properties are the equations the answer must satisfy, checked with laws
//! written out here independently of the core:
//!
//! * (a) mass balance at every junction;
//! * (b) energy balance on every link, with the head loss recomputed from the Hazen–Williams
//!   velocity form `V = 0.849 C R^0.63 S^0.54` (SI, R = D/4 for a full pipe; the standard SI
//!   form of the formula, written from memory) or from Darcy–Weisbach with a Colebrook–White
//!   friction factor solved here by fixed-point iteration, plus `K V²/2g` minor losses;
//! * (c) reversing a link's direction negates its flow and leaves every head unchanged;
//! * (d) renumbering nodes and links leaves heads and flows per id unchanged;
//! * (e) the network written as a model file in SI and in US-customary units gives the same
//!   answer as the network built through the API.
//!
//! Tolerances. The solves use the default convergence tolerances (largest head change 1e-4 m,
//! relative flow change 1e-6), so the checks measure the accuracy a user gets. Newton's method
//! converges quadratically, so the error left after the last accepted step is far below that step:
//! heads are compared to `HEAD_REL` = 1e-6 of the network's head range (at least 1 m), which is
//! about 1e-4 m on a 100 m range, and energy residuals are held to the same bound. Flows are
//! compared to `FLOW_REL` = 1e-6 of the largest flow: near a zero flow, Hazen–Williams'
//! `h ∝ Q^1.852` makes a flow far more sensitive to heads than the heads are to flows, so flows
//! are the looser check. Mass balance is checked to 1e-8 of the total demand: the gradient method
//! meets it to the accuracy of the linear solve at every iteration, whatever the tolerances.
//! (Much tighter head tolerances are not used: the heads of a stiff network carry a rounding
//! floor, see the note in `tests/solver.rs`.)
//!
//! The number of cases is 64 per property (set `PROPTEST_CASES` to run more). Failing cases are
//! not persisted to files; proptest prints the minimal failing network.

mod common;

use proptest::prelude::*;
use ringmain_core::model::{HydraulicOptions, WaterSpec};
use ringmain_core::{solve, HeadLossLaw, Link, LinkKind, LinkStatus, Model, Node, Pipe, Solution, UnitSystem};
use std::f64::consts::PI;

/// Kinematic viscosity used by every case, m²/s (water near 20 °C, common practice).
const NU: f64 = 1.0e-6;
/// Standard gravity, m/s² (CGPM 1901).
const G: f64 = 9.806_65;
/// Exact unit factors: international foot and inch (1959), US gallon (231 in³).
const FOOT: f64 = 0.3048;
const INCH: f64 = 0.0254;
const GPM: f64 = 231.0 * INCH * INCH * INCH / 60.0;

const HEAD_REL: f64 = 1e-6;
const FLOW_REL: f64 = 1e-6;
const MASS_REL: f64 = 1e-8;

#[derive(Clone, Debug)]
struct PipeSpec {
    from: usize,
    to: usize,
    length: f64,
    diameter: f64,
    /// Hazen–Williams C, or Darcy–Weisbach absolute roughness in m.
    roughness: f64,
    minor_loss: f64,
}

/// A random network in SI units. Nodes `0..heads.len()` are reservoirs, the rest junctions.
#[derive(Clone, Debug)]
struct Net {
    law: HeadLossLaw,
    heads: Vec<f64>,
    /// (elevation m, demand m³/s)
    junctions: Vec<(f64, f64)>,
    pipes: Vec<PipeSpec>,
}

impl Net {
    fn n_nodes(&self) -> usize {
        self.heads.len() + self.junctions.len()
    }

    fn node_id(&self, i: usize) -> String {
        if i < self.heads.len() {
            format!("R{i}")
        } else {
            format!("J{}", i - self.heads.len())
        }
    }

    fn link_id(k: usize) -> String {
        format!("P{k}")
    }

    fn total_demand(&self) -> f64 {
        self.junctions.iter().map(|j| j.1).sum()
    }

    fn options(&self) -> HydraulicOptions {
        HydraulicOptions { headloss: self.law, water: WaterSpec::KinematicViscosity(NU), ..HydraulicOptions::default() }
    }

    fn node(&self, i: usize) -> Node {
        if i < self.heads.len() {
            Node::reservoir(self.node_id(i), self.heads[i])
        } else {
            let (elevation, demand) = self.junctions[i - self.heads.len()];
            Node::junction(self.node_id(i), elevation, demand)
        }
    }

    /// The model built through the API, nodes and links added in the given orders.
    fn build_in_order(&self, node_order: &[usize], link_order: &[usize]) -> Model {
        let mut model = Model::new(UnitSystem::default(), self.options());
        for &i in node_order {
            model.add_node(self.node(i)).expect("valid node");
        }
        for &k in link_order {
            let p = &self.pipes[k];
            let index = |i: usize| model.node_index(&self.node_id(i)).expect("node added");
            let link = Link {
                id: Self::link_id(k).into(),
                from: index(p.from),
                to: index(p.to),
                status: LinkStatus::Open,
                kind: LinkKind::Pipe(Pipe {
                    length: p.length,
                    diameter: p.diameter,
                    roughness: p.roughness,
                    minor_loss: p.minor_loss,
                    check_valve: false,
                }),
            };
            model.add_link(link).expect("valid link");
        }
        model
    }

    fn build(&self) -> Model {
        let nodes: Vec<usize> = (0..self.n_nodes()).collect();
        let links: Vec<usize> = (0..self.pipes.len()).collect();
        self.build_in_order(&nodes, &links)
    }

    /// The network as a TOML model file, in SI or in US-customary units.
    fn to_toml(&self, us: bool) -> String {
        let (len, dia, flow, rough) = if us { (FOOT, INCH, GPM, FOOT) } else { (1.0, 1e-3, 1e-3, 1e-3) };
        let mut s = String::from("title = \"random network\"\n\n[units]\n");
        if us {
            s += "length = \"ft\"\ndiameter = \"in\"\nflow = \"gpm\"\npressure = \"psi\"\nroughness = \"ft\"\n";
        } else {
            s += "length = \"m\"\ndiameter = \"mm\"\nflow = \"L/s\"\npressure = \"kPa\"\nroughness = \"mm\"\n";
        }
        let law = match self.law {
            HeadLossLaw::HazenWilliams => "hazen-williams",
            HeadLossLaw::DarcyWeisbach => "darcy-weisbach",
        };
        // The default tolerances, written out; the head tolerance is in the file's length unit.
        let o = HydraulicOptions::default();
        s += &format!(
            "\n[hydraulics]\nheadloss = \"{law}\"\nkinematic_viscosity = {NU:?}\nmax_iterations = {}\n\
             head_tolerance = {:?}\nflow_tolerance = {:?}\n",
            o.max_iterations,
            o.head_tolerance / len,
            o.flow_tolerance
        );
        for i in 0..self.n_nodes() {
            s += &format!("\n[[nodes]]\nid = \"{}\"\n", self.node_id(i));
            if i < self.heads.len() {
                s += &format!("kind = \"reservoir\"\nhead = {:?}\n", self.heads[i] / len);
            } else {
                let (elevation, demand) = self.junctions[i - self.heads.len()];
                s += &format!("elevation = {:?}\ndemand = {:?}\n", elevation / len, demand / flow);
            }
        }
        for (k, p) in self.pipes.iter().enumerate() {
            let roughness = match self.law {
                HeadLossLaw::HazenWilliams => p.roughness,
                HeadLossLaw::DarcyWeisbach => p.roughness / rough,
            };
            s += &format!(
                "\n[[links]]\nid = \"{}\"\nfrom = \"{}\"\nto = \"{}\"\nlength = {:?}\ndiameter = {:?}\n\
                 roughness = {:?}\nminor_loss = {:?}\n",
                Self::link_id(k),
                self.node_id(p.from),
                self.node_id(p.to),
                p.length / len,
                p.diameter / dia,
                roughness,
                p.minor_loss
            );
        }
        s
    }
}

/// Random pipe data: length m, diameter m, roughness (C or m), minor-loss sum K.
fn pipe_values(darcy: bool) -> impl Strategy<Value = (f64, f64, f64, f64)> {
    let roughness = if darcy { (1e-5..2e-3f64).boxed() } else { (80.0..150.0f64).boxed() };
    (50.0..2000.0f64, 0.08..0.6f64, roughness, prop_oneof![Just(0.0), 0.0..5.0f64])
}

fn network() -> impl Strategy<Value = Net> {
    (1usize..=3, 3usize..=40, any::<bool>())
        .prop_flat_map(|(n_r, n_j, darcy)| {
            let n = n_r + n_j;
            (
                Just(darcy),
                prop::collection::vec(60.0..100.0f64, n_r),
                prop::collection::vec((0.0..40.0f64, 0.5e-3..20e-3f64), n_j),
                Just((0..n).collect::<Vec<usize>>()).prop_shuffle(),
                prop::collection::vec((0.0..1.0f64, any::<bool>(), pipe_values(darcy)), n - 1),
                prop::collection::vec((0..n, 0..n, pipe_values(darcy)), 0..=n_j),
            )
        })
        .prop_map(|(darcy, heads, junctions, order, tree, extra)| {
            let n = order.len();
            let mut pipes = Vec::new();
            let mut push = |a: usize, b: usize, (length, diameter, roughness, minor_loss): (f64, f64, f64, f64)| {
                pipes.push(PipeSpec { from: a, to: b, length, diameter, roughness, minor_loss });
            };
            // Spanning tree: the t-th node of a random order hangs on one of the nodes before it.
            for (t, (u, flip, values)) in tree.into_iter().enumerate() {
                let child = order[t + 1];
                let parent = order[((u * (t + 1) as f64) as usize).min(t)];
                if flip {
                    push(child, parent, values);
                } else {
                    push(parent, child, values);
                }
            }
            // Extra links close loops.
            for (a, b, values) in extra {
                let b = if a == b { (b + 1) % n } else { b };
                push(a, b, values);
            }
            let law = if darcy { HeadLossLaw::DarcyWeisbach } else { HeadLossLaw::HazenWilliams };
            Net { law, heads, junctions, pipes }
        })
}

// --- Independent head-loss laws ---------------------------------------------------------------

/// Colebrook–White, `1/√f = −2 log10(ε/(3.7 D) + 2.51/(Re √f))`, by fixed-point iteration on
/// `x = 1/√f` (a contraction for turbulent Reynolds numbers).
fn colebrook(re: f64, relative_roughness: f64) -> f64 {
    let mut x = 8.0;
    for _ in 0..200 {
        let next = -2.0 * (relative_roughness / 3.7 + 2.51 * x / re).log10();
        let done = (next - x).abs() <= 1e-15 * x;
        x = next;
        if done {
            break;
        }
    }
    1.0 / (x * x)
}

/// Darcy friction factor: laminar `64/Re` below Re = 2000 (Hagen–Poiseuille), Colebrook–White
/// above Re = 4000. Between them no published law applies; the core bridges the gap with a cubic
/// Hermite interpolant in Re matching value and slope at both ends (its documented choice), which
/// is rebuilt here from that description with the Colebrook slope taken by a central difference.
fn friction_factor(re: f64, relative_roughness: f64) -> f64 {
    if re < 2000.0 {
        64.0 / re
    } else if re > 4000.0 {
        colebrook(re, relative_roughness)
    } else {
        let (f0, m0) = (64.0 / 2000.0, -64.0 / (2000.0 * 2000.0));
        let f1 = colebrook(4000.0, relative_roughness);
        let step = 4000.0 * 1e-5;
        let m1 = (colebrook(4000.0 + step, relative_roughness) - colebrook(4000.0 - step, relative_roughness))
            / (2.0 * step);
        let span = 2000.0;
        let t = (re - 2000.0) / span;
        let (t2, t3) = (t * t, t * t * t);
        (2.0 * t3 - 3.0 * t2 + 1.0) * f0
            + (t3 - 2.0 * t2 + t) * span * m0
            + (-2.0 * t3 + 3.0 * t2) * f1
            + (t3 - t2) * span * m1
    }
}

/// Head loss of a pipe at flow `q` (m³/s), signed like `q`.
fn head_loss(law: HeadLossLaw, p: &PipeSpec, q: f64) -> f64 {
    if q == 0.0 {
        return 0.0;
    }
    let area = PI * p.diameter * p.diameter / 4.0;
    let v = q.abs() / area;
    let friction = match law {
        HeadLossLaw::HazenWilliams => {
            // V = 0.849 C R^0.63 S^0.54 solved for S = h/L.
            let r = p.diameter / 4.0;
            p.length * (v / (0.849 * p.roughness * r.powf(0.63))).powf(1.0 / 0.54)
        }
        _ => {
            let f = friction_factor(v * p.diameter / NU, p.roughness / p.diameter);
            f * p.length / p.diameter * v * v / (2.0 * G)
        }
    };
    (friction + p.minor_loss * v * v / (2.0 * G)).copysign(q)
}

// --- Helpers ----------------------------------------------------------------------------------

fn solved(model: &Model) -> Result<Solution, TestCaseError> {
    solve(model).map_err(|e| TestCaseError::fail(format!("the solve failed: {e}")))
}

/// Head range of a solution (at least 1 m), the scale of head comparisons.
fn head_scale(s: &Solution) -> f64 {
    let max = s.head.iter().copied().fold(f64::MIN, f64::max);
    let min = s.head.iter().copied().fold(f64::MAX, f64::min);
    (max - min).max(1.0)
}

/// Largest flow magnitude of a solution, the scale of flow comparisons.
fn flow_scale(s: &Solution) -> f64 {
    s.flow.iter().fold(0.0f64, |m, q| m.max(q.abs()))
}

/// Compares two solutions per id: `sign[k]` is −1 for a link whose direction was reversed.
fn assert_same(
    net: &Net,
    a_model: &Model,
    a: &Solution,
    b_model: &Model,
    b: &Solution,
    sign: impl Fn(usize) -> f64,
) -> Result<(), TestCaseError> {
    let h_tol = HEAD_REL * head_scale(a);
    let q_tol = FLOW_REL * flow_scale(a);
    for i in 0..net.n_nodes() {
        let id = net.node_id(i);
        let (ia, ib) = (a_model.node_index(&id).expect("node"), b_model.node_index(&id).expect("node"));
        prop_assert!(
            (a.head[ia] - b.head[ib]).abs() <= h_tol,
            "head of {id}: {} vs {} (tolerance {h_tol:e})",
            a.head[ia],
            b.head[ib]
        );
    }
    for k in 0..net.pipes.len() {
        let id = Net::link_id(k);
        let (ka, kb) = (a_model.link_index(&id).expect("link"), b_model.link_index(&id).expect("link"));
        let (qa, qb) = (a.flow[ka], sign(k) * b.flow[kb]);
        prop_assert!((qa - qb).abs() <= q_tol, "flow of {id}: {qa} vs {qb} (tolerance {q_tol:e})");
    }
    Ok(())
}

/// A permutation of `0..n` from a seed (Fisher–Yates with the SplitMix64 generator).
fn permutation(n: usize, seed: u64) -> Vec<usize> {
    let mut state = seed;
    let mut next = move || {
        state = state.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = state;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^ (z >> 31)
    };
    let mut p: Vec<usize> = (0..n).collect();
    for i in (1..n).rev() {
        let j = (next() % (i as u64 + 1)) as usize;
        p.swap(i, j);
    }
    p
}

// --- Properties -------------------------------------------------------------------------------

proptest! {
    #![proptest_config(common::property_config(64))]

    /// (a) Σ inflow − Σ outflow = demand at every junction.
    #[test]
    fn mass_balance_at_every_junction(net in network()) {
        let model = net.build();
        let s = solved(&model)?;
        let tol = MASS_REL * net.total_demand();
        let mut balance = vec![0.0; net.n_nodes()];
        for (p, q) in net.pipes.iter().zip(&s.flow) {
            balance[p.to] += q;
            balance[p.from] -= q;
        }
        for (j, &(_, demand)) in net.junctions.iter().enumerate() {
            let i = net.heads.len() + j;
            prop_assert!(s.connected[i]);
            prop_assert!(
                (balance[i] - demand).abs() <= tol,
                "junction {}: inflow {} vs demand {demand} (tolerance {tol:e})", net.node_id(i), balance[i]
            );
        }
        // The supply of the reservoirs equals the total demand.
        let supply: f64 = (0..net.heads.len()).map(|i| -balance[i]).sum();
        prop_assert!((supply - net.total_demand()).abs() <= tol * net.n_nodes() as f64);
    }

    /// (b) h(Q) = H_from − H_to on every link, h recomputed here.
    #[test]
    fn energy_balance_on_every_link(net in network()) {
        let model = net.build();
        let s = solved(&model)?;
        let tol = HEAD_REL * head_scale(&s);
        for (k, p) in net.pipes.iter().enumerate() {
            let h = head_loss(net.law, p, s.flow[k]);
            let dh = s.head[p.from] - s.head[p.to];
            prop_assert!(
                (h - dh).abs() <= tol,
                "{}: h(Q = {}) = {h} but H_from - H_to = {dh} (tolerance {tol:e})", Net::link_id(k), s.flow[k]
            );
        }
        prop_assert!(s.max_energy_residual <= tol);
    }

    /// (c) Reversing one link negates its flow and changes nothing else.
    #[test]
    fn reversing_a_link_negates_its_flow(net in network(), pick in 0.0..1.0f64) {
        let k = ((pick * net.pipes.len() as f64) as usize).min(net.pipes.len() - 1);
        let mut flipped = net.clone();
        let p = &mut flipped.pipes[k];
        std::mem::swap(&mut p.from, &mut p.to);
        let (ma, mb) = (net.build(), flipped.build());
        let (a, b) = (solved(&ma)?, solved(&mb)?);
        assert_same(&net, &ma, &a, &mb, &b, |j| if j == k { -1.0 } else { 1.0 })?;
    }

    /// (d) Renumbering nodes and links changes no head or flow.
    #[test]
    fn renumbering_changes_nothing(net in network(), seed in any::<u64>()) {
        let nodes = permutation(net.n_nodes(), seed);
        let links = permutation(net.pipes.len(), seed ^ 0x5555_aaaa_5555_aaaa);
        let (ma, mb) = (net.build(), net.build_in_order(&nodes, &links));
        prop_assert_eq!(mb.node_index(&net.node_id(nodes[0])), Some(0));
        let (a, b) = (solved(&ma)?, solved(&mb)?);
        assert_same(&net, &ma, &a, &mb, &b, |_| 1.0)?;
    }

    /// (e) SI and US-customary model files give the API model's answer.
    #[test]
    fn si_and_us_files_agree(net in network()) {
        let api = net.build();
        let si = ringmain_core::read_str(&net.to_toml(false), ringmain_core::Format::Toml, "si.toml")
            .map_err(|e| TestCaseError::fail(e.to_string()))?;
        let us = ringmain_core::read_str(&net.to_toml(true), ringmain_core::Format::Toml, "us.toml")
            .map_err(|e| TestCaseError::fail(e.to_string()))?;
        prop_assert!(us.units.is_us_customary());
        let reference = solved(&api)?;
        for model in [&si, &us] {
            let s = solved(model)?;
            assert_same(&net, &api, &reference, model, &s, |_| 1.0)?;
        }
    }
}
