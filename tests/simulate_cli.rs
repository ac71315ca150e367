//! `ringmain simulate` on the 48-hour demo: every output format, the charts and the errors.

use std::path::PathBuf;
use std::process::{Command, Output};

mod common;
use common::scratch;

fn demo() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("examples/hillside-day.toml")
}

fn ringmain(args: &[&std::ffi::OsStr]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_ringmain")).args(args).output().expect("start ringmain")
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
        let out = ringmain_core::format::write::to_string(&model, format);
        let back = ringmain_core::read_str(&out, format, "written").unwrap_or_else(|e| panic!("{e}"));
        assert_eq!(back.time.controls, model.time.controls);
        assert_eq!(back.time.patterns, model.time.patterns);
        assert_eq!(back.time.demands.len(), model.time.demands.len());
        assert_eq!(back.time.energy, model.time.energy);
        assert_eq!(back.time.simulation, model.time.simulation);
    }
}

/// Fault: `solve net.toml --output net.toml`, `check net.toml --junit net.toml` and `simulate
/// net.toml --output net.toml` overwrote the model and exited 0. The whole class: every command
/// with every output option, the input named the same way, by another name (`./`, a hard link, a
/// symbolic link), and the criteria file of `check`. Each is refused with exit code 2 before any
/// work, and the input is left byte for byte as it was.
#[test]
fn output_over_input_is_refused_for_every_command_and_output_option() {
    let dir = scratch("output-over-input");
    let model = dir.join("net.toml");
    let original = std::fs::read(demo()).unwrap();
    std::fs::write(&model, &original).unwrap();
    let criteria = dir.join("criteria.toml");
    let criteria_text = b"min_pressure = 10.0\n";
    std::fs::write(&criteria, criteria_text).unwrap();
    let hard = dir.join("hard-link.toml");
    std::fs::hard_link(&model, &hard).unwrap();
    let soft = dir.join("soft-link.toml");
    std::os::unix::fs::symlink(&model, &soft).unwrap();
    let dotted = dir.join(".").join("net.toml");
    // A chart directory holding the model under a chart's name (a hard link of it).
    let charts = dir.join("charts");
    std::fs::create_dir_all(&charts).unwrap();
    std::fs::hard_link(&model, charts.join("pressures.svg")).unwrap();

    let m = model.as_os_str();
    let mut cases: Vec<Vec<&std::ffi::OsStr>> = Vec::new();
    for same in [&model, &hard, &soft, &dotted] {
        let s = same.as_os_str();
        cases.push(vec!["solve".as_ref(), m, "--output".as_ref(), s]);
        cases.push(vec!["solve".as_ref(), m, "-o".as_ref(), s, "--format".as_ref(), "json".as_ref()]);
        cases.push(vec!["simulate".as_ref(), m, "--output".as_ref(), s]);
        cases.push(vec!["simulate".as_ref(), m, "--output".as_ref(), s, "--format".as_ref(), "csv".as_ref()]);
        cases.push(vec!["check".as_ref(), m, "--junit".as_ref(), s]);
    }
    cases.push(vec!["simulate".as_ref(), m, "--plot".as_ref(), charts.as_os_str()]);
    let map = charts.join("pressures.svg");
    cases.push(vec![
        "map".as_ref(),
        m,
        "--quantity".as_ref(),
        "pressure".as_ref(),
        "--output".as_ref(),
        map.as_os_str(),
    ]);
    cases.push(vec![
        "check".as_ref(),
        m,
        "--criteria".as_ref(),
        criteria.as_os_str(),
        "--junit".as_ref(),
        criteria.as_os_str(),
    ]);
    for args in &cases {
        let out = ringmain(args);
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{args:?} must be refused:\n{stderr}");
        assert!(stderr.contains("never replaces an input"), "{args:?}: {stderr}");
        assert!(out.stdout.is_empty(), "{args:?}: no work may be done");
        assert_eq!(std::fs::read(&model).unwrap(), original, "{args:?} changed the model");
        assert_eq!(std::fs::read(&criteria).unwrap(), criteria_text, "{args:?} changed the criteria");
    }
    // Not the input: written, and no temporary file is left behind.
    let results = dir.join("results.json");
    let out = ringmain(&[
        "solve".as_ref(),
        m,
        "--output".as_ref(),
        results.as_os_str(),
        "--format".as_ref(),
        "json".as_ref(),
    ]);
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    assert!(serde_json::from_slice::<serde_json::Value>(&std::fs::read(&results).unwrap()).is_ok());
    let partial: Vec<_> = std::fs::read_dir(&dir)
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().ends_with(".partial"))
        .collect();
    assert!(partial.is_empty(), "temporary files left: {partial:?}");
}

/// Fault class: a failed run must leave no half-written file. An output that cannot be
/// finished (its directory is a file) fails with exit code 4, and an existing result file is
/// kept whole when the run fails before writing (an invalid model).
#[test]
fn failed_run_leaves_no_half_written_output() {
    let dir = scratch("failed-run");
    let results = dir.join("results.txt");
    std::fs::write(&results, "earlier results\n").unwrap();
    let bad = dir.join("bad.toml");
    std::fs::write(&bad, "[[nodes]]\nid = \"A\"\nkind = \"reservoir\"\n").unwrap();
    for command in ["solve", "simulate"] {
        let out = ringmain(&[command.as_ref(), bad.as_os_str(), "--output".as_ref(), results.as_os_str()]);
        assert_eq!(out.status.code(), Some(2));
        assert_eq!(std::fs::read_to_string(&results).unwrap(), "earlier results\n", "{command}");
    }
    let blocked = dir.join("results.txt").join("inside.json");
    for command in ["solve", "simulate"] {
        let out = ringmain(&[command.as_ref(), demo().as_os_str(), "--output".as_ref(), blocked.as_os_str()]);
        assert_eq!(out.status.code(), Some(4), "{command}: {}", String::from_utf8_lossy(&out.stderr));
    }
    let leftovers: Vec<_> = std::fs::read_dir(&dir)
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().ends_with(".partial"))
        .collect();
    assert!(leftovers.is_empty(), "{leftovers:?}");
}

/// Fault: the summary's lowest pressure missed solved instants between report times (the demo's
/// pump started because Spring Lane fell below 18 m while the summary said the lowest pressure
/// was 22.89 m). The class: for every control the run shows acting on a pressure below a
/// threshold, the summary's lowest pressure is at or below that threshold, and the summary says
/// it covers every solved instant.
#[test]
fn lowest_pressure_covers_every_solved_instant_not_only_report_times() {
    let out = ringmain(&["simulate".as_ref(), demo().as_os_str(), "--format".as_ref(), "json".as_ref()]);
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let lowest = &v["summary"]["lowest_pressure"];
    let low = lowest["pressure"].as_f64().unwrap();
    assert_eq!(lowest["over"], "every solved instant");
    let fired: Vec<&str> = v["events"]
        .as_array()
        .unwrap()
        .iter()
        .filter_map(|e| e["what"].as_str())
        .filter(|w| w.contains("control 'duty-pressure'"))
        .collect();
    assert!(!fired.is_empty(), "the demo's pressure control must act for this test to mean something");
    // The demo's threshold: 18 m at Spring Lane (examples/hillside-day.toml).
    assert!(low <= 18.0 + 1e-3, "lowest pressure {low} m, but a control acted below 18 m: {fired:?}");
    let table = ringmain(&["simulate".as_ref(), demo().as_os_str()]);
    let text = String::from_utf8(table.stdout).unwrap();
    assert!(text.contains("over every solved instant"), "{text}");
}
