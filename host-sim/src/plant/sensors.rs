//! Temperature sensors (NTC thermistor, platinum RTD with its IEC 60751
//! tolerance class), their divider front end with RC anti-alias filter and
//! a seeded-noise ADC, and a generic ADC channel for the monitor,
//! current-sense and supply signals.
//!
//! ADC convention (shared with the firmware tables): an ideal mid-tread
//! converter, `code = round(V / LSB)` with `LSB = vref / 2^bits`, clamped to
//! `0 ..= 2^bits - 1`; a code therefore stands for the voltage `code * LSB`.
//! The sensor divider is excited from the ADC reference (ratiometric), so the
//! sensor reading does not depend on the reference value.

use serde::{Deserialize, Serialize};

use super::constants::ZERO_CELSIUS_K;
use super::error::{ensure, PlantError};
use super::near::ExpNear;
use super::rng::Rng;

/// IEC 60751 Callendar-Van Dusen coefficient A, 1/degC.
pub const RTD_A: f64 = 3.9083e-3;
/// IEC 60751 Callendar-Van Dusen coefficient B, 1/degC^2.
pub const RTD_B: f64 = -5.775e-7;
/// IEC 60751 Callendar-Van Dusen coefficient C, 1/degC^4 (below 0 degC only).
pub const RTD_C: f64 = -4.183e-12;
/// Reference temperature of the NTC beta equation (25 degC), K.
pub const NTC_T25_K: f64 = 298.15;

/// NTC thermistor model: the nominal curve of its datasheet and, for one
/// drawn or measured part, how far its R25 and its B value lie from the
/// nominal ones (0: the nominal part).
///
/// A part with R25 deviation `r` and B deviation `b` has the resistance
///
/// ```text
/// R_part(T) = R_nom(T) (1 + r) exp(b B_nom (1/T - 1/298.15 K))
/// ```
///
/// with `B_nom` the nominal curve's B25/85 (the B value NTC datasheets
/// state with its tolerance, between 25 and 85 degC; common practice). For
/// the beta equation this is exactly the beta equation with R25 (1 + r) and
/// B (1 + b) (its B25/85 is its B).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "model", rename_all = "snake_case", deny_unknown_fields)]
pub enum Ntc {
    /// Beta equation R = R25 exp(B (1/T - 1/298.15 K)).
    Beta {
        /// Resistance at 25 degC, ohm.
        r25_ohm: f64,
        /// Beta constant, K.
        beta_k: f64,
        /// This part's relative R25 deviation from `r25_ohm` (0.01: 1 %
        /// high); 0 (the default): the nominal part.
        #[serde(default, skip_serializing_if = "is_zero")]
        r25_deviation: f64,
        /// This part's relative B deviation from `beta_k`; 0 (the
        /// default): the nominal part.
        #[serde(default, skip_serializing_if = "is_zero")]
        beta_deviation: f64,
    },
    /// Steinhart-Hart equation 1/T = a + b ln R + c (ln R)^3 (R in ohm, T in K).
    SteinhartHart {
        /// Coefficient a, 1/K.
        a: f64,
        /// Coefficient b, 1/K.
        b: f64,
        /// Coefficient c, 1/K.
        c: f64,
        /// This part's relative R25 deviation from the curve's R at
        /// 25 degC; 0 (the default): the nominal part.
        #[serde(default, skip_serializing_if = "is_zero")]
        r25_deviation: f64,
        /// This part's relative B deviation from the curve's B25/85; 0
        /// (the default): the nominal part.
        #[serde(default, skip_serializing_if = "is_zero")]
        beta_deviation: f64,
    },
}

/// Upper temperature of the B25/85 value, K (85 degC).
pub const NTC_T85_K: f64 = 358.15;

impl Ntc {
    /// The nominal beta-equation NTC.
    pub fn beta(r25_ohm: f64, beta_k: f64) -> Ntc {
        Ntc::Beta {
            r25_ohm,
            beta_k,
            r25_deviation: 0.0,
            beta_deviation: 0.0,
        }
    }

    /// The nominal Steinhart-Hart NTC.
    pub fn steinhart_hart(a: f64, b: f64, c: f64) -> Ntc {
        Ntc::SteinhartHart {
            a,
            b,
            c,
            r25_deviation: 0.0,
            beta_deviation: 0.0,
        }
    }

    /// This part's (R25, B) relative deviations.
    pub fn deviations(&self) -> (f64, f64) {
        match *self {
            Ntc::Beta {
                r25_deviation,
                beta_deviation,
                ..
            }
            | Ntc::SteinhartHart {
                r25_deviation,
                beta_deviation,
                ..
            } => (r25_deviation, beta_deviation),
        }
    }

    /// The same curve with this part's deviations set to `r25` and `beta`.
    pub fn with_deviations(&self, r25: f64, beta: f64) -> Ntc {
        let mut n = self.clone();
        match &mut n {
            Ntc::Beta {
                r25_deviation,
                beta_deviation,
                ..
            }
            | Ntc::SteinhartHart {
                r25_deviation,
                beta_deviation,
                ..
            } => {
                *r25_deviation = r25;
                *beta_deviation = beta;
            }
        }
        n
    }

    /// Checks the coefficients describe a decreasing R(T) and the part's
    /// deviations lie between -1 and 1.
    pub fn validate(&self) -> Result<(), PlantError> {
        let (r25_dev, beta_dev) = self.deviations();
        ensure(
            r25_dev.is_finite() && r25_dev > -1.0 && r25_dev < 1.0,
            "r25_deviation",
            "must be a relative deviation between -1 and 1 (exclusive)",
        )?;
        ensure(
            beta_dev.is_finite() && beta_dev > -1.0 && beta_dev < 1.0,
            "beta_deviation",
            "must be a relative deviation between -1 and 1 (exclusive)",
        )?;
        match *self {
            Ntc::Beta {
                r25_ohm, beta_k, ..
            } => {
                ensure(
                    r25_ohm > 0.0 && r25_ohm.is_finite(),
                    "r25_ohm",
                    "must be > 0",
                )?;
                ensure(beta_k > 0.0 && beta_k.is_finite(), "beta_k", "must be > 0")
            }
            Ntc::SteinhartHart { a, b, c, .. } => {
                ensure(a.is_finite(), "a", "must be finite")?;
                ensure(b > 0.0 && b.is_finite(), "b", "must be > 0")?;
                ensure(c >= 0.0 && c.is_finite(), "c", "must be >= 0")
            }
        }
    }

