//! Writers of `ringmain check` results: a human report (worst first), JSON, and JUnit XML with
//! one test case per criterion and scenario. Values are written in the model's units.

use crate::check::{EXIT_FAILED, EXIT_NOT_CONVERGED};
use ringmain_core::analysis::criteria::{format_in_units, to_units};
use ringmain_core::analysis::{CheckResult, Criteria, Finding, Outcome, Quantity, Scenario};
use ringmain_core::error::{printable, Element};
use ringmain_core::warning::Warning;
use ringmain_core::Model;
use serde_json::{json, Value};
use std::fmt::Write as _;

/// Closures listed in the human report (all are in the JSON).
const CLOSURES_SHOWN: usize = 50;

/// Everything one check found.
pub struct Run<'a> {
    pub model_name: &'a str,
    pub criteria_name: Option<&'a str>,
    /// The what-if model (closures and demand factor applied).
    pub model: &'a Model,
    pub criteria: &'a Criteria,
    pub scenario: &'a Scenario,
    pub base: &'a Outcome,
    pub sweep: Option<&'a [(usize, Outcome)]>,
    pub warnings: &'a [Warning],
    pub notes: &'a [String],
    pub seconds: f64,
}

impl Run<'_> {
    fn outcomes(&self) -> impl Iterator<Item = &Outcome> {
        std::iter::once(self.base).chain(self.sweep.into_iter().flatten().map(|(_, o)| o))
    }

    /// 3 when a scenario did not solve (and the criteria ask it to), 1 when a criterion failed,
    /// 0 otherwise.
    pub fn exit_code(&self) -> u8 {
        let unsolved = self.outcomes().any(|o| !o.converged());
        if unsolved && self.criteria.must_converge {
            EXIT_NOT_CONVERGED
        } else if self.outcomes().any(|o| !o.passed()) {
            EXIT_FAILED
        } else {
            0
        }
    }

    fn density(&self) -> f64 {
        self.model.options.water_properties().density
    }

    fn value(&self, q: Quantity, si: f64) -> String {
        if si.is_finite() {
            format_in_units(q, si, &self.model.units, self.density())
        } else {
            "-".to_owned()
        }
    }

    fn scenario_label(&self) -> String {
        self.scenario.label(self.model)
    }

    fn closed_label(&self, link: usize) -> String {
        let mut s = format!("{} closed", printable(&self.model.links()[link].id));
        if !self.scenario.is_base() {
            s.push_str(&format!(" ({})", self.scenario_label()));
        }
        s
    }
}

fn exit_meaning(code: u8) -> &'static str {
    match code {
        0 => "all criteria met",
        1 => "a criterion failed",
        3 => "a scenario did not solve",
        _ => "invalid input",
    }
}

/// `min_pressure >= 20.00 m`.
fn criterion_text(run: &Run<'_>, c: &CheckResult) -> String {
    let op = if c.name.ends_with("min_pressure")
        || c.name == "min_tank_reserve"
        || c.name.starts_with("min_delivered")
        || c.name.ends_with("min_fire_flow")
    {
        ">="
    } else if c.name == "min_supply_margin" {
        return format!("{} (supply within capacity less the margin)", c.name);
    } else {
        "<="
    };
    if c.name.starts_with("min_delivered") {
        format!("{} {op} {:.3} % of the demand asked", c.name, c.limit)
    } else if c.limit.is_finite() && c.name != "all_demands_supplied" {
        format!("{} {op} {}", c.name, run.value(c.quantity, c.limit))
    } else {
        c.name.clone()
    }
}

/// What a criterion counts, in the singular or the plural to agree with `count` ("1 junction",
/// "2 junctions", "1 pipe carrying flow").
pub(crate) fn what_checked(c: &CheckResult, count: usize) -> &'static str {
    let (one, many) = match c.name.as_str() {
        "must_converge" => ("solve", "solves"),
        "all_demands_supplied" => ("junction with a demand", "junctions with a demand"),
        "max_velocity" => ("link carrying flow", "links carrying flow"),
        "max_headloss" => ("pipe carrying flow", "pipes carrying flow"),
        "min_supply_margin" => ("source with a capacity", "sources with a capacity"),
        "min_tank_reserve" => ("tank", "tanks"),
        n if n.starts_with("max_age") || n.starts_with("min_residual") => {
            ("junction over the run", "junctions over the run")
        }
        n if n.starts_with("warnings.") => ("warning", "warnings"),
        _ => ("junction", "junctions"),
    };
    if count == 1 {
        one
    } else {
        many
    }
}

