//! Matrix products for the engine with a fixed order of operations, the same bits on every CPU:
//! `dst[i][j]` is one chain of fused multiply-adds over the inner index p = 0, 1, ..., k-1,
//!
//! ```text
//! acc = dst[i][j] if accumulating, else +0;   for p in 0..k: acc = fma(a[i][p], b[p][j], acc)
//! ```
//!
//! (a bias is added by filling `dst` with it and accumulating). Blocking over the inner dimension
//! stores the partial chain in `dst` and continues it, which keeps the order; blocking over rows
//! and columns, packing, and the choice between computing the product and its transpose
//! (fma(x, y, acc) = fma(y, x, acc) exactly) change no bit either. Block sizes are constants of
//! this file; nothing reads cache sizes or the core count. The register tiles per dispatch level
//! live in `nn/microkernel.rs`.

use std::borrow::Cow;

use rayon::prelude::*;

use super::dispatch::Level;
use super::microkernel::{Kernels, Tile};
use super::scalar::Real;
use super::spread::Spread;

/// Inner-dimension block: the length of one stored stretch of each chain.
const KC: usize = 256;
/// Rows of `a` taken at a time (a multiple of every tile's row count: 4, 6 and 8).
const MC: usize = 144;
/// Columns of `b` packed at a time (a multiple of every tile's column count: 4, 8, 16 and 32).
const NC: usize = 512;
/// Products with at most this many rows of `a` read `b` in place where its columns lie side by
/// side (packing costs a copy of `b` per product, which few rows do not repay).
const B_IN_PLACE_ROWS: usize = 64;

/// A matrix in a slice with a row stride and a column stride: a row-major matrix read as itself
/// ([`View::new`]), as its transpose ([`View::t`]), or a band of either's rows or columns.
#[derive(Clone, Copy)]
pub struct View<'a, T> {
    data: &'a [T],
    rows: usize,
    cols: usize,
    row_stride: usize,
    col_stride: usize,
}

impl<'a, T: Copy> View<'a, T> {
    /// The first `rows * cols` values of `data` as a row-major matrix.
    pub fn new(data: &'a [T], rows: usize, cols: usize) -> Self {
        View::strided(data, rows, cols, cols, 1)
    }

    /// Every value the view reads lies in `data`: the kernels read through raw pointers and rely
    /// on it.
    fn strided(data: &'a [T], rows: usize, cols: usize, row_stride: usize, col_stride: usize) -> Self {
        let span = if rows == 0 || cols == 0 { 0 } else { (rows - 1) * row_stride + (cols - 1) * col_stride + 1 };
        assert!(data.len() >= span, "matrix view of {rows}x{cols} (strides {row_stride}, {col_stride}) over {} values", data.len());
        View { data, rows, cols, row_stride, col_stride }
    }

    /// The transpose, without moving any value.
    pub fn t(self) -> Self {
        View { rows: self.cols, cols: self.rows, row_stride: self.col_stride, col_stride: self.row_stride, ..self }
    }

    /// (rows, cols) as read.
    pub fn shape(&self) -> (usize, usize) {
        (self.rows, self.cols)
    }

    /// (row stride, column stride) in `data` as read.
    fn strides(&self) -> (usize, usize) {
        (self.row_stride, self.col_stride)
    }

    /// Rows `start..start + rows` (at least one row).
    fn row_band(self, start: usize, rows: usize) -> Self {
        View::strided(&self.data[start * self.row_stride..], rows, self.cols, self.row_stride, self.col_stride)
    }

    /// Columns `start..start + cols` (at least one column).
    fn col_band(self, start: usize, cols: usize) -> Self {
        View::strided(&self.data[start * self.col_stride..], self.rows, cols, self.row_stride, self.col_stride)
    }

    /// The values of a one-row or one-column view in order: borrowed where they lie side by side
    /// (every view the engine builds), gathered otherwise.
    fn vector(&self) -> Cow<'a, [T]> {
        let (len, stride) = if self.cols == 1 { (self.rows, self.row_stride) } else { (self.cols, self.col_stride) };
        if stride == 1 || len <= 1 {
            Cow::Borrowed(&self.data[..len])
        } else {
            Cow::Owned((0..len).map(|i| self.data[i * stride]).collect())
        }
    }
}

/// One thread's packing buffers.
#[derive(Clone)]
struct Scratch<T> {
    packed_a: Vec<T>,
    packed_b: Vec<T>,
    edge: Vec<T>,
}

