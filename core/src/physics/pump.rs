//! Pump head curves and efficiency curves.
//!
//! A head curve is given as points `(Q, H)` with flows increasing and heads strictly decreasing.
//! It is fitted as follows:
//! * two points: `H = H0 − k Q²` through both;
//! * three points: the quadratic `H = a + b Q + c Q²` through all three;
//! * four or more points: the shape-preserving monotone piecewise cubic of Fritsch & Carlson
//!   (1980, "Monotone piecewise cubic interpolation", SIAM J. Numer. Anal. 17(2)), with the
//!   three-point end slopes of the same construction.
//!
//! The fitted curve is defined on every flow `Q ≥ 0`: between zero flow and the first point, and
//! past the last point, the two- and three-point formulas simply continue; the cubic continues
//! on straight lines, with the end slope at the first point towards zero flow and with the slope
//! of the last secant past the last point (so the head keeps falling and the flow cannot run away).
//! Past the run-out flow the head becomes negative: the pump then acts as a resistance, which the
//! results flag. Every fitted curve is checked to be strictly decreasing from zero flow to the
//! last point (and the quadratic up to its run-out), else the pump is rejected.
//!
//! Speed follows the affinity laws: `H(Q, s) = s² h(Q/s)`, `η(Q, s) = η(Q/s)`.

/// A fitted, decreasing pump head curve (SI: m³/s, m).
#[derive(Clone, Debug, PartialEq)]
pub enum HeadCurve {
    /// `a + b Q + c Q²` (two or three points).
    Quadratic {
        /// constant term
        a: f64,
        /// linear term
        b: f64,
        /// quadratic term
        c: f64,
    },
    /// Fritsch–Carlson monotone cubic through `q`, `h` with slopes `d`.
    Monotone {
        /// flows of the points
        q: Vec<f64>,
        /// heads of the points
        h: Vec<f64>,
        /// slopes at the points
        d: Vec<f64>,
        /// slope of the straight continuation past the last point
        tail: f64,
    },
}

/// Why a set of points is not an acceptable head curve.
#[derive(Clone, Debug, PartialEq)]
pub struct CurveError(pub String);

impl HeadCurve {
    /// Fits a curve to points `(Q, H)` in SI.
    pub fn fit(points: &[(f64, f64)]) -> Result<HeadCurve, CurveError> {
        if points.len() < 2 {
            return Err(CurveError(format!("needs at least two (flow, head) points, found {}", points.len())));
        }
        for (i, &(q, h)) in points.iter().enumerate() {
            if !q.is_finite() || !h.is_finite() {
                return Err(CurveError(format!("point {} is not a pair of finite numbers", i + 1)));
            }
            if q < 0.0 || h < 0.0 {
                return Err(CurveError(format!("point {}: flows and heads must not be negative", i + 1)));
            }
        }
        increasing_flows(points)?;
        for (i, w) in points.windows(2).enumerate() {
            if w[1].1 >= w[0].1 {
                return Err(CurveError(format!(
                    "heads must decrease strictly as flow increases (points {} and {})",
                    i + 1,
                    i + 2
                )));
            }
        }
        let curve = match points.len() {
            2 => {
                let ((q1, h1), (q2, h2)) = (points[0], points[1]);
                let k = (h1 - h2) / (q2 * q2 - q1 * q1);
                HeadCurve::Quadratic { a: h1 + k * q1 * q1, b: 0.0, c: -k }
            }
            3 => {
                let ((x0, y0), (x1, y1), (x2, y2)) = (points[0], points[1], points[2]);
                // Newton's divided differences.
                let d01 = (y1 - y0) / (x1 - x0);
                let d12 = (y2 - y1) / (x2 - x1);
                let c = (d12 - d01) / (x2 - x0);
                let b = d01 - c * (x0 + x1);
                let a = y0 - b * x0 - c * x0 * x0;
                HeadCurve::Quadratic { a, b, c }
            }
            _ => {
                let q: Vec<f64> = points.iter().map(|p| p.0).collect();
                let h: Vec<f64> = points.iter().map(|p| p.1).collect();
                let d = fritsch_carlson_slopes(&q, &h);
                let n = q.len();
                let tail = (h[n - 1] - h[n - 2]) / (q[n - 1] - q[n - 2]);
                HeadCurve::Monotone { q, h, d, tail }
            }
        };
        curve.check_decreasing(points)?;
        Ok(curve)
    }

