//! A hold stage simulated in integers: the node voltage integrated tick by
//! tick from the tick counter, behind embedded-hal pins, so that the real
//! engine measures it as it would a board — on an emulated chip or the host.
//!
//! Per tick, while the trigger is pressed the node moves toward the charge
//! target `V∞` by the fraction `1 − e^(−1/τc)`; released, it falls toward 0
//! by `1 − e^(−1/τd)` (τ in ticks). Both fractions, `V∞` and the thresholds
//! come from the host (`host-check/examples/emulator_boards.rs`), which draws
//! the boards and applies the faults, so the physics stays in one place and
//! the simulation only integrates. The comparator is the stage's second inverter:
//! active once the node (plus optional noise) rises above the rising
//! threshold, inactive once it falls below the falling one. Time advances
//! only in the delay between the engine's polls.
//!
//! The stage lives in statics, as a chip's pins and counter would: a program
//! simulates one stage at a time (the emulator firmware and the host's
//! single-threaded `emulator_boards host-run`); tests running in parallel
//! threads must not share it.

use core::convert::Infallible;
use core::sync::atomic::{AtomicBool, AtomicU32, Ordering};

use embedded_hal::delay::DelayNs;
use embedded_hal::digital::{ErrorType, InputPin, OutputPin};
use hold_firmware::TickSource;

/// One simulated board, as the host writes it (little-endian u32, the last i32).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct Board {
    /// Unit identifier for its record.
    pub unit_id: u32,
    /// Node voltage a long press settles at, µV (0: never charges).
    pub v_inf_uv: u32,
    /// Fraction of the way to `V∞` covered per tick while pressed, Q32.
    pub charge_q32: u32,
    /// Fraction of the node voltage lost per tick while released, Q32.
    pub discharge_q32: u32,
    /// Rising threshold, µV.
    pub rise_uv: u32,
    /// Falling threshold, µV.
    pub fall_uv: u32,
    /// Comparator noise amplitude, µV (uniform ±).
    pub noise_uv: u32,
    /// Seed of the noise.
    pub seed: u32,
    /// The unit's own temperature reading at this measurement, m°C.
    pub temp_mdeg_c: i32,
}

/// Bytes of one [`Board`] in the scenario file.
pub const BOARD_LEN: usize = 36;

impl Board {
    /// Reads one board from `BOARD_LEN` bytes.
    #[must_use]
    pub fn from_bytes(b: &[u8]) -> Option<Board> {
        let w = |i: usize| b.get(i * 4..i * 4 + 4).and_then(|s| s.try_into().ok()).map(u32::from_le_bytes);
        Some(Board {
            unit_id: w(0)?,
            v_inf_uv: w(1)?,
            charge_q32: w(2)?,
            discharge_q32: w(3)?,
            rise_uv: w(4)?,
            fall_uv: w(5)?,
            noise_uv: w(6)?,
            seed: w(7)?,
            temp_mdeg_c: i32::from_le_bytes(w(8)?.to_le_bytes()),
        })
    }
}

// The plant's state. Only the main loop touches it (no interrupts), so plain
// loads and stores suffice (ARMv6-M has no atomic read-modify-write).
static TICKS: AtomicU32 = AtomicU32::new(0);
static PRESSED: AtomicBool = AtomicBool::new(false);
static ACTIVE: AtomicBool = AtomicBool::new(false);
/// Node voltage, µV·2^8 (below 2^32 for nodes up to 16 V).
static NODE: AtomicU32 = AtomicU32::new(0);
static NOISE_STATE: AtomicU32 = AtomicU32::new(1);
static BOARD: [AtomicU32; 8] = [const { AtomicU32::new(0) }; 8];
/// Ticks per second and the delay's sub-tick remainder, ns.
static CLOCK_HZ: AtomicU32 = AtomicU32::new(1);
static NS_REMAINDER: AtomicU32 = AtomicU32::new(0);

fn board(i: usize) -> u32 {
    BOARD.get(i).map_or(0, |a| a.load(Ordering::Relaxed))
}

/// Puts `b` behind the pins, its node discharged and its output inactive.
pub fn fit(b: &Board, clock_hz: u32) {
    for (slot, v) in BOARD.iter().zip([
        b.unit_id,
        b.v_inf_uv,
        b.charge_q32,
        b.discharge_q32,
        b.rise_uv,
        b.fall_uv,
        b.noise_uv,
        b.seed | 1,
    ]) {
        slot.store(v, Ordering::Relaxed);
    }
    NOISE_STATE.store(b.seed | 1, Ordering::Relaxed);
    NODE.store(0, Ordering::Relaxed);
    ACTIVE.store(false, Ordering::Relaxed);
    PRESSED.store(false, Ordering::Relaxed);
    CLOCK_HZ.store(clock_hz.max(1), Ordering::Relaxed);
    NS_REMAINDER.store(0, Ordering::Relaxed);
}

/// One tick of the node: toward `V∞` while pressed, toward 0 when released.
fn step() {
    let v = u64::from(NODE.load(Ordering::Relaxed));
    let next = if PRESSED.load(Ordering::Relaxed) {
        let target = u64::from(board(1)) << 8;
        if target > v {
            v + (((target - v) * u64::from(board(2))) >> 32)
        } else {
            v - (((v - target) * u64::from(board(3))) >> 32)
        }
    } else {
        v - ((v * u64::from(board(3))) >> 32)
    };
    NODE.store(u32::try_from(next).unwrap_or(u32::MAX), Ordering::Relaxed);
    TICKS.store(TICKS.load(Ordering::Relaxed).wrapping_add(1), Ordering::Relaxed);
}

