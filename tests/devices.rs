//! Pumps, control valves and check valves: every device in each of its states, with its defining
//! condition asserted on the solution.

use ringmain_core::{read_str, solve, Format, LinkState, Model, Solution};

const TAU: f64 = 1e-4; // default head tolerance, m

fn model(text: &str) -> Model {
    read_str(text, Format::Toml, "test.toml").unwrap_or_else(|e| panic!("{e}"))
}

fn run(text: &str) -> (Model, Solution) {
    let m = model(text);
    let s = solve(&m).unwrap_or_else(|e| panic!("{e}"));
    (m, s)
}

fn node(m: &Model, s: &Solution, id: &str) -> (f64, f64) {
    let i = m.node_index(id).unwrap();
    (s.head[i], s.pressure[i])
}

fn link(m: &Model, s: &Solution, id: &str) -> (f64, LinkState) {
    let k = m.link_index(id).unwrap();
    (s.flow[k], s.link_state[k])
}

/// Mass balance at every connected junction, from the flows alone.
fn assert_mass_balance(m: &Model, s: &Solution) {
    let mut net = vec![0.0; m.nodes().len()];
    for (l, q) in m.links().iter().zip(&s.flow) {
        net[l.to] += q;
        net[l.from] -= q;
    }
    for (i, n) in m.nodes().iter().enumerate() {
        if n.fixed_head().is_none() && s.connected[i] {
            assert!((net[i] - n.demand()).abs() < 1e-7, "mass balance at {}: {} vs {}", n.id, net[i], n.demand());
        }
    }
}

/// A source at `h_up`, a junction upstream of the valve, the valve, and a demand node below it.
fn valve_line(h_up: f64, valve: &str, setting: f64, demand: f64, extra: &str) -> String {
    format!(
        r#"
[[nodes]]
id = "Source"
kind = "reservoir"
head = {h_up}
[[nodes]]
id = "Up"
elevation = 10.0
[[nodes]]
id = "Down"
elevation = 0.0
demand = {demand}
[[links]]
id = "Main"
from = "Source"
to = "Up"
length = 500
diameter = 200
roughness = 120
[[links]]
id = "V"
kind = "valve"
valve = "{valve}"
from = "Up"
to = "Down"
diameter = 150
setting = {setting}
minor_loss = 0.5
{extra}
"#
    )
}

#[test]
fn pressure_reducing_active_holds_downstream_pressure_exactly() {
    let (m, s) = run(&valve_line(80.0, "pressure-reducing", 35.0, 10.0, ""));
    let (q, state) = link(&m, &s, "V");
    assert_eq!(state, LinkState::Active);
    let (h_down, p_down) = node(&m, &s, "Down");
    let (h_up, _) = node(&m, &s, "Up");
    assert!((p_down - 35.0).abs() < 1e-9, "downstream pressure {p_down}");
    assert!(h_up > h_down && q > 0.0);
    assert!((q - 0.010).abs() < 1e-9);
    assert_mass_balance(&m, &s);
}

#[test]
fn pressure_reducing_opens_fully_when_upstream_is_too_low() {
    // Source 40 m: the downstream node (elevation 0) could at best reach about 40 m, so a
    // 45 m setting cannot be held.
    let (m, s) = run(&valve_line(40.0, "pressure-reducing", 45.0, 10.0, ""));
    let (q, state) = link(&m, &s, "V");
    assert_eq!(state, LinkState::OpenUpstreamLow);
    let (_, p_down) = node(&m, &s, "Down");
    assert!(p_down < 45.0 && q > 0.0);
    // Open: the valve's loss is its open loss K v^2 / 2g (K = 0.5, D = 150 mm).
    let k = m.link_index("V").unwrap();
    let v = 0.010 / (std::f64::consts::PI * 0.15 * 0.15 / 4.0);
    assert!((s.headloss[k] - 0.5 * v * v / (2.0 * 9.80665)).abs() < 1e-6);
}

