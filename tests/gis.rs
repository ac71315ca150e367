//! From the GIS and back: `ringmain import`, `--format geojson` and `ringmain map`, run through
//! the binary.
//!
//! The networks are invented here with known geometry: right triangles with whole-number sides
//! (3-4-5, 5-12-13: Pythagoras, so drawn lengths are exact in floating point) and straight
//! digitising faults of known size. Geodesic lengths of longitude/latitude input are checked
//! against the `geographiclib` Python package in tests/python/test_gis_reference.py.

use serde_json::{json, Value};
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

mod common;
use common::scratch;

fn bin() -> &'static str {
    env!("CARGO_BIN_EXE_ringmain")
}

/// A fields file of projected metres, Hazen–Williams, with every point key mapped.
const FIELDS: &str = r#"
pipes.id = "ASSET_ID"
pipes.diameter = "DIAM_MM"
pipes.roughness = "HW_C"
pipes.status = "STATUS"
pipes.length = "LEN_M"
[crs]
units = "m"
[units]
length = "m"
diameter = "mm"
flow = "L/s"
[points]
id = "NODE_ID"
kind = "TYPE"
elevation = "Z_M"
demand = "DEMAND_LPS"
head = "HEAD_M"
[kinds]
"HYD" = "junction"
"CUST" = "junction"
"RES" = "reservoir"
[model]
headloss = "hazen-williams"
title = "Quarry Lane estate (invented)"
"#;

fn pipe(id: &str, coords: &[[f64; 2]]) -> Value {
    json!({"type": "Feature", "properties": {"ASSET_ID": id, "DIAM_MM": 150, "HW_C": 120, "STATUS": null, "LEN_M": null},
           "geometry": {"type": "LineString", "coordinates": coords}})
}

fn point(id: &str, at: [f64; 2], kind: &str, z: Option<f64>, demand: Option<f64>, head: Option<f64>) -> Value {
    json!({"type": "Feature", "properties": {"NODE_ID": id, "TYPE": kind, "Z_M": z, "DEMAND_LPS": demand, "HEAD_M": head},
           "geometry": {"type": "Point", "coordinates": at}})
}

fn collection(features: Vec<Value>) -> String {
    json!({"type": "FeatureCollection", "features": features}).to_string()
}

/// The source at the origin, with a head of 60 m.
fn source() -> Value {
    point("SRC", [0.0, 0.0], "RES", None, None, Some(60.0))
}

struct Run {
    out: Output,
    dir: PathBuf,
}

impl Run {
    fn stderr(&self) -> String {
        String::from_utf8_lossy(&self.out.stderr).into_owned()
    }
    fn code(&self) -> Option<i32> {
        self.out.status.code()
    }
    fn report(&self) -> Value {
        serde_json::from_str(&std::fs::read_to_string(self.dir.join("report.json")).unwrap()).unwrap()
    }
    fn model(&self) -> ringmain_core::Model {
        let path = self.dir.join("model.toml");
        let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{e}: {}", self.stderr()));
        ringmain_core::read_str(&text, ringmain_core::Format::Toml, "model.toml").unwrap()
    }
}

/// Runs `ringmain import` on these files in a fresh directory; `extra` are more arguments.
fn import(name: &str, fields: &str, pipes: &str, points: Option<&str>, extra: &[&str]) -> Run {
    let dir = scratch(name);
    std::fs::write(dir.join("fields.toml"), fields).unwrap();
    std::fs::write(dir.join("pipes.geojson"), pipes).unwrap();
    let mut cmd = Command::new(bin());
    cmd.current_dir(&dir).args(["import", "--pipes", "pipes.geojson", "--fields", "fields.toml"]);
    if let Some(p) = points {
        std::fs::write(dir.join("points.geojson"), p).unwrap();
        cmd.args(["--points", "points.geojson"]);
    }
    cmd.args(["--output", "model.toml", "--report", "report.json"]).args(extra);
    Run { out: cmd.output().unwrap(), dir }
}

