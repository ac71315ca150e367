//! `ringmain`: the command-line program.
//!
//! Exit codes: 0 success; 2 invalid model, file or arguments; 3 the solver did not converge;
//! 4 the results could not be written. `check` adds 1: a criterion failed.

mod check;
mod check_report;
mod columnar;
mod csv;
mod duty;
mod exit;
mod fire_flow;
mod gis;
mod import_cmd;
mod map;
use ringmain_core::output;
mod plot;
mod quality_report;
mod report;
mod simulation;
mod snippet;

use clap::{Parser, Subcommand, ValueEnum};
use ringmain_core::physics::{friction_factor, WaterProperties};
use ringmain_core::{Model, SolveError};
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::process::ExitCode;
use std::time::{Duration, Instant};

/// Flows and pressures in looped water-distribution networks.
///
/// Results are only as good as the model and its data; designs must be checked by a licensed
/// engineer against local codes and the utility's standards.
#[derive(Parser)]
#[command(name = "ringmain", version, about, long_about = None)]
#[command(after_help = "Exit codes: 0 solved; 2 invalid model, file or arguments; 3 the solver did not converge; \
                        4 the results could not be written.")]
struct Cli {
    #[command(subcommand)]
    command: Command,
    /// Largest model or criteria file read, MB (10^6 bytes): a larger file, or an endless
    /// stream, is refused with exit code 2.
    #[arg(long, global = true, value_name = "MB", default_value_t = check::DEFAULT_MAX_INPUT_MB as f64)]
    max_input_mb: f64,
    /// Force every output file to the disk before it replaces its destination, so that it
    /// survives a crash of the machine (not only a failed run, which never leaves a half-written
    /// file either way). Costs the disk's time: some 40 ms for the JSON results of 1e5 junctions.
    #[arg(long, global = true)]
    durable: bool,
}

