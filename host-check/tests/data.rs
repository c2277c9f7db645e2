//! The data commands of the real `rchold` binary: bad input, idempotent
//! ingest, a killed ingest, two writing processes, listen from a file, and
//! the reports.

use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use crate::util::{col, count, rchold, rename_stations, set_fields, synth, text};

#[test]
fn a_bad_log_is_refused_in_one_line_and_stores_nothing() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    synth(dir.path(), "a.csv", 50, 1);
    let good = std::fs::read_to_string(dir.path().join("a.csv")).unwrap_or_default();
    let mut lines: Vec<String> = good.lines().map(str::to_owned).collect();
    if let Some(l) = lines.get_mut(7) {
        *l = l.replacen(",1000000,", ",5,", 1);
    }
    std::fs::write(dir.path().join("bad.csv"), lines.join("\n") + "\n").unwrap_or_else(|e| panic!("{e}"));
    let out = rchold(dir.path(), &["ingest", "bad.csv", "a.csv"]);
    assert_eq!(out.status.code(), Some(2));
    let err = text(&out.stderr);
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(
        err.starts_with("rchold: bad.csv:8: clock_hz: \"5\" is out of range (accepted: 1000 … 200000000) (nothing of this file was stored)"),
        "{err}"
    );
    // The good file in the same call was stored; the bad one not at all.
    assert_eq!(count(&dir.path().join("rchold.db")), 50);
    let again = rchold(dir.path(), &["ingest", "a.csv"]);
    assert!(again.status.success());
    assert!(text(&again.stdout).contains("already stored as source 1; nothing to do"), "{}", text(&again.stdout));
    assert_eq!(count(&dir.path().join("rchold.db")), 50);
    // Direct reading reports the same line.
    let y = rchold(dir.path(), &["yield", "--csv", "bad.csv"]);
    assert_eq!(y.status.code(), Some(2));
    assert!(text(&y.stderr).contains("bad.csv:8: clock_hz:"), "{}", text(&y.stderr));
    // Options out of range.
    for (args, want) in [
        (
            vec!["listen", "--station", "x", "--seq-start", "2027-01-01", "--seq-period", "3 weeks"],
            "--seq-period \"3 weeks\"",
        ),
        (vec!["aging", "--limit", "-120%"], "--limit \"-120%\""),
        (vec!["yield", "--from", "yesterday"], "--from \"yesterday\""),
        (vec!["synth-log", "--out", "x.csv", "--stations", "0"], "--stations 0"),
        (vec!["aging", "--db", "nowhere.db"], "nowhere.db: no such store"),
    ] {
        let o = rchold(dir.path(), &args);
        assert_eq!(o.status.code(), Some(2), "{args:?}");
        let err = text(&o.stderr);
        assert!(err.contains(want) && (err.contains("accepted") || err.contains("no such store")), "{args:?}: {err}");
        assert_eq!(err.lines().count(), 1, "{args:?}: {err}");
    }
}

/// Kill the ingest mid-file: the database is consistent and holds none of that file.
#[test]
fn a_killed_ingest_leaves_nothing_behind() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    synth(dir.path(), "big.csv", 600_000, 2);
    synth(dir.path(), "small.csv", 1_000, 3);
    rename_stations(dir.path(), "small.csv", "pilot-");
    assert!(rchold(dir.path(), &["ingest", "small.csv"]).status.success());
    let mut child = Command::new(env!("CARGO_BIN_EXE_rchold"))
        .args(["ingest", "big.csv"])
        .current_dir(dir.path())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap_or_else(|e| panic!("{e}"));
    // Wait until the transaction is well under way: half the file was read (the
    // process's read count, Linux /proc; the file is read once).
    let size = std::fs::metadata(dir.path().join("big.csv")).map_or(0, |m| m.len());
    let io = format!("/proc/{}/io", child.id());
    let read = || {
        std::fs::read_to_string(&io)
            .ok()
            .and_then(|s| s.lines().find_map(|l| l.strip_prefix("rchar: ").and_then(|v| v.trim().parse::<u64>().ok())))
    };
    let t = Instant::now();
    while read().unwrap_or(0) < size / 2 {
        assert!(t.elapsed() < Duration::from_secs(120), "ingest never got going");
        if let Ok(Some(s)) = child.try_wait() {
            panic!("ingest finished before it could be killed ({s}); make the file bigger");
        }
        std::thread::sleep(Duration::from_millis(5));
    }
    child.kill().unwrap_or_else(|e| panic!("{e}"));
    let _ = child.wait();
    let store = host_check::data::store::Store::open(&dir.path().join("rchold.db")).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(store.integrity().ok().as_deref(), Some("ok"));
    assert_eq!(store.count().ok(), Some(1_000));
    assert_eq!(store.sources().map(|s| s.len()).ok(), Some(1), "the killed file left a source row");
    // The summaries kept at ingest are those of the rows that stayed.
    let (kept, recount) = (store.summaries(), store.recount());
    assert!(kept.is_ok() && kept.ok() == recount.ok(), "summaries differ from a recount after the kill");
    drop(store);
    // The file can be ingested afterwards, whole.
    let again = rchold(dir.path(), &["ingest", "big.csv"]);
    assert!(again.status.success(), "{}", text(&again.stderr));
    assert_eq!(count(&dir.path().join("rchold.db")), 601_000);
}

