//! Fault campaigns: every injectable hardware fault × injection moments ×
//! plant corners, run in parallel; each case is judged safe or unsafe.
//!
//! A case is **unsafe** when the fault was not latched (for faults that must
//! latch), when the optical power stayed above the optical ceiling by more
//! than the margin for longer than the firmware can react (one tick until
//! the next sample sees the fault, plus the board's drive latency), or when
//! the facet reached its damage limit. Faults the core is meant to ride through (an aging step, a
//! heatsink-fan loss that only derates) are safe without a latch as long as
//! the power stays within the ceiling.

use rayon::prelude::*;
use serde::Serialize;

use diodestat_core::{State, ValidConfig};

use crate::plant::DemoModule;
use crate::scenario::{Action, AdcChannel, DiodeModel, Event, HwFault, Scenario};
use crate::sim::{self, DacLatency, Happening};
use crate::stability::corners::{SLOPE_SPREAD, THRESHOLD_SPREAD};

/// When the fault is injected.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Moment {
    /// During soft start.
    SoftStart,
    /// In steady regulation.
    Steady,
    /// Right after a setpoint change.
    SetpointChange,
    /// While derating (hot mount).
    Derating,
    /// Latent: present before the enable request (a fault the board
    /// powered up with). Safe when the enable is refused or the fault
    /// latches; events that are not a standing state (missed ticks) are
    /// not run at this moment.
    Latent,
}

/// A plant corner.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Corner {
    /// Name.
    pub name: &'static str,
    /// Ambient, degC.
    pub ambient_c: f64,
    /// Threshold-current factor (part spread, 1 nominal).
    pub threshold: f64,
    /// Slope-efficiency factor (part spread, 1 nominal).
    pub slope: f64,
    /// Monitor responsivity factor (tracking-ratio spread).
    pub tracking: f64,
    /// Operating hours before the run (aged diode).
    pub aged_hours: f64,
}

/// The corners of the shipped campaign (the part spreads are the loop
/// analysis's standard ones).
pub const CORNERS: [Corner; 7] = [
    Corner {
        name: "nominal",
        ambient_c: 25.0,
        threshold: 1.0,
        slope: 1.0,
        tracking: 1.0,
        aged_hours: 0.0,
    },
    Corner {
        name: "cold",
        ambient_c: 0.0,
        threshold: 1.0,
        slope: 1.0,
        tracking: 1.0,
        aged_hours: 0.0,
    },
    Corner {
        name: "hot",
        ambient_c: 40.0,
        threshold: 1.0,
        slope: 1.0,
        tracking: 1.0,
        aged_hours: 0.0,
    },
    Corner {
        name: "tracking-low",
        ambient_c: 25.0,
        threshold: 1.0,
        slope: 1.0,
        tracking: 0.9,
        aged_hours: 0.0,
    },
    Corner {
        name: "aged",
        ambient_c: 25.0,
        threshold: 1.0,
        slope: 1.0,
        tracking: 1.0,
        aged_hours: 20_000.0,
    },
    Corner {
        name: "threshold-high",
        ambient_c: 25.0,
        threshold: 1.0 + THRESHOLD_SPREAD,
        slope: 1.0,
        tracking: 1.0,
        aged_hours: 0.0,
    },
    Corner {
        name: "slope-low",
        ambient_c: 25.0,
        threshold: 1.0,
        slope: 1.0 - SLOPE_SPREAD,
        tracking: 1.0,
        aged_hours: 0.0,
    },
];

