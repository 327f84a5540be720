//! The register tiles of the portable matrix multiply, one per dispatch level: an `MR x NR` block
//! of the product, each output element one chain of fused multiply-adds over the inner dimension
//! in increasing index order, started from the destination's value or from +0. Vectors run across
//! output columns (each lane a different output element), never across the inner dimension, so
//! the vector width cannot change a bit: the scalar, AVX2, AVX-512 and NEON tiles compute the
//! same values. The right operand of a tile comes packed by `nn/matmul.rs`, the left one is read in
//! place through its strides; matrix-vector products
//! (one output row or column) use two unpacked kernels with the same chains: vectors across
//! outputs when the outputs lie side by side in memory, interleaved one-lane chains when each
//! output's inner steps do.

use super::dispatch::Level;

/// Everything one level computes products with.
#[derive(Clone, Copy)]
pub struct Kernels<T> {
    pub tile: Tile<T>,
    /// `across(k, mat, step, x, out, load)`: for l < `across_width`,
    /// `out[l] = fma(mat[(k-1) step + l], x[k-1], ... fma(mat[l], x[0], o0))`, o0 = `out[l]` when
    /// `load`, else +0.
    ///
    /// # Safety
    /// `mat` spans `(k-1) step + across_width` values, `x` k values, `out` `across_width`; the CPU
    /// runs the level.
    pub across: unsafe fn(usize, *const T, usize, *const T, *mut T, bool),
    pub across_width: usize,
    /// `along(k, mat, stride, x, out, load)`: for r < `along_rows`,
    /// `out[r] = fma(mat[r stride + k-1], x[k-1], ... fma(mat[r stride], x[0], o0))`.
    ///
    /// # Safety
    /// `mat` spans `(along_rows-1) stride + k` values, `x` k values, `out` `along_rows`; the CPU
    /// runs the level.
    pub along: unsafe fn(usize, *const T, usize, *const T, *mut T, bool),
    pub along_rows: usize,
    /// As `along`, for fewer rows (`along_few_rows`): what the rows left over by `along` use
    /// before single chains.
    pub along_few: unsafe fn(usize, *const T, usize, *const T, *mut T, bool),
    pub along_few_rows: usize,
    /// `one(k, mat, step, x, out, load)`: `out[0] = fma(mat[(k-1) step], x[k-1], ... fma(mat[0],
    /// x[0], o0))`, the single chains left over by `across` and `along`.
    ///
    /// # Safety
    /// `mat` spans `(k-1) step + 1` values, `x` k values, `out` one; the CPU runs the level.
    pub one: unsafe fn(usize, *const T, usize, *const T, *mut T, bool),
}

/// The signature of a tile's kernel (see [`Tile::compute`]).
pub(crate) type TileFn<T> = unsafe fn(usize, *const T, (usize, usize), (*const T, usize), *mut T, usize, bool);

/// One level's tile for element type `T`: its shape and the function that computes it.
#[derive(Clone, Copy)]
pub struct Tile<T> {
    pub rows: usize,
    pub cols: usize,
    /// `compute(kc, a, (ars, acs), (b, ldb), c, ldc, load)`: for r < rows, j < cols, with
    /// A(r, p) = `a[r ars + p acs]` and B(p, j) = `b[p ldb + j]` (a packed panel, ldb = cols, or
    /// the right operand in place when its columns lie side by side),
    /// `c[r ldc + j] = fma(A(r, kc-1), B(kc-1, j), ... fma(A(r, 0), B(0, j), c0))` with
    /// `c0 = c[r ldc + j]` when `load`, else +0. The left operand is read where it lies (rows or
    /// steps contiguous, or a packed edge panel), and so may the right one.
    ///
    /// # Safety
    /// `a` spans every A(r, p) for r < rows, p < kc; `b` every B(p, j) for p < kc, j < cols; `c` a
    /// `rows x cols` block with row stride `ldc`; and the CPU runs the tile's level.
    pub compute: TileFn<T>,
}

