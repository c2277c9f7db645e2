//! Helpers every integration test shares: running the real binary in a
//! folder, writing files, reading output, and a known-good stage file.

use std::path::Path;
use std::process::{Command, Output};

pub const GOOD: &str = r#"name = "Test stage"
[stage]
r = "1M"
c = "1u"
vdd = "5"
driver_ohms = "50"
charge_ohms = "100"
series_ohms = "0"
leak_ohms = "inf"
diode = { drop = "0.6" }

[input]
family = "hc-schmitt"

[press]
duration = "100m"

[tolerance]
r = "1%"
c = "10%"
"#;

pub fn run(dir: &Path, args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_rchold"))
        .args(args)
        .current_dir(dir)
        .output()
        .unwrap_or_else(|e| panic!("cannot run rchold: {e}"))
}

pub fn write(dir: &Path, name: &str, text: &str) {
    std::fs::write(dir.join(name), text).unwrap_or_else(|e| panic!("{e}"));
}

pub fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

/// Starts `rchold` in `dir` with standard input, output and error piped.
pub fn spawn_piped(dir: &Path, args: &[&str]) -> std::process::Child {
    use std::process::Stdio;
    Command::new(env!("CARGO_BIN_EXE_rchold"))
        .args(args)
        .current_dir(dir)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap_or_else(|e| panic!("cannot run rchold: {e}"))
}

/// Runs `rchold` in `dir` (the same as [`run`]).
pub fn rchold(dir: &Path, args: &[&str]) -> Output {
    run(dir, args)
}

pub fn count(db: &Path) -> u64 {
    host_check::data::store::Store::open(db).and_then(|s| s.count()).unwrap_or_else(|e| panic!("{e}"))
}

pub fn synth(dir: &Path, name: &str, records: u64, seed: u64) {
    let out =
        rchold(dir, &["synth-log", "--out", name, "--records", &records.to_string(), "--seed", &seed.to_string()]);
    assert!(out.status.success(), "{}", text(&out.stderr));
}

/// Unit ids and seq repeat between synthetic logs: move one to other stations.
pub fn rename_stations(dir: &Path, name: &str, prefix: &str) {
    let t = std::fs::read_to_string(dir.join(name)).unwrap_or_default().replace(",line-", &format!(",{prefix}"));
    std::fs::write(dir.join(name), t).unwrap_or_else(|e| panic!("{e}"));
}

/// The 0-based position of field `name` in a log line (as rchold writes logs).
pub fn col(name: &str) -> usize {
    host_check::data::log::FIELDS.iter().position(|f| *f == name).unwrap_or_else(|| panic!("no log field {name}"))
}

/// Copies the log `from` to `to` in `dir` with the given fields of every data
/// line replaced: `(name, value)`.
pub fn set_fields(dir: &Path, from: &str, to: &str, fields: &[(&str, &str)]) {
    let text = std::fs::read_to_string(dir.join(from)).unwrap_or_default();
    let mut lines = text.lines();
    let header = lines.next().unwrap_or_default().to_owned();
    let out: String = std::iter::once(header)
        .chain(lines.map(|l| {
            let mut f: Vec<&str> = l.split(',').collect();
            for &(name, v) in fields {
                if let Some(x) = f.get_mut(col(name)) {
                    *x = v;
                }
            }
            f.join(",")
        }))
        .map(|l| l + "\n")
        .collect();
    std::fs::write(dir.join(to), out).unwrap_or_else(|e| panic!("{e}"));
}
