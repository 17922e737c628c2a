//! The embedded-hal edge against strict mocks (every mock ends with
//! `.done()`, so a missing or extra call fails): SPI DAC frames, PWM DAC
//! scaling, the order of enable and DAC writes across devices (a shared
//! event log around the mocks), the safe state at construction, and every
//! hardware failure: returned, latched as its own fault, enable low where
//! the hardware allows it. A property test drives fakes that fail at random.

mod common;

use common::*;
use diodestat_core::{
    AdcCounts, Controller, CurrentDac, DacRangeError, DacWidth, DriverBoard, Fault, Fx,
    InterlockLevel, Mode, PwmDac, Rejection, Request, SpiDac, State, ValidConfig,
};
use embedded_hal::digital::{ErrorType, OutputPin};
use embedded_hal_mock::eh1::digital::{Mock as Pin, State as Level, Transaction as PinT};
use embedded_hal_mock::eh1::pwm::{Mock as Pwm, Transaction as PwmT};
use embedded_hal_mock::eh1::spi::{Mock as Spi, Transaction as SpiT};
use embedded_hal_mock::eh1::MockError;
use std::cell::RefCell;
use std::rc::Rc;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Ev {
    EnLow,
    EnHigh,
    Dac(u16),
}

type Log = Rc<RefCell<Vec<Ev>>>;

/// An output pin that notes each call in the shared log, then delegates.
struct LoggedPin<P> {
    pin: P,
    log: Log,
}

impl<P: ErrorType> ErrorType for LoggedPin<P> {
    type Error = P::Error;
}

impl<P: OutputPin> OutputPin for LoggedPin<P> {
    fn set_low(&mut self) -> Result<(), Self::Error> {
        self.log.borrow_mut().push(Ev::EnLow);
        self.pin.set_low()
    }
    fn set_high(&mut self) -> Result<(), Self::Error> {
        self.log.borrow_mut().push(Ev::EnHigh);
        self.pin.set_high()
    }
}

/// A DAC that notes each write in the shared log, then delegates.
struct LoggedDac<D> {
    dac: D,
    log: Log,
}

impl<D: CurrentDac> CurrentDac for LoggedDac<D> {
    type Error = D::Error;
    fn set_code(&mut self, code: u16) -> Result<(), Self::Error> {
        self.log.borrow_mut().push(Ev::Dac(code));
        self.dac.set_code(code)
    }
}

/// A board whose DAC and enable pin note each call in `log`; the
/// interlock reads closed high. Construction must succeed (its enable low
/// and DAC zero are the first two events).
fn logged_board<D: CurrentDac>(
    ctl: Controller,
    dac: D,
    en: &Pin,
    il: &Pin,
    log: &Log,
) -> DriverBoard<LoggedDac<D>, LoggedPin<Pin>, Pin> {
    let board = DriverBoard::new(
        ctl,
        LoggedDac {
            dac,
            log: log.clone(),
        },
        LoggedPin {
            pin: en.clone(),
            log: log.clone(),
        },
        il.clone(),
        InterlockLevel::ClosedHigh,
    );
    match board {
        Ok(b) => b,
        Err(e) => panic!("construction failed: {:?}", e.error),
    }
}

/// A board on plain mocks; construction must succeed.
fn board<D: CurrentDac>(
    ctl: Controller,
    dac: D,
    en: &Pin,
    il: &Pin,
    level: InterlockLevel,
) -> DriverBoard<D, Pin, Pin> {
    match DriverBoard::new(ctl, dac, en.clone(), il.clone(), level) {
        Ok(b) => b,
        Err(e) => panic!("construction failed: {:?}", e.error),
    }
}

/// The documented 12-bit frame: `0b01` in bits 15..14, the code in 11..0,
/// most significant byte first.
fn frame12(code: u16) -> Vec<u8> {
    let word: u16 = (0b01 << 14) | (code & 0x0FFF);
    vec![(word >> 8) as u8, (word & 0xFF) as u8]
}

fn spi_write(bytes: Vec<u8>) -> [SpiT<u8>; 3] {
    [
        SpiT::transaction_start(),
        SpiT::write_vec(bytes),
        SpiT::transaction_end(),
    ]
}

fn spi_writes(codes: &[u16]) -> Vec<SpiT<u8>> {
    codes.iter().flat_map(|c| spi_write(frame12(*c))).collect()
}

