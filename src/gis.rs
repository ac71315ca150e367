//! Results for GIS: per-element values of a snapshot, of a simulation's worst instant per element,
//! or of one instant (`--at`), in the model's units, written as GeoJSON or drawn as a map.
//!
//! GeoJSON: one FeatureCollection of nodes (Points) and links (LineStrings through their `path`),
//! the element's id as the feature id and in its properties beside the results, the units named
//! in the collection's `units` member. Longitude/latitude models give RFC 7946 GeoJSON; projected
//! models give the same structure with `"coordinates": "projected"` in the collection (RFC 7946
//! has no other coordinate systems, so GIS software must be told the projection).

use ringmain_core::analysis::Criteria;
use ringmain_core::model::time::{format_duration, parse_duration};
use ringmain_core::model::MapCoordinates;
use ringmain_core::quality::QualityRun;
use ringmain_core::simulate::Run;
use ringmain_core::{Model, ModelError, NodeKind, Solution};
use serde_json::json;
use std::io::{self, Write};

/// One quantity of nodes or links.
pub struct Quantity {
    /// Its name (property name, `--quantity` value): a result's name, or a water-quality
    /// constituent's id.
    pub name: String,
    /// Its unit, as written.
    pub unit: String,
    /// Whether it belongs to links (else nodes).
    pub on_links: bool,
    /// One value per element, in the unit (NaN: not computed, written null).
    pub values: Vec<f64>,
}

/// Per-element results ready to write.
pub struct GisResults<'a> {
    pub model: &'a Model,
    /// What the values are: "snapshot", "worst instant per element", "at 6h".
    pub basis: String,
    pub quantities: Vec<Quantity>,
    /// Per link, the status word.
    pub link_status: Vec<&'static str>,
    /// For simulations: the elapsed time of each node's and link's values, s.
    pub node_time: Option<Vec<f64>>,
    pub link_time: Option<Vec<f64>>,
    /// Criteria each element breaks (names of the criterion keys).
    pub node_breaks: Vec<Vec<&'static str>>,
    pub link_breaks: Vec<Vec<&'static str>>,
}

/// Headloss per length: per kilometre (m/km) or per thousand feet (ft/kft).
fn unit_headloss_label(model: &Model) -> String {
    if model.units.is_us_customary() {
        "ft/kft".into()
    } else {
        "m/km".into()
    }
}

/// The criteria of the model's `[criteria]` table (none when absent).
fn criteria(model: &Model) -> Result<Criteria, ModelError> {
    Criteria::of_model(model)
}

/// Pressure head (m), velocity (m/s), unit head loss (m/m) per element → what it breaks.
fn breaks(
    model: &Model,
    c: &Criteria,
    pressure: &[f64],
    velocity: &[f64],
    slope: &[f64],
) -> (Vec<Vec<&'static str>>, Vec<Vec<&'static str>>) {
    let mut nodes = vec![Vec::new(); model.nodes().len()];
    for (i, n) in model.nodes().iter().enumerate() {
        if !matches!(n.kind, NodeKind::Junction { .. }) || !pressure[i].is_finite() {
            continue;
        }
        let p = pressure[i];
        let mut low = c.min_pressure;
        let mut high = c.max_pressure;
        for g in &c.groups {
            if g.selects(&n.id, n.zone.as_deref()) {
                low = g.min_pressure.or(low);
                high = g.max_pressure.or(high);
            }
        }
        if low.is_some_and(|l| p < l) {
            nodes[i].push("min_pressure");
        }
        if high.is_some_and(|h| p > h) {
            nodes[i].push("max_pressure");
        }
    }
    let mut links = vec![Vec::new(); model.links().len()];
    for (k, l) in model.links().iter().enumerate() {
        if l.as_pump().is_some() {
            continue;
        }
        if c.max_velocity.is_some_and(|v| velocity[k].abs() > v) {
            links[k].push("max_velocity");
        }
        if l.as_pipe().is_some() && c.max_headloss.is_some_and(|h| slope[k].abs() > h) {
            links[k].push("max_headloss");
        }
    }
    (nodes, links)
}

fn pipe_length(model: &Model, k: usize) -> Option<f64> {
    model.links()[k].as_pipe().map(|p| p.length)
}

