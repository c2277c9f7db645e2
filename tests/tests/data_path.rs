//! The data side end to end: the demo scenario's records through listen and
//! ingest into the store, the yield and fleet reports out of it; corrupted
//! streams; idempotent and atomic ingest; two writers at once.

use std::collections::HashSet;
use std::io::Cursor;

use hold_firmware::drift::DriftState;
use hold_firmware::record::{self, Record};
use hold_firmware::{Hint, Verdict};
use host_check::data::collect::{self, Ingested, Labels, TimeRule};
use host_check::data::store::{Filter, Store};
use host_check::data::{log, time};
use host_check::sim::demo::{self, Scenario};
use proptest::prelude::*;

fn tmp() -> tempfile::TempDir {
    tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"))
}

/// The demo scenario, smaller: every record sent is stored or reported as a
/// bad frame; the reports see exactly what was stored; every injected fault
/// that reached the store is rejected with a hint; the firmware's verdicts
/// all survive the f64 re-check; the fleet forecasts land within ±20 % of
/// the simulated truth.
#[test]
fn demo_scenario_end_to_end() {
    let dir = tmp();
    let sc = Scenario { boards: 400, units: 24, days: 500, seed: 7 };
    let out = demo::run(&sc, &dir.path().join("d.db"), dir.path(), |_| {}).unwrap_or_else(|e| panic!("{e}"));
    let l = &out.ledger;
    assert_eq!(l.bay_a_sent + l.bay_b_lines, u64::from(sc.boards));
    assert_eq!(l.bay_a_sent, l.bay_a_stored + l.bay_a_bad, "{l:?}");
    assert_eq!(l.bay_a_bad, l.bay_a_damaged);
    assert!(l.bay_a_bad > 0, "the line noise must cost something");
    assert_eq!(l.bay_b_lines, l.bay_b_stored);
    assert_eq!(l.fleet_sent, u64::from(sc.units) * u64::from(sc.days));
    assert_eq!(l.fleet_sent, l.fleet_stored + l.fleet_bad);
    let store = Store::open(&dir.path().join("d.db")).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(store.count().ok(), Some(l.bay_a_stored + l.bay_b_stored + l.fleet_stored));
    assert_eq!(store.integrity().ok().as_deref(), Some("ok"));
    // What the store's sources say matches what the demo counted.
    let sources = store.sources().unwrap_or_else(|e| panic!("{e}"));
    let (stored, bad): (u64, u64) = sources.iter().fold((0, 0), |a, s| (a.0 + s.records, a.1 + s.bad_frames));
    assert_eq!(stored, l.bay_a_stored + l.bay_b_stored + l.fleet_stored);
    assert_eq!(bad, l.bay_a_bad + l.fleet_bad);

    // The whole store re-checked against every setup (the meters' window is set by hand).
    let setups = store.setups().unwrap_or_else(|e| panic!("{e}"));
    let mut all = host_check::report::yields::Tally::new(&setups, true, None);
    store
        .for_each(&Filter::default(), |s| all.add("any", &s.batch, s.measured_ms, &s.record, s.setup_id))
        .unwrap_or_else(|e| panic!("{e}"));
    let all = all.finish().unwrap_or_else(|e| panic!("{e}"));
    let rc_all = all.recheck.unwrap_or_default();
    assert_eq!(rc_all.disagreements_total, 0, "{:?}", rc_all.disagreements.first());
    assert_eq!(rc_all.windows.iter().filter(|w| w.custom).count(), 1, "{:?}", rc_all.windows);
    let y = &out.yields;
    assert_eq!(y.all.total, l.bay_a_stored + l.bay_b_stored);
    let rc = y.recheck.as_ref().unwrap_or_else(|| panic!("re-check off"));
    assert_eq!(rc.disagreements_total, 0, "{:?}", rc.disagreements);
    assert!(rc.checked > u64::from(sc.boards) * 9 / 10);
    // Every injected fault that reached the store is a reject, with a cause.
    let mut stored_units = HashSet::new();
    store
        .for_each(&Filter::default(), |s| {
            stored_units.insert(s.record.unit_id);
        })
        .unwrap_or_else(|e| panic!("{e}"));
    let rejected: HashSet<u32> = y.rejects.iter().map(|r| r.unit).collect();
    assert_eq!(y.rejects_total as usize, y.rejects.len(), "all rejects fit the report's list here");
    for (unit, what) in &l.faults {
        if stored_units.contains(unit) {
            assert!(rejected.contains(unit), "fault {what} on {unit} passed");
        }
    }
    for r in &y.rejects {
        assert_ne!(r.record.hint, Hint::None, "{r:?}");
    }
    // Healthy boards pass: rejects are only the injected faults.
    let faulty: HashSet<u32> = l.faults.iter().map(|f| f.0).collect();
    for r in &y.rejects {
        assert!(faulty.contains(&r.unit), "healthy board {} rejected: {:?}", r.unit, r.record);
    }
    assert!(y.all.cpk.is_some_and(|c| c > 1.0), "Cpk {:?}", y.all.cpk);

    // Fleet: forecasts against the simulated truth (crossing of 80 % of the commissioning value).
    let f = &out.fleet;
    assert_eq!(f.units.len(), sc.units as usize);
    let start = demo::fleet_start_ms(sc.days);
    let mut compared = 0;
    for u in &f.units {
        let truth = l.truth_ms.iter().find(|t| t.0 == u.unit).and_then(|t| t.1);
        let (Some(truth), Some(fc)) = (truth, u.forecast_ms) else { continue };
        let (t, p) = ((truth - start) as f64, (fc - start) as f64);
        let err = (p - t).abs() / t;
        assert!(
            err <= 0.2,
            "unit {}: forecast {} vs truth {} ({:.1} %)",
            u.unit,
            time::date_of(fc),
            time::date_of(truth),
            err * 100.0
        );
        compared += 1;
    }
    assert!(compared >= 15, "only {compared} units had a forecast to compare");
    // The files of the report exist and the page is self-contained.
    let html = std::fs::read_to_string(dir.path().join("report.html")).unwrap_or_default();
    assert!(
        html.contains("<svg")
            && html.contains("Fleet aging")
            && !html.contains("<script")
            && !html.contains("http://www.w3.org/1999/xlink")
    );
}

