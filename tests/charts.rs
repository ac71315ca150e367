//! The simulation charts (`simulate --plot`), read back from their SVG: switch-overs drawn as
//! steps at the instants they happen, the thresholds drawn, every axis labelled with its unit,
//! cumulative energy and cost on the pump chart.
//!
//! Check values: the instants of the switch-overs are the run's own events (the JSON event
//! log), and the tariff boundaries follow from the model's pattern (45-minute steps, so most fall
//! between the hourly reports); a step function has only horizontal and vertical segments, and
//! a cumulative quantity never decreases (definitions, no outside value needed).

use std::path::{Path, PathBuf};
use std::process::Command;

const MODEL: &str = "tests/data/charts/vane-hill-lift.toml";

fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("ringmain-charts-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// Runs the model with `--plot` and `--format json`; returns the charts' directory and the
/// events (hours, description).
fn run(name: &str) -> (PathBuf, Vec<(f64, String)>) {
    let dir = scratch(name);
    let model = Path::new(env!("CARGO_MANIFEST_DIR")).join(MODEL);
    let out = Command::new(env!("CARGO_BIN_EXE_ringmain"))
        .args(["simulate", model.to_str().unwrap(), "--plot", "charts", "--format", "json", "--output", "run.json"])
        .current_dir(&dir)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&std::fs::read(dir.join("run.json")).unwrap()).unwrap();
    let events = v["events"]
        .as_array()
        .unwrap()
        .iter()
        .map(|e| (e["time_s"].as_f64().unwrap() / 3600.0, e["what"].as_str().unwrap().to_owned()))
        .collect();
    (dir.join("charts"), events)
}

/// The value of attribute `name` in the tag `tag` (the text from `<` to `>`).
fn attr(tag: &str, name: &str) -> Option<String> {
    let key = format!(" {name}=\"");
    let start = tag.find(&key)? + key.len();
    Some(tag[start..].split('"').next()?.to_owned())
}

/// Every tag of `kind` (`path`, `rect`, `text`...) in the SVG, with the text that follows it.
fn tags<'a>(svg: &'a str, kind: &str) -> Vec<(&'a str, &'a str)> {
    let open = format!("<{kind} ");
    svg.match_indices(&open)
        .map(|(i, _)| {
            let end = i + svg[i..].find('>').unwrap();
            let text = svg[end + 1..].split('<').next().unwrap_or("");
            (&svg[i..=end], text)
        })
        .collect()
}

/// The lines of a chart: label and points (pixels).
fn lines(svg: &str) -> Vec<(String, Vec<(f64, f64)>)> {
    tags(svg, "path")
        .into_iter()
        .filter_map(|(tag, _)| {
            let label = attr(tag, "data-label")?;
            let d = attr(tag, "d")?;
            let points = d
                .split_whitespace()
                .map(|p| {
                    let (x, y) = p[1..].split_once(',').unwrap();
                    (x.parse().unwrap(), y.parse().unwrap())
                })
                .collect();
            Some((label.replace("&#39;", "'"), points))
        })
        .collect()
}

/// The pixel x of a time in hours.
fn x_of(svg: &str, hours: f64) -> f64 {
    let root = tags(svg, "svg")[0].0;
    let num = |k: &str| attr(root, k).unwrap().parse::<f64>().unwrap();
    num("data-plot-left") + num("data-plot-width") * hours / num("data-hours")
}

/// Whether the line jumps vertically at pixel `x` (two consecutive points there, different y);
/// coordinates are written to 0.1 px.
fn jumps_at(points: &[(f64, f64)], x: f64) -> bool {
    points.windows(2).any(|w| (w[0].0 - x).abs() < 0.11 && (w[1].0 - x).abs() < 0.11 && w[0].1 != w[1].1)
}

fn read(dir: &Path, name: &str) -> String {
    std::fs::read_to_string(dir.join(name)).unwrap()
}

#[test]
fn switch_overs_are_steps_at_the_instants_they_happen() {
    let (dir, events) = run("steps");
    let pump: Vec<f64> = events.iter().filter(|(_, w)| w.contains("'Lift'")).map(|e| e.0).collect();
    // The scenario switches the pump between reports (hourly), else the test proves nothing.
    assert!(pump.len() >= 3 && pump.iter().all(|h| (h - h.round()).abs() > 0.001), "{events:?}");
    let svg = read(&dir, "pumps.svg");
    let all = lines(&svg);
    let flow = &all.iter().find(|l| l.0 == "flow").unwrap().1;
    let power = &all.iter().find(|l| l.0 == "shaft power").unwrap().1;
    for &h in &pump {
        assert!(jumps_at(flow, x_of(&svg, h)), "flow has no step at {h} h");
        assert!(jumps_at(power, x_of(&svg, h)), "shaft power has no step at {h} h");
    }
    // Between reports without a switch the flow is not stepped: no jumps elsewhere.
    let jumps = flow.windows(2).filter(|w| (w[0].0 - w[1].0).abs() < 0.11 && w[0].1 != w[1].1).count();
    assert_eq!(jumps, pump.len());
    // The running strip starts and stops at the same instants.
    let mut ends: Vec<f64> = tags(&svg, "rect")
        .into_iter()
        .filter(|(t, _)| attr(t, "data-strip").as_deref() == Some("Lift"))
        .flat_map(|(t, _)| [attr(t, "data-from-h").unwrap(), attr(t, "data-to-h").unwrap()])
        .map(|v| v.parse::<f64>().unwrap())
        .filter(|&h| h > 0.0 && h < 24.0)
        .collect();
    ends.sort_by(f64::total_cmp);
    assert_eq!(ends.len(), pump.len());
    for (a, b) in ends.iter().zip(&pump) {
        assert!((a - b).abs() < 1e-9, "strip edge {a} h, switch at {b} h");
    }
    // Pressures jump at every switch-over too.
    let svg = read(&dir, "pressures.svg");
    let far = lines(&svg).into_iter().find(|l| l.0.starts_with("Far Lane")).unwrap().1;
    for &h in &pump {
        assert!(jumps_at(&far, x_of(&svg, h)), "pressure has no step at {h} h");
    }
}

