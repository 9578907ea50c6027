//! Round-trip time from raw FTM counters: wrap-safe differences and clock-rate correction.
//!
//! FTM timestamps are 48-bit picosecond counters (IEEE 802.11-2016 FTM frame, 6-octet TOD/TOA
//! fields), so every difference must be taken modulo 2^48. The responder's and the initiator's
//! counters run at slightly different rates (up to 40 ppm apart); over a turnaround of hundreds of
//! microseconds that error is nanoseconds, larger than the delays being calibrated, so the
//! initiator's interval is converted into the responder's timebase before it is subtracted.

/// Width of the FTM time-of-departure / time-of-arrival counters.
pub const COUNTER_BITS: u32 = 48;

/// Speed of light in vacuum, exact by definition of the metre (SI brochure, 9th ed.).
pub const SPEED_OF_LIGHT_M_PER_S: f64 = 299_792_458.0;

const COUNTER_MODULUS: u64 = 1 << COUNTER_BITS;
const COUNTER_MASK: u64 = COUNTER_MODULUS - 1;
const COUNTER_HALF: u64 = COUNTER_MODULUS >> 1;

/// `a − b` for two 48-bit counter readings, reduced modulo 2^48 into `[−2^47, 2^47)`.
///
/// Bits above the counter width are ignored, so malformed inputs still give a defined answer.
pub fn wrapped_diff_ps(a: u64, b: u64) -> i64 {
    let d = a.wrapping_sub(b) & COUNTER_MASK;
    if d >= COUNTER_HALF {
        // d < 2^48 fits in i64; shifting down by the modulus gives the negative representative.
        d as i64 - COUNTER_MODULUS as i64
    } else {
        d as i64
    }
}

/// One-way range in metres for a round-trip time in picoseconds: `c · RTT / 2`.
pub fn range_m_from_rtt_ps(rtt_ps: f64) -> f64 {
    SPEED_OF_LIGHT_M_PER_S * rtt_ps * 1e-12 / 2.0
}

/// Initiator-to-responder clock-rate ratio `f_init / f_resp` of one burst.
///
/// `pairs` holds `(t1 offset, t2 offset)` per exchange: responder departure and initiator arrival,
/// each relative to the burst's first exchange (see [`burst_offsets`]). The ratio is the
/// least-squares slope of t2 against t1 (the neighbour-rate-ratio idea of IEEE 802.1AS), refitted
/// once without the points whose residual exceeds 5 scaled MADs: a late detection in one t2 would
/// otherwise tilt the slope and move the whole burst's RTT by tens of picoseconds. `None` with
/// fewer than two points or when every t1 offset is the same.
pub fn rate_ratio(pairs: &[(i64, i64)]) -> Option<f64> {
    let (slope, intercept) = ls_line(pairs.iter().copied())?;
    let residual = |&(x, y): &(i64, i64)| (y as f64 - intercept - slope * x as f64).abs();
    let mut abs_res: Vec<f64> = pairs.iter().map(residual).collect();
    let mad = crate::fit::stats::MAD_TO_SD * crate::fit::stats::median(&mut abs_res)?;
    // One counter tick is the floor: below it residuals are rounding.
    let limit = 5.0 * mad.max(1.0);
    let kept = pairs.iter().filter(|p| residual(p) <= limit);
    if kept.clone().count() == pairs.len() || kept.clone().count() < 3 {
        return Some(slope);
    }
    ls_line(kept.copied()).map(|(s, _)| s)
}

/// Least-squares line `y = slope·x + intercept`, when it exists and has a positive slope.
fn ls_line(points: impl Iterator<Item = (i64, i64)> + Clone) -> Option<(f64, f64)> {
    let n = points.clone().count();
    if n < 2 {
        return None;
    }
    let n = n as f64;
    // Two passes: means first, then centred sums, so large offsets do not cancel catastrophically.
    let mean_x = points.clone().map(|(x, _)| x as f64).sum::<f64>() / n;
    let mean_y = points.clone().map(|(_, y)| y as f64).sum::<f64>() / n;
    let (sxy, sxx) = points.fold((0.0, 0.0), |(sxy, sxx), (x, y)| {
        let dx = x as f64 - mean_x;
        let dy = y as f64 - mean_y;
        (sxy + dx * dy, sxx + dx * dx)
    });
    let slope = sxy / sxx;
    (sxx > 0.0 && slope.is_finite() && slope > 0.0).then_some((slope, mean_y - slope * mean_x))
}

/// `(t1, t2)` counter readings of a burst as wrap-safe offsets from the burst's first exchange,
/// ready for [`rate_ratio`]. Each offset is the previous one plus the step from the previous
/// reading, so a burst may span any time as long as consecutive exchanges are less than 2^47 ps
/// (140.7 s) apart: a difference from the first reading alone would fold a burst longer than
/// that back on itself and give a wrong clock ratio without a sign.
pub fn burst_offsets(t1_t2_ps: &[(u64, u64)]) -> Vec<(i64, i64)> {
    let mut out: Vec<(i64, i64)> = Vec::with_capacity(t1_t2_ps.len());
    for (k, &(t1, t2)) in t1_t2_ps.iter().enumerate() {
        out.push(match k {
            0 => (0, 0),
            _ => {
                let (p1, p2) = t1_t2_ps[k - 1];
                let (o1, o2) = out[k - 1];
                (o1 + wrapped_diff_ps(t1, p1), o2 + wrapped_diff_ps(t2, p2))
            }
        });
    }
    out
}

