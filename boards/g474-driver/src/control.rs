//! The control tick: TIM6 interrupts at the configured tick rate; each
//! interrupt samples the ADC, runs `DriverBoard::tick` (the core's step and
//! the ordered DAC/enable update) and pets the independent watchdog.
//!
//! Everything the interrupt uses lives in [`CONTROL`], behind a
//! critical-section mutex; thread mode takes it only briefly, to copy the
//! status or the latch record ([`with`]). Requests go the other way through
//! the lock-free [`REQUESTS`] mailbox, answers come back through
//! [`ANSWERS`]. A critical section delays the
//! tick by at most its own length; a longer stall shows up as a gap in the
//! tick index (the core's missed-tick protection) and, if the tick stops,
//! the IWDG resets the MCU, whose enable pin then floats to the board's
//! pull-down: current source off. A tick whose enable pin refused to be
//! driven does not pet the IWDG either, for the same reset.
//!
//! The tick index is the time since start in tick periods, from the embassy
//! time driver (`Instant::now`), rounded to the nearest period, so a late or
//! missing interrupt is visible to the core rather than hidden by a counter.

use core::cell::RefCell;

use critical_section::Mutex;
use diodestat_core::{Drive, DriverBoard, Mailbox, Rejection, Request};
use embassy_stm32::gpio::{Input, Output};
use embassy_stm32::interrupt;
use embassy_stm32::peripherals::{IWDG, TIM6};
use embassy_stm32::timer::low_level::Timer;
use embassy_stm32::wdg::IndependentWatchdog;
use embassy_time::Instant;

use crate::dac::OnChipDac;
use crate::sampler::Sampler;

/// The core with its DAC, enable line and interlock input.
pub type Board = DriverBoard<OnChipDac, Output<'static>, Input<'static>>;

/// What the tick interrupt owns.
pub struct Control {
    /// Controller and edge.
    pub board: Board,
    /// The ADC channels.
    pub sampler: Sampler,
    /// The tick timer (its update flag is cleared every tick).
    pub timer: Timer<'static, TIM6>,
    /// The independent watchdog, petted after every completed tick.
    pub watchdog: IndependentWatchdog<'static, IWDG>,
    /// Tick period, µs.
    pub period_us: u64,
    /// The last drive applied.
    pub last: Drive,
    /// Ticks run.
    pub ticks: u32,
    /// Ticks whose edge update reported an error.
    pub edge_errors: u32,
}

/// The control state, shared between the tick interrupt and thread mode.
pub static CONTROL: Mutex<RefCell<Option<Control>>> = Mutex::new(RefCell::new(None));

/// Requests from thread mode to the tick (lock-free: thread mode never
/// blocks the tick to send one).
pub static REQUESTS: Mailbox<Request, 8> = Mailbox::new();

/// The tick's answer to each request, in order.
pub static ANSWERS: Mailbox<Result<(), Rejection>, 8> = Mailbox::new();

/// Run `f` on the control state in a critical section (`None` before
/// [`install`]).
pub fn with<R>(f: impl FnOnce(&mut Control) -> R) -> Option<R> {
    critical_section::with(|cs| CONTROL.borrow_ref_mut(cs).as_mut().map(f))
}

/// Hand the control state to the interrupt and start the tick.
pub fn install(control: Control) {
    critical_section::with(|cs| {
        let mut slot = CONTROL.borrow_ref_mut(cs);
        let c = slot.insert(control);
        c.timer.clear_update_interrupt();
        c.timer.enable_update_interrupt(true);
        c.timer.start();
    });
    use embassy_stm32::interrupt::{InterruptExt, Priority};
    // Above the time driver and everything else: the tick must not wait.
    interrupt::TIM6_DAC.set_priority(Priority::P0);
    #[allow(unsafe_code)]
    // SAFETY: the handler below only takes the critical-section mutex; no
    // other code relies on this interrupt being masked.
    unsafe {
        interrupt::TIM6_DAC.enable();
    }
}

/// One control tick.
fn tick(c: &mut Control) {
    c.timer.clear_update_interrupt();
    // At most the mailbox's capacity: thread mode cannot add while the tick
    // runs. The answers cannot overflow: thread mode keeps at most as many
    // requests unanswered as the answer mailbox holds.
    while let Some(req) = REQUESTS.pop() {
        let _ = ANSWERS.push(c.board.request(req));
    }
    let now_us = Instant::now().as_micros();
    let index = (now_us + c.period_us / 2) / c.period_us.max(1);
    // The core expects the index to wrap at u32::MAX.
    let adc = c.sampler.read(index as u32);
    // Every edge error is latched in the controller (and logged) already.
    let enable_refused = match c.board.tick(adc) {
        Ok(drive) => {
            c.last = drive;
            false
        }
        Err(e) => {
            c.edge_errors = c.edge_errors.saturating_add(1);
            e.enable.is_some()
        }
    };
    c.ticks = c.ticks.wrapping_add(1);
    // An enable line that cannot be driven low is not trusted: no pet, so
    // the IWDG resets the MCU and the pin floats to the board's pull-down.
    if !enable_refused {
        c.watchdog.pet();
    }
}

#[interrupt]
fn TIM6_DAC() {
    critical_section::with(|cs| {
        if let Some(c) = CONTROL.borrow_ref_mut(cs).as_mut() {
            tick(c);
        }
    });
}
