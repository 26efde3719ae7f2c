//! Real-signal FFTs of even length N on an N/2-point complex FFT, with split spectra and
//! plans shared by every thread of the process.
//!
//! A real signal of even length N is held *packed*: sample `2i` in `re` and `2i + 1` in `im`
//! of element `i` of an N/2-element complex buffer, which is what the half-length complex
//! transform takes, so no copy (and no reinterpretation of memory) is needed; [`get`] and
//! [`set`] address single samples. Spectra (bins 0 to N/2) are held *split*, real and
//! imaginary parts in two arrays, so that the per-bin products that follow a transform are
//! plain element-wise loops the compiler vectorises.
//!
//! The recombination of the half-length transform into the real spectrum (and back) repeats,
//! operation for operation, that of the `realfft` crate, so results are the same to the
//! bit; it runs over fixed-size blocks, which vectorise (the crate's loop over interleaved
//! pairs did not, and took a third of a 64 800-point transform).
//!
//! Normalisation follows [`crate::dsp`]: both directions unnormalised.

use realfft::num_complex::Complex;
use rustfft::{Fft, FftNum, FftPlanner};
use std::collections::HashMap;
use std::sync::{Arc, Mutex, OnceLock};

/// Bin pairs per block of the recombination loops.
const BLOCK: usize = 8;

/// Sample `i` of a packed real signal.
#[inline]
pub fn get<T: Copy>(packed: &[Complex<T>], i: usize) -> T {
    let c = &packed[i >> 1];
    if i & 1 == 0 {
        c.re
    } else {
        c.im
    }
}

/// Set sample `i` of a packed real signal.
#[inline]
pub fn set<T>(packed: &mut [Complex<T>], i: usize, v: T) {
    let c = &mut packed[i >> 1];
    if i & 1 == 0 {
        c.re = v;
    } else {
        c.im = v;
    }
}

/// Process-wide cache of complex plans of one float type, by (length, inverse).
type PlanCache<T> = Mutex<HashMap<(usize, bool), Arc<dyn Fft<T>>>>;

/// Float types the real FFT is built for (f32 and f64), each with its plan cache.
pub trait RealFftNum: FftNum {
    /// The process-wide plan cache of this type.
    fn cache() -> &'static PlanCache<Self>;
}

macro_rules! cache_for {
    ($t:ty) => {
        impl RealFftNum for $t {
            fn cache() -> &'static PlanCache<$t> {
                static CACHE: OnceLock<PlanCache<$t>> = OnceLock::new();
                CACHE.get_or_init(|| Mutex::new(HashMap::new()))
            }
        }
    };
}
cache_for!(f32);
cache_for!(f64);

/// A complex FFT plan of `len` points from the process-wide cache: planning one size takes
/// milliseconds, and every analyzer of a batch (one per thread) shares the plans.
pub fn complex_plan<T: RealFftNum>(len: usize, inverse: bool) -> Arc<dyn Fft<T>> {
    let mut cache = T::cache().lock().unwrap_or_else(|p| p.into_inner());
    Arc::clone(cache.entry((len, inverse)).or_insert_with(|| {
        let mut planner = FftPlanner::<T>::new();
        if inverse {
            planner.plan_fft_inverse(len)
        } else {
            planner.plan_fft_forward(len)
        }
    }))
}

/// Twiddle `index` of an `fft_len`-point real transform, computed as `realfft` does.
fn twiddle<T: FftNum>(index: usize, fft_len: usize) -> Complex<T> {
    let angle = -2f64 * std::f64::consts::PI / fft_len as f64 * index as f64;
    Complex {
        re: T::from_f64(angle.cos()).expect("finite"),
        im: T::from_f64(angle.sin()).expect("finite"),
    }
}

/// Work space of one [`RealFft`]: the half-length complex buffer and the plan's scratch.
/// One per thread (the transform itself is shared).
pub struct FftScratch<T> {
    z: Vec<Complex<T>>,
    scratch: Vec<Complex<T>>,
    /// Odd lengths only: the signal unpacked.
    real: Vec<T>,
}

