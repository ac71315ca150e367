//! Deterministic tests of the gradient-method solver.
//!
//! The reference answers come from outside the solver:
//! * a small dense Newton solver written here, on the full system of flows and heads, with its
//!   own Gaussian elimination and its own head-loss laws;
//! * closed forms: the Hazen–Williams SI velocity form `V = 0.849 C R^0.63 S^0.54` with
//!   `R = D/4` (the standard SI form, written from memory), and the Colebrook–White equation
//!   rearranged for the velocity when the head loss is known,
//!   `V = −2 √(2 g D S) log10(ε/(3.7 D) + 2.51 ν / (D √(2 g D S)))` (exact, because
//!   `Re √f = D √(2 g D S) / ν` is known from the head loss);
//! * minor losses `h = K V²/2g` (common practice).
//!
//! Units: SI throughout (m, m³/s); demands are written as litres per second times 1e-3.

use ringmain_core::model::{HydraulicOptions, NodeKind, Tank, WaterSpec};
use ringmain_core::solve::links::REGULARISATION_VELOCITY;
use ringmain_core::{
    solve, Element, HeadLossLaw, Link, LinkKind, LinkState, LinkStatus, Model, Node, Pipe, Solution, SolveError,
    SolveOptions, Solver, UnitSystem,
};
use std::f64::consts::PI;

/// Standard gravity, m/s² (CGPM 1901).
const G: f64 = 9.806_65;
/// Kinematic viscosity for the Darcy–Weisbach cases, m²/s (water near 20 °C, common practice).
const NU: f64 = 1.0e-6;
/// One litre per second in m³/s.
const LPS: f64 = 1e-3;

// --- Building models --------------------------------------------------------------------------

fn options(law: HeadLossLaw) -> HydraulicOptions {
    HydraulicOptions { headloss: law, water: WaterSpec::KinematicViscosity(NU), ..HydraulicOptions::default() }
}

/// A pipe from one node id to another.
struct P {
    id: &'static str,
    from: &'static str,
    to: &'static str,
    length: f64,
    diameter: f64,
    roughness: f64,
    minor_loss: f64,
    check_valve: bool,
    closed: bool,
}

fn pipe(id: &'static str, from: &'static str, to: &'static str, length: f64, diameter: f64, roughness: f64) -> P {
    P { id, from, to, length, diameter, roughness, minor_loss: 0.0, check_valve: false, closed: false }
}

fn model(law: HeadLossLaw, nodes: Vec<Node>, pipes: &[P]) -> Model {
    let mut m = Model::new(UnitSystem::default(), options(law));
    for n in nodes {
        m.add_node(n).expect("valid node");
    }
    for p in pipes {
        let link = Link {
            id: p.id.into(),
            from: m.node_index(p.from).expect("from node"),
            to: m.node_index(p.to).expect("to node"),
            status: if p.closed { LinkStatus::Closed } else { LinkStatus::Open },
            kind: LinkKind::Pipe(Pipe {
                length: p.length,
                diameter: p.diameter,
                roughness: p.roughness,
                minor_loss: p.minor_loss,
                check_valve: p.check_valve,
            }),
        };
        m.add_link(link).expect("valid link");
    }
    m
}

fn tank(id: &str, elevation: f64, level: f64) -> Node {
    let mut node = Node::reservoir(id, 0.0);
    node.elevation = elevation;
    node.kind =
        NodeKind::Tank(Box::new(Tank { level, min_level: 0.0, max_level: Some(level + 2.0), diameter: Some(15.0) }));
    node
}

fn solved(m: &Model) -> Solution {
    solve(m).unwrap_or_else(|e| panic!("the solve failed: {e}"))
}

fn head(m: &Model, s: &Solution, id: &str) -> f64 {
    s.head[m.node_index(id).expect("node id")]
}

fn flow(m: &Model, s: &Solution, id: &str) -> f64 {
    s.flow[m.link_index(id).expect("link id")]
}

// --- Independent head-loss laws ---------------------------------------------------------------

/// Colebrook–White by fixed-point iteration on x = 1/√f.
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

/// Head loss of a pipe at flow q, signed like q: Hazen–Williams from the velocity form, or
/// Darcy–Weisbach with Colebrook–White (turbulent flow; laminar 64/Re below Re = 2000), plus
/// minor losses.
fn head_loss(law: HeadLossLaw, p: &Pipe, q: f64) -> f64 {
    if q == 0.0 {
        return 0.0;
    }
    let area = PI * p.diameter * p.diameter / 4.0;
    let v = q.abs() / area;
    let friction = match law {
        HeadLossLaw::HazenWilliams => {
            p.length * (v / (0.849 * p.roughness * (p.diameter / 4.0).powf(0.63))).powf(1.0 / 0.54)
        }
        _ => {
            let re = v * p.diameter / NU;
            assert!(!(2000.0..=4000.0).contains(&re), "the dense reference has no transitional law (Re = {re})");
            let f = if re < 2000.0 { 64.0 / re } else { colebrook(re, p.roughness / p.diameter) };
            f * p.length / p.diameter * v * v / (2.0 * G)
        }
    };
    (friction + p.minor_loss * v * v / (2.0 * G)).copysign(q)
}

// --- A dense Newton solver on the full system -------------------------------------------------

