//! The accuracy targets, each against a closed form.

use super::common::{analyze, analyze_with, db, sines};
use ampnote::analysis::tone::{wrap_degrees, ToneConfig};

fn to_f32(x: Vec<f64>) -> Vec<f64> {
    x.into_iter().map(|v| v as f32 as f64).collect()
}

#[test]
fn harmonics_to_minus_120_dbc_on_float_input_within_0_05_db() {
    // Levels of a sum of sines are known exactly (closed form); stored as float32 like a float
    // WAV, whose rounding noise sits near -150 dB.
    let fs = 96_000.0;
    let a1 = 0.5;
    let levels = [
        (2, -60.0),
        (3, -80.0),
        (4, -100.0),
        (5, -110.0),
        (6, -120.0),
    ];
    let mut parts = vec![(1000.3, a1, 0.1)];
    for &(k, dbc) in &levels {
        parts.push((
            1000.3 * k as f64,
            a1 * 10f64.powf(dbc / 20.0),
            0.7 * k as f64,
        ));
    }
    let r = analyze(&to_f32(sines(fs, 96_000, &parts)), fs);
    for &(k, dbc) in &levels {
        let h = &r.harmonics[k - 2];
        assert!(
            (h.level_dbc - dbc).abs() < 0.05,
            "H{k}: {:.4} dBc vs {dbc}",
            h.level_dbc
        );
    }
}

#[test]
fn fundamental_within_1_ppm_on_one_second() {
    // Known frequencies off the bin grid, high SNR (float64, -120 dBFS noise from a seeded source).
    let fs = 48_000.0;
    let mut rng = ampnote::signal::dither::Rng::new(5);
    for f0 in [20.37, 99.9, 997.0, 1234.567, 9876.54, 19_000.1] {
        let x: Vec<f64> = sines(fs, 48_000, &[(f0, 0.5, 1.0)])
            .into_iter()
            .map(|v| v + 1e-6 * rng.gaussian())
            .collect();
        let r = analyze(&x, fs);
        let ppm = (r.fundamental_hz - f0) / f0 * 1e6;
        assert!(
            ppm.abs() < 1.0,
            "f0 {f0} Hz: measured {} Hz ({ppm:+.4} ppm)",
            r.fundamental_hz
        );
    }
}

#[test]
fn thdn_floor_on_ideal_float32_sine_below_minus_140_db() {
    for (fs, f0) in [(48_000.0, 997.0), (96_000.0, 1000.0), (44_100.0, 3141.59)] {
        let x = to_f32(sines(fs, fs as usize, &[(f0, 0.9, 0.2)]));
        let r = analyze(&x, fs);
        assert!(
            r.thdn_db < -140.0,
            "fs {fs}, f0 {f0}: THD+N floor {:.1} dB",
            r.thdn_db
        );
    }
}

#[test]
fn time_domain_ieee_1057_fit_agrees() {
    // Slow oracle: the IEEE 1057 least-squares fit in the time domain (all three lines and DC
    // at once), at the frequencies the spectral fit found, gives the same amplitudes and phases.
    let fs = 48_000.0;
    let parts = [(440.7, 0.4, 0.3), (881.4, 0.01, -1.2), (1322.1, 0.002, 2.5)];
    let x = sines(fs, 30_000, &parts);
    let r = analyze_with(&x, fs, ToneConfig::default());
    let n = r.samples_analysed;
    let f0 = r.fundamental_hz;
    let freqs: Vec<f64> = (1..=3).map(|k| k as f64 * f0 / fs).collect();
    let (lines, _) = ampnote::analysis::fit::sine_fit_time_domain(&x[..n], &freqs).unwrap();
    let amp = |i: usize| (lines[i].0.powi(2) + lines[i].1.powi(2)).sqrt();
    // A cos + B sin = R sin(wn + phi) with phi = atan2(A, B)
    let phase = |i: usize| lines[i].0.atan2(lines[i].1);
    assert!(
        (r.fundamental_dbfs - db(amp(0))).abs() < 1e-6,
        "fundamental {} vs {}",
        r.fundamental_dbfs,
        db(amp(0))
    );
    for k in 2..=3 {
        let h = &r.harmonics[k - 2];
        let want_dbc = db(amp(k - 1) / amp(0));
        assert!(
            (h.level_dbc - want_dbc).abs() < 1e-4,
            "H{k}: spectral {:.6} dBc vs time-domain {want_dbc:.6}",
            h.level_dbc
        );
        let want_phase = wrap_degrees((phase(k - 1) - k as f64 * phase(0)).to_degrees());
        assert!(
            wrap_degrees(h.phase_deg - want_phase).abs() < 1e-3,
            "H{k}: phase {} vs {want_phase}",
            h.phase_deg
        );
        // and both agree with the synthesis
        let synth = db(parts[k - 1].1 / parts[0].1);
        assert!(
            (want_dbc - synth).abs() < 1e-4,
            "H{k}: time-domain {want_dbc} vs synthesis {synth}"
        );
    }
}

#[test]
fn calibration_volts_and_watts() {
    // P = V^2 / R (REFERENCES.md, Output power): 1 W into 8 ohm is 2.828 V rms.
    use ampnote::analysis::tone::{ChannelInput, ToneAnalyzer};
    use ampnote::calibration::Calibration;
    let fs = 48_000.0;
    // Interface full scale 2.0 V rms, attenuator 10:1 (20 dB); 2.828 V at the amplifier is
    // 0.2828 V at the interface, 0.1414 of full scale.
    let a = 0.282_842_712_474_619 / 2.0;
    let x = sines(fs, 48_000, &[(1000.0, a, 0.0)]);
    let cal = Calibration {
        input_fs_vrms: Some(2.0),
        attenuation: Some(10.0),
        load_ohms: Some(8.0),
        ..Calibration::default()
    };
    let r = ToneAnalyzer::new(ToneConfig::default())
        .unwrap()
        .analyze(
            &ChannelInput {
                channel: 1,
                samples: &x,
                sample_rate_hz: fs,
                overload_threshold: 1.0,
                resolution_bits: 53,
            },
            &cal,
        )
        .unwrap();
    assert!(
        (r.fundamental_vrms.unwrap() - 2.828_427).abs() < 1e-5,
        "V {:?}",
        r.fundamental_vrms
    );
    assert!(
        (r.output_w.unwrap() - 1.0).abs() < 1e-5,
        "W {:?}",
        r.output_w
    );
    // dBV of 2.828 V is +9.03; dBu (0.7746 V reference) is +11.25.
    assert!((r.fundamental_dbv.unwrap() - 9.031).abs() < 0.001);
    assert!((r.fundamental_dbu.unwrap() - 11.249).abs() < 0.001);
}
