//! Water quality over time against closed forms, balances and bad input.
//!
//! Check values: plug flow in a pipe (age = travel time L·A/Q; a first-order substance leaves at
//! c_in·exp(kτ)) and a completely mixed volume at constant flow (step response 1 − exp(−t/τ))
//! are closed-form solutions of the transport equations (any textbook of reactor engineering,
//! e.g. Levenspiel, "Chemical Reaction Engineering", 3rd ed. 1999, ch. 11 and 14, from memory);
//! source percentages summing to 100 and the mass balance closing are conservation laws.

use proptest::prelude::*;
use ringmain_core::quality::{self, ConstituentKind, QualityRun};
use ringmain_core::{read_str, Format, Model, Run, SimulateOptions};
use std::process::{Command, Output};

mod common;
use common::scratch;

fn read(text: &str) -> Model {
    read_str(text, Format::Toml, "test.toml").unwrap_or_else(|e| panic!("{e}"))
}

fn run(model: &Model) -> (Run, QualityRun) {
    quality::simulate(model, &SimulateOptions::default(), &mut |_| {}).unwrap_or_else(|e| panic!("{e}"))
}

fn series(model: &Model, q: &QualityRun, c: &str, node: &str) -> Vec<(f64, f64)> {
    let c = model.time.quality.index(c).unwrap();
    let i = model.node_index(node).unwrap();
    q.records.iter().map(|r| (r.time, r.node[c][i] * q.constituents[c].report_scale())).collect()
}

const PLUG: &str = r#"
[simulation]
duration = "24h"
hydraulic_step = "1h"
report_interval = "30min"
[[quality]]
id = "age"
kind = "age"
[[quality]]
id = "chlorine"
kind = "substance"
bulk_rate = -0.5
wall_rate = -0.15
diffusivity = 1.21e-9
[[nodes]]
id = "Works"
kind = "reservoir"
head = 60.0
quality = { chlorine = 1.0 }
[[nodes]]
id = "End"
elevation = 0.0
demand = 10.0
[[links]]
id = "Main"
from = "Works"
to = "End"
length = 2000.0
diameter = 300
roughness = 120
"#;

#[test]
fn plug_flow_age_is_the_travel_time_and_decay_is_exponential() {
    let model = read(PLUG);
    let (_, q) = run(&model);
    let (d, l, flow) = (0.3f64, 2000.0, 0.010);
    let tau = std::f64::consts::PI * d * d / 4.0 * l / flow;
    // Overall first-order rate by Rossman, Clark & Grayman (1994) with the Sherwood number of
    // Notter & Sleicher (1971) (Re above 2300 here), computed here from the published formulas
    // with the water's viscosity at 20 °C from IAPWS 2008 (1.0016e-6 m²/s, the value the
    // `iapws` package gives).
    let nu = 1.0016e-3 / 998.21;
    let re = 4.0 * flow / (std::f64::consts::PI * d * nu);
    assert!(re > 2300.0);
    let dm = 1.21e-9;
    let sh = 0.0149 * re.powf(0.88) * (nu / dm).cbrt();
    let kf = sh * dm / d;
    let kw = 0.15 / 86_400.0;
    let k = -0.5 / 86_400.0 - 4.0 / d * kw * kf / (kw + kf);
    let chlorine_out = (k * tau).exp();
    for ((t, age), (_, cl)) in series(&model, &q, "age", "End").into_iter().zip(series(&model, &q, "chlorine", "End")) {
        if t > tau + 600.0 {
            assert!((age - tau / 3600.0).abs() < 0.05, "t = {t}: age {age} h, travel time {} h", tau / 3600.0);
            assert!((cl - chlorine_out).abs() < 2e-3 * chlorine_out, "t = {t}: {cl} vs {chlorine_out}");
        }
        if t < tau - 600.0 {
            // The water that was in the pipe at the start (initial 0) is still arriving.
            assert!(cl < 1e-12, "t = {t}: {cl}");
        }
    }
    // A reservoir reports age 0 and its own source value.
    assert!(series(&model, &q, "age", "Works").iter().all(|&(_, a)| a == 0.0));
    assert!(series(&model, &q, "chlorine", "Works").iter().all(|&(_, c)| c == 1.0));
}

