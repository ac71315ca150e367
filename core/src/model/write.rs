//! Writing a [`Model`] back as a model file (TOML or JSON), in the model's own units.
//!
//! The output reads back into an equal model (up to floating-point rounding of unit
//! conversions); defaults are written out explicitly so that the file documents itself.

use super::file::Format;
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
        .map(|n| {
            let mut m = Map::new();
            m.insert("id".into(), json!(n.id));
            m.insert("kind".into(), json!(n.kind.label()));
            match &n.kind {
                NodeKind::Junction { demand } => {
                    m.insert("elevation".into(), json!(len(n.elevation)));
                    m.insert("demand".into(), json!(u.flow.from_si(*demand)));
                }
                NodeKind::Reservoir { head } => {
                    m.insert("head".into(), json!(len(*head)));
                    m.insert("elevation".into(), json!(len(n.elevation)));
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
        .map(|l| {
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
    top.insert("nodes".into(), Value::Array(nodes));
    top.insert("links".into(), Value::Array(links));
    Value::Object(top)
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