fn link_between<'m>(m: &'m ringmain_core::Model, a: &str, b: &str) -> Vec<&'m ringmain_core::Link> {
    let (ia, ib) = (m.node_index(a).unwrap(), m.node_index(b).unwrap());
    m.links().iter().filter(|l| (l.from == ia && l.to == ib) || (l.from == ib && l.to == ia)).collect()
}

fn length(l: &ringmain_core::Link) -> f64 {
    l.as_pipe().unwrap().length
}

#[test]
fn round_trip_of_an_invented_network_keeps_connectivity_lengths_and_paths() {
    // A loop of four pipes and a branch, every pipe with interior vertices on 3-4-5 and 5-12-13
    // triangles: drawn lengths are exact sums of whole numbers.
    let nodes = [("SRC", [0.0, 0.0]), ("A", [300.0, 400.0]), ("B", [800.0, 1600.0]), ("C", [500.0, 1200.0])];
    // (id, from, to, interior vertices, length = sum of segment lengths)
    type Drawn<'a> = (&'a str, &'a str, &'a str, Vec<[f64; 2]>, f64);
    let links: [Drawn; 4] = [
        ("P1", "SRC", "A", vec![[3.0, 4.0], [6.0, 8.0]], 500.0),
        ("P2", "A", "B", vec![[500.0, 880.0]], 13.0 * 40.0 + 300.0f64.hypot(720.0)),
        ("P3", "B", "C", vec![], 500.0),
        ("P4", "C", "SRC", vec![[500.0, 0.0]], 1200.0 + 500.0),
    ];
    let mut features = Vec::new();
    for (id, from, to, inner, _) in &links {
        let at = |n: &str| nodes.iter().find(|(k, _)| k == &n).unwrap().1;
        let mut coords = vec![at(from)];
        coords.extend(inner.iter().copied());
        coords.push(at(to));
        features.push(pipe(id, &coords));
    }
    let mut points = vec![source()];
    for (id, xy) in &nodes[1..] {
        points.push(point(id, *xy, "CUST", Some(20.0), Some(1.5), None));
    }
    let run = import("round-trip", FIELDS, &collection(features), Some(&collection(points)), &[]);
    assert_eq!(run.code(), Some(0), "{}", run.stderr());
    let m = run.model();
    assert_eq!(m.title.as_deref(), Some("Quarry Lane estate (invented)"));
    assert_eq!(m.nodes().len(), 4);
    assert_eq!(m.links().len(), 4);
    for (id, from, to, inner, expected) in &links {
        let found = link_between(&m, from, to);
        assert_eq!(found.len(), 1, "{id}");
        let l = found[0];
        assert_eq!(l.id, *id);
        let rel = (length(l) - expected).abs() / expected;
        assert!(rel < 1e-9, "{id}: {} vs {expected}", length(l));
        let k = m.link_index(id).unwrap();
        let path: Vec<[f64; 2]> =
            m.map.paths.get(&k).map(|p| p.iter().map(|&(x, y)| [x, y]).collect()).unwrap_or_default();
        assert_eq!(&path, inner, "{id}");
    }
    for (id, xy) in &nodes {
        assert_eq!(m.nodes()[m.node_index(id).unwrap()].coordinates, Some((xy[0], xy[1])), "{id}");
    }
    assert_eq!(m.map.coordinates, ringmain_core::model::MapCoordinates::Projected);
    let r = run.report();
    assert_eq!(r["counts"]["nodes_merged"], 0);
    assert_eq!(r["counts"]["pipes_dropped"], 0);
    assert_eq!(r["counts"]["near_misses"], 0);
    assert_eq!(r["counts"]["unreached_nodes"], 0);
}

