//! Pump stations: named fittings in models and in the link law, and the `duty` and `fittings`
//! commands, through the library and the `ringmain` binary.
//!
//! The reference checks of the values (fittings' K against `fluids`, the system curve against
//! the closed form, vapour pressure against `iapws`, ISO 2533) are in
//! tests/python/test_station_reference.py; here: bad input of every new key, the law's slope,
//! the writer's round trip, the command's options and its errors. The station is invented.

use ringmain_core::physics::WaterProperties;
use ringmain_core::solve::links::{minor_losses, LinkLaw};
use ringmain_core::{read_str, Format, Model};
use serde_json::Value;
use std::path::{Path, PathBuf};

mod common;
use common::{run, scratch, Run};

/// An invented lift station: a sump, a suction pipe, a pump, a rising main to a hilltop tank,
/// and a branch with a valve.
const STATION: &str = r#"title = "Ashby Fold lift station (invented)"

[hydraulics]
headloss = "darcy-weisbach"
fittings_method = "three-k"
site_elevation = 220.0

[[nodes]]
id = "Sump"
kind = "reservoir"
head = 212.0

[[nodes]]
id = "PU-in"
elevation = 213.5

[[nodes]]
id = "PU-out"
elevation = 213.5

[[nodes]]
id = "Yard"
elevation = 214.0
demand = 2.0

[[nodes]]
id = "Hilltop"
kind = "tank"
elevation = 236.0
level = 4.0
min_level = 1.0
max_level = 7.0
diameter = 18.0

[[links]]
id = "P-suction"
from = "Sump"
to = "PU-in"
length = 12.0
diameter = 250
roughness = 0.05
fittings = [{ kind = "entrance-sharp" }, { kind = "elbow-90", count = 2 }, { kind = "gate-valve", opening = 1.0 }]

[[links]]
id = "PU-1"
kind = "pump"
from = "PU-in"
to = "PU-out"
head_curve = [[0.0, 42.0], [30.0, 37.0], [55.0, 26.0]]
efficiency_curve = [[0.0, 1.0], [20.0, 55.0], [35.0, 72.0], [50.0, 68.0], [70.0, 50.0]]
elevation = 214.0
npsh_required_curve = [[0.0, 2.0], [40.0, 3.5], [90.0, 8.0]]

[[links]]
id = "P-rising"
from = "PU-out"
to = "Hilltop"
length = 640.0
diameter = 200
roughness = 0.1
fittings = [{ kind = "check-valve-swing" }, { kind = "bend", radius = 1.5, angle = 45 }, { kind = "exit" }]

[[links]]
id = "V-yard"
kind = "valve"
valve = "throttle"
from = "PU-out"
to = "Yard"
diameter = 80
setting = 2.0
fittings = [{ kind = "tee-branch" }, { kind = "globe-valve" }]
"#;

/// [`STATION`] with `old` replaced by `new` (which must occur exactly once), written to a file.
fn station_with(test: &str, old: &str, new: &str) -> PathBuf {
    assert_eq!(STATION.matches(old).count(), 1, "the edit {old:?} must match exactly once");
    let path = scratch(test).join("station.toml");
    std::fs::write(&path, STATION.replacen(old, new, 1)).expect("write model");
    path
}

/// Exit code 2, one error line naming the file and every needle.
fn assert_invalid(path: &Path, run: &Run, needles: &[&str]) {
    assert_eq!(run.code, Some(2), "expected exit code 2; stderr:\n{}", run.stderr);
    assert!(run.stdout.is_empty(), "no results for invalid input:\n{}", run.stdout);
    let line = run.stderr.lines().next().unwrap_or_default();
    assert!(line.starts_with("error: ") && line.contains(&path.display().to_string()), "{line}");
    for needle in needles {
        assert!(line.contains(needle), "the message must contain {needle:?}: {line}");
    }
}