/// The faults of the shipped campaign, and whether each must latch. The
/// supply sag's voltage here is the 5 V module's; [`Plan::fault`] sets it
/// relative to the module's nominal supply.
pub fn faults() -> Vec<(HwFault, bool)> {
    vec![
        (HwFault::SensorOpen, true),
        (HwFault::SensorShort, true),
        (HwFault::MonitorOpen, true),
        (HwFault::MonitorDegrade { factor: 0.5 }, false),
        (HwFault::SourceFailHigh, true),
        (HwFault::DacStuck { code: 0 }, true),
        (HwFault::SenseGain { factor: 1.5 }, true),
        (HwFault::InterlockOpen, true),
        (HwFault::SupplySag { to_v: 3.0 }, true),
        (HwFault::HeatsinkLoss { factor: 4.0 }, false),
        (HwFault::Aging { hours: 20_000.0 }, false),
        (
            HwFault::AdcStuck {
                channel: AdcChannel::Current,
                code: 0,
            },
            true,
        ),
        (HwFault::MissedTicks { ticks: 10 }, true),
        // An intermittent monitor contact that reads light one tick in
        // twenty: dark on 95 % of the ticks, which a debounce restarting on
        // one clean tick never trips. (A contact open on fewer ticks reads,
        // behind the monitor's RC front end, as a lower responsivity: that
        // is the degrading monitor's case.)
        (
            HwFault::MonitorIntermittent {
                open_fraction: 0.95,
            },
            true,
        ),
        // A monitor losing 2 % of its responsivity per millisecond: caught by
        // the plausibility check where the board has one; the power stays
        // within the optical ceiling for the case's 30 ms either way.
        (HwFault::MonitorDrift { per_s: 20.0 }, false),
        (HwFault::ExternalFault, true),
        // The board's buses behind the core's edge: a DAC write, the enable
        // line, the interlock read. Each must latch its own fault; the DAC
        // bus is made safe by the enable line, the enable line by the DAC
        // written to zero.
        (HwFault::DacBus, true),
        (HwFault::EnablePin, true),
        (HwFault::InterlockPin, true),
    ]
}

/// When a latent fault is injected, ms (before [`ENABLE_MS`]).
pub const LATENT_MS: f64 = 0.1;

/// One case's outcome.
#[derive(Clone, Debug, Serialize)]
pub struct CaseResult {
    /// Fault name.
    pub fault: &'static str,
    /// Moment.
    pub moment: Moment,
    /// Corner name.
    pub corner: &'static str,
    /// Whether the fault must latch.
    pub must_latch: bool,
    /// Whether the core latched.
    pub detected: bool,
    /// Core fault names latched.
    pub core_faults: Vec<&'static str>,
    /// Detection latency, ticks.
    pub latency_ticks: Option<u64>,
    /// Detection latency, µs.
    pub latency_us: Option<f64>,
    /// Peak optical power after injection, mW.
    pub peak_mw: f64,
    /// Energy above the optical ceiling after injection, µJ.
    pub energy_above_uj: f64,
    /// Ticks above the ceiling plus margin.
    pub ticks_over: u64,
    /// Facet damage.
    pub damaged: bool,
    /// Final state.
    pub final_state: &'static str,
    /// The mount was derating when the fault arrived: the temperature the
    /// core read on the last tick before injection was above the derating
    /// knee (the core's own "derating" warning).
    pub derating_at_injection: bool,
    /// The core had latched a fault before the injection (the case's plant
    /// corner cannot run at this moment, e.g. an aged diode that stays dark
    /// under a derated ceiling): the laser was already off when the fault
    /// arrived.
    pub latched_before_injection: bool,
    /// Safe.
    pub safe: bool,
}

/// The campaign's operating points on a board: the setpoint is two thirds
/// of the highest, the setpoint change goes to one third, the supply sag to
/// 60 % of the module's nominal supply (below any sane supply window), and
/// the soft-start injection comes 1 ms into the current ramp.
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
}

impl Plan {
    /// The plan for a module and its configuration.
    pub fn new(module: &DemoModule, cfg: &ValidConfig) -> Self {
        let c = cfg.config();
        let max = c.power.max_setpoint_mw.to_num::<f64>();
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
        }
    }

    /// A fault with its board-relative value (the supply sag).
    pub fn fault(&self, fault: HwFault) -> HwFault {
        match fault {
            HwFault::SupplySag { .. } => HwFault::SupplySag { to_v: self.sag_v },
            f => f,
        }
    }
}