    /// Resistance of this part at temperature `t_k`, ohm: the nominal
    /// curve with the part's deviations (see [`Ntc`]).
    #[inline]
    pub fn resistance_ohm(&self, t_k: f64) -> f64 {
        match *self {
            Ntc::Beta {
                r25_ohm,
                beta_k,
                r25_deviation,
                beta_deviation,
            } => {
                r25_ohm
                    * (1.0 + r25_deviation)
                    * (beta_k * (1.0 + beta_deviation) * (1.0 / t_k - 1.0 / NTC_T25_K)).exp()
            }
            Ntc::SteinhartHart {
                r25_deviation,
                beta_deviation,
                ..
            } => {
                let mut r = self.nominal_resistance_ohm(t_k);
                if r25_deviation != 0.0 {
                    r *= 1.0 + r25_deviation;
                }
                if beta_deviation != 0.0 {
                    r *= (beta_deviation * self.b25_85_k() * (1.0 / t_k - 1.0 / NTC_T25_K)).exp();
                }
                r
            }
        }
    }

    /// Resistance on the nominal curve at `t_k`, ohm. The Steinhart-Hart
    /// inverse is the closed-form (Cardano) root of
    /// c x^3 + b x + (a - 1/T) = 0 with x = ln R, polished by one Newton
    /// step.
    #[inline]
    pub fn nominal_resistance_ohm(&self, t_k: f64) -> f64 {
        match *self {
            Ntc::Beta {
                r25_ohm, beta_k, ..
            } => r25_ohm * (beta_k * (1.0 / t_k - 1.0 / NTC_T25_K)).exp(),
            Ntc::SteinhartHart { a, b, c, .. } => {
                let rhs = 1.0 / t_k;
                let mut x = if c == 0.0 {
                    (rhs - a) / b
                } else {
                    let p = b / c;
                    let q = (a - rhs) / c;
                    let d = ((0.5 * q) * (0.5 * q) + (p / 3.0).powi(3)).sqrt();
                    (-0.5 * q + d).cbrt() + (-0.5 * q - d).cbrt()
                };
                let f = a + b * x + c * x * x * x - rhs;
                x -= f / (b + 3.0 * c * x * x);
                x.exp()
            }
        }
    }

    /// B25/85 of the nominal curve, K:
    /// ln(R(25 degC) / R(85 degC)) / (1/298.15 K - 1/358.15 K); the beta
    /// equation's B itself.
    pub fn b25_85_k(&self) -> f64 {
        match *self {
            Ntc::Beta { beta_k, .. } => beta_k,
            Ntc::SteinhartHart { .. } => {
                (self.nominal_resistance_ohm(NTC_T25_K) / self.nominal_resistance_ohm(NTC_T85_K))
                    .ln()
                    / (1.0 / NTC_T25_K - 1.0 / NTC_T85_K)
            }
        }
    }

    /// Temperature for resistance `r_ohm` on the nominal curve (what a
    /// reader that knows only the datasheet curve concludes), K.
    #[inline]
    pub fn temperature_k(&self, r_ohm: f64) -> f64 {
        match *self {
            Ntc::Beta {
                r25_ohm, beta_k, ..
            } => 1.0 / (1.0 / NTC_T25_K + (r_ohm / r25_ohm).ln() / beta_k),
            Ntc::SteinhartHart { a, b, c, .. } => {
                let x = r_ohm.ln();
                1.0 / (a + b * x + c * x * x * x)
            }
        }
    }
}

/// Tolerance class of a platinum RTD (IEC 60751:2008, clause 5.1.3,
/// table 2; from memory): the largest deviation of a sensor's temperature
/// from the nominal Callendar-Van Dusen curve, a + b |t|:
///
/// | class | tolerance, degC |
/// |---|---|
/// | AA | 0.1 + 0.0017 \|t\| |
/// | A | 0.15 + 0.002 \|t\| |
/// | B | 0.3 + 0.005 \|t\| |
/// | C | 0.6 + 0.01 \|t\| |
///
/// (The standard also bounds each class's validity range by element type,
/// wire-wound or film; the simulator applies the formula at any
/// temperature.)
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub enum RtdClass {
    /// Class AA.
    AA,
    /// Class A.
    A,
    /// Class B.
    B,
    /// Class C.
    C,
}

impl RtdClass {
    /// Half-width of the class band at `t_c` degC, K.
    pub fn tolerance_k(self, t_c: f64) -> f64 {
        let (a, b) = match self {
            RtdClass::AA => (0.1, 0.0017),
            RtdClass::A => (0.15, 0.002),
            RtdClass::B => (0.3, 0.005),
            RtdClass::C => (0.6, 0.01),
        };
        a + b * t_c.abs()
    }
}

/// Platinum RTD with the IEC 60751 Callendar-Van Dusen coefficients and,
/// optionally, its tolerance class and where this part's error lies in it.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Rtd {
    /// Resistance at 0 degC, ohm (100 for Pt100, 1000 for Pt1000).
    pub r0_ohm: f64,
    /// Tolerance class (IEC 60751); `None`: the nominal curve exactly.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub class: Option<RtdClass>,
    /// Where this part's error lies in its class band, -1 ..= 1: the sensor
    /// has the resistance of the nominal curve at t + position x
    /// tolerance(t). 0 (the default): the nominal curve. Needs `class`.
    #[serde(default, skip_serializing_if = "is_zero")]
    pub band_position: f64,
}

fn is_zero(v: &f64) -> bool {
    *v == 0.0
}

