//! End-to-end checks of the live rig through a real audio server: JACK with its dummy backend,
//! ampnote's outputs patched to its inputs (`--self-patch`). A straight digital wire is the
//! reference (closed form): what comes back must be what was played, sample for sample (32-bit
//! float both ways), so the level equals the stimulus's, THD+N sits at the float floor, and the
//! response is flat.
//!
//! Needs a running JACK server at 48 kHz: `.ci/run` installs and starts one
//! (`jackd --no-realtime -d dummy -r 48000 -p 1024 -C 2 -P 2`) and runs
//! `cargo test --features live --test live -- --test-threads=1`.

use ampnote::rig::{parse_rig_with, RigOptions};
use serde_json::Value;
use std::process::Command;

fn jack_running() {
    let ok = Command::new("jack_lsp")
        .output()
        .map(|o| o.status.success())
        .unwrap_or(false);
    assert!(
        ok,
        "no JACK server answers: start one first (jackd --no-realtime -d dummy -r 48000 -p 1024 -C 2 -P 2), as .ci/run does"
    );
}

fn captures_dir(tag: &str) -> String {
    let d = std::env::temp_dir().join(format!("ampnote-live-{tag}-{}", std::process::id()));
    std::fs::create_dir_all(&d).unwrap();
    d.display().to_string()
}

