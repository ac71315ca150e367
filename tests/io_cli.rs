//! Results as files: streamed simulation series (JSON, CSV, Parquet) equal to the series a run
//! keeps, and on standard output equal to the files (a closed pipe ending the run quietly),
//! spreadsheet-safe CSV tables of every kind, signed pump head, the work bound of long
//! simulations, the input size limit, messages printed once with their snippet, and for every
//! writer of files: the same bytes at every run, `--durable` changing none, and a write cut
//! short leaving every file as it was or whole.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

mod common;
use common::scratch;

fn example(name: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("examples").join(name)
}

fn ringmain<S: AsRef<std::ffi::OsStr>>(args: &[S]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_ringmain")).args(args).output().expect("start ringmain")
}

fn text(bytes: &[u8]) -> String {
    String::from_utf8_lossy(bytes).into_owned()
}

fn read_model(path: &Path) -> ringmain_core::Model {
    let text = std::fs::read_to_string(path).unwrap();
    ringmain_core::read_str(&text, ringmain_core::Format::Toml, "model").unwrap()
}

/// Parses a CSV line (RFC 4180 quoting) into its cells.
fn cells(line: &str) -> Vec<String> {
    let mut out = vec![String::new()];
    let mut quoted = false;
    let mut chars = line.chars().peekable();
    while let Some(c) = chars.next() {
        match (c, quoted) {
            ('"', true) if chars.peek() == Some(&'"') => {
                chars.next();
                out.last_mut().unwrap().push('"');
            }
            ('"', _) => quoted = !quoted,
            (',', false) => out.push(String::new()),
            (c, _) => out.last_mut().unwrap().push(c),
        }
    }
    out
}

