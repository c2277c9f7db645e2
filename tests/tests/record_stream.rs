//! The record stream: every good record comes through, corrupted streams
//! (bit flips, dropped bytes, truncation, garbage) never yield a wrong
//! record, and records in = records read + bad frames.

use hold_firmware::drift::DriftState;
use hold_firmware::record::{encode, Record};
use hold_firmware::{Hint, Verdict};
use host_check::data::frames::FrameReader;
use rand::{Rng, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;

fn record(i: u32) -> Record {
    Record {
        seq: i,
        unit_id: 7 + i % 3,
        boot: i / 1_000,
        press_ticks: 100_000 + u64::from(i),
        on_ticks: Some(60 + u64::from(i % 5)),
        hold_ticks: if i.is_multiple_of(11) { None } else { Some(739_000 + u64::from(i) * 3) },
        clock_hz: 1_000_000,
        temp_mdeg_c: if i.is_multiple_of(2) { Some(25_000 - i as i32) } else { None },
        verdict: if i.is_multiple_of(13) { Verdict::Short } else { Verdict::WithinWindow },
        hint: if i.is_multiple_of(13) { Hint::WrongPart } else { Hint::None },
        drift: DriftState::Steady,
        c_deviation_ppm: Some(i as i32 * -7),
    }
}

fn stream(n: u32) -> (Vec<Record>, Vec<u8>) {
    let recs: Vec<Record> = (0..n).map(record).collect();
    let bytes = recs.iter().flat_map(|r| encode(r).unwrap_or_default()).collect();
    (recs, bytes)
}

fn read_all(bytes: &[u8]) -> (Vec<Record>, host_check::data::frames::Counts) {
    let mut r = FrameReader::new(bytes);
    let got: Vec<Record> = r.by_ref().map(|x| x.unwrap_or_else(|e| panic!("{e}"))).collect();
    (got, r.counts())
}

#[test]
fn a_clean_stream_gives_every_record_in_order() {
    let (recs, bytes) = stream(2_000);
    let (got, c) = read_all(&bytes);
    assert_eq!(got, recs);
    assert_eq!((c.records, c.bad_frames, c.bytes), (2_000, 0, bytes.len() as u64));
}

#[test]
fn corrupted_streams_never_yield_a_wrong_record() {
    let (recs, clean) = stream(500);
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(77);
    for round in 0..200 {
        let mut bytes = clean.clone();
        let damage = rng.random_range(1..20);
        for _ in 0..damage {
            let len = bytes.len();
            match rng.random_range(0..3) {
                0 => {
                    let i = rng.random_range(0..len);
                    bytes[i] ^= 1 << rng.random_range(0..8); // bit flip
                }
                1 => {
                    let i = rng.random_range(0..len);
                    bytes.remove(i); // dropped byte
                }
                _ => {
                    let i = rng.random_range(0..len);
                    let junk: Vec<u8> = (0..rng.random_range(1..200)).map(|_| rng.random()).collect();
                    bytes.splice(i..i, junk); // line noise
                }
            }
        }
        let (got, c) = read_all(&bytes);
        // Every record read is one that was sent, unchanged, and in order.
        let mut next = 0usize;
        for r in &got {
            let at = recs[next..]
                .iter()
                .position(|x| x == r)
                .unwrap_or_else(|| panic!("round {round}: a record that was never sent: {r:?}"));
            next += at + 1;
        }
        assert_eq!(c.records as usize, got.len());
        assert!(got.len() + c.bad_frames as usize >= 1, "round {round}");
        // Each flip, dropped byte or burst of noise costs at most two frames
        // (a lost delimiter merges two); everything else gets through.
        assert!(got.len() >= 500 - 2 * damage, "round {round}: only {} of 500 after {damage} hits", got.len());
    }
}

#[test]
fn records_in_equal_records_read_plus_bad_frames_for_flips() {
    // One bit flipped in each of 40 distinct frames: exactly those 40 are lost,
    // unless the flip creates a zero byte (which splits that frame in two bad ones).
    let (recs, clean) = stream(400);
    let mut bytes = clean.clone();
    let mut starts = vec![0usize];
    starts.extend(clean.iter().enumerate().filter(|(_, b)| **b == 0).map(|(i, _)| i + 1));
    let mut rng = Xoshiro256PlusPlus::seed_from_u64(5);
    let mut hit = std::collections::BTreeSet::new();
    while hit.len() < 40 {
        let f = rng.random_range(0..400usize);
        if hit.insert(f) {
            let (a, b) = (starts[f], starts[f + 1] - 1); // frame bytes, delimiter excluded
            let i = rng.random_range(a..b);
            let mut bit = rng.random_range(0..8);
            while bytes[i] ^ (1 << bit) == 0 {
                bit = (bit + 1) % 8;
            }
            bytes[i] ^= 1 << bit;
        }
    }
    let (got, c) = read_all(&bytes);
    assert_eq!(got.len(), 360);
    assert_eq!(c.records + c.bad_frames, 400);
    assert!(got.iter().all(|r| !hit.contains(&(r.seq as usize)) && recs.contains(r)));
}

#[test]
fn a_truncated_stream_loses_only_the_cut_frame() {
    let (recs, clean) = stream(300);
    for cut in [1usize, 17, clean.len() / 3, clean.len() / 2 + 5, clean.len() - 1] {
        let (got, c) = read_all(&clean[..cut]);
        let whole = clean[..cut].iter().filter(|&&b| b == 0).count();
        assert_eq!(got, recs[..whole].to_vec(), "cut at {cut}");
        assert_eq!(c.bad_frames, u64::from(clean[cut - 1] != 0), "cut at {cut}");
    }
}