const MAX_DUTY: u16 = 1000;

fn pwm_write(code: u16, max_code: u16) -> [PwmT; 2] {
    let duty = u32::from(code.min(max_code)) * u32::from(MAX_DUTY) / u32::from(max_code);
    [
        PwmT::max_duty_cycle(MAX_DUTY),
        PwmT::set_duty_cycle(duty as u16),
    ]
}

fn adc(cfg: &ValidConfig, tick: u32) -> AdcCounts {
    let s = healthy_sample(cfg, tick);
    AdcCounts {
        tick,
        monitor: s.monitor_counts,
        current: s.current_counts,
        temperature: s.temp_counts,
        supply: s.supply_counts,
        forward: s.forward_counts,
        external_fault: s.external_fault,
    }
}

fn zero_delay() -> ValidConfig {
    demo_with(|c| c.ramp.emission_delay_ms = 0)
}

/// An ACC controller at 20 mA with a zero emission delay.
fn acc_controller(cfg: &ValidConfig) -> Controller {
    let mut ctl = Controller::new(cfg.clone());
    ctl.request(Request::SetMode(Mode::Acc)).unwrap();
    ctl.request(Request::SetCurrent(Fx::from_num(20))).unwrap();
    ctl
}

/// A 12-bit SPI DAC for the demo configuration.
fn spi12(spi: &Spi<u8>) -> SpiDac<Spi<u8>> {
    SpiDac::new(spi.clone(), DacWidth::Bits12, &demo()).unwrap()
}

/// Mock expectations: construction's enable low, then `rest`.
fn en_after_start(rest: &[PinT]) -> Pin {
    let mut ex = vec![PinT::set(Level::Low)];
    ex.extend_from_slice(rest);
    Pin::new(&ex)
}

/// SPI writes of construction's zero, then of `codes`.
fn spi_after_start(codes: &[u16]) -> Spi<u8> {
    let mut all = vec![0];
    all.extend_from_slice(codes);
    Spi::new(&spi_writes(&all))
}

#[test]
fn spi_dac_12_bit_frames() {
    let codes = [0u16, 1, 0x0ABC, 0x0FFF];
    let mut spi = Spi::new(&spi_writes(&codes));
    let mut dac = spi12(&spi);
    for c in codes {
        dac.set_code(c).unwrap();
    }
    spi.done();
    // The literal frames, for the record: 0x4ABC for 0xABC, 0x4FFF for 0xFFF.
    assert_eq!(frame12(0x0ABC), [0x4A, 0xBC]);
    assert_eq!(frame12(0x0FFF), [0x4F, 0xFF]);
}

#[test]
fn spi_dac_clamps_a_code_above_its_largest_instead_of_wrapping() {
    // 4096 used to go out as 0x4000 (code 0) and 0xFFFF as 0x4FFF only by
    // the mask; both clamp to the largest code, 4095, now.
    let mut spi = Spi::new(&[spi_write(vec![0x4F, 0xFF]), spi_write(vec![0x4F, 0xFF])].concat());
    let mut dac = spi12(&spi);
    dac.set_code(4096).unwrap();
    dac.set_code(u16::MAX).unwrap();
    spi.done();
    // A configuration whose largest code is lower clamps there.
    let cfg = demo_with(|c| c.calibration.dac.max_code = 3500);
    let mut spi = Spi::new(&spi_write(frame12(3500)));
    let mut dac = SpiDac::new(spi.clone(), DacWidth::Bits12, &cfg).unwrap();
    dac.set_code(3501).unwrap();
    spi.done();
}

#[test]
fn spi_dac_refuses_a_configuration_above_its_full_scale() {
    let cfg = demo_with(|c| c.calibration.dac.max_code = 4096);
    let mut spi = Spi::new(&[]);
    let err = SpiDac::new(spi.clone(), DacWidth::Bits12, &cfg).unwrap_err();
    assert_eq!(
        err,
        DacRangeError {
            max_code: 4096,
            full_scale: 4095
        }
    );
    assert_eq!(
        err.to_string(),
        "calibration.dac.max_code 4096 is above the DAC's full scale 4095"
    );
    // The 16-bit frame carries it.
    let dac = SpiDac::new(spi.clone(), DacWidth::Bits16, &cfg).unwrap();
    drop(dac);
    spi.done();
}

