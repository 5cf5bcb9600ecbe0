//! Each command checks that the capture holds what it measures: no tone for noise, the pair for
//! IMD, two different loads for the output impedance, the staircase given for power, the sweep
//! given for the response. Sources: closed-form signals (sums of sines, a Thevenin source into two
//! loads), the chi-square statistics of windowed white noise, and a tanh clipper's closed-form
//! memoryless distortion.

use super::common::{analyze, run, sines, tmpdir};
use ampnote::analysis::imd::{ImdAnalyzer, PairHint};
use ampnote::analysis::noise::NoiseAnalyzer;
use ampnote::analysis::tone::{ChannelInput, Mains};
use ampnote::calibration::Calibration;
use ampnote::error::Error;
use ampnote::signal::stimulus::TwoToneMethod;

const FS: f64 = 48_000.0;

fn noise(n: usize, sigma: f64, seed: u64) -> Vec<f64> {
    let mut rng = ampnote::signal::dither::Rng::new(seed);
    (0..n).map(|_| sigma * rng.gaussian()).collect()
}

fn plus(a: &[f64], b: &[f64]) -> Vec<f64> {
    a.iter().zip(b).map(|(x, y)| x + y).collect()
}

fn input(x: &[f64]) -> ChannelInput<'_> {
    ChannelInput {
        channel: 1,
        samples: x,
        sample_rate_hz: FS,
        overload_threshold: 1.0,
        resolution_bits: 53,
    }
}

fn wrong_kind<T: std::fmt::Debug>(r: Result<T, Error>) -> String {
    match r {
        Err(e @ Error::WrongKind { .. }) => e.to_string(),
        other => panic!("expected a wrong-kind refusal, got {other:?}"),
    }
}

/// White noise at -100 dBFS (RMS re a full-scale sine): sigma = 10^(-100/20) / sqrt 2.
fn floor(n: usize, seed: u64) -> Vec<f64> {
    noise(n, 10f64.powf(-100.0 / 20.0) / 2f64.sqrt(), seed)
}

#[test]
fn noise_refuses_a_tone_and_names_a_weaker_line() {
    let n = 48_000;
    let a = NoiseAnalyzer::new();
    let cal = Calibration::default();
    let band = (20.0, 20_000.0);
    // Noise alone, with mains hum and its buzz up to the 20th order: no signal is reported
    // (rectifier buzz is part of hum, common practice).
    let hum: Vec<(f64, f64, f64)> = (1..=20)
        .map(|o| (50.0 * o as f64, 1e-5 / o as f64, 0.1 * o as f64))
        .collect();
    let quiet = plus(&floor(n, 1), &sines(FS, n, &hum));
    let r = a.analyze(&input(&quiet), band, Mains::Auto, &cal).unwrap();
    assert!(
        r.warnings.iter().all(|w| !w.message.contains("stands")),
        "{:?}",
        r.warnings
    );
    // A tone at -20 dBFS: 80 dB over the noise figure, so the capture is refused.
    let toned = plus(&floor(n, 2), &sines(FS, n, &[(1000.0, 0.1, 0.0)]));
    let msg = wrong_kind(a.analyze(&input(&toned), band, Mains::Auto, &cal));
    assert!(
        msg.contains("1000.0 Hz") && msg.contains("not a noise measurement"),
        "{msg}"
    );
    // A line at -105 dBFS (3.3 kHz): 32 % of the noise power (closed form: 10^-0.5), and about
    // 35 dB over the noise in its own 2.6 bins (1 Hz bins: -143.8 dBFS per bin, plus the
    // window's ENBW), which no bin of noise reaches (chi-square, 2 degrees of freedom): warned,
    // and counted in the noise figure: the 20 Hz-20 kHz band holds 19980/24000 of the white
    // noise's power (-100.80 dBFS), with the line -99.40 dBFS (closed form; the windowed noise
    // figure of one second scatters by about 0.1 dB).
    let weak = plus(
        &floor(n, 3),
        &sines(FS, n, &[(3300.0, 10f64.powf(-105.0 / 20.0), 0.0)]),
    );
    let r = a.analyze(&input(&weak), band, Mains::Auto, &cal).unwrap();
    assert!(
        r.warnings.iter().any(|w| w.message.contains("3300.0 Hz")),
        "{:?}",
        r.warnings
    );
    assert!((r.noise_dbfs + 99.40).abs() < 0.3, "{}", r.noise_dbfs);
    // A sweep over the noise: a line in every part, climbing: refused as a sweep.
    let c = ampnote::signal::stimulus::Common::mono(48_000, -20.0);
    let sw = ampnote::signal::stimulus::sweep(&c, 20.0, 20_000.0, 2.0).unwrap();
    let swept = plus(&floor(sw.signal.len(), 9), &sw.signal);
    let msg = wrong_kind(a.analyze(&input(&swept), band, Mains::Auto, &cal));
    assert!(msg.contains("sweep"), "{msg}");
    // Brown noise (integrated white noise, 1/f^2): its strongest bins sit at the band's bottom
    // in every part and do not move, so it reads as noise.
    let mut acc = 0.0;
    let brown: Vec<f64> = floor(96_000, 10)
        .iter()
        .map(|v| {
            acc = 0.999 * acc + v;
            acc
        })
        .collect();
    assert!(a.analyze(&input(&brown), band, Mains::Auto, &cal).is_ok());
}

