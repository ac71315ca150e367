//! Generated street networks of several sizes solve, converge in few iterations and have
//! realistic pressures; the model file the `generate` command writes reads back and solves to the
//! same answer.
//!
//! The pressure band 20–80 m is common practice for distribution design (a usual minimum service
//! pressure of about 20 m and a maximum of about 80 m to limit leakage and fittings' stress).

use ringmain_core::generate::{generate, NetworkSpec};
use ringmain_core::{solve, Model, Solution};

fn pressures(m: &Model, s: &Solution) -> (f64, f64, f64) {
    let p: Vec<f64> =
        m.nodes().iter().zip(&s.pressure).filter(|(n, _)| n.fixed_head().is_none()).map(|(_, &p)| p).collect();
    let min = p.iter().copied().fold(f64::INFINITY, f64::min);
    let max = p.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    (min, p.iter().sum::<f64>() / p.len() as f64, max)
}

fn check(junctions: usize, seed: u64) {
    let m = generate(&NetworkSpec::new(junctions, seed)).expect("generated");
    let s = solve(&m).expect("solves");
    let (min, mean, max) = pressures(&m, &s);
    eprintln!(
        "{junctions} junctions, seed {seed}: {} iterations, pressures {min:.1} / {mean:.1} / {max:.1} m, residuals {:.1e} m3/s {:.1e} m",
        s.iterations, s.max_mass_residual, s.max_energy_residual
    );
    // Converged by the solver's own rule (a solve that does not converge is an error): the last
    // flow change within the flow tolerance, and the heads settled or every energy equation
    // within the head tolerance.
    assert!(s.last_flow_change <= m.options.flow_tolerance, "flow change {}", s.last_flow_change);
    assert!(
        s.last_head_change <= m.options.head_tolerance || s.max_energy_residual <= m.options.head_tolerance,
        "head change {} m, energy residual {} m",
        s.last_head_change,
        s.max_energy_residual
    );
    assert!(s.iterations <= 12, "{} iterations", s.iterations);
    assert!(min >= 20.0 && max <= 80.0, "pressures {min} .. {max} m");
    assert!(s.connected.iter().all(|&c| c));
    assert!(s.warnings.is_empty(), "{:?}", s.warnings.first());
    // Every source either supplies or is filled; together they meet the whole demand.
    let demand: f64 = m.nodes().iter().map(|n| n.demand()).sum();
    let supply: f64 =
        (0..m.nodes().len()).filter(|&i| m.nodes()[i].fixed_head().is_some()).map(|i| s.net_outflow(&m, i)).sum();
    assert!((supply - demand).abs() <= 1e-9 * demand.max(1.0) + 1e-9, "{supply} vs {demand}");
}

#[test]
fn small_generated_networks_solve_with_realistic_pressures() {
    for seed in 1..=3 {
        check(1_000, seed);
    }
    check(200, 4);
}

#[test]
fn generated_networks_of_ten_and_a_hundred_thousand_junctions_solve() {
    check(10_000, 1);
    check(100_000, 2);
}

#[test]
fn generated_model_file_reads_back() {
    let m = generate(&NetworkSpec::new(2_000, 5)).expect("generated");
    for format in [ringmain_core::Format::Json, ringmain_core::Format::Toml] {
        let text = ringmain_core::format::write::to_string(&m, format);
        let back = ringmain_core::read_str(&text, format, "generated").expect("reads back");
        assert_eq!(back.nodes().len(), m.nodes().len());
        assert_eq!(back.links().len(), m.links().len());
        let (a, b) = (solve(&m).expect("solves"), solve(&back).expect("solves"));
        for (x, y) in a.head.iter().zip(&b.head) {
            assert!((x - y).abs() < 1e-6, "{x} vs {y}");
        }
    }
}

