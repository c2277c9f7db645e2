//! A simulated hold stage behind embedded-hal pins, on a virtual clock.
//!
//! The twin integrates the circuit's differential equation — the capacitor
//! charged through the driver resistance and a Shockley (or fixed-drop)
//! diode, discharged by R, the leakage resistance, a constant leakage current
//! and, for a junction, the diode's own reverse current `Is·(1 − e^(−V/nV_T))`
//! — not the closed form. Steps are exponential Euler (stable for stiff
//! stages such as an open capacitor) with each step's voltage change kept
//! under 2 mV. The second inverter is a comparator with the stage's rising and
//! falling thresholds plus optional noise. Faults and trigger bounce can be
//! injected.
//!
//! Limits: the resistance in series with C is taken as zero.

use std::cell::RefCell;
use std::convert::Infallible;
use std::rc::Rc;

use embedded_hal::delay::DelayNs;
use embedded_hal::digital::{ErrorType, InputPin, OutputPin};
use hold_firmware::TickSource;
use rand::{Rng, SeedableRng};
use rand_xoshiro::Xoshiro256PlusPlus;
use rc_model::Stage;

use crate::reference::{DiodeF, StageF, K_OVER_Q};

/// A fault or disturbance to inject.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Fault {
    /// The capacitor is open (1 pF of stray capacitance remains).
    OpenCapacitor,
    /// The capacitor is `factor` times its value (a wrong part).
    CapacitorTimes(f64),
    /// The capacitor is shorted (1 Ω across the node).
    ShortedCapacitor,
    /// The capacitor leaks: `ohms` across it.
    LeakyCapacitor(f64),
    /// The discharge resistor is open (1 TΩ of board leakage remains).
    OpenResistor,
    /// The diode is open.
    OpenDiode,
    /// The trigger contact bounces for `seconds` after each edge, every `period` seconds.
    BouncingTrigger {
        /// How long the bounce lasts, s.
        seconds: f64,
        /// Bounce period, s.
        period: f64,
    },
    /// Noise of `volts` (uniform ±) on the node as the output comparator sees it.
    NoisyOutput(f64),
    /// The driver's supply sags to `fraction` of nominal while pressed.
    SupplyDroop(f64),
    /// A resistor of `ohms` in the charge path (a wrong part where a 0 Ω link
    /// or a small resistor belongs).
    ChargeResistance(f64),
}

/// The plant state shared by the pin handles.
#[derive(Debug)]
pub struct Plant {
    p: StageF,
    n_vt: f64,
    is: f64,
    faults: Vec<Fault>,
    clock_hz: u32,
    t: f64,
    v: f64,
    pressed: bool,
    edge_t: f64,
    active: bool,
    noise: f64,
    rng: Xoshiro256PlusPlus,
}

impl Plant {
    fn new(stage: &Stage, faults: &[Fault], clock_hz: u32, seed: u64) -> Plant {
        let mut p = StageF::from(stage);
        let mut noise = 0.0;
        for f in faults {
            match *f {
                Fault::OpenCapacitor => p.c = 1e-12,
                Fault::CapacitorTimes(k) => p.c *= k,
                Fault::ShortedCapacitor => p.r_leak = 1.0,
                Fault::LeakyCapacitor(ohms) => p.r_leak = 1.0 / (1.0 / p.r_leak + 1.0 / ohms),
                Fault::OpenResistor => p.r = 1e12,
                Fault::ChargeResistance(ohms) => p.rch = ohms,
                Fault::OpenDiode => {}
                Fault::NoisyOutput(v) => noise = v,
                Fault::BouncingTrigger { .. } | Fault::SupplyDroop(_) => {}
            }
        }
        let (n_vt, is) = match p.diode {
            DiodeF::Junction { is, n, .. } => (n * K_OVER_Q * (p.temp_c + 273.15), is),
            DiodeF::Drop(_) => (0.0, 0.0),
        };
        Plant {
            p,
            n_vt,
            is,
            faults: faults.to_vec(),
            clock_hz,
            t: 0.0,
            v: 0.0,
            pressed: false,
            edge_t: f64::NEG_INFINITY,
            active: false,
            noise,
            rng: Xoshiro256PlusPlus::seed_from_u64(seed),
        }
    }