const TANK: &str = r#"
[simulation]
duration = "30h"
hydraulic_step = "1h"
report_interval = "1h"
transport_step = "1min"
[[quality]]
id = "tracer"
kind = "substance"
[[nodes]]
id = "Inlet"
elevation = 0.0
demand = -20.0
quality = { tracer = 1.0 }
[[nodes]]
id = "Basin"
kind = "tank"
elevation = 0.0
level = 5.0
diameter = 20.0
mixing = "complete"
[[nodes]]
id = "Outlet"
elevation = 0.0
demand = 20.0
[[links]]
id = "In"
from = "Inlet"
to = "Basin"
length = 1.0
diameter = 200
roughness = 120
[[links]]
id = "Out"
from = "Basin"
to = "Outlet"
length = 1.0
diameter = 200
roughness = 120
"#;

#[test]
fn completely_mixed_tank_at_constant_flow_follows_the_step_response() {
    let model = read(TANK);
    let (run, q) = run(&model);
    let volume = std::f64::consts::PI * 20.0 * 20.0 / 4.0 * 5.0;
    let tau = volume / 0.020;
    // Constant volume: in = out.
    assert!(run.tank_summary[0].end_level - 5.0 < 1e-9);
    for (t, c) in series(&model, &q, "tracer", "Basin") {
        let exact = 1.0 - (-t / tau).exp();
        // The two 1 m pipes hold 0.06 m³ of the 1571 m³: a delay of 1.6 s.
        assert!((c - exact).abs() < 1e-4, "t = {t}: {c} vs {exact}");
    }
    let b = &q.balance[0];
    assert!(b.relative_discrepancy().abs() < 1e-12, "{b:?}");
}

const TWO_SOURCES: &str = r#"
[simulation]
duration = "72h"
hydraulic_step = "1h"
report_interval = "6h"
[[quality]]
id = "from-north"
kind = "source"
source = "North"
[[quality]]
id = "from-hill"
kind = "source"
source = "Hill Tank"
[[quality]]
id = "age"
kind = "age"
[[nodes]]
id = "North"
kind = "reservoir"
head = 80.0
[[nodes]]
id = "Hill Tank"
kind = "tank"
elevation = 70.0
level = 6.0
diameter = 40.0
[[nodes]]
id = "A"
elevation = 20.0
demand = 8.0
[[nodes]]
id = "B"
elevation = 22.0
demand = 6.0
[[nodes]]
id = "C"
elevation = 18.0
demand = 5.0
[[nodes]]
id = "D"
elevation = 25.0
demand = 7.0
[[links]]
id = "P1"
from = "North"
to = "A"
length = 600.0
diameter = 250
roughness = 120
[[links]]
id = "P2"
from = "A"
to = "B"
length = 400.0
diameter = 200
roughness = 120
[[links]]
id = "P3"
from = "B"
to = "C"
length = 500.0
diameter = 150
roughness = 120
[[links]]
id = "P4"
from = "C"
to = "D"
length = 450.0
diameter = 150
roughness = 120
[[links]]
id = "P5"
from = "D"
to = "A"
length = 700.0
diameter = 150
roughness = 120
[[links]]
id = "P6"
from = "Hill Tank"
to = "C"
length = 800.0
diameter = 200
roughness = 120
"#;

#[test]
fn source_percentages_sum_to_100_once_the_start_water_is_gone() {
    let model = read(TWO_SOURCES);
    let (_, q) = run(&model);
    let last = q.records.last().unwrap();
    for (i, n) in model.nodes().iter().enumerate() {
        let sum = last.node[0][i] + last.node[1][i];
        assert!((sum - 100.0).abs() < 1e-6, "{}: {sum}", n.id);
    }
    for b in &q.balance {
        assert!(b.relative_discrepancy().abs() < 1e-12, "{b:?}");
    }
}

fn ringmain(args: &[&str], dir: &std::path::Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_ringmain")).args(args).current_dir(dir).output().expect("start ringmain")
}