#[test]
fn pressure_reducing_closes_against_back_flow() {
    // The downstream node is also fed by a higher reservoir: flow through the valve would have to
    // go backwards, so it closes.
    let extra = r#"
[[nodes]]
id = "High"
kind = "reservoir"
head = 60.0
[[links]]
id = "Feed"
from = "High"
to = "Down"
length = 200
diameter = 200
roughness = 120
"#;
    let (m, s) = run(&valve_line(70.0, "pressure-reducing", 30.0, 5.0, extra));
    let (q, state) = link(&m, &s, "V");
    assert_eq!(state, LinkState::ValveClosed);
    assert_eq!(q, 0.0);
    let (_, p_down) = node(&m, &s, "Down");
    assert!(p_down > 30.0 - TAU, "downstream {p_down} must be above the setting when closed");
}

/// A downstream reservoir lets the sustaining valve's flow vary.
const LOW_OUTLET: &str = r#"
[[nodes]]
id = "Low"
kind = "reservoir"
head = 5.0
[[links]]
id = "Out"
from = "Down"
to = "Low"
length = 300
diameter = 150
roughness = 120
"#;

#[test]
fn pressure_sustaining_holds_upstream_pressure() {
    // Upstream junction at elevation 10: sustaining 40 m there means a head of 50 m. A strong
    // source keeps it above 40 m even with the valve fully open.
    let (m, s) = run(&valve_line(120.0, "pressure-sustaining", 40.0, 0.0, LOW_OUTLET));
    let (q, state) = link(&m, &s, "V");
    let (_, p_up) = node(&m, &s, "Up");
    assert_eq!(state, LinkState::OpenAboveSetting, "p_up = {p_up}");
    assert!(p_up >= 40.0 - TAU && q > 0.0);

    // A weaker source: only by throttling can the valve hold 40 m upstream.
    let (m, s) = run(&valve_line(60.0, "pressure-sustaining", 40.0, 0.0, LOW_OUTLET));
    let (q, state) = link(&m, &s, "V");
    let (_, p_up) = node(&m, &s, "Up");
    assert_eq!(state, LinkState::Active);
    assert!((p_up - 40.0).abs() < 1e-9, "upstream pressure {p_up}");
    assert!(q > 0.0);
    assert_mass_balance(&m, &s);
}

#[test]
fn pressure_sustaining_closes_when_upstream_cannot_reach_setting() {
    // Source head 45 m: the upstream node (elevation 10) never reaches 40 m of pressure.
    let (m, s) = run(&valve_line(45.0, "pressure-sustaining", 40.0, 0.0, LOW_OUTLET));
    let (q, state) = link(&m, &s, "V");
    assert_eq!(state, LinkState::ValveClosed);
    assert_eq!(q, 0.0);
}

#[test]
fn a_valve_feeding_a_dead_end_cannot_regulate_and_stays_open() {
    // The downstream demand alone sets the flow: the sustaining valve is fully open.
    let (m, s) = run(&valve_line(80.0, "pressure-sustaining", 40.0, 8.0, ""));
    let (q, state) = link(&m, &s, "V");
    assert_eq!(state, LinkState::OpenAboveSetting);
    assert!((q - 0.008).abs() < 1e-9);
}

#[test]
fn flow_control_holds_flow_or_opens_fully() {
    let extra = LOW_OUTLET;
    // 12 L/s is easily driven by 40 m of head difference.
    let (m, s) = run(&valve_line(45.0, "flow-control", 12.0, 0.0, extra));
    let (q, state) = link(&m, &s, "V");
    assert_eq!(state, LinkState::Active);
    assert!((q - 0.012).abs() < 1e-12);
    let k = m.link_index("V").unwrap();
    let v = 0.012 / (std::f64::consts::PI * 0.15 * 0.15 / 4.0);
    assert!(s.headloss[k] >= 0.5 * v * v / (2.0 * 9.80665) - TAU, "enough head to throttle");

    // 500 L/s cannot be pushed: the valve is fully open and says why (a diagnosis, not an error).
    let (m, s) = run(&valve_line(45.0, "flow-control", 500.0, 0.0, extra));
    let (q, state) = link(&m, &s, "V");
    assert_eq!(state, LinkState::OpenBelowSetting);
    assert!(q > 0.0 && q < 0.5);
    assert!(state.reason().unwrap().contains("cannot drive"));
}

