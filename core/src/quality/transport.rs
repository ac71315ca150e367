//! The water in pipes as segments that move with the flow (Lagrangian time-driven transport,
//! after Liou & Kroon 1987, "Modeling the propagation of waterborne substances in distribution
//! networks", J. AWWA 79(11), and Rossman & Boulos 1996, J. Water Resour. Plann. Manage.
//! 122(2)).
//!
//! Each pipe holds a queue of segments, ordered from its `from` end to its `to` end; a segment
//! is a volume with one value per constituent. In a transport step the volume `|Q|·Δt` enters
//! at the upstream end with the upstream node's value and the same volume leaves at the
//! downstream end (possibly several segments, the last one cut). A new parcel merges into the
//! segment at the inlet when every constituent's values differ by no more than the tolerance.
//!
//! Reactions are applied lazily: all water in a pipe reacts at the same first-order rate, so a
//! segment keeps a *stored* value from which its current value follows by one factor per pipe
//! and substance (`c = s · exp(Λ)`, `Λ = ∫ k dt` since the pipe's last renormalisation), and an
//! age keeps `s = age − T` (T the elapsed time). A step of reaction then costs one operation per
//! pipe, not per segment, and is exact for a rate constant over the step. The pipe's stored mass
//! `Σ s·v` is kept alongside, for the mass balance and the link means.

/// How a stored value maps to the current one.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Transform {
    /// `age = s + T`.
    Age,
    /// Conservative: `c = s`.
    Plain,
    /// First-order: `c = s · exp(Λ)`.
    Decay,
}

/// Merge thresholds of one constituent.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Merge {
    /// Relative tolerance (of the larger magnitude).
    pub relative: f64,
    /// Absolute tolerance.
    pub absolute: f64,
}

impl Merge {
    /// Whether two current values are close enough to be one segment.
    pub fn close(&self, a: f64, b: f64) -> bool {
        (a - b).abs() <= self.absolute.max(self.relative * a.abs().max(b.abs()))
    }
}

/// Segments of every pipe (links without volume hold none).
#[derive(Clone, Debug)]
pub struct Segments {
    nc: usize,
    transforms: Vec<Transform>,
    merge: Vec<Merge>,
    /// Per link: its segments.
    rings: Vec<Ring>,
    /// Per link: for each constituent `Σ s · v` over the segments, then for each constituent
    /// `exp(Λ)` (decay constituents only; 1 otherwise); side by side, so that a pipe's step
    /// touches one short run of memory.
    meta: Vec<f64>,
    /// Per link: its volume, m³ (0: passes water through at once).
    pub volume: Vec<f64>,
}

/// One pipe's segments: a ring buffer of records `[volume, s_0 .. s_{nc−1}]`, record 0 at the
/// pipe's `from` end. Water enters at one end and leaves at the other, so a ring (rather than
/// one growable queue of numbers) makes both a push and a pop a few stores, with no moves; its
/// capacity is a power of two, grown by doubling, so memory stays within twice the segments held.
///
/// The ring also keeps what a step needs of its pipe beside it (the volume held, and the
/// pipe's volume for the round-off threshold), one cache line per pipe: a step visits the pipes
/// in the order of the flow, not of their indices, and on networks of thousands of pipes the
/// time goes into fetching memory, not into arithmetic.
#[derive(Clone, Debug, Default)]
#[repr(align(64))]
struct Ring {
    /// `cap × stride` numbers.
    buf: Vec<f64>,
    /// Record index of the `from` end.
    head: u32,
    /// Records held.
    len: u32,
    /// Records the buffer can hold (0 or a power of two).
    cap: u32,
    /// The volume the segments hold, m³ (the pipe's volume up to round-off; a layered tank's
    /// contents).
    held: f64,
    /// Below this a segment's remaining volume is round-off, m³.
    crumb: f64,
}

impl Ring {
    /// Offset in `buf` of record `i` (counted from the `from` end).
    #[inline]
    fn slot(&self, i: u32, stride: usize) -> usize {
        ((self.head.wrapping_add(i)) & (self.cap - 1)) as usize * stride
    }