/// Bad input of every new key: exit 2, the message names the file, the element and the key.
#[test]
fn bad_quality_input_exits_2_naming_element_and_key() {
    let dir = scratch("bad");
    let cases: &[(&str, &str, &str, &[&str])] = &[
        (
            "unknown constituent in a node's table",
            "id = \"Works\"\nkind = \"reservoir\"\nhead = 60.0\nquality = { chlorine = 1.0 }",
            "id = \"End\"\nelevation = 0.0\ndemand = 10.0\ninitial_quality = { chlorin = 0.4 }",
            &["node 'End'", "initial_quality", "chlorin", "did you mean 'chlorine'"],
        ),
        (
            "quality names an unknown constituent",
            "id = \"Works\"\nkind = \"reservoir\"\nhead = 60.0\nquality = { fluoride = 1.0 }",
            "id = \"End\"\nelevation = 0.0\ndemand = 10.0",
            &["node 'Works'", "key 'quality'", "fluoride"],
        ),
        (
            "booster for an age",
            "id = \"Works\"\nkind = \"reservoir\"\nhead = 60.0",
            "id = \"End\"\nelevation = 0.0\ndemand = 10.0\nbooster = { age = 1.0 }",
            &["node 'End'", "key 'booster'", "age"],
        ),
    ];
    let head = "[simulation]\nduration = \"6h\"\n[[quality]]\nid = \"age\"\nkind = \"age\"\n[[quality]]\nid = \"chlorine\"\nkind = \"substance\"\nbulk_rate = -0.5\n";
    let links =
        "[[links]]\nid = \"Main\"\nfrom = \"Works\"\nto = \"End\"\nlength = 100.0\ndiameter = 100\nroughness = 120\n";
    for (what, a, b, expect) in cases {
        let text = format!("{head}[[nodes]]\n{a}\n[[nodes]]\n{b}\n{links}");
        std::fs::write(dir.join("m.toml"), text).unwrap();
        let out = ringmain(&["simulate", "m.toml"], &dir);
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{what}: {err}");
        assert!(err.contains("m.toml"), "{what}: {err}");
        for e in *expect {
            assert!(err.contains(e), "{what}: '{e}' missing in {err}");
        }
    }
    let nodes = "[[nodes]]\nid = \"Works\"\nkind = \"reservoir\"\nhead = 60.0\n[[nodes]]\nid = \"End\"\nelevation = 0.0\ndemand = 10.0\n";
    let constituents: &[(&str, &str, &[&str])] = &[
        (
            "trace of a junction",
            "id = \"from-end\"\nkind = \"source\"\nsource = \"End\"",
            &["quality 'from-end'", "key 'source'", "junction"],
        ),
        (
            "trace of a missing node",
            "id = \"from-x\"\nkind = \"source\"\nsource = \"Wrks\"",
            &["quality 'from-x'", "key 'source'", "did you mean 'Works'"],
        ),
        (
            "negative diffusivity",
            "id = \"cl\"\nkind = \"substance\"\nwall_rate = -0.1\ndiffusivity = -1e-9",
            &["quality 'cl'", "key 'diffusivity'", "negative"],
        ),
        ("unknown kind", "id = \"x\"\nkind = \"colour\"", &["quality", "key 'kind'", "colour"]),
        ("key of another kind", "id = \"a\"\nkind = \"age\"\nbulk_rate = 1.0", &["quality 'a'", "key 'bulk_rate'"]),
    ];
    for (what, table, expect) in constituents {
        let text = format!("[simulation]\nduration = \"6h\"\n[[quality]]\n{table}\n{nodes}{links}");
        std::fs::write(dir.join("m.toml"), text).unwrap();
        let out = ringmain(&["simulate", "m.toml"], &dir);
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{what}: {err}");
        for e in *expect {
            assert!(err.contains(e), "{what}: '{e}' missing in {err}");
        }
    }
    for (what, tank, expect) in [
        ("unknown mixing", "mixing = \"stirred\"", "key 'mixing'"),
        ("two-zone without its share", "mixing = \"two-zone\"", "key 'mixing_fraction'"),
        ("share out of range", "mixing = \"two-zone\"\nmixing_fraction = 1.5", "key 'mixing_fraction'"),
    ] {
        let text = format!(
            "[simulation]\nduration = \"6h\"\n[[nodes]]\nid = \"T\"\nkind = \"tank\"\nelevation = 10.0\nlevel = 3.0\ndiameter = 10.0\n{tank}\n[[nodes]]\nid = \"End\"\nelevation = 0.0\ndemand = 1.0\n[[links]]\nid = \"Main\"\nfrom = \"T\"\nto = \"End\"\nlength = 100.0\ndiameter = 100\nroughness = 120\n"
        );
        std::fs::write(dir.join("m.toml"), text).unwrap();
        let out = ringmain(&["simulate", "m.toml"], &dir);
        let err = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{what}: {err}");
        assert!(err.contains("node 'T'") && err.contains(expect), "{what}: {err}");
    }
}

