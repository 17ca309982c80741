//! A small dense symmetric positive-definite solver for the normal equations
//! of the tone fits (a dozen unknowns at most).

/// Cholesky factor of a symmetric positive-definite matrix, stored row-major.
#[derive(Debug, Clone)]
pub struct Cholesky {
    n: usize,
    l: Vec<f64>,
}

impl Cholesky {
    /// Factor the `n`×`n` row-major matrix `a`. Returns `None` when the matrix
    /// is not positive definite (a degenerate basis).
    ///
    /// # Panics
    /// When `a.len() != n * n`.
    pub fn new(a: &[f64], n: usize) -> Option<Self> {
        assert_eq!(a.len(), n * n, "matrix size");
        let mut l = vec![0.0; n * n];
        for i in 0..n {
            for j in 0..=i {
                let mut s = a[i * n + j];
                for k in 0..j {
                    s -= l[i * n + k] * l[j * n + k];
                }
                if i == j {
                    // Not positive (or NaN): not positive definite.
                    #[allow(clippy::neg_cmp_op_on_partial_ord)]
                    if !(s > 0.0) || !s.is_finite() {
                        return None;
                    }
                    l[i * n + i] = s.sqrt();
                } else {
                    l[i * n + j] = s / l[j * n + j];
                }
            }
        }
        Some(Self { n, l })
    }

    /// Solve `A x = b`.
    ///
    /// # Panics
    /// When `b.len()` differs from the matrix order.
    #[allow(clippy::needless_range_loop)] // the triangular solves read clearer with indices
    pub fn solve(&self, b: &[f64]) -> Vec<f64> {
        let n = self.n;
        assert_eq!(b.len(), n, "right-hand side size");
        let mut y = b.to_vec();
        for i in 0..n {
            let mut s = y[i];
            for k in 0..i {
                s -= self.l[i * n + k] * y[k];
            }
            y[i] = s / self.l[i * n + i];
        }
        for i in (0..n).rev() {
            let mut s = y[i];
            for k in i + 1..n {
                s -= self.l[k * n + i] * y[k];
            }
            y[i] = s / self.l[i * n + i];
        }
        y
    }

    /// Diagonal element `i` of the inverse matrix (a parameter's variance
    /// factor in least squares).
    pub fn inverse_diagonal(&self, i: usize) -> f64 {
        let mut e = vec![0.0; self.n];
        e[i] = 1.0;
        self.solve(&e)[i]
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn solves_a_hand_computed_system() {
        // [4 2; 2 3] x = [2; 5]  ->  x = [-0.5, 2]
        let c = Cholesky::new(&[4.0, 2.0, 2.0, 3.0], 2).unwrap();
        let x = c.solve(&[2.0, 5.0]);
        assert!((x[0] + 0.5).abs() < 1e-14 && (x[1] - 2.0).abs() < 1e-14);
        // inverse of [4 2; 2 3] is [3 -2; -2 4] / 8
        assert!((c.inverse_diagonal(0) - 3.0 / 8.0).abs() < 1e-14);
        assert!((c.inverse_diagonal(1) - 0.5).abs() < 1e-14);
    }

    #[test]
    fn refuses_a_singular_matrix() {
        assert!(Cholesky::new(&[1.0, 1.0, 1.0, 1.0], 2).is_none());
    }
}