fn finding_text(run: &Run<'_>, c: &CheckResult, f: &Finding) -> String {
    if let Some(d) = &f.detail {
        if c.name == "all_demands_supplied" {
            return format!("{:<24} {} not supplied", f.element.to_string(), run.value(Quantity::Flow, f.value));
        }
        if !f.value.is_finite() {
            return format!("{}: {d}", f.element);
        }
    }
    let when = f.detail.as_deref().map(|d| format!(" {d}")).unwrap_or_default();
    format!(
        "{:<24} {:>14}  (limit {}, off by {}){when}",
        f.element.to_string(),
        run.value(c.quantity, f.value),
        run.value(c.quantity, f.limit),
        run.value(c.quantity, f.excess)
    )
}

/// A one-line summary of a failed criterion, for closures.
fn short_failure(run: &Run<'_>, c: &CheckResult) -> String {
    match (c.name.as_str(), c.worst.first()) {
        ("must_converge", Some(f)) => format!("did not solve: {}", f.detail.as_deref().unwrap_or("")),
        ("all_demands_supplied", _) => format!(
            "all_demands_supplied ({} {} cut off)",
            c.failures,
            if c.failures == 1 { "junction" } else { "junctions" }
        ),
        (_, Some(f)) if f.value.is_finite() => {
            format!(
                "{} ({} of {}, worst {} {})",
                c.name,
                c.failures,
                c.checked,
                f.element,
                run.value(c.quantity, f.value)
            )
        }
        _ => format!("{} ({})", c.name, c.failures),
    }
}

/// Sort key of a closure: did not solve, then lost demand (with `[pressure_demand]`: the
/// shortfall the closure causes, cut-off junctions included), then failed criteria; worst first.
fn severity(run: &Run<'_>, o: &Outcome) -> (bool, f64, usize, usize) {
    let lost = if pressure_dependent(run) { caused_shortfall(run, o) } else { o.lost_supply.demand };
    (!o.converged(), lost, o.failed().count(), o.lost_supply.count)
}

/// Whether the model's demands follow pressure (then a sweep ranks by shortfall).
fn pressure_dependent(run: &Run<'_>) -> bool {
    run.model.outflow.pressure_demand.is_some()
}

/// The shortfall a closure adds to the base case's, m³/s.
fn caused_shortfall(run: &Run<'_>, o: &Outcome) -> f64 {
    if o.converged() {
        o.shortfall - run.base.shortfall
    } else {
        0.0
    }
}

/// The closures a sweep lists, in sweep order: those that break a criterion, cut off supply, or
/// (with `[pressure_demand]`) take away more than a millionth of the demand asked.
fn listed<'o>(run: &Run<'_>, sweep: &'o [(usize, Outcome)]) -> Vec<(usize, &'o Outcome)> {
    let asked: f64 = run.model.nodes().iter().map(|n| n.demand().max(0.0)).sum();
    let floor = 1e-6 * asked.max(1e-9);
    let shown = |o: &Outcome| {
        !o.passed() || o.lost_supply.count > 0 || (pressure_dependent(run) && caused_shortfall(run, o) > floor)
    };
    sweep.iter().filter(|(_, o)| shown(o)).map(|(k, o)| (*k, o)).collect()
}

fn worst_first(run: &Run<'_>, a: &(usize, &Outcome), b: &(usize, &Outcome)) -> std::cmp::Ordering {
    let (sa, sb) = (severity(run, a.1), severity(run, b.1));
    sb.0.cmp(&sa.0).then(sb.1.total_cmp(&sa.1)).then(sb.2.cmp(&sa.2)).then(sb.3.cmp(&sa.3)).then(a.0.cmp(&b.0))
}

