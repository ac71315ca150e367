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
//!
//! Those rows above (the last separators of the ordering) make a nearly full block, which the
//! up-looking algorithm treats entry by entry, on one thread: at a million junctions they took
//! two thirds of the work. Where the block is full enough they are factored as one dense block
//! instead (`DenseTop`): their entries in the subtrees' columns by the same sparse operations
//! (on the two threads), the block's Schur complement, and faer's dense Cholesky factorization.
//! Outside the block's columns the factor is still faer's simplicial one to the last bit; inside
//! them it differs in the last bits only, and one thread or two give the same.

use super::structure::Structure;
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
    /// The dense top block (row-major) and faer's scratch for it (see [`DenseTop`]).
    block: Vec<f64>,
    block_mem: MemBuffer,
}

/// The reach of every row of the factor in the elimination tree: row `k` of `L` has its entries in
/// the columns `columns[start[k]..start[k + 1]]`, in the order faer's `ereach` gives them.
#[derive(Debug)]
struct Schedule {
    start: Vec<u32>,
    columns: Vec<u32>,
    /// How the rows are shared by two threads, where that pays (see [`Split`]).
    split: Option<Split>,
    /// The rows above the split's subtrees as one dense block, where that pays (see
    /// [`DenseTop`]).
    top: Option<DenseTop>,
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

/// The rows above a [`Split`]'s subtrees (the rows of the last separators of the ordering, set
/// `T`; the subtrees' rows are `B`) factored as one dense block, where it is nearly full.
///
/// The up-looking algorithm finds each of those rows by sparse operations over the whole block
/// above it: on the generated networks (seed 7) they are 874 rows at 1e6 junctions whose block
/// is 62 % full, and they took two thirds of the factorization's multiply-adds (79 million of
/// 120), on one thread after the subtrees. As blocks of the permuted matrix `[B, T]` the factor
/// is the same (no row of `T` is below a row of `B` in the elimination tree, so the subtrees'
/// rows never read a row of `T`):
///
/// * `L_BB`: the subtrees' rows, as before (on two threads);
/// * `L_TB = A_TB L_BBᵀ⁻¹`: each row of `T` in the subtrees' columns, by the same sparse
///   triangular solve as the up-looking algorithm but stopping at the block (so these entries
///   are the up-looking algorithm's to the last bit); the rows are independent of each other
///   and are shared by two threads;
/// * the Schur complement `S = A_TT − L_TB L_TBᵀ`, dense, each of its rows summed in the order
///   of the row's reach (shared by two threads by rows);
/// * `L_TT`: faer's dense Cholesky factorization of `S` (blocked, vectorised, one thread).
///
/// Every value is found by the same operations whether one thread or two do the work, so the
/// factor does not depend on the threads; the block's entries differ from the up-looking
/// algorithm's in the last bits only (another order of the same sums). A pivot that is not
/// positive anywhere is found again by the up-looking algorithm alone, which names the first
/// one in order, as faer does.
#[derive(Debug)]
struct DenseTop {
    /// The block's rows, in increasing order (the split's `top`); a row's place in the block is
    /// its index here.
    rows: Vec<u32>,
    /// Whether a row is in the block, a bit per row.
    in_block: Vec<u64>,
    /// The block rows' entries in the columns of the split's first set of subtrees (`[0]`) and
    /// of its second (`[1]`): row `t`'s are `reach[s][start[s][t]..start[s][t + 1]]`, each in the
    /// order of the row's reach in the elimination tree. An entry holds its column, its slot,
    /// the column's first slot of a block row (the column's subtree rows lie between its
    /// diagonal and that slot, its block rows from there on), and where the places of the
    /// column's block rows are in `places` (less that first slot, wrapping: `places[o + s]` is
    /// the place of the row of slot `s`).
    start: [Vec<u32>; 2],
    reach: [Vec<[u32; 4]>; 2],
    /// The places of the block rows of every subtree column that has some, column after
    /// column (read in the Schur complement's inner loop).
    places: Vec<u16>,
    /// The places of the rows of the block's own columns, in the factor's slot order.
    column_places: Vec<u16>,
    /// The block row from which the second thread sums the rows of the Schur complement (half
    /// of the work before it).
    mid_schur: usize,
}

/// Most rows of a dense top block (its values take 8 bytes times their square: 32 MiB at this
/// bound; a place fits in 16 bits).
const DENSE_TOP_MAX_ROWS: usize = 2048;

/// Least share of the block's lower triangle that the factor fills for it to be factored dense:
/// the dense factorization does all of the triangle's work, at several times the speed per
/// operation of the sparse rows.
const DENSE_TOP_MIN_FILL: f64 = 0.25;

impl DenseTop {
    /// The dense block of `split`'s rows above its subtrees, for the factor whose rows' reaches
    /// are `start`/`columns`; `None` where it would not pay (see [`DENSE_TOP_MAX_ROWS`],
    /// [`DENSE_TOP_MIN_FILL`]). Lean in memory: it runs at the first factorization, at the
    /// solve's peak.
    fn plan(structure: &Structure, start: &[u32], columns: &[u32], split: &Split) -> Option<DenseTop> {
        let (n, top) = (structure.n, &split.top);
        let nt = top.len();
        if nt == 0 || nt > DENSE_TOP_MAX_ROWS {
            return None;
        }
        let (l_ptr, l_row) = (structure.symbolic.col_ptr(), structure.symbolic.row_idx());
        let filled: usize = top.iter().map(|&c| (l_ptr[c as usize + 1] - l_ptr[c as usize]) as usize).sum();
        if (filled as f64) < DENSE_TOP_MIN_FILL * (nt * (nt + 1) / 2) as f64 {
            return None;
        }
        let mut in_block = vec![0u64; n.div_ceil(64)];
        for &k in top {
            in_block[k as usize / 64] |= 1 << (k % 64);
        }
        let is_top = |r: u32| in_block[r as usize / 64] >> (r % 64) & 1 == 1;
        let place = |r: u32| top.binary_search(&r).map_or(u16::MAX, |p| p as u16);
        // The subtree columns with block rows (the last rows of a column, when it has some), in
        // order, with their first block slot and where their places start.
        // Every array is made at its exact size (counted first): grown by doubling, they held
        // up to twice their entries, and the chunks they left stayed resident.
        let block_rows = |j: u32| {
            let (a, b) = (l_ptr[j as usize] as usize, l_ptr[j as usize + 1] as usize);
            if is_top(j) || b <= a + 1 || !is_top(l_row[b - 1]) {
                return None;
            }
            Some(a + 1 + l_row[a + 1..b].partition_point(|&r| !is_top(r))..b)
        };
        let (mut count, mut count_places) = (0, 0);
        for j in 0..n as u32 {
            if let Some(rows) = block_rows(j) {
                count += 1;
                count_places += rows.len();
            }
        }
        let (mut cols, mut first, mut offset) =
            (Vec::with_capacity(count), Vec::with_capacity(count), Vec::with_capacity(count));
        let mut places = Vec::with_capacity(count_places);
        for j in 0..n as u32 {
            if let Some(rows) = block_rows(j) {
                cols.push(j);
                first.push(rows.start as u32);
                offset.push((places.len() as u32).wrapping_sub(rows.start as u32));
                places.extend(l_row[rows].iter().map(|&r| place(r)));
            }
        }
        let reach_of = |k: u32| columns[start[k as usize] as usize..start[k as usize + 1] as usize].iter();
        let mut sizes = [0usize; 2];
        for &k in top {
            for &j in reach_of(k).filter(|&&j| !is_top(j)) {
                sizes[usize::from(j >= split.mid)] += 1;
            }
        }
        let mut entries = [Vec::with_capacity(nt + 1), Vec::with_capacity(nt + 1)];
        entries[0].push(0u32);
        entries[1].push(0u32);
        let mut reach = [Vec::with_capacity(sizes[0]), Vec::with_capacity(sizes[1])];
        let mut work = Vec::with_capacity(nt + 1);
        work.push(0u64);
        for &k in top {
            let mut w = 0u64;
            for &j in reach_of(k).filter(|&&j| !is_top(j)) {
                let c = cols.binary_search(&j).ok()?;
                let (f, end) = (first[c] as usize, l_ptr[j as usize + 1] as usize);
                let slot = f + l_row[f..end].binary_search(&k).ok()?;
                reach[usize::from(j >= split.mid)].push([j, slot as u32, f as u32, offset[c]]);
                w += (slot - f + 1) as u64;
            }
            entries[0].push(reach[0].len() as u32);
            entries[1].push(reach[1].len() as u32);
            work.push(work.last()? + w);
        }
        drop((cols, first, offset));
        let column_places = top
            .iter()
            .flat_map(|&c| &l_row[l_ptr[c as usize] as usize..l_ptr[c as usize + 1] as usize])
            .map(|&r| place(r))
            .collect();
        let total = *work.last()?;
        Some(DenseTop {
            rows: top.clone(),
            in_block,
            start: entries,
            reach,
            places,
            column_places,
            mid_schur: work.partition_point(|&x| 2 * x < total).min(nt),
        })
    }

