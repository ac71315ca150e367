//! The water in tanks under each mixing model, over one transport step.
//!
//! A step has three phases, so that the network can take a tank's outflow value before it knows
//! what flows in: [`TankState::react`] (the contents react, in the bulk only, and age),
//! [`TankState::outflow`] (the mean value of the water leaving during the step) and
//! [`TankState::settle`] (the water that came in is added and the water that left removed).
//!
//! - Complete mixing: one volume obeying `d(cV)/dt = Q_in c_in − Q_out c`, solved exactly for
//!   constant flows: `c_in − c(t) = (c_in − c_0) g(t)` with `g = (V(t)/V_0)^(−Q_in/(Q_in−Q_out))`
//!   (or `exp(−Q_in t/V_0)` when the volume is constant), and the outflow's mean value taken from
//!   the mean of `g` over the step (Simpson's rule). The inflow value used is the one of the
//!   previous step (known before the network is swept); mass is conserved whatever it is.
//! - Two zones: the inlet zone holds the share `f` of the stored volume, and water enters and
//!   leaves through it; when the volume grows by ΔV, `(1 − f) ΔV` of the inlet zone's water
//!   moves to the main zone, when it shrinks, the same from the main zone back (explicit in the
//!   step: the outflow carries the inlet zone's value at the start).
//! - Plug flow (first in, first out) and stacked (last in, first out): the contents as segments
//!   like a pipe's, leaving from the old end or from the new end.

use super::transport::{Merge, Segments, Transform};

/// One tank's contents.
#[derive(Clone, Debug)]
pub enum TankState {
    /// One completely mixed volume: volume (m³), mass per constituent, and the last inflow value.
    Complete {
        /// Volume, m³.
        volume: f64,
        /// Value × volume per constituent.
        mass: Vec<f64>,
        /// Mean value of the last step's inflow (the prediction for the next).
        last_in: Vec<f64>,
    },
    /// Inlet zone and main zone.
    TwoZone {
        /// Inlet zone's share of the volume.
        share: f64,
        /// Volumes of the inlet and main zones.
        volume: [f64; 2],
        /// Mass per constituent in each zone.
        mass: [Vec<f64>; 2],
    },
    /// Segments; `lifo` says whether water leaves from the new end.
    Layered {
        /// Last in, first out.
        lifo: bool,
        /// The segments (one "pipe").
        seg: Box<Segments>,
        /// Volume held, m³.
        volume: f64,
    },
}

impl TankState {
    /// A completely mixed tank.
    pub fn complete(volume: f64, initial: &[f64]) -> Self {
        TankState::Complete { volume, mass: initial.iter().map(|c| c * volume).collect(), last_in: initial.to_vec() }
    }

    /// A two-zone tank.
    pub fn two_zone(share: f64, volume: f64, initial: &[f64]) -> Self {
        let v = [share * volume, (1.0 - share) * volume];
        TankState::TwoZone {
            share,
            volume: v,
            mass: [initial.iter().map(|c| c * v[0]).collect(), initial.iter().map(|c| c * v[1]).collect()],
        }
    }

    /// A layered (plug-flow or stacked) tank.
    pub fn layered(lifo: bool, volume: f64, initial: &[f64], transforms: Vec<Transform>, merge: Vec<Merge>) -> Self {
        // One "pipe" large enough for any fill; its volume field is only a scale for round-off.
        let seg = Segments::new(transforms, merge, vec![volume.max(1e-9)], &[initial.to_vec()]);
        TankState::Layered { lifo, seg: Box::new(seg), volume: volume.max(1e-9) }
    }

    /// Volume held, m³.
    pub fn volume(&self) -> f64 {
        match self {
            TankState::Complete { volume, .. } | TankState::Layered { volume, .. } => *volume,
            TankState::TwoZone { volume, .. } => volume[0] + volume[1],
        }
    }

    /// Mass (value × volume) of constituent `c` held, at elapsed time `t`.
    pub fn mass(&self, c: usize, t: f64) -> f64 {
        match self {
            TankState::Complete { mass, .. } => mass[c],
            TankState::TwoZone { mass, .. } => mass[0][c] + mass[1][c],
            TankState::Layered { seg, .. } => seg.mass(0, c, t),
        }
    }