/// Odd lengths, which cannot be packed in pairs: the `realfft` crate's transforms, with the
/// signal unpacked into [`FftScratch::real`] around them.
struct OddPlans<T> {
    fwd: Arc<dyn realfft::RealToComplex<T>>,
    inv: Arc<dyn realfft::ComplexToReal<T>>,
}

/// Forward and inverse real FFT of one length. `Send + Sync`: one value serves any number
/// of threads, each with its own buffers and [`FftScratch`].
pub struct RealFft<T: RealFftNum> {
    n: usize,
    fwd: Arc<dyn Fft<T>>,
    inv: Arc<dyn Fft<T>>,
    /// Forward recombination twiddles (halved), split, for pair j at index j − 1.
    tw_fwd: (Vec<T>, Vec<T>),
    /// Inverse recombination twiddles (conjugated), split, likewise.
    tw_inv: (Vec<T>, Vec<T>),
    odd: Option<OddPlans<T>>,
}

impl<T: RealFftNum> RealFft<T> {
    /// Plans for real signals of `n` ≥ 4 samples (even lengths take the fast path).
    pub fn new(n: usize) -> Self {
        assert!(n >= 4, "real FFT length {n} must be ≥ 4");
        let odd = (!n.is_multiple_of(2)).then(|| {
            let mut planner = realfft::RealFftPlanner::<T>::new();
            OddPlans {
                fwd: planner.plan_fft_forward(n),
                inv: planner.plan_fft_inverse(n),
            }
        });
        let half = T::from_f64(0.5).expect("finite");
        let pairs = (n / 2 - 1) / 2;
        let fwd: Vec<Complex<T>> = (1..=pairs).map(|i| twiddle::<T>(i, n) * half).collect();
        let inv: Vec<Complex<T>> = (1..=pairs).map(|i| twiddle::<T>(i, n).conj()).collect();
        let split = |v: &[Complex<T>]| {
            (
                v.iter().map(|c| c.re).collect(),
                v.iter().map(|c| c.im).collect(),
            )
        };
        RealFft {
            n,
            fwd: complex_plan::<T>(n / 2, false),
            inv: complex_plan::<T>(n / 2, true),
            tw_fwd: split(&fwd),
            tw_inv: split(&inv),
            odd,
        }
    }

    /// Signal length N.
    pub fn len(&self) -> usize {
        self.n
    }

    /// Always false (N ≥ 4); for clippy's `len_without_is_empty`.
    pub fn is_empty(&self) -> bool {
        false
    }

    /// Number of spectrum bins, N/2 + 1 (0 Hz to Nyquist).
    pub fn n_bins(&self) -> usize {
        self.n / 2 + 1
    }

    /// A zeroed packed time buffer (⌈N/2⌉ elements; for odd N the last imaginary part is
    /// unused).
    pub fn make_time(&self) -> Vec<Complex<T>> {
        vec![Complex::new(T::zero(), T::zero()); self.n.div_ceil(2)]
    }

    /// A zeroed split-spectrum array (N/2 + 1 values; one for the real, one for the
    /// imaginary parts).
    pub fn make_bins(&self) -> Vec<T> {
        vec![T::zero(); self.n / 2 + 1]
    }

    /// Work space for both directions.
    pub fn make_scratch(&self) -> FftScratch<T> {
        let mut len = self
            .fwd
            .get_immutable_scratch_len()
            .max(self.inv.get_outofplace_scratch_len());
        let mut real = Vec::new();
        let mut z = self.make_time();
        if let Some(o) = &self.odd {
            len = len
                .max(o.fwd.get_scratch_len())
                .max(o.inv.get_scratch_len());
            real = vec![T::zero(); self.n];
            z = self
                .make_bins()
                .iter()
                .map(|_| Complex::new(T::zero(), T::zero()))
                .collect();
        }
        FftScratch {
            z,
            scratch: vec![Complex::new(T::zero(), T::zero()); len],
            real,
        }
    }

