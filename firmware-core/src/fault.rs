//! Faults, the set of active faults, and the fault log.
//!
//! Every protection is one variant of [`Fault`] (defined by the protection
//! table in [`crate::protect`]). A tripped fault latches the
//! controller; the first one is kept apart in the [`FaultLog`] and later ones
//! go into a fixed-size ring that drops the oldest entry when full.

use crate::units::Fx;

pub use crate::protect::Fault;

impl Fault {
    /// Number of distinct faults.
    pub const COUNT: usize = Self::ALL.len();

    /// The mask of every fault (widen [`FaultSet`] before a 33rd).
    pub(crate) const ALL_BITS: u32 = {
        assert!(Self::COUNT <= 32, "widen FaultSet beyond 32 faults");
        u32::MAX >> (32 - Self::COUNT)
    };

    /// The fault with discriminant `n`, if any.
    pub fn from_index(n: u8) -> Option<Fault> {
        Fault::ALL.get(usize::from(n)).copied()
    }

    /// Bit of this fault in a [`FaultSet`] mask.
    pub(crate) const fn bit(self) -> u32 {
        1 << (self as u8)
    }
}

impl core::fmt::Display for Fault {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        f.write_str(self.name())
    }
}

/// Slots of a per-fault array indexed by a fault's bit: one per bit of a
/// [`FaultSet`] (an index below 32 needs no bounds check).
pub(crate) const SLOTS: usize = 32;

/// A set of faults as a bit mask (bit `n` is the fault with discriminant `n`).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct FaultSet(u32);

impl FaultSet {
    /// The empty set.
    pub const EMPTY: FaultSet = FaultSet(0);

    /// Whether `fault` is in the set.
    pub const fn contains(self, fault: Fault) -> bool {
        self.0 & fault.bit() != 0
    }

    /// Add `fault`.
    pub fn insert(&mut self, fault: Fault) {
        self.0 |= fault.bit();
    }

    /// Whether the set is empty.
    pub const fn is_empty(self) -> bool {
        self.0 == 0
    }

    /// The set of a raw bit mask (bits of no fault are dropped).
    pub(crate) const fn from_bits(bits: u32) -> FaultSet {
        FaultSet(bits & Fault::ALL_BITS)
    }

    /// The set of a mask of faults' bits, taken as it is: for masks built
    /// from [`Fault::bit`] only (the protections' masks), which
    /// [`FaultSet::from_bits`] would leave unchanged.
    pub(crate) const fn of_faults(bits: u32) -> FaultSet {
        FaultSet(bits)
    }

    /// The raw bit mask.
    pub const fn bits(self) -> u32 {
        self.0
    }

    /// The faults in the set, in bit order.
    pub fn iter(self) -> impl Iterator<Item = Fault> {
        Fault::ALL.into_iter().filter(move |f| self.contains(*f))
    }

    /// The first fault in bit order, if any.
    pub fn first(self) -> Option<Fault> {
        self.iter().next()
    }
}

/// One tripped fault: what, when, what was measured and which limit it crossed.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct FaultRecord {
    /// The fault.
    pub fault: Fault,
    /// Tick index of the sample that tripped it.
    pub tick: u32,
    /// The measured value, in [`Fault::unit`].
    pub measured: Fx,
    /// The configured limit it reached, in [`Fault::unit`].
    pub limit: Fx,
}

/// Capacity of the fault ring (later faults after the first one).
pub const FAULT_RING_LEN: usize = 16;

/// A record with its sequence number: the number of records logged before
/// it since power-up (or since a restore, which continues the count), so
/// the first record ever is 0. [`FaultLog::forget`] does not restart the
/// count: a reader's [`Cursor`] stays meaningful.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Entry {
    /// Sequence number.
    pub seq: u32,
    /// The record.
    pub record: FaultRecord,
}

/// Where a reader of the log stands: the sequence number of the next record
/// it has not seen. [`Cursor::default`] is the start of the log.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, PartialOrd, Ord)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Cursor(pub u32);

