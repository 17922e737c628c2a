//! The linearised power loop of one board at one operating point, as a
//! discrete transfer function at the control tick.
//!
//! ```text
//!  setpoint ─►(+)─► C(z) ─► z^-d ─► hold ─► driver ─► diode ─► monitor RC ─► ADC sample ─┐
//!              ▲-                          a₁/(s+a₁)   slope    a₂/(s+a₂)                  │
//!              └───────────────────────────────────────────────────────────────────────────┘
//! ```
//!
//! * `C(z) = kp + ki·z/(z-1) = ((kp+ki)·z - kp)/(z-1)`, the core's PI
//!   (`u[n] = kp·e[n] + I[n]`, `I[n] = I[n-1] + ki·e[n]`, see
//!   `firmware-core/src/apc.rs`), with `kp` and `ki` per tick exactly as
//!   `ValidConfig::kp()` and `ValidConfig::ki_per_tick()` give them.
//! * `z^-d`: whole ticks between the sampling instant and the DAC update,
//!   on top of the hold. `d = 1`: the output computed from the sample of
//!   tick `n` is written at tick `n+1` (a synchronous DAC update, the
//!   core's "applied at the next tick"), the default board latency and
//!   the host simulator's timing (`crate::sim::DacLatency`). `d = 0`:
//!   written at the sampling instant, which no board can do (kept for
//!   comparisons).
//! * The DAC holds its value for a tick (zero-order hold). The driver's
//!   current loop is a first-order lag at `driver_bandwidth_hz`, the diode
//!   is linearised to its slope `dP/dI` at the operating point, the monitor
//!   channel reads `monitor_gain` × the true front power through the ADC
//!   front-end RC pole at `monitor_filter_hz`, and the ADC samples once per
//!   tick.
//!
//! Discretisation ([`Discretisation::ExactZoh`], the default): the exact
//! ZOH equivalent of the whole continuous chain
//! `G(s) = dac_gain·slope·monitor_gain · a₁/(s+a₁) · a₂/(s+a₂)` between the
//! held DAC value and the ADC sample, computed from the matrix exponential
//! ([`ContinuousTf::c2d_zoh`]). This is the right model because the RC
//! filters the *continuous* photocurrent, which is not piecewise constant:
//! only the DAC output is held. A cascade of individually ZOH'd sections
//! ([`Discretisation::CascadeZoh`]) would assume the driver output is held
//! and re-sampled too; with a driver pole far above the tick rate the ZOH of
//! the driver section is nearly `z^-1`, so the cascade carries one spurious
//! extra tick of delay. It is offered for comparison only.
//! [`Discretisation::SampledSmoother`] models the monitor filter as a
//! per-tick digital smoother on the sampled power instead.
//!
//! Linear, small-signal: slew limit, ceiling, anti-windup and quantisation
//! are not in the model; compare with the nonlinear simulator for large
//! steps.

use diodestat_core::ValidConfig;

use crate::units::Scale;

use super::margins::{margins, Margins};
use super::tf::{ContinuousTf, DiscreteTf};

/// Parameters of the linearised loop at one operating point (corner).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LoopParams {
    /// Control tick rate, Hz (sample time `1/tick_hz`).
    pub tick_hz: f64,
    /// Proportional gain, mA per mW of error (the core's `kp`, converted
    /// with `to_num`).
    pub kp_ma_per_mw: f64,
    /// Integral gain per tick, mA per mW of error per tick (the core's
    /// `ki_per_tick`, converted with `to_num`).
    pub ki_per_tick: f64,
    /// Commanded mA to actual source mA (DAC and transconductance gain
    /// relative to calibration, without quantisation; 1.0 after calibration).
    pub dac_gain: f64,
    /// Driver current-loop -3 dB bandwidth, Hz (`f64::INFINITY`: no pole).
    pub driver_bandwidth_hz: f64,
    /// `dP/dI` at the operating point, front-facet mW per mA, from the diode
    /// model at that temperature and aging corner.
    pub slope_mw_per_ma: f64,
    /// Monitor reading (mW) per true front-facet mW: tracking ratio and
    /// responsivity relative to calibration; 1.0 nominal.
    pub monitor_gain: f64,
    /// Monitor ADC front-end RC pole, Hz (`f64::INFINITY`: no pole).
    pub monitor_filter_hz: f64,
    /// Whole ticks between sampling and the DAC update (1 = one tick of
    /// computation delay).
    pub delay_ticks: u32,
}

/// A [`LoopParams`] field out of range.
#[derive(Clone, Copy, Debug, PartialEq, thiserror::Error)]
#[error("loop parameter {field} = {value} must be {requirement}")]
pub struct LoopParamsError {
    /// The field.
    pub field: &'static str,
    /// Its value.
    pub value: f64,
    /// What it must be.
    pub requirement: &'static str,
}