/// Run ampnote on the JACK loopback (channel 1: output 1 -> input 1): exit code, stdout, stderr.
fn live(tag: &str, args: &[&str]) -> (i32, String, String) {
    jack_running();
    let dir = captures_dir(tag);
    let mut all: Vec<&str> = args.to_vec();
    all.extend([
        "--rig",
        "card",
        "--host",
        "jack",
        "--self-patch",
        "--outputs",
        "1",
        "--inputs",
        "1",
        "--captures-dir",
        &dir,
    ]);
    let out = Command::new(env!("CARGO_BIN_EXE_ampnote"))
        .args(&all)
        .output()
        .unwrap();
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

fn json(text: &str) -> Value {
    serde_json::from_str(text).unwrap_or_else(|e| panic!("not JSON ({e}): {text}"))
}

fn f(v: &Value, key: &str) -> f64 {
    v[key]
        .as_f64()
        .unwrap_or_else(|| panic!("no number `{key}` in {v}"))
}

#[test]
fn tone_through_the_loopback() {
    // Closed form: a -20 dBFS 997 Hz tone comes back at -20 dBFS and 997 Hz; the wire adds no
    // distortion, so THD+N is the float32 floor (far below the -120 dB target).
    let (code, out, err) = live(
        "tone",
        &[
            "analyze",
            "--channel",
            "1",
            "--freq",
            "997",
            "--level",
            "-20",
            "--json",
        ],
    );
    assert_eq!(code, 0, "{err}");
    let v = json(&out);
    let ch = &v["channels"][0];
    assert!((f(ch, "fundamental_dbfs") + 20.0).abs() < 0.01, "{ch}");
    assert!((f(ch, "fundamental_hz") - 997.0).abs() < 0.001, "{ch}");
    assert!(f(ch, "thdn_db") < -120.0, "{ch}");
    // The rig reports what it found before the tone.
    assert!(
        err.contains("pre-flight channel 1: output 1 -> input 1"),
        "{err}"
    );
    assert!(err.contains("latency"), "{err}");
    assert!(err.contains("polarity same"), "{err}");
    assert!(
        !err.contains("retrying"),
        "a gap on a clean loopback: {err}"
    );
}

#[test]
fn sweep_through_the_loopback_is_flat() {
    // Closed form: a wire's response is 0 dB at every frequency.
    let (code, out, err) = live(
        "sweep",
        &[
            "response",
            "--channel",
            "1",
            "--from",
            "10",
            "--seconds",
            "3",
            "--json",
        ],
    );
    assert_eq!(code, 0, "{err}");
    let v = json(&out);
    let points = v["points"].as_array().expect("points");
    let mut checked = 0;
    for p in points {
        let hz = f(p, "frequency_hz");
        if (20.0..=20_000.0).contains(&hz) {
            let m = f(p, "magnitude_db");
            assert!(m.abs() < 0.01, "{hz} Hz: {m} dB");
            checked += 1;
        }
    }
    assert!(
        checked > 100,
        "only {checked} points between 20 Hz and 20 kHz"
    );
}

#[test]
fn staircase_through_the_loopback() {
    // Closed form: every step comes back at its drive level, with no distortion. The wire never
    // reaches 1 % THD, so the staircase stops at the power limit (0.12 W into 8 ohm with a 1 V
    // full scale is -0.2 dBFS).
    let (code, out, err) = live(
        "steps",
        &[
            "power",
            "--channel",
            "1",
            "--from",
            "-24",
            "--step",
            "6",
            "--dwell",
            "0.3",
            "--settle",
            "0.1",
            "--input-fs-vrms",
            "1",
            "--output-fs-vrms",
            "1",
            "--attenuation",
            "1",
            "--load-ohms",
            "8",
            "--max-w",
            "0.12",
            "--json",
        ],
    );
    assert_eq!(code, 0, "{err}");
    let v = json(&out);
    let steps = v["steps"].as_array().expect("steps");
    assert!(steps.len() >= 4, "{v}");
    for s in steps {
        assert!(
            (f(s, "output_dbfs") - f(s, "drive_dbfs")).abs() < 0.01,
            "{s}"
        );
        assert!(f(s, "thdn_percent") < 1e-4, "{s}"); // below -120 dB
    }
}

#[test]
fn twenty_runs_without_a_dropout() {
    // Twenty captures in a row through one rig, each the played tone sample for sample (the
    // stimulus goes out as f32 and comes back as f32), none retried.
    jack_running();
    let opts = RigOptions {
        host: Some("jack".into()),
        outputs: vec![1],
        inputs: vec![1],
        self_patch: true,
        keep_dir: captures_dir("twenty").into(),
        ..RigOptions::default()
    };
    let mut rig = parse_rig_with("card", &opts).expect("the JACK rig opens");
    let fs = 48_000u32;
    for run in 0..20 {
        let freq = 500.0 + 97.0 * run as f64;
        let x: Vec<f64> = (0..fs as usize / 2)
            .map(|i| 0.25 * (2.0 * std::f64::consts::PI * freq * i as f64 / fs as f64).sin())
            .collect();
        let y = rig.play_and_record(1, &x, fs).expect("a whole capture");
        assert_eq!(y.len(), x.len());
        let worst = x
            .iter()
            .zip(&y)
            .map(|(a, b)| ((*a as f32) as f64 - b).abs())
            .fold(0.0, f64::max);
        assert_eq!(
            worst, 0.0,
            "run {run}: the capture differs from the stimulus"
        );
    }
}

#[test]
fn a_capture_with_lost_frames_is_kept_as_partial_and_retried_once() {
    // 300 frames thrown away mid-capture (the rig's test hook, as a route that loses buffers
    // without saying so would): the markers' distance is 300 short, the capture is rejected,
    // kept as partial, measured again, and the result says so. The retry is whole.
    jack_running();
    let dir = captures_dir("gap");
    let opts = RigOptions {
        host: Some("jack".into()),
        outputs: vec![1],
        inputs: vec![1],
        self_patch: true,
        keep_dir: dir.clone().into(),
        test_drop_frames: 300,
        ..RigOptions::default()
    };
    let mut rig = parse_rig_with("card", &opts).expect("the JACK rig opens");
    let fs = 48_000u32;
    let x: Vec<f64> = (0..fs as usize)
        .map(|i| 0.25 * (2.0 * std::f64::consts::PI * 997.0 * i as f64 / fs as f64).sin())
        .collect();
    let y = rig.play_and_record(1, &x, fs).expect("the retry is whole");
    let worst = x
        .iter()
        .zip(&y)
        .map(|(a, b)| ((*a as f32) as f64 - b).abs())
        .fold(0.0, f64::max);
    assert_eq!(worst, 0.0, "the retried capture differs from the stimulus");
    let notes = rig.take_notes(1);
    assert!(
        notes
            .iter()
            .any(|n| n.contains("had a gap and was measured again")),
        "{notes:?}"
    );
    let partial: Vec<String> = std::fs::read_dir(&dir)
        .unwrap()
        .filter_map(|e| e.ok())
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| n.ends_with(".partial.wav"))
        .collect();
    assert_eq!(partial.len(), 1, "{partial:?}");
}

