//! The command line as a bench user meets it: every option explains itself, the shells complete
//! it, the manual exists, and the version is the changelog's (source: the README's changelog and
//! Cargo.toml, and clap's own help layout).

use super::common::run;

const COMMANDS: &[&[&str]] = &[
    &["analyze"],
    &["trend"],
    &["response"],
    &["imd"],
    &["noise"],
    &["power"],
    &["zout"],
    &["calibrate"],
    &["watch"],
    &["compare"],
    &["match"],
    &["report"],
    &["demo"],
    &["completions"],
    &["man"],
    &["notebook", "init"],
    &["notebook", "log"],
    &["notebook", "reanalyze"],
    &["generate", "tone"],
    &["generate", "steps"],
    &["generate", "sweep"],
    &["generate", "twotone"],
];

#[test]
fn every_option_and_argument_has_help() {
    for cmd in COMMANDS {
        let mut args = cmd.to_vec();
        args.push("--help");
        let (code, out, err) = run(&args);
        assert_eq!(code, 0, "{cmd:?}: {err}");
        let mut section = "";
        for line in out.lines() {
            if line.ends_with(':') && !line.starts_with(' ') {
                section = line;
                continue;
            }
            if section != "Options:" && section != "Arguments:" {
                continue;
            }
            let t = line.trim_start();
            if !(t.starts_with('-') || t.starts_with('<') || t.starts_with('[')) {
                continue; // a wrapped description
            }
            // "  --flag <V>   Description [default: x]": something besides the name and defaults.
            let words: Vec<&str> = t.split("  ").filter(|w| !w.trim().is_empty()).collect();
            let described = words
                .iter()
                .skip(1)
                .any(|w| !w.trim_start().starts_with('['));
            assert!(described, "{cmd:?}: no help for `{}`", t.trim());
        }
    }
}

#[test]
fn version_agrees_with_the_changelog() {
    let (code, out, _) = run(&["--version"]);
    assert_eq!(code, 0);
    let version = out.split_whitespace().nth(1).unwrap().to_string();
    let readme =
        std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/README.md")).unwrap();
    let changelog = &readme[readme.find("## Changelog").unwrap()..];
    let newest = changelog
        .lines()
        .filter_map(|l| l.strip_prefix("- "))
        .filter_map(|l| l.split([':', ' ']).next())
        .filter(|v| v.chars().next().is_some_and(|c| c.is_ascii_digit()))
        .max_by_key(|v| {
            v.split('.')
                .map(|p| p.parse::<u32>().unwrap_or(0))
                .collect::<Vec<_>>()
        })
        .unwrap();
    assert_eq!(
        version, newest,
        "--version against the changelog's newest entry"
    );
}

#[test]
fn completions_and_manual_cover_every_command() {
    for shell in ["bash", "zsh", "fish"] {
        let (code, out, err) = run(&["completions", shell]);
        assert_eq!(code, 0, "{shell}: {err}");
        for cmd in ["analyze", "trend", "power", "notebook"] {
            assert!(out.contains(cmd), "{shell} completion lacks {cmd}");
        }
    }
    let (code, _, err) = run(&["completions", "tcsh-like"]);
    assert_eq!(code, 2, "{err}");
    let (code, out, _) = run(&["man"]);
    assert_eq!(code, 0);
    assert!(
        out.contains(".TH ampnote 1"),
        "{}",
        &out[..200.min(out.len())]
    );
    let d = super::common::tmpdir("man");
    let (code, _, err) = run(&["man", "--out", d.to_str().unwrap()]);
    assert_eq!(code, 0, "{err}");
    assert!(d.join("ampnote-trend.1").exists());
}

#[test]
fn watch_prints_json_lines() {
    let (code, out, err) = run(&["watch", "--rig", "sim", "--seconds", "0.6", "--json"]);
    assert_eq!(code, 0, "{err}");
    let points: Vec<ampnote::analysis::blocks::TrendPoint> = out
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    assert!(!points.is_empty());
    // The simulated bench's tone, -20 dBFS drive through its gain: the same level each time.
    let first = points[0].level_dbfs.unwrap();
    assert!(points
        .iter()
        .all(|p| (p.level_dbfs.unwrap() - first).abs() < 0.05));
}

#[test]
fn every_measuring_command_writes_csv() {
    let d = super::common::tmpdir("csv");
    let caps = d.join("caps");
    let caps = caps.to_str().unwrap();
    let pair = d.join("pair.wav");
    let (code, _, err) = run(&["generate", "twotone", "--out", pair.to_str().unwrap()]);
    assert_eq!(code, 0, "{err}");
    let runs: Vec<Vec<&str>> = vec![
        vec![
            "noise",
            "--rig",
            "sim",
            "--seconds",
            "1",
            "--captures-dir",
            caps,
        ],
        vec!["imd", pair.to_str().unwrap()],
        vec!["power", "--rig", "sim", "--channel", "1", "--from", "-20"],
        vec![
            "zout",
            "--rig",
            "sim",
            "--channel",
            "1",
            "--captures-dir",
            caps,
        ],
        vec!["analyze", "--rig", "sim", "--captures-dir", caps],
        vec![
            "trend",
            "--rig",
            "sim",
            "--seconds",
            "3",
            "--captures-dir",
            caps,
        ],
    ];
    for mut args in runs {
        args.push("--csv");
        let (code, out, err) = run(&args);
        assert_eq!(code, 0, "{args:?}: {err}");
        let mut lines = out.lines();
        let header = lines.next().unwrap_or_else(|| panic!("{args:?}: no CSV"));
        let columns = header.split(',').count();
        assert!(columns >= 4 && header.starts_with("channel,"), "{header}");
        let rows: Vec<&str> = lines.collect();
        assert!(!rows.is_empty(), "{args:?}");
        for r in rows {
            // No quoted field here holds a comma, so a plain split counts the columns.
            assert_eq!(r.split(',').count(), columns, "{args:?}: {r}");
        }
    }
}

