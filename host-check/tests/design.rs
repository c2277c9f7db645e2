//! The design commands through the real binary: `eval`, `window`, `pick`,
//! `spread`, `timer-vs-rc`, `curve` and `agree` — their reports, exit codes
//! and refusals.

use std::path::Path;

use crate::util::{run, text, write, GOOD};

#[test]
fn eval_prints_timing_window_findings_and_caution() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    write(dir.path(), "stage.toml", GOOD);
    let out = run(dir.path(), &["eval", "stage.toml"]);
    let stdout = text(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{stdout}{}", text(&out.stderr));
    // Schmitt typ thresholds 2.9 / 2.1 V, node 4.4·1M/(1M+150) V: hold = τ·ln(4.39934/2.1) = 0.739517 s;
    // window r ±1 %, c ±10 %, fall band 1.5 – 2.4 V: 0.891·ln(4.39934/2.4) = 0.539933 s,
    // 1.111·ln(4.39934/1.5) = 1.195424 s; latency 150 µs·ln(4.39934/1.49934) = 161.45 µs;
    // peak charge current 4.4 V / 150 Ω = 29.3 mA (math).
    for want in [
        "hold stage stage.toml \u{b7} Test stage",
        "hold after release ............ 739.5 ms",
        "active for a 100.0 ms press ... 839.4 ms",
        "turn-on latency ............... 161.4 µs",
        "turn-on latency",
        "field window, 16 corners ...... 539.9 ms to 1.195 s",
        "shortest at r- c- rise- fall+",
        "longest at  r+ c+ rise- fall-",
        "findings",
        "drive-current \u{2014} the press starts by pulling 29.33 mA from the driver",
        "note: timing only",
    ] {
        assert!(stdout.contains(want), "missing {want:?} in:\n{stdout}");
    }
}

#[test]
fn eval_json_has_the_documented_keys() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    write(dir.path(), "stage.toml", GOOD);
    let out = run(dir.path(), &["eval", "stage.toml", "--json"]);
    assert_eq!(out.status.code(), Some(0));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap_or_else(|e| panic!("{e}"));
    for key in ["hold_s", "on_latency_s", "active_s", "node_at_release_v"] {
        assert!(v[key].is_number(), "{key}: {v}");
    }
    let hold = v["hold_s"].as_f64().unwrap_or(0.0);
    assert!((hold - 0.739_517).abs() < 1e-6, "{hold}");
    assert!(v["window"]["min_s"].as_f64().unwrap_or(1.0) < hold);
    assert!(v["window"]["max_s"].as_f64().unwrap_or(0.0) > hold);
    let w = v["warnings"].as_array().cloned().unwrap_or_default();
    assert!(w.iter().all(|w| w["code"].is_string() && w["message"].is_string()));
}

fn bad(dir: &Path, body: &str) -> (Option<i32>, String) {
    write(dir, "bad.toml", body);
    let out = run(dir, &["eval", "bad.toml"]);
    assert!(out.stdout.is_empty(), "no report on bad input");
    (out.status.code(), text(&out.stderr))
}