#[test]
fn calibration_through_the_loopback() {
    // Closed form: with 0.100 V rms read at the output while the -20 dBFS tone plays, the output
    // full scale is 1.000 V; the tone comes back at -20 dBFS through a wire, so the input full
    // scale is 1.000 V as well.
    let out = std::env::temp_dir().join(format!("ampnote-live-cal-{}.toml", std::process::id()));
    let out_s = out.display().to_string();
    let (code, _, err) = live(
        "cal",
        &[
            "calibrate",
            "--meter-vrms",
            "0.1",
            "--load-ohms",
            "8",
            "--no-prompt",
            "-o",
            &out_s,
        ],
    );
    assert_eq!(code, 0, "{err}");
    let text = std::fs::read_to_string(&out).unwrap();
    let value = |key: &str| -> f64 {
        text.lines()
            .find_map(|l| l.strip_prefix(key))
            .and_then(|r| r.trim().trim_start_matches('=').trim().parse().ok())
            .unwrap_or_else(|| panic!("no {key} in {text}"))
    };
    assert!((value("output_fs_vrms") - 1.0).abs() < 1e-9, "{text}");
    assert!((value("input_fs_vrms") - 1.0).abs() < 1e-3, "{text}");
    assert!(value("thdn_db") < -120.0, "{text}");
}

#[test]
fn watch_refreshes_at_least_five_times_a_second() {
    let (code, out, err) = live("watch", &["watch", "--seconds", "3"]);
    assert_eq!(code, 0, "{err}");
    let lines: Vec<&str> = out.lines().filter(|l| l.contains("THD+N")).collect();
    assert!(lines.len() >= 10, "{out}\n{err}");
    let last = lines.last().unwrap();
    assert!(last.contains("-20.00 dBFS"), "{last}");
    // "N readings (R a second), CPU ..."
    let rate: f64 = err
        .split("readings (")
        .nth(1)
        .and_then(|r| r.split(' ').next())
        .and_then(|r| r.parse().ok())
        .unwrap_or_else(|| panic!("no reading rate in: {err}"));
    assert!(rate >= 5.0, "{rate} readings a second");
}

/// Run ampnote with `args` on the JACK host, patched or not: exit code and stderr.
fn on_jack(args: &[&str], patched: bool) -> (i32, String) {
    jack_running();
    let dir = captures_dir("bad");
    let mut all: Vec<&str> = args.to_vec();
    if !args.contains(&"--host") {
        all.extend(["--host", "jack"]);
    }
    all.extend(["--outputs", "1", "--inputs", "1"]);
    all.extend(["--channel", "1", "--captures-dir", &dir]);
    if patched {
        all.push("--self-patch");
    }
    let out = Command::new(env!("CARGO_BIN_EXE_ampnote"))
        .args(&all)
        .output()
        .unwrap();
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

#[test]
fn bad_requests_name_what_is_there() {
    let cases: [(&[&str], bool, &[&str]); 5] = [
        // A device that is not there: the error lists the ones that are.
        (
            &["analyze", "--rig", "card:no-such-box"],
            true,
            &["no output device matches `no-such-box`", "jack:output"],
        ),
        // A host that is not in the build.
        (
            &["analyze", "--rig", "card", "--host", "no-such-host"],
            true,
            &["no audio host called `no-such-host`"],
        ),
        // A rate the server refuses (it runs at 48 kHz): the error says what it offers.
        (
            &["analyze", "--rig", "card", "--rate", "96000"],
            true,
            &["refuses 96000 Hz", "48000 Hz"],
        ),
        // Nothing patched: the pre-flight chirp does not come back, nothing loud is played.
        (
            &["analyze", "--rig", "card"],
            false,
            &["did not come back on input 1"],
        ),
        // A stimulus louder than the interface input takes (a 0 dBFS sine through a gain of 1
        // peaks at full scale): refused before it is played.
        (
            &["analyze", "--rig", "card", "--level", "0"],
            true,
            &["would reach"],
        ),
    ];
    for (args, patched, needles) in cases {
        let (code, err) = on_jack(args, patched);
        assert_eq!(code, 2, "{args:?}: {err}");
        for n in needles {
            assert!(err.contains(n), "{args:?}: message lacks `{n}`: {err}");
        }
        assert!(!err.contains("panicked"), "{args:?}: {err}");
    }
}
