//! What only a simulation over time uses: run settings, patterns, demand categories, tank shapes,
//! controls and energy prices (SI inside, like the rest of the model).
//!
//! A snapshot solve ignores all of this: it uses each junction's base demand (the sum of its
//! demand categories), each reservoir's head, each pump's speed and each valve's setting as
//! written. [`crate::simulate`](mod@crate::simulate) applies the patterns and controls over time.
//!
//! Attachments to elements are kept here, keyed by element index, so that the snapshot model's
//! element types stay as they are.

use std::collections::BTreeMap;
use std::fmt::Write as _;

/// Seconds in a minute, an hour and a day.
pub const MINUTE: f64 = 60.0;
/// Seconds in an hour.
pub const HOUR: f64 = 3600.0;
/// Seconds in a day.
pub const DAY: f64 = 86_400.0;

/// The `[simulation]` table: how long to simulate and how often to report.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SimulationSettings {
    /// Length of the run, s.
    pub duration: f64,
    /// Longest step between hydraulic solves, s (the integrator may take shorter ones).
    pub hydraulic_step: f64,
    /// Interval between reported results, s.
    pub report_interval: f64,
    /// Clock time at the start, seconds after midnight.
    pub start_clock: f64,
    /// Largest local error of a tank level accepted in one step, m.
    pub level_tolerance: f64,
    /// Longest water-quality transport step, s (`None`: the default of
    /// [`crate::quality::TRANSPORT_STEP`]).
    pub transport_step: Option<f64>,
    /// Merge tolerance of water-quality segments (`None`: [`crate::quality::TOLERANCE`]).
    pub quality_tolerance: Option<f64>,
}

impl SimulationSettings {
    /// Default longest step: one hour.
    pub const HYDRAULIC_STEP: f64 = HOUR;
    /// Default local error tolerance of tank levels per step, m (1 mm).
    pub const LEVEL_TOLERANCE: f64 = 1e-3;
}

/// A named sequence of multipliers, each held for `step` seconds, repeating.
///
/// Multiplier `i` applies from `i·step` to `(i+1)·step` after midnight of the first day (clock
/// time, not elapsed time, so that a daily pattern lines up with the clock whatever the start
/// time), and the sequence repeats with period `n·step`.
#[derive(Clone, Debug, PartialEq)]
pub struct TimePattern {
    /// Unique id among patterns.
    pub id: String,
    /// How long each multiplier holds, s.
    pub step: f64,
    /// The multipliers (at least one, none negative).
    pub multipliers: Vec<f64>,
}

impl TimePattern {
    /// The multiplier in force at clock time `clock` (seconds after midnight of the first day;
    /// may exceed one day). At a boundary the new multiplier applies.
    pub fn at(&self, clock: f64) -> f64 {
        let n = self.multipliers.len();
        let period = self.step * n as f64;
        let t = clock.rem_euclid(period);
        let i = ((t / self.step).floor() as usize).min(n - 1);
        self.multipliers[i]
    }

    /// The first boundary (a change of multiplier index) strictly after clock time `clock`.
    pub fn next_boundary(&self, clock: f64) -> f64 {
        let k = (clock / self.step).floor() + 1.0;
        let next = k * self.step;
        // Guard against round-off landing on the boundary just passed.
        if next <= clock {
            next + self.step
        } else {
            next
        }
    }
}

/// One demand of a junction: a base flow (m³/s) and the pattern that multiplies it.
#[derive(Clone, Debug, PartialEq)]
pub struct Demand {
    /// Base flow, m³/s.
    pub base: f64,
    /// Index into [`TimeData::patterns`]; `None`: constant.
    pub pattern: Option<usize>,
}

/// The shape of a tank as a level–volume table: levels above the floor (m) and the volume
/// stored up to each (m³), both strictly increasing. Between points the volume is linear in the
/// level (the plan area is constant); above the last point the last segment's area continues.
#[derive(Clone, Debug, PartialEq)]
pub struct VolumeCurve {
    /// `(level, volume)` points, SI.
    pub points: Vec<(f64, f64)>,
}