    fn has(&self, f: impl Fn(&Fault) -> bool) -> bool {
        self.faults.iter().any(f)
    }

    /// Whether the driver output is high at time `t` (trigger pressed, minus bounce).
    fn driving(&self, t: f64) -> bool {
        for f in &self.faults {
            if let Fault::BouncingTrigger { seconds, period } = *f {
                let since = t - self.edge_t;
                if since < seconds && ((since / period) as i64) % 2 == 1 {
                    return !self.pressed;
                }
            }
        }
        self.pressed
    }

    /// Current into the node from the driver and diode at node voltage `v`.
    fn diode_current(&self, v: f64, driving: bool) -> f64 {
        if self.has(|f| matches!(f, Fault::OpenDiode)) {
            return 0.0;
        }
        let droop = self.faults.iter().find_map(|f| if let Fault::SupplyDroop(k) = *f { Some(k) } else { None });
        let vd = if driving { self.p.vdd * droop.unwrap_or(1.0) } else { 0.0 };
        let r_ser = self.p.ro + self.p.rch + if let DiodeF::Junction { rs, .. } = self.p.diode { rs } else { 0.0 };
        match self.p.diode {
            DiodeF::Drop(vf) => ((vd - vf - v) / r_ser.max(1e-3)).max(0.0),
            DiodeF::Junction { .. } => {
                let across = vd - v;
                if across <= 0.0 {
                    // Reverse: the saturation current leaks out of the node.
                    return -self.is * (1.0 - (across / self.n_vt).exp()).min(1.0);
                }
                // Forward with series resistance: I·r + nV_T·ln(1 + I/Is) = across (Newton, bracketed).
                let (mut lo, mut hi) = (0.0f64, across / r_ser.max(1e-6));
                let mut i = hi.min(self.is * ((across / self.n_vt).min(700.0).exp() - 1.0)).max(0.0);
                for _ in 0..100 {
                    let f = i * r_ser + self.n_vt * (i / self.is).ln_1p() - across;
                    if f > 0.0 {
                        hi = i;
                    } else {
                        lo = i;
                    }
                    let next = i - f / (r_ser + self.n_vt / (i + self.is));
                    let next = if next <= lo || next >= hi { 0.5 * (lo + hi) } else { next };
                    if (next - i).abs() <= 1e-15 * next.abs() + 1e-30 {
                        return next;
                    }
                    i = next;
                }
                i
            }
        }
    }

    fn dvdt(&self, v: f64, driving: bool) -> f64 {
        let r_eff = 1.0 / (1.0 / self.p.r + 1.0 / self.p.r_leak);
        (self.diode_current(v, driving) - v / r_eff - self.p.i_in) / self.p.c
    }

    /// Advances the plant by `dt` seconds.
    pub fn advance(&mut self, dt: f64) {
        let end = self.t + dt;
        while self.t < end {
            let driving = self.driving(self.t);
            let f = self.dvdt(self.v, driving);
            let dv = 1e-6;
            let j = (self.dvdt(self.v + dv, driving) - f) / dv;
            // Step: no further than the next bounce edge, the end, or a 2 mV change.
            let mut h = end - self.t;
            if f != 0.0 {
                h = h.min(2e-3 / f.abs());
            }
            for fl in &self.faults {
                if let Fault::BouncingTrigger { period, .. } = *fl {
                    h = h.min(period / 4.0);
                }
            }
            h = h.max(1e-12);
            let step = if (j * h).abs() < 1e-9 { f * h } else { f * ((j * h).exp_m1() / j) };
            self.v = (self.v + step).max(-0.7);
            self.t += h;
        }
    }

