//! `rchold timer-vs-rc` and `rchold curve`: the stage against a software
//! timer, and the node voltage through press and release.

use std::fmt::Write as _;

use rc_model::window::Window;
use rc_model::{Model, Stage};

use crate::chart::xml;
use crate::eval::{corner_text, secs, si};
use crate::twin::Twin;

/// The software timer's clock.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TimerClock {
    /// Tick frequency, Hz.
    pub hz: f64,
    /// Frequency tolerance over temperature and life, as a fraction (crystal
    /// 50 ppm → 5e-5; internal RC oscillator 2 % → 0.02).
    pub tolerance: f64,
}

/// Standby currents the user supplies, A.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Currents {
    /// The stage's quiescent current (its two CMOS gates), A.
    pub stage_quiescent_a: f64,
    /// The MCU asleep with one timer running, A.
    pub timer_sleep_a: f64,
}

/// The comparison.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Comparison {
    /// Nominal hold, s.
    pub nominal_s: f64,
    /// Stage worst case, s.
    pub stage: (f64, f64),
    /// Software timer worst case, s.
    pub timer: (f64, f64),
    /// Timer ticks that reproduce the nominal hold.
    pub ticks: u64,
    /// Whether the tick count overflows a 32-bit counter.
    pub needs_extension: bool,
}

/// Compares the stage's worst-case window with a software timer of the same
/// nominal hold: the timer's spread is its clock tolerance plus one tick.
#[must_use]
pub fn compare(nominal_s: f64, window: &Window, clock: TimerClock) -> Comparison {
    let ticks = (nominal_s * clock.hz).round().max(1.0) as u64;
    let t = ticks as f64 / clock.hz;
    let tick = 1.0 / clock.hz;
    Comparison {
        nominal_s,
        stage: (secs(window.min), secs(window.max)),
        timer: (t / (1.0 + clock.tolerance) - tick, t / (1.0 - clock.tolerance) + tick),
        ticks,
        needs_extension: ticks > u64::from(u32::MAX),
    }
}

/// The comparison as text.
#[must_use]
pub fn render_comparison(
    name: &str,
    c: &Comparison,
    clock: TimerClock,
    currents: Option<Currents>,
    vdd: f64,
    window: &Window,
) -> String {
    let mut o = String::new();
    let pct = |(lo, hi): (f64, f64)| {
        format!("{:+.2} % / {:+.2} %", 100.0 * (lo / c.nominal_s - 1.0), 100.0 * (hi / c.nominal_s - 1.0))
    };
    let _ = writeln!(o, "RC stage against a software timer \u{b7} {name}");
    let _ = writeln!(o, "  nominal hold {}", si(c.nominal_s, "s"));
    let _ = writeln!(o, "  {:<18} {} to {}  ({})", "RC stage", si(c.stage.0, "s"), si(c.stage.1, "s"), pct(c.stage));
    let _ = writeln!(
        o,
        "    shortest at {}, longest at {}",
        corner_text(window.min_corner),
        corner_text(window.max_corner)
    );
    let _ = writeln!(
        o,
        "  {:<18} {} to {}  ({}; clock {} ± {})",
        "software timer",
        si(c.timer.0, "s"),
        si(c.timer.1, "s"),
        pct(c.timer),
        si(clock.hz, "Hz"),
        if clock.tolerance < 1e-3 {
            format!("{:.0} ppm", clock.tolerance * 1e6)
        } else {
            format!("{:.2} %", clock.tolerance * 100.0)
        }
    );
    let ratio = (c.stage.1 - c.stage.0) / (c.timer.1 - c.timer.0);
    let _ = writeln!(o, "  the RC stage spreads {ratio:.1}× as wide as the software timer");
    let _ = writeln!(
        o,
        "  timer settings: count {} ticks at {}{}",
        c.ticks,
        si(clock.hz, "Hz"),
        if c.needs_extension {
            " (more than a 32-bit counter holds: extend it in software, as hold_firmware::Stopwatch does)"
        } else {
            ""
        }
    );
    if let Some(cur) = currents {
        let _ = writeln!(
            o,
            "  standby: RC stage {} ({}), software timer {} ({}) — from the currents you gave",
            si(cur.stage_quiescent_a, "A"),
            si(cur.stage_quiescent_a * vdd, "W"),
            si(cur.timer_sleep_a, "A"),
            si(cur.timer_sleep_a * vdd, "W")
        );
        let _ = writeln!(
            o,
            "  a hold stage also draws its pull-up current while the trigger is pressed, and the MCU running the timer draws more while awake"
        );
    }
    let _ = writeln!(o, "\n  note: {}", crate::eval::CAUTION);
    o
}

/// Node voltage over time for a press of the stage's length, sampled from
/// the twin (its differential equation, not the closed form): `points`
/// samples over `span_s`.
#[must_use]
pub fn trace(stage: &Stage, span_s: f64, points: usize) -> Vec<(f64, f64)> {
    use embedded_hal::digital::OutputPin;
    let twin = Twin::new(stage, &[], 1_000_000, 0);
    let (mut trigger, _, _, _) = twin.handles();
    let press = stage.press_ns as f64 * 1e-9;
    let dt = span_s / points.max(2) as f64;
    let mut out = Vec::with_capacity(points + 2);
    let _ = trigger.set_low();
    let mut t = 0.0;
    out.push((0.0, twin.node_v()));
    while t < span_s {
        let next = if t < press && t + dt > press { press } else { t + dt };
        twin.wait(next - t);
        t = next;
        if (t - press).abs() < 1e-15 {
            let _ = trigger.set_high();
        }
        out.push((t, twin.node_v()));
    }
    out
}

