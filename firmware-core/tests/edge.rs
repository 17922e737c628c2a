//! The embedded-hal edge against strict mocks (every mock ends with
//! `.done()`, so a missing or extra call fails): SPI DAC frames, PWM DAC
//! scaling, the order of enable and DAC writes across devices (a shared
//! event log around the mocks), interlock read failures and DAC failures.

mod common;

use common::*;
use diodestat_core::edge::{
    AdcCounts, CurrentDac, DacWidth, DriverBoard, EdgeError, InterlockLevel, PwmDac, SpiDac,
};
use diodestat_core::{Controller, Fault, Fx, Mode, Rejection, Request, State, ValidConfig};
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
/// interlock reads closed high.
fn logged_board<D: CurrentDac>(
    ctl: Controller,
    dac: D,
    en: &Pin,
    il: &Pin,
    log: &Log,
) -> DriverBoard<LoggedDac<D>, LoggedPin<Pin>, Pin> {
    DriverBoard::new(
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
    )
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
    }
}

fn zero_delay() -> ValidConfig {
    demo_with(|c| c.ramp.emission_delay_ms = 0)
}

/// An ACC controller at 20 mA with a zero emission delay.
fn acc_controller(cfg: &ValidConfig) -> Controller {
    let mut ctl = Controller::new(cfg.clone());
    ctl.request(Request::SetMode(Mode::Acc)).unwrap();
    ctl.request(Request::SetCurrentMa(Fx::from_num(20)))
        .unwrap();
    ctl
}

#[test]
fn spi_dac_12_bit_frames() {
    let codes = [0u16, 1, 0x0ABC, 0x0FFF];
    let mut spi = Spi::new(&spi_writes(&codes));
    let mut dac = SpiDac::new(spi.clone(), DacWidth::Bits12);
    for c in codes {
        dac.set_code(c).unwrap();
    }
    spi.done();
    // The literal frames, for the record: 0x4ABC for 0xABC, 0x4FFF for 0xFFF.
    assert_eq!(frame12(0x0ABC), [0x4A, 0xBC]);
    assert_eq!(frame12(0x0FFF), [0x4F, 0xFF]);
    // Bits above the 12-bit code never reach the command bits.
    let mut spi = Spi::new(&spi_write(vec![0x4F, 0xFF]));
    SpiDac::new(spi.clone(), DacWidth::Bits12)
        .set_code(0xFFFF)
        .unwrap();
    spi.done();
}

