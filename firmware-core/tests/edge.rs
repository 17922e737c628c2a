//! The embedded-hal edge against strict mocks: SPI DAC frames, enable-line
//! ordering, interlock read failures and DAC write failures.

use diodestat_core::edge::{
    AdcCounts, CurrentDac, DacWidth, DriverBoard, InterlockLevel, PwmDac, SpiDac,
};
use diodestat_core::*;
use embedded_hal_mock::eh1::digital::{Mock as Pin, State as Level, Transaction as PinT};
use embedded_hal_mock::eh1::pwm::{Mock as Pwm, Transaction as PwmT};
use embedded_hal_mock::eh1::spi::{Mock as Spi, Transaction as SpiT};
use embedded_hal_mock::eh1::MockError;

fn counts(tick: u32) -> AdcCounts {
    AdcCounts {
        tick,
        monitor: 0,
        current: 0,
        temperature: 2048,
        supply: 2457,
    }
}

#[test]
fn spi_frames_12_and_16_bit() {
    let mut spi = Spi::new(&[
        SpiT::transaction_start(),
        SpiT::write_vec(vec![0x4A, 0xBC]),
        SpiT::transaction_end(),
    ]);
    SpiDac::new(spi.clone(), DacWidth::Bits12)
        .set_code(0x0ABC)
        .unwrap();
    spi.done();
    let mut spi = Spi::new(&[
        SpiT::transaction_start(),
        SpiT::write_vec(vec![0x01, 0xBE, 0xEF]),
        SpiT::transaction_end(),
    ]);
    SpiDac::new(spi.clone(), DacWidth::Bits16)
        .set_code(0xBEEF)
        .unwrap();
    spi.done();
}

#[test]
fn pwm_dac_scales_to_max_duty() {
    let mut pwm = Pwm::new(&[PwmT::max_duty_cycle(1000), PwmT::set_duty_cycle(500)]);
    PwmDac::new(pwm.clone(), 4094).set_code(2047).unwrap();
    pwm.done();
}

#[test]
fn disabled_drive_drops_enable_before_zeroing_the_dac() {
    let ctl = Controller::new(example::config().validate().unwrap());
    // Off: enable low first, then DAC zero.
    let mut en = Pin::new(&[PinT::set(Level::Low)]);
    let mut il = Pin::new(&[PinT::get(Level::High)]);
    let mut spi = Spi::new(&[
        SpiT::transaction_start(),
        SpiT::write_vec(vec![0x40, 0x00]),
        SpiT::transaction_end(),
    ]);
    let mut board = DriverBoard::new(
        ctl,
        SpiDac::new(spi.clone(), DacWidth::Bits12),
        en.clone(),
        il.clone(),
        InterlockLevel::ClosedHigh,
    );
    let d = board.tick(counts(0)).unwrap();
    assert!(!d.enable);
    en.done();
    il.done();
    spi.done();
}

#[test]
fn interlock_read_error_counts_as_open_and_blocks_enable() {
    let ctl = Controller::new(example::config().validate().unwrap());
    let mut en = Pin::new(&[PinT::set(Level::Low)]);
    let mut il =
        Pin::new(&[PinT::get(Level::High).with_error(MockError::Io(std::io::ErrorKind::Other))]);
    let mut spi = Spi::new(&[
        SpiT::transaction_start(),
        SpiT::write_vec(vec![0x40, 0x00]),
        SpiT::transaction_end(),
    ]);
    let mut board = DriverBoard::new(
        ctl,
        SpiDac::new(spi.clone(), DacWidth::Bits12),
        en.clone(),
        il.clone(),
        InterlockLevel::ClosedHigh,
    );
    board.tick(counts(0)).unwrap();
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
    en.done();
    il.done();
    spi.done();
}

#[test]
fn enabled_drive_writes_the_dac_before_enable() {
    let mut cfg = example::config();
    cfg.ramp.emission_delay_ms = 0;
    let ctl = Controller::new(cfg.validate().unwrap());
    // Tick 0: off. Tick 1: ramping, first soft-start step (0.5 mA -> code 34 = 0x022), then enable high.
    let mut en = Pin::new(&[PinT::set(Level::Low), PinT::set(Level::High)]);
    let mut il = Pin::new(&[PinT::get(Level::High), PinT::get(Level::High)]);
    let mut spi = Spi::new(&[
        SpiT::transaction_start(),
        SpiT::write_vec(vec![0x40, 0x00]),
        SpiT::transaction_end(),
        SpiT::transaction_start(),
        SpiT::write_vec(vec![0x40, 0x22]),
        SpiT::transaction_end(),
    ]);
    let mut board = DriverBoard::new(
        ctl,
        SpiDac::new(spi.clone(), DacWidth::Bits12),
        en.clone(),
        il.clone(),
        InterlockLevel::ClosedHigh,
    );
    board.tick(counts(0)).unwrap();
    board.request(Request::Enable).unwrap();
    assert!(board.tick(counts(1)).unwrap().enable);
    en.done();
    il.done();
    spi.done();
}

/// A DAC that fails on its n-th write.
#[derive(Debug)]
struct FlakyDac {
    writes: u32,
    fail_at: u32,
}

impl CurrentDac for FlakyDac {
    type Error = ();
    fn set_code(&mut self, _code: u16) -> Result<(), ()> {
        self.writes += 1;
        if self.writes == self.fail_at {
            Err(())
        } else {
            Ok(())
        }
    }
}

#[test]
fn a_dac_failure_holds_enable_low() {
    let mut cfg = example::config();
    cfg.ramp.emission_delay_ms = 0;
    let ctl = Controller::new(cfg.validate().unwrap());
    // Tick 0 off (write 1), tick 1 emits (write 2), tick 2 write fails, tick 3 stays low.
    let mut en = Pin::new(&[
        PinT::set(Level::Low),
        PinT::set(Level::High),
        PinT::set(Level::Low),
        PinT::set(Level::Low),
    ]);
    let mut il = Pin::new(&vec![PinT::get(Level::High); 4]);
    let mut board = DriverBoard::new(
        ctl,
        FlakyDac {
            writes: 0,
            fail_at: 3,
        },
        en.clone(),
        il.clone(),
        InterlockLevel::ClosedHigh,
    );
    board.tick(counts(0)).unwrap();
    board.request(Request::Enable).unwrap();
    assert!(board.tick(counts(1)).unwrap().enable);
    let mut c = counts(2);
    c.current = 29; // about 0.5 mA sensed, matching the command
    assert!(matches!(
        board.tick(c),
        Err(diodestat_core::edge::EdgeError::Dac(()))
    ));
    assert!(board.dac_failed());
    c.tick = 3;
    assert!(!board.tick(c).unwrap().enable);
    en.done();
    il.done();
}