impl VolumeCurve {
    /// Checks the points; the message says what is wrong.
    pub fn new(points: Vec<(f64, f64)>) -> Result<Self, String> {
        if points.len() < 2 {
            return Err(format!("needs at least two [level, volume] points, found {}", points.len()));
        }
        for (i, &(l, v)) in points.iter().enumerate() {
            if !(l.is_finite() && v.is_finite()) || l < 0.0 || v < 0.0 {
                return Err(format!("point {}: level and volume must be finite and not negative", i + 1));
            }
        }
        for (i, w) in points.windows(2).enumerate() {
            if w[1].0 <= w[0].0 || w[1].1 <= w[0].1 {
                return Err(format!(
                    "levels and volumes must both increase from point to point (points {} and {})",
                    i + 1,
                    i + 2
                ));
            }
        }
        Ok(VolumeCurve { points })
    }

    fn segment(&self, i: usize) -> ((f64, f64), (f64, f64)) {
        (self.points[i], self.points[i + 1])
    }

    /// Volume stored at `level`, m³ (linear below the first point towards the first segment's
    /// area, linear past the last).
    pub fn volume(&self, level: f64) -> f64 {
        let n = self.points.len();
        let i = self.points[..n - 1].partition_point(|p| p.0 <= level).saturating_sub(1).min(n - 2);
        let ((l0, v0), (l1, v1)) = self.segment(i);
        v0 + (v1 - v0) / (l1 - l0) * (level - l0)
    }

    /// Level at which `volume` is stored, m (the inverse of [`VolumeCurve::volume`]).
    pub fn level(&self, volume: f64) -> f64 {
        let n = self.points.len();
        let i = self.points[..n - 1].partition_point(|p| p.1 <= volume).saturating_sub(1).min(n - 2);
        let ((l0, v0), (l1, v1)) = self.segment(i);
        l0 + (l1 - l0) / (v1 - v0) * (volume - v0)
    }

    /// Plan area at `level`, m² (dV/dlevel; the upper segment's at a point).
    pub fn area(&self, level: f64) -> f64 {
        let n = self.points.len();
        let i = self.points[..n - 1].partition_point(|p| p.0 <= level).saturating_sub(1).min(n - 2);
        let ((l0, v0), (l1, v1)) = self.segment(i);
        (v1 - v0) / (l1 - l0)
    }
}

/// What a control does to its link.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Action {
    /// Open the link (a valve: hold it fully open; a pump: run it).
    Open,
    /// Close the link (a pump: stop it).
    Close,
    /// A valve goes back to regulating at its setting.
    Automatic,
    /// Set a pump's relative speed (0 stops it; above 0 also runs it).
    Speed(f64),
    /// Set a valve's setting (SI: pressure head in m, m³/s, or K) and let it regulate.
    Setting(f64),
}

/// When a control acts. Level and pressure conditions hold over stretches of time; clock and
/// elapsed-time conditions hold only at their instant.
#[derive(Clone, Debug, PartialEq)]
pub enum Condition {
    /// A tank's level (m above its floor) is at or above a value.
    LevelAbove {
        /// Tank node index.
        tank: usize,
        /// Level, m.
        level: f64,
    },
    /// A tank's level is at or below a value.
    LevelBelow {
        /// Tank node index.
        tank: usize,
        /// Level, m.
        level: f64,
    },
    /// A node's pressure head is at or above a value.
    PressureAbove {
        /// Node index.
        node: usize,
        /// Pressure head, m.
        pressure: f64,
    },
    /// A node's pressure head is at or below a value.
    PressureBelow {
        /// Node index.
        node: usize,
        /// Pressure head, m.
        pressure: f64,
    },
    /// Every day at a clock time (seconds after midnight).
    Clock(f64),
    /// Once, when the elapsed time since the start reaches a value, s.
    After(f64),
    /// Every condition holds.
    All(Vec<Condition>),
    /// At least one condition holds.
    Any(Vec<Condition>),
}

