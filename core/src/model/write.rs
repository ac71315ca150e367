//! Writing a [`Model`] back as a model file (TOML or JSON), in the model's own units.
//!
//! The output reads back into an equal model (up to floating-point rounding of unit
//! conversions); defaults are written out explicitly so that the file documents itself.

use super::file::Format;
use super::time::{self as tm, Action, Condition};
use super::{HeadLossLaw, LinkKind, LinkStatus, Model, NodeKind, PumpDrive, ValveType, WaterSpec};
use crate::physics::pump::Efficiency;
use crate::units::HORSEPOWER;
use serde_json::{json, Map, Value};

/// The model as a JSON value tree in its own units.
pub fn to_value(model: &Model) -> Value {
    let u = &model.units;
    let o = &model.options;
    let len = |v: f64| u.length.from_si(v);
    let density = o.water_properties().density;
    let time = &model.time;
    let pattern_id = |i: usize| json!(time.patterns[i].id);
    let mut hydraulics = Map::new();
    hydraulics.insert("headloss".into(), json!(o.headloss.label()));
    match o.water {
        WaterSpec::Temperature(t) => hydraulics.insert("water_temperature".into(), json!(t)),
        WaterSpec::KinematicViscosity(nu) => hydraulics.insert("kinematic_viscosity".into(), json!(nu)),
    };
    hydraulics.insert("max_iterations".into(), json!(o.max_iterations));
    hydraulics.insert("head_tolerance".into(), json!(len(o.head_tolerance)));
    hydraulics.insert("flow_tolerance".into(), json!(o.flow_tolerance));

    let nodes: Vec<Value> = model
        .nodes()
        .iter()
        .enumerate()
        .map(|(i, n)| {
            let mut m = Map::new();
            m.insert("id".into(), json!(n.id));
            m.insert("kind".into(), json!(n.kind.label()));
            match &n.kind {
                NodeKind::Junction { demand } => {
                    m.insert("elevation".into(), json!(len(n.elevation)));
                    match time.demands.get(&i).map(Vec::as_slice) {
                        Some([one]) => {
                            m.insert("demand".into(), json!(u.flow.from_si(one.base)));
                            if let Some(p) = one.pattern {
                                m.insert("pattern".into(), pattern_id(p));
                            }
                        }
                        Some(several) => {
                            let list: Vec<Value> = several
                                .iter()
                                .map(|d| {
                                    let mut e = Map::new();
                                    e.insert("base".into(), json!(u.flow.from_si(d.base)));
                                    if let Some(p) = d.pattern {
                                        e.insert("pattern".into(), pattern_id(p));
                                    }
                                    Value::Object(e)
                                })
                                .collect();
                            m.insert("demands".into(), Value::Array(list));
                        }
                        None => {
                            m.insert("demand".into(), json!(u.flow.from_si(*demand)));
                        }
                    }
                }
                NodeKind::Reservoir { head } => {
                    m.insert("head".into(), json!(len(*head)));
                    m.insert("elevation".into(), json!(len(n.elevation)));
                    if let Some(&p) = time.head_patterns.get(&i) {
                        m.insert("head_pattern".into(), pattern_id(p));
                    }
                }
                NodeKind::Tank(t) => {
                    m.insert("elevation".into(), json!(len(n.elevation)));
                    m.insert("level".into(), json!(len(t.level)));
                    m.insert("min_level".into(), json!(len(t.min_level)));
                    if let Some(v) = t.max_level {
                        m.insert("max_level".into(), json!(len(v)));
                    }
                    if let Some(v) = t.diameter {
                        m.insert("diameter".into(), json!(len(v)));
                    }
                    if let Some(c) = time.volume_curves.get(&i) {
                        let volume = len(1.0).powi(3);
                        let pts: Vec<Value> = c.points.iter().map(|&(l, v)| json!([len(l), v * volume])).collect();
                        m.insert("volume_curve".into(), Value::Array(pts));
                    }
                }
            }
            if let Some((x, y)) = n.coordinates {
                m.insert("x".into(), json!(x));
                m.insert("y".into(), json!(y));
            }
            if let Some(z) = &n.zone {
                m.insert("zone".into(), json!(z));
            }
            Value::Object(m)
        })
        .collect();

    let links: Vec<Value> = model
        .links()
        .iter()
        .enumerate()
        .map(|(k, l)| {
            let mut m = Map::new();
            m.insert("id".into(), json!(l.id));
            m.insert("kind".into(), json!(l.kind.label()));
            m.insert("from".into(), json!(model.nodes()[l.from].id));
            m.insert("to".into(), json!(model.nodes()[l.to].id));
            match &l.kind {
                LinkKind::Pipe(p) => {
                    m.insert("length".into(), json!(len(p.length)));
                    m.insert("diameter".into(), json!(u.diameter.from_si(p.diameter)));
                    let r = match o.headloss {
                        HeadLossLaw::HazenWilliams => p.roughness,
                        HeadLossLaw::DarcyWeisbach => u.roughness.from_si(p.roughness),
                    };
                    m.insert("roughness".into(), json!(r));
                    m.insert("minor_loss".into(), json!(p.minor_loss));
                    m.insert("check_valve".into(), json!(p.check_valve));
                }
                LinkKind::Pump(p) => {
                    match &p.drive {
                        PumpDrive::Curve { points, .. } => {
                            let pts: Vec<Value> =
                                points.iter().map(|&(q, h)| json!([u.flow.from_si(q), len(h)])).collect();
                            m.insert("head_curve".into(), Value::Array(pts));
                        }
                        PumpDrive::Power(w) => {
                            let p = if u.is_us_customary() { w / HORSEPOWER } else { w / 1e3 };
                            m.insert("power".into(), json!(p));
                        }
                    }
                    match (&p.efficiency_points, &p.efficiency) {
                        (Some(points), _) => {
                            let pts: Vec<Value> =
                                points.iter().map(|&(q, e)| json!([u.flow.from_si(q), e * 100.0])).collect();
                            m.insert("efficiency_curve".into(), Value::Array(pts));
                        }
                        (None, Efficiency::Constant(e)) => {
                            m.insert("efficiency".into(), json!(e * 100.0));
                        }
                        (None, Efficiency::Curve { .. }) => {}
                    }
                    m.insert("speed".into(), json!(p.speed));
                    if let Some(&p) = time.speed_patterns.get(&k) {
                        m.insert("speed_pattern".into(), pattern_id(p));
                    }
                }
                LinkKind::Valve(v) => {
                    m.insert("valve".into(), json!(v.valve.label()));
                    m.insert("diameter".into(), json!(u.diameter.from_si(v.diameter)));
                    let setting = match v.valve {
                        ValveType::PressureReducing | ValveType::PressureSustaining => {
                            u.pressure.from_head(v.setting, density)
                        }
                        ValveType::FlowControl => u.flow.from_si(v.setting),
                        ValveType::Throttle => v.setting,
                    };
                    m.insert("setting".into(), json!(setting));
                    if let Some(&p) = time.setting_patterns.get(&k) {
                        m.insert("setting_pattern".into(), pattern_id(p));
                    }
                    m.insert("minor_loss".into(), json!(v.minor_loss));
                    if !v.automatic && l.status == LinkStatus::Open {
                        m.insert("status".into(), json!("open"));
                    }
                }
            }
            if l.status == LinkStatus::Closed {
                m.insert("status".into(), json!(l.status.label()));
            }
            Value::Object(m)
        })
        .collect();

    let mut top = Map::new();
    if let Some(t) = &model.title {
        top.insert("title".into(), json!(t));
    }
    top.insert(
        "units".into(),
        json!({
            "length": u.length.label(), "diameter": u.diameter.label(), "flow": u.flow.label(),
            "pressure": u.pressure.label(), "roughness": u.roughness.label(),
        }),
    );
    top.insert("hydraulics".into(), Value::Object(hydraulics));
    if let Some(sim) = &time.simulation {
        top.insert(
            "simulation".into(),
            json!({
                "duration": tm::format_duration(sim.duration),
                "hydraulic_step": tm::format_duration(sim.hydraulic_step),
                "report_interval": tm::format_duration(sim.report_interval),
                "start_clock": tm::format_clock(sim.start_clock),
                "level_tolerance": len(sim.level_tolerance),
            }),
        );
    }
    let e = &time.energy;
    if e.price != 0.0 || e.tariff.is_some() || e.currency.is_some() {
        let mut m = Map::new();
        m.insert("price_per_kwh".into(), json!(e.price));
        if let Some(p) = e.tariff {
            m.insert("tariff_pattern".into(), pattern_id(p));
        }
        if let Some(c) = &e.currency {
            m.insert("currency".into(), json!(c));
        }
        top.insert("electricity".into(), Value::Object(m));
    }
    if !time.patterns.is_empty() {
        let list: Vec<Value> = time
            .patterns
            .iter()
            .map(|p| json!({"id": p.id, "step": tm::format_duration(p.step), "multipliers": p.multipliers}))
            .collect();
        top.insert("patterns".into(), Value::Array(list));
    }
    top.insert("nodes".into(), Value::Array(nodes));
    top.insert("links".into(), Value::Array(links));
    if !time.controls.is_empty() {
        let list: Vec<Value> = time.controls.iter().map(|c| control(model, c)).collect();
        top.insert("controls".into(), Value::Array(list));
    }
    Value::Object(top)
}

