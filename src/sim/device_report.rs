//! What the simulated DUT hands over, in the form its `[sim.dut] reports` names: the raw
//! timestamps of every exchange, or what a device's own firmware makes of them (design §6).
//!
//! The radio model (`model`) always produces the four timestamps of each exchange; this module is
//! the device's firmware on top of them. It exists apart so the physics never depends on how a
//! device chooses to report, and so the timestamps form stays exactly what the model produced.
//!
//! How the firmware works, per burst:
//!
//! - **Clock-rate correction.** The DUT's counter runs `(1 + e)` times as fast as the reference's.
//!   The device estimates `e` from the carrier frequency offset it measures on every received
//!   frame (carrier and sample clock come from one crystal, so the relative carrier offset is
//!   the relative clock offset) and averages the readings of the burst's successful frames. One
//!   reading's error follows the bound for a training-symbol estimator (Moose 1994, from
//!   memory): `σ_f = 1 / (2π·T·√(N·SNR))`, `T` = 3.2 µs, `N` the samples in one symbol at the
//!   channel's bandwidth; divided by the carrier frequency that is a few hundredths of a ppm at
//!   strong signals and tenths near sensitivity. Each exchange's RTT is then
//!   `(t4 − t1) − (t3 − t2)/(1 + ê)`, so the residual `≈ −turnaround·(ê − e)` is shared by the
//!   burst: picoseconds near sensitivity, far below a picosecond on a strong link, never zero.
//! - **Outlier handling (burst forms).** Of the successful frames' RTTs the device keeps those
//!   within three robust standard deviations of their median (1.4826·MAD, the normal-consistent
//!   scale; common practice). Late-path detections, a sample period or more late, fall outside;
//!   with a spread of zero (one or two frames, or identical values) the frames equal to the
//!   median — all of them when there are one or two — are kept.
//! - **The burst row** carries the mean RTT of the kept frames (or, for a range device, the
//!   distance `c/2·(RTT − K_app)` of that mean, negative when the link is shorter than `K_app`
//!   makes up for), `frames` = the kept count, the mean of their RSSI readings, the gain state
//!   most of them were received in (the lower index on a tie) when the device reports gain, and
//!   status `ok`; lost and failed frames are no rows. A burst with no successful frame is one
//!   row with the frames' most common status and no value.
//!
//! Draws come from the device's own random stream, one per frame whatever the frame's fate, so
//! the radio model's streams and the timestamps form are untouched by this module.

use super::counter::COUNTER_MODULUS;
use super::truth::DutReports;
use crate::data::{DeviceExchange, STATUS_OK};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};

/// Millimetres of distance per picosecond of round trip: c/2 with c = 299 792 458 m/s (SI,
/// exact), i.e. 0.149 896 229 mm/ps.
pub const MM_PER_RTT_PS: f64 = 299_792_458.0 * 1e3 * 1e-12 / 2.0;

/// Useful length of one OFDM training symbol, the span a frequency estimator compares across:
/// 3.2 µs (IEEE 802.11 OFDM, 312.5 kHz subcarrier spacing).
pub const TRAINING_SYMBOL_S: f64 = 3.2e-6;

/// Standard score beyond which the device drops a frame from its burst average.
pub const TRIM_SCORE: f64 = 3.0;

/// Scale that makes a median absolute deviation estimate the normal standard deviation.
const MAD_TO_SD: f64 = 1.4826;

/// What the device handed over for one burst.
#[derive(Debug, Clone, PartialEq)]
pub struct DeviceReport {
    /// The rows: one per exchange (timestamps, `rtt_frames`) or one per burst.
    pub rows: Vec<DeviceExchange>,
    /// Sample standard deviation of the kept frames' RTTs behind a burst average, where two or
    /// more were kept; a device prints it with the average (the row has no place for it).
    pub spread_ps: Option<f64>,
}

