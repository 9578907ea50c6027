//! The round trip a row stands for, whatever form the device reported it in.
//!
//! Three forms reach the fitter (design §6):
//!
//! - **timestamps**: t1…t4 per exchange; the RTT needs the burst's clock-rate correction, so
//!   such rows wait for their burst ([`crate::fit::Fitter`] does that);
//! - **rtt**: the device corrected for the clock rate itself and reports the RTT (per frame or a
//!   burst's average): it is taken as it is;
//! - **range**: the device reports `d = c/2 · (RTT − K_app)` with its own applied K removed, so
//!   `RTT = 2d/c + K_app`; without a known `K_app` the row says nothing about K.
//!
//! Pure: no I/O.

use crate::data::Exchange;
use crate::fit::rtt::SPEED_OF_LIGHT_M_PER_S;

/// Picoseconds of round trip per millimetre of one-way range: `2 / c`, about 6.671 ps/mm.
pub const RTT_PS_PER_RANGE_MM: f64 = 2.0e9 / SPEED_OF_LIGHT_M_PER_S;

/// What a row gives the fitter to time with.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Timing {
    /// Raw counters t1…t4, to be corrected with the burst's clock-rate ratio.
    Counters([u64; 4]),
    /// A round trip already corrected by the device (reported, or derived from a range).
    Rtt(f64),
    /// A range with no applied K to add back: usable for nothing.
    RangeWithoutK,
    /// No timing at all (a lost or failed exchange).
    Missing,
}

/// The round trip behind a reported range: `2d/c + K_app`.
pub fn rtt_of_range_ps(range_mm: f64, applied_k_ps: f64) -> f64 {
    range_mm * RTT_PS_PER_RANGE_MM + applied_k_ps
}

/// What `x` gives to time with, `applied_k_ps` being the K the device removed from its
/// ranges (if known). Counters win over a reported RTT, which wins over a range, so a row that
/// carries more than one form is timed by the most direct.
pub fn timing(x: &Exchange, applied_k_ps: Option<f64>) -> Timing {
    if let (Some(t1), Some(t2), Some(t3), Some(t4)) = (x.t1_ps, x.t2_ps, x.t3_ps, x.t4_ps) {
        return Timing::Counters([t1, t2, t3, t4]);
    }
    if let Some(rtt) = x.rtt_ps {
        return Timing::Rtt(rtt);
    }
    match (x.range_mm, applied_k_ps) {
        (Some(d), Some(k)) => Timing::Rtt(rtt_of_range_ps(d, k)),
        (Some(_), None) => Timing::RangeWithoutK,
        (None, _) => Timing::Missing,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_metre_of_range_is_6671_ps_of_round_trip() {
        // c = 299 792 458 m/s exactly (SI brochure, 9th ed.): 2 m / c = 6.671 281 9 ns.
        assert!((rtt_of_range_ps(1000.0, 0.0) - 6_671.281_903_963_041).abs() < 1e-6);
    }

    #[test]
    fn the_applied_k_is_added_back_and_a_negative_range_kept() {
        // A device that removed 2400 ps too much reports a short range as negative.
        let d_mm = -30.0;
        let rtt = rtt_of_range_ps(d_mm, 2400.0);
        assert!((rtt - (2400.0 - 30.0 * RTT_PS_PER_RANGE_MM)).abs() < 1e-9);
        // Inverting d = c/2 · (RTT − K_app) gives the range back (design §6).
        let back_mm = SPEED_OF_LIGHT_M_PER_S / 2.0 * (rtt - 2400.0) * 1e-12 * 1e3;
        assert!((back_mm - d_mm).abs() < 1e-9);
    }

    #[test]
    fn counters_win_then_rtt_then_range() {
        let mut x = Exchange {
            range_mm: Some(10.0),
            ..Exchange::default()
        };
        assert_eq!(timing(&x, None), Timing::RangeWithoutK);
        assert_eq!(
            timing(&x, Some(5.0)),
            Timing::Rtt(rtt_of_range_ps(10.0, 5.0))
        );
        x.rtt_ps = Some(123.5);
        assert_eq!(timing(&x, Some(5.0)), Timing::Rtt(123.5));
        (x.t1_ps, x.t2_ps, x.t3_ps, x.t4_ps) = (Some(1), Some(2), Some(3), Some(4));
        assert_eq!(timing(&x, Some(5.0)), Timing::Counters([1, 2, 3, 4]));
        x.t4_ps = None;
        assert_eq!(timing(&x, None), Timing::Rtt(123.5));
        assert_eq!(timing(&Exchange::default(), None), Timing::Missing);
    }
}
