//! Recomputes every golden vector with the hot path on the chip and compares
//! the bytes with the host's: any difference fails the run.
#![no_std]
#![no_main]
#![forbid(unsafe_code)]

use cortex_m_rt::entry;
use hold_emulator::{exit, print, print_value};
use rc_model::{Prepared, OUTCOME_LEN, PREPARED_LEN};

static VECTORS: &[u8] = include_bytes!(env!("RCHOLD_VECTORS"));

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    print(b"golden: panic\n");
    exit(false)
}

/// A cursor over the vector file; every read is checked.
struct Cursor<'a> {
    buf: &'a [u8],
    at: usize,
}

impl<'a> Cursor<'a> {
    fn take(&mut self, n: usize) -> Option<&'a [u8]> {
        let s = self.buf.get(self.at..self.at.checked_add(n)?)?;
        self.at += n;
        Some(s)
    }
    fn u32(&mut self) -> Option<u32> {
        self.take(4)?.try_into().ok().map(u32::from_le_bytes)
    }
    fn i32(&mut self) -> Option<i32> {
        self.take(4)?.try_into().ok().map(i32::from_le_bytes)
    }
    fn u64(&mut self) -> Option<u64> {
        self.take(8)?.try_into().ok().map(u64::from_le_bytes)
    }
}

/// (cases, mismatches, first mismatching case) or `None` for a damaged file.
fn check(vectors: &[u8]) -> Option<(u32, u32, u32)> {
    let mut c = Cursor { buf: vectors, at: 0 };
    if c.take(4)? != b"RCGV" || c.u32()? != 1 {
        return None;
    }
    let (stages, cases) = (c.u32()?, c.u32()?);
    let (mut seen, mut bad, mut first) = (0u32, 0u32, u32::MAX);
    for _ in 0..stages {
        let stage = Prepared::from_bytes(c.take(PREPARED_LEN)?).ok()?;
        for _ in 0..c.u32()? {
            let (temp, hold) = (c.i32()?, c.u64()?);
            let want = c.take(OUTCOME_LEN)?;
            if stage.outcome_bytes(temp, hold) != want {
                bad += 1;
                first = first.min(seen);
            }
            seen += 1;
        }
    }
    (seen == cases && c.at == vectors.len()).then_some((seen, bad, first))
}

#[entry]
fn main() -> ! {
    match check(VECTORS) {
        Some((cases, 0, _)) => {
            print_value("golden: every case matches the host, cases", cases);
            exit(true)
        }
        Some((cases, bad, first)) => {
            print_value("golden: cases", cases);
            print_value("golden: MISMATCHES", bad);
            print_value("golden: first mismatching case", first);
            exit(false)
        }
        None => {
            print(b"golden: the vector file is damaged or of another version\n");
            exit(false)
        }
    }
}
