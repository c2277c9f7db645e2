//! Measurement records and their frames: postcard-encoded, CRC-32 protected,
//! COBS-stuffed, each frame ending in a 0x00 byte. The decoder builds on the
//! host too.
//!
//! # Frame formats
//!
//! | format | payload | check |
//! |---|---|---|
//! | 1 | the record without `boot` | CRC-32 of the payload |
//! | 2 (written now) | the record, `boot` after `unit_id` | CRC-32 of the payload XOR [`FORMAT_2_MARK`] |
//!
//! The format travels in the check value, so no byte is spent on it and old
//! streams stay readable: [`decode`] reads both (a format-1 record has
//! `boot` 0), and a decoder that knows only format 1 counts a format-2 frame
//! as a CRC mismatch instead of misreading it. A frame's check matches at
//! most one of the two (they differ by a nonzero constant). The mark costs
//! the check little: every 1- and 2-bit error of a frame of either format is
//! still caught (`every_one_and_two_bit_error_is_caught`).

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
    /// Boot counter (or any value that changes when the unit restarts, such
    /// as a random number drawn at start): the unit restarting its `seq`
    /// after a reset is told from a repeat by it. A store keys records by
    /// (unit, boot, seq). Format-1 frames carry none and read as 0.
    pub boot: u32,
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

/// Longest frame, bytes (postcard of a record is at most 67 bytes, plus 4 CRC
/// bytes, one byte of COBS overhead and the delimiter: 73, rounded up to a
/// multiple of 4).
pub const FRAME_MAX: usize = 76;

/// What a format-2 frame's CRC-32 is XOR-ed with (see the module's frame
/// formats): 16 of its 32 bits set, and no 1- or 2-bit error of a frame
/// turns one format's check into the other's (tested).
pub const FORMAT_2_MARK: u32 = 0x6A93_C55C;

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

/// Longest payload (postcard of a record), bytes: varints of 5 (u32) and 10
/// (u64) bytes, a tag byte per `Option`, one byte per enum —
/// 5 + 5 + 5 + 10 + 11 + 11 + 5 + 6 + 3 + 6.
const PAYLOAD_MAX: usize = 67;

/// The payload and room for its CRC, written front to back; every write is checked.
struct Out {
    buf: [u8; PAYLOAD_MAX + 4],
    at: usize,
}

impl Out {
    fn byte(&mut self, b: u8) -> Result<(), FrameError> {
        *self.buf.get_mut(self.at).ok_or(FrameError::Encode)? = b;
        self.at += 1;
        Ok(())
    }

    /// Unsigned LEB128, as postcard writes every integer wider than a byte.
    fn varint(&mut self, v: u64) -> Result<(), FrameError> {
        // Most fields fit 32 bits: shift those as u32 (cheaper on a 32-bit core).
        let (mut lo, mut hi) = (v as u32, (v >> 32) as u32);
        while hi != 0 || lo >= 0x80 {
            self.byte((lo as u8) | 0x80)?;
            lo = (lo >> 7) | (hi << 25);
            hi >>= 7;
        }
        self.byte(lo as u8)
    }

    /// Zigzag, then LEB128: postcard's signed integers.
    fn signed(&mut self, v: i32) -> Result<(), FrameError> {
        self.varint(u64::from(((v << 1) ^ (v >> 31)) as u32))
    }

    /// An `Option`: a 0 byte for none, else 1 and the value.
    fn option<T: Copy>(
        &mut self,
        v: Option<T>,
        put: impl Fn(&mut Self, T) -> Result<(), FrameError>,
    ) -> Result<(), FrameError> {
        match v {
            None => self.byte(0),
            Some(x) => {
                self.byte(1)?;
                put(self, x)
            }
        }
    }
}

/// COBS: `data` stuffed into `frame` (each zero replaced by the distance to
/// the next, a code byte ahead of each block of up to 254), then the 0x00
/// delimiter; returns the frame's length. One pass, state in locals.
fn stuff(data: &[u8], frame: &mut [u8; FRAME_MAX]) -> Result<usize, FrameError> {
    let (mut code_at, mut at, mut code) = (0usize, 1usize, 1u8);
    for &b in data {
        if b != 0 {
            *frame.get_mut(at).ok_or(FrameError::Encode)? = b;
            at += 1;
            code += 1;
        }
        if b == 0 || code == 0xFF {
            *frame.get_mut(code_at).ok_or(FrameError::Encode)? = code;
            code_at = at;
            at += 1;
            code = 1;
        }
    }
    *frame.get_mut(code_at).ok_or(FrameError::Encode)? = code;
    *frame.get_mut(at).ok_or(FrameError::Encode)? = 0;
    Ok(at + 1)
}