impl<'a> GisResults<'a> {
    /// From a solved snapshot.
    pub fn from_solution(model: &'a Model, s: &Solution) -> Result<Self, ModelError> {
        let u = &model.units;
        let density = model.options.water_properties().density;
        let len = |v: f64| u.length.from_si(v);
        let slope: Vec<f64> =
            (0..model.links().len()).map(|k| pipe_length(model, k).map_or(f64::NAN, |l| s.headloss[k] / l)).collect();
        let q = |name: &str, unit: &str, on_links, values| Quantity {
            name: name.to_owned(),
            unit: unit.to_owned(),
            on_links,
            values,
        };
        let quantities = vec![
            q("elevation", u.length.label(), false, model.nodes().iter().map(|n| len(n.elevation)).collect()),
            q("demand", u.flow.label(), false, s.demand.iter().map(|&d| u.flow.from_si(d)).collect()),
            q("delivered", u.flow.label(), false, s.demand.iter().map(|&d| u.flow.from_si(d)).collect()),
            q("head", u.length.label(), false, s.head.iter().map(|&h| len(h)).collect()),
            q(
                "pressure",
                u.pressure.label(),
                false,
                s.pressure.iter().map(|&p| u.pressure.from_head(p, density)).collect(),
            ),
            q("flow", u.flow.label(), true, s.flow.iter().map(|&f| u.flow.from_si(f)).collect()),
            q("velocity", u.velocity_label(), true, s.velocity.iter().map(|&v| len(v)).collect()),
            q("headloss", u.length.label(), true, s.headloss.iter().map(|&h| len(h)).collect()),
            q("unit_headloss", &unit_headloss_label(model), true, slope.iter().map(|&x| x * 1000.0).collect()),
        ];
        let c = criteria(model)?;
        let (node_breaks, link_breaks) = breaks(model, &c, &s.pressure, &s.velocity, &slope);
        Ok(GisResults {
            model,
            basis: "snapshot".into(),
            quantities,
            link_status: s.link_state.iter().map(|st| st.status_label()).collect(),
            node_time: None,
            link_time: None,
            node_breaks,
            link_breaks,
        })
    }

    /// From a simulation: at the reported instant `at` (s), or per element at its worst instant
    /// (nodes: lowest pressure; links: highest speed).
    pub fn from_run(model: &'a Model, run: &Run, at: Option<f64>) -> Result<Self, ModelError> {
        if run.series.is_empty() {
            return Err(ModelError::new("the simulation reported no instant"));
        }
        let nn = model.nodes().len();
        let nl = model.links().len();
        let area: Vec<f64> = model
            .links()
            .iter()
            .map(|l| l.diameter().map_or(f64::NAN, |d| std::f64::consts::PI * d * d / 4.0))
            .collect();
        let velocity_at = |snap: &ringmain_core::simulate::Snapshot, k: usize| snap.flow[k] / area[k];
        let (node_pick, link_pick, basis): (Vec<usize>, Vec<usize>, String) = match at {
            Some(t) => {
                let Some(i) = run.series.iter().position(|s| (s.time - t).abs() < 1e-6) else {
                    let times: Vec<String> = run.series.iter().take(6).map(|s| format_duration(s.time)).collect();
                    return Err(ModelError::at(
                        None,
                        Some("--at"),
                        format!(
                            "{} is not a reported instant of the simulation; reported instants are {}{}",
                            format_duration(t),
                            times.join(", "),
                            if run.series.len() > 6 { ", ..." } else { "" }
                        ),
                    ));
                };
                (vec![i; nn], vec![i; nl], format!("at {}", format_duration(t)))
            }
            None => {
                let worst_node = (0..nn)
                    .map(|n| {
                        let mut best = 0;
                        let mut low = f64::INFINITY;
                        for (i, s) in run.series.iter().enumerate() {
                            if s.pressure[n] < low {
                                low = s.pressure[n];
                                best = i;
                            }
                        }
                        best
                    })
                    .collect();
                let worst_link = (0..nl)
                    .map(|k| {
                        let mut best = 0;
                        let mut high = -1.0;
                        for (i, s) in run.series.iter().enumerate() {
                            let v = s.flow[k].abs();
                            if v > high {
                                high = v;
                                best = i;
                            }
                        }
                        best
                    })
                    .collect();
                (
                    worst_node,
                    worst_link,
                    "worst instant per element (nodes: lowest pressure; links: largest flow)".into(),
                )
            }
        };
        let u = &model.units;
        let density = model.options.water_properties().density;
        let len = |v: f64| u.length.from_si(v);
        let sn = |n: usize| &run.series[node_pick[n]];
        let sl = |k: usize| &run.series[link_pick[k]];
        let pressure_si: Vec<f64> = (0..nn).map(|n| sn(n).pressure[n]).collect();
        let velocity_si: Vec<f64> = (0..nl).map(|k| velocity_at(sl(k), k)).collect();
        let headloss_si: Vec<f64> = (0..nl)
            .map(|k| {
                let l = &model.links()[k];
                let s = sl(k);
                s.head[l.from] - s.head[l.to]
            })
            .collect();
        let slope: Vec<f64> = (0..nl).map(|k| pipe_length(model, k).map_or(f64::NAN, |l| headloss_si[k] / l)).collect();
        let q = |name: &str, unit: &str, on_links, values| Quantity {
            name: name.to_owned(),
            unit: unit.to_owned(),
            on_links,
            values,
        };
        let quantities = vec![
            q("elevation", u.length.label(), false, model.nodes().iter().map(|n| len(n.elevation)).collect()),
            q("demand", u.flow.label(), false, (0..nn).map(|n| u.flow.from_si(sn(n).demand[n])).collect()),
            q("delivered", u.flow.label(), false, (0..nn).map(|n| u.flow.from_si(sn(n).demand[n])).collect()),
            q("head", u.length.label(), false, (0..nn).map(|n| len(sn(n).head[n])).collect()),
            q(
                "pressure",
                u.pressure.label(),
                false,
                pressure_si.iter().map(|&p| u.pressure.from_head(p, density)).collect(),
            ),
            q("flow", u.flow.label(), true, (0..nl).map(|k| u.flow.from_si(sl(k).flow[k])).collect()),
            q("velocity", u.velocity_label(), true, velocity_si.iter().map(|&v| len(v)).collect()),
            q("headloss", u.length.label(), true, headloss_si.iter().map(|&h| len(h)).collect()),
            q("unit_headloss", &unit_headloss_label(model), true, slope.iter().map(|&x| x * 1000.0).collect()),
        ];
        let c = criteria(model)?;
        let (node_breaks, link_breaks) = breaks(model, &c, &pressure_si, &velocity_si, &slope);
        Ok(GisResults {
            model,
            basis,
            quantities,
            link_status: (0..nl).map(|k| sl(k).status[k]).collect(),
            node_time: Some((0..nn).map(|n| sn(n).time).collect()),
            link_time: Some((0..nl).map(|k| sl(k).time).collect()),
            node_breaks,
            link_breaks,
        })
    }

