//! The one reference unit a slotted station shares: it takes part in one frame exchange at a
//! time, so exchanges of different slots contend for it.
//!
//! Each slot runs on a bench clock of its own, all started together, so their times compare.
//! An exchange holds the reference only for its air time (measurement frame, SIFS, the
//! acknowledgement: tens of µs), not for the frame spacing of its burst, so the exchanges of
//! several slots interleave within each other's spacing; settling, attenuator switching and
//! instrument latency take no air time and overlap freely. An exchange that finds the reference
//! busy departs when it is free, and the rest of its burst keeps its spacing from there.
//!
//! Slots run on threads of their own, so the order in which their requests arrive is the
//! scheduler's. To keep a run the same for a seed, a slot's burst is booked only once every
//! other slot's clock has passed the burst's start (ties go to the lower slot): bookings happen
//! in bench-time order whatever the threads do. A slot that has not connected yet counts as at
//! time zero; one that has finished (its instruments dropped) no longer counts.
//!
//! Served (`taucal sim serve` on a slotted bench) there is no such order to keep: each slot's
//! clock moves only with its own instruments' time, and a slot's client may stop, or never
//! connect, while the server goes on, so waiting for it could wait for ever. A served
//! reference ([`SharedReference::in_arrival_order`]) books bursts as they arrive, as a real
//! reference takes exchanges as they come; contention is modelled all the same.

use crate::clock::BenchClock;
use std::collections::BTreeMap;
use std::sync::{Arc, Condvar, Mutex, MutexGuard};
use std::time::Duration;

/// Where a slot stands, as the reference sees it.
#[derive(Debug, Clone)]
enum Presence {
    /// Not connected yet: may still book from time zero.
    Pending,
    /// Connected, on this clock.
    Present(Arc<BenchClock>),
    /// Finished: books nothing more.
    Gone,
}

#[derive(Debug)]
struct State {
    slots: Vec<Presence>,
    /// Booked air time: start → end, bench picoseconds.
    busy: BTreeMap<u64, u64>,
    /// Book as requests arrive, without waiting for the other slots' clocks (served).
    arrival_order: bool,
}

/// The shared reference unit's air time.
#[derive(Debug)]
pub struct SharedReference {
    state: Mutex<State>,
    moved: Condvar,
}

/// How long a waiting slot sleeps before looking at the other slots' clocks again when no
/// booking wakes it (their clocks also move by waits the reference does not see).
const LOOK_AGAIN: Duration = Duration::from_millis(1);

impl SharedReference {
    /// A reference shared by `slots` slots, none connected yet; returns it and one seat per
    /// slot.
    pub fn new(slots: usize) -> (Arc<SharedReference>, Vec<Seat>) {
        SharedReference::with_order(slots, false)
    }

    /// A reference shared by `slots` served slots: bursts are booked in the order they arrive.
    pub fn in_arrival_order(slots: usize) -> (Arc<SharedReference>, Vec<Seat>) {
        SharedReference::with_order(slots, true)
    }

    fn with_order(slots: usize, arrival_order: bool) -> (Arc<SharedReference>, Vec<Seat>) {
        let reference = Arc::new(SharedReference {
            state: Mutex::new(State {
                slots: vec![Presence::Pending; slots],
                busy: BTreeMap::new(),
                arrival_order,
            }),
            moved: Condvar::new(),
        });
        let seats = (0..slots)
            .map(|index| Seat {
                reference: reference.clone(),
                index,
            })
            .collect();
        (reference, seats)
    }

    fn lock(&self) -> MutexGuard<'_, State> {
        // A thread that panicked while booking leaves the bookings whole (each is one insert).
        self.state.lock().unwrap_or_else(|p| p.into_inner())
    }
}

/// One slot's place at the shared reference. Dropping it takes the slot out of the booking
/// order, so the others stop waiting for it.
#[derive(Debug)]
pub struct Seat {
    reference: Arc<SharedReference>,
    index: usize,
}

impl Seat {
    /// The slot's index.
    pub fn index(&self) -> usize {
        self.index
    }

    /// The slot connects: from now on its bench time is `clock`.
    pub fn attach(&self, clock: Arc<BenchClock>) {
        let mut s = self.reference.lock();
        s.slots[self.index] = Presence::Present(clock);
        self.reference.moved.notify_all();
    }

    /// Books a burst that this slot begins at `now_ps` (its bench time) and whose exchanges
    /// would depart at `nominal_ps` (ascending), each holding the reference for `air_ps`,
    /// successive ones at least `spacing_ps` apart. Returns each exchange's delay past its
    /// nominal departure. Waits (in wall time) until every other slot has passed `now_ps`: the
    /// reference takes bursts in the order they begin.
    pub fn book(&self, now_ps: u64, nominal_ps: &[u64], air_ps: u64, spacing_ps: u64) -> Vec<u64> {
        if nominal_ps.is_empty() {
            return Vec::new();
        }
        let r = &self.reference;
        let mut s = r.lock();
        while !self.my_turn(&s, now_ps) {
            s = match r.moved.wait_timeout(s, LOOK_AGAIN) {
                Ok((guard, _)) => guard,
                Err(p) => p.into_inner().0,
            };
        }
        let mut delays = Vec::with_capacity(nominal_ps.len());
        let mut earliest = 0u64;
        for &nominal in nominal_ps {
            let start = free_from(&s.busy, nominal.max(earliest), air_ps);
            s.busy.insert(start, start.saturating_add(air_ps));
            delays.push(start - nominal);
            earliest = start.saturating_add(spacing_ps);
        }
        // Bookings that end before every slot's clock can no longer matter.
        let horizon = s
            .slots
            .iter()
            .filter_map(|p| match p {
                Presence::Pending => Some(0),
                Presence::Present(c) => Some(c.now_ps()),
                Presence::Gone => None,
            })
            .min()
            .unwrap_or(0);
        s.busy.retain(|_, end| *end > horizon);
        r.moved.notify_all();
        delays
    }

