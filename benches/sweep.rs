//! The criticality sweep (`ringmain check --each-pipe-closed`) on a generated network of 10,000
//! junctions: every pipe closed in turn, solved and checked, on all cores.
//!
//! The network is a deterministic street grid of our own: 100 × 100 junctions 80 m apart, every
//! east-west street piped and one north-south street in four (about 1.24 pipes per junction,
//! near the loop density of real town networks), diameters falling from 400 mm near the two
//! supply reservoirs at opposite corners to 100 mm, demands (100 L/s in all, a town of some
//! 30,000 people at peak hour) and ground levels varying smoothly.
//!
//! ```text
//! cargo bench --bench sweep                             # criterion, 10 samples
//! RINGMAIN_BENCH_ONCE=1 cargo bench --bench sweep       # one timed sweep, printed
//! RINGMAIN_BENCH_SIDE=40 RINGMAIN_BENCH_ONCE=1 cargo bench --bench sweep   # a smaller grid
//! ```

use criterion::{criterion_group, criterion_main, Criterion};
use ringmain_core::analysis::{run_scenario, sweep_candidates, sweep_pipes, CheckOptions, Criteria};
use ringmain_core::model::HydraulicOptions;
use ringmain_core::{Link, LinkKind, LinkStatus, Model, Node, Pipe, SolveOptions, Solver, UnitSystem};
use std::time::{Duration, Instant};

const SPACING: f64 = 80.0;

/// Junctions per side of the grid (100: 10,000 junctions); `RINGMAIN_BENCH_SIDE` overrides it.
fn side() -> usize {
    std::env::var("RINGMAIN_BENCH_SIDE").ok().and_then(|s| s.parse().ok()).filter(|&s| s >= 4).unwrap_or(100)
}

fn pipe(id: String, from: usize, to: usize, diameter: f64) -> Link {
    Link {
        id: id.into(),
        from,
        to,
        status: LinkStatus::Open,
        kind: LinkKind::Pipe(Pipe { length: SPACING, diameter, roughness: 120.0, minor_loss: 0.0, check_valve: false }),
    }
}

/// The street grid described in the module docs, `n` × `n` junctions.
fn grid(n: usize) -> Model {
    let mut m = Model::new(UnitSystem::default(), HydraulicOptions::default());
    let at = |r: usize, c: usize| r * n + c;
    for r in 0..n {
        for c in 0..n {
            let (x, y) = (r as f64 / n as f64, c as f64 / n as f64);
            let elevation = 20.0 + 15.0 * x + 10.0 * (6.0 * y).sin();
            let demand = 1e-5 * (1.0 + 0.5 * (7.0 * x + 3.0 * y).cos()); // 0.005 to 0.015 L/s
            m.add_node(Node::junction(format!("J-{r}-{c}"), elevation, demand)).expect("valid junction");
        }
    }
    let west = m.add_node(Node::reservoir("West Works", 95.0)).expect("valid reservoir");
    let east = m.add_node(Node::reservoir("East Works", 92.0)).expect("valid reservoir");
    // Mains shrink with distance from the nearer reservoir.
    let size = |r: usize, c: usize| {
        let d = (r + c).min(2 * (n - 1) - r - c) as f64 / n as f64;
        if d < 0.2 {
            0.4
        } else if d < 0.5 {
            0.25
        } else if d < 0.9 {
            0.15
        } else {
            0.1
        }
    };
    for r in 0..n {
        for c in 0..n {
            if c + 1 < n {
                m.add_link(pipe(format!("E-{r}-{c}"), at(r, c), at(r, c + 1), size(r, c))).expect("valid pipe");
            }
            if r + 1 < n && c % 4 == 0 {
                m.add_link(pipe(format!("N-{r}-{c}"), at(r, c), at(r + 1, c), size(r, c))).expect("valid pipe");
            }
        }
    }
    m.add_link(pipe("Main-W".into(), west, at(0, 0), 0.5)).expect("valid pipe");
    m.add_link(pipe("Main-E".into(), east, at(n - 1, n - 1), 0.5)).expect("valid pipe");
    m
}

fn bench(c: &mut Criterion) {
    let n = side();
    let model = grid(n);
    let criteria = Criteria { min_pressure: Some(20.0), max_velocity: Some(2.5), ..Criteria::default() };
    let options = CheckOptions::default();
    let mut solver = Solver::new(&model).expect("valid model");
    let start = Instant::now();
    let (base, _) = run_scenario(&model, &criteria, &mut solver, &SolveOptions::from_model(&model), None, &options);
    let single = start.elapsed().as_secs_f64();
    assert!(base.converged(), "the generated base network must solve: {:?}", base.error);
    assert!(
        base.passed(),
        "the generated base network must meet the criteria: {:?}",
        base.failed().collect::<Vec<_>>()
    );
    let pipes = sweep_candidates(&model);

    // One timed sweep, printed, so that the figure is seen whatever criterion does.
    let start = Instant::now();
    let results = sweep_pipes(&model, &pipes, &criteria, &base.connected, &options, &|_, _| {});
    let seconds = start.elapsed().as_secs_f64();
    let failing = results.iter().filter(|(_, o)| !o.passed()).count();
    let iterations: u64 = results.iter().map(|(_, o)| u64::from(o.iterations)).sum();
    eprintln!(
        "sweep: {} closures on {} junctions, {} threads: {seconds:.2} s ({:.2} ms per closure; cold base solve \
         {:.1} ms in {} iterations; {:.1} iterations per closure; {failing} closures break a criterion)",
        pipes.len(),
        n * n,
        rayon::current_num_threads(),
        1e3 * seconds / pipes.len() as f64,
        1e3 * single,
        base.iterations,
        iterations as f64 / pipes.len() as f64,
    );
    if std::env::var_os("RINGMAIN_BENCH_ONCE").is_some() {
        return;
    }

    let mut group = c.benchmark_group("sweep");
    group.sample_size(10).warm_up_time(Duration::from_millis(1)).measurement_time(Duration::from_secs(1));
    group.bench_function(format!("each_pipe_closed_{}_junctions", n * n), |b| {
        b.iter(|| sweep_pipes(&model, &pipes, &criteria, &base.connected, &options, &|_, _| {}))
    });
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