#[test]
fn exit_codes_tell_input_from_device_faults() {
    // 2 for what the user gave, 3 for the audio interface, 130 for Ctrl-C (the shells'
    // convention, common practice); a device fault says whether running again may clear it.
    use ampnote::error::Error;
    let busy = Error::Device {
        detail: "the input stream stalled".into(),
        retryable: true,
    };
    assert_eq!(busy.exit_code(), 3);
    assert!(busy.to_string().contains("run the command again"), "{busy}");
    let gone = Error::Device {
        detail: "no output device matches `x`".into(),
        retryable: false,
    };
    assert_eq!(gone.exit_code(), 3);
    assert!(!gone.to_string().contains("run the command again"));
    assert_eq!(Error::Interrupted(String::new()).exit_code(), 130);
    assert_eq!(
        Error::NoSuchChannel {
            requested: 3,
            available: 2
        }
        .exit_code(),
        2
    );
    // Through the binary: a file that is not there, and a notebook that is not one, exit 2.
    let (code, _, err) = super::common::run(&["analyze", "/no/such/file.wav"]);
    assert_eq!(code, 2, "{err}");
    let d = super::common::tmpdir("exitcodes");
    let (code, _, err) = super::common::run(&["notebook", "log", &d.to_string_lossy()]);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("is not a notebook"), "{err}");
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn numbers_read_as_a_person_writes_them() {
    // The figures the issue found printed badly, and what a bench notebook would show instead
    // (3 significant figures, common practice; no exponent in a % column; no -0).
    use ampnote::report::number::{bound, change, percent, show, Unit};
    assert_eq!(percent(0.251212), "0.251");
    assert_eq!(percent(2.769e-5), "0.0000277");
    assert_eq!(percent(5.495e-7), "0.0000005");
    assert_eq!(percent(1e-9), "< 0.0000001");
    assert_eq!(percent(12.345), "12.3");
    assert_eq!(percent(9.9951), "10.0");
    assert_eq!(show(-0.0001, Unit::Dbfs), "0.00 dBFS");
    assert_eq!(show(-12.345, Unit::Dbc), "-12.3 dBc");
    assert_eq!(show(0.128210, Unit::Watts), "128 mW");
    assert_eq!(show(1.001, Unit::Watts), "1.00 W");
    assert_eq!(show(0.99996, Unit::Watts), "1.00 W");
    assert_eq!(show(0.9994, Unit::Watts), "999 mW");
    assert_eq!(show(999.7, Unit::Hz), "1.00 kHz");
    assert_eq!(show(0.99999, Unit::Volts), "1.00 V");
    assert_eq!(show(10_000.0, Unit::Hz), "10.0 kHz");
    assert_eq!(show(997.0, Unit::Hz), "997 Hz");
    assert_eq!(show(40.0, Unit::Hz), "40.0 Hz");
    assert_eq!(show(0.0123, Unit::Volts), "12.3 mV");
    assert_eq!(show(2.5, Unit::Ohms), "2.50 ohm");
    assert_eq!(bound(-110.04, Unit::Dbc), "< -110.0 dBc");
    assert_eq!(change(3.0103, Unit::Db), "+3.01 dB");
    assert_eq!(change(-0.5, Unit::Db), "-0.50 dB");
    // Every number of the demo's tables carries no exponent.
    let x = super::common::sines(48_000.0, 48_000, &[(1000.0, 0.5, 0.0), (2000.0, 5e-7, 0.0)]);
    let d = super::common::tmpdir("numbers");
    let p = super::common::write_float(&d, "t.wav", x);
    let (code, out, err) = super::common::run(&["analyze", &p.to_string_lossy()]);
    assert_eq!(code, 0, "{err}");
    for word in out.split_whitespace() {
        let exponent = word.contains("e-") || word.contains("e+");
        let numeric = word
            .trim_start_matches(['-', '+', '<'])
            .starts_with(|c: char| c.is_ascii_digit());
        assert!(
            !(exponent && numeric),
            "exponent in the table: {word}\n{out}"
        );
    }
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn flag_values_are_checked_before_anything_runs() {
    // Parsed by clap into typed values: a typo is a usage error (exit 2) that names the flag and
    // what it takes, before a file or rig is opened.
    for (args, needle) in [
        (vec!["power", "--rig", "sim", "--freq", "1k"], "--freq"),
        (vec!["power", "--rig", "sim", "--freq", "0"], "above 0"),
        (vec!["zout", "--rig", "sim", "--loads", "8,x"], "--loads"),
        (vec!["noise", "--rig", "sim", "--band", "20-20000"], "LO:HI"),
        (
            vec!["noise", "--rig", "sim", "--band", "2000:20"],
            "LO < HI",
        ),
        (
            vec!["noise", "--rig", "sim", "--mains", "fifty"],
            "--mains takes auto",
        ),
        (
            vec!["analyze", "--rig", "sim", "--channel", "left"],
            "--channel takes",
        ),
        (
            vec![
                "generate",
                "tone",
                "--bits",
                "20",
                "--out",
                "/tmp/never.wav",
            ],
            "--bits",
        ),
        (
            vec!["analyze", "--rig", "sim", "--outputs", "0"],
            "--outputs takes",
        ),
    ] {
        let (code, _, err) = super::common::run(&args);
        assert_eq!(code, 2, "{args:?}: {err}");
        assert!(err.contains(needle), "{args:?}: {err}");
    }
    assert!(!std::path::Path::new("/tmp/never.wav").exists());
}
