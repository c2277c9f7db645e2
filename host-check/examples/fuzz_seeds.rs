//! Writes the fuzz targets' seed corpora (`host-check/fuzz/seeds/<target>/`):
//! small valid inputs of every kind each parser reads, and a few near misses,
//! so that libFuzzer starts from the formats rather than from nothing.
//!
//! `cargo run -p host-check --example fuzz_seeds` (the seeds are committed;
//! run again after a format changes).

use std::error::Error;
use std::fs;
use std::path::Path;

use hold_firmware::drift::DriftState;
use hold_firmware::record::{encode, Record};
use hold_firmware::{Hint, Verdict};
use host_check::data::{archive, log};

type Res = Result<(), Box<dyn Error>>;

fn record(seq: u32, verdict: Verdict, hold: Option<u64>) -> Record {
    Record {
        seq,
        unit_id: 4_100 + seq,
        boot: seq % 3,
        press_ticks: 120_000,
        on_ticks: Some(48),
        hold_ticks: hold,
        clock_hz: 1_000_000,
        temp_mdeg_c: Some(24_500),
        verdict,
        hint: if verdict == Verdict::WithinWindow { Hint::None } else { Hint::WrongPart },
        drift: DriftState::Settling,
        c_deviation_ppm: Some(-1_250),
    }
}

fn records() -> Vec<Record> {
    vec![
        record(0, Verdict::WithinWindow, Some(742_000)),
        record(1, Verdict::Short, Some(512_000)),
        record(2, Verdict::Long, Some(990_000)),
        Record {
            on_ticks: None,
            hold_ticks: None,
            verdict: Verdict::NoResponse,
            hint: Hint::None,
            ..record(3, Verdict::NoResponse, None)
        },
        Record {
            temp_mdeg_c: None,
            c_deviation_ppm: None,
            drift: DriftState::Drifting,
            ..record(4, Verdict::WithinWindow, Some(700_001))
        },
    ]
}

fn write(dir: &Path, name: &str, bytes: &[u8]) -> Res {
    fs::create_dir_all(dir)?;
    fs::write(dir.join(name), bytes)?;
    Ok(())
}

fn frames(root: &Path) -> Res {
    let dir = root.join("frames");
    let mut all = vec![7u8]; // first byte: read size
    for r in records() {
        let f = encode(&r).map_err(|e| format!("{e:?}"))?;
        write(&dir, &format!("one-{}", r.seq), &[&[63u8][..], &f].concat())?;
        all.extend_from_slice(&f);
    }
    write(&dir, "stream", &all)?;
    let mut noisy = all.clone();
    noisy.splice(9..9, [0x55, 0x00, 0x00, 0x13]);
    noisy.truncate(noisy.len() - 3);
    write(&dir, "noisy", &noisy)?;
    // A frame of format 1 (no boot counter), as firmware built before it sends.
    let v1: [u8; 20] = [
        0x01, 0x02, 0x07, 0x01, 0x01, 0x05, 0x80, 0xc8, 0xd0, 0x07, 0x03, 0x03, 0x05, 0x01, 0x05, 0xaa, 0x7d, 0x66,
        0xc1, 0x00,
    ];
    write(&dir, "format-1", &[&[63u8][..], &v1].concat())
}

fn log_text(records: &[Record]) -> Result<Vec<u8>, Box<dyn Error>> {
    let mut out = Vec::new();
    log::write_header(&mut out)?;
    for (i, r) in records.iter().enumerate() {
        let station = if i % 2 == 0 { "bay-1" } else { "bay \"2\", east" };
        log::write_line(&mut out, 1_735_689_600_000 + 3_600_250 * i as i64, station, "lot-0412", r)?;
    }
    Ok(out)
}

fn logs(root: &Path) -> Res {
    let dir = root.join("log");
    let text = log_text(&records())?;
    write(&dir, "five", &text)?;
    let crlf = String::from_utf8(text.clone())?.replace('\n', "\r\n");
    write(&dir, "crlf", crlf.as_bytes())?;
    write(&dir, "bad-hold", &String::from_utf8(text.clone())?.replace("742000", "-742000").into_bytes())?;
    // Version 1 (no boot column), as logs written before it are: each line
    // read by the csv crate and written back without its fifth field.
    let mut w = csv::WriterBuilder::new().terminator(csv::Terminator::Any(b'\n')).from_writer(Vec::new());
    for row in csv::ReaderBuilder::new().has_headers(false).from_reader(&text[..]).records() {
        w.write_record(row?.iter().enumerate().filter(|&(i, _)| i != 4).map(|(_, f)| f))?;
    }
    let v1 = String::from_utf8(w.into_inner().map_err(|e| e.to_string())?)?;
    assert!(v1.starts_with(log::HEADER_V1));
    write(&dir, "version-1", v1.as_bytes())
}