#[derive(Subcommand)]
enum Command {
    /// Solve a snapshot of a network model and print heads, pressures and flows.
    Solve {
        /// The model file (.toml or .json).
        model: PathBuf,
        /// Output format: table; json; csv = every table (nodes, links, pumps, valves, summary)
        /// one value a row, or one file per table when --output is a directory; parquet = one
        /// file per table in the --output directory; geojson.
        #[arg(long, value_enum, default_value_t = OutputFormat::Table)]
        format: OutputFormat,
        /// Write the results to this file (a directory for parquet, or for CSV tables) instead
        /// of standard output.
        #[arg(long, short)]
        output: Option<PathBuf>,
        /// Print to standard error where the time went: reading, analysis, assembly,
        /// factorization, triangular solves, status logic, writing.
        #[arg(long)]
        timings: bool,
    },
    /// Write a synthetic street network of any size (an invented town) as a model file.
    ///
    /// The same junction count and seed always give the same network. See
    /// `ringmain_core::generate` for what the networks look like.
    Generate {
        /// Number of junctions (at least 4).
        #[arg(long)]
        junctions: usize,
        /// Seed of the random numbers.
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// The model file to write (.json or .toml).
        #[arg(long, short)]
        output: PathBuf,
    },
    /// Simulate a model over time (its [simulation] table): tank levels, pump energy, pressures.
    ///
    /// Prints a summary, or writes the time series as JSON, CSV or Parquet as the run goes (the
    /// series is never held in memory, except with --plot, water quality or geojson); with
    /// --output the summary is still printed, with a line naming the file written. With --plot,
    /// SVG charts.
    #[command(after_help = "A run whose estimated time exceeds 15 minutes (from its duration, the shorter of \
                            hydraulic_step and report_interval, and the size of the network) is refused unless \
                            --force is given. Exit codes: 0 simulated; 1 a water-quality criterion failed; 2 invalid \
                            model, file or arguments, or a run too long without --force; 3 a hydraulic solve failed; \
                            4 the results could not be written.")]
    Simulate {
        /// The model file (.toml or .json).
        model: PathBuf,
        /// Output format: table = summary and events; json = summary, events and time series;
        /// csv = the time series, one value a row; parquet = the time series as long tables
        /// (nodes, links, tanks, pumps, series) in the directory given by --output; geojson.
        #[arg(long, value_enum, default_value_t = OutputFormat::Table)]
        format: OutputFormat,
        /// Write the results to this file (a directory for parquet) instead of standard output.
        #[arg(long, short)]
        output: Option<PathBuf>,
        /// Write SVG charts (tanks.svg, pumps.svg, pressures.svg, and quality-<id>.svg per
        /// water-quality constituent) into this directory.
        #[arg(long, value_name = "DIR")]
        plot: Option<PathBuf>,
        /// With --format geojson: the values at this reported instant (elapsed time such as
        /// "6h" or "1h30min") instead of each element's worst instant.
        #[arg(long, value_name = "TIME")]
        at: Option<String>,
        /// Check water-quality criteria over the run (max_age, min_residual, after): a criteria
        /// file (TOML or JSON) whose keys override the model's [criteria]. Exit 1 when one fails.
        #[arg(long, value_name = "FILE")]
        criteria: Option<PathBuf>,
        /// Run even when the estimated work is beyond the bound (see below).
        #[arg(long)]
        force: bool,
    },
    /// Build a model from GIS data: GeoJSON pipes (and points) with a fields file.
    ///
    /// Pipe ends within the snap distance join, points split the pipes they sit on, duplicates
    /// and zero-length pipes are dropped, near misses and unreached nodes are reported (a summary
    /// on standard error, everything with --report). See the README's import section.
    Import {
        /// The pipes: a GeoJSON FeatureCollection of LineStrings.
        #[arg(long, value_name = "PIPES.geojson")]
        pipes: PathBuf,
        /// The points: a GeoJSON FeatureCollection of Points (reservoirs, tanks, hydrants...).
        #[arg(long, value_name = "POINTS.geojson")]
        points: Option<PathBuf>,
        /// The fields file (TOML) mapping attributes to model keys; see examples/FIELDS.toml.
        #[arg(long, value_name = "FIELDS.toml")]
        fields: PathBuf,
        /// Snap distance: metres for longitude/latitude input, the [crs] unit otherwise.
        #[arg(long, default_value_t = ringmain_core::import::ImportOptions::SNAP)]
        snap: f64,
        /// The model file to write (.toml or .json); standard output (TOML) when not given.
        #[arg(long, short, value_name = "MODEL")]
        output: Option<PathBuf>,
        /// Write the report of every decision (JSON) to this file.
        #[arg(long, value_name = "REPORT.json")]
        report: Option<PathBuf>,
        /// Give nodes without an elevation one interpolated along the network.
        #[arg(long)]
        elevation_from_neighbours: bool,
        /// The elevation of nodes that have none otherwise, in the model's length unit.
        #[arg(long, value_name = "Z", allow_negative_numbers = true)]
        elevation_default: Option<f64>,
    },
    /// Draw the network coloured by a result: one self-contained HTML page or an SVG file.
    ///
    /// Models with a [simulation] table are simulated (each element's worst instant, or --at);
    /// others are solved as a snapshot.
    Map {
        /// The model file (.toml or .json); its nodes need coordinates.
        model: PathBuf,
        /// The quantity to colour by: pressure, head, demand, delivered, elevation (nodes);
        /// flow, velocity, headloss, unit_headloss (links); a water-quality constituent's id
        /// (nodes: at --at, or each node's worst over the run).
        #[arg(long, default_value = "pressure")]
        quantity: String,
        /// A reported instant of the simulation (elapsed time such as "6h").
        #[arg(long, value_name = "TIME")]
        at: Option<String>,
        /// The map to write: .html or .svg.
        #[arg(long, short, value_name = "map.html|map.svg")]
        output: PathBuf,
    },
    /// Check a model against service criteria, with what-if closures: for CI pipelines.
    ///
    /// Criteria come from the model's [criteria] table and from --criteria FILE (whose keys
    /// override the model's). Reports worst offenders first; see docs/check.md.
    #[command(after_help = "Exit codes: 0 all criteria met; 1 a criterion failed; 2 invalid model, criteria file or \
                            arguments; 3 a scenario did not solve: the solver did not converge, devices kept switching, \
                            or the demand cannot be delivered (the report names the junctions and pumps); 4 a report could not be \
                            written.")]
    Check {
        /// The model file (.toml or .json).
        model: PathBuf,
        /// A criteria file (TOML or JSON): a [criteria] table, or criteria keys at the top level.
        #[arg(long, value_name = "FILE")]
        criteria: Option<PathBuf>,
        /// Close this link for the check (repeatable).
        #[arg(long, value_name = "ID")]
        close: Vec<String>,
        /// Multiply every junction demand by this factor (positive).
        #[arg(long, value_name = "F", default_value_t = 1.0, allow_negative_numbers = true)]
        demand_factor: f64,
        /// Also close every open pipe in turn (a criticality sweep on all cores).
        #[arg(long)]
        each_pipe_closed: bool,
        /// Output format of the report on standard output.
        #[arg(long, value_enum, default_value_t = CheckFormat::Table)]
        format: CheckFormat,
        /// Also write a JUnit XML report (one test case per criterion and scenario) to this file.
        #[arg(long, value_name = "PATH")]
        junit: Option<PathBuf>,
        /// How many of the worst offenders to list per criterion and scenario.
        #[arg(long, value_name = "N", default_value_t = ringmain_core::analysis::CheckOptions::KEEP)]
        offenders: usize,
    },
    /// Fire flow available at hydrants while the network holds a residual pressure.
    ///
    /// For each hydrant (a junction), with the rest of the network drawing its demands: the extra
    /// draw at which its own pressure falls to the residual (hydrant_limited), and the one at which
    /// the lowest pressure among the protected junctions (those at or above the residual without
    /// a fire draw) falls to it (system_limited); the available fire flow is the smaller.
    FireFlow {
        /// The model file (.toml or .json).
        model: PathBuf,
        /// Residual pressure to hold, with its unit: "20 psi", "140 kPa", "1.4 bar", "14 m"; a
        /// bare number is in the model's pressure unit. 20 psi is common practice in North
        /// America.
        #[arg(long)]
        residual: String,
        /// A hydrant, by junction id (repeatable).
        #[arg(long, value_name = "ID")]
        at: Vec<String>,
        /// Every junction of this zone is a hydrant.
        #[arg(long, value_name = "Z")]
        zone: Option<String>,
        /// Every junction is a hydrant.
        #[arg(long)]
        all_junctions: bool,
        /// Multiply every junction demand by this factor (not outlets or leakage).
        #[arg(long, value_name = "F", default_value_t = 1.0)]
        demand_factor: f64,
        /// Output format.
        #[arg(long, value_enum, default_value_t = OutputFormat::Table)]
        format: OutputFormat,
        /// Write the results to this file instead of standard output.
        #[arg(long, short)]
        output: Option<PathBuf>,
    },
    /// The system curve a pump works against, its operating point at each speed, the shaft power,
    /// the motor rating and the net positive suction head.
    ///
    /// The system curve is the head the pump must add at each flow through it, with the rest of
    /// the network solved at that flow. Values are in the model's units; motor ratings from IEC
    /// 60072-1 (kW, SI models) or NEMA MG 1 (hp, models in feet).
    #[command(
        after_help = "Exit codes: 0 done; 2 invalid model, pump or arguments, or no operating point at a                             speed; 3 the solver did not converge at a flow or speed; 4 the results or the chart                             could not be written."
    )]
    Duty {
        /// The model file (.toml or .json).
        model: PathBuf,
        /// The pump's link id.
        #[arg(long, value_name = "ID")]
        pump: String,
        /// Pump flows of the system curve, START:STOP:STEP in the model's flow unit (STOP
        /// included when on the grid); default 0 to 1.5 times the last flow of the pump's curve
        /// in 40 steps.
        #[arg(long, value_name = "START:STOP:STEP")]
        flows: Option<String>,
        /// Relative speeds of the operating points, comma-separated (default: the pump's speed).
        #[arg(long, value_name = "S,S,...", value_delimiter = ',')]
        speeds: Vec<f64>,
        /// Motor margin over the shaft power, a fraction.
        #[arg(long, value_name = "F", default_value_t = ringmain_core::duty::DutyOptions::MOTOR_MARGIN)]
        motor_margin: f64,
        /// NPSH margin: NPSH available should be at least NPSH required times (1 + F).
        #[arg(long, value_name = "F", default_value_t = ringmain_core::duty::DutyOptions::NPSH_MARGIN)]
        npsh_margin: f64,
        /// Tank levels of the system curve: "current", or "min,max" for the band between the
        /// emptiest and the fullest tanks.
        #[arg(long, value_name = "current|min,max", default_value = "current")]
        tank_levels: String,
        /// Output format.
        #[arg(long, value_enum, default_value_t = OutputFormat::Table)]
        format: OutputFormat,
        /// Also write an SVG chart to this file.
        #[arg(long, value_name = "FILE.svg")]
        plot: Option<PathBuf>,
    },
    /// List the kinds of named fitting, their parameters, their K under each method and the
    /// sources.
    Fittings {
        /// Output format.
        #[arg(long, value_enum, default_value_t = OutputFormat::Table)]
        format: OutputFormat,
    },
    /// Print the density and viscosity of water at a temperature (IAPWS formulations).
    WaterProperties {
        /// Water temperature, deg C (0 to 99).
        #[arg(long, allow_negative_numbers = true)]
        temperature: f64,
        /// Output format.
        #[arg(long, value_enum, default_value_t = OutputFormat::Table)]
        format: OutputFormat,
    },
    /// Print the Darcy friction factor for a Reynolds number and relative roughness.
    FrictionFactor {
        /// Reynolds number.
        #[arg(long, allow_negative_numbers = true)]
        reynolds: f64,
        /// Relative roughness, absolute roughness divided by diameter.
        #[arg(long, allow_negative_numbers = true)]
        relative_roughness: f64,
        /// Output format.
        #[arg(long, value_enum, default_value_t = OutputFormat::Table)]
        format: OutputFormat,
    },
}

