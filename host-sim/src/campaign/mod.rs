//! Fault campaigns: every injectable hardware fault × injection moments ×
//! plant corners × setpoints, run in parallel; each case is judged
//! against pass lines independent of the controller's settings
//! ([`verdict`]): the product's intended laser class, the module's
//! ratings and its facet-damage limit.
//!
//! A case is **unsafe** when
//! - a fault that must latch was not detected, or was detected later than
//!   its reaction-time limit;
//! - the energy above the module's rated power, or the charge above its
//!   rated current, exceeds the board's declared allowance;
//! - the facet was damaged at all;
//! - the accessible energy of any exposure duration, or the accessible
//!   power the case ends on, exceeds the intended class's limit.
//!
//! Each fault kind declares which protections count as its correct
//! detection; a fault caught only by another protection is a **finding**
//! for the reviewer (still safe).
//!
//! The cases are numbered in one fixed order; `--shard K/N` runs those
//! whose number is K-1 modulo N, and [`report::merge`] puts shard reports
//! back into exactly the single run's report.

mod kept;
pub mod needs;
mod outcome;
pub mod report;
mod selection;
pub mod stats;
pub mod verdict;
pub mod without;

use kept::Kept;
pub use outcome::{CaseResult, Detection};
pub use selection::{Moment, Selection, SelectionError, COLD_C, HOT_C};

use crate::units::Scale;

use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use diodestat_core::{State, ValidConfig};

use crate::plant::{DemoModule, PartTolerances};
use crate::scenario::{Action, AdcChannel, DiodeModel, Event, HwFault, Scenario};
use crate::sim::{self, DacLatency, Happening};
use verdict::{judge, unsafe_reasons, PassLines};

/// A plant corner, or one drawn part of a Monte Carlo campaign: its
/// ambient and its factors and offsets against the module's nominal part.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Corner {
    /// Name.
    pub name: String,
    /// Ambient, degC.
    pub ambient_c: f64,
    /// Threshold-current factor (part spread, 1 nominal).
    pub threshold: f64,
    /// Slope-efficiency factor (part spread, 1 nominal).
    pub slope: f64,
    /// Monitor responsivity factor (tracking-ratio spread); a monitor
    /// fault compounds with it.
    pub tracking: f64,
    /// Operating hours before the run (aged diode).
    pub aged_hours: f64,
    /// Factor on the threshold's characteristic temperature T0.
    pub t0: f64,
    /// Factor on the current-sense amplifier's gain.
    pub sense_gain: f64,
    /// Current-sense amplifier output offset, mV.
    pub sense_offset_mv: f64,
    /// Factor on the DAC's gain (its full-scale current).
    pub dac_gain: f64,
    /// DAC output offset, mV.
    pub dac_offset_mv: f64,
    /// Where the temperature sensor's error lies in its IEC 60751 class
    /// band, -1 ..= 1 (0: the nominal curve; only a sensor with a class).
    pub sensor_band: f64,
    /// Factor on an NTC temperature sensor's R25 (1 nominal; only an NTC).
    #[serde(default = "one")]
    pub ntc_r25: f64,
    /// Factor on an NTC temperature sensor's B value (1 nominal; only an
    /// NTC).
    #[serde(default = "one")]
    pub ntc_beta: f64,
}

/// A factor of 1 (records written before the field existed).
fn one() -> f64 {
    1.0
}

fn nominal() -> Corner {
    Corner {
        name: "nominal".into(),
        ambient_c: 25.0,
        threshold: 1.0,
        slope: 1.0,
        tracking: 1.0,
        aged_hours: 0.0,
        sensor_band: 0.0,
        t0: 1.0,
        sense_gain: 1.0,
        sense_offset_mv: 0.0,
        dac_gain: 1.0,
        dac_offset_mv: 0.0,
        ntc_r25: 1.0,
        ntc_beta: 1.0,
    }
}

impl Corner {
    /// The module as this corner or part has it: the diode's spread
    /// ([`DemoModule::with_spread`]), T0 scaled, the converter chain's
    /// gains scaled and its offsets added, the temperature sensor
    /// at its place in its class band or, an NTC, with its R25 and B
    /// moved by their factors. (The tracking factor and the hours act
    /// through the scenario, as faults do.)
    pub fn module(&self, base: &DemoModule) -> DemoModule {
        let mut m = base.with_spread(self.threshold, self.slope);
        m.diode.t0_k *= self.t0;
        m.driver.sense_gain *= self.sense_gain;
        m.driver.sense_offset_v += self.sense_offset_mv * 1e-3;
        m.driver.dac_vref_v *= self.dac_gain;
        m.driver.dac_offset_v += self.dac_offset_mv * 1e-3;
        m.sensor.sensor = m
            .sensor
            .sensor
            .with_band_position(self.sensor_band)
            .with_ntc_deviations(self.ntc_r25 - 1.0, self.ntc_beta - 1.0);
        m
    }
}

/// The corners of the shipped campaign (the part spreads are the loop
/// analysis's standard ones) for an ambient range `cold_c..=hot_c`.
pub fn corners(cold_c: f64, hot_c: f64) -> Vec<Corner> {
    let c = |name: &str, f: &dyn Fn(&mut Corner)| {
        let mut k = Corner {
            name: name.into(),
            ..nominal()
        };
        f(&mut k);
        k
    };
    vec![
        nominal(),
        c("cold", &|k| k.ambient_c = cold_c),
        c("hot", &|k| k.ambient_c = hot_c),
        c("tracking-low", &|k| k.tracking = 0.9),
        c("aged", &|k| k.aged_hours = 20_000.0),
        c("threshold-high", &|k| {
            k.threshold = 1.0 + PartTolerances::DEMO.threshold
        }),
        c("slope-low", &|k| k.slope = 1.0 - PartTolerances::DEMO.slope),
    ]
}

/// `n` parts drawn from the module's tolerances with `seed` (each factor
/// uniform in `1 - t ..= 1 + t`, each offset uniform in `-h ..= h`; a
/// temperature sensor given by its IEC 60751 class also draws its error
/// uniformly within the class band, an NTC its R25 and B factors within
/// their tolerances), at the nominal corner's 25 degC, named `part-1` to
/// `part-n`. Threshold, slope, tracking and the sensor band come from one
/// stream seeded with `seed`, T0 and the converter chain from a second
/// one, the NTC's R25 and B from a third, so adding tolerances leaves the
/// earlier draws of every part as they were.
pub fn parts(module: &DemoModule, n: u32, seed: u64) -> Vec<Corner> {
    draw_parts(
        &module.tolerances,
        module.sensor.sensor.rtd_class().is_some(),
        n,
        seed,
    )
}

