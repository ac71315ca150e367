//! The `duty` command (system curve, operating points, motor, NPSH of one pump) and the
//! `fittings` command (the named fittings and where their K come from), with their writers and
//! the duty chart. Values are written in the model's units.

use crate::plot::{esc, nice_step};
use ringmain_core::duty::{self, DutyAnalysis, DutyError, DutyOptions, TankLevels};
use ringmain_core::model::PumpDrive;
use ringmain_core::physics::fittings::{
    crane_turbulent_friction, method_source, FittingKind, FittingsMethod, GATE_VALVE_CURVE,
};
use ringmain_core::units::{Converter, Quantity};
use ringmain_core::Model;
use serde_json::{json, Value};
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// The caution every report carries.
pub const CAUTION: &str = "Results are only as good as the model and its data; designs must be checked by a licensed \
                           engineer against local codes and the utility's standards.";

/// The arguments of `ringmain duty`.
pub struct Args {
    pub model: PathBuf,
    pub pump: String,
    pub flows: Option<String>,
    pub speeds: Vec<f64>,
    pub motor_margin: f64,
    pub npsh_margin: f64,
    pub tank_levels: String,
    pub format: crate::OutputFormat,
    pub plot: Option<PathBuf>,
}

fn invalid(message: impl std::fmt::Display) -> ExitCode {
    eprintln!("error: {message}");
    ExitCode::from(crate::EXIT_INVALID)
}

/// Runs `ringmain duty`.
pub fn run(args: Args) -> ExitCode {
    if let Some(refusal) = crate::format_refusal(args.format) {
        return invalid(refusal);
    }
    let tank_levels = match args.tank_levels.replace(' ', "").as_str() {
        "current" => TankLevels::Current,
        "min,max" => TankLevels::MinMax,
        other => return invalid(format!("--tank-levels: expected \"current\" or \"min,max\", found \"{other}\"")),
    };
    if let Some(plot) = &args.plot {
        if plot.extension().and_then(|e| e.to_str()).map(str::to_ascii_lowercase).as_deref() != Some("svg") {
            return invalid(format!("--plot {}: the chart is SVG; the file name must end in .svg", plot.display()));
        }
        if same_file(plot, &args.model) {
            return invalid(format!("--plot {}: would overwrite the model file", plot.display()));
        }
    }
    let Ok(model) = crate::load(&args.model) else { return ExitCode::from(crate::EXIT_INVALID) };
    // The flows in the model's unit, as they are written back (no round trip through SI).
    let flows_user: Vec<f64> = match &args.flows {
        None => match model.link_index(&args.pump).and_then(|k| model.links()[k].as_pump()).map(|p| &p.drive) {
            Some(PumpDrive::Curve { points, .. }) => {
                let last = model.units.flow.from_si(points.last().map_or(0.0, |p| p.0));
                let n = DutyOptions::DEFAULT_STEPS;
                (0..=n).map(|i| 1.5 * last * i as f64 / n as f64).collect()
            }
            // The analysis names what is wrong.
            _ => Vec::new(),
        },
        Some(text) => {
            let parts: Vec<&str> = text.split(':').collect();
            let numbers: Option<Vec<f64>> = parts.iter().map(|p| p.trim().parse::<f64>().ok()).collect();
            let grid = match numbers.as_deref() {
                Some(&[start, stop, step]) => duty::flow_grid(start, stop, step),
                _ => Err(format!("expected START:STOP:STEP (three numbers), found \"{text}\"")),
            };
            match grid {
                Ok(g) => g,
                Err(m) => return invalid(format!("--flows: {m}")),
            }
        }
    };
    let options = DutyOptions {
        flows: flows_user.iter().map(|&q| model.units.flow.to_si(q)).collect(),
        speeds: args.speeds.clone(),
        motor_margin: args.motor_margin,
        npsh_margin: args.npsh_margin,
        tank_levels,
    };
    let analysis = match duty::analyse(&model, &args.pump, &options) {
        Ok(a) => a,
        Err(DutyError::Model(e)) => return invalid(e.in_file(args.model.display().to_string())),
        Err(e) => {
            eprintln!("error: {}: {e}", args.model.display());
            return ExitCode::from(crate::EXIT_NOT_CONVERGED);
        }
    };
    let view = View { model: &model, analysis: &analysis, flows: &flows_user, units: model.converter() };
    if let Some(plot) = &args.plot {
        if let Err(e) = ringmain_core::output::write_text(plot, &view.svg()) {
            eprintln!("error: cannot write the chart to {}: {e}", plot.display());
            return ExitCode::from(crate::EXIT_WRITE);
        }
        eprintln!("wrote {}", plot.display());
    }
    crate::write_with("the results", None, |out| match args.format {
        crate::OutputFormat::Json => {
            serde_json::to_writer_pretty(&mut *out, &view.json())?;
            out.write_all(b"\n")
        }
        // GeoJSON is refused before the command runs (main.rs).
        crate::OutputFormat::Csv | crate::OutputFormat::Geojson => out.write_all(view.csv().as_bytes()),
        crate::OutputFormat::Table | crate::OutputFormat::Parquet => out.write_all(view.table().as_bytes()),
    })
}