#[derive(Clone, Copy, PartialEq, Eq, ValueEnum)]
enum CheckFormat {
    Table,
    Json,
}

#[derive(Clone, Copy, PartialEq, Eq, ValueEnum)]
pub(crate) enum OutputFormat {
    Table,
    Json,
    Csv,
    /// A GeoJSON FeatureCollection of nodes and links with their results (solve, simulate).
    Geojson,
    /// Apache Parquet, one file per table in the --output directory (solve, simulate).
    Parquet,
}

pub(crate) use exit::{EXIT_INVALID, EXIT_NOT_CONVERGED, EXIT_WRITE};

/// Why a command that writes tables, JSON and CSV only cannot write `format`, or `None` when it
/// can: the one place these formats are refused (GeoJSON and Parquet are written by `solve` and
/// `simulate`, whose results are per element).
pub(crate) fn format_refusal(format: OutputFormat) -> Option<&'static str> {
    match format {
        OutputFormat::Table | OutputFormat::Json | OutputFormat::Csv => None,
        OutputFormat::Geojson => Some("--format geojson applies to solve and simulate (results on a map)"),
        OutputFormat::Parquet => Some("--format parquet applies to solve and simulate; use table, json or csv"),
    }
}

/// Gives every allocation of 4 MB or more pages of its own, returned to the system when it is
/// freed, and keeps the rest of the freed memory for reuse (glibc's `mallopt`). By default
/// glibc raises its threshold for pages of their own to the size of each large block freed (up
/// to 32 MB), so that later arrays of a solve come from its heap, where the temporaries freed
/// around them keep it from shrinking: the peak memory of a run then depends on the order in
/// which the analysis's temporaries were freed, not on what is alive. A fixed threshold alone,
/// though, also fixes the heap's trimming at its 128 KiB default, and a simulation then gave
/// back and faulted in again its step's memory at every step. Measured with `/usr/bin/time`:
///
/// | settings | 1e6 `solve --format json` peak | 7 days of 1e4, `simulate` (table): system CPU |
/// | --- | ---: | ---: |
/// | glibc's defaults | 580,656 KiB | 0.03 s |
/// | threshold 4 MB | 554,272 KiB | 0.22 s (0.77 s with `--format json`) |
/// | threshold 4 MB, trimming above 128 MB | 564,296 KiB | 0.00 s |
///
/// And one heap (arena) for every thread. With glibc's default each thread that allocates gets
/// a heap of its own (up to eight per core), and what a helper thread freed stayed resident in
/// it: the 1e6 solve's peak moved between two levels 11 MB apart from run to run, 580,476–580,996
/// KiB at the higher. With one heap, measured alternately on the same binary (4 December 2026):
///
/// | run | glibc's arenas | one arena |
/// | --- | ---: | ---: |
/// | 1e6 `solve --format json`, wall / peak | 3.00–3.23 s / 580,584–580,996 KiB | 3.09–3.22 s / 566,668–568,156 KiB |
/// | each-pipe-closed sweep of 1e4 (12,152 closures) | 4.79–4.84 s / 72,384 KiB | 4.84 s / 65,188 KiB |
/// | fire flow at 10,000 hydrants | 20.97 s / 42,860 KiB | 20.01 s / 36,124 KiB |
/// | 7 days of 1e4, `simulate`, Parquet / JSON | 2.46 / 2.37–2.50 s, 115,320 / 22,788 KiB | 2.48 / 2.51–2.52 s, 93,232 / 19,272 KiB |
///
/// The threads allocate little while they work (their buffers are made once per task), so
/// sharing the heap's lock costs no time that these runs can show.
///
/// Elsewhere than with glibc, nothing is done.
fn large_allocations_apart() {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    // SAFETY: called first in `main`, before any other thread exists; it only sets parameters
    // of the allocator, and a refusal (a return of 0) leaves the default in place.
    unsafe {
        libc::mallopt(libc::M_MMAP_THRESHOLD, 4 << 20);
        libc::mallopt(libc::M_TRIM_THRESHOLD, 128 << 20);
        libc::mallopt(libc::M_ARENA_MAX, 1);
    }
}

fn main() -> ExitCode {
    large_allocations_apart();
    let cli = Cli::parse();
    if !(cli.max_input_mb.is_finite() && cli.max_input_mb > 0.0) {
        eprintln!("error: --max-input-mb must be a positive number of MB, found {}", cli.max_input_mb);
        return ExitCode::from(EXIT_INVALID);
    }
    check::set_max_input_mb(cli.max_input_mb);
    output::set_durable(cli.durable);
    match cli.command {
        Command::Solve { model, format, output, timings } => solve(&model, format, output.as_deref(), timings),
        Command::Generate { junctions, seed, output } => generate(junctions, seed, &output),
        Command::Simulate { model, format, output, plot, at, criteria, force } => {
            simulate(&model, format, output.as_deref(), plot.as_deref(), at.as_deref(), criteria.as_deref(), force)
        }
        Command::Import {
            pipes,
            points,
            fields,
            snap,
            output,
            report,
            elevation_from_neighbours,
            elevation_default,
        } => import_cmd::run(import_cmd::Args {
            pipes,
            points,
            fields,
            snap,
            output,
            report,
            elevation_from_neighbours,
            elevation_default,
        }),
        Command::Map { model, quantity, at, output } => draw_map(&model, &quantity, at.as_deref(), &output),
        Command::Check { model, criteria, close, demand_factor, each_pipe_closed, format, junit, offenders } => {
            check::run(check::Args {
                model,
                criteria,
                close,
                demand_factor,
                each_pipe_closed,
                json: format == CheckFormat::Json,
                junit,
                keep: offenders,
            })
        }
        Command::WaterProperties { format, .. }
        | Command::FrictionFactor { format, .. }
        | Command::Duty { format, .. }
        | Command::FireFlow { format, .. }
        | Command::Fittings { format }
            if format_refusal(format).is_some() =>
        {
            eprintln!("error: {}", format_refusal(format).unwrap_or_default());
            ExitCode::from(EXIT_INVALID)
        }
        Command::Duty { model, pump, flows, speeds, motor_margin, npsh_margin, tank_levels, format, plot } => {
            duty::run(duty::Args { model, pump, flows, speeds, motor_margin, npsh_margin, tank_levels, format, plot })
        }
        Command::Fittings { format } => duty::list_fittings(format),
        Command::FireFlow { model, residual, at, zone, all_junctions, demand_factor, format, output } => {
            fire_flow::run(fire_flow::Args { model, residual, at, zone, all_junctions, demand_factor, format, output })
        }
        Command::WaterProperties { temperature, format } => water_properties(temperature, format),
        Command::FrictionFactor { reynolds, relative_roughness, format } => {
            friction(reynolds, relative_roughness, format)
        }
    }
}