#[test]
fn a_batch_of_scenarios_matches_one_by_one_solves_of_edited_models() {
    use ringmain_core::solve::{Conditions, Scenario, SolveOptions, Solver};
    use ringmain_core::LinkStatus;
    let m = generate(&NetworkSpec::new(3_000, 6)).expect("generated");
    let solver = Solver::new(&m).expect("analysis");
    let options = SolveOptions::from_model(&m);
    // A pipe of the grid and a pipe of a dead-end branch (the last pipes are the sources' mains,
    // the ones before them branch pipes).
    let branch_pipe = m.links().len() - 10;
    let scenarios = vec![
        Scenario::default(),
        Scenario { demand_factor: 1.6, ..Scenario::default() },
        Scenario { demand_factor: 0.0, ..Scenario::default() },
        Scenario { statuses: vec![(7, LinkStatus::Closed)], ..Scenario::default() },
        Scenario { statuses: vec![(branch_pipe, LinkStatus::Closed)], demand_factor: 0.8 },
    ];
    let batch = solver.solve_batch(&m, &Conditions::from_model(&m), &options, &scenarios);
    assert_eq!(batch.len(), scenarios.len());
    for (scenario, result) in scenarios.iter().zip(&batch) {
        let got = result.as_ref().expect("scenario solves");
        let mut edited = m.clone();
        for i in 0..edited.nodes().len() {
            if edited.nodes()[i].fixed_head().is_none() {
                let d = edited.nodes()[i].demand() * scenario.demand_factor;
                edited.set_demand(i, d).expect("demand");
            }
        }
        for &(k, status) in &scenario.statuses {
            edited.set_status(k, status).expect("status");
        }
        let want = solve(&edited).expect("edited model solves");
        for (a, b) in got.head.iter().zip(&want.head) {
            assert!(a == b || (a - b).abs() < 1e-9 || (a.is_nan() && b.is_nan()), "{a} vs {b}");
        }
        for (a, b) in got.flow.iter().zip(&want.flow) {
            assert!((a - b).abs() < 1e-12, "{a} vs {b}");
        }
    }
    // No demand: the only water moving runs from the reservoir into the (lower) tank.
    let still = batch[2].as_ref().expect("solves");
    let sources: Vec<usize> = (0..m.nodes().len()).filter(|&i| m.nodes()[i].fixed_head().is_some()).collect();
    let net: f64 = sources.iter().map(|&i| still.net_outflow(&m, i)).sum();
    assert!(net.abs() < 1e-12, "{net}");
    // The closed branch pipe cuts off what lies beyond it; the branch reports it.
    let cut = batch[4].as_ref().expect("solves");
    let beyond = m.links()[branch_pipe].to;
    assert!(!cut.connected[beyond] && cut.head[beyond].is_nan());
    // A scenario naming a link that does not exist is an error, not a panic.
    let bad = solver.solve_batch(
        &m,
        &Conditions::from_model(&m),
        &options,
        &[Scenario { statuses: vec![(usize::MAX, LinkStatus::Closed)], ..Scenario::default() }],
    );
    assert!(bad[0].is_err());
}

#[test]
fn generate_command_writes_a_model_that_solve_reads_with_timings() {
    let dir = std::env::temp_dir().join(format!("ringmain-generated-cli-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("scratch directory");
    let bin = env!("CARGO_BIN_EXE_ringmain");
    let model = dir.join("town.json");
    let run = std::process::Command::new(bin)
        .args(["generate", "--junctions", "400", "--seed", "9", "--output"])
        .arg(&model)
        .output()
        .expect("runs");
    assert!(run.status.success(), "{}", String::from_utf8_lossy(&run.stderr));
    let results = dir.join("results.json");
    let run = std::process::Command::new(bin)
        .arg("solve")
        .arg(&model)
        .args(["--format", "json", "--timings", "--output"])
        .arg(&results)
        .output()
        .expect("runs");
    assert!(run.status.success(), "{}", String::from_utf8_lossy(&run.stderr));
    let stderr = String::from_utf8_lossy(&run.stderr);
    for phase in
        ["reading the model", "analysis", "assembly", "factorization", "triangular solves", "status logic", "writing"]
    {
        assert!(stderr.contains(phase), "no '{phase}' in:\n{stderr}");
    }
    let doc: serde_json::Value = serde_json::from_slice(&std::fs::read(&results).expect("results")).expect("JSON");
    assert_eq!(doc["converged"], serde_json::Value::Bool(true));
    assert_eq!(doc["nodes"].as_array().map(Vec::len), Some(402));
    // The same size and seed give the same file.
    let again = dir.join("again.json");
    let run = std::process::Command::new(bin)
        .args(["generate", "--junctions", "400", "--seed", "9", "--output"])
        .arg(&again)
        .output()
        .expect("runs");
    assert!(run.status.success());
    assert_eq!(std::fs::read(&model).unwrap(), std::fs::read(&again).unwrap());
    // Bad arguments are errors with exit code 2, not panics.
    for args in [
        &["generate", "--junctions", "2", "--output", "x.json"][..],
        &["generate", "--junctions", "100", "--output", "x.txt"],
    ] {
        let run = std::process::Command::new(bin).args(args).current_dir(&dir).output().expect("runs");
        assert_eq!(run.status.code(), Some(2), "{args:?}: {}", String::from_utf8_lossy(&run.stderr));
        assert!(String::from_utf8_lossy(&run.stderr).starts_with("error:"));
    }
    let _ = std::fs::remove_dir_all(&dir);
}
