//! The model-file keys of pressure-dependent outflows — `[pressure_demand]`, the per-junction
//! overrides and `outlet`, `[background_leakage]` and per-pipe `leakage_rate` — are read in the model's
//! units, written back, and refused when wrong with exit code 2 naming the element and the key.
//!
//! Conversion factors are the exact definitions of `core/src/units.rs` (1 psi = 6894.757293168
//! Pa, 1 ft = 0.3048 m, 1 US gallon = 3.785411784 L); the water density at 20 °C, 998.2067 kg/m³,
//! is the IAPWS-95 value the library computes (checked in tests/python against `iapws`).

use ringmain_core::format::write::to_string;
use ringmain_core::format::{read_str, Format};
use std::path::PathBuf;
use std::process::Command;

const BASE: &str = r#"title = "hillside estate"

[pressure_demand]
full_pressure = 20.0
zero_pressure = 2.0
exponent = 0.5

[background_leakage]
rate = 0.05
reference_pressure = 50
exponent = 1.18

[[nodes]]
id = "R1"
kind = "reservoir"
head = 60.0

[[nodes]]
id = "J1"
elevation = 10.0
demand = 5.0
full_pressure = 15.0

[[nodes]]
id = "J2"
elevation = 12.0
demand = 3.0
outlet = { coefficient = 0.8, exponent = 0.5 }

[[links]]
id = "P1"
from = "R1"
to = "J1"
length = 400.0
diameter = 150
roughness = 120
leakage_rate = 0.2

[[links]]
id = "P2"
from = "J1"
to = "J2"
length = 300.0
diameter = 100
roughness = 110
"#;

fn variant(from: &str, to: &str) -> String {
    assert!(BASE.contains(from), "the base has no {from:?}");
    let out = BASE.replacen(from, to, 1);
    assert_ne!(out, BASE);
    out
}