#[test]
fn ends_five_centimetres_apart_merge_at_a_half_metre_snap() {
    let pipes = collection(vec![pipe("P1", &[[0.0, 0.0], [100.0, 0.0]]), pipe("P2", &[[100.05, 0.0], [100.05, 80.0]])]);
    let run = import("merge", FIELDS, &pipes, Some(&collection(vec![source()])), &["--elevation-default", "10"]);
    assert_eq!(run.code(), Some(0), "{}", run.stderr());
    let m = run.model();
    assert_eq!(m.nodes().len(), 3, "the two ends are one node");
    let (p1, p2) = (&m.links()[0], &m.links()[1]);
    assert_eq!(p1.to, p2.from);
    // A snapped end keeps its drawn length (convention): 100 m and 80 m.
    assert_eq!(length(p1), 100.0);
    assert!((length(p2) - 80.0).abs() < 1e-12);
    let r = run.report();
    assert_eq!(r["counts"]["nodes_merged"], 1);
    assert!((r["merged"][0]["largest_gap"].as_f64().unwrap() - 0.05).abs() < 1e-9, "{r}");
    // With a 1 cm snap they stay apart, and the gap is a near miss.
    let run = import(
        "merge-small-snap",
        FIELDS,
        &pipes,
        Some(&collection(vec![source()])),
        &["--snap", "0.01", "--elevation-default", "10"],
    );
    assert_eq!(run.code(), Some(0), "{}", run.stderr());
    assert_eq!(run.model().nodes().len(), 4);
    assert_eq!(run.report()["counts"]["near_misses"], 1);
}

#[test]
fn a_hydrant_ten_centimetres_off_a_pipe_interior_splits_it() {
    let pipes = collection(vec![pipe("P1", &[[0.0, 0.0], [100.0, 0.0], [100.0, 50.0]])]);
    let points = collection(vec![source(), point("HY-7", [40.0, 0.1], "HYD", Some(12.0), Some(2.0), None)]);
    let run = import("split", FIELDS, &pipes, Some(&points), &["--elevation-default", "10"]);
    assert_eq!(run.code(), Some(0), "{}", run.stderr());
    let m = run.model();
    assert_eq!(m.links().len(), 2);
    let hy = m.node_index("HY-7").unwrap();
    // The node takes the point's id and coordinates; the parts' lengths are drawn lengths to the
    // foot (40 m, then 60 + 50 m).
    assert_eq!(m.nodes()[hy].coordinates, Some((40.0, 0.1)));
    assert_eq!(m.nodes()[hy].elevation, 12.0);
    let a = link_between(&m, "SRC", "HY-7");
    assert_eq!(a.len(), 1);
    assert!((length(a[0]) - 40.0).abs() < 1e-12);
    let b = m.links().iter().find(|l| l.from == hy || l.to == hy).filter(|l| l.id != a[0].id);
    let b = b.unwrap_or_else(|| m.links().iter().find(|l| l.id != a[0].id).unwrap());
    assert!((length(b) - 110.0).abs() < 1e-12);
    assert_eq!(m.map.paths.get(&m.link_index(&b.id).unwrap()), Some(&vec![(100.0, 0.0)]));
    let r = run.report();
    assert_eq!(r["counts"]["pipes_split"], 1);
    assert_eq!(r["splits"][0]["at"], json!(["HY-7"]));
    assert_eq!(r["splits"][0]["links"], json!(["P1-1", "P1-2"]));
    // A length attribute is shared in proportion to the drawn lengths (here 5.5 % longer, so
    // also reported as more than 2 % off).
    let pipes = pipes.replace("\"LEN_M\":null", "\"LEN_M\":150.0");
    let run = import("split-length", FIELDS, &pipes, Some(&points), &["--elevation-default", "10"]);
    assert_eq!(run.code(), Some(0), "{}", run.stderr());
    let m = run.model();
    let total: f64 = m.links().iter().map(length).sum();
    assert!((total - 150.0).abs() < 1e-9);
    assert!((length(&m.links()[0]) - 150.0 * 40.0 / 150.0).abs() < 1e-9);
    let r = run.report();
    assert_eq!(r["counts"]["length_differences"], 0, "150 m drawn, 150 m given: no difference");
    let pipes = pipes.replace("\"LEN_M\":150.0", "\"LEN_M\":155.0");
    let run = import("split-length-off", FIELDS, &pipes, Some(&points), &["--elevation-default", "10"]);
    let r = run.report();
    assert_eq!(r["counts"]["length_differences"], 1);
    assert!((r["length_differences"][0]["difference_percent"].as_f64().unwrap() - 100.0 * 5.0 / 150.0).abs() < 1e-9);
}