/// The fault log: the first fault since power-up (or since [`FaultLog::forget`])
/// kept apart, later ones in a bounded ring. Every record has a sequence
/// number ([`Entry`]); read new records with [`FaultLog::since`], which
/// never repeats a record and counts the ones the ring overwrote before
/// they were read.
#[derive(Clone, Debug)]
pub struct FaultLog {
    first: Option<FaultRecord>,
    first_seq: u32,
    /// The later records: the one with sequence number `s` in slot
    /// `s % FAULT_RING_LEN`; those from `later_from` on, the newest
    /// [`FAULT_RING_LEN`] of them, are held.
    ring: [FaultRecord; FAULT_RING_LEN],
    /// Sequence number of the first later record (the one after the
    /// first; after a restore or [`FaultLog::forget`], the next one).
    later_from: u32,
    /// Sequence number of the next record.
    next_seq: u32,
}

/// What an unused slot of the ring holds (never read).
const BLANK: FaultRecord = FaultRecord {
    fault: Fault::Overcurrent,
    tick: 0,
    measured: Fx::ZERO,
    limit: Fx::ZERO,
};

impl Default for FaultLog {
    fn default() -> Self {
        FaultLog::new()
    }
}

impl FaultLog {
    /// An empty log.
    pub const fn new() -> Self {
        FaultLog::continuing_at(0)
    }

    /// An empty log whose next record gets sequence number `next_seq` (a
    /// log continued after a restore).
    pub(crate) const fn continuing_at(next_seq: u32) -> Self {
        FaultLog {
            first: None,
            first_seq: next_seq,
            ring: [BLANK; FAULT_RING_LEN],
            later_from: next_seq,
            next_seq,
        }
    }

    /// A log restored after a reset: the first record at its sequence
    /// number, the ones after it gone, the count going on at `next_seq`.
    pub(crate) fn restored(first: Option<Entry>, next_seq: u32) -> Self {
        let mut log = FaultLog::continuing_at(next_seq);
        if let Some(e) = first {
            log.first = Some(e.record);
            log.first_seq = e.seq;
        }
        log
    }

    /// Record a fault. Never fails: when the ring is full the oldest later
    /// record is overwritten (readers learn it through [`Unread::lost`]).
    #[inline]
    pub fn record(&mut self, rec: FaultRecord) {
        let seq = self.next_seq;
        // Saturates after 4 294 967 295 records, each of which needs a
        // latch: unreachable in service (from there on, each record
        // replaces the newest).
        self.next_seq = seq.saturating_add(1);
        if self.first.is_none() {
            self.first = Some(rec);
            self.first_seq = seq;
            self.later_from = self.next_seq;
            return;
        }
        if let Some(slot) = self.ring.get_mut(seq as usize % FAULT_RING_LEN) {
            *slot = rec;
        }
    }

    /// Later records held (at most [`FAULT_RING_LEN`]).
    fn held(&self) -> u32 {
        // (`later_from` is never past `next_seq`.)
        self.next_seq
            .saturating_sub(self.later_from)
            .min(FAULT_RING_LEN as u32)
    }

    /// The later records held, oldest first, as the ring's two runs.
    fn runs(&self) -> (&[FaultRecord], &[FaultRecord]) {
        let held = self.held() as usize;
        let oldest = self.next_seq.wrapping_sub(held as u32) as usize % FAULT_RING_LEN;
        let (before, from_oldest) = self.ring.split_at(oldest);
        match from_oldest.get(..held) {
            Some(run) => (run, &[]),
            None => (
                from_oldest,
                before
                    .get(..held.saturating_sub(from_oldest.len()))
                    .unwrap_or(&[]),
            ),
        }
    }

    /// The first fault recorded.
    pub fn first(&self) -> Option<&FaultRecord> {
        self.first.as_ref()
    }

    /// The first fault recorded, with its sequence number.
    pub fn first_entry(&self) -> Option<Entry> {
        self.first.map(|record| Entry {
            seq: self.first_seq,
            record,
        })
    }

    /// Later faults held, oldest first.
    pub fn later(&self) -> impl Iterator<Item = &FaultRecord> {
        let (a, b) = self.runs();
        a.iter().chain(b.iter())
    }

    /// How many later records the ring overwrote since the first one.
    pub fn dropped(&self) -> u32 {
        let held = self.len() as u32;
        self.next_seq
            .saturating_sub(self.first_seq)
            .saturating_sub(held)
    }

    /// Records held now (first plus later). Not a reading position: the
    /// ring stops growing at its capacity; read with [`FaultLog::since`].
    pub fn len(&self) -> usize {
        usize::from(self.first.is_some()) + self.held() as usize
    }

    /// Whether the log holds nothing.
    pub fn is_empty(&self) -> bool {
        self.first.is_none()
    }