/// The record in postcard's wire format (fields in declaration order;
/// integers as LEB128, signed ones zigzagged; an `Option` as a 0/1 tag;
/// an enum as its variant index), written without serde: postcard's own
/// encoder keeps array-index panics that the no-panic link of the field
/// tester refuses, and costs more. The test `the_encoder_writes_what_postcard_writes`
/// holds the two to the same bytes; decoding stays with postcard.
fn payload(r: &Record, out: &mut Out) -> Result<(), FrameError> {
    out.varint(u64::from(r.seq))?;
    out.varint(u64::from(r.unit_id))?;
    out.varint(u64::from(r.boot))?;
    out.varint(r.press_ticks)?;
    out.option(r.on_ticks, Out::varint)?;
    out.option(r.hold_ticks, Out::varint)?;
    out.varint(u64::from(r.clock_hz))?;
    out.option(r.temp_mdeg_c, Out::signed)?;
    out.byte(r.verdict as u8)?;
    out.byte(r.hint as u8)?;
    out.byte(r.drift as u8)?;
    out.option(r.c_deviation_ppm, Out::signed)
}

/// Encodes a record into one format-2 frame in `frame`, delimiter included; returns
/// the frame's length. What a chip calls: no copy, nothing but `frame` and a
/// 66-byte payload buffer on the stack.
///
/// # Errors
/// [`FrameError::Encode`] if it does not fit (not reachable for a [`Record`]).
pub fn encode_into(record: &Record, frame: &mut [u8; FRAME_MAX]) -> Result<usize, FrameError> {
    let mut out = Out { buf: [0; PAYLOAD_MAX + 4], at: 0 };
    payload(record, &mut out)?;
    let n = out.at;
    let crc = crate::crc32::checksum(out.buf.get(..n).ok_or(FrameError::Encode)?) ^ FORMAT_2_MARK;
    out.buf.get_mut(n..n + 4).ok_or(FrameError::Encode)?.copy_from_slice(&crc.to_le_bytes());
    stuff(out.buf.get(..n + 4).ok_or(FrameError::Encode)?, frame)
}

/// Encodes a record into one format-2 frame, delimiter included.
///
/// # Errors
/// [`FrameError::Encode`] if it does not fit (not reachable for a [`Record`]).
pub fn encode(record: &Record) -> Result<heapless::Vec<u8, FRAME_MAX>, FrameError> {
    let mut frame = [0u8; FRAME_MAX];
    let len = encode_into(record, &mut frame)?;
    // One block copy (from_slice would copy byte by byte), then cut to length.
    let mut v = heapless::Vec::from_array(frame);
    v.truncate(len);
    Ok(v)
}

/// A format-1 record: [`Record`] before `boot` (postcard's layout of it).
#[derive(Deserialize)]
struct RecordV1 {
    seq: u32,
    unit_id: u32,
    press_ticks: u64,
    on_ticks: Option<u64>,
    hold_ticks: Option<u64>,
    clock_hz: u32,
    temp_mdeg_c: Option<i32>,
    verdict: Verdict,
    hint: Hint,
    drift: DriftState,
    c_deviation_ppm: Option<i32>,
}

impl From<RecordV1> for Record {
    fn from(r: RecordV1) -> Record {
        Record {
            seq: r.seq,
            unit_id: r.unit_id,
            boot: 0,
            press_ticks: r.press_ticks,
            on_ticks: r.on_ticks,
            hold_ticks: r.hold_ticks,
            clock_hz: r.clock_hz,
            temp_mdeg_c: r.temp_mdeg_c,
            verdict: r.verdict,
            hint: r.hint,
            drift: r.drift,
            c_deviation_ppm: r.c_deviation_ppm,
        }
    }
}

/// The whole of `payload` as a `T`.
fn whole<'de, T: Deserialize<'de>>(payload: &'de [u8]) -> Result<T, FrameError> {
    match postcard::take_from_bytes::<T>(payload) {
        Ok((t, [])) => Ok(t),
        _ => Err(FrameError::Payload),
    }
}

