//! The scenario phases run on the emulated MCU: start-up through soft start
//! to regulation, a setpoint change, injected faults with their latching and
//! clearing, a soft stop, requests through the mailbox and the latch across
//! a reset. Each phase records its expected outcomes in
//! [`Checks`].

use diodestat_core::{
    crc32, Controller, Drive, Fault, Full, Fx, Mailbox, Rejection, Request, State,
};

use crate::checks::{section, Checks};
use crate::cost::Snapshots;
use crate::rig::Rig;

/// Ticks per millisecond of the configuration in the rig.
fn ticks_per_ms<S: Snapshots>(rig: &Rig<S>) -> u32 {
    (rig.ctl.config().config().tick_hz / 1000).max(1)
}

/// Regulation tolerance: 2 % of the setpoint, at least 0.05 mW.
pub fn tolerance_mw(setpoint_mw: Fx) -> Fx {
    (setpoint_mw / 50).max(Fx::lit("0.05"))
}

/// Run `ticks` and return the lowest and highest monitor reading (mW) and
/// the lowest and highest true optical power (µW).
fn window<S: Snapshots>(rig: &mut Rig<S>, ticks: u32) -> ((Fx, Fx), (i32, i32)) {
    let (mut lo, mut hi) = (Fx::MAX, Fx::MIN);
    let (mut tlo, mut thi) = (i32::MAX, i32::MIN);
    for _ in 0..ticks {
        rig.tick();
        let m = rig.ctl.measurements().monitor_ou;
        lo = lo.min(m);
        hi = hi.max(m);
        let uw = rig.plant.optical_uw();
        tlo = tlo.min(uw);
        thi = thi.max(uw);
    }
    ((lo, hi), (tlo, thi))
}

fn uw_to_fx(uw: i32) -> Fx {
    Fx::from_num(uw) / 1000
}

/// Check that the loop holds `setpoint_mw` within tolerance for `ms`.
fn check_regulation<S: Snapshots>(
    rig: &mut Rig<S>,
    c: &mut Checks,
    name: &str,
    setpoint_mw: Fx,
    ms: u32,
) {
    let ((lo, hi), (tlo, thi)) = window(rig, ms * ticks_per_ms(rig));
    let tol = tolerance_mw(setpoint_mw);
    let ok_mon = lo >= setpoint_mw - tol && hi <= setpoint_mw + tol;
    let (tlo, thi) = (uw_to_fx(tlo), uw_to_fx(thi));
    let ok_true = tlo >= setpoint_mw - tol && thi <= setpoint_mw + tol;
    c.check(
        name,
        ok_mon && ok_true && rig.ctl.state() == State::Regulating,
        format_args!(
            "setpoint {} mW ± {}: monitor {}..{} mW, optical {}..{} mW over {} ms",
            setpoint_mw, tol, lo, hi, tlo, thi, ms
        ),
    );
}

fn check_ceiling<S: Snapshots>(rig: &Rig<S>, c: &mut Checks, name: &str) {
    let cfg = rig.ctl.config();
    let ceiling = cfg.config().current.ceiling_iu;
    let max_code = cfg.dac_code(ceiling);
    c.check(
        name,
        rig.peak_drive_ma <= ceiling && rig.peak_dac <= max_code,
        format_args!(
            "peak drive {} mA (ceiling {} mA), peak DAC code {} (ceiling code {})",
            rig.peak_drive_ma, ceiling, rig.peak_dac, max_code
        ),
    );
}

fn check_trace<S: Snapshots>(rig: &Rig<S>, c: &mut Checks, name: &str, expected: &[State]) {
    c.check(
        name,
        rig.trace.as_slice() == expected,
        format_args!("{:?}", rig.trace.as_slice()),
    );
}

/// Enable at `setpoint_mw` from Off and run until Regulating; check the
/// emission delay, the state sequence and the ceiling.
pub fn start<S: Snapshots>(rig: &mut Rig<S>, c: &mut Checks, setpoint_mw: Fx) -> bool {
    let tpm = ticks_per_ms(rig);
    let delay = rig.ctl.config().emission_delay_ticks();
    rig.clear_trace();
    rig.clear_peaks();
    let ok = rig.ctl.request(Request::SetPower(setpoint_mw)).is_ok()
        && rig.ctl.request(Request::Enable).is_ok();
    c.check(
        "enable accepted in off",
        ok,
        format_args!("setpoint {} mW", setpoint_mw),
    );
    let first_light = rig.run_until(10 * tpm, |_, d| d.enable);
    c.check(
        "emission delay holds enable low",
        first_light.is_some_and(|n| n > delay),
        format_args!(
            "enable high after {:?} ticks, delay {} ticks",
            first_light, delay
        ),
    );
    let reg = rig.run_until(20 * tpm, |_, d| d.status.state == State::Regulating);
    c.check(
        "soft start hands over to regulation",
        reg.is_some(),
        format_args!("{:?} ticks after first light", reg),
    );
    check_trace(
        rig,
        c,
        "state sequence",
        &[State::Off, State::Arming, State::Ramping, State::Regulating],
    );
    check_ceiling(rig, c, "soft start stays under the ceiling");
    reg.is_some()
}

