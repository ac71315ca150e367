//! `ringmain check`: a model against service criteria, with what-if scenarios, for CI pipelines.
//!
//! Order of work: read the model (exit 2 on any error, with a snippet); read the criteria — the
//! model's `[criteria]` table, then the `--criteria` file on top, key by key; build the what-if
//! model (`--close`, `--demand-factor`); list the model's warnings; solve and evaluate the base
//! scenario; with `--each-pipe-closed`, close every open pipe in turn on all cores. Then write
//! the report (table or JSON on standard output, JUnit XML to `--junit`) and exit with the code
//! of the worst thing found: 2 invalid input, 3 a scenario did not solve, 1 a criterion failed,
//! 0 all criteria met (4: a report could not be written).

use crate::check_report::{self, Run};
use crate::snippet;
use ringmain_core::analysis::{
    diagnose_model, diagnose_solution, run_scenario, supplied_by_topology, sweep_candidates, sweep_pipes,
    warning_checks, what_if_model, CheckOptions, Criteria, Scenario,
};
use ringmain_core::model::criteria::CriteriaTable;
use ringmain_core::{Format, ModelError, NodeKind, SolveError, SolveOptions, Solver};
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::Instant;

/// Exit codes of `check` (documented in `--help` and docs/check.md): the program's one set.
pub use crate::exit::{EXIT_FAILED, EXIT_INVALID, EXIT_NOT_CONVERGED, EXIT_WRITE};

/// What `check` was asked to do.
pub struct Args {
    pub model: PathBuf,
    pub criteria: Option<PathBuf>,
    pub close: Vec<String>,
    pub demand_factor: f64,
    pub each_pipe_closed: bool,
    pub json: bool,
    pub junit: Option<PathBuf>,
    pub keep: usize,
}

/// A file, for snippets: its name, its format, and its text when it is at hand (otherwise it is
/// read again from `path` when an error needs a snippet).
pub struct SourceText {
    pub name: String,
    pub path: PathBuf,
    pub text: Option<String>,
    pub format: Format,
}

/// Largest input file read, bytes (`--max-input-mb`; default [`DEFAULT_MAX_INPUT_MB`]).
static MAX_INPUT: AtomicU64 = AtomicU64::new(DEFAULT_MAX_INPUT_MB * 1_000_000);

/// The default input size limit, MB (10⁶ bytes): four times the JSON model of a million
/// junctions (330 MB), far beyond any real network's model, and a bound on what a wrong path (a
/// device, a pipe that never ends, a disk image) can make the program read.
pub const DEFAULT_MAX_INPUT_MB: u64 = 2000;

/// Sets the input size limit, MB (fractions allowed).
pub fn set_max_input_mb(mb: f64) {
    MAX_INPUT.store((mb * 1e6).clamp(0.0, u64::MAX as f64) as u64, Ordering::Relaxed);
}

fn too_large(name: &str) -> ModelError {
    let limit = MAX_INPUT.load(Ordering::Relaxed) as f64 / 1e6;
    ModelError::new(format!(
        "the file is larger than the input limit of {limit} MB; raise it with --max-input-mb if the file is \
         really a model"
    ))
    .in_file(name)
}

/// Reads a whole file, at most the input limit: a larger file, or an endless stream (a device,
/// a pipe), is an error naming the file and the limit, without reading past the limit.
fn read_bounded(path: &Path, name: &str) -> Result<Vec<u8>, ModelError> {
    use std::io::Read;
    let cannot = |e: std::io::Error| ModelError::new(format!("cannot read the file: {e}")).in_file(name);
    let limit = MAX_INPUT.load(Ordering::Relaxed);
    let file = std::fs::File::open(path).map_err(cannot)?;
    let known = file.metadata().ok().filter(|m| m.is_file()).map(|m| m.len());
    if known.is_some_and(|len| len > limit) {
        return Err(too_large(name));
    }
    let mut bytes = Vec::with_capacity(known.unwrap_or(0).min(limit) as usize);
    file.take(limit.saturating_add(1)).read_to_end(&mut bytes).map_err(cannot)?;
    if bytes.len() as u64 > limit {
        return Err(too_large(name));
    }
    Ok(bytes)
}

/// Reads a file; errors name it. The text is not kept (see [`SourceText`]).
pub fn read_source(path: &Path) -> Result<(SourceText, Vec<u8>), ModelError> {
    let name = path.display().to_string();
    let bytes = read_bounded(path, &name)?;
    let format = Format::from_path(path).unwrap_or_else(|| Format::sniff(&String::from_utf8_lossy(&bytes)));
    Ok((SourceText { name, path: path.to_owned(), text: None, format }, bytes))
}