#[test]
fn crossing_pipes_without_a_shared_vertex_stay_apart() {
    let crossing =
        collection(vec![pipe("P1", &[[0.0, 0.0], [100.0, 0.0]]), pipe("P2", &[[50.0, -50.0], [50.0, 50.0]])]);
    let run = import("cross", FIELDS, &crossing, Some(&collection(vec![source()])), &["--elevation-default", "10"]);
    assert_eq!(run.code(), Some(0), "{}", run.stderr());
    let m = run.model();
    assert_eq!((m.nodes().len(), m.links().len()), (4, 2));
    assert_eq!(run.report()["counts"]["unreached_nodes"], 2, "P2 reaches no source");
    // With a vertex at the crossing on both lines, they join there and both are split.
    let joined = collection(vec![
        pipe("P1", &[[0.0, 0.0], [50.0, 0.0], [100.0, 0.0]]),
        pipe("P2", &[[50.0, -50.0], [50.0, 0.0], [50.0, 50.0]]),
    ]);
    let run =
        import("cross-joined", FIELDS, &joined, Some(&collection(vec![source()])), &["--elevation-default", "10"]);
    assert_eq!(run.code(), Some(0), "{}", run.stderr());
    let m = run.model();
    assert_eq!((m.nodes().len(), m.links().len()), (5, 4));
    assert_eq!(run.report()["counts"]["unreached_nodes"], 0);
}

#[test]
fn a_near_miss_at_one_metre_is_reported_with_its_coordinates() {
    let pipes = collection(vec![pipe("P1", &[[0.0, 0.0], [100.0, 0.0]]), pipe("P2", &[[101.0, 0.0], [101.0, 60.0]])]);
    let run = import("near-miss", FIELDS, &pipes, Some(&collection(vec![source()])), &["--elevation-default", "10"]);
    assert_eq!(run.code(), Some(0), "{}", run.stderr());
    let r = run.report();
    assert_eq!(r["counts"]["near_misses"], 1, "{r}");
    let miss = &r["near_misses"][0];
    assert!((miss["distance"].as_f64().unwrap() - 1.0).abs() < 1e-12);
    let ends = [
        (miss["x"].as_f64().unwrap(), miss["y"].as_f64().unwrap()),
        (miss["other_x"].as_f64().unwrap(), miss["other_y"].as_f64().unwrap()),
    ];
    assert!(ends.contains(&(100.0, 0.0)) && ends.contains(&(101.0, 0.0)), "{miss}");
    assert!(run.stderr().contains("near misses               1"), "{}", run.stderr());
    // An end stopping on another pipe's interior without a vertex there is a near miss too.
    let tee = collection(vec![pipe("P1", &[[0.0, 0.0], [100.0, 0.0]]), pipe("P2", &[[50.0, 0.0], [50.0, 60.0]])]);
    let run = import("near-miss-tee", FIELDS, &tee, Some(&collection(vec![source()])), &["--elevation-default", "10"]);
    let r = run.report();
    assert_eq!(r["counts"]["near_misses"], 1, "{r}");
    assert_eq!(r["near_misses"][0]["distance"], 0.0);
    // Six metres is beyond five snap distances: no report.
    let far = pipes.replace("101.0", "106.0");
    let run = import("near-miss-far", FIELDS, &far, Some(&collection(vec![source()])), &["--elevation-default", "10"]);
    assert_eq!(run.report()["counts"]["near_misses"], 0);
}

