//! The criticality sweep (`ringmain check --each-pipe-closed`) on the generated network of the
//! issue's target, `ringmain generate --junctions 10000 --seed 7` (an invented town: see
//! `ringmain_core::generate`): every open pipe closed in turn, solved and checked, on all cores.
//!
//! Printed beside the sweep, from the same run: a cold solve of the base case (the yardstick of
//! how busy the machine was) and the iterations per closure (chord steps on the base case's
//! factor among them, which take no factorization; see `solve/chord.rs`).
//!
//! ```text
//! cargo bench --bench sweep                                   # criterion, 10 samples
//! RINGMAIN_BENCH_ONCE=1 cargo bench --bench sweep             # one timed sweep, printed
//! RINGMAIN_BENCH_JUNCTIONS=2000 RINGMAIN_BENCH_ONCE=1 cargo bench --bench sweep   # smaller
//! ```

use criterion::{criterion_group, criterion_main, Criterion};
use ringmain_core::analysis::{run_scenario, sweep_candidates, sweep_pipes, CheckOptions, Criteria};
use ringmain_core::generate::{generate, NetworkSpec};
use ringmain_core::{SolveOptions, Solver};
use std::time::{Duration, Instant};

/// Junctions of the generated network (10,000); `RINGMAIN_BENCH_JUNCTIONS` overrides it.
fn junctions() -> usize {
    std::env::var("RINGMAIN_BENCH_JUNCTIONS").ok().and_then(|s| s.parse().ok()).filter(|&s| s >= 4).unwrap_or(10_000)
}

fn bench(c: &mut Criterion) {
    let n = junctions();
    let model = generate(&NetworkSpec::new(n, 7)).expect("a generated network");
    // What `ringmain check` evaluates without a criteria file.
    let criteria = Criteria::default();
    let options = CheckOptions::default();
    let mut solver = Solver::new(&model).expect("valid model");
    let start = Instant::now();
    let (base, _) = run_scenario(&model, &criteria, &mut solver, &SolveOptions::from_model(&model), None, &options);
    let single = start.elapsed().as_secs_f64();
    assert!(base.converged(), "the generated base network must solve: {:?}", base.error);
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
        n,
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
    group.bench_function(format!("each_pipe_closed_{n}_junctions"), |b| {
        b.iter(|| sweep_pipes(&model, &pipes, &criteria, &base.connected, &options, &|_, _| {}))
    });
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