/// JSON model files larger than this that the fast reader gives up on are read by serde_json
/// straight from the file instead of as one text.
const STREAM_ABOVE_BYTES: u64 = 64 << 20;

/// Reads a model file. A JSON file is first read in one pass straight from the file, a chunk at
/// a time, by the fast reader of `ringmain_core::format::one_pass` (a network of a million junctions
/// takes some 300 MB of JSON, never held whole); any other file, or a JSON file that reader gives
/// up on (an error, an escape, keys in an order it cannot take in one pass), is read as one text,
/// so that every error comes with its position.
pub fn read_model(path: &Path) -> Result<(ringmain_core::Model, SourceText), (ModelError, Option<SourceText>)> {
    let name = path.display().to_string();
    let limit = MAX_INPUT.load(Ordering::Relaxed);
    let file = std::fs::metadata(path).is_ok_and(|m| m.is_file() && m.len() <= limit);
    if file && Format::from_path(path) == Some(Format::Toml) {
        // TOML likewise: the `toml` crate builds the whole document first (some ten times the
        // file's size in memory), so only what the fast reader gives up on goes that way.
        let model =
            std::fs::File::open(path).ok().and_then(|f| ringmain_core::format::one_pass::toml_from_reader(f, limit));
        if let Some(model) = model {
            return Ok((model, SourceText { name, path: path.to_owned(), text: None, format: Format::Toml }));
        }
    }
    if file && Format::from_path(path) == Some(Format::Json) {
        // In one pass straight from the file, a chunk at a time (the model and one chunk in
        // memory); anything that reader is not sure of is read as one text below.
        let model =
            std::fs::File::open(path).ok().and_then(|f| ringmain_core::format::one_pass::json_from_reader(f, limit));
        // A large file it gave up on (an escape in a string, say): serde_json's one-pass reader
        // from the file, which takes any JSON but is several times slower.
        let large = std::fs::metadata(path).is_ok_and(|m| m.len() > STREAM_ABOVE_BYTES);
        let model = model.or_else(|| {
            large.then(|| std::fs::File::open(path).ok().and_then(ringmain_core::format::read::read_json_stream))?
        });
        if let Some(model) = model {
            return Ok((model, SourceText { name, path: path.to_owned(), text: None, format: Format::Json }));
        }
    }
    let (source, bytes) = read_source(path).map_err(|e| (e, None))?;
    match ringmain_core::read_bytes(&bytes, source.format, &source.name) {
        Ok(model) => Ok((model, source)),
        Err(e) => Err((e, Some(source))),
    }
}

/// Prints an input error with its snippet.
pub fn report_error(error: &ModelError, source: Option<&SourceText>) {
    let color = std::io::stderr().is_terminal() && std::env::var_os("NO_COLOR").is_none();
    let loaded;
    let (text, format) = match source {
        Some(s) if error.file.as_deref() == Some(s.name.as_str()) => match &s.text {
            Some(t) => (Some(t.as_str()), s.format),
            None => {
                loaded = std::fs::read_to_string(&s.path).ok();
                (loaded.as_deref(), s.format)
            }
        },
        _ => (None, Format::Toml),
    };
    eprint!("{}", snippet::render(error, text, format, color));
}

/// Reads a criteria file: a `[criteria]` table, or the criteria keys at the top level.
fn read_criteria_file(
    path: &Path,
    model: &ringmain_core::Model,
) -> Result<(SourceText, CriteriaTable), (ModelError, Option<SourceText>)> {
    let (mut source, bytes) = read_source(path).map_err(|e| (e, None))?;
    let name = source.name.clone();
    source.text = String::from_utf8(bytes.clone()).ok();
    let Some(text) = source.text.as_deref() else {
        let e = ringmain_core::read_bytes(&bytes, source.format, &name)
            .err()
            .unwrap_or_else(|| ModelError::new("the file is not UTF-8 text (is it a binary file?)").in_file(&name));
        return Err((e, Some(source)));
    };
    match ringmain_core::format::criteria::read_file(text, source.format, model) {
        Ok(table) => Ok((source, table)),
        Err(e) => Err((e.in_file(&name), Some(source))),
    }
}

/// The file whose criteria are in force for a note (the criteria file when one is given).
fn criteria_source_name(args: &Args, model_name: &str) -> String {
    args.criteria.as_ref().map_or(model_name.to_owned(), |p| p.display().to_string())
}

fn exit(code: u8) -> ExitCode {
    ExitCode::from(code)
}

