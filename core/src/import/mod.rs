//! Building a model from GIS data: GeoJSON pipes and points, a fields file mapping attributes.
//!
//! Entry points: [`read_fields`] reads `FIELDS.toml`, [`import`] turns the two feature
//! collections into a [`Model`] and an [`ImportReport`] of every decision taken.
//!
//! The phases, in order (the conventions are those of the README's import section):
//! 1. **Read** every feature and its mapped attributes (`features.rs`); a null attribute is "not
//!    given", an absent one or one of the wrong type is an error naming the file, the feature
//!    (index and id) and the attribute.
//! 2. **Drop** zero-length pipes, and duplicates: features whose vertices agree within the snap
//!    distance in either direction, whatever their ids (the first is kept).
//! 3. **Snap**: every vertex goes into an R-tree; pipe ends within the snap distance of each
//!    other, and vertices shared by different pipes, join (union–find, so chains join too).
//!    A group with a pipe end, or with vertices of two pipes, is a node. Crossing pipes without
//!    a shared vertex stay apart.
//! 4. **Points**: a point within the snap distance of a pipe end is that end's node (it gives the
//!    node its id and position); otherwise every pipe whose interior passes within the snap
//!    distance is split at the point's foot. Points farther from every pipe are reported.
//! 5. **Cut** each pipe at its nodes into links; each part's length is its drawn length in plan
//!    (a length attribute, when mapped, is shared in proportion; a difference above 2 % of the
//!    drawn length is reported). Interior vertices become the link's `path`.
//! 6. **Check**: dangling ends within five snap distances of another pipe (near misses), nodes
//!    that no reservoir or tank reaches, elevations (point attribute, line Z, interpolation
//!    along the network, a default, or an error naming the nodes).
//!
//! Crates: `geojson` (the georust reader of RFC 7946 objects) converts each feature,
//! `geographiclib-rs` (a port of Karney's GeographicLib) measures geodesics on WGS 84 for
//! longitude/latitude input, and `rstar` (georust's R*-tree, bulk-loaded) finds every vertex or
//! segment near a position in logarithmic time, which keeps 100,000 pipes well under 2 s
//! (benches/RESULTS.md).

mod features;
mod fields;
mod geometry;
mod report;

pub use features::{read_features, Expect, Feature};
pub use fields::{read_fields, Crs, FieldMap, PointKind, PIPE_KEYS, POINT_KEYS};
pub use report::{Counts, Dropped, Elevations, ImportReport, LengthDifference, Merged, NearMiss, OffNetwork, Split};

use crate::error::ModelError;
use crate::model::{Link, LinkKind, LinkStatus, MapCoordinates, Model, Node, NodeKind, Pipe, Tank};
use features::feature_error;
use geometry::{lerp, Frame};
use rstar::primitives::{GeomWithData, Rectangle};
use rstar::{RTree, AABB};
// hashbrown's maps: the same maps as the standard library's with a faster hash (foldhash) than
// SipHash, which took some 2 % of an import; ids here come from the user's own files.
use hashbrown::{HashMap, HashSet};
use std::collections::{BinaryHeap, VecDeque};

/// Options of an import.
#[derive(Clone, Debug, PartialEq)]
pub struct ImportOptions {
    /// Snap distance: metres for longitude/latitude input, the `[crs]` unit otherwise.
    pub snap: f64,
    /// Give nodes without an elevation one interpolated along the network between the nearest
    /// nodes of known elevation.
    pub elevation_from_neighbours: bool,
    /// The elevation of nodes that still have none, in the model's length unit.
    pub elevation_default: Option<f64>,
}

impl ImportOptions {
    /// The default snap distance (0.5 m or 0.5 `[crs]` units).
    pub const SNAP: f64 = 0.5;
    /// Near misses are reported up to this many snap distances.
    pub const NEAR_MISS_FACTOR: f64 = 5.0;
    /// A length attribute farther than this fraction from the drawn length is reported.
    pub const LENGTH_TOLERANCE: f64 = 0.02;
}

impl Default for ImportOptions {
    fn default() -> Self {
        ImportOptions { snap: Self::SNAP, elevation_from_neighbours: false, elevation_default: None }
    }
}

/// A GeoJSON file's content and name (for messages).
#[derive(Clone, Copy, Debug)]
pub struct Source<'a> {
    /// The file's bytes.
    pub bytes: &'a [u8],
    /// The file's name, as messages show it.
    pub file: &'a str,
}

/// A pipe feature with its attributes read, SI.
struct PipeIn {
    feature: usize,
    id: String,
    xy: Vec<(f64, f64)>,
    z: Option<Vec<f64>>,
    diameter: f64,
    roughness: f64,
    status: LinkStatus,
    length: Option<f64>,
    minor_loss: f64,
    check_valve: bool,
}

/// A point feature with its attributes read, SI.
struct PointIn {
    feature: usize,
    id: Option<String>,
    xy: (f64, f64),
    z: Option<f64>,
    kind: PointKind,
    elevation: Option<f64>,
    demand: f64,
    head: Option<f64>,
    level: Option<f64>,
    min_level: Option<f64>,
    max_level: Option<f64>,
    tank_diameter: Option<f64>,
    zone: Option<String>,
}

/// Reads the attributes of one feature.
struct Attributes<'a> {
    feature: &'a Feature,
    id: Option<String>,
}

