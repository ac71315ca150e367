//! Phase 2, every Newton step: numeric Cholesky factorization of the refilled matrix and the two
//! triangular solves, in buffers sized once.
//!
//! # The factorization's schedule
//! The numeric factorization is the up-looking (row by row) algorithm of faer's simplicial
//! Cholesky, operation for operation (so its values are the same to the last bit): row `k` of
//! `L` is found by a sparse triangular solve whose pattern is the *reach* of column `k` of the
//! matrix in the elimination tree. faer finds that pattern afresh at every call; here it is found
//! once per structure, in faer's own order, and kept (`Schedule`, shared by the clones of a
//! factor): a Newton iteration factors the same pattern many times. It takes one 32-bit index
//! per off-diagonal entry of the factor (about 1 MB at 10⁵ junctions).
//!
//! On a large factor the rows of two sets of disjoint subtrees of the elimination tree are
//! found on two threads at once, and the rows above them after (`Split`): each row's operations
//! are the same, so the factor is too, to the last bit.

use super::structure::{numeric_scratch, Structure};
use faer::dyn_stack::{MemBuffer, MemStack};
use faer::sparse::linalg::cholesky::simplicial::SimplicialLltRef;
use faer::{Conj, MatMut, Par};
use std::sync::Arc;

/// Numeric workspace for one structure.
pub struct Factor {
    /// Matrix values, in the pattern's slot order (upper triangle, permuted).
    pub values: Vec<f64>,
    l_values: Vec<f64>,
    mem: MemBuffer,
    n: usize,
    /// The reach of every row, made at the first factorization (see the [module docs](self)).
    schedule: Option<Arc<Schedule>>,
    /// The dense row of the up-looking algorithm (zero between calls).
    x: Vec<f64>,
    /// Next free slot of every column of the factor.
    next: Vec<u32>,
}

/// The reach of every row of the factor in the elimination tree: row `k` of `L` has its entries in
/// the columns `columns[start[k]..start[k + 1]]`, in the order faer's `ereach` gives them.
#[derive(Debug)]
struct Schedule {
    start: Vec<u32>,
    columns: Vec<u32>,
    /// How the rows are shared by two threads, where that pays (see [`Split`]).
    split: Option<Split>,
}

/// Two sets of disjoint subtrees of the elimination tree, whose rows two threads factor at once,
/// and the rows above them, factored after both (see [`Split::plan`]). On the generated networks
/// (seed 7) the rows above carry 18 % of the work at 1e5 junctions (189 rows above 10 subtrees)
/// and 29 % at 1e6 (874 rows above 21); the factorization took 31 ms instead of 40 at 1e5 and
/// 0.88–0.91 s instead of 1.10–1.12 s at 1e6 (nine factorizations, least of five and two runs,
/// the machine nearly quiet). On a busy machine the second thread waits for a core and gains
/// nothing; with one thread in rayon's pool the rows go in order as before.
///
/// Row `k` of the up-looking algorithm reads and writes only the columns of its own subtree:
/// the columns `j` of its reach are its descendants, and the rows `i < k` already in those
/// columns lie on the paths from them up to `k`. With the ordering postordered (see
/// `structure::ordering`) every subtree is a contiguous range of columns, so the first set lies
/// below column `mid` and the second at or above it, and the dense row, the next free slots and
/// the factor's values split there into two parts that the threads own apart. Each row is found
/// by the same operations in the same order as one thread finds it: the factor is the same to
/// the last bit.
#[derive(Debug)]
struct Split {
    /// Column ranges `[first, last]` of the first thread's subtrees, all below `mid`.
    first: Vec<(u32, u32)>,
    /// Those of the second thread's, all at or above `mid`.
    second: Vec<(u32, u32)>,
    mid: u32,
    /// The other rows, in increasing order (each after every row of its subtree).
    top: Vec<u32>,
}

/// Least factor size (entries) for which the rows are shared by two threads: below it a
/// factorization takes well under a millisecond, and the threads' start costs more than it saves.
const SPLIT_MIN_ENTRIES: usize = 200_000;

/// Least share of the work in the two sets of subtrees for a split to be made.
const SPLIT_MIN_SHARE: f64 = 0.2;

