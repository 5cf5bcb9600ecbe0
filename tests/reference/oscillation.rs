//! Oscillation checks against closed forms: captures built from known sines (an ultrasonic
//! line, a sub-audio line, a tone amplitude-modulated at a few hertz: AM of index m puts m/2 of
//! the carrier in each sideband, a textbook identity) must be found at their frequency within
//! 1 % (the target; the fits do far better) and at their level; clean tones, clipped
//! tones whose harmonics run past the band, and the noise floor alone must raise nothing.

use super::common::{noise, sines};
use ampnote::analysis::noise::NoiseAnalyzer;
use ampnote::analysis::oscillation::OscillationKind;
use ampnote::analysis::tone::{ChannelInput, Mains, ToneAnalyzer, ToneConfig, ToneResult};
use ampnote::calibration::Calibration;
use std::f64::consts::PI;

fn input(x: &[f64], fs: f64) -> ChannelInput<'_> {
    ChannelInput {
        channel: 1,
        samples: x,
        sample_rate_hz: fs,
        overload_threshold: 1.0,
        resolution_bits: 24,
    }
}

fn tone_of(x: &[f64], fs: f64) -> ToneResult {
    ToneAnalyzer::new(ToneConfig::default())
        .unwrap()
        .analyze(&input(x, fs), &Calibration::default())
        .unwrap()
}

fn plus(a: Vec<f64>, b: Vec<f64>) -> Vec<f64> {
    a.into_iter().zip(b).map(|(x, y)| x + y).collect()
}

#[test]
fn an_ultrasonic_line_is_found_on_and_off_the_harmonic_grid() {
    let fs = 192_000.0;
    let n = 4 * 192_000;
    // 85 kHz at -40 dBc beside 1 kHz (on the grid: the 85th multiple) and beside 997 Hz (off).
    for f0 in [1000.0, 997.0] {
        let x = plus(
            sines(fs, n, &[(f0, 0.5, 0.0), (85_000.0, 0.005, 0.3)]),
            noise(n, -120.0, 1),
        );
        let r = tone_of(&x, fs);
        let o: Vec<_> = r
            .oscillations
            .iter()
            .filter(|o| o.kind == OscillationKind::Ultrasonic)
            .collect();
        assert_eq!(o.len(), 1, "{f0} Hz: {:?}", r.oscillations);
        assert!((o[0].frequency_hz - 85_000.0).abs() < 850.0, "{:?}", o[0]);
        assert!((o[0].level_dbc.unwrap() + 40.0).abs() < 0.1, "{:?}", o[0]);
        assert!(r.warnings.iter().any(|w| w.message.contains("oscillating")));
        assert_eq!(
            r.oscillation_search.ultrasonic_to_hz.map(|f| f > 90_000.0),
            Some(true)
        );
    }
}

#[test]
fn a_pumping_level_is_named_motorboating() {
    let fs = 48_000.0;
    let n = 10 * 48_000;
    // (1 + 0.03 sin(2 pi 2.5 t)) sin(2 pi 997 t): sidebands of 1.5 % at 997 +/- 2.5 Hz.
    let x: Vec<f64> = (0..n)
        .map(|i| {
            let t = i as f64 / fs;
            0.5 * (1.0 + 0.03 * (2.0 * PI * 2.5 * t).sin()) * (2.0 * PI * 997.0 * t).sin()
        })
        .collect();
    let x = plus(x, noise(n, -120.0, 2));
    let r = tone_of(&x, fs);
    let o = r
        .oscillations
        .iter()
        .find(|o| o.kind == OscillationKind::Motorboating)
        .unwrap_or_else(|| panic!("{:?} {:?}", r.oscillations, r.warnings));
    assert!((o.frequency_hz - 2.5).abs() < 0.025, "{o:?}");
    assert!((o.modulation_percent.unwrap() - 3.0).abs() < 0.05, "{o:?}");
    // Each sideband: m/2 = 1.5 % = -36.48 dBc.
    assert!((o.level_dbc.unwrap() - 20.0 * 0.015f64.log10()).abs() < 0.1);
    assert!(r
        .warnings
        .iter()
        .any(|w| w.message.contains("motorboating")));
    // Its sidebands are not also reported as an unexplained line.
    assert!(!r
        .warnings
        .iter()
        .any(|w| w.message.contains("neither a harmonic")));
}

#[test]
fn a_sub_audio_line_is_found() {
    let fs = 48_000.0;
    let n = 10 * 48_000;
    let x = plus(
        sines(fs, n, &[(997.0, 0.5, 0.0), (3.0, 0.0016, 0.0)]),
        noise(n, -120.0, 3),
    );
    let r = tone_of(&x, fs);
    let o = r
        .oscillations
        .iter()
        .find(|o| o.kind == OscillationKind::SubAudio)
        .unwrap_or_else(|| panic!("{:?}", r.oscillations));
    assert!((o.frequency_hz - 3.0).abs() < 0.03, "{o:?}");
    // 0.0016 against 0.5: -49.9 dBc.
    assert!((o.level_dbc.unwrap() - 20.0 * (0.0016f64 / 0.5).log10()).abs() < 0.2);
}

