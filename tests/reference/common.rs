//! Helpers shared by the reference tests: synthesis of known signals and one-call analysis.

use ampnote::analysis::tone::{ChannelInput, ToneAnalyzer, ToneConfig, ToneResult};
use ampnote::calibration::Calibration;
use std::f64::consts::PI;

/// A sum of sines `sum amp * sin(2 pi f t + phase)`, `(f_hz, amp, phase_rad)` each.
pub fn sines(fs: f64, n: usize, parts: &[(f64, f64, f64)]) -> Vec<f64> {
    (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            parts
                .iter()
                .map(|&(f, a, p)| a * (2.0 * PI * f * t + p).sin())
                .sum()
        })
        .collect()
}

/// Analyse `x` (full scale 1.0, float-like resolution) with `config`.
pub fn analyze_with(x: &[f64], fs: f64, config: ToneConfig) -> ToneResult {
    analyze_bits(x, fs, config, 53)
}

pub fn analyze_bits(x: &[f64], fs: f64, config: ToneConfig, bits: u32) -> ToneResult {
    let analyzer = ToneAnalyzer::new(config).expect("valid config");
    let input = ChannelInput {
        channel: 1,
        samples: x,
        sample_rate_hz: fs,
        overload_threshold: 1.0,
        resolution_bits: bits,
    };
    analyzer
        .analyze(&input, &Calibration::default())
        .expect("analysis succeeds")
}

pub fn analyze(x: &[f64], fs: f64) -> ToneResult {
    analyze_with(x, fs, ToneConfig::default())
}

pub fn db(ratio: f64) -> f64 {
    20.0 * ratio.log10()
}

/// A fresh folder for one test's files.
pub fn tmpdir(tag: &str) -> std::path::PathBuf {
    let d = std::env::temp_dir().join(format!("ampnote-test-{tag}-{}", std::process::id()));
    std::fs::create_dir_all(&d).unwrap();
    d
}

/// Run the `ampnote` binary: exit code, stdout, stderr.
pub fn run(args: &[&str]) -> (i32, String, String) {
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_ampnote"))
        .args(args)
        .output()
        .unwrap();
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into(),
        String::from_utf8_lossy(&out.stderr).into(),
    )
}

/// White noise of RMS `dbfs` (re a full-scale sine: sigma = 10^(dbfs/20) / sqrt 2), from a fixed
/// 64-bit LCG (the sum of 12 uniforms: near-Gaussian), the same for the same `seed`.
pub fn noise(n: usize, dbfs: f64, seed: u64) -> Vec<f64> {
    let mut state = seed ^ 0x2545_f491_4f6c_dd1d;
    let mut uniform = move || {
        state = state
            .wrapping_mul(6_364_136_223_846_793_005)
            .wrapping_add(1_442_695_040_888_963_407);
        (state >> 11) as f64 / (1u64 << 53) as f64
    };
    let sigma = 10f64.powf(dbfs / 20.0) / 2f64.sqrt();
    (0..n)
        .map(|_| sigma * ((0..12).map(|_| uniform()).sum::<f64>() - 6.0))
        .collect()
}

/// Write one channel as a 32-bit float WAV at 48 kHz into `dir` (the samples exactly).
pub fn write_float(dir: &std::path::Path, name: &str, x: Vec<f64>) -> std::path::PathBuf {
    let p = dir.join(name);
    ampnote::signal::wav::write_wav(
        &p,
        48_000,
        &[x],
        ampnote::signal::wav::WavFormat::Float32,
        1,
    )
    .unwrap();
    p
}

/// `x` (at `fs`) through the analog transfer function `h` (of frequency in Hz), applied exactly on the
/// DFT grid: circular (a periodic steady state) when `pad` is false, linear (zero-padded) when
/// true.
pub fn through(
    x: &[f64],
    fs: f64,
    h: &dyn Fn(f64) -> realfft::num_complex::Complex64,
    pad: bool,
) -> Vec<f64> {
    let n = if pad {
        (2 * x.len()).next_power_of_two()
    } else {
        x.len()
    };
    let mut planner = realfft::RealFftPlanner::<f64>::new();
    let (fwd, inv) = (planner.plan_fft_forward(n), planner.plan_fft_inverse(n));
    let mut buf = vec![0.0; n];
    buf[..x.len()].copy_from_slice(x);
    let mut spec = fwd.make_output_vec();
    fwd.process(&mut buf, &mut spec).unwrap();
    for (k, c) in spec.iter_mut().enumerate() {
        *c *= h(k as f64 * fs / n as f64) / n as f64;
    }
    spec[0].im = 0.0;
    if n % 2 == 0 {
        spec[n / 2].im = 0.0;
    }
    inv.process(&mut spec, &mut buf).unwrap();
    buf.truncate(x.len());
    buf
}