#[test]
fn spi_dac_16_bit_frames() {
    let codes = [0u16, 0x00FF, 0xBEEF, 0xFFFF];
    let ex: Vec<SpiT<u8>> = codes
        .iter()
        .flat_map(|c| spi_write(vec![0x01, (c >> 8) as u8, (c & 0xFF) as u8]))
        .collect();
    let mut dac = SpiDac::new(Spi::new(&ex), DacWidth::Bits16);
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
fn off_drives_enable_low_before_zeroing_the_dac() {
    let cfg = demo();
    let log = Log::default();
    let mut en = Pin::new(&[PinT::set(Level::Low), PinT::set(Level::Low)]);
    let mut il = Pin::new(&[PinT::get(Level::High), PinT::get(Level::High)]);
    let mut spi = Spi::new(&spi_writes(&[0, 0]));
    let mut board = logged_board(
        Controller::new(cfg.clone()),
        SpiDac::new(spi.clone(), DacWidth::Bits12),
        &en,
        &il,
        &log,
    );
    for t in 0..2 {
        let d = board.tick(adc(&cfg, t)).unwrap();
        assert!(!d.enable);
        assert_eq!(d.status.state, State::Off);
    }
    assert_eq!(
        *log.borrow(),
        [Ev::EnLow, Ev::Dac(0), Ev::EnLow, Ev::Dac(0)]
    );
    en.done();
    il.done();
    spi.done();
}

#[test]
fn emission_writes_the_dac_before_enable_and_a_trip_drops_enable_before_the_dac() {
    let cfg = zero_delay();
    let ss = cfg.soft_start_ma_per_tick();
    let c1 = cfg.dac_code(ss);
    let c2 = cfg.dac_code(ss * 2);
    assert!(c1 > 0 && c2 > c1);
    let log = Log::default();
    // Tick 0 off, ticks 1-2 emit, tick 3 the interlock opens.
    let mut en = Pin::new(&[
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
    let mut spi = Spi::new(&spi_writes(&[0, c1, c2, 0]));
    let mut board = logged_board(
        acc_controller(&cfg),
        SpiDac::new(spi.clone(), DacWidth::Bits12),
        &en,
        &il,
        &log,
    );
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
        *log.borrow(),
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

#[test]
fn closed_low_interlock_reads_the_low_level_as_closed() {
    let cfg = zero_delay();
    let c1 = cfg.dac_code(cfg.soft_start_ma_per_tick());
    let mut en = Pin::new(&[
        PinT::set(Level::Low),
        PinT::set(Level::High),
        PinT::set(Level::Low),
    ]);
    let mut il = Pin::new(&[
        PinT::get(Level::Low),
        PinT::get(Level::Low),
        PinT::get(Level::High),
    ]);
    let mut spi = Spi::new(&spi_writes(&[0, c1, 0]));
    let mut board = DriverBoard::new(
        acc_controller(&cfg),
        SpiDac::new(spi.clone(), DacWidth::Bits12),
        en.clone(),
        il.clone(),
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
fn an_interlock_read_error_counts_as_open() {
    let cfg = zero_delay();
    let c1 = cfg.dac_code(cfg.soft_start_ma_per_tick());
    // Off with a failing read: Enable refused. Then emission, then a failing
    // read while emitting: latched in that tick.
    let mut en = Pin::new(&[
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
    let mut spi = Spi::new(&spi_writes(&[0, 0, c1, 0]));
    let mut board = DriverBoard::new(
        acc_controller(&cfg),
        SpiDac::new(spi.clone(), DacWidth::Bits12),
        en.clone(),
        il.clone(),
        InterlockLevel::ClosedHigh,
    );
    board.tick(adc(&cfg, 0)).unwrap();
    assert!(board
        .controller()
        .conditions()
        .contains(Fault::InterlockOpen));
    assert_eq!(
        board.request(Request::Enable),
        Err(Rejection::ConditionPresent {
            fault: Fault::InterlockOpen
        })
    );
    board.tick(adc(&cfg, 1)).unwrap();
    board.request(Request::Enable).unwrap();
    assert!(board.tick(adc(&cfg, 2)).unwrap().enable);
    let d = board.tick(adc(&cfg, 3)).unwrap();
    assert!(!d.enable);
    assert_eq!(d.status.state, State::Latched);
    assert!(d.status.faults.contains(Fault::InterlockOpen));
    en.done();
    il.done();
    spi.done();
}

#[test]
fn a_failed_dac_write_holds_enable_low_until_reset() {
    let cfg = zero_delay();
    let max = cfg.config().calibration.dac.max_code;
    let ss = cfg.soft_start_ma_per_tick();
    let (c1, c2) = (cfg.dac_code(ss), cfg.dac_code(ss * 2));
    let log = Log::default();
    let mut pwm_ex = Vec::new();
    pwm_ex.extend(pwm_write(0, max)); // tick 0, off
    pwm_ex.extend(pwm_write(c1, max)); // tick 1, emitting
    let [a, b] = pwm_write(c2, max); // tick 2, the write fails
    pwm_ex.extend([a, b.with_error(read_error())]);
    pwm_ex.extend(pwm_write(0, max)); // tick 3, held off
    pwm_ex.extend(pwm_write(0, max)); // tick 4, held off
    let mut pwm = Pwm::new(&pwm_ex);
    let mut en = Pin::new(&[
        PinT::set(Level::Low),
        PinT::set(Level::High),
        PinT::set(Level::Low),
        PinT::set(Level::Low),
        PinT::set(Level::Low),
    ]);
    let mut il = Pin::new(&vec![PinT::get(Level::High); 5]);
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
    assert!(matches!(board.tick(counts), Err(EdgeError::Dac(_))));
    assert!(board.dac_failed());
    // The controller was told to stop: it soft-stops to Off.
    counts.current = 0;
    counts.tick = 3;
    let d = board.tick(counts).unwrap();
    assert!(!d.enable);
    assert_eq!(d.status.state, State::Off);
    // Even when the controller asks for emission again, enable stays low.
    board.request(Request::Enable).unwrap();
    counts.tick = 4;
    let d = board.tick(counts).unwrap();
    assert!(!d.enable);
    assert_eq!(d.dac_code, 0);
    assert_eq!(
        board.controller().state(),
        State::Stopping,
        "told to stop again"
    );
    assert_eq!(
        *log.borrow(),
        [
            Ev::EnLow,
            Ev::Dac(0),
            Ev::Dac(c1),
            Ev::EnHigh,
            Ev::Dac(c2),
            Ev::EnLow,
            Ev::EnLow,
            Ev::Dac(0),
            Ev::EnLow,
            Ev::Dac(0)
        ]
    );
    pwm.done();
    en.done();
    il.done();
}

#[test]
fn a_failed_dac_zero_write_also_holds_enable_low() {
    let cfg = zero_delay();
    let max = cfg.config().calibration.dac.max_code;
    let [a, b] = pwm_write(0, max);
    let mut ex = vec![a, b.with_error(read_error())]; // tick 0: zeroing fails
    ex.extend(pwm_write(0, max)); // tick 1: held off although enabled
    ex.extend(pwm_write(0, max)); // tick 2: reset, off
    ex.extend(pwm_write(cfg.dac_code(cfg.soft_start_ma_per_tick()), max)); // tick 3
    let mut pwm = Pwm::new(&ex);
    let mut en = Pin::new(&[
        PinT::set(Level::Low),
        PinT::set(Level::Low),
        PinT::set(Level::Low),
        PinT::set(Level::High),
    ]);
    let mut il = Pin::new(&vec![PinT::get(Level::High); 4]);
    let mut board = DriverBoard::new(
        acc_controller(&cfg),
        PwmDac::new(pwm.clone(), max),
        en.clone(),
        il.clone(),
        InterlockLevel::ClosedHigh,
    );
    assert!(matches!(board.tick(adc(&cfg, 0)), Err(EdgeError::Dac(_))));
    assert!(board.dac_failed());
    board.request(Request::Enable).unwrap();
    let d = board.tick(adc(&cfg, 1)).unwrap();
    assert!(!d.enable, "a DAC that failed is not trusted with emission");
    // After the board has checked the DAC it may emit again.
    board.reset_edge();
    assert!(!board.dac_failed());
    board.tick(adc(&cfg, 2)).unwrap();
    assert_eq!(board.controller().state(), State::Off);
    board.request(Request::Enable).unwrap();
    assert!(board.tick(adc(&cfg, 3)).unwrap().enable);
    pwm.done();
    en.done();
    il.done();
}

#[test]
fn an_enable_pin_error_is_reported_and_the_dac_is_still_zeroed() {
    let cfg = demo();
    let log = Log::default();
    let mut en = Pin::new(&[PinT::set(Level::Low).with_error(read_error())]);
    let mut il = Pin::new(&[PinT::get(Level::High)]);
    let mut spi = Spi::new(&spi_writes(&[0]));
    let mut board = logged_board(
        Controller::new(cfg.clone()),
        SpiDac::new(spi.clone(), DacWidth::Bits12),
        &en,
        &il,
        &log,
    );
    assert!(matches!(
        board.tick(adc(&cfg, 0)),
        Err(EdgeError::EnablePin(_))
    ));
    assert_eq!(*log.borrow(), [Ev::EnLow, Ev::Dac(0)]);
    en.done();
    il.done();
    spi.done();
}