/// A vector of lanes (or one scalar) that the generic kernels compute with.
///
/// Safety of every method: the CPU runs the instructions of the implementing type's level, and
/// `load`/`store` pointers are valid for `WIDTH` elements.
#[allow(clippy::missing_safety_doc)]
pub(crate) trait Lanes: Copy {
    type Elem: Copy;
    const WIDTH: usize;
    unsafe fn zero() -> Self;
    unsafe fn splat(x: Self::Elem) -> Self;
    unsafe fn load(p: *const Self::Elem) -> Self;
    unsafe fn store(self, p: *mut Self::Elem);
    /// `a b + acc` with one rounding, lane by lane.
    unsafe fn fma(a: Self, b: Self, acc: Self) -> Self;
}

/// The tile of `MR` rows by `NV` vectors, written once for every level.
#[inline(always)]
unsafe fn tile<V: Lanes, const MR: usize, const NV: usize>(
    kc: usize,
    a: *const V::Elem,
    (ars, acs): (usize, usize),
    (b, ldb): (*const V::Elem, usize),
    c: *mut V::Elem,
    ldc: usize,
    load: bool,
) {
    let rows: [usize; MR] = std::array::from_fn(|r| r * ars);
    let mut acc = [[V::zero(); NV]; MR];
    if load {
        for (r, row) in acc.iter_mut().enumerate() {
            for (v, lane) in row.iter_mut().enumerate() {
                *lane = V::load(c.add(r * ldc + v * V::WIDTH));
            }
        }
    }
    for p in 0..kc {
        let bp = b.add(p * ldb);
        let mut bv = [V::zero(); NV];
        for (v, lane) in bv.iter_mut().enumerate() {
            *lane = V::load(bp.add(v * V::WIDTH));
        }
        let ap = a.add(p * acs);
        for (row, &offset) in acc.iter_mut().zip(&rows) {
            let x = V::splat(*ap.add(offset));
            for (lane, &bl) in row.iter_mut().zip(&bv) {
                *lane = V::fma(x, bl, *lane);
            }
        }
    }
    for (r, row) in acc.iter().enumerate() {
        for (v, lane) in row.iter().enumerate() {
            lane.store(c.add(r * ldc + v * V::WIDTH));
        }
    }
}

/// One block of `NV` vectors of outputs, each lane its own chain over the `k` steps.
#[inline(always)]
unsafe fn across<V: Lanes, const NV: usize>(k: usize, mat: *const V::Elem, step: usize, x: *const V::Elem, out: *mut V::Elem, load: bool) {
    let mut acc = [V::zero(); NV];
    if load {
        for (v, lane) in acc.iter_mut().enumerate() {
            *lane = V::load(out.add(v * V::WIDTH));
        }
    }
    for p in 0..k {
        let xs = V::splat(*x.add(p));
        let row = mat.add(p * step);
        for (v, lane) in acc.iter_mut().enumerate() {
            *lane = V::fma(V::load(row.add(v * V::WIDTH)), xs, *lane);
        }
    }
    for (v, lane) in acc.iter().enumerate() {
        lane.store(out.add(v * V::WIDTH));
    }
}

/// `R` outputs whose steps are contiguous, as `R` interleaved one-lane chains.
#[inline(always)]
unsafe fn along<S: Lanes, const R: usize>(k: usize, mat: *const S::Elem, stride: usize, x: *const S::Elem, out: *mut S::Elem, load: bool) {
    let mut acc = [S::zero(); R];
    if load {
        for (r, a) in acc.iter_mut().enumerate() {
            *a = S::load(out.add(r));
        }
    }
    for p in 0..k {
        let xp = S::splat(*x.add(p));
        for (r, a) in acc.iter_mut().enumerate() {
            *a = S::fma(S::load(mat.add(r * stride + p)), xp, *a);
        }
    }
    for (r, a) in acc.iter().enumerate() {
        a.store(out.add(r));
    }
}

