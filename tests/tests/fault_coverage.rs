//! Fault coverage and part-level diagnosis against the twin: every fault
//! `rchold coverage` lists for the Lumen-3 stage (every E-series neighbour
//! of R and C within two decades, opens, shorts, a wrong diode, other logic
//! families) is built on the simulated board and measured by the firmware
//! engine with the fixture's settings; the engine's verdict must be the one
//! coverage predicts, and the host's diagnosis of the measured hold and
//! turn-on must name the part that was changed (or say it is ambiguous
//! between parts that include it).

use std::path::PathBuf;

use hold_firmware::{Setup, Tester};
use host_check::design::coverage::{coverage, Catch, Change, Kind};
use host_check::design::diagnose::{diagnose, Finding, Part};
use host_check::design::window::settings;
use host_check::sim::twin::{Fault, Twin};
use host_check::stage::file::{load, Purpose, StageFile};

const CLOCK_HZ: u32 = 1_000_000;

fn lumen() -> StageFile {
    let path = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../examples/lumen-keypad.toml");
    load(&path).unwrap_or_else(|e| panic!("{e}"))
}

fn setup(sf: &StageFile) -> Setup {
    let poll = host_check::design::window::default_poll_ns(sf).unwrap_or_else(|e| panic!("{e}"));
    settings(sf, Purpose::Fixture, CLOCK_HZ, 20_000, poll).unwrap_or_else(|e| panic!("{e}"))
}

/// The twin's board for a change, and the faults the twin injects for the
/// ones no value represents (a shorted R or diode has no twin fault: none).
fn board(sf: &StageFile, change: Change) -> Option<(rc_model::Stage, Vec<Fault>)> {
    if let Some(s) = change.apply(&sf.stage) {
        return Some((s, Vec::new()));
    }
    let fault = match change {
        Change::OpenC => Fault::OpenCapacitor,
        Change::ShortC => Fault::ShortedCapacitor,
        Change::OpenR => Fault::OpenResistor,
        Change::OpenDiode => Fault::OpenDiode,
        _ => return None,
    };
    Some((sf.stage, vec![fault]))
}

fn measure(plant: &rc_model::Stage, faults: &[Fault], s: &Setup) -> hold_firmware::Measurement {
    let twin = Twin::new(plant, faults, CLOCK_HZ, 7);
    let (trig, out, delay, clock) = twin.handles();
    let mut t = Tester::new(trig, out, delay, clock, s.config, s.stage);
    t.measure().unwrap_or_else(|e| panic!("{e}"))
}

#[test]
fn coverage_predicts_the_twins_verdicts_and_diagnosis_names_the_part() {
    let sf = lumen();
    let s = setup(&sf);
    let c = coverage(&sf, &s, &sf.spread_for(Purpose::Fixture));
    // Every neighbour within two decades: E96 for the 1 % resistor (4 decades
    // of 96, less the nominal, plus the far end), E12 for the 10 % capacitor.
    let count = |k: Kind| c.outcomes.iter().filter(|o| o.kind == k).count();
    assert_eq!(count(Kind::ResistorValue), 4 * 96);
    assert_eq!(count(Kind::CapacitorValue), 4 * 12);
    let resolution_s = (f64::from(s.config.on_poll_ns) * 1e-9) + 1.0 / f64::from(CLOCK_HZ);
    let (mut checked, mut named, mut ambiguous) = (0, 0, 0);
    let mut wrong = Vec::new();
    for o in &c.outcomes {
        let Some((plant, faults)) = board(&sf, o.change) else { continue };
        let m = measure(&plant, &faults, &s);
        // Within 2 % of a window edge the closed form and the integrated twin
        // (and the poll) may fall on either side: not a disagreement.
        if o.margin_pct.is_none_or(|p| p.abs() > 2.0) {
            checked += 1;
            if m.verdict.name() != o.verdict {
                wrong.push(format!(
                    "{}: coverage {} ({}), twin {}",
                    o.fault,
                    o.verdict,
                    o.catch.name(),
                    m.verdict.name()
                ));
            }
        }
        // The diagnosis of the wrong values, from the twin's own measurements.
        let part = match (o.kind, m.hold_ticks) {
            (Kind::ResistorValue, Some(h)) => (Part::Resistor, h),
            (Kind::CapacitorValue, Some(h)) => (Part::Capacitor, h),
            _ => continue,
        };
        let (part, hold) = part;
        let secs = |t: u64| t as f64 / f64::from(CLOCK_HZ);
        let d = diagnose(&sf, secs(hold), m.on_ticks.map(secs), resolution_s).unwrap_or_else(|e| panic!("{e}"));
        match &d.finding {
            Finding::Named(p) if *p == part => named += 1,
            Finding::Ambiguous(ps) if ps.contains(&part) => ambiguous += 1,
            // A neighbour inside the healthy scatter reads as healthy.
            Finding::Healthy if o.catch == Catch::Escape => {}
            other => wrong.push(format!("{}: diagnosed {other:?}", o.fault)),
        }
    }
    assert!(wrong.is_empty(), "{} of {checked} disagree:\n{}", wrong.len(), wrong.join("\n"));
    assert!(checked > 400, "only {checked} faults checked");
    // Hold and turn-on together name most wrong values outright (the rest: an R
    // the falling threshold could also explain, or a C so small that its turn-on
    // is below the resolution). Measured: 244 named, 96 ambiguous, none wrong.
    assert!(named >= 2 * ambiguous, "named {named}, ambiguous {ambiguous}");
}

/// A new board whose capacitor is 36 % low fails the fixture window (which
/// leaves aging out) and is named: the diagnosis reads C at about 0.64 of
/// nominal, and the nearest preferred value.
#[test]
fn a_new_board_with_c_36_percent_low_fails_and_is_named() {
    let sf = lumen();
    let s = setup(&sf);
    let mut plant = sf.stage;
    plant.c_ff = (plant.c_ff as f64 * 0.64) as u64;
    let m = measure(&plant, &[], &s);
    assert!(!m.verdict.passes(), "{:?}", m.verdict);
    let secs = |t: u64| t as f64 / f64::from(CLOCK_HZ);
    let resolution_s = (f64::from(s.config.on_poll_ns) * 1e-9) + 1.0 / f64::from(CLOCK_HZ);
    let d = diagnose(&sf, secs(m.hold_ticks.unwrap_or(0)), m.on_ticks.map(secs), resolution_s)
        .unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(d.finding, Finding::Named(Part::Capacitor), "{}", host_check::design::diagnose::render("lumen", &d));
    let c = d.suspects.first().map_or(0.0, |x| x.value);
    assert!((c / 0.64e-6 - 1.0).abs() < 0.03, "C reads {c}");
}