    /// The cursor just past the newest record: reading from it yields
    /// nothing until the next record.
    pub fn end(&self) -> Cursor {
        Cursor(self.next_seq)
    }

    /// The records from `from` on, oldest first, each once; records in that
    /// range that are no longer held are counted in [`Unread::lost`].
    /// Continue with [`Unread::resume`].
    ///
    /// ```
    /// use diodestat_core::{Cursor, FaultLog};
    /// let log = FaultLog::new();
    /// let mut cursor = Cursor::default();
    /// // each time the reader looks:
    /// let unread = log.since(cursor);
    /// let (lost, next) = (unread.lost(), unread.resume());
    /// for entry in unread {
    ///     // report entry.seq, entry.record
    /// #   let _ = entry;
    /// }
    /// cursor = next;
    /// # assert_eq!((lost, cursor), (0, log.end()));
    /// ```
    pub fn since(&self, from: Cursor) -> Unread<'_> {
        let from = from.0.min(self.next_seq);
        let first = self.first_entry().filter(|e| e.seq >= from);
        // Sequence number of the oldest later record held.
        let held = self.held();
        let oldest = self.next_seq - held;
        let skip = from.saturating_sub(oldest) as usize;
        let later_count = (held as usize).saturating_sub(skip) as u32;
        let delivered = u32::from(first.is_some()) + later_count;
        Unread {
            first,
            later: {
                let (a, b) = self.runs();
                a.iter().chain(b.iter()).skip(skip)
            },
            seq: oldest.max(from),
            lost: (self.next_seq - from).saturating_sub(delivered),
            end: self.end(),
        }
    }

    /// Forget every record (a service action; the controller never calls
    /// it). The sequence numbers go on, so readers lose nothing silently.
    pub fn forget(&mut self) {
        *self = FaultLog::continuing_at(self.next_seq);
    }
}

/// The records a reader has not seen yet, from [`FaultLog::since`].
#[derive(Debug)]
pub struct Unread<'a> {
    first: Option<Entry>,
    later: core::iter::Skip<
        core::iter::Chain<core::slice::Iter<'a, FaultRecord>, core::slice::Iter<'a, FaultRecord>>,
    >,
    /// Sequence number of the next later record.
    seq: u32,
    lost: u32,
    end: Cursor,
}

impl Unread<'_> {
    /// Records after the cursor that were overwritten before this read.
    pub fn lost(&self) -> u32 {
        self.lost
    }

    /// Where the next read starts: past every record logged so far.
    pub fn resume(&self) -> Cursor {
        self.end
    }
}

impl Iterator for Unread<'_> {
    type Item = Entry;
    fn next(&mut self) -> Option<Entry> {
        if let Some(e) = self.first.take() {
            return Some(e);
        }
        let record = *self.later.next()?;
        let seq = self.seq;
        self.seq = seq.saturating_add(1);
        Some(Entry { seq, record })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rec(tick: u32) -> FaultRecord {
        FaultRecord {
            fault: Fault::Overcurrent,
            tick,
            measured: Fx::from_num(tick),
            limit: Fx::ZERO,
        }
    }

    #[test]
    fn first_is_kept_apart_and_ring_drops_oldest() {
        let mut log = FaultLog::new();
        assert!(log.is_empty());
        for t in 0..(FAULT_RING_LEN as u32 + 5) {
            log.record(rec(t));
        }
        assert_eq!(log.first().unwrap().tick, 0);
        assert_eq!(log.later().count(), FAULT_RING_LEN);
        assert_eq!(log.later().next().unwrap().tick, 5);
        assert_eq!(log.dropped(), 4);
        assert_eq!(log.len(), FAULT_RING_LEN + 1);
        log.forget();
        assert!(log.is_empty());
    }

    #[test]
    fn fault_set_bits() {
        let mut s = FaultSet::EMPTY;
        assert!(s.is_empty());
        s.insert(Fault::MissedTicks);
        s.insert(Fault::Overcurrent);
        assert!(s.contains(Fault::MissedTicks));
        assert!(!s.contains(Fault::SupplyOver));
        assert_eq!(s.first(), Some(Fault::Overcurrent));
        assert_eq!(s.iter().count(), 2);
        assert_eq!(s.bits(), 1 | (1 << 10));
    }

    #[test]
    fn fast_faults_are_the_four_named() {
        let fast: heapless::Vec<Fault, 16> =
            Fault::ALL.into_iter().filter(|f| f.is_fast()).collect();
        assert_eq!(
            fast.as_slice(),
            &[
                Fault::Overcurrent,
                Fault::MonitorRunaway,
                Fault::InterlockOpen,
                Fault::DriveMismatch,
                Fault::ExternalFault
            ]
        );
    }
}