    /// Whether row `r` is in the block.
    fn has(&self, r: u32) -> bool {
        self.in_block[r as usize / 64] >> (r % 64) & 1 == 1
    }
}

/// Least factor size (entries) for which the rows are shared by two threads: below it a
/// factorization takes well under a millisecond, and the threads' start costs more than it saves.
pub(super) const SPLIT_MIN_ENTRIES: usize = 200_000;

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
        Schedule::with_dense_top(structure, true)
    }

    /// [`Schedule::new`], with a dense top only if `dense_top` (the tests take it away to
    /// check the rows above the split done one by one).
    fn with_dense_top(structure: &Structure, dense_top: bool) -> Schedule {
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
        let top = split.as_ref().filter(|_| dense_top).and_then(|s| DenseTop::plan(structure, &start, &columns, s));
        if let Some(top) = &top {
            // The block rows' reaches are read no more (2.4 MB at 1e6 junctions, at the solve's
            // peak): the rows are left with empty ones.
            let mut kept = 0usize;
            for k in 0..n {
                let (a, b) = (start[k] as usize, start[k + 1] as usize);
                start[k] = kept as u32;
                if !top.has(k as u32) {
                    columns.copy_within(a..b, kept);
                    kept += b - a;
                }
            }
            start[n] = kept as u32;
            columns.truncate(kept);
            columns.shrink_to_fit();
        }
        Schedule { start, columns, split, top }
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

impl Rows<'_> {
    /// The entries of every block row of `top` in the columns of the split's set `set` of
    /// subtrees (see [`DenseTop`]), with the subtrees' rows done: `part` holds those columns
    /// (its dense row zero, and left so).
    fn top_entries(&self, top: &DenseTop, set: usize, part: Part<'_>) {
        let a = self.structure.matrix();
        let (a_ptr, a_row) = (a.col_ptr(), a.row_idx());
        let (l_ptr, l_row) = (self.structure.symbolic.col_ptr(), self.structure.symbolic.row_idx());
        let Part { x, l, column: c0, slot: s0, .. } = part;
        let columns = c0..c0 + x.len();
        for (t, &k) in top.rows.iter().enumerate() {
            let (a_start, a_end) = (a_ptr[k as usize] as usize, a_ptr[k as usize + 1] as usize);
            for (&i, &v) in a_row[a_start..a_end].iter().zip(&self.values[a_start..a_end]) {
                if columns.contains(&(i as usize)) && !top.has(i) {
                    x[i as usize - c0] += v;
                }
            }
            let reach = &top.reach[set][top.start[set][t] as usize..top.start[set][t + 1] as usize];
            for &[j, slot, first_top, _] in reach {
                let (j, first_top) = (j as usize, first_top as usize);
                let j_start = l_ptr[j] as usize;
                let xj = x[j - c0];
                x[j - c0] = 0.0;
                let lkj = xj * l[j_start - s0].recip();
                for (&i, &lij) in l_row[j_start + 1..first_top].iter().zip(&l[j_start + 1 - s0..first_top - s0]) {
                    x[i as usize - c0] -= lij * lkj;
                }
                l[slot as usize - s0] = lkj;
            }
        }
    }

    /// The rows `rows` (block places) of the Schur complement of `top`'s block, into `s` (those
    /// rows of the row-major square, their lower triangle), from the factor `l` with every entry
    /// outside the block done.
    fn schur_rows(&self, top: &DenseTop, rows: std::ops::Range<usize>, s: &mut [f64], l: &[f64]) {
        let a = self.structure.matrix();
        let (a_ptr, a_row) = (a.col_ptr(), a.row_idx());
        let nt = top.rows.len();
        let t0 = rows.start;
        for t in rows {
            let k = top.rows[t] as usize;
            let row = &mut s[(t - t0) * nt..(t - t0) * nt + t + 1];
            row.fill(0.0);
            let (a_start, a_end) = (a_ptr[k] as usize, a_ptr[k + 1] as usize);
            for (&i, &v) in a_row[a_start..a_end].iter().zip(&self.values[a_start..a_end]) {
                if top.has(i) {
                    row[top.rows.partition_point(|&r| r < i)] += v;
                }
            }
            let (first, second) = (&top.reach[0], &top.reach[1]);
            let first = &first[top.start[0][t] as usize..top.start[0][t + 1] as usize];
            let second = &second[top.start[1][t] as usize..top.start[1][t + 1] as usize];
            for &[_, slot, first_top, offset] in first.iter().chain(second) {
                let (slot, first_top) = (slot as usize, first_top as usize);
                let o = offset.wrapping_add(first_top as u32) as usize;
                let lkj = l[slot];
                for (&p, &lij) in top.places[o..o + slot - first_top + 1].iter().zip(&l[first_top..=slot]) {
                    row[p as usize] -= lij * lkj;
                }
            }
        }
    }
}

