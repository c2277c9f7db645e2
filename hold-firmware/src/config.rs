//! What the engine needs to know: timings in ticks, derived from the model,
//! and the prepared stage it judges holds with; both travel in one settings blob.

#[cfg(feature = "solver")]
use rc_model::{window::Window, Evaluation, Model};
use rc_model::{Error as ModelError, Prepared, Span, PREPARED_LEN};

/// Engine settings, all in ticks of the [`crate::TickSource`] unless the name says otherwise.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Config {
    /// Tick source frequency, Hz.
    pub clock_hz: u32,
    /// How long the output must stay inactive before a press (idle check).
    pub settle_ticks: u64,
    /// How long the trigger is held.
    pub press_ticks: u64,
    /// A level counts only after it has been stable this long (glitch filter).
    pub glitch_ticks: u64,
    /// Delay between two reads of the output, ns.
    pub poll_ns: u32,
    /// Give up waiting for the output to turn on after this long (≤ press).
    pub on_timeout_ticks: u64,
    /// Shortest hold that passes.
    pub hold_min_ticks: u64,
    /// Longest hold that passes.
    pub hold_max_ticks: u64,
    /// Give up waiting for the output to turn off after this long (stuck active).
    pub hold_timeout_ticks: u64,
    /// More filtered-out glitches than this make the verdict chatter.
    pub chatter_limit: u16,
    /// Shortest turn-on latency that passes (press to output active).
    pub on_min_ticks: u64,
    /// Longest turn-on latency that passes.
    pub on_max_ticks: u64,
    /// Turn-on latency of the nominal stage (0: unknown, latency not used
    /// for diagnosis).
    pub on_nominal_ticks: u64,
    /// Delay between two reads of the output while waiting for it to turn
    /// on, ns ([`on_poll_ns`]: finer than `poll_ns`, so that the latency is
    /// resolved without polling the whole hold that fast).
    pub on_poll_ns: u32,
}

/// Ticks of `span` at `clock_hz`, rounded.
#[cfg(feature = "solver")]
fn ticks(span: Span, clock_hz: u32) -> Result<u64, ModelError> {
    span.ticks(clock_hz)
}

/// Ticks of a `clock_hz` timer in one poll of `poll_ns`, rounded down.
#[must_use]
pub const fn poll_ticks(poll_ns: u32, clock_hz: u32) -> u64 {
    poll_ns as u64 * clock_hz as u64 / 1_000_000_000
}

/// The poll period while waiting for the output to turn on, ns: 1/50 of the
/// nominal turn-on latency `on_nominal_ns`, but no finer than 1 µs or one
/// tick of a `clock_hz` timer, and no coarser than the hold's `poll_ns`.
#[must_use]
pub const fn on_poll_ns(on_nominal_ns: u64, poll_ns: u32, clock_hz: u32) -> u32 {
    let tick_ns = if clock_hz == 0 { 1_000_000_000 } else { 1_000_000_000 / clock_hz as u64 };
    let floor = if tick_ns > 1_000 { tick_ns } else { 1_000 };
    let want = on_nominal_ns / 50;
    let want = if want < floor { floor } else { want };
    if want < poll_ns as u64 {
        want as u32
    } else {
        poll_ns
    }
}

/// The pass window in ticks from the model's shortest and longest hold in
/// ticks: each side widened by `guard_ppm` of itself, one tick of timer
/// quantisation and one poll of latency (`poll_ticks`). The one definition
/// of the widening: [`Config::from_window`] and the host's `f64` re-check
/// both use it. Saturates instead of wrapping.
#[must_use]
pub const fn widen(min_ticks: u64, max_ticks: u64, guard_ppm: u32, poll_ticks: u64) -> (u64, u64) {
    let slack = poll_ticks.saturating_add(1);
    (
        min_ticks.saturating_sub(guard(min_ticks, guard_ppm)).saturating_sub(slack),
        max_ticks.saturating_add(guard(max_ticks, guard_ppm)).saturating_add(slack),
    )
}