/// Whether two paths name the same existing file, by identity (see [`ringmain_core::output::same_file`]).
fn same_file(a: &Path, b: &Path) -> bool {
    ringmain_core::output::same_file(a, b)
}

/// An analysis in the model's units.
struct View<'a> {
    model: &'a Model,
    analysis: &'a DutyAnalysis,
    /// The system curve's flows in the model's unit, as given or made (no round trip via SI).
    flows: &'a [f64],
    /// The converter to the model's units.
    units: Converter,
}

impl View<'_> {
    /// The `i`-th flow of the system curve, in the model's unit.
    fn qi(&self, i: usize) -> f64 {
        match self.flows.get(i) {
            Some(&q) if self.flows.len() == self.analysis.system_curve.len() => q,
            _ => self.q(self.analysis.system_curve[i].0),
        }
    }
    fn q(&self, v: f64) -> f64 {
        self.units.from_si(Quantity::Flow, v)
    }
    fn h(&self, v: f64) -> f64 {
        self.units.from_si(Quantity::Length, v)
    }
    fn power(&self, watts: f64) -> f64 {
        self.units.from_si(Quantity::Power, watts)
    }
    fn power_label(&self) -> &'static str {
        self.units.label(Quantity::Power)
    }
    fn pump_id(&self) -> &str {
        &self.model.links()[self.analysis.pump].id
    }

    /// The pump's head curve at `speed` over the flows of the system curve, while its head is
    /// above zero.
    fn pump_curve(&self, speed: f64) -> Vec<(f64, f64)> {
        let link = &self.model.links()[self.analysis.pump];
        let Some(pump) = link.as_pump() else { return Vec::new() };
        let water = self.model.options.water_properties();
        let head = |q: f64| match &pump.drive {
            PumpDrive::Curve { curve, .. } => curve.head_at_speed(q, speed).0,
            PumpDrive::Power(w) if q > 0.0 => w * speed.powi(3) / (water.density * ringmain_core::units::GRAVITY * q),
            PumpDrive::Power(_) => f64::NAN,
        };
        let last = self.analysis.system_curve.last().map_or(0.0, |p| p.0);
        let n = 120;
        (0..=n)
            .map(|i| last * i as f64 / n as f64)
            .map(|q| (q, head(q)))
            .filter(|(_, h)| h.is_finite() && *h >= 0.0)
            .map(|(q, h)| (self.q(q), self.h(h)))
            .collect()
    }

    /// The pump's efficiency (percent) at `speed` along the flows, if it has an efficiency curve.
    fn efficiency_curve(&self, speed: f64) -> Option<Vec<(f64, f64)>> {
        let pump = self.model.links()[self.analysis.pump].as_pump()?;
        pump.efficiency_points.as_ref()?;
        let last = self.analysis.system_curve.last().map_or(0.0, |p| p.0);
        let n = 120;
        Some(
            (0..=n)
                .map(|i| last * i as f64 / n as f64)
                .map(|q| (self.q(q), pump.efficiency.at(q, speed) * 100.0))
                .collect(),
        )
    }

    /// The required NPSH at `speed` over its curve's flows.
    fn npsh_required_curve(&self, speed: f64) -> Option<Vec<(f64, f64)>> {
        let pump = self.model.links()[self.analysis.pump].as_pump()?;
        let points = pump.npsh_required.as_ref()?;
        Some(points.iter().map(|&(q, h)| (self.q(q * speed), self.h(h * speed * speed))).collect())
    }

    fn json(&self) -> Value {
        let a = self.analysis;
        let u = &self.model.units;
        let mut out = json!({
            "pump": self.pump_id(),
            "units": {
                "flow": u.flow.label(), "head": u.length.label(), "power": self.power_label(),
                "efficiency": "percent", "npsh": u.length.label(),
            },
            "system_curve":
                a.system_curve.iter().enumerate().map(|(i, &(_, h))| [self.qi(i), self.h(h)]).collect::<Vec<_>>(),
            "npsh_available_curve": a
                .npsh_available_curve
                .iter()
                .enumerate()
                .map(|(i, &(_, h))| [self.qi(i), self.h(h)])
                .collect::<Vec<_>>(),
            "operating_points": a.operating_points.iter().map(|p| json!({
                "speed": p.speed,
                "flow": self.q(p.flow),
                "head": self.h(p.head),
                "efficiency": p.efficiency * 100.0,
                "hydraulic_power": self.power(p.hydraulic_power),
                "shaft_power": self.power(p.shaft_power),
                "motor_rating": self.power(p.motor_rating),
                "npsh_available": self.h(p.npsh_available),
                "npsh_required": p.npsh_required.map(|v| self.h(v)),
                "npsh_ok": p.npsh_ok,
            })).collect::<Vec<_>>(),
            "pump_curves": a.operating_points.iter().map(|p| json!({
                "speed": p.speed,
                "points": self.pump_curve(p.speed).iter().map(|&(q, h)| [q, h]).collect::<Vec<_>>(),
            })).collect::<Vec<_>>(),
            "motor_series": format!("{} ({})", a.motor_series.source(), a.motor_series.unit_label()),
            "atmospheric_pressure_kpa": a.atmospheric_pressure / 1e3,
            "vapour_pressure_kpa": a.vapour_pressure / 1e3,
            "site_elevation": self.h(a.site_elevation),
            "pump_elevation": self.h(a.pump_elevation),
            "caution": CAUTION,
        });
        if let Some(band) = &a.system_curve_band {
            out["system_curve_band"] = json!(band
                .iter()
                .enumerate()
                .map(|(i, &(_, lo, hi))| [self.qi(i), self.h(lo), self.h(hi)])
                .collect::<Vec<_>>());
        }
        out
    }

    fn csv(&self) -> String {
        let a = self.analysis;
        let u = &self.model.units;
        let mut s = String::new();
        let band = a.system_curve_band.as_ref();
        let _ = write!(s, "flow_{q},system_head_{l}", q = u.flow, l = u.length);
        if band.is_some() {
            let _ = write!(s, ",system_head_low_{l},system_head_high_{l}", l = u.length);
        }
        let _ = writeln!(s, ",npsh_available_{}", u.length);
        for (i, &(_, h)) in a.system_curve.iter().enumerate() {
            let _ = write!(s, "{},{}", self.qi(i), self.h(h));
            if let Some(b) = band {
                let _ = write!(s, ",{},{}", self.h(b[i].1), self.h(b[i].2));
            }
            let _ = writeln!(s, ",{}", self.h(a.npsh_available_curve[i].1));
        }
        s.push('\n');
        let p = self.power_label();
        let _ = writeln!(
            s,
            "speed,flow_{q},head_{l},efficiency_percent,shaft_power_{p},motor_rating_{p},npsh_available_{l},\
             npsh_required_{l}",
            q = u.flow,
            l = u.length
        );
        for o in &a.operating_points {
            let _ = writeln!(
                s,
                "{},{},{},{},{},{},{},{}",
                o.speed,
                self.q(o.flow),
                self.h(o.head),
                o.efficiency * 100.0,
                self.power(o.shaft_power),
                self.power(o.motor_rating),
                self.h(o.npsh_available),
                o.npsh_required.map(|v| self.h(v).to_string()).unwrap_or_default()
            );
        }
        s
    }

    fn table(&self) -> String {
        let a = self.analysis;
        let u = &self.model.units;
        let mut s = String::new();
        let _ = writeln!(s, "duty of pump '{}'", self.pump_id());
        let _ = writeln!(
            s,
            "  air {:.2} kPa (ISO 2533 at {:.1} {l}), vapour {:.3} kPa (IAPWS-IF97), pump centreline {:.2} {l}",
            a.atmospheric_pressure / 1e3,
            self.h(a.site_elevation),
            a.vapour_pressure / 1e3,
            self.h(a.pump_elevation),
            l = u.length
        );
        let _ = writeln!(s, "\nsystem curve");
        let band = a.system_curve_band.as_ref();
        let _ = write!(s, "{:>12} {:>12}", format!("flow {}", u.flow), format!("head {}", u.length));
        if band.is_some() {
            let _ = write!(s, " {:>12} {:>12}", "low", "high");
        }
        let _ = writeln!(s, " {:>14}", format!("NPSHa {}", u.length));
        for (i, &(_, h)) in a.system_curve.iter().enumerate() {
            let _ = write!(s, "{:>12.3} {:>12.3}", self.qi(i), self.h(h));
            if let Some(b) = band {
                let _ = write!(s, " {:>12.3} {:>12.3}", self.h(b[i].1), self.h(b[i].2));
            }
            let _ = writeln!(s, " {:>14.3}", self.h(a.npsh_available_curve[i].1));
        }
        let p = self.power_label();
        let _ = writeln!(
            s,
            "\noperating points (motor ratings: {} series, {})",
            a.motor_series.source(),
            a.motor_series.unit_label()
        );
        let _ = writeln!(
            s,
            "{:>6} {:>12} {:>12} {:>7} {:>12} {:>10} {:>10} {:>10} {:>6}",
            "speed",
            format!("flow {}", u.flow),
            format!("head {}", u.length),
            "eff %",
            format!("shaft {p}"),
            format!("motor {p}"),
            "NPSHa",
            "NPSHr",
            "NPSH"
        );
        for o in &a.operating_points {
            let _ = writeln!(
                s,
                "{:>6.3} {:>12.3} {:>12.3} {:>7.1} {:>12.3} {:>10} {:>10.2} {:>10} {:>6}",
                o.speed,
                self.q(o.flow),
                self.h(o.head),
                o.efficiency * 100.0,
                self.power(o.shaft_power),
                self.power(o.motor_rating),
                self.h(o.npsh_available),
                o.npsh_required.map(|v| format!("{:.2}", self.h(v))).unwrap_or_else(|| "-".into()),
                match o.npsh_ok {
                    Some(true) => "ok",
                    Some(false) => "LOW",
                    None => "-",
                }
            );
        }
        let _ = writeln!(s, "\n{CAUTION}");
        s
    }

    /// The chart: head against flow (system curve and band, pump curves, operating points),
    /// efficiency against flow, NPSH available against required.
    fn svg(&self) -> String {
        let a = self.analysis;
        let u = &self.model.units;
        let mut head = XyPanel::new("Head against flow", format!("head ({})", u.length));
        if let Some(band) = &a.system_curve_band {
            head.band = band.iter().map(|&(q, lo, hi)| (self.q(q), self.h(lo), self.h(hi))).collect();
        }
        head.lines.push(XyLine {
            label: "system curve".into(),
            color: PALETTE[5],
            dash: false,
            points: a.system_curve.iter().map(|&(q, h)| (self.q(q), self.h(h))).collect(),
        });
        let mut eff = XyPanel::new("Efficiency", "efficiency (%)".into());
        let mut npsh = XyPanel::new("Net positive suction head", format!("NPSH ({})", u.length));
        npsh.lines.push(XyLine {
            label: "available".into(),
            color: PALETTE[5],
            dash: false,
            points: a.npsh_available_curve.iter().map(|&(q, h)| (self.q(q), self.h(h))).collect(),
        });
        for (i, o) in a.operating_points.iter().enumerate() {
            let color = PALETTE[i % 5];
            head.lines.push(XyLine {
                label: format!("pump at speed {}", o.speed),
                color,
                dash: false,
                points: self.pump_curve(o.speed),
            });
            head.markers.push((self.q(o.flow), self.h(o.head), color));
            if let Some(curve) = self.efficiency_curve(o.speed) {
                eff.lines.push(XyLine { label: format!("speed {}", o.speed), color, dash: false, points: curve });
                eff.markers.push((self.q(o.flow), o.efficiency * 100.0, color));
            }
            if let Some(curve) = self.npsh_required_curve(o.speed) {
                npsh.lines.push(XyLine {
                    label: format!("required, speed {}", o.speed),
                    color,
                    dash: true,
                    points: curve,
                });
            }
            npsh.markers.push((self.q(o.flow), self.h(o.npsh_available), color));
        }
        let mut panels = vec![head];
        if !eff.lines.is_empty() {
            panels.push(eff);
        }
        panels.push(npsh);
        let x_max = a.system_curve.last().map_or(1.0, |p| self.q(p.0)).max(1e-9);
        render_xy(
            &format!("Pump '{}': system curve and operating points", self.pump_id()),
            &format!("flow ({})", u.flow),
            x_max,
            &panels,
        )
    }
}

