//! A notebook never loses a run and never shows half of one: concurrent writers, a writer killed
//! part way, a full disk (a file-size limit set in the child, so no mount is needed), damaged and
//! hostile contents. Sources: POSIX semantics (O_CREAT|O_EXCL creates a file in exactly one of
//! several racing processes; rename is atomic; RLIMIT_FSIZE makes a write past it fail with EFBIG
//! when SIGXFSZ is ignored) and the notebook's own layout.

use super::common::{run, tmpdir};
use ampnote::notebook::Notebook;
use std::path::Path;
use std::process::{Command, Stdio};

fn bin() -> &'static str {
    env!("CARGO_BIN_EXE_ampnote")
}

/// A stereo tone capture (both channels carry a 1 kHz tone).
fn stereo_capture(dir: &Path) -> String {
    let path = dir.join("stereo.wav");
    let s = path.display().to_string();
    let (code, _, err) = run(&[
        "generate",
        "tone",
        "--freq",
        "1000",
        "--seconds",
        "1",
        "--channels",
        "2",
        "--out",
        &s,
    ]);
    assert_eq!(code, 0, "{err}");
    s
}

fn init(dir: &Path) -> String {
    let nb = dir.join("amp").display().to_string();
    let (code, _, err) = run(&["notebook", "init", &nb, "--amplifier", "amp"]);
    assert_eq!(code, 0, "{err}");
    nb
}

#[test]
fn sixteen_writers_keep_every_run_with_unique_numbers() {
    let d = tmpdir("store-concurrent");
    let cap = stereo_capture(&d);
    let nb = init(&d);
    // 16 processes at once, half under one label and half under their own.
    let children: Vec<_> = (0..16)
        .map(|i| {
            let label = if i % 2 == 0 {
                "same".to_string()
            } else {
                format!("own {i}")
            };
            Command::new(bin())
                .args([
                    "analyze",
                    &cap,
                    "--notebook",
                    &nb,
                    "--label",
                    &label,
                    "--json",
                ])
                .stdout(Stdio::null())
                .stderr(Stdio::piped())
                .spawn()
                .unwrap()
        })
        .collect();
    for c in children {
        let out = c.wait_with_output().unwrap();
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
    }
    let scan = Notebook::open(Path::new(&nb)).unwrap().scan().unwrap();
    assert_eq!(scan.runs.len(), 32, "16 stereo measurements, 2 runs each");
    let mut numbers: Vec<&str> = scan
        .runs
        .iter()
        .map(|r| r.meta.id.split('-').next().unwrap())
        .collect();
    numbers.sort();
    numbers.dedup();
    assert_eq!(numbers.len(), 32, "run numbers must be unique");
    assert!(scan.incomplete.is_empty() && scan.damaged.is_empty());
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn a_killed_writer_never_leaves_half_a_measurement_listed() {
    let d = tmpdir("store-kill");
    let cap = stereo_capture(&d);
    let nb = init(&d);
    // Kill the writer after 0-60 ms, 24 times, at spread-out points of its work.
    for i in 0..24u64 {
        let mut child = Command::new(bin())
            .args(["analyze", &cap, "--notebook", &nb, "--label", "k"])
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(std::time::Duration::from_micros(2_500 * i));
        let _ = child.kill();
        let _ = child.wait();
    }
    let scan = Notebook::open(Path::new(&nb)).unwrap().scan().unwrap();
    // Every listed measurement is whole: each measurement id appears on both channels.
    for r in &scan.runs {
        let m = r
            .meta
            .measurement
            .as_ref()
            .expect("stereo runs carry their measurement");
        let siblings = scan
            .runs
            .iter()
            .filter(|o| o.meta.measurement.as_ref().is_some_and(|x| x.id == m.id))
            .count();
        assert_eq!(siblings, 2, "half a measurement listed: {}", r.meta.id);
    }
    // What a killed writer left behind is removed by the next write.
    let (code, _, err) = run(&["analyze", &cap, "--notebook", &nb, "--label", "after"]);
    assert_eq!(code, 0, "{err}");
    let scan = Notebook::open(Path::new(&nb)).unwrap().scan().unwrap();
    assert_eq!(scan.leftovers, 0);
    std::fs::remove_dir_all(&d).ok();
}

#[cfg(unix)]
#[test]
fn a_full_disk_is_said_and_nothing_half_written_is_kept() {
    let d = tmpdir("store-full");
    let cap = stereo_capture(&d);
    let nb = init(&d);
    // A 40 KiB file-size limit: the capture copy (about 300 KB) cannot be written.
    let out = Command::new("sh")
        .arg("-c")
        .arg(format!(
            "trap '' XFSZ; ulimit -f 80; exec '{}' analyze '{}' --notebook '{}' --label full",
            bin(),
            cap,
            nb
        ))
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(err.contains("disk is full"), "{err}");
    let scan = Notebook::open(Path::new(&nb)).unwrap().scan().unwrap();
    assert!(scan.runs.is_empty() && scan.incomplete.is_empty() && scan.leftovers == 0);
    // notebook init on a full disk leaves nothing that looks like a notebook.
    let fresh = d.join("fresh");
    let out = Command::new("sh")
        .arg("-c")
        .arg(format!(
            "trap '' XFSZ; ulimit -f 0; exec '{}' notebook init '{}' --amplifier x",
            bin(),
            fresh.display()
        ))
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2));
    assert!(!fresh.join("runs").exists());
    std::fs::remove_dir_all(&d).ok();
}

