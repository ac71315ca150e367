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
        Schedule { start, columns }
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
    /// of every row kept from the first call (see the [module docs](self)).
    pub fn factor(&mut self, structure: &Structure) -> Result<(), NotPositive> {
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
        let a = structure.matrix();
        let (a_ptr, a_row) = (a.col_ptr(), a.row_idx());
        let (l_ptr, l_row) = (structure.symbolic.col_ptr(), structure.symbolic.row_idx());
        let (x, next, l, values) = (&mut self.x, &mut self.next, &mut self.l_values, &self.values);
        x.clear();
        x.resize(n, 0.0);
        next.clear();
        next.extend_from_slice(&l_ptr[..n]);
        for k in 0..n {
            let (a_start, a_end) = (a_ptr[k] as usize, a_ptr[k + 1] as usize);
            for (&i, &v) in a_row[a_start..a_end].iter().zip(&values[a_start..a_end]) {
                x[i as usize] += v;
            }
            let mut d = x[k];
            x[k] = 0.0;
            let reach = &schedule.columns[schedule.start[k] as usize..schedule.start[k + 1] as usize];
            for &j in reach {
                let j = j as usize;
                let j_start = l_ptr[j] as usize;
                next[j] += 1;
                let slot = next[j] as usize;
                let xj = x[j];
                x[j] = 0.0;
                let lkj = xj * l[j_start].recip();
                for (&i, &lij) in l_row[j_start + 1..slot].iter().zip(&l[j_start + 1..slot]) {
                    x[i as usize] -= lij * lkj;
                }
                d -= lkj * lkj;
                l[slot] = lkj;
            }
            if d.is_nan() || d <= 0.0 {
                // As faer reports it (the position after the pivot's).
                return Err(NotPositive { unknown: k + 1 });
            }
            l[l_ptr[k] as usize] = d.sqrt();
        }
        Ok(())
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
}
