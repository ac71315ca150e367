//! Importing GIS data: 100,000 pipes of a generated street network written as GeoJSON (projected
//! metres), with its reservoirs and junctions as points, read, snapped and built into a model by
//! `ringmain_core::import::import` (GeoJSON parsing included). Target: under 2 s.
//!
//! `cargo bench --bench import`; figures in benches/RESULTS.md ("Import from GIS").
//! The network is invented (`ringmain_core::generate`, seed 1); every pipe gets an interior
//! vertex at its midpoint, nudged sideways, so that paths are built too.

use criterion::{criterion_group, criterion_main, Criterion};
use ringmain_core::generate::{generate, NetworkSpec};
use ringmain_core::import::{import, read_fields, ImportOptions, Source};
use ringmain_core::NodeKind;
use serde_json::json;
use std::time::Duration;

const FIELDS: &str = r#"
pipes.id = "ASSET_ID"
pipes.diameter = "DIAM_MM"
pipes.roughness = "HW_C"
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
"J" = "junction"
"R" = "reservoir"
"#;

/// GeoJSON pipes and points of a generated network with at least `pipes` pipes.
pub fn geojson_of_network(pipes: usize) -> (String, String) {
    // Generated networks have about 1.2 links per junction.
    let mut junctions = pipes * 5 / 6;
    let model = loop {
        let m = generate(&NetworkSpec::new(junctions, 1)).expect("generated network");
        if m.links().len() >= pipes {
            break m;
        }
        junctions += junctions / 20 + 1;
    };
    let xy = |i: usize| model.nodes()[i].coordinates.expect("generated nodes have coordinates");
    let lines: Vec<_> = model
        .links()
        .iter()
        .filter_map(|l| {
            let p = l.as_pipe()?;
            let (a, b) = (xy(l.from), xy(l.to));
            let mid = ((a.0 + b.0) / 2.0 + 0.3, (a.1 + b.1) / 2.0 - 0.2);
            Some(json!({"type": "Feature", "properties": {"ASSET_ID": l.id.as_str(), "DIAM_MM": p.diameter * 1e3,
                "HW_C": p.roughness, "LEN_M": null},
                "geometry": {"type": "LineString", "coordinates": [[a.0, a.1], [mid.0, mid.1], [b.0, b.1]]}}))
        })
        .collect();
    let points: Vec<_> = model
        .nodes()
        .iter()
        .map(|n| {
            let (kind, head) = match &n.kind {
                NodeKind::Reservoir { head } => ("R", Some(*head)),
                _ => ("J", None),
            };
            let (x, y) = n.coordinates.expect("coordinates");
            json!({"type": "Feature", "properties": {"NODE_ID": n.id.as_str(), "TYPE": kind, "Z_M": n.elevation,
                "DEMAND_LPS": n.demand() * 1e3, "HEAD_M": head},
                "geometry": {"type": "Point", "coordinates": [x, y]}})
        })
        .collect();
    (
        json!({"type": "FeatureCollection", "features": lines}).to_string(),
        json!({"type": "FeatureCollection", "features": points}).to_string(),
    )
}

fn bench_import(c: &mut Criterion) {
    let (pipes, points) = geojson_of_network(100_000);
    let fields = read_fields(FIELDS, "fields.toml").expect("fields");
    let options = ImportOptions::default();
    let run = || {
        import(
            Source { bytes: pipes.as_bytes(), file: "pipes.geojson" },
            Some(Source { bytes: points.as_bytes(), file: "points.geojson" }),
            &fields,
            &options,
        )
        .expect("import")
    };
    let (model, report) = run();
    eprintln!(
        "import bench: {} pipe features ({:.1} MB), {} point features ({:.1} MB) -> {} nodes, {} links; {} merged, {} near misses",
        report.counts.pipe_features,
        pipes.len() as f64 / 1e6,
        report.counts.point_features,
        points.len() as f64 / 1e6,
        model.nodes().len(),
        model.links().len(),
        report.counts.nodes_merged,
        report.counts.near_misses
    );
    let mut group = c.benchmark_group("import");
    group.sample_size(10).measurement_time(Duration::from_secs(20));
    group.bench_function("100000-pipes", |b| b.iter(run));
    group.finish();
}

criterion_group!(benches, bench_import);
criterion_main!(benches);