#[test]
fn damaged_and_hostile_contents_are_listed_not_hidden() {
    let d = tmpdir("store-damaged");
    let cap = stereo_capture(&d);
    let nb = init(&d);
    let (code, _, err) = run(&[
        "analyze",
        &cap,
        "--notebook",
        &nb,
        "--label",
        "good",
        "--channel",
        "1",
    ]);
    assert_eq!(code, 0, "{err}");
    let runs = Path::new(&nb).join("runs");
    // A garbage run.json, a result that is not one, a link leading outside.
    let g = runs.join("0100-x-ch1-tone");
    std::fs::create_dir(&g).unwrap();
    std::fs::write(g.join("run.json"), "\x00garbage").unwrap();
    std::fs::write(g.join("result.json"), "{}").unwrap();
    let r = runs.join("0101-y-ch1-tone");
    std::fs::create_dir(&r).unwrap();
    let good = Notebook::open(Path::new(&nb))
        .unwrap()
        .runs()
        .unwrap()
        .remove(0);
    std::fs::copy(good.dir.join("run.json"), r.join("run.json")).unwrap();
    std::fs::write(r.join("result.json"), "[1, 2").unwrap();
    #[cfg(unix)]
    std::os::unix::fs::symlink(&d, runs.join("0102-z-ch1-tone")).unwrap();
    let (code, out, err) = run(&["notebook", "log", &nb]);
    assert_eq!(code, 0, "{err}");
    assert!(out.contains("damaged run folders"), "{out}");
    assert!(
        out.contains("run.json") && out.contains("result.json"),
        "{out}"
    );
    #[cfg(unix)]
    assert!(out.contains("symbolic link"), "{out}");
    // Re-analysis touches the good run only.
    let (code, _, err) = run(&["notebook", "reanalyze", &nb]);
    assert_eq!(code, 0, "{err}");
    assert!(!d.join("result.json").exists());
    // Hostile labels: refused when empty or carrying terminal controls; a long one is kept whole
    // in the metadata under a short folder name.
    for bad in ["", "   ", "clear\x1b[2Jscreen", "evil\u{202e}txt.exe"] {
        let (code, _, err) = run(&["analyze", &cap, "--notebook", &nb, "--label", bad]);
        assert_eq!(code, 2, "label {bad:?}: {err}");
        assert!(err.contains("--label"), "{err}");
        assert!(
            !err.contains('\x1b') && !err.contains('\u{202e}'),
            "{err:?}"
        );
    }
    // A label edited into run.json by hand: the log and the report show it escaped.
    let good_dir = Notebook::open(Path::new(&nb)).unwrap().runs().unwrap()[0]
        .dir
        .clone();
    let meta_path = good_dir.join("run.json");
    let mut meta: ampnote::notebook::RunMeta =
        serde_json::from_str(&std::fs::read_to_string(&meta_path).unwrap()).unwrap();
    meta.label = "good\x1b[2J\u{202e}".into();
    std::fs::write(&meta_path, serde_json::to_string(&meta).unwrap()).unwrap();
    let (_, out, _) = run(&["notebook", "log", &nb]);
    assert!(
        !out.contains('\x1b') && !out.contains('\u{202e}'),
        "{out:?}"
    );
    assert!(out.contains("\\u{1b}"), "{out}");
    let report_dir = d.join("report");
    let (code, _, err) = run(&["report", &nb, "--out", &report_dir.display().to_string()]);
    assert_eq!(code, 0, "{err}");
    let html = std::fs::read_to_string(report_dir.join("report.html")).unwrap();
    assert!(!html.contains('\x1b') && !html.contains('\u{202e}'));
    let long = "a".repeat(150) + " after the driver rework";
    let (code, _, err) = run(&[
        "analyze",
        &cap,
        "--notebook",
        &nb,
        "--label",
        &long,
        "--channel",
        "1",
    ]);
    assert_eq!(code, 0, "{err}");
    let kept = Notebook::open(Path::new(&nb))
        .unwrap()
        .runs()
        .unwrap()
        .into_iter()
        .find(|r| r.meta.label == long)
        .expect("the long label kept whole");
    assert!(kept.dir.file_name().unwrap().len() < 80);
    std::fs::remove_dir_all(&d).ok();
}