impl Attributes<'_> {
    fn error(&self, attribute: &str, message: impl Into<String>) -> ModelError {
        feature_error(self.feature.index, self.id.as_deref(), Some(attribute), message)
    }

    /// The value of a mapped attribute: `None` when not mapped or null; an error when absent.
    fn get(&self, key: &str, attribute: Option<&str>) -> Result<Option<&serde_json::Value>, ModelError> {
        let Some(name) = attribute else { return Ok(None) };
        match self.feature.properties.get(name) {
            None => Err(self.error(
                name,
                format!("the attribute mapped to {key} is missing from the feature's properties (write null for \"not given\")"),
            )),
            Some(serde_json::Value::Null) => Ok(None),
            Some(v) => Ok(Some(v)),
        }
    }

    fn number(&self, key: &str, attribute: Option<&str>) -> Result<Option<f64>, ModelError> {
        match self.get(key, attribute)? {
            None => Ok(None),
            Some(serde_json::Value::Number(n)) => match n.as_f64() {
                Some(x) if x.is_finite() => Ok(Some(x)),
                _ => Err(self.error(attribute.unwrap_or(key), format!("{key}: {n} is not a finite number"))),
            },
            Some(other) => Err(self.error(
                attribute.unwrap_or(key),
                format!("{key} must be a number, found {} {}", json_kind(other), short(other)),
            )),
        }
    }

    fn positive(&self, key: &str, attribute: Option<&str>) -> Result<Option<f64>, ModelError> {
        match self.number(key, attribute)? {
            Some(x) if x <= 0.0 => {
                Err(self.error(attribute.unwrap_or(key), format!("{key} must be positive, found {x}")))
            }
            other => Ok(other),
        }
    }

    fn text(&self, key: &str, attribute: Option<&str>) -> Result<Option<String>, ModelError> {
        match self.get(key, attribute)? {
            None => Ok(None),
            Some(serde_json::Value::String(s)) => Ok(Some(s.clone())),
            Some(serde_json::Value::Number(n)) => Ok(Some(n.to_string())),
            Some(other) => Err(self.error(
                attribute.unwrap_or(key),
                format!("{key} must be a string, found {} {}", json_kind(other), short(other)),
            )),
        }
    }

    fn boolean(&self, key: &str, attribute: Option<&str>) -> Result<Option<bool>, ModelError> {
        match self.get(key, attribute)? {
            None => Ok(None),
            Some(serde_json::Value::Bool(b)) => Ok(Some(*b)),
            Some(serde_json::Value::Number(n)) if n.as_i64() == Some(0) || n.as_i64() == Some(1) => {
                Ok(Some(n.as_i64() == Some(1)))
            }
            Some(other) => Err(self.error(
                attribute.unwrap_or(key),
                format!("{key} must be true or false, found {} {}", json_kind(other), short(other)),
            )),
        }
    }
}

fn json_kind(v: &serde_json::Value) -> &'static str {
    match v {
        serde_json::Value::Null => "null",
        serde_json::Value::Bool(_) => "a boolean",
        serde_json::Value::Number(_) => "a number",
        serde_json::Value::String(_) => "a string",
        serde_json::Value::Array(_) => "an array",
        serde_json::Value::Object(_) => "an object",
    }
}

fn short(v: &serde_json::Value) -> String {
    let text = v.to_string();
    if text.chars().count() > 40 {
        format!("{}...", text.chars().take(40).collect::<String>())
    } else {
        text
    }
}

/// The feature's id: the mapped id attribute, or else its `id` member.
fn feature_id(feature: &Feature, attribute: Option<&str>) -> Option<String> {
    attribute.and_then(|a| feature.properties.get(a)).and_then(features::id_text).or_else(|| feature.member_id.clone())
}

fn read_pipe(feature: &Feature, fields: &FieldMap, crs_metres: f64) -> Result<PipeIn, ModelError> {
    let units = &fields.units;
    let id_attr = fields.pipe("id");
    let a = Attributes { feature, id: feature_id(feature, id_attr) };
    if let Some(attr) = id_attr {
        a.text("id", Some(attr))?;
    }
    let diameter_attr = fields.pipe("diameter");
    let diameter = a
        .positive("diameter", diameter_attr)?
        .ok_or_else(|| a.error(diameter_attr.unwrap_or("diameter"), "the diameter is null; every pipe needs one"))?;
    let roughness_attr = fields.pipe("roughness");
    let material_attr = fields.pipe("material");
    let roughness = match a.positive("roughness", roughness_attr)? {
        Some(r) => match fields.options.headloss {
            crate::HeadLossLaw::HazenWilliams => r,
            crate::HeadLossLaw::DarcyWeisbach => units.roughness.to_si(r),
        },
        None => match a.text("material", material_attr)? {
            Some(m) => fields.materials.iter().find(|(k, _)| *k == m).map(|(_, r)| *r).ok_or_else(|| {
                a.error(
                    material_attr.unwrap_or("material"),
                    format!("material \"{}\" is not in the [materials] table", crate::error::printable(&m)),
                )
            })?,
            None => {
                let attr = roughness_attr.or(material_attr).unwrap_or("roughness");
                return Err(a.error(attr, "neither a roughness nor a material is given; every pipe needs one"));
            }
        },
    };
    let status_attr = fields.pipe("status");
    let status = match a.text("status", status_attr)? {
        None => LinkStatus::Open,
        Some(s) => match s.trim().to_ascii_lowercase().as_str() {
            "open" => LinkStatus::Open,
            "closed" => LinkStatus::Closed,
            _ => {
                return Err(a.error(
                    status_attr.unwrap_or("status"),
                    format!("status \"{}\" is neither \"open\" nor \"closed\"", crate::error::printable(&s)),
                ))
            }
        },
    };
    let length = a.positive("length", fields.pipe("length"))?.map(|l| units.length.to_si(l));
    let minor_loss = a.number("minor_loss", fields.pipe("minor_loss"))?.unwrap_or(0.0);
    if minor_loss < 0.0 {
        return Err(a.error(fields.pipe("minor_loss").unwrap_or("minor_loss"), "minor_loss must not be negative"));
    }
    let check_valve = a.boolean("check_valve", fields.pipe("check_valve"))?.unwrap_or(false);
    let z = feature.z.as_ref().map(|z| z.iter().map(|v| v * crs_metres).collect());
    Ok(PipeIn {
        feature: feature.index,
        id: a.id.clone().unwrap_or_default(),
        xy: feature.xy.clone(),
        z,
        diameter: units.diameter.to_si(diameter),
        roughness,
        status,
        length,
        minor_loss,
        check_valve,
    })
}

