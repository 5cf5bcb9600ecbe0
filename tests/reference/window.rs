//! Window properties against Harris, "On the use of windows for harmonic analysis with the
//! discrete Fourier transform", Proc. IEEE 66(1), 1978, and Heinzel, Ruediger, Schilling,
//! "Spectrum and spectral density estimation by the DFT" (2002), as listed in REFERENCES.md;
//! and the exact transform ampnote fits with, against a direct DTFT sum (slow oracle).

use ampnote::analysis::window::{CosineSum, BLACKMAN_HARRIS_4, BLACKMAN_HARRIS_7, HANN};
use realfft::num_complex::Complex64;

const N: usize = 4096;

fn peak_sidelobe_db(w: &CosineSum) -> f64 {
    let main = w.kernel(0.0, N).norm();
    let start = w.main_lobe_half_width() as f64;
    (0..4000)
        .map(|i| start + i as f64 * 0.01)
        .map(|d| w.kernel(d, N).norm())
        .fold(0.0, f64::max)
        .log10()
        * 20.0
        - 20.0 * main.log10()
}

#[test]
fn published_window_figures() {
    // (window, peak sidelobe dB, tolerance, ENBW bins, scalloping loss dB, coherent gain)
    let cases = [
        (HANN, -31.5, 0.1, 1.500, 1.42, 0.500),
        (BLACKMAN_HARRIS_4, -92.0, 0.1, 2.004, 0.83, 0.359),
        (BLACKMAN_HARRIS_7, -180.0, 2.0, 2.632, 0.49, 0.271),
    ];
    for (w, sidelobe, tol, enbw, scallop, cg) in cases {
        let sl = peak_sidelobe_db(&w);
        assert!(
            (sl - sidelobe).abs() < tol,
            "{}: sidelobe {sl:.2} dB vs {sidelobe}",
            w.name
        );
        assert!(
            (w.enbw_bins() - enbw).abs() < 0.001,
            "{}: ENBW {:.4} vs {enbw}",
            w.name,
            w.enbw_bins()
        );
        let loss = 20.0 * (w.kernel(0.0, N).norm() / w.kernel(0.5, N).norm()).log10();
        assert!(
            (loss - scallop).abs() < 0.01,
            "{}: scalloping {loss:.3} dB vs {scallop}",
            w.name
        );
        assert!(
            (w.coherent_gain() - cg).abs() < 0.001,
            "{}: coherent gain",
            w.name
        );
        // ENBW from the sampled window agrees with the closed form.
        let s = w.samples(N);
        let sum: f64 = s.iter().sum();
        let sq: f64 = s.iter().map(|v| v * v).sum();
        assert!(
            (N as f64 * sq / (sum * sum) - w.enbw_bins()).abs() < 1e-9,
            "{}: sampled ENBW",
            w.name
        );
    }
}

#[test]
fn kernel_equals_direct_dtft() {
    let n = 1000;
    let w = BLACKMAN_HARRIS_7.samples(n);
    for d in [0.0, 0.37, -2.5, 6.99, 13.2, 499.7, 993.1] {
        let direct: Complex64 = w
            .iter()
            .enumerate()
            .map(|(i, &v)| {
                Complex64::from_polar(v, -2.0 * std::f64::consts::PI * d * i as f64 / n as f64)
            })
            .sum();
        let k = BLACKMAN_HARRIS_7.kernel(d, n);
        assert!(
            (direct - k).norm() < 1e-9 * n as f64 * 0.3,
            "offset {d}: direct {direct} vs kernel {k}"
        );
    }
}