/// [`parts`] from the tolerances alone (a record's header holds them).
pub fn draw_parts(
    tolerances: &PartTolerances,
    sensor_classed: bool,
    n: u32,
    seed: u64,
) -> Vec<Corner> {
    let mut rng = crate::plant::Rng::new(seed);
    let mut chain = crate::plant::Rng::new(seed ^ CHAIN_STREAM);
    let mut ntc = crate::plant::Rng::new(seed ^ NTC_STREAM);
    let t = *tolerances;
    let sym = |r: &mut crate::plant::Rng, h: f64| h * (2.0 * r.uniform() - 1.0);
    (1..=n)
        .map(|i| {
            let threshold = 1.0 + sym(&mut rng, t.threshold);
            let slope = 1.0 + sym(&mut rng, t.slope);
            let tracking = 1.0 + sym(&mut rng, t.tracking);
            let sensor_band = if sensor_classed {
                (1.0 + sym(&mut rng, 1.0)) - 1.0
            } else {
                0.0
            };
            Corner {
                name: format!("part-{i}"),
                threshold,
                slope,
                tracking,
                t0: 1.0 + sym(&mut chain, t.t0),
                sense_gain: 1.0 + sym(&mut chain, t.sense_gain),
                sense_offset_mv: sym(&mut chain, t.sense_offset_mv),
                dac_gain: 1.0 + sym(&mut chain, t.dac_gain),
                dac_offset_mv: sym(&mut chain, t.dac_offset_mv),
                ntc_r25: 1.0 + sym(&mut ntc, t.ntc_r25),
                ntc_beta: 1.0 + sym(&mut ntc, t.ntc_beta),
                sensor_band,
                ..nominal()
            }
        })
        .collect()
}

/// Seed of the second draw stream of [`parts`] ("convchain" in ASCII)
/// against the first's.
const CHAIN_STREAM: u64 = 0x636f_6e76_6368_6169;

/// Seed of the third draw stream of [`parts`] ("ntcr25b." in ASCII)
/// against the first's.
const NTC_STREAM: u64 = 0x6e74_6372_3235_622e;

/// How long a fault's case is watched after the injection.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum WatchKind {
    /// [`FAST_WATCH_MS`] after the injection (electrical faults).
    Fast,
    /// Until the plant settles (five of the mount's slowest thermal time
    /// constants) or the campaign's bound, whichever is shorter.
    Slow,
}

/// Watch window of a fast fault, ms.
pub const FAST_WATCH_MS: f64 = 30.0;

/// One fault of the campaign and what counts as handling it.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct FaultSpec {
    /// The injected fault.
    pub fault: HwFault,
    /// Its name in reports: the kind and its parameter.
    pub label: String,
    /// Whether the core must latch it (or refuse the enable).
    pub must_latch: bool,
    /// Core protections (fault names) that count as its correct
    /// detection.
    pub expected: &'static [&'static str],
    /// Longest time from the fault reaching the laser to the latch, ms
    /// (for a fault that must latch).
    pub reaction_ms: Option<f64>,
    /// Watch window.
    pub watch: WatchKind,
}

/// Pseudo-protection: a latent fault (or one left standing at a retry)
/// made the core refuse the enable (or clear) request and the laser never
/// emitted.
pub const ENABLE_REFUSED: &str = "request-refused";

fn spec(
    fault: HwFault,
    label: String,
    must_latch: bool,
    expected: &'static [&'static str],
    reaction_ms: Option<f64>,
    watch: WatchKind,
) -> FaultSpec {
    FaultSpec {
        fault,
        label,
        must_latch,
        expected,
        reaction_ms,
        watch,
    }
}

/// The faults of the shipped campaign for a module: the supply sag goes to
/// 60 % of the module's nominal supply (below any sane supply window), the
/// DAC sticks at zero, half and full scale, the monitor contact opens on
/// 50, 80 and 95 % of the ticks. The reaction-time limits are the
/// project's requirement values for the demo boards (our choice, not from
/// a standard): 1 ms for the interlock, the external fault input and a
/// source failing high, 5 ms for the drive and supply paths, 10 ms for
/// the temperature sensor, 20 ms for monitor losses (light has to be
/// commanded before it can be missed).
pub fn faults(module: &DemoModule) -> Vec<FaultSpec> {
    use WatchKind::{Fast, Slow};
    let full = (1u32 << module.driver.dac_bits.min(16)) - 1;
    let dac = |code: u32, expected: &'static [&'static str], must: bool| {
        let code = code.min(u32::from(u16::MAX)) as u16;
        spec(
            HwFault::DacStuck { code },
            format!("dac-stuck code={code}"),
            must,
            expected,
            Some(5.0),
            Fast,
        )
    };
    let intermittent = |open_fraction: f64, must: bool| {
        spec(
            HwFault::MonitorIntermittent { open_fraction },
            format!("monitor-intermittent open={:.0}%", open_fraction * 100.0),
            must,
            &["monitor-loss", "power-implausible"],
            Some(20.0),
            Fast,
        )
    };
    let sag_v = module.supply_v * 0.6;
    vec![
        spec(
            HwFault::SensorOpen,
            "sensor-open".into(),
            true,
            &["sensor-open"],
            Some(10.0),
            Fast,
        ),
        spec(
            HwFault::SensorShort,
            "sensor-short".into(),
            true,
            &["sensor-short"],
            Some(10.0),
            Fast,
        ),
        spec(
            HwFault::MonitorOpen,
            "monitor-open".into(),
            true,
            &["monitor-loss", "power-implausible"],
            Some(20.0),
            Fast,
        ),
        spec(
            HwFault::MonitorDegrade { factor: 0.5 },
            "monitor-degrade factor=0.5".into(),
            false,
            &["power-implausible"],
            None,
            Slow,
        ),
        spec(
            HwFault::SourceFailHigh,
            "source-fail-high".into(),
            true,
            &["overcurrent", "drive-mismatch", "monitor-runaway"],
            Some(1.0),
            Fast,
        ),
        dac(0, &["drive-mismatch", "monitor-loss"], true),
        dac(full.div_ceil(2), &["drive-mismatch"], false),
        dac(
            full,
            &["drive-mismatch", "overcurrent", "monitor-runaway"],
            true,
        ),
        spec(
            HwFault::SenseGain { factor: 1.5 },
            "sense-gain factor=1.5".into(),
            true,
            &["drive-mismatch", "overcurrent"],
            Some(5.0),
            Fast,
        ),
        spec(
            HwFault::InterlockOpen,
            "interlock-open".into(),
            true,
            &["interlock-open"],
            Some(1.0),
            Fast,
        ),
        spec(
            HwFault::SupplySag { to_v: sag_v },
            format!("supply-sag to={sag_v:.2}V"),
            true,
            &["supply-under"],
            Some(5.0),
            Fast,
        ),
        spec(
            HwFault::HeatsinkLoss { factor: 4.0 },
            "heatsink-loss factor=4".into(),
            false,
            &["over-temperature"],
            None,
            Slow,
        ),
        spec(
            HwFault::Aging { hours: 20_000.0 },
            "aging hours=20000".into(),
            false,
            &["power-implausible"],
            None,
            Slow,
        ),
        spec(
            HwFault::AdcStuck {
                channel: AdcChannel::Current,
                code: 0,
            },
            "adc-stuck current code=0".into(),
            true,
            &["drive-mismatch"],
            Some(5.0),
            Fast,
        ),
        spec(
            HwFault::MissedTicks { ticks: 10 },
            "missed-ticks ticks=10".into(),
            true,
            &["missed-ticks", "tick-order"],
            Some(5.0),
            Fast,
        ),
        // Open on 95 % of the ticks: dark nearly always, which a debounce
        // restarting on one clean tick never trips; open on 50 or 80 %
        // reads, behind the monitor's RC front end, as a lower
        // responsivity (a degrading monitor): judged by the power lines.
        intermittent(0.5, false),
        intermittent(0.8, false),
        intermittent(0.95, true),
        spec(
            HwFault::MonitorDrift { per_s: 20.0 },
            "monitor-drift per_s=20".into(),
            false,
            &["power-implausible", "monitor-loss"],
            None,
            Slow,
        ),
        spec(
            HwFault::ExternalFault,
            "external-fault".into(),
            true,
            &["external-fault"],
            Some(1.0),
            Fast,
        ),
        // The board's buses behind the core's edge (the run drives the
        // core through `DriverBoard` on simulated parts): a failed DAC
        // write is made safe by the enable line, a failed enable line by
        // the DAC written to zero, a failed interlock read counts as open.
        spec(
            HwFault::DacBus,
            "dac-bus".into(),
            true,
            &["dac-bus"],
            Some(1.0),
            Fast,
        ),
        spec(
            HwFault::EnablePin,
            "enable-pin".into(),
            true,
            &["enable-pin"],
            Some(1.0),
            Fast,
        ),
        spec(
            HwFault::InterlockPin,
            "interlock-pin".into(),
            true,
            &["interlock-pin", "interlock-open"],
            Some(1.0),
            Fast,
        ),
    ]
}