/// `guard_ppm` of `t`, rounded down, without overflow in the product.
const fn guard(t: u64, guard_ppm: u32) -> u64 {
    (t / 1_000_000).saturating_mul(guard_ppm as u64) + t % 1_000_000 * guard_ppm as u64 / 1_000_000
}

#[cfg(feature = "solver")]
impl Config {
    /// Settings for a stage: the press lasts the stage's press, but at least
    /// the turn-on latency plus five charge time constants (so the capacitor
    /// is charged to within 1 % of its target whatever the stage file says);
    /// the pass windows of the hold and of the turn-on latency are the
    /// model's corner extremes widened by [`widen`] (`guard_ppm`, one tick
    /// of timer quantisation and one poll on each side); timeouts leave
    /// room for a hold 16 times the window's maximum, so that a capacitor a
    /// decade too large reads as a long hold, not a stuck output.
    ///
    /// # Errors
    /// The model's errors for a clock outside 1 kHz – 200 MHz.
    pub fn from_window(
        nominal: &Evaluation,
        window: &Window,
        press: Span,
        clock_hz: u32,
        guard_ppm: u32,
        poll_ns: u32,
    ) -> Result<Config, ModelError> {
        let min = ticks(window.min, clock_hz)?;
        let max = ticks(window.max, clock_hz)?;
        let latency = ticks(nominal.on_latency, clock_hz)?;
        let (on_min, on_max) = (ticks(window.on_min, clock_hz)?, ticks(window.on_max, clock_hz)?);
        let full_charge = ticks(nominal.charge_tau, clock_hz)?.saturating_mul(5).saturating_add(latency);
        let press_ticks = ticks(press, clock_hz)?.max(full_charge);
        let poll_ticks = poll_ticks(poll_ns, clock_hz);
        let (hold_min_ticks, hold_max_ticks) = widen(min, max, guard_ppm, poll_ticks);
        let on_timeout_ticks = (latency.saturating_mul(10)).max(press_ticks / 2).min(press_ticks).max(1);
        let on_poll_ns = on_poll_ns(nominal.on_latency.ns(), poll_ns, clock_hz);
        let (on_min_ticks, on_max_ticks) = widen(on_min, on_max, guard_ppm, self::poll_ticks(on_poll_ns, clock_hz));
        Ok(Config {
            clock_hz,
            settle_ticks: (max / 20).max(4 * poll_ticks).max(1),
            press_ticks,
            glitch_ticks: (4 * poll_ticks).max(1).min(min / 50 + 1),
            poll_ns,
            on_timeout_ticks,
            hold_min_ticks,
            hold_max_ticks,
            hold_timeout_ticks: max.saturating_mul(16).max(1),
            chatter_limit: 8,
            on_min_ticks,
            on_max_ticks: on_max_ticks.min(on_timeout_ticks),
            on_nominal_ticks: latency,
            on_poll_ns,
        })
    }

    /// Settings straight from a model and its window.
    ///
    /// # Errors
    /// As [`Config::from_window`], and the model's evaluation errors.
    pub fn from_model(
        model: &Model,
        window: &Window,
        clock_hz: u32,
        guard_ppm: u32,
        poll_ns: u32,
    ) -> Result<Config, ModelError> {
        let e = model.evaluate()?;
        let press = Span::from_ns(model.stage().press_ns);
        Config::from_window(&e, window, press, clock_hz, guard_ppm, poll_ns)
    }
}

impl Config {
    /// A measured turn-on latency with the nominal one, ticks, for the
    /// diagnosis (`Hint::from_times`); `None` when the nominal latency is
    /// unknown or under ten turn-on polls (plus a tick) long, too coarse to
    /// tell parts apart. Compared by multiplication: `nominal · 10⁹ ≥
    /// 10 · (on_poll_ns · clock_hz + 10⁹)`, no division on the chip.
    #[must_use]
    pub fn on_reading(&self, on_ticks: u64) -> Option<(u64, u64)> {
        let nominal = self.on_nominal_ticks;
        let needed =
            (u64::from(self.on_poll_ns) * u64::from(self.clock_hz)).saturating_add(1_000_000_000).saturating_mul(10);
        (nominal > 0 && nominal.saturating_mul(1_000_000_000) >= needed).then_some((on_ticks, nominal))
    }