#[test]
fn bad_input_gets_one_line_naming_file_line_key_and_range() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    let cases = [
        (GOOD.replace("r = \"1M\"", "r = \"4x7\""), "bad.toml:3: stage.r: cannot read \"4x7\""),
        (
            GOOD.replace("r = \"1M\"", "r = \"470M\""),
            "bad.toml:3: stage.r: 470000000 is outside the accepted range (1 kΩ to 100 MΩ)",
        ),
        (
            GOOD.replace("vdd = \"5\"", "vdd = \"24\""),
            "bad.toml:5: stage.vdd: 24 is outside the accepted range (0.8 V to 18 V)",
        ),
        (GOOD.replace("family = \"hc-schmitt\"", "family = \"hc\"\nrise = 0.5"), "bad.toml: input: give either family"),
        (GOOD.replace("family = \"hc-schmitt\"", "family = \"ttl\""), "bad.toml:13: input.family: unknown family"),
        (
            GOOD.replace("c = \"10%\"", "c = \"150%\""),
            "bad.toml:20: tolerance.c: 150% is outside the accepted range (0 % to 100 % of nominal)",
        ),
        (
            GOOD.replace("leak_ohms = \"inf\"", "leak_ohms = \"inf\"\ncolour = \"red\""),
            "bad.toml:10: unknown field `colour`",
        ),
        (GOOD.replace("duration = \"100m\"\n", ""), "bad.toml"),
        (
            GOOD.replace("vdd = \"5\"", "vdd = \"12\""),
            "bad.toml:13: input.family: hc-schmitt is defined for supplies of 2 V to 6 V, not 12 V",
        ),
    ];
    for (body, want) in cases {
        let (code, stderr) = bad(dir.path(), &body);
        assert_eq!(code, Some(2), "{stderr}");
        assert_eq!(stderr.lines().count(), 1, "one line: {stderr}");
        assert!(stderr.contains(want), "want {want:?}, got {stderr}");
    }
    let out = run(dir.path(), &["eval", "missing.toml"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(text(&out.stderr).starts_with("rchold: missing.toml: cannot read the file"));
}

#[test]
fn a_stage_that_never_activates_exits_1_with_a_finding() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    // 2.4 V supply, 1.7 V drop: the node tops out at 0.7 V, below the 1.39 V rising threshold.
    let body = GOOD
        .replace("vdd = \"5\"", "vdd = \"2.4\"")
        .replace("diode = { drop = \"0.6\" }", "diode = { drop = \"1.7\" }");
    write(dir.path(), "flat.toml", &body);
    let out = run(dir.path(), &["eval", "flat.toml"]);
    assert_eq!(out.status.code(), Some(1));
    let stdout = text(&out.stdout);
    assert!(stdout.contains("never-activates"), "{stdout}");
    assert!(stdout.contains("the stage does not work as a hold stage"), "{stdout}");
}

#[test]
fn agree_reports_and_fails_above_a_bound() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    let out = run(dir.path(), &["agree", "--points", "200", "--json", "--fail-above", "0.1"]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap_or_else(|e| panic!("{e}"));
    assert!(v["fixed"]["hold"]["max_rel_ppm"].as_f64().unwrap_or(1.0) < 0.1);
    assert!(v["fixed"]["inverse_c"]["max_rel_ppm"].as_f64().is_some());
    assert!(v["f32"]["hold"]["max_rel_ppm"].as_f64().is_some());
    assert!(v["cases"].as_u64().unwrap_or(0) > 200);
    // An impossible bound makes the same sweep fail.
    let out = run(dir.path(), &["agree", "--points", "200", "--fail-above", "0"]);
    assert_eq!(out.status.code(), Some(1));
    assert!(text(&out.stdout).contains("model agreement over"));
}

#[test]
fn usage_errors_exit_2() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(run(dir.path(), &["frobnicate"]).status.code(), Some(2));
    assert_eq!(run(dir.path(), &["--help"]).status.code(), Some(0));
}

#[test]
fn eval_writes_a_netlist_the_simulator_reads() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    write(dir.path(), "stage.toml", GOOD);
    let out = run(dir.path(), &["eval", "stage.toml", "--netlist", "stage.cir"]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let net = std::fs::read_to_string(dir.path().join("stage.cir")).unwrap_or_default();
    assert!(net.starts_with("* rchold hold stage: Test stage"), "{net}");
    for want in [
        "RO drv d1 5.000000000e1",
        "RCH d2 a 1.000000000e2",
        "R1 a 0 1.000000000e6",
        "C1 a 0 1.000000000e-6 IC=0",
        ".meas tran t_fall",
    ] {
        assert!(net.contains(want), "missing {want:?} in:\n{net}");
    }
    let bad = run(dir.path(), &["eval", "stage.toml", "--netlist", "no/such/dir/x.cir"]);
    assert_eq!(bad.status.code(), Some(2));
    assert!(text(&bad.stderr).contains("writing the netlist to no/such/dir/x.cir"));
}