fn outcome_section(out: &mut String, run: &Run<'_>, o: &Outcome) {
    if let (Some(e), false) = (&o.error, run.criteria.must_converge) {
        let _ = writeln!(out, "  note: no usable answer (must_converge = false): {e}");
    }
    for c in o.checks.iter().filter(|c| !c.passed()) {
        let _ = writeln!(
            out,
            "  FAIL {}: {} of {} {}",
            criterion_text(run, c),
            c.failures,
            c.checked,
            what_checked(c, c.checked)
        );
        for f in &c.worst {
            let _ = writeln!(out, "       {}", finding_text(run, c, f));
        }
        if c.failures > c.worst.len() {
            let _ = writeln!(out, "       ... and {} more", c.failures - c.worst.len());
        }
    }
    for c in o.checks.iter().filter(|c| c.passed()) {
        let _ = writeln!(out, "  pass {} ({} {})", criterion_text(run, c), c.checked, what_checked(c, c.checked));
    }
}

/// The human report.
pub fn to_table(run: &Run<'_>, code: u8) -> String {
    let mut out = String::new();
    let _ = write!(out, "ringmain check: {}", run.model_name);
    if let Some(c) = run.criteria_name {
        let _ = write!(out, " (criteria from {c})");
    }
    out.push('\n');
    if let Some(t) = &run.model.title {
        let _ = writeln!(out, "{t}");
    }
    let _ = writeln!(out, "\nScenario: {}", run.scenario_label());
    let failed = run.base.failed().count();
    if failed == 0 {
        let _ = writeln!(out, "  passed, {} criteria", run.base.checks.len());
    } else {
        let _ = writeln!(out, "  FAILED, {failed} of {} criteria", run.base.checks.len());
    }
    outcome_section(&mut out, run, run.base);

    if let Some(sweep) = run.sweep {
        let failing = listed(run, sweep);
        let broken = sweep.iter().filter(|(_, o)| !o.passed()).count();
        let unsolved = sweep.iter().filter(|(_, o)| !o.converged()).count();
        let cut = sweep.iter().filter(|(_, o)| o.lost_supply.count > 0).count();
        let repeated: usize = sweep.iter().map(|(_, o)| o.repeated_from_base).sum();
        let _ = writeln!(
            out,
            "\nEach pipe closed in turn: {} closures; {cut} cut off supply, {broken} break a criterion the base case \
             meets, {unsolved} did not solve",
            sweep.len()
        );
        let _ = writeln!(
            out,
            "  (relative to the base case: failures it already has are not repeated{}; worst first: no \
             answer, then {}, then new failures)",
            if repeated > 0 { format!(", {repeated} finding(s) left out") } else { String::new() },
            if pressure_dependent(run) { "the shortfall of demand caused" } else { "supply lost" }
        );
        let mut sorted = failing.clone();
        sorted.sort_by(|a, b| worst_first(run, a, b));
        for (k, o) in sorted.iter().take(CLOSURES_SHOWN) {
            let id = printable(&run.model.links()[*k].id);
            let mut parts: Vec<String> = o.failed().map(|c| short_failure(run, c)).collect();
            if parts.is_empty() {
                parts.push("criteria met".into());
            }
            let _ = writeln!(out, "  {id:<16} {}", parts.join("; "));
            if pressure_dependent(run) && o.converged() {
                let _ = writeln!(
                    out,
                    "  {:<16} shortfall caused: {} of demand not delivered (cut off or short of pressure)",
                    "",
                    run.value(Quantity::Flow, caused_shortfall(run, o))
                );
            }
            if o.lost_supply.count > 0 {
                let names: Vec<String> =
                    o.lost_supply.nodes.iter().map(|&i| printable(&run.model.nodes()[i].id)).collect();
                let more = o.lost_supply.count - o.lost_supply.nodes.len();
                let _ = writeln!(
                    out,
                    "  {:<16} supply lost at {} node(s) ({} junction(s) with a demand), {} of demand: {}{}",
                    "",
                    o.lost_supply.count,
                    o.lost_supply.with_demand,
                    run.value(Quantity::Flow, o.lost_supply.demand),
                    names.join(", "),
                    if more > 0 { format!(" and {more} more") } else { String::new() }
                );
            }
        }
        if sorted.len() > CLOSURES_SHOWN {
            let _ =
                writeln!(out, "  ... and {} more closures (all are in --format json)", sorted.len() - CLOSURES_SHOWN);
        }
    }

    if !run.warnings.is_empty() {
        let _ = writeln!(out, "\nWarnings ({})", run.warnings.len());
        for w in run.warnings {
            match &w.element {
                Some(e) => writeln!(out, "  {}: {e}: {}", w.kind.code(), w.message),
                None => writeln!(out, "  {}: {}", w.kind.code(), w.message),
            }
            .ok();
        }
    }
    if !run.notes.is_empty() {
        let _ = writeln!(out, "\nNotes");
        for n in run.notes {
            let _ = writeln!(out, "  {n}");
        }
    }
    let verdict = if code == 0 { "PASSED" } else { "FAILED" };
    let _ = writeln!(out, "\nResult: {verdict} (exit {code}: {}) in {:.2} s", exit_meaning(code), run.seconds);
    let _ = writeln!(
        out,
        "\nResults are only as good as the model and its data; designs must be checked by a licensed engineer\n\
         against local codes and the utility's standards."
    );
    out
}