/// Two processes writing at once into one store lose nothing.
#[test]
fn two_processes_write_at_once() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    synth(dir.path(), "one.csv", 150_000, 4);
    synth(dir.path(), "two.csv", 150_000, 5);
    rename_stations(dir.path(), "two.csv", "other-");
    let spawn =
        |f: &str| Command::new(env!("CARGO_BIN_EXE_rchold")).args(["ingest", f]).current_dir(dir.path()).output();
    let (a, b) = std::thread::scope(|s| {
        let a = s.spawn(|| spawn("one.csv"));
        let b = s.spawn(|| spawn("two.csv"));
        (a.join(), b.join())
    });
    for o in [a, b] {
        let o = o.unwrap_or_else(|_| panic!("thread")).unwrap_or_else(|e| panic!("{e}"));
        assert!(o.status.success(), "{}", text(&o.stderr));
    }
    assert_eq!(count(&dir.path().join("rchold.db")), 300_000);
}

/// Frames from a file through listen, then the reports.
#[test]
fn listen_from_a_file_then_report() {
    use hold_firmware::record;
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    let mut bytes = Vec::new();
    for i in 0..300u32 {
        let r = record::Record {
            seq: i,
            unit_id: 77,
            boot: 0,
            press_ticks: 200_000,
            on_ticks: Some(2_600),
            hold_ticks: Some(15_770_000 - u64::from(i) * 2_000),
            clock_hz: 1_000_000,
            temp_mdeg_c: Some(20_000),
            verdict: hold_firmware::Verdict::WithinWindow,
            hint: hold_firmware::Hint::None,
            drift: hold_firmware::drift::DriftState::Steady,
            c_deviation_ppm: None,
        };
        bytes.extend_from_slice(&record::encode(&r).unwrap_or_default());
    }
    bytes.extend_from_slice(&[7, 7, 7, 0]); // line noise: one bad frame
    std::fs::write(dir.path().join("frames.bin"), &bytes).unwrap_or_else(|e| panic!("{e}"));
    let stage = Path::new(env!("CARGO_MANIFEST_DIR")).join("../examples/kestrel-meter.toml");
    let stage = stage.to_string_lossy();
    let out = rchold(
        dir.path(),
        &[
            "listen",
            "frames.bin",
            "--station",
            "meters",
            "--stage",
            &stage,
            "--seq-start",
            "2027-01-01",
            "--seq-period",
            "1d",
        ],
    );
    assert!(out.status.success(), "{}", text(&out.stderr));
    assert!(
        text(&out.stdout).contains("300 records stored, 0 already stored, 0 refused, 1 bad frames"),
        "{}",
        text(&out.stdout)
    );
    let src = rchold(dir.path(), &["sources"]);
    assert!(text(&src.stdout).contains("300 measurements"), "{}", text(&src.stdout));
    // Aging: the deviation is computed from hold, temperature and the stored stage file.
    let aging = rchold(dir.path(), &["aging", "--json"]);
    assert!(aging.status.success(), "{}", text(&aging.stderr));
    let v: serde_json::Value = serde_json::from_slice(&aging.stdout).unwrap_or_default();
    let rate = v["units"][0]["rate_pct_per_year"].as_f64().unwrap_or(f64::NAN);
    // 2,000 ticks of 15.77 s a day is 0.01268 % a day: about −4.6 % a year.
    assert!((rate + 4.63).abs() < 0.3, "rate {rate}");
    assert_eq!(v["units"][0]["status"], "aging");
    // Yield with the re-check: every record is within the window and confirmed.
    let y = rchold(dir.path(), &["yield", "--json"]);
    assert!(y.status.success(), "{}", text(&y.stderr));
    let v: serde_json::Value = serde_json::from_slice(&y.stdout).unwrap_or_default();
    assert_eq!(v["all"]["total"], 300);
    assert_eq!(v["recheck"]["agreed"], 300);
}