#[test]
fn throttle_valve_loses_k_velocity_head() {
    let extra = LOW_OUTLET;
    let (m, s) = run(&valve_line(45.0, "throttle", 25.0, 0.0, extra));
    let k = m.link_index("V").unwrap();
    let v = s.flow[k] / (std::f64::consts::PI * 0.15 * 0.15 / 4.0);
    // h = K v^2 / 2g with K = the setting (common practice definition of a loss coefficient).
    assert!((s.headloss[k] - 25.0 * v * v / (2.0 * 9.80665)).abs() < 1e-8);
    assert_eq!(s.link_state[k], LinkState::Open);
}

#[test]
fn pressure_reducing_valves_in_series_and_in_parallel() {
    // Series: 50 m source, PRV-1 holds 40 m at M, PRV-2 holds 25 m at D (all at elevation 0).
    let series = r#"
[[nodes]]
id = "S"
kind = "reservoir"
head = 70.0
[[nodes]]
id = "U"
elevation = 0
[[nodes]]
id = "M"
elevation = 0
demand = 2
[[nodes]]
id = "D"
elevation = 0
demand = 6
[[links]]
id = "P"
from = "S"
to = "U"
length = 100
diameter = 200
roughness = 120
[[links]]
id = "PRV-1"
kind = "valve"
valve = "pressure-reducing"
from = "U"
to = "M"
diameter = 150
setting = 40
[[links]]
id = "PRV-2"
kind = "valve"
valve = "pressure-reducing"
from = "M"
to = "D"
diameter = 100
setting = 25
"#;
    let (m, s) = run(series);
    assert_eq!(link(&m, &s, "PRV-1").1, LinkState::Active);
    assert_eq!(link(&m, &s, "PRV-2").1, LinkState::Active);
    assert!((node(&m, &s, "M").1 - 40.0).abs() < 1e-9);
    assert!((node(&m, &s, "D").1 - 25.0).abs() < 1e-9);
    assert!((link(&m, &s, "PRV-1").0 - 0.008).abs() < 1e-9);
    assert!((link(&m, &s, "PRV-2").0 - 0.006).abs() < 1e-9);

    // Two valves in series fighting each other: the downstream one is set higher than the
    // upstream one holds. It cannot regulate and opens fully; the solve ends with that diagnosis.
    let fighting = series.replace("setting = 25", "setting = 45");
    let (m, s) = run(&fighting);
    assert_eq!(link(&m, &s, "PRV-1").1, LinkState::Active);
    assert_eq!(link(&m, &s, "PRV-2").1, LinkState::OpenUpstreamLow);
    assert!(node(&m, &s, "D").1 < 45.0);

    // Parallel: two valves between the same nodes with settings 30 and 35: the higher one holds
    // the downstream pressure, the lower one sees its downstream above its setting and closes.
    let parallel = r#"
[[nodes]]
id = "S"
kind = "reservoir"
head = 70.0
[[nodes]]
id = "U"
elevation = 0
[[nodes]]
id = "D"
elevation = 0
demand = 6
[[links]]
id = "P"
from = "S"
to = "U"
length = 100
diameter = 200
roughness = 120
[[links]]
id = "A"
kind = "valve"
valve = "pressure-reducing"
from = "U"
to = "D"
diameter = 150
setting = 30
[[links]]
id = "B"
kind = "valve"
valve = "pressure-reducing"
from = "U"
to = "D"
diameter = 150
setting = 35
"#;
    let (m, s) = run(parallel);
    assert_eq!(link(&m, &s, "B").1, LinkState::Active);
    assert_eq!(link(&m, &s, "A").1, LinkState::ValveClosed);
    assert!((node(&m, &s, "D").1 - 35.0).abs() < 1e-9);
    assert!((link(&m, &s, "B").0 - 0.006).abs() < 1e-9);
}

fn prv_into_tank(level: f64) -> String {
    format!(
        r#"
[[nodes]]
id = "S"
kind = "reservoir"
head = 80.0
[[nodes]]
id = "U"
elevation = 20
[[nodes]]
id = "T"
kind = "tank"
elevation = 30
level = {level}
max_level = 10
[[links]]
id = "P"
from = "S"
to = "U"
length = 400
diameter = 200
roughness = 120
[[links]]
id = "PRV"
kind = "valve"
valve = "pressure-reducing"
from = "U"
to = "T"
diameter = 150
setting = 6.0
"#
    )
}