fn dir() -> PathBuf {
    let d = std::env::temp_dir().join(format!("ringmain-pressure-input-{}", std::process::id()));
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// `ringmain check` on `text` saved as `name` exits 2 with a first line naming the file, the
/// element and the key.
fn refused(name: &str, text: &str, element: &str, key: &str) -> String {
    let path = dir().join(name);
    std::fs::write(&path, text).unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_ringmain")).args(["check", path.to_str().unwrap()]).output().unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
    assert!(!stderr.contains("panicked"), "{stderr}");
    assert_eq!(out.status.code(), Some(2), "{name}: {stderr}");
    let first = stderr.lines().next().unwrap_or("").to_owned();
    let want = format!("{name}: {element}: key '{key}': ");
    assert!(first.contains(&want), "expected {want:?} in {first:?}");
    first
}

#[test]
fn the_base_model_reads() {
    let m = read_str(BASE, Format::Toml, "base.toml").unwrap_or_else(|e| panic!("{e}"));
    assert!(m.outflow.pressure_demand.is_some() && m.outflow.leakage.is_some());
    assert_eq!(m.outflow.junctions.len(), 2);
    assert_eq!(m.outflow.leakage_rates.len(), 1);
}

#[test]
fn full_pressure_not_above_zero_pressure_is_refused() {
    let f = refused(
        "full-zero.toml",
        &variant("full_pressure = 20.0", "full_pressure = 2.0"),
        "[pressure_demand]",
        "full_pressure",
    );
    assert!(f.contains("zero_pressure"), "{f}");
    let f = refused(
        "full-zero-node.toml",
        &variant("full_pressure = 15.0", "full_pressure = 1.0"),
        "node 'J1'",
        "full_pressure",
    );
    assert!(f.contains("zero_pressure"), "{f}");
    refused("zero-node.toml", &variant("full_pressure = 15.0", "zero_pressure = 30.0"), "node 'J1'", "zero_pressure");
}

#[test]
fn negative_exponents_and_coefficients_are_refused() {
    refused("pd-exp.toml", &variant("exponent = 0.5\n", "exponent = -0.5\n"), "[pressure_demand]", "exponent");
    refused("pd-exp0.toml", &variant("exponent = 0.5\n", "exponent = 0\n"), "[pressure_demand]", "exponent");
    refused("leak-exp.toml", &variant("exponent = 1.18", "exponent = -1.18"), "[background_leakage]", "exponent");
    refused("leak-rate.toml", &variant("rate = 0.05", "rate = -0.05"), "[background_leakage]", "rate");
    refused(
        "leak-ref.toml",
        &variant("reference_pressure = 50", "reference_pressure = 0"),
        "[background_leakage]",
        "reference_pressure",
    );
    refused("pipe-rate.toml", &variant("leakage_rate = 0.2", "leakage_rate = -0.2"), "link 'P1'", "leakage_rate");
    refused("outlet-c.toml", &variant("coefficient = 0.8", "coefficient = -0.8"), "node 'J2'", "outlet.coefficient");
    refused(
        "outlet-e.toml",
        &variant("coefficient = 0.8, exponent = 0.5", "coefficient = 0.8, exponent = -0.5"),
        "node 'J2'",
        "outlet.exponent",
    );
    refused(
        "node-exp.toml",
        &variant("full_pressure = 15.0", "full_pressure = 15.0\nexponent = -1"),
        "node 'J1'",
        "exponent",
    );
}

#[test]
fn nan_is_refused_naming_the_key() {
    refused(
        "nan-full.toml",
        &variant("full_pressure = 20.0", "full_pressure = nan"),
        "[pressure_demand]",
        "full_pressure",
    );
    refused("nan-node.toml", &variant("full_pressure = 15.0", "full_pressure = nan"), "node 'J1'", "full_pressure");
    refused("nan-leak.toml", &variant("leakage_rate = 0.2", "leakage_rate = nan"), "link 'P1'", "leakage_rate");
    refused("nan-outlet.toml", &variant("coefficient = 0.8", "coefficient = nan"), "node 'J2'", "outlet.coefficient");
    refused(
        "inf-ref.toml",
        &variant("reference_pressure = 50", "reference_pressure = inf"),
        "[background_leakage]",
        "reference_pressure",
    );
}

#[test]
fn overrides_without_their_table_are_refused() {
    let without =
        BASE.replacen("[pressure_demand]\nfull_pressure = 20.0\nzero_pressure = 2.0\nexponent = 0.5\n", "", 1);
    assert_ne!(without, BASE);
    let f = refused("no-table.toml", &without, "node 'J1'", "full_pressure");
    assert!(f.contains("[pressure_demand]"), "{f}");
    let without = BASE.replacen("[background_leakage]\nrate = 0.05\nreference_pressure = 50\nexponent = 1.18\n", "", 1);
    assert_ne!(without, BASE);
    let f = refused("no-leakage.toml", &without, "link 'P1'", "leakage_rate");
    assert!(f.contains("[background_leakage]"), "{f}");
    // full_pressure is required in the table.
    refused("no-full.toml", &variant("full_pressure = 20.0\n", ""), "[pressure_demand]", "full_pressure");
}

#[test]
fn keys_of_other_elements_and_unknown_keys_are_refused() {
    refused(
        "res-outlet.toml",
        &variant("head = 60.0", "head = 60.0\noutlet = { coefficient = 1 }"),
        "node 'R1'",
        "outlet",
    );
    refused("outlet-key.toml", &variant("exponent = 0.5 }", "exponent = 0.5, area = 2 }"), "node 'J2'", "outlet.area");
    refused("pd-key.toml", &variant("zero_pressure = 2.0", "zero_presure = 2.0"), "[pressure_demand]", "zero_presure");
    refused(
        "outlet-type.toml",
        &variant("outlet = { coefficient = 0.8, exponent = 0.5 }", "outlet = 0.8"),
        "node 'J2'",
        "outlet",
    );
}

/// Values are converted with the exact unit factors; the writer gives them back in the model's
/// units, and the file reads back into the same values (both formats, both unit systems).
#[test]
fn units_convert_and_the_writer_round_trips() {
    let us = BASE.replacen(
        "title = \"hillside estate\"\n",
        "title = \"hillside estate\"\n[units]\nflow = \"gpm\"\nlength = \"ft\"\ndiameter = \"in\"\npressure = \"psi\"\n",
        1,
    );
    let m = read_str(&us, Format::Toml, "us.toml").unwrap_or_else(|e| panic!("{e}"));
    let rho_g = 998.2067 * 9.80665; // IAPWS-95 density at 20 °C (the library's default water) times g
    let psi = 6894.757293168;
    let pd = m.outflow.pressure_demand.unwrap();
    assert!((pd.full_pressure - 20.0 * psi / rho_g).abs() < 1e-5, "{pd:?}");
    assert!((pd.zero_pressure - 2.0 * psi / rho_g).abs() < 1e-6, "{pd:?}");
    let gpm = 3.785411784e-3 / 60.0;
    let leak = m.outflow.leakage.unwrap();
    // 0.05 gpm per 1000 ft of pipe.
    assert!((leak.rate - 0.05 * gpm / (1000.0 * 0.3048)).abs() < 1e-18, "{leak:?}");
    let p1 = m.link_index("P1").unwrap();
    assert!((m.outflow.leakage_rates[&p1] - 0.2 * gpm / 304.8).abs() < 1e-18);
    // Outlet: q [gpm] = 0.8 · p[psi]^0.5  ⇒  q [m³/s] = 0.8 gpm · (p_head · ρg/psi)^0.5.
    let j2 = m.node_index("J2").unwrap();
    let o = m.outflow.junctions[&j2].outlet.unwrap();
    assert!((o.coefficient - 0.8 * gpm * (rho_g / psi).sqrt()).abs() < 1e-6 * o.coefficient, "{o:?}");

    for (text, name) in [(BASE.to_owned(), "si"), (us, "us")] {
        let m = read_str(&text, Format::Toml, name).unwrap_or_else(|e| panic!("{e}"));
        for format in [Format::Toml, Format::Json] {
            let out = to_string(&m, format);
            for key in ["pressure_demand", "full_pressure", "leakage_rate", "outlet", "reference_pressure"] {
                assert!(out.contains(key), "{name} {format:?}: {key} not written\n{out}");
            }
            let back = read_str(&out, format, "back").unwrap_or_else(|e| panic!("{e}\n{out}"));
            let (a, b) = (&m.outflow, &back.outflow);
            let close = |x: f64, y: f64| (x - y).abs() <= 1e-12 * x.abs().max(y.abs()).max(1e-300);
            let (pa, pb) = (a.pressure_demand.unwrap(), b.pressure_demand.unwrap());
            assert!(close(pa.full_pressure, pb.full_pressure) && close(pa.zero_pressure, pb.zero_pressure));
            assert_eq!(pa.exponent, pb.exponent);
            let (la, lb) = (a.leakage.unwrap(), b.leakage.unwrap());
            assert!(close(la.rate, lb.rate) && close(la.reference_pressure, lb.reference_pressure));
            assert_eq!(a.junctions.len(), b.junctions.len());
            for (k, ja) in &a.junctions {
                let jb = &b.junctions[k];
                assert_eq!(ja.full_pressure.is_some(), jb.full_pressure.is_some());
                if let (Some(x), Some(y)) = (ja.full_pressure, jb.full_pressure) {
                    assert!(close(x, y));
                }
                if let (Some(x), Some(y)) = (ja.outlet, jb.outlet) {
                    assert!(close(x.coefficient, y.coefficient) && x.exponent == y.exponent);
                } else {
                    assert_eq!(ja.outlet.is_some(), jb.outlet.is_some());
                }
            }
            for (k, ra) in &a.leakage_rates {
                assert!(close(*ra, b.leakage_rates[k]));
            }
        }
    }
}

/// The laws handed to the solver: leaks half at each pipe end, none at a reservoir end; closed
/// pipes leak; overrides win over the table; an outlet on a junction without demand.
#[test]
fn junction_laws_follow_the_data() {
    let text = variant("diameter = 100\nroughness = 110\n", "diameter = 100\nroughness = 110\nstatus = \"closed\"\n");
    let m = read_str(&text, Format::Toml, "laws.toml").unwrap_or_else(|e| panic!("{e}"));
    let demands: Vec<f64> = m.nodes().iter().map(|n| n.demand()).collect();
    let laws = m.outflow.laws(&m, &demands);
    let (j1, j2) = (m.node_index("J1").unwrap(), m.node_index("J2").unwrap());
    assert!(laws.get(m.node_index("R1").unwrap()).is_none());
    let l1 = *laws.get(j1).unwrap();
    let l2 = *laws.get(j2).unwrap();
    // J1: half of P1 (0.2 L/s per km · 0.4 km) and half of P2 (0.05 L/s per km · 0.3 km).
    let leak1 = l1.leakage.unwrap();
    assert!((leak1.flow - (0.5 * 0.2e-3 * 0.4 + 0.5 * 0.05e-3 * 0.3)).abs() < 1e-15, "{leak1:?}");
    let leak2 = l2.leakage.unwrap();
    assert!((leak2.flow - 0.5 * 0.05e-3 * 0.3).abs() < 1e-15, "{leak2:?}");
    // J1 overrides the full pressure (15 m); J2 takes the table's (20 m).
    let d1 = l1.demand.unwrap();
    assert!((d1.base + d1.scale - 15.0).abs() < 1e-12 && (d1.base - 2.0).abs() < 1e-12);
    let d2 = l2.demand.unwrap();
    assert!((d2.base + d2.scale - 20.0).abs() < 1e-12);
    assert!(l2.outlet.is_some() && l1.outlet.is_none());
}

/// The messages give pressures in the model's own unit, as the file wrote them, not in the
/// metres of head the library works in.
#[test]
fn refused_pressures_are_stated_in_the_models_unit() {
    let kpa = format!("[units]\npressure = \"kPa\"\n\n{}", &BASE[BASE.find("[pressure_demand]").unwrap()..]);
    let kpa = kpa.replacen("full_pressure = 20.0", "full_pressure = 150.0", 1).replacen(
        "zero_pressure = 2.0",
        "zero_pressure = 200.0",
        1,
    );
    let f = refused("kpa-table.toml", &kpa, "[pressure_demand]", "full_pressure");
    assert!(f.contains("(150 <= 200 kPa)"), "{f}");
    let kpa = kpa.replacen("zero_pressure = 200.0", "zero_pressure = 20.0", 1).replacen(
        "full_pressure = 15.0",
        "full_pressure = 10.0",
        1,
    );
    let f = refused("kpa-node.toml", &kpa, "node 'J1'", "full_pressure");
    assert!(f.contains("full_pressure (10 kPa) must be above zero_pressure (20 kPa)"), "{f}");
}