fn stages(root: &Path) -> Res {
    let dir = root.join("stage");
    let examples = Path::new(env!("CARGO_MANIFEST_DIR")).join("../examples");
    for e in fs::read_dir(examples)? {
        let p = e?.path();
        if p.extension().is_some_and(|x| x == "toml") {
            write(&dir, &p.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default(), &fs::read(&p)?)?;
        }
    }
    Ok(())
}

fn values(root: &Path) -> Res {
    let dir = root.join("values");
    for (i, v) in
        ["4K7", "100 nF", "4.7 kΩ", "R47", "1meg", "5%", "0.5 %", "2n2", "10e-6", "3.3V", "1.5 ms", "-0", "1e308"]
            .iter()
            .enumerate()
    {
        write(&dir, &format!("v{i}"), v.as_bytes())?;
    }
    Ok(())
}

fn timestamps(root: &Path) -> Res {
    let dir = root.join("timestamp");
    let pairs = [
        ("2025-01-01T00:00:00Z", "2025-01-01T06:30:15.250Z"),
        ("2027-03-01 06:00:00+01:00", "2027-03-01T23:59:59.999-05:30"),
        ("1970-01-01T00:00:00Z", "9999-12-31T23:59:59.999Z"),
    ];
    for (i, (a, b)) in pairs.iter().enumerate() {
        // The target splits its input in halves: pad to equal lengths.
        let (a, b) = (format!("{a:<30}").trim_end().to_owned(), *b);
        let mut both = a.clone().into_bytes();
        if a.len() == b.len() {
            both.extend_from_slice(b.as_bytes());
            write(&dir, &format!("t{i}"), &both)?;
        }
        write(&dir, &format!("t{i}-self"), &[a.as_bytes(), a.as_bytes()].concat())?;
    }
    Ok(())
}

fn mappings(root: &Path) -> Res {
    let dir = root.join("mapping");
    let map = r#"[columns]
measured_at = "Timestamp"
station = "Tester"
unit = "Serial"
hold = "Hold [ms]"
batch = "Lot"
seq = "Run"
verdict = "Result"

[units]
clock = "1MHz"
hold = "ms"

[verdicts]
PASS = "within-window"
LOW = "short"

[time]
format = "[year]-[month]-[day] [hour]:[minute]:[second]"
zone = "+01:00"
"#;
    let log = "Timestamp,Tester,Serial,Hold [ms],Lot,Run,Result\n\
               2025-01-01 07:00:00,bay-1,4100,742.0,lot-0412,1,PASS\n\
               2025-01-01 07:00:09,bay-1,4101,512.5,lot-0412,2,LOW\n";
    write(&dir, "judged", &[map.as_bytes(), &[0xFF], log.as_bytes()].concat())?;
    let unjudged = map.replace("verdict = \"Result\"\n", "");
    write(&dir, "unjudged", &[unjudged.as_bytes(), &[0xFF], log.as_bytes()].concat())
}

fn parquet(root: &Path) -> Res {
    let dir = root.join("parquet");
    let tmp = std::env::temp_dir().join(format!("rchold-seeds-{}", std::process::id()));
    fs::create_dir_all(&tmp)?;
    let log_path = tmp.join("log.csv");
    // One station, one day (2025-01-01): one readings file.
    let one_station: Vec<u8> =
        String::from_utf8(log_text(&records())?)?.replace("\"bay \"\"2\"\", east\"", "bay-1").into_bytes();
    fs::write(&log_path, one_station)?;
    let out = tmp.join("dataset");
    archive::export_logs(&[log_path], None, &out, 1)?;
    for part in archive::part_files(&out)? {
        write(&dir, "day-20089", &fs::read(&part.path)?)?;
    }
    fs::remove_dir_all(&tmp)?;
    Ok(())
}

fn main() -> Res {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("fuzz/seeds");
    frames(&root)?;
    logs(&root)?;
    stages(&root)?;
    values(&root)?;
    timestamps(&root)?;
    mappings(&root)?;
    parquet(&root)?;
    println!("seeds written to {}", root.display());
    Ok(())
}