/// The kernels of one dispatch level, packing buffers for each piece a product may be split into,
/// and the [`Spread`] that decides the pieces, for one engine; the buffers grow on first use, so
/// that repeated products of the same shapes allocate nothing.
#[derive(Clone)]
pub struct Workspace<T> {
    kernels: Kernels<T>,
    scratch: Vec<Scratch<T>>,
    spread: Spread,
}

impl<T: Real> Workspace<T> {
    /// A workspace computing at `level`, which the CPU must run ([`Level::available`]), on one
    /// thread.
    pub fn new(level: Level) -> Self {
        Workspace::spread_over(level, 1)
    }

    /// As [`Workspace::new`], splitting each large product into at most `threads` pieces for the
    /// threads of the pool it runs in ([`Spread`]): the same bits for every `threads`.
    pub fn spread_over(level: Level, threads: usize) -> Self {
        assert!(level.available(), "dispatch level {} is not available on this CPU", level.name());
        let kernels = T::kernels(level);
        let spread = Spread::new(threads);
        let tile = kernels.tile;
        let scratch = (0..spread.parts())
            .map(|_| Scratch { packed_a: Vec::new(), packed_b: Vec::new(), edge: vec![T::zero(); tile.rows * tile.cols] })
            .collect();
        Workspace { kernels, scratch, spread }
    }

    /// How the element-wise passes beside the products are split.
    pub fn spread(&self) -> &Spread {
        &self.spread
    }
}

/// The destination as (pointer-free) row and column strides over a slice.
struct Out<'a, T> {
    data: &'a mut [T],
    row_stride: usize,
    col_stride: usize,
}

/// `dst = a b` (or `dst += a b` when `accumulate`), `dst` row-major `m x n` in its first `m * n`
/// values, in the order the module documentation defines. A product of at least [`PIECE_WORK`]
/// multiply-adds per piece, computed on a thread of a pool, is split into bands of the
/// destination's rows (or, for one row, of its columns), one per piece; each output element's
/// chain lies whole in one piece, so the split changes no bit. Panics on mismatched shapes:
/// callers size every buffer from the same layer widths.
pub fn matmul<T: Real>(dst: &mut [T], a: View<'_, T>, b: View<'_, T>, accumulate: bool, ws: &mut Workspace<T>) {
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
    let kernels = ws.kernels;
    let dst = &mut dst[..m * n];
    let work = m * n * k;
    let spread = &ws.spread;
    if m > 1 {
        // Bands of whole rows, a multiple of the register tile's rows (or of the vector width
        // across outputs, for a matrix times a vector) apart.
        let align = if n == 1 { kernels.across_width.max(kernels.along_rows) } else { kernels.tile.rows };
        let band = spread.band(m, align, work / m);
        if band < m {
            return spread.each(dst.par_chunks_mut(band * n).zip(ws.scratch.par_iter_mut()).enumerate(), |(i, (d, s))| {
                product(d, a.row_band(i * band, d.len() / n), b, accumulate, &kernels, s);
            });
        }
    } else {
        let band = spread.band(n, kernels.across_width.max(kernels.tile.cols), k);
        if band < n {
            return spread.each(dst.par_chunks_mut(band).zip(ws.scratch.par_iter_mut()).enumerate(), |(j, (d, s))| {
                product(d, a, b.col_band(j * band, d.len()), accumulate, &kernels, s);
            });
        }
    }
    product(dst, a, b, accumulate, &kernels, &mut ws.scratch[0]);
}

