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
    assert!(s.converged);
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
        let text = ringmain_core::model::write::to_string(&m, format);
        let back = ringmain_core::read_str(&text, format, "generated").expect("reads back");
        assert_eq!(back.nodes().len(), m.nodes().len());
        assert_eq!(back.links().len(), m.links().len());
        let (a, b) = (solve(&m).expect("solves"), solve(&back).expect("solves"));
        for (x, y) in a.head.iter().zip(&b.head) {
            assert!((x - y).abs() < 1e-6, "{x} vs {y}");
        }
    }
}