#[cfg(test)]
mod reader_tests {
    extern crate std;
    use super::*;
    use std::{vec, vec::Vec};

    fn rec(tick: u32) -> FaultRecord {
        FaultRecord {
            fault: Fault::SupplyUnder,
            tick,
            measured: Fx::ZERO,
            limit: Fx::ZERO,
        }
    }

    /// Reads `log` from `cursor`: the ticks delivered, the number lost.
    fn read(log: &FaultLog, cursor: &mut Cursor, seen: &mut Vec<u32>) -> u32 {
        let unread = log.since(*cursor);
        let lost = unread.lost();
        *cursor = unread.resume();
        for e in unread {
            // Sequence numbers follow the ticks of this test one to one.
            assert_eq!(e.seq, e.record.tick);
            seen.push(e.record.tick);
        }
        lost
    }

    #[test]
    fn thirty_trips_read_as_they_come_are_all_reported_once() {
        let mut log = FaultLog::new();
        let (mut cursor, mut seen) = (Cursor::default(), Vec::new());
        let mut lost = 0;
        for t in 0..30 {
            log.record(rec(t));
            lost += read(&log, &mut cursor, &mut seen);
            // A read with nothing new repeats nothing.
            lost += read(&log, &mut cursor, &mut seen);
        }
        assert_eq!(seen, (0..30).collect::<Vec<_>>());
        assert_eq!(lost, 0);
        // Counting held records (the old way) saw 17 of them.
        assert_eq!(log.len(), FAULT_RING_LEN + 1);
    }

    #[test]
    fn thirty_trips_read_once_at_the_end_are_reported_or_counted_lost() {
        let mut log = FaultLog::new();
        for t in 0..30 {
            log.record(rec(t));
        }
        let (mut cursor, mut seen) = (Cursor::default(), Vec::new());
        let lost = read(&log, &mut cursor, &mut seen);
        let mut expected = vec![0];
        expected.extend(30 - FAULT_RING_LEN as u32..30);
        assert_eq!(seen, expected);
        assert_eq!(lost, 30 - 1 - FAULT_RING_LEN as u32);
        assert_eq!(seen.len() as u32 + lost, 30);
        assert_eq!(log.dropped(), lost);
        assert_eq!(cursor, log.end());
    }

    #[test]
    fn a_reader_part_way_counts_only_what_it_missed() {
        let mut log = FaultLog::new();
        let (mut cursor, mut seen) = (Cursor::default(), Vec::new());
        for t in 0..5 {
            log.record(rec(t));
        }
        assert_eq!(read(&log, &mut cursor, &mut seen), 0);
        for t in 5..30 {
            log.record(rec(t));
        }
        // Held now: 0, then 14..=29; the reader stood at 5.
        let lost = read(&log, &mut cursor, &mut seen);
        assert_eq!(lost, 14 - 5);
        assert_eq!(seen.len() as u32 + lost, 30);
        assert_eq!(seen[5..], (14..30).collect::<Vec<_>>()[..]);
    }

    #[test]
    fn forget_keeps_the_count_so_a_reader_loses_nothing_silently() {
        let mut log = FaultLog::new();
        let (mut cursor, mut seen) = (Cursor::default(), Vec::new());
        log.record(rec(0));
        log.record(rec(1));
        assert_eq!(read(&log, &mut cursor, &mut seen), 0);
        log.record(rec(2));
        log.forget();
        assert!(log.is_empty());
        log.record(rec(3));
        assert_eq!(log.first_entry().map(|e| e.seq), Some(3));
        // Record 2 was forgotten unread: counted, not hidden.
        assert_eq!(read(&log, &mut cursor, &mut seen), 1);
        assert_eq!(seen, [0, 1, 3]);
        // A cursor past the end (from another log) reads nothing.
        assert_eq!(log.since(Cursor(99)).count(), 0);
        assert_eq!(log.since(Cursor(99)).lost(), 0);
    }

