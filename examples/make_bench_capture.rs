//! Writes the benchmark capture: 10 s, 96 kHz, 24-bit stereo, a 997 Hz tone with harmonics,
//! 100 Hz ripple and noise (invented, deterministic). Used by `benches/compare_numpy.sh`.
//!
//! Run: `cargo run --release --example make_bench_capture -- bench-data/tone-10s-96k-24bit-stereo.wav`

use ampnote::signal::dither::Rng;
use ampnote::signal::wav::{write_wav, WavFormat};
use std::f64::consts::PI;

fn main() {
    let path = std::env::args()
        .nth(1)
        .unwrap_or_else(|| "bench-data/tone-10s-96k-24bit-stereo.wav".to_string());
    let fs = 96_000.0;
    let n = 960_000;
    let mut rng = Rng::new(42);
    let chans: Vec<Vec<f64>> = [1.0, 0.97]
        .iter()
        .map(|&g| {
            (0..n)
                .map(|i| {
                    let t = i as f64 / fs;
                    let w = 2.0 * PI * 997.0 * t;
                    g * (0.25 * w.sin()
                        + 0.0025 * (2.0 * w + 0.4).sin()
                        + 0.0008 * (3.0 * w - 1.0).sin())
                        + 1e-5 * (2.0 * PI * 100.0 * t).sin()
                        + 3e-6 * rng.gaussian()
                })
                .collect()
        })
        .collect();
    if let Some(dir) = std::path::Path::new(&path).parent() {
        std::fs::create_dir_all(dir).expect("create folder");
    }
    write_wav(
        std::path::Path::new(&path),
        96_000,
        &chans,
        WavFormat::Int { bits: 24 },
        9,
    )
    .expect("write capture");
    println!("wrote {path}");
}
