//! Windowed spectra with planned, cached FFTs.
//!
//! Scaling convention for every spectrum in ampnote: `X[k] = sum_n w[n] x[n] exp(-j 2 pi k n / N)`,
//! bins `0..=N/2` (realfft's one-sided output, no normalization). The one-sided power in bin `k`
//! is `2 |X[k]|^2 / (N sum(w^2))` (1x for DC and Nyquist); summed over all bins it gives the mean
//! square of the signal (Parseval), so a sum over a band is the signal's power in that band with
//! the window's noise bandwidth already accounted for.

use super::window::{CosineSum, WindowGenerator, WINDOW_BLOCK};
use realfft::num_complex::Complex64;
use realfft::{RealFftPlanner, RealToComplex};
use std::collections::HashMap;
use std::sync::{Arc, Mutex};

/// Everything needed to take a windowed spectrum of one length: planned once, reused.
pub struct SpectrumPlan {
    pub len: usize,
    pub window: CosineSum,
    /// Makes the window block by block (it is never stored whole).
    pub window_generator: WindowGenerator,
    /// `sum(w^2)`
    pub window_energy: f64,
    fft: Arc<dyn RealToComplex<f64>>,
    /// Buffers handed back after use, so repeated analyses of one length allocate once.
    pool: Mutex<Vec<SpectrumBuffers>>,
}

impl SpectrumPlan {
    /// Bins in the one-sided spectrum, `N/2 + 1`.
    pub fn bins(&self) -> usize {
        self.len / 2 + 1
    }

    /// Factor turning `|X[k]|^2` into one-sided power (mean square) for bins `1..N/2`.
    pub fn power_scale(&self) -> f64 {
        2.0 / (self.len as f64 * self.window_energy)
    }

    /// Buffers sized for this plan: a pooled set when one is free, else new ones. Hand them back
    /// with [`SpectrumPlan::give_back`].
    pub fn take_buffers(&self) -> SpectrumBuffers {
        if let Some(b) = self.pool.lock().expect("pool lock").pop() {
            return b;
        }
        self.make_buffers()
    }

    /// Return buffers from [`SpectrumPlan::take_buffers`] for the next analysis of this length.
    pub fn give_back(&self, buffers: SpectrumBuffers) {
        self.pool.lock().expect("pool lock").push(buffers);
    }

    /// New buffers sized for this plan.
    pub fn make_buffers(&self) -> SpectrumBuffers {
        SpectrumBuffers {
            input: vec![0.0; self.len],
            output: vec![Complex64::new(0.0, 0.0); self.bins()],
            scratch: vec![Complex64::new(0.0, 0.0); self.fft.get_scratch_len()],
        }
    }

    /// Transform what the caller already placed (windowed) in `buffers.input`; the spectrum lands
    /// in `buffers.output` and `buffers.input` is used as scratch.
    pub fn transform_prepared(&self, buffers: &mut SpectrumBuffers) {
        self.fft
            .process_with_scratch(
                &mut buffers.input,
                &mut buffers.output,
                &mut buffers.scratch,
            )
            .expect("buffers come from make_buffers and match the plan");
    }

    /// Window `samples[..len]` after subtracting `offset`, transform, and leave the spectrum in
    /// `buffers.output`. The window is generated block by block, never stored whole.
    pub fn transform(&self, samples: &[f64], offset: f64, buffers: &mut SpectrumBuffers) {
        debug_assert!(samples.len() >= self.len);
        let mut w = [0.0; WINDOW_BLOCK];
        for (b, (xc, oc)) in samples[..self.len]
            .chunks(WINDOW_BLOCK)
            .zip(buffers.input.chunks_mut(WINDOW_BLOCK))
            .enumerate()
        {
            let w = &mut w[..xc.len()];
            self.window_generator.fill_block(b * WINDOW_BLOCK, w);
            for ((o, &x), &wv) in oc.iter_mut().zip(xc).zip(w.iter()) {
                *o = (x - offset) * wv;
            }
        }
        self.transform_prepared(buffers);
    }
}

