//! The hold stage in `f64`, written from the circuit equations independently of
//! the fixed-point model: different unknowns, different solvers, different
//! quadrature. It is the yardstick for `rchold agree`.
//!
//! * Operating points (steady state, threshold crossing, press start) by
//!   bisection on the node voltage — slow but unconditionally convergent.
//! * Junction turn-on latency by adaptive Gauss–Kronrod (7/15) of
//!   `dt = C·N(I)/i_C(I) dI` directly in the diode current.
//! * Junction partial press by a Dormand–Prince 5(4) transient of the charge ODE
//!   `dI/dt = −i_C(I) / (C·N(I))` (the numerical transient).
//! * Everything else in closed form with `ln`/`exp` from the platform libm.

use rc_model::{Diode, Stage};

/// Boltzmann constant over the elementary charge, V/K (both SI-exact).
pub const K_OVER_Q: f64 = 1.380_649e-23 / 1.602_176_634e-19;

/// A stage in SI units (V, Ω, F, A, s, °C).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct StageF {
    /// Supply, V.
    pub vdd: f64,
    /// Discharge resistor, Ω.
    pub r: f64,
    /// Capacitor, F.
    pub c: f64,
    /// Series resistance with C, Ω.
    pub rs: f64,
    /// Charge-limiting resistor, Ω.
    pub rch: f64,
    /// Driver output resistance, Ω.
    pub ro: f64,
    /// Leakage resistance, Ω (`f64::INFINITY` for none).
    pub r_leak: f64,
    /// Input leakage current, A.
    pub i_in: f64,
    /// Diode.
    pub diode: DiodeF,
    /// Rising threshold, V.
    pub rise: f64,
    /// Falling threshold, V.
    pub fall: f64,
    /// Press, s.
    pub press: f64,
    /// Temperature, °C.
    pub temp_c: f64,
}

/// Diode in SI units.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum DiodeF {
    /// Fixed drop, V.
    Drop(f64),
    /// Saturation current (A), ideality, series resistance (Ω).
    Junction {
        /// Saturation current, A.
        is: f64,
        /// Ideality factor.
        n: f64,
        /// Series resistance, Ω.
        rs: f64,
    },
}

impl From<&Stage> for StageF {
    fn from(s: &Stage) -> Self {
        StageF {
            vdd: f64::from(s.vdd_uv) * 1e-6,
            r: s.r_mohm as f64 * 1e-3,
            c: s.c_ff as f64 * 1e-15,
            rs: s.series_mohm as f64 * 1e-3,
            rch: s.charge_mohm as f64 * 1e-3,
            ro: s.driver_mohm as f64 * 1e-3,
            r_leak: s.leak_mohm.map_or(f64::INFINITY, |l| l as f64 * 1e-3),
            i_in: s.leak_fa as f64 * 1e-15,
            diode: match s.diode {
                Diode::Drop { drop_uv } => DiodeF::Drop(f64::from(drop_uv) * 1e-6),
                Diode::Junction { is_fa, n_milli, rs_mohm } => DiodeF::Junction {
                    is: is_fa as f64 * 1e-15,
                    n: f64::from(n_milli) * 1e-3,
                    rs: rs_mohm as f64 * 1e-3,
                },
            },
            rise: f64::from(s.rise_uv) * 1e-6,
            fall: f64::from(s.fall_uv) * 1e-6,
            press: s.press_ns as f64 * 1e-9,
            temp_c: f64::from(s.temp_mdeg_c) * 1e-3,
        }
    }
}

/// What the reference computes (SI units).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EvalF {
    /// V∞, V.
    pub charge_target: f64,
    /// Charge time constant, s.
    pub charge_tau: f64,
    /// Turn-on latency, s.
    pub on_latency: f64,
    /// Capacitor voltage at release, V.
    pub cap_at_release: f64,
    /// Node voltage just after release, V.
    pub node_at_release: f64,
    /// Discharge time constant, s.
    pub discharge_tau: f64,
    /// Hold, s.
    pub hold: f64,
    /// Press − latency + hold, s.
    pub active: f64,
}

/// Why the reference has no answer.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RefError {
    /// The charge target does not exceed the rising threshold.
    NeverActivates,
    /// The press ends before the output activates.
    PressTooShort,
    /// No hold after release.
    NoHold,
}

