//! One capture in every container ampnote reads, written by libsndfile (PyPI's soundfile, see
//! `fixtures/make_format_fixtures.py`): WAV, RF64, FLAC and AIFF holding the same 24-bit samples
//! must give the same samples and so the very same figures; 64-bit float and 16-bit FLAC the
//! closed-form figures of the sines written (in `fixtures/formats/expected.json`).

use ampnote::analysis::tone::{ChannelInput, ToneAnalyzer, ToneConfig, ToneResult};
use ampnote::calibration::Calibration;
use ampnote::capture::{Capture, Container, Encoding, StoredChannel, StoredSamples};
use std::path::{Path, PathBuf};

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures/formats")
        .join(name)
}

#[derive(serde::Deserialize)]
struct Expected {
    sample_rate_hz: u32,
    frames: usize,
    channel_1: Channel1,
    channel_2: Channel2,
}

#[derive(serde::Deserialize)]
struct Channel1 {
    fundamental_hz: f64,
    fundamental_dbfs: f64,
    h2_dbc: f64,
    h3_dbc: f64,
}

#[derive(serde::Deserialize)]
struct Channel2 {
    fundamental_hz: f64,
    fundamental_dbfs: f64,
}

fn expected() -> Expected {
    serde_json::from_str(&std::fs::read_to_string(fixture("expected.json")).unwrap()).unwrap()
}

fn analyse(c: &Capture) -> Vec<ToneResult> {
    let analyzer = ToneAnalyzer::new(ToneConfig::default()).unwrap();
    c.channel_numbers
        .iter()
        .zip(&c.channels)
        .map(|(&ch, x)| {
            analyzer
                .analyze(
                    &ChannelInput {
                        channel: ch,
                        samples: x,
                        sample_rate_hz: c.sample_rate_hz as f64,
                        overload_threshold: c.encoding.overload_threshold(),
                        resolution_bits: c.encoding.resolution_bits(),
                    },
                    &Calibration::default(),
                )
                .unwrap()
        })
        .collect()
}

fn check_closed_form(r: &[ToneResult], e: &Expected, tol_db: f64, what: &str) {
    let (a, b) = (&r[0], &r[1]);
    assert!(
        (a.fundamental_hz - e.channel_1.fundamental_hz).abs() < 1e-3,
        "{what}"
    );
    assert!(
        (a.fundamental_dbfs - e.channel_1.fundamental_dbfs).abs() < tol_db,
        "{what}: {}",
        a.fundamental_dbfs
    );
    assert!(
        (a.harmonics[0].level_dbc - e.channel_1.h2_dbc).abs() < tol_db,
        "{what}: H2 {}",
        a.harmonics[0].level_dbc
    );
    assert!(
        (a.harmonics[1].level_dbc - e.channel_1.h3_dbc).abs() < tol_db,
        "{what}: H3 {}",
        a.harmonics[1].level_dbc
    );
    assert!(
        (b.fundamental_hz - e.channel_2.fundamental_hz).abs() < 1e-3,
        "{what}"
    );
    assert!(
        (b.fundamental_dbfs - e.channel_2.fundamental_dbfs).abs() < tol_db,
        "{what}: {}",
        b.fundamental_dbfs
    );
}

#[test]
fn the_same_capture_reads_the_same_in_every_container() {
    let e = expected();
    let wav = Capture::read(&fixture("tone-24.wav"), false).unwrap();
    assert_eq!(wav.sample_rate_hz, e.sample_rate_hz);
    assert_eq!(wav.frames(), e.frames);
    assert_eq!(wav.encoding, Encoding::Int { bits: 24 });
    let reference = analyse(&wav);
    // Source: closed form of the sines written; 0.01 dB leaves room for the -100 dBFS noise.
    check_closed_form(&reference, &e, 0.01, "WAV");
    for (name, container) in [
        ("tone-24.rf64", Container::Rf64),
        ("tone-24.flac", Container::Flac),
        ("tone-24.aiff", Container::Aiff),
    ] {
        let path = fixture(name);
        let info = Capture::probe(&path).unwrap();
        assert_eq!(info.container, container, "{name}");
        assert_eq!(info.encoding, Encoding::Int { bits: 24 }, "{name}");
        assert_eq!(info.channel_count, 2, "{name}");
        assert_eq!(info.frames_declared, e.frames as u64, "{name}");
        let c = Capture::read(&path, false).unwrap();
        // The same samples, bit for bit, so the same figures exactly.
        assert_eq!(
            c.channels, wav.channels,
            "{name}: samples differ from the WAV's"
        );
        let r = analyse(&c);
        for (x, y) in r.iter().zip(&reference) {
            assert_eq!(x.fundamental_dbfs, y.fundamental_dbfs, "{name}");
            assert_eq!(x.thd_percent, y.thd_percent, "{name}");
            assert_eq!(x.thdn_db, y.thdn_db, "{name}");
            assert_eq!(x.noise_dbfs, y.noise_dbfs, "{name}");
        }
        // One channel alone, as the commands read them.
        let one = Capture::read_channels(&path, false, Some(&[2])).unwrap();
        assert_eq!(one.channels[0], wav.channels[1], "{name}: channel 2 alone");
    }
}

