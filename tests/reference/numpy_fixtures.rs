//! Captures made by `fixtures/make_tone_fixtures.py` (numpy 2.x, scipy.io.wavfile) with the
//! figures numpy computed for the samples as stored (see the script's docstring). Tolerances:
//! 0.05 dB for harmonic and hum levels (the accuracy target) plus three standard deviations
//! of the noise in the line, 0.2
//! degrees for their phases, 0.02 dB for THD and THD+N, 0.15 dB for noise (a windowed estimate
//! of one noise realisation differs from its rectangular periodogram by about
//! sqrt(ENBW / band bins), 1 % or 0.05 dB, here; three standard deviations allowed).

use ampnote::analysis::tone::{ChannelInput, Mains, ToneAnalyzer, ToneConfig};
use ampnote::analysis::weighting::Weighting;
use ampnote::calibration::Calibration;
use ampnote::capture::Capture;
use serde_json::Value;
use std::path::Path;

fn fixture_cases() -> Vec<(String, Value)> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("fixtures/tone");
    let mut out: Vec<(String, Value)> = std::fs::read_dir(&dir)
        .expect("fixtures/tone exists")
        .filter_map(|e| e.ok())
        .map(|e| e.path())
        .filter(|p| p.extension().is_some_and(|x| x == "json"))
        .map(|p| {
            let v: Value = serde_json::from_str(&std::fs::read_to_string(&p).unwrap()).unwrap();
            (p.file_stem().unwrap().to_string_lossy().to_string(), v)
        })
        .collect();
    out.sort_by(|a, b| a.0.cmp(&b.0));
    assert!(
        out.len() >= 4,
        "expected the four numpy fixtures, found {}",
        out.len()
    );
    out
}

fn f(v: &Value) -> f64 {
    v.as_f64().expect("number")
}

#[test]
fn numpy_fixtures_agree() {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("fixtures/tone");
    for (name, exp) in fixture_cases() {
        let cap = Capture::read(&dir.join(exp["file"].as_str().unwrap()), false).unwrap();
        for weighting in [Weighting::None, Weighting::A] {
            // Mains is detected: the fixtures hold 50 Hz or 60 Hz families, or none.
            let analyzer = ToneAnalyzer::new(ToneConfig {
                weighting,
                mains: Mains::Auto,
                ..ToneConfig::default()
            })
            .unwrap();
            for ch in exp["channels"].as_array().unwrap() {
                let c = ch["channel"].as_u64().unwrap() as usize;
                let r = analyzer
                    .analyze(
                        &ChannelInput {
                            channel: c,
                            samples: &cap.channels[c - 1],
                            sample_rate_hz: cap.sample_rate_hz as f64,
                            overload_threshold: cap.encoding.overload_threshold(),
                            resolution_bits: cap.encoding.resolution_bits(),
                        },
                        &Calibration::default(),
                    )
                    .unwrap();
                let ctx = format!("{name} ch{c}");
                let rel_db = |a: f64, b: f64| 20.0 * (a / b).log10();
                assert!(
                    (r.fundamental_hz - f(&ch["fundamental_hz"])).abs() / f(&ch["fundamental_hz"])
                        < 1e-6,
                    "{ctx}: f0 {}",
                    r.fundamental_hz
                );
                assert!(
                    (r.fundamental_dbfs - f(&ch["fundamental_dbfs"])).abs() < 0.01,
                    "{ctx}: level {}",
                    r.fundamental_dbfs
                );
                let thd = rel_db(r.thd_percent.expect("THD measured"), f(&ch["thd_percent"]));
                assert!(
                    thd.abs() < 0.02,
                    "{ctx}: THD {} % vs numpy {} % ({thd:+.4} dB)",
                    r.thd_percent.expect("THD measured"),
                    ch["thd_percent"]
                );
                let thdn = rel_db(r.thdn_percent, f(&ch["thdn_percent"]));
                assert!(
                    thdn.abs() < 0.02,
                    "{ctx}: THD+N {} % vs numpy {} % ({thdn:+.4} dB)",
                    r.thdn_percent,
                    ch["thdn_percent"]
                );
                let key = match weighting {
                    Weighting::None => "noise_dbfs",
                    Weighting::A => "noise_a_weighted_dbfs",
                };
                assert!(
                    (r.noise_dbfs - f(&ch[key])).abs() < 0.15,
                    "{ctx}: {key} {:.3} vs numpy {:.3}",
                    r.noise_dbfs,
                    f(&ch[key])
                );
                // Noise in one fitted line: the band's noise power times ENBW / band bins. A line
                // `snr` dB above it has a level spread of about 8.686 / sqrt(2) * 10^(-snr/20) dB
                // (one standard deviation); allow three on top of the 0.05 dB target.
                let band = (20_000.0f64.min(cap.sample_rate_hz as f64 / 2.0) - 20.0)
                    / r.analysis.bin_width_hz;
                let line_noise_dbfs =
                    f(&ch["noise_dbfs"]) + 10.0 * (r.analysis.enbw_bins / band).log10();
                let tol = |level_dbfs: f64| {
                    0.05 + 3.0 * 6.142 * 10f64.powf(-(level_dbfs - line_noise_dbfs) / 20.0)
                };
                for h in ch["harmonics"].as_array().unwrap() {
                    let order = h["order"].as_u64().unwrap() as usize;
                    let got = r
                        .harmonics
                        .iter()
                        .find(|x| x.order == order)
                        .expect("harmonic reported");
                    let t = tol(f(&h["level_dbc"]) + r.fundamental_dbfs);
                    assert!(
                        (got.level_dbc - f(&h["level_dbc"])).abs() < t,
                        "{ctx}: H{order} {} dBc vs {} (tolerance {t:.3} dB)",
                        got.level_dbc,
                        h["level_dbc"]
                    );
                    let dp =
                        ampnote::analysis::tone::wrap_degrees(got.phase_deg - f(&h["phase_deg"]));
                    assert!(
                        dp.abs() < 0.2,
                        "{ctx}: H{order} phase {} vs {}",
                        got.phase_deg,
                        h["phase_deg"]
                    );
                }
                for h in ch["hum"].as_array().unwrap() {
                    let fh = f(&h["frequency_hz"]);
                    let got = r
                        .hum
                        .iter()
                        .find(|x| (x.frequency_hz - fh).abs() < 0.01)
                        .unwrap_or_else(|| {
                            panic!(
                                "{ctx}: hum line {fh} Hz not reported (mains {} Hz)",
                                r.mains_hz
                            )
                        });
                    let t = tol(f(&h["level_dbc"]) + r.fundamental_dbfs);
                    assert!(
                        (got.level_dbc - f(&h["level_dbc"])).abs() < t,
                        "{ctx}: hum {fh} Hz {} dBc vs {} (tolerance {t:.3} dB)",
                        got.level_dbc,
                        h["level_dbc"]
                    );
                    assert!(
                        !got.upper_bound,
                        "{ctx}: hum {fh} Hz flagged at the noise floor"
                    );
                }
                if !ch["hum"].as_array().unwrap().is_empty() {
                    assert_eq!(r.mains_source, "detected", "{ctx}");
                }
            }
        }
    }
}
