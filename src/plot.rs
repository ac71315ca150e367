//! SVG charts of a simulation, written by hand: tank levels, pump flows and states, and the
//! pressures of the worst nodes, over the run. Low-tariff hours are shaded on every chart.
//!
//! Switch-overs are drawn as steps at the instants they happen, not as ramps between reported
//! times: a pump started or stopped by a control or a full tank, a tank at a limit, a speed or
//! a price pattern changing its multiplier. Between two reported times with such an instant
//! inside, a stepped quantity keeps its earlier reported value up to the instant and takes its
//! later one from there (the run reports no value at the instant itself); the price and the
//! low-tariff shading are drawn from the tariff pattern itself, exact at every boundary.
//! Thresholds are drawn as dashed lines: tank limits and the levels at which controls act on
//! the tank chart, the pressure criteria and the pressures at which controls act on the
//! pressure chart, a water-quality criterion on its chart. Every axis carries its unit.

use crate::simulation::RunReport;
use ringmain_core::model::time::{format_clock, Condition, DAY, HOUR};
use ringmain_core::simulate::EventKind;
use std::fmt::Write as _;
use std::path::Path;

const WIDTH: f64 = 1120.0;
const LEFT: f64 = 72.0;
/// Room for the legend, whose labels name controls, nodes and thresholds.
const RIGHT: f64 = 350.0;
const TOP_TITLE: f64 = 44.0;
const PANEL_GAP: f64 = 46.0;
const BOTTOM: f64 = 40.0;
const PALETTE: [&str; 6] = ["#1d5fa8", "#c8412b", "#2f8f46", "#7a4fa3", "#d08a12", "#4a4a4a"];
const TARIFF_FILL: &str = "#f3ead0";
/// The label of every time axis.
const TIME_AXIS: &str = "time (clock hh:mm; day n at midnight)";

/// A line on a panel.
struct Line {
    label: String,
    color: &'static str,
    points: Vec<(f64, f64)>,
    dash: bool,
    width: f64,
}

/// A shaded stretch of time on a panel (x in hours).
struct Band {
    x0: f64,
    x1: f64,
    color: &'static str,
}