/// Solves `A x = b` by Gaussian elimination with partial pivoting (`a` is row-major, n × n).
fn gauss(mut a: Vec<f64>, mut b: Vec<f64>) -> Vec<f64> {
    let n = b.len();
    for col in 0..n {
        let pivot = (col..n).max_by(|&i, &j| a[i * n + col].abs().total_cmp(&a[j * n + col].abs())).expect("rows");
        assert!(a[pivot * n + col] != 0.0, "singular dense system");
        if pivot != col {
            for j in 0..n {
                a.swap(col * n + j, pivot * n + j);
            }
            b.swap(col, pivot);
        }
        for i in col + 1..n {
            let factor = a[i * n + col] / a[col * n + col];
            if factor != 0.0 {
                for j in col..n {
                    a[i * n + j] -= factor * a[col * n + j];
                }
                b[i] -= factor * b[col];
            }
        }
    }
    let mut x = vec![0.0; n];
    for i in (0..n).rev() {
        let s: f64 = (i + 1..n).map(|j| a[i * n + j] * x[j]).sum();
        x[i] = (b[i] - s) / a[i * n + i];
    }
    x
}

/// Heads and flows of `m` by Newton's method on the full system
/// `h_k(Q_k) − (H_from − H_to) = 0` (every open link) and `Σ Q_in − Σ Q_out = d_i` (every
/// junction), the Jacobian's head-loss slopes taken by central differences. Closed links carry
/// no flow and are left out. Every junction must be connected.
fn dense_solve(m: &Model) -> (Vec<f64>, Vec<f64>) {
    let law = m.options.headloss;
    let nodes = m.nodes();
    let links: Vec<(usize, &Link)> =
        m.links().iter().enumerate().filter(|(_, l)| l.status == LinkStatus::Open).collect();
    let mut unknown = vec![usize::MAX; nodes.len()];
    let mut n_h = 0;
    for (i, n) in nodes.iter().enumerate() {
        if n.fixed_head().is_none() {
            unknown[i] = links.len() + n_h;
            n_h += 1;
        }
    }
    let size = links.len() + n_h;
    let mut x = vec![0.0; size];
    for (row, (_, l)) in links.iter().enumerate() {
        // Start at 0.5 m/s everywhere (not the core's starting value).
        x[row] = 0.5 * PI * l.as_pipe().expect("pipe").diameter.powi(2) / 4.0;
    }
    let head_of = |x: &[f64], i: usize| nodes[i].fixed_head().unwrap_or_else(|| x[unknown[i]]);
    for _ in 0..300 {
        let mut jac = vec![0.0; size * size];
        let mut res = vec![0.0; size];
        for (row, (_, l)) in links.iter().enumerate() {
            let p = l.as_pipe().expect("pipe");
            let q = x[row];
            let dq = 1e-7 * q.abs().max(1e-9);
            res[row] = head_loss(law, p, q) - (head_of(&x, l.from) - head_of(&x, l.to));
            jac[row * size + row] = (head_loss(law, p, q + dq) - head_loss(law, p, q - dq)) / (2.0 * dq);
            if unknown[l.from] != usize::MAX {
                jac[row * size + unknown[l.from]] = -1.0;
            }
            if unknown[l.to] != usize::MAX {
                jac[row * size + unknown[l.to]] = 1.0;
            }
        }
        for (i, n) in nodes.iter().enumerate() {
            if unknown[i] == usize::MAX {
                continue;
            }
            let row = unknown[i];
            res[row] = -n.demand();
            for (col, (_, l)) in links.iter().enumerate() {
                if l.to == i {
                    res[row] += x[col];
                    jac[row * size + col] += 1.0;
                }
                if l.from == i {
                    res[row] -= x[col];
                    jac[row * size + col] -= 1.0;
                }
            }
        }
        let step = gauss(jac, res.iter().map(|r| -r).collect());
        for (xi, s) in x.iter_mut().zip(&step) {
            *xi += s;
        }
        let q_step = step[..links.len()].iter().fold(0.0f64, |a, s| a.max(s.abs()));
        let h_step = step[links.len()..].iter().fold(0.0f64, |a, s| a.max(s.abs()));
        if q_step < 1e-15 && h_step < 1e-11 {
            let heads = (0..nodes.len()).map(|i| head_of(&x, i)).collect();
            let mut flows = vec![0.0; m.links().len()];
            for (row, (k, _)) in links.iter().enumerate() {
                flows[*k] = x[row];
            }
            return (heads, flows);
        }
    }
    panic!("the dense reference solver did not converge");
}

/// Checks a solution of `m` against the dense reference.
fn assert_matches_dense(m: &Model, s: &Solution, head_tol: f64, flow_tol: f64) {
    let (heads, flows) = dense_solve(m);
    for (i, n) in m.nodes().iter().enumerate() {
        assert!((s.head[i] - heads[i]).abs() <= head_tol, "head of {}: {} vs dense {}", n.id, s.head[i], heads[i]);
    }
    for (k, l) in m.links().iter().enumerate() {
        assert!((s.flow[k] - flows[k]).abs() <= flow_tol, "flow of {}: {} vs dense {}", l.id, s.flow[k], flows[k]);
    }
}

// --- (a) Cross-check against the dense solver -------------------------------------------------

/// Two loops of six junctions between a reservoir and a tank (Hazen–Williams).
fn two_loops() -> Model {
    let nodes = vec![
        Node::reservoir("Lake", 72.0),
        tank("Hill-Tank", 58.0, 4.5),
        Node::junction("A", 20.0, 6.0 * LPS),
        Node::junction("B", 22.0, 9.0 * LPS),
        Node::junction("C", 18.0, 4.0 * LPS),
        Node::junction("D", 25.0, 12.0 * LPS),
        Node::junction("E", 21.0, 7.5 * LPS),
        Node::junction("F", 19.0, 3.0 * LPS),
    ];
    let pipes = [
        pipe("in", "Lake", "A", 900.0, 0.30, 120.0),
        pipe("AB", "A", "B", 400.0, 0.20, 110.0),
        pipe("BC", "B", "C", 350.0, 0.15, 100.0),
        pipe("AD", "A", "D", 500.0, 0.20, 130.0),
        pipe("BE", "B", "E", 450.0, 0.15, 105.0),
        pipe("CF", "C", "F", 300.0, 0.10, 95.0),
        pipe("DE", "D", "E", 420.0, 0.15, 115.0),
        pipe("EF", "E", "F", 380.0, 0.10, 100.0),
        pipe("tank", "Hill-Tank", "F", 700.0, 0.20, 125.0),
    ];
    model(HeadLossLaw::HazenWilliams, nodes, &pipes)
}

