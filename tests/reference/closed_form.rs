//! Closed-form Fourier series (standard results; REFERENCES.md "Other closed forms" and "Ideal
//! hard clipper"). Each signal is synthesised band-limited (its series up to Nyquist), so the
//! sampled signal holds exactly the series' terms; the expected THD is the series truncated at the
//! measurement band, as REFERENCES.md prescribes.

use super::common::{analyze_with, db, sines};
use ampnote::analysis::tone::ToneConfig;
use std::f64::consts::PI;

/// `(order, amplitude, phase)` for every series term below Nyquist.
fn series(f0: f64, fs: f64, coef: impl Fn(usize) -> f64) -> Vec<(f64, f64, f64)> {
    (1..)
        .take_while(|&n| n as f64 * f0 < fs / 2.0 - 50.0)
        .filter_map(|n| {
            let b = coef(n);
            (b != 0.0).then(|| (n as f64 * f0, b.abs(), if b < 0.0 { PI } else { 0.0 }))
        })
        .collect()
}

/// THD_F of the series truncated at `band_hi`, from the coefficients alone.
fn truncated_thd(f0: f64, band_hi: f64, coef: impl Fn(usize) -> f64) -> f64 {
    let b1 = coef(1);
    let h: f64 = (2..)
        .take_while(|&n| n as f64 * f0 <= band_hi)
        .map(|n| coef(n).powi(2))
        .sum();
    h.sqrt() / b1.abs()
}

fn config_all_harmonics(f0: f64) -> ToneConfig {
    ToneConfig {
        max_harmonic: (20_000.0 / f0) as usize,
        ..ToneConfig::default()
    }
}

fn check_series(
    name: &str,
    f0: f64,
    fs: f64,
    coef: impl Fn(usize) -> f64 + Copy,
) -> ampnote::analysis::tone::ToneResult {
    let x = sines(fs, fs as usize, &series(f0, fs, coef));
    let r = analyze_with(&x, fs, config_all_harmonics(f0));
    let expected = truncated_thd(f0, 20_000.0, coef);
    let err_db = db(r.thd_percent.expect("THD measured") / 100.0) - db(expected);
    assert!(
        err_db.abs() < 0.01,
        "{name}: THD {:.6} % vs truncated series {:.6} % ({err_db:+.4} dB; f0 {f0} Hz, fs {fs} Hz)",
        r.thd_percent.expect("THD measured"),
        expected * 100.0
    );
    // AES17 THD+N: all in-band terms but the fundamental over all in-band terms (no noise here).
    let thd_r = expected / (1.0 + expected * expected).sqrt(); // IEC 60268-3 THD_R = THD_F / sqrt(1 + THD_F^2)
    let err_n = db(r.thdn_percent / 100.0) - db(thd_r);
    assert!(
        err_n.abs() < 0.01,
        "{name}: THD+N {:.6} % vs THD_R {:.6} % ({err_n:+.4} dB)",
        r.thdn_percent,
        thd_r * 100.0
    );
    // Individual harmonics against their coefficients.
    for h in r.harmonics.iter().filter(|h| coef(h.order) != 0.0) {
        let want = db(coef(h.order).abs() / coef(1).abs());
        assert!(
            (h.level_dbc - want).abs() < 0.01,
            "{name}: H{} {:.4} dBc vs {want:.4} dBc",
            h.order,
            h.level_dbc
        );
    }
    r
}

#[test]
fn square_wave_series() {
    // Square wave: b_n = 4/(pi n) for odd n. Infinite-sum THD_F = sqrt(pi^2/8 - 1) = 48.34 %.
    let coef = |n: usize| {
        if n % 2 == 1 {
            4.0 / (PI * n as f64)
        } else {
            0.0
        }
    };
    let r = check_series("square", 211.7, 96_000.0, coef);
    // The band holds 94 harmonics; the missing tail, sum over odd n > 94 of 1/n^2, is about 1/(2*95).
    let infinite = (PI * PI / 8.0 - 1.0).sqrt();
    let with_tail = ((r.thd_percent.expect("THD measured") / 100.0).powi(2) + 1.0 / 190.0).sqrt();
    assert!(
        (with_tail - infinite).abs() < 0.002,
        "square THD with tail {with_tail:.4} vs {infinite:.4}"
    );
}