    /// Offset of the record at the `from` end (or the `to` end); the ring must not be empty.
    #[inline]
    fn end(&self, at_from: bool, stride: usize) -> usize {
        if at_from {
            self.head as usize * stride
        } else {
            self.slot(self.len - 1, stride)
        }
    }

    /// Room for one more record.
    fn reserve(&mut self, stride: usize) {
        if self.len < self.cap {
            return;
        }
        let cap = (self.cap * 2).max(4);
        let mut buf = vec![0.0; cap as usize * stride];
        for i in 0..self.len {
            let s = self.slot(i, stride);
            buf[i as usize * stride..(i as usize + 1) * stride].copy_from_slice(&self.buf[s..s + stride]);
        }
        self.buf = buf;
        self.head = 0;
        self.cap = cap;
    }

    /// A new record at the `from` end (or the `to` end); returns its offset.
    #[inline]
    fn add(&mut self, at_from: bool, stride: usize) -> usize {
        self.reserve(stride);
        self.len += 1;
        if at_from {
            self.head = (self.head + self.cap - 1) & (self.cap - 1);
            self.head as usize * stride
        } else {
            self.slot(self.len - 1, stride)
        }
    }

    /// Drops the record at the `from` end (or the `to` end).
    #[inline]
    fn remove(&mut self, at_from: bool) {
        self.len -= 1;
        if at_from {
            self.head = (self.head + 1) & (self.cap - 1);
        }
    }

    fn offsets(&self, stride: usize) -> impl Iterator<Item = usize> + '_ {
        (0..self.len).map(move |i| self.slot(i, stride))
    }
}

/// `exp(±200)`: the range of `exp(Λ)` beyond which a pipe's stored values are renormalised.
const FACTOR_HIGH: f64 = 7.225_973_768_125_749e86;
const FACTOR_LOW: f64 = 1.383_896_526_736_737_4e-87;

/// Constituents handled with values on the stack (more spill to the heap).
const STACK: usize = 16;

impl Segments {
    /// Pipes of the given volumes, each filled with one segment of the given current values
    /// (at elapsed time 0).
    pub fn new(transforms: Vec<Transform>, merge: Vec<Merge>, volume: Vec<f64>, initial: &[Vec<f64>]) -> Self {
        let nc = transforms.len();
        let n = volume.len();
        let mut meta = vec![0.0; n * 2 * nc];
        for p in 0..n {
            meta[p * 2 * nc + nc..(p + 1) * 2 * nc].fill(1.0);
        }
        let rings = volume.iter().map(|v| Ring { crumb: 1e-14 * v, ..Ring::default() }).collect();
        let mut s = Segments { nc, transforms, merge, rings, meta, volume };
        for p in 0..n {
            if s.volume[p] > 0.0 {
                let v = s.volume[p];
                s.push(p, true, v, &initial[p], 0.0);
            }
        }
        s
    }

    /// Number of constituents.
    pub fn constituents(&self) -> usize {
        self.nc
    }

    /// Segments held by all pipes.
    pub fn count(&self) -> usize {
        self.rings.iter().map(|r| r.len as usize).sum()
    }

    /// Numbers allocated for segments (records × (constituents + 1), spare room included).
    pub fn allocated(&self) -> usize {
        self.rings.iter().map(|r| r.buf.len()).sum()
    }

    #[inline]
    fn to_stored(&self, p: usize, c: usize, x: f64, t: f64) -> f64 {
        match self.transforms[c] {
            Transform::Age => x - t,
            Transform::Plain => x,
            Transform::Decay => x / self.meta[(2 * p + 1) * self.nc + c],
        }
    }

    #[inline]
    fn to_current(&self, p: usize, c: usize, s: f64, t: f64) -> f64 {
        match self.transforms[c] {
            Transform::Age => s + t,
            Transform::Plain => s,
            Transform::Decay => s * self.meta[(2 * p + 1) * self.nc + c],
        }
    }

    /// Current mass (value × volume) of constituent `c` in pipe `p` from a stored sum over
    /// `vol` of water.
    #[inline]
    fn mass_of(&self, p: usize, c: usize, stored: f64, vol: f64, t: f64) -> f64 {
        match self.transforms[c] {
            Transform::Age => stored + t * vol,
            Transform::Plain => stored,
            Transform::Decay => stored * self.meta[(2 * p + 1) * self.nc + c],
        }
    }

