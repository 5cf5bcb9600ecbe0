//! Criterion benchmark of the swept-sine response analysis: a 10 s, 96 kHz synchronized sweep
//! through an invented amplifier (band-pass biquads and a mild polynomial), with 2 ms latency.
//! FFT plans are made before timing.
//!
//! Run: `cargo bench --bench response`

use ampnote::analysis::sweep::{ResponseAnalyzer, ResponseConfig, SweepParams};
use ampnote::signal::stimulus::{sweep, Common};
use criterion::{criterion_group, criterion_main, Criterion};
use std::hint::black_box;

fn bench(c: &mut Criterion) {
    let fs = 96_000.0;
    let common = Common {
        lead_s: 0.2,
        tail_s: 0.5,
        ..Common::mono(96_000, -12.0)
    };
    let s = sweep(&common, 10.0, 40_000.0, 10.0).unwrap();
    let sp = SweepParams::from_description(&s.description).unwrap();
    // One-pole high-pass and low-pass plus a little second harmonic.
    let (mut hp_x, mut hp_y, mut lp) = (0.0, 0.0, 0.0);
    let mut y = vec![0.0; 192];
    for &v in &s.signal {
        let h = 0.999 * (hp_y + v - hp_x);
        hp_x = v;
        hp_y = h;
        lp += 0.6 * (h - lp);
        y.push(lp + 0.02 * lp * lp);
    }
    let analyzer = ResponseAnalyzer::new(ResponseConfig::default()).unwrap();
    analyzer.analyze(1, &s.signal, sp, &y, fs, 1.0).unwrap();
    let mut g = c.benchmark_group("sweep-10s-96k");
    g.sample_size(10);
    g.bench_function("response analysis", |b| {
        b.iter(|| {
            black_box(
                analyzer
                    .analyze(1, black_box(&s.signal), sp, black_box(&y), fs, 1.0)
                    .unwrap(),
            )
        })
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