#[test]
fn the_price_is_a_step_function_at_the_tariff_boundaries() {
    let (dir, _) = run("price");
    let svg = read(&dir, "pumps.svg");
    let price = lines(&svg).into_iter().find(|l| l.0 == "price").unwrap().1;
    // Only horizontal and vertical segments.
    for w in price.windows(2) {
        assert!(w[0].0 == w[1].0 || w[0].1 == w[1].1, "a ramp from {:?} to {:?}", w[0], w[1]);
    }
    // A step wherever the pattern (45 min, multipliers as in the model) changes its multiplier.
    let m = [0.5, 0.5, 1.0, 1.0, 1.5, 1.0, 1.0, 0.5];
    let mut steps = 0;
    for k in 1..32 {
        let h = 0.75 * k as f64;
        if m[k % 8] != m[(k - 1) % 8] {
            assert!(jumps_at(&price, x_of(&svg, h)), "no price step at {h} h");
            steps += 1;
        }
    }
    let vertical = price.windows(2).filter(|w| w[0].0 == w[1].0 && w[0].1 != w[1].1).count();
    assert_eq!(vertical, steps);
    // The low-tariff shading follows the same boundaries: its edges are at 45-minute multiples.
    let plot = |k: &str| attr(tags(&svg, "svg")[0].0, k).unwrap().parse::<f64>().unwrap();
    let per_hour = plot("data-plot-width") / plot("data-hours");
    for (t, _) in tags(&svg, "rect").into_iter().filter(|(t, _)| attr(t, "fill").as_deref() == Some("#f3ead0")) {
        let x: f64 = attr(t, "x").unwrap().parse().unwrap();
        if attr(t, "width").as_deref() == Some("22") {
            continue; // the legend's swatch
        }
        let h = (x - plot("data-plot-left")) / per_hour;
        assert!(((h / 0.75) - (h / 0.75).round()).abs() < 0.01, "shading starts at {h} h");
    }
}

#[test]
fn thresholds_are_drawn_on_the_tank_and_pressure_charts() {
    let (dir, _) = run("thresholds");
    let horizontal = |points: &[(f64, f64)]| points.len() == 2 && points[0].1 == points[1].1;
    let svg = read(&dir, "tanks.svg");
    let tank = lines(&svg);
    let y = |label: &str| {
        let l = tank.iter().find(|l| l.0 == label).unwrap_or_else(|| panic!("no line '{label}'"));
        assert!(horizontal(&l.1), "{label}");
        l.1[0].1
    };
    // Control set-points, with the tank's limits; higher levels are higher up.
    let (stop, start) = (y("control 'stop-full': above 4.60 m"), y("control 'start-low': below 2.20 m"));
    let (max, min) = (y("max 6.00 m"), y("min 0.50 m"));
    assert!(max < stop && stop < start && start < min);
    let svg = read(&dir, "pressures.svg");
    let pressure = lines(&svg);
    for label in [
        "criterion min_pressure 15.0 m",
        "criterion max_pressure 70.0 m",
        "control 'start-pressure': 'Far Lane' below 16.5 m",
    ] {
        let l = pressure.iter().find(|l| l.0 == label).unwrap_or_else(|| panic!("no line '{label}'"));
        assert!(horizontal(&l.1), "{label}");
    }
}

#[test]
fn every_axis_has_its_unit_and_the_pump_chart_accumulates_energy_and_cost() {
    let (dir, _) = run("axes");
    for (name, expected) in [
        ("tanks.svg", &["level (m)", "pump (bar: running)"][..]),
        ("pumps.svg", &["flow (L/s)", "shaft power (kW)", "energy (kWh)", "cost (EUR)", "price (EUR/kWh)"][..]),
        ("pressures.svg", &["pressure (m)"][..]),
    ] {
        let svg = read(&dir, name);
        let y: Vec<&str> = tags(&svg, "text")
            .into_iter()
            .filter(|(t, _)| attr(t, "class").as_deref() == Some("y-axis"))
            .map(|t| t.1)
            .collect();
        let x = tags(&svg, "text").into_iter().filter(|(t, _)| attr(t, "class").as_deref() == Some("x-axis")).count();
        // One frame per panel; each has both axes labelled.
        let panels = tags(&svg, "rect").into_iter().filter(|(t, _)| attr(t, "fill").as_deref() == Some("none")).count();
        assert_eq!((y.len(), x), (panels, panels), "{name}");
        for label in expected {
            assert!(y.contains(label), "{name}: no axis '{label}' in {y:?}");
        }
        for label in &y {
            assert!(label.ends_with(')') && label.contains(" ("), "{name}: '{label}' has no unit");
        }
    }
    let svg = read(&dir, "pumps.svg");
    let all = lines(&svg);
    for label in ["cumulative energy", "cumulative cost"] {
        let points = &all.iter().find(|l| l.0 == label).unwrap().1;
        // Never decreasing (y grows downwards), and rising over the day.
        assert!(points.windows(2).all(|w| w[1].1 <= w[0].1), "{label}");
        assert!(points.last().unwrap().1 < points[0].1, "{label}");
    }
}
