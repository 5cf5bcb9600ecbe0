//! The stimulus description is untrusted input: a file's description chunk, edited by hand or
//! damaged, with any field set to a huge, tiny, negative, non-finite or above-Nyquist value, is
//! either refused with the field named, or leads to an analysis that ends without a panic and
//! with sizes bounded by the file itself. Source: the description's own definitions (the sweep
//! lasts L ln(f2/f1); frequencies lie below Nyquist; the steps lie inside the file).

use super::common::tmpdir;
use ampnote::analysis::imd::{ImdAnalyzer, PairHint};
use ampnote::analysis::sweep::{ResponseAnalyzer, ResponseConfig, SweepParams};
use ampnote::analysis::tone::ChannelInput;
use ampnote::capture::Capture;
use ampnote::signal::stimulus::{steps, sweep, two_tone, Common, Description, Kind, TwoToneMethod};
use proptest::prelude::*;

fn hostile() -> impl Strategy<Value = f64> {
    prop_oneof![
        Just(f64::NAN),
        Just(f64::INFINITY),
        Just(f64::NEG_INFINITY),
        Just(0.0),
        Just(-1.0),
        Just(1e-300),
        Just(1e308),
        Just(7999.0),
        Just(24_000.0),
        Just(30_000.0),
        -1e6f64..1e6,
    ]
}

fn hostile_count() -> impl Strategy<Value = usize> {
    prop_oneof![
        Just(0usize),
        Just(1),
        Just(usize::MAX),
        Just(1 << 40),
        0usize..200_000
    ]
}

/// Which field to spoil, and with what.
#[derive(Debug, Clone)]
enum Spoil {
    Number(usize, f64),
    Count(usize, usize),
    Rate(u32),
}

fn spoil() -> impl Strategy<Value = Spoil> {
    prop_oneof![
        (0usize..8, hostile()).prop_map(|(i, v)| Spoil::Number(i, v)),
        (0usize..4, hostile_count()).prop_map(|(i, v)| Spoil::Count(i, v)),
        prop_oneof![
            Just(0u32),
            Just(7999),
            Just(44_100),
            Just(u32::MAX),
            Just(384_001)
        ]
        .prop_map(Spoil::Rate),
    ]
}

fn apply(d: &mut Description, s: &Spoil) {
    match *s {
        Spoil::Rate(r) => d.sample_rate_hz = r,
        Spoil::Count(i, v) => match i {
            0 => d.signal_start_sample = v,
            1 => d.signal_samples = v,
            2 => d.total_samples = v,
            _ => d.channels = v,
        },
        Spoil::Number(i, v) => match (&mut d.kind, i) {
            (_, 0) => d.level_dbfs = v,
            (_, 1) => d.lead_s = v,
            (Kind::Sweep { start_hz, .. }, 2) => *start_hz = v,
            (Kind::Sweep { stop_hz, .. }, 3) => *stop_hz = v,
            (Kind::Sweep { rate_s, .. }, 4) => *rate_s = v,
            (Kind::Sweep { fade_in_s, .. }, 5) => *fade_in_s = v,
            (Kind::Sweep { duration_s, .. }, _) => *duration_s = v,
            (Kind::TwoTone { low_hz, .. }, 2 | 3) => *low_hz = v,
            (Kind::TwoTone { high_hz, .. }, 4 | 5) => *high_hz = v,
            (Kind::TwoTone { ratio, .. }, _) => *ratio = v,
            (Kind::Steps { frequency_hz, .. }, 2) => *frequency_hz = v,
            (Kind::Steps { dwell_s, .. }, 3) => *dwell_s = v,
            (Kind::Steps { step_db, .. }, 4) => *step_db = v,
            (Kind::Steps { steps, .. }, 5) => steps[0].level_dbfs = v,
            (Kind::Steps { steps, .. }, _) => {
                steps[0].analyse_to_sample = (v.abs().min(1e18)) as usize
            }
            (Kind::Tone { frequency_hz }, _) => *frequency_hz = v,
            (Kind::Square { frequency_hz, .. }, 2..=4) => *frequency_hz = v,
            (Kind::Square { bandwidth_hz, .. }, _) => *bandwidth_hz = v,
        },
    }
}