    /// Spectrum of the packed real signal `time` (left as it was) into `re`, `im` (N/2 + 1
    /// bins each).
    pub fn forward(&self, time: &[Complex<T>], re: &mut [T], im: &mut [T], ws: &mut FftScratch<T>) {
        let n2 = self.n / 2;
        assert!(time.len() == self.n.div_ceil(2) && re.len() == n2 + 1 && im.len() == n2 + 1);
        if let Some(o) = &self.odd {
            for (i, v) in ws.real.iter_mut().enumerate() {
                *v = get(time, i);
            }
            o.fwd
                .process_with_scratch(&mut ws.real, &mut ws.z, &mut ws.scratch)
                .expect("buffer lengths come from the same plan");
            for ((r, i), c) in re.iter_mut().zip(im.iter_mut()).zip(&ws.z) {
                (*r, *i) = (c.re, c.im);
            }
            return;
        }
        let s = self.fwd.get_immutable_scratch_len();
        self.fwd
            .process_immutable_with_scratch(time, &mut ws.z, &mut ws.scratch[..s]);
        let z = &ws.z;
        let (d, ny) = dc_nyquist(z[0]);
        (re[0], im[0], re[n2], im[n2]) = (d.re, d.im, ny.re, ny.im);
        let (tr, ti) = (&self.tw_fwd.0, &self.tw_fwd.1);
        let pairs = tr.len();
        let blocks = pairs / BLOCK;
        for b in 0..blocks {
            let j0 = 1 + b * BLOCK;
            let r0 = n2 - j0 - (BLOCK - 1);
            let (lo, hi) = post_block(
                &z[j0..j0 + BLOCK],
                &z[r0..r0 + BLOCK],
                &tr[j0 - 1..],
                &ti[j0 - 1..],
            );
            re[j0..j0 + BLOCK].copy_from_slice(&lo.0);
            im[j0..j0 + BLOCK].copy_from_slice(&lo.1);
            re[r0..r0 + BLOCK].copy_from_slice(&hi.0);
            im[r0..r0 + BLOCK].copy_from_slice(&hi.1);
        }
        for j in 1 + blocks * BLOCK..=pairs {
            let (a, b) = post_pair(z[j], z[n2 - j], tr[j - 1], ti[j - 1]);
            (re[j], im[j], re[n2 - j], im[n2 - j]) = (a.re, a.im, b.re, b.im);
        }
        if n2.is_multiple_of(2) {
            let c = n2 / 2;
            (re[c], im[c]) = (z[c].re, -z[c].im);
        }
    }