impl Rtd {
    /// A sensor on the nominal curve with no class.
    pub fn nominal(r0_ohm: f64) -> Self {
        Rtd {
            r0_ohm,
            class: None,
            band_position: 0.0,
        }
    }

    /// Checks R0 is positive and the band position lies in its class.
    pub fn validate(&self) -> Result<(), PlantError> {
        ensure(
            self.r0_ohm > 0.0 && self.r0_ohm.is_finite(),
            "r0_ohm",
            "must be > 0",
        )?;
        ensure(
            (-1.0..=1.0).contains(&self.band_position),
            "band_position",
            "must be in -1 ..= 1",
        )?;
        ensure(
            self.class.is_some() || self.band_position == 0.0,
            "band_position",
            "needs a tolerance class (class = \"AA\", \"A\", \"B\" or \"C\")",
        )
    }

    /// This part's error at `t_k`, K: position x class tolerance (0 without
    /// a class).
    #[inline]
    pub fn error_k(&self, t_k: f64) -> f64 {
        match self.class {
            Some(c) => self.band_position * c.tolerance_k(t_k - ZERO_CELSIUS_K),
            None => 0.0,
        }
    }

    /// Resistance of this part at temperature `t_k`, ohm: the nominal
    /// curve at t_k plus its error ([`Rtd::error_k`]).
    #[inline]
    pub fn resistance_ohm(&self, t_k: f64) -> f64 {
        self.nominal_resistance_ohm(t_k + self.error_k(t_k))
    }

    /// Resistance on the nominal curve at `t_k`, ohm:
    /// R0 (1 + A t + B t^2 + C (t - 100) t^3), C term only for t < 0 degC.
    #[inline]
    pub fn nominal_resistance_ohm(&self, t_k: f64) -> f64 {
        let t = t_k - ZERO_CELSIUS_K;
        let mut r = 1.0 + RTD_A * t + RTD_B * t * t;
        if t < 0.0 {
            r += RTD_C * (t - 100.0) * t * t * t;
        }
        self.r0_ohm * r
    }

    /// Temperature for resistance `r_ohm` on the nominal curve (what a
    /// reader that knows only the curve concludes), K: the quadratic root
    /// for R >= R0, Newton iteration on the full equation below 0 degC.
    pub fn temperature_k(&self, r_ohm: f64) -> f64 {
        let rr = r_ohm / self.r0_ohm - 1.0;
        let disc = (RTD_A * RTD_A + 4.0 * RTD_B * rr).max(0.0);
        let mut t = 2.0 * rr / (RTD_A + disc.sqrt());
        if rr < 0.0 {
            for _ in 0..20 {
                let f = RTD_A * t + RTD_B * t * t + RTD_C * (t - 100.0) * t * t * t - rr;
                let df = RTD_A + 2.0 * RTD_B * t + RTD_C * (4.0 * t * t * t - 300.0 * t * t);
                let dt = f / df;
                t -= dt;
                if dt.abs() < 1e-12 {
                    break;
                }
            }
        }
        t + ZERO_CELSIUS_K
    }
}

/// Any supported temperature sensor.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum TempSensor {
    /// NTC thermistor.
    Ntc(Ntc),
    /// Platinum RTD.
    Rtd(Rtd),
}

impl TempSensor {
    /// The same sensor on its nominal curve (an RTD's class error removed):
    /// what firmware built from the datasheet knows.
    pub fn nominal(&self) -> TempSensor {
        match self {
            TempSensor::Rtd(r) => TempSensor::Rtd(Rtd {
                band_position: 0.0,
                ..r.clone()
            }),
            TempSensor::Ntc(n) => TempSensor::Ntc(n.with_deviations(0.0, 0.0)),
        }
    }

    /// The same sensor, if an NTC, with its R25 and B deviations set to
    /// `r25` and `beta` (relative); RTDs are returned as they are.
    pub fn with_ntc_deviations(&self, r25: f64, beta: f64) -> TempSensor {
        match self {
            TempSensor::Ntc(n) => TempSensor::Ntc(n.with_deviations(r25, beta)),
            other => other.clone(),
        }
    }

    /// The same sensor with its error at `position` (-1 ..= 1) of its class
    /// band; sensors without a class are returned as they are.
    pub fn with_band_position(&self, position: f64) -> TempSensor {
        match self {
            TempSensor::Rtd(r) if r.class.is_some() => TempSensor::Rtd(Rtd {
                band_position: position,
                ..r.clone()
            }),
            other => other.clone(),
        }
    }

    /// The class of an RTD given by one.
    pub fn rtd_class(&self) -> Option<RtdClass> {
        match self {
            TempSensor::Rtd(r) => r.class,
            TempSensor::Ntc(_) => None,
        }
    }

    /// Checks the sensor coefficients.
    pub fn validate(&self) -> Result<(), PlantError> {
        match self {
            TempSensor::Ntc(n) => n.validate(),
            TempSensor::Rtd(r) => r.validate(),
        }
    }

    /// Resistance at `t_k`, ohm.
    #[inline]
    pub fn resistance_ohm(&self, t_k: f64) -> f64 {
        match self {
            TempSensor::Ntc(n) => n.resistance_ohm(t_k),
            TempSensor::Rtd(r) => r.resistance_ohm(t_k),
        }
    }

    /// Temperature for resistance `r_ohm`, K.
    #[inline]
    pub fn temperature_k(&self, r_ohm: f64) -> f64 {
        match self {
            TempSensor::Ntc(n) => n.temperature_k(r_ohm),
            TempSensor::Rtd(r) => r.temperature_k(r_ohm),
        }
    }
}

/// Where the sensor sits in the divider.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Topology {
    /// Sensor from the ADC node to ground, reference resistor from the
    /// reference to the node (pull-up). Open sensor reads full scale, short
    /// reads zero.
    SensorToGround,
    /// Sensor from the reference to the ADC node, reference resistor to
    /// ground. Open sensor reads zero, short reads full scale.
    SensorToSupply,
}