/// The README's excerpt of the demo's output is what the demo prints for the default
/// seed, line for line (lines marked "…" are left out), on any day: the run ends on a
/// fixed day, so its times and reports do not depend on when it runs.
#[test]
fn the_readme_excerpt_is_the_demos_output() {
    let readme = include_str!("../../README.md");
    let start = readme.find("own demo data.").and_then(|i| readme[i..].find("```text\n").map(|j| i + j + 8));
    let excerpt = start.and_then(|a| readme[a..].find("```").map(|b| &readme[a..a + b])).unwrap_or_default();
    assert!(excerpt.lines().count() > 10, "no excerpt found");
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    let out = rchold(dir.path(), &["demo", "--out", "d"]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let printed = text(&out.stdout);
    let mut lines = printed.lines();
    for want in excerpt.lines().filter(|l| !l.trim().is_empty() && l.trim() != "…") {
        assert!(lines.any(|l| l == want), "the demo did not print, in this order:\n{want}\n\nit printed:\n{printed}");
    }
    // `report` on the demo's store writes the demo's page, byte for byte.
    let out = rchold(dir.path(), &["report", "--db", "d/rchold-demo.db", "--out", "r"]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let page = |p: &str| std::fs::read(dir.path().join(p)).unwrap_or_default();
    assert!(!page("d/report.html").is_empty());
    assert!(page("d/report.html") == page("r/report.html"), "report's page differs from the demo's");
    // Aging leaves the fixture's boards out, yield the field units.
    let aging = text(&rchold(dir.path(), &["aging", "--db", "d/rchold-demo.db", "--json"]).stdout);
    let v: serde_json::Value = serde_json::from_str(&aging).unwrap_or_default();
    assert_eq!(v["units"].as_array().map(Vec::len), Some(200), "only the 200 field units");
    let y = text(&rchold(dir.path(), &["yield", "--db", "d/rchold-demo.db", "--json"]).stdout);
    let v: serde_json::Value = serde_json::from_str(&y).unwrap_or_default();
    assert_eq!(v["all"]["total"].as_u64(), Some(1984), "only the fixture's boards");
    // Alerts: exit 1 past the limit, with one line saying why; 0 otherwise.
    let db = ["--db", "d/rchold-demo.db"];
    for (args, code, why) in [
        (vec!["aging", "--alert", "beyond"], 1, "alert: 9 of 200 units beyond the limit"),
        (vec!["aging", "--alert", "at-risk"], 1, "alert: 16 of 200 units beyond the limit or at risk"),
        (vec!["yield", "--alert-below", "99%"], 1, "alert: yield 98.84 % is below 99.00 %"),
        (vec!["yield", "--alert-below", "98%"], 0, ""),
        (vec!["yield", "--alert-below", "120%"], 2, "--alert-below \"120%\""),
    ] {
        let mut all = args.clone();
        all.extend_from_slice(&db);
        let out = rchold(dir.path(), &all);
        assert_eq!(out.status.code(), Some(code), "{all:?}: {}", text(&out.stderr));
        assert!(text(&out.stderr).contains(why), "{all:?}: {}", text(&out.stderr));
    }
}

/// A tester that writes no hints: the f64 re-check confirms its verdicts (exit 0),
/// reports the hints it would give instead, and leaves the same gross faults out of
/// Cp/Cpk as for a tester that writes them.
#[test]
fn the_recheck_judges_verdicts_and_hints_apart() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    synth(dir.path(), "ours.csv", 3_000, 5);
    // Every hint "none": the same log as another tester would write it.
    set_fields(dir.path(), "ours.csv", "theirs.csv", &[("hint", "none")]);
    let stage = format!("{}/../examples/lumen-keypad.toml", env!("CARGO_MANIFEST_DIR"));
    let report = |file: &str| {
        let out = rchold(dir.path(), &["yield", "--csv", file, "--stage", &stage, "--json"]);
        (out.status.code(), serde_json::from_slice::<serde_json::Value>(&out.stdout).unwrap_or_default())
    };
    let (code_ours, v_ours) = report("ours.csv");
    let (code_theirs, v_theirs) = report("theirs.csv");
    assert_eq!(code_ours, Some(0));
    assert_eq!(code_theirs, Some(0), "only hints differ: not an error");
    assert_eq!(v_theirs["recheck"]["disagreements_total"], 0);
    assert!(v_theirs["recheck"]["hints_differ"].as_u64().unwrap_or(0) > 0, "{}", v_theirs["recheck"]);
    assert_eq!(v_ours["recheck"]["hints_differ"], 0);
    // Cp/Cpk leave out the same gross faults, judged by the re-check's hint.
    assert_eq!(v_theirs["all"]["gross"], v_ours["all"]["gross"]);
    assert_eq!(v_theirs["all"]["cpk"], v_ours["all"]["cpk"]);
    assert!(v_ours["all"]["gross"].as_u64().unwrap_or(0) > 0);
}

/// A log that leaves verdict and hint empty: rchold judges each hold against the
/// stored window, and the yield equals the one of the same log with the tester's
/// verdicts; without a stage the file is refused in one line and nothing is stored.
#[test]
fn rchold_judges_holds_a_log_leaves_unjudged() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    synth(dir.path(), "ours.csv", 2_000, 9);
    set_fields(dir.path(), "ours.csv", "blank.csv", &[("verdict", ""), ("hint", "")]);
    let stage = format!("{}/../examples/lumen-keypad.toml", env!("CARGO_MANIFEST_DIR"));
    let refused = rchold(dir.path(), &["ingest", "blank.csv", "--db", "b.db"]);
    assert_eq!(refused.status.code(), Some(2));
    let err = text(&refused.stderr);
    assert!(err.contains("blank.csv:2:") && err.contains("accepted") && err.lines().count() == 1, "{err}");
    for (file, db) in [("ours.csv", "o.db"), ("blank.csv", "b.db")] {
        let out = rchold(dir.path(), &["ingest", file, "--stage", &stage, "--db", db]);
        assert_eq!(out.status.code(), Some(0), "{file}: {}", text(&out.stderr));
    }
    let summary = |db: &str| {
        let out = rchold(dir.path(), &["yield", "--db", db, "--json"]);
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap_or_default();
        (v["all"]["total"].clone(), v["all"]["verdicts"].clone(), v["all"]["cpk"].clone(), v["rejects_total"].clone())
    };
    assert_eq!(summary("o.db"), summary("b.db"));
    let direct = rchold(dir.path(), &["yield", "--csv", "blank.csv", "--stage", &stage, "--json"]);
    let v: serde_json::Value = serde_json::from_slice(&direct.stdout).unwrap_or_default();
    assert_eq!(v["all"]["verdicts"], summary("o.db").1, "{}", text(&direct.stderr));
}