/// One piece of a product, on the calling thread: `dst` is `a.rows x b.cols`.
fn product<T: Real>(dst: &mut [T], a: View<'_, T>, b: View<'_, T>, accumulate: bool, kernels: &Kernels<T>, scratch: &mut Scratch<T>) {
    let m = a.shape().0;
    let n = b.shape().1;
    // One output column or row: a matrix times a vector, whose one operand is contiguous
    // whichever way it is read. For m = 1 the chains read fma(b(p, j), a(0, p), acc), the same
    // bits as fma(a(0, p), b(p, j), acc).
    let (a_rs, a_cs) = a.strides();
    let (b_rs, b_cs) = b.strides();
    if n == 1 {
        return matrix_vector(dst, Strided { data: a.data, rows: m, row_stride: a_rs, step: a_cs }, &b.vector(), accumulate, kernels);
    }
    if m == 1 {
        return matrix_vector(dst, Strided { data: b.data, rows: n, row_stride: b_cs, step: b_rs }, &a.vector(), accumulate, kernels);
    }
    debug_assert_eq!(dst.len(), m * n);
    // Tiles are `rows x cols`; a product with fewer columns than a tile is computed as its
    // transpose, C^T = B^T A^T, when that leaves fewer lanes idle (same bits either way).
    let (tr, tc) = (kernels.tile.rows, kernels.tile.cols);
    let lanes = |m: usize, n: usize| m.div_ceil(tr) * tr * n.div_ceil(tc) * tc;
    if n < tc && lanes(n, m) < lanes(m, n) {
        blocked(Out { data: dst, row_stride: 1, col_stride: n }, b.t(), a.t(), accumulate, kernels, scratch);
    } else {
        blocked(Out { data: dst, row_stride: n, col_stride: 1 }, a, b, accumulate, kernels, scratch);
    }
}

/// The blocked product into `out` (`a.rows x b.cols`).
fn blocked<T: Real>(out: Out<'_, T>, a: View<'_, T>, b: View<'_, T>, accumulate: bool, kernels: &Kernels<T>, ws: &mut Scratch<T>) {
    let Out { data, row_stride, col_stride } = out;
    let (m, k) = a.shape();
    let n = b.shape().1;
    let (a_rs, a_cs) = a.strides();
    let (b_rs, b_cs) = b.strides();
    let Tile { rows: tr, cols: tc, compute } = kernels.tile;
    // With few rows of `a`, each packed panel of `b` would serve only a few tiles: where `b`'s
    // columns lie side by side, whole panels are read where they lie and only a last panel
    // narrower than the tile is packed.
    let b_in_place = b_cs == 1 && m <= B_IN_PLACE_ROWS;
    for jc in (0..n).step_by(NC) {
        let nc = NC.min(n - jc);
        let panels_b = nc.div_ceil(tc);
        let whole_b = if b_in_place { nc / tc * tc } else { 0 };
        for pc in (0..k).step_by(KC) {
            let kc = KC.min(k - pc);
            // After the first inner block every chain continues from its stored partial value.
            let load = accumulate || pc > 0;
            if whole_b < nc {
                let origin = pc * b_rs + (jc + whole_b) * b_cs;
                pack(&mut ws.packed_b, Source { data: b.data, origin, step: b_rs, lane: b_cs }, nc - whole_b, tc, kc);
            }
            for ic in (0..m).step_by(MC) {
                let mc = MC.min(m - ic);
                // Whole panels of `a` are read in place through its strides (the tile broadcasts
                // one value per row and step, so either layout serves); a last panel of fewer
                // rows than the tile is packed with zero rows below it, once per block.
                let whole = mc / tr * tr;
                if whole < mc {
                    pack(
                        &mut ws.packed_a,
                        Source { data: a.data, origin: (ic + whole) * a_rs + pc * a_cs, step: a_cs, lane: a_rs },
                        mc - whole,
                        tr,
                        kc,
                    );
                }
                for jp in 0..panels_b {
                    let j0 = jp * tc;
                    let cols = tc.min(nc - j0);
                    let (bp, ldb) = if j0 < whole_b {
                        (b.data[pc * b_rs + jc + j0..].as_ptr(), b_rs)
                    } else {
                        let panel = (j0 - whole_b) / tc;
                        (ws.packed_b[panel * kc * tc..(panel + 1) * kc * tc].as_ptr(), tc)
                    };
                    for i0 in (0..mc).step_by(tr) {
                        let rows = tr.min(mc - i0);
                        let (ap, a_strides) = if i0 < whole {
                            (a.data[(ic + i0) * a_rs + pc * a_cs..].as_ptr(), (a_rs, a_cs))
                        } else {
                            (ws.packed_a[(i0 - whole) * kc..].as_ptr(), (1, tr))
                        };
                        let (row, col) = (ic + i0, jc + j0);
                        let origin = row * row_stride + col * col_stride;
                        if rows == tr && cols == tc && col_stride == 1 {
                            let block = &mut data[origin..origin + (tr - 1) * row_stride + tc];
                            // SAFETY: `ap` with `a_strides` spans rows x kc values of `a` (a
                            // whole panel inside the view, checked in `View::new`) or of the
                            // packed edge panel (kc x tr values); `bp` with `ldb` spans kc x tc
                            // values (packed above, or a whole panel of `b` inside its view);
                            // `block` spans the tr x tc destination block with row stride
                            // `row_stride`; the workspace's tile is of a level the CPU runs
                            // (checked in `Workspace::new`).
                            unsafe { compute(kc, ap, a_strides, (bp, ldb), block.as_mut_ptr(), row_stride, load) };
                        } else {
                            let edge = &mut ws.edge;
                            if load {
                                for r in 0..rows {
                                    for j in 0..cols {
                                        edge[r * tc + j] = data[origin + r * row_stride + j * col_stride];
                                    }
                                }
                            }
                            // SAFETY: as above, with `edge` a full tr x tc block of row stride tc.
                            unsafe { compute(kc, ap, a_strides, (bp, ldb), edge.as_mut_ptr(), tc, load) };
                            for r in 0..rows {
                                for j in 0..cols {
                                    data[origin + r * row_stride + j * col_stride] = edge[r * tc + j];
                                }
                            }
                        }
                    }
                }
            }
        }
    }
}