/// Runs `a` and `b`, at once on two threads if `two`, else one after the other.
fn both<A: Send, B: Send>(two: bool, a: impl FnOnce() -> A + Send, b: impl FnOnce() -> B + Send) -> (A, B) {
    if two {
        rayon::join(a, b)
    } else {
        (a(), b())
    }
}

impl Clone for Factor {
    /// The same values in new buffers (the scratch space is not copied: it holds nothing
    /// between calls).
    fn clone(&self) -> Self {
        Factor {
            values: self.values.clone(),
            l_values: self.l_values.clone(),
            mem: MemBuffer::new(faer::dyn_stack::StackReq::new::<u8>(self.mem.len())),
            n: self.n,
            schedule: self.schedule.clone(),
            x: vec![0.0; self.x.len()],
            next: vec![0; self.next.len()],
            block: Vec::new(),
            block_mem: MemBuffer::new(faer::dyn_stack::StackReq::EMPTY),
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
            // What the triangular solves ask for (nothing today: the whole factorization's
            // scratch, 11 MB at 1e6 junctions, was kept here while only its tests use it).
            mem: MemBuffer::new(structure.symbolic.solve_in_place_scratch::<f64>(1)),
            n: structure.n,
            schedule: None,
            x: Vec::new(),
            next: Vec::new(),
            block: Vec::new(),
            block_mem: MemBuffer::new(faer::dyn_stack::StackReq::EMPTY),
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
        self.block = Vec::new();
        self.block_mem = MemBuffer::new(faer::dyn_stack::StackReq::EMPTY);
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
        self.start_rows(structure);
        let (x, next, l) = (&mut self.x, &mut self.next, &mut self.l_values);
        let rows = Rows { structure, schedule: &schedule, values: &self.values };
        let two = parallel && rayon::current_num_threads() > 1;
        let (split, top) = match (&schedule.split, &schedule.top) {
            (Some(split), Some(top)) => (split, Some(top)),
            (Some(split), None) if two => (split, None),
            _ => return rows.factor(0..n as u32, Part { x, next, l, column: 0, slot: 0 }),
        };
        let mid = split.mid as usize;
        let slot = structure.symbolic.col_ptr()[mid] as usize;
        let (x_low, x_high) = x.split_at_mut(mid);
        let (next_low, next_high) = next.split_at_mut(mid);
        let (l_low, l_high) = l.split_at_mut(slot);
        fn ranges(r: &[(u32, u32)]) -> impl Iterator<Item = u32> + '_ {
            r.iter().flat_map(|&(a, b)| a..=b)
        }
        let low = || rows.factor(ranges(&split.first), Part { x: x_low, next: next_low, l: l_low, column: 0, slot: 0 });
        let high =
            || rows.factor(ranges(&split.second), Part { x: x_high, next: next_high, l: l_high, column: mid, slot });
        let (low, high) = both(two, low, high);
        if low.is_err() || high.is_err() {
            // A pivot that is not positive: found again on one thread, so that the error names
            // the first such row in order, as one thread does.
            return self.factor_in_order(structure);
        }
        let Some(top) = top else {
            let part = Part { x: &mut self.x, next: &mut self.next, l: &mut self.l_values, column: 0, slot: 0 };
            return rows.factor(split.top.iter().copied(), part);
        };
        // The block rows' entries in the two sets' columns (each set's on its own thread,
        // within its own part of the factor), then the Schur complement shared by two threads
        // by rows (the same operations either way), then the block.
        let nt = top.rows.len();
        {
            let (x_low, x_high) = self.x.split_at_mut(mid);
            let (next_low, next_high) = self.next.split_at_mut(mid);
            let (l_low, l_high) = self.l_values.split_at_mut(slot);
            let low = || rows.top_entries(top, 0, Part { x: x_low, next: next_low, l: l_low, column: 0, slot: 0 });
            let high = || rows.top_entries(top, 1, Part { x: x_high, next: next_high, l: l_high, column: mid, slot });
            both(two, low, high);
        }
        self.block.resize(nt * nt, 0.0);
        let l = &mut self.l_values;
        {
            let (s_low, s_high) = self.block.split_at_mut(top.mid_schur * nt);
            let l = &*l;
            let low = || rows.schur_rows(top, 0..top.mid_schur, s_low, l);
            let high = || rows.schur_rows(top, top.mid_schur..nt, s_high, l);
            both(two, low, high);
        }
        use faer::linalg::cholesky::llt::factor::{cholesky_in_place, cholesky_in_place_scratch, LltRegularization};
        let scratch = cholesky_in_place_scratch::<f64>(nt, Par::Seq, Default::default());
        if self.block_mem.len() < scratch.unaligned_bytes_required() {
            self.block_mem = MemBuffer::new(scratch);
        }
        let block = MatMut::from_row_major_slice_mut(&mut self.block, nt, nt);
        let dense = cholesky_in_place(
            block,
            LltRegularization::default(),
            Par::Seq,
            MemStack::new(&mut self.block_mem),
            Default::default(),
        );
        let l_ptr = structure.symbolic.col_ptr();
        let mut positive = dense.is_ok();
        let mut places = &top.column_places[..];
        for (t, &c) in top.rows.iter().enumerate() {
            let (a, b) = (l_ptr[c as usize] as usize, l_ptr[c as usize + 1] as usize);
            let (these, rest) = places.split_at(b - a);
            places = rest;
            for (&p, v) in these.iter().zip(&mut self.l_values[a..b]) {
                *v = self.block[usize::from(p) * nt + t];
            }
            let d = self.l_values[a];
            positive &= d.is_finite() && d > 0.0;
        }
        if !positive {
            return self.factor_in_order(structure);
        }
        Ok(())
    }

