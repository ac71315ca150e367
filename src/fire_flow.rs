//! `ringmain fire-flow`: the fire flow available at hydrants while the network holds a residual
//! pressure (see `ringmain_core::analysis::fire_flow`), as a table, JSON or CSV in the model's
//! units.

use crate::{EXIT_INVALID, EXIT_NOT_CONVERGED, EXIT_WRITE};
use ringmain_core::analysis::fire_flow::{fire_flows, FireFlow, FireFlowOptions, FLOW_TOLERANCE};
use ringmain_core::units::did_you_mean;
use ringmain_core::units::{Converter, PressureUnit, Quantity};
use ringmain_core::{Model, NodeKind, SolveError};
use serde_json::json;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// What the command was asked.
pub struct Args {
    pub model: PathBuf,
    pub residual: String,
    pub at: Vec<String>,
    pub zone: Option<String>,
    pub all_junctions: bool,
    pub demand_factor: f64,
    pub format: crate::OutputFormat,
    pub output: Option<PathBuf>,
}

/// A pressure such as "20 psi", "140 kPa", "1.4 bar", "14 m"; a bare number is in the model's
/// pressure unit. Returns the pressure head, m.
fn parse_pressure(text: &str, model: &Model) -> Result<f64, String> {
    let t = text.trim();
    let split = t.find(|c: char| !(c.is_ascii_digit() || matches!(c, '.' | '-' | '+' | 'e' | 'E'))).unwrap_or(t.len());
    let (number, unit) = t.split_at(split);
    let value: f64 = number
        .trim()
        .parse()
        .map_err(|_| format!("--residual \"{text}\": expected a pressure such as \"20 psi\" or \"140 kPa\""))?;
    if !value.is_finite() {
        return Err(format!("--residual \"{text}\": the pressure must be finite"));
    }
    let unit = match unit.trim() {
        "" => model.units.pressure,
        u => PressureUnit::parse(u).ok_or_else(|| {
            let hint = did_you_mean(u, PressureUnit::ALL.iter().map(|p| p.label()), '"');
            format!(
                "--residual \"{text}\": unknown pressure unit \"{u}\"{hint}; expected one of {}",
                PressureUnit::choices()
            )
        })?,
    };
    Ok(unit.to_head(value, model.options.water_properties().density))
}

/// The hydrants asked for, as node indices in model order without repeats.
fn hydrants(args: &Args, model: &Model) -> Result<Vec<usize>, String> {
    let mut chosen = vec![false; model.nodes().len()];
    for id in &args.at {
        let Some(i) = model.node_index(id) else {
            let hint = did_you_mean(id, model.nodes().iter().map(|n| n.id.as_str()), '\'');
            return Err(format!("--at '{id}': no node has this id{hint}"));
        };
        if !matches!(model.nodes()[i].kind, NodeKind::Junction { .. }) {
            return Err(format!(
                "--at '{id}': a hydrant must be a junction; this node is a {}",
                model.nodes()[i].kind.label()
            ));
        }
        chosen[i] = true;
    }
    if let Some(zone) = &args.zone {
        let mut any = false;
        for (i, n) in model.nodes().iter().enumerate() {
            if matches!(n.kind, NodeKind::Junction { .. }) && n.zone.as_deref() == Some(zone.as_str()) {
                chosen[i] = true;
                any = true;
            }
        }
        if !any {
            return Err(format!("--zone '{zone}': no junction has this zone"));
        }
    }
    if args.all_junctions {
        for (i, n) in model.nodes().iter().enumerate() {
            if matches!(n.kind, NodeKind::Junction { .. }) {
                chosen[i] = true;
            }
        }
    }
    let list: Vec<usize> = (0..chosen.len()).filter(|&i| chosen[i]).collect();
    if list.is_empty() {
        return Err("give the hydrants: --at ID (repeatable), --zone Z or --all-junctions".into());
    }
    Ok(list)
}

pub fn run(args: Args) -> ExitCode {
    let Ok(model) = crate::load(&args.model) else { return ExitCode::from(EXIT_INVALID) };
    let invalid = |message: String| {
        eprintln!("error: {message}");
        ExitCode::from(EXIT_INVALID)
    };
    if let Some(out) = &args.output {
        let same = match (std::fs::canonicalize(out), std::fs::canonicalize(&args.model)) {
            (Ok(a), Ok(b)) => a == b,
            _ => false,
        };
        if same {
            return invalid(format!("--output {}: this is the model file; it is not overwritten", out.display()));
        }
    }
    if !(args.demand_factor.is_finite() && args.demand_factor >= 0.0) {
        return invalid(format!(
            "--demand-factor must be a finite number not below zero, found {}",
            args.demand_factor
        ));
    }
    let residual = match parse_pressure(&args.residual, &model) {
        Ok(r) => r,
        Err(m) => return invalid(m),
    };
    let list = match hydrants(&args, &model) {
        Ok(l) => l,
        Err(m) => return invalid(m),
    };
    let options = FireFlowOptions { residual, demand_factor: args.demand_factor };
    let results = match fire_flows(&model, &list, &options) {
        Ok(r) => r,
        Err(SolveError::Model(e)) => {
            eprintln!("error: {}", e.in_file(args.model.display().to_string()));
            return ExitCode::from(EXIT_INVALID);
        }
        Err(e) => {
            eprintln!("error: {}: {e}", args.model.display());
            return ExitCode::from(EXIT_NOT_CONVERGED);
        }
    };
    let view = View { model: &model, units: model.converter() };
    let text = match args.format {
        crate::OutputFormat::Json => view.json(&results, residual, args.demand_factor),
        crate::OutputFormat::Csv => view.csv(&results),
        crate::OutputFormat::Table => view.table(&results, residual, args.demand_factor),
        crate::OutputFormat::Geojson | crate::OutputFormat::Parquet => {
            return invalid(crate::format_refusal(args.format).unwrap_or_default().into())
        }
    };
    match &args.output {
        None => crate::write_out(&text, None),
        Some(path) => write_whole(path, &text),
    }
}

