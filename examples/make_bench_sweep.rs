//! Writes the response benchmark's files: a 10 s, 96 kHz synchronized sweep (24-bit) and its
//! "capture" through an invented amplifier (one-pole high-pass and low-pass, a little second
//! harmonic, 2 ms latency). Used by `benches/compare_response_numpy.sh`.
//!
//! Run: `cargo run --release --example make_bench_sweep -- bench-data`

use ampnote::signal::stimulus::{sweep, Common};
use ampnote::signal::wav::{write_wav, write_wav_described, WavFormat};
use std::path::Path;

fn main() {
    let dir = std::env::args()
        .nth(1)
        .unwrap_or_else(|| "bench-data".to_string());
    std::fs::create_dir_all(&dir).expect("create folder");
    let common = Common {
        lead_s: 0.2,
        tail_s: 0.5,
        ..Common::mono(96_000, -12.0)
    };
    let s = sweep(&common, 10.0, 40_000.0, 10.0).expect("sweep");
    let stim = Path::new(&dir).join("sweep-10s-96k.wav");
    write_wav_described(
        &stim,
        96_000,
        std::slice::from_ref(&s.signal),
        WavFormat::Int { bits: 24 },
        1,
        Some(&s.description.to_json()),
    )
    .expect("write sweep");
    let (mut hp_x, mut hp_y, mut lp) = (0.0, 0.0, 0.0);
    let mut y = vec![0.0; 192];
    for &v in &s.signal {
        let h = 0.999 * (hp_y + v - hp_x);
        hp_x = v;
        hp_y = h;
        lp += 0.6 * (h - lp);
        y.push(lp + 0.02 * lp * lp);
    }
    let cap = Path::new(&dir).join("sweep-10s-96k-capture.wav");
    write_wav(&cap, 96_000, &[y], WavFormat::Int { bits: 24 }, 2).expect("write capture");
    println!("wrote {} and {}", stim.display(), cap.display());
}