    /// Ticks as a model span.
    ///
    /// # Errors
    /// [`ModelError::OutOfDomain`] for a clock outside 1 kHz – 200 MHz.
    pub fn span(&self, ticks: u64) -> Result<Span, ModelError> {
        Span::from_ticks(ticks, self.clock_hz)
    }
}

/// Length of a settings blob, bytes: 8 of header, 96 of [`Config`], the
/// prepared stage, 4 of CRC.
pub const BLOB_LEN: usize = 8 + CONFIG_LEN + PREPARED_LEN + 4;
const CONFIG_LEN: usize = 96;
const BLOB_MAGIC: [u8; 4] = *b"RCHW";
/// Version 2 added the prepared stage, version 3 the turn-on latency
/// window; older blobs are refused (by version, whatever their length).
const BLOB_VERSION: u8 = 3;

/// Why a settings blob was refused.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum BlobError {
    /// Not [`BLOB_LEN`] bytes.
    Length,
    /// Not a settings blob (wrong magic).
    Magic,
    /// A version this firmware does not know.
    Version,
    /// The CRC does not match: the blob is corrupted.
    Crc,
    /// The settings contradict each other (e.g. a window whose minimum exceeds
    /// its maximum, or a prepared stage for another clock).
    Invalid,
}

impl core::fmt::Display for BlobError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        f.write_str(match self {
            BlobError::Length => "wrong length",
            BlobError::Magic => "not a settings blob",
            BlobError::Version => "unknown version",
            BlobError::Crc => "CRC mismatch",
            BlobError::Invalid => "contradictory settings",
        })
    }
}

impl core::error::Error for BlobError {}

/// Which of a stage file's windows a setup carries.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum WindowKind {
    /// Not said (a window set by hand).
    Unstated,
    /// The fixture's: new parts at the fixture's temperature.
    Fixture,
    /// The field's: the product's environment and the aging horizon.
    Field,
}

/// Everything a tester loads at start-up: the engine's timings and the
/// prepared stage it judges holds with (so a field unit needs no solver).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Setup {
    /// Timings, ticks.
    pub config: Config,
    /// The stage, prepared for the same clock.
    pub stage: Prepared,
    /// Which window the timings judge by.
    pub window: WindowKind,
}

impl Setup {
    /// The settings as a blob to store in flash or send to a fixture:
    /// "RCHW", version 3, the window kind (0 unstated, 1 fixture, 2 field),
    /// two reserved bytes; the [`Config`] fields
    /// little-endian in declaration order (clock u32, settle u64, press u64,
    /// glitch u64, poll u32, turn-on timeout u64, hold min u64, hold max u64,
    /// hold timeout u64, chatter limit u16) and two reserved bytes, then
    /// turn-on min u64, turn-on max u64, nominal turn-on u64, turn-on poll
    /// u32; the
    /// prepared stage ([`Prepared::to_bytes`]); CRC-32/ISO-HDLC of all before it.
    #[must_use]
    pub fn to_blob(&self) -> [u8; BLOB_LEN] {
        let c = &self.config;
        let mut b = [0u8; BLOB_LEN];
        let mut at = 0usize;
        let mut put = |bytes: &[u8]| {
            if let Some(dst) = b.get_mut(at..at + bytes.len()) {
                dst.copy_from_slice(bytes);
            }
            at += bytes.len();
        };
        put(&BLOB_MAGIC);
        let kind = match self.window {
            WindowKind::Unstated => 0,
            WindowKind::Fixture => 1,
            WindowKind::Field => 2,
        };
        put(&[BLOB_VERSION, kind, 0, 0]);
        put(&c.clock_hz.to_le_bytes());
        put(&c.settle_ticks.to_le_bytes());
        put(&c.press_ticks.to_le_bytes());
        put(&c.glitch_ticks.to_le_bytes());
        put(&c.poll_ns.to_le_bytes());
        put(&c.on_timeout_ticks.to_le_bytes());
        put(&c.hold_min_ticks.to_le_bytes());
        put(&c.hold_max_ticks.to_le_bytes());
        put(&c.hold_timeout_ticks.to_le_bytes());
        put(&c.chatter_limit.to_le_bytes());
        put(&[0, 0]);
        put(&c.on_min_ticks.to_le_bytes());
        put(&c.on_max_ticks.to_le_bytes());
        put(&c.on_nominal_ticks.to_le_bytes());
        put(&c.on_poll_ns.to_le_bytes());
        put(&self.stage.to_bytes());
        let crc = crate::crc32::checksum(b.get(..BLOB_LEN - 4).unwrap_or(&[]));
        if let Some(dst) = b.get_mut(BLOB_LEN - 4..) {
            dst.copy_from_slice(&crc.to_le_bytes());
        }
        b
    }