    /// Adds each water-quality constituent of the run as a node quantity named by its id, in its
    /// reported unit: at the reported instant `at` (s), or else per node its worst value over the
    /// reported times (the highest age, the lowest value of a substance, the highest share of a
    /// source), which the basis then says. A constituent whose id is already a result's name is
    /// an error naming it (the map could not tell them apart).
    pub fn add_quality(&mut self, q: &QualityRun, at: Option<f64>) -> Result<(), ModelError> {
        use ringmain_core::quality::ConstituentKind;
        if q.constituents.is_empty() {
            return Ok(());
        }
        let record = match at {
            Some(t) => Some(q.records.iter().find(|r| (r.time - t).abs() < 1e-6).ok_or_else(|| {
                ModelError::at(None, Some("--at"), format!("{} has no water-quality values", format_duration(t)))
            })?),
            None => None,
        };
        let nn = self.model.nodes().len();
        for (c, con) in q.constituents.iter().enumerate() {
            if self.quantity(&con.id).is_some() {
                return Err(ModelError::at(
                    Some(ringmain_core::Element::Constituent(con.id.clone())),
                    Some("id"),
                    format!("'{}' is also the name of a result; rename the constituent to map it", con.id),
                ));
            }
            let scale = con.report_scale();
            let highest = !matches!(con.kind, ConstituentKind::Substance(_));
            let values = match record {
                Some(r) => r.node[c].iter().map(|v| v * scale).collect(),
                None => (0..nn)
                    .map(|i| {
                        let all = q.records.iter().map(|r| r.node[c][i]).filter(|v| v.is_finite());
                        let v = if highest { all.fold(f64::NAN, f64::max) } else { all.fold(f64::NAN, f64::min) };
                        v * scale
                    })
                    .collect(),
            };
            self.quantities.push(Quantity {
                name: con.id.clone(),
                unit: con.report_unit().to_owned(),
                on_links: false,
                values,
            });
        }
        if at.is_none() {
            self.basis.push_str("; water quality: per node its highest age, lowest substance, highest source share");
        }
        Ok(())
    }

    /// Checks that every node has coordinates (GeoJSON and maps need them).
    pub fn check_coordinates(&self) -> Result<(), ModelError> {
        if let Some(n) = self.model.nodes().iter().find(|n| n.coordinates.is_none()) {
            return Err(ModelError::at(
                Some(ringmain_core::Element::Node(n.id.to_string())),
                Some("x"),
                "has no coordinates (x, y); results for GIS and maps need them on every node",
            ));
        }
        Ok(())
    }