impl Split {
    /// A split of the elimination tree `parent` (postordered) for column work `work`: starting
    /// from the roots, the heaviest subtree is replaced by its children (its root joins the rows
    /// above) until the subtrees, in column order, part into a prefix and a suffix whose work
    /// differs by at most a twentieth of theirs, or the rows above would carry most of the work.
    /// `None` when the two parts would carry less than [`SPLIT_MIN_SHARE`] of it.
    ///
    /// Lean in memory (it runs at the first factorization, near the solve's peak): a weight and
    /// a size per column; a subtree's children are found from the sizes, the postorder putting a
    /// column's last child just before it and each child's subtree just before that child.
    fn plan(parent: &[u32], mut weight: Vec<f32>) -> Option<Split> {
        let n = parent.len();
        let mut size = vec![1u32; n];
        let mut roots = Vec::new();
        for j in 0..n {
            match parent[j] {
                u32::MAX => roots.push(j as u32),
                p => {
                    let p = p as usize;
                    debug_assert!(p > j, "the ordering is postordered");
                    weight[p] += weight[j];
                    size[p] += size[j];
                }
            }
        }
        let total: f64 = roots.iter().map(|&r| f64::from(weight[r as usize])).sum();
        if total <= 0.0 {
            return None;
        }
        // The children of `r`, in column order.
        let children = |r: u32| {
            let mut kids = Vec::new();
            let first = r + 1 - size[r as usize];
            let mut c = r;
            while c > first {
                c -= 1;
                kids.push(c);
                c = c + 1 - size[c as usize];
            }
            kids.reverse();
            kids
        };
        // The subtrees in column order, and the best prefix of them.
        let mut frontier = roots;
        let best_cut = |frontier: &[u32]| -> (usize, f64, f64) {
            let sum: f64 = frontier.iter().map(|&r| f64::from(weight[r as usize])).sum();
            let (mut prefix, mut best) = (0.0, (0, f64::INFINITY));
            for (c, &r) in frontier.iter().enumerate() {
                let gap = (sum - 2.0 * prefix).abs();
                if gap < best.1 {
                    best = (c, gap);
                }
                prefix += f64::from(weight[r as usize]);
            }
            (best.0, best.1, sum)
        };
        loop {
            let (_, gap, sum) = best_cut(&frontier);
            if gap <= 0.05 * sum {
                break;
            }
            if sum < 0.4 * total {
                return None;
            }
            // The heaviest subtree gives way to its children.
            let (at, &heaviest) =
                frontier.iter().enumerate().max_by(|a, b| weight[*a.1 as usize].total_cmp(&weight[*b.1 as usize]))?;
            frontier.splice(at..=at, children(heaviest));
        }
        let (cut, gap, sum) = best_cut(&frontier);
        if (sum - gap) < SPLIT_MIN_SHARE * total || cut == 0 {
            return None;
        }
        let range = |r: u32| (r + 1 - size[r as usize], r);
        let first: Vec<(u32, u32)> = frontier[..cut].iter().map(|&r| range(r)).collect();
        let second: Vec<(u32, u32)> = frontier[cut..].iter().map(|&r| range(r)).collect();
        let mid = second[0].0;
        // The rows outside the subtrees: the gaps between their ranges (which are in order).
        let mut top = Vec::new();
        let mut next = 0u32;
        for &(a, b) in first.iter().chain(&second) {
            top.extend(next..a);
            next = b + 1;
        }
        top.extend(next..n as u32);
        Some(Split { first, second, mid, top })
    }
}

impl Schedule {
    /// The schedule of `structure`'s matrix, exactly as faer's `ereach` visits it (the
    /// elimination tree read from the factor's pattern: a column's parent is its first row below
    /// the diagonal).
    fn new(structure: &Structure) -> Schedule {
        let n = structure.n;
        let (l_ptr, l_row) = (structure.symbolic.col_ptr(), structure.symbolic.row_idx());
        let parent: Vec<u32> = (0..n)
            .map(|j| {
                let (a, b) = (l_ptr[j] as usize, l_ptr[j + 1] as usize);
                if b > a + 1 {
                    l_row[a + 1]
                } else {
                    u32::MAX
                }
            })
            .collect();
        let a = structure.matrix();
        let (a_ptr, a_row) = (a.col_ptr(), a.row_idx());
        let mut visited = vec![u32::MAX; n];
        let mut stack = vec![0u32; n];
        let mut start = Vec::with_capacity(n + 1);
        let mut columns = Vec::with_capacity((l_ptr[n] as usize).saturating_sub(n));
        start.push(0u32);
        for k in 0..n {
            let mut top = n;
            visited[k] = k as u32;
            for &i in &a_row[a_ptr[k] as usize..a_ptr[k + 1] as usize] {
                let mut i = i as usize;
                if i >= k {
                    continue;
                }
                let mut len = 0;
                while visited[i] != k as u32 {
                    stack[len] = i as u32;
                    len += 1;
                    visited[i] = k as u32;
                    i = parent[i] as usize;
                }
                stack.copy_within(..len, top - len);
                top -= len;
            }
            columns.extend_from_slice(&stack[top..]);
            start.push(columns.len() as u32);
        }
        // The work of a column: its inner loops over the rows below it, about half its count
        // squared, and one pass per row it appears in.
        let split = (l_row.len() >= SPLIT_MIN_ENTRIES)
            .then(|| {
                let work: Vec<f32> = (0..n)
                    .map(|j| {
                        let count = (l_ptr[j + 1] - l_ptr[j]) as f32;
                        0.5 * count * count + count
                    })
                    .collect();
                Split::plan(&parent, work)
            })
            .flatten();
        Schedule { start, columns, split }
    }
}