#[test]
fn spi_dac_16_bit_frames() {
    let cfg = demo_with(|c| c.calibration.dac.max_code = u16::MAX);
    let codes = [0u16, 0x00FF, 0xBEEF, 0xFFFF];
    let ex: Vec<SpiT<u8>> = codes
        .iter()
        .flat_map(|c| spi_write(vec![0x01, (c >> 8) as u8, (c & 0xFF) as u8]))
        .collect();
    let mut dac = SpiDac::new(Spi::new(&ex), DacWidth::Bits16, &cfg).unwrap();
    for c in codes {
        dac.set_code(c).unwrap();
    }
    // The released device is the mock itself: finishing it checks every frame.
    dac.release().done();
}

#[test]
fn pwm_dac_scales_codes_to_the_duty_range() {
    let max_code = 4095;
    let codes = [0u16, 1, 2047, 4094, max_code, max_code + 1, u16::MAX];
    let ex: Vec<PwmT> = codes.iter().flat_map(|c| pwm_write(*c, max_code)).collect();
    let mut pwm = Pwm::new(&ex);
    let mut dac = PwmDac::new(pwm.clone(), max_code);
    for c in codes {
        dac.set_code(c).unwrap();
    }
    pwm.done();
    // The ends of the range are exact.
    assert_eq!(pwm_write(0, max_code)[1], PwmT::set_duty_cycle(0));
    assert_eq!(
        pwm_write(max_code, max_code)[1],
        PwmT::set_duty_cycle(MAX_DUTY)
    );
}

#[test]
fn construction_puts_enable_low_then_the_dac_at_zero() {
    let log = Log::default();
    let mut en = Pin::new(&[PinT::set(Level::Low)]);
    let mut il = Pin::new(&[]);
    let mut spi = Spi::new(&spi_writes(&[0]));
    let board = logged_board(Controller::new(demo()), spi12(&spi), &en, &il, &log);
    assert_eq!(*log.borrow(), [Ev::EnLow, Ev::Dac(0)]);
    assert_eq!(board.controller().state(), State::Off);
    assert!(board.controller().fault_log().is_empty());
    en.done();
    il.done();
    spi.done();
}

#[test]
fn construction_reports_and_latches_each_failure_and_still_zeroes_the_dac() {
    let cfg = demo();
    let log = Log::default();
    let mut en = Pin::new(&[PinT::set(Level::Low).with_error(read_error())]);
    let mut il = Pin::new(&[]);
    let mut spi = Spi::new(&spi_writes(&[0]));
    let Err(e) = DriverBoard::new(
        Controller::new(cfg.clone()),
        LoggedDac {
            dac: spi12(&spi),
            log: log.clone(),
        },
        LoggedPin {
            pin: en.clone(),
            log: log.clone(),
        },
        il.clone(),
        InterlockLevel::ClosedHigh,
    ) else {
        panic!("a failed enable pin at construction must be reported");
    };
    assert!(e.error.enable.is_some() && e.error.dac.is_none());
    assert_eq!(
        e.error.faults().iter().collect::<Vec<_>>(),
        [Fault::EnablePin]
    );
    assert_eq!(*log.borrow(), [Ev::EnLow, Ev::Dac(0)]);
    let ctl = e.board.controller();
    assert_eq!(ctl.state(), State::Latched);
    assert!(ctl.faults().contains(Fault::EnablePin));
    let rec = ctl.fault_log().first().unwrap();
    assert_eq!((rec.fault, rec.tick), (Fault::EnablePin, 0));
    en.done();
    il.done();
    spi.done();
}

#[test]
fn off_drives_enable_low_before_zeroing_the_dac() {
    let cfg = demo();
    let log = Log::default();
    let mut en = en_after_start(&[PinT::set(Level::Low), PinT::set(Level::Low)]);
    let mut il = Pin::new(&[PinT::get(Level::High), PinT::get(Level::High)]);
    let mut spi = spi_after_start(&[0, 0]);
    let mut board = logged_board(Controller::new(cfg.clone()), spi12(&spi), &en, &il, &log);
    for t in 0..2 {
        let d = board.tick(adc(&cfg, t)).unwrap();
        assert!(!d.enable);
        assert_eq!(d.status.state, State::Off);
    }
    assert_eq!(
        *log.borrow(),
        [
            Ev::EnLow,
            Ev::Dac(0),
            Ev::EnLow,
            Ev::Dac(0),
            Ev::EnLow,
            Ev::Dac(0)
        ]
    );
    en.done();
    il.done();
    spi.done();
}

