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

/// A station or unit name as part of a file name: ASCII letters, digits and
/// `-` kept, every other byte written `_XX` (its hex). One name, one file
/// name: `a/b`, `a_b` and `a b` give `a_2Fb`, `a_5Fb` and `a_20b`.
#[must_use]
pub fn file_safe(name: &str) -> String {
    use std::fmt::Write as _;
    let mut out = String::with_capacity(name.len());
    for b in name.bytes() {
        if b.is_ascii_alphanumeric() || b == b'-' {
            out.push(char::from(b));
        } else {
            let _ = write!(out, "_{b:02X}");
        }
    }
    out
}

/// Text as it may reach a terminal: every control character but line feed
/// and tab (escape sequences and carriage returns among them), and the
/// direction and invisible characters refused in names
/// ([`crate::data::validate::name_char`]), written `\uXXXX` — the way JSON
/// writes them, so JSON output keeps its value. Everything `rchold` prints
/// passes through here.
#[must_use]
pub fn terminal(text: &str) -> std::borrow::Cow<'_, str> {
    use std::fmt::Write as _;
    let keep = |c: char| c == '\n' || c == '\t' || crate::data::validate::name_char(c);
    if text.chars().all(keep) {
        return std::borrow::Cow::Borrowed(text);
    }
    let mut out = String::with_capacity(text.len() + 16);
    for c in text.chars() {
        if keep(c) {
            out.push(c);
        } else {
            let _ = write!(out, "\\u{:04X}", u32::from(c));
        }
    }
    std::borrow::Cow::Owned(out)
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
    fn terminal_text_shows_escapes_and_hidden_characters_escaped() {
        assert_eq!(terminal("bay-1\tok\n"), "bay-1\tok\n");
        assert_eq!(terminal("\u{1b}[2Jred\r"), "\\u001B[2Jred\\u000D");
        assert_eq!(terminal("abc\u{202E}fed\u{200B}"), "abc\\u202Efed\\u200B");
        // In JSON the escape reads back as the same character.
        let json = serde_json::to_string("a\u{202E}b").unwrap_or_default();
        let back: String = serde_json::from_str(&terminal(&json)).unwrap_or_default();
        assert_eq!(back, "a\u{202E}b");
    }

    #[test]
    fn names_made_safe() {
        assert_eq!(file_safe("bay A/1"), "bay_20A_2F1");
        // Names that once shared a file name (the last one's charts won).
        let names = ["a/b", "a_b", "a b", "a-b", "a.b", "aé"];
        let files: std::collections::BTreeSet<String> = names.iter().map(|n| file_safe(n)).collect();
        assert_eq!(files.len(), names.len(), "{files:?}");
        assert!(files.iter().all(|f| f.bytes().all(|b| b.is_ascii_alphanumeric() || b == b'-' || b == b'_')));
        assert_eq!(xml("<a & \"b\">"), "&lt;a &amp; &quot;b&quot;&gt;");
        assert_eq!(corner_text(Corner { high: 0, active: 0 }), "nominal");
    }
}