fn element_json(e: &Element) -> Value {
    match e {
        Element::Node(id) => json!({"node": id}),
        Element::Link(id) => json!({"link": id}),
        other => json!({"element": other.to_string()}),
    }
}

fn num_or_null(v: f64) -> Value {
    if v.is_finite() {
        json!(v)
    } else {
        Value::Null
    }
}

fn check_json(run: &Run<'_>, c: &CheckResult) -> Value {
    let u = |si: f64| num_or_null(to_units(c.quantity, si, &run.model.units, run.density()).0);
    let unit = to_units(c.quantity, 0.0, &run.model.units, run.density()).1;
    json!({
        "name": c.name,
        "passed": c.passed(),
        "limit": u(c.limit),
        "unit": unit,
        "checked": c.checked,
        "failures": c.failures,
        "worst": c.worst.iter().map(|f| {
            let mut v = element_json(&f.element);
            v["value"] = u(f.value);
            v["limit"] = u(f.limit);
            if let Some(d) = &f.detail {
                v["detail"] = json!(d);
            }
            v
        }).collect::<Vec<_>>(),
    })
}

fn outcome_json(run: &Run<'_>, o: &Outcome) -> Value {
    let mut v = json!({
        "passed": o.passed(),
        "converged": o.converged(),
        "iterations": o.iterations,
        "checks": o.checks.iter().map(|c| check_json(run, c)).collect::<Vec<_>>(),
    });
    if let Some(e) = &o.error {
        v["error"] = json!(e.to_string());
    }
    if pressure_dependent(run) && o.converged() {
        v["shortfall"] = json!(run.model.units.flow.from_si(o.shortfall));
    }
    if o.lost_supply.count > 0 {
        v["lost_supply"] = json!({
            "count": o.lost_supply.count,
            "junctions_with_demand": o.lost_supply.with_demand,
            "demand": run.model.units.flow.from_si(o.lost_supply.demand),
            "nodes": o.lost_supply.nodes.iter().map(|&i| &run.model.nodes()[i].id).collect::<Vec<_>>(),
        });
    }
    v
}

/// The JSON report.
pub fn to_json(run: &Run<'_>, code: u8) -> Value {
    let u = &run.model.units;
    let base = outcome_json(run, run.base);
    let mut v = json!({
        "model": run.model_name,
        "criteria_file": run.criteria_name,
        "title": run.model.title,
        "units": {
            "pressure": u.pressure.label(), "velocity": u.velocity_label(), "flow": u.flow.label(),
            "length": u.length.label(),
        },
        "scenario": {
            "label": run.scenario_label(),
            "closed": run.scenario.statuses.iter().map(|&(k, _)| run.model.links()[k].id.as_str()).collect::<Vec<_>>(),
            "demand_factor": run.scenario.demand_factor,
        },
        "base": base,
        "warnings": run.warnings.iter().map(|w| {
            let mut v = w.element.as_ref().map_or_else(|| json!({}), element_json);
            v["code"] = json!(w.kind.code());
            v["key"] = json!(w.key);
            v["message"] = json!(w.message);
            v
        }).collect::<Vec<_>>(),
        "notes": run.notes,
        "passed": code == 0,
        "exit_code": code,
    });
    if let Some(sweep) = run.sweep {
        let mut listed = listed(run, sweep);
        listed.sort_by(|a, b| worst_first(run, a, b));
        v["each_pipe_closed"] = json!({
            "closures": sweep.len(),
            "failed": sweep.iter().filter(|(_, o)| !o.passed()).count(),
            "lost_supply": sweep.iter().filter(|(_, o)| o.lost_supply.count > 0).count(),
            "relative_to_base": true,
            "repeated_from_base": sweep.iter().map(|(_, o)| o.repeated_from_base).sum::<usize>(),
            "not_converged": sweep.iter().filter(|(_, o)| !o.converged()).count(),
            "results": listed.iter().map(|(k, o)| {
                let mut r = outcome_json(run, o);
                r["closed"] = json!(run.model.links()[*k].id);
                r["repeated_from_base"] = json!(o.repeated_from_base);
                if pressure_dependent(run) {
                    r["shortfall_caused"] = json!(run.model.units.flow.from_si(caused_shortfall(run, o)));
                }
                r["checks"] = json!(o.failed().map(|c| check_json(run, c)).collect::<Vec<_>>());
                r
            }).collect::<Vec<_>>(),
        });
    }
    v
}

