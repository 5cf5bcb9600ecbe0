//! Criterion benchmarks of the steady-tone analysis on a 10 s, 96 kHz stereo capture (24-bit
//! values), beside one bare realfft pass over the same samples: the target is the
//! analysis core within 3x of that pass. Planning (FFT plan, window) happens before timing.
//!
//! Run: `cargo bench --bench analyze`

use ampnote::analysis::spectrum::fast_length;
use ampnote::analysis::tone::{ChannelInput, ToneAnalyzer, ToneConfig};
use ampnote::calibration::Calibration;
use ampnote::signal::dither::Rng;
use criterion::{criterion_group, criterion_main, Criterion};
use realfft::RealFftPlanner;
use std::hint::black_box;

fn capture(fs: f64, n: usize, seed: u64) -> Vec<f64> {
    let mut rng = Rng::new(seed);
    let scale = (1u64 << 23) as f64;
    (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            let w = 2.0 * std::f64::consts::PI * 997.0 * t;
            let x = 0.25 * w.sin()
                + 0.0025 * (2.0 * w).sin()
                + 0.0008 * (3.0 * w).sin()
                + 1e-5 * (2.0 * std::f64::consts::PI * 100.0 * t).sin()
                + 3e-6 * rng.gaussian();
            (x * scale + rng.tpdf()).round() / scale
        })
        .collect()
}

fn bench(c: &mut Criterion) {
    let fs = 96_000.0;
    let n = 960_000;
    let channels = [capture(fs, n, 1), capture(fs, n, 2)];
    let analyzer = ToneAnalyzer::new(ToneConfig::default()).unwrap();
    let inputs: Vec<ChannelInput> = channels
        .iter()
        .enumerate()
        .map(|(i, x)| ChannelInput {
            channel: i + 1,
            samples: x,
            sample_rate_hz: fs,
            overload_threshold: (8_388_607.0 / 8_388_608.0),
            resolution_bits: 24,
        })
        .collect();
    let cal = Calibration::default();
    // Warm the planner so FFT planning and the window are outside the timed part.
    for i in &inputs {
        analyzer.analyze(i, &cal).unwrap();
    }
    let mut g = c.benchmark_group("10s-96k-stereo");
    g.sample_size(20);
    g.bench_function("tone analysis, both channels", |b| {
        b.iter(|| {
            for i in &inputs {
                black_box(analyzer.analyze(black_box(i), &cal).unwrap());
            }
        })
    });
    let len = fast_length(n);
    let mut planner = RealFftPlanner::<f64>::new();
    let fft = planner.plan_fft_forward(len);
    let mut input = vec![0.0; len];
    let mut output = fft.make_output_vec();
    let mut scratch = fft.make_scratch_vec();
    g.bench_function("bare realfft pass, both channels", |b| {
        b.iter(|| {
            for x in &channels {
                input.copy_from_slice(&x[..len]);
                fft.process_with_scratch(&mut input, &mut output, &mut scratch)
                    .unwrap();
                black_box(&output);
            }
        })
    });
    g.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
