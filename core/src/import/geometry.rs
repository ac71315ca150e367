//! Distances, feet of perpendiculars and search boxes, for longitude/latitude or projected input.
//!
//! Longitude/latitude: lengths and snap distances are geodesics on the WGS 84 ellipsoid
//! (Karney 2013, through `geographiclib-rs`, a port of the author's own library that is exact to
//! round-off). The spatial index needs planar boxes: positions are scaled to metres at the mean
//! latitude (`x = λ·N(φ₀)·cos φ₀`, `y = φ·M(φ₀)`, radians, with the ellipsoid's radii of
//! curvature), and every search box is widened by the ratio of the local scale to that one, so
//! that no candidate is missed; candidates are then confirmed with the exact geodesic. The foot
//! of a perpendicular is found in the tangent plane at the point (a sub-millimetre difference at
//! the snap distances of digitised networks). Projected input: plain Euclidean geometry in the
//! file's unit.

use geographiclib_rs::{Geodesic, InverseGeodesic};

/// WGS 84 semi-major axis, m, and flattening (NIMA TR8350.2, 2000).
const WGS84_A: f64 = 6_378_137.0;
const WGS84_F: f64 = 1.0 / 298.257_223_563;

/// Radii of curvature at latitude `lat` (degrees): meridional M and prime vertical N, m.
fn radii(lat: f64) -> (f64, f64) {
    let e2 = WGS84_F * (2.0 - WGS84_F);
    let s = lat.to_radians().sin();
    let w = (1.0 - e2 * s * s).sqrt();
    (WGS84_A * (1.0 - e2) / (w * w * w), WGS84_A / w)
}

/// Metres per degree of longitude and of latitude at `lat`.
fn scale(lat: f64) -> (f64, f64) {
    let (m, n) = radii(lat);
    let r = std::f64::consts::PI / 180.0;
    // Near the poles a degree of longitude shrinks to nothing; keep the boxes finite.
    ((r * n * lat.to_radians().cos()).max(1e-3), r * m)
}

/// The geometry of one import.
#[derive(Clone, Debug)]
pub struct Frame {
    geodesic: Option<Geodesic>,
    /// Working-plane scale (x, y) per coordinate unit.
    k0: (f64, f64),
}

impl Frame {
    /// Longitude/latitude input around the mean latitude `mean_lat`.
    pub fn lonlat(mean_lat: f64) -> Self {
        Frame { geodesic: Some(Geodesic::wgs84()), k0: scale(mean_lat) }
    }

    /// Projected input.
    pub fn projected() -> Self {
        Frame { geodesic: None, k0: (1.0, 1.0) }
    }

    /// The position in the working plane of the spatial index.
    pub fn work(&self, p: (f64, f64)) -> [f64; 2] {
        [p.0 * self.k0.0, p.1 * self.k0.1]
    }

    /// Half-width, in the working plane, of a box around `p` that holds every position within
    /// distance `d` of it.
    pub fn reach(&self, p: (f64, f64), d: f64) -> f64 {
        match self.geodesic {
            None => d * (1.0 + 1e-9) + 1e-12,
            Some(_) => {
                let (kx, ky) = scale(p.1);
                // Ellipsoid versus tangent plane, and latitude change across the box: 1 % covers
                // both at any distance that makes sense as a snap tolerance.
                d * (self.k0.0 / kx).max(self.k0.1 / ky) * 1.01 + 1e-9
            }
        }
    }

    /// The distance between two positions: geodesic metres, or projected units.
    pub fn distance(&self, a: (f64, f64), b: (f64, f64)) -> f64 {
        match &self.geodesic {
            None => (a.0 - b.0).hypot(a.1 - b.1),
            Some(g) => {
                if a == b {
                    return 0.0;
                }
                let s12: f64 = g.inverse(a.1, a.0, b.1, b.0);
                s12
            }
        }
    }

    /// The foot of the perpendicular from `p` on segment `a`–`b`: its parameter `t` (0 at `a`,
    /// 1 at `b`) and the distance from `p`.
    pub fn foot(&self, p: (f64, f64), a: (f64, f64), b: (f64, f64)) -> (f64, f64) {
        let (kx, ky) = match self.geodesic {
            None => (1.0, 1.0),
            Some(_) => scale(p.1),
        };
        let (ax, ay) = ((a.0 - p.0) * kx, (a.1 - p.1) * ky);
        let (bx, by) = ((b.0 - p.0) * kx, (b.1 - p.1) * ky);
        let (dx, dy) = (bx - ax, by - ay);
        let len2 = dx * dx + dy * dy;
        let t = if len2 > 0.0 { (-(ax * dx + ay * dy) / len2).clamp(0.0, 1.0) } else { 0.0 };
        let f = lerp(a, b, t);
        (t, self.distance(p, f))
    }
}

/// The position a fraction `t` of the way from `a` to `b`.
pub fn lerp(a: (f64, f64), b: (f64, f64), t: f64) -> (f64, f64) {
    if t <= 0.0 {
        a
    } else if t >= 1.0 {
        b
    } else {
        (a.0 + (b.0 - a.0) * t, a.1 + (b.1 - a.1) * t)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn geodesic_of_one_degree_of_latitude_at_the_equator() {
        // 110 574.4 m: one degree of latitude from the equator on WGS 84 (the meridian arc;
        // common surveying tables give 110.574 km).
        let f = Frame::lonlat(0.0);
        let d = f.distance((0.0, 0.0), (0.0, 1.0));
        assert!((d - 110_574.4).abs() < 0.1, "{d}");
    }

    #[test]
    fn search_boxes_hold_every_position_within_the_distance() {
        // Boxes built at a mean latitude of 30 degrees still hold positions 0.5 m away at 60.
        let f = Frame::lonlat(30.0);
        for lat in [0.0, 30.0, 60.0, 75.0] {
            let p = (10.0, lat);
            let east = (10.0 + 0.5 / scale(lat).0, lat);
            let north = (10.0, lat + 0.5 / scale(lat).1);
            for q in [east, north] {
                let (a, b) = (f.work(p), f.work(q));
                let r = f.reach(p, 0.5);
                assert!((a[0] - b[0]).abs() <= r && (a[1] - b[1]).abs() <= r, "lat {lat}");
                assert!((f.distance(p, q) - 0.5).abs() < 1e-3, "lat {lat}: {}", f.distance(p, q));
            }
        }
    }

    #[test]
    fn foot_on_a_segment() {
        let f = Frame::projected();
        let (t, d) = f.foot((3.0, 0.1), (0.0, 0.0), (10.0, 0.0));
        assert!((t - 0.3).abs() < 1e-12 && (d - 0.1).abs() < 1e-12);
        let (t, d) = f.foot((-2.0, 0.0), (0.0, 0.0), (10.0, 0.0));
        assert_eq!(t, 0.0);
        assert!((d - 2.0).abs() < 1e-12);
    }
}
