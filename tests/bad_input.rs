//! The catalogue of bad input for `ringmain check`: every case ends with exit code 2, never a
//! panic, and a first line on standard error that names the file and, as far as the input has
//! them, the element and the key (line and column for syntax errors), followed by a snippet of
//! the offending line where one can be found.
//!
//! Each case is made from a valid base model by one change; `variant` checks that the change
//! happened, so that no case can pass by testing the base.

use std::path::{Path, PathBuf};
use std::process::Command;

const BASE: &str = r#"title = "bad-input base"

[[nodes]]
id = "R1"
kind = "reservoir"
head = 50.0

[[nodes]]
id = "J1"
elevation = 10.0
demand = 5.0

[[nodes]]
id = "J2"
elevation = 12.0
demand = 3.0

[[links]]
id = "P1"
from = "R1"
to = "J1"
length = 400.0
diameter = 150
roughness = 120

[[links]]
id = "P2"
from = "J1"
to = "J2"
length = 300.0
diameter = 100
roughness = 110
"#;

const BASE_JSON: &str = r#"{
  "nodes": [
    {"id": "R1", "kind": "reservoir", "head": 50.0},
    {"id": "J1", "elevation": 10.0, "demand": 5.0},
    {"id": "J2", "elevation": 12.0, "demand": 3.0}
  ],
  "links": [
    {"id": "P1", "from": "R1", "to": "J1", "length": 400.0, "diameter": 150, "roughness": 120},
    {"id": "P2", "from": "J1", "to": "J2", "length": 300.0, "diameter": 100, "roughness": 110}
  ]
}
"#;