/// What every row of a factorization reads.
struct Rows<'a> {
    structure: &'a Structure,
    schedule: &'a Schedule,
    values: &'a [f64],
}

/// The part of the dense row, the next free slots and the factor's values that one thread
/// writes: those of the columns from `column` on (the values from slot `slot` on).
struct Part<'a> {
    x: &'a mut [f64],
    next: &'a mut [u32],
    l: &'a mut [f64],
    column: usize,
    slot: usize,
}

impl Rows<'_> {
    /// Factors the rows `rows` in order, each reading and writing only the columns of its own
    /// subtree (all within `part`; see [`Split`]).
    fn factor(&self, rows: impl IntoIterator<Item = u32>, part: Part<'_>) -> Result<(), NotPositive> {
        let a = self.structure.matrix();
        let (a_ptr, a_row) = (a.col_ptr(), a.row_idx());
        let (l_ptr, l_row) = (self.structure.symbolic.col_ptr(), self.structure.symbolic.row_idx());
        let (values, schedule) = (self.values, self.schedule);
        let Part { x, next, l, column: c0, slot: s0 } = part;
        for k in rows {
            let k = k as usize;
            let (a_start, a_end) = (a_ptr[k] as usize, a_ptr[k + 1] as usize);
            for (&i, &v) in a_row[a_start..a_end].iter().zip(&values[a_start..a_end]) {
                x[i as usize - c0] += v;
            }
            let mut d = x[k - c0];
            x[k - c0] = 0.0;
            let reach = &schedule.columns[schedule.start[k] as usize..schedule.start[k + 1] as usize];
            for &j in reach {
                let j = j as usize;
                let j_start = l_ptr[j] as usize;
                next[j - c0] += 1;
                let slot = next[j - c0] as usize;
                let xj = x[j - c0];
                x[j - c0] = 0.0;
                let lkj = xj * l[j_start - s0].recip();
                for (&i, &lij) in l_row[j_start + 1..slot].iter().zip(&l[j_start + 1 - s0..slot - s0]) {
                    x[i as usize - c0] -= lij * lkj;
                }
                d -= lkj * lkj;
                l[slot - s0] = lkj;
            }
            if d.is_nan() || d <= 0.0 {
                // As faer reports it (the position after the pivot's).
                return Err(NotPositive { unknown: k + 1 });
            }
            l[l_ptr[k] as usize - s0] = d.sqrt();
        }
        Ok(())
    }
}

impl Clone for Factor {
    /// The same values in new buffers (the scratch space is not copied: it holds nothing
    /// between calls).
    fn clone(&self) -> Self {
        Factor {
            values: self.values.clone(),
            l_values: self.l_values.clone(),
            mem: MemBuffer::new(numeric_scratch(self.n)),
            n: self.n,
            schedule: self.schedule.clone(),
            x: vec![0.0; self.x.len()],
            next: vec![0; self.next.len()],
        }
    }
}

impl std::fmt::Debug for Factor {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Factor").field("values", &self.values.len()).field("l_values", &self.l_values.len()).finish()
    }
}

/// The matrix was not positive definite: the pivot of this permuted unknown was not positive.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct NotPositive {
    /// Permuted unknown index.
    pub unknown: usize,
}

impl Factor {
    /// Buffers for `structure`.
    pub fn new(structure: &Structure) -> Self {
        Factor {
            values: vec![0.0; structure.nnz()],
            l_values: vec![0.0; structure.factor_nnz()],
            mem: MemBuffer::new(numeric_scratch(structure.n)),
            n: structure.n,
            schedule: None,
            x: Vec::new(),
            next: Vec::new(),
        }
    }

    /// Frees the buffers (a one-off solve that has converged; a solver makes new ones before
    /// it factors again).
    pub(crate) fn release(&mut self) {
        self.values = Vec::new();
        self.l_values = Vec::new();
        self.mem = MemBuffer::new(faer::dyn_stack::StackReq::EMPTY);
        self.schedule = None;
        self.x = Vec::new();
        self.next = Vec::new();
    }