/// How the continuous part of the loop is discretised (see the module
/// documentation).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum Discretisation {
    /// Exact ZOH equivalent of the product driver × monitor RC (default).
    #[default]
    ExactZoh,
    /// Product of the individually ZOH'd driver and monitor sections.
    CascadeZoh,
    /// ZOH'd driver, sampled power, then a per-tick first-order smoother
    /// `y[n] = y[n-1] + b·(x[n] - y[n-1])`, `b = 1 - e^{-2π f T}`, i.e.
    /// `b·z/(z - (1-b))` (a digital filter in place of the RC).
    SampledSmoother,
}

impl LoopParams {
    /// Sample time, s.
    pub fn dt_s(&self) -> f64 {
        1.0 / self.tick_hz
    }

    /// Static gain of the plant from command to monitor reading, mW/mA.
    pub fn plant_gain(&self) -> f64 {
        self.dac_gain * self.slope_mw_per_ma * self.monitor_gain
    }

    /// The same corner with other PI gains.
    pub fn with_gains(self, kp_ma_per_mw: f64, ki_per_tick: f64) -> Self {
        LoopParams {
            kp_ma_per_mw,
            ki_per_tick,
            ..self
        }
    }

    /// The same corner with the tick rate and gains the core runs on
    /// (converted from the board's units to mA/mW).
    pub fn with_config_gains(self, cfg: &ValidConfig) -> Self {
        let u = cfg.config().units();
        let ma_per_mw = u.ma_per_iu() / u.mw_per_ou();
        LoopParams {
            tick_hz: f64::from(cfg.config().tick_hz),
            kp_ma_per_mw: cfg.kp().to_num::<f64>() * ma_per_mw,
            ki_per_tick: cfg.ki_per_tick().to_num::<f64>() * ma_per_mw,
            ..self
        }
    }

    /// Checks the ranges: positive finite tick rate, slope and gains,
    /// non-negative finite PI gains, positive (possibly infinite) pole
    /// frequencies.
    pub fn validate(&self) -> Result<(), LoopParamsError> {
        let err = |field, value, requirement| {
            Err(LoopParamsError {
                field,
                value,
                requirement,
            })
        };
        let pos = |v: f64| v > 0.0 && v.is_finite();
        if !pos(self.tick_hz) {
            return err("tick_hz", self.tick_hz, "positive and finite");
        }
        if !(self.kp_ma_per_mw >= 0.0 && self.kp_ma_per_mw.is_finite()) {
            return err("kp_ma_per_mw", self.kp_ma_per_mw, "non-negative and finite");
        }
        if !(self.ki_per_tick >= 0.0 && self.ki_per_tick.is_finite()) {
            return err("ki_per_tick", self.ki_per_tick, "non-negative and finite");
        }
        for (field, v) in [
            ("dac_gain", self.dac_gain),
            ("slope_mw_per_ma", self.slope_mw_per_ma),
            ("monitor_gain", self.monitor_gain),
        ] {
            if !pos(v) {
                return err(field, v, "positive and finite");
            }
        }
        for (field, v) in [
            ("driver_bandwidth_hz", self.driver_bandwidth_hz),
            ("monitor_filter_hz", self.monitor_filter_hz),
        ] {
            if v.is_nan() || v <= 0.0 {
                return err(field, v, "positive (infinite for no pole)");
            }
        }
        Ok(())
    }
}

fn two_pi() -> f64 {
    2.0 * std::f64::consts::PI
}

/// The core's PI, `C(z) = kp + ki·z/(z-1) = ((kp+ki)·z - kp)/(z-1)`.
pub fn pi_controller(kp: f64, ki_per_tick: f64, dt_s: f64) -> DiscreteTf {
    DiscreteTf::from_descending(&[kp + ki_per_tick, -kp], &[1.0, -1.0], dt_s)
}

fn lag(f_hz: f64) -> Option<ContinuousTf> {
    f_hz.is_finite()
        .then(|| ContinuousTf::first_order_lag(two_pi() * f_hz))
}

fn zoh_lag(f_hz: f64, dt: f64) -> DiscreteTf {
    if f_hz.is_finite() {
        DiscreteTf::zoh_first_order_lag(two_pi() * f_hz, dt)
    } else {
        DiscreteTf::gain(1.0, dt)
    }
}

/// The driver section alone (held command to sampled source current),
/// exact ZOH of the driver lag times `dac_gain`.
fn driver_section(p: &LoopParams) -> DiscreteTf {
    zoh_lag(p.driver_bandwidth_hz, p.dt_s()).scaled(p.dac_gain)
}