#[test]
fn criteria_over_the_run_fail_with_exit_1_in_simulate_and_check() {
    let dir = scratch("criteria");
    std::fs::write(dir.join("m.toml"), PLUG).unwrap();
    // The travel time is 3.93 h: a 3 h limit fails at 'End' once the spin-up is over.
    std::fs::write(dir.join("strict.toml"), "max_age = \"3 h\"\nafter = \"6h\"\n").unwrap();
    std::fs::write(
        dir.join("loose.toml"),
        "max_age = \"72 h\"\nmin_residual = { chlorine = \"0.5 mg/L\" }\nafter = \"6h\"\n",
    )
    .unwrap();
    let out = ringmain(&["simulate", "m.toml", "--criteria", "strict.toml"], &dir);
    let text = String::from_utf8_lossy(&out.stdout);
    assert_eq!(out.status.code(), Some(1), "{text}");
    assert!(text.contains("FAIL  max_age") && text.contains("node 'End'"), "{text}");
    let out = ringmain(&["simulate", "m.toml", "--criteria", "loose.toml", "--format", "json"], &dir);
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["criteria"].as_array().unwrap().len(), 2);
    assert!(v["series"][3]["nodes"][1]["quality"]["age"].as_f64().is_some());
    let out = ringmain(&["check", "m.toml", "--criteria", "strict.toml"], &dir);
    assert_eq!(out.status.code(), Some(1), "{}", String::from_utf8_lossy(&out.stdout));
    let out = ringmain(&["check", "m.toml", "--criteria", "loose.toml"], &dir);
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stdout));
    // A residual limit on a constituent the model lacks is invalid input.
    std::fs::write(dir.join("bad.toml"), "min_residual = { fluoride = 0.5 }\n").unwrap();
    let out = ringmain(&["simulate", "m.toml", "--criteria", "bad.toml"], &dir);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(err.contains("min_residual.fluoride"), "{err}");
}

/// A random connected network: a tree of pipes from one reservoir plus a few loop-closing
/// pipes, a tank on a spur, patterned demands, three constituents and one tank mixing model.
fn random_model(seed: u64, mixing: &str) -> String {
    let mut rng = ringmain_core::generate::Rng::new(seed);
    let n = 4 + rng.below(8);
    let mut t = String::from(
        "[simulation]\nduration = \"36h\"\nhydraulic_step = \"1h\"\nreport_interval = \"2h\"\ntransport_step = \"10min\"\n\
         [[patterns]]\nid = \"day\"\nstep = \"6h\"\nmultipliers = [0.6, 1.4, 1.1, 0.9]\n\
         [[quality]]\nid = \"age\"\nkind = \"age\"\n\
         [[quality]]\nid = \"cl\"\nkind = \"substance\"\nbulk_rate = -0.8\nwall_rate = -0.2\ninitial = 0.3\n\
         [[quality]]\nid = \"from-works\"\nkind = \"source\"\nsource = \"Works\"\n\
         [[nodes]]\nid = \"Works\"\nkind = \"reservoir\"\nhead = 90.0\nquality = { cl = 1.1 }\n",
    );
    t.push_str(&format!(
        "[[nodes]]\nid = \"T\"\nkind = \"tank\"\nelevation = 60.0\nlevel = 8.0\nmin_level = 1.0\nmax_level = 12.0\ndiameter = 12.0\nmixing = \"{mixing}\"\n{}",
        if mixing == "two-zone" { "mixing_fraction = 0.25\n" } else { "" }
    ));
    for i in 0..n {
        let booster = if i == n / 2 { "booster = { cl = 0.5 }\n" } else { "" };
        t.push_str(&format!(
            "[[nodes]]\nid = \"J{i}\"\nelevation = {:.1}\ndemand = {:.2}\npattern = \"day\"\n{booster}",
            rng.range(5.0, 30.0),
            rng.range(0.5, 6.0)
        ));
    }
    let mut k = 0;
    let mut pipe = |t: &mut String, a: String, b: String, rng: &mut ringmain_core::generate::Rng| {
        t.push_str(&format!(
            "[[links]]\nid = \"P{k}\"\nfrom = \"{a}\"\nto = \"{b}\"\nlength = {:.0}\ndiameter = {}\nroughness = 110\n",
            rng.range(100.0, 900.0),
            [100, 150, 200][rng.below(3)]
        ));
        k += 1;
    };
    pipe(&mut t, "Works".into(), "J0".into(), &mut rng);
    for i in 1..n {
        let parent = rng.below(i);
        pipe(&mut t, format!("J{parent}"), format!("J{i}"), &mut rng);
    }
    for _ in 0..2 {
        let (a, b) = (rng.below(n), rng.below(n));
        if a != b {
            pipe(&mut t, format!("J{a}"), format!("J{b}"), &mut rng);
        }
    }
    let at = rng.below(n);
    pipe(&mut t, "T".into(), format!("J{at}"), &mut rng);
    t
}