#[test]
fn pressure_reducing_valve_feeding_a_tank() {
    // Tank level 4 m: the tank's pressure (4 m) is below the 6 m setting, so the valve is open
    // and fills the tank.
    let (m, s) = run(&prv_into_tank(4.0));
    let (q, state) = link(&m, &s, "PRV");
    assert_eq!(state, LinkState::OpenUpstreamLow);
    assert!(q > 0.0);
    // Level 8 m: above the setting, the valve closes.
    let (m, s) = run(&prv_into_tank(8.0));
    let (q, state) = link(&m, &s, "PRV");
    assert_eq!(state, LinkState::ValveClosed);
    assert_eq!(q, 0.0);
}

fn pumped(speed: f64, tank_level: f64) -> String {
    format!(
        r#"
[[nodes]]
id = "Sump"
kind = "reservoir"
head = 10.0
[[nodes]]
id = "J"
elevation = 10.0
demand = 0.5
[[nodes]]
id = "K"
elevation = 10.0
[[nodes]]
id = "T"
kind = "tank"
elevation = 40.0
level = {tank_level}
[[links]]
id = "PU"
kind = "pump"
from = "Sump"
to = "J"
head_curve = [[0.0, 50.0], [30.0, 40.0], [45.0, 30.0]]
speed = {speed}
[[links]]
id = "CV"
from = "J"
to = "K"
length = 10
diameter = 200
roughness = 120
check_valve = true
[[links]]
id = "Rising main"
from = "K"
to = "T"
length = 900
diameter = 200
roughness = 110
"#
    )
}

#[test]
fn pump_operating_point_is_on_curve_and_system_curve() {
    let (m, s) = run(&pumped(1.0, 5.0));
    let (q, state) = link(&m, &s, "PU");
    assert_eq!(state, LinkState::Open);
    let k = m.link_index("PU").unwrap();
    let p = s.pumps.iter().find(|p| p.link == k).unwrap();
    // The quadratic through the three points, evaluated independently here (L/s, m).
    let ql = q * 1e3;
    let (x0, y0, x1, y1, x2, y2) = (0.0, 50.0, 30.0, 40.0, 45.0, 30.0);
    let h = y0 * (ql - x1) * (ql - x2) / ((x0 - x1) * (x0 - x2))
        + y1 * (ql - x0) * (ql - x2) / ((x1 - x0) * (x1 - x2))
        + y2 * (ql - x0) * (ql - x1) / ((x2 - x0) * (x2 - x1));
    assert!((p.head - h).abs() < 1e-6, "pump head {} vs curve {h}", p.head);
    assert_mass_balance(&m, &s);
}

#[test]
fn check_valve_beside_a_stopped_pump_holds_the_tank() {
    let (m, s) = run(&pumped(0.0, 5.0));
    assert_eq!(link(&m, &s, "PU").1, LinkState::PumpStopped);
    // With the pump stopped, the tank would drain back through the check valve to the small
    // draw-off at J: it closes, and J is reported as cut off rather than fed backwards.
    assert_eq!(link(&m, &s, "CV").1, LinkState::CheckValveClosed);
    assert!(link(&m, &s, "Rising main").0.abs() < 1e-12);
    assert!(!s.connected[m.node_index("J").unwrap()]);
    assert!(s.warnings.iter().any(|w| w.message.contains("cut off") && w.kind.code() == "cut-off"));
}

#[test]
fn pump_closes_when_asked_for_more_than_its_shutoff_head() {
    // Tank surface at 40 + 25 = 65 m: a lift of 55 m from the sump, above the 50 m shutoff head.
    let text = pumped(1.0, 25.0).replace("check_valve = true", "check_valve = false");
    let (m, s) = run(&text);
    let (q, state) = link(&m, &s, "PU");
    assert_eq!(state, LinkState::PumpShutoff);
    assert_eq!(state.reason(), Some("head above shutoff"));
    assert_eq!(q, 0.0);
    let lift = node(&m, &s, "J").0 - 10.0;
    assert!(lift >= 50.0 - TAU, "the head against the closed pump ({lift}) is above shutoff");
}