fn rec(i: u32) -> Record {
    Record {
        seq: i,
        unit_id: 40_000 + i % 17,
        boot: 2,
        press_ticks: 100_000 + u64::from(i),
        on_ticks: (!i.is_multiple_of(5)).then_some(54),
        hold_ticks: Some(740_000 + u64::from(i) * 13),
        clock_hz: 1_000_000,
        temp_mdeg_c: Some(-5_000 + i as i32),
        verdict: if i.is_multiple_of(11) { Verdict::Short } else { Verdict::WithinWindow },
        hint: if i.is_multiple_of(11) { Hint::NearTheEdge } else { Hint::None },
        drift: DriftState::Steady,
        c_deviation_ppm: i.is_multiple_of(3).then_some(-(i as i32)),
    }
}

fn labels() -> Labels {
    Labels {
        station: "s".into(),
        batch: "b".into(),
        setup_id: None,
        time: TimeRule::Sequence { start_ms: 0, period_ms: 1_000 },
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 48, ..ProptestConfig::default() })]
    /// Bit flips, dropped bytes, inserted bytes and a truncated end never
    /// store a record that was not sent, and never store one twice.
    #[test]
    fn corrupted_streams_store_only_true_records(
        n in 1u32..300,
        flips in proptest::collection::vec((any::<usize>(), 0u8..8), 0..20),
        drops in proptest::collection::vec(any::<usize>(), 0..10),
        inserts in proptest::collection::vec((any::<usize>(), any::<u8>()), 0..10),
        cut in any::<usize>(),
    ) {
        let sent: Vec<Record> = (0..n).map(rec).collect();
        let mut bytes: Vec<u8> = sent.iter().flat_map(|r| record::encode(r).map(|f| f.to_vec()).unwrap_or_default()).collect();
        for (at, bit) in flips {
            let i = at % bytes.len();
            if let Some(b) = bytes.get_mut(i) { *b ^= 1 << bit; }
        }
        for at in drops {
            if !bytes.is_empty() { bytes.remove(at % bytes.len()); }
        }
        for (at, v) in inserts {
            bytes.insert(at % (bytes.len() + 1), v);
        }
        let keep = bytes.len() - cut % (bytes.len() / 4 + 1);
        bytes.truncate(keep);
        let dir = tmp();
        let mut store = Store::open(&dir.path().join("c.db")).map_err(|e| TestCaseError::fail(e.to_string()))?;
        let got = collect::listen(&mut store, "noisy", collect::Input::once(Cursor::new(bytes)), &labels(), |_| {}, || false)
            .map_err(|e| TestCaseError::fail(e.to_string()))?;
        let mut seen = HashSet::new();
        let mut wrong = 0;
        store.for_each(&Filter::default(), |s| {
            let ok = sent.get(s.record.seq as usize) == Some(&s.record) && s.measured_ms == i64::from(s.record.seq) * 1_000;
            wrong += u32::from(!ok || !seen.insert(s.record.seq));
        }).map_err(|e| TestCaseError::fail(e.to_string()))?;
        prop_assert_eq!(wrong, 0);
        prop_assert_eq!(got.stored as usize, seen.len());
        prop_assert!(got.stored <= u64::from(n));
    }
}