/// Divider, filter and ADC of a temperature channel.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FrontEndParams {
    /// Divider topology.
    pub topology: Topology,
    /// Reference (fixed) resistor of the divider, ohm.
    pub ref_resistor_ohm: f64,
    /// ADC reference and divider excitation, V.
    pub vref_v: f64,
    /// ADC resolution, bits (1..=16).
    pub adc_bits: u8,
    /// RC anti-alias filter time constant, s (0 = no filter).
    pub rc_tau_s: f64,
    /// Gaussian noise at the ADC input, LSB rms.
    pub noise_lsb_rms: f64,
    /// Seed of the noise generator.
    pub seed: u64,
}

/// A sensor and its front end.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SensorChainParams {
    /// The temperature sensor.
    pub sensor: TempSensor,
    /// Its divider, filter and ADC.
    pub front_end: FrontEndParams,
}

fn check_adc(bits: u8, vref_v: f64, noise: f64) -> Result<(), PlantError> {
    ensure((1..=16).contains(&bits), "adc_bits", "must be 1..=16")?;
    ensure(vref_v > 0.0 && vref_v.is_finite(), "vref_v", "must be > 0")?;
    ensure(
        noise >= 0.0 && noise.is_finite(),
        "noise_lsb_rms",
        "must be >= 0",
    )
}

/// Quantises `x` (in LSB) to a code in `0..=max`: round half away from
/// zero, clamp to the rails, NaN reads 0: the codes of
/// `x.round().clamp(0.0, max) as u16` without the library rounding call
/// or a float-to-integer conversion.
///
/// On the clamped value 0 <= c <= max < 2^16, m = c + 2^52 is rounded to
/// the nearest integer, ties to even, in the floating-point addition, and
/// that integer is the low bits of m's representation (its unit is the
/// last mantissa bit). r = m - 2^52 is exact, and so is c - r (|c - r| <=
/// 1/2); a tie rounded down (c - r = 1/2) is rounded up instead, as
/// `round` does. `max(0.0)` maps NaN to 0.
#[inline]
fn quantise(x: f64, max: f64) -> u16 {
    const TWO_52: f64 = 4_503_599_627_370_496.0;
    let c = x.max(0.0).min(max);
    let m = c + TWO_52;
    let r = m - TWO_52;
    let k = m.to_bits() as u16;
    k + u16::from(c - r == 0.5)
}

/// A temperature channel: sensor, divider, RC filter, noisy ADC and faults.
#[derive(Clone, Debug)]
pub struct SensorChain {
    params: SensorChainParams,
    full_scale: f64,
    max_code: f64,
    /// Filtered divider ratio V / vref.
    ratio: f64,
    started: bool,
    decay_dt: f64,
    decay: f64,
    rng: Rng,
    /// Fault hook: sensor open circuit (drives the node to its rail).
    pub open: bool,
    /// Fault hook: sensor short circuit (drives the node to the other rail).
    pub short: bool,
    /// Fault hook: the ADC returns this code regardless of input.
    pub stuck: Option<u16>,
    /// Beta-equation NTC exponential continued between calls.
    ntc_near: ExpNear,
}

impl SensorChain {
    /// Builds the channel after validating the parameters.
    pub fn new(params: SensorChainParams) -> Result<Self, PlantError> {
        params.sensor.validate()?;
        let fe = &params.front_end;
        check_adc(fe.adc_bits, fe.vref_v, fe.noise_lsb_rms)?;
        ensure(
            fe.ref_resistor_ohm > 0.0 && fe.ref_resistor_ohm.is_finite(),
            "ref_resistor_ohm",
            "must be > 0",
        )?;
        ensure(
            fe.rc_tau_s >= 0.0 && fe.rc_tau_s.is_finite(),
            "rc_tau_s",
            "must be >= 0",
        )?;
        let full_scale = (1u32 << fe.adc_bits) as f64;
        let rng = Rng::new(fe.seed);
        Ok(Self {
            params,
            full_scale,
            max_code: full_scale - 1.0,
            ratio: 0.0,
            started: false,
            decay_dt: f64::NAN,
            decay: 0.0,
            rng,
            open: false,
            short: false,
            stuck: None,
            ntc_near: ExpNear::new(),
        })
    }

    /// Parameters in use.
    pub fn params(&self) -> &SensorChainParams {
        &self.params
    }

    /// Largest ADC code, 2^bits - 1.
    pub fn max_code(&self) -> u16 {
        self.max_code as u16
    }

    /// Noise-free divider ratio V / vref for a sensor resistance.
    #[inline]
    fn ratio_of_resistance(&self, r_s: f64) -> f64 {
        let r_ref = self.params.front_end.ref_resistor_ohm;
        match self.params.front_end.topology {
            Topology::SensorToGround => r_s / (r_s + r_ref),
            Topology::SensorToSupply => r_ref / (r_s + r_ref),
        }
    }

    /// Sensor resistance for a divider ratio V / vref (inverse of the divider).
    #[inline]
    fn resistance_of_ratio(&self, x: f64) -> f64 {
        let r_ref = self.params.front_end.ref_resistor_ohm;
        match self.params.front_end.topology {
            Topology::SensorToGround => r_ref * x / (1.0 - x),
            Topology::SensorToSupply => r_ref * (1.0 - x) / x,
        }
    }

    /// Sensor resistance at `t_k`, ohm, with the beta-equation exponential
    /// continued from the previous call (see [`super::near`]; within 3 ulp
    /// of [`TempSensor::resistance_ohm`]); other sensors directly.
    #[inline]
    fn resistance_near(&mut self, t_k: f64) -> f64 {
        match self.params.sensor {
            TempSensor::Ntc(Ntc::Beta {
                r25_ohm,
                beta_k,
                r25_deviation,
                beta_deviation,
            }) => {
                r25_ohm
                    * (1.0 + r25_deviation)
                    * self
                        .ntc_near
                        .exp(beta_k * (1.0 + beta_deviation) * (1.0 / t_k - 1.0 / NTC_T25_K))
            }
            ref other => other.resistance_ohm(t_k),
        }
    }