impl StageF {
    fn r_eff(&self) -> f64 {
        1.0 / (1.0 / self.r + 1.0 / self.r_leak)
    }

    /// Series resistance of the charge path, including the junction's own.
    fn r_path(&self) -> f64 {
        self.ro + self.rch + if let DiodeF::Junction { rs, .. } = self.diode { rs } else { 0.0 }
    }

    fn n_vt(&self) -> f64 {
        match self.diode {
            DiodeF::Junction { n, .. } => n * K_OVER_Q * (self.temp_c + 273.15),
            DiodeF::Drop(_) => 0.0,
        }
    }

    /// Current the diode passes with `v_drop` across diode + charge path.
    /// Solved by bisection on the diode's own voltage.
    fn diode_current(&self, v_drop: f64) -> f64 {
        match self.diode {
            DiodeF::Drop(vf) => ((v_drop - vf) / self.r_path()).max(0.0),
            DiodeF::Junction { is, .. } => {
                if v_drop <= 0.0 {
                    return 0.0;
                }
                let (nvt, rp) = (self.n_vt(), self.r_path());
                // Diode voltage vd ∈ [0, v_drop]: Is·(e^(vd/nvt) − 1) = (v_drop − vd)/rp.
                let (mut lo, mut hi) = (0.0, v_drop);
                for _ in 0..200 {
                    let mid = 0.5 * (lo + hi);
                    if is * (mid / nvt).exp_m1() < (v_drop - mid) / rp {
                        lo = mid;
                    } else {
                        hi = mid;
                    }
                }
                let vd = 0.5 * (lo + hi);
                (v_drop - vd) / rp
            }
        }
    }

    /// Node voltage while a diode current `i` flows (junction).
    pub fn node_at_current(&self, i: f64) -> f64 {
        let is = if let DiodeF::Junction { is, .. } = self.diode { is } else { 1.0 };
        self.vdd - i * self.r_path() - self.n_vt() * (i / is).ln_1p()
    }

    /// Steady state of a full press: node voltage, by bisection on V.
    pub fn charge_target(&self) -> f64 {
        let r_eff = self.r_eff();
        let (mut lo, mut hi) = (0.0, self.vdd);
        for _ in 0..200 {
            let v = 0.5 * (lo + hi);
            // Current the diode can deliver at node voltage v vs what the node draws.
            if self.diode_current(self.vdd - v) > v / r_eff + self.i_in {
                lo = v;
            } else {
                hi = v;
            }
        }
        0.5 * (lo + hi)
    }

    /// Capacitor current at diode current `i`.
    pub fn cap_current(&self, i: f64) -> f64 {
        i - self.i_in - self.node_at_current(i) / self.r_eff()
    }

    /// `dV_C/dI` magnitude.
    pub fn n_of(&self, i: f64) -> f64 {
        let is = if let DiodeF::Junction { is, .. } = self.diode { is } else { 1.0 };
        let r_eff = self.r_eff();
        (self.r_path() + self.n_vt() / (i + is)) * (1.0 + self.rs / r_eff) + self.rs
    }

    /// Capacitor voltage at diode current `i`.
    pub fn cap_at_current(&self, i: f64) -> f64 {
        self.node_at_current(i) - self.rs * self.cap_current(i)
    }

    /// Diode current at which the capacitor voltage is `vc` (bisection; V_C falls with I).
    pub fn current_at_cap(&self, vc: f64, i_inf: f64) -> f64 {
        let hi = i_inf.max(1e-30) * 2.0 + self.vdd / self.r_path().max(1e-3);
        bisect_falling(i_inf, hi, vc, |i| self.cap_at_current(i))
    }

    /// Diode current at which the node voltage is `va` (bisection; V_A falls with I).
    pub fn current_at_node(&self, va: f64) -> f64 {
        bisect_falling(0.0, self.vdd / self.r_path().max(1e-3) + 1.0, va, |i| self.node_at_current(i))
    }
}