/// Power-up, start, settle, check regulation; a setpoint change.
pub fn startup_and_regulation<S: Snapshots>(rig: &mut Rig<S>, c: &mut Checks) {
    section("start-up and regulation (APC)");
    let tpm = ticks_per_ms(rig);
    c.check(
        "enable before the first sample is refused",
        rig.ctl.request(Request::Enable) == Err(Rejection::NoSampleYet),
        format_args!("no sample yet"),
    );
    rig.run(tpm);
    let (_, d) = rig.last;
    c.check(
        "off at power-up",
        rig.ctl.state() == State::Off && !d.enable && d.dac_code == 0,
        format_args!(
            "state {:?}, enable {}, DAC {}",
            rig.ctl.state(),
            d.enable,
            d.dac_code
        ),
    );
    c.check(
        "clear refused when nothing is latched",
        rig.ctl.request(Request::ClearFaults) == Err(Rejection::NotAllowed { state: State::Off }),
        format_args!("state off"),
    );
    let sp = Fx::from_num(5);
    start(rig, c, sp);
    rig.run(20 * tpm);
    check_regulation(rig, c, "regulates at 5 mW", sp, 10);

    section("setpoint change");
    rig.clear_peaks();
    let sp2 = Fx::from_num(20);
    c.check(
        "setpoint change accepted while regulating",
        rig.ctl.request(Request::SetPower(sp2)).is_ok(),
        format_args!("{} mW -> {} mW", sp, sp2),
    );
    let ((_, hi), _) = window(rig, 20 * tpm);
    c.check(
        "setpoint change without overshoot beyond 5 %",
        hi <= sp2 + sp2 / 20,
        format_args!("highest monitor reading {} mW", hi),
    );
    check_regulation(rig, c, "regulates at 20 mW", sp2, 10);
    check_ceiling(rig, c, "regulation stays under the ceiling");
    c.check(
        "out-of-range setpoint refused",
        matches!(
            rig.ctl.request(Request::SetPower(Fx::from_num(31))),
            Err(Rejection::OutOfRange { .. })
        ),
        format_args!("31 mW"),
    );
}

/// Check the drive of the step that latched `fault`.
fn check_trip<S: Snapshots>(rig: &Rig<S>, c: &mut Checks, fault: Fault, name: &str) {
    let (s, d) = rig.last;
    let log = rig.ctl.fault_log();
    let record = log
        .first()
        .into_iter()
        .chain(log.later())
        .find(|r| r.fault == fault && r.tick == s.tick);
    c.check(
        name,
        d.status.state == State::Latched
            && d.status.faults.contains(fault)
            && !d.enable
            && d.dac_code == 0
            && record.is_some(),
        format_args!(
            "state {:?}, faults {:#06x}, enable {}, DAC {}, record {:?}",
            d.status.state,
            d.status.faults.bits(),
            d.enable,
            d.dac_code,
            record
        ),
    );
}

/// After a latch: the drive stays off and the current decays.
fn check_stays_off<S: Snapshots>(rig: &mut Rig<S>, c: &mut Checks, ticks: u32) {
    let mut emitted = false;
    for _ in 0..ticks {
        let d = rig.tick();
        emitted |= d.enable || d.dac_code != 0;
    }
    c.check(
        "latched: enable low and DAC zero on every later tick",
        !emitted && rig.ctl.state() == State::Latched,
        format_args!(
            "{} ticks, plant current {} uA",
            ticks,
            rig.plant.current_ua()
        ),
    );
}

fn check_clear_refused<S: Snapshots>(rig: &mut Rig<S>, c: &mut Checks, fault: Fault) {
    let r = rig.ctl.request(Request::ClearFaults);
    c.check(
        "clear refused while the condition is present",
        r == Err(Rejection::ConditionPresent { fault }),
        format_args!("{:?}", r),
    );
}