/// Reads and checks a model file; errors are printed with a snippet of the file, as `check`
/// prints them.
///
/// The message is one line, always the first (scripts and the error tests read it); a snippet
/// of the offending line follows it when the place can be found.
pub(crate) fn load(path: &Path) -> Result<Model, ()> {
    check::read_model(path).map(|(model, _)| model).map_err(|(e, source)| check::report_error(&e, source.as_ref()))
}

/// Writes a short text to the file, or to standard output.
pub(crate) fn write_out(text: &str, output: Option<&Path>) -> ExitCode {
    write_with("the results", output, |out| out.write_all(text.as_bytes()))
}

/// Streams what `write` writes, through a buffer, to the file or to standard output, and turns
/// failures into a message naming `what` and the file. A closed pipe (`| head`) is success.
pub(crate) fn write_with(
    what: &str,
    output: Option<&Path>,
    write: impl FnOnce(&mut dyn Write) -> std::io::Result<()>,
) -> ExitCode {
    const BUFFER: usize = 1 << 16;
    match output {
        None => {
            let mut out = BufWriter::with_capacity(BUFFER, std::io::stdout().lock());
            match write(&mut out).and_then(|()| out.flush()) {
                Ok(()) => ExitCode::SUCCESS,
                // A closed pipe (| head) is not an error worth a message.
                Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => ExitCode::SUCCESS,
                Err(e) => {
                    eprintln!("error: cannot write {what}: {e}");
                    ExitCode::from(EXIT_WRITE)
                }
            }
        }
        Some(path) => match output::write_file(path, write) {
            Ok(()) => ExitCode::SUCCESS,
            Err(e) => {
                eprintln!("error: cannot write {what} to {}: {e}", path.display());
                ExitCode::from(EXIT_WRITE)
            }
        },
    }
}

/// Refuses outputs that are inputs (see [`output`]); prints the message. `outputs` pairs each
/// output path with the option that named it.
fn refuse_overwrite(model: &Path, outputs: &[(&str, Option<&Path>)]) -> Result<(), ExitCode> {
    refuse_overwrite_of(&[("model", model)], outputs)
}

/// [`refuse_overwrite`] with several inputs, each with how it was given.
fn refuse_overwrite_of(inputs: &[(&str, &Path)], outputs: &[(&str, Option<&Path>)]) -> Result<(), ExitCode> {
    for (option, path) in outputs {
        if let Some(path) = path {
            if let Err(message) = output::refuse_input(option, path, inputs) {
                eprintln!("error: {message}");
                return Err(ExitCode::from(EXIT_INVALID));
            }
        }
    }
    Ok(())
}

fn solve(path: &Path, format: OutputFormat, output: Option<&Path>, timings: bool) -> ExitCode {
    let clock = Instant::now();
    if let Err(code) = refuse_overwrite(path, &[("--output", output)]) {
        return code;
    }
    let Ok(mut model) = load(path) else { return ExitCode::from(EXIT_INVALID) };
    let reading = clock.elapsed();
    // Nothing below looks an id up: the id indices' memory is the solve's (it would come back
    // at the first lookup).
    model.release_id_index();
    // Shown before solving: a typing mistake is most worth knowing when the solve then fails.
    let mut plausible = ringmain_core::analysis::plausibility(&model);
    print_warnings(&plausible);
    if let Some(path) = output {
        output::forget_replaced_pages(path);
    }
    let (solver, solved) = ringmain_core::Solver::analyse_and_solve_once(&model);
    let mut solution = match solved {
        Ok(s) => s,
        Err(SolveError::Model(e)) => {
            eprintln!("error: {}", e.in_file(path.display().to_string()));
            return ExitCode::from(EXIT_INVALID);
        }
        Err(e) => {
            eprintln!("error: {}: {e}", path.display());
            return ExitCode::from(EXIT_NOT_CONVERGED);
        }
    };
    let clock = Instant::now();
    if format != OutputFormat::Json {
        for w in &solution.warnings {
            if let Some(e) = &w.element {
                eprintln!("warning: {e}: {}", w.message);
            }
        }
    }
    // Valid values that are almost certainly typing mistakes (already on standard error), first
    // among the report's warnings.
    plausible.append(&mut solution.warnings);
    solution.warnings = plausible;
    if format == OutputFormat::Geojson {
        let code = write_geojson(path, output, gis::GisResults::from_solution(&model, &solution));
        std::mem::forget((solution, model, solver));
        return code;
    }
    let report = report::Report::new(&model, &solution);
    let to_dir = |dir: &Path, write: &dyn Fn(&Path) -> std::io::Result<Vec<PathBuf>>| match columnar::output_dir(dir)
        .and_then(|()| write(dir))
    {
        Ok(files) => {
            let names: Vec<String> = files.iter().map(|f| f.display().to_string()).collect();
            eprintln!("wrote {}", names.join(", "));
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("error: cannot write the results to {}: {e}", dir.display());
            ExitCode::from(EXIT_WRITE)
        }
    };
    let code = match (format, output) {
        (OutputFormat::Parquet, Some(dir)) => to_dir(dir, &|d| report.write_parquet(d)),
        (OutputFormat::Parquet, None) => {
            eprintln!("error: --format parquet writes one file per table: give the directory with --output DIR");
            ExitCode::from(EXIT_INVALID)
        }
        // A directory (existing, or named with a trailing slash, or without an extension):
        // one CSV file per table.
        (OutputFormat::Csv, Some(dir)) if is_directory_output(dir) => to_dir(dir, &|d| report.write_csv_tables(d)),
        _ => write_with("the results", output, |out| match format {
            OutputFormat::Table => report.write_table(out),
            OutputFormat::Json => report.write_json(out),
            _ => report.write_csv(out),
        }),
    };
    let writing = clock.elapsed();
    if let (true, Some(solver)) = (timings, &solver) {
        print_timings(&model, solver, reading, writing);
    }
    // The process ends here: the operating system takes the memory back at once, while freeing
    // a large network's millions of small allocations one by one takes a noticeable time.
    std::mem::forget((solution, model, solver));
    code
}