/// One output's chain over `k` steps `step` apart.
#[inline(always)]
unsafe fn chain<S: Lanes>(k: usize, mat: *const S::Elem, step: usize, x: *const S::Elem, out: *mut S::Elem, load: bool) {
    let mut acc = if load { S::load(out) } else { S::zero() };
    for p in 0..k {
        acc = S::fma(S::load(mat.add(p * step)), S::splat(*x.add(p)), acc);
    }
    acc.store(out);
}

macro_rules! scalar_lanes {
    ($t:ty, $fma:path) => {
        impl Lanes for $t {
            type Elem = $t;
            const WIDTH: usize = 1;
            #[inline(always)]
            unsafe fn zero() -> Self {
                0.0
            }
            #[inline(always)]
            unsafe fn splat(x: $t) -> Self {
                x
            }
            #[inline(always)]
            unsafe fn load(p: *const $t) -> Self {
                *p
            }
            #[inline(always)]
            unsafe fn store(self, p: *mut $t) {
                *p = self
            }
            #[inline(always)]
            unsafe fn fma(a: Self, b: Self, acc: Self) -> Self {
                $fma(a, b, acc)
            }
        }
    };
}
scalar_lanes!(f32, libm::fmaf);
scalar_lanes!(f64, libm::fma);

const SCALAR_ROWS: usize = 4;
const SCALAR_COLS: usize = 4;

/// Interleaved chains of the matrix-vector kernels (enough to hide the FMA latency).
const CHAINS: usize = 8;

unsafe fn scalar_tile<T: Lanes<Elem = T>>(
    kc: usize,
    a: *const T,
    strides: (usize, usize),
    b: (*const T, usize),
    c: *mut T,
    ldc: usize,
    load: bool,
) {
    tile::<T, SCALAR_ROWS, SCALAR_COLS>(kc, a, strides, b, c, ldc, load)
}

unsafe fn scalar_across<T: Lanes<Elem = T>>(k: usize, mat: *const T, step: usize, x: *const T, out: *mut T, load: bool) {
    across::<T, CHAINS>(k, mat, step, x, out, load)
}

unsafe fn scalar_along<T: Lanes<Elem = T>>(k: usize, mat: *const T, stride: usize, x: *const T, out: *mut T, load: bool) {
    along::<T, CHAINS>(k, mat, stride, x, out, load)
}

unsafe fn scalar_one<T: Lanes<Elem = T>>(k: usize, mat: *const T, step: usize, x: *const T, out: *mut T, load: bool) {
    chain::<T>(k, mat, step, x, out, load)
}

/// The scalar kernels: what f64 always uses, and f32 where no vector level runs.
pub(crate) fn scalar<T: Lanes<Elem = T>>() -> Kernels<T> {
    Kernels {
        tile: Tile { rows: SCALAR_ROWS, cols: SCALAR_COLS, compute: scalar_tile::<T> },
        across: scalar_across::<T>,
        across_width: CHAINS,
        along: scalar_along::<T>,
        along_rows: CHAINS,
        along_few: scalar_along::<T>,
        along_few_rows: CHAINS,
        one: scalar_one::<T>,
    }
}

#[cfg(target_arch = "x86_64")]
mod x86 {
    use super::{tile, Lanes};
    use std::arch::x86_64::*;

    /// A vector type of `$width` f32 lanes over the register `$register`, with the intrinsics of
    /// `$features` (each compiled only into functions that enable those features).
    macro_rules! vector_lanes {
        ($name:ident, $register:ty, $width:expr, $features:literal, $zero:ident, $splat:ident, $load:ident, $store:ident, $fma:ident) => {
            #[derive(Clone, Copy)]
            pub(super) struct $name($register);

            impl Lanes for $name {
                type Elem = f32;
                const WIDTH: usize = $width;
                #[inline]
                #[target_feature(enable = $features)]
                unsafe fn zero() -> Self {
                    $name($zero())
                }
                #[inline]
                #[target_feature(enable = $features)]
                unsafe fn splat(x: f32) -> Self {
                    $name($splat(x))
                }
                #[inline]
                #[target_feature(enable = $features)]
                unsafe fn load(p: *const f32) -> Self {
                    $name($load(p))
                }
                #[inline]
                #[target_feature(enable = $features)]
                unsafe fn store(self, p: *mut f32) {
                    $store(p, self.0)
                }
                #[inline]
                #[target_feature(enable = $features)]
                unsafe fn fma(a: Self, b: Self, acc: Self) -> Self {
                    $name($fma(a.0, b.0, acc.0))
                }
            }
        };
    }