    /// The quantity by name.
    pub fn quantity(&self, name: &str) -> Option<&Quantity> {
        self.quantities.iter().find(|q| q.name == name)
    }

    /// The names of the quantities, for messages.
    pub fn names(&self) -> Vec<&str> {
        self.quantities.iter().map(|q| q.name.as_str()).collect()
    }

    /// Writes the GeoJSON FeatureCollection, feature by feature.
    pub fn write_geojson(&self, out: &mut dyn Write) -> io::Result<()> {
        let m = self.model;
        let lonlat = m.map.coordinates == MapCoordinates::LonLat;
        let mut units: serde_json::Map<String, serde_json::Value> =
            self.quantities.iter().map(|q| (q.name.clone(), json!(q.unit))).collect();
        units.insert("length".into(), json!(m.units.length.label()));
        units.insert("diameter".into(), json!(m.units.diameter.label()));
        let mut head = serde_json::Map::new();
        head.insert("type".into(), json!("FeatureCollection"));
        if let Some(t) = &m.title {
            head.insert("name".into(), json!(t));
        }
        head.insert("coordinates".into(), json!(m.map.coordinates.label()));
        if !lonlat {
            head.insert(
                "note".into(),
                json!("projected coordinates as in the model (not RFC 7946 longitude, latitude): set the layer's projection in the GIS"),
            );
        }
        head.insert("results".into(), json!(self.basis));
        head.insert("units".into(), serde_json::Value::Object(units));
        let text = serde_json::to_string(&serde_json::Value::Object(head))?;
        // The head without its closing brace, then the features.
        out.write_all(&text.as_bytes()[..text.len() - 1])?;
        out.write_all(b",\"features\":[\n")?;
        let num = |v: f64| if v.is_finite() { json!(v) } else { serde_json::Value::Null };
        let mut first = true;
        for (i, n) in m.nodes().iter().enumerate() {
            let (x, y) = n.coordinates.unwrap_or((f64::NAN, f64::NAN));
            let mut p = serde_json::Map::new();
            p.insert("id".into(), json!(n.id.as_str()));
            p.insert("element".into(), json!("node"));
            p.insert("kind".into(), json!(n.kind.label()));
            for q in self.quantities.iter().filter(|q| !q.on_links) {
                p.insert(q.name.clone(), num(q.values[i]));
            }
            if let Some(t) = &self.node_time {
                p.insert("time".into(), json!(format_duration(t[i])));
            }
            p.insert("breaks".into(), json!(self.node_breaks[i]));
            let feature = json!({"type": "Feature", "id": n.id.as_str(), "geometry": {"type": "Point", "coordinates": [x, y]}, "properties": p});
            if !first {
                out.write_all(b",\n")?;
            }
            first = false;
            serde_json::to_writer(&mut *out, &feature)?;
        }
        for (k, l) in m.links().iter().enumerate() {
            let line: Vec<[f64; 2]> =
                m.map.alignment(m, k).unwrap_or_default().into_iter().map(|(x, y)| [x, y]).collect();
            let mut p = serde_json::Map::new();
            p.insert("id".into(), json!(l.id.as_str()));
            p.insert("element".into(), json!("link"));
            p.insert("kind".into(), json!(l.kind.label()));
            p.insert("from".into(), json!(m.nodes()[l.from].id.as_str()));
            p.insert("to".into(), json!(m.nodes()[l.to].id.as_str()));
            if let Some(d) = l.diameter() {
                p.insert("diameter".into(), json!(m.units.diameter.from_si(d)));
            }
            if let Some(pipe) = l.as_pipe() {
                p.insert("length".into(), json!(m.units.length.from_si(pipe.length)));
            }
            p.insert("status".into(), json!(self.link_status[k]));
            for q in self.quantities.iter().filter(|q| q.on_links) {
                p.insert(q.name.clone(), num(q.values[k]));
            }
            if let Some(t) = &self.link_time {
                p.insert("time".into(), json!(format_duration(t[k])));
            }
            p.insert("breaks".into(), json!(self.link_breaks[k]));
            let feature = json!({"type": "Feature", "id": l.id.as_str(), "geometry": {"type": "LineString", "coordinates": line}, "properties": p});
            out.write_all(b",\n")?;
            serde_json::to_writer(&mut *out, &feature)?;
        }
        out.write_all(b"\n]}\n")
    }
}

/// Parses `--at`: an elapsed time such as "6h" or "1h30min", or seconds.
pub fn parse_at(text: &str) -> Result<f64, String> {
    parse_duration(text).map_err(|m| format!("--at {text}: {m}"))
}
