//! Least-squares fitting of sinusoids ("lines") to a windowed spectrum, and the IEEE 1057 sine fit.
//!
//! The steady-tone engine fits every line it knows about (fundamental, harmonics, mains hum) jointly
//! to the bins around it, using the window's exact transform ([`CosineSum::kernel`]). This is the
//! IEEE Std 1057 least-squares sine fit carried out in the frequency domain with a window as weight:
//! for a line of known frequency it returns the same amplitude and phase as the time-domain
//! three-parameter fit, but costs a few hundred operations instead of a pass over the samples, and
//! lines whose main lobes overlap (a hum line near a harmonic) are separated rather than summed.
//! The fundamental's frequency is found by maximising the fitted energy over frequency (the
//! four-parameter fit's criterion). [`sine_fit_time_domain`] is the direct time-domain form, kept as an
//! independent oracle for the tests.

use super::window::CosineSum;
use realfft::num_complex::Complex64;

/// One fitted basis pair: the bins it covers and the window transform there.
struct Basis {
    start: usize,
    /// `(W(k - f) + W(k + f)) / 2` and `j (W(k - f) - W(k + f)) / 2` for `k = start..`.
    re: Vec<Complex64>,
    im: Vec<Complex64>,
}

/// Lines fitted to a spectrum. `amplitudes[i]` is the complex amplitude `C` of line `i` in
/// `x[n] = Re(C exp(j 2 pi f n / N))`, so `|C|` is the peak amplitude and `arg C` the cosine phase at
/// the first analysed sample.
#[derive(Debug, Clone)]
pub struct LineFit {
    pub amplitudes: Vec<Complex64>,
    /// Per line: first bin and the line's fitted spectrum on the bins it covers.
    pub line_models: Vec<(usize, Vec<Complex64>)>,
}

impl LineFit {
    /// `(bin, model value)` for the chosen lines, sorted by bin, overlapping lines summed.
    pub fn sparse_model(&self, lines: impl IntoIterator<Item = usize>) -> Vec<(usize, Complex64)> {
        let mut model: Vec<(usize, Complex64)> = Vec::new();
        for i in lines {
            let (start, vals) = &self.line_models[i];
            model.extend(vals.iter().enumerate().map(|(o, &v)| (start + o, v)));
        }
        model.sort_by_key(|e| e.0);
        model.dedup_by(|later, earlier| {
            if later.0 == earlier.0 {
                earlier.1 += later.1;
                true
            } else {
                false
            }
        });
        model
    }

    /// The model of every line.
    pub fn full_model(&self) -> Vec<(usize, Complex64)> {
        self.sparse_model(0..self.line_models.len())
    }
}

/// Fits lines at `freqs_bins` (fractional bin numbers) to `spec` (one-sided spectrum of a length-`n`
/// transform windowed by `window`). Each line is fitted over its main lobe plus one bin either side;
/// beyond that the 7-term window's sidelobes are below -180 dB. Returns `None` when two lines are
/// too close to separate (the normal equations are not positive definite).
pub fn fit_lines(
    spec: &[Complex64],
    n: usize,
    window: &CosineSum,
    freqs_bins: &[f64],
) -> Option<LineFit> {
    let half = window.main_lobe_half_width() + 1;
    let last_bin = spec.len() - 1;
    let bases: Vec<Basis> = freqs_bins
        .iter()
        .map(|&f| {
            let start = (f.floor() as isize - half as isize).max(0) as usize;
            let end = ((f.ceil() as usize) + half).min(last_bin);
            // The mirror image at -f matters only for lines near DC or Nyquist.
            let near_edge = f < 3.0 * half as f64 || (n as f64 / 2.0 - f) < 3.0 * half as f64;
            let mut re = Vec::with_capacity(end + 1 - start);
            let mut im = Vec::with_capacity(end + 1 - start);
            for k in start..=end {
                let wm = window.kernel(k as f64 - f, n);
                let wp = if near_edge {
                    window.kernel(k as f64 + f, n)
                } else {
                    Complex64::new(0.0, 0.0)
                };
                re.push((wm + wp) * 0.5);
                im.push(Complex64::new(0.0, 1.0) * (wm - wp) * 0.5);
            }
            Basis { start, re, im }
        })
        .collect();

    // Lines whose bins overlap are solved together; separate groups independently, so a long
    // harmonic series costs time in proportion to its length.
    let mut order: Vec<usize> = (0..bases.len()).collect();
    order.sort_by_key(|&i| bases[i].start);
    let mut p = vec![0.0; 2 * bases.len()];
    let mut group: Vec<usize> = Vec::new();
    let mut group_end = 0usize;
    for (pos, &i) in order.iter().enumerate() {
        if !group.is_empty() && bases[i].start >= group_end {
            solve_group(&bases, &group, spec, &mut p)?;
            group.clear();
        }
        group.push(i);
        group_end = group_end.max(bases[i].start + bases[i].re.len());
        if pos == order.len() - 1 {
            solve_group(&bases, &group, spec, &mut p)?;
        }
    }
    let amplitudes: Vec<Complex64> = (0..bases.len())
        .map(|i| Complex64::new(p[2 * i], p[2 * i + 1]))
        .collect();

    let line_models = bases
        .iter()
        .enumerate()
        .map(|(i, basis)| {
            let (u, v) = (p[2 * i], p[2 * i + 1]);
            let vals = basis
                .re
                .iter()
                .zip(&basis.im)
                .map(|(r, q)| r * u + q * v)
                .collect();
            (basis.start, vals)
        })
        .collect();
    Some(LineFit {
        amplitudes,
        line_models,
    })
}