/// Whether `fault` is a standing state (it can be present before the
/// enable request or at a retry), not a one-off event.
fn standing(fault: &HwFault) -> bool {
    !matches!(fault, HwFault::MissedTicks { .. })
}

/// Parts of a Monte Carlo run that the slow faults run on by default
/// (`--slow-parts`): each slow case watches up to the slow bound (20 s of
/// plant time by default), some hundred times a fast case, so a
/// 1000-part run of every slow fault would take hours; 100 parts bound
/// the probability of an unsafe slow case per part to about 3 % when
/// none is seen (one-sided 95 % Clopper-Pearson).
pub const SLOW_PARTS: u32 = 100;

/// Noise seed of every case.
pub const SEED: u64 = 1;

/// When a latent fault is injected, ms (before [`ENABLE_MS`]).
pub const LATENT_MS: f64 = 0.1;

/// When the campaign enables emission, ms.
pub const ENABLE_MS: f64 = 0.5;

/// When the fault arrives in steady regulation (and the setpoint change,
/// the disable request), ms.
pub const STEADY_MS: f64 = 30.0;

/// How long after a latch the operator clears and enables again, ms.
pub const RETRY_AFTER_MS: f64 = 15.0;

/// One case: indices into the fault list, the moments, the corners and
/// the setpoints, and its number in the whole campaign.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Case {
    /// Number in the whole (unsharded) campaign.
    pub index: usize,
    /// Fault.
    pub fault: usize,
    /// Moment.
    pub moment: Moment,
    /// Corner.
    pub corner: usize,
    /// Setpoint, mW.
    pub setpoint_mw: f64,
}

/// A board and what the campaign needs of it.
#[derive(Clone, Copy, Debug)]
pub struct Bench<'a> {
    /// Board name.
    pub name: &'a str,
    /// Module.
    pub module: &'a DemoModule,
    /// Validated configuration.
    pub cfg: &'a ValidConfig,
    /// Drive latency.
    pub latency: DacLatency,
    /// Pass lines.
    pub lines: &'a PassLines,
}

/// The cases of a selection.
#[derive(Clone, Debug)]
pub struct CasePlan {
    /// The selected faults.
    pub faults: Vec<FaultSpec>,
    /// The corners (or parts).
    pub corners: Vec<Corner>,
    /// This shard's cases, in their fixed order.
    pub cases: Vec<Case>,
    /// Cases of the whole (unsharded) selection.
    pub total: usize,
}

/// The campaign's cases for a selection, in their fixed order.
pub fn cases(bench: &Bench<'_>, sel: &Selection) -> Result<CasePlan, SelectionError> {
    if !(sel.cold_c.is_finite() && sel.hot_c.is_finite() && sel.cold_c < sel.hot_c) {
        return Err(SelectionError::Range(
            "--ambient-c: the range must be COLD,HOT with COLD < HOT (degC)",
        ));
    }
    if !(sel.slow_bound_s.is_finite() && sel.slow_bound_s > 0.0) {
        return Err(SelectionError::Range(
            "--slow-bound-s: must be a positive number of seconds",
        ));
    }
    if let Some((k, n)) = sel.shard {
        if n == 0 || k == 0 || k > n {
            return Err(SelectionError::Shard(k, n));
        }
    }
    let all = faults(bench.module);
    let faults: Vec<FaultSpec> = match &sel.faults {
        None => all,
        Some(names) => {
            for n in names {
                if !all.iter().any(|f| &f.label == n || f.fault.name() == n) {
                    return Err(SelectionError::Fault(
                        n.clone(),
                        all.iter().map(|f| f.label.clone()).collect(),
                    ));
                }
            }
            all.into_iter()
                .filter(|f| names.iter().any(|n| &f.label == n || f.fault.name() == n))
                .collect()
        }
    };
    let corners = match sel.parts {
        Some((0, _)) => return Err(SelectionError::Range("--parts: at least one part")),
        Some(_) if sel.corners.is_some() => {
            return Err(SelectionError::Range(
                "--corners and --parts exclude each other: a Monte Carlo run draws its parts at the nominal corner",
            ))
        }
        Some((n, seed)) => parts(bench.module, n, seed),
        None => corners(sel.cold_c, sel.hot_c),
    };
    if let Some(names) = &sel.corners {
        for n in names {
            if !corners.iter().any(|c| c.name == *n) {
                return Err(SelectionError::Corner(n.clone()));
            }
        }
    }
    let c = bench.cfg.config();
    let (min, max) = (
        c.units().mw(c.power.min_setpoint_ou),
        c.units().mw(c.power.max_setpoint_ou),
    );
    let setpoints = sel
        .setpoints_mw
        .clone()
        .unwrap_or_else(|| vec![Plan::new(bench.module, bench.cfg).setpoint_mw]);
    for &mw in &setpoints {
        if !(mw.is_finite() && mw >= min && mw <= max) {
            return Err(SelectionError::Setpoint { mw, min, max });
        }
    }
    let moments = sel.moments.clone().unwrap_or(Moment::ALL.to_vec());
    let mut out = Vec::new();
    let mut index = 0;
    for (fi, f) in faults.iter().enumerate() {
        for &m in &moments {
            if matches!(m, Moment::Latent | Moment::ClearRetry) && !standing(&f.fault) {
                continue;
            }
            if m == Moment::ClearRetry && !f.must_latch {
                continue;
            }
            for (ci, corner) in corners.iter().enumerate() {
                if sel
                    .corners
                    .as_ref()
                    .is_some_and(|n| !n.contains(&corner.name))
                {
                    continue;
                }
                // A Monte Carlo run may hold its slow faults to its first
                // parts (not numbered on the others).
                if f.watch == WatchKind::Slow
                    && sel.parts.is_some()
                    && sel.slow_parts.is_some_and(|n| ci >= n as usize)
                {
                    continue;
                }
                for &setpoint_mw in &setpoints {
                    let keep = sel
                        .shard
                        .is_none_or(|(k, n)| index % n as usize == (k - 1) as usize);
                    if keep {
                        out.push(Case {
                            index,
                            fault: fi,
                            moment: m,
                            corner: ci,
                            setpoint_mw,
                        });
                    }
                    index += 1;
                }
            }
        }
    }
    if index == 0 {
        return Err(SelectionError::Empty);
    }
    Ok(CasePlan {
        faults,
        corners,
        cases: out,
        total: index,
    })
}