/// Decodes one frame of either format (with or without its trailing 0x00);
/// a format-1 record has `boot` 0.
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
    let crc = crate::crc32::checksum(payload);
    if crc ^ FORMAT_2_MARK == want {
        whole::<Record>(payload)
    } else if crc == want {
        whole::<RecordV1>(payload).map(Record::from)
    } else {
        Err(FrameError::Crc)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> Record {
        Record {
            seq: u32::MAX,
            unit_id: u32::MAX,
            boot: u32::MAX,
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

    fn any_record() -> impl proptest::strategy::Strategy<Value = Record> {
        use proptest::prelude::*;
        let verdicts = [
            Verdict::WithinWindow,
            Verdict::Short,
            Verdict::Long,
            Verdict::NoResponse,
            Verdict::StuckActive,
            Verdict::NotIdle,
            Verdict::Chatter,
        ];
        let hints = [
            Hint::None,
            Hint::WrongPart,
            Hint::AgedOrWrongTolerance,
            Hint::NearTheEdge,
            Hint::OpenCapacitorOrDiode,
            Hint::NoChargePath,
            Hint::OpenResistorOrShortedNode,
            Hint::NoisyOutput,
        ];
        let drifts = [DriftState::Settling, DriftState::Steady, DriftState::Drifting, DriftState::BeyondLimit];
        (
            (any::<u32>(), any::<u32>(), any::<u64>(), any::<Option<u64>>(), any::<Option<u64>>(), any::<u32>()),
            (any::<Option<i32>>(), 0..verdicts.len(), 0..hints.len(), 0..drifts.len(), any::<Option<i32>>()),
            any::<u32>(),
        )
            .prop_map(
                move |((seq, unit_id, press_ticks, on_ticks, hold_ticks, clock_hz), (temp, v, h, d, dev), boot)| {
                    Record {
                        seq,
                        unit_id,
                        boot,
                        press_ticks,
                        on_ticks,
                        hold_ticks,
                        clock_hz,
                        temp_mdeg_c: temp,
                        verdict: verdicts[v],
                        hint: hints[h],
                        drift: drifts[d],
                        c_deviation_ppm: dev,
                    }
                },
            )
    }

    proptest::proptest! {
        /// Invariant: the hand-written encoder writes postcard's bytes exactly.
        #[test]
        fn the_encoder_writes_what_postcard_writes(r in any_record()) {
            // The frame a three-pass encoder makes from postcard, the crc
            // crate and the cobs crate, byte for byte.
            let mut payload = [0u8; PAYLOAD_MAX + 4];
            let used = postcard::to_slice(&r, &mut payload).unwrap_or_else(|e| panic!("{e}")).len();
            let crc = crc::Crc::<u32>::new(&crc::CRC_32_ISO_HDLC).checksum(&payload[..used]) ^ FORMAT_2_MARK;
            payload[used..used + 4].copy_from_slice(&crc.to_le_bytes());
            let mut want = [0u8; FRAME_MAX];
            let n = cobs::encode(&payload[..used + 4], &mut want);
            let got = encode(&r).unwrap_or_default();
            let mut frame = [0u8; FRAME_MAX];
            let len = encode_into(&r, &mut frame).unwrap_or(0);
            proptest::prop_assert_eq!(&frame[..len], &got[..]);
            proptest::prop_assert_eq!(&got[..got.len() - 1], &want[..n]);
            proptest::prop_assert_eq!(got.last(), Some(&0));
            proptest::prop_assert_eq!(decode(&got), Ok(r));
        }
    }

    /// Format-1 frames as the encoder wrote them before format 2 (bytes
    /// kept from that encoder): they decode to the same records, `boot` 0.
    const FORMAT_1: [&[u8]; 3] = [
        &[
            0x16, 0x29, 0xb5, 0x96, 0x01, 0xc0, 0xa9, 0x07, 0x01, 0x25, 0x01, 0x8c, 0xf9, 0x96, 0x01, 0xc0, 0x84, 0x3d,
            0x01, 0xa7, 0xc3, 0x01, 0x01, 0x0a, 0x01, 0x01, 0xa3, 0xe8, 0x03, 0xb1, 0x8c, 0xad, 0xad, 0x00,
        ],
        &[
            0x01, 0x02, 0x07, 0x01, 0x01, 0x05, 0x80, 0xc8, 0xd0, 0x07, 0x03, 0x03, 0x05, 0x01, 0x05, 0xaa, 0x7d, 0x66,
            0xc1, 0x00,
        ],
        &[
            0x43, 0xff, 0xff, 0xff, 0xff, 0x0f, 0xff, 0xff, 0xff, 0xff, 0x0f, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff,
            0xff, 0xff, 0x01, 0x01, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0x01, 0x01, 0xff, 0xff, 0xff,
            0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0x01, 0xff, 0xff, 0xff, 0xff, 0x0f, 0x01, 0xff, 0xff, 0xff, 0xff, 0x0f,
            0x06, 0x06, 0x03, 0x01, 0xff, 0xff, 0xff, 0xff, 0x0f, 0xb6, 0x04, 0x51, 0x97, 0x00,
        ],
    ];

    fn format_1_records() -> [Record; 3] {
        [
            Record {
                seq: 41,
                unit_id: 0x4B35,
                boot: 0,
                press_ticks: 120_000,
                on_ticks: Some(37),
                hold_ticks: Some(2_473_100),
                clock_hz: 1_000_000,
                temp_mdeg_c: Some(-12_500),
                verdict: Verdict::WithinWindow,
                hint: Hint::None,
                drift: DriftState::Steady,
                c_deviation_ppm: Some(-31_250),
            },
            Record {
                seq: 0,
                unit_id: 7,
                boot: 0,
                press_ticks: 0,
                on_ticks: None,
                hold_ticks: None,
                clock_hz: 16_000_000,
                temp_mdeg_c: None,
                verdict: Verdict::NoResponse,
                hint: Hint::NoChargePath,
                drift: DriftState::Settling,
                c_deviation_ppm: None,
            },
            Record { boot: 0, ..sample() },
        ]
    }

    #[test]
    fn format_1_frames_still_decode() {
        for (f, r) in FORMAT_1.iter().zip(format_1_records()) {
            assert_eq!(decode(f), Ok(r));
            // Written now, the same record is a format-2 frame, one byte longer (boot 0).
            let now = encode(&r).unwrap_or_default();
            assert_eq!(now.len(), f.len() + 1);
            assert_eq!(decode(&now), Ok(r));
        }
    }

    #[test]
    fn a_format_2_frame_is_not_a_format_1_one() {
        // What a decoder of format 1 only does with a frame written now: a CRC mismatch.
        let f = encode(&sample()).unwrap_or_default();
        let mut raw = [0u8; FRAME_MAX];
        let n = cobs::decode(&f[..f.len() - 1], &mut raw).map(|r| r.frame_size()).unwrap_or(0);
        let (payload, crc) = raw[..n].split_at(n - 4);
        assert_ne!(crate::crc32::checksum(payload).to_le_bytes(), crc);
        assert_eq!(
            crate::crc32::checksum(payload) ^ FORMAT_2_MARK,
            u32::from_le_bytes([crc[0], crc[1], crc[2], crc[3]])
        );
        assert_eq!(FORMAT_2_MARK.count_ones(), 16);
    }

    #[test]
    fn every_single_bit_flip_of_a_frame_is_caught() {
        for f in [encode(&sample()).unwrap_or_default().to_vec(), FORMAT_1[0].to_vec(), FORMAT_1[1].to_vec()] {
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

    /// Every error of one or two bits in a frame's payload and check, of
    /// either format: the mark leaves no such error undetected.
    #[test]
    fn every_one_and_two_bit_error_is_caught() {
        let frames = [
            encode(&sample()).unwrap_or_default().to_vec(),
            encode(&format_1_records()[0]).unwrap_or_default().to_vec(),
            FORMAT_1[0].to_vec(),
            FORMAT_1[2].to_vec(),
        ];
        for f in frames {
            let mut raw = [0u8; FRAME_MAX];
            let n = cobs::decode(&f[..f.len() - 1], &mut raw).map(|r| r.frame_size()).unwrap_or(0);
            let bits = n * 8;
            // Caught by the check alone (whatever the payload's layout would say):
            // the damaged bytes' check matches neither format's.
            let caught = |data: &[u8]| {
                let (payload, crc) = data.split_at(n - 4);
                let want = u32::from_le_bytes([crc[0], crc[1], crc[2], crc[3]]);
                let got = crate::crc32::checksum(payload);
                let mut out = [0u8; FRAME_MAX + 2];
                let m = cobs::encode(data, &mut out);
                got != want && got ^ FORMAT_2_MARK != want && decode(&out[..m]).is_err()
            };
            for a in 0..bits {
                let mut one = raw;
                one[a / 8] ^= 1 << (a % 8);
                assert!(caught(&one[..n]), "bit {a}");
                for b in a + 1..bits {
                    let mut two = one;
                    two[b / 8] ^= 1 << (b % 8);
                    assert!(caught(&two[..n]), "bits {a} and {b}");
                }
            }
        }
    }
}