    /// Factors the current `values` and solves `A x = rhs` in place.
    pub fn factor_and_solve(&mut self, structure: &Structure, rhs: &mut [f64]) -> Result<(), NotPositive> {
        self.factor(structure)?;
        self.solve(structure, rhs);
        Ok(())
    }

    /// Numeric factorization of `values`: faer's up-looking simplicial algorithm with the reach
    /// of every row kept from the first call (see the [module docs](self)), on two threads
    /// where the structure has a `Split` and two threads are there.
    pub fn factor(&mut self, structure: &Structure) -> Result<(), NotPositive> {
        self.factor_with(structure, true)
    }

    /// [`Factor::factor`], on one thread unless `parallel` (the tests compare the two).
    fn factor_with(&mut self, structure: &Structure, parallel: bool) -> Result<(), NotPositive> {
        let n = structure.n;
        if n == 0 {
            return Ok(());
        }
        let schedule = match &self.schedule {
            Some(s) if s.start.len() == n + 1 => s.clone(),
            _ => {
                let s = Arc::new(Schedule::new(structure));
                self.schedule = Some(s.clone());
                s
            }
        };
        let (x, next, l) = (&mut self.x, &mut self.next, &mut self.l_values);
        x.clear();
        x.resize(n, 0.0);
        next.clear();
        next.extend_from_slice(&structure.symbolic.col_ptr()[..n]);
        let rows = Rows { structure, schedule: &schedule, values: &self.values };
        let split = schedule.split.as_ref().filter(|_| parallel && rayon::current_num_threads() > 1);
        let Some(split) = split else {
            return rows.factor(0..n as u32, Part { x, next, l, column: 0, slot: 0 });
        };
        let mid = split.mid as usize;
        let slot = structure.symbolic.col_ptr()[mid] as usize;
        let (x_low, x_high) = x.split_at_mut(mid);
        let (next_low, next_high) = next.split_at_mut(mid);
        let (l_low, l_high) = l.split_at_mut(slot);
        fn ranges(r: &[(u32, u32)]) -> impl Iterator<Item = u32> + '_ {
            r.iter().flat_map(|&(a, b)| a..=b)
        }
        let (low, high) = rayon::join(
            || rows.factor(ranges(&split.first), Part { x: x_low, next: next_low, l: l_low, column: 0, slot: 0 }),
            || rows.factor(ranges(&split.second), Part { x: x_high, next: next_high, l: l_high, column: mid, slot }),
        );
        if low.is_err() || high.is_err() {
            // A pivot that is not positive: found again on one thread, so that the error names
            // the first such row in order, as one thread does.
            return self.factor_with(structure, false);
        }
        let part = Part { x: &mut self.x, next: &mut self.next, l: &mut self.l_values, column: 0, slot: 0 };
        rows.factor(split.top.iter().copied(), part)
    }

    /// Numeric factorization of `values` by faer's own simplicial routine (the reference the
    /// scheduled one is tested against).
    #[cfg(test)]
    pub(crate) fn factor_by_faer(&mut self, structure: &Structure) -> Result<(), NotPositive> {
        use faer::linalg::cholesky::llt::factor::LltRegularization;
        use faer::sparse::{linalg::cholesky::simplicial, SparseColMatRef};
        if structure.n == 0 {
            return Ok(());
        }
        let a = SparseColMatRef::new(structure.matrix(), &self.values);
        simplicial::factorize_simplicial_numeric_llt(
            &mut self.l_values,
            a,
            LltRegularization::default(),
            &structure.symbolic,
            MemStack::new(&mut self.mem),
        )
        .map(|_| ())
        .map_err(|e| match e {
            faer::linalg::cholesky::llt::factor::LltError::NonPositivePivot { index } => NotPositive { unknown: index },
        })
    }

    /// Solves with the current factor.
    pub fn solve(&mut self, structure: &Structure, rhs: &mut [f64]) {
        if structure.n == 0 {
            return;
        }
        let llt = SimplicialLltRef::new(&structure.symbolic, &self.l_values);
        let rhs = MatMut::from_column_major_slice_mut(rhs, structure.n, 1);
        llt.solve_in_place_with_conj(Conj::No, rhs, Par::Seq, MemStack::new(&mut self.mem));
    }

    /// The values of the current factor.
    pub fn l_values(&self) -> &[f64] {
        &self.l_values
    }

    /// The values of the factor, to write (tests).
    #[cfg(test)]
    pub(crate) fn l_values_mut(&mut self) -> &mut [f64] {
        &mut self.l_values
    }
}