    /// Current mass of constituent `c` held in pipe `p`.
    pub fn mass(&self, p: usize, c: usize, t: f64) -> f64 {
        self.mass_of(p, c, self.meta[2 * p * self.nc + c], self.rings[p].held, t)
    }

    /// Puts `vol` of water with current values `x` into pipe `p` at its `from` end (or its `to`
    /// end), merging with the segment there when close enough.
    pub fn push(&mut self, p: usize, at_from: bool, vol: f64, x: &[f64], t: f64) {
        if vol <= 0.0 {
            return;
        }
        self.rings[p].held += vol;
        let nc = self.nc;
        let stride = nc + 1;
        let mut rec = [0.0f64; STACK];
        let mut heap;
        let s_new: &mut [f64] = if nc <= STACK {
            &mut rec[..nc]
        } else {
            heap = vec![0.0; nc];
            &mut heap
        };
        for c in 0..nc {
            s_new[c] = self.to_stored(p, c, x[c], t);
            self.meta[2 * p * nc + c] += s_new[c] * vol;
        }
        let ring = &self.rings[p];
        if ring.len > 0 {
            let e = ring.end(at_from, stride);
            let merge = (0..nc).all(|c| {
                let cur = self.to_current(p, c, ring.buf[e + 1 + c], t);
                self.merge[c].close(cur, x[c])
            });
            if merge {
                let ring = &mut self.rings[p];
                let v0 = ring.buf[e];
                let v1 = v0 + vol;
                for c in 0..nc {
                    let old = &mut ring.buf[e + 1 + c];
                    *old = (*old * v0 + s_new[c] * vol) / v1;
                }
                ring.buf[e] = v1;
                return;
            }
        }
        let ring = &mut self.rings[p];
        let e = ring.add(at_from, stride);
        ring.buf[e] = vol;
        ring.buf[e + 1..e + stride].copy_from_slice(s_new);
    }

    /// Takes `vol` of water out of pipe `p` at its `to` end (or its `from` end) and adds its
    /// current mass of each constituent to `mass`; returns the volume taken (less than `vol`
    /// only when the pipe ran out, which round-off alone can cause).
    pub fn pop(&mut self, p: usize, at_from: bool, vol: f64, mass: &mut [f64], t: f64) -> f64 {
        let nc = self.nc;
        let stride = nc + 1;
        let mut need = vol;
        let mut taken_stored = [0.0f64; STACK];
        let mut heap;
        let acc: &mut [f64] = if nc <= STACK {
            &mut taken_stored[..nc]
        } else {
            heap = vec![0.0; nc];
            &mut heap
        };
        let mut taken = 0.0;
        let ring = &mut self.rings[p];
        let crumb = ring.crumb;
        while need > 0.0 && ring.len > 0 {
            let e = ring.end(at_from, stride);
            let v = ring.buf[e];
            let take = v.min(need);
            for (c, a) in acc.iter_mut().enumerate() {
                *a += ring.buf[e + 1 + c] * take;
            }
            taken += take;
            need -= take;
            if take >= v || v - take <= crumb {
                ring.remove(at_from);
            } else {
                ring.buf[e] = v - take;
            }
        }
        let empty = ring.len == 0;
        ring.held = if empty { 0.0 } else { ring.held - taken };
        for c in 0..nc {
            mass[c] += self.mass_of(p, c, acc[c], taken, t);
            let stored = &mut self.meta[2 * p * nc + c];
            *stored = if empty { 0.0 } else { *stored - acc[c] };
        }
        taken
    }

    /// Lets constituent `c` in pipe `p` react at rate `k` (1/s) for `dt`; returns the mass gained
    /// (negative for decay).
    pub fn react(&mut self, p: usize, c: usize, k: f64, dt: f64, t: f64) -> f64 {
        let em1 = (k * dt).exp_m1();
        self.react_by(p, c, em1 + 1.0, em1, t)
    }

