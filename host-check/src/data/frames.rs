//! Reading the firmware's record stream: frames end at a 0x00 byte (COBS
//! guarantees no other zero), each carries a postcard record and its CRC-32
//! (see `hold_firmware::record`). The reader resynchronises at the next
//! delimiter after any garbage and counts what it had to drop, so that
//! records in = records read + bad frames.

use std::io::{self, Read};

use hold_firmware::record::{self, Record, FRAME_MAX};

/// Counters of a stream so far.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct Counts {
    /// Good records returned.
    pub records: u64,
    /// Frames dropped: bad stuffing, CRC mismatch, not a record, or too long.
    pub bad_frames: u64,
    /// Bytes read in all.
    pub bytes: u64,
}

/// Splits a byte stream into frames and decodes them.
#[derive(Debug)]
pub struct FrameReader<R> {
    inner: R,
    frame: Vec<u8>,
    overlong: bool,
    buf: Box<[u8]>,
    pos: usize,
    len: usize,
    counts: Counts,
}

impl<R: Read> FrameReader<R> {
    /// Reads frames from `inner`.
    pub fn new(inner: R) -> Self {
        FrameReader {
            inner,
            frame: Vec::with_capacity(FRAME_MAX),
            overlong: false,
            buf: vec![0; 64 * 1024].into_boxed_slice(),
            pos: 0,
            len: 0,
            counts: Counts::default(),
        }
    }

    /// The counters so far.
    pub const fn counts(&self) -> Counts {
        self.counts
    }

    /// The next good record; `Ok(None)` at the end of the stream. Bad frames
    /// are counted and skipped. A trailing frame without its delimiter
    /// (a truncated stream) counts as bad.
    ///
    /// # Errors
    /// Read errors of the underlying stream.
    pub fn next_record(&mut self) -> io::Result<Option<Record>> {
        loop {
            if self.pos == self.len {
                let n = match self.inner.read(&mut self.buf) {
                    Ok(n) => n,
                    Err(e) if e.kind() == io::ErrorKind::Interrupted => continue,
                    Err(e) => return Err(e),
                };
                if n == 0 {
                    if !self.frame.is_empty() || self.overlong {
                        self.counts.bad_frames += 1;
                        self.frame.clear();
                        self.overlong = false;
                    }
                    return Ok(None);
                }
                self.counts.bytes += n as u64;
                self.pos = 0;
                self.len = n;
            }
            let chunk = self.buf.get(self.pos..self.len).unwrap_or(&[]);
            match chunk.iter().position(|&b| b == 0) {
                None => {
                    self.take(chunk.len());
                    self.pos = self.len;
                }
                Some(i) => {
                    self.take(i);
                    self.pos += i + 1;
                    let frame = std::mem::take(&mut self.frame);
                    let overlong = std::mem::replace(&mut self.overlong, false);
                    if frame.is_empty() && !overlong {
                        continue; // back-to-back delimiters: idle line
                    }
                    let decoded = if overlong { None } else { record::decode(&frame).ok() };
                    self.frame = frame;
                    self.frame.clear();
                    match decoded {
                        Some(r) => {
                            self.counts.records += 1;
                            return Ok(Some(r));
                        }
                        None => self.counts.bad_frames += 1,
                    }
                }
            }
        }
    }

    /// Drops the frame read so far (the input was lost mid-frame): counted
    /// as a bad frame when it had begun.
    pub fn lose_frame(&mut self) {
        if !self.frame.is_empty() || self.overlong {
            self.counts.bad_frames += 1;
        }
        self.frame.clear();
        self.overlong = false;
        self.pos = 0;
        self.len = 0;
    }

    /// Reads on from `inner` (the input reopened), keeping the counts.
    pub fn replace_input(&mut self, inner: R) {
        self.lose_frame();
        self.inner = inner;
    }

    /// Appends `n` bytes at `pos` to the current frame, or marks it overlong.
    fn take(&mut self, n: usize) {
        if self.overlong {
            return;
        }
        let part = self.buf.get(self.pos..self.pos + n).unwrap_or(&[]);
        if self.frame.len() + part.len() > FRAME_MAX {
            self.overlong = true;
            self.frame.clear();
        } else {
            self.frame.extend_from_slice(part);
        }
    }
}

impl<R: Read> Iterator for FrameReader<R> {
    type Item = io::Result<Record>;
    fn next(&mut self) -> Option<Self::Item> {
        self.next_record().transpose()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use hold_firmware::drift::DriftState;
    use hold_firmware::{Hint, Verdict};

    fn record(seq: u32) -> Record {
        Record {
            seq,
            unit_id: 7,
            boot: 0,
            press_ticks: 100_000,
            on_ticks: Some(54),
            hold_ticks: Some(739_617),
            clock_hz: 1_000_000,
            temp_mdeg_c: Some(23_000),
            verdict: Verdict::WithinWindow,
            hint: Hint::None,
            drift: DriftState::Settling,
            c_deviation_ppm: None,
        }
    }

    #[test]
    fn garbage_between_frames_is_counted_and_skipped() -> io::Result<()> {
        let mut bytes = hold_firmware::record::encode(&record(1)).map_err(io::Error::other)?.to_vec();
        bytes.extend_from_slice(&[0x13, 0x37, 0x00]);
        bytes.extend_from_slice(&hold_firmware::record::encode(&record(2)).map_err(io::Error::other)?);
        let mut r = FrameReader::new(io::Cursor::new(bytes));
        assert_eq!(r.next_record()?.map(|x| x.seq), Some(1));
        assert_eq!(r.next_record()?.map(|x| x.seq), Some(2));
        assert_eq!(r.next_record()?, None);
        assert_eq!((r.counts().records, r.counts().bad_frames), (2, 1));
        Ok(())
    }
}