#[test]
fn a_duplicated_feature_is_dropped_with_a_report_line_whatever_its_id_or_direction() {
    let pipes = collection(vec![
        pipe("P1", &[[0.0, 0.0], [60.0, 80.0], [100.0, 80.0]]),
        pipe("P1-COPY", &[[100.0, 80.1], [60.0, 80.0], [0.0, 0.0]]),
        pipe("P0", &[[5.0, 5.0], [5.0, 5.0]]),
    ]);
    let run = import("duplicate", FIELDS, &pipes, Some(&collection(vec![source()])), &["--elevation-default", "10"]);
    assert_eq!(run.code(), Some(0), "{}", run.stderr());
    let m = run.model();
    assert_eq!(m.links().len(), 1);
    assert_eq!(m.links()[0].id, "P1");
    let r = run.report();
    assert_eq!(r["counts"]["pipes_dropped"], 2);
    let dropped = r["dropped"].as_array().unwrap();
    assert!(
        dropped.iter().any(|d| d["id"] == "P1-COPY" && d["reason"] == "duplicate" && d["duplicate_of"] == "P1"),
        "{r}"
    );
    assert!(dropped.iter().any(|d| d["id"] == "P0" && d["reason"] == "zero length"), "{r}");
    assert!(run.stderr().contains("dropped P1-COPY"), "{}", run.stderr());
}

#[test]
fn elevations_from_points_line_z_neighbours_or_a_default_else_an_error_naming_the_nodes() {
    // A chain SRC - N - HY: the middle node has no elevation of its own.
    let pipes = collection(vec![pipe("P1", &[[0.0, 0.0], [300.0, 0.0]]), pipe("P2", &[[300.0, 0.0], [400.0, 0.0]])]);
    let points = collection(vec![
        point("SRC", [0.0, 0.0], "RES", Some(40.0), None, Some(60.0)),
        point("HY", [400.0, 0.0], "HYD", Some(20.0), Some(1.0), None),
    ]);
    let run = import("elev-error", FIELDS, &pipes, Some(&points), &[]);
    assert_eq!(run.code(), Some(2));
    assert!(run.stderr().contains("N-1") && run.stderr().contains("elevation"), "{}", run.stderr());
    assert!(!run.dir.join("model.toml").exists(), "a failed run writes nothing");
    let run = import("elev-neighbours", FIELDS, &pipes, Some(&points), &["--elevation-from-neighbours"]);
    assert_eq!(run.code(), Some(0), "{}", run.stderr());
    let m = run.model();
    // Linear along the network: 300 m from 40, 100 m from 20: 40 + (20 - 40) * 300/400 = 25.
    assert!((m.nodes()[m.node_index("N-1").unwrap()].elevation - 25.0).abs() < 1e-12);
    let run = import("elev-default", FIELDS, &pipes, Some(&points), &["--elevation-default", "7.5"]);
    let m = run.model();
    assert_eq!(m.nodes()[m.node_index("N-1").unwrap()].elevation, 7.5);
    // 3D lines: Z of the ends; a point's elevation attribute wins over the line's Z.
    let pipes3d = json!({"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {"ASSET_ID": "P1", "DIAM_MM": 150, "HW_C": 120, "STATUS": "open", "LEN_M": null},
         "geometry": {"type": "LineString", "coordinates": [[0.0, 0.0, 38.0], [300.0, 0.0, 31.0]]}},
        {"type": "Feature", "properties": {"ASSET_ID": "P2", "DIAM_MM": 150, "HW_C": 120, "STATUS": "closed", "LEN_M": null},
         "geometry": {"type": "LineString", "coordinates": [[300.0, 0.0, 31.0], [400.0, 0.0, 29.0]]}}]})
    .to_string();
    let run = import("elev-z", FIELDS, &pipes3d, Some(&points), &[]);
    assert_eq!(run.code(), Some(0), "{}", run.stderr());
    let m = run.model();
    assert_eq!(m.nodes()[m.node_index("N-1").unwrap()].elevation, 31.0);
    assert_eq!(m.nodes()[m.node_index("HY").unwrap()].elevation, 20.0);
    assert_eq!(m.links()[1].status, ringmain_core::LinkStatus::Closed);
    // Lengths are measured in plan.
    assert_eq!(length(&m.links()[0]), 300.0);
    assert_eq!(run.report()["counts"]["unreached_nodes"], 1, "HY is behind a closed pipe");
}