    /// Loads settings from a blob made by [`Setup::to_blob`] (or `rchold window --emit bin`).
    ///
    /// # Errors
    /// [`BlobError`] for a wrong length, magic or version, a CRC mismatch, or
    /// contradictory settings.
    pub fn from_blob(blob: &[u8]) -> Result<Setup, BlobError> {
        if blob.get(..4) != Some(&BLOB_MAGIC[..]) {
            return Err(if blob.len() < 4 { BlobError::Length } else { BlobError::Magic });
        }
        if blob.get(4) != Some(&BLOB_VERSION) {
            return Err(if blob.len() < 5 { BlobError::Length } else { BlobError::Version });
        }
        if blob.len() != BLOB_LEN {
            return Err(BlobError::Length);
        }
        let body = blob.get(..BLOB_LEN - 4).ok_or(BlobError::Length)?;
        let crc = blob.get(BLOB_LEN - 4..).and_then(|c| <[u8; 4]>::try_from(c).ok()).ok_or(BlobError::Length)?;
        if crate::crc32::checksum(body) != u32::from_le_bytes(crc) {
            return Err(BlobError::Crc);
        }
        let mut at = 8usize;
        let mut take = |n: usize| -> Result<&[u8], BlobError> {
            let s = blob.get(at..at + n).ok_or(BlobError::Length)?;
            at += n;
            Ok(s)
        };
        let u32_ = |s: &[u8]| s.try_into().map(u32::from_le_bytes).map_err(|_| BlobError::Length);
        let u64_ = |s: &[u8]| s.try_into().map(u64::from_le_bytes).map_err(|_| BlobError::Length);
        let (clock_hz, settle_ticks, press_ticks, glitch_ticks) =
            (u32_(take(4)?)?, u64_(take(8)?)?, u64_(take(8)?)?, u64_(take(8)?)?);
        let (poll_ns, on_timeout_ticks) = (u32_(take(4)?)?, u64_(take(8)?)?);
        let (hold_min_ticks, hold_max_ticks, hold_timeout_ticks) = (u64_(take(8)?)?, u64_(take(8)?)?, u64_(take(8)?)?);
        let chatter_limit = take(2)?.try_into().map(u16::from_le_bytes).map_err(|_| BlobError::Length)?;
        take(2)?;
        let c = Config {
            clock_hz,
            settle_ticks,
            press_ticks,
            glitch_ticks,
            poll_ns,
            on_timeout_ticks,
            hold_min_ticks,
            hold_max_ticks,
            hold_timeout_ticks,
            chatter_limit,
            on_min_ticks: u64_(take(8)?)?,
            on_max_ticks: u64_(take(8)?)?,
            on_nominal_ticks: u64_(take(8)?)?,
            on_poll_ns: u32_(take(4)?)?,
        };
        let stage = Prepared::from_bytes(take(PREPARED_LEN)?).map_err(|_| BlobError::Invalid)?;
        let window = match blob.get(5) {
            Some(0) => WindowKind::Unstated,
            Some(1) => WindowKind::Fixture,
            Some(2) => WindowKind::Field,
            _ => return Err(BlobError::Invalid),
        };
        if rc_model::check_clock(c.clock_hz).is_err()
            || c.hold_min_ticks > c.hold_max_ticks
            || c.hold_max_ticks > c.hold_timeout_ticks
            || c.press_ticks == 0
            || c.on_timeout_ticks > c.press_ticks
            || c.on_min_ticks > c.on_max_ticks
            || c.on_max_ticks > c.on_timeout_ticks
            || c.on_poll_ns > c.poll_ns
            || stage.clock_hz() != c.clock_hz
        {
            return Err(BlobError::Invalid);
        }
        Ok(Setup { config: c, stage, window })
    }
}