/// A clean stream: records in = records stored, and listening to the same
/// stream again stores nothing new (each record is keyed by station, unit, seq).
#[test]
fn a_clean_stream_is_stored_whole_and_once() {
    let dir = tmp();
    let mut store = Store::open(&dir.path().join("s.db")).unwrap_or_else(|e| panic!("{e}"));
    let sent: Vec<Record> = (0..10_000).map(rec).collect();
    let bytes: Vec<u8> = sent.iter().flat_map(|r| record::encode(r).map(|f| f.to_vec()).unwrap_or_default()).collect();
    let a = collect::listen(
        &mut store,
        "first",
        collect::Input::once(Cursor::new(bytes.clone())),
        &labels(),
        |_| {},
        || false,
    )
    .unwrap_or_else(|e| panic!("{e}"));
    assert_eq!((a.stored, a.counts.bad_frames, a.duplicates), (10_000, 0, 0));
    let b = collect::listen(&mut store, "again", collect::Input::once(Cursor::new(bytes)), &labels(), |_| {}, || false)
        .unwrap_or_else(|e| panic!("{e}"));
    assert_eq!((b.stored, b.duplicates), (0, 10_000));
    let mut back = Vec::new();
    store.for_each(&Filter::default(), |s| back.push(s.record)).unwrap_or_else(|e| panic!("{e}"));
    back.sort_by_key(|r| r.seq);
    assert_eq!(back, sent);
}

fn write_log(path: &std::path::Path, station: &str, from: u32, n: u32) {
    let mut out = Vec::new();
    log::write_header(&mut out).unwrap_or_else(|e| panic!("{e}"));
    for i in from..from + n {
        log::write_line(&mut out, 1_800_000_000_000 + i64::from(i), station, "B1", &rec(i))
            .unwrap_or_else(|e| panic!("{e}"));
    }
    std::fs::write(path, out).unwrap_or_else(|e| panic!("{e}"));
}

/// A log with a bad line stores nothing; the same file again is a no-op;
/// a good file is stored whole.
#[test]
fn ingest_is_atomic_and_idempotent() {
    let dir = tmp();
    let db = dir.path().join("i.db");
    let mut store = Store::open(&db).unwrap_or_else(|e| panic!("{e}"));
    let good = dir.path().join("good.csv");
    write_log(&good, "bay-9", 0, 500);
    let bad = dir.path().join("bad.csv");
    let mut text = std::fs::read_to_string(&good).unwrap_or_default();
    text = text.replacen(",within-window,", ",within-windw,", 1);
    text.push_str("2027-01-01T00:00:00Z,bay-9,B1,1,99999,1000000,5,,1,20,within-window,none,steady,\n");
    std::fs::write(&bad, text).unwrap_or_else(|e| panic!("{e}"));
    let e = collect::ingest(&mut store, &bad, None).err().map(|e| e.to_string()).unwrap_or_default();
    assert!(e.contains("bad.csv:3: verdict: \"within-windw\" is not a verdict (accepted: within-window"), "{e}");
    assert_eq!(store.count().ok(), Some(0));
    assert!(store.sources().unwrap_or_default().is_empty());
    match collect::ingest(&mut store, &good, None) {
        Ok(Ingested::Stored { written, lines }) => assert_eq!((written.stored, lines), (500, 500)),
        other => panic!("{other:?}"),
    }
    match collect::ingest(&mut store, &good, None) {
        Ok(Ingested::AlreadyStored { .. }) => {}
        other => panic!("{other:?}"),
    }
    assert_eq!(store.count().ok(), Some(500));
}