    /// Packed real signal (⌈N/2⌉ elements) of the spectrum `re`, `im` (N/2 + 1 bins
    /// each). The imaginary parts of the first and last bins are taken as zero (for even N,
    /// DC and Nyquist, which a real signal's spectrum has real).
    pub fn inverse(&self, re: &[T], im: &[T], time: &mut [Complex<T>], ws: &mut FftScratch<T>) {
        let n2 = self.n / 2;
        assert!(time.len() == self.n.div_ceil(2) && re.len() == n2 + 1 && im.len() == n2 + 1);
        if let Some(o) = &self.odd {
            for ((c, &r), &i) in ws.z.iter_mut().zip(re).zip(im) {
                *c = Complex::new(r, i);
            }
            ws.z[0].im = T::zero();
            ws.z[n2].im = T::zero();
            o.inv
                .process_with_scratch(&mut ws.z, &mut ws.real, &mut ws.scratch)
                .expect("buffer lengths come from the same plan");
            for (i, &v) in ws.real.iter().enumerate() {
                set(time, i, v);
            }
            return;
        }
        let z = &mut ws.z;
        z[0] = pre_dc(re[0], re[n2]);
        let (tr, ti) = (&self.tw_inv.0, &self.tw_inv.1);
        let pairs = tr.len();
        let blocks = pairs / BLOCK;
        for b in 0..blocks {
            let j0 = 1 + b * BLOCK;
            let r0 = n2 - j0 - (BLOCK - 1);
            let lo = (block_of(&re[j0..]), block_of(&im[j0..]));
            let hi = (block_of(&re[r0..]), block_of(&im[r0..]));
            let (zl, zh) = pre_block(&lo, &hi, &tr[j0 - 1..], &ti[j0 - 1..]);
            z[j0..j0 + BLOCK].copy_from_slice(&zl);
            z[r0..r0 + BLOCK].copy_from_slice(&zh);
        }
        for j in 1 + blocks * BLOCK..=pairs {
            let a = Complex::new(re[j], im[j]);
            let b = Complex::new(re[n2 - j], im[n2 - j]);
            (z[j], z[n2 - j]) = pre_pair(a, b, tr[j - 1], ti[j - 1]);
        }
        if n2.is_multiple_of(2) {
            let c = n2 / 2;
            z[c] = pre_centre(Complex::new(re[c], im[c]));
        }
        let s = self.inv.get_outofplace_scratch_len();
        self.inv
            .process_outofplace_with_scratch(z, time, &mut ws.scratch[..s]);
    }

    /// `inverse(map(forward(time)))` into `out`, in one pass over the spectrum, which is
    /// never stored whole: `map(k0, re, im)` replaces the bins `k0..k0 + re.len()` (given
    /// split) by what is to be transformed back; it sees every bin from 0 to N/2 once, in
    /// runs of up to a few bins, and may keep what it is given. The results are those of
    /// [`RealFft::forward`], the map, and [`RealFft::inverse`], to the bit.
    pub fn forward_map_inverse<F>(
        &self,
        time: &[Complex<T>],
        out: &mut [Complex<T>],
        ws: &mut FftScratch<T>,
        mut map: F,
    ) where
        F: FnMut(usize, &mut [T], &mut [T]),
    {
        let n2 = self.n / 2;
        assert!(time.len() == self.n.div_ceil(2) && out.len() == time.len());
        if self.odd.is_some() {
            let (mut re, mut im) = (self.make_bins(), self.make_bins());
            self.forward(time, &mut re, &mut im, ws);
            for (k0, (r, i)) in re.chunks_mut(BLOCK).zip(im.chunks_mut(BLOCK)).enumerate() {
                map(k0 * BLOCK, r, i);
            }
            self.inverse(&re, &im, out, ws);
            return;
        }
        let s = self.fwd.get_immutable_scratch_len();
        self.fwd
            .process_immutable_with_scratch(time, &mut ws.z, &mut ws.scratch[..s]);
        let z = &mut ws.z;
        let (d, ny) = dc_nyquist(z[0]);
        let (mut dr, mut di, mut nr, mut ni) = ([d.re], [d.im], [ny.re], [ny.im]);
        map(0, &mut dr, &mut di);
        map(n2, &mut nr, &mut ni);
        z[0] = pre_dc(dr[0], nr[0]);
        let (tf_r, tf_i) = (&self.tw_fwd.0, &self.tw_fwd.1);
        let (ti_r, ti_i) = (&self.tw_inv.0, &self.tw_inv.1);
        let pairs = tf_r.len();
        let blocks = pairs / BLOCK;
        for b in 0..blocks {
            let j0 = 1 + b * BLOCK;
            let r0 = n2 - j0 - (BLOCK - 1);
            let (mut lo, mut hi) = post_block(
                &z[j0..j0 + BLOCK],
                &z[r0..r0 + BLOCK],
                &tf_r[j0 - 1..],
                &tf_i[j0 - 1..],
            );
            map(j0, &mut lo.0, &mut lo.1);
            map(r0, &mut hi.0, &mut hi.1);
            let (zl, zh) = pre_block(&lo, &hi, &ti_r[j0 - 1..], &ti_i[j0 - 1..]);
            z[j0..j0 + BLOCK].copy_from_slice(&zl);
            z[r0..r0 + BLOCK].copy_from_slice(&zh);
        }
        for j in 1 + blocks * BLOCK..=pairs {
            let (a, b) = post_pair(z[j], z[n2 - j], tf_r[j - 1], tf_i[j - 1]);
            let (mut ar, mut ai, mut br, mut bi) = ([a.re], [a.im], [b.re], [b.im]);
            map(j, &mut ar, &mut ai);
            map(n2 - j, &mut br, &mut bi);
            let (a, b) = (Complex::new(ar[0], ai[0]), Complex::new(br[0], bi[0]));
            (z[j], z[n2 - j]) = pre_pair(a, b, ti_r[j - 1], ti_i[j - 1]);
        }
        if n2.is_multiple_of(2) {
            let c = n2 / 2;
            let (mut cr, mut ci) = ([z[c].re], [-z[c].im]);
            map(c, &mut cr, &mut ci);
            z[c] = pre_centre(Complex::new(cr[0], ci[0]));
        }
        let s = self.inv.get_outofplace_scratch_len();
        self.inv
            .process_outofplace_with_scratch(z, out, &mut ws.scratch[..s]);
    }
}