fn read_point(feature: &Feature, fields: &FieldMap, crs_metres: f64) -> Result<PointIn, ModelError> {
    let units = &fields.units;
    let len = |v: Option<f64>| v.map(|v| units.length.to_si(v));
    let id_attr = fields.point("id");
    let a = Attributes { feature, id: feature_id(feature, id_attr) };
    if let Some(attr) = id_attr {
        a.text("id", Some(attr))?;
    }
    let kind_attr = fields.point("kind");
    let kind = match a.text("kind", kind_attr)? {
        None => PointKind::Junction,
        Some(value) => fields.kinds.iter().find(|(k, _)| *k == value).map(|(_, k)| *k).ok_or_else(|| {
            let known: Vec<String> = fields.kinds.iter().map(|(k, _)| format!("\"{k}\"")).collect();
            a.error(
                kind_attr.unwrap_or("kind"),
                format!(
                    "kind \"{}\" is not in the [kinds] table (known: {})",
                    crate::error::printable(&value),
                    known.join(", ")
                ),
            )
        })?,
    };
    let elevation = len(a.number("elevation", fields.point("elevation"))?);
    let demand = a.number("demand", fields.point("demand"))?.map(|d| units.flow.to_si(d)).unwrap_or(0.0);
    let head = len(a.number("head", fields.point("head"))?);
    let level = len(a.number("level", fields.point("level"))?);
    let min_level = len(a.number("min_level", fields.point("min_level"))?);
    let max_level = len(a.number("max_level", fields.point("max_level"))?);
    let tank_diameter = len(a.positive("diameter", fields.point("diameter"))?);
    let zone = a.text("zone", fields.point("zone"))?;
    let attr = |key: &str| fields.point(key).unwrap_or(key).to_owned();
    match kind {
        PointKind::Junction => {}
        PointKind::Reservoir => {
            if head.is_none() {
                return Err(a.error(&attr("head"), "a reservoir needs a head (map [points] head)"));
            }
        }
        PointKind::Tank => {
            if elevation.is_none() {
                return Err(a.error(&attr("elevation"), "a tank needs an elevation (map [points] elevation)"));
            }
            if level.is_none() {
                return Err(a.error(&attr("level"), "a tank needs a level (map [points] level)"));
            }
        }
    }
    if kind != PointKind::Junction && demand != 0.0 {
        return Err(a.error(&attr("demand"), format!("a {} takes no demand", kind.label())));
    }
    Ok(PointIn {
        feature: feature.index,
        id: a.id.clone(),
        xy: feature.xy[0],
        z: feature.z.as_ref().map(|z| z[0] * crs_metres),
        kind,
        elevation,
        demand,
        head,
        level,
        min_level,
        max_level,
        tank_diameter,
        zone,
    })
}

/// Union–find over vertices, with path halving.
struct Groups(Vec<u32>);

impl Groups {
    fn find(&mut self, mut a: u32) -> u32 {
        while self.0[a as usize] != a {
            let parent = self.0[self.0[a as usize] as usize];
            self.0[a as usize] = parent;
            a = parent;
        }
        a
    }

    fn union(&mut self, a: u32, b: u32) {
        let (ra, rb) = (self.find(a), self.find(b));
        // The smaller index is the root: groups are then named after their first vertex.
        match ra.cmp(&rb) {
            std::cmp::Ordering::Less => self.0[rb as usize] = ra,
            std::cmp::Ordering::Greater => self.0[ra as usize] = rb,
            std::cmp::Ordering::Equal => {}
        }
    }
}

/// A node being built.
struct Slot {
    xy: (f64, f64),
    z_sum: f64,
    z_count: u32,
    point: Option<usize>,
    vertices: u32,
}

/// A cut of a pipe: at segment `seg`, fraction `t`, at node slot `slot`.
#[derive(Clone, Copy, Debug)]
struct Cut {
    seg: u32,
    t: f64,
    slot: u32,
}

impl Cut {
    fn position(&self) -> f64 {
        self.seg as f64 + self.t
    }
}

type VertexTree = RTree<GeomWithData<[f64; 2], u32>>;
type SegmentTree = RTree<GeomWithData<Rectangle<[f64; 2]>, (u32, u32)>>;

fn envelope(frame: &Frame, p: (f64, f64), d: f64) -> AABB<[f64; 2]> {
    let w = frame.work(p);
    let r = frame.reach(p, d);
    AABB::from_corners([w[0] - r, w[1] - r], [w[0] + r, w[1] + r])
}