/// The campaign's operating points on a board: the setpoint is two thirds
/// of the highest, the setpoint change goes to one third, and the
/// soft-start injection comes 1 ms into the current ramp.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Plan {
    /// Setpoint, mW.
    pub setpoint_mw: f64,
    /// Setpoint after the change, mW.
    pub changed_mw: f64,
    /// Supply during the sag, V.
    pub sag_v: f64,
    /// Injection moment during soft start, ms.
    pub soft_start_ms: f64,
    /// Ambient of the derating moment, degC: 20 % of the way from the
    /// board's derating knee to its cut-off, so the mount (which starts at
    /// ambient) is derating from the first tick.
    pub derating_ambient_c: f64,
    /// When emission may begin after the enable request, ms.
    pub emission_ms: f64,
}

impl Plan {
    /// The plan for a module and its configuration.
    pub fn new(module: &DemoModule, cfg: &ValidConfig) -> Self {
        let c = cfg.config();
        let max = c.units().mw(c.power.max_setpoint_ou);
        Plan {
            setpoint_mw: max * 2.0 / 3.0,
            changed_mw: max / 3.0,
            sag_v: module.supply_v * 0.6,
            soft_start_ms: ENABLE_MS + f64::from(c.ramp.emission_delay_ms) + 1.0,
            derating_ambient_c: {
                let knee = c.derating.knee_degc.to_num::<f64>();
                let cutoff = c.derating.cutoff_degc.to_num::<f64>();
                knee + 0.2 * (cutoff - knee)
            },
            emission_ms: f64::from(c.ramp.emission_delay_ms),
        }
    }
}

/// The fault as injected on a corner: a degrading monitor compounds with
/// the corner's tracking (the two multiply).
fn compound(fault: HwFault, corner: &Corner) -> HwFault {
    match fault {
        HwFault::MonitorDegrade { factor } => HwFault::MonitorDegrade {
            factor: factor * corner.tracking,
        },
        f => f,
    }
}

/// Watch window of a slow fault, ms: five of the heatsink's time
/// constants (with the fault's resistance factor), at most the bound.
fn slow_watch_ms(module: &DemoModule, fault: &HwFault, bound_s: f64) -> f64 {
    let th = &module.thermal;
    let factor = match fault {
        HwFault::HeatsinkLoss { factor } => *factor,
        _ => 1.0,
    };
    let tau_s = th.c_h_j_per_k * th.r_ha_k_per_w * factor
        + th.c_c_j_per_k * (th.r_ch_k_per_w + th.r_ha_k_per_w * factor);
    (5.0 * tau_s).min(bound_s) * 1e3
}

/// The longest run of a campaign's cases on `module`, ms: the latest
/// injection (the retry's, after a latch in steady regulation) plus the
/// longest watch window of `faults` (what a protection held off by its
/// debounce, [`without::Switched::check_run`], must outlast).
pub fn longest_run_ms(module: &DemoModule, faults: &[FaultSpec], slow_bound_s: f64) -> f64 {
    let watch = faults
        .iter()
        .map(|f| match f.watch {
            WatchKind::Fast => FAST_WATCH_MS,
            WatchKind::Slow => slow_watch_ms(module, &f.fault, slow_bound_s).max(FAST_WATCH_MS),
        })
        .fold(0.0, f64::max);
    STEADY_MS + RETRY_AFTER_MS + 1.0 + watch
}

struct Timing {
    inject_ms: f64,
    /// When the fault reaches the laser (latency reference), ms.
    reference_ms: f64,
    watch_ms: f64,
}

fn scenario(
    bench: &Bench<'_>,
    spec: &FaultSpec,
    case: &Case,
    corner: &Corner,
    bound_s: f64,
) -> (Scenario, Timing) {
    let plan = Plan::new(bench.module, bench.cfg);
    let mut ev = vec![
        Event {
            at_ms: 0.2,
            action: Action::SetPower {
                mw: case.setpoint_mw,
            },
        },
        Event {
            at_ms: ENABLE_MS,
            action: Action::Enable,
        },
    ];
    if corner.aged_hours > 0.0 {
        ev.push(Event {
            at_ms: 0.0,
            action: Action::Inject {
                fault: HwFault::Aging {
                    hours: corner.aged_hours,
                },
            },
        });
    }
    let is_degrade = matches!(spec.fault, HwFault::MonitorDegrade { .. });
    if corner.tracking != 1.0 {
        ev.push(Event {
            at_ms: 0.0,
            action: Action::Inject {
                fault: HwFault::MonitorDegrade {
                    factor: corner.tracking,
                },
            },
        });
    }
    let fault = if is_degrade {
        compound(spec.fault, corner)
    } else {
        spec.fault
    };
    let watch_ms = match spec.watch {
        WatchKind::Fast => FAST_WATCH_MS,
        WatchKind::Slow => slow_watch_ms(bench.module, &spec.fault, bound_s).max(FAST_WATCH_MS),
    };
    let (inject_ms, reference_ms, watch_ms) = match case.moment {
        Moment::SoftStart => (plan.soft_start_ms, plan.soft_start_ms, watch_ms),
        Moment::Steady | Moment::Derating => (STEADY_MS, STEADY_MS, watch_ms),
        Moment::SetpointChange => {
            ev.push(Event {
                at_ms: STEADY_MS,
                action: Action::SetPower {
                    mw: plan.changed_mw.min(case.setpoint_mw),
                },
            });
            (STEADY_MS + 0.2, STEADY_MS + 0.2, watch_ms)
        }
        Moment::Latent => (LATENT_MS, ENABLE_MS + plan.emission_ms, watch_ms),
        Moment::SoftStop => {
            ev.push(Event {
                at_ms: STEADY_MS,
                action: Action::Disable,
            });
            (STEADY_MS + 0.5, STEADY_MS + 0.5, watch_ms)
        }
        Moment::ClearRetry => {
            let retry = STEADY_MS + RETRY_AFTER_MS;
            ev.push(Event {
                at_ms: retry,
                action: Action::Clear,
            });
            ev.push(Event {
                at_ms: retry + 0.05,
                action: Action::Enable,
            });
            (
                STEADY_MS,
                retry + 0.05 + plan.emission_ms,
                RETRY_AFTER_MS + watch_ms,
            )
        }
    };
    let ambient_c = match case.moment {
        Moment::Derating => plan.derating_ambient_c.max(corner.ambient_c),
        _ => corner.ambient_c,
    };
    ev.push(Event {
        at_ms: inject_ms,
        action: Action::Inject { fault },
    });
    (
        Scenario {
            name: format!("{} {} {}", spec.label, case.moment.name(), corner.name),
            board: bench.name.into(),
            duration_ms: inject_ms + watch_ms,
            ambient_c,
            seed: SEED,
            diode_model: DiodeModel::QuasiStatic,
            trace_every: 1,
            aging_speedup: 1.0,
            events: ev,
            expects: Vec::new(),
        },
        Timing {
            inject_ms,
            reference_ms,
            watch_ms,
        },
    )
}