/// The streamed JSON series is the series the engine keeps, state for state and value for value
/// (the writer prints shortest round-trip numbers; serde_json's default reader may round the
/// last bit differently, hence a tolerance of a few units in the last place).
#[test]
fn streamed_json_series_equals_the_kept_series() {
    let path = example("hillside-day.toml");
    let model = read_model(&path);
    let run = ringmain_core::simulate(&model).unwrap();
    let out = ringmain(&["simulate".as_ref(), path.as_os_str(), "--format".as_ref(), "json".as_ref()]);
    assert!(out.status.success(), "{}", text(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let series = v["series"].as_array().unwrap();
    assert_eq!(series.len(), run.series.len());
    let length = model.units.length;
    for (s, kept) in series.iter().zip(&run.series) {
        assert_eq!(s["time_s"].as_f64().unwrap(), kept.time);
        for (i, n) in s["nodes"].as_array().unwrap().iter().enumerate() {
            let head = length.from_si(kept.head[i]);
            match n["head"].as_f64() {
                Some(h) => assert!(close(h, head), "node {i} at {}: {h} {head}", kept.time),
                None => assert!(!head.is_finite(), "node {i} at {}", kept.time),
            }
        }
        for (k, l) in s["links"].as_array().unwrap().iter().enumerate() {
            assert!(close(l["flow"].as_f64().unwrap(), model.units.flow.from_si(kept.flow[k])));
            assert_eq!(l["status"], kept.status[k]);
        }
    }
    assert_eq!(v["summary"]["statistics"]["hydraulic_solves"], run.statistics.solves);
    assert_eq!(v["events"].as_array().unwrap().len(), run.events.len());
}

/// Equal to within four units in the last place.
fn close(a: f64, b: f64) -> bool {
    a == b || (a - b).abs() <= 4.0 * f64::EPSILON * a.abs().max(b.abs())
}

/// `simulate --output FILE` prints the summary and a line naming the file written, in every
/// series format; the file is complete and no temporary file is left beside it.
#[test]
fn simulate_output_prints_summary_and_the_file_written() {
    let dir = scratch("summary");
    for (format, name) in [("csv", "series.csv"), ("json", "series.json")] {
        let file = dir.join(name);
        let out = ringmain(&[
            "simulate".as_ref(),
            example("hillside-day.toml").as_os_str(),
            "--format".as_ref(),
            format.as_ref(),
            "--output".as_ref(),
            file.as_os_str(),
        ]);
        assert!(out.status.success(), "{}", text(&out.stderr));
        let stdout = text(&out.stdout);
        assert!(stdout.contains("Volume balance"), "{format}: no summary:\n{stdout}");
        assert!(stdout.contains(&format!("wrote {}", file.display())), "{format}: no line naming the file:\n{stdout}");
        assert!(stdout.contains("licensed engineer"), "{stdout}");
        let written = std::fs::read_to_string(&file).unwrap();
        if format == "json" {
            let v: serde_json::Value = serde_json::from_str(&written).unwrap();
            assert_eq!(v["series"].as_array().unwrap().len(), 193);
        } else {
            // 48 h every 15 min, both ends: 193 reported times, each ending with the price row.
            assert_eq!(written.lines().filter(|l| l.contains(",energy,,price,")).count(), 193);
        }
    }
    let left: Vec<_> = std::fs::read_dir(&dir).unwrap().map(|e| e.unwrap().file_name()).collect();
    assert_eq!(left.len(), 2, "only the two outputs may be left: {left:?}");
    let _ = std::fs::remove_dir_all(&dir);
}

/// Output over input (by identity, not by name): refused before anything is written.
#[test]
fn simulate_output_over_its_model_is_refused() {
    let dir = scratch("over");
    let model = dir.join("m.toml");
    std::fs::copy(example("hillside-day.toml"), &model).unwrap();
    let before = std::fs::read(&model).unwrap();
    let alias = dir.join(".").join("m.toml");
    let out = ringmain(&[
        "simulate".as_ref(),
        model.as_os_str(),
        "--format".as_ref(),
        "csv".as_ref(),
        "--output".as_ref(),
        alias.as_os_str(),
    ]);
    assert_eq!(out.status.code(), Some(2), "{}", text(&out.stderr));
    assert_eq!(std::fs::read(&model).unwrap(), before);
    let _ = std::fs::remove_dir_all(&dir);
}

/// A run far beyond the work bound (a year at a one-second step) is refused with exit 2 and a
/// message naming `--force`, before any work; within the bound it runs as always.
#[test]
fn simulate_unbounded_work_needs_force() {
    let dir = scratch("work");
    let text_model = std::fs::read_to_string(example("hillside-day.toml")).unwrap();
    let start = text_model.find("[simulation]").expect("the demo has a [simulation] table");
    let end = text_model[start..].find("\n[").map_or(text_model.len(), |e| start + e + 1);
    let long = format!(
        "{}[simulation]\nduration = \"3650 d\"\nhydraulic_step = \"1 s\"\nreport_interval = \"1 d\"\n\n{}",
        &text_model[..start],
        &text_model[end..]
    );
    let model = dir.join("long.toml");
    std::fs::write(&model, long).unwrap();
    let clock = std::time::Instant::now();
    let out = ringmain(&["simulate".as_ref(), model.as_os_str()]);
    assert_eq!(out.status.code(), Some(2), "{}", text(&out.stderr));
    let err = text(&out.stderr);
    assert!(err.contains("--force") && err.contains("long.toml") && err.contains("[simulation]"), "{err}");
    // Refused up front, not after running (a generous bound: the run would take hours).
    assert!(clock.elapsed().as_secs() < 60);
    let _ = std::fs::remove_dir_all(&dir);
}

/// The CSV of `solve`: every table (nodes, links, pumps, valves, summary) one value a row, and
/// one file per table into a directory; numbers at seven significant digits.
#[test]
fn solve_csv_has_every_table_at_sensible_precision() {
    let path = example("hillside.toml");
    let out = ringmain(&["solve".as_ref(), path.as_os_str(), "--format".as_ref(), "csv".as_ref()]);
    assert!(out.status.success(), "{}", text(&out.stderr));
    let csv = text(&out.stdout);
    let mut lines = csv.lines();
    assert_eq!(lines.next(), Some("table,id,quantity,value,unit"));
    let rows: Vec<Vec<String>> = lines.map(cells).collect();
    for table in ["nodes", "links", "pumps", "valves", "summary"] {
        assert!(rows.iter().any(|r| r[0] == table), "no {table} rows");
    }
    for r in &rows {
        assert_eq!(r.len(), 5, "{r:?}");
        if let Ok(v) = r[3].parse::<f64>() {
            let digits = r[3].trim_start_matches('-').replace('.', "");
            let significant = digits.split('e').next().unwrap().trim_start_matches('0').len();
            assert!(significant <= 7, "{r:?} has {significant} digits; v = {v}");
        }
    }
    // The pump's head gain is a gain, and its loss in the links table is negative.
    let pump = rows.iter().find(|r| r[0] == "pumps" && r[2] == "head_gain").expect("a pump");
    let gain: f64 = pump[3].parse().unwrap();
    let loss: f64 =
        rows.iter().find(|r| r[0] == "links" && r[1] == pump[1] && r[2] == "headloss").unwrap()[3].parse().unwrap();
    assert!(gain > 0.0 && (loss + gain).abs() <= 1e-6 * gain, "gain {gain}, loss {loss}");

    let dir = scratch("tables");
    let tables = dir.join("results");
    let out = ringmain(&[
        "solve".as_ref(),
        path.as_os_str(),
        "--format".as_ref(),
        "csv".as_ref(),
        "--output".as_ref(),
        tables.as_os_str(),
    ]);
    assert!(out.status.success(), "{}", text(&out.stderr));
    let nodes = std::fs::read_to_string(tables.join("nodes.csv")).unwrap();
    let header = nodes.lines().next().unwrap();
    assert!(header.starts_with("id,kind,elevation_m,head_m,pressure_m,demand_"), "{header}");
    let model = read_model(&path);
    assert_eq!(nodes.lines().count(), model.nodes().len() + 1);
    for name in ["links", "pumps", "valves", "summary"] {
        assert!(tables.join(format!("{name}.csv")).is_file(), "{name}.csv");
    }
    let _ = std::fs::remove_dir_all(&dir);
}

/// Formula injection through ids: every id that begins with `=`, `+`, `-` or `@` is written
/// neutralised (a leading apostrophe) in every CSV the program writes, solve and simulate.
#[test]
fn csv_formula_injection_through_ids_is_neutralised() {
    let dir = scratch("inject");
    let model = "title = \"ids a spreadsheet would evaluate\"\n\
        [simulation]\nduration = \"2 h\"\nhydraulic_step = \"1 h\"\nreport_interval = \"1 h\"\n\n\
        [[nodes]]\nid = \"=HYPERLINK(1)\"\nkind = \"reservoir\"\nhead = 50\n\n\
        [[nodes]]\nid = \"+J1\"\nelevation = 10\ndemand = 5\n\n\
        [[nodes]]\nid = \"-J2\"\nelevation = 12\ndemand = 3\n\n\
        [[nodes]]\nid = \"@J3\"\nelevation = 11\ndemand = 2\n\n\
        [[links]]\nid = \"=P1\"\nfrom = \"=HYPERLINK(1)\"\nto = \"+J1\"\nlength = 100\ndiameter = 150\nroughness = 120\n\n\
        [[links]]\nid = \"@P2\"\nfrom = \"+J1\"\nto = \"-J2\"\nlength = 100\ndiameter = 100\nroughness = 120\n\n\
        [[links]]\nid = \"-P3\"\nfrom = \"+J1\"\nto = \"@J3\"\nlength = 100\ndiameter = 100\nroughness = 120\n";
    let path = dir.join("inject.toml");
    std::fs::write(&path, model).unwrap();
    let solved = ringmain(&["solve".as_ref(), path.as_os_str(), "--format".as_ref(), "csv".as_ref()]);
    assert!(solved.status.success(), "{}", text(&solved.stderr));
    let simulated = ringmain(&["simulate".as_ref(), path.as_os_str(), "--format".as_ref(), "csv".as_ref()]);
    assert!(simulated.status.success(), "{}", text(&simulated.stderr));
    let tables = dir.join("tables");
    let out = ringmain(&[
        "solve".as_ref(),
        path.as_os_str(),
        "--format".as_ref(),
        "csv".as_ref(),
        "--output".as_ref(),
        tables.as_os_str(),
    ]);
    assert!(out.status.success(), "{}", text(&out.stderr));
    let mut all = vec![text(&solved.stdout), text(&simulated.stdout)];
    for name in ["nodes", "links"] {
        all.push(std::fs::read_to_string(tables.join(format!("{name}.csv"))).unwrap());
    }
    let mut seen = 0;
    for csv in &all {
        for line in csv.lines().skip(1) {
            for cell in cells(line) {
                assert!(!cell.starts_with(['=', '+', '@']), "a formula cell: {cell:?} in {line:?}");
                if cell.starts_with('-') {
                    assert!(cell.parse::<f64>().is_ok(), "a text cell starting with '-': {cell:?} in {line:?}");
                }
                seen += usize::from(cell.starts_with("'"));
            }
        }
    }
    assert!(seen > 20, "the neutralised ids must be there: {seen}");
    let _ = std::fs::remove_dir_all(&dir);
}

/// The JSON and the table give a pump a head gain, and its head loss as a signed, negative value.
#[test]
fn pump_head_gain_is_never_a_positive_loss() {
    let out = ringmain(&["solve".as_ref(), example("hillside.toml").as_os_str(), "--format".as_ref(), "json".as_ref()]);
    assert!(out.status.success(), "{}", text(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let pumps: Vec<&serde_json::Value> =
        v["links"].as_array().unwrap().iter().filter(|l| l["kind"] == "pump").collect();
    assert!(!pumps.is_empty());
    let head = |id: &serde_json::Value| {
        v["nodes"].as_array().unwrap().iter().find(|n| n["id"] == *id).unwrap()["head"].as_f64().unwrap()
    };
    for p in pumps {
        let gain = p["head_gain"].as_f64().unwrap();
        let loss = p["headloss"].as_f64().unwrap();
        assert!(gain > 0.0, "{p}");
        // Signed: H_from - H_to, the negative of the head the pump adds.
        assert!((loss - (head(&p["from"]) - head(&p["to"]))).abs() < 1e-9, "{p}");
        assert!((loss + gain).abs() < 1e-6 * gain, "{p}");
    }
}

/// A model larger than the input limit is refused with exit 2 naming the file and the limit;
/// an endless stream (a character device) is refused the same way instead of growing memory.
#[test]
fn input_beyond_the_size_limit_is_refused() {
    let path = example("hillside.toml");
    let out = ringmain(&["solve".as_ref(), path.as_os_str(), "--max-input-mb".as_ref(), "0.001".as_ref()]);
    assert_eq!(out.status.code(), Some(2), "{}", text(&out.stderr));
    let err = text(&out.stderr);
    assert!(err.contains("hillside.toml") && err.contains("--max-input-mb"), "{err}");
    let ok = ringmain(&["solve".as_ref(), path.as_os_str(), "--max-input-mb".as_ref(), "1".as_ref()]);
    assert!(ok.status.success(), "{}", text(&ok.stderr));
    if Path::new("/dev/zero").exists() {
        let out = ringmain(&["solve", "/dev/zero", "--max-input-mb", "2"]);
        assert_eq!(out.status.code(), Some(2), "{}", text(&out.stderr));
        assert!(text(&out.stderr).contains("--max-input-mb"), "{}", text(&out.stderr));
    }
}

/// `check` prints an error once (the snippet follows without repeating it), and `solve` shows
/// the same snippet.
#[test]
fn errors_are_printed_once_with_their_snippet_in_check_and_solve() {
    let dir = scratch("once");
    let path = dir.join("bad.toml");
    std::fs::write(
        &path,
        "[[nodes]]\nid = \"R\"\nkind = \"reservoir\"\nhead = 50\n\n[[nodes]]\nid = \"J\"\nelevation = 1\ndemand = \"lots\"\n\n\
         [[links]]\nid = \"P\"\nfrom = \"R\"\nto = \"J\"\nlength = 10\ndiameter = 100\nroughness = 120\n",
    )
    .unwrap();
    for command in ["check", "solve"] {
        let out = ringmain(&[command.as_ref(), path.as_os_str()]);
        assert_eq!(out.status.code(), Some(2));
        let err = text(&out.stderr);
        assert!(err.matches("lots").count() + err.matches("demand").count() >= 2, "{err}");
        let mentions = err.lines().filter(|l| l.to_ascii_lowercase().contains("error")).count();
        assert_eq!(mentions, 1, "{command}: the error must be printed once:\n{err}");
        assert!(err.lines().next().unwrap().starts_with("error: "), "{err}");
        assert!(err.lines().skip(1).any(|l| l.contains("9 │")), "{command}: no snippet of line 9:\n{err}");
    }
    let _ = std::fs::remove_dir_all(&dir);
}

/// Every command and format that writes files, with the name of its output (a file, or a
/// directory of tables).
const WRITERS: [(&str, &str, &str); 8] = [
    ("solve", "json", "r.json"),
    ("solve", "csv", "tables"),
    ("solve", "parquet", "columns"),
    ("solve", "geojson", "r.geojson"),
    ("simulate", "json", "s.json"),
    ("simulate", "csv", "s.csv"),
    ("simulate", "parquet", "series"),
    ("generate", "", "g.toml"),
];

/// The arguments of `command` in `format` writing to `out`: the demo model's two days, or a
/// generated network of 2,000 junctions.
fn writer_args(command: &str, format: &str, out: &Path) -> Vec<std::ffi::OsString> {
    let mut args: Vec<std::ffi::OsString> = vec![command.into()];
    if command == "generate" {
        args.extend(["--junctions".into(), "2000".into(), "--seed".into(), "3".into()]);
    } else {
        args.extend([example("hillside-day.toml").into_os_string(), "--format".into(), format.into()]);
    }
    args.extend(["--output".into(), out.as_os_str().to_owned()]);
    args
}

/// Every file under `path` (itself, or the files of the directory it is, hidden ones included),
/// by name, with its bytes.
fn all_files(path: &Path) -> Vec<(String, Vec<u8>)> {
    let mut files: Vec<(String, Vec<u8>)> = if path.is_dir() {
        std::fs::read_dir(path)
            .unwrap()
            .map(|e| {
                let e = e.unwrap();
                (e.file_name().to_string_lossy().into_owned(), std::fs::read(e.path()).unwrap())
            })
            .collect()
    } else {
        vec![(String::new(), std::fs::read(path).unwrap())]
    };
    files.sort();
    files
}

/// Runs `command` in `format` into `out` (its parent made first) with `extra` arguments; the run
/// must succeed. Gives what it wrote.
fn written(command: &str, format: &str, out: &Path, extra: &[&str]) -> Vec<(String, Vec<u8>)> {
    std::fs::create_dir_all(out.parent().unwrap()).unwrap();
    let mut args = writer_args(command, format, out);
    args.extend(extra.iter().map(std::ffi::OsString::from));
    let run = ringmain(&args);
    assert!(run.status.success(), "{command} {format} {extra:?}: {}", text(&run.stderr));
    let files = all_files(out);
    assert!(!files.is_empty() && files.iter().all(|(_, bytes)| !bytes.is_empty()), "{command} {format}");
    files
}

/// `--durable` (files forced to the disk before their rename) changes no byte of any output,
/// for every command and format that writes files, and leaves no temporary file behind (a
/// hidden file would be among the directories' files).
#[test]
fn durable_outputs_equal_the_plain_ones_for_every_writer() {
    let dir = scratch("durable");
    for (command, format, name) in WRITERS {
        let plain = written(command, format, &dir.join("plain").join(name), &[]);
        let durable = written(command, format, &dir.join("durable").join(name), &["--durable"]);
        assert!(plain == durable, "{command} {format}: --durable changed the output");
    }
    let left: Vec<_> = std::fs::read_dir(dir.join("durable")).unwrap().map(|e| e.unwrap().file_name()).collect();
    assert_eq!(left.len(), WRITERS.len(), "only the outputs may be left: {left:?}");
    let _ = std::fs::remove_dir_all(&dir);
}

/// The same run writes the same bytes, for every writer of files (Parquet's schema metadata was
/// once listed in a hash map's random order): two runs of each command and format compared byte
/// for byte.
#[test]
fn the_same_run_writes_the_same_bytes_for_every_writer() {
    let dir = scratch("reproducible");
    for (command, format, name) in WRITERS {
        let first = written(command, format, &dir.join("first").join(name), &[]);
        let second = written(command, format, &dir.join("second").join(name), &[]);
        assert_eq!(first.len(), second.len(), "{command} {format}");
        for ((file, a), (_, b)) in first.iter().zip(&second) {
            assert!(a == b, "{command} {format}: {file} differs between two runs of the same command");
        }
    }
    let _ = std::fs::remove_dir_all(&dir);
}

/// Fault: the CSV tables and the Parquet tables had a temporary file and a rename of their own,
/// beside the one every other output goes through. The class: for every command and format
/// that writes files, a run whose writing is cut short (the process's file-size limit reached,
/// the write refused) exits with code 4, and every file of the destination is either as it was
/// before or whole (as an unhindered run writes it), with no temporary file left behind.
#[cfg(target_os = "linux")]
#[test]
fn a_write_cut_short_leaves_every_file_as_it_was_or_whole() {
    use std::os::unix::process::CommandExt;
    let dir = scratch("cut-short");
    for (command, format, name) in WRITERS {
        let whole = written(command, format, &dir.join("whole").join(name), &[]);
        // An earlier result in place, then a run whose files may not grow beyond 2 kB.
        let out = dir.join("cut").join(name);
        std::fs::create_dir_all(out.parent().unwrap()).unwrap();
        if whole.len() > 1 || !whole[0].0.is_empty() {
            std::fs::create_dir_all(&out).unwrap();
            for (file, _) in &whole {
                std::fs::write(out.join(file), "earlier\n").unwrap();
            }
        } else {
            std::fs::write(&out, "earlier\n").unwrap();
        }
        let mut run = Command::new(env!("CARGO_BIN_EXE_ringmain"));
        run.args(writer_args(command, format, &out));
        // SAFETY: between fork and exec the child calls only `signal` and `setrlimit`, both
        // async-signal-safe, on values of its own.
        unsafe {
            run.pre_exec(|| {
                libc::signal(libc::SIGXFSZ, libc::SIG_IGN);
                let limit = libc::rlimit { rlim_cur: 2048, rlim_max: libc::RLIM_INFINITY };
                if libc::setrlimit(libc::RLIMIT_FSIZE, &limit) != 0 {
                    return Err(std::io::Error::last_os_error());
                }
                Ok(())
            });
        }
        let cut = run.output().expect("start ringmain");
        let stderr = text(&cut.stderr);
        assert!(!stderr.contains("panicked"), "{command} {format}: {stderr}");
        assert_eq!(cut.status.code(), Some(4), "{command} {format}: {stderr}");
        assert!(stderr.contains("cannot write"), "{command} {format}: {stderr}");
        let after = all_files(&out);
        assert_eq!(
            after.len(),
            whole.len(),
            "{command} {format}: {:?}",
            after.iter().map(|f| &f.0).collect::<Vec<_>>()
        );
        for ((file, bytes), (_, complete)) in after.iter().zip(&whole) {
            // Whole: byte for byte what the unhindered run wrote (every writer is reproducible).
            let (kept, written) = (bytes.as_slice() == b"earlier\n", bytes == complete);
            assert!(kept || written, "{command} {format}: {file} is neither the earlier file nor whole");
        }
        assert!(after.iter().any(|(_, b)| b.as_slice() == b"earlier\n"), "{command} {format}: nothing was cut short");
    }
    let _ = std::fs::remove_dir_all(&dir);
}

/// The series streamed to standard output (its writer works on a thread of its own) is the
/// file's text byte for byte, for every format that streams to standard output; and a reader
/// that stops early (the pipe closed after a few bytes, with megabytes still to come) ends the
/// run quietly: exit 0, nothing on standard error.
#[test]
fn series_on_standard_output_equal_the_files_and_end_quietly_at_a_closed_pipe() {
    use std::io::Read;
    use std::process::Stdio;
    let dir = scratch("series-stdout");
    let model = example("hillside-day.toml");
    for format in ["json", "csv"] {
        let file = written("simulate", format, &dir.join(format!("s.{format}")), &[]);
        assert!(file[0].1.len() > 1 << 20, "{format}: the demo's series must be larger than a pipe's buffer");
        let out = ringmain(&["simulate".as_ref(), model.as_os_str(), "--format".as_ref(), format.as_ref()]);
        assert!(out.status.success(), "{format}: {}", text(&out.stderr));
        assert!(out.stdout == file[0].1, "{format}: standard output differs from the file");
        let mut child = Command::new(env!("CARGO_BIN_EXE_ringmain"))
            .args(["simulate".as_ref(), model.as_os_str(), "--format".as_ref(), format.as_ref()])
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .expect("start ringmain");
        let mut first = [0u8; 64];
        child.stdout.as_mut().unwrap().read_exact(&mut first).unwrap();
        drop(child.stdout.take());
        let out = child.wait_with_output().unwrap();
        assert_eq!(out.status.code(), Some(0), "{format}: {}", text(&out.stderr));
        assert!(out.stderr.is_empty(), "{format}: {}", text(&out.stderr));
    }
    let _ = std::fs::remove_dir_all(&dir);
}