/// A block of split values, real parts then imaginary parts.
type Block<T> = ([T; BLOCK], [T; BLOCK]);

/// The first `BLOCK` values of `v`.
#[inline(always)]
fn block_of<T: Copy>(v: &[T]) -> [T; BLOCK] {
    v[..BLOCK].try_into().expect("a whole block")
}

/// DC and Nyquist bins from the first element of the half-length transform.
#[inline(always)]
fn dc_nyquist<T: FftNum>(z0: Complex<T>) -> (Complex<T>, Complex<T>) {
    (
        Complex::new(z0.re + z0.im, T::zero()),
        Complex::new(z0.re - z0.im, T::zero()),
    )
}

/// Bins j and n2 − j of the real spectrum from elements j and n2 − j of the half-length
/// transform and the halved twiddle of j (the `realfft` crate's operations).
#[inline(always)]
fn post_pair<T: FftNum>(a: Complex<T>, b: Complex<T>, tr: T, ti: T) -> (Complex<T>, Complex<T>) {
    let h = T::from_f64(0.5).expect("finite");
    let (sum_re, sum_im) = (a.re + b.re, a.im + b.im);
    let (diff_re, diff_im) = (a.re - b.re, a.im - b.im);
    let half_sum_re = h * sum_re;
    let half_diff_im = h * diff_im;
    let out_tw_re = sum_im * tr + diff_re * ti;
    let out_tw_im = sum_im * ti - diff_re * tr;
    (
        Complex::new(half_sum_re + out_tw_re, half_diff_im + out_tw_im),
        Complex::new(half_sum_re - out_tw_re, out_tw_im - half_diff_im),
    )
}

