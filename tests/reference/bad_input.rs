//! Bad input through the real binary: each case exits with code 2 (usage or input error, per the
//! design's exit codes) and a message that names the problem and the next step.

use super::common::{run, tmpdir};
use ampnote::signal::wav::{write_wav, WavFormat};
use std::path::Path;

fn expect_error(args: &[&str], needles: &[&str]) {
    let (code, out, err) = run(args);
    assert_eq!(
        code, 2,
        "args {args:?}: exit {code}, stdout {out}, stderr {err}"
    );
    let all = format!("{out}{err}");
    for n in needles {
        assert!(all.contains(n), "args {args:?}: message lacks `{n}`: {all}");
    }
    assert!(!all.contains("panicked"), "args {args:?} panicked: {all}");
}

fn tone(n: usize) -> Vec<f64> {
    (0..n)
        .map(|i| 0.5 * (2.0 * std::f64::consts::PI * 997.0 * i as f64 / 48_000.0).sin())
        .collect()
}

fn write(dir: &Path, name: &str, chans: &[Vec<f64>], fmt: WavFormat) -> String {
    let p = dir.join(name);
    write_wav(&p, 48_000, chans, fmt, 1).unwrap();
    p.to_string_lossy().into()
}

#[test]
fn bad_files_give_clear_errors() {
    let d = tmpdir("files");
    let text = d.join("notes.wav");
    std::fs::write(&text, "bias 42 mA, plate 380 V\n").unwrap();
    expect_error(
        &["analyze", text.to_str().unwrap()],
        &[
            "not an audio file ampnote reads",
            "export the recording as WAV",
        ],
    );

    let empty = d.join("empty.wav");
    std::fs::write(&empty, b"").unwrap();
    expect_error(
        &["analyze", empty.to_str().unwrap()],
        &["not an audio file ampnote reads"],
    );

    expect_error(
        &["analyze", d.join("missing.wav").to_str().unwrap()],
        &["cannot open", "Check the path"],
    );

    // Truncated: cut a good file in the middle of its data.
    let good = write(&d, "good.wav", &[tone(48_000)], WavFormat::Int { bits: 24 });
    let bytes = std::fs::read(&good).unwrap();
    let cut = d.join("cut.wav");
    std::fs::write(&cut, &bytes[..bytes.len() / 2 + 1]).unwrap();
    expect_error(
        &["analyze", cut.to_str().unwrap()],
        &["truncated", "--accept-truncated"],
    );
    let (code, out, _) = run(&[
        "analyze",
        cut.to_str().unwrap(),
        "--accept-truncated",
        "--json",
    ]);
    assert_eq!(code, 0, "truncated file with --accept-truncated: {out}");
    assert!(out.contains("\"truncated\": true"), "{out}");

    // A header with no data.
    let nodata = write(
        &d,
        "nodata.wav",
        &[tone(48_000)],
        WavFormat::Int { bits: 16 },
    );
    let b = std::fs::read(&nodata).unwrap();
    let mut h = b[..44].to_vec();
    h[40..44].copy_from_slice(&0u32.to_le_bytes());
    h[4..8].copy_from_slice(&36u32.to_le_bytes());
    std::fs::write(&nodata, &h).unwrap();
    expect_error(&["analyze", &nodata], &["holds no audio"]);

    // 64-bit float is read now (fixtures/formats has a real one): two zero samples are silent.
    let f64wav = d.join("f64.wav");
    let mut w = Vec::new();
    w.extend_from_slice(b"RIFF");
    w.extend_from_slice(&(36u32 + 16).to_le_bytes());
    w.extend_from_slice(b"WAVEfmt ");
    w.extend_from_slice(&16u32.to_le_bytes());
    w.extend_from_slice(&3u16.to_le_bytes()); // IEEE float
    w.extend_from_slice(&1u16.to_le_bytes());
    w.extend_from_slice(&48_000u32.to_le_bytes());
    w.extend_from_slice(&(48_000u32 * 8).to_le_bytes());
    w.extend_from_slice(&8u16.to_le_bytes());
    w.extend_from_slice(&64u16.to_le_bytes());
    w.extend_from_slice(b"data");
    w.extend_from_slice(&16u32.to_le_bytes());
    w.extend_from_slice(&[0u8; 16]);
    std::fs::write(&f64wav, &w).unwrap();
    let (code, out, err) = run(&["analyze", f64wav.to_str().unwrap()]);
    assert_eq!(code, 2, "{out}{err}");
    assert!(err.contains("too short") || err.contains("silent"), "{err}");

    // NaN samples in a float file.
    let mut x = tone(48_000);
    x[1234] = f64::NAN;
    let nan = write(&d, "nan.wav", &[x], WavFormat::Float32);
    expect_error(&["analyze", &nan], &["sample 1234 of channel 1 is NaN"]);

    // Silence, DC only, too short.
    let silent = write(&d, "silent.wav", &[vec![0.0; 48_000]], WavFormat::Float32);
    expect_error(&["analyze", &silent], &["silent", "Check the cable"]);
    let dc = write(&d, "dc.wav", &[vec![0.25; 48_000]], WavFormat::Float32);
    expect_error(&["analyze", &dc], &["only a DC level"]);
    let short = write(&d, "short.wav", &[tone(300)], WavFormat::Float32);
    expect_error(&["analyze", &short], &["too short", "Record at least 1 s"]);
    let noise: Vec<f64> = {
        let mut r = ampnote::signal::dither::Rng::new(3);
        (0..48_000).map(|_| 0.01 * r.gaussian()).collect()
    };
    let noisy = write(&d, "noise.wav", &[noise], WavFormat::Float32);
    expect_error(&["analyze", &noisy], &["no steady tone found"]);

    // Channel that isn't there; bad flags.
    expect_error(
        &["analyze", &good, "--channel", "3"],
        &["channel 3 does not exist", "1 channel"],
    );
    expect_error(
        &["analyze", &good, "--channel", "left"],
        &["--channel takes a number"],
    );
    expect_error(
        &["analyze", &good, "--band", "20-20000"],
        &["--band takes LO:HI"],
    );
    expect_error(
        &["analyze", &good, "--band", "20:30000"],
        &["above the capture's Nyquist"],
    );
    expect_error(
        &["analyze", &good, "--load-ohms", "8"],
        &["need --input-fs-vrms"],
    );
    expect_error(
        &["analyze", &good, "--input-fs-vrms=-1"],
        &["must lie between 0.001 and 1000 V"],
    );
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn good_file_all_formats_and_outputs() {
    let d = tmpdir("formats");
    for (name, fmt) in [
        ("i16.wav", WavFormat::Int { bits: 16 }),
        ("i24.wav", WavFormat::Int { bits: 24 }),
        ("f32.wav", WavFormat::Float32),
    ] {
        let p = write(&d, name, &[tone(48_000), tone(48_000)], fmt);
        let (code, out, err) = run(&["analyze", &p, "--json"]);
        assert_eq!(code, 0, "{name}: {err}");
        let v: serde_json::Value = serde_json::from_str(&out).unwrap();
        for key in ["schema_version", "sample_rate_hz", "channels"] {
            assert!(v.get(key).is_some(), "{name}: JSON lacks {key}");
        }
        let c = &v["channels"][1];
        for key in [
            "channel",
            "fundamental_hz",
            "fundamental_dbfs",
            "thd_percent",
            "thd_db",
            "thdn_percent",
            "thdn_db",
            "band_hz",
            "harmonics",
            "hum",
            "noise_dbfs",
            "dc_offset",
            "overload_samples",
            "warnings",
        ] {
            assert!(c.get(key).is_some(), "{name}: channel JSON lacks {key}");
        }
        assert_eq!(c["channel"], 2);
        let h = &c["harmonics"][0];
        for key in ["order", "frequency_hz", "level_dbc", "phase_deg"] {
            assert!(h.get(key).is_some(), "{name}: harmonic JSON lacks {key}");
        }
        let (code, csv, _) = run(&["analyze", &p, "--csv", "--channel", "1"]);
        assert_eq!(code, 0);
        assert_eq!(
            csv.lines().count(),
            2,
            "{name}: CSV header + one row: {csv}"
        );
        let (code, table, _) = run(&[
            "analyze",
            &p,
            "--input-fs-vrms",
            "2",
            "--attenuation",
            "10",
            "--load-ohms",
            "8",
        ]);
        assert_eq!(code, 0);
        assert!(
            table.contains("into 8 ohm") && table.contains("dBV"),
            "{table}"
        );
    }
    // Overload: a clipped float file is counted and warned about.
    let clipped: Vec<f64> = tone(48_000)
        .into_iter()
        .map(|v| (v * 2.5).clamp(-1.0, 1.0))
        .collect();
    let p = write(&d, "clipped.wav", &[clipped], WavFormat::Float32);
    let (code, out, _) = run(&["analyze", &p, "--json"]);
    assert_eq!(code, 0);
    let v: ampnote::report::tone::AnalyzeReport = serde_json::from_str(&out).unwrap();
    assert!(v.channels[0].overload_samples > 1000);
    let w = &v.channels[0].warnings[0];
    assert!(w.message.contains("input overload"));
    assert_eq!(w.code, ampnote::warning::WarningCode::InputOverload);
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn rig_runs_refuse_what_they_cannot_do() {
    let d = tmpdir("rigargs");
    let wav = write(&d, "tone.wav", &[tone(48_000)], WavFormat::Float32);
    let dir = d.join("caps");
    let dir = dir.to_str().unwrap();
    expect_error(
        &["analyze", &wav, "--rig", "sim", "--captures-dir", dir],
        &["a capture file or --rig, not both"],
    );
    expect_error(&["analyze"], &["give a capture file", "--rig sim"]);
    expect_error(&["response", "--rig", "bench"], &["unknown rig `bench`"]);
    expect_error(&["watch"], &["--rig card", "--rig sim"]);
    expect_error(
        &["watch", "--rig", "sim", "--refresh", "2"],
        &["--refresh takes 5 to 50"],
    );
    expect_error(
        &[
            "analyze",
            "--rig",
            "sim",
            "--outputs",
            "1,x",
            "--captures-dir",
            dir,
        ],
        &["--outputs takes interface channel numbers"],
    );
    #[cfg(not(feature = "live"))]
    {
        expect_error(
            &["analyze", "--rig", "card", "--captures-dir", dir],
            &["needs a build with the `live` feature", "--features live"],
        );
        expect_error(&["devices"], &["--features live"]);
    }
}

#[test]
fn a_rig_run_keeps_what_it_measured() {
    // Nothing measured is lost: a run on the simulated bench writes its stimulus and capture, and
    // analysing the kept capture again gives the same figures.
    let d = tmpdir("rigkeep");
    let dir = d.join("caps");
    let dir_s = dir.to_str().unwrap();
    let (code, out, err) = run(&[
        "analyze",
        "--rig",
        "sim",
        "--channel",
        "1",
        "--freq",
        "1000",
        "--captures-dir",
        dir_s,
        "--json",
    ]);
    assert_eq!(code, 0, "{err}");
    let first: ampnote::report::tone::AnalyzeReport = serde_json::from_str(&out).unwrap();
    let file = first.file.clone();
    assert!(file.ends_with("-capture.wav"), "{file}");
    let stimuli: Vec<_> = std::fs::read_dir(&dir)
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().ends_with("-stimulus.wav"))
        .collect();
    assert_eq!(stimuli.len(), 1);
    let (code, again, err) = run(&["analyze", &file, "--channel", "1", "--json"]);
    assert_eq!(code, 0, "{err}");
    let again: ampnote::report::tone::AnalyzeReport = serde_json::from_str(&again).unwrap();
    let (x, y) = (&first.channels[0], &again.channels[0]);
    assert_eq!(x.thd_db, y.thd_db, "THD differs");
    assert_eq!(x.thdn_db, y.thdn_db, "THD+N differs");
    assert_eq!(x.fundamental_dbfs, y.fundamental_dbfs, "level differs");
}

#[test]
fn calibrate_measures_the_interface_not_an_amplifier() {
    let d = tmpdir("calrig");
    let out = d.join("p.toml");
    expect_error(
        &[
            "calibrate",
            "--rig",
            "sim",
            "--no-prompt",
            "-o",
            out.to_str().unwrap(),
        ],
        &["use --rig card", "wired straight to its input"],
    );
    assert!(
        !out.exists(),
        "a profile was written from the simulated amplifier"
    );
}

#[test]
fn a_flag_that_would_be_ignored_is_refused() {
    // A staircase's levels are --from and --to; a --level given to it would be silently dropped.
    let d = tmpdir("ignored-flag");
    let out = d.join("steps.wav");
    expect_error(
        &[
            "generate",
            "steps",
            "--level",
            "-3",
            "--out",
            out.to_str().unwrap(),
        ],
        &["--level does not apply to a staircase", "--from"],
    );
    assert!(!out.exists());
    std::fs::remove_dir_all(&d).ok();
}
