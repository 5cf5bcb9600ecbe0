//! Criterion benchmark of the power procedure's analysis: a 40-step staircase (0.5 s per step,
//! 96 kHz) through a tanh stage, analysed end to end from the capture (alignment aside: the
//! capture starts with the stimulus). Target: under 0.2 s.
//!
//! Run: `cargo bench --bench power`

use ampnote::calibration::Calibration;
use ampnote::procedure::power::power_from_capture;
use ampnote::signal::stimulus::{steps, Common, Kind};
use criterion::{criterion_group, criterion_main, Criterion};
use std::hint::black_box;

fn bench(c: &mut Criterion) {
    let common = Common::mono(96_000, -40.0);
    // 40 steps of 0.5 s: -40 to -1 dBFS in 1 dB.
    let s = steps(&common, 997.0, -40.0, -1.0, 1.0, 0.5, 0.1).unwrap();
    let Kind::Steps { steps: table, .. } = &s.description.kind else {
        unreachable!()
    };
    assert_eq!(table.len(), 40);
    let y: Vec<f64> = s.signal.iter().map(|&v| (1.5 * v).tanh() / 1.5).collect();
    let cal = Calibration::default();
    let mut g = c.benchmark_group("staircase-40x0.5s-96k");
    g.sample_size(10);
    g.bench_function("power analysis", |b| {
        b.iter(|| {
            black_box(
                power_from_capture(1, black_box(&y), 96_000.0, 2.0, 24, 997.0, table, 0, &cal)
                    .unwrap(),
            )
        })
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