    vector_lanes!(Ymm, __m256, 8, "avx2,fma", _mm256_setzero_ps, _mm256_set1_ps, _mm256_loadu_ps, _mm256_storeu_ps, _mm256_fmadd_ps);
    vector_lanes!(Zmm, __m512, 16, "avx512f", _mm512_setzero_ps, _mm512_set1_ps, _mm512_loadu_ps, _mm512_storeu_ps, _mm512_fmadd_ps);

    /// One lane with the CPU's fused multiply-add instruction.
    #[derive(Clone, Copy)]
    pub(super) struct Fma1(f32);

    impl Lanes for Fma1 {
        type Elem = f32;
        const WIDTH: usize = 1;
        #[inline]
        #[target_feature(enable = "fma")]
        unsafe fn zero() -> Self {
            Fma1(0.0)
        }
        #[inline]
        #[target_feature(enable = "fma")]
        unsafe fn splat(x: f32) -> Self {
            Fma1(x)
        }
        #[inline]
        #[target_feature(enable = "fma")]
        unsafe fn load(p: *const f32) -> Self {
            Fma1(*p)
        }
        #[inline]
        #[target_feature(enable = "fma")]
        unsafe fn store(self, p: *mut f32) {
            *p = self.0
        }
        #[inline]
        #[target_feature(enable = "fma")]
        unsafe fn fma(a: Self, b: Self, acc: Self) -> Self {
            Fma1(a.0.mul_add(b.0, acc.0))
        }
    }

    pub(super) const ALONG_ROWS: usize = 8;
    pub(super) const ACROSS_VECTORS: usize = 4;

    #[target_feature(enable = "avx2,fma")]
    pub(super) unsafe fn fma_along(k: usize, mat: *const f32, stride: usize, x: *const f32, out: *mut f32, load: bool) {
        super::along::<Fma1, ALONG_ROWS>(k, mat, stride, x, out, load)
    }

    /// Row groups of the transposing matrix-vector kernels: two groups of one vector's rows each,
    /// so that two independent chains of vector FMAs are in flight.
    const ALONG_GROUPS: usize = 2;
    pub(super) const AVX2_ALONG_ROWS: usize = ALONG_GROUPS * 8;
    pub(super) const AVX512_ALONG_ROWS: usize = ALONG_GROUPS * 16;

    /// A vector whose lanes can each take one row of a matrix-vector product: four steps of
    /// `WIDTH` rows gathered into four vectors by an in-register transpose.
    trait AcrossRows: Lanes<Elem = f32> {
        /// Input j: the 128-bit part h holds row j + 4h, steps p..p+3 (`first` points at row 0,
        /// step p; rows are `stride` apart).
        unsafe fn rows4(first: *const f32, stride: usize, j: usize) -> Self;
        /// Pairs of rows interleaved: (low, high) of `unpacklo_ps` and `unpackhi_ps`.
        unsafe fn interleave(a: Self, b: Self) -> (Self, Self);
        /// `shuffle_ps` with 0x44 (steps 0 and 2 of the pairs) and 0xEE (steps 1 and 3).
        unsafe fn pick(a: Self, b: Self) -> (Self, Self);
    }