#[cfg(all(test, feature = "solver"))]
mod tests {
    use super::*;
    use rc_model::window::Spread;
    use rc_model::{Diode, Stage};

    fn stage() -> Prepared {
        let s = Stage {
            vdd_uv: 5_000_000,
            r_mohm: 1_000_000_000,
            c_ff: 1_000_000_000,
            series_mohm: 0,
            charge_mohm: 0,
            driver_mohm: 0,
            leak_mohm: None,
            leak_fa: 0,
            diode: Diode::Drop { drop_uv: 600_000 },
            rise_uv: 2_500_000,
            fall_uv: 2_500_000,
            press_ns: 100_000_000,
            temp_mdeg_c: 25_000,
        };
        Prepared::prepare(&s, &Spread::default(), 1_000_000).unwrap_or_else(|e| panic!("{e}"))
    }

    fn sample() -> Setup {
        Setup {
            config: Config {
                clock_hz: 1_000_000,
                settle_ticks: 50_000,
                press_ticks: 100_000,
                glitch_ticks: 400,
                poll_ns: 100_000,
                on_timeout_ticks: 50_000,
                hold_min_ticks: 500_000,
                hold_max_ticks: 1_250_000,
                hold_timeout_ticks: 20_000_000,
                chatter_limit: 8,
                on_min_ticks: 0,
                on_max_ticks: 1_200,
                on_nominal_ticks: 700,
                on_poll_ns: 10_000,
            },
            stage: stage(),
            window: WindowKind::Field,
        }
    }

    #[test]
    fn blob_round_trips() {
        let c = sample();
        assert_eq!(Setup::from_blob(&c.to_blob()), Ok(c));
    }

    #[test]
    fn corrupted_blobs_are_refused() {
        let b = sample().to_blob();
        for i in 0..BLOB_LEN {
            for bit in 0..8 {
                let mut x = b;
                if let Some(byte) = x.get_mut(i) {
                    *byte ^= 1 << bit;
                }
                assert!(Setup::from_blob(&x).is_err(), "byte {i} bit {bit}");
            }
        }
        assert_eq!(Setup::from_blob(&b[..BLOB_LEN - 1]), Err(BlobError::Length));
        let mut wrong = sample();
        wrong.config.hold_min_ticks = wrong.config.hold_max_ticks + 1;
        assert_eq!(Setup::from_blob(&wrong.to_blob()), Err(BlobError::Invalid));
        let mut other_clock = sample();
        other_clock.config.clock_hz = 2_000_000;
        assert_eq!(Setup::from_blob(&other_clock.to_blob()), Err(BlobError::Invalid));
    }

    /// Version 1 (80 bytes, no prepared stage) and version 2 blobs (no
    /// latency window) are refused by version, at their own length or ours.
    #[test]
    fn older_blobs_are_refused_by_version() {
        for version in [1u8, 2] {
            let mut old = sample().to_blob();
            old[4] = version;
            assert_eq!(Setup::from_blob(&old), Err(BlobError::Version));
            assert_eq!(Setup::from_blob(&old[..80]), Err(BlobError::Version));
        }
        assert_eq!(Setup::from_blob(b"RCH"), Err(BlobError::Length));
        let mut wrong = sample();
        wrong.config.on_min_ticks = wrong.config.on_max_ticks + 1;
        assert_eq!(Setup::from_blob(&wrong.to_blob()), Err(BlobError::Invalid));
    }
}