    /// The output comparator: active-low output, true when the stage holds.
    fn output_active(&mut self) -> bool {
        let n = if self.noise > 0.0 { self.rng.random_range(-self.noise..=self.noise) } else { 0.0 };
        let seen = self.v + n;
        if !self.active && seen > self.p.rise {
            self.active = true;
        } else if self.active && seen < self.p.fall {
            self.active = false;
        }
        self.active
    }

    /// Capacitor (node) voltage now, V.
    #[must_use]
    pub fn node_v(&self) -> f64 {
        self.v
    }

    /// Virtual time now, s.
    #[must_use]
    pub fn time_s(&self) -> f64 {
        self.t
    }
}

/// A twin: one plant and its four handles.
#[derive(Debug, Clone)]
pub struct Twin {
    plant: Rc<RefCell<Plant>>,
}

/// The trigger input of the stage (an [`OutputPin`] of the tester; low = pressed).
#[derive(Debug)]
pub struct TriggerPin(Rc<RefCell<Plant>>);
/// The stage output (an [`InputPin`] of the tester; low = active).
#[derive(Debug)]
pub struct StageOutput(Rc<RefCell<Plant>>);
/// A delay that advances the virtual clock.
#[derive(Debug)]
pub struct VirtualDelay(Rc<RefCell<Plant>>);
/// The virtual tick counter.
#[derive(Debug)]
pub struct VirtualClock(Rc<RefCell<Plant>>);

impl Twin {
    /// A twin of `stage` with `faults`, its clock at `clock_hz`, noise from `seed`.
    #[must_use]
    pub fn new(stage: &Stage, faults: &[Fault], clock_hz: u32, seed: u64) -> Twin {
        Twin { plant: Rc::new(RefCell::new(Plant::new(stage, faults, clock_hz, seed))) }
    }

    /// The four handles a tester takes.
    #[must_use]
    pub fn handles(&self) -> (TriggerPin, StageOutput, VirtualDelay, VirtualClock) {
        (
            TriggerPin(self.plant.clone()),
            StageOutput(self.plant.clone()),
            VirtualDelay(self.plant.clone()),
            VirtualClock(self.plant.clone()),
        )
    }

    /// Node voltage now, V.
    #[must_use]
    pub fn node_v(&self) -> f64 {
        self.plant.borrow().node_v()
    }

    /// Virtual time now, s.
    #[must_use]
    pub fn time_s(&self) -> f64 {
        self.plant.borrow().time_s()
    }

    /// Lets `seconds` pass.
    pub fn wait(&self, seconds: f64) {
        self.plant.borrow_mut().advance(seconds);
    }
}

impl ErrorType for TriggerPin {
    type Error = Infallible;
}
impl OutputPin for TriggerPin {
    fn set_low(&mut self) -> Result<(), Infallible> {
        let mut p = self.0.borrow_mut();
        if !p.pressed {
            p.pressed = true;
            p.edge_t = p.t;
        }
        Ok(())
    }
    fn set_high(&mut self) -> Result<(), Infallible> {
        let mut p = self.0.borrow_mut();
        if p.pressed {
            p.pressed = false;
            p.edge_t = p.t;
        }
        Ok(())
    }
}

impl ErrorType for StageOutput {
    type Error = Infallible;
}
impl InputPin for StageOutput {
    fn is_high(&mut self) -> Result<bool, Infallible> {
        Ok(!self.0.borrow_mut().output_active())
    }
    fn is_low(&mut self) -> Result<bool, Infallible> {
        Ok(self.0.borrow_mut().output_active())
    }
}

impl DelayNs for VirtualDelay {
    fn delay_ns(&mut self, ns: u32) {
        self.0.borrow_mut().advance(f64::from(ns) * 1e-9);
    }
}

/// Virtual time one poll of an async wait or delay lets pass, s.
const ASYNC_STEP_S: f64 = 10e-6;