    /// The value of the water the tank would give now (what it reports).
    pub fn value(&self, c: usize, t: f64) -> Option<f64> {
        match self {
            TankState::Complete { volume, mass, .. } => (*volume > 0.0).then(|| mass[c] / volume),
            TankState::TwoZone { volume, mass, .. } => (volume[0] > 0.0).then(|| mass[0][c] / volume[0]),
            TankState::Layered { lifo, seg, .. } => seg.end_value(0, !*lifo, c, t),
        }
    }

    /// Reaction over `dt` of constituent `c`: first order at rate `k` (1/s), or ageing when
    /// `age`; returns the mass gained.
    pub fn react(&mut self, c: usize, k: f64, age: bool, dt: f64, t: f64) -> f64 {
        match self {
            TankState::Complete { volume, mass, .. } => {
                let gained = if age { *volume * dt } else { mass[c] * (k * dt).exp_m1() };
                mass[c] += gained;
                gained
            }
            TankState::TwoZone { volume, mass, .. } => {
                let mut gained = 0.0;
                for z in 0..2 {
                    let g = if age { volume[z] * dt } else { mass[z][c] * (k * dt).exp_m1() };
                    mass[z][c] += g;
                    gained += g;
                }
                gained
            }
            TankState::Layered { seg, volume, .. } => {
                if age {
                    // Segments age through the elapsed time itself.
                    *volume * dt
                } else {
                    seg.react(0, c, k, dt, t)
                }
            }
        }
    }

    /// Takes `v_out` of water out for a step of length `dt` in which `v_in` comes in; adds the
    /// mass that leaves to `mass_out` (per constituent).
    pub fn outflow(&mut self, v_in: f64, v_out: f64, dt: f64, mass_out: &mut [f64], t: f64) {
        if v_out <= 0.0 {
            return;
        }
        match self {
            TankState::Complete { volume, mass, last_in } => {
                let v0 = *volume;
                if v0 <= 0.0 {
                    for (c, m) in mass_out.iter_mut().enumerate() {
                        *m += last_in[c] * v_out;
                    }
                    return;
                }
                let g_mean = mean_g(v0, v_in / dt, v_out / dt, dt);
                for (c, m) in mass_out.iter_mut().enumerate() {
                    let c0 = mass[c] / v0;
                    let ci = if v_in > 0.0 { last_in[c] } else { c0 };
                    let mean = ci - (ci - c0) * g_mean;
                    *m += mean * v_out;
                    mass[c] -= mean * v_out;
                }
                *volume -= v_out;
            }
            TankState::TwoZone { volume, mass, .. } => {
                let v0 = volume[0];
                for (c, m) in mass_out.iter_mut().enumerate() {
                    let c0 = if v0 > 0.0 { mass[0][c] / v0 } else { 0.0 };
                    *m += c0 * v_out;
                    mass[0][c] -= c0 * v_out;
                }
                volume[0] -= v_out;
            }
            TankState::Layered { lifo, seg, volume } => {
                let taken = seg.pop(0, !*lifo, v_out, mass_out, t);
                *volume -= taken;
                if taken < v_out {
                    // Round-off or a tank run dry: the rest is the water at the outlet.
                    let rest = v_out - taken;
                    *volume -= rest;
                    let mut probe = vec![0.0; mass_out.len()];
                    for (c, p) in probe.iter_mut().enumerate() {
                        *p = seg.end_value(0, !*lifo, c, t).unwrap_or(0.0) * rest;
                    }
                    for (m, p) in mass_out.iter_mut().zip(probe) {
                        *m += p;
                    }
                }
            }
        }
    }

