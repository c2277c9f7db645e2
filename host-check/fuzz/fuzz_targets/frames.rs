//! The firmware's frame stream as `listen` reads it: any bytes, delivered in
//! reads of any size (the first byte picks the size).
//!
//! Asserts the accounting rule (README, "Reliability"): every frame the bytes
//! hold (a non-empty run between 0x00 delimiters, or a non-empty run at the
//! end) is either a record or a bad frame; and every record read is the one
//! its frame encodes (it encodes back to a frame that decodes to it), with the
//! record check and the store's signed 64-bit columns agreeing.
#![no_main]

use std::io::Read;

use hold_firmware::record;
use host_check::data::frames::FrameReader;
use host_check::data::validate;
use libfuzzer_sys::fuzz_target;

/// Hands out `data` `step` bytes at a time.
struct Trickle<'a> {
    data: &'a [u8],
    step: usize,
}

impl Read for Trickle<'_> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = self.step.min(buf.len()).min(self.data.len());
        let (head, tail) = self.data.split_at(n);
        buf[..n].copy_from_slice(head);
        self.data = tail;
        Ok(n)
    }
}

fuzz_target!(|data: &[u8]| {
    let Some((&first, bytes)) = data.split_first() else { return };
    let step = usize::from(first % 64) + 1;
    let frames = bytes.split(|&b| b == 0).filter(|f| !f.is_empty()).count() as u64;
    let mut reader = FrameReader::new(Trickle { data: bytes, step });
    let mut records = 0u64;
    while let Some(r) = reader.next_record().expect("a slice never fails to read") {
        records += 1;
        let again = record::encode(&r).expect("a decoded record encodes");
        assert_eq!(record::decode(&again), Ok(r), "round trip");
        if validate::record(&r).is_ok() {
            for t in [Some(r.press_ticks), r.on_ticks, r.hold_ticks].into_iter().flatten() {
                assert!(i64::try_from(t).is_ok(), "an accepted record fits the store");
            }
        }
    }
    let c = reader.counts();
    assert_eq!(c.records, records);
    assert_eq!(c.bytes, bytes.len() as u64);
    assert_eq!(c.records + c.bad_frames, frames, "records + bad frames = frames in the bytes");
});