/// The comparator input: the node plus uniform noise (xorshift32).
fn seen_uv() -> u32 {
    let node = NODE.load(Ordering::Relaxed) >> 8;
    let amp = board(6);
    if amp == 0 {
        return node;
    }
    let mut x = NOISE_STATE.load(Ordering::Relaxed);
    x ^= x << 13;
    x ^= x >> 17;
    x ^= x << 5;
    NOISE_STATE.store(x, Ordering::Relaxed);
    // Uniform in [−amp, amp): x mod 2·amp, then shifted down by amp.
    let span = amp.saturating_mul(2).max(1);
    let offset = x - (x / span) * span;
    (node + offset).saturating_sub(amp)
}

/// The trigger input of the simulated stage (active low).
pub struct Trigger;
/// The output of the simulated stage (active low).
pub struct Output;
/// The tick counter (advanced by [`Delay`]).
pub struct Clock;
/// The delay between polls: advances simulated time tick by tick.
pub struct Delay;

impl ErrorType for Trigger {
    type Error = Infallible;
}
impl OutputPin for Trigger {
    fn set_low(&mut self) -> Result<(), Infallible> {
        PRESSED.store(true, Ordering::Relaxed);
        Ok(())
    }
    fn set_high(&mut self) -> Result<(), Infallible> {
        PRESSED.store(false, Ordering::Relaxed);
        Ok(())
    }
}
impl ErrorType for Output {
    type Error = Infallible;
}
impl InputPin for Output {
    fn is_high(&mut self) -> Result<bool, Infallible> {
        self.is_low().map(|low| !low)
    }
    fn is_low(&mut self) -> Result<bool, Infallible> {
        let seen = seen_uv();
        let active = ACTIVE.load(Ordering::Relaxed);
        let now = if !active && seen > board(4) {
            true
        } else if active && seen < board(5) {
            false
        } else {
            active
        };
        ACTIVE.store(now, Ordering::Relaxed);
        Ok(now)
    }
}
impl TickSource for Clock {
    fn now(&mut self) -> u32 {
        TICKS.load(Ordering::Relaxed)
    }
    fn clock_hz(&self) -> u32 {
        CLOCK_HZ.load(Ordering::Relaxed)
    }
}
impl DelayNs for Delay {
    /// Whole ticks of `ns` (at least one, so every poll sees time move),
    /// carrying the remainder to the next delay.
    fn delay_ns(&mut self, ns: u32) {
        let clock = u64::from(CLOCK_HZ.load(Ordering::Relaxed));
        let total = u64::from(ns) * clock + u64::from(NS_REMAINDER.load(Ordering::Relaxed));
        let ticks = (total / 1_000_000_000).max(1);
        NS_REMAINDER.store(u32::try_from(total % 1_000_000_000).unwrap_or(0), Ordering::Relaxed);
        for _ in 0..ticks {
            step();
        }
    }
}

/// The async side of the same stage: only the delay advances time, one tick
/// per poll, and `Wait` only looks at the level, so a wait raced against a
/// delay sees the output change within the tick it happens.
#[cfg(feature = "async")]
mod asynch {
    use core::convert::Infallible;
    use core::future::poll_fn;
    use core::task::Poll;

    use embedded_hal::digital::InputPin;

    use super::{step, Delay, Output, CLOCK_HZ, NS_REMAINDER};
    use core::sync::atomic::Ordering;

    impl Output {
        /// Resolves once the output is `active`; never advances time itself.
        async fn until(&mut self, active: bool) {
            poll_fn(|cx| {
                if self.is_low().unwrap_or(false) == active {
                    return Poll::Ready(());
                }
                cx.waker().wake_by_ref();
                Poll::Pending
            })
            .await;
        }
    }

    impl embedded_hal_async::digital::Wait for Output {
        async fn wait_for_high(&mut self) -> Result<(), Infallible> {
            self.until(false).await;
            Ok(())
        }
        async fn wait_for_low(&mut self) -> Result<(), Infallible> {
            self.until(true).await;
            Ok(())
        }
        async fn wait_for_rising_edge(&mut self) -> Result<(), Infallible> {
            self.until(true).await;
            self.until(false).await;
            Ok(())
        }
        async fn wait_for_falling_edge(&mut self) -> Result<(), Infallible> {
            self.until(false).await;
            self.until(true).await;
            Ok(())
        }
        async fn wait_for_any_edge(&mut self) -> Result<(), Infallible> {
            let now = self.is_low().unwrap_or(false);
            self.until(!now).await;
            Ok(())
        }
    }

    impl embedded_hal_async::delay::DelayNs for Delay {
        /// Whole ticks of `ns` (at least one), one per poll, carrying the
        /// remainder as the blocking delay does.
        async fn delay_ns(&mut self, ns: u32) {
            let clock = u64::from(CLOCK_HZ.load(Ordering::Relaxed));
            let total = u64::from(ns) * clock + u64::from(NS_REMAINDER.load(Ordering::Relaxed));
            let mut left = (total / 1_000_000_000).max(1);
            NS_REMAINDER.store(u32::try_from(total % 1_000_000_000).unwrap_or(0), Ordering::Relaxed);
            poll_fn(|cx| {
                step();
                left -= 1;
                if left == 0 {
                    return Poll::Ready(());
                }
                cx.waker().wake_by_ref();
                Poll::Pending
            })
            .await;
        }
    }
}