/// Two writers at once — one listening, one ingesting — into the same file: nothing is lost.
#[test]
fn two_writers_lose_nothing() {
    let dir = tmp();
    let db = dir.path().join("w.db");
    drop(Store::open(&db).unwrap_or_else(|e| panic!("{e}")));
    let log_path = dir.path().join("w.csv");
    write_log(&log_path, "bay-log", 0, 30_000);
    let sent: Vec<Record> = (0..30_000).map(rec).collect();
    let bytes: Vec<u8> = sent.iter().flat_map(|r| record::encode(r).map(|f| f.to_vec()).unwrap_or_default()).collect();
    std::thread::scope(|s| {
        let a = s.spawn(|| {
            let mut st = Store::open(&db).unwrap_or_else(|e| panic!("{e}"));
            collect::listen(&mut st, "stream", collect::Input::once(Cursor::new(bytes)), &labels(), |_| {}, || false)
                .map(|l| l.stored)
        });
        let b = s.spawn(|| {
            let mut st = Store::open(&db).unwrap_or_else(|e| panic!("{e}"));
            collect::ingest(&mut st, &log_path, None)
        });
        let a = a.join().unwrap_or_else(|_| panic!("listener panicked"));
        let b = b.join().unwrap_or_else(|_| panic!("ingester panicked"));
        assert_eq!(a.ok(), Some(30_000));
        assert!(matches!(b, Ok(Ingested::Stored { written, .. }) if written.stored == 30_000), "{b:?}");
    });
    let st = Store::open(&db).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(st.count().ok(), Some(60_000));
    assert_eq!(st.integrity().ok().as_deref(), Some("ok"));
}

/// Reading a log in parallel pieces gives the same report as one piece, and
/// a bad line deep in a later piece is reported with its true line number.
#[test]
fn parallel_log_reading_matches_one_piece() {
    use host_check::report::yields::tally_logs;
    let dir = tmp();
    let path = dir.path().join("p.csv");
    let mut out = Vec::new();
    log::write_header(&mut out).unwrap_or_else(|e| panic!("{e}"));
    for i in 0..20_000u32 {
        let station = ["bay, one", "bay-2", "bay-3"][(i % 3) as usize]; // a quoted name too
        log::write_line(
            &mut out,
            1_800_000_000_000 + i64::from(i) * 60_000,
            station,
            &format!("B{}", i / 700),
            &rec(i),
        )
        .unwrap_or_else(|e| panic!("{e}"));
    }
    std::fs::write(&path, &out).unwrap_or_else(|e| panic!("{e}"));
    let none = std::collections::HashMap::new();
    let all = |_: &log::Line<'_>| true;
    let one = tally_logs(std::slice::from_ref(&path), &none, None, false, &mut || Ok(None), &all, 1)
        .unwrap_or_else(|e| panic!("{e}"));
    let four = tally_logs(std::slice::from_ref(&path), &none, None, false, &mut || Ok(None), &all, 4)
        .unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(one.all.total, 20_000);
    assert_eq!(one.all.verdicts, four.all.verdicts);
    assert_eq!(one.rejects_total, four.rejects_total);
    assert_eq!(
        one.rejects.iter().map(|r| r.unit).collect::<Vec<_>>(),
        four.rejects.iter().map(|r| r.unit).collect::<Vec<_>>()
    );
    for (a, b) in one.stations.iter().zip(&four.stations) {
        assert_eq!((&a.name, a.total, a.verdicts, a.hold_s.n), (&b.name, b.total, b.verdicts, b.hold_s.n));
        assert!((a.hold_s.mean - b.hold_s.mean).abs() <= 1e-12 * a.hold_s.mean.abs());
        assert!((a.hold_s.sd() - b.hold_s.sd()).abs() <= 1e-9 * a.hold_s.sd());
    }
    let key = |p: &host_check::report::yields::Part| (p.station.clone(), p.key.clone(), p.total, p.passed);
    assert_eq!(one.batches.iter().map(key).collect::<Vec<_>>(), four.batches.iter().map(key).collect::<Vec<_>>());
    assert_eq!(one.days.iter().map(key).collect::<Vec<_>>(), four.days.iter().map(key).collect::<Vec<_>>());
    // Break line 17,001 (data line 17,000): every split reports that line.
    let text = String::from_utf8_lossy(&out).into_owned();
    let mut lines: Vec<&str> = text.lines().collect();
    let broken = lines.get(17_000).map(|l| l.replacen(",1000000,", ",1000000x,", 1)).unwrap_or_default();
    if let Some(l) = lines.get_mut(17_000) {
        *l = &broken;
    }
    std::fs::write(&path, lines.join("\n") + "\n").unwrap_or_else(|e| panic!("{e}"));
    for threads in [1, 2, 3, 8] {
        let e = tally_logs(std::slice::from_ref(&path), &none, None, false, &mut || Ok(None), &all, threads)
            .err()
            .map(|e| e.to_string())
            .unwrap_or_default();
        assert!(e.contains("p.csv:17001: clock_hz: \"1000000x\" is not a whole number"), "{threads} threads: {e}");
    }
}