fn dir() -> PathBuf {
    let d = std::env::temp_dir().join(format!("ringmain-bad-input-{}", std::process::id()));
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn variant(base: &str, from: &str, to: &str) -> String {
    assert!(base.contains(from), "the base has no {from:?}");
    let out = base.replacen(from, to, 1);
    assert_ne!(out, base);
    out
}

struct Failure {
    first_line: String,
    stderr: String,
}

/// Runs `ringmain check` on `bytes` saved as `name` (plus extra arguments); expects exit 2.
fn bad_with(name: &str, bytes: &[u8], extra: &[&str]) -> Failure {
    let path = dir().join(name);
    std::fs::write(&path, bytes).unwrap();
    bad_path(&path, extra)
}

fn bad_path(path: &Path, extra: &[&str]) -> Failure {
    let mut args = vec!["check", path.to_str().unwrap()];
    args.extend(extra);
    let out = Command::new(env!("CARGO_BIN_EXE_ringmain")).args(&args).output().unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
    assert!(!stderr.contains("panicked"), "{stderr}");
    assert_eq!(out.status.code(), Some(2), "{args:?}: {stderr}{}", String::from_utf8_lossy(&out.stdout));
    let first_line = stderr.lines().next().unwrap_or("").to_owned();
    assert!(first_line.starts_with("error: "), "{stderr}");
    Failure { first_line, stderr }
}

fn bad(name: &str, text: &str) -> Failure {
    bad_with(name, text.as_bytes(), &[])
}

/// The first line names the file, the element and the key.
fn names(f: &Failure, file: &str, element: &str, key: &str) {
    let want = format!("{file}: {element}: key '{key}': ");
    assert!(f.first_line.contains(&want), "expected {want:?} in {:?}", f.first_line);
}

/// The first line names the file with a line and column.
fn at(f: &Failure, file: &str, line: usize) {
    let want = format!("{file}:{line}:");
    assert!(f.first_line.contains(&want), "expected {want:?} in {:?}", f.first_line);
}

/// The snippet shows this line number in its gutter.
fn snippet_line(f: &Failure, line: usize) {
    assert!(f.stderr.lines().skip(1).any(|l| l.trim_start().starts_with(&format!("{line} │"))), "{}", f.stderr);
}

#[test]
fn huge_junk_is_a_syntax_error_at_the_start_and_is_not_echoed() {
    let mut junk = Vec::with_capacity(50 << 20);
    let mut x: u32 = 12345;
    while junk.len() < 50 << 20 {
        x = x.wrapping_mul(1_103_515_245).wrapping_add(12_345);
        junk.push(b"%$#@!?~^ \n"[(x >> 16) as usize % 10]);
    }
    let f = bad_with("junk.toml", &junk, &[]);
    at(&f, "junk.toml", 1);
    assert!(f.first_line.contains("TOML syntax error"), "{}", f.first_line);
    assert!(f.stderr.len() < 4096, "the junk must not be echoed: {} bytes", f.stderr.len());
}

#[test]
fn a_huge_valid_looking_file_with_one_error_at_the_end_names_it_and_its_line() {
    let n = 200_000;
    let mut text = String::with_capacity(n * 64);
    text.push_str("nodes = [\n  { id = \"R\", kind = \"reservoir\", head = 80.0 },\n");
    for i in 0..n - 1 {
        text.push_str(&format!("  {{ id = \"J-{i}\", elevation = {}.5, demand = 0.1 }},\n", i % 50));
    }
    text.push_str("  { id = \"J-last\", elevation = 1.0, demand = \"0.1 L/s\" },\n]\n");
    let f = bad("huge.toml", &text);
    names(&f, "huge.toml", "node 'J-last'", "demand");
    snippet_line(&f, n + 2);
}

#[test]
fn a_truncated_file_is_a_syntax_error_with_its_position() {
    let cut = &BASE[..BASE.find("to = \"J1\"").unwrap() + 8];
    let f = bad("truncated.toml", cut);
    at(&f, "truncated.toml", 21);
    assert!(f.first_line.contains("TOML syntax error"));
    let cut = &BASE_JSON[..BASE_JSON.find("\"J2\"").unwrap() + 3];
    let f = bad("truncated.json", cut);
    at(&f, "truncated.json", 5);
    assert!(f.first_line.contains("JSON syntax error"));
}

#[test]
fn a_binary_file_says_it_is_not_text_and_where() {
    let mut bytes = b"[[nodes]]\nid = \"R1\"\n".to_vec();
    bytes.extend([0x00, 0xff, 0xfe, 0x80, 0x13]);
    let f = bad_with("binary.toml", &bytes, &[]);
    at(&f, "binary.toml", 3);
    assert!(f.first_line.contains("not UTF-8 text"), "{}", f.first_line);
    // Valid UTF-8 full of control characters is a syntax error, shown without the raw bytes.
    let f = bad_with("controls.toml", b"\x01\x02\x03 = \x07\n", &[]);
    at(&f, "controls.toml", 1);
    assert!(!f.stderr.contains('\u{7}'), "{:?}", f.stderr);
}

#[test]
fn deep_nesting_is_refused_with_a_position() {
    let deep = format!("{{\"nodes\": {}{}}}", "[".repeat(50_000), "]".repeat(50_000));
    let f = bad("deep.json", &deep);
    assert!(f.first_line.contains("deep.json:1:"), "{}", f.first_line);
    assert!(f.first_line.contains("nesting deeper than 32 levels"), "{}", f.first_line);
    let deep = format!("title = {}{}\n", "[".repeat(50_000), "]".repeat(50_000));
    let f = bad("deep.toml", &deep);
    at(&f, "deep.toml", 1);
}

#[test]
fn duplicate_keys_and_ids_are_named() {
    let f = bad("dupkey.toml", &variant(BASE, "demand = 5.0\n", "demand = 5.0\ndemand = 6.0\n"));
    at(&f, "dupkey.toml", 12);
    assert!(f.first_line.to_lowercase().contains("duplicate"), "{}", f.first_line);
    snippet_line(&f, 12);
    let f = bad("dupkey.json", &variant(BASE_JSON, "\"demand\": 5.0", "\"demand\": 5.0, \"demand\": 6.0"));
    at(&f, "dupkey.json", 4);
    assert!(f.first_line.contains("duplicate key 'demand'"), "{}", f.first_line);
    let f = bad("dupid.toml", &variant(BASE, "id = \"J2\"", "id = \"J1\""));
    names(&f, "dupid.toml", "node 'J1'", "id");
}

#[test]
fn empty_ids_and_ids_with_control_characters_are_named_by_entry() {
    let f = bad("emptyid.toml", &variant(BASE, "id = \"J2\"", "id = \"\""));
    names(&f, "emptyid.toml", "nodes entry #3", "id");
    assert!(f.first_line.ends_with("must not be empty"), "{}", f.first_line);
    snippet_line(&f, 14);
    let f = bad("ctrlid.json", &variant(BASE_JSON, "\"id\": \"J2\"", "\"id\": \"J\\u00072\""));
    names(&f, "ctrlid.json", "nodes entry #3", "id");
    assert!(f.first_line.contains("control characters"), "{}", f.first_line);
    let f = bad("ctrllink.toml", &variant(BASE, "id = \"P2\"", "id = \"P\\u001b2\""));
    names(&f, "ctrllink.toml", "links entry #2", "id");
    assert!(!f.stderr.contains('\u{1b}'), "{:?}", f.stderr);
}

#[test]
fn numbers_that_overflow_are_refused() {
    let f = bad("overflow.json", &variant(BASE_JSON, "\"elevation\": 10.0", "\"elevation\": 1e400"));
    at(&f, "overflow.json", 4);
    assert!(f.first_line.contains("number out of range"), "{}", f.first_line);
    // An integer beyond 64 bits names its element and key (it used to name only the line).
    let f = bad("overflow.toml", &variant(BASE, "head = 50.0", "head = 99999999999999999999999"));
    names(&f, "overflow.toml", "node 'R1'", "head");
    assert!(f.first_line.contains("too large"), "{}", f.first_line);
    let f = bad("inf.toml", &variant(BASE, "elevation = 10.0", "elevation = inf"));
    names(&f, "inf.toml", "node 'J1'", "elevation");
    assert!(f.first_line.ends_with("must be finite, found inf"), "{}", f.first_line);
    snippet_line(&f, 10);
    let f = bad("nan.toml", &variant(BASE, "demand = 3.0", "demand = nan"));
    names(&f, "nan.toml", "node 'J2'", "demand");
}

#[test]
fn unit_names_that_are_almost_right_get_a_suggestion() {
    for (given, suggested) in [("l/s", "L/s"), ("M3/h", "m3/h")] {
        let text = variant(BASE, "\n[[nodes]]", &format!("\n[units]\nflow = \"{given}\"\n\n[[nodes]]"));
        let f = bad("units.toml", &text);
        names(&f, "units.toml", "[units]", "flow");
        assert!(f.first_line.contains(&format!("did you mean \"{suggested}\"")), "{}", f.first_line);
        snippet_line(&f, 4);
    }
    let f = bad("psi.toml", &variant(BASE, "\n[[nodes]]", "\n[units]\npressure = \"psi \"\n\n[[nodes]]"));
    names(&f, "psi.toml", "[units]", "pressure");
    assert!(f.first_line.contains("unknown unit \"psi \" (did you mean \"psi\"?)"), "{}", f.first_line);
}

#[test]
fn bad_criteria_are_named_in_the_file_they_come_from() {
    let d = dir();
    let model = d.join("model.toml");
    std::fs::write(&model, BASE).unwrap();
    let criteria = |name: &str, text: &str, key: &str, line: usize| {
        let path = d.join(name);
        std::fs::write(&path, text).unwrap();
        let f = bad_path(&model, &["--criteria", path.to_str().unwrap()]);
        names(&f, name, "[criteria]", key);
        snippet_line(&f, line);
        f
    };
    let f = criteria("c1.toml", "[criteria]\nmin_pressure = \"20 M\"\n", "min_pressure", 2);
    assert!(f.first_line.contains("did you mean \"m\""), "{}", f.first_line);
    let f = criteria("c2.toml", "max_velocity = \"2.5 m/S\"\n", "max_velocity", 1);
    assert!(f.first_line.contains("did you mean \"m/s\""), "{}", f.first_line);
    let f = criteria("c3.toml", "min_presure = 20\n", "min_presure", 1);
    assert!(f.first_line.contains("did you mean 'min_pressure'"), "{}", f.first_line);
    criteria(
        "c4.toml",
        "[[criteria.groups]]\nzone = \"a\"\nmin_pressure = 5\n[[criteria.groups]]\nzone = \"b\"\nmin_pressure = \"x\"\n",
        "groups[2].min_pressure",
        6,
    );
    let f = criteria("c5.toml", "[criteria.source_capacity]\nJ1 = \"5 L/s\"\n", "source_capacity.J1", 2);
    assert!(f.first_line.contains("only reservoirs and tanks supply"), "{}", f.first_line);
    criteria("c6.json", "{\"criteria\": {\n \"max_headloss\": \"3 m/kn\"}}", "max_headloss", 2);
    // A syntax error in the criteria file has its position.
    let path = d.join("c7.toml");
    std::fs::write(&path, "[criteria\nmin_pressure = 20\n").unwrap();
    let f = bad_path(&model, &["--criteria", path.to_str().unwrap()]);
    at(&f, "c7.toml", 1);
    // A bad [criteria] table inside the model names the model file.
    let f = bad("inmodel.toml", &variant(BASE, "\n[[nodes]]", "\n[criteria]\nmax_pressure = \"eighty\"\n\n[[nodes]]"));
    names(&f, "inmodel.toml", "[criteria]", "max_pressure");
    snippet_line(&f, 4);
    // It is read with the model, so every command that reads the model refuses it (here `solve`),
    // and so is a source that names a junction.
    for (name, table, key) in [
        ("insolve.toml", "[criteria]\nmax_pressure = \"eighty\"\n", "max_pressure"),
        ("junction-source.toml", "[criteria.source_capacity]\nJ1 = \"5 L/s\"\n", "source_capacity.J1"),
    ] {
        let path = d.join(name);
        std::fs::write(&path, variant(BASE, "\n[[nodes]]", &format!("\n{table}\n[[nodes]]"))).unwrap();
        let out =
            Command::new(env!("CARGO_BIN_EXE_ringmain")).args(["solve", path.to_str().unwrap()]).output().unwrap();
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{stderr}");
        assert!(!stderr.contains("panicked"), "{stderr}");
        let want = format!("{name}: [criteria]: key '{key}': ");
        assert!(stderr.lines().next().unwrap_or("").contains(&want), "expected {want:?} in {stderr}");
    }
}

#[test]
fn bad_what_if_arguments_are_refused() {
    let d = dir();
    let model = d.join("whatif.toml");
    std::fs::write(&model, BASE).unwrap();
    let f = bad_path(&model, &["--close", "P3"]);
    assert!(f.first_line.contains("whatif.toml: link 'P3': cannot be closed"), "{}", f.first_line);
    assert!(f.first_line.contains("did you mean 'P1'") || f.first_line.contains("did you mean 'P2'"));
    let f = bad_path(&model, &["--demand-factor=-1"]);
    assert!(f.first_line.contains("--demand-factor"), "{}", f.first_line);
    let f = bad_path(&model, &["--demand-factor", "NaN"]);
    assert!(f.first_line.contains("--demand-factor"), "{}", f.first_line);
}

#[test]
fn empty_missing_and_shapeless_files() {
    let f = bad("empty.toml", "  \n");
    assert!(f.first_line.contains("empty.toml: the file is empty"), "{}", f.first_line);
    let f = bad_path(&dir().join("does-not-exist.toml"), &[]);
    assert!(f.first_line.contains("does-not-exist.toml: cannot read the file"), "{}", f.first_line);
    let f = bad("array.json", "[1, 2]");
    assert!(f.first_line.contains("array.json: the model must be a table"), "{}", f.first_line);
    let f = bad("nodes.toml", "nodes = 3\n");
    assert!(f.first_line.contains("key 'nodes'"), "{}", f.first_line);
}

#[test]
fn semantic_errors_in_json_point_at_the_key() {
    let f = bad("missing.json", &variant(BASE_JSON, "\"to\": \"J2\"", "\"to\": \"J9\""));
    names(&f, "missing.json", "link 'P2'", "to");
    assert!(f.first_line.contains("which is not defined"), "{}", f.first_line);
    snippet_line(&f, 9);
    let f = bad("selfloop.toml", &variant(BASE, "to = \"J2\"", "to = \"J1\""));
    names(&f, "selfloop.toml", "link 'P2'", "to");
    assert!(f.first_line.contains("links node 'J1' to itself"), "{}", f.first_line);
    snippet_line(&f, 29);
    let f = bad("kind.toml", &variant(BASE, "kind = \"reservoir\"", "kind = \"reservior\""));
    names(&f, "kind.toml", "node 'R1'", "kind");
    assert!(f.first_line.contains("did you mean \"reservoir\""), "{}", f.first_line);
    snippet_line(&f, 5);
}

// --- Extreme values and clear messages ------------------------------------------------------

/// Every numeric key of the base model's junctions, reservoir and pipes, with its line.
const NUMERIC_KEYS: [(&str, &str, &str, &str); 7] = [
    ("head = 50.0", "head", "node 'R1'", "head"),
    ("elevation = 10.0", "elevation", "node 'J1'", "elevation"),
    ("demand = 5.0", "demand", "node 'J1'", "demand"),
    ("length = 400.0", "length", "link 'P1'", "length"),
    ("diameter = 150", "diameter", "link 'P1'", "diameter"),
    ("roughness = 120", "roughness", "link 'P1'", "roughness"),
    ("length = 300.0", "length", "link 'P2'", "length"),
];

/// Fault class: extreme values ended in "heads or flows became NaN" or "a pivot is not
/// positive" naming no element, printed hundreds of digits, said "found inf" for a value that
/// overflowed on conversion and "found 0" for 5e-324 mm. Every numeric key at the largest and
/// the smallest doubles is refused naming the element and key, saying too large or too small,
/// with the value as written in a short form.
#[test]
fn extreme_values_in_every_numeric_key_are_refused_naming_element_and_key() {
    for (line, key, element, _) in NUMERIC_KEYS {
        for (value, word) in
            [("1e308", "too large"), ("-1e308", "too large"), ("5e-324", "too small"), ("1e-200", "too small")]
        {
            let edited = variant(BASE, line, &format!("{key} = {value}"));
            let f = bad("extreme.toml", &edited);
            names(&f, "extreme.toml", element, key);
            assert!(f.first_line.contains(word), "{key} = {value}: {}", f.first_line);
            assert!(f.first_line.contains(value.trim_start_matches('-')), "{key} = {value}: {}", f.first_line);
            assert!(f.first_line.len() < 400, "{}", f.first_line);
        }
    }
    // An integer beyond 64 bits names its element and key.
    let f = bad("bigint.toml", &variant(BASE, "demand = 5.0", "demand = 99999999999999999999999999"));
    names(&f, "bigint.toml", "node 'J1'", "demand");
    assert!(f.first_line.contains("too large"), "{}", f.first_line);
    // A pump's power that overflows on conversion (kW to W) says too large, not "inf".
    let pump = variant(
        BASE,
        "\n[[links]]\nid = \"P2\"",
        "\n[[nodes]]\nid = \"S\"\nkind = \"reservoir\"\nhead = 5.0\n\n[[links]]\nid = \"PU\"\nkind = \"pump\"\nfrom = \"S\"\nto = \"J2\"\npower = 1e308\n\n[[links]]\nid = \"P2\"",
    );
    let f = bad("power.toml", &pump);
    names(&f, "power.toml", "link 'PU'", "power");
    assert!(f.first_line.contains("too large") && !f.first_line.contains("inf"), "{}", f.first_line);
}

/// Fault: a duplicate id named one definition only. Both places are named, for nodes and links.
#[test]
fn duplicate_id_names_both_definitions() {
    let f = bad("dup-node.toml", &variant(BASE, "id = \"J2\"", "id = \"J1\""));
    names(&f, "dup-node.toml", "node 'J1'", "id");
    assert!(f.first_line.contains("nodes entry #2") && f.first_line.contains("nodes entry #3"), "{}", f.first_line);
    let f = bad("dup-link.toml", &variant(BASE, "id = \"P2\"", "id = \"P1\""));
    names(&f, "dup-link.toml", "link 'P1'", "id");
    assert!(f.first_line.contains("links entry #1") && f.first_line.contains("links entry #2"), "{}", f.first_line);
}

/// Fault: ids with a right-to-left override or another invisible character were accepted (two
/// ids that look the same on screen would be different ids). Every such class of character is
/// refused, in node and link ids.
#[test]
fn ids_with_invisible_or_direction_changing_characters_are_refused() {
    for c in ['\u{202E}', '\u{2066}', '\u{200B}', '\u{200D}', '\u{2060}', '\u{FEFF}', '\u{00AD}', '\u{061C}'] {
        let node = variant(BASE, "id = \"J2\"", &format!("id = \"J{c}2\""));
        let node = variant(&node, "to = \"J2\"", &format!("to = \"J{c}2\""));
        let f = bad("invisible.toml", &node);
        assert!(f.first_line.contains("key 'id'") && f.first_line.contains("invisible"), "{c:?}: {}", f.first_line);
        assert!(f.first_line.contains(&format!("U+{:04X}", c as u32)), "{}", f.first_line);
        let link = variant(BASE, "id = \"P2\"", &format!("id = \"P{c}2\""));
        let f = bad("invisible.toml", &link);
        assert!(f.first_line.contains("key 'id'"), "{c:?}: {}", f.first_line);
    }
}

/// Fault: a JSON file with a byte-order mark was a syntax error while TOML read it.
#[test]
fn a_byte_order_mark_is_read_in_json_as_in_toml() {
    for (name, text) in [("bom.json", BASE_JSON), ("bom.toml", BASE)] {
        let path = dir().join(name);
        let mut bytes = b"\xef\xbb\xbf".to_vec();
        bytes.extend_from_slice(text.as_bytes());
        std::fs::write(&path, bytes).unwrap();
        let out = Command::new(env!("CARGO_BIN_EXE_ringmain"))
            .args(["solve", path.to_str().unwrap(), "--format", "json"])
            .output()
            .unwrap();
        assert!(out.status.success(), "{name}: {}", String::from_utf8_lossy(&out.stderr));
    }
}

/// Fault: `--demand-factor -1` was taken for an option, and a Reynolds number of 1e300 printed a
/// result with hundreds of digits (and 5e-324 a null) with exit 0. Negative, zero and absurd
/// values are refused with exit 2 saying what is allowed.
#[test]
fn negative_demand_factor_and_absurd_reynolds_number_exit_2() {
    let d = dir();
    let model = d.join("factor.toml");
    std::fs::write(&model, BASE).unwrap();
    for factor in ["-1", "0", "-0.5", "1e308"] {
        let f = bad_path(&model, &["--demand-factor", factor]);
        assert!(f.first_line.contains("--demand-factor") && f.first_line.contains("positive"), "{}", f.first_line);
    }
    for re in ["1e300", "5e-324", "0", "-5", "inf", "NaN"] {
        let out = Command::new(env!("CARGO_BIN_EXE_ringmain"))
            .args(["friction-factor", "--reynolds", re, "--relative-roughness", "0.001", "--format", "json"])
            .output()
            .unwrap();
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "Re = {re}: {stderr}");
        assert!(stderr.contains("--reynolds") && stderr.len() < 300, "{stderr}");
        assert!(out.stdout.is_empty());
    }
}