/// A matrix of `rows` outputs by k steps: (row r, step p) at `data[r row_stride + p step]`.
struct Strided<'a, T> {
    data: &'a [T],
    rows: usize,
    row_stride: usize,
    step: usize,
}

/// `out[r] = chain over p of fma(mat(r, p), x[p], .)`, started from `out[r]` or +0: vectors
/// across outputs where they lie side by side, interleaved chains where each output's steps do,
/// and one chain at a time (the level's own fused multiply-add) for the remainder.
fn matrix_vector<T: Real>(out: &mut [T], mat: Strided<'_, T>, x: &[T], load: bool, kernels: &Kernels<T>) {
    let k = x.len();
    let Strided { data, rows, row_stride, step } = mat;
    let mut done = 0;
    if row_stride == 1 {
        let width = kernels.across_width;
        while done + width <= rows {
            // SAFETY: mat(r, p) for r < rows, p < k lies in `data` (checked in `View::new`), so
            // the block's last value, (k-1) step + done + width - 1, does too; `out` has `rows`
            // values; the workspace's kernels are of a level the CPU runs.
            unsafe { (kernels.across)(k, data[done..].as_ptr(), step, x.as_ptr(), out[done..].as_mut_ptr(), load) };
            done += width;
        }
    } else if step == 1 {
        for (along, group) in [(kernels.along, kernels.along_rows), (kernels.along_few, kernels.along_few_rows)] {
            while done + group <= rows {
                // SAFETY: as above; the group's last value is (done + group - 1) row_stride + k - 1.
                unsafe { along(k, data[done * row_stride..].as_ptr(), row_stride, x.as_ptr(), out[done..].as_mut_ptr(), load) };
                done += group;
            }
        }
    }
    for r in done..rows {
        // SAFETY: row r's k steps lie in `data` (checked in `View::new`), `out` has `rows` values.
        unsafe { (kernels.one)(k, data[r * row_stride..].as_ptr(), step, x.as_ptr(), out[r..].as_mut_ptr(), load) };
    }
}

/// A block of an operand to pack: value (step p, lane l) at `data[origin + p step + l lane]`.
struct Source<'a, T> {
    data: &'a [T],
    origin: usize,
    step: usize,
    lane: usize,
}

