//! Writes the example capture used by the README's first command: an invented single-ended
//! amplifier's output through an attenuator, 997 Hz at about -12 dBFS, with a falling series of
//! harmonics (second dominant), full-wave rectifier ripple at 100 Hz and its harmonics, a little
//! 50 Hz, and white noise. Left and right differ slightly. Deterministic (fixed seed).
//!
//! Run: `cargo run --release --example make_example_capture`

use ampnote::signal::dither::Rng;
use ampnote::signal::wav::{write_wav, WavFormat};
use std::f64::consts::PI;

fn channel(rng: &mut Rng, gain: f64, h2_dbc: f64, noise_dbfs: f64, n: usize, fs: f64) -> Vec<f64> {
    let f0 = 997.0;
    let a1 = gain * 10f64.powf(-12.0 / 20.0);
    // (order, dBc, phase in degrees): an invented, plausible single-ended profile.
    let harmonics: [(usize, f64, f64); 5] = [
        (2, h2_dbc, -85.0),
        (3, -52.0, 20.0),
        (4, -66.0, -70.0),
        (5, -74.0, 150.0),
        (6, -88.0, 10.0),
    ];
    let hum = [(50.0, -96.0), (100.0, -84.0), (200.0, -95.0)];
    // Noise RMS is `noise_dbfs` relative to a full-scale sine (RMS 1/sqrt 2).
    let sigma = 10f64.powf(noise_dbfs / 20.0) / 2f64.sqrt();
    (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            let mut x = a1 * (2.0 * PI * f0 * t).sin();
            for &(k, dbc, ph) in &harmonics {
                x += a1
                    * 10f64.powf(dbc / 20.0)
                    * (2.0 * PI * f0 * k as f64 * t + ph.to_radians()).sin();
            }
            for &(f, dbc) in &hum {
                x += a1 * 10f64.powf(dbc / 20.0) * (2.0 * PI * f * t + 0.3).sin();
            }
            x + sigma * rng.gaussian()
        })
        .collect()
}

fn main() {
    let fs = 48_000.0;
    let n = 2 * 48_000;
    let mut rng = Rng::new(2026);
    let left = channel(&mut rng, 1.0, -40.0, -100.0, n, fs);
    let right = channel(&mut rng, 0.985, -38.5, -99.0, n, fs);
    let path = std::path::Path::new("examples/captures/example-997hz-stereo-24bit.wav");
    write_wav(path, 48_000, &[left, right], WavFormat::Int { bits: 24 }, 7)
        .expect("write example capture");
    println!("wrote {}", path.display());
}
