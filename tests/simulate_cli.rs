//! `ringmain simulate` on the 48-hour demo: every output format, the charts and the errors.

use std::path::PathBuf;
use std::process::{Command, Output};

fn demo() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("examples/hillside-day.toml")
}

fn ringmain(args: &[&std::ffi::OsStr]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_ringmain")).args(args).output().expect("start ringmain")
}

fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("ringmain-simulate-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

#[test]
fn demo_summary_names_tanks_pumps_pressure_and_balance() {
    let out = ringmain(&["simulate".as_ref(), demo().as_os_str()]);
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let text = String::from_utf8(out.stdout).unwrap();
    for expected in [
        "Beacon Knoll Tank",
        "PU-1",
        "PU-2",
        "Lowest pressure:",
        "Volume balance (m3)",
        "control 'assist-night' opens 'PU-2'",
        "licensed engineer",
    ] {
        assert!(text.contains(expected), "missing '{expected}' in:\n{text}");
    }
    // Not a terminal: no progress bar on standard error.
    assert!(!String::from_utf8_lossy(&out.stderr).contains("simulating ["));
}

#[test]
fn demo_json_has_summary_events_and_series() {
    let out = ringmain(&["simulate".as_ref(), demo().as_os_str(), "--format".as_ref(), "json".as_ref()]);
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let b = &v["summary"]["volume_balance"];
    let supplied = b["supplied"].as_f64().unwrap();
    assert!(supplied > 1000.0);
    assert!(b["relative_discrepancy"].as_f64().unwrap().abs() < 1e-12, "{b}");
    // 48 h reported every 15 min, both ends included.
    assert_eq!(v["series"].as_array().unwrap().len(), 193);
    let pumps = v["summary"]["pumps"].as_array().unwrap();
    assert_eq!(pumps.len(), 2);
    for p in pumps {
        assert!(p["hours"].as_f64().unwrap() > 0.0 && p["cost"].as_f64().unwrap() > 0.0, "{p}");
        let eff = p["mean_efficiency"].as_f64().unwrap();
        assert!((40.0..=80.0).contains(&eff), "{p}");
    }
    // The night tariff is 45 % of the day price (the demo's own numbers).
    let prices: Vec<f64> = v["series"].as_array().unwrap().iter().map(|s| s["price"].as_f64().unwrap()).collect();
    let (lo, hi) = prices.iter().fold((f64::INFINITY, 0.0f64), |(a, b), &p| (a.min(p), b.max(p)));
    assert!((hi - 0.24).abs() < 1e-12 && (lo - 0.24 * 0.45).abs() < 1e-12, "{lo} {hi}");
}

#[test]
fn demo_csv_and_charts_are_written() {
    let dir = scratch("files");
    let csv = dir.join("series.csv");
    let plots = dir.join("plots");
    let out = ringmain(&[
        "simulate".as_ref(),
        demo().as_os_str(),
        "--format".as_ref(),
        "csv".as_ref(),
        "--output".as_ref(),
        csv.as_os_str(),
        "--plot".as_ref(),
        plots.as_os_str(),
    ]);
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let text = std::fs::read_to_string(&csv).unwrap();
    let mut lines = text.lines();
    assert_eq!(lines.next(), Some("time_h,clock,kind,id,quantity,value,unit"));
    assert!(text.contains("\n48,00:00,tank,Beacon Knoll Tank,level,"), "no final tank level");
    for name in ["tanks.svg", "pumps.svg", "pressures.svg"] {
        let svg = std::fs::read_to_string(plots.join(name)).unwrap();
        assert!(svg.starts_with("<svg ") && svg.trim_end().ends_with("</svg>"), "{name}");
        assert!(svg.contains("low tariff"), "{name}: no tariff shading");
    }
    let _ = std::fs::remove_dir_all(&dir);
}

#[test]
fn a_model_without_a_simulation_table_is_invalid() {
    let snapshot = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("examples/hillside.toml");
    let out = ringmain(&["simulate".as_ref(), snapshot.as_os_str()]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("hillside.toml: [simulation]") && err.contains("duration"), "{err}");
}

#[test]
fn the_demo_round_trips_through_the_writer() {
    let text = std::fs::read_to_string(demo()).unwrap();
    let model = ringmain_core::read_str(&text, ringmain_core::Format::Toml, "demo").unwrap();
    for format in [ringmain_core::Format::Toml, ringmain_core::Format::Json] {
        let out = ringmain_core::model::write::to_string(&model, format);
        let back = ringmain_core::read_str(&out, format, "written").unwrap_or_else(|e| panic!("{e}"));
        assert_eq!(back.time.controls, model.time.controls);
        assert_eq!(back.time.patterns, model.time.patterns);
        assert_eq!(back.time.demands.len(), model.time.demands.len());
        assert_eq!(back.time.energy, model.time.energy);
        assert_eq!(back.time.simulation, model.time.simulation);
    }
}