#[test]
fn emission_writes_the_dac_before_enable_and_a_trip_drops_enable_before_the_dac() {
    let cfg = zero_delay();
    let ss = cfg.soft_start_iu_per_tick();
    let c1 = cfg.dac_code(ss);
    let c2 = cfg.dac_code(ss * 2);
    assert!(c1 > 0 && c2 > c1);
    let log = Log::default();
    // Tick 0 off, ticks 1-2 emit, tick 3 the interlock opens.
    let mut en = en_after_start(&[
        PinT::set(Level::Low),
        PinT::set(Level::High),
        PinT::set(Level::High),
        PinT::set(Level::Low),
    ]);
    let mut il = Pin::new(&[
        PinT::get(Level::High),
        PinT::get(Level::High),
        PinT::get(Level::High),
        PinT::get(Level::Low),
    ]);
    let mut spi = spi_after_start(&[0, c1, c2, 0]);
    let mut board = logged_board(acc_controller(&cfg), spi12(&spi), &en, &il, &log);
    assert!(!board.tick(adc(&cfg, 0)).unwrap().enable);
    board.request(Request::Enable).unwrap();
    let mut counts = adc(&cfg, 1);
    let d = board.tick(counts).unwrap();
    assert!(d.enable);
    assert_eq!(d.dac_code, c1);
    counts.tick = 2;
    counts.current = counts_for(&cfg.config().calibration.current_sense, ss);
    assert!(board.tick(counts).unwrap().enable);
    counts.tick = 3;
    let d = board.tick(counts).unwrap();
    assert!(!d.enable);
    assert_eq!(d.dac_code, 0);
    assert!(d.status.faults.contains(Fault::InterlockOpen));
    assert_eq!(
        log.borrow()[2..],
        [
            Ev::EnLow,
            Ev::Dac(0),
            Ev::Dac(c1),
            Ev::EnHigh,
            Ev::Dac(c2),
            Ev::EnHigh,
            Ev::EnLow,
            Ev::Dac(0)
        ]
    );
    en.done();
    il.done();
    spi.done();
}

/// The board's external fault input reaches the core through the edge:
/// asserted while emitting, it latches external-fault on that tick and the
/// edge drops enable before zeroing the DAC. (The edge used to build its
/// sample with the input never asserted.)
#[test]
fn the_external_fault_input_passes_through_the_edge_and_latches() {
    let cfg = zero_delay();
    let c1 = cfg.dac_code(cfg.soft_start_iu_per_tick());
    let mut en = en_after_start(&[
        PinT::set(Level::Low),
        PinT::set(Level::High),
        PinT::set(Level::Low),
    ]);
    let mut il = Pin::new(&[
        PinT::get(Level::High),
        PinT::get(Level::High),
        PinT::get(Level::High),
    ]);
    let mut spi = spi_after_start(&[0, c1, 0]);
    let mut board = board(
        acc_controller(&cfg),
        spi12(&spi),
        &en,
        &il,
        InterlockLevel::ClosedHigh,
    );
    assert!(!board.tick(adc(&cfg, 0)).unwrap().enable);
    board.request(Request::Enable).unwrap();
    assert!(board.tick(adc(&cfg, 1)).unwrap().enable);
    let mut counts = adc(&cfg, 2);
    counts.external_fault = true;
    let d = board.tick(counts).unwrap();
    assert!(!d.enable);
    assert_eq!(d.dac_code, 0);
    assert!(d.status.faults.contains(Fault::ExternalFault), "{d:?}");
    en.done();
    il.done();
    spi.done();
}