/// A loop with a pendant branch, Darcy–Weisbach with minor losses.
fn darcy_loop() -> Model {
    let nodes = vec![
        Node::reservoir("Source", 64.0),
        Node::junction("N1", 10.0, 15.0 * LPS),
        Node::junction("N2", 12.0, 10.0 * LPS),
        Node::junction("N3", 8.0, 20.0 * LPS),
        Node::junction("N4", 5.0, 5.0 * LPS),
    ];
    let mut pipes = vec![
        pipe("S1", "Source", "N1", 1200.0, 0.30, 0.25e-3),
        pipe("12", "N1", "N2", 600.0, 0.20, 0.1e-3),
        pipe("23", "N2", "N3", 550.0, 0.15, 0.5e-3),
        pipe("13", "N1", "N3", 800.0, 0.20, 0.05e-3),
        pipe("34", "N3", "N4", 300.0, 0.10, 0.25e-3),
    ];
    pipes[1].minor_loss = 3.5;
    pipes[4].minor_loss = 8.0;
    model(HeadLossLaw::DarcyWeisbach, nodes, &pipes)
}

/// Two reservoirs feeding a ring of four junctions with a parallel pair (Hazen–Williams), pipe
/// directions deliberately mixed.
fn two_sources() -> Model {
    let nodes = vec![
        Node::reservoir("North", 80.0),
        Node::reservoir("South", 76.0),
        Node::junction("W", 30.0, 8.0 * LPS),
        Node::junction("X", 32.0, 11.0 * LPS),
        Node::junction("Y", 28.0, 6.0 * LPS),
        Node::junction("Z", 31.0, 9.0 * LPS),
    ];
    let pipes = [
        pipe("n", "North", "W", 1500.0, 0.25, 120.0),
        pipe("s", "Y", "South", 1100.0, 0.20, 110.0),
        pipe("wx", "W", "X", 600.0, 0.15, 100.0),
        pipe("xy-1", "Y", "X", 650.0, 0.10, 90.0),
        pipe("xy-2", "X", "Y", 650.0, 0.15, 130.0),
        pipe("yz", "Y", "Z", 500.0, 0.15, 100.0),
        pipe("zw", "Z", "W", 700.0, 0.10, 100.0),
    ];
    model(HeadLossLaw::HazenWilliams, nodes, &pipes)
}

#[test]
fn matches_dense_newton_on_two_loops() {
    let m = two_loops();
    let s = solved(&m);
    assert_matches_dense(&m, &s, 1e-6, 1e-8);
}

#[test]
fn matches_dense_newton_with_darcy_weisbach_and_minor_losses() {
    let m = darcy_loop();
    let s = solved(&m);
    assert_matches_dense(&m, &s, 1e-6, 1e-8);
}

#[test]
fn matches_dense_newton_with_two_sources_and_parallel_pipes() {
    let m = two_sources();
    let s = solved(&m);
    assert_matches_dense(&m, &s, 1e-6, 1e-8);
    // Whatever each source does, together they supply exactly the total demand (34 L/s).
    let supply = s.net_outflow(&m, 0) + s.net_outflow(&m, 1);
    assert!((supply - 34.0 * LPS).abs() < 1e-12, "{supply}");
}

#[test]
fn solver_reuse_gives_the_same_answer() {
    // The reusable solver, cold and warm, gives the one-shot answer.
    let m = two_loops();
    let once = solved(&m);
    let mut solver = Solver::new(&m).expect("analysis");
    let cold = solver.solve_model(&m).expect("cold solve");
    let warm = solver.solve_with(&m, &SolveOptions { warm_start: true, ..SolveOptions::from_model(&m) }).expect("warm");
    for s in [&cold, &warm] {
        for (a, b) in once.head.iter().zip(&s.head) {
            assert!((a - b).abs() < 1e-6, "{a} vs {b}");
        }
    }
    assert_eq!(once.head, cold.head, "a cold solve repeats the one-shot solve exactly");
    assert!(warm.iterations < cold.iterations, "a warm start from the answer needs fewer iterations");
}

// --- (b) Zero flow by symmetry ----------------------------------------------------------------

/// A balanced bridge: the source feeds two mirror-image junctions L and R, which feed a common
/// junction below; the bridge L–R joins the mirror images, so its flow is exactly zero.
fn balanced_bridge() -> Model {
    let nodes = vec![
        Node::reservoir("Source", 60.0),
        Node::junction("L", 20.0, 5.0 * LPS),
        Node::junction("R", 20.0, 5.0 * LPS),
        Node::junction("Low", 15.0, 12.0 * LPS),
    ];
    let pipes = [
        pipe("SL", "Source", "L", 700.0, 0.20, 110.0),
        pipe("SR", "Source", "R", 700.0, 0.20, 110.0),
        pipe("L-low", "L", "Low", 400.0, 0.15, 100.0),
        pipe("R-low", "R", "Low", 400.0, 0.15, 100.0),
        pipe("bridge", "L", "R", 250.0, 0.15, 120.0),
    ];
    model(HeadLossLaw::HazenWilliams, nodes, &pipes)
}