/// What the device knows of a burst besides its frames.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BurstConditions {
    /// True clock-rate offset of the DUT's counter against the reference's, ppm.
    pub clock_ppm: f64,
    /// One-sigma error of one frame's rate-offset reading, ppm.
    pub rate_reading_sigma_ppm: f64,
}

/// The DUT's firmware: turns the exchanges the radios produced into the rows it reports.
#[derive(Debug, Clone)]
pub struct DeviceFirmware {
    reports: DutReports,
    reports_gain: bool,
    applied_k_ps: Option<f64>,
    rng: ChaCha8Rng,
}

/// One-sigma error, in ppm, of the rate offset a device reads from one frame's carrier at
/// `snr_db` (before any processing gain) on a `bw_hz` channel centred at `center_mhz`.
pub fn rate_reading_sigma_ppm(snr_db: f64, bw_hz: f64, center_mhz: u32) -> f64 {
    let samples = bw_hz * TRAINING_SYMBOL_S;
    let snr = 10f64.powf(snr_db / 10.0);
    let sigma_hz = 1.0 / (2.0 * std::f64::consts::PI * TRAINING_SYMBOL_S * (samples * snr).sqrt());
    sigma_hz / f64::from(center_mhz)
}

/// `a − b` on a 48-bit counter, in the signed range (design §2).
fn wrapped_diff_ps(a: u64, b: u64) -> f64 {
    let m = COUNTER_MODULUS as i64;
    let d = (a as i64 - b as i64).rem_euclid(m);
    (if d >= m / 2 { d - m } else { d }) as f64
}

/// A successful frame as the firmware sees it.
struct Frame<'a> {
    x: &'a DeviceExchange,
    rtt_ps: f64,
}

impl DeviceFirmware {
    /// Firmware reporting in form `reports`, with its own random stream `rng`.
    pub fn new(
        reports: DutReports,
        reports_gain: bool,
        applied_k_ps: Option<f64>,
        rng: ChaCha8Rng,
    ) -> Self {
        DeviceFirmware {
            reports,
            reports_gain,
            applied_k_ps,
            rng,
        }
    }

    /// The form the firmware reports in.
    pub fn reports(&self) -> DutReports {
        self.reports
    }

    /// The rows the device reports for a burst whose exchanges were `exchanges`.
    pub fn report(&mut self, exchanges: Vec<DeviceExchange>, c: &BurstConditions) -> DeviceReport {
        let mut rows = if self.reports == DutReports::Timestamps {
            exchanges
        } else {
            return self.computed(&exchanges, c);
        };
        if !self.reports_gain {
            rows.iter_mut().for_each(|x| x.dut_gain = None);
        }
        DeviceReport {
            rows,
            spread_ps: None,
        }
    }

    fn computed(&mut self, exchanges: &[DeviceExchange], c: &BurstConditions) -> DeviceReport {
        // One draw per frame, whatever its fate, so a loss never shifts a later reading.
        let readings: Vec<f64> = exchanges
            .iter()
            .map(|_| StandardNormal.sample(&mut self.rng))
            .collect();
        let ok: Vec<(usize, &DeviceExchange, [u64; 4])> = exchanges
            .iter()
            .enumerate()
            .filter(|(_, x)| x.status == STATUS_OK)
            .filter_map(|(i, x)| Some((i, x, [x.t1_ps?, x.t2_ps?, x.t3_ps?, x.t4_ps?])))
            .collect();
        let error_ppm = if ok.is_empty() {
            0.0
        } else {
            ok.iter().map(|(i, _, _)| readings[*i]).sum::<f64>() / ok.len() as f64
                * c.rate_reading_sigma_ppm
        };
        let ratio = 1.0 + (c.clock_ppm + error_ppm) * 1e-6;
        let frames: Vec<Frame> = ok
            .iter()
            .map(|(_, x, [t1, t2, t3, t4])| Frame {
                x,
                rtt_ps: wrapped_diff_ps(*t4, *t1) - wrapped_diff_ps(*t3, *t2) / ratio,
            })
            .collect();
        match self.reports {
            DutReports::RttFrames => self.per_frame(exchanges, &frames),
            _ => self.averaged(exchanges, &frames),
        }
    }