/// Runs an import expected to fail with exit 2; returns standard error.
fn bad(name: &str, fields: &str, pipes: &str, points: Option<&str>) -> String {
    let run = import(name, fields, pipes, points, &["--elevation-default", "0"]);
    let err = run.stderr();
    assert_eq!(run.code(), Some(2), "{name}: {err}");
    assert!(!err.contains("panicked"), "{name}: {err}");
    assert!(!run.dir.join("model.toml").exists() && !run.dir.join("report.json").exists(), "{name}: nothing written");
    err
}

#[test]
fn bad_input_names_the_file_the_feature_and_the_attribute() {
    let good = vec![pipe("P1", &[[0.0, 0.0], [100.0, 0.0]]), pipe("P2", &[[100.0, 0.0], [200.0, 0.0]])];
    let points = collection(vec![source()]);
    // Invalid GeoJSON (not JSON at all): the file and the position.
    let err = bad("invalid-json", FIELDS, "{\"type\": \"FeatureCollection\", \"features\": [", Some(&points));
    assert!(err.contains("pipes.geojson") && err.contains("not valid JSON"), "{err}");
    // Geometry of the wrong type.
    let mut f = good.clone();
    f[1]["geometry"] = json!({"type": "Point", "coordinates": [1.0, 2.0]});
    let err = bad("wrong-geometry", FIELDS, &collection(f), Some(&points));
    for want in ["pipes.geojson", "features[1]", "'P2'", "geometry", "Point"] {
        assert!(err.contains(want), "{want}: {err}");
    }
    // An attribute of the wrong type.
    let mut f = good.clone();
    f[1]["properties"]["DIAM_MM"] = json!("150");
    let err = bad("wrong-type", FIELDS, &collection(f), Some(&points));
    for want in ["pipes.geojson", "features[1]", "'P2'", "DIAM_MM", "must be a number"] {
        assert!(err.contains(want), "{want}: {err}");
    }
    // A mapped field missing from a feature.
    let mut f = good.clone();
    f[0]["properties"].as_object_mut().unwrap().remove("HW_C");
    let err = bad("missing-field", FIELDS, &collection(f), Some(&points));
    for want in ["pipes.geojson", "features[0]", "'P1'", "HW_C", "missing"] {
        assert!(err.contains(want), "{want}: {err}");
    }
    // The same in the points file.
    let mut p = vec![source(), point("HY", [100.0, 0.0], "HYD", Some(1.0), Some(1.0), None)];
    p[1]["properties"]["DEMAND_LPS"] = json!(true);
    let err = bad("points-wrong-type", FIELDS, &collection(good.clone()), Some(&collection(p)));
    for want in ["points.geojson", "features[1]", "'HY'", "DEMAND_LPS"] {
        assert!(err.contains(want), "{want}: {err}");
    }
    let mut p = vec![source(), point("HY", [100.0, 0.0], "XYZ", Some(1.0), Some(1.0), None)];
    p[1]["properties"]["TYPE"] = json!("XYZ");
    let err = bad("points-unknown-kind", FIELDS, &collection(good.clone()), Some(&collection(p)));
    assert!(err.contains("TYPE") && err.contains("XYZ"), "{err}");
    // A multi-part line, a null diameter, a line of one position, an unknown status.
    let mut f = good.clone();
    f[0]["geometry"] =
        json!({"type": "MultiLineString", "coordinates": [[[0.0, 0.0], [1.0, 0.0]], [[2.0, 0.0], [3.0, 0.0]]]});
    assert!(bad("multi-part", FIELDS, &collection(f), Some(&points)).contains("2 parts"));
    let mut f = good.clone();
    f[0]["properties"]["DIAM_MM"] = Value::Null;
    assert!(bad("null-diameter", FIELDS, &collection(f), Some(&points)).contains("DIAM_MM"));
    let mut f = good.clone();
    f[0]["geometry"]["coordinates"] = json!([[0.0, 0.0]]);
    assert!(bad("one-position", FIELDS, &collection(f), Some(&points)).contains("at least 2 positions"));
    let mut f = good.clone();
    f[0]["properties"]["STATUS"] = json!("shut");
    assert!(bad("status", FIELDS, &collection(f), Some(&points)).contains("STATUS"));
    // Not a FeatureCollection; two pipes with one id; no source.
    assert!(bad("not-collection", FIELDS, "{\"type\": \"Feature\"}", Some(&points)).contains("FeatureCollection"));
    let mut f = good.clone();
    f[1]["properties"]["ASSET_ID"] = json!("P1");
    assert!(bad("same-id", FIELDS, &collection(f), Some(&points)).contains("unique"));
    assert!(bad("no-source", FIELDS, &collection(good.clone()), None).contains("reservoir"));
    // Longitude/latitude input out of range names the fields file's [crs] table.
    let lonlat = FIELDS.replace("[crs]\nunits = \"m\"\n", "");
    assert!(bad("out-of-range", &lonlat, &collection(good.clone()), Some(&points)).contains("crs"));
    // The fields file itself.
    let err = bad("fields-typo", &FIELDS.replace("pipes.diameter", "pipes.diametr"), &collection(good), Some(&points));
    assert!(err.contains("fields.toml") && err.contains("diametr"), "{err}");
}