#[test]
fn closed_low_interlock_reads_the_low_level_as_closed() {
    let cfg = zero_delay();
    let c1 = cfg.dac_code(cfg.soft_start_iu_per_tick());
    let mut en = en_after_start(&[
        PinT::set(Level::Low),
        PinT::set(Level::High),
        PinT::set(Level::Low),
    ]);
    let mut il = Pin::new(&[
        PinT::get(Level::Low),
        PinT::get(Level::Low),
        PinT::get(Level::High),
    ]);
    let mut spi = spi_after_start(&[0, c1, 0]);
    let mut board = board(
        acc_controller(&cfg),
        spi12(&spi),
        &en,
        &il,
        InterlockLevel::ClosedLow,
    );
    board.tick(adc(&cfg, 0)).unwrap();
    assert!(board.controller().conditions().is_empty());
    board.request(Request::Enable).unwrap();
    assert!(board.tick(adc(&cfg, 1)).unwrap().enable);
    // High is open for this board.
    let d = board.tick(adc(&cfg, 2)).unwrap();
    assert!(!d.enable);
    assert!(d.status.faults.contains(Fault::InterlockOpen));
    en.done();
    il.done();
    spi.done();
}

fn read_error() -> MockError {
    MockError::Io(std::io::ErrorKind::Other)
}

#[test]
fn an_interlock_read_error_is_returned_latched_and_counts_as_open() {
    let cfg = zero_delay();
    let c1 = cfg.dac_code(cfg.soft_start_iu_per_tick());
    // Off with a failing read: reported, latched as interlock-pin, enable
    // refused. Cleared, then emission, then a failing read while emitting:
    // latched in that tick, enable low, DAC zero.
    let mut en = en_after_start(&[
        PinT::set(Level::Low),
        PinT::set(Level::Low),
        PinT::set(Level::High),
        PinT::set(Level::Low),
    ]);
    let mut il = Pin::new(&[
        PinT::get(Level::High).with_error(read_error()),
        PinT::get(Level::High),
        PinT::get(Level::High),
        PinT::get(Level::High).with_error(read_error()),
    ]);
    let mut spi = spi_after_start(&[0, 0, c1, 0]);
    let mut board = board(
        acc_controller(&cfg),
        spi12(&spi),
        &en,
        &il,
        InterlockLevel::ClosedHigh,
    );
    let e = board.tick(adc(&cfg, 0)).unwrap_err();
    assert!(e.interlock.is_some() && e.dac.is_none() && e.enable.is_none());
    assert_eq!(e.faults().iter().collect::<Vec<_>>(), [Fault::InterlockPin]);
    let ctl = board.controller();
    assert!(ctl.conditions().contains(Fault::InterlockOpen));
    assert_eq!(ctl.state(), State::Latched);
    let rec = ctl.fault_log().first().unwrap();
    assert_eq!((rec.fault, rec.tick), (Fault::InterlockPin, 0));
    assert_eq!(
        board.request(Request::Enable),
        Err(Rejection::NotAllowed {
            state: State::Latched
        })
    );
    board.tick(adc(&cfg, 1)).unwrap();
    board.request(Request::ClearFaults).unwrap();
    board.request(Request::Enable).unwrap();
    assert!(board.tick(adc(&cfg, 2)).unwrap().enable);
    let e = board.tick(adc(&cfg, 3)).unwrap_err();
    assert!(e.interlock.is_some());
    let ctl = board.controller();
    assert_eq!(ctl.state(), State::Latched);
    // The core saw an open interlock (a fast trip) and the edge names the
    // cause beside it.
    assert!(ctl.faults().contains(Fault::InterlockPin));
    assert!(ctl.faults().contains(Fault::InterlockOpen));
    en.done();
    il.done();
    spi.done();
}

/// Tick 0 off, tick 1 emits, tick 2 the DAC write of `c2` fails; the board
/// mocks expect `en2` from tick 2 on.
struct FailedDac {
    board: DriverBoard<LoggedDac<PwmDac<Pwm>>, LoggedPin<Pin>, Pin>,
    log: Log,
    counts: AdcCounts,
    c2: u16,
}