/// Runs the command.
pub fn run(args: Args) -> ExitCode {
    let started = Instant::now();
    if let Some(junit) = &args.junit {
        let mut inputs = vec![("model", args.model.as_path())];
        if let Some(c) = &args.criteria {
            inputs.push(("criteria file", c.as_path()));
        }
        if let Err(message) = ringmain_core::output::refuse_input("--junit", junit, &inputs) {
            eprintln!("error: {message}");
            return exit(EXIT_INVALID);
        }
    }
    let (model, model_source) = match read_model(&args.model) {
        Ok(read) => read,
        Err((e, source)) => {
            report_error(&e, source.as_ref());
            return exit(EXIT_INVALID);
        }
    };

    let mut criteria = Criteria::default();
    if let Some(table) = &model.criteria {
        if let Err(e) = criteria.apply(table, &model) {
            report_error(&e.in_file(&model_source.name), Some(&model_source));
            return exit(EXIT_INVALID);
        }
    }
    let mut criteria_source = None;
    if let Some(path) = &args.criteria {
        match read_criteria_file(path, &model) {
            Ok((source, table)) => {
                if let Err(e) = criteria.apply(&table, &model) {
                    report_error(&e.in_file(&source.name), Some(&source));
                    return exit(EXIT_INVALID);
                }
                criteria_source = Some(source.name);
            }
            Err((e, source)) => {
                report_error(&e, source.as_ref());
                return exit(EXIT_INVALID);
            }
        }
    }

    // A what-if demand factor must be positive: zero or a negative factor is a typing mistake on
    // the command line (the library's scenarios accept zero, a static check).
    let f = args.demand_factor;
    if !(f.is_finite() && f > 0.0 && f <= ringmain_core::model::LARGEST_FACTOR) {
        let e = ringmain_core::ModelError::new(format!(
            "--demand-factor: the demand factor must be positive (greater than zero, at most {:e}), found {}",
            ringmain_core::model::LARGEST_FACTOR,
            ringmain_core::model::show(f)
        ));
        report_error(&e.in_file(&model_source.name), None);
        return exit(EXIT_INVALID);
    }
    let what_if = Scenario::closing(&model, &args.close, args.demand_factor).and_then(|s| {
        let m = what_if_model(&model, &s)?;
        Ok((s, m))
    });
    let (scenario, what_if) = match what_if {
        Ok(both) => both,
        Err(e) => {
            let mut e = e;
            e.message = match e.element {
                Some(_) => format!("{} (--close)", e.message),
                None => format!("--demand-factor: {}", e.message),
            };
            report_error(&e.in_file(&model_source.name), None);
            return exit(EXIT_INVALID);
        }
    };

    let options = CheckOptions { keep: args.keep };
    let mut warnings = diagnose_model(&what_if);
    let mut notes = Vec::new();
    for g in &criteria.groups {
        let selected = what_if.nodes().iter().filter(|n| g.selects(&n.id, n.zone.as_deref()));
        let (nodes, junctions) =
            selected.fold((0, 0), |(a, b), n| (a + 1, b + usize::from(matches!(n.kind, NodeKind::Junction { .. }))));
        let note = if nodes == 0 {
            format!("criteria group '{}' selects no node of this model", g.name)
        } else if junctions == 0 {
            format!(
                "criteria group '{}' selects no junction of this model ({nodes} {} with a fixed head only): its \
                 pressure limits check nothing",
                g.name,
                if nodes == 1 { "node" } else { "nodes" }
            )
        } else {
            continue;
        };
        // A group that checks nothing is almost always a typing mistake in its zone or ids.
        eprintln!("warning: {}: {note}", criteria_source_name(&args, &model_source.name));
        notes.push(note);
    }
    let mut solver = match Solver::new(&what_if) {
        Ok(s) => s,
        Err(SolveError::Model(e)) => {
            report_error(&e.in_file(&model_source.name), Some(&model_source));
            return exit(EXIT_INVALID);
        }
        Err(e) => {
            eprintln!("error: {}: {e}", model_source.name);
            return exit(EXIT_NOT_CONVERGED);
        }
    };
    let (mut base, solution) =
        run_scenario(&what_if, &criteria, &mut solver, &SolveOptions::from_model(&what_if), None, &options);
    if let Some(s) = &solution {
        warnings.extend(diagnose_solution(&what_if, s));
    }
    base.checks.extend(warning_checks(&criteria, &warnings, options.keep));
    // Water-quality criteria hold over a simulation of the model's [simulation].
    if criteria.has_quality_limits() {
        match quality_checks(&what_if, &criteria, options.keep) {
            Ok(checks) => base.checks.extend(checks),
            Err((e, code)) => {
                if code == EXIT_INVALID {
                    report_error(&e.in_file(&model_source.name), Some(&model_source));
                } else {
                    eprintln!("error: {}: {}", model_source.name, e.message);
                }
                return exit(code);
            }
        }
    }

    let sweep = if args.each_pipe_closed {
        // Supply lost is measured against the solved scenario, or the open links when it has no solution.
        let reference = if base.connected.is_empty() { supplied_by_topology(&what_if) } else { base.connected.clone() };
        let pipes = sweep_candidates(&what_if);
        let bar = progress_bar(pipes.len());
        let tick = |done: usize, _total: usize| {
            if let Some(b) = &bar {
                b.set_position(done as u64);
            }
        };
        let results = sweep_pipes(&what_if, &pipes, &criteria, &reference, &options, &tick);
        if let Some(b) = bar {
            b.finish_and_clear();
        }
        Some(results)
    } else {
        None
    };

    let run = Run {
        model_name: &model_source.name,
        criteria_name: criteria_source.as_deref(),
        model: &what_if,
        criteria: &criteria,
        scenario: &scenario,
        base: &base,
        sweep: sweep.as_deref(),
        warnings: &warnings,
        notes: &notes,
        seconds: started.elapsed().as_secs_f64(),
    };
    let code = run.exit_code();
    if let Some(path) = &args.junit {
        let junit = check_report::to_junit(&run);
        if let Err(e) = ringmain_core::output::write_file(path, |out| out.write_all(junit.as_bytes())) {
            eprintln!("error: cannot write the JUnit report to {}: {e}", path.display());
            return exit(EXIT_WRITE);
        }
    }
    let written = crate::write_with("the results", None, |out| {
        if args.json {
            serde_json::to_writer_pretty(&mut *out, &check_report::to_json(&run, code))?;
            out.write_all(b"\n")
        } else {
            out.write_all(check_report::to_table(&run, code).as_bytes())
        }
    });
    if written != ExitCode::SUCCESS {
        return written;
    }
    exit(code)
}