/// Run one case from t = 0.
pub fn run_case(
    bench: &Bench<'_>,
    spec: &FaultSpec,
    case: &Case,
    corner: &Corner,
    slow_bound_s: f64,
) -> Result<CaseResult, String> {
    let (sc, timing) = scenario(bench, spec, case, corner, slow_bound_s);
    let module = corner.module(bench.module);
    let res = sim::run_recording(
        &sc,
        &module,
        bench.cfg.clone(),
        bench.latency,
        sim::Record::VERDICT,
    )
    .map_err(|e| e.to_string())?;
    let at = CaseAt {
        bench,
        spec,
        case,
        corner,
        timing: &timing,
    };
    // The run's retained rows (fewer than the cap): offered again, all kept.
    kept::with_rows(|rows| {
        for r in &res.trace {
            rows.push(Kept::of(r));
        }
        let row_ticks = res.trace_stride * rows.stride();
        assess(&at, &res, rows.rows(), row_ticks)
    })
}

/// The scenario of a case without its injection (the last event), named
/// after nothing: what the cases of one fork share.
fn lead_in(mut sc: Scenario) -> Scenario {
    sc.events.pop();
    sc.name = String::new();
    sc
}

/// Run cases that share their lead-in (the same corner, moment, setpoint
/// and watch length: [`fork_groups`]) by running the lead-in once to the
/// injection moment and forking the run for each fault. Each result is
/// bit-identical to [`run_case`]'s.
pub fn run_forked(
    bench: &Bench<'_>,
    plan: &CasePlan,
    group: &[Case],
    slow_bound_s: f64,
) -> Result<Vec<CaseResult>, String> {
    let Some(first) = group.first() else {
        return Ok(Vec::new());
    };
    let corner = &plan.corners[first.corner];
    let (sc, timing) = scenario(
        bench,
        &plan.faults[first.fault],
        first,
        corner,
        slow_bound_s,
    );
    let module = corner.module(bench.module);
    let fork = sim::fork_recording(
        &lead_in(sc),
        &module,
        bench.cfg.clone(),
        bench.latency,
        timing.inject_ms,
        sim::Record::VERDICT,
    )
    .map_err(|e| e.to_string())?;
    // The lead-in's rows are offered again ahead of the streamed ones: the
    // same retention as the run from t = 0 while the lead-in kept every
    // row (a campaign's lead-ins last some ten milliseconds).
    if fork.rows_stride() != 1 {
        return Err(format!(
            "a lead-in of {} ticks is longer than the rows a run keeps",
            fork.tick()
        ));
    }
    group
        .iter()
        .map(|case| {
            let spec = &plan.faults[case.fault];
            let (sc, timing) = scenario(bench, spec, case, corner, slow_bound_s);
            let inject = sc.events.last().ok_or("a case without its injection")?;
            let at = CaseAt {
                bench,
                spec,
                case,
                corner,
                timing: &timing,
            };
            kept::with_rows(|rows| {
                for r in fork.rows() {
                    rows.push(Kept::of(r));
                }
                let res = fork
                    .resume_streamed(inject, rows)
                    .map_err(|e| e.to_string())?;
                let row_ticks = rows.stride();
                assess(&at, &res, rows.rows(), row_ticks)
            })
        })
        .collect()
}

/// The cases of a plan grouped by shared lead-in (corner, injection
/// moment and the scenario before the injection), each group in campaign
/// order, the groups in the order of their first case.
pub fn fork_groups(bench: &Bench<'_>, plan: &CasePlan, slow_bound_s: f64) -> Vec<Vec<Case>> {
    let mut groups: Vec<Vec<Case>> = Vec::new();
    let mut by_key: std::collections::HashMap<String, usize> = std::collections::HashMap::new();
    for case in &plan.cases {
        let corner = &plan.corners[case.corner];
        let (sc, timing) = scenario(bench, &plan.faults[case.fault], case, corner, slow_bound_s);
        // Debug formatting of f64 round-trips: equal keys, equal lead-ins.
        let key = format!(
            "{} {:?} {:?}",
            case.corner,
            timing.inject_ms.to_bits(),
            lead_in(sc)
        );
        match by_key.get(&key) {
            Some(&g) => groups[g].push(*case),
            None => {
                by_key.insert(key, groups.len());
                groups.push(vec![*case]);
            }
        }
    }
    groups
}

/// A case as it is judged: its bench, fault, place in the plan, corner
/// and timing ([`assess`]).
#[derive(Clone, Copy)]
struct CaseAt<'a, 'b> {
    bench: &'a Bench<'b>,
    spec: &'a FaultSpec,
    case: &'a Case,
    corner: &'a Corner,
    timing: &'a Timing,
}

