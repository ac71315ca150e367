//! Property tests of the device status logic: random looped networks with random control valves,
//! check valves and pumps always end (no endless switching), and the final states satisfy every
//! device's defining conditions, checked here independently of the solver's own rules.

use proptest::prelude::*;
use ringmain_core::model::{HydraulicOptions, PumpDrive, Valve, ValveType};
use ringmain_core::physics::pump::{Efficiency, HeadCurve};
use ringmain_core::{solve, Link, LinkKind, LinkState, LinkStatus, Model, Node, Pipe, SolveError, UnitSystem};
use std::f64::consts::PI;

const G: f64 = 9.80665;
/// Head tolerance the conditions are checked with: ten times the solver's default (1e-4 m).
const TAU: f64 = 1e-3;

#[derive(Debug, Clone)]
struct Case {
    junctions: Vec<(f64, f64)>,          // elevation m, demand L/s
    tree_parent: Vec<usize>,             // parent of junction i+1 among 0..=i
    loops: Vec<(usize, usize)>,          // extra pipes between junctions
    devices: Vec<(usize, u8, f64, f64)>, // (tree edge index, kind 0..4, setting fraction, K)
    reservoir_heads: Vec<f64>,
    pump: Option<f64>, // shutoff head of a pump feeding junction 0 from a sump
}

fn case() -> impl Strategy<Value = Case> {
    (4usize..24).prop_flat_map(|n| {
        (
            prop::collection::vec((0.0f64..40.0, 0.0f64..6.0), n),
            (1..n).map(|i| 0..i).collect::<Vec<_>>(),
            prop::collection::vec((0..n, 0..n), 0..n / 2),
            prop::collection::vec((0..n - 1, 0u8..5, 0.05f64..1.0, 0.0f64..5.0), 1..5),
            prop::collection::vec(60.0f64..110.0, 1..3),
            prop::option::of(40.0f64..90.0),
        )
            .prop_map(|(junctions, tree_parent, loops, devices, reservoir_heads, pump)| Case {
                junctions,
                tree_parent,
                loops,
                devices,
                reservoir_heads,
                pump,
            })
    })
}

fn pipe(length: f64, d: f64, c: f64, check_valve: bool) -> LinkKind {
    LinkKind::Pipe(Pipe { length, diameter: d, roughness: c, minor_loss: 0.0, check_valve })
}

fn build(c: &Case) -> Model {
    let mut m = Model::new(UnitSystem::default(), HydraulicOptions::default());
    for (i, &(z, d)) in c.junctions.iter().enumerate() {
        m.add_node(Node::junction(format!("J{i}"), z, d * 1e-3)).unwrap();
    }
    let n = c.junctions.len();
    for (r, &h) in c.reservoir_heads.iter().enumerate() {
        m.add_node(Node::reservoir(format!("R{r}"), h)).unwrap();
    }
    let mut id = 0;
    let mut add = |m: &mut Model, from: usize, to: usize, kind: LinkKind| {
        id += 1;
        m.add_link(Link { id: format!("L{id}").into(), from, to, status: LinkStatus::Open, kind }).unwrap();
    };
    // Reservoir r feeds junction (r * n / count).
    for r in 0..c.reservoir_heads.len() {
        add(&mut m, n + r, r * n / c.reservoir_heads.len(), pipe(300.0, 0.3, 120.0, false));
    }
    if let Some(shutoff) = c.pump {
        let sump = m.add_node(Node::reservoir("Sump", 0.0)).unwrap();
        let curve = [(0.0, shutoff), (0.05, 0.8 * shutoff), (0.08, 0.5 * shutoff)];
        let kind = LinkKind::Pump(Box::new(ringmain_core::model::Pump {
            drive: PumpDrive::Curve { points: curve.to_vec(), curve: HeadCurve::fit(&curve).unwrap() },
            efficiency_points: None,
            efficiency: Efficiency::Constant(0.75),
            speed: 1.0,
            elevation: None,
            npsh_required: None,
        }));
        add(&mut m, sump, n - 1, kind);
    }
    for (e, &parent) in c.tree_parent.iter().enumerate() {
        let child = e + 1;
        let device = c.devices.iter().find(|d| d.0 == e);
        let kind = match device {
            None => pipe(200.0 + 40.0 * (e % 7) as f64, 0.15, 110.0, false),
            Some(&(_, kind, frac, k)) => match kind {
                0 => pipe(150.0, 0.15, 110.0, true),
                1..=4 => {
                    let valve = [
                        ValveType::PressureReducing,
                        ValveType::PressureSustaining,
                        ValveType::FlowControl,
                        ValveType::Throttle,
                    ][kind as usize - 1];
                    let setting = match valve {
                        ValveType::PressureReducing | ValveType::PressureSustaining => 10.0 + 60.0 * frac,
                        ValveType::FlowControl => 0.02 * frac,
                        ValveType::Throttle => 50.0 * frac,
                    };
                    LinkKind::Valve(Valve { valve, diameter: 0.15, setting, minor_loss: k, automatic: true })
                }
                _ => unreachable!(),
            },
        };
        add(&mut m, parent, child, kind);
    }
    for &(a, b) in &c.loops {
        if a != b {
            add(&mut m, a, b, pipe(400.0, 0.1, 100.0, false));
        }
    }
    m
}

