//! A 7-day extended-period simulation of the generated 10,000-junction network with hourly
//! demand patterns: what one hydraulic stage costs over a long run.
//!
//! The network is `generate(&NetworkSpec::new(10_000, 1))` (one reservoir, one 30 m tank). Every
//! junction's demand follows one of three invented daily patterns of 24 hourly multipliers (a
//! residential double peak, a flat commercial day and a night-shift load), so each hour changes
//! every demand and the tank's level moves all week.
//!
//! ```text
//! cargo bench --bench simulate                          # criterion, 10 samples
//! RINGMAIN_BENCH_ONCE=1 cargo bench --bench simulate    # one timed run, printed
//! RINGMAIN_BENCH_SIDE=2000 RINGMAIN_BENCH_ONCE=1 cargo bench --bench simulate   # a smaller network
//! ```

use criterion::{criterion_group, criterion_main, Criterion};
use ringmain_core::generate::{generate, NetworkSpec};
use ringmain_core::model::time::{Demand, SimulationSettings, TimePattern, DAY, HOUR};
use ringmain_core::simulate::simulate;
use ringmain_core::{Model, NodeKind};
use std::time::{Duration, Instant};

/// Junctions of the generated network (10,000); `RINGMAIN_BENCH_SIDE` overrides it.
fn junctions() -> usize {
    std::env::var("RINGMAIN_BENCH_SIDE").ok().and_then(|s| s.parse().ok()).filter(|&s| s >= 100).unwrap_or(10_000)
}

/// The generated network with three hourly demand patterns and a 7-day `[simulation]`.
fn network(n: usize) -> Model {
    let mut m = generate(&NetworkSpec::new(n, 1)).expect("the generator accepts its defaults");
    // Invented daily shapes, each averaging about 1.
    let residential = [
        0.45, 0.40, 0.38, 0.38, 0.45, 0.70, 1.20, 1.60, 1.45, 1.20, 1.05, 1.00, 1.05, 1.00, 0.95, 0.95, 1.05, 1.30,
        1.55, 1.50, 1.30, 1.05, 0.80, 0.60,
    ];
    let commercial = [
        0.30, 0.30, 0.30, 0.30, 0.30, 0.40, 0.80, 1.30, 1.60, 1.70, 1.70, 1.60, 1.50, 1.60, 1.70, 1.60, 1.50, 1.30,
        1.00, 0.80, 0.60, 0.40, 0.35, 0.30,
    ];
    let night = [
        1.30, 1.40, 1.40, 1.40, 1.30, 1.20, 1.00, 0.80, 0.70, 0.70, 0.80, 0.90, 0.90, 0.90, 0.90, 0.90, 0.90, 0.90,
        1.00, 1.00, 1.10, 1.10, 1.20, 1.20,
    ];
    for (id, multipliers) in [("residential", residential), ("commercial", commercial), ("night", night)] {
        m.time.patterns.push(TimePattern { id: id.into(), step: HOUR, multipliers: multipliers.to_vec() });
    }
    for i in 0..m.nodes().len() {
        if let NodeKind::Junction { demand } = m.nodes()[i].kind {
            if demand != 0.0 {
                m.time.demands.insert(i, vec![Demand { base: demand, pattern: Some(i % 3) }]);
            }
        }
    }
    m.time.simulation = Some(SimulationSettings {
        duration: 7.0 * DAY,
        hydraulic_step: HOUR,
        report_interval: HOUR,
        start_clock: 0.0,
        level_tolerance: SimulationSettings::LEVEL_TOLERANCE,
    });
    m
}

fn bench(c: &mut Criterion) {
    let n = junctions();
    let model = network(n);
    let start = Instant::now();
    let run = simulate(&model).expect("the generated network simulates");
    let seconds = start.elapsed().as_secs_f64();
    eprintln!(
        "simulate: 7 days of {n} junctions, {} reported times, {} hydraulic solves: {seconds:.2} s ({:.2} ms per solve)",
        run.series.len(),
        run.statistics.solves,
        1e3 * seconds / run.statistics.solves.max(1) as f64,
    );
    if std::env::var_os("RINGMAIN_BENCH_ONCE").is_some() {
        return;
    }
    let mut group = c.benchmark_group("simulate");
    group.sample_size(10).warm_up_time(Duration::from_millis(1)).measurement_time(Duration::from_secs(1));
    group.bench_function(format!("7d/{n}"), |b| b.iter(|| simulate(&model).expect("simulates").series.len()));
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