proptest! {
    #![proptest_config(common::property_config(16))]

    /// Stored at the start + in + boosted + reacted = out + stored at the end, for every
    /// constituent, on random networks with each tank mixing model.
    #[test]
    fn mass_balance_closes_on_random_networks(seed in 0u64..1_000_000, m in 0usize..4) {
        let mixing = ["complete", "two-zone", "plug-flow", "stacked"][m];
        let model = read(&random_model(seed, mixing));
        let (_, q) = run(&model);
        for (c, b) in q.balance.iter().enumerate() {
            let tol = match q.constituents[c].kind {
                ConstituentKind::Substance(_) => 1e-9,
                _ => 1e-10,
            };
            prop_assert!(b.relative_discrepancy().abs() < tol, "{} ({mixing}): {:?}", q.constituents[c].id, b);
        }
        // Source percentages stay within 0..100 and ages are never negative.
        for r in &q.records {
            for i in 0..model.nodes().len() {
                prop_assert!(r.node[0][i] >= -1e-9);
                prop_assert!((-1e-9..=100.0 + 1e-9).contains(&r.node[2][i]));
            }
        }
    }
}

/// A model with a tank (so that links carry water both ways over the day) for the writers.
fn streamed_model() -> String {
    random_model(7, "complete")
}

/// Per constituent, per element: a value.
type Values = Vec<Vec<f64>>;

/// The expected value of every constituent at every node and link at every reported time, in
/// reported units: the engine's own records (what the writers must hand on, unchanged).
fn engine_values(model: &Model) -> Vec<(f64, Values, Values)> {
    let (_, q) = run(model);
    q.records
        .iter()
        .map(|r| {
            let scaled = |v: &Vec<Vec<f64>>| {
                v.iter()
                    .zip(&q.constituents)
                    .map(|(x, c)| x.iter().map(|x| x * c.report_scale()).collect())
                    .collect::<Values>()
            };
            (r.time, scaled(&r.node), scaled(&r.link))
        })
        .collect()
}

fn close(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-6 * a.abs().max(b.abs()).max(1e-3)
}

