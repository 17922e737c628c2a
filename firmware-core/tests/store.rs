//! The latch record in a NOR flash (a RAM model with the program and erase
//! rules of NOR: a write only clears bits, an erase sets a page to 0xFF):
//! a reset in the latched state comes back latched through the flash, a
//! write cut short by a reset is refused into a latch, the last slot is
//! kept for a latch, and compaction at boot.

mod common;

use common::*;
use diodestat_core::{
    Controller, Fault, FaultSet, Fx, LatchRecord, LatchStore, Request, State, StoreError,
    LATCH_RECORD_LEN,
};
use embedded_storage::nor_flash::{ErrorType, NorFlash, NorFlashErrorKind, ReadNorFlash};

const ERASE: usize = 256;
const WRITE: usize = 8;

/// Two erase pages of NOR flash in RAM; `cut_after` bytes programmed, then
/// every write fails part-way (a reset during the write).
#[derive(Clone, Debug)]
struct RamFlash {
    mem: Vec<u8>,
    cut_after: Option<usize>,
    erases: u32,
}

impl RamFlash {
    fn new() -> Self {
        RamFlash {
            mem: vec![0xFF; 2 * ERASE],
            cut_after: None,
            erases: 0,
        }
    }
}

impl ErrorType for RamFlash {
    type Error = NorFlashErrorKind;
}

impl ReadNorFlash for RamFlash {
    const READ_SIZE: usize = 1;
    fn read(&mut self, offset: u32, bytes: &mut [u8]) -> Result<(), Self::Error> {
        let o = offset as usize;
        let src = self
            .mem
            .get(o..o + bytes.len())
            .ok_or(NorFlashErrorKind::OutOfBounds)?;
        bytes.copy_from_slice(src);
        Ok(())
    }
    fn capacity(&self) -> usize {
        self.mem.len()
    }
}

impl NorFlash for RamFlash {
    const WRITE_SIZE: usize = WRITE;
    const ERASE_SIZE: usize = ERASE;
    fn erase(&mut self, from: u32, to: u32) -> Result<(), Self::Error> {
        let (f, t) = (from as usize, to as usize);
        if !f.is_multiple_of(ERASE) || !t.is_multiple_of(ERASE) || t > self.mem.len() {
            return Err(NorFlashErrorKind::NotAligned);
        }
        self.mem[f..t].fill(0xFF);
        self.erases += 1;
        Ok(())
    }
    fn write(&mut self, offset: u32, bytes: &[u8]) -> Result<(), Self::Error> {
        let o = offset as usize;
        if !o.is_multiple_of(WRITE) || !bytes.len().is_multiple_of(WRITE) {
            return Err(NorFlashErrorKind::NotAligned);
        }
        for (i, b) in bytes.iter().enumerate() {
            if let Some(left) = self.cut_after.as_mut() {
                if *left == 0 {
                    return Err(NorFlashErrorKind::Other);
                }
                *left -= 1;
            }
            // NOR programming only clears bits.
            self.mem[o + i] &= b;
        }
        Ok(())
    }
}

/// The page under test: the second one.
const BASE: u32 = ERASE as u32;

fn tripped() -> Rig {
    let mut r = Rig::regulating_acc(demo(), Fx::from_num(30));
    r.step_with(|s| s.interlock_closed = false);
    assert_eq!(r.ctl.state(), State::Latched);
    r
}

#[test]
fn a_reset_in_the_latched_state_comes_back_latched_through_the_flash() {
    let (mut store, bytes) = LatchStore::open(RamFlash::new(), BASE).unwrap();
    // 36-byte records in 40-byte slots (the write size is 8).
    assert_eq!(store.capacity(), (ERASE / 40) as u32);
    // A new board: nothing stored, refused, latched until a clear.
    let (mut ctl, r) = Controller::restored(demo(), &bytes);
    assert!(r.is_err());
    assert!(ctl.faults().contains(Fault::RecordCorrupt));
    ctl.request(Request::ClearFaults).unwrap();
    store.save(&ctl.latch_record()).unwrap();
    // Run, trip, store; the reset.
    let r = tripped();
    store.save(&r.ctl.latch_record()).unwrap();
    let flash = store.release();
    let (store, bytes) = LatchStore::open(flash, BASE).unwrap();
    assert_eq!(store.free(), store.capacity() - 2);
    let (ctl, restored) = Controller::restored(demo(), &bytes);
    assert_eq!(restored.unwrap().faults, r.ctl.faults());
    assert_eq!(ctl.state(), State::Latched);
    assert_eq!(ctl.fault_log().first(), r.ctl.fault_log().first());
}

#[test]
fn a_write_cut_short_by_a_reset_is_refused_into_a_latch() {
    let mut flash = RamFlash::new();
    {
        let (mut store, _) = LatchStore::open(flash.clone(), BASE).unwrap();
        store.save(&LatchRecord::default()).unwrap();
        flash = store.release();
    }
    // The latch save is cut after 12 of its 40 bytes.
    flash.cut_after = Some(12);
    let (mut store, _) = LatchStore::open(flash, BASE).unwrap();
    let rec = tripped().ctl.latch_record();
    assert_eq!(
        store.save(&rec),
        Err(StoreError::Flash(NorFlashErrorKind::Other))
    );
    let mut flash = store.release();
    flash.cut_after = None;
    let (_, bytes) = LatchStore::open(flash, BASE).unwrap();
    let (ctl, restored) = Controller::restored(demo(), &bytes);
    assert_eq!(restored.unwrap_err().code(), 2);
    assert_eq!(ctl.state(), State::Latched);
    assert_eq!(
        ctl.faults().iter().collect::<Vec<_>>(),
        [Fault::RecordCorrupt]
    );
}

#[test]
fn the_last_slot_is_kept_for_a_latch_and_compaction_frees_the_page() {
    let (mut store, _) = LatchStore::open(RamFlash::new(), BASE).unwrap();
    let clear = LatchRecord::default();
    let latched = tripped().ctl.latch_record();
    assert_ne!(latched.faults, FaultSet::EMPTY);
    while store.free() > 1 {
        store.save(&clear).unwrap();
    }
    assert_eq!(store.save(&clear), Err(StoreError::KeptForLatch));
    store.save(&latched).unwrap();
    assert_eq!(store.save(&latched), Err(StoreError::Full));
    // Boot: the newest is the latch; compaction keeps it alone.
    let (mut store, bytes) = LatchStore::open(store.release(), BASE).unwrap();
    assert_eq!(LatchRecord::from_bytes(&bytes), Ok(latched));
    assert_eq!(store.free(), 0);
    store.compact(&bytes).unwrap();
    assert_eq!(store.free(), store.capacity() - 1);
    let flash = store.release();
    assert_eq!(flash.erases, 1);
    // The other page is untouched.
    assert!(flash.mem[..ERASE].iter().all(|&b| b == 0xFF));
    let (_, again) = LatchStore::open(flash, BASE).unwrap();
    assert_eq!(again, bytes);
    // Compacting an empty page leaves it empty.
    let (mut store, none) = LatchStore::open(RamFlash::new(), BASE).unwrap();
    assert_eq!(none, [0xFF; LATCH_RECORD_LEN]);
    store.compact(&none).unwrap();
    assert_eq!(store.free(), store.capacity());
}

#[test]
fn a_page_that_does_not_fit_the_flash_is_refused() {
    for base in [100, 2 * ERASE as u32] {
        assert!(matches!(
            LatchStore::open(RamFlash::new(), base),
            Err(StoreError::Layout { .. })
        ));
    }
}
