//! ngspice's binary raw output read back (fixtures/spice/rc.raw, made by ngspice 39 from
//! fixtures/spice/rc.cir; see fixtures/README.md): the RC low-pass's AC plot against its closed
//! form 1 / (1 + j f / fc) with fc = 1 / (2 pi R C), and a cut or damaged file refused with what
//! is wrong, never read short.

use ampnote::rig::spice::raw::parse;
use realfft::num_complex::Complex64;
use std::f64::consts::PI;

fn fixture() -> Vec<u8> {
    std::fs::read(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/fixtures/spice/rc.raw"
    ))
    .unwrap()
}

#[test]
fn an_rc_low_pass_reads_its_closed_form() {
    let plots = parse(&fixture()).unwrap();
    assert_eq!(plots.len(), 2, "an AC and a transient plot");
    let ac = &plots[0];
    assert_eq!(ac.name, "AC Analysis");
    let f = ac.real("frequency").unwrap();
    let vin = ac.variable("v(in)").unwrap();
    let vout = ac.variable("V(OUT)").unwrap();
    assert_eq!(f.len(), 21, "5 points a decade from 10 Hz to 100 kHz");
    let fc = 1.0 / (2.0 * PI * 1e3 * 159.155e-9);
    for ((f, i), o) in f.iter().zip(vin).zip(vout) {
        let h = o / i;
        let want = Complex64::new(1.0, 0.0) / Complex64::new(1.0, f / fc);
        let db = 20.0 * (h.norm() / want.norm()).log10();
        let deg = (h.arg() - want.arg()).to_degrees();
        assert!(
            db.abs() < 1e-6 && deg.abs() < 1e-4,
            "{f} Hz: {db} dB, {deg} deg"
        );
    }
    let tran = &plots[1];
    assert!(tran.name.starts_with("Transient"), "{}", tran.name);
    let t = tran.real("time").unwrap();
    assert!(t.windows(2).all(|w| w[1] > w[0]), "time runs forward");
    assert!((t.last().unwrap() - 5e-3).abs() < 1e-9);
    assert!(tran.variable("v(nowhere)").is_err());
}

#[test]
fn a_cut_or_damaged_raw_file_is_refused() {
    let bytes = fixture();
    // Cut inside the first plot's data: the points promised are not there.
    let data = bytes.windows(8).position(|w| w == b"Binary:\n").unwrap() + 8;
    let err = parse(&bytes[..data + 500]).unwrap_err().to_string();
    assert!(err.contains("promises 21 points"), "{err}");
    // No binary section: the ASCII form, or not a raw file at all.
    let err = parse(b"Title: x\nPlotname: AC Analysis\nFlags: complex\n")
        .unwrap_err()
        .to_string();
    assert!(err.contains("Binary"), "{err}");
    assert!(parse(b"").is_err());
    // A value that is not a number.
    let mut nan = bytes.clone();
    let at = nan.windows(8).position(|w| w == b"Binary:\n").unwrap() + 8;
    nan[at..at + 8].copy_from_slice(&f64::NAN.to_le_bytes());
    let err = parse(&nan).unwrap_err().to_string();
    assert!(err.contains("not a finite number"), "{err}");
}
