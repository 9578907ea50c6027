//! A slotted run's bench time, estimated: the slots run side by side, so the station takes as
//! long as one slot, unless the shared reference cannot serve every slot's exchanges in that
//! time — it serves one exchange at a time, each for its air time. Pure, like `estimate`.

use super::estimate::Estimate;
use crate::bench::Bench;
use crate::data::station_manifest::units_per_hour;

/// Air time of one exchange on a bench that does not simulate its frames: a measurement frame
/// of about 44 µs, SIFS (16 µs, IEEE 802.11 OFDM) and an acknowledgement taken as long as the
/// frame (common practice for a VHT/HE fine timing measurement frame; from memory).
pub const DEFAULT_EXCHANGE_AIR_US: f64 = 104.0;

/// A station's estimate.
#[derive(Debug, Clone, PartialEq)]
pub struct StationEstimate {
    /// Slots running side by side.
    pub slots: usize,
    /// One slot's bench time, s.
    pub slot_s: f64,
    /// The shared reference's air time for every slot's exchanges, s.
    pub air_s: f64,
    /// The station's bench time: the longer of one slot's and the reference's air time, s.
    pub station_s: f64,
    /// Units per hour of bench time.
    pub units_per_hour: f64,
}

/// The station estimate of a slotted bench running a plan estimated as `one_slot`; `None` on
/// a bench without slots.
pub fn station_estimate(one_slot: &Estimate, bench: &Bench) -> Option<StationEstimate> {
    if !bench.is_slotted() {
        return None;
    }
    let slots = bench.slots.len();
    let air_us = match bench.sim.as_ref().filter(|_| bench.is_simulated()) {
        Some(sim) => 2.0 * sim.ftm.frame_duration_us + sim.ftm.sifs_us,
        None => DEFAULT_EXCHANGE_AIR_US,
    };
    let air_s = slots as f64 * one_slot.exchanges() as f64 * air_us * 1e-6;
    let station_s = one_slot.bench_s.max(air_s);
    Some(StationEstimate {
        slots,
        slot_s: one_slot.bench_s,
        air_s,
        station_s,
        units_per_hour: units_per_hour(slots, station_s),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::runner::estimate::{Bound, Timing, TimingSource};

    fn one_slot(bench_s: f64, exchanges: u64) -> Estimate {
        Estimate {
            stages: vec![crate::runner::estimate::StageEstimate {
                name: "s".into(),
                points: 1,
                bursts: 1,
                exchanges,
                bench_s,
                bound: Bound::Estimate,
                note: None,
            }],
            bench_s,
            bound: Bound::Estimate,
            timing: Timing {
                burst_setup_ms: 5.0,
                frame_interval_us: 1000.0,
                atten_switch_ms: 2.0,
                source: TimingSource::Simulation,
            },
        }
    }

    fn station() -> Bench {
        Bench::load(std::path::Path::new(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/recipes/benches/sim-station4.toml"
        )))
        .expect("station bench")
    }

    #[test]
    fn slots_take_one_slots_time_while_the_reference_keeps_up() {
        // 1000 exchanges a slot, 104 µs each on the air (2 × 44 µs + 16 µs SIFS): four slots
        // hold the reference 0.416 s, less than a slot's 1.2 s.
        let e = station_estimate(&one_slot(1.2, 1000), &station()).expect("slotted");
        assert_eq!(e.slots, 4);
        assert!((e.air_s - 0.416).abs() < 1e-9, "{}", e.air_s);
        assert_eq!(e.station_s, 1.2);
        assert!((e.units_per_hour - 12_000.0).abs() < 1e-6);
    }

    #[test]
    fn a_busy_reference_sets_the_pace() {
        // Exchanges back to back at their air time: the reference, not the slots, decides.
        let e = station_estimate(&one_slot(0.2, 1000), &station()).expect("slotted");
        assert_eq!(e.station_s, e.air_s);
    }

    #[test]
    fn a_bench_without_slots_has_no_station_estimate() {
        let demo = Bench::built_in().expect("demo");
        assert!(station_estimate(&one_slot(1.0, 10), &demo).is_none());
    }
}