/// Another tester's log — its own columns in its own order, holds in ms, local
/// times with an offset, its own verdict words, no hints — ingests through a
/// mapping file and gives the same yield, Cpk and rejects as the same data in our
/// schema; a mapping that names a missing column is refused in one line.
#[test]
fn a_foreign_log_ingests_through_a_mapping() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    synth(dir.path(), "ours.csv", 2_000, 13);
    let ours = std::fs::read_to_string(dir.path().join("ours.csv")).unwrap_or_default();
    let words = |v: &str| match v {
        "within-window" => "PASS",
        "short" => "LOW",
        _ => "HIGH",
    };
    let local = time::format_description::parse_borrowed::<2>(
        "[year]-[month]-[day] [hour]:[minute]:[second].[subsecond digits:3]",
    )
    .unwrap_or_default();
    let mut foreign = String::from("Serial,Result,Hold [ms],Tester,Lot,Run,Timestamp,Temp,Press [ms],Latency [ms]\n");
    for l in ours.lines().skip(1) {
        let f: Vec<&str> = l.split(',').collect();
        let g = |name: &str| f.get(col(name)).copied().unwrap_or("");
        let utc = time::OffsetDateTime::parse(g("measured_at"), &time::format_description::well_known::Rfc3339)
            .unwrap_or_else(|e| panic!("{e}"));
        let at = utc.to_offset(time::UtcOffset::from_hms(1, 0, 0).unwrap_or(time::UtcOffset::UTC)).format(&local);
        let ms = |t: &str| t.parse::<f64>().map(|x| format!("{:.3}", x / 1000.0)).unwrap_or_default();
        foreign.push_str(&format!(
            "{},{},{},{},{},{},{},{},{},{}\n",
            g("unit"),
            words(g("verdict")),
            ms(g("hold_ticks")),
            g("station"),
            g("batch"),
            g("seq"),
            at.unwrap_or_default(),
            g("temp_c"),
            ms(g("press_ticks")),
            ms(g("on_ticks"))
        ));
    }
    std::fs::write(dir.path().join("foreign.csv"), foreign).unwrap_or_else(|e| panic!("{e}"));
    let map = r#"