/// A row of on/off bars: label, colour, the stretches (hours) when on.
type Strip = (String, &'static str, Vec<(f64, f64)>);

/// One panel: lines against time, optional bands and a legend.
struct Panel {
    title: String,
    y_label: String,
    height: f64,
    lines: Vec<Line>,
    bands: Vec<(String, Vec<Band>)>,
    /// Fixed y range (else from the data).
    y_range: Option<(f64, f64)>,
    /// A strip of on/off rows instead of lines: (label, color, running stretches).
    strips: Vec<Strip>,
}

impl Panel {
    fn new(title: impl Into<String>, y_label: impl Into<String>) -> Self {
        Panel {
            title: title.into(),
            y_label: y_label.into(),
            height: 220.0,
            lines: Vec::new(),
            bands: Vec::new(),
            y_range: None,
            strips: Vec::new(),
        }
    }
}

pub(crate) fn esc(text: &str) -> String {
    text.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;")
}

/// Tick spacing of about `target` ticks over `span`: 1, 2 or 5 times a power of ten.
pub(crate) fn nice_step(span: f64, target: f64) -> f64 {
    let raw = (span / target).max(1e-12);
    let mag = 10f64.powf(raw.log10().floor());
    let f = raw / mag;
    let nice = if f <= 1.0 {
        1.0
    } else if f <= 2.0 {
        2.0
    } else if f <= 5.0 {
        5.0
    } else {
        10.0
    };
    nice * mag
}

struct Chart {
    title: String,
    subtitle: String,
    hours: f64,
    start_clock: f64,
    panels: Vec<Panel>,
    tariff: Vec<(f64, f64)>,
}

impl Chart {
    fn render(&self) -> String {
        let plot_w = WIDTH - LEFT - RIGHT;
        let total_h: f64 = TOP_TITLE + self.panels.iter().map(|p| p.height + PANEL_GAP).sum::<f64>() + BOTTOM;
        let mut s = String::new();
        let _ = writeln!(
            s,
            r#"<svg xmlns="http://www.w3.org/2000/svg" width="{WIDTH}" height="{total_h}" viewBox="0 0 {WIDTH} {total_h}" font-family="DejaVu Sans, Helvetica, Arial, sans-serif" font-size="12" data-plot-left="{LEFT}" data-plot-width="{plot_w}" data-hours="{}">"#,
            self.hours
        );
        let _ = writeln!(s, r#"<rect width="100%" height="100%" fill="white"/>"#);
        let _ = writeln!(s, r#"<text x="{LEFT}" y="22" font-size="16" font-weight="bold">{}</text>"#, esc(&self.title));
        let _ = writeln!(s, r##"<text x="{LEFT}" y="38" fill="#555">{}</text>"##, esc(&self.subtitle));
        let x_of = |h: f64| LEFT + plot_w * h / self.hours.max(1e-9);
        let mut top = TOP_TITLE + 24.0;
        for panel in &self.panels {
            let bottom = top + panel.height;
            let _ = writeln!(
                s,
                r#"<text x="{LEFT}" y="{}" font-size="13" font-weight="bold">{}</text>"#,
                top - 8.0,
                esc(&panel.title)
            );
            // Tariff shading and panel bands.
            for &(a, b) in &self.tariff {
                let _ = writeln!(
                    s,
                    r#"<rect x="{:.1}" y="{top:.1}" width="{:.1}" height="{:.1}" fill="{TARIFF_FILL}"/>"#,
                    x_of(a),
                    (x_of(b) - x_of(a)).max(0.5),
                    panel.height
                );
            }
            for (_, bands) in &panel.bands {
                for b in bands {
                    let _ = writeln!(
                        s,
                        r#"<rect x="{:.1}" y="{top:.1}" width="{:.1}" height="{:.1}" fill="{}" fill-opacity="0.35"/>"#,
                        x_of(b.x0),
                        (x_of(b.x1) - x_of(b.x0)).max(0.5),
                        panel.height,
                        b.color
                    );
                }
            }
            // Time axis: grid, ticks and clock labels.
            let tick = if self.hours <= 12.0 {
                1.0
            } else if self.hours <= 24.0 {
                3.0
            } else if self.hours <= 72.0 {
                6.0
            } else {
                24.0
            };
            let mut h = ((self.start_clock / HOUR) / tick).ceil() * tick - self.start_clock / HOUR;
            while h <= self.hours + 1e-9 {
                let x = x_of(h);
                let clock = self.start_clock + h * HOUR;
                let midnight = (clock / DAY).fract().abs() < 1e-9 || (clock / DAY).fract() > 1.0 - 1e-9;
                let (stroke, w) = if midnight { ("#999", 1.2) } else { ("#e2e2e2", 1.0) };
                let _ = writeln!(
                    s,
                    r#"<line x1="{x:.1}" y1="{top:.1}" x2="{x:.1}" y2="{bottom:.1}" stroke="{stroke}" stroke-width="{w}"/>"#
                );
                let label =
                    if midnight { format!("day {}", (clock / DAY).round() as i64 + 1) } else { format_clock(clock) };
                let _ = writeln!(
                    s,
                    r##"<text x="{x:.1}" y="{:.1}" text-anchor="middle" fill="#333">{label}</text>"##,
                    bottom + 15.0
                );
                h += tick;
            }
            let _ = writeln!(
                s,
                r##"<text class="x-axis" x="{:.1}" y="{:.1}" text-anchor="middle" fill="#333">{}</text>"##,
                LEFT + plot_w / 2.0,
                bottom + 30.0,
                esc(TIME_AXIS)
            );
            if panel.strips.is_empty() {
                self.render_lines(&mut s, panel, top, x_of);
            } else {
                self.render_strips(&mut s, panel, top, x_of);
            }
            let _ = writeln!(
                s,
                r##"<rect x="{LEFT}" y="{top:.1}" width="{plot_w:.1}" height="{:.1}" fill="none" stroke="#444"/>"##,
                panel.height
            );
            // Legend.
            let mut ly = top + 12.0;
            let lx = LEFT + plot_w + 14.0;
            for line in &panel.lines {
                let dash = if line.dash { r#" stroke-dasharray="6 4""# } else { "" };
                let _ = writeln!(
                    s,
                    r#"<line x1="{lx}" y1="{ly}" x2="{}" y2="{ly}" stroke="{}" stroke-width="{}"{dash}/>"#,
                    lx + 22.0,
                    line.color,
                    line.width.max(2.0)
                );
                let _ = writeln!(s, r#"<text x="{}" y="{}">{}</text>"#, lx + 28.0, ly + 4.0, esc(&line.label));
                ly += 18.0;
            }
            for (label, bands) in &panel.bands {
                if let Some(b) = bands.first() {
                    let _ = writeln!(
                        s,
                        r#"<rect x="{lx}" y="{}" width="22" height="10" fill="{}" fill-opacity="0.35"/>"#,
                        ly - 5.0,
                        b.color
                    );
                    let _ = writeln!(s, r#"<text x="{}" y="{}">{}</text>"#, lx + 28.0, ly + 4.0, esc(label));
                    ly += 18.0;
                }
            }
            if !self.tariff.is_empty() {
                let _ = writeln!(
                    s,
                    r##"<rect x="{lx}" y="{}" width="22" height="10" fill="{TARIFF_FILL}" stroke="#d9c89a"/>"##,
                    ly - 5.0
                );
                let _ = writeln!(s, r#"<text x="{}" y="{}">low tariff</text>"#, lx + 28.0, ly + 4.0);
            }
            top = bottom + PANEL_GAP;
        }
        let _ = writeln!(s, "</svg>");
        s
    }

    fn render_lines(&self, s: &mut String, panel: &Panel, top: f64, x_of: impl Fn(f64) -> f64) {
        let plot_w = WIDTH - LEFT - RIGHT;
        let values = panel.lines.iter().flat_map(|l| l.points.iter().map(|p| p.1)).filter(|v| v.is_finite());
        let (mut lo, mut hi) = panel
            .y_range
            .unwrap_or_else(|| values.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| (a.min(v), b.max(v))));
        if !(lo.is_finite() && hi.is_finite()) {
            (lo, hi) = (0.0, 1.0);
        }
        if hi - lo < 1e-9 {
            (lo, hi) = (lo - 1.0, hi + 1.0);
        }
        if panel.y_range.is_none() {
            let pad = 0.06 * (hi - lo);
            (lo, hi) = (lo - pad, hi + pad);
        }
        let step = nice_step(hi - lo, 5.0);
        let y_of = |v: f64| top + panel.height * (1.0 - (v - lo) / (hi - lo));
        let mut v = (lo / step).ceil() * step;
        while v <= hi + 1e-9 {
            let y = y_of(v);
            let _ = writeln!(
                s,
                r##"<line x1="{LEFT}" y1="{y:.1}" x2="{:.1}" y2="{y:.1}" stroke="#e2e2e2"/>"##,
                LEFT + plot_w
            );
            let digits = if step >= 1.0 { 0 } else { (-step.log10().floor()) as usize };
            // No "-0" from round-off at zero.
            let shown = if v.abs() < step * 1e-6 { 0.0 } else { v };
            let _ = writeln!(
                s,
                r##"<text x="{:.1}" y="{:.1}" text-anchor="end" fill="#333">{shown:.digits$}</text>"##,
                LEFT - 6.0,
                y + 4.0
            );
            v += step;
        }
        let mid = top + panel.height / 2.0;
        let _ = writeln!(
            s,
            r##"<text class="y-axis" x="16" y="{mid:.1}" text-anchor="middle" transform="rotate(-90 16 {mid:.1})" fill="#333">{}</text>"##,
            esc(&panel.y_label)
        );
        for line in &panel.lines {
            let mut d = String::new();
            let mut pen_up = true;
            for &(x, y) in &line.points {
                if !y.is_finite() {
                    pen_up = true;
                    continue;
                }
                let yy = y_of(y.clamp(lo, hi));
                let _ = write!(d, "{}{:.1},{:.1} ", if pen_up { "M" } else { "L" }, x_of(x), yy);
                pen_up = false;
            }
            let dash = if line.dash { r#" stroke-dasharray="6 4""# } else { "" };
            let _ = writeln!(
                s,
                r#"<path data-label="{}" d="{}" fill="none" stroke="{}" stroke-width="{}" stroke-linejoin="round"{dash}/>"#,
                esc(&line.label),
                d.trim_end(),
                line.color,
                line.width
            );
        }
    }

    fn render_strips(&self, s: &mut String, panel: &Panel, top: f64, x_of: impl Fn(f64) -> f64) {
        let rows = panel.strips.len() as f64;
        let row_h = panel.height / rows;
        let mid = top + panel.height / 2.0;
        let _ = writeln!(
            s,
            r##"<text class="y-axis" x="16" y="{mid:.1}" text-anchor="middle" transform="rotate(-90 16 {mid:.1})" fill="#333">{}</text>"##,
            esc(&panel.y_label)
        );
        for (r, (label, color, runs)) in panel.strips.iter().enumerate() {
            let y = top + r as f64 * row_h;
            let _ = writeln!(
                s,
                r##"<text x="{:.1}" y="{:.1}" text-anchor="end" fill="#333">{}</text>"##,
                LEFT - 6.0,
                y + row_h / 2.0 + 4.0,
                esc(label)
            );
            for &(a, b) in runs {
                let _ = writeln!(
                    s,
                    r#"<rect data-strip="{}" data-from-h="{a}" data-to-h="{b}" x="{:.1}" y="{:.1}" width="{:.1}" height="{:.1}" fill="{color}"/>"#,
                    esc(label),
                    x_of(a),
                    y + row_h * 0.2,
                    (x_of(b) - x_of(a)).max(0.8),
                    row_h * 0.6
                );
            }
        }
    }
}

/// The first switch-over instant in `(a, b]` (hours; `switches` sorted).
fn switch_in(switches: &[f64], a: f64, b: f64) -> Option<f64> {
    let eps = 1e-9 * b.abs().max(1.0);
    let i = switches.partition_point(|&s| s <= a + eps);
    switches.get(i).copied().filter(|&s| s <= b + eps)
}

/// Stretches (in hours) where `on(i)` holds over the reported times; a change between two
/// reported times happens at the first switch-over instant between them (else at the later
/// reported time).
fn stretches(times: &[f64], switches: &[f64], on: impl Fn(usize) -> bool) -> Vec<(f64, f64)> {
    let mut out = Vec::new();
    let mut start = None;
    for (i, &t) in times.iter().enumerate() {
        let at = if i > 0 { switch_in(switches, times[i - 1], t).unwrap_or(t) } else { t };
        match (on(i), start) {
            (true, None) => start = Some(at),
            (false, Some(a)) => {
                out.push((a, at));
                start = None;
            }
            _ => {}
        }
    }
    if let (Some(a), Some(&end)) = (start, times.last()) {
        out.push((a, end));
    }
    out
}

/// A quantity over the reported times as points of a line, stepped at the switch-over instants
/// (hours, sorted): between two reported times with an instant inside, the earlier value holds
/// up to the instant and the later one from there.
fn stepped(times: &[f64], values: &[f64], switches: &[f64]) -> Vec<(f64, f64)> {
    let mut out = Vec::with_capacity(times.len() + 2 * switches.len());
    for (i, (&t, &v)) in times.iter().zip(values).enumerate() {
        if i > 0 {
            if let Some(s) = switch_in(switches, times[i - 1], t) {
                out.push((s, values[i - 1]));
                out.push((s, v));
            }
        }
        out.push((t, v));
    }
    out
}

/// The instants (hours from the start, sorted) within the run where pattern `p` changes its
/// multiplier.
fn pattern_changes(report: &RunReport<'_>, p: usize) -> Vec<f64> {
    let pattern = &report.model.time.patterns[p];
    let (start, end) = (report.run.start_clock, report.run.start_clock + report.run.duration);
    let mut out = Vec::new();
    let mut clock = start;
    loop {
        let next = pattern.next_boundary(clock);
        if next.is_nan() || next >= end || next <= clock {
            break;
        }
        if pattern.at(next) != pattern.at(clock) {
            out.push((next - start) / HOUR);
        }
        clock = next;
    }
    out
}

/// The energy price as a step function over the run (hours, price per kWh), exact at every
/// boundary of the tariff pattern.
fn price_steps(report: &RunReport<'_>) -> Vec<(f64, f64)> {
    let e = &report.model.time.energy;
    let price_at = |h: f64| {
        let clock = report.run.start_clock + h * HOUR;
        e.price * e.tariff.map_or(1.0, |p| report.model.time.patterns[p].at(clock))
    };
    let changes = e.tariff.map(|p| pattern_changes(report, p)).unwrap_or_default();
    let mut out = vec![(0.0, price_at(0.0))];
    for &h in &changes {
        out.push((h, out.last().map_or(0.0, |p| p.1)));
        out.push((h, price_at(h)));
    }
    out.push((report.hours(), out.last().map_or(0.0, |p| p.1)));
    out
}

/// The instants (hours, sorted) where link `k` may switch: controls acting on it, tanks at a
/// limit closing it or released, its speed pattern changing.
fn link_switches(report: &RunReport<'_>, k: usize) -> Vec<f64> {
    let model = report.model;
    let l = &model.links()[k];
    let mut out: Vec<f64> = report
        .run
        .events
        .iter()
        .filter(|e| match &e.kind {
            EventKind::Control { link, .. } => *link == k,
            EventKind::TankFull { closed, .. } | EventKind::TankEmpty { closed, .. } => closed.contains(&k),
            EventKind::TankReleased { tank } => *tank == l.from || *tank == l.to,
            _ => false,
        })
        .map(|e| e.time / HOUR)
        .collect();
    if let Some(&p) = model.time.speed_patterns.get(&k) {
        out.extend(pattern_changes(report, p));
    }
    out.sort_by(f64::total_cmp);
    out
}

/// Every switch-over instant of the run (hours, sorted): every event, every change of a speed
/// pattern. Pressures jump at each.
fn all_switches(report: &RunReport<'_>) -> Vec<f64> {
    let mut out: Vec<f64> = report.run.events.iter().map(|e| e.time / HOUR).collect();
    for &p in report.model.time.speed_patterns.values() {
        out.extend(pattern_changes(report, p));
    }
    out.sort_by(f64::total_cmp);
    out.dedup();
    out
}

/// The switch-over instants of tank `node` reaching or leaving a limit (hours, sorted).
fn tank_switches(report: &RunReport<'_>, node: usize) -> Vec<f64> {
    report
        .run
        .events
        .iter()
        .filter(|e| match &e.kind {
            EventKind::TankFull { tank, .. } | EventKind::TankEmpty { tank, .. } | EventKind::TankReleased { tank } => {
                *tank == node
            }
            _ => false,
        })
        .map(|e| e.time / HOUR)
        .collect()
}

/// Thresholds of the controls' conditions: `(control id, node, value in m, above)` for every
/// tank level (`tank = true`) or node pressure condition, nested ones included.
fn control_thresholds(report: &RunReport<'_>, tank: bool) -> Vec<(String, usize, f64, bool)> {
    fn walk(c: &Condition, tank: bool, id: &str, out: &mut Vec<(String, usize, f64, bool)>) {
        match *c {
            Condition::LevelAbove { tank: n, level } if tank => out.push((id.to_owned(), n, level, true)),
            Condition::LevelBelow { tank: n, level } if tank => out.push((id.to_owned(), n, level, false)),
            Condition::PressureAbove { node, pressure } if !tank => out.push((id.to_owned(), node, pressure, true)),
            Condition::PressureBelow { node, pressure } if !tank => out.push((id.to_owned(), node, pressure, false)),
            Condition::All(ref parts) | Condition::Any(ref parts) => {
                for p in parts {
                    walk(p, tank, id, out);
                }
            }
            _ => {}
        }
    }
    let mut out = Vec::new();
    for c in &report.model.time.controls {
        walk(&c.when, tank, &c.id, &mut out);
    }
    out
}

/// A dashed horizontal line across the run.
fn threshold(report: &RunReport<'_>, label: String, color: &'static str, v: f64) -> Line {
    Line { label, color, points: vec![(0.0, v), (report.hours(), v)], dash: true, width: 1.4 }
}

fn chart(report: &RunReport<'_>, what: &str) -> Chart {
    let run = report.run;
    let price = price_steps(report);
    let max_price = price.iter().map(|p| p.1).fold(0.0, f64::max);
    // Stretches of the step function below its highest price.
    let mut tariff: Vec<(f64, f64)> = Vec::new();
    for w in price.windows(2) {
        let ((a, pa), (b, _)) = (w[0], w[1]);
        if pa < max_price && b > a {
            match tariff.last_mut() {
                Some(last) if (last.1 - a).abs() < 1e-9 => last.1 = b,
                _ => tariff.push((a, b)),
            }
        }
    }
    let model_title = report.model.title.as_deref().map(|t| format!("{t}. ")).unwrap_or_default();
    Chart {
        title: what.to_owned(),
        subtitle: format!(
            "{model_title}{} h from {} (day 1). Results are only as good as the model and its data.",
            (run.duration / HOUR * 10.0).round() / 10.0,
            format_clock(run.start_clock)
        ),
        hours: run.duration / HOUR,
        start_clock: run.start_clock,
        panels: Vec::new(),
        tariff,
    }
}

fn pump_strip(report: &RunReport<'_>, times: &[f64]) -> Option<Panel> {
    let run = report.run;
    if run.pumps.is_empty() {
        return None;
    }
    let mut p = Panel::new("Pumps running", "pump (bar: running)");
    p.height = 26.0 * run.pumps.len() as f64;
    for (i, &k) in run.pumps.iter().enumerate() {
        let runs = stretches(times, &link_switches(report, k), |t| run.series[t].status[k] == "open");
        p.strips.push((report.model.links()[k].id.to_string(), PALETTE[i % PALETTE.len()], runs));
    }
    Some(p)
}

/// Tank levels, one panel per tank, with their limits, full/empty stretches and the pumps.
pub fn tanks_svg(report: &RunReport<'_>) -> String {
    let run = report.run;
    let model = report.model;
    let times: Vec<f64> = run.series.iter().map(|s| s.time / HOUR).collect();
    let mut c = chart(report, "Tank levels");
    let unit = model.units.length.label();
    for (j, &node) in run.tanks.iter().enumerate() {
        let id = &model.nodes()[node].id;
        let mut p = Panel::new(format!("Tank '{id}'"), format!("level ({unit})"));
        let points: Vec<(f64, f64)> =
            times.iter().zip(&run.series).map(|(&t, s)| (t, report.len(s.level[j]))).collect();
        p.lines.push(Line { label: "level".into(), color: PALETTE[0], points, dash: false, width: 2.4 });
        if let ringmain_core::NodeKind::Tank(t) = &model.nodes()[node].kind {
            let span = (0.0, report.hours());
            if let Some(max) = t.max_level {
                let v = report.len(max);
                p.lines.push(Line {
                    label: format!("max {v:.2} {unit}"),
                    color: PALETTE[1],
                    points: vec![(span.0, v), (span.1, v)],
                    dash: true,
                    width: 1.4,
                });
            }
            let v = report.len(t.min_level);
            p.lines.push(Line {
                label: format!("min {v:.2} {unit}"),
                color: PALETTE[5],
                points: vec![(span.0, v), (span.1, v)],
                dash: true,
                width: 1.4,
            });
        }
        // The levels at which controls act on this tank.
        for (n, (control, _, level, above)) in
            control_thresholds(report, true).into_iter().filter(|c| c.1 == node).enumerate()
        {
            let v = report.len(level);
            let word = if above { "above" } else { "below" };
            let color = PALETTE[[2, 3, 4][n % 3]];
            p.lines.push(threshold(report, format!("control '{control}': {word} {v:.2} {unit}"), color, v));
        }
        let switches = tank_switches(report, node);
        let full = stretches(&times, &switches, |i| run.series[i].tank_state[j] == "full");
        if !full.is_empty() {
            p.bands.push(("full".into(), full.into_iter().map(|(x0, x1)| Band { x0, x1, color: "#5aa05a" }).collect()));
        }
        let empty = stretches(&times, &switches, |i| run.series[i].tank_state[j] == "empty");
        if !empty.is_empty() {
            p.bands
                .push(("empty".into(), empty.into_iter().map(|(x0, x1)| Band { x0, x1, color: "#d05050" }).collect()));
        }
        c.panels.push(p);
    }
    c.panels.extend(pump_strip(report, &times));
    c.render()
}

/// Pump flows, one panel per pump, the on/off strip and the energy price.
pub fn pumps_svg(report: &RunReport<'_>) -> String {
    let run = report.run;
    let model = report.model;
    let times: Vec<f64> = run.series.iter().map(|s| s.time / HOUR).collect();
    let mut c = chart(report, "Pumps");
    let unit = model.units.flow.label();
    let currency = report.currency().to_owned();
    for (i, &k) in run.pumps.iter().enumerate() {
        let id = &model.links()[k].id;
        let switches = link_switches(report, k);
        let series =
            |f: &dyn Fn(&ringmain_core::simulate::Snapshot) -> f64| -> Vec<f64> { run.series.iter().map(f).collect() };
        let mut p = Panel::new(format!("Pump '{id}'"), format!("flow ({unit})"));
        p.height = 170.0;
        let points = stepped(&times, &series(&|s| report.flow(s.flow[k])), &switches);
        p.lines.push(Line { label: "flow".into(), color: PALETTE[i % PALETTE.len()], points, dash: false, width: 2.2 });
        let power = stepped(&times, &series(&|s| s.pump_power[i] / 1e3), &switches);
        let mut q = Panel::new(format!("Pump '{id}': shaft power"), "shaft power (kW)");
        q.height = 120.0;
        q.lines.push(Line { label: "shaft power".into(), color: PALETTE[5], points: power, dash: false, width: 1.8 });
        // Cumulative energy and cost, each on its own axis (integrated over every step).
        let mut e = Panel::new(format!("Pump '{id}': shaft energy since the start"), "energy (kWh)");
        e.height = 110.0;
        let energy = times.iter().zip(&run.series).map(|(&t, s)| (t, s.pump_energy[i] / 3.6e6)).collect();
        e.lines.push(Line {
            label: "cumulative energy".into(),
            color: PALETTE[3],
            points: energy,
            dash: false,
            width: 2.0,
        });
        let mut m = Panel::new(format!("Pump '{id}': energy cost since the start"), format!("cost ({currency})"));
        m.height = 110.0;
        let cost = times.iter().zip(&run.series).map(|(&t, s)| (t, s.pump_cost[i])).collect();
        m.lines.push(Line {
            label: "cumulative cost".into(),
            color: PALETTE[4],
            points: cost,
            dash: false,
            width: 2.0,
        });
        c.panels.extend([p, q, e, m]);
    }
    c.panels.extend(pump_strip(report, &times));
    let mut price = Panel::new("Energy price", format!("price ({currency}/kWh)"));
    price.height = 110.0;
    price.lines.push(Line {
        label: "price".into(),
        color: PALETTE[4],
        points: price_steps(report),
        dash: false,
        width: 2.0,
    });
    c.panels.push(price);
    c.render()
}

/// Pressures at the nodes whose lowest pressure is lowest.
pub fn pressures_svg(report: &RunReport<'_>, count: usize) -> String {
    let run = report.run;
    let model = report.model;
    let times: Vec<f64> = run.series.iter().map(|s| s.time / HOUR).collect();
    let mut c = chart(report, "Lowest pressures");
    let mut nodes: Vec<usize> = (0..model.nodes().len())
        .filter(|&i| model.nodes()[i].fixed_head().is_none() && run.node_min_pressure[i].is_finite())
        .collect();
    nodes.sort_by(|&a, &b| run.node_min_pressure[a].total_cmp(&run.node_min_pressure[b]));
    nodes.truncate(count);
    let unit = model.units.pressure.label();
    let mut p =
        Panel::new(format!("The {} junctions with the lowest pressure", nodes.len()), format!("pressure ({unit})"));
    p.height = 300.0;
    let switches = all_switches(report);
    for (n, &i) in nodes.iter().enumerate() {
        let values: Vec<f64> = run.series.iter().map(|s| report.pressure(s.pressure[i])).collect();
        let points = stepped(&times, &values, &switches);
        p.lines.push(Line {
            label: format!("{} (min {:.1})", model.nodes()[i].id, report.pressure(run.node_min_pressure[i])),
            color: PALETTE[n % PALETTE.len()],
            points,
            dash: false,
            width: 2.0,
        });
    }
    // The pressure criteria and the pressures at which controls act.
    if let Some(criteria) = report.criteria {
        for (name, limit) in [("min_pressure", criteria.min_pressure), ("max_pressure", criteria.max_pressure)] {
            if let Some(v) = limit {
                let v = report.pressure(v);
                p.lines.push(threshold(report, format!("criterion {name} {v:.1} {unit}"), PALETTE[1], v));
            }
        }
    }
    for (n, (control, node, pressure, above)) in control_thresholds(report, false).into_iter().enumerate() {
        let v = report.pressure(pressure);
        let word = if above { "above" } else { "below" };
        let label = format!("control '{control}': '{}' {word} {v:.1} {unit}", model.nodes()[node].id);
        p.lines.push(threshold(report, label, PALETTE[[2, 3, 4][n % 3]], v));
    }
    c.panels.push(p);
    c.render()
}

/// One water-quality constituent at the junctions where it is worst (highest ages, lowest
/// residuals), with its criterion drawn when one is checked.
pub fn quality_svg(report: &RunReport<'_>, c: usize, count: usize) -> Option<String> {
    use ringmain_core::quality::ConstituentKind;
    let q = report.quality?;
    let model = report.model;
    let con = &q.constituents[c];
    let scale = con.report_scale();
    let unit = con.report_unit();
    let highest = con.kind == ConstituentKind::Age;
    let worst = ringmain_core::quality::criteria::worst_per_junction(model, q, c, highest, 0.0);
    let mut worst = worst;
    worst.sort_by(|a, b| if highest { b.value.total_cmp(&a.value) } else { a.value.total_cmp(&b.value) });
    worst.truncate(count);
    let what = if highest { "highest" } else { "lowest" };
    let mut chart = chart(report, &format!("Water quality: {}", con.id));
    let mut p = Panel::new(
        format!("The {} junctions with the {what} {} ({})", worst.len(), con.id, con.kind.label()),
        format!("{} ({unit})", con.id),
    );
    p.height = 300.0;
    for (n, w) in worst.iter().enumerate() {
        let points = q.records.iter().map(|r| (r.time / HOUR, r.node[c][w.node] * scale)).collect();
        p.lines.push(Line {
            label: format!("{} ({what} {:.2})", model.nodes()[w.node].id, w.value * scale),
            color: PALETTE[n % PALETTE.len()],
            points,
            dash: false,
            width: 2.0,
        });
    }
    let name = if highest { "max_age".to_owned() } else { format!("min_residual.{}", con.id) };
    if let Some(check) = report.checks.iter().find(|k| k.name == name || k.name == format!("max_age.{}", con.id)) {
        let v = check.limit * scale;
        p.lines.push(threshold(report, format!("criterion {name} {v:.2} {unit}"), PALETTE[1], v));
    }
    chart.panels.push(p);
    Some(chart.render())
}

/// The charts `write_all` may write, by file name.
pub const FILES: [&str; 3] = ["tanks.svg", "pumps.svg", "pressures.svg"];

/// Writes every chart into `dir` (each file all or nothing, see [`crate::output`]); returns the
/// files written.
pub fn write_all(report: &RunReport<'_>, dir: &Path) -> std::io::Result<Vec<std::path::PathBuf>> {
    std::fs::create_dir_all(dir)?;
    let mut written = Vec::new();
    let mut put = |name: &str, text: String| -> std::io::Result<()> {
        let path = dir.join(name);
        ringmain_core::output::write_file(&path, |out| out.write_all(text.as_bytes()))?;
        written.push(path);
        Ok(())
    };
    if !report.run.tanks.is_empty() {
        put(FILES[0], tanks_svg(report))?;
    }
    if !report.run.pumps.is_empty() {
        put(FILES[1], pumps_svg(report))?;
    }
    put(FILES[2], pressures_svg(report, 5))?;
    if let Some(q) = report.quality {
        for c in 0..q.constituents.len() {
            if let Some(svg) = quality_svg(report, c, 5) {
                let safe: String = q.constituents[c]
                    .id
                    .chars()
                    .map(|ch| if ch.is_ascii_alphanumeric() || ch == '-' || ch == '_' { ch } else { '_' })
                    .collect();
                put(&format!("quality-{c}-{safe}.svg"), svg)?;
            }
        }
    }
    Ok(written)
}