/// Packs `lanes` lanes (padded with zeros to whole panels of `width`) by `depth` inner steps:
/// panel q, step p, lane l holds the source's (p, q width + l) at `(q depth + p) width + l`.
fn pack<T: Real>(buffer: &mut Vec<T>, src: Source<'_, T>, lanes: usize, width: usize, depth: usize) {
    let panels = lanes.div_ceil(width);
    let len = panels * width * depth;
    if buffer.len() < len {
        buffer.resize(len, T::zero());
    }
    let Source { data, origin, step, lane } = src;
    for q in 0..panels {
        let panel = &mut buffer[q * width * depth..(q + 1) * width * depth];
        let first = q * width;
        let used = width.min(lanes - first);
        if lane == 1 {
            // Lanes contiguous in the source: one short copy per step (an element loop, which
            // the compiler vectorises, rather than a call to memmove for 64 bytes).
            for (p, dst) in panel.chunks_exact_mut(width).enumerate() {
                let start = origin + p * step + first;
                for (d, &v) in dst[..used].iter_mut().zip(&data[start..start + used]) {
                    *d = v;
                }
                dst[used..].fill(T::zero());
            }
        } else if step == 1 {
            // Each lane's steps contiguous: read each lane's steps in order, write them down the
            // panel (the panel, at most 32 KiB, stays in the first-level cache).
            for l in 0..width {
                if l < used {
                    let row = &data[origin + (first + l) * lane..][..depth];
                    for (dst, &v) in panel.chunks_exact_mut(width).zip(row) {
                        dst[l] = v;
                    }
                } else {
                    for dst in panel.chunks_exact_mut(width) {
                        dst[l] = T::zero();
                    }
                }
            }
        } else {
            for (p, dst) in panel.chunks_exact_mut(width).enumerate() {
                for (l, v) in dst.iter_mut().enumerate() {
                    *v = if l < used { data[origin + p * step + (first + l) * lane] } else { T::zero() };
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The definition: one `mul_add` chain per element in increasing inner index.
    fn reference(a: &[f32], (m, k): (usize, usize), b: &[f32], n: usize, start: Option<&[f32]>) -> Vec<f32> {
        let mut out = vec![0.0f32; m * n];
        for i in 0..m {
            for j in 0..n {
                let mut acc = start.map_or(0.0, |s| s[i * n + j]);
                for p in 0..k {
                    acc = a[i * k + p].mul_add(b[p * n + j], acc);
                }
                out[i * n + j] = acc;
            }
        }
        out
    }

    fn transpose(a: &[f32], rows: usize, cols: usize) -> Vec<f32> {
        (0..cols).flat_map(|j| (0..rows).map(move |i| a[i * cols + j])).collect()
    }

    /// Values of mixed sign and magnitude, so that rounding differs between summation orders.
    fn values(len: usize, salt: u64) -> Vec<f32> {
        let mut state = salt.wrapping_mul(0x9E37_79B9_7F4A_7C15) | 1;
        (0..len)
            .map(|_| {
                state ^= state << 13;
                state ^= state >> 7;
                state ^= state << 17;
                let unit = (state >> 40) as f32 / (1u64 << 24) as f32 - 0.5;
                unit * [1.0, 1e-3, 37.0, 0.01][(state & 3) as usize]
            })
            .collect()
    }

    fn bits(v: &[f32]) -> Vec<u32> {
        v.iter().map(|x| x.to_bits()).collect()
    }

    /// Every level, every orientation, accumulate on and off, bit for bit against the reference.
    fn check_shape(m: usize, k: usize, n: usize) {
        let a = values(m * k, (m * 131 + k * 7 + n) as u64);
        let b = values(k * n, (n * 977 + k) as u64);
        let start = values(m * n, (m + n * 3 + k * 11) as u64);
        let plain = bits(&reference(&a, (m, k), &b, n, None));
        let accumulated = bits(&reference(&a, (m, k), &b, n, Some(&start)));
        let (at, bt) = (transpose(&a, m, k), transpose(&b, k, n));
        for level in Level::available_levels() {
            let mut ws = Workspace::<f32>::new(level);
            let views = [
                (View::new(&a, m, k), View::new(&b, k, n)),
                (View::new(&at, k, m).t(), View::new(&b, k, n)),
                (View::new(&a, m, k), View::new(&bt, n, k).t()),
                (View::new(&at, k, m).t(), View::new(&bt, n, k).t()),
            ];
            for (orientation, (x, y)) in views.into_iter().enumerate() {
                let mut got = vec![f32::NAN; m * n];
                matmul(&mut got, x, y, false, &mut ws);
                assert!(bits(&got) == plain, "{m}x{k}x{n} level {} orientation {orientation}: differs from the reference", level.name());
                let mut acc = start.clone();
                matmul(&mut acc, x, y, true, &mut ws);
                assert!(bits(&acc) == accumulated, "{m}x{k}x{n} level {} orientation {orientation} accumulating: differs", level.name());
            }
        }
    }

    #[test]
    fn every_level_matches_the_reference_bit_for_bit_on_small_shapes() {
        for m in 1..=67 {
            for n in [1, 2, 3, 5, 7, 15, 16, 17, 31, 32, 33, 47, 64, 67] {
                for k in [1, 2, 3, 8, 13, 33, 67] {
                    check_shape(m, k, n);
                }
            }
        }
        for k in 1..=67 {
            check_shape(7, k, 19);
        }
    }

    #[test]
    fn every_level_matches_the_reference_bit_for_bit_across_block_edges() {
        // Shapes crossing the inner (KC), row (MC) and column (NC) blocks.
        for (m, k, n) in [(256, 256, 256), (145, 600, 33), (300, 257, 513), (1, 1000, 1), (600, 3, 1100), (37, 513, 600)] {
            check_shape(m, k, n);
        }
    }

    /// Products split across 2, 3 and 4 threads (more threads than this machine may have cores),
    /// in bands that cross the tiles' edges, at every level: the reference's bits, both when the
    /// pool's threads take the pieces as they come and when each piece is held by a thread of its
    /// own until all have started (so that every piece is computed by another thread), and then
    /// as many threads took part as pieces were cut.
    #[test]
    fn products_split_across_threads_keep_the_bits_and_use_every_thread() {
        // (m, k, n): row bands with ragged tile edges, a matrix times a vector (n = 1) cut into
        // row bands, a row times a matrix (m = 1) cut into column bands.
        let shapes = [(203, 67, 150), (97, 300, 33), (4001, 150, 1), (1, 3000, 700), (96, 1024, 128)];
        for threads in [2usize, 3, 4] {
            let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().unwrap();
            for &(m, k, n) in &shapes {
                let a = values(m * k, (m * 31 + k) as u64);
                let b = values(k * n, (n * 7 + k) as u64);
                let start = values(m * n, (m + n) as u64);
                let want = bits(&reference(&a, (m, k), &b, n, Some(&start)));
                let at = transpose(&a, m, k);
                for level in Level::available_levels() {
                    let kernels = f32::kernels(level);
                    let align = if n == 1 {
                        kernels.across_width.max(kernels.along_rows)
                    } else if m == 1 {
                        kernels.across_width.max(kernels.tile.cols)
                    } else {
                        kernels.tile.rows
                    };
                    let (len, per_unit) = if m == 1 { (n, k) } else { (m, n * k) };
                    let cut = pool.install(|| len.div_ceil(Spread::new(threads).band(len, align, per_unit)));
                    assert!(cut >= 2 && cut <= threads, "{m}x{k}x{n}: {cut} pieces for {threads} threads");
                    for (x, label) in [(View::new(&a, m, k), "a"), (View::new(&at, k, m).t(), "a transposed")] {
                        for held in [false, true] {
                            let mut ws = Workspace::<f32>::spread_over(level, threads);
                            if held {
                                ws.spread.meet(cut);
                            }
                            let mut got = start.clone();
                            pool.install(|| matmul(&mut got, x, View::new(&b, k, n), true, &mut ws));
                            let case = format!("{m}x{k}x{n} ({label}) on {threads} threads at {}", level.name());
                            assert!(bits(&got) == want, "{case}: differs from the reference");
                            if held {
                                assert_eq!(ws.spread().threads_taken(), cut, "{case}: threads that took part");
                            }
                        }
                    }
                }
            }
        }
    }

    #[test]
    fn empty_inner_dimension_clears_or_keeps_the_destination() {
        let mut ws = Workspace::<f32>::new(Level::Scalar);
        let mut dst = vec![3.0f32; 6];
        matmul(&mut dst, View::new(&[], 2, 0), View::new(&[], 0, 3), true, &mut ws);
        assert_eq!(dst, vec![3.0; 6]);
        matmul(&mut dst, View::new(&[], 2, 0), View::new(&[], 0, 3), false, &mut ws);
        assert_eq!(dst, vec![0.0; 6]);
    }

    #[test]
    fn f64_products_follow_the_same_definition() {
        let (m, k, n) = (5, 300, 3);
        let a: Vec<f64> = (0..m * k).map(|i| (i as f64 * 0.37).sin()).collect();
        let b: Vec<f64> = (0..k * n).map(|i| (i as f64 * 0.91).cos()).collect();
        let mut ws = Workspace::<f64>::new(Level::best());
        let mut got = vec![0.0; m * n];
        matmul(&mut got, View::new(&a, m, k), View::new(&b, k, n), false, &mut ws);
        for i in 0..m {
            for j in 0..n {
                let want = (0..k).fold(0.0f64, |acc, p| a[i * k + p].mul_add(b[p * n + j], acc));
                assert_eq!(got[i * n + j].to_bits(), want.to_bits());
            }
        }
    }
}