/// `pwm_after`: the writes after the failed one, each with whether it fails.
fn failed_dac_write(
    en2: &[PinT],
    pwm_after: &[(u16, bool)],
    il_ticks: usize,
) -> (FailedDac, Pwm, Pin, Pin) {
    let cfg = zero_delay();
    let max = cfg.config().calibration.dac.max_code;
    let ss = cfg.soft_start_iu_per_tick();
    let (c1, c2) = (cfg.dac_code(ss), cfg.dac_code(ss * 2));
    let mut pwm_ex = Vec::new();
    pwm_ex.extend(pwm_write(0, max)); // construction
    pwm_ex.extend(pwm_write(0, max)); // tick 0, off
    pwm_ex.extend(pwm_write(c1, max)); // tick 1, emitting
    let [a, b] = pwm_write(c2, max); // tick 2, the write fails
    pwm_ex.extend([a, b.with_error(read_error())]);
    for &(c, fails) in pwm_after {
        let [a, b] = pwm_write(c, max);
        pwm_ex.extend([a, if fails { b.with_error(read_error()) } else { b }]);
    }
    let pwm = Pwm::new(&pwm_ex);
    let mut en_ex = vec![
        PinT::set(Level::Low),
        PinT::set(Level::Low),
        PinT::set(Level::High),
    ];
    en_ex.extend_from_slice(en2);
    let en = Pin::new(&en_ex);
    let il = Pin::new(&vec![PinT::get(Level::High); il_ticks]);
    let log = Log::default();
    let mut board = logged_board(
        acc_controller(&cfg),
        PwmDac::new(pwm.clone(), max),
        &en,
        &il,
        &log,
    );
    board.tick(adc(&cfg, 0)).unwrap();
    board.request(Request::Enable).unwrap();
    let mut counts = adc(&cfg, 1);
    assert!(board.tick(counts).unwrap().enable);
    counts.tick = 2;
    counts.current = counts_for(&cfg.config().calibration.current_sense, ss);
    (
        FailedDac {
            board,
            log,
            counts,
            c2,
        },
        pwm,
        en,
        il,
    )
}

#[test]
fn a_failed_dac_write_is_latched_at_once_and_holds_enable_low_until_reset() {
    // Tick 2 fails and tries enable low then zero (which works); ticks 3-4
    // stay off; tick 5 after the reset and a clear is off, tick 6 emits.
    let (mut f, mut pwm, mut en, mut il) = failed_dac_write(
        &[
            PinT::set(Level::Low),
            PinT::set(Level::Low),
            PinT::set(Level::Low),
            PinT::set(Level::Low),
            PinT::set(Level::High),
        ],
        &[
            (0, false),
            (0, false),
            (0, false),
            (0, false),
            (f_c1(), false),
        ],
        7,
    );
    let e = f.board.tick(f.counts).unwrap_err();
    assert!(e.dac.is_some() && e.enable.is_none() && e.interlock.is_none());
    assert!(f.board.dac_failed());
    // Latched in the same tick, with the cause named and the code recorded.
    let ctl = f.board.controller();
    assert_eq!(ctl.state(), State::Latched);
    let log = ctl.fault_log();
    let rec = log.first().unwrap();
    assert_eq!((rec.fault, rec.tick), (Fault::DacBus, 2));
    assert_eq!(rec.measured, Fx::from_num(f.c2));
    assert_eq!(rec.limit, Fx::from_num(4095));
    assert_eq!(log.len(), 1);
    // The next sample reads no current (the source is off): no drive
    // mismatch follows the DAC failure.
    f.counts.current = 0;
    f.counts.tick = 3;
    let d = f.board.tick(f.counts).unwrap();
    assert!(!d.enable);
    assert_eq!(f.board.controller().fault_log().len(), 1);
    assert!(!d.status.faults.contains(Fault::DriveMismatch));
    // Clearing is refused while the failure holds.
    assert_eq!(
        f.board.request(Request::ClearFaults),
        Err(Rejection::ConditionPresent {
            fault: Fault::DacBus
        })
    );
    f.counts.tick = 4;
    assert!(!f.board.tick(f.counts).unwrap().enable);
    // After the board has checked the DAC: reset, clear, emit again.
    f.board.reset_edge();
    f.board.request(Request::ClearFaults).unwrap();
    f.counts.tick = 5;
    assert!(!f.board.tick(f.counts).unwrap().enable);
    f.board.request(Request::Enable).unwrap();
    f.counts.tick = 6;
    assert!(f.board.tick(f.counts).unwrap().enable);
    assert_eq!(
        f.log.borrow()[2..],
        [
            Ev::EnLow,
            Ev::Dac(0),
            Ev::Dac(f_c1()),
            Ev::EnHigh,
            Ev::Dac(f.c2),
            Ev::EnLow,
            Ev::Dac(0),
            Ev::EnLow,
            Ev::Dac(0),
            Ev::EnLow,
            Ev::Dac(0),
            Ev::EnLow,
            Ev::Dac(0),
            Ev::Dac(f_c1()),
            Ev::EnHigh,
        ]
    );
    pwm.done();
    en.done();
    il.done();
}