/// [`post_pair`] over a block: pair i is `za[i]` with `zb[BLOCK − 1 − i]`; both results in
/// ascending bin order. Loaded into lanes first and computed lane by lane (the same
/// operations as [`post_pair`]), which the compiler vectorises.
#[inline(always)]
fn post_block<T: FftNum>(
    za: &[Complex<T>],
    zb: &[Complex<T>],
    tr: &[T],
    ti: &[T],
) -> (Block<T>, Block<T>) {
    let h = T::from_f64(0.5).expect("finite");
    let zero = [T::zero(); BLOCK];
    let (mut ar, mut ai, mut br, mut bi) = (zero, zero, zero, zero);
    let (tr, ti) = (block_of(tr), block_of(ti));
    for i in 0..BLOCK {
        ar[i] = za[i].re;
        ai[i] = za[i].im;
        br[i] = zb[BLOCK - 1 - i].re;
        bi[i] = zb[BLOCK - 1 - i].im;
    }
    let (mut lo_re, mut lo_im, mut hi_re, mut hi_im) = (zero, zero, zero, zero);
    for i in 0..BLOCK {
        let (sum_re, sum_im) = (ar[i] + br[i], ai[i] + bi[i]);
        let (diff_re, diff_im) = (ar[i] - br[i], ai[i] - bi[i]);
        let half_sum_re = h * sum_re;
        let half_diff_im = h * diff_im;
        let out_tw_re = sum_im * tr[i] + diff_re * ti[i];
        let out_tw_im = sum_im * ti[i] - diff_re * tr[i];
        lo_re[i] = half_sum_re + out_tw_re;
        lo_im[i] = half_diff_im + out_tw_im;
        hi_re[i] = half_sum_re - out_tw_re;
        hi_im[i] = out_tw_im - half_diff_im;
    }
    hi_re.reverse();
    hi_im.reverse();
    ((lo_re, lo_im), (hi_re, hi_im))
}

/// First element of the half-length inverse input from the DC and Nyquist bins (their
/// imaginary parts taken as zero).
#[inline(always)]
fn pre_dc<T: FftNum>(dc_re: T, ny_re: T) -> Complex<T> {
    // `realfft` forms (sum.re − sum.im, diff.re − diff.im) with both imaginary parts +0,
    // and x − (+0) is x exactly, for every x.
    Complex::new(dc_re + ny_re, dc_re - ny_re)
}

/// Elements j and n2 − j of the half-length inverse input from bins j and n2 − j and the
/// conjugated twiddle of j (the `realfft` crate's operations).
#[inline(always)]
fn pre_pair<T: FftNum>(a: Complex<T>, b: Complex<T>, tr: T, ti: T) -> (Complex<T>, Complex<T>) {
    let (sum_re, sum_im) = (a.re + b.re, a.im + b.im);
    let (diff_re, diff_im) = (a.re - b.re, a.im - b.im);
    let out_tw_re = sum_im * tr + diff_re * ti;
    let out_tw_im = sum_im * ti - diff_re * tr;
    (
        Complex::new(sum_re - out_tw_re, diff_im - out_tw_im),
        Complex::new(sum_re + out_tw_re, -out_tw_im - diff_im),
    )
}

/// [`pre_pair`] over a block (`lo` bins ascending from j0, `hi` ascending to n2 − j0), in
/// lanes as [`post_block`].
#[inline(always)]
fn pre_block<T: FftNum>(
    lo: &Block<T>,
    hi: &Block<T>,
    tr: &[T],
    ti: &[T],
) -> ([Complex<T>; BLOCK], [Complex<T>; BLOCK]) {
    let zero = [T::zero(); BLOCK];
    let (tr, ti) = (block_of(tr), block_of(ti));
    let (ar, ai) = (lo.0, lo.1);
    let (mut br, mut bi) = (hi.0, hi.1);
    br.reverse();
    bi.reverse();
    let (mut a_re, mut a_im, mut b_re, mut b_im) = (zero, zero, zero, zero);
    for i in 0..BLOCK {
        let (sum_re, sum_im) = (ar[i] + br[i], ai[i] + bi[i]);
        let (diff_re, diff_im) = (ar[i] - br[i], ai[i] - bi[i]);
        let out_tw_re = sum_im * tr[i] + diff_re * ti[i];
        let out_tw_im = sum_im * ti[i] - diff_re * tr[i];
        a_re[i] = sum_re - out_tw_re;
        a_im[i] = diff_im - out_tw_im;
        b_re[i] = sum_re + out_tw_re;
        b_im[i] = -out_tw_im - diff_im;
    }
    let c0 = Complex::new(T::zero(), T::zero());
    let (mut zl, mut zh) = ([c0; BLOCK], [c0; BLOCK]);
    for i in 0..BLOCK {
        zl[i] = Complex::new(a_re[i], a_im[i]);
        zh[BLOCK - 1 - i] = Complex::new(b_re[i], b_im[i]);
    }
    (zl, zh)
}