    /// True when every other slot is past `start_ps`, or at it with a higher index.
    fn my_turn(&self, s: &State, start_ps: u64) -> bool {
        s.arrival_order
            || s.slots.iter().enumerate().all(|(j, p)| {
                j == self.index
                    || match p {
                        Presence::Gone => true,
                        Presence::Pending => (0, j) > (start_ps, self.index),
                        Presence::Present(c) => (c.now_ps(), j) > (start_ps, self.index),
                    }
            })
    }
}

impl Drop for Seat {
    fn drop(&mut self) {
        let mut s = self.reference.lock();
        s.slots[self.index] = Presence::Gone;
        self.reference.moved.notify_all();
    }
}

/// The first start at or after `from_ps` where `air_ps` fits between the bookings in `busy`.
fn free_from(busy: &BTreeMap<u64, u64>, from_ps: u64, air_ps: u64) -> u64 {
    let mut start = from_ps;
    // A booking that began earlier may still be on the air at `start`.
    if let Some((_, &end)) = busy.range(..=start).next_back() {
        start = start.max(end);
    }
    for (&b_start, &b_end) in busy.range(start..) {
        if start.saturating_add(air_ps) <= b_start {
            break;
        }
        start = start.max(b_end);
    }
    start
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::clock::ClockMode;

    fn present(seat: &Seat, at_ps: u64) -> Arc<BenchClock> {
        let clock = Arc::new(BenchClock::new(ClockMode::Virtual));
        clock.spend(at_ps);
        seat.attach(clock.clone());
        clock
    }

    #[test]
    fn a_free_reference_delays_nothing() {
        let (_r, mut seats) = SharedReference::new(1);
        let seat = seats.remove(0);
        present(&seat, 0);
        assert_eq!(seat.book(0, &[100, 1100, 2100], 60, 1000), vec![0, 0, 0]);
    }

    #[test]
    fn exchanges_interleave_within_the_spacing() {
        // Two slots whose bursts start together: the second slot's exchanges go on the air
        // right after the first's (one air time later), not a whole burst later.
        let (_r, seats) = SharedReference::new(2);
        let (a, b) = (&seats[0], &seats[1]);
        let ca = present(a, 0);
        let cb = present(b, 0);
        let nominal = [1_000, 2_000, 3_000];
        assert_eq!(a.book(0, &nominal, 100, 1_000), vec![0, 0, 0]);
        ca.spend(10_000);
        assert_eq!(b.book(0, &nominal, 100, 1_000), vec![100, 100, 100]);
        cb.spend(10_000);
    }

    #[test]
    fn a_gap_too_short_for_an_exchange_is_skipped() {
        let mut busy = BTreeMap::new();
        busy.insert(100, 200);
        busy.insert(250, 350);
        assert_eq!(free_from(&busy, 0, 100), 0);
        assert_eq!(free_from(&busy, 50, 100), 350);
        assert_eq!(free_from(&busy, 150, 40), 200);
        assert_eq!(free_from(&busy, 400, 100), 400);
    }

    #[test]
    fn bookings_follow_bench_time_not_thread_order() {
        // The later slot (clock ahead) asks first from another thread; it must wait until the
        // earlier one has booked, whose exchange then comes first.
        let (_r, mut seats) = SharedReference::new(2);
        let late = seats.pop().expect("seat");
        let early = seats.pop().expect("seat");
        let c_early = present(&early, 0);
        present(&late, 500);
        let waiting = std::thread::spawn(move || late.book(500, &[500], 100, 1_000));
        std::thread::sleep(Duration::from_millis(20));
        assert_eq!(early.book(0, &[450], 100, 1_000), vec![0]);
        c_early.spend(1_000);
        assert_eq!(waiting.join().expect("thread"), vec![50]);
    }

    #[test]
    fn served_bursts_are_booked_as_they_arrive_and_still_contend() {
        // The other slot's clock stays behind (its client idle): a served reference does not
        // wait for it, and the air time it booked still delays a later exchange.
        let (_r, mut seats) = SharedReference::in_arrival_order(2);
        let b = seats.pop().expect("seat");
        let a = seats.pop().expect("seat");
        present(&a, 5_000);
        present(&b, 0);
        assert_eq!(b.book(0, &[1_000, 2_000], 100, 1_000), vec![0, 0]);
        let (done, waited) = std::sync::mpsc::channel();
        // On a thread of its own, so that a booking that waited for ever fails the test
        // instead of hanging it.
        std::thread::spawn(move || {
            let _ = done.send(a.book(5_000, &[1_050], 100, 1_000));
        });
        assert_eq!(
            waited.recv_timeout(Duration::from_secs(5)).ok(),
            Some(vec![50]),
            "booked at once, after b's exchange ends"
        );
    }

    #[test]
    fn a_finished_slot_holds_nobody_up() {
        let (_r, mut seats) = SharedReference::new(2);
        let other = seats.pop().expect("seat");
        let me = seats.pop().expect("seat");
        present(&me, 5_000);
        drop(other);
        assert_eq!(me.book(5_000, &[5_000], 100, 1_000), vec![0]);
    }
}
