//! Matrix products for the training engine: a shape-checked, safe wrapper over the `gemm` crate
//! (the kernels candle's CPU backend calls), single-threaded, on row-major slices read either way
//! round. The only `unsafe` in the crate lives here.

use super::scalar::Real;

/// A row-major `rows x cols` matrix in a slice, read as itself or as its transpose.
#[derive(Clone, Copy)]
pub struct View<'a, T> {
    data: &'a [T],
    rows: usize,
    cols: usize,
    transposed: bool,
}

impl<'a, T> View<'a, T> {
    /// The first `rows * cols` values of `data` as a row-major matrix.
    pub fn new(data: &'a [T], rows: usize, cols: usize) -> Self {
        assert!(data.len() >= rows * cols, "matrix view of {rows}x{cols} over {} values", data.len());
        View { data, rows, cols, transposed: false }
    }

    /// The transpose, without moving any value.
    pub fn t(self) -> Self {
        View { transposed: !self.transposed, ..self }
    }

    /// (rows, cols) as read.
    fn shape(&self) -> (usize, usize) {
        if self.transposed { (self.cols, self.rows) } else { (self.rows, self.cols) }
    }

    /// (row stride, column stride) as read.
    fn strides(&self) -> (isize, isize) {
        if self.transposed { (1, self.cols as isize) } else { (self.cols as isize, 1) }
    }
}

/// `dst = a b` (or `dst += a b` when `accumulate`), `dst` row-major `m x n` in its first `m * n`
/// values. Panics on mismatched shapes: callers size every buffer from the same layer widths.
pub fn matmul<T: Real>(dst: &mut [T], a: View<'_, T>, b: View<'_, T>, accumulate: bool) {
    let (m, k) = a.shape();
    let (kb, n) = b.shape();
    assert_eq!(k, kb, "inner dimensions {k} and {kb} differ");
    assert!(dst.len() >= m * n, "destination of {} values for {m}x{n}", dst.len());
    if m == 0 || n == 0 {
        return;
    }
    if k == 0 {
        if !accumulate {
            dst[..m * n].fill(T::zero());
        }
        return;
    }
    let (a_rs, a_cs) = a.strides();
    let (b_rs, b_cs) = b.strides();
    // SAFETY: every index gemm touches is (row < m, col < n) of dst with strides (n, 1), inside
    // dst[..m * n]; (row < m, inner < k) of a and (inner < k, col < n) of b with the strides of
    // their views, inside the slices checked in `View::new`. dst does not alias a or b (&mut).
    unsafe {
        gemm::gemm(
            m,
            n,
            k,
            dst.as_mut_ptr(),
            1,
            n as isize,
            accumulate,
            a.data.as_ptr(),
            a_cs,
            a_rs,
            b.data.as_ptr(),
            b_cs,
            b_rs,
            T::one(),
            T::one(),
            false,
            false,
            false,
            gemm::Parallelism::None,
        )
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn naive(a: &[f64], (m, k): (usize, usize), b: &[f64], n: usize) -> Vec<f64> {
        let mut out = vec![0.0; m * n];
        for i in 0..m {
            for j in 0..n {
                out[i * n + j] = (0..k).map(|p| a[i * k + p] * b[p * n + j]).sum();
            }
        }
        out
    }

    fn transpose(a: &[f64], rows: usize, cols: usize) -> Vec<f64> {
        (0..cols).flat_map(|j| (0..rows).map(move |i| a[i * cols + j])).collect()
    }

    #[test]
    fn products_match_the_definition_in_every_orientation() {
        let (m, k, n) = (5, 7, 3);
        let a: Vec<f64> = (0..m * k).map(|i| (i as f64 * 0.37).sin()).collect();
        let b: Vec<f64> = (0..k * n).map(|i| (i as f64 * 0.91).cos()).collect();
        let want = naive(&a, (m, k), &b, n);
        let at = transpose(&a, m, k);
        let bt = transpose(&b, k, n);
        let cases = [
            (View::new(&a, m, k), View::new(&b, k, n)),
            (View::new(&at, k, m).t(), View::new(&b, k, n)),
            (View::new(&a, m, k), View::new(&bt, n, k).t()),
            (View::new(&at, k, m).t(), View::new(&bt, n, k).t()),
        ];
        for (x, y) in cases {
            let mut got = vec![0.0; m * n];
            matmul(&mut got, x, y, false);
            for (g, w) in got.iter().zip(&want) {
                assert!((g - w).abs() < 1e-12, "{g} vs {w}");
            }
            let mut acc = vec![1.0; m * n];
            matmul(&mut acc, x, y, true);
            for (g, w) in acc.iter().zip(&want) {
                assert!((g - (w + 1.0)).abs() < 1e-12);
            }
        }
    }
}
