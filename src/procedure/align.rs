//! Finding where a stimulus sits in a capture.

use crate::analysis::spectrum::{fast_length_up, SpectrumPlanner};
use realfft::num_complex::Complex64;

/// The lag (samples, negative when the capture started after the stimulus file did) that best
/// aligns `reference[start..start + len]` with `capture`, searched over `-start..=max_lag`, by FFT
/// cross-correlation; with the normalised correlation at that lag (1 for a perfect copy).
pub fn find_latency(
    capture: &[f64],
    reference: &[f64],
    start: usize,
    len: usize,
    max_lag: usize,
) -> Option<(isize, f64)> {
    let len = len.min(reference.len().saturating_sub(start));
    if len == 0 {
        return None;
    }
    let r = &reference[start..start + len];
    let c_len = (start + len + max_lag).min(capture.len());
    let c = &capture[..c_len];
    let n = fast_length_up(c_len + len);
    let planner = SpectrumPlanner::new();
    let (fwd, inv) = (planner.forward(n), planner.inverse(n));
    let spec = |x: &[f64]| -> Vec<Complex64> {
        let mut buf = vec![0.0; n];
        buf[..x.len()].copy_from_slice(x);
        let mut out = fwd.make_output_vec();
        fwd.process(&mut buf, &mut out)
            .expect("sizes match the plan");
        out
    };
    let (rs, cs) = (spec(r), spec(c));
    let mut prod: Vec<Complex64> = cs.iter().zip(&rs).map(|(a, b)| a * b.conj()).collect();
    prod[0].im = 0.0;
    if let Some(l) = prod.last_mut() {
        l.im = 0.0;
    }
    let mut corr = vec![0.0; n];
    inv.process(&mut prod, &mut corr)
        .expect("sizes match the plan");
    // corr[k] = sum_i r[i] c[i + k]; lag = k - start.
    let k_max = c_len.saturating_sub(len);
    let (k, v) = corr[..=k_max.min(n - 1)]
        .iter()
        .enumerate()
        .max_by(|a, b| a.1.total_cmp(b.1))?;
    let e_r: f64 = r.iter().map(|v| v * v).sum();
    let e_c: f64 = c[k..(k + len).min(c_len)].iter().map(|v| v * v).sum();
    let rho = v / n as f64 / (e_r * e_c).sqrt().max(1e-300);
    Some((k as isize - start as isize, rho))
}