/// Builds a model from GeoJSON pipes (and points) with a fields file's mapping.
///
/// Errors name the file, the feature (index and id) and the attribute, or, for a model that
/// cannot be built (no source, elevations missing), the nodes concerned.
pub fn import(
    pipes: Source<'_>,
    points: Option<Source<'_>>,
    fields: &FieldMap,
    options: &ImportOptions,
) -> Result<(Model, ImportReport), ModelError> {
    let snap = options.snap;
    if !(snap.is_finite() && snap >= 0.0) {
        return Err(ModelError::at(None, Some("snap"), format!("must be a distance of 0 or more, found {snap}")));
    }
    let lonlat = fields.crs == Crs::LonLat;
    // Metres per unit of the coordinates (Z of lon/lat input is in metres, as RFC 7946 says).
    let crs_metres = match fields.crs {
        Crs::LonLat => 1.0,
        Crs::Projected(u) => u.to_si(1.0),
    };
    let pipe_features = read_features(pipes.bytes, pipes.file, Expect::Lines, lonlat, fields.pipe("id"))?;
    let point_features = match points {
        Some(p) => read_features(p.bytes, p.file, Expect::Points, lonlat, fields.point("id"))?,
        None => Vec::new(),
    };
    let mut pipe_list = Vec::with_capacity(pipe_features.len());
    for f in &pipe_features {
        pipe_list.push(read_pipe(f, fields, crs_metres).map_err(|e| e.in_file(pipes.file))?);
    }
    let mut point_list = Vec::with_capacity(point_features.len());
    if let Some(p) = points {
        for f in &point_features {
            point_list.push(read_point(f, fields, crs_metres).map_err(|e| e.in_file(p.file))?);
        }
    }
    // Freeing some 200,000 attribute tables took a tenth of an import: another thread does it
    // while this one goes on (or this one, if no thread can be started).
    let features = (pipe_features, point_features);
    if let Err(e) = std::thread::Builder::new().name("ringmain-free".into()).spawn(move || drop(features)) {
        drop(e);
    }

    let frame = if lonlat {
        let n = pipe_list.iter().map(|p| p.xy.len()).sum::<usize>().max(1);
        let mean = pipe_list.iter().flat_map(|p| p.xy.iter().map(|v| v.1)).sum::<f64>() / n as f64;
        Frame::lonlat(mean)
    } else {
        Frame::projected()
    };
    let mut report = ImportReport {
        coordinates: if lonlat { "lonlat" } else { "projected" },
        snap,
        distance_unit: match fields.crs {
            Crs::LonLat => "m",
            Crs::Projected(u) => u.label(),
        },
        length_unit: fields.units.length.label(),
        ..ImportReport::default()
    };
    report.counts.pipe_features = pipe_list.len();
    report.counts.point_features = point_list.len();

    // Generated ids for pipes without one, then the check that ids are unique.
    for p in &mut pipe_list {
        if p.id.is_empty() {
            p.id = format!("P-{}", p.feature + 1);
            report.generated_ids += 1;
        }
    }

    // Phase 2: zero length and duplicates.
    let mut kept = vec![true; pipe_list.len()];
    let drawn: Vec<f64> =
        pipe_list.iter().map(|p| p.xy.windows(2).map(|w| frame.distance(w[0], w[1])).sum::<f64>()).collect();
    for (i, p) in pipe_list.iter().enumerate() {
        if drawn[i] == 0.0 {
            kept[i] = false;
            report.dropped.push(Dropped {
                feature: p.feature,
                id: p.id.clone(),
                reason: "zero length",
                duplicate_of: None,
                attributes_differ: None,
            });
        }
    }
    drop_duplicates(&pipe_list, &mut kept, &frame, snap, &mut report);
    {
        let mut seen: HashMap<&str, usize> = HashMap::with_capacity(pipe_list.len());
        for (i, p) in pipe_list.iter().enumerate().filter(|(i, _)| kept[*i]) {
            if let Some(&j) = seen.get(p.id.as_str()) {
                return Err(feature_error(
                    p.feature,
                    Some(&p.id),
                    fields.pipe("id"),
                    format!(
                        "the id is also the id of feature #{} (features[{}]); pipe ids must be unique",
                        pipe_list[j].feature + 1,
                        pipe_list[j].feature
                    ),
                )
                .in_file(pipes.file));
            }
            seen.insert(&p.id, i);
        }
    }
    let pipe_ids: Vec<usize> = (0..pipe_list.len()).filter(|&i| kept[i]).collect();

    // Phase 3: vertices, snapping, groups.
    let mut offsets = Vec::with_capacity(pipe_ids.len() + 1);
    let mut vertex_pipe: Vec<u32> = Vec::new();
    offsets.push(0usize);
    for (k, &i) in pipe_ids.iter().enumerate() {
        let n = pipe_list[i].xy.len();
        vertex_pipe.extend(std::iter::repeat(k as u32).take(n));
        offsets.push(offsets[k] + n);
    }
    let n_vertices = vertex_pipe.len();
    if n_vertices >= u32::MAX as usize {
        return Err(ModelError::new("too many vertices for one import (more than 4 billion)"));
    }
    let vertex_xy = |v: usize| -> (f64, f64) {
        let k = vertex_pipe[v] as usize;
        pipe_list[pipe_ids[k]].xy[v - offsets[k]]
    };
    let is_end = |v: usize| -> bool {
        let k = vertex_pipe[v] as usize;
        v == offsets[k] || v + 1 == offsets[k + 1]
    };
    let tree: VertexTree =
        RTree::bulk_load((0..n_vertices).map(|v| GeomWithData::new(frame.work(vertex_xy(v)), v as u32)).collect());
    let mut groups = Groups((0..n_vertices as u32).collect());
    for v in 0..n_vertices {
        let p = vertex_xy(v);
        let pv = vertex_pipe[v];
        for hit in tree.locate_in_envelope(&envelope(&frame, p, snap)) {
            let u = hit.data as usize;
            if u <= v {
                continue;
            }
            let joins = vertex_pipe[u] != pv || (is_end(u) && is_end(v));
            if joins && frame.distance(p, vertex_xy(u)) <= snap {
                groups.union(v as u32, u as u32);
            }
        }
    }
    // A group is a node when it holds a pipe end or vertices of two pipes.
    let mut root_has_end = vec![false; n_vertices];
    let mut root_pipe = vec![u32::MAX; n_vertices];
    let mut root_multi = vec![false; n_vertices];
    let mut root_of = vec![0u32; n_vertices];
    for v in 0..n_vertices {
        let r = groups.find(v as u32);
        root_of[v] = r;
        let r = r as usize;
        root_has_end[r] |= is_end(v);
        if root_pipe[r] == u32::MAX {
            root_pipe[r] = vertex_pipe[v];
        } else if root_pipe[r] != vertex_pipe[v] {
            root_multi[r] = true;
        }
    }
    drop(root_pipe);
    let is_node_root = |r: usize| root_has_end[r] || root_multi[r];
    let mut slot_of_root: HashMap<u32, u32> = HashMap::new();
    let mut slots: Vec<Slot> = Vec::new();
    for v in 0..n_vertices {
        let r = root_of[v];
        if !is_node_root(r as usize) {
            continue;
        }
        let xy = vertex_xy(v);
        let s = *slot_of_root.entry(r).or_insert_with(|| {
            slots.push(Slot { xy, z_sum: 0.0, z_count: 0, point: None, vertices: 0 });
            (slots.len() - 1) as u32
        });
        let slot = &mut slots[s as usize];
        slot.vertices += 1;
        let k = vertex_pipe[v] as usize;
        if let Some(z) = &pipe_list[pipe_ids[k]].z {
            slot.z_sum += z[v - offsets[k]];
            slot.z_count += 1;
        }
    }
    let slot_of_vertex = |v: usize| -> Option<u32> { slot_of_root.get(&root_of[v]).copied() };

    // Segments, for points on interiors and near misses.
    let segments: SegmentTree = RTree::bulk_load(
        pipe_ids
            .iter()
            .enumerate()
            .flat_map(|(k, &i)| {
                let xy = &pipe_list[i].xy;
                let frame = &frame;
                (0..xy.len() - 1).map(move |s| {
                    GeomWithData::new(
                        Rectangle::from_corners(frame.work(xy[s]), frame.work(xy[s + 1])),
                        (k as u32, s as u32),
                    )
                })
            })
            .collect(),
    );

    // Phase 4: points.
    let mut cuts: Vec<Vec<Cut>> = vec![Vec::new(); pipe_ids.len()];
    let mut point_slot: Vec<Option<u32>> = vec![None; point_list.len()];
    for (q, point) in point_list.iter().enumerate() {
        let p = point.xy;
        // The nearest pipe end, then the nearest shared vertex, within the snap distance.
        let mut best: Option<(bool, f64, u32)> = None;
        for hit in tree.locate_in_envelope(&envelope(&frame, p, snap)) {
            let v = hit.data as usize;
            let Some(s) = slot_of_vertex(v) else { continue };
            let d = frame.distance(p, vertex_xy(v));
            if d > snap {
                continue;
            }
            let end = is_end(v);
            let better = match best {
                None => true,
                Some((best_end, best_d, _)) => (end && !best_end) || (end == best_end && d < best_d),
            };
            if better {
                best = Some((end, d, s));
            }
        }
        if let Some((_, _, s)) = best {
            let slot = &mut slots[s as usize];
            if let Some(other) = slot.point {
                let o = &point_list[other];
                return Err(feature_error(
                    point.feature,
                    point.id.as_deref(),
                    None,
                    format!(
                        "this point and point feature #{} ({}) fall on the same pipe end at ({}, {}); move one, or lower --snap",
                        o.feature + 1,
                        o.id.as_deref().unwrap_or("no id"),
                        slot.xy.0,
                        slot.xy.1
                    ),
                )
                .in_file(points.map(|s| s.file).unwrap_or_default()));
            }
            slot.point = Some(q);
            slot.xy = p;
            point_slot[q] = Some(s);
            continue;
        }
        // Interiors within the snap distance: the nearest foot on each pipe.
        let mut feet: HashMap<u32, (u32, f64, f64)> = HashMap::new();
        for hit in segments.locate_in_envelope_intersecting(&envelope(&frame, p, snap)) {
            let (k, s) = hit.data;
            let xy = &pipe_list[pipe_ids[k as usize]].xy;
            let (t, d) = frame.foot(p, xy[s as usize], xy[s as usize + 1]);
            if d <= snap && feet.get(&k).map_or(true, |&(_, _, bd)| d < bd) {
                feet.insert(k, (s, t, d));
            }
        }
        if feet.is_empty() {
            let nearest = nearest_segment(
                &segments,
                &pipe_list,
                &pipe_ids,
                &frame,
                p,
                snap * ImportOptions::NEAR_MISS_FACTOR,
                None,
            )
            .map(|(_, _, _, d)| d);
            report.points_off_network.push(OffNetwork {
                feature: point.feature,
                id: point.id.clone().unwrap_or_default(),
                kind: point.kind.label(),
                x: p.0,
                y: p.1,
                nearest_pipe_distance: nearest,
            });
            continue;
        }
        slots.push(Slot { xy: p, z_sum: 0.0, z_count: 0, point: Some(q), vertices: 0 });
        let s = (slots.len() - 1) as u32;
        point_slot[q] = Some(s);
        let mut feet: Vec<_> = feet.into_iter().collect();
        feet.sort_unstable_by_key(|f| f.0);
        for (k, (seg, t, _)) in feet {
            let pipe = &pipe_list[pipe_ids[k as usize]];
            if let Some(z) = &pipe.z {
                slots[s as usize].z_sum += z[seg as usize] + (z[seg as usize + 1] - z[seg as usize]) * t;
                slots[s as usize].z_count += 1;
            }
            slots[s as usize].vertices += 1;
            cuts[k as usize].push(Cut { seg, t, slot: s });
        }
    }

    // Phase 5: cut the pipes into links.
    struct Part {
        pipe: usize,
        k: usize,
        id: String,
        from: u32,
        to: u32,
        length: f64,
        path: Vec<(f64, f64)>,
        cut_start: f64,
        cut_end: f64,
    }
    let mut parts: Vec<Part> = Vec::with_capacity(pipe_ids.len());
    let mut parts_of_pipe: Vec<(usize, usize)> = Vec::with_capacity(pipe_ids.len());
    let length_factor = crs_metres; // planar units → m (geodesics are in m already)
    for (k, &i) in pipe_ids.iter().enumerate() {
        let pipe = &pipe_list[i];
        let n = pipe.xy.len();
        let mut list = std::mem::take(&mut cuts[k]);
        for v in 0..n {
            let g = offsets[k] + v;
            if let Some(s) = slot_of_vertex(g) {
                let (seg, t) = if v + 1 == n { ((n - 2) as u32, 1.0) } else { (v as u32, 0.0) };
                list.push(Cut { seg, t, slot: s });
            }
        }
        list.sort_by(|a, b| a.position().total_cmp(&b.position()));
        list.dedup_by(|b, a| a.position() == b.position() && a.slot == b.slot);
        let first = parts.len();
        let total_drawn = drawn[i] * length_factor;
        // (from slot, to slot, drawn length, path, start position, end position)
        type Piece = (u32, u32, f64, Vec<(f64, f64)>, f64, f64);
        let mut pieces: Vec<Piece> = Vec::new();
        for w in list.windows(2) {
            let (c0, c1) = (w[0], w[1]);
            let a = lerp(pipe.xy[c0.seg as usize], pipe.xy[c0.seg as usize + 1], c0.t);
            let b = lerp(pipe.xy[c1.seg as usize], pipe.xy[c1.seg as usize + 1], c1.t);
            let mut path = Vec::new();
            let mut prev = a;
            let mut length = 0.0;
            for (v, &xy) in pipe.xy.iter().enumerate() {
                let pos = v as f64;
                if pos > c0.position() && pos < c1.position() {
                    length += frame.distance(prev, xy);
                    prev = xy;
                    path.push(xy);
                }
            }
            length += frame.distance(prev, b);
            pieces.push((c0.slot, c1.slot, length * length_factor, path, c0.position(), c1.position()));
        }
        let several = pieces.len() > 1;
        let drawn_sum: f64 = pieces.iter().map(|p| p.2).sum();
        let attribute = pipe.length;
        if let Some(l) = attribute {
            if total_drawn > 0.0 && ((l - total_drawn) / total_drawn).abs() > ImportOptions::LENGTH_TOLERANCE {
                let u = fields.units.length;
                report.length_differences.push(LengthDifference {
                    feature: pipe.feature,
                    pipe: pipe.id.clone(),
                    attribute: u.from_si(l),
                    drawn: u.from_si(total_drawn),
                    difference_percent: 100.0 * (l - total_drawn) / total_drawn,
                });
            }
        }
        for (n_part, (from, to, length, path, c0, c1)) in pieces.into_iter().enumerate() {
            let id = if several { format!("{}-{}", pipe.id, n_part + 1) } else { pipe.id.clone() };
            if from == to {
                report.dropped.push(Dropped {
                    feature: pipe.feature,
                    id,
                    reason: "closed on itself",
                    duplicate_of: None,
                    attributes_differ: None,
                });
                continue;
            }
            let length = match attribute {
                Some(l) if drawn_sum > 0.0 => l * length / drawn_sum,
                _ => length,
            };
            parts.push(Part { pipe: i, k, id, from, to, length, path, cut_start: c0, cut_end: c1 });
        }
        parts_of_pipe.push((first, parts.len()));
    }

    // Node ids: points keep theirs; the others are N-<number> in order of first appearance.
    let mut used: HashSet<String> = HashSet::new();
    let mut node_ids: Vec<Option<String>> = vec![None; slots.len()];
    let mut point_ids_seen: HashMap<String, usize> = HashMap::new();
    for (s, slot) in slots.iter().enumerate() {
        if let Some(q) = slot.point {
            if let Some(id) = &point_list[q].id {
                if let Some(&other) = point_ids_seen.get(id) {
                    return Err(feature_error(
                        point_list[q].feature,
                        Some(id),
                        fields.point("id"),
                        format!("the id is also the id of point feature #{}; node ids must be unique", other + 1),
                    )
                    .in_file(points.map(|s| s.file).unwrap_or_default()));
                }
                point_ids_seen.insert(id.clone(), point_list[q].feature);
                used.insert(id.clone());
                node_ids[s] = Some(id.clone());
            }
        }
    }
    // Only slots some link uses become nodes (a slot whose every part closed on itself does not).
    let mut order: Vec<u32> = Vec::new();
    {
        let mut seen = vec![false; slots.len()];
        for p in &parts {
            for s in [p.from, p.to] {
                if !seen[s as usize] {
                    seen[s as usize] = true;
                    order.push(s);
                }
            }
        }
    }
    let mut counter = 0usize;
    for &s in &order {
        if node_ids[s as usize].is_none() {
            let id = loop {
                counter += 1;
                let id = format!("N-{counter}");
                if !used.contains(&id) {
                    break id;
                }
            };
            if slots[s as usize].point.is_some() {
                report.generated_ids += 1;
            }
            node_ids[s as usize] = Some(id);
        }
    }
    // Points on the network first, in file order; then the other nodes in order of appearance.
    let mut node_order: Vec<u32> = Vec::with_capacity(order.len());
    let mut points_first: Vec<(usize, u32)> =
        order.iter().filter_map(|&s| slots[s as usize].point.map(|q| (q, s))).collect();
    points_first.sort_unstable();
    node_order.extend(points_first.iter().map(|&(_, s)| s));
    node_order.extend(order.iter().copied().filter(|&s| slots[s as usize].point.is_none()));
    let mut node_index = vec![u32::MAX; slots.len()];
    for (n, &s) in node_order.iter().enumerate() {
        node_index[s as usize] = n as u32;
    }

    // Phase 6: elevations.
    let n_nodes = node_order.len();
    let mut elevation: Vec<Option<f64>> = vec![None; n_nodes];
    for (n, &s) in node_order.iter().enumerate() {
        let slot = &slots[s as usize];
        if let Some(q) = slot.point {
            let p = &point_list[q];
            let from_point = match p.kind {
                PointKind::Reservoir => p.elevation.or(p.head),
                _ => p.elevation,
            };
            if from_point.is_some() {
                elevation[n] = from_point;
                report.elevations.from_points += 1;
                continue;
            }
            if let Some(z) = p.z {
                elevation[n] = Some(z);
                report.elevations.from_z += 1;
                continue;
            }
        }
        if slot.z_count > 0 {
            elevation[n] = Some(slot.z_sum / slot.z_count as f64);
            report.elevations.from_z += 1;
        }
    }
    let mut adjacency: Vec<Vec<(u32, f64)>> = vec![Vec::new(); n_nodes];
    for p in &parts {
        let (a, b) = (node_index[p.from as usize], node_index[p.to as usize]);
        adjacency[a as usize].push((b, p.length));
        adjacency[b as usize].push((a, p.length));
    }
    if options.elevation_from_neighbours && elevation.iter().any(Option::is_none) {
        report.elevations.interpolated = interpolate(&adjacency, &mut elevation);
    }
    let missing: Vec<usize> = (0..n_nodes).filter(|&n| elevation[n].is_none()).collect();
    if !missing.is_empty() {
        match options.elevation_default {
            Some(z) => {
                let z = fields.units.length.to_si(z);
                for &n in &missing {
                    elevation[n] = Some(z);
                }
                report.elevations.default = missing.len();
            }
            None => {
                let names: Vec<&str> = missing
                    .iter()
                    .take(10)
                    .map(|&n| node_ids[node_order[n] as usize].as_deref().unwrap_or(""))
                    .collect();
                let more = if missing.len() > 10 { format!(" and {} more", missing.len() - 10) } else { String::new() };
                return Err(ModelError::at(
                    Some(crate::error::Element::Table("nodes".into())),
                    Some("elevation"),
                    format!(
                        "{} nodes have no elevation (no point attribute, no Z on the lines): {}{more}; \
                         give --elevation-from-neighbours or --elevation-default",
                        missing.len(),
                        names.join(", ")
                    ),
                ));
            }
        }
    }

    // The model.
    let mut model = Model::new(fields.units, fields.options);
    model.title = fields.title.clone();
    model.map.coordinates = if lonlat { MapCoordinates::LonLat } else { MapCoordinates::Projected };
    for (n, &s) in node_order.iter().enumerate() {
        let slot = &slots[s as usize];
        let id = node_ids[s as usize].clone().unwrap_or_default();
        let z = elevation[n].unwrap_or_default();
        let (kind, zone, feature) = match slot.point.map(|q| &point_list[q]) {
            None => (NodeKind::Junction { demand: 0.0 }, None, None),
            Some(p) => {
                let kind = match p.kind {
                    PointKind::Junction => NodeKind::Junction { demand: p.demand },
                    PointKind::Reservoir => NodeKind::Reservoir { head: p.head.unwrap_or(z) },
                    PointKind::Tank => NodeKind::Tank(Box::new(Tank {
                        level: p.level.unwrap_or_default(),
                        min_level: p.min_level.unwrap_or(0.0),
                        max_level: p.max_level,
                        diameter: p.tank_diameter,
                    })),
                };
                (kind, p.zone.clone(), Some(p.feature))
            }
        };
        let node = Node { id: id.into(), elevation: z, coordinates: Some(slot.xy), zone, kind };
        model.add_node(node).map_err(|e| match (feature, points) {
            (Some(f), Some(src)) => {
                feature_error(f, Some(&node_ids[s as usize].clone().unwrap_or_default()), None, e.message)
                    .in_file(src.file)
            }
            _ => e,
        })?;
    }
    for p in &parts {
        let pipe = &pipe_list[p.pipe];
        let link = Link {
            id: p.id.as_str().into(),
            from: node_index[p.from as usize] as usize,
            to: node_index[p.to as usize] as usize,
            status: pipe.status,
            kind: LinkKind::Pipe(Pipe {
                length: p.length,
                diameter: pipe.diameter,
                roughness: pipe.roughness,
                minor_loss: pipe.minor_loss,
                check_valve: pipe.check_valve,
            }),
        };
        let k = model
            .add_link(link)
            .map_err(|e| feature_error(pipe.feature, Some(&p.id), None, e.message).in_file(pipes.file))?;
        if !p.path.is_empty() {
            model.map.paths.insert(k, p.path.clone());
        }
    }

    // Reports: merges (the largest distance of a member vertex from its node), splits, near
    // misses, reachability.
    let mut gap = vec![0.0f64; slots.len()];
    for v in 0..n_vertices {
        if let Some(s) = slot_of_vertex(v) {
            let d = frame.distance(vertex_xy(v), slots[s as usize].xy);
            gap[s as usize] = gap[s as usize].max(d);
        }
    }
    for &s in &node_order {
        let slot = &slots[s as usize];
        if gap[s as usize] > 0.0 {
            report.merged.push(Merged {
                node: node_ids[s as usize].clone().unwrap_or_default(),
                x: slot.xy.0,
                y: slot.xy.1,
                vertices: slot.vertices as usize,
                largest_gap: gap[s as usize],
            });
        }
    }
    for (k, &(first, end)) in parts_of_pipe.iter().enumerate() {
        let i = pipe_ids[k];
        let total = first..end;
        if total.len() > 1 || (total.len() == 1 && parts[first].id != pipe_list[i].id) {
            let at =
                parts[first..end].windows(2).map(|w| node_ids[w[0].to as usize].clone().unwrap_or_default()).collect();
            report.splits.push(Split {
                feature: pipe_list[i].feature,
                pipe: pipe_list[i].id.clone(),
                at,
                links: parts[first..end].iter().map(|p| p.id.clone()).collect(),
            });
        }
    }
    // Near misses: dangling ends (a node of one link end) near another pipe.
    let mut degree = vec![0u32; slots.len()];
    let mut end_part = vec![u32::MAX; slots.len()];
    for (j, p) in parts.iter().enumerate() {
        degree[p.from as usize] += 1;
        degree[p.to as usize] += 1;
        end_part[p.from as usize] = j as u32;
        end_part[p.to as usize] = j as u32;
    }
    let reach = snap * ImportOptions::NEAR_MISS_FACTOR;
    let mut pairs_seen: HashSet<(u32, u32)> = HashSet::new();
    for &s in &node_order {
        if degree[s as usize] != 1 {
            continue;
        }
        let j = end_part[s as usize] as usize;
        let own = &parts[j];
        let own_k = Some(own.k);
        // The end's drawn position (not the node's, which a point may have moved).
        let pipe = &pipe_list[own.pipe];
        let at = if own.from == s { lerp_cut(&pipe.xy, own.cut_start) } else { lerp_cut(&pipe.xy, own.cut_end) };
        let Some((k, seg, t, d)) = nearest_segment(&segments, &pipe_list, &pipe_ids, &frame, at, reach, own_k) else {
            continue;
        };
        let other_pipe = &pipe_list[pipe_ids[k as usize]];
        let pos = seg as f64 + t;
        let (first, end) = parts_of_pipe[k as usize];
        let Some(other) = parts[first..end].iter().find(|p| p.cut_start <= pos && pos <= p.cut_end) else { continue };
        // An end-to-end miss is reported once, from the end listed first. The nearest position
        // is an end when that end is as close as the foot (to round-off: a foot found in the
        // tangent plane may fall a hair inside the line).
        let tolerance = d * 1e-9 + 1e-12;
        let other_xy = &pipe_list[other.pipe].xy;
        let other_slot = if frame.distance(at, lerp_cut(other_xy, other.cut_start)) <= d + tolerance {
            Some(other.from)
        } else if frame.distance(at, lerp_cut(other_xy, other.cut_end)) <= d + tolerance {
            Some(other.to)
        } else {
            None
        };
        if let Some(o) = other_slot {
            if o == s {
                continue;
            }
            let key = (s.min(o), s.max(o));
            if !pairs_seen.insert(key) {
                continue;
            }
        }
        let foot = lerp(other_pipe.xy[seg as usize], other_pipe.xy[seg as usize + 1], t);
        report.near_misses.push(NearMiss {
            node: node_ids[s as usize].clone().unwrap_or_default(),
            link: own.id.clone(),
            other: other.id.clone(),
            x: at.0,
            y: at.1,
            other_x: foot.0,
            other_y: foot.1,
            distance: d,
        });
    }
    report.unreached = unreached(&model);

    let c = &mut report.counts;
    c.nodes = model.nodes().len();
    c.links = model.links().len();
    c.nodes_merged = report.merged.len();
    c.pipes_split = report.splits.len();
    c.pipes_dropped = report.dropped.len();
    c.near_misses = report.near_misses.len();
    c.points_off_network = report.points_off_network.len();
    c.length_differences = report.length_differences.len();
    c.unreached_nodes = report.unreached.len();

    if let Err(e) = model.validate() {
        let sources_off: Vec<&str> =
            report.points_off_network.iter().filter(|p| p.kind != "junction").map(|p| p.id.as_str()).collect();
        let hint = if sources_off.is_empty() {
            String::new()
        } else {
            format!(" (these sources are farther than the snap distance from every pipe: {})", sources_off.join(", "))
        };
        return Err(ModelError { message: format!("{}{hint}", e.message), ..e });
    }
    model.shrink_to_fit();
    Ok((model, report))
}