/// Write the stimulus with a spoiled description and run what would read it.
fn exercise(kind: usize, s: &Spoil, path: &std::path::Path) {
    let c = Common {
        lead_s: 0.05,
        tail_s: 0.1,
        ..Common::mono(48_000, -12.0)
    };
    let stim = match kind {
        0 => sweep(&c, 20.0, 20_000.0, 0.5).unwrap(),
        1 => two_tone(&c, TwoToneMethod::Modulation, 60.0, 7000.0, 4.0, 0.5).unwrap(),
        3 => ampnote::signal::stimulus::square(&c, 1000.0, None, 0.5).unwrap(),
        _ => steps(&c, 1000.0, -20.0, -12.0, 4.0, 0.2, 0.05).unwrap(),
    };
    let mut d = stim.description.clone();
    apply(&mut d, s);
    ampnote::signal::wav::write_wav_described(
        path,
        48_000,
        std::slice::from_ref(&stim.signal),
        ampnote::signal::wav::WavFormat::Float32,
        1,
        Some(&d.to_json()),
    )
    .unwrap();
    let cap = Capture::read(path, false).unwrap();
    let Ok(desc) = Description::of_capture(&cap) else {
        return; // refused, as it should be for a spoiled field
    };
    let x = &cap.channels[0];
    match &desc.kind {
        Kind::Sweep { .. } => {
            let sp = SweepParams::from_description(&desc).unwrap();
            let _ = ResponseAnalyzer::new(ResponseConfig::default())
                .unwrap()
                .analyze(1, x, sp, x, 48_000.0, 1.0);
        }
        Kind::TwoTone {
            method,
            low_hz,
            high_hz,
            ..
        } => {
            let _ = ImdAnalyzer::new().analyze(
                &ChannelInput {
                    channel: 1,
                    samples: x,
                    sample_rate_hz: 48_000.0,
                    overload_threshold: 1.0,
                    resolution_bits: 24,
                },
                Some(PairHint {
                    method: *method,
                    low_hz: *low_hz,
                    high_hz: *high_hz,
                    source: "stimulus description",
                }),
            );
        }
        Kind::Steps {
            frequency_hz,
            steps,
            ..
        } => {
            let _ = ampnote::procedure::power::power_from_capture(
                1,
                x,
                48_000.0,
                1.0,
                24,
                *frequency_hz,
                steps,
                0,
                &Default::default(),
            );
        }
        Kind::Tone { .. } => {}
        Kind::Square {
            frequency_hz,
            bandwidth_hz,
        } => {
            let _ = ampnote::analysis::square::from_recording(
                x,
                48_000.0,
                *frequency_hz,
                *bandwidth_hz,
            );
        }
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 300, ..ProptestConfig::default() })]
    #[test]
    fn a_spoiled_description_is_refused_or_harmless(kind in 0usize..4, s in spoil()) {
        let d = tmpdir("descfuzz");
        exercise(kind, &s, &d.join("stim.wav"));
    }
}

#[test]
fn a_spoiled_description_names_the_field() {
    // A sweep's stop above Nyquist, a rate parameter of 1e308, a two-tone above Nyquist: each
    // refused with the field named.
    let d = tmpdir("descnames");
    let c = Common {
        lead_s: 0.05,
        tail_s: 0.1,
        ..Common::mono(48_000, -12.0)
    };
    let base = sweep(&c, 20.0, 20_000.0, 0.5).unwrap();
    let mut cases: Vec<(Description, &str)> = Vec::new();
    let mut x = base.description.clone();
    if let Kind::Sweep { stop_hz, .. } = &mut x.kind {
        *stop_hz = 30_000.0;
    }
    cases.push((x, "stop_hz"));
    let mut x = base.description.clone();
    if let Kind::Sweep { rate_s, .. } = &mut x.kind {
        *rate_s = 1e308;
    }
    cases.push((x, "rate_s"));
    let mut x = base.description.clone();
    x.signal_samples = 1;
    cases.push((x, "rate_s"));
    let pair = two_tone(&c, TwoToneMethod::Modulation, 60.0, 7000.0, 4.0, 0.5).unwrap();
    let mut x = pair.description.clone();
    if let Kind::TwoTone { high_hz, .. } = &mut x.kind {
        *high_hz = 25_000.0;
    }
    cases.push((x, "high_hz"));
    for (desc, field) in cases {
        let why = Description::parse(&desc.to_json()).unwrap_err();
        assert!(why.contains(field), "{field}: {why}");
    }
    // The samples changed after the file was made: the level no longer matches.
    let path = d.join("louder.wav");
    let louder: Vec<f64> = base.signal.iter().map(|v| v * 4.0).collect();
    ampnote::signal::wav::write_wav_described(
        &path,
        48_000,
        &[louder],
        ampnote::signal::wav::WavFormat::Float32,
        1,
        Some(&base.description.to_json()),
    )
    .unwrap();
    let why = Description::of_capture(&Capture::read(&path, false).unwrap()).unwrap_err();
    assert!(why.contains("dBFS"), "{why}");
    std::fs::remove_dir_all(&d).ok();
}