#[test]
fn window_blob_round_trips_through_the_firmware_loader() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    write(dir.path(), "stage.toml", GOOD);
    let out = run(
        dir.path(),
        &["window", "stage.toml", "--clock", "1MHz", "--poll", "100us", "--emit", "bin", "--out", "w.bin"],
    );
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let blob = std::fs::read(dir.path().join("w.bin")).unwrap_or_default();
    let setup = hold_firmware::Setup::from_blob(&blob).unwrap_or_else(|e| panic!("{e}"));
    let loaded = setup.config;
    // The prepared stage travels with the window: its hold at the reference
    // temperature is the nominal hold (`rchold eval` on this stage: 739.5 ms).
    let nominal = setup.stage.hold_ticks_at(setup.stage.ref_mdeg_c()).unwrap_or(0);
    assert!((739_450..739_550).contains(&nominal), "{nominal}");
    let json = run(dir.path(), &["window", "stage.toml", "--clock", "1MHz", "--poll", "100us", "--emit", "json"]);
    let v: serde_json::Value = serde_json::from_slice(&json.stdout).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(v["hold_min_ticks"].as_u64(), Some(loaded.hold_min_ticks));
    assert_eq!(v["prepared_stage"]["hold_at_reference_ticks"].as_u64(), Some(nominal));
    let hex: String = setup.stage.to_bytes().iter().map(|b| format!("{b:02x}")).collect();
    assert_eq!(v["prepared_stage"]["bytes_hex"].as_str(), Some(hex.as_str()));
    // The Rust emit carries the same blob, byte for byte.
    let rust = run(dir.path(), &["window", "stage.toml", "--clock", "1MHz", "--poll", "100us", "--emit", "rust"]);
    let rust = text(&rust.stdout);
    let listed = rust.rsplit("HOLD_SETUP").next().and_then(|t| t.split('[').nth(2)).and_then(|t| t.split(']').next());
    let bytes: Vec<u8> = listed
        .unwrap_or_default()
        .split(',')
        .filter_map(|b| u8::from_str_radix(b.trim().trim_start_matches("0x"), 16).ok())
        .collect();
    assert_eq!(bytes, blob, "HOLD_SETUP in the Rust emit");
    assert_eq!(v["hold_max_ticks"].as_u64(), Some(loaded.hold_max_ticks));
    assert_eq!(loaded.clock_hz, 1_000_000);
    assert_eq!(loaded.poll_ns, 100_000);
    // The window (539.9 ms … 1.195 s, see eval above) widened by 2 %, one poll and one tick.
    assert!(loaded.hold_min_ticks < 539_900 && loaded.hold_min_ticks > 520_000, "{loaded:?}");
    assert!(loaded.hold_max_ticks > 1_195_400 && loaded.hold_max_ticks < 1_230_000, "{loaded:?}");
    let mut bad = blob.clone();
    if let Some(b) = bad.get_mut(40) {
        *b ^= 0x10;
    }
    assert_eq!(hold_firmware::Setup::from_blob(&bad), Err(hold_firmware::BlobError::Crc));
    let no_out = run(dir.path(), &["window", "stage.toml", "--clock", "1MHz", "--emit", "bin"]);
    assert_eq!(no_out.status.code(), Some(2));
    let bad_clock = run(dir.path(), &["window", "stage.toml", "--clock", "fast"]);
    assert_eq!(bad_clock.status.code(), Some(2));
    assert!(text(&bad_clock.stderr).contains("--clock \"fast\""), "{}", text(&bad_clock.stderr));
}

#[test]
fn spread_reports_worst_case_rss_monte_carlo_and_capability() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    write(dir.path(), "stage.toml", GOOD);
    let out = run(dir.path(), &["spread", "stage.toml", "--samples", "5000", "--spec", "500m..1.3", "--plot", "h.svg"]);
    let stdout = text(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    for want in [
        "hold spread \u{b7} Test stage",
        "worst case over 16 corners",
        "root-sum-square",
        "Monte Carlo, 5000 boards",
        "Cp ",
        "note: timing only",
    ] {
        assert!(stdout.contains(want), "missing {want:?} in:\n{stdout}");
    }
    let svg = std::fs::read_to_string(dir.path().join("h.svg")).unwrap_or_default();
    assert!(svg.starts_with("<svg") && svg.contains("worst-case min"));
    let json = run(dir.path(), &["spread", "stage.toml", "--samples", "2000", "--json"]);
    let v: serde_json::Value = serde_json::from_slice(&json.stdout).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(v["monte_carlo"]["samples"].as_u64(), Some(2000));
    assert!(v["rss_sd_s"].as_f64().unwrap_or(0.0) > 0.0);
    for (args, want) in [
        (vec!["spread", "stage.toml", "--spec", "1.3..0.5"], "--spec \"1.3..0.5\": LOW must be below HIGH"),
        (vec!["spread", "stage.toml", "--samples", "0"], "--samples 0: out of range"),
        (vec!["spread", "stage.toml", "--years", "10"], "--years needs an [aging] table"),
    ] {
        let out = run(dir.path(), &args);
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        assert!(text(&out.stderr).contains(want), "{args:?}: {}", text(&out.stderr));
    }
}