    /// Like [`Segments::react`] with the factor `growth = exp(k dt)` and `em1 = exp(k dt) − 1`
    /// given (a transport step repeats them).
    #[inline]
    pub fn react_by(&mut self, p: usize, c: usize, growth: f64, em1: f64, t: f64) -> f64 {
        if em1 == 0.0 || self.rings[p].len == 0 {
            return 0.0;
        }
        let before = self.mass(p, c, t);
        let i = (2 * p + 1) * self.nc + c;
        self.meta[i] *= growth;
        if !(FACTOR_LOW..=FACTOR_HIGH).contains(&self.meta[i]) {
            self.renormalise(p, c);
        }
        before * em1
    }

    fn renormalise(&mut self, p: usize, c: usize) {
        let nc = self.nc;
        let (i, l) = (2 * p * nc + c, (2 * p + 1) * nc + c);
        let f = self.meta[l];
        let stride = self.nc + 1;
        let ring = &mut self.rings[p];
        let mut sum = 0.0;
        for i in 0..ring.len {
            let e = ring.slot(i, stride);
            ring.buf[e + 1 + c] *= f;
            sum += ring.buf[e + 1 + c] * ring.buf[e];
        }
        self.meta[i] = sum;
        self.meta[l] = 1.0;
    }

    /// Recomputes the stored sums of every pipe from its segments (removes the round-off that
    /// adding and taking away accumulates).
    pub fn resum(&mut self) {
        let nc = self.nc;
        let stride = nc + 1;
        for (p, ring) in self.rings.iter_mut().enumerate() {
            ring.held = ring.offsets(stride).map(|e| ring.buf[e]).sum();
            for c in 0..nc {
                self.meta[2 * p * nc + c] = ring.offsets(stride).map(|e| ring.buf[e + 1 + c] * ring.buf[e]).sum();
            }
        }
    }

    /// Current value of the segment at the `from` end (or the `to` end) of pipe `p`.
    pub fn end_value(&self, p: usize, at_from: bool, c: usize, t: f64) -> Option<f64> {
        let ring = &self.rings[p];
        if ring.len == 0 {
            return None;
        }
        let e = ring.end(at_from, self.nc + 1);
        Some(self.to_current(p, c, ring.buf[e + 1 + c], t))
    }

    /// Volume-weighted mean of constituent `c` in pipe `p`.
    pub fn mean(&self, p: usize, c: usize, t: f64) -> f64 {
        let v = self.rings[p].held;
        if v > 0.0 {
            self.mass(p, c, t) / v
        } else {
            f64::NAN
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn one(transform: Transform) -> Segments {
        Segments::new(vec![transform], vec![Merge { relative: 1e-3, absolute: 0.0 }], vec![10.0], &[vec![0.0]])
    }

    #[test]
    fn water_leaves_in_the_order_it_came() {
        let mut s = one(Transform::Plain);
        s.push(0, true, 4.0, &[1.0], 0.0);
        let mut m = [0.0];
        // The 10 m³ of starting water leave first.
        assert_eq!(s.pop(0, false, 4.0, &mut m, 0.0), 4.0);
        assert_eq!(m[0], 0.0);
        s.push(0, true, 8.0, &[2.0], 0.0);
        let mut m = [0.0];
        s.pop(0, false, 8.0, &mut m, 0.0);
        // 6 of the starting water and 2 of the first parcel.
        assert_eq!(m[0], 2.0);
        assert!((s.mass(0, 0, 0.0) - (2.0 * 1.0 + 8.0 * 2.0)).abs() < 1e-12);
        assert_eq!(s.count(), 2);
    }

    #[test]
    fn lazy_decay_is_exact() {
        let mut s = one(Transform::Decay);
        s.push(0, true, 10.0, &[1.0], 0.0);
        let mut m = [0.0];
        s.pop(0, false, 10.0, &mut m, 0.0);
        let k = -1e-4;
        let mut reacted = 0.0;
        for _ in 0..100 {
            reacted += s.react(0, 0, k, 60.0, 0.0);
        }
        let expect = (k * 6000.0).exp();
        assert!((s.end_value(0, false, 0, 0.0).unwrap() - expect).abs() < 1e-14);
        assert!((reacted - 10.0 * (expect - 1.0)).abs() < 1e-12);
    }

    #[test]
    fn ages_grow_with_time() {
        let mut s = one(Transform::Age);
        s.push(0, true, 1.0, &[0.0], 100.0);
        assert_eq!(s.end_value(0, true, 0, 400.0), Some(300.0));
    }
}