/// Values compared in a message are in the model's own units, as the file wrote them (a tank in
/// feet said "1.524 < 3.048 m" before; `pressure_input.rs` checks the pressures' messages).
#[test]
fn compared_values_are_stated_in_the_models_units() {
    let tank = |level: &str| {
        format!(
            "title = \"tank in feet\"\n[units]\nlength = \"ft\"\nflow = \"gpm\"\n\n[[nodes]]\nid = \"T1\"\nkind = \"tank\"\n\
             elevation = 100.0\n{level}\nmin_level = 10.0\nmax_level = 30.0\ndiameter = 40.0\n\n[[nodes]]\nid = \"J1\"\n\
             elevation = 50.0\ndemand = 10.0\n\n[[links]]\nid = \"P1\"\nfrom = \"T1\"\nto = \"J1\"\nlength = 500.0\n\
             diameter = 8\nroughness = 120\n"
        )
    };
    let low = bad("tank-low.toml", &tank("level = 5.0"));
    names(&low, "tank-low.toml", "node 'T1'", "level");
    assert!(low.first_line.contains("is below min_level (5 < 10 ft)"), "{}", low.first_line);
    let high = bad("tank-high.toml", &tank("level = 40.0"));
    names(&high, "tank-high.toml", "node 'T1'", "level");
    assert!(high.first_line.contains("is above max_level (40 > 30 ft)"), "{}", high.first_line);
}
