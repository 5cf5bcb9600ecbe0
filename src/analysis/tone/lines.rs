//! Lines in the spectrum: the mains family's fit, and which lines the tone, its harmonics
//! (aliases included) and the mains family explain.

use super::*;

/// The stronger mains family, fitted jointly with the lines already known (`fixed`: the tone and
/// its harmonics, or none in a noise capture).
pub(crate) struct MainsFit {
    pub mains_hz: f64,
    /// (order, bin) of each mains line fitted, in order after the `fixed` lines.
    pub lines: Vec<(usize, f64)>,
    pub fit: LineFit,
}

/// The one mains fit of the tone and the noise analyses: for each candidate mains frequency, its
/// orders 1..=`orders` inside `[half, top]` bins and at least [`GUARD_BINS`] from every fixed
/// line, fitted jointly with the fixed lines; the family whose lines take the more power wins.
/// A family whose own lines crowd each other closer than the guard (a capture too short to
/// part them) is not fitted.
pub(crate) fn fit_mains_family(
    spec: &[Complex64],
    n: usize,
    candidates: &[f64],
    orders: usize,
    bin_hz: f64,
    (half, top): (f64, f64),
    fixed: &[f64],
) -> Option<MainsFit> {
    let mut best: Option<(MainsFit, f64)> = None;
    for &m in candidates {
        let lines: Vec<(usize, f64)> = (1..=orders)
            .map(|o| (o, m * o as f64 / bin_hz))
            .filter(|&(_, f)| {
                f >= half && f <= top && fixed.iter().all(|&t| (t - f).abs() >= GUARD_BINS)
            })
            .collect();
        if lines.windows(2).any(|w| w[1].1 - w[0].1 < GUARD_BINS) {
            continue;
        }
        let mut freqs = fixed.to_vec();
        freqs.extend(lines.iter().map(|l| l.1));
        let Some(fit) = fit_lines(spec, n, &TONE_WINDOW, &freqs) else {
            continue;
        };
        let power: f64 = fit.amplitudes[fixed.len()..]
            .iter()
            .map(|c| c.norm_sqr())
            .sum();
        if best.as_ref().is_none_or(|b| power > b.1) {
            best = Some((
                MainsFit {
                    mains_hz: m,
                    lines,
                    fit,
                },
                power,
            ));
        }
    }
    best.map(|b| b.0)
}

/// Whether a line at `f` Hz, `ratio` (power) below the fundamental, is explained by the tone (a
/// harmonic, or its alias folded back from above Nyquist), the mains family, or hum sidebands on
/// the tone, within `tol` Hz. A harmonic of order n carries at most about 4/(pi n) of the
/// fundamental's amplitude (a square wave, the limit of clipping; Fourier series), so only
/// orders up to 1.3 / sqrt(ratio) can explain a line that strong. Mains lines beyond the 20th
/// order (1 or 1.2 kHz) are not expected as distinct lines (common practice).
pub(super) fn explained(f: f64, ratio: f64, f0: f64, mains: f64, fs: f64, tol: f64) -> bool {
    let max_order = (1.3 / ratio.max(1e-12).sqrt()).min(400.0);
    if near_multiple(f, mains, 20.0, tol) || near_multiple(f, f0, max_order, tol) {
        return true;
    }
    // Hum sidebands: the tone modulated by the supply's ripple.
    let offset = (f - f0).abs();
    if (1..=4).any(|k| (offset - k as f64 * mains).abs() <= tol) {
        return true;
    }
    harmonic_alias(f, f0, fs, (max_order as usize).min(40), tol)
}

/// Whether `f` lies within `tol` of a harmonic of `f0` (order 2 to `orders`) folded down from
/// above Nyquist: |n f0 - m fs| (all in Hz).
pub(super) fn harmonic_alias(f: f64, f0: f64, fs: f64, orders: usize, tol: f64) -> bool {
    (2..=orders).any(|n| {
        let h = n as f64 * f0;
        let folded = (h - (h / fs).round() * fs).abs();
        h > fs / 2.0 && (folded - f).abs() <= tol
    })
}

/// Whether `f` lies within `tol` of a multiple of `of` from the first to the `orders`-th (all in
/// Hz): a harmonic of a tone, or a line of the mains family.
pub(crate) fn near_multiple(f: f64, of: f64, orders: f64, tol: f64) -> bool {
    let k = (f / of).round();
    k >= 1.0 && k <= orders && (f - k * of).abs() <= tol
}

/// The strongest residual bin (spectrum minus every fitted line) in `k_lo..=k_hi` that
/// `explained` does not account for: `(bin, |residual|^2)`.
pub(crate) fn strongest_unexplained_line(
    spec: &[Complex64],
    all: &[(usize, Complex64)],
    k_lo: usize,
    k_hi: usize,
    explained: impl Fn(usize, f64) -> bool,
) -> Option<(usize, f64)> {
    let mut best: Option<(usize, f64)> = None;
    for (k, r) in residuals(spec, all, k_lo, k_hi) {
        let p = r.norm_sqr();
        if best.is_none_or(|b| p > b.1) && !explained(k, p) {
            best = Some((k, p));
        }
    }
    best
}

/// `(k, X[k] - model[k])` for the bins `lo..=hi` (none when `hi < lo`), the model given as
/// sorted `(bin, value)` pairs.
pub(crate) fn residuals<'a>(
    spec: &'a [Complex64],
    model: &'a [(usize, Complex64)],
    lo: usize,
    hi: usize,
) -> impl Iterator<Item = (usize, Complex64)> + 'a {
    let mut mi = model.partition_point(|e| e.0 < lo);
    spec.iter()
        .enumerate()
        .take(hi.saturating_add(1))
        .skip(lo)
        .map(move |(k, &x)| {
            if mi < model.len() && model[mi].0 == k {
                mi += 1;
                (k, x - model[mi - 1].1)
            } else {
                (k, x)
            }
        })
}