/// Least squares for the lines in `group` (indices into `bases`) over real parameters
/// (Re C, Im C); writes them into `p`.
fn solve_group(bases: &[Basis], group: &[usize], spec: &[Complex64], p: &mut [f64]) -> Option<()> {
    let m = 2 * group.len();
    let mut g = vec![0.0; m * m];
    let mut b = vec![0.0; m];
    for (gi, &i) in group.iter().enumerate() {
        let bi = &bases[i];
        for pi in 0..2 {
            let vi = if pi == 0 { &bi.re } else { &bi.im };
            let row = 2 * gi + pi;
            b[row] = vi
                .iter()
                .enumerate()
                .map(|(o, v)| (v.conj() * spec[bi.start + o]).re)
                .sum();
            for (gj, &j) in group.iter().enumerate() {
                let bj = &bases[j];
                let lo = bi.start.max(bj.start);
                let hi = (bi.start + bi.re.len()).min(bj.start + bj.re.len());
                for pj in 0..2 {
                    let col = 2 * gj + pj;
                    if col < row {
                        continue;
                    }
                    let vj = if pj == 0 { &bj.re } else { &bj.im };
                    let s: f64 = (lo..hi)
                        .map(|k| (vi[k - bi.start].conj() * vj[k - bj.start]).re)
                        .sum();
                    g[row * m + col] = s;
                    g[col * m + row] = s;
                }
            }
        }
    }
    let sol = solve_spd(&mut g, &b, m)?;
    for (gi, &i) in group.iter().enumerate() {
        p[2 * i] = sol[2 * gi];
        p[2 * i + 1] = sol[2 * gi + 1];
    }
    Some(())
}

/// Refines the frequency of the line near `f_init` (bins) by golden-section search over
/// `f_init +/- 1` bin, minimising the residual of a joint fit of that line and `others` (fixed
/// frequencies of nearby lines). Converges to about 1e-9 bin.
pub fn refine_frequency(
    spec: &[Complex64],
    n: usize,
    window: &CosineSum,
    f_init: f64,
    others: &[f64],
) -> f64 {
    let cost = |f: f64| -> f64 {
        let mut freqs = Vec::with_capacity(others.len() + 1);
        freqs.push(f);
        freqs.extend_from_slice(others);
        // Residual over the main line's own bins only, so the criterion does not change with f.
        let half = window.main_lobe_half_width() + 1;
        let lo = (f_init.round() as isize - half as isize - 1).max(0) as usize;
        let hi = ((f_init.round() as usize) + half + 1).min(spec.len() - 1);
        match fit_lines(spec, n, window, &freqs) {
            Some(fit) => {
                let mut e: f64 = (lo..=hi).map(|k| spec[k].norm_sqr()).sum();
                for (k, m) in fit.full_model() {
                    if (lo..=hi).contains(&k) {
                        e += (spec[k] - m).norm_sqr() - spec[k].norm_sqr();
                    }
                }
                e
            }
            None => f64::INFINITY,
        }
    };
    golden_min((f_init - 1.0).max(0.5), f_init + 1.0, 60, 1e-10, cost)
}