/// Judge a finished run of a case from its happenings and final state
/// (`res`) and what it kept of its recorded rows (`rows`, in tick order,
/// `row_ticks` apart).
fn assess(
    at: &CaseAt<'_, '_>,
    res: &sim::RunResult,
    rows: &[Kept],
    row_ticks: u64,
) -> Result<CaseResult, String> {
    let CaseAt {
        bench,
        spec,
        case,
        corner,
        timing,
    } = *at;
    let tick_hz = res.tick_hz;
    let inject_tick = sim::tick_at(timing.inject_ms, tick_hz);
    let reference_tick = sim::tick_at(timing.reference_ms, tick_hz);
    let mut caught_by: Vec<String> = Vec::new();
    let mut first_fault_tick = None;
    let mut latched_before_injection = false;
    // At a retry, what counts is what the second start does.
    let retry_tick = sim::tick_at(STEADY_MS + RETRY_AFTER_MS, tick_hz);
    let from_tick = if case.moment == Moment::ClearRetry {
        retry_tick
    } else {
        inject_tick
    };
    for h in &res.happenings {
        if let Happening::Fault { tick, fault, .. } = h {
            latched_before_injection |= *tick < inject_tick;
            if *tick >= from_tick {
                if !caught_by.iter().any(|c| c == fault) {
                    caught_by.push((*fault).to_string());
                }
                if first_fault_tick.is_none() {
                    first_fault_tick = Some(*tick);
                }
            }
        }
    }
    let dt = 1.0 / f64::from(tick_hz);
    // A standing fault may also be caught by refusing the request: a
    // latent one by refusing the enable, one left standing at a retry by
    // refusing the clear or the enable (the laser never emitted after it).
    // The rows are in tick order: the rows from a tick on are a tail.
    let from = |tick: u64| rows.partition_point(|r| r.tick < tick);
    let dark_after = rows[from(from_tick)..].iter().all(|r| !r.emitting);
    let rejected = res.happenings.iter().any(|h| match h {
        Happening::Rejected { tick, .. } => *tick >= from_tick,
        _ => false,
    });
    let refused = match case.moment {
        Moment::Latent => rejected && dark_after && res.final_state == State::Off,
        Moment::ClearRetry => {
            rejected && dark_after && matches!(res.final_state, State::Off | State::Latched)
        }
        _ => false,
    };
    if refused {
        caught_by.push(ENABLE_REFUSED.into());
    }
    let (before, after) = rows.split_at(from(inject_tick));
    let knee_c = bench.cfg.config().derating.knee_degc.to_num::<f64>();
    let derating_at_injection = before.last().is_some_and(|r| r.sensed_c > knee_c);
    let emitting_at_end = res.final_state.is_emitting();
    let judgement = judge(bench.lines, after, dt * row_ticks as f64, emitting_at_end)
        .map_err(|e| e.to_string())?;
    let settled = !emitting_at_end || {
        let n = after.len();
        let a = after[n - n.div_ceil(10)];
        let b = after[n - 1];
        (a.p_mw - b.p_mw).abs() <= 0.01 * bench.lines.rated_power_mw
            && (a.tj_c - b.tj_c).abs() <= 0.2
    };
    let latency_ticks = first_fault_tick.map(|t| t.saturating_sub(reference_tick));
    let latency_us = latency_ticks.map(|t| t as f64 * dt * 1e6);
    let reaction_limit_us = spec.reaction_ms.map(|ms| ms * 1e3);
    let expected_hit = caught_by
        .iter()
        .any(|c| c == ENABLE_REFUSED || spec.expected.contains(&c.as_str()));
    // At a soft stop the requested stop is the safe state.
    let must_latch = spec.must_latch && case.moment != Moment::SoftStop;
    let detection = if caught_by.is_empty() {
        if latched_before_injection && res.final_state == State::Latched {
            Detection::AlreadyLatched
        } else if must_latch {
            Detection::Missed
        } else {
            Detection::NotRequired
        }
    } else if !expected_hit {
        Detection::Unexpected
    } else if must_latch
        && !refused
        && matches!((latency_us, reaction_limit_us), (Some(l), Some(r)) if l > r)
    {
        Detection::Late
    } else {
        Detection::Expected
    };
    let mut reasons: Vec<String> = unsafe_reasons(bench.lines, &judgement, res.damaged)
        .into_iter()
        .map(String::from)
        .collect();
    match detection {
        Detection::Missed => reasons.insert(0, "fault that must latch not detected".into()),
        Detection::Late => reasons.insert(
            0,
            format!(
                "detected after {:.0} us, later than the {:.0} us reaction limit",
                latency_us.unwrap_or(0.0),
                reaction_limit_us.unwrap_or(0.0)
            ),
        ),
        _ => {}
    }
    // A retry with the fault still present must end dark.
    if case.moment == Moment::ClearRetry && emitting_at_end {
        reasons.push("emitting after a retry with the fault still present".into());
    }
    let finding = (detection == Detection::Unexpected).then(|| {
        format!(
            "caught by {}, expected {}",
            caught_by.join(" "),
            spec.expected.join(" or ")
        )
    });
    Ok(CaseResult {
        index: case.index,
        fault: spec.label.clone(),
        kind: spec.fault.name().into(),
        moment: case.moment,
        corner: corner.name.clone(),
        setpoint_mw: case.setpoint_mw,
        must_latch,
        expected: spec.expected.iter().map(|s| s.to_string()).collect(),
        caught_by,
        detection,
        latency_ticks,
        latency_us,
        reaction_limit_us,
        watch_ms: timing.watch_ms,
        settled,
        judgement,
        damaged: res.damaged,
        final_state: res.final_state.name().into(),
        derating_at_injection,
        latched_before_injection,
        safe: reasons.is_empty(),
        unsafe_reasons: reasons,
        finding,
    })
}

/// Run a campaign selection in parallel with a progress bar: the groups
/// of cases that share a lead-in ([`fork_groups`]) spread over the worker
/// threads, each forked at its injection moment ([`run_forked`]). The
/// results come back in campaign order and do not depend on the number of
/// threads (each case is computed alone from its own seeded run).
pub fn run(bench: &Bench<'_>, sel: &Selection) -> Result<Vec<CaseResult>, String> {
    let plan = cases(bench, sel).map_err(|e| e.to_string())?;
    let groups = fork_groups(bench, &plan, sel.slow_bound_s);
    let pb = crate::progress::bar(plan.cases.len() as u64, "cases");
    let done: Result<Vec<Vec<CaseResult>>, String> = groups
        .par_iter()
        .map(|g| {
            let r = run_forked(bench, &plan, g, sel.slow_bound_s);
            pb.inc(g.len() as u64);
            r
        })
        .collect();
    pb.finish_and_clear();
    let mut out: Vec<CaseResult> = done?.into_iter().flatten().collect();
    out.sort_by_key(|r| r.index);
    Ok(out)
}

