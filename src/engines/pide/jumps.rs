//! The jump integral of the Merton PIDE on a uniform log-spot grid.
//!
//! `(J v)(x) = integral v(x + y) f(y) dy`, with `f` the normal density of
//! the log jump size `N(mu_J, delta^2)`. On the grid `x_i = x_0 + i h` the
//! value between nodes is taken as the linear interpolant, so
//! `(J v)_i = sum_m w_m v_{i+m}` with the exact weights
//! `w_m = integral f(y) hat((y - m h) / h) dy` of the hat functions
//! (second order in `h`, and a point-mass jump `delta = 0` is the limit:
//! linear interpolation at `x + mu_J`). Offsets whose weight is below
//! `1e-17` of the total are not stored (the normal tails beyond about
//! 8.5 standard deviations).
//!
//! The sum is a correlation. Nodes `i + m` outside the grid read the
//! asymptotic value the caller supplies (the grid is extended by the
//! kernel's reach on each side, so nothing wraps around); the extended
//! array is correlated with the kernel by a real FFT (`realfft`) of a
//! size at least as long as the extended array (an even length with no
//! prime factor above 5, [`fft_size`]), so the
//! circular convolution equals the linear one at every index that is read.
//! Short kernels (at most [`DIRECT_MAX_TAPS`] offsets) are summed directly.
//!
//! The discrete mean jump `kappa_h = sum_m w_m e^{m h} - 1` is what the
//! drift uses, so the discrete operator keeps the forward exactly in the
//! interior (the martingale condition on the grid).

use crate::normal::{norm_cdf, norm_pdf, norm_sf};
use realfft::num_complex::Complex;
use realfft::{ComplexToReal, RealFftPlanner, RealToComplex};
use std::sync::Arc;

/// Kernels with at most this many offsets are summed directly.
pub const DIRECT_MAX_TAPS: usize = 48;

/// A jump kernel on a grid of spacing `h`, with its FFT plan.
pub struct JumpOperator {
    /// Smallest offset `m_lo` (in grid steps).
    pub m_lo: i64,
    /// Weights `w_{m_lo}, ..., w_{m_hi}`.
    pub weights: Vec<f64>,
    /// `sum_m w_m e^{m h} - 1`.
    pub kappa_h: f64,
    n: usize,
    /// Full-kernel FFT of [`Self::apply`], built on first use.
    fft: Option<FftParts>,
    /// Offsets that can land on the grid from some node,
    /// `max(m_lo, 1 - n) ..= min(m_hi, n - 1)`: the smallest, and their FFT
    /// (`None`: summed directly).
    inner_lo: i64,
    inner_taps: usize,
    inner_fft: Option<FftParts>,
    inner_ext: Vec<f64>,
    /// Prefix sums `sum_{k' < k} w_k'` and `sum_{k' < k} w_k' e^{(m_lo + k') h}`.
    prefix_w: Vec<f64>,
    prefix_e: Vec<f64>,
}

/// Outside nodes `j_a <= j < j_b` (beyond the grid, `j < 0` or `j >= n`)
/// whose value is `a + b e^{x_j}` (the asymptotes are of this form).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OutsidePiece {
    /// First node index.
    pub j_a: i64,
    /// One past the last node index.
    pub j_b: i64,
    /// Constant part.
    pub a: f64,
    /// Coefficient of `e^x`.
    pub b: f64,
}

/// Prefix sums with Neumaier compensation (`out[k] = sum_{i<k} terms_i`).
fn prefix_sums(terms: impl Iterator<Item = f64>) -> Vec<f64> {
    let mut out = vec![0.0];
    let (mut s, mut c) = (0.0f64, 0.0f64);
    for t in terms {
        let u = s + t;
        c += if s.abs() >= t.abs() {
            (s - u) + t
        } else {
            (t - u) + s
        };
        s = u;
        out.push(s + c);
    }
    out
}

struct FftParts {
    size: usize,
    forward: Arc<dyn RealToComplex<f64>>,
    inverse: Arc<dyn ComplexToReal<f64>>,
    kernel_spectrum: Vec<Complex<f64>>,
    buf: Vec<f64>,
    spec: Vec<Complex<f64>>,
    scratch_f: Vec<Complex<f64>>,
    scratch_i: Vec<Complex<f64>>,
}