#[test]
fn triangle_wave_series() {
    // Triangle: b_n = 8/(pi^2 n^2) (-1)^((n-1)/2), odd n. Infinite-sum THD_F = 12.12 %.
    let coef = |n: usize| {
        if n % 2 == 1 {
            let s = if (n / 2) % 2 == 0 { 1.0 } else { -1.0 };
            s * 8.0 / (PI * PI * (n * n) as f64)
        } else {
            0.0
        }
    };
    let r = check_series("triangle", 503.3, 48_000.0, coef);
    // The 1/n^4 tail beyond the band is negligible: the truncated figure is the textbook 12.12 %.
    assert!(
        (r.thd_percent.expect("THD measured") - 12.12).abs() < 0.01,
        "triangle THD {:.4} % vs 12.12 %",
        r.thd_percent.expect("THD measured")
    );
    // Alternating signs: H3 is inverted (phase 180), H5 not (phase 0); the convention's phase
    // is phi_n - n phi_1 with phi_1 = 0 here.
    let h3 = &r.harmonics[1];
    let h5 = &r.harmonics[3];
    assert!(
        (h3.phase_deg.abs() - 180.0).abs() < 0.01,
        "triangle H3 phase {}",
        h3.phase_deg
    );
    assert!(
        h5.phase_deg.abs() < 0.01,
        "triangle H5 phase {}",
        h5.phase_deg
    );
}

#[test]
fn sawtooth_series() {
    // Sawtooth: b_n = 2/(pi n) (-1)^(n+1). Infinite-sum THD_F = sqrt(pi^2/6 - 1) = 80.31 %.
    let coef = |n: usize| {
        let s = if n % 2 == 1 { 1.0 } else { -1.0 };
        s * 2.0 / (PI * n as f64)
    };
    let r = check_series("sawtooth", 1001.7, 48_000.0, coef);
    for h in &r.harmonics {
        let want = if h.order % 2 == 0 { 180.0 } else { 0.0 };
        assert!(
            (h.phase_deg.abs() - want).abs() < 0.01,
            "sawtooth H{} phase {} vs {want}",
            h.order,
            h.phase_deg
        );
    }
}

/// Ideal hard clipper: closed-form series (REFERENCES.md, "Ideal hard clipper").
fn clipped_coef(c: f64) -> impl Fn(usize) -> f64 + Copy {
    let alpha = c.asin();
    move |n: usize| {
        if n == 1 {
            (2.0 * alpha + (2.0 * alpha).sin()) / PI
        } else if n % 2 == 1 {
            let nf = n as f64;
            4.0 * (nf * (nf * alpha).sin() * alpha.cos() - alpha.sin() * (nf * alpha).cos())
                / (PI * nf * (nf * nf - 1.0))
        } else {
            0.0
        }
    }
}

#[test]
fn hard_clipped_sine_matches_table() {
    // REFERENCES.md table: c, b1, b3, b5, b7, THD_F (infinite sum).
    let table = [
        (0.9, 0.962614, 0.031635, 0.022018, 0.011508, 4.2199),
        (0.7, 0.811880, 0.108204, 0.019909, 0.016039, 13.7588),
        (0.5, 0.608998, 0.137832, 0.027566, 0.009845, 23.2938),
    ];
    for (c, b1, b3, b5, b7, thd) in table {
        let coef = clipped_coef(c);
        let r = check_series(&format!("clipped at {c}"), 97.1, 96_000.0, coef);
        for (order, b) in [(3usize, b3), (5, b5), (7, b7)] {
            let h = &r.harmonics[order - 2];
            let want = db(b / b1);
            // Table values carry 6 decimals: 0.005 dB covers their rounding.
            assert!(
                (h.level_dbc - want).abs() < 0.005,
                "clip {c}: H{order} {:.4} dBc vs table {want:.4} dBc",
                h.level_dbc
            );
        }
        let fund_dbfs = db(b1);
        assert!(
            (r.fundamental_dbfs - fund_dbfs).abs() < 0.001,
            "clip {c}: fundamental {} vs {fund_dbfs}",
            r.fundamental_dbfs
        );
        // Harmonics above 20 kHz (order > 205) fall like 1/n^2: the band keeps all but ~1e-5 of THD.
        assert!(
            (r.thd_percent.expect("THD measured") - thd).abs() / thd < 0.002,
            "clip {c}: THD {:.4} % vs table {thd} %",
            r.thd_percent.expect("THD measured")
        );
    }
}

