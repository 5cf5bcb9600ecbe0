//! DC operating points against Ohm's law (I = V / R) and Joule's law (P = V^2 / R), worked by
//! hand beside each check; ratings against the common-practice derating to half.

use super::common::{run, tmpdir};
use ampnote::notebook::Notebook;
use ampnote::procedure::dc::{operating_points, parse_point, parse_rating};

#[test]
fn currents_and_dissipations_follow_ohms_law() {
    // 45 V across a 1 kohm cathode resistor: 45 mA, 45^2 / 1000 = 2.025 W.
    // 9.4 V across 4.7 kohm: 2 mA, 9.4^2 / 4700 = 0.0188 W.
    let points = ["B+=365", "Rk=45@1k", "R7=9.4@4.7k", "G1=-42.5"]
        .iter()
        .map(|p| parse_point(p).unwrap())
        .collect();
    let r = operating_points(points, vec![parse_rating("Rk=3").unwrap()]).unwrap();
    let rk = &r.points[1];
    assert!((rk.current_ma.unwrap() - 45.0).abs() < 1e-9);
    assert!((rk.dissipation_w.unwrap() - 2.025).abs() < 1e-9);
    assert!(!rk.overstressed);
    // 2.025 W of 3 W is 67.5 % (shown as 68 %): over the half common practice allows, a warning.
    assert!(
        r.warnings.iter().any(|w| w.message.contains("68 %")),
        "{:?}",
        r.warnings
    );
    let r7 = &r.points[2];
    assert!((r7.current_ma.unwrap() - 2.0).abs() < 1e-9);
    assert!((r7.dissipation_w.unwrap() - 0.0188).abs() < 1e-12);
    assert_eq!(r.points[3].volts, -42.5);
    assert!(r.points[0].current_ma.is_none());
    // Rated 2 W: overstressed.
    let over = operating_points(
        vec![parse_point("Rk=45@1k").unwrap()],
        vec![parse_rating("Rk=2").unwrap()],
    )
    .unwrap();
    assert!(over.points[0].overstressed);
}

#[test]
fn bad_readings_are_refused_with_the_reason() {
    for (text, why) in [
        ("B+365", "NAME=VOLTS"),
        ("B+=abc", "not a number"),
        ("B+=nan", "not a number"),
        ("=365", "1 to 40 characters"),
        ("Rk=45@0", "above 0"),
        ("Rk=45@2000M", "up to 1 Gohm"),
        ("B+=1e6", "10 kV"),
    ] {
        let err = parse_point(text).unwrap_err().to_string();
        assert!(err.contains(why), "{text}: {err}");
    }
    assert!(parse_rating("Rk=-1").is_err());
    assert!(parse_rating("Rk").is_err());
    let twice = vec![parse_point("B+=1").unwrap(), parse_point("B+=2").unwrap()];
    assert!(operating_points(twice, vec![]).is_err());
    let unrated = vec![parse_point("B+=365").unwrap()];
    let err = operating_points(unrated.clone(), vec![("B+".into(), 2.0)])
        .unwrap_err()
        .to_string();
    assert!(err.contains("no resistor"), "{err}");
    let err = operating_points(unrated, vec![("Rk".into(), 2.0)])
        .unwrap_err()
        .to_string();
    assert!(err.contains("no --point Rk"), "{err}");
}

#[test]
fn dc_points_join_the_notebook_log_and_compare() {
    let d = tmpdir("dc");
    let nb = d.join("amp");
    let nbs = nb.to_str().unwrap();
    assert_eq!(run(&["notebook", "init", nbs, "--amplifier", "test"]).0, 0);
    let (code, out, err) = run(&[
        "notebook", "dc", nbs, "--label", "stock", "--point", "B+=365", "--point", "Rk=45@1k",
        "--max-w", "Rk=2",
    ]);
    // Over its rating: kept, and exit 1 (a check that failed), with the caution shown.
    assert_eq!(code, 1, "{out}{err}");
    assert!(err.contains("lethal voltages"), "{err}");
    assert!(err.contains("over its 2 W rating"), "{err}");
    let (code, _, err) = run(&[
        "notebook", "dc", nbs, "--label", "rework", "--point", "B+=372", "--point", "Rk=41@1k",
    ]);
    assert_eq!(code, 0, "{err}");
    let (_, log, _) = run(&["notebook", "log", nbs]);
    assert!(log.contains("45.00 mA"), "{log}");
    let (code, _, err) = run(&[
        "notebook",
        "dc",
        nbs,
        "--label",
        "x",
        "--point",
        "B+=1",
        "--channel",
        "3",
    ]);
    assert_eq!(code, 2, "{err}");
    let book = Notebook::open(&nb).unwrap();
    let a = book.select("stock", None).unwrap();
    let b = book.select("rework", None).unwrap();
    let c = ampnote::report::compare::compare("stock", &a, "rework", &b);
    let line = |f: &str| c.lines.iter().find(|l| l.figure == f).unwrap();
    // 372 - 365 = +7 V; 41 - 45 = -4 mA; 1.681 W against 2.025 W = 10 log10(1.681 / 2.025) dB.
    assert!((line("DC B+").delta.unwrap() - 7.0).abs() < 1e-9);
    assert!((line("DC Rk current").delta.unwrap() + 4.0).abs() < 1e-9);
    let expected = 10.0 * (1.681f64 / 2.025).log10();
    assert!((line("DC Rk dissipation").delta.unwrap() - expected).abs() < 1e-9);
}