/// When the campaign enables emission, ms.
pub const ENABLE_MS: f64 = 0.5;

fn scenario(
    board: &str,
    plan: &Plan,
    fault: HwFault,
    moment: Moment,
    corner: &Corner,
) -> (Scenario, f64) {
    let mut ev = vec![
        Event {
            at_ms: 0.2,
            action: Action::SetPower {
                mw: plan.setpoint_mw,
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
    let inject_ms = match moment {
        Moment::SoftStart => plan.soft_start_ms,
        Moment::Steady => 30.0,
        Moment::SetpointChange => {
            ev.push(Event {
                at_ms: 30.0,
                action: Action::SetPower {
                    mw: plan.changed_mw,
                },
            });
            30.2
        }
        // The mount starts hot (see `ambient_c` below): the ceiling is
        // derated when the fault arrives.
        Moment::Derating => 30.0,
        Moment::Latent => LATENT_MS,
    };
    let ambient_c = match moment {
        Moment::Derating => plan.derating_ambient_c.max(corner.ambient_c),
        _ => corner.ambient_c,
    };
    ev.push(Event {
        at_ms: inject_ms,
        action: Action::Inject { fault },
    });
    (
        Scenario {
            name: format!("{} {:?} {}", fault.name(), moment, corner.name),
            board: board.into(),
            duration_ms: inject_ms + 30.0,
            ambient_c,
            seed: 1,
            diode_model: DiodeModel::QuasiStatic,
            trace_every: 1,
            events: ev,
            expects: Vec::new(),
        },
        inject_ms,
    )
}

/// Run one case.
#[allow(clippy::too_many_arguments)]
pub fn run_case(
    module_name: &str,
    module: &DemoModule,
    cfg: &ValidConfig,
    (fault, must_latch): (HwFault, bool),
    moment: Moment,
    corner: &Corner,
    ceiling_mw: f64,
    margin: f64,
    latency: DacLatency,
) -> Result<CaseResult, String> {
    let plan = Plan::new(module, cfg);
    let fault = plan.fault(fault);
    let (sc, _inject_ms) = scenario(module_name, &plan, fault, moment, corner);
    let module = module.with_spread(corner.threshold, corner.slope);
    let res = sim::run(&sc, &module, cfg.clone(), latency).map_err(|e| e.to_string())?;
    let inject_tick = res
        .happenings
        .iter()
        .rev()
        .find_map(|h| match h {
            Happening::Injected { tick, fault: f } if *f == fault.name() => Some(*tick),
            _ => None,
        })
        .unwrap_or(0);
    let mut core_faults = Vec::new();
    let mut first_fault_tick = None;
    let mut latched_before_injection = false;
    for h in &res.happenings {
        if let Happening::Fault { tick, fault, .. } = h {
            core_faults.push(*fault);
            latched_before_injection |= *tick < inject_tick;
            if *tick >= inject_tick && first_fault_tick.is_none() {
                first_fault_tick = Some(*tick);
            }
        }
    }
    let dt = 1.0 / f64::from(res.tick_hz);
    let after: Vec<_> = res.trace.iter().filter(|r| r.tick >= inject_tick).collect();
    let knee_c = cfg.config().derating.knee_degc.to_num::<f64>();
    let derating_at_injection = res
        .trace
        .iter()
        .rev()
        .find(|r| r.tick < inject_tick)
        .is_some_and(|r| r.sensed_c > knee_c);
    let peak_mw = after.iter().map(|r| r.p_mw).fold(0.0, f64::max);
    let energy_above_uj = after
        .iter()
        .map(|r| (r.p_mw - ceiling_mw).max(0.0) * dt * 1e3)
        .sum();
    let ticks_over = after
        .iter()
        .filter(|r| r.p_mw > ceiling_mw * (1.0 + margin))
        .count() as u64;
    // A latent fault may also be caught by refusing the enable request
    // (and the laser never emitted).
    let refused = moment == Moment::Latent
        && res
            .happenings
            .iter()
            .any(|h| matches!(h, Happening::Rejected { .. }))
        && res.trace.iter().all(|r| !r.state.is_emitting())
        && res.final_state == State::Off;
    let detected = res.final_state == State::Latched || refused;
    // The fastest firmware: the next sample sees the fault, its drive takes
    // effect the latency later.
    let reaction_ticks = 1 + u64::from(latency.get());
    let safe = (detected || !must_latch) && ticks_over <= reaction_ticks && !res.damaged;
    let latency_ticks = first_fault_tick.map(|t| t - inject_tick);
    Ok(CaseResult {
        fault: fault.name(),
        moment,
        corner: corner.name,
        must_latch,
        detected,
        core_faults,
        latency_ticks,
        latency_us: latency_ticks.map(|t| t as f64 * dt * 1e6),
        peak_mw,
        energy_above_uj,
        ticks_over,
        damaged: res.damaged,
        final_state: res.final_state.name(),
        derating_at_injection,
        latched_before_injection,
        safe,
    })
}

/// Run the whole campaign in parallel with a progress bar.
pub fn run(
    module_name: &str,
    module: &DemoModule,
    cfg: &ValidConfig,
    margin: f64,
    latency: DacLatency,
) -> Result<Vec<CaseResult>, String> {
    let ceiling_mw = cfg.config().protection.runaway_mw.to_num::<f64>();
    let moments = [
        Moment::SoftStart,
        Moment::Steady,
        Moment::SetpointChange,
        Moment::Derating,
        Moment::Latent,
    ];
    let mut cases = Vec::new();
    for f in faults() {
        for m in moments {
            if m == Moment::Latent && matches!(f.0, HwFault::MissedTicks { .. }) {
                continue;
            }
            for c in &CORNERS {
                cases.push((f, m, c));
            }
        }
    }
    let pb = crate::progress::bar(cases.len() as u64, "cases");
    let out: Result<Vec<_>, String> = cases
        .par_iter()
        .map(|(f, m, c)| {
            let r = run_case(
                module_name,
                module,
                cfg,
                *f,
                *m,
                c,
                ceiling_mw,
                margin,
                latency,
            );
            pb.inc(1);
            r
        })
        .collect();
    pb.finish_and_clear();
    out
}

/// The Markdown report.
pub fn markdown(module: &str, results: &[CaseResult], margin: f64, ceiling_mw: f64) -> String {
    let unsafe_n = results.iter().filter(|r| !r.safe).count();
    let mut s = format!(
        "# Fault campaign: {module}\n\n{} cases, {} unsafe. Optical ceiling {ceiling_mw:.3} mW, margin {:.0} %.\n\n\
         | fault | moment | corner | derating | detected | core faults | latency (ticks) | latency (us) | peak (mW) | energy above (uJ) | damage | final | verdict |\n|---|---|---|---|---|---|---|---|---|---|---|---|---|\n",
        results.len(),
        unsafe_n,
        margin * 100.0
    );
    for r in results {
        s.push_str(&format!(
            "| {} | {:?} | {} | {} | {} | {} | {} | {} | {:.3} | {:.3} | {} | {} | {} |\n",
            r.fault,
            r.moment,
            r.corner,
            if r.derating_at_injection { "yes" } else { "no" },
            if r.detected { "yes" } else { "no" },
            r.core_faults.join(" "),
            r.latency_ticks.map_or("-".into(), |t| t.to_string()),
            r.latency_us.map_or("-".into(), |t| format!("{t:.0}")),
            r.peak_mw,
            r.energy_above_uj,
            if r.damaged { "YES" } else { "no" },
            if r.latched_before_injection {
                "latched before injection"
            } else {
                r.final_state
            },
            if r.safe { "safe" } else { "UNSAFE" }
        ));
    }
    s.push_str(&format!("\nCAUTION: {}\n", crate::report::SAFETY_CAUTION));
    s
}