/// A control: when its condition becomes true, its action is applied to its link.
#[derive(Clone, Debug, PartialEq)]
pub struct Control {
    /// Unique id among controls (named in results).
    pub id: String,
    /// The link acted on.
    pub link: usize,
    /// What is done.
    pub action: Action,
    /// When.
    pub when: Condition,
    /// Higher wins when controls act on the same link at the same instant with different
    /// actions; between equal priorities the one listed later wins.
    pub priority: i64,
}

/// Energy prices (`[electricity]`).
#[derive(Clone, Debug, PartialEq, Default)]
pub struct Energy {
    /// Price of one kWh of shaft energy, in the currency below.
    pub price: f64,
    /// Index into [`TimeData::patterns`] of a pattern multiplying the price (a tariff).
    pub tariff: Option<usize>,
    /// Name of the currency, for reports.
    pub currency: Option<String>,
}

/// Everything only a simulation over time uses.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct TimeData {
    /// The `[simulation]` table, if given.
    pub simulation: Option<SimulationSettings>,
    /// Every pattern, in file order.
    pub patterns: Vec<TimePattern>,
    /// Junctions with a demand pattern or several demands: node index → demands. The
    /// junction's snapshot demand is the sum of the bases.
    pub demands: BTreeMap<usize, Vec<Demand>>,
    /// Reservoir node index → pattern multiplying its head.
    pub head_patterns: BTreeMap<usize, usize>,
    /// Tank node index → level–volume table (tanks without one are cylinders of their diameter).
    pub volume_curves: BTreeMap<usize, VolumeCurve>,
    /// Pump link index → pattern multiplying its speed.
    pub speed_patterns: BTreeMap<usize, usize>,
    /// Valve link index → pattern multiplying its setting.
    pub setting_patterns: BTreeMap<usize, usize>,
    /// Every control, in file order.
    pub controls: Vec<Control>,
    /// Energy prices.
    pub energy: Energy,
    /// Water-quality constituents and what nodes say about them.
    pub quality: crate::quality::QualityData,
}

impl TimeData {
    /// Index of a pattern by id.
    pub fn pattern_index(&self, id: &str) -> Option<usize> {
        self.patterns.iter().position(|p| p.id == id)
    }
}

/// Parses a duration such as "24h", "15min", "7d", "90s", "1h30min" or "2.5h" into seconds.
pub fn parse_duration(text: &str) -> Result<f64, String> {
    let bad = || {
        format!(
            "\"{}\" is not a duration; write a number and a unit (d, h, min, s), e.g. \"24h\", \"15min\", \"1h30min\"",
            crate::error::printable(text)
        )
    };
    let s = text.trim();
    if s.is_empty() {
        return Err(bad());
    }
    let mut total = 0.0;
    let mut rest = s;
    while !rest.is_empty() {
        let num_len = rest.find(|c: char| !(c.is_ascii_digit() || c == '.')).unwrap_or(rest.len());
        if num_len == 0 {
            return Err(bad());
        }
        let value: f64 = rest[..num_len].parse().map_err(|_| bad())?;
        rest = rest[num_len..].trim_start();
        let unit_len = rest.find(|c: char| !c.is_ascii_alphabetic()).unwrap_or(rest.len());
        let factor = match &rest[..unit_len] {
            "d" => DAY,
            "h" => HOUR,
            "min" => MINUTE,
            "s" => 1.0,
            _ => return Err(bad()),
        };
        total += value * factor;
        rest = rest[unit_len..].trim_start();
    }
    if total.is_finite() {
        Ok(total)
    } else {
        Err(bad())
    }
}

/// Writes seconds as a duration that [`parse_duration`] reads back: the largest whole units,
/// e.g. "24h", "15min", "7d", "90s" (90 s is written "1min30s"), "1h30min".
pub fn format_duration(seconds: f64) -> String {
    if seconds <= 0.0 {
        return "0s".into();
    }
    if seconds.fract() != 0.0 || seconds > 1e15 {
        return format!("{seconds}s");
    }
    let mut rest = seconds as u64;
    let mut out = String::new();
    for (unit, size) in [("d", 86_400u64), ("h", 3600), ("min", 60), ("s", 1)] {
        if rest >= size {
            let _ = write!(out, "{}{unit}", rest / size);
            rest %= size;
        }
    }
    out
}

