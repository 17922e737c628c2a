//! The latch record in NOR flash, through the embedded-storage traits: the
//! board's side of [`crate::persist`].
//!
//! One erase page holds a run of slots, each a [`LATCH_RECORD_LEN`]-byte
//! record padded to the flash's write size. A save appends to the first
//! free (erased) slot; the newest record is the last slot that is not
//! erased. Appending needs no erase, so a save is a few word writes, not a
//! page erase; the page is erased only by [`LatchStore::compact`], which
//! the board calls at boot, before its watchdog starts (an erase takes
//! longer than a short watchdog window).
//!
//! Fail-safe: a write cut short by a reset leaves a slot that does not
//! check out, so the next boot starts latched ([`crate::Fault::RecordCorrupt`]).
//! The last free slot is kept for a latched record: a record that is not
//! latched (after a clear) is refused there ([`StoreError::KeptForLatch`]),
//! so a full page can always still store a latch, and a clear that could
//! not be stored comes back latched after a reset, never the reverse.

use embedded_storage::nor_flash::NorFlash;

use crate::persist::{LatchRecord, LATCH_RECORD_LEN};

/// Largest flash write size supported (bytes per slot at most).
pub const MAX_SLOT_LEN: usize = 256;

/// Why the store cannot open or save.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum StoreError<E> {
    /// The flash reported an error.
    Flash(E),
    /// The page does not fit the flash, is not aligned to the erase size,
    /// or the write size is above [`MAX_SLOT_LEN`].
    Layout {
        /// Start of the page, bytes from the start of the flash.
        base: u32,
        /// Erase size of the flash, bytes.
        erase_size: u32,
        /// Write size of the flash, bytes.
        write_size: u32,
    },
    /// Every slot is used: [`LatchStore::compact`] at the next boot.
    Full,
    /// Only the last slot is free, and it is kept for a latched record.
    KeptForLatch,
}

impl<E: core::fmt::Debug> core::fmt::Display for StoreError<E> {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match self {
            StoreError::Flash(e) => write!(f, "flash error: {e:?}"),
            StoreError::Layout {
                base,
                erase_size,
                write_size,
            } => write!(
                f,
                "latch page at {base:#x} does not fit a flash of erase size {erase_size} and write size {write_size}"
            ),
            StoreError::Full => f.write_str("latch page full: compact it at boot"),
            StoreError::KeptForLatch => {
                f.write_str("last latch slot kept for a latched record")
            }
        }
    }
}

/// The latch record's page in a NOR flash.
#[derive(Debug)]
pub struct LatchStore<F> {
    flash: F,
    base: u32,
    slot_len: u32,
    slots: u32,
    /// Index of the first free slot (`slots` when full).
    next: u32,
}

impl<F: NorFlash> LatchStore<F> {
    /// Open the page at `base` (aligned to the erase size): find the newest
    /// record. Returns the store and that record's bytes, all 0xFF when the
    /// page holds none (which [`crate::Controller::restored`] refuses).
    #[allow(clippy::type_complexity)]
    pub fn open(
        mut flash: F,
        base: u32,
    ) -> Result<(Self, [u8; LATCH_RECORD_LEN]), StoreError<F::Error>> {
        let (erase, write) = (F::ERASE_SIZE as u32, F::WRITE_SIZE.max(1) as u32);
        let slot_len = (LATCH_RECORD_LEN as u32).div_ceil(write) * write;
        let fits = erase > 0
            && base.is_multiple_of(erase)
            && (base as u64 + erase as u64) <= flash.capacity() as u64
            && slot_len as usize <= MAX_SLOT_LEN
            && slot_len <= erase;
        if !fits {
            return Err(StoreError::Layout {
                base,
                erase_size: erase,
                write_size: write,
            });
        }
        let slots = erase / slot_len;
        let mut newest = [0xFF; LATCH_RECORD_LEN];
        let mut next = slots;
        for i in 0..slots {
            let mut b = [0u8; LATCH_RECORD_LEN];
            flash
                .read(base + i * slot_len, &mut b)
                .map_err(StoreError::Flash)?;
            if b.iter().all(|&x| x == 0xFF) {
                next = i;
                break;
            }
            newest = b;
        }
        Ok((
            LatchStore {
                flash,
                base,
                slot_len,
                slots,
                next,
            },
            newest,
        ))
    }

    /// Slots in the page.
    pub fn capacity(&self) -> u32 {
        self.slots
    }

    /// Free slots left.
    pub fn free(&self) -> u32 {
        self.slots - self.next
    }

    /// Append `rec`.
    pub fn save(&mut self, rec: &LatchRecord) -> Result<(), StoreError<F::Error>> {
        match self.free() {
            0 => Err(StoreError::Full),
            1 if rec.faults.is_empty() => Err(StoreError::KeptForLatch),
            _ => {
                self.write_slot(self.next, &rec.to_bytes())?;
                self.next += 1;
                Ok(())
            }
        }
    }

    /// Erase the page and write `bytes` (the newest record, as
    /// [`LatchStore::open`] returned it) back as its first slot; erased
    /// bytes stay erased. Slow (a page erase): call it at boot, before the
    /// watchdog starts. A reset during it leaves an erased or torn page,
    /// which the next boot refuses into a latch.
    pub fn compact(&mut self, bytes: &[u8; LATCH_RECORD_LEN]) -> Result<(), StoreError<F::Error>> {
        self.flash
            .erase(self.base, self.base + F::ERASE_SIZE as u32)
            .map_err(StoreError::Flash)?;
        self.next = 0;
        if bytes.iter().all(|&x| x == 0xFF) {
            return Ok(());
        }
        self.write_slot(0, bytes)?;
        self.next = 1;
        Ok(())
    }

    fn write_slot(
        &mut self,
        i: u32,
        bytes: &[u8; LATCH_RECORD_LEN],
    ) -> Result<(), StoreError<F::Error>> {
        let mut buf = [0xFFu8; MAX_SLOT_LEN];
        let len = self.slot_len as usize;
        if let Some(head) = buf.get_mut(..LATCH_RECORD_LEN) {
            head.copy_from_slice(bytes);
        }
        self.flash
            .write(self.base + i * self.slot_len, buf.get(..len).unwrap_or(&[]))
            .map_err(StoreError::Flash)
    }

    /// Give the flash back.
    pub fn release(self) -> F {
        self.flash
    }
}