fn check_clear_accepted<S: Snapshots>(rig: &mut Rig<S>, c: &mut Checks) {
    let tpm = ticks_per_ms(rig);
    rig.run(2);
    let r = rig.ctl.request(Request::ClearFaults);
    rig.run(5 * tpm);
    let (_, d) = rig.last;
    c.check(
        "clear accepted once the condition is gone; no restart by itself",
        r.is_ok() && rig.ctl.state() == State::Off && !d.enable && d.dac_code == 0,
        format_args!("{:?}, then state {:?} for 5 ms", r, rig.ctl.state()),
    );
}

/// The monitor photodiode opens while regulating: the loop drives up to the
/// monitor-loss level, which latches after its debounce.
pub fn monitor_open<S: Snapshots>(rig: &mut Rig<S>, c: &mut Checks) {
    section("fault: monitor photodiode open");
    let tpm = ticks_per_ms(rig);
    rig.clear_trace();
    rig.clear_peaks();
    rig.plant.faults.monitor_open = true;
    let n = rig.run_until(20 * tpm, |_, d| d.status.state == State::Latched);
    c.check(
        "monitor loss latched",
        n.is_some(),
        format_args!("{:?} ticks after the photodiode opened", n),
    );
    check_trip(
        rig,
        c,
        Fault::MonitorLoss,
        "trip step: enable low, DAC zero, fault recorded",
    );
    check_ceiling(rig, c, "drive held under the ceiling without a monitor");
    check_trace(
        rig,
        c,
        "state sequence",
        &[State::Regulating, State::Latched],
    );
    check_stays_off(rig, c, 2 * tpm);
    rig.plant.faults.monitor_open = false;
    check_clear_accepted(rig, c);
}

/// The current source fails high: overcurrent latches on the step that sees it.
pub fn source_fails_high<S: Snapshots>(rig: &mut Rig<S>, c: &mut Checks) {
    section("fault: current source fails high");
    let tpm = ticks_per_ms(rig);
    let sp = Fx::from_num(10);
    if !start(rig, c, sp) {
        return;
    }
    rig.run(20 * tpm);
    check_regulation(rig, c, "regulates at 10 mW", sp, 5);
    rig.clear_trace();
    rig.plant.faults.source_stuck_ua = Some(56_000);
    rig.tick();
    check_trip(
        rig,
        c,
        Fault::Overcurrent,
        "overcurrent latched on the same step",
    );
    check_stays_off(rig, c, 2 * tpm);
    check_clear_refused(rig, c, Fault::Overcurrent);
    rig.plant.faults.source_stuck_ua = None;
    check_clear_accepted(rig, c);
}

/// The interlock opens while regulating.
pub fn interlock_open<S: Snapshots>(rig: &mut Rig<S>, c: &mut Checks) {
    section("fault: interlock open");
    let tpm = ticks_per_ms(rig);
    let sp = Fx::from_num(5);
    if !start(rig, c, sp) {
        return;
    }
    rig.run(10 * tpm);
    rig.plant.faults.interlock_open = true;
    rig.tick();
    check_trip(
        rig,
        c,
        Fault::InterlockOpen,
        "interlock latched on the same step",
    );
    check_stays_off(rig, c, tpm);
    check_clear_refused(rig, c, Fault::InterlockOpen);
    let r = rig.ctl.request(Request::Enable);
    c.check(
        "enable refused while latched",
        r == Err(Rejection::NotAllowed {
            state: State::Latched,
        }),
        format_args!("{:?}", r),
    );
    rig.plant.faults.interlock_open = false;
    check_clear_accepted(rig, c);
    rig.plant.faults.interlock_open = true;
    rig.run(2);
    let r = rig.ctl.request(Request::Enable);
    c.check(
        "enable refused in off while the interlock is open",
        r == Err(Rejection::ConditionPresent {
            fault: Fault::InterlockOpen,
        }),
        format_args!("{:?}", r),
    );
    rig.plant.faults.interlock_open = false;
    rig.run(2);
}

/// Disable while regulating: soft stop to Off, the drive never rising.
pub fn soft_stop<S: Snapshots>(rig: &mut Rig<S>, c: &mut Checks) {
    section("soft stop");
    let tpm = ticks_per_ms(rig);
    if !start(rig, c, Fx::from_num(5)) {
        return;
    }
    rig.run(5 * tpm);
    rig.clear_trace();
    let _ = rig.ctl.request(Request::Disable);
    let mut prev = rig.ctl.drive_iu();
    let mut rising = false;
    let n = rig.run_until(10 * tpm, |r, d| {
        rising |= r.ctl.drive_iu() > prev;
        prev = r.ctl.drive_iu();
        d.status.state == State::Off
    });
    let (_, d) = rig.last;
    c.check(
        "soft stop reaches off, drive never rising",
        n.is_some() && !rising && !d.enable && d.dac_code == 0,
        format_args!("{:?} ticks", n),
    );
    check_trace(
        rig,
        c,
        "state sequence",
        &[State::Regulating, State::Stopping, State::Off],
    );
}