fn control(model: &Model, c: &tm::Control) -> Value {
    let u = &model.units;
    let density = model.options.water_properties().density;
    let mut m = Map::new();
    m.insert("id".into(), json!(c.id));
    let link = &model.links()[c.link];
    m.insert("link".into(), json!(link.id));
    match c.action {
        Action::Open => m.insert("status".into(), json!("open")),
        Action::Close => m.insert("status".into(), json!("closed")),
        Action::Automatic => m.insert("status".into(), json!("automatic")),
        Action::Speed(s) => m.insert("speed".into(), json!(s)),
        Action::Setting(s) => {
            let v = match link.as_valve().map(|v| v.valve) {
                Some(ValveType::PressureReducing | ValveType::PressureSustaining) => u.pressure.from_head(s, density),
                Some(ValveType::FlowControl) => u.flow.from_si(s),
                _ => s,
            };
            m.insert("setting".into(), json!(v))
        }
    };
    m.insert("when".into(), condition(model, &c.when));
    m.insert("priority".into(), json!(c.priority));
    Value::Object(m)
}

fn condition(model: &Model, c: &Condition) -> Value {
    let u = &model.units;
    let density = model.options.water_properties().density;
    let node = |i: usize| json!(model.nodes()[i].id);
    match c {
        Condition::LevelAbove { tank, level } => json!({"tank": node(*tank), "level_above": u.length.from_si(*level)}),
        Condition::LevelBelow { tank, level } => json!({"tank": node(*tank), "level_below": u.length.from_si(*level)}),
        Condition::PressureAbove { node: n, pressure } => {
            json!({"node": node(*n), "pressure_above": u.pressure.from_head(*pressure, density)})
        }
        Condition::PressureBelow { node: n, pressure } => {
            json!({"node": node(*n), "pressure_below": u.pressure.from_head(*pressure, density)})
        }
        Condition::Clock(t) => json!({"clock": tm::format_clock(*t)}),
        Condition::After(t) => json!({"after": tm::format_duration(*t)}),
        Condition::All(parts) => json!({"all": parts.iter().map(|p| condition(model, p)).collect::<Vec<_>>()}),
        Condition::Any(parts) => json!({"any": parts.iter().map(|p| condition(model, p)).collect::<Vec<_>>()}),
    }
}