/// RTT with the initiator's turnaround expressed in the responder's timebase:
/// `(t4 − t1) − (t3 − t2) / ratio`, with `ratio = f_init / f_resp` from [`rate_ratio`].
pub fn corrected_rtt_ps(responder_interval_ps: f64, initiator_interval_ps: f64, ratio: f64) -> f64 {
    responder_interval_ps - initiator_interval_ps / ratio
}

/// [`corrected_rtt_ps`] straight from the four raw counter readings, wrap-safe.
pub fn corrected_rtt_from_counters_ps(t1: u64, t2: u64, t3: u64, t4: u64, ratio: f64) -> f64 {
    corrected_rtt_ps(
        wrapped_diff_ps(t4, t1) as f64,
        wrapped_diff_ps(t3, t2) as f64,
        ratio,
    )
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    const MODULUS: i128 = 1 << COUNTER_BITS;

    #[test]
    fn counter_wraps_every_281_474_976_710_656_ps() {
        // IEEE 802.11 WG doc 11-15/910r2: TOD/TOA in ps, 0 … 2^48 − 1, wrap every 281.474976710656 s.
        assert_eq!(COUNTER_MODULUS, 281_474_976_710_656);
        assert_eq!(wrapped_diff_ps(5, COUNTER_MASK), 6);
        assert_eq!(wrapped_diff_ps(COUNTER_MASK, 5), -6);
        assert_eq!(wrapped_diff_ps(COUNTER_HALF, 0), -(COUNTER_HALF as i64));
        assert_eq!(
            wrapped_diff_ps(COUNTER_HALF - 1, 0),
            COUNTER_HALF as i64 - 1
        );
    }

    #[test]
    fn one_late_detection_does_not_tilt_the_rate_ratio() {
        // 16 exchanges 1 ms apart at +20 ppm (IEEE 802.11 allows ±20 ppm per station, tests/data/SOURCES.md §6);
        // the last t2 locks to a path 20 ns late. Plain least squares would be off by ~0.4 ppm
        // (a 26 ps error over a 60 µs turnaround); the refit removes the late point.
        let ratio_true = 1.000_02;
        let mut pairs: Vec<(i64, i64)> = (0..16)
            .map(|k| {
                let x = k * 1_000_000_000;
                (x, (x as f64 * ratio_true).round() as i64)
            })
            .collect();
        pairs[15].1 += 20_000;
        let (plain, _) = ls_line(pairs.iter().copied()).expect("line");
        assert!(
            (plain - ratio_true).abs() > 2e-7,
            "the test needs a visible tilt: {plain}"
        );
        let robust = rate_ratio(&pairs).expect("ratio");
        assert!((robust - ratio_true).abs() < 1e-12, "{robust}");
    }

    #[test]
    fn range_per_ns_of_rtt() {
        // tests/data/SOURCES.md §8 (BIPM SI brochure, c exact): 1 ns of RTT = 0.149896229 m of range.
        assert!((range_m_from_rtt_ps(1000.0) - 0.149_896_229).abs() < 1e-12);
    }

    // tests/data/SOURCES.md §7 worked check (computed, exact), in ps: r = 1.00004, t1 = 0, t2 = 10 000.4,
    // t3 = 16 010 640.4, t4 = 16 020 000.
    const WORKED_R: f64 = 1.00004;
    const WORKED_RESPONDER_PS: f64 = 16_020_000.0;
    const WORKED_INITIATOR_PS: f64 = 16_010_640.4 - 10_000.4;

    #[test]
    fn worked_example_naive_rtt_is_19_36_ns() {
        // tests/data/SOURCES.md §7: naive (t4 − t1) − (t3 − t2) = 19.36 ns.
        let naive = corrected_rtt_ps(WORKED_RESPONDER_PS, WORKED_INITIATOR_PS, 1.0);
        assert!((naive - 19_360.0).abs() < 1e-6, "{naive}");
    }

    #[test]
    fn worked_example_corrected_rtt_is_20_ns() {
        // tests/data/SOURCES.md §7: dividing by r gives 20.000 ns exactly.
        let corr = corrected_rtt_ps(WORKED_RESPONDER_PS, WORKED_INITIATOR_PS, WORKED_R);
        assert!((corr - 20_000.0).abs() < 1e-6, "{corr}");
    }

    #[test]
    fn worked_example_multiplying_gives_18_72_ns() {
        // tests/data/SOURCES.md §7: multiplying by r instead of dividing gives ≈ 18.72 ns (the pitfall).
        let wrong = WORKED_RESPONDER_PS - WORKED_INITIATOR_PS * WORKED_R;
        assert!((wrong - 18_720.0).abs() < 0.5, "{wrong}");
        let right = corrected_rtt_ps(WORKED_RESPONDER_PS, WORKED_INITIATOR_PS, WORKED_R);
        assert!((right - wrong).abs() > 1_000.0);
    }

    #[test]
    fn worked_example_ratio_from_slope() {
        // tests/data/SOURCES.md §7: the initiator runs 40 ppm fast, so 100 µs of responder time is
        // 100.004 µs of initiator time; the slope recovers r = 1.00004.
        let r = rate_ratio(&[(0, 0), (100_000_000, 100_004_000)]);
        assert!(r.is_some_and(|r| (r - WORKED_R).abs() < 1e-15), "{r:?}");
    }

    #[test]
    fn ratio_needs_two_points_with_spread() {
        assert_eq!(rate_ratio(&[]), None);
        assert_eq!(rate_ratio(&[(3, 4)]), None);
        assert_eq!(rate_ratio(&[(3, 4), (3, 9)]), None);
    }

    #[test]
    fn a_burst_longer_than_half_the_counter_keeps_its_clock_ratio() {
        // 200 exchanges a second apart span 199 s, more than 2^47 ps = 140.7 s; the DUT's clock
        // runs 20 ppm fast. Offsets from the first reading alone would fold the last 59 s back.
        let ratio = 1.0 + 20e-6;
        let readings: Vec<(u64, u64)> = (0..200u64)
            .map(|k| {
                let t1 = (k * 1_000_000_000_000 + 123) & COUNTER_MASK;
                let t2 = ((k as f64 * 1e12 * ratio) as u64 + 9_000_000) & COUNTER_MASK;
                (t1, t2)
            })
            .collect();
        let offsets = burst_offsets(&readings);
        assert_eq!(offsets[199].0, 199_000_000_000_000);
        let slope = rate_ratio(&offsets).expect("a ratio");
        assert!((slope - ratio).abs() < 1e-12, "{slope}");
    }

    #[test]
    fn offsets_cross_the_wrap() {
        let near_end = COUNTER_MASK - 10;
        let offs = burst_offsets(&[(near_end, 7), (near_end + 20, 27)]);
        assert_eq!(offs, vec![(0, 0), (20, 20)]);
        assert!(burst_offsets(&[]).is_empty());
    }

    proptest! {
        #[test]
        fn any_difference_is_recovered_across_the_wrap(
            start in 0u64..(1u64 << COUNTER_BITS),
            diff in -(1i64 << (COUNTER_BITS - 1))..(1i64 << (COUNTER_BITS - 1)),
        ) {
            let later = ((start as i128 + diff as i128).rem_euclid(MODULUS)) as u64;
            prop_assert_eq!(wrapped_diff_ps(later, start), diff);
        }

        #[test]
        fn clock_correction_recovers_true_rtt(
            ppm in -40.0f64..40.0,
            one_way_ps in 0i64..2_000_000,
            turnaround_ticks in 10_000_000i64..300_000_000,
            spacing_ps in 1_000_000_000i64..100_000_000_000,
            exchanges in 2usize..12,
            resp_before_wrap in 0u64..1_000_000_000_000,
            init_before_wrap in 0u64..1_000_000_000_000,
        ) {
            // Responder clock = true time; initiator clock runs at r = 1 + ppm·1e-6 and replies
            // a fixed number of its own ticks after arrival. Counters start just before the wrap.
            let r = 1.0 + ppm * 1e-6;
            let resp_start = COUNTER_MODULUS - 1 - resp_before_wrap;
            let init_start = COUNTER_MODULUS - 1 - init_before_wrap;
            let on_counter = |start: u64, elapsed: i64| {
                ((start as i128 + elapsed as i128).rem_euclid(MODULUS)) as u64
            };
            let true_turnaround_ps = turnaround_ticks as f64 / r;
            let mut stamps = Vec::new();
            for k in 0..exchanges as i64 {
                let depart_ps = k * spacing_ps;
                let t1 = on_counter(resp_start, depart_ps);
                let t2 = on_counter(init_start, (r * (depart_ps + one_way_ps) as f64).round() as i64);
                let t3 = on_counter(t2, turnaround_ticks);
                let back_ps = (depart_ps as f64 + 2.0 * one_way_ps as f64 + true_turnaround_ps).round();
                let t4 = on_counter(resp_start, back_ps as i64);
                stamps.push((t1, t2, t3, t4));
            }
            let pairs: Vec<(u64, u64)> = stamps.iter().map(|s| (s.0, s.1)).collect();
            let ratio = rate_ratio(&burst_offsets(&pairs));
            prop_assert!(ratio.is_some());
            let ratio = ratio.unwrap_or(1.0);
            for (t1, t2, t3, t4) in stamps {
                let rtt = corrected_rtt_from_counters_ps(t1, t2, t3, t4, ratio);
                prop_assert!((rtt - 2.0 * one_way_ps as f64).abs() < 1.0, "rtt {} true {}", rtt, 2 * one_way_ps);
            }
        }
    }
}
