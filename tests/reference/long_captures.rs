//! Long captures in blocks, and the trend, against closed forms: sums of known sines whose
//! levels are set by formula (the block means of a level ramp are integrals of the ramp), and
//! the one-transform analysis of the same samples. Blocks are made small here (2^16 samples) so
//! the combining is exercised on captures a test can afford; the code path is the one a
//! ten-minute file takes with 2^22-sample blocks.

use ampnote::analysis::blocks::{self, StoredInput};
use ampnote::analysis::tone::{ChannelInput, ToneAnalyzer, ToneConfig};
use ampnote::calibration::Calibration;
use ampnote::capture::StoredSamples;
use std::f64::consts::PI;

const FS: f64 = 48_000.0;

/// 24-bit rounding, as a recorder stores it: exact in f32.
fn q24(x: f64) -> f32 {
    ((x * 8_388_608.0).round() / 8_388_608.0) as f32
}

/// A 997 Hz tone with H2 -50 dBc and H3 -60 dBc, whose level follows `level_db(t)`, plus
/// noise at `noise_dbfs` (see `common::noise`).
fn tone(n: usize, level_db: impl Fn(f64) -> f64, noise_dbfs: f64) -> Vec<f64> {
    let noise = super::common::noise(n, noise_dbfs, 0);
    (0..n)
        .map(|i| {
            let t = i as f64 / FS;
            let a = 10f64.powf(level_db(t) / 20.0);
            let w = 2.0 * PI * 997.0 * t;
            a * (w.sin()
                + 10f64.powf(-50.0 / 20.0) * (2.0 * w).sin()
                + 10f64.powf(-60.0 / 20.0) * (3.0 * w).sin())
                + noise[i]
        })
        .collect()
}

fn stored(x: &[f64]) -> StoredSamples {
    StoredSamples::F32(x.iter().map(|&v| q24(v)).collect())
}

fn input(s: &StoredSamples) -> StoredInput<'_> {
    StoredInput {
        channel: 1,
        samples: s,
        sample_rate_hz: FS,
        overload_threshold: 1.0,
        resolution_bits: 24,
        progress: ampnote::progress::Progress::hidden(),
    }
}

#[test]
fn blocks_combine_to_the_closed_form_and_the_one_transform_figures() {
    let x = tone(1 << 20, |_| -6.0, -110.0); // 21.8 s
    let s = stored(&x);
    let widened = s.block(0..s.len());
    let analyzer = ToneAnalyzer::new(ToneConfig::default()).unwrap();
    let cal = Calibration::default();
    let whole = analyzer
        .analyze(
            &ChannelInput {
                channel: 1,
                samples: &widened,
                sample_rate_hz: FS,
                overload_threshold: 1.0,
                resolution_bits: 24,
            },
            &cal,
        )
        .unwrap();
    let combined = blocks::tone(&analyzer, &input(&s), &cal, 1 << 16).unwrap();
    assert_eq!(combined.analysis.blocks, 16);
    assert_eq!(whole.analysis.blocks, 1);
    // Closed form: -6 dBFS, H2 -50 dBc, H3 -60 dBc (the sines written); the 24-bit noise adds
    // under 0.001 dB to them.
    for r in [&whole, &combined] {
        assert!(
            (r.fundamental_dbfs + 6.0).abs() < 0.005,
            "{}",
            r.fundamental_dbfs
        );
        assert!((r.harmonics[0].level_dbc + 50.0).abs() < 0.01);
        assert!((r.harmonics[1].level_dbc + 60.0).abs() < 0.01);
        assert!(r.harmonics[0].phase_deg.abs() < 0.5);
    }
    // The two ways agree to within the noise's effect on THD (0.01 dB) and noise (0.3 dB: the
    // shorter blocks' wider lines take a little more of the floor).
    assert!((combined.thd_db.unwrap() - whole.thd_db.unwrap()).abs() < 0.01);
    assert!((combined.thdn_db - whole.thdn_db).abs() < 0.01);
    assert!((combined.noise_dbfs - whole.noise_dbfs).abs() < 0.3);
    // Noise: -110 dBFS over 0..24 kHz; the 20 Hz..20 kHz band holds 19.98/24 of it.
    let expected_noise = -110.0 + 10.0 * (19_980.0f64 / 24_000.0).log10();
    assert!(
        (combined.noise_dbfs - expected_noise).abs() < 0.3,
        "{} vs {expected_noise}",
        combined.noise_dbfs
    );
    assert!(
        !combined
            .warnings
            .iter()
            .any(|w| w.message.contains("move over")),
        "{:?}",
        combined.warnings
    );
}