#[test]
fn float64_and_16_bit_flac_give_the_closed_form() {
    let e = expected();
    let f64wav = Capture::read(&fixture("tone-f64.wav"), false).unwrap();
    assert_eq!(f64wav.encoding, Encoding::Float64);
    assert_eq!(f64wav.encoding.resolution_bits(), 53);
    check_closed_form(&analyse(&f64wav), &e, 0.01, "64-bit float WAV");
    let flac16 = Capture::read(&fixture("tone-16.flac"), false).unwrap();
    assert_eq!(flac16.encoding, Encoding::Int { bits: 16 });
    // 16-bit rounding adds noise at about -101 dBFS: still 0.02 dB on these lines.
    check_closed_form(&analyse(&flac16), &e, 0.02, "16-bit FLAC");
}

#[test]
fn compact_storage_keeps_every_bit() {
    // 24-bit samples fit a 32-bit float's 24-bit mantissa exactly; 64-bit float needs f64.
    for name in ["tone-24.wav", "tone-24.flac", "tone-24.rf64"] {
        let path = fixture(name);
        let full = Capture::read_channels(&path, false, Some(&[1])).unwrap();
        let stored = StoredChannel::read(&path, false, 1).unwrap();
        match &stored.samples {
            StoredSamples::F32(v) => {
                assert!(v
                    .iter()
                    .zip(&full.channels[0])
                    .all(|(&a, &b)| a as f64 == b))
            }
            StoredSamples::F64(_) => panic!("{name}: 24-bit should be stored as f32"),
        }
    }
    let stored = StoredChannel::read(&fixture("tone-f64.wav"), false, 1).unwrap();
    assert!(matches!(stored.samples, StoredSamples::F64(_)));
}

#[test]
fn damaged_coded_files_are_refused_clearly() {
    let d = super::common::tmpdir("formats");
    let bytes = std::fs::read(fixture("tone-24.flac")).unwrap();
    // Cut in the middle of the audio: refused, or read with --accept-truncated.
    let cut = d.join("cut.flac");
    std::fs::write(&cut, &bytes[..bytes.len() / 2]).unwrap();
    let err = Capture::read(&cut, false).unwrap_err().to_string();
    assert!(
        err.contains("truncated") || err.contains("cannot be decoded"),
        "{err}"
    );
    if let Ok(c) = Capture::read(&cut, true) {
        assert!(c.truncated);
        assert!(c.frames() > 0 && c.frames() < 24_000);
    }
    // A header and nothing else.
    let head = d.join("head.flac");
    std::fs::write(&head, &bytes[..60]).unwrap();
    assert!(Capture::read(&head, false).is_err());
    // Corrupt audio frames (the frame CRCs no longer match).
    let mut bad = bytes.clone();
    let n = bad.len();
    for b in &mut bad[n / 3..n / 3 + 200] {
        *b ^= 0x5a;
    }
    let garbled = d.join("garbled.flac");
    std::fs::write(&garbled, &bad).unwrap();
    let r = Capture::read(&garbled, false);
    assert!(r.is_err(), "a garbled FLAC must not be read as if sound");
    // Not audio at all.
    let text = d.join("notes.flac");
    std::fs::write(&text, "bias 40 mA\n").unwrap();
    let err = Capture::read(&text, false).unwrap_err().to_string();
    assert!(err.contains("not an audio file ampnote reads"), "{err}");
}