#[test]
fn an_output_never_overwrites_an_input() {
    let dir = scratch("overwrite");
    std::fs::write(dir.join("fields.toml"), FIELDS).unwrap();
    let pipes = collection(vec![pipe("P1", &[[0.0, 0.0], [100.0, 0.0]])]);
    std::fs::write(dir.join("pipes.geojson"), &pipes).unwrap();
    let out = Command::new(bin())
        .current_dir(&dir)
        .args(["import", "--pipes", "pipes.geojson", "--fields", "fields.toml", "--report", "pipes.geojson"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert_eq!(std::fs::read_to_string(dir.join("pipes.geojson")).unwrap(), pipes);
}

/// A small imported network, solved and simulated into GeoJSON and drawn.
fn imported(name: &str) -> (PathBuf, PathBuf) {
    let pipes = collection(vec![
        pipe("P1", &[[0.0, 0.0], [300.0, 400.0]]),
        pipe("P2", &[[300.0, 400.0], [300.0, 900.0]]),
        pipe("P3", &[[300.0, 900.0], [0.0, 900.0], [0.0, 0.0]]),
    ]);
    let points = collection(vec![
        source(),
        point("HY", [300.0, 900.0], "HYD", Some(20.0), Some(4.0), None),
        point("CU", [300.0, 400.0], "CUST", Some(15.0), Some(2.0), None),
    ]);
    let run = import(name, FIELDS, &pipes, Some(&points), &[]);
    assert_eq!(run.code(), Some(0), "{}", run.stderr());
    let model = run.dir.join("model.toml");
    (run.dir, model)
}

fn ringmain(dir: &Path, args: &[&str]) -> Output {
    Command::new(bin()).current_dir(dir).args(args).output().unwrap()
}

#[test]
fn solve_writes_geojson_with_ids_values_and_units() {
    let (dir, _) = imported("geojson-solve");
    let out = ringmain(&dir, &["solve", "model.toml", "--format", "geojson", "--output", "results.geojson"]);
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    let v: Value = serde_json::from_str(&std::fs::read_to_string(dir.join("results.geojson")).unwrap()).unwrap();
    assert_eq!(v["type"], "FeatureCollection");
    assert_eq!(v["coordinates"], "projected");
    assert_eq!(v["units"]["pressure"], "m");
    assert_eq!(v["units"]["flow"], "L/s");
    let features = v["features"].as_array().unwrap();
    assert_eq!(features.len(), 3 + 3);
    let hy = features.iter().find(|f| f["id"] == "HY").unwrap();
    assert_eq!(hy["geometry"], json!({"type": "Point", "coordinates": [300.0, 900.0]}));
    assert_eq!(hy["properties"]["id"], "HY");
    assert_eq!(hy["properties"]["demand"], 4.0);
    let p3 = features.iter().find(|f| f["id"] == "P3").unwrap();
    assert_eq!(p3["geometry"]["coordinates"], json!([[300.0, 900.0], [0.0, 900.0], [0.0, 0.0]]));
    // Mass balance at HY from the written flows (direction signs by from/to): 4 L/s.
    let flow_into = |id: &str| {
        let f = features.iter().find(|f| f["id"] == id).unwrap();
        let q = f["properties"]["flow"].as_f64().unwrap();
        if f["properties"]["to"] == "HY" {
            q
        } else {
            -q
        }
    };
    assert!((flow_into("P2") + flow_into("P3") - 4.0).abs() < 1e-6);
    // Criteria breakers are listed per element, and ringed on the map.
    let model = dir.join("model.toml");
    let text = std::fs::read_to_string(&model).unwrap() + "\n[criteria]\nmin_pressure = 1000.0\n";
    std::fs::write(&model, text).unwrap();
    let out = ringmain(&dir, &["solve", "model.toml", "--format", "geojson"]);
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    let hy = v["features"].as_array().unwrap().iter().find(|f| f["id"] == "HY").unwrap().clone();
    assert_eq!(hy["properties"]["breaks"], json!(["min_pressure"]));
    let out = ringmain(&dir, &["map", "model.toml", "--output", "breaks.svg"]);
    assert_eq!(out.status.code(), Some(0));
    let svg = std::fs::read_to_string(dir.join("breaks.svg")).unwrap();
    assert!(svg.contains("breaks: min_pressure"), "the junctions below 1000 m are marked");
}

#[test]
fn map_writes_a_self_contained_page_and_an_svg() {
    let (dir, _) = imported("map");
    let out = ringmain(&dir, &["map", "model.toml", "--quantity", "velocity", "--output", "map.html"]);
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    let html = std::fs::read_to_string(dir.join("map.html")).unwrap();
    assert!(html.starts_with("<!DOCTYPE html>"));
    assert!(!html.contains("http://") && !html.contains("https://") && !html.contains("src="), "nothing fetched");
    assert!(html.contains("|velocity| (m/s)") && html.contains("licensed engineer"));
    let out = ringmain(&dir, &["map", "model.toml", "--output", "map.svg"]);
    assert_eq!(out.status.code(), Some(0));
    let svg = std::fs::read_to_string(dir.join("map.svg")).unwrap();
    assert!(svg.contains("pressure (m)") && svg.contains("id=\"north\"") && svg.contains("id=\"scale\""));
    assert!(svg.contains("junction HY"), "tooltips name the elements");
    for (args, want) in [
        (vec!["map", "model.toml", "--quantity", "colour", "--output", "x.html"], "expected one of"),
        (vec!["map", "model.toml", "--output", "x.png"], ".html or .svg"),
        (vec!["map", "model.toml", "--at", "6h", "--output", "x.html"], "[simulation]"),
        (vec!["map", "model.toml", "--output", "model.toml"], ".html or .svg"),
    ] {
        let out = ringmain(&dir, &args);
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{args:?}: {err}");
        assert!(err.contains(want), "{args:?}: {err}");
    }
    assert!(!dir.join("x.html").exists());
}

#[test]
fn simulate_writes_the_worst_instant_or_one_instant_as_geojson() {
    let (dir, model) = imported("geojson-simulate");
    let text = std::fs::read_to_string(&model).unwrap();
    let text = text.replacen(
        "[[nodes]]",
        "[simulation]\nduration = \"2h\"\nhydraulic_step = \"1h\"\nreport_interval = \"1h\"\n\n[[nodes]]",
        1,
    );
    std::fs::write(&model, text).unwrap();
    let out = ringmain(&dir, &["simulate", "model.toml", "--format", "geojson", "--at", "1h"]);
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["results"], "at 1h");
    assert_eq!(v["features"].as_array().unwrap().len(), 6);
    assert!(v["features"][0]["properties"]["time"].is_string());
    let out = ringmain(&dir, &["simulate", "model.toml", "--format", "geojson"]);
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert!(v["results"].as_str().unwrap().starts_with("worst instant"));
    let out = ringmain(&dir, &["simulate", "model.toml", "--format", "geojson", "--at", "90min"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("not a reported instant"));
}