    /// The factorization of every row in order, on this thread, by the up-looking algorithm
    /// (faer's own where the schedule keeps no reach for the block rows of a dense top): it
    /// names the first pivot that is not positive, as faer does.
    fn factor_in_order(&mut self, structure: &Structure) -> Result<(), NotPositive> {
        let schedule = self.schedule.clone().expect("made by the factorization that failed");
        if schedule.top.is_some() {
            return self.factor_by_faer(structure);
        }
        self.start_rows(structure);
        let rows = Rows { structure, schedule: &schedule, values: &self.values };
        let part = Part { x: &mut self.x, next: &mut self.next, l: &mut self.l_values, column: 0, slot: 0 };
        rows.factor(0..structure.n as u32, part)
    }

    /// The up-looking algorithm's state before its first row: the dense row zero, every
    /// column's next free slot at its diagonal.
    fn start_rows(&mut self, structure: &Structure) {
        let n = structure.n;
        self.x.clear();
        self.x.resize(n, 0.0);
        self.next.clear();
        self.next.extend_from_slice(&structure.symbolic.col_ptr()[..n]);
    }

    /// Numeric factorization of `values` by faer's own simplicial routine (the reference the
    /// scheduled one is tested against, and what names the pivot that is not positive where
    /// the schedule has a dense top).
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
            MemStack::new(&mut MemBuffer::new(simplicial::factorize_simplicial_numeric_llt_scratch::<u32, f64>(
                structure.n,
            ))),
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
    use super::{Arc, Schedule};
    use crate::generate::{generate, NetworkSpec};
    use crate::solve::{Conditions, SolveOptions, Solver};