const WIDTH: f64 = 960.0;
const LEFT: f64 = 72.0;
const RIGHT: f64 = 210.0;
const PANEL_HEIGHT: f64 = 240.0;
const PANEL_GAP: f64 = 62.0;
const TOP: f64 = 70.0;
const PALETTE: [&str; 6] = ["#1d5fa8", "#c8412b", "#2f8f46", "#7a4fa3", "#d08a12", "#4a4a4a"];
const BAND_FILL: &str = "#d9d9d9";

struct XyLine {
    label: String,
    color: &'static str,
    dash: bool,
    points: Vec<(f64, f64)>,
}

struct XyPanel {
    title: String,
    y_label: String,
    lines: Vec<XyLine>,
    /// (x, low, high) of a shaded band.
    band: Vec<(f64, f64, f64)>,
    markers: Vec<(f64, f64, &'static str)>,
}

impl XyPanel {
    fn new(title: &str, y_label: String) -> Self {
        XyPanel { title: title.into(), y_label, lines: Vec::new(), band: Vec::new(), markers: Vec::new() }
    }
}

/// Renders panels sharing one flow axis from 0 to `x_max`, in the house style of the
/// simulation charts.
fn render_xy(title: &str, x_label: &str, x_max: f64, panels: &[XyPanel]) -> String {
    let plot_w = WIDTH - LEFT - RIGHT;
    let total_h = TOP + panels.len() as f64 * (PANEL_HEIGHT + PANEL_GAP) + 10.0;
    let x_of = |x: f64| LEFT + plot_w * x / x_max;
    let mut s = String::new();
    let _ = writeln!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{WIDTH}" height="{total_h}" viewBox="0 0 {WIDTH} {total_h}" font-family="DejaVu Sans, Helvetica, Arial, sans-serif" font-size="12">"#
    );
    let _ = writeln!(s, r#"<rect width="100%" height="100%" fill="white"/>"#);
    let _ = writeln!(s, r#"<text x="{LEFT}" y="22" font-size="16" font-weight="bold">{}</text>"#, esc(title));
    let _ = writeln!(s, r##"<text x="{LEFT}" y="38" fill="#555">{}</text>"##, esc(CAUTION));
    let mut top = TOP;
    for panel in panels {
        let bottom = top + PANEL_HEIGHT;
        let _ = writeln!(
            s,
            r#"<text x="{LEFT}" y="{}" font-size="13" font-weight="bold">{}</text>"#,
            top - 8.0,
            esc(&panel.title)
        );
        let values = panel
            .lines
            .iter()
            .flat_map(|l| l.points.iter().map(|p| p.1))
            .chain(panel.band.iter().flat_map(|b| [b.1, b.2]))
            .chain(panel.markers.iter().map(|m| m.1))
            .filter(|v| v.is_finite());
        let (mut lo, mut hi) = values.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| (a.min(v), b.max(v)));
        if !(lo.is_finite() && hi.is_finite()) {
            (lo, hi) = (0.0, 1.0);
        }
        lo = lo.min(0.0);
        if hi - lo < 1e-9 {
            hi = lo + 1.0;
        }
        hi += 0.06 * (hi - lo);
        let y_of = |v: f64| top + PANEL_HEIGHT * (1.0 - (v - lo) / (hi - lo));
        // Grid and labels.
        let step = nice_step(hi - lo, 5.0);
        let mut v = (lo / step).ceil() * step;
        while v <= hi + 1e-9 {
            let y = y_of(v);
            let _ = writeln!(
                s,
                r##"<line x1="{LEFT}" y1="{y:.1}" x2="{:.1}" y2="{y:.1}" stroke="#e2e2e2"/>"##,
                LEFT + plot_w
            );
            let digits = if step >= 1.0 { 0 } else { (-step.log10().floor()) as usize };
            let shown = if v.abs() < step * 1e-6 { 0.0 } else { v };
            let _ = writeln!(
                s,
                r##"<text x="{:.1}" y="{:.1}" text-anchor="end" fill="#333">{shown:.digits$}</text>"##,
                LEFT - 6.0,
                y + 4.0
            );
            v += step;
        }
        let xstep = nice_step(x_max, 8.0);
        let mut x = 0.0;
        while x <= x_max + 1e-9 {
            let xx = x_of(x);
            let _ =
                writeln!(s, r##"<line x1="{xx:.1}" y1="{top:.1}" x2="{xx:.1}" y2="{bottom:.1}" stroke="#e2e2e2"/>"##);
            let digits = if xstep >= 1.0 { 0 } else { (-xstep.log10().floor()) as usize };
            let _ = writeln!(
                s,
                r##"<text x="{xx:.1}" y="{:.1}" text-anchor="middle" fill="#333">{x:.digits$}</text>"##,
                bottom + 15.0
            );
            x += xstep;
        }
        let _ = writeln!(
            s,
            r##"<text x="{:.1}" y="{:.1}" text-anchor="middle" fill="#333">{}</text>"##,
            LEFT + plot_w / 2.0,
            bottom + 32.0,
            esc(x_label)
        );
        let mid = top + PANEL_HEIGHT / 2.0;
        let _ = writeln!(
            s,
            r##"<text x="16" y="{mid:.1}" text-anchor="middle" transform="rotate(-90 16 {mid:.1})" fill="#333">{}</text>"##,
            esc(&panel.y_label)
        );
        if !panel.band.is_empty() {
            let mut d = String::new();
            for (i, &(x, _, h)) in panel.band.iter().enumerate() {
                let _ = write!(d, "{}{:.1},{:.1} ", if i == 0 { "M" } else { "L" }, x_of(x), y_of(h.clamp(lo, hi)));
            }
            for &(x, l, _) in panel.band.iter().rev() {
                let _ = write!(d, "L{:.1},{:.1} ", x_of(x), y_of(l.clamp(lo, hi)));
            }
            let _ = writeln!(s, r#"<path d="{}Z" fill="{BAND_FILL}" fill-opacity="0.8" stroke="none"/>"#, d);
        }
        for line in &panel.lines {
            let mut d = String::new();
            for (i, &(x, y)) in line.points.iter().filter(|p| p.1.is_finite()).enumerate() {
                let _ = write!(
                    d,
                    "{}{:.1},{:.1} ",
                    if i == 0 { "M" } else { "L" },
                    x_of(x.min(x_max)),
                    y_of(y.clamp(lo, hi))
                );
            }
            let dash = if line.dash { r#" stroke-dasharray="6 4""# } else { "" };
            let _ = writeln!(
                s,
                r#"<path d="{}" fill="none" stroke="{}" stroke-width="2" stroke-linejoin="round"{dash}/>"#,
                d.trim_end(),
                line.color
            );
        }
        for &(x, y, color) in &panel.markers {
            if x.is_finite() && y.is_finite() && x <= x_max * 1.0001 {
                let _ = writeln!(
                    s,
                    r##"<circle cx="{:.1}" cy="{:.1}" r="5" fill="{color}" stroke="#222"/>"##,
                    x_of(x),
                    y_of(y.clamp(lo, hi))
                );
            }
        }
        let _ = writeln!(
            s,
            r##"<rect x="{LEFT}" y="{top:.1}" width="{plot_w:.1}" height="{PANEL_HEIGHT:.1}" fill="none" stroke="#444"/>"##
        );
        let lx = LEFT + plot_w + 14.0;
        let mut ly = top + 12.0;
        if !panel.band.is_empty() {
            let _ = writeln!(s, r#"<rect x="{lx}" y="{}" width="22" height="10" fill="{BAND_FILL}"/>"#, ly - 5.0);
            let _ = writeln!(s, r#"<text x="{}" y="{}">tanks lowest to highest</text>"#, lx + 28.0, ly + 4.0);
            ly += 18.0;
        }
        for line in &panel.lines {
            let dash = if line.dash { r#" stroke-dasharray="6 4""# } else { "" };
            let _ = writeln!(
                s,
                r#"<line x1="{lx}" y1="{ly}" x2="{}" y2="{ly}" stroke="{}" stroke-width="2"{dash}/>"#,
                lx + 22.0,
                line.color
            );
            let _ = writeln!(s, r#"<text x="{}" y="{}">{}</text>"#, lx + 28.0, ly + 4.0, esc(&line.label));
            ly += 18.0;
        }
        if !panel.markers.is_empty() {
            let _ = writeln!(s, r##"<circle cx="{}" cy="{ly}" r="5" fill="#888" stroke="#222"/>"##, lx + 11.0);
            let _ = writeln!(s, r#"<text x="{}" y="{}">operating point</text>"#, lx + 28.0, ly + 4.0);
        }
        top = bottom + PANEL_GAP;
    }
    let _ = writeln!(s, "</svg>");
    s
}

/// Runs `ringmain fittings`: the kinds, their parameters, their values under each method and
/// the sources.
pub fn list_fittings(format: crate::OutputFormat) -> ExitCode {
    if let Some(refusal) = crate::format_refusal(format) {
        return invalid(refusal);
    }
    let text = match format {
        crate::OutputFormat::Json => {
            let kinds: Vec<Value> = FittingKind::ALL
                .iter()
                .map(|k| {
                    json!({
                        "kind": k.label(),
                        "description": k.describe(),
                        "parameters": parameters(*k),
                        "crane_l_over_d": k.crane_l_over_d(),
                        "two_k": k.two_k().map(|c| json!({"k1": c.k1, "k_inf": c.k_inf})),
                        "three_k": k.three_k().map(|c| json!({"k1": c.k1, "k_i": c.k_i, "k_d": c.k_d})),
                        "note": note(*k),
                    })
                })
                .collect();
            let methods: Vec<Value> = FittingsMethod::ALL
                .iter()
                .map(|m| json!({"method": m.label(), "source": method_source(*m), "default": *m == FittingsMethod::default()}))
                .collect();
            serde_json::to_string_pretty(&json!({
                "kinds": kinds,
                "methods": methods,
                "gate_valve_opening_curve": GATE_VALVE_CURVE.iter().map(|&(x, k)| [x, k]).collect::<Vec<_>>(),
            }))
            .unwrap_or_default()
                + "\n"
        }
        crate::OutputFormat::Csv => {
            let mut s = String::from(
                "kind,parameters,crane_l_over_d,two_k_k1,two_k_k_inf,three_k_k1,three_k_k_i,three_k_k_d\n",
            );
            for k in FittingKind::ALL {
                let opt = |v: Option<f64>| v.map(|x| x.to_string()).unwrap_or_default();
                let _ = writeln!(
                    s,
                    "{},{},{},{},{},{},{},{}",
                    k.label(),
                    k.parameters().join(" "),
                    opt(k.crane_l_over_d()),
                    opt(k.two_k().map(|c| c.k1)),
                    opt(k.two_k().map(|c| c.k_inf)),
                    opt(k.three_k().map(|c| c.k1)),
                    opt(k.three_k().map(|c| c.k_i)),
                    opt(k.three_k().map(|c| c.k_d)),
                );
            }
            s
        }
        crate::OutputFormat::Table | crate::OutputFormat::Geojson | crate::OutputFormat::Parquet => {
            let mut s = String::from("fittings of pipes and valves: fittings = [{ kind, count, ... }]\n\n");
            let _ = writeln!(
                s,
                "{:<18} {:<22} {:>6} {:>16} {:>22}",
                "kind", "parameters", "L/D", "two-K K1, Kinf", "three-K K1, Ki, Kd"
            );
            for k in FittingKind::ALL {
                let ld = k.crane_l_over_d().map(|v| v.to_string()).unwrap_or_else(|| "-".into());
                let two = k.two_k().map(|c| format!("{}, {}", c.k1, c.k_inf)).unwrap_or_else(|| "-".into());
                let three =
                    k.three_k().map(|c| format!("{}, {}, {}", c.k1, c.k_i, c.k_d)).unwrap_or_else(|| "-".into());
                let params = if k.parameters().is_empty() { "-".to_owned() } else { parameters(*k).join(", ") };
                let _ = writeln!(s, "{:<18} {:<22} {:>6} {:>16} {:>22}", k.label(), params, ld, two, three);
                let _ = writeln!(s, "    {}; {}", k.describe(), note(*k));
            }
            let _ = writeln!(s, "\n[hydraulics] fittings_method (default {}):", FittingsMethod::default().label());
            for m in FittingsMethod::ALL {
                let _ = writeln!(s, "  {:<18} {}", m.label(), method_source(*m));
            }
            let _ = writeln!(
                s,
                "\nCrane f_T for example: 100 mm {:.4}, 250 mm {:.4}, 500 mm {:.4}",
                crane_turbulent_friction(0.1),
                crane_turbulent_friction(0.25),
                crane_turbulent_friction(0.5)
            );
            let _ = writeln!(s, "K refers to the link's own velocity head; Re is the link's own Reynolds number.");
            let _ = writeln!(s, "\n{CAUTION}");
            s
        }
    };
    crate::write_out(&text, None)
}

fn parameters(k: FittingKind) -> Vec<&'static str> {
    k.parameters()
        .iter()
        .map(|p| match *p {
            "radius" => "radius (r/D >= 0.5, required)",
            "angle" => "angle (degrees, default 90)",
            _ => "opening (fraction open, 0 < x <= 1, default 1)",
        })
        .collect()
}

fn note(k: FittingKind) -> &'static str {
    match k {
        FittingKind::EntranceSharp => "K = 0.5 (equivalent length); Hooper's 160/Re + 0.5 under two-K and three-K",
        FittingKind::Exit => "K = 1.0 under every method",
        FittingKind::Bend => {
            "Rennels & Hudson (2012) with the pipe's own Darcy friction factor at its flow, under every method"
        }
        FittingKind::GateValve => {
            "partly open: the method's open K plus the rise of Perry's Table 6-4 curve (0.17 open, 0.9 at 3/4, 4.5 at \
             1/2, 24 at 1/4)"
        }
        _ => "flanged/welded rows of the two-K and three-K tables",
    }
}