/// `integral_a^b f(y) dy` and `integral_a^b (y - mu) f(y) dy` for `N(mu, d^2)`.
fn moments(a: f64, b: f64, mu: f64, d: f64) -> (f64, f64) {
    let (za, zb) = ((a - mu) / d, (b - mu) / d);
    let m0 = if za > 0.0 {
        norm_sf(za) - norm_sf(zb)
    } else {
        norm_cdf(zb) - norm_cdf(za)
    };
    (m0, d * (norm_pdf(za) - norm_pdf(zb)))
}

/// [`moments`] over a cell from its end points' `(z, tail, density)`, the
/// tail being `Phi(z)` for `z <= 0` and `1 - Phi(z)` above.
fn moments_at(a: (f64, f64, f64), b: (f64, f64, f64), d: f64) -> (f64, f64) {
    let m0 = if a.0 > 0.0 {
        a.1 - b.1
    } else if b.0 <= 0.0 {
        b.1 - a.1
    } else {
        (1.0 - b.1) - a.1
    };
    (m0, d * (a.2 - b.2))
}

impl JumpOperator {
    /// Builds the kernel for log jumps `N(mean, vol^2)` on spacing `h`, for
    /// a grid of `n` nodes.
    pub fn new(mean: f64, vol: f64, h: f64, n: usize) -> Self {
        let (m_lo, weights) = if vol <= 1e-3 * h {
            // Point mass at mean: linear interpolation between two nodes.
            let f = (mean / h).floor();
            let t = mean / h - f;
            (f as i64, vec![1.0 - t, t])
        } else {
            let lo = ((mean - 9.0 * vol) / h).floor() as i64 - 1;
            let hi = ((mean + 9.0 * vol) / h).ceil() as i64 + 1;
            let mut w = Vec::with_capacity((hi - lo + 1) as usize);
            // The tail probability and density at every node once (each is
            // shared by the two cells beside it).
            let pts: Vec<(f64, f64, f64)> = (lo - 1..=hi + 1)
                .map(|m| {
                    let z = (m as f64 * h - mean) / vol;
                    let tail = if z > 0.0 { norm_sf(z) } else { norm_cdf(z) };
                    (z, tail, norm_pdf(z))
                })
                .collect();
            let cell = |k: usize| moments_at(pts[k], pts[k + 1], vol);
            debug_assert!({
                let y = lo as f64 * h;
                let (a, b) = (cell(1), moments(y, y + h, mean, vol));
                (a.0 - b.0).abs() <= 1e-15 && (a.1 - b.1).abs() <= 1e-15
            });
            for (k, m) in (lo..=hi).enumerate() {
                let y = m as f64 * h;
                let (l0, l1) = cell(k);
                let (r0, r1) = cell(k + 1);
                // (1/h) [ int_{y-h}^{y} f (s - (y-h)) + int_y^{y+h} f ((y+h) - s) ]
                let left = l1 + (mean - (y - h)) * l0;
                let right = (y + h - mean) * r0 - r1;
                w.push(((left + right) / h).max(0.0));
            }
            // Trim offsets that carry nothing.
            let total: f64 = w.iter().sum();
            let first = w.iter().position(|&x| x > 1e-17 * total).unwrap_or(0);
            let last = w.iter().rposition(|&x| x > 1e-17 * total).unwrap_or(0);
            (lo + first as i64, w[first..=last].to_vec())
        };
        let kappa_h = weights
            .iter()
            .enumerate()
            .map(|(k, &w)| w * ((m_lo + k as i64) as f64 * h).exp())
            .sum::<f64>()
            - 1.0;
        let m_hi = m_lo + weights.len() as i64 - 1;
        let inner_lo = m_lo.max(1 - n as i64);
        let inner_hi = m_hi.min(n as i64 - 1);
        let inner_taps = (inner_hi - inner_lo + 1).max(0) as usize;
        let inner = if inner_taps > 0 {
            let k0 = (inner_lo - m_lo) as usize;
            &weights[k0..k0 + inner_taps]
        } else {
            &weights[..0]
        };
        let inner_fft = (inner_taps > DIRECT_MAX_TAPS).then(|| FftParts::new(inner, n));
        let prefix_w = prefix_sums(weights.iter().copied());
        let prefix_e = prefix_sums(
            weights
                .iter()
                .enumerate()
                .map(|(k, &w)| w * ((m_lo + k as i64) as f64 * h).exp()),
        );
        JumpOperator {
            m_lo,
            weights,
            kappa_h,
            n,
            fft: None,
            inner_lo,
            inner_taps,
            inner_fft,
            inner_ext: if inner_taps > DIRECT_MAX_TAPS {
                Vec::new()
            } else {
                vec![0.0; n + inner_taps.max(1) - 1]
            },
            prefix_w,
            prefix_e,
        }
    }