/// Adaptive Gauss–Kronrod 7/15 quadrature of `f` on `[a, b]` to relative `tol`.
pub fn integrate<F: Fn(f64) -> f64>(f: &F, a: f64, b: f64, tol: f64) -> f64 {
    // Nodes and weights of the 15-point Kronrod rule (and embedded 7-point Gauss)
    // as tabulated in QUADPACK (Piessens et al., 1983) — typed from memory and
    // verified by the tests: the Kronrod rule integrates x^22 exactly.
    const XGK: [f64; 8] = [
        0.991_455_371_120_812_6,
        0.949_107_912_342_758_5,
        0.864_864_423_359_769_1,
        0.741_531_185_599_394_4,
        0.586_087_235_467_691_1,
        0.405_845_151_377_397_2,
        0.207_784_955_007_898_5,
        0.0,
    ];
    const WGK: [f64; 8] = [
        0.022_935_322_010_529_22,
        0.063_092_092_629_978_55,
        0.104_790_010_322_250_2,
        0.140_653_259_715_525_9,
        0.169_004_726_639_267_9,
        0.190_350_578_064_785_4,
        0.204_432_940_075_298_9,
        0.209_482_141_084_727_8,
    ];
    const WG: [f64; 4] =
        [0.129_484_966_168_869_7, 0.279_705_391_489_276_7, 0.381_830_050_505_118_9, 0.417_959_183_673_469_4];
    fn rule<F: Fn(f64) -> f64>(f: &F, a: f64, b: f64) -> (f64, f64) {
        let c = 0.5 * (a + b);
        let h = 0.5 * (b - a);
        let fc = f(c);
        let mut k = WGK[7] * fc;
        let mut g = WG[3] * fc;
        for j in 0..7 {
            let x = h * XGK[j];
            let s = f(c - x) + f(c + x);
            k += WGK[j] * s;
            if j % 2 == 1 {
                g += WG[j / 2] * s;
            }
        }
        (k * h, (k - g).abs() * h)
    }
    fn go<F: Fn(f64) -> f64>(f: &F, a: f64, b: f64, tol: f64, depth: u32) -> f64 {
        let (k, err) = rule(f, a, b);
        if depth == 0 || err <= tol * k.abs() {
            return k;
        }
        let m = 0.5 * (a + b);
        go(f, a, m, tol, depth - 1) + go(f, m, b, tol, depth - 1)
    }
    go(f, a, b, tol, 40)
}

/// Dormand–Prince 5(4) integration of the junction charge ODE in
/// `D = I − I∞`: `dD/dt = −i_C(I∞ + D)/(C·N(I∞ + D))`, from `d0` for `t_end`.
fn charge_transient(s: &StageF, i_inf: f64, d0: f64, t_end: f64) -> f64 {
    let rhs = |d: f64| {
        let i = i_inf + d;
        -s.cap_current(i) / (s.c * s.n_of(i))
    };
    // Butcher tableau of Dormand & Prince (1980) — typed from memory and
    // verified by the tests (convergence to the closed-form steady state, and
    // the latency integral against the transient).
    const A: [[f64; 6]; 6] = [
        [1.0 / 5.0, 0.0, 0.0, 0.0, 0.0, 0.0],
        [3.0 / 40.0, 9.0 / 40.0, 0.0, 0.0, 0.0, 0.0],
        [44.0 / 45.0, -56.0 / 15.0, 32.0 / 9.0, 0.0, 0.0, 0.0],
        [19372.0 / 6561.0, -25360.0 / 2187.0, 64448.0 / 6561.0, -212.0 / 729.0, 0.0, 0.0],
        [9017.0 / 3168.0, -355.0 / 33.0, 46732.0 / 5247.0, 49.0 / 176.0, -5103.0 / 18656.0, 0.0],
        [35.0 / 384.0, 0.0, 500.0 / 1113.0, 125.0 / 192.0, -2187.0 / 6784.0, 11.0 / 84.0],
    ];
    const B5: [f64; 7] = [35.0 / 384.0, 0.0, 500.0 / 1113.0, 125.0 / 192.0, -2187.0 / 6784.0, 11.0 / 84.0, 0.0];
    const B4: [f64; 7] =
        [5179.0 / 57600.0, 0.0, 7571.0 / 16695.0, 393.0 / 640.0, -92097.0 / 339200.0, 187.0 / 2100.0, 1.0 / 40.0];
    let (mut t, mut d) = (0.0, d0);
    let floor = i_inf.abs() * 1e-17 + 1e-30;
    let mut h = (t_end * 1e-6).max(1e-15);
    while t < t_end && d > floor {
        h = h.min(t_end - t);
        let mut k = [0.0f64; 7];
        k[0] = rhs(d);
        for st in 0..6 {
            let mut y = d;
            for (j, kj) in k.iter().enumerate().take(st + 1) {
                y += h * A[st][j] * kj;
            }
            k[st + 1] = rhs(y.max(0.0));
        }
        let y5: f64 = d + h * B5.iter().zip(&k).map(|(b, k)| b * k).sum::<f64>();
        let y4: f64 = d + h * B4.iter().zip(&k).map(|(b, k)| b * k).sum::<f64>();
        let err = (y5 - y4).abs();
        let tol = 1e-13 * d.abs() + floor;
        if err <= tol {
            t += h;
            d = y5.max(0.0);
        }
        let factor = if err == 0.0 { 5.0 } else { (0.9 * (tol / err).powf(0.2)).clamp(0.2, 5.0) };
        h *= factor;
    }
    d
}