/// What was done to one frame of the soak stream.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Damage {
    BitFlip,
    DropByte,
    InsertByte,
    DropDelimiter,
    InsertDelimiter,
    Truncate,
}

/// The soak: 10^6 frames through `listen` with 1 % of them corrupted (bit
/// flips, dropped and inserted bytes, dropped and inserted delimiters,
/// truncation), seeded. No wrong record is stored; every frame whose bytes and
/// delimiters arrived intact is stored (the reader is back in step at the
/// next delimiter after any damage); and the accounting balances by its rule:
/// every run of bytes between two delimiters (or before the end) counts once,
/// as a record or as a bad frame — so a dropped delimiter costs two records
/// and one bad frame, an inserted one costs one record and two bad frames.
#[test]
fn soak_a_million_frames_with_one_percent_damaged() {
    use rand::{Rng, SeedableRng};
    const FRAMES: u32 = 1_000_000;
    let soak = |i: u32| Record { temp_mdeg_c: Some(-5_000 + (i % 90_000) as i32), ..rec(i) };
    let mut rng = rand_xoshiro::Xoshiro256PlusPlus::seed_from_u64(20_261_202);
    let kinds = [
        Damage::BitFlip,
        Damage::DropByte,
        Damage::InsertByte,
        Damage::DropDelimiter,
        Damage::InsertDelimiter,
        Damage::Truncate,
    ];
    let mut bytes = Vec::with_capacity(FRAMES as usize * 32);
    let mut intact = vec![true; FRAMES as usize];
    let mut done = [0u32; 6];
    for i in 0..FRAMES {
        let mut f = record::encode(&soak(i)).map(|f| f.to_vec()).unwrap_or_default();
        if rng.random_bool(0.01) {
            let k = rng.random_range(0..kinds.len());
            done[k] += 1;
            let body = f.len() - 1; // the last byte is the delimiter
            let at = rng.random_range(0..body);
            match kinds[k] {
                Damage::BitFlip => f[at] ^= 1 << rng.random_range(0..8),
                Damage::DropByte => drop(f.remove(at)),
                Damage::InsertByte => f.insert(at, rng.random_range(1..=255)),
                Damage::DropDelimiter => {
                    f.pop();
                    // Merged with the next frame: both lost.
                    if let Some(next) = intact.get_mut(i as usize + 1) {
                        *next = false;
                    }
                }
                Damage::InsertDelimiter => f.insert(at.max(1), 0),
                Damage::Truncate => {
                    f.truncate(at.max(1));
                    f.push(0);
                }
            }
            intact[i as usize] = false;
        }
        bytes.extend_from_slice(&f);
    }
    let runs = bytes.split(|&b| b == 0).filter(|r| !r.is_empty()).count() as u64;
    let dir = tmp();
    let mut store = Store::open(&dir.path().join("soak.db")).unwrap_or_else(|e| panic!("{e}"));
    let got =
        collect::listen(&mut store, "soak", collect::Input::once(Cursor::new(bytes)), &labels(), |_| {}, || false)
            .unwrap_or_else(|e| panic!("{e}"));
    let mut wrong = 0u64;
    let mut stored = vec![false; FRAMES as usize];
    store
        .for_each(&Filter::default(), |s| {
            let i = s.record.seq;
            let ok = i < FRAMES && s.record == soak(i) && s.measured_ms == i64::from(i) * 1_000;
            wrong += u64::from(!ok);
            if let Some(x) = stored.get_mut(i as usize) {
                *x = ok;
            }
        })
        .unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(wrong, 0, "wrong records stored");
    let lost_intact = (0..FRAMES as usize).filter(|&i| intact[i] && !stored[i]).count();
    assert_eq!(lost_intact, 0, "intact frames not stored");
    let refused: u64 = got.refused.values().sum();
    assert_eq!(got.counts.records, got.stored + got.duplicates + refused);
    assert_eq!(got.counts.records + got.counts.bad_frames, runs, "the accounting rule");
    let damaged = u64::from(done.iter().sum::<u32>());
    assert!((9_000..11_000).contains(&damaged), "{damaged} frames damaged: {done:?}");
    assert!(done.iter().all(|&n| n > 1_000), "every kind of damage: {done:?}");
    eprintln!(
        "soak: {} frames, {damaged} damaged {done:?}; {} stored, {} bad frames, {} byte runs",
        FRAMES, got.stored, got.counts.bad_frames, runs
    );
}