/// Escapes text for XML 1.0 (control characters, which XML cannot hold, become `\u{..}`).
fn xml(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            '\n' | '\t' => out.push(c),
            c if c.is_control() => out.push_str(&c.escape_unicode().to_string()),
            c => out.push(c),
        }
    }
    out
}

fn testcase(out: &mut String, run: &Run<'_>, class: &str, c: &CheckResult) {
    let _ = write!(out, "    <testcase classname=\"{}\" name=\"{}\"", xml(class), xml(&c.name));
    if c.passed() {
        out.push_str("/>\n");
        return;
    }
    let first = c.worst.first().map(|f| format!("; worst {}", f.element)).unwrap_or_default();
    let message =
        format!("{}: {} of {} {}{first}", criterion_text(run, c), c.failures, c.checked, what_checked(c, c.checked));
    let _ = writeln!(out, ">\n      <failure type=\"{}\" message=\"{}\">", xml(&c.name), xml(&message));
    for f in &c.worst {
        let _ = writeln!(out, "{}", xml(&finding_text(run, c, f)));
    }
    if c.failures > c.worst.len() {
        let _ = writeln!(out, "... and {} more", c.failures - c.worst.len());
    }
    out.push_str("      </failure>\n    </testcase>\n");
}

/// A JUnit class name `<model>.<scenario>` with exactly one dot: CI viewers split class names
/// at dots into packages, so the dots of a file name (`net.toml`) or of a scenario label
/// (`demand x1.5`, a pipe id `P1.2`) become `_`, and a path keeps only its file name.
fn junit_class(model_name: &str, scenario: &str) -> String {
    let file = std::path::Path::new(model_name).file_name().map_or(model_name.into(), |f| f.to_string_lossy());
    let part = |s: &str| s.replace('.', "_");
    format!("{}.{}", part(&file), part(scenario))
}

/// The JUnit XML report: a test suite for the scenario and one for the sweep, one test case per
/// criterion and scenario.
pub fn to_junit(run: &Run<'_>) -> String {
    let mut suites = String::new();
    let (mut tests, mut failures) = (0usize, 0usize);
    let mut suite = |name: String, cases: Vec<(String, &CheckResult)>| {
        let n = cases.len();
        let f = cases.iter().filter(|(_, c)| !c.passed()).count();
        tests += n;
        failures += f;
        let _ = writeln!(suites, "  <testsuite name=\"{}\" tests=\"{n}\" failures=\"{f}\" errors=\"0\">", xml(&name));
        for (class, c) in cases {
            testcase(&mut suites, run, &class, c);
        }
        suites.push_str("  </testsuite>\n");
    };
    let base_class = junit_class(run.model_name, &run.scenario_label());
    suite(
        format!("{}: {}", run.model_name, run.scenario_label()),
        run.base.checks.iter().map(|c| (base_class.clone(), c)).collect(),
    );
    if let Some(sweep) = run.sweep {
        let cases: Vec<(String, &CheckResult)> = sweep
            .iter()
            .flat_map(|(k, o)| {
                let class = junit_class(run.model_name, &run.closed_label(*k));
                o.checks.iter().map(move |c| (class.clone(), c))
            })
            .collect();
        suite(format!("{}: each pipe closed", run.model_name), cases);
    }
    format!(
        "<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n<testsuites name=\"ringmain check\" tests=\"{tests}\" \
         failures=\"{failures}\" errors=\"0\" time=\"{:.3}\">\n{suites}</testsuites>\n",
        run.seconds
    )
}
