//! End-to-end checks of the live rig through a real audio server: JACK with its dummy backend,
//! ampnote's outputs patched to its inputs (`--self-patch`). The checks every server must pass
//! are in `live_common`; the ones here use JACK's own behaviour (port patching, its fixed rate).
//!
//! Needs a running JACK server at 48 kHz: `.ci/live-check.sh` installs and starts one
//! (`jackd --no-realtime -d dummy -r 48000 -p 1024 -C 2 -P 2`) and runs
//! `cargo test --features live --test live -- --test-threads=1`.

mod live_common;
use live_common::{captures_dir, JACK};
use std::process::Command;

fn live(tag: &str, args: &[&str]) -> (i32, String, String) {
    JACK.run(tag, args)
}

#[test]
fn tone_through_the_loopback() {
    live_common::check_tone(JACK);
}

#[test]
fn sweep_through_the_loopback_is_flat() {
    live_common::check_sweep(JACK);
}

#[test]
fn twenty_runs_without_a_dropout() {
    live_common::check_twenty_runs(JACK);
}

#[test]
fn staircase_through_the_loopback() {
    live_common::check_staircase(JACK);
}

#[test]
fn a_capture_with_lost_frames_is_kept_as_partial_and_retried_once() {
    live_common::check_retry(JACK);
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
    // The target (at least 5 readings a second); the level is closed form (a wire).
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
    JACK.ensure_running();
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
    // Exit codes: 3 for what the interface or its server does (a device not there, a rate it
    // refuses, a signal that does not come back), 2 for what the user typed (a host name the
    // build lacks, a level that would clip the input).
    let cases: [(&[&str], bool, i32, &[&str]); 5] = [
        // A device that is not there: the error lists the ones that are.
        (
            &["analyze", "--rig", "card:no-such-box"],
            true,
            3,
            &["no output device matches `no-such-box`", "jack:output"],
        ),
        // A host that is not in the build.
        (
            &["analyze", "--rig", "card", "--host", "no-such-host"],
            true,
            2,
            &["no audio host called `no-such-host`"],
        ),
        // A rate the server refuses (it runs at 48 kHz): the error says what it offers.
        (
            &["analyze", "--rig", "card", "--rate", "96000"],
            true,
            3,
            &["refuses 96000 Hz", "48000 Hz"],
        ),
        // Nothing patched: the pre-flight chirp does not come back, nothing loud is played.
        (
            &["analyze", "--rig", "card"],
            false,
            3,
            &["did not come back on input 1"],
        ),
        // A stimulus louder than the interface input takes (a 0 dBFS sine through a gain of 1
        // peaks at full scale): refused before it is played.
        (
            &["analyze", "--rig", "card", "--level", "0"],
            true,
            2,
            &["would reach"],
        ),
    ];
    for (args, patched, want, needles) in cases {
        let (code, err) = on_jack(args, patched);
        assert_eq!(code, want, "{args:?}: {err}");
        for n in needles {
            assert!(err.contains(n), "{args:?}: message lacks `{n}`: {err}");
        }
        assert!(!err.contains("panicked"), "{args:?}: {err}");
    }
}

#[test]
fn devices_lists_the_running_server_as_json() {
    JACK.ensure_running();
    let out = Command::new(env!("CARGO_BIN_EXE_ampnote"))
        .args(["devices", "--json"])
        .output()
        .unwrap();
    assert!(out.status.success());
    let list: ampnote::rig::card::DeviceList = serde_json::from_slice(&out.stdout).unwrap();
    let jack = list
        .hosts
        .iter()
        .find(|h| h.name == "JACK")
        .expect("this build knows JACK");
    assert!(jack.running, "{jack:?}");
    assert!(
        !jack.devices.is_empty(),
        "the JACK server's device is listed: {jack:?}"
    );
}

#[test]
fn separation_of_two_wires_is_a_word_length_bound() {
    live_common::check_separation(JACK);
}

#[test]
fn square_through_the_loopback_is_the_stimulus() {
    live_common::check_square(JACK);
}