    /// `out_i = (J v)_i` for every node from the grid values `v` and the
    /// outside values given as pieces `a + b e^{x_j}` (`exs[i] = e^{x_i}`
    /// at the grid nodes): the grid part is a correlation with the offsets
    /// that can land on the grid (FFT length about `n + min(taps, 2n)`
    /// instead of `n + taps`), the outside part is closed form from the
    /// prefix sums of `w_m` and `w_m e^{m h}`, `O(n)` per piece.
    pub fn apply_split(
        &mut self,
        v: &[f64],
        exs: &[f64],
        pieces: &[OutsidePiece],
        out: &mut [f64],
    ) {
        let n = self.n;
        debug_assert_eq!(v.len(), n);
        let taps = self.inner_taps;
        if taps == 0 {
            out.iter_mut().for_each(|o| *o = 0.0);
        } else {
            let inner_k0 = (self.inner_lo - self.m_lo) as usize;
            let inner = &self.weights[inner_k0..inner_k0 + taps];
            // ext[k] = v(node k + inner_lo), zero off the grid.
            let len = (n + taps - 1) as i64;
            let k0 = (-self.inner_lo).clamp(0, len) as usize;
            let k1 = (n as i64 - self.inner_lo).clamp(k0 as i64, len) as usize;
            let i0 = (k0 as i64 + self.inner_lo) as usize;
            let grid = &v[i0..i0 + (k1 - k0)];
            match self.inner_fft.as_mut() {
                // Written straight into the transform's buffer.
                Some(f) => f.correlate_padded(k0, grid, taps, out),
                None => {
                    let ext = &mut self.inner_ext;
                    ext[..k0].iter_mut().for_each(|x| *x = 0.0);
                    ext[k1..].iter_mut().for_each(|x| *x = 0.0);
                    ext[k0..k1].copy_from_slice(grid);
                    for (i, o) in out.iter_mut().enumerate() {
                        *o = ext[i..i + taps].iter().zip(inner).map(|(a, b)| a * b).sum();
                    }
                }
            }
        }
        let (m_lo, m_end) = (self.m_lo, self.m_lo + self.weights.len() as i64);
        for p in pieces {
            if p.a == 0.0 && p.b == 0.0 {
                continue;
            }
            for (i, (o, &ex)) in out.iter_mut().zip(exs).enumerate() {
                let ma = (p.j_a - i as i64).max(m_lo);
                let mb = (p.j_b - i as i64).min(m_end);
                if ma < mb {
                    let (ka, kb) = ((ma - m_lo) as usize, (mb - m_lo) as usize);
                    *o += p.a * (self.prefix_w[kb] - self.prefix_w[ka])
                        + p.b * ex * (self.prefix_e[kb] - self.prefix_e[ka]);
                }
            }
        }
    }

    /// `out_i = (J v)_i` for every node; `ext` must hold the values at
    /// nodes `m_lo .. n - 1 + m_hi` (the grid extended by the outside
    /// values), i.e. `ext[j] = v(x_{j + m_lo})`, length `n + taps - 1`.
    pub fn apply(&mut self, ext: &[f64], out: &mut [f64]) {
        let taps = self.weights.len();
        debug_assert_eq!(ext.len(), self.n + taps - 1);
        if taps > DIRECT_MAX_TAPS && self.fft.is_none() {
            self.fft = Some(FftParts::new(&self.weights, self.n));
        }
        match self.fft.as_mut() {
            None => {
                for (i, o) in out.iter_mut().enumerate() {
                    let row = &ext[i..i + taps];
                    *o = row.iter().zip(&self.weights).map(|(a, b)| a * b).sum();
                }
            }
            Some(f) => f.correlate(ext, taps, out),
        }
    }
}