/// The plant from the PI output (mA) to the monitor reading (mW):
/// `z^-d · G_zoh(z)`.
///
/// # Panics
/// If `p` fails [`LoopParams::validate`].
pub fn plant(p: &LoopParams, disc: Discretisation) -> DiscreteTf {
    if let Err(e) = p.validate() {
        panic!("{e}");
    }
    let dt = p.dt_s();
    let k = p.plant_gain();
    let g = match disc {
        Discretisation::ExactZoh => {
            let mut c = ContinuousTf::gain(k);
            for f in [p.driver_bandwidth_hz, p.monitor_filter_hz] {
                if let Some(l) = lag(f) {
                    c = c.series(&l);
                }
            }
            c.c2d_zoh(dt)
        }
        Discretisation::CascadeZoh => zoh_lag(p.driver_bandwidth_hz, dt)
            .series(&zoh_lag(p.monitor_filter_hz, dt))
            .scaled(k),
        Discretisation::SampledSmoother => {
            let smoother = if p.monitor_filter_hz.is_finite() {
                let q = (-two_pi() * p.monitor_filter_hz * dt).exp();
                DiscreteTf::from_descending(&[1.0 - q, 0.0], &[1.0, -q], dt)
            } else {
                DiscreteTf::gain(1.0, dt)
            };
            zoh_lag(p.driver_bandwidth_hz, dt)
                .series(&smoother)
                .scaled(k)
        }
    };
    DiscreteTf::delay(p.delay_ticks, dt).series(&g)
}

/// The open loop `L(z) = C(z)·z^-d·G_zoh(z)` with the exact ZOH of the
/// driver and monitor poles ([`Discretisation::ExactZoh`]).
///
/// # Panics
/// If `p` fails [`LoopParams::validate`].
pub fn open_loop(p: &LoopParams) -> DiscreteTf {
    open_loop_with(p, Discretisation::ExactZoh)
}

/// [`open_loop`] with a chosen discretisation.
///
/// # Panics
/// If `p` fails [`LoopParams::validate`].
pub fn open_loop_with(p: &LoopParams, disc: Discretisation) -> DiscreteTf {
    pi_controller(p.kp_ma_per_mw, p.ki_per_tick, p.dt_s()).series(&plant(p, disc))
}

/// Margins of [`open_loop`].
///
/// # Panics
/// If `p` fails [`LoopParams::validate`].
pub fn loop_margins(p: &LoopParams) -> Margins {
    margins(&open_loop(p))
}

/// Closed loop from setpoint to monitor reading, `L / (1 + L)`.
///
/// # Panics
/// If `p` fails [`LoopParams::validate`].
pub fn closed_loop(p: &LoopParams) -> DiscreteTf {
    open_loop(p).feedback()
}

/// Linear prediction of the monitor reading after a unit setpoint step at
/// tick 0, `n_ticks` samples (tends to 1 with integral action).
///
/// # Panics
/// If `p` fails [`LoopParams::validate`].
pub fn closed_loop_step(p: &LoopParams, n_ticks: usize) -> Vec<f64> {
    closed_loop(p).step(n_ticks)
}

/// Linear prediction of the true front-facet power at the sampling
/// instants after a unit setpoint step, normalised to its final value
/// (`setpoint / monitor_gain`), `n_ticks` samples.
///
/// # Panics
/// If `p` fails [`LoopParams::validate`].
pub fn closed_loop_step_front(p: &LoopParams, n_ticks: usize) -> Vec<f64> {
    closed_loop_step_front_with(p, Discretisation::ExactZoh, n_ticks)
}