#[test]
fn clean_and_clipped_tones_and_plain_noise_raise_nothing() {
    for (fs, seconds) in [(48_000.0, 5.0), (96_000.0, 3.0), (192_000.0, 2.0)] {
        let n = (fs * seconds) as usize;
        // A tone alone, and one clipped softly (tanh: odd harmonics past the band and aliased).
        let clean = plus(sines(fs, n, &[(1000.0, 0.5, 0.0)]), noise(n, -130.0, 4));
        let clipped: Vec<f64> = clean.iter().map(|&v| 0.5 * (4.0 * v).tanh()).collect();
        for (what, x) in [("clean", &clean), ("clipped", &clipped)] {
            let r = tone_of(x, fs);
            assert!(
                r.oscillations.is_empty(),
                "{what} at {fs} Hz: {:?}",
                r.oscillations
            );
        }
        // Noise with mains hum and its buzz: mains explains them.
        let hum = sines(
            fs,
            n,
            &[(50.0, 1e-4, 0.0), (100.0, 3e-5, 1.0), (150.0, 1e-5, 2.0)],
        );
        let x = plus(hum, noise(n, -100.0, 5));
        let r = NoiseAnalyzer::new()
            .analyze(
                &input(&x, fs),
                (20.0, 20_000.0),
                Mains::Auto,
                &Calibration::default(),
            )
            .unwrap();
        assert!(
            r.oscillations.is_empty(),
            "noise at {fs}: {:?}",
            r.oscillations
        );
    }
    // The file's own rounding pattern is no oscillation: a noiseless tone stored in 16 bits.
    let fs = 48_000.0;
    let x: Vec<f64> = sines(fs, 96_000, &[(1000.0, 0.5, 0.0)])
        .into_iter()
        .map(|v| (v * 32_768.0).round() / 32_768.0)
        .collect();
    let r = ToneAnalyzer::new(ToneConfig::default())
        .unwrap()
        .analyze(
            &ChannelInput {
                resolution_bits: 16,
                ..input(&x, fs)
            },
            &Calibration::default(),
        )
        .unwrap();
    assert!(r.oscillations.is_empty(), "{:?}", r.oscillations);
}

#[test]
fn a_noise_capture_shows_its_oscillation_and_what_the_rate_hides() {
    let fs = 96_000.0;
    let n = 4 * 96_000;
    let x = plus(sines(fs, n, &[(40_000.0, 1e-3, 0.0)]), noise(n, -110.0, 6));
    let r = NoiseAnalyzer::new()
        .analyze(
            &input(&x, fs),
            (20.0, 20_000.0),
            Mains::Auto,
            &Calibration::default(),
        )
        .unwrap();
    assert_eq!(r.oscillations.len(), 1, "{:?}", r.oscillations);
    let o = &r.oscillations[0];
    assert_eq!(o.kind, OscillationKind::Ultrasonic);
    assert!((o.frequency_hz - 40_000.0).abs() < 400.0);
    // 1e-3 peak: -60 dBFS.
    assert!((o.level_dbfs + 60.0).abs() < 0.1, "{o:?}");
    assert!(o.level_dbc.is_none());
    // At 48 kHz the search ends at Nyquist, and half a second is too short for sub-audio lines.
    let short = plus(
        sines(48_000.0, 24_000, &[(1000.0, 0.5, 0.0)]),
        noise(24_000, -120.0, 7),
    );
    let r = tone_of(&short, 48_000.0);
    assert!(r.oscillation_search.ultrasonic_to_hz.unwrap() < 24_000.0);
    assert!(r.oscillation_search.subaudio_from_hz.is_none());
    let text = ampnote::report::tone::oscillation_lines(&r.oscillations, &r.oscillation_search);
    assert!(text.contains("96 kHz or more"), "{text}");
    assert!(text.contains("too short"), "{text}");
}

#[test]
fn a_staircase_names_the_drives_where_an_oscillation_starts() {
    use ampnote::procedure::power::power_from_capture;
    use ampnote::signal::stimulus::{self, Common, Kind};
    // A linear amplifier (x 0.5) that breaks into a 33 kHz oscillation at -40 dBc once the drive
    // passes -12 dBFS: closed form, the line added where the stimulus is that loud.
    let fs = 96_000u32;
    let st = stimulus::steps(
        &Common::mono(fs, -20.0),
        1000.0,
        -24.0,
        -6.0,
        3.0,
        0.3,
        0.05,
    )
    .unwrap();
    let Kind::Steps { steps, .. } = &st.description.kind else {
        unreachable!()
    };
    let mut y: Vec<f64> = st.signal.iter().map(|v| 0.5 * v).collect();
    for s in steps.iter().filter(|s| s.level_dbfs > -12.5) {
        let a = 0.5 * 10f64.powf(s.level_dbfs / 20.0) * 0.01;
        for i in s.start_sample..s.analyse_to_sample.min(y.len()) {
            y[i] += a * (2.0 * PI * 33_000.0 * i as f64 / fs as f64).sin();
        }
    }
    let n = noise(y.len(), -120.0, 8);
    for (v, e) in y.iter_mut().zip(n) {
        *v += e;
    }
    let r = power_from_capture(
        1,
        &y,
        fs as f64,
        1.0,
        24,
        1000.0,
        steps,
        0,
        &Calibration::default(),
    )
    .unwrap();
    for s in &r.steps {
        let oscillating = s.drive_dbfs > -12.5;
        assert_eq!(!s.oscillations.is_empty(), oscillating, "step {:?}", s);
    }
    let w = r
        .warnings
        .iter()
        .find(|w| w.message.contains("ultrasonic"))
        .unwrap_or_else(|| panic!("{:?}", r.warnings));
    assert!(w.message.contains("-12.0, -9.0, -6.0"), "{w}");
}