#[test]
fn memoryless_polynomial_closed_form() {
    // y = x + a2 x^2 + a3 x^3, x = A sin(w t + phi): DC = a2 A^2/2, H1 = A + 3 a3 A^3/4,
    // H2 = a2 A^2/2 as -cos(2wt) (phase -90 deg), H3 = a3 A^3/4 as -sin(3wt) (phase 180 deg)
    // (trigonometric identities; REFERENCES.md "Other closed forms").
    let (fs, f0, amp, phi) = (48_000.0, 997.0, 0.6, 0.4);
    for (a2, a3) in [(0.05, 0.02), (-0.01, 0.003), (0.001, -0.03)] {
        let x: Vec<f64> = sines(fs, 48_000, &[(f0, amp, phi)])
            .into_iter()
            .map(|v| v + a2 * v * v + a3 * v * v * v)
            .collect();
        let r = super::common::analyze(&x, fs);
        let h1 = amp + 3.0 * a3 * amp.powi(3) / 4.0;
        let h2 = a2 * amp * amp / 2.0;
        let h3 = a3 * amp.powi(3) / 4.0;
        let ctx = format!("a2 {a2}, a3 {a3}, A {amp}");
        assert!(
            (r.fundamental_dbfs - db(h1.abs())).abs() < 1e-3,
            "{ctx}: H1 {}",
            r.fundamental_dbfs
        );
        assert!(
            (r.harmonics[0].level_dbc - db(h2.abs() / h1)).abs() < 0.01,
            "{ctx}: H2 {}",
            r.harmonics[0].level_dbc
        );
        assert!(
            (r.harmonics[1].level_dbc - db(h3.abs() / h1)).abs() < 0.01,
            "{ctx}: H3 {}",
            r.harmonics[1].level_dbc
        );
        let want_p2 = if a2 > 0.0 { -90.0 } else { 90.0 };
        let want_p3 = if a3 > 0.0 { 180.0 } else { 0.0 };
        let p2 = r.harmonics[0].phase_deg;
        let p3 = r.harmonics[1].phase_deg;
        assert!(
            (p2 - want_p2).abs() < 0.05,
            "{ctx}: H2 phase {p2} vs {want_p2}"
        );
        assert!(
            (ampnote::analysis::tone::wrap_degrees(p3 - want_p3)).abs() < 0.05,
            "{ctx}: H3 phase {p3} vs {want_p3}"
        );
        assert!(
            (r.dc_offset - h2).abs() < 1e-7,
            "{ctx}: DC {} vs {h2}",
            r.dc_offset
        );
        // Higher orders are absent: at the analysis's numerical floor, far below -150 dBc.
        assert!(
            r.harmonics[2..].iter().all(|h| h.level_dbc < -150.0),
            "{ctx}: spurious harmonics {:?}",
            r.harmonics
        );
    }
}

#[test]
fn residual_view_shows_the_added_harmonic() {
    // x = sin(wt) + 0.01 sin(3wt + 0.5), w = 2 pi 997 Hz: with the fundamental fitted out, what remains over one
    // period is 0.01 sin(3 theta + 0.5), theta the fundamental's phase: a peak of 1 % of the
    // fundamental's (closed form). The spectrum's slice holding the fundamental reads its peak
    // amplitude, 0 dB re a full-scale sine, and the one holding H3 reads -40 dB (window's coherent
    // gain taken out).
    // 997 Hz: the samples fall at every phase (at 1 kHz they would sit 7.5 degrees apart).
    let fs = 48_000.0;
    let f0 = 997.0;
    let x: Vec<f64> = (0..48_000)
        .map(|i| {
            let t = i as f64 / fs;
            let w = 2.0 * std::f64::consts::PI * f0 * t;
            w.sin() + 0.01 * (3.0 * w + 0.5).sin()
        })
        .collect();
    let v = ampnote::analysis::views::tone_views(&x, fs, f0).unwrap();
    let peak = v.residual.iter().map(|p| p.1.abs()).fold(0.0, f64::max);
    assert!((peak - 1.0).abs() < 0.01, "residual peak {peak} %");
    let theta_of_peak = v
        .residual
        .iter()
        .max_by(|a, b| a.1.total_cmp(&b.1))
        .unwrap()
        .0;
    // 3 theta + 0.5 rad = 90 deg (mod 120 deg in theta).
    let want = (90.0 - 0.5f64.to_degrees()) / 3.0;
    let off = ((theta_of_peak - want) / 120.0).round() * 120.0;
    assert!(
        (theta_of_peak - off - want).abs() < 2.0,
        "peak at {theta_of_peak} deg, want {want} (mod 120)"
    );
    let at = |f: f64| {
        v.spectrum
            .iter()
            .min_by(|a, b| (a.0 / f).ln().abs().total_cmp(&(b.0 / f).ln().abs()))
            .unwrap()
            .1
    };
    assert!(at(f0).abs() < 0.1, "fundamental {} dB", at(f0));
    assert!((at(3.0 * f0) + 40.0).abs() < 0.1, "H3 {} dB", at(3.0 * f0));
}