#[test]
fn pump_hydraulic_power_reference_value() {
    // A pump delivering 0.2 m3/s against 50 m of head, water at 20 deg C (rho = 998.2 kg/m3):
    // rho g Q H = 97.9 kW (common practice reference value).
    let text = r#"
[units]
flow = "m3/s"
[[nodes]]
id = "A"
kind = "reservoir"
head = 0.0
[[nodes]]
id = "B"
kind = "reservoir"
head = 50.0
[[links]]
id = "PU"
kind = "pump"
from = "A"
to = "B"
head_curve = [[0.0, 60.0], [0.2, 50.0]]
efficiency = 80
"#;
    let (m, s) = run(text);
    let p = &s.pumps[0];
    assert!((s.flow[m.link_index("PU").unwrap()] - 0.2).abs() < 1e-9);
    assert!((p.hydraulic_power / 1e3 - 97.9).abs() < 0.05, "{}", p.hydraulic_power);
    assert!((p.shaft_power - p.hydraulic_power / 0.8).abs() < 1e-6);
}

#[test]
fn constant_power_pump_delivers_its_power() {
    let text = r#"
[[nodes]]
id = "A"
kind = "reservoir"
head = 0.0
[[nodes]]
id = "J"
elevation = 0
[[nodes]]
id = "B"
kind = "reservoir"
head = 30.0
[[links]]
id = "PU"
kind = "pump"
from = "A"
to = "J"
power = 15.0
[[links]]
id = "P"
from = "J"
to = "B"
length = 1000
diameter = 250
roughness = 120
"#;
    let (m, s) = run(text);
    let p = &s.pumps[0];
    let q = s.flow[m.link_index("PU").unwrap()];
    let rho = m.options.water_properties().density;
    // H = P / (rho g Q): the hydraulic power equals the set 15 kW.
    assert!((rho * 9.80665 * q * p.head - 15_000.0).abs() < 1e-3, "{} W", rho * 9.80665 * q * p.head);
}

#[test]
fn pump_speed_follows_the_affinity_laws() {
    // Pump between two reservoirs with lift L: at speed s it runs where s^2 h(Q/s) = L.
    let text = |speed: f64| {
        format!(
            r#"
[units]
flow = "m3/s"
[[nodes]]
id = "A"
kind = "reservoir"
head = 0.0
[[nodes]]
id = "B"
kind = "reservoir"
head = 20.0
[[links]]
id = "PU"
kind = "pump"
from = "A"
to = "B"
head_curve = [[0.0, 40.0], [0.1, 30.0]]
speed = {speed}
"#
        )
    };
    for speed in [0.8, 1.0, 1.2] {
        let (m, s) = run(&text(speed));
        let q = s.flow[m.link_index("PU").unwrap()];
        // h(Q) = 40 - 1000 Q^2, so s^2 (40 - 1000 (Q/s)^2) = 20  =>  Q = s sqrt((40 - 20/s^2)/1000).
        let expected = speed * ((40.0 - 20.0 / (speed * speed)) / 1000.0).sqrt();
        assert!((q - expected).abs() < 1e-9, "speed {speed}: {q} vs {expected}");
    }
}

#[test]
fn bad_pump_curves_are_errors_naming_the_pump() {
    let base = pumped(1.0, 5.0);
    for (curve, needle) in [
        ("[[0.0, 50.0], [30.0, 52.0]]", "decrease"),
        ("[[0.0, 50.0]]", "at least two"),
        ("[[30.0, 50.0], [10.0, 40.0]]", "increase"),
        ("[[0.0, 50.0], [\"a\", 40.0]]", "pair"),
    ] {
        let text = base.replace("[[0.0, 50.0], [30.0, 40.0], [45.0, 30.0]]", curve);
        let err = read_str(&text, Format::Toml, "m.toml").unwrap_err().to_string();
        assert!(err.contains("link 'PU'") && err.contains("head_curve") && err.contains(needle), "{err}");
    }
}