/// The first soft-start code of [`zero_delay`].
fn f_c1() -> u16 {
    let cfg = zero_delay();
    cfg.dac_code(cfg.soft_start_iu_per_tick())
}

#[test]
fn a_dac_and_an_enable_pin_on_a_failed_bus_are_both_reported_and_latched() {
    // The case that left enable high with the DAC at its last code: the DAC
    // write fails, then enable low fails too, then the DAC zero fails.
    let (mut f, mut pwm, mut en, mut il) = failed_dac_write(
        &[PinT::set(Level::Low).with_error(read_error())],
        &[(0, true)],
        3,
    );
    let e = f.board.tick(f.counts).unwrap_err();
    assert!(e.dac.is_some() && e.enable.is_some());
    assert_eq!(
        e.faults().iter().collect::<Vec<_>>(),
        [Fault::DacBus, Fault::EnablePin]
    );
    let ctl = f.board.controller();
    assert_eq!(ctl.state(), State::Latched);
    let log = ctl.fault_log();
    let seen: Vec<_> = log
        .first()
        .into_iter()
        .chain(log.later())
        .map(|r| r.fault)
        .collect();
    assert_eq!(seen, [Fault::DacBus, Fault::EnablePin]);
    assert_eq!(f.log.borrow()[6..], [Ev::Dac(f.c2), Ev::EnLow, Ev::Dac(0)]);
    pwm.done();
    en.done();
    il.done();
}

#[test]
fn a_failed_enable_rise_is_latched_and_the_edge_goes_back_to_low_and_zero() {
    let cfg = zero_delay();
    let c1 = cfg.dac_code(cfg.soft_start_iu_per_tick());
    let log = Log::default();
    let mut en = en_after_start(&[
        PinT::set(Level::Low),
        PinT::set(Level::High).with_error(read_error()),
        PinT::set(Level::Low),
    ]);
    let mut il = Pin::new(&[PinT::get(Level::High), PinT::get(Level::High)]);
    let mut spi = spi_after_start(&[0, c1, 0]);
    let mut board = logged_board(acc_controller(&cfg), spi12(&spi), &en, &il, &log);
    board.tick(adc(&cfg, 0)).unwrap();
    board.request(Request::Enable).unwrap();
    let e = board.tick(adc(&cfg, 1)).unwrap_err();
    assert!(e.enable.is_some() && e.dac.is_none());
    let ctl = board.controller();
    assert_eq!(ctl.state(), State::Latched);
    let rec = ctl.fault_log().first().unwrap();
    assert_eq!((rec.fault, rec.tick), (Fault::EnablePin, 1));
    assert_eq!((rec.measured, rec.limit), (Fx::ONE, Fx::ZERO));
    assert_eq!(
        log.borrow()[4..],
        [Ev::Dac(c1), Ev::EnHigh, Ev::EnLow, Ev::Dac(0)]
    );
    en.done();
    il.done();
    spi.done();
}

#[test]
fn an_enable_pin_error_while_off_is_reported_latched_and_the_dac_is_still_zeroed() {
    let cfg = demo();
    let log = Log::default();
    let mut en = en_after_start(&[PinT::set(Level::Low).with_error(read_error())]);
    let mut il = Pin::new(&[PinT::get(Level::High)]);
    let mut spi = spi_after_start(&[0]);
    let mut board = logged_board(Controller::new(cfg.clone()), spi12(&spi), &en, &il, &log);
    let e = board.tick(adc(&cfg, 0)).unwrap_err();
    assert!(e.enable.is_some() && e.dac.is_none() && e.interlock.is_none());
    assert_eq!(board.controller().state(), State::Latched);
    assert!(board.controller().faults().contains(Fault::EnablePin));
    assert_eq!(log.borrow()[2..], [Ev::EnLow, Ev::Dac(0)]);
    en.done();
    il.done();
    spi.done();
}

mod random_failures {
    //! Fakes whose every call fails on a proptest-chosen script; the edge
    //! must never leave the enable line high after an error it could act
    //! on, and every error it returns must be latched.
    use super::*;
    use embedded_hal::digital::{ErrorKind, InputPin};
    use proptest::prelude::*;
    use std::collections::VecDeque;