    impl AcrossRows for Ymm {
        #[inline]
        #[target_feature(enable = "avx2,fma")]
        unsafe fn rows4(first: *const f32, stride: usize, j: usize) -> Self {
            Ymm(_mm256_loadu2_m128(first.add((j + 4) * stride), first.add(j * stride)))
        }
        #[inline]
        #[target_feature(enable = "avx2,fma")]
        unsafe fn interleave(a: Self, b: Self) -> (Self, Self) {
            (Ymm(_mm256_unpacklo_ps(a.0, b.0)), Ymm(_mm256_unpackhi_ps(a.0, b.0)))
        }
        #[inline]
        #[target_feature(enable = "avx2,fma")]
        unsafe fn pick(a: Self, b: Self) -> (Self, Self) {
            (Ymm(_mm256_shuffle_ps::<0x44>(a.0, b.0)), Ymm(_mm256_shuffle_ps::<0xEE>(a.0, b.0)))
        }
    }

    impl AcrossRows for Zmm {
        #[inline]
        #[target_feature(enable = "avx512f")]
        unsafe fn rows4(first: *const f32, stride: usize, j: usize) -> Self {
            let part = |h: usize| _mm_loadu_ps(first.add((j + 4 * h) * stride));
            let v = _mm512_broadcast_f32x4(part(0));
            let v = _mm512_mask_broadcast_f32x4(v, 0x00F0, part(1));
            let v = _mm512_mask_broadcast_f32x4(v, 0x0F00, part(2));
            Zmm(_mm512_mask_broadcast_f32x4(v, 0xF000, part(3)))
        }
        #[inline]
        #[target_feature(enable = "avx512f")]
        unsafe fn interleave(a: Self, b: Self) -> (Self, Self) {
            (Zmm(_mm512_unpacklo_ps(a.0, b.0)), Zmm(_mm512_unpackhi_ps(a.0, b.0)))
        }
        #[inline]
        #[target_feature(enable = "avx512f")]
        unsafe fn pick(a: Self, b: Self) -> (Self, Self) {
            (Zmm(_mm512_shuffle_ps::<0x44>(a.0, b.0)), Zmm(_mm512_shuffle_ps::<0xEE>(a.0, b.0)))
        }
    }

    /// `along` with vectors across rows: `ALONG_GROUPS` groups of `V::WIDTH` rows, each step's
    /// values of a group gathered into one vector (lane l holds row l) by an in-register
    /// transpose of 4 steps at a time, so each lane is still one row's chain over the steps in
    /// increasing order.
    #[inline(always)]
    unsafe fn along_across_rows<V: AcrossRows>(k: usize, mat: *const f32, stride: usize, x: *const f32, out: *mut f32, load: bool) {
        let width = V::WIDTH;
        let mut acc = [V::zero(); ALONG_GROUPS];
        if load {
            for (g, a) in acc.iter_mut().enumerate() {
                *a = V::load(out.add(g * width));
            }
        }
        let mut p = 0;
        while p + 4 <= k {
            for (g, a) in acc.iter_mut().enumerate() {
                let first = mat.add(g * width * stride + p);
                let r: [V; 4] = std::array::from_fn(|j| V::rows4(first, stride, j));
                let ((lo01, hi01), (lo23, hi23)) = (V::interleave(r[0], r[1]), V::interleave(r[2], r[3]));
                let ((s0, s1), (s2, s3)) = (V::pick(lo01, lo23), V::pick(hi01, hi23));
                for (t, v) in [s0, s1, s2, s3].into_iter().enumerate() {
                    *a = V::fma(v, V::splat(*x.add(p + t)), *a);
                }
            }
            p += 4;
        }
        while p < k {
            for (g, a) in acc.iter_mut().enumerate() {
                let mut step = [0f32; 16];
                for (l, v) in step[..width].iter_mut().enumerate() {
                    *v = *mat.add((g * width + l) * stride + p);
                }
                *a = V::fma(V::load(step.as_ptr()), V::splat(*x.add(p)), *a);
            }
            p += 1;
        }
        for (g, a) in acc.iter().enumerate() {
            a.store(out.add(g * width));
        }
    }

    #[target_feature(enable = "avx2,fma")]
    pub(super) unsafe fn avx2_along(k: usize, mat: *const f32, stride: usize, x: *const f32, out: *mut f32, load: bool) {
        along_across_rows::<Ymm>(k, mat, stride, x, out, load)
    }