    fn gain(&self, x: &DeviceExchange) -> Option<u32> {
        x.dut_gain.filter(|_| self.reports_gain)
    }

    fn per_frame(&self, exchanges: &[DeviceExchange], frames: &[Frame]) -> DeviceReport {
        let mut done = frames.iter().peekable();
        let rows = exchanges
            .iter()
            .map(|x| match done.next_if(|f| std::ptr::eq(f.x, x)) {
                Some(f) => DeviceExchange {
                    rtt_ps: Some(f.rtt_ps),
                    dut_gain: self.gain(x),
                    dut_rssi_dbm: x.dut_rssi_dbm,
                    ref_gain: x.ref_gain,
                    ..DeviceExchange::empty(STATUS_OK)
                },
                None => DeviceExchange::empty(x.status.clone()),
            })
            .collect();
        DeviceReport {
            rows,
            spread_ps: None,
        }
    }

    fn averaged(&self, exchanges: &[DeviceExchange], frames: &[Frame]) -> DeviceReport {
        let kept = kept_frames(frames);
        if kept.is_empty() {
            return DeviceReport {
                rows: vec![DeviceExchange {
                    frames: 0,
                    ..DeviceExchange::empty(most_common_status(exchanges))
                }],
                spread_ps: None,
            };
        }
        let n = kept.len() as f64;
        let rtt_ps = kept.iter().map(|f| f.rtt_ps).sum::<f64>() / n;
        let spread_ps = (kept.len() >= 2).then(|| {
            (kept
                .iter()
                .map(|f| (f.rtt_ps - rtt_ps).powi(2))
                .sum::<f64>()
                / (n - 1.0))
                .sqrt()
        });
        let rssi: Vec<f64> = kept.iter().filter_map(|f| f.x.dut_rssi_dbm).collect();
        let mut row = DeviceExchange {
            dut_rssi_dbm: (!rssi.is_empty()).then(|| rssi.iter().sum::<f64>() / rssi.len() as f64),
            dut_gain: most_common(kept.iter().filter_map(|f| self.gain(f.x))),
            frames: kept.len() as u32,
            ..DeviceExchange::empty(STATUS_OK)
        };
        match self
            .applied_k_ps
            .filter(|_| self.reports == DutReports::RangeBurst)
        {
            Some(k_ps) => {
                row.range_mm = Some(range_mm(rtt_ps, k_ps));
                row.applied_k_ps = Some(k_ps);
            }
            None => row.rtt_ps = Some(rtt_ps),
        }
        DeviceReport {
            rows: vec![row],
            spread_ps,
        }
    }
}

/// The distance a device reports for a mean round trip `rtt_ps` after removing its `applied_k_ps`.
pub fn range_mm(rtt_ps: f64, applied_k_ps: f64) -> f64 {
    (rtt_ps - applied_k_ps) * MM_PER_RTT_PS
}

fn median(sorted: &[f64]) -> f64 {
    let n = sorted.len();
    if n % 2 == 1 {
        sorted[n / 2]
    } else {
        (sorted[n / 2 - 1] + sorted[n / 2]) / 2.0
    }
}

/// The frames within [`TRIM_SCORE`] robust standard deviations of the median, in order.
fn kept_frames<'a, 'b>(frames: &'b [Frame<'a>]) -> Vec<&'b Frame<'a>> {
    if frames.len() <= 2 {
        return frames.iter().collect();
    }
    let mut rtts: Vec<f64> = frames.iter().map(|f| f.rtt_ps).collect();
    rtts.sort_by(f64::total_cmp);
    let mid = median(&rtts);
    let mut deviations: Vec<f64> = rtts.iter().map(|r| (r - mid).abs()).collect();
    deviations.sort_by(f64::total_cmp);
    let limit = TRIM_SCORE * MAD_TO_SD * median(&deviations);
    frames
        .iter()
        .filter(|f| (f.rtt_ps - mid).abs() <= limit)
        .collect()
}

