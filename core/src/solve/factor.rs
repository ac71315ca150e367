//! Phase 2, every Newton step: numeric Cholesky factorization of the refilled matrix and the two
//! triangular solves, in buffers sized once.

use super::structure::{numeric_scratch, Structure};
use faer::dyn_stack::{MemBuffer, MemStack};
use faer::linalg::cholesky::llt::factor::LltRegularization;
use faer::sparse::linalg::cholesky::simplicial::{self, SimplicialLltRef};
use faer::sparse::SparseColMatRef;
use faer::{Conj, MatMut, Par};

/// Numeric workspace for one structure.
pub struct Factor {
    /// Matrix values, in the pattern's slot order (upper triangle, permuted).
    pub values: Vec<f64>,
    l_values: Vec<f64>,
    mem: MemBuffer,
    n: usize,
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
        }
    }

    /// Frees the buffers (a one-off solve that has converged; a solver makes new ones before
    /// it factors again).
    pub(crate) fn release(&mut self) {
        self.values = Vec::new();
        self.l_values = Vec::new();
        self.mem = MemBuffer::new(faer::dyn_stack::StackReq::EMPTY);
    }

    /// Factors the current `values` and solves `A x = rhs` in place.
    pub fn factor_and_solve(&mut self, structure: &Structure, rhs: &mut [f64]) -> Result<(), NotPositive> {
        self.factor(structure)?;
        self.solve(structure, rhs);
        Ok(())
    }

    /// Numeric factorization of `values`.
    pub fn factor(&mut self, structure: &Structure) -> Result<(), NotPositive> {
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