    #[target_feature(enable = "avx512f")]
    pub(super) unsafe fn avx512_along(k: usize, mat: *const f32, stride: usize, x: *const f32, out: *mut f32, load: bool) {
        along_across_rows::<Zmm>(k, mat, stride, x, out, load)
    }

    #[target_feature(enable = "fma")]
    pub(super) unsafe fn fma_one(k: usize, mat: *const f32, step: usize, x: *const f32, out: *mut f32, load: bool) {
        super::chain::<Fma1>(k, mat, step, x, out, load)
    }

    #[target_feature(enable = "avx2,fma")]
    pub(super) unsafe fn avx2_across(k: usize, mat: *const f32, step: usize, x: *const f32, out: *mut f32, load: bool) {
        super::across::<Ymm, ACROSS_VECTORS>(k, mat, step, x, out, load)
    }

    #[target_feature(enable = "avx512f")]
    pub(super) unsafe fn avx512_across(k: usize, mat: *const f32, step: usize, x: *const f32, out: *mut f32, load: bool) {
        super::across::<Zmm, ACROSS_VECTORS>(k, mat, step, x, out, load)
    }

    pub(super) const AVX2_ROWS: usize = 6;
    pub(super) const AVX2_VECTORS: usize = 2;
    pub(super) const AVX512_ROWS: usize = 8;
    pub(super) const AVX512_VECTORS: usize = 2;

    #[target_feature(enable = "avx2,fma")]
    pub(super) unsafe fn avx2_tile(
        kc: usize,
        a: *const f32,
        strides: (usize, usize),
        b: (*const f32, usize),
        c: *mut f32,
        ldc: usize,
        load: bool,
    ) {
        tile::<Ymm, AVX2_ROWS, AVX2_VECTORS>(kc, a, strides, b, c, ldc, load)
    }

    #[target_feature(enable = "avx512f")]
    pub(super) unsafe fn avx512_tile(
        kc: usize,
        a: *const f32,
        strides: (usize, usize),
        b: (*const f32, usize),
        c: *mut f32,
        ldc: usize,
        load: bool,
    ) {
        tile::<Zmm, AVX512_ROWS, AVX512_VECTORS>(kc, a, strides, b, c, ldc, load)
    }
}

#[cfg(target_arch = "aarch64")]
mod arm {
    use super::{tile, Lanes};
    use std::arch::aarch64::*;

    /// Four f32 lanes in one Advanced SIMD register; `vfmaq_f32(acc, a, b)` is acc + a b with one
    /// rounding, lane by lane.
    #[derive(Clone, Copy)]
    pub(super) struct Quad(float32x4_t);

    impl Lanes for Quad {
        type Elem = f32;
        const WIDTH: usize = 4;
        #[inline]
        #[target_feature(enable = "neon")]
        unsafe fn zero() -> Self {
            Quad(vdupq_n_f32(0.0))
        }
        #[inline]
        #[target_feature(enable = "neon")]
        unsafe fn splat(x: f32) -> Self {
            Quad(vdupq_n_f32(x))
        }
        #[inline]
        #[target_feature(enable = "neon")]
        unsafe fn load(p: *const f32) -> Self {
            Quad(vld1q_f32(p))
        }
        #[inline]
        #[target_feature(enable = "neon")]
        unsafe fn store(self, p: *mut f32) {
            vst1q_f32(p, self.0)
        }
        #[inline]
        #[target_feature(enable = "neon")]
        unsafe fn fma(a: Self, b: Self, acc: Self) -> Self {
            Quad(vfmaq_f32(acc.0, a.0, b.0))
        }
    }

    /// One lane with the scalar fused multiply-add instruction (`fmadd`, part of every aarch64
    /// CPU: `f32::mul_add` compiles to it).
    #[derive(Clone, Copy)]
    pub(super) struct Fmadd(f32);