#[test]
fn imd_refuses_what_is_not_the_pair() {
    let n = 96_000;
    let modulation = PairHint {
        method: TwoToneMethod::Modulation,
        low_hz: 60.0,
        high_hz: 7000.0,
        source: "given",
    };
    let imd = ImdAnalyzer::new();
    let pair = plus(
        &sines(FS, n, &[(60.0, 0.4, 0.0), (7000.0, 0.1, 0.0)]),
        &floor(n, 4),
    );
    assert!(imd.analyze(&input(&pair), Some(modulation)).is_ok());
    // One tone, with and without the stimulus's pair.
    let single = plus(&sines(FS, n, &[(1000.0, 0.5, 0.0)]), &floor(n, 5));
    let msg = wrong_kind(imd.analyze(&input(&single), Some(modulation)));
    assert!(
        msg.contains("no tone at 60.0 Hz") && msg.contains("1000.0 Hz"),
        "{msg}"
    );
    let msg = wrong_kind(imd.analyze(&input(&single), None));
    assert!(msg.contains("only one tone"), "{msg}");
    // A tone with a strong H3 (10 %): still one tone, not a difference-frequency pair.
    let harmonic = sines(FS, n, &[(1000.0, 0.5, 0.0), (3000.0, 0.05, 0.0)]);
    let msg = wrong_kind(imd.analyze(&input(&harmonic), None));
    assert!(msg.contains("harmonic"), "{msg}");
    // A linear sweep from 20 Hz to 20 kHz: no line stands out anywhere.
    let sweep: Vec<f64> = (0..n)
        .map(|i| {
            let t = i as f64 / FS;
            let (f0, k) = (20.0, (20_000.0 - 20.0) / (n as f64 / FS));
            0.5 * (2.0 * std::f64::consts::PI * (f0 * t + 0.5 * k * t * t)).sin()
        })
        .collect();
    wrong_kind(imd.analyze(&input(&sweep), Some(modulation)));
    // The modulation pair analysed as the difference-frequency pair it is not.
    let dfd = PairHint {
        method: TwoToneMethod::DifferenceFrequency,
        low_hz: 19_000.0,
        high_hz: 20_000.0,
        source: "given",
    };
    wrong_kind(imd.analyze(&input(&pair), Some(dfd)));
}

/// A Thevenin source: EMF `e` (amplitude) behind `z` ohm, into `r` ohm, plus the recorder's
/// noise at -100 dBFS; `v = e r / (r + z)` (voltage divider, closed form).
fn into_load(e: f64, z: f64, r: f64, seed: u64) -> Vec<f64> {
    let n = 48_000;
    plus(
        &sines(FS, n, &[(1000.0, e * r / (r + z), 0.2)]),
        &floor(n, seed),
    )
}

#[test]
fn zout_needs_two_different_loads() {
    use ampnote::procedure::zout::from_tones;
    // 1.6 ohm behind 0.5 full scale: into 8 and 16 ohm, V drops by 0.77 dB; the two-load method
    // gives back 1.6 ohm (REFERENCES.md, Output impedance) within its stated noise.
    let a = analyze(&into_load(0.5, 1.6, 8.0, 6), FS);
    let b = analyze(&into_load(0.5, 1.6, 16.0, 7), FS);
    let z = from_tones(1, &a, 8.0, &b, 16.0).unwrap();
    let sigma = z.zout_sigma_ohms.unwrap();
    assert!(sigma > 0.0 && sigma < 1e-3, "sigma {sigma}");
    assert!(
        (z.zout_ohms - 1.6).abs() < 5.0 * sigma,
        "{} +/- {sigma}",
        z.zout_ohms
    );
    // The same capture twice, and two captures into the same load (noise apart): refused.
    wrong_kind(from_tones(1, &a, 8.0, &a, 16.0));
    let a2 = analyze(&into_load(0.5, 1.6, 8.0, 8), FS);
    let msg = wrong_kind(from_tones(1, &a, 8.0, &a2, 16.0));
    assert!(msg.contains("same level within their noise"), "{msg}");
    // Tones at different frequencies.
    let other = analyze(&sines(FS, 48_000, &[(400.0, 0.45, 0.0)]), FS);
    let msg = wrong_kind(from_tones(1, &a, 8.0, &other, 16.0));
    assert!(msg.contains("different frequencies"), "{msg}");
}