/// The minimum of a unimodal `cost` on `[a, b]` by golden-section search (Kiefer 1953): at most
/// `iterations` steps, stopping once the bracket is narrower than `tolerance`.
pub(crate) fn golden_min(
    mut a: f64,
    mut b: f64,
    iterations: usize,
    tolerance: f64,
    mut cost: impl FnMut(f64) -> f64,
) -> f64 {
    let gr = (5f64.sqrt() - 1.0) / 2.0;
    let mut c = b - gr * (b - a);
    let mut d = a + gr * (b - a);
    let (mut fc, mut fd) = (cost(c), cost(d));
    for _ in 0..iterations {
        if (b - a).abs() < tolerance {
            break;
        }
        if fc < fd {
            b = d;
            d = c;
            fd = fc;
            c = b - gr * (b - a);
            fc = cost(c);
        } else {
            a = c;
            c = d;
            fc = fd;
            d = a + gr * (b - a);
            fd = cost(d);
        }
    }
    (a + b) / 2.0
}

/// Solves `G p = b` for symmetric positive definite `G` (row-major, `m x m`) by Cholesky
/// decomposition; `None` when `G` is not positive definite. `G` is overwritten.
pub fn solve_spd(g: &mut [f64], b: &[f64], m: usize) -> Option<Vec<f64>> {
    let scale = (0..m).map(|i| g[i * m + i]).fold(0.0f64, f64::max);
    for j in 0..m {
        let mut d = g[j * m + j];
        for k in 0..j {
            d -= g[j * m + k] * g[j * m + k];
        }
        if d.is_nan() || d <= scale * 1e-12 {
            return None;
        }
        let d = d.sqrt();
        g[j * m + j] = d;
        for i in j + 1..m {
            let mut s = g[i * m + j];
            for k in 0..j {
                s -= g[i * m + k] * g[j * m + k];
            }
            g[i * m + j] = s / d;
        }
    }
    let mut y = b.to_vec();
    for i in 0..m {
        for k in 0..i {
            y[i] -= g[i * m + k] * y[k];
        }
        y[i] /= g[i * m + i];
    }
    for i in (0..m).rev() {
        for k in i + 1..m {
            y[i] -= g[k * m + i] * y[k];
        }
        y[i] /= g[i * m + i];
    }
    Some(y)
}

/// IEEE Std 1057 least-squares sine fit in the time domain, generalised to several known
/// frequencies at once (the three-parameter fit when `freqs` has one entry): finds `A_i, B_i, C`
/// minimising `sum_n (x[n] - sum_i (A_i cos(w_i n) + B_i sin(w_i n)) - C)^2`, with `w_i = 2 pi
/// freqs[i]` (cycles per sample). Returns `([(A_i, B_i)], C)`. Costs `O(N m^2)`: it is the slow,
/// independent check of [`fit_lines`] in the tests, and the engine only where N and m are small
/// (the mains lines in a sweep's fraction of a second of silence).
pub fn sine_fit_time_domain(x: &[f64], freqs: &[f64]) -> Option<(Vec<(f64, f64)>, f64)> {
    let m = 2 * freqs.len() + 1;
    let mut g = vec![0.0f64; m * m];
    let mut b = vec![0.0f64; m];
    let mut r = vec![0.0f64; m];
    for (n, &v) in x.iter().enumerate() {
        for (i, &f) in freqs.iter().enumerate() {
            let (s, c) = (2.0 * std::f64::consts::PI * f * n as f64).sin_cos();
            r[2 * i] = c;
            r[2 * i + 1] = s;
        }
        r[m - 1] = 1.0;
        for i in 0..m {
            b[i] += r[i] * v;
            for j in 0..m {
                g[i * m + j] += r[i] * r[j];
            }
        }
    }
    let p = solve_spd(&mut g, &b, m)?;
    Some((
        (0..freqs.len()).map(|i| (p[2 * i], p[2 * i + 1])).collect(),
        p[m - 1],
    ))
}
