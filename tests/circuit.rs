//! The circuit rig's foundation against a real ngspice (Debian's `ngspice`, run as a child
//! process; feature `circuit`, run by .ci/circuit-check.sh): an RC low-pass's `.ac` against its
//! closed form, and the failures a user's netlist can bring (an unknown part, a run that never
//! ends, no ngspice at all) each stopped with an error that says what to do.
#![cfg(feature = "circuit")]

use ampnote::error::Error;
use ampnote::rig::spice::{run, run_with};
use realfft::num_complex::Complex64;
use std::f64::consts::PI;
use std::time::Duration;

fn dir(tag: &str) -> std::path::PathBuf {
    std::env::temp_dir().join(format!("ampnote-circuit-{tag}-{}", std::process::id()))
}

/// Closed form: 1 / (1 + j w R C), R = 2.2 kohm, C = 47 nF (fc = 1539.2 Hz), over 10 Hz-100 kHz.
#[test]
fn an_rc_low_pass_in_ngspice_reads_its_closed_form() {
    let deck =
        "RC low-pass\nV1 in 0 DC 0 AC 1\nR1 in out 2.2k\nC1 out 0 47n\n.ac dec 20 10 100k\n.end\n";
    let out = run(deck, &dir("rc"), Duration::from_secs(30)).unwrap();
    let ac = out.plot("AC").unwrap();
    let f = ac.real("frequency").unwrap();
    let v = ac.variable("v(out)").unwrap();
    assert_eq!(f.len(), 81);
    for (f, v) in f.iter().zip(v) {
        let want = Complex64::new(1.0, 0.0) / Complex64::new(1.0, 2.0 * PI * f * 2.2e3 * 47e-9);
        let db = 20.0 * (v.norm() / want.norm()).log10();
        assert!(db.abs() < 1e-6, "{f} Hz: {db} dB off");
        assert!((v.arg() - want.arg()).to_degrees().abs() < 1e-4, "{f} Hz");
    }
    assert!(out.warnings.is_empty(), "{:?}", out.warnings);
}

#[test]
fn an_unknown_part_is_refused_with_ngspices_own_words() {
    let deck = "unknown\nV1 in 0 SIN(0 1 1k)\nX1 in out nosuch\nR1 out 0 1k\n.tran 10u 1m\n.end\n";
    let err = run(deck, &dir("unknown"), Duration::from_secs(30)).unwrap_err();
    assert!(matches!(err, Error::Spice { .. }), "{err:?}");
    let text = err.to_string();
    assert!(text.contains("unknown subckt"), "{text}");
    assert_eq!(err.exit_code(), 3);
}

#[test]
fn a_run_that_never_ends_is_stopped_at_its_limit() {
    // Ten seconds of circuit at a nanosecond step: ten billion steps.
    let deck = "long\nV1 in 0 SIN(0 1 1k)\nR1 in out 1k\nC1 out 0 1u\n.tran 1n 10 0 1n\n.end\n";
    let started = std::time::Instant::now();
    let err = run(deck, &dir("long"), Duration::from_secs(2)).unwrap_err();
    assert!(matches!(err, Error::SpiceTimedOut { .. }), "{err:?}");
    assert!(started.elapsed() < Duration::from_secs(10));
}

#[test]
fn a_floating_node_comes_back_as_a_warning() {
    let deck = "floating\nV1 in 0 SIN(0 1 1k)\nC1 in out 1u\nC2 out x 1u\n.tran 10u 1m\n.end\n";
    let out = run(deck, &dir("floating"), Duration::from_secs(30)).unwrap();
    assert!(
        out.warnings.iter().any(|w| w.contains("singular matrix")),
        "{:?}",
        out.warnings
    );
}

#[test]
fn no_ngspice_says_how_to_install_it() {
    let err = run_with(
        std::path::Path::new("/nonexistent/ngspice"),
        "x\n.end\n",
        &dir("missing"),
        Duration::from_secs(5),
    )
    .unwrap_err();
    assert!(matches!(err, Error::SpiceMissing { .. }), "{err:?}");
    assert!(err.to_string().contains("apt install ngspice"), "{err}");
}