/// Evaluates a press from an empty capacitor.
///
/// # Errors
/// As [`evaluate_from`].
pub fn evaluate(s: &StageF) -> Result<EvalF, RefError> {
    evaluate_from(s, 0.0)
}

/// Evaluates a press starting from capacitor voltage `vs`.
///
/// # Errors
/// [`RefError`] when the stage never activates, the press is too short, or no hold remains.
pub fn evaluate_from(s: &StageF, vs: f64) -> Result<EvalF, RefError> {
    let r_eff = s.r_eff();
    let v_inf = s.charge_target();
    if v_inf <= s.rise {
        return Err(RefError::NeverActivates);
    }
    let (latency, vc0, charge_tau) = match s.diode {
        DiodeF::Drop(_) => {
            let rp = s.r_path();
            let r_th = if rp == 0.0 { 0.0 } else { rp * r_eff / (rp + r_eff) };
            let tau = s.c * (s.rs + r_th);
            let latency = if r_th == 0.0 {
                0.0
            } else {
                let vc1 = v_inf - (v_inf - s.rise) * (s.rs + r_th) / r_th;
                if vc1 <= vs {
                    0.0
                } else {
                    tau * ((v_inf - vs) / (v_inf - vc1)).ln()
                }
            };
            let vc0 = if tau == 0.0 { v_inf } else { v_inf - (v_inf - vs) * (-s.press / tau).exp() };
            (latency, vc0, tau)
        }
        DiodeF::Junction { is, .. } => {
            let i_inf = v_inf / r_eff + s.i_in;
            let rd = s.n_vt() / (i_inf + is);
            let rp = s.r_path() + rd;
            let tau = s.c * (s.rs + rp * r_eff / (rp + r_eff));
            let i0 = s.current_at_cap(vs, i_inf);
            let i1 = s.current_at_node(s.rise);
            let integrand = |i: f64| s.c * s.n_of(i) / s.cap_current(i);
            let latency = if i1 >= i0 { 0.0 } else { integrate(&integrand, i1, i0, 1e-13) };
            let d = charge_transient(s, i_inf, i0 - i_inf, s.press);
            (latency, s.cap_at_current(i_inf + d), tau)
        }
    };
    if latency > s.press {
        return Err(RefError::PressTooShort);
    }
    let i_lk = s.i_in + if let DiodeF::Junction { is, .. } = s.diode { is } else { 0.0 };
    let tau_d = (r_eff + s.rs) * s.c;
    // Node: V_A = (V_C − Rs·I_lk)·R_eff/(R_eff + Rs); V_A + R_eff·I_lk decays with τd.
    let va0 = (vc0 - s.rs * i_lk) * r_eff / (r_eff + s.rs);
    let start = va0 + r_eff * i_lk;
    let end = s.fall + r_eff * i_lk;
    if start <= end {
        return Err(RefError::NoHold);
    }
    let hold = tau_d * (start / end).ln();
    Ok(EvalF {
        charge_target: v_inf,
        charge_tau,
        on_latency: latency,
        cap_at_release: vc0,
        node_at_release: va0,
        discharge_tau: tau_d,
        hold,
        active: s.press - latency + hold,
    })
}