    impl Lanes for Fmadd {
        type Elem = f32;
        const WIDTH: usize = 1;
        #[inline]
        unsafe fn zero() -> Self {
            Fmadd(0.0)
        }
        #[inline]
        unsafe fn splat(x: f32) -> Self {
            Fmadd(x)
        }
        #[inline]
        unsafe fn load(p: *const f32) -> Self {
            Fmadd(*p)
        }
        #[inline]
        unsafe fn store(self, p: *mut f32) {
            *p = self.0
        }
        #[inline]
        unsafe fn fma(a: Self, b: Self, acc: Self) -> Self {
            Fmadd(a.0.mul_add(b.0, acc.0))
        }
    }

    pub(super) const ROWS: usize = 8;
    pub(super) const VECTORS: usize = 2;
    pub(super) const ALONG_ROWS: usize = 8;
    pub(super) const ACROSS_VECTORS: usize = 4;

    #[target_feature(enable = "neon")]
    pub(super) unsafe fn neon_tile(
        kc: usize,
        a: *const f32,
        strides: (usize, usize),
        b: (*const f32, usize),
        c: *mut f32,
        ldc: usize,
        load: bool,
    ) {
        tile::<Quad, ROWS, VECTORS>(kc, a, strides, b, c, ldc, load)
    }

    #[target_feature(enable = "neon")]
    pub(super) unsafe fn neon_across(k: usize, mat: *const f32, step: usize, x: *const f32, out: *mut f32, load: bool) {
        super::across::<Quad, ACROSS_VECTORS>(k, mat, step, x, out, load)
    }

    pub(super) unsafe fn fmadd_along(k: usize, mat: *const f32, stride: usize, x: *const f32, out: *mut f32, load: bool) {
        super::along::<Fmadd, ALONG_ROWS>(k, mat, stride, x, out, load)
    }

    pub(super) unsafe fn fmadd_one(k: usize, mat: *const f32, step: usize, x: *const f32, out: *mut f32, load: bool) {
        super::chain::<Fmadd>(k, mat, step, x, out, load)
    }
}

/// The f32 kernels of `level`. Callers check that the CPU runs the level ([`Level::available`]).
pub(crate) fn f32_kernels(level: Level) -> Kernels<f32> {
    match level {
        Level::Scalar => scalar::<f32>(),
        #[cfg(target_arch = "x86_64")]
        Level::Avx2 => Kernels {
            tile: Tile { rows: x86::AVX2_ROWS, cols: x86::AVX2_VECTORS * 8, compute: x86::avx2_tile },
            across: x86::avx2_across,
            across_width: x86::ACROSS_VECTORS * 8,
            along: x86::avx2_along,
            along_rows: x86::AVX2_ALONG_ROWS,
            along_few: x86::fma_along,
            along_few_rows: x86::ALONG_ROWS,
            one: x86::fma_one,
        },
        #[cfg(target_arch = "x86_64")]
        Level::Avx512 => Kernels {
            tile: Tile { rows: x86::AVX512_ROWS, cols: x86::AVX512_VECTORS * 16, compute: x86::avx512_tile },
            across: x86::avx512_across,
            across_width: x86::ACROSS_VECTORS * 16,
            along: x86::avx512_along,
            along_rows: x86::AVX512_ALONG_ROWS,
            along_few: x86::fma_along,
            along_few_rows: x86::ALONG_ROWS,
            one: x86::fma_one,
        },
        #[cfg(target_arch = "aarch64")]
        Level::Neon => Kernels {
            tile: Tile { rows: arm::ROWS, cols: arm::VECTORS * 4, compute: arm::neon_tile },
            across: arm::neon_across,
            across_width: arm::ACROSS_VECTORS * 4,
            along: arm::fmadd_along,
            along_rows: arm::ALONG_ROWS,
            along_few: arm::fmadd_along,
            along_few_rows: arm::ALONG_ROWS,
            one: arm::fmadd_one,
        },
        // Levels of another architecture are never available here (`Level::available`).
        #[allow(unreachable_patterns)]
        _ => scalar::<f32>(),
    }
}