/// Prints warnings on standard error, one a line.
fn print_warnings(warnings: &[ringmain_core::warning::Warning]) {
    for w in warnings {
        eprintln!("warning: {w}");
    }
}

/// Whether an output path names a directory: one that exists, or a path ending in a slash, or
/// a name without an extension.
fn is_directory_output(path: &Path) -> bool {
    path.is_dir() || path.as_os_str().to_string_lossy().ends_with('/') || path.extension().is_none()
}

/// The `--timings` report, on standard error.
fn print_timings(model: &Model, solver: &ringmain_core::Solver, reading: Duration, writing: Duration) {
    let t = solver.timings();
    let pattern = solver.structure();
    let ms = |d: Duration| d.as_secs_f64() * 1e3;
    let iterating = t.iterating();
    let share = |d: Duration| if iterating.is_zero() { 0.0 } else { 100.0 * d.as_secs_f64() / iterating.as_secs_f64() };
    let solver_total = t.analysis + t.solve_total();
    eprintln!(
        "timings: {} nodes, {} links; {} junctions in dead-end trees, {} unknowns in the matrix \
         ({} stored entries, {} in the factor); {} iterations",
        model.nodes().len(),
        model.links().len(),
        pattern.tree_junctions(),
        pattern.n,
        pattern.nnz(),
        pattern.factor_nnz(),
        t.iterations
    );
    eprintln!("  reading the model       {:9.3} ms", ms(reading));
    eprintln!(
        "  analysis                {:9.3} ms  (forest-core split, ordering, symbolic factorization)",
        ms(t.analysis)
    );
    eprintln!("  preparation             {:9.3} ms  (laws, demands, starting values)", ms(t.preparation));
    eprintln!("  assembly                {:9.3} ms  ({:.0}% of the iterations)", ms(t.assembly), share(t.assembly));
    eprintln!(
        "  factorization           {:9.3} ms  ({:.0}% of the iterations)",
        ms(t.factorization),
        share(t.factorization)
    );
    eprintln!("  triangular solves       {:9.3} ms  ({:.0}% of the iterations)", ms(t.solves), share(t.solves));
    eprintln!("  status logic            {:9.3} ms", ms(t.status));
    eprintln!("  dead-end trees          {:9.3} ms", ms(t.forest));
    eprintln!("  results                 {:9.3} ms", ms(t.results));
    eprintln!("  solver in all           {:9.3} ms", ms(solver_total));
    eprintln!("  writing the results     {:9.3} ms", ms(writing));
    if let Some(kib) = peak_memory_kib() {
        eprintln!(
            "  peak memory             {:9.1} MB  (whole process so far; {:.1} MiB)",
            kib as f64 * 1.024e-3,
            kib as f64 / 1024.0
        );
    }
}

/// The process's peak resident memory, KiB, where the system tells it (Linux).
fn peak_memory_kib() -> Option<u64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    line.split_whitespace().nth(1)?.parse().ok()
}

fn generate(junctions: usize, seed: u64, output: &Path) -> ExitCode {
    let Some(format) = ringmain_core::Format::from_path(output) else {
        eprintln!("error: --output {}: the file name must end in .json or .toml", output.display());
        return ExitCode::from(EXIT_INVALID);
    };
    let model = match ringmain_core::generate::generate(&ringmain_core::generate::NetworkSpec::new(junctions, seed)) {
        Ok(m) => m,
        Err(e) => {
            eprintln!("error: {e}");
            return ExitCode::from(EXIT_INVALID);
        }
    };
    let code = write_with("the model", Some(output), |out| ringmain_core::format::write::write_to(&model, format, out));
    // As in `solve`: the process ends here, the operating system takes the memory back at once.
    std::mem::forget(model);
    code
}

/// A progress bar on standard error with the estimated time left, drawn only when standard
/// error is a terminal.
struct Progress {
    enabled: bool,
    shown: i64,
    started: Instant,
}

impl Progress {
    fn new() -> Self {
        use std::io::IsTerminal;
        Progress { enabled: std::io::stderr().is_terminal(), shown: -1, started: Instant::now() }
    }

    fn update(&mut self, fraction: f64) {
        if !self.enabled {
            return;
        }
        let percent = (fraction.clamp(0.0, 1.0) * 100.0).floor() as i64;
        if percent == self.shown {
            return;
        }
        self.shown = percent;
        let filled = (percent / 4) as usize;
        let elapsed = self.started.elapsed().as_secs_f64();
        // The rate so far carried to the end: a fair guess once a few per cent are done.
        let left = if fraction >= 0.02 {
            format!("about {} left", short_duration(elapsed * (1.0 - fraction) / fraction))
        } else {
            "estimating...".to_owned()
        };
        eprint!("\rsimulating [{}{}] {percent:>3}%  {left:<20}", "#".repeat(filled), " ".repeat(25 - filled));
    }

    fn finish(&self) {
        if self.enabled && self.shown >= 0 {
            eprint!("\r{}\r", " ".repeat(72));
        }
    }
}

/// "42 s", "3 min 10 s", "2 h 05 min".
fn short_duration(seconds: f64) -> String {
    let s = seconds.max(0.0).round() as u64;
    if s < 60 {
        format!("{s} s")
    } else if s < 3600 {
        format!("{} min {:02} s", s / 60, s % 60)
    } else {
        format!("{} h {:02} min", s / 3600, s % 3600 / 60)
    }
}

/// A simulation's estimated run time, s, before it starts, from its length and the size of the
/// network: at most one step per `min(hydraulic_step, report_interval)`, three hydraulic solves
/// a step (the Runge–Kutta stages), each costing a fixed 5 µs plus 0.2 µs per node and link.
/// The two costs were measured on this project's benchmark machine (benches/RESULTS.md, the
/// simulation section): the 7-day run of the 10 000-junction network took 2.9 s for an
/// estimate of 2.2 s. Pattern and control steps shorter than the hydraulic step are not
/// counted, so the estimate is a lower bound of the order of the work, not a promise.
fn estimated_run_time(model: &Model) -> Option<(f64, f64)> {
    let sim = model.time.simulation?;
    let step = sim.hydraulic_step.min(sim.report_interval).max(1e-3);
    let steps = (sim.duration / step).ceil().max(1.0);
    let elements = (model.nodes().len() + model.links().len()) as f64;
    Some((steps * 3.0 * (5e-6 + 2e-7 * elements), steps))
}

/// Longest estimated run (s) that `simulate` starts without `--force`.
const WORK_BOUND_SECONDS: f64 = 15.0 * 60.0;