#[test]
fn parallel_blocks_give_the_serial_result() {
    let x = tone(1 << 19, |_| -12.0, -100.0);
    let s = stored(&x);
    let analyzer = ToneAnalyzer::new(ToneConfig::default()).unwrap();
    let cal = Calibration::default();
    let parallel = blocks::tone(&analyzer, &input(&s), &cal, 1 << 15).unwrap();
    let serial = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .unwrap()
        .install(|| blocks::tone(&analyzer, &input(&s), &cal, 1 << 15).unwrap());
    assert_eq!(
        serde_json::to_string(&parallel).unwrap(),
        serde_json::to_string(&serial).unwrap()
    );
    let t1 = blocks::trend(&analyzer, &input(&s), &cal, 1.0).unwrap();
    let t2 = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .unwrap()
        .install(|| blocks::trend(&analyzer, &input(&s), &cal, 1.0).unwrap());
    assert_eq!(t1, t2);
}

#[test]
fn a_wandering_level_is_averaged_and_named() {
    // The level slides linearly in dB from -6 to -7.5 over the capture (a warming amplifier).
    let n = 1usize << 19;
    let span = n as f64 / FS;
    let slope = -1.5 / span;
    let x = tone(n, |t| -6.0 + slope * t, -110.0);
    let s = stored(&x);
    let analyzer = ToneAnalyzer::new(ToneConfig::default()).unwrap();
    let r = blocks::tone(&analyzer, &input(&s), &Calibration::default(), 1 << 15).unwrap();
    // Closed form over the analysed span [t0, t1]: the mean of 10^(L(t)/10) is
    // 10^(L(t0)/10) (10^(b (t1 - t0)/10) - 1) / (b (t1 - t0) ln(10) / 10), b the slope.
    let (t0, t1) = (r.analysed_from_s, r.analysed_to_s);
    let k = slope * (t1 - t0) / 10.0;
    let mean = 10f64.powf((-6.0 + slope * t0) / 10.0) * (10f64.powf(k) - 1.0)
        / (k * std::f64::consts::LN_10);
    let expected = 10.0 * mean.log10();
    assert!(
        (r.fundamental_dbfs - expected).abs() < 0.02,
        "{} vs {expected} over {t0}..{t1} s",
        r.fundamental_dbfs
    );
    assert!(
        r.warnings
            .iter()
            .any(|w| w.message.contains("move over the capture")),
        "{:?}",
        r.warnings
    );
}

#[test]
fn trend_follows_a_warming_amplifier() {
    // 20 s: the level falls linearly in dB from -6 to -9, H2 rises from -50 to -40 dBc.
    let n = (20.0 * FS) as usize;
    let level = |t: f64| -6.0 - 3.0 * t / 20.0;
    let h2 = |t: f64| -50.0 + 10.0 * t / 20.0;
    let x: Vec<f64> = (0..n)
        .map(|i| {
            let t = i as f64 / FS;
            let a = 10f64.powf(level(t) / 20.0);
            let w = 2.0 * PI * 997.0 * t;
            a * (w.sin() + 10f64.powf(h2(t) / 20.0) * (2.0 * w).sin())
        })
        .collect();
    let s = stored(&x);
    let analyzer = ToneAnalyzer::new(ToneConfig::default()).unwrap();
    let t = blocks::trend(&analyzer, &input(&s), &Calibration::default(), 1.0).unwrap();
    assert_eq!(t.points.len(), 20);
    for p in &t.points {
        // Closed form: the block's mean power of a level linear in dB is, to 0.001 dB over a
        // 0.15 dB ramp, the level at the block's middle.
        let mid = p.at_s + 0.5;
        let l = p.level_dbfs.unwrap();
        assert!(
            (l - level(mid)).abs() < 0.01,
            "at {}: {l} vs {}",
            p.at_s,
            level(mid)
        );
        let h = p.h2_dbc.unwrap();
        assert!(
            (h - h2(mid)).abs() < 0.05,
            "at {}: H2 {h} vs {}",
            p.at_s,
            h2(mid)
        );
    }
    let d = t.drift.level_db.unwrap();
    assert!(
        (d.change - (level(19.5) - level(0.5))).abs() < 0.02,
        "{d:?}"
    );
    let d2 = t.drift.h2_dbc.unwrap();
    assert!((d2.change - (h2(19.5) - h2(0.5))).abs() < 0.1, "{d2:?}");
}