/// The position at a cut position (segment + fraction) along a line.
fn lerp_cut(xy: &[(f64, f64)], position: f64) -> (f64, f64) {
    let seg = (position.floor() as usize).min(xy.len() - 2);
    lerp(xy[seg], xy[seg + 1], position - seg as f64)
}

/// The nearest segment within `reach` of `p` (skipping pipe `skip`): pipe, segment, t, distance.
fn nearest_segment(
    segments: &SegmentTree,
    pipe_list: &[PipeIn],
    pipe_ids: &[usize],
    frame: &Frame,
    p: (f64, f64),
    reach: f64,
    skip: Option<usize>,
) -> Option<(u32, u32, f64, f64)> {
    let mut best: Option<(u32, u32, f64, f64)> = None;
    for hit in segments.locate_in_envelope_intersecting(&envelope(frame, p, reach)) {
        let (k, s) = hit.data;
        if Some(k as usize) == skip {
            continue;
        }
        let xy = &pipe_list[pipe_ids[k as usize]].xy;
        let (t, d) = frame.foot(p, xy[s as usize], xy[s as usize + 1]);
        if d <= reach && best.map_or(true, |b| d < b.3) {
            best = Some((k, s, t, d));
        }
    }
    best
}

/// Drops features whose vertices agree with an earlier kept feature's within `snap`, in either
/// direction.
fn drop_duplicates(pipes: &[PipeIn], kept: &mut [bool], frame: &Frame, snap: f64, report: &mut ImportReport) {
    let starts: RTree<GeomWithData<[f64; 2], u32>> = RTree::bulk_load(
        (0..pipes.len())
            .filter(|&i| kept[i])
            .map(|i| GeomWithData::new(frame.work(pipes[i].xy[0]), i as u32))
            .collect(),
    );
    let close = |a: (f64, f64), b: (f64, f64)| frame.distance(a, b) <= snap;
    for i in 0..pipes.len() {
        if !kept[i] {
            continue;
        }
        let p = &pipes[i];
        let first = p.xy[0];
        let last = *p.xy.last().unwrap_or(&first);
        let mut found = None;
        for end in [first, last] {
            for hit in starts.locate_in_envelope(&envelope(frame, end, snap)) {
                let j = hit.data as usize;
                if j >= i || !kept[j] || pipes[j].xy.len() != p.xy.len() {
                    continue;
                }
                let q = &pipes[j].xy;
                let forward = q.iter().zip(&p.xy).all(|(a, b)| close(*a, *b));
                let backward = forward || q.iter().zip(p.xy.iter().rev()).all(|(a, b)| close(*a, *b));
                if backward && found.map_or(true, |f| j < f) {
                    found = Some(j);
                }
            }
        }
        if let Some(j) = found {
            kept[i] = false;
            let q = &pipes[j];
            let differ = q.diameter != p.diameter
                || q.roughness != p.roughness
                || q.status != p.status
                || q.length != p.length
                || q.minor_loss != p.minor_loss
                || q.check_valve != p.check_valve;
            report.dropped.push(Dropped {
                feature: p.feature,
                id: p.id.clone(),
                reason: "duplicate",
                duplicate_of: Some(q.id.clone()),
                attributes_differ: Some(differ),
            });
        }
    }
}