#[test]
fn zero_flow_by_symmetry_converges_to_the_true_solution() {
    let m = balanced_bridge();
    let s = solved(&m);
    // The bridge flow: at most the regularisation velocity, and tiny next to the through flow.
    let area = PI * 0.15 * 0.15 / 4.0;
    let q = flow(&m, &s, "bridge");
    assert!(q.abs() <= REGULARISATION_VELOCITY * area, "bridge flow {q}");
    assert!(q.abs() <= 1e-4 * 22.0 * LPS, "bridge flow {q}");
    assert!((head(&m, &s, "L") - head(&m, &s, "R")).abs() < 1e-9);
    // Mirror flows are equal and the heads are those of the dense solution.
    assert!((flow(&m, &s, "SL") - flow(&m, &s, "SR")).abs() < 1e-9);
    assert_matches_dense(&m, &s, 1e-6, 1e-6 * 22.0 * LPS);
    // The same answer as the network without the bridge (zero flow is the exact solution).
    let without = model(
        HeadLossLaw::HazenWilliams,
        m.nodes().to_vec(),
        &[
            pipe("SL", "Source", "L", 700.0, 0.20, 110.0),
            pipe("SR", "Source", "R", 700.0, 0.20, 110.0),
            pipe("L-low", "L", "Low", 400.0, 0.15, 100.0),
            pipe("R-low", "R", "Low", 400.0, 0.15, 100.0),
        ],
    );
    let reference = solved(&without);
    for id in ["L", "R", "Low"] {
        assert!((head(&m, &s, id) - head(&without, &reference, id)).abs() < 1e-6, "{id}");
    }
}

#[test]
fn zero_flow_with_tighter_tolerances_still_converges() {
    // Near zero flow the regularised Jacobian converges slowly; tighter tolerances must still
    // end in an answer within the iteration limit, closer to zero.
    let m = balanced_bridge();
    let options = SolveOptions { head_tolerance: 1e-7, flow_tolerance: 1e-9, ..SolveOptions::from_model(&m) };
    let s = Solver::new(&m).expect("analysis").solve_with(&m, &options).unwrap_or_else(|e| panic!("{e}"));
    let q = flow(&m, &s, "bridge");
    assert!(q.abs() <= 1e-6 * 22.0 * LPS, "bridge flow {q}");
    assert_matches_dense(&m, &s, 1e-8, 1e-6 * 22.0 * LPS);
}

// --- (c) Closed pipes and disconnected junctions ----------------------------------------------

#[test]
fn closed_pipe_carries_no_flow_and_equals_removing_it() {
    let mut m = two_loops();
    let k = m.link_index("BE").expect("BE");
    m.set_status(k, LinkStatus::Closed).expect("status");
    let s = solved(&m);
    assert_eq!(s.flow[k], 0.0);
    assert_eq!(s.link_state[k], LinkState::Closed);
    // The dense reference leaves closed links out entirely.
    assert_matches_dense(&m, &s, 1e-6, 1e-8);
    // The closed pipe holds the head difference between its ends.
    let (b, e) = (head(&m, &s, "B"), head(&m, &s, "E"));
    assert!((s.headloss[k] - (b - e).abs()).abs() < 1e-12);
    assert!(s.warnings.is_empty(), "{:?}", s.warnings);
}

#[test]
fn junctions_isolated_by_closures_are_disconnected_and_the_rest_solves() {
    // Two junctions hang off the network through one closed pipe: "Far" behind "Cut".
    let base = two_loops();
    let mut nodes = base.nodes().to_vec();
    nodes.push(Node::junction("Cut", 15.0, 2.0 * LPS));
    nodes.push(Node::junction("Far", 14.0, 0.0));
    let mut pipes = vec![
        pipe("in", "Lake", "A", 900.0, 0.30, 120.0),
        pipe("AB", "A", "B", 400.0, 0.20, 110.0),
        pipe("BC", "B", "C", 350.0, 0.15, 100.0),
        pipe("AD", "A", "D", 500.0, 0.20, 130.0),
        pipe("BE", "B", "E", 450.0, 0.15, 105.0),
        pipe("CF", "C", "F", 300.0, 0.10, 95.0),
        pipe("DE", "D", "E", 420.0, 0.15, 115.0),
        pipe("EF", "E", "F", 380.0, 0.10, 100.0),
        pipe("tank", "Hill-Tank", "F", 700.0, 0.20, 125.0),
        pipe("to-cut", "C", "Cut", 200.0, 0.10, 100.0),
        pipe("cut-far", "Cut", "Far", 150.0, 0.10, 100.0),
    ];
    pipes[9].closed = true;
    let m = model(HeadLossLaw::HazenWilliams, nodes, &pipes);
    let s = solved(&m);
    for id in ["Cut", "Far"] {
        let i = m.node_index(id).expect("node");
        assert!(!s.connected[i], "{id} must be disconnected");
        assert!(s.head[i].is_nan() && s.pressure[i].is_nan(), "{id} has no head");
        let warned = s.warnings.iter().any(|w| {
            w.element == Some(Element::Node(id.to_owned())) && w.kind == ringmain_core::solve::WarningKind::CutOff
        });
        assert!(warned, "no cut-off warning for {id}: {:?}", s.warnings);
    }
    let cut_far = m.link_index("cut-far").expect("link");
    assert_eq!(s.link_state[cut_far], LinkState::Disconnected);
    assert_eq!(s.flow[cut_far], 0.0);
    assert_eq!(s.link_state[m.link_index("to-cut").expect("link")], LinkState::Closed);
    // Everything else is the answer of the network without them.
    let reference = solved(&base);
    for n in base.nodes() {
        assert!((head(&m, &s, &n.id) - head(&base, &reference, &n.id)).abs() < 1e-9, "{}", n.id);
        assert!(s.connected[m.node_index(&n.id).expect("node")]);
    }
    for l in base.links() {
        assert!((flow(&m, &s, &l.id) - flow(&base, &reference, &l.id)).abs() < 1e-12, "{}", l.id);
    }
    assert!(s.max_mass_residual < 1e-12);
}