    fn check_decreasing(&self, points: &[(f64, f64)]) -> Result<(), CurveError> {
        if let HeadCurve::Quadratic { b, c, .. } = *self {
            // h'(Q) = b + 2cQ must stay negative on (0, end], where end is the last point or the
            // run-out, whichever is further.
            let last = points[points.len() - 1].0;
            let end = self.runout().unwrap_or(last).max(last);
            if b > 0.0 || b + 2.0 * c * end >= 0.0 {
                return Err(CurveError(
                    "the quadratic through these points does not fall steadily from zero flow to the last point; \
                     give more points (a monotone cubic is then used) or check the values"
                        .into(),
                ));
            }
        }
        Ok(())
    }

    /// Head at zero flow (shutoff head) at speed 1, m.
    pub fn shutoff(&self) -> f64 {
        self.head(0.0).0
    }

    /// The flow at which the head falls to zero at speed 1, if the curve reaches it.
    pub fn runout(&self) -> Option<f64> {
        match *self {
            HeadCurve::Quadratic { a, b, c } => {
                if c == 0.0 {
                    return (b < 0.0).then(|| -a / b);
                }
                let disc = b * b - 4.0 * a * c;
                if disc < 0.0 {
                    return None;
                }
                let s = disc.sqrt();
                [(-b + s) / (2.0 * c), (-b - s) / (2.0 * c)].into_iter().filter(|r| *r > 0.0).reduce(f64::min)
            }
            HeadCurve::Monotone { ref q, ref h, tail, .. } => {
                let n = q.len();
                Some(q[n - 1] - h[n - 1] / tail)
            }
        }
    }

    /// The largest flow of the given points (where the curve's data end), m³/s.
    pub fn last_point_flow(&self) -> Option<f64> {
        match self {
            HeadCurve::Quadratic { .. } => None,
            HeadCurve::Monotone { q, .. } => q.last().copied(),
        }
    }

    /// Head and slope dH/dQ at flow `q ≥ 0` and speed 1. Negative flows continue on the tangent at
    /// zero flow (used only while iterating; a pump never settles at negative flow).
    pub fn head(&self, q: f64) -> (f64, f64) {
        if q < 0.0 {
            let (h0, d0) = self.head(0.0);
            return (h0 + d0 * q, d0);
        }
        match self {
            HeadCurve::Quadratic { a, b, c } => (a + b * q + c * q * q, b + 2.0 * c * q),
            HeadCurve::Monotone { q: xs, h, d, tail } => {
                let n = xs.len();
                if q <= xs[0] {
                    return (h[0] + d[0] * (q - xs[0]), d[0]);
                }
                if q >= xs[n - 1] {
                    return (h[n - 1] + tail * (q - xs[n - 1]), *tail);
                }
                let i = xs.partition_point(|&x| x <= q) - 1;
                hermite(xs[i], xs[i + 1], h[i], h[i + 1], d[i], d[i + 1], q)
            }
        }
    }

    /// Head and slope at flow `q` and relative speed `s > 0` by the affinity laws.
    pub fn head_at_speed(&self, q: f64, s: f64) -> (f64, f64) {
        let (h, d) = self.head(q / s);
        (s * s * h, s * d)
    }
}

/// Checks that the flows of a curve's points increase strictly.
fn increasing_flows(points: &[(f64, f64)]) -> Result<(), CurveError> {
    match points.windows(2).position(|w| w[1].0 <= w[0].0) {
        Some(i) => Err(CurveError(format!("flows must increase from point to point (points {} and {})", i + 1, i + 2))),
        None => Ok(()),
    }
}