/// One tick with the temperature ADC forced to `counts` (`None`: the NTC
/// again), marked as a jump out of the cached table window.
fn jump<S: Snapshots>(rig: &mut Rig<S>, counts: Option<u16>) -> Drive {
    rig.plant.faults.temp_counts = counts;
    rig.tick_relocating()
}

/// While regulating, the temperature reading jumps across many table
/// segments at once: the sensor goes to its open rail and back (within
/// its debounce), to the short rail and back, from cold to hot inside the
/// table and back. Each jump is a step that finds the table window again;
/// the loop keeps regulating and nothing latches.
pub fn temperature_jumps<S: Snapshots>(rig: &mut Rig<S>, c: &mut Checks) {
    section("temperature reading jumps while regulating");
    let tpm = ticks_per_ms(rig);
    let sp = Fx::from_num(5);
    if !start(rig, c, sp) {
        return;
    }
    rig.run(10 * tpm);
    let debounce = rig.ctl.config().config().protection.sensor_debounce;
    let open_counts = rig
        .ctl
        .config()
        .config()
        .calibration
        .temperature
        .high_fault_counts;
    let held = u32::from(debounce.saturating_sub(2)).max(1);
    let mut ok = true;
    // The sensor opens (the demo's open rail is the high one) for fewer
    // ticks than its debounce, then reads the NTC again.
    jump(rig, Some(4095));
    let at_rail = rig.ctl.measurements().sensor_at_rail;
    ok &= rig.ctl.state() == State::Regulating;
    for _ in 1..held {
        rig.tick();
    }
    jump(rig, None);
    ok &= rig.ctl.state() == State::Regulating;
    c.check(
        "sensor open for less than its debounce: still regulating",
        ok && at_rail && rig.ctl.faults().is_empty(),
        format_args!(
            "{} ticks at 4095 counts (open at >= {}, debounce {}), state {:?}",
            held,
            open_counts,
            debounce,
            rig.ctl.state()
        ),
    );
    rig.run(tpm);
    // The same to the other rail, for one tick.
    jump(rig, Some(0));
    let at_rail = rig.ctl.measurements().sensor_at_rail;
    jump(rig, None);
    c.check(
        "sensor shorted for one tick: still regulating",
        at_rail && rig.ctl.state() == State::Regulating && rig.ctl.faults().is_empty(),
        format_args!("state {:?}", rig.ctl.state()),
    );
    rig.run(tpm);
    // Cold to hot inside the table, on two of its points (the demo NTC
    // table: 3492 counts at -15 degC, 476 counts at 90 degC), and back.
    jump(rig, Some(3492));
    let cold = rig.ctl.measurements().temp_degc;
    jump(rig, Some(476));
    let hot = rig.ctl.measurements().temp_degc;
    jump(rig, None);
    let back = rig.ctl.measurements().temp_degc;
    c.check(
        "cold to hot jump converted on the table points",
        cold == Fx::from_num(-15)
            && hot == Fx::from_num(90)
            && back > Fx::from_num(15)
            && back < Fx::from_num(35)
            && rig.ctl.state() == State::Regulating
            && rig.ctl.faults().is_empty(),
        format_args!(
            "{} degC, {} degC, back to {} degC; state {:?}",
            cold,
            hot,
            back,
            rig.ctl.state()
        ),
    );
    check_regulation(rig, c, "regulates at 5 mW after the jumps", sp, 5);
    let _ = rig.ctl.request(Request::Disable);
    rig.run(10 * tpm);
}