// --- (d) Check valves -------------------------------------------------------------------------

/// A junction fed by `Low` through an ordinary pipe and joined to `High` (a higher reservoir)
/// by pipe `cv`, from `cv_from` to `cv_to`, with a check valve.
fn check_valve_case(cv_from: &'static str, cv_to: &'static str, check_valve: bool) -> Model {
    let nodes = vec![Node::reservoir("Low", 50.0), Node::reservoir("High", 60.0), Node::junction("J", 20.0, 5.0 * LPS)];
    let mut cv = pipe("cv", cv_from, cv_to, 600.0, 0.15, 110.0);
    cv.check_valve = check_valve;
    model(HeadLossLaw::HazenWilliams, nodes, &[pipe("feed", "Low", "J", 800.0, 0.15, 110.0), cv])
}

#[test]
fn check_valve_against_reverse_flow_closes() {
    // Oriented J -> High: the water would run High -> J, against the valve.
    let m = check_valve_case("J", "High", true);
    let s = solved(&m);
    let k = m.link_index("cv").expect("cv");
    assert_eq!(s.link_state[k], LinkState::CheckValveClosed);
    assert_eq!(s.flow[k], 0.0);
    assert!(head(&m, &s, "High") >= head(&m, &s, "J"), "a closed valve holds H_to >= H_from");
    assert!(s.status_changes >= 1);
    // The answer is that of the pipe closed by hand: J is fed from Low alone.
    let mut closed = check_valve_case("J", "High", false);
    closed.set_status(k, LinkStatus::Closed).expect("status");
    let reference = solved(&closed);
    assert!((head(&m, &s, "J") - head(&closed, &reference, "J")).abs() < 1e-9);
    assert!((flow(&m, &s, "feed") - 5.0 * LPS).abs() < 1e-12);
}

#[test]
fn check_valve_with_forward_flow_stays_open() {
    // Oriented High -> J: the valve lets the water through.
    let m = check_valve_case("High", "J", true);
    let s = solved(&m);
    let k = m.link_index("cv").expect("cv");
    assert_eq!(s.link_state[k], LinkState::Open);
    assert_eq!(s.status_changes, 0);
    assert!(s.flow[k] > 0.0);
    // Same answer as an ordinary pipe, and as the dense solution.
    let plain = check_valve_case("High", "J", false);
    let reference = solved(&plain);
    assert!((s.flow[k] - flow(&plain, &reference, "cv")).abs() < 1e-12);
    assert_matches_dense(&m, &s, 1e-6, 1e-8);
}

/// A network in which, with every valve open, two check valves both see reverse flow; once both
/// are closed, valve `A` must reopen.
///
/// `Top` (90 m) feeds junction `Ja` through `main`; `Ja` passes water to `Jb` through valve `A`
/// (oriented Ja -> Jb). `Jb` is also joined to the lower reservoir `Side` (80 m) by valve `B`
/// (oriented Jb -> Side) and to `Top` by a long, thin pipe. Open, `Side` pushes water back through
/// `B` into `Jb` and on backwards through `A` into `Ja`, whose large demand draws its head below
/// `Jb`'s. With both valves closed, `Jb` hangs on the thin pipe alone, its head falls far below
/// `Ja`'s, and `A` must open again; `B` stays closed.
fn reopening_case(valves: bool) -> Model {
    let nodes = vec![
        Node::reservoir("Top", 90.0),
        Node::reservoir("Side", 80.0),
        Node::junction("Ja", 10.0, 40.0 * LPS),
        Node::junction("Jb", 10.0, 10.0 * LPS),
    ];
    let mut a = pipe("A", "Ja", "Jb", 100.0, 0.20, 120.0);
    let mut b = pipe("B", "Jb", "Side", 100.0, 0.30, 120.0);
    a.check_valve = valves;
    b.check_valve = valves;
    let pipes = [pipe("main", "Top", "Ja", 2000.0, 0.15, 110.0), a, b, pipe("thin", "Top", "Jb", 3000.0, 0.05, 100.0)];
    model(HeadLossLaw::HazenWilliams, nodes, &pipes)
}

#[test]
fn check_valve_reopens_when_it_must() {
    // The premise: with ordinary pipes both A and B carry reverse flow.
    let plain = reopening_case(false);
    let p = solved(&plain);
    assert!(flow(&plain, &p, "A") < 0.0 && flow(&plain, &p, "B") < 0.0, "{:?}", p.flow);

    let m = reopening_case(true);
    let s = solved(&m);
    let (a, b) = (m.link_index("A").expect("A"), m.link_index("B").expect("B"));
    assert_eq!(s.link_state[a], LinkState::Open, "A must have reopened");
    assert!(s.flow[a] > 0.0, "A carries forward flow: {}", s.flow[a]);
    assert_eq!(s.link_state[b], LinkState::CheckValveClosed);
    assert_eq!(s.flow[b], 0.0);
    assert!(head(&m, &s, "Side") >= head(&m, &s, "Jb"), "B holds back: H_to >= H_from");
    assert!(head(&m, &s, "Ja") >= head(&m, &s, "Jb"), "A open with forward flow");
    // A closed and reopened: at least three state changes (A and B close, A opens).
    assert!(s.status_changes >= 3, "status changes: {}", s.status_changes);
    // The answer is that of the network with B closed by hand and A an ordinary pipe.
    let mut reference_model = reopening_case(false);
    reference_model.set_status(b, LinkStatus::Closed).expect("status");
    let reference = solved(&reference_model);
    assert_matches_dense(&reference_model, &s, 1e-6, 1e-8);
    for (x, y) in s.head.iter().zip(&reference.head) {
        assert!((x - y).abs() < 1e-6, "{x} vs {y}");
    }
}

