//! `ringmain import`: a model from GeoJSON pipes and points (see `ringmain_core::import`).

use crate::{EXIT_INVALID, EXIT_WRITE};
use ringmain_core::import::{self, ImportOptions, Source};
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// The arguments of `ringmain import`.
pub struct Args {
    pub pipes: PathBuf,
    pub points: Option<PathBuf>,
    pub fields: PathBuf,
    pub snap: f64,
    pub output: Option<PathBuf>,
    pub report: Option<PathBuf>,
    pub elevation_from_neighbours: bool,
    pub elevation_default: Option<f64>,
}

fn read(path: &Path) -> Result<Vec<u8>, ExitCode> {
    std::fs::read(path).map_err(|e| {
        eprintln!("error: cannot read {}: {e}", path.display());
        ExitCode::from(EXIT_INVALID)
    })
}

/// Whether two paths name the same file (an output must never overwrite an input): by
/// identity, so hard and symbolic links count (see [`ringmain_core::output::same_file`]).
pub fn same_file(a: &Path, b: &Path) -> bool {
    ringmain_core::output::same_file(a, b)
}

pub fn run(args: Args) -> ExitCode {
    let inputs: Vec<&Path> = [Some(args.pipes.as_path()), args.points.as_deref(), Some(args.fields.as_path())]
        .into_iter()
        .flatten()
        .collect();
    for (flag, out) in [("--output", &args.output), ("--report", &args.report)] {
        if let Some(out) = out {
            if inputs.iter().any(|i| same_file(i, out)) {
                eprintln!("error: {flag} {} is one of the input files; choose another name", out.display());
                return ExitCode::from(EXIT_INVALID);
            }
        }
    }
    if let (Some(a), Some(b)) = (&args.output, &args.report) {
        if a == b {
            eprintln!("error: --output and --report name the same file");
            return ExitCode::from(EXIT_INVALID);
        }
    }
    let format = match &args.output {
        None => ringmain_core::Format::Toml,
        Some(path) => match ringmain_core::Format::from_path(path) {
            Some(f) => f,
            None => {
                eprintln!("error: --output {}: the file name must end in .toml or .json", path.display());
                return ExitCode::from(EXIT_INVALID);
            }
        },
    };
    if !(args.snap.is_finite() && args.snap >= 0.0) {
        eprintln!("error: --snap must be a distance of 0 or more, found {}", args.snap);
        return ExitCode::from(EXIT_INVALID);
    }
    if let Some(z) = args.elevation_default {
        if !z.is_finite() {
            eprintln!("error: --elevation-default must be a finite number, found {z}");
            return ExitCode::from(EXIT_INVALID);
        }
    }
    let fields_text = match std::fs::read_to_string(&args.fields) {
        Ok(t) => t,
        Err(e) => {
            eprintln!("error: cannot read {}: {e}", args.fields.display());
            return ExitCode::from(EXIT_INVALID);
        }
    };
    let fields = match import::read_fields(&fields_text, &args.fields.display().to_string()) {
        Ok(f) => f,
        Err(e) => {
            eprintln!("error: {e}");
            return ExitCode::from(EXIT_INVALID);
        }
    };
    let pipes_bytes = match read(&args.pipes) {
        Ok(b) => b,
        Err(code) => return code,
    };
    let points_bytes = match args.points.as_deref().map(read).transpose() {
        Ok(b) => b,
        Err(code) => return code,
    };
    let pipes_name = args.pipes.display().to_string();
    let points_name = args.points.as_ref().map(|p| p.display().to_string()).unwrap_or_default();
    let options = ImportOptions {
        snap: args.snap,
        elevation_from_neighbours: args.elevation_from_neighbours,
        elevation_default: args.elevation_default,
    };
    let pipes = Source { bytes: &pipes_bytes, file: &pipes_name };
    let points = points_bytes.as_deref().map(|bytes| Source { bytes, file: &points_name });
    let (model, report) = match import::import(pipes, points, &fields, &options) {
        Ok(r) => r,
        Err(e) => {
            eprintln!("error: {e}");
            return ExitCode::from(EXIT_INVALID);
        }
    };
    drop(pipes_bytes);
    drop(points_bytes);
    eprint!("{}", report.summary());
    if let Some(path) = &args.report {
        let written = ringmain_core::output::write_file(path, |out| {
            serde_json::to_writer_pretty(&mut *out, &report)?;
            out.write_all(b"\n")
        });
        if let Err(e) = written {
            eprintln!("error: cannot write the report to {}: {e}", path.display());
            return ExitCode::from(EXIT_WRITE);
        }
    }
    let code = match &args.output {
        Some(path) => {
            match ringmain_core::output::write_file(path, |out| {
                ringmain_core::format::write::write_to(&model, format, out)
            }) {
                Ok(()) => ExitCode::SUCCESS,
                Err(e) => {
                    eprintln!("error: cannot write the model to {}: {e}", path.display());
                    ExitCode::from(EXIT_WRITE)
                }
            }
        }
        None => crate::write_with("the model", None, |out| ringmain_core::format::write::write_to(&model, format, out)),
    };
    std::mem::forget(model);
    code
}