/// The model as model-file text in the given format.
pub fn to_string(model: &Model, format: Format) -> String {
    let value = to_value(model);
    match format {
        Format::Json => serde_json::to_string_pretty(&value).unwrap_or_default() + "\n",
        // A JSON tree of tables, arrays of tables, strings, numbers and booleans always has a TOML
        // form; the fallback is unreachable in practice.
        Format::Toml => toml::to_string(&value).unwrap_or_default(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::file::read_str;

    #[test]
    fn time_data_round_trips() {
        let text = r#"
            [simulation]
            duration = "2d"
            hydraulic_step = "30min"
            report_interval = "15min"
            start_clock = "06:30"
            [electricity]
            price_per_kwh = 0.2
            tariff_pattern = "night"
            currency = "EUR"
            [[patterns]]
            id = "homes"
            step = "1h"
            multipliers = [0.5, 1.5]
            [[patterns]]
            id = "night"
            step = "6h"
            multipliers = [0.5, 1, 1, 1]
            [[nodes]]
            id = "R"
            kind = "reservoir"
            head = 50
            head_pattern = "homes"
            [[nodes]]
            id = "J"
            elevation = 10
            demands = [{ base = 2.0, pattern = "homes" }, { base = 0.5 }]
            [[nodes]]
            id = "K"
            elevation = 10
            demand = 1.0
            pattern = "homes"
            [[nodes]]
            id = "T"
            kind = "tank"
            elevation = 30
            level = 2
            max_level = 5
            volume_curve = [[0, 0], [2, 100], [6, 500]]
            [[links]]
            id = "P"
            from = "R"
            to = "J"
            length = 100
            diameter = 150
            roughness = 120
            [[links]]
            id = "Q"
            from = "J"
            to = "K"
            length = 100
            diameter = 150
            roughness = 120
            [[links]]
            id = "U"
            kind = "pump"
            from = "K"
            to = "T"
            head_curve = [[0, 40], [10, 30]]
            speed_pattern = "night"
            [[controls]]
            id = "off"
            link = "U"
            status = "closed"
            when = { any = [{ tank = "T", level_above = 4.5 }, { all = [{ clock = "07:00" }, { node = "J", pressure_below = 20 }] }] }
            priority = 3
            [[controls]]
            id = "slow"
            link = "U"
            speed = 0.8
            when = { after = "90min" }
        "#;
        let model = read_str(text, Format::Toml, "t.toml").unwrap_or_else(|e| panic!("{e}"));
        assert_eq!(model.nodes()[1].demand(), 2.5e-3);
        for format in [Format::Toml, Format::Json] {
            let out = to_string(&model, format);
            let back = read_str(&out, format, "out").unwrap_or_else(|e| panic!("{e}\n{out}"));
            assert_eq!(back.time, model.time, "{out}");
        }
    }

    #[test]
    fn round_trip_both_formats() {
        let text = r#"
            title = "t"
            [units]
            flow = "gpm"
            length = "ft"
            diameter = "in"
            [hydraulics]
            headloss = "darcy-weisbach"
            [[nodes]]
            id = "R"
            kind = "reservoir"
            head = 300
            [[nodes]]
            id = "J"
            elevation = 100
            demand = 50
            x = 1.0
            y = 2.0
            [[nodes]]
            id = "T"
            kind = "tank"
            elevation = 200
            level = 10
            max_level = 20
            diameter = 40
            [[links]]
            id = "P"
            from = "R"
            to = "J"
            length = 1000
            diameter = 8
            roughness = 0.005
            check_valve = true
            [[links]]
            id = "Q"
            from = "J"
            to = "T"
            length = 1000
            diameter = 8
            roughness = 0.005
            status = "closed"
        "#;
        let model = read_str(text, Format::Toml, "t.toml").unwrap();
        for format in [Format::Toml, Format::Json] {
            let out = to_string(&model, format);
            let back = read_str(&out, format, "out").unwrap_or_else(|e| panic!("{e}\n{out}"));
            assert_eq!(back.nodes().len(), model.nodes().len());
            for (a, b) in back.links().iter().zip(model.links()) {
                assert_eq!(a.status, b.status);
                let (pa, pb) = (a.as_pipe().unwrap(), b.as_pipe().unwrap());
                assert!((pa.diameter - pb.diameter).abs() < 1e-12);
                assert!((pa.roughness - pb.roughness).abs() < 1e-15);
                assert_eq!(pa.check_valve, pb.check_valve);
            }
        }
    }
}