/// [`closed_loop_step_front`] with a chosen discretisation of the loop
/// (the front power itself is the driver section times the slope, at the
/// sampling instants, in every case).
///
/// # Panics
/// If `p` fails [`LoopParams::validate`].
pub fn closed_loop_step_front_with(
    p: &LoopParams,
    disc: Discretisation,
    n_ticks: usize,
) -> Vec<f64> {
    let dt = p.dt_s();
    let l = open_loop_with(p, disc);
    // Setpoint to front power: C·z^-d·driver·slope / (1 + L).
    let fwd = pi_controller(p.kp_ma_per_mw, p.ki_per_tick, dt)
        .series(&DiscreteTf::delay(p.delay_ticks, dt))
        .series(&driver_section(p))
        .scaled(p.slope_mw_per_ma * p.monitor_gain);
    // fwd / (1 + N/D) = fwd_num·D / (fwd_den·(D + N)).
    let num = fwd.num() * l.den();
    let den = fwd.den() * &(l.den() + l.num());
    DiscreteTf::new(num, den, dt).step(n_ticks)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn demo() -> LoopParams {
        LoopParams {
            tick_hz: 20_000.0,
            kp_ma_per_mw: 0.3,
            ki_per_tick: 0.15,
            dac_gain: 1.0,
            driver_bandwidth_hz: 200_000.0,
            slope_mw_per_ma: 0.9,
            monitor_gain: 1.0,
            monitor_filter_hz: 5_000.0,
            delay_ticks: 1,
        }
    }

    #[test]
    fn pi_matches_the_core_recursion() {
        // u[n] = kp e[n] + I[n], I[n] = I[n-1] + ki e[n], for a unit step.
        let (kp, ki) = (0.3, 0.15);
        let y = pi_controller(kp, ki, 5e-5).step(5);
        for (n, v) in y.iter().enumerate() {
            let want = kp + ki * (n as f64 + 1.0);
            assert!((v - want).abs() < 1e-14, "n={n}: {v} vs {want}");
        }
    }

    #[test]
    fn structure_and_dc_gain() {
        let p = demo();
        let g = plant(&p, Discretisation::ExactZoh);
        // Two poles plus one delay; relative degree 2 (hold + delay).
        assert_eq!(g.den().degree(), 3);
        assert_eq!(g.relative_degree(), 2);
        assert!((g.dc_gain() - 0.9).abs() < 1e-12);
        let l = open_loop(&p);
        assert!(l.dc_gain().abs() > 1e12, "integrator: {}", l.dc_gain());
        // Integral action: the step settles to exactly 1.
        let s = closed_loop_step(&p, 400);
        assert!((s[399] - 1.0).abs() < 1e-9, "{}", s[399]);
        assert_eq!(s[0], 0.0);
        assert_eq!(s[1], 0.0, "delay + hold: no response before tick 2");
        let f = closed_loop_step_front(&p, 400);
        assert!((f[399] - 1.0).abs() < 1e-9);
    }

    #[test]
    fn discretisations_agree_where_they_should() {
        let p = demo();
        let exact = plant(&p, Discretisation::ExactZoh);
        let cascade = plant(&p, Discretisation::CascadeZoh);
        let smooth = plant(&p, Discretisation::SampledSmoother);
        for g in [&exact, &cascade, &smooth] {
            assert!((g.dc_gain() - 0.9).abs() < 1e-12);
        }
        // A 200 kHz driver settles within a 50 µs tick, so its ZOH section
        // is nearly z^-1: the cascade carries one spurious tick of delay
        // that the exact product of the poles does not.
        let late = exact.series(&DiscreteTf::delay(1, p.dt_s()));
        for f in [50.0, 500.0, 3_000.0] {
            let w = two_pi() * f;
            let e = exact.freq_response(w);
            let d_late = (late.freq_response(w) - cascade.freq_response(w)).abs();
            let d_exact = (e - cascade.freq_response(w)).abs();
            // What is left is the driver's own lag, about ω/a₁ radians.
            let lag = w / (two_pi() * p.driver_bandwidth_hz);
            assert!(d_late < 1.5 * lag * e.abs(), "{f} Hz: {d_late}");
            assert!(d_exact > 10.0 * d_late, "{f} Hz: {d_exact} vs {d_late}");
        }
        // With the driver settled within a tick, the smoother on the
        // end-of-tick power, b·z/(z-q) after the driver's ≈ z^-1, is the
        // ZOH of the RC, (1-q)/(z-q), up to the driver's lag.
        for f in [50.0, 500.0, 3_000.0] {
            let w = two_pi() * f;
            let e = exact.freq_response(w);
            let lag = w / (two_pi() * p.driver_bandwidth_hz);
            let d = (smooth.freq_response(w) - e).abs();
            assert!(d < 1.5 * lag * e.abs(), "{f} Hz: {d}");
        }
        // Without the driver pole, exact ZOH of the lone RC is its closed form.
        let q = LoopParams {
            driver_bandwidth_hz: f64::INFINITY,
            ..p
        };
        let a = plant(&q, Discretisation::ExactZoh);
        let b = plant(&q, Discretisation::CascadeZoh);
        for w in [10.0, 1e4, 6e4] {
            assert!((a.freq_response(w) - b.freq_response(w)).abs() < 1e-12);
        }
    }

    #[test]
    fn validation() {
        assert!(demo().validate().is_ok());
        let bad = LoopParams {
            slope_mw_per_ma: 0.0,
            ..demo()
        };
        let e = bad.validate().unwrap_err();
        assert_eq!(e.field, "slope_mw_per_ma");
        assert!(e.to_string().contains("slope_mw_per_ma"));
        let bad = LoopParams {
            monitor_filter_hz: f64::NAN,
            ..demo()
        };
        assert!(bad.validate().is_err());
    }
}
