//! Control conditions as event functions.
//!
//! Every condition has a value `g` that is zero or positive exactly when it holds: a level or
//! pressure condition is the signed distance to its threshold (m), `all` is the smallest value of
//! its parts, `any` the largest. Clock and elapsed-time conditions hold only at their instant:
//! `+∞` then, `−∞` otherwise. A control fires when its value goes from negative to zero or
//! positive; the engine finds that moment by root finding when it falls inside a step, and lands
//! on clock and elapsed-time instants exactly.

use crate::model::time::{Condition, DAY};

/// What a condition can look at.
pub struct Probe<'a> {
    /// Level (m) of the tank at a node index.
    pub level: &'a dyn Fn(usize) -> f64,
    /// Pressure head (m) per node (NaN where cut off).
    pub pressure: &'a [f64],
    /// Elapsed time, s.
    pub elapsed: f64,
    /// Clock time at the start, s after midnight.
    pub start_clock: f64,
    /// Whether instantaneous conditions (clock, after) may hold now.
    pub instants: bool,
}

/// Within this many seconds of its instant a clock or elapsed-time condition holds.
pub const INSTANT: f64 = 1e-6;

/// The value of a condition: `≥ 0` when it holds.
pub fn value(c: &Condition, p: &Probe<'_>) -> f64 {
    match c {
        Condition::LevelAbove { tank, level } => (p.level)(*tank) - level,
        Condition::LevelBelow { tank, level } => level - (p.level)(*tank),
        // A node cut off from every source has no water: it is below any pressure threshold and
        // above none.
        Condition::PressureAbove { node, pressure } => finite_or(p.pressure[*node] - pressure, f64::NEG_INFINITY),
        Condition::PressureBelow { node, pressure } => finite_or(pressure - p.pressure[*node], f64::INFINITY),
        Condition::Clock(clock) => {
            let now = (p.start_clock + p.elapsed).rem_euclid(DAY);
            let d = (now - clock).abs();
            instant(p.instants && d.min(DAY - d) < INSTANT)
        }
        Condition::After(t) => instant(p.instants && (p.elapsed - t).abs() < INSTANT),
        Condition::All(parts) => parts.iter().map(|c| value(c, p)).fold(f64::INFINITY, f64::min),
        Condition::Any(parts) => parts.iter().map(|c| value(c, p)).fold(f64::NEG_INFINITY, f64::max),
    }
}

fn finite_or(v: f64, dry: f64) -> f64 {
    if v.is_nan() {
        dry
    } else {
        v
    }
}

fn instant(now: bool) -> f64 {
    if now {
        f64::INFINITY
    } else {
        f64::NEG_INFINITY
    }
}

/// The first instant strictly after elapsed time `t` at which a clock or elapsed-time part of
/// `c` holds (`∞` if none).
pub fn next_instant(c: &Condition, t: f64, start_clock: f64) -> f64 {
    match c {
        Condition::Clock(clock) => {
            // Elapsed times at which the clock shows `clock`: clock − start + k·DAY.
            let first = clock - start_clock;
            let k = ((t - first) / DAY).floor() + 1.0;
            let mut next = first + k * DAY;
            while next <= t + INSTANT {
                next += DAY;
            }
            while next - DAY > t + INSTANT {
                next -= DAY;
            }
            next
        }
        Condition::After(a) if *a > t + INSTANT => *a,
        Condition::All(parts) | Condition::Any(parts) => {
            parts.iter().map(|c| next_instant(c, t, start_clock)).fold(f64::INFINITY, f64::min)
        }
        _ => f64::INFINITY,
    }
}

/// Whether a condition has a part that holds over stretches of time (level or pressure), so that
/// it can become true inside a step.
pub fn is_continuous(c: &Condition) -> bool {
    match c {
        Condition::LevelAbove { .. }
        | Condition::LevelBelow { .. }
        | Condition::PressureAbove { .. }
        | Condition::PressureBelow { .. } => true,
        Condition::Clock(_) | Condition::After(_) => false,
        Condition::All(parts) => parts.iter().all(is_continuous),
        Condition::Any(parts) => parts.iter().any(is_continuous),
    }
}

/// Whether a condition looks at a node's pressure (its value then needs a hydraulic solve).
pub fn needs_pressure(c: &Condition) -> bool {
    match c {
        Condition::PressureAbove { .. } | Condition::PressureBelow { .. } => true,
        Condition::All(parts) | Condition::Any(parts) => parts.iter().any(needs_pressure),
        _ => false,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn composite_values() {
        let levels = [2.0];
        let level = |_: usize| levels[0];
        let pressure = [25.0];
        let probe = Probe { level: &level, pressure: &pressure, elapsed: 3600.0, start_clock: 0.0, instants: true };
        let low = Condition::LevelBelow { tank: 0, level: 3.0 };
        let high_p = Condition::PressureAbove { node: 0, pressure: 30.0 };
        assert_eq!(value(&low, &probe), 1.0);
        assert_eq!(value(&high_p, &probe), -5.0);
        assert_eq!(value(&Condition::All(vec![low.clone(), high_p.clone()]), &probe), -5.0);
        assert_eq!(value(&Condition::Any(vec![low.clone(), high_p]), &probe), 1.0);
        assert_eq!(value(&Condition::Clock(3600.0), &probe), f64::INFINITY);
        assert_eq!(value(&Condition::All(vec![Condition::Clock(7200.0), low]), &probe), f64::NEG_INFINITY);
    }

    /// Fault: a low-pressure control never fired when its junction had lost all water (its
    /// pressure is undefined). A junction without water is below every pressure threshold and
    /// above none, alone or inside `all` / `any`.
    #[test]
    fn dry_junction_counts_as_below_any_pressure_threshold() {
        let level = |_: usize| 1.0;
        let pressure = [f64::NAN];
        let probe = Probe { level: &level, pressure: &pressure, elapsed: 0.0, start_clock: 0.0, instants: true };
        for threshold in [-1e6, 0.0, 18.0, 1e6] {
            let below = Condition::PressureBelow { node: 0, pressure: threshold };
            let above = Condition::PressureAbove { node: 0, pressure: threshold };
            assert!(value(&below, &probe) >= 0.0, "{threshold}");
            assert!(value(&above, &probe) < 0.0, "{threshold}");
            let level_low = Condition::LevelBelow { tank: 0, level: 2.0 };
            assert!(value(&Condition::All(vec![below.clone(), level_low]), &probe) >= 0.0);
            assert!(value(&Condition::Any(vec![above, below]), &probe) >= 0.0);
        }
    }

    #[test]
    fn next_clock_instants() {
        // Start at 06:00; 22:00 first comes after 16 h, then every 24 h.
        let c = Condition::Clock(22.0 * 3600.0);
        let start = 6.0 * 3600.0;
        assert_eq!(next_instant(&c, 0.0, start), 16.0 * 3600.0);
        assert_eq!(next_instant(&c, 16.0 * 3600.0, start), 40.0 * 3600.0);
        // 05:00 is before the start clock: first after 23 h.
        assert_eq!(next_instant(&Condition::Clock(5.0 * 3600.0), 0.0, start), 23.0 * 3600.0);
        assert_eq!(next_instant(&Condition::After(100.0), 0.0, start), 100.0);
        assert_eq!(next_instant(&Condition::After(100.0), 100.0, start), f64::INFINITY);
    }
}