fn check_bad_fitting(test: &str, old: &str, new: &str, needles: &[&str]) {
    let path = station_with(test, old, new);
    let p = path.to_str().unwrap();
    assert_invalid(&path, &run(&["solve", p]), needles);
    // `duty` reads the model the same way.
    assert_invalid(&path, &run(&["duty", p, "--pump", "PU-1"]), needles);
}

const SUCTION_FITTINGS: &str = r#"fittings = [{ kind = "entrance-sharp" }, { kind = "elbow-90", count = 2 }, { kind = "gate-valve", opening = 1.0 }]"#;

fn suction_with(fittings: &str) -> String {
    format!("fittings = [{fittings}]")
}

#[test]
fn the_station_model_is_valid() {
    let path = station_with("valid", "title = ", "title = ");
    let r = run(&["solve", path.to_str().unwrap(), "--format", "json"]);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
}

#[test]
fn unknown_fitting_kind() {
    check_bad_fitting(
        "unknown_kind",
        SUCTION_FITTINGS,
        &suction_with(r#"{ kind = "entrance-sharp" }, { kind = "elbow-91" }"#),
        &["link 'P-suction'", "fittings[2].kind", "elbow-91", "did you mean \"elbow-90\""],
    );
}

#[test]
fn gate_valve_opening_outside_zero_to_one() {
    for (i, opening) in ["0.0", "1.5", "-0.2"].iter().enumerate() {
        check_bad_fitting(
            &format!("opening_{i}"),
            SUCTION_FITTINGS,
            &suction_with(&format!(r#"{{ kind = "elbow-90" }}, {{ kind = "gate-valve", opening = {opening} }}"#)),
            &["link 'P-suction'", "fittings[2].opening", "at most 1"],
        );
    }
}

#[test]
fn bend_radius_below_half_a_diameter() {
    check_bad_fitting(
        "radius",
        SUCTION_FITTINGS,
        &suction_with(r#"{ kind = "exit" }, { kind = "exit" }, { kind = "bend", radius = 0.4 }"#),
        &["link 'P-suction'", "fittings[3].radius", "at least 0.5"],
    );
}

#[test]
fn bend_without_radius_or_with_a_bad_angle() {
    check_bad_fitting(
        "no_radius",
        SUCTION_FITTINGS,
        &suction_with(r#"{ kind = "bend" }"#),
        &["link 'P-suction'", "fittings[1].radius", "is missing"],
    );
    check_bad_fitting(
        "angle",
        SUCTION_FITTINGS,
        &suction_with(r#"{ kind = "bend", radius = 2, angle = 200 }"#),
        &["link 'P-suction'", "fittings[1].angle", "180"],
    );
}

#[test]
fn fitting_keys_that_do_not_apply_or_are_unknown() {
    check_bad_fitting(
        "radius_on_elbow",
        SUCTION_FITTINGS,
        &suction_with(r#"{ kind = "elbow-90", radius = 2 }"#),
        &["link 'P-suction'", "fittings[1].radius", "does not apply to a elbow-90"],
    );
    check_bad_fitting(
        "unknown_key",
        SUCTION_FITTINGS,
        &suction_with(r#"{ kind = "elbow-90", cuont = 2 }"#),
        &["link 'P-suction'", "fittings[1].cuont", "did you mean 'count'"],
    );
    check_bad_fitting(
        "count_zero",
        SUCTION_FITTINGS,
        &suction_with(r#"{ kind = "elbow-90", count = 0 }"#),
        &["link 'P-suction'", "fittings[1].count"],
    );
    check_bad_fitting(
        "not_a_table",
        SUCTION_FITTINGS,
        r#"fittings = ["elbow-90"]"#,
        &["link 'P-suction'", "fittings[1]", "must be a table"],
    );
}

#[test]
fn fittings_on_a_pump_and_bends_on_a_valve() {
    check_bad_fitting(
        "on_pump",
        "elevation = 214.0\nnpsh",
        "elevation = 214.0\nfittings = [{ kind = \"elbow-90\" }]\nnpsh",
        &["link 'PU-1'", "fittings", "does not apply to a pump"],
    );
    check_bad_fitting(
        "bend_on_valve",
        r#"fittings = [{ kind = "tee-branch" }, { kind = "globe-valve" }]"#,
        r#"fittings = [{ kind = "tee-branch" }, { kind = "bend", radius = 2 }]"#,
        &["link 'V-yard'", "fittings[2].kind", "on a pipe"],
    );
}

#[test]
fn bad_hydraulics_and_pump_keys() {
    check_bad_fitting(
        "method",
        r#"fittings_method = "three-k""#,
        r#"fittings_method = "three-kay""#,
        &["[hydraulics]", "fittings_method", "did you mean \"three-k\""],
    );
    check_bad_fitting(
        "site",
        "site_elevation = 220.0",
        "site_elevation = 25000.0",
        &["[hydraulics]", "site_elevation", "standard atmosphere"],
    );
    check_bad_fitting(
        "npsh_curve",
        "npsh_required_curve = [[0.0, 2.0], [40.0, 3.5], [90.0, 8.0]]",
        "npsh_required_curve = [[0.0, 2.0], [40.0, 3.5], [30.0, 8.0]]",
        &["link 'PU-1'", "npsh_required_curve", "increase"],
    );
    check_bad_fitting(
        "pump_elevation",
        "elevation = 214.0\nnpsh",
        "elevation = \"high\"\nnpsh",
        &["link 'PU-1'", "elevation"],
    );
}

fn model() -> Model {
    read_str(STATION, Format::Toml, "station.toml").expect("valid station")
}

#[test]
fn fitted_laws_have_consistent_values_and_slopes() {
    // Newton's method needs the slope of each law to be the derivative of its value: checked by
    // central differences on every pipe and valve with fittings, under every method, both
    // friction laws, across laminar, transitional and turbulent flows.
    for method in ["equivalent-length", "two-k", "three-k"] {
        for (law, roughness) in [("darcy-weisbach", "0.05"), ("hazen-williams", "120")] {
            let text = STATION
                .replace(r#"fittings_method = "three-k""#, &format!(r#"fittings_method = "{method}""#))
                .replace(r#"headloss = "darcy-weisbach""#, &format!(r#"headloss = "{law}""#))
                .replace("roughness = 0.05", &format!("roughness = {roughness}"))
                .replace("roughness = 0.1", &format!("roughness = {roughness}"));
            let m = read_str(&text, Format::Toml, "station.toml").expect("valid variant");
            for link in m.links().iter().filter(|l| l.as_pump().is_none()) {
                let law = LinkLaw::new(&m, link);
                for q in [-0.05, -1e-3, 1e-6, 2e-5, 1e-4, 3e-4, 2e-3, 0.03, 0.2] {
                    let (_, slope) = law.evaluate_exact(q);
                    let e = 1e-6 * q.abs();
                    let fd = (law.evaluate_exact(q + e).0 - law.evaluate_exact(q - e).0) / (2.0 * e);
                    assert!(
                        (slope - fd).abs() <= 1e-5 * slope.abs(),
                        "{method} {law:?} {} q={q}: slope {slope} vs {fd}",
                        link.id
                    );
                }
            }
        }
    }
}

#[test]
fn the_law_holds_the_fittings_head_loss() {
    // The minor part the report computes is the same as the law's extra head over the pipe
    // without fittings: the two are evaluated from the same K parts.
    let m = model();
    let water: WaterProperties = m.options.water_properties();
    let k = m.link_index("P-rising").unwrap();
    let mut bare = m.clone();
    bare.set_fittings(k, Vec::new()).unwrap();
    let link = &m.links()[k];
    for q in [0.004, 0.03, 0.09] {
        let with = LinkLaw::new(&m, link).evaluate_exact(q).0;
        let without = LinkLaw::new(&bare, &bare.links()[k]).evaluate_exact(q).0;
        let (_, minor) = minor_losses(&m, link, &water, q).unwrap();
        assert!((with - without - minor).abs() < 1e-12 * with, "q={q}: {with} - {without} vs {minor}");
    }
    assert_eq!(minor_losses(&m, link, &water, 0.0), None, "K is not defined at zero flow");
}

#[test]
fn fittings_round_trip_through_the_writer() {
    use ringmain_core::format::write::to_string;
    let m = model();
    for format in [Format::Toml, Format::Json] {
        let text = to_string(&m, format);
        let back = read_str(&text, format, "written").expect("the written model reads back");
        assert_eq!(back, m, "{format:?}:\n{text}");
    }
}

#[test]
fn a_network_with_fittings_converges_under_every_method() {
    for method in ["equivalent-length", "two-k", "three-k"] {
        let text = STATION.replace(r#"fittings_method = "three-k""#, &format!(r#"fittings_method = "{method}""#));
        let m = read_str(&text, Format::Toml, "station.toml").unwrap();
        let s = ringmain_core::solve(&m).expect("converges");
        assert!(s.max_energy_residual < 1e-6, "{method}: {}", s.max_energy_residual);
        assert!(s.iterations < 30, "{method}: {} iterations", s.iterations);
    }
}

fn duty_json(path: &Path, extra: &[&str]) -> Value {
    let mut args = vec!["duty", path.to_str().unwrap(), "--pump", "PU-1", "--format", "json"];
    args.extend_from_slice(extra);
    let r = run(&args);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    serde_json::from_str(&r.stdout).expect("JSON")
}

#[test]
fn duty_json_shape_and_tank_band() {
    let path = station_with("duty_shape", "title = ", "title = ");
    let got = duty_json(&path, &["--flows", "0:60:2.5", "--speeds", "0.85,1.0", "--tank-levels", "min,max"]);
    assert_eq!(got["pump"], "PU-1");
    let curve = got["system_curve"].as_array().unwrap();
    assert_eq!(curve.len(), 25, "0 to 60 by 2.5, STOP included");
    assert_eq!(curve[24][0].as_f64(), Some(60.0));
    let band = got["system_curve_band"].as_array().unwrap();
    assert_eq!(band.len(), curve.len());
    for (c, b) in curve.iter().zip(band) {
        let (h, lo, hi) = (c[1].as_f64().unwrap(), b[1].as_f64().unwrap(), b[2].as_f64().unwrap());
        assert!(lo <= h + 1e-9 && h <= hi + 1e-9, "{lo} <= {h} <= {hi}");
        // The tank's level spans 6 m (min_level 1 to max_level 7): the band is 6 m wide at
        // every flow (the tank is the only storage, downstream of the pump).
        assert!((hi - lo - 6.0).abs() < 1e-6, "{lo} {hi}");
    }
    let points = got["operating_points"].as_array().unwrap();
    assert_eq!(points.len(), 2);
    for p in points {
        for key in
            ["speed", "flow", "head", "efficiency", "shaft_power", "motor_rating", "npsh_available", "npsh_required"]
        {
            assert!(p[key].is_number(), "{key} in {p}");
        }
        // The motor: the smallest IEC 60072-1 rating at or above 1.1 x shaft power.
        let shaft = p["shaft_power"].as_f64().unwrap();
        let rating = p["motor_rating"].as_f64().unwrap();
        let next = ringmain_core::duty::IEC_60072_KW.iter().copied().find(|r| *r >= 1.1 * shaft);
        assert_eq!(Some(rating), next);
    }
    // Without --tank-levels min,max there is no band.
    assert!(duty_json(&path, &[]).get("system_curve_band").is_none());
}

#[test]
fn duty_in_feet_uses_horsepower_ratings() {
    let text = STATION
        .replace(
            "[hydraulics]",
            "[units]\nlength = \"ft\"\nflow = \"gpm\"\ndiameter = \"in\"\nroughness = \"ft\"\n\n[hydraulics]",
        )
        .replace("[[0.0, 42.0], [30.0, 37.0], [55.0, 26.0]]", "[[0.0, 138.0], [475.0, 121.0], [870.0, 85.0]]")
        .replace("[[0.0, 2.0], [40.0, 3.5], [90.0, 8.0]]", "[[0.0, 6.5], [630.0, 11.5], [1430.0, 26.0]]")
        .replace(
            "[[0.0, 1.0], [20.0, 55.0], [35.0, 72.0], [50.0, 68.0], [70.0, 50.0]]",
            "[[0.0, 1.0], [320.0, 55.0], [555.0, 72.0], [790.0, 68.0], [1110.0, 50.0]]",
        )
        .replace("diameter = 250", "diameter = 10")
        .replace("diameter = 200", "diameter = 8")
        .replace("diameter = 80", "diameter = 3")
        .replace("roughness = 0.05", "roughness = 0.00016")
        .replace("roughness = 0.1", "roughness = 0.0003")
        .replace("212.0", "695.5")
        .replace("213.5", "700.5")
        .replace("214.0", "702.0")
        .replace("236.0", "774.0")
        .replace("220.0", "722.0")
        .replace("demand = 2.0", "demand = 30.0")
        .replace("level = 4.0", "level = 13.0")
        .replace("min_level = 1.0", "min_level = 3.0")
        .replace("max_level = 7.0", "max_level = 23.0")
        .replace("diameter = 18.0", "diameter = 60.0");
    let path = scratch("feet").join("station.toml");
    std::fs::write(&path, text).unwrap();
    let got = duty_json(&path, &[]);
    for p in got["operating_points"].as_array().unwrap() {
        let shaft = p["shaft_power"].as_f64().unwrap();
        let next = ringmain_core::duty::NEMA_MG1_HP.iter().copied().find(|r| *r >= 1.1 * shaft);
        assert_eq!(p["motor_rating"].as_f64(), next, "NEMA MG 1 horsepower for a model in feet");
    }
    assert_eq!(got["units"]["power"], "hp");
}

#[test]
fn duty_errors_name_the_pump_and_the_option() {
    let path = station_with("duty_errors", "title = ", "title = ");
    let p = path.to_str().unwrap();
    let r = run(&["duty", p, "--pump", "PU-9"]);
    assert_invalid(&path, &r, &["link 'PU-9'", "no link has this id"]);
    let r = run(&["duty", p, "--pump", "P-rising"]);
    assert_invalid(&path, &r, &["link 'P-rising'", "not a pump"]);
    for flows in ["0:60", "a:b:c", "0:60:0", "-1:60:5", "60:0:5"] {
        let r = run(&["duty", p, "--pump", "PU-1", &format!("--flows={flows}")]);
        assert_eq!(r.code, Some(2), "--flows {flows}: {}", r.stderr);
        assert!(r.stderr.contains("--flows"), "{}", r.stderr);
    }
    let r = run(&["duty", p, "--pump", "PU-1", "--tank-levels", "low"]);
    assert_eq!(r.code, Some(2));
    assert!(r.stderr.contains("--tank-levels"), "{}", r.stderr);
    let r = run(&["duty", p, "--pump", "PU-1", "--speeds", "0"]);
    assert_invalid(&path, &r, &["link 'PU-1'", "speed"]);
    let r = run(&["duty", p, "--pump", "PU-1", "--motor-margin=-0.1"]);
    assert_eq!(r.code, Some(2));
    assert!(r.stderr.contains("--motor-margin"), "{}", r.stderr);
    // A speed at which the pump cannot reach the tank: no operating point, an error, not a
    // blank.
    let r = run(&["duty", p, "--pump", "PU-1", "--speeds", "0.5"]);
    assert_invalid(&path, &r, &["link 'PU-1'", "at speed 0.5", "cannot lift"]);
    // An operating point beyond the required-NPSH curve is an error naming the key.
    let short = station_with(
        "duty_npsh_short",
        "npsh_required_curve = [[0.0, 2.0], [40.0, 3.5], [90.0, 8.0]]",
        "npsh_required_curve = [[0.0, 2.0], [10.0, 3.5]]",
    );
    let r = run(&["duty", short.to_str().unwrap(), "--pump", "PU-1"]);
    assert_invalid(&short, &r, &["link 'PU-1'", "npsh_required_curve", "outside the curve"]);
}

#[test]
fn duty_band_needs_every_tank_max_level() {
    let path = station_with("duty_no_max", "max_level = 7.0\n", "");
    let r = run(&["duty", path.to_str().unwrap(), "--pump", "PU-1", "--tank-levels", "min,max"]);
    assert_invalid(&path, &r, &["node 'Hilltop'", "max_level"]);
}

#[test]
fn duty_without_storage_downstream_has_no_system_curve() {
    // The hilltop becomes a plain junction with a demand: the pump's flow is set by demands.
    let path = station_with(
        "duty_no_storage",
        "kind = \"tank\"\nelevation = 236.0\nlevel = 4.0\nmin_level = 1.0\nmax_level = 7.0\ndiameter = 18.0\n",
        "elevation = 236.0\ndemand = 20.0\n",
    );
    let r = run(&["duty", path.to_str().unwrap(), "--pump", "PU-1"]);
    assert_invalid(&path, &r, &["link 'PU-1'", "discharge", "no system curve"]);
}

#[test]
fn duty_chart_is_svg_and_never_overwrites_the_model() {
    let path = station_with("duty_plot", "title = ", "title = ");
    let p = path.to_str().unwrap();
    let chart = path.with_file_name("duty.svg");
    let r = run(&[
        "duty",
        p,
        "--pump",
        "PU-1",
        "--speeds",
        "0.9,1",
        "--tank-levels",
        "min,max",
        "--plot",
        chart.to_str().unwrap(),
    ]);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    let svg = std::fs::read_to_string(&chart).unwrap();
    assert!(svg.starts_with("<svg") && svg.trim_end().ends_with("</svg>"));
    for text in ["system curve", "pump at speed 0.9", "Efficiency", "Net positive suction head", "licensed engineer"] {
        assert!(svg.contains(text), "the chart shows {text:?}");
    }
    let before = std::fs::read(&path).unwrap();
    let r = run(&["duty", p, "--pump", "PU-1", "--plot", p]);
    assert_eq!(r.code, Some(2), "{}", r.stderr);
    assert_eq!(std::fs::read(&path).unwrap(), before, "the model is untouched");
    let dir = path.parent().unwrap();
    let leftovers: Vec<_> = std::fs::read_dir(dir)
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().ends_with(".tmp"))
        .collect();
    assert!(leftovers.is_empty(), "no temporary files left");
}

#[test]
fn fittings_command_lists_every_kind_and_source() {
    let r = run(&["fittings", "--format", "json"]);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    let got: Value = serde_json::from_str(&r.stdout).unwrap();
    let kinds: Vec<&str> = got["kinds"].as_array().unwrap().iter().map(|k| k["kind"].as_str().unwrap()).collect();
    assert_eq!(
        kinds,
        [
            "entrance-sharp",
            "elbow-90",
            "bend",
            "gate-valve",
            "globe-valve",
            "check-valve-swing",
            "tee-branch",
            "tee-run",
            "exit"
        ]
    );
    let table = run(&["fittings"]);
    for source in ["Crane", "Hooper", "Darby", "Rennels", "Perry"] {
        assert!(table.stdout.contains(source), "names {source}");
    }
}

#[test]
fn solve_reports_k_total_and_minor_share() {
    let path = station_with("k_total", "title = ", "title = ");
    let r = run(&["solve", path.to_str().unwrap(), "--format", "json"]);
    assert_eq!(r.code, Some(0), "{}", r.stderr);
    let got: Value = serde_json::from_str(&r.stdout).unwrap();
    for link in got["links"].as_array().unwrap() {
        match link["kind"].as_str().unwrap() {
            "pump" => assert!(link.get("k_total").is_none()),
            _ => {
                let k = link["k_total"].as_f64().expect("k_total at a non-zero flow");
                let share = link["minor_share"].as_f64().unwrap();
                assert!(k > 0.0 && share > 0.0 && share <= 1.0, "{link}");
            }
        }
    }
}