/// The capacitance (F) that explains a hold (s), by fixed-point iteration on
/// `C = hold / ((R_eff + Rs)·ln(start/end))` with the release voltage
/// recomputed for each C.
///
/// # Errors
/// As [`evaluate`].
pub fn inverse_c(s: &StageF, hold: f64) -> Result<f64, RefError> {
    let mut st = *s;
    let mut c = s.c;
    for _ in 0..60 {
        st.c = c;
        let e = evaluate(&st)?;
        let next = c * hold / e.hold;
        if ((next - c) / c).abs() < 1e-15 {
            return Ok(next);
        }
        c = next;
    }
    Ok(c)
}

/// The `x` in `lo ..= hi` where the falling function `f` crosses `target`,
/// by 300 bisections (to the last bit of an `f64`).
fn bisect_falling(mut lo: f64, mut hi: f64, target: f64, f: impl Fn(f64) -> f64) -> f64 {
    for _ in 0..300 {
        let mid = 0.5 * (lo + hi);
        if f(mid) > target {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    fn base() -> StageF {
        StageF {
            vdd: 5.0,
            r: 1e6,
            c: 1e-6,
            rs: 0.0,
            rch: 0.0,
            ro: 50.0,
            r_leak: f64::INFINITY,
            i_in: 0.0,
            diode: DiodeF::Drop(0.6),
            rise: 2.5,
            fall: 2.5,
            press: 0.1,
            temp_c: 25.0,
        }
    }

    /// Worked example from the project's check-value list (math): Vdd 5 V,
    /// drop 0.6 V, threshold 2.5 V → t = τ·ln(4.4/2.5) = 0.565314·τ
    /// (the 50 Ω driver moves the target by 50 ppm).
    #[test]
    fn worked_example_hold() {
        let mut s = base();
        s.ro = 0.0;
        let e = evaluate(&s).unwrap_or_else(|_| panic!("evaluates"));
        assert_relative_eq!(e.hold, 0.565_314, max_relative = 1e-6);
    }

    /// The 15-point Kronrod extension of the 7-point Gauss rule is exact for
    /// polynomials up to degree 3·7 + 2 = 23 (math): one panel, no
    /// refinement. A mistyped node or weight breaks this; degree 24 is not
    /// exact, which shows the check can fail.
    #[test]
    fn kronrod_table_is_exact_to_its_degree() {
        let once = |f: &dyn Fn(f64) -> f64| integrate(&f, -1.0, 1.0, f64::INFINITY);
        assert_relative_eq!(once(&|x: f64| x.powi(22)), 2.0 / 23.0, max_relative = 1e-13);
        assert_relative_eq!(once(&|x: f64| 1.0 + x.powi(10) + x.powi(23)), 2.0 + 2.0 / 11.0, max_relative = 1e-13);
        assert!((once(&|x: f64| x.powi(24)) - 2.0 / 25.0).abs() > 1e-9);
    }

    /// Quadrature sanity: ∫0^1 x^14 dx = 1/15 and ∫ e^x over [0, 3] (math).
    #[test]
    fn quadrature_is_exact_on_polynomials_and_converges() {
        assert_relative_eq!(integrate(&|x: f64| x.powi(14), 0.0, 1.0, 1e-14), 1.0 / 15.0, max_relative = 1e-13);
        assert_relative_eq!(integrate(&f64::exp, 0.0, 3.0, 1e-14), 3f64.exp() - 1.0, max_relative = 1e-13);
    }

    /// The transient of the fixed-drop charge equals the closed form (ODE vs exp).
    #[test]
    fn junction_transient_converges_to_steady_state() {
        let mut s = base();
        s.diode = DiodeF::Junction { is: 2.5e-9, n: 1.75, rs: 0.5 };
        s.press = 1.0; // 20 000 charge time constants
        let e = evaluate(&s).unwrap_or_else(|_| panic!("evaluates"));
        assert_relative_eq!(e.cap_at_release, e.charge_target, max_relative = 1e-12);
    }
}
