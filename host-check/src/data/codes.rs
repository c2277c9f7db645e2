//! Stable numeric codes and names of verdicts, hints and drift states, as the
//! store and the measurement log write them. Codes never change meaning; new
//! ones are appended.

use hold_firmware::drift::DriftState;
use hold_firmware::{Hint, Verdict};

/// Verdicts in code order (code = index).
pub const VERDICTS: [Verdict; 9] = [
    Verdict::WithinWindow,
    Verdict::Short,
    Verdict::Long,
    Verdict::NoResponse,
    Verdict::StuckActive,
    Verdict::NotIdle,
    Verdict::Chatter,
    Verdict::FastStart,
    Verdict::SlowStart,
];

/// Hints in code order (code = index).
pub const HINTS: [Hint; 10] = [
    Hint::None,
    Hint::WrongPart,
    Hint::AgedOrWrongTolerance,
    Hint::NearTheEdge,
    Hint::OpenCapacitorOrDiode,
    Hint::NoChargePath,
    Hint::OpenResistorOrShortedNode,
    Hint::NoisyOutput,
    Hint::ChargePath,
    Hint::DischargePath,
];

/// Drift states in code order (code = index).
pub const DRIFTS: [DriftState; 4] =
    [DriftState::Settling, DriftState::Steady, DriftState::Drifting, DriftState::BeyondLimit];

/// A drift state's name.
#[must_use]
pub const fn drift_name(d: DriftState) -> &'static str {
    match d {
        DriftState::Settling => "settling",
        DriftState::Steady => "steady",
        DriftState::Drifting => "drifting",
        DriftState::BeyondLimit => "beyond-limit",
    }
}

/// A verdict's code.
#[must_use]
pub fn verdict_code(v: Verdict) -> u8 {
    VERDICTS.iter().position(|&x| x == v).map_or(u8::MAX, |i| i as u8)
}

/// A hint's code.
#[must_use]
pub fn hint_code(h: Hint) -> u8 {
    HINTS.iter().position(|&x| x == h).map_or(u8::MAX, |i| i as u8)
}

/// A drift state's code.
#[must_use]
pub fn drift_code(d: DriftState) -> u8 {
    DRIFTS.iter().position(|&x| x == d).map_or(u8::MAX, |i| i as u8)
}

/// The verdict of a code.
#[must_use]
pub fn verdict_of(code: i64) -> Option<Verdict> {
    usize::try_from(code).ok().and_then(|i| VERDICTS.get(i)).copied()
}

/// The hint of a code.
#[must_use]
pub fn hint_of(code: i64) -> Option<Hint> {
    usize::try_from(code).ok().and_then(|i| HINTS.get(i)).copied()
}

/// The drift state of a code.
#[must_use]
pub fn drift_of(code: i64) -> Option<DriftState> {
    usize::try_from(code).ok().and_then(|i| DRIFTS.get(i)).copied()
}

/// The verdict of a name (`within-window`, `short` …).
#[must_use]
pub fn verdict_named(name: &[u8]) -> Option<Verdict> {
    VERDICTS.iter().find(|v| v.name().as_bytes() == name).copied()
}

/// The hint of a name (`none`, `wrong-part` …).
#[must_use]
pub fn hint_named(name: &[u8]) -> Option<Hint> {
    HINTS.iter().find(|h| h.name().as_bytes() == name).copied()
}

/// The drift state of a name (`settling`, `steady`, `drifting`, `beyond-limit`).
#[must_use]
pub fn drift_named(name: &[u8]) -> Option<DriftState> {
    Some(match name {
        b"settling" => DriftState::Settling,
        b"steady" => DriftState::Steady,
        b"drifting" => DriftState::Drifting,
        b"beyond-limit" => DriftState::BeyondLimit,
        _ => return None,
    })
}

/// The accepted verdict names, for error messages.
#[must_use]
pub fn verdict_names() -> String {
    VERDICTS.iter().map(|v| v.name()).collect::<Vec<_>>().join(", ")
}

/// The accepted hint names, for error messages.
#[must_use]
pub fn hint_names() -> String {
    HINTS.iter().map(|h| h.name()).collect::<Vec<_>>().join(", ")
}

/// The accepted drift state names, for error messages.
#[must_use]
pub fn drift_names() -> String {
    DRIFTS.iter().map(|&d| drift_name(d)).collect::<Vec<_>>().join(", ")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn codes_and_names_round_trip() {
        for v in VERDICTS {
            assert_eq!(verdict_of(i64::from(verdict_code(v))), Some(v));
            assert_eq!(verdict_named(v.name().as_bytes()), Some(v));
        }
        for h in HINTS {
            assert_eq!(hint_of(i64::from(hint_code(h))), Some(h));
            assert_eq!(hint_named(h.name().as_bytes()), Some(h));
        }
        for d in DRIFTS {
            assert_eq!(drift_of(i64::from(drift_code(d))), Some(d));
            assert_eq!(drift_named(drift_name(d).as_bytes()), Some(d));
        }
        assert_eq!(verdict_of(9), None);
        assert_eq!(verdict_of(-1), None);
    }

    /// Codes never change meaning: stores and logs written by every earlier
    /// release read the same.
    #[test]
    fn codes_are_pinned() {
        let verdicts: Vec<&str> = VERDICTS.iter().map(|v| v.name()).collect();
        assert_eq!(
            verdicts,
            [
                "within-window",
                "short",
                "long",
                "no-response",
                "stuck-active",
                "not-idle",
                "chatter",
                "fast-start",
                "slow-start"
            ]
        );
        let hints: Vec<&str> = HINTS.iter().map(|h| h.name()).collect();
        assert_eq!(
            hints,
            [
                "none",
                "wrong-part",
                "aged-or-wrong-tolerance",
                "near-the-edge",
                "open-capacitor",
                "no-charge-path",
                "open-resistor-or-shorted-node",
                "noisy-output",
                "charge-path",
                "discharge-path"
            ]
        );
    }
}
