//! Glue for running the tester on the emulated mps2-an385 board: semihosting
//! output and exit status, the instruction-count markers, the board's UART,
//! and stack painting. The only `unsafe` code is here, at the hardware
//! boundary (memory-mapped registers and the stack's raw memory), each with
//! its reason; the model and the firmware crates forbid it.
#![no_std]
#![deny(missing_docs)]

pub use hold_sim::plant;

use core::convert::Infallible;
use core::sync::atomic::{AtomicBool, AtomicU32, Ordering};

use cortex_m_semihosting::debug::{self, EXIT_FAILURE, EXIT_SUCCESS};
use cortex_m_semihosting::hio;
use embedded_hal::delay::DelayNs;
use embedded_hal::digital::{ErrorType, InputPin, OutputPin};
use hold_firmware::drift::{DriftConfig, DriftTracker};
use hold_firmware::record::{self, Record};
use hold_firmware::{Setup, Tester, TickSource};

/// Ends the emulation with success or failure as QEMU's exit status.
pub fn exit(ok: bool) -> ! {
    debug::exit(if ok { EXIT_SUCCESS } else { EXIT_FAILURE });
    // debug::exit returns only when no debugger is attached (real hardware).
    loop {
        cortex_m::asm::wfi();
    }
}

/// Writes bytes to the host's standard output through semihosting.
pub fn print(bytes: &[u8]) {
    if let Ok(mut out) = hio::hstdout() {
        let _ = out.write_all(bytes);
    }
}

/// A line of text and a number, through semihosting: `label value\n`.
pub fn print_value(label: &str, value: u32) {
    let mut buf = [0u8; 10];
    print(label.as_bytes());
    print(b" ");
    print(decimal(value, &mut buf));
    print(b"\n");
}

/// `value` in decimal, written into `buf`; returns the digits. No
/// formatting machinery, no panic path and no division (on ARMv6-M even a
/// division by 10 calls the library routine): each digit by subtracting its
/// power of ten.
pub fn decimal(value: u32, buf: &mut [u8; 10]) -> &[u8] {
    const POWERS: [u32; 10] = [1_000_000_000, 100_000_000, 10_000_000, 1_000_000, 100_000, 10_000, 1_000, 100, 10, 1];
    let (mut rest, mut len) = (value, 0usize);
    for p in POWERS {
        let mut digit = 0u8;
        while rest >= p {
            rest -= p;
            digit += 1;
        }
        if digit != 0 || len != 0 || p == 1 {
            if let Some(slot) = buf.get_mut(len) {
                *slot = b'0' + digit;
            }
            len += 1;
        }
    }
    buf.get(..len).unwrap_or(&[])
}

/// The last marker passed; exported so that the optimiser cannot drop the
/// markers' stores (a private static nothing reads would let it).
#[no_mangle]
pub static BENCH_MARK: AtomicU32 = AtomicU32::new(0);

/// Start of a counted span: the instruction-count plugin
/// (`../shared/tools/qemu-insn-count`) takes a snapshot when this runs.
#[no_mangle]
#[inline(never)]
pub extern "C" fn bench_start(id: u32) {
    BENCH_MARK.store(core::hint::black_box(id), Ordering::Relaxed);
}

/// End of a counted span: the plugin prints the instructions since
/// [`bench_start`] (including a few of call overhead, measured by an empty span).
#[no_mangle]
#[inline(never)]
pub extern "C" fn bench_end(id: u32) {
    BENCH_MARK.store(core::hint::black_box(id) | 0x8000_0000, Ordering::Relaxed);
}

/// The mps2-an385's UART0 (CMSDK APB UART), transmit only.
pub struct Uart0 {
    _private: (),
}

const UART0: usize = 0x4000_4000;
const UART_DATA: usize = UART0;
const UART_STATE: usize = UART0 + 0x04;
const UART_CTRL: usize = UART0 + 0x08;
const UART_BAUDDIV: usize = UART0 + 0x10;