#[test]
fn pick_lists_parts_or_says_none_fit() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    let out = run(dir.path(), &["pick", "--hold", "2m", "--within=-40%..+80%", "--vdd", "5", "--top", "3"]);
    let stdout = text(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{stdout}{}", text(&out.stderr));
    assert!(stdout.contains("parts for a 2.000 ms hold within −40.0 % … +80.0 %"), "{stdout}");
    assert!(stdout.contains("margin: the share of the allowed"), "{stdout}");
    assert_eq!(
        stdout.lines().filter(|l| l.contains("C0G") || l.contains("X7R") || l.contains("electrolytic")).count(),
        3,
        "{stdout}"
    );
    let none = run(dir.path(), &["pick", "--hold", "30s", "--within", "5%"]);
    assert_eq!(none.status.code(), Some(1));
    assert!(text(&none.stdout).contains("no pair of preferred values"));
    // The input is already a Schmitt input (the default): it is not suggested again.
    assert!(!text(&none.stdout).contains("or a Schmitt input"), "{}", text(&none.stdout));
    // --write gives a stage file that eval reads, with the first candidate's parts:
    // its nominal within half an E24 step of the target (10^(1/48) − 1 = 4.9 %), and
    // its worst case, recomputed by eval from the file (the same tolerances, supply,
    // diode, temperature range, tempcos and aging), inside the asked spread.
    for pair in [false, true] {
        let mut args = vec!["pick", "--hold", "2s", "--within=-40%..+80%", "--vdd", "5", "--write", "p.toml", "--json"];
        if pair {
            args.push("--pair");
        }
        let w = run(dir.path(), &args);
        let v: serde_json::Value = serde_json::from_slice(&w.stdout).unwrap_or_default();
        let first = &v["candidates"][0];
        let nominal = first["hold_s"].as_f64().unwrap_or(f64::NAN);
        let step = if pair { 0.005 } else { 10f64.powf(1.0 / 48.0) - 1.0 };
        assert!((nominal / 2.0 - 1.0).abs() <= step, "pair {pair}: nominal {nominal}: {v}");
        let e = run(dir.path(), &["eval", "p.toml", "--json"]);
        let ev = serde_json::from_slice::<serde_json::Value>(&e.stdout).unwrap_or_default();
        let hold = ev["hold_s"].as_f64().unwrap_or(f64::NAN);
        assert!((hold / nominal - 1.0).abs() < 1e-6, "{hold} vs {nominal}: {v}");
        let (lo, hi) =
            (ev["window"]["min_s"].as_f64().unwrap_or(0.0), ev["window"]["max_s"].as_f64().unwrap_or(f64::MAX));
        assert!((lo / first["min_s"].as_f64().unwrap_or(0.0) - 1.0).abs() < 1e-9, "eval {lo}, pick {}", first["min_s"]);
        assert!((hi / first["max_s"].as_f64().unwrap_or(0.0) - 1.0).abs() < 1e-9, "eval {hi}, pick {}", first["max_s"]);
        assert!(lo >= 2.0 * 0.6 && hi <= 2.0 * 1.8, "worst case {lo} … {hi} outside −40 % … +80 % of 2 s");
    }
    let plain = run(dir.path(), &["pick", "--hold", "30s", "--within", "5%", "--input", "hc"]);
    assert!(text(&plain.stdout).contains("or a Schmitt input"), "{}", text(&plain.stdout));
    let bad = run(dir.path(), &["pick", "--hold", "30 years"]);
    assert_eq!(bad.status.code(), Some(2));
    assert!(text(&bad.stderr).contains("--hold \"30 years\""), "{}", text(&bad.stderr));
    let bad = run(dir.path(), &["pick", "--hold", "1s", "--r-series", "E7"]);
    assert!(text(&bad.stderr).contains("E3, E6, E12, E24, E48, E96, E192"), "{}", text(&bad.stderr));
}