    /// The log as it was before its ring was indexed by sequence number
    /// (a `heapless::Deque`), kept for the comparison below.
    struct DequeLog {
        first: Option<FaultRecord>,
        first_seq: u32,
        later: heapless::Deque<FaultRecord, FAULT_RING_LEN>,
        next_seq: u32,
    }

    impl DequeLog {
        fn continuing_at(next_seq: u32) -> Self {
            DequeLog {
                first: None,
                first_seq: next_seq,
                later: heapless::Deque::new(),
                next_seq,
            }
        }

        fn record(&mut self, rec: FaultRecord) {
            let seq = self.next_seq;
            self.next_seq = seq.saturating_add(1);
            if self.first.is_none() {
                self.first = Some(rec);
                self.first_seq = seq;
                return;
            }
            if self.later.is_full() {
                let _ = self.later.pop_front();
            }
            let _ = self.later.push_back(rec);
        }

        fn first_entry(&self) -> Option<Entry> {
            self.first.map(|record| Entry {
                seq: self.first_seq,
                record,
            })
        }

        fn len(&self) -> usize {
            usize::from(self.first.is_some()) + self.later.len()
        }

        fn dropped(&self) -> u32 {
            self.next_seq
                .saturating_sub(self.first_seq)
                .saturating_sub(self.len() as u32)
        }

        /// `since(from)`: the entries, the lost count and the resume cursor.
        fn since(&self, from: Cursor) -> (Vec<Entry>, u32, Cursor) {
            let from = from.0.min(self.next_seq);
            let first = self.first_entry().filter(|e| e.seq >= from);
            let oldest = self.next_seq - self.later.len() as u32;
            let skip = from.saturating_sub(oldest) as usize;
            let later_count = self.later.len().saturating_sub(skip) as u32;
            let delivered = u32::from(first.is_some()) + later_count;
            let mut out: Vec<Entry> = first.into_iter().collect();
            let mut seq = oldest.max(from);
            for record in self.later.iter().skip(skip) {
                out.push(Entry {
                    seq,
                    record: *record,
                });
                seq = seq.saturating_add(1);
            }
            let lost = (self.next_seq - from).saturating_sub(delivered);
            (out, lost, Cursor(self.next_seq))
        }
    }

    proptest::proptest! {
        /// The log answers every question as the Deque log it replaced,
        /// after any sequence of records and forgets, from any start
        /// (a new log, or one restored at any sequence number with or
        /// without its first record), read from any cursor.
        #[test]
        fn the_log_reads_as_the_deque_log_it_replaced(
            start in proptest::prop_oneof![
                proptest::strategy::Just(0u32),
                0u32..100,
                proptest::num::u32::ANY,
            ],
            restored_first in proptest::option::of(0u32..=100),
            ops in proptest::collection::vec(0u32..40, 0..80),
            cursors in proptest::collection::vec(0u32..200, 1..8),
        ) {
            let mut log = FaultLog::continuing_at(start);
            let mut old = DequeLog::continuing_at(start);
            if let Some(back) = restored_first {
                let e = Entry { seq: start.saturating_sub(back), record: rec(7) };
                log = FaultLog::restored(Some(e), start);
                old.first = Some(e.record);
                old.first_seq = e.seq;
            }
            for (n, op) in ops.into_iter().enumerate() {
                if op == 0 {
                    log.forget();
                    old = DequeLog::continuing_at(old.next_seq);
                } else {
                    log.record(rec(n as u32));
                    old.record(rec(n as u32));
                }
                proptest::prop_assert_eq!(log.first_entry(), old.first_entry());
                let later: Vec<FaultRecord> = log.later().copied().collect();
                let want: Vec<FaultRecord> = old.later.iter().copied().collect();
                proptest::prop_assert_eq!(later, want);
                proptest::prop_assert_eq!(log.len(), old.len());
                proptest::prop_assert_eq!(log.is_empty(), old.first.is_none());
                proptest::prop_assert_eq!(log.dropped(), old.dropped());
                proptest::prop_assert_eq!(log.end(), Cursor(old.next_seq));
                for &c in &cursors {
                    let c = Cursor(old.next_seq.saturating_sub(c));
                    let unread = log.since(c);
                    let (lost, resume) = (unread.lost(), unread.resume());
                    let got: Vec<Entry> = unread.collect();
                    proptest::prop_assert_eq!((got, lost, resume), old.since(c));
                }
            }
        }
    }
}