/// Value and derivative of the cubic Hermite interpolant on `[x0, x1]` at `x`.
fn hermite(x0: f64, x1: f64, y0: f64, y1: f64, d0: f64, d1: f64, x: f64) -> (f64, f64) {
    let w = x1 - x0;
    let t = (x - x0) / w;
    let (t2, t3) = (t * t, t * t * t);
    let v = (2.0 * t3 - 3.0 * t2 + 1.0) * y0
        + (t3 - 2.0 * t2 + t) * w * d0
        + (-2.0 * t3 + 3.0 * t2) * y1
        + (t3 - t2) * w * d1;
    let dv = ((6.0 * t2 - 6.0 * t) * y0
        + (3.0 * t2 - 4.0 * t + 1.0) * w * d0
        + (-6.0 * t2 + 6.0 * t) * y1
        + (3.0 * t2 - 2.0 * t) * w * d1)
        / w;
    (v, dv)
}

/// Slopes of the Fritsch–Carlson monotone cubic: weighted harmonic means of neighbouring secants
/// inside, the shape-preserving three-point formula at the ends.
pub fn fritsch_carlson_slopes(x: &[f64], y: &[f64]) -> Vec<f64> {
    let n = x.len();
    let hs: Vec<f64> = x.windows(2).map(|w| w[1] - w[0]).collect();
    let delta: Vec<f64> = (0..n - 1).map(|i| (y[i + 1] - y[i]) / hs[i]).collect();
    let mut d = vec![0.0; n];
    if n == 2 {
        d[0] = delta[0];
        d[1] = delta[0];
        return d;
    }
    for k in 1..n - 1 {
        if delta[k - 1] * delta[k] > 0.0 {
            let w1 = 2.0 * hs[k] + hs[k - 1];
            let w2 = hs[k] + 2.0 * hs[k - 1];
            d[k] = (w1 + w2) / (w1 / delta[k - 1] + w2 / delta[k]);
        }
    }
    let end = |h0: f64, h1: f64, m0: f64, m1: f64| {
        let d = ((2.0 * h0 + h1) * m0 - h0 * m1) / (h0 + h1);
        if d.signum() != m0.signum() {
            0.0
        } else if m0.signum() != m1.signum() && d.abs() > 3.0 * m0.abs() {
            3.0 * m0
        } else {
            d
        }
    };
    d[0] = end(hs[0], hs[1], delta[0], delta[1]);
    d[n - 1] = end(hs[n - 2], hs[n - 3], delta[n - 2], delta[n - 3]);
    d
}

/// A pump efficiency curve: `η(Q)` as a fraction, or a constant.
#[derive(Clone, Debug, PartialEq)]
pub enum Efficiency {
    /// The same efficiency at every flow.
    Constant(f64),
    /// Monotone cubic through `(Q, η)` points (η as a fraction), held constant outside them.
    Curve {
        /// flows
        q: Vec<f64>,
        /// efficiencies, fractions
        eta: Vec<f64>,
        /// slopes
        d: Vec<f64>,
    },
}

impl Efficiency {
    /// Efficiency assumed when none is given (common practice for a mid-size centrifugal pump).
    pub const DEFAULT: f64 = 0.75;

    /// Fits an efficiency curve to points `(Q, η)` (η as a fraction).
    pub fn fit(points: &[(f64, f64)]) -> Result<Efficiency, CurveError> {
        if points.is_empty() {
            return Err(CurveError("needs at least one (flow, efficiency) point".into()));
        }
        for (i, &(q, e)) in points.iter().enumerate() {
            if !q.is_finite() || !e.is_finite() || q < 0.0 {
                return Err(CurveError(format!("point {}: flow must be a finite non-negative number", i + 1)));
            }
            if !(e > 0.0 && e <= 1.0) {
                return Err(CurveError(format!("point {}: efficiency must be above 0 and at most 100 percent", i + 1)));
            }
        }
        increasing_flows(points)?;
        if points.len() == 1 {
            return Ok(Efficiency::Constant(points[0].1));
        }
        let q: Vec<f64> = points.iter().map(|p| p.0).collect();
        let eta: Vec<f64> = points.iter().map(|p| p.1).collect();
        let d = fritsch_carlson_slopes(&q, &eta);
        Ok(Efficiency::Curve { q, eta, d })
    }