/// The most frequent value, the smallest on a tie; `None` for no values.
fn most_common(values: impl Iterator<Item = u32>) -> Option<u32> {
    let mut counts = std::collections::BTreeMap::new();
    for v in values {
        *counts.entry(v).or_insert(0usize) += 1;
    }
    // max_by_key keeps the last of equals; reversed, that is the smallest value.
    counts
        .into_iter()
        .rev()
        .max_by_key(|(_, n)| *n)
        .map(|(v, _)| v)
}

/// The status most of a burst's exchanges ended with, the earliest seen on a tie; `lost` for a
/// burst of no exchanges.
fn most_common_status(exchanges: &[DeviceExchange]) -> String {
    let mut seen: Vec<(&str, usize)> = Vec::new();
    for x in exchanges {
        match seen.iter_mut().find(|(s, _)| *s == x.status) {
            Some((_, n)) => *n += 1,
            None => seen.push((&x.status, 1)),
        }
    }
    let best = seen.iter().map(|(_, n)| *n).max().unwrap_or(0);
    seen.iter()
        .find(|(_, n)| *n == best)
        .map_or(super::model::STATUS_LOST, |(s, _)| s)
        .to_string()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bench::PathFacts;
    use crate::sim::model::{BurstRequest, SimBench, STATUS_LOST};
    use crate::sim::truth::SimTruth;

    /// Design §4's example truth (defaults for everything else: 300 ps jitter, 30 ps burst
    /// offsets, 1 dB RSSI noise), late paths off unless a test turns them on.
    const TRUTH: &str = r#"
        seed = 1
        tx_power_dbm = 15.0
        [dut]
        tx_delay_ps = 1500.0
        rx_delay_ps = [900.0, 1150.0, 1400.0]
        gain_thresholds_dbm = [-30.0, -55.0]
        clock_ppm = 8.0
        jitter_ps = 300.0
        outlier_rate = 0.0
        [reference]
        delay_ps = 2800.0
    "#;

    fn truth(reports: DutReports) -> SimTruth {
        let mut t: SimTruth = toml::from_str(TRUTH).expect("test truth parses");
        t.dut.reports = reports;
        if reports == DutReports::RangeBurst {
            t.dut.applied_k_ps = Some(2600.0);
        }
        t
    }

    fn path() -> PathFacts {
        PathFacts {
            cable_delay_ps: 6100.0,
            fixed_loss_db: 8.0,
            atten_delay_ps_per_db: 0.5,
        }
    }

    const BURST: BurstRequest = BurstRequest {
        frames: 32,
        center_mhz: 5180,
        bw_mhz: 80,
    };

    /// `bursts` bursts at `atten_db`, as the device reports them.
    fn reports(truth: &SimTruth, seed: u64, atten_db: f64, bursts: u64) -> Vec<DeviceReport> {
        let mut sim = SimBench::new(truth, &path(), seed).expect("valid truth");
        sim.set_atten_db(atten_db);
        (0..bursts)
            .map(|b| {
                let out = sim.run_burst(b * 200_000_000_000, &BURST);
                sim.report(out.exchanges, &BURST)
            })
            .collect()
    }

    /// What a round trip holds besides noise: 2·tof + K_ref + K_dut(gain).
    fn true_rtt_ps(truth: &SimTruth, atten_db: f64, gain: u32) -> f64 {
        2.0 * path().one_way_delay_ps(atten_db)
            + truth.ref_k_ps(0).expect("one reference K")
            + truth.dut_k_ps(gain).expect("gain in table")
    }

    fn mean_sd(v: &[f64]) -> (f64, f64) {
        let n = v.len() as f64;
        let mean = v.iter().sum::<f64>() / n;
        let var = v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0);
        (mean, var.sqrt())
    }

    #[test]
    fn c_over_two_in_millimetres_per_picosecond() {
        // c = 299 792 458 m/s exactly (SI); c/2 = 0.149 896 229 mm per ps of round trip.
        assert!((MM_PER_RTT_PS - 0.149_896_229).abs() < 1e-15);
        assert_eq!(range_mm(10_000.0, 10_000.0), 0.0);
        assert!(range_mm(2_000.0, 2_600.0) < 0.0);
    }

    #[test]
    fn one_rate_reading_follows_the_training_symbol_bound() {
        // σ_f = 1/(2π·3.2 µs·√(64·10)) = 1965.98 Hz at 20 MHz (N = 64) and 10 dB (Moose 1994,
        // from memory); at 5180 MHz that is 0.379 53 ppm. Four times the SNR halves it.
        let sigma = rate_reading_sigma_ppm(10.0, 20e6, 5180);
        assert!((sigma - 0.379_533_75).abs() < 1e-6, "{sigma}");
        let better = rate_reading_sigma_ppm(10.0 + 10.0 * 4f64.log10(), 20e6, 5180);
        assert!((sigma / better - 2.0).abs() < 1e-9);
    }

    #[test]
    fn per_frame_rtt_is_unbiased_within_its_standard_error() {
        // Late paths off, so every frame is the true round trip plus zero-mean noise: the burst
        // offset (30 ps), the TOA noise and the device's rate residual. Bursts are independent;
        // their means' spread gives the standard error.
        let t = truth(DutReports::RttFrames);
        let want = true_rtt_ps(&t, 49.0, 1);
        let burst_errors: Vec<f64> = reports(&t, 31, 49.0, 300)
            .iter()
            .map(|r| {
                let rtts: Vec<f64> = r
                    .rows
                    .iter()
                    .filter(|x| x.status == STATUS_OK)
                    .map(|x| {
                        assert_eq!((x.frames, x.t1_ps, x.dut_gain), (1, None, Some(1)));
                        x.rtt_ps.expect("ok row carries its rtt")
                    })
                    .collect();
                assert_eq!(r.rows.len(), BURST.frames as usize, "one row per exchange");
                rtts.iter().sum::<f64>() / rtts.len() as f64 - want
            })
            .collect();
        let (bias, sd) = mean_sd(&burst_errors);
        let se = sd / (burst_errors.len() as f64).sqrt();
        assert!(
            bias.abs() <= 4.0 * se,
            "bias {bias:.2} ps, standard error {se:.2} ps"
        );
    }

    #[test]
    fn the_devices_rate_residual_is_realistic_not_zero() {
        // Timing noise off: what is left of each burst's mean RTT is the device's clock-rate
        // residual, turnaround·(ê − e) with ê the mean of the successful frames' readings, so
        // its spread is 60 µs · σ_reading/√frames. At −74 dBm (81 dB here), 80 MHz, NF 6 dB the
        // SNR is 15 dB: σ_reading ≈ 0.095 ppm, 5.7 ps per frame, 1.0 ps for 32 frames.
        let mut t = truth(DutReports::RttBurst);
        t.dut.jitter_ps = 0.0;
        t.dut.burst_offset_ps = 0.0;
        t.dut.processing_gain_db = 200.0;
        t.reference.jitter_ps = 0.0;
        t.reference.processing_gain_db = 200.0;
        let atten_db = 81.0;
        let got: Vec<f64> = reports(&t, 5, atten_db, 400)
            .iter()
            .map(|r| r.rows[0].rtt_ps.expect("a kept frame") - true_rtt_ps(&t, atten_db, 2))
            .collect();
        let bench = SimBench::new(&t, &path(), 5).expect("valid");
        let snr_db = 15.0 - 8.0 - atten_db + 174.0 - 10.0 * 80e6f64.log10() - 6.0;
        let per_frame_ps = 60e6 * rate_reading_sigma_ppm(snr_db, 80e6, 5180) * 1e-6;
        let predicted = per_frame_ps / (f64::from(BURST.frames)).sqrt();
        let (mean, sd) = mean_sd(&got);
        assert_eq!(bench.reports(), DutReports::RttBurst);
        assert!(predicted > 0.5, "{predicted}");
        // 400 bursts: the sd is known to about 4 %; integer timestamps add ≈ 0.1 ps.
        assert!((sd / predicted - 1.0).abs() < 0.2, "{sd} vs {predicted}");
        assert!(mean.abs() < 4.0 * predicted / 20.0, "{mean}");
    }

    /// The kept frames by the documented rule, applied here to the per-frame form's rows.
    fn by_the_rule(rtts: &[f64]) -> Vec<f64> {
        let mut sorted = rtts.to_vec();
        sorted.sort_by(f64::total_cmp);
        let med = median(&sorted);
        let mut dev: Vec<f64> = sorted.iter().map(|r| (r - med).abs()).collect();
        dev.sort_by(f64::total_cmp);
        let limit = 3.0 * 1.4826 * median(&dev);
        rtts.iter()
            .copied()
            .filter(|r| rtts.len() <= 2 || (r - med).abs() <= limit)
            .collect()
    }

    #[test]
    fn a_burst_row_averages_the_frames_kept_and_counts_them() {
        // The same seed draws the same radio noise and device readings in every form, so the
        // per-frame form shows the frames behind each burst average.
        let mut frames_truth = truth(DutReports::RttFrames);
        frames_truth.dut.outlier_rate = 0.08;
        let mut burst_truth = frames_truth.clone();
        burst_truth.dut.reports = DutReports::RttBurst;
        // 92 dB: near sensitivity (SNR 4 dB, half the frames lost), gain state 2; 49 dB: a
        // clean link in gain state 1.
        for (atten_db, gain) in [(49.0, 1), (92.0, 2)] {
            let per_frame = reports(&frames_truth, 8, atten_db, 40);
            let averaged = reports(&burst_truth, 8, atten_db, 40);
            let mut late_dropped = 0;
            for (f, a) in per_frame.iter().zip(&averaged) {
                let rtts: Vec<f64> = f.rows.iter().filter_map(|x| x.rtt_ps).collect();
                let kept = by_the_rule(&rtts);
                assert_eq!(
                    a.rows.len(),
                    1,
                    "one row per burst; lost frames are no rows"
                );
                let row = &a.rows[0];
                assert_eq!(row.frames as usize, kept.len());
                let mean = kept.iter().sum::<f64>() / kept.len() as f64;
                let rtt = row.rtt_ps.expect("frames were kept");
                assert!((rtt - mean).abs() < 1e-6, "{rtt} vs {mean}");
                assert_eq!(
                    (row.status.as_str(), row.t1_ps, row.dut_gain),
                    ("ok", None, Some(gain))
                );
                let (_, sd) = mean_sd(&kept);
                assert!((a.spread_ps.expect("two or more kept") - sd).abs() < 1e-6);
                // Late detections are ≥ 12.5 ns late (one sample at 80 MHz): never kept.
                let floor = rtts.iter().copied().fold(f64::INFINITY, f64::min);
                late_dropped += rtts.iter().filter(|r| **r > floor + 10_000.0).count();
                assert!(kept.iter().all(|r| *r < floor + 10_000.0));
            }
            assert!(late_dropped > 0, "late paths were drawn at {atten_db} dB");
        }
    }

    #[test]
    fn a_burst_with_no_successful_frame_is_one_row_without_a_value() {
        for reports_in in [DutReports::RttBurst, DutReports::RangeBurst] {
            let r = &reports(&truth(reports_in), 4, 140.0, 1)[0];
            assert_eq!(r.rows.len(), 1);
            let x = &r.rows[0];
            assert_eq!((x.status.as_str(), x.frames), (STATUS_LOST, 0));
            assert_eq!((x.rtt_ps, x.range_mm, x.dut_rssi_dbm), (None, None, None));
            assert_eq!(r.spread_ps, None);
        }
    }

    #[test]
    fn a_range_is_c_over_two_times_the_average_rtt_less_the_applied_k() {
        // Same seed, same kept frames: the range form's distance is the rtt form's average
        // through d = c/2·(RTT − K_app) (design §6), exactly.
        let rtt = reports(&truth(DutReports::RttBurst), 12, 49.0, 20);
        let range = reports(&truth(DutReports::RangeBurst), 12, 49.0, 20);
        for (r, d) in rtt.iter().zip(&range) {
            let (r, d) = (&r.rows[0], &d.rows[0]);
            let avg = r.rtt_ps.expect("rtt average");
            assert_eq!(d.range_mm, Some((avg - 2600.0) * MM_PER_RTT_PS));
            assert_eq!(
                (d.rtt_ps, d.applied_k_ps, d.frames),
                (None, Some(2600.0), r.frames)
            );
        }
        // A K larger than the whole round trip (≈ 17.6 ns here) gives a negative distance, kept.
        let mut t = truth(DutReports::RangeBurst);
        t.dut.applied_k_ps = Some(30_000.0);
        let short = &reports(&t, 12, 49.0, 1)[0].rows[0];
        assert!(short.range_mm.is_some_and(|d| d < -1500.0), "{short:?}");
        assert_eq!(short.status, STATUS_OK);
    }

    #[test]
    fn without_gain_reporting_no_row_has_a_gain() {
        for form in [
            DutReports::Timestamps,
            DutReports::RttFrames,
            DutReports::RttBurst,
            DutReports::RangeBurst,
        ] {
            let with = reports(&truth(form), 3, 49.0, 3);
            let mut t = truth(form);
            t.dut.reports_gain = false;
            let without = reports(&t, 3, 49.0, 3);
            for (a, b) in with.iter().zip(&without) {
                assert!(a.rows.iter().any(|x| x.dut_gain.is_some()), "{form:?}");
                assert!(b.rows.iter().all(|x| x.dut_gain.is_none()), "{form:?}");
                // Nothing else changes.
                let stripped: Vec<DeviceExchange> = a
                    .rows
                    .iter()
                    .map(|x| DeviceExchange {
                        dut_gain: None,
                        ..x.clone()
                    })
                    .collect();
                assert_eq!(stripped, b.rows, "{form:?}");
            }
        }
    }

    #[test]
    fn the_timestamps_form_is_the_radio_models_exchanges_unchanged() {
        let t = truth(DutReports::Timestamps);
        let mut sim = SimBench::new(&t, &path(), 9).expect("valid");
        let mut twin = SimBench::new(&t, &path(), 9).expect("valid");
        sim.set_atten_db(60.0);
        twin.set_atten_db(60.0);
        let out = sim.run_burst(0, &BURST);
        let twin_out = twin.run_burst(0, &BURST);
        let report = twin.report(twin_out.exchanges, &BURST);
        assert_eq!(report.rows, out.exchanges);
        assert_eq!(report.spread_ps, None);
    }

    #[test]
    fn the_most_common_gain_and_status_win_and_ties_go_to_the_lower_and_earlier() {
        assert_eq!(most_common([2, 1, 2, 1].into_iter()), Some(1));
        assert_eq!(most_common([2, 2, 1].into_iter()), Some(2));
        assert_eq!(most_common(std::iter::empty()), None);
        let rows = ["fail", "lost", "lost", "fail"].map(DeviceExchange::empty);
        assert_eq!(most_common_status(&rows), "fail");
        assert_eq!(most_common_status(&rows[1..]), "lost");
        assert_eq!(most_common_status(&[]), STATUS_LOST);
    }
}