impl Uart0 {
    /// Enables the transmitter (baud divider 16, as the board's notes give).
    pub fn new() -> Uart0 {
        // SAFETY: fixed MMIO addresses of the mps2-an385's UART0; these
        // registers have no memory-safety effect and nothing else drives them.
        #[allow(unsafe_code)]
        unsafe {
            core::ptr::write_volatile(UART_BAUDDIV as *mut u32, 16);
            core::ptr::write_volatile(UART_CTRL as *mut u32, 1);
        }
        Uart0 { _private: () }
    }

    /// Sends bytes, waiting while the transmit buffer is full.
    pub fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            // SAFETY: as in `new`: the UART's state and data registers.
            #[allow(unsafe_code)]
            unsafe {
                while core::ptr::read_volatile(UART_STATE as *const u32) & 1 != 0 {}
                core::ptr::write_volatile(UART_DATA as *mut u32, u32::from(b));
            }
        }
    }
}

impl Default for Uart0 {
    fn default() -> Self {
        Uart0::new()
    }
}

/// The pattern painted over the free stack.
const PAINT: u32 = 0xC5AC_CE55;

extern "C" {
    static mut __ebss: u32;
    static _stack_start: u32;
}

/// Paints the stack between the end of `.bss` and 256 bytes below the
/// current stack pointer with a pattern, so that [`stack_used`] can find the
/// deepest word any later code wrote. Call first thing in `main`.
pub fn paint_stack() {
    let sp = cortex_m::register::msp::read() as usize;
    // SAFETY: the words from the end of .bss up to 256 bytes below the live
    // stack pointer belong to no object: cortex-m-rt puts the stack at the
    // top of RAM growing down towards .bss, and nothing below the current
    // frame is in use yet.
    #[allow(unsafe_code)]
    unsafe {
        let mut p = core::ptr::addr_of_mut!(__ebss);
        let end = (sp - 256) as *mut u32;
        while p < end {
            core::ptr::write_volatile(p, PAINT);
            p = p.add(1);
        }
    }
}

/// The deepest stack use since [`paint_stack`], bytes from the top of the stack.
pub fn stack_used() -> u32 {
    // SAFETY: reads the words painted by `paint_stack` (or written by the
    // stack since), all inside RAM between .bss and the stack's top.
    #[allow(unsafe_code)]
    unsafe {
        let top = core::ptr::addr_of!(_stack_start) as usize;
        let mut p: *const u32 = core::ptr::addr_of!(__ebss);
        while (p as usize) < top && core::ptr::read_volatile(p) == PAINT {
            p = p.add(1);
        }
        (top - p as usize) as u32
    }
}

/// The simulated stage: the tick of the last press and release, whether the
/// trigger is held, and the hold it gives after this release, ticks.
static TICKS: AtomicU32 = AtomicU32::new(0);
static PRESSED: AtomicBool = AtomicBool::new(false);
static PRESS_AT: AtomicU32 = AtomicU32::new(0);
static RELEASE_AT: AtomicU32 = AtomicU32::new(0);
static HOLD: AtomicU32 = AtomicU32::new(0);
/// Ticks from the press until the output turns on.
const LATENCY: u32 = 3;

/// The trigger pin of the simulated stage.
pub struct Trigger;
/// The output pin of the simulated stage.
pub struct Output;
/// The simulated tick counter at a given rate, Hz.
pub struct Clock(pub u32);
/// A delay that returns at once (each tick read advances time).
pub struct Delay;