#[test]
fn the_level_s_stated_noise_matches_its_scatter() {
    // One standard deviation of the fundamental's level, as stated from the noise around the
    // line, against the scatter over 100 noise realisations (-60 dBFS white noise under a
    // -20 dBFS tone). The stated figure is the noise bound for the amplitude alone; fitting the
    // frequency too scatters the level a little more (1.12 times, measured over 400
    // realisations). The sample standard deviation of 100 normal draws lies within 0.83-1.17 of
    // the true one with probability 0.98 (chi distribution, 99 degrees of freedom), so the ratio
    // must lie within 0.9-1.35.
    let n = 24_000;
    let tone = sines(FS, n, &[(1000.0, 0.1, 0.3)]);
    let levels: Vec<(f64, f64)> = (0..100)
        .map(|seed| {
            let x = plus(&tone, &noise(n, 1e-3 / 2f64.sqrt(), 100 + seed));
            let r = analyze(&x, FS);
            (r.fundamental_dbfs, r.fundamental_sigma_db)
        })
        .collect();
    let mean = levels.iter().map(|l| l.0).sum::<f64>() / 100.0;
    let sd = (levels.iter().map(|l| (l.0 - mean).powi(2)).sum::<f64>() / 99.0).sqrt();
    let stated = levels.iter().map(|l| l.1).sum::<f64>() / 100.0;
    assert!(
        sd / stated > 0.9 && sd / stated < 1.35,
        "scatter {sd:.3e} dB vs stated {stated:.3e} dB"
    );
}

#[test]
fn power_refuses_another_staircase() {
    // The staircase file itself stands for an ideal amplifier. Analysed against a staircase with
    // another dwell, the step windows slide off their steps: refused, not mislabelled.
    let d = tmpdir("wrong-steps");
    let f = |name: &str| d.join(name).display().to_string();
    for (name, dwell) in [("a.wav", "0.5"), ("b.wav", "0.4")] {
        let (code, _, err) = run(&[
            "generate",
            "steps",
            "--from",
            "-20",
            "--to",
            "-6",
            "--dwell",
            dwell,
            "--settle",
            "0.1",
            "--out",
            &f(name),
        ]);
        assert_eq!(code, 0, "{err}");
    }
    let (code, _, err) = run(&["power", &f("a.wav"), "--stimulus", &f("a.wav")]);
    assert_eq!(code, 0, "{err}");
    let (code, _, err) = run(&["power", &f("a.wav"), "--stimulus", &f("b.wav")]);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("does not follow the staircase"), "{err}");
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn response_refuses_another_sweep_but_not_distortion() {
    use ampnote::analysis::sweep::{ResponseAnalyzer, ResponseConfig, SweepParams};
    use ampnote::signal::stimulus::{sweep, Common};
    let c = Common {
        lead_s: 0.1,
        tail_s: 0.4,
        ..Common::mono(48_000, -6.0)
    };
    let analyzer = ResponseAnalyzer::new(ResponseConfig::default()).unwrap();
    let make = |from: f64, secs: f64| {
        let s = sweep(&c, from, 22_000.0, secs).unwrap();
        let sp = SweepParams::from_description(&s.description).unwrap();
        (s.signal, sp)
    };
    let (x, sp) = make(20.0, 2.0);
    // A tanh clipper, 0.25 tanh(4 x), driven at amplitude 0.5: heavy distortion (H3 16.9 % of
    // the fundamental), still this sweep's recording. Its linear response is the fundamental's
    // Fourier coefficient over the drive, -5.05 dB (scipy.integrate.quad of the Fourier
    // integral; a memoryless system's first-order response under an exponential sweep, Farina).
    let clipped: Vec<f64> = x.iter().map(|v| 0.25 * (4.0 * v).tanh()).collect();
    let r = analyzer.analyze(1, &x, sp, &clipped, FS, 1.0).unwrap();
    assert!(
        (r.reference_gain_db + 5.05).abs() < 0.2,
        "gain {}",
        r.reference_gain_db
    );
    // Heavy hum (50 and 100 Hz, 15 dB under the sweep) before, during and after the sweep: the
    // amplifier's own, not another signal; the gain stays the straight wire's 0 dB.
    let rms = (x.iter().map(|v| v * v).sum::<f64>() / x.len() as f64).sqrt();
    let a = rms * 2f64.sqrt() * 10f64.powf(-15.0 / 20.0);
    let hummed: Vec<f64> = x
        .iter()
        .enumerate()
        .map(|(i, v)| {
            let t = i as f64 / FS;
            v + a * (2.0 * std::f64::consts::PI * 50.0 * t).sin()
                + 0.5 * a * (2.0 * std::f64::consts::PI * 100.0 * t).sin()
        })
        .collect();
    let r = analyzer.analyze(1, &x, sp, &hummed, FS, 1.0).unwrap();
    assert!(
        r.reference_gain_db.abs() < 0.1,
        "gain {}",
        r.reference_gain_db
    );
    // Another length, and another start frequency (the same rate, so the sweep shifted in time
    // with another end): refused.
    for (from, secs) in [(20.0, 3.0), (40.0, 2.0), (10.0, 2.0)] {
        let (y, _) = make(from, secs);
        let msg = wrong_kind(analyzer.analyze(1, &x, sp, &y, FS, 1.0));
        assert!(msg.contains("another signal"), "{from} Hz, {secs} s: {msg}");
    }
}