/// Interpolates missing elevations along the network: each node without one takes the
/// inverse-distance weighting of the two nearest nodes of known elevation (network distance,
/// not passing through other known nodes), which on a chain between them is linear
/// interpolation; with only one such node within reach it takes that node's elevation.
/// Returns how many nodes got one.
fn interpolate(adjacency: &[Vec<(u32, f64)>], elevation: &mut [Option<f64>]) -> usize {
    #[derive(PartialEq)]
    struct Entry(f64, u32, u32);
    impl Eq for Entry {}
    impl PartialOrd for Entry {
        fn partial_cmp(&self, other: &Self) -> Option<std::cmp::Ordering> {
            Some(self.cmp(other))
        }
    }
    impl Ord for Entry {
        fn cmp(&self, other: &Self) -> std::cmp::Ordering {
            other.0.total_cmp(&self.0).then(other.1.cmp(&self.1)).then(other.2.cmp(&self.2))
        }
    }
    let n = elevation.len();
    let mut labels: Vec<Vec<(u32, f64)>> = vec![Vec::new(); n];
    let mut heap = BinaryHeap::new();
    for (v, z) in elevation.iter().enumerate() {
        if z.is_some() {
            heap.push(Entry(0.0, v as u32, v as u32));
        }
    }
    while let Some(Entry(d, v, source)) = heap.pop() {
        let l = &mut labels[v as usize];
        if l.len() >= 2 || l.iter().any(|&(s, _)| s == source) {
            continue;
        }
        l.push((source, d));
        for &(u, w) in &adjacency[v as usize] {
            // Known nodes are sources of their own; no path passes through them.
            if elevation[u as usize].is_none() {
                heap.push(Entry(d + w, u, source));
            }
        }
    }
    let mut count = 0;
    for v in 0..n {
        if elevation[v].is_some() {
            continue;
        }
        let z = match labels[v].as_slice() {
            [] => continue,
            [(s, _)] => elevation[*s as usize].unwrap_or_default(),
            [(s1, d1), (s2, d2), ..] => {
                let (z1, z2) =
                    (elevation[*s1 as usize].unwrap_or_default(), elevation[*s2 as usize].unwrap_or_default());
                if d1 + d2 > 0.0 {
                    (z1 * d2 + z2 * d1) / (d1 + d2)
                } else {
                    0.5 * (z1 + z2)
                }
            }
        };
        elevation[v] = Some(z);
        count += 1;
    }
    count
}

/// Ids of the nodes that no reservoir or tank reaches through links that are not closed.
pub fn unreached(model: &Model) -> Vec<String> {
    let n = model.nodes().len();
    let mut adjacency: Vec<Vec<usize>> = vec![Vec::new(); n];
    for l in model.links() {
        if l.status != LinkStatus::Closed {
            adjacency[l.from].push(l.to);
            adjacency[l.to].push(l.from);
        }
    }
    let mut seen = vec![false; n];
    let mut queue: VecDeque<usize> = VecDeque::new();
    for (i, node) in model.nodes().iter().enumerate() {
        if node.fixed_head().is_some() {
            seen[i] = true;
            queue.push_back(i);
        }
    }
    while let Some(v) = queue.pop_front() {
        for &u in &adjacency[v] {
            if !seen[u] {
                seen[u] = true;
                queue.push_back(u);
            }
        }
    }
    (0..n).filter(|&i| !seen[i]).map(|i| model.nodes()[i].id.to_string()).collect()
}