fn open_loss(k: f64, d: f64, q: f64) -> f64 {
    let v = q / (PI * d * d / 4.0);
    k * v * v.abs() / (2.0 * G)
}

/// Every device's defining condition, from the solution alone.
fn check_conditions(m: &Model, s: &ringmain_core::Solution) -> Result<(), String> {
    for (k, l) in m.links().iter().enumerate() {
        let (ha, hb) = (s.head[l.from], s.head[l.to]);
        if ha.is_nan() || hb.is_nan() {
            continue;
        }
        let q = s.flow[k];
        let st = s.link_state[k];
        let fail = |what: &str| Err(format!("{} ({:?}): {what}; Q = {q}, H_from = {ha}, H_to = {hb}", l.id, st));
        match &l.kind {
            LinkKind::Pipe(p) if p.check_valve => match st {
                LinkState::Open if q < -1e-9 => return fail("open check valve with reverse flow"),
                LinkState::CheckValveClosed if ha > hb + TAU => return fail("closed check valve pushed forwards"),
                _ => {}
            },
            LinkKind::Pump(_) => match st {
                LinkState::Open if q < -1e-9 => return fail("pump running backwards"),
                _ => {}
            },
            LinkKind::Valve(v) => {
                let z_to = m.nodes()[l.to].elevation;
                let z_from = m.nodes()[l.from].elevation;
                let set_to = z_to + v.setting;
                let set_from = z_from + v.setting;
                let ok = match (v.valve, st) {
                    (ValveType::PressureReducing, LinkState::Active) => {
                        (hb - set_to).abs() < 1e-6
                            && q >= -1e-9
                            && ha >= hb + open_loss(v.minor_loss, v.diameter, q) - TAU
                    }
                    (ValveType::PressureReducing, LinkState::OpenUpstreamLow) => {
                        q >= -1e-9
                            && hb <= set_to + TAU
                            && (ha - hb - open_loss(v.minor_loss, v.diameter, q)).abs() < TAU
                    }
                    (ValveType::PressureReducing, LinkState::ValveClosed) => {
                        q == 0.0 && (hb >= set_to - TAU || ha <= hb + TAU)
                    }
                    (ValveType::PressureSustaining, LinkState::Active) => {
                        (ha - set_from).abs() < 1e-6
                            && q >= -1e-9
                            && hb <= ha - open_loss(v.minor_loss, v.diameter, q) + TAU
                    }
                    (ValveType::PressureSustaining, LinkState::OpenAboveSetting) => {
                        q >= -1e-9
                            && ha >= set_from - TAU
                            && (ha - hb - open_loss(v.minor_loss, v.diameter, q)).abs() < TAU
                    }
                    (ValveType::PressureSustaining, LinkState::ValveClosed) => {
                        q == 0.0 && (ha <= set_from + TAU || ha <= hb + TAU)
                    }
                    (ValveType::FlowControl, LinkState::Active) => {
                        (q - v.setting).abs() < 1e-12 && ha - hb >= open_loss(v.minor_loss, v.diameter, q) - TAU
                    }
                    (ValveType::FlowControl, LinkState::OpenBelowSetting) => q >= -1e-9 && q <= v.setting + 1e-9,
                    (ValveType::FlowControl, LinkState::ValveClosed) => q == 0.0 && ha <= hb + TAU,
                    (ValveType::Throttle, LinkState::Open) => {
                        (ha - hb - open_loss(v.setting, v.diameter, q)).abs() < TAU
                    }
                    (_, LinkState::Disconnected) => true,
                    _ => false,
                };
                if !ok {
                    return fail("condition of its state does not hold");
                }
            }
            _ => {}
        }
    }
    Ok(())
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 256, ..ProptestConfig::default() })]

    #[test]
    fn device_states_terminate_and_satisfy_their_conditions(c in case()) {
        let m = build(&c);
        match solve(&m) {
            Ok(s) => {
                if let Err(e) = check_conditions(&m, &s) {
                    return Err(TestCaseError::fail(e));
                }
            }
            // A diagnosis naming the devices is an acceptable end; running out of iterations is not.
            Err(SolveError::StatusCycle { links, .. }) => prop_assert!(!links.is_empty()),
            Err(e) => return Err(TestCaseError::fail(format!("{e}"))),
        }
    }
}