    /// A solver that has solved the generated network of `junctions` (seed 7), and its
    /// structure.
    fn solved(junctions: usize) -> (Solver, std::sync::Arc<super::Structure>) {
        let m = generate(&NetworkSpec::new(junctions, 7)).unwrap();
        let mut solver = Solver::new(&m).unwrap();
        solver.solve(&m, &Conditions::from_model(&m), &SolveOptions::from_model(&m)).unwrap();
        let structure = solver.structure.clone();
        (solver, structure)
    }

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
        let (solver, structure) = solved(100_000);
        let mut one = solver.factor.clone();
        let mut two = solver.factor.clone();
        // The rows above the split one by one, as without a dense top (see
        // `the_dense_top_block_is_faers_factor_to_round_off` for the block).
        let schedule = Arc::new(Schedule::with_dense_top(&structure, false));
        assert!(schedule.top.is_none());
        one.schedule = Some(schedule.clone());
        two.schedule = Some(schedule);
        one.factor_with(&structure, false).unwrap();
        let mut faer = solver.factor.clone();
        faer.factor_by_faer(&structure).unwrap();
        assert!(one.l_values().iter().zip(faer.l_values()).all(|(a, b)| a.to_bits() == b.to_bits()));
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

    /// Where the rows above the split are factored as a dense block (1e5 junctions): every
    /// entry outside the block's columns is faer's to the last bit (the same operations), the
    /// block's within round-off of faer's (another order of the same sums), the solution of a
    /// system likewise; one thread and two give the same factor to the last bit.
    #[test]
    fn the_dense_top_block_is_faers_factor_to_round_off() {
        let (solver, structure) = solved(100_000);
        let mut ours = solver.factor.clone();
        let mut theirs = solver.factor.clone();
        ours.factor_with(&structure, false).unwrap();
        let schedule = ours.schedule.clone().unwrap();
        let top = schedule.top.as_ref().expect("a dense top at 1e5 junctions");
        assert!(top.rows.len() > 50, "{} rows in the block", top.rows.len());
        theirs.factor_by_faer(&structure).unwrap();
        let l_ptr = structure.symbolic.col_ptr();
        let (mut outside, mut inside, mut worst) = (0, 0, 0.0f64);
        for j in 0..structure.n {
            let (a, b) = (l_ptr[j] as usize, l_ptr[j + 1] as usize);
            let scale = theirs.l_values()[a].abs();
            for s in a..b {
                let (x, y) = (ours.l_values()[s], theirs.l_values()[s]);
                if top.has(j as u32) {
                    inside += 1;
                    worst = worst.max((x - y).abs() / scale);
                } else {
                    outside += 1;
                    assert_eq!(x.to_bits(), y.to_bits(), "column {j} slot {s}: {x} against faer's {y}");
                }
            }
        }
        assert!(inside > 1000 && outside > 100_000);
        assert!(worst < 1e-12, "block entries off by {worst:e} of their diagonal");
        // A solve with each factor.
        let rhs: Vec<f64> = (0..structure.n).map(|i| ((i * 7919) % 1000) as f64 / 100.0 - 5.0).collect();
        let (mut a, mut b) = (rhs.clone(), rhs);
        ours.solve(&structure, &mut a);
        theirs.solve(&structure, &mut b);
        let norm = b.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        let off = a.iter().zip(&b).fold(0.0f64, |m, (x, y)| m.max((x - y).abs()));
        assert!(off <= 1e-10 * norm, "solutions differ by {off:e} (largest value {norm:e})");
        // Two threads: the same factor to the last bit.
        let mut two = solver.factor.clone();
        let pool = rayon::ThreadPoolBuilder::new().num_threads(2).build().unwrap();
        pool.install(|| two.factor_with(&structure, true)).unwrap();
        assert!(ours.l_values().iter().zip(two.l_values()).all(|(a, b)| a.to_bits() == b.to_bits()));
        // A pivot that is not positive (or not a number) below the block, in its first row or
        // its last: the one faer names, on one thread and on two.
        let rows = &top.rows;
        for (k, bad) in [(structure.n / 3, -1.0), (rows[0] as usize, -1.0), (*rows.last().unwrap() as usize, f64::NAN)]
        {
            let slot = structure.diag_slot[k] as usize;
            for f in [&mut ours, &mut theirs, &mut two] {
                f.values[slot] = bad;
            }
            let expected = theirs.factor_by_faer(&structure).unwrap_err();
            assert_eq!(ours.factor_with(&structure, false).unwrap_err(), expected, "row {k}");
            assert_eq!(pool.install(|| two.factor_with(&structure, true)).unwrap_err(), expected, "row {k}");
            let kept = solver.factor.values[slot];
            for f in [&mut ours, &mut theirs, &mut two] {
                f.values[slot] = kept;
            }
        }
    }
}