#[test]
fn timer_vs_rc_and_curve() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    write(dir.path(), "stage.toml", GOOD);
    let out = run(dir.path(), &["timer-vs-rc", "stage.toml", "--clock", "32.768k", "--clock-tolerance", "2%"]);
    let stdout = text(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    // 0.739517 s at 32.768 kHz = 24232.49 → 24232 ticks; (T/1.02 − tick, T/0.98 + tick) → −1.97 %, +2.04 % (math).
    assert!(stdout.contains("timer settings: count 24232 ticks at 32.77 kHz"), "{stdout}");
    assert!(stdout.contains("software timer") && stdout.contains("-1.97 % / +2.04 %"), "{stdout}");
    let bad = run(
        dir.path(),
        &["timer-vs-rc", "stage.toml", "--clock", "1M", "--clock-tolerance", "2%", "--stage-current", "2u"],
    );
    assert_eq!(bad.status.code(), Some(2));
    // JSON: the comparison, the counters with their prescalers, the charge per press.
    let out = run(dir.path(), &["timer-vs-rc", "stage.toml", "--clock", "16MHz", "--clock-tolerance", "2%", "--json"]);
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap_or_default();
    // 0.7395 s at 16 MHz = 11.83e6 ticks: a 16-bit counter needs a prescaler of 256 (11.83e6 / 65,535 = 180.6, math).
    assert_eq!(v["comparison"]["counters"][0]["prescaler"].as_u64(), Some(256), "{v}");
    assert_eq!(v["comparison"]["counters"][1]["prescaler"].as_u64(), Some(1));
    assert!(v["comparison"]["charge_per_press_c"].as_f64().is_some_and(|q| q > 4e-6 && q < 6e-6), "{v}");
    let out = run(dir.path(), &["curve", "stage.toml", "--plot", "c.svg"]);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    let svg = std::fs::read_to_string(dir.path().join("c.svg")).unwrap_or_default();
    // Nominal and the two extreme corners, the thresholds, the hold's end, a voltage axis.
    for want in ["rising threshold", "hold ends (739.5 ms)", "nominal", "shortest (", "longest (", "node voltage (V)"] {
        assert!(svg.contains(want), "missing {want:?} in {svg}");
    }
}

#[test]
fn spread_ages_an_electrolytic_by_the_ten_degree_rule() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    // A 2 s press (133 charge time constants) so the hold is proportional to C.
    let body = GOOD.replace("c = \"1u\"", "c = \"100u\"").replace("duration = \"100m\"", "duration = \"2\"")
        + "\n[aging]\nkind = \"end-of-life\"\nloss = \"20%\"\nrated_hours = \"2000\"\nrated_temp = \"105\"\n";
    write(dir.path(), "e.toml", &body);
    let json = |args: &[&str]| -> f64 {
        let out = run(dir.path(), args);
        assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
        let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap_or_else(|e| panic!("{e}"));
        v["nominal_s"].as_f64().unwrap_or(f64::NAN)
    };
    let new = json(&["spread", "e.toml", "--samples", "100", "--json"]);
    // 2,000 h at 105 °C → 8,000 h at 85 °C (10 °C rule, common practice): a year and
    // a half uses it all, so C is down the full 20 %; half of it costs 10 %.
    let worn = json(&["spread", "e.toml", "--samples", "100", "--json", "--years", "1.5", "--at-temp", "85"]);
    let half = json(&[
        "spread",
        "e.toml",
        "--samples",
        "100",
        "--json",
        "--years",
        &format!("{}", 4_000.0 / 8_766.0),
        "--at-temp",
        "85",
    ]);
    assert!((worn / new - 0.8).abs() < 1e-4, "{worn} vs {new}");
    assert!((half / new - 0.9).abs() < 1e-4, "{half} vs {new}");
    // The report says which parts it describes: the worst case, the root-sum-square and the
    // Monte Carlo all take new parts (the file's aging is for `window`).
    let out = run(dir.path(), &["spread", "e.toml", "--samples", "100"]);
    assert!(
        text(&out.stdout).contains(
            "new parts in the worst case, root-sum-square and Monte Carlo alike; the file's [aging] (end of life, 20 % lost)"
        ),
        "{}",
        text(&out.stdout)
    );
    let v: serde_json::Value =
        serde_json::from_slice(&run(dir.path(), &["spread", "e.toml", "--samples", "2000", "--json"]).stdout)
            .unwrap_or_default();
    let (wc_min, mc_min) = (v["worst_case"]["min_s"].as_f64(), v["monte_carlo"]["min_s"].as_f64());
    assert!(wc_min.zip(mc_min).is_some_and(|(w, m)| w <= m && m < w * 1.25), "{wc_min:?} {mc_min:?}");
    let out = run(dir.path(), &["spread", "e.toml", "--samples", "100", "--years", "1.5", "--at-temp", "85"]);
    assert!(text(&out.stdout).contains("every capacitor aged 1.5 years first"), "{}", text(&out.stdout));
}