/// The centre bin (N/2 even) of the half-length inverse input.
#[inline(always)]
fn pre_centre<T: FftNum>(c: Complex<T>) -> Complex<T> {
    let doubled = c + c;
    doubled.conj()
}

#[cfg(test)]
mod tests {
    use super::*;

    // Against a direct DFT (f64, naive: independent of any FFT library), for the lengths
    // whose pair count leaves a partial block and for N ≡ 2 (mod 4).
    #[test]
    fn forward_and_inverse_match_direct_dft() {
        for n in [4usize, 6, 10, 36, 38, 100, 102, 5, 75, 135] {
            let x: Vec<f64> = (0..n).map(|i| ((i * 37 % 11) as f64 - 5.0) / 3.0).collect();
            let fft = RealFft::<f64>::new(n);
            let mut packed = fft.make_time();
            for (i, &v) in x.iter().enumerate() {
                set(&mut packed, i, v);
            }
            let (mut re, mut im) = (fft.make_bins(), fft.make_bins());
            let mut ws = fft.make_scratch();
            fft.forward(&packed, &mut re, &mut im, &mut ws);
            for k in 0..=n / 2 {
                let mut acc = Complex::new(0.0, 0.0);
                for (i, &v) in x.iter().enumerate() {
                    let a = -2.0 * std::f64::consts::PI * (k * i) as f64 / n as f64;
                    acc += Complex::from_polar(v, a);
                }
                assert!((acc.re - re[k]).abs() < 1e-9, "n={n} k={k}");
                assert!((acc.im - im[k]).abs() < 1e-9, "n={n} k={k}");
            }
            let mut back = fft.make_time();
            fft.inverse(&re, &im, &mut back, &mut ws);
            // Direct inverse DFT of the spectrum as `inverse` reads it (first and last
            // imaginary parts zero; for even N that changes nothing), Hermitian-extended.
            let mut im_read = im.clone();
            im_read[0] = 0.0;
            im_read[n / 2] = 0.0;
            for (i, &v) in x.iter().enumerate() {
                let mut acc = 0.0;
                for k in 0..n {
                    let (r, m) = if k <= n / 2 {
                        (re[k], im_read[k])
                    } else {
                        (re[n - k], -im_read[n - k])
                    };
                    let a = 2.0 * std::f64::consts::PI * (k * i) as f64 / n as f64;
                    acc += r * a.cos() - m * a.sin();
                }
                assert!((get(&back, i) - acc).abs() < 1e-9, "n={n} i={i}");
                if n.is_multiple_of(2) {
                    assert!((get(&back, i) / n as f64 - v).abs() < 1e-12, "n={n} i={i}");
                }
            }
            // The fused pass equals the three steps, to the bit (a per-bin gain here).
            let gain = |k: usize| 1.0 + 0.25 * (k as f64).sin();
            let (mut gr, mut gi) = (re.clone(), im.clone());
            for k in 0..gr.len() {
                (gr[k], gi[k]) = (gr[k] * gain(k), gi[k] * gain(k) - 0.5 * gr[k]);
            }
            let mut want = fft.make_time();
            fft.inverse(&gr, &gi, &mut want, &mut ws);
            let mut got = fft.make_time();
            let mut seen = vec![0usize; re.len()];
            fft.forward_map_inverse(&packed, &mut got, &mut ws, |k0, r, i| {
                for j in 0..r.len() {
                    seen[k0 + j] += 1;
                    (r[j], i[j]) = (r[j] * gain(k0 + j), i[j] * gain(k0 + j) - 0.5 * r[j]);
                }
            });
            assert!(seen.iter().all(|&c| c == 1), "n={n}: {seen:?}");
            assert!(got.iter().zip(&want).all(|(a, b)| a == b), "n={n}");
        }
    }
}