impl embedded_hal_async::digital::Wait for StageOutput {
    async fn wait_for_high(&mut self) -> Result<(), Infallible> {
        self.wait_for(false).await;
        Ok(())
    }
    async fn wait_for_low(&mut self) -> Result<(), Infallible> {
        self.wait_for(true).await;
        Ok(())
    }
    async fn wait_for_rising_edge(&mut self) -> Result<(), Infallible> {
        self.wait_for(true).await;
        self.wait_for(false).await;
        Ok(())
    }
    async fn wait_for_falling_edge(&mut self) -> Result<(), Infallible> {
        self.wait_for(false).await;
        self.wait_for(true).await;
        Ok(())
    }
    async fn wait_for_any_edge(&mut self) -> Result<(), Infallible> {
        let now = self.0.borrow_mut().output_active();
        self.wait_for(!now).await;
        Ok(())
    }
}

impl StageOutput {
    /// Resolves when the output is `active`; each poll lets one step of virtual time pass.
    async fn wait_for(&mut self, active: bool) {
        core::future::poll_fn(|cx| {
            let mut p = self.0.borrow_mut();
            if p.output_active() == active {
                return core::task::Poll::Ready(());
            }
            p.advance(ASYNC_STEP_S);
            if p.output_active() == active {
                return core::task::Poll::Ready(());
            }
            cx.waker().wake_by_ref();
            core::task::Poll::Pending
        })
        .await;
    }
}

impl embedded_hal_async::delay::DelayNs for VirtualDelay {
    /// Resolves once `ns` of virtual time has passed; each poll lets one step pass.
    async fn delay_ns(&mut self, ns: u32) {
        let deadline = self.0.borrow().t + f64::from(ns) * 1e-9;
        core::future::poll_fn(|cx| {
            let mut p = self.0.borrow_mut();
            if p.t >= deadline {
                return core::task::Poll::Ready(());
            }
            let step = ASYNC_STEP_S.min(deadline - p.t);
            p.advance(step);
            if p.t >= deadline {
                return core::task::Poll::Ready(());
            }
            cx.waker().wake_by_ref();
            core::task::Poll::Pending
        })
        .await;
    }
}

/// Runs a future to completion on this thread (the twin's futures never block).
pub fn block_on<F: core::future::Future>(f: F) -> F::Output {
    let mut f = core::pin::pin!(f);
    let mut cx = core::task::Context::from_waker(core::task::Waker::noop());
    loop {
        if let core::task::Poll::Ready(v) = f.as_mut().poll(&mut cx) {
            return v;
        }
    }
}

impl TickSource for VirtualClock {
    fn now(&mut self) -> u32 {
        let p = self.0.borrow();
        // Wrapping at 2^32 like a hardware counter.
        ((p.t * f64::from(p.clock_hz)) as u64 & 0xFFFF_FFFF) as u32
    }
    fn clock_hz(&self) -> u32 {
        self.0.borrow().clock_hz
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use embedded_hal::digital::OutputPin;

    #[test]
    fn the_twin_charges_to_the_models_target_and_an_open_capacitor_does_not_hold() {
        let sf = crate::testing::example();
        let twin = Twin::new(&sf.stage, &[], 1_000_000, 1);
        let (mut trigger, _, _, _) = twin.handles();
        let _ = trigger.set_low();
        twin.wait(0.1);
        // The model's charge target: 5 V less the 0.6 V drop (4.400 V).
        assert!((twin.node_v() - 4.4).abs() < 0.01, "{}", twin.node_v());
        let _ = trigger.set_high();
        twin.wait(0.7396);
        assert!((twin.node_v() - 2.1).abs() < 0.01, "at the hold's end: {}", twin.node_v());
        let open = Twin::new(&sf.stage, &[Fault::OpenCapacitor], 1_000_000, 1);
        let (mut t, _, _, _) = open.handles();
        let _ = t.set_low();
        open.wait(0.1);
        let _ = t.set_high();
        open.wait(0.01);
        assert!(open.node_v() < 0.5, "{}", open.node_v());
    }
}