/// With a sensor debounce of one tick, the sensor going to a rail latches
/// on the step whose reading jumps there (open rail, then short rail);
/// the reading coming back while latched is a jump too.
pub fn sensor_trip_relocating<S: Snapshots>(rig: &mut Rig<S>, c: &mut Checks) {
    section("sensor trip on the jumping step (debounce 1)");
    let tpm = ticks_per_ms(rig);
    c.check(
        "sensor debounce of one tick",
        rig.ctl.config().config().protection.sensor_debounce == 1,
        format_args!(
            "{} ticks",
            rig.ctl.config().config().protection.sensor_debounce
        ),
    );
    for (counts, fault) in [(4095, Fault::SensorOpen), (0, Fault::SensorShort)] {
        if !start(rig, c, Fx::from_num(5)) {
            return;
        }
        rig.run(10 * tpm);
        jump(rig, Some(counts));
        check_trip(
            rig,
            c,
            fault,
            "sensor latched on the step its reading jumps to the rail",
        );
        check_stays_off(rig, c, tpm);
        check_clear_refused(rig, c, fault);
        jump(rig, None);
        c.check(
            "reading back from the rail while latched",
            rig.ctl.state() == State::Latched && !rig.ctl.measurements().sensor_at_rail,
            format_args!("{} degC", rig.ctl.measurements().temp_degc),
        );
        check_clear_accepted(rig, c);
    }
}

/// Requests from "thread mode" (this code) to the tick through a static
/// mailbox, as the G474 board passes them.
static REQUESTS: Mailbox<Request, 4> = Mailbox::new();

/// The tick's side of the mailbox: apply every waiting request; how many
/// there were and how many were accepted.
fn drain<S: Snapshots>(rig: &mut Rig<S>) -> (u32, u32) {
    let (mut n, mut ok) = (0, 0);
    while let Some(req) = REQUESTS.pop() {
        n += 1;
        ok += u32::from(rig.ctl.request(req).is_ok());
    }
    (n, ok)
}

/// Requests through the lock-free mailbox (atomic loads and stores only,
/// so the same code on ARMv6-M), then a reset in the latched state: the
/// latch record's bytes taken back by a new controller, and a corrupted
/// record refused into a latch of its own.
pub fn mailbox_and_reset<S: Snapshots>(rig: &mut Rig<S>, c: &mut Checks) {
    section("requests through the mailbox; the latch across a reset");
    let tpm = ticks_per_ms(rig);
    let sp = Fx::from_num(5);
    let pushed =
        REQUESTS.push(Request::SetPower(sp)).is_ok() && REQUESTS.push(Request::Enable).is_ok();
    let (n, ok) = drain(rig);
    c.check(
        "requests pass through the mailbox",
        pushed && n == 2 && ok == 2 && rig.ctl.state() == State::Arming,
        format_args!("{} taken, {} accepted, state {:?}", n, ok, rig.ctl.state()),
    );
    let mut filled = 0;
    while REQUESTS.push(Request::SetPower(sp)).is_ok() {
        filled += 1;
    }
    let refused = REQUESTS.push(Request::SetPower(sp));
    c.check(
        "a full mailbox hands the request back",
        filled == REQUESTS.capacity() && refused == Err(Full(Request::SetPower(sp))),
        format_args!("{} of {} slots filled", filled, REQUESTS.capacity()),
    );
    drain(rig);
    let reg = rig.run_until(40 * tpm, |_, d| d.status.state == State::Regulating);
    rig.run(5 * tpm);
    rig.plant.faults.interlock_open = true;
    rig.tick();
    rig.plant.faults.interlock_open = false;
    rig.run(2);
    c.check(
        "regulating, then latched by the interlock",
        reg.is_some() && rig.ctl.state() == State::Latched,
        format_args!("{:?}", rig.ctl.state()),
    );
    let crc = crc32(b"123456789");
    c.check(
        "CRC-32/ISO-HDLC check value on this CPU",
        crc == 0xCBF4_3926,
        format_args!("{:#010x}", crc),
    );
    let bytes = rig.ctl.latch_record().to_bytes();
    {
        let (back, r) = Controller::restored(rig.ctl.config().clone(), &bytes);
        c.check(
            "a reset in the latched state comes back latched",
            r.is_ok()
                && back.state() == State::Latched
                && back.faults() == rig.ctl.faults()
                && back.fault_log().first() == rig.ctl.fault_log().first(),
            format_args!("{:?}, faults {:#06x}", back.state(), back.faults().bits()),
        );
    }
    {
        let mut bad = bytes;
        bad[4] ^= 0x01;
        let (back, r) = Controller::restored(rig.ctl.config().clone(), &bad);
        c.check(
            "a corrupted record is refused into a latch",
            r.is_err()
                && back.state() == State::Latched
                && back.faults().contains(Fault::RecordCorrupt),
            format_args!("{:?}", r),
        );
    }
    let cleared = REQUESTS.push(Request::ClearFaults).is_ok() && drain(rig) == (1, 1);
    rig.run(2);
    c.check(
        "clear through the mailbox",
        cleared && rig.ctl.state() == State::Off,
        format_args!("{:?}", rig.ctl.state()),
    );
}