/// Whether two paths name the same existing file (same device and inode; by identity, not name).
fn same_file(a: &Path, b: &Path) -> bool {
    use std::os::unix::fs::MetadataExt;
    match (std::fs::metadata(a), std::fs::metadata(b)) {
        (Ok(x), Ok(y)) => x.dev() == y.dev() && x.ino() == y.ino(),
        _ => false,
    }
}

/// Writes per-element results as GeoJSON (no partial file on failure).
fn write_geojson(
    path: &Path,
    output: Option<&Path>,
    results: Result<gis::GisResults<'_>, ringmain_core::ModelError>,
) -> ExitCode {
    let results = match results.and_then(|r| r.check_coordinates().map(|()| r)) {
        Ok(r) => r,
        Err(e) => {
            eprintln!("error: {}", e.in_file(path.display().to_string()));
            return ExitCode::from(EXIT_INVALID);
        }
    };
    match output {
        None => write_with("the results", None, |out| results.write_geojson(out)),
        Some(file) => match output::write_file(file, |out| results.write_geojson(out)) {
            Ok(()) => ExitCode::SUCCESS,
            Err(e) => {
                eprintln!("error: cannot write the results to {}: {e}", file.display());
                ExitCode::from(EXIT_WRITE)
            }
        },
    }
}

/// `ringmain map`.
fn draw_map(path: &Path, quantity: &str, at: Option<&str>, output: &Path) -> ExitCode {
    let extension = output.extension().and_then(|e| e.to_str()).map(str::to_ascii_lowercase);
    let svg = match extension.as_deref() {
        Some("html" | "htm") => false,
        Some("svg") => true,
        _ => {
            eprintln!("error: --output {}: the file name must end in .html or .svg", output.display());
            return ExitCode::from(EXIT_INVALID);
        }
    };
    if let Err(code) = refuse_overwrite(path, &[("--output", Some(output))]) {
        return code;
    }
    let at = match at.map(gis::parse_at).transpose() {
        Ok(t) => t,
        Err(m) => {
            eprintln!("error: {m}");
            return ExitCode::from(EXIT_INVALID);
        }
    };
    let Ok(model) = load(path) else { return ExitCode::from(EXIT_INVALID) };
    let results = match results_for_map(path, &model, at) {
        Ok(r) => r,
        Err(code) => return code,
    };
    let results = match results.check_coordinates() {
        Ok(()) => results,
        Err(e) => {
            eprintln!("error: {}", e.in_file(path.display().to_string()));
            return ExitCode::from(EXIT_INVALID);
        }
    };
    if results.quantity(quantity).is_none() {
        eprintln!(
            "error: --quantity {quantity}: not a result of this model; expected one of {}",
            results.names().join(", ")
        );
        return ExitCode::from(EXIT_INVALID);
    }
    let written = output::write_file(output, |out| {
        if svg {
            map::write_svg(&results, quantity, out)
        } else {
            map::write_html(&results, quantity, out)
        }
    });
    match written {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: cannot write the map to {}: {e}", output.display());
            ExitCode::from(EXIT_WRITE)
        }
    }
}

/// The results a map draws: a simulation's when the model has one, else a snapshot's.
fn results_for_map<'a>(path: &Path, model: &'a Model, at: Option<f64>) -> Result<gis::GisResults<'a>, ExitCode> {
    let fail = |e: ringmain_core::ModelError| {
        eprintln!("error: {}", e.in_file(path.display().to_string()));
        ExitCode::from(EXIT_INVALID)
    };
    if model.time.simulation.is_some() {
        // With water-quality constituents the run carries them, and the map can colour by them.
        let options = ringmain_core::SimulateOptions::default();
        let run = if model.time.quality.constituents.is_empty() {
            ringmain_core::simulate::simulate(model).map(|r| (r, None))
        } else {
            ringmain_core::quality::simulate(model, &options, &mut |_| {}).map(|(r, q)| (r, Some(q)))
        };
        let (run, quality) = match run {
            Ok(r) => r,
            Err(ringmain_core::SimulateError::Model(e)) => return Err(fail(e)),
            Err(e) => {
                eprintln!("error: {}: {e}", path.display());
                return Err(ExitCode::from(EXIT_NOT_CONVERGED));
            }
        };
        let mut results = gis::GisResults::from_run(model, &run, at).map_err(fail)?;
        if let Some(q) = &quality {
            results.add_quality(q, at).map_err(fail)?;
        }
        return Ok(results);
    }
    if at.is_some() {
        eprintln!("error: --at: {} has no [simulation] table; a snapshot has no instants", path.display());
        return Err(ExitCode::from(EXIT_INVALID));
    }
    match ringmain_core::solve(model) {
        Ok(s) => gis::GisResults::from_solution(model, &s).map_err(fail),
        Err(SolveError::Model(e)) => Err(fail(e)),
        Err(e) => {
            eprintln!("error: {}: {e}", path.display());
            Err(ExitCode::from(EXIT_NOT_CONVERGED))
        }
    }
}

