//! Benchmarks of the solver on generated street networks (see `ringmain_core::generate`).
//!
//! ```text
//! cargo bench --bench solve                              # 1e3, 1e4, 1e5 junctions
//! RINGMAIN_BENCH_MILLION=1 cargo bench --bench solve     # and 1e6
//! RINGMAIN_BENCH_ONLY=10000 cargo bench --bench solve    # only networks of this size
//! cargo bench --bench solve -- batch                     # one group only
//! ```
//!
//! Groups:
//! * `solve/<n>`: one snapshot solve reusing the analysis (what a scenario loop or a time step
//!   costs); `solve-with-analysis/<n>`: a fresh solver, analysis included (a one-off solve).
//!   Before each size the bench prints the phase split of one solve (`Solver::timings`).
//! * `files/<n>`: reading the JSON model file, and writing a model file.
//! * `cli/<n>`: the whole `ringmain solve model.json --format json --output results.json`
//!   process, reading and writing included.
//! * `batch`: 16 scenarios (demand factors and closed pipes) of a 1e4-junction network with
//!   `Solver::solve_batch`, on a rayon pool of 1 and of 2 threads.

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
use ringmain_core::format::write;
use ringmain_core::generate::{generate, NetworkSpec};
use ringmain_core::solve::{Conditions, Scenario, SolveOptions, Solver};
use ringmain_core::{Format, LinkStatus, Model};
use std::path::PathBuf;
use std::time::Duration;

fn sizes() -> Vec<usize> {
    let mut sizes = vec![1_000, 10_000, 100_000];
    if std::env::var_os("RINGMAIN_BENCH_MILLION").is_some() {
        sizes.push(1_000_000);
    }
    sizes.retain(|&n| wanted(n));
    sizes
}

/// `RINGMAIN_BENCH_ONLY=<n>` limits every group to networks of `n` junctions (criterion's
/// filter skips the measurements, but not the networks' generation).
fn wanted(n: usize) -> bool {
    match std::env::var("RINGMAIN_BENCH_ONLY") {
        Ok(only) => only.trim().parse() == Ok(n),
        Err(_) => true,
    }
}

fn network(n: usize) -> Model {
    generate(&NetworkSpec::new(n, 1)).expect("the generator accepts its defaults")
}

fn print_split(n: usize, model: &Model) {
    let mut solver = Solver::new(model).expect("analysis");
    let analysis = solver.timings().analysis;
    // The least time of seven solves, phase by phase: other processes on the machine only ever
    // add time, so each phase's minimum is the closest to its cost.
    let mut t = None::<ringmain_core::solve::Timings>;
    for _ in 0..7 {
        solver.solve_model(model).expect("solves");
        let s = *solver.timings();
        t = Some(match t {
            None => s,
            Some(b) => ringmain_core::solve::Timings {
                analysis: b.analysis,
                preparation: b.preparation.min(s.preparation),
                assembly: b.assembly.min(s.assembly),
                factorization: b.factorization.min(s.factorization),
                solves: b.solves.min(s.solves),
                status: b.status.min(s.status),
                forest: b.forest.min(s.forest),
                results: b.results.min(s.results),
                iterations: s.iterations,
                factorizations: s.factorizations,
            },
        });
    }
    let t = t.expect("seven solves");
    let ms = |d: Duration| d.as_secs_f64() * 1e3;
    let inner = (t.factorization + t.solves).as_secs_f64() / t.iterating().as_secs_f64();
    let p = solver.structure();
    eprintln!(
        "split {n}: {} iterations; {} of {} junctions in trees, {} unknowns, factor nnz {}; analysis {:.2} ms; \
         solve {:.2} ms = preparation {:.2} + assembly {:.2} + factorization {:.2} + solves {:.2} + status {:.2} \
         + trees {:.2} + results {:.2}; factorization and solves {:.0}% of the iterations",
        t.iterations,
        p.tree_junctions(),
        n,
        p.n,
        p.factor_nnz(),
        ms(analysis),
        ms(t.solve_total()),
        ms(t.preparation),
        ms(t.assembly),
        ms(t.factorization),
        ms(t.solves),
        ms(t.status),
        ms(t.forest),
        ms(t.results),
        100.0 * inner
    );
}

fn solve(c: &mut Criterion) {
    for n in sizes() {
        let model = network(n);
        print_split(n, &model);
        let mut group = c.benchmark_group("solve");
        group.sample_size(10).warm_up_time(Duration::from_secs(1)).measurement_time(Duration::from_secs(4));
        group.throughput(Throughput::Elements(n as u64));
        let mut solver = Solver::new(&model).expect("analysis");
        group.bench_function(BenchmarkId::from_parameter(n), |b| {
            b.iter(|| solver.solve_model(&model).expect("solves").iterations)
        });
        group.finish();
        let mut group = c.benchmark_group("solve-with-analysis");
        group.sample_size(10).warm_up_time(Duration::from_secs(1)).measurement_time(Duration::from_secs(4));
        group.bench_function(BenchmarkId::from_parameter(n), |b| {
            b.iter(|| Solver::new(&model).expect("analysis").solve_model(&model).expect("solves").iterations)
        });
        group.finish();
    }
}