/// The criteria of `simulate --criteria`: the model's `[criteria]`, then the file's on top.
/// Errors are printed (with a snippet); `None` when neither gives any.
pub fn criteria_for(
    model: &ringmain_core::Model,
    model_path: &Path,
    file: Option<&Path>,
) -> Result<Option<Criteria>, ()> {
    let mut criteria = Criteria::default();
    let mut any = false;
    if let Some(table) = &model.criteria {
        if let Err(e) = criteria.apply(table, model) {
            report_error(&e.in_file(model_path.display().to_string()), None);
            return Err(());
        }
        any = true;
    }
    if let Some(path) = file {
        match read_criteria_file(path, model) {
            Ok((source, table)) => {
                if let Err(e) = criteria.apply(&table, model) {
                    report_error(&e.in_file(&source.name), Some(&source));
                    return Err(());
                }
                any = true;
            }
            Err((e, source)) => {
                report_error(&e, source.as_ref());
                return Err(());
            }
        }
    }
    Ok(any.then_some(criteria))
}

/// Simulates the model with its water quality and evaluates the quality criteria; errors come
/// with their exit code (2: the model cannot be simulated as it is, 3: the run failed).
pub fn quality_checks(
    model: &ringmain_core::Model,
    criteria: &Criteria,
    keep: usize,
) -> Result<Vec<ringmain_core::analysis::evaluate::CheckResult>, (ModelError, u8)> {
    use ringmain_core::SimulateError;
    if model.time.simulation.is_none() {
        let key = if criteria.max_age.is_some() { "max_age" } else { "min_residual" };
        return Err((
            ModelError::at(
                Some(ringmain_core::Element::Table("criteria".into())),
                Some(key),
                "is checked over a simulation, but the model has no [simulation] table",
            ),
            EXIT_INVALID,
        ));
    }
    let (_, quality) = ringmain_core::quality::simulate(model, &ringmain_core::SimulateOptions::default(), &mut |_| {})
        .map_err(|e| match e {
            SimulateError::Model(m) => (m, EXIT_INVALID),
            other => (ModelError::new(other.to_string()), EXIT_NOT_CONVERGED),
        })?;
    ringmain_core::quality::criteria::evaluate(criteria, model, &quality, keep).map_err(|e| (e, EXIT_INVALID))
}

fn progress_bar(total: usize) -> Option<indicatif::ProgressBar> {
    if !std::io::stderr().is_terminal() || total == 0 {
        return None;
    }
    let bar = indicatif::ProgressBar::with_draw_target(Some(total as u64), indicatif::ProgressDrawTarget::stderr());
    let style = indicatif::ProgressStyle::with_template("closing each pipe {bar:40} {pos}/{len} [{elapsed} < {eta}]")
        .unwrap_or_else(|_| indicatif::ProgressStyle::default_bar());
    bar.set_style(style);
    Some(bar)
}