// --- (e) Two reservoirs, one pipe: closed forms -----------------------------------------------

/// Hazen–Williams flow for a head difference `dh` across a pipe, from `V = 0.849 C R^0.63 S^0.54`.
fn hazen_williams_flow(dh: f64, length: f64, diameter: f64, c: f64) -> f64 {
    let v = 0.849 * c * (diameter / 4.0).powf(0.63) * (dh / length).powf(0.54);
    v * PI * diameter * diameter / 4.0
}

/// Colebrook–White flow for a head difference `dh`, exact (see the module docs).
fn colebrook_flow(dh: f64, length: f64, diameter: f64, roughness: f64) -> f64 {
    let root = (2.0 * G * diameter * dh / length).sqrt();
    let v = -2.0 * root * (roughness / (3.7 * diameter) + 2.51 * NU / (diameter * root)).log10();
    v * PI * diameter * diameter / 4.0
}

#[test]
fn two_reservoirs_one_pipe_hazen_williams() {
    let nodes = vec![Node::reservoir("Upper", 55.0), Node::reservoir("Lower", 43.5)];
    let m = model(HeadLossLaw::HazenWilliams, nodes, &[pipe("P", "Upper", "Lower", 1250.0, 0.25, 115.0)]);
    let s = solved(&m);
    let expected = hazen_williams_flow(11.5, 1250.0, 0.25, 115.0);
    assert!((s.flow[0] - expected).abs() <= 1e-9 * expected, "{} vs {expected}", s.flow[0]);
    assert!((s.headloss[0] - 11.5).abs() < 1e-12);
}

#[test]
fn two_reservoirs_one_pipe_reversed_direction() {
    // The pipe drawn from the lower to the upper reservoir: the same flow, negative.
    let nodes = vec![Node::reservoir("Upper", 55.0), Node::reservoir("Lower", 43.5)];
    let m = model(HeadLossLaw::HazenWilliams, nodes, &[pipe("P", "Lower", "Upper", 1250.0, 0.25, 115.0)]);
    let s = solved(&m);
    let expected = -hazen_williams_flow(11.5, 1250.0, 0.25, 115.0);
    assert!((s.flow[0] - expected).abs() <= 1e-9 * expected.abs(), "{} vs {expected}", s.flow[0]);
}

#[test]
fn two_reservoirs_through_a_junction_hazen_williams() {
    // Two equal pipes in series through a junction without demand: one pipe of twice the length.
    let nodes = vec![Node::reservoir("Upper", 55.0), Node::junction("Mid", 30.0, 0.0), Node::reservoir("Lower", 43.5)];
    let pipes = [pipe("P1", "Upper", "Mid", 625.0, 0.25, 115.0), pipe("P2", "Mid", "Lower", 625.0, 0.25, 115.0)];
    let m = model(HeadLossLaw::HazenWilliams, nodes, &pipes);
    let s = solved(&m);
    let expected = hazen_williams_flow(11.5, 1250.0, 0.25, 115.0);
    for k in 0..2 {
        assert!((s.flow[k] - expected).abs() <= 1e-9 * expected, "{} vs {expected}", s.flow[k]);
    }
    assert!((head(&m, &s, "Mid") - (55.0 + 43.5) / 2.0).abs() < 1e-6);
}

#[test]
fn two_reservoirs_one_pipe_colebrook_white() {
    let nodes = vec![Node::reservoir("Upper", 40.0), Node::reservoir("Lower", 32.0)];
    let m = model(HeadLossLaw::DarcyWeisbach, nodes, &[pipe("P", "Upper", "Lower", 900.0, 0.2, 0.15e-3)]);
    let s = solved(&m);
    let expected = colebrook_flow(8.0, 900.0, 0.2, 0.15e-3);
    let re = expected / (PI * 0.01) * 0.2 / NU;
    assert!(re > 1e5, "turbulent: Re = {re}");
    assert!((s.flow[0] - expected).abs() <= 1e-9 * expected, "{} vs {expected}", s.flow[0]);
}

// --- (f) A pipe whose loss is mostly minor loss -----------------------------------------------