[columns]
measured_at = "Timestamp"
station = "Tester"
batch = "Lot"
unit = "Serial"
seq = "Run"
hold = "Hold [ms]"
press = "Press [ms]"
on = "Latency [ms]"
temp_c = "Temp"
verdict = "Result"
[units]
clock = "1MHz"
hold = "ms"
press = "ms"
on = "ms"
[verdicts]
PASS = "within-window"
LOW = "short"
HIGH = "long"
[time]
format = "[year]-[month]-[day] [hour]:[minute]:[second].[subsecond]"
zone = "+01:00"
"#;
    std::fs::write(dir.path().join("map.toml"), map).unwrap_or_else(|e| panic!("{e}"));
    let stage = format!("{}/../examples/lumen-keypad.toml", env!("CARGO_MANIFEST_DIR"));
    let ok = |args: &[&str]| {
        let out = rchold(dir.path(), args);
        assert_eq!(out.status.code(), Some(0), "{args:?}: {}", text(&out.stderr));
        out
    };
    ok(&["ingest", "ours.csv", "--stage", &stage, "--db", "o.db"]);
    ok(&["ingest", "foreign.csv", "--map", "map.toml", "--stage", &stage, "--db", "f.db"]);
    let summary = |db: &str| {
        let out = ok(&["yield", "--db", db, "--json"]);
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap_or_default();
        (v["all"]["verdicts"].clone(), v["all"]["cpk"].clone(), v["rejects_total"].clone(), v["span_ms"].clone())
    };
    assert_eq!(summary("o.db"), summary("f.db"));
    // A mapping naming a column the log does not have: one line, nothing stored.
    std::fs::write(dir.path().join("bad.toml"), map.replace("\"Lot\"", "\"Batch\"")).unwrap_or_else(|e| panic!("{e}"));
    let out = rchold(dir.path(), &["ingest", "foreign.csv", "--map", "bad.toml", "--stage", &stage, "--db", "x.db"]);
    assert_eq!(out.status.code(), Some(2));
    let err = text(&out.stderr);
    assert!(err.contains("no column \"Batch\"") && err.lines().count() == 1, "{err}");
}