/// Water-quality series streamed as the run goes (JSON, CSV, Parquet) carry every
/// constituent's value at every node and link at every reported time, equal to the engine's
/// records and to the series kept whole (`--plot`). The class: a writer of a quality run that
/// drops, shifts or rescales a value.
#[test]
fn quality_series_streamed_in_every_format_equal_the_engine() {
    let dir = scratch("streamed");
    let text = streamed_model();
    std::fs::write(dir.join("m.toml"), &text).unwrap();
    let model = read(&text);
    let ids: Vec<String> = model.time.quality.constituents.iter().map(|c| c.id.to_string()).collect();
    let expected = engine_values(&model);
    // JSON, streamed and kept.
    let mut docs = Vec::new();
    for extra in [&[][..], &["--plot", "charts"][..]] {
        let mut args = vec!["simulate", "m.toml", "--format", "json", "--output", "s.json", "--force"];
        args.extend_from_slice(extra);
        let out = ringmain(&args, &dir);
        assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
        let v: serde_json::Value = serde_json::from_slice(&std::fs::read(dir.join("s.json")).unwrap()).unwrap();
        let series = v["series"].as_array().unwrap().clone();
        assert_eq!(series.len(), expected.len());
        for (s, (t, node, link)) in series.iter().zip(&expected) {
            assert_eq!(s["time_s"].as_f64().unwrap(), *t);
            for (key, values) in [("nodes", node), ("links", link)] {
                for (i, item) in s[key].as_array().unwrap().iter().enumerate() {
                    for (c, id) in ids.iter().enumerate() {
                        let got = item["quality"][id].as_f64().unwrap_or(f64::NAN);
                        assert!(close(got, values[c][i]), "{key} {i} {id} at {t}: {got} vs {}", values[c][i]);
                    }
                }
            }
        }
        docs.push(series);
    }
    assert_eq!(docs[0], docs[1], "streamed and kept series differ");
    // CSV: one row per value, quantity = constituent id.
    let out = ringmain(&["simulate", "m.toml", "--format", "csv", "--output", "s.csv", "--force"], &dir);
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    let csv = std::fs::read_to_string(dir.join("s.csv")).unwrap();
    let mut seen = 0;
    for line in csv.lines().skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        let Some(c) = ids.iter().position(|id| id == f[4]) else { continue };
        let t = f[0].parse::<f64>().unwrap() * 3600.0;
        let (_, node, link) = expected.iter().find(|e| (e.0 - t).abs() < 1e-3).expect("a reported time");
        let (values, index) = match f[2] {
            "node" => (node, model.node_index(f[3]).unwrap()),
            _ => (link, model.link_index(f[3]).unwrap()),
        };
        let got: f64 = f[5].parse().unwrap();
        // Seven significant digits in CSV.
        assert!((got - values[c][index]).abs() <= 1e-6 * values[c][index].abs().max(1e-3), "{line}");
        seen += 1;
    }
    assert_eq!(seen, expected.len() * ids.len() * (model.nodes().len() + model.links().len()));
    // Parquet: a column `quality.<id>` in the node and link tables.
    let out = ringmain(&["simulate", "m.toml", "--format", "parquet", "--output", "pq", "--force"], &dir);
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    for (table, count) in [("nodes", model.nodes().len()), ("links", model.links().len())] {
        let file = std::fs::File::open(dir.join("pq").join(format!("{table}.parquet"))).unwrap();
        let reader =
            parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder::try_new(file).unwrap().build().unwrap();
        let mut row = 0;
        for batch in reader {
            let batch = batch.unwrap();
            let time = batch.column_by_name("time_s").unwrap();
            let time = time.as_any().downcast_ref::<arrow_array::Float64Array>().unwrap();
            for (c, id) in ids.iter().enumerate() {
                let col = batch.column_by_name(&format!("quality.{id}")).unwrap_or_else(|| panic!("{table} {id}"));
                let col = col.as_any().downcast_ref::<arrow_array::Float64Array>().unwrap();
                for r in 0..batch.num_rows() {
                    let (t, node, link) = &expected[(row + r) / count];
                    assert_eq!(time.value(r), *t);
                    let values = if table == "nodes" { node } else { link };
                    let want = values[c][(row + r) % count];
                    assert!(close(col.value(r), want), "{table} {id} row {}: {} vs {want}", row + r, col.value(r));
                }
            }
            row += batch.num_rows();
        }
        assert_eq!(row, expected.len() * count);
    }
}

/// A small looped network with map coordinates, two sources of different strength, age and
/// chlorine (an invented scenario).
const MAPPED: &str = r#"
[simulation]
duration = "24h"
hydraulic_step = "1h"
report_interval = "2h"
[[quality]]
id = "age"
kind = "age"
[[quality]]
id = "chlorine"
kind = "substance"
bulk_rate = -0.8
[[nodes]]
id = "North Works"
kind = "reservoir"
head = 60
x = 0
y = 1000
quality = { chlorine = 1.0 }
[[nodes]]
id = "South Works"
kind = "reservoir"
head = 58
x = 0
y = 0
quality = { chlorine = 0.6 }
[[nodes]]
id = "Mill Row"
elevation = 5
demand = 6
x = 800
y = 1000
[[nodes]]
id = "Ford End"
elevation = 5
demand = 4
x = 800
y = 0
[[nodes]]
id = "Far Green"
elevation = 8
demand = 5
x = 1600
y = 500
[[links]]
id = "N1"
from = "North Works"
to = "Mill Row"
length = 800
diameter = 200
roughness = 120
[[links]]
id = "S1"
from = "South Works"
to = "Ford End"
length = 800
diameter = 200
roughness = 120
[[links]]
id = "C1"
from = "Mill Row"
to = "Ford End"
length = 1000
diameter = 100
roughness = 110
[[links]]
id = "E1"
from = "Mill Row"
to = "Far Green"
length = 900
diameter = 150
roughness = 120
[[links]]
id = "E2"
from = "Ford End"
to = "Far Green"
length = 900
diameter = 100
roughness = 120
"#;