#[test]
fn minor_loss_dominated_pipe() {
    // A 3 m connection with a throttled valve (K = 60) between two reservoirs 6 m apart.
    let nodes = vec![Node::reservoir("Upper", 26.0), Node::reservoir("Lower", 20.0)];
    let mut p = pipe("valve-run", "Upper", "Lower", 3.0, 0.1, 130.0);
    p.minor_loss = 60.0;
    let m = model(HeadLossLaw::HazenWilliams, nodes, &[p]);
    let s = solved(&m);
    // Reference: bisection on the independent law h(Q) = 6 m.
    let law = m.links()[0].as_pipe().expect("pipe").clone();
    let (mut lo, mut hi) = (0.0, 1.0);
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if head_loss(HeadLossLaw::HazenWilliams, &law, mid) < 6.0 {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    let expected = 0.5 * (lo + hi);
    assert!((s.flow[0] - expected).abs() <= 1e-9 * expected, "{} vs {expected}", s.flow[0]);
    // The minor loss is most of the head difference, so the flow is close to A √(2 g ΔH / K).
    let v = expected / (PI * 0.01 / 4.0);
    let minor = 60.0 * v * v / (2.0 * G);
    assert!(minor / 6.0 > 0.95, "minor share {}", minor / 6.0);
    let orifice_like = PI * 0.01 / 4.0 * (2.0 * G * 6.0 / 60.0).sqrt();
    assert!(s.flow[0] < orifice_like && s.flow[0] > 0.97 * orifice_like);
}

#[test]
fn minor_loss_in_a_network_matches_dense() {
    // The two-loop network with a large loss on one loop pipe and one source pipe.
    let base = two_loops();
    let mut m = Model::new(base.units, base.options);
    for n in base.nodes() {
        m.add_node(n.clone()).expect("node");
    }
    for l in base.links() {
        let mut l = l.clone();
        let LinkKind::Pipe(p) = &mut l.kind else { unreachable!("pipes only") };
        if l.id == "DE" || l.id == "in" {
            p.minor_loss = 25.0;
        }
        m.add_link(l).expect("link");
    }
    let s = solved(&m);
    assert_matches_dense(&m, &s, 1e-6, 1e-8);
}

// --- (g) A 20 x 20 grid -----------------------------------------------------------------------

#[test]
fn grid_of_400_junctions_converges_fast() {
    const N: usize = 20;
    let id = |i: usize, j: usize| format!("G{i}-{j}");
    let mut m = Model::new(UnitSystem::default(), options(HeadLossLaw::HazenWilliams));
    m.add_node(Node::reservoir("West", 95.0)).expect("node");
    m.add_node(Node::reservoir("East", 92.0)).expect("node");
    for i in 0..N {
        for j in 0..N {
            let demand = (0.5 + ((7 * i + 3 * j) % 5) as f64 * 0.25) * LPS;
            m.add_node(Node::junction(id(i, j), 10.0 + (i + j) as f64 * 0.5, demand)).expect("node");
        }
    }
    let mut add = |name: String, a: &str, b: &str, length: f64, diameter: f64| {
        let link = Link {
            id: name.into(),
            from: m.node_index(a).expect("from"),
            to: m.node_index(b).expect("to"),
            status: LinkStatus::Open,
            kind: LinkKind::Pipe(Pipe { length, diameter, roughness: 110.0, minor_loss: 0.0, check_valve: false }),
        };
        m.add_link(link).expect("link");
    };
    add("west-main".into(), "West", &id(0, 0), 500.0, 0.5);
    add("east-main".into(), "East", &id(N - 1, N / 2), 500.0, 0.4);
    for i in 0..N {
        for j in 0..N {
            // Mains every fifth row and column, distribution pipes elsewhere.
            if i + 1 < N {
                let d = if j % 5 == 0 { 0.25 } else { 0.10 };
                add(format!("V{i}-{j}"), &id(i, j), &id(i + 1, j), 150.0 + (j % 3) as f64 * 20.0, d);
            }
            if j + 1 < N {
                let d = if i % 5 == 0 { 0.25 } else { 0.10 };
                add(format!("H{i}-{j}"), &id(i, j), &id(i, j + 1), 120.0 + (i % 4) as f64 * 15.0, d);
            }
        }
    }
    assert_eq!(m.links().len(), 2 + 2 * N * (N - 1));
    let s = solved(&m);
    assert!(s.iterations <= 12, "{} iterations", s.iterations);
    let total: f64 = m.nodes().iter().map(|n| n.demand()).sum();
    assert!(s.max_mass_residual <= 1e-12 * total.max(1.0) * 1e3, "mass residual {}", s.max_mass_residual);
    assert!(s.max_energy_residual <= 1e-6, "energy residual {}", s.max_energy_residual);
    // Independent check of every link's energy equation and of the supply.
    for (k, l) in m.links().iter().enumerate() {
        let h = head_loss(HeadLossLaw::HazenWilliams, l.as_pipe().expect("pipe"), s.flow[k]);
        let dh = s.head[l.from] - s.head[l.to];
        assert!((h - dh).abs() <= 1e-6, "{}: {h} vs {dh}", l.id);
    }
    let supply = s.net_outflow(&m, 0) + s.net_outflow(&m, 1);
    assert!((supply - total).abs() <= 1e-9 * total, "{supply} vs {total}");
}

// --- Failure is an error, never a wrong answer --------------------------------------------------

#[test]
fn iteration_limit_gives_not_converged() {
    let mut m = two_loops();
    m.options.max_iterations = 2;
    match solve(&m) {
        Err(SolveError::NotConverged { iterations, worst_nodes, worst_links, .. }) => {
            assert_eq!(iterations, 2);
            assert!(!worst_nodes.is_empty() && !worst_links.is_empty());
            assert!(worst_nodes.iter().all(|o| o.value.is_finite()), "{worst_nodes:?}");
        }
        other => panic!("expected NotConverged, got {other:?}"),
    }
}

/// Regression test for a head tolerance below the rounding floor of the heads. Heads are solved in
/// absolute form, so the last digits of the head of a junction that hangs on one heavily loaded
/// pipe carry a rounding floor of about `ε · cond · |H|`. Here a 200 mm main carries 90 L/s
/// (2.9 m/s, a plausible peak) to `A`, and a 600 mm branch carries 0.05 L/s on to `B`:
/// successive head solutions keep differing by about 5e-9 m, so a 1e-9 m head-change test alone
/// is never met. The solver then accepts the iterate whose energy equations hold to the tolerance.
/// The answer is checked against the closed-form head loss to 1e-7 m (the floor measured here is
/// about 2e-8 m on a 62 m head loss, 3e-10 relative).
#[test]
fn tight_head_tolerance_on_a_stiff_chain() {
    let nodes =
        vec![Node::reservoir("R", 100.0), Node::junction("A", 0.0, 90.0 * LPS), Node::junction("B", 0.0, 0.05 * LPS)];
    let m = model(
        HeadLossLaw::HazenWilliams,
        nodes,
        &[pipe("main", "R", "A", 1000.0, 0.2, 100.0), pipe("branch", "A", "B", 50.0, 0.6, 140.0)],
    );
    let options = SolveOptions { head_tolerance: 1e-9, ..SolveOptions::from_model(&m) };
    let s = Solver::new(&m).expect("analysis").solve_with(&m, &options).unwrap_or_else(|e| panic!("{e}"));
    let expected = 100.0 - head_loss(HeadLossLaw::HazenWilliams, m.links()[0].as_pipe().expect("pipe"), 90.05 * LPS);
    let got = head(&m, &s, "A");
    assert!((got - expected).abs() < 1e-7, "head {got} vs {expected}: {:e}", got - expected);
}

// --- Non-finite values never leave the solver -----------------------------------------------

/// A loop fed by a reservoir with a dead-end branch, a pump and a Darcy–Weisbach variant, with
/// one numeric value replaced by `{v}` at the marked place.
fn extreme_model(place: &str, value: &str, law: &str) -> String {
    let v = |p: &str, normal: &str| if p == place { value.to_owned() } else { normal.to_owned() };
    format!(
        r#"
[hydraulics]
headloss = "{law}"
[[nodes]]
id = "R"
kind = "reservoir"
head = {}
[[nodes]]
id = "Sump"
kind = "reservoir"
head = 5
[[nodes]]
id = "J1"
elevation = {}
demand = {}
[[nodes]]
id = "J2"
elevation = 10
demand = 3
[[nodes]]
id = "End"
elevation = 12
demand = {}
[[links]]
id = "P1"
from = "R"
to = "J1"
length = {}
diameter = {}
roughness = {}
minor_loss = {}
[[links]]
id = "P2"
from = "J1"
to = "J2"
length = 300
diameter = 100
roughness = {}
[[links]]
id = "P3"
from = "R"
to = "J2"
length = 800
diameter = 100
roughness = {}
[[links]]
id = "Dead end"
from = "J2"
to = "End"
length = {}
diameter = {}
roughness = {}
[[links]]
id = "Booster"
kind = "pump"
from = "Sump"
to = "J1"
head_curve = [[0, {}], [10, 40], [15, 30]]
speed = {}
"#,
        v("head", "60"),
        v("elevation", "10"),
        v("demand", "5"),
        v("end demand", "1"),
        v("length", "400"),
        v("diameter", "150"),
        v("roughness", if law == "hazen-williams" { "120" } else { "0.1" }),
        v("minor_loss", "0"),
        if law == "hazen-williams" { "110" } else { "0.1" },
        if law == "hazen-williams" { "100" } else { "0.1" },
        v("end length", "200"),
        v("end diameter", "80"),
        if law == "hazen-williams" { "100" } else { "0.1" },
        v("shutoff", "50"),
        v("speed", "1"),
    )
}

/// Fault: a dead-end pipe of absurdly small diameter gave its junction `head: null` with
/// `connected: true` and no warning, and criteria then passed over the junctions without values.
/// The class: every numeric key of junctions, reservoirs, pipes (looped and dead-end) and pumps,
/// under both friction laws, at extreme values (the largest and the smallest double, 1e±30).
/// The model is refused naming the element and key, or the solve fails naming the element (or
/// does not converge, naming nodes), or every value of the solution is a finite number.
#[test]
fn non_finite_value_in_a_solution_is_an_error_naming_the_element() {
    let places = [
        "head",
        "elevation",
        "demand",
        "end demand",
        "length",
        "diameter",
        "roughness",
        "minor_loss",
        "end length",
        "end diameter",
        "shutoff",
        "speed",
    ];
    let values = ["1e308", "-1e308", "1e30", "1e-30", "1e-300", "5e-324"];
    let ids = ["'R'", "'Sump'", "'J1'", "'J2'", "'End'", "'P1'", "'P2'", "'P3'", "'Dead end'", "'Booster'"];
    let mut bad = Vec::new();
    for law in ["hazen-williams", "darcy-weisbach"] {
        for place in places {
            for value in values {
                let text = extreme_model(place, value, law);
                let case = format!("{law}, {place} = {value}");
                let m = match ringmain_core::read_str(&text, ringmain_core::Format::Toml, "x.toml") {
                    Ok(m) => m,
                    Err(e) => {
                        if e.element.is_none() || e.key.is_none() {
                            bad.push(format!("{case}: refused without element and key: {e}"));
                        }
                        continue;
                    }
                };
                match solve(&m) {
                    Ok(s) => {
                        for (i, n) in m.nodes().iter().enumerate() {
                            if s.connected[i] && !(s.head[i].is_finite() && s.pressure[i].is_finite()) {
                                bad.push(format!("{case}: node {} connected with head {}", n.id, s.head[i]));
                            }
                        }
                        for (k, l) in m.links().iter().enumerate() {
                            if !s.flow[k].is_finite() {
                                bad.push(format!("{case}: link {} flow {}", l.id, s.flow[k]));
                            }
                        }
                    }
                    Err(e) => {
                        let text = e.to_string();
                        if !ids.iter().any(|id| text.contains(id)) {
                            bad.push(format!("{case}: error names no element: {text}"));
                        }
                    }
                }
            }
        }
    }
    assert!(bad.is_empty(), "{} cases:\n{}", bad.len(), bad.join("\n"));
}
