//! How values and names are shown: SI units, spans in seconds, corners, the
//! safety caution every report carries, and names made safe for XML and for
//! file names.

use rc_model::window::Corner;
use rc_model::Span;

/// The caution every design report ends with.
pub const CAUTION: &str = "timing only: this tool checks no isolation, creepage or mains safety, and a hold stage must not be the only guard of a safety function; defer to local codes and licensed practice.";

/// The caution for stages whose capacitor stores a noticeable energy.
pub const STORED_ENERGY: &str = "large capacitors store energy: they can deliver a large inrush through the driver and stay charged after power is removed; follow local codes and licensed practice for handling and discharge";

/// Seconds from a span.
#[must_use]
pub fn secs(s: Span) -> f64 {
    s.ns_q32() as f64 / 4_294_967_296.0 * 1e-9
}

/// A value with an SI prefix and four significant digits ("61.63 µs").
#[must_use]
pub fn si(v: f64, unit: &str) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v} {unit}");
    }
    const P: [(f64, &str); 9] = [
        (1e9, "G"),
        (1e6, "M"),
        (1e3, "k"),
        (1.0, ""),
        (1e-3, "m"),
        (1e-6, "µ"),
        (1e-9, "n"),
        (1e-12, "p"),
        (1e-15, "f"),
    ];
    let a = v.abs();
    let (scale, prefix) = P.iter().copied().find(|(s, _)| a >= *s * 0.999_95).unwrap_or((1e-15, "f"));
    let x = v / scale;
    // Digits by the value as it will be rounded (99.9999 prints as 100.0, not 100.00).
    let digits = if x.abs() >= 99.995 {
        1
    } else if x.abs() >= 9.9995 {
        2
    } else {
        3
    };
    format!("{x:.digits$} {prefix}{unit}")
}

/// Corner as text: `r+ c- vdd+ …` (+ high end, − low end; temp+ hottest, age+ aged).
#[must_use]
pub fn corner_text(c: Corner) -> String {
    let parts: Vec<String> =
        c.sides().map(|(p, high)| format!("{}{}", p.name(), if high { '+' } else { '-' })).collect();
    if parts.is_empty() {
        "nominal".into()
    } else {
        parts.join(" ")
    }
}

/// Escapes text for XML.
#[must_use]
pub fn xml(s: &str) -> String {
    s.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;")
}

/// A station or unit name made safe as part of a file name: ASCII letters,
/// digits and `-` kept, anything else `_`.
#[must_use]
pub fn file_safe(name: &str) -> String {
    name.replace(|c: char| !c.is_ascii_alphanumeric() && c != '-', "_")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn si_prefixes_and_digits() {
        assert_eq!(si(61.63e-6, "s"), "61.63 µs");
        assert_eq!(si(739.617e-3, "s"), "739.6 ms");
        assert_eq!(si(4.7e6, "Ω"), "4.700 MΩ");
        assert_eq!(si(0.0, "V"), "0 V");
        // Four significant digits after rounding, not five.
        assert_eq!(si(1.0 / 1e7 - 1e-22, "F"), "100.0 nF");
        assert_eq!(si(9.99999, "V"), "10.00 V");
    }

    #[test]
    fn names_made_safe() {
        assert_eq!(file_safe("bay A/1"), "bay_A_1");
        assert_eq!(xml("<a & \"b\">"), "&lt;a &amp; &quot;b&quot;&gt;");
        assert_eq!(corner_text(Corner { high: 0, active: 0 }), "nominal");
    }
}