/// Run a selection on a bench and make its record.
pub fn run_record(
    bench: &Bench<'_>,
    module_name: &str,
    board_file: &str,
    sel: &Selection,
) -> Result<report::Record, String> {
    let total = cases(bench, sel).map_err(|e| e.to_string())?.total;
    let results = run(bench, sel)?;
    let module_json = serde_json::to_string(bench.module).map_err(|e| e.to_string())?;
    Ok(report::Record {
        header: report::Header {
            tool: format!("diodestat {}", env!("CARGO_PKG_VERSION")),
            command: report::command_line(board_file, sel),
            board: bench.name.to_string(),
            board_file: board_file.to_string(),
            config_fingerprint: bench.cfg.fingerprint().to_string(),
            module: module_name.to_string(),
            module_hash: format!("{:016x}", fnv1a64(module_json.as_bytes())),
            seed: SEED,
            diode_model: "quasi-static".into(),
            dac_latency_ticks: bench.latency.get(),
            selection: Selection {
                shard: None,
                ..sel.clone()
            },
            pass_lines: *bench.lines,
            tolerances: bench.module.tolerances,
            sensor_classed: bench.module.sensor.sensor.rtd_class().is_some(),
        },
        shard: sel.shard,
        total_cases: total,
        results,
        monte_carlo: None,
        caution: crate::safety::SAFETY_CAUTION.to_string(),
    }
    .with_figures())
}