#[allow(clippy::too_many_arguments)]
fn simulate(
    path: &Path,
    format: OutputFormat,
    output: Option<&Path>,
    plot_dir: Option<&Path>,
    at: Option<&str>,
    criteria_path: Option<&Path>,
    force: bool,
) -> ExitCode {
    use ringmain_core::SimulateError;
    let charts: Vec<PathBuf> = plot_dir.map(|d| plot::FILES.iter().map(|f| d.join(f)).collect()).unwrap_or_default();
    let mut outputs = vec![("--output", output)];
    outputs.extend(charts.iter().map(|c| ("--plot", Some(c.as_path()))));
    let mut inputs = vec![("model", path)];
    inputs.extend(criteria_path.map(|c| ("criteria file", c)));
    if let Err(code) = refuse_overwrite_of(&inputs, &outputs) {
        return code;
    }
    use simulation::SeriesWriter;
    let at = match at {
        None => None,
        Some(_) if format != OutputFormat::Geojson => {
            eprintln!("error: --at applies to --format geojson");
            return ExitCode::from(EXIT_INVALID);
        }
        Some(text) => match gis::parse_at(text) {
            Ok(t) => Some(t),
            Err(m) => {
                eprintln!("error: {m}");
                return ExitCode::from(EXIT_INVALID);
            }
        },
    };
    if let Some(out) = output.filter(|o| same_file(o, path)) {
        eprintln!("error: --output {} is the model file itself; choose another file", out.display());
        return ExitCode::from(EXIT_INVALID);
    }
    if format == OutputFormat::Parquet && output.is_none() {
        eprintln!("error: --format parquet writes one file per table: give the directory with --output DIR");
        return ExitCode::from(EXIT_INVALID);
    }
    let Ok(model) = load(path) else { return ExitCode::from(EXIT_INVALID) };
    print_warnings(&ringmain_core::analysis::plausibility(&model));
    let criteria = match check::criteria_for(&model, path, criteria_path) {
        Ok(c) => c,
        Err(()) => return ExitCode::from(EXIT_INVALID),
    };
    if let Some((seconds, steps)) = estimated_run_time(&model).filter(|_| !force) {
        if seconds > WORK_BOUND_SECONDS {
            eprintln!(
                "error: {}: [simulation]: the run is estimated at about {} ({steps:.3e} steps over {} nodes and \
                 links), beyond the {}-minute bound; lengthen hydraulic_step or report_interval, shorten duration, \
                 or add --force to run it anyway",
                path.display(),
                short_duration(seconds),
                model.nodes().len() + model.links().len(),
                WORK_BOUND_SECONDS / 60.0
            );
            return ExitCode::from(EXIT_INVALID);
        }
    }
    let with_quality = !model.time.quality.constituents.is_empty();
    // The whole series is kept where what comes after the run needs it: the charts and the map
    // formats. Otherwise it streams, water-quality values beside the hydraulics.
    let keep = plot_dir.is_some() || format == OutputFormat::Geojson;
    // Where the series goes, opened before the run so that it streams as the run goes.
    let streamed = matches!(format, OutputFormat::Json | OutputFormat::Csv | OutputFormat::Parquet);
    let mut part = None;
    let mut files = Vec::new();
    let sink: Option<Box<dyn Write + Send>> = match (streamed, format, output) {
        (false, _, _) | (_, OutputFormat::Parquet, _) => None,
        (_, _, None) => Some(Box::new(BufWriter::with_capacity(1 << 16, std::io::stdout()))),
        (_, _, Some(out)) => match output::OutputFile::create(out) {
            Ok((p, file)) => {
                part = Some(p);
                files.push(out.to_owned());
                Some(Box::new(BufWriter::with_capacity(1 << 16, file)))
            }
            Err(e) => {
                eprintln!("error: cannot write the results to {}: {e}", out.display());
                return ExitCode::from(EXIT_WRITE);
            }
        },
    };
    type Sent<'m> = Box<dyn SeriesWriter + Send + 'm>;
    let opened: std::io::Result<Option<Sent>> = match (format, sink) {
        (OutputFormat::Json, Some(out)) => simulation::JsonSeries::new(&model, out).map(|w| Some(Box::new(w) as Sent)),
        (OutputFormat::Csv, Some(out)) => simulation::CsvSeries::new(&model, out).map(|w| Some(Box::new(w) as Sent)),
        (OutputFormat::Parquet, _) => {
            let dir = output.expect("checked above");
            columnar::output_dir(dir).and_then(|()| simulation::ParquetSeries::new(&model, dir)).map(|w| {
                files = w.paths();
                Some(Box::new(w) as Sent)
            })
        }
        _ => Ok(None),
    };
    // The series is formatted and written on a thread of its own while the run goes on.
    std::thread::scope(|scope| {
        let mut writer = match opened {
            Ok(w) => w.map(|w| Box::new(simulation::Background::start(scope, w)) as Box<dyn SeriesWriter + '_>),
            Err(e) => {
                let to = output.map_or("standard output".into(), |o| o.display().to_string());
                eprintln!("error: cannot write the results to {to}: {e}");
                return ExitCode::from(EXIT_WRITE);
            }
        };
        let mut progress = Progress::new();
        let options = ringmain_core::SimulateOptions::default();
        let mut failure: Option<std::io::Error> = None;
        let mut reports = 0usize;
        let mut sink = |s: &ringmain_core::simulate::Snapshot, q: Option<&ringmain_core::quality::QualityRecord>| {
            reports += 1;
            match writer.as_mut().map_or(Ok(()), |w| w.snapshot(s, q)) {
                Ok(()) => Ok(()),
                Err(e) => {
                    let message = e.to_string();
                    failure = Some(e);
                    Err(message)
                }
            }
        };
        let result = match (with_quality, keep) {
            (true, true) => ringmain_core::quality::simulate(&model, &options, &mut |f| progress.update(f))
                .map(|(r, q)| (r, Some(q))),
            (true, false) => {
                ringmain_core::quality::simulate_streaming(&model, &options, &mut |f| progress.update(f), &mut sink)
                    .map(|(r, q)| (r, Some(q)))
            }
            (false, true) => {
                ringmain_core::simulate::simulate_with(&model, &options, &mut |f| progress.update(f)).map(|r| (r, None))
            }
            (false, false) => {
                ringmain_core::simulate::simulate_streaming(&model, &options, &mut |f| progress.update(f), &mut |s| {
                    sink(s, None)
                })
                .map(|r| (r, None))
            }
        };
        progress.finish();
        let (run, quality) = match result {
            Ok(r) => r,
            Err(SimulateError::Model(e)) => {
                eprintln!("error: {}", e.in_file(path.display().to_string()));
                return ExitCode::from(EXIT_INVALID);
            }
            Err(SimulateError::Output { .. })
                if failure.as_ref().is_some_and(|e| e.kind() == std::io::ErrorKind::BrokenPipe) =>
            {
                return ExitCode::SUCCESS;
            }
            Err(SimulateError::Output { message, .. }) => {
                let to = output.map_or("standard output".into(), |o| o.display().to_string());
                eprintln!("error: cannot write the results to {to}: {message}");
                return ExitCode::from(EXIT_WRITE);
            }
            Err(e) => {
                eprintln!("error: {}: {e}", path.display());
                return ExitCode::from(EXIT_NOT_CONVERGED);
            }
        };
        if format == OutputFormat::Geojson {
            let results = gis::GisResults::from_run(&model, &run, at).and_then(|mut r| {
                if let Some(q) = &quality {
                    r.add_quality(q, at)?;
                }
                Ok(r)
            });
            return write_geojson(path, output, results);
        }
        // A kept series goes through the same writers, state by state.
        if let (true, Some(w)) = (keep, writer.as_mut()) {
            for s in &run.series {
                reports += 1;
                if let Err(e) = w.snapshot(s, quality.as_ref().and_then(|q| q.at(s.time))) {
                    if e.kind() == std::io::ErrorKind::BrokenPipe {
                        return ExitCode::SUCCESS;
                    }
                    let to = output.map_or("standard output".into(), |o| o.display().to_string());
                    eprintln!("error: cannot write the results to {to}: {e}");
                    return ExitCode::from(EXIT_WRITE);
                }
            }
        }
        let mut report = simulation::RunReport::new(&model, &run);
        report.quality = quality.as_ref();
        report.criteria = criteria.as_ref();
        if let Some(criteria) = criteria.as_ref().filter(|c| c.has_quality_limits()) {
            let Some(q) = quality.as_ref() else {
                eprintln!(
                    "error: {}: [criteria]: key 'max_age'/'min_residual': the model has no [[quality]] constituents to check",
                    path.display()
                );
                return ExitCode::from(EXIT_INVALID);
            };
            match ringmain_core::quality::criteria::evaluate(
                criteria,
                &model,
                q,
                ringmain_core::analysis::CheckOptions::KEEP,
            ) {
                Ok(checks) => report.checks = checks,
                Err(e) => {
                    eprintln!("error: {}", e.in_file(criteria_path.unwrap_or(path).display().to_string()));
                    return ExitCode::from(EXIT_INVALID);
                }
            }
        }
        if let Some(dir) = plot_dir {
            match plot::write_all(&report, dir) {
                Ok(written) => {
                    for f in written {
                        eprintln!("wrote {}", f.display());
                    }
                }
                Err(e) => {
                    eprintln!("error: cannot write the charts to {}: {e}", dir.display());
                    return ExitCode::from(EXIT_WRITE);
                }
            }
        }
        let failed = if report.checks.iter().any(|c| !c.passed()) {
            ExitCode::from(exit::EXIT_FAILED)
        } else {
            ExitCode::SUCCESS
        };
        let finished = match writer.as_mut() {
            Some(w) => w.finish(&report),
            // The table (every other format has a writer, GeoJSON returned above).
            None => {
                let code = match output {
                    None => write_out(&report.to_table(), None),
                    Some(out) => {
                        let code = write_with("the results", Some(out), |o| o.write_all(report.to_table().as_bytes()));
                        if code == ExitCode::SUCCESS {
                            println!("wrote {}", out.display());
                        }
                        code
                    }
                };
                return if code == ExitCode::SUCCESS { failed } else { code };
            }
        };
        drop(writer);
        let committed = finished.and_then(|()| part.map_or(Ok(()), output::OutputFile::commit));
        match committed {
            Ok(()) => {}
            Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => return ExitCode::SUCCESS,
            Err(e) => {
                let to = output.map_or("standard output".into(), |o| o.display().to_string());
                eprintln!("error: cannot write the results to {to}: {e}");
                return ExitCode::from(EXIT_WRITE);
            }
        }
        if output.is_some() {
            // The series went to files: the summary still comes to the terminal, with what was written.
            let mut text = report.to_table();
            for f in &files {
                text.push_str(&format!("wrote {} ({} reported times)\n", f.display(), reports));
            }
            let code = write_out(&text, None);
            return if code == ExitCode::SUCCESS { failed } else { code };
        }
        failed
    })
}

fn water_properties(temperature: f64, format: OutputFormat) -> ExitCode {
    if !(WaterProperties::MIN_CELSIUS..=WaterProperties::MAX_CELSIUS).contains(&temperature) {
        eprintln!(
            "error: --temperature must be between {} and {} deg C, found {temperature}",
            WaterProperties::MIN_CELSIUS,
            WaterProperties::MAX_CELSIUS
        );
        return ExitCode::from(EXIT_INVALID);
    }
    let w = WaterProperties::at_celsius(temperature);
    let text = match format {
        OutputFormat::Json => {
            serde_json::json!({
                "temperature": temperature, "density": w.density,
                "dynamic_viscosity": w.dynamic_viscosity, "kinematic_viscosity": w.kinematic_viscosity,
                "vapour_pressure": w.vapour_pressure(),
            })
            .to_string()
                + "\n"
        }
        OutputFormat::Csv | OutputFormat::Geojson => format!(
            "temperature_C,density_kg_m3,dynamic_viscosity_Pa_s,kinematic_viscosity_m2_s\n{},{},{},{}\n",
            temperature, w.density, w.dynamic_viscosity, w.kinematic_viscosity
        ),
        OutputFormat::Table | OutputFormat::Parquet => format!(
            "water at {temperature} deg C and 101.325 kPa\n  density              {:.4} kg/m3 (IAPWS-IF97)\n  \
             dynamic viscosity    {:.6e} Pa s (IAPWS 2008)\n  kinematic viscosity  {:.6e} m2/s\n  \
             vapour pressure      {:.2} Pa (IAPWS-IF97 saturation line)\n",
            w.density,
            w.dynamic_viscosity,
            w.kinematic_viscosity,
            w.vapour_pressure()
        ),
    };
    write_out(&text, None)
}

/// Reynolds numbers `friction-factor` accepts. Below 1e-3 the laminar factor 64/Re exceeds
/// 64 000, a flow that is no flow at all; above 1e10 the flow is beyond any water main (a 10 m
/// tunnel at 10 m/s is at 1e8) and beyond the range the Colebrook–White equation was fitted on
/// (the Moody diagram ends at 1e8; common practice).
const REYNOLDS_RANGE: (f64, f64) = (1e-3, 1e10);

fn friction(re: f64, rr: f64, format: OutputFormat) -> ExitCode {
    use ringmain_core::model::show;
    if !(re.is_finite() && re >= REYNOLDS_RANGE.0 && re <= REYNOLDS_RANGE.1) {
        eprintln!(
            "error: --reynolds must be a positive number between {:e} and {:e}, found {}",
            REYNOLDS_RANGE.0,
            REYNOLDS_RANGE.1,
            show(re)
        );
        return ExitCode::from(EXIT_INVALID);
    }
    if !(rr.is_finite() && (0.0..0.5).contains(&rr)) {
        eprintln!("error: --relative-roughness must be between 0 and 0.5, found {}", show(rr));
        return ExitCode::from(EXIT_INVALID);
    }
    let (f, _) = friction_factor(re, rr);
    if !f.is_finite() {
        eprintln!("error: the friction factor at Re = {} and e/D = {} is not a finite number", show(re), show(rr));
        return ExitCode::from(EXIT_INVALID);
    }
    let regime = if re < 2000.0 {
        "laminar (64/Re)"
    } else if re > 4000.0 {
        "turbulent (Colebrook-White)"
    } else {
        "transitional (cubic interpolation)"
    };
    let text = match format {
        OutputFormat::Json => {
            serde_json::json!({"reynolds": re, "relative_roughness": rr, "friction_factor": f, "regime": regime})
                .to_string()
                + "\n"
        }
        OutputFormat::Csv | OutputFormat::Geojson => {
            format!("reynolds,relative_roughness,friction_factor\n{re},{rr},{f}\n")
        }
        OutputFormat::Table | OutputFormat::Parquet => {
            format!("Darcy friction factor f = {f:.6} at Re = {}, e/D = {}: {regime}\n", show(re), show(rr))
        }
    };
    write_out(&text, None)
}