/// `map --quantity <constituent>` colours nodes by the constituent at the reported instant:
/// each node's tooltip carries the value the simulation reports there, the lowest value takes
/// the colour ramp's first colour and the highest its last; GeoJSON results carry the same
/// values. The class: a constituent not drawn, or drawn from another instant.
#[test]
fn map_and_geojson_colour_nodes_by_a_constituent_at_a_reported_instant() {
    let dir = scratch("map");
    std::fs::write(dir.join("m.toml"), MAPPED).unwrap();
    let out = ringmain(&["simulate", "m.toml", "--format", "json", "--output", "s.json"], &dir);
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&std::fs::read(dir.join("s.json")).unwrap()).unwrap();
    let at = v["series"].as_array().unwrap().iter().find(|s| s["time_s"] == 43_200.0).unwrap().clone();
    for id in ["age", "chlorine"] {
        let expected: Vec<(String, f64)> = at["nodes"]
            .as_array()
            .unwrap()
            .iter()
            .map(|n| (n["id"].as_str().unwrap().to_owned(), n["quality"][id].as_f64().unwrap()))
            .collect();
        let name = format!("{id}.svg");
        let out = ringmain(&["map", "m.toml", "--quantity", id, "--at", "12h", "--output", &name], &dir);
        assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
        let svg = std::fs::read_to_string(dir.join(&name)).unwrap();
        let stops: Vec<&str> = svg.split("stop-color=\"").skip(1).map(|s| &s[..7]).collect();
        let nodes = svg.split("<g id=\"nodes\"").nth(1).unwrap().split("</g>").next().unwrap();
        let mut seen = 0;
        for circle in nodes.split("<circle ").skip(1) {
            let fill = circle.split("fill=\"").nth(1).unwrap().split('"').next().unwrap();
            let title = circle.split("<title>").nth(1).unwrap().split("</title>").next().unwrap();
            let (node, want) = expected.iter().find(|(n, _)| title.contains(&format!(" {n}\n"))).unwrap();
            let line = title.lines().find(|l| l.starts_with(&format!("{id}: "))).unwrap();
            let got: f64 = line.split_whitespace().nth(1).unwrap().parse().unwrap();
            assert!((got - want).abs() <= 5e-3 * want.abs().max(0.1), "{node}: {got} vs {want}");
            let lo = expected.iter().map(|e| e.1).fold(f64::INFINITY, f64::min);
            let hi = expected.iter().map(|e| e.1).fold(f64::NEG_INFINITY, f64::max);
            if *want == lo {
                assert_eq!(fill, stops[0], "{id}: lowest at {node}");
            }
            if *want == hi {
                assert_eq!(fill, *stops.last().unwrap(), "{id}: highest at {node}");
            }
            seen += 1;
        }
        assert_eq!(seen, expected.len());
        // GeoJSON of the same instant: the same values as properties.
        let out = ringmain(
            &["simulate", "m.toml", "--format", "geojson", "--at", "12h", "--output", "m.geojson", "--force"],
            &dir,
        );
        assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
        let g: serde_json::Value = serde_json::from_slice(&std::fs::read(dir.join("m.geojson")).unwrap()).unwrap();
        for (node, want) in &expected {
            let f = g["features"].as_array().unwrap().iter().find(|f| f["id"] == node.as_str()).unwrap();
            let got = f["properties"][id].as_f64().unwrap();
            assert!((got - want).abs() <= 1e-9 * want.abs().max(1.0), "{node}: {got} vs {want}");
        }
    }
    // Without --at: each node's worst over the run, said in the title.
    let out = ringmain(&["map", "m.toml", "--quantity", "age", "--output", "worst.svg"], &dir);
    assert_eq!(out.status.code(), Some(0), "{}", String::from_utf8_lossy(&out.stderr));
    let svg = std::fs::read_to_string(dir.join("worst.svg")).unwrap();
    assert!(svg.contains("highest age"), "{}", &svg[..400]);
    // An unknown quantity names the constituents among the choices.
    let out = ringmain(&["map", "m.toml", "--quantity", "agee", "--output", "bad.svg"], &dir);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(err.contains("age") && err.contains("chlorine"), "{err}");
}