/// Inputs without bounds once filled memory: `eval /dev/zero` grew past 8 GB,
/// a log line of hundreds of megabytes was read whole. Each is now a one-line
/// refusal naming the file (and line) and what is accepted, exit code 2.
#[test]
fn unbounded_inputs_are_refused_in_one_line() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    let out = rchold(dir.path(), &["eval", "/dev/zero"]);
    assert_eq!(out.status.code(), Some(2));
    let err = text(&out.stderr);
    assert_eq!(err.lines().count(), 1, "{err}");
    assert!(err.contains("/dev/zero") && err.contains("not a regular file") && err.contains("1024 KiB"), "{err}");
    // A log whose second data line never ends.
    synth(dir.path(), "a.csv", 3, 1);
    let mut log = std::fs::read(dir.path().join("a.csv")).unwrap_or_default();
    log.extend(std::iter::repeat_n(b'x', 200_000));
    std::fs::write(dir.path().join("long.csv"), &log).unwrap_or_else(|e| panic!("{e}"));
    for args in [&["ingest", "long.csv"][..], &["yield", "--csv", "long.csv"][..]] {
        let out = rchold(dir.path(), args);
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        let err = text(&out.stderr);
        assert_eq!(err.lines().count(), 1, "{err}");
        assert!(err.contains("long.csv:5") && err.contains("at most 64 KiB"), "{args:?}: {err}");
    }
    // Another tester's log read through a mapping: the same bound.
    let map = "[columns]\nmeasured_at = \"T\"\nstation = \"S\"\nunit = \"U\"\nhold = \"H\"\n\
               [units]\nclock = \"1MHz\"\nhold = \"ms\"\n[time]\nformat = \"[year]-[month]-[day] [hour]:[minute]:[second]\"\n";
    super::util::write(dir.path(), "m.toml", map);
    let mut foreign = b"T,S,U,H\n2027-01-01 06:00:00,bay-1,7,740.5\n".to_vec();
    foreign.extend(std::iter::repeat_n(b'y', 200_000));
    std::fs::write(dir.path().join("foreign.csv"), &foreign).unwrap_or_else(|e| panic!("{e}"));
    let stage = Path::new(env!("CARGO_MANIFEST_DIR")).join("../examples/kestrel-meter.toml");
    let out = rchold(dir.path(), &["ingest", "--map", "m.toml", "foreign.csv", "--stage", &stage.to_string_lossy()]);
    let err = text(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(err.contains("foreign.csv") && err.contains("at most 64 KiB"), "{err}");
}

/// An unattended night: `listen` on a pipe that goes quiet after a few frames.
/// The frames are in the store within the commit interval, another process
/// ingests meanwhile without waiting for the lock, and SIGTERM, SIGINT and
/// SIGHUP each end listen with its summary line (gaps in a unit's numbers
/// counted) and nothing lost. Once, the frames waited for the next byte, the
/// lock was held while reading, an ingest failed after 60 s and SIGTERM lost
/// everything.
#[test]
fn a_quiet_night_then_a_signal() {
    use std::io::Write as _;
    use std::process::Command;
    use std::time::{Duration, Instant};
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    synth(dir.path(), "day.csv", 500, 3);
    let frame = |seq: u32| {
        let r = hold_firmware::record::Record {
            seq,
            unit_id: 4_242,
            boot: 0,
            press_ticks: 200_000,
            on_ticks: Some(2_600),
            hold_ticks: Some(15_770_000),
            clock_hz: 1_000_000,
            temp_mdeg_c: Some(21_000),
            verdict: hold_firmware::Verdict::WithinWindow,
            hint: hold_firmware::Hint::None,
            drift: hold_firmware::drift::DriftState::Steady,
            c_deviation_ppm: None,
        };
        hold_firmware::record::encode(&r).map(|f| f.to_vec()).unwrap_or_default()
    };
    let mut took = Vec::new();
    for (round, signal) in ["TERM", "INT", "HUP"].iter().enumerate() {
        let mut child =
            super::util::spawn_piped(dir.path(), &["listen", "--station", "night", "--quiet", "--db", "night.db"]);
        let mut stdin = child.stdin.take().unwrap_or_else(|| panic!("no stdin"));
        // Numbers 0, 1, 2, 5, 6: two skipped; then the line goes quiet (the pipe stays open).
        let bytes: Vec<u8> = [0, 1, 2, 5, 6].iter().flat_map(|&s| frame(s + 100 * round as u32)).collect();
        stdin.write_all(&bytes).unwrap_or_else(|e| panic!("{e}"));
        stdin.flush().unwrap_or_else(|e| panic!("{e}"));
        let deadline = Instant::now() + Duration::from_secs(10);
        let before = if round == 0 { 0 } else { 500 + 5 * round as u64 };
        while count(&dir.path().join("night.db")) < before + 5 {
            assert!(Instant::now() < deadline, "the frames were not committed while the line was quiet");
            std::thread::sleep(Duration::from_millis(20));
        }
        if round == 0 {
            // Another writer meanwhile: not blocked by the listener.
            let started = Instant::now();
            let out = rchold(dir.path(), &["ingest", "day.csv", "--db", "night.db"]);
            assert!(out.status.success(), "{}", text(&out.stderr));
            assert!(started.elapsed() < Duration::from_secs(20), "ingest waited {:?}", started.elapsed());
        }
        let asked = Instant::now();
        let kill = Command::new("kill").args([&format!("-{signal}"), &child.id().to_string()]).status();
        assert!(kill.is_ok_and(|s| s.success()), "kill -{signal}");
        let out = child.wait_with_output().unwrap_or_else(|e| panic!("{e}"));
        took.push(asked.elapsed());
        drop(stdin);
        let line = text(&out.stdout);
        assert!(out.status.success(), "SIG{signal}: {} {}", line, text(&out.stderr));
        assert!(
            line.contains("5 records stored")
                && line.contains("2 numbers skipped in 1 unit (unit 4242 2)")
                && line.contains("stopped by signal"),
            "SIG{signal}: {line}"
        );
    }
    assert_eq!(count(&dir.path().join("night.db")), 500 + 15);
    // Each signal ended listen promptly: the stop is looked at every 25 ms. The
    // best of the three must be within the promised 250 ms (the others may share
    // the machine with the test suite).
    eprintln!("signal to exit: {took:?}");
    let best = took.iter().min().copied().unwrap_or_default();
    assert!(best < Duration::from_millis(250), "signals took {took:?}");
    assert!(took.iter().all(|t| *t < Duration::from_secs(2)), "signals took {took:?}");
    let src = rchold(dir.path(), &["sources", "--db", "night.db"]);
    // The first stream's row: 5 stored, none repeated, retests, refused or bad, 2 skipped, 0 back, no restarts.
    let listing = text(&src.stdout);
    let row: Vec<&str> = listing
        .lines()
        .map(|l| l.split_whitespace().collect::<Vec<_>>())
        .find(|t| t.first() == Some(&"1"))
        .unwrap_or_default();
    assert_eq!(row.get(1..10), Some(&["stream", "5", "0", "0", "0", "0", "2", "0", "0"][..]), "{listing}");
    let units = rchold(dir.path(), &["sources", "--db", "night.db", "--units", "1"]);
    assert!(
        text(&units.stdout).contains("1 unit; 2 numbers skipped in 1 unit, 0 not above"),
        "{}",
        text(&units.stdout)
    );
}

