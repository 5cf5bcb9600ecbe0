//! Windowed spectra with planned, cached FFTs.
//!
//! Scaling convention for every spectrum in ampnote: `X[k] = sum_n w[n] x[n] exp(-j 2 pi k n / N)`,
//! bins `0..=N/2` (realfft's one-sided output, no normalization). The one-sided power in bin `k`
//! is `2 |X[k]|^2 / (N sum(w^2))` (1x for DC and Nyquist); summed over all bins it gives the mean
//! square of the signal (Parseval), so a sum over a band is the signal's power in that band with
//! the window's noise bandwidth already accounted for.

use super::window::CosineSum;
use realfft::num_complex::Complex64;
use realfft::{RealFftPlanner, RealToComplex};
use std::collections::HashMap;
use std::sync::{Arc, Mutex};

/// Everything needed to take a windowed spectrum of one length: planned once, reused.
pub struct SpectrumPlan {
    pub len: usize,
    pub window: CosineSum,
    pub window_samples: Vec<f64>,
    /// `sum(w^2)`
    pub window_energy: f64,
    fft: Arc<dyn RealToComplex<f64>>,
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

    /// Buffers sized for this plan; reuse them across calls.
    pub fn make_buffers(&self) -> SpectrumBuffers {
        SpectrumBuffers {
            input: vec![0.0; self.len],
            output: vec![Complex64::new(0.0, 0.0); self.bins()],
            scratch: vec![Complex64::new(0.0, 0.0); self.fft.get_scratch_len()],
        }
    }

    /// Window `samples[..len]` after subtracting `offset`, transform, and leave the spectrum in
    /// `buffers.output`.
    pub fn transform(&self, samples: &[f64], offset: f64, buffers: &mut SpectrumBuffers) {
        debug_assert!(samples.len() >= self.len);
        for ((dst, &x), &w) in buffers
            .input
            .iter_mut()
            .zip(&samples[..self.len])
            .zip(&self.window_samples)
        {
            *dst = (x - offset) * w;
        }
        self.fft
            .process_with_scratch(&mut buffers.input, &mut buffers.output, &mut buffers.scratch)
            .expect("buffers come from make_buffers and match the plan");
    }
}

/// Work buffers for one [`SpectrumPlan`].
pub struct SpectrumBuffers {
    pub input: Vec<f64>,
    pub output: Vec<Complex64>,
    pub scratch: Vec<Complex64>,
}

/// Hands out [`SpectrumPlan`]s, one per (window, length), shared between threads.
#[derive(Default)]
pub struct SpectrumPlanner {
    fft: Mutex<RealFftPlanner<f64>>,
    plans: Mutex<HashMap<(&'static str, usize), Arc<SpectrumPlan>>>,
}

impl SpectrumPlanner {
    pub fn new() -> Self {
        Self::default()
    }

    /// The plan for `window` at length `len` (computed on first use).
    pub fn plan(&self, window: CosineSum, len: usize) -> Arc<SpectrumPlan> {
        let key = (window.name, len);
        if let Some(p) = self.plans.lock().expect("planner lock").get(&key) {
            return Arc::clone(p);
        }
        let fft = self.fft.lock().expect("planner lock").plan_fft_forward(len);
        let window_samples = window.samples(len);
        let window_energy = window_samples.iter().map(|w| w * w).sum();
        let plan = Arc::new(SpectrumPlan {
            len,
            window,
            window_samples,
            window_energy,
            fft,
        });
        self.plans
            .lock()
            .expect("planner lock")
            .insert(key, Arc::clone(&plan));
        plan
    }
}

/// The largest even length `<= n` whose only prime factors are 2, 3, 5 and 7, so the FFT runs on
/// RustFFT's fast radix paths. Such lengths are dense (within about 1 % of any `n` above a few
/// thousand), so trimming costs at most a sliver of the capture.
pub fn fast_length(n: usize) -> usize {
    let mut m = n;
    while m > 1 {
        let mut r = m;
        for p in [2, 3, 5, 7] {
            while r % p == 0 {
                r /= p;
            }
        }
        if r == 1 && m % 2 == 0 {
            return m;
        }
        m -= 1;
    }
    m
}