/// Parses a clock time "HH:MM" or "HH:MM:SS" (00:00 to 23:59:59) into seconds after midnight.
pub fn parse_clock(text: &str) -> Result<f64, String> {
    let bad = || {
        format!(
            "\"{}\" is not a clock time; write \"HH:MM\" or \"HH:MM:SS\", e.g. \"06:30\"",
            crate::error::printable(text)
        )
    };
    let parts: Vec<&str> = text.trim().split(':').collect();
    if !(2..=3).contains(&parts.len()) || parts.iter().any(|p| p.is_empty() || !p.bytes().all(|b| b.is_ascii_digit())) {
        return Err(bad());
    }
    let num = |p: &str| p.parse::<u32>().map_err(|_| bad());
    let (h, m) = (num(parts[0])?, num(parts[1])?);
    let s = if parts.len() == 3 { num(parts[2])? } else { 0 };
    if h > 23 || m > 59 || s > 59 {
        return Err(bad());
    }
    Ok(f64::from(h * 3600 + m * 60 + s))
}

/// Writes seconds after midnight as "HH:MM" (or "HH:MM:SS" when the seconds are not zero),
/// wrapping past midnight.
pub fn format_clock(seconds: f64) -> String {
    let total = seconds.rem_euclid(DAY).round() as u64 % 86_400;
    let (h, m, s) = (total / 3600, (total / 60) % 60, total % 60);
    if s == 0 {
        format!("{h:02}:{m:02}")
    } else {
        format!("{h:02}:{m:02}:{s:02}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn durations_read_and_write_back() {
        for (text, secs) in [("24h", 86_400.0), ("15min", 900.0), ("7d", 604_800.0), ("90s", 90.0), ("1h30min", 5400.0)]
        {
            assert_eq!(parse_duration(text).unwrap(), secs, "{text}");
            assert_eq!(parse_duration(&format_duration(secs)).unwrap(), secs);
        }
        assert_eq!(format_duration(86_400.0), "1d");
        assert_eq!(format_duration(900.0), "15min");
        assert_eq!(parse_duration("2.5h").unwrap(), 9000.0);
        for bad in ["", "h", "10", "10 weeks", "-1h", "1h30"] {
            assert!(parse_duration(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn clock_times() {
        assert_eq!(parse_clock("06:30").unwrap(), 23_400.0);
        assert_eq!(parse_clock("23:59:59").unwrap(), 86_399.0);
        assert!(parse_clock("24:00").is_err() && parse_clock("6").is_err() && parse_clock("06:3x").is_err());
        assert_eq!(format_clock(23_400.0), "06:30");
        assert_eq!(format_clock(86_400.0 + 61.0), "00:01:01");
    }

    #[test]
    fn patterns_repeat_and_switch_at_boundaries() {
        let p = TimePattern { id: "p".into(), step: 3600.0, multipliers: vec![0.5, 1.0, 1.5] };
        assert_eq!(p.at(0.0), 0.5);
        assert_eq!(p.at(3599.9), 0.5);
        assert_eq!(p.at(3600.0), 1.0);
        assert_eq!(p.at(3.0 * 3600.0 + 10.0), 0.5);
        assert_eq!(p.next_boundary(3600.0), 7200.0);
        assert_eq!(p.next_boundary(100.0), 3600.0);
    }

    #[test]
    fn volume_curve_inverts() {
        // A tank 2 m² in plan up to 1 m, then 4 m²: volumes 0, 2, 6 at levels 0, 1, 2.
        let c = VolumeCurve::new(vec![(0.0, 0.0), (1.0, 2.0), (2.0, 6.0)]).unwrap();
        for l in [0.0, 0.3, 1.0, 1.7, 2.0, 2.5] {
            assert!((c.level(c.volume(l)) - l).abs() < 1e-12, "{l}");
        }
        assert_eq!(c.area(0.5), 2.0);
        assert_eq!(c.area(1.5), 4.0);
        assert_eq!(c.volume(2.5), 8.0);
        assert!(VolumeCurve::new(vec![(0.0, 0.0), (1.0, 0.0)]).is_err());
    }
}