#[test]
fn trend_leaves_out_the_floor_and_marks_what_it_cannot_read() {
    // 1 s floor, 10 s tone with a 0.3 s dropout at 5 s, 1 s floor.
    let n = (12.0 * FS) as usize;
    let x: Vec<f64> = (0..n)
        .map(|i| {
            let t = i as f64 / FS;
            let on = (1.0..11.0).contains(&t) && !(6.0..6.3).contains(&t);
            if on {
                0.5 * (2.0 * PI * 997.0 * t).sin()
            } else {
                0.0
            }
        })
        .collect();
    let s = stored(&x);
    let analyzer = ToneAnalyzer::new(ToneConfig::default()).unwrap();
    let t = blocks::trend(&analyzer, &input(&s), &Calibration::default(), 1.0).unwrap();
    assert!((t.from_s - 1.0).abs() < 0.01, "{}", t.from_s);
    assert_eq!(t.points.len(), 10);
    // Every block read where the tone is whole; the dropout's block is either read on its
    // steady part or marked with why not, never given a level far off.
    for p in &t.points {
        if let Some(l) = p.level_dbfs {
            assert!((l - 20.0 * 0.5f64.log10()).abs() < 0.05, "{p:?}");
        } else {
            assert!(p.note.is_some());
        }
    }
    // Noise alone is not a trend of a tone.
    let noise: Vec<f64> = tone(1 << 18, |_| -200.0, -60.0);
    let sn = stored(&noise);
    assert!(blocks::trend(&analyzer, &input(&sn), &Calibration::default(), 1.0).is_err());
    // A block too short to hold a tone is refused, not analysed.
    assert!(blocks::trend(&analyzer, &input(&s), &Calibration::default(), 0.001).is_err());
}

#[test]
fn trend_command_writes_table_json_and_csv() {
    let d = super::common::tmpdir("trend");
    let wav = d.join("tone.wav");
    let (code, _, err) = super::common::run(&[
        "generate",
        "tone",
        "--seconds",
        "4",
        "--level",
        "-10",
        "--out",
        wav.to_str().unwrap(),
    ]);
    assert_eq!(code, 0, "{err}");
    let (code, out, err) = super::common::run(&["trend", wav.to_str().unwrap(), "--json"]);
    assert_eq!(code, 0, "{err}");
    let report: ampnote::report::trend::TrendReport = serde_json::from_str(&out).unwrap();
    assert_eq!(report.channels[0].points.len(), 4);
    // Source: the generated tone's level, -10 dBFS.
    for p in &report.channels[0].points {
        assert!((p.level_dbfs.unwrap() + 10.0).abs() < 0.01);
    }
    let csv = d.join("trend.csv");
    let (code, _, err) = super::common::run(&[
        "trend",
        wav.to_str().unwrap(),
        "--every",
        "2",
        "--csv",
        csv.to_str().unwrap(),
    ]);
    assert_eq!(code, 0, "{err}");
    let text = std::fs::read_to_string(&csv).unwrap();
    assert_eq!(text.lines().count(), 3, "{text}");
    let (code, _, err) = super::common::run(&["trend", wav.to_str().unwrap(), "--every", "0"]);
    assert_eq!(code, 2);
    assert!(err.contains("--every"), "{err}");
}

#[test]
fn watch_keeps_every_reading_in_its_log() {
    let d = super::common::tmpdir("watchlog");
    let log = d.join("warmup.csv");
    let _ = std::fs::remove_file(&log);
    let (code, out, err) = super::common::run(&[
        "watch",
        "--rig",
        "sim",
        "--seconds",
        "1",
        "--log",
        log.to_str().unwrap(),
    ]);
    assert_eq!(code, 0, "{err}");
    let text = std::fs::read_to_string(&log).unwrap();
    let mut lines = text.lines();
    assert_eq!(
        lines.next(),
        Some(ampnote::analysis::blocks::TrendPoint::CSV_HEADER)
    );
    let rows: Vec<Vec<&str>> = lines.map(|l| l.split(',').collect()).collect();
    // One row per reading the terminal showed (stdout is not a terminal here: a line each).
    assert_eq!(rows.len(), out.lines().count(), "{text}\n{out}");
    assert!(!rows.is_empty());
    let mut last_t = -1.0;
    for r in &rows {
        let t: f64 = r[1].parse().unwrap();
        assert!(t > last_t, "times rise: {t} after {last_t}");
        last_t = t;
        let level: f64 = r[2].parse().unwrap();
        assert!(level.is_finite());
    }
    // A log already there is never overwritten.
    let (code, _, err) = super::common::run(&[
        "watch",
        "--rig",
        "sim",
        "--seconds",
        "1",
        "--log",
        log.to_str().unwrap(),
    ]);
    assert_eq!(code, 2);
    assert!(err.contains("exists already"), "{err}");
    assert_eq!(std::fs::read_to_string(&log).unwrap(), text);
}
