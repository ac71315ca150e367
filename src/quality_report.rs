//! The water-quality parts of the simulation reports: values in each reported node and link
//! entry, the summary per constituent (lowest and highest, where and when), the mass balance,
//! the segment counts and the criteria checked over the run.

use crate::simulation::RunReport;
use ringmain_core::quality::QualityRun;
use ringmain_core::NodeKind;
use serde_json::{json, Value};
use std::fmt::Write as _;

/// Extremes of one constituent over the run at junctions and tanks: (value, node, time).
#[allow(clippy::type_complexity)]
pub fn extremes(
    report: &RunReport<'_>,
    q: &QualityRun,
    c: usize,
) -> (Option<(f64, usize, f64)>, Option<(f64, usize, f64)>) {
    let mut lo: Option<(f64, usize, f64)> = None;
    let mut hi: Option<(f64, usize, f64)> = None;
    for r in &q.records {
        for (i, n) in report.model.nodes().iter().enumerate() {
            if matches!(n.kind, NodeKind::Reservoir { .. }) {
                continue;
            }
            let v = r.node[c][i];
            if !v.is_finite() {
                continue;
            }
            if lo.map_or(true, |(x, _, _)| v < x) {
                lo = Some((v, i, r.time));
            }
            if hi.map_or(true, |(x, _, _)| v > x) {
                hi = Some((v, i, r.time));
            }
        }
    }
    (lo, hi)
}

fn where_when(report: &RunReport<'_>, x: Option<(f64, usize, f64)>, scale: f64) -> Value {
    match x {
        Some((v, i, t)) => json!({
            "value": v * scale, "node": report.model.nodes()[i].id, "time_s": t, "when": report.when(t),
        }),
        None => Value::Null,
    }
}

/// Adds `summary.quality` and `criteria` to the JSON document.
pub fn add_to_json(report: &RunReport<'_>, doc: &mut Value) {
    if let Some(q) = report.quality {
        let constituents: Vec<Value> = q
            .constituents
            .iter()
            .enumerate()
            .map(|(c, con)| {
                let scale = con.report_scale();
                let (lo, hi) = extremes(report, q, c);
                let b = &q.balance[c];
                json!({
                    "id": con.id, "kind": con.kind.label(), "unit": con.report_unit(),
                    "lowest": where_when(report, lo, scale),
                    "highest": where_when(report, hi, scale),
                    "mass_balance": {
                        "unit": balance_unit(report, con),
                        "stored_start": report.volume(b.stored_start) * scale,
                        "inflow": report.volume(b.inflow) * scale,
                        "boosted": report.volume(b.boosted) * scale,
                        "reacted": report.volume(b.reacted) * scale,
                        "outflow": report.volume(b.outflow) * scale,
                        "stored_end": report.volume(b.stored_end) * scale,
                        "discrepancy": report.volume(b.discrepancy()) * scale,
                        "relative_discrepancy": b.relative_discrepancy(),
                    },
                })
            })
            .collect();
        doc["summary"]["quality"] = json!({
            "constituents": constituents,
            "segments": { "max": q.max_segments, "end": q.end_segments },
            "transport_steps": q.steps,
            "transport_step_s": q.transport_step,
        });
    }
    if !report.checks.is_empty() {
        let checks: Vec<Value> = report
            .checks
            .iter()
            .map(|c| {
                let scale = if c.quantity == ringmain_core::analysis::Quantity::Age { 1.0 / 3600.0 } else { 1.0 };
                json!({
                    "name": c.name, "passed": c.passed(), "limit": c.limit * scale,
                    "checked": c.checked, "failures": c.failures,
                    "worst": c.worst.iter().map(|f| json!({
                        "element": f.element.to_string(),
                        "id": element_id(&f.element),
                        "value": f.value * scale, "detail": f.detail,
                    })).collect::<Vec<_>>(),
                })
            })
            .collect();
        doc["criteria"] = Value::Array(checks);
    }
}

fn element_id(e: &ringmain_core::Element) -> Option<String> {
    match e {
        ringmain_core::Element::Node(id) | ringmain_core::Element::Link(id) => Some(id.clone()),
        _ => None,
    }
}

fn balance_unit(report: &RunReport<'_>, con: &ringmain_core::quality::Constituent) -> String {
    format!("{} x {}", con.report_unit(), report.volume_label())
}

/// The water-quality section of the table summary.
pub fn table(report: &RunReport<'_>, out: &mut String) {
    let Some(q) = report.quality else { return };
    let _ = writeln!(
        out,
        "\nWater quality ({} constituents; {} transport steps of at most {:.0} s; segments: at most {}, at the end {})",
        q.constituents.len(),
        q.steps,
        q.transport_step,
        q.max_segments,
        q.end_segments
    );
    let w = q.constituents.iter().map(|c| c.id.chars().count()).max().unwrap_or(2).max(2);
    for (c, con) in q.constituents.iter().enumerate() {
        let scale = con.report_scale();
        let unit = con.report_unit();
        let (lo, hi) = extremes(report, q, c);
        let show = |x: Option<(f64, usize, f64)>| match x {
            Some((v, i, t)) => {
                format!("{:.3} {unit} at '{}', {}", v * scale, report.model.nodes()[i].id, report.when(t))
            }
            None => "-".to_owned(),
        };
        let _ = writeln!(out, "{:<w$}  {:<9}  lowest  {}", con.id, con.kind.label(), show(lo));
        let _ = writeln!(out, "{:<w$}  {:<9}  highest {}", "", "", show(hi));
        let b = &q.balance[c];
        let v = |x: f64| report.volume(x) * scale;
        let _ = writeln!(
            out,
            "{:<w$}  {:<9}  mass balance ({}): start {:.4} + in {:.4} + boosted {:.4} + reacted {:.4} = out {:.4} + end {:.4}; \
             discrepancy {:.3e} (relative {:.1e})",
            "",
            "",
            balance_unit(report, con),
            v(b.stored_start),
            v(b.inflow),
            v(b.boosted),
            v(b.reacted),
            v(b.outflow),
            v(b.stored_end),
            v(b.discrepancy()),
            b.relative_discrepancy()
        );
    }
    if !report.checks.is_empty() {
        let _ = writeln!(out, "\nCriteria over the run");
        for c in &report.checks {
            let age = c.quantity == ringmain_core::analysis::Quantity::Age;
            let (scale, unit) = if age { (1.0 / 3600.0, "h".to_owned()) } else { (1.0, unit_of(q, &c.name)) };
            let verdict = if c.passed() { "PASS" } else { "FAIL" };
            let _ = writeln!(
                out,
                "  {verdict}  {} (limit {:.3} {unit}): {} of {} junctions break it",
                c.name,
                c.limit * scale,
                c.failures,
                c.checked
            );
            for f in &c.worst {
                let _ = writeln!(
                    out,
                    "        {:<28} {:.3} {unit} {}",
                    f.element.to_string(),
                    f.value * scale,
                    f.detail.as_deref().unwrap_or("")
                );
            }
        }
    }
}

fn unit_of(q: &QualityRun, name: &str) -> String {
    let id = name.strip_prefix("min_residual.").unwrap_or(name);
    q.constituents.iter().find(|c| c.id == id).map(|c| c.report_unit().to_owned()).unwrap_or_default()
}