/// Writes `text` to a new file beside `path` and renames it into place: a failed run leaves no
/// half-written file.
fn write_whole(path: &Path, text: &str) -> ExitCode {
    match ringmain_core::output::write_text(path, text) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("error: cannot write the results to {}: {e}", path.display());
            ExitCode::from(EXIT_WRITE)
        }
    }
}

/// Results in the model's units.
struct View<'a> {
    model: &'a Model,
    units: Converter,
}

impl View<'_> {
    fn flow(&self, q: f64) -> f64 {
        self.units.from_si(Quantity::Flow, q)
    }
    fn pressure(&self, head: f64) -> f64 {
        self.units.from_si(Quantity::Pressure, head)
    }
    fn id(&self, i: usize) -> &str {
        &self.model.nodes()[i].id
    }

    fn json(&self, results: &[FireFlow], residual: f64, factor: f64) -> String {
        let u = &self.model.units;
        let rows: Vec<_> = results
            .iter()
            .map(|r| {
                json!({
                    "id": self.id(r.node),
                    "static_pressure": self.pressure(r.static_pressure),
                    "hydrant_limited": self.flow(r.hydrant_limited),
                    "system_limited": r.system_limited.map(|q| self.flow(q)),
                    "available": self.flow(r.available()),
                    "limit": r.limit.label(),
                    "limiting_node": r.limiting_node.map(|i| self.id(i)),
                    "notes": r.notes,
                })
            })
            .collect();
        let doc = json!({
            "title": self.model.title,
            "residual": self.pressure(residual),
            "demand_factor": factor,
            "flow_tolerance": self.flow(FLOW_TOLERANCE),
            "units": {"flow": u.flow.label(), "pressure": u.pressure.label()},
            "hydrants": rows,
            "caution": CAUTION,
        });
        serde_json::to_string_pretty(&doc).unwrap_or_default() + "\n"
    }

    fn csv(&self, results: &[FireFlow]) -> String {
        let u = &self.model.units;
        let mut out = format!(
            "id,static_pressure_{p},hydrant_limited_{q},system_limited_{q},available_{q},limit,limiting_node,notes\n",
            p = u.pressure,
            q = u.flow
        );
        let field = |s: &str| {
            if s.contains([',', '"', '\n']) {
                format!("\"{}\"", s.replace('"', "\"\""))
            } else {
                s.to_owned()
            }
        };
        for r in results {
            out.push_str(&format!(
                "{},{},{},{},{},{},{},{}\n",
                field(self.id(r.node)),
                self.pressure(r.static_pressure),
                self.flow(r.hydrant_limited),
                r.system_limited.map(|q| self.flow(q).to_string()).unwrap_or_default(),
                self.flow(r.available()),
                r.limit.label(),
                r.limiting_node.map(|i| field(self.id(i))).unwrap_or_default(),
                field(&r.notes.join("; ")),
            ));
        }
        out
    }

    fn table(&self, results: &[FireFlow], residual: f64, factor: f64) -> String {
        let u = &self.model.units;
        let mut out = format!(
            "Fire flow at a residual pressure of {:.1} {}, demands x {factor}\n\n",
            self.pressure(residual),
            u.pressure
        );
        let width = results.iter().map(|r| self.id(r.node).len()).max().unwrap_or(0).max(7);
        out.push_str(&format!(
            "{:<width$}  {:>10}  {:>12}  {:>12}  {:>12}  {:<8}  {}\n",
            "hydrant",
            format!("static {}", u.pressure),
            format!("hydrant {}", u.flow),
            format!("system {}", u.flow),
            format!("available {}", u.flow),
            "limit",
            "limiting node"
        ));
        for r in results {
            out.push_str(&format!(
                "{:<width$}  {:>10.2}  {:>12.2}  {:>12}  {:>12.2}  {:<8}  {}\n",
                self.id(r.node),
                self.pressure(r.static_pressure),
                self.flow(r.hydrant_limited),
                r.system_limited.map(|q| format!("{:.2}", self.flow(q))).unwrap_or_else(|| "none".into()),
                self.flow(r.available()),
                r.limit.label(),
                r.limiting_node.map(|i| self.id(i)).unwrap_or("-"),
            ));
            for note in &r.notes {
                out.push_str(&format!("{:<width$}  note: {note}\n", ""));
            }
        }
        out.push_str(&format!(
            "\nEvery flow is within {:.3} {} of the draw at which its limiting pressure equals the residual.\n",
            self.flow(FLOW_TOLERANCE),
            u.flow
        ));
        out.push('\n');
        out.push_str(CAUTION);
        out.push('\n');
        out
    }
}

const CAUTION: &str = "Results are only as good as the model and its data; designs must be checked by a licensed \
                       engineer against local codes and the utility's standards.";