    /// Efficiency (fraction) at flow `q` and speed `s` (affinity: η(Q, s) = η(Q/s)).
    pub fn at(&self, q: f64, s: f64) -> f64 {
        match self {
            Efficiency::Constant(e) => *e,
            Efficiency::Curve { q: xs, eta, d } => {
                let x = if s > 0.0 { q / s } else { q };
                let n = xs.len();
                if x <= xs[0] {
                    eta[0]
                } else if x >= xs[n - 1] {
                    eta[n - 1]
                } else {
                    let i = xs.partition_point(|&v| v <= x) - 1;
                    hermite(xs[i], xs[i + 1], eta[i], eta[i + 1], d[i], d[i + 1], x).0
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn three_point_quadratic_passes_through_points() {
        // Values worked by hand: through (0, 60), (30, 50), (45, 38) in L/s and m.
        let pts = [(0.0, 60.0), (0.030, 50.0), (0.045, 38.0)];
        let c = HeadCurve::fit(&pts).unwrap();
        for (q, h) in pts {
            assert!((c.head(q).0 - h).abs() < 1e-9, "{q}");
        }
        assert!((c.shutoff() - 60.0).abs() < 1e-12);
    }

    #[test]
    fn two_point_curve_has_no_linear_term() {
        let c = HeadCurve::fit(&[(0.01, 40.0), (0.03, 20.0)]).unwrap();
        let HeadCurve::Quadratic { a, b, c: cc } = c else { panic!() };
        assert_eq!(b, 0.0);
        // h0 - k q^2: k = 20 / (0.0009 - 0.0001) = 25000, h0 = 40 + 25000 * 1e-4 = 42.5.
        assert!((a - 42.5).abs() < 1e-9 && (cc + 25_000.0).abs() < 1e-6);
    }

    #[test]
    fn rejects_non_decreasing_and_humped_curves() {
        assert!(HeadCurve::fit(&[(0.0, 10.0), (1.0, 12.0)]).is_err());
        assert!(HeadCurve::fit(&[(0.0, 10.0), (0.0, 8.0)]).is_err());
        assert!(HeadCurve::fit(&[(0.0, 10.0)]).is_err());
        // A quadratic through these rises from zero flow before it falls.
        assert!(HeadCurve::fit(&[(0.5, 50.0), (1.0, 49.9), (1.5, 10.0)]).is_err());
    }

    #[test]
    fn affinity_laws() {
        let c = HeadCurve::fit(&[(0.0, 60.0), (0.030, 50.0), (0.045, 38.0)]).unwrap();
        let s = 0.8;
        // H(Q, s) = s^2 h(Q/s): the point (30 L/s, 50 m) maps to (24 L/s, 32 m).
        let (h, _) = c.head_at_speed(0.024, s);
        assert!((h - 32.0).abs() < 1e-9);
    }

    #[test]
    fn monotone_cubic_is_monotone_and_continuous() {
        let pts = [(0.0, 70.0), (0.01, 68.0), (0.02, 62.0), (0.03, 50.0), (0.04, 30.0)];
        let c = HeadCurve::fit(&pts).unwrap();
        let mut prev = f64::INFINITY;
        for i in 0..=500 {
            let q = i as f64 * 1e-4;
            let (h, d) = c.head(q);
            assert!(h < prev && d <= 0.0, "not decreasing at {q}");
            prev = h;
        }
        for (q, h) in pts {
            assert!((c.head(q).0 - h).abs() < 1e-12);
        }
    }
}