#[cfg(test)]
mod tests {
    use crate::generate::{generate, NetworkSpec};
    use crate::solve::{Conditions, SolveOptions, Solver};

    /// The scheduled factorization gives faer's factor to the last bit (the same operations in
    /// the same order), on the matrices of a generated network's solve and on a matrix that is
    /// not positive definite (the same pivot reported).
    #[test]
    fn the_scheduled_factorization_is_faers_to_the_last_bit() {
        for (junctions, seed) in [(300, 3), (2000, 7)] {
            let m = generate(&NetworkSpec::new(junctions, seed)).unwrap();
            let mut solver = Solver::new(&m).unwrap();
            solver.solve(&m, &Conditions::from_model(&m), &SolveOptions::from_model(&m)).unwrap();
            let structure = solver.structure.clone();
            assert!(structure.n > 100);
            let mut ours = solver.factor.clone();
            let mut theirs = solver.factor.clone();
            ours.factor(&structure).unwrap();
            theirs.factor_by_faer(&structure).unwrap();
            assert!(ours.l_values().iter().zip(theirs.l_values()).all(|(a, b)| a.to_bits() == b.to_bits()));
            // A second factorization of other values (diagonals raised) reuses the schedule.
            for (k, &slot) in structure.diag_slot.iter().enumerate() {
                ours.values[slot as usize] *= 1.0 + (k % 7) as f64 * 1e-3;
            }
            theirs.values.copy_from_slice(&ours.values);
            ours.factor(&structure).unwrap();
            theirs.factor_by_faer(&structure).unwrap();
            assert!(ours.l_values().iter().zip(theirs.l_values()).all(|(a, b)| a.to_bits() == b.to_bits()));
            // A diagonal made negative halfway: the same pivot.
            let k = structure.n / 2;
            let slot = structure.diag_slot[k] as usize;
            ours.values[slot] = -1.0;
            theirs.values[slot] = -1.0;
            assert_eq!(ours.factor(&structure).unwrap_err(), theirs.factor_by_faer(&structure).unwrap_err());
        }
    }

    /// The rows shared by two threads give the one thread's factor to the last bit, on a
    /// network large enough for a split; a pivot that is not positive in either part, or above
    /// both, is the one the single thread names.
    #[test]
    fn two_threads_factor_as_one_does() {
        let m = generate(&NetworkSpec::new(100_000, 7)).unwrap();
        let mut solver = Solver::new(&m).unwrap();
        solver.solve(&m, &Conditions::from_model(&m), &SolveOptions::from_model(&m)).unwrap();
        let structure = solver.structure.clone();
        let mut one = solver.factor.clone();
        let mut two = solver.factor.clone();
        one.factor_with(&structure, false).unwrap();
        let split = one.schedule.as_ref().unwrap().split.as_ref().expect("a split at 1e5 junctions");
        assert!(split.first.len() + split.second.len() > 1 && !split.top.is_empty());
        // Every row in exactly one of the three parts, the first part's below `mid`, the
        // second's at or above it.
        let mut seen = vec![0u8; structure.n];
        for &(a, b) in &split.first {
            assert!(b < split.mid);
            (a..=b).for_each(|j| seen[j as usize] += 1);
        }
        for &(a, b) in &split.second {
            assert!(a >= split.mid);
            (a..=b).for_each(|j| seen[j as usize] += 1);
        }
        split.top.iter().for_each(|&j| seen[j as usize] += 1);
        assert!(seen.iter().all(|&c| c == 1));
        let (mid, top) = (split.mid as usize, split.top.clone());
        let pool = rayon::ThreadPoolBuilder::new().num_threads(2).build().unwrap();
        pool.install(|| two.factor_with(&structure, true)).unwrap();
        assert!(one.l_values().iter().zip(two.l_values()).all(|(a, b)| a.to_bits() == b.to_bits()));
        // Pivots made negative below the split, above it, and in the rows above both.
        for k in [mid / 2, mid + (structure.n - mid) / 2, *top.last().unwrap() as usize] {
            let slot = structure.diag_slot[k] as usize;
            let kept = one.values[slot];
            one.values[slot] = -1.0;
            two.values[slot] = -1.0;
            let theirs = one.factor_with(&structure, false).unwrap_err();
            assert_eq!(pool.install(|| two.factor_with(&structure, true)).unwrap_err(), theirs);
            one.values[slot] = kept;
            two.values[slot] = kept;
        }
    }
}
