//! Intermodulation against the IEC 60268-3 definitions (cl. 14.12.7 - 14.12.8) and its worked
//! example (REFERENCES.md): f_H at 0.25 with sidebands of 0.02 at +/- f_L and 0.01 at +/- 2 f_L
//! gives d_m2 = 0.16 and d_m3 = 0.08.

use super::common::sines;
use ampnote::analysis::imd::{ImdAnalyzer, PairHint};
use ampnote::analysis::tone::ChannelInput;
use ampnote::signal::stimulus::TwoToneMethod;

fn input(x: &[f64], fs: f64) -> ChannelInput<'_> {
    ChannelInput {
        channel: 1,
        samples: x,
        sample_rate_hz: fs,
        overload_threshold: 1.0,
        resolution_bits: 53,
    }
}

#[test]
fn iec_worked_example_modulation() {
    let fs = 48_000.0;
    // Scaled by 0.5 so the sum stays inside full scale: ratios are what count.
    let (fl, fh) = (60.0, 7000.0);
    let s = 0.5;
    let parts = [
        (fl, s * 1.0, 0.1),
        (fh, s * 0.25, 0.2),
        (fh - fl, s * 0.02, 0.3),
        (fh + fl, s * 0.02, 0.4),
        (fh - 2.0 * fl, s * 0.01, 0.5),
        (fh + 2.0 * fl, s * 0.01, 0.6),
    ];
    let x = sines(fs, 96_000, &parts);
    for hint in [
        None,
        Some(PairHint {
            method: TwoToneMethod::Modulation,
            low_hz: fl,
            high_hz: fh,
            source: "given",
        }),
    ] {
        let r = ImdAnalyzer::new().analyze(&input(&x, fs), hint).unwrap();
        assert_eq!(r.method, TwoToneMethod::Modulation);
        assert!(
            (r.dm2_percent.unwrap() - 16.0).abs() < 1e-3,
            "d_m2 {:?}",
            r.dm2_percent
        );
        assert!(
            (r.dm3_percent.unwrap() - 8.0).abs() < 1e-3,
            "d_m3 {:?}",
            r.dm3_percent
        );
        let total = (16f64.powi(2) + 8f64.powi(2)).sqrt();
        assert!(
            (r.imd_percent.unwrap() - total).abs() < 1e-3,
            "total {:?}",
            r.imd_percent
        );
        assert!((r.measured_ratio - 4.0).abs() < 1e-6);
    }
}

#[test]
fn difference_frequency_definition() {
    // Two equal tones at 19 and 20 kHz (0.4 each); d_d2 = U(f2 - f1) / (U1 + U2),
    // d_d3 = (U(2 f1 - f2) + U(2 f2 - f1)) / (U1 + U2).
    let fs = 96_000.0;
    let parts = [
        (19_000.0, 0.4, 0.0),
        (20_000.0, 0.4, 1.0),
        (1_000.0, 0.0008, 0.2),
        (18_000.0, 0.0004, 0.3),
        (21_000.0, 0.0002, 0.4),
    ];
    let x = sines(fs, 96_000, &parts);
    let r = ImdAnalyzer::new().analyze(&input(&x, fs), None).unwrap();
    assert_eq!(r.method, TwoToneMethod::DifferenceFrequency);
    assert!(
        (r.dd2_percent.unwrap() - 100.0 * 0.0008 / 0.8).abs() < 1e-4,
        "d_d2 {:?}",
        r.dd2_percent
    );
    assert!(
        (r.dd3_percent.unwrap() - 100.0 * 0.0006 / 0.8).abs() < 1e-4,
        "d_d3 {:?}",
        r.dd3_percent
    );
}

#[test]
fn memoryless_cubic_gives_closed_form_sidebands() {
    // y = x + a3 x^3 with x = A cos(wL t) + B cos(wH t): the f_H +/- 2 f_L sidebands are
    // 3 a3 A^2 B / 4 each and f_H is B + 3 a3 (B^3 / 4 + A^2 B / 2) (trigonometric identities);
    // a cubic makes no second-order products.
    let fs = 48_000.0;
    let (a, b, a3) = (0.4, 0.1, 0.05);
    let x: Vec<f64> = sines(fs, 96_000, &[(250.0, a, 0.0), (8000.0, b, 0.0)])
        .into_iter()
        .map(|v| v + a3 * v * v * v)
        .collect();
    let r = ImdAnalyzer::new()
        .analyze(
            &input(&x, fs),
            Some(PairHint {
                method: TwoToneMethod::Modulation,
                low_hz: 250.0,
                high_hz: 8000.0,
                source: "given",
            }),
        )
        .unwrap();
    let u_h = b + 3.0 * a3 * (b * b * b / 4.0 + a * a * b / 2.0);
    let side = 3.0 * a3 * a * a * b / 4.0;
    let want_dm3 = 100.0 * 2.0 * side / u_h;
    assert!(
        (r.dm3_percent.unwrap() - want_dm3).abs() / want_dm3 < 1e-4,
        "d_m3 {:?} vs {want_dm3}",
        r.dm3_percent
    );
    assert!(r.dm2_percent.unwrap() < 1e-6, "d_m2 {:?}", r.dm2_percent);
}