    /// Divider ratio at the ADC input including open/short faults, unfiltered.
    #[inline]
    fn input_ratio(&mut self, t_k: f64, near: bool) -> f64 {
        let to_ground = self.params.front_end.topology == Topology::SensorToGround;
        if self.short {
            if to_ground {
                0.0
            } else {
                1.0
            }
        } else if self.open {
            if to_ground {
                1.0
            } else {
                0.0
            }
        } else if near {
            let r = self.resistance_near(t_k);
            self.ratio_of_resistance(r)
        } else {
            self.ratio_of_resistance(self.params.sensor.resistance_ohm(t_k))
        }
    }

    /// Noise-free, unfiltered ADC reading in LSB (not rounded) at `t_k`.
    pub fn ideal_counts(&self, t_k: f64) -> f64 {
        self.ratio_of_resistance(self.params.sensor.resistance_ohm(t_k)) * self.full_scale
    }

    /// Divider output voltage at `t_k` (noise-free, unfiltered), V.
    pub fn voltage_v(&self, t_k: f64) -> f64 {
        self.ratio_of_resistance(self.params.sensor.resistance_ohm(t_k))
            * self.params.front_end.vref_v
    }

    /// Exact sensor temperature, K, for an ADC code (inverse of the
    /// noise-free transfer at the code's voltage); `None` at the rails.
    pub fn temperature_of_counts_k(&self, code: u16) -> Option<f64> {
        let c = code as f64;
        if c <= 0.0 || c >= self.max_code {
            return None;
        }
        let r = self.resistance_of_ratio(c / self.full_scale);
        Some(self.params.sensor.temperature_k(r))
    }

    /// Samples the channel with the sensor at `t_k` after `dt_s` since the
    /// previous sample: the RC filter state moves toward the divider output
    /// (exact first-order response to an input held over dt; the first call
    /// starts the filter settled), Gaussian noise is added, the result is
    /// quantised and clamped to the rails.
    #[inline]
    pub fn counts(&mut self, t_k: f64, dt_s: f64) -> u16 {
        self.counts_with(t_k, dt_s, true)
    }

    /// [`SensorChain::counts`] evaluating the sensor equation directly every
    /// call (the reference for the continued exponential).
    pub fn counts_reference(&mut self, t_k: f64, dt_s: f64) -> u16 {
        self.counts_with(t_k, dt_s, false)
    }

    #[inline]
    fn counts_with(&mut self, t_k: f64, dt_s: f64, near: bool) -> u16 {
        let x = self.input_ratio(t_k, near);
        let tau = self.params.front_end.rc_tau_s;
        if !self.started || tau == 0.0 {
            self.ratio = x;
            self.started = true;
        } else {
            if dt_s != self.decay_dt {
                self.decay = (-dt_s / tau).exp();
                self.decay_dt = dt_s;
            }
            self.ratio = x + (self.ratio - x) * self.decay;
        }
        let sigma = self.params.front_end.noise_lsb_rms;
        let noise = if sigma > 0.0 {
            sigma * self.rng.normal()
        } else {
            0.0
        };
        let code = quantise(self.ratio * self.full_scale + noise, self.max_code);
        self.stuck.unwrap_or(code)
    }

    /// Conversion table from the exact, noise-free sensor equation: `points`
    /// temperatures spread evenly over `t_min_c ..= t_max_c`, each rounded to
    /// its ADC code and paired with the exact temperature of that code, degC.
    /// Rail codes are left out; entries are sorted by strictly increasing
    /// code (temperature falls with code for an NTC to ground).
    pub fn temp_table(&self, t_min_c: f64, t_max_c: f64, points: usize) -> Vec<(u16, f64)> {
        let n = points.max(2);
        let mut table: Vec<(u16, f64)> = Vec::with_capacity(n);
        for i in 0..n {
            let t_c = t_min_c + (t_max_c - t_min_c) * i as f64 / (n - 1) as f64;
            let code_f = self.ideal_counts(t_c + ZERO_CELSIUS_K).round();
            if !(code_f > 0.0 && code_f < self.max_code) {
                continue;
            }
            let code = code_f as u16;
            if let Some(t_k) = self.temperature_of_counts_k(code) {
                table.push((code, t_k - ZERO_CELSIUS_K));
            }
        }
        table.sort_by_key(|e| e.0);
        table.dedup_by_key(|e| e.0);
        table
    }
}

/// Generic ADC channel parameters.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AdcParams {
    /// Resolution, bits (1..=16).
    pub bits: u8,
    /// Reference voltage (full scale), V.
    pub vref_v: f64,
    /// Gaussian input noise, LSB rms.
    pub noise_lsb_rms: f64,
    /// Seed of the noise generator.
    pub seed: u64,
}

/// A generic ADC channel (monitor, current sense, supply) with seeded noise.
#[derive(Clone, Debug)]
pub struct Adc {
    params: AdcParams,
    counts_per_volt: f64,
    max_code: f64,
    rng: Rng,
    /// Fault hook: the converter returns this code regardless of input.
    pub stuck: Option<u16>,
}

impl Adc {
    /// Builds the channel after validating the parameters.
    pub fn new(params: AdcParams) -> Result<Self, PlantError> {
        check_adc(params.bits, params.vref_v, params.noise_lsb_rms)?;
        let full_scale = (1u32 << params.bits) as f64;
        Ok(Self {
            counts_per_volt: full_scale / params.vref_v,
            max_code: full_scale - 1.0,
            rng: Rng::new(params.seed),
            params,
            stuck: None,
        })
    }

    /// Parameters in use.
    pub fn params(&self) -> &AdcParams {
        &self.params
    }

    /// One LSB, V.
    pub fn lsb_v(&self) -> f64 {
        1.0 / self.counts_per_volt
    }

    /// Voltage a code stands for (code * LSB), V.
    pub fn volts_of(&self, code: u16) -> f64 {
        code as f64 / self.counts_per_volt
    }