/// One log line of the repeats test: station, unit, boot, seq from small
/// ranges (so keys repeat), content from a few choices (so contents repeat
/// too), the time any of a few days.
fn any_line() -> impl Strategy<Value = (u8, Record, i64)> {
    (0u8..2, 0u32..3, 0u32..2, 0u32..4, 0usize..4, 0i64..3, 0i64..86_400_000).prop_map(
        |(station, unit_id, boot, seq, content, day, in_day)| {
            let holds = [740_000, 741_500, 300_000, 980_000];
            let verdicts = [Verdict::WithinWindow, Verdict::WithinWindow, Verdict::Short, Verdict::Long];
            let verdict = verdicts[content];
            let r = Record {
                seq,
                unit_id,
                boot,
                hold_ticks: Some(holds[content]),
                verdict,
                hint: if verdict == Verdict::WithinWindow { Hint::None } else { Hint::WrongPart },
                ..rec(1)
            };
            (station, r, 1_800_000_000_000 + day * 86_400_000 + in_day)
        },
    )
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]
    /// Invariant: `yield` over a log (`--csv`) and over the store the log
    /// was ingested into say the same, whatever repeats the log holds —
    /// exact repeats (with another time or batch too), retests (a key with
    /// other content), restarts (another boot) — read in any number of
    /// pieces: the one rule of repeats (`store::Content`) on both paths.
    #[test]
    fn yield_from_the_store_and_from_the_log_agree_on_any_repeats(
        lines in proptest::collection::vec(any_line(), 1..60),
        again in proptest::collection::vec((any::<usize>(), any::<bool>()), 0..30),
        threads in 1usize..5,
    ) {
        let fail = |e: &dyn std::fmt::Display| TestCaseError::fail(e.to_string());
        let mut all: Vec<(u8, Record, i64, &str)> = lines.iter().map(|&(s, r, t)| (s, r, t, "B1")).collect();
        // Exact repeats: the same record again later, half of them at another time and in another batch.
        for (at, moved) in again {
            let (s, r, t, _) = all[at % all.len()];
            all.push(if moved { (s, r, t + 3_600_000, "B2") } else { (s, r, t, "B1") });
        }
        let dir = tmp();
        let path = dir.path().join("repeats.csv");
        let mut out = Vec::new();
        log::write_header(&mut out).map_err(|e| fail(&e))?;
        for (s, r, t, batch) in &all {
            log::write_line(&mut out, *t, ["bay-a", "bay-b"][usize::from(*s)], batch, r).map_err(|e| fail(&e))?;
        }
        std::fs::write(&path, out).map_err(|e| fail(&e))?;

        let setups = std::collections::HashMap::new();
        let keep = |_: &log::Line<'_>| true;
        // Each reject log as written (started afresh on every pass over the logs).
        let (log_rejects, store_rejects) = (Shared::default(), Shared::default());
        let mut sink = || {
            log_rejects.0.lock().unwrap_or_else(std::sync::PoisonError::into_inner).clear();
            Ok(Some(Box::new(log_rejects.clone()) as Box<dyn std::io::Write + Send>))
        };
        let from_log = host_check::report::yields::tally_logs(
            std::slice::from_ref(&path), &setups, None, false, &mut sink, &keep, threads,
        ).map_err(|e| fail(&e))?;

        let mut store = Store::open(&dir.path().join("r.db")).map_err(|e| fail(&e))?;
        let Ingested::Stored { written, .. } = collect::ingest(&mut store, &path, None).map_err(|e| fail(&e))? else {
            return Err(TestCaseError::fail("not stored"));
        };
        let mut tally = host_check::report::yields::Tally::new(&setups, false, Some(Box::new(store_rejects.clone())));
        let names = store.stations().map_err(|e| fail(&e))?;
        store.for_each(&Filter::default(), |x| {
            let station = names.get(&x.station_id).map_or("", String::as_str);
            tally.add(station, &x.batch, x.measured_ms, &x.record, x.setup_id);
        }).map_err(|e| fail(&e))?;
        let from_store = tally.finish().map_err(|e| fail(&e))?;

        // The stored rows are the distinct (key, content) pairs, and the counts add up.
        let distinct: HashSet<_> = all.iter().map(|(s, r, ..)| (*s, r.unit_id, r.boot, r.seq, host_check::data::store::content(r))).collect();
        prop_assert_eq!(written.stored as usize, distinct.len());
        prop_assert_eq!((written.stored + written.duplicates) as usize, all.len());
        let keys: HashSet<_> = all.iter().map(|(s, r, ..)| (*s, r.unit_id, r.boot, r.seq)).collect();
        prop_assert_eq!(written.conflicts as usize, distinct.len() - keys.len());

        let json = |y: &host_check::report::yields::YieldReport| {
            let mut v = serde_json::to_value(y).unwrap_or_default();
            // The first rejects are listed in each path's order (file order, key order): compared as sets.
            let mut rejects: Vec<String> = v["rejects"].as_array().cloned().unwrap_or_default().iter().map(|r| r.to_string()).collect();
            rejects.sort();
            v["rejects"] = serde_json::json!(rejects);
            v
        };
        prop_assert_eq!(json(&from_log), json(&from_store));
        // The reject logs hold the same lines (in each path's order), each once.
        prop_assert_eq!(log_rejects.lines(), store_rejects.lines());
        prop_assert_eq!(log_rejects.lines().len() as u64, from_log.rejects_total + 1);
    }
}

/// A reject log kept in memory, shared with the test.
#[derive(Clone, Default)]
struct Shared(std::sync::Arc<std::sync::Mutex<Vec<u8>>>);

impl Shared {
    /// The lines written, sorted.
    fn lines(&self) -> Vec<String> {
        let text =
            String::from_utf8_lossy(&self.0.lock().unwrap_or_else(std::sync::PoisonError::into_inner)).into_owned();
        let mut v: Vec<String> = text.lines().map(str::to_owned).collect();
        v.sort();
        v
    }
}

impl std::io::Write for Shared {
    fn write(&mut self, b: &[u8]) -> std::io::Result<usize> {
        self.0.lock().unwrap_or_else(std::sync::PoisonError::into_inner).extend_from_slice(b);
        Ok(b.len())
    }
    fn flush(&mut self) -> std::io::Result<()> {
        Ok(())
    }
}