impl ErrorType for Trigger {
    type Error = Infallible;
}
impl OutputPin for Trigger {
    fn set_low(&mut self) -> Result<(), Infallible> {
        // Load and store: ARMv6-M has no atomic read-modify-write, and only
        // the main loop touches these.
        if !PRESSED.load(Ordering::Relaxed) {
            PRESSED.store(true, Ordering::Relaxed);
            PRESS_AT.store(TICKS.load(Ordering::Relaxed), Ordering::Relaxed);
        }
        Ok(())
    }
    fn set_high(&mut self) -> Result<(), Infallible> {
        if PRESSED.load(Ordering::Relaxed) {
            PRESSED.store(false, Ordering::Relaxed);
            RELEASE_AT.store(TICKS.load(Ordering::Relaxed), Ordering::Relaxed);
        }
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
    /// Active (low) from `LATENCY` ticks into a press until the hold after its release ends.
    fn is_low(&mut self) -> Result<bool, Infallible> {
        let now = TICKS.load(Ordering::Relaxed);
        Ok(if PRESSED.load(Ordering::Relaxed) {
            now.wrapping_sub(PRESS_AT.load(Ordering::Relaxed)) >= LATENCY
        } else {
            let since = now.wrapping_sub(RELEASE_AT.load(Ordering::Relaxed));
            RELEASE_AT.load(Ordering::Relaxed) != 0 && since < HOLD.load(Ordering::Relaxed)
        })
    }
}
impl TickSource for Clock {
    /// Each read advances the simulated time by one tick.
    fn now(&mut self) -> u32 {
        let t = TICKS.load(Ordering::Relaxed);
        TICKS.store(t.wrapping_add(1), Ordering::Relaxed);
        t
    }
    fn clock_hz(&self) -> u32 {
        self.0
    }
}
impl DelayNs for Delay {
    fn delay_ns(&mut self, _ns: u32) {}
}

/// Measures a simulated stage five times with the tester a field unit runs:
/// the capacitor loses 3.1 % per measurement while the temperature walks the
/// prepared range; each record goes out of UART0 as a frame; then one text
/// line gives the records sent and the deepest stack use, and the emulation
/// ends (success if all five records were sent). Free of panic paths: the
/// field tester links it under a panic handler that does not exist.
pub fn run_field(setup: &Setup) -> ! {
    let clock_hz = setup.config.clock_hz;
    let mut tester = Tester::new(Trigger, Output, Delay, Clock(clock_hz), setup.config, setup.stage);
    let stage = tester.stage();
    // In u32 (ticks of a slow clock): a 64-bit division would link its routine.
    let nominal = u32::try_from(stage.hold_ticks_at(stage.ref_mdeg_c()).unwrap_or(0)).unwrap_or(u32::MAX);
    let (lo, hi) = stage.temp_range_mdeg_c();
    let mut uart = Uart0::new();
    let mut tracker: DriftTracker<64> = DriftTracker::new(DriftConfig {
        baseline_count: 2,
        lambda_q16: 13_107,
        l_milli: 3_000,
        sigma: Some(2_000),
        cusum_k: 1_000,
        cusum_h: 10_000,
        limit: -200_000,
    });
    let mut sent = 0u32;
    for seq in 0..5u32 {
        // 1/32 (3.1 %) shorter per measurement: a shift, since on ARMv6-M even
        // a division by a constant calls the library routine.
        HOLD.store(nominal - (nominal >> 5) * seq, Ordering::Relaxed);
        let temp = lo + (hi - lo) / 4 * seq as i32;
        tester.set_temperature(temp);
        let Ok(m) = tester.measure() else { exit(false) };
        // On a short or long hold the engine inverted it for its hint too; reusing
        // that value costs the field tester 88 bytes of flash (measured) for a path
        // only failing boards take, so the deviation is computed here for every hold.
        let dev = m.hold_ticks.and_then(|h| tester.stage().deviation_ppm_at(h, temp).ok());
        let drift = tracker.update(dev.unwrap_or(0)).state;
        let rec = Record {
            seq,
            unit_id: 0x4B35,
            // The emulated board keeps nothing across a reset: every run is its first boot.
            boot: 1,
            press_ticks: m.press_ticks,
            on_ticks: m.on_ticks,
            hold_ticks: m.hold_ticks,
            clock_hz,
            temp_mdeg_c: Some(temp),
            verdict: m.verdict,
            hint: m.hint,
            drift,
            c_deviation_ppm: dev,
        };
        let mut frame = [0u8; record::FRAME_MAX];
        if let Ok(len) = record::encode_into(&rec, &mut frame) {
            uart.write(frame.get(..len).unwrap_or(&[]));
            sent += 1;
        }
    }
    let _ = tracker.periods_to_limit();
    // The report: after the last frame delimiter, one text line.
    let mut digits = [0u8; 10];
    uart.write(b"field-tester records ");
    uart.write(decimal(sent, &mut digits));
    uart.write(b" stack-bytes ");
    uart.write(decimal(stack_used(), &mut digits));
    uart.write(b"\n");
    exit(sent == 5)
}