fn scratch() -> PathBuf {
    let dir = std::env::temp_dir().join(format!("ringmain-bench-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("temporary directory");
    dir
}

fn files(c: &mut Criterion) {
    let mut group = c.benchmark_group("files");
    group.sample_size(10).warm_up_time(Duration::from_secs(1)).measurement_time(Duration::from_secs(4));
    for n in [10_000, 100_000].into_iter().filter(|&n| wanted(n)) {
        let model = network(n);
        let text = write::to_string(&model, Format::Json);
        group.bench_function(BenchmarkId::new("read-json", n), |b| {
            b.iter(|| ringmain_core::read_str(&text, Format::Json, "bench.json").expect("reads").links().len())
        });
        group.bench_function(BenchmarkId::new("write-json", n), |b| {
            b.iter(|| write::to_string(&model, Format::Json).len())
        });
    }
    group.finish();
}

fn cli(c: &mut Criterion) {
    let dir = scratch();
    let mut group = c.benchmark_group("cli");
    group.sample_size(10).warm_up_time(Duration::from_secs(1)).measurement_time(Duration::from_secs(6));
    let mut cli_sizes = vec![10_000, 100_000];
    if std::env::var_os("RINGMAIN_BENCH_MILLION").is_some() {
        cli_sizes.push(1_000_000);
    }
    for n in cli_sizes.into_iter().filter(|&n| wanted(n)) {
        let input = dir.join(format!("network-{n}.json"));
        std::fs::write(&input, write::to_string(&network(n), Format::Json)).expect("model file written");
        let output = dir.join(format!("results-{n}.json"));
        group.bench_function(BenchmarkId::from_parameter(n), |b| {
            b.iter(|| {
                let status = std::process::Command::new(env!("CARGO_BIN_EXE_ringmain"))
                    .arg("solve")
                    .arg(&input)
                    .args(["--format", "json", "--output"])
                    .arg(&output)
                    .status()
                    .expect("ringmain runs");
                assert!(status.success());
            })
        });
    }
    group.finish();
    let _ = std::fs::remove_dir_all(&dir);
}

fn batch(c: &mut Criterion) {
    if !wanted(10_000) {
        return;
    }
    let model = network(10_000);
    let solver = Solver::new(&model).expect("analysis");
    let options = SolveOptions::from_model(&model);
    let conditions = Conditions::from_model(&model);
    // Demand factors over a day, and single-pipe closures for a small criticality sweep.
    let pipes: Vec<usize> = (0..model.links().len()).step_by(997).take(8).collect();
    let mut scenarios: Vec<Scenario> =
        (0..8).map(|i| Scenario { demand_factor: 0.5 + 0.15 * i as f64, ..Scenario::default() }).collect();
    scenarios
        .extend(pipes.iter().map(|&k| Scenario { statuses: vec![(k, LinkStatus::Closed)], ..Scenario::default() }));
    print_batch_work(&solver, &model, &conditions, &options, &scenarios);
    let mut group = c.benchmark_group("batch");
    group.sample_size(10).warm_up_time(Duration::from_secs(1)).measurement_time(Duration::from_secs(6));
    group.throughput(Throughput::Elements(scenarios.len() as u64));
    for threads in [1, 2] {
        let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().expect("thread pool");
        group.bench_function(BenchmarkId::new("16-scenarios-1e4-threads", threads), |b| {
            b.iter(|| {
                pool.install(|| solver.solve_batch(&model, &conditions, &options, &scenarios))
                    .iter()
                    .map(|r| r.as_ref().expect("solves").iterations)
                    .sum::<u32>()
            })
        });
    }
    group.finish();
}

/// Processor time of this process so far (user + system), from /proc/self/stat (Linux only;
/// zero elsewhere).
fn cpu_time() -> Duration {
    let Ok(stat) = std::fs::read_to_string("/proc/self/stat") else { return Duration::ZERO };
    // Fields after the command name (which is in parentheses): utime and stime are the 12th
    // and 13th, in clock ticks (100 per second on Linux).
    let Some(rest) = stat.rsplit(')').next() else { return Duration::ZERO };
    let fields: Vec<&str> = rest.split_whitespace().collect();
    let ticks: u64 = fields.get(11..13).map_or(0, |f| f.iter().filter_map(|v| v.parse::<u64>().ok()).sum());
    Duration::from_millis(ticks * 10)
}

/// Wall-clock and processor time of the batch on 1 and 2 threads. On a machine shared with
/// other work the wall-clock speedup understates what two free cores give; the processor time
/// shows whether the parallel run does more work than the serial one.
fn print_batch_work(
    solver: &Solver,
    model: &Model,
    conditions: &Conditions,
    options: &SolveOptions,
    scenarios: &[Scenario],
) {
    let mut figures = Vec::new();
    for threads in [1, 2] {
        let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().expect("thread pool");
        let mut best = Duration::MAX;
        let (cpu0, wall0) = (cpu_time(), std::time::Instant::now());
        for _ in 0..10 {
            let start = std::time::Instant::now();
            let results = pool.install(|| solver.solve_batch(model, conditions, options, scenarios));
            assert!(results.iter().all(|r| r.is_ok()));
            best = best.min(start.elapsed());
        }
        figures.push((threads, best, wall0.elapsed() / 10, (cpu_time() - cpu0) / 10));
    }
    for &(threads, best, mean, cpu) in &figures {
        eprintln!(
            "batch work, {threads} thread(s): best {:.1} ms, mean {:.1} ms wall, {:.1} ms processor time per batch",
            best.as_secs_f64() * 1e3,
            mean.as_secs_f64() * 1e3,
            cpu.as_secs_f64() * 1e3
        );
    }
    let (one, two) = (figures[0], figures[1]);
    eprintln!(
        "batch speedup on 2 threads: {:.2}x (best wall), {:.2}x (mean wall); processor time ratio {:.2}",
        one.1.as_secs_f64() / two.1.as_secs_f64(),
        one.2.as_secs_f64() / two.2.as_secs_f64(),
        two.3.as_secs_f64() / one.3.as_secs_f64().max(1e-9)
    );
}

criterion_group!(benches, solve, files, cli, batch);
criterion_main!(benches);