/// A log is read once, its digest taken while it is parsed: from standard
/// input and from a FIFO it is stored like a file (once `ingest` read a file
/// twice, digest then parse, so a pipe failed or hung), and the same contents
/// again, by any path, are "already stored" with the store unchanged.
#[test]
fn logs_from_pipes_and_fifos_are_read_once() {
    use std::io::Write as _;
    use std::process::Command;
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    synth(dir.path(), "a.csv", 400, 5);
    let log = std::fs::read(dir.path().join("a.csv")).unwrap_or_default();
    let mut child = super::util::spawn_piped(dir.path(), &["ingest", "-"]);
    let mut stdin = child.stdin.take().unwrap_or_else(|| panic!("no stdin"));
    stdin.write_all(&log).unwrap_or_else(|e| panic!("{e}"));
    drop(stdin);
    let out = child.wait_with_output().unwrap_or_else(|e| panic!("{e}"));
    assert!(out.status.success(), "{}", text(&out.stderr));
    assert!(text(&out.stdout).contains("400 lines, 400 stored"), "{}", text(&out.stdout));
    // The same contents from the file: already stored (the digest taken from the pipe).
    let again = rchold(dir.path(), &["ingest", "a.csv"]);
    assert!(text(&again.stdout).contains("already stored as source 1"), "{}", text(&again.stdout));
    // From a FIFO, with a writer on the other end.
    let fifo = dir.path().join("fifo.csv");
    let made = Command::new("mkfifo").arg(&fifo).status();
    assert!(made.is_ok_and(|s| s.success()), "mkfifo");
    synth(dir.path(), "b.csv", 300, 6);
    super::util::rename_stations(dir.path(), "b.csv", "fifo-");
    let b = std::fs::read(dir.path().join("b.csv")).unwrap_or_default();
    let writer = std::thread::spawn(move || std::fs::write(&fifo, b));
    let out = rchold(dir.path(), &["ingest", "fifo.csv"]);
    assert!(writer.join().is_ok_and(|r| r.is_ok()), "the FIFO's writer");
    assert!(out.status.success(), "{}", text(&out.stderr));
    assert!(text(&out.stdout).contains("300 lines, 300 stored"), "{}", text(&out.stdout));
    assert_eq!(count(&dir.path().join("rchold.db")), 700);
    let src = rchold(dir.path(), &["sources"]);
    assert!(text(&src.stdout).contains("standard input"), "{}", text(&src.stdout));
}

