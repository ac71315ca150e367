//! `ringmain duty`'s system curve on a generated network: one solver reused across the 41 pump
//! flows (what [`ringmain_core::duty::analyse`] does), against a fresh model copy and a fresh
//! solver (analysis included) for every flow, measured in the same run.
//!
//! The network is a generated street network (`ringmain_core::generate`, seed 1) whose first
//! reservoir becomes a junction fed by a pump from a new well 30 m below it; the generated tank
//! stays as the storage downstream. Invented, as every network here.
//!
//! ```text
//! cargo bench --bench duty                                   # 10 000 junctions, criterion
//! RINGMAIN_BENCH_ONCE=1 cargo bench --bench duty             # one timed run of each, printed
//! RINGMAIN_BENCH_JUNCTIONS=100000 RINGMAIN_BENCH_ONCE=1 cargo bench --bench duty
//! ```

use criterion::{criterion_group, criterion_main, Criterion};
use ringmain_core::duty::{analyse, default_flows, DutyOptions};
use ringmain_core::generate::{generate, NetworkSpec};
use ringmain_core::model::{Pump, PumpDrive};
use ringmain_core::physics::pump::{Efficiency, HeadCurve};
use ringmain_core::{Link, LinkKind, LinkStatus, Model, Node, NodeKind};
use std::time::{Duration, Instant};

fn junctions() -> usize {
    std::env::var("RINGMAIN_BENCH_JUNCTIONS").ok().and_then(|s| s.parse().ok()).filter(|&n| n >= 100).unwrap_or(10_000)
}

/// The generated network with its first reservoir fed by a pump (see the module docs).
fn station(n: usize) -> Model {
    let mut m = generate(&NetworkSpec::new(n, 1)).expect("generated network");
    let r = m.nodes().iter().position(|n| matches!(n.kind, NodeKind::Reservoir { .. })).expect("a reservoir");
    let head = m.nodes()[r].fixed_head().unwrap_or(0.0);
    let mut node = m.nodes()[r].clone();
    node.kind = NodeKind::Junction { demand: 0.0 };
    node.elevation = head - 40.0;
    m.replace_node(r, node).expect("junction");
    let well = m.add_node(Node::reservoir("Well", head - 30.0)).expect("well");
    let q = m.nodes().iter().map(|n| n.demand()).sum::<f64>();
    let points = vec![(0.0, 60.0), (q, 45.0), (2.0 * q, 15.0)];
    let curve = HeadCurve::fit(&points).expect("pump curve");
    let pump = Pump {
        drive: PumpDrive::Curve { points, curve },
        efficiency_points: None,
        efficiency: Efficiency::Constant(0.75),
        speed: 1.0,
        elevation: None,
        npsh_required: None,
    };
    m.add_link(Link {
        id: "PU-bench".into(),
        from: well,
        to: r,
        status: LinkStatus::Open,
        kind: LinkKind::Pump(Box::new(pump)),
    })
    .expect("pump");
    m
}

/// The reference: the same flows, each on a fresh copy of the model with a fresh solver.
fn fresh_per_point(m: &Model) -> f64 {
    let k = m.link_index("PU-bench").expect("pump");
    let (from, to) = (m.links()[k].from, m.links()[k].to);
    let mut last = 0.0;
    for q in default_flows(m, k).expect("flows") {
        let mut w = m.clone();
        w.set_status(k, LinkStatus::Closed).expect("status");
        w.set_demand(to, -q).expect("demand");
        let s = ringmain_core::solve(&w).expect("solves");
        last = s.head[to] - s.head[from];
    }
    last
}

fn bench(c: &mut Criterion) {
    let n = junctions();
    let m = station(n);
    let options = DutyOptions::default();
    let clock = Instant::now();
    let a = analyse(&m, "PU-bench", &options).expect("duty");
    let reused = clock.elapsed();
    let clock = Instant::now();
    let last = fresh_per_point(&m);
    let fresh = clock.elapsed();
    let (_, h) = a.system_curve[a.system_curve.len() - 1];
    assert!((h - last).abs() < 1e-6 * h.abs().max(1.0), "the two ways agree: {h} vs {last}");
    eprintln!(
        "duty {n} junctions: {} flows and 1 speed with one solver {:.1} ms; the {} flows with a fresh copy and \
         solver each {:.1} ms",
        a.system_curve.len(),
        reused.as_secs_f64() * 1e3,
        a.system_curve.len(),
        fresh.as_secs_f64() * 1e3
    );
    if std::env::var_os("RINGMAIN_BENCH_ONCE").is_some() {
        return;
    }
    let mut group = c.benchmark_group("duty");
    group.sample_size(10).warm_up_time(Duration::from_millis(1)).measurement_time(Duration::from_secs(2));
    group.bench_function(format!("one_solver_{n}_junctions"), |b| b.iter(|| analyse(&m, "PU-bench", &options)));
    group.bench_function(format!("fresh_per_point_{n}_junctions"), |b| b.iter(|| fresh_per_point(&m)));
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
