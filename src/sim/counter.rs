//! A unit's timestamp counter: 48-bit picosecond counts on a clock with a frequency offset.
//!
//! FTM time-of-departure and time-of-arrival fields are 6-octet counts of picoseconds, so they
//! wrap every 2^48 ps ≈ 281.5 s (IEEE 802.11-2016 FTM frame format, tests/data/SOURCES.md §6). Bench time can
//! reach 2.9e16 ps in an overnight run, beyond the 2^53 where f64 stops holding every integer, so
//! an instant is an integer part plus a small f64 offset and this module never turns the integer
//! part into f64 except to multiply it by the (tiny) frequency offset.

/// Number of distinct counter values: the counter reads `0 ..= COUNTER_MODULUS - 1`.
pub const COUNTER_MODULUS: u64 = 1 << 48;

/// A free-running 48-bit picosecond counter.
#[derive(Debug, Clone, PartialEq)]
pub struct Counter48 {
    start_ps: u64,
    rate_offset: f64,
}

impl Counter48 {
    /// A counter that reads `start_ps` (taken modulo 2^48) at bench time zero and runs
    /// `(1 + rate_ppm·1e-6)` times as fast as the bench's timebase.
    pub fn new(start_ps: u64, rate_ppm: f64) -> Self {
        Counter48 {
            start_ps: start_ps % COUNTER_MODULUS,
            rate_offset: rate_ppm * 1e-6,
        }
    }

    /// The count at bench time `base_ps + offset_ps`, rounded to the nearest picosecond.
    ///
    /// `offset_ps` is meant for sub-burst offsets (delays, noise, turnarounds): microseconds, not
    /// hours. The product of the integer part and the frequency offset stays below 1e13 ps for
    /// any run this tool makes, where f64 still resolves a thousandth of a picosecond.
    pub fn read_ps(&self, base_ps: u64, offset_ps: f64) -> u64 {
        let scaled_offset_ps =
            base_ps as f64 * self.rate_offset + offset_ps * (1.0 + self.rate_offset);
        let count =
            i128::from(self.start_ps) + i128::from(base_ps) + scaled_offset_ps.round() as i128;
        // rem_euclid of a positive modulus is in 0..2^48, so the narrowing cannot truncate.
        count.rem_euclid(i128::from(COUNTER_MODULUS)) as u64
    }

    /// The counter's rate offset against the bench's timebase, ppm.
    pub fn rate_ppm(&self) -> f64 {
        self.rate_offset * 1e6
    }

    /// Bench-time length of `count_ps` ticks of this counter.
    pub fn ticks_to_bench_ps(&self, count_ps: f64) -> f64 {
        count_ps / (1.0 + self.rate_offset)
    }
}

/// `count_ps + delta_ps` on a 48-bit counter, wrapping past the top.
pub fn wrapping_add_ps(count_ps: u64, delta_ps: u64) -> u64 {
    // Both operands reduced first, so the sum stays below 2^49 and cannot overflow u64.
    ((count_ps % COUNTER_MODULUS) + (delta_ps % COUNTER_MODULUS)) % COUNTER_MODULUS
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn wraps_every_two_to_the_48_picoseconds() {
        // IEEE 802.11 FTM TOD/TOA: 48-bit picosecond counts, period 281.474976710656 s
        // (tests/data/SOURCES.md §6).
        assert_eq!(COUNTER_MODULUS, 281_474_976_710_656);
        let c = Counter48::new(COUNTER_MODULUS - 10, 0.0);
        assert_eq!(c.read_ps(0, 0.0), COUNTER_MODULUS - 10);
        assert_eq!(c.read_ps(10, 0.0), 0);
        assert_eq!(c.read_ps(15, 0.0), 5);
        assert_eq!(c.read_ps(COUNTER_MODULUS, 0.0), COUNTER_MODULUS - 10);
    }

    #[test]
    fn start_above_the_counter_range_is_reduced() {
        let c = Counter48::new(COUNTER_MODULUS + 7, 0.0);
        assert_eq!(c.read_ps(0, 0.0), 7);
    }

    #[test]
    fn negative_offset_before_start_wraps_backwards() {
        let c = Counter48::new(3, 0.0);
        assert_eq!(c.read_ps(0, -5.0), COUNTER_MODULUS - 2);
    }

    #[test]
    fn fast_clock_gains_ppm_of_elapsed_time() {
        // tests/data/SOURCES.md §7 worked example: initiator 40 ppm fast; 16 000 ns of bench time reads
        // 16 000.64 ns on it (t3 − t2 = 16010.6404 − 10.0004 ns).
        let c = Counter48::new(0, 40.0);
        assert_eq!(c.read_ps(0, 10_000.0), 10_000);
        assert_eq!(c.read_ps(16_010_000, 0.0), 16_010_640);
        assert_eq!(c.read_ps(0, 16_010_000.0), 16_010_640);
    }

    #[test]
    fn keeps_picoseconds_after_eight_hours() {
        // 8 h = 2.88e16 ps, past f64's exact-integer range (2^53 ≈ 9.0e15): the count must still
        // be start + T + T·25e-6 to the picosecond. Exact integer arithmetic for the expectation.
        let t_ps: u64 = 8 * 3600 * 1_000_000_000_000 + 123_457;
        let start_ps = 12_345_678_901_234;
        let c = Counter48::new(start_ps, 25.0);
        let exact =
            i128::from(start_ps) + i128::from(t_ps) + (i128::from(t_ps) * 25 + 500_000) / 1_000_000;
        let expected = exact.rem_euclid(i128::from(COUNTER_MODULUS)) as u64;
        let got = c.read_ps(t_ps, 0.0);
        assert!(
            got.abs_diff(expected) <= 1,
            "got {got}, expected {expected}"
        );
        // One more picosecond of bench time must still be visible at that range.
        assert!(c.read_ps(t_ps + 1_000, 0.0).abs_diff(expected + 1_000) <= 1);
    }

    #[test]
    fn ticks_convert_back_to_bench_time() {
        let c = Counter48::new(0, 40.0);
        assert!((c.ticks_to_bench_ps(16_000_640.0) - 16_000_000.0).abs() < 1e-6);
    }

    #[test]
    fn wrapping_add_crosses_the_top() {
        assert_eq!(wrapping_add_ps(COUNTER_MODULUS - 1, 2), 1);
        assert_eq!(wrapping_add_ps(5, COUNTER_MODULUS), 5);
    }
}