/// Reports read a store on a read-only mount (a tmpfs remounted read-only:
/// root only; CI runs as root, elsewhere the test says it was skipped).
/// Once, every report opened the store for writing and failed there.
#[test]
fn reports_read_a_store_on_a_read_only_mount() {
    use std::process::Command;
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    let mnt = dir.path().join("ro");
    std::fs::create_dir_all(&mnt).unwrap_or_else(|e| panic!("{e}"));
    let mounted = Command::new("mount").args(["-t", "tmpfs", "rchold-test", &mnt.to_string_lossy()]).output();
    if !mounted.is_ok_and(|o| o.status.success()) {
        eprintln!("skipped: mounting a tmpfs needs root");
        return;
    }
    let umount = || {
        let _ = Command::new("umount").arg(&mnt).status();
    };
    synth(&mnt, "a.csv", 2_000, 8);
    let db = mnt.join("rchold.db");
    let db_arg = db.to_string_lossy().into_owned();
    let ingest = rchold(&mnt, &["ingest", "a.csv"]);
    let remounted = Command::new("mount").args(["-o", "remount,ro", &mnt.to_string_lossy()]).status();
    if !ingest.status.success() || !remounted.is_ok_and(|s| s.success()) {
        umount();
        panic!("setting up the read-only mount failed: {}", text(&ingest.stderr));
    }
    let before = std::fs::read(&db).unwrap_or_default();
    let out_dir = dir.path().join("out");
    let out_arg = out_dir.to_string_lossy().into_owned();
    let runs = [
        vec!["sources", "--db", &db_arg],
        vec!["yield", "--db", &db_arg, "--out", &out_arg],
        vec!["aging", "--db", &db_arg],
        vec!["report", "--db", &db_arg, "--out", &out_arg],
    ];
    let results: Vec<(Vec<&str>, std::process::Output)> =
        runs.iter().map(|r| (r.clone(), rchold(dir.path(), r))).collect();
    let after = std::fs::read(&db).unwrap_or_default();
    umount();
    for (args, out) in results {
        assert!(out.status.success(), "{args:?}: {}", text(&out.stderr));
    }
    assert_eq!(before, after, "the store changed");
    assert!(out_dir.join("rejects.csv").is_file() && out_dir.join("report.html").is_file());
}

/// A report that fails half-way leaves the folder's earlier report as it was:
/// once `yield --out DIR` truncated the previous `rejects.csv` before failing.
#[test]
fn a_failed_report_leaves_the_earlier_one() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    synth(dir.path(), "a.csv", 3_000, 9);
    let stage = Path::new(env!("CARGO_MANIFEST_DIR")).join("../examples/kestrel-meter.toml");
    let stage = stage.to_string_lossy();
    let first = rchold(dir.path(), &["yield", "--csv", "a.csv", "--out", "r"]);
    assert!(first.status.success(), "{}", text(&first.stderr));
    let rejects = std::fs::read(dir.path().join("r/rejects.csv")).unwrap_or_default();
    assert!(rejects.len() > 200, "the first report has rejects");
    // The same data and a log whose last line is bad.
    let mut bad = std::fs::read_to_string(dir.path().join("a.csv")).unwrap_or_default();
    bad.push_str("2027-01-01T00:00:00Z,bay-1,,1,1,1000000,5,,,,within-window,none,settling,\n");
    super::util::write(dir.path(), "b.csv", &bad);
    let second = rchold(dir.path(), &["yield", "--csv", "b.csv", "--out", "r", "--stage", &stage]);
    assert_eq!(second.status.code(), Some(2), "{}", text(&second.stderr));
    assert_eq!(std::fs::read(dir.path().join("r/rejects.csv")).unwrap_or_default(), rejects);
    let names: Vec<String> = std::fs::read_dir(dir.path().join("r"))
        .map(|d| d.filter_map(Result::ok).map(|e| e.file_name().to_string_lossy().into_owned()).collect())
        .unwrap_or_default();
    assert!(names.iter().all(|n| !n.ends_with(".partial")), "{names:?}");
}
