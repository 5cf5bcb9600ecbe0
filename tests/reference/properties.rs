//! Property tests (proptest, fixed case counts): random tones recover their closed-form levels
//! and phases; arbitrary bytes and arbitrary samples never make ampnote panic.

use super::common::{db, sines};
use ampnote::analysis::tone::{wrap_degrees, ChannelInput, ToneAnalyzer, ToneConfig};
use ampnote::calibration::Calibration;
use ampnote::capture::Capture;
use proptest::prelude::*;
use std::path::Path;

proptest! {
    #![proptest_config(ProptestConfig { cases: 40, ..ProptestConfig::default() })]

    /// A fundamental with H2 and H3 of random level and phase: levels within 0.05 dB, phases
    /// within 0.5 degree (closed form: the signal is exactly the sum of its sines).
    #[test]
    fn random_tone_levels_and_phases(
        level_db in -80.0f64..-0.5,
        f0 in 40.0f64..6000.0,
        phi1 in -3.1f64..3.1,
        h2_dbc in -100.0f64..-20.0,
        h3_dbc in -100.0f64..-20.0,
        p2 in -179.0f64..179.0,
        p3 in -179.0f64..179.0,
    ) {
        let fs = 48_000.0;
        let a1 = 10f64.powf(level_db / 20.0) * 0.9;
        let parts = [
            (f0, a1, phi1),
            (2.0 * f0, a1 * 10f64.powf(h2_dbc / 20.0), p2.to_radians() + 2.0 * phi1),
            (3.0 * f0, a1 * 10f64.powf(h3_dbc / 20.0), p3.to_radians() + 3.0 * phi1),
        ];
        let x = sines(fs, 48_000, &parts);
        let r = super::common::analyze(&x, fs);
        prop_assert!((r.fundamental_dbfs - db(a1)).abs() < 0.01, "level {} vs {}", r.fundamental_dbfs, db(a1));
        prop_assert!((r.harmonics[0].level_dbc - h2_dbc).abs() < 0.05, "H2 {} vs {h2_dbc}", r.harmonics[0].level_dbc);
        prop_assert!((r.harmonics[1].level_dbc - h3_dbc).abs() < 0.05, "H3 {} vs {h3_dbc}", r.harmonics[1].level_dbc);
        prop_assert!(wrap_degrees(r.harmonics[0].phase_deg - p2).abs() < 0.5, "H2 phase {} vs {p2}", r.harmonics[0].phase_deg);
        prop_assert!(wrap_degrees(r.harmonics[1].phase_deg - p3).abs() < 0.5, "H3 phase {} vs {p3}", r.harmonics[1].phase_deg);
        prop_assert!((r.fundamental_hz - f0).abs() / f0 < 1e-6);
    }

    /// Arbitrary bytes, with and without a plausible WAV header in front: an error or a capture,
    /// never a panic.
    #[test]
    fn reader_never_panics(bytes in proptest::collection::vec(any::<u8>(), 0..2048), with_header in any::<bool>()) {
        let mut data = Vec::new();
        if with_header {
            data.extend_from_slice(b"RIFF\x24\x08\x00\x00WAVEfmt \x10\x00\x00\x00\x01\x00\x02\x00\x80\xbb\x00\x00\x00\xee\x02\x00\x04\x00\x10\x00data\x00\x08\x00\x00");
        }
        data.extend_from_slice(&bytes);
        let _ = Capture::from_reader(std::io::Cursor::new(&data), Path::new("fuzz.wav"), true);
        let _ = Capture::from_reader(std::io::Cursor::new(&data), Path::new("fuzz.wav"), false);
    }

    /// Arbitrary samples (including NaN, infinities, huge and tiny values): an error or a result,
    /// never a panic.
    #[test]
    fn analysis_never_panics(samples in proptest::collection::vec(prop_oneof![
        any::<f64>(),
        -1.0f64..1.0,
        Just(0.0),
        Just(f64::NAN),
    ], 0..3000), fs in prop_oneof![Just(8000.0), Just(48_000.0), Just(384_000.0)]) {
        let analyzer = ToneAnalyzer::new(ToneConfig { band_high_hz: Some(fs / 2.0), ..ToneConfig::default() }).unwrap();
        let _ = analyzer.analyze(
            &ChannelInput { channel: 1, samples: &samples, sample_rate_hz: fs, overload_threshold: 1.0, resolution_bits: 24 },
            &Calibration::default(),
        );
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 200, ..ProptestConfig::default() })]

    /// Arbitrary text as a calibration profile, a model or a stimulus description: an error or a
    /// value, never a panic.
    #[test]
    fn text_inputs_never_panic(text in ".{0,400}", toml_like in "(\\[[a-z]{1,10}\\]\n)?([a-z_]{1,15} = (-?[0-9.]{1,8}|\"[a-z ]{0,8}\")\n){0,8}") {
        let p = std::path::Path::new("fuzz.toml");
        let _ = ampnote::calibration::Profile::parse(&text, p);
        let _ = ampnote::calibration::Profile::parse(&toml_like, p);
        let _ = ampnote::rig::model::Model::parse(&toml_like, "fuzz");
        let _ = ampnote::signal::stimulus::Description::from_json(&text);
    }
}