/// The smallest even length `>= len` with no prime factor above 5 (the
/// FFT is as fast per point at such lengths, and the padding is at most a
/// few per cent instead of up to half for a power of two).
pub fn fft_size(len: usize) -> usize {
    let mut best = len.max(2).next_power_of_two();
    let mut p5 = 2usize;
    while p5 < best {
        let mut p35 = p5;
        while p35 < best {
            let mut m = p35;
            while m < len {
                m *= 2;
            }
            best = best.min(m);
            p35 *= 3;
        }
        p5 *= 5;
    }
    best
}

impl FftParts {
    fn new(weights: &[f64], n: usize) -> Self {
        let taps = weights.len();
        let size = fft_size(n + taps - 1);
        let mut planner = RealFftPlanner::<f64>::new();
        let forward = planner.plan_fft_forward(size);
        let inverse = planner.plan_fft_inverse(size);
        let mut buf = vec![0.0; size];
        // Reversed kernel, so the convolution is the correlation.
        for (k, &w) in weights.iter().enumerate() {
            buf[taps - 1 - k] = w / size as f64;
        }
        let mut kernel_spectrum = forward.make_output_vec();
        let mut scratch_f = forward.make_scratch_vec();
        forward
            .process_with_scratch(&mut buf, &mut kernel_spectrum, &mut scratch_f)
            .expect("FFT sizes are fixed at plan time");
        let spec = forward.make_output_vec();
        let scratch_i = inverse.make_scratch_vec();
        FftParts {
            size,
            forward,
            inverse,
            kernel_spectrum,
            buf,
            spec,
            scratch_f,
            scratch_i,
        }
    }

    /// [`Self::correlate`] of the array that is `vals` from index `at` and
    /// zero elsewhere.
    fn correlate_padded(&mut self, at: usize, vals: &[f64], taps: usize, out: &mut [f64]) {
        self.buf[..at].iter_mut().for_each(|x| *x = 0.0);
        self.buf[at..at + vals.len()].copy_from_slice(vals);
        self.buf[at + vals.len()..]
            .iter_mut()
            .for_each(|x| *x = 0.0);
        self.transform(taps, out);
    }

    fn correlate(&mut self, ext: &[f64], taps: usize, out: &mut [f64]) {
        self.buf[..ext.len()].copy_from_slice(ext);
        self.buf[ext.len()..].iter_mut().for_each(|x| *x = 0.0);
        self.transform(taps, out);
    }