    /// Converts `volts` with noise, rounding and clamping to the rails.
    #[inline(always)]
    pub fn sample(&mut self, volts: f64) -> u16 {
        let sigma = self.params.noise_lsb_rms;
        let noise = if sigma > 0.0 {
            sigma * self.rng.normal()
        } else {
            0.0
        };
        let code = quantise(volts * self.counts_per_volt + noise, self.max_code);
        self.stuck.unwrap_or(code)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ntc_chain(noise: f64) -> SensorChain {
        SensorChain::new(SensorChainParams {
            sensor: TempSensor::Ntc(Ntc::beta(10_000.0, 3380.0)),
            front_end: FrontEndParams {
                topology: Topology::SensorToGround,
                ref_resistor_ohm: 10_000.0,
                vref_v: 3.3,
                adc_bits: 12,
                rc_tau_s: 1e-3,
                noise_lsb_rms: noise,
                seed: 5,
            },
        })
        .unwrap()
    }

    /// Straightforward quantisation, the reference for [`quantise`].
    fn quantise_reference(x: f64, max: f64) -> u16 {
        x.round().clamp(0.0, max) as u16
    }

    #[test]
    fn fast_quantise_equals_rounding() {
        // Every half-integer and its neighbouring doubles, the rails, the
        // non-finite inputs and a sweep of random values.
        let max = 4095.0;
        let mut xs = vec![
            f64::NAN,
            f64::INFINITY,
            f64::NEG_INFINITY,
            -0.0,
            1e300,
            -1e300,
        ];
        for k in -2..=4100 {
            let h = k as f64 + 0.5;
            xs.extend([
                h,
                h.next_down(),
                h.next_up(),
                k as f64,
                (k as f64).next_down(),
            ]);
        }
        let mut rng = Rng::new(9);
        for _ in 0..200_000 {
            xs.push(rng.uniform() * 4200.0 - 50.0);
        }
        for x in xs {
            for m in [max, 65535.0, 1.0] {
                assert_eq!(
                    quantise(x, m),
                    quantise_reference(x, m),
                    "x = {x:e}, max {m}"
                );
            }
        }
    }

    #[test]
    fn counts_equal_reference_counts() {
        // The continued beta-equation exponential gives the same codes as
        // the direct one, noise included (same seed), over a drift with jumps.
        let mut a = ntc_chain(0.5);
        let mut b = ntc_chain(0.5);
        for k in 0..20_000 {
            let t = 290.0 + 2e-3 * k as f64 + (k / 4000) as f64;
            assert_eq!(a.counts(t, 5e-5), b.counts_reference(t, 5e-5), "at {t} K");
        }
    }

    #[test]
    fn ntc_at_25c_reads_half_scale() {
        let mut ch = ntc_chain(0.0);
        assert_eq!(ch.counts(NTC_T25_K, 1e-3), 2048);
    }

    #[test]
    fn rc_filter_first_order_response() {
        let mut ch = ntc_chain(0.0);
        ch.counts(NTC_T25_K, 1e-4);
        // Step to 50 degC; after one tau the reading covers 1 - 1/e of the step.
        let target = ch.ideal_counts(323.15);
        let start = 2048.0;
        let c = ch.counts(323.15, 1e-3) as f64;
        let expect = target + (start - target) * (-1.0f64).exp();
        assert!((c - expect).abs() <= 0.5 + 1e-9, "{c} vs {expect}");
    }

    #[test]
    fn faults_go_to_rails() {
        for topo in [Topology::SensorToGround, Topology::SensorToSupply] {
            let mut p = ntc_chain(0.0).params().clone();
            p.front_end.topology = topo;
            p.front_end.rc_tau_s = 0.0;
            let mut ch = SensorChain::new(p).unwrap();
            ch.open = true;
            let open = ch.counts(300.0, 1e-3);
            ch.open = false;
            ch.short = true;
            let short = ch.counts(300.0, 1e-3);
            match topo {
                Topology::SensorToGround => assert_eq!((open, short), (4095, 0)),
                Topology::SensorToSupply => assert_eq!((open, short), (0, 4095)),
            }
            ch.stuck = Some(1234);
            assert_eq!(ch.counts(300.0, 1e-3), 1234);
        }
    }

    #[test]
    fn noise_is_seeded_and_has_right_rms() {
        let mut a = ntc_chain(2.0);
        let mut b = ntc_chain(2.0);
        let mean = a.ideal_counts(310.0);
        let mut s2 = 0.0;
        let n = 20_000;
        for _ in 0..n {
            let ca = a.counts(310.0, 1e-3);
            assert_eq!(ca, b.counts(310.0, 1e-3));
            s2 += (ca as f64 - mean).powi(2);
        }
        // Variance of rounded Gaussian: sigma^2 + 1/12 (Sheppard).
        let var = s2 / n as f64;
        assert!((var - (4.0 + 1.0 / 12.0)).abs() < 0.2, "var {var}");
    }

    #[test]
    fn steinhart_hart_inverse_round_trip() {
        let ntc = Ntc::steinhart_hart(1.40e-3, 2.37e-4, 9.90e-8);
        for r in [100.0, 1000.0, 3000.0, 10_000.0, 100_000.0, 1e6] {
            let t = ntc.temperature_k(r);
            let r2 = ntc.resistance_ohm(t);
            assert!((r2 / r - 1.0).abs() < 1e-12, "{r} -> {t} -> {r2}");
        }
    }

    /// A part with R25 x % high, read through the nominal curve (as the
    /// firmware's table does), reads the temperature the B-parameter
    /// equation R = R25 exp(B (1/T - 1/298.15 K)) predicts for it:
    /// 1/T_read = 1/T + ln(1 + x)/B (the equation solved for T at the
    /// part's resistance; the B-parameter equation as NTC datasheets and
    /// application notes give it, seen in secondary copies only: from
    /// memory);
    /// at 25 degC, R25 +1 % and B 3380 K that is 0.2617 K cold. The same
    /// part through the divider and the ADC's noise-free transfer.
    #[test]
    fn an_ntc_part_with_r25_off_reads_what_the_beta_equation_predicts() {
        let nominal = Ntc::beta(10_000.0, 3380.0);
        for x in [0.01, -0.02, 0.05] {
            let part = nominal.with_deviations(x, 0.0);
            for t_c in [-20.0, 0.0, 25.0, 60.0, 100.0] {
                let t = t_c + ZERO_CELSIUS_K;
                let r = part.resistance_ohm(t);
                let want_r = 10_000.0 * (1.0 + x) * (3380.0 * (1.0 / t - 1.0 / NTC_T25_K)).exp();
                assert!((r / want_r - 1.0).abs() < 1e-12, "{x} {t_c}: {r}");
                let read = nominal.temperature_k(r);
                let want = 1.0 / (1.0 / t + (1.0 + x).ln() / 3380.0);
                assert!((read - want).abs() < 1e-9, "{x} {t_c}: {read} {want}");
            }
        }
        let at25 =
            nominal.temperature_k(nominal.with_deviations(0.01, 0.0).resistance_ohm(NTC_T25_K));
        assert!((at25 - NTC_T25_K + 0.2617).abs() < 5e-4, "{at25}");
        // Through the divider: the part's noise-free reading, inverted by
        // the nominal chain, is the same temperature.
        let mut params = ntc_chain(0.0).params().clone();
        let nominal_chain = SensorChain::new(params.clone()).unwrap();
        params.sensor = TempSensor::Ntc(nominal.with_deviations(0.01, 0.0));
        let part_chain = SensorChain::new(params).unwrap();
        let x = part_chain.ideal_counts(NTC_T25_K) / part_chain.full_scale;
        let read = nominal.temperature_k(nominal_chain.resistance_of_ratio(x));
        assert!((read - at25).abs() < 1e-9, "{read} {at25}");
        assert!(part_chain.ideal_counts(NTC_T25_K) > nominal_chain.ideal_counts(NTC_T25_K));
    }

    /// B off by y: the beta equation with B (1 + y); a Steinhart-Hart part
    /// (J. S. Steinhart, S. R. Hart, Deep-Sea Research 15 (1968) 497-503,
    /// secondary copy) with R25 off by x reads, through its nominal curve,
    /// 1/T = a + b ln R + c (ln R)^3 at its resistance R = (1 + x) R_nom(T),
    /// and with B off by y has a B25/85 of (1 + y) times the nominal one
    /// (B25/85 = ln(R25/R85) / (1/298.15 K - 1/358.15 K), as NTC
    /// datasheets state it; common practice).
    #[test]
    fn ntc_b_deviation_and_steinhart_hart_parts() {
        let part = Ntc::beta(10_000.0, 3380.0).with_deviations(0.0, -0.01);
        let t = 70.0 + ZERO_CELSIUS_K;
        let want = 10_000.0 * (3380.0 * 0.99 * (1.0 / t - 1.0 / NTC_T25_K)).exp();
        assert!((part.resistance_ohm(t) / want - 1.0).abs() < 1e-12);
        assert_eq!(part.b25_85_k(), 3380.0);
        let (a, b, c) = (1.40e-3, 2.37e-4, 9.90e-8);
        let sh = Ntc::steinhart_hart(a, b, c);
        for (x, y) in [(0.01, 0.0), (-0.03, 0.0), (0.0, 0.02), (0.02, -0.015)] {
            let p = sh.with_deviations(x, y);
            for t_c in [0.0, 25.0, 85.0] {
                let t = t_c + ZERO_CELSIUS_K;
                let r = p.resistance_ohm(t);
                if y == 0.0 {
                    assert!((r / (sh.resistance_ohm(t) * (1.0 + x)) - 1.0).abs() < 1e-12);
                }
                let l = r.ln();
                let want = 1.0 / (a + b * l + c * l * l * l);
                assert!((sh.temperature_k(r) - want).abs() < 1e-9, "{x} {y} {t_c}");
            }
            let b_part = (p.resistance_ohm(NTC_T25_K) / p.resistance_ohm(NTC_T85_K)).ln()
                / (1.0 / NTC_T25_K - 1.0 / NTC_T85_K);
            assert!(
                (b_part / (sh.b25_85_k() * (1.0 + y)) - 1.0).abs() < 1e-9,
                "{b_part}"
            );
            let r25 = p.resistance_ohm(NTC_T25_K) / sh.resistance_ohm(NTC_T25_K);
            assert!((r25 - (1.0 + x)).abs() < 1e-12, "{r25}");
        }
        // The chain's continued exponential agrees with the direct
        // equation for a part off the nominal curve as well.
        let mut params = ntc_chain(0.5).params().clone();
        params.sensor = TempSensor::Ntc(Ntc::beta(10_000.0, 3380.0).with_deviations(0.013, -0.007));
        let mut fast = SensorChain::new(params.clone()).unwrap();
        let mut direct = SensorChain::new(params).unwrap();
        for k in 0..5000 {
            let t = 290.0 + 4e-3 * k as f64;
            assert_eq!(fast.counts(t, 5e-5), direct.counts_reference(t, 5e-5));
        }
    }

    #[test]
    fn ntc_deviations_outside_their_range_are_refused() {
        let n = Ntc::beta(10_000.0, 3380.0);
        assert!(n.with_deviations(-1.0, 0.0).validate().is_err());
        assert!(n.with_deviations(0.0, f64::NAN).validate().is_err());
        assert!(n.with_deviations(0.0, 1.5).validate().is_err());
        assert!(n.with_deviations(0.05, -0.05).validate().is_ok());
    }

    #[test]
    fn rtd_inverse_round_trip() {
        let rtd = Rtd::nominal(100.0);
        for t_c in [
            -200.0, -100.0, -40.0, -0.5, 0.0, 0.5, 25.0, 200.0, 600.0, 850.0,
        ] {
            let t_k = t_c + ZERO_CELSIUS_K;
            let back = rtd.temperature_k(rtd.resistance_ohm(t_k));
            assert!((back - t_k).abs() < 1e-9, "{t_c}: {back}");
        }
    }

    #[test]
    fn adc_quantises_and_clamps() {
        let mut adc = Adc::new(AdcParams {
            bits: 12,
            vref_v: 2.5,
            noise_lsb_rms: 0.0,
            seed: 0,
        })
        .unwrap();
        assert_eq!(adc.sample(-1.0), 0);
        assert_eq!(adc.sample(3.0), 4095);
        assert_eq!(adc.sample(1.25), 2048);
        assert_eq!(adc.sample(adc.volts_of(1000) + 0.49 * adc.lsb_v()), 1000);
        adc.stuck = Some(7);
        assert_eq!(adc.sample(1.0), 7);
    }

    #[test]
    fn serde_round_trip_toml() {
        let text = r#"
            [sensor.ntc]
            model = "steinhart_hart"
            a = 1.4e-3
            b = 2.37e-4
            c = 9.9e-8
            [front_end]
            topology = "sensor_to_supply"
            ref_resistor_ohm = 4700.0
            vref_v = 3.0
            adc_bits = 12
            rc_tau_s = 0.001
            noise_lsb_rms = 0.5
            seed = 9
        "#;
        let p: SensorChainParams = crate::plant::error::from_toml(text).unwrap();
        assert!(matches!(
            p.sensor,
            TempSensor::Ntc(Ntc::SteinhartHart { .. })
        ));
        let bad = text.replace("seed = 9", "seed = 9\nextra = 1");
        assert!(crate::plant::error::from_toml::<SensorChainParams>(&bad).is_err());
        let bad2 = text.replace("c = 9.9e-8", "c = 9.9e-8\nd = 1.0");
        assert!(crate::plant::error::from_toml::<SensorChainParams>(&bad2).is_err());
    }

    /// The class tolerances against IEC 60751:2008, clause 5.1.3, table 2
    /// (from memory): at 0 degC and 100 degC, in degC, and for a Pt100 in
    /// ohm (the table's ohm column, rounded to 0.01 ohm).
    #[test]
    fn iec_60751_class_tolerances_at_0_and_100_degc() {
        for (class, at0, at100) in [
            (RtdClass::AA, 0.10, 0.27),
            (RtdClass::A, 0.15, 0.35),
            (RtdClass::B, 0.30, 0.80),
            (RtdClass::C, 0.60, 1.60),
        ] {
            assert!((class.tolerance_k(0.0) - at0).abs() < 1e-12, "{class:?}");
            assert!(
                (class.tolerance_k(100.0) - at100).abs() < 1e-12,
                "{class:?}"
            );
            assert_eq!(class.tolerance_k(-100.0), class.tolerance_k(100.0));
        }
        // Pt100 at the edge of its band, in ohm: A 0.06 / 0.13, B 0.12 / 0.30.
        for (class, ohm0, ohm100) in [(RtdClass::A, 0.06, 0.13), (RtdClass::B, 0.12, 0.30)] {
            let nominal = Rtd::nominal(100.0);
            let edge = Rtd {
                class: Some(class),
                band_position: 1.0,
                ..Rtd::nominal(100.0)
            };
            for (t_c, want) in [(0.0, ohm0), (100.0, ohm100)] {
                let t_k = t_c + ZERO_CELSIUS_K;
                let dr = edge.resistance_ohm(t_k) - nominal.resistance_ohm(t_k);
                assert!((dr - want).abs() < 0.005, "{class:?} {t_c}: {dr}");
            }
        }
    }

    /// A classed sensor reads with its error: read back through the nominal
    /// curve, a part at position p of its band reads t + p tolerance(t),
    /// never outside the band; the channel's counts move with it.
    #[test]
    fn a_classed_sensor_reads_with_its_error_within_the_band() {
        for class in [RtdClass::AA, RtdClass::A, RtdClass::B, RtdClass::C] {
            for p in [-1.0, -0.4, 0.0, 0.7, 1.0] {
                let rtd = Rtd {
                    class: Some(class),
                    band_position: p,
                    ..Rtd::nominal(1000.0)
                };
                for t_c in [-40.0, 0.0, 25.0, 100.0, 150.0] {
                    let t_k = t_c + ZERO_CELSIUS_K;
                    let read = rtd.temperature_k(rtd.resistance_ohm(t_k)) - t_k;
                    let tol = class.tolerance_k(t_c);
                    assert!((read - p * tol).abs() < 1e-9, "{class:?} {p} {t_c}: {read}");
                    assert!(read.abs() <= tol + 1e-9);
                }
            }
        }
        let chain = |s: TempSensor| {
            let mut params = super::super::demo::DemoModule::pump().sensor;
            params.sensor = s;
            SensorChain::new(params).unwrap()
        };
        let classed = TempSensor::Rtd(Rtd {
            class: Some(RtdClass::B),
            band_position: 0.0,
            ..Rtd::nominal(1000.0)
        });
        let t_k = 60.0 + ZERO_CELSIUS_K;
        let hot = chain(classed.with_band_position(1.0)).ideal_counts(t_k);
        let nominal = chain(classed.clone()).ideal_counts(t_k);
        let warmer = chain(classed.clone()).ideal_counts(t_k + RtdClass::B.tolerance_k(60.0));
        assert!(
            (hot - warmer).abs() < 1e-9 && hot > nominal + 1.0,
            "{hot} {nominal}"
        );
        assert_eq!(classed.with_band_position(1.0).nominal(), classed);
    }

    #[test]
    fn a_band_position_outside_the_band_or_without_a_class_is_refused() {
        let bad = |class: Option<RtdClass>, p: f64| {
            Rtd {
                class,
                band_position: p,
                ..Rtd::nominal(100.0)
            }
            .validate()
            .is_err()
        };
        assert!(bad(Some(RtdClass::A), 1.5));
        assert!(bad(Some(RtdClass::A), f64::NAN));
        assert!(bad(None, 0.5));
        assert!(!bad(Some(RtdClass::A), -1.0));
        assert!(!bad(None, 0.0));
    }
}
