//! Fire flow at every junction of a generated 10,000-junction network (`ringmain generate
//! --junctions 10000 --seed 7`, the network of the issue's target), by the held solves of
//! `fire_flows` and, in the same run, by the search on the draw (`fire_flows_by_search`: the
//! method before the held solves, whole solves of trial draws) on the first hydrants, with the
//! largest difference between the two.
//!
//! ```text
//! cargo bench --bench fire_flow                                   # all 10,000; search on 1,000
//! RINGMAIN_BENCH_HYDRANTS=2000 RINGMAIN_BENCH_SEARCHED=200 cargo bench --bench fire_flow
//! ```
//!
//! Prints wall time and CPU time of the process (both cores are used), per hydrant. Measure on a
//! quiet machine (`uptime` below about 1.5), repeat and take the best.

use ringmain_core::analysis::fire_flow::{fire_flows, fire_flows_by_search, FireFlow, FireFlowOptions};
use ringmain_core::generate::{generate, NetworkSpec};
use ringmain_core::{Model, NodeKind};
use std::time::Instant;

fn env(name: &str, default: usize) -> usize {
    std::env::var(name).ok().and_then(|v| v.parse().ok()).unwrap_or(default)
}

/// CPU time of this process so far, s (user and system, all threads).
fn cpu() -> f64 {
    let stat = std::fs::read_to_string("/proc/self/stat").unwrap_or_default();
    let after = stat.rsplit(')').next().unwrap_or("");
    let fields: Vec<&str> = after.split_whitespace().collect();
    let ticks = |i: usize| fields.get(i).and_then(|v| v.parse::<f64>().ok()).unwrap_or(f64::NAN);
    // Fields 14 and 15 of /proc/PID/stat (utime, stime), counted from the state field (3).
    (ticks(11) + ticks(12)) / 100.0
}

/// A method of finding fire flows.
type Method = fn(&Model, &[usize], &FireFlowOptions) -> Result<Vec<FireFlow>, ringmain_core::SolveError>;

fn timed(label: &str, model: &Model, hydrants: &[usize], options: &FireFlowOptions, run: Method) -> Vec<FireFlow> {
    let (wall, cpu0) = (Instant::now(), cpu());
    let found = run(model, hydrants, options).expect("fire flows");
    let (wall, cpu) = (wall.elapsed().as_secs_f64(), cpu() - cpu0);
    println!(
        "{label:>7}: {} hydrants in {wall:.2} s wall, {cpu:.2} s CPU ({:.2} ms CPU per hydrant)",
        hydrants.len(),
        1e3 * cpu / hydrants.len() as f64
    );
    found
}

fn main() {
    // `cargo bench` passes `--bench`; nothing else to read.
    let model = generate(&NetworkSpec::new(10_000, 7)).expect("network");
    let junctions: Vec<usize> =
        (0..model.nodes().len()).filter(|&i| matches!(model.nodes()[i].kind, NodeKind::Junction { .. })).collect();
    let all = env("RINGMAIN_BENCH_HYDRANTS", junctions.len()).min(junctions.len());
    let searched = env("RINGMAIN_BENCH_SEARCHED", 1000).min(all);
    // 20 psi of head at 20 °C (common practice in North America).
    let options = FireFlowOptions { residual: 20.0 * 6_894.757_293_168 / (998.2 * 9.806_65), demand_factor: 1.0 };
    println!("load before: {}", std::fs::read_to_string("/proc/loadavg").unwrap_or_default().trim());
    let held = timed("held", &model, &junctions[..all], &options, fire_flows);
    let search = timed("search", &model, &junctions[..searched], &options, fire_flows_by_search);
    let held_part = timed("held", &model, &junctions[..searched], &options, fire_flows);
    let worst = held_part
        .iter()
        .zip(&search)
        .flat_map(|(a, b)| {
            [a.hydrant_limited - b.hydrant_limited, a.system_limited.unwrap_or(0.0) - b.system_limited.unwrap_or(0.0)]
        })
        .fold(0.0f64, |m, d| m.max(d.abs()));
    println!("largest difference held - search over {searched} hydrants: {:.2e} L/s", worst * 1e3);
    println!("searched by the held method (fallback): {}", held.iter().filter(|f| f.searched).count());
    println!("load after: {}", std::fs::read_to_string("/proc/loadavg").unwrap_or_default().trim());
}