    fn transform(&mut self, taps: usize, out: &mut [f64]) {
        self.forward
            .process_with_scratch(&mut self.buf, &mut self.spec, &mut self.scratch_f)
            .expect("FFT sizes are fixed at plan time");
        for (s, k) in self.spec.iter_mut().zip(&self.kernel_spectrum) {
            *s *= k;
        }
        self.inverse
            .process_with_scratch(&mut self.spec, &mut self.buf, &mut self.scratch_i)
            .expect("FFT sizes are fixed at plan time");
        debug_assert!(self.size % 2 == 0);
        out.copy_from_slice(&self.buf[taps - 1..taps - 1 + out.len()]);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn weights_integrate_the_normal_law() {
        // Mass 1 and mean mu_J (hat functions reproduce linear functions exactly).
        let (mu, d, h) = (-0.3, 0.2, 0.01);
        let op = JumpOperator::new(mu, d, h, 64);
        let mass: f64 = op.weights.iter().sum();
        let mean: f64 = op
            .weights
            .iter()
            .enumerate()
            .map(|(k, w)| w * (op.m_lo + k as i64) as f64 * h)
            .sum();
        assert!((mass - 1.0).abs() < 1e-14, "{mass}");
        assert!((mean - mu).abs() < 1e-13, "{mean}");
        // kappa_h is within O(h^2) of exp(mu + d^2/2) - 1 (identity of the law).
        let k = (mu + 0.5 * d * d).exp_m1();
        assert!((op.kappa_h - k).abs() < h * h, "{} vs {k}", op.kappa_h);
    }

    #[test]
    fn fft_sizes_are_short_even_5_smooth_lengths() {
        for len in [1usize, 2, 3, 7, 100, 1025, 4937, 16385] {
            let s = fft_size(len);
            let mut m = s / 2;
            for p in [2, 3, 5] {
                while m % p == 0 {
                    m /= p;
                }
            }
            assert!(s >= len && s % 2 == 0 && m == 1, "{len} -> {s}");
            // No smaller even 5-smooth length fits (checked by brute force).
            let smooth = |mut x: usize| {
                for p in [2, 3, 5] {
                    while x % p == 0 {
                        x /= p;
                    }
                }
                x == 1
            };
            assert!((len..s).all(|x| x % 2 == 1 || !smooth(x)), "{len} -> {s}");
        }
    }

    #[test]
    fn split_sum_equals_the_full_extended_sum() {
        // Kernels wider than the grid, shifted both ways, short and long.
        for &(mean, vol, n) in &[
            (-0.9, 0.45, 101usize),
            (0.3, 0.2, 64),
            (0.0, 0.02, 300),
            (-0.05, 0.3, 40),
        ] {
            let h = 0.01;
            let mut op = JumpOperator::new(mean, vol, h, n);
            let taps = op.weights.len();
            let x0 = -0.3;
            let x = |j: i64| x0 + j as f64 * h;
            // Outside: a put-like asymptote on the left in two pieces, a
            // constant-plus-exponential on the right.
            let split = -40i64;
            let pieces = [
                OutsidePiece {
                    j_a: op.m_lo.min(0) - 5,
                    j_b: split,
                    a: 1.0,
                    b: -1.0,
                },
                OutsidePiece {
                    j_a: split,
                    j_b: 0,
                    a: 0.97,
                    b: -0.99,
                },
                OutsidePiece {
                    j_a: n as i64,
                    j_b: n as i64 + taps as i64 + 5,
                    a: 0.1,
                    b: 0.02,
                },
            ];
            let outside = |j: i64| {
                pieces
                    .iter()
                    .find(|p| p.j_a <= j && j < p.j_b)
                    .map_or(0.0, |p| p.a + p.b * x(j).exp())
            };
            let v: Vec<f64> = (0..n)
                .map(|i| (i as f64 * 0.37).sin() + 0.01 * i as f64)
                .collect();
            let ext: Vec<f64> = (0..n + taps - 1)
                .map(|k| {
                    let j = k as i64 + op.m_lo;
                    if j >= 0 && (j as usize) < n {
                        v[j as usize]
                    } else {
                        outside(j)
                    }
                })
                .collect();
            let mut full = vec![0.0; n];
            op.apply(&ext, &mut full);
            let exs: Vec<f64> = (0..n as i64).map(|i| x(i).exp()).collect();
            let mut split_out = vec![0.0; n];
            op.apply_split(&v, &exs, &pieces, &mut split_out);
            for (a, b) in full.iter().zip(&split_out) {
                assert!((a - b).abs() < 1e-12, "mean {mean} vol {vol}: {a} vs {b}");
            }
        }
    }

    #[test]
    fn fft_and_direct_sums_agree() {
        let (n, h) = (300, 0.01);
        let mut wide = JumpOperator::new(0.1, 0.3, h, n);
        assert!(wide.weights.len() > DIRECT_MAX_TAPS);
        let taps = wide.weights.len();
        let ext: Vec<f64> = (0..n + taps - 1)
            .map(|j| ((j as f64) * 0.37).sin() + 0.01 * j as f64)
            .collect();
        let mut a = vec![0.0; n];
        wide.apply(&ext, &mut a);
        let direct: Vec<f64> = (0..n)
            .map(|i| (0..taps).map(|k| ext[i + k] * wide.weights[k]).sum())
            .collect();
        for (x, y) in a.iter().zip(&direct) {
            assert!((x - y).abs() < 1e-13, "{x} vs {y}");
        }
    }
}