/// Every design command refuses the same failure with the same exit code and
/// names the key that causes it: 2 for a tolerance that pushes a corner out of
/// the model's domain, 1 for a stage that does not work (nominal or at a corner).
#[test]
fn every_command_refuses_alike() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    write(dir.path(), "wide.toml", &GOOD.replace("c = \"10%\"", "c = \"100%\""));
    // 2.4 V supply, 1.7 V drop: the node tops out at 0.7 V, below the rising threshold.
    let flat = GOOD
        .replace("vdd = \"5\"", "vdd = \"2.4\"")
        .replace("diode = { drop = \"0.6\" }", "diode = { drop = \"1.7\" }");
    write(dir.path(), "flat.toml", &flat);
    // Nominal works; at the low-supply corner the node no longer reaches the rising threshold.
    let edge = GOOD
        .replace("vdd = \"5\"", "vdd = \"3.6\"")
        .replace("diode = { drop = \"0.6\" }", "diode = { drop = \"1.0\" }")
        .replace("c = \"10%\"", "c = \"10%\"\nvdd = \"10%\"");
    write(dir.path(), "edge.toml", &edge);
    // A tempco that drives C through zero at the hot end (−3 %/°C over 35 °C), and an
    // aging that loses all of C: once only the commands whose window reached those
    // corners refused them (eval exit 0, spread and window 2), naming the nominal key.
    let hot = format!("{GOOD}\n[environment]\ntemp_min = \"-25\"\ntemp_max = \"60\"\nc_tempco = \"-30000\"\n");
    write(dir.path(), "hot.toml", &hot);
    let old = format!(
        "{GOOD}\n[aging]\nkind = \"class2\"\nloss_per_decade = \"60%\"\nref_hours = \"1000\"\nhours = \"87600\"\n"
    );
    write(dir.path(), "old.toml", &old);
    let commands: [&[&str]; 6] = [
        &["eval"],
        &["window", "--clock", "1MHz"],
        &["spread", "--samples", "100"],
        &["timer-vs-rc", "--clock", "1M", "--clock-tolerance", "1%"],
        &["curve", "--plot", "c.svg"],
        &["coverage"],
    ];
    for (file, code, key) in [
        ("wide.toml", 2, "tolerance.c"),
        ("flat.toml", 1, ""),
        ("edge.toml", 1, "tolerance.vdd"),
        ("hot.toml", 2, "environment.c_tempco: at the corner"),
        ("old.toml", 2, "aging.loss_per_decade: at the corner"),
    ] {
        for cmd in commands {
            let mut args = vec![cmd[0], file];
            args.extend_from_slice(&cmd[1..]);
            let out = run(dir.path(), &args);
            let err = text(&out.stderr);
            assert_eq!(out.status.code(), Some(code), "{args:?}: {err}");
            if file == "hot.toml" {
                assert!(err.contains("at 60.0 °C: -105.0 %"), "{args:?}: {err}");
            }
            if code == 2 || (cmd[0] != "eval" && cmd[0] != "coverage") {
                assert_eq!(err.lines().count(), 1, "{args:?}: {err}");
                assert!(err.contains(file) && err.contains(key), "{args:?}: {err}");
            }
        }
    }
}

/// `compare` marks what differs between two stage files; `press` tabulates hold against
/// press length and answers a retrigger.
#[test]
fn compare_and_press() {
    let dir = tempfile::tempdir().unwrap_or_else(|e| panic!("{e}"));
    write(dir.path(), "a.toml", GOOD);
    write(dir.path(), "b.toml", &GOOD.replace("c = \"1u\"", "c = \"2.2u\""));
    let out = run(dir.path(), &["compare", "a.toml", "b.toml"]);
    let t = text(&out.stdout);
    assert_eq!(out.status.code(), Some(0), "{}", text(&out.stderr));
    // The hold is proportional to C: 2.2 µF holds 2.2 times as long (math).
    assert!(t.contains("≠ hold") && t.contains("+120.00 %"), "{t}");
    let out = run(dir.path(), &["compare", "a.toml", "a.toml", "--json"]);
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap_or_default();
    assert_eq!(v["a"]["hold_s"], v["b"]["hold_s"]);
    let out = run(dir.path(), &["press", "a.toml", "--again-after", "2", "--json"]);
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap_or_default();
    assert!(v["presses"].as_array().is_some_and(|p| p.len() >= 5), "{v}");
    // 2 s after a 739.5 ms hold ended: the output went off in between.
    assert_eq!(v["retrigger"]["dropped"].as_bool(), Some(true), "{v}");
    let out = run(dir.path(), &["press", "a.toml", "--first", "1ns"]);
    assert_eq!(out.status.code(), Some(1), "a press too short to turn the output on: {}", text(&out.stderr));
}
