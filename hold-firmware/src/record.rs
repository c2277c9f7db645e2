//! Measurement records and their frames: postcard-encoded, CRC-32 protected,
//! COBS-stuffed, each frame ending in a 0x00 byte. The decoder builds on the
//! host too.

use serde::{Deserialize, Serialize};

use crate::drift::DriftState;
use crate::verdict::{Hint, Verdict};

/// One measurement as sent to a collector.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Record {
    /// Sequence number of the record from this unit.
    pub seq: u32,
    /// Unit (board or device) identifier.
    pub unit_id: u32,
    /// Press length, ticks.
    pub press_ticks: u64,
    /// Turn-on latency, ticks.
    pub on_ticks: Option<u64>,
    /// Hold, ticks.
    pub hold_ticks: Option<u64>,
    /// Tick frequency, Hz.
    pub clock_hz: u32,
    /// Temperature at the measurement, m°C.
    pub temp_mdeg_c: Option<i32>,
    /// Verdict.
    pub verdict: Verdict,
    /// Cause hint.
    pub hint: Hint,
    /// Drift state after this measurement.
    pub drift: DriftState,
    /// Capacitance deviation from nominal, ppm.
    pub c_deviation_ppm: Option<i32>,
}

/// Longest frame, bytes (postcard of a record is at most 58 bytes, plus 4 CRC
/// bytes, plus COBS overhead and the delimiter).
pub const FRAME_MAX: usize = 72;

/// CRC-32/ISO-HDLC (the common "CRC-32").
const CRC: crc::Crc<u32> = crc::Crc::<u32>::new(&crc::CRC_32_ISO_HDLC);

/// Why a frame could not be made or read.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum FrameError {
    /// The record did not fit the buffer.
    Encode,
    /// The COBS stuffing is broken.
    Stuffing,
    /// The CRC does not match.
    Crc,
    /// The bytes are not a record.
    Payload,
}

impl core::fmt::Display for FrameError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        f.write_str(match self {
            FrameError::Encode => "record does not fit a frame",
            FrameError::Stuffing => "broken byte stuffing",
            FrameError::Crc => "CRC mismatch",
            FrameError::Payload => "not a record",
        })
    }
}

impl core::error::Error for FrameError {}

/// Encodes a record into one frame, delimiter included.
///
/// # Errors
/// [`FrameError::Encode`] if it does not fit (not reachable for a [`Record`]).
pub fn encode(record: &Record) -> Result<heapless::Vec<u8, FRAME_MAX>, FrameError> {
    let mut raw = [0u8; FRAME_MAX];
    let used = postcard::to_slice(record, &mut raw).map_err(|_| FrameError::Encode)?.len();
    let crc = CRC.checksum(raw.get(..used).ok_or(FrameError::Encode)?);
    raw.get_mut(used..used + 4).ok_or(FrameError::Encode)?.copy_from_slice(&crc.to_le_bytes());
    let mut out = [0u8; FRAME_MAX];
    let n =
        cobs::try_encode(raw.get(..used + 4).ok_or(FrameError::Encode)?, &mut out).map_err(|_| FrameError::Encode)?;
    let mut v = heapless::Vec::new();
    v.extend_from_slice(out.get(..n).ok_or(FrameError::Encode)?).map_err(|_| FrameError::Encode)?;
    v.push(0).map_err(|_| FrameError::Encode)?;
    Ok(v)
}

/// Decodes one frame (with or without its trailing 0x00).
///
/// # Errors
/// [`FrameError`] for broken stuffing, a CRC mismatch or bytes that are not a record.
pub fn decode(frame: &[u8]) -> Result<Record, FrameError> {
    let body = match frame.split_last() {
        Some((0, rest)) => rest,
        _ => frame,
    };
    if body.is_empty() || body.len() > FRAME_MAX || body.contains(&0) {
        return Err(FrameError::Stuffing);
    }
    let mut raw = [0u8; FRAME_MAX];
    let n = cobs::decode(body, &mut raw).map_err(|_| FrameError::Stuffing)?.frame_size();
    if n < 5 {
        return Err(FrameError::Payload);
    }
    let (payload, crc) = raw.get(..n).ok_or(FrameError::Stuffing)?.split_at(n - 4);
    let want = u32::from_le_bytes([
        crc.first().copied().unwrap_or(0),
        crc.get(1).copied().unwrap_or(0),
        crc.get(2).copied().unwrap_or(0),
        crc.get(3).copied().unwrap_or(0),
    ]);
    if CRC.checksum(payload) != want {
        return Err(FrameError::Crc);
    }
    let (record, rest) = postcard::take_from_bytes::<Record>(payload).map_err(|_| FrameError::Payload)?;
    if !rest.is_empty() {
        return Err(FrameError::Payload);
    }
    Ok(record)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> Record {
        Record {
            seq: u32::MAX,
            unit_id: u32::MAX,
            press_ticks: u64::MAX,
            on_ticks: Some(u64::MAX),
            hold_ticks: Some(u64::MAX),
            clock_hz: u32::MAX,
            temp_mdeg_c: Some(i32::MIN),
            verdict: Verdict::Chatter,
            hint: Hint::OpenResistorOrShortedNode,
            drift: DriftState::BeyondLimit,
            c_deviation_ppm: Some(i32::MIN),
        }
    }

    #[test]
    fn the_largest_record_fits_and_round_trips() {
        let f = encode(&sample()).unwrap_or_default();
        assert!(!f.is_empty() && f.len() <= FRAME_MAX);
        assert_eq!(f.iter().filter(|&&b| b == 0).count(), 1);
        assert_eq!(decode(&f), Ok(sample()));
    }

    #[test]
    fn every_single_bit_flip_is_caught() {
        let f = encode(&sample()).unwrap_or_default();
        for i in 0..f.len() - 1 {
            for bit in 0..8 {
                let mut g = f.clone();
                if let Some(b) = g.get_mut(i) {
                    *b ^= 1 << bit;
                }
                assert!(decode(&g).is_err(), "byte {i} bit {bit}");
            }
        }
    }
}