    /// Adds the step's inflow: volume `v_in` carrying `mass_in` (per constituent).
    pub fn settle(&mut self, v_in: f64, mass_in: &[f64], t: f64) {
        match self {
            TankState::Complete { volume, mass, last_in } => {
                for c in 0..mass.len() {
                    mass[c] += mass_in[c];
                    if v_in > 0.0 {
                        last_in[c] = mass_in[c] / v_in;
                    }
                }
                *volume += v_in;
            }
            TankState::TwoZone { share, volume, mass } => {
                let before = volume[0] + volume[1];
                for c in 0..mass[0].len() {
                    mass[0][c] += mass_in[c];
                }
                volume[0] += v_in;
                let total = volume[0] + volume[1];
                // Bring the inlet zone back to its share: the excess moves to the main zone, or
                // the main zone gives back what the inlet zone lacks.
                let target = *share * total;
                let moved = volume[0] - target;
                let _ = before;
                if moved > 0.0 && volume[0] > 0.0 {
                    for c in 0..mass[0].len() {
                        let m = mass[0][c] / volume[0] * moved;
                        mass[0][c] -= m;
                        mass[1][c] += m;
                    }
                } else if moved < 0.0 && volume[1] > 0.0 {
                    for c in 0..mass[0].len() {
                        let m = mass[1][c] / volume[1] * (-moved);
                        mass[1][c] -= m;
                        mass[0][c] += m;
                    }
                }
                volume[0] -= moved;
                volume[1] += moved;
            }
            TankState::Layered { lifo: _, seg, volume } => {
                if v_in > 0.0 {
                    let x: Vec<f64> = mass_in.iter().map(|m| m / v_in).collect();
                    // New water enters at the `to` end; plug flow leaves from the `from` end,
                    // stacked from the `to` end.
                    seg.push(0, false, v_in, &x, t);
                    *volume += v_in;
                }
            }
        }
    }

    /// Segments held (layered tanks), for the segment count.
    pub fn segments(&self) -> usize {
        match self {
            TankState::Layered { seg, .. } => seg.count(),
            _ => 0,
        }
    }
}

/// Mean over a step of `g(t)`, the decay of the difference from the inflow value in a completely
/// mixed volume `v0` with inflow `qi` and outflow `qo` (m³/s); Simpson's rule on the exact `g`.
fn mean_g(v0: f64, qi: f64, qo: f64, dt: f64) -> f64 {
    if qi <= 0.0 {
        return 1.0;
    }
    let g = |t: f64| {
        let dq = qi - qo;
        if dq.abs() <= 1e-12 * qi {
            (-qi * t / v0).exp()
        } else {
            let ratio = (1.0 + dq * t / v0).max(1e-300);
            ratio.powf(-qi / dq)
        }
    };
    (g(0.0) + 4.0 * g(0.5 * dt) + g(dt)) / 6.0
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn complete_mixing_at_constant_volume_follows_the_exponential() {
        // V = 1000 m³, Q = 0.1 m³/s through it: τ = 10 000 s; inflow value 1, contents 0.
        let (v, q, dt) = (1000.0, 0.1, 300.0);
        let mut tank = TankState::complete(v, &[0.0]);
        let mut t = 0.0;
        for _ in 0..100 {
            let mut out = [0.0];
            tank.outflow(q * dt, q * dt, dt, &mut out, t);
            tank.settle(q * dt, &[q * dt], t);
            t += dt;
            let exact = 1.0 - (-t / (v / q)).exp();
            assert!((tank.value(0, t).unwrap() - exact).abs() < 1e-6, "t = {t}");
        }
    }

    #[test]
    fn two_zone_keeps_its_share_and_mass() {
        let mut tank = TankState::two_zone(0.2, 100.0, &[1.0]);
        let mut out = [0.0];
        tank.outflow(10.0, 5.0, 60.0, &mut out, 0.0);
        tank.settle(10.0, &[0.0], 0.0);
        assert!((tank.volume() - 105.0).abs() < 1e-12);
        assert!((tank.mass(0, 0.0) + out[0] - 100.0).abs() < 1e-12);
        let TankState::TwoZone { volume, .. } = &tank else { unreachable!() };
        assert!((volume[0] - 21.0).abs() < 1e-12);
    }

    #[test]
    fn stacked_gives_back_the_newest_water() {
        let m = vec![Merge { relative: 1e-3, absolute: 0.0 }];
        let mut tank = TankState::layered(true, 10.0, &[0.0], vec![Transform::Plain], m.clone());
        tank.settle(5.0, &[5.0], 0.0);
        let mut out = [0.0];
        tank.outflow(0.0, 5.0, 60.0, &mut out, 0.0);
        assert_eq!(out[0], 5.0);
        let mut fifo = TankState::layered(false, 10.0, &[0.0], vec![Transform::Plain], m);
        fifo.settle(5.0, &[5.0], 0.0);
        let mut out = [0.0];
        fifo.outflow(0.0, 5.0, 60.0, &mut out, 0.0);
        assert_eq!(out[0], 0.0);
    }
}