    #[derive(Default)]
    struct Hw {
        /// The enable line's level (a failed call leaves it unchanged).
        en_high: bool,
        /// The DAC's code (a failed write leaves it unchanged).
        code: u16,
        /// Whether each next call fails, in call order (then: succeed).
        fails: VecDeque<bool>,
    }

    type Shared = Rc<RefCell<Hw>>;

    fn fails(hw: &Shared) -> bool {
        hw.borrow_mut().fails.pop_front().unwrap_or(false)
    }

    struct En(Shared);
    struct Il(Shared);
    struct Dac(Shared);

    impl ErrorType for En {
        type Error = ErrorKind;
    }
    impl ErrorType for Il {
        type Error = ErrorKind;
    }
    impl OutputPin for En {
        fn set_low(&mut self) -> Result<(), ErrorKind> {
            if fails(&self.0) {
                return Err(ErrorKind::Other);
            }
            self.0.borrow_mut().en_high = false;
            Ok(())
        }
        fn set_high(&mut self) -> Result<(), ErrorKind> {
            if fails(&self.0) {
                return Err(ErrorKind::Other);
            }
            self.0.borrow_mut().en_high = true;
            Ok(())
        }
    }
    impl InputPin for Il {
        fn is_high(&mut self) -> Result<bool, ErrorKind> {
            if fails(&self.0) {
                return Err(ErrorKind::Other);
            }
            Ok(true)
        }
        fn is_low(&mut self) -> Result<bool, ErrorKind> {
            self.is_high().map(|h| !h)
        }
    }
    impl CurrentDac for Dac {
        type Error = ErrorKind;
        fn set_code(&mut self, code: u16) -> Result<(), ErrorKind> {
            if fails(&self.0) {
                return Err(ErrorKind::Other);
            }
            self.0.borrow_mut().code = code;
            Ok(())
        }
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(96))]
        #[test]
        fn the_edge_never_leaves_enable_high_after_an_error_it_could_act_on(
            script in proptest::collection::vec(prop::bool::weighted(0.08), 0..400),
            requests in proptest::collection::vec(0u8..4, 100),
        ) {
            let cfg = zero_delay();
            let hw = Shared::default();
            hw.borrow_mut().fails = script.into();
            let made = DriverBoard::new(
                acc_controller(&cfg),
                Dac(hw.clone()),
                En(hw.clone()),
                Il(hw.clone()),
                InterlockLevel::ClosedHigh,
            );
            let mut board = match made {
                Ok(b) => b,
                Err(e) => {
                    let b = e.board;
                    for f in e.error.faults().iter() {
                        prop_assert!(b.controller().faults().contains(f));
                    }
                    prop_assert!(!hw.borrow().en_high);
                    b
                }
            };
            let cal = cfg.config().calibration.current_sense;
            for (t, r) in requests.iter().enumerate() {
                let req = match r {
                    0 => Request::Enable,
                    1 => Request::ClearFaults,
                    2 => Request::Disable,
                    _ => {
                        board.reset_edge();
                        Request::Enable
                    }
                };
                let _ = board.request(req);
                // The source follows the DAC while enabled.
                let mut counts = adc(&cfg, t as u32);
                let (en_high, code) = (hw.borrow().en_high, hw.borrow().code);
                if en_high {
                    counts.current = counts_for(&cal, dac_iu(&cfg, code));
                }
                let mut pin_refused = false;
                match board.tick(counts) {
                    Ok(d) => {
                        prop_assert_eq!(hw.borrow().en_high, d.enable);
                        if d.enable {
                            prop_assert_eq!(hw.borrow().code, d.dac_code);
                        }
                    }
                    Err(e) => {
                        let ctl = board.controller();
                        prop_assert_eq!(ctl.state(), State::Latched);
                        for f in e.faults().iter() {
                            prop_assert!(ctl.faults().contains(f), "{f} not latched");
                        }
                        // Enable is low unless the pin itself refused.
                        prop_assert!(!hw.borrow().en_high || e.enable.is_some());
                        pin_refused = e.enable.is_some();
                    }
                }
                if hw.borrow().en_high && !pin_refused {
                    prop_assert!(board.controller().state().is_emitting());
                }
            }
        }
    }
}