/// Work buffers for one [`SpectrumPlan`].
pub struct SpectrumBuffers {
    pub input: Vec<f64>,
    pub output: Vec<Complex64>,
    pub scratch: Vec<Complex64>,
}

/// Hands out [`SpectrumPlan`]s, one per (window, length), and bare real FFT plans, shared between
/// threads; realfft caches its own plans, so asking twice for a length plans once.
#[derive(Default)]
pub struct SpectrumPlanner {
    fft: Mutex<RealFftPlanner<f64>>,
    /// A second planner so two threads can plan at once (inverse transforms, and forward ones
    /// asked for with [`SpectrumPlanner::forward_secondary`]).
    fft_second: Mutex<RealFftPlanner<f64>>,
    plans: Mutex<HashMap<(&'static str, usize), Arc<SpectrumPlan>>>,
    /// Forward plans made by the second planner, by length.
    extra: Mutex<HashMap<usize, Arc<dyn RealToComplex<f64>>>>,
}

impl SpectrumPlanner {
    pub fn new() -> Self {
        Self::default()
    }

    /// A forward real FFT of length `len` (no window).
    pub fn forward(&self, len: usize) -> Arc<dyn RealToComplex<f64>> {
        if let Some(p) = self.extra.lock().expect("planner lock").get(&len) {
            return Arc::clone(p);
        }
        self.fft.lock().expect("planner lock").plan_fft_forward(len)
    }

    /// An inverse real FFT of length `len` (unnormalised: a round trip multiplies by `len`).
    pub fn inverse(&self, len: usize) -> Arc<dyn realfft::ComplexToReal<f64>> {
        self.fft_second
            .lock()
            .expect("planner lock")
            .plan_fft_inverse(len)
    }

    /// A forward real FFT planned by the second planner (to plan on another thread while the
    /// first is busy); later calls to [`SpectrumPlanner::forward`] for the same length reuse it.
    pub fn forward_secondary(&self, len: usize) -> Arc<dyn RealToComplex<f64>> {
        let plan = self
            .fft_second
            .lock()
            .expect("planner lock")
            .plan_fft_forward(len);
        self.extra
            .lock()
            .expect("planner lock")
            .insert(len, Arc::clone(&plan));
        plan
    }

    /// The plan for `window` at length `len` (computed on first use).
    pub fn plan(&self, window: CosineSum, len: usize) -> Arc<SpectrumPlan> {
        let key = (window.name, len);
        if let Some(p) = self.plans.lock().expect("planner lock").get(&key) {
            return Arc::clone(p);
        }
        let fft = self.fft.lock().expect("planner lock").plan_fft_forward(len);
        // sum(w^2) = N * mean square, exact for the periodic cosine-sum form.
        let window_energy = len as f64 * window.mean_square();
        let plan = Arc::new(SpectrumPlan {
            len,
            window,
            window_generator: WindowGenerator::new(window, len),
            window_energy,
            fft,
            pool: Mutex::new(Vec::new()),
        });
        self.plans
            .lock()
            .expect("planner lock")
            .insert(key, Arc::clone(&plan));
        plan
    }
}

/// Even, and no prime factor above 7: a length RustFFT transforms on its fast radix paths.
fn is_fast(m: usize) -> bool {
    let mut r = m;
    for p in [2, 3, 5, 7] {
        while r % p == 0 {
            r /= p;
        }
    }
    r == 1 && m % 2 == 0
}

/// The smallest even length `>= n` whose only prime factors are 2, 3, 5 and 7.
pub fn fast_length_up(n: usize) -> usize {
    (n.max(2)..)
        .find(|&m| is_fast(m))
        .expect("powers of two are fast")
}

/// The largest even length `<= n` whose only prime factors are 2, 3, 5 and 7, so the FFT runs on
/// RustFFT's fast radix paths. Such lengths are dense (within about 1 % of any `n` above a few
/// thousand), so trimming costs at most a sliver of the capture.
pub fn fast_length(n: usize) -> usize {
    (2..=n).rev().find(|&m| is_fast(m)).unwrap_or(n.min(1))
}