/// FNV-1a 64 over bytes (the same function as the core's configuration
/// fingerprint), naming the module description a campaign ran on.
fn fnv1a64(bytes: &[u8]) -> u64 {
    bytes.iter().fold(0xcbf2_9ce4_8422_2325, |h, b| {
        (h ^ u64::from(*b)).wrapping_mul(0x0000_0100_0000_01b3)
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::board_file::{load_board, LoadedBoard};

    fn board(name: &str) -> LoadedBoard {
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("../examples")
            .join(name)
            .join("board.toml");
        load_board(&path).unwrap()
    }

    fn bench(b: &LoadedBoard) -> Bench<'_> {
        Bench {
            name: &b.name,
            module: &b.module,
            cfg: &b.valid,
            latency: b.latency,
            lines: b.pass_lines.as_ref().unwrap(),
        }
    }

    /// A few fast faults and one slow one (kept short) at every moment on
    /// two drawn parts: forks of every sort of lead-in.
    fn selection() -> Selection {
        Selection {
            faults: Some(
                [
                    "sensor-open",
                    "dac-stuck",
                    "dac-bus",
                    "missed-ticks",
                    "monitor-drift",
                ]
                .map(String::from)
                .to_vec(),
            ),
            slow_bound_s: 0.05,
            parts: Some((2, 3)),
            ..Selection::default()
        }
    }

    fn json(r: &[CaseResult]) -> String {
        serde_json::to_string(r).unwrap()
    }

    /// Every case run from a fork at its injection moment gives exactly
    /// the result of the same case run from t = 0, and the forks are
    /// shared (fewer lead-ins than cases).
    #[test]
    fn forked_cases_equal_cases_run_from_t0() {
        let b = board("demo-red-30");
        let bench = bench(&b);
        let sel = selection();
        let plan = cases(&bench, &sel).unwrap();
        let groups = fork_groups(&bench, &plan, sel.slow_bound_s);
        assert!(groups.len() * 3 < plan.cases.len(), "{}", groups.len());
        assert_eq!(groups.iter().map(Vec::len).sum::<usize>(), plan.cases.len());
        for g in &groups {
            let forked = run_forked(&bench, &plan, g, sel.slow_bound_s).unwrap();
            let from_t0: Vec<CaseResult> = g
                .iter()
                .map(|c| {
                    run_case(
                        &bench,
                        &plan.faults[c.fault],
                        c,
                        &plan.corners[c.corner],
                        sel.slow_bound_s,
                    )
                    .unwrap()
                })
                .collect();
            assert_eq!(json(&forked), json(&from_t0));
        }
    }

    /// One worker thread or two: the same results in the same order.
    #[test]
    fn results_do_not_depend_on_the_thread_count() {
        let b = board("demo-pump-5w");
        let bench = bench(&b);
        let sel = selection();
        let on = |n: usize| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(n)
                .build()
                .unwrap()
                .install(|| run(&bench, &sel).unwrap())
        };
        let one = on(1);
        assert_eq!(one.len(), cases(&bench, &sel).unwrap().total);
        assert!(one.windows(2).all(|w| w[0].index < w[1].index));
        assert_eq!(json(&one), json(&on(2)));
    }

    /// Every drawn value lies in its band, the bands are used (the draws
    /// spread), and the threshold, slope and tracking draws are those of
    /// the first stream alone (as before T0 and the converter chain were
    /// drawn).
    #[test]
    fn parts_draw_every_tolerance_in_its_band() {
        let t = PartTolerances {
            ntc_r25: 0.02,
            ntc_beta: 0.01,
            ..PartTolerances::CHAIN_EXAMPLE
        };
        let p = draw_parts(&t, false, 500, 11);
        let within = |v: f64, c: f64, h: f64| (v - c).abs() <= h;
        for k in &p {
            assert!(within(k.threshold, 1.0, t.threshold));
            assert!(within(k.slope, 1.0, t.slope));
            assert!(within(k.tracking, 1.0, t.tracking));
            assert!(within(k.t0, 1.0, t.t0));
            assert!(within(k.sense_gain, 1.0, t.sense_gain));
            assert!(within(k.sense_offset_mv, 0.0, t.sense_offset_mv));
            assert!(within(k.dac_gain, 1.0, t.dac_gain));
            assert!(within(k.dac_offset_mv, 0.0, t.dac_offset_mv));
            assert!(within(k.ntc_r25, 1.0, t.ntc_r25));
            assert!(within(k.ntc_beta, 1.0, t.ntc_beta));
        }
        let spread = |f: fn(&Corner) -> f64, h: f64| {
            let lo = p.iter().map(f).fold(f64::INFINITY, f64::min);
            let hi = p.iter().map(f).fold(f64::NEG_INFINITY, f64::max);
            hi - lo > 1.8 * h
        };
        assert!(spread(|k| k.t0, t.t0));
        assert!(spread(|k| k.sense_offset_mv, t.sense_offset_mv));
        assert!(spread(|k| k.dac_gain, t.dac_gain));
        assert!(spread(|k| k.ntc_r25, t.ntc_r25));
        assert!(spread(|k| k.ntc_beta, t.ntc_beta));
        // The NTC draws come from their own stream: the chain's draws are
        // those drawn without them.
        let without = draw_parts(&PartTolerances::CHAIN_EXAMPLE, false, 500, 11);
        for (a, b) in p.iter().zip(&without) {
            assert_eq!((a.t0, a.dac_offset_mv), (b.t0, b.dac_offset_mv));
            assert_eq!((b.ntc_r25, b.ntc_beta), (1.0, 1.0));
        }
        let mut rng = crate::plant::Rng::new(11);
        for k in &p {
            for (v, h) in [
                (k.threshold, t.threshold),
                (k.slope, t.slope),
                (k.tracking, t.tracking),
            ] {
                assert_eq!(v, 1.0 + h * (2.0 * rng.uniform() - 1.0));
            }
        }
    }

    /// A part's converter chain reaches the plant: its DAC gain scales the
    /// full-scale current, its offsets shift the setpoint and the sense
    /// voltage, its T0 factor the diode's T0.
    #[test]
    fn a_part_moves_the_module() {
        let base = DemoModule::pump();
        let part = Corner {
            t0: 1.1,
            sense_gain: 0.99,
            sense_offset_mv: 1.5,
            dac_gain: 1.01,
            dac_offset_mv: -2.0,
            ..nominal()
        };
        let m = part.module(&base);
        assert_eq!(m.diode.t0_k, base.diode.t0_k * 1.1);
        let d0 = crate::plant::Driver::new(base.driver.clone()).unwrap();
        let d = crate::plant::Driver::new(m.driver.clone()).unwrap();
        let gm = base.driver.transconductance_a_per_v;
        let want = d0.setpoint_a(2000) * 1.01 - 2e-3 * gm;
        assert!((d.setpoint_a(2000) - want).abs() < 1e-12);
        assert_eq!(d.setpoint_a(0), 0.0, "no negative current");
        let want = d0.sense_voltage(1.0) * 0.99 + 1.5e-3;
        assert!((d.sense_voltage(1.0) - want).abs() < 1e-12);
        assert_eq!(nominal().module(&base), base);
    }

    /// An NTC part's R25 and B factors reach the module's sensor (an RTD
    /// ignores them); the part's module keeps the nominal curve beside them.
    #[test]
    fn a_part_moves_an_ntc_sensor() {
        use crate::plant::{Ntc, TempSensor};
        let base = DemoModule::visible();
        let part = Corner {
            ntc_r25: 1.02,
            ntc_beta: 0.99,
            ..nominal()
        };
        let TempSensor::Ntc(n) = part.module(&base).sensor.sensor else {
            panic!("the visible module has an NTC");
        };
        let (r, b) = n.deviations();
        assert!(
            (r - 0.02).abs() < 1e-12 && (b + 0.01).abs() < 1e-12,
            "{r} {b}"
        );
        assert_eq!(
            TempSensor::Ntc(n.clone()).nominal(),
            TempSensor::Ntc(Ntc::beta(10_000.0, 3380.0))
        );
        let pump = DemoModule::pump();
        assert_eq!(part.module(&pump), pump);
    }

    proptest::proptest! {
        /// Whatever the tolerances and the seed, every part's NTC factors
        /// lie within their declared bands.
        #[test]
        fn ntc_draws_stay_in_their_bands(
            r25 in 0.0f64..0.2,
            beta in 0.0f64..0.2,
            seed in proptest::num::u64::ANY,
        ) {
            let t = PartTolerances { ntc_r25: r25, ntc_beta: beta, ..PartTolerances::DEMO };
            for k in draw_parts(&t, false, 64, seed) {
                proptest::prop_assert!((k.ntc_r25 - 1.0).abs() <= r25, "{}", k.ntc_r25);
                proptest::prop_assert!((k.ntc_beta - 1.0).abs() <= beta, "{}", k.ntc_beta);
            }
        }
    }

    /// A Monte Carlo record carries its figures in the JSON; two shards,
    /// through JSON and merged, give exactly the single run's JSON, figures
    /// included; the worst part's drawn values are those of its draw.
    #[test]
    fn monte_carlo_figures_are_in_the_json_and_merge() {
        let b = board("demo-red-30");
        let bench = bench(&b);
        let sel = Selection {
            faults: Some(vec!["monitor-intermittent".into(), "sensor-open".into()]),
            moments: Some(vec![Moment::Steady, Moment::SoftStart]),
            parts: Some((5, 2)),
            ..Selection::default()
        };
        let file = "examples/demo-red-30/board.toml";
        let single = run_record(&bench, "m", file, &sel).unwrap();
        let mc = single.monte_carlo.clone().unwrap();
        assert_eq!((mc.parts, mc.seed, mc.cases), (5, 2, 40));
        assert_eq!(mc.per_fault.len(), 4);
        assert_eq!(mc.per_fault.iter().map(|f| f.cases).sum::<u64>(), 40);
        assert_eq!(
            mc.per_fault.iter().map(|f| f.unsafe_cases).sum::<u64>(),
            mc.unsafe_cases
        );
        let drawn = parts(bench.module, 5, 2);
        assert!(drawn.contains(&mc.worst_part.part));
        let worst = &mc.worst_part.part.name;
        let unsafe_of = |name: &str| {
            single
                .results
                .iter()
                .filter(|r| r.corner == name && !r.safe)
                .count() as u64
        };
        assert_eq!(mc.worst_part.unsafe_cases, unsafe_of(worst));
        assert!(drawn.iter().all(|p| unsafe_of(&p.name) <= unsafe_of(worst)));
        let text = serde_json::to_string_pretty(&single).unwrap();
        assert!(text.contains("\"worst_part\"") && text.contains("\"dac_offset_mv\""));
        let back = |r: &report::Record| -> report::Record {
            serde_json::from_str(&serde_json::to_string_pretty(r).unwrap()).unwrap()
        };
        let shards: Vec<_> = (1..=2)
            .map(|k| {
                let r = run_record(
                    &bench,
                    "m",
                    file,
                    &Selection {
                        shard: Some((k, 2)),
                        ..sel.clone()
                    },
                )
                .unwrap();
                assert_eq!(r.monte_carlo, None);
                back(&r)
            })
            .collect();
        let merged = report::merge(shards).unwrap();
        assert_eq!(serde_json::to_string_pretty(&merged).unwrap(), text);
        assert!(report::markdown(&merged).contains("Worst part: part-"));
    }

    /// `--slow-parts K` holds the slow faults to the first K parts; the
    /// fast ones run on every part; without it every fault runs on every
    /// part; with corners it does nothing.
    #[test]
    fn slow_faults_run_on_the_first_parts() {
        let b = board("demo-red-30");
        let bench = bench(&b);
        let sel = Selection {
            faults: Some(vec!["heatsink-loss".into(), "sensor-open".into()]),
            moments: Some(vec![Moment::Steady]),
            parts: Some((5, 1)),
            slow_parts: Some(2),
            ..Selection::default()
        };
        let plan = cases(&bench, &sel).unwrap();
        let on = |fault: &str| -> Vec<usize> {
            plan.cases
                .iter()
                .filter(|c| plan.faults[c.fault].fault.name() == fault)
                .map(|c| c.corner)
                .collect()
        };
        assert_eq!(on("heatsink-loss"), vec![0, 1]);
        assert_eq!(on("sensor-open"), vec![0, 1, 2, 3, 4]);
        assert_eq!(plan.total, 7);
        let all = cases(
            &bench,
            &Selection {
                slow_parts: None,
                ..sel.clone()
            },
        )
        .unwrap();
        assert_eq!(all.total, 10);
        let corners = cases(
            &bench,
            &Selection {
                parts: None,
                ..sel.clone()
            },
        )
        .unwrap();
        assert_eq!(corners.total, 14);
        assert!(report::command_line("b.toml", &sel)
            .contains("--parts 5 --parts-seed 1 --slow-parts 2"));
    }
}