/// The node-voltage plot as SVG: nominal and corner traces, thresholds, the
/// release and the nominal hold's end.
#[must_use]
pub fn curve_svg(
    name: &str,
    nominal: &Stage,
    corners: &[(String, Stage)],
    band: Option<((f64, f64), (f64, f64))>,
) -> String {
    let e = Model::new(nominal).and_then(|m| m.evaluate()).ok();
    let press = nominal.press_ns as f64 * 1e-9;
    let longest = corners
        .iter()
        .filter_map(|(_, s)| Model::new(s).and_then(|m| m.evaluate()).ok().map(|e| secs(e.hold)))
        .chain(e.map(|e| secs(e.hold)))
        .fold(0.0f64, f64::max);
    let span = press + 1.3 * longest.max(1e-9);
    let (w, h, pad) = (760.0, 380.0, 56.0);
    let vmax = f64::from(nominal.vdd_uv) * 1e-6 * 1.05;
    let x = |t: f64| pad + t / span * (w - 2.0 * pad);
    let y = |v: f64| h - pad - v.max(0.0) / vmax * (h - 2.0 * pad);
    let mut s = String::new();
    let _ = writeln!(
        s,
        r#"<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" viewBox="0 0 {w} {h}" font-family="sans-serif" font-size="12">"#
    );
    let _ = writeln!(s, r##"<rect width="{w}" height="{h}" fill="#ffffff"/>"##);
    let _ = writeln!(s, r#"<text x="{pad}" y="20" font-size="14">node voltage · {}</text>"#, xml(name));
    if let Some(((rl, rh), (fl, fh))) = band {
        let _ = writeln!(
            s,
            r##"<rect x="{pad}" y="{:.2}" width="{:.2}" height="{:.2}" fill="#f3d9b1" opacity="0.6"/>"##,
            y(rh),
            w - 2.0 * pad,
            y(rl) - y(rh)
        );
        let _ = writeln!(
            s,
            r##"<rect x="{pad}" y="{:.2}" width="{:.2}" height="{:.2}" fill="#c9dcef" opacity="0.6"/>"##,
            y(fh),
            w - 2.0 * pad,
            y(fl) - y(fh)
        );
    }
    let lines: Vec<(f64, &str, &str)> = if nominal.rise_uv == nominal.fall_uv {
        vec![(f64::from(nominal.rise_uv) * 1e-6, "switching point", "#1f5f99")]
    } else {
        vec![
            (f64::from(nominal.rise_uv) * 1e-6, "rising threshold", "#b35c00"),
            (f64::from(nominal.fall_uv) * 1e-6, "falling threshold", "#1f5f99"),
        ]
    };
    for (v, label, colour) in lines {
        let _ = writeln!(
            s,
            r#"<line x1="{pad}" y1="{0:.2}" x2="{1:.2}" y2="{0:.2}" stroke="{colour}" stroke-dasharray="5 4"/>"#,
            y(v),
            w - pad
        );
        let _ = writeln!(
            s,
            r#"<text x="{:.2}" y="{:.2}" fill="{colour}" text-anchor="end">{label}</text>"#,
            w - pad,
            y(v) - 4.0
        );
    }
    let mut draw = |st: &Stage, colour: &str, width: f64| {
        let pts: Vec<String> = trace(st, span, 600).iter().map(|(t, v)| format!("{:.2},{:.2}", x(*t), y(*v))).collect();
        let _ = writeln!(
            s,
            r#"<polyline points="{}" fill="none" stroke="{colour}" stroke-width="{width}"/>"#,
            pts.join(" ")
        );
    };
    for (_, st) in corners {
        draw(st, "#9aa7b4", 1.2);
    }
    draw(nominal, "#222222", 2.0);
    let _ = writeln!(s, r##"<line x1="{0:.2}" y1="{pad}" x2="{0:.2}" y2="{1}" stroke="#666"/>"##, x(press), h - pad);
    let _ = writeln!(s, r#"<text x="{:.2}" y="{}" text-anchor="middle">release</text>"#, x(press), pad - 6.0);
    if let Some(e) = e {
        let end = press + secs(e.hold);
        let _ = writeln!(
            s,
            r##"<line x1="{0:.2}" y1="{pad}" x2="{0:.2}" y2="{1}" stroke="#222" stroke-dasharray="2 3"/>"##,
            x(end),
            h - pad
        );
        let _ = writeln!(
            s,
            r#"<text x="{:.2}" y="{}" text-anchor="middle">hold ends ({})</text>"#,
            x(end),
            pad - 6.0,
            xml(&si(secs(e.hold), "s"))
        );
    }
    let _ = writeln!(s, r##"<line x1="{pad}" y1="{0}" x2="{1}" y2="{0}" stroke="#333"/>"##, h - pad, w - pad);
    for k in 0..=4 {
        let t = span * f64::from(k) / 4.0;
        let _ = writeln!(
            s,
            r#"<text x="{:.1}" y="{}" text-anchor="middle">{}</text>"#,
            x(t),
            h - pad + 16.0,
            xml(&si(t, "s"))
        );
    }
    let _ = writeln!(
        s,
        r##"<text x="{pad}" y="{}" fill="#555">grey: {}</text>"##,
        h - 12.0,
        xml(&corners.iter().map(|(n, _)| n.as_str()).collect::<Vec<_>>().join("; "))
    );
    let _ = writeln!(s, "</svg>");
    s
}
